"""Benchmark: quantize plus budget for a 16-input, 16-output model with 10**6 calibration rows.

Target: under 2 s on a 2-core machine, configuration search and coefficient
search included.  Side by side in the same run: the same plan without the
calibration measurement and without the coefficient search, so the share of
each part shows as a ratio.

    .venv/bin/python tests/benchmarks/bench_quantize.py
"""
from __future__ import annotations

import time

import numpy as np

from affix.model import Model
from affix.quantize import plan_fixed_point

N_INPUTS = N_OUTPUTS = 16
ROWS = 10**6
BOX = (0, 4095)  # a 12-bit ADC on every channel


def scenario(seed=0):
    """A bank of 16 bridge channels read by a 12-bit ADC, 16 estimated quantities (invented)."""
    rng = np.random.default_rng(seed)
    mixing = rng.normal(size=(N_INPUTS, N_INPUTS)) * 150
    rows = np.clip(rng.normal(size=(ROWS, N_INPUTS)) @ mixing + 2048, *BOX).round()
    gain = rng.normal(size=(N_OUTPUTS, N_INPUTS)) * 2e-3
    model = Model(
        inputs=[f"ch{j}" for j in range(N_INPUTS)],
        outputs=[f"q{i}" for i in range(N_OUTPUTS)],
        gain=gain,
        offset=rng.normal(size=N_OUTPUTS),
        cv_rms=np.full(N_OUTPUTS, 0.02),
        n_samples=ROWS,
        input_mean=rows.mean(axis=0),
        input_covariance=np.cov(rows, rowvar=False),
    )
    return model, rows


def timed(label, **options):
    start = time.perf_counter()
    plan = plan_fixed_point(MODEL, BOX, **options)
    seconds = time.perf_counter() - start
    print(f"{label:<48} {seconds:6.3f} s   coef {plan.coef_bits}, acc {plan.acc_bits}, {plan.output_ctype}")
    return seconds


if __name__ == "__main__":
    MODEL, ROWS_DATA = scenario()
    chunks = [ROWS_DATA[k : k + 100_000] for k in range(0, ROWS, 100_000)]
    print(f"{N_INPUTS} inputs, {N_OUTPUTS} outputs, {ROWS} calibration rows, box {BOX[0]}..{BOX[1]}")
    full = timed("full: search + budget + measurement on rows", calibration=chunks, budget_rms=0.5)
    bare = timed("without the calibration measurement", budget_rms=0.5)
    plain = timed("without the coefficient search", calibration=chunks, budget_rms=0.5, search=False)
    print(f"measurement share {1 - bare / full:.0%}; coefficient search costs {full / plain:.2f}x plain rounding")
    print(f"target < 2 s: {'met' if full < 2 else 'NOT met'} ({full:.3f} s)")
