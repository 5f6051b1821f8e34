"""The fit stage checked against published certified values and reference libraries."""
from __future__ import annotations

import importlib.util
import math
import warnings

import numpy as np
import pytest

import affix
from affix.errors import FitError
from affix.fit.estimator import CollinearityWarning
from affix.statistics import fold_of


def quiet_fit(*args, **kwargs):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CollinearityWarning)
        return affix.fit(*args, **kwargs)


def log_relative_error(value, certified):
    """NIST StRD's measure of agreement: the number of matching significant digits."""
    return math.inf if value == certified else -math.log10(abs(value - certified) / abs(certified))


# --- NIST StRD Longley ---------------------------------------------------
# Certified values from NIST StRD, "Longley" (linear regression, higher
# difficulty), written from memory, and cross-checked below against
# statsmodels' own copy of the NIST results
# (statsmodels/regression/tests/results/results_regression.py, class Longley).
LONGLEY_CERTIFIED = {
    "intercept": -3482258.63459582,
    "GNPDEFL": 15.0618722713733,
    "GNP": -0.358191792925910e-01,
    "UNEMP": -2.02022980381683,
    "ARMED": -1.03322686717359,
    "POP": -0.511041056535807e-01,
    "YEAR": 1829.15146461355,
}
LONGLEY_CERTIFIED_RESIDUAL_SS = 836424.055505915  # NIST StRD Longley, from memory
LONGLEY_CERTIFIED_RESIDUAL_SD = 304.854073561965  # NIST StRD Longley, from memory


def longley():
    from statsmodels.datasets import longley as dataset  # the data ship with statsmodels

    frame = dataset.load_pandas()
    data = {name: frame.exog[name].to_numpy() for name in frame.exog.columns}
    data["TOTEMP"] = frame.endog.to_numpy()
    return data, list(frame.exog.columns)


def test_longley_certified_values_match_statsmodels_copy():
    # Guards the from-memory constants above against statsmodels' NIST copy.
    spec = importlib.util.find_spec("statsmodels.regression.tests.results.results_regression")
    assert spec is not None, "statsmodels ships its NIST Longley results"
    from statsmodels.regression.tests.results.results_regression import Longley

    reference = Longley()
    ours = [LONGLEY_CERTIFIED[k] for k in ("GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR", "intercept")]
    np.testing.assert_array_equal(ours, reference.params)
    assert reference.ssr == LONGLEY_CERTIFIED_RESIDUAL_SS


def test_longley_every_certified_coefficient_to_nine_digits():
    data, inputs = longley()
    model = quiet_fit(data, inputs, ["TOTEMP"], folds=0)
    for j, name in enumerate(inputs):
        assert log_relative_error(model.gain[0, j], LONGLEY_CERTIFIED[name]) >= 9, name
    assert log_relative_error(model.offset[0], LONGLEY_CERTIFIED["intercept"]) >= 9
    n = model.n_samples
    # error_covariance is SSE / (n - 1); NIST certifies SSE and SSE / (n - p).
    sse = model.error_covariance[0, 0] * (n - 1)
    assert log_relative_error(sse, LONGLEY_CERTIFIED_RESIDUAL_SS) >= 9
    assert log_relative_error(math.sqrt(sse / (n - 7)), LONGLEY_CERTIFIED_RESIDUAL_SD) >= 9


def test_longley_warns_about_its_famous_collinearity():
    data, inputs = longley()
    with pytest.warns(CollinearityWarning, match="GNP.*POP.*YEAR"):
        affix.fit(data, inputs, ["TOTEMP"], folds=0)


# --- scikit-learn and statsmodels as references --------------------------


def test_linnerud_three_outputs_match_sklearn_linear_regression():
    from sklearn.datasets import load_linnerud  # bundled with scikit-learn
    from sklearn.linear_model import LinearRegression

    bunch = load_linnerud()
    reference = LinearRegression().fit(bunch.data, bunch.target)
    model = affix.fit((bunch.data, bunch.target), bunch.feature_names, bunch.target_names, folds=0)
    np.testing.assert_allclose(model.gain, reference.coef_, rtol=1e-10)
    np.testing.assert_allclose(model.offset, reference.intercept_, rtol=1e-10)
    np.testing.assert_allclose(model.predict(bunch.data), reference.predict(bunch.data), rtol=1e-10)


