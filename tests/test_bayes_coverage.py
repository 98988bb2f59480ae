"""Calibration of the Bayesian credible intervals on simulated studies with known truth.

The invented demo simulator draws the true value of every systematic input from its
stated distribution and generates the readings with random noise; the 95 % credible
intervals of the batch posterior must then hold the truth in about 95 % of studies.
Bounds are binomial: the number of covered studies out of n is Binomial(n, 0.95) for
calibrated intervals (common practice for coverage studies).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import pytest
from scipy import stats

from uqreport.bayes import batch_posterior
from uqreport.chains.batch import build_batch_chain
from uqreport.demo import BatchRunPlan, DemoScenario, write_demo
from uqreport.errors import ConvergenceWarning
from uqreport.experiment import load_experiment


def coverage(seeds, scenario, quantities, root: Path) -> dict[str, list[bool]]:
    """For each seed: simulate, build the chain, sample its posterior (seeded with the
    study's seed), and record whether each quantity's 95 % interval holds the truth."""
    hits: dict[str, list[bool]] = {q: [] for q in quantities}
    for seed in seeds:  # loop over simulated studies
        study = write_demo(root / str(seed), seed=seed, scenario=scenario)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # chain findings; convergence is checked below
            chain = build_batch_chain(load_experiment(root / str(seed) / "experiment.toml"))
            res = batch_posterior(chain, rng=seed)
        assert res.converged, seed
        for q in quantities:
            s = res.quantities[q]
            hits[q].append(s.low <= study.truth[q] <= s.high)
    return hits


def test_coverage_ci_single_run_studies(tmp_path):
    """CI version: 20 one-run studies.  With calibrated 95 % intervals the number covered is
    Binomial(20, 0.95); P(X <= 15) = 0.0026 (scipy.stats.binom), so at least 16 of 20 must
    cover (a coarse check: over-coverage cannot be told apart from 95 % with 20 studies)."""
    assert stats.binom.cdf(15, 20, 0.95) < 0.003
    one = DemoScenario(runs=(BatchRunPlan("r1", 20.0, 10.0, 20.0, readings=25),))
    qs = ("second_order_rate_constant", "pseudo_rate_constant/r1")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        hits = coverage(range(500, 520), one, qs, tmp_path)
    for q in qs:
        assert sum(hits[q]) >= 16, (q, sum(hits[q]))


@pytest.mark.slow
def test_coverage_100_demo_studies(tmp_path):
    """Full study: 100 simulated demo studies (three runs each).  The 95 % intervals of k
    and of each run's k' must cover the truth in 91-99 % of studies (about +/- 2 binomial
    standard deviations, sqrt(0.95 x 0.05 / 100) = 2.2 %)."""
    qs = (
        "second_order_rate_constant",
        "pseudo_rate_constant/r1",
        "pseudo_rate_constant/r2",
        "pseudo_rate_constant/r3",
    )
    hits = coverage(range(3000, 3100), DemoScenario(), qs, tmp_path)
    for q in qs:
        rate = sum(hits[q]) / len(hits[q])
        assert 0.91 <= rate <= 0.99, (q, rate)
