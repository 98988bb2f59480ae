"""Comparison of the methods: linear (GUM), Monte Carlo (JCGM 101) and, when run, Bayesian
intervals of the headline quantities, and the JCGM 101 validation of every quantity."""

from __future__ import annotations

from typing import Any

from .. import fmt, pdf
from ..figures import Interval, IntervalPanel, interval_figure
from ..registry import ReportContext, Section, register_section
from ._util import fig, label_of

__all__ = ["build_methods"]


def _iv(sc: fmt.Scale, low: Any, high: Any) -> str:
    return f"[{sc.fmt(fmt.as_float(low))}, {sc.fmt(fmt.as_float(high))}]"


#: The intervals of each method beside the linear one: (record, its centre, (label, low key,
#: high key) of each interval), as results.json names them.
_INTERVAL_KINDS = (
    (
        "montecarlo",
        "value",
        (("MC symmetric", "low", "high"), ("MC shortest", "shortest_low", "shortest_high")),
    ),
    (
        "bayes",
        "median",
        (("Bayes equal tails", "low", "high"), ("Bayes highest density", "hdi_low", "hdi_high")),
    ),
)


def _intervals_table(ctx: ReportContext, names: list[str]) -> Any:
    q = ctx.doc["quantities"]
    has_mc = any("montecarlo" in q[n] for n in names)
    has_by = any("bayes" in q[n] for n in names)
    # one linear column (the interval y - U to y + U; y and U are in the summary): with a
    # second one, four-digit intervals such as [0.1743, 0.1864] wrapped onto two lines
    header = ["Quantity", "Unit", "Linear, y ± U"]
    widths = [0.9, 1.1, 1.45]
    if has_mc:
        header += ["Monte Carlo, symmetric", "Monte Carlo, shortest"]
        widths += [1.45, 1.45]
    if has_by:
        header += ["Bayesian, equal tails", "Bayesian, highest density"]
        widths += [1.45, 1.45]
    rows = []
    for n in names:
        st = fmt.statement(ctx.doc, n)
        sc = st.scale
        lin = q[n]["linear"]
        v, U = fmt.as_float(lin["value"]), fmt.as_float(lin["U"])
        unit = " ".join(x for x in (sc.suffix.strip(), st.unit) if x) or "1"
        row: list[Any] = [
            pdf.Markup(st.label.symbol_markup),
            unit,
            _iv(sc, v - U, v + U),
        ]
        for method, _centre, kinds in _INTERVAL_KINDS:
            if {"montecarlo": has_mc, "bayes": has_by}[method]:
                rec = q[n].get(method)
                row += [_iv(sc, rec[lo], rec[hi]) if rec else None for _l, lo, hi in kinds]
        rows.append(row)
    return pdf.data_table(header, rows, widths=widths, align="LL" + "R" * (len(header) - 2))


def _validation_table(ctx: ReportContext) -> Any | None:
    q = ctx.doc["quantities"]
    rows, flag = [], []
    for n, rec in q.items():
        mc = rec.get("montecarlo")
        if not mc:
            continue
        val = mc.get("validation") or {}
        lab = label_of(ctx.doc, n)
        if not val.get("validated", mc.get("validated")):
            flag.append(len(rows))
        rows.append(
            [
                pdf.Markup(lab.symbol_markup + (" <b>*</b>" if rec.get("headline") else "")),
                fmt.unit_text(rec.get("unit"), dimensionless="1"),
                fmt.fmt_sig(rec["linear"]["u"], 3),
                fmt.fmt_sig(mc["u"], 3),
                fmt.fmt_sig(val.get("d_low"), 2),
                fmt.fmt_sig(val.get("d_high"), 2),
                fmt.fmt_sig(val.get("delta"), 2),
                str(val.get("verdict", "")),
            ]
        )
    if not rows:
        return None
    return pdf.data_table(
        ["Quantity", "Unit", "u, linear", "u, Monte Carlo", "d_low", "d_high", "δ", "Verdict"],
        rows,
        widths=[0.85, 0.75, 0.95, 0.95, 0.8, 0.8, 0.8, 2.1],
        align="LLRRRRRL",
        highlight=flag,
    )


def _panels(ctx: ReportContext, names: list[str]) -> list[IntervalPanel]:
    q = ctx.doc["quantities"]
    panels = []
    for n in names:
        st = fmt.statement(ctx.doc, n)
        lin = q[n]["linear"]
        v, U = fmt.as_float(lin["value"]), fmt.as_float(lin["U"])
        ivs = [Interval("linear y ± U", v, v - U, v + U, "linear")]
        for method, centre, kinds in _INTERVAL_KINDS:
            rec = q[n].get(method)
            if rec:
                ivs += [
                    Interval(
                        label,
                        fmt.as_float(rec[centre]),
                        fmt.as_float(rec[lo]),
                        fmt.as_float(rec[hi]),
                        method,
                    )
                    for label, lo, hi in kinds
                ]
        unit = st.unit or "dimensionless"
        panels.append(
            IntervalPanel(
                f"{st.label.symbol}: {st.label.label}", f"{st.label.symbol} ({unit})", tuple(ivs)
            )
        )
    return panels


def build_methods(ctx: ReportContext) -> list:
    names = [n for _c, n in fmt.headline_quantities(ctx.doc)]
    if not names:
        return []
    cov = f"{100 * ctx.coverage:g} %"
    out: list = [
        pdf.para(
            f"The {cov} intervals of the headline quantities by each method, on the scale of"
            " the summary statements: linear y ± U; Monte Carlo probabilistically symmetric"
            " and shortest intervals; Bayesian equal-tailed and highest-density credible"
            " intervals when the posterior was sampled."
        )
    ]
    out += pdf.titled("Intervals of the headline quantities", _intervals_table(ctx, names))
    out.append(
        fig(
            ctx,
            interval_figure(_panels(ctx, names)),
            "Intervals of each headline quantity by method (dot: the estimate, mean or median).",
        )
    )
    vt = _validation_table(ctx)
    if vt is not None:
        out += pdf.titled(
            "Validation of the linear method by Monte Carlo (JCGM 101, section 8)",
            vt,
            "d_low = |y − U − y_low| and d_high = |y + U − y_high| against the numerical"
            " tolerance δ of the Monte Carlo result, all in the quantity's unit; the linear"
            " interval is validated when both are within δ. * marks a headline quantity; shaded"
            " rows are not validated, and for them the Monte Carlo interval is the one to state.",
        )
    return out


register_section(Section("methods", "Comparison of the methods", 40, build_methods, new_page=True))
