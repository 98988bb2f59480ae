"""The summary page: the study, the uncertainty statements, what limits them, warnings."""

from __future__ import annotations

from typing import Any

from reportlab.platypus import KeepTogether, Spacer, Table, TableStyle

from .. import fmt, pdf
from ..registry import ReportContext, Section, register_section

__all__ = ["build_summary"]

INVENTED_NOTICE = (
    "INVENTED DATA. This study is made up: its group, names and numbers describe no real"
    " laboratory, person or measurement. It shows what the analysis does; do not quote its"
    " results as measurements."
)


def _facts(ctx: ReportContext) -> Table:
    s = pdf.styles()
    st = ctx.doc.get("study", {})
    settings = ctx.doc.get("settings", {})
    rows: list[tuple[str, str]] = [
        ("Study", str(st.get("title", ""))),
        ("Operator", str(st.get("operator", ""))),
        ("Date", str(st.get("date", ""))),
    ]
    if st.get("temperature_K") is not None:
        t = f"{fmt.fmt_sig(st['temperature_K'], 5, trim=True)} K"
        if st.get("u_temperature_K") is not None:
            t += f", standard uncertainty {fmt.fmt_sig(st['u_temperature_K'], 2, trim=True)} K"
        rows.append(("Stated temperature", t))
    if st.get("reference_temperature_K") is not None:
        rows.append(
            (
                "Reference temperature",
                f"{fmt.fmt_sig(st['reference_temperature_K'], 5, trim=True)} K",
            )
        )
    an = [f"coverage probability {100 * fmt.as_float(settings.get('coverage', 0.95)):g} %"]
    if settings.get("seed") is not None:
        an.append(f"seed {settings['seed']}")
    if settings.get("montecarlo") is False:
        an.append("Monte Carlo not run")
    elif settings.get("draws"):
        an.append(f"Monte Carlo with {fmt.fmt_count(settings['draws'])} draws (fixed)")
    else:
        an.append("Monte Carlo by the adaptive procedure of JCGM 101")
    rows.append(("Analysis", ", ".join(an)))
    data = [[pdf.para(k, s.cell_head), pdf.para(v, s.cell)] for k, v in rows]
    t = Table(data, colWidths=[0.24 * pdf.FRAME_WIDTH, 0.76 * pdf.FRAME_WIDTH], hAlign="LEFT")
    t.setStyle(
        TableStyle(
            [
                ("LINEBELOW", (0, 0), (-1, -2), 0.3, pdf.RULE),
                ("VALIGN", (0, 0), (-1, -1), "TOP"),
                ("LEFTPADDING", (0, 0), (-1, -1), 2),
                ("TOPPADDING", (0, 0), (-1, -1), 2),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 2),
            ]
        )
    )
    return t


def _top_groups(rec: dict[str, Any], n: int = 3) -> str:
    groups = [g for g in rec.get("budget_by_group", []) if fmt.as_float(g.get("share")) > 0][:n]
    return ", ".join(f"{g['group']} {fmt.fmt_percent(g['share'])}" for g in groups)


def _quantity_block(ctx: ReportContext, name: str) -> list:
    s = pdf.styles()
    rec = ctx.quantity(name)
    st = fmt.statement(ctx.doc, name)
    lines = fmt.method_lines(ctx.doc, name)
    label = st.label.label
    head = pdf.Markup(f"{pdf.esc(label[:1].upper() + label[1:])} ({st.label.symbol_markup})")
    out: list = [pdf.para(head, s.h3)]
    out.append(pdf.para(pdf.Markup(s.safe(st.markup)), s.statement))
    for key in ("linear", "montecarlo", "validation", "bayes"):
        if key in lines:
            out.append(pdf.bullet(lines[key], s.bullet_small))
    if "montecarlo" not in rec:
        out.append(pdf.bullet("Monte Carlo: not run for this analysis.", s.bullet_small))
    top = _top_groups(rec)
    if top:
        out.append(pdf.bullet(f"Largest contributors to u²: {top}.", s.bullet_small))
    plan = (ctx.plan or {}).get("quantities", {}).get(name)
    if plan and plan.get("verdict"):
        out.append(
            pdf.bullet(
                pdf.Markup(f"<b>Next improvement:</b> {pdf.esc(plan['verdict'])}"),
                s.bullet_small,
            )
        )
    out.append(Spacer(1, 3))
    return [KeepTogether(out)]


def build_summary(ctx: ReportContext) -> list:
    s = pdf.styles()
    st = ctx.doc.get("study", {})
    out: list = [
        pdf.para(str(st.get("title") or "Uncertainty report"), s.title),
        pdf.para(
            f"Uncertainty report · {st.get('operator', '')} · {st.get('date', '')}", s.subtitle
        ),
        Spacer(1, 4),
    ]
    if st.get("invented"):
        out += [pdf.banner(INVENTED_NOTICE), Spacer(1, 6)]
    out += [_facts(ctx), Spacer(1, 6)]
    out.append(pdf.heading("Summary", 1, number=str(ctx.numbers.section)))
    headline = fmt.headline_quantities(ctx.doc)
    if headline:
        out.append(
            pdf.para(
                "Each statement gives the estimate and its expanded uncertainty U from the"
                " linear propagation (GUM); the coverage factor is named in words so that it is"
                " not mistaken for a rate constant. The other methods' intervals follow on the"
                " same scale.",
                s.small,
            )
        )
    for _chain, name in headline:
        out += _quantity_block(ctx, name)
    warns = [w for w in ctx.doc.get("warnings", []) if w.get("level") == "warning"]
    if warns:
        items = [pdf.para("Warnings that change how a number should be read", s.h3)]
        for w in warns:
            run = f" [run {pdf.esc(w['run'])}]" if w.get("run") else ""
            check, msg = pdf.esc(w.get("check", "")), pdf.esc(w.get("message", ""))
            items.append(pdf.bullet(pdf.Markup(f"<b>{check}</b>{run}: {msg}")))
        out.append(KeepTogether(items))
    else:
        out.append(
            pdf.para(
                "No check raised a warning; the notes on assumptions are in the section"
                " on assumptions and their checks.",
                s.small,
            )
        )
    out.append(
        pdf.para(
            "results.json holds every number this report prints; budget.csv and fits.csv hold"
            " the budgets and every reading for spreadsheets.",
            s.small,
        )
    )
    return out


register_section(Section("summary", "Summary", 10, build_summary, heading=False))
