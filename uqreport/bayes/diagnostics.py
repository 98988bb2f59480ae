"""Convergence and model-check diagnostics of an MCMC run.

* :func:`integrated_time`: the integrated autocorrelation time of each parameter, the
  estimator of emcee's ``emcee.autocorr.integrated_time`` (the autocorrelation function
  averaged over walkers, summed up to the first window M >= c tau(M), Sokal's rule with
  c = 5) computed for all walkers and parameters in one FFT.
* :func:`split_rhat`: the potential scale reduction factor over independently seeded
  ensembles, each split into its first and second halves (Gelman et al., Bayesian Data
  Analysis, 3rd ed., section 11.4).
* :func:`hdi`, :func:`equal_tailed`: highest-density and equal-tailed credible intervals.
* :func:`check_acceptance`: the acceptance fraction against the healthy 0.2-0.5.
* :func:`predictive_check`: the posterior predictive check of the readings.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import fft as sp_fft
from scipy import special

from ..errors import ConvergenceWarning, InputError

__all__ = [
    "ACCEPTANCE_RANGE",
    "Outlier",
    "PredictiveCheck",
    "check_acceptance",
    "equal_tailed",
    "hdi",
    "integrated_time",
    "predictive_check",
    "split_rhat",
]

#: Healthy range of the acceptance fraction of the stretch move (common practice).
ACCEPTANCE_RANGE = (0.2, 0.5)


def integrated_time(x: NDArray[np.float64], *, c: float = 5.0) -> NDArray[np.float64]:
    """Integrated autocorrelation time of each parameter of a chain (steps, walkers, ndim).

    A 1-D series is one walker and one parameter; a 2-D array is (steps, walkers) of one
    parameter.  Returns shape (ndim,).  A walker that never moves counts as perfectly
    correlated (its autocorrelation is 1 at every lag).  No length check: compare the
    result with the chain length yourself (the convergence rule does).
    """
    a = np.asarray(x, dtype=float)
    if a.ndim == 1:
        a = a[:, None, None]
    elif a.ndim == 2:
        a = a[:, :, None]
    if a.ndim != 3:
        raise InputError(f"integrated_time: expected (steps, walkers, ndim), got shape {a.shape}.")
    n = a.shape[0]
    if n < 2:
        return np.full(a.shape[2], np.nan)
    m = sp_fft.next_fast_len(2 * n - 1, real=True)  # zero padding: no wrap-around
    d = a - a.mean(axis=0, keepdims=True)
    f = sp_fft.rfft(d, n=m, axis=0)
    acf = sp_fft.irfft(f.real**2 + f.imag**2, n=m, axis=0)[:n]
    var = acf[0]
    stuck = ~(var > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        acf = np.where(stuck[None], 1.0, acf / np.where(stuck, 1.0, var)[None])
    rho = acf.mean(axis=1)  # (n, ndim): averaged over walkers
    taus = 2.0 * np.cumsum(rho, axis=0) - 1.0
    lags = np.arange(n)[:, None]
    below = lags < c * taus
    window = np.where(np.all(below, axis=0), n - 1, np.argmin(below, axis=0))
    return taus[window, np.arange(a.shape[2])]


def split_rhat(draws: NDArray[np.float64]) -> NDArray[np.float64]:
    """Split R-hat of each parameter from draws shaped (ensembles, steps, walkers, ndim).

    Each ensemble's kept steps are split into halves; each half, pooled over its walkers,
    is one sequence (the walkers of one ensemble are not independent chains, the ensembles
    are).  R-hat = sqrt(((n - 1)/n W + B/n) / W) with W the mean within-sequence variance
    and B/n the variance of the sequence means (BDA3 section 11.4, from memory).
    Needs at least 2 ensembles.
    """
    a = np.asarray(draws, dtype=float)
    if a.ndim != 4 or a.shape[0] < 2:
        raise InputError(
            "split R-hat needs draws shaped (ensembles >= 2, steps, walkers, ndim), got"
            f" shape {a.shape}. Fix: run several independently seeded ensembles (chains)."
        )
    E, S, Wk, d = a.shape
    half = S // 2
    if half < 2:
        raise InputError(f"split R-hat needs at least 4 kept steps per ensemble, got {S}.")
    seqs = np.concatenate([a[:, :half], a[:, S - half :]], axis=0)  # (2E, half, W, d)
    seqs = seqs.reshape(2 * E, half * Wk, d)
    n = seqs.shape[1]
    means = seqs.mean(axis=1)
    within = seqs.var(axis=1, ddof=1).mean(axis=0)
    between_n = means.var(axis=0, ddof=1)  # B / n
    with np.errstate(divide="ignore", invalid="ignore"):
        var_plus = (n - 1.0) / n * within + between_n
        r = np.sqrt(var_plus / within)
    return np.where(within > 0, r, np.nan)


def equal_tailed(draws: NDArray[np.float64], coverage: float) -> tuple[float, float]:
    """The equal-tailed credible interval: the (1 -/+ p)/2 quantiles of the draws."""
    y = np.asarray(draws, dtype=float).ravel()
    lo, hi = np.quantile(y, [(1.0 - coverage) / 2.0, (1.0 + coverage) / 2.0])
    return float(lo), float(hi)


def hdi(draws: NDArray[np.float64], coverage: float) -> tuple[float, float]:
    """The highest-density interval from draws: the shortest interval holding a share
    ``coverage`` of them (exact for a unimodal posterior)."""
    y = np.sort(np.asarray(draws, dtype=float).ravel())
    M = y.size
    if M < 2:
        raise InputError("an HDI needs at least 2 draws.")
    q = min(max(math.ceil(coverage * M), 1), M - 1)
    widths = y[q:] - y[: M - q]
    i = int(np.argmin(widths))
    return float(y[i]), float(y[i + q])


def check_acceptance(
    acceptance: NDArray[np.float64],
    *,
    healthy: tuple[float, float] = ACCEPTANCE_RANGE,
    warn: bool = True,
) -> tuple[bool, str]:
    """Whether each ensemble's mean acceptance fraction lies in ``healthy``.

    Returns (ok, message); when not ok and ``warn`` a
    :class:`~uqreport.errors.ConvergenceWarning` carries the message.
    """
    acc = np.atleast_2d(np.asarray(acceptance, dtype=float)).mean(axis=1)
    lo, hi = healthy
    bad = (acc < lo) | (acc > hi)
    if not np.any(bad):
        return True, ""
    vals = ", ".join(f"{a:.2f}" for a in acc)
    msg = f"MCMC acceptance fraction {vals} lies outside the healthy range {lo:g}-{hi:g}: " + (
        "proposals are rarely accepted, the walkers may be stuck (a multimodal or badly"
        " scaled posterior)."
        if np.any(acc < lo)
        else "the posterior is nearly Gaussian in few dimensions, where the stretch move"
        " accepts often; mixing is then still fine if tau is small."
    )
    if warn:
        warnings.warn(msg, ConvergenceWarning, stacklevel=2)
    return False, msg


@dataclass(frozen=True)
class Outlier:
    """A reading outside its posterior predictive distribution.

    Attributes
    ----------
    run, table, line:
        The run, the table file name and the file line number of the reading.
    observed:
        The reading.
    predicted:
        Posterior predictive median.
    p_value:
        Two-sided posterior predictive tail probability.
    """

    run: str
    table: str
    line: int
    observed: float
    predicted: float
    p_value: float

    def as_dict(self) -> dict[str, object]:
        return {
            "run": self.run,
            "table": self.table,
            "line": self.line,
            "observed": self.observed,
            "predicted": self.predicted,
            "p_value": self.p_value,
        }


@dataclass(frozen=True)
class PredictiveCheck:
    """Posterior predictive check of the readings.

    Attributes
    ----------
    coverage:
        Probability of the predictive band (0.95).
    n_readings, n_outside:
        Readings checked and readings outside their band.
    share_outside:
        n_outside / n_readings; near 1 - coverage when the model describes the readings.
    expected_share:
        1 - coverage: the nominal share outside (what the band's probability says).
    expected_share_fitted:
        The share of readings expected outside their band when the model describes them:
        below 1 - coverage, because each reading pulled the fit towards itself (the posterior
        predictive check is conservative, Gelman et al., BDA3 section 6.3).  Computed from
        each reading's leverage h_j (the posterior variance of its predicted mean over its
        noise variance) as the mean of 2 F(-q sqrt((1 + h_j)/(1 - h_j))), q the band's
        quantile: exact for a linear Gaussian model with known noise and flat priors (the
        residual has variance (1 - h) sigma^2, the predictive distribution (1 + h) sigma^2;
        standard least-squares results, from memory), an approximation otherwise.
    log_predictive_density:
        lppd = sum_j log mean_d p(y_j | draw d) (BDA3 section 7.1): higher is better when two
        likelihoods are compared on the same readings.
    p_values:
        Two-sided predictive tail probability of each reading, shape (n,).
    band_low, band_high:
        The predictive band of each reading, shape (n,).
    outlier_threshold:
        Readings with p below this are named (0.05 / n, a Bonferroni bound: with a correct
        model the chance that any reading is named is about 5 %).
    outliers:
        The named readings, most extreme first.
    """

    coverage: float
    n_readings: int
    n_outside: int
    share_outside: float
    expected_share: float
    log_predictive_density: float
    p_values: NDArray[np.float64]
    band_low: NDArray[np.float64]
    band_high: NDArray[np.float64]
    outlier_threshold: float
    outliers: tuple[Outlier, ...]
    expected_share_fitted: float = math.nan

    def as_dict(self) -> dict[str, object]:
        return {
            "coverage": self.coverage,
            "readings": self.n_readings,
            "outside": self.n_outside,
            "share_outside": self.share_outside,
            "expected_share": self.expected_share,
            "expected_share_fitted": self.expected_share_fitted,
            "log_predictive_density": self.log_predictive_density,
            "outlier_threshold": self.outlier_threshold,
            "outliers": [o.as_dict() for o in self.outliers],
        }


def predictive_check(
    observed: NDArray[np.float64],
    mean: NDArray[np.float64],
    sd: NDArray[np.float64],
    *,
    runs: Sequence[str],
    tables: Sequence[str],
    lines: Sequence[int],
    rng: np.random.Generator,
    likelihood: str = "gaussian",
    dof: float = 4.0,
    coverage: float = 0.95,
    alpha: float = 0.05,
) -> PredictiveCheck:
    """Posterior predictive check from per-draw predictive means and sds, shape (D, n).

    The tail probability of each reading is the draw average of the predictive distribution
    function (Gaussian or scaled t) for the lower tail and of the survival function for the
    upper tail, so that small probabilities are resolved in both; the band is
    the central ``coverage`` interval of replicated readings drawn once per posterior draw.
    """
    y = np.asarray(observed, dtype=float)
    z = (y[None, :] - mean) / sd
    if likelihood == "student":
        F = special.stdtr(float(dof), z).mean(axis=0)
        Fc = special.stdtr(float(dof), -z).mean(axis=0)
        eps = rng.standard_t(float(dof), mean.shape)
        logp = (
            special.gammaln(0.5 * (dof + 1.0))
            - special.gammaln(0.5 * dof)
            - 0.5 * math.log(dof * math.pi)
            - np.log(sd)
            - 0.5 * (dof + 1.0) * np.log1p(z * z / dof)
        )
    else:
        F = special.ndtr(z).mean(axis=0)
        Fc = special.ndtr(-z).mean(axis=0)
        eps = rng.standard_normal(mean.shape)
        logp = -0.5 * z * z - np.log(sd) - 0.5 * math.log(2.0 * math.pi)
    # both tails from their own distribution function: 1 - F loses every digit below about
    # 1e-16, so a reading far above its prediction would tie with any other such reading
    p = np.clip(2.0 * np.minimum(F, Fc), 0.0, 1.0)
    rep = mean + sd * eps
    lo, hi = np.quantile(rep, [(1.0 - coverage) / 2.0, (1.0 + coverage) / 2.0], axis=0)
    med = np.median(mean, axis=0)
    D = mean.shape[0]
    lppd = float(np.sum(special.logsumexp(logp, axis=0) - math.log(D)))
    outside = p < 1.0 - coverage
    n = y.size
    expected = _expected_share(mean, sd, likelihood, float(dof), coverage)
    thr = alpha / n
    idx = np.flatnonzero(p < thr)
    idx = idx[np.argsort(p[idx])]
    outliers = tuple(
        Outlier(
            str(runs[i]), str(tables[i]), int(lines[i]), float(y[i]), float(med[i]), float(p[i])
        )
        for i in idx
    )
    return PredictiveCheck(
        coverage=float(coverage),
        n_readings=int(n),
        n_outside=int(outside.sum()),
        share_outside=float(outside.mean()),
        expected_share=float(1.0 - coverage),
        log_predictive_density=lppd,
        p_values=p,
        band_low=lo,
        band_high=hi,
        outlier_threshold=float(thr),
        outliers=outliers,
        expected_share_fitted=expected,
    )


def _expected_share(
    mean: NDArray[np.float64],
    sd: NDArray[np.float64],
    likelihood: str,
    dof: float,
    coverage: float,
) -> float:
    """Share of readings expected outside their predictive band (see
    :attr:`PredictiveCheck.expected_share_fitted`), from the leverages of the draws (D, n)."""
    student = likelihood == "student"
    noise_var = np.mean(sd * sd, axis=0)
    if student:
        noise_var = noise_var * (dof / (dof - 2.0) if dof > 2.0 else math.inf)
    with np.errstate(divide="ignore", invalid="ignore"):
        h = np.clip(np.var(mean, axis=0) / noise_var, 0.0, 0.99)
    h = np.where(np.isfinite(h), h, 0.0)
    factor = np.sqrt((1.0 + h) / (1.0 - h))
    if student:
        q = float(special.stdtrit(dof, 0.5 * (1.0 + coverage)))
        tail = special.stdtr(dof, -q * factor)
    else:
        q = float(special.ndtri(0.5 * (1.0 + coverage)))
        tail = special.ndtr(-q * factor)
    return float(np.mean(2.0 * tail))
