"""plan_fixed_point: a fitted model and an input box in, a proven fixed-point Plan out."""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from affix.arithmetic import INPUT_CTYPES, OUTPUT_CTYPES, ROUNDINGS, ctype_holds, input_ctype as default_input_ctype
from affix.errors import UsageError, parameter
from affix.plan import Plan
from affix.quantize.analysis import Problem
from affix.quantize.box import reach, resolve_per_name, resolve_ranges
from affix.quantize.budget import DEFAULT_GROWTH_PERCENT, Budget
from affix.quantize.measure import measure_box, measure_calibration
from affix.quantize.moments import augmented_moments, uniform_box_moments
from affix.arithmetic import ACC_BITS, COEF_BITS
from affix.quantize.search import choose, configurations, missed_outputs
from affix.targets import DEFAULT_TARGET, get_target

BOX_POINTS = 100_000
_LARGEST_OUTPUT = 1e150  # its square, and sums of many, stay finite in float64


def plan_fixed_point(
    model,
    input_ranges,
    *,
    coef_bits=None,
    acc_bits=None,
    output_ctype=None,
    output_lsb=None,
    input_lsb=None,
    budget=None,
    budget_rms=None,
    rounding="nearest",
    target=DEFAULT_TARGET,
    input_ctype=None,
    calibration=None,
    search=True,
    default_budget=None,
    best_effort=False,
    box_points=BOX_POINTS,
    seed=0,
) -> Plan:
    """Quantize ``model`` for integer inputs in ``input_ranges``.

    input_ranges: one (lo, hi) for every input, a pair per input, or {name: (lo, hi)}
        (key None for the rest); counts, as the microcontroller reads them.
    coef_bits, acc_bits, output_ctype: fix a width; None searches it.
    output_lsb, input_lsb, budget: one value for all, or {name: value}.
        input_lsb marks the model's inputs as physical: physical = lsb * count.
    budget: worst-case deviation limit per output (physical units).
    budget_rms: allowed growth of the total RMS over the float estimator, in percent.
        With neither, 1 % growth is aimed at, best effort, where ``default_budget`` says so;
        its default, None, does so when some width is left to search.
    calibration: optional iterable of float arrays (rows, n_inputs) in the model's
        input units, to measure the integer reference on.
    target: the core or runtime (affix.targets) whose measured costs order the search
        and whose limits the plan keeps.
    input_ctype: the C type of every input (default: the smallest holding the box,
        unsigned where no input can be negative).
    search: False rounds every coefficient on its own (no error feedback).
    best_effort: where no configuration meets the budget, plan the closest one (its
        ``budget["met"]`` is false) instead of raising BudgetError: a fleet unit's verdict.
    """
    model.validate()  # its file schema: a model built in Python meets what a model file must
    _check_choice(coef_bits, COEF_BITS, "coef_bits")
    _check_choice(acc_bits, ACC_BITS, "acc_bits")
    _check_choice(output_ctype, tuple(OUTPUT_CTYPES), "output_ctype")
    _check_choice(rounding, ROUNDINGS, "rounding")
    box = resolve_ranges(model.inputs, input_ranges)
    core = get_target(target)
    in_ctype = _input_ctype(input_ctype, box)
    if core.accumulator_cap is not None and any(max(abs(lo), abs(hi)) >= core.accumulator_cap for lo, hi in box):
        raise UsageError(f"the box reaches beyond {core.accumulator_cap - 1}, the limit of every value on "
                         f"target {core.name}", parameter="input_ranges")
    lsb = resolve_per_name(model.outputs, output_lsb, "output_lsb", kind="lsb")
    input_lsb = resolve_per_name(model.inputs, input_lsb, "input_lsb", kind="input lsb")
    scale = np.array([1.0 if q is None else q for q in input_lsb])
    physical = np.array([q is not None for q in input_lsb])
    gain = model.gain * scale  # per count
    output_reach = np.abs(gain) @ reach(box) + np.abs(model.offset)
    largest = float(np.max(output_reach))
    if not largest < _LARGEST_OUTPUT:
        raise UsageError(f"the model's outputs reach {largest:.3g} over this box; the error analysis "
                         f"squares them in double precision, so they must stay below {_LARGEST_OUTPUT:g}", "input_ranges")
    _check_output_lsb(model.outputs, output_reach, lsb)
    _check_input_lsb(model, input_lsb, gain)
    moments, source = augmented_moments(model, box, scale)
    float_rms = model.cv_rms if model.cv_rms is not None else model.rms
    problem = Problem(
        inputs=model.inputs,
        outputs=model.outputs,
        box=box,
        gain=gain,
        offset=model.offset,
        lsb=lsb,
        moments=moments,
        moments_source=source,
        rounding=rounding,
        search=search,
        float_rms=float_rms,
        input_rms=np.sqrt((gain[:, physical] ** 2).sum(axis=1) / 12),
        input_worst=np.abs(gain[:, physical]).sum(axis=1) / 2,
    )
    if default_budget is None:
        default_budget = None in (coef_bits, acc_bits, output_ctype)
    chosen_budget = _budget(model, budget, budget_rms, float_rms, default=default_budget)
    configs = configurations(coef_bits, acc_bits, output_ctype, target=core, n_inputs=len(box),
                             n_outputs=model.n_outputs)
    choice = choose(problem, configs, chosen_budget, best_effort=best_effort)
    plan = _plan(model, problem, choice, chosen_budget, input_lsb, core.name, in_ctype)
    return _with_measurement(plan, problem, choice, model, scale, calibration, box_points, seed)


