"""Build folders for the report tests, made by ``affix build`` from a project file.

The project holds the demo's wrist-sensor scenario (affix.workflow.demo_scenario):
root/project/{affix.toml, DATA_FILE} and the build folder root/project/build,
whose report.html the build itself writes.
"""
from __future__ import annotations

import json
from pathlib import Path

from affix.workflow import demo_scenario

NAME = "wrist_ft"
BUDGET = {"Fx": 0.05, "Fy": 0.05, "Fz": 0.1, "Tx": 0.003, "Ty": 0.003, "Tz": 0.002}
RANGES = {name: (-32768, 32767) for name in demo_scenario.BRIDGES} | {"therm": (0, 4095)}
DATA_FILE = "wrist_calibration.csv"


def sha256(path) -> str:
    from affix import files

    return files.file_sha256(path)


def make_build_folder(root, *, rows: int = demo_scenario.ROWS, lang: str = "all", vectors: int = 10**4,
                      target_figures: dict | None = None) -> Path:
    """Run ``affix build`` on the demo scenario under ``root``; the build folder.

    ``target_figures`` stands in for a target's measured figures (numbers, texts and None, as
    affix.targets gives them), written into build.json after the build, so a test needs no cross tools.
    """
    from affix.project import load_project
    from affix.project.build import build_project

    project = Path(root) / "project"
    project.mkdir(parents=True)
    data = project / DATA_FILE
    demo_scenario.write_csv(data, rows=rows)
    inputs = "".join(f'\n[[inputs]]\nname = "{name}"\nrange = [{lo}, {hi}]\n' for name, (lo, hi) in RANGES.items())
    outputs = "".join(f'\n[[outputs]]\nname = "{name}"\nbudget = {limit}\n' for name, limit in BUDGET.items())
    languages = ", ".join(f'"{lang}"' for lang in (("c", "micropython") if lang == "all" else (lang,)))
    (project / "affix.toml").write_text(
        f'name = "{NAME}"\n\n[data]\nfiles = "{DATA_FILE}"\n{inputs}{outputs}\n[fixed_point]\noutput_type = "int16_t"\n'
        f"\n[emit]\nlanguages = [{languages}]\n\n[verify]\nvectors = {vectors}\n"
    )
    build_project(load_project(project / "affix.toml"))
    build = project / "build"
    if target_figures is not None:
        record = json.loads((build / "build.json").read_text())
        record["target_figures"] = target_figures
        (build / "build.json").write_text(json.dumps(record, indent=2) + "\n")
    return build
