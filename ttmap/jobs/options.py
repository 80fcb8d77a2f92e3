"""Option groups shared by the jobs: reading, speed model, products, sites.

Each group is a small frozen dataclass whose defaults come from
:mod:`ttmap.defaults`. The map job (:class:`ttmap.jobs.map.MapJob`), the
site-map job (:class:`ttmap.jobs.sitemap.SiteMapJob`) and the scenario run
compose them instead of repeating fields, and the command line takes its
option defaults and choices from the same place (a test checks that every
CLI default equals the field default here).

Every group checks its values when built, so a bad value is refused with a
one-line :class:`~ttmap.errors.InputDataError` before any file is read.
Values are SI (metres, seconds) unless the name carries another unit
(``_min``, ``_m_s``, ``_km``).

The module imports only the standard library and ttmap's light modules, so
``ttmap --help`` can read it.

Examples
--------
>>> speed = SpeedOptions(periods_s=(300.0,))
>>> speed.floor_depth_m, speed.period_speed, speed.earth
(5.0, 'group', 'wgs84')
>>> ProductOptions(vector_formats=("kml",))
Traceback (most recent call last):
...
ttmap.errors.InputDataError: vector format 'kml' is unknown; choose from gpkg, shp, geojson
"""

from __future__ import annotations

import datetime as _dt
import math
from collections.abc import Sequence
from dataclasses import dataclass, fields
from typing import Any

from ttmap.defaults import (
    COAST_CLASS_INTERVAL_MIN,
    EARTH_MODEL,
    EARTH_MODELS,
    FLOOR_DEPTH_M,
    LITTLE_MARGIN_MIN,
    MAX_PERIOD_S,
    MAX_TIME_LIMIT_S,
    MIN_PERIOD_S,
    MAP_FORMAT,
    MAP_FORMATS,
    MAX_NOTIFICATION_DELAY_MIN,
    NOTIFICATION_DELAY_MIN,
    PERIOD_SPEED,
    PERIOD_SPEEDS,
    PREPARATION_MIN,
    SITE_SEARCH_RADIUS_M,
    SPEED_UNCERTAINTY,
    VECTOR_FORMAT,
    VECTOR_FORMATS,
    WALKING_SPEED_M_S,
)
from ttmap.errors import InputDataError

__all__ = [
    "LONLAT_CRS",
    "MIN_PERIOD_S",
    "MAX_PERIOD_S",
    "MAX_TIME_LIMIT_S",
    "ReadingOptions",
    "SpeedOptions",
    "ProductOptions",
    "SiteOptions",
    "check_formats",
    "options_record",
]

#: CRS of a crop window given in longitude/latitude degrees.
LONLAT_CRS: str = "EPSG:4326"



def check_formats(vector_formats: Sequence[str], map_formats: Sequence[str]) -> None:
    """Refuse unknown vector or map formats, naming the valid ones.

    >>> check_formats(["gpkg"], ["png", "pdf"])
    >>> check_formats([], ["tiff"])
    Traceback (most recent call last):
    ...
    ttmap.errors.InputDataError: map format 'tiff' is unknown; choose from png, pdf
    """
    for fmt in vector_formats:
        if fmt not in VECTOR_FORMATS:
            raise InputDataError(f"vector format {fmt!r} is unknown; choose from {', '.join(VECTOR_FORMATS)}")
    for fmt in map_formats:
        if fmt not in MAP_FORMATS:
            raise InputDataError(f"map format {fmt!r} is unknown; choose from {', '.join(MAP_FORMATS)}")


def _positive(what: str, value: float | None, unit: str, *, allow_zero: bool = False) -> None:
    if value is None:
        return
    ok = isinstance(value, (int, float)) and math.isfinite(value) and (value >= 0 if allow_zero else value > 0)
    if not ok:
        bound = "0 or more" if allow_zero else "a positive number"
        raise InputDataError(f"{what} {value!r} {unit} must be {bound}")


def _choice(what: str, value: str, choices: Sequence[str]) -> None:
    if value not in choices:
        raise InputDataError(f"{what} {value!r} is unknown; choose from {', '.join(choices)}")


