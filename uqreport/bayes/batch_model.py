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

from ..chains.batch import BatchChain
from ..errors import InputError
from ..model import MeasurementModel
from ..propagation import propagate_linear
from .likelihoods import (
    BlockDesign,
    LinearFit,
    LinearPrior,
    explicit_loglik,
    laplace_student,
    marginal_gaussian,
    marginal_gaussian_loglik,
)
from .priors import Prior, between_run_prior, noise_scale_prior, prior_from_input

__all__ = ["LIKELIHOODS", "LINEAR_MODES", "BatchPosterior", "build_batch_posterior"]

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
                f"parameter '{self.names[i]}' = {x[0, i]:.6g} lies outside its prior"
                f" ({self.priors[i].describe()})"
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


# -- construction ---------------------------------------------------------------------------
def _initial_prior(chain: BatchChain, ref_path: list[int]) -> tuple[NDArray, NDArray]:
    """Mean and covariance of g_r = l_ref eps [D]0 over the runs (linear propagation)."""
    runs = chain.study.runs

    def fn(X: NDArray[np.float64]) -> NDArray[np.float64]:
        return np.column_stack(
            [X[:, ref_path[j]] * run.initial(X) for j, run in enumerate(runs)]  # type: ignore[misc]
        )

    m = MeasurementModel(
        chain.model.inputs,
        tuple(f"initial/{r.name}" for r in runs),
        fn,
        name="batch initial absorbance",
    )
    lin = propagate_linear(m)
    return np.asarray(lin.values, dtype=float), np.asarray(lin.covariance, dtype=float)


