"""Every unit of a fleet log fitted from one pass equals the fit of that unit's rows alone."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import affix
from affix.errors import DataError, FitError
from affix.fleet.fit import fit_fleet
from affix.statistics import fold_of

INPUTS, OUTPUTS = ["g1", "g2", "g3"], ["Fx", "Fz"]


def fleet_log(rng, units=8, rows=400, interleaved=False) -> pd.DataFrame:
    """Units whose gains spread a few percent around one design, each with its own offset and noise."""
    frames = []
    for k in range(units):
        gain = np.array([[0.02, -0.01, 0.005], [0.001, 0.03, -0.02]]) * rng.normal(1, 0.04, (2, 3))
        y = rng.normal([2000, -1500, 300], [900, 700, 500], size=(rows, 3)).round()
        x = y @ gain.T + rng.normal([1.5, -0.7], 0.3) + rng.normal(0, 0.05, (rows, 2))
        frames.append(pd.DataFrame({"serial": f"SN{k:04d}", **dict(zip(INPUTS, y.T)), **dict(zip(OUTPUTS, x.T))}))
    frame = pd.concat(frames, ignore_index=True)
    return frame.sample(frac=1, random_state=7, ignore_index=True) if interleaved else frame


def relative(a, b):
    return np.max(np.abs(np.asarray(a) - np.asarray(b)) / np.max(np.abs(b)))


@pytest.mark.parametrize("interleaved", [False, True], ids=["unit-after-unit", "interleaved"])
def test_each_unit_equals_its_own_single_fit(tmp_path, interleaved):
    log = fleet_log(np.random.default_rng(1), interleaved=interleaved)
    path = tmp_path / "fleet.csv"
    log.to_csv(path, index=False)
    fleet = fit_fleet(path, INPUTS, OUTPUTS, "serial")
    assert fleet.units == tuple(f"SN{k:04d}" for k in range(8)) and not fleet.rejected
    for unit in fleet.units:
        rows = log[log.serial == unit]
        alone = tmp_path / f"{unit}.csv"
        rows.to_csv(alone, index=False)
        single = affix.fit(alone, INPUTS, OUTPUTS)
        model = fleet.models[unit]
        assert model.n_samples == len(rows) == fleet.rows[unit]
        for key in ("gain", "offset"):
            assert relative(getattr(model, key), getattr(single, key)) < 1e-12, key
        # The error covariance is S_xx - A S_yx: a residual 10^5 times smaller than the outputs' variance
        # keeps about 10 of the 16 digits, in the single fit as here (common practice: cancellation).
        assert relative(model.error_covariance, single.error_covariance) < 1e-9
        # Against numpy.linalg.lstsq on the unit's raw rows, with a column of ones for the offset,
        # and numpy.cov of the residuals it leaves.
        y, x = rows[INPUTS].to_numpy(), rows[OUTPUTS].to_numpy()
        solution, *_ = np.linalg.lstsq(np.column_stack([y, np.ones(len(rows))]), x, rcond=None)
        assert relative(model.gain, solution[:3].T) < 1e-9
        assert relative(model.offset, solution[3]) < 1e-9
        residuals = x - y @ model.gain.T - model.offset
        assert relative(model.error_covariance, np.cov(residuals, rowvar=False)) < 1e-9


def test_cross_validation_folds_follow_the_rows_of_the_file(tmp_path):
    """A unit's k-fold RMS: each fold is the unit's rows whose index in the file falls in it (fold_of),
    scored by a least-squares refit on the unit's other rows (numpy.linalg.lstsq)."""
    log = fleet_log(np.random.default_rng(2), units=3, rows=300, interleaved=True)
    path = tmp_path / "fleet.csv"
    log.to_csv(path, index=False)
    fleet = fit_fleet(path, INPUTS, OUTPUTS, "serial", folds=5)
    folds = fold_of(0, len(log), 5)
    for unit in fleet.units:
        mine = (log.serial == unit).to_numpy()
        squared, count = np.zeros(2), 0
        for f in range(5):
            train, test = mine & (folds != f), mine & (folds == f)
            design = np.column_stack([log.loc[train, INPUTS].to_numpy(), np.ones(train.sum())])
            solution, *_ = np.linalg.lstsq(design, log.loc[train, OUTPUTS].to_numpy(), rcond=None)
            held = np.column_stack([log.loc[test, INPUTS].to_numpy(), np.ones(test.sum())])
            squared += ((held @ solution - log.loc[test, OUTPUTS].to_numpy()) ** 2).sum(axis=0)
            count += test.sum()
        np.testing.assert_allclose(fleet.models[unit].cv_rms, np.sqrt(squared / count), rtol=1e-9)


