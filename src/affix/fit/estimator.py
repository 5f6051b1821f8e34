"""``affix.fit``: calibration data in, a :class:`affix.model.Model` out.

One pass over the data builds per-fold moments; everything else (gain,
offset, error covariance, cross-validated RMS, conditioning) is computed from
those small matrices.
"""
from __future__ import annotations

import math
import numbers
import os
import warnings
from collections.abc import Mapping

import numpy as np

from affix.errors import DataError, FitError, UsageError, parameter
from affix.fit import conditioning
from affix.fit.adopt import adopt, default_names, is_fitted_linear
from affix.fit.blocks import Pass
from affix.fit.engines import engine_for
from affix.fit.passes import stream_moments
from affix.fit.solve import correlation, cross_validated_rms, error_covariance, solve
from affix.intake import from_array
from affix.intake.sources import data_files
from affix.model import Model
from affix.statistics import MAX_FOLDS, merge_all


# Below this magnitude a value's square underflows to zero or loses digits
# (float64's smallest normal number is 2.2e-308), so a spread of such values vanishes.
_SMALLEST_SQUARED = 1e-150


class CollinearityWarning(UserWarning):
    """Some inputs are nearly linear combinations of others; their gains are poorly determined."""


def fit(
    data,
    inputs=None,
    outputs=None,
    *,
    ridge: float = 0.0,
    folds: int = 5,
    drop_invalid: bool = False,
    chunk_rows: int | None = None,
    engine="local",
) -> Model:
    """Fit x_hat = gain @ y + offset by least squares.

    ``data`` is one of
      * a path to a CSV (columns by header name), .npy, .npz or Parquet file,
        a glob pattern or a Parquet dataset folder -- see :mod:`affix.intake`;
        ``inputs`` and ``outputs`` name the columns;
      * a list of such paths, fitted as one data set (``data_sha256`` is
        then the hash of their names and digests, see
        :func:`affix.intake.sources.data_hash`);
      * a mapping of column name -> values (a dict of arrays, a pandas DataFrame);
      * a pair ``(y, x)`` of arrays, rows are samples; names default to
        y1.. and x1..;
      * an already fitted estimator with ``coef_`` and ``intercept_``
        (scikit-learn LinearRegression, Ridge, ...): adopted as it is, names
        from ``feature_names_in_`` where it has them.

    ``ridge`` is relative: gain = S_xy (S_yy + ridge * diag(S_yy))^-1.
    ``folds`` = 0 skips cross-validation.  With ``drop_invalid`` rows holding
    NaN, infinities or empty cells are left out (counted in ``dropped_rows``);
    otherwise they are an error.

    ``engine`` runs the pass over files: "local" (this machine), "dask" (a
    Dask cluster started on this machine for the fit), or an engine object
    such as ``affix.fit.dask_engine.DaskEngine(scheduler="tcp://host:8786")``.
    Every engine gives the same model, to the last bit on machines with the
    same NumPy.
    """
    if is_fitted_linear(data):
        return adopt(data, inputs, outputs)
    folds = check_arguments(ridge, folds)
    engine_for(engine)  # checked before any work
    inputs, outputs, paths, values = _open(data, inputs, outputs)
    width = len(inputs) + len(outputs)
    if paths is not None:
        parts, dropped, sha256 = files_moments(paths, inputs + outputs, folds, chunk_rows, drop_invalid, engine=engine)
    else:
        stream = from_array(values, inputs + outputs, chunk_rows=chunk_rows, drop_invalid=drop_invalid)
        parts, dropped, sha256 = stream_moments(stream, width, folds), stream.rows_dropped, None
    return model_from_parts(parts, inputs, outputs, ridge=ridge, folds=folds, data_sha256=sha256, dropped_rows=dropped,
                            path=paths[0] if paths and len(paths) == 1 else None)


