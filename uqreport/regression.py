"""Weighted least squares: the regression core of every measurement chain.

Linear fits (calibration lines, log-log rate plots) are solved from the singular value
decomposition of the weighted, column-scaled design matrix, never from the normal equations,
so that ill-conditioned designs keep their digits.  Nonlinear fits (exponential decays,
tracer tails) use a trust-region solver with tight tolerances; their covariance comes from
the SVD of the weighted Jacobian at the solution.

Two covariance matrices are returned for every fit (``W = diag(1 / sigma**2)``):

* ``covariance_known_sigma = (J^T W J)^-1``: the ``sigma`` are standard uncertainties known
  a priori (with ``sigma=None`` they are taken as 1);
* ``covariance_scaled = covariance_known_sigma * chi2 / (n - p)``: the ``sigma`` are only
  relative weights and the scatter of the residuals sets the scale.

``covariance`` is the known-sigma form when ``sigma`` is given and ``absolute_sigma=True``,
the scaled form otherwise.  :func:`predict` propagates a fit to new points with confidence
and prediction bands; :func:`batched_linear_least_squares` refits many Monte Carlo draws of
the responses at once.
"""

from __future__ import annotations

import functools
import warnings
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import optimize, stats

from ._numeric import as_float_array
from .errors import ConvergenceWarning, InputError, ModelError, UqreportError

__all__ = [
    "LeastSquaresFit",
    "LinearFit",
    "NonlinearFit",
    "Prediction",
    "batched_linear_least_squares",
    "linear_least_squares",
    "nonlinear_least_squares",
    "polynomial_design",
    "predict",
    "straight_line",
]

_EPS = float(np.finfo(np.float64).eps)
_SOLVER_TOL = 1e-15  # as tight as the solvers accept (MINPACK needs > machine epsilon)
_FD_RANK_TOL = 1e-9  # relative singular-value floor for a finite-difference Jacobian

CovarianceKind = Literal["known_sigma", "scaled"]
ModelFunction = Callable[[NDArray[np.float64], NDArray[np.float64]], ArrayLike]


def _readonly(a: ArrayLike) -> NDArray[np.float64]:
    out = np.array(a, dtype=np.float64)  # a private copy, so callers' arrays stay writable
    out.setflags(write=False)
    return out


@dataclass(frozen=True, eq=False)
class LeastSquaresFit:
    """Fields shared by :class:`LinearFit` and :class:`NonlinearFit` (arrays are read-only).

    ``J`` is the design matrix or the Jacobian at the solution, ``W = diag(sigma**-2)``.

    Attributes
    ----------
    params : ndarray, shape (p,)
        Least-squares estimates.
    covariance : ndarray, shape (p, p)
        The form named by ``covariance_kind``; ``std_errors`` is the root of its diagonal.
    covariance_known_sigma, covariance_scaled : ndarray, shape (p, p)
        ``(J^T W J)^-1`` (the ``sigma`` taken as known; 1 if None), and that times
        ``reduced_chi2`` (the residual scatter sets the scale).
    std_errors : ndarray, shape (p,)
    residuals, weighted_residuals : ndarray, shape (n,)
        ``y`` minus the fitted values, and those divided by ``sigma``.
    chi2, rss : float
        ``sum(weighted_residuals**2)`` and ``sum(residuals**2)``.
    dof : int
        Residual degrees of freedom, ``n - p``.
    residual_sd, reduced_chi2 : float
        ``sqrt(rss / dof)`` (unweighted) and ``chi2 / dof``.
    n, p, rank : int
        Observations, parameters, numerical rank of ``J`` (always ``p``: rank deficiency
        raises).
    condition_number : float
        2-norm condition number of the weighted ``J`` with columns scaled to unit norm.
    y : ndarray, shape (n,)
    sigma : ndarray, shape (n,), or None
        Per-point standard uncertainties (a scalar is broadcast); None for unit weights.
    absolute_sigma : bool
    covariance_kind : {"known_sigma", "scaled"}
        ``"known_sigma"`` when ``sigma`` was given with ``absolute_sigma=True``.
    """

    params: NDArray[np.float64]
    covariance: NDArray[np.float64]
    covariance_known_sigma: NDArray[np.float64]
    covariance_scaled: NDArray[np.float64]
    std_errors: NDArray[np.float64]
    residuals: NDArray[np.float64]
    weighted_residuals: NDArray[np.float64]
    chi2: float
    rss: float
    dof: int
    residual_sd: float
    reduced_chi2: float
    n: int
    p: int
    rank: int
    condition_number: float
    y: NDArray[np.float64]
    sigma: NDArray[np.float64] | None
    absolute_sigma: bool
    covariance_kind: CovarianceKind

    @property
    def correlation(self) -> NDArray[np.float64]:
        """Correlation matrix of the parameters (the same for both covariance forms)."""
        return self.covariance / np.outer(self.std_errors, self.std_errors)


