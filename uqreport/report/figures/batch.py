"""Figures of the batch chain: each run's fit with its band and residuals, and the order plot.

The band of the fitted curve is computed here from the fit record of results.json (A_inf,
A_0, k' and their 3 x 3 covariance from the fit alone), propagated to the curve with the
Jacobian of the decay model f(t) = A_inf + (A_0 - A_inf) exp(-k' t):

    df/dA_inf = 1 - e,   df/dA_0 = e,   df/dk' = -(A_0 - A_inf) t e,   e = exp(-k' t),

so var f(t) = J(t) C J(t)^T (GUM 5.1.2 applied point by point).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ._common import (
    EXCLUDED_STYLES,
    PALETTE,
    FigurePNG,
    margins,
    mtext,
    new_figure,
    render,
    style,
)

__all__ = ["OrderPoint", "curve_band", "fit_figure", "order_figure"]


def curve_band(
    t: NDArray[np.float64], params: Sequence[float], covariance: Sequence[Sequence[float]]
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """f(t) and its standard uncertainty from the parameters' covariance (t from mixing)."""
    c, a0, k = (float(v) for v in params)
    t = np.asarray(t, dtype=float)
    try:
        C = np.asarray(covariance, dtype=float)
    except (TypeError, ValueError):
        C = np.full((3, 3), np.nan)
    if C.shape != (3, 3):
        C = np.full((3, 3), np.nan)
    e = np.exp(-k * t)
    f = c + (a0 - c) * e
    J = np.stack([1.0 - e, e, -(a0 - c) * t * e], axis=-1)
    var = np.einsum("ni,ij,nj->n", J, C, J)
    # no usable covariance (a fit without one): no band rather than a failed report
    var = np.where(np.isfinite(var), var, 0.0)
    return f, np.sqrt(np.clip(var, 0.0, None))


def fit_figure(
    rec: Mapping[str, Any],
    *,
    times: NDArray[np.float64],
    absorbance: NDArray[np.float64],
    used: NDArray[np.bool_],
    reasons: Sequence[str],
    residuals: NDArray[np.float64],
    sigma: NDArray[np.float64],
    time_origin: float,
    z: float,
    coverage: float,
    width_in: float = 6.6,
    height_in: float = 3.9,
) -> FigurePNG:
    """Readings, fitted curve and band (top); residuals in units of their u (bottom).

    ``rec`` is the run's fit record of results.json; the readings come from the analysis
    (recorded times; the model adds ``time_origin``, the mean timing lag).
    """
    times = np.asarray(times, dtype=float)
    absorbance = np.asarray(absorbance, dtype=float)
    used = np.asarray(used, dtype=bool)
    params = (rec["baseline"], rec["initial"], rec["rate"])
    cov = rec["covariance"]
    pct = f"{100 * coverage:g} %"
    with style():
        fig = new_figure(width_in, height_in, constrained=False)
        gs = fig.add_gridspec(
            2,
            1,
            height_ratios=[2.6, 1.0],
            hspace=0.09,
            **margins(fig, left=0.62, right=0.12, top=0.08, bottom=0.44),
        )
        ax = fig.add_subplot(gs[0])
        axr = fig.add_subplot(gs[1], sharex=ax)
        t_hi = float(times.max()) if times.size else 1.0
        tt = np.linspace(0.0, t_hi * 1.03, 400)
        f, uf = curve_band(tt + time_origin, params, cov)
        ax.fill_between(
            tt,
            f - z * uf,
            f + z * uf,
            color=PALETTE["band"],
            alpha=0.8,
            lw=0,
            label=f"{pct} band of the fitted curve (fit covariance)",
        )
        ax.plot(tt, f, color=PALETTE["curve"], lw=1.3, label="fitted curve f(t)")
        ax.plot(
            times[used],
            absorbance[used],
            "o",
            ms=3.2,
            color=PALETTE["data"],
            label=f"readings used ({int(used.sum())})",
        )
        by_reason: dict[str, list[int]] = {}
        for j in np.flatnonzero(~used):
            by_reason.setdefault(str(reasons[j]) or "excluded", []).append(int(j))
        for i, (reason, idx) in enumerate(by_reason.items()):
            marker, color = EXCLUDED_STYLES[i % len(EXCLUDED_STYLES)]
            ax.plot(
                times[idx],
                absorbance[idx],
                marker,
                ms=5.0,
                mfc="none",
                mec=color,
                mew=1.1,
                ls="none",
                label=mtext(f"excluded: {reason} ({len(idx)})"),
            )
        ax.set_ylabel("absorbance A (dimensionless)")
        ax.legend(loc="upper right")
        ax.tick_params(labelbottom=False)
        ax.set_xlim(0.0, t_hi * 1.03)

        tu = times[used]
        zres = np.asarray(residuals, dtype=float) / np.asarray(sigma, dtype=float)
        if tu.size:
            order = np.argsort(tu)
            _, uf_u = curve_band(tu[order] + time_origin, params, cov)
            half = z * uf_u / np.asarray(sigma, dtype=float)[order]
            axr.fill_between(tu[order], -half, half, color=PALETTE["band"], alpha=0.8, lw=0)
            axr.plot(tu, zres, "o", ms=2.8, color=PALETTE["data"])
            lim = max(3.0, float(np.nanmax(np.abs(zres))) * 1.15) if zres.size else 3.0
            axr.set_ylim(-lim, lim)
        for y, ls in ((0.0, "-"), (2.0, ":"), (-2.0, ":")):
            axr.axhline(y, color=PALETTE["muted"], lw=0.7, ls=ls)
        axr.set_ylabel("(A − f) / u(A)")
        axr.set_xlabel("recorded time t (s)")
        return render(fig)


