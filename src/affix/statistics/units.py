"""Per-unit, per-fold moments of a fleet log, from the same single pass.

A fleet log holds the calibration rows of many units, told apart by a unit
column.  :func:`unit_shares` reduces one chunk of rows and their unit labels
to :class:`UnitMoments`: one :class:`~affix.statistics.moments.Moments` per
unit and fold, kept as stacked arrays so that thousands of units cost a few
vectorised operations per block rather than a Python loop per unit.  Shares
merge with the same pairwise update as Moments (Chan, Golub & LeVeque, 1979),
per unit and fold, in any order, across chunks, files, processes and
workers; a pass merges them along the fixed tree of
:mod:`affix.statistics.runs`, one share per tile.

A row's fold depends only on its index within its file (see
:mod:`affix.statistics.folds`), never on its unit or on how the file was cut
into chunks or partitions: a reader that splits files differently gives the
same folds.  The units come out in one fixed order, by :func:`unit_order`
of their labels, whatever order the shares were merged in.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from affix.statistics.folds import FOLD_SEED, fold_labels
from affix.statistics.moments import Moments

# Below this many rows per (unit, fold) group on average, the scatter of
# every group comes from one batched product of each row with itself rather
# than one BLAS call per group (many units interleaved row by row).
_ROWS_PER_CALL = 48


@lru_cache(maxsize=1 << 16)  # every merge of shares sorts its units: each label's key is made once
def unit_order(label: str):
    """Sort key of a unit label: its runs of digits by value, so "unit-9" comes before "unit-10"."""
    return tuple((0, int(part), "") if part.isdigit() else (1, 0, part) for part in re.split(r"(\d+)", label) if part)


@dataclass(frozen=True, eq=False)
class UnitMoments:
    """Moments per unit and fold.

    ``units`` holds the labels, ``count`` (U, F), ``mean`` (U, F, d),
    ``scatter`` (U, F, d, d), ``low`` and ``high`` (U, F, d): unit u's fold f
    is ``moments(u)[f]``.  F is the number of folds (1 without
    cross-validation); an empty fold has count 0, zero mean and scatter and
    infinite extremes, like :meth:`Moments.empty`.
    """

    units: tuple[str, ...]
    count: np.ndarray
    mean: np.ndarray
    scatter: np.ndarray
    low: np.ndarray
    high: np.ndarray

    @classmethod
    def empty(cls, width: int, folds: int, units=(), capacity: int | None = None) -> "UnitMoments":
        """Empty moments for ``units`` (room for ``capacity`` units, for a store that grows)."""
        size, parts = len(units) if capacity is None else capacity, max(folds, 1)
        return cls(tuple(units), np.zeros((size, parts), np.int64), np.zeros((size, parts, width)),
                   np.zeros((size, parts, width, width)), np.full((size, parts, width), np.inf),
                   np.full((size, parts, width), -np.inf))

    @property
    def width(self) -> int:
        return self.mean.shape[2]

    @property
    def folds(self) -> int:
        return self.count.shape[1]

    def moments(self, unit: str) -> list[Moments]:
        """The unit's moments, one per fold."""
        u = self.units.index(unit)
        return [Moments(int(self.count[u, f]), self.mean[u, f], self.scatter[u, f], self.low[u, f], self.high[u, f])
                for f in range(self.folds)]

    @property
    def stacked(self) -> Moments:
        """The same moments as one stack (see :class:`Moments`), leading axes (unit, fold)."""
        return Moments(self.count, self.mean, self.scatter, self.low, self.high)

    def rows(self) -> dict[str, int]:
        """Rows per unit."""
        return dict(zip(self.units, self.count.sum(axis=1).tolist()))

    def merge(self, other: "UnitMoments") -> "UnitMoments":
        """Both sets of units, the moments of a unit in both merged fold by fold
        (:meth:`Moments.merge` over the stack of those units; the others are copied,
        which is what the update gives for a side without rows)."""
        if not other.units:
            return self
        if not self.units:
            return other
        units = tuple(sorted(set(self.units) | set(other.units), key=unit_order))
        where = {label: k for k, label in enumerate(units)}
        theirs = {label: k for k, label in enumerate(other.units)}
        merged = UnitMoments.empty(self.width, self.folds, units)
        _place(merged, [where[label] for label in other.units], other.stacked)
        _place(merged, [where[label] for label in self.units], self.stacked)
        shared = [k for k, label in enumerate(self.units) if label in theirs]
        if shared:
            both = self.stacked[shared].merge(other.stacked[[theirs[self.units[k]] for k in shared]])
            _place(merged, [where[self.units[k]] for k in shared], both)
        return merged


