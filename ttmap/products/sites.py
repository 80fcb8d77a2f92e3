"""Arrival times at named sites: snapping to water, the site table, its vector layer.

No file I/O here (the CSV writer is :func:`ttmap.io.sites.write_site_table_csv`).

Snapping and rows
-----------------
The snapping (:func:`snap_sites`) and the rows (:func:`evaluate_sites`) are
the one site evaluation of :mod:`ttmap.products.site_eval`, re-exported here;
:func:`site_table` is its entry point for solves held in memory. Sites are
coastal points, usually on land or in a cell the front never reaches at
gridded resolution: each is read at the nearest *reached* water cell within a
search radius of ground distance, and gets one of :data:`SNAP_STATUSES`; no
site is ever dropped.

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
from datetime import datetime
from typing import Any

import numpy as np
import shapely
from pyproj import CRS, Transformer

from ttmap.defaults import (
    LITTLE_MARGIN_MIN,
    NOTIFICATION_DELAY_MIN,
    PREPARATION_MIN,
    SPEED_UNCERTAINTY,
    WALKING_SPEED_M_S,
)
from ttmap.errors import InputDataError
from ttmap.io.sites import SiteList
from ttmap.io.vector import VectorLayer
from ttmap.products.site_eval import (
    MARGIN_RULE,
    SITE_COLUMNS,
    SNAP_CLOSED_BASIN,
    SNAP_MOVED,
    SNAP_NO_WATER,
    SNAP_NOT_REACHED,
    SNAP_OK,
    SNAP_OUTSIDE,
    SNAP_STATUSES,
    SiteTable,
    SnappedSite,
    evaluate_sites,
    most_urgent,
    period_label,
    site_values,
    snap_sites,
)
from ttmap.traveltime import TravelTimeResult

__all__ = [
    "MARGIN_RULE",
    "SITE_COLUMNS",
    "SNAP_OK",
    "SNAP_MOVED",
    "SNAP_CLOSED_BASIN",
    "SNAP_NOT_REACHED",
    "SNAP_NO_WATER",
    "SNAP_OUTSIDE",
    "SNAP_STATUSES",
    "SnappedSite",
    "SiteTable",
    "evaluate_sites",
    "most_urgent",
    "snap_sites",
    "site_table",
    "site_table_layer",
    "site_values",
    "period_label",
]

_WGS84 = CRS.from_epsg(4326)


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
    """Arrival times and time budget of every site, from solves held in memory.

    Reads the front and each period's energy at the snapped cells
    (:func:`site_values`, as the rasters store them) and hands the values to
    :func:`evaluate_sites`, the one site evaluation.

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
    speed_uncertainty, origin_time_utc, notification_delay_min, preparation_min, \
walking_speed_m_s, little_margin_min
        As for :func:`evaluate_sites`.

    Returns
    -------
    SiteTable

    Raises
    ------
    InputDataError
        Mismatched sites and snapped lists, results on different grids, a
        period whose result is not a group-speed solve of that period, a
        front that is not a long-wave solve, or the errors of
        :func:`evaluate_sites`.

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
    energy: dict[float, Any] = {}
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
        energy[t_s] = site_values(result.arrival_time_min, snapped)
    return evaluate_sites(
        sites, snapped, site_values(front.arrival_time_min, snapped), energy,
        speed_uncertainty=speed_uncertainty, origin_time_utc=origin_time_utc,
        notification_delay_min=notification_delay_min, preparation_min=preparation_min,
        walking_speed_m_s=walking_speed_m_s, little_margin_min=little_margin_min,
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