def test_single_output_matches_statsmodels_ols():
    import statsmodels.api as sm
    from statsmodels.datasets import stackloss  # bundled with statsmodels

    frame = stackloss.load_pandas()
    reference = sm.OLS(frame.endog, sm.add_constant(frame.exog)).fit()
    model = affix.fit((frame.exog.to_numpy(), frame.endog.to_numpy()), folds=0)
    np.testing.assert_allclose(model.gain[0], reference.params[frame.exog.columns], rtol=1e-10)
    np.testing.assert_allclose(model.offset[0], reference.params["const"], rtol=1e-10)
    # statsmodels' ssr is the residual sum of squares; ours is scaled 1/(n-1).
    np.testing.assert_allclose(model.error_covariance[0, 0] * (model.n_samples - 1), reference.ssr, rtol=1e-10)


def ill_conditioned(rng, rows=2000):
    """ADC-like counts near full scale, one channel in volts, and one channel
    nearly the sum of two others: ill-conditioned both by scale and by collinearity."""
    base = rng.normal(size=(rows, 3))
    y = np.column_stack(
        [
            30000 + 40 * base[:, 0],
            -12000 + 25 * base[:, 1],
            0.003 * base[:, 2],  # volts
            30000 + 40 * base[:, 0] - 12000 + 25 * base[:, 1] + 1e-3 * rng.normal(size=rows),
        ]
    )
    x = y @ np.array([[0.5, -1.0, 300.0, 0.25], [2.0, 0.1, -50.0, -1.5]]).T + 0.01 * rng.normal(size=(rows, 2))
    return y, x


def test_ill_conditioned_set_matches_numpy_lstsq():
    rng = np.random.default_rng(11)
    y, x = ill_conditioned(rng)
    design = np.column_stack([y, np.ones(len(y))])
    assert np.linalg.cond(design) >= 1e6  # the problem as numpy sees it
    solution, *_ = np.linalg.lstsq(design, x, rcond=None)
    model = quiet_fit((y, x), folds=0)
    # Solving from second moments squares the condition of the scaled
    # problem (here about 1e10, so about 1e-6 relative accuracy for the gains of
    # the collinear inputs); the scaling removes the part due to units and offsets.
    assert 1e6 < model.condition_number < 1e10
    scale = np.abs(solution[:-1].T).max(axis=1, keepdims=True)
    np.testing.assert_allclose(model.gain / scale, solution[:-1].T / scale, atol=1e-6)
    np.testing.assert_allclose(model.predict(y), design @ solution, rtol=1e-9, atol=1e-9)


def test_collinear_inputs_are_named_in_the_warning():
    rng = np.random.default_rng(11)
    y, x = ill_conditioned(rng)
    with pytest.warns(CollinearityWarning) as caught:
        affix.fit((y, x), folds=0)
    message = str(caught[0].message)
    assert "y1, y2, y4" in message and "y3" not in message


def test_ridge_matches_sklearn_ridge_on_variance_scaled_inputs():
    # Our ridge is relative: gain = S_xy (S_yy + ridge * diag(S_yy))^-1, so on
    # inputs divided by sqrt(diag(S_yy)) it is scikit-learn's Ridge(alpha=ridge).
    from sklearn.linear_model import Ridge

    rng = np.random.default_rng(5)
    y, x = ill_conditioned(rng, rows=500)
    scale = np.sqrt(((y - y.mean(axis=0)) ** 2).sum(axis=0))
    reference = Ridge(alpha=0.01).fit(y / scale, x)
    model = affix.fit((y, x), ridge=0.01, folds=0)
    np.testing.assert_allclose(model.gain, reference.coef_ / scale, rtol=1e-9)
    np.testing.assert_allclose(model.offset, reference.intercept_, rtol=1e-9)


