"""Integer coefficients that minimise the mean-square coefficient error.

For one output the accumulator error is delta . z with delta = q - t (the
integers less their real targets, offset first) and z = (1, y), so its mean
square is the quadratic form delta' M delta with M = E[z z'].  Rounding each
entry on its own ignores M.  The search rounds one entry at a time, last to
first, feeding each error forward through the Cholesky factor of M so the
entries still open absorb it (Babai's nearest-plane rounding: L. Babai,
"On Lovasz' lattice reduction and the nearest lattice point problem",
Combinatorica 6, 1986), then improves the result by single +-1 steps while
any lowers the form.  It starts from the better of that and plain rounding,
so it is never worse than plain rounding.
"""
from __future__ import annotations

import numpy as np

from affix.quantize.rounding_error import round_nearest_ties_up

_RIDGE = 1e-9  # keeps the factor of a singular M (a constant input) finite


def mean_square(delta: np.ndarray, moments: np.ndarray) -> float:
    return float(delta @ moments @ delta)


def search_steps(plain_error, moments, low, high) -> np.ndarray:
    """Integer steps k (q = plain + k) with low <= k <= high minimising the form, as floats."""
    feedback = _nearest_plane(plain_error, moments, low, high)
    start = feedback if mean_square(plain_error + feedback, moments) < mean_square(plain_error, moments) else np.zeros_like(feedback)
    return _descend(plain_error, start, moments, low, high)


def _nearest_plane(plain_error, moments, low, high) -> np.ndarray:
    scale = np.sqrt(np.diag(moments))
    scale[scale == 0] = 1.0
    n = len(plain_error)
    normalised = moments / np.outer(scale, scale)
    upper = np.linalg.cholesky(normalised + _RIDGE * np.eye(n)).T
    steps = np.zeros(n)
    for i in range(n - 1, -1, -1):
        later = scale[i + 1 :] * (plain_error[i + 1 :] + steps[i + 1 :])
        wanted = -(upper[i, i + 1 :] @ later) / upper[i, i] / scale[i]
        steps[i] = np.clip(round_nearest_ties_up(wanted - plain_error[i]), low[i], high[i])
    return steps


def _descend(plain_error, steps, moments, low, high) -> np.ndarray:
    steps = steps.copy()
    gradient = moments @ (plain_error + steps)
    curvature = np.diag(moments)
    for _ in range(20 * len(steps)):
        up = np.where(steps + 1 <= high, 2 * gradient + curvature, np.inf)  # change of the form for +1
        down = np.where(steps - 1 >= low, -2 * gradient + curvature, np.inf)
        i_up, i_down = int(np.argmin(up)), int(np.argmin(down))
        i, step, change = (i_up, 1.0, up[i_up]) if up[i_up] <= down[i_down] else (i_down, -1.0, down[i_down])
        if not change < -1e-12 * max(abs(float((plain_error + steps) @ gradient)), 1e-300):
            break
        steps[i] += step
        gradient += step * moments[:, i]
    return steps
