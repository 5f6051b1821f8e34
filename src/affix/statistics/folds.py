"""Per-fold moments for k-fold cross-validation in the same single pass.

A row's fold depends only on its index in the stream and the seed: rows are
taken in groups of k consecutive rows and each group is dealt to the k folds
in a random order (the orders repeat after 8192 groups, or after about 2^20
rows for more than 128 folds).  So any prefix of the data has balanced folds (sizes
differ by at most one), the folds do not depend on how the stream was cut
into chunks or in which order the chunks are merged, and a calibration rig
that cycles through a few load cases cannot alias with the fold pattern.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from affix.statistics.moments import Moments

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
    labels = fold_of(offset, count, folds, seed)
    order, sizes = np.argsort(labels, kind="stable"), np.bincount(labels, minlength=folds)
    present = np.flatnonzero(sizes)
    ends = np.cumsum(sizes)[present]
    spans = tuple(zip(present.tolist(), (ends - sizes[present]).tolist(), ends.tolist()))
    order.flags.writeable = False  # shared by every caller
    return order, spans


def fold_shares(chunk, first_row: int, folds: int, seed: int = FOLD_SEED):
    """(fold, Moments) for each fold that has rows in the chunk, whose first row has index first_row.

    The rows are gathered fold by fold (one take, not one boolean mask per
    fold) and shifted by the chunk's first row, which keeps the final
    subtraction of the mean's outer product well conditioned; then each fold
    needs one column sum and one product Z^T Z, and its extremes.
    """
    chunk = np.asarray(chunk, dtype=np.float64)
    if len(chunk) == 0:
        return []
    shift = chunk[0].copy()
    if folds <= 1:
        return [(0, _from_shifted(chunk - shift, shift, chunk.min(axis=0), chunk.max(axis=0)))]
    order, spans = _fold_order(first_row % period(folds), len(chunk), folds, seed)
    # np.take copies contiguous rows fastest; the column-major chunks
    # pandas yields for CSV gather about 8x faster by fancy indexing.
    rows = np.take(chunk, order, axis=0) if chunk.flags.c_contiguous else chunk[order]
    # The extremes from the raw values, before the shift: exact, not x - s + s.
    extremes = [(rows[start:end].min(axis=0), rows[start:end].max(axis=0)) for _, start, end in spans]
    rows -= shift
    return [(fold, _from_shifted(rows[start:end], shift, *ends)) for (fold, start, end), ends in zip(spans, extremes)]


def _from_shifted(part: np.ndarray, shift: np.ndarray, low: np.ndarray, high: np.ndarray) -> Moments:
    n = len(part)
    sums = np.ones(n) @ part  # as a BLAS product: several times faster than sum(axis=0) on rows
    return Moments(n, shift + sums / n, part.T @ part - np.outer(sums, sums) / n, low, high)


def merge_folds(a: list[Moments], b: list[Moments]) -> list[Moments]:
    return [x.merge(y) for x, y in zip(a, b)]


def accumulate(chunks, width: int, folds: int, seed: int = FOLD_SEED, first_row: int = 0) -> list[Moments]:
    """One pass over chunks (in stream order, the first row having index
    first_row) to per-fold moments; folds <= 1 gives one part.  Each block
    touches only the folds it has rows in, so many folds cost no more per row."""
    parts = [Moments.empty(width)] * max(folds, 1)  # Moments are immutable: one empty one serves all
    row = first_row
    for chunk in chunks:
        for start in range(0, len(chunk), BLOCK_ROWS):
            block = chunk[start : start + BLOCK_ROWS]
            for fold, share in fold_shares(block, row, folds, seed):
                parts[fold] = parts[fold].merge(share)
            row += len(block)
    return parts
