"""'affix quantize' as a user runs it: the plan file, the table, and one-line errors that write nothing.

The references here are the project's own contract for users (one stderr
line, exit 2 for bad input and 3 for an unmet budget, no output file on
error: common practice for command-line tools, cf. POSIX utility conventions
for a non-zero exit on error) and the JSON standard (RFC 8259) for --json.
"""
from __future__ import annotations

import json

import numpy as np
import pytest
from conftest import run_affix

from affix.model import Model
from affix.plan import Plan


@pytest.fixture
def model_file(tmp_path):
    rng = np.random.default_rng(0)
    rows = np.clip(rng.normal(1500, 400, size=(2000, 3)), 0, 4095).round()
    model = Model(
        inputs=["bridge_a", "bridge_b", "temp"],
        outputs=["force", "torque"],
        gain=rng.normal(size=(2, 3)) * 1e-3,
        offset=[0.5, -1.0],
        cv_rms=[0.02, 0.01],
        n_samples=len(rows),
        input_mean=rows.mean(axis=0),
        input_covariance=np.cov(rows, rowvar=False),
    )
    path = tmp_path / "model.json"
    model.save(path)
    return path


def test_quantize_writes_a_valid_plan_and_prints_the_table(model_file, tmp_path):
    out = tmp_path / "plan.json"
    # A negative range written as a separate word: cli.py glues it to the option.
    result = run_affix("quantize", model_file, "--range", "-2048:2047", "--range", "temp=0:4095",
                       "--budget", "force=0.01,torque=0.01", "--out", out)
    assert result.returncode == 0, result.stderr
    plan = Plan.load(out)
    assert plan.input_ranges == ((-2048, 2047), (-2048, 2047), (0, 4095))
    assert plan.model_sha256 == Model.load(model_file).sha256
    assert plan.budget["kind"] == "worst-case" and plan.budget["met"]
    for name, shift in zip(plan.outputs, plan.shifts):
        line = next(line for line in result.stdout.splitlines() if line.startswith(name + " "))
        assert f" {shift} " in line
    assert "headroom" in result.stdout and "random box points" in result.stdout


def test_json_summary_matches_the_written_plan(model_file, tmp_path):
    out = tmp_path / "plan.json"
    result = run_affix("quantize", model_file, "--range", "0:4095", "--coef-bits", "16", "--acc-bits", "32",
                       "--lsb", "force=0.001", "--rounding", "floor", "--out", out, "--json")
    assert result.returncode == 0, result.stderr
    summary = json.loads(result.stdout)
    plan = Plan.load(out)
    assert summary["plan_sha256"] == plan.sha256
    assert (summary["coef_bits"], summary["acc_bits"], summary["rounding"]) == (16, 32, "floor")
    assert summary["output_lsb"][0] == 0.001


def test_data_measures_the_integer_reference_on_calibration_rows(model_file, tmp_path):
    rng = np.random.default_rng(1)
    rows = np.clip(rng.normal(1500, 400, size=(3000, 3)), 0, 4095).round()
    rows[:5, 0] = 5000  # five rows beyond the box: counted, left out
    data = tmp_path / "cal.csv"
    lines = ["temp,bridge_b,noise,bridge_a"] + [f"{c},{b},0.5,{a}" for a, b, c in rows]
    data.write_text("\n".join(lines) + "\n")
    out = tmp_path / "plan.json"
    result = run_affix("quantize", model_file, "--range", "0:4095", "--data", data, "--out", out)
    assert result.returncode == 0, result.stderr
    measured = Plan.load(out).measured["calibration"]
    assert measured["rows"] == 2995 and measured["rows_outside_box"] == 5
    assert "2995 rows in the box (5 outside, left out)" in result.stdout
    missing = run_affix("quantize", model_file, "--range", "0:4095", "--data", tmp_path / "none.csv",
                        "--out", tmp_path / "other.json")
    assert missing.returncode == 2 and "none.csv" in missing.stderr and not (tmp_path / "other.json").exists()


