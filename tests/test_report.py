"""The PDF report: its numbers are those of results.json, every section is there, user text
renders literally, long tables split with their header, and the build is deterministic.

Text is read back with pypdf.  The demo study is analysed once for the module (invented
data, a small fixed number of Monte Carlo draws); the Bayesian and planner records are
hand-made in the shapes the report reads, so that these tests do not depend on those
parts of the analysis.
"""

from __future__ import annotations

import copy
import dataclasses
import re
from pathlib import Path

import numpy as np
import pypdf
import pytest
from batch_helpers import demo_study

from uqreport.analysis import Settings, analyze
from uqreport.report import (
    Section,
    build_report,
    fmt,
    register_section,
    registered_sections,
    report_story,
)
from uqreport.report.figures import DPI, curve_band
from uqreport.results import results_dict

BASE_HEADINGS = (
    "Summary",
    "Input quantities",
    "Batch kinetics: pseudo-first-order runs",
    "Comparison of the methods",
    "Uncertainty budget",
    "Assumptions and their checks",
    "Safety",
    "Reproducibility",
)
OPTIONAL_HEADINGS = ("Bayesian posterior (MCMC)", "Improvement plan")

INJECTION = '<b>&"x"'
NON_ASCII = "Lösung µ-Ω 25 °C $x$"


# --- fixtures -----------------------------------------------------------------------------


def _bare(doc: dict) -> dict:
    """``doc`` without the Bayesian and planner records."""
    d = copy.deepcopy(doc)
    d.pop("plan", None)
    for q in d["quantities"].values():
        q.pop("bayes", None)
    for c in d["chains"].values():
        c.pop("bayes", None)
    return d


def _with_bayes_and_plan(doc: dict) -> dict:
    """Hand-made Bayesian and planner records in the documented shapes."""
    d = _bare(doc)
    heads = [q for c in d["chains"].values() for q in c["headline"]]
    for q in heads:
        mc = d["quantities"][q]["montecarlo"]
        d["quantities"][q]["bayes"] = {
            "median": mc["value"],
            "sd": mc["u"],
            "low": mc["low"],
            "high": mc["high"],
            "coverage": 0.95,
            "low_68": mc["value"] - mc["u"],
            "high_68": mc["value"] + mc["u"],
            "hdi_low": mc["shortest_low"],
            "hdi_high": mc["shortest_high"],
            "ess": 3912.0,
            "tau": 41.5,
            "converged": True,
        }
    d["chains"]["batch"]["bayes"] = {
        "settings": {
            "walkers": 32,
            "steps": 6000,
            "discard": 400,
            "thin": 5,
            "chains": 4,
            "likelihood": "gaussian",
            "seed": 11,
        },
        "converged": True,
        "acceptance_fraction": 0.43,
        "diagnostics": [
            {
                "parameter": "rate/r1",
                "tau": 40.2,
                "ess": 4100.0,
                "acceptance": 0.43,
                "rhat": 1.002,
                "converged": True,
            },
            {
                "parameter": "rate/r2",
                "tau": 44.9,
                "ess": 3800.0,
                "acceptance": 0.43,
                "rhat": 1.004,
                "converged": True,
            },
            {
                "parameter": "noise_sd",
                "tau": 95.0,
                "ess": 310.0,
                "acceptance": 0.43,
                "rhat": 1.031,
                "converged": False,
            },
        ],
        "predictive_check": {
            "share_outside": 0.061,
            "expected": 0.05,
            "outliers": [
                {
                    "run": "r2",
                    "table": "batch_r2.csv",
                    "line": 9,
                    "time": 210.0,
                    "absorbance": 0.2114,
                    "z": 3.4,
                }
            ],
        },
        "correlation": {
            "parameters": ["rate/r1", "rate/r2", "noise_sd"],
            "matrix": [[1.0, 0.12, -0.05], [0.12, 1.0, 0.02], [-0.05, 0.02, 1.0]],
        },
    }
    d["warnings"] = [
        *d["warnings"],
        {
            "level": "warning",
            "check": "residual pattern",
            "run": "r2",
            "message": "hand-made: the residuals of run r2 run in long same-sign stretches.",
        },
    ]
    q0 = d["quantities"][heads[0]]
    cross = {
        "input": "concentration/oh_stock × glassware/cyl50",
        "group": "correlation",
        "sensitivity": None,
        "u_input": None,
        "u_contribution": 3.4e-4,
        "variance": -1.2e-7,
        "share": -0.0204,
    }
    q0["budget"] = [*q0["budget"], cross]
    q0["budget_by_group"] = [*q0["budget_by_group"], {**cross, "input": "correlation"}]
    d["plan"] = {
        "quantities": {
            heads[0]: {
                "U": d["quantities"][heads[0]]["linear"]["U"],
                "verdict": "Hand-made verdict: hold the bath temperature closer.",
                "cases": [
                    {
                        "group": "temperature",
                        "case": "bath control",
                        "description": "a tighter bath",
                        "U_new": 0.0041,
                        "reduction": 0.0109,
                        "reduction_percent": 72.7,
                        "method": "re-weighted",
                    },
                    {
                        "group": "absorbance noise",
                        "case": "more readings",
                        "description": "twice the readings",
                        "U_new": 0.0149,
                        "reduction": 0.0001,
                        "reduction_percent": 0.7,
                        "method": "simulated",
                    },
                ],
            }
        },
        "shares_check": {
            heads[0]: [
                {
                    "group": "temperature",
                    "linear_share": 0.956,
                    "only_share": 0.951,
                    "frozen_share": 0.958,
                    "flagged": False,
                },
                {
                    "group": "glassware",
                    "linear_share": 0.004,
                    "only_share": 0.19,
                    "frozen_share": 0.005,
                    "flagged": True,
                },
            ]
        },
        "schedule": [
            {
                "run": "r1",
                "readings": 30,
                "current_span_s": 870.0,
                "current_spacing_s": 30.0,
                "u_current": 3.2e-5,
                "optimal_span_s": 1100.0,
                "optimal_spacing_s": 37.9,
                "u_optimal": 2.7e-5,
                "gain_percent": 14.2,
            }
        ],
    }
    return d


