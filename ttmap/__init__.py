"""ttmap: tsunami and long-wave travel-time maps from bathymetry.

A planning aid only, not a warning: official warning centres and local
emergency management decide. ttmap computes arrival times, not wave heights
or flooding.

The engine in one call::

    import ttmap
    result = ttmap.compute_travel_time(depth_m, grid, ttmap.Source.point(-147.0, -34.5))
    result.arrival_time_s      # float64 seconds, NaN on land and unreached cells
    result.summary             # cells reached, unreached, joins opened, ...

A whole job, files in and products out::

    job = ttmap.MapJob(ttmap.ReadingOptions("bathy.tif"), ttmap.Source.point(-147.0, -34.5), "out",
                       speed=ttmap.SpeedOptions(periods_s=(600.0,)))
    result = ttmap.run_map_job(job)     # a MapJobResult: out_dir, record_path, products, ...

Names are loaded on first use (PEP 562), so ``import ttmap`` stays light.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from ttmap.errors import (
    GridError,
    InputDataError,
    OutputExistsError,
    SolverError,
    SourceError,
    TtmapError,
    TtmapWarning,
)

__version__ = "0.1.0"

#: Public name -> module that defines it (imported on first use).
_LAZY: dict[str, str] = {
    "Grid": "ttmap.grid",
    "Source": "ttmap.sources",
    "Medium": "ttmap.traveltime",
    "TravelTimeResult": "ttmap.traveltime",
    "TravelTimeSummary": "ttmap.traveltime",
    "compute_travel_time": "ttmap.traveltime",
    "prepare_medium": "ttmap.traveltime",
    "read_bathymetry": "ttmap.io.raster",
    "read_sites": "ttmap.io.sites",
    "ReadingOptions": "ttmap.jobs.options",
    "SpeedOptions": "ttmap.jobs.options",
    "ProductOptions": "ttmap.jobs.options",
    "SiteOptions": "ttmap.jobs.options",
    "MapJob": "ttmap.jobs.map",
    "MapJobResult": "ttmap.jobs.map",
    "run_map_job": "ttmap.jobs.map",
    "SiteMapJob": "ttmap.jobs.sitemap",
    "SiteMapJobResult": "ttmap.jobs.sitemap",
    "run_site_map_job": "ttmap.jobs.sitemap",
    "validate_run_record": "ttmap.jobs.record",
}

__all__ = [
    "__version__",
    "Grid",
    "Source",
    "Medium",
    "TravelTimeResult",
    "TravelTimeSummary",
    "compute_travel_time",
    "prepare_medium",
    "read_bathymetry",
    "read_sites",
    "ReadingOptions",
    "SpeedOptions",
    "ProductOptions",
    "SiteOptions",
    "MapJob",
    "MapJobResult",
    "run_map_job",
    "SiteMapJob",
    "SiteMapJobResult",
    "run_site_map_job",
    "validate_run_record",
    "TtmapError",
    "InputDataError",
    "GridError",
    "SourceError",
    "SolverError",
    "OutputExistsError",
    "TtmapWarning",
]

if TYPE_CHECKING:
    from ttmap.grid import Grid
    from ttmap.io.raster import read_bathymetry
    from ttmap.io.sites import read_sites
    from ttmap.jobs.map import MapJob, MapJobResult, run_map_job
    from ttmap.jobs.options import ProductOptions, ReadingOptions, SiteOptions, SpeedOptions
    from ttmap.jobs.record import validate_run_record
    from ttmap.jobs.sitemap import SiteMapJob, SiteMapJobResult, run_site_map_job
    from ttmap.sources import Source
    from ttmap.traveltime import Medium, TravelTimeResult, TravelTimeSummary, compute_travel_time, prepare_medium


def __getattr__(name: str) -> Any:
    module = _LAZY.get(name)
    if module is None:
        raise AttributeError(f"module 'ttmap' has no attribute {name!r}")
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
