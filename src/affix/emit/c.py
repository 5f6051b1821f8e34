"""The C99 target: NAME.h and NAME.c, integer (table or unrolled) or float32."""
from __future__ import annotations

import numpy as np

from affix.arithmetic import ctype_bits
from affix.emit.context import build_context, dual_mac_applies, split_applies
from affix.emit.templates import render
from affix.errors import UsageError
from affix.float32_arithmetic import FLOAT32_MAX, magnitude_bound
from affix.interface import describe
from affix.targets import get_target


def render_c(plan, name: str, *, arith: str = "int", style: str = "table", interface=None) -> dict[str, str]:
    """``{filename: text}`` of the C files for ``plan`` emitted as ``name``;
    ``interface`` defaults to that of the C files alone."""
    if arith == "float32":
        _check_float32_range(plan)
    interface = interface or describe(plan, name, languages=("c",), arith=arith)
    context = build_context(plan, name, interface, arith=arith, style=style)
    return {
        f"{name}.h": render("c/header.h.jinja", **context),
        f"{name}.c": render("c/source.c.jinja", **context),
    }


def notes(plan, *, arith: str, style: str) -> list[str]:
    """Plain-text lines for the emit report and the manifest."""
    target = get_target(plan.target)
    narrow_inputs = ctype_bits(plan.input_ctype) < 32
    if (arith == "int" and style == "unrolled" and target.widening_mac and target.compiler != "gcc"
            and plan.acc_bits == 64 and narrow_inputs and not dual_mac_applies(plan, target)
            and not split_applies(plan, target)):
        return [f"c: on {target.name}, GCC 12 turns a 32-bit immediate times an input of type {plan.input_ctype} into a "
                "64 x 64-bit multiply; the table style keeps one SMLAL per term"]
    return []


def _check_float32_range(plan) -> None:
    """Refuse a model whose sums could overflow float32 over the box (inf would break the exact check)."""
    worst = magnitude_bound(plan.gain, plan.offset, plan.input_ranges)
    if not np.all(worst < FLOAT32_MAX / 2):  # margin for the rounding of each partial sum
        raise UsageError("the model's outputs over the input box exceed the float32 range", "arith")
