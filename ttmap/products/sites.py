"""Arrival times at named sites: snapping to water, the site table, its vector layer.

No file I/O here (the CSV writer is :func:`ttmap.io.sites.write_site_table_csv`).

Snapping
--------
Sites are coastal points, usually on land or in a cell the front never
reaches at gridded resolution. :func:`snap_sites` reads each site's arrival
from the nearest *reached* water cell (finite front arrival) within a search
radius, measuring ground distance from the site to the cell centre (haversine
on the IUGG mean radius for lon/lat grids, straight-line metres for projected
grids, as for point sources in :mod:`ttmap.sources`). Each site gets one of
:data:`SNAP_STATUSES`; no site is ever dropped.

:data:`SITE_SEARCH_RADIUS_M` = 2 km. Common practice, no source: a
1 arc-minute cell is about 1.85 km north-south, and a coastal town given to
the nearest 0.01 degree lies within about one such cell of the first gridded
water cell; a wider radius starts reading times from water that may be
across a headland. Use a radius of one to two cells of your grid.

Uncertainty band
----------------
``speed_uncertainty = u`` states that the true wave speed may be up to
``u`` (a fraction) faster or slower than the computed one, everywhere along
the path. Travel time scales as 1 / speed, so the exact band is

- ``earliest_min = front_min / (1 + u)`` (speed ``u`` faster),
- ``latest_min = front_min / (1 - u)`` (speed ``u`` slower).

The default ``u = 0.05`` (+/-5 %) is a planning band, common practice with no
source: a few times the 1-2 % by which long-wave predictions run early at
trans-oceanic distances (see the far-field option). It does not cover errors
of the source location or origin time, nor poorly resolved bathymetry near
the site; those can be larger. The budget counts from ``earliest_min``.

Table columns
-------------
``name, lon, lat`` (WGS84 degrees, the site as given), ``status`` (snapping),
``moved_m``, ``depth_m`` (at the cell read), ``front_min``, ``earliest_min``,
``latest_min``; per period ``T``: ``energy_T{T}s_min`` (arrival of the energy
of period T, travelling at the group speed) and ``window_T{T}s_min``
(energy minus front); then ``notification_delay_min``, ``minutes_left``,
``preparation_min``, ``safe_ground_distance_m``, ``walking_speed_m_s``,
``minutes_needed``, ``margin_min``, ``budget_status`` (see
:mod:`ttmap.products.budget`), ``defaults_used`` (the budget values taken
from defaults, ``;``-separated); with an origin time also ``front_utc``,
``earliest_utc``, ``latest_utc`` and ``energy_T{T}s_utc`` (ISO 8601, UTC,
to the second, ``Z`` suffix).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
import shapely
from pyproj import CRS, Transformer

from ttmap.defaults import SITE_SEARCH_RADIUS_M, SPEED_UNCERTAINTY
from ttmap._typing import BoolArray, FloatArray
from ttmap.errors import InputDataError
from ttmap.grid import Grid
from ttmap.io.sites import SiteList
from ttmap.io.vector import VectorLayer
from ttmap.products.budget import warning_budget
from ttmap.defaults import NOTIFICATION_DELAY_MIN, PREPARATION_MIN, WALKING_SPEED_M_S, LITTLE_MARGIN_MIN
from ttmap.products.cautions import CAUTION_SHORT
from ttmap.sources import nearest_open_water
from ttmap.traveltime import TravelTimeResult

__all__ = [
    "SNAP_OK",
    "SNAP_MOVED",
    "SNAP_NO_WATER",
    "SNAP_OUTSIDE",
    "SNAP_STATUSES",
    "SnappedSite",
    "SiteTable",
    "snap_sites",
    "site_table",
    "site_table_layer",
    "period_label",
]

#: The site's own cell is reached water.
SNAP_OK: str = "ok"
#: The time is read at the nearest reached water cell within the radius.
SNAP_MOVED: str = "moved to water"
#: No reached water cell within the radius: no time.
SNAP_NO_WATER: str = "no water within radius"
#: The site lies outside the grid (or outside the area of the grid's CRS).
SNAP_OUTSIDE: str = "outside grid"
#: Every snapping status.
SNAP_STATUSES: tuple[str, ...] = (SNAP_OK, SNAP_MOVED, SNAP_NO_WATER, SNAP_OUTSIDE)

_WGS84 = CRS.from_epsg(4326)
_BUDGET_FIELDS = ("notification_delay_min", "preparation_min", "walking_speed_m_s")


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
        One value per site (str, float or None), in the order of the module
        notes.
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


def _reached_mask(reached: Any, grid: Grid) -> BoolArray:
    if isinstance(reached, TravelTimeResult):
        reached = reached.arrival_time_s
    arr = np.asarray(reached)
    if arr.shape != grid.shape:
        raise InputDataError(
            f"reached mask or arrival times have shape {arr.shape} but the grid is {grid.shape}; "
            "pass the front result of the same grid"
        )
    if arr.dtype == np.bool_:
        return arr
    if not np.issubdtype(arr.dtype, np.number):
        raise InputDataError(
            f"reached mask must be bool or arrival times (float), got dtype {arr.dtype}"
        )
    return np.asarray(np.isfinite(arr), dtype=bool)


def snap_sites(
    sites: SiteList,
    grid: Grid,
    reached: Any,
    *,
    search_radius_m: float = SITE_SEARCH_RADIUS_M,
    depth_m: Any = None,
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
        Depth to report at each cell read (for example ``Medium.depth_m``,
        which carries the floor depth). Without it depths are NaN.

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
    A site whose own cell is reached water is read there (status ``ok``,
    ``moved_m = 0``). Otherwise the reached cell whose centre is nearest on
    the ground is used if it lies within the radius (``moved to water``).
    Ties are broken by row-major cell order.
    """
    if not isinstance(sites, SiteList):
        raise InputDataError(
            f"sites must be a SiteList (see read_sites), got {type(sites).__name__}"
        )
    radius = float(search_radius_m)
    if not (math.isfinite(radius) and radius >= 0.0):
        raise InputDataError(
            f"search radius {search_radius_m!r} m must be a finite number, 0 or more"
        )
    mask = _reached_mask(reached, grid)
    depth = None
    if depth_m is not None:
        depth = np.asarray(depth_m, dtype=np.float64)
        if depth.shape != grid.shape:
            raise InputDataError(
                f"depth_m has shape {depth.shape} but the grid is {grid.shape}; "
                "pass the grid's depths"
            )
    xs, ys = sites.positions_in(grid.crs)
    out: list[SnappedSite] = []
    for site, x, y in zip(sites, xs, ys, strict=True):
        if not (math.isfinite(x) and math.isfinite(y)) or not bool(grid.contains(x, y)):
            out.append(
                SnappedSite(site.name, SNAP_OUTSIDE, -1, -1, math.nan, math.nan, math.nan, math.nan)
            )
            continue
        row, col = (int(v) for v in grid.rowcol(x, y))
        if mask[row, col]:
            status, moved = SNAP_OK, 0.0
        else:
            found = nearest_open_water(grid, mask, float(x), float(y), radius)
            if found is None:
                out.append(
                    SnappedSite(
                        site.name, SNAP_NO_WATER, -1, -1, math.nan, math.nan, math.nan, math.nan
                    )
                )
                continue
            row, col, moved = found
            status = SNAP_MOVED
        cx, cy = grid.xy(row, col)
        d = float(depth[row, col]) if depth is not None else math.nan
        out.append(SnappedSite(site.name, status, row, col, float(cx), float(cy), float(moved), d))
    return out


