"""Weighted least-squares fit of a first-order decay, vectorised over data sets.

Model (time t from mixing, baseline c = A_inf, initial value a0 = A_0, rate k):

    f(t) = c + (a0 - c) exp(-k t)

Any of c and a0 may be held fixed (per data set); k is always fitted.  ``fit_decay`` fits N
data sets at once (shape (N, n)) by a damped Gauss-Newton (Levenberg-Marquardt) iteration
with batched normal-equation solves of at most 3 x 3 and no Python loop over data sets; the
Monte Carlo and linear engines call it on every draw.  The same code fits one data set
(N = 1), so the nominal fit, the Jacobian of the linear engine and the Monte Carlo refits
share one estimator.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..errors import ConvergenceWarning, InputError

__all__ = ["DecayFit", "decay_curve", "fit_decay"]

_PARAMS = ("baseline", "initial", "rate")


def decay_curve(
    t: ArrayLike, baseline: ArrayLike, initial: ArrayLike, rate: ArrayLike
) -> NDArray[np.float64]:
    """f(t) = c + (a0 - c) exp(-k t), broadcasting (N, 1) parameters against (N, n) times."""
    t = np.asarray(t, dtype=float)
    c = np.asarray(baseline, dtype=float)
    a0 = np.asarray(initial, dtype=float)
    k = np.asarray(rate, dtype=float)
    if t.ndim == 2:
        c, a0, k = (np.reshape(v, (-1, 1)) if v.ndim else v for v in (c, a0, k))
    return c + (a0 - c) * np.exp(-k * t)


@dataclass(frozen=True)
class DecayFit:
    """Result of :func:`fit_decay` for N data sets.

    Attributes
    ----------
    params:
        (N, 3) fitted (or fixed) baseline c, initial value a0 and rate k.
    free:
        (3,) which of (c, a0, k) were fitted.
    covariance:
        (N, 3, 3) known-sigma covariance (J^T W J)^-1 of the free parameters (rows and
        columns of fixed parameters are zero), with W the weights given.
    chi2:
        (N,) weighted residual sum of squares.
    n:
        Number of points per data set; ``dof`` = n - number of free parameters.
    converged:
        (N,) whether the iteration met its tolerance.
    iterations:
        Iterations used (the largest over the data sets).
    """

    params: NDArray[np.float64]
    free: NDArray[np.bool_]
    covariance: NDArray[np.float64]
    chi2: NDArray[np.float64]
    n: int
    converged: NDArray[np.bool_]
    iterations: int

    @property
    def dof(self) -> int:
        return self.n - int(self.free.sum())

    @property
    def baseline(self) -> NDArray[np.float64]:
        return self.params[:, 0]

    @property
    def initial(self) -> NDArray[np.float64]:
        return self.params[:, 1]

    @property
    def rate(self) -> NDArray[np.float64]:
        return self.params[:, 2]

    @property
    def covariance_scaled(self) -> NDArray[np.float64]:
        """Residual-scaled covariance: known-sigma form times chi2/(n - p)."""
        return self.covariance * (self.chi2 / max(self.dof, 1))[:, None, None]

    def std_errors(self, *, scaled: bool = False) -> NDArray[np.float64]:
        cov = self.covariance_scaled if scaled else self.covariance
        return np.sqrt(np.clip(np.diagonal(cov, axis1=1, axis2=2), 0.0, None))


def _as_2d(v: ArrayLike, name: str) -> NDArray[np.float64]:
    arr = np.asarray(v, dtype=float)
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2:
        raise InputError(f"{name}: expected shape (n,) or (N, n), got {arr.shape}.")
    return arr


def _shared_or_full(arr: NDArray[np.float64], N: int, n: int) -> NDArray[np.float64]:
    if arr.shape[0] == 1:
        return np.broadcast_to(arr, (1, n))
    return np.broadcast_to(arr, (N, n))


def _rows(
    arr: NDArray[np.float64], idx: NDArray[np.bool_] | NDArray[np.intp]
) -> NDArray[np.float64]:
    """Rows ``idx`` of a per-data-set array; a shared (1, n) row as it is."""
    return arr if arr.shape[0] == 1 else arr[idx]


def _fixed(v: ArrayLike | None, N: int) -> NDArray[np.float64] | None:
    if v is None:
        return None
    return np.broadcast_to(np.asarray(v, dtype=float).reshape(-1), (N,)).copy()


def _design(
    t: NDArray[np.float64], theta: NDArray[np.float64], free: NDArray[np.bool_]
) -> tuple[NDArray[np.float64], list[NDArray[np.float64]]]:
    """Model values (N, n) and the Jacobian columns of the free parameters.

    The last column is d f / d k = -(a0 - c) t e; the exponential e = exp(-k t) is the
    second column when a0 is free, and is recovered from the rate column otherwise.
    """
    c, a0, k = theta[:, 0:1], theta[:, 1:2], theta[:, 2:3]
    e = np.exp(-k * t)
    d = a0 - c
    f = c + d * e
    cols = []
    if free[0]:
        cols.append(1.0 - e)
    if free[1]:
        cols.append(e)
    cols.append(-d * t * e)
    return f, cols


def _normal_equations(
    cols: list[NDArray[np.float64]], w: NDArray[np.float64], r: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """J^T W J (N, q, q) and J^T W r (N, q) by explicit sums (q <= 3)."""
    q = len(cols)
    N = r.shape[0]
    A = np.empty((N, q, q))
    g = np.empty((N, q))
    wcols = [w * cj for cj in cols]
    for i in range(q):
        g[:, i] = np.einsum("ij,ij->i", wcols[i], r)
        for j in range(i, q):
            A[:, i, j] = A[:, j, i] = np.einsum("ij,ij->i", wcols[i], cols[j])
    return A, g


def _curvature(
    t: NDArray[np.float64],
    theta: NDArray[np.float64],
    free: NDArray[np.bool_],
    w: NDArray[np.float64],
    r: NDArray[np.float64],
    rate_column: NDArray[np.float64],
) -> NDArray[np.float64]:
    """sum_j w_j r_j d2f_j/dtheta dtheta^T over the free parameters, (N, q, q).

    Newton's Hessian of S/2 is J^T W J minus this term; only the k row and column are
    non-zero (d2f/dk2 = (a0 - c) t^2 e, d2f/dc dk = t e, d2f/da0 dk = -t e).  With
    ``rate_column`` = -(a0 - c) t e: t e = -rate_column / (a0 - c).
    """
    d = theta[:, 1] - theta[:, 0]
    wr_col = w * r * rate_column  # = -(a0 - c) w r t e
    s2 = -np.einsum("ij,ij->i", wr_col, t)  # (a0 - c) sum w r t^2 e
    with np.errstate(divide="ignore", invalid="ignore"):
        s1 = -wr_col.sum(axis=1) / d  # sum w r t e
    q = int(free.sum())
    R = np.zeros((r.shape[0], q, q))
    R[:, q - 1, q - 1] = s2
    j = 0
    if free[0]:
        R[:, j, q - 1] = R[:, q - 1, j] = s1
        j += 1
    if free[1]:
        R[:, j, q - 1] = R[:, q - 1, j] = -s1
    return R


def _small_step(
    delta: NDArray[np.float64], theta_free: NDArray[np.float64], A: NDArray[np.float64], rtol: float
) -> NDArray[np.bool_]:
    """A step is converged when below rtol relative to the parameter, or below 1e-5 of the
    parameter's standard error (1/sqrt(A_ii), a lower bound of it).  The step is still
    applied, so the error left is far smaller (quadratic convergence near the minimum):
    far below any uncertainty the fit reports and below what the numerical Jacobian
    resolves."""
    se = 1.0 / np.sqrt(np.maximum(np.diagonal(A, axis1=1, axis2=2), 1e-300))
    tol = np.maximum(rtol * np.abs(theta_free), 1e-5 * se)
    return np.all(np.abs(delta) <= tol, axis=1)


def _solve(
    M: NDArray[np.float64], g: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Batched solve of M delta = g for q <= 3 by the adjugate (closed form, vectorised).

    Rows with a singular or non-finite M get delta = 0 and ok = False instead of failing the
    whole batch.
    """
    q = M.shape[1]
    if q == 1:
        det = M[:, 0, 0]
        adj = np.ones_like(M)
    elif q == 2:
        a, b, c, d = M[:, 0, 0], M[:, 0, 1], M[:, 1, 0], M[:, 1, 1]
        det = a * d - b * c
        adj = np.stack([np.stack([d, -b], axis=1), np.stack([-c, a], axis=1)], axis=1)
    else:
        m = M
        c00 = m[:, 1, 1] * m[:, 2, 2] - m[:, 1, 2] * m[:, 2, 1]
        c01 = m[:, 0, 2] * m[:, 2, 1] - m[:, 0, 1] * m[:, 2, 2]
        c02 = m[:, 0, 1] * m[:, 1, 2] - m[:, 0, 2] * m[:, 1, 1]
        c10 = m[:, 1, 2] * m[:, 2, 0] - m[:, 1, 0] * m[:, 2, 2]
        c11 = m[:, 0, 0] * m[:, 2, 2] - m[:, 0, 2] * m[:, 2, 0]
        c12 = m[:, 0, 2] * m[:, 1, 0] - m[:, 0, 0] * m[:, 1, 2]
        c20 = m[:, 1, 0] * m[:, 2, 1] - m[:, 1, 1] * m[:, 2, 0]
        c21 = m[:, 0, 1] * m[:, 2, 0] - m[:, 0, 0] * m[:, 2, 1]
        c22 = m[:, 0, 0] * m[:, 1, 1] - m[:, 0, 1] * m[:, 1, 0]
        det = m[:, 0, 0] * c00 + m[:, 0, 1] * c10 + m[:, 0, 2] * c20
        adj = np.stack(
            [
                np.stack([c00, c01, c02], 1),
                np.stack([c10, c11, c12], 1),
                np.stack([c20, c21, c22], 1),
            ],
            axis=1,
        )
    scale = np.prod(np.abs(np.diagonal(M, axis1=1, axis2=2)), axis=1)
    with np.errstate(all="ignore"):
        ok = np.isfinite(det) & (np.abs(det) > 1e-14 * scale) & np.all(np.isfinite(g), axis=1)
        delta = np.einsum("nij,nj->ni", adj, g) / np.where(ok, det, 1.0)[:, None]
    delta[~ok] = 0.0
    return delta, ok