def _draws() -> dict[str, dict[str, np.ndarray]]:
    rng = np.random.default_rng(5)
    n = 20_000
    k1 = rng.normal(3.59e-3, 3e-5, n)
    return {
        "batch": {
            "rate/r1": k1,
            "rate/r2": rng.normal(7.15e-3, 1e-4, n) + 0.5 * (k1 - 3.59e-3),
            "noise_sd": np.abs(rng.normal(0.002, 0.0002, n)),
        }
    }


def _rename(doc: dict, res, mapping: dict[str, str]):
    """``doc`` and ``res`` with runs renamed (keys and strings; provenance kept)."""

    def sub(s: str) -> str:
        for old, new in mapping.items():
            s = re.sub(rf"(?<![A-Za-z0-9]){old}(?![0-9])", lambda _m, n=new: n, s)
        return s

    def walk(o):
        if isinstance(o, dict):
            return {sub(k): walk(v) for k, v in o.items()}
        if isinstance(o, list):
            return [walk(v) for v in o]
        if isinstance(o, str):
            return sub(o)
        return o

    d = {k: (v if k == "provenance" else walk(v)) for k, v in doc.items()}
    ch = res.chains["batch"]
    fits = tuple(dataclasses.replace(f, name=mapping.get(f.name, f.name)) for f in ch.chain.fits)
    new_ch = dataclasses.replace(ch, chain=dataclasses.replace(ch.chain, fits=fits))
    return d, dataclasses.replace(res, chains={**res.chains, "batch": new_ch})


def _pages(path: Path) -> list[str]:
    return [p.extract_text() or "" for p in pypdf.PdfReader(str(path)).pages]


def _norm(text: str) -> str:
    return re.sub(r"\s+", " ", text)


@pytest.fixture(scope="module")
def analysed(tmp_path_factory):
    exp = demo_study(tmp_path_factory.mktemp("demo") / "study", seed=7)
    res = analyze(exp, settings=Settings(draws=5000, seed=3))
    doc = results_dict(res, command_line=["uqreport", "demo", "--out", "study", "--draws", "5000"])
    return res, doc


@pytest.fixture(scope="module")
def full(analysed, tmp_path_factory):
    res, doc = analysed
    d = _with_bayes_and_plan(doc)
    path = build_report(
        res, d, tmp_path_factory.mktemp("full") / "report.pdf", posterior_draws=_draws()
    )
    return path, d, _pages(path)


