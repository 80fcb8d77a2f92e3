"""The map job: bathymetry file in, GIS products and a run record out.

:func:`run_map_job` reads the bathymetry, solves the front (long-wave speed)
and, for each requested wave period, the energy arrival (group speed, or phase
speed on request), and writes for each such *product set* (names from
:func:`ttmap.jobs.plan.product_set_names`):

- ``arrival_<set>.tif``: arrival time in minutes (float32 GeoTIFF) and its
  SLD style ``arrival_<set>.sld``;
- ``isochrones_<set>.gpkg`` (or .shp / .geojson files): layers
  ``isochrone_lines`` and ``isochrone_bands``, with SLD styles beside them
  (Shapefile bands get ``isochrones_<set>_bands_shp.sld``, which filters
  on the 10-character field name ``min_minute``);
- ``map_<set>.png`` (and .pdf on request), with the sites drawn when given;
- ``coast_<set>.gpkg`` (or .shp / .geojson): the coastal arrival layer, the
  grid's coastline as stretches carrying first-arrival minutes (see
  :mod:`ttmap.products.coast`), styled by ``coast_<set>.sld`` (on by default);

with sites (``MapJob.sites``), once for the run:

- ``sites.csv``: the site table (see :mod:`ttmap.products.sites`), the
  caution on its first line; ``sites.gpkg`` (layer ``sites``) and, when
  GeoJSON is among the vector formats, ``sites.geojson``;
- ``timeline.png`` (and .pdf when PDF is among the map formats): the time
  budget of every site against the wave's arrival;

with nests (``MapJob.nests``, finer rasters inside the basin; see
:mod:`ttmap.jobs.nests`), each set's products again per nest on the nest's
own grid (``arrival_<set>_nest-<name>.tif`` ...), the site table read on the
finest grid covering each site; with sites or ``path_from`` points and
``wave_paths`` on, ``wave_paths.gpkg`` (layer ``wave_paths``) and
``wave_paths.sld``, the routes drawn on the front maps;

then ``run.json`` (:mod:`ttmap.jobs.record`). Every output is written under
a temporary name and renamed when complete; existing outputs are refused
up-front unless ``overwrite`` is set.
"""

from __future__ import annotations

import dataclasses
import math
import os
import time
import warnings
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, cast

import numpy as np

from ttmap.errors import InputDataError, SourceError, TtmapWarning
from ttmap.jobs.options import ProductOptions, ReadingOptions, SiteOptions, SpeedOptions, options_record
from ttmap.jobs.plan import (
    REPORT_NAME,
    RUN_RECORD_NAME,
    ProductSetNames,
    nest_set_key,
    product_set_names,
    refuse_outputs_up_front,
    site_table_names,
    style_files,
    wave_path_names,
)

if TYPE_CHECKING:
    from ttmap.sources import Source
    from ttmap.traveltime import TravelTimeResult

__all__ = [
    "MapJob",
    "MapJobResult",
    "ProductSet",
    "planned_outputs",
    "run_map_job",
]


@dataclass(frozen=True)
class ProductSet:
    """One solve's products: the front, or the energy of one wave period."""

    key: str
    mode: str
    period_s: float | None

    @property
    def title(self) -> str:
        if self.mode == "long-wave":
            return "front (long-wave speed, earliest arrival)"
        return f"{'energy' if self.mode == 'group' else 'phase'} of {self.period_s:g} s waves ({self.mode} speed)"


