"""ttmap: tsunami and long-wave travel-time maps from bathymetry.

A planning aid only, not a warning: official warning centres and local
emergency management decide. ttmap computes arrival times, not wave heights
or flooding.

The engine in one call::

    import ttmap
    result = ttmap.compute_travel_time(depth_m, grid, ttmap.Source.point(-147.0, -34.5))
    result.arrival_time_s      # float64 seconds, NaN on land and unreached cells
    result.summary             # cells reached, unreached, joins opened, ...
"""

from __future__ import annotations

from ttmap.errors import (
    GridError,
    InputDataError,
    OutputExistsError,
    SolverError,
    SourceError,
    TtmapError,
    TtmapWarning,
)
from ttmap.grid import Grid
from ttmap.sources import Source
from ttmap.traveltime import (
    Medium,
    TravelTimeResult,
    TravelTimeSummary,
    compute_travel_time,
    prepare_medium,
)

__version__ = "0.1.0"

__all__ = [
    "__version__",
    "Grid",
    "Source",
    "Medium",
    "TravelTimeResult",
    "TravelTimeSummary",
    "compute_travel_time",
    "prepare_medium",
    "TtmapError",
    "InputDataError",
    "GridError",
    "SourceError",
    "SolverError",
    "OutputExistsError",
    "TtmapWarning",
]
