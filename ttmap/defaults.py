"""Every default of ttmap, defined once, with its unit in its name.

The command line, the job options, the scenario-file schema, the engine and
the products all take their defaults from here. The module imports nothing, so
it is cheap to load (``ttmap --help`` reads it) and sits below every layer.

Where a value comes from (a published source, common practice) is said beside
it; the physics behind each is in ``docs/method.md`` and the sources in
``docs/references.md``.
"""

from __future__ import annotations

__all__ = [
    "MIN_PERIOD_S",
    "MAX_PERIOD_S",
    "MAX_TIME_LIMIT_S",
    "STALE_STAGING_AGE_S",
    "FLOOR_DEPTH_M",
    "SCALING_RELATION",
    "MIN_BASIN_SHARE",
    "MAX_PROJECTION_ANISOTROPY_ERROR",
    "MEMORY_SHARE",
    "SITE_SEARCH_RADIUS_M",
    "SPEED_UNCERTAINTY",
    "WALKING_SPEED_M_S",
    "PREPARATION_MIN",
    "NOTIFICATION_DELAY_MIN",
    "MAX_NOTIFICATION_DELAY_MIN",
    "LITTLE_MARGIN_MIN",
    "ENVELOPE_TIE_TOLERANCE_MIN",
    "COAST_CLASS_INTERVAL_MIN",
    "VECTOR_FORMATS",
    "VECTOR_FORMAT",
    "MAP_FORMATS",
    "MAP_FORMAT",
    "SITE_CSV_SUFFIXES",
    "EXECUTORS",
    "CONNECT_TIMEOUT_S",
    "MEDIA_PER_WORKER",
    "EARTH_MODELS",
    "EARTH_MODEL",
    "PERIOD_SPEEDS",
    "PERIOD_SPEED",
    "MAX_TRENCH_RUPTURES",
]

# --- engine -------------------------------------------------------------------

#: Water shallower than this is raised to it so the front can reach the coast,
#: metres (common practice, no source; see docs/method.md, "Floor depth").
FLOOR_DEPTH_M: float = 5.0

#: Key of the magnitude-to-rupture-size relation used when none is given
#: (Strasser et al. 2010, subduction interface; docs/references.md).
SCALING_RELATION: str = "strasser2010-interface"

#: A water body holding less than this share of the grid's water, and not the
#: largest one, is a closed basin: sources may not start there.
MIN_BASIN_SHARE: float = 0.01

#: A projected grid is solved in map units with the local scale of its CRS
#: (ttmap.grid.projection_scale). Where the CRS is not conformal, an isotropic
#: solve with the local mean scale is off by at most sqrt(a/b) - 1 (a, b the
#: principal scales): accepted up to this fraction, refused beyond it. 0.5 %
#: admits Web Mercator everywhere (spherical formulas on the WGS84 ellipsoid,
#: at most 0.34 % at the equator) and refuses any visible shape distortion
#: (angular distortion above about 0.6 degrees); see docs/projections.md.
MAX_PROJECTION_ANISOTROPY_ERROR: float = 0.005

#: Earth models for geographic grids; the first is the default.
EARTH_MODELS: tuple[str, ...] = ("wgs84", "sphere")
EARTH_MODEL: str = EARTH_MODELS[0]

#: Speeds a wave period can be mapped with; the first is the default.
PERIOD_SPEEDS: tuple[str, ...] = ("group", "phase")
PERIOD_SPEED: str = PERIOD_SPEEDS[0]

#: Share of the machine's memory one run may plan to use.
MEMORY_SHARE: float = 0.6

# --- sites and the warning-time budget ------------------------------------------

#: Search radius for moving a site to the nearest reached water cell, metres
#: (common practice, no source): sites sit on the coast, the grid's water may
#: start a cell or two offshore.
SITE_SEARCH_RADIUS_M: float = 2000.0

#: Stated +/- fraction of wave speed behind the earliest/latest arrival window
#: (common practice, no source). Margins count from the earliest arrival.
SPEED_UNCERTAINTY: float = 0.05

#: Walking speed, m/s: mean observed evacuation speed in 2011 (MLIT survey,
#: reported secondarily; docs/references.md). The 2002 guideline assumed 1.0 m/s.
WALKING_SPEED_M_S: float = 0.74

#: Preparation (departure) delay, minutes: the worked example of the Japanese
#: guideline budget formula (docs/references.md).
PREPARATION_MIN: float = 3.0

#: Delay until an official message reaches people, minutes: international
#: warning centres "can often" message within 10 minutes (IOC/ITIC glossary);
#: local delays can be longer.
NOTIFICATION_DELAY_MIN: float = 10.0

#: Largest notification delay accepted, minutes (one day).
MAX_NOTIFICATION_DELAY_MIN: float = 1440.0

#: Margins below this many minutes are flagged as little (common practice, no source).
LITTLE_MARGIN_MIN: float = 5.0

#: Scenarios whose fronts reach a cell within this many minutes of the earliest
#: form a tie class in the envelope's first-scenario raster (not a winner picked
#: by numerical noise, which paints stripes where two sources overlap).
ENVELOPE_TIE_TOLERANCE_MIN: float = 0.5

#: Width of an arrival class along the coast, minutes.
COAST_CLASS_INTERVAL_MIN: float = 5.0

# --- outputs -------------------------------------------------------------------

#: Vector formats and their file suffixes; the first is the default.
VECTOR_FORMATS: dict[str, str] = {"gpkg": ".gpkg", "shp": ".shp", "geojson": ".geojson"}
VECTOR_FORMAT: str = "gpkg"

#: Map (figure) formats; the first is the default.
MAP_FORMATS: tuple[str, ...] = ("png", "pdf")
MAP_FORMAT: str = MAP_FORMATS[0]

#: Suffixes read as delimited-text site files.
SITE_CSV_SUFFIXES: tuple[str, ...] = (".csv", ".txt")

# --- many solves ----------------------------------------------------------------

#: Executor names besides a scheduler address; the first is the default.
EXECUTORS: tuple[str, ...] = ("serial", "local")

#: Seconds to wait for a scheduler given by address.
CONNECT_TIMEOUT_S: float = 20.0

#: Prepared media a worker keeps at once (each is several grid-sized arrays).
MEDIA_PER_WORKER: int = 1

#: Most ruptures one trench line of a scenario file may generate.
MAX_TRENCH_RUPTURES: int = 99

#: Shortest wave period accepted, s. Below about 10 s the waves are wind sea
#: and swell, not long waves: their deep-water group speed g T / (4 pi) is
#: under 8 m/s, so "arrival" maps take days and say nothing about a tsunami.
#: (Tsunami periods run from minutes to about an hour: common practice, no source.)
MIN_PERIOD_S: float = 10.0
#: Longest wave period accepted, s (3 h). Beyond it the wave is tidal: its
#: group speed equals the long-wave speed almost everywhere, so a period set
#: would only repeat the front.
MAX_PERIOD_S: float = 10_800.0
#: Longest solve time accepted, s (7 days). A tsunami crosses the widest
#: ocean in about a day (from memory); a longer limit is a slip of the unit.
MAX_TIME_LIMIT_S: float = 7 * 86_400.0
#: A ttmap staging folder (``.ttmap-staging-<pid>-<hex>``) whose process still
#: runs is left alone unless it is older than this (seconds): a process id
#: can be reused after a restart.
STALE_STAGING_AGE_S: float = 7 * 24 * 3600.0
