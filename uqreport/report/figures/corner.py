"""A corner plot of posterior draws drawn with matplotlib alone.

Diagonal: the marginal histogram of each parameter with its median and equal-tailed 95 %
limits.  Below the diagonal: the joint density of each pair on a 2-D histogram (lightly
smoothed), with the contours that enclose about 39 % and 86 % of the draws (the 1- and
2-sigma regions of a bivariate normal).  Above the diagonal: empty.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
from numpy.typing import NDArray

from ._common import PALETTE, FigurePNG, mtext, new_figure, render, style

__all__ = ["MAX_CORNER_PARAMETERS", "corner_figure", "thin_draws"]

#: More parameters than this do not fit a page legibly; the first ones are drawn.
MAX_CORNER_PARAMETERS = 6
_MAX_POINTS = 40_000
_MASSES = (0.865, 0.393)


def thin_draws(x: NDArray[np.float64], max_points: int = _MAX_POINTS) -> NDArray[np.float64]:
    """Every n-th draw so that at most ``max_points`` remain (deterministic)."""
    x = np.asarray(x, dtype=float).ravel()
    step = max(1, int(np.ceil(x.size / max_points)))
    return x[::step]


def _sup(e: int) -> str:
    return str(e).translate(str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻"))


def _smooth(h: NDArray[np.float64]) -> NDArray[np.float64]:
    k = np.array([0.25, 0.5, 0.25])
    p = np.pad(h, 1, mode="edge")
    p = k[0] * p[:-2, :] + k[1] * p[1:-1, :] + k[2] * p[2:, :]
    p = k[0] * p[:, :-2] + k[1] * p[:, 1:-1] + k[2] * p[:, 2:]
    return p


def _levels(h: NDArray[np.float64]) -> list[float]:
    flat = np.sort(h.ravel())[::-1]
    cum = np.cumsum(flat)
    cum /= cum[-1] if cum[-1] > 0 else 1.0
    out = []
    for m in _MASSES:
        i = int(np.searchsorted(cum, m))
        out.append(float(flat[min(i, flat.size - 1)]))
    lv = sorted(set(out))
    return lv if len(lv) == len(_MASSES) else [lv[0]]


def corner_figure(
    draws: Mapping[str, NDArray[np.float64]],
    names: Sequence[str],
    *,
    labels: Mapping[str, str] | None = None,
    size_in: float = 6.6,
    bins: int = 36,
) -> FigurePNG:
    """The corner plot of ``names`` (at most :data:`MAX_CORNER_PARAMETERS`) from ``draws``."""
    names = list(names)[:MAX_CORNER_PARAMETERS]
    labels = dict(labels or {})
    data = []
    for n in names:
        x = thin_draws(draws[n])
        med = float(np.median(np.abs(x))) if x.size else 0.0
        e = 3 * int(np.floor(np.log10(med) / 3)) if med > 0 and not 1e-1 <= med < 1e4 else 0
        if e:  # the power of ten in the label, not as an offset beside the ticks
            x = x / 10.0**e
            labels[n] = f"{labels.get(n, n)} (×10{_sup(e)})"
        data.append(x)
    d = len(names)
    with style():
        fig = new_figure(size_in, size_in)
        axes = fig.subplots(d, d, squeeze=False)
        ranges = []
        for x in data:
            lo, hi = np.quantile(x, [0.002, 0.998])
            if hi <= lo:
                lo, hi = lo - 0.5, hi + 0.5
            ranges.append((float(lo), float(hi)))
        for i in range(d):
            for j in range(d):
                ax = axes[i, j]
                if j > i:
                    ax.set_visible(False)
                    continue
                if i == j:
                    x = data[i]
                    ax.hist(
                        x,
                        bins=bins,
                        range=ranges[i],
                        histtype="stepfilled",
                        color=PALETTE["bar"],
                        alpha=0.35,
                        lw=0,
                    )
                    ax.hist(
                        x,
                        bins=bins,
                        range=ranges[i],
                        histtype="step",
                        color=PALETTE["data"],
                        lw=0.9,
                    )
                    q = np.quantile(x, [0.025, 0.5, 0.975])
                    for v, ls in zip(q, (":", "-", ":"), strict=True):
                        ax.axvline(float(v), color=PALETTE["curve"], lw=0.8, ls=ls)
                    ax.set_yticks([])
                    ax.set_xlim(ranges[i])
                else:
                    x, y = data[j], data[i]
                    h, xe, ye = np.histogram2d(x, y, bins=bins, range=[ranges[j], ranges[i]])
                    h = _smooth(h)
                    ax.pcolormesh(xe, ye, h.T, cmap="Greys", shading="flat", rasterized=True)
                    xc = 0.5 * (xe[1:] + xe[:-1])
                    yc = 0.5 * (ye[1:] + ye[:-1])
                    ax.contour(
                        xc, yc, h.T, levels=_levels(h), colors=[PALETTE["data"]], linewidths=0.8
                    )
                    ax.set_xlim(ranges[j])
                    ax.set_ylim(ranges[i])
                ax.grid(False)
                ax.tick_params(labelsize=5.8, length=2)
                ax.locator_params(nbins=3)
                if i == d - 1:
                    ax.set_xlabel(mtext(labels.get(names[j], names[j])), fontsize=6.8)
                    for lab in ax.get_xticklabels():
                        lab.set_rotation(40)
                        lab.set_horizontalalignment("right")
                else:
                    ax.tick_params(labelbottom=False)
                if j == 0 and i > 0:
                    ax.set_ylabel(mtext(labels.get(names[i], names[i])), fontsize=6.8)
                else:
                    ax.tick_params(labelleft=False)
        return render(fig)