@dataclass(frozen=True, eq=False)
class LinearFit(LeastSquaresFit):
    """Result of :func:`linear_least_squares`: the :class:`LeastSquaresFit` fields and

    Attributes
    ----------
    design : ndarray, shape (n, p)
        The design matrix ``X``; ``residuals = y - X @ params``.
    design_function : callable or None
        Maps new predictor values to design rows; lets :func:`predict` take ``x`` directly.
    """

    design: NDArray[np.float64]
    design_function: Callable[[ArrayLike], NDArray[np.float64]] | None = None


@dataclass(frozen=True, eq=False)
class NonlinearFit(LeastSquaresFit):
    """Result of :func:`nonlinear_least_squares`: the :class:`LeastSquaresFit` fields and

    Attributes
    ----------
    jacobian : ndarray, shape (n, p)
        ``d model / d params`` at the solution (unweighted; from the analytic Jacobian if
        one was given, else by extrapolated central differences).
    x : ndarray
        The predictor values; ``residuals = y - model(x, params)``.
    nfev : int
        Model evaluations used by the solver (finite-difference ones not counted).
    success : bool
        True when a tolerance criterion was met (False when stopped at ``max_nfev``).
    status : int
        Solver status code (1 to 4 converged, 0 stopped at ``max_nfev``).
    message : str
        Solver termination message.
    model : callable
        The model ``model(x, params)``, reused by :func:`predict`.
    jacobian_function : callable or None
        The analytic Jacobian ``jacobian(x, params)`` if one was given.
    """

    jacobian: NDArray[np.float64]
    x: NDArray[np.float64]
    nfev: int
    success: bool
    status: int
    message: str
    model: ModelFunction
    jacobian_function: ModelFunction | None


@dataclass(frozen=True, eq=False)
class Prediction:
    """Forward prediction of a fitted model at ``m`` new points, from :func:`predict`.

    Attributes
    ----------
    value : ndarray, shape (m,)
        Predicted mean response.
    u_confidence : ndarray, shape (m,)
        Standard uncertainty of the mean, ``sqrt(g^T C g)``, ``C`` the fit's ``covariance``.
    u_prediction : ndarray, shape (m,)
        Of one new observation, ``sqrt(u_confidence**2 + u_observation**2)``.
    u_observation : ndarray, shape (m,)
        ``sigma_new`` if given, else the fit's (constant) sigma for a known-sigma fit, else
        the residual scatter (``residual_sd`` for unit weights).
    sensitivities : ndarray, shape (m, p)
        ``g``: design rows (linear) or ``d model / d params`` at the estimates (nonlinear).
    level, dof, coverage_factor : float
        Coverage probability; ``n - p`` (scaled covariance) or ``inf`` (known sigma); the
        Student-t or normal quantile at ``(1 + level) / 2``.
    confidence_lower, confidence_upper, prediction_lower, prediction_upper : ndarray
        ``value -/+ coverage_factor * u_confidence`` and ``... * u_prediction``.
    """

    value: NDArray[np.float64]
    u_confidence: NDArray[np.float64]
    u_prediction: NDArray[np.float64]
    u_observation: NDArray[np.float64]
    sensitivities: NDArray[np.float64]
    level: float
    dof: float
    coverage_factor: float
    confidence_lower: NDArray[np.float64]
    confidence_upper: NDArray[np.float64]
    prediction_lower: NDArray[np.float64]
    prediction_upper: NDArray[np.float64]


# --------------------------------------------------------------------------- helpers