def _grid_start(
    t: NDArray[np.float64],
    a: NDArray[np.float64],
    w: NDArray[np.float64],
    theta: NDArray[np.float64],
    free: NDArray[np.bool_],
) -> NDArray[np.float64]:
    """Starting rates from a log-spaced grid, with the linear parameters projected out."""
    t = np.broadcast_to(t, a.shape)
    w = np.broadcast_to(w, a.shape)
    span = np.maximum(t.max(axis=1) - np.minimum(t.min(axis=1), 0.0), 1e-12)
    grid = np.geomspace(0.01, 50.0, 80)
    best = np.full(t.shape[0], np.inf)
    out = theta.copy()
    for g in grid:  # loop over grid values, vectorised over data sets
        k = g / span
        e = np.exp(-k[:, None] * t)
        th = theta.copy()
        th[:, 2] = k
        # linear parameters c, a0 enter f = c (1 - e) + a0 e: weighted LS in closed form
        cols, fixed_part = [], np.zeros_like(a)
        if free[0]:
            cols.append(1.0 - e)
        else:
            fixed_part += theta[:, 0:1] * (1.0 - e)
        if free[1]:
            cols.append(e)
        else:
            fixed_part += theta[:, 1:2] * e
        resid = a - fixed_part
        if cols:
            X = np.stack(cols, axis=2)
            XtW = X.transpose(0, 2, 1) * w[:, None, :]
            A = XtW @ X
            b = (XtW @ resid[:, :, None])[:, :, 0]
            try:
                beta = np.linalg.solve(A, b[:, :, None])[:, :, 0]
            except np.linalg.LinAlgError:
                continue
            resid = resid - (X @ beta[:, :, None])[:, :, 0]
            j = 0
            if free[0]:
                th[:, 0] = beta[:, j]
                j += 1
            if free[1]:
                th[:, 1] = beta[:, j]
        s = np.sum(w * resid**2, axis=1)
        better = s < best
        best[better] = s[better]
        out[better] = th[better]
    return out


