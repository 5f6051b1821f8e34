"""The emitted C under GCC's UndefinedBehaviorSanitizer and AddressSanitizer.

Every corner of the input box and vectors over the whole input type (beyond
the box) run with -fsanitize=undefined,address -fno-sanitize-recover=all, so
any signed overflow, oversized or negative shift, misaligned or out-of-bounds
access (C99 §6.5p5, §6.5.7p3, §6.5.6p8) aborts the run; the outputs must also
equal the integer reference.  -fsanitize=float-cast-overflow joins for the
float32 variant (C99 §6.3.1.4).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from affix.arithmetic import IntegerEstimator
from affix.emit.writer import emit
from affix.float32_arithmetic import Float32Estimator
from affix.verify.c_build import build_driver, run_driver
from affix.verify.vectors import vector_sets
from conftest import require
from plans import random_plan

SANITIZE = ("-fsanitize=undefined,address", "-fno-sanitize-recover=all", "-fno-omit-frame-pointer", "-g")

EXTREME_PLANS = {
    # accumulators filled to 99.9 % of their range, the box at the type limits
    "int32 box, acc64, saturating int16": dict(ranges="int32", coef_bits=32, acc_bits=64, gain_scale=1e6, fill=0.999),
    "uint32 box, acc64, int32 out": dict(ranges="uint32", coef_bits=32, acc_bits=64, output_ctype="int32_t", fill=0.999),
    "int16 box, acc32, floor, tiny gain": dict(ranges="int16", coef_bits=16, acc_bits=32, rounding="floor",
                                               gain_scale=1e-9, fill=0.999),
    "uint8 box, acc32, 8-bit coefficients": dict(ranges="uint8", coef_bits=8, acc_bits=32, fill=0.999),
    "int8 box, acc32, huge gain": dict(ranges="int8", coef_bits=16, acc_bits=32, gain_scale=1e9, fill=0.999),
}


@pytest.mark.parametrize("plan_kind", EXTREME_PLANS)
@pytest.mark.parametrize("arith,style,target", [("int", "table", "host"), ("int", "unrolled", "host"),
                                               ("int", "table", "avr"), ("int", "unrolled", "avr"),
                                               ("int", "table", "cortex-m4"), ("int", "table", "cortex-m0plus"),
                                               ("float32", "table", "host")])
def test_no_undefined_behaviour_for_any_corner_or_out_of_box_input(tmp_path, plan_kind, arith, style, target):
    # Planned for the AVR, terms whose box bound fits 32 bits multiply in int32_t:
    # a product that overflowed there would be undefined (C99 §6.5p5), and UBSan would stop.
    # Planned for the M4 (its portable path here), the table sums four outputs per pass and
    # the last two one by one; for the M0+, the sums are taken modulo 2^N.
    require("gcc")
    plan = replace(random_plan(11, 5, 10, **EXTREME_PLANS[plan_kind]), target=target)
    manifest = emit(plan, lang="c", arith=arith, style=style, name="probe", out_dir=tmp_path / "emitted")
    extra = SANITIZE + (("-fsanitize=float-cast-overflow",) if arith == "float32" else ())
    exe = build_driver(tmp_path / "emitted", manifest, tmp_path, extra_flags=extra)
    sets = vector_sets(plan.input_ranges, manifest["input_ctype"], n_random=4096, seed=3)
    y = np.vstack([sets["corners"].chunk(0), sets["beyond the box"].chunk(0)])
    got = run_driver(exe, manifest, y)  # a sanitizer report exits non-zero: ToolError with its text
    if arith == "float32":
        expected = Float32Estimator.from_mapping(manifest).evaluate(y)
        assert np.array_equal(got.view(np.uint32), expected.view(np.uint32))
    else:
        expected = IntegerEstimator.from_mapping(manifest).evaluate(y)
        assert np.array_equal(got, expected)


def test_the_sanitizer_is_really_on(tmp_path):
    # A check that cannot fail is a defect: tamper the floor shift into a
    # plain shift by the accumulator width (undefined, C99 §6.5.7p3) and make
    # sure the sanitized run aborts.
    require("gcc")
    from affix.errors import ToolError

    plan = random_plan(11, 2, 1, ranges="int16")
    manifest = emit(plan, lang="c", name="probe", out_dir=tmp_path / "emitted")
    source = tmp_path / "emitted" / "probe.c"
    text = source.read_text()
    marker = "    return v < 0 ? -1 - ((-1 - v) >> s) : v >> s;"
    assert marker in text
    source.write_text(text.replace(marker, "    s += 32u;\n" + marker))
    exe = build_driver(tmp_path / "emitted", manifest, tmp_path, extra_flags=SANITIZE)
    with pytest.raises(ToolError, match="shift"):
        run_driver(exe, manifest, np.zeros((1, 2), dtype=np.int64))
