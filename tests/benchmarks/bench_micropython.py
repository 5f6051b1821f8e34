"""Benchmark: the emitted MicroPython estimator in the real unix port, plain bytecode against viper.

A 6-input, 6-output plan, 10**5 vectors per run through the batch driver
(one process; the driver's own loop, which is the same for every variant, is
included).  Printed side by side: vectors per second of estimate_into,
estimate_into_viper and estimate, and the viper speed-up as a ratio.

    .venv/bin/python tests/benchmarks/bench_micropython.py
"""
from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from plans import random_plan  # noqa: E402

from affix.emit.micropython import render_micropython  # noqa: E402
from affix.verify.micropython_run import run_micropython  # noqa: E402

VECTORS = 10**5
REPEATS = 3  # best of, since the machine is shared


def main():
    plan = random_plan(seed=11, n_inputs=6, n_outputs=6, fill=0.4)
    lo = [r[0] for r in plan.input_ranges]
    hi = [r[1] for r in plan.input_ranges]
    y = np.random.default_rng(0).integers(lo, hi, size=(VECTORS, 6), endpoint=True)
    expected = plan.integer_estimator().evaluate(y)
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bench6.py"
        path.write_text(render_micropython(plan, "bench6")["bench6.py"])
        rates = {}
        for variant in ("plain", "viper", "list"):
            best = float("inf")
            for _ in range(REPEATS):
                start = time.perf_counter()
                got = run_micropython(path, y, variant=variant)
                best = min(best, time.perf_counter() - start)
            assert (got == expected).all(), variant
            rates[variant] = VECTORS / best
            print(f"{variant:6s} {rates[variant]:12,.0f} vectors/s  ({best:.3f} s for {VECTORS:,})")
    print(f"viper / plain speed ratio: {rates['viper'] / rates['plain']:.2f}")


if __name__ == "__main__":
    main()
