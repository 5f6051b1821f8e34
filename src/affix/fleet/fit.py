"""Every unit of a fleet log fitted from one pass over the data.

The pass gathers moments per unit and fold (:mod:`affix.statistics.units`);
each unit's model is then solved from its own moments exactly as
:func:`affix.fit` solves a single data set, so a unit's model equals the
model of its rows alone.  A unit that the data do not determine (too few
rows, a constant input, a singular fit) is named with the reason; with
``skip_bad_units`` the fleet goes on without it.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from affix.errors import AffixError, DataError, UsageError, parameter
from affix.fit.estimator import check_arguments, check_names, files_moments, models_from_parts
from affix.fit.passes import stream_moments
from affix.intake import from_array
from affix.intake.sources import data_files
from affix.model import Model
from affix.statistics import merge_along
from affix.unit_ids import case_clashes

_NAMED = 5  # bad units a message names one by one before it counts the rest


@dataclass
class FleetFit:
    """The units of a fleet log and their models.

    ``units``: every unit id in the log, in fleet order (digits by value);
    ``rows``: rows used per unit; ``models``: unit -> :class:`Model`, for
    the units that could be fitted; ``rejected``: unit -> why it could not
    be (only with ``skip_bad_units``); ``warnings``: one line per unit with
    nearly collinear inputs; ``data_sha256`` and ``dropped_rows`` of the
    whole log; ``pooled``: the model of every fitted unit's rows together,
    the fleet's nominal unit.
    """

    inputs: list[str]
    outputs: list[str]
    unit_column: str
    units: tuple[str, ...]
    rows: dict[str, int]
    models: dict[str, Model]
    rejected: dict[str, str] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    data_sha256: str | None = None
    dropped_rows: int = 0
    pooled: Model | None = None


def fit_fleet(data, inputs, outputs, unit_column: str, *, ridge: float = 0.0, folds: int = 5,
              drop_invalid: bool = False, skip_bad_units: bool = False, chunk_rows: int | None = None,
              engine="local") -> FleetFit:
    """Fit every unit of ``data``: a path or list of paths, patterns and Parquet dataset folders (as
    :func:`affix.fit`), or a mapping of columns holding ``unit_column`` too.  Every other argument
    means what it means for :func:`affix.fit` (the ``engine`` gathers every unit's statistics, on
    Dask grouped on the unit column in each block and merged per unit); a unit that cannot be
    fitted is an error naming it, unless ``skip_bad_units``."""
    if not isinstance(unit_column, str) or not unit_column:
        raise UsageError(f"must name the column of unit ids, got {unit_column!r}", parameter="unit_column")
    folds = check_arguments(ridge, folds)
    inputs, outputs = check_names(inputs, outputs)
    if unit_column in inputs + outputs:
        raise UsageError(f"the unit column '{unit_column}' cannot also be an input or output", parameter="unit_column")
    columns = inputs + outputs
    if isinstance(data, Mapping) or hasattr(data, "columns"):
        missing = [name for name in columns + [unit_column] if name not in data]
        if missing:
            raise DataError(f"no column '{missing[0]}' (available: {', '.join(map(str, data.keys()))})")
        values = np.column_stack([np.asarray(data[n], dtype=np.float64) for n in columns])
        stream = from_array(values, columns, chunk_rows=chunk_rows, drop_invalid=drop_invalid,
                            units=np.asarray(data[unit_column]))
        parts, dropped, sha256, path = stream_moments(stream, len(columns), folds), stream.rows_dropped, None, None
    else:
        paths = data_files([data] if isinstance(data, (str, bytes)) or hasattr(data, "__fspath__") else list(data))
        parts, dropped, sha256 = files_moments(paths, columns, folds, chunk_rows, drop_invalid, labels=unit_column,
                                               engine=engine)
        path = paths[0] if len(paths) == 1 else None
    clash = case_clashes(parts.units)
    if clash:
        raise DataError(f"unit ids '{clash[0]}' and '{clash[1]}' differ only in case, so their record files would "
                        "be one file on a case-insensitive file system; give the units distinct ids",
                        path, column=unit_column)
    if not parts.units:
        raise DataError("no rows with a unit id", path, column=unit_column)
    result = FleetFit(inputs, outputs, unit_column, parts.units, parts.rows(), {}, data_sha256=sha256,
                      dropped_rows=dropped)
    stack = parts.stacked  # every unit solved at once: leading axes (unit, fold)
    outcomes, notes = models_from_parts([stack[:, f] for f in range(parts.folds)], inputs, outputs, ridge=ridge,
                                        folds=folds, data_sha256=sha256, dropped_rows=0)
    for unit, outcome in zip(parts.units, outcomes):
        if isinstance(outcome, AffixError):
            result.rejected[unit] = outcome.marked
        else:
            result.models[unit] = outcome
    result.warnings = [f"unit {parts.units[k]}: {message}" for k, message in sorted(notes.items())]
    if result.rejected and not skip_bad_units:
        raise DataError(f"{bad_units_text(result.rejected)}; fix their data, or leave them out with "
                        f"{parameter('skip_bad_units')}", path, column=unit_column)
    if not result.models:
        raise DataError(f"no unit can be fitted: {bad_units_text(result.rejected)}", path, column=unit_column)
    fitted = [k for k, outcome in enumerate(outcomes) if not isinstance(outcome, AffixError)]
    pooled = merge_along(stack[fitted])  # the fitted units' rows together, fold by fold
    (result.pooled,), _ = models_from_parts([pooled[f : f + 1] for f in range(parts.folds)], inputs, outputs,
                                            ridge=ridge, folds=folds, data_sha256=sha256, dropped_rows=dropped)
    if isinstance(result.pooled, AffixError):
        raise result.pooled
    return result


def bad_units_text(rejected: dict[str, str]) -> str:
    """The units that could not be fitted, with their reasons, for one message line."""
    named = [f"unit {unit} ({reason})" for unit, reason in list(rejected.items())[:_NAMED]]
    more = len(rejected) - _NAMED
    return f"{len(rejected)} unit(s) cannot be fitted: " + "; ".join(named) + (f"; and {more} more" if more > 0 else "")
