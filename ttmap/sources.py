"""Sources: points, lines, areas and rupture rectangles, placed on the solve plane.

A :class:`Source` is a shapely geometry with the CRS it is expressed in. It
knows nothing about the grid until :func:`place_source` puts it there, which
returns a :class:`SourceStart`: a start region of water cells whose times are
set rather than marched, the exact times of the band of cells on both sides
of its edge, and the time of that edge (the start front), added to the
marched times outside.

- A point starts from a straight-ray region. Every water cell within
  ``POINT_START_RADIUS_CELLS`` (10) solve cells that the source sees along a
  straight line through water gets the straight-ray time: its distance times
  the mean slowness sampled along the ray. Land bounds the region (cells
  behind it are hidden, and the region is kept 4-connected to the source
  cell); the radius shrinks, to no less than ``POINT_MIN_RADIUS_CELLS`` (2),
  to the first water cell that is hidden from the source or whose speed
  differs by more than ``POINT_MAX_SPEED_CHANGE`` (10 %) from the speed at
  the source. The start front is the time ``radius / c`` (``c`` the fastest
  speed in the disc); the region is the visible water earlier than that.
  Starting from a single cell instead would give first-order error near the
  source.
- A line starts from a tube of ``LINE_START_RADIUS_CELLS`` (2) cells around
  it: distance to the line over the local speed, front at the tube radius
  over the fastest speed in the tube.
- An area (polygon, rupture rectangle) starts at time zero on every open
  water cell inside it; the front marches outward from its edge, with the
  exact distance to the edge over the local speed on the band. On lon/lat
  grids the native cells inside are set to exactly zero again after the
  times are carried back from the Mercator rows (:attr:`SourceStart.native_zero_cells`).

Exact start band: the cells on both sides of the region's edge get their
signed time from the start front (negative inside), which
:func:`ttmap.solver.fast_march_s` imposes exactly on scikit-fmm's frozen
cells instead of its linear interpolation of ``phi``.

Rupture rectangles are built in an azimuthal equidistant projection centred on
the rupture (so length and width are true distances), densified, and carried
to the grid's CRS.
"""

from __future__ import annotations

import dataclasses
import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import shapely
from pyproj import CRS, Transformer
from scipy import ndimage
from shapely.geometry.base import BaseGeometry

from ttmap._typing import BoolArray, FloatArray, IntArray
from ttmap.errors import SourceError, TtmapWarning
from ttmap.grid import Grid, SolvePlane
from ttmap.physics.constants import MEAN_EARTH_RADIUS_M
from ttmap.physics.scaling import rupture_size_km

__all__ = [
    "Source",
    "SourceStart",
    "Placement",
    "place_source",
    "nearest_open_water",
    "POINT_START_RADIUS_CELLS",
]

#: Largest radius of the start region of a point source, in solve-grid cells.
#: Times inside it are set from straight rays; a larger region keeps the
#: strongly curved part of the front out of the marching (errors below 0.2 %
#: beyond 20 cells on uniform depth, see tests/reference).
POINT_START_RADIUS_CELLS: float = 10.0
#: Smallest radius of that region (near land or strong speed changes).
POINT_MIN_RADIUS_CELLS: float = 2.0
#: Largest relative speed change accepted inside a point's start region.
POINT_MAX_SPEED_CHANGE: float = 0.10
#: Radius of the start tube around a line source, in solve-grid cells.
LINE_START_RADIUS_CELLS: float = 2.0
#: Width of the start tube outside an area source, in solve-grid cells (uniform depth:
#: 2 cells leave 1.9-3 % error at 3-5 cells off a corner, 3 cells 0.95-1.26 %; wider tubes
#: put straight rays over many cells of changing depth; docs/method.md §6.4).
AREA_START_RADIUS_CELLS: float = 3.0

_WGS84 = CRS.from_epsg(4326)
_FOUR = np.array([[0, 1, 0], [1, 1, 1], [0, 1, 0]], dtype=bool)