def _levenberg_marquardt(
    t: NDArray[np.float64],
    a: NDArray[np.float64],
    w: NDArray[np.float64],
    theta: NDArray[np.float64],
    free: NDArray[np.bool_],
    max_iter: int,
    rtol: float,
    newton_steps: int = 0,
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64], NDArray[np.bool_], int]:
    """Damped Gauss-Newton over all data sets at once; one exponential per iteration.

    A trial step is evaluated once: if it lowers the weighted sum of squares it is accepted
    and its normal equations are the next step's; if not, the damping grows and the stored
    normal equations of the current point are solved again (no new evaluation).
    """
    N = a.shape[0]
    q = int(free.sum())
    theta = theta.copy()
    f, cols = _design(t, theta, free)
    r = a - f
    S = np.sum(w * r * r, axis=1)
    A, g = _normal_equations(cols, w, r)
    done = np.zeros(N, dtype=bool)
    it = 0
    if newton_steps:
        # Newton's method from a good start (Monte Carlo draws near the nominal solution):
        # the exact Hessian (with the residual-curvature term) converges quadratically, one
        # evaluation per step.  A row whose sum of squares rises, whose Hessian is singular
        # or whose step stays large goes on to the damped iteration below.
        S0 = S.copy()
        act = np.arange(N)
        ta, aa, wa = t, a, w
        th, Sa, Aa, ga, ra, ka = theta.copy(), S.copy(), A.copy(), g.copy(), r, cols[-1]
        with np.errstate(all="ignore"):
            for it in range(1, newton_steps + 1):
                H = Aa - _curvature(ta, th, free, wa, ra, ka)
                delta, solved = _solve(H, ga)
                small = _small_step(delta, th[:, free], Aa, rtol) & solved
                th[:, free] += delta
                f, cols = _design(ta, th, free)
                ra = aa - f
                ka = cols[-1]
                Sa = np.sum(wa * ra * ra, axis=1)
                Aa, ga = _normal_equations(cols, wa, ra)
                good = np.isfinite(Sa) & (th[:, 2] > 0) & (Sa <= S0[act] * (1.0 + 1e-9) + 1e-300)
                fin = small & good
                rows = act[fin]
                theta[rows], S[rows], A[rows], g[rows] = th[fin], Sa[fin], Aa[fin], ga[fin]
                done[rows] = True
                keep = ~fin & good & solved
                if it == newton_steps or not keep.any():
                    break
                act, ta, aa, wa = act[keep], _rows(ta, keep), aa[keep], _rows(wa, keep)
                th, Sa, Aa, ga = th[keep], Sa[keep], Aa[keep], ga[keep]
                ra, ka = ra[keep], ka[keep]
        # rows not finished keep their starting point and go on with damping
    lam = np.full(N, 1e-6)
    eye = np.eye(q)
    act = np.flatnonzero(~done)
    ta, aa, wa = _rows(t, act), a[act], _rows(w, act)
    for it in range(1, max_iter + 1):  # noqa: B007 - the count is returned
        if act.size == 0:
            break
        Aa = A[act]
        D = np.diagonal(Aa, axis1=1, axis2=2)
        delta, _ = _solve(Aa + lam[act, None, None] * (D[:, :, None] * eye), g[act])
        th = theta[act]
        trial = th.copy()
        trial[:, free] += delta
        ft, cols_t = _design(ta, trial, free)
        rt = aa - ft
        St = np.sum(wa * rt * rt, axis=1)
        St[~(trial[:, 2] > 0) | ~np.isfinite(St)] = np.inf
        Sa = S[act]
        accept = St <= Sa * (1.0 + 1e-13)
        small = _small_step(delta, th[:, free], Aa, rtol)
        # the decrease Gauss-Newton predicts (g . delta) is at the rounding level of S
        small |= np.einsum("ij,ij->i", g[act], delta) <= 1e-13 * Sa + 1e-300
        if np.any(accept):
            ia = np.flatnonzero(accept)
            At, gt = _normal_equations([c[ia] for c in cols_t], _rows(wa, ia), rt[ia])
            rows = act[ia]
            theta[rows] = trial[ia]
            S[rows] = St[ia]
            A[rows] = At
            g[rows] = gt
            lam[rows] = np.maximum(lam[rows] / 10.0, 1e-12)
        rej = act[~accept]
        lam[rej] = lam[rej] * 10.0
        finished = small | ((~accept) & (lam[act] > 1e10))
        if np.any(finished):
            done[act[finished]] = True
            keep = ~finished
            act = act[keep]
            ta, aa, wa = _rows(ta, keep), aa[keep], _rows(wa, keep)
    return theta, S, A, done, it


