"""The document: A4 pages with a running header and a "page x of y" footer, the PDF
outline from the headings, and headings that stay with what follows them.

Built in reportlab's invariant mode (no dates, a fixed document id): the same story gives
the same bytes.  The page count is known only once the story is laid out, so it is laid
out twice (reportlab's ``multiBuild`` with a page-count flowable); images are drawn only
in the final pass.
"""

from __future__ import annotations

import io
from collections.abc import Sequence
from typing import Any

from reportlab import rl_config
from reportlab.lib import colors
from reportlab.lib.pagesizes import A4
from reportlab.lib.units import mm
from reportlab.pdfbase import pdfmetrics
from reportlab.platypus import (
    BaseDocTemplate,
    CondPageBreak,
    Flowable,
    Frame,
    KeepTogether,
    PageTemplate,
    Paragraph,
    Table,
)
from reportlab.platypus.tableofcontents import IndexingFlowable

from .fonts import fonts

__all__ = [
    "ACCENT",
    "FRAME_HEIGHT",
    "FRAME_WIDTH",
    "HEAD_BG",
    "INK",
    "MUTED",
    "PAGE",
    "RULE",
    "WARN_BG",
    "WARN_EDGE",
    "ZEBRA",
    "build_pdf",
    "cond_break",
]

PAGE = A4
MARGIN_X = 18 * mm
MARGIN_TOP = 20 * mm
MARGIN_BOTTOM = 18 * mm
FRAME_WIDTH = PAGE[0] - 2 * MARGIN_X
FRAME_HEIGHT = PAGE[1] - MARGIN_TOP - MARGIN_BOTTOM

INK = colors.HexColor("#1d2733")
MUTED = colors.HexColor("#5b6673")
ACCENT = colors.HexColor("#23577a")
HEAD_BG = colors.HexColor("#dde6ee")
ZEBRA = colors.HexColor("#f4f7f9")
RULE = colors.HexColor("#9aa8b5")
WARN_BG = colors.HexColor("#fbe9d0")
WARN_EDGE = colors.HexColor("#b5651d")


class _PageCount(IndexingFlowable):
    """Holds the page count of the previous layout pass (for "page x of y")."""

    def __init__(self, doc: _Document) -> None:
        super().__init__()
        self._doc = doc
        self.previous: int | None = None
        self.current: int | None = None

    def beforeBuild(self) -> None:
        self.previous = self.current
        self._doc.total_pages = self.previous
        self._doc._outline_n = 0

    def afterBuild(self) -> None:
        self.current = self._doc.page

    def isSatisfied(self) -> bool:
        return self.previous is not None and self.previous == self.current

    def wrap(self, availWidth: float, availHeight: float) -> tuple[float, float]:
        return (0, 0)

    def draw(self) -> None:
        pass


def _min_height(f: Flowable, aw: float, ah: float, canv: Any) -> float:
    """The height ``f`` needs on the current page to not leave what precedes it orphaned:
    a table's header and first rows, a paragraph's first lines, else all of it."""
    if isinstance(f, KeepTogether):
        return sum(_min_height(g, aw, ah, canv) for g in f._content)
    _, h = f.wrapOn(canv, aw, ah)
    h += f.getSpaceBefore()
    if isinstance(f, Table):
        rows = getattr(f, "_rowHeights", None) or []
        return min(h, float(sum(rows[:4]))) if rows else h
    if isinstance(f, Paragraph):
        return min(h, 3.0 * f.style.leading)
    return h


class _KeepWithNext(KeepTogether):
    """The group a heading forms with what follows (reportlab's keepWithNext).

    Unlike a plain KeepTogether it moves to the next page only when the heading and the
    start of what follows do not fit, so that a long table after its title starts on the
    same page and splits, instead of leaving the page empty.
    """

    def split(self, aW: float, aH: float) -> list:
        content = self._content[:]
        need = 0.0
        for f in content[:-1]:
            _, h = f.wrapOn(self.canv, aW, aH)
            need += h + f.getSpaceBefore() + f.getSpaceAfter()
        need += _min_height(content[-1], aW, aH, self.canv)
        frame = getattr(self, "_frame", None)
        if need > aH and not getattr(frame, "_atTop", False):
            return [self.FrameBreak(), *content]
        return content


