"""The one site evaluation: where each site is read, and its row of the site table.

Every product with a row per site - the map job's site table, the site-map
job's site records, the scenario run's sites-by-scenarios table and the
reciprocal sites x scenarios table - goes through the two functions here:

1. :func:`snap_sites` decides, once per field, at which grid cell each site is
   read and gives it one of :data:`SNAP_STATUSES`;
2. :func:`evaluate_sites` turns the arrival values at those cells (front,
   energy per period, and optionally an earliest/latest window of its own)
   into the table's rows: the same columns, the same margin rule and the same
   status words in every product.

:func:`site_values` reads a field (minutes) at the snapped cells, rounded to
float32 exactly as the arrival rasters store them, so a row computed from a
solve in memory equals the row computed from its raster on disk.

Snapping
--------
A site is read at its own cell when that cell is reached water (``ok``);
otherwise at the nearest reached water cell within the search radius
(``moved to water``), by **ground** distance from the site to the cell
centre: the geodesic on the CRS's ellipsoid (Karney 2013, through
``pyproj.Geod``) for longitude/latitude grids and for projected grids whose
CRS has a datum (cell centres are taken back to lon/lat with PROJ),
straight-line map metres only for an engineering CRS without one. So
a 2 km radius means 2 km on the ground on a UTM, polar-stereographic or
Mercator grid alike, whatever the projection's scale there.

A site with no reached water within the radius gets the most precise word
that is true:

- ``closed basin (unreached water)`` - there is water within the radius (or
  under the site) but it is not connected to the open sea, so no wave from
  the source can reach it at gridded resolution (a closed lagoon);
- ``water not reached (time limit)`` - the water within the radius is open
  sea, but the solve stopped (a maximum time) before the front got there;
- ``no water within radius`` - only land (or nodata) within the radius;
- ``outside grid`` - the site does not lie on the grid.

The nearest cells are found with one k-d tree (:class:`scipy.spatial.cKDTree`)
over the reached cells within a window around the sites (3-D points on the
mean-radius sphere, whose chord distance orders cells as the great-circle
distance does; the geodesic of the cell found decides the radius),
so 10,000 sites cost a fraction of a second beyond the solve.

Margin rule
-----------
``minutes_left`` counts from the cautious **earliest** arrival of the
speed-uncertainty window (waves ``u`` faster everywhere:
``earliest_min = front_min / (1 + u)``), never from the front itself; see
:mod:`ttmap.products.budget` for the rest of the budget.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
from numpy.typing import ArrayLike

from ttmap._typing import BoolArray, FloatArray
from ttmap.defaults import (
    LITTLE_MARGIN_MIN,
    NOTIFICATION_DELAY_MIN,
    PREPARATION_MIN,
    SITE_SEARCH_RADIUS_M,
    SPEED_UNCERTAINTY,
    WALKING_SPEED_M_S,
)
from ttmap.errors import InputDataError
from ttmap.grid import Grid
from ttmap.io.sites import SiteList
from ttmap.physics.constants import MEAN_EARTH_RADIUS_M
from ttmap.products.budget import warning_budget
from ttmap.products.cautions import CAUTION_SHORT

__all__ = [
    "SNAP_OK",
    "SNAP_MOVED",
    "SNAP_CLOSED_BASIN",
    "SNAP_NOT_REACHED",
    "SNAP_NO_WATER",
    "SNAP_OUTSIDE",
    "SNAP_STATUSES",
    "SITE_COLUMNS",
    "MARGIN_RULE",
    "SnappedSite",
    "SiteTable",
    "period_label",
    "snap_sites",
    "site_values",
    "evaluate_sites",
    "most_urgent",
]

#: The site's own cell is reached water.
SNAP_OK: str = "ok"
#: The time is read at the nearest reached water cell within the radius.
SNAP_MOVED: str = "moved to water"
#: Water within the radius, but in a basin not connected to the open sea.
SNAP_CLOSED_BASIN: str = "closed basin (unreached water)"
#: Open water within the radius that the solve did not reach (a time limit).
SNAP_NOT_REACHED: str = "water not reached (time limit)"
#: Only land or nodata within the radius: no time.
SNAP_NO_WATER: str = "no water within radius"
#: The site lies outside the grid (or outside the area of the grid's CRS).
SNAP_OUTSIDE: str = "outside grid"
#: Every snapping status.
SNAP_STATUSES: tuple[str, ...] = (
    SNAP_OK, SNAP_MOVED, SNAP_CLOSED_BASIN, SNAP_NOT_REACHED, SNAP_NO_WATER, SNAP_OUTSIDE,
)

#: Columns of every site table before the per-period and clock-time ones.
SITE_COLUMNS: tuple[str, ...] = (
    "name", "lon", "lat", "status", "moved_m", "depth_m",
    "front_min", "earliest_min", "latest_min",
)
_BUDGET_COLUMNS: tuple[str, ...] = (
    "notification_delay_min", "minutes_left", "preparation_min", "safe_ground_distance_m",
    "walking_speed_m_s", "minutes_needed", "margin_min", "budget_status", "defaults_used",
)
_BUDGET_FIELDS = ("notification_delay_min", "preparation_min", "walking_speed_m_s")

#: The margin rule, stated once for every product.
MARGIN_RULE: str = (
    "minutes_left counts from earliest_min, the cautious earliest arrival of the "
    "speed-uncertainty window (waves {pct:g} % faster), never from the front itself"
)


@dataclass(frozen=True)
class SnappedSite:
    """Where a site's arrival time is read.

    Attributes
    ----------
    name : str
    status : str
        One of :data:`SNAP_STATUSES`.
    row, col : int
        Grid cell read; -1 when there is none.
    x, y : float
        Centre of that cell in the grid's CRS; NaN when there is none.
    moved_m : float
        Ground distance from the site to that cell's centre, metres; 0 when
        the site's own cell is read, NaN when there is no cell.
    depth_m : float
        Depth at the cell (positive down), NaN when unknown or no cell.
    """

    name: str
    status: str
    row: int
    col: int
    x: float
    y: float
    moved_m: float
    depth_m: float


@dataclass(frozen=True)
class SiteTable:
    """Per-site arrival times and time budget, as ordered columns.

    Attributes
    ----------
    columns : dict of str to list
        One value per site (str, float or None), in the order of
        :func:`evaluate_sites`.
    comments : tuple of str
        Header lines for files: the short caution, then the units, the
        uncertainty band and the defaults used.
    decimals : dict of str to int
        Decimals for writing float columns.
    periods_s : tuple of float
        Wave periods with energy columns.
    settings : dict
        Uncertainty, defaults, threshold and origin time (for the run record).
    """

    columns: dict[str, list[Any]]
    comments: tuple[str, ...]
    decimals: dict[str, int] = field(default_factory=dict)
    periods_s: tuple[float, ...] = ()
    settings: dict[str, Any] = field(default_factory=dict)

    def __len__(self) -> int:
        return len(self.columns["name"])

    def rows(self) -> list[dict[str, Any]]:
        """The table as one dict per site."""
        keys = list(self.columns)
        return [{k: self.columns[k][i] for k in keys} for i in range(len(self))]


def period_label(period_s: float) -> str:
    """Text of a period in column names: no dot, no sign.

    Examples
    --------
    >>> period_label(600.0), period_label(7.5)
    ('600', '7p5')
    """
    return f"{float(period_s):g}".replace(".", "p")


# ---------------------------------------------------------------------------
# Snapping
# ---------------------------------------------------------------------------


def _mask(values: Any, grid: Grid, what: str) -> BoolArray:
    if hasattr(values, "arrival_time_s"):
        values = values.arrival_time_s
    arr = np.asarray(values)
    if arr.shape != grid.shape:
        raise InputDataError(
            f"{what} has shape {arr.shape} but the grid is {grid.shape}; "
            "pass a field of the same grid"
        )
    if arr.dtype == np.bool_:
        return arr
    if not np.issubdtype(arr.dtype, np.number):
        raise InputDataError(f"{what} must be bool or arrival times (float), got dtype {arr.dtype}")
    return np.asarray(np.isfinite(arr), dtype=bool)


class _Ground:
    """Map positions of the grid's CRS -> 3-D points whose chord orders ground distance."""

    def __init__(self, grid: Grid) -> None:
        self.grid = grid
        self.to_lonlat: Any = None
        self.sphere = True
        self.unit_m = 1.0
        if not grid.is_geographic:
            from pyproj import Transformer
            from pyproj.exceptions import ProjError

            self.unit_m = grid.linear_unit_m
            try:
                geo = grid.crs.geodetic_crs
                self.to_lonlat = (
                    None if geo is None
                    else Transformer.from_crs(grid.crs, geo, always_xy=True)
                )
            except ProjError:
                self.to_lonlat = None
            self.sphere = self.to_lonlat is not None
        self.geod: Any = None
        if self.sphere:
            from pyproj import Geod

            geo = grid.crs if grid.is_geographic else grid.crs.geodetic_crs
            try:
                self.geod = geo.get_geod() if geo is not None else None
            except Exception:  # no ellipsoid: WGS84
                self.geod = None
            if self.geod is None:
                self.geod = Geod(ellps="WGS84")

    def lonlat(self, x: FloatArray, y: FloatArray) -> tuple[FloatArray, FloatArray]:
        if self.to_lonlat is None:
            return x, y
        lon, lat = self.to_lonlat.transform(x, y, errcheck=False)
        return np.asarray(lon, dtype=np.float64), np.asarray(lat, dtype=np.float64)

    def distance_m(self, x0: FloatArray, y0: FloatArray, x1: FloatArray, y1: FloatArray) -> FloatArray:
        """Ground distance between map positions: geodesic on the CRS's ellipsoid (Karney 2013)."""
        if not self.sphere:
            return np.asarray(np.hypot(x1 - x0, y1 - y0) * self.unit_m, dtype=np.float64)
        lon0, lat0 = self.lonlat(x0, y0)
        lon1, lat1 = self.lonlat(x1, y1)
        _, _, d = self.geod.inv(lon0, lat0, lon1, lat1)
        return np.asarray(d, dtype=np.float64)

    def points(self, x: FloatArray, y: FloatArray) -> FloatArray:
        """(n, 3) points in metres: on the R1 sphere, or (x, y, 0) map metres."""
        if not self.sphere:
            return np.column_stack([x * self.unit_m, y * self.unit_m, np.zeros_like(x)])
        lon, lat = self.lonlat(x, y)
        lam, phi = np.radians(lon), np.radians(lat)
        c = np.cos(phi)
        r = MEAN_EARTH_RADIUS_M
        return np.column_stack([r * c * np.cos(lam), r * c * np.sin(lam), r * np.sin(phi)])

    def chord(self, ground_m: float) -> float:
        """Chord length of a ground distance (the query bound)."""
        if not self.sphere:
            return ground_m
        r = MEAN_EARTH_RADIUS_M
        return 2.0 * r * math.sin(min(ground_m / (2.0 * r), math.pi / 2.0))

    def window_cells(self, rows: Any, cols: Any, radius_m: float) -> tuple[Any, Any]:
        """Half-widths (rows, cols) of the cell window holding every cell within the radius."""
        g = self.grid
        t = g.transform
        if g.is_geographic:
            row_m = math.radians(abs(t.e)) * MEAN_EARTH_RADIUS_M
            _, lat = g.xy(rows, cols)
            coslat = np.maximum(np.cos(np.radians(np.minimum(np.abs(lat), 89.9))), 1e-3)
            col_m = math.radians(abs(t.a)) * MEAN_EARTH_RADIUS_M * coslat
            nr = np.full(np.shape(rows), math.ceil(radius_m / row_m) + 1)
            nc = np.ceil(radius_m / col_m).astype(np.int64) + 1
            # the ground radius on the sphere vs an ellipsoidal cell: 1 % slack
            return nr + 1, np.minimum(nc + 1, g.cols)
        k = np.ones(np.shape(rows))
        if self.sphere:
            from ttmap.grid import principal_scales

            try:
                a, _ = principal_scales(g, np.asarray(rows, dtype=np.float64), np.asarray(cols, dtype=np.float64))
                k = np.where(np.isfinite(a) & (a > 0), a, 1.0)
            except Exception:  # PROJ cannot tell: the map-unit window, widened below
                k = np.ones(np.shape(rows))
        # 2 % slack for the sphere against the ellipsoid and the scale across the window
        reach = radius_m * k * 1.02 / self.unit_m
        nr = np.ceil(reach / abs(t.e)).astype(np.int64) + 1
        nc = np.ceil(reach / abs(t.a)).astype(np.int64) + 1
        return nr, nc