@dataclass(frozen=True)
class MapJob:
    """Everything a map run needs; the command line fills it in.

    Attributes
    ----------
    reading : ReadingOptions
        The bathymetry and how to read it.
    source : Source
        The earthquake (point, line, area or rupture).
    out_dir : str
        Output folder (created when the first product is written).
    speed : SpeedOptions
        Speed model; one product set per wave period besides the front.
    products : ProductOptions
        Isochrone spacing, vector and map formats, coastal layer.
    sites : SiteOptions, optional
        With a site file: the site table and timeline (needs the front).
    front : bool
        Produce the front (long-wave) set.
    source_snap_radius_m : float, optional
        Move a point source on land or in a closed basin to open water
        within this ground distance; None refuses it.
    overwrite : bool
        Replace existing outputs.
    command_line : str
        Stored in the run record.
    timeline_title : str, optional
        Title of the timeline chart (default names the source).
    nests : tuple of str
        Finer rasters inside the basin raster (any CRS), read with the same
        options; each set is solved again on each nest from the basin's
        times on its edge (:mod:`ttmap.jobs.nests`).
    wave_paths : bool
        Write the first wave's route to each site and ``path_from`` point.
    path_from : tuple of (lon, lat)
        More points to trace a route to (longitude, latitude degrees).

    Examples
    --------
    >>> from ttmap.sources import Source
    >>> job = MapJob(ReadingOptions("bathy.tif"), Source.point(-144.9, -34.2), "out",
    ...              speed=SpeedOptions(periods_s=(300.0,)))
    >>> [s.key for s in job.product_sets()]
    ['front', 'group_T300s']
    """

    reading: ReadingOptions
    source: Source
    out_dir: str
    speed: SpeedOptions = field(default_factory=SpeedOptions)
    products: ProductOptions = field(default_factory=ProductOptions)
    sites: SiteOptions | None = None
    front: bool = True
    source_snap_radius_m: float | None = None
    overwrite: bool = False
    command_line: str = ""
    timeline_title: str | None = None
    nests: tuple[str, ...] = ()
    wave_paths: bool = True
    path_from: tuple[tuple[float, float], ...] = ()

    def __post_init__(self) -> None:
        object.__setattr__(self, "nests", tuple(str(p) for p in self.nests))
        object.__setattr__(self, "path_from", tuple((float(a), float(b)) for a, b in self.path_from))
        if self.sites is not None and self.sites.path is None:
            raise InputDataError("the map job reads its sites from a file; give SiteOptions(path=...)")

    def product_sets(self) -> list[ProductSet]:
        """The front (when on) and one set per wave period, in solving order."""
        sets: list[ProductSet] = []
        if self.front:
            sets.append(ProductSet("front", "long-wave", None))
        mode = self.speed.period_speed
        for p in self.speed.periods_s:
            sets.append(ProductSet(f"{mode}_T{p:g}s", mode, float(p)))
        if not sets:
            raise InputDataError("nothing to compute: the front is off and no wave period was given")
        keys = [s.key for s in sets]
        if len(set(keys)) != len(keys):
            raise InputDataError(f"wave periods repeat ({', '.join(keys)}); give each period once")
        return sets

    def writes_wave_paths(self) -> bool:
        """True when the job writes the wave-path layer (routes need the front)."""
        return self.wave_paths and self.front and (self.sites is not None or bool(self.path_from))

    def names(self, pset: ProductSet) -> ProductSetNames:
        """The file names of one product set."""
        p = self.products
        return product_set_names(self.out_dir, pset.key, vector_formats=p.vector_formats,
                                 map_formats=p.map_formats, coast=p.coast)


@dataclass(frozen=True)
class MapJobResult:
    """What a map run wrote.

    Attributes
    ----------
    out_dir : Path
    record_path : Path
        The run record (``run.json``).
    products : tuple of Path
        Every file written, the run record last.
    product_sets : dict
        Set key -> summary (cells reached, unreached, source move, minutes range, ...).
    sites : dict or None
        The site table summary (counts and per-site rows) when sites were given.
    record : dict
        The run record as written.
    """

    out_dir: Path
    record_path: Path
    products: tuple[Path, ...]
    product_sets: dict[str, dict[str, Any]]
    sites: dict[str, Any] | None
    record: dict[str, Any]


def planned_outputs(job: MapJob) -> list[Path]:
    """Every file the job will write, so existing ones are refused up-front."""
    paths: list[Path] = []
    from ttmap.jobs.nests import nest_name

    for s in job.product_sets():
        paths += job.names(s).files()
        for n in job.nests:
            paths += job.names(ProductSet(nest_set_key(s.key, nest_name(n)), s.mode, s.period_s)).files()
    if job.writes_wave_paths():
        paths += wave_path_names(job.out_dir).files()
    if job.sites is not None:
        paths += site_table_names(job.out_dir, vector_formats=job.products.vector_formats,
                                  map_formats=job.products.map_formats).files()
    paths += style_files(paths)
    if job.products.report:
        paths.append(Path(job.out_dir) / REPORT_NAME)
    paths.append(Path(job.out_dir) / RUN_RECORD_NAME)
    return paths