@dataclass(frozen=True)
class Source:
    """A tsunami source: a geometry and the CRS it is given in.

    Build one with the class methods: :meth:`point`, :meth:`point_xy`,
    :meth:`from_geometry`, :meth:`rupture`, :meth:`rupture_from_magnitude`.

    Attributes
    ----------
    geometry : shapely geometry
        Point, LineString/MultiLineString or Polygon/MultiPolygon.
    crs : pyproj.CRS or None
        CRS of ``geometry``; None means the grid's own CRS.
    kind : {"point", "line", "area", "rupture"}
    label : str
        A short human description, used in products.
    params : dict
        What built the source (for the run record).
    """

    geometry: BaseGeometry
    crs: CRS | None = None
    kind: str = "point"
    label: str = ""
    params: dict[str, Any] = field(default_factory=dict)

    @classmethod
    def point(cls, lon: float, lat: float, *, label: str = "") -> Source:
        """A point source at longitude/latitude (WGS84 degrees)."""
        _check_lonlat(lon, lat)
        return cls(
            shapely.Point(float(lon), float(lat)),
            _WGS84,
            "point",
            label or f"point {_fmt_lonlat(lon, lat)}",
            {"lon": float(lon), "lat": float(lat)},
        )

    @classmethod
    def point_xy(cls, x: float, y: float, *, crs: Any = None, label: str = "") -> Source:
        """A point source at map coordinates ``(x, y)`` (the grid's CRS unless ``crs``)."""
        c = None if crs is None else CRS.from_user_input(crs)
        return cls(
            shapely.Point(float(x), float(y)),
            c,
            "point",
            label or f"point x {x:.10g}, y {y:.10g}",
            {"x": float(x), "y": float(y), "crs": None if c is None else c.to_string()},
        )

    @classmethod
    def from_geometry(cls, geometry: BaseGeometry, *, crs: Any = _WGS84, label: str = "") -> Source:
        """A source from a shapely point, line or polygon in ``crs`` (None: grid CRS)."""
        if geometry is None or geometry.is_empty:
            raise SourceError("source geometry is empty; give a point, line or polygon")
        gtype = geometry.geom_type
        if gtype in ("Point",):
            kind = "point"
        elif gtype in ("LineString", "MultiLineString", "LinearRing"):
            kind = "line"
        elif gtype in ("Polygon", "MultiPolygon"):
            kind = "area"
            if not geometry.is_valid:
                geometry = shapely.make_valid(geometry)
        else:
            raise SourceError(
                f"source geometry type {gtype} is not supported; use a Point, a LineString "
                "or a Polygon"
            )
        c = None if crs is None else CRS.from_user_input(crs)
        return cls(geometry, c, kind, label or f"{kind} source", {"wkt": geometry.wkt})

    @classmethod
    def rupture(
        cls,
        lon: float,
        lat: float,
        *,
        strike_deg: float,
        length_km: float,
        width_km: float,
        label: str = "",
    ) -> Source:
        """A rupture rectangle centred at lon/lat, long side along the strike.

        Parameters
        ----------
        lon, lat : float
            Centre of the rectangle, WGS84 degrees.
        strike_deg : float
            Azimuth of the long side, degrees clockwise from north.
        length_km, width_km : float
            Along-strike length and down-dip (surface-projected) width.
        """
        _check_lonlat(lon, lat)
        for name, v in (("length_km", length_km), ("width_km", width_km)):
            if not (np.isfinite(v) and v > 0):
                raise SourceError(f"rupture {name} = {v!r} must be a positive number of km")
        if not np.isfinite(strike_deg):
            raise SourceError(f"rupture strike {strike_deg!r} must be a number of degrees")
        aeqd = CRS.from_proj4(
            f"+proj=aeqd +lat_0={lat} +lon_0={lon} +datum=WGS84 +units=m +no_defs"
        )
        hl, hw = 500.0 * length_km, 500.0 * width_km
        az = math.radians(strike_deg)
        ux, uy = math.sin(az), math.cos(az)  # along strike (east, north)
        vx, vy = uy, -ux  # perpendicular (90 degrees clockwise)
        corners = [
            (s * hl * ux + d * hw * vx, s * hl * uy + d * hw * vy)
            for s, d in ((-1, -1), (1, -1), (1, 1), (-1, 1))
        ]
        rect = shapely.segmentize(shapely.Polygon(corners), 1000.0)
        to_ll = Transformer.from_crs(aeqd, _WGS84, always_xy=True)

        def _to_lonlat(xy: np.ndarray) -> np.ndarray:
            lo, la = to_ll.transform(xy[:, 0], xy[:, 1])
            # Keep longitudes within 180 degrees of the centre (PROJ returns them in
            # [-180, 180], which would tear a rectangle crossing the antimeridian).
            lo = float(lon) + np.mod(np.asarray(lo) - float(lon) + 180.0, 360.0) - 180.0
            return np.column_stack([lo, la])

        geom = shapely.transform(rect, _to_lonlat)
        params = {
            "lon": float(lon),
            "lat": float(lat),
            "strike_deg": float(strike_deg),
            "length_km": float(length_km),
            "width_km": float(width_km),
        }
        text = label or (
            f"rupture {length_km:.0f} x {width_km:.0f} km, strike {strike_deg:g} deg, "
            f"centre {_fmt_lonlat(lon, lat)}"
        )
        return cls(geom, _WGS84, "rupture", text, params)

    @classmethod
    def rupture_from_magnitude(
        cls,
        lon: float,
        lat: float,
        *,
        strike_deg: float,
        mw: float,
        relation: str = "strasser2010-interface",
        label: str = "",
    ) -> Source:
        """A rupture rectangle sized from moment magnitude by a scaling law.

        See :mod:`ttmap.physics.scaling` for the relations and their sources.
        """
        length_km, width_km = rupture_size_km(mw, relation)
        src = cls.rupture(
            lon, lat, strike_deg=strike_deg, length_km=length_km, width_km=width_km, label=label
        )
        params = dict(src.params, mw=float(mw), scaling_relation=relation)
        text = label or f"Mw {mw:g} ({relation}) " + src.label
        return Source(src.geometry, src.crs, "rupture", text, params)

    def in_crs(self, crs: CRS) -> BaseGeometry:
        """The geometry in ``crs`` (unchanged if the CRSs match or crs is None)."""
        if self.crs is None or self.crs == crs:
            return self.geometry
        tr = Transformer.from_crs(self.crs, crs, always_xy=True)
        return shapely.transform(
            self.geometry, lambda xy: np.column_stack(tr.transform(xy[:, 0], xy[:, 1]))
        )

    def describe(self) -> dict[str, Any]:
        """A JSON-ready description for the run record."""
        return {
            "kind": self.kind,
            "label": self.label,
            "crs": None if self.crs is None else self.crs.to_string(),
            "params": self.params,
            "geometry_wkt": self.geometry.wkt if self.kind != "point" else None,
        }