@pytest.fixture(scope="module")
def bare(analysed, tmp_path_factory):
    res, doc = analysed
    d = _bare(doc)
    path = build_report(res, d, tmp_path_factory.mktemp("bare") / "report.pdf")
    return path, d, _pages(path)


# --- the numbers --------------------------------------------------------------------------


def test_summary_statements_are_the_numbers_of_results_json(full):
    """The summary page states each headline quantity with the numbers of results.json,
    rounded as GUM 7.2.6 asks (U to two significant digits, y to the same decimal)."""
    _path, doc, pages = full
    page1 = _norm(pages[0])
    heads = fmt.headline_quantities(doc)
    assert heads
    for _chain, q in heads:
        st = fmt.statement(doc, q)
        assert _norm(st.core) in page1, q
        assert _norm(st.tail) in page1, q
        lin = doc["quantities"][q]["linear"]
        scale = 10.0**st.scale.exponent
        half = 0.5 * 10.0 ** (-st.scale.decimals) * scale
        assert abs(float(st.value) * scale - lin["value"]) <= half * (1 + 1e-9)
        assert abs(float(st.U) * scale - lin["U"]) <= half * (1 + 1e-9)
        assert float(st.k) == pytest.approx(lin["k"], abs=0.005)
        assert st.dof == fmt.fmt_dof(lin["dof"])
        # two significant digits of U (GUM 7.2.6)
        assert len(st.U.replace(".", "").lstrip("0")) == 2
        for line in fmt.method_lines(doc, q).values():
            assert _norm(line) in page1, line
    for w in doc["warnings"]:
        if w["level"] == "warning":
            assert _norm(w["message"])[:60] in page1


def test_statement_form_and_rounding():
    """Hand-worked: y = 0.179360, U = 0.0150278 -> "0.179", "0.015" (GUM 7.2.6); the
    coverage factor is named in words and 0.0996 rounds to 0.10, not 0.100."""
    doc = {
        "quantities": {
            "second_order_rate_constant": {
                "unit": "L/(mol*s)",
                "linear": {
                    "value": 0.179360,
                    "u": 0.0076674,
                    "dof": "inf",
                    "k": 1.959964,
                    "U": 0.0150278,
                    "coverage": 0.95,
                },
            }
        }
    }
    st = fmt.statement(doc, "second_order_rate_constant")
    assert st.text == (
        "k = 0.179 L mol⁻¹ s⁻¹, U = 0.015 L mol⁻¹ s⁻¹ (coverage factor 1.96 from ν_eff = ∞,"
        " about 95 % coverage)"
    )
    assert fmt.fmt_pm(1.0, 0.0996) == "1.00 ± 0.10"
    assert fmt.fmt_pm(0.0035899, 3.15e-5) == "(3.590 ± 0.032) × 10⁻³"
    assert fmt.fmt_pm(12345.6, 123) == "12350 ± 120"
    assert fmt.fmt_percent(3e-25) == "0.0 %"
    assert fmt.fmt_percent(-0.0031) == "-0.3 %"
    assert fmt.unit_text("L/(mol*s)") == "L mol⁻¹ s⁻¹"


def test_band_is_the_jacobian_propagation_of_the_fit_covariance():
    """The curve's band: sqrt(J C J^T) with J the analytic Jacobian of the decay model,
    checked against central differences (GUM 5.1.3, sensitivity coefficients)."""
    params = np.array([0.01, 0.75, 0.0036])
    C = np.array([[2e-6, 3e-6, 4e-8], [3e-6, 1.5e-5, 1e-7], [4e-8, 1e-7, 1e-9]])
    t = np.linspace(0, 900, 7)
    f, uf = curve_band(t, params, C)

    def model(p):
        return p[0] + (p[1] - p[0]) * np.exp(-p[2] * t)

    J = np.empty((t.size, 3))
    for i in range(3):
        h = 1e-6 * max(abs(params[i]), 1e-3)
        dp = np.zeros(3)
        dp[i] = h
        J[:, i] = (model(params + dp) - model(params - dp)) / (2 * h)
    np.testing.assert_allclose(f, model(params), rtol=1e-12)
    np.testing.assert_allclose(uf, np.sqrt(np.einsum("ni,ij,nj->n", J, C, J)), rtol=1e-6)