def _place(target: UnitMoments, rows, moments: Moments) -> None:
    """target's units at ``rows`` set to the stack ``moments``, in place."""
    rows = np.asarray(rows, dtype=np.intp)
    for name in ("count", "mean", "scatter", "low", "high"):
        getattr(target, name)[rows] = getattr(moments, name)


def unit_shares(chunk, units, rows, folds: int, seed: int = FOLD_SEED) -> UnitMoments:
    """Per-unit, per-fold moments of ``chunk`` (k, d), whose row i belongs to unit ``units[i]``.

    ``rows`` places the rows in their file: the index (from 0) of the first,
    the rest following it; or an array of k indices, for rows that are not
    consecutive (invalid rows left out).  ``folds`` <= 1 gives one part per
    unit.  Each group of a unit's rows in one fold is shifted by its own first
    row before its products are summed, which keeps the centred scatter
    exact to rounding however large the values' offsets.
    """
    chunk = np.asarray(chunk, dtype=np.float64)
    width, parts = chunk.shape[1], max(folds, 1)
    if len(chunk) == 0:
        return UnitMoments.empty(width, folds)
    codes, labels = _codes(units, len(chunk))
    fold = np.zeros(len(chunk), np.int64) if folds <= 1 else fold_labels(rows, len(chunk), folds, seed)
    key = codes * parts + fold
    # Few groups in a tile: keys that fit int16 sort by radix, several times faster (see folds.grouped).
    order = np.argsort(key.astype(np.int16) if key.max() < 2**15 else key, kind="stable")
    key = key[order]
    starts = np.flatnonzero(np.r_[True, key[1:] != key[:-1]])
    sizes = np.diff(np.r_[starts, len(key)])
    grouped = np.take(chunk, order, axis=0) if chunk.flags.c_contiguous else chunk[order]
    low, high = np.minimum.reduceat(grouped, starts, axis=0), np.maximum.reduceat(grouped, starts, axis=0)
    shift = grouped[starts]
    if len(grouped) >= _ROWS_PER_CALL * len(starts):
        # Few long groups (units logged one after another): each is shifted, summed and
        # multiplied while it sits in the CPU cache, half the time of whole-tile passes.
        sums, products = np.empty((len(starts), width)), np.empty((len(starts), width, width))
        for group, (start, size) in enumerate(zip(starts.tolist(), sizes.tolist())):
            rows = grouped[start : start + size]
            rows -= shift[group]
            sums[group] = np.ones(size) @ rows  # as a BLAS product, like affix.statistics.folds
            products[group] = rows.T @ rows
    else:
        grouped -= np.repeat(shift, sizes, axis=0)
        sums = np.add.reduceat(grouped, starts, axis=0)
        products = np.add.reduceat(grouped[:, :, None] * grouped[:, None, :], starts, axis=0)
    sizes_f = sizes.astype(np.float64)
    group_mean = shift + sums / sizes_f[:, None]
    group_scatter = products - sums[:, :, None] * sums[:, None, :] / sizes_f[:, None, None]
    share = UnitMoments.empty(width, folds, labels)
    unit_of, fold_of_group = np.divmod(key[starts], parts)
    share.count[unit_of, fold_of_group] = sizes
    share.mean[unit_of, fold_of_group] = group_mean
    share.scatter[unit_of, fold_of_group] = group_scatter
    share.low[unit_of, fold_of_group] = low
    share.high[unit_of, fold_of_group] = high
    return share


def _codes(units, count: int) -> tuple[np.ndarray, tuple[str, ...]]:
    """Each row's unit as a code 0..U-1 and the labels in code order, which is unit order."""
    import pandas as pd  # a hash table: far faster than sorting strings

    units = np.asarray(units)
    if units.shape != (count,):
        raise ValueError(f"expected {count} unit labels, got shape {units.shape}")
    codes, labels = pd.factorize(units, sort=False)
    labels = [str(label) for label in labels]
    ordered = sorted(range(len(labels)), key=lambda k: unit_order(labels[k]))  # every share in unit order
    rank = np.empty(len(labels), np.int64)
    rank[ordered] = np.arange(len(labels))
    return rank[codes], tuple(labels[k] for k in ordered)

