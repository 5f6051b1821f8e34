"""How well the inputs determine the gains: condition number and collinear inputs.

The condition number is that of R, the input correlation matrix (S_yy with
each input scaled to unit variance), so units and offsets do not enter it.
"""
from __future__ import annotations

import math

import numpy as np

# Belsley, Kuh & Welsch (1980) read a condition index (sqrt of this number)
# above 30 as strong collinearity; 30**2 = 900, rounded to 1e3.
WARN_CONDITION = 1e3
# Past this the normal equations keep fewer than ~4 significant digits in
# double precision (about 1e-16 * condition relative error): common practice
# is to call the matrix numerically singular.
SINGULAR_CONDITION = 1e12
# The ridge we suggest brings the condition number down to about this.
TARGET_CONDITION = 1e6


def condition_number(r: np.ndarray) -> np.ndarray:
    """Of R, or of each matrix of a stack (an array of the stack's shape); infinite where R is not positive definite."""
    w = np.linalg.eigvalsh(r)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(w[..., 0] <= 0, np.inf, w[..., -1] / w[..., 0])


def collinear_inputs(r: np.ndarray, names) -> list[str]:
    """The inputs that carry the near-dependence: those with a sizeable entry
    (at least a tenth of the largest) in the eigenvector of R's smallest eigenvalue."""
    _, vectors = np.linalg.eigh(r)
    weight = np.abs(vectors[:, 0])
    return [name for name, w in zip(names, weight) if w >= 0.1 * weight.max()]


def suggested_ridge(r: np.ndarray) -> float:
    """A power of ten that brings the condition number of R + ridge*I to about TARGET_CONDITION."""
    largest = np.linalg.eigvalsh(r)[-1]
    return 10.0 ** math.ceil(math.log10(largest / TARGET_CONDITION))


def describe(names, condition: float) -> str:
    return (
        f"inputs {', '.join(names)} are nearly collinear (condition number {condition:.3g} "
        "of the input correlation matrix)"
    )