def _input_ctype(chosen, box) -> str:
    if chosen is None:
        return default_input_ctype(box)
    _check_choice(chosen, tuple(INPUT_CTYPES), "input_ctype")
    if not ctype_holds(chosen, box):
        raise UsageError(f"{chosen} does not hold the input box ({parameter('input_ranges')})",
                         parameter="input_ctype")
    return chosen


def _check_choice(value, allowed, option):
    if value is not None and value not in allowed:
        raise UsageError(f"must be one of {', '.join(map(str, allowed))}, not {value!r}", option)


def _check_output_lsb(outputs, output_reach, lsb):
    """An lsb so fine that the output's reach over the box is more counts than
    the widest output type holds can only fail; refused here, before the
    design divides by it (a subnormal lsb would overflow there)."""
    widest, (_, top) = max(OUTPUT_CTYPES.items(), key=lambda item: item[1][1])  # int32_t
    for name, span, step in zip(outputs, output_reach, lsb):
        if step is not None and float(span) > top * step:
            raise UsageError(
                f"lsb of '{name}' ({step:g}) is too fine: the output reaches {float(span):.6g} over the box, "
                f"which in counts of this lsb is beyond {widest}, the widest output type",
                "output_lsb",
            )


def _check_input_lsb(model, input_lsb, gain_per_count):
    """An input lsb must leave every gain per count a normal double (one that
    underflows would silently drop the input), and the model's calibration
    inputs, in counts, numbers an input type can hold: far beyond, they are no
    counts an MCU reads, and their moments overflow double precision."""
    scaled = np.array([step is not None for step in input_lsb])
    vanishing = scaled & ((model.gain != 0) & ~(np.abs(gain_per_count) >= np.finfo(float).tiny)).any(axis=0)
    for j in np.flatnonzero(vanishing):
        raise UsageError(
            f"input lsb of '{model.inputs[j]}' ({input_lsb[j]:g}) is too fine: its gains per count "
            "underflow double precision",
            "input_lsb",
        )
    if model.input_mean is None or model.input_covariance is None:
        return
    widest, (_, top) = max(INPUT_CTYPES.items(), key=lambda item: item[1][1])  # uint32_t
    spread = np.sqrt(np.clip(np.diag(model.input_covariance), 0.0, None))
    for name, mean, sd, step in zip(model.inputs, model.input_mean, spread, input_lsb):
        rms = float(np.hypot(mean, sd))  # of the calibration inputs, physical units; hypot cannot overflow
        if step is not None and rms > top * step:
            raise UsageError(
                f"input lsb of '{name}' ({step:g}) makes the model's calibration inputs (RMS {rms:.6g}) "
                f"more than {top} counts, beyond {widest}, the widest input type",
                "input_lsb",
            )


