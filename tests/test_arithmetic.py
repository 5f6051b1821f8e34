"""The integer reference evaluator against the contract, computed independently.

The oracle below follows the arithmetic as written in the contract with
Python's unbounded integers and exact rationals: floor((acc + r) / 2**s) via
fractions.Fraction and math.floor, never via '>>', so the evaluator's use of
arithmetic shifts on negative numbers is checked rather than assumed.
Python's int and Fraction are exact by the language definition (Python
Language Reference, "Numeric types"; fractions module documentation).
"""
from __future__ import annotations

import math
import zlib
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from affix.arithmetic import (
    INPUT_CTYPES,
    OUTPUT_CTYPES,
    IntegerEstimator,
    input_ctype,
    rounding_constant,
)


def oracle(est: IntegerEstimator, y) -> list[list[int]]:
    lo_out, hi_out = OUTPUT_CTYPES[est.output_ctype]
    rows = []
    for vector in y:
        clamped = [min(max(int(v), lo), hi) for v, (lo, hi) in zip(vector, est.input_ranges)]
        out = []
        for row, c, s in zip(est.coefficients, est.offsets, est.shifts):
            acc = c + sum(a * v for a, v in zip(row, clamped))
            quotient = Fraction(acc, 2**s)
            if est.rounding == "nearest":  # round to nearest, ties toward +infinity
                value = math.floor(quotient + Fraction(1, 2)) if s > 0 else acc
            else:
                value = math.floor(quotient)
            out.append(min(max(value, lo_out), hi_out))
        rows.append(out)
    return rows


def random_estimator(rng, *, n_inputs, n_outputs, coef_bits, input_kind, shift_range, rounding, acc_bits=64):
    lo_t, hi_t = INPUT_CTYPES[input_kind]
    ranges = [tuple(sorted(int(v) for v in rng.integers(lo_t, hi_t, size=2, endpoint=True))) for _ in range(n_inputs)]
    limit = 2 ** (coef_bits - 1)
    coefficients = rng.integers(-limit, limit, size=(n_outputs, n_inputs)).tolist()
    offsets = [int(v) for v in rng.integers(-(2**40), 2**40, size=n_outputs)]
    shifts = [int(v) for v in rng.integers(*shift_range, size=n_outputs)]
    return IntegerEstimator(coefficients, offsets, shifts, ranges, "int32_t", rounding, acc_bits)


def box_points(rng, est, k, beyond=0):
    lo = np.array([r[0] for r in est.input_ranges])
    hi = np.array([r[1] for r in est.input_ranges])
    return rng.integers(lo - beyond, hi + beyond, size=(k, len(lo)), endpoint=True)


# Bounds chosen to land in each of the three exactness paths of evaluate():
# float64 below 2**53, int64 below 2**63, Python integers above.
PATHS = {
    "float64": dict(coef_bits=16, input_kind="int16_t", shift_range=(0, 30)),
    "int64": dict(coef_bits=28, input_kind="int32_t", shift_range=(20, 50)),
    "python-int": dict(coef_bits=32, input_kind="uint32_t", shift_range=(30, 70)),
}
PATH_LIMITS = {"float64": (0, 2**53), "int64": (2**53, 2**63), "python-int": (2**63, 2**200)}


@pytest.mark.parametrize("rounding", ["nearest", "floor"])
@pytest.mark.parametrize("path", PATHS)
def test_evaluate_matches_exact_oracle_on_every_path(path, rounding):
    # A seed from the case's own name: hash() of a string is salted per process, so it would not repeat.
    rng = np.random.default_rng(zlib.crc32(f"{path}/{rounding}".encode()))
    est = random_estimator(rng, n_inputs=8, n_outputs=3, rounding=rounding, **PATHS[path])
    low, high = PATH_LIMITS[path]
    assert low <= max(est.accumulator_bounds()) < high, "the test estimator must exercise the intended path"
    y = box_points(rng, est, 300, beyond=5)
    assert est.evaluate(y).tolist() == oracle(est, y)


@pytest.mark.parametrize("rounding", ["nearest", "floor"])
def test_negative_accumulators_and_ties(rounding):
    # acc runs over -9..9 with s = 1 and s = 2: every tie and both signs.
    # Half-up goes toward +infinity on a tie (-0.5 -> 0, -1.5 -> -1); floor
    # goes toward -infinity (-0.5 -> -1), as the contract says (common practice
    # for '>>' on two's complement, here checked against Fraction arithmetic).
    est = IntegerEstimator([[1], [1], [1]], [0, 0, 0], [0, 1, 2], [(-9, 9)], "int16_t", rounding)
    y = np.arange(-9, 10).reshape(-1, 1)
    got = est.evaluate(y)
    assert got.tolist() == oracle(est, y)
    half = got[:, 1]
    if rounding == "nearest":
        assert half[y[:, 0] == -1][0] == 0 and half[y[:, 0] == -3][0] == -1
    else:
        assert half[y[:, 0] == -1][0] == -1 and half[y[:, 0] == -3][0] == -2


def test_output_clamps_to_type_limits_and_inputs_to_the_box():
    # INT16_MIN/INT16_MAX = -32768/32767: C99 (ISO/IEC 9899:1999) 7.18.2.1.
    est = IntegerEstimator([[1000]], [0], [0], [(-100, 100)], "int16_t", "nearest", 32)
    out = est.evaluate(np.array([[-100], [32], [33], [100], [10**6], [-(10**6)]]))
    # 32 * 1000 = 32000 fits int16; 33 * 1000 saturates at 32767; inputs beyond the box clamp to +-100 first.
    assert out[:, 0].tolist() == [-32768, 32000, 32767, 32767, 32767, -32768]


