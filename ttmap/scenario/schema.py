"""Scenario files: the schema (tables, keys, units) and the parsed, validated file.

A scenario file names a bathymetry raster, the speed settings, the sources
(written out one by one, or generated as a row of ruptures along a trench),
the coastal sites and the outputs. It is read with the standard library's
:mod:`tomllib` and checked completely before any solve: every problem found
becomes one line ``FILE:LINE: KEY.PATH: what is wrong; how to fix it``, and
all lines are reported together in one :class:`ScenarioFileError`.

Schema (units are part of the key names; paths are relative to the folder of
the scenario file; ``[[scenario]]`` and ``[[trench]]`` tables and the items
of arrays are counted from 1 in messages)::

    [bathymetry]                    # required
    path = "bathy.tif"              # required; any GDAL raster
    band = 1                        # optional; required for multi-band rasters
    depth_positive = false          # true: values are depths, positive down
    crop_lonlat = [W, S, E, N]      # optional window in degrees ...
    crop_xy = [W, S, E, N]          # ... or in the raster's own map units
    coarsen = 1                     # block-average N x N cells first
    refine = 1                      # or split each cell into N x N and solve finer (not both)
    nodata = -32768                 # optional; a fill value the raster does not declare

    [[nest]]                        # optional, any number: finer rasters inside the basin
    path = "harbour.tif"            # required; any GDAL raster, any CRS (band and sign as [bathymetry])
    name = "harbour"                # optional; default from the file name; names the nest's rasters

    [speed]                         # optional
    floor_depth_m = 5.0
    far_field_correction = false    # far-field slowdown (off by default; also far_field)
    earth = "wgs84"                 # or "sphere"
    periods_s = [600]               # wave periods for energy arrivals
    period_speed = "group"          # or "phase"
    max_time_h = 6                  # default limit of every scenario (a scenario's own wins)

    [[scenario]]                    # any number
    name = "north-point"            # letters, digits, _ - . ; unique
    point = [lon, lat]              # one source form of these four:
    rupture = {centre = [lon, lat], strike_deg = 10, length_km = 120, width_km = 60}
    rupture = {centre = [lon, lat], strike_deg = 10, mw = 8.2, scaling_law = "..."}
    source_file = "area.gpkg"       # (with source_layer = "..." if it has several)
    max_time_h = 6                  # optional
    snap_radius_km = 10             # optional: move a source on land to open water

    [[trench]]                      # any number: generated rupture scenarios
    name_prefix = "arc"             # scenarios arc-01, arc-02, ...
    polyline = [[lon, lat], ...]    # where the rupture centres lie
    spacing_km = 75                 # geodesic distance between neighbouring centres
    mw = 8.0
    scaling_law = "strasser2010-interface"   # default
    max_time_h, snap_radius_km      # optional, as for [[scenario]]

    [sites]                         # optional; the sites-by-scenarios table
    path = "sites.csv"              # CSV with name, lon, lat (or a vector file of points)
    search_radius_km = 2            # read a site at reached water within this ground distance
    notification_delay_min = 10     # defaults for sites that give none ...
    preparation_min = 3
    walking_speed_m_s = 0.74
    little_margin_min = 5
    speed_uncertainty_pct = 5       # +/- wave speed behind earliest_min / latest_min
    origin_time = "2026-03-01T03:12:00Z"   # adds UTC clock times
    name_field = "name"             # column of the names
    layer = "towns"                 # layer of a multi-layer vector file
    crs = "EPSG:32759"              # CRS of x,y columns

    [products]                      # optional; the map job's product options
    isochrone_interval_min = 10
    vector_formats = ["gpkg"]       # gpkg, shp, geojson
    map_formats = ["png"]           # png, pdf; [] for none
    coast = true
    coast_interval_min = 10

    [outputs]                       # optional
    folder = "out"                  # default: <file stem>_out beside the file
    envelope = true                 # earliest arrival over all scenarios
    compare = [["a", "b"]]          # difference rasters: arrival of a minus arrival of b
    executor = "local"              # "serial", "local" or a scheduler address
    workers = 4
    table_method = "auto"           # sites x scenarios and envelope: "auto", "reciprocal", "direct"
    scenario_rasters = true         # false: no raster per scenario (table and envelope only)

The keys of ``[speed]``, ``[sites]`` and ``[products]`` are the command
line's options without the leading dashes and the ``site-``/``sites-`` prefix
(``--site-search-radius-km`` is ``search_radius_km``, ``--sites-layer`` is
``layer``, ``--vector-format`` is ``vector_formats``): :data:`OPTION_KEYS`
maps each to the field of the option group it fills (a test checks that they
match the groups of :mod:`ttmap.jobs.options` field by field).

Each ``[[nest]]`` is solved in every task from that task's basin arrival
times on the nest's edge (``docs/nesting.md``) and written beside the task's
raster as ``arrival_<task>_nest-<name>.tif``. A nest must lie inside the
basin grid (and the crop window), must not overlap another nest, must hold
water, and must not contain any scenario's source: such a file is refused,
naming the scenario (a nest is solved from the basin's times on its edge,
which cannot start a wave inside it).

The rectangles of a ``[[trench]]`` are centred on the polyline, each
``spacing_km`` (geodesic, WGS84) from the one before, as many as fit, with
what is left over split between both ends; each has its long side along the
local direction of the polyline and its size from the scaling relation
(median length and width, Strasser et al. 2010 by default; see
:mod:`ttmap.physics.scaling`).
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from ttmap.defaults import EARTH_MODEL, FLOOR_DEPTH_M, PERIOD_SPEED
from ttmap.errors import InputDataError
from ttmap.sources import Source

__all__ = [
    "NAME_PATTERN",
    "OPTION_KEYS",
    "RUPTURE_KEYS",
    "SECTION_KEYS",
    "SOURCE_FORMS",
    "TABLE_METHODS",
    "BathymetrySettings",
    "NestSettings",
    "GridInfo",
    "OutputSettings",
    "ScenarioFile",
    "ScenarioFileError",
    "ScenarioIssue",
    "ScenarioSpec",
    "SpeedSettings",
    "TrenchSpec",
]

#: Keys allowed in each top-level table (``scenario`` and ``trench`` are arrays of tables).
SECTION_KEYS: Mapping[str, tuple[str, ...]] = {
    "bathymetry": ("path", "band", "depth_positive", "crop_lonlat", "crop_xy", "coarsen", "nodata", "refine"),
    "speed": (
        "floor_depth_m", "far_field_correction", "far_field", "earth", "periods_s", "period_speed",
        "max_time_h",
    ),
    "scenario": (
        "name",
        "point",
        "rupture",
        "source_file",
        "source_layer",
        "max_time_h",
        "snap_radius_km",
    ),
    "trench": (
        "name_prefix",
        "polyline",
        "spacing_km",
        "mw",
        "scaling_law",
        "max_time_h",
        "snap_radius_km",
    ),
    "nest": ("path", "name"),
    "sites": (
        "path", "search_radius_km", "notification_delay_min", "preparation_min",
        "walking_speed_m_s", "little_margin_min", "speed_uncertainty_pct", "origin_time",
        "name_field", "layer", "crs",
    ),
    "products": (
        "isochrone_interval_min", "vector_formats", "map_formats", "coast", "coast_interval_min",
        "report",
    ),
    "outputs": (
        "folder", "compare", "envelope", "executor", "workers", "table_method", "scenario_rasters",
    ),
}
#: Values of ``[outputs] table_method`` (docs/reciprocal.md).
TABLE_METHODS: tuple[str, ...] = ("auto", "reciprocal", "direct")
#: ``[table] key`` -> (option group, field, factor): the field's value is the
#: key's value times the factor (km -> m: 1000, % -> fraction: 0.01, h -> s:
#: 3600). The option groups are those of :mod:`ttmap.jobs.options`
#: (``ReadingOptions`` is ``[bathymetry]``, with its own crop keys).
OPTION_KEYS: Mapping[tuple[str, str], tuple[str, str, float]] = {
    ("speed", "floor_depth_m"): ("SpeedOptions", "floor_depth_m", 1.0),
    ("speed", "far_field_correction"): ("SpeedOptions", "far_field", 1.0),
    ("speed", "far_field"): ("SpeedOptions", "far_field", 1.0),
    ("speed", "earth"): ("SpeedOptions", "earth", 1.0),
    ("speed", "periods_s"): ("SpeedOptions", "periods_s", 1.0),
    ("speed", "period_speed"): ("SpeedOptions", "period_speed", 1.0),
    ("speed", "max_time_h"): ("SpeedOptions", "max_time_s", 3600.0),
    ("sites", "path"): ("SiteOptions", "path", 1.0),
    ("sites", "search_radius_km"): ("SiteOptions", "search_radius_m", 1000.0),
    ("sites", "notification_delay_min"): ("SiteOptions", "notification_delay_min", 1.0),
    ("sites", "preparation_min"): ("SiteOptions", "preparation_min", 1.0),
    ("sites", "walking_speed_m_s"): ("SiteOptions", "walking_speed_m_s", 1.0),
    ("sites", "little_margin_min"): ("SiteOptions", "little_margin_min", 1.0),
    ("sites", "speed_uncertainty_pct"): ("SiteOptions", "speed_uncertainty", 0.01),
    ("sites", "origin_time"): ("SiteOptions", "origin_time_utc", 1.0),
    ("sites", "name_field"): ("SiteOptions", "name_field", 1.0),
    ("sites", "layer"): ("SiteOptions", "layer", 1.0),
    ("sites", "crs"): ("SiteOptions", "crs", 1.0),
    ("products", "isochrone_interval_min"): ("ProductOptions", "isochrone_interval_min", 1.0),
    ("products", "vector_formats"): ("ProductOptions", "vector_formats", 1.0),
    ("products", "map_formats"): ("ProductOptions", "map_formats", 1.0),
    ("products", "coast"): ("ProductOptions", "coast", 1.0),
    ("products", "coast_interval_min"): ("ProductOptions", "coast_interval_min", 1.0),
    ("products", "report"): ("ProductOptions", "report", 1.0),
}
#: Keys of a scenario's ``rupture`` table.
RUPTURE_KEYS: tuple[str, ...] = (
    "centre",
    "strike_deg",
    "length_km",
    "width_km",
    "mw",
    "scaling_law",
)
#: The ways a ``[[scenario]]`` gives its source (exactly one of them).
SOURCE_FORMS: tuple[str, ...] = ("point", "rupture", "source_file")
#: Scenario names and trench prefixes (they name output files).
NAME_PATTERN = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$")


@dataclass(frozen=True)
class ScenarioIssue:
    """One problem found in a scenario file.

    Attributes
    ----------
    file : str
        The scenario file as given.
    line : int or None
        1-based line of the key (or its table) in the file, when known.
    key : str
        Key path, e.g. ``"scenario[2].rupture.mw"`` (tables counted from 1).
    message : str
        What is wrong, the value, and the fix.
    """

    file: str
    line: int | None
    key: str
    message: str

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}" if self.line else self.file
        return f"{where}: {self.key}: {self.message}" if self.key else f"{where}: {self.message}"


class ScenarioFileError(InputDataError):
    """A scenario file has problems; ``issues`` lists them, one line each in ``str()``."""

    def __init__(self, issues: Sequence[ScenarioIssue]) -> None:
        self.issues = tuple(issues)
        super().__init__("\n".join(str(i) for i in self.issues))



@dataclass(frozen=True)
class BathymetrySettings:
    """The ``[bathymetry]`` table, with ``path`` made absolute."""

    path: str
    band: int | None = None
    depth_positive: bool = False
    crop_lonlat: tuple[float, float, float, float] | None = None
    crop_xy: tuple[float, float, float, float] | None = None
    coarsen: int = 1
    nodata: float | None = None
    refine: int = 1


@dataclass(frozen=True)
class NestSettings:
    """One ``[[nest]]`` table, with ``path`` made absolute.

    Attributes
    ----------
    name : str
        File-name safe, unique; names the nest's rasters.
    path : str
    line : int or None
        Line of the table in the file.
    """

    name: str
    path: str
    line: int | None = None


@dataclass(frozen=True)
class SpeedSettings:
    """The ``[speed]`` table."""

    floor_depth_m: float = FLOOR_DEPTH_M
    far_field: bool = False
    earth: str = EARTH_MODEL
    periods_s: tuple[float, ...] = ()
    period_speed: str = PERIOD_SPEED
    max_time_s: float | None = None


@dataclass(frozen=True)
class ScenarioSpec:
    """One scenario: a named source and its limits (SI units).

    Attributes
    ----------
    name : str
    source : Source
    origin : str
        Key path of the table it came from, e.g. ``"scenario[2]"`` or ``"trench[1]"``.
    line : int or None
        Line of that table in the file.
    max_time_s, snap_radius_m : float or None
    trench : str or None
        ``name_prefix`` of the generating ``[[trench]]``.
    """

    name: str
    source: Source
    origin: str
    line: int | None = None
    max_time_s: float | None = None
    snap_radius_m: float | None = None
    trench: str | None = None
    source_file: str | None = None

    def label_line(self) -> str:
        """One line: name, source and limits."""
        extra = []
        if self.max_time_s is not None:
            extra.append(f"max {self.max_time_s / 3600.0:g} h")
        if self.snap_radius_m is not None:
            extra.append(f"snap radius {self.snap_radius_m / 1000.0:g} km")
        label = self.source.label
        if label.startswith(f"{self.name}: "):
            label = label[len(self.name) + 2 :]
        return f"{self.name}: {label}" + (f" ({', '.join(extra)})" if extra else "")

    def describe(self) -> dict[str, Any]:
        """A JSON-ready description for the run record."""
        return {
            "name": self.name,
            "origin": self.origin,
            "line": self.line,
            "trench": self.trench,
            "max_time_s": self.max_time_s,
            "snap_radius_m": self.snap_radius_m,
            "source_file": self.source_file,
            "source": self.source.describe(),
        }


@dataclass(frozen=True)
class TrenchSpec:
    """One ``[[trench]]`` table and what it generated."""

    name_prefix: str
    polyline: tuple[tuple[float, float], ...]
    spacing_km: float
    mw: float
    scaling_law: str
    length_km: float
    width_km: float
    scenario_names: tuple[str, ...]
    polyline_length_km: float


@dataclass(frozen=True)
class OutputSettings:
    """The ``[outputs]`` table, with ``folder`` made absolute."""

    folder: str
    compare: tuple[tuple[str, str], ...] = ()
    envelope: bool = True
    executor: str | None = None
    workers: int | None = None
    #: "auto", "reciprocal" or "direct": how the sites x scenarios table and the
    #: envelope are computed (docs/reciprocal.md).
    table_method: str = "auto"
    #: Write one arrival raster per scenario (and period).
    scenario_rasters: bool = True


@dataclass(frozen=True)
class GridInfo:
    """What validation learned about the bathymetry raster (no data read)."""

    shape: tuple[int, int]
    bounds: tuple[float, float, float, float]
    crs: str
    is_geographic: bool
    band_count: int

    def bounds_text(self) -> str:
        w, s, e, n = self.bounds
        if self.is_geographic:
            return f"lon {w:g} to {e:g}, lat {s:g} to {n:g}"
        return f"x {w:g} to {e:g}, y {s:g} to {n:g} ({self.crs})"


@dataclass(frozen=True)
class ScenarioFile:
    """A validated scenario file.

    Attributes
    ----------
    path : str
        Absolute path of the TOML file.
    sha256 : str
        SHA-256 of its bytes.
    scenarios : tuple of ScenarioSpec
        Written-out scenarios first, in file order, then each trench's.
    sites_path : str or None
        Absolute path of the site file.
    site_options : dict
        The other ``[sites]`` keys given, as ``SiteOptions`` field values
        (SI; see :data:`OPTION_KEYS`).
    product_options : dict
        The ``[products]`` keys given, as ``ProductOptions`` field values.
    nests : tuple of NestSettings
        The ``[[nest]]`` tables, in file order.
    """

    path: str
    sha256: str
    bathymetry: BathymetrySettings
    speed: SpeedSettings
    scenarios: tuple[ScenarioSpec, ...]
    trenches: tuple[TrenchSpec, ...]
    sites_path: str | None
    sites_count: int | None
    outputs: OutputSettings
    grid: GridInfo
    site_options: Mapping[str, Any] = field(default_factory=dict)
    product_options: Mapping[str, Any] = field(default_factory=dict)
    nests: tuple[NestSettings, ...] = ()

    @property
    def solve_count(self) -> int:
        """Number of solves: one front and one per period for each scenario."""
        return len(self.scenarios) * (1 + len(self.speed.periods_s))

    def scenario(self, name: str) -> ScenarioSpec:
        """The scenario called ``name``."""
        for s in self.scenarios:
            if s.name == name:
                return s
        raise KeyError(name)

