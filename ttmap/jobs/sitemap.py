"""The site-map job: "an earthquake here gives us N minutes", for each site.

One solve per site, started at the site (:func:`ttmap.sitemap.site_centred_times`):
by reciprocity (isotropic speeds, no currents) the time read at any water
cell is the time a wave from a source there takes to reach the site. For
each site the job writes (names from :func:`ttmap.jobs.plan.site_names`) the
site-centred raster, the minutes-left raster (time minus the notification
delay), isochrones, SLD styles and a map; with two or more sites also the
earliest time over all sites and the site reached first
(:func:`ttmap.jobs.plan.combined_names`); then ``run.json``
(:mod:`ttmap.jobs.record`).
"""

from __future__ import annotations

import dataclasses

import json
import math
import os
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike

from ttmap.defaults import MAX_NOTIFICATION_DELAY_MIN
from ttmap.errors import InputDataError, SourceError, TtmapWarning
from ttmap.jobs.options import (
    ProductOptions,
    ReadingOptions,
    SiteOptions,
    SpeedOptions,
    check_formats,
    options_record,
)
from ttmap.jobs.plan import (
    REPORT_NAME,
    RUN_RECORD_NAME,
    SiteNames,
    check_site_stems,
    combined_names,
    refuse_outputs_up_front,
    site_names,
    style_files,
)

if TYPE_CHECKING:
    from ttmap.grid import Grid
    from ttmap.traveltime import TravelTimeResult

__all__ = [
    "SiteMapJob",
    "SiteMapJobResult",
    "planned_site_map_outputs",
    "run_site_map_job",
    "write_combined_products",
    "write_site_products",
]


@dataclass(frozen=True)
class SiteMapJob:
    """Everything a site-centred run needs (``ttmap site-map``).

    Attributes
    ----------
    reading : ReadingOptions
        The bathymetry and how to read it.
    out_dir : str
    sites : SiteOptions
        The site file (``sites.path``, hashed into the run record), the
        search radius (a site on land is moved to the nearest open water
        within it) and the default notification delay. A site's own
        ``notification_delay_min`` replaces the default.
    site_list : SiteList, optional
        Sites given in code (:class:`ttmap.io.sites.SiteList`, any CRS);
        when None they are read from ``sites.path``.
    speed : SpeedOptions
        Speed model; with one wave period in ``periods_s`` the solve uses
        its group (or phase) speed instead of the long-wave speed.
    products : ProductOptions
        Isochrone spacing, vector and map formats (the coastal layer does
        not apply).
    combined : bool
        With two or more sites, also write the earliest time over all sites
        and which site is reached first.
    overwrite : bool
    title_prefix : str
        Put before each map title (e.g. a scenario name and ": ").
    command_line : str
    """

    reading: ReadingOptions
    out_dir: str
    sites: SiteOptions = field(default_factory=SiteOptions)
    site_list: Any = None
    speed: SpeedOptions = field(default_factory=SpeedOptions)
    products: ProductOptions = field(default_factory=ProductOptions)
    combined: bool = True
    overwrite: bool = False
    title_prefix: str = ""
    command_line: str = ""

    def __post_init__(self) -> None:
        if self.site_list is None and self.sites.path is None:
            raise InputDataError("no sites given; give a site file (SiteOptions(path=...)) or a site list")
        if len(self.speed.periods_s) > 1:
            raise InputDataError(
                f"a site-map run solves one speed; give at most one wave period, not {len(self.speed.periods_s)}"
            )

    @property
    def period_s(self) -> float | None:
        """The wave period solved, or None for the long-wave speed."""
        return self.speed.periods_s[0] if self.speed.periods_s else None

    @property
    def mode(self) -> str:
        """The speed mode: ``long-wave``, or the period speed with a wave period."""
        return "long-wave" if self.period_s is None else self.speed.period_speed

    def site_list_or_read(self) -> Any:
        """The sites: :attr:`site_list`, or those read from ``sites.path``."""
        return self.site_list if self.site_list is not None else self.sites.read()


@dataclass(frozen=True)
class SiteMapJobResult:
    """What a site-map run wrote.

    Attributes
    ----------
    out_dir : Path
    record_path : Path
        The run record (``run.json``).
    products : tuple of Path
        Every file written, the run record last.
    sites : list of dict
        Per solved site: position, solve position, move, notification
        delay (and where it came from), cells reached, minutes range.
    skipped : list of dict
        Sites that could not be placed: name and reason.
    combined_written : bool
        Whether the several-site products were written.
    record : dict
        The run record as written.
    """

    out_dir: Path
    record_path: Path
    products: tuple[Path, ...]
    sites: list[dict[str, Any]]
    skipped: list[dict[str, str]]
    combined_written: bool
    record: dict[str, Any]


