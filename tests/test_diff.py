"""affix diff: every figure checked against an independent NumPy computation from the raw logs.

The reference fit is numpy.linalg.lstsq on each CSV as NumPy reads it
(numpy.loadtxt), with a column of ones for the offset; the RMS is the root of
the residuals' sum of squares over n - 1; the data's drift is NumPy's mean,
min and max of each column.  Integer coefficients are compared as NumPy
integer arrays.
"""
from __future__ import annotations

import json
import re

import numpy as np
import pytest

import colour_sensor
from conftest import run_affix

COLUMNS = ("--inputs", ",".join(colour_sensor.INPUTS), "--outputs", ",".join(colour_sensor.OUTPUTS))


def reference_fit(rows):
    y, x = rows[:, :3], rows[:, 3:]
    design = np.hstack([y, np.ones((len(y), 1))])
    solution, *_ = np.linalg.lstsq(design, x, rcond=None)
    residuals = x - design @ solution
    return solution[:3].T, solution[3], np.sqrt((residuals**2).sum(axis=0) / (len(y) - 1))


@pytest.fixture
def two_runs(tmp_path):
    """The sensor calibrated twice: the second time with 3 % less sensitivity and a new set of loads."""
    first = colour_sensor.write_log(tmp_path / "run1.csv")
    second = colour_sensor.write_log(tmp_path / "run2.csv", sensitivity=0.97, seed=8)
    for run in ("run1", "run2"):
        done = run_affix("fit", f"{run}.csv", *COLUMNS, "--out", f"{run}.model.json", cwd=tmp_path)
        assert done.returncode == 0, done.stderr
        done = run_affix("quantize", f"{run}.model.json", "--range", "0:32767", "--coef-bits", "16", "--acc-bits",
                         "32", "--output-type", "int16_t", "--lsb", "0.0078125", "--budget", "0.05",
                         "--out", f"{run}.plan.json", cwd=tmp_path)
        assert done.returncode == 0, done.stderr
    return tmp_path, first, second


def test_model_diff_matches_numpy(two_runs):
    folder, first, second = two_runs
    done = run_affix("diff", "run1.model.json", "run2.model.json", "--json", cwd=folder)
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout)
    assert result["interface_changed"] is False and result["interface_changes"] == []
    (g1, b1, rms1), (g2, b2, rms2) = reference_fit(first), reference_fit(second)
    for i, name in enumerate(colour_sensor.OUTPUTS):
        output = result["outputs"][name]
        np.testing.assert_allclose(output["gain_change"], g2[i] - g1[i], rtol=1e-8, atol=1e-12)
        np.testing.assert_allclose(output["gain_relative_change"], (g2[i] - g1[i]) / g1[i], rtol=1e-6)
        assert output["offset_change"] == pytest.approx(b2[i] - b1[i], rel=1e-6, abs=1e-9)
        # affix's RMS comes from the error covariance S_xx - A S_yx, which cancels to about one part
        # in (output spread / RMS)^2 ~ 1e7 here: agreement to 1e-7 is what double precision allows.
        assert output["rms"]["old"] == pytest.approx(rms1[i], rel=1e-7)
        assert output["rms"]["change"] == pytest.approx(rms2[i] - rms1[i], abs=1e-7 * rms1[i])
    for j, name in enumerate(colour_sensor.INPUTS):
        drift = result["inputs"][name]
        assert drift["mean"]["change"] == pytest.approx(second[:, j].mean() - first[:, j].mean(), rel=1e-12)
        span1, span2 = np.ptp(first[:, j]), np.ptp(second[:, j])
        assert drift["span"] == {"old": span1, "new": span2, "change": span2 - span1,
                                 "relative_change": (span2 - span1) / span1}


def test_plan_diff_counts_each_integer_coefficient_in_its_old_lsbs(two_runs):
    folder, _, _ = two_runs
    done = run_affix("diff", "run1.plan.json", "run2.plan.json", "--json", cwd=folder)
    assert done.returncode == 0, done.stderr
    result = json.loads(done.stdout)
    old, new = (json.loads((folder / f"run{k}.plan.json").read_text()) for k in (1, 2))
    a_old, a_new = np.array(old["coefficients"]), np.array(new["coefficients"])
    step_old = np.array(old["output_lsb"]) / 2.0 ** np.array(old["shifts"])
    step_new = np.array(new["output_lsb"]) / 2.0 ** np.array(new["shifts"])
    for i, name in enumerate(colour_sensor.OUTPUTS):
        output = result["outputs"][name]
        expected = a_new[i] * step_new[i] / step_old[i] - a_old[i]
        np.testing.assert_allclose(output["coefficient_change"], expected, rtol=1e-12)
        if old["shifts"][i] == new["shifts"][i]:  # the same scale: an exact integer difference
            assert output["coefficient_change"] == (a_new[i] - a_old[i]).tolist()
        assert output["worst_case"]["change"] == pytest.approx(
            new["worst_case_deviation"][i] - old["worst_case_deviation"][i], rel=1e-12)
        assert output["budget_margin"]["new"] == new["budget"]["margins"][i]
        np.testing.assert_allclose(output["gain_change"], np.array(new["gain"][i]) - np.array(old["gain"][i]))


@pytest.mark.bad_input("diff")
def test_an_interface_change_is_listed_apart_and_exits_5(two_runs):
    folder, _, _ = two_runs
    done = run_affix("quantize", "run2.model.json", "--range", "0:32767", "--range", "blue=0:30000", "--coef-bits",
                     "16", "--acc-bits", "32", "--output-type", "int16_t", "--lsb", "X=0.015625", "--lsb", "0.0078125",
                     "--out", "other.plan.json", cwd=folder)
    assert done.returncode == 0, done.stderr
    done = run_affix("diff", "run1.plan.json", "other.plan.json", "--json", cwd=folder)
    assert done.returncode == 5
    result = json.loads(done.stdout)
    assert result["interface_changed"] is True
    assert result["interface_changes"] == ["inputs[blue].range: [0, 32767] -> [0, 30000]",
                                           "outputs[X].lsb: 0.0078125 -> 0.015625"]
    text = run_affix("diff", "run1.plan.json", "other.plan.json", cwd=folder)
    assert text.returncode == 5 and "interface CHANGED (2)" in text.stdout
    mixed = run_affix("diff", "run1.model.json", "run2.plan.json", cwd=folder)
    assert mixed.returncode == 2 and "compare like with like: a model against a plan" in mixed.stderr


def test_a_model_against_itself_shows_no_change_and_no_signed_zero(two_runs):
    folder, _, _ = two_runs
    done = run_affix("diff", "run1.model.json", "run1.model.json", cwd=folder)
    assert done.returncode == 0, done.stderr
    assert "+0.00%" in done.stdout and "-0.00%" not in done.stdout  # a change that rounds to nothing has no sign
    assert not re.search(r"-0\b(?!\.)", done.stdout)  # nor a change of exactly zero
