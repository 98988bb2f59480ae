"""Small helpers shared by the section builders."""

from __future__ import annotations

from collections.abc import Mapping
from statistics import NormalDist
from typing import Any

from .. import fmt, pdf
from ..figures import FigurePNG
from ..registry import ReportContext

__all__ = [
    "coverage_z",
    "fig",
    "label_of",
    "quantity_unit",
    "sub",
    "unit_header",
]


def sub(ctx: ReportContext, title: str | pdf.Markup) -> Any:
    """A numbered subsection heading ("3.2  ...")."""
    return pdf.heading(title, 2, number=ctx.numbers.sub())


def fig(ctx: ReportContext, figure: FigurePNG, caption: str | pdf.Markup) -> Any:
    """A figure with a numbered caption ("Figure 4. ..."), kept together."""
    n = ctx.numbers.next_figure()
    body = caption if isinstance(caption, pdf.Markup) else pdf.esc(caption)
    return pdf.figure(
        figure.png, figure.width_in, figure.height_in, pdf.Markup(f"Figure {n}. {body}")
    )


def coverage_z(coverage: float) -> float:
    """The normal coverage factor of a two-sided interval (1.96 for 95 %)."""
    return NormalDist().inv_cdf(0.5 + coverage / 2.0)


def label_of(doc: Mapping[str, Any], name: str) -> fmt.QuantityLabel:
    rec = doc.get("quantities", {}).get(name, {})
    return fmt.quantity_label(name, rec.get("description"))


def quantity_unit(doc: Mapping[str, Any], name: str) -> str:
    return fmt.unit_text(doc.get("quantities", {}).get(name, {}).get("unit"))


def unit_header(title: str, unit: str, exponent: int = 0) -> str:
    """A column header with its unit: "k′ (10⁻³ s⁻¹)"; no brackets when dimensionless."""
    parts = []
    if exponent:
        parts.append(f"10{fmt.superscript(exponent)}")
    if unit:
        parts.append(unit)
    return f"{title} ({' '.join(parts)})" if parts else title
