"""Posterior results: per-quantity summaries, settings, diagnostics and the draws.

:class:`PosteriorResult` is what :func:`uqreport.bayes.batch_posterior` returns.  Its
``as_dict()`` is JSON-safe (infinities as the string ``"inf"``, NaN as ``None``), its
``save_draws()`` writes every draw to a ``.npz`` file and ``to_netcdf()`` writes an
ArviZ-readable NetCDF file when the optional extra ``uqreport[bayes]`` (ArviZ) is installed.
"""

from __future__ import annotations

import io
import math
import os
import tempfile
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..io import atomic_write_bytes
from .diagnostics import PredictiveCheck, equal_tailed, hdi, integrated_time, split_rhat

__all__ = [
    "REPORTED_COVERAGES",
    "CredibleInterval",
    "PosteriorResult",
    "PosteriorSettings",
    "PosteriorSummary",
    "SamplerDiagnostics",
    "json_safe",
    "summarise",
]

#: Coverage probabilities every summary stores (one standard deviation and 95 %).
REPORTED_COVERAGES = (0.6827, 0.95)

#: R-hat above this marks a quantity as not converged (common practice: 1.01).
RHAT_LIMIT = 1.01


def json_safe(value: Any) -> Any:
    """``value`` with numpy types made plain, infinities as ``"inf"``/``"-inf"``, NaN as None."""
    if isinstance(value, Mapping):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    if isinstance(value, np.ndarray):
        return json_safe(value.tolist())
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if math.isnan(v):
            return None
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return v
    return value


@dataclass(frozen=True)
class CredibleInterval:
    """Credible intervals of one quantity at one coverage probability.

    Attributes
    ----------
    coverage:
        The probability content.
    low, high:
        Equal-tailed interval: the (1 - p)/2 and (1 + p)/2 posterior quantiles.
    hdi_low, hdi_high:
        Highest-density interval: the shortest interval holding probability p.
    """

    coverage: float
    low: float
    high: float
    hdi_low: float
    hdi_high: float

    def as_dict(self) -> dict[str, float]:
        return {
            "coverage": self.coverage,
            "low": self.low,
            "high": self.high,
            "hdi_low": self.hdi_low,
            "hdi_high": self.hdi_high,
        }


@dataclass(frozen=True)
class PosteriorSummary:
    """The posterior of one quantity.

    Attributes
    ----------
    name, unit:
        The quantity's name (as in results.json) and unit.
    median, mean, sd:
        Posterior median, mean and standard deviation.
    coverage, low, high, hdi_low, hdi_high:
        The equal-tailed and highest-density intervals at the requested coverage.
    intervals:
        The intervals at every coverage of :data:`REPORTED_COVERAGES` (and the requested one).
    ess:
        Effective sample size of the draws (summed over ensembles).
    tau:
        Integrated autocorrelation time in sampler steps (largest over ensembles).
    rhat:
        Split R-hat over the ensembles, ``None`` with one ensemble.
    converged:
        The run met the convergence rule, the chain is longer than 50 tau of this quantity
        and R-hat (when computed) is below 1.01.
    """

    name: str
    unit: str
    median: float
    mean: float
    sd: float
    coverage: float
    low: float
    high: float
    hdi_low: float
    hdi_high: float
    intervals: tuple[CredibleInterval, ...]
    ess: float
    tau: float
    rhat: float | None
    converged: bool

    def interval(self, coverage: float) -> CredibleInterval:
        """The stored intervals at ``coverage`` (one of :attr:`intervals`)."""
        for c in self.intervals:
            if abs(c.coverage - coverage) < 1e-9:
                return c
        raise KeyError(f"no interval stored at coverage {coverage}")

    def as_dict(self) -> dict[str, Any]:
        """The ``bayes`` record of results.json for this quantity."""
        return json_safe(
            {
                "median": self.median,
                "mean": self.mean,
                "sd": self.sd,
                "low": self.low,
                "high": self.high,
                "coverage": self.coverage,
                "hdi_low": self.hdi_low,
                "hdi_high": self.hdi_high,
                "ess": self.ess,
                "tau": self.tau,
                "rhat": self.rhat,
                "converged": self.converged,
                "intervals": [c.as_dict() for c in self.intervals],
            }
        )


