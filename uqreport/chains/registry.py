"""Collecting a chain's input quantities, shared by name, with the functions that read them.

A chain asks the registry for an input (a solution's concentration, a glassware item's scale
error, a blank offset); the first request creates it, later ones return the same column, so
that a systematic input used by several runs is one input of the model and the engines see
the correlation it causes without special cases.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
from numpy.typing import NDArray

from ..errors import InputError
from ..inputs import InputQuantity, InputSet

__all__ = ["Column", "InputRegistry", "constant"]

Column = Callable[[NDArray[np.float64]], NDArray[np.float64]]


def constant(value: float) -> Column:
    """A column function that ignores the inputs."""
    v = float(value)
    return lambda X: np.full(X.shape[0], v)


@dataclass
class InputRegistry:
    """Inputs of one model in the order of their creation, with user correlations."""

    def __post_init__(self) -> None:
        self._inputs: list[InputQuantity] = []
        self._index: dict[str, int] = {}
        self._by_key: dict[str, str] = {}
        self._correlations: dict[tuple[str, str], float] = {}

    def __len__(self) -> int:
        return len(self._inputs)

    def __contains__(self, name: str) -> bool:
        return name in self._index

    def add(self, q: InputQuantity, *, key: str | None = None) -> int:
        """Add ``q`` (or find it, when an input of that name exists) and return its index.

        ``key`` is the experiment-file key path the input comes from (for correlations).
        Re-adding a name with a different value or uncertainty is a programming error.
        """
        if q.name in self._index:
            i = self._index[q.name]
            old = self._inputs[i]
            if not (math.isclose(old.value, q.value) and math.isclose(old.u, q.u)):
                raise ValueError(f"input '{q.name}' added twice with different values")
            return i
        self._index[q.name] = len(self._inputs)
        self._inputs.append(q)
        if key is not None:
            self._by_key[key] = q.name
        return self._index[q.name]

    def index(self, name: str) -> int:
        return self._index[name]

    def get(self, name: str) -> InputQuantity:
        return self._inputs[self._index[name]]

    def by_index(self, index: int) -> InputQuantity:
        return self._inputs[index]

    def update(self, name: str, **changes: object) -> None:
        """Change fields of an input already added (e.g. its uncertainty after a fit)."""
        i = self._index[name]
        self._inputs[i] = replace(self._inputs[i], **changes)  # type: ignore[arg-type]

    def column(self, index: int) -> Column:
        return lambda X: X[:, index]

    def name_of_key(self, key: str) -> str | None:
        return self._by_key.get(key)

    def correlate(self, key_a: str, key_b: str, r: float, *, where: str = "") -> None:
        """Correlate the inputs created from two experiment-file key paths."""
        a, b = self._by_key.get(key_a), self._by_key.get(key_b)
        if a is None or b is None:
            missing = key_a if a is None else key_b
            raise InputError(
                f"{where}correlation names '{missing}', which this analysis does not use as an"
                " uncertain input. Fix: correlate quantities that carry an uncertainty and"
                " enter the analysis."
            )
        self._correlations[(a, b)] = float(r)

    def input_set(self) -> InputSet:
        return InputSet(self._inputs, self._correlations)

    @property
    def values(self) -> NDArray[np.float64]:
        return np.array([q.value for q in self._inputs])
