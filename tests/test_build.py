"""affix build: the recalibration loop from a project file, all or nothing, within the pinned interface.

External references: hashlib (SHA-256 of every file, the build record's
claim checked independently), filecmp for byte-for-byte equality, and the
C compiler that the verification step builds the emitted code with.  The
sensor is an invented one (tests/colour_sensor.py).
"""
from __future__ import annotations

import filecmp
import hashlib
import json
import re
import shutil

import numpy as np
import pytest

import colour_sensor
from affix.errors import VerificationError
from affix.interface import Interface
from conftest import require, run_affix


def snapshot(folder) -> dict:
    """Every file under ``folder`` with its SHA-256 (hashlib, not affix's own hashing)."""
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def project(tmp_path, **kwargs):
    require("gcc")  # the verification step builds the emitted C
    colour_sensor.write_log(tmp_path / "colour.csv")
    return colour_sensor.write_project(tmp_path, **kwargs)


def build(folder, *args):
    return run_affix("build", *args, cwd=folder)


def test_a_build_runs_every_step_and_records_what_it_was_made_from(tmp_path):
    project(tmp_path)
    done = build(tmp_path)
    assert done.returncode == 0, done.stderr
    steps = [line.split()[0] for line in done.stdout.splitlines() if not line.startswith(" ")]
    assert steps == ["fit", "quantize", "emit", "verify", "report", "built"]
    out = tmp_path / "build"
    record = json.loads((out / "build.json").read_text())
    assert record["format"] == "affix.build/1" and record["name"] == "colour"
    assert record["project"] == "../affix.toml"  # relative to the build folder
    assert record["data"] == [{"path": "colour.csv",
                               "sha256": hashlib.sha256((tmp_path / "colour.csv").read_bytes()).hexdigest()}]
    # The default target is the host: its figures measured on the emulated x86-64 core.
    assert record["target"] == "host" and record["target_figures"]["flash_bytes"] > 0
    assert record["target_figures"]["instructions_per_evaluation"] > 0
    assert [s["step"] for s in record["steps"]] == ["fit", "quantize", "emit", "verify", "report"]
    # Every other file of the folder, with its hash.
    files = snapshot(out)
    del files["build.json"]
    assert record["files"] == files
    assert set(files) == {"model.json", "plan.json", "colour.h", "colour.c", "colour.manifest.json",
                          "verification.json", "report.html"}
    # The report was drawn from the staged folder before it moved into place, with the data found.
    report = (out / "report.html").read_text()
    assert "No calibration data could be used" not in report and "no such file" not in report
    header = (out / "colour.h").read_text()
    assert f"#define COLOUR_INTERFACE_ID {record['interface_id']}UL" in header
    pinned = json.loads((tmp_path / "colour.interface.json").read_text())
    assert pinned["interface_id"] == record["interface_id"]
    verification = json.loads((out / "verification.json").read_text())
    assert verification["passed"] and verification["evaluations"] > 20_000
    assert {r["vector_set"] for r in verification["results"]} >= {"corners", "random", "calibration"}


def test_two_builds_of_the_same_inputs_are_identical_byte_for_byte_also_from_another_folder(tmp_path):
    first = tmp_path / "first"
    first.mkdir()
    project(first)
    assert build(first).returncode == 0
    second = tmp_path / "elsewhere" / "second"
    shutil.copytree(first, second, ignore=shutil.ignore_patterns("build", "*.interface.json"))
    # Built from another working folder, by a path to the project file.
    assert run_affix("build", second / "affix.toml", cwd=tmp_path).returncode == 0
    assert snapshot(first / "build") == snapshot(second / "build")
    assert filecmp.cmp(first / "colour.interface.json", second / "colour.interface.json", shallow=False)
    for text in map(lambda p: p.read_text(), (second / "build").iterdir()):
        assert str(tmp_path) not in text and "/tmp" not in text  # no absolute path in any file
    # A rebuild in place plans within the interface the first build pinned: the same files, and the
    # diff against the previous build (which the report shows too); the next rebuild repeats it exactly.
    assert build(first).returncode == 0
    again = snapshot(first / "build")
    recorded = ("diff.json", "build.json", "report.html")
    first_build = {k: v for k, v in snapshot(second / "build").items() if k not in recorded}
    assert {k: v for k, v in again.items() if k not in recorded} == first_build
    assert "diff.json" in again
    assert build(first).returncode == 0
    assert snapshot(first / "build") == again


