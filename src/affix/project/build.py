"""affix build: a project file in, one verified build folder out, all or nothing.

The steps are the stages themselves, in order: fit -> quantize -> emit ->
verify, then the diff against the previous build.  Everything is written
into a staging folder first, which replaces the previous build only when
every step has passed (a :class:`affix.files.FileSet`): a failed build
leaves the last good one untouched.  The folder holds no
timestamps and no absolute paths, and every file is written in a fixed
order from fixed inputs, so two builds of the same inputs are identical byte
for byte.

The first successful build pins the firmware interface in
``NAME.interface.json`` beside the project file.  Later builds plan within
it: widths, output type and output lsbs come from the pin wherever the
project leaves them open, and a build that would change the interface stops
with exit status 5 unless ``repin`` accepts the change.

Before anything is replaced, every file of the previous build is checked
against the SHA-256 that build recorded: a file edited by hand since is
never silently overwritten, and a file the build did not write is left alone.
"""
from __future__ import annotations

import os
import warnings
from dataclasses import dataclass, field
from pathlib import Path

from affix import files
from affix._version import __version__
from affix.coverage import coverage, summary_line
from affix.errors import (AffixError, BudgetError, DataError, FileFormatError, InterfaceError, NoConfigurationError,
                          ToolError, UsageError, parameter)
from affix.intake.sources import data_hash
from affix.interface import Interface
from affix.progress import no_bar
from affix.project import fleet_build
from affix.targets import get_target

BUILD_FORMAT = "affix.build/1"
RECORD = "build.json"


@dataclass
class BuildResult:
    """What a build did.  ``pin`` is "pinned" (first build), "kept" or "repinned"."""

    out: Path
    steps: list[dict] = field(default_factory=list)  # {"step", "status"} in order
    interface: Interface | None = None
    pin: str = ""
    interface_changes: list[str] = field(default_factory=list)
    coverage: list = field(default_factory=list)  # affix.coverage.InputCoverage per input
    target: str | None = None  # the plan's target (affix.targets)
    target_figures: dict | None = None  # its numbers from affix.targets.figures, where measured
    record: dict | None = None  # build.json
    fleet: object | None = None  # affix.project.fleet_build.Fleet of a fleet build


