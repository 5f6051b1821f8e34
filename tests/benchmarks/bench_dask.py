"""Benchmark: the fit's pass on Dask beside the single-machine path, on the same files.

    .venv/bin/python tests/benchmarks/bench_dask.py [--dir DIR] [--files 20] [--rows 1000000] [--repeat 2]

The files: 20 CSVs of 1,000,000 rows each (the four-bridge sensor of
tests/scale_data.py: four integer inputs, two forces), 20 million rows and
about 1 GB in all.  Each measurement is `affix fit` over all of them in a
fresh child process, so each pays Python's start-up and imports alike:

- local: the single-machine path (each file cut into one part per CPU, in
  forked processes);
- dask, 1 worker / 2 workers: `--engine dask --scheduler ADDRESS` on a
  LocalCluster of that many single-threaded worker processes, started
  beforehand, as a running cluster is;
- dask, own cluster: `--engine dask` alone, which starts a LocalCluster of
  one worker per CPU for the fit and shuts it down.

The four alternate, --repeat rounds, so all see the same load; the medians
are reported as wall time, rows per second and the ratio to the local path.
Then the size of what travels to the reduce: one 64 MB block's outcome,
pickled as Dask sends it, and the whole result.  The machine's load average
is printed before and after.  The files go to a temporary folder unless
--dir keeps them for another run.
"""
from __future__ import annotations

import argparse
import logging
import os
import pickle
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))
from scale_data import COLUMNS, INPUTS, OUTPUTS  # noqa: E402

WRITE = """
import sys
import numpy as np
import pandas as pd
sys.path.insert(0, sys.argv[1])
from scale_data import COLUMNS, log_rows
rows = log_rows(np.random.default_rng(int(sys.argv[3])), int(sys.argv[4]))
frame = pd.DataFrame({name: rows[:, j].astype(np.int64) if j < 4 else rows[:, j] for j, name in enumerate(COLUMNS)})
frame.to_csv(sys.argv[2], index=False, float_format="%.6f")
"""


def make_files(folder: Path, count: int, rows: int) -> list[Path]:
    paths = [folder / f"line{k:02d}.csv" for k in range(count)]
    tests = str(Path(__file__).resolve().parent.parent)
    for k, path in enumerate(paths):
        if not path.exists():
            subprocess.run([sys.executable, "-c", WRITE, tests, str(path), str(k), str(rows)], check=True)
    return paths


def timed_fit(paths, out: Path, *extra) -> float:
    command = [sys.executable, "-m", "affix", "fit", *map(str, paths), "--inputs", ",".join(INPUTS),
               "--outputs", ",".join(OUTPUTS), "--out", str(out), *extra]
    start = time.perf_counter()
    subprocess.run(command, check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - start


def transfer_sizes(paths) -> dict:
    """Bytes of what a 64 MB block sends to the reduce, and of a whole file's and all files' results."""
    from affix.fit.blocks import Pass, block_outcome, blocks_of, finish_file, join_outcomes, tree
    from affix.fit.dask_engine import BLOCK_BYTES
    from affix.intake import count_rows, partition

    settings = Pass(tuple(COLUMNS), 5, False)
    parts = partition(paths[0], max(1, -(-os.path.getsize(paths[0]) // BLOCK_BYTES)))
    blocks = blocks_of(0, paths[0], parts)
    first, outcomes = 0, []
    for index, block in enumerate(blocks):
        if index:
            first += count_rows(paths[0], blocks[index - 1].part)
        outcomes.append(block_outcome(block, settings, first if index else None))
    result = finish_file(tree(outcomes, join_outcomes), "0" * 64, paths[0], settings)
    return {
        "block": max(len(pickle.dumps(o)) for o in outcomes),
        "block_bytes": max(b.size for b in blocks),
        "result": len(pickle.dumps(result)),
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--dir", type=Path, help="keep the generated files here")
    parser.add_argument("--files", type=int, default=20)
    parser.add_argument("--rows", type=int, default=1_000_000, help="rows per file")
    parser.add_argument("--repeat", type=int, default=2)
    args = parser.parse_args()
    from distributed import LocalCluster

    logging.getLogger("distributed").setLevel(logging.ERROR)  # not the clusters' closing chatter between the figures

    with tempfile.TemporaryDirectory() as scratch:
        folder = args.dir or Path(scratch)
        folder.mkdir(parents=True, exist_ok=True)
        paths = make_files(folder, args.files, args.rows)
        size = sum(p.stat().st_size for p in paths)
        rows = args.files * args.rows
        print(f"{args.files} CSV files, {rows:,} rows, {size / 1e6:.0f} MB; load average before: "
              f"{' '.join(f'{v:.1f}' for v in os.getloadavg())}")
        clusters = {n: LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None,
                                    silence_logs=logging.ERROR, scheduler_kwargs={"dashboard_address": "127.0.0.1:0"})
                    for n in (1, 2)}
        try:
            sides = {
                "local": (),
                "dask, 1 worker": ("--engine", "dask", "--scheduler", clusters[1].scheduler_address),
                "dask, 2 workers": ("--engine", "dask", "--scheduler", clusters[2].scheduler_address),
                "dask, own cluster": ("--engine", "dask"),
            }
            times = {name: [] for name in sides}
            for _ in range(args.repeat):
                for name, extra in sides.items():
                    times[name].append(timed_fit(paths, Path(scratch) / "m.json", *extra))
        finally:
            for cluster in clusters.values():
                cluster.close()
        local = statistics.median(times["local"])
        print(f"{'path':<20} {'wall s':>8} {'rows/s':>12} {'÷ local':>8}   runs")
        for name, values in times.items():
            wall = statistics.median(values)
            print(f"{name:<20} {wall:8.2f} {rows / wall:12.3g} {wall / local:8.2f}   "
                  + " ".join(f"{v:.2f}" for v in values))
        sizes = transfer_sizes(paths)
        print(f"to the reduce: {sizes['block'] / 1e3:.0f} KB from a block of {sizes['block_bytes'] / 1e6:.0f} MB "
              f"(its partial tiles' rows and its complete tiles' moments); a file's result {sizes['result'] / 1e3:.1f} KB")
        print(f"load average after: {' '.join(f'{v:.1f}' for v in os.getloadavg())}")


if __name__ == "__main__":
    main()
