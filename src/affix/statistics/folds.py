"""Per-fold moments for k-fold cross-validation in the same single pass.

A row's fold depends only on its index in the stream and the seed: rows are
taken in groups of k consecutive rows and each group is dealt to the k folds
in a random order.  So any prefix of the data has balanced folds (sizes
differ by at most one), the folds do not depend on how the stream was cut
into chunks or in which order the chunks are merged, and a calibration rig
that cycles through a few load cases cannot alias with the fold pattern.
"""
from __future__ import annotations

from functools import lru_cache

import numpy as np

from affix.statistics.moments import Moments, merge_all

FOLD_SEED = 20261201
_GROUPS = 8192  # the dealing pattern repeats every k * _GROUPS rows


@lru_cache(maxsize=8)
def _pattern(folds: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    groups = np.tile(np.arange(folds, dtype=np.int8), (_GROUPS, 1))
    return rng.permuted(groups, axis=1).ravel()


def fold_of(first_row: int, count: int, folds: int, seed: int = FOLD_SEED) -> np.ndarray:
    """Fold label (0..folds-1) of rows first_row .. first_row+count-1."""
    pattern = _pattern(folds, seed)
    return np.take(pattern, np.arange(first_row, first_row + count) % len(pattern))


def chunk_moments(chunk, first_row: int, folds: int, seed: int = FOLD_SEED) -> list[Moments]:
    """Moments of each fold's share of one chunk, whose first row has index first_row.

    The rows are gathered fold by fold (one take, not one boolean mask per
    fold), shifted by the chunk's first row and given a column of ones, so one
    product Z^T Z per fold yields its count, sum and scatter together.  The
    shift keeps the subtraction of the mean's outer product well conditioned.
    """
    chunk = np.asarray(chunk, dtype=np.float64)
    count, width = chunk.shape
    folds = max(folds, 1)
    if count == 0:
        return [Moments.empty(width) for _ in range(folds)]
    if folds == 1:
        ordered, sizes = chunk, np.array([count])
    else:
        labels = fold_of(first_row, count, folds, seed)
        ordered = np.take(chunk, np.argsort(labels, kind="stable"), axis=0)
        sizes = np.bincount(labels, minlength=folds)
    shift = chunk[0].copy()
    z = np.empty((count, width + 1))
    np.subtract(ordered, shift, out=z[:, :width])
    z[:, width] = 1.0
    parts, start = [], 0
    for size in sizes:
        part = z[start : start + size]
        start += size
        parts.append(_from_shifted_products(part.T @ part, shift) if size else Moments.empty(width))
    return parts


def _from_shifted_products(g: np.ndarray, shift: np.ndarray) -> Moments:
    width = len(shift)
    n, sums = g[width, width], g[:width, width]
    return Moments(int(round(n)), shift + sums / n, g[:width, :width] - np.outer(sums, sums) / n)


def merge_folds(a: list[Moments], b: list[Moments]) -> list[Moments]:
    return [x.merge(y) for x, y in zip(a, b)]


def accumulate(chunks, width: int, folds: int, seed: int = FOLD_SEED, first_row: int = 0) -> list[Moments]:
    """One pass over chunks (in stream order, the first row having index
    first_row) to per-fold moments; folds <= 1 gives one part."""
    parts = [Moments.empty(width) for _ in range(max(folds, 1))]
    row = first_row
    for chunk in chunks:
        parts = merge_folds(parts, chunk_moments(chunk, row, folds, seed))
        row += len(chunk)
    return parts