# --- structure ----------------------------------------------------------------------------


def test_every_section_heading_present(full, bare):
    text_full = _norm(" ".join(full[2]))
    text_bare = _norm(" ".join(bare[2]))
    for h in BASE_HEADINGS + OPTIONAL_HEADINGS:
        assert re.search(rf"\b\d+ {re.escape(h)}", text_full), h
    for h in BASE_HEADINGS:
        assert re.search(rf"\b\d+ {re.escape(h)}", text_bare), h
    for h in OPTIONAL_HEADINGS:  # absent inputs: no section, no heading
        assert h not in text_bare, h
    for sub in (
        "Posterior summaries",
        "Convergence diagnostics per parameter",
        "Posterior predictive check",
        "Sampling-schedule advice",
    ):
        assert sub in text_full


def test_metadata_page_count_and_footer(full, analysed):
    path, doc, pages = full
    reader = pypdf.PdfReader(str(path))
    meta = reader.metadata
    assert meta.title == doc["study"]["title"]
    assert meta.author == doc["study"]["operator"]
    assert meta.creator.startswith("uqreport")
    n = len(pages)
    assert 8 <= n <= 40
    for i, p in enumerate(pages, start=1):
        assert f"page {i} of {n}" in p
    assert "INVENTED DATA" in pages[0]
    outline = [o["/Title"] for o in reader.outline if isinstance(o, dict)]
    assert outline[0] == "1 Summary"


def test_safety_and_reproducibility_content(full):
    _path, doc, pages = full
    text = _norm(" ".join(pages))
    assert "corrosive to eyes and skin" in text
    assert "stains" in text and "disposal" in text
    assert "safety data sheet (SDS)" in text
    for name, sha in doc["provenance"]["files"].items():
        assert sha in text, name
    for pkg, version in doc["provenance"]["versions"].items():
        assert f"{pkg} {version}" in text
    assert "uqreport demo --out study --draws 5000" in text
    # the hand-made predictive-check outlier is named by run, table and line
    assert "batch_r2.csv 9" in text
    # the hand-made cross term is in the budget table with its negative share
    assert "concentration/oh_stock × glassware/cyl50 correlation" in text
    assert "-2.0 %" in text
    # the hand-made warning is on the summary page and in the assumptions table
    assert "residual pattern [run r2]: hand-made" in _norm(pages[0])
    assert "warning (run r2): hand-made" in text


def test_figures_at_least_150_dpi(full):
    """Every image is drawn at >= 150 pixels per inch (its pixels over its size on the
    page, from the content stream's transformation)."""
    reader = pypdf.PdfReader(str(full[0]))
    n_images = 0
    for page in reader.pages:
        data = page.get_contents().get_data().decode("latin-1")
        sizes = {im.name.rsplit(".", 1)[0]: im.image.size for im in page.images}
        for m in re.finditer(r"([\d.]+) 0 0 ([\d.]+) 0 0 cm\s*/(\S+) Do", data):
            w_pt, h_pt, name = float(m.group(1)), float(m.group(2)), m.group(3)
            px_w, px_h = sizes[name]
            assert px_w / (w_pt / 72.0) >= 150 and px_h / (h_pt / 72.0) >= 150
            n_images += 1
    assert n_images >= 8  # 3 fits, order, intervals, 3 budgets (+ corner)
    assert DPI >= 150


def test_corner_plot_only_with_draws(full, analysed):
    """The Bayesian section draws the corner plot when posterior draws are given."""
    from uqreport.report.registry import Numbering, ReportContext
    from uqreport.report.sections.bayes import build_bayes

    res, _doc = analysed
    d = full[1]

    def n_figures(draws):
        ctx = ReportContext(res, d, draws, Numbering())
        build_bayes(ctx)
        return ctx.numbers.figure

    assert n_figures(None) == 0
    assert n_figures(_draws()) == 1
    assert "Posterior draws: marginal histograms" in _norm(" ".join(full[2]))


# --- text rendered literally --------------------------------------------------------------


