"""Figures of the method comparison (coverage intervals) and of the budget (shares)."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ._common import PALETTE, FigurePNG, margins, mtext, new_figure, render, style, text_width_in

__all__ = ["BudgetBar", "Interval", "IntervalPanel", "budget_figure", "interval_figure"]


@dataclass(frozen=True)
class Interval:
    """One method's interval: label, estimate (value, mean or median), low, high; ``kind``
    picks the colour ("linear", "montecarlo", "bayes")."""

    label: str
    centre: float
    low: float
    high: float
    kind: str


@dataclass(frozen=True)
class IntervalPanel:
    """The intervals of one quantity, with the axis label (symbol and unit)."""

    title: str
    axis_label: str
    intervals: tuple[Interval, ...]


def interval_figure(panels: Sequence[IntervalPanel], *, width_in: float = 6.6) -> FigurePNG:
    """One small panel per quantity: the methods' intervals as horizontal bars."""
    n_rows = [max(len(p.intervals), 1) for p in panels]
    height = 0.35 + sum(0.2 * r + 0.54 for r in n_rows)
    with style():
        fig = new_figure(width_in, height)
        axes = fig.subplots(len(panels), 1, squeeze=False, height_ratios=n_rows)[:, 0]
        for ax, p in zip(axes, panels, strict=True):
            ys = np.arange(len(p.intervals))[::-1]
            for y, iv in zip(ys, p.intervals, strict=True):
                col = PALETTE.get(iv.kind, PALETTE["ink"])
                ax.plot([iv.low, iv.high], [y, y], color=col, lw=2.2, solid_capstyle="butt")
                ax.plot([iv.low, iv.low], [y - 0.18, y + 0.18], color=col, lw=1.2)
                ax.plot([iv.high, iv.high], [y - 0.18, y + 0.18], color=col, lw=1.2)
                ax.plot([iv.centre], [y], "o", color=col, ms=3.6)
            ax.set_yticks(ys, [mtext(iv.label) for iv in p.intervals])
            ax.set_ylim(-0.7, len(p.intervals) - 0.3)
            ax.set_title(mtext(p.title), loc="left")
            ax.set_xlabel(mtext(p.axis_label))
            ax.grid(axis="y", visible=False)
            lo = min(iv.low for iv in p.intervals)
            hi = max(iv.high for iv in p.intervals)
            pad = 0.08 * (hi - lo if hi > lo else abs(hi) or 1.0)
            ax.set_xlim(lo - pad, hi + pad)
        return render(fig)


@dataclass(frozen=True)
class BudgetBar:
    """One bar: label, share of u^2(y) (may be negative for a cross term), cross term?"""

    label: str
    share: float
    cross: bool = False


def budget_figure(bars: Sequence[BudgetBar], *, title: str, width_in: float = 6.2) -> FigurePNG:
    """Shares of the variance by group as a sorted horizontal bar chart (largest on top);
    cross terms (correlations) in their own colour, negative ones to the left of zero."""
    items = sorted(bars, key=lambda b: -abs(b.share))
    height = 0.75 + 0.24 * max(len(items), 1)
    with style():
        fig = new_figure(width_in, height, constrained=False)
        label_w = max((text_width_in(mtext(b.label), 7.2) for b in items), default=0.5)
        fig.subplots_adjust(**margins(fig, left=label_w + 0.18, right=0.15, top=0.27, bottom=0.42))
        ax = fig.add_subplot()
        ys = np.arange(len(items))[::-1]
        vals = np.array([100.0 * b.share for b in items])
        cols = [PALETTE["cross"] if b.cross else PALETTE["bar"] for b in items]
        ax.barh(ys, vals, color=cols, height=0.62)
        ax.set_yticks(ys, [mtext(b.label) for b in items])
        top = max(float(vals.max(initial=0.0)), 1.0)
        bottom = min(float(vals.min(initial=0.0)), 0.0)
        span = top - bottom
        ax.set_xlim(bottom - (0.12 * span if bottom < 0 else 0.0), top + 0.16 * span)
        for y, v in zip(ys, vals, strict=True):
            txt = "<0.1 %" if 1e-10 < abs(v) < 0.05 else f"{v:.1f} %"
            ax.text(
                v + (0.01 * span if v >= 0 else -0.01 * span),
                y,
                txt,
                va="center",
                ha="left" if v >= 0 else "right",
                fontsize=6.8,
                color=PALETTE["ink"],
            )
        ax.axvline(0.0, color=PALETTE["muted"], lw=0.7)
        ax.set_xlabel("share of the combined variance u²(y) (%)")
        ax.set_title(mtext(title), loc="left")
        ax.grid(axis="y", visible=False)
        return render(fig)
