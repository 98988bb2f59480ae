"""Shared matplotlib set-up for the report's figures: style, PNG rendering, text escaping.

Figures are drawn on a bare :class:`matplotlib.figure.Figure` with the Agg canvas (no pyplot,
no global backend), with constrained layout so that labels are not clipped, and saved as
PNG at :data:`DPI` with no metadata that varies (no software version, no date).
"""

from __future__ import annotations

import io
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

__all__ = [
    "DPI",
    "PALETTE",
    "FigurePNG",
    "margins",
    "mtext",
    "new_figure",
    "render",
    "style",
    "text_width_in",
]

#: Resolution of every figure in the PDF (the brief asks for at least 150 dpi).
DPI = 200

PALETTE = {
    "ink": "#1d2733",
    "data": "#23577a",
    "curve": "#c2562b",
    "band": "#f0b89a",
    "muted": "#7b8794",
    "grid": "#d5dde4",
    "bar": "#4f86a8",
    "cross": "#b5651d",
    "linear": "#23577a",
    "montecarlo": "#2e8b57",
    "bayes": "#8a4f9e",
}

EXCLUDED_STYLES = (
    ("X", "#b03a2e"),
    ("^", "#d98b12"),
    ("s", "#7d3c98"),
    ("D", "#566573"),
    ("v", "#117a65"),
)

_RC: dict[str, Any] = {
    "font.family": "DejaVu Sans",
    "font.size": 8.0,
    "axes.titlesize": 8.6,
    "axes.labelsize": 8.0,
    "axes.edgecolor": "#56616d",
    "axes.linewidth": 0.7,
    "axes.grid": True,
    "grid.color": PALETTE["grid"],
    "grid.linewidth": 0.5,
    "xtick.labelsize": 7.2,
    "ytick.labelsize": 7.2,
    "legend.fontsize": 6.8,
    "legend.frameon": True,
    "legend.framealpha": 0.9,
    "legend.edgecolor": "#c5ced6",
    "lines.linewidth": 1.2,
    "savefig.facecolor": "white",
    "figure.facecolor": "white",
    "svg.hashsalt": "uqreport",
    "axes.unicode_minus": True,
    "axes.formatter.useoffset": False,
    "axes.formatter.limits": (-3, 4),
}


@dataclass(frozen=True)
class FigurePNG:
    """A rendered figure: PNG bytes and its size in inches (at :data:`DPI`)."""

    png: bytes
    width_in: float
    height_in: float


@contextmanager
def style() -> Iterator[None]:
    """The report's matplotlib style, for the duration of one figure."""
    import matplotlib

    with matplotlib.rc_context(_RC):
        yield


def new_figure(width_in: float, height_in: float, *, constrained: bool = True, **kw: Any):
    """A bare Figure (call inside :func:`style`), with constrained layout unless the caller
    places its axes itself (cheaper: constrained layout measures every text twice)."""
    from matplotlib.figure import Figure

    layout = "constrained" if constrained else None
    return Figure(figsize=(width_in, height_in), layout=layout, **kw)


def text_width_in(text: str, size_pt: float) -> float:
    """Width of ``text`` in inches at ``size_pt`` in the report's face (for margins)."""
    from matplotlib.font_manager import FontProperties
    from matplotlib.textpath import TextToPath

    w, _h, _d = TextToPath().get_text_width_height_descent(
        text, FontProperties(family="DejaVu Sans", size=size_pt), ismath=False
    )
    return w / 72.0


def margins(fig: Any, *, left: float, right: float, top: float, bottom: float) -> dict[str, float]:
    """Subplot parameters from margins in inches."""
    w, h = fig.get_size_inches()
    return {"left": left / w, "right": 1 - right / w, "top": 1 - top / h, "bottom": bottom / h}


def render(fig: Any) -> FigurePNG:
    """The figure as PNG bytes (fixed metadata: same figure, same bytes)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=DPI, metadata={"Software": None})
    w, h = fig.get_size_inches()
    return FigurePNG(buf.getvalue(), float(w), float(h))


def mtext(text: object) -> str:
    """A user-supplied string shown literally by matplotlib (no mathtext from "$")."""
    return str(text).replace("$", r"\$")
