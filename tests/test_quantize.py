"""The quantizer against outside references: fxpmath, exact rational arithmetic,
the uniform-noise model of quantization, and brute force over the configurations."""
from __future__ import annotations

import math
from fractions import Fraction
from itertools import product

import numpy as np
import pytest
from fxpmath import Fxp
from hypothesis import given, settings
from hypothesis import strategies as st

from affix.arithmetic import OUTPUT_CTYPES, IntegerEstimator, rounding_constant
from affix.errors import BudgetError, UsageError
from affix.model import Model
from affix.quantize import plan_fixed_point
from affix.quantize.rounding_error import round_nearest_ties_up


def calibration_rows(rng, box, k):
    """Correlated rows inside the box, like channels sharing one excitation (invented)."""
    lo = np.array([r[0] for r in box], dtype=float)
    hi = np.array([r[1] for r in box], dtype=float)
    m = len(box)
    mixing = rng.normal(size=(m, m)) / math.sqrt(m) * (hi - lo) / 6
    rows = (lo + hi) / 2 + rng.normal(size=(k, m)) @ mixing
    return np.clip(np.rint(rows), lo, hi)


def model_for(rng, rows, n_outputs, gain_scale=1e-3, rms=0.01):
    m = rows.shape[1]
    return Model(
        inputs=[f"y{j}" for j in range(m)],
        outputs=[f"x{i}" for i in range(n_outputs)],
        gain=rng.normal(size=(n_outputs, m)) * gain_scale,
        offset=rng.normal(size=n_outputs),
        cv_rms=np.full(n_outputs, rms),
        n_samples=len(rows),
        input_mean=rows.mean(axis=0),
        input_covariance=np.atleast_2d(np.cov(rows, rowvar=False)),
    )


def exact_deviation(plan, y) -> list[list[Fraction]]:
    """out * lsb - (gain . y + offset) in exact rationals, per row and output."""
    out = plan.integer_estimator().evaluate(np.array(y, dtype=np.int64))
    rows = []
    for vector, result in zip(y, out.tolist()):
        rows.append([
            Fraction(lsb) * o - (sum(Fraction(g) * int(v) for g, v in zip(gains, vector)) + Fraction(b))
            for o, lsb, gains, b in zip(result, plan.output_lsb, plan.gain, plan.offset)
        ])
    return rows


def corners_of(box):
    return [list(c) for c in product(*box)]


def unclamped(plan, y):
    """(acc + r) >> s with Python integers and no output clamp (the contract, before saturation)."""
    rows = []
    for vector in y:
        rows.append([
            (c + rounding_constant(s, plan.rounding) + sum(a * int(v) for a, v in zip(row, vector))) >> s
            for row, c, s in zip(plan.coefficients, plan.offsets, plan.shifts)
        ])
    return rows


# --- point 7: output rounding noise ------------------------------------------


@pytest.mark.parametrize("rounding", ["nearest", "floor"])
def test_rounding_noise_variance_is_lsb_squared_over_twelve(rounding):
    # Widrow & Kollar, Quantization Noise (2008): rounding values spread
    # uniformly over many steps adds noise of variance lsb**2 / 12.  Here the
    # contract's own shift (s = 12) rounds 10**6 such accumulator values.
    rng = np.random.default_rng(11)
    shift, lsb = 12, 0.01
    estimator = IntegerEstimator([[1]], [0], [shift], [(-(2**30), 2**30)], "int32_t", rounding, 32)
    acc = rng.integers(-(2**30), 2**30, size=(10**6, 1))
    error = (estimator.evaluate(acc)[:, 0] - acc[:, 0] / 2.0**shift) * lsb
    assert error.var() == pytest.approx(lsb**2 / 12, rel=0.02)
    # nearest errs within [-lsb/2, lsb/2]; floor within (-lsb, 0] (the definitions of the two roundings)
    if rounding == "nearest":
        assert -lsb / 2 <= error.min() and error.max() <= lsb / 2
    else:
        assert -lsb < error.min() and error.max() <= 0


