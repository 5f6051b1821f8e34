"""The vector sets verification runs, as int64 rows of input counts.

- corners: every corner of the input box when there are at most 16 inputs;
  beyond that, each input at each extreme with the others random, plus 2**16
  random corners.  Corners are where accumulators peak and saturation and
  rounding are most likely to be wrong.
- random: uniform over the box.
- beyond the box: uniform over the whole input type, plus the type's own
  extremes, so the clamping is checked as well.
- calibration: the rows of a calibration file (see ``calibration_vectors``).
"""
from __future__ import annotations

import numpy as np

from affix.arithmetic import INPUT_CTYPES

MAX_FULL_CORNERS = 16
_SAMPLED_CORNERS = 2**16
_EXTREME_REPEATS = 64  # random companions for each input at each extreme


def vector_sets(input_ranges, input_ctype: str, *, n_random: int, seed: int = 0) -> dict[str, np.ndarray]:
    lo, hi = _bounds(input_ranges)
    rng = np.random.default_rng(seed)
    t_lo, t_hi = INPUT_CTYPES[input_ctype]
    n_beyond = max(1, min(n_random, 2**16))
    beyond = rng.integers(t_lo, t_hi, size=(n_beyond, len(lo)), endpoint=True)
    beyond[0], beyond[-1] = t_lo, t_hi
    return {
        "corners": corners(lo, hi, rng),
        "random": rng.integers(lo, hi, size=(n_random, len(lo)), endpoint=True),
        "beyond the box": beyond,
    }


def corners(lo: np.ndarray, hi: np.ndarray, rng) -> np.ndarray:
    m = len(lo)
    if m <= MAX_FULL_CORNERS:
        bits = (np.arange(2**m)[:, None] >> np.arange(m)) & 1
    else:
        bits = rng.integers(0, 1, size=(_SAMPLED_CORNERS, m), endpoint=True)
    rows = [np.where(bits == 1, hi, lo)]
    if m > MAX_FULL_CORNERS:
        for j in range(m):
            for end in (lo[j], hi[j]):
                others = rng.integers(lo, hi, size=(_EXTREME_REPEATS, m), endpoint=True)
                others[:, j] = end
                rows.append(others)
    return np.vstack(rows).astype(np.int64)


def calibration_vectors(path, inputs, input_ctype: str, input_lsb=None) -> np.ndarray:
    """The calibration rows as the integers the code would receive.

    Each value is divided by its input's lsb where the plan records one (the
    model was fitted on physical inputs), rounded to the nearest integer
    (halves to even) and limited to the input type; rows are kept in file
    order, out-of-box rows included (they check the clamping).
    """
    from affix.intake import read_chunks

    t_lo, t_hi = INPUT_CTYPES[input_ctype]
    scale = np.array([1.0 if v is None else float(v) for v in (input_lsb or [None] * len(inputs))])
    chunks = [np.clip(np.rint(chunk / scale), t_lo, t_hi) for chunk in read_chunks(path, list(inputs))]
    if not chunks:
        return np.empty((0, len(inputs)), dtype=np.int64)
    return np.vstack(chunks).astype(np.int64)


def _bounds(input_ranges) -> tuple[np.ndarray, np.ndarray]:
    lo = np.array([r[0] for r in input_ranges], dtype=np.int64)
    hi = np.array([r[1] for r in input_ranges], dtype=np.int64)
    return lo, hi
