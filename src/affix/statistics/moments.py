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

A Moments can also be a *stack*: many sets of rows at once (the units of a
fleet, their folds), every field with the same leading axes, ``count`` of
that shape.  Merging and everything the fit derives from moments works on
stacks element by element, with the same operations in the same order as
on one set, so a set's figures do not depend on whether it was in a stack.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True, eq=False)
class Moments:
    count: int | np.ndarray  # rows; for a stack, an integer array of its leading shape
    mean: np.ndarray  # (..., d)
    scatter: np.ndarray  # (..., d, d), centred: sum of (row - mean)(row - mean)^T
    low: np.ndarray  # (..., d), each column's smallest value (+inf while empty)
    high: np.ndarray  # (..., d), its largest (-inf while empty)

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

    @classmethod
    def stack(cls, parts) -> "Moments":
        """The stack of ``parts`` (Moments, or stacks of one shape) along a new first axis."""
        return cls(*(np.stack([getattr(p, name) for p in parts]) for name in _FIELDS))

    def __getitem__(self, index) -> "Moments":
        """Part of a stack: ``index`` applies to the leading axes (stack[u], stack[:, f], stack[units])."""
        return Moments(*(getattr(self, name)[index] for name in _FIELDS))

    @property
    def width(self) -> int:
        return self.mean.shape[-1]

    @property
    def covariance(self) -> np.ndarray:
        """Sample covariance, 1/(n-1) scaling."""
        return self.scatter / (np.asarray(self.count)[..., None, None] - 1)

    def merge(self, other: "Moments") -> "Moments":
        if np.ndim(other.count) == 0 and other.count == 0:
            return self
        if np.ndim(self.count) == 0 and self.count == 0:
            return other
        n = self.count + other.count
        safe = np.maximum(n, 1)  # where a stack's sets are both empty, the update adds zeros
        delta = other.mean - self.mean
        mean = self.mean + delta * np.asarray(other.count / safe)[..., None]
        spread = delta[..., :, None] * delta[..., None, :]
        spread *= np.asarray(self.count * other.count / safe)[..., None, None]
        scatter = self.scatter + other.scatter
        scatter += spread  # in place: a stack's temporaries are megabytes
        return Moments(n, mean, scatter, np.minimum(self.low, other.low), np.maximum(self.high, other.high))


_FIELDS = ("count", "mean", "scatter", "low", "high")


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
    """Merge many parts pairwise as a balanced tree, so rounding grows with log(parts).
    Parts without rows (in every set of a stack) are left out, unless all are."""
    parts = [p for p in parts if np.any(p.count)] or list(parts)
    if not parts:
        return Moments.empty(width)
    return merge_along(Moments.stack(parts))


def merge_along(stack: Moments) -> Moments:
    """A stack merged along its first axis by the balanced tree of :func:`merge_all`:
    (0, 1), (2, 3), ..., the last carried up when their number is odd; level by level,
    each one merge over the whole stack."""
    while len(stack.count) > 1:
        pairs = len(stack.count) // 2
        merged = stack[0 : 2 * pairs : 2].merge(stack[1 : 2 * pairs : 2])
        if len(stack.count) % 2:
            merged = Moments(*(np.concatenate([getattr(merged, name), getattr(stack, name)[-1:]]) for name in _FIELDS))
        stack = merged
    return stack[0]
