"""The C target: what the files contain, that they compile cleanly as C99 and
C++11 on hosts and MCU targets, and that the built-in self-test works.

Sources: the C99 standard (ISO/IEC 9899:1999) for the rules the code relies
on, GCC as the reference compiler for its diagnostics (-Wconversion etc.),
arm-none-eabi-gcc (32-bit int, Cortex-M) and avr-gcc (16-bit int: C99
§5.2.4.2.1 only guarantees int >= 16 bits) as real MCU compilers.
"""
from __future__ import annotations

import json
import re
import subprocess
from dataclasses import replace

import pytest

from affix.emit.c import render_c
from affix.emit.context import CAUTION
from affix.emit.writer import emit
from affix.errors import FileFormatError, UsageError
from affix.verify.c_build import build_driver, run_selftest
from conftest import require, run_affix
from plans import random_plan

C_FLAGS = ["-std=c99", "-Wall", "-Wextra", "-Wpedantic", "-Wconversion", "-Wsign-conversion", "-Werror"]
# Beyond the required set, what embedded coding rules commonly add (common practice).
STRICTER = ["-Wshadow", "-Wcast-qual", "-Wstrict-prototypes", "-Wmissing-prototypes", "-Wundef", "-Wdouble-promotion",
            "-Wcast-align", "-Wredundant-decls"]
CXX_FLAGS = ["-x", "c++", "-std=c++11", "-Wall", "-Wextra", "-Werror"]

PLANS = {  # a spread of types: signed/unsigned inputs, 8..32-bit coefficients, 32/64-bit accumulators
    "int16-in int16-out acc32": dict(ranges="int16", coef_bits=16, acc_bits=32),
    "uint8-in int32-out acc32": dict(ranges="uint8", coef_bits=8, acc_bits=32, output_ctype="int32_t"),
    "uint32-in int16-out acc64 saturating": dict(ranges="uint32", coef_bits=32, acc_bits=64, gain_scale=1e4),
    "int32-in int32-out acc64 floor": dict(ranges="int32", coef_bits=16, acc_bits=64, output_ctype="int32_t",
                                           rounding="floor"),
    "int8-in tiny gain": dict(ranges="int8", coef_bits=8, acc_bits=32, gain_scale=1e-6),
    "int16-in int32-out acc64": dict(ranges="int16", coef_bits=16, acc_bits=64, output_ctype="int32_t"),
    "uint8-in int32-out acc64 unshifted": dict(ranges="uint8", coef_bits=8, acc_bits=64, output_ctype="int32_t",
                                               gain_scale=1e12),
}
VARIANTS = [("int", "table"), ("int", "unrolled"), ("float32", "table"), ("float32", "unrolled")]


def _emit(tmp_path, plan_kind, arith, style, name="probe", target="host", coefficients="compiled"):
    plan = replace(random_plan(7, 4, 3, **PLANS[plan_kind]), target=target)
    out = tmp_path / f"{arith}-{style}"
    manifest = emit(plan, lang="c", arith=arith, style=style, name=name, out_dir=out, coefficients=coefficients)
    return plan, out, manifest


def _compile(compiler, flags, source, tmp_path, *extra):
    done = subprocess.run(
        [compiler, *flags, *extra, "-c", str(source), "-o", str(tmp_path / "probe.o")],
        capture_output=True, text=True,
    )
    assert done.returncode == 0, done.stderr


@pytest.mark.parametrize("plan_kind", PLANS)
@pytest.mark.parametrize("arith,style", VARIANTS)
def test_compiles_cleanly_as_c99_and_cxx11(tmp_path, plan_kind, arith, style):
    gcc, gxx = require("gcc"), require("g++")
    _, out, _ = _emit(tmp_path, plan_kind, arith, style)
    for level in ("-O0", "-O2"):
        _compile(gcc, C_FLAGS + STRICTER, out / "probe.c", tmp_path, level, "-DPROBE_SELFTEST")
        _compile(gxx, CXX_FLAGS, out / "probe.c", tmp_path, level, "-DPROBE_SELFTEST")