def test_markup_and_non_ascii_names_render_literally(analysed, tmp_path):
    res, doc = analysed
    d, r = _rename(_bare(doc), res, {"r1": INJECTION, "r2": NON_ASCII})
    d["study"] = {
        **d["study"],
        "title": "Lösung µ-Ω 25 °C <i>study</i> & more",
        "operator": "Gruppe Ω & <b>",
    }
    path = build_report(r, d, tmp_path / "names.pdf")
    text = _norm(" ".join(_pages(path)))
    assert INJECTION in text
    assert NON_ASCII in text
    assert "Lösung µ-Ω 25 °C <i>study</i> & more" in text
    assert f"Run {INJECTION} (batch_{INJECTION}.csv)" in text
    meta = pypdf.PdfReader(str(path)).metadata
    assert meta.title == "Lösung µ-Ω 25 °C <i>study</i> & more"
    assert meta.author == "Gruppe Ω & <b>"


def test_without_monte_carlo_and_not_invented(analysed, tmp_path):
    """A linear-only analysis of a real (not invented) study: no banner, the summary says
    Monte Carlo was not run, and every section still lays out."""
    res, doc = analysed
    d = _bare(doc)
    d["study"] = {**d["study"], "invented": False}
    d["settings"] = {**d["settings"], "montecarlo": False, "draws": None}
    for q in d["quantities"].values():
        q.pop("montecarlo", None)
    for c in d["chains"].values():
        c["montecarlo"] = None
    path = build_report(res, d, tmp_path / "linear.pdf")
    pages = _pages(path)
    text = _norm(" ".join(pages))
    assert "INVENTED DATA" not in text
    assert "Monte Carlo: not run for this analysis." in _norm(pages[0])
    assert "Validation of the linear method" not in text
    for h in BASE_HEADINGS:
        assert h in text


def test_standard_font_fallback(monkeypatch, tmp_path):
    """Without a Unicode TrueType font the report uses the standard fonts and spells out
    the glyphs they lack instead of drawing empty boxes."""
    from uqreport.report import fonts as fonts_mod
    from uqreport.report import pdf

    monkeypatch.setattr(fonts_mod, "_font_dirs", lambda: [])
    fonts_mod.fonts.cache_clear()
    pdf.styles.cache_clear()
    try:
        assert not pdf.fonts().unicode
        story = [pdf.para("k = 0.179 L mol⁻¹ s⁻¹ at 25 °C, ν_eff = ∞, 5 µΩ"), pdf.para(INJECTION)]
        data, _n = pdf.build_pdf(story, title="Lösung Ω", author="a")
        path = tmp_path / "std.pdf"
        path.write_bytes(data)
        text = _norm(" ".join(_pages(path)))
        assert "L mol^-1 s^-1 at 25 °C, nu_eff = inf, 5 µOhm" in text
        assert INJECTION in text
    finally:
        monkeypatch.undo()
        fonts_mod.fonts.cache_clear()
        pdf.styles.cache_clear()
    assert pdf.fonts().unicode


def test_escape_and_fallback_glyphs():
    from uqreport.report.fonts import FontSet, esc

    uni = FontSet("a", "b", "c", "d", "e", True, "unicode")
    std = FontSet("a", "b", "c", "d", "e", False, "standard")
    assert esc(INJECTION, uni) == '&lt;b&gt;&amp;"x"'
    assert esc("µ °C Ω ν ⁻¹", uni) == "µ °C Ω ν ⁻¹"
    # standard fonts keep µ and ° (WinAnsi) and spell out what they lack
    assert esc("µ °C Ω ν s⁻¹, u²", std) == "µ °C Ohm nu s^-1, u^2"


# --- long tables --------------------------------------------------------------------------


def test_table_of_200_rows_splits_with_repeated_header(tmp_path):
    from uqreport.report import pdf

    rows = [[f"row-{i:03d}", f"{i * 0.5:.1f}", "a note that takes some room"] for i in range(200)]
    story = [
        pdf.heading("A long table", 1, number="1"),
        *pdf.titled(
            "Two hundred rows",
            pdf.data_table(["Label", "Value", "Note"], rows, widths=[1, 1, 3], align="LRL"),
        ),
    ]
    data, n = pdf.build_pdf(story, title="t", author="a")
    path = tmp_path / "long.pdf"
    path.write_bytes(data)
    pages = _pages(path)
    assert n == len(pages) >= 2
    seen = []
    for p in pages:
        assert re.search(r"Label\s+Value\s+Note", p), "header missing on a page"
        seen += re.findall(r"row-\d{3}", p)
    assert seen == [f"row-{i:03d}" for i in range(200)]  # every row once, in order


