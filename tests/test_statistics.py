"""Mergeable moments and per-fold parts, checked against numpy's own estimators."""
from __future__ import annotations

import numpy as np
import pytest

from affix.statistics import Moments, accumulate, finish, fold_of, join, merge_all, merge_folds, run_of
from affix.statistics.moments import column_extremes
from affix.statistics.runs import TILE_ROWS


def sample(rng, rows=10_000):
    # Large offsets next to small spreads: where naive sums of squares lose digits.
    return rng.normal(loc=[3.0e4, -1.2e4, 0.0, 5.0], scale=[3.0, 40.0, 1e-3, 1.0], size=(rows, 4))


def assert_same(a: Moments, b: Moments, rtol=1e-12):
    assert a.count == b.count
    np.testing.assert_allclose(a.mean, b.mean, rtol=rtol)
    np.testing.assert_allclose(a.scatter, b.scatter, rtol=rtol, atol=rtol * np.abs(b.scatter).max())
    # The extremes are exact whatever the chunking: min/max never round.
    np.testing.assert_array_equal(a.low, b.low)
    np.testing.assert_array_equal(a.high, b.high)


def test_moments_match_numpy_mean_and_covariance():
    rows = sample(np.random.default_rng(1))
    m = Moments.of(rows)
    np.testing.assert_allclose(m.mean, rows.mean(axis=0), rtol=1e-14)
    np.testing.assert_allclose(m.covariance, np.cov(rows, rowvar=False), rtol=1e-11)  # numpy.cov, 1/(n-1)
    np.testing.assert_array_equal(m.low, rows.min(axis=0))
    np.testing.assert_array_equal(m.high, rows.max(axis=0))


@pytest.mark.parametrize("rows", [1, 15, 16, 17, 1638, 16384])
@pytest.mark.parametrize("width", [1, 3, 18])
def test_column_extremes_equal_numpys_min_and_max(rows, width):
    values = np.random.default_rng(rows * 31 + width).normal(scale=1e3, size=(rows, width))
    values[-1, -1] = 1e9  # the largest value in the rows that do not fill a group of 16
    low, high = column_extremes(values)
    np.testing.assert_array_equal(low, values.min(axis=0))  # numpy's own reduction, the reference
    np.testing.assert_array_equal(high, values.max(axis=0))
    # A strided view (a column selection) takes numpy's path and gives the same.
    np.testing.assert_array_equal(column_extremes(values[::2])[0], values[::2].min(axis=0))


def test_pairwise_merge_of_shuffled_chunks_equals_one_pass():
    # Chan, Golub & LeVeque (1979) update: merging parts in any order gives the moments of the whole.
    rng = np.random.default_rng(2)
    rows = sample(rng)
    cuts = np.sort(rng.choice(np.arange(1, len(rows)), size=40, replace=False))
    parts = [Moments.of(chunk) for chunk in np.split(rows, cuts)]
    rng.shuffle(parts)
    assert_same(merge_all(parts, 4), Moments.of(rows))
    sequential = parts[0]
    for part in parts[1:]:
        sequential = sequential.merge(part)
    assert_same(sequential, Moments.of(rows))


def numbered_pieces(rows, valid, cuts, only=None):
    """The rows cut at ``cuts``, each piece (or the one numbered ``only``) as a
    ChunkStream numbers it: (first, count, valid rows, kept)."""
    pieces = list(zip([0, *cuts], [*cuts, len(rows)]))
    for start, stop in pieces if only is None else [pieces[only]]:
        keep = valid[start:stop]
        yield start, stop - start, rows[start:stop][keep], None if keep.all() else np.flatnonzero(keep), None


def assert_identical(a: Moments, b: Moments):
    assert a.count == b.count
    for name in ("mean", "scatter", "low", "high"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)