@dataclass(frozen=True)
class ReadingOptions:
    """How to read the bathymetry raster (:func:`ttmap.io.raster.read_bathymetry`).

    Attributes
    ----------
    path : str
        Any raster GDAL reads, or a GDAL dataset name.
    band : int, optional
        1-based band; required for a multi-band raster.
    depth_positive : bool
        Values are depth (positive down), not elevation (negative below sea level).
    window : (west, south, east, north), optional
        Crop to this box before solving.
    window_crs : str or None
        CRS of ``window``: longitude/latitude degrees by default, None for the
        raster's own map units.
    coarsen : int
        Average depth over ``coarsen`` x ``coarsen`` blocks (1 = off).
    nodata : float, optional
        A fill value the file does not declare; cells equal to it are nodata.
    refine : int
        Split every cell into ``refine`` x ``refine`` cells of the same depth
        and solve on those (1 = off; products come out at the finer
        spacing). Each step costs about ``refine**2`` times the time and
        memory and makes the solve's discretisation error smaller
        (docs/reciprocal.md, "Accuracy"). Not with ``coarsen``.
    """

    path: str
    band: int | None = None
    depth_positive: bool = False
    window: tuple[float, float, float, float] | None = None
    window_crs: str | None = LONLAT_CRS
    coarsen: int = 1
    nodata: float | None = None
    refine: int = 1

    def __post_init__(self) -> None:
        object.__setattr__(self, "path", str(self.path))
        if not self.path.strip():
            raise InputDataError("bathymetry path '' is empty; give a raster file, e.g. bathy.tif")
        nd = self.nodata
        if nd is not None:
            if isinstance(nd, bool) or not isinstance(nd, (int, float)) or not math.isfinite(nd):
                raise InputDataError(f"nodata value {nd!r} is not a finite number; give e.g. -32768")
            object.__setattr__(self, "nodata", float(nd))
        if self.band is not None and not (isinstance(self.band, int) and self.band >= 1):
            raise InputDataError(f"band {self.band!r} must be a whole number from 1")
        if not (isinstance(self.coarsen, int) and self.coarsen >= 1):
            raise InputDataError(f"coarsen factor {self.coarsen!r} must be a whole number from 1")
        if not (isinstance(self.refine, int) and not isinstance(self.refine, bool) and self.refine >= 1):
            raise InputDataError(f"refine factor {self.refine!r} must be a whole number from 1")
        if self.refine > 1 and self.coarsen > 1:
            raise InputDataError(
                f"coarsen {self.coarsen} and refine {self.refine} cannot be combined; use one of them "
                "(coarsen to solve faster, refine to solve finer)"
            )
        if self.window is not None:
            object.__setattr__(self, "window", tuple(float(v) for v in self.window))

    def read(self) -> Any:
        """The bathymetry (:class:`ttmap.io.raster.Bathymetry`)."""
        from ttmap.io.raster import read_bathymetry

        return read_bathymetry(self.path, band=self.band, depth_positive=self.depth_positive,
                               window=self.window, window_crs=self.window_crs, coarsen=self.coarsen,
                               nodata=self.nodata, refine=self.refine)


@dataclass(frozen=True)
class SpeedOptions:
    """The speed model and the solve's limits.

    Attributes
    ----------
    floor_depth_m : float
        Water shallower than this is given this depth.
    far_field : bool
        Slow long waves by the far-field effective depth (off by default).
    earth : {"wgs84", "sphere"}
        Figure of the Earth for longitude/latitude rasters.
    periods_s : tuple of float
        Wave periods solved with the period speed (the map job adds one
        product set per period; the site-map job takes at most one).
    period_speed : {"group", "phase"}
        Speed used for the wave periods.
    max_time_s : float, optional
        Stop the solve at this time.
    """

    floor_depth_m: float = FLOOR_DEPTH_M
    far_field: bool = False
    earth: str = EARTH_MODEL
    periods_s: tuple[float, ...] = ()
    period_speed: str = PERIOD_SPEED
    max_time_s: float | None = None

    def __post_init__(self) -> None:
        _positive("floor depth", self.floor_depth_m, "m")
        _choice("earth model", self.earth, EARTH_MODELS)
        _choice("period speed", self.period_speed, PERIOD_SPEEDS)
        _positive("maximum time", self.max_time_s, "s")
        if self.max_time_s is not None and self.max_time_s > MAX_TIME_LIMIT_S:
            raise InputDataError(
                f"maximum time {self.max_time_s / 3600.0:g} h is longer than {MAX_TIME_LIMIT_S / 3600.0:g} h "
                "(a tsunami crosses the widest ocean in about a day); give hours, e.g. --max-time-h 24"
            )
        periods = tuple(float(p) for p in self.periods_s)
        for p in periods:
            _positive("wave period", p, "s")
            if not MIN_PERIOD_S <= p <= MAX_PERIOD_S:
                raise InputDataError(
                    f"wave period {p:g} s is outside {MIN_PERIOD_S:g}...{MAX_PERIOD_S:g} s, the range where "
                    "an energy-arrival map of long waves makes sense (shorter: wind waves that take days; "
                    "longer: tides, no different from the front); give seconds, e.g. --period-s 600"
                )
        object.__setattr__(self, "periods_s", periods)