def _tags(job: MapJob, pset: ProductSet, result: TravelTimeResult,
          bathymetry_path: str | None = None) -> dict[str, str]:
    import ttmap
    from ttmap.products.cautions import CAUTION_SHORT

    s = result.settings
    return {
        "UNITS": "minutes",
        "QUANTITY": "arrival time after the origin time",
        "SOURCE": job.source.label,
        "SPEED_MODE": pset.mode,
        "PERIOD_S": "" if pset.period_s is None else f"{pset.period_s:g}",
        "FLOOR_DEPTH_M": f"{job.speed.floor_depth_m:g}",
        "FAR_FIELD_CORRECTION": "effective depth h(1-gh/cs^2), cs=1500 m/s" if job.speed.far_field else "none",
        "EARTH_MODEL": str(s.get("earth") or "projected grid (plane)"),
        "MAX_TIME_MIN": "" if job.speed.max_time_s is None else f"{job.speed.max_time_s / 60.0:g}",
        "BATHYMETRY": os.path.basename(bathymetry_path or job.reading.path),
        **({"BASIN_BATHYMETRY": os.path.basename(job.reading.path)} if bathymetry_path else {}),
        "SOFTWARE": f"ttmap {ttmap.__version__}",
        "CAUTION": CAUTION_SHORT,
    }


