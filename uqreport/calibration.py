"""Calibration studies: do the stated intervals cover the truth at their stated rate?

:func:`coverage_study` simulates many studies with known truth (the invented demo
simulator, seeded), analyses each one exactly as a user's study would be analysed, and counts
how often each method's interval contains the true value.  A 95 % interval should cover in
about 95 % of studies; the binomial standard error of the rate is sqrt(p (1 - p) / n).
"""

from __future__ import annotations

import json
import math
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

from .analysis import Settings, analyze
from .demo import DemoScenario, write_demo

__all__ = ["CoverageResult", "coverage_study"]


@dataclass(frozen=True)
class CoverageResult:
    """Hit counts of a coverage study.

    Attributes
    ----------
    studies:
        Number of simulated studies analysed.
    coverage:
        The nominal coverage probability of the intervals.
    hits:
        ``hits[method][quantity]``: studies whose interval covered the truth (methods
        "linear" and "montecarlo").
    z_scores:
        ``z_scores[quantity]``: (estimate - truth) / u of the linear result, per study.
    """

    studies: int
    coverage: float
    hits: dict[str, dict[str, int]]
    z_scores: dict[str, list[float]]

    def rate(self, method: str, quantity: str) -> float:
        return self.hits[method][quantity] / self.studies

    @property
    def binomial_sd(self) -> float:
        p = self.coverage
        return math.sqrt(p * (1.0 - p) / self.studies)


def coverage_study(
    seeds: Sequence[int],
    quantities: Sequence[str],
    *,
    scenario: DemoScenario | None = None,
    draws: int = 4000,
    coverage: float = 0.95,
    montecarlo: bool = True,
) -> CoverageResult:
    """Simulate one demo study per seed, analyse it, and count covering intervals."""
    hits = {"linear": {q: 0 for q in quantities}, "montecarlo": {q: 0 for q in quantities}}
    z: dict[str, list[float]] = {q: [] for q in quantities}
    with tempfile.TemporaryDirectory(prefix="uqreport-coverage-") as tmp:
        for seed in seeds:
            folder = Path(tmp) / f"s{seed}"
            write_demo(folder, seed=seed, scenario=scenario)
            truth = json.loads((folder / "truth.json").read_text(encoding="utf-8"))["quantities"]
            res = analyze(
                folder / "experiment.toml",
                settings=Settings(
                    coverage=coverage,
                    seed=seed + 100_000,
                    draws=draws,
                    montecarlo=montecarlo,
                    plan=False,
                    mcmc=False,
                ),
            )
            ch = res.chains["batch"]
            for q in quantities:
                lin = ch.linear.estimate(q)
                t = truth[q]
                hits["linear"][q] += int(abs(lin.value - t) <= lin.U)
                z[q].append((lin.value - t) / lin.u)
                if montecarlo and ch.montecarlo is not None:
                    mc = ch.montecarlo.estimate(q)
                    hits["montecarlo"][q] += int(mc.low <= t <= mc.high)
    return CoverageResult(len(seeds), coverage, hits, z)
