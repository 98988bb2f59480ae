"""Quantity records of an experiment file -> :class:`QuantitySpec`.

A quantity is written as a TOML inline table, e.g.
``{ value = 0.100, unit = "mol/L", u = 0.0005, source = "titration" }``.  Three field modes
exist: *plain* (a value and a unit, no uncertainty), *uncertain* (a value, a unit and exactly
one uncertainty form) and *offset* (an uncertain quantity whose value defaults to 0).  The
uncertainty forms are ``u``, ``half_width`` (with a bounded distribution), ``expanded`` with
``k``, ``glassware`` (volumes only) and ``observations`` (Type A).  Numbers are converted to
internal units once, here; uncertainties with the unit's scale factor only.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

from ..defaults import TypeBDefault
from ..errors import InputError
from ..inputs import (
    DISTRIBUTIONS,
    InputQuantity,
    dof_from_reliability,
    standard_uncertainty_from_half_width,
)
from ..units import convert_scale, convert_value, internal_unit, parse_unit

__all__ = [
    "PLAIN_KEYS",
    "QUANTITY_KEYS",
    "UNCERTAINTY_FORMS",
    "QuantitySpec",
    "parse_quantity",
    "quantity_from_default",
]

#: Keys of an uncertain quantity record.
QUANTITY_KEYS = (
    "value",
    "unit",
    "u",
    "half_width",
    "distribution",
    "expanded",
    "k",
    "glassware",
    "observations",
    "dof",
    "reliability",
    "type",
    "source",
    "group",
)
#: Keys of a plain quantity record.
PLAIN_KEYS = ("value", "unit", "source")
#: The ways an uncertainty can be stated (exactly one per uncertain record).
UNCERTAINTY_FORMS = ("u", "half_width", "expanded", "glassware", "observations")

_UNITLESS = ("absorbance", "dimensionless")
_FORMS_TEXT = (
    "u = <standard uncertainty>; half_width = <a> with distribution = 'rectangular' |"
    " 'triangular' | 'arcsine'; expanded = <U> with k = <coverage factor>;"
    " observations = [x1, x2, ...]"
)

Report = Callable[[str, str, str], None]


@dataclass(frozen=True)
class QuantitySpec:
    """One quantity of an experiment file, in internal units.

    Attributes
    ----------
    key:
        Key path in the file, e.g. ``"solutions.oh_stock.concentration"`` or
        ``"batch.runs[r1].hydroxide_volume"``.
    dimension:
        A :mod:`uqreport.units` dimension.
    value:
        The estimate, in the internal unit of ``dimension``.
    unit:
        The internal unit symbol (:func:`uqreport.units.internal_unit`).
    u:
        Standard uncertainty in internal units (0 when exact, or when ``glassware`` carries
        the uncertainty).
    distribution:
        ``"normal"``, ``"rectangular"``, ``"triangular"``, ``"arcsine"`` or ``"t"``.
    half_width:
        The half-width in internal units when the uncertainty was given as one (else
        ``None``).
    dof:
        Degrees of freedom (``math.inf`` unless given, derived from a reliability or from
        observations).
    kind:
        ``"A"`` or ``"B"`` (type of evaluation).
    source:
        Where the numbers come from, as written (or the default's source).
    group:
        The user's override of the budget group (``None``: the chain decides).
    glassware:
        Glassware id when the uncertainty of this volume is that of the glassware.
    given_unit:
        The unit as written by the user (``"1"`` for a bare number).
    """

    key: str
    dimension: str
    value: float
    unit: str
    u: float = 0.0
    distribution: str = "normal"
    half_width: float | None = None
    dof: float = math.inf
    kind: str = "B"
    source: str = ""
    group: str | None = None
    glassware: str | None = None
    given_unit: str = "1"

    @property
    def exact(self) -> bool:
        """True when the quantity has no uncertainty of its own or of glassware."""
        return self.u == 0 and self.glassware is None

    def to_input(
        self, name: str, *, group: str, description: str = "", block: str | None = None
    ) -> InputQuantity:
        """The :class:`~uqreport.inputs.InputQuantity` of this quantity.

        The user's ``group`` override wins over the ``group`` argument.  Raises
        :class:`InputError` when the uncertainty belongs to glassware (the chain builds the
        shared glassware inputs itself).
        """
        if self.glassware is not None:
            raise InputError(
                f"{self.key}: the uncertainty of this volume is that of glassware"
                f" '{self.glassware}'. Fix: build the glassware's inputs (tolerance, reading)"
                " instead of converting the volume itself."
            )
        return InputQuantity(
            name=name,
            value=self.value,
            u=self.u,
            distribution=self.distribution,
            dof=self.dof,
            kind="A" if self.kind == "A" else "B",
            unit=self.unit,
            group=self.group or group,
            source=self.source,
            half_width=self.half_width,
            block=block,
            description=description,
        )


def quantity_from_default(key: str, dimension: str, default: TypeBDefault) -> QuantitySpec:
    """A :class:`QuantitySpec` for a :class:`~uqreport.defaults.TypeBDefault`."""
    value = convert_value(default.value, default.unit, dimension)
    half = None
    if default.half_width is not None:
        half = convert_scale(default.half_width, default.unit, dimension)
        u = standard_uncertainty_from_half_width(half, default.distribution)
    else:
        u = convert_scale(default.u or 0.0, default.unit, dimension)
    return QuantitySpec(
        key=key,
        dimension=dimension,
        value=value,
        unit=internal_unit(dimension),
        u=u,
        distribution=default.distribution,
        half_width=half,
        source=default.source,
        given_unit=default.unit,
    )


def _is_number(x: object) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def _split_fix(text: str, prefix: str) -> tuple[str, str]:
    if text.startswith(prefix):
        text = text[len(prefix) :]
    message, _, fix = text.partition(" Fix: ")
    return message.strip(), fix.strip()


def _example(dimension: str, mode: str) -> str:
    unit_part = "" if dimension in _UNITLESS else f', unit = "{internal_unit(dimension)}"'
    if mode == "plain":
        return f"{{ value = 1.0{unit_part} }}"
    if mode == "offset":
        return f"{{ u = 0.01{unit_part} }}"
    return f"{{ value = 1.0, u = 0.01{unit_part} }}"


class _Number:
    """Reads numbers of one record, reporting bad ones."""

    def __init__(self, raw: Mapping[str, Any], key: str, report: Report):
        self.raw, self.key, self.report = raw, key, report
        self.ok = True

    def get(self, name: str, *, nonnegative: bool = False, positive: bool = False) -> float | None:
        if name not in self.raw:
            return None
        x = self.raw[name]
        where = f"{self.key}.{name}"
        if not _is_number(x):
            self.report(
                where,
                f"{name} = {x!r} is not a number.",
                f"write {name} as a number, e.g. {name} = 0.01.",
            )
            self.ok = False
            return None
        x = float(x)
        if not math.isfinite(x):
            self.report(
                where, f"{name} = {x!r} is not a finite number.", f"give a finite value for {name}."
            )
            self.ok = False
            return None
        if nonnegative and x < 0:
            self.report(
                where,
                f"{name} = {x:g} is negative; uncertainties are never negative.",
                f"give {name} as a number >= 0 (its magnitude: {abs(x):g}).",
            )
            self.ok = False
            return None
        if positive and x <= 0:
            self.report(where, f"{name} = {x:g} must be > 0.", f"give {name} as a positive number.")
            self.ok = False
            return None
        return x


def _unknown_keys(
    raw: Mapping[str, Any], allowed: tuple[str, ...], key: str, report: Report, *, plain: bool
) -> tuple[bool, set[str]]:
    """Report the unknown keys of a quantity record; returns (no unknown key, the absent
    keys that some unknown key was suggested to be)."""
    ok = True
    meant: set[str] = set()
    for name in raw:
        if name in allowed:
            continue
        ok = False
        if plain and name in QUANTITY_KEYS:
            report(
                f"{key}.{name}",
                f"'{name}' is given, but {key} is a plain value with no uncertainty.",
                f"remove '{name}'; write only value and unit.",
            )
            continue
        close = difflib.get_close_matches(str(name), allowed, n=1, cutoff=0.6)
        hint = f" Did you mean '{close[0]}'?" if close else ""
        report(
            f"{key}.{name}",
            f"unknown key '{name}' in a quantity record.{hint}",
            "allowed keys here: " + ", ".join(allowed) + ".",
        )
        if close and close[0] not in raw:
            meant.add(close[0])
    return ok, meant


def parse_quantity(
    raw: object,
    *,
    key: str,
    dimension: str,
    mode: str,
    report: Report,
    glassware_ok: bool = False,
    low: float | None = None,
    low_open: bool = False,
    high: float | None = None,
) -> QuantitySpec | None:
    """Parse one quantity record at ``key``; problems go to ``report(key, message, fix)``.

    ``mode`` is ``"plain"``, ``"uncertain"`` or ``"offset"``.  ``low``/``high`` bound the
    value in internal units (``low_open``: the bound itself is not allowed).  Returns
    ``None`` when the record has a problem.
    """
    if mode not in ("plain", "uncertain", "offset"):
        raise ValueError(f"unknown quantity mode {mode!r}")
    unitless = dimension in _UNITLESS
    dim_text = dimension.replace("_", " ")
    if _is_number(raw) and unitless and mode == "plain":
        raw = {"value": raw}
    if not isinstance(raw, Mapping):
        shown = repr(raw)
        if _is_number(raw):
            fix = (
                f"write it as a record with one uncertainty form, e.g."
                f" {key.rsplit('.', 1)[-1]} = {_example(dimension, mode)}."
            )
            if mode == "plain":
                fix = (
                    f"write it with its unit, e.g. {key.rsplit('.', 1)[-1]} ="
                    f" {_example(dimension, mode)}."
                )
            need = "an uncertainty" if unitless else "a unit and an uncertainty"
            report(
                key,
                f"{shown} is a bare number; this {dim_text} needs "
                + ("a unit." if mode == "plain" else f"{need}."),
                fix,
            )
        else:
            report(
                key,
                f"{shown} is not a quantity record.",
                f"write an inline table, e.g. {_example(dimension, mode)}.",
            )
        return None
    allowed = PLAIN_KEYS if mode == "plain" else QUANTITY_KEYS
    # a key reported as misspelt ("unti", did you mean 'unit'?) is not reported again as
    # missing
    ok, meant = _unknown_keys(raw, allowed, key, report, plain=mode == "plain")
    num = _Number(raw, key, report)

    # unit ---------------------------------------------------------------------------
    unit_text = raw.get("unit")
    if unit_text is None:
        if unitless:
            unit_text = "1"
        else:
            if "unit" not in meant:
                report(
                    f"{key}.unit",
                    f"no unit is given for this {dim_text}.",
                    f'add unit = "{internal_unit(dimension)}" (or another {dim_text} unit).',
                )
            ok = False
    elif not isinstance(unit_text, str):
        report(
            f"{key}.unit",
            f"unit = {unit_text!r} is not a string.",
            f'write the unit in quotes, e.g. unit = "{internal_unit(dimension)}".',
        )
        ok, unit_text = False, None
    if isinstance(unit_text, str):
        try:
            parse_unit(unit_text, dimension, where=f"{key}.unit")
        except InputError as exc:
            msg, fix = _split_fix(str(exc), f"{key}.unit: ")
            report(f"{key}.unit", msg, fix)
            ok, unit_text = False, None

    # uncertainty form ------------------------------------------------------------------
    forms = [f for f in UNCERTAINTY_FORMS if f in raw]
    if mode != "plain":
        if len(forms) > 1:
            report(
                key,
                f"two uncertainty forms are given ({' and '.join(forms)}).",
                f"keep exactly one of {', '.join(UNCERTAINTY_FORMS)}.",
            )
            ok = False
        elif not forms:
            ways = _FORMS_TEXT + ("; glassware = '<glassware id>'" if glassware_ok else "")
            if not meant & set(UNCERTAINTY_FORMS):
                report(
                    key,
                    f"no uncertainty is given for this {dim_text}.",
                    f"add one of: {ways} (u = 0 states an exact value).",
                )
            ok = False
        if "k" in raw and "expanded" not in raw:
            report(
                f"{key}.k",
                "k (coverage factor) is given without expanded.",
                "give expanded = U together with k, or remove k.",
            )
            ok = False
        if "expanded" in raw and "k" not in raw:
            report(
                f"{key}.k",
                "expanded is given without its coverage factor k.",
                "add k = 2 (or the factor stated with the expanded uncertainty).",
            )
            ok = False
    form = forms[0] if len(forms) == 1 else None

    # value ------------------------------------------------------------------------------
    value = num.get("value")
    observations: list[float] | None = None
    if form == "observations":
        if "value" in raw:
            report(
                f"{key}.value",
                "value is given together with observations; the"
                " observations give the value (their mean).",
                "remove value.",
            )
            ok = False
        obs = raw["observations"]
        if not isinstance(obs, list) or not all(_is_number(x) and math.isfinite(x) for x in obs):
            report(
                f"{key}.observations",
                f"observations = {obs!r} is not a list of numbers.",
                "write observations = [x1, x2, ...] with finite numbers.",
            )
            ok = False
        elif len(obs) < 2:
            report(
                f"{key}.observations",
                f"{len(obs)} observation(s) given; a Type A evaluation needs at least 2.",
                "give two or more observations.",
            )
            ok = False
        else:
            observations = [float(x) for x in obs]
        for name in ("dof", "reliability"):
            if name in raw:
                report(
                    f"{key}.{name}",
                    f"{name} is given with observations; their degrees of freedom are n - 1.",
                    f"remove {name}.",
                )
                ok = False
    elif "value" not in raw:
        if mode == "offset":
            value = 0.0
        else:
            if "value" not in meant:
                report(
                    f"{key}.value",
                    f"no value is given for this {dim_text}.",
                    "add value = <number>.",
                )
            ok = False
    for name in ("u", "half_width", "expanded"):
        num.get(name, nonnegative=True)
    num.get("k", positive=True)
    num.get("dof", positive=True)
    num.get("reliability", positive=True)
    if "dof" in raw and "reliability" in raw:
        report(
            key,
            "both dof and reliability are given.",
            "give one: dof, or reliability (dof = 0.5 / reliability^2, GUM G.4.2).",
        )
        ok = False

    # distribution, type, text ----------------------------------------------------------
    dist = raw.get("distribution")
    default_dist = "rectangular" if form == "half_width" else "normal"
    if dist is not None:
        allowed_dist = {
            "half_width": ("rectangular", "triangular", "arcsine"),
            "expanded": ("normal", "t"),
            "observations": ("normal", "t"),
            "glassware": (),
        }.get(form or "", tuple(DISTRIBUTIONS))
        if dist not in allowed_dist:
            if form == "glassware":
                fix = "remove distribution; the glassware's tolerance sets it."
            else:
                fix = "use one of " + ", ".join(repr(d) for d in allowed_dist) + "."
            report(
                f"{key}.distribution",
                f"distribution = {dist!r} cannot be used" + (f" with {form}." if form else "."),
                fix,
            )
            ok, dist = False, None
    dist = dist or default_dist
    if form == "glassware":
        for name in ("dof", "reliability"):
            if name in raw:
                report(
                    f"{key}.{name}",
                    f"{name} is given, but the uncertainty comes from the glassware.",
                    f"remove {name}.",
                )
                ok = False
        gw = raw["glassware"]
        if not glassware_ok:
            report(
                f"{key}.glassware",
                "glassware can only carry the uncertainty of a volume that was measured with it.",
                "give u, half_width, expanded or observations instead.",
            )
            ok = False
        elif not isinstance(gw, str) or not gw:
            report(
                f"{key}.glassware",
                f"glassware = {gw!r} is not a glassware id.",
                'write glassware = "<id of a [glassware.<id>] table>".',
            )
            ok = False
    kind = raw.get("type", "A" if form == "observations" else "B")
    if kind not in ("A", "B"):
        report(f"{key}.type", f"type = {kind!r} is not 'A' or 'B'.", 'write type = "A" or "B".')
        ok = False
    elif form == "observations" and kind != "A":
        report(
            f"{key}.type",
            'type = "B" is given with observations, which are a Type A evaluation.',
            'remove type (or write type = "A").',
        )
        ok = False
    for name in ("source", "group"):
        if name in raw and (not isinstance(raw[name], str) or (name == "group" and not raw[name])):
            report(
                f"{key}.{name}",
                f"{name} = {raw[name]!r} is not a text.",
                f'write {name} = "..." in quotes.',
            )
            ok = False
    dof = math.inf
    if num.ok and "dof" in raw:
        dof = float(raw["dof"])
    elif num.ok and "reliability" in raw:
        dof = dof_from_reliability(float(raw["reliability"]))
    if observations is not None:
        dof = len(observations) - 1.0
    if dist == "t" and not math.isfinite(dof):
        report(
            f"{key}.distribution",
            "distribution = 't' needs degrees of freedom.",
            "give dof (or reliability, or observations), or use distribution = 'normal'.",
        )
        ok = False
    elif dist == "t" and dof <= 2.0:
        # a t distribution with nu <= 2 has no finite variance (its variance is
        # nu/(nu - 2) times the squared scale for nu > 2): Monte Carlo draws of it give no
        # standard uncertainty, and the adaptive procedure would not settle
        given = f"{dof:g} degrees of freedom"
        if observations is not None:
            given = f"{len(observations)} observations ({given})"
        report(
            f"{key}.distribution",
            f"distribution = 't' with {given} has no finite"
            " variance, so Monte Carlo cannot give a standard uncertainty from it.",
            "give 4 or more observations (3 or more degrees of freedom), or remove"
            " distribution = 't': the input is then normal and its degrees of freedom still"
            " set the coverage factor.",
        )
        ok = False
    if not (ok and num.ok) or unit_text is None:
        return None

    # convert ------------------------------------------------------------------------------
    u, half = 0.0, None
    if observations is not None:
        conv = [convert_value(x, unit_text, dimension) for x in observations]
        n = len(conv)
        value_int = sum(conv) / n
        s = math.sqrt(sum((x - value_int) ** 2 for x in conv) / (n - 1))
        u = s / math.sqrt(n)
        if len(set(observations)) == 1:
            report(
                f"{key}.observations",
                f"the {n} observations are all equal"
                f" ({observations[0]:g} {unit_text}); a Type A evaluation would give u = 0.",
                "state a Type B uncertainty instead, e.g. half_width = half the reading"
                " resolution (GUM F.2.2.1).",
            )
            return None
    else:
        value_int = convert_value(value or 0.0, unit_text, dimension)
        if form == "u":
            u = convert_scale(float(raw["u"]), unit_text, dimension)
        elif form == "half_width":
            half = convert_scale(float(raw["half_width"]), unit_text, dimension)
            u = standard_uncertainty_from_half_width(half, dist)
        elif form == "expanded":
            u = convert_scale(float(raw["expanded"]), unit_text, dimension) / float(raw["k"])

    def out_of_range(x: float) -> bool:
        return (low is not None and (x <= low if low_open else x < low)) or (
            high is not None and x > high
        )

    iu = "" if unitless else f" {internal_unit(dimension)}"
    bounds = []
    if low is not None:
        bounds.append(f"{'>' if low_open else '>='} {low:g}{iu}")
    if high is not None:
        bounds.append(f"<= {high:g}{iu}")
    unit_sp = "" if unit_text == "1" else f" {unit_text}"
    if observations is not None:
        # every observation is a value of the quantity: a negative concentration among
        # them is a typo even when the mean is in range
        bad = [
            (i, x)
            for i, x in enumerate(observations)
            if out_of_range(convert_value(x, unit_text, dimension))
        ]
        if bad:
            i, x = bad[0]
            more = f" (and {len(bad) - 1} more)" if len(bad) > 1 else ""
            report(
                f"{key}.observations",
                f"observation {i + 1}, {x:g}{unit_sp}{more}, is out"
                f" of range: each must be {' and '.join(bounds)}.",
                "check the number and its unit.",
            )
            return None
    if out_of_range(value_int):
        shown = (
            f"{raw.get('value', value_int):g}{unit_sp}"
            if observations is None
            else (f"mean {value_int:g}{iu}")
        )
        report(
            f"{key}.value",
            f"value {shown} is out of range: it must be {' and '.join(bounds)}.",
            "check the number and its unit.",
        )
        return None
    return QuantitySpec(
        key=key,
        dimension=dimension,
        value=value_int,
        unit=internal_unit(dimension),
        u=u,
        distribution=dist,
        half_width=half,
        dof=dof,
        kind=str(kind),
        source=str(raw.get("source", ""))
        or (f"mean of {len(observations)} observations" if observations else ""),
        group=raw.get("group"),
        glassware=raw.get("glassware") if form == "glassware" else None,
        given_unit=unit_text,
    )
