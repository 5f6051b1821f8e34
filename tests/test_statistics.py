"""Mergeable moments and per-fold parts, checked against numpy's own estimators."""
from __future__ import annotations

import numpy as np
import pytest

from affix.statistics import Moments, accumulate, fold_of, merge_all, merge_folds


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


def test_fold_parts_do_not_depend_on_chunking_or_merge_order():
    rng = np.random.default_rng(3)
    rows = sample(rng)
    whole = accumulate([rows], 4, 5)
    cuts = np.sort(rng.choice(np.arange(1, len(rows)), size=25, replace=False))
    starts = np.concatenate([[0], cuts])
    pieces = [accumulate([chunk], 4, 5, first_row=start) for chunk, start in zip(np.split(rows, cuts), starts)]
    rng.shuffle(pieces)
    merged = pieces[0]
    for piece in pieces[1:]:
        merged = merge_folds(merged, piece)
    for a, b in zip(merged, whole):
        assert_same(a, b)
    # Each fold's moments are those of exactly its rows.
    labels = fold_of(0, len(rows), 5)
    for f, part in enumerate(whole):
        assert_same(part, Moments.of(rows[labels == f]))
    assert_same(merge_all(whole, 4), Moments.of(rows))


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
