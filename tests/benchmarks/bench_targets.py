"""Instructions per evaluation on emulated Cortex-M cores: affix beside CMSIS-DSP, in one run.

For each core (Cortex-M0+, M4, M7), shape (6 outputs x 7 inputs, 16 x 16)
and width combination the core allows, a random plan over int16 inputs is
emitted in both C styles, cross-compiled with arm-none-eabi-gcc -O2 and run
in the unicorn engine's model of the core, counting every instruction of the
whole estimate (clamp, multiply-accumulates, rounding, saturation, stores)
over corners and random points of the box.  Beside it, the same shape through
CMSIS-DSP's matrix-vector kernels arm_mat_vec_mult_q15 / _q31, compiled from
the cmsisdsp source distribution with the same compiler and flags (a
ten-line cmsis_compiler.h over GCC's <arm_acle.h> stands in for CMSIS-Core)
and counted the same way: the bare matrix-vector product, no clamp, no offset.

The cmsisdsp sources are fetched once with pip into the cache folder
($AFFIX_CACHE_DIR/.., else ~/.cache/affix/cmsisdsp) and never copied into the repository.

    .venv/bin/python tests/benchmarks/bench_targets.py [--json FILE]
"""
from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tarfile
import tempfile
from pathlib import Path

import numpy as np

from affix.emit.templates import render
from affix.emit.writer import emit
from affix.model import Model
from affix.quantize import plan_fixed_point
from affix.targets import get_target
from affix.targets.emulator import SCRATCH, Emulator
from affix.targets.figures import target_figures
from affix.targets.toolchain import build_image

CORES = ("cortex-m0plus", "cortex-m4", "cortex-m7")
SHAPES = ((6, 7), (16, 16))  # (outputs, inputs)
WIDTHS = ((8, 32), (16, 32), (32, 32), (8, 64), (16, 64), (32, 64))  # (coefficient bits, accumulator bits)
STYLES = ("table", "unrolled", "record")  # record: table-style code that loads a calibration record (fleets)
KERNELS = {16: "q15", 32: "q31"}  # the library kernel with the same coefficient width (8-bit: q15 too)


def cache_dir() -> Path:
    base = os.environ.get("AFFIX_CACHE_DIR")
    root = Path(base).parent if base else Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "affix"
    return root / "cmsisdsp"


def cmsis_sources() -> Path:
    """The unpacked cmsisdsp source distribution (downloaded with pip on first use)."""
    cache = cache_dir()
    cache.mkdir(parents=True, exist_ok=True)
    archives = sorted(cache.glob("cmsisdsp-*.tar.gz"))
    if not archives:
        subprocess.run([sys.executable, "-m", "pip", "download", "--no-deps", "--no-binary", "cmsisdsp",
                        "cmsisdsp", "-d", str(cache)], check=True, capture_output=True)
        archives = sorted(cache.glob("cmsisdsp-*.tar.gz"))
    root = cache / archives[-1].name.removesuffix(".tar.gz")
    if not root.is_dir():
        with tarfile.open(archives[-1]) as archive:
            archive.extractall(cache, filter="data")
    (cache / "shim").mkdir(exist_ok=True)
    (cache / "shim" / "cmsis_compiler.h").write_text(render("c/cmsis_compiler_shim.h.jinja"))
    return root