def planned_site_map_outputs(job: SiteMapJob, site_list: Any = None) -> list[Path]:
    """Every file a site-centred run will write, so existing ones are refused up-front."""
    sites = site_list if site_list is not None else job.site_list_or_read()
    check_site_stems(sites.names)
    paths: list[Path] = []
    for name in sites.names:
        paths += site_names(job.out_dir, name, vector_formats=job.products.vector_formats,
                            map_formats=job.products.map_formats).files()
    if job.combined and len(sites) >= 2:
        paths += combined_names(job.out_dir).files()
    paths += style_files(paths)
    if job.products.report:
        paths.append(Path(job.out_dir) / REPORT_NAME)
    paths.append(Path(job.out_dir) / RUN_RECORD_NAME)
    return paths


def run_site_map_job(job: SiteMapJob, *, progress: Callable[[str], None] | None = None) -> SiteMapJobResult:
    """Site-centred maps for every site of ``job``; the run record is written as run.json last.

    The bathymetry is read and the speed field prepared once; each site gets
    one solve (:func:`ttmap.sitemap.site_centred_times`) and its products
    (:func:`write_site_products`). A site that cannot be placed (outside the
    grid, or no open water within the search radius) is reported with a
    :class:`~ttmap.errors.TtmapWarning`, recorded in the run record and
    skipped; if no site can be placed, the first such error is raised. With
    two or more sites and ``combined``, the earliest time over the sites and
    the site reached first are written too (:func:`write_combined_products`).

    Raises
    ------
    TtmapError
        Bad input, site names whose files would collide, a notification
        delay out of range, an existing output without ``overwrite`` (all
        before anything is written), or no site that can be placed.
    """
    from ttmap.faults import checkpoint
    from ttmap.jobs.layers import minutes_range
    from ttmap.jobs.staging import staged_output
    from ttmap.jobs.record import build_run_record, file_entry, grid_entry, utc_now
    from ttmap.memory import check_memory
    from ttmap.sitemap import RECIPROCITY_NOTE, combine_site_times, site_centred_times
    from ttmap.sources import Source
    from ttmap.traveltime import prepare_medium

    say = progress or (lambda msg: None)
    sites = job.site_list_or_read()
    if len(sites) == 0:
        raise InputDataError("no sites given; give at least one site")
    delays = {}
    for site in sites:
        d = job.sites.notification_delay_min if site.notification_delay_min is None else site.notification_delay_min
        if not (math.isfinite(d) and 0.0 <= d <= MAX_NOTIFICATION_DELAY_MIN):
            raise InputDataError(
                f"site {site.name!r}: notification delay {d:g} min must lie in 0..."
                f"{MAX_NOTIFICATION_DELAY_MIN:g} minutes; give e.g. 10"
            )
        delays[site.name] = float(d)
    from ttmap.jobs.checks import check_site_map_job

    _, name_notes = check_site_map_job(job, sites.names)  # every input, from the raster's header
    planned = planned_site_map_outputs(job, sites)
    out = refuse_outputs_up_front(job.out_dir, planned, job.overwrite)

    timings: dict[str, float] = {}
    started = utc_now()
    t0 = time.perf_counter()
    say(f"reading bathymetry {job.reading.path}")
    bathy = job.reading.read()
    grid = bathy.grid
    check_memory(grid, earth=job.speed.earth)  # refuse, with the estimate, before a solve that cannot fit
    t1 = time.perf_counter()
    timings["read_s"] = t1 - t0
    speed = "long-wave" if job.period_s is None else f"{job.mode}, T = {job.period_s:g} s"
    say(f"computing speeds ({speed})")
    medium = prepare_medium(
        bathy.depth_m, grid, mode=job.mode, period_s=job.period_s,
        floor_depth_m=job.speed.floor_depth_m, far_field=job.speed.far_field,
        earth=job.speed.earth,  # type: ignore[arg-type]
    )
    timings["speeds_s"] = time.perf_counter() - t1

    final_out = out
    with staged_output(final_out, overwrite=job.overwrite) as stage:
        out = stage.new  # products go under their final names into the staging folder
        written: list[Path] = []
        per_site: list[dict[str, Any]] = []
        skipped: list[dict[str, str]] = []
        first_error: SourceError | None = None
        best: np.ndarray | None = None
        first: np.ndarray | None = None
        solved: list[str] = []
        last = None
        created = False
        n = len(sites)
        # The one site evaluation places every site (the same cells and status words as the
        # site tables): open water is what a solve from the site reaches.
        from ttmap.products.site_eval import SNAP_MOVED, SNAP_OK, snap_sites

        radius_m = job.sites.search_radius_m
        placed = snap_sites(sites, grid, medium.open_water, search_radius_m=radius_m, depth_m=medium.depth_m,
                            water=medium.water, open_water=medium.open_water)
        for i, (site, snap) in enumerate(zip(sites, placed, strict=True), 1):
            tag = f"[{i}/{n} {site.name}]"
            t2 = time.perf_counter()
            say(f"{tag} solving from the site")
            if snap.status == SNAP_OK:
                src = Source.point_xy(site.x, site.y, crs=sites.crs, label=site.name)
            elif snap.status == SNAP_MOVED:
                src = Source.point_xy(snap.x, snap.y, crs=grid.crs, label=site.name)
            else:
                err = SourceError(
                    f"site {site.name!r}: {snap.status} (no open water within {radius_m / 1000.0:g} km); "
                    "move the site or enlarge the search radius (--site-search-radius-km)"
                )
                skipped.append({"name": site.name, "status": snap.status, "reason": str(err)})
                first_error = first_error or err
                continue
            try:
                result = site_centred_times(medium, src, name=site.name, snap_radius_m=radius_m,
                                            max_time_s=job.speed.max_time_s)
            except SourceError as err:
                skipped.append({"name": site.name, "status": snap.status, "reason": str(err)})
                first_error = first_error or err
                continue
            if snap.status == SNAP_MOVED:
                result = dataclasses.replace(
                    result, summary=dataclasses.replace(result.summary, source_moved_m=snap.moved_m),
                    settings={**result.settings, "site_moved_m": snap.moved_m},
                )
            t3 = time.perf_counter()
            if not created:
                checkpoint("solved")
            written += write_site_products(
                out, site.name, result, notification_delay_min=delays[site.name], overwrite=job.overwrite,
                vector_formats=job.products.vector_formats, map_formats=job.products.map_formats,
                title_prefix=job.title_prefix, water_mask=medium.water,
                isochrone_interval_min=job.products.isochrone_interval_min,
            )
            if not created:
                checkpoint("products", written[-1])
                created = True
            t4 = time.perf_counter()
            timings[f"{site.name}.solve_s"] = t3 - t2
            timings[f"{site.name}.write_s"] = t4 - t3
            sm = result.summary
            per_site.append({
                "name": site.name,
                "x": site.x,
                "y": site.y,
                "crs": sites.crs.to_string(),
                "status": snap.status,
                "solve_x": sm.source_x,
                "solve_y": sm.source_y,
                "moved_m": round(float(sm.source_moved_m), 1),
                "notification_delay_min": delays[site.name],
                "notification_delay_from": "site" if site.notification_delay_min is not None else "default",
                "cells_reached": sm.cells_reached,
                "cells_unreached": sm.cells_unreached,
                "minutes_range": minutes_range(result.arrival_time_min),
            })
            if job.combined and n >= 2:
                # Earliest time over the sites so far, streamed so that only two
                # maps are held at once; ties keep the earlier site, as
                # combine_site_times does for all maps together.
                t = result.arrival_time_min
                if best is None or first is None:
                    best = np.where(np.isfinite(t), t, np.nan)
                    first = np.where(np.isfinite(t), len(solved), -1).astype(np.int16)
                else:
                    best, which, _ = combine_site_times({"so far": best, site.name: t})
                    first = np.where(which == 1, len(solved), np.where(which == 0, first, -1)).astype(np.int16)
            solved.append(site.name)
            last = result
            del result
        if not solved:
            assert first_error is not None
            raise first_error
        for skip in skipped:
            warnings.warn(f"{skip['reason']}; no map for this site", TtmapWarning, stacklevel=2)
        combined_written = False
        if job.combined and len(solved) >= 2 and best is not None and first is not None:
            say(f"combining {len(solved)} sites: earliest time and site reached first")
            t5 = time.perf_counter()
            written += write_combined_products(out, best, first, solved, grid, overwrite=job.overwrite,
                                               settings_from=last)
            combined_written = True
            timings["combine_s"] = time.perf_counter() - t5
        timings["total_s"] = time.perf_counter() - t0
        if job.products.report:
            written.append(out / REPORT_NAME)  # written from the record, just before run.json

        inputs: dict[str, Any] = {"bathymetry": file_entry(job.reading.path, sha256=bathy.sha256,
                                                            band=bathy.band, notes=list(bathy.notes))}
        if job.sites.path is not None:
            inputs["sites"] = file_entry(job.sites.path, layer=job.sites.layer, name_field=job.sites.name_field,
                                         crs=sites.crs.to_string(), count=len(sites))
        record = build_run_record(
            job="site-map",
            command_line=job.command_line,
            started_utc=started,
            inputs=inputs,
            parameters=site_map_job_parameters(job, sites),
            # the grid, and how its map scale was handled in the solve (docs/projections.md)
            grid={**grid_entry(grid), "solve_scale": None if last is None else last.settings.get("projection_scale")},
            timings_s=timings,
            products=written,
            out_dir=out,
            notes=name_notes,
            sites=per_site,
            sites_skipped=skipped,
            combined_written=combined_written,
            reciprocity=RECIPROCITY_NOTE,
        )
        from ttmap.jobs.styling import write_report_and_record

        run_json = write_report_and_record(record, out, report=job.products.report, overwrite=job.overwrite,
                                           say=say)
    written = [stage.final(p) for p in written]
    run_json = stage.final(run_json)
    return SiteMapJobResult(out_dir=final_out, record_path=run_json, products=(*written, run_json), sites=per_site,
                            skipped=skipped, combined_written=combined_written, record=record)


