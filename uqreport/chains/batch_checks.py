"""The checks a practitioner expects of a batch run, as pure functions of its nominal fit.

Residual patterns (one-sided Wald-Wolfowitz runs test of the residual signs and the lag-1
autocorrelation), drift at the end of the run, the ln(A - A_inf) straight line as a
cross-check of k', and the excess ratio [OH]/[dye]_0 of the pseudo-first-order method.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray
from scipy import stats

from ..errors import Problem
from ..regression import linear_least_squares
from .findings import Finding

__all__ = [
    "EXCESS_RATIO_ERROR",
    "EXCESS_RATIO_WARNING",
    "drift_t",
    "excess_ratio_checks",
    "lag1_autocorrelation",
    "log_linear_crosscheck",
    "log_linear_rate",
    "residual_checks",
    "runs_test",
]

#: Below this excess ratio [OH]/[D]0 the pseudo-first-order model is refused.
EXCESS_RATIO_ERROR = 5.0
#: Below this excess ratio a warning says what it does to k (rule of thumb: at least 10x).
EXCESS_RATIO_WARNING = 10.0


def runs_test(signs: NDArray[np.float64]) -> float:
    """One-sided Wald-Wolfowitz runs test: p of as few sign runs as observed (or fewer).

    Normal approximation with continuity correction: mean 2 n1 n2 / n + 1, variance
    2 n1 n2 (2 n1 n2 - n) / (n^2 (n - 1)).
    """
    s = signs[signs != 0]
    n1, n2 = int((s > 0).sum()), int((s < 0).sum())
    n = n1 + n2
    if n1 == 0 or n2 == 0 or n < 4:
        return 1.0
    runs = 1 + int(np.sum(s[1:] != s[:-1]))
    mu = 2.0 * n1 * n2 / n + 1.0
    var = 2.0 * n1 * n2 * (2.0 * n1 * n2 - n) / (n * n * (n - 1.0))
    if var <= 0:
        return 1.0
    return float(stats.norm.cdf((runs + 0.5 - mu) / math.sqrt(var)))


def lag1_autocorrelation(e: NDArray[np.float64]) -> float:
    """sum e_i e_{i+1} / sum e_i^2 of the (weighted) residuals."""
    d = float(np.sum(e * e))
    return float(np.sum(e[1:] * e[:-1]) / d) if d > 0 else 0.0


def drift_t(t: NDArray[np.float64], e: NDArray[np.float64]) -> float:
    """t statistic of a straight line through the residuals of the last third of a run."""
    m = len(t) // 3
    if m < 4:
        return 0.0
    tt, ee = t[-m:], e[-m:]
    X = np.column_stack([np.ones(m), tt - tt.mean()])
    fit = linear_least_squares(X, ee)
    return float(fit.params[1] / fit.std_errors[1]) if fit.std_errors[1] > 0 else 0.0


def residual_checks(
    run: str, t: NDArray[np.float64], weighted_residuals: NDArray[np.float64]
) -> tuple[float, float, float, list[Finding]]:
    """Runs test p, lag-1 autocorrelation, end-drift t, and the findings they raise.

    A pattern is flagged when the runs test gives p < 0.01 or the lag-1 autocorrelation
    exceeds 2.33/sqrt(n) (its one-sided 1 % point under independence, approximately); drift
    when |t| > 3.
    """
    rt = runs_test(np.sign(weighted_residuals))
    r1 = lag1_autocorrelation(weighted_residuals)
    dt = drift_t(t, weighted_residuals)
    out: list[Finding] = []
    if rt < 0.01 or r1 > 2.33 / math.sqrt(len(t)):
        out.append(
            Finding(
                "warning",
                "residual pattern",
                f"the residuals run in long same-sign stretches (runs test p = {rt:.2g},"
                f" lag-1 autocorrelation {r1:.2f}): the decay may not be a single exponential"
                " (baseline drift, temperature change, a second process) or the fit window"
                " includes the mixing period.",
                run,
            )
        )
    if abs(dt) > 3.0:
        out.append(
            Finding(
                "warning",
                "end drift",
                f"the residuals of the last third of the run trend with time (t = {dt:.2g}): the"
                " absorbance drifts at the end (evaporation, settling, lamp drift or a slow side"
                " reaction).",
                run,
            )
        )
    return rt, r1, dt, out


def log_linear_rate(
    t: NDArray[np.float64], a: NDArray[np.float64], baseline: float, sigma: NDArray[np.float64]
) -> tuple[float, float]:
    """k' and u(k') of the weighted straight line ln(a - a_inf) against t (readings more than
    3 sigma above the baseline; weights from the propagated sigma of the logarithm)."""
    y = a - baseline
    ok = y > 3.0 * sigma
    if ok.sum() < 3:
        return math.nan, math.nan
    X = np.column_stack([np.ones(int(ok.sum())), t[ok]])
    fit = linear_least_squares(X, np.log(y[ok]), sigma=sigma[ok] / y[ok])
    return float(-fit.params[1]), float(fit.std_errors[1])


def log_linear_crosscheck(
    run: str, rate: float, u_rate: float, ll_rate: float, ll_u: float
) -> list[Finding]:
    """A note when the log-linear k' and the exponential-fit k' differ by more than 3 u."""
    if not math.isfinite(ll_rate):
        return []
    diff = abs(ll_rate - rate) / math.hypot(u_rate, ll_u)
    if diff <= 3.0:
        return []
    return [
        Finding(
            "note",
            "log-linear cross-check",
            f"the ln(A - A_inf) straight line gives k' = {ll_rate:.4g} 1/s against {rate:.4g} 1/s"
            f" from the exponential fit ({diff:.1f} standard uncertainties apart); the log form"
            " weights late readings differently.",
            run,
        )
    ]


def excess_ratio_checks(
    run: str, where: str, ratio: float | None
) -> tuple[list[Problem], list[Finding]]:
    """An error below 5 (the decay is not pseudo-first-order), a warning below 10 saying how
    much k is biased low (the reagent falls by about 100/ratio % over the run)."""
    if ratio is None:
        return [], []
    if ratio < EXCESS_RATIO_ERROR:
        return [
            Problem(
                where,
                f"the excess ratio [OH]/[dye]0 is {ratio:.3g}: the excess reagent is used up"
                " noticeably during the run and the decay is not pseudo-first-order.",
                "use at least 10 times (better 20 times) more excess reagent than dye.",
            )
        ], []
    if ratio < EXCESS_RATIO_WARNING:
        drop = 100.0 / ratio
        return [], [
            Finding(
                "warning",
                "excess ratio",
                f"[OH]/[dye]0 = {ratio:.3g} is below 10: [OH] falls by about {drop:.0f} % over"
                f" the run, so k' drifts down and k = k'/[OH] is biased low by up to about"
                f" {drop / 2:.0f} %.",
                run,
            )
        ]
    return [], []
