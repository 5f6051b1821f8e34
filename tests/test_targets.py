"""Targets: planning for a core, code shaped for its multiplier, measured and checked on it.

External references: arm-none-eabi-gcc 12 and its objdump (what instructions
the emitted C becomes), the unicorn engine's Cortex-M0 / M4 / M7 models
(executing that code instruction by instruction, against affix's integer
reference), the Arm ARMv7-M Architecture Reference Manual for what SMLAL and
SMLAD compute (from memory: signed 32x32 -> 64 plus a 64-bit accumulator;
two signed 16x16 products plus a 32-bit accumulator), the MicroPython unix
port and mpy-cross for the MicroPython target.
"""
from __future__ import annotations

import json
import re
import subprocess
from dataclasses import replace

import numpy as np
import pytest

from affix.emit.context import table_passes
from affix.emit.templates import render
from affix.emit.writer import emit
from affix.errors import ToolError, UsageError
from affix.model import Model
from affix.plan import Plan
from affix.quantize import plan_fixed_point
from affix.quantize.search import configurations
from affix.targets import TARGETS, get_target
from affix.targets.costs import cost_resolution, cost_table, evaluation_cost
from affix.targets.figures import EmulatedEstimator, measurement_vectors, target_figures
from affix.verify.vectors import vector_sets
from conftest import rehash, require, run_affix
from plans import random_plan

EMULATED = [name for name, t in TARGETS.items() if t.emulator not in (None, "simavr") and name != "host"]  # unicorn
PLANS = {  # widths, inputs and outputs that take each code shape: DSP pairs, SMLAL, narrow products, odd counts
    "16/32 int16 7x5": dict(seed=1, n_inputs=7, n_outputs=5, ranges="int16", coef_bits=16, acc_bits=32),
    "16/64 uint8 3x2": dict(seed=2, n_inputs=3, n_outputs=2, ranges="uint8", coef_bits=16, acc_bits=64,
                            output_ctype="int32_t"),
    "32/64 int16 6x4 saturating": dict(seed=3, n_inputs=6, n_outputs=4, ranges="int16", coef_bits=32, acc_bits=64,
                                       gain_scale=1e3),
    "8/32 uint16 5x3 floor": dict(seed=4, n_inputs=5, n_outputs=3, ranges="uint16", coef_bits=8, acc_bits=32,
                                  rounding="floor"),
    "32/32 int32 2x2": dict(seed=5, n_inputs=2, n_outputs=2, ranges="int32", coef_bits=32, acc_bits=32,
                            output_ctype="int32_t"),
    # On the M4 and M7, four outputs per pass, then the last three one by one.
    "32/64 int16 9x11 saturating": dict(seed=8, n_inputs=9, n_outputs=11, ranges="int16", coef_bits=32,
                                        acc_bits=64, gain_scale=1e3),
}


def _emit(tmp_path, plan, target, style="table", lang="c"):
    out = tmp_path / f"{target}-{style}-{lang}"
    manifest = emit(replace(plan, target=target), lang=lang, style=style, name="probe", out_dir=out)
    return out, manifest


@pytest.mark.parametrize("target", EMULATED)
@pytest.mark.parametrize("plan_kind", PLANS)
@pytest.mark.parametrize("style", ["table", "unrolled"])
def test_bit_exact_on_the_emulated_core(tmp_path, target, plan_kind, style):
    # Every corner (up to 2**7), random box points and points beyond the box
    # over the whole input type, run on the emulated core, against the reference.
    require(get_target(target).compiler)
    plan = random_plan(**PLANS[plan_kind])
    out, manifest = _emit(tmp_path, plan, target, style)
    sets = vector_sets(plan.input_ranges, plan.input_ctype, n_random=300, seed=9)
    y = np.vstack([sets["corners"].chunk(0), sets["random"].chunk(0), sets["beyond the box"].chunk(0)[:300]])
    (tmp_path / "work").mkdir()
    code = EmulatedEstimator(out, manifest, target, tmp_path / "work")
    got, _, _ = code.evaluate(y)
    expected = plan.integer_estimator().evaluate(y)
    bad = np.flatnonzero((got != expected).any(axis=1))
    assert bad.size == 0, (y[bad[:3]], got[bad[:3]], expected[bad[:3]])


