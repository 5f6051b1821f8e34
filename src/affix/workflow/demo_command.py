"""affix demo: the whole job on the bundled, invented wrist-sensor scenario.

Each step is the command a user would type, printed and then run through the
same entry point, so the demo doubles as a worked example of the workflow.
"""
from __future__ import annotations

import csv
import json
import os
import shlex
import shutil
from pathlib import Path

from affix import files
from affix.workflow import demo_scenario

# Worst-case deviation the integer code may add to each output: about a
# sixth of the estimator's own RMS error, so rounding stays well below it.
BUDGET = {"Fx": 0.05, "Fy": 0.05, "Fz": 0.1, "Tx": 0.003, "Ty": 0.003, "Tz": 0.002}
# The MicroPython board keeps every value a small int (about 31 bits), which
# that worst case does not fit; there the total RMS may grow by this much.
MICROPYTHON_RMS_GROWTH = "2%"
ESTIMATOR = "wrist_ft"
CORE = "cortex-m4"
DATA, MODEL, PLAN, FIRMWARE = "wrist_calibration.csv", "wrist_model.json", "wrist_plan.json", "firmware"
BOARD_PLAN, BOARD = "wrist_plan_micropython.json", "micropython"
# The recalibration loop: the project file, its pinned interface, the second
# run's log, the build folder and the first build kept for comparison.
PROJECT, INTERFACE, RECALIBRATION = "affix.toml", f"{ESTIMATOR}.interface.json", "wrist_recalibration.csv"
BUILD, FIRST_BUILD = "build", "build-first"
# The stage commands plan for the ADCs' whole range; the project declares the
# box the sensor is rated for: the rated wrench reaches about +-20000 counts
# on each bridge, and the thermistor reads 1500..3000 between 11 and 49 degC.
ADC_RANGES = ("-32768:32767", "therm=0:4095")
RANGES = ("-22000:22000", "therm=1500:3000")
# The production line: a batch of the same sensor, one firmware and one
# calibration record per unit, in a project folder of its own.  A unit's own
# fit must stay within about twice the typical unit's cross-validated RMS.
BATCH, PRODUCTION = "wrist_batch.csv", "production"
TOLERANCE = {"Fx": 0.15, "Fy": 0.15, "Fz": 0.3, "Tx": 0.006, "Ty": 0.006, "Tz": 0.004}
FLASH_ADDRESS = "0x0800F800"  # the last 2 KB page of a 64 KB flash at 0x08000000


def register(sub):
    parser = sub.add_parser(
        "demo",
        help="run the whole job on a generated calibration of a six-bridge wrist force/torque sensor",
        description="Generate the demo's calibration log in OUTDIR, then fit, quantize for a Cortex-M4 "
        "and for a MicroPython board, emit C and MicroPython, and verify them, printing each command as it runs; "
        "then the recalibration loop: a project file, a build, a second calibration run of the aged sensor, "
        "a rebuild and the diff.",
    )
    parser.add_argument("outdir", help="folder for the demo's files (created if missing)")
    parser.set_defaults(run=lambda args: run_demo(args.outdir), writes={"outdir": "folder"})


def run_demo(outdir) -> int:
    """Run the demo's steps in a staging folder; OUTDIR gets their files only when every step has passed."""
    try:
        with files.FileSet(outdir, parameter="outdir", earlier=_earlier_demo) as staged:
            print(f"the commands run in a folder that becomes {outdir} when every step has passed\n")
            working = os.getcwd()
            os.chdir(staged.staging)  # the commands name their files as a user in OUTDIR would
            try:
                _steps(staged)
            finally:
                os.chdir(working)
    except _StepFailed as failed:
        return failed.status
    print(f"done: {Path(outdir) / FIRMWARE / (ESTIMATOR + '.h')} and {ESTIMATOR}.c for the {CORE}, "
          f"{Path(outdir) / BOARD / (ESTIMATOR + '.py')} for MicroPython; the recalibrated build in "
          f"{Path(outdir) / BUILD}, its changes in {Path(outdir) / BUILD / 'diff.json'}; the production batch's "
          f"records in {Path(outdir) / PRODUCTION / BUILD / 'records'}")
    return 0


