"""The cheapest configuration that meets the budget.

Configurations run cheapest first in the order coefficient width (8 < 16 <
32), then accumulator width (32 < 64), then output type (int16_t <
int32_t); widths the user fixed are not searched.  Without a budget the
cheapest feasible configuration wins.  A default budget that nothing meets
gives the configuration closest to it; a user's budget that nothing meets is
an error (exit 3) naming the best figure achievable per output.
"""
from __future__ import annotations

from dataclasses import dataclass
from itertools import product

from affix.arithmetic import ACC_BITS, COEF_BITS, OUTPUT_CTYPES
from affix.errors import BudgetError, UsageError
from affix.quantize.analysis import Accuracy, Problem, accuracy
from affix.quantize.box import reach
from affix.quantize.budget import WORST_CASE, Budget
from affix.quantize.design import Configuration, OutputDesign, design_output
from affix.quantize.lsb import design_at_finest_lsb
from affix.quantize.shift import Infeasible



@dataclass(frozen=True)
class Choice:
    config: Configuration
    designs: tuple[OutputDesign, ...]
    accuracy: Accuracy


def configurations(coef_bits=None, acc_bits=None, output_ctype=None) -> list[Configuration]:
    grid = product(
        COEF_BITS if coef_bits is None else (coef_bits,),
        ACC_BITS if acc_bits is None else (acc_bits,),
        tuple(OUTPUT_CTYPES) if output_ctype is None else (output_ctype,),
    )
    return sorted((Configuration(*c) for c in grid), key=lambda c: c.cost)


def design_configuration(problem: Problem, config: Configuration) -> tuple[OutputDesign, ...]:
    """Every output designed in this configuration; Infeasible names the output at fault."""
    too_wide = [name for name, r in zip(problem.inputs, reach(problem.box)) if r >= 2.0 ** (config.acc_bits - 1)]
    if too_wide:
        raise Infeasible(f"input '{too_wide[0]}' does not fit a {config.acc_bits}-bit accumulator")
    designs = []
    for name, gain, offset, lsb in zip(problem.outputs, problem.gain, problem.offset, problem.lsb):
        arguments = (config, problem.box, problem.moments, problem.rounding, problem.search)
        try:
            if lsb is None:
                designs.append(design_at_finest_lsb(gain, float(offset), *arguments))
            else:
                designs.append(design_output(gain, float(offset), lsb, *arguments))
        except Infeasible as exc:
            at = "" if lsb is None else f" at lsb {lsb:g}"
            raise Infeasible(f"output '{name}'{at}: {exc}") from None
    return tuple(designs)


def choose(problem: Problem, configs, budget: Budget | None) -> Choice:
    feasible, reason = [], None
    for config in configs:
        try:
            designs = design_configuration(problem, config)
        except Infeasible as exc:
            reason = exc  # the last is the most capable configuration's reason
            continue
        choice = Choice(config, designs, accuracy(problem, designs))
        if budget is None or budget.met(choice.accuracy):
            return choice
        feasible.append(choice)
    if not feasible:
        raise UsageError(f"no configuration of the allowed widths works: {reason}")
    if budget.default:
        return min(feasible, key=lambda c: budget.shortfall(c.accuracy))
    raise BudgetError(_best_achievable(problem, feasible, budget))


def _best_achievable(problem, feasible, budget) -> str:
    what = "worst-case deviation" if budget.kind == WORST_CASE else "total RMS"
    parts = []
    for i, (name, limit) in enumerate(zip(problem.outputs, budget.limits)):
        if limit is not None:
            best = min(feasible, key=lambda c: budget.figures(c.accuracy)[i])
            figure = budget.figures(best.accuracy)[i]
            parts.append(
                f"{name} {figure:.6g} (limit {limit:.6g}; coef {best.config.coef_bits}, "
                f"acc {best.config.acc_bits}, {best.config.output_ctype})"
            )
    return f"no configuration meets the {what} budget; best achievable: " + ", ".join(parts)
