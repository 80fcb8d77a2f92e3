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
import textwrap
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Literal

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ttmap.errors import InputDataError
from ttmap.products._footer import (
    caution_footer,
    draw_caution_footer,
    draw_title_block,
    place_legend,
)
from ttmap.products.cautions import CAUTION_SHORT, event_word, minutes_after
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
    "ColourClasses",
    "DIVERGING_CMAP",
    "MINUTES_LEFT_EDGES",
    "arrival_classes",
    "class_edges_min",
    "diverging_classes",
    "draw_nest_outline",
    "draw_wave_paths",
    "label_map_axes",
    "nest_outline_handle",
    "wave_path_handle",
    "fit_colorbar_label",
    "render_arrival_map",
    "render_class_map",
    "source_text",
]

#: Default colour map: the arrival ramp shared with the style files
#: (:data:`ttmap.products.palette.ARRIVAL_CMAP`), so a map and a GIS layer of
#: the same result show the same colours. Isochrones are drawn dark with a
#: faint white casing, which keeps them visible at both ends of the ramp.
DEFAULT_CMAP: str = ARRIVAL_CMAP

#: Diverging ramp of the maps centred on zero (minutes left, differences):
#: red below zero, blue above, pale near zero; readable with the common forms
#: of colour-vision deficiency (red-blue, not red-green).
DIVERGING_CMAP: str = "RdBu"

#: Label of the colour bar of an earthquake's arrival map (an area or line
#: source reads "after the event", see :func:`ttmap.products.cautions.minutes_after`).
COLORBAR_LABEL = "Arrival time (minutes after the earthquake)"

_LAND_RGBA = (0.80, 0.79, 0.77, 1.0)  # warm neutral grey
_UNREACHED_RGB = "#f2f4f7"  # water with no arrival: near white, cool
_COAST_COLOR = "#3a3a3a"
_LINE_COLOR = "#141414"
_SOURCE_COLOR = "#e8175d"  # red-magenta: not in the arrival ramp, clear on it
_SITE_EDGE = "#1a1a1a"  # sites: white circles with a dark edge (never the source's star)
_MAX_LABELS = 24
_MAX_LINE_VERTICES = 300_000  # above this, lines are simplified for drawing


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


def source_text(label: str, params: dict[str, Any] | None = None) -> str:
    """A source's label for a map or chart: scaling-law keys replaced by their human names.

    Parameters
    ----------
    label : str
        :attr:`ttmap.sources.Source.label`.
    params : dict, optional
        :attr:`ttmap.sources.Source.params`; its ``scaling_relation`` (if any)
        is named as in :data:`ttmap.physics.scaling.SCALING_RELATIONS`.

    Examples
    --------
    >>> source_text("Mw 8.5 (strasser2010-interface) rupture 313 x 126 km",
    ...             {"scaling_relation": "strasser2010-interface"})
    'Mw 8.5 rupture 313 x 126 km (size: Strasser et al. 2010 (interface))'
    """
    from ttmap.physics.scaling import SCALING_RELATIONS

    key = (params or {}).get("scaling_relation")
    rel = SCALING_RELATIONS.get(str(key)) if key else None
    if rel is None or not rel.display_name:
        return label
    tag = f" ({rel.key})"
    if tag in label:
        return " ".join(label.replace(tag, "").split()) + f" (size: {rel.display_name})"
    return label.replace(rel.key, rel.display_name)


# ---------------------------------------------------------------------------
# Colour classes
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class ColourClasses:
    """Classes of a map's colours and how its colour bar shows them.

    Attributes
    ----------
    edges : tuple of float
        Strictly increasing class edges (minutes); class ``k`` holds values in
        ``[edges[k], edges[k + 1])``.
    colors : tuple of str
        One ``"#rrggbb"`` colour per class (``len(edges) - 1``).
    label : str
        Colour-bar label.
    ticks : tuple of float, optional
        Colour-bar ticks; by default the class edges.
    tick_labels : tuple of str, optional
        Text at each tick; by default the tick values (a long list shows
        every second or third label, every tick still drawn).
    """

    edges: tuple[float, ...]
    colors: tuple[str, ...]
    label: str
    ticks: tuple[float, ...] | None = None
    tick_labels: tuple[str, ...] | None = None

    def __post_init__(self) -> None:
        e = np.asarray(self.edges, dtype=np.float64)
        if e.ndim != 1 or e.size < 2 or not np.all(np.isfinite(e)) or np.any(np.diff(e) <= 0):
            raise InputDataError(f"class edges {self.edges!r} must be >= 2 increasing finite values")
        if len(self.colors) != e.size - 1:
            raise InputDataError(
                f"{len(self.colors)} colours for {e.size - 1} classes; give one colour per class"
            )