def test_planned_rounding_part_is_the_uniform_noise_figure():
    # Widrow & Kollar (2008): lsb**2 / 12, here for 2**s equally likely steps.
    rng = np.random.default_rng(3)
    box = [(0, 4095)] * 3
    plan = plan_fixed_point(model_for(rng, calibration_rows(rng, box, 2000), 2), box, coef_bits=16, acc_bits=32)
    for lsb, s, part in zip(plan.output_lsb, plan.shifts, plan.deviation_parts["output_rounding"]):
        assert part == pytest.approx(lsb * math.sqrt((1 - 4.0**-s) / 12), rel=1e-12)


# --- point 7: agreement with fxpmath ------------------------------------------


def test_nearest_rounding_matches_fxpmath_nearest_posinf_on_ties():
    # fxpmath's rounding="nearest_posinf" rounds to nearest, ties toward +inf
    # (fxpmath/objects.py, Fxp._round), the rounding the contract calls nearest (ties toward +infinity).
    values = np.array([-2.5, -1.5, -0.5, 0.5, 1.5, 2.5, 0.49999999999999994, -0.49999999999999994, 3.2, -3.7])
    reference = Fxp(values, signed=True, n_word=16, n_frac=0, rounding="nearest_posinf").val
    assert round_nearest_ties_up(values).astype(np.int64).tolist() == np.asarray(reference).astype(np.int64).tolist()


@pytest.mark.parametrize("coef_bits", [8, 16, 32])
def test_plain_coefficients_agree_with_fxpmath_integer_for_integer(coef_bits):
    # fxpmath (PyPI) quantizes a real to a signed fixed-point word of n_word
    # bits with n_frac fraction bits; its raw integer .val must equal ours at
    # the same word length (coef_bits), fraction length (the shift) and rounding.
    rng = np.random.default_rng(coef_bits)
    for trial in range(20):
        box = [(0, 4095)] * 2 + [(-2048, 2047)] * 2
        model = model_for(rng, calibration_rows(rng, box, 500), 3, gain_scale=10.0 ** rng.uniform(-4, 0))
        plan = plan_fixed_point(model, box, coef_bits=coef_bits, acc_bits=64, search=False, box_points=100)
        for row, gains, lsb, s in zip(plan.coefficients, plan.gain, plan.output_lsb, plan.shifts):
            reference = Fxp(np.array(gains) / lsb, signed=True, n_word=coef_bits, n_frac=s, rounding="nearest_posinf")
            assert list(row) == np.asarray(reference.val).astype(np.int64).tolist()


# --- point 7: worst-case bound ------------------------------------------------


@pytest.mark.parametrize("rounding", ["nearest", "floor"])
@pytest.mark.parametrize("coef_bits", [8, 16])
def test_worst_case_bound_holds_on_every_corner_and_is_tight(rounding, coef_bits):
    # Exact rational arithmetic (Python fractions) is the reference: the
    # bound must hold at every corner and at random points, and some corner
    # must come within one lsb of it (the deviation is linear plus a rounding
    # error less than one lsb wide, so its extreme over the box sits at a corner).
    rng = np.random.default_rng(coef_bits + len(rounding))
    for trial in range(6):
        box = [tuple(sorted(int(v) for v in rng.integers(-3000, 4096, size=2))) for _ in range(4)]
        model = model_for(rng, calibration_rows(rng, box, 400), 2, gain_scale=10.0 ** rng.uniform(-3, 0))
        plan = plan_fixed_point(model, box, coef_bits=coef_bits, acc_bits=32, rounding=rounding)
        corner_dev = exact_deviation(plan, corners_of(box))
        lo = np.array([r[0] for r in box])
        hi = np.array([r[1] for r in box])
        inner_dev = exact_deviation(plan, rng.integers(lo, hi, size=(300, 4), endpoint=True).tolist())
        for i, (bound, lsb) in enumerate(zip(plan.worst_case_deviation, plan.output_lsb)):
            worst_corner = max(abs(d[i]) for d in corner_dev)
            assert worst_corner <= Fraction(bound)
            assert max(abs(d[i]) for d in inner_dev) <= Fraction(bound)
            assert worst_corner >= Fraction(bound) - Fraction(lsb)


