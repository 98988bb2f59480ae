"""Linear propagation of uncertainty, the law of propagation of uncertainty (JCGM 100, GUM).

For a model Y = f(X) with estimates x, covariance matrix U_x and sensitivity matrix
J = df/dx at x (GUM 5.1.3, 5.2.2), the output covariance is U_y = J U_x J^T; u_c(y_j) is the
square root of its diagonal.  Effective degrees of freedom by Welch-Satterthwaite (GUM G.4.1)
over the model's budget entries, coverage factor k_p = t_p(nu_eff) and expanded uncertainty
U_p = k_p u_c (GUM 6.2, 6.3).  Optional second-order terms for uncorrelated inputs
(GUM 5.1.2, Note).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError, ModelError
from ..inputs import InputSet
from ..model import MeasurementModel, OutputQuantity
from ._outputs import OutputsMixin
from .coverage import coverage_factor, welch_satterthwaite

__all__ = [
    "LinearEstimate",
    "LinearResult",
    "numerical_jacobian",
    "propagate_linear",
    "relinearise",
]


def _steps(model: MeasurementModel, x: NDArray[np.float64]) -> NDArray[np.float64]:
    u = model.inputs.u
    h = model.step_fraction * u
    zero = h == 0.0
    # inputs known exactly still get a sensitivity coefficient for the budget table
    h[zero] = 1e-6 * np.maximum(np.abs(x[zero]), 1.0)
    return h


def numerical_jacobian(
    model: MeasurementModel, x: NDArray[np.float64] | None = None
) -> NDArray[np.float64]:
    """Central-difference Jacobian dY/dX at ``x`` (default: the estimates), shape (m, p).

    Steps are ``model.step_fraction * u(x_i)`` (scaled to each input's uncertainty, so that
    the derivative describes the model over the range that matters); the 2p perturbed
    points are evaluated in one vectorised call.
    """
    x0 = model.inputs.values if x is None else np.asarray(x, dtype=float)
    p = x0.size
    h = _steps(model, x0)
    pts = np.repeat(x0[None, :], 2 * p, axis=0)
    idx = np.arange(p)
    pts[2 * idx, idx] += h
    pts[2 * idx + 1, idx] -= h
    Y = model.evaluate(pts)
    if not np.all(np.isfinite(Y)):
        rows = np.flatnonzero(~np.all(np.isfinite(Y), axis=1))
        bad = sorted({model.inputs.inputs[r // 2].name for r in rows})
        raise ModelError(
            f"model '{model.name}': non-finite output when perturbing {', '.join(bad[:5])}"
            " by a fraction of its standard uncertainty. Fix: check that the estimate lies"
            " inside the model's domain, or supply an analytic Jacobian."
        )
    return ((Y[0::2] - Y[1::2]) / (2.0 * h[:, None])).T


def _second_order_variance(
    model: MeasurementModel, x0: NDArray[np.float64], J: NDArray[np.float64]
) -> NDArray[np.float64]:
    """Higher-order terms of GUM 5.1.2 Note, eq. (10), for uncorrelated inputs.

    sum_i sum_j [ (1/2) (d2f/dxi dxj)^2 + (df/dxi)(d3f/dxi dxj^2) ] u_i^2 u_j^2,
    by finite differences with steps of 0.1 u(x_i).
    """
    u = model.inputs.u
    active = np.flatnonzero(u > 0)
    q = active.size
    if q == 0:
        return np.zeros(model.n_outputs)
    h = 0.1 * u[active]
    base = x0.copy()
    pts = [base]
    # single-axis points: x +/- h_i, x +/- 2 h_i
    for a, i in enumerate(active):
        for s in (1.0, -1.0, 2.0, -2.0):
            pt = base.copy()
            pt[i] += s * h[a]
            pts.append(pt)
    # pair points x +/- h_i +/- h_j
    for a in range(q):
        for b in range(a + 1, q):
            for si in (1.0, -1.0):
                for sj in (1.0, -1.0):
                    pt = base.copy()
                    pt[active[a]] += si * h[a]
                    pt[active[b]] += sj * h[b]
                    pts.append(pt)
    Y = model.evaluate(np.array(pts))
    f0 = Y[0]
    single = Y[1 : 1 + 4 * q].reshape(q, 4, -1)  # (+h, -h, +2h, -2h)
    fp, fm, f2p, f2m = single[:, 0], single[:, 1], single[:, 2], single[:, 3]
    m = Y.shape[1]
    H = np.zeros((q, q, m))
    T = np.zeros((q, q, m))  # T[i, j] = d3f / dxi dxj^2
    hh = h[:, None]
    H[np.arange(q), np.arange(q)] = (fp - 2 * f0 + fm) / hh**2
    T[np.arange(q), np.arange(q)] = (f2p - 2 * fp + 2 * fm - f2m) / (2 * hh**3)
    pair = Y[1 + 4 * q :].reshape(-1, 4, m)
    k = 0
    for a in range(q):
        for b in range(a + 1, q):
            fpp, fpm, fmp, fmm = pair[k]
            k += 1
            H[a, b] = H[b, a] = (fpp - fpm - fmp + fmm) / (4 * h[a] * h[b])
            # d/dxa of d2f/dxb2 and d/dxb of d2f/dxa2, from the same stencil
            T[a, b] = (fpp + fpm - 2 * fp[a] - (fmp + fmm - 2 * fm[a])) / (2 * h[a] * h[b] ** 2)
            T[b, a] = (fpp + fmp - 2 * fp[b] - (fpm + fmm - 2 * fm[b])) / (2 * h[b] * h[a] ** 2)
    ua2 = u[active] ** 2
    w = np.outer(ua2, ua2)[:, :, None]
    c = J[:, active].T  # (q, m)
    terms = (0.5 * H**2 + c[:, None, :] * T) * w
    return terms.sum(axis=(0, 1))


@dataclass(frozen=True)
class LinearEstimate:
    """The linear (GUM) result for one output quantity.

    ``value`` y, combined standard uncertainty ``u`` u_c(y), effective degrees of freedom
    ``dof``, coverage factor ``k``, expanded uncertainty ``U`` = k u, for ``coverage``.
    """

    name: str
    unit: str
    value: float
    u: float
    dof: float
    k: float
    U: float
    coverage: float

    @property
    def low(self) -> float:
        return self.value - self.U

    @property
    def high(self) -> float:
        return self.value + self.U

    def as_dict(self) -> dict[str, float]:
        return {
            "value": self.value,
            "u": self.u,
            "dof": self.dof,
            "k": self.k,
            "U": self.U,
            "coverage": self.coverage,
        }


@dataclass(frozen=True)
class LinearResult(OutputsMixin):
    """Result of :func:`propagate_linear`.

    Attributes
    ----------
    outputs:
        The output quantities, in column order.
    inputs:
        The input set propagated.
    values:
        Output estimates y = f(x), shape (m,).
    jacobian:
        Sensitivity coefficients dY_j/dX_i, shape (m, p).
    input_covariance:
        U_x, shape (p, p).
    covariance:
        U_y = J U_x J^T (plus second-order terms on the diagonal when requested), (m, m).
    u:
        Combined standard uncertainties, shape (m,).
    dof:
        Welch-Satterthwaite effective degrees of freedom, shape (m,).
    k, U:
        Coverage factors and expanded uncertainties, shape (m,).
    coverage:
        The coverage probability.
    second_order:
        The second-order variance terms added (shape (m,)), or ``None``.
    """

    outputs: tuple[OutputQuantity, ...]
    inputs: InputSet
    values: NDArray[np.float64]
    jacobian: NDArray[np.float64]
    input_covariance: NDArray[np.float64]
    covariance: NDArray[np.float64]
    u: NDArray[np.float64]
    dof: NDArray[np.float64]
    k: NDArray[np.float64]
    U: NDArray[np.float64]
    coverage: float
    second_order: NDArray[np.float64] | None = None

    def estimate(self, name: str) -> LinearEstimate:
        """The :class:`LinearEstimate` of output ``name``."""
        j = self.index(name)
        o = self.outputs[j]
        return LinearEstimate(
            o.name,
            o.unit,
            float(self.values[j]),
            float(self.u[j]),
            float(self.dof[j]),
            float(self.k[j]),
            float(self.U[j]),
            self.coverage,
        )

    def sensitivity(self, output: str, input_name: str) -> float:
        """Sensitivity coefficient dY/dX_i."""
        return float(self.jacobian[self.index(output), self.inputs.index(input_name)])


def _welch_satterthwaite_terms(inputs: InputSet) -> list[NDArray[np.intp]]:
    """Index sets of the terms Welch-Satterthwaite sums over.

    Inputs that share a budget block (e.g. the readings of one table, whose noise level is
    one estimate) form one term; so do blocks linked by a correlation coefficient (inputs
    estimated from the same observations, as V, I and phi in GUM H.2).  Welch-Satterthwaite
    assumes independent terms; merging the correlated ones keeps it meaningful.  A merged
    term carries the smallest degrees of freedom of its members.
    """
    blocks: dict[str, int] = {}
    parent: list[int] = []
    member: list[int] = []
    for q in inputs.inputs:
        if q.budget_entry not in blocks:
            blocks[q.budget_entry] = len(parent)
            parent.append(len(parent))
        member.append(blocks[q.budget_entry])

    def find(a: int) -> int:
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    for (a, b), r in inputs.correlations.items():
        if r != 0.0:
            ra, rb = find(member[inputs.index(a)]), find(member[inputs.index(b)])
            if ra != rb:
                parent[ra] = rb
    terms: dict[int, list[int]] = {}
    for i, blk in enumerate(member):
        terms.setdefault(find(blk), []).append(i)
    return [np.array(v) for v in terms.values()]


def _effective_dof(
    c: NDArray[np.float64],
    cov: NDArray[np.float64],
    inputs: InputSet,
    u_c: float,
    terms: list[NDArray[np.intp]],
) -> float:
    """Welch-Satterthwaite effective degrees of freedom (GUM G.4.1) over ``terms``."""
    contribs: list[float] = []
    dofs: list[float] = []
    dof_all = inputs.dof
    for ii in terms:
        var = float(c[ii] @ cov[np.ix_(ii, ii)] @ c[ii])
        contribs.append(math.sqrt(max(var, 0.0)))
        dofs.append(float(dof_all[ii].min()))
    return welch_satterthwaite(u_c, contribs, dofs)


def _assemble(
    outputs: tuple[OutputQuantity, ...],
    inputs: InputSet,
    values: NDArray[np.float64],
    J: NDArray[np.float64],
    coverage: float,
    extra_variance: NDArray[np.float64] | None = None,
) -> LinearResult:
    """U_y = J U_x J^T (plus extra variance on the diagonal), u, Welch-Satterthwaite dof,
    coverage factors and expanded uncertainties."""
    Ux = inputs.covariance()
    Uy = J @ Ux @ J.T
    Uy = 0.5 * (Uy + Uy.T)
    if extra_variance is not None:
        Uy = Uy + np.diag(np.maximum(extra_variance, 0.0))
    u = np.sqrt(np.clip(np.diag(Uy), 0.0, None))
    terms = _welch_satterthwaite_terms(inputs)
    dof = np.array(
        [_effective_dof(J[j], Ux, inputs, float(u[j]), terms) for j in range(J.shape[0])]
    )
    kf = np.array([coverage_factor(d, coverage) for d in dof])
    return LinearResult(
        outputs=outputs,
        inputs=inputs,
        values=values,
        jacobian=J,
        input_covariance=Ux,
        covariance=Uy,
        u=u,
        dof=dof,
        k=kf,
        U=kf * u,
        coverage=coverage,
        second_order=extra_variance,
    )


def propagate_linear(
    model: MeasurementModel,
    *,
    coverage: float = 0.95,
    second_order: bool = False,
) -> LinearResult:
    """Propagate the input uncertainties through ``model`` by the GUM's linear method.

    Parameters
    ----------
    model:
        The measurement model; its analytic Jacobian is used when it has one, otherwise
        central differences (:func:`numerical_jacobian`).
    coverage:
        Coverage probability of the expanded uncertainty (0.95 by default).
    second_order:
        Add the second-order terms of GUM 5.1.2 Note (only for uncorrelated inputs; they
        matter when the model is strongly nonlinear over +/- u, e.g. a product of two
        quantities with estimates near zero).
    """
    if not (0.0 < coverage < 1.0):
        raise InputError(f"coverage probability must lie in (0, 1), got {coverage!r}.")
    x0 = model.inputs.values
    y0 = model.at_estimates()
    if model.jacobian is not None:
        J = np.asarray(model.jacobian(x0), dtype=float)
        if J.shape != (model.n_outputs, model.n_inputs):
            raise ModelError(
                f"model '{model.name}': analytic Jacobian has shape {J.shape}, expected"
                f" ({model.n_outputs}, {model.n_inputs})."
            )
    else:
        J = numerical_jacobian(model, x0)
    so = None
    if second_order:
        if model.inputs.is_correlated:
            raise InputError(
                f"model '{model.name}': second-order terms (GUM 5.1.2) are defined here for"
                " uncorrelated inputs only. Fix: drop second_order, or use Monte Carlo."
            )
        so = _second_order_variance(model, x0, J)
    return _assemble(model.outputs, model.inputs, y0, J, coverage, so)


def relinearise(result: LinearResult, inputs: InputSet) -> LinearResult:
    """The linear result with new input uncertainties and the same sensitivity coefficients.

    For what-if questions ("this group's uncertainty halved"): the Jacobian is kept, the
    output covariance, degrees of freedom, coverage factors and expanded uncertainties are
    recomputed.  ``inputs`` must have the same names in the same order.
    """
    if inputs.names != result.inputs.names:
        raise InputError("relinearise: the new input set must have the same inputs in order.")
    return _assemble(result.outputs, inputs, result.values, result.jacobian, result.coverage)