# ---------------------------------------------------------------------------
# The table
# ---------------------------------------------------------------------------


def _check_result(result: Any, what: str, front: TravelTimeResult | None) -> TravelTimeResult:
    if not isinstance(result, TravelTimeResult):
        raise InputDataError(f"{what} must be a TravelTimeResult, got {type(result).__name__}")
    if front is not None and (
        result.grid.shape != front.grid.shape or result.grid.transform != front.grid.transform
    ):
        raise InputDataError(
            f"{what} was computed on a different grid ({result.grid.shape}) than the front "
            f"({front.grid.shape}); compute both on the same grid"
        )
    return result


def _utc_text(origin: datetime, minutes: float) -> str | None:
    if not math.isfinite(minutes):
        return None
    t = origin + timedelta(seconds=round(minutes * 60.0))
    return t.strftime("%Y-%m-%dT%H:%M:%SZ")


def _at(values: FloatArray, snapped: SnappedSite) -> float:
    if snapped.row < 0:
        return math.nan
    return float(values[snapped.row, snapped.col]) / 60.0


def site_table(
    sites: SiteList,
    snapped: Sequence[SnappedSite],
    front: TravelTimeResult,
    periods: Mapping[float, TravelTimeResult] | None = None,
    *,
    speed_uncertainty: float = SPEED_UNCERTAINTY,
    origin_time_utc: datetime | None = None,
    notification_delay_min: float = NOTIFICATION_DELAY_MIN,
    preparation_min: float = PREPARATION_MIN,
    walking_speed_m_s: float = WALKING_SPEED_M_S,
    little_margin_min: float = LITTLE_MARGIN_MIN,
) -> SiteTable:
    """Arrival times and time budget of every site, as ordered columns.

    Parameters
    ----------
    sites : SiteList
    snapped : sequence of SnappedSite
        From :func:`snap_sites` for the same sites, in the same order.
    front : TravelTimeResult
        Long-wave front solve.
    periods : mapping of float to TravelTimeResult, optional
        Wave period (s) to the group-speed solve of that period, same source
        and grid.
    speed_uncertainty : float
        Stated +/- fraction of wave speed, 0 <= u < 1 (default 0.05):
        ``earliest = front / (1 + u)``, ``latest = front / (1 - u)``.
    origin_time_utc : datetime, optional
        Timezone-aware origin time of the earthquake; adds UTC clock columns.
    notification_delay_min, preparation_min, walking_speed_m_s : float
        Defaults for sites that give no value (see
        :mod:`ttmap.products.budget` for their sources).
    little_margin_min : float
        Margins below this are flagged as little.

    Returns
    -------
    SiteTable

    Raises
    ------
    InputDataError
        Mismatched sites and snapped lists, results on different grids, a
        period whose result is not a group-speed solve of that period, a
        front that is not a long-wave solve, a bad uncertainty, a naive
        origin time, or bad defaults.

    Examples
    --------
    See ``tests/unit/test_sites.py``.
    """
    if not isinstance(sites, SiteList):
        raise InputDataError(
            f"sites must be a SiteList (see read_sites), got {type(sites).__name__}"
        )
    snapped = list(snapped)
    if [s.name for s in snapped] != list(sites.names):
        raise InputDataError(
            "snapped sites do not match the site list (names or order differ); "
            "pass the output of snap_sites for the same SiteList"
        )
    front = _check_result(front, "front", None)
    mode = front.settings.get("speed_mode", "long-wave")
    if mode != "long-wave":
        raise InputDataError(
            f"the front result uses speed mode {mode!r}; the front needs a long-wave solve "
            "(pass group solves as periods)"
        )
    u = float(speed_uncertainty)
    if not (math.isfinite(u) and 0.0 <= u < 1.0):
        raise InputDataError(
            f"speed uncertainty {speed_uncertainty!r} must be a fraction in [0, 1), "
            "e.g. 0.05 for +/-5 %"
        )
    period_items: list[tuple[float, TravelTimeResult]] = []
    for key, result in sorted((periods or {}).items(), key=lambda kv: float(kv[0])):
        t_s = float(key)
        if not (math.isfinite(t_s) and t_s > 0.0):
            raise InputDataError(f"wave period {key!r} s must be a positive number of seconds")
        result = _check_result(result, f"the result for period {t_s:g} s", front)
        r_mode = result.settings.get("speed_mode")
        r_period = result.settings.get("period_s")
        if (
            r_mode != "group"
            or r_period is None
            or not math.isclose(float(r_period), t_s, rel_tol=1e-9)
        ):
            raise InputDataError(
                f"the result given for period {t_s:g} s is a {r_mode!r} solve with period "
                f"{r_period!r}; energy columns need the group-speed solve of that period"
            )
        period_items.append((t_s, result))
    labels = [period_label(t) for t, _ in period_items]
    if len(set(labels)) != len(labels):
        raise InputDataError(f"wave periods {[t for t, _ in period_items]} repeat; give each once")
    if origin_time_utc is not None:
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
        origin = origin_time_utc.astimezone(UTC)
    defaults = {
        "notification_delay_min": float(notification_delay_min),
        "preparation_min": float(preparation_min),
        "walking_speed_m_s": float(walking_speed_m_s),
    }
    # Checks the defaults and the threshold once, with a clear message.
    warning_budget(
        None,
        defaults["notification_delay_min"],
        defaults["preparation_min"],
        None,
        defaults["walking_speed_m_s"],
        little_margin_min=little_margin_min,
    )

    lon, lat = sites.lonlat()
    cols: dict[str, list[Any]] = {
        k: []
        for k in (
            "name",
            "lon",
            "lat",
            "status",
            "moved_m",
            "depth_m",
            "front_min",
            "earliest_min",
            "latest_min",
        )
    }
    for lab in labels:
        cols[f"energy_T{lab}s_min"] = []
        cols[f"window_T{lab}s_min"] = []
    for k in (
        "notification_delay_min",
        "minutes_left",
        "preparation_min",
        "safe_ground_distance_m",
        "walking_speed_m_s",
        "minutes_needed",
        "margin_min",
        "budget_status",
        "defaults_used",
    ):
        cols[k] = []
    if origin_time_utc is not None:
        for k in (
            "front_utc",
            "earliest_utc",
            "latest_utc",
            *(f"energy_T{lab}s_utc" for lab in labels),
        ):
            cols[k] = []

    for i, (site, snap) in enumerate(zip(sites, snapped, strict=True)):
        front_min = _at(front.arrival_time_s, snap)
        earliest = front_min / (1.0 + u)
        latest = front_min / (1.0 - u)
        cols["name"].append(site.name)
        cols["lon"].append(float(lon[i]))
        cols["lat"].append(float(lat[i]))
        cols["status"].append(snap.status)
        cols["moved_m"].append(snap.moved_m)
        cols["depth_m"].append(snap.depth_m)
        cols["front_min"].append(front_min)
        cols["earliest_min"].append(earliest)
        cols["latest_min"].append(latest)
        energies = []
        for lab, (_, result) in zip(labels, period_items, strict=True):
            e = _at(result.arrival_time_s, snap)
            energies.append(e)
            cols[f"energy_T{lab}s_min"].append(e)
            cols[f"window_T{lab}s_min"].append(e - front_min)
        used = {k: getattr(site, k) for k in _BUDGET_FIELDS}
        from_defaults = [k for k in _BUDGET_FIELDS if used[k] is None]
        values = {k: defaults[k] if used[k] is None else float(used[k]) for k in _BUDGET_FIELDS}
        budget = warning_budget(
            earliest,
            values["notification_delay_min"],
            values["preparation_min"],
            site.safe_ground_distance_m,
            values["walking_speed_m_s"],
            little_margin_min=little_margin_min,
        )
        cols["notification_delay_min"].append(values["notification_delay_min"])
        cols["minutes_left"].append(budget.minutes_left)
        cols["preparation_min"].append(values["preparation_min"])
        dist = site.safe_ground_distance_m
        cols["safe_ground_distance_m"].append(math.nan if dist is None else float(dist))
        cols["walking_speed_m_s"].append(values["walking_speed_m_s"])
        cols["minutes_needed"].append(budget.minutes_needed)
        cols["margin_min"].append(budget.margin_min)
        cols["budget_status"].append(budget.status)
        cols["defaults_used"].append(";".join(from_defaults))
        if origin_time_utc is not None:
            cols["front_utc"].append(_utc_text(origin, front_min))
            cols["earliest_utc"].append(_utc_text(origin, earliest))
            cols["latest_utc"].append(_utc_text(origin, latest))
            for lab, e in zip(labels, energies, strict=True):
                cols[f"energy_T{lab}s_utc"].append(_utc_text(origin, e))

    decimals: dict[str, int] = {
        "lon": 6,
        "lat": 6,
        "moved_m": 0,
        "depth_m": 1,
        "safe_ground_distance_m": 1,
        "walking_speed_m_s": 3,
        "minutes_left": 2,
        "minutes_needed": 2,
    }
    for k in cols:
        if k.endswith("_min"):
            decimals[k] = 2
    units = (
        "Units: times in minutes after origin"
        + (", clock times in UTC (ISO 8601)" if origin_time_utc is not None else "")
        + "; distances in metres; speeds in m/s. "
        f"earliest_min/latest_min = front_min / (1 +/- {u:g}) "
        f"for a stated +/-{100 * u:g} % wave-speed uncertainty; minutes_left counts from "
        f"earliest_min. Defaults where a site gives none: notification delay "
        f"{defaults['notification_delay_min']:g} min, "
        f"preparation {defaults['preparation_min']:g} min, "
        f"walking speed {defaults['walking_speed_m_s']:g} m/s; little margin: under "
        f"{float(little_margin_min):g} min. Margins are planning figures, not promises."
    )
    settings = {
        "speed_uncertainty": u,
        "origin_time_utc": None if origin_time_utc is None else _utc_text(origin, 0.0),
        "little_margin_min": float(little_margin_min),
        **{f"default_{k}": v for k, v in defaults.items()},
        "periods_s": [t for t, _ in period_items],
    }
    return SiteTable(
        columns=cols,
        comments=(CAUTION_SHORT, units),
        decimals=decimals,
        periods_s=tuple(t for t, _ in period_items),
        settings=settings,
    )