@pytest.mark.parametrize("arith,style", VARIANTS)
def test_compiles_cleanly_for_cortex_m(tmp_path, arith, style):
    # 32-bit int, 64-bit accumulators through libgcc; float through the FPU or soft float.
    cc = require("arm-none-eabi-gcc")
    for plan_kind in ("int16-in int16-out acc32", "uint32-in int16-out acc64 saturating"):
        _, out, _ = _emit(tmp_path, plan_kind, arith, style)
        for cpu in (["-mcpu=cortex-m0", "-mthumb"], ["-mcpu=cortex-m4", "-mthumb", "-mfloat-abi=hard", "-mfpu=fpv4-sp-d16"]):
            _compile(cc, C_FLAGS, out / "probe.c", tmp_path, "-O2", "-ffreestanding", "-DPROBE_SELFTEST", *cpu)


@pytest.mark.parametrize("target", ["cortex-m4", "cortex-m0plus", "avr"])
@pytest.mark.parametrize("style", ["table", "unrolled"])
def test_every_targets_code_shape_compiles_cleanly(tmp_path, target, style):
    # The shapes a target's code takes: four outputs per pass and the rest one by one (the M4;
    # on the host its portable path), sums modulo 2^N (the M0+), 64-bit floors through a bias
    # (the AVR); as strict C99 and C++11 on the host, and as C99 for the core itself.
    from affix.targets import get_target

    gcc, gxx = require("gcc"), require("g++")
    core = get_target(target)
    cross = require(core.compiler)
    for plan_kind in PLANS:
        plan = replace(random_plan(7, 4, 10, **PLANS[plan_kind]), target=target)
        out = tmp_path / plan_kind.replace(" ", "-")
        emit(plan, lang="c", style=style, name="probe", out_dir=out)
        _compile(gcc, C_FLAGS + STRICTER, out / "probe.c", tmp_path, "-O2", "-DPROBE_SELFTEST")
        _compile(gxx, CXX_FLAGS, out / "probe.c", tmp_path, "-O2", "-DPROBE_SELFTEST")
        _compile(cross, C_FLAGS, out / "probe.c", tmp_path, "-O2", "-DPROBE_SELFTEST", *core.cpu_flags)


@pytest.mark.parametrize("style", ["table", "unrolled"])
def test_compiles_cleanly_where_int_is_16_bits(tmp_path, style):
    # avr-gcc: int is 16 bits, so any product not widened to the accumulator
    # first, or any implicit narrowing, shows up as a -Wconversion error.
    cc = require("avr-gcc")
    for plan_kind in PLANS:
        _, out, _ = _emit(tmp_path, plan_kind, "int", style)
        _compile(cc, C_FLAGS, out / "probe.c", tmp_path, "-mmcu=atmega328p", "-O2", "-DPROBE_SELFTEST")


