"""The report's sections: a registry, and the context every section builder receives.

A section is a builder ``build(ctx) -> list of flowables``; an empty list means "nothing to
say" and the section is left out with its heading.  Sections are laid out by ``order``.
A chain's section names its chain and is built only when ``doc["chains"]`` holds it, so a
later chain adds its section by dropping a module into ``uqreport/report/sections/`` that
calls :func:`register_section` (the package imports every module in it); nothing else
changes.

This module imports neither reportlab nor matplotlib.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # pragma: no cover
    import numpy as np

    from ..analysis import StudyResult

__all__ = [
    "Numbering",
    "ReportContext",
    "Section",
    "register_section",
    "registered_sections",
]


@dataclass(frozen=True)
class Section:
    """One section of the report.

    Attributes
    ----------
    key:
        Unique name ("summary", "chain:batch", ...); registering a key again replaces it.
    title:
        The heading.
    order:
        Position (ascending): summary 10, inputs 20, chains 30-39, method comparison 40,
        Bayesian 50, budget and plan 60, assumptions 70, safety 75, reproducibility 90.
    build:
        ``build(ctx) -> list`` of reportlab flowables (without the section heading, which
        the report adds); an empty list leaves the section out.
    chain:
        The chain the section is about (built only when the document has it), or None.
    new_page:
        A major section: it starts on a new page unless more than half of the current
        page is left (others need a fifth of a page).
    heading:
        Whether the report adds the numbered heading (the summary draws its own title).
    """

    key: str
    title: str
    order: float
    build: Callable[[ReportContext], list]
    chain: str | None = None
    new_page: bool = False
    heading: bool = True


_REGISTRY: dict[str, Section] = {}


def register_section(section: Section) -> Section:
    """Add (or replace) a section; returns it (usable as a plain call at import time)."""
    _REGISTRY[section.key] = section
    return section


def registered_sections() -> tuple[Section, ...]:
    """Every registered section in layout order (order, then key)."""
    return tuple(sorted(_REGISTRY.values(), key=lambda s: (s.order, s.key)))


class Numbering:
    """Section, subsection and figure numbers while the story is assembled."""

    def __init__(self) -> None:
        self.section = 0
        self._sub = 0
        self.figure = 0
        self.table = 0

    def start(self, number: int) -> None:
        self.section = number
        self._sub = 0

    def sub(self) -> str:
        self._sub += 1
        return f"{self.section}.{self._sub}"

    def next_figure(self) -> int:
        self.figure += 1
        return self.figure


@dataclass(frozen=True)
class ReportContext:
    """What a section builder may read.

    ``doc`` is the results.json document: every number the report prints comes from it.
    ``result`` supplies what only figures need (the readings of each run, Monte Carlo
    draws).  ``posterior_draws`` maps chain -> parameter -> draws, for the corner plot.
    ``numbers`` hands out subsection and figure numbers.
    """

    result: StudyResult
    doc: Mapping[str, Any]
    posterior_draws: Mapping[str, Mapping[str, np.ndarray]] | None = None
    numbers: Numbering = field(default_factory=Numbering)
    path_name: str = "report.pdf"

    # --- convenience ----------------------------------------------------------------------

    def quantity(self, name: str) -> Mapping[str, Any]:
        return self.doc["quantities"][name]

    def chain_doc(self, chain: str) -> Mapping[str, Any]:
        return self.doc["chains"][chain]

    @property
    def coverage(self) -> float:
        return float(self.doc.get("settings", {}).get("coverage", 0.95))

    @property
    def plan(self) -> Mapping[str, Any] | None:
        p = self.doc.get("plan")
        return p if p else None

    def bayes(self, chain: str) -> Mapping[str, Any] | None:
        b = self.doc.get("chains", {}).get(chain, {}).get("bayes")
        return b if b else None
