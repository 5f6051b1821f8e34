"""Property test: random valid plans, emitted in both languages and both C
styles, verified with zero mismatches.

hypothesis draws the plan space the issue names: 1 to 12 inputs and
outputs, signed and unsigned ranges of every input type, 8/16/32-bit
coefficients, 32/64-bit accumulators, both roundings, both output types and
gains from tiny to huge, planned for the host or a core whose code shape
differs (32-bit products on the M0+ and AVR, dual multiply-accumulates on
the M4, whose C verify also runs on the emulated core); the float32 variant
is checked bit for bit too.  The C runs against Python's exact integers via the
integer reference; the MicroPython code runs in the real MicroPython unix port.
"""
from __future__ import annotations

import tempfile
from dataclasses import replace
from pathlib import Path

from hypothesis import HealthCheck, given, settings, strategies as st

from affix.emit.writer import emit
from affix.verify.check import verify
from conftest import require
from plans import RANGE_KINDS, random_plan

plan_options = st.fixed_dictionaries(
    {
        "seed": st.integers(0, 2**32 - 1),
        "n_inputs": st.integers(1, 12),
        "n_outputs": st.integers(1, 12),
        "ranges": st.sampled_from(sorted(RANGE_KINDS)),
        "coef_bits": st.sampled_from([8, 16, 32]),
        "acc_bits": st.sampled_from([32, 64]),
        "output_ctype": st.sampled_from(["int16_t", "int32_t"]),
        "rounding": st.sampled_from(["nearest", "floor"]),
        "gain_scale": st.sampled_from([1e-9, 1e-3, 1.0, 1e3, 1e9]),
        "fill": st.sampled_from([0.5, 0.999]),
        "target": st.sampled_from(["host", "cortex-m0plus", "cortex-m4", "avr"]),
    }
)


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(options=plan_options)
def test_random_plans_verify_in_every_target(options):
    require("gcc")
    require("micropython")
    require("mpy-cross")
    seed, target = options.pop("seed"), options.pop("target")
    plan = replace(random_plan(seed, **options), target=target)
    if target.startswith("cortex"):
        require("arm-none-eabi-gcc")
    with tempfile.TemporaryDirectory() as tmp:
        for lang, arith, style in (("all", "int", "table"), ("c", "int", "unrolled"), ("c", "float32", "unrolled")):
            out = Path(tmp) / f"{arith}-{style}"
            emit(plan, lang=lang, arith=arith, style=style, name="prop", out_dir=out)
            # verify raises VerificationError on any mismatch: that is the check; here, that it ran everything.
            report = verify(out, vectors=2000, seed=seed, micropython_vectors=300)
            languages = {r.artefact.split()[0] for r in report.results}
            assert languages == ({"C", "MicroPython"} if lang == "all" else {"C"})
            assert report.evaluations >= 2000