def _window_mask(grid: Grid, rows: Any, cols: Any, nr: Any, nc: Any) -> BoolArray:
    """Cells within the windows around (rows, cols), as one bool grid."""
    win = np.zeros(grid.shape, dtype=bool)
    ncols = grid.cols
    for r, c, hr, hc in zip(rows.tolist(), cols.tolist(), np.asarray(nr).tolist(),
                            np.asarray(nc).tolist(), strict=True):
        r0, r1 = max(0, r - hr), min(grid.rows, r + hr + 1)
        c0, c1 = c - hc, c + hc + 1
        if grid.wraps_x and (c0 < 0 or c1 > ncols):
            if c1 - c0 >= ncols:
                win[r0:r1, :] = True
                continue
            cc = np.mod(np.arange(c0, c1), ncols)
            win[r0:r1, cc] = True
        else:
            win[r0:r1, max(0, c0):min(ncols, c1)] = True
    return win


def _nearest(
    ground: _Ground, grid: Grid, cand: BoolArray, xs: FloatArray, ys: FloatArray, radius_m: float
) -> tuple[Any, Any, FloatArray]:
    """For each point, the nearest candidate cell within the radius: (rows, cols, ground_m); -1/NaN if none."""
    from scipy.spatial import cKDTree

    n = xs.shape[0]
    rows = np.full(n, -1, dtype=np.int64)
    cols = np.full(n, -1, dtype=np.int64)
    dist = np.full(n, np.nan)
    cr, cc = np.nonzero(cand)
    if cr.size == 0 or n == 0:
        return rows, cols, dist
    cx, cy = grid.xy(cr, cc)
    tree = cKDTree(ground.points(np.asarray(cx), np.asarray(cy)))
    k = min(4, cr.size)
    # The sphere ranks the cells; the ellipsoid (1 % apart at most) decides the radius.
    bound = ground.chord(radius_m * 1.01) + 1e-9
    d, idx = tree.query(ground.points(xs, ys), k=k, distance_upper_bound=bound)
    d = np.asarray(d).reshape(n, k)
    idx = np.asarray(idx).reshape(n, k)
    best = d[:, 0]
    found = np.isfinite(best)
    # Ties (equal distance to 1e-9 relative) go to the first cell in row-major order.
    tie = np.isfinite(d) & (d <= best[:, None] * (1.0 + 1e-9) + 1e-9)
    big = np.iinfo(np.int64).max
    pick = np.where(tie, idx, big).min(axis=1)
    g = np.full(n, np.inf)
    if found.any():
        p = pick[found]
        g[found] = ground.distance_m(xs[found], ys[found], np.asarray(cx)[p], np.asarray(cy)[p])
    ok = found & (g <= radius_m * (1.0 + 1e-12))
    rows[ok] = cr[pick[ok]]
    cols[ok] = cc[pick[ok]]
    dist[ok] = g[ok]
    return rows, cols, dist


