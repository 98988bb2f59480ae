"""Analysing a study: every chain that has data, through the linear and Monte Carlo engines.

:func:`analyze` is the Python entry point the command line uses: it loads the experiment
(when given a path), builds each chain's measurement model, propagates it by the GUM's
linear method and by Monte Carlo (JCGM 101), validates the one by the other, and returns
the budgets, fits and findings in one :class:`StudyResult`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path

from ._numeric import as_generator
from .budget import Budget, budgets
from .chains.batch import BatchChain, build_batch_chain
from .chains.findings import Finding
from .errors import UqreportWarning
from .experiment import Experiment, load_experiment
from .propagation import (
    LinearResult,
    MonteCarloResult,
    ValidationResult,
    propagate_linear,
    propagate_montecarlo,
    validate_linear,
)

__all__ = ["ChainResult", "Settings", "StudyResult", "analyze"]

#: Seed used when the caller gives none, so that a rerun gives the same numbers.
DEFAULT_SEED = 1


@dataclass(frozen=True)
class Settings:
    """How a study was analysed.

    Attributes
    ----------
    coverage:
        Coverage probability of expanded uncertainties and intervals.
    seed:
        Seed of the random stream (Monte Carlo, MCMC).
    draws:
        Fixed number of Monte Carlo draws, or ``None`` for the adaptive procedure.
    ndig:
        Significant digits of the adaptive procedure's numerical tolerance.
    max_draws:
        Cap of the adaptive procedure.
    montecarlo:
        Whether Monte Carlo was run.
    plan:
        Whether the improvement planner was run.
    mcmc:
        Whether the Bayesian posterior was sampled (emcee).
    chains:
        Independently seeded ensembles (1, or >= 4 for split R-hat).
    likelihood:
        ``"gaussian"`` or ``"student"`` (robust against outlying readings).
    student_dof:
        Degrees of freedom of the Student t likelihood (smaller: heavier tails, outlying
        readings weigh less).
    hierarchical:
        Run-level rate constants with a between-run spread.
    progress:
        Show the sampler's progress bar.
    """

    coverage: float = 0.95
    seed: int = DEFAULT_SEED
    draws: int | None = None
    ndig: int = 2
    max_draws: int = 1_000_000
    montecarlo: bool = True
    plan: bool = True
    mcmc: bool = True
    chains: int = 1
    likelihood: str = "gaussian"
    student_dof: float = 4.0
    hierarchical: bool = False
    progress: bool = False

    def as_dict(self) -> dict[str, object]:
        return {
            "coverage": self.coverage,
            "seed": self.seed,
            "draws": self.draws,
            "ndig": self.ndig,
            "max_draws": self.max_draws,
            "montecarlo": self.montecarlo,
            "plan": self.plan,
            "mcmc": self.mcmc,
            "chains": self.chains,
            "likelihood": self.likelihood,
            "student_dof": self.student_dof,
            "hierarchical": self.hierarchical,
        }


@dataclass(frozen=True)
class ChainResult:
    """One chain's results.

    Attributes
    ----------
    name:
        The chain ("batch", ...).
    chain:
        What the chain builder returned (model, fits, findings, consistency, headline).
    linear:
        The linear (GUM) result over all of the chain's outputs.
    montecarlo:
        The Monte Carlo result, or ``None`` when not run.
    validation:
        JCGM 101 section 8 validation per output (empty without Monte Carlo).
    budgets:
        The budget of every output.
    posterior:
        The Bayesian posterior (:class:`uqreport.bayes.PosteriorResult`), or ``None``.
    """

    name: str
    chain: BatchChain
    linear: LinearResult
    montecarlo: MonteCarloResult | None
    validation: dict[str, ValidationResult]
    budgets: dict[str, Budget]
    posterior: object | None = None

    @property
    def headline(self) -> tuple[str, ...]:
        return self.chain.headline

    @property
    def findings(self) -> tuple[Finding, ...]:
        return self.chain.findings


@dataclass(frozen=True)
class StudyResult:
    """Everything :func:`analyze` found.

    Attributes
    ----------
    experiment:
        The loaded experiment.
    settings:
        How it was analysed.
    chains:
        Results per chain, in analysis order.
    findings:
        Study-level findings (chains not analysed yet, engine warnings), after the chains'.
    plan:
        The improvement plan (:class:`uqreport.planner.Plan`), or ``None`` when not run.
    """

    experiment: Experiment
    settings: Settings
    chains: dict[str, ChainResult]
    findings: tuple[Finding, ...] = field(default_factory=tuple)
    plan: object | None = None

    @property
    def all_findings(self) -> tuple[Finding, ...]:
        out: list[Finding] = []
        for ch in self.chains.values():
            out.extend(ch.findings)
        out.extend(self.findings)
        return tuple(out)

    @property
    def headline(self) -> tuple[tuple[str, str], ...]:
        """(chain, output) pairs of the headline quantities."""
        return tuple((c, q) for c, ch in self.chains.items() for q in ch.headline)


def _run_engines(
    name: str, chain: BatchChain, settings: Settings, seed_stream, findings: list[Finding]
) -> ChainResult:
    lin = propagate_linear(chain.model, coverage=settings.coverage)
    mc = None
    val: dict[str, ValidationResult] = {}
    if settings.montecarlo:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", UqreportWarning)
            mc = propagate_montecarlo(
                chain.model,
                coverage=settings.coverage,
                draws=settings.draws,
                rng=seed_stream,
                ndig=settings.ndig,
                max_draws=settings.max_draws,
                targets=chain.headline or None,
            )
        for w in caught:
            if issubclass(w.category, UqreportWarning):
                findings.append(Finding("warning", "Monte Carlo", str(w.message)))
            else:
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
        val = validate_linear(lin, mc)
    post = None
    if settings.mcmc and name == "batch":
        from .bayes import batch_posterior  # emcee is imported only when sampling

        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", UqreportWarning)
            post = batch_posterior(
                chain,
                rng=seed_stream,
                likelihood=settings.likelihood,
                student_dof=settings.student_dof,
                hierarchical=settings.hierarchical,
                chains=settings.chains,
                progress=settings.progress,
                coverage=settings.coverage,
            )
        for w in caught:
            if issubclass(w.category, UqreportWarning):
                findings.append(Finding("warning", "Bayesian", str(w.message)))
            else:
                warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
        for note in post.notes:
            findings.append(Finding("note", "Bayesian", note))
    return ChainResult(name, chain, lin, mc, val, budgets(lin), post)


def analyze(
    experiment: Experiment | str | Path,
    *,
    settings: Settings | None = None,
) -> StudyResult:
    """Analyse every chain of ``experiment`` that has data and is implemented.

    Raises :class:`~uqreport.errors.InputError` (an :class:`ExperimentError` listing every
    problem) for bad input.
    """
    exp = experiment if isinstance(experiment, Experiment) else load_experiment(experiment)
    st = settings or Settings()
    gen = as_generator(st.seed)
    findings: list[Finding] = []
    chains: dict[str, ChainResult] = {}
    if exp.batch is not None and exp.batch.runs:
        chains["batch"] = _run_engines("batch", build_batch_chain(exp), st, gen, findings)
    pending = [
        label
        for label, present in (
            ("pump calibrations", bool(exp.pumps)),
            ("stirred-tank runs", exp.tanks is not None and bool(exp.tanks.runs)),
            ("tracer runs", exp.tracer is not None and bool(exp.tracer.runs)),
        )
        if present
    ]
    if pending:
        findings.append(
            Finding(
                "note",
                "not analysed",
                "this version checks but does not yet analyse the "
                + ", ".join(pending)
                + " in the experiment file.",
            )
        )
    res = StudyResult(exp, st, chains, tuple(findings))
    if st.plan and chains:
        from .planner import plan_study  # the planner builds on this module

        res = replace(res, plan=plan_study(res))
    return res
