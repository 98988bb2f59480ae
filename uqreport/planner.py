"""The improvement planner: which measurement to improve next, and what it would buy.

For every headline quantity the planner tries what-if cases, one budget group at a time:

- the group's uncertainty halved (the sensitivity coefficients kept: the linear budget
  re-weighted);
- an achievable value: the bath held to +/-0.1 K, reading times stamped by the instrument,
  class A glassware, one matched cuvette per run (from the experiment file's ``[plan]``
  section or its documented defaults);
- more data: more readings per run, one more replicate run.  These are not assumed to
  scale as 1/sqrt(n): the planner writes the study again with the extra data (noise-free
  readings on the fitted curves), re-analyses it, and scales the actual expanded
  uncertainty by the ratio of the two designs' results.

Each case gives the new expanded uncertainty and the reduction, ranked by gain.  The planner
also checks the linear shares by Monte Carlo (one group varied at a time, and frozen), and
advises on the batch runs' sampling schedule: over how many half-lives and at what spacing a
fixed number of readings minimises u(k') for the fitted model (the Fisher information of
the three-parameter decay).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd
from scipy import optimize

from .analysis import ChainResult, StudyResult
from .budget import ShareCheck, monte_carlo_shares
from .chains.batch import RunFit, build_batch_chain
from .chains.common import GROUPS
from .defaults import GRADUATED_CYLINDER_TOLERANCES, graduated_cylinder_tolerance
from .experiment import Experiment, QuantitySpec
from .experiment.plan import PlanSection
from .propagation import propagate_linear
from .propagation.linear import LinearResult, relinearise
from .tables import Table
from .units import pretty_unit

__all__ = ["Plan", "PlanCase", "QuantityPlan", "ScheduleAdvice", "plan_study"]


@dataclass(frozen=True)
class PlanCase:
    """One what-if case for one quantity.

    Attributes
    ----------
    group:
        The budget group improved (or "replicate runs").
    case:
        Short name of the case ("halved", "class A glassware", ...).
    description:
        What is changed, in plain words, with the achievable value.
    U_new:
        The expanded uncertainty with the improvement.
    reduction:
        U - U_new.
    reduction_percent:
        100 (U - U_new) / U.
    method:
        "re-weighted" (budget with new uncertainties), "re-analysed" (the study analysed
        again with the change) or "simulated" (the study written again with extra data
        and re-analysed).
    """

    group: str
    case: str
    description: str
    U_new: float
    reduction: float
    reduction_percent: float
    method: str

    def as_dict(self) -> dict[str, object]:
        return {
            "group": self.group,
            "case": self.case,
            "description": self.description,
            "U_new": self.U_new,
            "reduction": self.reduction,
            "reduction_percent": self.reduction_percent,
            "method": self.method,
        }


@dataclass(frozen=True)
class QuantityPlan:
    """The ranked cases for one quantity, and the verdict in plain words."""

    quantity: str
    unit: str
    U: float
    k: float
    cases: tuple[PlanCase, ...]
    verdict: str

    def as_dict(self) -> dict[str, object]:
        return {
            "unit": self.unit,
            "U": self.U,
            "k": self.k,
            "verdict": self.verdict,
            "cases": [c.as_dict() for c in self.cases],
        }


@dataclass(frozen=True)
class ScheduleAdvice:
    """Sampling-schedule advice for one batch run (equally spaced readings).

    ``u_current`` and ``u_optimal`` are u(k') from the fit alone (readings' noise and
    timing jitter, Fisher information at the fitted curve) for the user's times and for the
    best spacing of the same number of readings from the same first reading.
    """

    run: str
    readings: int
    first_reading_s: float
    current_span_s: float
    current_spacing_s: float
    current_half_lives: float
    u_current: float
    optimal_span_s: float
    optimal_spacing_s: float
    optimal_half_lives: float
    u_optimal: float
    gain_percent: float

    def as_dict(self) -> dict[str, object]:
        return {k: getattr(self, k) for k in self.__dataclass_fields__}


@dataclass(frozen=True)
class Plan:
    """The planner's output: per quantity, Monte Carlo share checks, schedule advice."""

    quantities: dict[str, QuantityPlan]
    shares_check: dict[str, tuple[ShareCheck, ...]]
    schedule: tuple[ScheduleAdvice, ...]

    def as_dict(self) -> dict[str, object]:
        return {
            "quantities": {q: p.as_dict() for q, p in self.quantities.items()},
            "shares_check": {q: [c.as_dict() for c in v] for q, v in self.shares_check.items()},
            "schedule": [s.as_dict() for s in self.schedule],
        }


