"""The batch-kinetics chain: from an experiment's batch runs to the measurement model.

This module turns the experiment file's ``[batch]`` section into the inputs and the
vectorised :class:`~uqreport.models.batch.BatchStudyModel`, and runs the checks a
practitioner expects (excess ratio, linear absorbance range, residual patterns, drift).
The model itself is generic; every number is then computed by the engines.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray
from scipy import stats

from ..compare import dersimonian_laird, weighted_mean
from ..errors import ExperimentError, InputError, Problem
from ..experiment import Experiment
from ..experiment.chains import MIN_BATCH_READINGS
from ..inputs import InputQuantity
from ..model import MeasurementModel
from ..models.batch import BatchStudyModel, RunModel
from ..models.decay import decay_curve, fit_decay
from ..propagation import propagate_linear
from .batch_checks import (
    excess_ratio_checks,
    log_linear_crosscheck,
    log_linear_rate,
    residual_checks,
)
from .common import (
    GROUPS,
    concentration_column,
    nominal,
    quantity_column,
    temperature_column,
    volume_column,
)
from .findings import Finding
from .registry import Column, InputRegistry

__all__ = ["BatchChain", "Finding", "RunFit", "build_batch_chain"]

#: Fewest readings in a run's fit window (after the noise floor).
MIN_READINGS = MIN_BATCH_READINGS
#: Fewest residual degrees of freedom for a noise level taken from the residuals (a Student t
#: input needs more than 2 for a finite variance, JCGM 101 6.4.9).
MIN_RESIDUAL_DOF = 3
#: The log-linear fit keeps readings whose fitted height above the baseline exceeds this many
#: standard uncertainties (the reading's noise and the baseline's, combined).
LOG_LINEAR_MARGIN = 5.0


@dataclass(frozen=True)
class RunFit:
    """The nominal fit of one batch run, for tables, plots and checks.

    Attributes
    ----------
    name, table:
        Run name and the table file name.
    lines:
        File line numbers of every reading, shape (n_all,).
    times, absorbance:
        Recorded times (s) and observed absorbances of every reading.
    used:
        Which readings are in the fit.
    reasons:
        Why each excluded reading was excluded ("" for used ones).
    pathlength:
        Nominal pathlength of each reading's cuvette (cm).
    params:
        Fitted (A_inf, A_0, k') in absorbance units of the run's first cuvette, k' in 1/s.
    covariance:
        Covariance of ``params`` from the fit alone (readings' noise; known-sigma form
        scaled by ``noise_scale``^2).
    sigma:
        Standard uncertainty of each used reading (effective: noise and lag jitter), A.
    residuals:
        Observed minus fitted absorbance of the used readings.
    chi2, dof:
        Weighted residual sum of squares with the noise model's sigma, and n - p.
    noise_source:
        "spec" (the noise model's sigma) or "residuals" (sigma scaled by the residual SD).
    noise_scale:
        sqrt(chi2/dof) when the noise is from the residuals, else 1.
    runs_test_p, lag1:
        One-sided Wald-Wolfowitz runs test p-value (too few sign changes) and lag-1
        autocorrelation of the weighted residuals.
    drift_t:
        t statistic of a straight line through the residuals of the last third of the run.
    log_linear_rate, log_linear_u:
        k' and its u from the ln(A - A_inf) straight line (cross-check; A_inf as fitted).
    excess_ratio:
        [OH]/[D]0, or ``None`` when the initial dye concentration is unknown.
    time_origin:
        Lag added to the recorded times at the estimates (s).
    """

    name: str
    table: str
    lines: NDArray[np.int64]
    times: NDArray[np.float64]
    absorbance: NDArray[np.float64]
    used: NDArray[np.bool_]
    reasons: tuple[str, ...]
    pathlength: NDArray[np.float64]
    params: NDArray[np.float64]
    covariance: NDArray[np.float64]
    sigma: NDArray[np.float64]
    residuals: NDArray[np.float64]
    chi2: float
    dof: int
    noise_source: str
    noise_scale: float
    runs_test_p: float
    lag1: float
    drift_t: float
    log_linear_rate: float
    log_linear_u: float
    excess_ratio: float | None
    time_origin: float

    def curve(self, t: NDArray[np.float64]) -> NDArray[np.float64]:
        """The fitted absorbance at recorded times ``t``."""
        c, a0, k = self.params
        return decay_curve(np.asarray(t) + self.time_origin, c, a0, k)


@dataclass(frozen=True)
class BatchChain:
    """The batch chain, ready for the engines.

    Attributes
    ----------
    model:
        The measurement model (inputs and the vectorised study function).
    study:
        The :class:`BatchStudyModel` inside ``model``.
    fits:
        Nominal fit of each run.
    findings:
        Check results (warnings and notes).
    consistency:
        Across-run statistics: chi2, dof, birge_ratio, p_value, tau (relative run-to-run
        scatter found, 0 when consistent), weights.
    headline:
        Output names to state on the summary page.
    """

    model: MeasurementModel
    study: BatchStudyModel
    fits: tuple[RunFit, ...]
    findings: tuple[Finding, ...]
    consistency: dict[str, object] = field(default_factory=dict)
    headline: tuple[str, ...] = ()


class _Builder:
    """Collects inputs, runs and findings while reading the experiment's batch section."""

    def __init__(self, exp: Experiment):
        self.exp = exp
        self.reg = InputRegistry()
        self.problems: list[Problem] = []
        self.findings: list[Finding] = []
        self.fits: list[RunFit] = []
        self.runs: list[RunModel] = []
        self.fname = exp.path.name

    # -- shared inputs ----------------------------------------------------------------
    def offsets(self, blank: str | None) -> tuple[int, ...]:
        idx: list[int] = []
        sp = self.exp.spectrophotometer
        if blank is not None:
            b = self.exp.blanks[blank]
            if not b.offset.exact:
                idx.append(
                    self.reg.add(
                        b.offset.to_input(
                            f"blank/{blank}",
                            group=GROUPS["blank"],
                            description=f"zero offset left after blank '{blank}'",
                        ),
                        key=b.offset.key,
                    )
                )
        if sp.photometric_accuracy is not None and not sp.photometric_accuracy.exact:
            idx.append(
                self.reg.add(
                    sp.photometric_accuracy.to_input(
                        "photometric_accuracy",
                        group=GROUPS["photometric"],
                        description="photometric accuracy of the spectrophotometer (offset)",
                    ),
                    key=sp.photometric_accuracy.key,
                )
            )
        return tuple(idx)

    def pathlength(self, cuvette: str) -> int | float:
        c = self.exp.cuvettes[cuvette]
        if c.pathlength.exact:
            return c.pathlength.value
        return self.reg.add(
            c.pathlength.to_input(
                f"pathlength/{cuvette}",
                group=GROUPS["pathlength"],
                description=f"pathlength of cuvette '{cuvette}'",
            ),
            key=c.pathlength.key,
        )

    def ensure_index(self, value_or_index: int | float, name: str, unit: str) -> int:
        if isinstance(value_or_index, int):
            return value_or_index
        return self.reg.add(
            InputQuantity(name, float(value_or_index), 0.0, unit=unit, group=GROUPS["pathlength"])
        )

    # -- one run --------------------------------------------------------------------------
    def run(self, run, section) -> None:
        exp = self.exp
        where = f"{self.fname}: batch.runs[{run.name}]"
        frame = run.table.frame
        tname = run.table.path.name
        t_rec = frame["time"].to_numpy(dtype=float)
        A = frame["absorbance"].to_numpy(dtype=float)
        lines = np.asarray(run.table.line_numbers, dtype=np.int64)
        n_all = len(t_rec)
        sp = exp.spectrophotometer
        lin_limit = section.linear_limit.value
        floor = section.noise_floor.value
        s0 = sp.noise_sd.value
        srel = sp.noise_relative.value if section.noise_model == "proportional" else 0.0

        # cuvettes per reading
        cuv_col = frame["cuvette"].astype(str).to_numpy() if "cuvette" in frame else None
        default_cuv = run.cuvette
        cuvettes: list[str] = []
        for j in range(n_all):
            cid = cuv_col[j] if cuv_col is not None and cuv_col[j] else default_cuv
            if cid is None:
                if len(exp.cuvettes) == 1:
                    cid = next(iter(exp.cuvettes))
                else:
                    self.problems.append(
                        Problem(
                            f"{tname}, line {lines[j]}",
                            "no cuvette is named for this reading and the run has no default.",
                            f'set cuvette = "<id>" in batch.runs[{run.name}] or fill the'
                            " table's cuvette column.",
                        )
                    )
                    return
            cuvettes.append(cid)

        # exclusions
        reasons = [""] * n_all
        flags = (
            frame["flag"].astype(str).str.strip().str.lower().to_numpy()
            if "flag" in frame
            else None
        )
        t0 = section.fit_start.value if section.fit_start is not None else -math.inf
        t1 = section.fit_end.value if section.fit_end is not None else math.inf
        blank_val = exp.blanks[run.blank].offset.value if run.blank else 0.0
        blank_u = exp.blanks[run.blank].offset.u if run.blank else 0.0
        far = blank_val - 5.0 * math.hypot(s0, blank_u)
        for j in range(n_all):
            if A[j] < far:
                self.problems.append(
                    Problem(
                        f"{tname}, line {lines[j]}, column 'absorbance'",
                        f"absorbance {A[j]:g} lies far below the blank ({blank_val:g};"
                        f" more than 5 noise standard deviations).",
                        "check that the blank was taken on the right solution and that the"
                        " reading is not a typing error; flag it 'exclude' if it is faulty.",
                    )
                )
            if flags is not None and flags[j] in ("exclude", "outlier"):
                reasons[j] = f"flagged '{flags[j]}' in the table"
            elif A[j] > lin_limit:
                reasons[j] = f"above the linear limit ({lin_limit:g} A)"
            elif not (t0 <= t_rec[j] <= t1):
                reasons[j] = "outside the fit window"
        used = np.array([r == "" for r in reasons])
        above = sum(1 for r in reasons if r.startswith("above"))
        if above == n_all:
            self.problems.append(
                Problem(
                    f"{where}",
                    f"every reading of {tname} is above the linear limit ({lin_limit:g} A).",
                    "dilute the dye (or use a shorter cuvette) so that the readings fall in the"
                    " linear range, or raise spectrophotometer.linear_limit if the instrument is"
                    " verified linear higher up.",
                )
            )
            return
        if used.sum() < MIN_READINGS:
            self.problems.append(
                Problem(
                    f"{where}",
                    f"only {int(used.sum())} readings of {tname} are in the fit"
                    f" (at least {MIN_READINGS} are needed).",
                    "record more readings, widen the fit window, or check the exclusions"
                    " (linear limit, noise floor, flags).",
                )
            )
            return
        if above:
            self.findings.append(
                Finding(
                    "warning",
                    "linear range",
                    f"{above} reading(s) above the linear limit ({lin_limit:g} A) were excluded;"
                    " Beer-Lambert is not linear there.",
                    run.name,
                )
            )

        # timing
        recorded_at = run.recorded_at
        lag_spec = run.lag
        jit_spec = run.jitter
        if recorded_at == "draw" and lag_spec is None:
            self.problems.append(
                Problem(
                    where,
                    "times were recorded at the draw but no timing lag is given.",
                    'give timing.lag = { value = ..., u = ..., unit = "s" } (the mean gap'
                    " between drawing a sample and reading it).",
                )
            )
            return
        lag_val = lag_spec.value if lag_spec is not None else 0.0
        u_jit = jit_spec.u if jit_spec is not None else 0.0

        # nominal data
        uj = np.flatnonzero(used)
        offs = self.offsets(run.blank)
        off_val = sum(self.reg.by_index(i).value for i in offs) if offs else 0.0
        path_refs = [self.pathlength(c) for c in cuvettes]
        l_nom = np.array(
            [self.reg.by_index(p).value if isinstance(p, int) else p for p in path_refs]
        )
        a_nom = (A - off_val) / l_nom
        t_nom = t_rec + lag_val

        # concentrations
        hydroxide = self.hydroxide(run, where)
        dye0 = self.dye_initial(run)
        if hydroxide is None:
            return
        oh_nom = nominal(hydroxide, self.reg)
        d0_nom = nominal(dye0, self.reg) if dye0 is not None else None

        # fit options
        baseline_mode = section.baseline
        final_idx = final_path = None
        c_fix = None
        if baseline_mode == "measured":
            if run.final_absorbance is None:
                self.problems.append(
                    Problem(
                        where,
                        'baseline = "measured" but the run has no final_absorbance.',
                        "give final_absorbance = { value = ..., u = ... } or set"
                        ' batch.baseline = "fitted".',
                    )
                )
                return
            fa = run.final_absorbance
            final_idx = self.reg.add(
                InputQuantity(
                    f"final_absorbance/{run.name}",
                    fa.value,
                    fa.u if fa.u > 0 else s0,
                    unit="1",
                    group=fa.group or GROUPS["noise"],
                    source=fa.source or "measured after the decay (noise model)",
                    description=f"measured final absorbance of run {run.name}",
                ),
                key=fa.key,
            )
            final_path = self.ensure_index(
                path_refs[uj[-1]], f"pathlength/{cuvettes[uj[-1]]}", "cm"
            )
            c_fix = (fa.value - off_val) / l_nom[uj[-1]]
        elif baseline_mode == "zero":
            c_fix = 0.0
        initial_fn: Column | None = None
        a0_fix = None
        if section.initial == "from_concentration":
            chem = exp.chemistry
            if chem is None or chem.molar_absorptivity is None or dye0 is None:
                self.problems.append(
                    Problem(
                        where,
                        'initial = "from_concentration" needs the molar absorptivity and the'
                        " initial dye concentration.",
                        "give chemistry.molar_absorptivity and the run's dye_concentration (or"
                        ' dye_solution and dye_volume), or set batch.initial = "free".',
                    )
                )
                return
            eps = quantity_column(
                self.reg,
                chem.molar_absorptivity,
                "molar_absorptivity",
                group=GROUPS["absorptivity"],
                description="molar absorptivity of the dye at the working wavelength",
            )
            initial_fn = lambda X, eps=eps, d0=dye0: eps(X) * d0(X)  # noqa: E731 - closure
            a0_fix = nominal(initial_fn, self.reg)

        method = section.method
        if method == "log-linear" and baseline_mode == "fitted":
            self.problems.append(
                Problem(
                    f"{self.fname}: batch.method",
                    'the log-linear fit needs a known baseline (A_inf), but baseline = "fitted".',
                    'set batch.baseline = "zero" or "measured", or use method = "exponential".',
                )
            )
            return

        # nominal fit with the noise model, then with the lag jitter as effective variance
        def nominal_fit(uj, sig_A, start=None):
            """The fit of the used readings ``uj`` weighted by the noise model alone."""
            lu = l_nom[uj]
            return fit_decay(
                t_nom[uj],
                a_nom[uj],
                weights=lu**2 / sig_A[uj] ** 2,
                baseline=c_fix,
                initial=a0_fix,
                start=start,
                warn=False,
            )

        sig_A = np.sqrt(s0**2 + (srel * A) ** 2)
        tu, au, lu = t_nom[uj], a_nom[uj], l_nom[uj]
        fit0 = nominal_fit(uj, sig_A)
        if srel > 0:
            # the proportional part is a property of the expected reading, so it is taken at
            # the fitted absorbance: taken at each reading's own (noisy) value it gives the
            # readings that noise pushed down more weight and biases the fit
            sig_A = np.sqrt(
                s0**2 + (srel * (decay_curve(t_nom, *fit0.params[0]) * l_nom + off_val)) ** 2
            )
            fit0 = nominal_fit(uj, sig_A, fit0.params[0])
        # the noise floor is applied to the fitted absorbance, not to each reading: selecting
        # readings by their own (noisy) value would keep the high ones and bias the fit
        c, a0, k = fit0.params[0]
        fitted_all = (decay_curve(t_nom, c, a0, k) * l_nom) + off_val
        low = used & (fitted_all < floor)
        for j in np.flatnonzero(low):
            reasons[j] = f"fitted absorbance below the noise floor ({floor:g} A)"
        if method == "log-linear":
            # ln(a - a_inf) exists only above the baseline: a reading whose fitted height above
            # it is within LOG_LINEAR_MARGIN standard uncertainties (its noise and the
            # baseline's) falls below it, itself or in Monte Carlo draws (judged on the
            # fitted curve, as the noise floor is)
            u_base = (
                self.reg.by_index(final_idx).u
                if final_idx is not None
                else math.sqrt(sum(self.reg.by_index(i).u ** 2 for i in offs))
            )
            height = (decay_curve(t_nom, c, a0, k) - c) * l_nom
            near = used & ~low & (height < LOG_LINEAR_MARGIN * np.sqrt(sig_A**2 + u_base**2))
            for j in np.flatnonzero(near):
                reasons[j] = (
                    f"fitted absorbance within {LOG_LINEAR_MARGIN:g} standard uncertainties of"
                    " the baseline (log-linear fit)"
                )
            low = low | near
        if low.any():
            used = used & ~low
            if used.sum() < MIN_READINGS:
                clear = " and clear of the baseline" if method == "log-linear" else ""
                self.problems.append(
                    Problem(
                        where,
                        f"only {int(used.sum())} readings of {tname} lie above the noise floor"
                        f" ({floor:g} A{clear}; at least {MIN_READINGS} are needed).",
                        "record readings earlier in the decay or more often, or lower"
                        " spectrophotometer.noise_floor if the instrument is quieter.",
                    )
                )
                return
            uj = np.flatnonzero(used)
            tu, au, lu = t_nom[uj], a_nom[uj], l_nom[uj]
            fit0 = nominal_fit(uj, sig_A, fit0.params[0])
            c, a0, k = fit0.params[0]
        fit1 = fit0
        # the weights at the nominal solution: the jitter through the fitted slope, and the
        # noise model's proportional part at the fitted absorbance, for which one more pass
        # evaluates them at the solution they give (the change is far below u)
        for _ in range(1 + (srel > 0)):
            c, a0, k = fit1.params[0]
            if srel > 0:
                A_fit = decay_curve(t_nom, c, a0, k) * l_nom + off_val
                sig_A = np.sqrt(s0**2 + (srel * A_fit) ** 2)
            dadt = -k * (a0 - c) * np.exp(-k * tu) * lu
            sig_eff = np.sqrt(sig_A[uj] ** 2 + (dadt * u_jit) ** 2)
            w = lu**2 / sig_eff**2
            fit1 = fit_decay(
                tu, au, weights=w, baseline=c_fix, initial=a0_fix, start=fit1.params[0]
            )
        if not fit1.converged[0]:
            self.problems.append(
                Problem(
                    where,
                    "the exponential fit of the readings did not converge.",
                    "look at the data: is it a decay? Check the time column and the fit window.",
                )
            )
            return
        params = fit1.params[0]
        dof = fit1.dof
        chi2 = float(fit1.chi2[0])
        noise_choice = section.noise_source
        crit = stats.chi2.ppf(0.95, dof)
        use_resid = noise_choice == "residuals" or (noise_choice == "auto" and chi2 > crit)
        if use_resid and dof < MIN_RESIDUAL_DOF:
            # a t input with 2 or fewer degrees of freedom has no finite variance: the
            # readings' u cannot come from so few residuals
            why = (
                "noise_source = 'residuals' takes"
                if noise_choice == "residuals"
                else f"the scatter about the fit exceeds the noise model (chi2 = {chi2:.3g}), so"
                " it would take"
            )
            self.problems.append(
                Problem(
                    where,
                    f"{why} the readings' uncertainty from the residuals, but the fit of"
                    f" {len(uj)} readings with {len(uj) - dof} parameters leaves {dof} degrees"
                    f" of freedom (at least {MIN_RESIDUAL_DOF} are needed for a finite"
                    " standard uncertainty).",
                    "record more readings in the fit window, or state the spectrophotometer"
                    " noise and set batch.noise_source = 'spec'.",
                )
            )
            return
        scale = math.sqrt(chi2 / dof) if use_resid else 1.0
        if noise_choice == "auto" and use_resid:
            self.findings.append(
                Finding(
                    "warning",
                    "noise model",
                    f"the scatter about the fit is {scale:.2g} times the noise model's"
                    f" (chi2 = {chi2:.3g} for {dof} degrees of freedom, above the 95 % point"
                    f" {crit:.3g}); the readings' uncertainty is taken from the residuals.",
                    run.name,
                )
            )

        # inputs: readings, lag, jitter
        block = f"absorbance/{run.name}"
        reading_idx = []
        for j_local, j in enumerate(uj):
            u_read = sig_eff[j_local] * scale if use_resid else sig_A[j]
            reading_idx.append(
                self.reg.add(
                    InputQuantity(
                        f"absorbance/{run.name}/line{lines[j]}",
                        float(A[j]),
                        float(u_read),
                        distribution="t" if use_resid else "normal",
                        dof=float(dof) if use_resid else math.inf,
                        kind="A" if use_resid else "B",
                        unit="1",
                        group=GROUPS["noise"],
                        block=block,
                        source=(
                            f"residual scatter of the fit ({dof} degrees of freedom)"
                            if use_resid
                            else "spectrophotometer noise model"
                        ),
                        description=f"absorbance reading, {tname} line {lines[j]}",
                    )
                )
            )
        lag_idx = None
        if lag_spec is not None and not lag_spec.exact:
            lag_idx = self.reg.add(
                lag_spec.to_input(
                    f"lag/{run.name}",
                    group=GROUPS["lag"],
                    description=f"mean timing lag of run {run.name}",
                )
            )
        jitter_idx = None
        if u_jit > 0 and not use_resid:
            jitter_idx = np.array(
                [
                    self.reg.add(
                        InputQuantity(
                            f"jitter/{run.name}/line{lines[j]}",
                            0.0,
                            u_jit,
                            distribution=jit_spec.distribution,
                            unit="s",
                            group=GROUPS["lag"],
                            block=f"jitter/{run.name}",
                            source=jit_spec.source or "timing.jitter",
                            description=f"timing jitter of the reading on line {lines[j]}",
                        )
                    )
                    for j in uj
                ]
            )
        path_idx = np.array(
            [self.ensure_index(path_refs[j], f"pathlength/{cuvettes[j]}", "cm") for j in uj]
        )

        # temperature of the run
        temp_idx = None
        if exp.chemistry is not None and exp.chemistry.activation_energy is not None:
            if run.temperature.key != exp.study.temperature.key:
                col = temperature_column(self.reg, run.temperature, f"temperature/{run.name}")
            else:
                col = temperature_column(self.reg, exp.study.temperature, "temperature/study")
            temp_idx = col

        # checks
        c_, a0_, k_ = params
        ll_rate, ll_u = log_linear_rate(tu, au, c_, sig_eff / lu)
        fitted_u = decay_curve(tu, c_, a0_, k_)
        resid_a = (au - fitted_u) * lu
        rt, r1, dt, found = residual_checks(run.name, tu, resid_a / sig_eff)
        self.findings.extend(found)
        if baseline_mode == "fitted":
            u1 = math.sqrt(fit1.covariance[0][2, 2]) * scale
            self.findings.extend(log_linear_crosscheck(run.name, k_, u1, ll_rate, ll_u))
        ratio = None
        if d0_nom is not None and d0_nom > 0:
            ratio = oh_nom / d0_nom
        elif exp.chemistry is not None and exp.chemistry.molar_absorptivity is not None:
            eps0 = exp.chemistry.molar_absorptivity.value
            d0_est = (a0_ - c_) / eps0 if eps0 > 0 else 0.0
            ratio = oh_nom / d0_est if d0_est > 0 else None
        probs, found = excess_ratio_checks(run.name, where, ratio)
        self.findings.extend(found)
        if probs:
            self.problems.extend(probs)
            return

        l0 = lu[0]
        cov = fit1.covariance[0] * scale**2
        scale_vec = np.array([l0, l0, 1.0])
        self.fits.append(
            RunFit(
                name=run.name,
                table=tname,
                lines=lines,
                times=t_rec,
                absorbance=A,
                used=used,
                reasons=tuple(reasons),
                pathlength=l_nom,
                params=params * scale_vec,
                covariance=cov * np.outer(scale_vec, scale_vec),
                sigma=sig_eff * (scale if use_resid else 1.0),
                residuals=resid_a,
                chi2=chi2,
                dof=dof,
                noise_source="residuals" if use_resid else "spec",
                noise_scale=scale,
                runs_test_p=rt,
                lag1=r1,
                drift_t=dt,
                log_linear_rate=ll_rate,
                log_linear_u=ll_u,
                excess_ratio=ratio,
                time_origin=lag_val,
            )
        )
        self.runs.append(
            RunModel(
                name=run.name,
                # an exact lag has no input: it is added to the recorded times here
                times=t_rec[uj] + (lag_val if lag_idx is None else 0.0),
                reading=np.array(reading_idx),
                pathlength=path_idx,
                offsets=offs,
                lag=lag_idx,
                jitter=jitter_idx,
                # ln(a - a_inf) has u = sigma_a/(a - a_inf) at the fitted curve; weighting by
                # the readings' own (noisy) values favours the low ones and biases k' low
                weights=w if method == "exponential" else (fitted_u - c_) ** 2 * w,
                baseline=baseline_mode,
                final_absorbance=final_idx,
                final_pathlength=final_path,
                initial=initial_fn,
                hydroxide=hydroxide,
                temperature=temp_idx,
                between=None,
                method=method,
                start=params.copy(),
            )
        )

    def hydroxide(self, run, where: str) -> Column | None:
        exp = self.exp
        if run.hydroxide_concentration is not None:
            return quantity_column(
                self.reg,
                run.hydroxide_concentration,
                f"hydroxide_concentration/{run.name}",
                group=GROUPS["concentration"],
                description=f"excess-reagent concentration in run {run.name}",
            )
        if run.hydroxide_solution is None or run.hydroxide_volume is None:
            self.problems.append(
                Problem(
                    where,
                    "the run has no excess-reagent (hydroxide) concentration.",
                    'give hydroxide_concentration = { value = ..., u = ..., unit = "mol/L" }'
                    " or hydroxide_solution and hydroxide_volume (with dye_volume and"
                    " water_volume for the mixture).",
                )
            )
            return None
        c_oh = concentration_column(self.reg, exp, run.hydroxide_solution)
        v_oh, total = self._mixture(run)
        return lambda X: c_oh(X) * v_oh(X) / total(X)

    def _mixture(self, run) -> tuple[Column, Column]:
        """The hydroxide volume and the total volume of a run's reaction mixture.

        Each volume is one set of inputs however often it is asked for (the registry shares
        inputs by name), so the hydroxide and dye concentrations see the same fills.
        """
        vols = {}
        for key in ("hydroxide_volume", "dye_volume", "water_volume"):
            spec = getattr(run, key)
            if spec is not None:
                vols[key] = volume_column(self.reg, self.exp, spec, f"batch.runs[{run.name}].{key}")
        parts = list(vols.values())
        return vols.get("hydroxide_volume"), lambda X: sum(p(X) for p in parts)

    def dye_initial(self, run) -> Column | None:
        exp = self.exp
        if run.dye_concentration is not None:
            return quantity_column(
                self.reg,
                run.dye_concentration,
                f"dye_concentration/{run.name}",
                group=GROUPS["concentration"],
                description=f"initial dye concentration in run {run.name}",
            )
        if run.dye_solution is None or run.dye_volume is None:
            return None
        c_d = concentration_column(self.reg, exp, run.dye_solution)
        v_d = volume_column(self.reg, exp, run.dye_volume, f"batch.runs[{run.name}].dye_volume")
        _, total = self._mixture(run)
        return lambda X: c_d(X) * v_d(X) / total(X)


def _independent_variances(lin, rows: slice, n_runs: int) -> NDArray[np.float64]:
    """Per-run variances of the outputs in ``rows`` from inputs that act on that run alone.

    Inputs with a sensitivity in more than one run (a shared stock, the study temperature)
    shift every run together; they do not make runs scatter and must not set the weights or
    the consistency test (weighting by them is Peelle's puzzle).  The engines still carry
    them in full through the model.
    """
    J = lin.jacobian[rows]
    S = lin.input_covariance
    contrib = np.abs(J) * np.sqrt(np.diag(S))[None, :]
    scale = np.maximum(contrib.max(axis=1, keepdims=True), 1e-300)
    shared = (contrib > 1e-9 * scale).sum(axis=0) > 1
    keep = ~shared
    Jk = J[:, keep]
    return np.einsum("ri,ij,rj->r", Jk, S[np.ix_(keep, keep)], Jk)


def build_batch_chain(exp: Experiment) -> BatchChain:
    """Build the batch chain of ``exp`` (which must have a ``[batch]`` section).

    Raises :class:`~uqreport.errors.ExperimentError` listing every problem found in the
    runs (too few readings, all readings above the linear limit, a missing hydroxide
    concentration, an excess ratio below 5, ...).
    """
    section = exp.batch
    if section is None or not section.runs:
        raise InputError(f"{exp.path.name}: there is no [batch] section with runs to analyse.")
    b = _Builder(exp)
    for run in section.runs:
        b.run(run, section)
    if section.noise_model == "proportional" and exp.spectrophotometer.noise_relative.value == 0:
        b.findings.append(
            Finding(
                "warning",
                "noise model",
                'noise_model = "proportional" but spectrophotometer.noise_relative is 0, so the'
                " readings' noise is constant (noise_sd alone); give noise_relative (the"
                ' proportional part of the SD, e.g. 0.005) or set noise_model = "constant".',
            )
        )
    chem = exp.chemistry
    Ea_col: Column | None = None
    if chem is not None and chem.activation_energy is not None:
        Ea_col = quantity_column(
            b.reg,
            chem.activation_energy,
            "activation_energy",
            group=GROUPS["activation_energy"],
            description="activation energy of the reaction (Arrhenius)",
        )
    T_ref = exp.study.reference_temperature.value if exp.study.reference_temperature else None
    if T_ref is not None and Ea_col is None:
        b.problems.append(
            Problem(
                f"{b.fname}: study.reference_temperature",
                "a reference temperature is set but the activation energy is not given.",
                'give chemistry.activation_energy = { value = ..., u = ..., unit = "kJ/mol" }'
                " or remove the reference temperature.",
            )
        )
    if b.problems:
        raise ExperimentError(b.problems)

    runs = b.runs
    R = len(runs)
    T_s = exp.study.temperature.value
    if Ea_col is None:
        temps = [r.temperature.value for r in section.runs]
        spread = (max(temps) - min(temps)) if temps else 0.0
        b.findings.append(
            Finding(
                "note" if spread <= 0.2 else "warning",
                "temperature",
                "no activation energy is given, so the temperature uncertainty is not carried"
                " into k and runs at different temperatures are not corrected to one"
                + (f" (the run temperatures differ by {spread:.2g} K)" if spread > 0.2 else "")
                + ". Give chemistry.activation_energy to carry it (k changes by about 8 % per"
                " kelvin for E_a near 60 kJ/mol).",
            )
        )
    if R >= 2:
        b.findings.append(
            Finding(
                "note",
                "ionic strength",
                "runs at different excess-reagent concentrations also differ in ionic strength,"
                " which changes k for an ion + counter-ion reaction (the primary kinetic salt"
                " effect); the analysis assumes that effect is small over the range used.",
            )
        )

    # stage 1: per-run outputs, to find the weights of the across-run estimators
    stage1 = BatchStudyModel(tuple(runs), T_s, Ea_col)
    m1 = MeasurementModel(b.reg.input_set(), stage1.outputs(), stage1, name="batch kinetics")
    lin1 = propagate_linear(m1)
    k_r = lin1.values[2 * R : 3 * R]
    var_k = _independent_variances(lin1, slice(2 * R, 3 * R), R)
    consistency: dict[str, object] = {"runs": R}
    tau_rel = 0.0
    if R >= 2:
        wm = weighted_mean(k_r, np.sqrt(var_k))
        Q, dof, p_val, birge = wm.chi2, wm.dof, wm.p_value, wm.birge_ratio
        # The run-to-run spread is carried only when the runs are inconsistent at the 5 %
        # level: a random-effects estimate added whenever it comes out positive inflates the
        # uncertainty of consistent studies (it is positive in a third of them by chance),
        # and the intervals then over-cover (seen in the coverage study).
        tau = math.sqrt(dersimonian_laird(k_r, np.sqrt(var_k)))
        tau_rel = tau / wm.mean if (wm.mean > 0 and p_val < 0.05) else 0.0
        consistency.update(chi2=Q, dof=dof, birge_ratio=birge, p_value=p_val, tau_relative=tau_rel)
        if p_val < 0.05:
            b.findings.append(
                Finding(
                    "warning",
                    "run consistency",
                    f"the runs' k = k'/[OH] disagree beyond their uncertainties (chi2 = {Q:.3g}"
                    f" for {dof} degrees of freedom, Birge ratio {birge:.2g}, p = {p_val:.2g});"
                    f" a run-to-run scatter of {100 * tau_rel:.2g} % (random-effects estimate)"
                    " is carried as an input of its own.",
                )
            )
    if tau_rel > 0:
        runs = [
            _with_between(
                r,
                b.reg.add(
                    InputQuantity(
                        f"between_run/{r.name}",
                        0.0,
                        tau_rel,
                        dof=float(R - 1),
                        kind="A",
                        unit="1",
                        group=GROUPS["between_run"],
                        # one estimate tau serves every run: one Welch-Satterthwaite term
                        block="between_run",
                        source=f"random-effects spread of the {R} runs (DerSimonian-Laird)",
                        description=f"relative run-to-run scatter of run {r.name}",
                    )
                ),
            )
            for r in runs
        ]
    mean_w = 1.0 / (var_k + (tau_rel * k_r) ** 2)
    mean_w = mean_w / mean_w.sum()
    order_w = None
    oh = lin1.values[R : 2 * R]
    kp = lin1.values[:R]
    if R >= 2 and np.ptp(np.log(oh)) > 0.01:
        var_lnk = _independent_variances(lin1, slice(0, R), R) / kp**2
        var_lnoh = _independent_variances(lin1, slice(R, 2 * R), R) / oh**2
        order_w = 1.0 / (var_lnk + var_lnoh + tau_rel**2)
        # effective variance with the slope found at b = 1 (errors in x, one iteration)
        x, y = np.log(oh), np.log(kp)
        slope = np.polyfit(x, y, 1, w=np.sqrt(order_w))[0]
        order_w = 1.0 / (var_lnk + slope**2 * var_lnoh + tau_rel**2)
        consistency["order_weights"] = (order_w / order_w.sum()).tolist()
        if R < 3:
            b.findings.append(
                Finding(
                    "warning",
                    "order",
                    "the order in the excess reagent comes from only two concentrations: the"
                    " straight line ln k' against ln [OH] cannot be checked (use three or more).",
                )
            )
    consistency["mean_weights"] = mean_w.tolist()
    study = BatchStudyModel(
        tuple(runs),
        T_s,
        Ea_col,
        T_ref,
        mean_w,
        order_w,
    )
    model = MeasurementModel(b.reg.input_set(), study.outputs(), study, name="batch kinetics")
    headline = ["second_order_rate_constant"]
    if T_ref is not None:
        headline.append("second_order_rate_constant_at_reference")
    if order_w is not None:
        headline.append("hydroxide_order")
    return BatchChain(model, study, tuple(b.fits), tuple(b.findings), consistency, tuple(headline))


def _with_between(run: RunModel, index: int) -> RunModel:
    from dataclasses import replace

    return replace(run, between=index)
