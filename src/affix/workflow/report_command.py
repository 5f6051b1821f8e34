"""affix report: write the build report, BUILD_DIR/report.html."""
from __future__ import annotations


def register(sub):
    parser = sub.add_parser(
        "report",
        help="write the build folder's report.html: the plots to check before shipping",
        description="Read a build folder (model.json, plan.json, the manifest and whatever else the build "
        "left there) and its calibration data, and write BUILD_DIR/report.html: one self-contained page that "
        "needs no network to open. Exit status 0 written, 2 the folder lacks or garbles a file, 4 matplotlib "
        "is missing.",
    )
    parser.add_argument("build_dir", metavar="BUILD_DIR", help="folder written by 'affix build'")
    parser.set_defaults(run=run, reads=("build_dir",), writes={"build_dir": "folder"})


def run(args) -> int:
    from affix.report import write_report  # loaded by this command only: start-up stays short

    print(f"wrote {write_report(args.build_dir)}")
    return 0