# --- point 7: predicted against measured ---------------------------------------


def test_predicted_deviation_rms_matches_measured_where_rounding_dominates():
    # Widrow & Kollar (2008) uniform-noise model: with the coefficient part
    # small, the predicted RMS must agree with the measured one within 10 %.
    rng = np.random.default_rng(5)
    box = [(0, 4095)] * 4
    rows = calibration_rows(rng, box, 200_000)
    model = model_for(rng, rows, 3)
    plan = plan_fixed_point(model, box, coef_bits=16, acc_bits=32, calibration=[rows[:100_000], rows[100_000:]])
    parts = plan.deviation_parts
    for i in range(3):
        assert parts["output_rounding"][i] > 2 * parts["coefficients"][i], "rounding must dominate here"
    measured = plan.measured["calibration"]
    assert measured["rows"] == len(rows) and measured["rows_outside_box"] == 0
    np.testing.assert_allclose(measured["rms_deviation"], plan.predicted_rms_deviation, rtol=0.10)
    random = plan.measured["random"]
    np.testing.assert_allclose(random["rms_deviation"], random["predicted_rms_deviation"], rtol=0.10)


def test_coefficient_part_is_the_exact_quadratic_form_of_the_data():
    # The mean square of delta . z over the rows equals delta' E[z z'] delta
    # when the moments are those of the same rows (an algebraic identity:
    # common practice).  The accumulator's exact value before its shift,
    # less the float estimate and the cancelled rounding mean, is delta . z.
    rng = np.random.default_rng(9)
    box = [(0, 4095)] * 3
    rows = calibration_rows(rng, box, 5000)
    model = model_for(rng, rows, 2)
    plan = plan_fixed_point(model, box, coef_bits=8, acc_bits=32)
    y = rows.astype(np.int64)
    for i, (row, c, s, lsb) in enumerate(zip(plan.coefficients, plan.offsets, plan.shifts, plan.output_lsb)):
        acc = c + y @ np.array(row)
        mean_error = 0.5 / 2**s if s else 0.0  # nearest's mean error, in output counts
        pre_shift = acc * (lsb / 2**s) - model.predict(rows)[:, i] + mean_error * lsb
        assert plan.deviation_parts["coefficients"][i] == pytest.approx(np.sqrt(np.mean(pre_shift**2)), rel=1e-6)


def test_input_quantization_of_physical_inputs_is_predicted_and_measured():
    # An ADC rounding to nearest errs uniformly by +-q/2 (Widrow & Kollar,
    # 2008): variance q**2/12 per input, through the gain.  Inputs here are
    # volts with 1 mV counts; the rows are continuous volts.
    rng = np.random.default_rng(21)
    q = 0.001
    volts = rng.uniform(0.2, 3.8, size=(200_000, 3))
    model = Model(
        inputs=["u", "v", "w"], outputs=["force"], gain=[[40.0, -25.0, 60.0]], offset=[3.0], cv_rms=[0.5],
        n_samples=len(volts), input_mean=volts.mean(axis=0), input_covariance=np.cov(volts, rowvar=False),
    )
    plan = plan_fixed_point(model, (0, 4095), input_lsb=q, coef_bits=32, acc_bits=64, output_ctype="int32_t",
                            calibration=[volts])
    expected = math.sqrt(sum((g * q) ** 2 for g in model.gain[0]) / 12)
    assert plan.deviation_parts["input_quantization"][0] == pytest.approx(expected, rel=1e-12)
    assert plan.input_lsb == (q, q, q)
    assert list(plan.gain[0]) == pytest.approx([g * q for g in model.gain[0]])
    measured = plan.measured["calibration"]["rms_deviation"][0]
    assert measured == pytest.approx(plan.predicted_rms_deviation[0], rel=0.10)
    assert plan.measured["calibration"]["max_deviation"][0] <= plan.worst_case_deviation[0]


