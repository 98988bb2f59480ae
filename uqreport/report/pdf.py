"""The PDF building blocks the sections use: styles, escaped paragraphs, headings, tables
that split across pages with their header repeated, figures, and the document.

Every user-supplied string goes through :func:`esc` (or :func:`para`, which escapes plain
``str``) before it reaches Paragraph markup; text that is already markup is wrapped in
:class:`Markup`.
"""

from __future__ import annotations

import io
import re
from collections.abc import Sequence
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

from reportlab.lib import colors
from reportlab.lib.enums import TA_LEFT, TA_RIGHT
from reportlab.lib.styles import ParagraphStyle
from reportlab.pdfbase.pdfmetrics import stringWidth
from reportlab.platypus import (
    Flowable,
    Image,
    KeepTogether,
    Paragraph,
    Table,
    TableStyle,
)

from .document import (
    ACCENT,
    FRAME_HEIGHT,
    FRAME_WIDTH,
    HEAD_BG,
    INK,
    MUTED,
    RULE,
    WARN_BG,
    WARN_EDGE,
    ZEBRA,
    build_pdf,
    cond_break,
)
from .fonts import FontSet, esc, fonts

__all__ = [
    "FRAME_HEIGHT",
    "FRAME_WIDTH",
    "RULE",
    "FontSet",
    "Markup",
    "Styles",
    "banner",
    "build_pdf",
    "bullet",
    "cond_break",
    "data_table",
    "esc",
    "figure",
    "fonts",
    "heading",
    "para",
    "styles",
    "titled",
]


class Markup(str):
    """A string that is already reportlab Paragraph markup (user parts escaped)."""


# --- styles -------------------------------------------------------------------------------


@dataclass(frozen=True)
class Styles:
    """Paragraph styles of the report."""

    fonts: FontSet
    body: ParagraphStyle
    small: ParagraphStyle
    title: ParagraphStyle
    subtitle: ParagraphStyle
    h1: ParagraphStyle
    h2: ParagraphStyle
    h3: ParagraphStyle
    caption: ParagraphStyle
    note: ParagraphStyle
    cell: ParagraphStyle
    cell_right: ParagraphStyle
    cell_head: ParagraphStyle
    cell_head_right: ParagraphStyle
    mono: ParagraphStyle
    statement: ParagraphStyle
    bullet: ParagraphStyle
    bullet_small: ParagraphStyle
    banner: ParagraphStyle

    def safe(self, text: str) -> str:
        return self.fonts.safe(text)


@lru_cache(maxsize=1)
def styles() -> Styles:
    """The report's paragraph styles (fonts registered on first use)."""
    f = fonts()
    base = ParagraphStyle(
        "body", fontName=f.regular, fontSize=9.2, leading=12.4, textColor=INK, spaceAfter=4
    )

    def st(name: str, **kw: Any) -> ParagraphStyle:
        return ParagraphStyle(name, parent=base, **kw)

    cell = st("cell", fontSize=7.2, leading=8.7, spaceAfter=0)
    return Styles(
        fonts=f,
        body=base,
        small=st("small", fontSize=8, leading=10.2, textColor=MUTED),
        title=st("title", fontName=f.bold, fontSize=19, leading=23, spaceAfter=6, textColor=ACCENT),
        subtitle=st("subtitle", fontSize=10.5, leading=14, textColor=MUTED, spaceAfter=2),
        h1=st(
            "h1",
            fontName=f.bold,
            fontSize=14,
            leading=18,
            spaceBefore=6,
            spaceAfter=6,
            textColor=ACCENT,
            keepWithNext=1,
        ),
        h2=st(
            "h2",
            fontName=f.bold,
            fontSize=11,
            leading=14,
            spaceBefore=8,
            spaceAfter=4,
            keepWithNext=1,
        ),
        h3=st("h3", fontName=f.bold, fontSize=9.2, leading=12, spaceBefore=4, keepWithNext=1),
        caption=st(
            "caption", fontName=f.italic, fontSize=7.8, leading=10, textColor=MUTED, spaceAfter=8
        ),
        note=st(
            "note",
            fontName=f.italic,
            fontSize=7.6,
            leading=9.6,
            textColor=MUTED,
            spaceAfter=3,
            keepWithNext=1,
        ),
        cell=cell,
        cell_right=ParagraphStyle("cell_right", parent=cell, alignment=TA_RIGHT),
        cell_head=ParagraphStyle("cell_head", parent=cell, fontName=f.bold),
        cell_head_right=ParagraphStyle(
            "cell_head_right", parent=cell, fontName=f.bold, alignment=TA_RIGHT
        ),
        mono=st("mono", fontName=f.mono, fontSize=7.2, leading=9.2, spaceAfter=0),
        statement=st("statement", fontSize=10.2, leading=14, leftIndent=8, spaceAfter=2),
        bullet=st("bullet", leftIndent=12, bulletIndent=2, spaceAfter=2),
        bullet_small=st(
            "bullet_small",
            fontSize=8.3,
            leading=10.6,
            leftIndent=12,
            bulletIndent=2,
            spaceAfter=1.5,
        ),
        banner=st(
            "banner",
            fontName=f.bold,
            fontSize=9.5,
            leading=12.5,
            textColor=WARN_EDGE,
            alignment=TA_LEFT,
        ),
    )


