"""Uncertainty budgets: shares and cross terms against closed forms and GUM H.2."""

from __future__ import annotations

import math

import numpy as np
import pytest

from uqreport.budget import CORRELATION_GROUP, budget
from uqreport.inputs import InputQuantity, InputSet
from uqreport.model import columns_model
from uqreport.propagation import propagate_linear


def test_weighted_sum_shares_are_exact_without_correlation():
    """Y = 2 a + 3 b - c: u_i(y) = |c_i| u_i, share = (c_i u_i)^2 / u_c^2 (GUM 5.1.3)."""
    ins = InputSet(
        [
            InputQuantity("a", 1.0, 0.1, group="g1"),
            InputQuantity("b", 1.0, 0.2, group="g2"),
            InputQuantity("c", 1.0, 0.3, group="g2"),
        ]
    )
    res = propagate_linear(columns_model(lambda a, b, c: 2 * a + 3 * b - c, ins, ["Y"]))
    bud = budget(res, "Y")
    uc2 = 0.2**2 + 0.6**2 + 0.3**2
    by = {e.input: e for e in bud.entries}
    assert by["a"].sensitivity == pytest.approx(2.0, rel=1e-9)
    assert by["c"].sensitivity == pytest.approx(-1.0, rel=1e-9)
    assert by["b"].u_contribution == pytest.approx(0.6, rel=1e-9)
    assert by["b"].share == pytest.approx(0.36 / uc2, rel=1e-9)
    assert [e.input for e in bud.entries] == ["b", "c", "a"]  # ranked
    groups = {e.group: e for e in bud.by_group}
    assert groups["g2"].share == pytest.approx((0.36 + 0.09) / uc2, rel=1e-9)
    assert sum(e.share for e in bud.entries) == pytest.approx(1.0, abs=1e-12)


def test_weighted_sum_with_correlation_has_cross_terms():
    """Y = a + b with r(a, b) = 0.5: u_c^2 = u_a^2 + u_b^2 + 2 r u_a u_b (GUM 5.2.2 eq. 13)."""
    ins = InputSet(
        [InputQuantity("a", 1.0, 0.3, group="g1"), InputQuantity("b", 1.0, 0.4, group="g2")],
        {("a", "b"): 0.5},
    )
    res = propagate_linear(columns_model(lambda a, b: a + b, ins, ["Y"]))
    uc2 = 0.09 + 0.16 + 2 * 0.5 * 0.3 * 0.4
    assert res.u[0] ** 2 == pytest.approx(uc2, rel=1e-10)
    bud = budget(res, "Y")
    cross = [e for e in bud.entries if e.group == CORRELATION_GROUP]
    assert len(cross) == 1 and cross[0].input == "a × b"
    assert cross[0].variance == pytest.approx(0.12, rel=1e-9)
    assert cross[0].share == pytest.approx(0.12 / uc2, rel=1e-9)
    assert sum(e.share for e in bud.entries) == pytest.approx(1.0, abs=1e-12)
    assert sum(e.share for e in bud.by_group) == pytest.approx(1.0, abs=1e-12)


def test_negative_correlation_cross_term_is_negative():
    ins = InputSet([InputQuantity("a", 1.0, 0.3), InputQuantity("b", 1.0, 0.4)], {("a", "b"): -0.5})
    bud = budget(propagate_linear(columns_model(lambda a, b: a + b, ins, ["Y"])), "Y")
    cross = next(e for e in bud.entries if e.is_cross_term)
    assert cross.variance == pytest.approx(-0.12, rel=1e-9)
    assert cross.u_contribution == pytest.approx(-math.sqrt(0.12), rel=1e-9)


