"""What changed between two calibrations: two models, two plans or two build folders.

Per output: every gain and the offset (absolute and relative), every integer
coefficient counted in its old lsbs, and the RMS, cross-validated RMS,
worst-case bound and budget margin.  Per input: how the calibration data's
mean and span moved, which is how a drifting sensor shows.  Changes of the
firmware interface (names, order, types, box, output scales) are listed
apart: those break calling code, the rest does not.

Gains are the model's (output units per unit of the model's input) where a
model is at hand, else the plan's (per input count); an input the old
calibration lacked counts as a gain (and coefficient) of 0 there.  A coefficient's change
"in its old lsbs" is ``new_a * new_step / old_step - old_a`` with step =
lsb / 2**shift, an exact integer when the lsb and shift stayed the same.
"""
from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from affix import files
from affix.errors import UsageError
from affix.interface import interface_changes
from affix.model import MODEL_FORMAT, Model
from affix.plan import PLAN_FORMAT, Plan

DIFF_FORMAT = "affix.diff/1"


@dataclass(frozen=True)
class Calibration:
    """One side of a diff: what a model file, a plan file or a build folder holds."""

    kind: str  # "model", "plan" or "build"
    label: str
    model: Model | None
    plan: Plan | None
    interface: dict  # Interface.content() of a build or plan; just the names of a model

    @classmethod
    def load(cls, path, label=None, parameter: str = "old") -> "Calibration":
        """``path`` read as a calibration; ``parameter`` names the argument in errors."""
        path = Path(path)
        label = str(path) if label is None else label
        if path.is_dir():
            return cls._build(path, label, parameter)
        data = files.read_json(path, "model or plan")
        kind = data.get("format") if isinstance(data, dict) else None
        if kind == MODEL_FORMAT:
            model = Model.from_dict(data, path)
            return cls("model", label, model, None, _names_only(model.inputs, model.outputs))
        if kind == PLAN_FORMAT:
            from affix.interface import describe

            plan = Plan.from_dict(data, path)
            return cls("plan", label, None, plan, describe(plan).content())
        raise UsageError(f"'{path}' is neither a model nor a plan file nor a build folder", parameter)

    @classmethod
    def _build(cls, folder: Path, label: str, parameter: str) -> "Calibration":
        from affix.interface import Interface
        from affix.verify.check import find_manifest

        for needed in ("model.json", "plan.json"):
            if not (folder / needed).is_file():
                raise UsageError(f"'{folder}' is not a build folder (no {needed}; see 'affix build')", parameter)
        manifest_path, manifest = find_manifest(folder)
        interface = Interface.from_dict(manifest.get("interface"), manifest_path)
        return cls("build", label, Model.load(folder / "model.json"), Plan.load(folder / "plan.json"),
                   interface.content())


def diff(old: Calibration, new: Calibration) -> dict:
    """The changes from ``old`` to ``new`` as plain data (what ``affix diff --json`` prints)."""
    if old.kind != new.kind:
        raise UsageError(f"compare like with like: a {old.kind} against a {new.kind}", "new")
    changes = interface_changes(old.interface, new.interface)
    old_inputs = list((old.model or old.plan).inputs)
    inputs = list((new.model or new.plan).inputs)
    result = {
        "format": DIFF_FORMAT,
        "old": old.label,
        "new": new.label,
        "kind": new.kind,
        "interface_changed": bool(changes),
        "interface_changes": changes,
        "gain_units": "per model input unit" if new.model else "per input count",
        "input_order": inputs,
        "inputs": _inputs(old.model, new.model) if new.model else {},
        "outputs": {},
    }
    old_outputs = list((old.model or old.plan).outputs)
    for i, name in enumerate((new.model or new.plan).outputs):
        if name in old_outputs:
            k = old_outputs.index(name)
            result["outputs"][name] = _output(old, new, k, i, [old_inputs.index(n) if n in old_inputs else None
                                                              for n in inputs])
    return result


