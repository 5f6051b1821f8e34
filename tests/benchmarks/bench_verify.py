"""Verification throughput and the cost of one evaluation of emitted C.

1. Vectors per second through the cffi build of a 6-input, 6-output
   estimator (one batch call over a numpy buffer), beside the numpy integer
   reference on the same vectors.
2. Instructions per evaluation of the emitted C at -O2 (table and unrolled
   styles) and of a plain double-precision loop over the same matrix,
   counted by valgrind's callgrind (repeatable, unlike wall time).

    .venv/bin/python tests/benchmarks/bench_verify.py
"""
from __future__ import annotations

import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from plans import random_plan  # noqa: E402

from affix.emit.templates import render  # noqa: E402
from affix.emit.writer import emit  # noqa: E402
from affix.verify.c_build import load_c  # noqa: E402
from affix.verify.check import verify  # noqa: E402

N_VECTORS = 4 * 10**6
CALLGRIND_VECTORS = 64
CALLGRIND_REPEATS = 2000


def best_time(function, repeats: int = 5) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return min(times)


def throughput(plan, tmp: Path) -> None:
    reference = plan.integer_estimator()
    lo = np.array([r[0] for r in plan.input_ranges])
    hi = np.array([r[1] for r in plan.input_ranges])
    y = np.random.default_rng(0).integers(lo, hi, size=(N_VECTORS, len(lo)), endpoint=True).astype(np.int16)
    y64 = y.astype(np.int64)
    t_ref = best_time(lambda: reference.evaluate(y64), repeats=3)
    print(f"6x6, {N_VECTORS} vectors, best of several runs:")
    print(f"  numpy integer reference      {N_VECTORS / t_ref:14.3e} vectors/s")
    for style in ("table", "unrolled"):
        manifest = emit(plan, lang="c", style=style, name="bench", out_dir=tmp / style)
        code = load_c(tmp / style, manifest, cache_dir=tmp / "cache")
        assert np.array_equal(code.evaluate(y[:10000]), reference.evaluate(y64[:10000]))
        t = best_time(lambda: code.evaluate(y))
        print(f"  cffi, emitted C ({style:8s})  {N_VECTORS / t:14.3e} vectors/s  ({t_ref / t:.1f}x the reference)")
    # End to end: vector generation, the C, the reference and the comparison.
    t = best_time(lambda: verify(tmp / "table", vectors=N_VECTORS, cache_dir=tmp / "cache"), repeats=2)
    report = verify(tmp / "table", vectors=N_VECTORS, cache_dir=tmp / "cache")
    print(f"  affix verify, whole run        {report.evaluations / t:14.3e} evaluations/s")


def instructions(plan, tmp: Path) -> None:
    valgrind, cc = shutil.which("valgrind"), shutil.which("gcc")
    if not (valgrind and cc):
        print("callgrind: skipped (valgrind or gcc missing)")
        return
    rng = np.random.default_rng(1)
    lo = [r[0] for r in plan.input_ranges]
    hi = [r[1] for r in plan.input_ranges]
    vectors = rng.integers(lo, hi, size=(CALLGRIND_VECTORS, len(lo)), endpoint=True).tolist()
    calls = CALLGRIND_VECTORS * CALLGRIND_REPEATS
    print(f"callgrind, gcc -O2, instructions per evaluation ({calls} calls each):")
    for style in ("table", "unrolled"):
        out = tmp / f"cg-{style}"
        manifest = emit(plan, lang="c", style=style, name="bench", out_dir=out)
        main = out / "bench_main.c"
        main.write_text(render("c/bench_callgrind.c.jinja", name="bench", input_ctype=manifest["input_ctype"],
                               output_ctype=manifest["output_ctype"], vectors=vectors, gain=plan.gain,
                               offset=plan.offset, repeats=CALLGRIND_REPEATS))
        exe = out / "bench_main"
        subprocess.run([cc, "-O2", "-std=c99", f"-I{out}", str(out / "bench.c"), str(main), "-o", str(exe)], check=True)
        counts = {}
        for function in ("bench_estimate", "bench_double_estimate"):
            report = out / f"{function}.callgrind"
            subprocess.run([valgrind, "--tool=callgrind", f"--toggle-collect={function}",
                            f"--callgrind-out-file={report}", str(exe)], check=True, capture_output=True)
            totals = re.search(r"^(?:totals|summary):\s+(\d+)", report.read_text(), re.M)
            counts[function] = int(totals.group(1)) / calls
        if style == "table":  # the same double loop is in both programs
            print(f"  plain double loop             {counts['bench_double_estimate']:8.1f}")
        ratio = counts["bench_estimate"] / counts["bench_double_estimate"]
        print(f"  emitted int C ({style:8s})      {counts['bench_estimate']:8.1f}  ({ratio:.2f}x the double loop)")


def main() -> None:
    plan = random_plan(6, 6, 6, ranges="int16", coef_bits=16, acc_bits=32)
    with tempfile.TemporaryDirectory(prefix="affix-bench-") as tmp:
        throughput(plan, Path(tmp))
        instructions(plan, Path(tmp))


if __name__ == "__main__":
    main()