@dataclass(frozen=True)
class Placement:
    """Where a source landed on the native grid (for reports and summaries)."""

    x: float
    y: float
    row: int
    col: int
    depth_m: float
    moved_m: float
    start_cells: int


@dataclass(frozen=True)
class SourceStart:
    """The start of a solve on the solve plane.

    Attributes
    ----------
    inside : ndarray of shape plane.shape, bool
        The start region: water cells whose times are set, not marched.
    inside_cells : (rows, cols) of 1-D int arrays
        The cells of the start region, and ``inside_time_s`` their times.
    inside_time_s : 1-D float array, seconds
        Start times in the region (straight-ray time for points, distance over the
        local speed for lines and the tube around an area, 0 inside an area).
    band_cells : (rows, cols) of 1-D int arrays
        Cells on both sides of the region's edge.
    band_time_s : 1-D float array, seconds
        Signed time from the start front there (negative inside).
    contour_time_s : float
        Time of the start front; added to the marched times outside.
    placement : Placement
    native_zero_cells : (rows, cols) of 1-D int arrays, or None
        Native cells to set to exactly zero after the times are carried back
        (the open water cells inside an area source on a lon/lat grid,
        duplicated seam column included); None otherwise.
    as_point : bool
        True for an area too small to start from (fewer than 4 cells), started
        as a point at its representative point.
    """

    inside: BoolArray = field(repr=False)
    inside_cells: tuple[IntArray, IntArray] = field(repr=False)
    inside_time_s: FloatArray = field(repr=False)
    band_cells: tuple[IntArray, IntArray] = field(repr=False)
    band_time_s: FloatArray = field(repr=False)
    contour_time_s: float
    placement: Placement
    native_zero_cells: tuple[IntArray, IntArray] | None = field(default=None, repr=False)
    as_point: bool = False


def _check_lonlat(lon: float, lat: float) -> None:
    if not (np.isfinite(lon) and np.isfinite(lat)) or abs(lat) > 90.0 or abs(lon) > 540.0:
        raise SourceError(
            f"source position (lon {lon}, lat {lat}) is not a valid longitude/latitude; "
            "give LON,LAT in degrees (longitude first)"
        )


def _fmt_lonlat(lon: float, lat: float) -> str:
    return f"(lon {lon:.4f}, lat {lat:.4f})"


def _fmt_position(grid: Grid, x: float, y: float) -> str:
    if grid.is_geographic:
        return _fmt_lonlat(x, y)
    return f"(x {x:.1f}, y {y:.1f})"


def _ground_distance_m(grid: Grid, x0: float, y0: float, x: FloatArray, y: FloatArray) -> FloatArray:
    """Ground distance from one position to many (haversine on R1 for lon/lat; the WGS84
    geodesic for a projected grid, whose map distance differs by its scale factor)."""
    if not grid.is_geographic:
        from pyproj import Geod

        to_lonlat = Transformer.from_crs(grid.crs, "EPSG:4326", always_xy=True)
        lon0, lat0 = to_lonlat.transform(x0, y0)
        lon, lat = to_lonlat.transform(np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64))
        n = np.size(lon)
        _, _, dist = Geod(ellps="WGS84").inv(np.full(n, lon0), np.full(n, lat0), np.ravel(lon), np.ravel(lat))
        return np.asarray(dist, dtype=np.float64).reshape(np.shape(x))
    lam0, phi0 = math.radians(x0), math.radians(y0)
    lam, phi = np.radians(x), np.radians(y)
    h = np.sin((phi - phi0) / 2) ** 2 + math.cos(phi0) * np.cos(phi) * np.sin((lam - lam0) / 2) ** 2
    return np.asarray(2.0 * MEAN_EARTH_RADIUS_M * np.arcsin(np.sqrt(np.clip(h, 0, 1))), dtype=np.float64)


def nearest_open_water(
    grid: Grid, open_water: BoolArray, x: float, y: float, radius_m: float
) -> tuple[int, int, float] | None:
    """Nearest open-water cell within ``radius_m`` of map position (x, y)."""
    row_m, col_m = grid.cell_size_m()
    row, col = (int(v) for v in grid.rowcol(x, y))
    if grid.is_geographic:
        coslat = max(math.cos(math.radians(min(abs(y), 89.0))), 1e-3)
        col_m = math.radians(abs(grid.transform.a)) * MEAN_EARTH_RADIUS_M * coslat
    else:
        # a ground radius spans radius x scale map metres: widen the window by the local scale
        step = max(row_m, col_m) / grid.linear_unit_m
        ground = float(_ground_distance_m(grid, x, y, np.array([x + step]), np.array([y]))[0])
        scale = (step * grid.linear_unit_m) / ground if ground > 0 else 1.0
        row_m, col_m = row_m / max(scale, 1e-6), col_m / max(scale, 1e-6)
    nr = int(math.ceil(radius_m / row_m)) + 1
    nc = int(math.ceil(radius_m / col_m)) + 1
    rows = np.arange(max(0, row - nr), min(grid.rows, row + nr + 1))
    cols = np.arange(col - nc, col + nc + 1)
    if grid.wraps_x:
        ncols = open_water.shape[1]
        cols = np.unique(np.mod(cols, ncols))
    else:
        cols = cols[(cols >= 0) & (cols < grid.cols)]
    if rows.size == 0 or cols.size == 0:
        return None
    sub = open_water[np.ix_(rows, cols)]
    rr, cc = np.nonzero(sub)
    if rr.size == 0:
        return None
    cand_r, cand_c = rows[rr], cols[cc]
    cx, cy = grid.xy(cand_r, cand_c)
    dist = _ground_distance_m(grid, x, y, cx, cy)
    i = int(np.argmin(dist))
    if dist[i] > radius_m:
        return None
    return int(cand_r[i]), int(cand_c[i]), float(dist[i])