@pytest.mark.parametrize("target", EMULATED)
@pytest.mark.parametrize("plan_kind", ["16/32 int16 7x5", "32/64 int16 9x11 saturating", "8/32 uint16 5x3 floor",
                                       "32/64 int16 6x4 saturating"])
def test_code_that_loads_records_is_bit_exact_on_the_emulated_core(tmp_path, target, plan_kind):
    # The record's estimator shares the table loop (four rows per pass on the M4 and M7; pairs through
    # SMLAD where the core has it): a unit's record, loaded by NAME_record_load() on the core, then run
    # over the box, against the reference with that record's integers (affix.record.decode); damaged
    # copies refused for the reference's reasons.  In the last plan the nominal unit's shifts are all
    # 32 or more and this unit's first is 31: both floors of a 64-bit sum.
    from affix.record import CODE, Contract, decode, encode

    require(get_target(target).compiler)
    nominal = random_plan(**PLANS[plan_kind])
    unit = random_plan(**{**PLANS[plan_kind], "seed": PLANS[plan_kind]["seed"] + 100})
    out = tmp_path / "record"
    manifest = emit(replace(nominal, target=target), lang="c", name="probe", out_dir=out, coefficients="record")
    contract = Contract.of(manifest)
    data = encode("SN-7", unit.coefficients, unit.offsets, unit.shifts, coef_bits=unit.coef_bits,
                  acc_bits=unit.acc_bits, interface_id=contract.interface_id, data_sha256=None)
    sets = vector_sets(nominal.input_ranges, nominal.input_ctype, n_random=200, seed=9)
    y = np.vstack([sets["corners"].chunk(0), sets["random"].chunk(0), sets["beyond the box"].chunk(0)[:200]])
    (tmp_path / "work").mkdir()
    code = EmulatedEstimator(out, manifest, target, tmp_path / "work")
    got, _, _ = code.evaluate(y, record=data)
    expected = decode(data, contract).integer_estimator(contract).evaluate(y)
    bad = np.flatnonzero((got != expected).any(axis=1))
    assert bad.size == 0, (y[bad[:3]], got[bad[:3]], expected[bad[:3]])
    flipped = [data[:k] + bytes([data[k] ^ 0x10]) + data[k + 1:] for k in (0, 8, len(data) // 2, len(data) - 1)]
    assert [code.load(d) for d in flipped] == [CODE["magic"], CODE["interface"], CODE["crc"], CODE["crc"]]


def test_instructions_are_counted_after_uncounted_calls_too(tmp_path):
    # The unicorn engine (2.1) skips a code hook in code it translated before the hook was added
    # (unicorn-engine/unicorn#2200); a record is loaded uncounted before the counted calls, so the
    # count after uncounted calls must equal a fresh one, on a helper both run (__aeabi_lmul).
    require("arm-none-eabi-gcc")
    plan = random_plan(seed=3, n_inputs=6, n_outputs=4, ranges="int16", coef_bits=32, acc_bits=64)
    out, manifest = _emit(tmp_path, plan, "cortex-m0plus")
    vectors = measurement_vectors(plan.input_ranges, 4)
    (tmp_path / "fresh").mkdir()
    (tmp_path / "warm").mkdir()
    fresh = EmulatedEstimator(out, manifest, "cortex-m0plus", tmp_path / "fresh")
    _, counted, _ = fresh.evaluate(vectors, count=True)
    warm = EmulatedEstimator(out, manifest, "cortex-m0plus", tmp_path / "warm")
    warm.evaluate(vectors)
    _, again, _ = warm.evaluate(vectors, count=True)
    assert again == counted and min(counted) > 100


def _disassembly(tmp_path, out, target) -> str:
    from affix.targets.toolchain import build_image

    require("arm-none-eabi-objdump")
    image = build_image(get_target(target), [out / "probe.c"], "probe_estimate", tmp_path, include_dirs=[out])
    return subprocess.run(["arm-none-eabi-objdump", "-d", str(image.elf)], capture_output=True, text=True,
                          check=True).stdout


def test_the_m4_gets_one_smlal_per_term_and_smlad_per_pair(tmp_path):
    require("arm-none-eabi-gcc")
    wide = random_plan(seed=6, n_inputs=7, n_outputs=3, ranges="int16", coef_bits=32, acc_bits=64)
    code = _disassembly(tmp_path, _emit(tmp_path, wide, "cortex-m4")[0], "cortex-m4")
    # The table style loops over outputs: its body holds one signed long multiply-accumulate per
    # input (SMLAL, the sum starting from the row's offset), and no 64 x 64 multiply.  The floor
    # of the sum is one arithmetic shift of its high word.
    assert len(re.findall(r"\bsmlal\b", code)) == 7 and "smull" not in code, code
    assert not re.search(r"\b(umull|umlal|mla)\b", code) and "__aeabi_lmul" not in code
    assert re.search(r"\basrs?(\.w)?\b", code), code
    # Eleven outputs: a loop of four outputs per pass (two passes) and one of single outputs
    # for the last three (a loop that ran once would be unrolled and its row folded into
    # constants), so 4 x 9 + 9 SMLAL in all.
    many = random_plan(seed=6, n_inputs=9, n_outputs=11, ranges="int16", coef_bits=32, acc_bits=64)
    code = _disassembly(tmp_path, _emit(tmp_path, many, "cortex-m4")[0], "cortex-m4")
    assert len(re.findall(r"\bsmlal\b", code)) == 4 * 9 + 9, code
    assert not re.search(r"\b(smull|umull|umlal|mla)\b", code) and "__aeabi_lmul" not in code
    # Unrolled, the constants are immediates: each coefficient goes in 16-bit halves through SMLALD,
    # two terms per instruction, high halves then low halves.
    code = _disassembly(tmp_path, _emit(tmp_path, wide, "cortex-m4", "unrolled")[0], "cortex-m4")
    assert len(re.findall(r"\bsmlald\b", code)) == 3 * 2 * 4, code
    assert not re.search(r"\b(umull|umlal|mla|smlal)\b", code) and "__aeabi_lmul" not in code
    narrow = random_plan(seed=6, n_inputs=7, n_outputs=3, ranges="int16", coef_bits=16, acc_bits=32)
    code = _disassembly(tmp_path, _emit(tmp_path, narrow, "cortex-m4")[0], "cortex-m4")
    # 7 inputs in 4 pairs (the last padded with 0): SMLAD adds each pair to the sum, which starts
    # from the row's offset.
    assert "smuad" not in code and len(re.findall(r"\bsmlad\b", code)) == 4, code
    code = _disassembly(tmp_path, _emit(tmp_path, narrow, "cortex-m0plus")[0], "cortex-m0plus")
    assert "smlad" not in code and "muls" in code  # the portable path on ARMv6-M


def test_every_table_loop_makes_two_passes_or_more():
    # A loop that runs once is no loop to a compiler: it unrolls it and folds the row into
    # constants (GCC 12 then multiplies 64 x 64 bits).  Every row is summed exactly once.
    for n_outputs in range(1, 40):
        for width in (1, 4):
            passes = table_passes(n_outputs, width)
            assert [row for p in passes for row in range(p["first"], p["end"])] == list(range(n_outputs))
            assert all((p["end"] - p["first"]) % p["outputs"] == 0 for p in passes)
            assert n_outputs == 1 or all((p["end"] - p["first"]) // p["outputs"] >= 2 for p in passes)
            singles = sum(p["end"] - p["first"] for p in passes if p["outputs"] == 1)
            if width == 4 and n_outputs >= 10:
                assert singles in (0, 2, 3, 5), passes  # as many rows four by four as that allows


@pytest.mark.parametrize("plan_kind,style", [("16/32 int16 7x5", "table"), ("16/32 int16 7x5", "unrolled"),
                                             ("16/64 uint8 3x2", "table"), ("16/64 uint8 3x2", "unrolled"),
                                             ("32/64 int16 6x4 saturating", "unrolled"),
                                             ("16/32 int16 7x5", "record"), ("16/64 uint8 3x2", "record")])
def test_the_dsp_paths_build_cleanly_as_c99_and_cxx11(tmp_path, plan_kind, style):
    # The code under __ARM_FEATURE_DSP only compiles where the core has it: the
    # strict warning set as errors (tests/test_emit_c.py), for the M4, in C99 and C++11;
    # "record": table-style code that loads records, whose loader packs the pairs.
    from test_emit_c import C_FLAGS, CXX_FLAGS, STRICTER

    plan = random_plan(**PLANS[plan_kind])
    out = tmp_path / style
    emit(replace(plan, target="cortex-m4"), lang="c", style="table" if style == "record" else style, name="probe",
         out_dir=out, coefficients="record" if style == "record" else "compiled")
    source = (out / "probe.c").read_text()
    assert "__smlald(" in source or "__smlad(" in source or "__smuad(" in source
    cpu = ["-mcpu=cortex-m4", "-mthumb", "-O2", "-DPROBE_SELFTEST", "-c", str(out / "probe.c"), "-o",
           str(tmp_path / "probe.o")]
    for compiler, flags in (("arm-none-eabi-gcc", C_FLAGS + STRICTER), ("arm-none-eabi-g++", CXX_FLAGS)):
        done = subprocess.run([require(compiler), *flags, *cpu], capture_output=True, text=True)
        assert done.returncode == 0, done.stderr


def test_the_m0plus_avoids_the_64_bit_multiply_call_where_products_fit_32_bits(tmp_path):
    require("arm-none-eabi-gcc")
    # 16-bit coefficients times 16-bit inputs fit int32_t: only their sum needs 64 bits.
    plan = random_plan(seed=7, n_inputs=4, n_outputs=2, ranges="int16", coef_bits=16, acc_bits=64)
    assert "__aeabi_lmul" not in _disassembly(tmp_path, _emit(tmp_path, plan, "cortex-m0plus")[0], "cortex-m0plus")
    # 32-bit coefficients times 16-bit inputs do not: there the call is the only way on ARMv6-M.
    plan = random_plan(seed=7, n_inputs=4, n_outputs=2, ranges="int16", coef_bits=32, acc_bits=64)
    assert "__aeabi_lmul" in _disassembly(tmp_path, _emit(tmp_path, plan, "cortex-m0plus")[0], "cortex-m0plus")


def test_verify_runs_the_c_on_the_plans_core_and_catches_what_only_it_gets_wrong(tmp_path):
    require("arm-none-eabi-gcc")
    require("gcc")
    from affix.errors import VerificationError
    from affix.verify.check import verify

    plan = random_plan(**PLANS["16/32 int16 7x5"])
    out, _ = _emit(tmp_path, plan, "cortex-m0plus")
    report = verify(out, vectors=2000, cache_dir=tmp_path / "cache")
    on_core = [r for r in report.results if "emulated cortex-m0plus" in r.artefact]
    assert len(on_core) == 3 and all(r.count > 0 and r.mismatches == 0 for r in on_core)
    # Wrong only where __arm__ is defined: the host build passes, the emulated core must not.
    source = (out / "probe.c").read_text()
    marker = "\n}\n\n#ifdef PROBE_SELFTEST"
    assert marker in source
    (out / "probe.c").write_text(source.replace(marker, "\n#if defined(__arm__)\n    x[0] ^= 1;\n#endif" + marker))
    rehash(out / "probe.manifest.json")  # as a faulty emitter would: the fault must be found by running the code
    with pytest.raises(VerificationError) as caught:
        verify(out, vectors=2000, cache_dir=tmp_path / "cache")
    bad = [r for r in caught.value.report.results if r.mismatches]
    assert bad and all("emulated cortex-m0plus" in r.artefact for r in bad)


def test_verify_without_the_cross_compiler_checks_the_rest_and_says_what_it_left_out(tmp_path, monkeypatch):
    import os
    import shutil

    from affix.verify.check import verify

    gcc = require("gcc")
    out, _ = _emit(tmp_path, random_plan(1), "cortex-m4")
    tools = tmp_path / "bin"  # the host compiler and its assembler and linker, no cross compiler
    tools.mkdir()
    for name in ("gcc", "cc", "as", "ld"):
        os.symlink(shutil.which(name) or gcc, tools / name)
    monkeypatch.setenv("PATH", str(tools))
    report = verify(out, vectors=1000, cache_dir=tmp_path / "cache")
    assert report.passed and not any("emulated" in r.artefact for r in report.results)
    assert any("not run on the emulated cortex-m4" in n and "arm-none-eabi-gcc" in n for n in report.notes)


def test_target_figures_are_measured_on_the_core(tmp_path):
    require("arm-none-eabi-gcc")
    plan = random_plan(**PLANS["16/32 int16 7x5"])
    m4 = target_figures(_emit(tmp_path, plan, "cortex-m4")[0], "cortex-m4")
    m0 = target_figures(_emit(tmp_path, plan, "cortex-m0plus")[0], "cortex-m0plus")
    for figures in (m4, m0):
        assert figures["flash_bytes"] > 0 and figures["stack_bytes"] >= 0
        assert figures["instructions_max"] >= figures["instructions_per_evaluation"] > 35  # at least one per MAC
    # Dual multiply-accumulates: the M4 needs far fewer instructions than the M0+ on the same plan.
    assert m4["instructions_per_evaluation"] < 0.6 * m0["instructions_per_evaluation"]
    assert json.loads(json.dumps(m4)) == m4  # plain data, as build.json stores it


def test_avr_cycles_are_counted_in_simavr(tmp_path):
    # A 64-bit sum on the AVR: products formed in 32 bits where the box allows
    # (planned for the avr) against 64-bit products (planned for the host).
    require("avr-gcc")
    require("simavr")
    plan = random_plan(seed=3, n_inputs=7, n_outputs=6, ranges="int16", coef_bits=16, acc_bits=64)
    avr = target_figures(_emit(tmp_path, plan, "avr")[0], "avr")
    host_shaped = target_figures(_emit(tmp_path, plan, "host")[0], "avr")
    assert avr["instructions_per_evaluation"] is None and avr["flash_bytes"] > 0
    assert 42 < avr["cycles_per_evaluation"] < 0.6 * host_shaped["cycles_per_evaluation"]


def test_a_missing_cross_compiler_is_one_line_and_exit_status_4(tmp_path, monkeypatch):
    out, _ = _emit(tmp_path, random_plan(1), "cortex-m4")
    monkeypatch.setenv("PATH", str(tmp_path / "empty"))
    with pytest.raises(ToolError) as caught:
        target_figures(out, "cortex-m4")
    assert caught.value.exit_code == 4 and "arm-none-eabi-gcc" in caught.value.message
    assert "\n" not in caught.value.format_message()


def test_the_cost_file_says_how_it_was_measured_and_fits_its_measurements():
    table = cost_table()
    assert "unicorn" in table["how"] and "measure_target_costs.py" in table["how"]
    assert "simavr" in table["how"] and table["targets"]["avr"]["unit"] == "cycles"
    for target in ("host", "cortex-m0plus", "cortex-m4", "cortex-m7", "avr"):
        for widths, entry in table["targets"][target]["configurations"].items():
            coef_bits, acc_bits = map(int, widths.split("/"))
            for n_out, n_in, counted in entry["measured"]:
                predicted = evaluation_cost(target, coef_bits, acc_bits, n_in, n_out)
                assert abs(predicted - counted) <= 0.2 * counted + 5, (target, widths, n_out, n_in)


def _model(rng, m=5, n=3):
    rows = rng.integers(0, 4096, size=(2000, m)).astype(float)
    return Model(inputs=[f"y{j}" for j in range(m)], outputs=[f"x{i}" for i in range(n)],
                 gain=rng.normal(size=(n, m)) * 1e-2, offset=rng.normal(size=n), cv_rms=np.full(n, 1e-3),
                 n_samples=len(rows), input_mean=rows.mean(axis=0), input_covariance=np.cov(rows, rowvar=False))


def test_the_search_takes_the_cheapest_configuration_on_the_target():
    model = _model(np.random.default_rng(3))
    for target in ("cortex-m0plus", "cortex-m4"):
        plans = []
        for coef_bits in (8, 16, 32):
            for acc_bits in (32, 64):
                plans.append(plan_fixed_point(model, (0, 4095), coef_bits=coef_bits, acc_bits=acc_bits,
                                              output_ctype="int32_t", target=target, box_points=100))
        limit = sorted(max(p.worst_case_deviation) for p in plans)[2]
        meeting = [p for p in plans if max(p.worst_case_deviation) <= limit]
        cost = {(p.coef_bits, p.acc_bits): evaluation_cost(target, p.coef_bits, p.acc_bits, 5, 3) for p in plans}
        chosen = plan_fixed_point(model, (0, 4095), budget=limit, output_ctype="int32_t", target=target,
                                  box_points=100)
        # The cheapest that meets the budget, up to what the model can tell apart; among those, the narrowest.
        margin = 1 + cost_resolution(target)
        cheapest = min(cost[p.coef_bits, p.acc_bits] for p in meeting)
        assert cost[chosen.coef_bits, chosen.acc_bits] <= cheapest * margin
        assert all((chosen.coef_bits, chosen.acc_bits) <= (p.coef_bits, p.acc_bits) for p in meeting
                   if cost[p.coef_bits, p.acc_bits] <= cheapest * margin)
        assert chosen.target == target


def test_costs_the_model_cannot_tell_apart_are_ties_taken_narrowest_first():
    # On the M4 with 16-bit inputs, 8- and 16-bit coefficients with a 32-bit sum are the same code
    # (pairs through SMLAD); their fits differ by less than the fits' own error, so 8 bits comes first.
    resolution = cost_resolution("cortex-m4")
    assert 0 < resolution < 0.2
    cost8, cost16 = (evaluation_cost("cortex-m4", bits, 32, 5, 3) for bits in (8, 16))
    assert abs(cost8 - cost16) <= resolution * min(cost8, cost16)
    order = [c.widths[:2] for c in configurations(acc_bits=32, output_ctype="int16_t", target="cortex-m4",
                                                  n_inputs=5, n_outputs=3)]
    assert order[:2] == [(8, 32), (16, 32)]
    # Where the model does tell them apart, the cheaper comes first whatever its widths: on the M0+
    # at 16 x 16, 32-bit coefficients with a 32-bit sum (measured 1190 instructions against 1446 for
    # 8-bit ones) first.
    order = [c.widths[:2] for c in configurations(output_ctype="int16_t", target="cortex-m0plus",
                                                  n_inputs=16, n_outputs=16)]
    assert order[0] == (32, 32) and order.index((8, 32)) < order.index((8, 64))
    # Far from its measured shapes a fit may predict fewer than zero instructions (the host at one output of
    # four inputs); every configuration is still tried.
    for target in TARGETS:
        assert len(configurations(target=target, n_inputs=4, n_outputs=1)) == 6 * len(TARGETS[target].accumulator_widths)


def test_a_forced_wider_configuration_names_the_output_and_its_miss():
    model = _model(np.random.default_rng(4))
    cheap = plan_fixed_point(model, (0, 4095), coef_bits=8, acc_bits=32, output_ctype="int16_t",
                             target="cortex-m4", box_points=100)
    worst = list(cheap.worst_case_deviation)
    k = int(np.argmax(worst))
    limits = {name: 10 * w for name, w in zip(model.outputs, worst)}
    limits[model.outputs[k]] = worst[k] / 1.002  # one output misses by 0.2 %
    plan = plan_fixed_point(model, (0, 4095), budget=limits, acc_bits=32, output_ctype="int16_t",
                            target="cortex-m4", box_points=100)
    assert (plan.coef_bits, plan.acc_bits) != (8, 32)
    passed = plan.budget["passed_over"]
    missed = {m["output"]: m for m in passed["missed"]}
    assert (passed["coef_bits"], passed["acc_bits"]) == (8, 32) and list(missed) == [model.outputs[k]]
    assert missed[model.outputs[k]]["excess_percent"] == pytest.approx(0.2, rel=1e-6)


def test_the_micropython_target_keeps_every_value_a_small_int(tmp_path):
    from affix.emit.micropython import viper_fits

    model = _model(np.random.default_rng(5))
    plan = plan_fixed_point(model, (0, 65535), target="micropython", box_points=100)
    assert max(plan.accumulator_bound) < 2**30 and viper_fits(plan.integer_estimator())
    with pytest.raises(UsageError, match="acc_bits"):
        plan_fixed_point(model, (0, 65535), acc_bits=64, target="micropython", box_points=100)
    with pytest.raises(UsageError, match="input_ranges"):
        plan_fixed_point(model, (0, 2**31 - 1), target="micropython", box_points=100)


@pytest.mark.parametrize("target,march", [("cortex-m0plus", "armv6m"), ("cortex-m4", "armv7emsp"),
                                          ("micropython", "armv7emsp")])
def test_mpy_cross_compiles_the_viper_variant_for_the_core(tmp_path, target, march):
    from affix.verify.micropython_run import cross_compile

    require("mpy-cross")
    assert get_target(target).mpy_march == march
    plan = random_plan(seed=8, n_inputs=4, n_outputs=3, ranges="uint16", fill=0.2)
    out, _ = _emit(tmp_path, plan, target, lang="micropython")
    assert "def estimate_into_viper" in (out / "probe.py").read_text()
    assert cross_compile(out / "probe.py", march=march, out=tmp_path / "probe.mpy").stat().st_size > 0


def test_micropython_takes_an_adc_buffer_without_allocating(tmp_path):
    # array('H') is what a DMA buffer of 16-bit ADC samples and ADC.read_u16()
    # (0..65535, MicroPython's machine.ADC documentation) hand the module.
    from affix.verify.micropython_run import run_micropython

    require("micropython")
    plan = random_plan(seed=9, n_inputs=4, n_outputs=3, ranges="uint16", fill=0.2)
    out, _ = _emit(tmp_path, plan, "micropython", lang="micropython")
    y = np.random.default_rng(0).integers(0, 65536, size=(2000, 4))
    y[0], y[1] = 0, 65535
    for variant in ("plain", "viper"):
        got = run_micropython(out / "probe.py", y, variant=variant, check_alloc=True, input_typecode="H")
        np.testing.assert_array_equal(got, plan.integer_estimator().evaluate(y))


def test_an_unsigned_adc_box_takes_the_dma_buffers_type(tmp_path):
    # A 12-bit ADC's samples sit in a uint16_t buffer; passing it must build under -Werror.
    gcc = require("gcc")
    model = _model(np.random.default_rng(6))
    plan = plan_fixed_point(model, (0, 4095), box_points=100)
    assert plan.input_ctype == "uint16_t"
    out, manifest = _emit(tmp_path, plan, "host")
    assert manifest["input_ctype"] == "uint16_t" and manifest["target"] == "host"
    header = (out / "probe.h").read_text()
    assert "void probe_estimate(const uint16_t y[PROBE_N_INPUTS]" in header
    # No clamp against 0: the box starts at the type's own limit.
    assert not re.search(r"if \(v\d+ < UINT16_C\(0\)\)", (out / "probe.c").read_text())
    caller = tmp_path / "caller.c"
    caller.write_text(render("c/dma_caller.c.jinja", name="probe", buffer_ctype="uint16_t",
                             output_ctype=manifest["output_ctype"]))
    done = subprocess.run([gcc, "-std=c99", "-Wall", "-Wextra", "-Werror", f"-I{out}", "-c", str(caller),
                           "-o", str(tmp_path / "caller.o")], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr


def test_input_type_option_and_its_errors(tmp_path):
    model = _model(np.random.default_rng(7))
    model.save(tmp_path / "model.json")
    done = run_affix("quantize", tmp_path / "model.json", "--range", "0:4095", "--input-type", "int32_t",
                     "--target", "cortex-m0plus", "--out", tmp_path / "plan.json")
    assert done.returncode == 0, done.stderr
    plan = Plan.load(tmp_path / "plan.json")
    assert plan.input_ctype == "int32_t" and plan.target == "cortex-m0plus"
    assert "target cortex-m0plus: int32_t inputs" in done.stdout
    done = run_affix("quantize", tmp_path / "model.json", "--range", "0:4095", "--input-type", "uint8_t",
                     "--out", tmp_path / "bad.json")
    assert done.returncode == 2 and done.stderr.startswith("affix: error:") and "uint8_t" in done.stderr
    assert not (tmp_path / "bad.json").exists()
    # A plan file whose input type cannot hold its box is refused where it is read.
    data = json.loads((tmp_path / "plan.json").read_text())
    data["input_ctype"] = "int8_t"
    (tmp_path / "tampered.json").write_text(json.dumps(data))
    done = run_affix("emit", tmp_path / "tampered.json", "--lang", "c", "--name", "probe", "--out", tmp_path / "o")
    assert done.returncode == 2 and "input_ctype" in done.stderr


def test_measurement_vectors_stay_in_the_box():
    y = measurement_vectors([(-5, 5), (0, 9)], count=20, seed=1)
    assert y.shape == (20, 2) and (y >= [-5, 0]).all() and (y <= [5, 9]).all()
