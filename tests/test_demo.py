"""The README's first command: the whole job on the bundled demo, end to end."""
from __future__ import annotations

import json
import re

from affix.model import Model
from affix.plan import Plan
from affix.workflow.demo_command import BUDGET, CORE, ESTIMATOR
from conftest import require, run_affix


def test_demo_runs_the_whole_job(tmp_path):
    require("gcc")  # the verification step builds the C
    require("micropython")
    require("mpy-cross")
    require("arm-none-eabi-gcc")  # the emit step measures the C on the emulated Cortex-M4
    out = tmp_path / "demo"
    result = run_affix("demo", out)
    assert result.returncode == 0, result.stdout + result.stderr

    model = Model.load(out / "wrist_model.json")
    assert model.outputs == ("Fx", "Fy", "Fz", "Tx", "Ty", "Tz") and len(model.inputs) == 7
    # The invented sensor's bridge noise (4 counts at ~18 counts/N on Fz) bounds what a fit can reach.
    assert 0.05 < model.rms[2] < 0.5

    plan = Plan.load(out / "wrist_plan.json")
    assert plan.model_sha256 == model.sha256
    for name, worst in zip(plan.outputs, plan.worst_case_deviation):
        assert worst <= BUDGET[name]
    assert plan.measured["calibration"]["rows"] == 6000

    assert plan.target == CORE and plan.input_ctype == "int16_t"
    firmware = out / "firmware"
    manifest = json.loads((firmware / f"{ESTIMATOR}.manifest.json").read_text())
    assert manifest["coefficients"] == [list(row) for row in plan.coefficients]
    for suffix in (".h", ".c"):
        assert (firmware / f"{ESTIMATOR}{suffix}").is_file()
    # The MicroPython board's plan keeps every value a small int, so its module has the viper variant.
    board = Plan.load(out / "wrist_plan_micropython.json")
    assert board.target == "micropython" and max(board.accumulator_bound) < 2**30
    assert "def estimate_into_viper" in (out / "micropython" / f"{ESTIMATOR}.py").read_text()
    # Every step printed the command it ran; both verifications passed with zero mismatches.
    for step in ("$ affix fit", "$ affix quantize", "$ affix emit", "$ affix verify", "$ affix init",
                 "$ affix build", "$ affix diff build-first build"):
        assert step in result.stdout
    assert result.stdout.count("PASS: 0 mismatches") == 2
    assert "MicroPython wrist_ft.py estimate_into_viper()" in result.stdout
    # The summary gives what the estimator costs on the Cortex-M4, measured on the emulated core.
    assert re.search(rf"{CORE}: \d+ instructions per evaluation \(emulated\), flash \d+ bytes", result.stdout)

    # The recalibration loop: the aged sensor's second build kept the pinned interface.
    first, second = (json.loads((out / folder / "build.json").read_text()) for folder in ("build-first", "build"))
    assert first["interface_id"] == second["interface_id"]
    assert second["target"] == CORE and second["target_figures"]["instructions_per_evaluation"] > 0
    assert first["data"][0]["path"] == "wrist_calibration.csv" and second["data"][0]["path"] == "wrist_recalibration.csv"
    changes = json.loads((out / "build" / "diff.json").read_text())
    assert changes["interface_changed"] is False
    assert "interface unchanged" in result.stdout.split("$ affix diff", 1)[1]
    # Aged gauges lose 1 to 3 % of their sensitivity, so the gains that matter rise by about as much.
    fz = changes["outputs"]["Fz"]["gain_relative_change"]
    assert all(0.005 < fz[j] < 0.035 for j in (0, 2, 4))  # the bending bridges carry Fz
