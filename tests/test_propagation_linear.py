"""Linear propagation (JCGM 100) against the GUM's worked examples and independent libraries."""

from __future__ import annotations

import math

import numpy as np
import pytest
import uncertainties
from uncertainties import umath

from uqreport.errors import InputError, ModelError
from uqreport.inputs import InputQuantity, InputSet
from uqreport.model import MeasurementModel, columns_model
from uqreport.propagation import coverage_factor, numerical_tolerance, propagate_linear


def _rxz(V, I, phi):
    z = V / I
    return z * np.cos(phi), z * np.sin(phi), z


def test_gum_h2_resistance_reactance_impedance(gum_h2_inputs):
    """GUM Annex H.2, Table H.4 (published digits) and full precision recomputed (C)."""
    res = propagate_linear(columns_model(_rxz, gum_h2_inputs, ["R", "X", "Z"]))
    R, X, Z = res.values
    # published: R = 127.732 Ohm, u = 0.071; X = 219.847, u = 0.295; Z = 254.260, u = 0.236
    assert R == pytest.approx(127.732, abs=5e-4)
    assert X == pytest.approx(219.847, abs=5e-4)
    assert Z == pytest.approx(254.260, abs=5e-4)
    # (the printed 0.295 for u(X) is 0.29558 truncated, not rounded: allow one unit in the
    # last printed digit)
    assert res.u == pytest.approx([0.071, 0.295, 0.236], abs=1e-3)
    # full precision recomputed from the published inputs (REFERENCES A.2, "C")
    assert res.values == pytest.approx([127.732170, 219.846512, 254.259702], rel=1e-8)
    assert res.u == pytest.approx([0.0710714, 0.2955817, 0.2363361], rel=1e-5)
    r = res.correlation
    # published r(R,X) = -0.588, r(R,Z) = -0.485, r(X,Z) = 0.993
    assert r[0, 1] == pytest.approx(-0.588, abs=5e-4)
    assert r[0, 2] == pytest.approx(-0.485, abs=5e-4)
    assert r[1, 2] == pytest.approx(0.993, abs=5e-4)
    assert [r[0, 1], r[0, 2], r[1, 2]] == pytest.approx([-0.588430, -0.485259, 0.992512], abs=2e-6)
    # the three inputs come from one set of observations: one Welch-Satterthwaite term, nu = 4
    assert res.dof == pytest.approx([4.0, 4.0, 4.0])


def test_analytic_jacobian_matches_numerical(gum_h2_inputs):
    """The numerical Jacobian (central differences) against the analytic derivatives."""
    num = propagate_linear(columns_model(_rxz, gum_h2_inputs, ["R", "X", "Z"]))

    def jac(x):
        V, I, phi = x
        z = V / I
        return np.array(
            [
                [np.cos(phi) / I, -z * np.cos(phi) / I, -z * np.sin(phi)],
                [np.sin(phi) / I, -z * np.sin(phi) / I, z * np.cos(phi)],
                [1 / I, -z / I, 0.0],
            ]
        )

    model = columns_model(_rxz, gum_h2_inputs, ["R", "X", "Z"], jacobian=jac)
    ana = propagate_linear(model)
    assert num.jacobian == pytest.approx(ana.jacobian, rel=1e-7)
    assert num.u == pytest.approx(ana.u, rel=1e-9)


# GUM Table G.2 (equal to NIST TN 1297 Table B.1): t_p(nu) for p = 95 %, 95.45 %, 99 %.
TABLE_G2 = [
    (1, 12.71, 13.97, 63.66),
    (2, 4.30, 4.53, 9.92),
    (4, 2.78, 2.87, 4.60),
    (9, 2.26, 2.32, 3.25),
    (16, 2.12, 2.17, 2.92),
    (50, 2.01, 2.05, 2.68),
]


@pytest.mark.parametrize(("nu", "k95", "k9545", "k99"), TABLE_G2)
def test_coverage_factors_gum_table_g2(nu, k95, k9545, k99):
    """Coverage factors against GUM Table G.2 to the printed two decimals."""
    assert coverage_factor(nu, 0.95) == pytest.approx(k95, abs=0.005)
    assert coverage_factor(nu, 0.9545) == pytest.approx(k9545, abs=0.005)
    assert coverage_factor(nu, 0.99) == pytest.approx(k99, abs=0.005)


def test_coverage_factor_infinite_dof_gum_table_g2():
    """GUM Table G.2, nu = infinity: 1.960, 2.000, 2.576."""
    assert coverage_factor(math.inf, 0.95) == pytest.approx(1.960, abs=5e-4)
    assert coverage_factor(math.inf, 0.9545) == pytest.approx(2.000, abs=5e-4)
    assert coverage_factor(math.inf, 0.99) == pytest.approx(2.576, abs=5e-4)


