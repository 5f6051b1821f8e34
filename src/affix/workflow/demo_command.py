"""affix demo: the whole job on the bundled, invented wrist-sensor scenario.

Each step is the command a user would type, printed and then run through the
same entry point, so the demo doubles as a worked example of the workflow.
"""
from __future__ import annotations

import shlex
from pathlib import Path

from affix import files
from affix.errors import WriteError
from affix.workflow import demo_scenario

# Worst-case deviation the integer code may add to each output: about a
# sixth of the estimator's own RMS error, so rounding stays well below it.
BUDGET = {"Fx": 0.05, "Fy": 0.05, "Fz": 0.1, "Tx": 0.003, "Ty": 0.003, "Tz": 0.002}
ESTIMATOR = "wrist_ft"


def register(sub):
    parser = sub.add_parser(
        "demo",
        help="run the whole job on a generated calibration of a six-bridge wrist force/torque sensor",
        description="Generate the demo's calibration log in OUTDIR, then fit, quantize, emit C and "
        "MicroPython, and verify them, printing each command as it runs.",
    )
    parser.add_argument("outdir", help="folder for the demo's files (created if missing)")
    parser.set_defaults(run=lambda args: run_demo(args.outdir), writes={"outdir": "folder"})


def run_demo(outdir) -> int:
    from affix.workflow.cli import main  # the CLI imports this module, so import it late

    outdir = files.check_folder_target(outdir, "outdir")
    try:
        outdir.mkdir(exist_ok=True)
    except OSError as exc:
        raise WriteError(f"cannot create the folder ({exc.strerror})", outdir) from None

    data = outdir / "wrist_calibration.csv"
    demo_scenario.write_csv(data)
    print(f"step 1: the calibration rig's log, {demo_scenario.ROWS} rows -> {data}\n")

    model, plan, firmware = outdir / "wrist_model.json", outdir / "wrist_plan.json", outdir / "firmware"
    steps = [
        ("fit counts to wrench",
         ["fit", data, "--inputs", ",".join(demo_scenario.INPUTS), "--outputs", ",".join(demo_scenario.OUTPUTS),
          "--out", model]),
        ("choose the integer format against the budget",
         ["quantize", model, "--range", "-32768:32767", "--range", "therm=0:4095",
          "--output-type", "int16_t", "--budget", ",".join(f"{k}={v}" for k, v in BUDGET.items()),
          "--data", data, "--out", plan]),
        ("emit C and MicroPython", ["emit", plan, "--lang", "all", "--name", ESTIMATOR, "--out", firmware]),
        ("verify them bit for bit", ["verify", firmware, "--data", data]),
    ]
    for number, (title, argv) in enumerate(steps, start=2):
        argv = [str(a) for a in argv]
        print(f"step {number}: {title}\n$ affix {shlex.join(argv)}")
        status = main(argv)
        print()
        if status:
            return status
    print(f"done: {firmware / (ESTIMATOR + '.h')} and {ESTIMATOR}.c for C, {ESTIMATOR}.py for MicroPython")
    return 0

