"""Prior densities of the Bayesian layer, vectorised over walkers.

A Type B input with a stated distribution becomes a prior of the same shape (GUM 4.3,
JCGM 101 6.4): a normal input a normal prior, a rectangular tolerance a bounded uniform, a
triangular or arcsine (U-shaped) one the bounded density of that name, a Student t input
the scaled and shifted t.  :func:`prior_from_input` does the translation.  Three priors
belong to the Bayesian model itself:

* :func:`noise_scale_prior` for the ratio s = sigma_actual / sigma_spec of a run's noise
  level to the instrument's specification, as a log-normal density on s (a normal one on
  ln s, the coordinate that is sampled);
* :func:`between_run_prior` for the relative run-to-run spread of the hierarchical model,
  a half-normal density;
* ``Prior("flat")`` for location or log-scale parameters the data determine well (ln k').

Every ``logpdf`` is normalised (it integrates to one over its support, except ``flat``), is
``-inf`` outside the support and never warns.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import special

from ..errors import InputError
from ..inputs import DISTRIBUTIONS, InputQuantity

__all__ = [
    "PRIOR_KINDS",
    "Prior",
    "between_run_prior",
    "noise_scale_prior",
    "prior_from_input",
]

#: Kinds of :class:`Prior`; the first five are the input distributions of
#: :mod:`uqreport.inputs`.
PRIOR_KINDS = (
    "normal",
    "rectangular",
    "triangular",
    "arcsine",
    "t",
    "flat",
    "halfnormal",
    "log-halfnormal",
)

_LOG_2PI = math.log(2.0 * math.pi)


@dataclass(frozen=True)
class Prior:
    """A one-dimensional prior density.

    Attributes
    ----------
    kind:
        One of :data:`PRIOR_KINDS`.
    loc:
        Location: the mean (normal), the centre (rectangular, triangular, arcsine), the
        location of the t, the lower end of the half-normal (usually 0; ignored for the
        log-halfnormal).
    scale:
        The standard deviation (normal), the scale of the t (the GUM standard uncertainty),
        the half-width a (rectangular, triangular, arcsine), the scale of the half-normal.
        Ignored for ``flat``.  ``log-halfnormal`` is the density of u = ln x when x is
        half-normal with this scale: p(u) = 2 N(e^u; 0, scale^2) e^u (the Jacobian e^u),
        for sampling a positive spread on the log scale.
    dof:
        Degrees of freedom of the t.
    """

    kind: str
    loc: float = 0.0
    scale: float = 1.0
    dof: float = math.inf

    def __post_init__(self) -> None:
        if self.kind not in PRIOR_KINDS:
            raise InputError(
                f"prior kind '{self.kind}' is unknown. Fix: use one of "
                + ", ".join(repr(k) for k in PRIOR_KINDS)
                + "."
            )
        if not math.isfinite(self.loc):
            raise InputError(f"{self.kind} prior: the location must be finite, got {self.loc!r}.")
        if self.kind != "flat" and not (self.scale > 0 and math.isfinite(self.scale)):
            raise InputError(
                f"{self.kind} prior: the scale must be a finite number > 0, got {self.scale!r}."
                " Fix: give the input a standard uncertainty (or half-width) above zero."
            )
        if self.kind == "t" and not (self.dof > 0 and math.isfinite(self.dof)):
            raise InputError(
                f"t prior: the degrees of freedom must be finite and > 0, got {self.dof!r}."
            )

    # -- properties -----------------------------------------------------------------------
    @property
    def bounded(self) -> bool:
        """Whether the support is a bounded interval (or bounded on one side)."""
        return self.kind in ("rectangular", "triangular", "arcsine", "halfnormal")

    @property
    def support(self) -> tuple[float, float]:
        """(low, high) of the support (infinite ends for unbounded densities)."""
        if self.kind in ("rectangular", "triangular", "arcsine"):
            return (self.loc - self.scale, self.loc + self.scale)
        if self.kind == "halfnormal":
            return (self.loc, math.inf)
        return (-math.inf, math.inf)

    @property
    def sd(self) -> float:
        """The standard deviation (infinite for ``flat`` and for a t with dof <= 2)."""
        k, a = self.kind, self.scale
        if k == "normal":
            return a
        if k == "rectangular":
            return a / math.sqrt(3.0)
        if k == "triangular":
            return a / math.sqrt(6.0)
        if k == "arcsine":
            return a / math.sqrt(2.0)
        if k == "t":
            return a * math.sqrt(self.dof / (self.dof - 2.0)) if self.dof > 2 else math.inf
        if k == "halfnormal":
            return a * math.sqrt(1.0 - 2.0 / math.pi)
        if k == "log-halfnormal":
            # sd of ln|z| for a standard normal z: sqrt(pi^2/8) (standard result, from memory)
            return math.pi / math.sqrt(8.0)
        return math.inf

    def describe(self) -> str:
        """Plain words for messages, e.g. ``"rectangular on [-0.005, 0.005]"``."""
        if self.kind in ("rectangular", "triangular", "arcsine"):
            lo, hi = self.support
            return f"{self.kind} on [{lo:.6g}, {hi:.6g}]"
        if self.kind == "normal":
            return f"normal (mean {self.loc:.6g}, sd {self.scale:.6g})"
        if self.kind == "t":
            return f"Student t (location {self.loc:.6g}, scale {self.scale:.6g}, {self.dof:g} dof)"
        if self.kind == "halfnormal":
            return f"half-normal on [{self.loc:.6g}, inf) with scale {self.scale:.6g}"
        if self.kind == "log-halfnormal":
            return f"log of a half-normal with scale {self.scale:.6g}"
        return "flat"

    # -- densities ------------------------------------------------------------------------
    def logpdf(self, x: ArrayLike) -> NDArray[np.float64]:
        """Log density at ``x`` (any shape), ``-inf`` outside the support."""
        x = np.asarray(x, dtype=float)
        k, m, a = self.kind, self.loc, self.scale
        if k == "flat":
            return np.zeros_like(x)
        d = x - m
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            if k == "normal":
                return -0.5 * (d / a) ** 2 - math.log(a) - 0.5 * _LOG_2PI
            if k == "t":
                nu = self.dof
                c = (
                    special.gammaln(0.5 * (nu + 1.0))
                    - special.gammaln(0.5 * nu)
                    - 0.5 * math.log(nu * math.pi)
                    - math.log(a)
                )
                return c - 0.5 * (nu + 1.0) * np.log1p((d / a) ** 2 / nu)
            if k == "halfnormal":
                val = -0.5 * (d / a) ** 2 - math.log(a) - 0.5 * _LOG_2PI + math.log(2.0)
                return np.where(d >= 0.0, val, -np.inf)
            if k == "log-halfnormal":
                ex = np.exp(x)
                return -0.5 * (ex / a) ** 2 - math.log(a) - 0.5 * _LOG_2PI + math.log(2.0) + x
            inside = np.abs(d) <= a
            if k == "rectangular":
                return np.where(inside, -math.log(2.0 * a), -np.inf)
            if k == "triangular":
                val = np.log(np.clip(a - np.abs(d), 0.0, None)) - 2.0 * math.log(a)
                return np.where(inside, val, -np.inf)
            # arcsine: 1 / (pi sqrt(a^2 - d^2)) on the open interval
            val = -math.log(math.pi) - 0.5 * np.log(np.clip(a * a - d * d, 0.0, None))
            return np.where(np.abs(d) < a, val, -np.inf)

    def contains(self, x: ArrayLike) -> NDArray[np.bool_]:
        """Whether ``x`` lies where the density is positive."""
        return np.isfinite(self.logpdf(x))

    def relaxed(self) -> Prior:
        """This prior with its bounds dropped (``flat`` for bounded kinds), for the support
        check: the optimum with bounded priors relaxed says where the data want to be."""
        return Prior("flat") if self.bounded else self

    def sample(self, n: int, rng: np.random.Generator) -> NDArray[np.float64]:
        """``n`` draws (not defined for ``flat``)."""
        k, m, a = self.kind, self.loc, self.scale
        if k == "normal":
            return m + a * rng.standard_normal(n)
        if k == "t":
            return m + a * rng.standard_t(self.dof, n)
        if k == "rectangular":
            return rng.uniform(m - a, m + a, n)
        if k == "triangular":
            return m + a * (rng.random(n) - rng.random(n))
        if k == "arcsine":
            return m + a * np.sin(2.0 * np.pi * rng.random(n))
        if k == "halfnormal":
            return m + a * np.abs(rng.standard_normal(n))
        if k == "log-halfnormal":
            return np.log(a * np.abs(rng.standard_normal(n)))
        raise InputError("a flat prior cannot be sampled. Fix: give the parameter a proper prior.")


def prior_from_input(q: InputQuantity) -> Prior:
    """The prior of an input quantity: its stated distribution around its estimate.

    Rectangular, triangular and arcsine inputs keep their half-width (given or recovered from
    u by the GUM 4.3.7/4.3.9 divisors) as a bounded support; a t input keeps its degrees of
    freedom.  An input with u = 0 cannot be a sampled parameter and raises
    :class:`~uqreport.errors.InputError`.
    """
    if not (q.u > 0):
        raise InputError(
            f"input '{q.name}' has u = {q.u!r}: an exact value cannot be a sampled parameter."
            " Fix: give it an uncertainty, or leave it out of the sampled parameters."
        )
    d = q.distribution
    if d == "normal":
        return Prior("normal", q.value, q.u)
    if d == "t":
        return Prior("t", q.value, q.u, q.dof)
    divisor = DISTRIBUTIONS[d]
    half = q.half_width if q.half_width is not None else q.u * float(divisor or 1.0)
    return Prior(d, q.value, half)


def noise_scale_prior(relative_reliability: float = 0.5) -> Prior:
    """Prior of ln s, where s = sigma_actual / sigma_spec scales a run's instrument noise.

    A log-normal density on s with median 1 (the specification is taken at its word) and
    standard deviation of ln s equal to ``relative_reliability`` (Delta u / u of the spec);
    the sampled coordinate is ln s, whose prior is then normal(0, relative_reliability).

    Why log-normal rather than the conjugate scaled inverse chi-square: the timing jitter
    adds a variance (dA/dt)^2 u_jit^2 that does not scale with s, so conjugacy is lost
    anyway; the log-normal is symmetric in ln s (a spec twice too optimistic is as
    plausible as one twice too pessimistic); and a normal prior in the sampled coordinate
    suits the affine-invariant stretch move.  The two agree in spread: a scaled inverse
    chi-square for sigma^2 with nu degrees of freedom has sd(ln sigma) of about
    1/sqrt(2 nu), and GUM G.4.2 gives nu = 0.5 (Delta u / u)^-2 for a stated reliability, so
    the default 0.5 carries the information of a spec estimated with about 2 degrees of
    freedom: a factor of about 2.7 either way at 95 %.  With 20 or more readings per run
    the data dominate (posterior sd of ln s near 1/sqrt(2 n) = 0.16).
    """
    r = float(relative_reliability)
    if not (r > 0 and math.isfinite(r)):
        raise InputError(
            f"noise prior width (relative reliability of the noise spec) must be a finite"
            f" number > 0, got {relative_reliability!r}. Fix: give e.g. 0.5 (the spec is"
            " trusted to about 50 %)."
        )
    return Prior("normal", 0.0, r)


def between_run_prior(scale: float = 0.1, *, log_scale: bool = False) -> Prior:
    """Prior of the relative run-to-run spread tau of the hierarchical model.

    Half-normal with scale ``scale`` (default 0.1: runs of one bench study that disagree by
    more than about 20 % in k are implausible but not excluded).  Weakly informative: it
    keeps tau finite when only two or three runs inform it, and puts its mode at zero (no
    spread), so that consistent runs are pooled.  ``log_scale=True`` gives the same prior as
    a density of ln tau (the sampled coordinate: no hard wall at tau = 0).
    """
    s = float(scale)
    if not (s > 0 and math.isfinite(s)):
        raise InputError(
            f"between-run prior scale must be a finite number > 0, got {scale!r}."
            " Fix: give a relative spread such as 0.1 (10 %)."
        )
    return Prior("log-halfnormal" if log_scale else "halfnormal", 0.0, s)