def _output(old: Calibration, new: Calibration, k: int, i: int, columns) -> dict:
    old_gain, new_gain = _gain(old, k), _gain(new, i)
    old_offset, new_offset = _offset(old, k), _offset(new, i)
    matched = [None if j is None else old_gain[j] for j in columns]  # None: an input the old one lacked
    entry = {
        "gain_change": [n - (0.0 if g is None else g) for g, n in zip(matched, new_gain)],
        "gain_relative_change": [_relative(g, n) for g, n in zip(matched, new_gain)],
        "offset_change": new_offset - old_offset,
        "offset_relative_change": _relative(old_offset, new_offset),
    }
    if old.plan and new.plan:
        old_step = old.plan.output_lsb[k] / 2.0 ** old.plan.shifts[k]
        new_step = new.plan.output_lsb[i] / 2.0 ** new.plan.shifts[i]
        same_scale = old_step == new_step
        old_coefficients = old.plan.coefficients[k]
        entry["coefficient_change"] = [
            _in_old_steps(a, 0 if j is None else old_coefficients[j], new_step, old_step, same_scale)
            for a, j in zip(new.plan.coefficients[i], columns)
        ]
        entry["offset_coefficient_change"] = _in_old_steps(new.plan.offsets[i], old.plan.offsets[k], new_step,
                                                           old_step, same_scale)
        entry["shift"] = {"old": old.plan.shifts[k], "new": new.plan.shifts[i]}
        entry["lsb"] = {"old": old.plan.output_lsb[k], "new": new.plan.output_lsb[i]}
        entry["worst_case"] = _figure(_at(old.plan.worst_case_deviation, k), _at(new.plan.worst_case_deviation, i))
        entry["budget_margin"] = _figure(_margin(old.plan, k), _margin(new.plan, i))
    entry["rms"] = _figure(_rms(old, k), _rms(new, i))
    entry["cv_rms"] = _figure(*(None if c.model is None or c.model.cv_rms is None else float(c.model.cv_rms[n])
                                for c, n in ((old, k), (new, i))))
    return entry


def _inputs(old: Model, new: Model) -> dict:
    result = {}
    for j, name in enumerate(new.inputs):
        if name not in old.inputs or old.input_mean is None or new.input_mean is None:
            continue
        k = old.inputs.index(name)
        entry = {"mean": _figure(float(old.input_mean[k]), float(new.input_mean[j]))}
        if old.input_min is not None and new.input_min is not None:
            entry["min"] = _figure(float(old.input_min[k]), float(new.input_min[j]))
            entry["max"] = _figure(float(old.input_max[k]), float(new.input_max[j]))
            entry["span"] = _figure(float(old.input_max[k] - old.input_min[k]), float(new.input_max[j] - new.input_min[j]))
        if old.input_covariance is not None and new.input_covariance is not None:
            entry["sd"] = _figure(float(np.sqrt(old.input_covariance[k, k])), float(np.sqrt(new.input_covariance[j, j])))
        result[name] = entry
    return result


def _gain(side: Calibration, i: int) -> list[float]:
    return [float(g) for g in (side.model.gain[i] if side.model else side.plan.gain[i])]


def _offset(side: Calibration, i: int) -> float:
    return float(side.model.offset[i] if side.model else side.plan.offset[i])


def _rms(side: Calibration, i: int):
    if side.model is not None:
        rms = side.model.rms
        return None if rms is None else float(rms[i])
    return _at(side.plan.float_rms, i)


def _margin(plan: Plan, i: int):
    return None if not plan.budget else _at(plan.budget["margins"], i)


def _at(values, i: int):
    return None if values is None or values[i] is None else float(values[i])


def _in_old_steps(new: int, old: int, new_step: float, old_step: float, same_scale: bool):
    return new - old if same_scale else new * new_step / old_step - old


def _relative(old, new):
    """(new - old) / old: a gain whose magnitude grows by 3 % reads +3 % whatever its sign."""
    return None if old is None or old == 0 else (new - old) / old


def _figure(old, new) -> dict:
    both = old is not None and new is not None
    return {"old": old, "new": new, "change": new - old if both else None,
            "relative_change": _relative(old, new) if both else None}


