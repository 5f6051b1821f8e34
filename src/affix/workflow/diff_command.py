"""affix diff: what a recalibration changed, between two models, two plans or two build folders."""
from __future__ import annotations


def register(sub):
    parser = sub.add_parser(
        "diff",
        help="compare two calibrations: gains, offsets, coefficients, accuracy, data drift, interface",
        description="Compare two model files, two plan files or two build folders. Per output: the change of "
        "every gain and of the offset, of every integer coefficient (in its old lsbs), of the RMS, "
        "cross-validated RMS, worst-case bound and budget margin; per input: how the calibration data's mean "
        "and span moved. Interface changes are listed apart. Exit status 0 when the firmware interface is "
        "the same, 5 when it differs.",
    )
    parser.add_argument("old", help="the earlier model file, plan file or build folder")
    parser.add_argument("new", help="the later one, of the same kind")
    parser.add_argument("--json", action="store_true", help="print the comparison as JSON")
    parser.set_defaults(run=run, reads=("old", "new"))


def run(args) -> int:
    from affix.diff import Calibration, diff, text, to_json

    result = diff(Calibration.load(args.old, parameter="old"), Calibration.load(args.new, parameter="new"))
    print(to_json(result), end="") if args.json else print(text(result))
    return 5 if result["interface_changed"] else 0