@pytest.mark.parametrize("seed", [3, 4, 5])
def test_runs_of_any_parts_joined_in_any_grouping_give_the_same_bits(seed):
    # The fixed merge tree of affix.statistics.runs: however a file is cut into
    # parts and however their runs are joined, every merge has the same operands.
    rng = np.random.default_rng(seed)
    rows = sample(rng, rows=5 * TILE_ROWS + 1234)
    valid = rng.random(len(rows)) > 0.01  # left-out rows keep their places
    whole = finish(run_of(numbered_pieces(rows, valid, []), 4, 5, file_position=2))
    cuts = sorted(set(rng.choice(np.arange(1, len(rows)), size=40, replace=False).tolist()) | {TILE_ROWS, 7, 8})
    bounds = [0, *cuts, len(rows)]
    runs = [run_of(numbered_pieces(rows, valid, [a, b], only=1), 4, 5, start=a, file_position=2)
            for a, b in zip(bounds, bounds[1:])]
    while len(runs) > 1:  # join a random adjacent pair until one run is left
        i = int(rng.integers(len(runs) - 1))
        runs[i : i + 2] = [join(runs[i], runs[i + 1])]
    for a, b in zip(finish(runs[0]), whole):
        assert_identical(a, b)
    # Each fold holds exactly its valid rows: the rows of the file at position 2 start at group 2 of the pattern.
    labels = fold_of(2 * 5, len(rows), 5)
    for f, part in enumerate(whole):
        assert_same(part, Moments.of(rows[valid & (labels == f)]))


def test_chunking_does_not_change_a_bit():
    rows = sample(np.random.default_rng(6), rows=3 * TILE_ROWS + 17)
    valid = np.ones(len(rows), bool)
    whole = finish(run_of(numbered_pieces(rows, valid, []), 4, 3))
    for size in (100, 4096, TILE_ROWS + 1, 65536):
        chunked = finish(run_of(numbered_pieces(rows, valid, list(range(size, len(rows), size))), 4, 3))
        for a, b in zip(chunked, whole):
            assert_identical(a, b)


def test_files_too_short_to_fill_a_group_still_spread_over_every_fold():
    # 300 files of 3 rows, 5 folds: were every file dealt from the same group, two folds would stay empty.
    rng = np.random.default_rng(7)
    parts = None
    for position in range(300):
        rows = rng.normal(size=(3, 2))
        more = finish(run_of([(0, 3, rows, None, None)], 2, 5, file_position=position))
        parts = more if parts is None else merge_folds(parts, more)
    sizes = [p.count for p in parts]
    assert sum(sizes) == 900 and min(sizes) >= 150


def test_accumulate_over_a_stream_equals_the_whole():
    rows = sample(np.random.default_rng(4), rows=1234)
    parts = accumulate((rows[i : i + 100] for i in range(0, len(rows), 100)), 4, 3)
    labels = fold_of(0, len(rows), 3)
    for f, part in enumerate(parts):
        assert_same(part, Moments.of(rows[labels == f]))  # numpy's mean and product over exactly the fold's rows


def test_folds_are_balanced_in_every_prefix_and_depend_only_on_the_row_index():
    labels = fold_of(0, 100_000, 7)
    for n in (7, 13, 100, 99_999):
        sizes = np.bincount(labels[:n], minlength=7)
        assert sizes.max() - sizes.min() <= 1
    np.testing.assert_array_equal(fold_of(51_000, 1_000, 7), labels[51_000:52_000])
    # Not a round-robin: a rig cycling through 7 load cases still spreads over all folds.
    assert len(set(labels[::7][:200])) == 7


@pytest.mark.parametrize("folds", [127, 128, 129, 300, 5000])
def test_many_folds_get_every_label_and_balanced_sizes(folds):
    # int8 labels wrapped above 127; the dealing pattern must also stay small for large counts.
    rows = 3 * folds + 17
    labels = fold_of(0, rows, folds)
    assert labels.min() == 0 and labels.max() == folds - 1
    sizes = np.bincount(labels, minlength=folds)
    assert len(sizes) == folds and sizes.max() - sizes.min() <= 1
    np.testing.assert_array_equal(fold_of(folds + 5, 2 * folds, folds), labels[folds + 5 : 3 * folds + 5])


def test_moments_per_fold_for_many_folds_match_numpy():
    rng = np.random.default_rng(5)
    rows = sample(rng, rows=1000)
    parts = accumulate((rows[i : i + 64] for i in range(0, len(rows), 64)), 4, 300)
    labels = fold_of(0, len(rows), 300)
    for f in (0, 127, 128, 255, 299):
        assert_same(parts[f], Moments.of(rows[labels == f]))
    assert sum(p.count for p in parts) == len(rows)


def test_the_fold_pattern_of_the_largest_fold_count_is_small():
    from affix.statistics import MAX_FOLDS
    from affix.statistics.folds import _pattern, period

    assert _pattern(MAX_FOLDS, 1).nbytes <= 2 * 4 * (1 << 20) + 8 * MAX_FOLDS
    assert period(MAX_FOLDS) % MAX_FOLDS == 0 and period(5) == 5 * 8192