def test_welch_satterthwaite_gum_g2b():
    """GUM G.4.1 eq. (G.2b) on a two-term sum: nu_eff = u_c^4 / sum(u_i^4/nu_i)."""
    ins = InputSet([InputQuantity("a", 1.0, 0.3, dof=4), InputQuantity("b", 2.0, 0.4, dof=9)])
    res = propagate_linear(columns_model(lambda a, b: a + b, ins, ["y"]))
    uc2 = 0.3**2 + 0.4**2
    assert res.u[0] == pytest.approx(math.sqrt(uc2), rel=1e-10)
    assert res.dof[0] == pytest.approx(uc2**2 / (0.3**4 / 4 + 0.4**4 / 9), rel=1e-8)
    assert res.k[0] == pytest.approx(coverage_factor(res.dof[0], 0.95), rel=1e-12)
    assert res.U[0] == pytest.approx(res.k[0] * res.u[0], rel=1e-12)


def test_type_b_reliability_gives_dof():
    """GUM G.4.2 eq. (G.3): a 25 % relative reliability gives nu = 8."""
    from uqreport.inputs import dof_from_reliability

    assert dof_from_reliability(0.25) == pytest.approx(8.0)
    assert dof_from_reliability(0.10) == pytest.approx(50.0)


@pytest.mark.parametrize(
    ("expr", "fn"),
    [
        ("a*b/c", lambda a, b, c: a * b / c),
        ("exp(-a*b)*c", lambda a, b, c: np.exp(-a * b) * c),
        ("log(a)+b**2/c", lambda a, b, c: np.log(a) + b**2 / c),
    ],
)
def test_against_uncertainties_package(expr, fn):
    """First-order propagation against the `uncertainties` package (general-purpose library)."""
    vals = {"a": (1.7, 0.02), "b": (0.35, 0.01), "c": (2.4, 0.05)}
    ins = InputSet([InputQuantity(k, v, s) for k, (v, s) in vals.items()])
    ours = propagate_linear(columns_model(fn, ins, ["y"]))
    u = {k: uncertainties.ufloat(v, s, tag=k) for k, (v, s) in vals.items()}
    env = {"exp": umath.exp, "log": umath.log, **u}
    ref = eval(expr, {}, env)  # the expression is a test constant, not user input
    assert ours.values[0] == pytest.approx(ref.n, rel=1e-12)
    assert ours.u[0] == pytest.approx(ref.s, rel=1e-7)


def test_against_uncertainties_with_correlation():
    """Correlated inputs against `uncertainties.correlated_values` (total variance only)."""
    x = np.array([2.0, 3.0])
    u = np.array([0.1, 0.2])
    r = np.array([[1.0, 0.6], [0.6, 1.0]])
    ins = InputSet.from_matrix([InputQuantity("x", 2.0, 0.1), InputQuantity("y", 3.0, 0.2)], r)
    ours = propagate_linear(columns_model(lambda x, y: x * y + x / y, ins, ["f"]))
    a, b = uncertainties.correlated_values(x, r * np.outer(u, u))
    ref = a * b + a / b
    assert ours.u[0] == pytest.approx(ref.s, rel=1e-7)


def test_second_order_product_at_zero_gum_5_1_2():
    """GUM 5.1.2 Note: Y = X1 X2 with x1 = x2 = 0 has no first-order term; u^2 = u1^2 u2^2."""
    ins = InputSet([InputQuantity("x1", 0.0, 0.3), InputQuantity("x2", 0.0, 0.5)])
    res = propagate_linear(columns_model(lambda x1, x2: x1 * x2, ins, ["y"]), second_order=True)
    assert res.u[0] == pytest.approx(0.15, rel=1e-6)
    first = propagate_linear(columns_model(lambda x1, x2: x1 * x2, ins, ["y"]))
    assert first.u[0] == pytest.approx(0.0, abs=1e-12)


def test_second_order_square_sum_jcgm101_9_4():
    """JCGM 101 9.4: Y = X1^2 + X2^2 at x = 0, u = 1: Var(Y) = 4 exactly (two chi-square(1))."""
    ins = InputSet([InputQuantity("x1", 0.0, 1.0), InputQuantity("x2", 0.0, 1.0)])
    res = propagate_linear(
        columns_model(lambda x1, x2: x1**2 + x2**2, ins, ["y"]), second_order=True
    )
    assert res.u[0] == pytest.approx(2.0, rel=1e-6)


def test_second_order_mixed_third_derivative_x1_x2_squared_gum_5_1_2():
    """GUM 5.1.2 Note, eq. (10), by hand for Y = X1 X2^2 (independent normal inputs):
    c1 = x2^2, c2 = 2 x1 x2; d2f/dx1dx2 = 2 x2, d2f/dx2^2 = 2 x1, d3f/dx1dx2^2 = 2, so the
    higher-order terms are 6 x2^2 u1^2 u2^2 + 2 x1^2 u2^4.  With the first-order terms they
    equal the exact variance of X1 X2^2 from the normal moments E[X^4] = m^4 + 6 m^2 s^2 +
    3 s^4 (standard result) except its sixth-order term 3 u1^2 u2^4."""
    x1, u1, x2, u2 = 1.5, 0.2, 2.0, 0.3
    ins = InputSet([InputQuantity("x1", x1, u1), InputQuantity("x2", x2, u2)])
    model = columns_model(lambda x1, x2: x1 * x2**2, ins, ["y"])
    res = propagate_linear(model, second_order=True)
    first = (x2**2 * u1) ** 2 + (2 * x1 * x2 * u2) ** 2
    higher = 6 * x2**2 * u1**2 * u2**2 + 2 * x1**2 * u2**4
    assert res.second_order[0] == pytest.approx(higher, rel=1e-6)
    assert res.u[0] ** 2 == pytest.approx(first + higher, rel=1e-8)
    exact = (x1**2 + u1**2) * (x2**4 + 6 * x2**2 * u2**2 + 3 * u2**4) - (x1 * (x2**2 + u2**2)) ** 2
    assert res.u[0] ** 2 == pytest.approx(exact - 3 * u1**2 * u2**4, rel=1e-8)


