"""Mergeable first and second moments of a set of rows.

A :class:`Moments` holds the row count, the column means, the centred
scatter matrix (sum of outer products of deviations from the mean) and each
column's smallest and largest value.  Two of them combine with the pairwise
update of Chan, Golub & LeVeque (1979),

    n = na + nb,   d = mean_b - mean_a,
    mean = mean_a + d * nb / n,
    scatter = scatter_a + scatter_b + outer(d, d) * na * nb / n,

which never forms raw sums of squares, so large offsets (ADC counts near
full scale) cost no precision, and parts merge in any order to the same
result up to rounding; the extremes merge exactly, element by element.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class Moments:
    count: int
    mean: np.ndarray  # (d,)
    scatter: np.ndarray  # (d, d), centred: sum of (row - mean)(row - mean)^T
    low: np.ndarray  # (d,), each column's smallest value (+inf while empty)
    high: np.ndarray  # (d,), its largest (-inf while empty)

    @classmethod
    def empty(cls, width: int) -> "Moments":
        return cls(0, np.zeros(width), np.zeros((width, width)), np.full(width, np.inf), np.full(width, -np.inf))

    @classmethod
    def of(cls, rows) -> "Moments":
        """Moments of the rows (k, d) in one go (two-pass: mean, then centred products)."""
        rows = np.asarray(rows, dtype=np.float64)
        if len(rows) == 0:
            return cls.empty(rows.shape[1])
        mean = rows.mean(axis=0)
        centred = rows - mean
        return cls(len(rows), mean, centred.T @ centred, *column_extremes(rows))

    @property
    def width(self) -> int:
        return len(self.mean)

    @property
    def covariance(self) -> np.ndarray:
        """Sample covariance, 1/(n-1) scaling."""
        return self.scatter / (self.count - 1)

    def merge(self, other: "Moments") -> "Moments":
        if other.count == 0:
            return self
        if self.count == 0:
            return other
        n = self.count + other.count
        delta = other.mean - self.mean
        mean = self.mean + delta * (other.count / n)
        scatter = self.scatter + other.scatter + np.outer(delta, delta) * (self.count * other.count / n)
        return Moments(n, mean, scatter, np.minimum(self.low, other.low), np.maximum(self.high, other.high))


# Rows viewed side by side for column_extremes: numpy reduces an (n, d) array
# over its rows d values at a time, so narrow rows run short vector loops;
# as (n/16, 16d) the same comparisons take a third of the time (measured at
# d = 18), and the 16 partial results fold in one more small reduction.
_SIDE_BY_SIDE = 16


def column_extremes(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each column's smallest and largest value of C-ordered rows (k >= 1, d)."""
    whole = len(rows) - len(rows) % _SIDE_BY_SIDE
    if whole == 0 or not rows.flags.c_contiguous:
        return rows.min(axis=0), rows.max(axis=0)
    wide = rows[:whole].reshape(-1, _SIDE_BY_SIDE * rows.shape[1])
    low = wide.min(axis=0).reshape(_SIDE_BY_SIDE, -1).min(axis=0)
    high = wide.max(axis=0).reshape(_SIDE_BY_SIDE, -1).max(axis=0)
    if whole < len(rows):
        low, high = np.minimum(low, rows[whole:].min(axis=0)), np.maximum(high, rows[whole:].max(axis=0))
    return low, high


def merge_all(parts, width: int) -> Moments:
    """Merge many parts pairwise as a balanced tree, so rounding grows with log(parts)."""
    parts = [p for p in parts if p.count]
    if not parts:
        return Moments.empty(width)
    while len(parts) > 1:
        merged = [a.merge(b) for a, b in zip(parts[::2], parts[1::2])]
        parts = merged + ([parts[-1]] if len(parts) % 2 else [])
    return parts[0]