def _phi_window(
    plane: SolvePlane, px0: float, px1: float, py0: float, py1: float, margin_m: float
) -> tuple[IntArray, IntArray]:
    """Solve rows and columns covering a plane box plus a margin."""
    ys, xs = plane.cell_centres()
    rows = np.nonzero((ys >= min(py0, py1) - margin_m) & (ys <= max(py0, py1) + margin_m))[0]
    if plane.periodic_x:
        span = abs(plane.dx_signed_m) * plane.shape[1]
        if px1 - px0 + 2 * margin_m >= span:
            cols = np.arange(plane.shape[1])
        else:
            lo = px0 - margin_m
            off = np.mod(xs - lo, span)
            cols = np.nonzero(off <= (px1 - px0) + 2 * margin_m)[0]
            cols = cols[np.argsort(off[cols], kind="stable")]  # west to east across the seam
    else:
        cols = np.nonzero((xs >= min(px0, px1) - margin_m) & (xs <= max(px0, px1) + margin_m))[0]
    return rows.astype(np.intp), cols.astype(np.intp)


def _window_xy(
    plane: SolvePlane, rows: IntArray, cols: IntArray, ref_x: float | None = None
) -> tuple[FloatArray, FloatArray]:
    """Plane coordinates of window cells, unwrapped near ``ref_x`` on periodic grids."""
    ys, xs = plane.cell_centres()
    x = xs[cols]
    if plane.periodic_x and ref_x is not None:
        span = abs(plane.dx_signed_m) * plane.shape[1]
        x = ref_x + np.mod(x - ref_x + span / 2.0, span) - span / 2.0
    yy, xx = np.meshgrid(ys[rows], x, indexing="ij")
    return xx, yy


def place_source(
    source: Source,
    *,
    grid: Grid,
    plane: SolvePlane,
    depth_m: FloatArray,
    water: BoolArray,
    open_water: BoolArray,
    basin_labels: IntArray,
    basin_sizes: IntArray,
    speed_plane_m_s: FloatArray,
    barrier_plane: BoolArray,
    snap_radius_m: float | None = None,
    front_speed_m_s: float | None = None,
) -> SourceStart:
    """Put a source on the solve plane.

    Parameters
    ----------
    source : Source
    grid, plane : Grid, SolvePlane
    depth_m : ndarray (native shape), metres, positive down
        For messages (depth found at the source).
    water : ndarray (native shape), bool
        Water cells (after floor depth and opened joins).
    open_water : ndarray (native shape), bool
        Water of the basins a source may start in (not closed lakes).
    basin_labels, basin_sizes : from :func:`ttmap.connectivity.label_water`.
    speed_plane_m_s : ndarray (plane shape), m/s in plane metres
        Speed multiplied by the plane's scale factor.
    barrier_plane : ndarray (plane shape), bool
    snap_radius_m : float, optional
        If given, a point source on land, nodata or in a closed basin moves
        to the nearest open-water cell within this ground distance.
    front_speed_m_s : float, optional
        Area sources: the start front lies at ``AREA_START_RADIUS_CELLS`` cells
        over this speed in time (plane m/s). Give the fastest speed of the
        plane so that every area of a medium starts at the same time (the
        one-solve envelope needs one front for all); default the fastest speed
        around the area.

    Raises
    ------
    SourceError
        Outside the grid, on land/nodata or in a closed basin (without
        snapping or with no open water within the radius), or an area with no
        water inside.
    """
    geom = source.in_crs(grid.crs)
    if source.kind == "point":
        return _place_point(
            geom, source, grid, plane, depth_m, water, open_water, basin_labels, basin_sizes,
            speed_plane_m_s, barrier_plane, snap_radius_m,
        )
    if source.kind == "line":
        return _place_line(geom, grid, plane, depth_m, water, open_water, speed_plane_m_s, barrier_plane)
    return _place_area(
        geom, source, grid, plane, depth_m, water, open_water, basin_labels, basin_sizes,
        speed_plane_m_s, barrier_plane, snap_radius_m, front_speed_m_s,
    )


def _depth_text(depth_m: float) -> str:
    return "nodata" if not np.isfinite(depth_m) else f"depth_m = {depth_m:.1f}"


