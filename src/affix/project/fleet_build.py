"""The steps a fleet build (a project with ``data.unit_column``) runs instead of fit and quantize, and after emit.

fit: every unit from one pass (:func:`affix.fleet.fit.fit_fleet`); the
build's model.json is the fleet's nominal unit, the fit of every unit's rows
together.  quantize: one interface for every unit
(:func:`affix.fleet.plan.plan_fleet`), plan.json the nominal unit's plan in
it, and fleet.csv.  records: each passing unit's record, after emit has
fixed the interface's fingerprint.  The failing units are named once the
build folder is in place (exit status 3): a production line rejects them,
the records of the others are written.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

from affix.errors import BudgetError, InterfaceError, NoConfigurationError, parameter
from affix.fleet import table
from affix.fleet.fit import FleetFit, bad_units_text, fit_fleet
from affix.fleet.plan import FleetPlan, plan_fleet
from affix.fleet.records import FOLDER, record_files, unit_record

_NAMED = 10  # failing units a message names before it counts the rest


@dataclass
class Fleet:
    """What the fleet steps hand on: the fits, the plans and, once written, each passing unit's record."""

    fit: FleetFit
    plan: FleetPlan | None = None
    records: dict | None = None  # unit -> bytes

    @property
    def failing(self) -> list[str]:
        return self.plan.failing if self.plan is not None else []


def fit_step(project, staged, step, progress, warn, engine="local") -> Fleet:
    with warnings.catch_warnings(record=True):
        warnings.simplefilter("always")
        fleet = fit_fleet(list(project.data_files), [c.name for c in project.inputs],
                          [c.name for c in project.outputs], project.unit_column, ridge=project.ridge,
                          folds=project.folds, drop_invalid=project.drop_invalid,
                          skip_bad_units=project.skip_bad_units, engine=engine)
    for line in fleet.warnings[:_NAMED]:
        warn(line)
    if len(fleet.warnings) > _NAMED:
        warn(f"and {len(fleet.warnings) - _NAMED} more units with nearly collinear inputs")
    if fleet.rejected:
        warn(f"left out {bad_units_text(fleet.rejected)}")
    if fleet.dropped_rows:
        warn(f"left out {fleet.dropped_rows} row(s) holding NaN, infinite or empty values")
    model = fleet.pooled
    staged.write_json("model.json", model.to_dict())
    condition = "inf" if model.condition_number is None else f"{model.condition_number:.3g}"
    sources = ", ".join(project.relative(p) for p in project.data_files)
    step("fit", f"{model.n_samples} rows of {sources}: {len(fleet.units)} units ({len(fleet.models)} fitted), "
                f"{model.n_inputs} inputs -> {model.n_outputs} outputs, nominal condition number {condition}")
    return Fleet(fleet)


def quantize_step(project, fleet: Fleet, options, pin, pin_path, staged, step, bar) -> None:
    from affix.intake import read_files

    calibration = None
    if project.calibration_rows:
        calibration = read_files(project.data_files, list(fleet.fit.inputs), drop_invalid=project.drop_invalid)
    with bar(len(fleet.fit.models), "planning units") as advance:
        try:
            fleet.plan = plan_fleet(fleet.fit, **options, calibration=calibration, progress=advance)
        except NoConfigurationError as exc:
            if pin is None or not exc.per_output:
                raise
            reasons = "; ".join(f"{name}: {why}" for name, why in exc.per_output.items())
            raise InterfaceError(
                f"the fleet's nominal unit does not fit the interface pinned in {pin_path} ({pin.id}): {reasons}. "
                f"Nothing was written; {parameter('repin')} plans a new interface (and the firmware must "
                "follow it)") from None
    nominal = fleet.plan.nominal
    staged.write_json("plan.json", nominal.to_dict())
    staged.write_text(table.FILE, table.fleet_table(fleet.fit, fleet.plan))
    units = len(fleet.fit.units)
    passing = units - len(fleet.failing)
    step("quantize", f"{nominal.coef_bits}-bit coefficients, {nominal.acc_bits}-bit accumulator, "
                     f"{nominal.output_ctype} outputs for every unit; {passing} of {units} units pass "
                     f"({table.FILE})")


def records_step(project, fleet: Fleet, interface, staged, step, bar) -> None:
    """records/: the .bin, .c and .hex of every unit that met its budget."""
    folder = staged.entry(FOLDER)
    folder.mkdir()
    fleet.records = {}
    passing = [unit for unit in fleet.plan.plans if fleet.plan.passed(unit)]
    with bar(len(passing), "writing records") as advance:
        for count, unit in enumerate(passing, start=1):
            data = unit_record(unit, fleet.plan.plans[unit], interface, fleet.fit.data_sha256)
            fleet.records[unit] = data
            for filename, content in record_files(project.name, unit, data, interface.id,
                                                  project.flash_address).items():
                (folder / filename).write_bytes(content)
            advance(count)
    size = interface.record["bytes"]
    kinds = ".bin, .c" + ("" if project.flash_address is None else f", .hex at 0x{project.flash_address:08X}")
    step("records", f"{len(passing)} records of {size} bytes in {FOLDER}/ ({kinds})")


def failing_error(fleet: Fleet) -> BudgetError:
    """Exit status 3 naming the units the line must reject (their reasons are in fleet.csv)."""
    failing = fleet.failing
    named = ", ".join(failing[:_NAMED]) + (f" and {len(failing) - _NAMED} more" if len(failing) > _NAMED else "")
    return BudgetError(f"{len(failing)} of {len(fleet.fit.units)} units fail: {named}; the line rejects "
                       f"{'it' if len(failing) == 1 else 'them'} (figures in {table.FILE}); the records of the other "
                       "units were written")


def record_summary(fleet: Fleet) -> dict:
    """What build.json says of the fleet."""
    return {"unit_column": fleet.fit.unit_column, "units": len(fleet.fit.units),
            "records": len(fleet.records or {}), "failing": fleet.failing}
