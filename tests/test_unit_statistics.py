"""Per-unit statistics of a fleet log: every unit's moments from one pass, checked against numpy on each
unit's own rows, whatever the chunking, the merge order, the workers or the rows left out."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from affix.errors import DataError
from affix.fit.passes import file_moments
from affix.statistics import Moments, accumulate, fold_of, unit_shares
from affix.statistics.units import unit_order


def fleet_rows(rng, units=12, rows=4000, interleaved=False):
    values = rng.normal(loc=[3.0e4, -1.2e4, 0.0, 5.0], scale=[3.0, 40.0, 1e-3, 1.0], size=(rows, 4))
    labels = np.array([f"unit-{k}" for k in range(units)])
    per_row = labels[rng.integers(0, units, rows)] if interleaved else np.repeat(labels, -(-rows // units))[:rows]
    return values, per_row


def assert_unit_matches_numpy(moments, unit, values, labels, first_row=0, folds=5, rtol=1e-11):
    """Each fold's moments equal numpy's mean, scatter and extremes of exactly that unit's rows in that fold."""
    row_fold = fold_of(first_row, len(values), folds)
    for f, part in enumerate(moments.moments(unit)):
        mine = values[(labels == unit) & (row_fold == f)]
        assert part.count == len(mine)
        if not len(mine):
            continue
        np.testing.assert_allclose(part.mean, mine.mean(axis=0), rtol=1e-13, atol=1e-15 * np.abs(mine).max())
        centred = mine - mine.mean(axis=0)
        scatter = centred.T @ centred  # numpy's two-pass scatter of the unit's rows
        np.testing.assert_allclose(part.scatter, scatter, rtol=rtol, atol=rtol * np.abs(scatter).max())
        np.testing.assert_array_equal(part.low, mine.min(axis=0))
        np.testing.assert_array_equal(part.high, mine.max(axis=0))


@pytest.mark.parametrize("interleaved", [False, True], ids=["unit-after-unit", "interleaved"])
def test_unit_moments_equal_numpy_per_unit_and_fold(interleaved):
    # Both ways of summing the products: one BLAS call per group (long runs of one unit) and the batched
    # outer products (many units interleaved row by row).
    values, labels = fleet_rows(np.random.default_rng(1), units=40 if interleaved else 6, interleaved=interleaved)
    moments = accumulate([(values, labels, 0)], 4, 5)
    assert set(moments.units) == set(labels)
    for unit in moments.units:
        assert_unit_matches_numpy(moments, unit, values, labels)


def test_unit_moments_do_not_depend_on_chunking_or_merge_order():
    rng = np.random.default_rng(2)
    values, labels = fleet_rows(rng, interleaved=True)
    whole = accumulate([(values, labels, 0)], 4, 5)
    cuts = np.sort(rng.choice(np.arange(1, len(values)), size=17, replace=False))
    starts = np.concatenate([[0], cuts])
    pieces = [unit_shares(v, u, start, 5) for v, u, start in
              zip(np.split(values, cuts), np.split(labels, cuts), starts)]
    rng.shuffle(pieces)
    merged = pieces[0]
    for piece in pieces[1:]:
        merged = merged.merge(piece)
    assert merged.units == whole.units  # one order whatever the merges: by unit_order
    np.testing.assert_array_equal(merged.count, whole.count)
    np.testing.assert_allclose(merged.mean, whole.mean, rtol=1e-13)
    np.testing.assert_allclose(merged.scatter, whole.scatter, rtol=1e-10, atol=1e-10 * np.abs(whole.scatter).max())
    np.testing.assert_array_equal(merged.low, whole.low)
    np.testing.assert_array_equal(merged.high, whole.high)


def test_rows_left_out_keep_the_folds_of_the_others():
    """A row's fold is fixed by its index in the file: rows given by index fall in the folds they would
    have had with every row present."""
    values, labels = fleet_rows(np.random.default_rng(3), rows=3000)
    keep = np.ones(len(values), bool)
    keep[::7] = False
    moments = unit_shares(values[keep], labels[keep], np.flatnonzero(keep), 5)
    row_fold = fold_of(0, len(values), 5)
    for unit in moments.units:
        for f, part in enumerate(moments.moments(unit)):
            assert part.count == np.count_nonzero(keep & (labels == unit) & (row_fold == f))


def test_unit_order_reads_digits_as_numbers():
    assert sorted(["unit-10", "unit-9", "A2", "a10", "0042", "7"], key=unit_order) == \
        ["7", "0042", "A2", "a10", "unit-9", "unit-10"]


