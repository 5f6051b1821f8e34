"""An invented sensor for the recalibration tests: a three-channel colour sensor.

Three photodiodes behind red, green and blue filters each read a mix of the
tristimulus values X, Y, Z (0..110) plus a dark offset, through a 15-bit ADC;
the estimator turns the three counts back into X, Y, Z.  A recalibration
after the photodiodes age scales every channel's sensitivity: at 0.97 the
outputs still fit the int16_t scale of the first calibration, at 0.8 output
X needs a coarser lsb (Q8.7 becomes Q9.6), the change the pinned interface
exists to catch.  Data for the tests only.
"""
from __future__ import annotations

import numpy as np

INPUTS = ["red", "green", "blue"]
OUTPUTS = ["X", "Y", "Z"]
CROSSTALK = np.array([[180.0, 60.0, 10.0], [70.0, 190.0, 30.0], [5.0, 40.0, 210.0]])  # counts per unit of X, Y, Z
DARK = np.array([310.0, 260.0, 290.0])  # counts in the dark


def rows(*, sensitivity: float = 1.0, count: int = 500, seed: int = 7) -> np.ndarray:
    """(count, 6): red, green, blue counts, then X, Y, Z."""
    rng = np.random.default_rng(seed)
    xyz = rng.uniform(0, 110, size=(count, 3))
    counts = np.rint(xyz @ CROSSTALK.T * sensitivity + DARK + rng.normal(scale=2.0, size=(count, 3)))
    return np.hstack([counts, xyz])


def write_log(path, **kwargs) -> np.ndarray:
    """Write a rig log (CSV) and return its rows."""
    data = rows(**kwargs)
    lines = [",".join(INPUTS + OUTPUTS)]
    lines += [",".join([*(str(int(v)) for v in row[:3]), *(f"{v:.6f}" for v in row[3:])]) for row in data]
    path.write_text("\n".join(lines) + "\n")
    return np.loadtxt(path, delimiter=",", skiprows=1)  # as written, digits rounded


def write_project(folder, *, data: str = "colour.csv", languages=("c",), vectors: int = 20_000, extra: str = ""):
    """A project file for the sensor; C only and few vectors unless asked, so builds stay quick."""
    inputs = "".join(f'\n[[inputs]]\nname = "{name}"\nrange = [0, 32767]\n' for name in INPUTS)
    outputs = "".join(f'\n[[outputs]]\nname = "{name}"\n' for name in OUTPUTS)
    quoted = ", ".join(f'"{lang}"' for lang in languages)
    (folder / "affix.toml").write_text(
        f'name = "colour"\n\n[data]\nfiles = "{data}"\n{inputs}{outputs}\n[fixed_point]\noutput_type = "int16_t"\n'
        f"\n[emit]\nlanguages = [{quoted}]\n\n[verify]\nvectors = {vectors}\n{extra}"
    )
    return folder / "affix.toml"
