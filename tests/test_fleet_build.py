"""affix build of a fleet: one firmware, a record per unit, fleet.csv, the reject, the pin, the progress bar."""
from __future__ import annotations

import csv
import fcntl
import json
import os
import pty
import struct
import subprocess
import sys
import termios
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from affix.record import Contract, decode
from affix.workflow import demo_scenario
from conftest import require, run_affix

UNITS = 8
OUTPUTS = demo_scenario.OUTPUTS
INIT = ["--inputs", ",".join(demo_scenario.INPUTS), "--outputs", ",".join(OUTPUTS), "--unit-column", "serial",
        "--name", "wrist_ft", "--range=-22000:22000", "--range", "therm=1500:3000", "--output-type", "int16_t",
        "--budget", "Fx=0.05,Fy=0.05,Fz=0.1,Tx=0.003,Ty=0.003,Tz=0.002",
        "--tolerance", "Fx=0.15,Fy=0.15,Fz=0.3,Tx=0.006,Ty=0.006,Tz=0.004",
        "--target", "cortex-m4", "--flash-address", "0x0800F800", "--vectors", "20000"]


def batch(folder: Path, units: int = UNITS, rows: int = 300, seed: int = demo_scenario.BATCH_SEED,
          reject: bool = True) -> Path:
    """A production batch of units WR-0001 .. WR-000N, whose WR-0007 is the scenario's out-of-tolerance unit
    (with ``reject``; else a unit in tolerance)."""
    data = demo_scenario.batch_rows(units=max(units, 17), rows=rows, seed=seed)
    frame = pd.DataFrame(data)
    kept = [f"WR-{k:04d}" for k in range(1, units + 1) if k != 7 or not reject] + (["WR-0017"] if reject else [])
    frame = frame[frame.serial.isin(kept)].copy()
    frame.loc[frame.serial == "WR-0017", "serial"] = "WR-0007"
    frame = frame.sort_values("serial", kind="stable")
    path = folder / "batch.csv"
    frame.to_csv(path, index=False, float_format="%.4f")
    return path


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    require("gcc")
    require("micropython")
    folder = tmp_path_factory.mktemp("fleet")
    batch(folder)
    assert run_affix("init", "batch.csv", *INIT, cwd=folder).returncode == 0
    done = run_affix("build", cwd=folder)
    return folder, done


@pytest.mark.bad_input("build")
def test_the_out_of_tolerance_unit_is_rejected_and_the_others_get_records(built):
    folder, done = built
    assert done.returncode == 3, done.stderr
    assert done.stderr.strip().splitlines()[-1] == ("affix: error: 1 of 8 units fail: WR-0007; the line rejects it "
                                                   "(figures in fleet.csv); the records of the other units were written")
    records = folder / "build" / "records"
    assert sorted(p.name for p in records.glob("*.bin")) == [f"WR-{k:04d}.bin" for k in range(1, 9) if k != 7]
    assert "7 of 8 units pass" in done.stdout and "records   7 records of" in done.stdout


def test_fleet_csv_keeps_the_reports_contract(built):
    """Header unit,rows,passed then per output rms, cv_rms, worst_case, margin, passed; a row per unit in
    fleet order; the margins are the budget's and the tolerance's, recomputed here from the plan and model
    figures the build printed."""
    folder, _ = built
    rows = list(csv.reader((folder / "build" / "fleet.csv").open(newline="")))
    assert rows[0] == ["unit", "rows", "passed"] + [f"{o}.{f}" for o in OUTPUTS
                                                   for f in ("rms", "cv_rms", "worst_case", "margin", "passed")]
    table = pd.read_csv(folder / "build" / "fleet.csv", dtype={"unit": str})
    assert list(table.unit) == [f"WR-{k:04d}" for k in range(1, 9)] and (table.rows == 300).all()
    tolerance = {"Fx": 0.15, "Fy": 0.15, "Fz": 0.3, "Tx": 0.006, "Ty": 0.006, "Tz": 0.004}
    budget = {"Fx": 0.05, "Fy": 0.05, "Fz": 0.1, "Tx": 0.003, "Ty": 0.003, "Tz": 0.002}
    for o in OUTPUTS:
        expected = np.minimum(budget[o] - table[f"{o}.worst_case"], tolerance[o] - table[f"{o}.cv_rms"])
        np.testing.assert_allclose(table[f"{o}.margin"], expected, rtol=1e-12, atol=1e-15)
        assert list(table[f"{o}.passed"]) == list(table[f"{o}.margin"] >= 0)
    assert list(table.passed) == [unit != "WR-0007" for unit in table.unit]
    # The reject's own fit is the outlier: its Fz error is several times the others'.
    assert table.loc[table.unit == "WR-0007", "Fz.cv_rms"].item() > 3 * table["Fz.cv_rms"].median()


