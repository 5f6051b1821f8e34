"""Models fitted elsewhere: anything with scikit-learn's ``coef_`` and ``intercept_``.

Duck-typed, so scikit-learn is not imported.  Such a model has gain and
offset only: no calibration statistics came with it.
"""
from __future__ import annotations

import numpy as np

from affix.errors import UsageError
from affix.model import Model


def is_fitted_linear(obj) -> bool:
    return hasattr(obj, "coef_") and hasattr(obj, "intercept_")


def adopt(estimator, inputs=None, outputs=None) -> Model:
    gain = np.atleast_2d(np.asarray(estimator.coef_, dtype=float))
    n_out, m = gain.shape
    offset = np.broadcast_to(np.asarray(estimator.intercept_, dtype=float), (n_out,))
    if inputs is None:
        names_in = getattr(estimator, "feature_names_in_", None)
        inputs = [str(n) for n in names_in] if names_in is not None else default_names("y", m)
    if outputs is None:
        outputs = default_names("x", n_out)
    inputs, outputs = list(inputs), list(outputs)
    if len(inputs) != m or len(outputs) != n_out:
        raise UsageError(
            f"the estimator has {m} input(s) and {n_out} output(s), "
            f"but {len(inputs)} input and {len(outputs)} output name(s) were given"
        )
    return Model(inputs, outputs, gain, offset, source=f"adopted {type(estimator).__name__}")


def default_names(prefix: str, count: int) -> list[str]:
    return [f"{prefix}{j + 1}" for j in range(count)]