def snap_sites(
    sites: SiteList,
    grid: Grid,
    reached: Any,
    *,
    search_radius_m: float = SITE_SEARCH_RADIUS_M,
    depth_m: Any = None,
    water: Any = None,
    open_water: Any = None,
) -> list[SnappedSite]:
    """Find the cell each site's arrival time is read from.

    Parameters
    ----------
    sites : SiteList
        In any CRS; transformed to the grid's CRS with pyproj.
    grid : Grid
    reached : TravelTimeResult, or ndarray of shape grid.shape
        The front result, its ``arrival_time_s`` (finite = reached), or a
        bool mask of reached water cells.
    search_radius_m : float
        Largest ground distance from a site to the centre of the cell read,
        metres (default :data:`SITE_SEARCH_RADIUS_M`).
    depth_m : ndarray of shape grid.shape, float, metres, positive down, optional
        Depth to report at each cell read (e.g. ``Medium.depth_m``).
    water, open_water : ndarray of bool, shape grid.shape, optional
        All water cells, and those connected to the open sea
        (``Medium.water``, ``Medium.open_water``). With them a site without
        reached water nearby is told apart as closed basin, time limit or
        land; without them it reads ``no water within radius``.

    Returns
    -------
    list of SnappedSite
        One per site, in order; none dropped.

    Raises
    ------
    InputDataError
        Shapes that do not match the grid, or a negative radius.

    Notes
    -----
    See the module notes for the distances and the status words. Ties go to
    the first cell in row-major order.
    """
    if not isinstance(sites, SiteList):
        raise InputDataError(f"sites must be a SiteList (see read_sites), got {type(sites).__name__}")
    radius = float(search_radius_m)
    if not (math.isfinite(radius) and radius >= 0.0):
        raise InputDataError(f"search radius {search_radius_m!r} m must be a finite number, 0 or more")
    mask = _mask(reached, grid, "reached mask or arrival times")
    depth = None
    if depth_m is not None:
        depth = np.asarray(depth_m, dtype=np.float64)
        if depth.shape != grid.shape:
            raise InputDataError(
                f"depth_m has shape {depth.shape} but the grid is {grid.shape}; pass the grid's depths"
            )
    wet = None if water is None else _mask(water, grid, "water mask")
    open_ = None if open_water is None else _mask(open_water, grid, "open-water mask")

    n = len(sites)
    xs, ys = (np.asarray(v, dtype=np.float64) for v in sites.positions_in(grid.crs))
    finite = np.isfinite(xs) & np.isfinite(ys)
    inside = np.zeros(n, dtype=bool)
    rows = np.full(n, -1, dtype=np.int64)
    cols = np.full(n, -1, dtype=np.int64)
    if finite.any():
        r, c = grid.rowcol(xs[finite], ys[finite])
        r, c = np.asarray(r, dtype=np.int64), np.asarray(c, dtype=np.int64)
        ins = (r >= 0) & (r < grid.rows) & (c >= 0) & (c < grid.cols)
        idx = np.flatnonzero(finite)
        inside[idx[ins]] = True
        rows[idx[ins]] = r[ins]
        cols[idx[ins]] = c[ins]
    status = np.full(n, SNAP_OUTSIDE, dtype=object)
    moved = np.full(n, np.nan)
    read_r = np.full(n, -1, dtype=np.int64)
    read_c = np.full(n, -1, dtype=np.int64)
    own = np.zeros(n, dtype=bool)
    own[inside] = mask[rows[inside], cols[inside]]
    status[own] = SNAP_OK
    moved[own] = 0.0
    read_r[own], read_c[own] = rows[own], cols[own]

    todo = np.flatnonzero(inside & ~own)
    if todo.size:
        ground = _Ground(grid)
        nr, nc = ground.window_cells(rows[todo], cols[todo], radius)
        win = _window_mask(grid, rows[todo], cols[todo], nr, nc)
        tx, ty = xs[todo], ys[todo]
        rr, cc, dd = _nearest(ground, grid, win & mask, tx, ty, radius)
        hit = rr >= 0
        status[todo[hit]] = SNAP_MOVED
        moved[todo[hit]] = dd[hit]
        read_r[todo[hit]], read_c[todo[hit]] = rr[hit], cc[hit]
        miss = todo[~hit]
        status[miss] = SNAP_NO_WATER
        if miss.size and wet is not None:
            # Unreached water under the site or within the radius: which kind?
            sub = ~hit
            dry = win & wet & ~mask
            r2, c2, _ = _nearest(ground, grid, dry, tx[sub], ty[sub], radius)
            own_wet = wet[rows[miss], cols[miss]]
            r2 = np.where(own_wet, rows[miss], r2)
            c2 = np.where(own_wet, cols[miss], c2)
            has = r2 >= 0
            if open_ is not None:
                is_open = np.zeros(miss.size, dtype=bool)
                is_open[has] = open_[r2[has], c2[has]]
            else:
                is_open = np.zeros(miss.size, dtype=bool)
            status[miss[has & ~is_open]] = SNAP_CLOSED_BASIN
            status[miss[has & is_open]] = SNAP_NOT_REACHED
        del win

    out: list[SnappedSite] = []
    hit_all = read_r >= 0
    cx = np.full(n, np.nan)
    cy = np.full(n, np.nan)
    if hit_all.any():
        gx, gy = grid.xy(read_r[hit_all], read_c[hit_all])
        cx[hit_all], cy[hit_all] = gx, gy
    dep = np.full(n, np.nan)
    if depth is not None and hit_all.any():
        dep[hit_all] = depth[read_r[hit_all], read_c[hit_all]]
    for i, name in enumerate(sites.names):
        out.append(SnappedSite(
            name, str(status[i]), int(read_r[i]), int(read_c[i]), float(cx[i]), float(cy[i]),
            float(moved[i]), float(dep[i]),
        ))
    return out