def test_cross_validation_equals_refitting_each_fold_with_sklearn():
    from sklearn.linear_model import LinearRegression

    rng = np.random.default_rng(3)
    y = rng.normal(size=(503, 4))
    x = y @ rng.normal(size=(4, 2)) + rng.normal(size=(503, 2)) * [0.1, 2.0]
    model = affix.fit((y, x), folds=5)
    labels = fold_of(0, len(y), 5)
    errors = np.zeros_like(x)
    for f in range(5):
        held = labels == f
        reference = LinearRegression().fit(y[~held], x[~held])
        errors[held] = x[held] - reference.predict(y[held])
    np.testing.assert_allclose(model.cv_rms, np.sqrt((errors**2).mean(axis=0)), rtol=1e-10)
    assert np.all(model.cv_rms > model.rms)  # held-out error exceeds in-sample error


# --- the theory ------------------------------------------------------------


def residuals(model, y, x):
    return x - model.predict(y)


def test_residuals_have_zero_mean_and_are_orthogonal_to_every_input():
    # Normal equations of least squares (any regression text, e.g. Draper &
    # Smith, Applied Regression Analysis): with an intercept the residuals sum
    # to zero and are orthogonal to every regressor.
    rng = np.random.default_rng(8)
    y = rng.normal(loc=[1000.0, -20.0, 3.0], scale=[50.0, 2.0, 0.1], size=(4000, 3))
    x = np.column_stack([y @ [0.1, 2.0, -30.0], np.sin(y[:, 0] / 50)]) + rng.normal(size=(4000, 2))
    model = affix.fit((y, x), folds=0)
    e = residuals(model, y, x)
    assert np.all(np.abs(e.mean(axis=0)) < 1e-10 * np.abs(x).max(axis=0))
    centred = y - y.mean(axis=0)
    correlation = (centred.T @ e) / np.outer(np.linalg.norm(centred, axis=0), np.linalg.norm(e, axis=0))
    assert np.all(np.abs(correlation) < 1e-10)


def test_gaussian_monte_carlo_mse_matches_error_covariance():
    # For jointly Gaussian (y, x) the linear estimator is the MMSE estimator
    # and its error covariance is S_xx - S_xy S_yy^-1 S_yx (Kay, Fundamentals
    # of Statistical Signal Processing: Estimation Theory, 1993, ch. 10).
    rng = np.random.default_rng(21)
    m, n = 4, 3
    root = rng.normal(size=(m + n, m + n))
    covariance = root @ root.T + np.eye(m + n)
    mean = rng.normal(size=m + n) * 10
    fit_rows, test_rows = 200_000, 200_000
    train = rng.multivariate_normal(mean, covariance, size=fit_rows)
    model = affix.fit((train[:, :m], train[:, m:]), folds=0)
    test = rng.multivariate_normal(mean, covariance, size=test_rows)
    mse = (residuals(model, test[:, :m], test[:, m:]) ** 2).mean(axis=0)
    theory = np.diag(covariance[m:, m:] - covariance[m:, :m] @ np.linalg.solve(covariance[:m, :m], covariance[:m, m:]))
    # The MSE of Gaussian errors has relative standard error sqrt(2/N) ~ 0.3 %;
    # 5 standard errors of tolerance.
    tolerance = 5 * math.sqrt(2 / test_rows)
    np.testing.assert_allclose(mse, np.diag(model.error_covariance), rtol=tolerance)
    np.testing.assert_allclose(np.diag(model.error_covariance), theory, rtol=tolerance)


# --- refusals and adoption ---------------------------------------------------


@pytest.mark.bad_input("fit")
def test_singular_inputs_are_refused_with_a_ridge_suggestion_that_works():
    rng = np.random.default_rng(2)
    y = rng.normal(size=(100, 3))
    y[:, 2] = 2 * y[:, 0] - y[:, 1]
    x = y[:, :1] + rng.normal(size=(100, 1))
    with pytest.raises(FitError, match=r"inputs a, b, c .*pass ridge=(\S+)") as caught:
        affix.fit((y, x), ["a", "b", "c"], ["u"])
    assert "--" not in caught.value.message  # a Python caller is told the parameter, not the CLI option
    suggestion = float(caught.value.message.split("ridge=")[1].split()[0])
    model = affix.fit((y, x), ["a", "b", "c"], ["u"], ridge=suggestion)
    assert model.condition_number is None or model.condition_number > 1e12
    assert np.all(np.isfinite(model.gain))