def class_edges_min(levels_min: ArrayLike | None, vmax_min: float, vmin_min: float = 0.0) -> list[float]:
    """Class edges of an arrival map: ``vmin_min``, the isochrone levels, one level past the data.

    The colour classes are the isochrone intervals, so a colour-bar tick, a
    class edge and an isochrone are the same minute. Levels beyond the
    latest arrival are dropped but for the first, which closes the last class;
    if there is none, the last step is repeated until it passes ``vmax_min``.

    Examples
    --------
    >>> class_edges_min([10, 20, 30, 40], 25.0)
    [0.0, 10.0, 20.0, 30.0]
    >>> class_edges_min([10, 20], 47.0)
    [0.0, 10.0, 20.0, 30.0, 40.0, 50.0]
    >>> class_edges_min(None, 47.0)
    [0.0, 10.0, 20.0, 30.0, 40.0, 50.0]
    """
    from ttmap.products.isochrones import default_levels_min

    top = max(float(vmax_min), float(vmin_min) + 1e-9)
    if levels_min is None:
        levels = [float(v) for v in default_levels_min(max(top, 1.0))]
    else:
        levels = sorted({float(v) for v in np.ravel(np.asarray(levels_min, dtype=np.float64))})
    edges = [float(vmin_min)]
    for v in levels:
        if v <= edges[-1]:
            continue
        edges.append(v)
        if v >= top:
            break
    if edges[-1] < top:
        step = edges[-1] - edges[-2] if len(edges) >= 2 else _tick_step_min(top - edges[0])
        step = step if step > 0 else 10.0
        while edges[-1] < top:
            edges.append(edges[-1] + step)
    if len(edges) < 2:
        edges.append(edges[0] + 10.0)
    return edges


def arrival_classes(
    edges_min: Sequence[float], *, label: str, cmap: str | Colormap = DEFAULT_CMAP
) -> ColourClasses:
    """Arrival colour classes: one colour per class from the arrival ramp, earliest first."""
    from matplotlib.colors import to_hex

    colormap = _resolve_cmap(cmap)
    n = len(edges_min) - 1
    pos = np.linspace(0.0, 1.0, n) if n > 1 else np.zeros(1)
    colors = tuple(to_hex(colormap(float(p)), keep_alpha=False) for p in pos)
    return ColourClasses(tuple(float(e) for e in edges_min), colors, label)


def diverging_classes(
    lowest: float,
    highest: float,
    *,
    step: float | None = None,
    positive_edges: Sequence[float] | None = None,
    label: str,
    cmap: str = DIVERGING_CMAP,
) -> ColourClasses:
    """Classes around zero: red below zero, blue above, darker away from zero on each side.

    Zero is always a class edge. Negative classes are ``step`` wide (by
    default a round step giving about 8 classes on the longer side); the
    positive side uses the same step, or ``positive_edges`` (increasing, from
    0) when given, extended by its last step until it passes ``highest``.
    The class nearest zero on the negative side is always a clear red, so a
    single "before the message" class is never pale.

    Examples
    --------
    >>> diverging_classes(-7.0, 23.0, step=10.0, label="x").edges
    (-10.0, 0.0, 10.0, 20.0, 30.0)
    >>> diverging_classes(-7.0, 50.0, step=5.0, positive_edges=[0, 10, 30], label="x").edges
    (-10.0, -5.0, 0.0, 10.0, 30.0, 50.0)
    """
    import matplotlib
    from matplotlib.colors import to_hex

    lo, hi = min(float(lowest), 0.0), max(float(highest), 0.0)
    if step is None or not (step > 0):
        step = _tick_step_min(max(abs(lo), abs(hi), 1.0))
    n_neg = int(math.ceil(-lo / step - 1e-9)) if lo < 0 else 0
    neg_edges = [float(-k * step) for k in range(n_neg, 0, -1)]
    if positive_edges is not None:
        pos = [float(v) for v in positive_edges if float(v) > 0.0]
        last_step = (pos[-1] - (pos[-2] if len(pos) > 1 else 0.0)) if pos else float(step)
        pos = [p for p in pos if p < hi] if pos else []
        top = pos[-1] if pos else 0.0
        following = [float(v) for v in positive_edges if float(v) >= hi and float(v) > 0.0]
        if hi > top:
            pos.append(following[0] if following else top + last_step * math.ceil((hi - top) / last_step))
    else:
        n_pos = int(math.ceil(hi / step - 1e-9)) if hi > 0 else 0
        pos = [float(k * step) for k in range(1, n_pos + 1)]
    if not neg_edges and not pos:
        pos = [float(step)]
    edges = (*neg_edges, 0.0, *pos)
    ramp = matplotlib.colormaps[cmap]
    n_n, n_p = len(neg_edges), len(pos)
    neg_colors = [to_hex(ramp(max(0.0, 0.5 - (0.22 + 0.33 * k / n_n))), keep_alpha=False)
                  for k in range(n_n, 0, -1)]
    pos_colors = [to_hex(ramp(min(1.0, 0.5 + (0.12 + 0.38 * k / n_p))), keep_alpha=False)
                  for k in range(1, n_p + 1)]
    return ColourClasses(tuple(edges), tuple(neg_colors + pos_colors), label)


#: Positive class edges of the minutes-left map: fine near zero, where the
#: decision is, then wider (minutes).
MINUTES_LEFT_EDGES: tuple[float, ...] = (0, 5, 10, 15, 20, 30, 45, 60, 90, 120, 180, 240, 360)


# ---------------------------------------------------------------------------
# Label placement (display pixels)
# ---------------------------------------------------------------------------


def _overlaps(box: tuple[float, float, float, float], boxes: NDArray[np.float64], pad: float) -> bool:
    """True if ``box`` (x0, y0, x1, y1) comes within ``pad`` px of any row of ``boxes``."""
    if boxes.size == 0:
        return False
    x0, y0, x1, y1 = box
    return bool(
        np.any(
            (boxes[:, 0] - pad < x1)
            & (boxes[:, 2] + pad > x0)
            & (boxes[:, 1] - pad < y1)
            & (boxes[:, 3] + pad > y0)
        )
    )