def site_values(field_min: ArrayLike, snapped: Sequence[SnappedSite]) -> FloatArray:
    """A field in minutes read at the snapped cells, as the arrival rasters store it (float32).

    Parameters
    ----------
    field_min : ndarray of shape grid.shape, float, minutes
        NaN where there is no arrival.
    snapped : sequence of SnappedSite

    Returns
    -------
    ndarray of shape (len(snapped),), float64
        NaN where a site has no cell.

    Examples
    --------
    >>> s = [SnappedSite("a", SNAP_OK, 0, 1, 0.5, 0.5, 0.0, 10.0),
    ...      SnappedSite("b", SNAP_NO_WATER, -1, -1, math.nan, math.nan, math.nan, math.nan)]
    >>> site_values(np.array([[1.0, 1.0 / 3.0]]), s).tolist()
    [0.3333333432674408, nan]
    """
    arr = np.asarray(field_min)
    rr = np.asarray([s.row for s in snapped], dtype=np.int64)
    cc = np.asarray([s.col for s in snapped], dtype=np.int64)
    out = np.full(rr.size, np.nan)
    ok = rr >= 0
    if ok.any():
        out[ok] = arr[rr[ok], cc[ok]].astype(np.float32).astype(np.float64)
    return out


# ---------------------------------------------------------------------------
# Rows
# ---------------------------------------------------------------------------