def run_map_job(job: MapJob, *, progress: Callable[[str], None] | None = None) -> MapJobResult:
    """Run the main job; the run record is written as run.json last.

    Parameters
    ----------
    job : MapJob
    progress : callable, optional
        Called with a one-line message as each stage starts.

    Returns
    -------
    MapJobResult

    Raises
    ------
    TtmapError
        Bad input (file, source, sites, options) or an existing output
        without ``overwrite``; nothing is written in that case.

    Warns
    -----
    TtmapWarning
        With sites: the site table gets no energy columns from phase-speed
        sets, and is not written as a Shapefile.
    """
    from ttmap.faults import checkpoint
    from ttmap.jobs.record import build_run_record, file_entry, grid_entry, utc_now
    from ttmap.jobs.staging import staged_output
    from ttmap.memory import check_memory
    from ttmap.traveltime import prepare_medium

    from ttmap.jobs.checks import check_map_job

    say = progress or (lambda msg: None)
    sets = job.product_sets()
    if job.sites is not None and not job.front:
        raise InputDataError(
            "the site table needs the front (long-wave) arrival; drop --no-front or the sites"
        )
    check_map_job(job)  # every input, from the raster's header, before any work
    planned = planned_outputs(job)
    out = refuse_outputs_up_front(job.out_dir, planned, job.overwrite)

    timings: dict[str, float] = {}
    started = utc_now()
    t0 = time.perf_counter()
    notes: list[str] = []
    sites = None
    if job.sites is not None:
        sites = job.sites.read()
        say(f"read {len(sites)} site(s) from {job.sites.path}")
        notes += _site_notes(job)
    say(f"reading bathymetry {job.reading.path}")
    bathy = job.reading.read()
    grid = bathy.grid
    check_memory(grid, earth=job.speed.earth)  # refuse, with the estimate, before a solve that cannot fit
    nests = []
    if job.nests:
        from ttmap.jobs.nests import check_nest_layout, read_nests

        say(f"reading {len(job.nests)} nest raster(s)")
        nests = read_nests(job.nests, job.reading)
        check_nest_layout(grid, nests, job.source)  # refuse a bad layout before any solve
    timings["read_s"] = time.perf_counter() - t0
    site_marks = _site_marks(sites, grid) if sites is not None else None
    nest_kept: dict[str, dict[str, Any]] = {}  # set key -> nest name -> NestResult (site table)
    nest_summaries: dict[str, dict[str, Any]] = {}
    routes: list[Any] = []

    final_out = out
    with staged_output(final_out, overwrite=job.overwrite, say=say) as stage:
        # products are written under their final names into the staging folder
        job = dataclasses.replace(job, out_dir=str(stage.new))
        out = stage.new
        written: list[Path] = []
        summaries: dict[str, Any] = {}
        kept: dict[str, TravelTimeResult] = {}  # results the site table needs
        front_depth_m: np.ndarray | None = None
        front_water: tuple[np.ndarray, np.ndarray] | None = None  # (water, open water) for the site statuses
        solve_scale: Any = None  # how the map scale was handled (the same for every set)
        for i, pset in enumerate(sets, 1):
            tag = f"[{i}/{len(sets)} {pset.key}]"
            t1 = time.perf_counter()
            say(f"{tag} computing speeds ({pset.mode}{'' if pset.period_s is None else f', T = {pset.period_s:g} s'})")
            medium = prepare_medium(
                bathy.depth_m, grid, mode=pset.mode, period_s=pset.period_s,
                floor_depth_m=job.speed.floor_depth_m, far_field=job.speed.far_field,
                earth=job.speed.earth,  # type: ignore[arg-type]
            )
            t2 = time.perf_counter()
            say(f"{tag} solving on {medium.plane.shape[0]} x {medium.plane.shape[1]} cells")
            try:
                result = medium.travel_time(job.source, max_time_s=job.speed.max_time_s,
                                            snap_radius_m=job.source_snap_radius_m)
            except SourceError as err:
                raise _with_sign_hint(err, job, bathy.depth_m) from err
            t3 = time.perf_counter()
            say(f"{tag} writing products")
            if i == 1:
                checkpoint("solved")
            water = medium.water
            if sites is not None and pset.mode == "long-wave":
                front_depth_m = medium.depth_m
                front_water = (medium.water, medium.open_water)
            # the wave paths bend through the front's speeds (the head wave along a shelf edge)
            route_speed = medium.speed_m_s if pset.mode == "long-wave" and job.writes_wave_paths() else None
            del medium  # the speeds and labels are not needed for the products: free them first
            solved_nests = _solve_nests(job, pset, result, nests, say, tag) if nests else {}
            if route_speed is not None:
                routes = _trace_routes(job, sites, result, solved_nests, route_speed)
                del route_speed
            written += _write_products(job, pset, result, water, site_marks, routes,
                                       nest_outlines=_nest_outlines(nests, grid))
            del water
            if i == 1:
                checkpoint("products", written[-1])
            for nname, nres in solved_nests.items():
                from ttmap.jobs.nests import as_travel_time

                npset = ProductSet(nest_set_key(pset.key, nname), pset.mode, pset.period_s)
                marks = _site_marks(sites, nres.grid) if sites is not None else None
                written += _write_products(job, npset, as_travel_time(result, nres), nres.medium.water,
                                           marks, routes, grid.crs, _nest_path(nests, nname))
            nest_summaries[pset.key] = {k: v.summary.as_dict() for k, v in solved_nests.items()}
            if sites is not None and pset.mode in ("long-wave", "group"):
                nest_kept[pset.key] = solved_nests
            if sites is not None and pset.mode in ("long-wave", "group"):
                kept[pset.key] = result
            t4 = time.perf_counter()
            timings[f"{pset.key}.speeds_s"] = t2 - t1
            timings[f"{pset.key}.solve_s"] = t3 - t2
            timings[f"{pset.key}.write_s"] = t4 - t3
            from ttmap.jobs.layers import minutes_range

            solve_scale = result.settings.get("projection_scale")
            summaries[pset.key] = {
                "title": pset.title,
                "speed_mode": pset.mode,
                "period_s": pset.period_s,
                **result.summary.as_dict(),
                "arrival_min_range": minutes_range(result.arrival_time_min),
            }
        site_block: dict[str, Any] | None = None
        inputs: dict[str, Any] = {"bathymetry": file_entry(job.reading.path, sha256=bathy.sha256,
                                                            band=bathy.band, notes=list(bathy.notes))}
        if sites is not None and job.sites is not None and job.sites.path is not None:
            t5 = time.perf_counter()
            say(f"site table and timeline for {len(sites)} site(s)")
            files, site_block = _write_site_table(job, sites, sets, kept, front_depth_m, grid, front_water,
                                                  nest_kept)
            written += files
            kept.clear()
            front_water = None
            timings["sites_s"] = time.perf_counter() - t5
            inputs["sites"] = file_entry(job.sites.path, layer=job.sites.layer, name_field=job.sites.name_field,
                                         crs=sites.crs.to_string(), count=len(sites))
        if routes:
            written += _write_wave_paths(job, routes, grid)
        timings["total_s"] = time.perf_counter() - t0
        if job.products.report:
            written.append(out / REPORT_NAME)  # written from the record, just before run.json
        blocks: dict[str, Any] = {"product_sets": summaries}
        if nests:
            from ttmap.jobs.nests import nests_record

            blocks["nests"] = nests_record(nests, nest_summaries)
            for n in nests:
                inputs[f"nest-{n.name}"] = file_entry(n.path, sha256=n.bathymetry.sha256, band=n.bathymetry.band,
                                                      notes=list(n.bathymetry.notes))
        if site_block is not None:
            blocks["sites"] = site_block
        record = build_run_record(
            job="map",
            command_line=job.command_line,
            started_utc=started,
            inputs=inputs,
            parameters=map_job_parameters(job),
            # the grid, and how its map scale was handled in the solve (docs/projections.md)
            grid={**grid_entry(grid), "solve_scale": solve_scale},
            timings_s=timings,
            products=written,
            out_dir=out,
            notes=notes,
            **blocks,
        )
        from ttmap.jobs.styling import write_report_and_record

        run_json = write_report_and_record(record, out, report=job.products.report, overwrite=job.overwrite,
                                           say=say)
    written = [stage.final(p) for p in written]
    return MapJobResult(out_dir=final_out, record_path=stage.final(run_json), products=(*written, stage.final(run_json)),
                        product_sets=summaries, sites=site_block, record=record)


