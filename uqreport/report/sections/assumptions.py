"""What the analysis assumes and what the checks found, and the safety cautions.

Each chain contributes its rows of assumptions through :func:`register_assumption_checks`
(the batch chain's are here); findings of the checks that no row claims are listed after
the table, so that nothing in ``doc["warnings"]`` is left out.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

from .. import fmt, pdf
from ..registry import ReportContext, Section, register_section

__all__ = ["AssumptionRow", "build_assumptions", "build_safety", "register_assumption_checks"]

#: (assumption, what was checked (text or Markup), the checks in doc["warnings"] it reports)
AssumptionRow = tuple[str, str, tuple[str, ...]]

_CHECKS: dict[str, Callable[[ReportContext], list[AssumptionRow]]] = {}


def register_assumption_checks(
    chain: str, fn: Callable[[ReportContext], list[AssumptionRow]]
) -> None:
    """Let ``chain`` add its rows to the assumptions table (called at import time)."""
    _CHECKS[chain] = fn


def _batch_rows(ctx: ReportContext) -> list[AssumptionRow]:
    ch = ctx.doc["chains"]["batch"]
    fits = ch.get("fits") or []
    rows: list[AssumptionRow] = []
    ratios = [(fmt.as_float(f["excess_ratio"]), f["run"]) for f in fits if f.get("excess_ratio")]
    if ratios:
        lo, run = min(ratios)
        what = f"excess ratio [OH⁻]/[dye]₀ of each run: lowest {fmt.fmt_sig(lo, 3)} (run {run})"
    else:
        what = "excess ratio: not known (no initial dye concentration given)"
    rows.append(
        ("Pseudo-first-order: the hydroxide stays practically constant", what, ("excess ratio",))
    )
    reasons: dict[str, int] = {}
    for f in fits:
        for ex in f.get("excluded", []):
            reasons[str(ex.get("reason", ""))] = reasons.get(str(ex.get("reason", "")), 0) + 1
    n_read = sum(int(f.get("readings", 0)) for f in fits)
    if reasons:
        what = f"{sum(reasons.values())} of {n_read} readings left out: " + "; ".join(
            f"{n} {r}" for r, n in reasons.items()
        )
    else:
        what = f"all {n_read} readings inside the linear range and above the noise floor"
    rows.append(
        ("Beer-Lambert: absorbance proportional to the dye concentration", what, ("linear range",))
    )
    if fits:
        p = min((fmt.as_float(f.get("runs_test_p")), f["run"]) for f in fits)
        r1 = max((abs(fmt.as_float(f.get("lag1_autocorrelation"))), f["run"]) for f in fits)
        dr = max((abs(fmt.as_float(f.get("end_drift_t"))), f["run"]) for f in fits)
        what = (
            f"runs test of the residual signs: lowest p {fmt.fmt_sig(p[0], 2)} (run {p[1]});"
            f" largest |lag-1 autocorrelation| {fmt.fmt_sig(r1[0], 2)} (run {r1[1]}); largest"
            f" |end-drift t| {fmt.fmt_sig(dr[0], 2)} (run {dr[1]})"
        )
        rows.append(
            (
                "A single exponential decay, no drift",
                what,
                ("residual pattern", "end drift", "log-linear cross-check"),
            )
        )
        src = sorted({str(f.get("noise_source")) for f in fits})
        rows.append(
            (
                "The readings' noise is as the noise model states",
                "χ²/ν of each fit; noise taken from: " + ", ".join(src),
                ("noise model",),
            )
        )
    st = ctx.doc.get("study", {})
    tshare = []
    for _c, n in fmt.headline_quantities(ctx.doc):
        for g in ctx.quantity(n).get("budget_by_group", []):
            if g.get("group") == "temperature":
                sym = fmt.quantity_label(n).symbol_markup
                tshare.append(f"{sym} {pdf.esc(fmt.fmt_percent(g.get('share')))}")
    what = "stated temperature"
    if st.get("temperature_K") is not None:
        what += f" {fmt.fmt_sig(st['temperature_K'], 5, trim=True)} K"
        if st.get("u_temperature_K") is not None:
            what += f" with u = {fmt.fmt_sig(st['u_temperature_K'], 2, trim=True)} K"
    what_m = pdf.esc(what)
    if tshare:
        what_m += "; share of u² from temperature: " + ", ".join(tshare)
    rows.append(
        ("Temperature constant and known during each run", pdf.Markup(what_m), ("temperature",))
    )
    rows.append(
        (
            "Ionic strength: its effect on k is small over the range used",
            "not measured; stated as an assumption",
            ("ionic strength",),
        )
    )
    cons = ch.get("consistency") or {}
    if cons:
        what = (
            f"Birge ratio {fmt.fmt_sig(cons.get('birge_ratio'), 2)}, p ="
            f" {fmt.fmt_sig(cons.get('p_value'), 2)} over {cons.get('runs', '–')} runs"
        )
        rows.append(("The runs measure the same k", what, ("run consistency", "order")))
    return rows


register_assumption_checks("batch", _batch_rows)


def _general_rows(ctx: ReportContext) -> list[AssumptionRow]:
    q = ctx.doc.get("quantities", {})
    mc = [r["montecarlo"] for r in q.values() if r.get("montecarlo")]
    if not mc:
        return []
    n_val = sum(1 for m in mc if m.get("validated"))
    what = pdf.esc(f"JCGM 101 validation: {n_val} of {len(mc)} quantities validated")
    # "no finding" beside a count alone read as if the headline results were validated
    failed = [
        fmt.quantity_label(n).symbol_markup
        for _c, n in fmt.headline_quantities(ctx.doc)
        if q.get(n, {}).get("montecarlo") and not q[n]["montecarlo"].get("validated")
    ]
    if failed:
        what += (
            "; not validated among the headline quantities: "
            + ", ".join(failed)
            + " (state their Monte Carlo intervals)"
        )
    return [
        (
            "The model is linear enough for the GUM's linear propagation",
            pdf.Markup(what),
            ("Monte Carlo",),
        )
    ]


def _findings_markup(findings: list[Mapping[str, Any]]) -> Any:
    s = pdf.styles()
    if not findings:
        return pdf.para("no finding", s.cell)
    parts = []
    for w in findings:
        lvl = "<b>warning</b>" if w.get("level") == "warning" else "note"
        run = f" (run {pdf.esc(w['run'])})" if w.get("run") else ""
        parts.append(f"{lvl}{run}: {pdf.esc(w.get('message', ''))}")
    return pdf.para(pdf.Markup("<br/>".join(parts)), s.cell)


def build_assumptions(ctx: ReportContext) -> list:
    s = pdf.styles()
    rows_spec: list[AssumptionRow] = []
    for chain in ctx.doc.get("chains", {}):
        fn = _CHECKS.get(chain)
        if fn is not None:
            rows_spec += fn(ctx)
    rows_spec += _general_rows(ctx)
    warnings = list(ctx.doc.get("warnings", []))
    if not rows_spec and not warnings:
        return []
    claimed: set[int] = set()
    rows, flag = [], []
    for i, (assumption, what, checks) in enumerate(rows_spec):
        found = [w for w in warnings if w.get("check") in checks]
        claimed.update(id(w) for w in found)
        if any(w.get("level") == "warning" for w in found):
            flag.append(i)
        rows.append([assumption, what, _findings_markup(found)])
    out: list = [
        pdf.para(
            "The analysis rests on these assumptions; the middle column says what was checked"
            " in this study and the right one what the checks found (shaded: a warning)."
        )
    ]
    if rows:
        out.append(
            pdf.data_table(
                ["Assumption", "Checked in this study", "Findings"],
                rows,
                widths=[1.8, 2.4, 3.0],
                highlight=flag,
            )
        )
    other = [w for w in warnings if id(w) not in claimed]
    if other:
        out.append(pdf.para("Other findings", s.h3))
        for w in other:
            run = f" (run {pdf.esc(w['run'])})" if w.get("run") else ""
            out.append(
                pdf.bullet(
                    pdf.Markup(
                        f"<b>{pdf.esc(w.get('check', ''))}</b> ({pdf.esc(w.get('level', ''))})"
                        f"{run}: {pdf.esc(w.get('message', ''))}"
                    )
                )
            )
    return out


SAFETY = (
    "Hydroxide solutions are corrosive to eyes and skin. Wear eye protection and gloves when"
    " making up and handling them, and rinse any splash off at once with plenty of water.",
    "The dye is harmful if swallowed and stains skin, clothing and benches; handle it with"
    " gloves and wipe up spills promptly.",
    "Collect the spent dye and hydroxide solutions as waste for proper disposal; they do not"
    " go down the drain unless your local rules allow it.",
    "This report is no safety instruction. The safety data sheet (SDS) of each chemical, local"
    " rules and your institution's practice, and your supervisor's instructions take"
    " precedence over anything written here.",
)


def build_safety(ctx: ReportContext) -> list:
    s = pdf.styles()
    if "batch" not in ctx.doc.get("chains", {}):
        return [pdf.para(SAFETY[-1], s.body)]
    return [pdf.bullet(t) for t in SAFETY]


register_section(
    Section("assumptions", "Assumptions and their checks", 70, build_assumptions, new_page=True)
)
register_section(Section("safety", "Safety", 75, build_safety))