def test_a_mapping_of_columns_fits_like_the_file(tmp_path):
    log = fleet_log(np.random.default_rng(3), units=4)
    path = tmp_path / "fleet.csv"
    log.to_csv(path, index=False)
    from_file = fit_fleet(path, INPUTS, OUTPUTS, "serial")
    in_memory = fit_fleet(log, INPUTS, OUTPUTS, "serial")
    for unit in from_file.units:
        assert relative(in_memory.models[unit].gain, from_file.models[unit].gain) < 1e-12


@pytest.mark.bad_input("fit")
def test_units_that_cannot_be_fitted_are_named(tmp_path):
    log = fleet_log(np.random.default_rng(4), units=4)
    few = log[log.serial == "SN0001"].head(4)  # 4 rows: fitting 3 inputs needs 5
    log = pd.concat([log[log.serial != "SN0001"], few], ignore_index=True)
    log.loc[log.serial == "SN0002", "g2"] = 812.0  # a gauge that never moved
    path = tmp_path / "fleet.csv"
    log.to_csv(path, index=False)
    with pytest.raises(DataError) as caught:
        fit_fleet(path, INPUTS, OUTPUTS, "serial")
    message = caught.value.message
    assert "2 unit(s) cannot be fitted: unit SN0001 (only 4 usable row(s)" in message
    assert "unit SN0002 (" in message and "column 'g2'" in message and "skip_bad_units" in message
    fleet = fit_fleet(path, INPUTS, OUTPUTS, "serial", skip_bad_units=True)
    assert sorted(fleet.rejected) == ["SN0001", "SN0002"]
    assert sorted(fleet.models) == ["SN0000", "SN0003"]
    assert fleet.units == ("SN0000", "SN0001", "SN0002", "SN0003")


@pytest.mark.bad_input("fit")
def test_units_solved_together_fare_as_each_alone(tmp_path):
    """The fleet solves all its units in one stack: each unit's model, error or warning is exactly
    what its own moments give alone, whatever the units beside it (a singular one, a nearly collinear
    one, one whose cross-validation split is singular)."""
    import warnings

    from affix.fit.estimator import files_moments, model_from_parts

    rng = np.random.default_rng(8)
    log = fleet_log(rng, units=6, rows=400)
    folds = fold_of(0, len(log), 5)
    g1, g2 = log["g1"].to_numpy(), log["g2"].to_numpy()
    exact = (log.serial == "SN0001").to_numpy()
    log.loc[exact, "g3"] = g1[exact] + g2[exact]  # singular: no fit at all
    near = (log.serial == "SN0002").to_numpy()
    log.loc[near, "g3"] = g1[near] - g2[near] + rng.normal(0, 2.0, near.sum())  # fitted, with a warning
    split = (log.serial == "SN0004").to_numpy()
    log.loc[split & (folds != 2), "g3"] = 0.0  # g3 moves only in fold 2: training without it is singular
    path = tmp_path / "fleet.csv"
    log.to_csv(path, index=False)
    fleet = fit_fleet(path, INPUTS, OUTPUTS, "serial", skip_bad_units=True)
    assert sorted(fleet.rejected) == ["SN0001", "SN0004"] and len(fleet.warnings) == 1
    assert "do not determine the gains" in fleet.rejected["SN0001"]
    assert "cross-validation split leaves the inputs singular" in fleet.rejected["SN0004"]
    parts, _, sha256 = files_moments([path], INPUTS + OUTPUTS, 5, None, False, labels="serial")
    for unit in fleet.units:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                alone = model_from_parts(parts.moments(unit), INPUTS, OUTPUTS, ridge=0.0, folds=5,
                                         data_sha256=sha256, dropped_rows=0)
            except FitError as exc:
                assert fleet.rejected[unit] == exc.marked
                continue
        assert [f"unit {unit}: {w.message}" for w in caught] == [w for w in fleet.warnings if unit in w]
        model = fleet.models[unit]
        for key in ("gain", "offset", "error_covariance", "cv_rms", "input_covariance"):
            np.testing.assert_array_equal(getattr(model, key), getattr(alone, key), err_msg=key)
        assert model.condition_number == alone.condition_number and model.n_samples == alone.n_samples


@pytest.mark.bad_input("fit")
def test_unit_ids_differing_only_in_case_are_refused(tmp_path):
    log = fleet_log(np.random.default_rng(5), units=2)
    log.loc[log.serial == "SN0001", "serial"] = "sn0000"
    path = tmp_path / "fleet.csv"
    log.to_csv(path, index=False)
    with pytest.raises(DataError, match="'SN0000' and 'sn0000' differ only in case"):
        fit_fleet(path, INPUTS, OUTPUTS, "serial")


@pytest.mark.bad_input("fit")
def test_the_unit_column_is_not_an_input(tmp_path):
    from affix.errors import UsageError

    with pytest.raises(UsageError, match="unit_column: the unit column 'g1' cannot also be an input"):
        fit_fleet(fleet_log(np.random.default_rng(6), units=1), INPUTS, OUTPUTS, "g1")