def test_fitted_sklearn_models_are_adopted_with_their_feature_names():
    import pandas as pd
    from sklearn.linear_model import LinearRegression, Ridge

    rng = np.random.default_rng(4)
    frame = pd.DataFrame(rng.normal(size=(50, 3)), columns=["b1", "b2", "b3"])
    target = frame.to_numpy() @ [1.0, -2.0, 0.5] + 3.0
    several = LinearRegression().fit(frame, np.column_stack([target, -target]))
    model = affix.fit(several, outputs=["Fx", "Fy"])
    assert model.inputs == ("b1", "b2", "b3") and model.outputs == ("Fx", "Fy")
    np.testing.assert_array_equal(model.gain, several.coef_)
    np.testing.assert_array_equal(model.offset, several.intercept_)
    single = Ridge(alpha=0.1).fit(frame.to_numpy(), target)
    adopted = affix.fit(single)
    assert adopted.gain.shape == (1, 3) and adopted.inputs == ("y1", "y2", "y3")
    np.testing.assert_allclose(adopted.predict(frame.to_numpy())[:, 0], single.predict(frame.to_numpy()), rtol=1e-12)


def test_model_carries_the_input_moments_the_quantizer_needs():
    rng = np.random.default_rng(9)
    y = rng.normal(loc=5.0, size=(300, 2))
    x = y.sum(axis=1, keepdims=True)
    model = affix.fit((y, x))
    np.testing.assert_allclose(model.input_mean, y.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(model.input_covariance, np.cov(y, rowvar=False), rtol=1e-12)  # numpy's 1/(n-1)
    # The extremes of each input, for the coverage of a declared range: exactly numpy's.
    np.testing.assert_array_equal(model.input_min, y.min(axis=0))
    np.testing.assert_array_equal(model.input_max, y.max(axis=0))
    again = affix.Model.from_dict(model.to_dict())
    np.testing.assert_array_equal(again.input_covariance, model.input_covariance)
    np.testing.assert_array_equal(again.input_max, model.input_max)


@pytest.mark.bad_input("fit")
def test_a_spread_past_double_precision_is_refused_naming_the_column():
    # Every value is screened below 1e150, but over some 10^8 rows of such
    # values the sum of squared deviations passes float64's 1.8e308: moments
    # of that size stand in for a file of that size.
    from affix.errors import DataError
    from affix.fit.estimator import model_from_parts
    from affix.statistics import Moments

    huge = Moments(10**9, np.zeros(3), np.diag([1.0, np.inf, 1.0]), np.zeros(3), np.zeros(3))
    with pytest.raises(DataError, match=r"^log.csv, column 'y2': the sum of squared deviations overflows"):
        model_from_parts([huge], ["y1", "y2"], ["x"], ridge=0.0, folds=0, data_sha256=None, dropped_rows=0,
                         path="log.csv")


@pytest.mark.bad_input("fit")
@pytest.mark.parametrize("folds", [1, -1, 10_001, 10**12, 2.5, True])
def test_fold_counts_outside_2_to_max_folds_are_refused_before_any_work(folds):
    from affix.errors import UsageError

    y = np.random.default_rng(1).normal(size=(50, 2))
    with pytest.raises(UsageError, match=r"^folds: must be 0 \(no cross-validation\) or a whole number from 2 to 10000"):
        affix.fit((y, y.sum(axis=1)), folds=folds)


def test_many_folds_score_like_sklearn_refitting_each_fold():
    # 300 folds, past the int8 fold labels of old; the reference refits scikit-learn on each training split.
    from sklearn.linear_model import LinearRegression

    rng = np.random.default_rng(12)
    y = rng.normal(size=(900, 3))
    x = y @ rng.normal(size=(3, 2)) + rng.normal(size=(900, 2))
    model = affix.fit((y, x), folds=300)
    labels = fold_of(0, len(y), 300)
    assert labels.max() == 299
    errors = np.zeros_like(x)
    for f in range(300):
        held = labels == f
        errors[held] = x[held] - LinearRegression().fit(y[~held], x[~held]).predict(y[held])
    np.testing.assert_allclose(model.cv_rms, np.sqrt((errors**2).mean(axis=0)), rtol=1e-10)
