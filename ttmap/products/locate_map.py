"""The map of a source location: misfit, confidence region, gauges and their residuals.

Pure figure building (matplotlib, imported lazily); writing is the job's.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

__all__ = ["render_locate_map"]


def render_locate_map(
    excess: Any,
    grid: Any,
    water: Any,
    region: Any,
    gauges: Sequence[tuple[str, float, float, float]],
    best_xy: tuple[float, float],
    *,
    title: str,
    subtitle: str,
    caution: str,
    delta_chi2: float,
) -> Any:
    """A figure of the location.

    Parameters
    ----------
    excess : ndarray of shape grid.shape, float
        ``chi2 - chi2_min`` (NaN where excluded).
    grid : Grid
    water : ndarray of shape grid.shape, bool
        Water cells (land is drawn grey).
    region : shapely geometry or None
        Confidence region, map coordinates.
    gauges : sequence of (name, x, y, residual_min)
        Gauge positions in map coordinates and their residuals at the best
        cell (observed minus predicted, minutes; NaN if unknown).
    best_xy : (x, y)
    title, subtitle, caution : str
    delta_chi2 : float
        Contour level of the region (drawn as a line).
    """
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt
    from matplotlib.colors import LogNorm

    from ttmap.products._footer import caution_footer, draw_caution_footer

    import textwrap

    width_in, map_h_in = 8.0, 6.6
    footer = caution_footer(caution, width_in)
    fig_h = map_h_in + footer.height_in + 0.4
    fig = plt.figure(figsize=(width_in, fig_h), dpi=110)
    bottom = (footer.height_in + 0.85) / fig_h
    height = (map_h_in - 1.6) / fig_h
    ax = fig.add_axes((0.09, bottom, 0.72, height))
    cax = fig.add_axes((0.86, bottom, 0.022, height))
    w, s, e, n = grid.bounds
    ext = (w, e, s, n)
    land = np.where(np.asarray(water, bool), np.nan, 1.0)
    ax.imshow(land, extent=ext, origin="upper", cmap="Greys", vmin=0, vmax=2.5, interpolation="nearest")
    ex = np.asarray(excess, dtype=np.float64)
    shown = np.where(np.isfinite(ex), np.maximum(ex, 0.0) + 0.1, np.nan)
    vmax = max(float(np.nanpercentile(shown, 95)) if np.isfinite(shown).any() else 10.0, 10.0)
    im = ax.imshow(shown, extent=ext, origin="upper", cmap="magma_r",
                   norm=LogNorm(vmin=0.1, vmax=vmax), interpolation="nearest")
    cb = fig.colorbar(im, cax=cax)
    cb.set_label("misfit above the best cell (chi-square)")
    if region is not None and not region.is_empty:
        geoms = getattr(region, "geoms", [region])
        for k, poly in enumerate(geoms):
            xs, ys = poly.exterior.xy
            ax.plot(xs, ys, color="#00a0ff", lw=1.8, zorder=5,
                    label=f"confidence region (chi-square + {delta_chi2:.2f})" if k == 0 else None)
    for name, x, y, res in gauges:
        ax.plot([x], [y], marker="^", color="#0b6e2e", markersize=8, markeredgecolor="white",
                ls="none")
        text = name if not np.isfinite(res) else f"{name}\n{res:+.1f} min"
        ax.annotate(text, (x, y), xytext=(5, 4), textcoords="offset points", fontsize=7.5,
                    color="#063a18",
                    bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.75})
    ax.plot([best_xy[0]], [best_xy[1]], marker="+", color="black", markersize=12, mew=1.6,
            ls="none", label="best cell", zorder=6)
    if region is not None and not region.is_empty:
        # A zoom on the region, so that a small one stays readable.
        rx0, ry0, rx1, ry1 = region.bounds
        half = max(rx1 - rx0, ry1 - ry0) * 0.8 + 2.0 * max(abs(grid.transform.a), abs(grid.transform.e))
        cx, cy = (rx0 + rx1) / 2.0, (ry0 + ry1) / 2.0
        ins = ax.inset_axes((0.02, 0.62, 0.34, 0.36))
        ins.imshow(land, extent=ext, origin="upper", cmap="Greys", vmin=0, vmax=2.5,
                   interpolation="nearest")
        ins.imshow(shown, extent=ext, origin="upper", cmap="magma_r", norm=LogNorm(vmin=0.1, vmax=vmax),
                   interpolation="nearest")
        for poly in getattr(region, "geoms", [region]):
            xs, ys = poly.exterior.xy
            ins.plot(xs, ys, color="#00a0ff", lw=1.6)
        ins.plot([best_xy[0]], [best_xy[1]], marker="+", color="black", markersize=10, mew=1.5)
        ins.set_xlim(cx - half, cx + half)
        ins.set_ylim(cy - half, cy + half)
        ins.set_xticks([])
        ins.set_yticks([])
        ins.text(0.03, 0.04, "zoom on the region", transform=ins.transAxes, fontsize=7,
                 color="white")
        ax.indicate_inset_zoom(ins, edgecolor="#333333")
    ax.plot([], [], marker="^", color="#0b6e2e", ls="none", label="gauge (residual obs - pred)")
    ax.legend(loc="lower left", fontsize=8, framealpha=0.85).set_zorder(10)
    ax.set_xlim(w, e)
    ax.set_ylim(s, n)
    unit = "degrees" if grid.is_geographic else "map units"
    ax.set_xlabel(f"x ({unit})")
    ax.set_ylabel(f"y ({unit})")
    fig.text(0.09, 1.0 - 0.25 / fig_h, title, fontsize=12, weight="bold", va="top")
    fig.text(0.09, 1.0 - 0.58 / fig_h, textwrap.fill(subtitle, 115), fontsize=8, va="top")
    draw_caution_footer(fig, footer, fig_h)
    return fig
