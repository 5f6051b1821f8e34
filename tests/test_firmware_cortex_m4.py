"""The emitted C on a Cortex-M4: cross-compiled with arm-none-eabi-gcc, run in
qemu's mps2-an386 board, and compared bit for bit with the integer reference.

The host build (cffi) checks the C on x86-64; this checks it where int is 32
bits and 64-bit accumulators go through the core's SMLAL/UMULL and libgcc's
shift helpers, the arithmetic a real MCU would do.
"""
from __future__ import annotations

import json
import subprocess
from pathlib import Path

import numpy as np
import pytest

from affix.arithmetic import IntegerEstimator
from affix.float32_arithmetic import Float32Estimator
from affix.plan import Plan
from conftest import require, run_affix

HARNESS = Path(__file__).resolve().parents[1] / "firmware_examples" / "cortex_m4_qemu"


def _plan(acc_bits: int, seed: int) -> Plan:
    """A 5-input, 3-output plan with mixed-sign ranges; coefficients chosen so
    the box bound uses most of the accumulator (the proof still holds)."""
    rng = np.random.default_rng(seed)
    ranges = ((-2048, 2047), (0, 4095), (-32768, 32767), (-100, 100), (0, 65535))
    coef_bits = 16 if acc_bits == 32 else 32
    reach = np.array([max(abs(lo), abs(hi)) for lo, hi in ranges], dtype=float)
    budget = 2.0 ** (acc_bits - 1) * 0.9
    limit = min(2 ** (coef_bits - 1) - 1, int(budget / reach.sum()))
    coefficients = rng.integers(-limit, limit + 1, size=(3, 5))
    shifts = (acc_bits // 2, acc_bits // 2 - 3, 5)
    offsets = rng.integers(-limit, limit + 1, size=3)
    return Plan(
        inputs=("a", "b", "c", "d", "e"),
        outputs=("u", "v", "w"),
        input_ranges=ranges,
        coefficients=tuple(map(tuple, coefficients.tolist())),
        offsets=tuple(offsets.tolist()),
        shifts=shifts,
        output_lsb=(0.01, 0.01, 0.01),
        output_ctype="int32_t",
        coef_bits=coef_bits,
        acc_bits=acc_bits,
        rounding="nearest",
        gain=tuple(tuple(float(a) for a in row) for row in coefficients.tolist()),
        offset=(0.0, 0.0, 0.0),
        model_sha256="0" * 64,
    )


def _run_on_m4(tmp_path, plan: Plan, *emit_options) -> tuple[dict, np.ndarray, np.ndarray]:
    """Emit ``plan`` with ``emit_options``, run the harness in qemu over the box
    corners and random vectors; the manifest, the vectors and the output words."""
    require("arm-none-eabi-gcc")
    require("qemu-system-arm")
    make = require("make")
    plan.save(tmp_path / "plan.json")
    emitted = tmp_path / "emitted"
    done = run_affix("emit", tmp_path / "plan.json", "--lang", "c", *emit_options, "--name", "probe", "--out", emitted)
    assert done.returncode == 0, done.stderr
    manifest = json.loads((emitted / "probe.manifest.json").read_text())

    rng = np.random.default_rng(7)
    lo = np.array([r[0] for r in plan.input_ranges])
    hi = np.array([r[1] for r in plan.input_ranges])
    corners = np.array(np.meshgrid(*zip(lo, hi))).reshape(len(lo), -1).T  # all 32 corners
    vectors = np.vstack([corners, rng.integers(lo, hi + 1, size=(5000, len(lo)))]).astype("<i4")
    (tmp_path / "vectors.bin").write_bytes(vectors.tobytes())

    floating = manifest["arith"] == "float32"
    build = subprocess.run(
        [make, "-s", "-f", str(HARNESS / "Makefile"), "NAME=probe", f"DIR={emitted}",
         f"IN_T={manifest['input_ctype']}", f"OUT_T={'float' if floating else manifest['output_ctype']}",
         f"N_IN={len(plan.inputs)}", f"N_OUT={len(plan.outputs)}", f"FLOAT={int(floating)}", "run"],
        cwd=tmp_path, capture_output=True, text=True, timeout=300,
    )
    assert build.returncode == 0, build.stdout + build.stderr
    words = np.frombuffer((tmp_path / "outputs.bin").read_bytes(), dtype="<i4").reshape(-1, len(plan.outputs))
    return manifest, vectors.astype(np.int64), words


def _first_mismatch(vectors, expected, got) -> str:
    rows = np.flatnonzero((got != expected).any(axis=1))
    return "none" if rows.size == 0 else f"y={vectors[rows[0]]} expected={expected[rows[0]]} got={got[rows[0]]}"


@pytest.mark.parametrize("acc_bits", [32, 64])
@pytest.mark.parametrize("style", ["table", "unrolled"])
def test_emitted_c_on_cortex_m4_matches_reference(tmp_path, acc_bits, style):
    plan = _plan(acc_bits, seed=acc_bits)
    plan.validate()
    manifest, vectors, got = _run_on_m4(tmp_path, plan, "--style", style)
    expected = IntegerEstimator.from_mapping(manifest).evaluate(vectors)
    assert got.shape == expected.shape
    assert np.array_equal(got, expected), _first_mismatch(vectors, expected, got)


def test_float32_c_on_the_m4_fpu_matches_its_reference_bit_for_bit(tmp_path):
    # The M4's FPv4-SP unit rounds each operation to binary32 (IEEE 754), as the
    # numpy float32 reference does in the same order; -ffp-contract=off keeps
    # GCC from fusing the multiply-adds into VFMA, which rounds once.
    plan = _plan(32, seed=3)
    manifest, vectors, got = _run_on_m4(tmp_path, plan, "--arith", "float32")
    expected = Float32Estimator.from_mapping(manifest).evaluate(vectors).astype(np.float32).view(np.int32)
    assert got.shape == expected.shape
    assert np.array_equal(got, expected), _first_mismatch(vectors, expected, got)
