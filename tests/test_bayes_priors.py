"""Prior densities against scipy.stats, and the likelihoods with the linear parameters
integrated out against closed forms and numerical integration."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from uqreport.bayes.likelihoods import (
    BlockDesign,
    LinearPrior,
    explicit_loglik,
    gaussian_logpdf,
    laplace_student,
    marginal_gaussian,
    student_logpdf,
)
from uqreport.bayes.priors import Prior, between_run_prior, noise_scale_prior, prior_from_input
from uqreport.errors import InputError
from uqreport.inputs import InputQuantity

X = np.linspace(-3.0, 3.0, 61)


@pytest.mark.parametrize(
    ("prior", "ref"),
    [
        (Prior("normal", 0.5, 1.2), stats.norm(0.5, 1.2)),
        (Prior("rectangular", 0.5, 2.0), stats.uniform(-1.5, 4.0)),
        (Prior("triangular", 0.5, 2.0), stats.triang(0.5, loc=-1.5, scale=4.0)),
        (Prior("arcsine", 0.5, 2.0), stats.arcsine(loc=-1.5, scale=4.0)),
        (Prior("t", 0.5, 0.7, 5.0), stats.t(5.0, 0.5, 0.7)),
        (Prior("halfnormal", 0.0, 1.5), stats.halfnorm(0.0, 1.5)),
    ],
)
def test_logpdf_matches_scipy(prior, ref):
    """Each density equals scipy.stats' (scipy reference implementation), -inf outside the
    support, and its sd matches."""
    with np.errstate(divide="ignore"):
        expect = ref.logpdf(X)
    got = prior.logpdf(X)
    inside = np.isfinite(expect) & (np.abs(X - prior.loc) < 0.999 * prior.scale * 10)
    if prior.kind == "arcsine":  # scipy's arcsine is finite on the closed interval
        inside &= np.abs(X - prior.loc) < prior.scale
    np.testing.assert_allclose(got[inside], expect[inside], rtol=1e-10, atol=1e-12)
    assert np.all(~np.isfinite(got[~np.isfinite(expect)]))
    assert prior.sd == pytest.approx(ref.std(), rel=1e-12)


def test_prior_from_input_keeps_the_stated_distribution():
    """A rectangular tolerance becomes a bounded uniform of the same half-width (GUM 4.3.7)."""
    q = InputQuantity.from_half_width("photometric_accuracy", 0.0, 0.005, "rectangular")
    p = prior_from_input(q)
    assert p.kind == "rectangular" and p.support == pytest.approx((-0.005, 0.005))
    qt = InputQuantity("lag/r1", 8.0, 3.0, distribution="t", dof=4.0)
    assert prior_from_input(qt) == Prior("t", 8.0, 3.0, 4.0)
    with pytest.raises(InputError, match=r"input 'x' has u = 0\.0: an exact value"):
        prior_from_input(InputQuantity("x", 1.0, 0.0))


@pytest.mark.parametrize(
    ("distribution", "divisor"),
    [("rectangular", math.sqrt(3.0)), ("triangular", math.sqrt(6.0)), ("arcsine", math.sqrt(2.0))],
)
def test_prior_from_input_given_by_u_recovers_the_half_width(distribution, divisor):
    """A bounded input stated by its standard uncertainty u keeps the support of half-width
    a = u x divisor (GUM 4.3.7 and 4.3.9: u = a/sqrt 3 rectangular, a/sqrt 6 triangular;
    JCGM 101 6.4.6: u = a/sqrt 2 arcsine), and the prior's sd is u again (scipy.stats)."""
    q = InputQuantity("tolerance", 2.0, 0.01, distribution=distribution)
    p = prior_from_input(q)
    assert p.kind == distribution
    assert p.support == pytest.approx((2.0 - 0.01 * divisor, 2.0 + 0.01 * divisor), rel=1e-12)
    ref = {
        "rectangular": stats.uniform(2.0 - 0.01 * divisor, 0.02 * divisor),
        "triangular": stats.triang(0.5, loc=2.0 - 0.01 * divisor, scale=0.02 * divisor),
        "arcsine": stats.arcsine(loc=2.0 - 0.01 * divisor, scale=0.02 * divisor),
    }[distribution]
    assert p.sd == pytest.approx(ref.std(), rel=1e-12)
    assert p.sd == pytest.approx(0.01, rel=1e-12)
    assert not np.isfinite(p.logpdf(2.0 + 0.0101 * divisor))