def map_job_parameters(job: MapJob) -> dict[str, Any]:
    """The ``parameters`` block of a map run record: the option groups and the job's own settings."""
    reading = options_record(job.reading)
    reading.pop("path")
    return {
        "source": job.source.describe(),
        "front": job.front,
        "source_snap_radius_m": job.source_snap_radius_m,
        "reading": reading,
        "speed": options_record(job.speed),
        "products": options_record(job.products),
        "sites": None if job.sites is None else options_record(job.sites),
        "nests": list(job.nests),
        "wave_paths": job.writes_wave_paths(),
        "path_from": [list(p) for p in job.path_from],
        "overwrite": job.overwrite,
    }


def _site_notes(job: MapJob) -> list[str]:
    """Notes (also issued as TtmapWarning) on what the site table leaves out."""
    notes = []
    if job.speed.period_speed != "group" and job.speed.periods_s:
        notes.append(
            "the site table's energy columns need group speed (--period-speed group); "
            f"the {job.speed.period_speed}-speed sets are left out of it"
        )
    if "shp" in job.products.vector_formats:
        notes.append(
            "the site table is not written as a Shapefile (its column names do not fit in "
            "10 characters); it is in sites.csv and sites.gpkg"
        )
    for n in notes:
        warnings.warn(n, TtmapWarning, stacklevel=3)
    return notes


def _site_marks(sites: Any, grid: Any) -> list[tuple[str, float, float]]:
    """(name, x, y) in the grid's CRS of the sites that lie on the grid, for the maps."""
    xs, ys = sites.positions_in(grid.crs)
    marks = []
    for name, x, y in zip(sites.names, xs, ys, strict=True):
        if math.isfinite(x) and math.isfinite(y) and bool(grid.contains(x, y)):
            marks.append((name, float(x), float(y)))
    return marks


def _write_site_table(
    job: MapJob,
    sites: Any,
    sets: list[ProductSet],
    kept: dict[str, TravelTimeResult],
    front_depth_m: np.ndarray | None,
    grid: Any,
    front_water: tuple[np.ndarray, np.ndarray] | None = None,
    nest_kept: dict[str, dict[str, Any]] | None = None,
) -> tuple[list[Path], dict[str, Any]]:
    """Snap the sites, build the table, write CSV, GeoPackage (GeoJSON) and the timeline."""
    from ttmap.io.atomic import atomic_output
    from ttmap.io.sites import write_site_table_csv
    from ttmap.jobs.layers import write_one_layer
    from ttmap.io.figures import save_figure
    from ttmap.products.sites import site_table, site_table_layer, snap_sites
    from ttmap.products.timeline import render_timeline

    opts = job.sites
    assert opts is not None
    names = site_table_names(job.out_dir, vector_formats=job.products.vector_formats,
                             map_formats=job.products.map_formats)
    front = kept["front"]
    periods = {float(s.period_s): kept[s.key] for s in sets
               if s.mode == "group" and s.key in kept and s.period_s is not None}
    water, open_water = front_water if front_water is not None else (None, None)
    table_options: dict[str, Any] = dict(
        speed_uncertainty=opts.speed_uncertainty,
        origin_time_utc=opts.origin_time_utc,
        notification_delay_min=opts.notification_delay_min,
        preparation_min=opts.preparation_min,
        walking_speed_m_s=opts.walking_speed_m_s,
        little_margin_min=opts.little_margin_min,
    )
    if nest_kept and nest_kept.get("front"):
        from ttmap.jobs.nests import nested_site_table

        table = nested_site_table(
            sites, front, periods, front_depth_m, nest_kept["front"],
            _nest_periods(sets, nest_kept), search_radius_m=opts.search_radius_m, basin_water=front_water,
            **table_options,
        )
    else:
        snapped = snap_sites(sites, grid, front, search_radius_m=opts.search_radius_m,
                             depth_m=front_depth_m, water=water, open_water=open_water)
        table = site_table(sites, snapped, front, periods, **table_options)
    # (cast: the writer's protocol declares settable attributes; SiteTable is frozen)
    written: list[Path] = [write_site_table_csv(names.csv, cast(Any, table), overwrite=job.overwrite)]
    layer = site_table_layer(table, name="sites")
    for target in names.layers:
        written.append(write_one_layer(target, layer, "EPSG:4326", job.overwrite))
    from ttmap.jobs.styling import style_map_sites

    written += style_map_sites(names, little_margin_min=opts.little_margin_min, overwrite=job.overwrite)

    from ttmap.products.maps import source_text

    fig = render_timeline(
        table,
        title=job.timeline_title or f"Time budget per site: {source_text(job.source.label, job.source.params)}",
        source_kind=job.source.kind,
    )
    try:
        for fmt, target in names.timelines.items():
            with atomic_output(target, overwrite=job.overwrite) as tmp:
                save_figure(fig, tmp, format=fmt)  # type: ignore[arg-type]
            written.append(target)
    finally:
        fig.clear()

    cols = table.columns
    per_site = [
        {
            "name": cols["name"][i],
            "status": cols["status"][i],
            **({"grid": cols["grid"][i], "basin_front_min": _finite_or_none(cols["basin_front_min"][i])}
               if "grid" in cols else {}),
            "moved_m": _finite_or_none(cols["moved_m"][i]),
            "front_min": _finite_or_none(cols["front_min"][i]),
            "earliest_min": _finite_or_none(cols["earliest_min"][i]),
            "minutes_left": _finite_or_none(cols["minutes_left"][i]),
            "margin_min": _finite_or_none(cols["margin_min"][i]),
            "budget_status": cols["budget_status"][i],
        }
        for i in range(len(table))
    ]
    block = {
        "search_radius_m": opts.search_radius_m,
        "table_settings": table.settings,
        "status_counts": _counts(cols["status"]),
        "budget_status_counts": _counts(cols["budget_status"]),
        "per_site": per_site,
    }
    return written, block