def build_project(project, *, out=None, repin: bool = False, force: bool = False,
                  progress=lambda line: None, warn=lambda line: None, bar=no_bar, engine=None) -> BuildResult:
    """Run every step for ``project`` into ``out`` (default: the project's build folder).

    ``progress`` receives one line per finished step, ``warn`` each warning.
    ``force`` replaces a previous build even where files were edited by hand.
    ``bar(total, label)`` is a context manager for a long step over many units, yielding
    a function that takes how many are done (the CLI draws a progress bar with it).

    A fleet (``data.unit_column``) fits every unit, plans them in one interface and
    writes fleet.csv and each passing unit's calibration record; when some unit fails
    its budget the build folder is still written, then BudgetError names the units.

    ``engine`` runs the fit's pass (see :func:`affix.fit`); by default the project's
    ``fit.engine``, drawing its progress with ``bar``.
    """
    if engine is None:
        from affix.fit.engines import named

        engine = named(project.engine, project.scheduler, bar=bar, scheduler_parameter="fit.scheduler")
    out = Path(project.out if out is None else out)
    previous = previous_build(out, force=force)
    pin_path = _pin_path(project, previous)
    pin = Interface.load(pin_path) if pin_path else None
    result = BuildResult(out)
    inputs = [project.path, *project.data_files, *([pin_path] if pin_path else [])]
    staged = None

    def earlier(folder: Path) -> set[str]:
        """What the build may replace or remove in its folder: what the last build wrote (a file in a
        subfolder, records/UNIT.bin, by its folder) and, with ``force``, whatever this build writes over
        (a file it never wrote is still left alone)."""
        names = {RECORD, *(name.split("/")[0] for name in previous["files"])} if previous else set()
        return names | set(staged.names) if force else names

    fleet = None
    with files.protected(inputs), files.FileSet(out, parameter="out", earlier=earlier) as staged:
        if project.unit_column is None:
            model = _fit(project, staged, result, progress, warn, engine)
            plan = _quantize(project, model, None if repin else pin, pin_path, staged, result, progress)
        else:
            def step(name: str, summary: str) -> None:
                _step(result, progress, name, summary)

            fleet = fleet_build.fit_step(project, staged, step, progress, warn, engine)
            model = fleet.fit.pooled
            options = within(project.plan_options(), None if repin else pin, model.outputs)
            options["tolerance"] = {c.name: c.tolerance for c in project.outputs if c.tolerance is not None} or None
            fleet_build.quantize_step(project, fleet, options, None if repin else pin, pin_path, staged, step, bar)
            plan = fleet.plan.nominal
            _coverage(project, model, result, progress, warn)
        interface = _emit(project, plan, staged, result, progress, warn)
        result.interface_changes = pin.changes(interface) if pin else []
        if result.interface_changes and not repin:
            raise InterfaceError(
                f"the build would change the interface pinned in {pin_path} ({pin.id} -> {interface.id}): "
                + "; ".join(result.interface_changes)
                + f". Nothing was written; {parameter('repin')} accepts the change (and the firmware must follow it)")
        if fleet is not None:
            fleet_build.records_step(project, fleet, interface, staged, step, bar)
        _verify(project, staged, result, progress, None if fleet is None else fleet.records)
        if previous is not None:
            _diff_previous(out, staged, result, progress, warn)
        if project.report:
            _report(project, model, interface, out, staged, result, progress, warn)
        result.record = _record(project, model, interface, out, staged, result, fleet)
        staged.write_json(RECORD, result.record)
    result.interface = interface
    result.fleet = fleet
    if pin is None or result.interface_changes or pin_path != project.interface_path:
        interface.save(project.interface_path)
        result.pin = "pinned" if pin is None else "repinned"
        if pin_path is not None and pin_path != project.interface_path:
            warn(f"{pin_path} belongs to the estimator's former name and is no longer used; delete it")
    else:
        result.pin = "kept"
    if fleet is not None and fleet.failing:
        raise fleet_build.failing_error(fleet)
    return result


def previous_build(out: Path, *, force: bool) -> dict | None:
    """The previous build's record, after checking that none of its files changed since; None if there is none."""
    record_path = out / RECORD
    if not record_path.is_file():
        return None
    try:
        record = files.check_format(files.read_json(record_path, "build record"), BUILD_FORMAT, "build record",
                                    record_path)
        listed = record["files"]
        if not isinstance(listed, dict):
            raise FileFormatError("'files' must map file names to SHA-256 digests", record_path)
    except (FileFormatError, KeyError):
        if force:
            return None
        raise FileFormatError(f"not a readable build record; {parameter('force')} replaces the build",
                              record_path) from None
    if not force:
        for name, sha256 in sorted(listed.items()):
            path = out / name
            if path.is_file() and files.file_sha256(path) != sha256:
                raise UsageError(f"{path} was edited by hand since the last build (its SHA-256 differs from "
                                 f"{RECORD}); keep the change elsewhere, or replace it with {parameter('force')}")
    return record


def _pin_path(project, previous) -> Path | None:
    """The pinned interface: the project's own, or the one the previous build's estimator name left behind."""
    if project.interface_path.is_file():
        return project.interface_path
    former = previous.get("name") if previous else None
    if isinstance(former, str) and former != project.name:
        path = project.folder / f"{former}.interface.json"
        if path.is_file():
            return path
    return None


def _fit(project, staged, result, progress, warn, engine):
    import affix

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        warnings.simplefilter("ignore", ResourceWarning)  # an engine's sockets are its own business
        model = affix.fit(list(project.data_files), [c.name for c in project.inputs],
                          [c.name for c in project.outputs], ridge=project.ridge, folds=project.folds,
                          drop_invalid=project.drop_invalid, engine=engine)
    for warning in caught:
        warn(str(warning.message))
    if model.dropped_rows:
        warn(f"left out {model.dropped_rows} row(s) holding NaN, infinite or empty values")
    staged.write_json("model.json", model.to_dict())
    condition = "inf" if model.condition_number is None else f"{model.condition_number:.3g}"
    sources = ", ".join(project.relative(p) for p in project.data_files)
    _step(result, progress, "fit", f"{model.n_samples} rows of {sources}: {model.n_inputs} inputs -> "
                                   f"{model.n_outputs} outputs, condition number {condition}")
    _coverage(project, model, result, progress, warn)
    return model