def _place_point(
    geom: BaseGeometry,
    source: Source,
    grid: Grid,
    plane: SolvePlane,
    depth_m: FloatArray,
    water: BoolArray,
    open_water: BoolArray,
    labels: IntArray,
    sizes: IntArray,
    speed: FloatArray,
    barrier: BoolArray,
    snap_radius_m: float | None,
) -> SourceStart:
    x, y = float(geom.x), float(geom.y)
    where = _fmt_position(grid, x, y)
    if not bool(grid.contains(x, y)):
        left, bottom, right, top = grid.bounds
        raise SourceError(
            f"source at {where} lies outside the grid (x {left:g} to {right:g}, "
            f"y {bottom:g} to {top:g}); choose a position inside it or use a larger bathymetry"
        )
    row, col = (int(v) for v in grid.rowcol(x, y))
    d = float(depth_m[row, col])
    moved = 0.0
    problem = None
    if not water[row, col]:
        problem = f"lies on land ({_depth_text(d)})" if np.isfinite(d) else "lies on a nodata cell"
    elif not open_water[row, col]:
        n = int(sizes[labels[row, col]])
        share = 100.0 * n / max(1, int(water.sum()))
        problem = (
            f"lies in a closed basin of {n} water cells ({share:.2g} % of the grid's water), "
            f"cut off from the open water ({_depth_text(d)})"
        )
    if problem is not None:
        if snap_radius_m is None:
            raise SourceError(
                f"source at {where} {problem}; move it into open water or allow a move to the "
                "nearest open water (snap_radius_m / --snap-radius-km)"
            )
        found = nearest_open_water(grid, open_water, x, y, snap_radius_m)
        if found is None:
            raise SourceError(
                f"source at {where} {problem}, and no open water lies within "
                f"{snap_radius_m / 1000.0:g} km; move it or enlarge the snap radius"
            )
        row, col, moved = found
        cx, cy = grid.xy(row, col)
        x, y = float(cx), float(cy)
        d = float(depth_m[row, col])
        warnings.warn(
            f"source moved {moved / 1000.0:.2f} km from {where} to the nearest open water "
            f"{_fmt_position(grid, x, y)} ({_depth_text(d)})",
            TtmapWarning,
            stacklevel=4,
        )
    px, py = (float(v) for v in plane.to_plane(x, y))
    # The solve cell that seeds the start: nearest solve row mapping to the source's native row.
    col_s = col % plane.shape[1]
    ys, _ = plane.cell_centres()
    cand = np.nonzero(plane.native_row == row)[0]
    row_s = int(cand[np.argmin(np.abs(ys[cand] - py))])
    h = max(plane.spacing_m)
    rows, cols = _phi_window(plane, px, px, py, py, (POINT_START_RADIUS_CELLS + 3.0) * h)
    xx, yy = _window_xy(plane, rows, cols, ref_x=px)
    r = np.hypot(xx - px, yy - py)
    sub_open = ~barrier[np.ix_(rows, cols)]
    sub_speed = np.where(sub_open, speed[np.ix_(rows, cols)], np.nan)
    i0 = int(np.nonzero(rows == row_s)[0][0])
    j0 = int(np.nonzero(cols == col_s)[0][0])
    c_ref = float(sub_speed[i0, j0])
    t_est, visible = _straight_ray_times(xx, yy, px, py, sub_speed, i0, j0)
    # Radius of the start region: up to the first water cell hidden from the source by land,
    # or with a strong speed change. Land itself only bounds the region: cells behind it are
    # hidden, and the region is kept 4-connected to the source below.
    bad = (sub_open & ~visible) | (np.abs(sub_speed / c_ref - 1.0) > POINT_MAX_SPEED_CHANGE)
    bad &= r < POINT_START_RADIUS_CELLS * h
    radius = POINT_START_RADIUS_CELLS * h
    if bad.any():
        radius = max(POINT_MIN_RADIUS_CELLS * h, float(r[bad].min()))
    disc = sub_open & visible & (r < radius)
    c_max = float(np.nanmax(np.where(disc, sub_speed, np.nan))) if disc.any() else c_ref
    contour_t = radius / max(c_max, c_ref)
    region = sub_open & visible & (t_est < contour_t)
    region[i0, j0] = True
    lab, _ = ndimage.label(region, structure=_FOUR)
    region = lab == lab[i0, j0]
    return _start_from_region(
        plane, rows, cols, region, sub_open, t_est, t_est, sub_speed, contour_t,
        Placement(x, y, row, col, d, moved, 0), grid.shape,
    )


def _straight_ray_times(
    xx: FloatArray, yy: FloatArray, px: float, py: float, speed: FloatArray, i0: int, j0: int,
    samples: int = 32,
) -> tuple[FloatArray, BoolArray]:
    """Straight-ray time from (px, py) to each window cell, and whether the ray stays in water.

    The slowness is averaged over ``samples`` points of each segment, each
    taking the speed of the window cell it falls in (land is NaN: not visible).
    """
    dy = yy[1, 0] - yy[0, 0] if yy.shape[0] > 1 else 1.0
    dx = xx[0, 1] - xx[0, 0] if xx.shape[1] > 1 else 1.0
    f = (np.arange(samples) + 0.5) / samples
    sx = px + (xx[..., None] - px) * f
    sy = py + (yy[..., None] - py) * f
    si = np.clip(np.rint((sy - yy[0, 0]) / dy).astype(np.intp), 0, xx.shape[0] - 1)
    sj = np.clip(np.rint((sx - xx[0, 0]) / dx).astype(np.intp), 0, xx.shape[1] - 1)
    c = speed[si, sj]
    visible = np.isfinite(c).all(axis=-1)
    # Mean slowness along the ray; NaN (no warning) where the ray meets land, which is
    # not visible and gets no time below.
    slowness = np.mean(1.0 / c, axis=-1)
    r = np.hypot(xx - px, yy - py)
    t = np.where(visible, r * slowness, np.inf)
    t[i0, j0] = r[i0, j0] / speed[i0, j0]
    visible[i0, j0] = True
    return t, visible


