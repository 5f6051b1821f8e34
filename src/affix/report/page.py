"""Assemble the page: the numbers and plots of each section, rendered through codegen_templates/report/."""
from __future__ import annotations

import numpy as np

from affix.emit.context import CAUTION
from affix.emit.templates import render
from affix.quantize.measure import deviation_on_counts, random_box_points
from affix.quantize.planner import BOX_POINTS
from affix.report import content, plots
from affix.report.build_folder import BuildFolder
from affix.report.content import Number, numbers, pointer
from affix.report.palette import PALETTE
from affix.report.scan import DataScan, deviation_edges, histogram, over_bound

TEMPLATE = "report/page.html.jinja"
RANDOM_SEED = 0  # the quantizer's default seed for its random box points, so the figures agree


def sections_without_data(folder: BuildFolder) -> dict:
    """The sections drawn from the folder's files alone: they can be drawn while the data are read."""
    return {
        "budget": budget_section(folder),
        "gain": gain_section(folder),
        "headroom": headroom_section(folder),
        "verification": verification_section(folder),
        "changes": changes_section(folder),
        "fleet": fleet_section(folder),
    }


def render_page(folder: BuildFolder, scan: DataScan, drawn: dict | None = None) -> str:
    """The page's HTML; ``drawn`` is what :func:`sections_without_data` returned, if already called."""
    sections = {
        **(drawn if drawn is not None else sections_without_data(folder)),
        "deviation": deviation_section(folder, scan),
        "residuals": residual_section(folder, scan),
        "coverage": coverage_section(folder, scan),
    }
    return render(
        TEMPLATE,
        name=_name(folder),
        inputs=list(folder.model.inputs),
        outputs=list(folder.model.outputs),
        palette=PALETTE,
        caution=list(CAUTION),
        header=header(folder, scan),
        summary=summary_tiles(folder, sections),
        **sections,
    )


def _name(folder: BuildFolder) -> str:
    return folder.build.name if folder.build else folder.manifest["name"]


def header(folder: BuildFolder, scan: DataScan) -> dict:
    plan, model, manifest, build = folder.plan, folder.model, folder.manifest, folder.build
    mf = folder.manifest_file
    fixed_point = [  # (label, text, number shown before the text or None)
        ("coefficients", "-bit signed", Number(plan.coef_bits, pointer("plan.json", "coef_bits"))),
        ("accumulator", "-bit signed", Number(plan.acc_bits, pointer("plan.json", "acc_bits"))),
        ("inputs", manifest["input_ctype"], None),
        ("outputs", plan.output_ctype, None),
        ("rounding", plan.rounding, None),
        ("coefficient choice", plan.coefficient_method or "–", None),
        ("arithmetic, style", f"{manifest['arith']}, {manifest['style']}", None),
    ]
    per_output = [
        {"output": name,
         "lsb": Number(plan.output_lsb[i], pointer(mf, "output_lsb", i)),
         "shift": Number(plan.shifts[i], pointer(mf, "shifts", i))}
        for i, name in enumerate(plan.outputs)
    ]
    files = [{"path": read.path, "sha256": read.sha256_recorded, "problem": read.problem,
              "rows": Number(read.rows, f"data:files/{k}/rows")} for k, read in enumerate(scan.files)]
    return {
        "tool_version": build.tool_version if build else plan.tool_version,
        "interface_id": build.interface_id if build else None,
        "target": build.target if build and build.target else folder.plan.target,
        "has_build": build is not None,
        "project": build.project if build else None,
        "fixed_point": fixed_point,
        "per_output": per_output,
        "files": files,
        "model_sha256": plan.model_sha256,
        "plan_sha256": manifest["plan_sha256"],
        "n_samples": Number(model.n_samples, pointer("model.json", "n_samples")),
        "ridge": Number(model.ridge, pointer("model.json", "ridge")),
        "folds": Number(model.folds, pointer("model.json", "folds")),
        "condition": Number(model.condition_number, pointer("model.json", "condition_number")),
    }


