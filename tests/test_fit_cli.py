"""`affix fit` as a user runs it, including every kind of bad input."""
from __future__ import annotations

import json
import re

import numpy as np
import pytest
from conftest import run_affix

from affix.model import Model


def write(path, text):
    path.write_text(text)
    return path


def good_csv(tmp_path, rows=60):
    rng = np.random.default_rng(1)
    y = rng.integers(-2000, 2000, size=(rows, 3))
    x = y @ [[0.01, 0.0], [0.002, -0.03], [0.0, 0.5]] + rng.normal(size=(rows, 2)) * 0.1
    lines = ["b1,b2,b3,Fx,Fz"] + [f"{a},{b},{c},{u:.6f},{v:.6f}" for (a, b, c), (u, v) in zip(y, x)]
    return write(tmp_path / "cal.csv", "\n".join(lines) + "\n")


def test_fit_writes_the_model_and_prints_a_table(tmp_path):
    data = good_csv(tmp_path)
    out = tmp_path / "model.json"
    result = run_affix("fit", data, "--inputs", "b1,b2,b3", "--outputs", "Fx,Fz", "--out", out)
    assert result.returncode == 0, result.stderr
    model = Model.load(out)
    assert model.inputs == ("b1", "b2", "b3") and model.outputs == ("Fx", "Fz") and model.n_samples == 60
    saved = json.loads(out.read_text())
    for key in ("inputs", "outputs", "gain", "offset", "error_covariance", "cv_rms", "n_samples", "data_sha256", "tool_version"):
        assert saved[key] is not None, key
    lines = result.stdout.splitlines()
    assert lines[1].split()[:3] == ["output", "rms", "cv"]
    assert lines[2].startswith("Fx") and "b1" in lines[2] and lines[3].startswith("Fz") and "b3" in lines[3]


def test_fit_json_summary(tmp_path):
    out = tmp_path / "model.json"
    result = run_affix("fit", good_csv(tmp_path), "--inputs", "b1,b2,b3", "--outputs", "Fx,Fz", "--out", out, "--json", "--folds", "3")
    assert result.returncode == 0, result.stderr
    summary = json.loads(result.stdout)
    model = Model.load(out)
    assert summary["folds"] == 3 and summary["data_sha256"] == model.data_sha256
    assert [r["output"] for r in summary["per_output"]] == ["Fx", "Fz"]
    np.testing.assert_allclose([r["cv_rms"] for r in summary["per_output"]], model.cv_rms)
    assert summary["per_output"][1]["largest_gains"][0]["input"] == "b3"


def test_drop_invalid_says_how_many_rows_it_left_out(tmp_path):
    text = good_csv(tmp_path).read_text().splitlines()
    text[5] = "1,2,3,nan,4"
    text[9] = "1,2,,5,4"
    data = write(tmp_path / "holes.csv", "\n".join(text) + "\n")
    out = tmp_path / "model.json"
    result = run_affix("fit", data, "--inputs", "b1,b2,b3", "--outputs", "Fx,Fz", "--out", out, "--drop-invalid")
    assert result.returncode == 0, result.stderr
    assert result.stderr.strip() == "affix: note: left out 2 row(s) holding NaN, infinite or empty values"
    assert Model.load(out).dropped_rows == 2 and Model.load(out).n_samples == 58


def csv_with(tmp_path, edits):
    """The good log with some lines (0 = header) replaced."""
    text = good_csv(tmp_path).read_text().splitlines()
    for index, line in edits.items():
        text[index] = line
    return write(tmp_path / "edited.csv", "\n".join(text) + "\n")


