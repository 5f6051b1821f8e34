"""The bundled demo, an invented scenario: the wrist force/torque sensor of a small robot arm.

A hub with three spokes 120 degrees apart carries six strain-gauge bridges:
on each spoke one bridge reads bending (from Fz and the tilting torques
Tx, Ty) and one reads shear (from Fx, Fy and the twisting torque Tz).  Each
bridge goes through a 16-bit ADC (signed counts), and a thermistor on a
12-bit ADC logs the hub temperature, because every bridge's zero drifts with
it.  The calibration rig applies known wrenches (Fx, Fy, Fz in N; Tx, Ty, Tz
in N*m) across the rated range at temperatures from 15 to 45 degC.

The firmware must turn the seven counts into the six wrench components, so
the estimator has seven inputs and six outputs.  Everything here comes from
one seeded generator: the same rows on every run.
"""
from __future__ import annotations

import numpy as np

from affix import files

BRIDGES = [f"bridge{k}" for k in range(1, 7)]
INPUTS = BRIDGES + ["therm"]
OUTPUTS = ["Fx", "Fy", "Fz", "Tx", "Ty", "Tz"]
UNITS = {"Fx": "N", "Fy": "N", "Fz": "N", "Tx": "N*m", "Ty": "N*m", "Tz": "N*m", **{name: "counts" for name in INPUTS}}
RATED = np.array([200.0, 200.0, 500.0, 10.0, 10.0, 8.0])  # N, N, N, N*m, N*m, N*m
SEED = 6006
ROWS = 6000


def sensitivity(rng) -> np.ndarray:
    """Counts per unit load (6 bridges x 6 wrench components): the spoke
    geometry plus a few percent of cross-talk from gauge placement."""
    k = np.zeros((6, 6))
    for spoke, angle in enumerate(np.radians([90.0, 210.0, 330.0])):
        bend, shear = 2 * spoke, 2 * spoke + 1
        k[bend, [2, 3, 4]] = 18.0, 1100.0 * np.sin(angle), -1100.0 * np.cos(angle)  # Fz, Tx, Ty
        k[shear, [0, 1, 5]] = -55.0 * np.sin(angle), 55.0 * np.cos(angle), 1300.0  # Fx, Fy, Tz
    typical = np.abs(k).max(axis=0)
    return k + rng.normal(scale=0.03, size=k.shape) * typical


def calibration_rows(rows: int = ROWS, seed: int = SEED, run: int = 1) -> dict[str, np.ndarray]:
    """The rig log of calibration run ``run``: column name -> values.  Bridge and
    thermistor columns are integer counts.

    Every run calibrates the same sensor.  By a later run the bridges have aged:
    each has lost 1 to 3 % of its sensitivity (the gauges' adhesive creeps) and
    its zero has moved by some tens of counts; the rig applies a new set of loads.
    """
    rng = np.random.default_rng(seed)
    k = sensitivity(rng)
    zero = rng.uniform(-1500, 1500, size=6)  # counts at no load, 25 degC
    drift = rng.uniform(-14, 14, size=6)  # counts per degC
    if run > 1:
        rng = np.random.default_rng([seed, run])  # this run's own loads and noise
        k = k * (1 - rng.uniform(0.01, 0.03, size=(6, 1)))
        zero = zero + rng.normal(scale=40.0, size=6)
    wrench = rng.uniform(-0.8, 0.8, size=(rows, 6)) * RATED
    temperature = rng.uniform(15.0, 45.0, size=rows)
    bridges = zero + wrench @ k.T + np.outer(temperature - 25.0, drift) + rng.normal(scale=4.0, size=(rows, 6))
    therm = 2048 + 40.0 * (temperature - 25.0) + rng.normal(scale=1.0, size=rows)
    counts = np.clip(np.rint(np.column_stack([bridges, therm])), -32768, 32767).astype(np.int64)
    # The rig's own reference has a small uncertainty too.
    reference = wrench + rng.normal(size=wrench.shape) * RATED * 2e-4
    data = {name: counts[:, j] for j, name in enumerate(INPUTS)}
    data.update({name: reference[:, i] for i, name in enumerate(OUTPUTS)})
    return data


