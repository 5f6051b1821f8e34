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
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from affix.statistics import Moments


@dataclass(frozen=True, eq=False)
class Solution:
    gain: np.ndarray  # (n_outputs, n_inputs)
    offset: np.ndarray  # (n_outputs,)


def input_scales(moments: Moments, n_inputs: int) -> np.ndarray:
    return np.sqrt(np.diag(moments.scatter)[:n_inputs])


def correlation(moments: Moments, n_inputs: int) -> np.ndarray:
    """R: the input scatter with every input scaled to unit variance."""
    d = input_scales(moments, n_inputs)
    return moments.scatter[:n_inputs, :n_inputs] / np.outer(d, d)


def solve(moments: Moments, n_inputs: int, ridge: float = 0.0) -> Solution:
    """Raises numpy.linalg.LinAlgError when R + ridge*I is not numerically positive definite."""
    m = n_inputs
    d = input_scales(moments, m)
    rhs = moments.scatter[:m, m:] / d[:, None]
    lower = np.linalg.cholesky(correlation(moments, m) + ridge * np.eye(m))
    z = np.linalg.solve(lower.T, np.linalg.solve(lower, rhs))
    gain = (z / d[:, None]).T
    offset = moments.mean[m:] - gain @ moments.mean[:m]
    return Solution(gain, offset)


def residual_scatter(moments: Moments, solution: Solution) -> np.ndarray:
    """Sum over the rows of e e^T, e = x - A y - b: [-A, I] S [-A, I]^T + n r r^T,
    r the mean residual.  For the least-squares fit on the same rows r = 0 and
    this is S_xx - A S_yx; it also holds for ridge fits and for held-out rows."""
    n_out, m = solution.gain.shape
    weights = np.hstack([-solution.gain, np.eye(n_out)])
    r = moments.mean[m:] - solution.gain @ moments.mean[:m] - solution.offset
    e = weights @ moments.scatter @ weights.T + moments.count * np.outer(r, r)
    return (e + e.T) / 2


def error_covariance(moments: Moments, solution: Solution) -> np.ndarray:
    """Residual covariance on the fitting rows, 1/(n-1) scaling like every covariance here."""
    return residual_scatter(moments, solution) / (moments.count - 1)


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
    squared = np.zeros(width - n_inputs)
    for held_out, early, late in zip(parts, before, reversed(after)):
        squared += np.diag(residual_scatter(held_out, solve(early.merge(late), n_inputs, ridge)))
    return np.sqrt(np.clip(squared, 0.0, None) / sum(p.count for p in parts))
