"""Uncertainty budgets: what each input and each group contributes to an output's variance.

For output y with sensitivity row c = dy/dx and input covariance U_x, the variance is
u_c^2(y) = c^T U_x c.  An entry of the budget is a set of inputs E (one input, the readings
of one table, or a whole group); its variance is c_E^T U_EE c_E.  The covariance terms
between entries, 2 c_E^T U_EF c_F, are entries of their own (group "correlation", naming both
sides), so that the shares of a budget add to exactly 1 (GUM 5.2.2, equation (13)).
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .propagation.linear import LinearResult

__all__ = [
    "CORRELATION_GROUP",
    "Budget",
    "BudgetEntry",
    "ShareCheck",
    "budget",
    "budgets",
    "monte_carlo_shares",
]

#: Group name of covariance cross terms.
CORRELATION_GROUP = "correlation"


@dataclass(frozen=True)
class BudgetEntry:
    """One line of a budget.

    Attributes
    ----------
    input:
        The input name (or block label, or "a × b" for a cross term).
    group:
        Budget group; ``"correlation"`` for cross terms.
    sensitivity:
        Sensitivity coefficient c_i = dy/dx_i for a single input; ``nan`` for a block or
        cross term.
    u_input:
        u(x_i) for a single input; ``nan`` otherwise.
    u_contribution:
        u_i(y) = |c_i| u(x_i) for a single input, sqrt(variance) for a block; for a cross
        term the signed square root sign(v) sqrt(|v|).
    variance:
        Contribution to u_c^2(y) (may be negative for a cross term).
    share:
        variance / u_c^2(y); shares of all entries add to 1.
    members:
        Names of the inputs in the entry (two blocks' inputs for a cross term).
    """

    input: str
    group: str
    sensitivity: float
    u_input: float
    u_contribution: float
    variance: float
    share: float
    members: tuple[str, ...]

    @property
    def is_cross_term(self) -> bool:
        return self.group == CORRELATION_GROUP

    def as_dict(self) -> dict[str, object]:
        return {
            "input": self.input,
            "group": self.group,
            "sensitivity": self.sensitivity,
            "u_input": self.u_input,
            "u_contribution": self.u_contribution,
            "variance": self.variance,
            "share": self.share,
        }


@dataclass(frozen=True)
class Budget:
    """The budget of one output: entries by input (block) and by group, ranked.

    Attributes
    ----------
    output, unit:
        The output quantity.
    value, u:
        Its estimate and combined standard uncertainty.
    entries:
        By input or block, ranked by |variance| (largest first), cross terms included.
    by_group:
        By group, ranked the same way, cross-group terms included.
    """

    output: str
    unit: str
    value: float
    u: float
    entries: tuple[BudgetEntry, ...]
    by_group: tuple[BudgetEntry, ...]

    def share_of_group(self, group: str) -> float:
        return sum(e.share for e in self.by_group if e.group == group and not e.is_cross_term)

    def top(self, n: int = 3, *, level: str = "group") -> tuple[BudgetEntry, ...]:
        """The ``n`` largest non-cross-term entries (``level`` "group" or "input")."""
        src = self.by_group if level == "group" else self.entries
        return tuple(e for e in src if not e.is_cross_term)[:n]


def _rank(entries: Iterable[BudgetEntry]) -> tuple[BudgetEntry, ...]:
    return tuple(sorted(entries, key=lambda e: (-abs(e.variance), e.input)))


def _entries(
    c: NDArray[np.float64],
    cov: NDArray[np.float64],
    sets: dict[str, list[int]],
    set_group: dict[str, str],
    names: tuple[str, ...],
    u_x: NDArray[np.float64],
    total: float,
) -> list[BudgetEntry]:
    labels = list(sets)
    idx = [np.array(sets[k]) for k in labels]
    out: list[BudgetEntry] = []
    share_div = total if total > 0 else 1.0
    for lab, ii in zip(labels, idx, strict=True):
        v = float(c[ii] @ cov[np.ix_(ii, ii)] @ c[ii])
        if len(ii) == 1:
            sens = float(c[ii[0]])
            ux = float(u_x[ii[0]])
            uc = abs(sens) * ux
        else:
            sens = math.nan
            ux = math.nan
            uc = math.sqrt(max(v, 0.0))
        out.append(
            BudgetEntry(
                lab, set_group[lab], sens, ux, uc, v, v / share_div, tuple(names[i] for i in ii)
            )
        )
    for a in range(len(labels)):
        for b in range(a + 1, len(labels)):
            block = cov[np.ix_(idx[a], idx[b])]
            if not np.any(block):
                continue
            v = float(2.0 * c[idx[a]] @ block @ c[idx[b]])
            out.append(
                BudgetEntry(
                    f"{labels[a]} × {labels[b]}",
                    CORRELATION_GROUP,
                    math.nan,
                    math.nan,
                    math.copysign(math.sqrt(abs(v)), v),
                    v,
                    v / share_div,
                    tuple(names[i] for i in idx[a]) + tuple(names[i] for i in idx[b]),
                )
            )
    return out


def budget(result: LinearResult, output: str) -> Budget:
    """The budget of ``output`` from a linear result (its Jacobian and input covariance).

    Second-order terms, when the result has them, are not attributed to inputs; they appear
    as an entry "second-order terms" in group "nonlinearity".
    """
    j = result.index(output)
    c = result.jacobian[j]
    cov = result.input_covariance
    inputs = result.inputs.inputs
    names = tuple(q.name for q in inputs)
    u_x = result.inputs.u
    total = float(result.u[j] ** 2)
    blocks: dict[str, list[int]] = {}
    block_group: dict[str, str] = {}
    groups: dict[str, list[int]] = {}
    for i, q in enumerate(inputs):
        blocks.setdefault(q.budget_entry, []).append(i)
        block_group.setdefault(q.budget_entry, q.group)
        groups.setdefault(q.group, []).append(i)
    by_input = _entries(c, cov, blocks, block_group, names, u_x, total)
    by_group = _entries(c, cov, groups, {g: g for g in groups}, names, u_x, total)
    # group entries are sets: their sensitivity column is meaningless unless single input
    if result.second_order is not None and result.second_order[j] > 0:
        v = float(result.second_order[j])
        extra = BudgetEntry(
            "second-order terms",
            "nonlinearity",
            math.nan,
            math.nan,
            math.sqrt(v),
            v,
            v / total if total > 0 else 0.0,
            (),
        )
        by_input.append(extra)
        by_group.append(extra)
    o = result.outputs[j]
    return Budget(
        o.name,
        o.unit,
        float(result.values[j]),
        float(result.u[j]),
        _rank(by_input),
        _rank(by_group),
    )


def budgets(result: LinearResult) -> dict[str, Budget]:
    """Budgets of every output of a linear result."""
    return {name: budget(result, name) for name in result.output_names}


@dataclass(frozen=True)
class ShareCheck:
    """Monte Carlo check of one group's share of an output's variance.

    Attributes
    ----------
    group:
        The budget group.
    linear_share:
        The linear budget's share (cross terms with other groups not included).
    only_share:
        Var(Y with only this group varied) / Var(Y with everything varied).
    frozen_share:
        1 - Var(Y with this group held at its estimates) / Var(Y with everything varied).
    flagged:
        Whether either Monte Carlo share differs from the linear one by more than
        ``threshold`` (10 percentage points by default): the model is too nonlinear over
        the group's range for the linear share to be trusted.
    """

    group: str
    linear_share: float
    only_share: float
    frozen_share: float
    flagged: bool

    def as_dict(self) -> dict[str, object]:
        return {
            "group": self.group,
            "linear_share": self.linear_share,
            "only_share": self.only_share,
            "frozen_share": self.frozen_share,
            "flagged": self.flagged,
        }


def monte_carlo_shares(
    result: LinearResult,
    model,
    outputs: Iterable[str] | None = None,
    *,
    draws: int = 2000,
    rng=None,
    threshold: float = 0.10,
) -> dict[str, tuple[ShareCheck, ...]]:
    """Check the linear budget's group shares by Monte Carlo, one group at a time.

    For each group G the model is evaluated on the same draws (common random numbers) with
    only G's inputs varied, and with G's inputs frozen at their estimates; the variance
    ratios are the "only" and "frozen" shares.  For an additive linear model both equal the
    linear share; interactions make "only" smaller than "frozen"; a nonlinear term with no
    first-order part (Y = X1^2 at x1 = 0, JCGM 101 9.4) shows up in both while the linear
    share is zero.  Correlations across groups are broken when one group is varied alone.
    """
    from ._numeric import as_generator

    gen = as_generator(rng)
    names = list(result.output_names if outputs is None else outputs)
    cols = [result.index(n) for n in names]
    x0 = result.inputs.values
    X = result.inputs.sample(int(draws), gen)
    with np.errstate(all="ignore"):
        Y = model.evaluate(X)[:, cols]
    ok_all = np.all(np.isfinite(Y), axis=1)
    var_all = np.var(Y[ok_all], axis=0, ddof=1)
    groups: dict[str, list[int]] = {}
    for i, q in enumerate(result.inputs.inputs):
        if q.u > 0:
            groups.setdefault(q.group, []).append(i)
    only: dict[str, np.ndarray] = {}
    frozen: dict[str, np.ndarray] = {}
    for g, idx in groups.items():
        ii = np.array(idx)
        Xo = np.broadcast_to(x0, X.shape).copy()
        Xo[:, ii] = X[:, ii]
        Xf = X.copy()
        Xf[:, ii] = x0[ii]
        with np.errstate(all="ignore"):
            Yo = model.evaluate(Xo)[:, cols]
            Yf = model.evaluate(Xf)[:, cols]
        oko = np.all(np.isfinite(Yo), axis=1)
        okf = np.all(np.isfinite(Yf), axis=1)
        only[g] = np.var(Yo[oko], axis=0, ddof=1) / np.where(var_all > 0, var_all, np.nan)
        frozen[g] = 1.0 - np.var(Yf[okf], axis=0, ddof=1) / np.where(var_all > 0, var_all, np.nan)
    out: dict[str, tuple[ShareCheck, ...]] = {}
    for k, name in enumerate(names):
        b = budget(result, name)
        lin = {e.group: e.share for e in b.by_group if not e.is_cross_term}
        checks = []
        for g in groups:
            ls = float(lin.get(g, 0.0))
            os_, fs = float(only[g][k]), float(frozen[g][k])
            flag = bool(
                np.isfinite(os_)
                and np.isfinite(fs)
                and (abs(os_ - ls) > threshold or abs(fs - ls) > threshold)
            )
            checks.append(ShareCheck(g, ls, os_, fs, flag))
        checks.sort(key=lambda c: -max(c.linear_share, c.only_share))
        out[name] = tuple(checks)
    return out