def summary_tiles(folder: BuildFolder, sections: dict) -> list[dict]:
    """The verdicts a reviewer reads first, each pointing at its section."""
    tiles = []
    budget = folder.plan.budget
    if budget:
        tiles.append({"label": "accuracy budget", "ok": bool(budget.get("met")),
                      "text": "met" if budget.get("met") else "not met", "href": "#budget"})
    verification = folder.verification
    if verification:
        tiles.append({"label": "verification", "ok": verification["passed"], "href": "#verification",
                      "text": "pass" if verification["passed"] else "FAIL",
                      "number": Number(verification["mismatches"], pointer("verification.json", "mismatches")),
                      "unit": "mismatches"})
    headroom = folder.plan.accumulator_headroom_bits
    if headroom:
        k = int(np.argmin(headroom))
        tiles.append({"label": "least accumulator headroom", "ok": headroom[k] >= 1, "href": "#headroom",
                      "number": Number(headroom[k], pointer("plan.json", "accumulator_headroom_bits", k)),
                      "unit": f"bits ({folder.plan.outputs[k]})"})
    coverage = sections["coverage"]["rows"]
    if coverage:
        least = min(coverage, key=lambda row: row["covered"].value)
        tiles.append({"label": "least covered input", "ok": least["covered"].value >= 90, "href": "#coverage",
                      "number": least["covered"], "unit": f"% of range ({least['input']})"})
    if folder.diff is not None:
        changed = folder.diff["interface_changed"]
        tiles.append({"label": "firmware interface", "ok": not changed, "href": "#changes",
                      "text": "changed" if changed else "unchanged"})
    if folder.fleet:
        failed = sum(not unit.passed for unit in folder.fleet)
        tiles.append({"label": "fleet", "ok": failed == 0, "href": "#fleet",
                      "number": Number(failed, "data:fleet/failed_units"),
                      "total": Number(len(folder.fleet), "data:fleet/units"), "unit": "units failing"})
    return tiles


def budget_section(folder: BuildFolder) -> dict:
    plan = folder.plan
    budget = plan.budget or {}
    limited = {"worst-case": "worst_case", "rms-growth": "total"}.get(budget.get("kind"))
    image = plots.budget(list(plan.outputs), content.budget_parts(folder), budget.get("limits"), limited,
                         content.output_units(folder))
    return {"image": image, "rows": content.budget_rows(folder), "terms": content.budget_terms(plan),
            "moments": plan.moments_source}


def deviation_section(folder: BuildFolder, scan: DataScan) -> dict:
    plan = folder.plan
    worst = np.asarray(plan.worst_case_deviation or plan.output_lsb, dtype=float)
    edges = scan.deviation.edges if scan.deviation is not None else deviation_edges(worst)
    measured = plan.measured or {}
    box_rows = int(measured.get("random", {}).get("rows", BOX_POINTS))
    box = deviation_on_counts(plan.integer_estimator(), np.array(plan.gain), np.array(plan.offset),
                              np.array(plan.output_lsb), random_box_points(plan.input_ranges, box_rows, RANDOM_SEED))
    box_counts, _ = histogram(box, edges)
    box_over = over_bound(box, worst)
    calibration = scan.deviation if scan.usable else None
    random_predicted = measured.get("random", {}).get("predicted_rms_deviation")
    image = plots.deviation(
        list(plan.outputs), edges, None if calibration is None else calibration.counts, box_counts,
        plan.predicted_rms_deviation, random_predicted, list(worst), plan.output_lsb, content.output_units(folder),
    )
    rows = []
    for i, name in enumerate(plan.outputs):
        row = {
            "output": name,
            "bound": Number(plan.worst_case_deviation[i] if plan.worst_case_deviation else None,
                            pointer("plan.json", "worst_case_deviation", i)),
            "predicted": Number(plan.predicted_rms_deviation[i] if plan.predicted_rms_deviation else None,
                                pointer("plan.json", "predicted_rms_deviation", i)),
            "box_predicted": _measured(measured, "random", "predicted_rms_deviation", i),
            "box_rms": _measured(measured, "random", "rms_deviation", i),
            "box_max": _measured(measured, "random", "max_deviation", i),
            "box_over": Number(int(box_over[i]), f"data:random/over_bound/{name}"),
        }
        if calibration is not None:
            row["calibration_rms"] = Number(float(calibration.rms[i]), f"data:deviation/rms/{name}")
            row["calibration_over"] = Number(int(calibration.over_bound[i]), f"data:deviation/over_bound/{name}")
        rows.append(row)
    return {
        "image": image, "rows": rows, "has_calibration": calibration is not None,
        "box_rows": Number(box_rows, pointer("plan.json", "measured", "random", "rows")),
        "calibration_rows": Number(calibration.rows if calibration is not None else 0, "data:deviation/rows"),
        "outside_box": Number(calibration.outside_box if calibration is not None else 0, "data:deviation/outside_box"),
        "over_bound": int(box_over.sum()) + (int(calibration.over_bound.sum()) if calibration is not None else 0),
    }