def site_table_layer(table: SiteTable, crs: Any = _WGS84, *, name: str = "sites") -> VectorLayer:
    """The site table as a point layer at the sites' given positions.

    Parameters
    ----------
    table : SiteTable
    crs : CRS-like
        CRS of the layer's coordinates (default WGS84); pass the same CRS
        to :func:`ttmap.io.vector.write_vector_layers`.
    name : str
        Layer name.

    Returns
    -------
    ttmap.io.vector.VectorLayer
        Point geometries (None where a site's lon/lat is unknown), every
        table column as an attribute, the short caution as description.

    Notes
    -----
    Column names longer than 10 characters clash when cut for an ESRI
    Shapefile (``energy_T600s_min`` and ``energy_T600s_utc``); write
    GeoPackage or GeoJSON.
    """
    target = CRS.from_user_input(crs)
    lon = np.asarray(table.columns["lon"], dtype=np.float64)
    lat = np.asarray(table.columns["lat"], dtype=np.float64)
    if target.equals(_WGS84, ignore_axis_order=True):
        x, y = lon, lat
    else:
        tr = Transformer.from_crs(_WGS84, target, always_xy=True)
        x, y = (np.asarray(v, dtype=np.float64) for v in tr.transform(lon, lat, errcheck=False))
    geoms = [
        shapely.Point(float(a), float(b)) if math.isfinite(a) and math.isfinite(b) else None
        for a, b in zip(x, y, strict=True)
    ]
    attributes: dict[str, Any] = {}
    for key, values in table.columns.items():
        if all(v is None or isinstance(v, str) for v in values):
            attributes[key] = list(values)
        else:
            attributes[key] = np.asarray(
                [math.nan if v is None else float(v) for v in values], dtype=np.float64
            )
    return VectorLayer(name, geoms, attributes, "Point", description=table.comments[0])
