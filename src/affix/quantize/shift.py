"""Shift choice with the overflow proof over the input box (no simulation).

For one output at scale lsb, the ideal accumulator coefficients at shift s
are g_j * 2**s (g = gain per count / lsb) and the offset b * 2**s (b =
offset / lsb), less the mean output-rounding error so that it cancels.  The
chosen s is the largest for which every rounded coefficient fits coef_bits
and |c| + sum_j |a_j| * max(|lo_j|, |hi_j|) + r fits the accumulator.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from affix.arithmetic import OUTPUT_CTYPES, accumulator_bound, output_range
from affix.quantize.rounding_error import round_nearest_ties_up, shift_error


class Infeasible(Exception):
    """This output cannot be built in this configuration at this lsb; the message says why.

    Raised for a whole configuration, ``per_output`` holds the reason of each output at fault.
    """

    def __init__(self, message: str, per_output=None):
        super().__init__(message)
        self.per_output = dict(per_output or {})


@dataclass(frozen=True, eq=False)
class Targets:
    """Plainly rounded integers at one shift, (offset, coefficients...) in z order."""

    shift: int
    plain: tuple[int, ...]  # each real target rounded to nearest (ties up) on its own
    plain_error: np.ndarray  # plain less the real targets, accumulator counts


def targets_at(g: np.ndarray, b: float, shift: int, rounding: str) -> Targets:
    scale = 2.0**shift
    values = np.concatenate(([b * scale - shift_error(shift, rounding).mean * scale], g * scale))
    rounded = round_nearest_ties_up(values)
    # rounded - values is exact: the two are within 1/2 of each other, so
    # within a factor of two wherever they are not both below 1 (Sterbenz).
    return Targets(shift, tuple(int(v) for v in rounded), rounded - values)


def fits(plain, shift, box, config, rounding) -> str | None:
    """None when the integers pass the box proof at this shift in ``config``, else the reason they do not."""
    limit = 2 ** (config.coef_bits - 1)
    c, row = plain[0], plain[1:]
    if any(not -limit <= a < limit for a in row):
        return f"a coefficient needs more than {config.coef_bits} bits"
    if accumulator_bound(row, c, shift, box, rounding) >= config.limit:
        if config.limit < 2 ** (config.acc_bits - 1):
            return f"the worst case over the input box reaches {config.limit}, the target's limit"
        return f"the worst case over the input box overflows a {config.acc_bits}-bit accumulator"
    return None


def saturation(plain, shift, box, rounding, output_ctype) -> str | None:
    """None when no point of the box drives the output beyond its type (no saturation), else why."""
    low, high = output_range(plain[1:], plain[0], shift, box, rounding)
    type_lo, type_hi = OUTPUT_CTYPES[output_ctype]
    if low < type_lo or high > type_hi:
        return f"the output spans {low}..{high} counts over the input box, beyond {output_ctype}"
    return None


def choose_shift(g, b, box, config, rounding) -> Targets:
    """The largest shift whose plainly rounded integers pass the box proof."""
    # The coefficient limit gives a safe start (no larger shift can fit it);
    # the accumulator limit is not estimated, as rounding toward zero can
    # let a larger shift fit than the real values suggest.
    start = min(config.limit.bit_length() - 1,
                _log2_room(2.0 ** (config.coef_bits - 1) - 1, np.max(np.abs(g), initial=0.0)))
    reason = "no shift fits"
    for shift in range(max(start, 0), -1, -1):
        targets = targets_at(g, b, shift, rounding)
        reason = fits(targets.plain, shift, box, config, rounding)
        if reason is None:
            return targets
    raise Infeasible(reason)


def _log2_room(room: float, need: float) -> int:
    """A shift one above the largest with need * 2**s <= room (the caller steps down from it)."""
    if need == 0:
        return 10**6
    return math.floor(math.log2(room) - math.log2(need)) + 1  # no room / need: it overflows for subnormal need
