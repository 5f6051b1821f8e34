"""Read a build folder (layout in DEVELOPERS.md, "The build folder") into plain objects.

Every file is validated here, once, as it is read: model, plan and manifest
through their own loaders; build.json, verification.json, diff.json and
fleet.csv against what the report uses of them.  Model, plan and manifest
are required (a FileFormatError, exit status 2, when one is missing or
garbled); the others are optional and ``None`` when absent, but a file
that is present and garbled is an error too, never silently skipped.
"""
from __future__ import annotations

import csv
import math
import os
import re
from dataclasses import dataclass
from pathlib import Path, PurePosixPath

from affix import files
from affix.errors import FileFormatError
from affix.fleet import table as fleet_table
from affix.model import Model
from affix.plan import Plan
from affix.verify.check import find_manifest

BUILD_FORMAT = "affix.build/1"
_SHA256 = re.compile(r"^[0-9a-f]{64}$")


@dataclass(frozen=True)
class DataFile:
    path: str  # as build.json records it: relative to the project file
    sha256: str


@dataclass(frozen=True)
class BuildInfo:
    """What build.json says the build was made from; ``raw`` keeps the file's dict for number sources."""

    tool_version: str
    name: str
    project: str  # the project file, relative to the build folder
    data: tuple[DataFile, ...]
    interface_id: str | None
    target: str | None
    target_figures: dict | None  # figure name -> number, text (compiler, flags) or None (not measured)
    raw: dict


@dataclass(frozen=True)
class FleetUnit:
    unit: str
    rows: int
    passed: bool
    per_output: dict  # output -> {"rms", "cv_rms", "worst_case", "margin": float or None (empty cell), "passed": bool}
    line: int  # 1-based line in fleet.csv (the header is line 1)


@dataclass(frozen=True)
class BuildFolder:
    """A build folder's files as plain data.

    Attributes: ``path``; ``model`` (Model) and ``model_dict`` (its file
    content); ``plan`` (Plan) and ``plan_dict``; ``manifest`` (dict) and
    ``manifest_file`` (its name); ``build`` (BuildInfo), ``verification``,
    ``diff`` (dicts) and ``fleet`` (list of FleetUnit), each None when absent.
    """

    path: Path
    location: Path  # the folder build.json's relative paths start from: where the build lives
    model: Model
    model_dict: dict
    plan: Plan
    plan_dict: dict
    manifest: dict
    manifest_file: str
    build: BuildInfo | None
    verification: dict | None
    diff: dict | None
    fleet: list[FleetUnit] | None

    def data_path(self, data: DataFile) -> Path:
        """Where a data file of build.json is: relative to the project file, which is relative to the build."""
        # Lexically: a build folder still being staged does not exist yet, so 'build/..' would not resolve.
        return Path(os.path.normpath(self.location / PurePosixPath(self.build.project).parent / PurePosixPath(data.path)))


def read_build_folder(path, *, record: dict | None = None, location=None) -> BuildFolder:
    """The folder's files, validated.  ``record`` stands for build.json when the build has not written it
    yet (the build makes its report before its record, which lists every file's hash); ``location`` is
    where the folder will be, if it is being staged elsewhere (default: ``path``)."""
    path = Path(path)
    if not path.is_dir():
        raise FileFormatError("not a build folder (no such folder)", path)
    model_dict = files.read_json(path / "model.json", "model")
    model = Model.from_dict(model_dict, path / "model.json")
    plan_dict = files.read_json(path / "plan.json", "plan")
    plan = Plan.from_dict(plan_dict, path / "plan.json")
    manifest_path, manifest = find_manifest(path)  # checked against its schema as it is read
    _check_agree(model_dict, plan_dict, manifest, path)
    return BuildFolder(
        path=path,
        location=Path(path if location is None else location),
        model=model,
        model_dict=model_dict,
        plan=plan,
        plan_dict=plan_dict,
        manifest=manifest,
        manifest_file=manifest_path.name,
        build=_optional(path / "build.json", _build_info) if record is None else _build_info(record, path / "build.json"),
        verification=_optional(path / "verification.json", _verification),
        diff=_optional(path / "diff.json", lambda data, p: _diff(data, p, model)),
        fleet=_fleet(path / "fleet.csv", model.outputs) if (path / "fleet.csv").is_file() else None,
    )


def _optional(file: Path, check):
    return check(files.read_json(file, file.stem), file) if file.is_file() else None


def _check_agree(model: dict, plan: dict, manifest: dict, path: Path) -> None:
    """The three files describe one estimator: the plan cites this model, the manifest this plan (hashes
    of the files' content as written, so files of an earlier affix version still match), same names."""
    if plan["model_sha256"] != files.content_sha256(model):
        raise FileFormatError("plan.json was not made from model.json (model_sha256 differs)", path)
    if manifest.get("plan_sha256") != files.content_sha256(plan):
        raise FileFormatError("the manifest was not emitted from plan.json (plan_sha256 differs)", path)
    names = (plan["inputs"], plan["outputs"])
    emitted = (list(manifest["inputs"]), list(manifest["outputs"]))
    if (model["inputs"], model["outputs"]) != names or emitted != names:
        raise FileFormatError("model.json, plan.json and the manifest name different inputs or outputs", path)