def fit_decay(
    t: ArrayLike,
    a: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    baseline: ArrayLike | None = None,
    initial: ArrayLike | None = None,
    start: ArrayLike | None = None,
    max_iter: int = 200,
    rtol: float = 1e-8,
    warn: bool = True,
    covariance: bool = True,
) -> DecayFit:
    """Fit f(t) = c + (a0 - c) exp(-k t) to one or many data sets by weighted least squares.

    Parameters
    ----------
    t, a:
        Times and values, shape (n,) or (N, n) (times may differ per data set, e.g. a
        timing lag drawn per Monte Carlo trial).
    weights:
        1/sigma^2 per point, shape (n,) or (N, n); unit weights when ``None``.
    baseline, initial:
        Fixed values of c and a0 (scalar or (N,)), or ``None`` to fit them.
    start:
        (3,) or (N, 3) starting (c, a0, k); ``None`` starts from a grid search over k.
    max_iter, rtol:
        Iteration cap and relative step tolerance.
    warn:
        Emit a :class:`~uqreport.errors.ConvergenceWarning` when some data sets did not
        converge.
    covariance:
        Compute the parameter covariance (skip it for Monte Carlo refits, which need only
        the estimates).
    """
    t2 = _as_2d(t, "t")
    a2 = _as_2d(a, "a")
    N = max(t2.shape[0], a2.shape[0])
    n = max(t2.shape[1], a2.shape[1])
    # arrays shared by every data set stay one row (1, n): they broadcast, and they are not
    # copied when the iteration drops the data sets that have converged
    t2 = _shared_or_full(t2, N, n)
    a2 = np.broadcast_to(a2, (N, n))
    w2 = np.ones((1, n)) if weights is None else _shared_or_full(_as_2d(weights, "weights"), N, n)
    if np.any(w2 < 0) or not np.all(np.isfinite(w2)):
        raise InputError("weights must be finite and >= 0.")
    fc, fa = _fixed(baseline, N), _fixed(initial, N)
    free = np.array([fc is None, fa is None, True])
    q = int(free.sum())
    if n <= q:
        raise InputError(
            f"a decay fit with {q} free parameters needs more than {q} points, got {n}."
        )
    theta = np.zeros((N, 3))
    if start is not None:
        theta[:] = np.broadcast_to(np.asarray(start, dtype=float), (N, 3))
    if fc is not None:
        theta[:, 0] = fc
    if fa is not None:
        theta[:, 1] = fa
    if start is None:
        theta = _grid_start(t2, a2, w2, theta, free)

    theta, S, A, converged, it = _levenberg_marquardt(
        t2, a2, w2, theta, free, max_iter, rtol, newton_steps=6 if start is not None else 0
    )
    # covariance (known-sigma form) from the normal equations at the solution
    cov = np.zeros((N, 3, 3))
    if covariance:
        idx = np.flatnonzero(free)
        try:
            inv = np.linalg.inv(A)
        except np.linalg.LinAlgError:
            inv = np.linalg.pinv(A)
        cov[:, idx[:, None], idx[None, :]] = inv
    if warn and not np.all(converged):
        warnings.warn(
            f"decay fit: {int((~converged).sum())} of {N} data sets did not converge in"
            f" {max_iter} iterations.",
            ConvergenceWarning,
            stacklevel=2,
        )
    return DecayFit(theta, free, cov, S, n, converged, it)
