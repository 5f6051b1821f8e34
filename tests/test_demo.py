"""The README's first command: the whole job on the bundled demo, end to end."""
from __future__ import annotations

import json

from affix.model import Model
from affix.plan import Plan
from affix.workflow.demo_command import BUDGET, ESTIMATOR
from conftest import require, run_affix


def test_demo_runs_the_whole_job(tmp_path):
    require("gcc")  # the verification step builds the C
    require("micropython")
    require("mpy-cross")
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

    firmware = out / "firmware"
    manifest = json.loads((firmware / f"{ESTIMATOR}.manifest.json").read_text())
    assert manifest["coefficients"] == [list(row) for row in plan.coefficients]
    for suffix in (".h", ".c", ".py"):
        assert (firmware / f"{ESTIMATOR}{suffix}").is_file()
    # Every step printed the command it ran, and the last one passed with zero mismatches.
    for step in ("$ affix fit", "$ affix quantize", "$ affix emit", "$ affix verify"):
        assert step in result.stdout
    assert "PASS: 0 mismatches" in result.stdout