# --- point 7: the search is never worse -----------------------------------------


def test_error_feedback_coefficients_never_worse_than_plain_rounding():
    # Compared on the data themselves (mean square of the pre-shift deviation
    # over the calibration rows, whose moments the model carries), not on the
    # quantizer's own figure.  Bounds: Plan.validate re-proves coefficient
    # width and accumulator bound; saturation is checked on the corners.
    rng = np.random.default_rng(2024)
    better = 0
    for trial in range(40):
        m = int(rng.integers(1, 7))
        box = [(0, 4095)] * m
        rows = calibration_rows(rng, box, 3000)
        model = model_for(rng, rows, 2, gain_scale=10.0 ** rng.uniform(-4, 0))
        coef_bits = int(rng.choice([8, 16]))
        fixed = dict(coef_bits=coef_bits, acc_bits=32, output_ctype="int16_t", box_points=100)
        searched = plan_fixed_point(model, box, **fixed)
        plain = plan_fixed_point(model, box, search=False, **fixed)
        assert searched.shifts == plain.shifts and searched.output_lsb == plain.output_lsb
        searched.validate()
        y = rows.astype(np.int64)
        for i in range(2):
            ms = [np.mean((p.offsets[i] + y @ np.array(p.coefficients[i]) - 2.0 ** p.shifts[i] / p.output_lsb[i]
                           * model.predict(rows)[:, i] - 0.5 * (p.shifts[i] > 0)) ** 2) for p in (searched, plain)]
            assert ms[0] <= ms[1] * (1 + 1e-9)
            better += ms[0] < ms[1] * 0.99
        corners = corners_of(box)
        assert searched.integer_estimator().evaluate(np.array(corners)).tolist() == unclamped(searched, corners)
    assert better >= 10, "the search should pay off on a good share of random models"


# --- point 7: the budget search picks the cheapest -------------------------------


def cost(plan):
    # The documented order: the target's measured cost of one evaluation at this
    # shape, then coefficient width, accumulator width and output width.
    from affix.targets.costs import evaluation_cost

    measured = evaluation_cost(plan.target, plan.coef_bits, plan.acc_bits, len(plan.inputs), len(plan.outputs))
    return round(measured), plan.coef_bits, plan.acc_bits, 16 if plan.output_ctype == "int16_t" else 32


def every_configuration(model, box):
    plans = []
    for coef_bits, acc_bits, ctype in product((8, 16, 32), (32, 64), tuple(OUTPUT_CTYPES)):
        try:
            plans.append(plan_fixed_point(model, box, coef_bits=coef_bits, acc_bits=acc_bits, output_ctype=ctype,
                                          box_points=100))
        except UsageError:
            pass  # this configuration cannot represent the model at all
    return plans