# -- re-weighted cases ------------------------------------------------------------------
def _scaled_inputs(lin: LinearResult, pick: Callable[[object], float | None]):
    """Inputs with new standard uncertainties: ``pick(q)`` returns the new u or None."""
    items = []
    for q in lin.inputs.inputs:
        new = pick(q)
        items.append(q if new is None or new >= q.u else q.with_u(new))
    return type(lin.inputs)(items, lin.inputs.correlations)


# -- re-analysed cases ------------------------------------------------------------------
def _synthetic_table(
    table: Table, times: np.ndarray, absorbance: np.ndarray, cuvette: str
) -> Table:
    n = times.size
    frame = pd.DataFrame(
        {
            "time": times.astype(float),
            "absorbance": absorbance.astype(float),
            "cuvette": [cuvette] * n,
            "flag": [""] * n,
            "note": ["planner: simulated reading"] * n,
        }
    )
    return Table(
        table.path,
        table.kind,
        frame,
        np.arange(2, n + 2),
        {"time": "s", "absorbance": "", "cuvette": ""},
        "simulated",
    )


def _first_cuvette(run, fit: RunFit, exp: Experiment) -> str:
    frame = run.table.frame
    if "cuvette" in frame and str(frame["cuvette"].iloc[0]):
        return str(frame["cuvette"].iloc[0])
    if run.cuvette:
        return run.cuvette
    return next(iter(exp.cuvettes))


def _nominal_offset(exp: Experiment, run) -> float:
    """The absorbance offsets' estimates for a run's readings (blank and photometric)."""
    offset = exp.blanks[run.blank].offset.value if run.blank else 0.0
    if exp.spectrophotometer.photometric_accuracy is not None:
        offset += exp.spectrophotometer.photometric_accuracy.value
    return offset


