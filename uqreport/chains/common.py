"""Inputs every chain builds the same way: volumes with glassware, solution concentrations,
temperatures and absorbance offsets."""

from __future__ import annotations

import math

import numpy as np

from ..errors import InputError
from ..experiment import Experiment, QuantitySpec
from ..inputs import InputQuantity
from .registry import Column, InputRegistry, constant

__all__ = [
    "GROUPS",
    "concentration_column",
    "quantity_column",
    "temperature_column",
    "volume_column",
]

#: Budget groups used by the chains (display names are the group names).
GROUPS = {
    "pump": "pump-calibration scatter",
    "glassware": "glassware",
    "stopwatch": "stopwatch timing",
    "lag": "timing lag",
    "pathlength": "cuvette pathlength",
    "noise": "absorbance noise",
    "blank": "blank offset",
    "photometric": "photometric accuracy",
    "concentration": "concentrations",
    "absorptivity": "molar absorptivity",
    "temperature": "temperature",
    "activation_energy": "activation energy",
    "between_run": "run-to-run scatter",
}


def quantity_column(
    reg: InputRegistry,
    spec: QuantitySpec,
    name: str,
    *,
    group: str,
    description: str = "",
) -> Column:
    """The column of an uncertain quantity (a constant when it is exact)."""
    if spec.glassware is not None:
        raise InputError(f"{spec.key}: a glassware volume must go through volume_column().")
    if spec.exact:
        return constant(spec.value)
    i = reg.add(spec.to_input(name, group=group, description=description), key=spec.key)
    return reg.column(i)


def volume_column(reg: InputRegistry, exp: Experiment, spec: QuantitySpec, name: str) -> Column:
    """A measured volume: V = V_nominal (1 + s_g) + e_reading for glassware g.

    The glassware's tolerance is a relative scale error s_g shared by every use of that item
    (one scale error: it does not average down); the reading error of each fill is an input
    of its own.  A volume given with its own uncertainty is one input.
    """
    if spec.glassware is None:
        return quantity_column(reg, spec, name, group=GROUPS["glassware"])
    g = exp.glassware[spec.glassware]
    cap = g.capacity.value
    cols: list[Column] = []
    tol = g.tolerance
    if tol is not None and not tol.exact:
        rel = InputQuantity(
            f"glassware/{g.name}",
            0.0,
            tol.u / cap,
            distribution=tol.distribution,
            half_width=None if tol.half_width is None else tol.half_width / cap,
            dof=tol.dof,
            unit="1",
            group=tol.group or GROUPS["glassware"],
            source=tol.source or f"tolerance of {g.kind} '{g.name}'",
            description=f"relative scale error of {g.kind} '{g.name}' ({cap:g} mL)",
        )
        i = reg.add(rel, key=tol.key)
        cols.append(lambda X, i=i, v=spec.value: v * X[:, i])
    if g.reading is not None and not g.reading.exact:
        rd = InputQuantity(
            f"volume_reading/{name}",
            0.0,
            g.reading.u,
            distribution=g.reading.distribution,
            dof=g.reading.dof,
            unit="mL",
            group=g.reading.group or GROUPS["glassware"],
            source=g.reading.source or f"reading one fill of '{g.name}'",
            description=f"reading error of the fill of '{g.name}' for {name}",
        )
        i = reg.add(rd)
        cols.append(lambda X, i=i: X[:, i])
    v0 = spec.value
    if not cols:
        return constant(v0)
    return lambda X: v0 + sum(c(X) for c in cols)


def concentration_column(
    reg: InputRegistry, exp: Experiment, solution: str, *, _seen: tuple[str, ...] = ()
) -> Column:
    """A solution's concentration: its own quantity, or stock x aliquot / final volume."""
    if solution in _seen:
        raise InputError(f"solutions: stock cycle {' -> '.join((*_seen, solution))}.")
    sol = exp.solutions[solution]
    if sol.concentration is not None:
        return quantity_column(
            reg,
            sol.concentration,
            f"concentration/{solution}",
            group=GROUPS["concentration"],
            description=f"concentration of solution '{solution}'",
        )
    assert sol.stock is not None and sol.aliquot_volume is not None and sol.final_volume is not None
    stock = concentration_column(reg, exp, sol.stock, _seen=(*_seen, solution))
    aliquot = volume_column(reg, exp, sol.aliquot_volume, f"solutions.{solution}.aliquot_volume")
    final = volume_column(reg, exp, sol.final_volume, f"solutions.{solution}.final_volume")
    return lambda X: stock(X) * aliquot(X) / final(X)


def nominal(col: Column, reg: InputRegistry) -> float:
    """The value of a column at the input estimates registered so far."""
    x = reg.values
    X = x[None, :] if x.size else np.zeros((1, 0))
    v = float(np.asarray(col(X))[0])
    if not math.isfinite(v):
        raise InputError("a derived quantity is not finite at the input estimates.")
    return v


def temperature_column(reg: InputRegistry, spec: QuantitySpec, name: str) -> Column:
    """A temperature input (K) in the "temperature" group."""
    return quantity_column(
        reg, spec, name, group=GROUPS["temperature"], description=f"temperature ({name})"
    )
