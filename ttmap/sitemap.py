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
travelled in, so ``T(A -> B) = T(B -> A)`` (reference notes, REFERENCE.md
section 8). The time from a solve started at the site, read at a cell, is
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
- :func:`write_site_products` / :func:`write_combined_products` - GeoTIFFs,
  isochrones, SLD styles and a map, each carrying the caution.

The library holds no command-line code.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import re
import unicodedata
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ttmap.defaults import MAP_FORMATS, MAX_NOTIFICATION_DELAY_MIN, SITE_SEARCH_RADIUS_M, VECTOR_FORMATS
from ttmap._typing import FloatArray
from ttmap.errors import InputDataError, SourceError
from ttmap.grid import Grid
from ttmap.sources import Source
from ttmap.traveltime import Medium, TravelTimeResult

if TYPE_CHECKING:
    from matplotlib.figure import Figure

__all__ = [
    "RECIPROCITY_NOTE",
    "SITE_MAP_TITLE",
    "combine_site_times",
    "combine_sites",
    "combined_product_paths",
    "minutes_left",
    "render_site_map",
    "site_centred_times",
    "site_file_stem",
    "site_product_paths",
    "write_combined_products",
    "write_site_products",
]

#: Tag text stored with every site-centred raster.
RECIPROCITY_NOTE: str = (
    "time from a source at this cell to the site; reciprocal times hold for isotropic "
    "speeds without currents (Fermat's principle: the time from the site to the cell "
    "equals the time from the cell to the site)"
)

#: Title pattern of the site map; ``{site}`` is replaced by the site's name.
SITE_MAP_TITLE: str = "Minutes from a source here to {site}"