def _counts(values: Sequence[Any]) -> dict[str, int]:
    counts: dict[str, int] = {}
    for v in values:
        counts[str(v)] = counts.get(str(v), 0) + 1
    return counts


def _finite_or_none(v: Any) -> float | None:
    if v is None:
        return None
    f = float(v)
    return round(f, 3) if math.isfinite(f) else None


def _with_sign_hint(err: SourceError, job: MapJob, depth_m: np.ndarray) -> SourceError:
    """``err``, with a hint on the sign convention when most of the grid reads as land.

    A depth-positive raster read as elevation (or the reverse) turns the sea
    into land; the reader refuses only the extreme cases (almost no water),
    so a source "on land" is often the first visible symptom.
    """
    valid = np.isfinite(depth_m)
    n_valid = int(valid.sum())
    if n_valid == 0:
        return err
    land_share = float((valid & (depth_m <= 0.0)).sum()) / n_valid
    if land_share <= 0.5:
        return err
    hint = (
        "if the raster stores elevation (negative below sea level), drop --depth-positive"
        if job.reading.depth_positive
        else "if the raster stores depth positive down, pass --depth-positive"
    )
    return SourceError(f"{err}; note {100.0 * land_share:.0f} % of the grid reads as land: {hint}")


def _nest_outlines(nests: list[Any], grid: Any) -> list[np.ndarray]:
    """Each nest's outline in the basin's CRS, drawn dashed on the basin's maps."""
    from ttmap.nesting import nest_footprint

    return [np.asarray(nest_footprint(n.grid, grid).exterior.coords) for n in nests]


def _nest_path(nests: list[Any], name: str) -> str:
    """The raster path of nest ``name`` (titles and tags of its products)."""
    return next(str(n.path) for n in nests if n.name == name)


def _nest_periods(sets: list[ProductSet], nest_kept: dict[str, dict[str, Any]]) -> dict[str, dict[float, Any]]:
    """Nest name -> period -> the nest's group-speed result (the site table's energy columns)."""
    out: dict[str, dict[float, Any]] = {}
    for s in sets:
        if s.mode == "group" and s.period_s is not None:
            for name, res in nest_kept.get(s.key, {}).items():
                out.setdefault(name, {})[float(s.period_s)] = res
    return out


def _solve_nests(job: MapJob, pset: ProductSet, result: TravelTimeResult, nests: list[Any],
                 say: Callable[[str], None], tag: str) -> dict[str, Any]:
    from ttmap.jobs.nests import solve_nests

    say(f"{tag} solving {len(nests)} nest(s) from the basin times on their edges")
    return solve_nests(result, nests, mode=pset.mode, period_s=pset.period_s, speed=job.speed)