def test_log_halfnormal_prior_is_normalised_with_the_stated_sd():
    """The density of ln tau for a half-normal tau integrates to one and has sd pi/sqrt 8
    (the variance of ln|z| for a standard normal z is pi^2/8, from memory), checked by
    scipy.integrate.quad; its draws follow it (Kolmogorov-Smirnov against the transformed
    scipy.stats.halfnorm distribution function)."""
    p = between_run_prior(0.1, log_scale=True)

    def dens(u):
        return math.exp(float(p.logpdf(np.array(u))))

    lo, hi = math.log(0.1) - 25.0, math.log(0.1) + 3.0
    total, _ = integrate.quad(dens, lo, hi, limit=200)
    mean, _ = integrate.quad(lambda u: u * dens(u), lo, hi, limit=200)
    second, _ = integrate.quad(lambda u: u * u * dens(u), lo, hi, limit=200)
    assert total == pytest.approx(1.0, abs=1e-8)
    assert math.sqrt(second - mean**2) == pytest.approx(p.sd, rel=1e-6)
    x = p.sample(20_000, np.random.default_rng(9))
    ks = stats.kstest(np.exp(x), stats.halfnorm(0.0, 0.1).cdf)
    assert ks.pvalue > 0.01


def test_likelihood_terms_match_scipy():
    """The elementwise Gaussian and Student t log densities equal scipy.stats.norm and
    scipy.stats.t (scale sd, any dof), and a t with very many degrees of freedom is the
    Gaussian (the t tends to the normal as nu grows, from memory)."""
    r = np.linspace(-0.03, 0.03, 13)
    sd = np.full_like(r, 0.004)
    np.testing.assert_allclose(gaussian_logpdf(r, sd), stats.norm(0.0, 0.004).logpdf(r))
    for nu in (1.0, 2.5, 4.0, 30.0):
        np.testing.assert_allclose(
            student_logpdf(r, sd, nu), stats.t(nu, 0.0, 0.004).logpdf(r), rtol=1e-12
        )
    np.testing.assert_allclose(student_logpdf(r, sd, 1e9), gaussian_logpdf(r, sd), rtol=1e-6)


def test_model_priors():
    """Noise-scale prior: normal on ln s with sd equal to the stated reliability; GUM G.4.2
    nu = 0.5 (0.5)^-2 = 2 for the default (from the GUM, as cited in the docstring)."""
    p = noise_scale_prior()
    assert (p.kind, p.loc, p.scale) == ("normal", 0.0, 0.5)
    assert between_run_prior(0.1).support == (0.0, math.inf)
    with pytest.raises(InputError, match=r"noise prior width .* got -1"):
        noise_scale_prior(-1)
    with pytest.raises(InputError, match=r"prior kind 'gamma' is unknown"):
        Prior("gamma")


