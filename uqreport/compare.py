"""Comparing results: weighted means, consistency, scores, a between-result spread.

- Weighted mean with w_i = 1/u_i^2, u(mean) = (sum w_i)^-1/2, chi2_obs = sum w_i (x_i - mean)^2,
  Birge ratio R_B = sqrt(chi2_obs / (n - 1)), and the p-value Pr(chi2(n - 1) > chi2_obs);
  inconsistent when p < 0.05 (M. G. Cox, Metrologia 39 (2002) 589, procedure A).
- E_n = (x1 - x2) / sqrt(U1^2 + U2^2) with expanded uncertainties, |E_n| <= 1 satisfactory;
  zeta = (x1 - x2) / sqrt(u1^2 + u2^2) with standard ones, |zeta| <= 2 satisfactory,
  2 < |zeta| < 3 questionable, >= 3 unsatisfactory (ISO 13528).
- The between-result variance tau^2 of a random-effects model by the DerSimonian-Laird
  moment estimator: tau^2 = max(0, (Q - (n - 1)) / (S1 - S2/S1)), S1 = sum w, S2 = sum w^2.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from ._numeric import as_float_array
from .errors import InputError

__all__ = ["WeightedMean", "dersimonian_laird", "en_score", "weighted_mean", "zeta_score"]


@dataclass(frozen=True)
class WeightedMean:
    """A weighted mean and the consistency of the values it combines.

    Attributes
    ----------
    mean, u:
        The weighted mean and its standard uncertainty (sum w)^-1/2.
    chi2, dof:
        sum w_i (x_i - mean)^2 and n - 1.
    birge_ratio:
        sqrt(chi2 / dof) (1 for consistent values on average).
    p_value:
        Pr(chi2(dof) > chi2); below 0.05 the values are inconsistent.
    weights:
        The normalised weights w_i / sum w.
    """

    mean: float
    u: float
    chi2: float
    dof: int
    birge_ratio: float
    p_value: float
    weights: tuple[float, ...]

    @property
    def consistent(self) -> bool:
        return self.p_value >= 0.05


def _values(x: ArrayLike, u: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    xa = as_float_array(x, name="values", ndim=1)
    ua = as_float_array(u, name="uncertainties", ndim=1)
    if xa.size != ua.size:
        raise InputError(f"{xa.size} values but {ua.size} uncertainties.")
    if xa.size < 2:
        raise InputError("at least two values are needed to compare them.")
    if np.any(ua <= 0):
        raise InputError("every standard uncertainty must be > 0 to weight the values.")
    return xa, ua


def weighted_mean(x: ArrayLike, u: ArrayLike) -> WeightedMean:
    """Inverse-variance weighted mean with the chi-square consistency test (Cox 2002, A)."""
    xa, ua = _values(x, u)
    w = 1.0 / ua**2
    mean = float(np.sum(w * xa) / np.sum(w))
    chi2 = float(np.sum(w * (xa - mean) ** 2))
    dof = xa.size - 1
    return WeightedMean(
        mean,
        float(1.0 / math.sqrt(np.sum(w))),
        chi2,
        dof,
        math.sqrt(chi2 / dof),
        float(stats.chi2.sf(chi2, dof)),
        tuple(float(v) for v in w / np.sum(w)),
    )


def dersimonian_laird(x: ArrayLike, u: ArrayLike) -> float:
    """The between-result variance tau^2 (DerSimonian-Laird moment estimator, >= 0)."""
    xa, ua = _values(x, u)
    w = 1.0 / ua**2
    q = weighted_mean(xa, ua).chi2
    s1, s2 = float(np.sum(w)), float(np.sum(w**2))
    return max(0.0, (q - (xa.size - 1)) / (s1 - s2 / s1))


def en_score(x1: float, U1: float, x2: float, U2: float) -> float:
    """E_n = (x1 - x2) / sqrt(U1^2 + U2^2) (expanded uncertainties; ISO 13528)."""
    den = math.hypot(U1, U2)
    if den == 0:
        raise InputError("E_n needs at least one non-zero expanded uncertainty.")
    return (x1 - x2) / den


def zeta_score(x1: float, u1: float, x2: float, u2: float) -> float:
    """zeta = (x1 - x2) / sqrt(u1^2 + u2^2) (standard uncertainties; ISO 13528)."""
    den = math.hypot(u1, u2)
    if den == 0:
        raise InputError("zeta needs at least one non-zero standard uncertainty.")
    return (x1 - x2) / den
