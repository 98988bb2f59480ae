"""The PDF report: a pure function of the analysis result and its results.json document.

``build_report(result, doc, path)`` lays out every registered section (see
:mod:`uqreport.report.registry`) into ``path``.  Every number it prints comes from ``doc``
(``uqreport.results.results_dict(result)``); ``result`` supplies only what the figures
need (each run's readings).  Sections whose inputs are absent (the Bayesian posterior, the
improvement plan) are left out with their headings.

reportlab and matplotlib are imported only when a report is built.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .registry import ReportContext, Section, register_section, registered_sections

if TYPE_CHECKING:  # pragma: no cover
    import numpy as np

    from ..analysis import StudyResult

__all__ = [
    "ReportContext",
    "Section",
    "build_report",
    "register_section",
    "registered_sections",
    "report_story",
]


def report_story(
    result: StudyResult | None,
    doc: Mapping[str, Any],
    *,
    posterior_draws: Mapping[str, Mapping[str, np.ndarray]] | None = None,
) -> tuple[list, list[str]]:
    """The flowables of the report and the headings of the sections included, in order."""
    from reportlab.platypus import Spacer

    from . import pdf
    from .registry import Numbering
    from .sections import load_sections

    load_sections()
    ctx = ReportContext(result, doc, posterior_draws, Numbering())  # type: ignore[arg-type]
    story: list = []
    titles: list[str] = []
    chains = doc.get("chains", {}) or {}
    n = 0
    for sec in registered_sections():
        if sec.chain is not None and sec.chain not in chains:
            continue
        ctx.numbers.start(n + 1)
        flows = sec.build(ctx)
        if not flows:
            continue
        n += 1
        while story and isinstance(story[-1], Spacer):  # no page of trailing space
            story.pop()
        if story:
            # a major section starts a new page unless more than half of this one is left
            # (a hard break left pages holding two lines or one table row)
            story.append(pdf.cond_break(0.5) if sec.new_page else pdf.cond_break(0.2))
        if sec.heading:
            story.append(pdf.heading(sec.title, 1, number=str(n)))
        story.extend(flows)
        titles.append(sec.title)
    return story, titles


def build_report(
    result: StudyResult,
    doc: Mapping[str, Any],
    path: str | Path,
    *,
    posterior_draws: Mapping[str, Mapping[str, np.ndarray]] | None = None,
) -> Path:
    """Write the PDF report of ``result`` to ``path`` (atomically); returns the path.

    ``doc`` is ``results_dict(result)``: the report prints its numbers and no others.
    ``posterior_draws`` (chain -> parameter -> 1-D draws) feeds the corner plot when given.
    The same inputs give the same file (reportlab's invariant mode, fixed figure metadata).
    """
    from ..io import atomic_write_bytes
    from . import pdf

    story, _titles = report_story(result, doc, posterior_draws=posterior_draws)
    st = doc.get("study", {}) or {}
    title = str(st.get("title") or "Uncertainty report")
    author = str(st.get("operator") or "")
    invented = bool(st.get("invented"))
    version = (doc.get("provenance", {}).get("versions", {}) or {}).get("uqreport", "")
    data, _pages = pdf.build_pdf(
        story,
        title=title,
        author=author,
        subject="Uncertainty report: GUM linear propagation, Monte Carlo (JCGM 101)"
        + (", Bayesian MCMC" if any(c.get("bayes") for c in doc.get("chains", {}).values()) else "")
        + " and the error budget"
        + (" (invented data)" if invented else ""),
        keywords=[
            "uncertainty",
            "GUM",
            "JCGM 101",
            "error budget",
            *(["invented data"] if invented else []),
        ],
        creator=f"uqreport {version}".strip(),
        header=f"{title} · {author}".strip(" ·"),
        footer="uqreport uncertainty report · results.json holds every number printed here",
        marker="INVENTED DATA" if invented else "",
    )
    out = Path(path)
    atomic_write_bytes(out, data)
    return out
