"""fleet.csv: one row per unit, the production line's pass/fail table.

The columns are a contract with the report (``affix.report.build_folder``
reads them back): ``unit,rows,passed``, then per output ``OUTPUT.rms``,
``OUTPUT.cv_rms``, ``OUTPUT.worst_case``, ``OUTPUT.margin`` and
``OUTPUT.passed``.  Booleans are ``true``/``false``; numbers are written so
they read back exactly; a figure a unit does not have (no cross-validation,
or no plan because the unit could not be fitted or does not fit the
interface) is an empty cell.  The margin is the smaller of the budget's and
the tolerance's (:class:`affix.fleet.plan.FleetPlan`).  Units come in fleet
order.
"""
from __future__ import annotations

import csv
import io

FIXED_COLUMNS = ("unit", "rows", "passed")
OUTPUT_FIELDS = ("rms", "cv_rms", "worst_case", "margin", "passed")
FILE = "fleet.csv"


def header(outputs) -> list[str]:
    return list(FIXED_COLUMNS) + [f"{o}.{f}" for o in outputs for f in OUTPUT_FIELDS]


def fleet_table(fleet, fleet_plan) -> str:
    """The text of fleet.csv for a :class:`FleetFit` and its :class:`FleetPlan`."""
    text = io.StringIO()
    writer = csv.writer(text, lineterminator="\n")
    writer.writerow(header(fleet.outputs))
    for unit in fleet.units:
        model, plan = fleet.models.get(unit), fleet_plan.plans.get(unit)
        cells = [unit, fleet.rows[unit], _flag(fleet_plan.passed(unit))]
        for i in range(len(fleet.outputs)):
            margin = None if plan is None else fleet_plan.margins[unit][i]
            cells += [
                _number(None if model is None else model.rms[i]),
                _number(None if model is None or model.cv_rms is None else model.cv_rms[i]),
                _number(None if plan is None else plan.worst_case_deviation[i]),
                _number(margin),
                _flag(plan is not None and (margin is None or margin >= 0)),
            ]
        writer.writerow(cells)
    return text.getvalue()


def _number(value) -> str:
    return "" if value is None else repr(float(value))


def _flag(value: bool) -> str:
    return "true" if value else "false"
