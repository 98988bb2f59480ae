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

__all__ = ["CORRELATION_GROUP", "Budget", "BudgetEntry", "budget", "budgets"]

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
