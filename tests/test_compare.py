"""Replicate statistics against their closed forms (REFERENCES C) and scipy."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from uqreport.compare import dersimonian_laird, en_score, weighted_mean, zeta_score
from uqreport.errors import InputError


def test_weighted_mean_closed_form():
    """Weighted mean, u = (sum w)^-1/2, chi2, Birge ratio and p (Cox, Metrologia 39 (2002)
    589, procedure A; citation from memory); the p-value from scipy's chi-square."""
    x = np.array([10.1, 10.4, 9.9, 10.2])
    u = np.array([0.1, 0.2, 0.15, 0.1])
    w = 1 / u**2
    m = np.sum(w * x) / np.sum(w)
    chi2 = np.sum(w * (x - m) ** 2)
    res = weighted_mean(x, u)
    assert res.mean == pytest.approx(m, rel=1e-14)
    assert res.u == pytest.approx(1 / math.sqrt(w.sum()), rel=1e-14)
    assert res.chi2 == pytest.approx(chi2, rel=1e-12)
    assert res.birge_ratio == pytest.approx(math.sqrt(chi2 / 3), rel=1e-12)
    assert res.p_value == pytest.approx(stats.chi2.sf(chi2, 3), rel=1e-12)
    assert sum(res.weights) == pytest.approx(1.0)


def test_dersimonian_laird_zero_for_consistent_and_known_value():
    """tau^2 = max(0, (Q - (n-1)) / (S1 - S2/S1)) (DerSimonian and Laird 1986, from memory)."""
    assert dersimonian_laird([1.0, 1.0, 1.0], [0.1, 0.2, 0.3]) == 0.0
    x = np.array([1.0, 2.0, 3.0])
    u = np.array([0.1, 0.1, 0.1])
    w = 1 / u**2
    q = np.sum(w * (x - 2.0) ** 2)
    expected = (q - 2) / (w.sum() - (w**2).sum() / w.sum())
    assert dersimonian_laird(x, u) == pytest.approx(expected, rel=1e-12)


def test_scores_iso_13528():
    """E_n with expanded and zeta with standard uncertainties (ISO 13528)."""
    assert en_score(10.5, 0.3, 10.0, 0.4) == pytest.approx(1.0)
    assert zeta_score(10.5, 0.15, 10.0, 0.2) == pytest.approx(2.0)


def test_bad_input():
    with pytest.raises(InputError, match="at least two values"):
        weighted_mean([1.0], [0.1])
    with pytest.raises(InputError, match="must be > 0"):
        weighted_mean([1.0, 2.0], [0.1, 0.0])
