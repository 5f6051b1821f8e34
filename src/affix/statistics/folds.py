"""Per-fold moments for k-fold cross-validation in the same single pass.

A row's fold depends only on where it lies in its file and on the file's
place in the ordered list of files read: rows are taken in groups of k
consecutive rows and each group is dealt to the k folds in a random order
(the orders repeat after 8192 groups, or after about 2^20 rows for more
than 128 folds); the rows of the i-th file (from 0) are dealt from the
pattern's i-th group on, row r at pattern position i*k + r.  So every file
has balanced folds (sizes differ by at most one in any prefix), files too
short to fill a group still spread over all folds, the folds do not depend
on how the data were cut into chunks, parts or blocks, and a calibration rig
that cycles through a few load cases cannot alias with the fold pattern.
Invalid rows that are left out keep their place: the rows after them are
dealt as if they were there.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from affix.statistics.moments import Moments, column_extremes

FOLD_SEED = 20261201
# Every fold keeps its own moments (a few KB each) and is solved once, so the
# count is bounded; more than this is no longer k-fold cross-validation of a
# calibration in any practical sense (common practice: k = 5 or 10, or one
# row per fold for a few hundred rows).
MAX_FOLDS = 10_000
_GROUPS = 8192  # groups in the dealing pattern, for up to 128 folds
_PATTERN_ROWS = 1 << 20  # ...and fewer for more folds, so the pattern stays this long
# Chunks are reduced in blocks of this many rows: small enough that the
# gather, shift, sums and product of a block stay in the CPU cache (measured
# here: half the time of whole 65536-row chunks, and faster than 8192 or
# 32768 rows), large enough that the per-block Python work stays small.
BLOCK_ROWS = 1 << 14


def period(folds: int) -> int:
    """Rows after which the dealing pattern repeats."""
    return folds * max(1, min(_GROUPS, _PATTERN_ROWS // folds))


@lru_cache(maxsize=8)
def _pattern(folds: int, seed: int) -> np.ndarray:
    """The dealing pattern, twice over: any run of up to one period is a slice of it."""
    rng = np.random.default_rng(seed)
    groups = np.tile(np.arange(folds, dtype=np.int32), (period(folds) // folds, 1))
    return np.tile(rng.permuted(groups, axis=1).ravel(), 2)


def fold_of(first_row: int, count: int, folds: int, seed: int = FOLD_SEED) -> np.ndarray:
    """Fold label (0..folds-1) of rows first_row .. first_row+count-1."""
    pattern = _pattern(folds, seed)
    offset = first_row % period(folds)
    if count <= period(folds):
        return pattern[offset : offset + count]
    return np.resize(pattern[offset : offset + period(folds)], count)


def fold_labels(rows, count: int, folds: int, seed: int = FOLD_SEED) -> np.ndarray:
    """Fold labels of ``count`` rows placed by ``rows``: the index of the first
    (the rest consecutive), or an array of each row's index in its file."""
    if np.ndim(rows) == 0:
        return fold_of(int(rows), count, folds, seed)
    return _pattern(folds, seed)[np.asarray(rows, dtype=np.int64) % period(folds)]


@lru_cache(maxsize=64)
def _fold_order(offset: int, count: int, folds: int, seed: int):
    """The order that groups rows offset .. offset+count-1 of the dealing
    pattern fold by fold, the folds that have rows there and where each
    one's rows start and end in that order.  Blocks of one length start at
    only a few points of the pattern, so a pass sorts a few times, not once
    per block (measured: a fifth off the statistics' time)."""
    order, spans = grouped(fold_of(offset, count, folds, seed), folds)
    order.flags.writeable = False  # shared by every caller
    return order, spans


def grouped(labels, folds: int):
    """The order that groups rows by their fold label, and (fold, start, end) of each fold present."""
    # Labels fit int16 (MAX_FOLDS < 2^15), which numpy sorts by radix: 6x faster than int32.
    order, sizes = np.argsort(labels.astype(np.int16), kind="stable"), np.bincount(labels, minlength=folds)
    present = np.flatnonzero(sizes)
    ends = np.cumsum(sizes)[present]
    return order, tuple(zip(present.tolist(), (ends - sizes[present]).tolist(), ends.tolist()))


def fold_shares(chunk, first_row: int, folds: int, seed: int = FOLD_SEED, kept=None):
    """(fold, Moments) for each fold that has rows in the chunk, whose first row is at pattern position first_row.

    ``kept``, when some rows were left out, gives each row's offset from
    first_row (sorted), so the rows keep the folds of their places.  The
    rows are gathered fold by fold (one take, not one boolean mask per fold)
    into a new C-ordered array, so the sums below see the same layout
    whatever array the rows came from, and shifted by the chunk's first row,
    which keeps the final subtraction of the mean's outer product well
    conditioned; then each fold needs one column sum and one product Z^T Z,
    and its extremes.
    """
    chunk = np.asarray(chunk, dtype=np.float64)
    if len(chunk) == 0:
        return []
    shift = chunk[0].copy()
    if folds <= 1:
        shifted = np.subtract(chunk, shift, order="C")
        return [(0, _from_shifted(shifted, shift, *column_extremes(chunk)))]
    if kept is None:
        order, spans = _fold_order(first_row % period(folds), len(chunk), folds, seed)
    else:
        order, spans = grouped(fold_of(first_row, int(kept[-1]) + 1, folds, seed)[kept], folds)
    # np.take copies contiguous rows fastest; the column-major chunks
    # pandas yields for CSV gather about 8x faster by fancy indexing.
    rows = np.take(chunk, order, axis=0) if chunk.flags.c_contiguous else chunk[order]
    # The extremes from the raw values, before the shift: exact, not x - s + s.
    extremes = [column_extremes(rows[start:end]) for _, start, end in spans]
    rows -= shift
    return [(fold, _from_shifted(rows[start:end], shift, *ends)) for (fold, start, end), ends in zip(spans, extremes)]


def _from_shifted(part: np.ndarray, shift: np.ndarray, low: np.ndarray, high: np.ndarray) -> Moments:
    n = len(part)
    sums = np.ones(n) @ part  # as a BLAS product: several times faster than sum(axis=0) on rows
    return Moments(n, shift + sums / n, part.T @ part - np.outer(sums, sums) / n, low, high)


def merge_folds(a: list[Moments], b: list[Moments]) -> list[Moments]:
    return [x.merge(y) for x, y in zip(a, b)]
