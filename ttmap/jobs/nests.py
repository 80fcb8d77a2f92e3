"""The nest part of the map job: finer coastal grids inside the basin grid, and wave paths.

A *nest* is a finer raster of a stretch of coast, in any CRS, lying inside
the basin raster (``ttmap map --nest FILE``, ``MapJob(nests=...)``). For each
product set the map job solves the basin, then every nest from the basin's
arrival times on the nest's edge, on the nest's own grid and depths with the
same speed model (:func:`ttmap.nesting.solve_nest`; method in
``docs/nesting.md``). This module does the job's side of it:

- :func:`read_nests` reads each nest with the basin's reading options (band and
  sign convention; the crop window and coarsening apply to the basin only);
- :func:`check_nest_layout` refuses, before any solve, a nest outside the
  basin grid, two overlapping nests, a nest without water and a nest that
  contains the source, each with a one-line message;
- :func:`solve_nests` solves them for one product set;
- :func:`nested_site_table` reads each site on the finest grid covering it
  (snapped and read on the nest's grid for a site inside a nest), with a
  ``grid`` column naming that grid;
- :func:`trace_routes` traces the first wave's route to each site: on the
  nest's field back to the nest's edge, then on the basin's field from there
  to the source, joined in the basin's CRS;
- :func:`nests_record` is the run record's ``nests`` block;
  :func:`scenario_nests_record` that of a scenario run (``[[nest]]`` tables,
  solved per task by :func:`ttmap.jobs.batch.run_tasks`).

Products per nest are the product set's own files under the key
:func:`ttmap.jobs.plan.nest_set_key` (``arrival_front_nest-<name>.tif``,
``isochrones_front_nest-<name>.gpkg``, ``coast_...``, ``map_...``), each on
the nest's own grid and CRS: the vector layers are kept per nest, in separate
files, so every layer stays in its grid's native CRS.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from ttmap.errors import InputDataError
from ttmap.jobs.options import ReadingOptions
from ttmap.jobs.plan import site_file_stem

if TYPE_CHECKING:
    from ttmap.grid import Grid
    from ttmap.io.sites import SiteList
    from ttmap.nesting import NestResult
    from ttmap.products.paths import RoutePath
    from ttmap.products.sites import SiteTable
    from ttmap.sources import Source
    from ttmap.traveltime import TravelTimeResult

__all__ = [
    "BASIN_GRID",
    "NestInput",
    "nest_name",
    "read_nests",
    "check_nest_layout",
    "solve_nests",
    "as_travel_time",
    "grid_of_sites",
    "nested_site_table",
    "trace_routes",
    "nests_record",
    "scenario_nests_record",
    "SCENARIO_NESTS_NOTE",
    "VECTORS_NOTE",
]

#: Name of the basin grid in the site table's ``grid`` column and the path layer.
BASIN_GRID: str = "basin"
#: How the nests' vector products are kept (stored in the run record).
VECTORS_NOTE: str = (
    "per nest: isochrones and coastal layer of each nest in their own files "
    "(isochrones_<set>_nest-<name>, coast_<set>_nest-<name>) in the nest's CRS; the basin's files "
    "are unchanged (they still cover the nests' area at the basin's resolution)"
)


#: What a scenario run does with its nests (stored in the run record).
SCENARIO_NESTS_NOTE: str = (
    "every task (each scenario's front and periods) solves each nest from its basin arrival times on "
    "the nest's edge and writes arrival_<task>_nest-<name>.tif beside its raster, before its task "
    "record; the envelope and the differences are on the basin grid; the sites x scenarios table "
    "(direct path) reads each site inside a nest on the nest's grid from the nest's rasters, with "
    "the grid and basin_front_min columns of the map job's site table"
)


@dataclass(frozen=True)
class NestInput:
    """One nest raster as read.

    Attributes
    ----------
    name : str
        From the file name (file-name-safe), used in product names.
    path : str
    bathymetry : ttmap.io.raster.Bathymetry
    """

    name: str
    path: str
    bathymetry: Any

    @property
    def grid(self) -> Grid:
        grid: Grid = self.bathymetry.grid
        return grid


def nest_name(path: str) -> str:
    """The nest's name: its file name without suffix, made file-name safe.

    >>> nest_name("/data/Harbour fine.tif")
    'Harbour_fine'
    """
    return site_file_stem(Path(path).stem)


def read_nests(paths: Sequence[str], reading: ReadingOptions) -> list[NestInput]:
    """Read every nest raster with the basin's band and sign convention.

    Raises
    ------
    InputDataError
        Two nests with the same name, or a raster that cannot be read.
    """
    names = [nest_name(p) for p in paths]
    for n in set(names):
        if names.count(n) > 1:
            raise InputDataError(
                f"two nests are named {n!r} (from their file names); rename one of the rasters"
            )
    out = []
    for name, path in zip(names, paths, strict=True):
        opts = ReadingOptions(str(path), band=reading.band, depth_positive=reading.depth_positive)
        out.append(NestInput(name, str(path), opts.read()))
    return out


def check_nest_layout(basin_grid: Grid, nests: Sequence[NestInput], source: Source) -> None:
    """Refuse a bad nest layout before any solve.

    Raises
    ------
    GridError
        A nest reaches outside the basin grid, or two nests overlap.
    InputDataError
        A nest has no water, or contains the source.
    """
    from ttmap.nesting import check_nests, nest_footprint

    check_nests(basin_grid, {n.name: n.grid for n in nests})
    src = source.in_crs(basin_grid.crs)
    for n in nests:
        with np.errstate(invalid="ignore"):
            if not bool((np.asarray(n.bathymetry.depth_m) > 0.0).any()):
                raise InputDataError(
                    f"nest {n.name!r} ({n.path}) has no water (every cell is land or nodata); check "
                    "its sign convention (--depth-positive) or its extent"
                )
        if nest_footprint(n.grid, basin_grid).intersects(src):
            raise InputDataError(
                f"nest {n.name!r} ({n.path}) contains the source; a nest is solved from the basin's "
                "times on its edge: use a nest that leaves the source outside, or solve the nest "
                "raster on its own as the bathymetry"
            )


def solve_nests(basin: TravelTimeResult, nests: Sequence[NestInput], *, mode: str, period_s: float | None,
                speed: Any) -> dict[str, NestResult]:
    """Solve every nest of one product set from the basin solve ``basin``.

    ``speed`` is the job's :class:`~ttmap.jobs.options.SpeedOptions`.
    """
    from ttmap.nesting import solve_nest

    out: dict[str, NestResult] = {}
    for n in nests:
        out[n.name] = solve_nest(
            basin.grid, basin.arrival_time_s, n.grid, n.bathymetry.depth_m, name=n.name,
            mode=mode, period_s=period_s, floor_depth_m=speed.floor_depth_m, far_field=speed.far_field,
            earth=speed.earth, max_time_s=speed.max_time_s,
        )
    return out


def as_travel_time(basin: TravelTimeResult, nest: NestResult) -> TravelTimeResult:
    """The nest's arrival field as a TravelTimeResult (the basin's source, settings and summary)."""
    return replace(basin, arrival_time_s=nest.arrival_time_s, grid=nest.grid)


def grid_of_sites(sites: SiteList, nest_grids: Mapping[str, Grid]) -> list[str]:
    """The finest grid covering each site: a nest's name, or :data:`BASIN_GRID`.

    Nests do not overlap (checked up-front), so at most one nest covers a site.
    """
    where = [BASIN_GRID] * len(sites)
    for name, g in nest_grids.items():
        xs, ys = sites.positions_in(g.crs)
        for i, (x, y) in enumerate(zip(xs, ys, strict=True)):
            if math.isfinite(x) and math.isfinite(y) and bool(g.contains(x, y)):
                where[i] = name
    return where


def _subset(sites: SiteList, idx: Sequence[int]) -> SiteList:
    from ttmap.io.sites import SiteList

    return SiteList(tuple(sites.sites[i] for i in idx), sites.crs, sites.path)


def nested_site_table(
    sites: SiteList,
    basin_front: TravelTimeResult,
    basin_periods: Mapping[float, TravelTimeResult],
    basin_depth_m: Any,
    nest_fronts: Mapping[str, NestResult],
    nest_periods: Mapping[str, Mapping[float, NestResult]],
    *,
    search_radius_m: float,
    basin_water: tuple[Any, Any] | None = None,
    **table_options: Any,
) -> SiteTable:
    """The site table with each site read on the finest grid covering it.

    ``basin_water`` is the basin medium's ``(water, open_water)``, for the same
    snapping status words as a run without nests.

    Builds :func:`ttmap.products.sites.site_table` per grid (the basin and each
    nest, each site snapped on its own grid) and merges the rows in the site
    file's order, adding after ``status`` a ``grid`` column (the grid read)
    and ``basin_front_min``, the front as the basin grid alone gives it (for
    comparison: equal to ``front_min`` for a site outside the nests).
    """
    from ttmap.products.sites import SiteTable, site_table, snap_sites

    where = grid_of_sites(sites, {k: v.grid for k, v in nest_fronts.items()})
    parts: list[tuple[list[int], SiteTable]] = []
    for gname in [BASIN_GRID, *nest_fronts]:
        idx = [i for i, w in enumerate(where) if w == gname]
        if not idx:
            continue
        sub = _subset(sites, idx)
        if gname == BASIN_GRID:
            front, periods, depth = basin_front, dict(basin_periods), basin_depth_m
            water: dict[str, Any] = ({} if basin_water is None
                                     else {"water": basin_water[0], "open_water": basin_water[1]})
        else:
            nest = nest_fronts[gname]
            front = as_travel_time(basin_front, nest)
            periods = {p: as_travel_time(basin_periods[p], r)
                       for p, r in nest_periods.get(gname, {}).items() if p in basin_periods}
            depth = nest.medium.depth_m
            water = {"water": nest.medium.water, "open_water": nest.medium.open_water}
        snapped = snap_sites(sub, front.grid, front, search_radius_m=search_radius_m, depth_m=depth, **water)
        parts.append((idx, site_table(sub, snapped, front, periods, **table_options)))
    basin_masks = {} if basin_water is None else {"water": basin_water[0], "open_water": basin_water[1]}
    basin_only = site_table(sites, snap_sites(sites, basin_front.grid, basin_front, search_radius_m=search_radius_m,
                                              depth_m=basin_depth_m, **basin_masks), basin_front, {}, **table_options)
    first = parts[0][1]
    order = {i: (k, j) for k, (idx, _) in enumerate(parts) for j, i in enumerate(idx)}
    columns: dict[str, list[Any]] = {}
    for key in first.columns:
        columns[key] = [parts[order[i][0]][1].columns[key][order[i][1]] for i in range(len(sites))]
        if key == "status":
            columns["grid"] = list(where)
            columns["basin_front_min"] = list(basin_only.columns["front_min"])
    decimals = dict(first.decimals)
    if "front_min" in decimals:
        decimals["basin_front_min"] = decimals["front_min"]
    return SiteTable(columns, first.comments, decimals, first.periods_s, dict(first.settings))


def _snap_on(sites: SiteList, result: TravelTimeResult, depth: Any, radius_m: float) -> list[Any]:
    from ttmap.products.sites import snap_sites

    return snap_sites(sites, result.grid, result, search_radius_m=radius_m, depth_m=depth)


def trace_routes(
    points: SiteList,
    basin_front: TravelTimeResult,
    nest_fronts: Mapping[str, NestResult],
    *,
    earth: str,
    search_radius_m: float,
    basin_speed_m_s: Any = None,
) -> list[RoutePath]:
    """The first wave's route to each point, in the basin's CRS, source end first.

    With ``basin_speed_m_s`` (the basin medium's speed on its native grid) each
    route is bent to the least travel time through the speeds (Fermat's
    principle; :func:`ttmap.paths.trace_wave_paths`), as nest routes are with
    their nest's speeds: a route along a shelf edge then follows the head wave.

    Each point is snapped to reached water on the finest grid covering it (as
    the site table does). Inside a nest the route is traced on the nest's field
    to the nest's edge, then continued on the basin's field from there (the
    two lines joined where the nest's part starts); elsewhere on the basin's
    field alone. Points without reached water within the search radius get no
    route.
    """
    from pyproj import Transformer

    from ttmap.paths import trace_wave_paths
    from ttmap.products.paths import RoutePath

    basin_grid = basin_front.grid
    where = grid_of_sites(points, {k: v.grid for k, v in nest_fronts.items()})
    routes: list[RoutePath | None] = [None] * len(points)
    # nested points first: their nest part, then the basin part from its source end
    starts: dict[int, tuple[float, float]] = {}
    nest_parts: dict[int, tuple[np.ndarray, np.ndarray, str]] = {}
    for gname, nest in nest_fronts.items():
        idx = [i for i, w in enumerate(where) if w == gname]
        if not idx:
            continue
        res = as_travel_time(basin_front, nest)
        snapped = _snap_on(_subset(points, idx), res, nest.medium.depth_m, search_radius_m)
        ok = [(i, s) for i, s in zip(idx, snapped, strict=True) if s.row >= 0]
        if not ok:
            continue
        paths = trace_wave_paths(nest.grid, nest.arrival_time_s, [s.x for _, s in ok], [s.y for _, s in ok],
                                 earth=earth, speed_m_s=nest.medium.speed_m_s)  # type: ignore[arg-type]
        tr = Transformer.from_crs(nest.grid.crs, basin_grid.crs, always_xy=True)
        for (i, _), p in zip(ok, paths, strict=True):
            if p.line is None:
                continue
            xy = np.asarray(p.line.coords, dtype=np.float64)
            bx, by = tr.transform(xy[:, 0], xy[:, 1])
            bxy = np.column_stack([np.asarray(bx, dtype=np.float64), np.asarray(by, dtype=np.float64)])
            if basin_grid.is_geographic:
                left = basin_grid.bounds[0]
                bxy[:, 0] = left + np.mod(bxy[:, 0] - left, 360.0)
            nest_parts[i] = (bxy, p.time_min, gname)
            starts[i] = (float(bxy[0, 0]), float(bxy[0, 1]))
    basin_idx = [i for i, w in enumerate(where) if w == BASIN_GRID]
    bx_list: list[float] = []
    by_list: list[float] = []
    owners: list[int] = []
    if basin_idx:
        snapped = _snap_on(_subset(points, basin_idx), basin_front, None, search_radius_m)
        for i, s in zip(basin_idx, snapped, strict=True):
            if s.row >= 0:
                owners.append(i)
                bx_list.append(s.x)
                by_list.append(s.y)
    for i, (x, y) in starts.items():
        owners.append(i)
        bx_list.append(x)
        by_list.append(y)
    basin_paths = trace_wave_paths(basin_grid, basin_front.arrival_time_s, bx_list, by_list,
                                   earth=earth,  # type: ignore[arg-type]
                                   speed_m_s=basin_speed_m_s) if owners else []
    for i, p in zip(owners, basin_paths, strict=True):
        name = points.names[i]
        b_xy = np.asarray(p.line.coords, dtype=np.float64) if p.line is not None else np.zeros((0, 2))
        b_t = p.time_min if p.line is not None else np.zeros(0)
        if i in nest_parts:
            n_xy, n_t, gname = nest_parts[i]
            keep = b_t < n_t[0]  # the basin part up to where the nest's part starts
            xy = np.concatenate([b_xy[keep], n_xy])
            t = np.concatenate([b_t[keep], n_t])
            grids = (BASIN_GRID,) * int(keep.sum()) + (gname,) * n_t.size
            end = p.end if p.line is not None else "no-time"
        else:
            if p.line is None:
                continue
            xy, t, grids, end = b_xy, b_t, (BASIN_GRID,) * b_t.size, p.end
        routes[i] = RoutePath(name, xy, t, grids, end)
    return [r for r in routes if r is not None]


def nests_record(nests: Sequence[NestInput], summaries: Mapping[str, Mapping[str, Any]]) -> list[dict[str, Any]]:
    """The run record's ``nests`` block: per nest its file, grid and per-set solve summary.

    ``summaries`` maps product-set key -> nest name -> ``NestSummary.as_dict()``.
    """
    from ttmap.jobs.record import grid_entry

    out = []
    for n in nests:
        per_set = {key: dict(s[n.name]) for key, s in summaries.items() if n.name in s}
        for s in per_set.values():
            s["boundary_time_min_range"] = [round(s["boundary_time_min_s"] / 60.0, 3),
                                            round(s["boundary_time_max_s"] / 60.0, 3)]
        out.append({
            "name": n.name,
            "path": str(Path(n.path).resolve()) if Path(n.path).exists() else n.path,
            "sha256": n.bathymetry.sha256,
            "band": n.bathymetry.band,
            "notes": list(n.bathymetry.notes),
            "grid": grid_entry(n.grid),
            "summary": per_set,
            "vectors": VECTORS_NOTE,
        })
    return out


def scenario_nests_record(sf: Any, summaries: Sequence[Any], table_method: str) -> list[dict[str, Any]]:
    """The ``nests`` block of a scenario run's record.

    Parameters
    ----------
    sf : ttmap.scenario.ScenarioFile
    summaries : sequence of ttmap.jobs.batch.TaskSummary
    table_method : str
        The run's table method ("direct" or "reciprocal").

    Returns
    -------
    list of dict
        Per nest: name, file, SHA-256, grid, the file's line, per task its
        raster and solve summary, and :data:`SCENARIO_NESTS_NOTE`.
    """
    from ttmap.io.header import read_bathymetry_header
    from ttmap.io.raster import file_sha256
    from ttmap.jobs.record import grid_entry

    out = []
    for n in sf.nests:
        rasters = {s.name: Path(s.nests[n.name]).name for s in summaries if s.ok and n.name in s.nests}
        per_task = {s.name: s.summary["nests"][n.name] for s in summaries
                    if s.ok and isinstance(s.summary.get("nests"), Mapping) and n.name in s.summary["nests"]}
        out.append({
            "name": n.name,
            "path": n.path,
            "sha256": file_sha256(n.path) if Path(n.path).is_file() else None,
            "line": n.line,
            "grid": grid_entry(read_bathymetry_header(n.path).grid),
            "rasters": rasters,
            "summary": per_task,
            "method": SCENARIO_NESTS_NOTE,
            "table_method": table_method,
            **({"table_note": "the reciprocal table and envelope ignore the nests"}
               if table_method == "reciprocal" else {}),
        })
    return out
