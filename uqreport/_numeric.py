"""Small numeric helpers shared by every module: array coercion and the randomness convention."""

from __future__ import annotations

from typing import Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError

__all__ = ["RandomLike", "as_float_array", "as_generator", "legacy_random_state"]

RandomLike = int | np.random.Generator | None


def as_generator(rng: RandomLike) -> np.random.Generator:
    """Normalise the ``rng`` argument every random function takes.

    ``None`` gives a fresh unseeded generator, an ``int`` a seeded one, and a ``Generator`` is
    used as it is (shared state).
    """
    if isinstance(rng, np.random.Generator):
        return rng
    if rng is None or isinstance(rng, (int, np.integer)):
        return np.random.default_rng(rng)
    raise TypeError(f"rng must be an int, a numpy Generator or None, not {type(rng).__name__}")


def legacy_random_state(rng: np.random.Generator) -> np.random.RandomState:
    """A legacy ``RandomState`` seeded from ``rng`` (for libraries that need one, e.g. emcee)."""
    seed = int(rng.integers(0, 2**32 - 1))
    return np.random.RandomState(seed)


def as_float_array(
    values: ArrayLike,
    *,
    name: str = "array",
    ndim: int | None = None,
    nan_policy: Literal["raise", "propagate"] = "raise",
) -> NDArray[np.float64]:
    """Coerce ``values`` to a float64 array with an explicit NaN policy.

    Raises :class:`InputError` naming ``name`` when the values are not numbers, have the wrong
    number of dimensions, or contain NaN or infinity under ``nan_policy="raise"``.
    """
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"{name}: expected numbers, got {values!r} ({exc}).") from None
    if ndim is not None and arr.ndim != ndim:
        raise InputError(f"{name}: expected a {ndim}-dimensional array, got shape {arr.shape}.")
    if nan_policy == "raise" and not np.all(np.isfinite(arr)):
        bad = np.flatnonzero(~np.isfinite(arr.ravel()))
        raise InputError(
            f"{name}: {bad.size} value(s) are NaN or infinite (first at flat index {bad[0]})."
            " Fix: remove or correct them."
        )
    return arr