BAD_INPUTS = {
    # name: (make data file, extra arguments, what the one line must say)
    "missing file": (lambda p: p / "absent.csv", [], r"absent.csv: no such file"),
    "missing column": (good_csv, ["--inputs", "b1,b9"], r"no column 'b9' \(available: b1, b2, b3, Fx, Fz\)"),
    "non-numeric cell": (lambda p: csv_with(p, {7: "1,2,x3,4,5"}), [], r"edited.csv, row 7, column 'b3': not a number: 'x3'"),
    "nan and inf": (
        lambda p: csv_with(p, {4: "1,2,3,nan,5", 8: "1,2,inf,4,5"}),
        [],
        r"row 4: 2 row\(s\) hold NaN, infinite or empty values, the first in column 'Fx'; .*--drop-invalid",
    ),
    "too few rows": (lambda p: write(p / "short.csv", "b1,b2,b3,Fx,Fz\n1,2,3,4,5\n2,3,1,5,6\n3,1,2,6,7\n"), [], r"only 3 usable row\(s\); fitting 3 input\(s\) needs at least 5"),
    "header only": (lambda p: write(p / "empty.csv", "b1,b2,b3,Fx,Fz\n"), [], r"only 0 usable row\(s\)"),
    "constant input": (
        lambda p: write(p / "flat.csv", "b1,b2,b3,Fx,Fz\n" + "".join(f"{i},{i * i % 7},4,{i},{-i}\n" for i in range(20))),
        [],
        r"flat.csv, column 'b3': input column is constant \(4 in every row\)",
    ),
    "duplicate header name": (lambda p: write(p / "dup.csv", "b1,b2,b1,Fx,Fz\n" + "1,2,3,4,5\n" * 9), [], r"names column 'b1' 2 times"),
    "input listed twice": (good_csv, ["--inputs", "b1,b2,b1"], r"column 'b1' is listed twice in the inputs"),
    "output also an input": (good_csv, ["--outputs", "Fx,b2"], r"column 'b2' is both an input and an output"),
    "singular inputs": (
        lambda p: write(p / "twin.csv", "b1,b2,b3,Fx,Fz\n" + "".join(f"{i},{2 * i},{i * i % 5},{i},{-i}\n" for i in range(20))),
        [],
        r"inputs b1, b2 are nearly collinear .* pass --ridge=1e-05",
    ),
    "bad folds": (good_csv, ["--folds", "1"], r"folds: must be 0 \(no cross-validation\) or at least 2"),
    "negative ridge": (good_csv, ["--ridge", "-0.5"], r"ridge: must be a finite number >= 0"),
    "npz of unequal columns": (
        lambda p: (np.savez(p / "cols.npz", b1=np.ones(9), b2=np.ones(9), b3=np.ones(8), Fx=np.ones(9), Fz=np.ones(9)), p / "cols.npz")[1],
        [],
        r"the column arrays differ in length",
    ),
}


@pytest.mark.parametrize("case", sorted(BAD_INPUTS))
def test_bad_input_is_one_line_exit_2_and_no_file(tmp_path, case):
    make, extra, expected = BAD_INPUTS[case]
    data = make(tmp_path)
    out = tmp_path / "model.json"
    options = {"--inputs": "b1,b2,b3", "--outputs": "Fx,Fz"}
    options.update(dict(zip(extra[::2], extra[1::2])))
    result = run_affix("fit", data, *[a for kv in options.items() for a in kv], "--out", out)
    assert result.returncode == 2, result.stderr
    assert "Traceback" not in result.stderr and result.stdout == ""
    lines = result.stderr.splitlines()
    assert len(lines) == 1 and lines[0].startswith("affix: error: "), result.stderr
    assert re.search(expected, lines[0]), lines[0]
    assert not out.exists() and not list(tmp_path.glob(".model.json*"))


def test_collinear_inputs_are_one_warning_line_and_the_fit_goes_ahead(tmp_path):
    from statsmodels.datasets import longley  # NIST's Longley data, bundled with statsmodels

    data = tmp_path / "longley.csv"
    longley.load_pandas().data.to_csv(data, index=False)
    out = tmp_path / "model.json"
    result = run_affix("fit", data, "--inputs", "GNPDEFL,GNP,UNEMP,ARMED,POP,YEAR", "--outputs", "TOTEMP", "--out", out, "--folds", "4")
    assert result.returncode == 0, result.stderr
    (line,) = result.stderr.splitlines()
    # Longley's series that all trend with the year carry its famous collinearity (common practice).
    assert re.match(r"affix: warning: inputs .*GNP, .*POP, YEAR are nearly collinear \(condition number ", line), line
    assert Model.load(out).condition_number > 1e3
