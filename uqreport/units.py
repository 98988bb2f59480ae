"""Explicit units: every dimensional number in an experiment file carries one.

Values are converted once, on loading, to the internal unit of their dimension, and every
model works in internal units.  Uncertainties convert with the scale factor only (a
temperature uncertainty of 0.5 degC is 0.5 K).

=====================  =====================  ==============================================
dimension              internal unit          accepted spellings (examples)
=====================  =====================  ==============================================
concentration          mol/L                  mol/L, M, mmol/L, mM, umol/L, uM, µM
time                   s                      s, min, h
volume                 mL                     mL, L, uL, µL, cm^3
length                 cm                     cm, mm, m
wavelength             nm                     nm
temperature            K                      K, degC, °C
flow                   mL/s                   mL/s, mL/min, L/min, L/h, mL/h
absorbance             1 (absorbance units)   1, AU, A
dimensionless          1                      1, %, dial
molar_absorptivity     L/(mol cm)             L/(mol*cm), M^-1 cm^-1
molar_energy           J/mol                  J/mol, kJ/mol
first_order_rate       1/s                    1/s, s^-1, 1/min, min^-1
second_order_rate      L/(mol s)              L/(mol*s), M^-1 s^-1, L/(mol*min)
=====================  =====================  ==============================================
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass

from .errors import InputError

__all__ = [
    "DIMENSIONS",
    "Unit",
    "convert_scale",
    "convert_value",
    "internal_unit",
    "parse_unit",
    "pretty_unit",
]


@dataclass(frozen=True)
class Unit:
    """A unit of one dimension: internal value = value * factor + offset."""

    symbol: str
    dimension: str
    factor: float
    offset: float = 0.0


def _u(dimension: str, factor: float, *symbols: str, offset: float = 0.0) -> dict[str, Unit]:
    return {s: Unit(symbols[0], dimension, factor, offset) for s in symbols}


_UNITS: dict[str, Unit] = {}
for _table in (
    _u("concentration", 1.0, "mol/L", "M", "mol L^-1", "mol/l", "mol dm^-3", "mol/dm^3"),
    _u("concentration", 1e-3, "mmol/L", "mM", "mmol L^-1", "mmol/l"),
    _u(
        "concentration",
        1e-6,
        "umol/L",
        "uM",
        "µM",
        "µmol/L",
        "umol L^-1",
        "μM",
        "μmol/L",
        "umol/l",
        "µmol/l",
        "μmol/l",
    ),
    _u("time", 1.0, "s", "sec"),
    _u("time", 60.0, "min"),
    _u("time", 3600.0, "h"),
    _u("volume", 1.0, "mL", "ml", "cm^3", "cm3"),
    _u("volume", 1e3, "L", "l", "dm^3"),
    _u("volume", 1e-3, "uL", "µL", "μL", "ul", "µl", "μl"),
    _u("length", 1.0, "cm"),
    _u("length", 0.1, "mm"),
    _u("length", 100.0, "m"),
    _u("wavelength", 1.0, "nm"),
    _u("temperature", 1.0, "K"),
    _u("temperature", 1.0, "degC", "°C", "deg C", offset=273.15),
    _u("flow", 1.0, "mL/s", "ml/s"),
    _u("flow", 1.0 / 60.0, "mL/min", "ml/min"),
    _u("flow", 1.0 / 3600.0, "mL/h", "ml/h"),
    _u("flow", 1e3 / 60.0, "L/min", "l/min"),
    _u("flow", 1e3 / 3600.0, "L/h", "l/h"),
    _u("absorbance", 1.0, "1", "AU", "A"),
    _u("dimensionless", 1.0, "1", "dial", "fraction"),
    _u("dimensionless", 0.01, "%"),
    _u(
        "molar_absorptivity",
        1.0,
        "L/(mol*cm)",
        "L/(mol cm)",
        "M^-1 cm^-1",
        "L mol^-1 cm^-1",
        "1/(M*cm)",
    ),
    _u("molar_energy", 1.0, "J/mol"),
    _u("molar_energy", 1e3, "kJ/mol"),
    _u("first_order_rate", 1.0, "1/s", "s^-1"),
    _u("first_order_rate", 1.0 / 60.0, "1/min", "min^-1"),
    _u("second_order_rate", 1.0, "L/(mol*s)", "L/(mol s)", "M^-1 s^-1", "L mol^-1 s^-1"),
    _u("second_order_rate", 1.0 / 60.0, "L/(mol*min)", "M^-1 min^-1", "L mol^-1 min^-1"),
):
    for _key, _unit in _table.items():
        # "1" is both absorbance and dimensionless: keep both under distinct keys
        _UNITS[f"{_unit.dimension}:{_key}"] = _unit

DIMENSIONS: dict[str, str] = {
    "concentration": "mol/L",
    "time": "s",
    "volume": "mL",
    "length": "cm",
    "wavelength": "nm",
    "temperature": "K",
    "flow": "mL/s",
    "absorbance": "1",
    "dimensionless": "1",
    "molar_absorptivity": "L/(mol*cm)",
    "molar_energy": "J/mol",
    "first_order_rate": "1/s",
    "second_order_rate": "L/(mol*s)",
}


def internal_unit(dimension: str) -> str:
    """The internal unit symbol of ``dimension``."""
    return DIMENSIONS[dimension]


def _spellings(dimension: str) -> list[str]:
    prefix = f"{dimension}:"
    return [k[len(prefix) :] for k in _UNITS if k.startswith(prefix)]


def parse_unit(symbol: str, dimension: str, *, where: str = "unit") -> Unit:
    """Look up ``symbol`` as a unit of ``dimension``.

    Raises :class:`InputError` naming ``where``, the bad symbol and the accepted spellings
    (with a "did you mean" suggestion) when the unit is unknown or of another dimension.
    """
    if dimension not in DIMENSIONS:
        raise KeyError(f"unknown dimension {dimension!r}")
    text = str(symbol).strip()
    unit = _UNITS.get(f"{dimension}:{text}")
    if unit is not None:
        return unit
    accepted = _spellings(dimension)
    other = [k.split(":", 1)[0] for k in _UNITS if k.split(":", 1)[1] == text]
    hint = ""
    if other:
        hint = (
            f" '{text}' is a unit of {other[0].replace('_', ' ')},"
            f" not of {dimension.replace('_', ' ')}."
        )
    else:
        close = difflib.get_close_matches(text, accepted, n=1, cutoff=0.5)
        if close:
            hint = f" Did you mean '{close[0]}'?"
    raise InputError(
        f"{where}: unknown unit '{text}' for a {dimension.replace('_', ' ')}.{hint}"
        f" Fix: use one of {', '.join(repr(a) for a in accepted)}."
    )


def convert_value(value: float, symbol: str, dimension: str, *, where: str = "unit") -> float:
    """Convert a value (not an uncertainty) to the internal unit of ``dimension``."""
    unit = parse_unit(symbol, dimension, where=where)
    return float(value) * unit.factor + unit.offset


def convert_scale(value: float, symbol: str, dimension: str, *, where: str = "unit") -> float:
    """Convert an uncertainty, a half-width or a difference (scale factor only, no offset)."""
    unit = parse_unit(symbol, dimension, where=where)
    return float(value) * unit.factor


_PRETTY = {
    "1": "",
    "L/(mol*s)": "L mol⁻¹ s⁻¹",
    "(L/mol)^b/s": "(L/mol)ᵇ s⁻¹",
    "1/s": "s⁻¹",
    "mol/L": "mol L⁻¹",
    "L/(mol*cm)": "L mol⁻¹ cm⁻¹",
    "J/mol": "J mol⁻¹",
    "kJ/mol": "kJ mol⁻¹",
    "mL/min": "mL min⁻¹",
    "mL/s": "mL s⁻¹",
    "degC": "°C",
}


def pretty_unit(unit: str | None, *, dimensionless: str = "") -> str:
    """A unit for people to read: "L/(mol*s)" -> "L mol⁻¹ s⁻¹"; "1" -> ``dimensionless``."""
    if unit is None:
        return ""
    u = str(unit).strip()
    if u in ("1", ""):
        return dimensionless
    if u in _PRETTY:
        return _PRETTY[u]
    if "/" in u and u.count("/") == 1 and "^" not in u:
        num, den = u.split("/")
        den = den.strip().removeprefix("(").removesuffix(")")
        parts = [p for p in num.split("*") if p.strip() not in ("", "1")]
        parts += [p.strip() + "⁻¹" for p in den.split("*") if p.strip()]
        return " ".join(p.strip() for p in parts)
    return u.replace("*", " ")
