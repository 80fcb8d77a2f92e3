"""Arrival-time maps as matplotlib figures (PNG and PDF).

matplotlib is imported inside the functions, never at module import, so that
the command line starts fast. Figures are built with the object-oriented API
on an Agg canvas and are never registered with ``pyplot``: no GUI backend is
touched, no global figure list grows, and a figure is freed as soon as the
caller drops it (``pyplot.close(fig)`` is harmless but not needed).

Coordinates: the arrival field and the land mask are raster arrays placed by
an ``affine.Affine`` transform (rasterio convention: pixel-corner
``(col, row)`` to map ``(x, y)``). Isochrone lines, the source geometry and
the sites are given in the same map coordinates (the raster's CRS).
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ttmap.errors import InputDataError
from ttmap.products._footer import caution_footer, draw_caution_footer
from ttmap.products.cautions import CAUTION_SHORT
from ttmap.products.isochrones import IsochroneLine
from ttmap.products.palette import ARRIVAL_CMAP

if TYPE_CHECKING:
    from affine import Affine
    from matplotlib.axes import Axes
    from matplotlib.colors import Colormap
    from matplotlib.figure import Figure
    from shapely.geometry.base import BaseGeometry

__all__ = [
    "COLORBAR_LABEL",
    "DEFAULT_CMAP",
    "draw_wave_paths",
    "render_arrival_map",
    "save_figure",
]

#: Default colour map: the arrival ramp shared with the style files
#: (:data:`ttmap.products.palette.ARRIVAL_CMAP`), so a map and a GIS layer of
#: the same result show the same colours. Isochrones are drawn dark with a
#: faint white casing, which keeps them visible at both ends of the ramp.
DEFAULT_CMAP: str = ARRIVAL_CMAP

#: Label of the colour bar.
COLORBAR_LABEL = "Arrival time (minutes after origin)"

_LAND_RGBA = (0.80, 0.79, 0.77, 1.0)  # warm neutral grey
_UNREACHED_RGB = "#f2f4f7"  # water with no arrival: near white, cool
_COAST_COLOR = "#3a3a3a"
_LINE_COLOR = "#141414"
_SOURCE_COLOR = "#e8175d"  # red-magenta: not in the arrival ramp, clear on it
_MAX_LABELS = 14
_MAX_LINE_VERTICES = 300_000  # above this, lines are simplified for drawing
_PNG_COMPRESS_LEVEL = 3


# ---------------------------------------------------------------------------
# Checks and preparation (pure numpy)
# ---------------------------------------------------------------------------


def _check_inputs(
    time_min: ArrayLike,
    transform: Affine,
    land_mask: ArrayLike | None,
    max_pixels: int,
    figsize: tuple[float, float],
    dpi: float,
) -> tuple[NDArray[np.float64], NDArray[np.bool_] | None]:
    field = np.asarray(time_min)
    if field.ndim != 2 or field.size == 0:
        raise InputDataError(
            f"time_min must be a non-empty 2-D array (rows, cols), got shape {field.shape}; "
            "pass one band of the arrival-time raster"
        )
    if not np.issubdtype(field.dtype, np.number) or np.issubdtype(field.dtype, np.complexfloating):
        raise InputDataError(
            f"time_min must hold real numbers (minutes), got dtype {field.dtype}; "
            "convert it with numpy.asarray(time_min, dtype=float)"
        )
    coeffs = tuple(transform)[:6] if transform is not None else ()
    if len(coeffs) != 6 or not all(math.isfinite(v) for v in coeffs):
        raise InputDataError(
            f"transform must be an affine.Affine with finite coefficients, got {transform!r}; "
            "pass the raster's transform (rasterio: dataset.transform)"
        )
    if coeffs[0] * coeffs[4] - coeffs[1] * coeffs[3] == 0.0:
        raise InputDataError(f"transform {transform!r} is degenerate (determinant 0)")
    mask = None
    if land_mask is not None:
        mask = np.asarray(land_mask)
        if mask.shape != field.shape:
            raise InputDataError(
                f"land_mask has shape {mask.shape} but time_min has shape {field.shape}; "
                "pass the land mask of the same grid"
            )
        if mask.dtype != np.bool_:
            mask = mask != 0
    if int(max_pixels) < 1:
        raise InputDataError(f"max_pixels must be >= 1, got {max_pixels!r}")
    if len(figsize) != 2 or not all(math.isfinite(v) and v > 0 for v in figsize):
        raise InputDataError(
            f"figsize must be two positive inches (width, height), got {figsize!r}"
        )
    if not (math.isfinite(dpi) and dpi > 0):
        raise InputDataError(f"dpi must be a positive number, got {dpi!r}")
    return field, mask


def _decimation(shape: tuple[int, int], max_pixels: int) -> int:
    """Stride that brings ``rows * cols`` down to at most ``max_pixels``."""
    rows, cols = shape
    stride = max(1, math.ceil(math.sqrt(rows * cols / max_pixels)))
    while math.ceil(rows / stride) * math.ceil(cols / stride) > max_pixels:
        stride += 1
    return stride


def _display_stride(shape: tuple[int, int], box_px: tuple[float, float]) -> int:
    """Largest stride that still leaves at least one cell per drawn pixel on both axes.

    ``box_px`` is the drawn map box, (width, height) in pixels. A grid finer
    than the box is sampled down to about the box's size: the image then has
    as many cells as the PNG has pixels, or a little more, and nothing a
    reader can see is lost (``imshow`` would pick one cell per pixel anyway).

    >>> _display_stride((2000, 2000), (800.0, 800.0))
    2
    >>> _display_stride((500, 700), (1100.0, 790.0))
    1
    """
    rows, cols = shape
    width_px, height_px = box_px
    if width_px <= 0 or height_px <= 0:
        return 1
    return max(1, int(min(cols / width_px, rows / height_px)))


def _arrival_rgba(
    shown: NDArray[np.float64],
    land: NDArray[np.bool_] | None,
    colormap: Colormap,
    norm: Any,
) -> NDArray[np.uint8]:
    """The drawn image as RGBA bytes: arrival colours, land grey, no arrival transparent.

    One colour-mapped image instead of an arrival image and a land image:
    matplotlib then resamples bytes once instead of normalising and
    colour-mapping two float arrays at display resolution.
    """
    rgba: NDArray[np.uint8] = colormap(norm(np.ma.masked_invalid(shown)), bytes=True)
    if land is not None:
        rgba[land] = np.round(np.asarray(_LAND_RGBA) * 255.0).astype(np.uint8)
    return rgba


def _decimate(array: NDArray[Any], transform: Affine, stride: int) -> tuple[NDArray[Any], Affine]:
    """Take every ``stride``-th cell (the middle of each block) and the matching transform."""
    from affine import Affine

    if stride == 1:
        return array, transform
    rows, cols = array.shape
    row0 = min(stride // 2, rows - 1)
    col0 = min(stride // 2, cols - 1)
    sub = array[row0::stride, col0::stride]
    # Pixel (i, j) of the result is centred on original cell (row0 + i*s, col0 + j*s).
    shift_col = col0 + 0.5 - stride / 2.0
    shift_row = row0 + 0.5 - stride / 2.0
    return sub, transform @ Affine.translation(shift_col, shift_row) @ Affine.scale(stride)


def _grid_bounds(transform: Affine, shape: tuple[int, int]) -> tuple[float, float, float, float]:
    """(xmin, xmax, ymin, ymax) of the whole grid in map coordinates."""
    rows, cols = shape
    corners = np.array([[0, 0], [cols, 0], [0, rows], [cols, rows]], dtype=np.float64)
    a, b, c, d, e, f = tuple(transform)[:6]
    xs = a * corners[:, 0] + b * corners[:, 1] + c
    ys = d * corners[:, 0] + e * corners[:, 1] + f
    return float(xs.min()), float(xs.max()), float(ys.min()), float(ys.max())


def _index_to_map(points: NDArray[np.float64], transform: Affine) -> NDArray[np.float64]:
    """contourpy (col, row) centre-index points to map (x, y)."""
    a, b, c, d, e, f = tuple(transform)[:6]
    col = points[:, 0] + 0.5
    row = points[:, 1] + 0.5
    return np.column_stack([a * col + b * row + c, d * col + e * row + f])


def _coastline_segments(land: NDArray[np.bool_], transform: Affine) -> list[NDArray[np.float64]]:
    """The land/water edge: the 0.5 contour of the land mask, in map coordinates."""
    import contourpy

    if not land.any() or land.all():
        return []
    generator = contourpy.contour_generator(
        z=land.astype(np.float64), name="serial", line_type=contourpy.LineType.Separate
    )
    return [_index_to_map(np.asarray(seg), transform) for seg in generator.lines(0.5)]


def _line_parts(geometry: BaseGeometry, simplify_m: float) -> list[NDArray[np.float64]]:
    import shapely

    if simplify_m > 0.0:
        geometry = shapely.simplify(geometry, simplify_m, preserve_topology=False)
    parts = shapely.get_parts(geometry)
    coords, index = shapely.get_coordinates(parts, return_index=True)
    if coords.size == 0:
        return []
    splits = np.flatnonzero(np.diff(index)) + 1
    return [c for c in np.split(coords, splits) if len(c) >= 2]


def _tick_step_min(vmax_min: float) -> float:
    """A step in minutes that gives at most about 8 colour-bar ticks."""
    for step in (1, 2, 5, 10, 15, 20, 30, 60, 120, 180, 240, 360, 720, 1440):
        if vmax_min / step <= 8:
            return float(step)
    return 1440.0 * math.ceil(vmax_min / (8 * 1440.0))


def _resolve_cmap(cmap: str | Colormap) -> Colormap:
    import matplotlib

    base: Colormap
    if isinstance(cmap, str):
        try:
            base = matplotlib.colormaps[cmap]
        except KeyError as err:
            raise InputDataError(
                f"unknown colour map {cmap!r}; use a matplotlib colour map name such as "
                f"{DEFAULT_CMAP!r} (the default), 'viridis' or 'cividis'"
            ) from err
    else:
        base = cmap
    return base.with_extremes(bad=(0.0, 0.0, 0.0, 0.0))


# ---------------------------------------------------------------------------
# Drawing helpers
# ---------------------------------------------------------------------------


def _draw_raster(
    ax: Axes,
    values: NDArray[Any],
    transform: Affine,
    *,
    cmap: Colormap | None,
    norm: Any,
    zorder: float,
) -> Any:
    """Draw a raster with imshow (axis-aligned grids) or pcolormesh (rotated).

    ``values`` of shape (rows, cols, 4), uint8, are drawn as RGBA as they are
    (``cmap`` and ``norm`` None).
    """
    a, b, _, d, e, _ = tuple(transform)[:6]
    rows, cols = values.shape[:2]
    if b == 0.0 and d == 0.0:
        # Flip so that row 0 is north and col 0 is west, then imshow with an extent.
        if e > 0:
            values = values[::-1, :]
        if a < 0:
            values = values[:, ::-1]
        xmin, xmax, ymin, ymax = _grid_bounds(transform, (rows, cols))
        return ax.imshow(
            values,
            extent=(xmin, xmax, ymin, ymax),
            origin="upper",
            cmap=cmap,
            norm=norm,
            interpolation="nearest",
            aspect="auto",
            zorder=zorder,
        )
    if values.ndim == 3:
        raise InputDataError("internal: RGBA images are drawn only on axis-aligned grids")
    cc, rr = np.meshgrid(np.arange(cols + 1.0), np.arange(rows + 1.0))
    a_, b_, c_, d_, e_, f_ = tuple(transform)[:6]
    xx = a_ * cc + b_ * rr + c_
    yy = d_ * cc + e_ * rr + f_
    return ax.pcolormesh(
        xx, yy, values, cmap=cmap, norm=norm, shading="flat", rasterized=True, zorder=zorder
    )


def _label_positions(
    lines: Sequence[IsochroneLine],
    parts_by_line: Sequence[list[NDArray[np.float64]]],
    bounds: tuple[float, float, float, float],
    aspect: float,
    obstacles_xy: Sequence[tuple[float, float]] = (),
) -> list[tuple[str, float, float, float]]:
    """Choose (label, x, y, angle_deg) for a readable subset of the lines.

    Labels keep a minimum distance from each other and from ``obstacles_xy``
    (the source and the sites), and stay off the map edges.
    """
    xmin, xmax, ymin, ymax = bounds
    span_x = xmax - xmin
    span_y = (ymax - ymin) * aspect
    scale = max(span_x, span_y)

    def norm_xy(x: float, y: float) -> tuple[float, float]:
        return (x - xmin) / scale, (y - ymin) * aspect / scale

    order = [i for i, parts in enumerate(parts_by_line) if parts]
    step = max(1, math.ceil(len(order) / _MAX_LABELS))
    chosen = order[::step]
    min_gap = 0.07  # fraction of the longer map side between two labels
    placed: list[tuple[float, float]] = [norm_xy(x, y) for x, y in obstacles_xy]
    out: list[tuple[str, float, float, float]] = []
    fractions = (0.5, 0.3, 0.7, 0.15, 0.85, 0.4, 0.6, 0.05, 0.95)
    for k, i in enumerate(chosen):
        parts = parts_by_line[i]
        lengths = [float(np.hypot(*np.diff(p, axis=0).T).sum()) for p in parts]
        best = int(np.argmax(lengths))
        if lengths[best] < 0.04 * scale:
            continue
        part = parts[best]
        seg = np.hypot(*np.diff(part, axis=0).T)
        cum = np.concatenate([[0.0], np.cumsum(seg)])
        # Rotate the start so neighbouring levels do not stack their labels.
        shifted = fractions[k % len(fractions) :] + fractions[: k % len(fractions)]
        for frac in shifted:
            target = frac * cum[-1]
            j = int(np.clip(np.searchsorted(cum, target) - 1, 0, len(seg) - 1))
            t = 0.0 if seg[j] == 0 else (target - cum[j]) / seg[j]
            x, y = part[j] + t * (part[j + 1] - part[j])
            nx, ny = norm_xy(x, y)
            if not (0.03 < nx < span_x / scale - 0.03 and 0.03 < ny < span_y / scale - 0.03):
                continue
            if any(math.hypot(nx - px, ny - py) < min_gap for px, py in placed):
                continue
            # direction from a few vertices either side, in display proportions
            j0, j1 = max(0, j - 3), min(len(part) - 1, j + 4)
            dx, dy = part[j1] - part[j0]
            angle = math.degrees(math.atan2(dy * aspect, dx))
            if angle > 90:
                angle -= 180
            elif angle < -90:
                angle += 180
            placed.append((nx, ny))
            out.append((lines[i].label, float(x), float(y), angle))
            break
    return out


def _obstacle_points(
    source_geometry: BaseGeometry | None, sites: Sequence[tuple[str, float, float]] | None
) -> list[tuple[float, float]]:
    """Points where no isochrone label should go: along the source, and at the sites."""
    import shapely

    points: list[tuple[float, float]] = []
    if source_geometry is not None and not source_geometry.is_empty:
        for part in shapely.get_parts(shapely.get_parts(source_geometry)):
            if part.is_empty:
                continue
            if part.geom_type == "Point":
                points.append((part.x, part.y))
                continue
            outline = part.exterior if part.geom_type == "Polygon" else part
            along = shapely.line_interpolate_point(
                outline, np.linspace(0.0, 1.0, 17), normalized=True
            )
            points.extend(map(tuple, shapely.get_coordinates(along)))
            centre = part.centroid
            points.append((centre.x, centre.y))
    for item in sites or []:
        try:
            points.append((float(item[1]), float(item[2])))
        except (TypeError, ValueError, IndexError):
            continue  # reported by _draw_sites
    return points


def _draw_source(ax: Axes, geometry: BaseGeometry) -> list[Any]:
    """Draw a source geometry; return legend handles."""
    import shapely
    from matplotlib.lines import Line2D

    handles: list[Any] = []
    parts = [p for p in shapely.get_parts(shapely.get_parts(geometry)) if not p.is_empty]
    kinds = set()
    for part in parts:
        kind = part.geom_type
        if kind == "Point":
            ax.plot(
                part.x,
                part.y,
                marker="*",
                markersize=17,
                markerfacecolor=_SOURCE_COLOR,
                markeredgecolor="black",
                markeredgewidth=0.9,
                linestyle="none",
                zorder=8,
            )
            kinds.add("point")
        elif kind in ("LineString", "LinearRing"):
            xy = np.asarray(part.coords)
            ax.plot(
                xy[:, 0], xy[:, 1], color="black", linewidth=4.2, zorder=7, solid_capstyle="round"
            )
            ax.plot(
                xy[:, 0],
                xy[:, 1],
                color=_SOURCE_COLOR,
                linewidth=2.6,
                zorder=7.1,
                solid_capstyle="round",
            )
            kinds.add("line")
        elif kind == "Polygon":
            for ring in [part.exterior, *part.interiors]:
                xy = np.asarray(ring.coords)
                ax.fill(
                    xy[:, 0],
                    xy[:, 1],
                    facecolor=_SOURCE_COLOR,
                    alpha=0.25,
                    zorder=6.9,
                    edgecolor="none",
                )
                ax.plot(xy[:, 0], xy[:, 1], color="black", linewidth=3.0, zorder=7)
                ax.plot(xy[:, 0], xy[:, 1], color=_SOURCE_COLOR, linewidth=1.8, zorder=7.1)
            kinds.add("area")
        else:
            raise InputDataError(
                f"source_geometry part of type {kind} cannot be drawn; "
                "pass a Point, LineString or Polygon (or Multi- of them) in map coordinates"
            )
    if "point" in kinds:
        handles.append(
            Line2D(
                [],
                [],
                marker="*",
                markersize=12,
                markerfacecolor=_SOURCE_COLOR,
                markeredgecolor="black",
                linestyle="none",
                label="Source",
            )
        )
    if kinds & {"line", "area"}:
        handles.append(
            Line2D(
                [],
                [],
                color=_SOURCE_COLOR,
                linewidth=2.6,
                label="Source area" if "area" in kinds else "Source line",
            )
        )
    return handles


def _draw_sites(ax: Axes, sites: Sequence[tuple[str, float, float]]) -> list[Any]:
    from matplotlib import patheffects
    from matplotlib.lines import Line2D

    if not sites:
        return []
    names, xs, ys = [], [], []
    for item in sites:
        try:
            name, x, y = item
            xf, yf = float(x), float(y)
        except (TypeError, ValueError) as err:
            raise InputDataError(
                f"each site must be (name, x, y) in map coordinates, got {item!r}"
            ) from err
        names.append(str(name))
        xs.append(xf)
        ys.append(yf)
    ax.plot(
        xs,
        ys,
        marker="o",
        markersize=5.5,
        markerfacecolor="white",
        markeredgecolor="black",
        markeredgewidth=1.1,
        linestyle="none",
        zorder=9,
    )
    halo = [patheffects.withStroke(linewidth=2.6, foreground="white")]
    x0, x1 = sorted(ax.get_xlim())
    for name, x, y in zip(names, xs, ys, strict=True):
        # Labels of sites in the right quarter go to the left, so the frame does not cut them.
        right = (x - x0) > 0.75 * (x1 - x0)
        ax.annotate(
            name,
            (x, y),
            xytext=(-5, 4) if right else (5, 4),
            ha="right" if right else "left",
            textcoords="offset points",
            fontsize=8,
            color="black",
            zorder=9.5,
            path_effects=halo,
            clip_on=True,
        )
    return [
        Line2D(
            [],
            [],
            marker="o",
            markersize=5.5,
            markerfacecolor="white",
            markeredgecolor="black",
            linestyle="none",
            label="Site",
        )
    ]


# ---------------------------------------------------------------------------
# Public functions
# ---------------------------------------------------------------------------


def render_arrival_map(
    time_min: ArrayLike,
    transform: Affine,
    *,
    land_mask: ArrayLike | None,
    lines: Sequence[IsochroneLine],
    source_geometry: BaseGeometry | None = None,
    sites: Sequence[tuple[str, float, float]] | None = None,
    title: str,
    subtitle: str = "",
    is_geographic: bool,
    caution: str = CAUTION_SHORT,
    max_pixels: int = 2_000_000,
    cmap: str | Colormap = DEFAULT_CMAP,
    figsize: tuple[float, float] = (10.0, 8.0),
    dpi: float = 150.0,
) -> Figure:
    """Draw an arrival-time map: colours, land, coast, isochrones, source, sites, caution.

    Parameters
    ----------
    time_min : ndarray of shape (rows, cols), float, minutes
        Arrival time after origin; NaN on land and where the wave never
        arrives.
    transform : affine.Affine
        Maps pixel-corner ``(col, row)`` to map ``(x, y)`` (rasterio
        convention). North-up, south-up and mirrored grids are drawn as
        images; rotated or sheared grids as a mesh.
    land_mask : ndarray of shape (rows, cols), bool, or None
        True on land; drawn grey with its edge as the coastline. None draws
        no land (NaN cells then show as unreached water).
    lines : sequence of IsochroneLine
        Isochrones in map coordinates, from
        :func:`ttmap.products.isochrones.isochrone_lines`; drawn as thin dark
        lines, a readable subset labelled ``h:mm``.
    source_geometry : shapely geometry, optional
        The source in map coordinates (the raster's CRS): a Point is drawn as
        a star, a LineString as a thick line, a Polygon as an outline with a
        light fill; Multi- geometries and collections of these work too.
    sites : sequence of (name, x, y), optional
        Named places in map coordinates, drawn as circles with their names.
    title : str
        Main title, e.g. the scenario name.
    subtitle : str, optional
        Second line under the title, e.g. the source and speed model.
    is_geographic : bool
        True if ``x, y`` are longitude, latitude in degrees: axes are labelled
        in degrees and stretched by ``1 / cos(mid-latitude)`` so that shapes
        near the centre are not squashed. False for projected metres.
    caution : str, optional
        Text of the caution footer, wrapped to the figure width. A text of
        several lines (such as
        :data:`ttmap.products.cautions.CAUTION_TEXT`) is shown as a list, one
        bullet per line.
    max_pixels : int, optional
        Largest number of raster cells drawn. A grid with more cells, or
        (north-up, south-up or mirrored grids) with at least twice as many
        cells per axis as the drawn map box has pixels, is sampled every
        ``s``-th row and column (the middle cell of each ``s x s`` block),
        with ``s`` as large as keeps at least one cell per pixel. Only the
        picture is sampled: isochrones are drawn as given.
    cmap : str or matplotlib Colormap, optional
        Colour map of the arrival times, first colour = earliest. The default
        is the ramp shared with the style files,
        :data:`ttmap.products.palette.ARRIVAL_CMAP`.
    figsize : (float, float), optional
        Figure width and height, inches.
    dpi : float, optional
        Resolution used by :func:`save_figure` for PNG files.

    Returns
    -------
    matplotlib.figure.Figure
        A figure on an Agg canvas, not registered with ``pyplot``.

    Raises
    ------
    InputDataError
        If the arrays do not match, the transform is degenerate, the colour
        map is unknown, or a site or source part cannot be drawn.

    Notes
    -----
    The colour scale runs from 0 to the latest arrival in ``time_min``; the
    isochrone levels are marked on the colour bar as dark ticks. Lines with
    more than 300 000 vertices in total are simplified to about a third of a
    drawn pixel before drawing.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.cm import ScalarMappable
    from matplotlib.collections import LineCollection
    from matplotlib.colors import ListedColormap, Normalize
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from matplotlib.ticker import FuncFormatter, MultipleLocator

    field, land = _check_inputs(time_min, transform, land_mask, max_pixels, figsize, dpi)
    colormap = _resolve_cmap(cmap)

    # --- data preparation ---------------------------------------------------
    finite = np.isfinite(field)
    has_values = bool(finite.any())
    vmax_min = float(np.max(field, where=finite, initial=-np.inf)) if has_values else 60.0
    vmin_min = 0.0
    if vmax_min <= vmin_min:
        vmax_min = vmin_min + 1.0
    norm = Normalize(vmin=vmin_min, vmax=vmax_min)
    bounds = _grid_bounds(transform, field.shape)
    xmin, xmax, ymin, ymax = bounds
    if is_geographic:
        mid_lat = float(np.clip(0.5 * (ymin + ymax), -85.0, 85.0))
        aspect = 1.0 / math.cos(math.radians(mid_lat))
    else:
        aspect = 1.0

    # --- figure layout (inches -> figure fractions) ---------------------------
    fig_w, fig_h = float(figsize[0]), float(figsize[1])
    fig = Figure(figsize=(fig_w, fig_h), dpi=dpi, facecolor="white")
    FigureCanvasAgg(fig)
    footer = caution_footer(caution, fig_w)
    footer_top = footer.top_in(0.06)
    top_h = 0.62 + (0.25 if subtitle else 0.0)
    legend_h = 0.3
    legend_y = footer_top + 0.1 + legend_h / 2.0
    bottom_h = footer_top + 0.1 + legend_h + 0.5  # footer, legend, x label and ticks
    left_in, right_in = 0.95, 1.35
    ax_rect = (
        left_in / fig_w,
        bottom_h / fig_h,
        1.0 - (left_in + right_in) / fig_w,
        1.0 - (bottom_h + top_h) / fig_h,
    )
    if ax_rect[2] < 0.2 or ax_rect[3] < 0.2:
        raise InputDataError(
            f"figsize {figsize!r} leaves too little room for the map next to the title, "
            "colour bar, legend and caution; use at least about (6, 5) inches"
        )
    ax = fig.add_axes(ax_rect)
    ax.set_facecolor(_UNREACHED_RGB)

    # --- the image, sampled down to the drawn box's pixels (or max_pixels) -------
    ax_w_in = ax_rect[2] * fig_w
    ax_h_in = ax_rect[3] * fig_h
    box_scale = min(ax_w_in / (xmax - xmin), ax_h_in / ((ymax - ymin) * aspect)) * dpi
    box_px = (box_scale * (xmax - xmin), box_scale * (ymax - ymin) * aspect)
    a_, b_, _, d_, e_, _ = tuple(transform)[:6]
    axis_aligned = b_ == 0.0 and d_ == 0.0
    stride = _decimation(field.shape, int(max_pixels))
    if axis_aligned:
        stride = max(stride, _display_stride(field.shape, box_px))
    shown_values, shown_transform = _decimate(field, transform, stride)
    shown = np.ma.masked_invalid(np.asarray(shown_values, dtype=np.float64))
    land_shown = _decimate(land, transform, stride)[0] if land is not None else None

    # --- arrival colours, land, coast -----------------------------------------
    image: Any = ScalarMappable(norm=norm, cmap=colormap)  # what the colour bar shows
    if axis_aligned:
        rgba = _arrival_rgba(shown.data, land_shown, colormap, norm)
        _draw_raster(ax, rgba, shown_transform, cmap=None, norm=None, zorder=1)
    else:
        _draw_raster(ax, shown, shown_transform, cmap=colormap, norm=norm, zorder=1)
        if land_shown is not None and land_shown.any():
            land_cmap = ListedColormap([_LAND_RGBA]).with_extremes(bad=(0, 0, 0, 0))
            land_values = np.ma.masked_array(np.zeros(land_shown.shape), mask=~land_shown)
            _draw_raster(
                ax,
                land_values,
                shown_transform,
                cmap=land_cmap,
                norm=Normalize(0.0, 1.0),
                zorder=2,
            )
    if land_shown is not None and land_shown.any():
        coast = _coastline_segments(land_shown, shown_transform)
        if coast:
            ax.add_collection(
                LineCollection(
                    coast, colors=_COAST_COLOR, linewidths=0.6, zorder=3, gid="coastline"
                )
            )

    # --- isochrones -------------------------------------------------------------
    data_per_pixel = max(xmax - xmin, (ymax - ymin) * aspect) / (ax_w_in * dpi)
    total_vertices = 0
    if lines:
        import shapely

        total_vertices = int(sum(shapely.get_num_coordinates(ln.geometry) for ln in lines))
    simplify_m = data_per_pixel / 3.0 if total_vertices > _MAX_LINE_VERTICES else 0.0
    parts_by_line = [_line_parts(ln.geometry, simplify_m) for ln in lines]
    all_parts = [p for parts in parts_by_line for p in parts]
    if all_parts:
        # The faint white casing is a collection of its own under the lines (not a
        # path effect, which matplotlib draws path by path in Python: a second per
        # 20 000 parts); both are drawn by Agg in one call each.
        ax.add_collection(
            LineCollection(
                all_parts,
                colors="white",
                alpha=0.4,
                linewidths=1.8,
                capstyle="butt",
                joinstyle="round",
                zorder=3.9,
                gid="isochrone-casing",
            )
        )
        ax.add_collection(
            LineCollection(
                all_parts, colors=_LINE_COLOR, linewidths=0.75, zorder=4, gid="isochrones"
            )
        )
    obstacles = _obstacle_points(source_geometry, sites)
    for label, x, y, angle in _label_positions(lines, parts_by_line, bounds, aspect, obstacles):
        ax.text(
            x,
            y,
            label,
            fontsize=7.5,
            color="black",
            ha="center",
            va="center",
            rotation=angle,
            rotation_mode="anchor",
            zorder=5,
            clip_on=True,
            bbox={
                "boxstyle": "round,pad=0.12",
                "facecolor": "white",
                "edgecolor": "none",
                "alpha": 0.85,
            },
        )

    # --- source and sites ---------------------------------------------------------
    handles: list[Any] = []
    if source_geometry is not None and not source_geometry.is_empty:
        handles += _draw_source(ax, source_geometry)
    ax.set_xlim(xmin, xmax)
    ax.set_ylim(ymin, ymax)
    handles += _draw_sites(ax, list(sites or []))

    # --- axes -----------------------------------------------------------------------
    ax.set_xlim(xmin, xmax)
    ax.set_ylim(ymin, ymax)
    ax.set_aspect(aspect, adjustable="box", anchor="C")
    if is_geographic:
        ax.set_xlabel("Longitude (°)")
        ax.set_ylabel("Latitude (°)")
    else:
        ax.set_xlabel("Easting (m)")
        ax.set_ylabel("Northing (m)")
        ax.ticklabel_format(style="plain", useOffset=False)
        thousands = FuncFormatter(lambda v, _pos: f"{v:,.0f}")
        ax.xaxis.set_major_formatter(thousands)
        ax.yaxis.set_major_formatter(thousands)
    ax.tick_params(labelsize=8)
    ax.xaxis.label.set_fontsize(9)
    ax.yaxis.label.set_fontsize(9)
    for spine in ax.spines.values():
        spine.set_linewidth(0.8)

    # --- colour bar (follows the drawn map box, whatever its aspect) -------------
    cax = ax.inset_axes((1.025, 0.0, 0.035, 1.0))
    colorbar = fig.colorbar(image, cax=cax)
    colorbar.set_label(COLORBAR_LABEL, fontsize=9)
    colorbar.ax.yaxis.set_major_locator(MultipleLocator(_tick_step_min(vmax_min - vmin_min)))
    colorbar.ax.tick_params(labelsize=8)
    colorbar.outline.set_linewidth(0.6)
    levels = [ln.minutes for ln in lines if vmin_min <= ln.minutes <= vmax_min]
    if levels:
        colorbar.add_lines(
            levels, colors=[_LINE_COLOR] * len(levels), linewidths=[0.7] * len(levels)
        )

    # --- legend -------------------------------------------------------------------
    legend_items: list[Any] = []
    if all_parts:
        legend_items.append(
            Line2D([], [], color=_LINE_COLOR, linewidth=0.9, label="Isochrone (h:mm after origin)")
        )
    if land_shown is not None and land_shown.any():
        legend_items.append(
            Patch(facecolor=_LAND_RGBA, edgecolor=_COAST_COLOR, linewidth=0.6, label="Land")
        )
    unreached = np.ma.getmaskarray(shown)
    if land_shown is not None:
        unreached = unreached & ~land_shown
    if unreached.any():
        legend_items.append(
            Patch(
                facecolor=_UNREACHED_RGB,
                edgecolor="#9aa0a6",
                linewidth=0.6,
                label="No arrival computed",
            )
        )
    legend_items += handles
    if legend_items:
        fig.legend(
            handles=legend_items,
            loc="center",
            ncol=len(legend_items),
            bbox_to_anchor=(0.5, legend_y / fig_h),
            frameon=False,
            fontsize=8,
            handlelength=1.6,
            columnspacing=1.6,
        )

    # --- titles and caution footer --------------------------------------------------
    fig.text(0.5, 1.0 - 0.22 / fig_h, title, ha="center", va="top", fontsize=13, fontweight="bold")
    if subtitle:
        fig.text(
            0.5, 1.0 - 0.55 / fig_h, subtitle, ha="center", va="top", fontsize=9.5, color="#333333"
        )
    draw_caution_footer(fig, footer, fig_h)
    return fig


def save_figure(
    fig: Figure,
    path: str | os.PathLike[str],
    *,
    format: Literal["png", "pdf"] | None = None,
) -> None:
    """Write a figure to exactly ``path`` as PNG or PDF.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        A figure from :func:`render_arrival_map` (or any matplotlib figure).
    path : str or os.PathLike
        Output file. It is written as given, with no suffix added, so a
        caller may write to a temporary name and rename it.
    format : {"png", "pdf"}, optional
        File format; by default taken from the suffix of ``path``. Needed
        when the suffix is neither ``.png`` nor ``.pdf`` (a temporary name).

    Raises
    ------
    InputDataError
        If the format is neither PNG nor PDF.

    Notes
    -----
    PNG files use the figure's dpi and fast zlib compression (level 3).
    Files carry "ttmap" as their creating software; PDF files carry no
    creation date, so equal figures give equal bytes.
    """
    if format is None:
        fmt = os.path.splitext(os.fspath(path))[1].lstrip(".").lower()
    else:
        fmt = str(format).lower()
    if fmt == "png":
        metadata: dict[str, Any] = {"Software": "ttmap"}
    elif fmt == "pdf":
        metadata = {"Creator": "ttmap", "CreationDate": None}
    else:
        raise InputDataError(
            f"cannot write a map as {fmt or 'a file without suffix'!r} ({os.fspath(path)}); "
            "use a .png or .pdf path, or pass format='png' or format='pdf'"
        )
    extra: dict[str, Any] = {}
    if fmt == "png":
        # zlib level 3: on a 1500 x 1200 px map 0.06 s instead of 0.10 s at
        # the default level 6, for a file about 12 % larger.
        extra["pil_kwargs"] = {"compress_level": _PNG_COMPRESS_LEVEL}
    fig.savefig(path, format=fmt, dpi=fig.dpi, metadata=metadata, facecolor="white", **extra)


def draw_wave_paths(ax: Axes, paths: Sequence[NDArray[np.float64]]) -> list[Any]:
    """Draw wave paths on a map: thin dark lines with small arrowheads towards the site.

    Parameters
    ----------
    ax : matplotlib Axes
        The map's axes (map coordinates).
    paths : sequence of ndarray of shape (n, 2)
        Each route's vertices in map coordinates, source end first.

    Returns
    -------
    list
        The artists drawn.
    """
    artists: list[Any] = []
    for xy in paths:
        xy = np.asarray(xy, dtype=np.float64)
        if xy.shape[0] < 2:
            continue
        (line,) = ax.plot(xy[:, 0], xy[:, 1], color="#1a1a1a", lw=0.7, alpha=0.9, zorder=6,
                          solid_capstyle="round")
        artists.append(line)
        # arrowheads at a third, two thirds and the end of the route's length
        seg = np.hypot(*np.diff(xy, axis=0).T)
        s = np.concatenate([[0.0], np.cumsum(seg)])
        if s[-1] <= 0.0:
            continue
        for frac in (1.0 / 3.0, 2.0 / 3.0, 1.0):
            k = int(np.clip(np.searchsorted(s, frac * s[-1]), 1, xy.shape[0] - 1))
            artists.append(ax.annotate(
                "", xy=(xy[k, 0], xy[k, 1]), xytext=(xy[k - 1, 0], xy[k - 1, 1]), zorder=6,
                arrowprops={"arrowstyle": "-|>,head_length=0.5,head_width=0.22", "color": "#1a1a1a",
                            "lw": 0.7, "shrinkA": 0, "shrinkB": 0},
            ))
    return artists
