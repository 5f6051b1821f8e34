"""Second moments of the augmented input z = (1, y_1 .. y_m), in counts.

The coefficient-quantization error of one output is delta . z, so its mean
square is the quadratic form delta' E[z z'] delta: exact given these moments.
"""
from __future__ import annotations

import numpy as np

from affix.arithmetic import box_bounds

CALIBRATION = "calibration"
UNIFORM_BOX = "uniform-box"


def augmented_moments(model, box, input_scale) -> tuple[np.ndarray, str]:
    """E[z z'] from the model's calibration moments, else uniform over the box.

    ``input_scale`` is physical units per count, per input (1 where the model
    works in counts already).
    """
    if model.input_mean is None or model.input_covariance is None:
        return uniform_box_moments(box), UNIFORM_BOX
    mean = model.input_mean / input_scale
    covariance = model.input_covariance / np.outer(input_scale, input_scale)
    n = model.n_samples
    if n > 1:  # the model stores the 1/(n-1) covariance; the mean square needs 1/n
        covariance = covariance * (n - 1) / n
    return _augment(mean, covariance), CALIBRATION


def uniform_box_moments(box) -> np.ndarray:
    """Inputs independent and uniform over the integers of their ranges."""
    lo, hi = box_bounds(box, float)
    width = hi - lo + 1
    return _augment((lo + hi) / 2, np.diag((width**2 - 1) / 12))  # discrete uniform variance


def _augment(mean, covariance) -> np.ndarray:
    m = len(mean)
    moments = np.empty((m + 1, m + 1))
    moments[0, 0] = 1.0
    moments[0, 1:] = moments[1:, 0] = mean
    moments[1:, 1:] = covariance + np.outer(mean, mean)
    return moments
