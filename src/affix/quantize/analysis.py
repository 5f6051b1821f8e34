"""The quantization problem as plain data, and the accuracy figures of a design of it.

All figures are per output in physical output units.  The deviation of the
integer estimator from the float one is split into independent parts that
add in quadrature:

- coefficients: the exact quadratic form delta' E[z z'] delta, scaled;
- output rounding: the variance of the shift's error, (1 - 4**-s) lsb**2 / 12
  (lsb**2 / 12 of Widrow & Kollar, Quantization Noise, 2008, for a discrete
  grid of 2**s steps); its mean is cancelled in the offset;
- input quantization, where an input is physical with an lsb q_j: an ADC that
  rounds to nearest errs uniformly by +-q_j / 2, adding sum_j gain_j**2 / 12
  per count (gain per count).

The estimator's own RMS (cross-validated where the fit made it) is taken as
independent of the deviation, so the total is the root of their squares.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np



@dataclass(frozen=True, eq=False)
class Problem:
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    box: tuple[tuple[int, int], ...]
    gain: np.ndarray  # per count, physical output units: (n_outputs, n_inputs)
    offset: np.ndarray
    lsb: tuple[float | None, ...]  # per output, None where the rule chooses
    moments: np.ndarray  # E[z z'], z = (1, counts)
    moments_source: str
    rounding: str
    search: bool
    float_rms: np.ndarray | None
    input_rms: np.ndarray  # input-quantization RMS per output (0 where inputs are counts)
    input_worst: np.ndarray  # its worst case, +-q/2 on every physical input


@dataclass(frozen=True)
class Accuracy:
    coefficients: tuple[float, ...]
    plain_coefficients: tuple[float, ...]
    output_rounding: tuple[float, ...]
    input_quantization: tuple[float, ...]
    deviation: tuple[float, ...]  # predicted RMS deviation, integer from float
    total: tuple[float, ...] | None  # predicted RMS of the integer estimator
    worst_case: tuple[float, ...]


def accuracy(problem: Problem, designs) -> Accuracy:
    coefficients = tuple(d.coefficient_rms(problem.moments) for d in designs)
    rounding = tuple(d.rounding_rms for d in designs)
    inputs = tuple(float(v) for v in problem.input_rms)
    deviation = tuple(math.hypot(c, r, i) for c, r, i in zip(coefficients, rounding, inputs))
    total = None
    if problem.float_rms is not None:
        total = tuple(math.hypot(float(f), d) for f, d in zip(problem.float_rms, deviation))
    return Accuracy(
        coefficients=coefficients,
        plain_coefficients=tuple(d.coefficient_rms(problem.moments, plain=True) for d in designs),
        output_rounding=rounding,
        input_quantization=inputs,
        deviation=deviation,
        total=total,
        worst_case=tuple(d.worst_case + float(w) for d, w in zip(designs, problem.input_worst)),
    )
