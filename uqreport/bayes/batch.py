"""The batch chain's posterior: :func:`batch_posterior`.

What is sampled and what is drawn from priors
---------------------------------------------
The readings inform the runs' k'_r, their noise scales, A_0 and A_inf (integrated out),
and, when they do not cancel, the lags and absorbance offsets: those are the sampled
parameters (:mod:`.batch_model`).  Every other input (stock and dye concentrations,
volumes and glassware, temperature, activation energy, molar absorptivity when A_0 is free,
the run-to-run scatter input) is not informed by the readings: it is drawn from its prior
(:meth:`~uqreport.inputs.InputSet.sample` of the chain's inputs, correlations included)
once per posterior draw, and every output is computed from the k'_r draws and those rows
by :meth:`~uqreport.models.batch.BatchStudyModel.combine`, the formulas the linear and
Monte Carlo engines use.

Start and support
-----------------
Sampling starts at the least-squares optimum (the chain's nominal fits, refined by a quick
maximisation of the posterior).  Before that, the optimum with every bounded prior relaxed
is found; a parameter whose bounded prior (rectangular, triangular, arcsine, half-normal)
excludes it is pinned to the bound and the rest re-optimised, and if that costs more than
the 99.9 % point of chi-square in -2 log posterior, the prior excludes the data and an
:class:`~uqreport.errors.InputError` names the parameter.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
from numpy.typing import NDArray
from scipy import stats

from .._numeric import RandomLike, as_generator
from ..chains.batch import BatchChain
from ..errors import ConvergenceWarning, InputError, ValidationWarning
from .batch_model import BatchPosterior
from .batch_setup import build_batch_posterior
from .diagnostics import PredictiveCheck, check_acceptance, predictive_check, split_rhat
from .results import (
    PosteriorResult,
    PosteriorSettings,
    PosteriorSummary,
    SamplerDiagnostics,
    correlation_matrix,
    summarise,
)
from .sampler import EnsembleRun, maximise, run_ensembles

__all__ = ["batch_posterior", "find_start"]

#: Draws processed at once when computing derived quantities and the predictive check.
_CHUNK = 4096


def _pinned(
    fn, theta: NDArray[np.float64], fixed: NDArray[np.intp]
):  # pragma: no cover - tiny closure
    free = np.setdiff1d(np.arange(theta.size), fixed)

    def g(z: NDArray[np.float64]) -> NDArray[np.float64]:
        full = np.broadcast_to(theta, (z.shape[0], theta.size)).copy()
        full[:, free] = z
        return fn(full)

    return g, free


def find_start(post: BatchPosterior) -> NDArray[np.float64]:
    """The start of the sampler: the least-squares optimum refined by maximising the
    posterior, after the support check of the bounded priors (see the module docstring)."""
    x0 = post.start.copy()
    if not np.isfinite(post.log_posterior(x0[None, :])[0]):
        raise InputError(f"the log-posterior is not finite at the start: {post.diagnose(x0)}")
    xr, fr = maximise(post.relaxed, x0, post.scale)
    out = np.array(
        [i for i, p in enumerate(post.priors) if p.bounded and not p.contains(xr[i])],
        dtype=np.intp,
    )
    if out.size:
        xc = xr.copy()
        for i in out:
            lo, hi = post.priors[i].support
            width = (hi - lo) if math.isfinite(hi - lo) else post.priors[i].scale
            xc[i] = min(max(xr[i], lo + 1e-6 * width), hi - 1e-6 * width)
        g, free = _pinned(post.relaxed, xc, out)
        zc, fc = maximise(g, xc[free], post.scale[free])
        xc[free] = zc
        cost = 2.0 * (fr - fc)
        limit = float(stats.chi2.ppf(0.999, out.size))
        if not (cost <= limit):
            parts = [
                f"parameter '{post.names[i]}': the readings call for {xr[i]:.4g} but its"
                f" {post.priors[i].describe()} prior excludes that"
                for i in out
            ]
            raise InputError(
                "; ".join(parts)
                + f" (the best fit inside the prior's support is worse by {cost:.3g} in"
                f" -2 log posterior, above the 99.9 % point {limit:.3g})."
                " Fix: check the stated value, half-width and distribution of that input"
                " (and the baseline option), or the readings."
            )
        xr = xc
    x, _ = maximise(post.log_posterior, xr, post.scale)
    return x


def _hierarchical_start(
    post: BatchPosterior, flat: BatchPosterior, x: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Map the non-hierarchical optimum ``x`` onto the hierarchical parameters."""
    lnk = x[flat.index["log_kp"]] - np.log(post.rate_factor)
    out = post.start.copy()
    ln_pop = float(np.mean(lnk))
    tau = max(float(np.std(lnk)), math.exp(post.start[post.index["tau"][0]]))
    if "log_k" in post.index:
        out[post.index["log_k"][0]] = ln_pop
    out[post.index["tau"][0]] = math.log(tau)
    if "eta" in post.index:
        out[post.index["eta"]] = (lnk - ln_pop) / tau
    for name, v in zip(flat.names, x, strict=True):
        if name in post.names and (
            "eta" in post.index or not name.startswith("log_pseudo_rate_constant/")
        ):
            out[post.names.index(name)] = v
    return out