_NODATA = -9999.0
_INDEX_NODATA = -1
_ISO_LAYERS = ("isochrone_lines", "isochrone_bands")
_SHP_COMPANIONS = (".shx", ".dbf", ".prj", ".cpg")
#: Colour of the "wave arrives before the message" class of the minutes-left style.
_BEFORE_MESSAGE_COLOR = "#67000d"


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
    (REFERENCE.md section 8; Sethian 1999). The long-wave and group (or
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
    >>> round(r.summary.source_moved_m), r.settings["site"]
    (900, 'Harbour')
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
                    "into open water or allow a move (snap_radius_m / --site-snap-radius-km)"
                )
            found = nearest_open_water(grid, medium.open_water, x, y, snap_radius_m)
            if found is None:
                raise SourceError(
                    f"{who} at {_where(grid, x, y)} lies on {what} (depth_m = {d:.1f}) and no "
                    f"open water lies within {snap_radius_m / 1000.0:g} km; move the site or "
                    "enlarge the snap radius"
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
    delay = _check_delay(notification_delay_min)
    t = np.asarray(time_min)
    if not np.issubdtype(t.dtype, np.number) or np.iscomplexobj(t):
        raise InputDataError(f"time_min must hold real numbers (minutes), got dtype {t.dtype}")
    return np.asarray(t, dtype=np.float64) - delay


def _check_delay(notification_delay_min: float) -> float:
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
            index = np.where(np.isfinite(t), 0, _INDEX_NODATA).astype(np.int16)
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


# ---------------------------------------------------------------------------
# File names
# ---------------------------------------------------------------------------


def site_file_stem(name: str) -> str:
    """A file-name-safe ASCII stem for a site name.

    Accents are dropped, any run of other characters becomes ``_``.

    Raises
    ------
    InputDataError
        The name leaves no letter or digit.

    Examples
    --------
    >>> site_file_stem("Port Ōrua (north wharf)")
    'Port_Orua_north_wharf'
    """
    text = unicodedata.normalize("NFKD", str(name)).encode("ascii", "ignore").decode("ascii")
    stem = re.sub(r"[^A-Za-z0-9-]+", "_", text).strip("_-")
    if not stem:
        raise InputDataError(
            f"site name {name!r} has no letter or digit to name its files by; rename the site"
        )
    return stem


def _check_formats(vector_formats: Sequence[str], map_formats: Sequence[str]) -> None:
    for fmt in vector_formats:
        if fmt not in VECTOR_FORMATS:
            raise InputDataError(
                f"vector format {fmt!r} is unknown; choose from {', '.join(VECTOR_FORMATS)}"
            )
    for fmt in map_formats:
        if fmt not in MAP_FORMATS:
            raise InputDataError(
                f"map format {fmt!r} is unknown; choose from {', '.join(MAP_FORMATS)}"
            )


def site_product_paths(
    out_dir: str | os.PathLike[str],
    name: str,
    *,
    vector_formats: Sequence[str] = ("gpkg",),
    map_formats: Sequence[str] = ("png",),
) -> list[Path]:
    """Every file :func:`write_site_products` writes for one site.

    Examples
    --------
    >>> [p.name for p in site_product_paths("out", "Bay A")]  # doctest: +NORMALIZE_WHITESPACE
    ['site_centred_Bay_A.tif', 'site_centred_Bay_A.sld', 'minutes_left_Bay_A.tif',
     'minutes_left_Bay_A.sld', 'isochrones_site_Bay_A.gpkg', 'isochrones_site_Bay_A_lines.sld',
     'isochrones_site_Bay_A_bands.sld', 'map_site_Bay_A.png']
    """
    from ttmap.io.vector import vector_output_paths

    _check_formats(vector_formats, map_formats)
    out = Path(out_dir)
    stem = site_file_stem(name)
    paths = [
        out / f"site_centred_{stem}.tif",
        out / f"site_centred_{stem}.sld",
        out / f"minutes_left_{stem}.tif",
        out / f"minutes_left_{stem}.sld",
    ]
    for fmt in vector_formats:
        paths += vector_output_paths(
            out / f"isochrones_site_{stem}{VECTOR_FORMATS[fmt]}", _ISO_LAYERS
        )
    paths += [out / f"isochrones_site_{stem}_lines.sld", out / f"isochrones_site_{stem}_bands.sld"]
    if "shp" in vector_formats:
        paths.append(out / f"isochrones_site_{stem}_bands_shp.sld")
    paths += [out / f"map_site_{stem}.{fmt}" for fmt in map_formats]
    return paths


def combined_product_paths(out_dir: str | os.PathLike[str]) -> list[Path]:
    """Every file :func:`write_combined_products` writes.

    Examples
    --------
    >>> [p.name for p in combined_product_paths("out")]  # doctest: +NORMALIZE_WHITESPACE
    ['site_centred_min.tif', 'site_centred_min.sld', 'site_centred_first_site.tif',
     'site_centred_first_site.sld', 'site_centred_first_site.json']
    """
    out = Path(out_dir)
    return [
        out / "site_centred_min.tif",
        out / "site_centred_min.sld",
        out / "site_centred_first_site.tif",
        out / "site_centred_first_site.sld",
        out / "site_centred_first_site.json",
    ]


def _companions(paths: Sequence[Path]) -> list[Path]:
    return [p.with_suffix(s) for p in paths if p.suffix == ".shp" for s in _SHP_COMPANIONS]


# ---------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------


def _common_tags(result: TravelTimeResult) -> dict[str, str]:
    import ttmap
    from ttmap.products.cautions import CAUTION_SHORT

    s = result.settings
    max_time_s = s.get("max_time_s")
    period_s = s.get("period_s")
    return {
        "SPEED_MODE": str(s.get("speed_mode", "")),
        "PERIOD_S": "" if period_s is None else f"{float(period_s):g}",
        "FLOOR_DEPTH_M": "" if s.get("floor_depth_m") is None else f"{float(s['floor_depth_m']):g}",
        "FAR_FIELD_CORRECTION": (
            "effective depth h(1-gh/cs^2), cs=1500 m/s" if s.get("far_field") else "none"
        ),
        "EARTH_MODEL": str(s.get("earth") or "projected grid (plane)"),
        "MAX_TIME_MIN": "" if max_time_s is None else f"{float(max_time_s) / 60.0:g}",
        "RECIPROCITY": RECIPROCITY_NOTE,
        "SOFTWARE": f"ttmap {ttmap.__version__}",
        "CAUTION": CAUTION_SHORT,
    }


def _site_tags(name: str, result: TravelTimeResult) -> dict[str, str]:
    sm = result.summary
    return {
        "QUANTITY": "time from a source at this cell to the site",
        "SITE": name,
        "SITE_X": f"{sm.source_x:.8g}",
        "SITE_Y": f"{sm.source_y:.8g}",
        "SITE_MOVED_M": f"{sm.source_moved_m:.1f}",
        "SITE_INPUT": result.source.label,
        **_common_tags(result),
    }


def _speed_text(result: TravelTimeResult) -> str:
    s = result.settings
    mode = s.get("speed_mode", "long-wave")
    if mode == "long-wave":
        return "front (long-wave speed)"
    return f"{'energy' if mode == 'group' else 'phase'} of {float(s['period_s']):g} s waves ({mode} speed)"


def _relabel(fig: Figure, mapping: Mapping[str, str]) -> None:
    """Replace exact texts of a finished figure (colour bar label, legend entries)."""
    from matplotlib.text import Text

    for text in fig.findobj(Text):
        new = mapping.get(text.get_text())
        if new is not None:
            text.set_text(new)


def render_site_map(
    name: str,
    result: TravelTimeResult,
    lines: Sequence[Any],
    *,
    water_mask: ArrayLike | None = None,
    title_prefix: str = "",
) -> Figure:
    """The map of a site-centred result (internal; used by :func:`write_site_products`)."""
    import shapely

    from ttmap.products.maps import COLORBAR_LABEL, render_arrival_map

    grid = result.grid
    sm = result.summary
    moved = (
        f", moved {sm.source_moved_m / 1000.0:.2f} km to open water"
        if sm.source_moved_m > 0
        else ""
    )
    fig = render_arrival_map(
        result.arrival_time_min,
        grid.transform,
        land_mask=None if water_mask is None else ~np.asarray(water_mask, dtype=bool),
        lines=lines,
        source_geometry=shapely.Point(sm.source_x, sm.source_y),
        title=f"{title_prefix}{SITE_MAP_TITLE.format(site=name)}",
        subtitle=f"Site {name}{moved}  |  {_speed_text(result)}  |  same time both ways",
        is_geographic=grid.is_geographic,
    )
    _relabel(
        fig,
        {
            COLORBAR_LABEL: f"Minutes from a source here to {name}",
            "Source": f"Site: {name}",
            "Isochrone (h:mm after origin)": f"Isochrone (h:mm to reach {name})",
        },
    )
    return fig


def _levels(time_min: FloatArray, interval_min: float | None) -> FloatArray:
    from ttmap.products.isochrones import default_levels_min, levels_from_interval

    finite = time_min[np.isfinite(time_min)]
    if finite.size == 0:
        return np.zeros(0)
    tmax = float(finite.max())
    if interval_min is not None:
        return levels_from_interval(interval_min, tmax)
    return default_levels_min(tmax)


def _minutes_left_style(left_min: FloatArray, delay_min: float, name: str, stem: str) -> str:
    from ttmap.products.palette import arrival_colors_hex
    from ttmap.products.styles import raster_sld

    finite = left_min[np.isfinite(left_min)]
    top = float(finite.max()) if finite.size else 60.0
    positive = [float(v) for v in _levels(np.array([max(top, 1.0)]), None)]
    levels = [0.0, *positive]
    colors = arrival_colors_hex(len(levels))
    if delay_min > 0.0:
        levels = [-float(math.ceil(delay_min)), *levels]
        colors = [_BEFORE_MESSAGE_COLOR, *colors]
    return raster_sld(
        levels,
        colors,
        layer_name=f"minutes_left_{stem}",
        title=f"Minutes left at {name} after a {delay_min:g}-min notification delay "
        "(below 0: the wave comes first)",
        color_map_type="intervals",
        nodata=_NODATA,
    )


def write_site_products(
    out_dir: str | os.PathLike[str],
    name: str,
    result: TravelTimeResult,
    *,
    notification_delay_min: float,
    overwrite: bool = False,
    vector_formats: Sequence[str] = ("gpkg",),
    map_formats: Sequence[str] = ("png",),
    title_prefix: str = "",
    water_mask: ArrayLike | None = None,
    isochrone_interval_min: float | None = None,
) -> list[Path]:
    """Write one site's site-centred products, all or nothing.

    Files (``<site>`` is :func:`site_file_stem` of the name):

    - ``site_centred_<site>.tif``: float32 minutes from a source at each cell
      to the site, with tags ``SITE``, ``SITE_X/Y`` (the solve cell),
      ``SITE_MOVED_M``, ``RECIPROCITY``, speed settings and ``CAUTION``;
      style ``site_centred_<site>.sld``.
    - ``minutes_left_<site>.tif``: minutes left for people at the site if the
      earthquake were at each cell (time minus the notification delay;
      negative where the wave comes first), tag ``NOTIFICATION_DELAY_MIN``;
      style ``minutes_left_<site>.sld`` (a dark red class below 0).
    - ``isochrones_site_<site>.gpkg`` (or ``.shp`` / ``.geojson`` files):
      layers ``isochrone_lines`` and ``isochrone_bands`` (attributes
      ``minutes``, ``label``, ``site``), styles ``..._lines.sld`` and
      ``..._bands.sld`` (``..._bands_shp.sld`` for Shapefiles).
    - ``map_site_<site>.png`` (and/or ``.pdf``): the map titled "Minutes from
      a source here to <site>", the site drawn as the start marker.

    Parameters
    ----------
    out_dir : path-like
        Existing folder.
    name : str
        The site's name.
    result : TravelTimeResult
        From :func:`site_centred_times`.
    notification_delay_min : float
        Minutes from the earthquake until the official message reaches the
        site (0 to 1440).
    overwrite : bool
        Replace existing files; otherwise any existing one is refused before
        anything is written.
    vector_formats : sequence of {"gpkg", "shp", "geojson"}
    map_formats : sequence of {"png", "pdf"}
    title_prefix : str
        Put before the map title (e.g. a scenario name and ": ").
    water_mask : ndarray of shape grid.shape, bool, optional
        True on water (:attr:`ttmap.Medium.water`); land is drawn grey on the
        map. Without it the map draws no land.
    isochrone_interval_min : float, optional
        Isochrone spacing; default
        :func:`ttmap.products.isochrones.default_levels_min`.

    Returns
    -------
    list of pathlib.Path
        The files written, in the order above.

    Raises
    ------
    OutputExistsError
        A file exists and ``overwrite`` is False (nothing is written).
    InputDataError
        Unknown formats, a bad delay or name, a missing folder.
    TtmapError
        A write failed; no file of the set is left behind.

    Notes
    -----
    Every file is written into a hidden staging folder and the whole set is
    moved into ``out_dir`` only when all of it is complete
    (:func:`ttmap.io.atomic.atomic_output_set`).
    """
    from ttmap.io.atomic import atomic_output_set, check_writable

    delay = _check_delay(notification_delay_min)
    planned = site_product_paths(
        out_dir, name, vector_formats=vector_formats, map_formats=map_formats
    )
    check_writable([*planned, *_companions(planned)], overwrite)
    with atomic_output_set(planned, overwrite=overwrite) as staged:
        _write_site_set(
            Path(staged[0]).parent,
            name,
            result,
            delay,
            vector_formats,
            map_formats,
            title_prefix,
            water_mask,
            isochrone_interval_min,
        )
    return planned


def _write_site_set(
    folder: Path,
    name: str,
    result: TravelTimeResult,
    delay: float,
    vector_formats: Sequence[str],
    map_formats: Sequence[str],
    title_prefix: str,
    water_mask: ArrayLike | None,
    interval_min: float | None,
) -> None:
    from ttmap.io.atomic import atomic_output
    from ttmap.io.raster import write_arrival_geotiff
    from ttmap.io.vector import VectorLayer, shapefile_field_name, write_vector_layers
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.products.isochrones import isochrone_bands, isochrone_lines
    from ttmap.products.palette import arrival_colors_hex
    from ttmap.products.styles import bands_sld, lines_sld, raster_sld, write_sld

    grid = result.grid
    stem = site_file_stem(name)
    time_min = result.arrival_time_min
    tags = _site_tags(name, result)

    write_arrival_geotiff(
        folder / f"site_centred_{stem}.tif",
        time_min,
        grid,
        tags=tags,
        band_description=f"minutes from a source at this cell to site {name}",
    )
    levels = _levels(time_min, interval_min)
    ramp = [0.0, *[float(v) for v in levels]] if len(levels) else [0.0, 60.0]
    write_sld(
        folder / f"site_centred_{stem}.sld",
        raster_sld(
            ramp,
            arrival_colors_hex(len(ramp)),
            layer_name=f"site_centred_{stem}",
            title=f"Minutes from a source here to {name}",
        ),
    )

    left = minutes_left(time_min, delay)
    left_tags = {
        **tags,
        "QUANTITY": (
            "minutes left for people at the site if the earthquake were at this cell: time from "
            "this cell to the site minus the notification delay; negative: the wave arrives "
            "before the official message"
        ),
        "NOTIFICATION_DELAY_MIN": f"{delay:g}",
    }
    write_arrival_geotiff(
        folder / f"minutes_left_{stem}.tif",
        left,
        grid,
        tags=left_tags,
        band_description=(
            f"minutes left for people at {name} if the earthquake were here "
            f"(travel time minus {delay:g} min notification delay; negative: wave first)"
        ),
    )
    write_sld(folder / f"minutes_left_{stem}.sld", _minutes_left_style(left, delay, name, stem))

    lines = isochrone_lines(time_min, grid.transform, levels)
    bands = isochrone_bands(time_min, grid.transform, levels)
    line_attrs: dict[str, Any] = {
        "minutes": np.array([ln.minutes for ln in lines], dtype=np.float64),
        "label": np.array([ln.label for ln in lines], dtype=object),
        "site": np.array([name] * len(lines), dtype=object),
    }
    line_layer = VectorLayer(
        "isochrone_lines",
        [ln.geometry for ln in lines],
        line_attrs,
        "MultiLineString",
        description=f"Minutes from a source on the line to site {name}. {CAUTION_SHORT}",
    )
    band_attrs: dict[str, Any] = {
        "min_minutes": np.array([b.min_minutes for b in bands], dtype=np.float64),
        "max_minutes": np.array([b.max_minutes for b in bands], dtype=np.float64),
        "minutes": np.array([b.max_minutes for b in bands], dtype=np.float64),
        "label": np.array([b.label for b in bands], dtype=object),
        "site": np.array([name] * len(bands), dtype=object),
    }
    band_layer = VectorLayer(
        "isochrone_bands",
        [b.geometry for b in bands],
        band_attrs,
        "MultiPolygon",
        description=f"Minutes from a source in the band to site {name}. {CAUTION_SHORT}",
    )
    for fmt in vector_formats:
        write_vector_layers(
            folder / f"isochrones_site_{stem}{VECTOR_FORMATS[fmt]}",
            [line_layer, band_layer],
            crs=grid.crs,
        )
    band_rows = [(b.min_minutes, b.max_minutes, b.label) for b in bands]
    colors = arrival_colors_hex(max(len(bands), 1))[: len(bands)]
    write_sld(
        folder / f"isochrones_site_{stem}_lines.sld",
        lines_sld(layer_name="isochrone_lines", title=f"Minutes to reach {name}"),
    )
    write_sld(
        folder / f"isochrones_site_{stem}_bands.sld",
        bands_sld(
            band_rows,
            colors,
            layer_name="isochrone_bands",
            title=f"Minutes from a source here to {name}",
        ),
    )
    if "shp" in vector_formats:
        write_sld(
            folder / f"isochrones_site_{stem}_bands_shp.sld",
            bands_sld(
                band_rows,
                colors,
                layer_name=f"isochrones_site_{stem}_isochrone_bands",
                title=f"Minutes from a source here to {name}",
                attribute=shapefile_field_name("min_minutes"),
            ),
        )

    if map_formats:
        from ttmap.products.maps import save_figure

        fig = render_site_map(name, result, lines, water_mask=water_mask, title_prefix=title_prefix)
        for fmt in map_formats:
            with atomic_output(folder / f"map_site_{stem}.{fmt}", overwrite=False) as tmp:
                save_figure(fig, tmp, format=fmt)  # type: ignore[arg-type]


def write_combined_products(
    out_dir: str | os.PathLike[str],
    min_time_min: ArrayLike,
    first_index: ArrayLike,
    names: Sequence[str],
    grid: Grid,
    *,
    overwrite: bool = False,
    settings_from: TravelTimeResult | None = None,
) -> list[Path]:
    """Write the several-site products of :func:`combine_sites`, all or nothing.

    Files:

    - ``site_centred_min.tif``: float32 minutes from a source at each cell to
      whichever site it reaches first; style ``site_centred_min.sld``.
    - ``site_centred_first_site.tif``: int16 index of that site, nodata -1,
      tags ``SITE_COUNT`` and ``SITE_0``, ``SITE_1``, ... naming each index;
      style ``site_centred_first_site.sld`` (one colour and the site name per
      value).
    - ``site_centred_first_site.json``: the same index-to-name lookup, with
      the caution.

    Parameters
    ----------
    out_dir : path-like
        Existing folder.
    min_time_min : ndarray of shape grid.shape, float, minutes
    first_index : ndarray of shape grid.shape, int
        -1 exactly where ``min_time_min`` is NaN, else ``0..len(names) - 1``.
    names : sequence of str
        Site names by index.
    grid : Grid
    overwrite : bool
        Replace existing files; otherwise any existing one is refused before
        anything is written.
    settings_from : TravelTimeResult, optional
        One of the site results; its speed settings are added to the tags.

    Returns
    -------
    list of pathlib.Path

    Raises
    ------
    InputDataError
        Shapes that differ from the grid, indices outside ``-1..n-1`` or not
        matching the NaN cells of ``min_time_min``, no names.
    OutputExistsError
        A file exists and ``overwrite`` is False (nothing is written).
    """
    import ttmap
    from ttmap.io.atomic import atomic_output, atomic_output_set, check_writable
    from ttmap.io.raster import write_arrival_geotiff, write_raster
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.products.palette import arrival_colors_hex
    from ttmap.products.styles import raster_sld, write_sld

    names = [str(n) for n in names]
    if not names:
        raise InputDataError("no site names given; give one name per site index")
    t = np.asarray(min_time_min, dtype=np.float64)
    idx = np.asarray(first_index)
    if t.shape != grid.shape or idx.shape != grid.shape:
        raise InputDataError(
            f"min_time_min {t.shape} and first_index {idx.shape} must both have the grid's "
            f"shape {grid.shape}"
        )
    if not np.issubdtype(idx.dtype, np.integer):
        raise InputDataError(f"first_index must hold integers, got dtype {idx.dtype}")
    if idx.size and (idx.min() < _INDEX_NODATA or idx.max() >= len(names)):
        raise InputDataError(
            f"first_index holds {int(idx.min())}..{int(idx.max())}, outside -1..{len(names) - 1} "
            f"for {len(names)} site name(s)"
        )
    if np.any((idx == _INDEX_NODATA) != ~np.isfinite(t)):
        raise InputDataError(
            "first_index is -1 where min_time_min has a value, or the reverse; pass the two "
            "arrays from one combine_sites call"
        )
    planned = combined_product_paths(out_dir)
    check_writable(planned, overwrite)
    common = (
        _common_tags(settings_from)
        if settings_from is not None
        else {
            "RECIPROCITY": RECIPROCITY_NOTE,
            "SOFTWARE": f"ttmap {ttmap.__version__}",
            "CAUTION": CAUTION_SHORT,
        }
    )
    site_tags = {f"SITE_{i}": n for i, n in enumerate(names)}
    lookup_text = (
        json.dumps(
            {
                "caution": CAUTION_SHORT,
                "raster": "site_centred_first_site.tif",
                "nodata": _INDEX_NODATA,
                "sites": [{"index": i, "name": n} for i, n in enumerate(names)],
            },
            indent=2,
            ensure_ascii=False,
        )
        + "\n"
    )
    with atomic_output_set(planned, overwrite=overwrite) as staged:
        folder = Path(staged[0]).parent
        write_arrival_geotiff(
            folder / "site_centred_min.tif",
            t,
            grid,
            tags={
                "QUANTITY": "time from a source at this cell to the site it reaches first",
                "SITES": "; ".join(names),
                **common,
            },
            band_description="minutes from a source at this cell to the first site reached",
        )
        levels = _levels(t, None)
        ramp = [0.0, *[float(v) for v in levels]] if len(levels) else [0.0, 60.0]
        write_sld(
            folder / "site_centred_min.sld",
            raster_sld(
                ramp,
                arrival_colors_hex(len(ramp)),
                layer_name="site_centred_min",
                title="Minutes from a source here to the first site reached",
            ),
        )
        values = np.where(idx == _INDEX_NODATA, np.nan, idx.astype(np.float64))
        write_raster(
            folder / "site_centred_first_site.tif",
            values,
            grid,
            dtype="int16",
            nodata=float(_INDEX_NODATA),
            tags={
                "QUANTITY": "index of the site a wave from a source at this cell reaches first",
                "SITE_COUNT": str(len(names)),
                **site_tags,
                **common,
            },
            band_description="site reached first from a source at this cell (SITE_<index> tags)",
            resampling="mode",
        )
        write_sld(folder / "site_centred_first_site.sld", _first_site_sld(names))
        with atomic_output(folder / "site_centred_first_site.json", overwrite=False) as tmp:
            tmp.write_text(lookup_text, encoding="utf-8")
    return planned


def _first_site_sld(names: Sequence[str]) -> str:
    """Categorical raster style: one colour per site index, labelled with its name."""
    from ttmap.products.palette import arrival_colors_hex
    from ttmap.products.styles import default_abstract, sld_document, sld_element, sld_serialise

    colors = arrival_colors_hex(max(len(names), 2), "tab20")[: len(names)]
    root, fts = sld_document(
        "site_centred_first_site", "Site reached first from a source here", default_abstract()
    )
    rule = sld_element(fts, "Rule")
    sld_element(rule, "Name", "first_site")
    sld_element(rule, "Title", "Site reached first from a source here")
    sym = sld_element(rule, "RasterSymbolizer")
    sld_element(sym, "Opacity", "1.0")
    cmap = sld_element(sym, "ColorMap", type="values")
    sld_element(
        cmap,
        "ColorMapEntry",
        color="#000000",
        quantity=str(_INDEX_NODATA),
        opacity="0",
        label="no data",
    )
    for i, (name, color) in enumerate(zip(names, colors, strict=True)):
        sld_element(cmap, "ColorMapEntry", color=color, quantity=str(i), opacity="1", label=name)
    return sld_serialise(root)
