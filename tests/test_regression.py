"""Regression core: GUM Annex H.3, scipy cross-checks, prediction bands, batching, bad input."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import optimize, stats

from uqreport.errors import ConvergenceWarning, InputError, ModelError
from uqreport.regression import (
    LinearFit,
    NonlinearFit,
    batched_linear_least_squares,
    linear_least_squares,
    nonlinear_least_squares,
    polynomial_design,
    predict,
    straight_line,
)

# JCGM 100:2008 (GUM), Annex H.3, thermometer calibration: t_k / degC and b_k / degC.
H3_T = np.array(
    [21.521, 22.012, 22.512, 23.003, 23.507, 23.999, 24.513, 25.002, 25.503, 26.010, 26.511]
)
H3_B = np.array(
    [-0.171, -0.169, -0.166, -0.159, -0.164, -0.165, -0.156, -0.157, -0.159, -0.161, -0.160]
)
H3_T0 = 20.0


@pytest.fixture
def h3_fit() -> LinearFit:
    return straight_line(H3_T, H3_B, x0=H3_T0)


# ------------------------------------------------------------------ GUM Annex H.3


def test_gum_h3_published_digits(h3_fit):
    # JCGM 100:2008 (GUM), Annex H.3 (published values, checked to the printed digits).
    fit = h3_fit
    pred = predict(fit, 30.0)
    assert fit.n == 11 and fit.dof == 9
    assert fit.params[0] == pytest.approx(-0.1712, abs=0.5e-4)  # y1 / degC
    assert fit.std_errors[0] == pytest.approx(0.0029, abs=0.5e-4)
    assert fit.params[1] == pytest.approx(0.00218, abs=0.5e-5)  # y2 / degC^-1
    assert fit.std_errors[1] == pytest.approx(0.00067, abs=0.5e-5)
    assert fit.correlation[0, 1] == pytest.approx(-0.930, abs=0.5e-3)
    # s = 0.0035 degC: published value as recalled from memory, not re-read from the text.
    assert fit.residual_sd == pytest.approx(0.0035, abs=0.5e-4)
    assert pred.value[0] == pytest.approx(-0.1494, abs=0.5e-4)  # b(30 degC)
    assert pred.u_confidence[0] == pytest.approx(0.0041, abs=0.5e-4)


def test_gum_h3_full_precision(h3_fit):
    # JCGM 100:2008 (GUM), Annex H.3 data, full-precision values recomputed independently
    # (u of the predicted correction = sqrt(g^T C g), residual-scaled covariance).  Each
    # value must round to the digits given: tolerance half a unit in the last digit.
    fit = h3_fit
    pred = predict(fit, 30.0)
    assert fit.covariance_kind == "scaled"
    assert fit.params[0] == pytest.approx(-0.171203790, abs=0.5e-9)
    assert fit.std_errors[0] == pytest.approx(0.00287760, abs=0.5e-8)
    assert fit.params[1] == pytest.approx(0.002182698, abs=0.5e-9)
    assert fit.std_errors[1] == pytest.approx(0.00066794, abs=0.5e-8)
    assert fit.correlation[0, 1] == pytest.approx(-0.93043, abs=0.5e-5)
    assert fit.residual_sd == pytest.approx(0.0034976, abs=0.5e-7)
    assert pred.value[0] == pytest.approx(-0.149377, abs=0.5e-6)
    assert pred.u_confidence[0] == pytest.approx(0.0041386, abs=0.5e-7)


# ------------------------------------------------------------------ scipy cross-checks


def _decay(t, q):
    return q[0] * np.exp(-q[1] * t) + q[2]


def _decay_jac(t, q):
    e = np.exp(-q[1] * t)
    return np.column_stack([e, -q[0] * t * e, np.ones_like(t)])


def _decay_problem():
    # A small weighted exponential decay; sigma grows with the signal (a relative error).
    rng = np.random.default_rng(7)
    t = np.linspace(0.0, 4.0, 15)
    truth = np.array([1.8, 0.9, 0.12])
    sigma = 0.01 + 0.02 * _decay(t, truth)
    y = _decay(t, truth) + rng.normal(0.0, sigma)
    return t, y, sigma, np.array([1.0, 0.5, 0.0])


@pytest.mark.parametrize("absolute_sigma", [True, False])
@pytest.mark.parametrize("analytic", [True, False])
def test_nonlinear_matches_scipy_curve_fit(absolute_sigma, analytic):
    # Reference: scipy.optimize.curve_fit (general-purpose library), tight tolerances.
    t, y, sigma, p0 = _decay_problem()
    fit = nonlinear_least_squares(
        _decay,
        t,
        y,
        p0,
        jacobian=_decay_jac if analytic else None,
        sigma=sigma,
        absolute_sigma=absolute_sigma,
    )
    popt, pcov = optimize.curve_fit(
        lambda tt, a, k, c: _decay(tt, [a, k, c]),
        t,
        y,
        p0=p0,
        sigma=sigma,
        absolute_sigma=absolute_sigma,
        jac=lambda tt, a, k, c: _decay_jac(tt, [a, k, c]),
        xtol=1e-15,
        ftol=1e-15,
        gtol=1e-15,
    )
    np.testing.assert_allclose(fit.params, popt, rtol=1e-9, atol=0.0)
    np.testing.assert_allclose(fit.covariance, pcov, rtol=1e-6, atol=0.0)
    assert fit.covariance_kind == ("known_sigma" if absolute_sigma else "scaled")
    other = fit.covariance_scaled if absolute_sigma else fit.covariance_known_sigma
    ratio = fit.reduced_chi2 if absolute_sigma else 1.0 / fit.reduced_chi2
    np.testing.assert_allclose(other, fit.covariance * ratio, rtol=1e-12, atol=0.0)
    assert fit.chi2 == pytest.approx(np.sum(((y - _decay(t, popt)) / sigma) ** 2), rel=1e-9)


@pytest.mark.parametrize("absolute_sigma", [True, False])
def test_linear_matches_scipy_curve_fit(absolute_sigma):
    # Reference: scipy.optimize.curve_fit on a weighted quadratic (linear in the parameters).
    rng = np.random.default_rng(11)
    x = np.linspace(-1.0, 3.0, 12)
    sigma = 0.05 + 0.03 * np.abs(x)
    y = 0.4 - 1.3 * x + 0.25 * x**2 + rng.normal(0.0, sigma)
    fit = linear_least_squares(
        polynomial_design(x, 2), y, sigma=sigma, absolute_sigma=absolute_sigma
    )
    popt, pcov = optimize.curve_fit(
        lambda xx, a, b, c: a + b * xx + c * xx**2,
        x,
        y,
        sigma=sigma,
        absolute_sigma=absolute_sigma,
        jac=lambda xx, a, b, c: polynomial_design(xx, 2),
        xtol=1e-15,
        ftol=1e-15,
        gtol=1e-15,
    )
    np.testing.assert_allclose(fit.params, popt, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(fit.covariance, pcov, rtol=1e-9, atol=0.0)


# ------------------------------------------------------------------ prediction bands


def test_straight_line_bands_match_hand_formulas(h3_fit):
    # Independent hand computation: the closed-form straight-line formulas
    # u_conf = s sqrt(1/n + (x - xbar)^2 / Sxx), u_pred = s sqrt(1 + 1/n + (x - xbar)^2 / Sxx),
    # coverage factor from Student t with n - 2 degrees of freedom (scipy.stats.t).
    x_new = np.array([18.0, 21.0, 24.0, 30.0])
    pred = predict(h3_fit, x_new, level=0.95)
    n = H3_T.size
    xbar = H3_T.mean()
    sxx = np.sum((H3_T - xbar) ** 2)
    slope = np.sum((H3_T - xbar) * (H3_B - H3_B.mean())) / sxx
    intercept = H3_B.mean() - slope * xbar
    s = np.sqrt(np.sum((H3_B - intercept - slope * H3_T) ** 2) / (n - 2))
    u_conf = s * np.sqrt(1.0 / n + (x_new - xbar) ** 2 / sxx)
    u_pred = s * np.sqrt(1.0 + 1.0 / n + (x_new - xbar) ** 2 / sxx)
    k = stats.t.ppf(0.975, n - 2)
    np.testing.assert_allclose(pred.value, intercept + slope * x_new, rtol=1e-10, atol=0.0)
    np.testing.assert_allclose(pred.u_confidence, u_conf, rtol=1e-10, atol=0.0)
    np.testing.assert_allclose(pred.u_prediction, u_pred, rtol=1e-10, atol=0.0)
    assert pred.dof == n - 2
    assert pred.coverage_factor == pytest.approx(k, rel=1e-12)
    np.testing.assert_allclose(
        pred.confidence_upper - pred.confidence_lower, 2 * k * u_conf, rtol=1e-10, atol=0.0
    )
    np.testing.assert_allclose(
        pred.prediction_upper - pred.prediction_lower, 2 * k * u_pred, rtol=1e-10, atol=0.0
    )


def test_known_sigma_line_bands_match_hand_formulas():
    # Independent hand computation, weighted line with known sigma: with S = sum w,
    # xw = sum(w x) / S, Sxx = sum w (x - xw)^2, u_conf^2 = 1/S + (x - xw)^2 / Sxx; normal k.
    x = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 5.0])
    y = np.array([0.11, 0.98, 2.07, 2.95, 4.02, 5.10])
    sigma = np.array([0.05, 0.05, 0.04, 0.04, 0.06, 0.08])
    fit = straight_line(x, y, sigma=sigma, absolute_sigma=True)
    x_new = np.array([-1.0, 2.5, 7.0])
    pred = predict(fit, x_new, level=0.90, sigma_new=0.03)
    w = 1.0 / sigma**2
    xw = np.sum(w * x) / np.sum(w)
    sxx = np.sum(w * (x - xw) ** 2)
    u_conf = np.sqrt(1.0 / np.sum(w) + (x_new - xw) ** 2 / sxx)
    assert fit.covariance_kind == "known_sigma" and pred.dof == np.inf
    assert pred.coverage_factor == pytest.approx(stats.norm.ppf(0.95), rel=1e-12)
    np.testing.assert_allclose(pred.u_confidence, u_conf, rtol=1e-10, atol=0.0)
    np.testing.assert_allclose(pred.u_prediction, np.hypot(u_conf, 0.03), rtol=1e-12, atol=0.0)


def test_constant_known_sigma_is_the_default_new_observation_uncertainty():
    x = np.arange(8.0)
    y = 2.0 + 0.5 * x + np.array([0.1, -0.2, 0.05, 0.0, 0.15, -0.1, 0.02, -0.03])
    fit = straight_line(x, y, sigma=0.1)
    pred = predict(fit, [3.5])
    np.testing.assert_allclose(pred.u_observation, [0.1], rtol=1e-15, atol=0.0)
    varying = straight_line(x, y, sigma=np.linspace(0.1, 0.2, 8))
    with pytest.raises(InputError, match=r"sigma_new: the fit used per-point sigma that vary"):
        predict(varying, [3.5])


def test_nonlinear_prediction_matches_linear_fit_of_the_same_model():
    # Cross-check of the nonlinear path (numerical sensitivities) against the linear one.
    x = np.linspace(0.0, 2.0, 9)
    y = 1.0 + 0.3 * x - 0.4 * x**2 + np.array([3, -2, 1, 0, -1, 2, -3, 1, 0]) * 1e-2
    lin = linear_least_squares(polynomial_design(x, 2), y)
    nl = nonlinear_least_squares(lambda xx, q: q[0] + q[1] * xx + q[2] * xx**2, x, y, [0, 0, 0])
    assert isinstance(nl, NonlinearFit)
    np.testing.assert_allclose(nl.params, lin.params, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(nl.covariance, lin.covariance, rtol=1e-8, atol=0.0)
    x_new = np.array([-0.5, 1.0, 2.5])
    p_lin = predict(lin, polynomial_design(x_new, 2))
    p_nl = predict(nl, x_new)
    np.testing.assert_allclose(p_nl.value, p_lin.value, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(p_nl.u_confidence, p_lin.u_confidence, rtol=1e-7, atol=0.0)
    np.testing.assert_allclose(p_nl.u_prediction, p_lin.u_prediction, rtol=1e-7, atol=0.0)


def test_nonlinear_prediction_numerical_vs_analytic_sensitivities():
    t, y, sigma, p0 = _decay_problem()
    with_jac = nonlinear_least_squares(_decay, t, y, p0, jacobian=_decay_jac, sigma=sigma)
    x_new = np.array([0.5, 3.0, 6.0])
    pa = predict(with_jac, x_new, sigma_new=0.02)
    pn = predict(with_jac, x_new, model=_decay, sigma_new=0.02)  # model given: numerical g
    np.testing.assert_allclose(pa.sensitivities, _decay_jac(x_new, with_jac.params), rtol=1e-14)
    np.testing.assert_allclose(pn.sensitivities, pa.sensitivities, rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(pn.u_confidence, pa.u_confidence, rtol=1e-8, atol=0.0)


# ------------------------------------------------------------------ batched refits


def test_batched_shared_design_equals_loop():
    rng = np.random.default_rng(3)
    x = np.linspace(0.0, 10.0, 7)
    X = polynomial_design(x, 2, centre=5.0)
    sigma = 0.1 + 0.01 * x
    Y = 1.0 + 0.2 * x - 0.03 * x**2 + rng.normal(0.0, 0.1, size=(5, x.size))
    got = batched_linear_least_squares(X, Y, sigma=sigma)
    want = np.array([linear_least_squares(X, yk, sigma=sigma).params for yk in Y])
    assert got.shape == (5, 3)
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-14)


def test_batched_per_draw_design_and_sigma_equals_loop():
    rng = np.random.default_rng(4)
    x = np.linspace(1.0, 4.0, 6) + rng.normal(0.0, 0.05, size=(4, 6))  # x drawn too
    X = np.stack([polynomial_design(xk, 1) for xk in x])
    S = 0.05 + rng.uniform(0.0, 0.05, size=(4, 6))
    Y = 0.5 + 2.0 * x + rng.normal(0.0, 0.05, size=(4, 6))
    got = batched_linear_least_squares(X, Y, sigma=S)
    want = np.array([linear_least_squares(X[k], Y[k], sigma=S[k]).params for k in range(4)])
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-14)
    shared = batched_linear_least_squares(X[0], Y, sigma=S)  # shared design, per-draw sigma
    want0 = np.array([linear_least_squares(X[0], Y[k], sigma=S[k]).params for k in range(4)])
    np.testing.assert_allclose(shared, want0, rtol=1e-12, atol=1e-14)


# ------------------------------------------------------------------ results and bad input


def test_results_are_read_only_and_leave_inputs_writable():
    X = polynomial_design(np.arange(5.0), 1)
    sigma = np.full(5, 0.2)
    fit = linear_least_squares(X, np.arange(5.0) * 2.0 + 1.0, sigma=sigma)
    assert sigma.flags.writeable and X.flags.writeable
    with pytest.raises(ValueError, match="read-only"):
        fit.params[0] = 0.0


def test_rank_deficient_design_raises():
    x = np.arange(6.0)
    X = np.column_stack([np.ones(6), x, 2.0 * x])
    with pytest.raises(InputError, match=r"design: the design matrix is rank deficient \(rank 2"):
        linear_least_squares(X, x)
    with pytest.raises(InputError, match=r"column 1 is all zeros"):
        linear_least_squares(np.column_stack([np.ones(6), np.zeros(6)]), x)
    with pytest.raises(InputError, match=r"design: the design matrix is rank deficient"):
        batched_linear_least_squares(X, np.tile(x, (3, 1)))


def test_too_few_observations_raise():
    with pytest.raises(InputError, match=r"y: 2 observation\(s\) for 2 parameter\(s\)"):
        straight_line([1.0, 2.0], [3.0, 4.0])
    with pytest.raises(InputError, match=r"y: 3 observation\(s\) for 3 parameter\(s\)"):
        nonlinear_least_squares(_decay, [0.0, 1.0, 2.0], [1.0, 0.5, 0.3], [1.0, 1.0, 0.0])


def test_nan_in_y_raises():
    with pytest.raises(InputError, match=r"y: 1 value\(s\) are NaN or infinite"):
        straight_line([1.0, 2.0, 3.0, 4.0], [1.0, np.nan, 3.0, 4.0])


def test_bad_sigma_raises():
    x, y = [1.0, 2.0, 3.0, 4.0], [1.0, 2.1, 2.9, 4.2]
    with pytest.raises(
        InputError, match=r"sigma: standard uncertainties must be positive, got -0\.1 at index 2"
    ):
        straight_line(x, y, sigma=[0.1, 0.1, -0.1, 0.1])
    with pytest.raises(InputError, match=r"sigma: expected a scalar or one value per observation"):
        straight_line(x, y, sigma=[0.1, 0.1])
    with pytest.raises(InputError, match=r"y: length 3 does not match the 4 rows of design"):
        linear_least_squares(polynomial_design(x, 1), y[:3])


def test_bad_level_and_degree_raise(h3_fit):
    with pytest.raises(InputError, match=r"level: must lie strictly between 0 and 1, got 95"):
        predict(h3_fit, 25.0, level=95)
    with pytest.raises(InputError, match=r"degree: expected an integer >= 0, got 1\.5"):
        polynomial_design([1.0, 2.0], 1.5)


def test_nonlinear_model_problems_raise_model_error():
    x = np.linspace(0.0, 1.0, 6)
    y = 1.0 + x
    with pytest.raises(ModelError, match=r"Jacobian at the solution .* is singular"):
        # a and b only enter as their product: not separately identifiable
        nonlinear_least_squares(lambda xx, q: q[0] * q[1] * xx + 1.0, x, y, [1.0, 2.0])
    with (
        np.errstate(divide="ignore", invalid="ignore"),
        pytest.raises(ModelError, match=r"model: non-finite values at the starting point"),
    ):
        nonlinear_least_squares(lambda xx, q: np.log(q[0]) * xx + q[1], x, y, [0.0, 0.0])
    with pytest.raises(InputError, match=r"p0: \[5\.0, 0\.0\] lies outside bounds"):
        nonlinear_least_squares(
            lambda xx, q: q[0] * xx + q[1], x, y, [5.0, 0.0], bounds=([0.0, -1.0], [2.0, 1.0])
        )


def test_bounded_fit_and_max_nfev_warning():
    t, y, sigma, p0 = _decay_problem()
    free = nonlinear_least_squares(_decay, t, y, p0, jacobian=_decay_jac, sigma=sigma)
    bounded = nonlinear_least_squares(
        _decay, t, y, p0, jacobian=_decay_jac, sigma=sigma, bounds=(0.0, np.inf)
    )
    np.testing.assert_allclose(bounded.params, free.params, rtol=1e-8, atol=0.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        with pytest.warns(ConvergenceWarning, match=r"stopped after \d+ model evaluations"):
            fit = nonlinear_least_squares(_decay, t, y, p0, jacobian=_decay_jac, max_nfev=2)
    assert not fit.success and fit.status == 0