def check_arguments(ridge, folds) -> int:
    """The fit's ``ridge`` and ``folds`` checked; the number of folds."""
    if not (isinstance(ridge, (int, float)) and math.isfinite(ridge) and ridge >= 0):
        raise UsageError(f"must be a finite number >= 0, got {ridge!r}", parameter="ridge")
    if isinstance(folds, bool) or not isinstance(folds, numbers.Integral) or not (folds == 0 or 2 <= folds <= MAX_FOLDS):
        raise UsageError(
            f"must be 0 (no cross-validation) or a whole number from 2 to {MAX_FOLDS}, got {folds!r}", parameter="folds"
        )
    return int(folds)


def model_from_parts(parts, inputs, outputs, *, ridge, folds, data_sha256, dropped_rows, path=None) -> Model:
    """The Model from per-fold moments of [inputs, outputs] (one part when ``folds`` < 2).

    Raises DataError for too few rows or a constant input, FitError for a
    singular fit or cross-validation; ``path`` is what a DataError names.
    Warns CollinearityWarning above the conditioning limit."""
    m, width = len(inputs), len(inputs) + len(outputs)
    moments = merge_all(parts, width)
    _check_rows(moments, inputs, inputs + outputs, path)
    r = correlation(moments, m)
    condition = conditioning.condition_number(r)
    solution = _solve(moments, m, ridge, r, condition, inputs)
    if ridge == 0 and condition > conditioning.WARN_CONDITION:
        names = conditioning.collinear_inputs(r, inputs)
        message = conditioning.describe(names, condition) + "; their gains are poorly determined"
        warnings.warn(message, CollinearityWarning, stacklevel=2)
    cv_rms = _cross_validate(parts, m, ridge) if folds >= 2 else None
    covariance = moments.covariance
    return Model(
        inputs=inputs,
        outputs=outputs,
        gain=solution.gain,
        offset=solution.offset,
        error_covariance=error_covariance(moments, solution),
        cv_rms=cv_rms,
        n_samples=moments.count,
        input_mean=moments.mean[:m],
        input_covariance=covariance[:m, :m],
        input_min=moments.low[:m],
        input_max=moments.high[:m],
        ridge=float(ridge),
        folds=folds,
        condition_number=condition if math.isfinite(condition) else None,
        data_sha256=data_sha256,
        dropped_rows=dropped_rows,
    )


def files_moments(paths, columns, folds, chunk_rows, drop_invalid, labels=None, engine="local"):
    """Per-fold moments of several files as one data set (UnitMoments with a unit column ``labels``):
    (parts, rows dropped, data_sha256), from the pass the ``engine`` runs (see :func:`fit`).
    ``paths`` are files, or any entries :func:`affix.intake.sources.data_files` takes."""
    settings = Pass(tuple(columns), folds, drop_invalid, chunk_rows, labels)
    return engine_for(engine).moments(data_files(paths), settings)


def _open(data, inputs, outputs):
    """(inputs, outputs, paths, None) for files, (inputs, outputs, None, rows) for data in memory."""
    if isinstance(data, (str, os.PathLike)) or _is_path_list(data):
        if inputs is None or outputs is None:
            raise UsageError("fitting a file needs the names of its input and output columns")
        paths = data_files([data] if isinstance(data, (str, os.PathLike)) else list(data))
        return (*check_names(inputs, outputs), paths, None)
    if isinstance(data, Mapping) or hasattr(data, "columns"):
        if inputs is None or outputs is None:
            raise UsageError("fitting named columns needs the names of the input and output columns")
        inputs, outputs = check_names(inputs, outputs)
        missing = [name for name in inputs + outputs if name not in data]
        if missing:
            raise DataError(f"no column '{missing[0]}' (available: {', '.join(map(str, data.keys()))})")
        return inputs, outputs, None, np.column_stack([np.asarray(data[n], dtype=np.float64) for n in inputs + outputs])
    if isinstance(data, (tuple, list)) and len(data) == 2:
        y, x = (np.asarray(a, dtype=np.float64) for a in data)
        y, x = y.reshape(len(y), -1), x.reshape(len(x), -1)
        if len(y) != len(x):
            raise DataError(f"the inputs have {len(y)} rows but the outputs {len(x)}")
        inputs = default_names("y", y.shape[1]) if inputs is None else inputs
        outputs = default_names("x", x.shape[1]) if outputs is None else outputs
        inputs, outputs = check_names(inputs, outputs)
        if (len(inputs), len(outputs)) != (y.shape[1], x.shape[1]):
            raise UsageError(
                f"{len(inputs)} input and {len(outputs)} output names for arrays of "
                f"{y.shape[1]} and {x.shape[1]} columns"
            )
        return inputs, outputs, None, np.hstack([y, x])
    raise UsageError(
        f"cannot fit {type(data).__name__}: give a file path, a mapping of columns, a pair (y, x) or a fitted estimator"
    )


