"""The measurement model: one vectorised function from inputs to outputs, used by every engine.

A :class:`MeasurementModel` holds the :class:`~uqreport.inputs.InputSet`, the output
quantities and a function ``f(X) -> Y`` that maps an array of input vectors, shape (n, p),
to an array of output vectors, shape (n, m).  The linear engine evaluates it at the
estimates and at the points of a numerical Jacobian (one call, 2p + 1 rows), the Monte Carlo
engine at chunks of draws, the Bayesian layer at walker positions.  Systematic (shared)
inputs are ordinary inputs that enter several outputs: no engine special-cases them.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from .errors import InputError, ModelError
from .inputs import InputSet

__all__ = ["MeasurementModel", "OutputQuantity", "columns_model"]

ModelFunction = Callable[[NDArray[np.float64]], NDArray[np.float64]]
JacobianFunction = Callable[[NDArray[np.float64]], NDArray[np.float64]]


@dataclass(frozen=True)
class OutputQuantity:
    """An output (measurand) Y_j of a model: stable name, unit, a plain description and a
    short symbol for prose ("k", "b", "k'(r1)"; the name when not given)."""

    name: str
    unit: str = "1"
    description: str = ""
    symbol: str = ""

    @property
    def label(self) -> str:
        return self.symbol or self.name


@dataclass(frozen=True)
class MeasurementModel:
    """A vectorised measurement model Y = f(X).

    Attributes
    ----------
    inputs:
        The input quantities and their correlations.
    outputs:
        The output quantities, in the order of the columns ``function`` returns.
    function:
        ``function(X)`` with ``X`` of shape (n, p) returns an array of shape (n, m).  It must
        not loop in Python over the n rows.
    jacobian:
        Optional analytic Jacobian: ``jacobian(x)`` with ``x`` of shape (p,) returns the
        (m, p) matrix of sensitivity coefficients dY_j/dX_i.  When ``None`` the linear engine
        uses central differences with steps ``step_fraction * u(x_i)``.
    step_fraction:
        Numerical-derivative step as a fraction of each input's standard uncertainty.
    name:
        A label for messages and reports.
    """

    inputs: InputSet
    outputs: tuple[OutputQuantity, ...]
    function: ModelFunction
    jacobian: JacobianFunction | None = None
    step_fraction: float = 1e-2
    name: str = "model"
    metadata: Mapping[str, object] = field(default_factory=dict)

    def __post_init__(self) -> None:
        outs = tuple(
            o if isinstance(o, OutputQuantity) else OutputQuantity(str(o)) for o in self.outputs
        )
        object.__setattr__(self, "outputs", outs)
        names = [o.name for o in outs]
        if len(set(names)) != len(names):
            raise InputError(f"model '{self.name}': output names are not unique: {names}.")
        if not outs:
            raise InputError(f"model '{self.name}' has no outputs.")
        if not (self.step_fraction > 0):
            raise InputError(f"model '{self.name}': step_fraction must be > 0.")

    @property
    def output_names(self) -> tuple[str, ...]:
        return tuple(o.name for o in self.outputs)

    @property
    def n_inputs(self) -> int:
        return len(self.inputs)

    @property
    def n_outputs(self) -> int:
        return len(self.outputs)

    def evaluate(self, X: NDArray[np.float64]) -> NDArray[np.float64]:
        """Evaluate the model on rows of input vectors; returns shape (n, m).

        A 1-D ``X`` of shape (p,) is one input vector and gives shape (m,).
        """
        X = np.asarray(X, dtype=float)
        single = X.ndim == 1
        X2 = X[None, :] if single else X
        if X2.ndim != 2 or X2.shape[1] != self.n_inputs:
            raise ModelError(
                f"model '{self.name}': expected inputs of shape (n, {self.n_inputs}),"
                f" got {X.shape}."
            )
        Y = np.asarray(self.function(X2), dtype=float)
        if Y.ndim == 1 and self.n_outputs == 1:
            Y = Y[:, None]
        if Y.shape != (X2.shape[0], self.n_outputs):
            raise ModelError(
                f"model '{self.name}': function returned shape {Y.shape}, expected"
                f" ({X2.shape[0]}, {self.n_outputs})."
            )
        return Y[0] if single else Y

    def at_estimates(self) -> NDArray[np.float64]:
        """The output estimates y = f(x), shape (m,)."""
        y = self.evaluate(self.inputs.values)
        if not np.all(np.isfinite(y)):
            bad = [self.outputs[j].name for j in np.flatnonzero(~np.isfinite(y))]
            raise ModelError(
                f"model '{self.name}': non-finite output at the input estimates: {bad}."
            )
        return y

    def with_inputs(self, inputs: InputSet) -> MeasurementModel:
        """The same model over a modified input set (same names and order)."""
        if inputs.names != self.inputs.names:
            raise InputError(
                f"model '{self.name}': the new input set must have the same inputs in the"
                " same order."
            )
        return MeasurementModel(
            inputs,
            self.outputs,
            self.function,
            self.jacobian,
            self.step_fraction,
            self.name,
            self.metadata,
        )


def columns_model(
    fn: Callable[..., object],
    inputs: InputSet,
    outputs: Sequence[OutputQuantity | str],
    *,
    jacobian: JacobianFunction | None = None,
    name: str = "model",
) -> MeasurementModel:
    """Build a model from a function of named columns.

    ``fn`` is called with one keyword argument per input (a 1-D array over draws) and
    returns one array (single output) or a sequence of arrays (one per output)::

        model = columns_model(lambda V, I, phi: (V / I * np.cos(phi), V / I * np.sin(phi)),
                              inputs, ["R", "X"])
    """
    names = inputs.names
    m = len(outputs)

    def function(X: NDArray[np.float64]) -> NDArray[np.float64]:
        cols = {nm: X[:, i] for i, nm in enumerate(names)}
        res = fn(**cols)
        if m == 1 and not isinstance(res, (tuple, list)):
            res = (res,)
        arrs = [np.broadcast_to(np.asarray(r, dtype=float), (X.shape[0],)) for r in res]  # type: ignore[union-attr]
        return np.stack(arrs, axis=1)

    return MeasurementModel(inputs, tuple(outputs), function, jacobian, name=name)  # type: ignore[arg-type]