def _coverage(project, model, result, progress, warn) -> None:
    covered = coverage(model, [c.range for c in project.inputs], [c.lsb for c in project.inputs])
    result.coverage = covered
    progress(f"{'':10}{summary_line(covered)}")
    for column in covered:
        if column.extrapolated:
            warn(column.warning())


def _quantize(project, model, pin, pin_path, staged, result, progress):
    from affix.intake import read_files
    from affix.quantize import plan_fixed_point

    calibration = None
    if project.calibration_rows:
        calibration = read_files(project.data_files, list(model.inputs), drop_invalid=project.drop_invalid)
    try:
        # The pin fixes the widths the project leaves open; the best-effort
        # budget of an open search still applies, as it did in the first build.
        options = within(project.plan_options(), pin, model.outputs)
        default_budget = None in (project.coef_bits, project.acc_bits, project.output_type)
        plan = plan_fixed_point(model, **options, default_budget=default_budget, calibration=calibration)
    except (NoConfigurationError, BudgetError) as exc:
        if pin is None or not exc.per_output:
            raise
        reasons = "; ".join(f"{name}: {why}" for name, why in exc.per_output.items())
        raise InterfaceError(
            f"the new calibration does not fit the interface pinned in {pin_path} ({pin.id}): {reasons}. Nothing "
            f"was written; {parameter('repin')} plans a new interface (and the firmware must follow it)") from None
    staged.write_json("plan.json", plan.to_dict())
    budget = plan.budget
    verdict = "no budget"
    if budget:
        margins = [(m, n) for m, n in zip(budget["margins"], plan.outputs) if m is not None]
        closest = min(margins) if margins else None
        verdict = ("budget met" if budget["met"] else "budget NOT met (closest configuration)") + (
            f", smallest margin {closest[1]} {closest[0]:+.3g}" if closest else "")
    _step(result, progress, "quantize", f"{plan.coef_bits}-bit coefficients, {plan.acc_bits}-bit accumulator, "
                                        f"{plan.output_ctype} outputs; {verdict}")
    return plan


def within(options: dict, pin: Interface | None, outputs) -> dict:
    """``options`` with every choice the project leaves open taken from the pinned interface:
    widths, input and output types and the lsb of each of ``outputs``.  What the project states stays,
    so a deliberate change shows as an interface change rather than being overridden."""
    if pin is None:
        return options
    options = dict(options)
    if pin.fixed_point is not None:
        for key in ("coef_bits", "acc_bits"):
            if options[key] is None:
                options[key] = pin.fixed_point[key]
    if options["output_ctype"] is None and pin.output_ctype != "float":
        options["output_ctype"] = pin.output_ctype
    if options["input_ctype"] is None:
        options["input_ctype"] = pin.input_ctype
    lsbs = dict(options["output_lsb"] or {})
    for port in pin.outputs:
        if port["lsb"] is not None and port["name"] in outputs:
            lsbs.setdefault(port["name"], port["lsb"])
    options["output_lsb"] = lsbs or None
    return options


def _emit(project, plan, staged, result, progress, warn) -> Interface:
    from affix.emit.writer import emit, manifest_name

    lang = "all" if len(project.languages) > 1 else project.languages[0]
    manifest = emit(plan, lang=lang, name=project.name, out_dir=staged.staging, arith=project.arith,
                    style=project.style, units=project.units, coefficients=project.coefficients)
    written = [f for names in manifest["files"].values() for f in names] + [manifest_name(project.name)]
    for name in written:
        staged.entry(name)  # written by emit's own file set, inside the build's staging folder
    interface = Interface.from_dict(manifest["interface"])
    _step(result, progress, "emit", f"{', '.join(written)}; interface {interface.id}")
    result.target = plan.target
    if "c" in manifest["files"] and project.arith == "int" and get_target(plan.target).compiler is not None:
        _measure(staged, plan.target, result, progress, warn)
    return interface