def _path_slowness(
    xx: FloatArray,
    yy: FloatArray,
    x0: FloatArray,
    y0: FloatArray,
    x1: FloatArray,
    y1: FloatArray,
    sub_speed: FloatArray,
    samples: int = 16,
) -> tuple[FloatArray, FloatArray]:
    """Mean slowness along straight segments, and the largest relative speed change on them.

    Each segment (x0, y0)-(x1, y1) is sampled at ``samples`` points, each taking
    the speed of the window cell it falls in (land is NaN: the slowness is NaN
    where a segment meets land). The change is ``max / min - 1`` of those speeds.
    """
    dy = yy[1, 0] - yy[0, 0] if yy.shape[0] > 1 else 1.0
    dx = xx[0, 1] - xx[0, 0] if xx.shape[1] > 1 else 1.0
    f = (np.arange(samples) + 0.5) / samples
    sx = x0[:, None] + (x1 - x0)[:, None] * f
    sy = y0[:, None] + (y1 - y0)[:, None] * f
    si = np.clip(np.rint((sy - yy[0, 0]) / dy).astype(np.intp), 0, xx.shape[0] - 1)
    sj = np.clip(np.rint((sx - xx[0, 0]) / dx).astype(np.intp), 0, xx.shape[1] - 1)
    c = sub_speed[si, sj]
    with np.errstate(invalid="ignore"):
        slowness = np.mean(1.0 / c, axis=1)
        change = np.max(c, axis=1) / np.min(c, axis=1) - 1.0
    return np.asarray(slowness, np.float64), np.asarray(change, np.float64)


def _neighbour_any(mask: BoolArray, wrap: bool = False) -> BoolArray:
    """True where any 4-neighbour is True (within the array; columns wrap if ``wrap``)."""
    out = np.zeros_like(mask)
    out[1:, :] |= mask[:-1, :]
    out[:-1, :] |= mask[1:, :]
    out[:, 1:] |= mask[:, :-1]
    out[:, :-1] |= mask[:, 1:]
    if wrap:
        out[:, 0] |= mask[:, -1]
        out[:, -1] |= mask[:, 0]
    return out


def _start_from_region(
    plane: SolvePlane,
    rows: IntArray,
    cols: IntArray,
    region: BoolArray,
    sub_open: BoolArray,
    inside_t: FloatArray,
    band_t: FloatArray,
    sub_speed: FloatArray,
    contour_t: float,
    placement: Placement,
    native_shape: tuple[int, int],
    native_zero_cells: tuple[IntArray, IntArray] | None = None,
) -> SourceStart:
    """Assemble a :class:`SourceStart` from a window's start region.

    ``band_t`` is the time of window cells used for the band (outside the
    region it should be >= ``contour_t``); band cells outside the region
    whose time is missing or early take the fastest step from a region
    neighbour instead.
    """
    # A window over every column of a wrapping grid, in grid order: its edges meet.
    wrap = plane.periodic_x and cols.size == plane.shape[1] and bool((np.diff(cols) == 1).all())
    # Inside: every region cell next to a cell outside it, land included. On wrapping grids
    # scikit-fmm also freezes region cells next to land along the rows (its start band does
    # not skip masked neighbours along a periodic axis); they need exact times too.
    band_in = region & _neighbour_any(~region, wrap)
    band_out = sub_open & ~region & _neighbour_any(region, wrap)
    # Outside band: the straight-ray time when sensible, else one step from the region.
    hy, hx = plane.spacing_m
    step = np.full(region.shape, np.inf)
    tin = np.where(region, inside_t, np.inf)
    step[1:, :] = np.minimum(step[1:, :], tin[:-1, :] + hy / sub_speed[1:, :])
    step[:-1, :] = np.minimum(step[:-1, :], tin[1:, :] + hy / sub_speed[:-1, :])
    step[:, 1:] = np.minimum(step[:, 1:], tin[:, :-1] + hx / sub_speed[:, 1:])
    step[:, :-1] = np.minimum(step[:, :-1], tin[:, 1:] + hx / sub_speed[:, :-1])
    t_out = np.where(np.isfinite(band_t) & (band_t >= contour_t), band_t, step)
    tiny = 1e-9 * min(plane.spacing_m) / float(np.nanmax(sub_speed))
    tau_in = np.minimum(band_t - contour_t, -tiny)
    tau_out = np.maximum(t_out - contour_t, tiny)
    bi, bj = np.nonzero(band_in)
    oi, oj = np.nonzero(band_out)
    band_rows = np.concatenate([rows[bi], rows[oi]])
    band_cols = np.concatenate([cols[bj], cols[oj]])
    band_time = np.concatenate([tau_in[bi, bj], tau_out[oi, oj]])
    ii, jj = np.nonzero(region)
    inside = np.zeros(plane.shape, dtype=bool)
    inside[rows[ii], cols[jj]] = True
    in_rows, in_cols = rows[ii], cols[jj]
    if native_zero_cells is None:
        nat = np.unique(plane.native_row[in_rows] * native_shape[1] + in_cols).size
        placement = Placement(
            placement.x, placement.y, placement.row, placement.col, placement.depth_m,
            placement.moved_m, int(nat),
        )
    return SourceStart(
        inside=inside,
        inside_cells=(in_rows, in_cols),
        inside_time_s=inside_t[ii, jj].astype(np.float64),
        band_cells=(band_rows, band_cols),
        band_time_s=band_time.astype(np.float64),
        contour_time_s=float(contour_t),
        placement=placement,
        native_zero_cells=native_zero_cells,
    )