def summarise(
    name: str,
    unit: str,
    draws: NDArray[np.float64],
    *,
    coverage: float,
    thin: int,
    chain_steps: int,
    run_converged: bool,
    tol: float = 50.0,
    tau: float | None = None,
    ess: float | None = None,
) -> PosteriorSummary:
    """Summary of one quantity from its draws shaped (ensembles, kept steps, walkers).

    ``thin`` converts the autocorrelation time of the kept (thinned) draws into sampler
    steps; ``chain_steps`` is the length of the post-burn-in chain, compared with ``tol``
    tau.  ``tau`` and ``ess`` may be given (for sampled parameters, from the unthinned
    chain); otherwise they are estimated from the draws.
    """
    a = np.asarray(draws, dtype=float)
    flat = a.ravel()
    if tau is None or ess is None:
        taus = np.array([integrated_time(a[e])[0] for e in range(a.shape[0])])
        taus = np.where(np.isfinite(taus), np.maximum(taus, 1.0), float(a.shape[1]))
        ess = float(np.sum(a.shape[1] * a.shape[2] / taus))
        tau = float(np.max(taus) * thin)
    rhat = float(split_rhat(a[..., None])[0]) if a.shape[0] >= 2 else None
    covs = sorted({*REPORTED_COVERAGES, float(coverage)})
    ivals = []
    for c in covs:
        lo, hi = equal_tailed(flat, c)
        hlo, hhi = hdi(flat, c)
        ivals.append(CredibleInterval(c, lo, hi, hlo, hhi))
    req = next(c for c in ivals if abs(c.coverage - coverage) < 1e-12)
    ok = bool(run_converged and chain_steps > tol * tau)
    if rhat is not None and not (rhat < RHAT_LIMIT):
        ok = False
    return PosteriorSummary(
        name=name,
        unit=unit,
        median=float(np.median(flat)),
        mean=float(np.mean(flat)),
        sd=float(np.std(flat, ddof=1)),
        coverage=float(coverage),
        low=req.low,
        high=req.high,
        hdi_low=req.hdi_low,
        hdi_high=req.hdi_high,
        intervals=tuple(ivals),
        ess=float(ess),
        tau=float(tau),
        rhat=rhat,
        converged=ok,
    )


@dataclass(frozen=True)
class PosteriorSettings:
    """How the posterior was sampled.

    Attributes
    ----------
    walkers, chains:
        Walkers per ensemble and independently seeded ensembles.
    steps, discard, thin:
        Steps per ensemble, burn-in discarded, thinning of the kept draws.
    max_steps, check_interval:
        The step cap and the block length between convergence checks.
    seed:
        The integer seed given as ``rng`` (``None`` when a Generator or nothing was given).
    ensemble_seeds:
        The seed of each ensemble's RandomState, drawn from the Generator.
    likelihood, student_dof:
        ``"gaussian"`` or ``"student"`` and the t's degrees of freedom.
    hierarchical, parametrisation, linear:
        The hierarchical option, its parametrisation, and how A_0, A_inf were handled.
    coverage:
        The requested coverage probability.
    noise_prior_width, between_prior_scale:
        sd of ln s in the noise-scale prior, scale of the half-normal between-run prior.
    moves:
        The ensemble moves.
    """

    walkers: int
    chains: int
    steps: int
    discard: int
    thin: int
    max_steps: int
    check_interval: int
    seed: int | None
    ensemble_seeds: tuple[int, ...]
    likelihood: str
    student_dof: float
    hierarchical: bool
    parametrisation: str
    linear: str
    coverage: float
    noise_prior_width: float
    between_prior_scale: float
    moves: str

    def as_dict(self) -> dict[str, Any]:
        return json_safe(dict(self.__dict__))