BAD_INPUT = {
    "inverted range": (["--range", "4095:0"], 2, "inverted"),
    "no input type holds the box": (["--range", "-1:4294967295"], 2, "no single input type"),
    "range beyond every type": (["--range", "0:5000000000"], 2, "no single input type"),
    "lsb zero": (["--range", "0:4095", "--lsb", "0"], 2, "positive finite"),
    "lsb nan": (["--range", "0:4095", "--lsb", "force=nan"], 2, "positive finite"),
    "lsb too fine for any output type": (["--range", "0:4095", "--lsb", "1e-15"], 2, "beyond int32_t"),
    "unknown input name": (["--range", "0:4095", "--range", "nope=0:5"], 2, "unknown name"),
    "unknown output name": (["--range", "0:4095", "--lsb", "nope=0.1"], 2, "unknown name"),
    "missing range": (["--range", "temp=0:4095"], 2, "no range for input"),
    "range not integer": (["--range", "0:40.5"], 2, "LO:HI in integer counts"),
    "unmeetable budget": (["--range", "0:4095", "--budget", "force=1e-15"], 3, "best achievable: force"),
    "unmeetable rms budget": (["--range", "0:4095", "--budget-rms", "0"], 3, "best achievable"),
    "both budgets": (["--range", "0:4095", "--budget", "0.1", "--budget-rms", "1%"], 2, "not both"),
}


@pytest.mark.bad_input("quantize")
@pytest.mark.parametrize("case", BAD_INPUT)
def test_bad_input_is_one_line_nonzero_and_writes_no_plan(case, model_file, tmp_path):
    arguments, status, fragment = BAD_INPUT[case]
    out = tmp_path / "plan.json"
    result = run_affix("quantize", model_file, *arguments, "--out", out)
    assert result.returncode == status
    assert result.stderr.startswith("affix: error: ") and result.stderr.count("\n") == 1, result.stderr
    assert fragment in result.stderr
    assert not out.exists()


MODEL_DEFECTS = {
    "wrong keys": {"format": "affix.model/1", "inputs": ["a"], "outputs": ["x"], "gains": [[1.0]], "offset": [0]},
    "nan gain": {"format": "affix.model/1", "inputs": ["a"], "outputs": ["x"], "gain": [[float("nan")]], "offset": [0]},
    "shape mismatch": {"format": "affix.model/1", "inputs": ["a", "b"], "outputs": ["x"], "gain": [[1.0]], "offset": [0]},
    "not a model": {"format": "affix.plan/1"},
}


@pytest.mark.bad_input("quantize")
@pytest.mark.parametrize("case", MODEL_DEFECTS)
def test_a_file_that_is_not_a_model_is_one_line_and_writes_no_plan(case, tmp_path):
    path = tmp_path / "model.json"
    path.write_text(json.dumps(MODEL_DEFECTS[case]))  # json writes float("nan") as NaN
    out = tmp_path / "plan.json"
    result = run_affix("quantize", path, "--range", "0:100", "--out", out)
    assert result.returncode == 2
    assert result.stderr.startswith(f"affix: error: {path}") and result.stderr.count("\n") == 1, result.stderr
    assert not out.exists()


@pytest.mark.bad_input("quantize")
def test_rms_budget_needs_the_models_own_rms(tmp_path):
    path = tmp_path / "adopted.json"
    Model(inputs=["a"], outputs=["x"], gain=[[0.5]], offset=[0.0]).save(path)
    result = run_affix("quantize", path, "--range", "0:255", "--budget-rms", "1%", "--out", tmp_path / "p.json")
    assert result.returncode == 2 and "--budget-rms" in result.stderr
    ok = run_affix("quantize", path, "--range", "0:255", "--out", tmp_path / "p.json")
    assert ok.returncode == 0 and "uniform over the box" in ok.stdout