class _Boxes:
    """Placed boxes in display pixels (site markers, names, labels, the source)."""

    def __init__(self) -> None:
        self._rows: list[tuple[float, float, float, float]] = []
        self._array: NDArray[np.float64] = np.zeros((0, 4))

    def add(self, box: tuple[float, float, float, float]) -> None:
        self._rows.append(box)
        self._array = np.asarray(self._rows, dtype=np.float64)

    def hits(self, box: tuple[float, float, float, float], pad: float) -> bool:
        return _overlaps(box, self._array, pad)


def _inside(box: tuple[float, float, float, float], frame: Any, margin: float) -> bool:
    return bool(
        box[0] >= frame.x0 + margin
        and box[2] <= frame.x1 - margin
        and box[1] >= frame.y0 + margin
        and box[3] <= frame.y1 - margin
    )


def _rotated_box(
    cx: float, cy: float, w: float, h: float, angle_deg: float
) -> tuple[float, float, float, float]:
    a = math.radians(angle_deg)
    bw = abs(w * math.cos(a)) + abs(h * math.sin(a))
    bh = abs(w * math.sin(a)) + abs(h * math.cos(a))
    return (cx - bw / 2.0, cy - bh / 2.0, cx + bw / 2.0, cy + bh / 2.0)


_Place = tuple[int, int, Literal["left", "center", "right"], Literal["bottom", "center", "top"]]


def _place_site_names(
    ax: Axes,
    names: Sequence[str],
    xy: NDArray[np.float64],
    xy_px: NDArray[np.float64],
    taken: _Boxes,
    renderer: Any,
    fontsize: float,
) -> None:
    """Put each site name beside its marker where it overlaps nothing and stays in the map.

    Tries right, left, above, below, then the diagonals; the first place
    inside the map that overlaps no marker, name or source wins; if every
    place overlaps something, the first one inside the map is kept.
    """
    from matplotlib import patheffects

    halo = [patheffects.withStroke(linewidth=2.6, foreground="white")]
    frame = ax.get_window_extent(renderer)
    # (dx, dy) in points from the marker, ha, va
    candidates: list[_Place] = [
        (6, 0, "left", "center"), (-6, 0, "right", "center"),
        (0, 6, "center", "bottom"), (0, -6, "center", "top"),
        (5, 5, "left", "bottom"), (5, -5, "left", "top"),
        (-5, 5, "right", "bottom"), (-5, -5, "right", "top"),
        (12, 10, "left", "bottom"), (-12, -10, "right", "top"),
        (12, -10, "left", "top"), (-12, 10, "right", "bottom"),
    ]
    for name, (x, y), (px, _py) in zip(names, xy, xy_px, strict=True):
        shown = "\n".join(textwrap.wrap(name, 24)) if len(name) > 28 else name
        text = ax.annotate(
            shown, (float(x), float(y)), xytext=(6, 0), textcoords="offset points",
            fontsize=fontsize, color="black", zorder=9.5, path_effects=halo,
            annotation_clip=False, gid="site-label",
        )
        chosen: _Place | None = None
        fallback: _Place | None = None
        for cand in candidates:
            text.xyann = (cand[0], cand[1])
            text.set_horizontalalignment(cand[2])
            text.set_verticalalignment(cand[3])
            bb = text.get_window_extent(renderer)
            box = (bb.x0, bb.y0, bb.x1, bb.y1)
            if not _inside(box, frame, 1.0):
                continue
            if fallback is None:
                fallback = cand
            if not taken.hits(box, 2.0):
                chosen = cand
                break
        if chosen is None and fallback is None:
            # no place inside the map: a smaller name on the side with more room
            text.set_fontsize(fontsize * 0.8)
            right = px < 0.5 * (frame.x0 + frame.x1)
            fallback = (6, 0, "left", "center") if right else (-6, 0, "right", "center")
        final = chosen or fallback
        assert final is not None
        text.xyann = (final[0], final[1])
        text.set_horizontalalignment(final[2])
        text.set_verticalalignment(final[3])
        bb = text.get_window_extent(renderer)
        taken.add((bb.x0, bb.y0, bb.x1, bb.y1))


def _line_candidates(
    parts_px: Sequence[NDArray[np.float64]], spacing_px: float
) -> list[tuple[float, float, float, float]]:
    """(x, y, angle_deg, fraction) every ``spacing_px`` along each part, in display pixels."""
    out: list[tuple[float, float, float, float]] = []
    for part in parts_px:
        if len(part) < 2:
            continue
        seg = np.hypot(*np.diff(part, axis=0).T)
        cum = np.concatenate([[0.0], np.cumsum(seg)])
        total = float(cum[-1])
        if total < 2.0 * spacing_px:
            continue
        for target in np.arange(spacing_px, total - spacing_px + 1e-9, spacing_px / 2.0):
            j = int(np.clip(np.searchsorted(cum, target) - 1, 0, len(seg) - 1))
            t = 0.0 if seg[j] == 0 else (target - cum[j]) / seg[j]
            x, y = part[j] + t * (part[j + 1] - part[j])
            # direction over about half a label either side
            k0 = int(np.clip(np.searchsorted(cum, target - spacing_px / 2.0), 0, len(part) - 1))
            k1 = int(np.clip(np.searchsorted(cum, target + spacing_px / 2.0), 0, len(part) - 1))
            if k1 <= k0:
                k0, k1 = max(0, j), min(len(part) - 1, j + 1)
            dx, dy = part[k1] - part[k0]
            angle = math.degrees(math.atan2(dy, dx))
            if angle > 90:
                angle -= 180
            elif angle < -90:
                angle += 180
            out.append((float(x), float(y), angle, float(target / total)))
    return out