def test_a_drifted_recalibration_keeps_the_pinned_interface_and_changes_only_coefficients(tmp_path):
    project(tmp_path)
    assert build(tmp_path).returncode == 0
    out = tmp_path / "build"
    before_header = (out / "colour.h").read_text()
    before_plan = json.loads((out / "plan.json").read_text())
    # The photodiodes lost 3 % of their sensitivity: a new rig log of the same sensor.
    colour_sensor.write_log(tmp_path / "colour.csv", sensitivity=0.97, seed=8)
    done = build(tmp_path)
    assert done.returncode == 0, done.stderr
    assert "diff      against the previous build: interface unchanged" in done.stdout
    after_header = (out / "colour.h").read_text()
    after_plan = json.loads((out / "plan.json").read_text())
    macros = re.compile(r"^#define COLOUR_(?:lsb_\w+|INTERFACE_ID) .*$", re.M)
    assert macros.findall(after_header) == macros.findall(before_header)  # same scales, same fingerprint
    assert after_plan["output_lsb"] == before_plan["output_lsb"]
    assert after_plan["coefficients"] != before_plan["coefficients"]
    verification = json.loads((out / "verification.json").read_text())
    assert verification["passed"] and verification["mismatches"] == 0  # bit-exact on the new coefficients
    changes = json.loads((out / "diff.json").read_text())
    assert changes["interface_changed"] is False
    # A 3 % loss of sensitivity raises every gain by about 1/0.97 - 1 = 3.1 %.
    for output in changes["outputs"].values():
        diagonal = [r for r in output["gain_relative_change"] if r is not None]
        assert max(diagonal) == pytest.approx(1 / 0.97 - 1, abs=0.01)


def test_a_recalibration_beyond_the_pinned_interface_exits_5_and_keeps_the_last_build(tmp_path):
    project(tmp_path)
    assert build(tmp_path).returncode == 0
    out = tmp_path / "build"
    kept, pin = snapshot(out), (tmp_path / "colour.interface.json").read_text()
    # 0.8x sensitivity: X now spans more than int16_t holds at its pinned lsb (Q8.7).
    colour_sensor.write_log(tmp_path / "colour.csv", sensitivity=0.8, seed=9)
    done = build(tmp_path)
    assert done.returncode == 5
    error = done.stderr.strip().splitlines()[-1]
    assert error.startswith("affix: error: the new calibration does not fit the interface pinned in ")
    assert "X: " in error and "beyond int16_t at lsb 0.0078125" in error and "--repin" in error
    assert snapshot(out) == kept and (tmp_path / "colour.interface.json").read_text() == pin
    # Accepting the change on purpose: the summary names it, and the fingerprint moves.
    done = build(tmp_path, "--repin")
    assert done.returncode == 0, done.stderr
    assert "interface change: outputs[X].lsb: 0.0078125 -> 0.015625" in done.stdout
    assert "REPINNED" in done.stdout
    new_pin = Interface.load(tmp_path / "colour.interface.json")
    assert new_pin.id != json.loads(pin)["interface_id"]
    assert "#define COLOUR_lsb_X 0.015625" in (out / "colour.h").read_text()
    assert json.loads((out / "diff.json").read_text())["interface_changed"] is True


def test_a_changed_declaration_in_the_project_is_an_interface_change(tmp_path):
    path = project(tmp_path)
    assert build(tmp_path).returncode == 0
    kept = snapshot(tmp_path / "build")
    path.write_text(path.read_text().replace("range = [0, 32767]", "range = [0, 30000]", 1))
    done = build(tmp_path)
    assert done.returncode == 5
    assert "inputs[red].range: [0, 32767] -> [0, 30000]" in done.stderr
    assert snapshot(tmp_path / "build") == kept
    # A renamed estimator is found through the previous build's name: the old pin still applies.
    path.write_text(path.read_text().replace('name = "colour"', 'name = "tint"'))
    done = build(tmp_path)
    assert done.returncode == 5 and 'name: "colour" -> "tint"' in done.stderr


def test_a_failed_step_leaves_the_previous_build_untouched(tmp_path, monkeypatch):
    path = project(tmp_path)
    assert build(tmp_path).returncode == 0
    out = tmp_path / "build"
    kept = snapshot(out)
    # The fit fails: a row without a value.
    (tmp_path / "colour.csv").write_text((tmp_path / "colour.csv").read_text() + "1,2,,4,5,6\n")
    done = build(tmp_path)
    assert done.returncode == 2 and "colour.csv, line 502" in done.stderr
    assert snapshot(out) == kept
    # Quantize fails after the fit has written its model into the staging folder: within the
    # pinned interface no integer code meets this budget (exit 5, as for any pinned plan that fails).
    colour_sensor.write_log(tmp_path / "colour.csv")
    path.write_text(path.read_text().replace('name = "X"', 'name = "X"\nbudget = 1e-9', 1))
    done = build(tmp_path)
    assert done.returncode == 5 and "fit " in done.stdout and "X: worst-case deviation" in done.stderr
    assert snapshot(out) == kept
    assert not [p for p in tmp_path.rglob("*") if "staging" in p.name]  # nothing half-built left behind
    # Verification fails last of all, after every source is written: still nothing changes.
    colour_sensor.write_project(tmp_path)
    from affix.project import load_project
    from affix.project.build import build_project
    from affix.verify import check

    def mismatching(*args, **kwargs):
        raise VerificationError("1 mismatches in 1 evaluations of colour")

    monkeypatch.setattr(check, "verify", mismatching)
    monkeypatch.chdir(tmp_path)
    colour_sensor.write_log(tmp_path / "colour.csv", sensitivity=0.97, seed=8)
    with pytest.raises(VerificationError):
        build_project(load_project("affix.toml"))
    assert snapshot(out) == kept