def test_huge_inputs_do_not_wrap_before_clamping():
    # uint64 -> int64 conversion wraps modulo 2**64 in numpy (numpy casting
    # documentation); a uint64 value above 2**63 must clamp to hi, not wrap to a negative int64.
    est = IntegerEstimator([[1]], [0], [0], [(0, 4095)], "int16_t")
    assert est.evaluate(np.array([[2**64 - 1]], dtype=np.uint64)).tolist() == [[4095]]
    assert est.evaluate(np.array([[2**70], [-(2**70)]], dtype=object)).tolist() == [[4095], [0]]


def test_rejects_non_integer_inputs_and_wrong_width():
    # The contract is defined on integers only (common practice: silent
    # truncation of floats would hide a caller's unit error).
    est = IntegerEstimator([[1, 2]], [0], [3], [(0, 10), (0, 10)], "int16_t")
    with pytest.raises(ValueError, match="integers"):
        est.evaluate(np.array([[1.5, 2.0]]))
    with pytest.raises(ValueError, match="2 inputs"):
        est.evaluate(np.array([[1, 2, 3]]))


def test_single_vector_gives_one_row():
    # Against the Fraction oracle above (Python's exact integer arithmetic).
    est = IntegerEstimator([[3, -2]], [5], [2], [(0, 10), (-5, 5)], "int16_t")
    assert est.evaluate([1, 2]).tolist() == oracle(est, [[1, 2]])[0]


def test_accumulator_bound_and_output_range_are_exact_on_corners():
    # A linear form over a box takes its extremes at corners (common
    # practice, linear programming); checked here by enumerating every corner.
    rng = np.random.default_rng(7)
    for rounding in ("nearest", "floor"):
        est = random_estimator(rng, n_inputs=4, n_outputs=3, coef_bits=16, input_kind="int16_t",
                               shift_range=(0, 20), rounding=rounding)
        corners = np.array(np.meshgrid(*est.input_ranges)).reshape(len(est.input_ranges), -1).T
        for i, (row, c, s) in enumerate(zip(est.coefficients, est.offsets, est.shifts)):
            r = rounding_constant(s, rounding)
            acc = [c + r + sum(a * v for a, v in zip(row, corner)) for corner in corners.tolist()]
            assert max(abs(v) for v in acc) <= est.accumulator_bounds()[i]
            # The extremes of a linear form over a box are attained at corners.
            assert est.output_ranges()[i] == (min(acc) >> s, max(acc) >> s)


def test_input_ctype_takes_one_type_for_the_whole_box():
    # The limits are those of the C99 <stdint.h> exact-width types (ISO/IEC 9899:1999, 7.18.2.1).
    assert input_ctype([(0, 255), (0, 100)]) == "uint8_t"
    assert input_ctype([(-128, 127)]) == "int8_t"
    # A box that cannot go negative (an ADC) takes the unsigned type its DMA buffer has.
    assert input_ctype([(0, 4095)]) == "uint16_t"
    assert input_ctype([(0, 40000)]) == "uint16_t"
    assert input_ctype([(-2048, 2047), (0, 4095)]) == "int16_t"
    assert input_ctype([(-2048, 2047), (0, 40000)]) == "int32_t"
    assert input_ctype([(-1, 65535)]) == "int32_t"  # mixed signs: the signed type that holds both
    assert input_ctype([(0, 2**32 - 1)]) == "uint32_t"
    assert input_ctype([(-1, 2**32 - 1)]) is None


@settings(max_examples=300, deadline=None)
@given(
    data=st.data(),
    rounding=st.sampled_from(["nearest", "floor"]),
    n_inputs=st.integers(1, 4),
    output_ctype=st.sampled_from(sorted(OUTPUT_CTYPES)),
)
def test_evaluate_matches_oracle_on_generated_estimators(data, rounding, n_inputs, output_ctype):
    # Hypothesis draws estimators of every size from tiny to beyond 2**63,
    # shifts up to 80 and points beyond the box; the Fraction oracle decides.
    big = st.integers(-(2**40), 2**40)
    ranges = [tuple(sorted(data.draw(st.tuples(st.integers(-(2**31), 2**32 - 1), st.integers(-(2**31), 2**32 - 1)))))
              for _ in range(n_inputs)]
    coefficients = [[data.draw(st.integers(-(2**31), 2**31 - 1)) for _ in range(n_inputs)] for _ in range(2)]
    est = IntegerEstimator(coefficients, [data.draw(big), data.draw(big)], [data.draw(st.integers(0, 80)) for _ in range(2)],
                           ranges, output_ctype, rounding, 64)
    y = [[data.draw(st.integers(lo - 10, hi + 10)) for lo, hi in ranges] for _ in range(5)]
    assert est.evaluate(np.array(y, dtype=np.int64)).tolist() == oracle(est, y)


def test_files_written_before_the_rounding_rename_read_as_nearest():
    # "half-up" was this contract's old name for ties toward +infinity.
    old = {"coefficients": [[3]], "offsets": [1], "shifts": [2], "input_ranges": [[-8, 8]],
           "output_ctype": "int16_t", "rounding": "half-up", "acc_bits": 32}
    est = IntegerEstimator.from_mapping(old)
    assert est.rounding == "nearest"
    # (3*2 + 1 + 2) >> 2 = 2: the rounding constant 2**(s-1) of ties toward +infinity is applied.
    assert est.evaluate(np.array([2])).tolist() == [2]