@pytest.mark.parametrize("arith,style", VARIANTS)
def test_selftest_passes_and_catches_a_wrong_constant(tmp_path, arith, style):
    require("gcc")
    _, out, manifest = _emit(tmp_path, "int16-in int16-out acc32", arith, style)
    exe = build_driver(out, manifest, tmp_path, selftest=True)
    assert run_selftest(exe) == 0

    source = (out / "probe.c").read_text()
    # Change the first constant of the first output's sum: the self-test must notice.
    if arith == "float32":
        tampered = re.sub(r"(-?\d\.\d*e[+-]\d\d)f", lambda m: f"{float(m.group(1)) * 1.5:.8e}f", source, count=1)
    else:
        pattern = (r"probe_rows\[PROBE_N_OUTPUTS\] = \{\s*\{ \(?-?INT32_C\(\d+\)(?: - 1\))?, \d+u, \{ (-?\d+)"
                   if style == "table" else r"acc \+= \(int32_t\)INT32_C\((-?\d+)\)")
        match = re.search(pattern, source, re.S)
        number = match.group(match.lastindex)
        start = match.start(match.lastindex)
        tampered = source[:start] + str(int(number) // 2 + 77) + source[start + len(number):]  # stays in range
    assert tampered != source
    (out / "probe.c").write_text(tampered)
    exe = build_driver(out, manifest, tmp_path, selftest=True)
    assert run_selftest(exe) > 0


def test_int_header_states_the_contract(tmp_path):
    plan, out, _ = _emit(tmp_path, "int16-in int16-out acc32", "int", "table")
    header = (out / "probe.h").read_text()
    assert header.startswith("/* probe.h")
    usage = header.index("USAGE")
    assert usage < header.index("CAUTION") < header.index("WHAT IT COMPUTES") < header.index("#ifndef PROBE_H")
    flat = " ".join(header.replace(" * ", " ").split())
    for sentence in CAUTION:
        assert " ".join(sentence.split()) in flat
    assert plan.model_sha256 in header and plan.sha256 in header and plan.tool_version in header
    assert "C99 §6.5.7" in header  # the implementation-defined right shift is named and avoided
    assert 'extern "C" {' in header
    for i, lsb in enumerate(plan.output_lsb):
        assert f"[{i}] x{i}: LSB {lsb:.9g} (Q7.8)" in header  # lsb 2**-8 in int16_t is Q7.8
    for j, (lo, hi) in enumerate(plan.input_ranges):
        assert f"[{j}] y{j}: {lo} .. {hi}" in header


@pytest.mark.parametrize("arith,style", VARIANTS)
def test_only_freestanding_headers_and_no_float_in_int_code(tmp_path, arith, style):
    _, out, _ = _emit(tmp_path, "uint32-in int16-out acc64 saturating", arith, style)
    for filename in ("probe.h", "probe.c"):
        text = (out / filename).read_text()
        code = re.sub(r"/\*.*?\*/", "", text, flags=re.S)  # comments may name anything
        selftest_free = code.split("#ifdef PROBE_SELFTEST")[0]
        includes = re.findall(r"#include\s*(\S+)", code)
        allowed = {'"probe.h"', "<stdint.h>"} | ({"<float.h>"} if arith == "float32" else set())
        assert includes and set(includes) <= allowed, includes
        for word in ("malloc", "free", "printf", "math.h", "double", "static int", "volatile"):
            assert not re.search(rf"\b{re.escape(word)}\b", selftest_free), word
        if arith == "int":
            assert not re.search(r"\bfloat\b", code)
            # The scales are double constants for the caller; affix's own code never expands them.
            scales = re.findall(r"^#define (PROBE_lsb_\w+) ", code, flags=re.M)
            assert len(scales) == (3 if filename == "probe.h" else 0)
            assert not any(re.search(rf"\b{s}\b", code.split(s, 1)[1]) for s in scales)
            computing = re.sub(r"^#define PROBE_lsb_.*$", "", code, flags=re.M)
            assert not re.search(r"\d\.\d|\de[+-]\d", computing)  # no floating constants either
        if style == "unrolled" and filename == "probe.c":
            assert "static const" not in selftest_free  # immediates, no tables


def test_table_style_uses_static_const_tables(tmp_path):
    plan, out, _ = _emit(tmp_path, "int16-in int16-out acc32", "int", "table")
    source = (out / "probe.c").read_text()
    assert re.search(r"static const struct probe_row probe_rows\[PROBE_N_OUTPUTS\]", source)
    assert "int16_t coef[PROBE_N_INPUTS];" in source
    # Each row starts its sum at c + r: offset and rounding constant in one.
    first = plan.offsets[0] + (1 << (plan.shifts[0] - 1) if plan.shifts[0] else 0)
    assert f"{{ INT32_C({first}), {plan.shifts[0]}u, {{ {plan.coefficients[0][0]}," in source


def test_most_negative_constants_are_spelt_safely(tmp_path):
    # C99 §6.4.4.1: -2147483648 is minus applied to a constant too big for
    # int32_t's type; the emitter writes (-2147483647 - 1).
    plan = random_plan(5, 2, 1, ranges="int32", coef_bits=32, acc_bits=64, output_ctype="int32_t")
    plan = type(plan)(**{**plan.__dict__, "input_ranges": ((-(2**31), 2**31 - 1), plan.input_ranges[1]),
                         "coefficients": ((1, 0),), "offsets": (0,), "shifts": (0,), "gain": ((1.0, 0.0),)})
    plan.validate()
    for style in ("table", "unrolled"):
        source = render_c(plan, "probe", style=style)["probe.c"]
        assert "2147483648" not in source
        assert "-2147483647 - 1" in source


def test_manifest_describes_the_emitted_function(tmp_path):
    plan, out, manifest = _emit(tmp_path, "uint8-in int32-out acc32", "int", "unrolled")
    on_disk = json.loads((out / "probe.manifest.json").read_text())
    assert on_disk == manifest
    assert manifest["function"] == "probe_estimate"
    assert manifest["input_ctype"] == "uint8_t" and manifest["output_ctype"] == "int32_t"
    assert manifest["inputs"] == list(plan.inputs) and manifest["outputs"] == list(plan.outputs)
    assert manifest["input_ranges"] == [list(r) for r in plan.input_ranges]
    assert manifest["output_lsb"] == list(plan.output_lsb)
    for key in ("coefficients", "offsets", "shifts", "acc_bits", "coef_bits", "rounding"):
        assert manifest[key] == plan.to_dict()[key], key
    assert manifest["files"] == {"c": ["probe.c", "probe.h"]}
    assert manifest["plan_sha256"] == plan.sha256


def test_float32_code_and_manifest(tmp_path):
    plan, out, manifest = _emit(tmp_path, "int16-in int16-out acc32", "float32", "table")
    assert manifest["float_gain"] == [list(row) for row in plan.gain]
    assert "void probe_estimate(const int16_t y[PROBE_N_INPUTS], float x[PROBE_N_OUTPUTS]);" in (out / "probe.h").read_text()
    header = (out / "probe.h").read_text()
    assert "-ffp-contract=off" in header and "-ffast-math" in header and "FLT_EVAL_METHOD" in header


@pytest.mark.bad_input("emit")
def test_unsafe_output_name_never_reaches_a_file(tmp_path):
    plan = random_plan(2)
    plan = type(plan)(**{**plan.__dict__, "outputs": ("x0", "evil*/ int y;")})
    plan.save(tmp_path / "plan.json")
    done = run_affix("emit", tmp_path / "plan.json", "--lang", "c", "--name", "probe", "--out", tmp_path / "out")
    assert done.returncode == 2
    assert "output name 'evil*/ int y;'" in done.stderr
    assert not (tmp_path / "out").exists()


@pytest.mark.bad_input("emit")
def test_float32_micropython_is_refused_before_writing(tmp_path):
    with pytest.raises(UsageError, match="^arith: ") as caught:
        emit(random_plan(2), lang="all", arith="float32", name="probe", out_dir=tmp_path / "out")
    assert caught.value.parameter == "arith"
    assert not (tmp_path / "out").exists()


def test_input_beyond_a_32_bit_accumulator_is_refused(tmp_path):
    # Converting 3e9 to int32_t would be implementation-defined (C99 §6.3.1.3p3).
    plan = random_plan(2, 2, 1, ranges="uint16")
    plan = type(plan)(**{**plan.__dict__, "input_ranges": ((0, 3 * 10**9), plan.input_ranges[1]),
                         "input_ctype": None, "coefficients": ((0, 1),)})
    with pytest.raises(FileFormatError, match=r"input_ranges\[0\]'.* beyond the 32-bit accumulator"):
        emit(plan, lang="c", name="probe", out_dir=tmp_path)
    assert not tmp_path.joinpath("probe.c").exists()


@pytest.mark.parametrize("plan_kind", ["int16-in int16-out acc32", "uint32-in int16-out acc64 saturating",
                                       "int32-in int32-out acc64 floor"])
def test_float32_error_bound_in_the_header_holds(plan_kind):
    # The header's bound (Higham's gamma_n bound for inner products, from
    # memory) against exact rational arithmetic (Python's fractions) on the
    # corners and random points of the box.
    from fractions import Fraction

    import numpy as np

    from affix.emit.context import build_context
    from affix.interface import describe
    from affix.float32_arithmetic import Float32Estimator
    from affix.verify.vectors import vector_sets

    plan = random_plan(7, 4, 3, **PLANS[plan_kind])
    context = build_context(plan, "probe", describe(plan, "probe", languages=("c",), arith="float32"), arith="float32")
    sets = vector_sets(plan.input_ranges, context["input_ctype"], n_random=200, seed=5)
    y = np.vstack([sets["corners"].chunk(0), sets["random"].chunk(0)])
    got = Float32Estimator(plan.gain, plan.offset, plan.input_ranges).evaluate(y)
    for i, output in enumerate(context["outputs"]):
        exact = [Fraction(plan.offset[i]) + sum(Fraction(g) * int(v) for g, v in zip(plan.gain[i], row)) for row in y]
        worst = max(abs(Fraction(float(g)) - e) for g, e in zip(got[:, i], exact))
        assert worst <= Fraction(output["float32_error_bound"])
        assert f"within {output['float32_error_bound']:.3g} of the exact model" in render_c(plan, "probe", arith="float32")["probe.h"]


@pytest.mark.bad_input("emit")
@pytest.mark.parametrize(
    "field,value",
    [("model_sha256", "*/ #include <stdio.h> /*"), ("tool_version", "0.1\n#define x"), ("input_lsb", ["*/", 1, 1, 1])],
)
def test_free_text_from_a_plan_file_never_reaches_a_comment(tmp_path, field, value):
    data = random_plan(7, 4, 3).to_dict()
    data[field] = value
    (tmp_path / "plan.json").write_text(json.dumps(data))
    done = run_affix("emit", tmp_path / "plan.json", "--lang", "all", "--name", "probe", "--out", tmp_path / "out")
    assert done.returncode == 2, done.stderr
    assert done.stderr.startswith("affix: error:") and field in done.stderr
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize("plan_kind", ["int16-in int16-out acc32", "uint32-in int16-out acc64 saturating",
                                       "uint8-in int32-out acc32", "int32-in int32-out acc64 floor",
                                       "int16-in int32-out acc64", "uint8-in int32-out acc64 unshifted"])
@pytest.mark.parametrize("style,coefficients", [("table", "compiled"), ("unrolled", "compiled"), ("table", "record")])
@pytest.mark.parametrize("target", ["host", "avr"])
def test_runs_bit_exact_where_int_is_16_bits(tmp_path, plan_kind, style, coefficients, target):
    # Executed, not only compiled, on an ATmega2560 (avr-gcc: int is 16 bits,
    # long 32, long long 64) in the simavr simulator, against the integer
    # reference: the C99 §6.3.1.8 widening claim checked on real 8-bit code.
    # Planned for the AVR, 64-bit sums take their products in 32 bits where the box allows.
    # Code that loads a record runs with a record of the plan's own integers.
    import numpy as np

    from affix.emit.templates import render
    from affix.record import Contract, encode
    from affix.verify.vectors import vector_sets

    cc, sim = require("avr-gcc"), require("simavr")
    plan, out, manifest = _emit(tmp_path, plan_kind, "int", style, target=target, coefficients=coefficients)
    sets = vector_sets(plan.input_ranges, manifest["input_ctype"], n_random=16, seed=2)
    y = np.vstack([sets["corners"].chunk(0)[:32], sets["beyond the box"].chunk(0)[:16], sets["random"].chunk(0)])
    expected = plan.integer_estimator().evaluate(y)
    bits = int(manifest["input_ctype"].strip("uint_t"))
    record = None if coefficients == "compiled" else list(encode(
        "SN-1", plan.coefficients, plan.offsets, plan.shifts, coef_bits=plan.coef_bits, acc_bits=plan.acc_bits,
        interface_id=Contract.of(manifest).interface_id, data_sha256=None))
    main = tmp_path / "avr_main.c"
    main.write_text(render("c/avr_check_main.c.jinja", name="probe", input_ctype=manifest["input_ctype"],
                           output_ctype=manifest["output_ctype"], input_bits=bits,
                           output_bits=int(manifest["output_ctype"].strip("int_t")),
                           vectors=y.tolist(), expected=expected.tolist(), record=record))
    elf = tmp_path / "check.elf"
    done = subprocess.run([cc, "-mmcu=atmega2560", "-std=c99", "-O2", "-DPROBE_SELFTEST", f"-I{out}",
                           str(main), str(out / "probe.c"), "-o", str(elf)], capture_output=True, text=True)
    assert done.returncode == 0, done.stderr
    run = subprocess.run([sim, "-m", "atmega2560", "-f", "16000000", str(elf)],
                         capture_output=True, text=True, timeout=300)
    found = re.search(r"mismatches=(\d+) selftest=(\d+)", run.stdout + run.stderr)
    assert found, run.stdout + run.stderr
    assert found.groups() == ("0", "0")