def _place_isochrone_labels(
    ax: Axes,
    lines: Sequence[IsochroneLine],
    parts_by_line: Sequence[list[NDArray[np.float64]]],
    targets_px: NDArray[np.float64],
    taken: _Boxes,
    renderer: Any,
    fontsize: float = 7.5,
    max_labels: int = _MAX_LABELS,
) -> int:
    """Label isochrones ``h:mm`` where they pass near the coast (the sites) and in open water.

    Each line gets at most one label near a target (a site, or the coast
    when there are no sites) and one far from it. A label goes where its
    box overlaps no site marker, site name, source or other label; where the
    lines crowd, some lines stay without a label rather than labels
    overlapping. Returns the number of labels drawn.
    """
    from matplotlib.text import Text

    if not lines:
        return 0
    frame = ax.get_window_extent(renderer)
    probe = Text(0, 0, "0:00", fontsize=fontsize, figure=ax.figure)
    pbb = probe.get_window_extent(renderer)
    char_w = pbb.width / 4.0
    h = pbb.height + 3.0  # the white box pads the text
    to_px = ax.transData.transform
    candidates: list[list[tuple[float, float, float, float]]] = []
    widths: list[float] = []
    for ln, parts in zip(lines, parts_by_line, strict=True):
        w = char_w * len(ln.label) + 4.0
        widths.append(w)
        px_parts = [to_px(p) for p in parts]
        candidates.append(_line_candidates(px_parts, w * 1.2))
    near_px = 0.12 * max(frame.width, frame.height)

    def dist(c: tuple[float, float, float, float]) -> float:
        if targets_px.size == 0:
            return math.inf
        return float(np.min(np.hypot(targets_px[:, 0] - c[0], targets_px[:, 1] - c[1])))

    placed: list[tuple[int, float, float, float]] = []
    first_at: dict[int, tuple[float, float]] = {}

    def try_place(i: int, ordered: list[tuple[float, float, float, float]]) -> bool:
        for x, y, angle, _ in ordered:
            box = _rotated_box(x, y, widths[i], h, angle)
            if not _inside(box, frame, 3.0) or taken.hits(box, 2.0):
                continue
            if i in first_at and math.hypot(x - first_at[i][0], y - first_at[i][1]) < 0.25 * max(
                frame.width, frame.height
            ):
                continue
            taken.add(box)
            placed.append((i, x, y, angle))
            first_at.setdefault(i, (x, y))
            return True
        return False

    # 1. near the coast: the part of each line closest to a site (or the coast)
    if targets_px.size:
        for i, cands in enumerate(candidates):
            if len(placed) >= max_labels:
                break
            near = sorted((c for c in cands if dist(c) <= near_px), key=dist)
            try_place(i, near)
    # 2. in open water: mid-line first
    for i, cands in enumerate(candidates):
        if len(placed) >= max_labels:
            break
        far = [c for c in cands if dist(c) > near_px]
        far.sort(key=lambda c: abs(c[3] - 0.5))
        try_place(i, far)
    inv = ax.transData.inverted()
    for i, x, y, angle in placed:
        dx, dy = inv.transform((x, y))
        ax.text(
            float(dx), float(dy), lines[i].label, fontsize=fontsize, color="black",
            ha="center", va="center", rotation=angle, rotation_mode="anchor", zorder=5,
            clip_on=True, gid="isochrone-label",
            bbox={"boxstyle": "round,pad=0.12", "facecolor": "white", "edgecolor": "none",
                  "alpha": 0.85},
        )
    return len(placed)


# ---------------------------------------------------------------------------
# Source and site symbols
# ---------------------------------------------------------------------------


def _source_handles(geometry: BaseGeometry | None, event: str) -> list[Any]:
    """Legend entries of the source: a star for a point, a red outline for a line or area."""
    import shapely
    from matplotlib.lines import Line2D

    if geometry is None or geometry.is_empty:
        return []
    kinds = set()
    for part in shapely.get_parts(shapely.get_parts(geometry)):
        if part.is_empty:
            continue
        kind = part.geom_type
        if kind == "Point":
            kinds.add("point")
        elif kind in ("LineString", "LinearRing"):
            kinds.add("line")
        elif kind == "Polygon":
            kinds.add("area")
        else:
            raise InputDataError(
                f"source_geometry part of type {kind} cannot be drawn; "
                "pass a Point, LineString or Polygon (or Multi- of them) in map coordinates"
            )
    handles: list[Any] = []
    if "point" in kinds:
        handles.append(Line2D([], [], marker="*", markersize=13, markerfacecolor=_SOURCE_COLOR,
                              markeredgecolor="black", markeredgewidth=0.9, linestyle="none",
                              label=f"Source ({event})"))
    if kinds & {"line", "area"}:
        handles.append(Line2D([], [], color=_SOURCE_COLOR, linewidth=2.6,
                              label="Source area" if "area" in kinds else "Source line"))
    return handles


