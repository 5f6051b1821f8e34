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

from affix.errors import AffixError, DataError, FitError, UsageError, parameter
from affix.fit import conditioning
from affix.fit.adopt import adopt, default_names, is_fitted_linear
from affix.fit.blocks import Pass
from affix.fit.engines import engine_for
from affix.fit.passes import stream_moments
from affix.fit.solve import Solution, correlation, cross_validated_rms, error_covariance, solve
from affix.intake import from_array
from affix.intake.sources import data_files
from affix.model import Model
from affix.statistics import MAX_FOLDS, Moments, merge_all


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
    (outcome,), notes = models_from_parts([Moments.stack([part]) for part in parts], inputs, outputs, ridge=ridge,
                                          folds=folds, data_sha256=data_sha256, dropped_rows=dropped_rows, path=path)
    for message in notes.values():
        warnings.warn(message, CollinearityWarning, stacklevel=2)
    if isinstance(outcome, AffixError):
        raise outcome
    return outcome


def models_from_parts(parts, inputs, outputs, *, ridge, folds, data_sha256, dropped_rows, path=None):
    """A Model for each data set of a stack, all solved together: ``parts`` holds one
    stack of moments per fold, each with the sets along its first axis (see
    :mod:`affix.statistics.moments`).

    Returns (outcomes, notes): outcomes[k] is set k's Model, or the error that
    keeps it from one (the error :func:`model_from_parts` raises for that set
    alone); notes maps each set whose inputs are nearly collinear to the
    warning's message.  A set's figures are those of its fit alone."""
    m, n_out, width = len(inputs), len(outputs), len(inputs) + len(outputs)
    moments = merge_all(parts, width)
    size = len(moments.count)
    errors = _row_problems(moments, inputs, inputs + outputs, path)
    usable = np.array([k for k in range(size) if k not in errors], dtype=np.intp)
    condition = np.full(size, np.inf)
    condition[usable] = conditioning.condition_number(correlation(moments[usable], m))
    tried = usable[(ridge > 0) | (condition[usable] <= conditioning.SINGULAR_CONDITION)]
    solution, solved = _where_defined(lambda units: solve(moments[units], m, ridge), tried)
    for k in np.setdiff1d(usable, solved):
        errors[k] = _undetermined(moments[k], m, ridge, condition[k], inputs)
    notes = {k: _collinear(moments[k], m, condition[k], inputs) for k in solved
             if ridge == 0 and condition[k] > conditioning.WARN_CONDITION}
    gain, offset = np.empty((size, n_out, m)), np.empty((size, n_out))
    gain[solved], offset[solved] = solution.gain, solution.offset
    fitted, cv_rms = solved, None
    if folds >= 2:
        errors.update(_fold_problems(parts, solved, m))
        checked = np.array([k for k in solved if k not in errors], dtype=np.intp)
        scores, fitted = _where_defined(lambda units: cross_validated_rms([p[units] for p in parts], m, ridge), checked)
        for k in np.setdiff1d(checked, fitted):
            errors[k] = FitError(f"a {len(parts)}-fold cross-validation split leaves the inputs singular; "
                                 f"set {parameter('ridge')} or lower {parameter('folds')}")
        cv_rms = np.empty((size, n_out))
        cv_rms[fitted] = scores
    fit = moments[fitted]
    residual = np.empty((size, n_out, n_out))
    residual[fitted] = error_covariance(fit, Solution(gain[fitted], offset[fitted]))
    covariance = np.empty((size, m, m))
    covariance[fitted] = fit.covariance[:, :m, :m]
    outcomes = [errors.get(k) for k in range(size)]
    for k in fitted.tolist():
        outcomes[k] = Model(
            inputs=inputs,
            outputs=outputs,
            gain=gain[k],
            offset=offset[k],
            error_covariance=residual[k],
            cv_rms=None if cv_rms is None else cv_rms[k],
            n_samples=int(moments.count[k]),
            input_mean=moments.mean[k, :m],
            input_covariance=covariance[k],
            input_min=moments.low[k, :m],
            input_max=moments.high[k, :m],
            ridge=float(ridge),
            folds=folds,
            condition_number=float(condition[k]) if math.isfinite(condition[k]) else None,
            data_sha256=data_sha256,
            dropped_rows=dropped_rows,
        )
    return outcomes, notes


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