def site_map_job_parameters(job: SiteMapJob, sites: Any) -> dict[str, Any]:
    """The ``parameters`` block of a site-map run record."""
    reading = options_record(job.reading)
    reading.pop("path")
    return {
        "site_list": [{"name": s.name, "x": s.x, "y": s.y, "notification_delay_min": s.notification_delay_min}
                      for s in sites],
        "site_list_crs": sites.crs.to_string(),
        "speed_mode": job.mode,
        "reading": reading,
        "speed": options_record(job.speed),
        "products": options_record(job.products),
        "sites": options_record(job.sites),
        "combined": job.combined,
        "overwrite": job.overwrite,
    }


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
    - ``map_minutes_left_<site>.png`` (and/or ``.pdf``): the minutes-left map
      (diverging classes around zero; red: the wave comes before the message).
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
    from ttmap.io.atomic import SHAPEFILE_SUFFIXES, atomic_output_set, check_writable
    from ttmap.sitemap import check_notification_delay

    delay = check_notification_delay(notification_delay_min)
    check_formats(vector_formats, map_formats)
    planned = site_names(out_dir, name, vector_formats=vector_formats, map_formats=map_formats).files()
    planned += style_files(planned)
    companions = [p.with_suffix(s) for p in planned if p.suffix == ".shp" for s in SHAPEFILE_SUFFIXES]
    check_writable([*planned, *companions], overwrite)
    with atomic_output_set(planned, overwrite=overwrite) as staged:
        # the same plan, in the staging folder
        names = site_names(Path(staged[0]).parent, name, vector_formats=vector_formats, map_formats=map_formats)
        _write_site_set(names, name, result, delay, title_prefix, water_mask, isochrone_interval_min)
    return planned