@dataclass(frozen=True)
class SamplerDiagnostics:
    """Diagnostics of the run.

    Attributes
    ----------
    converged:
        The convergence rule was met (chain > 50 tau, tau settled to 1 %).
    tau, ess, rhat:
        Per sampled parameter: autocorrelation time (steps), effective sample size, split
        R-hat (``None`` with one ensemble).
    acceptance:
        Mean acceptance fraction of each ensemble.
    acceptance_ok:
        Whether every ensemble's acceptance lies in 0.2-0.5.
    tau_history:
        (steps, largest tau) after each block.
    messages:
        Warnings issued (acceptance, convergence) and notes on approximations.
    """

    converged: bool
    tau: Mapping[str, float]
    ess: Mapping[str, float]
    rhat: Mapping[str, float] | None
    acceptance: tuple[float, ...]
    acceptance_ok: bool
    tau_history: tuple[tuple[int, float], ...]
    messages: tuple[str, ...] = ()

    def as_dict(self) -> dict[str, Any]:
        return json_safe(
            {
                "converged": self.converged,
                "tau": dict(self.tau),
                "ess": dict(self.ess),
                "rhat": None if self.rhat is None else dict(self.rhat),
                "acceptance": list(self.acceptance),
                "acceptance_ok": self.acceptance_ok,
                "tau_history": [list(h) for h in self.tau_history],
                "messages": list(self.messages),
            }
        )