def cmsis_counts(core: str, shape, work: Path) -> dict[str, float]:
    """Instructions of one arm_mat_vec_mult_q15 / _q31 call at ``shape``, on ``core``."""
    root = cmsis_sources()
    target = get_target(core)
    kernels = [root / "Source" / "MatrixFunctions" / f"arm_mat_vec_mult_{k}.c" for k in KERNELS.values()]
    image = build_image(target, kernels, "arm_mat_vec_mult_q15", work, keep=["arm_mat_vec_mult_q31"],
                        include_dirs=[root / "Include", root / "PrivateInclude", cache_dir() / "shim"])
    emulator = Emulator(image.elf, target.emulator)
    rows, cols = shape
    rng = np.random.default_rng(1)
    counts = {}
    for bits, kind in KERNELS.items():
        dtype = np.dtype("<i2" if bits == 16 else "<i4")
        limit = 2 ** (bits - 1) // (cols + 1)
        matrix = rng.integers(-limit, limit, size=(rows, cols)).astype(dtype)
        vector = rng.integers(-limit, limit, size=cols).astype(dtype)
        instance, data, vec, dst = SCRATCH, SCRATCH + 16, SCRATCH + 0x4000, SCRATCH + 0x8000
        # arm_matrix_instance_q15/q31: uint16_t numRows, numCols; pointer pData (matrix_functions.h).
        emulator.write(instance, np.array([rows, cols], "<u2").tobytes() + np.array([data], "<u4").tobytes())
        emulator.write(data, matrix.tobytes())
        emulator.write(vec, vector.tobytes())
        executed, _ = emulator.call(f"arm_mat_vec_mult_{kind}", instance, vec, dst, count=True)
        counts[kind] = executed
    return counts


def bench_plan(shape, widths, target="host"):
    """A plan the quantizer makes for ``target`` from a random model over int16 inputs, in these widths."""
    rows, cols = shape
    rng = np.random.default_rng(rows * 100 + cols)
    model = Model(inputs=tuple(f"y{j}" for j in range(cols)), outputs=tuple(f"x{i}" for i in range(rows)),
                  gain=rng.normal(size=(rows, cols)) * 10.0 ** rng.uniform(-3, -1, size=(rows, 1)),
                  offset=rng.normal(size=rows))
    return plan_fixed_point(model, (-32768, 32767), coef_bits=widths[0], acc_bits=widths[1], target=target,
                            box_points=1000)


def affix_counts(core: str, shape, widths, style: str, work: Path) -> float | None:
    coef_bits, acc_bits = widths
    rows, cols = shape
    plan = bench_plan(shape, widths, core)
    out = work / f"{core}-{rows}x{cols}-{coef_bits}-{acc_bits}-{style}"
    record = style == "record"
    emit(plan, lang="c", style="table" if record else style, name="bench", out_dir=out,
         coefficients="record" if record else "compiled")
    return target_figures(out, core)["instructions_per_evaluation"]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--json", help="also write the figures to this file")
    args = parser.parse_args()
    records = []
    header = (f"{'core':<14} {'shape':>6} {'coef/acc':>8} {'style':<9} {'affix':>7} {'/MAC':>5}   "
              f"{'library':<22} {'/MAC':>5}  {'affix/library':>13}")
    print(header)
    with tempfile.TemporaryDirectory(prefix="affix-bench-targets-") as tmp:
        tmp = Path(tmp)
        for core in CORES:
            for shape in SHAPES:
                rows, cols = shape
                macs = rows * cols
                work = tmp / f"cmsis-{core}-{rows}x{cols}"
                work.mkdir()
                library = cmsis_counts(core, shape, work)
                for widths in WIDTHS:
                    kind = KERNELS[max(widths[0], 16)]
                    for style in STYLES:
                        count = affix_counts(core, shape, widths, style, tmp)
                        records.append({"core": core, "outputs": rows, "inputs": cols, "coef_bits": widths[0],
                                        "acc_bits": widths[1], "style": style, "affix": count,
                                        "library_kernel": f"arm_mat_vec_mult_{kind}", "library": library[kind]})
                        print(f"{core:<14} {rows:>3}x{cols:<2} {widths[0]:>4}/{widths[1]:<3} {style:<9} "
                              f"{count:>7.0f} {count / macs:>5.1f}   {'arm_mat_vec_mult_' + kind:<22} "
                              f"{library[kind] / macs:>5.1f}  {count / library[kind]:>13.2f}", flush=True)
    if args.json:
        Path(args.json).write_text(json.dumps(records, indent=1))


if __name__ == "__main__":
    main()
