"""The map of a source location: misfit, confidence region, gauges and their residuals.

Pure figure building (matplotlib, imported lazily); writing is the job's.

The misfit is drawn in the classes and colours of the misfit layer's QGIS
style (:func:`ttmap.products.locate_styles.misfit_steps`, the one definition):
a cell takes the first class whose bound is >= its ``chi2 - chi2_min`` (the
``DISCRETE`` rule of the style and the ``<=`` rule of the region), blues
inside the region, dark red to pale yellow outside. The classed colour bar
reads the class edges as the rise of chi-square above the best cell, with the
confidence level of each quantile edge.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

__all__ = ["misfit_colour_classes", "misfit_tick_labels", "render_locate_map"]


def _level_from_delta(delta_chi2: float) -> float:
    """The level whose 2-dof chi-square quantile is ``delta_chi2``: ``1 - exp(-delta / 2)``."""
    import math

    return float(-math.expm1(-0.5 * float(delta_chi2)))


def misfit_colour_classes(level: float, max_excess: float | None) -> tuple[Any, Any, Any, list[Any]]:
    """matplotlib colour map and norms of the misfit classes of the layer style.

    Parameters
    ----------
    level : float
        Confidence level of the run's region.
    max_excess : float or None
        Largest finite ``chi2 - chi2_min`` on the grid (as the job gives the
        style).

    Returns
    -------
    cmap : ListedColormap
        One colour per class of :func:`ttmap.products.locate_styles.misfit_steps`
        (the open last class as its "over" colour too).
    index_norm : BoundaryNorm
        Class index (from :func:`~ttmap.products.locate_styles.misfit_class_index`)
        to colour: the image is drawn with this one.
    value_norm : BoundaryNorm
        ``chi2 - chi2_min`` to colour, edges at the finite class bounds (0
        first), ``extend="max"``: the colour bar is drawn with this one.
    steps : list of MisfitStep
    """
    from matplotlib.colors import BoundaryNorm, ListedColormap

    from ttmap.products.locate_styles import misfit_steps

    steps = misfit_steps(level, max_excess=max_excess)
    colours = [st.color for st in steps]
    cmap = ListedColormap(colours, name="ttmap_locate_misfit").with_extremes(
        over=colours[-1], bad=(0.0, 0.0, 0.0, 0.0))
    n = len(steps)
    index_norm = BoundaryNorm(np.arange(n + 1) - 0.5, n)
    edges = [0.0, *[st.upper_excess for st in steps[:-1]]]
    value_norm = BoundaryNorm(edges, n, extend="max")
    return cmap, index_norm, value_norm, steps


def _edge_text(value: float) -> str:
    return f"{value:.2f}" if value < 20.0 else f"{value:g}"


def misfit_tick_labels(steps: Sequence[Any]) -> list[str]:
    """Colour-bar tick labels at ``0`` and each finite class bound: the bound, and its level if a quantile.

    Examples
    --------
    >>> from ttmap.products.locate_styles import misfit_steps
    >>> misfit_tick_labels(misfit_steps(0.95, max_excess=120.0))
    ['0 (best cell)', '2.30 (68.27 %)', '5.99 (95 %)', '9.21 (99 %)', '13.82 (99.9 %)', '25', '50', '100']
    """
    labels = ["0 (best cell)"]
    for st in steps[:-1]:
        text = _edge_text(st.upper_excess)
        if st.level is not None:
            text += f" ({100.0 * st.level:.4g} %)"
        labels.append(text)
    return labels


def _inset_corner(ax: Any, labels: Sequence[Any],
                  zoom_box: tuple[float, float, float, float]) -> tuple[float, float, float, float]:
    """Where the zoom inset goes (axes fractions): of the corners and edge middles, the first
    that hides the fewest gauges (marker or label) and the legend, and after that does not
    cover the zoomed area."""
    renderer = ax.figure.canvas.get_renderer()
    to_axes = ax.transAxes.inverted()
    boxes = []
    for lab in labels:  # each gauge: its label's box joined with its marker
        bb = to_axes.transform(lab.get_window_extent(renderer).get_points())
        mx, my = to_axes.transform(ax.transData.transform(lab.xy))
        boxes.append((min(bb[0, 0], mx), min(bb[0, 1], my), max(bb[1, 0], mx), max(bb[1, 1], my)))
    legend = ax.get_legend()
    if legend is not None:
        lb = to_axes.transform(legend.get_window_extent(renderer).get_points())
        boxes.append((lb[0, 0], lb[0, 1], lb[1, 0], lb[1, 1]))
    zx0, zy0 = to_axes.transform(ax.transData.transform(zoom_box[:2]))
    zx1, zy1 = to_axes.transform(ax.transData.transform(zoom_box[2:]))

    def overlaps(a: tuple[float, float, float, float], b: tuple[float, float, float, float]) -> bool:
        return min(a[2], b[2]) > max(a[0], b[0]) and min(a[3], b[3]) > max(a[1], b[1])

    def cost(box: tuple[float, float, float, float]) -> float:
        bx = (box[0], box[1], box[0] + box[2], box[1] + box[3])
        hidden = sum(overlaps(bx, g) for g in boxes)
        return 100.0 * hidden + overlaps(bx, (min(zx0, zx1), min(zy0, zy1), max(zx0, zx1), max(zy0, zy1)))

    places = ((0.02, 0.62, 0.34, 0.36), (0.64, 0.62, 0.34, 0.36), (0.64, 0.02, 0.34, 0.36),
              (0.33, 0.62, 0.34, 0.36), (0.64, 0.32, 0.34, 0.36), (0.02, 0.32, 0.34, 0.36),
              (0.33, 0.02, 0.34, 0.36), (0.02, 0.02, 0.34, 0.36))
    return min(places, key=cost)  # the first (upper left) on equal cost


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
    level: float | None = None,
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
        Chi-square rise bounding the region (its outline's legend entry).
    level : float, optional
        Confidence level of the region; the misfit classes are those of the
        layer style at this level. When None, the level whose 2-dof
        quantile is ``delta_chi2``.

    Returns
    -------
    matplotlib.figure.Figure
        The main map (axes 0, the misfit image first), the classed colour
        bar (gid ``"colorbar"``) and, with a region, a zoom inset.
    """
    import matplotlib

    matplotlib.use("Agg", force=False)
    import textwrap

    import matplotlib.patheffects as pe
    import matplotlib.pyplot as plt
    from matplotlib.cm import ScalarMappable

    from ttmap.products._footer import caution_footer, draw_caution_footer
    from ttmap.products.locate_styles import misfit_class_index
    from ttmap.products.maps import fit_colorbar_label

    lvl = _level_from_delta(delta_chi2) if level is None else float(level)
    ex = np.asarray(excess, dtype=np.float64)
    finite = ex[np.isfinite(ex)]
    cmap, index_norm, value_norm, steps = misfit_colour_classes(
        lvl, float(finite.max()) if finite.size else None)
    classes = np.ma.masked_invalid(np.where(np.isfinite(ex), misfit_class_index(ex, steps), np.nan))

    width_in, map_h_in = 8.0, 6.6
    footer = caution_footer(caution, width_in)
    fig_h = map_h_in + footer.height_in + 0.4
    fig = plt.figure(figsize=(width_in, fig_h), dpi=110)
    bottom = (footer.height_in + 0.85) / fig_h
    height = (map_h_in - 1.6) / fig_h
    left = 0.09 if grid.is_geographic else 0.14  # room for thousands-separated northings
    ax = fig.add_axes((left, bottom, 0.76 - left, height))
    cax = fig.add_axes((0.805, bottom, 0.022, height))
    cax.set_gid("colorbar")
    w, s, e, n = grid.bounds
    ext = (w, e, s, n)
    land = np.where(np.asarray(water, bool), np.nan, 1.0)
    ax.imshow(classes, extent=ext, origin="upper", cmap=cmap, norm=index_norm, interpolation="nearest",
              gid="misfit")
    ax.imshow(land, extent=ext, origin="upper", cmap="Greys", vmin=0, vmax=2.5, interpolation="nearest")
    cb = fig.colorbar(ScalarMappable(norm=value_norm, cmap=cmap), cax=cax, extend="max", spacing="uniform",
                      ticks=value_norm.boundaries)
    cb.ax.set_yticklabels(misfit_tick_labels(steps), fontsize=7.5)
    cb.ax.minorticks_off()
    cb.outline.set_linewidth(0.6)
    level_txt = f"{100.0 * lvl:.4g} %"
    cb.set_label(f"chi-square above the best cell: blues inside the {level_txt} region", fontsize=8.5)
    # The side of the region beside the bar, in the middle of its classes (equal heights).
    n_in = sum(st.inside for st in steps)
    n_bar = len(value_norm.boundaries) - 1
    cax.text(-0.45, 0.5 * n_in / n_bar, "inside", transform=cax.transAxes, rotation=90,
             ha="right", va="center", fontsize=7.5, color=steps[0].color, gid="class-side")
    # outside: the classes above the region, or only the open one (the triangle) at a high level
    y_out, va_out = (0.5 * (1.0 + n_in / n_bar), "center") if n_in < n_bar else (1.0, "bottom")
    cax.text(-0.45, y_out, "outside", transform=cax.transAxes, rotation=90,
             ha="right", va=va_out, fontsize=7.5, color="#7f2704", gid="class-side")
    if region is not None and not region.is_empty:
        geoms = getattr(region, "geoms", [region])
        for k, poly in enumerate(geoms):
            xs, ys = poly.exterior.xy
            ax.plot(xs, ys, color="#00a0ff", lw=1.8, zorder=5,
                    label=f"confidence region (chi-square + {delta_chi2:.2f})" if k == 0 else None)
    labels = []
    for name, x, y, res in gauges:
        ax.plot([x], [y], marker="^", color="#0b6e2e", markersize=8, markeredgecolor="white",
                ls="none")
        text = name if not np.isfinite(res) else f"{name}\n{res:+.1f} min"
        # Label on the side away from the best cell, clear of it and of the zoom box.
        left = x < best_xy[0]
        labels.append(ax.annotate(
            text, (x, y), xytext=(-5 if left else 5, 4), textcoords="offset points", fontsize=7.5,
            color="#063a18", ha="right" if left else "left",
            bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.75}))
    halo = [pe.withStroke(linewidth=3.2, foreground="white")]
    ax.plot([best_xy[0]], [best_xy[1]], marker="+", color="black", markersize=12, mew=1.6,
            ls="none", label="best cell", zorder=6, path_effects=halo)
    ax.plot([], [], marker="^", color="#0b6e2e", ls="none", label="gauge (residual obs - pred)")
    ax.legend(loc="lower left", fontsize=8, framealpha=0.85).set_zorder(10)
    ax.set_xlim(w, e)
    ax.set_ylim(s, n)
    from ttmap.products.maps import label_map_axes

    label_map_axes(ax, grid.is_geographic)
    fig.text(0.09, 1.0 - 0.25 / fig_h, title, fontsize=12, weight="bold", va="top")
    fig.text(0.09, 1.0 - 0.58 / fig_h, textwrap.fill(subtitle, 115), fontsize=8, va="top")
    draw_caution_footer(fig, footer, fig_h)
    ax.apply_aspect()  # the bar as tall as the map drawn (equal aspect)
    box = ax.get_position()
    cax.set_position((0.805, box.y0, 0.022, box.height))
    # A label that would run past the map's left edge, or on the right into the colour bar's
    # "inside/outside" words, goes to the other side (measured on the map as drawn, after its
    # equal-aspect shrink).
    renderer = fig.canvas.get_renderer()  # type: ignore[attr-defined]  # Agg canvas
    frame = ax.get_window_extent(renderer)
    right_limit = cax.get_window_extent(renderer).x0 - 18.0
    for lab in labels:
        ext_px = lab.get_window_extent(renderer)
        if ext_px.x1 > right_limit or ext_px.x0 < frame.x0:
            right = ext_px.x1 > right_limit
            lab.set_horizontalalignment("right" if right else "left")
            lab.xyann = (-5.0 if right else 5.0, lab.xyann[1])
    def draw_zoom() -> None:
        zoom_half = 0.0
        if region is not None and not region.is_empty:
            rx0, ry0, rx1, ry1 = region.bounds
            zoom_half = max(rx1 - rx0, ry1 - ry0) * 0.8 + 2.0 * max(abs(grid.transform.a), abs(grid.transform.e))
        if 0.0 < 2.0 * zoom_half < 0.6 * min(e - w, n - s):
            # A zoom on the region, so that a small one stays readable (none when it would not be a zoom).
            half = zoom_half
            cx, cy = (rx0 + rx1) / 2.0, (ry0 + ry1) / 2.0
            ins = ax.inset_axes(_inset_corner(ax, labels, (cx - half, cy - half, cx + half, cy + half)))
            ins.imshow(classes, extent=ext, origin="upper", cmap=cmap, norm=index_norm,
                       interpolation="nearest", gid="misfit")
            ins.imshow(land, extent=ext, origin="upper", cmap="Greys", vmin=0, vmax=2.5,
                       interpolation="nearest")
            for poly in getattr(region, "geoms", [region]):
                xs, ys = poly.exterior.xy
                ins.plot(xs, ys, color="#00a0ff", lw=1.6)
            ins.plot([best_xy[0]], [best_xy[1]], marker="+", color="black", markersize=10, mew=1.5,
                     path_effects=halo)
            ins.set_xlim(cx - half, cx + half)
            ins.set_ylim(cy - half, cy + half)
            ins.set_xticks([])
            ins.set_yticks([])
            ins.text(0.03, 0.04, "zoom on the region", transform=ins.transAxes, fontsize=7,
                     color="black", bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.8})
            ax.indicate_inset_zoom(ins, edgecolor="#333333")

    draw_zoom()  # last: its place is chosen to hide no gauge, label or legend as finally placed
    fig.canvas.draw()
    fit_colorbar_label(cb.ax.yaxis.label, float(cax.get_window_extent().height))
    return fig