def para(text: str | Markup, style: ParagraphStyle | None = None) -> Paragraph:
    """A paragraph: plain ``str`` is escaped; :class:`Markup` is taken as it is."""
    s = styles()
    markup = text if isinstance(text, Markup) else esc(text, s.fonts)
    return Paragraph(markup, style or s.body)


def bullet(text: str | Markup, style: ParagraphStyle | None = None) -> Paragraph:
    """A bulleted paragraph (escaped unless :class:`Markup`)."""
    s = styles()
    markup = text if isinstance(text, Markup) else esc(text, s.fonts)
    return Paragraph(markup, style or s.bullet, bulletText="•")


def heading(text: str | Markup, level: int = 1, *, number: str = "") -> Paragraph:
    """A numbered heading that stays with what follows and enters the PDF outline."""
    s = styles()
    style = {1: s.h1, 2: s.h2}.get(level, s.h3)
    body = text if isinstance(text, Markup) else esc(text, s.fonts)
    p = Paragraph(f"{number}  {body}" if number else body, style)
    p._uqr_outline = (level, s.fonts.safe(f"{number} {_plain(text)}".strip()))  # type: ignore[attr-defined]
    return p


def _plain(text: str) -> str:
    if isinstance(text, Markup):
        text = re.sub(r"<[^>]+>", "", text)
        text = text.replace("&lt;", "<").replace("&gt;", ">").replace("&amp;", "&")
    return str(text)


def banner(text: str | Markup) -> Table:
    """A boxed notice (invented data, unconverged results)."""
    s = styles()
    t = Table([[para(text, s.banner)]], colWidths=[FRAME_WIDTH])
    t.setStyle(
        TableStyle(
            [
                ("BACKGROUND", (0, 0), (-1, -1), WARN_BG),
                ("BOX", (0, 0), (-1, -1), 1.0, WARN_EDGE),
                ("LEFTPADDING", (0, 0), (-1, -1), 8),
                ("RIGHTPADDING", (0, 0), (-1, -1), 8),
                ("TOPPADDING", (0, 0), (-1, -1), 6),
                ("BOTTOMPADDING", (0, 0), (-1, -1), 6),
            ]
        )
    )
    return t


# --- tables -------------------------------------------------------------------------------


_PAD_X = 3.0


def _cell(v: object, style: ParagraphStyle, width: float) -> Flowable | str:
    """A table cell: plain text when it fits on one line (drawn as it is, no markup, and
    much cheaper to lay out), else an escaped paragraph that wraps."""
    if isinstance(v, Flowable):
        return v
    if v is None:
        v = "–"
    if isinstance(v, Markup):
        return para(v, style)
    text = str(v)
    if "\n" not in text:
        safe = fonts().safe(text)
        if stringWidth(safe, style.fontName, style.fontSize) <= width - 2 * _PAD_X:
            return safe
    return para(_wrap_long_words(text, style, width - 2 * _PAD_X), style)


_BREAK_AFTER = re.compile(r"(?<=[/.\]])(?=\w)")


def _wrap_long_words(text: str, style: ParagraphStyle, width: float) -> str | Markup:
    """``text``, with each word too long for the cell broken after its '/', '.' or ']'
    (explicit line breaks), so that a name such as ``volume_reading/batch.runs[r1].dye_volume``
    wraps at its parts; reportlab would otherwise split it in the middle of a word."""
    words = text.split(" ")
    if all(stringWidth(w, style.fontName, style.fontSize) <= width for w in words):
        return text
    out = []
    for w in words:
        if stringWidth(w, style.fontName, style.fontSize) <= width:
            out.append(esc(w))
            continue
        lines, cur = [], ""
        for piece in _BREAK_AFTER.split(w):
            if cur and stringWidth(cur + piece, style.fontName, style.fontSize) > width:
                lines.append(cur)
                cur = piece
            else:
                cur += piece
        lines.append(cur)
        out.append("<br/>".join(esc(x) for x in lines))
    return Markup(" ".join(out))


