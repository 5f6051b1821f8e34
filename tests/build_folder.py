"""Build folders for the report tests, made by the stage functions.

Until ``affix build`` exists this helper stands in for it, writing the layout
of DEVELOPERS.md ("The build folder"): model.json, plan.json, the emitted
sources and manifest, verification.json and build.json (format
affix.build/1), beside a project folder holding the calibration data.
When ``affix build`` lands, ``make_build_folder`` becomes a call to it.
"""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import affix
from affix import __version__
from affix.emit.writer import emit
from affix.intake import read_chunks
from affix.quantize import plan_fixed_point
from affix.verify.check import verify
from affix.workflow import demo_scenario

NAME = "wrist_ft"
BUDGET = {"Fx": 0.05, "Fy": 0.05, "Fz": 0.1, "Tx": 0.003, "Ty": 0.003, "Tz": 0.002}
RANGES = {None: (-32768, 32767), "therm": (0, 4095)}
DATA_FILE = "wrist_calibration.csv"


def sha256(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def make_build_folder(root, *, rows: int = demo_scenario.ROWS, lang: str = "all", vectors: int = 10**4,
                      target_figures: dict | None = None) -> Path:
    """root/project/{affix.toml, DATA_FILE} and the build folder root/project/build, which it returns."""
    project = Path(root) / "project"
    build = project / "build"
    build.mkdir(parents=True)
    data = project / DATA_FILE
    if not data.exists():
        demo_scenario.write_csv(data, rows=rows)
    (project / "affix.toml").write_text(f'# the project file of this test build\nname = "{NAME}"\n')
    model = affix.fit(data, inputs=demo_scenario.INPUTS, outputs=demo_scenario.OUTPUTS)
    model.save(build / "model.json")
    plan = plan_fixed_point(model, RANGES, output_ctype="int16_t", budget=BUDGET,
                            calibration=read_chunks(data, demo_scenario.INPUTS))
    plan.save(build / "plan.json")
    emit(plan, lang=lang, name=NAME, out_dir=build)
    report = verify(build, vectors=vectors, data=data, micropython_vectors=200)
    (build / "verification.json").write_text(json.dumps(report.to_dict(), indent=2) + "\n")
    write_build_json(build, target_figures=target_figures)
    return build


def write_build_json(build: Path, *, target=None, target_figures=None, data_files=(DATA_FILE,)) -> None:
    files = {p.name: sha256(p) for p in sorted(build.iterdir()) if p.is_file() and p.name != "build.json"}
    content = {
        "format": "affix.build/1",
        "tool_version": __version__,
        "name": NAME,
        "project": "../affix.toml",
        "data": [{"path": name, "sha256": sha256(build.parent / name)} for name in data_files],
        "interface_id": "if1-" + sha256(build / f"{NAME}.manifest.json")[:16],
        "target": target,
        "target_figures": target_figures,
        "steps": ["fit", "quantize", "emit", "verify"],
        "files": files,
    }
    (build / "build.json").write_text(json.dumps(content, indent=2) + "\n")