def _utc_text(origin: datetime, minutes: float) -> str | None:
    if not math.isfinite(minutes):
        return None
    t = origin + timedelta(seconds=round(minutes * 60.0))
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def _vector(values: Any, n: int, what: str) -> FloatArray:
    arr = np.asarray([math.nan if v is None else float(v) for v in values], dtype=np.float64)
    if arr.shape != (n,):
        raise InputDataError(f"{what} has {arr.size} values for {n} sites; give one per site")
    return arr


def _origin(origin_time_utc: datetime | None) -> datetime | None:
    if origin_time_utc is None:
        return None
    if not isinstance(origin_time_utc, datetime):
        raise InputDataError(
            f"origin time {origin_time_utc!r} must be a datetime, e.g. "
            "datetime(2026, 1, 1, tzinfo=timezone.utc)"
        )
    if origin_time_utc.tzinfo is None or origin_time_utc.utcoffset() is None:
        raise InputDataError(
            f"origin time {origin_time_utc.isoformat()} has no time zone; give it in UTC "
            "(e.g. 2026-01-01T00:00:00Z)"
        )
    return origin_time_utc.astimezone(UTC)


def evaluate_sites(
    sites: SiteList,
    snapped: Sequence[SnappedSite],
    front_min: ArrayLike,
    energy_min: Mapping[float, ArrayLike] | None = None,
    *,
    earliest_min: ArrayLike | None = None,
    latest_min: ArrayLike | None = None,
    speed_uncertainty: float = SPEED_UNCERTAINTY,
    origin_time_utc: datetime | None = None,
    notification_delay_min: float = NOTIFICATION_DELAY_MIN,
    preparation_min: float = PREPARATION_MIN,
    walking_speed_m_s: float = WALKING_SPEED_M_S,
    little_margin_min: float = LITTLE_MARGIN_MIN,
) -> SiteTable:
    """The site table's rows from arrival values at the snapped cells.

    Parameters
    ----------
    sites : SiteList
    snapped : sequence of SnappedSite
        From :func:`snap_sites` for the same sites, in the same order.
    front_min : array of shape (n_sites,), minutes
        Front (long-wave) arrival at each site's cell, NaN where none (e.g.
        :func:`site_values` of the front field).
    energy_min : mapping of period_s to array of shape (n_sites,), optional
        Arrival of the energy of each wave period, minutes.
    earliest_min, latest_min : array of shape (n_sites,), optional
        The speed-uncertainty window when the caller has its own (e.g. a
        one-solve envelope); default ``front / (1 +/- u)``.
    speed_uncertainty : float
        Stated +/- fraction of wave speed, 0 <= u < 1 (default 0.05).
    origin_time_utc : datetime, optional
        Timezone-aware origin time; adds UTC clock columns.
    notification_delay_min, preparation_min, walking_speed_m_s : float
        Defaults for sites that give no value.
    little_margin_min : float
        Margins below this are flagged as little.

    Returns
    -------
    SiteTable
        Columns :data:`SITE_COLUMNS`; per period ``T``: ``energy_T{T}s_min``
        and ``window_T{T}s_min`` (energy minus front); then
        ``notification_delay_min, minutes_left, preparation_min,
        safe_ground_distance_m, walking_speed_m_s, minutes_needed,
        margin_min, budget_status, defaults_used``; with an origin time also
        ``front_utc, earliest_utc, latest_utc, energy_T{T}s_utc``.
        ``minutes_left`` counts from ``earliest_min`` (:data:`MARGIN_RULE`).

    Raises
    ------
    InputDataError
        Mismatched lengths or names, bad periods, a bad uncertainty, a naive
        origin time, or bad defaults.
    """
    if not isinstance(sites, SiteList):
        raise InputDataError(f"sites must be a SiteList (see read_sites), got {type(sites).__name__}")
    snapped = list(snapped)
    if [s.name for s in snapped] != list(sites.names):
        raise InputDataError(
            "snapped sites do not match the site list (names or order differ); "
            "pass the output of snap_sites for the same SiteList"
        )
    n = len(sites)
    u = float(speed_uncertainty)
    if not (math.isfinite(u) and 0.0 <= u < 1.0):
        raise InputDataError(
            f"speed uncertainty {speed_uncertainty!r} must be a fraction in [0, 1), e.g. 0.05 for +/-5 %"
        )
    front = _vector(front_min, n, "front_min")
    earliest = front / (1.0 + u) if earliest_min is None else _vector(earliest_min, n, "earliest_min")
    latest = front / (1.0 - u) if latest_min is None else _vector(latest_min, n, "latest_min")
    periods: list[tuple[float, FloatArray]] = []
    for key, values in sorted((energy_min or {}).items(), key=lambda kv: float(kv[0])):
        t_s = float(key)
        if not (math.isfinite(t_s) and t_s > 0.0):
            raise InputDataError(f"wave period {key!r} s must be a positive number of seconds")
        periods.append((t_s, _vector(values, n, f"energy of period {t_s:g} s")))
    labels = [period_label(t) for t, _ in periods]
    if len(set(labels)) != len(labels):
        raise InputDataError(f"wave periods {[t for t, _ in periods]} repeat; give each once")
    origin = _origin(origin_time_utc)
    defaults = {
        "notification_delay_min": float(notification_delay_min),
        "preparation_min": float(preparation_min),
        "walking_speed_m_s": float(walking_speed_m_s),
    }
    warning_budget(None, defaults["notification_delay_min"], defaults["preparation_min"], None,
                   defaults["walking_speed_m_s"], little_margin_min=little_margin_min)

    lon, lat = sites.lonlat()
    cols: dict[str, list[Any]] = {
        "name": list(sites.names),
        "lon": [float(v) for v in lon],
        "lat": [float(v) for v in lat],
        "status": [s.status for s in snapped],
        "moved_m": [s.moved_m for s in snapped],
        "depth_m": [s.depth_m for s in snapped],
        "front_min": front.tolist(),
        "earliest_min": earliest.tolist(),
        "latest_min": latest.tolist(),
    }
    for lab, (_, e) in zip(labels, periods, strict=True):
        cols[f"energy_T{lab}s_min"] = e.tolist()
        cols[f"window_T{lab}s_min"] = (e - front).tolist()
    for k in _BUDGET_COLUMNS:
        cols[k] = []
    for i, site in enumerate(sites):
        given = {k: getattr(site, k) for k in _BUDGET_FIELDS}
        used = {k: defaults[k] if given[k] is None else float(given[k]) for k in _BUDGET_FIELDS}
        b = warning_budget(
            float(earliest[i]), used["notification_delay_min"], used["preparation_min"],
            site.safe_ground_distance_m, used["walking_speed_m_s"],
            little_margin_min=little_margin_min,
        )
        dist = site.safe_ground_distance_m
        cols["notification_delay_min"].append(used["notification_delay_min"])
        cols["minutes_left"].append(b.minutes_left)
        cols["preparation_min"].append(used["preparation_min"])
        cols["safe_ground_distance_m"].append(math.nan if dist is None else float(dist))
        cols["walking_speed_m_s"].append(used["walking_speed_m_s"])
        cols["minutes_needed"].append(b.minutes_needed)
        cols["margin_min"].append(b.margin_min)
        cols["budget_status"].append(b.status)
        cols["defaults_used"].append(";".join(k for k in _BUDGET_FIELDS if given[k] is None))
    if origin is not None:
        cols["front_utc"] = [_utc_text(origin, v) for v in front.tolist()]
        cols["earliest_utc"] = [_utc_text(origin, v) for v in earliest.tolist()]
        cols["latest_utc"] = [_utc_text(origin, v) for v in latest.tolist()]
        for lab, (_, e) in zip(labels, periods, strict=True):
            cols[f"energy_T{lab}s_utc"] = [_utc_text(origin, v) for v in e.tolist()]

    decimals: dict[str, int] = {
        "lon": 6, "lat": 6, "moved_m": 0, "depth_m": 1, "safe_ground_distance_m": 1,
        "walking_speed_m_s": 3, "minutes_left": 2, "minutes_needed": 2,
    }
    for k in cols:
        if k.endswith("_min"):
            decimals[k] = 2
    units = (
        "Units: times in minutes after the earthquake (origin time)"
        + (", clock times in UTC (ISO 8601)" if origin is not None else "")
        + "; distances in metres; speeds in m/s. "
        f"earliest_min/latest_min = front_min / (1 +/- {u:g}) "
        f"for a stated +/-{100 * u:g} % wave-speed uncertainty; "
        + MARGIN_RULE.format(pct=100 * u)
        + ". Defaults where a site gives none: notification delay "
        f"{defaults['notification_delay_min']:g} min, "
        f"preparation {defaults['preparation_min']:g} min, "
        f"walking speed {defaults['walking_speed_m_s']:g} m/s; little margin: under "
        f"{float(little_margin_min):g} min. Margins are planning figures, not promises."
    )
    settings = {
        "speed_uncertainty": u,
        "origin_time_utc": None if origin is None else _utc_text(origin, 0.0),
        "little_margin_min": float(little_margin_min),
        **{f"default_{k}": v for k, v in defaults.items()},
        "periods_s": [t for t, _ in periods],
        "margin_rule": MARGIN_RULE.format(pct=100 * u),
    }
    return SiteTable(
        columns=cols, comments=(CAUTION_SHORT, units), decimals=decimals,
        periods_s=tuple(t for t, _ in periods), settings=settings,
    )