def _budget(model, budget, budget_rms, float_rms, *, default):
    if budget is not None and budget_rms is not None:
        raise UsageError("give either a worst-case budget or an RMS-growth budget, not both", "budget")
    if budget is not None:
        return Budget.worst_case(resolve_per_name(model.outputs, budget, "budget", kind="budget"))
    if budget_rms is not None:
        if not (isinstance(budget_rms, (int, float)) and math.isfinite(budget_rms) and budget_rms >= 0):
            raise UsageError(f"must be a percentage >= 0, not {budget_rms!r}", "budget_rms")
        if float_rms is None:
            raise UsageError(f"the model carries no RMS of its own to grow from; use {parameter('budget')}", "budget_rms")
        return Budget.rms_growth(float(budget_rms), float_rms)
    if default and float_rms is not None:
        return Budget.rms_growth(DEFAULT_GROWTH_PERCENT, float_rms, default=True)
    return None


def _plan(model, problem, choice, budget, input_lsb, target, in_ctype) -> Plan:
    designs, figures, config = choice.designs, choice.accuracy, choice.config
    return Plan(
        inputs=model.inputs,
        outputs=model.outputs,
        input_ranges=problem.box,
        coefficients=tuple(d.coefficients for d in designs),
        offsets=tuple(d.offset for d in designs),
        shifts=tuple(d.shift for d in designs),
        output_lsb=tuple(d.lsb for d in designs),
        output_ctype=config.output_ctype,
        coef_bits=config.coef_bits,
        acc_bits=config.acc_bits,
        rounding=problem.rounding,
        gain=tuple(tuple(float(v) for v in row) for row in problem.gain),
        offset=tuple(float(v) for v in problem.offset),
        model_sha256=model.sha256,
        input_ctype=in_ctype,
        target=target,
        input_lsb=None if all(q is None for q in input_lsb) else input_lsb,
        float_rms=None if problem.float_rms is None else tuple(float(v) for v in problem.float_rms),
        predicted_rms_deviation=figures.deviation,
        predicted_total_rms=figures.total,
        worst_case_deviation=figures.worst_case,
        deviation_parts={
            "coefficients": list(figures.coefficients),
            "coefficients_plain_rounding": list(figures.plain_coefficients),
            "output_rounding": list(figures.output_rounding),
            "input_quantization": list(figures.input_quantization),
        },
        accumulator_bound=tuple(d.accumulator_bound for d in designs),
        accumulator_headroom_bits=tuple(
            float(math.log2(config.limit) - math.log2(d.accumulator_bound)) if d.accumulator_bound
            else math.log2(config.limit)
            for d in designs
        ),
        budget=None if budget is None else _budget_record(problem, choice, budget),
        moments_source=problem.moments_source,
        coefficient_method="error-feedback" if problem.search else "plain",
    )


def _budget_record(problem, choice, budget) -> dict:
    record = budget.to_dict(choice.accuracy)
    cheaper = choice.passed_over
    if cheaper is not None:  # a wider configuration was forced: say by which outputs
        record["passed_over"] = {
            "coef_bits": cheaper.config.coef_bits,
            "acc_bits": cheaper.config.acc_bits,
            "output_ctype": cheaper.config.output_ctype,
            "missed": missed_outputs(problem, cheaper, budget),
        }
    return record


def _with_measurement(plan, problem, choice, model, scale, calibration, box_points, seed) -> Plan:
    estimator = plan.integer_estimator()
    lsb = np.array(plan.output_lsb)
    measured = measure_box(estimator, problem.gain, problem.offset, lsb, problem.box, points=box_points, seed=seed)
    uniform = uniform_box_moments(problem.box)
    measured["random"]["predicted_rms_deviation"] = [
        math.hypot(d.coefficient_rms(uniform), d.rounding_rms) for d in choice.designs
    ]
    if calibration is not None:
        measured["calibration"] = measure_calibration(estimator, model, scale, lsb, problem.box, calibration)
    return replace(plan, measured=measured)
