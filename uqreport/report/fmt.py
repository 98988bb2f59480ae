"""Number, unit and quantity formatting for the report: one place, so that the PDF and the
tests that compare it with results.json format every number the same way.

Pure Python (no reportlab, no matplotlib).  Text is Unicode; the PDF layer escapes it for
markup and, when no Unicode font is available, replaces the few glyphs the standard fonts
lack.

Rounding follows the GUM (JCGM 100, 7.2.6): an expanded uncertainty is stated to two
significant digits and the estimate to the same decimal place.  Intervals of the other
methods are stated on the same scale so that they can be compared by eye.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from ..units import pretty_unit

__all__ = [
    "NEGLIGIBLE_SHARE",
    "QuantityLabel",
    "Scale",
    "Statement",
    "as_float",
    "column_exponent",
    "fmt_count",
    "fmt_dof",
    "fmt_fixed",
    "fmt_percent",
    "fmt_pm",
    "fmt_sig",
    "headline_quantities",
    "method_lines",
    "quantity_label",
    "scale_for",
    "statement",
    "superscript",
    "unit_text",
]

_SUP = str.maketrans("0123456789-+", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺")

#: When the decimals needed exceed this, or the value is this large, use a power of ten.
_MAX_DECIMALS = 5
_MAX_FIXED = 1e5

#: Shares below this are rounding noise of a zero contribution and are shown as 0.
NEGLIGIBLE_SHARE = 1e-12


def superscript(text: str | int) -> str:
    """Digits and signs as Unicode superscripts ("-3" -> "⁻³")."""
    return str(text).translate(_SUP)


def as_float(x: Any) -> float:
    """A results.json number as a float ("inf" -> inf, None -> nan)."""
    if x is None:
        return math.nan
    if isinstance(x, str):
        return float(x.replace("−", "-"))
    return float(x)


def _exp10(x: float) -> int:
    return math.floor(math.log10(abs(x)))


def _decimals(u: float, sig: int = 2) -> int:
    """Decimal places that show ``u`` with ``sig`` significant digits (may be negative)."""
    d = sig - 1 - _exp10(u)
    if abs(round(u, d)) >= 10.0 ** (sig - d):  # 0.0996 -> 0.10, not 0.100
        d -= 1
    return d


def fmt_fixed(x: float, decimals: int) -> str:
    """``x`` with ``decimals`` places (no negative zero)."""
    d = max(decimals, 0)
    s = f"{round(x, decimals):.{d}f}"
    if s.lstrip("-").strip("0.") == "":
        s = s.lstrip("-")
    return s


@dataclass(frozen=True)
class Scale:
    """How the numbers of one quantity are written: decimals and a power of ten.

    ``fmt(x)`` gives the mantissa; ``suffix`` is " × 10⁻³" (or "") and goes after it.
    """

    decimals: int
    exponent: int = 0

    def fmt(self, x: float) -> str:
        return fmt_fixed(x / 10.0**self.exponent, self.decimals)

    @property
    def suffix(self) -> str:
        return "" if self.exponent == 0 else f" × 10{superscript(self.exponent)}"

    def with_suffix(self, x: float) -> str:
        return self.fmt(x) + self.suffix


def scale_for(
    value: float, uncertainty: float, *, sig: int = 2, exponent: int | None = None
) -> Scale:
    """The scale that shows ``uncertainty`` to ``sig`` significant digits and ``value`` to
    the same decimal place; a power of ten when the numbers are very small or large, or
    ``exponent`` when given (one power of ten for a whole table column)."""
    v, u = abs(as_float(value)), abs(as_float(uncertainty))
    if exponent is not None:
        if not math.isfinite(u) or u == 0.0:
            return Scale(3, exponent)
        return Scale(_decimals(u / 10.0**exponent, sig), exponent)
    if not math.isfinite(u) or u == 0.0:
        ref = v if v > 0 and math.isfinite(v) else 1.0
        e = _exp10(ref)
        if -3 <= e < 5:
            return Scale(max(0, 3 - e))
        return Scale(3, 3 * math.floor(e / 3))
    d = _decimals(u, sig)
    big = v if math.isfinite(v) else 0.0
    if d <= _MAX_DECIMALS and big < _MAX_FIXED:
        return Scale(d)
    e = _exp10(big) if big > 0 else _exp10(u)
    e = 3 * math.floor(e / 3)  # engineering steps: 10⁻³, 10⁻⁶, 10³
    return Scale(max(_decimals(u / 10.0**e, sig), 0), e)


def fmt_sig(x: Any, sig: int = 4, *, trim: bool = False) -> str:
    """A number to ``sig`` significant digits, fixed or with a power of ten.

    ``trim`` drops trailing zeros (for stated inputs: 0.002, not 0.002000).  None or NaN
    give "–", an infinite value "∞".
    """
    v = as_float(x)
    if math.isnan(v):
        return "–"
    if math.isinf(v):
        return "∞" if v > 0 else "-∞"
    if v == 0.0:
        return "0"
    e = _exp10(v)
    if -3 <= e < 5:
        d = max(sig - 1 - e, 0)
        s = fmt_fixed(v, d)
        if trim and "." in s:
            s = s.rstrip("0").rstrip(".")
        return s
    m = v / 10.0**e
    s = f"{m:.{sig - 1}f}"
    if s.lstrip("-").startswith("10"):  # 9.9996 -> 10.000
        e += 1
        s = f"{v / 10.0**e:.{sig - 1}f}"
    if trim and "." in s:
        s = s.rstrip("0").rstrip(".")
    return f"{s} × 10{superscript(e)}"


def fmt_pm(value: Any, u: Any, *, exponent: int | None = None) -> str:
    """ "0.7664 ± 0.0038" or "(3.590 ± 0.032) × 10⁻³": u to two significant digits.

    ``exponent`` fixes the power of ten (the table column's, see :func:`column_exponent`);
    the power is then left to the column header.
    """
    v, uu = as_float(value), as_float(u)
    if math.isnan(v):
        return "–"
    if not math.isfinite(uu):
        return fmt_sig(v) if exponent is None else fmt_sig(v / 10.0**exponent)
    sc = scale_for(v, uu, exponent=exponent)
    body = f"{sc.fmt(v)} ± {sc.fmt(uu)}"
    return body if sc.exponent == 0 or exponent is not None else f"({body}){sc.suffix}"


def column_exponent(values: Any) -> int:
    """One engineering power of ten for a column of numbers: 0 when the largest magnitude is
    from 0.1 up to 10⁵, else 10⁻³, 10⁻⁶, 10⁶, ... (so that 0.0036 reads 3.6 × 10⁻³)."""
    vals = [abs(as_float(v)) for v in values]
    vals = [v for v in vals if math.isfinite(v) and v > 0]
    if not vals:
        return 0
    e = _exp10(max(vals))
    if -1 <= e < 5:
        return 0
    return 3 * math.floor(e / 3)


def fmt_percent(share: Any, decimals: int = 1) -> str:
    """A share (0..1) as a percentage: "95.7 %"; tiny non-zero shares as "<0.1 %" (or
    "> −0.1 %" when negative)."""
    v = as_float(share)
    if math.isnan(v):
        return "–"
    if abs(v) < NEGLIGIBLE_SHARE:  # rounding noise of a zero contribution
        v = 0.0
    p = 100.0 * v
    lim = 0.5 * 10.0**-decimals
    if 0 < abs(p) < lim:  # a tiny negative share (a cross term, rounding) reads "> −0.1 %"
        return f"<{10.0**-decimals:g} %" if p > 0 else f"> −{10.0**-decimals:g} %"
    return f"{fmt_fixed(p, decimals)} %"


def fmt_dof(dof: Any) -> str:
    """Degrees of freedom: "∞", a whole number from 10 up, else one decimal."""
    v = as_float(dof)
    if math.isnan(v):
        return "–"
    if math.isinf(v):
        return "∞"
    return f"{v:.0f}" if v >= 10 else f"{v:.1f}"


def fmt_count(n: Any) -> str:
    """A whole number with a space every three digits: "20 000"."""
    return f"{int(n):,}".replace(",", " ")


# --- units --------------------------------------------------------------------------------


def unit_text(unit: str | None, *, dimensionless: str = "") -> str:
    """A unit as the report writes it: "L/(mol*s)" -> "L mol⁻¹ s⁻¹"; "1" -> ``dimensionless``."""
    return pretty_unit(unit, dimensionless=dimensionless)


# --- quantities ---------------------------------------------------------------------------


@dataclass(frozen=True)
class QuantityLabel:
    """How a results.json quantity is named in the report.

    ``symbol`` is plain text, ``symbol_markup`` the same with reportlab sub/superscript tags
    (user-supplied parts already escaped); ``label`` is a few words for headings.
    """

    name: str
    symbol: str
    symbol_markup: str
    label: str
    run: str | None = None


_BASE: dict[str, tuple[str, str, str]] = {
    "second_order_rate_constant": ("k", "k", "second-order rate constant"),
    "second_order_rate_constant_at_reference": (
        "k_ref",
        "k<sub>ref</sub>",
        "second-order rate constant at the reference temperature",
    ),
    "hydroxide_order": ("b", "<i>b</i>", "reaction order in hydroxide"),
    "rate_constant_free_order": ("k_b", "k<sub>b</sub>", "rate constant with the order fitted"),
    "pseudo_rate_constant": ("k′", "k′", "pseudo-first-order rate constant"),
    "hydroxide_concentration": ("[OH⁻]", "[OH⁻]", "hydroxide concentration"),
    "second_order_rate_constant_population": (
        "k_pop",
        "k<sub>pop</sub>",
        "population second-order rate constant of the runs (hierarchical posterior)",
    ),
    "between_run_spread": ("τ_run", "τ<sub>run</sub>", "relative between-run spread of k"),
    "noise_scale": ("s", "s", "readings' scatter over the noise model"),
}


def _esc(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def quantity_label(name: str, description: str | None = None) -> QuantityLabel:
    """The symbol and label of quantity ``name`` ("pseudo_rate_constant/r1" -> "k′(r1)")."""
    base, _, run = name.partition("/")
    if base in _BASE:
        sym, mk, label = _BASE[base]
    else:
        sym, mk, label = base, _esc(base), (description or base.replace("_", " "))
    if run:
        return QuantityLabel(
            name, f"{sym}({run})", f"{mk}({_esc(run)})", f"{label}, run {run}", run
        )
    return QuantityLabel(name, sym, mk, label)


def headline_quantities(doc: Mapping[str, Any]) -> list[tuple[str, str]]:
    """(chain, quantity) of every headline quantity present in ``doc``, in chain order."""
    out = []
    for cname, ch in doc.get("chains", {}).items():
        for q in ch.get("headline", []):
            if q in doc.get("quantities", {}):
                out.append((cname, q))
    return out


@dataclass(frozen=True)
class Statement:
    """The GUM-form statement of one quantity, as formatted strings.

    ``text`` is the whole statement in plain text; ``markup`` the same with sub/superscript
    tags for the PDF.  ``value``, ``U``, ``k``, ``dof`` and ``coverage`` are the formatted
    numbers, ``suffix`` the power of ten after value and U, ``unit`` the unit as written.
    The part from " = value" to the coverage factor reads the same in both forms.
    """

    label: QuantityLabel
    value: str
    U: str
    suffix: str
    unit: str
    k: str
    dof: str
    coverage: str
    scale: Scale

    @property
    def _unit_sp(self) -> str:
        return f" {self.unit}" if self.unit else ""

    @property
    def core(self) -> str:
        """ " = 0.179 L mol⁻¹ s⁻¹, U = 0.015 L mol⁻¹ s⁻¹ (coverage factor 1.96": same in both."""
        return (
            f" = {self.value}{self.suffix}{self._unit_sp}, U = {self.U}{self.suffix}"
            f"{self._unit_sp} (coverage factor {self.k}"
        )

    @property
    def tail(self) -> str:
        """ " = ∞, about 95 % coverage)": after ν_eff, same in both forms."""
        return f" = {self.dof}, about {self.coverage} % coverage)"

    @property
    def text(self) -> str:
        return f"{self.label.symbol}{self.core} from ν_eff{self.tail}"

    @property
    def markup(self) -> str:
        return f"{self.label.symbol_markup}{_esc(self.core)} from ν<sub>eff</sub>{_esc(self.tail)}"


def statement(doc: Mapping[str, Any], name: str) -> Statement:
    """The uncertainty statement of quantity ``name`` from its linear (GUM) record."""
    rec = doc["quantities"][name]
    lin = rec["linear"]
    value, U = as_float(lin["value"]), as_float(lin["U"])
    sc = scale_for(value, U)
    return Statement(
        label=quantity_label(name, rec.get("description")),
        value=sc.fmt(value),
        U=sc.fmt(U),
        suffix=sc.suffix,
        unit=unit_text(rec.get("unit")),
        k=f"{as_float(lin['k']):.2f}",
        dof=fmt_dof(lin.get("dof")),
        coverage=f"{100 * as_float(lin.get('coverage', 0.95)):g}",
        scale=sc,
    )


def _interval(sc: Scale, low: Any, high: Any, unit: str) -> str:
    u = f" {unit}" if unit else ""
    return f"[{sc.fmt(as_float(low))}, {sc.fmt(as_float(high))}]{sc.suffix}{u}"


def method_lines(doc: Mapping[str, Any], name: str) -> dict[str, str]:
    """One plain-text line per method for quantity ``name`` (keys "linear", "montecarlo",
    "validation", "bayes"; absent methods are left out), on the statement's scale."""
    rec = doc["quantities"][name]
    st = statement(doc, name)
    sc = st.scale
    lin = rec["linear"]
    cov = st.coverage
    out: dict[str, str] = {}
    value, U = as_float(lin["value"]), as_float(lin["U"])
    unit_sp = f" {st.unit}" if st.unit else ""
    out["linear"] = (
        f"Linear (GUM): interval {_interval(sc, value - U, value + U, st.unit)},"
        f" standard uncertainty u = {fmt_sig(lin['u'], 2)}{unit_sp}"
    )
    mc = rec.get("montecarlo")
    if mc:
        out["montecarlo"] = (
            f"Monte Carlo (JCGM 101, {fmt_count(mc['draws'])} draws): {cov} % symmetric interval"
            f" {_interval(sc, mc['low'], mc['high'], '')}, shortest"
            f" {_interval(sc, mc['shortest_low'], mc['shortest_high'], st.unit)},"
            f" u = {fmt_sig(mc['u'], 2)}{unit_sp}"
        )
        val = mc.get("validation") or {}
        if val:
            out["validation"] = (
                f"JCGM 101 validation of the linear interval: d_low = {fmt_sig(val['d_low'], 2)},"
                f" d_high = {fmt_sig(val['d_high'], 2)} against δ = {fmt_sig(val['delta'], 2)}:"
                f" {val.get('verdict', '')}"
            )
    by = rec.get("bayes")
    if by:
        bcov = f"{100 * as_float(by.get('coverage', 0.95)):g}"
        conv = "converged" if by.get("converged") else "NOT converged: do not rely on it"
        out["bayes"] = (
            f"Bayesian (MCMC): {bcov} % credible interval"
            f" {_interval(sc, by['low'], by['high'], '')} (equal tails), highest density"
            f" {_interval(sc, by['hdi_low'], by['hdi_high'], st.unit)},"
            f" median {sc.fmt(as_float(by['median']))}{sc.suffix}; {conv}"
        )
    return out