def most_urgent(table: Any, n: int) -> list[int]:
    """Row indices of the ``n`` most urgent sites, most urgent first.

    For charts that cannot show thousands of sites. Sites are ordered by
    margin (smallest first; a site whose wave arrives before the official
    message counts as the most urgent whatever its distance), then by
    ``minutes_left``, then by earliest arrival; sites without an arrival come
    last. Ties keep table order.

    Parameters
    ----------
    table : SiteTable or mapping of columns
        Needs ``minutes_left`` and ``earliest_min``; ``margin_min`` if present.
    n : int
        How many rows to keep (>= 0).

    Returns
    -------
    list of int

    Examples
    --------
    >>> cols = {"minutes_left": [20.0, -2.0, 8.0, float("nan")],
    ...         "margin_min": [5.0, float("nan"), 1.0, float("nan")],
    ...         "earliest_min": [30.0, 8.0, 18.0, float("nan")]}
    >>> most_urgent(cols, 3)
    [1, 2, 0]
    """
    cols = table.columns if hasattr(table, "columns") else table
    if isinstance(n, bool) or not isinstance(n, int) or n < 0:
        raise InputDataError(f"number of sites {n!r} must be a whole number, 0 or more")

    def num(v: Any) -> float:
        return math.nan if v is None else float(v)

    left = [num(v) for v in cols["minutes_left"]]
    early = [num(v) for v in cols["earliest_min"]]
    margin = [num(v) for v in cols.get("margin_min", [math.nan] * len(left))]

    def key(i: int) -> tuple[int, float, float, float, int]:
        if not math.isfinite(left[i]):
            return (3, math.inf, math.inf, math.inf, i)
        if left[i] <= 0.0:
            return (0, left[i], left[i], early[i], i)
        m = margin[i] if math.isfinite(margin[i]) else math.inf
        return (1 if math.isfinite(margin[i]) else 2, m, left[i], early[i], i)

    return sorted(range(len(left)), key=key)[:n]
