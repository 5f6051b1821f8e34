"""Rounding: nearest with ties toward +infinity for real targets, and the error statistics of the output shift.

With s > 0 the shift maps an accumulator to out = (acc + r) >> s; its error
e = out - acc / 2**s takes 2**s equally spaced values one count apart in
total span.  Where the accumulator's low bits are evenly spread (the
uniform-noise model of Widrow & Kollar, Quantization Noise, 2008) each value
is equally likely, so e has variance (N**2 - 1) / (12 N**2) with N = 2**s
(-> 1/12) for both roundings; only its mean differs, and the quantizer
cancels that mean in the offset.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def round_nearest_ties_up(x) -> np.ndarray:
    """Nearest integer, ties toward +infinity, exactly (floor(x + 0.5) can round up 0.49999999999999994)."""
    x = np.asarray(x, dtype=float)
    whole = np.floor(x)
    return whole + (x - whole >= 0.5)  # x - floor(x) is exact in binary floating point


@dataclass(frozen=True)
class ShiftError:
    """Statistics of e = out - acc / 2**s in output counts."""

    mean: float
    variance: float
    low: float  # least and greatest value e can take
    high: float


def shift_error(shift: int, rounding: str) -> ShiftError:
    if shift == 0:
        return ShiftError(0.0, 0.0, 0.0, 0.0)  # out = acc: nothing is rounded
    n = 2.0**shift
    variance = (1.0 - 1.0 / n**2) / 12
    if rounding == "nearest":  # e in {-(N/2 - 1)/N, ..., 1/2}
        return ShiftError(0.5 / n, variance, -(n / 2 - 1) / n, 0.5)
    # floor: e in {-(N - 1)/N, ..., 0}
    return ShiftError(-(n - 1) / (2 * n), variance, -(n - 1) / n, 0.0)
