"""Propagation of distributions by Monte Carlo (JCGM 101:2008).

Every input is drawn from its distribution (correlated inputs from a multivariate normal),
the model is evaluated on chunks of draws (vectorised, memory bounded), and the draws of
each output give its estimate (the mean), its standard uncertainty (the standard deviation),
the probabilistically symmetric coverage interval (JCGM 101 7.7) and the shortest one
(7.7.2).  With no fixed number of draws the adaptive procedure of JCGM 101 7.9 runs batches
until twice the standard deviation of each batch statistic is within the numerical tolerance
delta of u(y).  :func:`validate_linear` is the comparison of JCGM 101 8.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .._numeric import RandomLike, as_generator
from ..errors import ConvergenceWarning, InputError, ModelError, UqreportWarning
from ..model import MeasurementModel, OutputQuantity
from ._outputs import OutputsMixin
from .coverage import numerical_tolerance
from .linear import LinearResult

__all__ = [
    "MonteCarloEstimate",
    "MonteCarloResult",
    "ValidationResult",
    "coverage_interval",
    "propagate_montecarlo",
    "shortest_interval",
    "validate_linear",
]

#: Memory given to one chunk of input draws and outputs (bytes), unless the caller says.
DEFAULT_CHUNK_BYTES = 64 * 2**20


def _interval_indices(M: int, coverage: float) -> tuple[int, int]:
    """0-based (r, q) of JCGM 101 7.7.1: interval [y_(r), y_(r+q)] of the sorted draws."""
    pm = coverage * M
    q = int(pm) if float(pm).is_integer() else math.floor(pm + 0.5)
    q = min(max(q, 1), M - 1)
    if (M - q) % 2 == 0:
        r = (M - q) // 2
    else:
        r = (M - q + 1) // 2
    return r - 1, q  # JCGM counts from 1


def coverage_interval(draws: NDArray[np.float64], coverage: float = 0.95) -> tuple[float, float]:
    """Probabilistically symmetric coverage interval of JCGM 101 7.7.1 from the draws."""
    y = np.asarray(draws, dtype=float)
    M = y.size
    if M < 2:
        raise InputError("a coverage interval needs at least 2 draws.")
    r, q = _interval_indices(M, coverage)
    part = np.partition(y, [r, r + q])
    return float(part[r]), float(part[r + q])


def shortest_interval(draws: NDArray[np.float64], coverage: float = 0.95) -> tuple[float, float]:
    """Shortest coverage interval of JCGM 101 7.7.2 from the draws."""
    y = np.sort(np.asarray(draws, dtype=float))
    M = y.size
    if M < 2:
        raise InputError("a coverage interval needs at least 2 draws.")
    _, q = _interval_indices(M, coverage)
    widths = y[q:] - y[: M - q]
    r = int(np.argmin(widths))
    return float(y[r]), float(y[r + q])


@dataclass(frozen=True)
class MonteCarloEstimate:
    """The Monte Carlo result for one output quantity.

    ``value`` is the mean of the draws, ``u`` their standard deviation, [``low``, ``high``]
    the probabilistically symmetric coverage interval and [``shortest_low``,
    ``shortest_high``] the shortest one, for ``coverage``; ``draws`` the number of model
    evaluations used and ``delta`` the numerical tolerance of u (JCGM 101 7.9.2).
    """

    name: str
    unit: str
    value: float
    u: float
    low: float
    high: float
    shortest_low: float
    shortest_high: float
    coverage: float
    draws: int
    delta: float
    converged: bool

    def as_dict(self) -> dict[str, float | int | bool]:
        return {
            "value": self.value,
            "u": self.u,
            "low": self.low,
            "high": self.high,
            "shortest_low": self.shortest_low,
            "shortest_high": self.shortest_high,
            "coverage": self.coverage,
            "draws": self.draws,
            "delta": self.delta,
            "converged": self.converged,
        }


@dataclass(frozen=True)
class MonteCarloResult(OutputsMixin):
    """Result of :func:`propagate_montecarlo`.

    Attributes
    ----------
    outputs:
        The output quantities, in column order.
    values, u:
        Means and standard deviations of the draws, shape (m,).
    low, high:
        Probabilistically symmetric coverage intervals, shape (m,).
    shortest_low, shortest_high:
        Shortest coverage intervals, shape (m,).
    covariance:
        Sample covariance of the outputs, (m, m).
    coverage:
        Coverage probability.
    draws:
        Number of valid model evaluations.
    failed_draws:
        Draws dropped because the model returned a non-finite value.
    adaptive:
        Whether the adaptive procedure of JCGM 101 7.9 chose the number of draws.
    converged:
        For the adaptive procedure, whether the tolerance was met before ``max_draws``.
    delta:
        Numerical tolerance of each u(y), shape (m,).
    ndig:
        Significant digits the tolerance refers to.
    samples:
        The output draws, shape (draws, m), or ``None`` if not kept.
    seed_note:
        How the random stream was seeded (for the reproducibility record).
    """

    outputs: tuple[OutputQuantity, ...]
    values: NDArray[np.float64]
    u: NDArray[np.float64]
    low: NDArray[np.float64]
    high: NDArray[np.float64]
    shortest_low: NDArray[np.float64]
    shortest_high: NDArray[np.float64]
    covariance: NDArray[np.float64]
    coverage: float
    draws: int
    failed_draws: int
    adaptive: bool
    converged: bool
    delta: NDArray[np.float64]
    ndig: int
    samples: NDArray[np.float64] | None = None

    def estimate(self, name: str) -> MonteCarloEstimate:
        j = self.index(name)
        o = self.outputs[j]
        return MonteCarloEstimate(
            o.name,
            o.unit,
            float(self.values[j]),
            float(self.u[j]),
            float(self.low[j]),
            float(self.high[j]),
            float(self.shortest_low[j]),
            float(self.shortest_high[j]),
            self.coverage,
            self.draws,
            float(self.delta[j]),
            self.converged,
        )


def _chunk_size(model: MeasurementModel, chunk_bytes: int) -> int:
    per_draw = 8 * (model.n_inputs + model.n_outputs) * 4  # inputs, outputs, model scratch
    return int(min(max(chunk_bytes // per_draw, 1000), 250_000))


def _run_draws(
    model: MeasurementModel, n: int, gen: np.random.Generator, chunk: int
) -> tuple[NDArray[np.float64], int]:
    out = np.empty((n, model.n_outputs))
    filled = 0
    failed = 0
    while filled < n:
        size = min(chunk, n - filled)
        X = model.inputs.sample(size, gen)
        with np.errstate(all="ignore"):
            Y = model.evaluate(X)
        ok = np.all(np.isfinite(Y), axis=1)
        k = int(ok.sum())
        failed += size - k
        out[filled : filled + k] = Y[ok]
        filled += k
        if failed > max(1000, n):  # the model fails almost everywhere
            raise ModelError(
                f"model '{model.name}': {failed} Monte Carlo draws gave non-finite outputs"
                f" before {filled} valid ones. Fix: check the input distributions against"
                " the model's domain (e.g. a concentration drawn below zero)."
            )
    return out, failed


def _batch_stats(Y: NDArray[np.float64], coverage: float) -> NDArray[np.float64]:
    """(4, m): mean, sd, low, high of one batch."""
    m = Y.shape[1]
    res = np.empty((4, m))
    res[0] = Y.mean(axis=0)
    res[1] = Y.std(axis=0, ddof=1)
    for j in range(m):
        res[2, j], res[3, j] = coverage_interval(Y[:, j], coverage)
    return res


def propagate_montecarlo(
    model: MeasurementModel,
    *,
    coverage: float = 0.95,
    draws: int | None = None,
    rng: RandomLike = None,
    ndig: int = 2,
    max_draws: int = 2_000_000,
    batch_size: int | None = None,
    chunk_bytes: int = DEFAULT_CHUNK_BYTES,
    keep_samples: bool = True,
    targets: tuple[str, ...] | None = None,
) -> MonteCarloResult:
    """Propagate the input distributions through ``model`` by Monte Carlo (JCGM 101).

    Parameters
    ----------
    model:
        The measurement model.
    coverage:
        Coverage probability p of the intervals.
    draws:
        A fixed number of draws M.  ``None`` runs the adaptive procedure of JCGM 101 7.9
        with batches of ``max(100/(1-p), 10^4)`` draws until 2 s_y, 2 s_u, 2 s_low and
        2 s_high are all within the numerical tolerance of u(y) (``ndig`` significant
        digits), for every output, or ``max_draws`` is reached (then a
        :class:`~uqreport.errors.ConvergenceWarning` and ``converged=False``).
    rng:
        Seed or generator; the same seed gives the same numbers.
    ndig:
        Significant digits of u(y) the tolerance refers to (JCGM 101 7.9.2).
    max_draws:
        Cap of the adaptive procedure.
    batch_size:
        Override of the adaptive batch size.
    chunk_bytes:
        Memory for one vectorised evaluation; the draws are evaluated in chunks.
    keep_samples:
        Keep the output draws on the result (needed for plots and shares).
    targets:
        Names of the outputs whose tolerance stops the adaptive procedure (default: all);
        the others are reported with the draws the targets needed.
    """
    if not (0.0 < coverage < 1.0):
        raise InputError(f"coverage probability must lie in (0, 1), got {coverage!r}.")
    gen = as_generator(rng)
    chunk = _chunk_size(model, chunk_bytes)
    watch = (
        np.arange(model.n_outputs)
        if targets is None
        else np.array([model.output_names.index(t) for t in targets], dtype=int)
    )
    if draws is not None:
        if draws < 100:
            raise InputError(f"Monte Carlo needs at least 100 draws, got {draws}.")
        Y, failed = _run_draws(model, int(draws), gen, chunk)
        adaptive = False
        converged = True
    else:
        M = batch_size or max(math.ceil(100.0 / (1.0 - coverage)), 10_000)
        batches: list[NDArray[np.float64]] = []
        stats: list[NDArray[np.float64]] = []
        failed = 0
        converged = False
        while True:
            Yb, fb = _run_draws(model, M, gen, chunk)
            failed += fb
            batches.append(Yb)
            stats.append(_batch_stats(Yb, coverage))
            h = len(batches)
            if h >= 2:
                S = np.array(stats)[:, :, watch]  # (h, 4, m)
                s = S.std(axis=0, ddof=1) / math.sqrt(h)  # (4, m)
                u_all = np.concatenate(batches)[:, watch].std(axis=0, ddof=1)
                delta = np.array([numerical_tolerance(float(v), ndig) for v in u_all])
                ratio = (2.0 * s / delta[None, :]).max(axis=0)  # (m,): <= 1 when stable
                if np.all(ratio <= 1.0):
                    converged = True
                    break
            if h * M >= max_draws:
                break
        Y = np.concatenate(batches)
        adaptive = True
        if not converged:
            worst = int(np.argmax(ratio)) if len(batches) >= 2 else 0
            name = model.output_names[int(watch[worst])]
            more = ""
            if len(batches) >= 2 and np.isfinite(ratio[worst]):
                # the spread of the batch statistics falls as 1/sqrt(draws)
                need = Y.shape[0] * float(ratio[worst]) ** 2
                more = (
                    f"; '{name}' is the furthest (twice the standard deviation of its batch"
                    f" results is {ratio[worst]:.2g} times the tolerance), about"
                    f" {need:.2g} draws would meet it"
                )
            warnings.warn(
                f"model '{model.name}': adaptive Monte Carlo reached max_draws={max_draws}"
                f" before the numerical tolerance ({ndig} significant digits of u) was met{more}."
                " The results are reported with converged = false: their last digit is less"
                " certain than stated; a fixed --draws N (or a larger max_draws) goes further.",
                ConvergenceWarning,
                stacklevel=2,
            )
    n = Y.shape[0]
    if failed:
        share = failed / (n + failed)
        warnings.warn(
            f"model '{model.name}': {failed} of {n + failed} Monte Carlo draws"
            f" ({100 * share:.2g} %) gave non-finite outputs and were dropped; the intervals"
            " describe the remaining draws.",
            UqreportWarning,
            stacklevel=2,
        )
    m = model.n_outputs
    mean = Y.mean(axis=0)
    cov = np.atleast_2d(np.cov(Y, rowvar=False))
    u = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    low = np.empty(m)
    high = np.empty(m)
    slow = np.empty(m)
    shigh = np.empty(m)
    for j in range(m):
        low[j], high[j] = coverage_interval(Y[:, j], coverage)
        slow[j], shigh[j] = shortest_interval(Y[:, j], coverage)
    delta = np.array([numerical_tolerance(float(v), ndig) for v in u])
    return MonteCarloResult(
        outputs=model.outputs,
        values=mean,
        u=u,
        low=low,
        high=high,
        shortest_low=slow,
        shortest_high=shigh,
        covariance=cov,
        coverage=coverage,
        draws=n,
        failed_draws=failed,
        adaptive=adaptive,
        converged=converged,
        delta=delta,
        ndig=ndig,
        samples=Y if keep_samples else None,
    )


@dataclass(frozen=True)
class ValidationResult:
    """The comparison of JCGM 101 8.1 for one output.

    d_low = |y - U_p - y_low|, d_high = |y + U_p - y_high|, with [y_low, y_high] the Monte
    Carlo probabilistically symmetric interval; the linear result is validated when both are
    within the numerical tolerance ``delta``.
    """

    name: str
    d_low: float
    d_high: float
    delta: float
    validated: bool

    @property
    def verdict(self) -> str:
        if self.validated:
            return "validated: the linear (GUM) interval agrees with Monte Carlo"
        return "not validated: use the Monte Carlo interval"

    def as_dict(self) -> dict[str, float | bool | str]:
        return {
            "d_low": self.d_low,
            "d_high": self.d_high,
            "delta": self.delta,
            "validated": self.validated,
            "verdict": self.verdict,
        }


def validate_linear(
    linear: LinearResult, montecarlo: MonteCarloResult, *, ndig: int | None = None
) -> dict[str, ValidationResult]:
    """JCGM 101 8.1: validate the linear coverage interval against Monte Carlo, per output.

    ``ndig`` defaults to the Monte Carlo result's; delta is the numerical tolerance of the
    linear u_c(y) (JCGM 101 8.1.1).
    """
    if linear.coverage != montecarlo.coverage:
        raise InputError(
            f"the linear result is for coverage {linear.coverage} but Monte Carlo for"
            f" {montecarlo.coverage}; they must be the same to be compared."
        )
    nd = montecarlo.ndig if ndig is None else ndig
    out: dict[str, ValidationResult] = {}
    for j, name in enumerate(linear.output_names):
        jm = montecarlo.index(name)
        y, Up = float(linear.values[j]), float(linear.U[j])
        d_low = abs(y - Up - float(montecarlo.low[jm]))
        d_high = abs(y + Up - float(montecarlo.high[jm]))
        delta = numerical_tolerance(float(linear.u[j]), nd)
        out[name] = ValidationResult(name, d_low, d_high, delta, d_low <= delta and d_high <= delta)
    return out