def _names_only(inputs, outputs) -> dict:
    return {"inputs": [{"name": n} for n in inputs], "outputs": [{"name": n} for n in outputs]}


def largest_gain_change(result: dict, model: Model):
    """(output, input, relative change) of the largest relative change among the gains that
    matter, or None when no gain moved.  A gain matters when its input's calibration span
    carries at least 5 % of the output's swing: a cross-term near zero can change by a large
    factor and mean nothing."""
    spans = np.ptp(np.vstack([model.input_min, model.input_max]), axis=0) if model.input_min is not None else None
    best = None
    for name, entry in result["outputs"].items():
        gains = np.abs(model.gain[model.outputs.index(name)]) * (1.0 if spans is None else spans)
        for j, change in enumerate(entry["gain_relative_change"]):
            if change and gains[j] >= 0.05 * gains.sum() and (best is None or abs(change) > abs(best[2])):
                best = (name, result["input_order"][j], change)
    return best


def to_json(result: dict) -> str:
    return json.dumps(result, indent=2, allow_nan=False) + "\n"


def text(result: dict, largest: int = 3) -> str:
    """The diff for a terminal: the interface verdict, then one block per output and the input drift."""
    lines = [f"{result['old']} -> {result['new']} ({result['kind']}s)"]
    if result["interface_changed"]:
        lines.append(f"interface CHANGED ({len(result['interface_changes'])}): code calling the estimator must change")
        lines += [f"  {change}" for change in result["interface_changes"]]
    else:
        lines.append("interface unchanged: only coefficients, offsets and internal shifts differ")
    names = result["input_order"]
    for name, o in result["outputs"].items():
        lines.append(f"output {name}: offset {_signed(o['offset_change'])}{_percent(o['offset_relative_change'])}")
        order = sorted((j for j, g in enumerate(o["gain_change"]) if g is not None),
                       key=lambda j: -abs(o["gain_change"][j]))[:largest]
        gains = ", ".join(f"{names[j]} {_signed(o['gain_change'][j])}{_percent(o['gain_relative_change'][j])}"
                          for j in order)
        lines.append(f"  largest gain changes ({result['gain_units']}): {gains}")
        if "coefficient_change" in o:
            steps = [("-" if c is None else f"{c:+g}") for c in o["coefficient_change"]]
            lines.append(f"  coefficients in old lsbs: [{', '.join(steps)}], offset "
                         f"{_signed(o['offset_coefficient_change'])}; shift {o['shift']['old']} -> {o['shift']['new']}")
        figures = [(label, o[key]) for key, label in (("rms", "rms"), ("cv_rms", "cv rms"), ("worst_case", "worst case"),
                                                     ("budget_margin", "margin")) if key in o]
        lines.append("  " + ", ".join(f"{label} {_pair(f)}" for label, f in figures))
    if result["inputs"]:
        lines.append("calibration data (counts or the model's input units):")
        for name, i in result["inputs"].items():
            span = f", span {_pair(i['span'])}" if "span" in i else ""
            mean = i["mean"]
            lines.append(f"  {name}: mean {mean['old']:.6g} -> {mean['new']:.6g} ({_signed(mean['change'])}){span}")
    return "\n".join(lines)


def _signed(value) -> str:
    if value is None:
        return "-"
    return f"{value:+d}" if isinstance(value, int) else f"{value + 0.0:+.4g}"  # + 0.0: -0.0 becomes 0.0


def _percent(value) -> str:
    if value is None:
        return ""
    return f" ({abs(value) if round(value, 4) == 0 else value:+.2%})"  # a change that rounds to nothing has no sign


def _pair(figure: dict) -> str:
    if figure["old"] is None and figure["new"] is None:
        return "-"
    old = "-" if figure["old"] is None else f"{figure['old']:.6g}"
    new = "-" if figure["new"] is None else f"{figure['new']:.6g}"
    return f"{old} -> {new}" + _percent(figure["relative_change"])