def _trace_routes(job: MapJob, sites: Any, front: TravelTimeResult, solved_nests: dict[str, Any],
                  speed_m_s: Any = None) -> list[Any]:
    """The first wave's route to every site and ``path_from`` point, in the basin's CRS."""
    from ttmap.io.sites import Site, SiteList
    from ttmap.jobs.nests import trace_routes

    radius = job.sites.search_radius_m if job.sites is not None else SiteOptions().search_radius_m
    groups = [] if sites is None else [sites]
    if job.path_from:
        groups.append(SiteList(tuple(Site(f"point {k} ({lon:g}, {lat:g})", lon, lat)
                                     for k, (lon, lat) in enumerate(job.path_from, 1))))
    routes: list[Any] = []
    for g in groups:
        routes += trace_routes(g, front, solved_nests, earth=job.speed.earth, search_radius_m=radius,
                               basin_speed_m_s=speed_m_s)
    return routes


def _write_wave_paths(job: MapJob, routes: list[Any], grid: Any) -> list[Path]:
    """``wave_paths.gpkg`` (layer ``wave_paths``, in the basin's CRS) and its SLD."""
    from ttmap.jobs.layers import write_one_layer
    from ttmap.products.paths import wave_path_layer, wave_paths_sld
    from ttmap.io.styles import write_sld

    from ttmap.jobs.styling import style_wave_paths

    names = wave_path_names(job.out_dir)
    written = [write_one_layer(names.gpkg, wave_path_layer(routes), grid.crs, job.overwrite)]
    sld = wave_paths_sld()
    write_sld(names.sld, sld, overwrite=job.overwrite)
    written.append(names.sld)
    style_wave_paths(names.gpkg, sld_text=sld)  # opens styled in QGIS (layer_styles)
    return written


def _routes_in(routes: Sequence[Any], from_crs: Any, grid: Any) -> list[np.ndarray]:
    """Route coordinates carried into ``grid``'s CRS, for drawing."""
    if not routes:
        return []
    if grid.crs == from_crs:
        return [r.xy for r in routes]
    from pyproj import Transformer

    tr = Transformer.from_crs(from_crs, grid.crs, always_xy=True)
    return [np.column_stack(tr.transform(r.xy[:, 0], r.xy[:, 1])) for r in routes]