class _StepFailed(Exception):
    """A step ended with a non-zero status (its own error line is printed): nothing of the demo is kept."""

    def __init__(self, status: int):
        super().__init__(status)
        self.status = status


def _steps(staged) -> None:
    from affix.workflow.cli import main  # the CLI imports this module, so import it late

    demo_scenario.write_csv(staged.entry(DATA))
    print(f"step 1: the calibration rig's log, {demo_scenario.ROWS} rows -> {DATA}\n")
    for name in (MODEL, PLAN, FIRMWARE, BOARD_PLAN, BOARD, PROJECT, INTERFACE, BUILD, FIRST_BUILD):
        staged.entry(name)
    columns = ["--inputs", ",".join(demo_scenario.INPUTS), "--outputs", ",".join(demo_scenario.OUTPUTS)]
    box = [f"--range={r}" for r in ADC_RANGES] + ["--output-type", "int16_t"]
    rated = [f"--range={r}" for r in RANGES] + ["--output-type", "int16_t"]
    budget = ["--budget", ",".join(f"{k}={v}" for k, v in BUDGET.items())]
    number = _run(main, 2, [
        ("fit counts to wrench", ["fit", DATA, *columns, "--out", MODEL]),
        (f"choose the integer format for a {CORE} against the budget",
         ["quantize", MODEL, *box, *budget, "--target", CORE, "--data", DATA, "--out", PLAN]),
        ("emit C, and measure it on the emulated core",
         ["emit", PLAN, "--lang", "c", "--name", ESTIMATOR, "--out", FIRMWARE]),
        ("verify it bit for bit", ["verify", FIRMWARE, "--data", DATA]),
        ("choose the integer format for a MicroPython board (every value a small int)",
         ["quantize", MODEL, *box, "--budget-rms", MICROPYTHON_RMS_GROWTH, "--target", "micropython",
          "--data", DATA, "--out", BOARD_PLAN]),
        ("emit MicroPython, with its allocation-free viper variant",
         ["emit", BOARD_PLAN, "--lang", "micropython", "--name", ESTIMATOR, "--out", BOARD]),
        ("verify it bit for bit in the MicroPython runtime", ["verify", BOARD, "--data", DATA]),
        (f"the {CORE} job as one project file for the recalibrations to come, its box the sensor's rated range",
         ["init", DATA, *columns, "--name", ESTIMATOR, *rated, *budget, "--target", CORE, "--lang", "c",
          *(f"--unit={name}={unit}" for name, unit in demo_scenario.UNITS.items())]),
        (f"build it: fit, quantize, emit, verify into {BUILD}/, pinning the interface in {INTERFACE}",
         ["build"]),
    ])
    demo_scenario.write_csv(staged.entry(RECALIBRATION), run=2)
    shutil.copytree(BUILD, FIRST_BUILD)
    project = Path(PROJECT)
    project.write_text(project.read_text().replace(f'files = ["{DATA}"]', f'files = ["{RECALIBRATION}"]'))
    print(f"step {number}: months later the same sensor is calibrated again; its bridges have aged: {RECALIBRATION}\n"
          f"$ cp -r {BUILD} {FIRST_BUILD}          # keep the first build to compare\n"
          f"$ edit {PROJECT}: files = [\"{RECALIBRATION}\"]\n")
    number = _run(main, number + 1, [
        ("rebuild: new coefficients within the pinned interface (same scales, same fingerprint)", ["build"]),
        ("what the recalibration changed", ["diff", FIRST_BUILD, BUILD]),
    ])
    _production(main, staged, number, columns, rated, budget)


