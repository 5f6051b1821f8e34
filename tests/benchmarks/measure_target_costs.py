"""Regenerate src/affix/targets/costs.json: the measured cost of one evaluation per target.

For every target and every width combination it allows, the plan the
quantizer makes for it from a random model (int16 inputs,
bench_targets.bench_plan) is emitted at several shapes and measured:

- host, Cortex-M0+, M4, M7: the table-style C compiled with the target's
  compiler at -O2 and run in the unicorn engine's model of the core over
  corners and random points of the box, instructions per evaluation
  (affix.targets.figures.target_figures);
- avr: the same C on an ATmega2560 in simavr, CPU cycles per call counted by
  Timer1;
- micropython: the viper variant (which that target always gets) in the
  MicroPython unix port, host instructions per call counted by valgrind's
  callgrind (a run of 3000 calls less a run of 1000, over 2000: start-up and
  the first calls' one-time work cancel).

A least-squares fit (in relative error) k0 + k_out*N + k_in*M + k_mac*N*M over
the shapes is what the quantize search reads; the raw counts are kept beside it.

    .venv/bin/python tests/benchmarks/measure_target_costs.py
"""
from __future__ import annotations

import json
import re
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_targets import bench_plan  # noqa: E402

import affix  # noqa: E402
from affix.arithmetic import COEF_BITS  # noqa: E402
from affix.emit.templates import render  # noqa: E402
from affix.emit.writer import emit  # noqa: E402
from affix.targets import TARGETS  # noqa: E402
from affix.targets.costs import COSTS_FORMAT, widths_key  # noqa: E402
from affix.targets.figures import COUNTED_VECTORS, target_figures  # noqa: E402
from affix.verify.micropython_run import tool  # noqa: E402

SHAPES = ((1, 1), (2, 3), (4, 4), (6, 7), (8, 12), (16, 16))  # (outputs, inputs)
MICROPYTHON_CALLS = (1000, 3000)
OUT = Path(affix.__file__).resolve().parent / "targets" / "costs.json"
HOW = (
    "tests/benchmarks/measure_target_costs.py: for each target, the code emitted for it from a quantizer plan "
    "over int16 inputs, at the shapes of 'measured'. C targets: the table-style C compiled as 'compiler' says "
    f"and run over {COUNTED_VECTORS} vectors (corners and random box points), in the unicorn engine's model of "
    "the core (mean instructions per evaluation) or, for the avr, on an ATmega2560 in simavr (mean CPU cycles "
    "per call, Timer1 at prescaler 1). micropython: host instructions of one call of the viper variant in the "
    "MicroPython unix port (x86-64), counted by valgrind's callgrind (3000 calls less 1000, over 2000). 'model' is the least-squares fit (in "
    "relative error) k0 + k_out*N + k_in*M + k_mac*N*M over the 'measured' [N outputs, M inputs, count]."
)


def fit(measured) -> list[float]:
    rows = np.array(measured, dtype=float)
    design = np.column_stack([np.ones(len(rows)), rows[:, 0], rows[:, 1], rows[:, 0] * rows[:, 1]])
    weight = 1 / rows[:, 2:3]  # relative error: small shapes count as much as large ones
    model, *_ = np.linalg.lstsq(design * weight, rows[:, 2] * weight[:, 0], rcond=None)
    return [round(float(k), 3) for k in model]


def measure_c(target, tmp: Path) -> dict:
    configurations, figures, unit = {}, None, None
    for coef_bits in COEF_BITS:
        for acc_bits in target.accumulator_widths:
            measured = []
            for shape in SHAPES:
                out = tmp / f"{target.name}-{coef_bits}-{acc_bits}-{shape[0]}x{shape[1]}"
                emit(bench_plan(shape, (coef_bits, acc_bits), target.name), lang="c", style="table", name="cost",
                     out_dir=out)
                figures = target_figures(out, target)
                unit = "instructions" if figures["instructions_per_evaluation"] is not None else "cycles"
                measured.append([*shape, figures[f"{unit}_per_evaluation"]])
            configurations[widths_key(coef_bits, acc_bits)] = {"model": fit(measured), "measured": measured}
            print(target.name, coef_bits, acc_bits, [round(m[2]) for m in measured], flush=True)
    return {"unit": unit, "compiler": f"{figures['compiler']} {figures['flags']}", "configurations": configurations}


def micropython_instructions(plan, work: Path) -> float:
    """Host instructions of one estimate_into_viper call in the MicroPython unix port (callgrind)."""
    emit(plan, lang="micropython", name="cost", out_dir=work)
    shutil.copyfile(work / "cost.py", work / "estimator_under_test.py")
    vector = [(lo + hi) // 2 for lo, hi in plan.input_ranges]
    (work / "driver.py").write_text(render("micropython/cost_driver.jinja", module="estimator_under_test",
                                           function="estimate_into_viper", vector=vector))
    totals = []
    for calls in MICROPYTHON_CALLS:
        report = work / f"callgrind.{calls}"
        subprocess.run(["valgrind", "--tool=callgrind", f"--callgrind-out-file={report}", tool("micropython"),
                        "driver.py", str(calls)], cwd=work, check=True, capture_output=True)
        totals.append(int(re.search(r"^(?:totals|summary):\s+(\d+)", report.read_text(), re.M).group(1)))
    return (totals[1] - totals[0]) / (MICROPYTHON_CALLS[1] - MICROPYTHON_CALLS[0])


def measure_micropython(target, tmp: Path) -> dict:
    configurations = {}
    for coef_bits in COEF_BITS:
        for acc_bits in target.accumulator_widths:
            measured = []
            for shape in SHAPES:
                plan = bench_plan(shape, (coef_bits, acc_bits), target.name)
                work = tmp / f"{target.name}-{coef_bits}-{acc_bits}-{shape[0]}x{shape[1]}"
                measured.append([*shape, micropython_instructions(plan, work)])
            configurations[widths_key(coef_bits, acc_bits)] = {"model": fit(measured), "measured": measured}
            print(target.name, coef_bits, acc_bits, [round(m[2]) for m in measured], flush=True)
    return {"unit": "instructions", "compiler": "MicroPython unix port (viper variant), valgrind callgrind",
            "configurations": configurations}


def main() -> None:
    targets = {}
    with tempfile.TemporaryDirectory(prefix="affix-costs-") as tmp:
        for target in TARGETS.values():
            if target.compiler is None:
                targets[target.name] = measure_micropython(target, Path(tmp))
            else:
                targets[target.name] = measure_c(target, Path(tmp))
    OUT.write_text(json.dumps({"format": COSTS_FORMAT, "how": HOW, "targets": targets}, indent=1) + "\n")
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()
