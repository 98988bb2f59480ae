"""The uncertainty budget of each headline quantity (by input, and by group as a bar chart,
covariance cross terms included), and the improvement plan when the planner ran."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from .. import fmt, pdf
from ..figures import BudgetBar, budget_figure
from ..registry import ReportContext, Section, register_section
from ._util import fig, label_of, sub, unit_header

__all__ = ["build_budget", "build_plan"]

CROSS_GROUP = "correlation"


def _input_units(doc: Mapping[str, Any]) -> dict[str, str]:
    out: dict[str, str] = {}
    for items in doc.get("inputs", {}).values():
        for it in items:
            out[str(it.get("name"))] = fmt.unit_text(it.get("unit"))
    return out


#: Entries below this share are summed into one row (budget.csv lists each of them).
TAIL_SHARE = 1e-3


def _budget_row(e: Mapping[str, Any], units: Mapping[str, str]) -> list[Any]:
    inp = str(e.get("input", ""))
    cross = e.get("group") == CROSS_GROUP
    ux = e.get("u_input")
    if ux is not None:
        u_text = f"{fmt.fmt_sig(ux, 3, trim=True)} {units.get(inp, '')}".strip()
    else:
        u_text = "–" if cross else "block"
    return [
        inp,
        str(e.get("group", "")),
        fmt.fmt_sig(e.get("sensitivity"), 3) if e.get("sensitivity") is not None else "–",
        u_text,
        fmt.fmt_sig(e.get("u_contribution"), 3),
        fmt.fmt_percent(e.get("share")),
    ]


def _budget_table(doc: Mapping[str, Any], name: str, units: Mapping[str, str]) -> Any:
    rec = doc["quantities"][name]
    yunit = fmt.unit_text(rec.get("unit"))
    rows, flag = [], []
    entries = rec.get("budget", [])
    tail = []
    for e in entries:
        cross = e.get("group") == CROSS_GROUP
        if not cross and abs(fmt.as_float(e.get("share"))) < TAIL_SHARE:
            tail.append(e)
            continue
        if cross:
            flag.append(len(rows))
        rows.append(_budget_row(e, units))
    if tail:
        t_share = sum(fmt.as_float(e.get("share")) for e in tail)
        rows.append(
            [
                pdf.Markup(
                    f"<i>{len(tail)} further inputs, each below"
                    f" {pdf.esc(fmt.fmt_percent(TAIL_SHARE))}</i>"
                ),
                "",
                "",
                "",
                "",
                fmt.fmt_percent(t_share),
            ]
        )
    lin = rec["linear"]
    total = sum(fmt.as_float(e.get("share")) for e in entries)
    rows.append(
        [
            pdf.Markup("<b>combined standard uncertainty u(y)</b>"),
            "",
            "",
            "",
            pdf.Markup(f"<b>{pdf.esc(fmt.fmt_sig(lin['u'], 3))}</b>"),
            pdf.Markup(f"<b>{pdf.esc(fmt.fmt_percent(total))}</b>"),
        ]
    )
    yu = f" ({pdf.esc(yunit)})" if yunit else ""
    return pdf.data_table(
        [
            "Input",
            "Group",
            pdf.Markup("Sensitivity coefficient c<sub>i</sub>"),
            pdf.Markup("u(x<sub>i</sub>)"),
            pdf.Markup(f"u<sub>i</sub>(y){yu}"),
            "Share of u²(y)",
        ],
        rows,
        widths=[2.55, 1.3, 1.0, 1.25, 1.15, 0.8],
        align="LLRRRR",
        highlight=flag,
    )


def _bars(rec: Mapping[str, Any]) -> list[BudgetBar]:
    return [
        BudgetBar(str(g.get("group")), fmt.as_float(g.get("share")), g.get("group") == CROSS_GROUP)
        for g in rec.get("budget_by_group", [])
    ]


def build_budget(ctx: ReportContext) -> list:
    names = [n for _c, n in fmt.headline_quantities(ctx.doc)]
    names = [n for n in names if ctx.quantity(n).get("budget")]
    if not names:
        return []
    units = _input_units(ctx.doc)
    out: list = [
        pdf.para(
            pdf.Markup(
                "Each input's contribution to the combined variance of a result, from the"
                " linear propagation: sensitivity coefficient c<sub>i</sub> = ∂y/∂x<sub>i</sub>,"
                " standard uncertainty u(x<sub>i</sub>), contribution u<sub>i</sub>(y) ="
                " |c<sub>i</sub>| u(x<sub>i</sub>) and share u<sub>i</sub>²(y)/u²(y). A block"
                " (the readings of one run) is one entry with no single coefficient. Covariance"
                " cross terms are entries of their own (group 'correlation', shaded) and can be"
                " negative; with them the shares add to 100 %."
            )
        )
    ]
    for n in names:
        lab = label_of(ctx.doc, n)
        rec = ctx.quantity(n)
        out.append(pdf.cond_break(0.35))
        out.append(sub(ctx, pdf.Markup(f"{lab.symbol_markup}: {pdf.esc(lab.label)}")))
        bars = _bars(rec)
        if bars:
            out.append(
                fig(
                    ctx,
                    budget_figure(bars, title=f"{lab.symbol}: shares by group"),
                    pdf.Markup(
                        f"Shares of u²({lab.symbol_markup}) by budget group, largest first"
                        " (cross terms in their own colour)."
                    ),
                )
            )
        out += pdf.titled(
            pdf.Markup(f"Budget of {lab.symbol_markup} by input"),
            _budget_table(ctx.doc, n, units),
            "budget.csv lists every entry, by input and by group.",
        )
    return out


# --- improvement plan ---------------------------------------------------------------------


def _cases_table(doc: Mapping[str, Any], name: str, rec: Mapping[str, Any]) -> Any | None:
    cases = rec.get("cases") or []
    if not cases:
        return None
    unit = fmt.unit_text(doc["quantities"].get(name, {}).get("unit"))
    rows = [
        [
            str(c.get("group", "")),
            str(c.get("case", "")),
            str(c.get("description", "")),
            fmt.fmt_sig(c.get("U_new"), 2),
            fmt.fmt_sig(c.get("reduction"), 2),
            f"{fmt.fmt_fixed(fmt.as_float(c.get('reduction_percent')), 1)} %",
            str(c.get("method", "")),
        ]
        for c in cases
    ]
    now = (
        f" (now U = {fmt.fmt_sig(rec['U'], 2)}{' ' + unit if unit else ''})"
        if rec.get("U") is not None
        else ""
    )
    return pdf.data_table(
        [
            "Group",
            "Case",
            "What changes",
            unit_header("New U", unit),
            "U less by",
            "Reduction",
            "Method",
        ],
        rows,
        widths=[1.15, 0.95, 2.55, 0.95, 0.75, 0.8, 0.85],
        align="LLLRRRL",
    ), now


def _shares_check(doc: Mapping[str, Any], plan: Mapping[str, Any]) -> list:
    sc = plan.get("shares_check") or {}
    out: list = []
    first = True
    for name, entries in sc.items():
        if not entries:
            continue
        lab = label_of(doc, name)
        rows, flag = [], []
        for i, e in enumerate(entries):
            if e.get("flagged"):
                flag.append(i)
            rows.append(
                [
                    str(e.get("group", "")),
                    fmt.fmt_percent(e.get("linear_share")),
                    fmt.fmt_percent(e.get("only_share")),
                    fmt.fmt_percent(e.get("frozen_share")),
                    "yes" if e.get("flagged") else "no",
                ]
            )
        out += pdf.titled(
            pdf.Markup(f"Monte Carlo check of the shares of {lab.symbol_markup}"),
            pdf.data_table(
                [
                    "Group",
                    "Linear share",
                    "Only this group varied",
                    "This group frozen",
                    "Disagrees",
                ],
                rows,
                widths=[2.0, 1.0, 1.3, 1.3, 0.8],
                align="LRRRL",
                highlight=flag,
            ),
            (
                "Only this group varied: the Monte Carlo variance with this group alone drawn,"
                " as a share of the full variance; this group frozen: the share of the variance"
                " that goes when this group is held at its estimate. Shaded: the linear share"
                " is not borne out (the model is nonlinear there)."
            )
            if first
            else None,
        )
        first = False
    return out


def _schedule(plan: Mapping[str, Any]) -> list:
    sched = plan.get("schedule") or []
    if not sched:
        return []
    halves = all("current_half_lives" in r and "optimal_half_lives" in r for r in sched)
    e = fmt.column_exponent(
        [r.get("u_current") for r in sched] + [r.get("u_optimal") for r in sched]
    )

    def u(x: Any) -> str:
        return fmt.fmt_sig(fmt.as_float(x) / 10.0**e, 2)

    def span(r: Mapping[str, Any], which: str) -> str:
        t = fmt.fmt_sig(r.get(f"{which}_span_s"), 3, trim=True)
        if halves:
            t += f" ({fmt.fmt_sig(r.get(f'{which}_half_lives'), 2)})"
        return t

    rows = [
        [
            str(r.get("run", "")),
            fmt.fmt_count(r["readings"]) if r.get("readings") is not None else "–",
            span(r, "current"),
            fmt.fmt_sig(r.get("current_spacing_s"), 3, trim=True),
            u(r.get("u_current")),
            span(r, "optimal"),
            fmt.fmt_sig(r.get("optimal_spacing_s"), 3, trim=True),
            u(r.get("u_optimal")),
            f"{fmt.fmt_fixed(fmt.as_float(r.get('gain_percent')), 1)} %",
        ]
        for r in sched
    ]
    span_h = " (half-lives)" if halves else ""
    return pdf.titled(
        "Sampling schedule of the batch runs",
        pdf.data_table(
            [
                "Run",
                "Readings",
                f"Span now, s{span_h}",
                "Spacing now (s)",
                unit_header("u(k′) now", "s⁻¹", e),
                f"Best span, s{span_h}",
                "Best spacing (s)",
                unit_header("u(k′) best", "s⁻¹", e),
                "Gain",
            ],
            rows,
            widths=[0.6, 0.75, 1.05, 0.85, 0.95, 1.05, 0.85, 0.95, 0.65],
            align="LRRRRRRRR",
        ),
        "The same number of readings spread over the span that minimises u(k′) for the fitted"
        " model (information-based design), beside the schedule used; the gain is the"
        " reduction of u(k′).",
    )


def build_plan(ctx: ReportContext) -> list:
    s = pdf.styles()
    plan = ctx.plan
    if not plan:
        return []
    out: list = [
        pdf.para(
            "What improving one budget group would buy: for each case the new expanded"
            " uncertainty, ranked by gain. Where more data is the improvement, the study was"
            " simulated with the extra data and re-analysed."
        )
    ]
    first = True
    for name, rec in (plan.get("quantities") or {}).items():
        lab = label_of(ctx.doc, name)
        out.append(sub(ctx, pdf.Markup(f"{lab.symbol_markup}: {pdf.esc(lab.label)}")))
        if rec.get("verdict"):
            verdict = pdf.para(str(rec["verdict"]), s.statement)
            verdict.keepWithNext = 1  # with the cases table that backs it
            out.append(verdict)
        cases = _cases_table(ctx.doc, name, rec)
        if cases is not None:
            t, now = cases
            out += pdf.titled(
                pdf.Markup(f"What-if cases for {lab.symbol_markup}{pdf.esc(now)}"),
                t,
                (
                    "Method: 're-weighted', the linear budget with the changed uncertainty;"
                    " 're-analysed', the study analysed again with the change; 'simulated', the"
                    " study written again with the extra data and analysed."
                )
                if first
                else None,
            )
            first = False
    checks = _shares_check(ctx.doc, plan)
    sched = _schedule(plan)
    if checks:
        out += [sub(ctx, "Shares checked by Monte Carlo"), *checks]
    if sched:
        out += [sub(ctx, "Sampling-schedule advice"), *sched]
    return out


register_section(Section("budget", "Uncertainty budget", 60, build_budget, new_page=True))
register_section(Section("plan", "Improvement plan", 65, build_plan, new_page=True))