def write_csv(path, rows: int = ROWS, seed: int = SEED, run: int = 1) -> None:
    data = calibration_rows(rows, seed, run)
    lines = [",".join(INPUTS + OUTPUTS)]
    for r in range(rows):
        counts = ",".join(str(int(data[name][r])) for name in INPUTS)
        loads = ",".join(f"{data[name][r]:.4f}" for name in OUTPUTS)
        lines.append(f"{counts},{loads}")
    files.write_text(path, "\n".join(lines) + "\n")


# A production batch of the same sensor (the fleet demo): every unit has the
# design's geometry, but its own gauges: each bridge's sensitivity within a
# few percent of nominal, its own zeros and thermal drifts.  One unit's
# bridge 3 has a poorly bonded gauge: a third of its sensitivity is gone and
# it is noisy, so that unit cannot meet the accuracy budget.
BATCH_UNITS = 50
BATCH_ROWS = 400  # per unit, as the line's rig logs them
BATCH_SEED = 7007
UNIT_COLUMN = "serial"
OUT_OF_TOLERANCE = "WR-0017"


def batch_rows(units: int = BATCH_UNITS, rows: int = BATCH_ROWS, seed: int = BATCH_SEED) -> dict[str, np.ndarray]:
    """The line's log of a production batch, unit after unit: column name -> values (``serial`` holds
    the unit ids, WR-0001 ...)."""
    design = sensitivity(np.random.default_rng(SEED))
    rng = np.random.default_rng(seed)
    columns = {name: [] for name in [UNIT_COLUMN] + INPUTS + OUTPUTS}
    for number in range(1, units + 1):
        unit = f"WR-{number:04d}"
        gauges = rng.normal(1.0, 0.02, size=(6, 1))
        noise = np.full(6, 4.0)
        if unit == OUT_OF_TOLERANCE:
            gauges[2] = 0.65
            noise[2] = 40.0
        k = design * gauges
        zero = rng.uniform(-1500, 1500, size=6)
        drift = rng.uniform(-14, 14, size=6)
        wrench = rng.uniform(-0.8, 0.8, size=(rows, 6)) * RATED
        temperature = rng.uniform(15.0, 45.0, size=rows)
        bridges = zero + wrench @ k.T + np.outer(temperature - 25.0, drift) + rng.normal(size=(rows, 6)) * noise
        therm = 2048 + 40.0 * (temperature - 25.0) + rng.normal(scale=1.0, size=rows)
        counts = np.clip(np.rint(np.column_stack([bridges, therm])), -32768, 32767).astype(np.int64)
        reference = wrench + rng.normal(size=wrench.shape) * RATED * 2e-4
        columns[UNIT_COLUMN] += [unit] * rows
        for j, name in enumerate(INPUTS):
            columns[name].append(counts[:, j])
        for i, name in enumerate(OUTPUTS):
            columns[name].append(reference[:, i])
    return {name: np.array(values) if name == UNIT_COLUMN else np.concatenate(values)
            for name, values in columns.items()}


def write_batch_csv(path, units: int = BATCH_UNITS, rows: int = BATCH_ROWS, seed: int = BATCH_SEED) -> None:
    data = batch_rows(units, rows, seed)
    lines = [",".join([UNIT_COLUMN] + INPUTS + OUTPUTS)]
    for r in range(len(data[UNIT_COLUMN])):
        counts = ",".join(str(int(data[name][r])) for name in INPUTS)
        loads = ",".join(f"{data[name][r]:.4f}" for name in OUTPUTS)
        lines.append(f"{data[UNIT_COLUMN][r]},{counts},{loads}")
    files.write_text(path, "\n".join(lines) + "\n")