# --- determinism, registry ----------------------------------------------------------------


def test_same_input_same_report(analysed, bare, tmp_path):
    res, doc = analysed
    again = build_report(res, _bare(doc), tmp_path / "again.pdf")
    assert _pages(again) == bare[2]
    assert again.read_bytes() == bare[0].read_bytes()


def test_chain_sections_follow_the_document(analysed):
    """A section registered for a chain the document lacks is left out with its heading;
    one for a present chain is laid out in its place (by order)."""
    import uqreport.report.registry as reg
    from uqreport.report import pdf
    from uqreport.report.sections import load_sections

    res, doc = analysed

    def body(ctx):
        return [pdf.para("section body")]

    def empty(ctx):
        return []

    load_sections()
    before = dict(reg._REGISTRY)
    try:
        reg._REGISTRY.clear()
        register_section(Section("a", "First", 10, body))
        register_section(Section("chain:tank", "Stirred tanks", 31, body, chain="tank"))
        register_section(Section("chain:batch", "Batch", 30, body, chain="batch"))
        register_section(Section("quiet", "Nothing to say", 35, empty))
        register_section(Section("z", "Last", 90, body))
        _story, titles = report_story(res, _bare(doc))
        assert titles == ["First", "Batch", "Last"]
    finally:
        reg._REGISTRY.clear()
        reg._REGISTRY.update(before)
    assert "chain:tank" not in {s.key for s in registered_sections()}


def test_summary_prints_only_numbers_of_results_json(full):
    """Every number on the summary page comes from results.json through the shared
    formatting (statements, method lines, shares, verdicts, warnings, study and settings),
    or is a page number, the "101" of JCGM 101 or the 10 of a power of ten."""
    _path, doc, pages = full
    num = re.compile(r"\d+(?:\.\d+)?")
    texts = []
    for _c, q in fmt.headline_quantities(doc):
        texts.append(fmt.statement(doc, q).text)
        texts += fmt.method_lines(doc, q).values()
        texts += [fmt.fmt_percent(g["share"]) for g in doc["quantities"][q]["budget_by_group"]]
    texts += [w["message"] for w in doc["warnings"]]
    texts += [q["verdict"] for q in doc.get("plan", {}).get("quantities", {}).values()]
    texts += [str(v) for v in doc["study"].values()]
    texts += [
        fmt.fmt_sig(doc["study"][k], 5, trim=True)
        for k in ("temperature_K", "u_temperature_K", "reference_temperature_K")
    ]
    st = doc["settings"]
    texts += [f"{100 * st['coverage']:g}", str(st["seed"]), fmt.fmt_count(st["draws"])]
    allowed = set(num.findall(" ".join(texts))) | {"101", "10"}
    allowed |= {str(i) for i in range(1, len(pages) + 1)}
    found = set(num.findall(pages[0]))
    assert found <= allowed, sorted(found - allowed)


def test_small_negative_share():
    """A tiny negative share printed "-<0.1 %"."""
    assert fmt.fmt_percent(-0.0002) == "> −0.1 %"
    assert fmt.fmt_percent(0.0002) == "<0.1 %"


def test_input_estimate_keeps_the_decimals_its_u_needs():
    """24.3 degC = 297.45 K with u = 0.17 K printed as 297.4 K in the inputs table (four
    significant digits), while the summary says 297.45 K."""
    from uqreport.report.sections.inputs import input_rows

    items = [
        {
            "name": "temperature/study",
            "value": 297.45,
            "u": 0.1732,
            "unit": "K",
            "dof": "inf",
            "distribution": "rectangular",
            "half_width": 0.3,
            "type": "B",
            "group": "temperature",
            "source": "",
            "block": None,
        },
        {
            "name": "concentration/s",
            "value": 0.5005,
            "u": 0.00104,
            "unit": "mol/L",
            "dof": 3.0,
            "distribution": "normal",
            "half_width": None,
            "type": "A",
            "group": "c",
            "source": "",
            "block": None,
        },
        {
            "name": "activation_energy",
            "value": 60570.0,
            "u": 2000.0,
            "unit": "J/mol",
            "dof": "inf",
            "distribution": "normal",
            "half_width": None,
            "type": "B",
            "group": "e",
            "source": "",
            "block": None,
        },
    ]
    rows, _ = input_rows(items)
    assert [r[1] for r in rows] == ["297.45", "0.5005", "60570"]