def _as_sigma(sigma: ArrayLike | None, n: int) -> NDArray[np.float64] | None:
    if sigma is None:
        return None
    s = as_float_array(sigma, name="sigma")
    if s.ndim == 0:
        s = np.full(n, float(s))
    elif s.shape != (n,):
        raise InputError(
            f"sigma: expected a scalar or one value per observation (length {n}), got shape"
            f" {s.shape}. Fix: pass one standard uncertainty per point, or a single value."
        )
    bad = np.flatnonzero(s <= 0.0)
    if bad.size:
        raise InputError(
            f"sigma: standard uncertainties must be positive, got {float(s[bad[0]])!r} at index"
            f" {bad[0]}. Fix: pass sigma > 0 for every point, or sigma=None for unit weights."
        )
    return s


def _check_counts(n: int, p: int) -> None:
    if p < 1:
        raise InputError("design: no parameters (0 columns). Fix: give at least one column.")
    if n <= p:
        raise InputError(
            f"y: {n} observation(s) for {p} parameter(s); a fit with an uncertainty needs"
            " more observations than parameters (n > p). Fix: add observations or remove"
            " parameters."
        )


def _scaled_svd(
    a: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Thin SVD of ``a / d`` with ``d`` the column norms; returns ``(u, s, vt, d)``."""
    d = np.linalg.norm(a, axis=-2)
    safe = np.where(d > 0.0, d, 1.0)
    u, s, vt = np.linalg.svd(a / safe[..., None, :], full_matrices=False)
    return u, s, vt, d


def _factorise(a: NDArray[np.float64], rel_tol: float) -> tuple[NDArray[np.float64], ...] | str:
    """Thin SVD ``(u, s, vt, d, rank, cond)`` of ``a`` with columns scaled to unit norm by
    ``d``, or a description of the rank deficiency (singular values below ``rel_tol * s[0]``
    or an all-zero column)."""
    u, s, vt, d = _scaled_svd(a)
    rank = int(np.count_nonzero(s > s[0] * rel_tol)) if s[0] > 0 else 0
    cond = float(s[0] / s[-1]) if s[-1] > 0 else float("inf")
    zero = np.flatnonzero(d == 0.0)
    if zero.size or rank < a.shape[1]:
        why = f"column {zero[0]} is all zeros" if zero.size else "columns are dependent"
        return f"rank {rank} < {a.shape[1]} columns; {why}; condition number {cond:.3g}"
    return u, s, vt, d, rank, cond


def _statistics(
    y: NDArray[np.float64],
    fitted: NDArray[np.float64],
    sigma: NDArray[np.float64] | None,
    factors: tuple[NDArray[np.float64], ...],
    params: NDArray[np.float64],
    absolute_sigma: bool,
) -> dict[str, object]:
    """The :class:`LeastSquaresFit` fields from the data, fitted values and factorisation."""
    _, s, vt, d, rank, cond = factors
    n, p = y.size, params.size
    residuals = y - fitted
    wres = residuals if sigma is None else residuals / sigma
    chi2, rss, dof = float(wres @ wres), float(residuals @ residuals), n - p
    vs = vt.T / s
    cov_known = (vs @ vs.T) / np.outer(d, d)
    cov_known = 0.5 * (cov_known + cov_known.T)
    cov_scaled = cov_known * (chi2 / dof)
    kind: CovarianceKind = "known_sigma" if sigma is not None and absolute_sigma else "scaled"
    cov = cov_known if kind == "known_sigma" else cov_scaled
    arrays = {
        "params": params,
        "covariance": cov,
        "covariance_known_sigma": cov_known,
        "covariance_scaled": cov_scaled,
        "std_errors": np.sqrt(np.diag(cov)),
        "residuals": residuals,
        "weighted_residuals": wres,
        "y": y,
    }
    return {k: _readonly(v) for k, v in arrays.items()} | {
        "chi2": chi2,
        "rss": rss,
        "dof": dof,
        "residual_sd": float(np.sqrt(rss / dof)),
        "reduced_chi2": chi2 / dof,
        "n": n,
        "p": p,
        "rank": int(rank),
        "condition_number": float(cond),
        "sigma": None if sigma is None else _readonly(sigma),
        "absolute_sigma": bool(absolute_sigma),
        "covariance_kind": kind,
    }


def _difference(
    func: Callable[[NDArray[np.float64]], NDArray[np.float64]],
    params: NDArray[np.float64],
    j: int,
    h: float,
) -> NDArray[np.float64]:
    """Central difference of ``func`` along parameter ``j`` with step ``h``."""
    up, down = params.copy(), params.copy()
    up[j] += h
    down[j] -= h
    with np.errstate(all="ignore"):
        return (func(up) - func(down)) / (up[j] - down[j])


def _central_jacobian(
    func: Callable[[NDArray[np.float64]], NDArray[np.float64]], params: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Central-difference ``d func / d params``, steps eps^(1/3) relative to each value.

    Cheap (2p evaluations); used inside the solver's iterations.
    """
    base = np.where(params != 0.0, np.abs(params), 1.0) * _EPS ** (1 / 3)
    return np.stack([_difference(func, params, j, base[j]) for j in range(params.size)], -1)


def _extrapolated_jacobian(
    func: Callable[[NDArray[np.float64]], NDArray[np.float64]],
    params: NDArray[np.float64],
    *,
    first_step: float = 0.02,
    shrink: float = 2.0,
    levels: int = 12,
) -> NDArray[np.float64]:
    """Accurate ``d func / d params`` by Richardson extrapolation of central differences.

    For each parameter, central differences at steps ``first_step * |p_j| / shrink**i`` are
    extrapolated to zero step in a triangular table; the entry whose two neighbours agree
    best is kept.  Unlike a single relative step, this is accurate also when the model
    varies on a scale much smaller than the parameter's value (a peak position, a time
    offset).  Steps that give non-finite values restart the table at a smaller step.
    """
    base = np.where(params != 0.0, np.abs(params), 1.0) * first_step
    cols = []
    for j in range(params.size):
        best: NDArray[np.float64] | None = None
        best_err = np.inf
        last: NDArray[np.float64] | None = None
        previous: list[NDArray[np.float64]] = []
        for i in range(levels):
            estimate = _difference(func, params, j, base[j] / shrink**i)
            if not np.all(np.isfinite(estimate)):
                previous = []
                continue
            last = estimate
            row = [estimate]
            factor = shrink**2
            for k, older in enumerate(previous):
                row.append(row[k] + (row[k] - older) / (factor - 1.0))
                factor *= shrink**2
                err = max(np.max(np.abs(row[k + 1] - row[k])), np.max(np.abs(row[k + 1] - older)))
                if err <= best_err:
                    best, best_err = row[k + 1], err
            if previous and np.max(np.abs(row[-1] - previous[-1])) >= 2.0 * best_err:
                break  # higher orders got worse: round-off dominates from here on
            previous = row
        cols.append(best if best is not None else last if last is not None else estimate)
    return np.stack(cols, axis=-1)


# --------------------------------------------------------------------------- linear


def polynomial_design(x: ArrayLike, degree: int, *, centre: float = 0.0) -> NDArray[np.float64]:
    """Design matrix ``[1, (x - centre), ..., (x - centre)**degree]``, shape (n, degree + 1).

    A scalar ``x`` gives one row.  Centring the predictor near its mean improves the
    conditioning and makes the intercept the value at ``centre``.
    """
    if isinstance(degree, bool) or not isinstance(degree, (int, np.integer)) or degree < 0:
        raise InputError(f"degree: expected an integer >= 0, got {degree!r}. Fix: e.g. degree=1.")
    xv = as_float_array(x, name="x")
    if xv.ndim > 1:
        raise InputError(f"x: expected a 1-dimensional array, got shape {xv.shape}.")
    t = np.atleast_1d(xv) - float(centre)
    return np.vander(t, int(degree) + 1, increasing=True)


def linear_least_squares(
    design: ArrayLike,
    y: ArrayLike,
    *,
    sigma: ArrayLike | None = None,
    absolute_sigma: bool = True,
    design_function: Callable[[ArrayLike], NDArray[np.float64]] | None = None,
) -> LinearFit:
    """Weighted linear least squares ``y ~ design @ params``.

    Parameters
    ----------
    design : array_like, shape (n, p)
        Design matrix.
    y : array_like, shape (n,)
        Responses (NaN or infinity raise :class:`InputError`).
    sigma : float or array_like of shape (n,), optional
        Standard uncertainty of each response; None gives unit weights.
    absolute_sigma : bool, default True
        With ``sigma`` given, True reports the known-sigma covariance ``(X^T W X)^-1`` and
        False the residual-scaled one.  Without ``sigma`` the scaled form is always reported.
    design_function : callable, optional
        ``design_function(x) -> (m, p)`` design rows, stored for :func:`predict`.

    Returns
    -------
    LinearFit

    Raises
    ------
    InputError
        Bad shapes, NaN, non-positive ``sigma``, ``n <= p`` or a rank-deficient design.
    """
    X = as_float_array(design, name="design", ndim=2)
    yv = as_float_array(y, name="y", ndim=1)
    n, p = X.shape
    if yv.size != n:
        raise InputError(
            f"y: length {yv.size} does not match the {n} rows of design. Fix: pass one"
            " response per design row."
        )
    _check_counts(n, p)
    s = _as_sigma(sigma, n)
    w = np.ones(n) if s is None else 1.0 / s
    A, b = X * w[:, None], yv * w
    factors = _factorise(A, max(n, p) * _EPS)
    if isinstance(factors, str):
        raise InputError(
            f"design: the design matrix is rank deficient ({factors} after column scaling)."
            " Fix: remove the redundant column(s) or regressor(s), or add points that"
            " separate them."
        )
    u, sv, vt, d = factors[:4]

    def solve(rhs: NDArray[np.float64]) -> NDArray[np.float64]:
        return (vt.T @ ((u.T @ rhs) / sv)) / d

    params = solve(b)
    params = params + solve(b - A @ params)  # one step of iterative refinement
    stats_ = _statistics(yv, X @ params, s, factors, params, absolute_sigma)
    return LinearFit(**stats_, design=_readonly(X), design_function=design_function)


def straight_line(
    x: ArrayLike,
    y: ArrayLike,
    *,
    sigma: ArrayLike | None = None,
    absolute_sigma: bool = True,
    x0: float = 0.0,
) -> LinearFit:
    """Fit ``y = params[0] + params[1] * (x - x0)``; :func:`predict` then takes ``x`` values.

    See :func:`linear_least_squares` for ``sigma`` and ``absolute_sigma``.
    """
    xv = as_float_array(x, name="x", ndim=1)
    design_function = functools.partial(polynomial_design, degree=1, centre=float(x0))
    return linear_least_squares(
        design_function(xv),
        y,
        sigma=sigma,
        absolute_sigma=absolute_sigma,
        design_function=design_function,
    )


def batched_linear_least_squares(
    design: ArrayLike, Y: ArrayLike, *, sigma: ArrayLike | None = None
) -> NDArray[np.float64]:
    """Least-squares parameters for many response vectors at once (Monte Carlo refits).

    Parameters
    ----------
    design : array_like, shape (n, p) or (n_draws, n, p)
        One design shared by all draws (factorised once), or one design per draw.
    Y : array_like, shape (n_draws, n)
        One response vector per row.
    sigma : float or array_like of shape (n,) or (n_draws, n), optional
        Standard uncertainties (weights only: no covariance is computed here).

    Returns
    -------
    ndarray, shape (n_draws, p)
        Same estimates as :func:`linear_least_squares` on each draw, without a Python loop.
    """
    X = as_float_array(design, name="design")
    Yv = as_float_array(Y, name="Y", ndim=2)
    m, n = Yv.shape
    if X.ndim not in (2, 3) or X.shape[-2] != n or (X.ndim == 3 and X.shape[0] != m):
        raise InputError(
            f"design: shape {X.shape} does not fit Y of shape {Yv.shape}. Fix: pass a shared"
            f" design of shape ({n}, p) or one per draw of shape ({m}, {n}, p)."
        )
    p = X.shape[-1]
    _check_counts(n, p)
    if sigma is None:
        w = np.ones(n)
    else:
        s = as_float_array(sigma, name="sigma")
        if s.ndim == 2 and s.shape != (m, n):
            raise InputError(f"sigma: shape {s.shape} does not match Y {Yv.shape}.")
        w = 1.0 / (_as_sigma(s, n) if s.ndim < 2 else _as_sigma(s.ravel(), m * n).reshape(m, n))
    if X.ndim == 2 and w.ndim == 1:
        factors = _factorise(X * w[:, None], max(n, p) * _EPS)
        if isinstance(factors, str):
            raise InputError(
                f"design: the design matrix is rank deficient ({factors}). Fix: remove the"
                " redundant column(s)."
            )
        u, sv, vt, d = factors[:4]
        pinv = (vt.T / sv) @ u.T / d[:, None]
        return (Yv * w) @ pinv.T
    A = np.broadcast_to(X, (m, n, p)) * np.broadcast_to(w, (m, n))[..., None]
    u, sv, vt, d = _scaled_svd(A)
    tol = sv[:, :1] * max(n, p) * _EPS
    bad = np.flatnonzero(np.any(sv <= tol, axis=1) | np.any(d == 0.0, axis=1))
    if bad.size:
        raise InputError(
            f"design: the design of draw {bad[0]} is rank deficient ({bad.size} draw(s) in"
            " all). Fix: remove the redundant column(s) or the degenerate draws."
        )
    utb = np.einsum("knq,kn->kq", u, Yv * w)
    return np.einsum("kqp,kq->kp", vt, utb / sv) / d


# --------------------------------------------------------------------------- nonlinear


def nonlinear_least_squares(
    model: ModelFunction,
    x: ArrayLike,
    y: ArrayLike,
    p0: ArrayLike,
    *,
    jacobian: ModelFunction | None = None,
    sigma: ArrayLike | None = None,
    absolute_sigma: bool = True,
    bounds: tuple[ArrayLike, ArrayLike] | None = None,
    max_nfev: int | None = None,
) -> NonlinearFit:
    """Weighted nonlinear least squares ``y ~ model(x, params)``.

    Parameters
    ----------
    model : callable
        ``model(x, params) -> (n,)`` predicted responses; ``params`` is a 1-D array.
    x : array_like
        Predictor values, passed to ``model`` unchanged (any shape).
    y : array_like, shape (n,)
        Responses.
    p0 : array_like, shape (p,)
        Starting values.
    jacobian : callable, optional
        ``jacobian(x, params) -> (n, p)``, ``d model / d params``.  Without it the solver
        uses finite differences and the covariance uses central differences.
    sigma, absolute_sigma :
        As in :func:`linear_least_squares`.
    bounds : (lower, upper), optional
        Bounds on the parameters (scalars or length-p arrays; +/-inf for none).  Switches the
        solver from Levenberg-Marquardt to a bounded trust-region method.
    max_nfev : int, optional
        Limit on model evaluations; reaching it emits :class:`ConvergenceWarning`.

    Returns
    -------
    NonlinearFit

    Raises
    ------
    InputError
        Bad shapes, NaN, non-positive ``sigma``, ``n <= p``, ``p0`` outside ``bounds``.
    ModelError
        Non-finite model output, solver failure, or a singular Jacobian at the solution.
    """
    if not callable(model):
        raise InputError(f"model: expected a callable model(x, params), got {model!r}.")
    xv = as_float_array(x, name="x")
    yv = as_float_array(y, name="y", ndim=1)
    start = as_float_array(p0, name="p0", ndim=1)
    n, p = yv.size, start.size
    _check_counts(n, p)
    s = _as_sigma(sigma, n)
    w = np.ones(n) if s is None else 1.0 / s

    def f(params: NDArray[np.float64]) -> NDArray[np.float64]:
        out = np.asarray(model(xv, params), dtype=np.float64)
        if out.shape != (n,):
            raise ModelError(f"model: returned shape {out.shape}, expected ({n},) (one per y).")
        return out

    def jac_of(params: NDArray[np.float64]) -> NDArray[np.float64]:
        J = np.asarray(jacobian(xv, params), dtype=np.float64)  # type: ignore[misc]
        if J.shape != (n, p):
            raise ModelError(f"jacobian: returned shape {J.shape}, expected ({n}, {p}).")
        return J

    if not np.all(np.isfinite(f(start))):
        raise ModelError(
            f"model: non-finite values at the starting point p0={start.tolist()}. Fix: start"
            " inside the model's domain."
        )
    kwargs: dict[str, object] = {"method": "lm"}
    if bounds is not None:
        try:
            lb, ub = (
                np.broadcast_to(as_float_array(b, name="bounds", nan_policy="propagate"), p)
                for b in bounds
            )
        except ValueError:
            raise InputError(
                f"bounds: expected (lower, upper), each a scalar or {p} values, got {bounds!r}."
            ) from None
        if np.any(np.isnan(lb) | np.isnan(ub)) or np.any(lb >= ub):
            raise InputError(f"bounds: need lower < upper, got {lb.tolist()}, {ub.tolist()}.")
        if np.any(start < lb) or np.any(start > ub):
            raise InputError(
                f"p0: {start.tolist()} lies outside bounds ({lb.tolist()}, {ub.tolist()})."
                " Fix: choose a starting point within the bounds."
            )
        kwargs = {"method": "trf", "bounds": (lb, ub)}
    if jacobian is not None:
        kwargs["jac"] = lambda q: jac_of(q) * w[:, None]
    else:  # steps relative to each parameter (scipy's default step floors at 1)
        kwargs["jac"] = lambda q: _central_jacobian(f, q) * w[:, None]
    try:
        # trial steps may leave the model's domain (overflow in exp, ...); the solver
        # handles that, and the solution is checked for finiteness below
        with np.errstate(all="ignore"):
            res = optimize.least_squares(
                lambda q: (f(q) - yv) * w,
                start,
                xtol=_SOLVER_TOL,
                ftol=_SOLVER_TOL,
                gtol=_SOLVER_TOL,
                x_scale="jac",
                max_nfev=max_nfev,
                **kwargs,  # type: ignore[arg-type]
            )
    except UqreportError:
        raise
    except (ValueError, KeyError, ArithmeticError, np.linalg.LinAlgError) as exc:
        raise ModelError(f"nonlinear fit failed from p0={start.tolist()}: {exc}") from exc
    if res.status < 0 or not np.all(np.isfinite(res.x)):
        raise ModelError(f"nonlinear fit failed from p0={start.tolist()}: {res.message}")
    if res.status == 0:
        warnings.warn(
            f"nonlinear fit stopped after {res.nfev} model evaluations (max_nfev) before"
            " converging; the estimates may be inaccurate. Fix: raise max_nfev or improve p0.",
            ConvergenceWarning,
            stacklevel=2,
        )
    params = np.array(res.x, dtype=np.float64)
    J = jac_of(params) if jacobian is not None else _extrapolated_jacobian(f, params)
    yhat = f(params)
    if not (np.all(np.isfinite(J)) and np.all(np.isfinite(yhat))):
        raise ModelError(
            f"model: non-finite values or derivatives at the solution {params.tolist()}."
        )
    factors = _factorise(J * w[:, None], max(n, p) * _EPS if jacobian is not None else _FD_RANK_TOL)
    if isinstance(factors, str):
        raise ModelError(
            f"the Jacobian at the solution {params.tolist()} is singular ({factors}): the"
            " parameters cannot all be determined from these data. Fix: fix or remove a"
            " parameter, or start from another p0."
        )
    return NonlinearFit(
        **_statistics(yv, yhat, s, factors, params, absolute_sigma),
        jacobian=_readonly(J),
        x=_readonly(xv),
        nfev=int(res.nfev),
        success=bool(res.status > 0),
        status=int(res.status),
        message=str(res.message),
        model=model,
        jacobian_function=jacobian,
    )


# --------------------------------------------------------------------------- prediction


def _observation_variance(
    fit: LeastSquaresFit, sigma_new: ArrayLike | None, m: int
) -> NDArray[np.float64]:
    if sigma_new is not None:
        s = as_float_array(sigma_new, name="sigma_new")
        if np.any(s < 0.0):
            raise InputError(f"sigma_new: must be >= 0, got {s.tolist()}.")
        try:
            return np.broadcast_to(s**2, (m,)).copy()
        except ValueError:
            raise InputError(
                f"sigma_new: shape {s.shape} does not match the {m} prediction point(s)."
            ) from None
    if fit.sigma is None:
        return np.full(m, fit.residual_sd**2)
    if np.ptp(fit.sigma) != 0.0:
        raise InputError(
            "sigma_new: the fit used per-point sigma that vary, so the uncertainty of a new"
            " observation is not known. Fix: pass sigma_new= for the new point(s)."
        )
    var = float(fit.sigma[0]) ** 2
    if fit.covariance_kind == "scaled":
        var *= fit.reduced_chi2
    return np.full(m, var)


def predict(
    fit: LeastSquaresFit,
    x_new: ArrayLike,
    *,
    level: float = 0.95,
    model: Callable[..., ArrayLike] | None = None,
    sigma_new: ArrayLike | None = None,
) -> Prediction:
    """Predict a fitted model at new points, with confidence and prediction bands.

    Parameters
    ----------
    fit : LinearFit or NonlinearFit
        The fit to propagate (its ``covariance`` is used).
    x_new : array_like
        New predictor values.  For a :class:`LinearFit` with a ``design_function`` (e.g.
        from :func:`straight_line`) these are ``x`` values; otherwise a design matrix of
        shape (m, p) (a 1-D array of length p is one design row).  For a
        :class:`NonlinearFit`, values passed to the model as its ``x``.
    level : float, default 0.95
        Coverage probability of the bands, in (0, 1).
    model : callable, optional
        Overrides the stored design function (linear: ``model(x_new) -> (m, p)``) or model
        (nonlinear: ``model(x_new, params) -> (m,)``, differentiated numerically).
    sigma_new : float or array_like, optional
        Standard uncertainty of a new observation.  If omitted: the fit's sigma for a
        known-sigma fit with constant sigma, the residual scatter for a scaled fit.

    Returns
    -------
    Prediction
    """
    if not 0.0 < float(level) < 1.0:
        raise InputError(f"level: must lie strictly between 0 and 1, got {level!r}.")
    params = np.asarray(fit.params)
    if isinstance(fit, LinearFit):
        design_function = model if model is not None else fit.design_function
        if design_function is not None:
            G = as_float_array(design_function(x_new), name="design_function(x_new)")
        else:
            G = as_float_array(x_new, name="x_new")
        G = np.atleast_2d(G)
        if G.ndim != 2 or G.shape[1] != fit.p:
            raise InputError(
                f"x_new: expected design rows with {fit.p} columns, got shape {G.shape}. Fix:"
                " pass a design matrix, or fit with a design_function / straight_line."
            )
        value = G @ params
    elif isinstance(fit, NonlinearFit):
        f = model if model is not None else fit.model
        xv = as_float_array(x_new, name="x_new")

        def fx(q: NDArray[np.float64]) -> NDArray[np.float64]:
            return np.atleast_1d(np.asarray(f(xv, q), dtype=np.float64))

        value = fx(params)
        if value.ndim != 1:
            raise ModelError(f"model: returned shape {value.shape} for x_new; expected (m,).")
        if model is None and fit.jacobian_function is not None:
            G = np.atleast_2d(np.asarray(fit.jacobian_function(xv, params), dtype=np.float64))
        else:
            G = _extrapolated_jacobian(fx, params)
        if G.shape != (value.size, fit.p):
            raise ModelError(f"jacobian: returned shape {G.shape}, expected {(value.size, fit.p)}.")
    else:
        raise InputError(f"fit: expected a LinearFit or NonlinearFit, got {type(fit).__name__}.")
    if not np.all(np.isfinite(value)):
        raise ModelError("model: non-finite predicted values at x_new.")
    u_conf = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", G, fit.covariance, G), 0.0))
    u_obs = np.sqrt(_observation_variance(fit, sigma_new, value.size))
    u_pred = np.hypot(u_conf, u_obs)
    q = 0.5 * (1.0 + float(level))
    if fit.covariance_kind == "known_sigma":
        dof, k = float("inf"), float(stats.norm.ppf(q))
    else:
        dof, k = float(fit.dof), float(stats.t.ppf(q, fit.dof))
    return Prediction(
        value=_readonly(value),
        u_confidence=_readonly(u_conf),
        u_prediction=_readonly(u_pred),
        u_observation=_readonly(u_obs),
        sensitivities=_readonly(G),
        level=float(level),
        dof=dof,
        coverage_factor=k,
        confidence_lower=_readonly(value - k * u_conf),
        confidence_upper=_readonly(value + k * u_conf),
        prediction_lower=_readonly(value - k * u_pred),
        prediction_upper=_readonly(value + k * u_pred),
    )