def _draw_source(ax: Axes, geometry: BaseGeometry) -> list[tuple[float, float]]:
    """Draw a source geometry; return its points (map coordinates) that labels keep clear of."""
    import shapely

    keep_clear: list[tuple[float, float]] = []
    for part in shapely.get_parts(shapely.get_parts(geometry)):
        if part.is_empty:
            continue
        kind = part.geom_type
        if kind == "Point":
            ax.plot(part.x, part.y, marker="*", markersize=17, markerfacecolor=_SOURCE_COLOR,
                    markeredgecolor="black", markeredgewidth=0.9, linestyle="none", zorder=8,
                    gid="source")
            keep_clear.append((part.x, part.y))
        elif kind in ("LineString", "LinearRing"):
            xy = np.asarray(part.coords)
            ax.plot(xy[:, 0], xy[:, 1], color="black", linewidth=4.2, zorder=7, solid_capstyle="round")
            ax.plot(xy[:, 0], xy[:, 1], color=_SOURCE_COLOR, linewidth=2.6, zorder=7.1,
                    solid_capstyle="round", gid="source")
            keep_clear.extend(map(tuple, shapely.get_coordinates(
                shapely.line_interpolate_point(part, np.linspace(0, 1, 17), normalized=True))))
        elif kind == "Polygon":
            for ring in [part.exterior, *part.interiors]:
                xy = np.asarray(ring.coords)
                ax.fill(xy[:, 0], xy[:, 1], facecolor=_SOURCE_COLOR, alpha=0.25, zorder=6.9,
                        edgecolor="none")
                ax.plot(xy[:, 0], xy[:, 1], color="black", linewidth=3.0, zorder=7)
                ax.plot(xy[:, 0], xy[:, 1], color=_SOURCE_COLOR, linewidth=1.8, zorder=7.1,
                        gid="source")
            keep_clear.extend(map(tuple, shapely.get_coordinates(shapely.line_interpolate_point(
                part.exterior, np.linspace(0, 1, 17), normalized=True))))
    return keep_clear


def _check_sites(sites: Sequence[tuple[str, float, float]]) -> tuple[list[str], NDArray[np.float64]]:
    names: list[str] = []
    xy: list[tuple[float, float]] = []
    for item in sites:
        try:
            name, x, y = item
            xy.append((float(x), float(y)))
        except (TypeError, ValueError) as err:
            raise InputDataError(
                f"each site must be (name, x, y) in map coordinates, got {item!r}"
            ) from err
        names.append(str(name))
    return names, np.asarray(xy, dtype=np.float64).reshape(-1, 2)


def _site_handle(label: str) -> Any:
    from matplotlib.lines import Line2D

    return Line2D([], [], marker="o", markersize=6, markerfacecolor="white",
                  markeredgecolor=_SITE_EDGE, markeredgewidth=1.3, linestyle="none", label=label)


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
    levels_min: ArrayLike | None = None,
    source_kind: str | None = None,
    colorbar_label: str | None = None,
    line_legend: str | None = None,
    site_legend: str = "Site",
    extra_legend: Sequence[Any] = (),
) -> Figure:
    """Draw an arrival-time map: colour classes, land, coast, isochrones, source, sites, caution.

    Parameters
    ----------
    time_min : ndarray of shape (rows, cols), float, minutes
        Arrival time after the earthquake (or event); NaN on land and where
        the wave never arrives.
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
        lines, labelled ``h:mm`` near the sites (or the coast) and in open
        water where a label overlaps nothing else.
    source_geometry : shapely geometry, optional
        The source in map coordinates: a Point is drawn as a black-edged red
        star, a LineString as a thick line, a Polygon as an outline with a
        light fill; Multi- geometries and collections of these work too.
    sites : sequence of (name, x, y), optional
        Named places in map coordinates, drawn as white circles with a dark
        edge, their names placed clear of each other and of the labels.
    title, subtitle : str
        Title and second line; both are shrunk a little and then wrapped to
        fit the figure width.
    is_geographic : bool
        True if ``x, y`` are longitude, latitude in degrees: axes are labelled
        in degrees and stretched by ``1 / cos(mid-latitude)``.
    caution : str, optional
        Text of the caution footer, wrapped to the figure width, with the
        natural-warning line added (:func:`ttmap.products._footer.with_natural_warning`).
    max_pixels : int, optional
        Largest number of raster cells drawn (see Notes).
    cmap : str or matplotlib Colormap, optional
        Colour map of the classes, first colour = earliest
        (:data:`ttmap.products.palette.ARRIVAL_CMAP` by default).
    figsize : (float, float), optional
        Figure width and height, inches.
    dpi : float, optional
        Resolution used by :func:`ttmap.io.figures.save_figure` for PNG files.
    levels_min : array-like of float, optional
        Class edges in minutes; by default the levels of ``lines`` (or the
        default isochrone levels if there are none). Colour classes,
        colour-bar ticks and isochrones share these edges
        (:func:`class_edges_min`).
    source_kind : str, optional
        ``"point"``, ``"rupture"``, ``"line"`` or ``"area"``: the time axis
        reads "minutes after the earthquake" for points and ruptures, "after
        the event" otherwise (:func:`ttmap.products.cautions.minutes_after`).
    colorbar_label, line_legend, site_legend : str, optional
        Replace the colour-bar label, the isochrone and the site legend entries.
    extra_legend : sequence of matplotlib handles, optional
        Legend entries of what the caller draws on the map afterwards
        (:func:`wave_path_handle`, :func:`nest_outline_handle`).

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
    A grid with more than ``max_pixels`` cells, or with at least twice as
    many cells per axis as the drawn map box has pixels, is sampled every
    ``s``-th row and column (the middle cell of each block); isochrones are
    drawn as given (simplified to a third of a pixel above 300 000 vertices).
    """
    field, _ = _check_inputs(time_min, transform, land_mask, max_pixels, figsize, dpi)
    finite = np.isfinite(field)
    vmax = float(np.max(field, where=finite, initial=-np.inf)) if finite.any() else 60.0
    if levels_min is None and lines:
        levels_min = [ln.minutes for ln in lines]
    # A field that starts late (a nested coastal grid, a far coast) gets classes from
    # the last level at or before its earliest arrival, not one wide class from 0.
    vmin = float(np.min(field, where=finite, initial=np.inf)) if finite.any() else 0.0
    start = 0.0
    if levels_min is not None:
        lv = sorted({float(v) for v in np.ravel(np.asarray(levels_min, dtype=np.float64))})
        below = [v for v in lv if v <= vmin]
        if below:
            start = below[-1]
        elif len(lv) >= 2 and 0.0 < lv[0] - (lv[1] - lv[0]) <= vmin:
            start = lv[0] - (lv[1] - lv[0])  # one step before the first level
    edges = class_edges_min(levels_min, max(vmax, 1e-6), start)
    phrase = minutes_after(source_kind)
    classes = arrival_classes(
        edges, label=colorbar_label or f"Arrival time ({phrase})", cmap=cmap
    )
    return render_class_map(
        time_min, transform, classes=classes, land_mask=land_mask, lines=lines,
        source_geometry=source_geometry, sites=sites, title=title, subtitle=subtitle,
        is_geographic=is_geographic, caution=caution, max_pixels=max_pixels, figsize=figsize,
        dpi=dpi, source_kind=source_kind,
        line_legend=line_legend or f"Isochrone (h:mm after the {event_word(source_kind)})",
        site_legend=site_legend, extra_legend=extra_legend,
    )