def test_a_baseline_the_fit_held_fixed_is_not_shown_as_exact():
    """A measured baseline printed "0.01200 ± 0.00000" in the table of fitted values."""
    from uqreport.report.sections.batch import _fitted_pm

    assert _fitted_pm(0.012, 0.0) == "0.012 (not fitted)"
    assert _fitted_pm(0.7664, 0.0038) == "0.7664 ± 0.0038"


def test_linearity_row_names_the_headline_quantities_not_validated():
    """The assumptions table said "7 of 13 quantities validated" and "no finding" while the
    summary said k was not validated: a reader took the row for a pass."""
    from uqreport.report.registry import ReportContext
    from uqreport.report.sections.assumptions import _general_rows

    def rec(validated):
        return {"montecarlo": {"validated": validated}, "linear": {}}

    doc = {
        "chains": {"batch": {"headline": ["second_order_rate_constant", "hydroxide_order"]}},
        "quantities": {
            "second_order_rate_constant": rec(False),
            "hydroxide_order": rec(True),
            "pseudo_rate_constant/r1": rec(False),
        },
    }
    ((_assumption, what, _checks),) = _general_rows(ReportContext(result=None, doc=doc))
    assert str(what) == (
        "JCGM 101 validation: 1 of 3 quantities validated; not validated among the headline"
        " quantities: k (state their Monte Carlo intervals)"
    )


def test_posterior_rows_of_one_kind_share_a_power_of_ten():
    """k'(r1) came out in 10⁻³ s⁻¹ and k'(r3) in s⁻¹ in the same column."""
    from uqreport.report.registry import ReportContext
    from uqreport.report.sections.bayes import _posterior_table

    def rec(median, sd):
        return {
            "chain": "batch",
            "unit": "1/s",
            "bayes": {
                "median": median,
                "sd": sd,
                "low": median - 2 * sd,
                "high": median + 2 * sd,
                "low_68": median - sd,
                "high_68": median + sd,
                "hdi_low": median - 2 * sd,
                "hdi_high": median + 2 * sd,
                "ess": 1500,
                "tau": 20,
                "converged": True,
            },
        }

    doc = {
        "quantities": {
            "pseudo_rate_constant/r1": rec(0.003619, 2.7e-5),
            "pseudo_rate_constant/r3": rec(0.01082, 1.4e-4),
        }
    }
    table = _posterior_table(ReportContext(result=None, doc=doc), "batch")
    cells = [[str(getattr(c, "text", c)) for c in row] for row in table._cellvalues[1:]]
    assert [(r[1], r[2]) for r in cells] == [("× 10⁻³ s⁻¹", "3.619"), ("× 10⁻³ s⁻¹", "10.82")]


def test_inputs_note_comes_before_its_table():
    """The note on collapsed blocks followed the inputs table and was left alone on a page of
    its own when the table filled the page before."""
    from reportlab.platypus import Paragraph, Table

    from uqreport.report.registry import ReportContext
    from uqreport.report.sections.inputs import build_inputs

    reading = {
        "value": 0.5,
        "u": 0.002,
        "unit": "1",
        "distribution": "normal",
        "dof": "inf",
        "type": "B",
        "group": "absorbance noise",
        "source": "",
        "block": "absorbance/r1",
    }
    items = [{**reading, "name": f"absorbance/r1/line{i}"} for i in (2, 3)]
    story = build_inputs(ReportContext(result=None, doc={"inputs": {"batch": items}}))
    kinds = [type(f) for f in story if isinstance(f, (Paragraph, Table))]
    note = next(
        i for i, f in enumerate(story) if isinstance(f, Paragraph) and "collapsed" in f.text
    )
    table = next(i for i, f in enumerate(story) if isinstance(f, Table))
    assert note < table, kinds