@dataclass(frozen=True)
class OrderPoint:
    """One run on the order plot: ln [OH] and ln k' (natural logs of values in mol/L and
    1/s) and the standard uncertainty of ln k'."""

    run: str
    ln_c: float
    ln_k: float
    u_ln_k: float


def order_figure(
    points: Sequence[OrderPoint],
    *,
    order: float,
    ln_kb: float,
    ln_k_order1: float | None,
    order_label: str,
    width_in: float = 5.0,
    height_in: float = 2.9,
) -> FigurePNG:
    """ln k' against ln [OH] with the fitted line ln k' = ln k_b + b ln [OH] and, when
    given, the line of order 1 through the weighted-mean k."""
    x = np.array([p.ln_c for p in points], dtype=float)
    y = np.array([p.ln_k for p in points], dtype=float)
    uy = np.array([p.u_ln_k for p in points], dtype=float)
    with style():
        fig = new_figure(width_in, height_in)
        ax = fig.add_subplot()
        span = float(x.max() - x.min()) if x.size > 1 else 1.0
        xx = np.linspace(x.min() - 0.12 * span, x.max() + 0.12 * span, 50)
        ax.plot(xx, ln_kb + order * xx, color=PALETTE["curve"], lw=1.3, label=mtext(order_label))
        if ln_k_order1 is not None:
            ax.plot(
                xx,
                ln_k_order1 + xx,
                color=PALETTE["muted"],
                lw=1.0,
                ls="--",
                label="order 1 through the weighted-mean k",
                zorder=3,
            )
        ax.errorbar(
            x,
            y,
            yerr=2 * uy,
            fmt="o",
            ms=4,
            color=PALETTE["data"],
            capsize=3,
            lw=1.0,
            label="runs (bars: ±2 u)",
        )
        for p in points:
            ax.annotate(
                mtext(p.run),
                (p.ln_c, p.ln_k),
                xytext=(6, -10),
                textcoords="offset points",
                fontsize=7,
                color=PALETTE["ink"],
            )
        ax.set_xlabel("ln([OH⁻] / (mol L⁻¹))")
        ax.set_ylabel("ln(k′ / s⁻¹)")
        ax.legend(loc="upper left")
        return render(fig)
