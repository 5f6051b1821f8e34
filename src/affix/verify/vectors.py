"""The vector sets verification runs, as int64 rows of input counts.

- corners: every corner of the input box when there are at most 16 inputs;
  beyond that, each input at each extreme with the others random, plus 2**16
  random corners.  Corners are where accumulators peak and saturation and
  rounding are most likely to be wrong.
- random: uniform over the box, generated chunk by chunk so any count fits
  in memory.
- beyond the box: uniform over the whole input type, plus the type's own
  extremes, so the clamping is checked as well.
- calibration: the rows of a calibration file (see ``calibration_vectors``).
"""
from __future__ import annotations

import os
from dataclasses import dataclass
from typing import Callable

import numpy as np

from affix.arithmetic import INPUT_CTYPES, box_bounds

MAX_FULL_CORNERS = 16
CHUNK_ROWS = 1 << 18
_SAMPLED_CORNERS = 2**16
_EXTREME_REPEATS = 64  # random companions for each input at each extreme


@dataclass(frozen=True)
class VectorSet:
    name: str
    count: int
    chunk: Callable[[int], np.ndarray]  # chunk number -> its rows (CHUNK_ROWS of them, fewer at the end)

    @classmethod
    def of(cls, name: str, rows: np.ndarray) -> "VectorSet":
        rows = np.asarray(rows, dtype=np.int64)
        return cls(name, len(rows), lambda k: rows[k * CHUNK_ROWS : (k + 1) * CHUNK_ROWS])

    def chunks(self):
        for k in range(-(-self.count // CHUNK_ROWS)):
            yield self.chunk(k)

    def sample(self, limit: int) -> np.ndarray:
        """At most ``limit`` rows spread evenly over the first chunk (keeping its first and last)."""
        rows = self.chunk(0)
        if len(rows) <= limit:
            return rows
        return rows[np.linspace(0, len(rows) - 1, limit).round().astype(int)]


def vector_sets(input_ranges, input_ctype: str, *, n_random: int, seed: int = 0) -> dict[str, VectorSet]:
    lo, hi = box_bounds(input_ranges)
    t_lo, t_hi = INPUT_CTYPES[input_ctype]
    rng = np.random.default_rng([seed, 0])
    beyond = rng.integers(t_lo, t_hi, size=(max(1, min(n_random, 2**16)), len(lo)), endpoint=True)
    beyond[0], beyond[-1] = t_lo, t_hi

    def random_chunk(k: int) -> np.ndarray:  # its own seed per chunk: chunks can be made in any order
        rows = min(CHUNK_ROWS, n_random - k * CHUNK_ROWS)
        return np.random.default_rng([seed, 1, k]).integers(lo, hi, size=(rows, len(lo)), endpoint=True)

    return {
        "corners": VectorSet.of("corners", corners(lo, hi, rng)),
        "random": VectorSet("random", n_random, random_chunk),
        "beyond the box": VectorSet.of("beyond the box", beyond),
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


def calibration_vectors(paths, inputs, input_ctype: str, input_lsb=None) -> VectorSet:
    """The calibration rows of one file or a list of files as the integers the code would receive.

    Each value is divided by its input's lsb where the plan records one (the
    model was fitted on physical inputs), rounded to the nearest integer
    (halves to even) and limited to the input type; rows are kept in file
    order, out-of-box rows included (they check the clamping).
    """
    from affix.intake import read_files

    t_lo, t_hi = INPUT_CTYPES[input_ctype]
    scale = np.array([1.0 if v is None else float(v) for v in (input_lsb or [None] * len(inputs))])
    paths = [paths] if isinstance(paths, (str, os.PathLike)) else paths
    chunks = [np.clip(np.rint(chunk / scale), t_lo, t_hi) for chunk in read_files(paths, list(inputs))]
    rows = np.vstack(chunks) if chunks else np.empty((0, len(inputs)))
    return VectorSet.of("calibration", rows)
