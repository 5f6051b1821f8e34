"""The starter project file of ``affix init``: what the user gave, the rest as commented defaults.

Each input's range comes from the user or, failing that, from the data's own
extent; either way the calibration data's smallest and largest value stand
beside it, so the first thing the file shows is how much of the declared box
the data cover.
"""
from __future__ import annotations

import math
from pathlib import Path

from affix import files
from affix.emit.templates import render
from affix.emit.names import check_units
from affix.errors import FileFormatError, UsageError, parameter
from affix.project.file import parse_project
from affix.quantize.box import resolve_per_name

TEMPLATE = "project/affix.toml.jinja"


def input_extremes(paths, inputs, *, drop_invalid: bool):
    """(smallest, largest) value of each input column over the files: one pass, constant memory."""
    from affix.intake import read_files
    from affix.statistics import accumulate, merge_all

    moments = merge_all(accumulate(read_files(paths, inputs, drop_invalid=drop_invalid), len(inputs), 1), len(inputs))
    if moments.count == 0:
        raise UsageError("the data hold no usable row", "data")
    return moments.low, moments.high


def starter_text(project_path, *, name, files_written, inputs, outputs, extremes, options, ridge, folds,
                 drop_invalid, languages, arith, style, vectors, units=None, unit_column=None,
                 coefficients=None, tolerance=None, skip_bad_units=False, flash_address=None, engine="local",
                 scheduler=None) -> str:
    """The project file's text; ``options`` are plan_fixed_point's keyword arguments as the CLI gave them,
    ``units`` {input or output name: unit text}; the rest, a fleet's keys and the fit's engine (see
    affix.project.keys).

    The text is read back through the project loader before it is returned,
    so a starter is never a file 'affix build' would refuse.
    """
    units = check_units(units or {}, list(inputs) + list(outputs))
    ranges = options["input_ranges"]
    unknown = [key for key in ranges if key is not None and key not in inputs]
    if unknown:
        raise UsageError(f"unknown input '{unknown[0]}' (the inputs are {', '.join(inputs)})", "input_ranges")
    input_lsb = resolve_per_name(inputs, options["input_lsb"], "input_lsb", kind="input lsb")
    rows = []
    for name_j, lsb, low, high in zip(inputs, input_lsb, *extremes):
        scale = 1.0 if lsb is None else lsb
        seen = (float(low) / scale, float(high) / scale)
        given = ranges.get(name_j, ranges.get(None))
        declared = list(given) if given else [math.floor(seen[0]), math.ceil(seen[1])]
        rows.append({"name": name_j, "range": declared, "seen": seen, "from_data": not given, "lsb": lsb,
                     "unit": units.get(name_j)})
    budgets = resolve_per_name(outputs, options["budget"], "budget", kind="budget")
    if unit_column is not None and options["budget_rms"] is None and all(b is None for b in budgets):
        raise UsageError("a fleet needs a budget, each unit's pass/fail criterion: give each output one, or an "
                         f"RMS growth with {parameter('budget_rms')}", "budget")
    lsbs = resolve_per_name(outputs, options["output_lsb"], "output_lsb", kind="lsb")
    tolerances = resolve_per_name(outputs, tolerance, "tolerance", kind="tolerance")
    text = render(
        TEMPLATE,
        name=name,
        files=files_written,
        drop_invalid=drop_invalid,
        ridge=ridge,
        folds=folds,
        engine=engine,
        scheduler=scheduler,
        inputs=rows,
        outputs=[{"name": n, "budget": b, "lsb": q, "unit": units.get(n), "tolerance": t}
                 for n, b, q, t in zip(outputs, budgets, lsbs, tolerances)],
        coef_bits=options["coef_bits"],
        acc_bits=options["acc_bits"],
        output_type=options["output_ctype"],
        input_type=options["input_ctype"],
        target=options["target"],
        rounding=options["rounding"],
        coefficient_search=options["search"],
        budget_rms_percent=options["budget_rms"],
        languages=list(languages),
        style=style,
        arith=arith,
        vectors=vectors,
        unit_column=unit_column,
        coefficients=coefficients,
        skip_bad_units=skip_bad_units,
        flash_address=None if flash_address is None else f"0x{flash_address:08X}",
    )
    try:
        parse_project(text, project_path)
    except FileFormatError as exc:  # the file is not written yet: its line numbers would point at nothing
        raise UsageError(f"the options make a project file 'affix build' would refuse: {exc.reason}") from None
    return text


def write_starter(path, text: str) -> None:
    """Write the starter; an existing file is never replaced."""
    path = Path(path)
    try:
        files.write_new_text(path, text)
    except FileExistsError:
        raise UsageError(f"'{path}' exists; affix init never overwrites a project file (edit it, or give "
                         "another project file)", "project") from None
