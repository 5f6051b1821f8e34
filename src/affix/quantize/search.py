"""The cheapest configuration on the target that meets the budget.

Configurations run cheapest first by the target's measured cost of one
evaluation at this shape (affix.targets.costs); ties (costs closer than the
model's own fit to its measurements on that target) and unmeasured targets
in the order coefficient width (8 < 16 < 32), then accumulator width (32 <
64), then output type (int16_t < int32_t); widths the user fixed, or the
target rules out, are not searched.  Without a budget the cheapest feasible
configuration wins.  When a cheaper feasible configuration missed the
budget, the choice records which outputs missed there and by how much.  A
default budget that nothing meets gives the configuration closest to it; a
user's budget that nothing meets is an error (exit 3) naming the best figure
achievable per output.
"""
from __future__ import annotations

from dataclasses import dataclass, replace
from itertools import product

from affix.arithmetic import COEF_BITS, OUTPUT_CTYPES
from affix.errors import BudgetError, NoConfigurationError, UsageError
from affix.quantize.analysis import Accuracy, Problem, accuracy
from affix.quantize.box import reach
from affix.quantize.budget import WORST_CASE, Budget
from affix.quantize.design import Configuration, OutputDesign, design_output
from affix.quantize.lsb import design_at_finest_lsb
from affix.quantize.shift import Infeasible
from affix.targets import DEFAULT_TARGET, get_target
from affix.targets.costs import cost_resolution, evaluation_cost

@dataclass(frozen=True)
class Choice:
    config: Configuration
    designs: tuple[OutputDesign, ...]
    accuracy: Accuracy
    # The costliest of the cheaper feasible configurations, all of which missed the budget, when there were any.
    passed_over: "Choice | None" = None


def configurations(coef_bits=None, acc_bits=None, output_ctype=None, *, target=DEFAULT_TARGET,
                   n_inputs=1, n_outputs=1) -> list[Configuration]:
    """The configurations to try on ``target``, cheapest first (see the module's docstring)."""
    target = get_target(target)
    allowed_acc = target.accumulator_widths
    if acc_bits is not None and acc_bits not in allowed_acc:
        raise UsageError(f"target {target.name} takes a {' or '.join(map(str, allowed_acc))}-bit accumulator, "
                         f"not {acc_bits}", "acc_bits")
    grid = product(
        COEF_BITS if coef_bits is None else (coef_bits,),
        allowed_acc if acc_bits is None else (acc_bits,),
        tuple(OUTPUT_CTYPES) if output_ctype is None else (output_ctype,),
    )
    configs = [Configuration(c, a, o, acc_limit=target.accumulator_limit(a)) for c, a, o in grid]

    def cost(config):
        predicted = evaluation_cost(target.name, config.coef_bits, config.acc_bits, n_inputs, n_outputs)
        return float("inf") if predicted is None else predicted

    # Costs the model cannot tell apart (closer than its own fit to the measurements) are ties:
    # each step takes the narrowest of those within that margin of the cheapest left.
    resolution = cost_resolution(target.name)
    left = sorted(configs, key=lambda c: (cost(c), c.widths))
    ordered = []
    while left:
        cheapest = cost(left[0])  # a fit may predict a count below zero at the smallest shapes
        ties = [c for c in left if cost(c) == cheapest or cost(c) - cheapest <= abs(cheapest) * resolution]
        ordered.append(min(ties, key=lambda c: c.widths))
        left.remove(ordered[-1])
    return ordered


def design_configuration(problem: Problem, config: Configuration) -> tuple[OutputDesign, ...]:
    """Every output designed in this configuration; Infeasible names each output at fault."""
    too_wide = [name for name, r in zip(problem.inputs, reach(problem.box)) if r >= config.limit]
    if too_wide:
        reason = (f"input '{too_wide[0]}' does not fit a {config.acc_bits}-bit accumulator"
                  + ("" if config.limit == 2 ** (config.acc_bits - 1) else " within the target's limit"))
        raise Infeasible(reason, {name: reason for name in problem.outputs})
    designs, failures = [], {}
    for name, gain, offset, lsb in zip(problem.outputs, problem.gain, problem.offset, problem.lsb):
        arguments = (config, problem.box, problem.moments, problem.rounding, problem.search)
        try:
            if lsb is None:
                designs.append(design_at_finest_lsb(gain, float(offset), *arguments))
            else:
                designs.append(design_output(gain, float(offset), lsb, *arguments))
        except Infeasible as exc:
            at = "" if lsb is None else f" at lsb {lsb:g}"
            failures[name] = f"{exc}{at}"
    if failures:
        first = next(iter(failures))
        raise Infeasible(f"output '{first}': {failures[first]}", failures)
    return tuple(designs)


def choose(problem: Problem, configs, budget: Budget | None, *, best_effort: bool = False) -> Choice:
    """The cheapest configuration meeting ``budget``; where none does, the closest to it when the budget is
    the default one or ``best_effort`` says so, else BudgetError."""
    feasible, reason = [], None
    for config in configs:
        try:
            designs = design_configuration(problem, config)
        except Infeasible as exc:
            reason = exc  # the last is the most capable configuration's reason
            continue
        choice = Choice(config, designs, accuracy(problem, designs))
        if budget is None or budget.met(choice.accuracy):
            return replace(choice, passed_over=feasible[-1] if feasible else None)
        feasible.append(choice)
    if not feasible:
        raise NoConfigurationError(f"no configuration of the allowed widths works: {reason}", reason.per_output)
    if budget.default or best_effort:
        return min(feasible, key=lambda c: budget.shortfall(c.accuracy))
    raise _best_achievable(problem, feasible, budget)


def _best_achievable(problem, feasible, budget) -> BudgetError:
    what = "worst-case deviation" if budget.kind == WORST_CASE else "total RMS"
    parts, missed = [], {}
    for i, (name, limit) in enumerate(zip(problem.outputs, budget.limits)):
        if limit is not None:
            best = min(feasible, key=lambda c: budget.figures(c.accuracy)[i])
            figure = budget.figures(best.accuracy)[i]
            parts.append(
                f"{name} {figure:.6g} (limit {limit:.6g}; coef {best.config.coef_bits}, "
                f"acc {best.config.acc_bits}, {best.config.output_ctype})"
            )
            if figure > limit:
                missed[name] = f"{what} {figure:.4g} above its budget {limit:.4g}"
    return BudgetError(f"no configuration meets the {what} budget; best achievable: " + ", ".join(parts), missed)


def missed_outputs(problem: Problem, choice: Choice, budget: Budget) -> list[dict]:
    """The outputs that missed ``budget`` in ``choice``: figure, limit and how far over, in percent."""
    missed = []
    for name, limit, figure in zip(problem.outputs, budget.limits, budget.figures(choice.accuracy)):
        if limit is not None and figure > limit:
            excess = 100.0 * (figure / limit - 1) if limit > 0 else float("inf")
            missed.append({"output": name, "figure": figure, "limit": limit, "excess_percent": excess})
    return missed
