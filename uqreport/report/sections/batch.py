"""The batch chain: each run's pseudo-first-order fit, the fitted values and checks, the rate
constants per run, the order in hydroxide and the consistency of the runs."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from reportlab.platypus import Spacer

from .. import fmt, pdf
from ..figures import OrderPoint, fit_figure, order_figure
from ..registry import ReportContext, Section, register_section
from ._util import coverage_z, fig, sub, unit_header

__all__ = ["build_batch"]

CHAIN = "batch"


def _u(cov: Any, i: int) -> float:
    try:
        return math.sqrt(max(float(cov[i][i]), 0.0))
    except (TypeError, IndexError, ValueError):
        return math.nan


def _fitted_pm(value: Any, u: float) -> str:
    """ "0.7664 ± 0.0038", or "0.012 (not fitted)" for a parameter the fit held fixed (a
    measured or zero baseline, A₀ from the concentration): its u from the fit is 0, and
    "0.01200 ± 0.00000" would read as an exact measurement."""
    if u == 0.0:
        return f"{fmt.fmt_sig(value, 3, trim=True)} (not fitted)"
    return fmt.fmt_pm(value, u)


def _fit_tables(ctx: ReportContext, fits: list[Mapping[str, Any]]) -> list:
    e_rate = fmt.column_exponent([f.get("rate") for f in fits])
    rows = []
    for f in fits:
        cov = f.get("covariance") or []
        rows.append(
            [
                str(f["run"]),
                str(f.get("table", "")),
                f"{f.get('used', '')} of {f.get('readings', '')}",
                _fitted_pm(f.get("baseline"), _u(cov, 0)),
                _fitted_pm(f.get("initial"), _u(cov, 1)),
                fmt.fmt_pm(f.get("rate"), _u(cov, 2), exponent=e_rate if e_rate else None),
                f"{fmt.fmt_sig(f.get('chi2'), 3)} / {f.get('dof', '–')}",
            ]
        )
    t1 = pdf.data_table(
        [
            "Run",
            "Table",
            "Readings used",
            "A∞ ± u",
            "A₀ ± u",
            unit_header("k′ ± u", "s⁻¹", e_rate),
            "χ² / ν",
        ],
        rows,
        widths=[0.8, 1.3, 0.9, 1.45, 1.45, 1.8, 0.9],
        align="LLRRRRR",
    )
    rows2 = []
    flag = []
    for i, f in enumerate(fits):
        src = str(f.get("noise_source", ""))
        if src == "residuals":
            src += f" (× {fmt.fmt_sig(f.get('noise_scale'), 3)})"
        rt, r1 = fmt.as_float(f.get("runs_test_p")), fmt.as_float(f.get("lag1_autocorrelation"))
        rows2.append(
            [
                str(f["run"]),
                src,
                fmt.fmt_sig(rt, 2),
                fmt.fmt_sig(r1, 2),
                fmt.fmt_sig(f.get("end_drift_t"), 2),
                fmt.fmt_pm(
                    f.get("log_linear_rate"),
                    f.get("log_linear_u"),
                    exponent=e_rate if e_rate else None,
                ),
                fmt.fmt_sig(f.get("excess_ratio"), 3) if f.get("excess_ratio") else "–",
            ]
        )
        if _run_warned(ctx, str(f["run"])):
            flag.append(i)
    t2 = pdf.data_table(
        [
            "Run",
            "Noise source",
            "Runs test p",
            "Lag-1 autocorr.",
            "End drift t",
            unit_header("k′ log-linear ± u", "s⁻¹", e_rate),
            "Excess ratio [OH⁻]/[dye]₀",
        ],
        rows2,
        widths=[0.8, 1.3, 0.85, 0.9, 0.85, 1.8, 1.2],
        align="LLRRRRR",
        highlight=flag,
    )
    return [
        *pdf.titled(
            "Fitted parameters (u from the fit alone: the readings' noise)",
            t1,
            "A∞ is the baseline reached at long times, A₀ the absorbance at mixing, k′ the"
            " pseudo-first-order rate constant; χ²/ν uses the noise model's u of each reading."
            " 'not fitted': held at the measured final absorbance, at zero, or at the value"
            " from the dye concentration (settings baseline and initial of [batch]); its"
            " uncertainty is carried as an input.",
        ),
        *pdf.titled(
            "Checks of each fit",
            t2,
            "Noise source: 'spec' uses the noise model, 'residuals' scales it to the scatter"
            " about the fit. Runs test: one-sided p of as few sign changes of the residuals as"
            " seen (small p: a pattern). Lag-1 autocorrelation of the weighted residuals. End"
            " drift: t statistic of a line through the residuals of the last third. The"
            " log-linear k′ is the ln(A − A∞) straight-line cross-check. Shaded rows: the run"
            " has a warning (see the summary).",
        ),
    ]


def _run_warned(ctx: ReportContext, run: str) -> bool:
    return any(
        w.get("level") == "warning" and w.get("run") == run for w in ctx.doc.get("warnings", [])
    )


def _fit_figures(ctx: ReportContext, fits: list[Mapping[str, Any]]) -> list:
    s = pdf.styles()
    ch = ctx.result.chains.get(CHAIN) if ctx.result is not None else None
    run_fits = {f.name: f for f in ch.chain.fits} if ch is not None else {}
    cov = ctx.coverage
    z = coverage_z(cov)
    out: list = []
    excluded_rows = []
    for rec in fits:
        run = str(rec["run"])
        for ex in rec.get("excluded", []):
            excluded_rows.append(
                [run, str(rec.get("table", "")), str(ex.get("line")), str(ex.get("reason", ""))]
            )
        rf = run_fits.get(run)
        if rf is None:
            continue
        figure = fit_figure(
            rec,
            times=rf.times,
            absorbance=rf.absorbance,
            used=rf.used,
            reasons=rf.reasons,
            residuals=rf.residuals,
            sigma=rf.sigma,
            time_origin=rf.time_origin,
            z=z,
            coverage=cov,
        )
        n_ex = len(rec.get("excluded", []))
        cap = pdf.Markup(
            f"Run {pdf.esc(run)} ({pdf.esc(rec.get('table', ''))}): readings, fitted curve"
            f" f(t) = A∞ + (A₀ − A∞) exp(−k′t) and its {100 * cov:g} % band from the fit"
            " covariance (top); residuals in units of each reading's u, with the band on the"
            " same scale and ±2 lines (bottom)."
            + (f" {n_ex} reading(s) left out, marked by reason." if n_ex else "")
        )
        out.append(fig(ctx, figure, cap))
    if excluded_rows:
        out += pdf.titled(
            "Readings left out of the fits",
            pdf.data_table(
                ["Run", "Table", "Line", "Reason"],
                excluded_rows,
                widths=[0.8, 1.3, 0.5, 4.4],
                align="LLRL",
            ),
            "Line numbers are those of the table file; fits.csv lists every reading with its"
            " fitted value and residual.",
        )
    elif fits:
        out.append(pdf.para("Every reading was used in the fits.", s.small))
    return out


def _run_results(ctx: ReportContext, fits: list[Mapping[str, Any]]) -> list:
    q = ctx.doc.get("quantities", {})
    cons = ctx.chain_doc(CHAIN).get("consistency") or {}
    mw, ow = cons.get("mean_weights") or [], cons.get("order_weights") or []
    names = [str(f["run"]) for f in fits]
    cols = [
        ("hydroxide_concentration", "[OH⁻]"),
        ("pseudo_rate_constant", "k′"),
        ("second_order_rate_constant", "k = k′/[OH⁻]"),
    ]
    present = [(b, t) for b, t in cols if any(f"{b}/{r}" in q for r in names)]
    if not present:
        return []
    exps = {
        b: fmt.column_exponent([q[f"{b}/{r}"]["linear"]["value"] for r in names if f"{b}/{r}" in q])
        for b, _ in present
    }
    header = ["Run"]
    for b, t in present:
        unit = next((fmt.unit_text(q[f"{b}/{r}"]["unit"]) for r in names if f"{b}/{r}" in q), "")
        header.append(unit_header(f"{t} ± U", unit, exps[b]))
    header += ["Weight in k", "Weight in b"]
    rows = []
    for i, r in enumerate(names):
        row: list[Any] = [r]
        for b, _ in present:
            rec = q.get(f"{b}/{r}")
            if rec is None:
                row.append(None)
                continue
            lin = rec["linear"]
            row.append(fmt.fmt_pm(lin["value"], lin["U"], exponent=exps[b] or None))
        row.append(fmt.fmt_percent(mw[i]) if i < len(mw) else None)
        row.append(fmt.fmt_percent(ow[i]) if i < len(ow) else None)
        rows.append(row)
    t = pdf.data_table(
        header,
        rows,
        widths=[0.8] + [1.75] * len(present) + [0.9, 0.9],
        align="L" + "R" * (len(present) + 2),
    )
    return pdf.titled(
        "Results per run (all inputs carried; U from the linear method)",
        t,
        "k′ is at the run's temperature; k = k′/[OH⁻] is corrected to the stated temperature"
        " when an activation energy is given. The weights are those of the runs in the"
        " weighted mean k and in the order line (from each run's own uncertainty; shared"
        " inputs are carried by the model, not by the weights).",
    )


def _order(ctx: ReportContext, fits: list[Mapping[str, Any]]) -> list:
    s = pdf.styles()
    q = ctx.doc.get("quantities", {})
    if "hydroxide_order" not in q or "rate_constant_free_order" not in q:
        return []
    pts = []
    for f in fits:
        r = str(f["run"])
        kq, cq = q.get(f"pseudo_rate_constant/{r}"), q.get(f"hydroxide_concentration/{r}")
        if not kq or not cq:
            continue
        k, c = fmt.as_float(kq["linear"]["value"]), fmt.as_float(cq["linear"]["value"])
        if k <= 0 or c <= 0:
            continue
        pts.append(OrderPoint(r, math.log(c), math.log(k), fmt.as_float(kq["linear"]["u"]) / k))
    if len(pts) < 2:
        return []
    b = fmt.as_float(q["hydroxide_order"]["linear"]["value"])
    kb = fmt.as_float(q["rate_constant_free_order"]["linear"]["value"])
    k1 = q.get("second_order_rate_constant", {}).get("linear", {}).get("value")
    st_b = fmt.statement(ctx.doc, "hydroxide_order")
    figure = order_figure(
        pts,
        order=b,
        ln_kb=math.log(kb),
        ln_k_order1=math.log(fmt.as_float(k1)) if k1 else None,
        order_label=f"fitted line, b = {st_b.value}",
    )
    out: list = [sub(ctx, "Order in hydroxide")]
    out.append(
        pdf.para(
            pdf.Markup(
                "The order <i>b</i> comes from the weighted straight line ln k′ = ln"
                " k<sub>b</sub> + <i>b</i> ln [OH⁻] through the runs; an order of one supports"
                " the pseudo-first-order treatment."
            ),
        )
    )
    for name in ("hydroxide_order", "rate_constant_free_order"):
        out.append(pdf.para(pdf.Markup(s.safe(fmt.statement(ctx.doc, name).markup)), s.statement))
    out.append(
        fig(
            ctx,
            figure,
            "ln k′ against ln [OH⁻] for each run (bars: ±2 standard uncertainties of ln k′,"
            " all inputs carried), the fitted line and the line of order 1 through the"
            " weighted-mean k.",
        )
    )
    return out


def _consistency(ctx: ReportContext) -> list:
    s = pdf.styles()
    c = ctx.chain_doc(CHAIN).get("consistency") or {}
    if not c:
        return []
    rows = [
        ["Runs", fmt.fmt_count(c["runs"]) if c.get("runs") is not None else "–"],
        ["χ² of the runs' k about their weighted mean", fmt.fmt_sig(c.get("chi2"), 3)],
        ["Degrees of freedom", str(c.get("dof", "–"))],
        ["Birge ratio √(χ²/ν)", fmt.fmt_sig(c.get("birge_ratio"), 3)],
        ["p-value", fmt.fmt_sig(c.get("p_value"), 2)],
        ["Run-to-run scatter carried (relative)", fmt.fmt_percent(c.get("tau_relative", 0), 2)],
    ]
    t = pdf.data_table(["Statistic", "Value"], rows, widths=[4.0, 1.4], align="LR")
    tau = fmt.as_float(c.get("tau_relative", 0))
    if tau > 0:
        verdict = (
            "The runs disagree beyond their own uncertainties; the run-to-run scatter above is"
            " carried as an input of its own (random effects), which widens U."
        )
    else:
        verdict = "The runs agree within their own uncertainties; no run-to-run scatter is added."
    return [sub(ctx, "Consistency of the runs"), t, Spacer(1, 4), pdf.para(verdict, s.body)]


def build_batch(ctx: ReportContext) -> list:
    ch = ctx.doc.get("chains", {}).get(CHAIN)
    if not ch or not ch.get("fits"):
        return []
    fits = list(ch["fits"])
    out: list = [
        pdf.para(
            pdf.Markup(
                f"{len(fits)} batch run(s), each fitted with the first-order decay f(t) = A∞ +"
                " (A₀ − A∞) exp(−k′t) by weighted least squares, with t the time since mixing"
                " (recorded time plus the mean timing lag). The rate constant k follows from"
                " k′ = k [OH⁻]<super>b</super> over the runs."
            ),
        )
    ]
    out += [sub(ctx, "Fitted values and checks"), *_fit_tables(ctx, fits)]
    figs = _fit_figures(ctx, fits)
    if figs:
        out += [pdf.cond_break(0.45), sub(ctx, "Readings, fitted curves and residuals"), *figs]
    rr = _run_results(ctx, fits)
    if rr:
        out += [sub(ctx, "Rate constants per run"), *rr]
    out += _order(ctx, fits)
    out += _consistency(ctx)
    return out


register_section(
    Section(
        "chain:batch",
        "Batch kinetics: pseudo-first-order runs",
        30,
        build_batch,
        chain=CHAIN,
        new_page=True,
    )
)