def _build_info(data, path) -> BuildInfo:
    files.check_format(data, BUILD_FORMAT, "build", path)
    for key in ("tool_version", "name", "project"):
        if not isinstance(data.get(key), str) or not data[key]:
            raise FileFormatError(f"'{key}' must be a non-empty text", path)
    _relative(data["project"], "project", path)
    entries = data.get("data")
    if not isinstance(entries, list):
        raise FileFormatError("'data' must be a list of {path, sha256}", path)
    data_files = []
    for k, entry in enumerate(entries):
        if not (isinstance(entry, dict) and isinstance(entry.get("path"), str) and isinstance(entry.get("sha256"), str)
                and _SHA256.match(entry["sha256"])):
            raise FileFormatError(f"'data' entry {k + 1} must hold a path and a SHA-256 hex digest", path)
        _relative(entry["path"], f"data entry {k + 1} path", path)
        data_files.append(DataFile(entry["path"], entry["sha256"]))
    for key in ("interface_id", "target"):
        if data.get(key) is not None and not isinstance(data[key], str):
            raise FileFormatError(f"'{key}' must be text or null", path)
    figures = data.get("target_figures")
    if figures is not None and not (
        isinstance(figures, dict)
        and all(isinstance(k, str) and (v is None or isinstance(v, str) or _is_number(v)) for k, v in figures.items())
    ):
        raise FileFormatError("'target_figures' must be null or map names to numbers, texts or null", path)
    return BuildInfo(
        tool_version=data["tool_version"],
        name=data["name"],
        project=data["project"],
        data=tuple(data_files),
        interface_id=data.get("interface_id"),
        target=data.get("target"),
        target_figures=figures,
        raw=data,
    )


def _relative(text: str, key: str, path) -> None:
    """build.json holds no absolute paths (two builds of the same inputs are identical byte for byte)."""
    if not text or PurePosixPath(text).is_absolute() or re.match(r"^[A-Za-z]:[\\/]", text):
        raise FileFormatError(f"'{key}' must be a relative path", path)


def _verification(data, path) -> dict:
    shape_ok = (
        isinstance(data, dict)
        and isinstance(data.get("passed"), bool)
        and _is_count(data.get("mismatches"))
        and _is_count(data.get("evaluations"))
        and isinstance(data.get("results"), list)
        and isinstance(data.get("notes", []), list)
    )
    if not shape_ok:
        raise FileFormatError("not a verification report (passed, mismatches, evaluations, results)", path)
    for k, result in enumerate(data["results"]):
        if not (isinstance(result, dict) and isinstance(result.get("artefact"), str)
                and isinstance(result.get("vector_set"), str)
                and _is_count(result.get("vectors")) and _is_count(result.get("mismatches"))):
            raise FileFormatError(f"result {k + 1} lacks artefact, vector_set, vectors or mismatches", path)
    return data


def _diff(data, path, model: Model) -> dict:
    if not (isinstance(data, dict) and isinstance(data.get("interface_changed"), bool)
            and isinstance(data.get("interface_changes"), list)):
        raise FileFormatError("not a diff (interface_changed, interface_changes)", path)
    if data.get("input_order", list(model.inputs)) != list(model.inputs):
        raise FileFormatError("its gains are for other inputs than model.json's (input_order differs)", path)
    outputs = data.get("outputs", {})
    if not isinstance(outputs, dict):
        raise FileFormatError("'outputs' must map output names to their changes", path)
    for name, change in outputs.items():
        gains = change.get("gain_change") if isinstance(change, dict) else None
        if not (isinstance(gains, list) and len(gains) == model.n_inputs and all(_is_number(g) for g in gains)
                and _is_number(change.get("offset_change"))):
            raise FileFormatError(
                f"output '{name}' needs gain_change (one number per input) and offset_change", path
            )
        relative = change.get("gain_relative_change")  # optional; None where the old gain was 0 or absent
        if relative is not None and not (isinstance(relative, list) and len(relative) == model.n_inputs
                                         and all(r is None or _is_number(r) for r in relative)):
            raise FileFormatError(f"output '{name}': gain_relative_change needs a number or null per input", path)
    return data


def _fleet(path: Path, outputs) -> list[FleetUnit]:
    expected = fleet_table.header(outputs)
    try:
        with open(path, newline="", encoding="utf-8") as handle:
            rows = list(csv.reader(handle))
    except (OSError, UnicodeDecodeError, csv.Error) as exc:
        raise FileFormatError(f"not readable as CSV ({exc})", path) from None
    if not rows or [c.strip() for c in rows[0]] != expected:
        raise FileFormatError(f"the header must be {','.join(expected)}", path)
    units = []
    for line, row in enumerate(rows[1:], start=2):
        if not row:
            continue
        if len(row) != len(expected):
            raise FileFormatError(f"line {line} has {len(row)} fields, expected {len(expected)}", path)
        cells = dict(zip(expected, (c.strip() for c in row)))
        try:
            per_output = {
                o: {f: _flag(cells[f"{o}.{f}"]) if f == "passed" else _figure(cells[f"{o}.{f}"])
                    for f in fleet_table.OUTPUT_FIELDS}
                for o in outputs
            }
            units.append(FleetUnit(cells["unit"], int(cells["rows"]), _flag(cells["passed"]), per_output, line))
        except ValueError as exc:
            raise FileFormatError(f"line {line}: {exc}", path) from None
    return units


def _flag(text: str) -> bool:
    if text not in ("true", "false"):
        raise ValueError(f"'{text}' is not true or false")
    return text == "true"


def _figure(text: str) -> float | None:
    """A fleet.csv figure: a finite number, or an empty cell for one the unit does not have."""
    return None if text == "" else _finite(text)


def _finite(text: str) -> float:
    value = float(text)
    if not math.isfinite(value):
        raise ValueError(f"'{text}' is not a finite number")
    return value


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def _is_count(value) -> bool:
    return isinstance(value, int) and not isinstance(value, bool) and value >= 0
