"""The output lsb when the user gives none.

Rule: the finest power of two (so the output is a plain Qm.n number) at which
the output's whole range over the input box fits the output type without
saturation and its coefficients fit at some shift >= 0.  A finer lsb only
adds integer range, never error, so the finest that fits is the most
accurate the configuration allows.
"""
from __future__ import annotations

import math

import numpy as np

from affix.arithmetic import OUTPUT_CTYPES, box_bounds
from affix.quantize.design import design_output
from affix.quantize.shift import Infeasible

_TRIES = 8  # the first candidate is a lower bound; quantization can push a few steps coarser


def finest_lsb(gain, offset, config, box) -> float:
    """A lower bound for the rule's lsb, as a power of two; 1 for an output that is constant zero."""
    gain = np.asarray(gain, dtype=float)
    lo, hi = box_bounds(box, float)
    x_low = offset + float(np.minimum(gain * lo, gain * hi).sum())
    x_high = offset + float(np.maximum(gain * lo, gain * hi).sum())
    type_lo, type_hi = OUTPUT_CTYPES[config.output_ctype]
    reach = np.maximum(np.abs(lo), np.abs(hi))
    needs = [
        x_high / type_hi,
        x_low / type_lo,
        np.max(np.abs(gain), initial=0.0) / (2.0 ** (config.coef_bits - 1) - 1),  # at shift 0
        (abs(offset) + float(np.abs(gain) @ reach)) / (config.limit - 1.0),
    ]
    need = max(needs)
    if not need > 0:
        return 1.0
    mantissa, exponent = math.frexp(need)
    return math.ldexp(1.0, exponent - 1 if mantissa == 0.5 else exponent)


def design_at_finest_lsb(gain, offset, config, box, moments, rounding, search=True):
    lsb = finest_lsb(gain, offset, config, box)
    for _ in range(_TRIES):
        try:
            return design_output(gain, offset, lsb, config, box, moments, rounding, search)
        except Infeasible as exc:
            reason = exc
            lsb *= 2
    raise Infeasible(f"{reason} even at the coarsest lsb tried ({lsb / 2:g})")
