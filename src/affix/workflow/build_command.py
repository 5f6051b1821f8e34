"""affix build: the project file in, a verified build folder out (fit, quantize, emit, verify, diff)."""
from __future__ import annotations

import sys


def register(sub):
    parser = sub.add_parser(
        "build",
        help="run fit, quantize, emit and verify for a project file, into one build folder",
        description="Build the project: fit the calibration data, plan the fixed-point code within the pinned "
        "interface, emit and verify it, and compare with the previous build. The previous build folder is "
        "replaced only when every step passed. Exit status 5: the pinned firmware interface would change.",
    )
    parser.add_argument("project", nargs="?", default="affix.toml",
                        help="the project file, or its folder (default ./affix.toml)")
    parser.add_argument("--out", metavar="DIR", help="the build folder (default: the project's build.out, build/)")
    parser.add_argument("--repin", action="store_true",
                        help="accept a change of the pinned interface and pin the new one")
    parser.add_argument("--force", action="store_true",
                        help="replace the previous build even where its files were edited by hand")
    parser.add_argument("--skip-bad-units", action="store_true",
                        help="a fleet: go on without the units the data cannot fit, naming them "
                        "(as data.skip_bad_units = true)")
    parser.add_argument("--quiet", action="store_true",
                        help="no step lines and no progress bar: only warnings, errors and the closing line")
    parser.set_defaults(run=run, reads=("project",))


def run(args) -> int:
    from dataclasses import replace

    from affix.project import load_project
    from affix.project.build import build_project
    from affix.workflow.progress import bar_for

    project = load_project(args.project)
    if args.skip_bad_units:
        project = replace(project, skip_bad_units=True)
    result = build_project(
        project, out=args.out, repin=args.repin, force=args.force,
        progress=(lambda line: None) if args.quiet else print,
        warn=lambda line: print(f"affix: warning: {line}", file=sys.stderr),
        bar=bar_for(args.quiet),
    )
    for change in result.interface_changes:
        print(f"  interface change: {change}")
    pinned = {"pinned": "pinned in", "kept": "as pinned in", "repinned": "REPINNED in"}[result.pin]
    print(f"built {project.name} in {result.out}: {len(result.steps)} steps passed; interface "
          f"{result.interface.id} {pinned} {project.interface_path}")
    return 0

