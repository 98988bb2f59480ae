"""The regression core against the NIST StRD certified values.

Every reference number is parsed from the unedited StRD files in ``tests/data/strd`` by
``tests/strd.py``; none is retyped.  Agreement is scored as the number of agreeing
significant digits, -log10(|estimate - certified| / |certified|), capped at 15.

Nonlinear sets start from the SECOND starting vector of each file ("Start 2"), and their
standard deviations come from the residual-scaled covariance, as NIST computes them.
Residual degrees of freedom are n - p for every set (Rat43 prints 9; n - p is 11).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest
from numpy.typing import NDArray
from strd import DATA_DIR, agreeing_digits, check_sha256sums, parse_strd

from uqreport.regression import linear_least_squares, nonlinear_least_squares, polynomial_design

Array = NDArray[np.float64]


# ------------------------------------------------------------------ the files themselves


def test_strd_files_match_their_sha256sums():
    # Integrity of the copied NIST StRD files (hashes in tests/data/strd/SHA256SUMS).
    sums = check_sha256sums()
    assert len(sums) == 11
    assert all(sums.values()), sums


def test_parser_handles_the_documented_quirks():
    # Quirks of the NIST StRD originals, listed in tests/data/strd/README.md.
    longley = parse_strd("Longley")  # header says "(B0,B1,...,B7)": there are 7, B0..B6
    assert longley.param_names == ("B0", "B1", "B2", "B3", "B4", "B5", "B6")
    assert longley.x.shape == (16, 6)
    assert parse_strd("Pontius").name == "Pontius"  # no "(Pontius.dat)" on the name line
    assert parse_strd("Norris").n == 36  # whitespace-only line after the data is not data
    rat43 = parse_strd("Rat43")
    assert (rat43.dof_stated, rat43.n - rat43.p) == (9, 11)
    # NIST StRD, Rat43 (certified values): the residual SD is sqrt(RSS / (n - p)).
    assert rat43.residual_sd == pytest.approx(np.sqrt(rat43.rss / 11), rel=1e-10)
    misra = parse_strd("Misra1a")  # certified range also covers the two starting vectors
    assert misra.start1 is not None and misra.start2 is not None
    assert misra.start1.shape == misra.start2.shape == (2,)


def test_every_data_file_parses():
    for path in sorted(DATA_DIR.glob("*.dat")):
        d = parse_strd(path)
        assert d.certified_params.shape == d.certified_sd.shape == (d.p,)
        assert d.y.shape == (d.n,) and d.x.shape[0] == d.n


# ------------------------------------------------------------------ linear sets


def _longley_design(x: Array) -> Array:
    return np.column_stack([np.ones(x.shape[0]), x])


LINEAR: dict[str, tuple[Callable[[Array], Array], float]] = {
    # name: (design from the predictor columns, minimum agreeing digits)
    "Norris": (lambda x: polynomial_design(x[:, 0], 1), 9.0),
    "Pontius": (lambda x: polynomial_design(x[:, 0], 2), 9.0),
    "NoInt1": (lambda x: x[:, :1], 9.0),  # no intercept: y = B1 x
    "Longley": (_longley_design, 7.0),
}


@pytest.mark.parametrize("name", list(LINEAR))
def test_linear_strd_certified_values(name):
    d = parse_strd(name)
    make_design, digits = LINEAR[name]
    fit = linear_least_squares(make_design(d.x), d.y)
    source = f"NIST StRD, {name} (certified values)"
    assert fit.dof == d.n - d.p == d.dof_stated, source
    assert np.all(agreeing_digits(fit.params, d.certified_params) >= digits), source
    assert np.all(agreeing_digits(fit.std_errors, d.certified_sd) >= digits), source
    assert agreeing_digits(fit.residual_sd, d.residual_sd) >= digits, source
    assert agreeing_digits(fit.rss, d.rss) >= digits, source  # ANOVA residual sum of squares


# ------------------------------------------------------------------ nonlinear sets
# Models written from the model lines of the files; analytic Jacobians d y / d b.


def _misra1a(x, b):
    return b[0] * (1.0 - np.exp(-b[1] * x))


def _misra1a_jac(x, b):
    e = np.exp(-b[1] * x)
    return np.column_stack([1.0 - e, b[0] * x * e])


def _chwirut2(x, b):
    return np.exp(-b[0] * x) / (b[1] + b[2] * x)


def _chwirut2_jac(x, b):
    e, q = np.exp(-b[0] * x), b[1] + b[2] * x
    return np.column_stack([-x * e / q, -e / q**2, -x * e / q**2])


def _danwood(x, b):
    return b[0] * x ** b[1]


def _danwood_jac(x, b):
    return np.column_stack([x ** b[1], b[0] * x ** b[1] * np.log(x)])


def _lanczos3(x, b):
    return sum(b[2 * i] * np.exp(-b[2 * i + 1] * x) for i in range(3))


def _lanczos3_jac(x, b):
    cols = []
    for i in range(3):
        e = np.exp(-b[2 * i + 1] * x)
        cols += [e, -b[2 * i] * x * e]
    return np.column_stack(cols)


def _mgh09(x, b):
    return b[0] * (x**2 + x * b[1]) / (x**2 + x * b[2] + b[3])


def _mgh09_jac(x, b):
    num, den = x**2 + x * b[1], x**2 + x * b[2] + b[3]
    return np.column_stack(
        [num / den, b[0] * x / den, -b[0] * num * x / den**2, -b[0] * num / den**2]
    )


def _eckerle4(x, b):
    return b[0] / b[1] * np.exp(-0.5 * ((x - b[2]) / b[1]) ** 2)


def _eckerle4_jac(x, b):
    z = (x - b[2]) / b[1]
    e = np.exp(-0.5 * z**2)
    return np.column_stack(
        [e / b[1], b[0] / b[1] ** 2 * e * (z**2 - 1.0), b[0] / b[1] ** 2 * e * z]
    )


def _rat43(x, b):
    return b[0] / (1.0 + np.exp(b[1] - b[2] * x)) ** (1.0 / b[3])


def _rat43_jac(x, b):
    e = np.exp(b[1] - b[2] * x)
    q = 1.0 + e
    base = q ** (-1.0 / b[3])
    d_q = -b[0] / b[3] * q ** (-1.0 / b[3] - 1.0)  # d y / d q
    return np.column_stack([base, d_q * e, -d_q * e * x, b[0] * base * np.log(q) / b[3] ** 2])


NONLINEAR = {
    "Misra1a": (_misra1a, _misra1a_jac),
    "Chwirut2": (_chwirut2, _chwirut2_jac),
    "DanWood": (_danwood, _danwood_jac),
    "Lanczos3": (_lanczos3, _lanczos3_jac),
    "MGH09": (_mgh09, _mgh09_jac),
    "Eckerle4": (_eckerle4, _eckerle4_jac),
    "Rat43": (_rat43, _rat43_jac),
}


@pytest.mark.parametrize("derivatives", ["analytic", "numerical"])
@pytest.mark.parametrize("name", list(NONLINEAR))
def test_nonlinear_strd_certified_values_from_start_2(name, derivatives):
    d = parse_strd(name)
    model, jac = NONLINEAR[name]
    assert d.start2 is not None
    fit = nonlinear_least_squares(
        model,
        d.x[:, 0],
        d.y,
        d.start2,  # Start 2 of the file
        jacobian=jac if derivatives == "analytic" else None,
        absolute_sigma=False,
    )
    source = f"NIST StRD, {name} (certified values), from Start 2, {derivatives} Jacobian"
    assert fit.success, source
    assert fit.dof == d.n - d.p, source  # n - p, also for Rat43 (file prints 9)
    sd_scaled = np.sqrt(np.diag(fit.covariance_scaled))
    np.testing.assert_array_equal(sd_scaled, fit.std_errors)  # unit weights: scaled form
    assert np.all(agreeing_digits(fit.params, d.certified_params) >= 6.0), source
    assert np.all(agreeing_digits(sd_scaled, d.certified_sd) >= 6.0), source
    assert agreeing_digits(fit.residual_sd, d.residual_sd) >= 6.0, source
    assert agreeing_digits(fit.rss, d.rss) >= 6.0, source