@dataclass(frozen=True)
class PosteriorResult:
    """The Bayesian answer for one chain.

    Attributes
    ----------
    quantities:
        Posterior of every output of the chain's model (results.json names), plus, with the
        hierarchical option, ``second_order_rate_constant_population`` and
        ``between_run_spread``.
    parameters:
        Posterior of every sampled parameter and of the nuisance quantities derived from
        them (``noise_scale/<run>``, ``absorbance_zero/<run>``, ``absorbance_infinity/<run>``).
    parameter_names:
        The sampled parameters, in the column order of :attr:`draws`.
    correlation:
        Correlation matrix of the sampled parameters (ndim, ndim).
    diagnostics:
        Convergence diagnostics.
    predictive:
        The posterior predictive check of the readings.
    draws:
        Kept draws of the sampled parameters, (D, ndim), ordered ensemble, step, walker.
    derived_names, derived_draws:
        Names and draws (D, m) of the derived quantities (``quantities`` and the nuisance
        ones of ``parameters``), row by row with :attr:`draws`.
    draw_shape:
        (ensembles, kept steps, walkers): ``draws.reshape(*draw_shape, ndim)``.
    settings:
        How the posterior was sampled.
    notes:
        Approximations that applied, in plain words.
    """

    quantities: Mapping[str, PosteriorSummary]
    parameters: Mapping[str, PosteriorSummary]
    parameter_names: tuple[str, ...]
    correlation: NDArray[np.float64]
    diagnostics: SamplerDiagnostics
    predictive: PredictiveCheck
    draws: NDArray[np.float64]
    derived_names: tuple[str, ...]
    derived_draws: NDArray[np.float64]
    draw_shape: tuple[int, int, int]
    settings: PosteriorSettings
    notes: tuple[str, ...] = field(default_factory=tuple)

    @property
    def converged(self) -> bool:
        return self.diagnostics.converged

    def summary(self, name: str) -> PosteriorSummary:
        """The summary of a quantity or a parameter by name."""
        if name in self.quantities:
            return self.quantities[name]
        if name in self.parameters:
            return self.parameters[name]
        raise KeyError(f"no posterior quantity or parameter named '{name}'")

    def draws_of(self, name: str) -> NDArray[np.float64]:
        """The flat draws (D,) of a sampled parameter or a derived quantity."""
        if name in self.parameter_names:
            return self.draws[:, self.parameter_names.index(name)]
        if name in self.derived_names:
            return self.derived_draws[:, self.derived_names.index(name)]
        raise KeyError(f"no draws named '{name}'")

    def as_dict(self) -> dict[str, Any]:
        """JSON-safe record (no draws): quantities, parameters, correlation, diagnostics,
        predictive check, settings and notes."""
        return json_safe(
            {
                "converged": self.converged,
                "quantities": {k: v.as_dict() for k, v in self.quantities.items()},
                "parameters": {k: v.as_dict() for k, v in self.parameters.items()},
                "parameter_names": list(self.parameter_names),
                "correlation": self.correlation,
                "diagnostics": self.diagnostics.as_dict(),
                "predictive_check": self.predictive.as_dict(),
                "settings": self.settings.as_dict(),
                "notes": list(self.notes),
            }
        )

    def save_draws(self, path: str | Path) -> Path:
        """Write the draws to a compressed ``.npz`` file (written atomically).

        Arrays: ``parameters`` (D, ndim), ``parameter_names``, ``derived`` (D, m),
        ``derived_names``, ``draw_shape`` (ensembles, kept steps, walkers).
        """
        target = Path(path)
        if target.suffix != ".npz":
            raise InputError(
                f"draws file '{target}': the name must end in .npz. Fix: e.g. 'posterior.npz'."
            )
        buf = io.BytesIO()
        np.savez_compressed(
            buf,
            parameters=self.draws,
            parameter_names=np.array(self.parameter_names),
            derived=self.derived_draws,
            derived_names=np.array(self.derived_names),
            draw_shape=np.array(self.draw_shape),
        )
        atomic_write_bytes(target, buf.getvalue())
        return target

    def to_inference_data(self) -> Any:
        """The draws as an ArviZ ``InferenceData`` (chain = walker of an ensemble, draw =
        kept step); needs the optional extra ``uqreport[bayes]``."""
        az = _arviz()
        E, S, W = self.draw_shape
        post: dict[str, NDArray[np.float64]] = {}
        for names, arr in (
            (self.parameter_names, self.draws),
            (self.derived_names, self.derived_draws),
        ):
            block = arr.reshape(E, S, W, -1).transpose(0, 2, 1, 3).reshape(E * W, S, -1)
            for i, nm in enumerate(names):
                post[_safe_var(nm)] = block[..., i]
        return az.from_dict(
            posterior=post,
            attrs={
                "source": "uqreport.bayes",
                "likelihood": self.settings.likelihood,
                "ensembles": int(E),
                "walkers_per_ensemble": int(W),
                "chain_layout": (
                    "chain = ensemble * walkers_per_ensemble + walker. The walkers of one"
                    " ensemble are not independent chains: R-hat across these chains is not"
                    " valid; use uqreport's split R-hat across ensembles (chains >= 4)."
                ),
            },
        )

    def to_netcdf(self, path: str | Path) -> Path:
        """Write the draws as an ArviZ-readable NetCDF file (needs ``uqreport[bayes]``),
        through a temporary file in the same folder and a rename (never half-written)."""
        idata = self.to_inference_data()
        target = Path(path)
        target.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
        os.close(fd)
        try:
            idata.to_netcdf(tmp)
            mask = os.umask(0)
            os.umask(mask)
            os.chmod(tmp, 0o666 & ~mask)  # mkstemp's 0600 -> the mode a plain open() gives
            os.replace(tmp, target)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise
        return target


def _safe_var(name: str) -> str:
    """A NetCDF variable name: '/' is not allowed in names."""
    return name.replace("/", "__")


def _arviz() -> Any:
    try:
        import arviz as az
    except ImportError:
        raise InputError(
            "writing NetCDF draws needs ArviZ, which is not installed. Fix: install the"
            " optional extra with `pip install uqreport[bayes]`, or save the draws as .npz."
        ) from None
    return az


def correlation_matrix(draws: NDArray[np.float64]) -> NDArray[np.float64]:
    """Correlation of the columns of draws (D, ndim); constant columns give 0 off the diagonal."""
    a = np.asarray(draws, dtype=float)
    sd = a.std(axis=0)
    d = (a - a.mean(axis=0)) / np.where(sd > 0, sd, 1.0)
    r = d.T @ d / a.shape[0]
    np.fill_diagonal(r, 1.0)
    return r
