"""The least-squares estimator from joint moments of [inputs, outputs].

With centred scatter blocks S_yy (inputs), S_yx and S_xx (outputs), and
D = sqrt(diag(S_yy)) the input scales, the gain solves

    (R + ridge * I) Z = D^-1 S_yx,   R = D^-1 S_yy D^-1,   A = (D^-1 Z)^T

by Cholesky (R + ridge*I = L L^T, then two triangular systems): no inverse
is formed, and working on the correlation matrix R removes the
ill-conditioning that mere offsets and units (ADC counts next to volts)
would add.  Equivalently A = S_xy (S_yy + ridge * diag(S_yy))^-1: the
ridge is relative to each input's own variance, so it does not depend on the
inputs' units nor on the number of rows.  The offset is b = mean_x - A mean_y.

Every function takes a stack of moments as well as one set (see
:mod:`affix.statistics.moments`) and solves each set of the stack on its
own, with NumPy's stacked linear algebra: a fleet's thousand units cost a
few calls, not a thousand.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from affix.statistics import Moments


@dataclass(frozen=True, eq=False)
class Solution:
    gain: np.ndarray  # (..., n_outputs, n_inputs)
    offset: np.ndarray  # (..., n_outputs)


def input_scales(moments: Moments, n_inputs: int) -> np.ndarray:
    return np.sqrt(_diagonal(moments.scatter)[..., :n_inputs])


def correlation(moments: Moments, n_inputs: int) -> np.ndarray:
    """R: the input scatter with every input scaled to unit variance."""
    d = input_scales(moments, n_inputs)
    return moments.scatter[..., :n_inputs, :n_inputs] / (d[..., :, None] * d[..., None, :])


def solve(moments: Moments, n_inputs: int, ridge: float = 0.0) -> Solution:
    """Raises numpy.linalg.LinAlgError when R + ridge*I is not numerically positive definite
    (for any set of a stack), or not even defined: an input that does not vary (LAPACK would
    pass the NaNs of R through)."""
    m = n_inputs
    d = input_scales(moments, m)
    if not np.all(d > 0):
        raise np.linalg.LinAlgError("an input does not vary")
    rhs = moments.scatter[..., :m, m:] / d[..., :, None]
    lower = np.linalg.cholesky(correlation(moments, m) + ridge * np.eye(m))
    z = np.linalg.solve(_transposed(lower), np.linalg.solve(lower, rhs))
    gain = _transposed(z / d[..., :, None])
    return Solution(gain, moments.mean[..., m:] - _times(gain, moments.mean[..., :m]))


def residual_scatter(moments: Moments, solution: Solution) -> np.ndarray:
    """Sum over the rows of e e^T, e = x - A y - b: [-A, I] S [-A, I]^T + n r r^T,
    r the mean residual.  For the least-squares fit on the same rows r = 0 and
    this is S_xx - A S_yx; it also holds for ridge fits and for held-out rows."""
    gain = solution.gain
    n_out, m = gain.shape[-2:]
    weights = np.concatenate([-gain, np.broadcast_to(np.eye(n_out), gain.shape[:-1] + (n_out,))], axis=-1)
    r = moments.mean[..., m:] - _times(gain, moments.mean[..., :m]) - solution.offset
    count = np.asarray(moments.count)[..., None, None]
    e = weights @ moments.scatter @ _transposed(weights) + count * (r[..., :, None] * r[..., None, :])
    return (e + _transposed(e)) / 2


def error_covariance(moments: Moments, solution: Solution) -> np.ndarray:
    """Residual covariance on the fitting rows, 1/(n-1) scaling like every covariance here."""
    return residual_scatter(moments, solution) / (np.asarray(moments.count)[..., None, None] - 1)


def cross_validated_rms(parts: list[Moments], n_inputs: int, ridge: float) -> np.ndarray:
    """k-fold CV from per-fold moments: fit on the merge of the other folds,
    score the held-out fold analytically from its own moments; RMS over all
    held-out rows (1/n, a mean of squared prediction errors)."""
    width = parts[0].width
    # The other folds of fold f are those before it and those after it: the
    # running merges from either end give every training set in O(k) merges.
    before, after = [Moments.empty(width)], [Moments.empty(width)]
    for early, late in zip(parts[:-1], parts[:0:-1]):
        before.append(before[-1].merge(early))
        after.append(after[-1].merge(late))
    squared = 0.0
    for held_out, early, late in zip(parts, before, reversed(after)):
        squared = squared + _diagonal(residual_scatter(held_out, solve(early.merge(late), n_inputs, ridge)))
    rows = np.asarray(sum(p.count for p in parts))[..., None]
    return np.sqrt(np.clip(squared, 0.0, None) / rows)


def _diagonal(matrices: np.ndarray) -> np.ndarray:
    return np.diagonal(matrices, axis1=-2, axis2=-1)


def _transposed(matrices: np.ndarray) -> np.ndarray:
    return np.swapaxes(matrices, -1, -2)


def _times(matrices: np.ndarray, vectors: np.ndarray) -> np.ndarray:
    """Each matrix of a stack times its vector."""
    return (matrices @ vectors[..., None])[..., 0]