def data_table(
    header: Sequence[str | Markup],
    rows: Sequence[Sequence[object]],
    *,
    widths: Sequence[float],
    align: str | None = None,
    highlight: Sequence[int] = (),
) -> Table:
    """A table that splits across pages with its header repeated.

    ``widths`` are fractions of the frame width (scaled to add to 1); ``align`` one letter
    per column, "L" or "R" (numbers right); ``highlight`` row indices (of ``rows``) drawn
    with a warm background (flagged entries).  Cells: ``str`` (shown literally),
    :class:`Markup`, a flowable, or None ("–").
    """
    s = styles()
    n = len(header)
    align = (align or "L" * n).upper()
    if len(align) != n or len(widths) != n:
        raise ValueError("header, widths and align must have one entry per column")
    tot = float(sum(widths))
    col_w = [FRAME_WIDTH * w / tot for w in widths]
    head = [
        _cell(h, s.cell_head_right if align[j] == "R" else s.cell_head, col_w[j])
        for j, h in enumerate(header)
    ]
    body = [
        [_cell(v, s.cell_right if align[j] == "R" else s.cell, col_w[j]) for j, v in enumerate(r)]
        for r in rows
    ]
    t = Table([head, *body], colWidths=col_w, repeatRows=1, hAlign="LEFT", splitByRow=1)
    cell = s.cell
    cmds: list[tuple] = [
        ("FONT", (0, 0), (-1, -1), cell.fontName, cell.fontSize, cell.leading),
        ("FONT", (0, 0), (-1, 0), s.cell_head.fontName, cell.fontSize, cell.leading),
        ("TEXTCOLOR", (0, 0), (-1, -1), INK),
        ("BACKGROUND", (0, 0), (-1, 0), HEAD_BG),
        ("LINEBELOW", (0, 0), (-1, 0), 0.8, ACCENT),
        ("LINEBELOW", (0, -1), (-1, -1), 0.6, RULE),
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LEFTPADDING", (0, 0), (-1, -1), _PAD_X),
        ("RIGHTPADDING", (0, 0), (-1, -1), _PAD_X),
        ("TOPPADDING", (0, 0), (-1, -1), 1.6),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 2.2),
    ]
    for j, a in enumerate(align):
        if a == "R":
            cmds.append(("ALIGN", (j, 0), (j, -1), "RIGHT"))
    if len(rows) > 3:
        cmds.append(("ROWBACKGROUNDS", (0, 1), (-1, -1), [colors.white, ZEBRA]))
    for i in highlight:
        cmds.append(("BACKGROUND", (0, i + 1), (-1, i + 1), WARN_BG))
    t.setStyle(TableStyle(cmds))
    return t


#: Tables of at most this many rows (header included) are kept on one page.
SHORT_TABLE_ROWS = 16


def titled(title: str | Markup, flowable: Flowable, note: str | Markup | None = None) -> list:
    """A small bold title and an optional note on how to read it, kept with the start of
    the table after them (a note after a long table could be left alone on a page)."""
    s = styles()
    out: list = [para(title, s.h3)]
    if note:
        out.append(para(note, s.note))
    flowable.spaceAfter = 8  # not a Spacer: that could start a page of its own
    out.append(flowable)
    if isinstance(flowable, Table) and flowable._nrows <= SHORT_TABLE_ROWS:
        # a short table is not split: split, it left one row alone on a page
        return [KeepTogether(out)]
    return out


# --- figures ------------------------------------------------------------------------------


class _Image(Image):
    """An image drawn only in the final layout pass (the first pass only counts pages, and
    encoding images is the slow part of drawing)."""

    def draw(self) -> None:
        doc = getattr(self.canv, "_doctemplate", None)
        if doc is not None and getattr(doc, "total_pages", 0) is None:
            return
        super().draw()


def figure(
    png: bytes, width_in: float, height_in: float, caption: str | Markup | None = None
) -> KeepTogether:
    """A PNG figure at its size (scaled down to the frame width), kept with its caption."""
    s = styles()
    w = width_in * 72.0
    h = height_in * 72.0
    if w > FRAME_WIDTH:
        h *= FRAME_WIDTH / w
        w = FRAME_WIDTH
    img = _Image(io.BytesIO(png), width=w, height=h)
    img.hAlign = "CENTER"
    parts: list = [img]
    if caption:
        parts.append(para(caption, s.caption))
    return KeepTogether(parts)