def _row_problems(moments, inputs, columns, path) -> dict:
    """The error for each set of a stack of moments whose rows cannot determine a fit:
    too few, a spread past double precision, an input constant or too small to square."""
    m, n = len(inputs), moments.count
    scatter = np.diagonal(moments.scatter, axis1=-2, axis2=-1)
    mean = np.abs(moments.mean[:, :m])
    with np.errstate(divide="ignore", invalid="ignore"):  # sets of one row or none fail the first test
        spread = np.sqrt(scatter[:, :m] / (n[:, None] - 1))
    too_small = (spread == 0) & (0 < mean) & (mean < _SMALLEST_SQUARED)
    constant = spread <= 8 * np.finfo(float).eps * mean
    finite = np.isfinite(scatter)
    problems = {}
    for k in np.flatnonzero((n < m + 2) | ~finite.all(axis=1) | (too_small | constant).any(axis=1)).tolist():
        problems[k] = _rows_problem(int(n[k]), finite[k], moments.mean[k], too_small[k], constant[k], inputs, columns,
                                    path)
    return problems


def _rows_problem(n, finite, mean, too_small, constant, inputs, columns, path) -> DataError:
    m = len(inputs)
    if n < m + 2:
        return DataError(f"only {n} usable row(s); fitting {m} input(s) needs at least {m + 2}", path)
    if not finite.all():  # each value is below LARGEST_VALUE, but the spread of very many is not
        return DataError("the sum of squared deviations overflows double precision; rescale the column", path,
                         column=columns[int(np.argmin(finite))])
    j = int(np.argmax(too_small | constant))
    if too_small[j]:
        return DataError(f"values near {mean[j]:.3g} are too small to square in double precision (below "
                         f"{_SMALLEST_SQUARED:.0e}); rescale the column", path, column=inputs[j])
    return DataError(f"input column is constant ({mean[j]:.6g} in every row), so it carries no information; "
                     "leave it out", path, column=inputs[j])


def _where_defined(compute, units):
    """(compute(units), units): ``compute`` of a stack's sets at once.  Where LAPACK
    refuses a matrix of some set, only the sets it accepts on their own, and those sets."""
    try:
        return compute(units), units
    except np.linalg.LinAlgError:
        accepted = np.array([k for k in units if _accepts(compute, k)], dtype=np.intp)
        return compute(accepted), accepted


def _accepts(compute, k) -> bool:
    try:
        compute(np.array([k]))
    except np.linalg.LinAlgError:
        return False
    return True


def _undetermined(moments, m, ridge, condition, inputs) -> FitError:
    r = correlation(moments, m)
    suggestion = max(conditioning.suggested_ridge(r), 10 * ridge)
    return FitError(
        conditioning.describe(conditioning.collinear_inputs(r, inputs), condition)
        + f": they do not determine the gains; pass {parameter('ridge')}={suggestion:g} or leave one of them out"
    )


def _collinear(moments, m, condition, inputs) -> str:
    names = conditioning.collinear_inputs(correlation(moments, m), inputs)
    return conditioning.describe(names, condition) + "; their gains are poorly determined"


def _fold_problems(parts, sets, m) -> dict:
    """The error for each of ``sets`` whose folds are too small to cross-validate a fit."""
    counts = np.stack([np.asarray(p.count) for p in parts])[:, sets]
    total, largest = counts.sum(axis=0), counts.max(axis=0)
    problems = {}
    for k, rows, smallest in zip(sets.tolist(), total.tolist(), (total - largest).tolist()):
        if len(parts) > rows:
            problems[k] = UsageError(f"{len(parts)} folds need at least as many usable rows; the data have {rows}",
                                     parameter="folds")
        elif smallest < m + 2:
            problems[k] = FitError(
                f"too few rows for {len(parts)}-fold cross-validation: a training split would hold only "
                f"{smallest} rows for {m} input(s); lower {parameter('folds')}, or set it to 0 to skip "
                "cross-validation")
    return problems
