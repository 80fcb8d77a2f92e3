"""Site-centred maps: how long waves from anywhere take to reach one site.

A planner at a coastal site asks "if the earthquake were *there*, how many
minutes would we have?". Answering it for every possible source location by
solving once per source would take one solve per ocean cell. Reciprocity turns
it into **one** solve started at the site.

Fermat's principle gives the first-arrival time between two points as the
least travel time over all paths, ``T(A, B) = min over paths of the integral
of ds / c(x)`` (Sethian 1999, *Level Set Methods and Fast Marching Methods*,
Cambridge Univ. Press; the eikonal equation ``|grad T| = 1 / c``). When the
speed ``c`` is a scalar function of position only (isotropic: the same in
every direction), a path's travel time does not depend on the direction it is
travelled in, so ``T(A -> B) = T(B -> A)`` (reference notes, docs/references.md). The time from a solve started at the site, read at a cell, is
therefore the time a wave from a source at that cell takes to reach the site.

This holds for the speed fields ttmap computes: the long-wave speed
``sqrt(g h)``, the group (or phase) speed of one wave period and the optional
far-field effective-depth slowdown all depend on depth (and period) only,
never on direction. It would not hold with currents (a current adds a
direction-dependent speed) or any other direction-dependent cost; ttmap models
none. The discrete solve breaks reciprocity slightly: the reference tests
(``tests/reference/test_site_reciprocity.py``) measure differences of a
fraction of a per cent between the site-centred map and forward solves from
the source cells.

Functions
---------
- :func:`site_centred_times` - the one solve, with the site moved to the
  nearest open water within a radius (sites sit on the coast).
- :func:`minutes_left` - travel time minus the notification delay: the
  minutes people at the site would have after the official message if the
  earthquake were at each cell (negative: the wave comes first).
- :func:`combine_site_times` / :func:`combine_sites` - the earliest time over
  several sites and which site is reached first.

Files are written by the site-map job (:mod:`ttmap.jobs.sitemap`); the map
figure and styles are products (:mod:`ttmap.products.site_maps`).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ttmap.defaults import MAX_NOTIFICATION_DELAY_MIN, SITE_SEARCH_RADIUS_M
from ttmap._typing import FloatArray
from ttmap.errors import InputDataError, SourceError
from ttmap.grid import Grid
from ttmap.sources import Source
from ttmap.traveltime import Medium, TravelTimeResult

__all__ = [
    "NO_SITE_INDEX",
    "RECIPROCITY_NOTE",
    "check_notification_delay",
    "combine_site_times",
    "combine_sites",
    "minutes_left",
    "site_centred_times",
]

#: Tag text stored with every site-centred raster.
RECIPROCITY_NOTE: str = (
    "time from a source at this cell to the site; reciprocal times hold for isotropic "
    "speeds without currents (Fermat's principle: the time from the site to the cell "
    "equals the time from the cell to the site)"
)

#: Index of "no site" in the site-reached-first index of :func:`combine_site_times`.
NO_SITE_INDEX: int = -1


# ---------------------------------------------------------------------------
# The solve
# ---------------------------------------------------------------------------


def _site_source(site: Any) -> Source:
    if isinstance(site, Source):
        return site
    try:
        lon, lat = (float(v) for v in site)
    except (TypeError, ValueError) as err:
        raise SourceError(
            f"site {site!r} is neither a Source nor a (lon, lat) pair; give e.g. (174.78, -41.29)"
        ) from err
    return Source.point(lon, lat)


def _where(grid: Grid, x: float, y: float) -> str:
    if grid.is_geographic:
        return f"(lon {x:.4f}, lat {y:.4f})"
    return f"(x {x:.1f}, y {y:.1f})"


def site_centred_times(
    medium: Medium,
    site: Source | tuple[float, float],
    *,
    name: str | None = None,
    snap_radius_m: float | None = SITE_SEARCH_RADIUS_M,
    max_time_s: float | None = None,
) -> TravelTimeResult:
    """Time from every possible source cell to a site, from one solve started at the site.

    By Fermat's principle the first-arrival time between two points is the
    same in both directions when the speed depends on position only
    (Sethian 1999; docs/references.md). The long-wave and group (or
    phase) speed fields ttmap computes are such fields; currents, which ttmap
    does not model, would break it. So the arrival time of a solve started at
    the site, read at any water cell, is the time a wave from a source there
    takes to reach the site. The discrete solve differs from forward solves
    by a fraction of a per cent (see the module notes).

    Parameters
    ----------
    medium : Medium
        From :func:`ttmap.prepare_medium` (any speed mode).
    site : Source or (lon, lat)
        The site: a WGS84 longitude/latitude pair or a point
        :class:`~ttmap.Source` (any CRS). A line or area source also works:
        the map then gives the time until a wave first reaches any part of it.
    name : str, optional
        The site's name, used in messages and stored as ``settings["site"]``.
    snap_radius_m : float or None
        A point site on land, nodata or in a closed basin is moved to the
        nearest open-water cell within this ground distance (default 2 km,
        since sites sit on the coast). The move is reported in
        ``summary.source_moved_m`` and ``settings["site_moved_m"]``. None
        refuses such a site.
    max_time_s : float, optional
        Stop the solve at this time; later cells are NaN.

    Returns
    -------
    TravelTimeResult
        ``arrival_time_s`` holds, at each water cell, the time from a source
        there to the site (seconds). ``source`` is the site as given;
        ``summary`` places it at the (moved) solve cell. ``settings`` adds
        ``site``, ``site_moved_m``, ``snap_radius_m`` and ``reciprocity``.

    Raises
    ------
    SourceError
        The site is outside the grid, or on land with no open water within
        ``snap_radius_m``.
    InputDataError
        A bad radius or maximum time.

    Examples
    --------
    >>> from affine import Affine
    >>> from ttmap import Grid, prepare_medium
    >>> depth = np.full((40, 40), 1000.0)
    >>> depth[:, 30:] = -10.0  # land east of x = 30 km
    >>> g = Grid((40, 40), Affine(1000, 0, 0, 0, -1000, 40000), "EPSG:32601")
    >>> r = site_centred_times(prepare_medium(depth, g), Source.point_xy(30400, 20500), name="Harbour")
    >>> round(r.summary.source_moved_m), r.settings["site"]  # ground metres: 900 m on the map
    (898, 'Harbour')
    """
    if snap_radius_m is not None and not (math.isfinite(snap_radius_m) and snap_radius_m >= 0.0):
        raise InputDataError(f"snap radius {snap_radius_m!r} m must be a non-negative number")
    source = _site_source(site)
    grid = medium.grid
    who = f"site {name!r}" if name else "site"
    moved_m = 0.0
    solve_source = source
    if source.kind == "point":
        geom = source.in_crs(grid.crs)
        x, y = float(geom.x), float(geom.y)
        if not bool(grid.contains(x, y)):
            left, bottom, right, top = grid.bounds
            raise SourceError(
                f"{who} at {_where(grid, x, y)} lies outside the grid (x {left:g} to {right:g}, "
                f"y {bottom:g} to {top:g}); check its coordinates or use a larger bathymetry"
            )
        row, col = (int(v) for v in grid.rowcol(x, y))
        if not medium.open_water[row, col]:
            from ttmap.sources import nearest_open_water

            d = float(medium.depth_m[row, col])
            what = "land or nodata" if not medium.water[row, col] else "a closed basin"
            if snap_radius_m is None:
                raise SourceError(
                    f"{who} at {_where(grid, x, y)} lies on {what} (depth_m = {d:.1f}); move it "
                    "into open water or allow a move (snap_radius_m / --site-search-radius-km)"
                )
            found = nearest_open_water(grid, medium.open_water, x, y, snap_radius_m)
            if found is None:
                raise SourceError(
                    f"{who} at {_where(grid, x, y)} lies on {what} (depth_m = {d:.1f}) and no "
                    f"open water lies within {snap_radius_m / 1000.0:g} km; move the site or "
                    "enlarge the search radius"
                )
            r2, c2, moved_m = found
            cx, cy = grid.xy(r2, c2)
            solve_source = Source.point_xy(float(cx), float(cy), label=source.label)
        result = medium.travel_time(solve_source, max_time_s=max_time_s)
    else:
        result = medium.travel_time(source, max_time_s=max_time_s, snap_radius_m=snap_radius_m)
        moved_m = result.summary.source_moved_m
    summary = dataclasses.replace(result.summary, source_moved_m=float(moved_m))
    settings = dict(
        result.settings,
        site=name,
        site_moved_m=float(moved_m),
        snap_radius_m=snap_radius_m,
        reciprocity=RECIPROCITY_NOTE,
    )
    return TravelTimeResult(result.arrival_time_s, grid, summary, source, settings)


def minutes_left(time_min: ArrayLike, notification_delay_min: float) -> FloatArray:
    """Minutes people at the site would have after the official message.

    ``time_min - notification_delay_min``: for a site-centred map, the time
    between the message reaching the site and the first wave, if the
    earthquake were at each cell. Negative values mean the wave arrives
    before any official message; they are kept, since they mark the sources
    for which only natural warning signs (strong or long shaking, an unusual
    sea) can help.

    Parameters
    ----------
    time_min : array_like, float, minutes
        Travel time (site-centred map), NaN where none.
    notification_delay_min : float
        Minutes from the earthquake until the official message reaches
        people at the site, 0 to 1440.

    Returns
    -------
    ndarray of the same shape, float64, minutes
        NaN stays NaN. The input is not modified.

    Raises
    ------
    InputDataError
        A delay that is not a number in 0..1440 minutes, or non-numeric times.

    Examples
    --------
    >>> minutes_left([4.0, 15.0, np.nan], 10.0).tolist()
    [-6.0, 5.0, nan]
    """
    delay = check_notification_delay(notification_delay_min)
    t = np.asarray(time_min)
    if not np.issubdtype(t.dtype, np.number) or np.iscomplexobj(t):
        raise InputDataError(f"time_min must hold real numbers (minutes), got dtype {t.dtype}")
    return np.asarray(t, dtype=np.float64) - delay


def check_notification_delay(notification_delay_min: float) -> float:
    """The delay as a float; InputDataError unless it is a number of minutes in 0..1440."""
    try:
        delay = float(notification_delay_min)
    except (TypeError, ValueError) as err:
        raise InputDataError(
            f"notification delay {notification_delay_min!r} is not a number of minutes"
        ) from err
    if not (math.isfinite(delay) and 0.0 <= delay <= MAX_NOTIFICATION_DELAY_MIN):
        raise InputDataError(
            f"notification delay {notification_delay_min!r} min must lie in 0..."
            f"{MAX_NOTIFICATION_DELAY_MIN:g} minutes; give e.g. 10"
        )
    return delay


# ---------------------------------------------------------------------------
# Several sites
# ---------------------------------------------------------------------------


def combine_site_times(
    times_min: Mapping[str, ArrayLike],
) -> tuple[FloatArray, NDArray[np.int16], list[str]]:
    """Earliest time over several site-centred maps, and which site it belongs to.

    Parameters
    ----------
    times_min : mapping of str to ndarray of shape (rows, cols), float, minutes
        Site name -> site-centred time; NaN where none. All of one shape.

    Returns
    -------
    min_time_min : ndarray of shape (rows, cols), float64, minutes
        The smallest time over the sites (NaN where no site has one).
    first_site_index : ndarray of shape (rows, cols), int16
        Position (in ``names``) of the site with that time, -1 where none. On
        a tie the earlier site in the mapping wins.
    names : list of str
        The site names in mapping order.

    Raises
    ------
    InputDataError
        No sites, more than 32767, arrays that are not 2-D, numeric and of
        one shape.

    Examples
    --------
    >>> t, i, names = combine_site_times({"a": [[5.0, 9.0, np.nan]], "b": [[7.0, 3.0, np.nan]]})
    >>> t.tolist(), i.tolist(), names
    ([[5.0, 3.0, nan]], [[0, 1, -1]], ['a', 'b'])
    """
    names = [str(k) for k in times_min]
    if not names:
        raise InputDataError("no sites to combine; give at least one site-centred map")
    if len(names) > np.iinfo(np.int16).max:
        raise InputDataError(f"{len(names)} sites given; at most 32767 can be indexed in int16")
    best: FloatArray | None = None
    index: NDArray[np.int16] | None = None
    for i, (name, values) in enumerate(times_min.items()):
        t = np.asarray(values)
        if t.ndim != 2 or not np.issubdtype(t.dtype, np.number) or np.iscomplexobj(t):
            raise InputDataError(
                f"site {name!r}: times must be a 2-D array of minutes, got shape {t.shape} and "
                f"dtype {t.dtype}"
            )
        t = np.asarray(t, dtype=np.float64)
        if best is None or index is None:
            best = np.where(np.isfinite(t), t, np.nan)
            index = np.where(np.isfinite(t), 0, NO_SITE_INDEX).astype(np.int16)
            continue
        if t.shape != best.shape:
            raise InputDataError(
                f"site {name!r} has a map of shape {t.shape}, the first site {names[0]!r} one of "
                f"shape {best.shape}; combine maps of one grid"
            )
        better = np.isfinite(t) & ~(t >= best)  # earlier, or the first time there
        best[better] = t[better]
        index[better] = i
    assert best is not None and index is not None
    return best, index, names


def combine_sites(
    results: Mapping[str, TravelTimeResult],
) -> tuple[FloatArray, NDArray[np.int16], list[str]]:
    """:func:`combine_site_times` on site-centred results (seconds turned into minutes).

    Raises
    ------
    InputDataError
        No results, or results on different grids.
    """
    items = list(results.items())
    if not items:
        raise InputDataError("no sites to combine; give at least one site-centred result")
    grid0 = items[0][1].grid
    for name, r in items[1:]:
        g = r.grid
        if g.shape != grid0.shape or g.transform != grid0.transform or g.crs != grid0.crs:
            raise InputDataError(
                f"site {name!r} was solved on another grid than {items[0][0]!r}; "
                "solve every site on one Medium"
            )
    return combine_site_times({name: r.arrival_time_min for name, r in items})