def test_second_order_cube_gum_5_1_2():
    """GUM 5.1.2 Note, eq. (10), for Y = X^3: c = 3 x^2, d2f = 6 x, d3f = 6, so u^2 =
    9 x^4 u^2 + (18 x^2 + 18 x^2) u^4; the exact normal variance adds 15 u^6 (normal moments,
    standard result)."""
    x, u = 2.0, 0.1
    ins = InputSet([InputQuantity("x", x, u)])
    res = propagate_linear(columns_model(lambda x: x**3, ins, ["y"]), second_order=True)
    # rel 1e-6: the central-difference c = 3 x^2 carries a truncation error h^2 f'''/6
    assert res.u[0] ** 2 == pytest.approx(9 * x**4 * u**2 + 36 * x**2 * u**4, rel=1e-6)
    assert res.second_order[0] == pytest.approx(36 * x**2 * u**4, rel=1e-6)


def test_second_order_terms_close_the_budget():
    """The second-order variance is one budget entry of its own, so that the shares still
    add to 1 (GUM 5.1.2 Note: the terms are added to u_c^2)."""
    from uqreport.budget import budget

    ins = InputSet([InputQuantity("x1", 1.5, 0.2), InputQuantity("x2", 2.0, 0.3)])
    res = propagate_linear(columns_model(lambda x1, x2: x1 * x2**2, ins, ["y"]), second_order=True)
    bud = budget(res, "y")
    extra = [e for e in bud.entries if e.group == "nonlinearity"]
    assert len(extra) == 1 and extra[0].variance == pytest.approx(res.second_order[0])
    assert sum(e.share for e in bud.entries) == pytest.approx(1.0, abs=1e-12)
    assert sum(e.share for e in bud.by_group) == pytest.approx(1.0, abs=1e-12)


def test_second_order_rejects_correlated_inputs(gum_h2_inputs):
    with pytest.raises(InputError, match="uncorrelated inputs only"):
        propagate_linear(columns_model(_rxz, gum_h2_inputs, ["R", "X", "Z"]), second_order=True)


def test_non_psd_correlation_is_an_input_error():
    a, b, c = (InputQuantity(n, 1.0, 0.1) for n in "abc")
    with pytest.raises(InputError, match="not positive semi-definite"):
        InputSet([a, b, c], {("a", "b"): 0.9, ("b", "c"): 0.9, ("a", "c"): -0.9})


def test_asymmetric_correlation_matrix_is_an_input_error():
    a, b = InputQuantity("a", 1.0, 0.1), InputQuantity("b", 1.0, 0.1)
    with pytest.raises(InputError, match="not symmetric"):
        InputSet.from_matrix([a, b], [[1.0, 0.5], [0.4, 1.0]])


def test_correlation_matrix_with_a_non_unit_diagonal_is_an_input_error():
    """A covariance matrix passed as a correlation matrix: r(x, x) = 1 by definition (GUM
    C.3.6), so the diagonal entry is named."""
    a, b = InputQuantity("a", 1.0, 0.1), InputQuantity("b", 1.0, 0.2)
    with pytest.raises(InputError, match=r"r\[1,1\] = 0\.04 on its diagonal \(input 'b'\)"):
        InputSet.from_matrix([a, b], [[1.0, 0.01], [0.01, 0.04]])


def test_model_output_shape_is_checked():
    ins = InputSet([InputQuantity("a", 1.0, 0.1)])
    bad = MeasurementModel(ins, ("y", "z"), lambda X: X[:, :1])
    with pytest.raises(ModelError, match=r"expected \(1, 2\)"):
        propagate_linear(bad)


def test_numerical_tolerance_jcgm101_7_9_2():
    """JCGM 101 7.9.2: u = 0.0123, ndig = 2 -> delta = 0.0005; u = 2 -> delta 0.05 (ndig 2)."""
    assert numerical_tolerance(0.0123, 2) == pytest.approx(0.0005)
    assert numerical_tolerance(2.0, 2) == pytest.approx(0.05)
    assert numerical_tolerance(2.0, 1) == pytest.approx(0.5)
    assert numerical_tolerance(10.1489, 2) == pytest.approx(0.5)
    assert numerical_tolerance(9.96, 2) == pytest.approx(0.5)
