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

    width_in, map_h_in = 8.0, 6.2
    footer = caution_footer(caution, width_in)
    fig_h = map_h_in + footer.height_in
    fig = plt.figure(figsize=(width_in, fig_h), dpi=110)
    ax = fig.add_axes((0.08, (footer.height_in + 0.45) / fig_h, 0.74, (map_h_in - 1.0) / fig_h))
    cax = fig.add_axes((0.85, (footer.height_in + 0.45) / fig_h, 0.025, (map_h_in - 1.0) / fig_h))
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
            ax.plot(xs, ys, color="#00a0ff", lw=1.8,
                    label=f"confidence region (chi-square + {delta_chi2:.2f})" if k == 0 else None)
    for name, x, y, res in gauges:
        ax.plot([x], [y], marker="^", color="#0b6e2e", markersize=8, markeredgecolor="white",
                ls="none")
        text = name if not np.isfinite(res) else f"{name}\n{res:+.1f} min"
        ax.annotate(text, (x, y), xytext=(5, 4), textcoords="offset points", fontsize=7.5,
                    color="#063a18",
                    bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.75})
    ax.plot([best_xy[0]], [best_xy[1]], marker="*", color="#ffd400", markersize=16,
            markeredgecolor="black", ls="none", label="best cell")
    ax.plot([], [], marker="^", color="#0b6e2e", ls="none", label="gauge (residual obs - pred)")
    ax.legend(loc="lower left", fontsize=8, framealpha=0.85)
    ax.set_xlim(w, e)
    ax.set_ylim(s, n)
    unit = "degrees" if grid.is_geographic else "map units"
    ax.set_xlabel(f"x ({unit})")
    ax.set_ylabel(f"y ({unit})")
    fig.text(0.08, 1.0 - 0.32 / fig_h, title, fontsize=12, weight="bold", va="top")
    fig.text(0.08, 1.0 - 0.62 / fig_h, subtitle, fontsize=8.5, va="top")
    draw_caution_footer(fig, footer, fig_h)
    return fig
