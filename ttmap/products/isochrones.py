"""Isochrone lines and bands from an arrival-time field, as shapely geometries.

The input is an arrival-time field in minutes on a raster grid plus the
raster's affine transform (the rasterio convention: it maps pixel-corner
``(col, row)`` coordinates to map ``(x, y)``). The outputs are shapely 2.x
geometries in the same map coordinates, ready for a vector writer or a map.

Functions here are pure: no file I/O, inputs are never modified.

Notes
-----
Value ``time_min[r, c]`` belongs to the centre of cell ``(r, c)``, which lies
at ``transform * (c + 0.5, r + 0.5)``. Contours are traced by marching squares
(contourpy) between cell centres, with linear interpolation along quad edges,
so the outermost half cell of the grid is never covered. NaN (or infinite)
cells are masked: a quad touching a masked centre is not contoured (except its
triangular corner made of three valid centres), so lines and bands stop at
land and never cross it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ttmap.errors import InputDataError

if TYPE_CHECKING:
    from affine import Affine
    from contourpy import ContourGenerator
    from shapely.geometry import MultiLineString, MultiPolygon
    from shapely.geometry.base import BaseGeometry

__all__ = [
    "IsochroneBand",
    "IsochroneLine",
    "default_levels_min",
    "format_minutes_label",
    "isochrone_bands",
    "isochrone_lines",
    "levels_from_interval",
]

#: Upper limit on the number of contour levels, to catch a mistyped interval
#: (for example 0.01 min over a 24 h field) before it runs for hours.
_MAX_LEVELS = 10_000


@dataclass(frozen=True)
class IsochroneLine:
    """One isochrone: all places the wave reaches after the same time.

    Attributes
    ----------
    minutes : float
        Arrival time of the line, minutes after origin.
    label : str
        The time as ``h:mm`` (see :func:`format_minutes_label`).
    geometry : shapely.MultiLineString
        The line in map coordinates (the CRS of the raster). It is split
        wherever the field has NaN cells (land or unreached water).
    """

    minutes: float
    label: str
    geometry: MultiLineString


@dataclass(frozen=True)
class IsochroneBand:
    """The area the wave reaches between two times.

    Attributes
    ----------
    min_minutes, max_minutes : float
        Lower and upper arrival time of the band, minutes after origin.
    label : str
        ``"h:mm-h:mm"``, for example ``"0:10-0:20"``.
    geometry : shapely.MultiPolygon
        Valid polygons in map coordinates, holes where land (NaN) lies.
    """

    min_minutes: float
    max_minutes: float
    label: str
    geometry: MultiPolygon


# ---------------------------------------------------------------------------
# Levels and labels
# ---------------------------------------------------------------------------


def _check_max_time(max_time_min: float) -> float:
    value = float(max_time_min)
    if not math.isfinite(value):
        raise InputDataError(
            f"max_time_min must be a finite number of minutes, got {max_time_min!r}; "
            "pass the largest arrival time to contour, e.g. numpy.nanmax(time_min)"
        )
    return value


def default_levels_min(max_time_min: float) -> NDArray[np.float64]:
    """Default isochrone levels for a field whose latest arrival is ``max_time_min``.

    Every 10 minutes up to 2 hours, then every 30 minutes up to 12 hours,
    then every hour. Only levels in ``(0, max_time_min]`` are returned.

    Parameters
    ----------
    max_time_min : float
        Latest arrival time to contour, minutes.

    Returns
    -------
    levels_min : ndarray of shape (n,), float64, minutes
        Increasing levels; fine steps (1, 2 or 5 minutes) are used instead
        when the 10-minute scheme would give fewer than three levels (a small
        local grid), and the array is empty when ``max_time_min < 1``.

    Raises
    ------
    InputDataError
        If ``max_time_min`` is not finite, or so large that more than 10000
        levels would result.

    Examples
    --------
    >>> default_levels_min(150).tolist()
    [10.0, 20.0, 30.0, 40.0, 50.0, 60.0, 70.0, 80.0, 90.0, 100.0, 110.0, 120.0, 150.0]
    >>> default_levels_min(840)[-4:].tolist()
    [690.0, 720.0, 780.0, 840.0]
    >>> default_levels_min(25).tolist()
    [5.0, 10.0, 15.0, 20.0, 25.0]
    """
    max_min = _check_max_time(max_time_min)
    if max_min < 30.0:
        # A local grid: the 10-minute scheme would give at most two lines.
        for step_min in (1.0, 2.0, 5.0):
            if max_min / step_min <= 10.0:
                break
        return levels_from_interval(step_min, max_min)
    fine = np.arange(10.0, 120.0 + 0.5, 10.0)
    medium = np.arange(150.0, 720.0 + 0.5, 30.0)
    n_hours = max(0, math.floor(max_min / 60.0) - 12)
    if n_hours > _MAX_LEVELS:
        raise InputDataError(
            f"max_time_min {max_min:g} gives more than {_MAX_LEVELS} hourly levels; "
            "pass the latest arrival time of the field in minutes"
        )
    coarse = 720.0 + 60.0 * np.arange(1, n_hours + 1, dtype=np.float64)
    levels = np.concatenate([fine, medium, coarse])
    return levels[(levels > 0.0) & (levels <= max_min)]


def levels_from_interval(interval_min: float, max_time_min: float) -> NDArray[np.float64]:
    """Levels every ``interval_min`` minutes, from ``interval_min`` up to ``max_time_min``.

    Parameters
    ----------
    interval_min : float
        Spacing of the levels, minutes, > 0.
    max_time_min : float
        Largest level allowed, minutes (inclusive, with a tolerance of
        1e-9 of the interval for floating-point steps).

    Returns
    -------
    levels_min : ndarray of shape (n,), float64, minutes
        ``interval_min * k`` for ``k = 1, 2, ...``; empty if
        ``max_time_min < interval_min``.

    Raises
    ------
    InputDataError
        If the interval is not a positive finite number, ``max_time_min`` is
        not finite, or more than 10000 levels would result.

    Examples
    --------
    >>> levels_from_interval(15, 60).tolist()
    [15.0, 30.0, 45.0, 60.0]
    >>> levels_from_interval(0.5, 1.9).tolist()
    [0.5, 1.0, 1.5]
    """
    step = float(interval_min)
    if not math.isfinite(step) or step <= 0.0:
        raise InputDataError(
            f"contour interval must be a positive number of minutes, got {interval_min!r}; "
            "pass e.g. 10 for a line every 10 minutes"
        )
    max_min = _check_max_time(max_time_min)
    n_levels = math.floor(max_min / step + 1e-9) if max_min > 0.0 else 0
    if n_levels > _MAX_LEVELS:
        raise InputDataError(
            f"contour interval {step:g} min over {max_min:g} min gives {n_levels} levels "
            f"(more than {_MAX_LEVELS}); use a larger interval"
        )
    return step * np.arange(1, n_levels + 1, dtype=np.float64)


def format_minutes_label(minutes: float) -> str:
    """Format a time in minutes as ``h:mm``, rounded to the nearest minute.

    Parameters
    ----------
    minutes : float
        Time in minutes; half minutes round up (away from zero).

    Returns
    -------
    str
        Hours without padding, minutes with two digits; a leading ``-`` for
        negative times.

    Raises
    ------
    InputDataError
        If ``minutes`` is not finite.

    Examples
    --------
    >>> format_minutes_label(10)
    '0:10'
    >>> format_minutes_label(90)
    '1:30'
    >>> format_minutes_label(720)
    '12:00'
    >>> format_minutes_label(59.6)
    '1:00'
    """
    value = float(minutes)
    if not math.isfinite(value):
        raise InputDataError(
            f"cannot format a time of {minutes!r} minutes as h:mm; pass a finite number"
        )
    sign = "-" if value < 0 else ""
    total = math.floor(abs(value) + 0.5)
    hours, mins = divmod(total, 60)
    return f"{sign}{hours}:{mins:02d}"


# ---------------------------------------------------------------------------
# Contouring
# ---------------------------------------------------------------------------


def _check_field(time_min: ArrayLike, transform: Affine) -> NDArray[np.float64]:
    field = np.asarray(time_min)
    if field.ndim != 2:
        raise InputDataError(
            f"time_min must be a 2-D array (rows, cols), got {field.ndim} dimension(s) "
            f"with shape {field.shape}; pass one band of the arrival-time raster"
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
    a, b, _, d, e, _ = coeffs
    if a * e - b * d == 0.0:
        raise InputDataError(
            f"transform {transform!r} is degenerate (determinant 0); "
            "check the pixel sizes of the raster"
        )
    return np.asarray(field, dtype=np.float64)


def _check_levels(levels_min: ArrayLike) -> NDArray[np.float64]:
    levels = np.asarray(levels_min, dtype=np.float64).ravel()
    if levels.size and not np.all(np.isfinite(levels)):
        raise InputDataError(
            f"levels_min must be finite minutes, got {levels[~np.isfinite(levels)][:5].tolist()}; "
            "drop NaN/inf levels"
        )
    if levels.size and levels.min() <= 0.0:
        raise InputDataError(
            f"levels_min must be > 0 minutes, got {levels.min():g}; "
            "isochrones start after the origin time"
        )
    if levels.size > _MAX_LEVELS:
        raise InputDataError(
            f"{levels.size} levels requested (more than {_MAX_LEVELS}); use fewer levels"
        )
    return np.unique(levels)


def _generator(field: NDArray[np.float64]) -> ContourGenerator:
    import contourpy

    z = np.ma.masked_invalid(field, copy=False)
    # chunk_size=0: one chunk, so lines are not cut and band polygons do not
    # share edges at chunk borders (edge-sharing parts would make an invalid
    # MultiPolygon). Serial single-chunk speed is on a par with chunking here.
    return contourpy.contour_generator(
        z=z,
        name="serial",
        corner_mask=True,
        line_type=contourpy.LineType.ChunkCombinedOffset,
        fill_type=contourpy.FillType.ChunkCombinedOffsetOffset,
        chunk_size=0,
    )


def _to_map(points: NDArray[np.float64], transform: Affine) -> NDArray[np.float64]:
    """Convert contourpy (col, row) centre-index points to map (x, y), vectorised."""
    a, b, c, d, e, f = tuple(transform)[:6]
    col = points[:, 0] + 0.5
    row = points[:, 1] + 0.5
    out = np.empty_like(points)
    out[:, 0] = a * col + b * row + c
    out[:, 1] = d * col + e * row + f
    return out


def _value_range(field: NDArray[np.float64]) -> tuple[float, float] | None:
    finite = np.isfinite(field)
    if not finite.any():
        return None
    values = field[finite]
    return float(values.min()), float(values.max())


def isochrone_lines(
    time_min: ArrayLike,
    transform: Affine,
    levels_min: ArrayLike,
) -> list[IsochroneLine]:
    """Trace isochrone lines of an arrival-time field.

    Parameters
    ----------
    time_min : ndarray of shape (rows, cols), float, minutes
        Arrival time after origin; NaN (or inf) on land and unreached cells.
    transform : affine.Affine
        Maps pixel-corner ``(col, row)`` to map ``(x, y)`` (rasterio
        convention). Any orientation (south-up, rotated) is allowed.
    levels_min : array_like of shape (n,), float, minutes
        Times to contour, > 0; sorted and de-duplicated here.

    Returns
    -------
    list of IsochroneLine
        Ordered by increasing time. Levels outside the range of the finite
        values, or that produce no line, are left out. An all-NaN field gives
        an empty list.

    Raises
    ------
    InputDataError
        If ``time_min`` is not 2-D and numeric, the transform is degenerate,
        or a level is not finite and positive.

    Notes
    -----
    Lines run through cell centres' quads (see the module notes) and stop at
    NaN cells. Each level's geometry is one MultiLineString whose parts are
    the separate traced lines; closed lines repeat their first point.

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> t = np.add.outer(np.arange(5.0), np.zeros(4)) * 10  # 0, 10, ... down the rows
    >>> [line.label for line in isochrone_lines(t, Affine.identity(), [15, 25, 99])]
    ['0:15', '0:25']
    """
    import shapely

    field = _check_field(time_min, transform)
    levels = _check_levels(levels_min)
    value_range = _value_range(field)
    if value_range is None or levels.size == 0:
        return []
    lo, hi = value_range
    levels = levels[(levels >= lo) & (levels <= hi)]
    if levels.size == 0:
        return []

    # ChunkCombinedOffset: per level, (points per chunk, offsets per chunk).
    per_level: list[Any] = list(_generator(field).multi_lines(levels))
    result: list[IsochroneLine] = []
    for level, (points_chunks, offsets_chunks) in zip(levels, per_level, strict=True):
        coords_parts = []
        offsets_parts = []
        n_points = 0
        for points, offsets in zip(points_chunks, offsets_chunks, strict=True):
            if points is None or len(points) == 0:
                continue
            coords_parts.append(points)
            offsets_parts.append(np.asarray(offsets[:-1], dtype=np.int64) + n_points)
            n_points += len(points)
        if n_points == 0:
            continue
        coords = _to_map(np.concatenate(coords_parts), transform)
        line_offsets = np.append(np.concatenate(offsets_parts), n_points)
        geometry = shapely.from_ragged_array(
            shapely.GeometryType.MULTILINESTRING,
            coords,
            (line_offsets, np.array([0, len(line_offsets) - 1], dtype=np.int64)),
        )[0]
        minutes = float(level)
        result.append(IsochroneLine(minutes, format_minutes_label(minutes), geometry))
    return result


def _polygonal_only(geometry: BaseGeometry) -> MultiPolygon:
    """Repair an invalid geometry, keeping only its polygonal parts."""
    import shapely

    try:
        fixed = shapely.make_valid(geometry, method="structure", keep_collapsed=False)
    except TypeError:  # shapely < 2.1 has only the "linework" method
        fixed = shapely.make_valid(geometry)
    stack = [fixed]
    polygons = []
    while stack:
        part = stack.pop()
        if part.is_empty:
            continue
        if part.geom_type == "Polygon":
            polygons.append(part)
        elif part.geom_type in ("MultiPolygon", "GeometryCollection"):
            stack.extend(shapely.get_parts(part))
    if not polygons:
        return shapely.MultiPolygon()
    merged = shapely.union_all(polygons)
    if merged.geom_type == "Polygon":
        return shapely.MultiPolygon([merged])
    return merged


def _assemble_valid(polygons: NDArray[np.object_]) -> MultiPolygon:
    """One valid MultiPolygon from the polygons of one band.

    contourpy's polygons of one band never overlap, but a rare ring touches
    itself at a vertex (GEOS: "Ring Self-intersection"). Only those polygons
    are repaired, which is far cheaper than repairing the whole band.
    """
    import shapely

    invalid = ~shapely.is_valid(polygons)
    if invalid.any():
        repaired = [shapely.get_parts(_polygonal_only(p)) for p in polygons[invalid]]
        polygons = np.concatenate([polygons[~invalid], *repaired])
    geometry = shapely.multipolygons(polygons)
    if not shapely.is_valid(geometry):  # not seen in practice; keep the promise anyway
        geometry = _polygonal_only(geometry)
    return geometry


def isochrone_bands(
    time_min: ArrayLike,
    transform: Affine,
    levels_min: ArrayLike,
) -> list[IsochroneBand]:
    """Fill the areas between consecutive isochrone levels.

    Parameters
    ----------
    time_min : ndarray of shape (rows, cols), float, minutes
        Arrival time after origin; NaN (or inf) on land and unreached cells.
    transform : affine.Affine
        Maps pixel-corner ``(col, row)`` to map ``(x, y)`` (rasterio
        convention).
    levels_min : array_like of shape (n,), float, minutes
        Band edges, > 0; sorted and de-duplicated here. The bands are
        ``[0, levels[0]], [levels[0], levels[1]], ...``: the first band starts
        at the origin time (it also takes any value below 0), and nothing
        later than the last level is filled.

    Returns
    -------
    list of IsochroneBand
        Ordered by time; bands with no area are left out. Each geometry is a
        valid MultiPolygon: every polygon is checked with ``shapely.is_valid``
        and the rare invalid one (a ring that touches itself where two land
        cells meet at a corner) is repaired with ``shapely.make_valid``,
        keeping polygons only.

    Raises
    ------
    InputDataError
        As for :func:`isochrone_lines`.

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> t = np.add.outer(np.arange(5.0), np.zeros(4)) * 10
    >>> [(b.label, b.geometry.area) for b in isochrone_bands(t, Affine.identity(), [15, 25])]
    [('0:00-0:15', 4.5), ('0:15-0:25', 3.0)]
    """
    import shapely

    field = _check_field(time_min, transform)
    levels = _check_levels(levels_min)
    value_range = _value_range(field)
    if value_range is None or levels.size == 0:
        return []
    lo, hi = value_range
    # Band i spans [lowers[i], uppers[i]]; the first one takes everything
    # below its upper level. Keep the (contiguous) run of bands that overlaps
    # the range of the values; any that still come out empty are dropped below.
    lowers = np.concatenate([[0.0], levels[:-1]])
    uppers = levels
    fill_from = lowers.copy()
    fill_from[0] = -np.inf
    keep = (fill_from <= hi) & (uppers >= lo)
    if not keep.any():
        return []
    lowers, uppers = lowers[keep], uppers[keep]
    edges = np.concatenate([fill_from[keep][:1], uppers])
    # ChunkCombinedOffsetOffset: per band, (points, ring offsets, polygon offsets) per chunk.
    filled: list[Any] = list(_generator(field).multi_filled(edges))

    result: list[IsochroneBand] = []
    for lower, upper, (points_chunks, offsets_chunks, outer_chunks) in zip(
        lowers, uppers, filled, strict=True
    ):
        coords_parts, ring_parts, poly_parts = [], [], []
        n_points = 0
        n_rings = 0
        for points, offsets, outer in zip(points_chunks, offsets_chunks, outer_chunks, strict=True):
            if points is None or len(points) == 0:
                continue
            coords_parts.append(points)
            ring_parts.append(np.asarray(offsets[:-1], dtype=np.int64) + n_points)
            poly_parts.append(np.asarray(outer[:-1], dtype=np.int64) + n_rings)
            n_points += len(points)
            n_rings += len(offsets) - 1
        if n_points == 0:
            continue
        coords = _to_map(np.concatenate(coords_parts), transform)
        ring_offsets = np.append(np.concatenate(ring_parts), n_points)
        poly_offsets = np.append(np.concatenate(poly_parts), n_rings)
        polygons = shapely.from_ragged_array(
            shapely.GeometryType.POLYGON, coords, (ring_offsets, poly_offsets)
        )
        geometry = _assemble_valid(polygons)
        if geometry.is_empty or geometry.area == 0.0:
            continue
        lower_min, upper_min = float(lower), float(upper)
        label = f"{format_minutes_label(lower_min)}-{format_minutes_label(upper_min)}"
        result.append(IsochroneBand(lower_min, upper_min, label, geometry))
    return result
