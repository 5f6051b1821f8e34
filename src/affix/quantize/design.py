"""One output built in one configuration at one lsb: shift, integers and their error figures."""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from fractions import Fraction

import numpy as np

from affix.arithmetic import OUTPUT_CTYPES, accumulator_bound, box_bounds
from affix.quantize.coefficients import mean_square, search_steps
from affix.quantize.rounding_error import shift_error
from affix.quantize.shift import Infeasible, choose_shift, fits, saturation


@dataclass(frozen=True)
class Configuration:
    coef_bits: int
    acc_bits: int
    output_ctype: str
    # Every |acc + r| over the box stays below this: 2**(acc_bits - 1), or less
    # where the target caps it (MicroPython's small ints).
    acc_limit: int | None = None

    @property
    def limit(self) -> int:
        return 2 ** (self.acc_bits - 1) if self.acc_limit is None else self.acc_limit

    @property
    def widths(self) -> tuple[int, int, int]:
        """Narrower first: coefficient width, then accumulator width, then output width.

        The order of the search where the target's cost model has no figure
        (and between configurations it costs the same): the coefficient width
        sets the table's flash size and the width of every multiply; a 64-bit
        accumulator costs a few instructions per product on a 32-bit core; the
        output type only its storage.
        """
        return self.coef_bits, self.acc_bits, 16 if self.output_ctype == "int16_t" else 32

    def describe(self) -> str:
        return f"{self.coef_bits}-bit coefficients, {self.acc_bits}-bit accumulator, {self.output_ctype} outputs"


@dataclass(frozen=True, eq=False)
class OutputDesign:
    lsb: float
    shift: int
    offset: int  # c, accumulator scale
    coefficients: tuple[int, ...]
    accumulator_bound: int
    error: np.ndarray  # integers less real targets, (offset, coefficients...), accumulator counts
    plain_error: np.ndarray  # the same for plain rounding
    rounding_rms: float  # physical units
    worst_case: float = 0.0  # over the box, integer against float on the same counts

    def coefficient_rms(self, moments, *, plain=False) -> float:
        """RMS of the coefficient-quantization deviation, physical units, under these moments."""
        error = self.plain_error if plain else self.error
        return self.lsb / 2.0**self.shift * math.sqrt(max(mean_square(error, moments), 0.0))


def design_output(gain, offset, lsb, config, box, moments, rounding, search=True) -> OutputDesign:
    """Raise Infeasible when no shift passes the proof or the box would saturate the output."""
    g, b = np.asarray(gain, dtype=float) / lsb, offset / lsb
    _check_range(g, b, lsb, box, config.output_ctype)
    targets = choose_shift(g, b, box, config, rounding)
    shift, plain = targets.shift, targets.plain
    reason = saturation(plain, shift, box, rounding, config.output_ctype)
    if reason:
        raise Infeasible(reason)
    chosen, error = plain, targets.plain_error
    if search:
        limit = 2 ** (config.coef_bits - 1)
        low = np.array([-np.inf] + [-limit - a for a in plain[1:]], dtype=float)
        high = np.array([np.inf] + [limit - 1 - a for a in plain[1:]], dtype=float)
        steps = search_steps(error, moments, low, high)
        candidate = tuple(q + int(k) for q, k in zip(plain, steps))
        if (
            mean_square(error + steps, moments) < mean_square(error, moments)
            and fits(candidate, shift, box, config, rounding) is None
            and saturation(candidate, shift, box, rounding, config.output_ctype) is None
        ):
            chosen, error = candidate, error + steps
    design = OutputDesign(
        lsb=lsb,
        shift=shift,
        offset=chosen[0],
        coefficients=tuple(chosen[1:]),
        accumulator_bound=accumulator_bound(chosen[1:], chosen[0], shift, box, rounding),
        error=error,
        plain_error=targets.plain_error,
        rounding_rms=lsb * math.sqrt(shift_error(shift, rounding).variance),
    )
    return replace(design, worst_case=worst_case(design, gain, offset, box, rounding))


def _check_range(g, b, lsb, box, output_ctype):
    """The float output's range over the box, in counts, must fit the type (the exact check follows)."""
    lo, hi = box_bounds(box, float)
    low = b + float(np.minimum(g * lo, g * hi).sum())
    high = b + float(np.maximum(g * lo, g * hi).sum())
    type_lo, type_hi = OUTPUT_CTYPES[output_ctype]
    if not (type_lo - 0.5 <= low and high <= type_hi + 0.5):  # written so that NaN fails too
        raise Infeasible(
            f"over the input box it spans {low * lsb:.6g}..{high * lsb:.6g}, "
            f"{low:.6g}..{high:.6g} counts of {lsb:g}, beyond {output_ctype}"
        )


def worst_case(design, gain, offset, box, rounding) -> float:
    """Exact bound on |out * lsb - (gain . y + offset)| over the box, rounded up to a float.

    The deviation is linear in y plus the shift's error e in [low, high]
    counts, so it lies in [L + lsb*low, U + lsb*high] with L and U the
    extremes of the linear part, attained at corners.  Computed in exact
    rationals from the float gain and offset the plan carries.
    """
    lsb = Fraction(design.lsb)
    scale = lsb / 2**design.shift
    constant = scale * design.offset - Fraction(float(offset))
    slopes = [scale * a - Fraction(float(gj)) for a, gj in zip(design.coefficients, gain)]
    low = constant + sum(min(d * lo, d * hi) for d, (lo, hi) in zip(slopes, box))
    high = constant + sum(max(d * lo, d * hi) for d, (lo, hi) in zip(slopes, box))
    error = shift_error(design.shift, rounding)
    bound = max(abs(low + lsb * Fraction(error.low)), abs(high + lsb * Fraction(error.high)))
    return math.nextafter(float(bound), math.inf)
