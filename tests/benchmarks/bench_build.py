"""`affix build` on the demo project beside the four commands it replaces, cold and warm.

The demo's wrist sensor (6000 rows, 7 inputs, 6 outputs), C and MicroPython,
10**6 random vectors, the host target's figures: the same work both ways (the
build's report off; its cost is measured apart, warm).  Cold: an empty cffi
cache (the emitted C is compiled) and, for the build, no previous build.
Warm: the cache holds the compiled C and the build replaces its previous
folder (with the diff step that adds).  Each measurement is a fresh process,
as a user runs it; the median of --repeat runs, the ways alternating.

    .venv/bin/python tests/benchmarks/bench_build.py [--repeat 5]
"""
from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from affix.workflow import demo_scenario
from affix.workflow.demo_command import BUDGET, ESTIMATOR, RANGES

COLUMNS = ["--inputs", ",".join(demo_scenario.INPUTS), "--outputs", ",".join(demo_scenario.OUTPUTS)]
OPTIONS = [f"--range={r}" for r in RANGES] + ["--output-type", "int16_t", "--budget",
                                              ",".join(f"{k}={v}" for k, v in BUDGET.items())]
FOUR_COMMANDS = [
    ["fit", "log.csv", *COLUMNS, "--out", "model.json"],
    ["quantize", "model.json", *OPTIONS, "--data", "log.csv", "--out", "plan.json"],
    ["emit", "plan.json", "--lang", "all", "--name", ESTIMATOR, "--out", "firmware"],
    ["verify", "firmware", "--data", "log.csv"],
]


def affix(folder: Path, cache: Path, *argv) -> float:
    start = time.perf_counter()
    subprocess.run([sys.executable, "-m", "affix", *argv], cwd=folder, check=True, capture_output=True,
                   env={**os.environ, "AFFIX_CACHE_DIR": str(cache)})
    return time.perf_counter() - start


def four_commands(folder: Path, cache: Path) -> float:
    return sum(affix(folder, cache, *argv) for argv in FOUR_COMMANDS)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--repeat", type=int, default=5)
    repeat = parser.parse_args().repeat
    times = {key: [] for key in ("build cold", "build warm", "four cold", "four warm", "report warm")}
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        demo_scenario.write_csv(folder / "log.csv")
        subprocess.run([sys.executable, "-m", "affix", "init", "log.csv", *COLUMNS, "--name", ESTIMATOR, *OPTIONS],
                       cwd=folder, check=True, capture_output=True)
        project = folder / "affix.toml"
        project.write_text(project.read_text().replace('out = "build"', 'out = "build"\nreport = false'))
        reported = folder / "reported.toml"  # the same project with its report
        reported.write_text(project.read_text().replace("report = false", "report = true"))
        for run in range(repeat):
            for way in ("four", "build"):
                cache = folder / f"cache-{way}-{run}"
                for state in ("cold", "warm"):
                    if way == "build":
                        if state == "cold":
                            shutil.rmtree(folder / "build", ignore_errors=True)
                            (folder / f"{ESTIMATOR}.interface.json").unlink(missing_ok=True)
                        times[f"build {state}"].append(affix(folder, cache, "build"))
                        if state == "warm":
                            times["report warm"].append(affix(folder, cache, "build", "reported.toml"))
                    else:
                        times[f"four {state}"].append(four_commands(folder, cache))
    median = {key: statistics.median(values) for key, values in times.items()}
    print(f"demo project, median of {repeat} runs (seconds):")
    for state in ("cold", "warm"):
        build, four = median[f"build {state}"], median[f"four {state}"]
        print(f"  {state}: affix build {build:5.2f}   fit+quantize+emit+verify {four:5.2f}   ratio {build / four:.2f}")
    print(f"  warm, with the report: affix build {median['report warm']:5.2f}")


if __name__ == "__main__":
    main()