def _measured(measured: dict, data_set: str, key: str, i: int) -> Number:
    values = measured.get(data_set, {}).get(key)
    return Number(None if values is None else values[i], pointer("plan.json", "measured", data_set, key, i))


def residual_section(folder: BuildFolder, scan: DataScan) -> dict:
    if not scan.usable:
        return {"image": None, "absent": _no_data_sentence(scan)}
    if not scan.has_outputs:
        return {"image": None, "absent": "The calibration data hold no output columns, so there are no residuals."}
    outputs, inputs = folder.model.outputs, folder.model.inputs
    trends = [[content.trend(panel, i) for panel in scan.coverage] for i in range(len(outputs))]
    columns = content.residual_columns(trends)
    shown = content.points_per_panel(len(outputs) * len(columns), len(scan.sample_inputs))
    note = content.sample_note(scan, shown)
    if len(columns) < len(inputs):
        note += (f" Columns: the {len(columns)} of {len(inputs)} inputs along which some output's trend carries the "
                 "largest share of its residual mean square.")
    units = content.input_units(folder)
    image = plots.residuals(list(outputs), content.output_units(folder), [inputs[j] for j in columns],
                            [units[j] for j in columns], scan.sample_inputs[:shown, columns],
                            scan.sample_residuals[:shown], [[row[j] for j in columns] for row in trends], note)
    return {"image": image, "absent": None, "points": Number(shown, "data:sample/points"),
            "rows": Number(scan.rows, "data:rows"), "some_inputs": len(columns) < len(inputs)}


def coverage_section(folder: BuildFolder, scan: DataScan) -> dict:
    if not scan.usable:
        return {"image": None, "rows": [], "absent": _no_data_sentence(scan)}
    return {"image": plots.coverage(content.coverage_panels(folder, scan)), "rows": content.coverage_rows(folder, scan),
            "absent": None, "rows_read": scan.rows}


def _no_data_sentence(scan: DataScan) -> str:
    if not scan.files:
        return "No calibration data file is recorded for this build (build.json lists none), so this part is left out."
    problems = "; ".join(f"{read.path}: {read.problem}" for read in scan.files if read.problem)
    return f"No calibration data could be used ({problems}), so this part is left out."


def gain_section(folder: BuildFolder) -> dict:
    model = folder.model
    image = plots.matrix(
        model.gain, content.gain_shares(folder), list(model.outputs), list(model.inputs),
        "Gain matrix: the values are the gains; the colour is each input's share in moving the output "
        "(|gain| × the input's spread, per row)", "share of the row's strongest input", "gain",
    )
    rows = [{"output": name, "gains": numbers(model.gain[i].tolist(), "model.json", "gain", i),
             "offset": Number(float(model.offset[i]), pointer("model.json", "offset", i))}
            for i, name in enumerate(model.outputs)]
    return {"image": image, "rows": rows,
            "condition": Number(model.condition_number, pointer("model.json", "condition_number"))}


def headroom_section(folder: BuildFolder) -> dict:
    plan = folder.plan
    used, headroom = content.headroom_bits(plan)
    image = plots.headroom(list(plan.outputs), used, headroom, plan.acc_bits)
    bounds = plan.accumulator_bound or plan.integer_estimator().accumulator_bounds()
    source = "plan.json" if plan.accumulator_bound else "data:accumulator_bound"
    rows = [{"output": name,
             "bound": Number(int(bounds[i]), pointer(source, "accumulator_bound", i)),
             "headroom": Number(plan.accumulator_headroom_bits[i], pointer("plan.json", "accumulator_headroom_bits", i))
             if plan.accumulator_headroom_bits else Number(float(headroom[i]), f"data:headroom/{name}")}
            for i, name in enumerate(plan.outputs)]
    return {"image": image, "rows": rows, "acc_bits": Number(plan.acc_bits, pointer("plan.json", "acc_bits"))}


