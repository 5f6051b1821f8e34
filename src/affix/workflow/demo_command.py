"""affix demo: the whole job on the bundled, invented wrist-sensor scenario."""
from __future__ import annotations

from pathlib import Path

import affix
from affix.errors import UsageError
from affix.workflow import demo_scenario
from affix.workflow.fit_command import format_table, summarise


def register(sub):
    parser = sub.add_parser(
        "demo",
        help="run affix on a generated calibration of a six-bridge wrist force/torque sensor",
        description="Write the demo's calibration log to OUTDIR and fit the estimator on it.",
    )
    parser.add_argument("outdir", help="folder for the demo's files (created if missing)")
    parser.set_defaults(run=lambda args: run_demo(args.outdir))


def run_demo(outdir) -> int:
    outdir = Path(outdir)
    if outdir.exists() and not outdir.is_dir():
        raise UsageError(f"'{outdir}' exists and is not a folder", option="OUTDIR")
    outdir.mkdir(parents=True, exist_ok=True)

    # Step 1: the calibration rig's log, generated.
    data = outdir / "wrist_calibration.csv"
    demo_scenario.write_csv(data)
    print(f"step 1: wrote {demo_scenario.ROWS} calibration rows to {data}")

    # Step 2: fit counts -> wrench.
    model_path = outdir / "wrist_model.json"
    model = affix.fit(data, demo_scenario.INPUTS, demo_scenario.OUTPUTS)
    model.save(model_path)
    print("step 2: fit")
    print(format_table(summarise(model, model_path)))
    return 0