def _synthetic_runs(
    exp: Experiment,
    fits: dict[str, RunFit],
    *,
    factor: float = 1.0,
    extra_runs: int = 0,
    concentrations: dict[str, float] | None = None,
):
    """The batch runs with noise-free readings on their fitted curves, ``factor`` times as
    many over the same span (one cuvette per run), plus replicate runs of the run at the
    middle excess-reagent concentration (``concentrations``: run name -> [OH])."""
    runs = []
    for run in exp.batch.runs:
        fit = fits[run.name]
        t_used = fit.times[fit.used]
        n_new = max(round(t_used.size * factor), 5)
        times = np.linspace(t_used[0], t_used[-1], n_new)
        # the fitted curve is net of the offsets; the readings include them
        A = fit.curve(times) + _nominal_offset(exp, run)
        cuv = _first_cuvette(run, fit, exp)
        runs.append(replace(run, table=_synthetic_table(run.table, times, A, cuv), cuvette=cuv))
    if extra_runs:
        conc = concentrations or {}
        ranked = sorted(runs, key=lambda r: (conc.get(r.name, 0.0), r.name))
        middle = ranked[len(ranked) // 2]
        for i in range(extra_runs):
            runs.append(replace(middle, name=f"{middle.name}_replicate{i + 1}"))
    return tuple(runs)


def _with_runs(exp: Experiment, runs) -> Experiment:
    return replace(exp, batch=replace(exp.batch, runs=tuple(runs), noise_source="spec"))


def _analyse_linear(exp: Experiment, coverage: float) -> LinearResult:
    """The linear result of ``exp`` at the coverage probability of the actual analysis (its
    U is compared with the actual U, so both must be for the same coverage)."""
    return propagate_linear(build_batch_chain(exp).model, coverage=coverage)


def _U(lin: LinearResult, name: str) -> float:
    return float(lin.U[lin.index(name)])


# -- schedule ---------------------------------------------------------------------------
def _u_rate(
    times,
    c,
    a0,
    k,
    sigma,
    u_jit,
    *,
    relative: float = 0.0,
    offset: float = 0.0,
    scale: float = 1.0,
    free: tuple[bool, bool] = (True, True),
) -> float:
    """u(k') of the decay fit from the Fisher information (known sigma).

    ``free`` says whether the baseline and the initial value are fitted (their columns enter
    the information).  The readings' SD is that of the analysis: sqrt(sigma^2 + (relative x
    A)^2) at the fitted absorbance A (``offset`` added back), with the jitter as effective
    variance, all times ``scale`` (the residual scatter when the noise came from it).
    """
    e = np.exp(-k * times)
    d = a0 - c
    cols = [1.0 - e] if free[0] else []
    if free[1]:
        cols.append(e)
    cols.append(-d * times * e)
    J = np.column_stack(cols)
    A = c + d * e + offset
    var = (sigma**2 + (relative * A) ** 2 + (k * d * e * u_jit) ** 2) * scale**2
    F = (J / var[:, None]).T @ J
    try:
        return float(math.sqrt(np.linalg.inv(F)[-1, -1]))
    except (np.linalg.LinAlgError, ValueError):
        return math.inf


def _schedule(exp: Experiment, fits: dict[str, RunFit]) -> tuple[ScheduleAdvice, ...]:
    out = []
    sp = exp.spectrophotometer
    batch = exp.batch
    srel = sp.noise_relative.value if batch.noise_model == "proportional" else 0.0
    # the fitted model: which of baseline and initial value the analysis fits
    free = (batch.baseline == "fitted", batch.initial == "free")
    for run in batch.runs:
        f = fits[run.name]
        t = f.times[f.used] + f.time_origin
        if t.size < 5:
            continue
        c, a0, k = f.params
        # the fitted curve is net of the offsets; the proportional noise acts on the reading
        offset = _nominal_offset(exp, run)
        u_jit = run.jitter.u if run.jitter is not None else 0.0
        n = t.size
        t0 = float(t[0])
        sigma = sp.noise_sd.value
        opts = {"relative": srel, "offset": offset, "scale": f.noise_scale, "free": free}
        u_now = _u_rate(t, c, a0, k, sigma, u_jit, **opts)
        half = math.log(2.0) / k

        def u_of(log_dt, n=n, t0=t0, c=c, a0=a0, k=k, sigma=sigma, u_jit=u_jit, opts=opts):
            dt = math.exp(log_dt)
            return _u_rate(t0 + dt * np.arange(n), c, a0, k, sigma, u_jit, **opts)

        dt_now = float(np.median(np.diff(t)))
        lo, hi = math.log(max(1.0, 0.1 * dt_now)), math.log(20.0 * dt_now)
        # keep the last reading above the noise floor on the fitted curve (the analysis would
        # exclude readings below it)
        floor = exp.batch.noise_floor.value - offset  # on the curve net of the offsets
        if c < floor < a0:
            t_floor = math.log((a0 - c) / (floor - c)) / k
            if t_floor > t0:
                hi = min(hi, math.log((t_floor - t0) / (n - 1)))
                lo = min(lo, hi - 1e-6)
        grid = np.linspace(lo, hi, 60)
        vals = np.array([u_of(g) for g in grid])
        j = int(np.nanargmin(vals))
        res = optimize.minimize_scalar(
            u_of, bounds=(grid[max(j - 1, 0)], grid[min(j + 1, grid.size - 1)]), method="bounded"
        )
        dt_opt = math.exp(float(res.x))
        u_opt = float(res.fun)
        if not u_opt < u_now:  # the user's schedule is already as good: say so
            dt_opt, u_opt = dt_now, u_now
        span_now = float(t[-1] - t[0])
        span_opt = dt_opt * (n - 1)
        out.append(
            ScheduleAdvice(
                run=run.name,
                readings=n,
                first_reading_s=t0,
                current_span_s=span_now,
                current_spacing_s=dt_now,
                current_half_lives=(t[-1]) / half,
                u_current=u_now,
                optimal_span_s=span_opt,
                optimal_spacing_s=dt_opt,
                optimal_half_lives=(t0 + span_opt) / half,
                u_optimal=u_opt,
                gain_percent=100.0 * (1.0 - u_opt / u_now) if u_now > 0 else 0.0,
            )
        )
    return tuple(out)


# -- the plan ---------------------------------------------------------------------------
def _fmt(x: float) -> str:
    """An expanded uncertainty to two significant digits, trailing zeros kept (GUM 7.2.6:
    0.020, not 0.02)."""
    if not math.isfinite(x) or x == 0.0:
        return f"{x:g}"
    d = 1 - math.floor(math.log10(abs(x)))
    if abs(round(x, d)) >= 10.0 ** (2 - d):  # 0.0996 -> 0.10
        d -= 1
    return f"{round(x, d):.{max(d, 0)}f}"


def _verdict(name: str, unit: str, ch: ChainResult, U: float, cases: list[PlanCase]) -> str:
    b = ch.budgets[name]
    top = next((e for e in b.by_group if not e.is_cross_term), None)
    label = ch.linear.outputs[ch.linear.index(name)].label
    if top is None or not cases:
        return f"No improvement was found for {label}."
    own = [c for c in cases if c.group == top.group]
    best_own = max(own, key=lambda c: c.reduction) if own else None
    unit_s = "" if unit == "1" else f" {pretty_unit(unit)}"
    text = f"The largest contributor to u({label}) is {top.group} ({100 * top.share:.0f} %)"
    if best_own is not None and best_own.reduction > 0:
        text += (
            f"; {best_own.description} reduces U({label}) from {_fmt(U)} to"
            f" {_fmt(best_own.U_new)}{unit_s} ({best_own.reduction_percent:.0f} %)."
        )
    else:
        text += "."
    best = max(cases, key=lambda c: c.reduction)
    if best_own is None or best.case != best_own.case or best.group != best_own.group:
        text += (
            f" The largest single gain comes from {best.description}"
            f" (U({label}) {_fmt(U)} to {_fmt(best.U_new)}{unit_s},"
            f" {best.reduction_percent:.0f} %)."
        )
    return text


def _batch_cases(
    exp: Experiment, ch: ChainResult, targets: tuple[str, ...], settings: PlanSection
) -> dict[str, list[PlanCase]]:
    lin = ch.linear
    fits = {f.name: f for f in ch.chain.fits}
    cases: dict[str, list[PlanCase]] = {t: [] for t in targets}
    U0 = {t: _U(lin, t) for t in targets}

    def add(group: str, case: str, description: str, U_new: dict[str, float], method: str):
        for t in targets:
            red = U0[t] - U_new[t]
            if abs(red) < 5e-4 * U0[t]:
                continue  # no gain worth listing (the group does not act on this quantity)
            cases[t].append(
                PlanCase(group, case, description, U_new[t], red, 100.0 * red / U0[t], method)
            )

    # halved, every group with a share
    groups = sorted({q.group for q in lin.inputs.inputs if q.u > 0})
    for g in groups:
        new = relinearise(
            lin, _scaled_inputs(lin, lambda q, g=g: q.u / 2 if q.group == g else None)
        )
        add(
            g,
            "halved",
            f"halving the {g} uncertainty",
            {t: _U(new, t) for t in targets},
            "re-weighted",
        )

    # temperature control
    t_u = settings.temperature.u
    if any(q.group == GROUPS["temperature"] and q.u > t_u for q in lin.inputs.inputs):
        new = relinearise(
            lin, _scaled_inputs(lin, lambda q: t_u if q.group == GROUPS["temperature"] else None)
        )
        add(
            GROUPS["temperature"],
            "bath control",
            f"holding the bath to ±{settings.temperature.half_width or t_u:g} K",
            {t: _U(new, t) for t in targets},
            "re-weighted",
        )

    # class A glassware
    gw = {}
    for gid, g in exp.glassware.items():
        if (g.glass_class or "").upper() == "B" and settings.glassware_class == "A":
            cap = g.capacity.value
            if any(math.isclose(cap, c) for c in GRADUATED_CYLINDER_TOLERANCES) and (
                g.kind == "graduated cylinder"
            ):
                d = graduated_cylinder_tolerance(cap, "A")
                tol = replace(g.tolerance, half_width=d.half_width, u=d.half_width / math.sqrt(3))
            elif g.tolerance is not None:
                tol = replace(
                    g.tolerance, half_width=(g.tolerance.half_width or 0) / 2, u=g.tolerance.u / 2
                )
            else:
                continue
            gw[gid] = replace(g, glass_class="A", tolerance=tol)
    if gw:
        new = _analyse_linear(replace(exp, glassware={**exp.glassware, **gw}), lin.coverage)
        add(
            GROUPS["glassware"],
            "class A glassware",
            "using class A instead of class B glassware",
            {t: _U(new, t) for t in targets},
            "re-analysed",
        )

    # designs with other data: scale the actual U by the ratio of simulated designs
    base = _analyse_linear(_with_runs(exp, _synthetic_runs(exp, fits)), lin.coverage)

    def simulated(runs, group: str, case: str, description: str, method: str = "simulated"):
        new = _analyse_linear(_with_runs(exp, runs), lin.coverage)
        add(
            group, case, description, {t: U0[t] * _U(new, t) / _U(base, t) for t in targets}, method
        )

    # instrument time stamps: recorded at the reading, lag known, jitter small.  This
    # changes the readings' error model, so it is a design comparison (the real data carry
    # the real jitter and cannot be re-analysed as if they had none).
    jit_new = settings.timing
    if any(
        r.recorded_at == "draw" or (r.jitter is not None and r.jitter.u > jit_new.u)
        for r in exp.batch.runs
    ):
        runs_t = [
            replace(
                run,
                recorded_at="reading",
                lag=QuantitySpec(key=f"{run.key}.lag", dimension="time", value=0.0, unit="s"),
                jitter=replace(jit_new, key=f"{run.key}.jitter"),
            )
            for run in _synthetic_runs(exp, fits)
        ]
        simulated(
            runs_t,
            GROUPS["lag"],
            "instrument timing",
            "recording the reading times with the instrument's clock",
        )

    multi = [r.name for r in exp.batch.runs if r.table.frame["cuvette"].astype(str).nunique() > 1]
    if multi:
        simulated(
            _synthetic_runs(exp, fits),
            GROUPS["pathlength"],
            "one matched cuvette",
            "reading each run in one matched cuvette",
        )
    n_extra = settings.extra_readings
    factor = 2.0 if n_extra is None else None
    if factor is None:
        mean_n = np.mean([f.used.sum() for f in fits.values()])
        factor = (mean_n + n_extra) / mean_n
    label = "as many readings again" if n_extra is None else f"{n_extra} more readings"
    simulated(
        _synthetic_runs(exp, fits, factor=factor),
        GROUPS["noise"],
        "more readings",
        f"taking {label} per run over the same time span",
    )
    k = settings.extra_runs
    oh = {
        r: float(lin.values[lin.index(f"hydroxide_concentration/{r}")])
        for r in fits
        if f"hydroxide_concentration/{r}" in lin.output_names
    }
    simulated(
        _synthetic_runs(exp, fits, extra_runs=k, concentrations=oh),
        "replicate runs",
        "more runs",
        f"adding {k} replicate run{'s' if k > 1 else ''} at the middle concentration",
    )
    return cases


def plan_study(
    result: StudyResult,
    *,
    rng=None,
    share_draws: int = 2000,
    targets: tuple[str, ...] | None = None,
) -> Plan:
    """The improvement plan for every headline quantity of ``result`` (or ``targets``)."""
    exp = result.experiment
    settings: PlanSection = exp.sections.get("plan")  # type: ignore[assignment]
    quantities: dict[str, QuantityPlan] = {}
    shares: dict[str, tuple[ShareCheck, ...]] = {}
    schedule: tuple[ScheduleAdvice, ...] = ()
    seed = result.settings.seed if rng is None else rng
    for cname, ch in result.chains.items():
        chosen = (
            tuple(ch.headline)
            if targets is None
            else tuple(t for t in targets if t in ch.linear.output_names)
        )
        if not chosen:
            continue
        if cname == "batch":
            cases = _batch_cases(exp, ch, chosen, settings)
            schedule = _schedule(exp, {f.name: f for f in ch.chain.fits})
        else:  # pragma: no cover - later chains add their cases
            cases = {t: [] for t in chosen}
        shares.update(
            monte_carlo_shares(ch.linear, ch.chain.model, chosen, draws=share_draws, rng=seed)
        )
        for t in chosen:
            est = ch.linear.estimate(t)
            ranked = sorted(cases[t], key=lambda c: (-c.reduction, c.group, c.case))
            quantities[t] = QuantityPlan(
                t, est.unit, est.U, est.k, tuple(ranked), _verdict(t, est.unit, ch, est.U, ranked)
            )
    return Plan(quantities, shares, schedule)
