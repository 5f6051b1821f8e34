"""Benchmark: fitting a fleet log, and a whole fleet build, side by side with the obvious way.

    .venv/bin/python tests/benchmarks/bench_fleet.py [--dir DIR] [--repeat 3] [--units 1000] [--rows 2000]

1. A fleet log of 1,000 units x 2,000 rows, 8 inputs -> 6 outputs (a CSV of
   2,000,000 rows and 15 columns, the unit id first): the fit stage, every
   unit's model from one pass (affix.fleet.fit.fit_fleet, what `affix build`
   runs), against pandas.read_csv of the whole file, groupby on the unit
   column and numpy.linalg.lstsq per unit.  Target: wall time <= 0.5x.  The
   baseline runs again with NumPy's BLAS on one thread (BASELINE_ONE_THREAD):
   under load its default threads cost it far more than its work.
2. Peak memory (PSS of the process tree) of both, and affix's again on a log
   of a quarter of the rows per unit: it must not grow with the rows.
3. The whole `affix build` of that log (every fit, the one interface, a
   record per unit, the verification of the nominal code and of every
   unit's record in C and MicroPython).  Target: under 60 s.

Every measurement is a fresh child process; wall times are medians of
--repeat runs of each side, alternating, so both see the same load; the load
average is printed with the figures.  The files (about 400 MB) go to a
temporary folder unless --dir keeps them.
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

sys.path.insert(0, str(Path(__file__).parent))
from bench_fit import compile_affix, run  # noqa: E402  (run: one child process, its wall time or its tree's peak PSS)

INPUTS = [f"g{j}" for j in range(8)]
OUTPUTS = [f"f{i}" for i in range(6)]

GENERATE = """
import sys, numpy as np, pandas as pd
path, units, rows = sys.argv[1], int(sys.argv[2]), int(sys.argv[3])
rng = np.random.default_rng(12)
design = rng.normal(0, 0.002, size=(6, 8))
with open(path, "w") as out:
    out.write("unit," + ",".join([f"g{j}" for j in range(8)] + [f"f{i}" for i in range(6)]) + "\\n")
    for start in range(0, units, 50):
        frames = []
        for u in range(start, min(units, start + 50)):
            gain = design * rng.normal(1, 0.02, size=design.shape)
            y = np.rint(rng.uniform(-20000, 20000, size=(rows, 8)))
            x = y @ gain.T + rng.normal(0, 0.5, size=6) + rng.normal(0, 0.05, size=(rows, 6))
            frame = pd.DataFrame(np.column_stack([y, x]), columns=[f"g{j}" for j in range(8)] + [f"f{i}" for i in range(6)])
            frame.insert(0, "unit", f"U{u + 1:04d}")
            frames.append(frame)
        pd.concat(frames).to_csv(out, header=False, index=False, float_format="%.5f")
"""

AFFIX_FIT = """
import sys
from affix.fleet.fit import fit_fleet
fleet = fit_fleet(sys.argv[1], sys.argv[2].split(","), sys.argv[3].split(","), "unit")
assert len(fleet.models) == int(sys.argv[4])
"""

BASELINE = """
import sys, numpy as np, pandas as pd
frame = pd.read_csv(sys.argv[1])
inputs, outputs = sys.argv[2].split(","), sys.argv[3].split(",")
models = {}
for unit, rows in frame.groupby("unit", sort=False):
    y = rows[inputs].to_numpy(float)
    models[unit] = np.linalg.lstsq(np.column_stack([y, np.ones(len(y))]), rows[outputs].to_numpy(float), rcond=None)[0]
assert len(models) == int(sys.argv[4])
"""

# The same baseline with NumPy's BLAS on one thread.  By default OpenBLAS runs
# each small lstsq on every core, and on a machine whose other core is busy its
# threads spin against that work: the baseline then takes several times longer
# and the ratio says more about the load than about affix.  Both are reported.
BASELINE_ONE_THREAD = "import os\nos.environ.update(OPENBLAS_NUM_THREADS='1', OMP_NUM_THREADS='1', " \
                      "MKL_NUM_THREADS='1')\n" + BASELINE

PROJECT = """name = "bench_fleet"

