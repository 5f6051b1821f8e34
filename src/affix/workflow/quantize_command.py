"""affix quantize: a model file and an input box in, a proven fixed-point plan out.

A thin layer over :func:`affix.quantize.plan_fixed_point`: it parses the
options into plain values, prints the accuracy table (or a JSON summary)
and writes the plan only after every check has passed.
"""
from __future__ import annotations

import argparse
import json
import sys

from affix.arithmetic import ACC_BITS, COEF_BITS, INPUT_CTYPES, OUTPUT_CTYPES, ROUNDING_RULES, ROUNDINGS
from affix.coverage import coverage, summary_line
from affix.errors import UsageError
from affix.model import Model
from affix.targets import DEFAULT_TARGET, TARGETS
from affix.targets.costs import cost_unit, evaluation_cost


EPILOG = """\
widths left open are searched cheapest first on the target: by the instructions one
evaluation takes there (measured on the core, see README), ties by coefficients
8 < 16 < 32 bits, accumulator 32 < 64, output int16_t < int32_t; the first that meets
the budget wins. With no budget given, 1 % RMS growth is aimed at (best effort, never
an error). targets: {targets}.
default output lsb: the finest power of two at which the output's whole range over
the box fits the output type and the coefficients fit at a shift >= 0.
all inputs share one C type: by default the smallest of uint8_t..uint32_t holding the
box when no range is negative, else of int8_t..int32_t (-1:65535 takes int32_t).
exit status: 0 plan written, 2 bad input, 3 no configuration meets the budget.
"""


