"""Benchmark: `affix report` on a build whose calibration log has 10**6 rows.

Target: under 5 s wall time on this 2-core machine, and a page under 3 MB.
Measured side by side in the same run, each in a fresh process as a user
would run it: the whole command; the bare data pass through affix's intake
(the floor the one streaming pass puts under the report); and, for memory,
pandas loading the whole log, which the report must not do.

    .venv/bin/python tests/benchmarks/bench_report.py [--rows N] [--repeat K]
"""
from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # tests/: the build-folder helper

from build_folder import DATA_FILE, make_build_folder  # noqa: E402

INTAKE_PASS = """
import sys
from affix.intake import read_chunks
from affix.workflow import demo_scenario
for chunk in read_chunks(sys.argv[1], demo_scenario.INPUTS + demo_scenario.OUTPUTS):
    pass
"""
PANDAS_LOAD = "import sys, pandas; pandas.read_csv(sys.argv[1])"


def timed(argv) -> tuple[float, float, int]:
    """Wall seconds, CPU seconds (user + system, all threads) and peak resident memory (MB) of one child.

    The CPU time is what the machine's other work cannot inflate: on this shared 2-core machine the
    wall time of a single-threaded program is its CPU time only when nothing else runs.
    """
    program = ("import resource, subprocess, sys, time; t = time.perf_counter(); "
               "code = subprocess.run(sys.argv[1:]).returncode; s = time.perf_counter() - t; "
               "u = resource.getrusage(resource.RUSAGE_CHILDREN); "
               "print(s, u.ru_utime + u.ru_stime, u.ru_maxrss // 1024); sys.exit(code)")
    result = subprocess.run([sys.executable, "-c", program, *map(str, argv)], capture_output=True, text=True,
                            check=True)
    wall, cpu, megabytes = result.stdout.split()[-3:]
    return float(wall), float(cpu), int(megabytes)


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--rows", type=int, default=10**6)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="affix-bench-report-") as tmp:
        start = time.perf_counter()
        build = make_build_folder(tmp, rows=args.rows, lang="c", vectors=10**5)
        data = build.parent / DATA_FILE
        print(f"build folder for {args.rows:,} rows ({data.stat().st_size / 1e6:.0f} MB CSV) made in "
              f"{time.perf_counter() - start:.1f} s")
        report, intake, whole = [], [], []
        for _ in range(args.repeat):  # interleaved, so drifts of the shared machine hit all alike
            report.append(timed([sys.executable, "-m", "affix", "report", build]))
            intake.append(timed([sys.executable, "-c", INTAKE_PASS, data]))
            whole.append(timed([sys.executable, "-c", PANDAS_LOAD, data]))
        size = (build / "report.html").stat().st_size
    runs = {"report": report, "intake": intake, "pandas": whole}
    wall = {name: statistics.median(r[0] for r in rs) for name, rs in runs.items()}
    cpu = {name: statistics.median(r[1] for r in rs) for name, rs in runs.items()}
    memory = {name: max(r[2] for r in rs) for name, rs in runs.items()}
    print(f"load average of the machine meanwhile: {os.getloadavg()[1]:.1f} (2 cores)")
    print(f"affix report, median of {args.repeat}: {wall['report']:.2f} s wall, {cpu['report']:.2f} s CPU, "
          f"peak {memory['report']} MB")
    print(f"  the bare intake pass over the same file: {wall['intake']:.2f} s wall, {cpu['intake']:.2f} s CPU, "
          f"peak {memory['intake']} MB; report / intake pass, wall: {wall['report'] / wall['intake']:.2f}")
    print(f"  pandas.read_csv of the whole file: {wall['pandas']:.2f} s wall, peak {memory['pandas']} MB "
          f"(report / whole-file load memory: {memory['report'] / memory['pandas']:.2f})")
    median = wall
    print(f"report.html: {size / 2**20:.2f} MB")
    print(f"targets: < 5 s {'met' if median['report'] < 5 else 'NOT met'}; "
          f"< 3 MB {'met' if size < 3 * 2**20 else 'NOT met'}")


if __name__ == "__main__":
    main()
