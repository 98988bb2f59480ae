"""Coverage factors (GUM G.3, Table G.2) and the numerical tolerance of JCGM 101 7.9.2."""

from __future__ import annotations

import math

from scipy import stats

from ..errors import InputError

__all__ = ["coverage_factor", "numerical_tolerance", "welch_satterthwaite"]


def coverage_factor(dof: float, coverage: float = 0.95) -> float:
    """Coverage factor k_p = t_p(nu) for coverage probability ``coverage`` (GUM G.3.4).

    Infinite degrees of freedom give the normal quantile (1.960 for 95 %, 2.000 for
    95.45 %).  Non-integer degrees of freedom are used as they are (the t distribution is
    defined for them); GUM G.4.1 Note 1 suggests truncating instead, which is more
    conservative by a small amount.
    """
    if not (0.0 < coverage < 1.0):
        raise InputError(f"coverage probability must lie in (0, 1), got {coverage!r}.")
    if not (dof > 0):
        raise InputError(f"degrees of freedom must be > 0, got {dof!r}.")
    q = 0.5 * (1.0 + coverage)
    if math.isinf(dof):
        return float(stats.norm.ppf(q))
    return float(stats.t.ppf(q, dof))


def welch_satterthwaite(u_c: float, contributions: list[float], dofs: list[float]) -> float:
    """Effective degrees of freedom nu_eff = u_c^4 / sum(u_i^4 / nu_i) (GUM G.4.1, eq. G.2b).

    ``contributions`` are u_i(y) = |c_i| u(x_i); terms with infinite nu_i add nothing.
    Returns ``math.inf`` when every term has infinite degrees of freedom or u_c = 0.
    """
    denom = 0.0
    for ui, nu in zip(contributions, dofs, strict=True):
        if math.isfinite(nu) and ui != 0.0:
            denom += ui**4 / nu
    if denom == 0.0 or u_c == 0.0:
        return math.inf
    return float(u_c**4 / denom)


def numerical_tolerance(u: float, ndig: int = 2) -> float:
    """Numerical tolerance delta of a standard uncertainty (JCGM 101 7.9.2).

    Write u as c x 10^l with c an integer of ``ndig`` significant digits; delta = 0.5 x 10^l.
    For u = 0.0123 and ndig = 2, c = 12, l = -3 and delta = 0.0005.
    """
    if ndig < 1:
        raise InputError(f"ndig must be >= 1, got {ndig!r}.")
    if not (u > 0 and math.isfinite(u)):
        return 0.0
    l_exp = math.floor(math.log10(u)) - (ndig - 1)
    # guard against u = 9.96 rounding up to c = 100 (three digits): use the rounded c
    c = round(u / 10.0**l_exp)
    if c >= 10**ndig:
        l_exp += 1
    return 0.5 * 10.0**l_exp
