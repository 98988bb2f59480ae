"""Input quantities of a measurement model and the set of them with their correlations.

An :class:`InputQuantity` is a measured or specified quantity X_i with its estimate x_i, its
standard uncertainty u(x_i), the probability distribution that describes the state of
knowledge about it, its degrees of freedom, its type of evaluation, its unit, its budget
group and a note saying where the numbers come from.

Tolerance to standard uncertainty (GUM 4.3.7-4.3.9, JCGM 101 6.4): a half-width a gives
u = a/sqrt(3) for a rectangular distribution, a/sqrt(6) for a symmetric triangular one and
a/sqrt(2) for an arcsine (U-shaped) one.  For a Student t input, ``u`` is the GUM standard
uncertainty s/sqrt(n) (the scale of the scaled-and-shifted t distribution of JCGM 101
6.4.9); Monte Carlo draws x + u * t_nu.

Degrees of freedom: infinite for a Type B evaluation unless the relative reliability
Delta u / u of the uncertainty is stated, when nu = 0.5 (Delta u / u)^-2 (GUM G.4.2,
equation G.3).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ._numeric import RandomLike, as_float_array, as_generator
from .errors import InputError

__all__ = [
    "DISTRIBUTIONS",
    "InputQuantity",
    "InputSet",
    "dof_from_reliability",
    "standard_uncertainty_from_half_width",
]

#: Distributions an input may have, with the divisor that turns a half-width into a standard
#: uncertainty (GUM 4.3.7, 4.3.9; JCGM 101 6.4.2-6.4.6).  Normal and Student t inputs are
#: given by their standard uncertainty.
DISTRIBUTIONS: dict[str, float | None] = {
    "normal": None,
    "rectangular": math.sqrt(3.0),
    "triangular": math.sqrt(6.0),
    "arcsine": math.sqrt(2.0),
    "t": None,
}


def standard_uncertainty_from_half_width(half_width: float, distribution: str) -> float:
    """Standard uncertainty of a symmetric distribution of half-width ``half_width``.

    Rectangular a/sqrt(3), triangular a/sqrt(6), arcsine a/sqrt(2) (GUM 4.3.7, 4.3.9;
    JCGM 101 6.4.6).  A normal or Student t input has no half-width form (reading a
    "half-width" as, say, a 3-sigma limit would be a guess): give it by its standard
    uncertainty, or by its expanded uncertainty and k.
    """
    divisor = DISTRIBUTIONS.get(distribution)
    if divisor is None:
        raise InputError(
            f"distribution '{distribution}' has no half-width form. Fix: use one of"
            " 'rectangular', 'triangular', 'arcsine', or give the standard uncertainty u."
        )
    if not (half_width >= 0 and math.isfinite(half_width)):
        raise InputError(f"half-width must be a finite number >= 0, got {half_width!r}.")
    return float(half_width) / divisor


def dof_from_reliability(relative_reliability: float) -> float:
    """Degrees of freedom of a Type B uncertainty from its relative reliability.

    GUM G.4.2, equation (G.3): nu = 0.5 (Delta u / u)^-2.  A relative reliability of 0.25
    (the uncertainty is thought reliable to about 25 %) gives nu = 8.
    """
    r = float(relative_reliability)
    if not (r > 0 and math.isfinite(r)):
        raise InputError(
            "relative reliability must be a positive number (Delta u / u), got"
            f" {relative_reliability!r}."
        )
    return 0.5 / r**2


@dataclass(frozen=True)
class InputQuantity:
    """One input quantity X_i of a measurement model.

    Attributes
    ----------
    name:
        Stable identifier, unique within a model (e.g. ``"blank_offset/b1"``).
    value:
        The estimate x_i, in the internal unit of its dimension.
    u:
        The standard uncertainty u(x_i) (for ``distribution="t"`` the scale of the t
        distribution, as in the GUM).
    distribution:
        ``"normal"``, ``"rectangular"``, ``"triangular"``, ``"arcsine"`` or ``"t"``.
    dof:
        Degrees of freedom nu_i (``math.inf`` for a Type B evaluation taken as exact).
    kind:
        ``"A"`` (statistical analysis of a series of observations) or ``"B"`` (other means).
    unit:
        The unit of ``value`` and ``u``.
    group:
        The budget group the input belongs to (e.g. ``"absorbance noise"``).
    source:
        A note saying where the estimate and its uncertainty come from.
    half_width:
        The half-width a of a bounded distribution, when the input was given that way.
    block:
        A label that gathers several inputs into one budget entry (e.g. the readings of one
        table); ``None`` means the input is its own entry.
    description:
        A plain-words description for reports.
    """

    name: str
    value: float
    u: float
    distribution: str = "normal"
    dof: float = math.inf
    kind: Literal["A", "B"] = "B"
    unit: str = "1"
    group: str = "other"
    source: str = ""
    half_width: float | None = None
    block: str | None = None
    description: str = ""

    def __post_init__(self) -> None:
        where = f"input '{self.name}'"
        if not self.name:
            raise InputError("an input quantity needs a non-empty name.")
        if self.distribution not in DISTRIBUTIONS:
            raise InputError(
                f"{where}: unknown distribution '{self.distribution}'. Fix: use one of "
                + ", ".join(repr(d) for d in DISTRIBUTIONS)
                + "."
            )
        if not math.isfinite(self.value):
            raise InputError(f"{where}: the estimate must be finite, got {self.value!r}.")
        if not (self.u >= 0 and math.isfinite(self.u)):
            raise InputError(
                f"{where}: the standard uncertainty must be a finite number >= 0, got {self.u!r}."
                " Fix: give u as a positive number (uncertainties are never negative)."
            )
        if not (self.dof > 0):
            raise InputError(
                f"{where}: degrees of freedom must be > 0 (or infinite), got {self.dof!r}."
            )
        if self.distribution == "t" and not math.isfinite(self.dof):
            raise InputError(
                f"{where}: a Student t input needs finite degrees of freedom."
                " Fix: give dof, or use distribution 'normal'."
            )
        if self.kind not in ("A", "B"):
            raise InputError(f"{where}: type must be 'A' or 'B', got {self.kind!r}.")
        if self.half_width is not None and not (self.half_width >= 0):
            raise InputError(f"{where}: half-width must be >= 0, got {self.half_width!r}.")

    # -- constructors -------------------------------------------------------------------
    @classmethod
    def from_half_width(
        cls,
        name: str,
        value: float,
        half_width: float,
        distribution: str = "rectangular",
        **kwargs: object,
    ) -> InputQuantity:
        """An input given by a tolerance (half-width ``a``) and a bounded distribution."""
        u = standard_uncertainty_from_half_width(half_width, distribution)
        return cls(
            name,
            float(value),
            u,
            distribution=distribution,
            half_width=float(half_width),
            **kwargs,  # type: ignore[arg-type]
        )

    @classmethod
    def from_expanded(
        cls, name: str, value: float, expanded: float, coverage_factor: float, **kwargs: object
    ) -> InputQuantity:
        """An input given by an expanded uncertainty U and its coverage factor k (u = U/k).

        A certificate's "U = 0.012, k = 2" is read as a normal distribution (GUM 4.3.3).
        """
        if not (coverage_factor > 0):
            raise InputError(
                f"input '{name}': coverage factor must be > 0, got {coverage_factor!r}."
            )
        return cls(name, float(value), float(expanded) / float(coverage_factor), **kwargs)  # type: ignore[arg-type]

    @classmethod
    def from_observations(
        cls, name: str, observations: ArrayLike, *, distribution: str = "normal", **kwargs: object
    ) -> InputQuantity:
        """A Type A input from repeated observations: the mean, u = s/sqrt(n), nu = n - 1.

        GUM 4.2.1-4.2.3.  With ``distribution="t"`` Monte Carlo draws the scaled and shifted
        t distribution of JCGM 101 6.4.9.
        """
        obs = as_float_array(observations, name=f"input '{name}' observations", ndim=1)
        if obs.size < 2:
            raise InputError(
                f"input '{name}': a Type A evaluation needs at least 2 observations,"
                f" got {obs.size}."
            )
        mean = float(obs.mean())
        u = float(obs.std(ddof=1) / math.sqrt(obs.size))
        kwargs.setdefault("kind", "A")
        return cls(name, mean, u, distribution=distribution, dof=obs.size - 1.0, **kwargs)  # type: ignore[arg-type]

    # -- behaviour ----------------------------------------------------------------------
    @property
    def relative_u(self) -> float:
        """u(x)/|x| (infinite when x = 0)."""
        return self.u / abs(self.value) if self.value != 0 else math.inf

    @property
    def budget_entry(self) -> str:
        """The label of the budget entry this input counts towards."""
        return self.block if self.block is not None else self.name

    def with_u(self, u: float) -> InputQuantity:
        """The same input with a new standard uncertainty (half-width rescaled to match)."""
        hw = None
        if self.half_width is not None and self.u > 0:
            hw = self.half_width * u / self.u
        return replace(self, u=float(u), half_width=hw)

    def sample_standardised(self, n: int, rng: np.random.Generator) -> NDArray[np.float64]:
        """``n`` draws of (X - x)/u: zero mean, unit scale (unit sd except for t)."""
        d = self.distribution
        if d == "normal":
            return rng.standard_normal(n)
        if d == "rectangular":
            return math.sqrt(3.0) * rng.uniform(-1.0, 1.0, n)
        if d == "triangular":
            return math.sqrt(6.0) * (rng.random(n) - rng.random(n))
        if d == "arcsine":
            return math.sqrt(2.0) * np.sin(2.0 * np.pi * rng.random(n))
        return rng.standard_t(self.dof, n)

    def sample(self, n: int, rng: RandomLike = None) -> NDArray[np.float64]:
        """``n`` draws from the input's distribution (JCGM 101 6.4)."""
        gen = as_generator(rng)
        return self.value + self.u * self.sample_standardised(int(n), gen)