def _write_products(job: MapJob, pset: ProductSet, result: TravelTimeResult, water: np.ndarray,
                    site_marks: Sequence[tuple[str, float, float]] | None = None,
                    routes: Sequence[Any] = (), routes_crs: Any = None,
                    bathymetry_path: str | None = None,
                    nest_outlines: Sequence[np.ndarray] = ()) -> list[Path]:
    from ttmap.io.atomic import atomic_output
    from ttmap.io.raster import write_arrival_geotiff
    from ttmap.jobs.layers import arrival_levels, isochrone_layers, write_arrival_style, write_isochrones
    from ttmap.products.cautions import CAUTION_SHORT, minutes_after
    from ttmap.products.isochrones import isochrone_lines_and_bands

    names = job.names(pset)
    grid = result.grid
    time_min = result.arrival_time_min
    written: list[Path] = []

    # GDAL compresses the GeoTIFF without holding the GIL (rasterio keeps it
    # while building overviews): write it in a second thread while this one
    # computes the coastal stretches (numpy, which lets go of the GIL often) and
    # the isochrones (contourpy, one short call per level). The files do not
    # depend on the timing; an error in the GeoTIFF is raised here.
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="ttmap-geotiff") as pool:
        tif_done = pool.submit(
            write_arrival_geotiff, names.arrival_tif, time_min, grid, tags=_tags(job, pset, result, bathymetry_path),
            band_description=f"arrival time of the {pset.title}, {minutes_after(job.source.kind)}",
            overwrite=job.overwrite,
        )
        coast = _coast_table(job, time_min, water, grid) if job.products.coast else None
        levels = arrival_levels(time_min, job.products.isochrone_interval_min)
        lines, bands = isochrone_lines_and_bands(time_min, grid.transform, levels)
        tif_done.result()
    written.append(names.arrival_tif)
    written.append(write_arrival_style(names.arrival_sld, levels, layer_name=f"arrival_{pset.key}",
                                       title=f"Arrival time: {pset.title}", overwrite=job.overwrite))
    layers = isochrone_layers(
        lines, bands,
        # a float period column in every set (NaN, written as null, for the front) so
        # the field is Real in every file, not String where all values are missing
        line_columns={"speed_mode": pset.mode,
                      "period_s": None if pset.period_s is None else float(pset.period_s)},
        lines_description=f"Isochrones of the {pset.title}, {minutes_after(job.source.kind)}. {CAUTION_SHORT}",
        bands_description=f"Arrival-time bands of the {pset.title}. {CAUTION_SHORT}",
    )
    written += write_isochrones(names.isochrones, layers, bands, grid.crs,
                                lines_title=f"Isochrones: {pset.title}",
                                bands_title=f"Arrival bands: {pset.title}", overwrite=job.overwrite)
    from ttmap.jobs.styling import style_map_set

    written += style_map_set(names, title=pset.title, levels=levels, bands=bands, overwrite=job.overwrite)

    if coast is not None:
        written += _write_coast(job, pset, names, coast, time_min, grid)

    if names.maps:
        from ttmap.io.figures import save_figure
        from ttmap.products.maps import render_arrival_map, source_text

        src_geom = job.source.in_crs(grid.crs)
        if job.source.kind == "point":
            import shapely

            src_geom = shapely.Point(result.summary.source_x, result.summary.source_y)
        from ttmap.products.maps import draw_nest_outline, draw_wave_paths, nest_outline_handle, wave_path_handle

        draw_paths = bool(routes) and pset.mode == "long-wave"
        fig = render_arrival_map(
            time_min, grid.transform, land_mask=~water, lines=lines, source_geometry=src_geom,
            sites=site_marks or None,
            title=f"Tsunami arrival time: {pset.title}",
            subtitle=f"Source: {source_text(job.source.label, job.source.params)}  |  "
            f"bathymetry: {os.path.basename(bathymetry_path or job.reading.path)}",
            is_geographic=grid.is_geographic,
            source_kind=job.source.kind,
            extra_legend=[*([wave_path_handle()] if draw_paths else []),
                          *([nest_outline_handle()] if nest_outlines else [])],
        )
        if draw_paths:
            draw_wave_paths(fig.axes[0], _routes_in(routes, routes_crs or grid.crs, grid))
        for outline in nest_outlines:  # where the nests are, on the basin's maps
            draw_nest_outline(fig.axes[0], outline)
        try:
            for target in names.maps.values():
                with atomic_output(target, overwrite=job.overwrite) as tmp:
                    save_figure(fig, tmp)
                written.append(target)
        finally:
            fig.clear()  # an Agg figure, never registered with pyplot: no pyplot import to close it
    return written


def _coast_table(job: MapJob, time_min: np.ndarray, water: np.ndarray, grid: Any) -> Any:
    """The coastal stretches of one product set, as columns (a CoastTable)."""
    from ttmap.products.coast import coastal_arrival_table

    return coastal_arrival_table(
        time_min, water, grid.transform, class_interval_min=float(job.products.coast_interval_min)
    )


def _write_coast(job: MapJob, pset: ProductSet, names: ProductSetNames, segments: Any,
                 time_min: np.ndarray, grid: Any) -> list[Path]:
    """The coastal arrival layer of one product set and its style."""
    from ttmap.jobs.layers import latest_min, write_one_layer
    from ttmap.products.coast import coast_classes, coast_layer, coast_sld
    from ttmap.products.palette import arrival_colors_hex
    from ttmap.io.styles import write_sld

    step = float(job.products.coast_interval_min)
    layer = coast_layer(
        segments,
        description=f"First-arrival minutes along the coast, by stretch of coast: {pset.title}.",
    )
    written = [write_one_layer(target, layer, grid.crs, job.overwrite) for target in names.coast.values()]
    # Colour each class about as the map colours its lower bound (the map's
    # scale runs from 0 to the latest arrival), so coast and map agree.
    classes = coast_classes(segments)
    latest = latest_min(time_min)
    n_all = max(math.ceil(latest / step) if latest is not None else 1, 1)
    ramp = arrival_colors_hex(n_all)
    colors = [ramp[min(round(lo / step), n_all - 1)] for lo, _, _ in classes]
    assert names.coast_sld is not None
    write_sld(names.coast_sld, coast_sld(classes, colors, title=f"Coastal arrival: {pset.title}"),
              overwrite=job.overwrite)
    written.append(names.coast_sld)
    from ttmap.jobs.styling import style_map_coast

    written += style_map_coast(names, classes, colors, title=pset.title, overwrite=job.overwrite)
    return written