def _densify_for(grid: Grid, geom: BaseGeometry) -> BaseGeometry:
    step = min(abs(grid.transform.a), abs(grid.transform.e)) / 2.0
    return shapely.segmentize(geom, step)


def _plane_geometry(geom: BaseGeometry, plane: SolvePlane) -> BaseGeometry:
    """The geometry in plane metres, in one piece across the grid's longitude seam.

    :meth:`SolvePlane.to_plane` takes each longitude modulo 360 on its own, which
    tears a geometry crossing the edge of the grid's 360-degree window (e.g. the
    antimeridian) into vertices half a world apart. For lon/lat grids every vertex
    is put back within half a turn of the first one, and the whole geometry is
    shifted by whole turns so that its middle lies in the grid's window.
    """
    if not plane.grid.is_geographic:
        return shapely.transform(
            geom, lambda xy: np.column_stack(plane.to_plane(xy[:, 0], xy[:, 1]))
        )
    turn_m = abs(plane.dx_signed_m) * 360.0 / abs(plane.grid.transform.a)
    left_m = plane.x0_m - 0.5 * plane.dx_signed_m

    def _to_plane(xy: np.ndarray) -> np.ndarray:
        px, py = plane.to_plane(xy[:, 0], xy[:, 1])
        px = px[0] + np.mod(px - px[0] + turn_m / 2.0, turn_m) - turn_m / 2.0
        mid = 0.5 * (px.min() + px.max())
        px = px - turn_m * np.floor((mid - left_m) / turn_m)
        return np.column_stack([px, py])

    return shapely.transform(geom, _to_plane)


def _place_line(
    geom: BaseGeometry,
    grid: Grid,
    plane: SolvePlane,
    depth_m: FloatArray,
    water: BoolArray,
    open_water: BoolArray,
    speed: FloatArray,
    barrier: BoolArray,
) -> SourceStart:
    pgeom = _plane_geometry(_densify_for(grid, geom), plane)
    h = max(plane.spacing_m)
    r0 = LINE_START_RADIUS_CELLS * h
    minx, miny, maxx, maxy = pgeom.bounds
    rows, cols = _phi_window(plane, minx, maxx, miny, maxy, r0 + 3.0 * h)
    if rows.size == 0 or cols.size == 0:
        raise SourceError(f"line source {geom.wkt[:80]} lies outside the grid; check its coordinates")
    xx, yy = _window_xy(plane, rows, cols, ref_x=0.5 * (minx + maxx))
    dist = shapely.distance(pgeom, shapely.points(xx, yy)).reshape(xx.shape)
    sub_open = ~barrier[np.ix_(rows, cols)]
    open_sub = open_water[:, : plane.shape[1]][np.ix_(plane.native_row[rows], cols)]
    sub_speed = np.where(sub_open, speed[np.ix_(rows, cols)], np.nan)
    tube = (dist < r0) & sub_open & open_sub
    if not tube.any():
        raise SourceError(
            f"line source {geom.wkt[:80]} touches no open water cell of the grid; "
            "move it offshore or check its coordinates and CRS"
        )
    c_max = float(np.nanmax(sub_speed[tube]))
    contour_t = r0 / c_max
    t_est = dist / sub_speed
    region = tube & (t_est < contour_t)
    if not region.any():
        region = tube & (dist <= dist[tube].min())
    c = shapely.centroid(geom)
    row, col = (int(v) for v in grid.rowcol(c.x, c.y))
    inside_grid = 0 <= row < grid.rows and 0 <= col < grid.cols
    d = float(depth_m[row, col]) if inside_grid else float("nan")
    return _start_from_region(
        plane, rows, cols, region, sub_open, t_est, t_est, sub_speed, contour_t,
        Placement(float(c.x), float(c.y), row, col, d, 0.0, 0), grid.shape,
    )