def test_csv_unit_column_in_parallel_workers_equals_one_pass(tmp_path):
    """The parallel CSV pass (one worker per byte range) gives the units' moments of the serial pass."""
    values, labels = fleet_rows(np.random.default_rng(4), rows=20_000, interleaved=True)
    path = tmp_path / "fleet.csv"
    frame = pd.DataFrame(values, columns=["a", "b", "c", "d"])
    frame.insert(2, "serial", labels)
    frame.to_csv(path, index=False)
    serial, _, digest = file_moments(path, ["a", "b", "c", "d"], 5, chunk_rows=1000, drop_invalid=False,
                                     workers=1, labels="serial")
    parallel, _, same = file_moments(path, ["a", "b", "c", "d"], 5, chunk_rows=1000, drop_invalid=False,
                                     workers=3, labels="serial")
    assert digest == same and serial.units == parallel.units
    np.testing.assert_array_equal(serial.count, parallel.count)
    np.testing.assert_allclose(parallel.scatter, serial.scatter, rtol=1e-10, atol=1e-10 * np.abs(serial.scatter).max())
    written = pd.read_csv(path, dtype={"serial": str})  # pandas' own reading of the file
    for unit in ("unit-0", "unit-11"):
        assert_unit_matches_numpy(parallel, unit, written[["a", "b", "c", "d"]].to_numpy(),
                                  written["serial"].to_numpy())


def test_unit_ids_stay_text_as_written(tmp_path):
    path = tmp_path / "fleet.csv"
    path.write_text("unit,y,x\n0042,1,2\n0042,2,4\n42,3,5\n")
    moments, _, _ = file_moments(path, ["y", "x"], 0, chunk_rows=10, drop_invalid=False, labels="unit")
    assert moments.units == ("0042", "42")
    assert moments.rows() == {"0042": 2, "42": 1}


@pytest.mark.bad_input("fit")
@pytest.mark.parametrize("cell, message", [
    ("a/b", "unit id 'a/b' is not"),
    ("..", "unit id '..' is not"),
    (".hidden", "unit id '.hidden' is not"),
    ("x" * 33, "is not 1 to 32 ASCII"),
    ("caf\u00e9", "is not 1 to 32 ASCII"),
])
def test_unsafe_unit_ids_are_refused_at_their_line(tmp_path, cell, message):
    path = tmp_path / "fleet.csv"
    path.write_text(f"unit,y,x\nok,1,2\nok,2,3\n{cell},3,4\n", encoding="utf-8")
    with pytest.raises(DataError, match="line 4, column 'unit'") as caught:
        file_moments(path, ["y", "x"], 0, chunk_rows=10, drop_invalid=False, labels="unit")
    assert message in caught.value.message


@pytest.mark.bad_input("fit")
def test_an_empty_unit_cell_is_an_invalid_row(tmp_path):
    path = tmp_path / "fleet.csv"
    path.write_text("unit,y,x\nA,1,2\n,2,3\nA,3,4\n")
    with pytest.raises(DataError, match="line 3: 1 row.*column 'unit'"):
        file_moments(path, ["y", "x"], 0, chunk_rows=10, drop_invalid=False, labels="unit")
    moments, dropped, _ = file_moments(path, ["y", "x"], 0, chunk_rows=10, drop_invalid=True, labels="unit")
    assert dropped == 1 and moments.rows() == {"A": 2}


@pytest.mark.bad_input("fit")
def test_array_file_unit_ids_are_whole_numbers(tmp_path):
    good = tmp_path / "fleet.npy"
    np.save(good, np.array([[7, 1.0, 2.0], [7, 2.0, 3.5], [12, 3.0, 4.0]]))
    moments, _, _ = file_moments(good, ["1", "2"], 0, chunk_rows=10, drop_invalid=False, labels="0")
    assert moments.units == ("7", "12")
    bad = tmp_path / "bad.npy"
    np.save(bad, np.array([[7, 1.0, 2.0], [7.5, 2.0, 3.5]]))
    with pytest.raises(DataError, match="row 2, column '0': unit id 7.5 is not a whole number"):
        file_moments(bad, ["1", "2"], 0, chunk_rows=10, drop_invalid=False, labels="0")


def test_one_unit_merged_equals_the_moments_of_its_rows():
    values, labels = fleet_rows(np.random.default_rng(5), units=3)
    moments = accumulate([(values, labels, 0)], 4, 0)
    assert moments.folds == 1
    for unit in moments.units:
        (part,) = moments.moments(unit)
        reference = Moments.of(values[labels == unit])
        np.testing.assert_allclose(part.scatter, reference.scatter, rtol=1e-11, atol=1e-11 * np.abs(reference.scatter).max())