def test_each_record_holds_its_units_own_fit(built, tmp_path):
    """A unit's record decodes to the integers of that unit's own plan: its gains, refitted here with
    numpy.linalg.lstsq on its rows alone, times 2^shift / lsb, within the rounding of the coefficients."""
    folder, _ = built
    manifest = json.loads((folder / "build" / "wrist_ft.manifest.json").read_text())
    contract = Contract.of(manifest)
    data = pd.read_csv(folder / "batch.csv", dtype={"serial": str})
    for unit in ("WR-0001", "WR-0006"):
        decoded = decode((folder / "build" / "records" / f"{unit}.bin").read_bytes(), contract)
        assert decoded.unit == unit
        rows = data[data.serial == unit]
        y = np.column_stack([rows[demo_scenario.INPUTS].to_numpy(float), np.ones(len(rows))])
        solution, *_ = np.linalg.lstsq(y, rows[OUTPUTS].to_numpy(float), rcond=None)
        for i, lsb in enumerate(manifest["output_lsb"]):
            step = lsb / 2.0 ** decoded.shifts[i]
            coefficients = np.array(decoded.coefficients[i]) * step
            # the error-feedback search moves a coefficient by at most a few steps from plain rounding
            assert np.max(np.abs(coefficients - solution[:-1, i])) < 4 * step


def test_hex_and_c_array_hold_the_records_bytes(built, tmp_path):
    """The Intel HEX copy read back with the intelhex package at the project's address; the C array
    compiled with the emitted code, strict warnings, and loaded by NAME_record_load."""
    from intelhex import IntelHex

    folder, _ = built
    records = folder / "build" / "records"
    data = (records / "WR-0003.bin").read_bytes()
    image = IntelHex(str(records / "WR-0003.hex"))
    assert image.minaddr() == 0x0800F800 and image.tobinstr(start=0x0800F800, size=len(data)) == data
    main = tmp_path / "main.c"
    main.write_text('#include "wrist_ft.h"\nextern const uint8_t wrist_ft_stored_record[WRIST_FT_RECORD_BYTES];\n'
                    "int main(void)\n{\n    struct wrist_ft_record rec;\n"
                    "    return wrist_ft_record_load(&rec, wrist_ft_stored_record, WRIST_FT_RECORD_BYTES);\n}\n")
    exe = tmp_path / "load"
    flags = ["-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wsign-conversion", "-Werror"]
    subprocess.run(["gcc", *flags, f"-I{folder / 'build'}", str(folder / "build" / "wrist_ft.c"),
                    str(records / "WR-0003.c"), str(main), "-o", str(exe)], check=True)
    assert subprocess.run([str(exe)]).returncode == 0


def test_build_json_hashes_every_record_and_the_report_shows_the_reject(built):
    folder, _ = built
    record = json.loads((folder / "build" / "build.json").read_text())
    assert record["fleet"] == {"unit_column": "serial", "units": 8, "records": 7, "failing": ["WR-0007"]}
    assert "records/WR-0001.bin" in record["files"] and "records/WR-0001.hex" in record["files"]
    assert "fleet.csv" in record["files"]
    page = (folder / "build" / "report.html").read_text()
    fleet = page[page.index('id="fleet"'):]
    assert "WR-0007" in fleet[: fleet.index("</section>")]
    # Every number the page takes from fleet.csv is that cell, read back with the csv module.
    import html5lib

    rows = list(csv.DictReader((folder / "build" / "fleet.csv").open(newline="")))
    document = html5lib.HTMLParser(strict=True, namespaceHTMLElements=False).parse(page)
    cells = [e for e in document.findall(".//*[@data-source]") if e.get("data-source").startswith("fleet.csv#")]
    assert cells
    for element in cells:
        line, column = element.get("data-source").partition("#")[2].split("/", 1)
        assert float(element.get("data-value")) == float(rows[int(line.removeprefix("L")) - 2][column])


