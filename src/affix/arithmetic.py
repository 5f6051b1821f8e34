"""The integer arithmetic every stage agrees on, and its exact reference evaluator.

For each output i, with inputs y_j first clamped to their declared box
[lo_j, hi_j]:

    acc_i = c_i + sum_j a_ij * y_j                 (signed, acc_bits wide)
    out_i = clamp(floor((acc_i + r_i) / 2**s_i))   to the output type's limits

where r_i = 2**(s_i - 1) for rounding "nearest" (round to nearest, ties
toward +infinity; r_i = 0 when s_i = 0) and r_i = 0 for "floor".  The
physical value is out_i * output_lsb_i.

The quantizer proves |acc_i + r_i| stays inside the accumulator over the whole
box; the evaluator here is exact whatever the numbers, so it is the reference
that generated code is checked against bit for bit.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

ROUNDINGS = ("nearest", "floor")
# What each rounding does, in the words --help, the emitted header and the manifest use.
ROUNDING_RULES = {
    "nearest": "round to nearest, ties toward +infinity",
    "floor": "round toward -infinity",
}
# Plan and manifest files written before the rename still say "half-up"
# (which decimal libraries use for ties away from zero; here it meant ties up).
ROUNDING_ALIASES = {"half-up": "nearest"}
COEF_BITS = (8, 16, 32)  # the widths a plan may use, cheapest first
ACC_BITS = (32, 64)
OUTPUT_CTYPES = {
    "int16_t": (-(2**15), 2**15 - 1),
    "int32_t": (-(2**31), 2**31 - 1),
}
INPUT_CTYPES = {  # smallest first
    "int8_t": (-(2**7), 2**7 - 1),
    "uint8_t": (0, 2**8 - 1),
    "int16_t": (-(2**15), 2**15 - 1),
    "uint16_t": (0, 2**16 - 1),
    "int32_t": (-(2**31), 2**31 - 1),
    "uint32_t": (0, 2**32 - 1),
}
_FLOAT64_EXACT = 2**53  # every integer below this is exact in a double


def rounding_name(value) -> str:
    """The current name of a rounding read from a file, old spellings included."""
    return ROUNDING_ALIASES.get(value, value)


def rounding_constant(shift: int, rounding: str) -> int:
    if rounding == "nearest":
        return 1 << (shift - 1) if shift > 0 else 0
    if rounding == "floor":
        return 0
    raise ValueError(f"unknown rounding '{rounding}' (choose from {', '.join(ROUNDINGS)})")


def input_ctype(input_ranges) -> str | None:
    """The default C type of the inputs: the smallest of INPUT_CTYPES holding the whole box,
    unsigned where no input can be negative (what ADCs and their DMA buffers deliver), or None.

    The emitted code passes all inputs in one type, so a box mixing signed and
    unsigned ranges takes the smallest signed type holding both (-1..65535 -> int32_t).
    """
    unsigned = all(lo >= 0 for lo, _ in input_ranges)
    for ctype, (lo, _) in INPUT_CTYPES.items():
        if (lo == 0) == unsigned and ctype_holds(ctype, input_ranges):
            return ctype
    return None


def ctype_bits(ctype: str) -> int:
    """The width of an exact-width integer type: 16 for int16_t or uint16_t."""
    return int("".join(ch for ch in ctype if ch.isdigit()))


def ctype_holds(ctype: str, input_ranges) -> bool:
    """Whether every range of the box lies within the input type ``ctype``."""
    lo, hi = INPUT_CTYPES[ctype]
    return all(lo <= r_lo and r_hi <= hi for r_lo, r_hi in input_ranges)


def input_reach(input_ranges) -> list[int]:
    """max(|lo_j|, |hi_j|) per input: the largest magnitude a count can have in the box."""
    return [max(abs(lo), abs(hi)) for lo, hi in input_ranges]


def box_bounds(input_ranges, dtype=np.int64) -> tuple[np.ndarray, np.ndarray]:
    """The box as two arrays: lows and highs per input."""
    ends = np.array(input_ranges, dtype=dtype).reshape(-1, 2)
    return ends[:, 0], ends[:, 1]


def accumulator_bound(row, offset: int, shift: int, input_ranges, rounding: str) -> int:
    """|c| + sum_j |a_j| * max(|lo_j|, |hi_j|) + r: no |acc + r| over the box exceeds it."""
    reach = input_reach(input_ranges)
    return abs(offset) + sum(abs(a) * r for a, r in zip(row, reach)) + rounding_constant(shift, rounding)


def output_range(row, offset: int, shift: int, input_ranges, rounding: str) -> tuple[int, int]:
    """Exact least and greatest (acc + r) >> s over the box, before the output clamp.

    acc is linear in y, so its extremes sit at corners: each term at the end
    of its range that makes it least (greatest); the shift is monotonic.
    """
    r = rounding_constant(shift, rounding)
    low = offset + r + sum(min(a * lo, a * hi) for a, (lo, hi) in zip(row, input_ranges))
    high = offset + r + sum(max(a * lo, a * hi) for a, (lo, hi) in zip(row, input_ranges))
    return low >> shift, high >> shift


@dataclass(frozen=True)
class IntegerEstimator:
    """The integer part of a plan: exactly what generated code computes."""

    coefficients: tuple[tuple[int, ...], ...]  # (n_outputs, n_inputs)
    offsets: tuple[int, ...]  # c_i, at accumulator scale
    shifts: tuple[int, ...]
    input_ranges: tuple[tuple[int, int], ...]  # (lo_j, hi_j), inclusive
    output_ctype: str
    rounding: str = "nearest"
    acc_bits: int = 32

    def __post_init__(self):
        object.__setattr__(self, "coefficients", tuple(tuple(int(a) for a in row) for row in self.coefficients))
        object.__setattr__(self, "offsets", tuple(int(c) for c in self.offsets))
        object.__setattr__(self, "shifts", tuple(int(s) for s in self.shifts))
        object.__setattr__(self, "input_ranges", tuple((int(lo), int(hi)) for lo, hi in self.input_ranges))
        n, m = len(self.coefficients), len(self.input_ranges)
        if any(len(row) != m for row in self.coefficients) or len(self.offsets) != n or len(self.shifts) != n:
            raise ValueError("coefficients, offsets, shifts and input_ranges disagree in shape")
        if self.output_ctype not in OUTPUT_CTYPES:
            raise ValueError(f"unknown output type '{self.output_ctype}'")
        if any(s < 0 for s in self.shifts):
            raise ValueError("shifts must be non-negative")
        for s in self.shifts:
            rounding_constant(s, self.rounding)

    @classmethod
    def from_mapping(cls, data) -> "IntegerEstimator":
        """Build from a plan or manifest dict (both carry these keys)."""
        return cls(
            coefficients=data["coefficients"],
            offsets=data["offsets"],
            shifts=data["shifts"],
            input_ranges=data["input_ranges"],
            output_ctype=data["output_ctype"],
            rounding=rounding_name(data["rounding"]),
            acc_bits=data["acc_bits"],
        )

    @property
    def n_inputs(self) -> int:
        return len(self.input_ranges)

    @property
    def n_outputs(self) -> int:
        return len(self.coefficients)

    def accumulator_bounds(self) -> list[int]:
        """Worst case |c_i| + sum_j |a_ij| * max(|lo_j|, |hi_j|) + r_i over the box, per output."""
        return [
            accumulator_bound(row, c, s, self.input_ranges, self.rounding)
            for row, c, s in zip(self.coefficients, self.offsets, self.shifts)
        ]

    def output_ranges(self) -> list[tuple[int, int]]:
        """Exact unclamped output range over the box, per output (saturation can trigger only outside it)."""
        return [
            output_range(row, c, s, self.input_ranges, self.rounding)
            for row, c, s in zip(self.coefficients, self.offsets, self.shifts)
        ]

    def evaluate(self, y) -> np.ndarray:
        """Integer outputs for rows y of shape (k, n_inputs) (or one vector), as int64.

        Exact: float64 BLAS and power-of-two scaling when every partial sum stays below 2**53 (all
        partial sums are integers bounded by the box bound, so no rounding can
        occur in any summation order), int64 when below 2**63, Python
        integers otherwise.
        """
        y = np.asarray(y)
        single = y.ndim == 1
        y = np.atleast_2d(y)
        if y.ndim != 2 or y.shape[1] != self.n_inputs:
            raise ValueError(f"expected {self.n_inputs} inputs per vector, got shape {y.shape}")
        bound = max(self.accumulator_bounds(), default=0)
        lo_out, hi_out = OUTPUT_CTYPES[self.output_ctype]
        constant = [c + rounding_constant(s, self.rounding) for c, s in zip(self.offsets, self.shifts)]
        if bound < _FLOAT64_EXACT:
            # Every value here is an integer (or an integer over a power of
            # two) below 2**53, so each product, sum, scaling and floor is
            # exact.  Converting before clamping is safe: rounding to double
            # is monotonic, so a value beyond the box stays beyond it.
            yf = (self._clamp_to_box(y) if y.dtype == object else self._checked(y)).astype(np.float64)
            np.clip(yf, *self._box_limits(), out=yf)
            out = yf @ np.array(self.coefficients, dtype=np.float64).T
            out += np.array(constant, dtype=np.float64)
            out *= np.array([2.0**-s for s in self.shifts])
            np.floor(out, out=out)
        elif bound < 2**63:
            acc = self._clamp_to_box(y) @ np.array(self.coefficients, dtype=np.int64).T
            acc += np.array(constant, dtype=np.int64)
            out = acc >> np.array(self.shifts, dtype=np.int64)  # arithmetic shift: floor division by 2**s
        else:
            acc = self._clamp_to_box(y).astype(object) @ np.array(self.coefficients, dtype=object).T
            out = (acc + np.array(constant, dtype=object)) >> np.array(self.shifts, dtype=object)  # floors too
        out = np.clip(out, lo_out, hi_out).astype(np.int64)
        return out[0] if single else out

    def _box_limits(self) -> tuple[np.ndarray, np.ndarray]:
        lo, hi = box_bounds(self.input_ranges, np.int64)
        return lo, hi

    def _clamp_to_box(self, y: np.ndarray) -> np.ndarray:
        """Inputs clamped to the box, as int64 (the box itself always fits int64)."""
        lo, hi = self._box_limits()
        if y.dtype == object:  # Python integers of any size
            if not all(isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in y.flat):
                raise ValueError("inputs must be integers")
            return np.clip(y, lo.astype(object), hi.astype(object)).astype(np.int64)
        y = self._checked(y)
        if y.dtype == np.uint64:  # values beyond 2**63 would wrap in the cast to int64
            y = np.minimum(y, np.uint64(2**63 - 1))
        return np.clip(y.astype(np.int64, copy=False), lo, hi)

    @staticmethod
    def _checked(y: np.ndarray) -> np.ndarray:
        if not np.issubdtype(y.dtype, np.integer):
            raise ValueError("inputs must be integers")
        return y