def _is_path_list(data) -> bool:
    return isinstance(data, (list, tuple)) and bool(data) and all(isinstance(p, (str, os.PathLike)) for p in data)


def check_names(inputs, outputs):
    """The input and output column names as text, checked: at least one each, none twice, none in both."""
    inputs, outputs = [str(n) for n in inputs], [str(n) for n in outputs]
    if not inputs or not outputs:
        raise UsageError("name at least one input and one output column")
    for role, names in (("inputs", inputs), ("outputs", outputs)):
        twice = sorted({n for n in names if names.count(n) > 1})
        if twice:
            raise UsageError(f"column '{twice[0]}' is listed twice in the {role}")
    both = [n for n in outputs if n in inputs]
    if both:
        raise UsageError(f"column '{both[0]}' is both an input and an output")
    return inputs, outputs


def _check_rows(moments, inputs, columns, path):
    m, n = len(inputs), moments.count
    if n < m + 2:
        raise DataError(f"only {n} usable row(s); fitting {m} input(s) needs at least {m + 2}", path)
    for name, finite in zip(columns, np.isfinite(np.diag(moments.scatter))):
        if not finite:  # each value is below LARGEST_VALUE, but the spread of very many is not
            raise DataError(
                "the sum of squared deviations overflows double precision; rescale the column", path, column=name
            )
    spread = np.sqrt(np.diag(moments.scatter)[:m] / (n - 1))
    for name, mean, sd in zip(inputs, moments.mean[:m], spread):
        if sd == 0 and 0 < abs(mean) < _SMALLEST_SQUARED:
            raise DataError(
                f"values near {mean:.3g} are too small to square in double precision (below "
                f"{_SMALLEST_SQUARED:.0e}); rescale the column",
                path,
                column=name,
            )
        if sd <= 8 * np.finfo(float).eps * abs(mean):
            raise DataError(
                f"input column is constant ({mean:.6g} in every row), so it carries no information; leave it out",
                path,
                column=name,
            )


def _solve(moments, m, ridge, r, condition, inputs):
    if ridge > 0 or condition <= conditioning.SINGULAR_CONDITION:
        try:
            return solve(moments, m, ridge)
        except np.linalg.LinAlgError:
            pass
    suggestion = max(conditioning.suggested_ridge(r), 10 * ridge)
    raise FitError(
        conditioning.describe(conditioning.collinear_inputs(r, inputs), condition)
        + f": they do not determine the gains; pass {parameter('ridge')}={suggestion:g} or leave one of them out"
    )


def _cross_validate(parts, m, ridge):
    total = sum(p.count for p in parts)
    if len(parts) > total:
        raise UsageError(f"{len(parts)} folds need at least as many usable rows; the data have {total}", parameter="folds")
    smallest = total - max(p.count for p in parts)
    if smallest < m + 2:
        raise FitError(
            f"too few rows for {len(parts)}-fold cross-validation: a training split would hold only "
            f"{smallest} rows for {m} input(s); lower {parameter('folds')}, or set it to 0 to skip cross-validation"
        )
    try:
        return cross_validated_rms(parts, m, ridge)
    except np.linalg.LinAlgError:
        raise FitError(
            f"a {len(parts)}-fold cross-validation split leaves the inputs singular; "
            f"set {parameter('ridge')} or lower {parameter('folds')}"
        ) from None