def render_class_map(
    values: ArrayLike,
    transform: Affine,
    *,
    classes: ColourClasses,
    land_mask: ArrayLike | None,
    lines: Sequence[IsochroneLine] = (),
    source_geometry: BaseGeometry | None = None,
    sites: Sequence[tuple[str, float, float]] | None = None,
    title: str,
    subtitle: str = "",
    is_geographic: bool,
    caution: str = CAUTION_SHORT,
    max_pixels: int = 2_000_000,
    figsize: tuple[float, float] = (10.0, 8.0),
    dpi: float = 150.0,
    source_kind: str | None = None,
    line_legend: str = "Isochrone (h:mm)",
    site_legend: str = "Site",
    nodata_legend: str = "No arrival computed",
    extra_legend: Sequence[Any] = (),
) -> Figure:
    """Draw a raster in colour classes with land, coast, lines, source, sites and the caution.

    The shared engine of :func:`render_arrival_map` and the other maps
    (minutes left, scenario envelope, first scenario, differences). Values
    below the first edge take the first class's colour and values above the
    last the last one's; NaN cells are drawn as "no value" (``nodata_legend``).
    The colour bar shows the classes in proportion with a tick on every edge
    (or ``classes.ticks``). Layout: the title block, the legend and the
    caution footer are measured first, the map takes the rest.

    Parameters are those of :func:`render_arrival_map`; ``extra_legend``
    adds matplotlib legend handles.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.cm import ScalarMappable
    from matplotlib.collections import LineCollection
    from matplotlib.colors import BoundaryNorm, ListedColormap, Normalize
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from matplotlib.ticker import FixedLocator, FuncFormatter

    field, land = _check_inputs(values, transform, land_mask, max_pixels, figsize, dpi)
    edges = np.asarray(classes.edges, dtype=np.float64)
    colormap = ListedColormap(list(classes.colors)).with_extremes(
        bad=(0.0, 0.0, 0.0, 0.0), under=classes.colors[0], over=classes.colors[-1]
    )
    norm = BoundaryNorm(edges, colormap.N, extend="neither", clip=True)
    bounds = _grid_bounds(transform, field.shape)
    xmin, xmax, ymin, ymax = bounds
    if is_geographic:
        mid_lat = float(np.clip(0.5 * (ymin + ymax), -85.0, 85.0))
        aspect = 1.0 / math.cos(math.radians(mid_lat))
    else:
        aspect = 1.0
    site_names, site_xy = _check_sites(list(sites or []))
    event = event_word(source_kind)

    # --- figure, then the parts around the map, measured ------------------------
    fig_w, fig_h = float(figsize[0]), float(figsize[1])
    fig = Figure(figsize=(fig_w, fig_h), dpi=dpi, facecolor="white")
    FigureCanvasAgg(fig)
    renderer = fig.canvas.get_renderer()  # type: ignore[attr-defined]  # Agg canvas
    footer = caution_footer(caution, fig_w)
    footer_top = footer.top_in(0.06)
    draw_caution_footer(fig, footer, fig_h)
    top_h = draw_title_block(fig, title, subtitle)

    all_finite = np.isfinite(field)
    unreached_any = bool((~all_finite & (~land if land is not None else True)).any())
    legend_items: list[Any] = []
    if lines:
        legend_items.append(Line2D([], [], color=_LINE_COLOR, linewidth=0.9, label=line_legend))
    if land is not None and land.any():
        legend_items.append(
            Patch(facecolor=_LAND_RGBA, edgecolor=_COAST_COLOR, linewidth=0.6, label="Land")
        )
    if unreached_any:
        legend_items.append(Patch(facecolor=_UNREACHED_RGB, edgecolor="#9aa0a6", linewidth=0.6,
                                  label=nodata_legend))
    legend_items += _source_handles(source_geometry, event)
    if site_names:
        legend_items.append(_site_handle(site_legend))
    legend_items += list(extra_legend)
    _, legend_h = place_legend(fig, legend_items, footer_top + 0.08, fontsize=8.0,
                               handlelength=1.6, columnspacing=1.6)
    bottom_h = footer_top + 0.08 + legend_h + 0.55  # footer, legend, x label and ticks
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
    ax.set_xlim(xmin, xmax)
    ax.set_ylim(ymin, ymax)
    ax.set_aspect(aspect, adjustable="box", anchor="C")
    ax.apply_aspect()

    # --- the image, sampled down to the drawn box's pixels (or max_pixels) -------
    box = ax.get_window_extent(renderer)
    box_px = (float(box.width), float(box.height))
    a_, b_, _, d_, e_, _ = tuple(transform)[:6]
    axis_aligned = b_ == 0.0 and d_ == 0.0
    stride = _decimation(field.shape, int(max_pixels))
    if axis_aligned:
        stride = max(stride, _display_stride(field.shape, box_px))
    shown_values, shown_transform = _decimate(field, transform, stride)
    shown = np.ma.masked_invalid(np.asarray(shown_values, dtype=np.float64))
    land_shown = _decimate(land, transform, stride)[0] if land is not None else None

    image: Any = ScalarMappable(norm=norm, cmap=colormap)
    if axis_aligned:
        rgba = _arrival_rgba(shown.data, land_shown, colormap, norm)
        _draw_raster(ax, rgba, shown_transform, cmap=None, norm=None, zorder=1)
    else:
        _draw_raster(ax, shown, shown_transform, cmap=colormap, norm=norm, zorder=1)
        if land_shown is not None and land_shown.any():
            land_cmap = ListedColormap([_LAND_RGBA]).with_extremes(bad=(0, 0, 0, 0))
            land_values = np.ma.masked_array(np.zeros(land_shown.shape), mask=~land_shown)
            _draw_raster(ax, land_values, shown_transform, cmap=land_cmap,
                         norm=Normalize(0.0, 1.0), zorder=2)
    # imshow resets the aspect: set it again, so the box drawn is the box measured
    ax.set_xlim(xmin, xmax)
    ax.set_ylim(ymin, ymax)
    ax.set_aspect(aspect, adjustable="box", anchor="C")
    ax.apply_aspect()
    coast: list[NDArray[np.float64]] = []
    if land_shown is not None and land_shown.any():
        coast = _coastline_segments(land_shown, shown_transform)
        if coast:
            ax.add_collection(LineCollection(coast, colors=_COAST_COLOR, linewidths=0.6,
                                             zorder=3, gid="coastline"))

    # --- isochrones ---------------------------------------------------------------
    data_per_pixel = max(xmax - xmin, (ymax - ymin) * aspect) / max(box_px[0], 1.0)
    total_vertices = 0
    if lines:
        import shapely

        total_vertices = int(sum(shapely.get_num_coordinates(ln.geometry) for ln in lines))
    simplify_m = data_per_pixel / 3.0 if total_vertices > _MAX_LINE_VERTICES else 0.0
    parts_by_line = [_line_parts(ln.geometry, simplify_m) for ln in lines]
    all_parts = [p for parts in parts_by_line for p in parts]
    if all_parts:
        # casing first, then the lines: one Agg call each
        ax.add_collection(LineCollection(all_parts, colors="white", alpha=0.4, linewidths=1.8,
                                         capstyle="butt", joinstyle="round", zorder=3.9,
                                         gid="isochrone-casing"))
        ax.add_collection(LineCollection(all_parts, colors=_LINE_COLOR, linewidths=0.75,
                                         zorder=4, gid="isochrones"))

    # --- source, sites, names and labels (placed in display pixels) -------------------
    taken = _Boxes()
    keep_clear: list[tuple[float, float]] = []
    if source_geometry is not None and not source_geometry.is_empty:
        keep_clear = _draw_source(ax, source_geometry)
    for px, py in ax.transData.transform(np.asarray(keep_clear).reshape(-1, 2)):
        taken.add((px - 9.0, py - 9.0, px + 9.0, py + 9.0))
    site_px = ax.transData.transform(site_xy) if len(site_xy) else np.zeros((0, 2))
    if len(site_xy):
        ax.plot(site_xy[:, 0], site_xy[:, 1], marker="o", markersize=6.5,
                markerfacecolor="white", markeredgecolor=_SITE_EDGE, markeredgewidth=1.4,
                linestyle="none", zorder=9, gid="sites")
        r = 6.5 * dpi / 72.0 / 2.0 + 1.0
        for px, py in site_px:
            taken.add((px - r, py - r, px + r, py + r))
        _place_site_names(ax, site_names, site_xy, site_px, taken, renderer, 8.0)
    if len(site_px):
        targets = site_px
    elif coast:
        pts = np.concatenate(coast)
        targets = ax.transData.transform(pts[:: max(1, len(pts) // 400)])
    else:
        targets = np.zeros((0, 2))
    _place_isochrone_labels(ax, lines, parts_by_line, targets, taken, renderer)

    # --- axes ---------------------------------------------------------------------
    label_map_axes(ax, is_geographic)
    ax.tick_params(labelsize=8)
    ax.xaxis.label.set_fontsize(9)
    ax.yaxis.label.set_fontsize(9)
    for spine in ax.spines.values():
        spine.set_linewidth(0.8)

    # --- colour bar: the classes in proportion, a tick on every edge ------------------
    cax = ax.inset_axes((1.025, 0.0, 0.035, 1.0))
    colorbar = fig.colorbar(image, cax=cax, spacing="proportional", boundaries=edges)
    colorbar.set_label(classes.label, fontsize=9)
    ticks = np.asarray(classes.ticks if classes.ticks is not None else edges, dtype=np.float64)
    colorbar.ax.yaxis.set_major_locator(FixedLocator([float(v) for v in ticks]))
    colorbar.ax.yaxis.set_minor_locator(FixedLocator([]))
    if classes.tick_labels is not None:
        labels = list(classes.tick_labels)
    else:
        every = max(1, math.ceil(len(ticks) / 16))
        labels = [f"{t:g}" if k % every == 0 or k == len(ticks) - 1 else ""
                  for k, t in enumerate(ticks)]
    colorbar.ax.yaxis.set_major_formatter(
        FuncFormatter(lambda v, pos: labels[pos] if pos is not None and pos < len(labels) else "")
    )
    colorbar.ax.tick_params(labelsize=8)
    colorbar.outline.set_linewidth(0.6)
    cax.set_gid("colorbar")
    fit_colorbar_label(colorbar.ax.yaxis.label, box_px[1])
    return fig


def fit_colorbar_label(label: Any, max_height_px: float) -> None:
    """Shrink, then wrap, a vertical colour-bar label to the colour bar's height."""
    fig = label.get_figure()
    renderer = fig.canvas.get_renderer()
    size = float(label.get_fontsize())
    height = float(label.get_window_extent(renderer).height)
    if height <= max_height_px:
        return
    label.set_fontsize(max(7.0, size * max_height_px / height))
    if label.get_window_extent(renderer).height > max_height_px:
        import textwrap

        text = label.get_text()
        chars = max(10, int(len(text) * max_height_px / label.get_window_extent(renderer).height))
        label.set_text("\n".join(textwrap.wrap(text, chars)))


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
        (line,) = ax.plot(xy[:, 0], xy[:, 1], color=_PATH_COLOR, lw=0.7, alpha=0.9, zorder=6,
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
                arrowprops={"arrowstyle": "-|>,head_length=0.5,head_width=0.22", "color": _PATH_COLOR,
                            "lw": 0.7, "shrinkA": 0, "shrinkB": 0},
            ))
    return artists