def _measure(staged, target, result, progress, warn) -> None:
    """What the emitted C costs on the target (as 'affix emit' prints it), kept for build.json."""
    from affix.targets.figures import figures_text, target_figures

    try:
        figures = target_figures(staged.staging, target)
    except ToolError as exc:
        warn(f"{target}: no figures ({exc.message})")
        return
    progress(f"{'':10}{figures_text(figures)}")
    result.target_figures = figures


def _report(project, model, interface, out, staged, result, progress, warn) -> None:
    """report.html, drawn from the staged folder as it will stand: the last step before it moves into place."""
    import importlib.util

    if importlib.util.find_spec("matplotlib") is None:
        from affix.report import INSTALL_HINT

        result.steps.append({"step": "report", "status": "skipped"})
        warn(f"no report.html: the report needs matplotlib ({INSTALL_HINT}), or set build.report = false")
        return
    from affix.report import REPORT_FILE, render_report

    record = _record(project, model, interface, out, staged, result)  # all but the report's own hash
    staged.write_text(REPORT_FILE, render_report(staged.staging, record=record, location=out))
    _step(result, progress, "report", REPORT_FILE)


def _verify(project, staged, result, progress, records=None) -> None:
    from affix.verify.check import verify

    report = verify(staged.staging, vectors=project.vectors, seed=project.seed,
                    data=list(project.data_files) if project.calibration_rows else None, records=records)
    staged.write_json("verification.json", report.to_dict())
    _step(result, progress, "verify", f"PASS, {report.mismatches} mismatches in {report.evaluations} evaluations")


def _diff_previous(out, staged, result, progress, warn) -> None:
    from affix import diff

    try:
        old = diff.Calibration.load(out, label="previous build")
    except AffixError as exc:
        warn(f"the previous build cannot be compared with this one ({exc.message}); no diff.json")
        return
    new = diff.Calibration.load(staged.staging, label="this build")
    changes = diff.diff(old, new)
    staged.write_text("diff.json", diff.to_json(changes))
    largest = diff.largest_gain_change(changes, new.model)
    moved = "; gains unchanged" if largest is None else (
        f"; largest gain change {largest[0]}/{largest[1]} {largest[2]:+.2%}")
    verdict = "interface CHANGED" if changes["interface_changed"] else "interface unchanged"
    _step(result, progress, "diff", f"against the previous build: {verdict}{moved} (diff.json)")


def _record(project, model, interface, out, staged, result, fleet=None) -> dict:
    data = [{"path": project.relative(p), "sha256": files.file_sha256(p)} for p in project.data_files]
    if data_hash((d["path"], d["sha256"]) for d in data) != model.data_sha256:
        raise DataError("a data file changed while the build read it; run the build again")
    return {
        "format": BUILD_FORMAT,
        "tool_version": __version__,
        "name": project.name,
        "project": _relative(project.path, out),
        "interface_file": _relative(project.interface_path, out),
        "interface_id": interface.id,
        "data": data,
        "target": result.target,
        "target_figures": result.target_figures,
        "coverage": [c.to_dict() for c in result.coverage],
        "steps": list(result.steps),
        **({} if fleet is None else {"fleet": fleet_build.record_summary(fleet)}),
        "files": _hashes(staged),
    }


def _hashes(staged) -> dict:
    """The SHA-256 of every file of the staged build; a subfolder's files as 'FOLDER/NAME'."""
    hashes = {}
    for name in staged.names:
        path = staged.staging / name
        inside = sorted(path.iterdir()) if path.is_dir() else [path]
        hashes.update({f.relative_to(staged.staging).as_posix(): files.file_sha256(f) for f in inside})
    return dict(sorted(hashes.items()))


def _step(result, progress, step: str, summary: str) -> None:
    result.steps.append({"step": step, "status": "ok"})
    progress(f"{step:<10}{summary}")


def _relative(path, start) -> str:
    return Path(os.path.relpath(path, start)).as_posix()