def _write_site_set(
    names: SiteNames,
    name: str,
    result: TravelTimeResult,
    delay: float,
    title_prefix: str,
    water_mask: ArrayLike | None,
    interval_min: float | None,
) -> None:
    from ttmap.io.atomic import atomic_output
    from ttmap.io.raster import write_arrival_geotiff
    from ttmap.jobs.layers import arrival_levels, isochrone_layers, write_arrival_style, write_isochrones
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.products.isochrones import isochrone_bands, isochrone_lines
    from ttmap.io.styles import write_sld
    from ttmap.products.site_maps import minutes_left_sld, render_minutes_left_map, render_site_map
    from ttmap.sitemap import minutes_left

    grid = result.grid
    time_min = result.arrival_time_min
    tags = _site_tags(name, result)

    write_arrival_geotiff(
        names.site_tif,
        time_min,
        grid,
        tags=tags,
        band_description=f"minutes from a source at this cell to site {name}",
    )
    levels = arrival_levels(time_min, interval_min)
    write_arrival_style(names.site_sld, levels, layer_name=f"site_centred_{names.stem}",
                        title=f"Minutes from a source here to {name}")

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
        names.left_tif,
        left,
        grid,
        tags=left_tags,
        band_description=(
            f"minutes left for people at {name} if the earthquake were here "
            f"(travel time minus {delay:g} min notification delay; negative: wave first)"
        ),
    )
    write_sld(names.left_sld, minutes_left_sld(left, delay, name, names.stem))

    lines = isochrone_lines(time_min, grid.transform, levels)
    bands = isochrone_bands(time_min, grid.transform, levels)
    layers = isochrone_layers(
        lines, bands, line_columns={"site": name}, band_columns={"site": name},
        lines_description=f"Minutes from a source on the line to site {name}. {CAUTION_SHORT}",
        bands_description=f"Minutes from a source in the band to site {name}. {CAUTION_SHORT}",
    )
    write_isochrones(names.isochrones, layers, bands, grid.crs, lines_title=f"Minutes to reach {name}",
                     bands_title=f"Minutes from a source here to {name}")
    from ttmap.jobs.styling import style_site_set

    style_site_set(names, name=name, levels=levels, bands=bands, left_min=left, delay_min=delay)

    if names.maps:
        from ttmap.io.figures import save_figure

        fig = render_site_map(name, result, lines, water_mask=water_mask, title_prefix=title_prefix)
        for fmt, target in names.maps.items():
            with atomic_output(target, overwrite=False) as tmp:
                save_figure(fig, tmp, format=fmt)  # type: ignore[arg-type]
        fig = render_minutes_left_map(name, left, result, delay, water_mask=water_mask,
                                      title_prefix=title_prefix)
        for fmt, target in names.left_maps.items():
            with atomic_output(target, overwrite=False) as tmp:
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
    from ttmap.jobs.layers import arrival_levels, write_arrival_style
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.products.site_maps import INDEX_NODATA, first_site_sld
    from ttmap.io.styles import write_sld
    from ttmap.sitemap import RECIPROCITY_NOTE

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
    if idx.size and (idx.min() < INDEX_NODATA or idx.max() >= len(names)):
        raise InputDataError(
            f"first_index holds {int(idx.min())}..{int(idx.max())}, outside -1..{len(names) - 1} "
            f"for {len(names)} site name(s)"
        )
    if np.any((idx == INDEX_NODATA) != ~np.isfinite(t)):
        raise InputDataError(
            "first_index is -1 where min_time_min has a value, or the reverse; pass the two "
            "arrays from one combine_sites call"
        )
    planned = combined_names(out_dir).files()
    planned += style_files(planned)
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
                "nodata": INDEX_NODATA,
                "sites": [{"index": i, "name": n} for i, n in enumerate(names)],
            },
            indent=2,
            ensure_ascii=False,
        )
        + "\n"
    )
    with atomic_output_set(planned, overwrite=overwrite) as staged:
        names_ = combined_names(Path(staged[0]).parent)  # the same plan, in the staging folder
        write_arrival_geotiff(
            names_.min_tif,
            t,
            grid,
            tags={
                "QUANTITY": "time from a source at this cell to the site it reaches first",
                "SITES": "; ".join(names),
                **common,
            },
            band_description="minutes from a source at this cell to the first site reached",
        )
        write_arrival_style(names_.min_sld, arrival_levels(t, None), layer_name="site_centred_min",
                            title="Minutes from a source here to the first site reached")
        values = np.where(idx == INDEX_NODATA, np.nan, idx.astype(np.float64))
        write_raster(
            names_.first_tif,
            values,
            grid,
            dtype="int16",
            nodata=float(INDEX_NODATA),
            tags={
                "QUANTITY": "index of the site a wave from a source at this cell reaches first",
                "SITE_COUNT": str(len(names)),
                **site_tags,
                **common,
            },
            band_description="site reached first from a source at this cell (SITE_<index> tags)",
            resampling="mode",
        )
        write_sld(names_.first_sld, first_site_sld(names))
        from ttmap.jobs.styling import style_site_combined

        style_site_combined(names_, levels=arrival_levels(t, None), site_names=names)
        with atomic_output(names_.first_json, overwrite=False) as tmp:
            tmp.write_text(lookup_text, encoding="utf-8")
    return planned


def _common_tags(result: TravelTimeResult) -> dict[str, str]:
    import ttmap
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.sitemap import RECIPROCITY_NOTE

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