def test_a_hand_edited_file_is_never_replaced_silently(tmp_path):
    project(tmp_path)
    assert build(tmp_path).returncode == 0
    out = tmp_path / "build"
    source = out / "colour.c"
    edited = source.read_text() + "/* tuned by hand */\n"
    source.write_text(edited)
    (out / "notes.txt").write_text("mine")
    done = build(tmp_path)
    assert done.returncode == 2
    assert done.stderr.strip() == ("affix: error: build/colour.c was edited by hand since the last build (its "
                                   "SHA-256 differs from build.json); keep the change elsewhere, or replace it "
                                   "with --force")
    assert source.read_text() == edited
    done = build(tmp_path, "--force")
    assert done.returncode == 0, done.stderr
    assert "tuned by hand" not in source.read_text()
    assert (out / "notes.txt").read_text() == "mine"  # a file the build never wrote is left alone
    source.unlink()  # a deleted file is simply written again
    assert build(tmp_path).returncode == 0 and source.is_file()


def test_a_declared_range_far_beyond_the_data_is_one_warning_naming_the_input(tmp_path):
    path = project(tmp_path)
    path.write_text(path.read_text().replace("range = [0, 32767]", "range = [0, 65535]", 1))
    done = build(tmp_path)
    assert done.returncode == 0, done.stderr
    warnings = [line for line in done.stderr.splitlines() if line.startswith("affix: warning:")]
    assert len(warnings) == 1 and "input 'red'" in warnings[0] and "extrapolations" in warnings[0]
    data = colour_sensor.rows()
    low, high = data[:, 0].min(), data[:, 0].max()
    assert f"red {(high - low) / 65535:.0%}" in done.stdout  # the share the fit summary reports
    coverage = json.loads((tmp_path / "build" / "build.json").read_text())["coverage"]
    assert coverage[0]["seen"] == [low, high] and coverage[0]["extrapolated"] is True
    assert [c["extrapolated"] for c in coverage[1:]] == [False, False]


def test_the_target_and_the_input_type_come_from_the_project(tmp_path):
    require("arm-none-eabi-gcc")  # the target's cross compiler measures flash and stack
    project(tmp_path, extra='\n[build]\nreport = false\n')
    path = tmp_path / "affix.toml"
    path.write_text(path.read_text().replace('output_type = "int16_t"',
                                             'output_type = "int16_t"\ntarget = "cortex-m4"\ninput_type = "int32_t"'))
    done = build(tmp_path)
    assert done.returncode == 0, done.stderr
    record = json.loads((tmp_path / "build" / "build.json").read_text())
    assert record["target"] == "cortex-m4" and record["target_figures"]["instructions_per_evaluation"] > 0
    assert [s["step"] for s in record["steps"]] == ["fit", "quantize", "emit", "verify"]  # report = false
    plan = json.loads((tmp_path / "build" / "plan.json").read_text())
    assert plan["target"] == "cortex-m4" and plan["input_ctype"] == "int32_t"
    assert Interface.load(tmp_path / "colour.interface.json").input_ctype == "int32_t"
    assert "void colour_estimate(const int32_t y[COLOUR_N_INPUTS]" in (tmp_path / "build" / "colour.h").read_text()


def test_a_npy_log_with_numbered_columns_builds_into_code(tmp_path):
    # A .npy file's columns are named "0", "1", ...: they become est_in_0 and
    # EST_lsb_3 in C and strings in MicroPython, and the build verifies both.
    require("gcc")
    rng = np.random.default_rng(21)
    counts = rng.integers(0, 4096, size=(3000, 3))
    physical = counts @ np.array([[0.02, -0.01, 0.005], [0.001, 0.03, -0.002]]).T + rng.normal(0, 0.01, (3000, 2))
    np.save(tmp_path / "rig.npy", np.column_stack([counts, physical]))
    made = run_affix("init", "rig.npy", "--inputs", "0,1,2", "--outputs", "3,4", "--range", "0:4095", "--name", "rig",
                     "--vectors", "20000", cwd=tmp_path)
    assert made.returncode == 0, made.stderr
    done = build(tmp_path)
    assert done.returncode == 0, done.stderr
    header = (tmp_path / "build" / "rig.h").read_text()
    assert "rig_in_0 = 0," in header and "#define RIG_lsb_3 " in header
    assert 'INPUTS = ("0", "1", "2")' in (tmp_path / "build" / "rig.py").read_text()
    assert "PASS" in done.stdout
