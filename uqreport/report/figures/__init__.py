"""The report's figures (matplotlib, imported only when a report is built)."""

from __future__ import annotations

from ._common import DPI, FigurePNG
from .batch import OrderPoint, curve_band, fit_figure, order_figure
from .compare import BudgetBar, Interval, IntervalPanel, budget_figure, interval_figure
from .corner import MAX_CORNER_PARAMETERS, corner_figure

__all__ = [
    "DPI",
    "MAX_CORNER_PARAMETERS",
    "BudgetBar",
    "FigurePNG",
    "Interval",
    "IntervalPanel",
    "OrderPoint",
    "budget_figure",
    "corner_figure",
    "curve_band",
    "fit_figure",
    "interval_figure",
    "order_figure",
]
