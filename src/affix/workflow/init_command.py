"""affix init: write a starter project file from the data and the options the other commands take."""
from __future__ import annotations

import argparse
import os
import re
from pathlib import Path

from affix.errors import UsageError
from affix.fit.engines import check_named
from affix.interface import COEFFICIENT_SOURCES
from affix.intake import check_columns
from affix.intake.sources import data_files
from affix.workflow.emit_command import add_emit_options
from affix.workflow.fit_command import add_fit_options, column_names
from affix.workflow.quantize_command import add_plan_options, named_values, per_name_values, plan_options


def register(sub):
    parser = sub.add_parser(
        "init",
        help="write a starter project file (affix.toml) for 'affix build'",
        description="Write affix.toml holding the data, the columns and every option given, with each "
        "input's smallest and largest value in the data beside its range. An existing file is never replaced.",
    )
    parser.add_argument("data", nargs="+", metavar="DATA",
                        help="calibration data file(s) or quoted glob patterns, as for 'affix fit'")
    parser.add_argument("--inputs", required=True, help="comma-separated input columns (the raw readings y)")
    parser.add_argument("--outputs", required=True, help="comma-separated output columns (the quantities x)")
    parser.add_argument("--name", help="estimator name (default: the first data file's name)")
    parser.add_argument("--project", default="affix.toml", metavar="PATH",
                        help="the project file to write (default ./affix.toml)")
    add_fit_options(parser)
    add_plan_options(parser)
    add_emit_options(parser, lang_required=False)
    parser.add_argument("--unit", action="append", default=[], metavar="NAME=TEXT",
                        help="unit of an input's or output's values, e.g. Fx=N (repeatable): it reaches the "
                        "emitted comments, the interface and the report's axes")
    parser.add_argument("--vectors", type=int, default=10**6, metavar="N",
                        help="random vectors the build verifies (default 1000000)")
    fleet = parser.add_argument_group("a fleet: one firmware, many units, each with its own calibration record")
    fleet.add_argument("--unit-column", metavar="NAME",
                       help="the column naming each row's unit (text or integer ids)")
    fleet.add_argument("--coefficients", choices=COEFFICIENT_SOURCES,
                       help="how the firmware gets the coefficients (default: record with --unit-column, "
                       "else compiled)")
    fleet.add_argument("--tolerance", action="append", metavar="[NAME=]V,...",
                       help="a unit's largest cross-validated RMS error per output, physical units")
    fleet.add_argument("--skip-bad-units", action="store_true",
                       help="go on without the units the data cannot fit, naming them")
    fleet.add_argument("--flash-address", type=_address, metavar="ADDRESS",
                       help="where each record goes in flash (0x0800F800): its Intel HEX copy's address")
    parser.set_defaults(run=run, reads=("data",), writes={"project": "file"})


def _address(text: str) -> int:
    try:
        value = int(text, 0)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not an address: {text!r} (decimal, or hex as 0x0800F800)") from None
    if not 0 <= value < 2**32:
        raise argparse.ArgumentTypeError(f"not a 32-bit address: {text}")
    return value


def run(args) -> int:
    from affix.emit import LANGUAGES
    from affix.emit.names import check_names
    from affix.project.starter import input_extremes, starter_text, write_starter

    project = Path(args.project)
    if project.exists():
        raise UsageError(f"'{project}' exists; affix init never overwrites a project file", "project")
    check_named(args.engine, args.scheduler)
    inputs, outputs = column_names(args.inputs, "--inputs"), column_names(args.outputs, "--outputs")
    found, written = _data(args.data, project.parent)
    for path in found:  # every column the build reads, so a misspelt output or unit column is caught here
        check_columns(path, inputs + outputs + ([args.unit_column] if args.unit_column is not None else []))
    name = args.name or _default_name(found[0])
    check_names(name, inputs, outputs)
    units = named_values(args.unit, "units", lambda text, _parameter: text)
    if None in units:
        raise UsageError("give each unit as NAME=TEXT", "units")
    text = starter_text(
        project,
        name=name,
        files_written=written,
        inputs=inputs,
        outputs=outputs,
        extremes=input_extremes(found, inputs, drop_invalid=args.drop_invalid),
        options=plan_options(args),
        units=units,
        ridge=args.ridge,
        folds=args.folds,
        engine=args.engine,
        scheduler=args.scheduler,
        drop_invalid=args.drop_invalid,
        languages=list(LANGUAGES) if args.lang in (None, "all") else [args.lang],
        arith=args.arith,
        style=args.style,
        vectors=args.vectors,
        unit_column=args.unit_column,
        coefficients=args.coefficients,
        tolerance=per_name_values(args.tolerance, "tolerance"),
        skip_bad_units=args.skip_bad_units,
        flash_address=args.flash_address,
    )
    write_starter(project, text)
    print(f"wrote {project}: review the ranges and budgets, then run 'affix build{_argument(project)}'")
    return 0


def _data(arguments, folder: Path):
    """The files to read now, and the entries to write: each argument relative to the project's folder."""
    written = [Path(os.path.relpath(argument, folder)).as_posix() for argument in arguments]
    return data_files(written, folder), written


def _default_name(path: Path) -> str:
    """The data file's name as an identifier: other characters become '_'."""
    name = re.sub(r"\W", "_", path.stem, flags=re.ASCII).strip("_")
    return name if name[:1].isalpha() else f"estimator_{name}".rstrip("_")


def _argument(project: Path) -> str:
    return "" if project == Path("affix.toml") else f" {project}"
