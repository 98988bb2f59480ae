"""The vectorised decay fitter used by the batch chain, against NIST StRD and scipy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import curve_fit
from strd import DATA_DIR, agreeing_digits, parse_strd

from uqreport.errors import InputError
from uqreport.models.decay import decay_curve, fit_decay


def test_misra1a_through_the_decay_fitter():
    """NIST StRD, Misra1a (certified values): y = b1 (1 - exp(-b2 x)) is the decay model with
    initial value a0 = 0 held fixed, baseline c = b1 and rate k = b2.  From Start 2
    (b1 = 250, b2 = 5e-4), >= 6 agreeing digits in parameters, standard deviations
    (residual-scaled covariance, as NIST reports) and residual SD."""
    ds = parse_strd(DATA_DIR / "Misra1a.dat")
    b1, b2 = ds.start2
    fit = fit_decay(ds.x[:, 0], ds.y, initial=0.0, start=[b1, 0.0, b2])
    assert fit.converged.all()
    est = np.array([fit.baseline[0], fit.rate[0]])
    sd = fit.std_errors(scaled=True)[0][[0, 2]]
    assert agreeing_digits(est, ds.certified_params).min() >= 6
    assert agreeing_digits(sd, ds.certified_sd).min() >= 6
    resid_sd = np.sqrt(fit.chi2[0] / fit.dof)
    assert agreeing_digits(resid_sd, ds.residual_sd) >= 6


def test_misra1a_from_grid_start():
    """Same certified values when the fitter chooses its own start (grid over k)."""
    ds = parse_strd(DATA_DIR / "Misra1a.dat")
    fit = fit_decay(ds.x[:, 0], ds.y, initial=0.0)
    assert agreeing_digits([fit.baseline[0], fit.rate[0]], ds.certified_params).min() >= 6


@pytest.mark.parametrize(
    ("baseline", "initial"), [(None, None), (0.05, None), (None, 0.8), (0.05, 0.8)]
)
def test_against_scipy_curve_fit(baseline, initial):
    """Weighted fits with fixed and free parameters against scipy.optimize.curve_fit with
    absolute_sigma=True (general-purpose reference library)."""
    rng = np.random.default_rng(3)
    t = np.arange(0.0, 601.0, 30.0)
    sig = 0.002 + 0.004 * np.exp(-0.004 * t)
    a = decay_curve(t, 0.05, 0.8, 0.004) + rng.normal(0, sig)
    fit = fit_decay(t, a, weights=1 / sig**2, baseline=baseline, initial=initial)

    def f(t, *p):
        it = iter(p)
        c = baseline if baseline is not None else next(it)
        a0 = initial if initial is not None else next(it)
        return decay_curve(t, c, a0, next(it))

    free = [baseline is None, initial is None, True]
    p0 = fit.params[0][free] * 1.05
    popt, pcov = curve_fit(f, t, a, p0=p0, sigma=sig, absolute_sigma=True, xtol=1e-14, ftol=1e-14)
    assert fit.params[0][free] == pytest.approx(popt, rel=1e-7)
    cov = fit.covariance[0][np.ix_(free, free)]
    assert cov == pytest.approx(pcov, rel=1e-5)


def test_vectorised_fit_equals_one_at_a_time():
    rng = np.random.default_rng(4)
    t = np.arange(0.0, 601.0, 30.0)
    A = decay_curve(t, 0.05, 0.8, 0.004) + rng.normal(0, 0.002, (50, t.size))
    many = fit_decay(t, A)
    for i in (0, 17, 49):
        one = fit_decay(t, A[i])
        assert many.params[i] == pytest.approx(one.params[0], rel=1e-9)


def test_times_may_differ_per_data_set():
    """A timing offset per data set (as Monte Carlo draws it) shifts t; with a0 free the
    rate is unchanged (the offset only rescales a0 - c)."""
    t = np.arange(0.0, 601.0, 30.0)
    a = decay_curve(t, 0.05, 0.8, 0.004)
    T = t[None, :] + np.array([[0.0], [7.0], [-3.0]])
    fit = fit_decay(T, a)
    assert fit.rate == pytest.approx([0.004] * 3, rel=1e-9)
    assert fit.initial[1] == pytest.approx(0.05 + 0.75 * np.exp(0.004 * 7.0), rel=1e-9)


def test_too_few_points_is_an_input_error():
    with pytest.raises(InputError, match="needs more than 3 points"):
        fit_decay([0.0, 1.0, 2.0], [1.0, 0.5, 0.25])