[data]
files = ["fleet.csv"]
unit_column = "unit"

{inputs}
{outputs}
[fixed_point]
target = "cortex-m4"
"""


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--dir", help="keep the generated files here (default: a temporary folder)")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--units", type=int, default=1000)
    parser.add_argument("--rows", type=int, default=2000)
    args = parser.parse_args()
    compile_affix()
    with tempfile.TemporaryDirectory(prefix="affix-bench-fleet-") as tmp:
        folder = Path(args.dir or tmp)
        folder.mkdir(parents=True, exist_ok=True)
        log, small = folder / "fleet.csv", folder / "fleet-quarter.csv"
        for path, rows in ((log, args.rows), (small, args.rows // 4)):
            if not path.is_file():
                subprocess.run([sys.executable, "-c", GENERATE, str(path), str(args.units), str(rows)], check=True)
        print(f"load average {os.getloadavg()[0]:.1f} at the start; {log.stat().st_size / 1e6:.0f} MB, "
              f"{args.units} units x {args.rows} rows")
        columns = [",".join(INPUTS), ",".join(OUTPUTS), str(args.units)]
        sides = {"affix": [sys.executable, "-c", AFFIX_FIT, str(log), *columns],
                 "baseline": [sys.executable, "-c", BASELINE, str(log), *columns],
                 "one thread": [sys.executable, "-c", BASELINE_ONE_THREAD, str(log), *columns]}
        times = {name: [] for name in sides}
        for _ in range(args.repeat):
            for name, command in sides.items():
                times[name].append(run(command))
        wall = {name: statistics.median(values) for name, values in times.items()}
        memory = {name: run(command, sample_memory=True) for name, command in sides.items() if name != "one thread"}
        quarter = run([sys.executable, "-c", AFFIX_FIT, str(small), *columns], sample_memory=True)
        print(f"fit stage: affix {wall['affix']:.2f} s, pandas.read_csv + groupby + lstsq {wall['baseline']:.2f} s, "
              f"ratio {wall['affix'] / wall['baseline']:.2f} (target <= 0.5); the baseline with one BLAS thread "
              f"{wall['one thread']:.2f} s, ratio {wall['affix'] / wall['one thread']:.2f}; load average "
              f"{os.getloadavg()[0]:.1f}")
        print(f"peak memory: affix {memory['affix']:.0f} MB ({quarter:.0f} MB with a quarter of the rows), "
              f"baseline {memory['baseline']:.0f} MB, ratio {memory['affix'] / memory['baseline']:.2f}")
        build = folder / "build-project"
        build.mkdir(exist_ok=True)
        if not (build / "fleet.csv").exists():
            os.link(log, build / "fleet.csv")
        tables = "".join(f'[[inputs]]\nname = "{n}"\nrange = [-20000, 20000]\n' for n in INPUTS)
        tables_out = "".join(f'[[outputs]]\nname = "{n}"\nbudget = 0.05\n' for n in OUTPUTS)
        (build / "affix.toml").write_text(PROJECT.format(inputs=tables, outputs=tables_out))
        for stale in (build / "bench_fleet.interface.json",):
            stale.unlink(missing_ok=True)
        start = time.perf_counter()
        done = subprocess.run([sys.executable, "-m", "affix", "build", "--force"], cwd=build, capture_output=True,
                              text=True)
        seconds = time.perf_counter() - start
        print(done.stdout.rstrip())
        if done.returncode not in (0, 3):
            raise SystemExit(done.stderr)
        print(f"affix build: {seconds:.1f} s wall (target < 60 s); load average {os.getloadavg()[0]:.1f} at the end")


if __name__ == "__main__":
    main()
