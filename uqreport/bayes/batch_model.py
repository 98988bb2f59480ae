"""The batch chain's log-posterior, vectorised over walkers.

Readings of run r (raw absorbances y_j at recorded times t_j, nominal pathlength ratio f_j
to the run's first cuvette) are modelled as

    y_j = O_r + f_j [b_r (1 - e_j) + g_r e_j] + error_j,    e_j = exp(-k'_r (t_j + lag_r))

with O_r the sum of the absorbance offsets of the run (blank, photometric accuracy), b_r and
g_r the baseline A_inf and the initial absorbance A_0 net of the offsets, in the units of the
run's first cuvette.  The error has variance s_r^2 sigma_j^2 + (dA/dt)_j^2 u_jit,j^2: the
instrument's noise model sigma_j scaled by the run's noise scale s_r, plus the timing jitter
as an effective variance, with dA/dt = -k'_r f_j (g_r - b_r) e_j taken at the run's
least-squares amplitude g_r - b_r (known to better than 1 %, so the effective variance is
known to better than 2 %; this keeps b_r and g_r linear).

Sampled (nonlinear) parameters: ln k'_r (or, hierarchical, ln k~, tau and eta_r with
k'_r = k~ c_r exp(tau eta_r)), ln s_r, the lag of each run when A_0 is fixed from the
concentration (a constant lag cancels otherwise), and the offsets when they do not cancel
(baseline "zero", or A_0 fixed).  The linear parameters b_r, g_r are integrated out
(exactly for Gaussian errors, by Laplace for t errors, see :mod:`.likelihoods`) or sampled
(``linear="sampled"``).  Their priors: flat when fitted or free; N(A_fin - O_r, u_fin^2)
for a measured baseline; for A_0 fixed from the concentration a joint normal whose mean and
covariance are those of l eps [D]0 under the inputs (linear propagation; the runs share eps
and the dye stock, so the prior couples them).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np
from numpy.typing import NDArray

from .likelihoods import (
    BlockDesign,
    LinearFit,
    LinearPrior,
    explicit_loglik,
    laplace_student,
    marginal_gaussian,
    marginal_gaussian_loglik,
)
from .priors import Prior

__all__ = ["LIKELIHOODS", "LINEAR_MODES", "PARAMETRISATIONS", "BatchPosterior"]

LIKELIHOODS = ("gaussian", "student")
LINEAR_MODES = ("marginalised", "sampled")
PARAMETRISATIONS = ("centred", "non-centred")


@dataclass(frozen=True)
class BatchPosterior:
    """The log-posterior of the batch chain's readings (call it on (W, ndim) positions).

    Attributes
    ----------
    names, priors, units:
        Name, prior and unit of each sampled parameter.
    start, scale:
        Least-squares start and a rough posterior sd of each parameter.
    likelihood, dof:
        ``"gaussian"`` or ``"student"`` and the t's degrees of freedom.
    hierarchical, parametrisation:
        Whether the runs' k'_r are drawn from a population, and how: ``"centred"`` (ln k'_r
        and ln tau sampled, ln k~ integrated out of the normal population term) or
        ``"non-centred"`` (ln k~, ln tau and eta_r sampled, k'_r = k~ c_r exp(tau eta_r)).
    linear:
        ``"marginalised"`` or ``"sampled"`` (A_0 and A_inf of each run).
    runs:
        Run names.
    y, run_index, times, ratio, sigma, jitter_u:
        Per reading: raw absorbance, run, recorded time, pathlength ratio f_j, instrument sd
        sigma_j, jitter u (s).
    tables, lines:
        Per reading: table file name and line number.
    amplitude:
        Least-squares g_r - b_r of each run (A).
    time_origin:
        Nominal lag of each run (s).
    offset_nominal:
        Nominal O_r of each run.
    offset_inputs, offset_members:
        Names of sampled offset inputs and their (n_off, R) membership in each run's O_r.
    design, linear_prior, linear_names:
        Where the linear parameters enter, their prior and names.
    baseline_mean, baseline_columns:
        Measured final absorbance of each run and the column of its b_r (measured baseline).
    rate_factor:
        c_r = [OH]_r / (temperature and scatter factors), nominal: k'_r = k c_r.
    ratio_final:
        Pathlength ratio of each run's final-absorbance cuvette to its first one.
    index:
        Positions of the parameter families in the parameter vector.
    notes:
        Plain-words notes on approximations that applied.
    """

    names: tuple[str, ...]
    priors: tuple[Prior, ...]
    units: tuple[str, ...]
    start: NDArray[np.float64]
    scale: NDArray[np.float64]
    likelihood: str
    dof: float
    hierarchical: bool
    parametrisation: str
    linear: str
    runs: tuple[str, ...]
    y: NDArray[np.float64]
    run_index: NDArray[np.intp]
    times: NDArray[np.float64]
    ratio: NDArray[np.float64]
    sigma: NDArray[np.float64]
    jitter_u: NDArray[np.float64]
    tables: tuple[str, ...]
    lines: tuple[int, ...]
    amplitude: NDArray[np.float64]
    time_origin: NDArray[np.float64]
    offset_nominal: NDArray[np.float64]
    offset_inputs: tuple[str, ...]
    offset_members: NDArray[np.float64]
    design: BlockDesign
    linear_prior: LinearPrior
    linear_names: tuple[str, ...]
    baseline_mean: NDArray[np.float64]
    baseline_columns: NDArray[np.intp]
    rate_factor: NDArray[np.float64]
    ratio_final: NDArray[np.float64]
    index: dict[str, NDArray[np.intp]] = field(default_factory=dict)
    notes: tuple[str, ...] = ()

    @property
    def ndim(self) -> int:
        return len(self.names)

    # -- parameters -> model pieces --------------------------------------------------------
    def rates(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """k'_r (W, R) at positions theta (W, ndim)."""
        ix = self.index
        with np.errstate(over="ignore"):
            if self.hierarchical and self.parametrisation == "non-centred":
                tau = np.exp(theta[:, ix["tau"]])
                eta = theta[:, ix["eta"]]
                return np.exp(theta[:, ix["log_k"]] + np.log(self.rate_factor)[None, :] + tau * eta)
            return np.exp(theta[:, ix["log_kp"]])

    def _pieces(
        self, theta: NDArray[np.float64]
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
        """(y - O (W, n) or (n,), coef (W, n, 2), sd (W, n), O (W, R)) at theta."""
        ix = self.index
        W = theta.shape[0]
        r = self.run_index
        k = self.rates(theta)[:, r]
        if ix["lag_runs"].size:
            lag = np.broadcast_to(self.time_origin, (W, len(self.runs))).copy()
            lag[:, ix["lag_runs"]] = theta[:, ix["lag"]]
            t = self.times + lag[:, r]
        else:
            t = self._t_nominal
        if ix["offset"].size:
            O = theta[:, ix["offset"]] @ self.offset_members
            yc = self.y - O[:, r]
        else:
            O = np.broadcast_to(self.offset_nominal, (W, len(self.runs)))
            yc = self._y_nominal
        with np.errstate(over="ignore", invalid="ignore", under="ignore"):
            fe = self.ratio * np.exp(-k * t)
            coef = np.empty((W, r.size, 2))
            coef[..., 1] = fe
            np.subtract(self.ratio, fe, out=coef[..., 0])
            s = np.exp(theta[:, ix["log_s"]])[:, r] * self.sigma
            slope = k * fe * self._amp_jit
            sd = np.sqrt(s * s + slope * slope)
        return yc, coef, sd, O

    @cached_property
    def _t_nominal(self) -> NDArray[np.float64]:
        return self.times + self.time_origin[self.run_index]

    @cached_property
    def _y_nominal(self) -> NDArray[np.float64]:
        return self.y - self.offset_nominal[self.run_index]

    @cached_property
    def _amp_jit(self) -> NDArray[np.float64]:
        return self.amplitude[self.run_index] * self.jitter_u

    def _linear_prior(self, O: NDArray[np.float64]) -> LinearPrior:
        """The linear prior; a measured baseline's mean moves with the sampled offsets."""
        if not self.baseline_columns.size or not self.index["offset"].size:
            return self.linear_prior
        mean = np.broadcast_to(self.linear_prior.mean, (O.shape[0], self.design.n_params)).copy()
        cols = self.baseline_columns
        runs = np.flatnonzero(cols >= 0)
        mean[:, cols[runs]] = (self.baseline_mean[runs][None, :] - O[:, runs]) / self.ratio_final[
            runs
        ][None, :]
        return replace(self.linear_prior, mean=mean, block_mean=None)

    def linear_fit(self, theta: NDArray[np.float64]) -> tuple[LinearFit, NDArray[np.float64]]:
        """The linear parameters given theta (marginalised mode) and O (W, R)."""
        yc, coef, sd, O = self._pieces(theta)
        prior = self._linear_prior(O)
        if self.likelihood == "student":
            return laplace_student(yc, coef, sd, self.design, prior, self.dof), O
        return marginal_gaussian(yc, coef, sd, self.design, prior), O

    # -- densities ----------------------------------------------------------------------
    def log_prior_terms(
        self, theta: NDArray[np.float64], *, relax_bounded: bool = False
    ) -> NDArray[np.float64]:
        """log prior of each sampled parameter, shape (W, ndim)."""
        out = np.zeros_like(theta)
        normal, loc, inv, const, other = self._prior_plan
        if normal.size:
            z = (theta[:, normal] - loc) * inv
            out[:, normal] = -0.5 * z * z + const
        for i in other:  # loop over the few parameters with other priors
            p = self.priors[i]
            q = p.relaxed() if relax_bounded else p
            out[:, i] = q.logpdf(theta[:, i])
        return out

    @cached_property
    def _prior_plan(
        self,
    ) -> tuple[
        NDArray[np.intp],
        NDArray[np.float64],
        NDArray[np.float64],
        NDArray[np.float64],
        tuple[int, ...],
    ]:
        """Normal priors evaluated together; flat ones contribute 0; the rest one by one."""
        normal = [i for i, p in enumerate(self.priors) if p.kind == "normal"]
        other = tuple(i for i, p in enumerate(self.priors) if p.kind not in ("normal", "flat"))
        loc = np.array([self.priors[i].loc for i in normal])
        sc = np.array([self.priors[i].scale for i in normal])
        const = -np.log(sc) - 0.5 * math.log(2.0 * math.pi) if normal else np.zeros(0)
        return np.array(normal, dtype=np.intp), loc, 1.0 / sc if normal else sc, const, other

    def log_likelihood(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """log p(readings | theta) (linear parameters integrated out or taken from theta)."""
        if self.linear == "sampled":
            yc, coef, sd, O = self._pieces(theta)
            beta = theta[:, self.index["linear"]]
            ll = explicit_loglik(
                yc, coef, sd, self.design, beta, likelihood=self.likelihood, dof=self.dof
            )
            return ll + self._linear_prior(O).log_density(beta)
        yc, coef, sd, O = self._pieces(theta)
        prior = self._linear_prior(O)
        if self.likelihood == "student":
            return laplace_student(yc, coef, sd, self.design, prior, self.dof).loglik
        return marginal_gaussian_loglik(yc, coef, sd, self.design, prior)

    def log_hierarchy(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """The population term of the centred hierarchy with ln k~ integrated out.

        With d_r = ln k'_r - ln c_r and a flat prior on ln k~, the integral of
        prod_r N(d_r; ln k~, tau^2) over ln k~ is
        (2 pi tau^2)^(-(R-1)/2) R^(-1/2) exp(-S / (2 tau^2)), S = sum_r (d_r - mean d)^2
        (the Gaussian integral); ln k~ is then drawn per posterior draw from
        N(mean d, tau^2 / R).  Zero in the non-centred form, which carries the population in
        the eta_r priors."""
        if not (self.hierarchical and self.parametrisation == "centred"):
            return np.zeros(theta.shape[0])
        ix = self.index
        log_tau = theta[:, ix["tau"][0]]
        d = theta[:, ix["log_kp"]] - np.log(self.rate_factor)
        R = d.shape[1]
        S = np.sum((d - d.mean(axis=1, keepdims=True)) ** 2, axis=1)
        with np.errstate(over="ignore", invalid="ignore"):
            val = -0.5 * S * np.exp(-2.0 * log_tau) - (R - 1) * log_tau
        const = -0.5 * (R - 1) * math.log(2 * math.pi) - 0.5 * math.log(R)
        return np.where(np.isfinite(val), val + const, -np.inf)

    def population_log_rate(
        self, theta: NDArray[np.float64], rng: np.random.Generator
    ) -> NDArray[np.float64]:
        """ln k~ per draw (D,): sampled (non-centred) or drawn from its conditional
        N(mean d, tau^2 / R) given the draw (centred)."""
        ix = self.index
        if "log_k" in ix:
            return theta[:, ix["log_k"][0]]
        d = theta[:, ix["log_kp"]] - np.log(self.rate_factor)
        tau = np.exp(theta[:, ix["tau"][0]])
        return d.mean(axis=1) + tau / math.sqrt(d.shape[1]) * rng.standard_normal(d.shape[0])

    def log_posterior(
        self, theta: NDArray[np.float64], *, relax_bounded: bool = False
    ) -> NDArray[np.float64]:
        theta = np.atleast_2d(np.asarray(theta, dtype=float))
        lp = self.log_prior_terms(theta, relax_bounded=relax_bounded).sum(axis=1)
        lp = lp + self.log_hierarchy(theta)
        ok = np.isfinite(lp)
        out = np.full(theta.shape[0], -np.inf)
        if np.any(ok):
            ll = self.log_likelihood(theta[ok])
            out[ok] = np.where(np.isfinite(ll), lp[ok] + ll, -np.inf)
        return out

    def __call__(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        return self.log_posterior(theta)

    def relaxed(self, theta: NDArray[np.float64]) -> NDArray[np.float64]:
        """The log-posterior with bounded priors relaxed to flat (for the support check)."""
        return self.log_posterior(theta, relax_bounded=True)

    # -- draws ----------------------------------------------------------------------------
    def predictive(
        self, theta: NDArray[np.float64], rng: np.random.Generator
    ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
        """Per draw: predicted mean (D, n), sd (D, n), linear parameters (D, P), O (D, R).

        In the marginalised mode the linear parameters are drawn from their conditional
        posterior given theta (exact for Gaussian errors, Laplace for t errors).
        """
        _, coef, sd, O = self._pieces(theta)
        if self.linear == "sampled":
            beta = theta[:, self.index["linear"]]
        else:
            fit, _ = self.linear_fit(theta)
            beta = fit.draw(rng)
        mean = O[:, self.run_index] + self.design.predict(coef, beta)
        return mean, sd, beta, O

    def diagnose(self, theta: NDArray[np.float64]) -> str:
        """Plain words naming what makes the log-posterior zero at ``theta`` (ndim,)."""
        x = np.asarray(theta, dtype=float)[None, :]
        terms = self.log_prior_terms(x)[0]
        bad = [i for i in range(self.ndim) if not np.isfinite(terms[i])]
        if bad:
            return "; ".join(
                f"parameter '{self.names[i]}' = {x[0, i]:.6g} "
                + (
                    f"lies outside its prior ({self.priors[i].describe()})"
                    if np.isfinite(x[0, i])
                    else "is not a finite number"
                )
                for i in bad
            )
        _, _, sd, _ = self._pieces(x)
        runs = sorted({self.runs[r] for r in self.run_index[~np.isfinite(sd[0]) | (sd[0] <= 0)]})
        if runs:
            return (
                "the readings' standard deviation is zero or not finite in run(s) "
                + ", ".join(f"'{r}'" for r in runs)
                + " (parameters "
                + ", ".join(f"'log_noise_scale/{r}'" for r in runs)
                + "). Fix: give spectrophotometer.noise_sd > 0."
            )
        return (
            "the log-likelihood of the readings is not finite at "
            + ", ".join(f"{n} = {v:.6g}" for n, v in zip(self.names, x[0], strict=True))
            + ". Fix: check the readings and the fit window."
        )
