"""Regenerate src/affix/targets/costs.json: the measured cost of one evaluation per target.

For every emulated target (the host's x86-64, Cortex-M0+, M4, M7: instructions
counted in the unicorn engine; the AVR: CPU cycles counted by Timer1 of an
ATmega2560 in simavr) and every width combination it allows, the plan the quantizer makes for a random model
(int16 inputs, bench_targets.bench_plan) is emitted in the table style for
that target at several shapes, compiled with the target's compiler at -O2 and
run in the unicorn engine over corners and random points of the box
(affix.targets.figures.target_figures), counting instructions or cycles.  A least-squares
fit (in relative error) k0 + k_out*N + k_in*M + k_mac*N*M over the shapes is what the quantize
search reads; the raw counts are kept beside it.

    .venv/bin/python tests/benchmarks/measure_target_costs.py
"""
from __future__ import annotations

import json
import sys
import tempfile
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_targets import bench_plan  # noqa: E402

import affix  # noqa: E402
from affix.arithmetic import COEF_BITS  # noqa: E402
from affix.emit.writer import emit  # noqa: E402
from affix.targets import TARGETS  # noqa: E402
from affix.targets.costs import COSTS_FORMAT, widths_key  # noqa: E402
from affix.targets.figures import COUNTED_VECTORS, target_figures  # noqa: E402

SHAPES = ((1, 1), (2, 3), (4, 4), (6, 7), (8, 12), (16, 16))  # (outputs, inputs)
OUT = Path(affix.__file__).resolve().parent / "targets" / "costs.json"


def main() -> None:
    targets = {}
    with tempfile.TemporaryDirectory(prefix="affix-costs-") as tmp:
        for target in TARGETS.values():
            if target.emulator is None:
                continue
            configurations, figures, unit = {}, None, None
            for coef_bits in COEF_BITS:
                for acc_bits in target.accumulator_widths:
                    measured = []
                    for shape in SHAPES:
                        plan = bench_plan(shape, (coef_bits, acc_bits), target.name)
                        out = Path(tmp) / f"{target.name}-{coef_bits}-{acc_bits}-{shape[0]}x{shape[1]}"
                        emit(plan, lang="c", style="table", name="cost", out_dir=out)
                        figures = target_figures(out, target)
                        unit = "instructions" if figures["instructions_per_evaluation"] is not None else "cycles"
                        measured.append([*shape, figures[f"{unit}_per_evaluation"]])
                    rows = np.array(measured, dtype=float)
                    design = np.column_stack([np.ones(len(rows)), rows[:, 0], rows[:, 1], rows[:, 0] * rows[:, 1]])
                    weight = 1 / rows[:, 2:3]  # relative error: small shapes count as much as large ones
                    model, *_ = np.linalg.lstsq(design * weight, rows[:, 2] * weight[:, 0], rcond=None)
                    configurations[widths_key(coef_bits, acc_bits)] = {
                        "model": [round(float(k), 3) for k in model],
                        "measured": measured,
                    }
                    print(target.name, coef_bits, acc_bits, [round(m[2]) for m in measured], flush=True)
            targets[target.name] = {
                "unit": unit,
                "compiler": f"{figures['compiler']} {figures['flags']}",
                "configurations": configurations,
            }
    OUT.write_text(json.dumps({
        "format": COSTS_FORMAT,
        "how": ("tests/benchmarks/measure_target_costs.py: the table-style C emitted for each target from a "
                "quantizer plan over int16 inputs, compiled as 'compiler' says, run over "
                f"{COUNTED_VECTORS} vectors (corners and random box points): in the unicorn engine's model of "
                "the core, mean instructions per evaluation; for the avr on an ATmega2560 in simavr, mean CPU "
                "cycles per call counted by Timer1 at prescaler 1. 'model' is the least-squares fit (in "
                "relative error) k0 + k_out*N + k_in*M + k_mac*N*M over the 'measured' [N outputs, M inputs, "
                "count]."),
        "targets": targets,
    }, indent=1) + "\n")
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()