def register(sub):
    parser = sub.add_parser(
        "quantize",
        help="choose integer widths, prove no overflow over the input box and predict the error",
        description="Turn a fitted model into a fixed-point plan: integer coefficients, offsets and shifts "
        "that provably cannot overflow for any input in the box, with the deviation they add.",
        epilog=EPILOG.format(targets=", ".join(TARGETS)),
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("model", help="model file written by 'affix fit'")
    add_plan_options(parser)
    parser.add_argument("--data", action="append", metavar="CALIB_FILE",
                        help="calibration rows to measure the integer reference on (repeatable)")
    parser.add_argument("--drop-invalid", action="store_true",
                        help="leave out calibration rows holding NaN, infinite or empty values")
    parser.add_argument("--out", required=True, metavar="PLAN_JSON", help="where to write the plan")
    parser.add_argument("--json", action="store_true", help="print a JSON summary instead of the table")
    parser.set_defaults(run=run, reads=("model", "data"), writes={"out": "file"})


def add_plan_options(parser) -> None:
    """The options that choose the fixed-point plan (shared with 'affix init', which writes them to the project)."""
    parser.add_argument("--range", action="append", default=[], metavar="[NAME=]LO:HI",
                        help="input range in integer counts; without NAME for every input (repeatable)")
    parser.add_argument("--coef-bits", type=int, choices=COEF_BITS, help="coefficient width (default: searched)")
    parser.add_argument("--acc-bits", type=int, choices=ACC_BITS, help="accumulator width (default: searched)")
    parser.add_argument("--output-type", choices=tuple(OUTPUT_CTYPES), help="output C type (default: searched)")
    parser.add_argument("--input-type", choices=tuple(INPUT_CTYPES),
                        help="C type of the inputs (default: the smallest holding the box, unsigned if it can)")
    parser.add_argument("--target", choices=tuple(TARGETS), default=DEFAULT_TARGET,
                        help=f"core or runtime to plan for (default {DEFAULT_TARGET})")
    parser.add_argument("--lsb", action="append", default=[], metavar="[NAME=]V",
                        help="physical size of one output count (default: finest power of two that fits)")
    parser.add_argument("--input-lsb", action="append", default=[], metavar="[NAME=]V",
                        help="the model's input is physical: one count is V of its units")
    parser.add_argument("--budget", action="append", default=[], metavar="[NAME=]V[,...]",
                        help="largest worst-case deviation allowed per output, physical units")
    parser.add_argument("--budget-rms", metavar="P%",
                        help="largest growth of the total RMS over the float estimator, in percent")
    parser.add_argument("--rounding", choices=ROUNDINGS, default="nearest",
                        help="output rounding, " + "; ".join(f"{k}: {v}" for k, v in ROUNDING_RULES.items())
                        + " (default nearest)")
    parser.add_argument("--plain-coefficients", action="store_true",
                        help="round each coefficient on its own instead of the error-feedback search")


def plan_options(args) -> dict:
    """The plan options as keyword arguments of plan_fixed_point; the input ranges as {name or None: (lo, hi)}."""
    return {
        "input_ranges": named_values(args.range, "range", _range_value),
        "coef_bits": args.coef_bits,
        "acc_bits": args.acc_bits,
        "output_ctype": args.output_type,
        "output_lsb": named_values(args.lsb, "lsb", _number) or None,
        "input_lsb": named_values(args.input_lsb, "input_lsb", _number) or None,
        "budget": named_values([p for b in args.budget for p in b.split(",")], "budget", _number) or None,
        "budget_rms": None if args.budget_rms is None else _percent(args.budget_rms),
        "rounding": args.rounding,
        "target": args.target,
        "input_ctype": args.input_type,
        "search": not args.plain_coefficients,
    }


def run(args) -> int:
    from affix.quantize import plan_fixed_point  # loaded by this command only: start-up stays short

    model = Model.load(args.model)
    options = plan_options(args)
    if not options["input_ranges"]:
        raise UsageError("give the input range in counts, e.g. --range 0:4095", "range")
    calibration = None
    if args.data:
        from affix.intake import read_files

        calibration = read_files(args.data, list(model.inputs), drop_invalid=args.drop_invalid)
    plan = plan_fixed_point(model, **options, calibration=calibration)
    covered = coverage(model, plan.input_ranges, plan.input_lsb)
    report = json.dumps(summary(plan, covered), indent=2) if args.json else table(plan, covered)
    plan.save(args.out)
    for column in covered or []:
        if column.extrapolated:
            print(f"affix: warning: {column.warning()}", file=sys.stderr)
    print(report)
    return 0


def per_name_values(arguments, parameter) -> dict | None:
    """The numbers of a repeated [NAME=]V[,...] option (as --budget takes them), {name: value}, or None."""
    return named_values([p for item in arguments or [] for p in item.split(",")], parameter, _number) or None


def named_values(values, parameter, parse) -> dict:
    """{name: value} from [NAME=]VALUE items; the key None holds a value for all.  A name given twice is
    refused: which of two values the user meant is not ours to guess."""
    result = {}
    for item in values:
        name, sep, text = item.rpartition("=")
        key = name.strip() if sep else None
        if sep and not key:
            raise UsageError(f"'{item}' names no input or output before '='", parameter)
        if key in result:
            what = "the value without a NAME= (for every name)" if key is None else f"'{key}'"
            raise UsageError(f"{what} is given twice", parameter)
        result[key] = parse(text.strip(), parameter)
    return result


def _range_value(text, parameter):
    lo, sep, hi = text.partition(":")
    try:
        if sep:
            return int(lo), int(hi)
    except ValueError:
        pass
    raise UsageError(f"'{text}' is not LO:HI in integer counts", parameter)


def _number(text, parameter):
    try:
        return float(text)
    except ValueError:
        raise UsageError(f"'{text}' is not a number", parameter) from None


def _percent(text):
    return _number(text.strip().removesuffix("%"), "budget_rms")


def summary(plan, covered=None) -> dict:
    """The plan's decisions and figures, without the coefficient tables, and the data's coverage of the box."""
    keys = (
        "model_sha256 target input_ctype outputs coef_bits acc_bits output_ctype rounding shifts output_lsb float_rms "
        "predicted_rms_deviation predicted_total_rms worst_case_deviation deviation_parts "
        "accumulator_bound accumulator_headroom_bits budget measured moments_source coefficient_method"
    ).split()
    data = plan.to_dict()
    return {"plan_sha256": plan.sha256, "predicted_cost": _predicted_cost(plan),
            **{key: data[key] for key in keys}}


def _predicted_cost(plan) -> dict | None:
    """The target's measured cost model at this shape and these widths, or None where it has none."""
    cost = evaluation_cost(plan.target, plan.coef_bits, plan.acc_bits, len(plan.inputs), len(plan.outputs))
    return None if cost is None else {"per_evaluation": round(cost), "unit": cost_unit(plan.target)}


def table(plan, covered=None) -> str:
    """The accuracy table: one line per output, then the measurements."""
    budget = plan.budget
    calibration = plan.measured.get("calibration")
    random, corners = plan.measured["random"], plan.measured.get("corners")
    cost = _predicted_cost(plan)
    lines = [
        f"fixed point: {plan.coef_bits}-bit coefficients, {plan.acc_bits}-bit accumulator, "
        f"{plan.output_ctype} outputs, rounding {plan.rounding}, coefficients {plan.coefficient_method}",
        f"target {plan.target}: {plan.input_ctype} inputs"
        + ("" if cost is None else f", about {cost['per_evaluation']} {cost['unit']} per evaluation (measured model)"),
        *_passed_over_lines(budget),
        f"dev = integer minus float estimator, physical units; moments: {_moments(plan)}",
        _budget_line(budget),
        "",
    ]
    rows = [("output", "lsb", "shift", "own RMS", "total RMS", "dev RMS", "dev RMS", "worst |dev|",
             "budget", "margin", "headroom"),
            ("", "", "", "", "predicted", "predicted", "measured", "bound", "", "", "acc bits")]
    for i, name in enumerate(plan.outputs):
        margin = budget["margins"][i] if budget else None
        rows.append((
            name,
            _g(plan.output_lsb[i]),
            str(plan.shifts[i]),
            _g(plan.float_rms[i] if plan.float_rms else None),
            _g(plan.predicted_total_rms[i] if plan.predicted_total_rms else None),
            _g(plan.predicted_rms_deviation[i]),
            _g(calibration["rms_deviation"][i] if calibration and calibration["rows"] else None),
            _g(plan.worst_case_deviation[i]),
            _g(budget["limits"][i] if budget else None),
            "-" if margin is None else f"{margin:+.3g}",
            f"{plan.accumulator_headroom_bits[i]:.1f}",
        ))
    lines += _columns(rows)
    lines += ["", "measured on:"]
    if calibration:
        lines.append(f"  calibration data: {calibration['rows']} rows in the box "
                     f"({calibration['rows_outside_box']} outside, left out)")
    else:
        lines.append("  calibration data: none given (--data)")
    lines.append(f"  {random['rows']} random box points: dev RMS predicted / measured, largest |dev|:")
    for i, name in enumerate(plan.outputs):
        corner = f", corners {_g(corners['max_deviation'][i])}" if corners else ""
        lines.append(f"    {name}: {_g(random['predicted_rms_deviation'][i])} / {_g(random['rms_deviation'][i])}, "
                     f"{_g(random['max_deviation'][i])}{corner} (bound {_g(plan.worst_case_deviation[i])})")
    if covered:
        lines.append(summary_line(covered))
    return "\n".join(lines)


def _passed_over_lines(budget) -> list[str]:
    """Why a cheaper configuration was not taken: the outputs that missed there, and by how much."""
    cheaper = (budget or {}).get("passed_over")
    if not cheaper:
        return []
    missed = ", ".join(f"{m['output']} by {m['excess_percent']:.2g} % ({m['figure']:.4g} > {m['limit']:.4g})"
                       for m in cheaper["missed"])
    return [f"wider than the cheaper {cheaper['coef_bits']}-bit coefficients, {cheaper['acc_bits']}-bit accumulator, "
            f"{cheaper['output_ctype']} outputs, where the budget was missed by {missed}"]


def _moments(plan) -> str:
    if plan.moments_source == "uniform-box":
        return "the model has none, so uniform over the box"
    return "the model's calibration inputs"


def _budget_line(budget) -> str:
    if not budget:
        return "budget: none (cheapest configuration that fits)"
    what = ("worst |dev| bound at most the budget" if budget["kind"] == "worst-case"
            else f"total RMS at most {budget['growth_percent']:g} % above the estimator's own (budget column)")
    verdict = "met" if budget["met"] else "NOT met (closest configuration shown)"
    return f"budget: {what}{' (default)' if budget['default'] else ''}: {verdict}"


def _g(value) -> str:
    return "-" if value is None else f"{value:.4g}"


def _columns(rows) -> list[str]:
    widths = [max(len(row[k]) for row in rows) for k in range(len(rows[0]))]
    return ["  ".join(cell.ljust(w) if k == 0 else cell.rjust(w) for k, (cell, w) in enumerate(zip(row, widths)))
            for row in rows]