def build_batch_posterior(
    chain: BatchChain,
    *,
    likelihood: str = "gaussian",
    student_dof: float = 4.0,
    hierarchical: bool = False,
    parametrisation: str = "centred",
    linear: str = "marginalised",
    noise_prior_width: float = 0.5,
    between_prior_scale: float = 0.1,
) -> BatchPosterior:
    """The :class:`BatchPosterior` of a batch chain (see the module docstring)."""
    if likelihood not in LIKELIHOODS:
        raise InputError(
            f"likelihood = {likelihood!r} is unknown. Fix: use 'gaussian' or 'student'."
        )
    if not (student_dof > 0 and math.isfinite(student_dof)):
        raise InputError(
            f"student_dof = {student_dof!r}: the t's degrees of freedom must be a finite number"
            " > 0. Fix: use e.g. 4 (robust) or larger for tails closer to Gaussian."
        )
    if linear not in LINEAR_MODES:
        raise InputError(f"linear = {linear!r} is unknown. Fix: use 'marginalised' or 'sampled'.")
    inputs = chain.model.inputs
    xval = inputs.values
    runs = chain.study.runs
    R = len(runs)
    fits = {f.name: f for f in chain.fits}
    if parametrisation not in PARAMETRISATIONS:
        raise InputError(
            f"parametrisation = {parametrisation!r} is unknown. Fix: use 'centred' or"
            " 'non-centred'."
        )
    if hierarchical and R < 2:
        raise InputError(
            f"hierarchical = True needs at least 2 runs, the chain has {R}."
            " Fix: use hierarchical = False."
        )
    notes: list[str] = []
    fixed_initial = runs[0].initial is not None
    zero_baseline = runs[0].baseline == "zero"
    measured = runs[0].baseline == "measured"

    # readings
    ys, rix, ts, fr, sg, ju, tabs, lns = [], [], [], [], [], [], [], []
    amp = np.empty(R)
    origin = np.empty(R)
    onom = np.empty(R)
    ref_path: list[int] = []
    ratio_final = np.ones(R)
    base_mean = np.zeros(R)
    base_u = np.zeros(R)
    for j, run in enumerate(runs):  # loop over runs
        fit = fits[run.name]
        used_lines = fit.lines[fit.used]
        paths = xval[run.pathlength]
        ref_path.append(int(run.pathlength[0]))
        ratio = paths / paths[0]
        if np.ptp(ratio) > 0:
            notes.append(
                f"run {run.name}: readings in cuvettes of different pathlength; their ratios"
                " are taken at the nominal values."
            )
        ys.append(xval[run.reading])
        rix.append(np.full(run.reading.size, j))
        ts.append(np.asarray(run.times, dtype=float))
        fr.append(ratio)
        if fit.noise_source == "residuals":
            sg.append(fit.sigma / fit.noise_scale)
            notes.append(
                f"run {run.name}: the chain took the noise from the residuals; the Bayesian"
                " model uses the noise model with the lag jitter at its nominal fit as"
                " sigma_j and lets the run's noise scale absorb the excess."
            )
        else:
            sg.append(inputs.u[run.reading])
        ju.append(inputs.u[run.jitter] if run.jitter is not None else np.zeros(run.reading.size))
        tabs.extend([fit.table] * run.reading.size)
        lns.extend(int(x) for x in used_lines)
        amp[j] = fit.params[1] - fit.params[0]
        origin[j] = fit.time_origin
        onom[j] = float(sum(xval[i] for i in run.offsets))
        if measured and run.final_absorbance is not None and run.final_pathlength is not None:
            ratio_final[j] = xval[run.final_pathlength] / paths[0]
            base_mean[j] = xval[run.final_absorbance]
            base_u[j] = inputs.u[run.final_absorbance]
    y = np.concatenate(ys)
    sigma = np.concatenate(sg)
    if not np.all(np.isfinite(sigma) & (sigma > 0)):
        bad = sorted({runs[r].name for r in np.concatenate(rix)[~(sigma > 0)]})
        raise InputError(
            "the readings' noise standard deviation is zero or not finite in run(s) "
            + ", ".join(f"'{b}'" for b in bad)
            + " (parameter 'log_noise_scale/<run>' cannot scale it). Fix: give"
            " spectrophotometer.noise_sd > 0 (the instrument's noise at low absorbance)."
        )

    # nonlinear parameters
    names: list[str] = []
    priors: list[Prior] = []
    units: list[str] = []
    start: list[float] = []
    scale: list[float] = []

    def add(name: str, prior: Prior, unit: str, x0: float, s0: float) -> int:
        names.append(name)
        priors.append(prior)
        units.append(unit)
        start.append(float(x0))
        scale.append(float(s0))
        return len(names) - 1

    kp0 = np.array([fits[r.name].params[2] for r in runs])
    u_lnk = np.array([math.sqrt(fits[r.name].covariance[2, 2]) for r in runs]) / kp0
    x_nom = xval[None, :]
    k_nom = chain.study.combine(kp0[None, :], x_nom)[0, 2 * R : 3 * R]
    rate_factor = kp0 / k_nom
    index: dict[str, NDArray[np.intp]] = {}
    if hierarchical:
        w = 1.0 / u_lnk**2
        lnk = np.log(k_nom)
        ln_pop = float(np.sum(w * lnk) / np.sum(w))
        tau0 = 0.5 * between_run_prior(between_prior_scale).scale
        if parametrisation == "non-centred":
            index["log_k"] = np.array(
                [
                    add(
                        "log_rate_constant_population",
                        Prior("flat"),
                        "ln(L/(mol*s))",
                        ln_pop,
                        float(np.sqrt(1.0 / np.sum(w)) + tau0 / math.sqrt(R)),
                    )
                ]
            )
        index["tau"] = np.array(
            [
                add(
                    "log_between_run_spread",
                    between_run_prior(between_prior_scale, log_scale=True),
                    "ln(1)",
                    math.log(tau0),
                    1.0,
                )
            ]
        )
        if parametrisation == "non-centred":
            index["eta"] = np.array(
                [
                    add(
                        f"eta/{r.name}",
                        Prior("normal", 0.0, 1.0),
                        "1",
                        float((lnk[j] - ln_pop) / tau0),
                        1.0,
                    )
                    for j, r in enumerate(runs)
                ]
            )
    if not hierarchical or parametrisation == "centred":
        index["log_kp"] = np.array(
            [
                add(
                    f"log_pseudo_rate_constant/{r.name}",
                    Prior("flat"),
                    "ln(1/s)",
                    math.log(kp0[j]),
                    u_lnk[j],
                )
                for j, r in enumerate(runs)
            ]
        )
    noise = noise_scale_prior(noise_prior_width)
    index["log_s"] = np.array(
        [
            add(f"log_noise_scale/{r.name}", noise, "1", 0.0, 1.0 / math.sqrt(2.0 * r.reading.size))
            for r in runs
        ]
    )
    lag_runs = [j for j, r in enumerate(runs) if fixed_initial and r.lag is not None]
    index["lag_runs"] = np.array(lag_runs, dtype=np.intp)
    lag_idx = []
    for j in lag_runs:
        q = inputs.inputs[runs[j].lag]  # type: ignore[index]
        p = prior_from_input(q)
        lag_idx.append(add(q.name, p, q.unit, q.value, min(p.sd, q.u)))
    index["lag"] = np.array(lag_idx, dtype=np.intp)
    off_inputs: list[int] = []
    if zero_baseline or fixed_initial:
        off_inputs = sorted({i for r in runs for i in r.offsets})
    members = np.zeros((len(off_inputs), R))
    off_idx = []
    for a, i in enumerate(off_inputs):
        q = inputs.inputs[i]
        p = prior_from_input(q)
        off_idx.append(add(q.name, p, q.unit, q.value, min(p.sd, q.u)))
        for j, r in enumerate(runs):
            members[a, j] = 1.0 if i in r.offsets else 0.0
    index["offset"] = np.array(off_idx, dtype=np.intp)

    # linear parameters: columns per run (b_r, g_r); -1 where b_r is fixed at zero
    lin_names: list[str] = []
    cols = np.full((R, 2), -1, dtype=np.intp)
    for j, r in enumerate(runs):
        if not zero_baseline:
            cols[j, 0] = len(lin_names)
            lin_names.append(f"absorbance_infinity/{r.name}")
        cols[j, 1] = len(lin_names)
        lin_names.append(f"absorbance_zero/{r.name}")
    P = len(lin_names)
    counts = np.array([r.reading.size for r in runs])
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.intp)
    design = BlockDesign(starts, cols, P, int(counts.sum()))
    mean = np.zeros(P)
    prec = np.zeros((P, P))
    base_cols = cols[:, 0] if measured else np.array([], dtype=np.intp)
    if measured:
        for j in range(R):
            c = cols[j, 0]
            mean[c] = (base_mean[j] - onom[j]) / ratio_final[j]
            prec[c, c] = (ratio_final[j] / base_u[j]) ** 2
    if fixed_initial:
        g_mean, g_cov = _initial_prior(chain, ref_path)
        gc = cols[:, 1]
        mean[gc] = g_mean
        w_, v_ = np.linalg.eigh(g_cov)
        floor = 1e-12 * max(float(np.max(w_)), 1e-300)
        prec[np.ix_(gc, gc)] = (v_ / np.maximum(w_, floor)) @ v_.T
    lprior = LinearPrior(mean, prec).for_design(design)
    if linear == "sampled":
        lin_idx = []
        for j, r in enumerate(runs):
            cov = fits[r.name].covariance
            if cols[j, 0] >= 0:
                lin_idx.append(
                    add(
                        lin_names[cols[j, 0]],
                        Prior("flat"),
                        "1",
                        fits[r.name].params[0],
                        math.sqrt(cov[0, 0]),
                    )
                )
            lin_idx.append(
                add(
                    lin_names[cols[j, 1]],
                    Prior("flat"),
                    "1",
                    fits[r.name].params[1],
                    math.sqrt(cov[1, 1]),
                )
            )
        # the order of lin_idx follows lin_names (run by run, b then g)
        index["linear"] = np.array(lin_idx, dtype=np.intp)
    if likelihood == "student" and linear == "marginalised":
        notes.append(
            "Student t likelihood: A_0 and A_inf are integrated out by the Laplace method"
            " (the mode exact, the curvature from the Fisher information)."
        )
    return BatchPosterior(
        names=tuple(names),
        priors=tuple(priors),
        units=tuple(units),
        start=np.array(start),
        scale=np.array(scale),
        likelihood=likelihood,
        dof=float(student_dof),
        hierarchical=bool(hierarchical),
        parametrisation=parametrisation,
        linear=linear,
        runs=tuple(r.name for r in runs),
        y=y,
        run_index=np.concatenate(rix).astype(np.intp),
        times=np.concatenate(ts),
        ratio=np.concatenate(fr),
        sigma=sigma,
        jitter_u=np.concatenate(ju),
        tables=tuple(tabs),
        lines=tuple(lns),
        amplitude=amp,
        time_origin=origin,
        offset_nominal=onom,
        offset_inputs=tuple(inputs.inputs[i].name for i in off_inputs),
        offset_members=members,
        design=design,
        linear_prior=lprior,
        linear_names=tuple(lin_names),
        baseline_mean=base_mean,
        baseline_columns=base_cols,
        rate_factor=rate_factor,
        ratio_final=ratio_final,
        index=index,
        notes=tuple(notes),
    )
