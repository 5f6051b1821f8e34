"""Calibration logs spread over many files and formats, for the scale-out tests and benchmark.

A four-bridge sensor of our own: ADC counts in, two forces out, with noise a
thousandth of the signal, which is where the error covariance (a small
difference of large scatter terms) shows any rounding that depends on how
the data were cut up.
"""
from __future__ import annotations

import numpy as np

INPUTS = ["b1", "b2", "b3", "temp"]
OUTPUTS = ["Fx", "Fz"]
COLUMNS = INPUTS + OUTPUTS
GAIN = np.array([[0.0125, -0.0031, 0.0007, 0.0002], [0.0011, 0.0094, -0.0122, -0.0004]])
OFFSET = np.array([1.5, -0.75])


def log_rows(rng, rows: int) -> np.ndarray:
    """(rows, 6): integer counts for b1..b3 and temp, then Fx and Fz to micro-newtons."""
    y = np.column_stack([rng.integers(-20000, 20000, size=(rows, 3)), rng.integers(1500, 3000, size=rows)])
    x = y @ GAIN.T + OFFSET + rng.normal(scale=0.25, size=(rows, 2))
    return np.column_stack([y, np.round(x, 6)])


def write_csv(path, rows: np.ndarray) -> None:
    """As a logger writes it: integers as integers, forces with six decimals."""
    body = "\n".join(f"{a:.0f},{b:.0f},{c:.0f},{t:.0f},{u:.6f},{v:.6f}" for a, b, c, t, u, v in rows)
    path.write_text(",".join(COLUMNS) + "\n" + body + "\n")


def write_parquet(path, rows: np.ndarray, row_group_size: int) -> None:
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.table({name: rows[:, j].astype(np.int32 if j < 4 else np.float64) for j, name in enumerate(COLUMNS)})
    pq.write_table(table, path, row_group_size=row_group_size)


def fleet_frame(rng, units: int, rows_per_unit: int):
    """A production line's log: units (serials SN0001, ...) whose gains spread a few percent around the
    design, each with its own offset, their rows interleaved as a line that tests units side by side logs them."""
    import pandas as pd

    frames = []
    for k in range(units):
        rows = log_rows(rng, rows_per_unit)
        y = rows[:, :4]
        gain = GAIN * rng.normal(1, 0.03, GAIN.shape)
        x = y @ gain.T + OFFSET + rng.normal(0, 0.2, 2) + rng.normal(scale=0.25, size=(rows_per_unit, 2))
        frame = pd.DataFrame(np.column_stack([y, np.round(x, 6)]), columns=COLUMNS)
        frame.insert(0, "serial", f"SN{k + 1:04d}")
        frames.append(frame)
    return pd.concat(frames, ignore_index=True).sample(frac=1, random_state=int(rng.integers(1 << 30)),
                                                       ignore_index=True)
