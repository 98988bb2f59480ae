"""The Bayesian (MCMC) results, when the analysis ran them: posterior summaries, sampler
settings and diagnostics, the corner plot of the draws and the posterior predictive check."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from reportlab.platypus import Spacer

from .. import fmt, pdf
from ..figures import MAX_CORNER_PARAMETERS, corner_figure
from ..registry import ReportContext, Section, register_section
from ._util import fig, label_of, sub

__all__ = ["build_bayes"]


def _settings_text(b: Mapping[str, Any]) -> str:
    st = b.get("settings") or {}
    parts = []
    for key, label in (
        ("walkers", "walkers"),
        ("steps", "steps"),
        ("discard", "discarded as burn-in"),
        ("thin", "thinning"),
        ("chains", "independent ensembles"),
    ):
        if st.get(key) is not None:
            parts.append(f"{label} {fmt.fmt_count(st[key])}")
    if st.get("likelihood"):
        parts.append(f"likelihood {st['likelihood']}")
    if st.get("seed") is not None:
        parts.append(f"seed {st['seed']}")
    if b.get("acceptance_fraction") is not None:
        parts.append(f"mean acceptance fraction {fmt.fmt_sig(b['acceptance_fraction'], 2)}")
    return "Sampler (affine-invariant ensemble, emcee): " + ", ".join(parts) + "."


def _posterior_records(ctx: ReportContext, chain: str) -> dict[str, Any]:
    """The quantities with a posterior, as results.json records ({unit, bayes}): the model's
    outputs, then those only the posterior has (the hierarchy's population k and spread) and
    the noise scales of the runs."""
    recs = {
        n: rec
        for n, rec in ctx.doc.get("quantities", {}).items()
        if rec.get("bayes") and rec.get("chain", chain) == chain
    }
    b = (ctx.doc.get("chains", {}).get(chain) or {}).get("bayes") or {}
    extra = dict(b.get("quantities") or {})
    extra.update(
        {n: r for n, r in (b.get("parameters") or {}).items() if n.startswith("noise_scale/")}
    )
    for n, r in extra.items():
        recs.setdefault(n, {"unit": r.get("unit"), "chain": chain, "bayes": r})
    return recs


def _posterior_table(ctx: ReportContext, chain: str) -> Any | None:
    q = _posterior_records(ctx, chain)
    # one power of ten per kind of quantity (k' of every run, [OH] of every run), as in the
    # batch tables: row by row, k'(r1) came out in 10⁻³ s⁻¹ and k'(r3) in s⁻¹
    family: dict[str, list[Any]] = {}
    for n, rec in q.items():
        if rec.get("bayes"):
            family.setdefault(n.split("/")[0], []).append(rec["bayes"].get("median"))
    exponents = {f: fmt.column_exponent(v) for f, v in family.items()}
    rows, flag = [], []
    for n, rec in q.items():
        by = rec.get("bayes")
        if not by or rec.get("chain", chain) != chain:
            continue
        e = exponents.get(n.split("/")[0]) or None
        sc = fmt.scale_for(by.get("median"), by.get("sd"), exponent=e)
        lab = label_of(ctx.doc, n)
        unit = " ".join(x for x in (sc.suffix.strip(), fmt.unit_text(rec.get("unit"))) if x)

        def iv(lo: Any, hi: Any, sc: fmt.Scale = sc) -> str:
            return f"[{sc.fmt(fmt.as_float(lo))}, {sc.fmt(fmt.as_float(hi))}]"

        if not by.get("converged", True):
            flag.append(len(rows))
        rows.append(
            [
                pdf.Markup(lab.symbol_markup),
                unit or "1",
                sc.fmt(fmt.as_float(by["median"])),
                sc.fmt(fmt.as_float(by["sd"])),
                iv(by["low"], by["high"]),
                iv(by.get("low_68"), by.get("high_68")),
                iv(by["hdi_low"], by["hdi_high"]),
                fmt.fmt_sig(by.get("ess"), 3),
                fmt.fmt_sig(by.get("tau"), 3),
                "yes" if by.get("converged") else "NO",
            ]
        )
    if not rows:
        return None
    cov = next((r.get("bayes", {}).get("coverage") for r in q.values() if r.get("bayes")), 0.95)
    pc = f"{100 * fmt.as_float(cov):g} %"
    return pdf.data_table(
        [
            "Quantity",
            "Unit",
            "Median",
            "SD",
            f"{pc} equal tails",
            "68 % equal tails",
            f"{pc} HDI",
            "ESS",
            "τ",
            "Conv.",
        ],
        rows,
        widths=[0.75, 1.1, 0.75, 0.8, 1.35, 1.35, 1.35, 0.5, 0.45, 0.55],
        align="LLRRRRRRRL",
        highlight=flag,
    )


def _diagnostics(b: Mapping[str, Any]) -> Any | None:
    diag = b.get("diagnostics") or []
    if not diag:
        return None
    rows, flag = [], []
    for i, d in enumerate(diag):
        if not d.get("converged", True):
            flag.append(i)
        rows.append(
            [
                str(d.get("parameter", "")),
                fmt.fmt_sig(d.get("tau"), 3),
                fmt.fmt_sig(d.get("ess"), 3),
                fmt.fmt_sig(d.get("acceptance"), 2),
                fmt.fmt_sig(d.get("rhat"), 4),
                "yes" if d.get("converged") else "NO",
            ]
        )
    return pdf.data_table(
        ["Parameter", "τ (steps)", "ESS", "Acceptance", "R-hat", "Converged"],
        rows,
        widths=[2.4, 0.9, 0.9, 0.9, 0.9, 0.9],
        align="LRRRRL",
        highlight=flag,
    )


def _correlation(b: Mapping[str, Any]) -> Any | None:
    c = b.get("correlation") or {}
    names, m = c.get("parameters") or [], c.get("matrix") or []
    if not names or len(names) > 8 or len(m) != len(names):
        return None
    rows = []
    for i, n in enumerate(names):
        rows.append(
            [str(n)]
            + [fmt.fmt_fixed(fmt.as_float(m[i][j]), 2) if j <= i else "" for j in range(len(names))]
        )
    return pdf.data_table(
        ["", *[str(n) for n in names]],
        rows,
        widths=[1.6] + [1.0] * len(names),
        align="L" + "R" * len(names),
    )


def _predictive(b: Mapping[str, Any]) -> list:
    s = pdf.styles()
    pc = b.get("predictive_check") or {}
    if not pc:
        return []
    share, exp = pc.get("share_outside"), pc.get("expected", 0.05)
    fitted = pc.get("expected_fitted")
    band = f"{100 * (1 - fmt.as_float(exp)):g} %"
    when = "expected when the model and the noise level describe the data"
    if fitted is None:
        expect = f"about {fmt.fmt_percent(exp)} {when}"
    else:
        expect = (
            f"about {fmt.fmt_percent(fitted)} {when}: fewer than {fmt.fmt_percent(exp, 0)},"
            " because each reading pulled the fit towards itself"
        )
    n_out, n_all = pc.get("outside"), pc.get("readings")
    count = f"{n_out} of {n_all} readings, " if n_out is not None and n_all else ""
    out: list = [
        pdf.para(
            f"Readings outside their {band} posterior predictive band: {count}"
            f"{fmt.fmt_percent(share)} ({expect})."
        )
    ]
    outl = pc.get("outliers") or []
    if outl:
        rows = [
            [
                str(o.get("run", "")),
                str(o.get("table", "")),
                str(o.get("line", "")),
                fmt.fmt_sig(o.get("time"), 4, trim=True),
                fmt.fmt_sig(o.get("absorbance"), 4),
                fmt.fmt_sig(o.get("z"), 3),
            ]
            for o in outl
        ]
        out += pdf.titled(
            "Readings outside the predictive band",
            pdf.data_table(
                ["Run", "Table", "Line", "Time (s)", "Absorbance", "z"],
                rows,
                widths=[1.0, 1.6, 0.6, 0.9, 1.0, 0.8],
                align="LLRRRR",
            ),
            "z: the reading's distance from the predictive median in predictive standard"
            " deviations. Check these readings in the laboratory record before excluding any.",
        )
    else:
        out.append(pdf.para("No reading lies far outside its predictive band.", s.small))
    return out


def _corner(ctx: ReportContext, chain: str) -> list:
    draws = (ctx.posterior_draws or {}).get(chain)
    if not draws:
        return []
    names = [n for n, v in draws.items() if getattr(v, "size", 0) > 1]
    if not names:
        return []
    shown = names[:MAX_CORNER_PARAMETERS]
    note = (
        f" The first {len(shown)} of {len(names)} parameters are shown."
        if len(names) > len(shown)
        else ""
    )
    return [
        fig(
            ctx,
            corner_figure(draws, shown),
            "Posterior draws: marginal histograms with the median and the 2.5 % and 97.5 %"
            " quantiles (diagonal), and joint densities with the contours enclosing about"
            f" 39 % and 86 % of the draws (below).{note}",
        )
    ]


def build_bayes(ctx: ReportContext) -> list:
    s = pdf.styles()
    out: list = []
    for chain in ctx.doc.get("chains", {}):
        b = ctx.bayes(chain)
        if not b:
            continue
        out.append(sub(ctx, f"Posterior of the {chain} chain"))
        if not b.get("converged", True):
            out += [
                pdf.banner(
                    "The sampler did NOT converge by its rule (a chain many integrated"
                    " autocorrelation times long, with a settled estimate): the Bayesian numbers"
                    " below are shown for diagnosis only."
                ),
                Spacer(1, 4),
            ]
        out.append(pdf.para(_settings_text(b), s.body))
        pt = _posterior_table(ctx, chain)
        if pt is not None:
            out += pdf.titled(
                "Posterior summaries",
                pt,
                "Median and standard deviation of the posterior draws, equal-tailed and"
                " highest-density (HDI) credible intervals, effective sample size (ESS) and"
                " integrated autocorrelation time τ. s: the readings' scatter over the noise"
                " model (1: as the instrument specification states).",
            )
        dt = _diagnostics(b)
        if dt is not None:
            out += pdf.titled(
                "Convergence diagnostics per parameter",
                dt,
                "τ: integrated autocorrelation time; ESS: effective sample size; R-hat: split"
                " potential scale reduction over independent ensembles (near one when they"
                " agree). Shaded rows did not converge.",
            )
        ct = _correlation(b)
        if ct is not None:
            out += pdf.titled("Posterior correlation coefficients", ct)
        pred = _predictive(b)
        if pred:
            out += [pdf.para("Posterior predictive check", s.h3), *pred]
        out += _corner(ctx, chain)
    return out


register_section(Section("bayes", "Bayesian posterior (MCMC)", 50, build_bayes, new_page=True))