def _linear_start(
    post: BatchPosterior, flat: BatchPosterior, x: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Map the marginalised optimum onto the sampled-linear parameters."""
    fit, _ = flat.linear_fit(x[None, :])
    out = post.start.copy()
    for name, v in zip(flat.names, x, strict=True):
        out[post.names.index(name)] = v
    out[post.index["linear"]] = fit.beta[0]
    return out


def _derived(
    chain: BatchChain,
    post: BatchPosterior,
    theta: NDArray[np.float64],
    rng: np.random.Generator,
) -> tuple[tuple[str, ...], NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Derived draws (D, m) with their names, and per-draw predictive mean and sd (D, n)."""
    study = chain.study
    inputs = chain.model.inputs
    names = list(chain.model.output_names)
    between = [r.between for r in study.runs if r.between is not None]
    if post.hierarchical:
        names += ["second_order_rate_constant_population", "between_run_spread"]
    names += [f"noise_scale/{r}" for r in post.runs]
    names += [
        f"absorbance_infinity/{r}"
        for r in post.runs
        if f"absorbance_infinity/{r}" in post.linear_names
    ]
    names += [f"absorbance_zero/{r}" for r in post.runs]
    D = theta.shape[0]
    out = np.empty((D, len(names)))
    means = np.empty((D, post.y.size))
    sds = np.empty((D, post.y.size))
    k_col = (
        chain.model.output_names.index("second_order_rate_constant")
        if ("second_order_rate_constant" in chain.model.output_names)
        else None
    )
    for a in range(0, D, _CHUNK):  # loop over blocks of draws
        th = theta[a : a + _CHUNK]
        X = inputs.sample(th.shape[0], rng)
        if post.hierarchical and between:
            X[:, between] = 0.0  # the hierarchical model carries the run-to-run spread itself
        kp = post.rates(th)
        cols = [study.combine(kp, X)]
        if post.hierarchical:
            pop = np.exp(post.population_log_rate(th, rng))[:, None] * post.rate_factor[None, :]
            Yp = study.combine(pop, X)
            kpop = Yp[:, k_col] if k_col is not None else Yp[:, 2 * len(post.runs)]
            cols += [kpop[:, None], np.exp(th[:, post.index["tau"]])]
        mu, sd, beta, O = post.predictive(th, rng)
        cols.append(np.exp(th[:, post.index["log_s"]]))
        shift = O - post.offset_nominal[None, :]  # report A_0, A_inf net of nominal offsets
        for j in range(len(post.runs)):
            c = post.design.columns[j, 0]
            if c >= 0:
                cols.append((beta[:, c] + shift[:, j])[:, None])
        for j in range(len(post.runs)):
            c = post.design.columns[j, 1]
            cols.append((beta[:, c] + shift[:, j])[:, None])
        out[a : a + th.shape[0]] = np.column_stack(cols)
        means[a : a + th.shape[0]] = mu
        sds[a : a + th.shape[0]] = sd
    return tuple(names), out, means, sds


def _units(chain: BatchChain, post: BatchPosterior, names: tuple[str, ...]) -> list[str]:
    known = {o.name: o.unit for o in chain.model.outputs}
    known["second_order_rate_constant_population"] = "L/(mol*s)"
    return [known.get(n, "1") for n in names]


def batch_posterior(
    chain: BatchChain,
    *,
    rng: RandomLike = None,
    likelihood: str = "gaussian",
    student_dof: float = 4.0,
    hierarchical: bool = False,
    parametrisation: str = "centred",
    chains: int = 1,
    progress: bool = False,
    max_steps: int = 50_000,
    coverage: float = 0.95,
    walkers: int | None = None,
    linear: str | None = None,
    noise_prior_width: float = 0.5,
    between_prior_scale: float = 0.1,
    check_interval: int = 100,
    moves: str = "de-mix",
) -> PosteriorResult:
    """Sample the posterior of a batch chain and compute every output per posterior draw.

    Parameters
    ----------
    chain:
        The batch chain (:func:`uqreport.chains.batch.build_batch_chain`).
    rng:
        Seed or Generator; the same seed gives the same draws.
    likelihood, student_dof:
        ``"gaussian"``, or ``"student"`` (robust to outlying readings) with that many
        degrees of freedom.
    hierarchical, parametrisation:
        Runs' k drawn from a population k~ with a relative between-run spread tau
        (ln k_r = ln k~ + tau eta_r; half-normal prior on tau, sampled as ln tau).
        ``"centred"`` (default: ln k'_r sampled, ln k~ integrated out in closed form; it
        mixed about three times faster on the demo, whose runs each pin k' to about 1 %)
        or ``"non-centred"`` (ln k~ and eta_r ~ N(0, 1) sampled).
    chains:
        Independently seeded ensembles: 1, or at least 4 for split R-hat.
    progress:
        Show a tqdm progress bar (the command line asks; quiet by default).
    max_steps:
        Step cap per ensemble; reaching it warns (:class:`ConvergenceWarning`) and marks
        the result ``converged = False``.
    coverage:
        Coverage of the headline intervals (68.27 % and 95 % are always stored too).
    walkers:
        Walkers per ensemble (default 4 ndim, at least 8).
    linear:
        ``"marginalised"`` (A_0, A_inf integrated out: exact for the Gaussian likelihood, the
        default there) or ``"sampled"`` (A_0, A_inf of each run sampled: exact for any
        likelihood, the default for the t, where integrating out needs an inner mode search
        per evaluation and is about five times slower).
    noise_prior_width:
        sd of ln s in the log-normal prior of each run's noise scale.
    between_prior_scale:
        Scale of the half-normal prior of the relative between-run spread.
    check_interval, moves:
        Steps between convergence checks; ``"de-mix"`` (differential evolution with 20 %
        stretch moves, the default: about three times shorter autocorrelation times here)
        or ``"stretch"`` (emcee's default move).
    """
    if not (0.0 < coverage < 1.0):
        raise InputError(
            f"coverage = {coverage!r} must lie strictly between 0 and 1. Fix: e.g. 0.95."
        )
    if int(chains) != chains or chains < 1 or 1 < chains < 4:
        raise InputError(
            f"chains = {chains!r}: split R-hat needs at least 4 independently seeded"
            " ensembles. Fix: use chains = 1 (no R-hat) or chains >= 4."
        )
    if linear is None:
        linear = "sampled" if likelihood == "student" else "marginalised"
    seed = int(rng) if isinstance(rng, (int, np.integer)) else None
    gen = as_generator(rng)
    opts = dict(
        likelihood=likelihood,
        student_dof=student_dof,
        noise_prior_width=noise_prior_width,
        between_prior_scale=between_prior_scale,
    )
    flat = build_batch_posterior(chain, **opts)  # type: ignore[arg-type]
    post = build_batch_posterior(
        chain,
        hierarchical=hierarchical,
        parametrisation=parametrisation,
        linear=linear,
        **opts,  # type: ignore[arg-type]
    )
    x = find_start(flat)
    if hierarchical:
        x = _hierarchical_start(post, flat, x)
    elif linear == "sampled":
        x = _linear_start(post, flat, x)
    messages: list[str] = list(post.notes)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", ConvergenceWarning)
        run = run_ensembles(
            post,
            x,
            post.scale,
            rng=gen,
            chains=int(chains),
            walkers=walkers,
            max_steps=int(max_steps),
            check_interval=int(check_interval),
            progress=progress,
            moves=moves,
            diagnose=post.diagnose,
        )
        acc_ok, _ = check_acceptance(run.acceptance)
    for w in caught:
        messages.append(str(w.message))
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    settings = PosteriorSettings(
        walkers=run.walkers,
        chains=run.ensembles,
        steps=run.steps,
        discard=run.discard,
        thin=run.thin,
        max_steps=int(max_steps),
        check_interval=int(check_interval),
        seed=seed,
        ensemble_seeds=run.seeds,
        likelihood=post.likelihood,
        student_dof=float(student_dof),
        hierarchical=post.hierarchical,
        parametrisation=post.parametrisation,
        linear=post.linear,
        coverage=float(coverage),
        noise_prior_width=float(noise_prior_width),
        between_prior_scale=float(between_prior_scale),
        moves=moves,
    )
    return _assemble(chain, post, run, gen, settings, acc_ok, messages)


def _outlier_message(ppc: PredictiveCheck, likelihood: str, *, shown: int = 5) -> str:
    """Plain words naming the readings the predictive check flags ("" when none)."""
    if not ppc.outliers:
        return ""
    items = [
        f"{o.table} line {o.line} (run {o.run}: {o.observed:.6g} against a predicted"
        f" {o.predicted:.4g}, p = {o.p_value:.2g})"
        for o in ppc.outliers[:shown]
    ]
    more = len(ppc.outliers) - shown
    if more > 0:
        items.append(f"and {more} more")
    head = (
        f"posterior predictive check: {len(ppc.outliers)} reading(s) lie far outside their"
        f" predictive distribution (tail probability below 0.05/{ppc.n_readings}"
        f" = {ppc.outlier_threshold:.2g}): " + "; ".join(items) + "."
    )
    if likelihood == "student":
        return head + " The Student t likelihood down-weights them. Fix: check those readings."
    return (
        head + " Fix: check those readings (a bubble, a scratched cell); the Student t"
        " likelihood (likelihood = 'student', --robust on the command line) down-weights"
        " them instead of inflating the run's noise."
    )


def _assemble(
    chain: BatchChain,
    post: BatchPosterior,
    run: EnsembleRun,
    gen: np.random.Generator,
    settings: PosteriorSettings,
    acc_ok: bool,
    messages: list[str],
) -> PosteriorResult:
    """Derived quantities, predictive check and summaries from a finished run."""
    coverage = settings.coverage
    kept = run.kept()  # (E, S, W, ndim)
    E, S, W, d = kept.shape
    theta = kept.reshape(-1, d)
    names, derived, means, sds = _derived(chain, post, theta, gen)
    ppc = predictive_check(
        post.y,
        means,
        sds,
        runs=[post.runs[r] for r in post.run_index],
        tables=post.tables,
        lines=post.lines,
        rng=gen,
        likelihood=post.likelihood,
        dof=post.dof,
    )
    msg = _outlier_message(ppc, post.likelihood)
    if msg:
        messages.append(msg)
        warnings.warn(msg, ValidationWarning, stacklevel=3)
    chain_steps = run.steps - run.discard
    ess = run.ess()
    rhat = split_rhat(kept) if E >= 2 else None
    params: dict[str, PosteriorSummary] = {}
    for i, nm in enumerate(post.names):
        params[nm] = summarise(
            nm,
            post.units[i],
            kept[..., i],
            coverage=coverage,
            thin=run.thin,
            chain_steps=chain_steps,
            run_converged=run.converged,
            tol=run.tol,
            tau=float(run.tau[i]),
            ess=float(ess[i]),
        )
    units = _units(chain, post, names)
    block = derived.reshape(E, S, W, -1)
    quantities: dict[str, PosteriorSummary] = {}
    for j, nm in enumerate(names):
        if nm in params:
            continue  # sampled (linear="sampled"): keep the summary from the unthinned chain
        s = summarise(
            nm,
            units[j],
            block[..., j],
            coverage=coverage,
            thin=run.thin,
            chain_steps=chain_steps,
            run_converged=run.converged,
            tol=run.tol,
        )
        if nm.startswith(("noise_scale/", "absorbance_zero/", "absorbance_infinity/")):
            params[nm] = s
        else:
            quantities[nm] = s
    short = [nm for nm, q in {**params, **quantities}.items() if not q.converged]
    if run.converged and short:
        msg = (
            "MCMC: the run met its convergence rule, but "
            + ", ".join(f"'{n}'" for n in short[:8])
            + (f" and {len(short) - 8} more" if len(short) > 8 else "")
            + f" did not on their own (the kept chain of {chain_steps} steps is not longer"
            f" than {run.tol:g} times the autocorrelation time estimated from their draws"
            + (", or split R-hat is not below 1.01" if E >= 2 else "")
            + "); they are marked converged = false. Fix: rerun with another seed, or with"
            " more ensembles (chains) for more draws, and compare."
        )
        messages.append(msg)
        warnings.warn(msg, ConvergenceWarning, stacklevel=3)
    diag = SamplerDiagnostics(
        converged=run.converged,
        tau={n: float(t) for n, t in zip(post.names, run.tau, strict=True)},
        ess={n: float(e) for n, e in zip(post.names, ess, strict=True)},
        rhat=None if rhat is None else {n: float(r) for n, r in zip(post.names, rhat, strict=True)},
        acceptance=tuple(float(a) for a in run.acceptance.mean(axis=1)),
        acceptance_ok=acc_ok,
        tau_history=run.tau_history,
        messages=tuple(messages),
    )
    return PosteriorResult(
        quantities=quantities,
        parameters=params,
        parameter_names=post.names,
        correlation=correlation_matrix(theta),
        diagnostics=diag,
        predictive=ppc,
        draws=theta,
        derived_names=names,
        derived_draws=derived,
        draw_shape=(E, S, W),
        settings=settings,
        notes=post.notes,
    )
