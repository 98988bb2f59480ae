"""Building the batch chain's :class:`~.batch_model.BatchPosterior` from a chain.

:func:`build_batch_posterior` reads the chain's runs, fits and inputs: the readings and
their noise model, which parameters are sampled (ln k'_r or the hierarchy, ln s_r, the lags
and offsets when they do not cancel, A_0 and A_inf when sampled), their priors and starting
values, and the prior of the linear parameters (flat; a measured final absorbance; A_0 from
the concentration as a joint normal by linear propagation).  The model is described in
:mod:`.batch_model`.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from ..chains.batch import BatchChain
from ..errors import InputError
from ..model import MeasurementModel
from ..propagation import propagate_linear
from .batch_model import LIKELIHOODS, LINEAR_MODES, PARAMETRISATIONS, BatchPosterior
from .linear import BlockDesign, LinearPrior
from .priors import Prior, between_run_prior, noise_scale_prior, prior_from_input

__all__ = ["build_batch_posterior"]


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
    if hierarchical:
        notes.append(
            "hierarchical posterior: the runs' k'_r are pooled towards k~ [OH]_r, i.e. a"
            " first-order dependence on [OH] is assumed, so the hydroxide order from this"
            " posterior is pulled towards 1 and its interval is narrower than the data alone"
            " give; read the order from the posterior without the hierarchical option."
        )
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