def _decay_problem(n=12, seed=3, outlier=0.0):
    rng = np.random.default_rng(seed)
    t = np.linspace(10.0, 400.0, n)
    k = 0.006
    e = np.exp(-k * t)
    y = 0.02 * (1 - e) + 0.8 * e + rng.normal(0.0, 0.004, n)
    y[n // 2] += outlier
    coef = np.stack([1 - e, e], axis=1)[None]  # (1, n, 2)
    sd = np.full((1, n), 0.004)
    design = BlockDesign(np.array([0]), np.array([[0, 1]]), 2, n)
    return y[None], coef, sd, design


def test_marginal_gaussian_proper_prior_is_a_normal_marginal():
    """With a Gaussian prior N(m, L^-1) the integral is the density of y under
    N(C m, Sigma + C L^-1 C') (linear-Gaussian identity, Bishop PRML eq. 2.115, from
    memory), evaluated with scipy.stats.multivariate_normal."""
    y, coef, sd, design = _decay_problem()
    m = np.array([0.01, 0.75])
    cov = np.diag([0.01**2, 0.05**2])
    prior = LinearPrior(m, np.linalg.inv(cov))
    C = coef[0]
    ref = stats.multivariate_normal(C @ m, np.diag(sd[0] ** 2) + C @ cov @ C.T).logpdf(y[0])
    for pr in (prior, prior.for_design(design)):  # dense and block fast paths
        got = marginal_gaussian(y, coef, sd, design, pr).loglik[0]
        assert got == pytest.approx(ref, rel=1e-10)


def test_marginal_gaussian_flat_prior_by_numerical_integration():
    """Flat (unit-density) prior: the integral over (A_inf, A_0) computed by
    scipy.integrate.dblquad; the conditional mode is the weighted least-squares solution."""
    y, coef, sd, design = _decay_problem(n=8)
    fit = marginal_gaussian(y, coef, sd, design, LinearPrior.flat(2).for_design(design))
    C = coef[0]
    b_ls = np.linalg.lstsq(C / sd[0][:, None], y[0] / sd[0], rcond=None)[0]
    np.testing.assert_allclose(fit.beta[0], b_ls, rtol=1e-9)
    cov = np.linalg.inv(C.T @ (C / sd[0][:, None] ** 2))
    s = np.sqrt(np.diag(cov))
    peak = float(explicit_loglik(y, coef, sd, design, b_ls[None])[0])

    def f(a0, ainf):
        b = np.array([[ainf, a0]])
        return math.exp(float(explicit_loglik(y, coef, sd, design, b)[0]) - peak)

    val, _ = integrate.dblquad(
        f,
        b_ls[0] - 9 * s[0],
        b_ls[0] + 9 * s[0],
        b_ls[1] - 9 * s[1],
        b_ls[1] + 9 * s[1],
        epsabs=0,
        epsrel=1e-9,
    )
    assert fit.loglik[0] == pytest.approx(peak + math.log(val), abs=1e-6)


def test_laplace_student_against_numerical_integration():
    """t likelihood (nu = 4) with one outlying reading: the Laplace value (observed curvature
    at the mode) is within 0.1 in log of the integral by scipy.integrate.dblquad, and the
    mode is not pulled by the outlier as the Gaussian solution is."""
    y, coef, sd, design = _decay_problem(n=15, outlier=0.05)
    prior = LinearPrior.flat(2).for_design(design)
    lap = laplace_student(y, coef, sd, design, prior, 4.0)
    gau = marginal_gaussian(y, coef, sd, design, prior)
    b = lap.beta[0]
    peak = float(explicit_loglik(y, coef, sd, design, b[None], likelihood="student")[0])

    def f(a0, ainf):
        bb = np.array([[ainf, a0]])
        return math.exp(
            float(explicit_loglik(y, coef, sd, design, bb, likelihood="student")[0]) - peak
        )

    s = 0.02
    val, _ = integrate.dblquad(f, b[0] - s, b[0] + s, b[1] - s, b[1] + s, epsrel=1e-8)
    assert lap.loglik[0] == pytest.approx(peak + math.log(val), abs=0.1)
    # the Gaussian solution is pulled towards the outlier, the t mode much less
    j = y.shape[1] // 2
    r_t = y[0, j] - coef[0, j] @ b
    r_g = y[0, j] - coef[0, j] @ gau.beta[0]
    assert r_t > r_g + 0.002  # the Gaussian pull is about the leverage (0.07) x 0.05 A
