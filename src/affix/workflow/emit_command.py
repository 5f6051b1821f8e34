"""affix emit: write C and/or MicroPython for a plan, plus the manifest verification reads."""
from __future__ import annotations

import sys
from pathlib import Path

from affix.emit import ARITHS, LANGUAGES, STYLES
from affix.errors import ToolError
from affix.plan import Plan
from affix.targets import get_target


def register(sub):
    parser = sub.add_parser(
        "emit",
        help="generate C / MicroPython source from a plan",
        description="Generate source code for a fixed-point plan and a manifest describing it. "
        "Files are NAME.h/NAME.c (C), NAME.py (MicroPython) and NAME.manifest.json.",
    )
    parser.add_argument("plan", help="plan file written by 'affix quantize'")
    add_emit_options(parser, lang_required=True)
    parser.add_argument("--name", required=True, help="estimator name: prefix of every emitted symbol and file")
    parser.add_argument("--out", required=True, help="output folder (created if missing)")
    parser.set_defaults(run=run, reads=("plan",), writes={"out": "folder"})


def add_emit_options(parser, *, lang_required: bool) -> None:
    """The options that shape the emitted code (shared with 'affix init', which writes them to the project)."""
    parser.add_argument("--lang", required=lang_required, choices=LANGUAGES + ("all",),
                        help="target language" + ("" if lang_required else " (default all)"))
    parser.add_argument("--arith", default="int", choices=ARITHS,
                        help="int: the plan's fixed-point arithmetic (default); float32: single-precision C")
    parser.add_argument("--style", default="table", choices=STYLES,
                        help="C layout: constant tables and loops (default) or straight-line code with immediates")


def run(args) -> int:
    from affix.emit.manifest import manifest_name
    from affix.emit.writer import emit  # loaded by this command only: start-up stays short

    plan = Plan.load(args.plan)
    manifest = emit(plan, lang=args.lang, arith=args.arith, style=args.style, name=args.name, out_dir=args.out)
    for note in manifest["notes"]:
        print(f"affix: note: {note}", file=sys.stderr)
    files = [f for names in manifest["files"].values() for f in names] + [manifest_name(args.name)]
    print(f"wrote {', '.join(files)} to {args.out}")
    if "c" in manifest["files"] and args.arith == "int" and get_target(plan.target).compiler is not None:
        print(figures_line(Path(args.out) / manifest_name(args.name), plan.target))
    return 0


def figures_line(emit_dir, target) -> str:
    """One line of what the estimator costs on its target, or why that could not be measured."""
    from affix.targets.figures import figures_text, target_figures

    try:
        return figures_text(target_figures(emit_dir, target))
    except ToolError as exc:
        return f"{target}: no figures ({exc.message})"
