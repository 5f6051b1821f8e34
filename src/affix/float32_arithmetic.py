"""The float32 contract: what the ``--arith float32`` target computes, operation by operation.

For each output i, with inputs y_j first clamped to their declared box and
converted to float32 (round to nearest):

    x_i = offset_i
    x_i = x_i + gain_i0 * y_0        (product rounded to float32, then the sum)
    x_i = x_i + gain_i1 * y_1
    ...                              (inputs in declaration order)

Every multiply and every add is one IEEE 754 binary32 operation rounded to
nearest-even; no fused multiply-add, no reassociation.  numpy float32 array
arithmetic performs exactly these operations, so this evaluator is the
reference the generated code must match bit for bit.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from affix.arithmetic import box_bounds, input_reach

UNIT_ROUNDOFF = 2.0**-24  # binary32, round to nearest
FLOAT32_MAX = float(np.finfo(np.float32).max)


def magnitude_bound(gain, offset, input_ranges) -> np.ndarray:
    """|b_i| + sum_j |g_ij| * max(|lo_j|, |hi_j|) per output: no term or partial sum over the box exceeds it."""
    return np.abs(np.asarray(offset, dtype=float)) + np.abs(np.asarray(gain, dtype=float)) @ np.array(
        input_reach(input_ranges), dtype=float
    )


def error_bound(gain, offset, input_ranges) -> np.ndarray:
    """Largest |float32 result - exact model| over the box, per output.

    The float32 code is an inner product of n = M + 1 terms (the offset
    times 1), each operand rounded once on the way in (constants to float,
    inputs beyond 2**24 to float): gamma_{M+3} * (|b| + sum |g_j| |y_j|) with
    gamma_k = k u / (1 - k u) -- the standard bound for recursive inner
    products (Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed.,
    §3.1, eq. 3.4; from memory).
    """
    k = len(input_ranges) + 3
    return k * UNIT_ROUNDOFF / (1 - k * UNIT_ROUNDOFF) * magnitude_bound(gain, offset, input_ranges)


@dataclass(frozen=True, eq=False)
class Float32Estimator:
    gain: np.ndarray  # (n_outputs, n_inputs), rounded to float32
    offset: np.ndarray  # (n_outputs,), rounded to float32
    input_ranges: tuple[tuple[int, int], ...]

    def __post_init__(self):
        object.__setattr__(self, "gain", np.asarray(self.gain, dtype=np.float32).reshape(len(self.offset), -1))
        object.__setattr__(self, "offset", np.asarray(self.offset, dtype=np.float32).reshape(-1))
        object.__setattr__(self, "input_ranges", tuple((int(lo), int(hi)) for lo, hi in self.input_ranges))

    @classmethod
    def from_mapping(cls, data) -> "Float32Estimator":
        """Build from a manifest dict with ``float_gain``/``float_offset``."""
        return cls(data["float_gain"], data["float_offset"], data["input_ranges"])

    def evaluate(self, y) -> np.ndarray:
        """float32 outputs for integer rows y of shape (k, n_inputs)."""
        y = np.atleast_2d(np.asarray(y))
        lo, hi = box_bounds(self.input_ranges, np.int64)
        yf = np.clip(y.astype(np.int64), lo, hi).astype(np.float32)
        out = np.empty((y.shape[0], len(self.offset)), dtype=np.float32)
        for i, (row, start) in enumerate(zip(self.gain, self.offset)):
            acc = np.full(y.shape[0], start, dtype=np.float32)
            for j, g in enumerate(row):
                acc = acc + g * yf[:, j]  # two roundings, as in the C: no contraction
            out[:, i] = acc
        return out