class _Document(BaseDocTemplate):
    keepTogetherClass = _KeepWithNext

    def __init__(self, target: Any, *, header: str, footer: str, marker: str, **kw: Any):
        super().__init__(target, pagesize=PAGE, invariant=1, keepTogetherClass=_KeepWithNext, **kw)
        self.total_pages: int | None = None
        self._header, self._footer, self._marker = header, footer, marker
        self._outline_n = 0
        frame = Frame(
            MARGIN_X,
            MARGIN_BOTTOM,
            FRAME_WIDTH,
            FRAME_HEIGHT,
            leftPadding=0,
            rightPadding=0,
            topPadding=0,
            bottomPadding=0,
            id="body",
        )
        self.addPageTemplates([PageTemplate(id="page", frames=[frame], onPage=self._decorate)])

    def afterFlowable(self, flowable: Flowable) -> None:
        entry = getattr(flowable, "_uqr_outline", None)
        if entry is None:
            return
        level, text = entry
        self._outline_n += 1
        key = f"s{self._outline_n}"
        self.canv.bookmarkPage(key)
        self.canv.addOutlineEntry(text, key, level=max(level - 1, 0), closed=level > 1)

    def _decorate(self, canv: Any, doc: Any) -> None:
        f = fonts()
        canv.saveState()
        canv.setStrokeColor(RULE)
        canv.setLineWidth(0.4)
        top = PAGE[1] - MARGIN_TOP + 8
        canv.line(MARGIN_X, top - 3, PAGE[0] - MARGIN_X, top - 3)
        canv.setFont(f.regular, 7.5)
        canv.setFillColor(MUTED)
        canv.drawString(MARGIN_X, top, _clip(self._header, f.regular, 7.5, FRAME_WIDTH * 0.72))
        if self._marker:
            canv.setFont(f.bold, 7.5)
            canv.setFillColor(WARN_EDGE)
            canv.drawRightString(PAGE[0] - MARGIN_X, top, self._marker)
        bottom = MARGIN_BOTTOM - 12
        canv.line(MARGIN_X, bottom + 9, PAGE[0] - MARGIN_X, bottom + 9)
        canv.setFont(f.regular, 7.5)
        canv.setFillColor(MUTED)
        canv.drawString(MARGIN_X, bottom, _clip(self._footer, f.regular, 7.5, FRAME_WIDTH * 0.7))
        total = "?" if self.total_pages is None else str(self.total_pages)
        canv.drawRightString(PAGE[0] - MARGIN_X, bottom, f"page {doc.page} of {total}")
        canv.restoreState()


def _clip(text: str, font: str, size: float, width: float) -> str:
    if pdfmetrics.stringWidth(text, font, size) <= width:
        return text
    while text and pdfmetrics.stringWidth(text + "…", font, size) > width:
        text = text[:-1]
    return text + "…"


def build_pdf(
    story: list,
    *,
    title: str,
    author: str,
    subject: str = "",
    keywords: Sequence[str] = (),
    creator: str = "uqreport",
    header: str = "",
    footer: str = "",
    marker: str = "",
) -> tuple[bytes, int]:
    """Lay out ``story`` (A4, invariant mode); returns the PDF bytes and the page count.

    ``header`` and ``footer`` are plain text drawn on every page (left); ``marker`` is drawn
    top right in the warning colour (e.g. "INVENTED DATA").  Metadata: title, author,
    subject, keywords, creator.
    """
    f = fonts()
    buf = io.BytesIO()
    doc = _Document(
        buf,
        header=f.safe(header),
        footer=f.safe(footer),
        marker=f.safe(marker),
        title=f.safe(title),
        author=f.safe(author),
        subject=f.safe(subject),
        keywords=[f.safe(k) for k in keywords],
        creator=creator,
    )
    a85 = rl_config.useA85
    rl_config.useA85 = 0  # binary streams: smaller, and no slow pure-Python encoding
    try:
        doc.multiBuild([_PageCount(doc), *story], maxPasses=4)
    finally:
        rl_config.useA85 = a85
    return buf.getvalue(), int(doc.page)


def cond_break(fraction: float = 0.25) -> CondPageBreak:
    """Start a new page unless ``fraction`` of the frame height is left (no orphans)."""
    return CondPageBreak(FRAME_HEIGHT * fraction)
