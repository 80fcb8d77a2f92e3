"""What one solve needs, as plain data: the medium spec, the solve task, executor names.

Scenario files expand into :class:`SolveTask` objects sharing one
:class:`MediumSpec`; :mod:`ttmap.jobs.batch` runs them serially or on Dask.
These descriptions sit below both (no files are read here), so the scenario
layer can build tasks without importing the job that runs them.
"""

from __future__ import annotations

import dataclasses
import re
from dataclasses import dataclass, field
from typing import Any

from ttmap.defaults import EARTH_MODEL, EXECUTORS, FLOOR_DEPTH_M
from ttmap.errors import InputDataError
from ttmap.sources import Source

__all__ = ["MediumSpec", "NestSpec", "SolveTask", "check_executor"]

_ADDRESS_RE = re.compile(r"^([a-z][a-z0-9+.-]*://)?[^\s/:]+:\d{1,5}$|^[a-z][a-z0-9+.-]*://\S+$")


@dataclass(frozen=True)
class MediumSpec:
    """How to build the speed field, identically on every worker.

    Attributes
    ----------
    bathymetry : str
        Path of the raster (every worker must be able to read it).
    band, depth_positive, window, window_crs, coarsen, nodata, refine
        Passed to :func:`ttmap.io.raster.read_bathymetry` (all of them:
        :meth:`reading_kwargs`).
    floor_depth_m, far_field, earth
        Passed to :func:`ttmap.traveltime.prepare_medium`.
    """

    bathymetry: str
    band: int | None = None
    depth_positive: bool = False
    window: tuple[float, float, float, float] | None = None
    window_crs: str | None = "EPSG:4326"
    coarsen: int = 1
    nodata: float | None = None
    refine: int = 1
    floor_depth_m: float = FLOOR_DEPTH_M
    far_field: bool = False
    earth: str = EARTH_MODEL

    def __post_init__(self) -> None:
        # A list window (from TOML or JSON) would make the spec unhashable.
        if self.window is not None:
            try:
                window = tuple(float(v) for v in self.window)
            except (TypeError, ValueError) as err:
                raise InputDataError(
                    f"window {self.window!r} is not four numbers; give (west, south, east, north)"
                ) from err
            object.__setattr__(self, "window", window)

    def reading_kwargs(self) -> dict[str, Any]:
        """Keyword arguments of :func:`ttmap.io.raster.read_bathymetry` for this spec (all but the path)."""
        return {"band": self.band, "depth_positive": self.depth_positive, "window": self.window,
                "window_crs": self.window_crs, "coarsen": self.coarsen, "nodata": self.nodata,
                "refine": self.refine}

    def describe(self) -> dict[str, Any]:
        """JSON-ready dictionary of the fields."""
        d = dataclasses.asdict(self)
        d["window"] = None if self.window is None else list(self.window)
        return d


@dataclass(frozen=True)
class NestSpec:
    """One nest of a batch run: a finer raster inside the basin, solved after each task.

    Every task of the run solves each nest from its basin field (the nest's
    edge times, :func:`ttmap.nesting.solve_nest`) and writes
    ``arrival_<task>_nest-<name>.tif`` beside its own raster. The nest raster
    is read with the medium's band and sign convention (no crop, no coarsening).

    Attributes
    ----------
    name : str
        File-name safe; names the nest's rasters.
    path : str
        The nest raster (every worker must be able to read it).
    """

    name: str
    path: str

    def describe(self) -> dict[str, Any]:
        """JSON-ready dictionary of the fields."""
        return {"name": self.name, "path": self.path}


@dataclass(frozen=True)
class SolveTask:
    """One solve.

    Attributes
    ----------
    name : str
        Unique within a run; letters, digits, ``_``, ``-`` and ``.`` only
        (it names the output files).
    source : Source
    mode : {"long-wave", "group", "phase"}
    period_s : float or None
    max_time_s, snap_radius_m : float or None
    kind : str
        "scenario" or "site" (site-centred map), for reports.
    meta : dict
        Free JSON-ready details carried into the summary (scenario name, ...).
    """

    name: str
    source: Source
    mode: str = "long-wave"
    period_s: float | None = None
    max_time_s: float | None = None
    snap_radius_m: float | None = None
    kind: str = "scenario"
    meta: dict[str, Any] = field(default_factory=dict)

    def describe(self) -> dict[str, Any]:
        """JSON-ready description (what the task's record calls its inputs)."""
        source = dict(self.source.describe())
        source["geometry_wkt"] = self.source.geometry.wkt
        return {
            "name": self.name,
            "kind": self.kind,
            "mode": self.mode,
            "period_s": self.period_s,
            "max_time_s": self.max_time_s,
            "snap_radius_m": self.snap_radius_m,
            "source": source,
            "meta": self.meta,
        }


def check_executor(value: Any) -> str | None:
    """None if ``value`` names an executor, else the reason and the fix.

    Examples
    --------
    >>> check_executor("local") is None, check_executor("tcp://127.0.0.1:8786") is None
    (True, True)
    >>> check_executor("paralel")
    "executor 'paralel' is neither 'serial', 'local' nor a scheduler address such as 'tcp://10.0.0.5:8786'"
    """
    if isinstance(value, str) and (value in EXECUTORS or _ADDRESS_RE.match(value)):
        return None
    return (
        f"executor {value!r} is neither 'serial', 'local' nor a scheduler address such as "
        "'tcp://10.0.0.5:8786'"
    )
