"""The input quantities of every chain: estimate, standard uncertainty, distribution, degrees
of freedom, type, budget group and source."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

from .. import fmt, pdf
from ..registry import ReportContext, Section, register_section
from ._util import sub

__all__ = ["build_inputs", "input_rows"]

HEADER = (
    "Input",
    "Estimate",
    "u",
    "Unit",
    "Distribution",
    "ν",
    "Type",
    "Group",
    "Source",
)
# points, adding to the frame width (493 pt)
WIDTHS = (104, 52, 42, 36, 60, 22, 28, 64, 85)  # ν: room for "3.0", "12"
ALIGN = "LRRLLRLLL"


def _distribution(item: Mapping[str, Any]) -> str:
    d = str(item.get("distribution", ""))
    hw = item.get("half_width")
    if hw is not None:
        d += f" (±{fmt.fmt_sig(hw, 3, trim=True)})"
    return d


def _estimate(value: Any, u: Any) -> str:
    """The estimate to four significant digits, or to the decimal place of u (two
    significant digits) when u needs more: 297.45 K with u = 0.17 K, not 297.4."""
    text = fmt.fmt_sig(value, 4, trim=True)
    v, uu = fmt.as_float(value), fmt.as_float(u)
    if not (math.isfinite(v) and math.isfinite(uu)) or v == 0.0 or uu <= 0.0 or "×" in text:
        return text
    d = fmt.scale_for(v, uu).decimals
    shown = len(text.partition(".")[2])
    if d > shown and fmt.scale_for(v, uu).exponent == 0:
        text = fmt.fmt_fixed(v, d)
        if "." in text:
            text = text.rstrip("0").rstrip(".")
    return text


def _joined(values: Sequence[Any]) -> str:
    seen: list[str] = []
    for v in values:
        t = "–" if v is None else str(v)
        if t not in seen:
            seen.append(t)
    return "; ".join(seen)


def input_rows(items: Sequence[Mapping[str, Any]]) -> tuple[list[list[Any]], int]:
    """Table rows of ``items`` with each block (the readings of one run) collapsed to one
    row; returns the rows and the number of collapsed blocks."""
    rows: list[list[Any]] = []
    blocks: dict[str, list[Mapping[str, Any]]] = {}
    order: list[tuple[str, Any]] = []
    for it in items:
        b = it.get("block")
        if b:
            if b not in blocks:
                blocks[b] = []
                order.append(("block", b))
            blocks[b].append(it)
        else:
            order.append(("item", it))
    for kind, obj in order:
        if kind == "item":
            it = obj
            rows.append(
                [
                    str(it.get("name", "")),
                    _estimate(it.get("value"), it.get("u")),
                    fmt.fmt_sig(it.get("u"), 3, trim=True),
                    fmt.unit_text(it.get("unit"), dimensionless="1"),
                    _distribution(it),
                    fmt.fmt_dof(it.get("dof")),
                    str(it.get("type", "")),
                    str(it.get("group", "")),
                    str(it.get("source", "")),
                ]
            )
            continue
        group = blocks[obj]
        us = [fmt.as_float(g.get("u")) for g in group]
        lo, hi = min(us), max(us)
        u_text = fmt.fmt_sig(lo, 2, trim=True)
        if fmt.fmt_sig(hi, 2, trim=True) != u_text:
            u_text += f" – {fmt.fmt_sig(hi, 2, trim=True)}"
        vals = [fmt.as_float(g.get("value")) for g in group]
        if min(vals) != max(vals):
            lo_v, hi_v = fmt.fmt_sig(min(vals), 3, trim=True), fmt.fmt_sig(max(vals), 3, trim=True)
            est = f"{lo_v} to {hi_v}"
        else:
            est = f"each {fmt.fmt_sig(vals[0], 3, trim=True)}"
        rows.append(
            [
                pdf.Markup(f"{pdf.esc(obj)} <i>(block of {len(group)})</i>"),
                est,
                u_text,
                _joined([fmt.unit_text(g.get("unit"), dimensionless="1") for g in group]),
                _joined([_distribution(g) for g in group]),
                _joined([fmt.fmt_dof(g.get("dof")) for g in group]),
                _joined([g.get("type") for g in group]),
                _joined([g.get("group") for g in group]),
                _joined([g.get("source") for g in group]),
            ]
        )
    return rows, len(blocks)


def build_inputs(ctx: ReportContext) -> list:
    s = pdf.styles()
    chains = ctx.doc.get("inputs", {})
    if not chains:
        return []
    out: list = [
        pdf.para(
            "Every quantity the measurement model takes as input, with its standard uncertainty"
            " u, the distribution it is drawn from in the Monte Carlo method, its degrees of"
            " freedom ν, its type of evaluation (A: from repeated observations, B: by other"
            " means) and its budget group.",
        )
    ]
    for cname, items in chains.items():
        rows, n_blocks = input_rows(items)
        title = f"Inputs of the {cname} chain ({len(items)} input quantities)"
        if len(chains) > 1:
            out.append(sub(ctx, title))
        else:
            out.append(pdf.para(title, s.h3))
        # the note goes above the table, as the other tables' captions do: below a table
        # that fills its pages it was left alone on a page of its own
        if n_blocks:
            out.append(
                pdf.para(
                    f"The {n_blocks} blocks (the readings of one run, and their timing jitter)"
                    " are collapsed to one row each, with the count and the range of u; every"
                    f" reading with its own estimate and u is listed in results.json under"
                    f" inputs.{cname}.",
                    s.caption,
                )
            )
        out.append(pdf.data_table(HEADER, rows, widths=WIDTHS, align=ALIGN))
    return out


register_section(Section("inputs", "Input quantities", 20, build_inputs, new_page=True))
