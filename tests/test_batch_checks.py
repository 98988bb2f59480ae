"""The batch-run checks against closed forms and simulation."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from uqreport.chains.batch_checks import (
    excess_ratio_checks,
    lag1_autocorrelation,
    log_linear_rate,
    residual_checks,
    runs_test,
)


def test_runs_test_normal_approximation():
    """Wald-Wolfowitz: n1 = n2 = 10 gives mean 11 runs and variance 2*100*(200-20)/(400*19)
    = 4.737 (standard formulas, from memory); 2 runs is far in the lower tail."""
    s = np.array([1.0] * 10 + [-1.0] * 10)
    expected = stats.norm.cdf((2 + 0.5 - 11) / math.sqrt(2 * 100 * 180 / (400 * 19)))
    assert runs_test(s) == pytest.approx(expected, rel=1e-12)
    assert runs_test(np.array([1.0, -1.0] * 10)) > 0.99


def test_runs_test_is_calibrated_under_independence():
    """For independent residuals the one-sided p is roughly uniform: about 1 % below 0.01."""
    rng = np.random.default_rng(1)
    p = np.array([runs_test(np.sign(rng.standard_normal(25))) for _ in range(4000)])
    assert 0.002 < np.mean(p < 0.01) < 0.025


def test_patterned_residuals_are_flagged_and_white_ones_not():
    t = np.arange(30.0)
    pattern = np.sin(t / 5.0)
    _, r1, _, found = residual_checks("r1", t, pattern)
    assert r1 > 0.8 and any(f.check == "residual pattern" for f in found)
    rng = np.random.default_rng(2)
    _, _, _, found = residual_checks("r1", t, rng.standard_normal(30))
    assert not found
    assert lag1_autocorrelation(np.array([1.0, -1.0, 1.0, -1.0])) == pytest.approx(-0.75)


def test_end_drift_is_flagged():
    t = np.arange(30.0)
    e = np.where(t > 20, (t - 20) * 0.8, 0.0) + np.random.default_rng(3).normal(0, 0.3, 30)
    _, _, dt, found = residual_checks("r1", t, e)
    assert dt > 3 and any(f.check == "end drift" for f in found)


def test_log_linear_rate_of_an_exact_decay():
    t = np.linspace(0, 600, 21)
    a = 0.01 + 0.8 * np.exp(-0.004 * t)
    k, u = log_linear_rate(t, a, 0.01, np.full(t.size, 0.002))
    assert k == pytest.approx(0.004, rel=1e-10)
    assert u > 0


def test_excess_ratio_thresholds():
    probs, found = excess_ratio_checks("r1", "x: batch.runs[r1]", 2.0)
    assert probs and not found
    probs, found = excess_ratio_checks("r1", "x", 8.0)
    assert not probs and "biased low by up to about 6 %" in found[0].message
    assert excess_ratio_checks("r1", "x", 50.0) == ([], [])