def _production(main, staged, number: int, columns, rated, budget) -> None:
    """A production batch: every unit fitted from one log, one interface, a record per unit, a reject."""
    demo_scenario.write_batch_csv(staged.entry(BATCH))
    staged.entry(PRODUCTION).mkdir()
    units, rows = demo_scenario.BATCH_UNITS, demo_scenario.BATCH_ROWS
    print(f"step {number}: the production line calibrates a batch of {units} sensors, {rows} rows each, one "
          f"unit after another -> {BATCH}\n")
    tolerance = ["--tolerance", ",".join(f"{k}={v}" for k, v in TOLERANCE.items())]
    project = f"{PRODUCTION}/{PROJECT}"
    number = _run(main, number + 1, [
        ("one firmware for the whole batch, each unit's coefficients in its own calibration record",
         ["init", BATCH, *columns, "--unit-column", demo_scenario.UNIT_COLUMN, "--name", ESTIMATOR, *rated,
          *budget, *tolerance, "--target", CORE, "--flash-address", FLASH_ADDRESS, "--vectors", "100000",
          "--project", project]),
        (f"build the batch: every unit, one interface, {PRODUCTION}/{BUILD}/fleet.csv and a record per "
         "passing unit (status 3 names the units the line rejects)", ["build", PRODUCTION]),
    ], allowed=3)
    table = Path(PRODUCTION) / BUILD / "fleet.csv"
    rows_of = list(csv.DictReader(table.open(newline="")))
    print(f"step {number}: the rejects in {table}")
    for row in rows_of:
        if row["passed"] == "false":
            failed = [f"{o} (cv rms {float(row[o + '.cv_rms']):.3g}, margin {float(row[o + '.margin']):+.3g})"
                      for o in demo_scenario.OUTPUTS if row[f"{o}.passed"] == "false"]
            print(f"  {row['unit']}: " + ", ".join(failed))
    print(f"  the other {len(rows_of) - sum(r['passed'] == 'false' for r in rows_of)} units' records: "
          f"{PRODUCTION}/{BUILD}/records/UNIT.bin, .c and .hex at {FLASH_ADDRESS}\n")


def _run(main, first: int, steps, allowed: int = 0) -> int:
    """Run each (title, argv) as a numbered step, printing the command first; stop at a failure
    (a status other than 0 and ``allowed``).  The number of the step after them."""
    for number, (title, argv) in enumerate(steps, start=first):
        print(f"step {number}: {title}\n$ affix {shlex.join(argv)}")
        status = main(argv)
        print()
        if status not in (0, allowed):
            raise _StepFailed(status)
    return first + len(steps)


def _earlier_demo(outdir: Path) -> set[str]:
    """What an earlier demo left in OUTDIR: its files, its firmware folders where they hold only what an
    emit wrote, and its build folders where they hold only what a build wrote (a folder of anyone else's
    stays untouched, and the demo is refused)."""
    from affix.emit.writer import emitted_before

    names = {DATA, MODEL, PLAN, BOARD_PLAN, PROJECT, INTERFACE, RECALIBRATION, BATCH}
    for folder in (FIRMWARE, BOARD):
        emitted = outdir / folder
        if emitted.is_dir() and set(os.listdir(emitted)) <= emitted_before(emitted):
            names.add(folder)
    for build in (BUILD, FIRST_BUILD):
        if (outdir / build).is_dir() and set(os.listdir(outdir / build)) <= _built(outdir / build):
            names.add(build)
    production = outdir / PRODUCTION
    if (production.is_dir() and set(os.listdir(production)) <= {PROJECT, INTERFACE, BUILD}
            and set(os.listdir(production / BUILD)) <= {n.split("/")[0] for n in _built(production / BUILD)}):
        names.add(PRODUCTION)
    return names


def _built(folder: Path) -> set[str]:
    """The files a build folder's record says the build wrote, and the record."""
    try:
        return {"build.json", *json.loads((folder / "build.json").read_text())["files"]}
    except (OSError, UnicodeDecodeError, ValueError, KeyError, TypeError):
        return set()