def test_gum_h2_budget_adds_up(gum_h2_inputs):
    """GUM Annex H.2: the budget of R over V, I and phi, with the three correlation terms,
    adds up to u_c^2(R) exactly (u_c(R) = 0.0710714 Ohm, REFERENCES A.2 "C")."""
    res = propagate_linear(
        columns_model(lambda V, I, phi: V / I * np.cos(phi), gum_h2_inputs, ["R"])
    )
    bud = budget(res, "R")
    assert bud.u == pytest.approx(0.0710714, rel=1e-5)
    assert sum(e.variance for e in bud.entries) == pytest.approx(bud.u**2, rel=1e-12)
    assert sum(1 for e in bud.entries if e.is_cross_term) == 3
    assert sum(e.share for e in bud.entries) == pytest.approx(1.0, abs=1e-12)


def test_blocks_gather_inputs_into_one_entry():
    """Readings of one table counted as one entry: variance = sum of their squared terms."""
    items = [
        InputQuantity(f"r{i}", 1.0, 0.1, group="absorbance noise", block="readings")
        for i in range(5)
    ]
    items.append(InputQuantity("offset", 0.0, 0.2, group="blank offset"))
    ins = InputSet(items)
    res = propagate_linear(
        columns_model(
            lambda r0, r1, r2, r3, r4, offset: (r0 + r1 + r2 + r3 + r4) / 5 - offset, ins, ["m"]
        )
    )
    bud = budget(res, "m")
    by = {e.input: e for e in bud.entries}
    assert set(by) == {"readings", "offset"}
    assert by["readings"].variance == pytest.approx(5 * (0.1 / 5) ** 2, rel=1e-9)
    assert math.isnan(by["readings"].sensitivity)
    assert by["readings"].members == ("r0", "r1", "r2", "r3", "r4")


def test_monte_carlo_shares_equal_linear_on_a_linear_model():
    """Linear additive model: the one-group-at-a-time Monte Carlo shares equal the linear
    shares within Monte Carlo error (variance ratio of N draws: relative sd about
    sqrt(2/N) per variance; common random numbers make the ratio tighter)."""
    from uqreport.budget import monte_carlo_shares

    ins = InputSet(
        [
            InputQuantity("a", 1.0, 0.1, group="g1"),
            InputQuantity.from_half_width("b", 1.0, 0.3, "rectangular", group="g2"),
            InputQuantity("c", 1.0, 0.3, group="g3"),
        ]
    )
    model = columns_model(lambda a, b, c: 2 * a + 3 * b - c, ins, ["Y"])
    res = propagate_linear(model)
    n = 20_000
    checks = monte_carlo_shares(res, model, draws=n, rng=5)["Y"]
    tol = 5 * math.sqrt(2 / n)
    for c in checks:
        assert c.only_share == pytest.approx(c.linear_share, abs=tol)
        assert c.frozen_share == pytest.approx(c.linear_share, abs=tol)
        assert not c.flagged


def test_monte_carlo_shares_depart_on_a_nonlinear_model_jcgm101_9_4():
    """JCGM 101 9.4: Y = X1^2 + X2 at x1 = 0: the linear share of X1 is 0 (no first-order
    term) while X1^2 has variance 2 u1^4; with u1 = u2 = 1 the true share of X1 is 2/3
    (Var(X1^2) = 2, Var(X2) = 1).  The Monte Carlo shares depart upwards and are flagged."""
    from uqreport.budget import monte_carlo_shares

    ins = InputSet(
        [InputQuantity("x1", 0.0, 1.0, group="g1"), InputQuantity("x2", 0.0, 1.0, group="g2")]
    )
    model = columns_model(lambda x1, x2: x1**2 + x2, ins, ["Y"])
    res = propagate_linear(model)
    checks = {c.group: c for c in monte_carlo_shares(res, model, draws=40_000, rng=6)["Y"]}
    assert checks["g1"].linear_share == pytest.approx(0.0, abs=1e-9)
    assert checks["g1"].only_share == pytest.approx(2 / 3, abs=0.03)
    assert checks["g1"].frozen_share == pytest.approx(2 / 3, abs=0.03)
    assert checks["g1"].flagged
    assert checks["g2"].linear_share == pytest.approx(1.0)
    assert checks["g2"].only_share == pytest.approx(1 / 3, abs=0.03)