def verification_section(folder: BuildFolder) -> dict:
    report, build = folder.verification, folder.build
    target = None
    if build is not None and build.target_figures:
        target = [{"name": key.replace("_", " "),
                   "value": Number(value, pointer("build.json", "target_figures", key)) if _is_figure(value) else None,
                   "text": "not measured on this target" if value is None else str(value)}
                  for key, value in build.target_figures.items()]
    if report is None:
        return {"absent": "No verification report (verification.json) is in this build folder.", "target": target,
                "target_name": build.target if build else None}
    rows = [{"artefact": r["artefact"], "vector_set": r["vector_set"],
             "vectors": Number(r["vectors"], pointer("verification.json", "results", k, "vectors")),
             "mismatches": Number(r["mismatches"], pointer("verification.json", "results", k, "mismatches"))}
            for k, r in enumerate(report["results"])]
    return {
        "absent": None, "rows": rows, "passed": report["passed"], "notes": [str(n) for n in report.get("notes", [])],
        "mismatches": Number(report["mismatches"], pointer("verification.json", "mismatches")),
        "evaluations": Number(report["evaluations"], pointer("verification.json", "evaluations")),
        "target": target, "target_name": build.target if build else None,
    }


def _is_figure(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def changes_section(folder: BuildFolder) -> dict:
    diff = folder.diff
    if diff is None:
        return {"absent": "This is the first build in this folder (no diff.json), so there is nothing to compare with."}
    model = folder.model
    changed = [name for name in model.outputs if name in diff.get("outputs", {})]
    image = None
    rows = []
    if changed:
        values = np.array([diff["outputs"][name]["gain_change"] for name in changed], dtype=float)
        relative = [diff["outputs"][name].get("gain_relative_change") for name in changed]
        if all(r is not None for r in relative):  # colour by the relative change, where the diff gives it
            colour = np.array([[0.0 if v is None else v for v in r] for r in relative])
            label = "relative change / the row's largest"
        else:
            colour, label = values, "change / the row's largest"
        largest = np.abs(colour).max(axis=1, keepdims=True)
        share = np.divide(colour, largest, out=np.zeros_like(colour), where=largest > 0)
        image = plots.matrix(values, share, changed, list(model.inputs),
                             "Coefficient changes since the previous build: the values are the gain changes; the "
                             "colour shows their sign and size within each output", label, "changes", diverging=True)
        for k, name in enumerate(changed):
            entry = diff["outputs"][name]
            row = {"output": name, "offset": Number(entry["offset_change"],
                                                    pointer("diff.json", "outputs", name, "offset_change")),
                   "input": None, "relative": None}
            if relative[k] is not None and any(r is not None for r in relative[k]):
                j = max((j for j, r in enumerate(relative[k]) if r is not None), key=lambda j: abs(relative[k][j]))
                row["input"] = model.inputs[j]
                row["relative"] = Number(relative[k][j], pointer("diff.json", "outputs", name, "gain_relative_change", j))
            rows.append(row)
    return {"absent": None, "interface_changed": diff["interface_changed"],
            "interface_changes": [_change_text(item) for item in diff["interface_changes"]],
            "image": image, "rows": rows}


def _change_text(item) -> str:
    if isinstance(item, dict):
        return "; ".join(f"{key}: {value}" for key, value in item.items())
    return str(item)


def fleet_section(folder: BuildFolder) -> dict:
    units = folder.fleet
    if not units:
        return {"absent": "This is not a fleet build (no fleet.csv), so there are no per-unit margins."}
    outputs = list(folder.model.outputs)
    # A unit with no plan (it could not be fitted, or does not fit the interface) has no margins to plot.
    planned = [u for u in units if all(u.per_output[o]["margin"] is not None for o in outputs)]
    margins = [[u.per_output[o]["margin"] for u in planned] for o in outputs]
    passed = [[u.per_output[o]["passed"] for u in planned] for o in outputs]
    image = plots.fleet(outputs, margins, passed, content.output_units(folder))
    failing = [
        {"unit": u.unit, "rows": Number(u.rows, f"fleet.csv#L{u.line}/rows"), "planned": u in planned,
         "outputs": [{"output": o, "margin": Number(u.per_output[o]["margin"], f"fleet.csv#L{u.line}/{o}.margin")}
                     for o in outputs if not u.per_output[o]["passed"] and u.per_output[o]["margin"] is not None]}
        for u in units if not u.passed
    ]
    return {"absent": None, "image": image, "failing": failing, "units": Number(len(units), "data:fleet/units")}