def _place_area(
    geom: BaseGeometry,
    source: Source,
    grid: Grid,
    plane: SolvePlane,
    depth_m: FloatArray,
    water: BoolArray,
    open_water: BoolArray,
    labels: IntArray,
    sizes: IntArray,
    speed: FloatArray,
    barrier: BoolArray,
    snap_radius_m: float | None,
    front_speed_m_s: float | None = None,
) -> SourceStart:
    pgeom = _plane_geometry(_densify_for(grid, geom), plane)
    cell_area = plane.spacing_m[0] * plane.spacing_m[1]
    if pgeom.area < 4.0 * cell_area:
        rp = geom.representative_point()
        warnings.warn(
            f"area source covers less than 4 grid cells; it is treated as a point source at "
            f"{_fmt_position(grid, rp.x, rp.y)}",
            TtmapWarning,
            stacklevel=4,
        )
        return dataclasses.replace(
            _place_point(
                rp, source, grid, plane, depth_m, water, open_water, labels, sizes, speed, barrier,
                snap_radius_m,
            ),
            as_point=True,
        )
    minx, miny, maxx, maxy = pgeom.bounds
    h = max(plane.spacing_m)
    r0 = AREA_START_RADIUS_CELLS * h
    rows, cols = _phi_window(plane, minx, maxx, miny, maxy, r0 + 3.0 * h)
    if rows.size == 0 or cols.size == 0:
        raise SourceError(f"area source {geom.wkt[:80]} lies outside the grid; check its coordinates")
    xx, yy = _window_xy(plane, rows, cols, ref_x=0.5 * (minx + maxx))
    shapely.prepare(pgeom)
    inside_geo = shapely.contains_xy(pgeom, xx, yy)
    sub_open = ~barrier[np.ix_(rows, cols)]
    open_sub = open_water[:, : plane.shape[1]][np.ix_(plane.native_row[rows], cols)]
    sub_speed = np.where(sub_open, speed[np.ix_(rows, cols)], np.nan)
    region = inside_geo & sub_open & open_sub
    c = geom.representative_point()
    row, col = (int(v) for v in grid.rowcol(c.x, c.y))
    inside_grid = 0 <= row < grid.rows and 0 <= col < grid.cols
    d = float(depth_m[row, col]) if inside_grid else float("nan")
    if not region.any():
        raise SourceError(
            f"area source around {_fmt_position(grid, c.x, c.y)} covers no open water cell "
            f"({_depth_text(d)} there); move it offshore or check its coordinates and CRS"
        )
    # Start tube outside the area (as around a point): water cells within r0 of the area
    # whose straight path to its nearest point stays in water, with speeds within
    # POINT_MAX_SPEED_CHANGE along it, take the straight-ray time (distance times the mean
    # slowness along the path); the front starts at r0 over the fastest speed there.
    near = ~inside_geo & sub_open & open_sub
    dist = np.full(region.shape, np.inf)
    idx = np.nonzero(near)
    dist[idx] = shapely.distance(pgeom, shapely.points(xx[idx], yy[idx]))
    t_est = np.where(inside_geo, 0.0, np.inf)
    seen = np.zeros(region.shape, dtype=bool)
    ci = np.nonzero(near & (dist < r0 + 1.5 * h))
    if ci[0].size:
        foot = shapely.get_coordinates(
            shapely.shortest_line(pgeom, shapely.points(xx[ci], yy[ci]))
        ).reshape(-1, 2, 2)[:, 0, :]
        slowness, change = _path_slowness(xx, yy, foot[:, 0], foot[:, 1], xx[ci], yy[ci], sub_speed)
        ok = np.isfinite(slowness)
        seen[ci] = ok
        t_est[ci] = np.where(ok, dist[ci] * slowness, np.inf)
        steady = np.zeros(region.shape, dtype=bool)
        steady[ci] = ok & (change <= POINT_MAX_SPEED_CHANGE)
    else:
        steady = seen
    tube = steady & (dist < r0)
    c_max = float(np.nanmax(sub_speed[region | tube]))
    contour_t = r0 / max(c_max, front_speed_m_s or 0.0)
    area_cells = region  # the area's own water cells (the count reported), tube excluded
    region = region | (tube & (t_est < contour_t))
    # Band: straight-ray times where the path is in water; elsewhere one step from the
    # region (in _start_from_region).
    band_t = np.where(region | seen, t_est, np.nan)
    native_zero = None
    ai, aj = np.nonzero(area_cells)
    start_cells = int(np.unique(plane.native_row[rows[ai]] * grid.shape[1] + cols[aj]).size)
    if grid.is_geographic:
        native_zero = _native_inside(geom, grid, plane, open_water)
        start_cells = int(native_zero[0].size)
        if plane.drop_seam:
            first = native_zero[1] == 0
            native_zero = (
                np.concatenate([native_zero[0], native_zero[0][first]]),
                np.concatenate([native_zero[1], np.full(int(first.sum()), grid.cols - 1, np.intp)]),
            )
    start = _start_from_region(
        plane, rows, cols, region, sub_open, np.where(region, t_est, 0.0), band_t, sub_speed,
        contour_t,
        Placement(float(c.x), float(c.y), min(max(row, 0), grid.rows - 1),
                  min(max(col, 0), grid.cols - 1), d, 0.0, start_cells),
        grid.shape,
        native_zero,
    )
    return dataclasses.replace(
        start, placement=dataclasses.replace(start.placement, start_cells=start_cells)
    )


def _native_inside(
    geom: BaseGeometry, grid: Grid, plane: SolvePlane, open_water: BoolArray
) -> tuple[IntArray, IntArray]:
    """Native open-water cells of a lon/lat grid whose centres lie inside an area.

    Tested in the grid's CRS (longitude, latitude), with each column's
    longitude taken within half a turn of the area's middle so that an area
    crossing the grid's longitude seam is tested in one piece. The duplicated
    seam column, if any, is left out.
    """
    minx, miny, maxx, maxy = geom.bounds
    mid = 0.5 * (minx + maxx)
    ncols = plane.shape[1]
    lon, _ = grid.xy(0, np.arange(ncols))
    lon = mid + np.mod(np.asarray(lon) - mid + 180.0, 360.0) - 180.0
    _, lat = grid.xy(np.arange(grid.rows), 0)
    lat = np.asarray(lat)
    rows = np.nonzero((lat >= miny) & (lat <= maxy))[0]
    cols = np.nonzero((lon >= minx) & (lon <= maxx))[0]
    if rows.size == 0 or cols.size == 0:
        return np.zeros(0, np.intp), np.zeros(0, np.intp)
    xx, yy = np.meshgrid(lon[cols], lat[rows])
    inside = shapely.contains_xy(geom, xx, yy) & open_water[np.ix_(rows, cols)]
    ii, jj = np.nonzero(inside)
    return rows[ii].astype(np.intp), cols[jj].astype(np.intp)