def test_budget_search_returns_the_cheapest_configuration_by_brute_force():
    # Brute force over all 12 configurations (common practice for a search
    # this small) is the reference for the search's pick.
    rng = np.random.default_rng(77)
    for trial in range(4):
        box = [(0, 4095)] * 3
        model = model_for(rng, calibration_rows(rng, box, 1000), 2, gain_scale=10.0 ** rng.uniform(-3, -1))
        plans = every_configuration(model, box)
        worst = sorted({max(p.worst_case_deviation) for p in plans})
        for limit in worst[:: max(1, len(worst) // 4)] + [worst[-1] * 1.5]:
            meeting = [p for p in plans if max(p.worst_case_deviation) <= limit]
            chosen = plan_fixed_point(model, box, budget=limit)
            assert cost(chosen) == min(cost(p) for p in meeting)
            assert max(chosen.worst_case_deviation) <= limit and chosen.budget["met"]
        totals = sorted({max(t / f for t, f in zip(p.predicted_total_rms, p.float_rms)) for p in plans})
        growth = (totals[len(totals) // 2] - 1) * 100
        meeting = [p for p in plans if all(t <= f * (1 + growth / 100) for t, f in zip(p.predicted_total_rms, p.float_rms))]
        assert cost(plan_fixed_point(model, box, budget_rms=growth)) == min(cost(p) for p in meeting)


def test_unmeetable_budget_exits_3_with_the_best_achievable_figure():
    # Brute force again: the best figure any configuration reaches must be the one reported.
    rng = np.random.default_rng(8)
    box = [(0, 4095)] * 3
    model = model_for(rng, calibration_rows(rng, box, 1000), 2)
    best = min(every_configuration(model, box), key=lambda p: p.worst_case_deviation[0])
    with pytest.raises(BudgetError, match="best achievable") as caught:
        plan_fixed_point(model, box, budget={"x0": best.worst_case_deviation[0] / 2})
    assert caught.value.exit_code == 3
    assert f"x0 {best.worst_case_deviation[0]:.6g}" in caught.value.message


# --- point 7: no saturation inside the box -----------------------------------------


@pytest.mark.parametrize("output_ctype", ["int16_t", "int32_t"])
def test_saturation_never_triggers_inside_the_box(output_ctype):
    # The contract clamps only after the shift; inside the box the unclamped
    # value (computed here with Python integers) must already be in range.
    rng = np.random.default_rng(int(output_ctype[3:5]) + 40)
    checked = 0
    for trial in range(10):
        box = [tuple(sorted(int(v) for v in rng.integers(-32768, 32768, size=2))) for _ in range(3)]
        model = model_for(rng, calibration_rows(rng, box, 300), 2, gain_scale=10.0 ** rng.uniform(-4, 2))
        lsb = None if trial % 2 else {"x0": 0.37}
        try:
            plan = plan_fixed_point(model, box, output_ctype=output_ctype, output_lsb=lsb, acc_bits=64)
        except UsageError:
            assert lsb is not None, "the default lsb always fits the output type"
            continue  # lsb 0.37 too fine for this output in int16
        lo_t, hi_t = OUTPUT_CTYPES[output_ctype]
        lo = np.array([r[0] for r in box])
        hi = np.array([r[1] for r in box])
        y = corners_of(box) + rng.integers(lo, hi, size=(500, 3), endpoint=True).tolist()
        raw = unclamped(plan, y)
        assert all(lo_t <= v <= hi_t for r in raw for v in r)
        assert plan.integer_estimator().evaluate(np.array(y)).tolist() == raw
        checked += 1
    assert checked >= 5, "a loop that skips every trial checks nothing"


# --- the lsb rule and the moments ---------------------------------------------------


def test_default_lsb_is_the_finest_power_of_two_that_fits():
    # The documented rule; a power-of-two lsb makes the output a Qm.n number
    # (common practice in fixed-point firmware).  frexp's mantissa is exactly
    # 0.5 for powers of two (C99 7.12.6.4, mirrored by Python's math.frexp).
    rng = np.random.default_rng(4)
    box = [(0, 4095)] * 3
    model = model_for(rng, calibration_rows(rng, box, 500), 2)
    plan = plan_fixed_point(model, box, coef_bits=16, acc_bits=32, output_ctype="int16_t")
    for name, lsb in zip(plan.outputs, plan.output_lsb):
        assert math.frexp(lsb)[0] == 0.5, "a power of two"
        with pytest.raises(UsageError):  # one step finer no longer fits
            plan_fixed_point(model, box, coef_bits=16, acc_bits=32, output_ctype="int16_t", output_lsb={name: lsb / 2})


def test_model_without_moments_uses_uniform_box_moments_and_says_so():
    # Then the calibration prediction and the uniform-box prediction must be
    # one and the same form (the discrete uniform variance ((hi-lo+1)**2-1)/12,
    # from memory, any probability handbook).  As for an estimator adopted from another library with only gain and offset.
    model = Model(inputs=["a", "b"], outputs=["x"], gain=[[0.01, -0.02]], offset=[1.0])
    plan = plan_fixed_point(model, {"a": (0, 1023), "b": (-512, 511)})
    assert plan.moments_source == "uniform-box"
    assert plan.float_rms is None and plan.predicted_total_rms is None and plan.budget is None
    random = plan.measured["random"]
    np.testing.assert_allclose(random["predicted_rms_deviation"], plan.predicted_rms_deviation, rtol=1e-9)


def test_shift_is_the_largest_that_passes_the_box_proof():
    # Issue point 1: one more shift must break a coefficient's width or the
    # accumulator bound |c| + sum |a| max|y| + 2**(s-1) (offset target less
    # nearest's mean error of half an accumulator count, as the plan documents).
    rng = np.random.default_rng(12)
    box = [(0, 4095)] * 4
    model = model_for(rng, calibration_rows(rng, box, 500), 3)
    plan = plan_fixed_point(model, box, coef_bits=16, acc_bits=32, search=False, box_points=100)
    plan.validate()
    for gains, b, lsb, s in zip(plan.gain, plan.offset, plan.output_lsb, plan.shifts):
        finer = [int(round_nearest_ties_up(g / lsb * 2.0 ** (s + 1))) for g in gains]
        c = int(round_nearest_ties_up(b / lsb * 2.0 ** (s + 1) - 0.5))
        fits_coef = all(-(2**15) <= a < 2**15 for a in finer)
        bound = abs(c) + sum(abs(a) * 4095 for a in finer) + 2**s
        assert s == 31 or not fits_coef or bound >= 2**31


def test_plan_round_trips_through_its_file(tmp_path):
    # JSON (RFC 8259) keeps every integer and every double exactly through
    # Python's json module, so the content hash survives the round trip.
    rng = np.random.default_rng(1)
    box = [(0, 4095)] * 2
    plan = plan_fixed_point(model_for(rng, calibration_rows(rng, box, 300), 2), box)
    plan.save(tmp_path / "plan.json")
    from affix.plan import Plan

    again = Plan.load(tmp_path / "plan.json")
    assert again.sha256 == plan.sha256 and again.moments_source == "calibration"
    assert not list(tmp_path.glob(".*tmp")), "no temporary file left behind"


@settings(max_examples=60, deadline=None)
@given(
    data=st.data(),
    n_inputs=st.integers(1, 3),
    rounding=st.sampled_from(["nearest", "floor"]),
    coef_bits=st.sampled_from([8, 16, 32]),
    acc_bits=st.sampled_from([32, 64]),
)
def test_generated_plans_keep_the_proof_and_the_bound(data, n_inputs, rounding, coef_bits, acc_bits):
    # Hypothesis draws gains over 12 decades, boxes of every sign and width,
    # both roundings and every width; whatever plan comes out must pass the
    # box proof again (Plan.validate), never saturate on a corner and keep
    # its worst-case bound there, in exact rationals (Python fractions).
    box = [tuple(sorted(data.draw(st.tuples(st.integers(-(2**15), 2**16), st.integers(-(2**15), 2**16)))))
           for _ in range(n_inputs)]
    gains = [[data.draw(st.floats(-1, 1)) * 10.0 ** data.draw(st.integers(-8, 4)) for _ in range(n_inputs)]]
    model = Model(inputs=[f"y{j}" for j in range(n_inputs)], outputs=["x"], gain=gains,
                  offset=[data.draw(st.floats(-1e3, 1e3))])
    plan = plan_fixed_point(model, box, coef_bits=coef_bits, acc_bits=acc_bits, rounding=rounding, box_points=10)
    plan.validate()
    corners = corners_of(box)
    raw = unclamped(plan, corners)
    lo_t, hi_t = OUTPUT_CTYPES[plan.output_ctype]
    assert all(lo_t <= r[0] <= hi_t for r in raw)
    assert max(abs(d[0]) for d in exact_deviation(plan, corners)) <= Fraction(plan.worst_case_deviation[0])