@dataclass(frozen=True)
class ProductOptions:
    """Which product files to write, and how.

    Attributes
    ----------
    isochrone_interval_min : float, optional
        Isochrone spacing; default :func:`ttmap.products.isochrones.default_levels_min`.
    vector_formats : tuple of {"gpkg", "shp", "geojson"}
        Formats of the isochrone (and coast, site) layers.
    map_formats : tuple of {"png", "pdf"}
        Map formats; empty for no map.
    coast : bool
        Write the coastal arrival layer (map job only).
    coast_interval_min : float
        Width of the coastal arrival classes.
    report : bool
        Write ``report.html``, the run on one self-contained page.
    """

    isochrone_interval_min: float | None = None
    vector_formats: tuple[str, ...] = (VECTOR_FORMAT,)
    map_formats: tuple[str, ...] = (MAP_FORMAT,)
    coast: bool = True
    coast_interval_min: float = COAST_CLASS_INTERVAL_MIN
    report: bool = True

    def __post_init__(self) -> None:
        object.__setattr__(self, "vector_formats", tuple(self.vector_formats))
        object.__setattr__(self, "map_formats", tuple(self.map_formats))
        check_formats(self.vector_formats, self.map_formats)
        _positive("isochrone interval", self.isochrone_interval_min, "min")
        _positive("coast interval", self.coast_interval_min, "min")


@dataclass(frozen=True)
class SiteOptions:
    """Where the sites come from and the defaults of their time budget.

    Attributes
    ----------
    path : str, optional
        CSV or point vector file (:func:`ttmap.io.sites.read_sites`); None
        when the sites are given in code.
    name_field, layer, crs : str, optional
        Column of the names, layer of a multi-layer file, CRS of x,y columns.
    search_radius_m : float
        A site is read at (map job) or moved to (site-map job) the nearest
        reached open-water cell within this ground distance.
    notification_delay_min : float
        Minutes from the earthquake until the official message reaches
        people, for sites that give none (0 to 1440).
    preparation_min, walking_speed_m_s : float
        Preparation time and walking speed for sites that give none.
    speed_uncertainty : float
        Stated +/- fraction of wave speed behind the earliest/latest columns.
    little_margin_min : float
        Margins below this are flagged as little.
    origin_time_utc : datetime, optional
        Earthquake origin time (timezone-aware); adds clock-time columns.
    """

    path: str | None = None
    name_field: str | None = None
    layer: str | None = None
    crs: str | None = None
    search_radius_m: float = SITE_SEARCH_RADIUS_M
    notification_delay_min: float = NOTIFICATION_DELAY_MIN
    preparation_min: float = PREPARATION_MIN
    walking_speed_m_s: float = WALKING_SPEED_M_S
    speed_uncertainty: float = SPEED_UNCERTAINTY
    little_margin_min: float = LITTLE_MARGIN_MIN
    origin_time_utc: _dt.datetime | None = None

    def __post_init__(self) -> None:
        if self.path is not None:
            object.__setattr__(self, "path", str(self.path))
        _positive("site search radius", self.search_radius_m, "m", allow_zero=True)
        d = self.notification_delay_min
        if not (isinstance(d, (int, float)) and math.isfinite(d) and 0.0 <= d <= MAX_NOTIFICATION_DELAY_MIN):
            raise InputDataError(
                f"notification delay {d!r} min must lie in 0...{MAX_NOTIFICATION_DELAY_MIN:g} minutes; give e.g. 10"
            )
        _positive("preparation time", self.preparation_min, "min", allow_zero=True)
        _positive("walking speed", self.walking_speed_m_s, "m/s")
        _positive("little-margin threshold", self.little_margin_min, "min", allow_zero=True)
        u = self.speed_uncertainty
        if not (isinstance(u, (int, float)) and math.isfinite(u) and 0.0 <= u < 1.0):
            raise InputDataError(f"speed uncertainty {u!r} must be a fraction in 0..1 (e.g. 0.05 for 5 %)")
        t = self.origin_time_utc
        if t is not None and (t.tzinfo is None or t.utcoffset() is None):
            raise InputDataError(f"origin time {t.isoformat()} has no time zone; give it in UTC")

    def read(self) -> Any:
        """The sites of :attr:`path` (:class:`ttmap.io.sites.SiteList`)."""
        from ttmap.io.sites import read_sites

        if self.path is None:
            raise InputDataError("no site file given; give SiteOptions(path=...)")
        return read_sites(self.path, name_field=self.name_field, crs=self.crs, layer=self.layer)


def options_record(options: Any) -> dict[str, Any]:
    """An option group as a JSON-ready dict (tuples as lists, times as ISO 8601 text)."""
    out: dict[str, Any] = {}
    for f in fields(options):
        v = getattr(options, f.name)
        if isinstance(v, tuple):
            v = list(v)
        elif isinstance(v, _dt.datetime):
            v = v.isoformat()
        out[f.name] = v
    return out
