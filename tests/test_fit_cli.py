"""`affix fit` as a user runs it (its bad inputs are in test_bad_input_data.py)."""
from __future__ import annotations

import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from conftest import require, run_affix

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


def big_csv(path, megabytes):
    """A CSV past PARALLEL_MIN_BYTES, so the fit takes the multi-process path: a block of rows, repeated."""
    rng = np.random.default_rng(7)
    y = rng.integers(-30000, 30000, size=(20_000, 6))
    x = y @ rng.normal(size=(6, 2)) * 1e-3 + rng.normal(size=(20_000, 2))
    block = "".join(",".join(map(str, a)) + "," + ",".join(f"{v:.6f}" for v in b) + "\n" for a, b in zip(y.tolist(), x.tolist()))
    with open(path, "w") as f:
        f.write("y1,y2,y3,y4,y5,y6,x1,x2\n")
        for _ in range(megabytes * (1 << 20) // len(block) + 1):
            f.write(block)
    return path


def children(pid) -> list[int]:
    found = []
    for task in os.listdir(f"/proc/{pid}/task"):
        try:
            with open(f"/proc/{pid}/task/{task}/children") as f:
                found += [int(c) for c in f.read().split()]
        except FileNotFoundError:  # the thread ended between the listing and the read
            continue
    return found


def has_open(pid, path) -> bool:
    """Whether the process or one of its children (the digest's, say) has the file open."""
    for process in [pid, *children(pid)]:
        try:
            for fd in os.listdir(f"/proc/{process}/fd"):
                if os.readlink(f"/proc/{process}/fd/{fd}") == str(path):
                    return True
        except FileNotFoundError:  # the process or the descriptor went away meanwhile
            pass
    return False


def group_alive(pgid) -> bool:
    try:
        os.killpg(pgid, 0)
    except ProcessLookupError:
        return False
    return True


@pytest.mark.slow
@pytest.mark.parametrize(
    "moment, delay",
    [("file opened", 0.0), ("workers started", 0.0), ("workers started", 0.1), ("workers started", 0.25)],
)
def test_ctrl_c_during_a_parallel_fit_ends_everything_in_one_line(tmp_path_factory, moment, delay):
    from affix.fit.passes import PARALLEL_MIN_BYTES

    folder = tmp_path_factory.mktemp("interrupted")
    data = tmp_path_factory.getbasetemp() / "big.csv"
    if not data.exists():
        big_csv(data, 3 * PARALLEL_MIN_BYTES >> 20)
    assert data.stat().st_size >= PARALLEL_MIN_BYTES
    # Its own process group, as a shell gives a foreground job; Ctrl-C is SIGINT to the whole group.
    command = [sys.executable, "-m", "affix", "fit", data, "--inputs", "y1,y2,y3,y4,y5,y6", "--outputs", "x1,x2", "--out", folder / "model.json"]
    cli = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, start_new_session=True)
    ready = has_open if moment == "file opened" else (lambda pid, _: len(children(pid)) >= 2)
    while not ready(cli.pid, data):
        assert cli.poll() is None, cli.stderr.read()
        time.sleep(0.002)
    time.sleep(delay)
    # A fit that ended before the signal tests nothing: the file must outlast every delay.
    assert len(children(cli.pid)) >= 2 or moment == "file opened", "the workers had finished before Ctrl-C"
    os.killpg(cli.pid, signal.SIGINT)
    sent = time.monotonic()
    out, err = cli.communicate(timeout=30)
    while group_alive(cli.pid) and time.monotonic() - sent < 30:
        time.sleep(0.01)
    took = time.monotonic() - sent
    print(f"\nCtrl-C at '{moment}' + {delay} s: everything ended after {took:.3f} s")
    assert cli.returncode == 130, err
    assert err == "affix: interrupted\n" and out == ""
    assert not group_alive(cli.pid), "a worker process outlived the command"
    assert took <= 2.0  # the bound for ending every worker
    assert list(folder.iterdir()) == []  # no model, no temporary file


@pytest.mark.parametrize("delay", [0.02, 0.05, 0.08])
def test_ctrl_c_while_python_loads_affix_is_the_same_one_line(tmp_path, delay):
    # The installed command (pip's script beside this Python) imports its entry point before the
    # package and NumPy, which take a tenth of a second or more to load: a Ctrl-C then must not end
    # in Python's traceback.  Sent this early, it may even come before Python handles SIGINT at all,
    # which ends the process by the signal, silently.
    command = shutil.which("affix", path=str(Path(sys.executable).parent))
    assert command, "the affix command is installed beside this Python (pip install -e .)"
    data = good_csv(tmp_path, rows=90)
    cli = subprocess.Popen([command, "fit", data, "--inputs", "b1,b2,b3", "--outputs", "Fx,Fz", "--out",
                            tmp_path / "model.json"], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                           start_new_session=True)
    time.sleep(delay)
    os.killpg(cli.pid, signal.SIGINT)
    out, err = cli.communicate(timeout=30)
    assert (cli.returncode, err) in ((130, "affix: interrupted\n"), (-signal.SIGINT, "")), err
    assert out == "" and not (tmp_path / "model.json").exists()


def test_several_files_fit_as_one_data_set_and_the_inputs_seen_are_shown(tmp_path):
    data = good_csv(tmp_path, rows=90)
    lines = data.read_text().splitlines()
    first = write(tmp_path / "part1.csv", "\n".join(lines[:41]) + "\n")
    second = write(tmp_path / "part2.csv", "\n".join(lines[:1] + lines[41:]) + "\n")
    result = run_affix("fit", first, second, "--inputs", "b1,b2,b3", "--outputs", "Fx,Fz", "--folds", "0",
                       "--out", tmp_path / "parts.json", "--json")
    assert result.returncode == 0, result.stderr
    run_affix("fit", data, "--inputs", "b1,b2,b3", "--outputs", "Fx,Fz", "--folds", "0", "--out", tmp_path / "whole.json")
    parts, whole = Model.load(tmp_path / "parts.json"), Model.load(tmp_path / "whole.json")
    assert parts.n_samples == whole.n_samples == 90
    np.testing.assert_allclose(parts.gain, whole.gain, rtol=1e-12, atol=1e-12 * np.abs(whole.gain).max())
    np.testing.assert_array_equal(parts.input_min, whole.input_min)
    # The hash of the files' names and digests in order: what GNU coreutils' sha256sum prints for
    # `sha256sum part1.csv part2.csv | sha256sum`, run in their folder.
    listing = subprocess.run([require("sha256sum"), "part1.csv", "part2.csv"], cwd=tmp_path, capture_output=True,
                             check=True).stdout
    hashed = subprocess.run([require("sha256sum")], input=listing, capture_output=True, check=True).stdout
    assert parts.data_sha256 == hashed.split()[0].decode()
    summary = json.loads(result.stdout)
    y = np.loadtxt(data, delimiter=",", skiprows=1)[:, :3]  # numpy's own reading of the same rows
    assert summary["input_min"] == y.min(axis=0).tolist() and summary["input_max"] == y.max(axis=0).tolist()
    table = run_affix("fit", first, second, "--inputs", "b1,b2,b3", "--outputs", "Fx,Fz", "--out", tmp_path / "t.json")
    assert f"inputs seen: b1 {y[:, 0].min():.6g}..{y[:, 0].max():.6g}" in table.stdout