#: Style of wave paths on maps (the same dark line as the wave-path layer's SLD).
_PATH_COLOR = "#1a1a1a"
#: Style of a nest's outline on the basin's maps.
_NEST_STYLE: dict[str, Any] = {"color": "#1a1a1a", "lw": 0.8, "ls": "--"}


def wave_path_handle() -> Any:
    """Legend entry of :func:`draw_wave_paths`: the line with an arrowhead, "towards the site"."""
    from matplotlib.lines import Line2D

    return Line2D([], [], color=_PATH_COLOR, lw=0.7, marker=">", markersize=4, markevery=[1],
                  label="Wave path (arrows towards the site)")


def nest_outline_handle() -> Any:
    """Legend entry of :func:`draw_nest_outline`."""
    from matplotlib.lines import Line2D

    return Line2D([], [], **_NEST_STYLE, label="Nested finer grid (own map)")


def draw_nest_outline(ax: Axes, outline: NDArray[np.float64]) -> None:
    """A nest's outline (map coordinates, closed ring) on a basin map, dashed."""
    ax.plot(outline[:, 0], outline[:, 1], zorder=5, **_NEST_STYLE)


def label_map_axes(ax: Any, is_geographic: bool) -> None:
    """Name a map's axes as every ttmap map does: longitude/latitude in degrees, or easting/northing
    in metres with plain thousands-separated ticks."""
    from matplotlib.ticker import FuncFormatter, MaxNLocator

    if is_geographic:
        ax.set_xlabel("Longitude (°)")
        ax.set_ylabel("Latitude (°)")
        return
    ax.set_xlabel("Easting (m)")
    ax.set_ylabel("Northing (m)")
    ax.ticklabel_format(style="plain", useOffset=False)
    ax.xaxis.set_major_locator(MaxNLocator(nbins=5))  # seven-digit labels need the room
    thousands = FuncFormatter(lambda v, _pos: f"{v:,.0f}")
    ax.xaxis.set_major_formatter(thousands)
    ax.yaxis.set_major_formatter(thousands)