def test_the_code_that_loads_records_runs_and_is_measured_on_the_planned_core(built):
    # The fleet targets a Cortex-M4: its estimator, with the nominal unit's record loaded on the emulated
    # core (unicorn), is verified against the reference over every vector set and measured like compiled code.
    require("arm-none-eabi-gcc")
    folder, _ = built
    figures = json.loads((folder / "build" / "build.json").read_text())["target_figures"]
    assert figures["target"] == "cortex-m4" and figures["instructions_per_evaluation"] > 6 * 7
    verification = json.loads((folder / "build" / "verification.json").read_text())
    on_core = [r for r in verification["results"]
               if r["artefact"] == "C wrist_ft_estimate_record() on the emulated cortex-m4 (table)"]
    assert {r["vector_set"] for r in on_core} >= {"corners", "random"}
    assert all(r["mismatches"] == 0 and r["error"] is None and r["vectors"] > 0 for r in on_core)


def test_a_second_batch_builds_within_the_pinned_interface(built, tmp_path):
    """The pin from the first batch fixes widths, types and scales: a second batch gets new records for the
    same firmware (same fingerprint), and its records load with the first build's code."""
    folder, _ = built
    second = tmp_path / "second"
    second.mkdir()
    for name in ("affix.toml", "wrist_ft.interface.json"):
        (second / name).write_bytes((folder / name).read_bytes())
    batch(second, units=6, seed=9009, reject=False)
    done = run_affix("build", "--quiet", cwd=second)
    assert done.returncode == 0, done.stderr
    assert done.stdout.splitlines() == [done.stdout.strip()]  # --quiet: the closing line alone
    assert "as pinned in" in done.stdout
    old = json.loads((folder / "build" / "wrist_ft.manifest.json").read_text())
    new = json.loads((second / "build" / "wrist_ft.manifest.json").read_text())
    assert new["interface"] == old["interface"]
    decode((second / "build" / "records" / "WR-0002.bin").read_bytes(), Contract.of(old))


@pytest.mark.bad_input("build")
def test_units_that_cannot_be_fitted_stop_the_build_or_are_skipped(tmp_path):
    require("gcc")
    require("micropython")
    path = batch(tmp_path, units=7)
    frame = pd.read_csv(path, dtype={"serial": str})
    extra = frame[frame.serial == "WR-0001"].head(3).assign(serial="WR-0099")
    pd.concat([frame, extra]).to_csv(path, index=False, float_format="%.4f")
    assert run_affix("init", "batch.csv", *INIT, cwd=tmp_path).returncode == 0
    done = run_affix("build", cwd=tmp_path)
    assert done.returncode == 2
    assert "1 unit(s) cannot be fitted: unit WR-0099 (only 3 usable row(s)" in done.stderr
    assert "--skip-bad-units" in done.stderr and not (tmp_path / "build").exists()
    done = run_affix("build", "--skip-bad-units", cwd=tmp_path)
    assert done.returncode == 3, done.stderr  # WR-0007 and the unfitted unit
    row = next(r for r in csv.DictReader((tmp_path / "build" / "fleet.csv").open()) if r["unit"] == "WR-0099")
    assert row["passed"] == "false" and row["rows"] == "3" and row["Fx.margin"] == "" and row["Fx.rms"] == ""
    assert "WR-0099" in done.stderr.splitlines()[-1]


def test_a_progress_bar_on_a_terminal_and_none_on_a_pipe(built, tmp_path):
    """On a pipe (as in the other tests) stderr holds no bar; on a pseudo-terminal the bar is drawn."""
    folder, done = built
    assert "planning units" not in done.stderr and "\r" not in done.stderr
    work = tmp_path / "tty"
    work.mkdir()
    for name in ("affix.toml", "batch.csv"):
        (work / name).write_bytes((folder / name).read_bytes())
    controller, terminal = pty.openpty()
    fcntl.ioctl(terminal, termios.TIOCSWINSZ, struct.pack("HHHH", 24, 100, 0, 0))  # a terminal of 100 columns
    process = subprocess.Popen([sys.executable, "-m", "affix", "build"], cwd=work, stdin=subprocess.DEVNULL,
                               stdout=subprocess.DEVNULL, stderr=terminal)
    os.close(terminal)
    shown = b""
    while True:
        try:
            chunk = os.read(controller, 65536)
        except OSError:  # the child closed the terminal
            break
        if not chunk:
            break
        shown += chunk
    process.wait()
    os.close(controller)
    assert process.returncode == 3
    assert b"planning units" in shown and b"writing records" in shown
