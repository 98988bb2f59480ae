"""Fonts of the report and the escaping of user-supplied text for Paragraph markup.

DejaVu Sans (regular, bold, oblique, bold oblique) and DejaVu Sans Mono are embedded as
TrueType subsets, so that µ, °, Ω, Greek letters, superscripts and accented names render.
The copy bundled with matplotlib is used first (it is always there, and the figures use the
same face), then a system copy; only when neither is found does the report fall back to the
standard Helvetica/Courier and replace the glyphs they lack (:meth:`FontSet.safe`).
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path
from xml.sax.saxutils import escape as _xml_escape

from reportlab.pdfbase import pdfmetrics
from reportlab.pdfbase.ttfonts import TTFont

__all__ = ["FontSet", "esc", "fonts"]

_DEJAVU = {
    "regular": "DejaVuSans.ttf",
    "bold": "DejaVuSans-Bold.ttf",
    "italic": "DejaVuSans-Oblique.ttf",
    "bold_italic": "DejaVuSans-BoldOblique.ttf",
    "mono": "DejaVuSansMono.ttf",
}

# glyphs the standard (WinAnsi) fonts lack, with plain replacements
_SUPERSCRIPTS = re.compile("[⁻⁺⁰¹²³⁴⁵⁶⁷⁸⁹ᵇ]+")
_FROM_SUPER = str.maketrans("⁻⁺⁰¹²³⁴⁵⁶⁷⁸⁹ᵇ", "-+0123456789b")

_FALLBACK = {
    "ν": "nu",
    "δ": "delta",
    "σ": "sigma",
    "τ": "tau",
    "χ": "chi",
    "Ω": "Ohm",
    "∞": "inf",
    "′": "'",
    "≤": "<=",
    "≥": ">=",
    "−": "-",
    "≈": "~",
    "√": "sqrt",
    "₀": "0",
}


@dataclass(frozen=True)
class FontSet:
    """The fonts the report uses and whether they cover Unicode (see the module notes)."""

    regular: str
    bold: str
    italic: str
    bold_italic: str
    mono: str
    unicode: bool
    description: str

    def safe(self, text: str) -> str:
        """``text`` with the glyphs the fonts lack replaced (a no-op with DejaVu)."""
        if self.unicode:
            return text
        text = _SUPERSCRIPTS.sub(lambda m: "^" + m.group(0).translate(_FROM_SUPER), text)
        out = []
        for ch in text:
            try:
                ch.encode("cp1252")
                out.append(ch)
            except UnicodeEncodeError:
                out.append(_FALLBACK.get(ch, "?"))
        return "".join(out)


def _font_dirs() -> list[Path]:
    dirs: list[Path] = []
    try:
        import matplotlib

        dirs.append(Path(matplotlib.get_data_path()) / "fonts" / "ttf")
    except Exception:  # pragma: no cover - matplotlib is a dependency
        pass
    dirs += [
        Path("/usr/share/fonts/truetype/dejavu"),
        Path("/usr/share/fonts/dejavu"),
        Path("/usr/share/fonts/TTF"),
        Path("/usr/local/share/fonts"),
        Path(os.path.expanduser("~/.fonts")),
    ]
    return dirs


@lru_cache(maxsize=1)
def fonts() -> FontSet:
    """Register and return the report's fonts (once per process)."""
    for d in _font_dirs():
        paths = {k: d / v for k, v in _DEJAVU.items()}
        if not all(p.is_file() for p in paths.values()):
            continue
        try:
            names = {}
            for key, p in paths.items():
                name = "UQR-" + p.stem
                if name not in pdfmetrics.getRegisteredFontNames():
                    pdfmetrics.registerFont(TTFont(name, str(p)))
                names[key] = name
            pdfmetrics.registerFontFamily(
                names["regular"],
                normal=names["regular"],
                bold=names["bold"],
                italic=names["italic"],
                boldItalic=names["bold_italic"],
            )
        except Exception:  # a damaged font file: try the next place
            continue
        where = "bundled with matplotlib" if "mpl-data" in str(d) else f"from {d}"
        return FontSet(
            names["regular"],
            names["bold"],
            names["italic"],
            names["bold_italic"],
            names["mono"],
            True,
            f"DejaVu Sans and DejaVu Sans Mono (TrueType, embedded subsets, {where})",
        )
    return FontSet(
        "Helvetica",
        "Helvetica-Bold",
        "Helvetica-Oblique",
        "Helvetica-BoldOblique",
        "Courier",
        False,
        "Helvetica and Courier (standard PDF fonts; glyphs outside WinAnsi replaced)",
    )


def esc(text: object, font_set: FontSet | None = None) -> str:
    """``text`` as literal Paragraph content: &, < and > escaped, missing glyphs replaced,
    newlines kept as line breaks."""
    fs = font_set or fonts()
    s = fs.safe(str(text))
    return _xml_escape(s).replace("\n", "<br/>")