def _normalise_pairs(
    correlations: Mapping[tuple[str, str], float] | None, names: Sequence[str]
) -> dict[tuple[str, str], float]:
    out: dict[tuple[str, str], float] = {}
    index = set(names)
    for key, r in (correlations or {}).items():
        try:
            a, b = key
        except (TypeError, ValueError):
            raise InputError(f"correlation key {key!r} must be a pair of input names.") from None
        for nm in (a, b):
            if nm not in index:
                raise InputError(
                    f"correlation ({a}, {b}): no input named '{nm}'. Fix: use the names of"
                    " inputs of this model."
                )
        if a == b:
            raise InputError(f"correlation ({a}, {b}): an input cannot be correlated with itself.")
        r = float(r)
        if not (-1.0 <= r <= 1.0):
            raise InputError(
                f"correlation ({a}, {b}) = {r!r} lies outside [-1, 1]. Fix: give a coefficient"
                " between -1 and 1."
            )
        k = (a, b) if a < b else (b, a)
        if k in out and out[k] != r:
            raise InputError(
                f"correlation ({a}, {b}) is given twice with different values ({out[k]} and {r})."
            )
        out[k] = r
    return out


@dataclass(frozen=True)
class InputSet:
    """An ordered set of input quantities with their correlation coefficients.

    ``correlations`` maps pairs of input names to r(x_i, x_j); pairs not given are
    uncorrelated.  The correlation matrix is checked symmetric positive semi-definite on
    construction (a clear :class:`InputError` names the problem otherwise).
    """

    inputs: tuple[InputQuantity, ...]
    correlations: Mapping[tuple[str, str], float] = field(default_factory=dict)

    def __init__(
        self,
        inputs: Iterable[InputQuantity],
        correlations: Mapping[tuple[str, str], float] | None = None,
    ):
        items = tuple(inputs)
        seen: set[str] = set()
        for q in items:
            if not isinstance(q, InputQuantity):
                raise TypeError(f"expected InputQuantity, got {type(q).__name__}")
            if q.name in seen:
                raise InputError(f"two inputs are named '{q.name}'. Fix: give each a unique name.")
            seen.add(q.name)
        object.__setattr__(self, "inputs", items)
        object.__setattr__(
            self, "correlations", _normalise_pairs(correlations, [q.name for q in items])
        )
        object.__setattr__(self, "_index", {q.name: i for i, q in enumerate(items)})
        self._check_psd()

    @classmethod
    def from_matrix(cls, inputs: Sequence[InputQuantity], correlation: ArrayLike) -> InputSet:
        """An input set from a full correlation matrix (validated symmetric, unit diagonal)."""
        r = as_float_array(correlation, name="correlation matrix", ndim=2)
        p = len(inputs)
        if r.shape != (p, p):
            raise InputError(
                f"correlation matrix has shape {r.shape}, expected ({p}, {p}) for {p} inputs."
            )
        if not np.allclose(r, r.T, rtol=0, atol=1e-12):
            i, j = np.unravel_index(np.argmax(np.abs(r - r.T)), r.shape)
            raise InputError(
                f"correlation matrix is not symmetric: r[{i},{j}] = {r[i, j]} but r[{j},{i}] ="
                f" {r[j, i]}. Fix: make the matrix symmetric."
            )
        if not np.allclose(np.diag(r), 1.0, rtol=0, atol=1e-12):
            i = int(np.argmax(np.abs(np.diag(r) - 1.0)))
            raise InputError(
                f"correlation matrix has r[{i},{i}] = {float(r[i, i])!r} on its diagonal (input"
                f" '{inputs[i].name}'); a quantity's correlation with itself is 1. Fix: put 1"
                " on the diagonal (a covariance matrix must be divided by u_i u_j first)."
            )
        pairs = {
            (inputs[i].name, inputs[j].name): float(r[i, j])
            for i in range(p)
            for j in range(i + 1, p)
            if r[i, j] != 0.0
        }
        return cls(inputs, pairs)

    # -- container protocol -------------------------------------------------------------
    def __len__(self) -> int:
        return len(self.inputs)

    def __iter__(self) -> Iterator[InputQuantity]:
        return iter(self.inputs)

    def __getitem__(self, name: str) -> InputQuantity:
        return self.inputs[self.index(name)]

    def __contains__(self, name: object) -> bool:
        return name in self._index  # type: ignore[attr-defined]

    def index(self, name: str) -> int:
        """Position of the input called ``name``."""
        try:
            return self._index[name]  # type: ignore[attr-defined,no-any-return]
        except KeyError:
            raise KeyError(f"no input named '{name}'") from None

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(q.name for q in self.inputs)

    @property
    def values(self) -> NDArray[np.float64]:
        """Estimates x_i, shape (p,)."""
        return np.array([q.value for q in self.inputs], dtype=float)

    @property
    def u(self) -> NDArray[np.float64]:
        """Standard uncertainties u(x_i), shape (p,)."""
        return np.array([q.u for q in self.inputs], dtype=float)

    @property
    def dof(self) -> NDArray[np.float64]:
        return np.array([q.dof for q in self.inputs], dtype=float)

    @property
    def groups(self) -> tuple[str, ...]:
        return tuple(q.group for q in self.inputs)

    def correlation_matrix(self) -> NDArray[np.float64]:
        """The correlation matrix r(x_i, x_j), shape (p, p)."""
        p = len(self.inputs)
        r = np.eye(p)
        for (a, b), rho in self.correlations.items():
            i, j = self.index(a), self.index(b)
            r[i, j] = r[j, i] = rho
        return r

    def covariance(self) -> NDArray[np.float64]:
        """The covariance matrix u(x_i, x_j) = r_ij u_i u_j, shape (p, p)."""
        u = self.u
        return self.correlation_matrix() * np.outer(u, u)

    @property
    def is_correlated(self) -> bool:
        return any(r != 0.0 for r in self.correlations.values())

    def _check_psd(self) -> None:
        if not self.correlations:
            return
        r = self.correlation_matrix()
        w, v = np.linalg.eigh(r)
        if w[0] < -1e-10:
            # name the inputs that carry the offending eigenvector
            vec = v[:, 0]
            top = np.argsort(-np.abs(vec))[:3]
            names = ", ".join(self.inputs[i].name for i in top if abs(vec[i]) > 1e-3)
            raise InputError(
                "the correlation matrix is not positive semi-definite (smallest eigenvalue"
                f" {w[0]:.3g}); the inconsistency involves {names}. Fix: correlation"
                " coefficients must be mutually consistent (e.g. r(a,b) = r(b,c) = 0.9 forces"
                " r(a,c) >= 0.62)."
            )

    # -- derived sets -------------------------------------------------------------------
    def replace(self, name: str, **changes: object) -> InputSet:
        """A copy with input ``name`` changed (``InputQuantity`` fields as keywords)."""
        items = list(self.inputs)
        i = self.index(name)
        items[i] = replace(items[i], **changes)  # type: ignore[arg-type]
        return InputSet(items, self.correlations)

    def scaled(self, factors: Mapping[str, float]) -> InputSet:
        """A copy with the standard uncertainties of the named inputs multiplied by factors."""
        items = [q.with_u(q.u * factors[q.name]) if q.name in factors else q for q in self.inputs]
        return InputSet(items, self.correlations)

    def __add__(self, other: InputSet) -> InputSet:
        return InputSet((*self.inputs, *other.inputs), {**self.correlations, **other.correlations})

    # -- sampling -----------------------------------------------------------------------
    def sample(self, n: int, rng: RandomLike = None) -> NDArray[np.float64]:
        """``n`` joint draws of all inputs, shape (n, p) (JCGM 101 6.4).

        Correlated inputs are drawn from a multivariate normal distribution (JCGM 101
        6.4.8); Student t inputs that share a block and degrees of freedom from a
        multivariate t (6.4.9, one scale per draw for the block); a correlated input with
        another distribution is an error, because its joint distribution would not be
        defined by the correlation coefficient alone.
        """
        gen = as_generator(rng)
        n = int(n)
        p = len(self.inputs)
        out = np.empty((n, p), order="F")  # column-major: each input is filled and read whole
        correlated = sorted(
            {self.index(nm) for pair, r in self.correlations.items() if r != 0.0 for nm in pair}
        )
        corr_set = set(correlated)
        # Student t inputs of one block with one dof share their scale: the block is drawn
        # from a multivariate t (a normal vector over one chi-square), as when the readings of
        # one table share a noise level estimated from their residuals (JCGM 101 6.4.9).
        t_blocks: dict[tuple[str, float], list[int]] = {}
        for i, q in enumerate(self.inputs):
            if i in corr_set:
                continue
            if q.distribution == "t" and q.block is not None:
                t_blocks.setdefault((q.block, q.dof), []).append(i)
            else:
                out[:, i] = q.sample(n, gen)
        for (_, nu), idx_list in t_blocks.items():
            ii = np.array(idx_list)
            scale = np.sqrt(nu / gen.chisquare(nu, n))
            z = gen.standard_normal((n, ii.size)) * scale[:, None]
            out[:, ii] = self.values[ii] + z * self.u[ii]
        if correlated:
            for i in correlated:
                q = self.inputs[i]
                if q.distribution != "normal":
                    raise InputError(
                        f"input '{q.name}' is correlated with another input but has a"
                        f" {q.distribution} distribution; Monte Carlo draws correlated inputs"
                        " from a multivariate normal (JCGM 101 6.4.8). Fix: give it a normal"
                        " distribution, or model the shared part as an input of its own."
                    )
            idx = np.array(correlated)
            r = self.correlation_matrix()[np.ix_(idx, idx)]
            w, v = np.linalg.eigh(r)
            root = v * np.sqrt(np.clip(w, 0.0, None))  # r = root @ root.T, PSD-safe
            z = gen.standard_normal((n, idx.size)) @ root.T
            out[:, idx] = self.values[idx] + z * self.u[idx]
        return out
