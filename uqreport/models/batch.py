"""The batch-kinetics measurement model (pseudo-first-order method of excess), vectorised.

Per run r with readings j (recorded time t_j, observed absorbance A_j, cuvette c_j):

    t_j   = t_rec,j + lag_r + jitter_j              (timing lag: shared per run + per reading)
    a_j   = (A_j - sum of offsets) / l_cj           (blank and photometric offsets, pathlength)
    a(t)  = a_inf + (a_0 - a_inf) exp(-k'_r t)      (weighted least squares, fixed weights)

with a_inf fitted, measured or zero and a_0 fitted or eps [D]_0.  Across runs, with the
excess-reagent concentration [OH]_r built from the solutions and volumes and the Arrhenius
factor f_r = exp(-(E_a/R)(1/T_s - 1/T_r)) taking k'_r from the run's actual temperature T_r
to the stated one T_s:

    k_r   = k'_r f_r (1 + delta_r) / [OH]_r         (delta_r: run-to-run scatter, when found)
    k     = sum_r w_r k_r                           (fixed weights summing to 1)
    ln(k'_r f_r (1 + delta_r)) = ln k_b + b ln [OH]_r   (weighted straight line: order b)
    k_ref = k exp(-(E_a/R)(1/T_ref - 1/T_s))

Everything is a function of the input vector; the same function serves the linear engine
(Jacobian), Monte Carlo (every run refitted per draw) and the Bayesian layer.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from ..model import OutputQuantity
from .decay import fit_decay

__all__ = ["GAS_CONSTANT", "BatchStudyModel", "RunModel", "arrhenius_factor"]

#: Molar gas constant R in J mol^-1 K^-1 (CODATA 2018 exact value).
GAS_CONSTANT = 8.314462618

ColumnFunction = Callable[[NDArray[np.float64]], NDArray[np.float64]]


def arrhenius_factor(
    activation_energy: NDArray[np.float64] | float,
    to_temperature: NDArray[np.float64] | float,
    from_temperature: NDArray[np.float64] | float,
) -> NDArray[np.float64]:
    """k(T_to)/k(T_from) = exp(-(E_a/R)(1/T_to - 1/T_from)), temperatures in K."""
    return np.exp(
        -np.asarray(activation_energy)
        / GAS_CONSTANT
        * (1.0 / np.asarray(to_temperature) - 1.0 / np.asarray(from_temperature))
    )


@dataclass(frozen=True)
class RunModel:
    """How one batch run's pseudo-first-order rate constant is computed from the inputs.

    Attributes
    ----------
    name:
        Run name.
    times:
        Recorded times of the readings used in the fit (s), shape (n,).
    reading:
        Input indices of those readings' absorbances, shape (n,).
    pathlength:
        Input index of the pathlength of each reading's cuvette, shape (n,).
    offsets:
        Input indices of absorbance offsets subtracted from every reading (blank, photometric).
    lag:
        Input index of the run's mean timing lag (s), or ``None``.
    jitter:
        Input indices of the per-reading lag jitter, shape (n,), or ``None``.
    weights:
        Fixed fit weights 1/sigma^2 of the pathlength-normalised readings, shape (n,).
    baseline:
        ``"fitted"``, ``"measured"`` or ``"zero"`` (a_inf).
    final_absorbance, final_pathlength:
        Input indices of the measured final absorbance and its cuvette's pathlength.
    initial:
        Function of the input array giving a_0 = eps [D]_0 (per cm) when a_0 is fixed from
        the initial concentration, else ``None``.
    hydroxide:
        Function of the input array giving the excess-reagent concentration (mol/L).
    temperature:
        Function of the input array giving the run's actual temperature (K), or ``None``.
    between:
        Input index of the run-to-run relative scatter delta_r, or ``None``.
    method:
        ``"exponential"`` (nonlinear fit) or ``"log-linear"`` (ln(a - a_inf) against t).
    start:
        Starting (a_inf, a_0, k') for the refits: the nominal solution.
    """

    name: str
    times: NDArray[np.float64]
    reading: NDArray[np.intp]
    pathlength: NDArray[np.intp]
    offsets: tuple[int, ...]
    lag: int | None
    jitter: NDArray[np.intp] | None
    weights: NDArray[np.float64]
    baseline: str
    final_absorbance: int | None
    final_pathlength: int | None
    initial: ColumnFunction | None
    hydroxide: ColumnFunction
    temperature: ColumnFunction | None
    between: int | None
    method: str = "exponential"
    start: NDArray[np.float64] = field(default_factory=lambda: np.array([0.0, 1.0, 1e-3]))

    def data(self, X: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Times (N, n) and pathlength-normalised absorbances (N, n) for input rows X."""
        A = X[:, self.reading]
        for i in self.offsets:
            A = A - X[:, i : i + 1]
        a = A / X[:, self.pathlength]
        t = np.broadcast_to(self.times, a.shape)
        if self.lag is not None:
            t = t + X[:, self.lag : self.lag + 1]
        if self.jitter is not None:
            t = t + X[:, self.jitter]
        return t, a

    def fixed_baseline(self, X: NDArray[np.float64]) -> NDArray[np.float64] | None:
        if self.baseline == "zero":
            return np.zeros(X.shape[0])
        if self.baseline == "measured":
            if self.final_absorbance is None or self.final_pathlength is None:
                raise ValueError(f"run {self.name}: a measured baseline needs its inputs")
            A = X[:, self.final_absorbance]
            for i in self.offsets:
                A = A - X[:, i]
            return A / X[:, self.final_pathlength]
        return None

    def fit(
        self, X: NDArray[np.float64], *, start: NDArray[np.float64] | None = None
    ) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
        """(N, 3) fitted (a_inf, a_0, k') and (N,) convergence flags for input rows X."""
        t, a = self.data(X)
        c = self.fixed_baseline(X)
        a0 = None if self.initial is None else self.initial(X)
        if self.method == "log-linear":
            return _log_linear(t, a, self.weights, c, a0)
        res = fit_decay(
            t,
            a,
            weights=self.weights,
            baseline=c,
            initial=a0,
            start=self.start if start is None else start,
            warn=False,
            covariance=False,
        )
        return res.params, res.converged


def _log_linear(
    t: NDArray[np.float64],
    a: NDArray[np.float64],
    w: NDArray[np.float64],
    c: NDArray[np.float64] | None,
    a0: NDArray[np.float64] | None,
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Weighted straight line ln(a - a_inf) = ln(a_0 - a_inf) - k' t, closed form.

    ``w`` are weights of ln(a - a_inf) (fixed: (a - a_inf)^2 / sigma_a^2 at the nominal
    data).  a_inf must be fixed (zero or measured); with a_0 fixed too the line is forced
    through ln(a_0 - a_inf) at t = 0.
    """
    N = a.shape[0]
    c = np.zeros(N) if c is None else c
    with np.errstate(invalid="ignore", divide="ignore"):
        y = np.log(a - c[:, None])
    if a0 is None:
        S0 = w.sum()
        St = (w * t).sum(axis=1)
        Sy = (w * y).sum(axis=1)
        Stt = (w * t * t).sum(axis=1)
        Sty = (w * t * y).sum(axis=1)
        den = S0 * Stt - St**2
        slope = (S0 * Sty - St * Sy) / den
        icpt = (Sy - slope * St) / S0
    else:
        icpt = np.log(a0 - c)
        slope = ((w * t * (y - icpt[:, None])).sum(axis=1)) / (w * t * t).sum(axis=1)
    params = np.column_stack([c, c + np.exp(icpt), -slope])
    return params, np.isfinite(params).all(axis=1)


@dataclass(frozen=True)
class BatchStudyModel:
    """The batch chain over all runs: per-run and across-run outputs.

    Attributes
    ----------
    runs:
        The runs' models.
    stated_temperature:
        T_s (K): the temperature the results are stated at (the study temperature).
    activation_energy:
        Function of the input array giving E_a (J/mol), or ``None`` (then temperatures are
        not used).
    reference_temperature:
        T_ref (K) for ``second_order_rate_constant_at_reference``, or ``None``.
    mean_weights:
        Fixed weights (summing to 1) of the per-run k_r in the mean k; ``None`` gives the
        per-run outputs only (the first stage, used to find the weights).
    order_weights:
        Fixed weights of the ln k' against ln [OH] line; ``None`` skips the order.
    """

    runs: tuple[RunModel, ...]
    stated_temperature: float
    activation_energy: ColumnFunction | None = None
    reference_temperature: float | None = None
    mean_weights: NDArray[np.float64] | None = None
    order_weights: NDArray[np.float64] | None = None

    def outputs(self) -> tuple[OutputQuantity, ...]:
        out: list[OutputQuantity] = []
        for r in self.runs:
            out.append(
                OutputQuantity(
                    f"pseudo_rate_constant/{r.name}",
                    "1/s",
                    f"pseudo-first-order rate constant k' of run {r.name}",
                    f"k'({r.name})",
                )
            )
        for r in self.runs:
            out.append(
                OutputQuantity(
                    f"hydroxide_concentration/{r.name}",
                    "mol/L",
                    f"excess-reagent concentration in the reaction mixture of run {r.name}",
                    f"[OH]({r.name})",
                )
            )
        for r in self.runs:
            out.append(
                OutputQuantity(
                    f"second_order_rate_constant/{r.name}",
                    "L/(mol*s)",
                    f"k = k'/[OH] of run {r.name} (order 1 in the excess reagent)",
                    f"k({r.name})",
                )
            )
        if self.mean_weights is not None:
            out.append(
                OutputQuantity(
                    "second_order_rate_constant",
                    "L/(mol*s)",
                    "second-order rate constant k (order in the excess reagent fixed at 1),"
                    " weighted mean over runs, at the stated temperature",
                    "k",
                )
            )
        if self.order_weights is not None:
            out.append(
                OutputQuantity(
                    "hydroxide_order",
                    "1",
                    "order b in the excess reagent, from ln k' against ln [OH]",
                    "b",
                )
            )
            out.append(
                OutputQuantity(
                    "rate_constant_free_order",
                    "(L/mol)^b/s",
                    "rate constant k_b with the order b fitted (k' = k_b [OH]^b)",
                    "k_b",
                )
            )
        if self.mean_weights is not None and self.reference_temperature is not None:
            out.append(
                OutputQuantity(
                    "second_order_rate_constant_at_reference",
                    "L/(mol*s)",
                    "second-order rate constant corrected to the reference temperature (Arrhenius)",
                    "k_ref",
                )
            )
        return tuple(out)

    def pseudo_rate_constants(self, X: NDArray[np.float64]) -> NDArray[np.float64]:
        """(N, R) k'_r for input rows X (NaN where a refit did not converge)."""
        kp = np.empty((X.shape[0], len(self.runs)))
        for j, run in enumerate(self.runs):  # loop over runs; each is vectorised over draws
            params, ok = run.fit(X)
            k = params[:, 2].copy()
            k[~ok] = np.nan
            kp[:, j] = k
        return kp

    def __call__(self, X: NDArray[np.float64]) -> NDArray[np.float64]:
        return self.combine(self.pseudo_rate_constants(X), X)

    def combine(self, kp: NDArray[np.float64], X: NDArray[np.float64]) -> NDArray[np.float64]:
        """All outputs from the runs' k'_r (N, R) and the input rows X (N, p).

        The across-run part of the model on its own: the Bayesian layer calls it with
        posterior draws of k'_r and prior draws of the other inputs, so that every engine
        uses the same formulas for [OH]_r, the temperature correction, the mean and the order.
        """
        oh = np.column_stack([run.hydroxide(X) for run in self.runs])
        factor = np.ones_like(kp)
        if self.activation_energy is not None:
            Ea = self.activation_energy(X)
            for j, run in enumerate(self.runs):
                if run.temperature is not None:
                    factor[:, j] = arrhenius_factor(Ea, self.stated_temperature, run.temperature(X))
        for j, run in enumerate(self.runs):
            if run.between is not None:
                factor[:, j] *= 1.0 + X[:, run.between]
        kp_stated = kp * factor
        k_runs = kp_stated / oh
        cols = [kp, oh, k_runs]
        if self.mean_weights is not None:
            k_mean = k_runs @ self.mean_weights
            cols.append(k_mean[:, None])
        if self.order_weights is not None:
            w = self.order_weights
            with np.errstate(invalid="ignore", divide="ignore"):
                x = np.log(oh)
                y = np.log(kp_stated)
            S0 = w.sum()
            Sx = x @ w
            Sy = y @ w
            Sxx = (x * x) @ w
            Sxy = (x * y) @ w
            b = (S0 * Sxy - Sx * Sy) / (S0 * Sxx - Sx**2)
            ln_kb = (Sy - b * Sx) / S0
            cols.append(b[:, None])
            cols.append(np.exp(ln_kb)[:, None])
        if self.mean_weights is not None and self.reference_temperature is not None:
            if self.activation_energy is None:
                raise ValueError("a reference temperature needs the activation energy")
            Ea = self.activation_energy(X)
            k_ref = k_mean * arrhenius_factor(
                Ea, self.reference_temperature, self.stated_temperature
            )
            cols.append(k_ref[:, None])
        return np.column_stack(cols)
