"""The main job: bathymetry file in, GIS products and a run record out.

:func:`run_map_job` reads the bathymetry, solves the front (long-wave speed)
and, for each requested wave period, the energy arrival (group speed, or phase
speed on request), and writes for each such *product set*:

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

then ``run.json``: inputs with SHA-256, every parameter, versions, timings,
grid summaries, the site summary and the files written. Every output is written under a
temporary name and renamed when complete; existing outputs are refused
up-front unless ``overwrite`` is set.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
import platform
import sys
import time
import warnings
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, cast

import numpy as np

from ttmap.defaults import FLOOR_DEPTH_M, MAP_FORMATS, VECTOR_FORMATS
from ttmap.errors import InputDataError, SourceError, TtmapWarning
from ttmap.memory import check_memory
from ttmap.defaults import NOTIFICATION_DELAY_MIN, PREPARATION_MIN, WALKING_SPEED_M_S, LITTLE_MARGIN_MIN
from ttmap.defaults import COAST_CLASS_INTERVAL_MIN
from ttmap.defaults import SITE_SEARCH_RADIUS_M, SPEED_UNCERTAINTY
from ttmap.sources import Source
from ttmap.traveltime import TravelTimeResult, prepare_medium

__all__ = [
    "MapJob",
    "ProductSet",
    "SiteMapJob",
    "planned_outputs",
    "planned_site_map_outputs",
    "run_map_job",
    "run_site_map_job",
    "software_versions",
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


@dataclass
class MapJob:
    """Everything a map run needs; the command line fills it in.

    Attributes are SI (metres, seconds) except the isochrone and coast
    intervals and the time-budget values, which carry their unit in the name
    (minutes, m/s).

    Site attributes (used only when ``sites`` is given): ``sites`` is a CSV
    or vector file read by :func:`ttmap.io.sites.read_sites` (with
    ``sites_layer``, ``sites_name_field``, ``sites_crs``);
    ``site_search_radius_m`` bounds the move to the nearest reached water
    cell; ``speed_uncertainty`` is the stated +/- fraction of wave speed;
    ``origin_time_utc`` (timezone-aware) adds clock-time columns; the
    notification delay, preparation time, walking speed and little-margin
    threshold are the defaults for sites that give none (see
    :mod:`ttmap.products.budget` for their sources).
    """

    bathymetry: str
    source: Source
    out_dir: str
    band: int | None = None
    depth_positive: bool = False
    window: tuple[float, float, float, float] | None = None
    window_crs: str | None = "EPSG:4326"
    coarsen: int = 1
    periods_s: Sequence[float] = ()
    period_mode: str = "group"
    front: bool = True
    far_field: bool = False
    floor_depth_m: float = FLOOR_DEPTH_M
    earth: str = "wgs84"
    max_time_s: float | None = None
    snap_radius_m: float | None = None
    isochrone_interval_min: float | None = None
    vector_formats: Sequence[str] = ("gpkg",)
    map_formats: Sequence[str] = ("png",)
    overwrite: bool = False
    command_line: str = ""
    coast: bool = True
    coast_interval_min: float = COAST_CLASS_INTERVAL_MIN
    sites: str | None = None
    sites_layer: str | None = None
    sites_name_field: str | None = None
    sites_crs: str | None = None
    site_search_radius_m: float = SITE_SEARCH_RADIUS_M
    speed_uncertainty: float = SPEED_UNCERTAINTY
    origin_time_utc: _dt.datetime | None = None
    notification_delay_min: float = NOTIFICATION_DELAY_MIN
    preparation_min: float = PREPARATION_MIN
    walking_speed_m_s: float = WALKING_SPEED_M_S
    little_margin_min: float = LITTLE_MARGIN_MIN
    timeline_title: str | None = None
    extra: dict[str, Any] = field(default_factory=dict)

    def product_sets(self) -> list[ProductSet]:
        sets: list[ProductSet] = []
        if self.front:
            sets.append(ProductSet("front", "long-wave", None))
        for p in self.periods_s:
            sets.append(ProductSet(f"{self.period_mode}_T{p:g}s", self.period_mode, float(p)))
        if not sets:
            raise InputDataError("nothing to compute: the front is off and no wave period was given")
        keys = [s.key for s in sets]
        if len(set(keys)) != len(keys):
            raise InputDataError(f"wave periods repeat ({', '.join(keys)}); give each period once")
        return sets


def planned_outputs(job: MapJob) -> list[Path]:
    """Every file the job will write, so existing ones are refused up-front."""
    out = Path(job.out_dir)
    paths: list[Path] = []
    for s in job.product_sets():
        paths += [out / f"arrival_{s.key}.tif", out / f"arrival_{s.key}.sld"]
        for fmt in job.vector_formats:
            ext = VECTOR_FORMATS[fmt]
            stem = out / f"isochrones_{s.key}"
            if fmt == "gpkg":
                paths.append(stem.with_suffix(ext))
            else:
                for layer in ("isochrone_lines", "isochrone_bands"):
                    paths.append(out / f"isochrones_{s.key}_{layer}{ext}")
        paths += [out / f"isochrones_{s.key}_lines.sld", out / f"isochrones_{s.key}_bands.sld"]
        if "shp" in job.vector_formats:
            paths.append(out / f"isochrones_{s.key}_bands_shp.sld")
        for fmt in job.map_formats:
            paths.append(out / f"map_{s.key}.{fmt}")
        if job.coast:
            paths += [out / f"coast_{s.key}{VECTOR_FORMATS[fmt]}" for fmt in job.vector_formats]
            paths.append(out / f"coast_{s.key}.sld")
    if job.sites is not None:
        paths += _site_table_paths(job)
    paths.append(out / "run.json")
    return paths


def _site_table_paths(job: MapJob) -> list[Path]:
    """The run's site files: table (CSV, GeoPackage, GeoJSON on request) and timeline."""
    out = Path(job.out_dir)
    paths = [out / "sites.csv", out / "sites.gpkg"]
    if "geojson" in job.vector_formats:
        paths.append(out / "sites.geojson")
    paths.append(out / "timeline.png")
    if "pdf" in job.map_formats:
        paths.append(out / "timeline.pdf")
    return paths


def software_versions() -> dict[str, str]:
    """Versions of ttmap, Python and the libraries that shape the results."""
    import importlib.metadata as md

    import ttmap

    v: dict[str, str] = {"ttmap": ttmap.__version__, "python": sys.version.split()[0]}
    for pkg in ("numpy", "scipy", "scikit-fmm", "rasterio", "shapely", "pyproj", "pyogrio",
                "contourpy", "matplotlib", "click"):
        try:
            v[pkg] = md.version(pkg)
        except md.PackageNotFoundError:
            v[pkg] = "not installed"
    try:
        import rasterio

        v["gdal"] = rasterio.__gdal_version__
    except Exception:  # pragma: no cover - optional detail
        pass
    try:
        import shapely

        v["geos"] = shapely.geos_version_string
        import pyproj

        v["proj"] = pyproj.proj_version_str
    except Exception:  # pragma: no cover - optional detail
        pass
    v["platform"] = platform.platform()
    return v


def _iso_now() -> str:
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat()


def _tags(job: MapJob, pset: ProductSet, result: TravelTimeResult) -> dict[str, str]:
    import ttmap
    from ttmap.products.cautions import CAUTION_SHORT

    s = result.settings
    return {
        "UNITS": "minutes",
        "QUANTITY": "arrival time after the origin time",
        "SOURCE": job.source.label,
        "SPEED_MODE": pset.mode,
        "PERIOD_S": "" if pset.period_s is None else f"{pset.period_s:g}",
        "FLOOR_DEPTH_M": f"{job.floor_depth_m:g}",
        "FAR_FIELD_CORRECTION": "effective depth h(1-gh/cs^2), cs=1500 m/s" if job.far_field else "none",
        "EARTH_MODEL": str(s.get("earth") or "projected grid (plane)"),
        "MAX_TIME_MIN": "" if job.max_time_s is None else f"{job.max_time_s / 60.0:g}",
        "BATHYMETRY": os.path.basename(job.bathymetry),
        "SOFTWARE": f"ttmap {ttmap.__version__}",
        "CAUTION": CAUTION_SHORT,
    }


def run_map_job(job: MapJob, *, progress: Callable[[str], None] | None = None) -> dict[str, Any]:
    """Run the main job and return the run record (also written as run.json).

    Parameters
    ----------
    job : MapJob
    progress : callable, optional
        Called with a one-line message as each stage starts.

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
    from ttmap.io.atomic import atomic_output, check_writable
    from ttmap.io.raster import read_bathymetry

    say = progress or (lambda msg: None)
    for fmt in job.vector_formats:
        if fmt not in VECTOR_FORMATS:
            raise InputDataError(f"vector format {fmt!r} is unknown; choose from {', '.join(VECTOR_FORMATS)}")
    for fmt in job.map_formats:
        if fmt not in MAP_FORMATS:
            raise InputDataError(f"map format {fmt!r} is unknown; choose from {', '.join(MAP_FORMATS)}")
    sets = job.product_sets()
    if job.sites is not None and not job.front:
        raise InputDataError(
            "the site table needs the front (long-wave) arrival; drop --no-front or the sites"
        )
    if job.coast and not (math.isfinite(job.coast_interval_min) and job.coast_interval_min > 0):
        raise InputDataError(
            f"coast interval {job.coast_interval_min!r} min must be a positive number of minutes"
        )
    planned = planned_outputs(job)
    out = _refuse_outputs_up_front(job.out_dir, planned, job.overwrite)

    timings: dict[str, float] = {}
    started = _iso_now()
    t0 = time.perf_counter()
    notes: list[str] = []
    sites = None
    if job.sites is not None:
        sites = _read_job_sites(job)
        say(f"read {len(sites)} site(s) from {job.sites}")
        notes += _site_notes(job)
    say(f"reading bathymetry {job.bathymetry}")
    bathy = read_bathymetry(
        job.bathymetry, band=job.band, depth_positive=job.depth_positive,
        window=job.window, window_crs=job.window_crs, coarsen=job.coarsen,
    )
    grid = bathy.grid
    check_memory(grid, earth=job.earth)  # refuse, with the estimate, before a solve that cannot fit
    timings["read_s"] = time.perf_counter() - t0
    site_marks = _site_marks(sites, grid) if sites is not None else None

    written: list[str] = []
    summaries: dict[str, Any] = {}
    kept: dict[str, TravelTimeResult] = {}  # results the site table needs
    front_depth_m: np.ndarray | None = None
    for i, pset in enumerate(sets, 1):
        tag = f"[{i}/{len(sets)} {pset.key}]"
        t1 = time.perf_counter()
        say(f"{tag} computing speeds ({pset.mode}{'' if pset.period_s is None else f', T = {pset.period_s:g} s'})")
        medium = prepare_medium(
            bathy.depth_m, grid, mode=pset.mode, period_s=pset.period_s,
            floor_depth_m=job.floor_depth_m, far_field=job.far_field, earth=job.earth,  # type: ignore[arg-type]
        )
        t2 = time.perf_counter()
        say(f"{tag} solving on {medium.plane.shape[0]} x {medium.plane.shape[1]} cells")
        try:
            result = medium.travel_time(job.source, max_time_s=job.max_time_s, snap_radius_m=job.snap_radius_m)
        except SourceError as err:
            raise _with_sign_hint(err, job, bathy.depth_m) from err
        t3 = time.perf_counter()
        say(f"{tag} writing products")
        if i == 1:
            out.mkdir(parents=True, exist_ok=True)
            check_writable(planned, job.overwrite)
        water = medium.water
        if sites is not None and pset.mode == "long-wave":
            front_depth_m = medium.depth_m
        del medium  # the speeds and labels are not needed for the products: free them first
        files = _write_products(job, pset, result, water, site_marks)
        del water
        written += [str(p) for p in files]
        if sites is not None and pset.mode in ("long-wave", "group"):
            kept[pset.key] = result
        t4 = time.perf_counter()
        timings[f"{pset.key}.speeds_s"] = t2 - t1
        timings[f"{pset.key}.solve_s"] = t3 - t2
        timings[f"{pset.key}.write_s"] = t4 - t3
        summaries[pset.key] = {
            "title": pset.title,
            "speed_mode": pset.mode,
            "period_s": pset.period_s,
            **result.summary.as_dict(),
            "arrival_min_range": _range_min(result),
        }
    site_record: dict[str, Any] | None = None
    if sites is not None:
        t5 = time.perf_counter()
        say(f"site table and timeline for {len(sites)} site(s)")
        files, site_record = _write_site_table(job, sites, sets, kept, front_depth_m, grid)
        written += [str(p) for p in files]
        kept.clear()
        timings["sites_s"] = time.perf_counter() - t5
    timings["total_s"] = time.perf_counter() - t0
    record = _run_record(job, bathy, sets, summaries, timings, written, started)
    if site_record is not None:
        record["inputs"]["sites"] = site_record.pop("input")
        record["sites"] = site_record
    if notes:
        record["notes"] = notes
    run_json = out / "run.json"
    with atomic_output(run_json, overwrite=job.overwrite) as tmp:
        Path(tmp).write_text(json.dumps(record, indent=2, default=_json_default) + "\n")
    record["files_written"].append(str(run_json))
    return record


def _read_job_sites(job: MapJob) -> Any:
    from ttmap.io.sites import read_sites

    assert job.sites is not None
    return read_sites(job.sites, name_field=job.sites_name_field, crs=job.sites_crs, layer=job.sites_layer)


def _site_notes(job: MapJob) -> list[str]:
    """Notes (also issued as TtmapWarning) on what the site table leaves out."""
    notes = []
    if job.period_mode != "group" and job.periods_s:
        notes.append(
            "the site table's energy columns need group speed (--period-speed group); "
            f"the {job.period_mode}-speed sets are left out of it"
        )
    if "shp" in job.vector_formats:
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


def _file_sha256(path: str) -> str | None:
    from ttmap.io.raster import file_sha256

    return file_sha256(path) if os.path.isfile(path) else None


def _write_site_table(
    job: MapJob,
    sites: Any,
    sets: list[ProductSet],
    kept: dict[str, TravelTimeResult],
    front_depth_m: np.ndarray | None,
    grid: Any,
) -> tuple[list[Path], dict[str, Any]]:
    """Snap the sites, build the table, write CSV, GeoPackage (GeoJSON) and the timeline."""
    from ttmap.io.atomic import atomic_output
    from ttmap.io.sites import write_site_table_csv
    from ttmap.products.maps import save_figure
    from ttmap.products.sites import site_table, site_table_layer, snap_sites
    from ttmap.products.timeline import render_timeline

    out = Path(job.out_dir)
    front = kept["front"]
    periods = {float(s.period_s): kept[s.key] for s in sets
               if s.mode == "group" and s.key in kept and s.period_s is not None}
    snapped = snap_sites(sites, grid, front, search_radius_m=job.site_search_radius_m, depth_m=front_depth_m)
    table = site_table(
        sites, snapped, front, periods,
        speed_uncertainty=job.speed_uncertainty,
        origin_time_utc=job.origin_time_utc,
        notification_delay_min=job.notification_delay_min,
        preparation_min=job.preparation_min,
        walking_speed_m_s=job.walking_speed_m_s,
        little_margin_min=job.little_margin_min,
    )
    # (cast: the writer's protocol declares settable attributes; SiteTable is frozen)
    written: list[Path] = [write_site_table_csv(out / "sites.csv", cast(Any, table), overwrite=job.overwrite)]
    layer = site_table_layer(table, name="sites")
    written.append(_write_one_layer(out / "sites.gpkg", layer, "EPSG:4326", job.overwrite))
    if "geojson" in job.vector_formats:
        written.append(_write_one_layer(out / "sites.geojson", layer, "EPSG:4326", job.overwrite))

    fig = render_timeline(
        table,
        title=job.timeline_title or f"Time budget per site: {job.source.label}",
    )
    try:
        for fmt in ("png", *(f for f in job.map_formats if f == "pdf")):
            target = out / f"timeline.{fmt}"
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
            "moved_m": _finite_or_none(cols["moved_m"][i]),
            "front_min": _finite_or_none(cols["front_min"][i]),
            "earliest_min": _finite_or_none(cols["earliest_min"][i]),
            "minutes_left": _finite_or_none(cols["minutes_left"][i]),
            "margin_min": _finite_or_none(cols["margin_min"][i]),
            "budget_status": cols["budget_status"][i],
        }
        for i in range(len(table))
    ]
    record = {
        "input": {
            "path": os.path.abspath(str(job.sites)),
            "sha256": _file_sha256(str(job.sites)),
            "layer": job.sites_layer,
            "name_field": job.sites_name_field,
            "crs": sites.crs.to_string(),
            "count": len(sites),
        },
        "search_radius_m": job.site_search_radius_m,
        "table_settings": table.settings,
        "status_counts": _counts(cols["status"]),
        "budget_status_counts": _counts(cols["budget_status"]),
        "per_site": per_site,
    }
    return written, record


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


def _write_one_layer(final: Path, layer: Any, crs: Any, overwrite: bool) -> Path:
    """Write one vector layer to exactly ``final`` (.gpkg, .geojson or .shp), all or nothing.

    :func:`ttmap.io.vector.write_vector_layers` names GeoJSON and Shapefile
    outputs ``<stem>_<layer>``; here the one layer is written in a hidden
    staging folder and renamed to ``final`` (with its Shapefile companions)
    before the set is moved into place.
    """
    from ttmap.io.atomic import SHAPEFILE_SUFFIXES, atomic_output_set
    from ttmap.io.vector import write_vector_layers

    suffix = final.suffix.lower()
    if suffix == ".gpkg":
        return write_vector_layers(final, [layer], crs=crs, overwrite=overwrite)[0]
    companions = SHAPEFILE_SUFFIXES if suffix == ".shp" else ()
    with atomic_output_set([final], overwrite=overwrite, companion_suffixes=companions) as staged:
        stage = staged[0].parent
        produced = write_vector_layers(stage / final.name, [layer], crs=crs)[0]
        stem = produced.name[: -len(produced.suffix)]
        for f in list(stage.iterdir()):
            if f.name.startswith(stem + "."):
                f.rename(stage / (final.stem + f.name[len(stem):]))
    return final



def _refuse_outputs_up_front(out_dir: str, planned: Sequence[Path], overwrite: bool) -> Path:
    """Refuse existing outputs and unwritable places before any work.

    The folder itself is created only when the first product is written, so
    that a run refused for its input (missing file, source on land) leaves
    nothing behind.
    """
    from ttmap.io.atomic import check_writable

    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputDataError(f"output folder {str(out)!r} is a file; give a folder name")
    if out.is_dir():
        check_writable(planned, overwrite)
    else:
        _check_creatable(out)
    return out

def _check_creatable(out: Path) -> None:
    """Refuse an output folder that cannot be created (its nearest existing parent is not writable)."""
    parent = out.absolute().parent
    while not parent.exists() and parent != parent.parent:
        parent = parent.parent
    if not parent.is_dir():
        raise InputDataError(f"output folder {str(out)!r} cannot be created: {str(parent)!r} is a file")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise InputDataError(
            f"output folder {str(out)!r} cannot be created in {str(parent)!r} (not writable); "
            "choose another --out folder"
        )


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
        if job.depth_positive
        else "if the raster stores depth positive down, pass --depth-positive"
    )
    return SourceError(f"{err}; note {100.0 * land_share:.0f} % of the grid reads as land: {hint}")


def _range_min(result: TravelTimeResult) -> list[float] | None:
    t = result.arrival_time_min
    if not np.isfinite(t).any():
        return None
    return [round(float(np.nanmin(t)), 3), round(float(np.nanmax(t)), 3)]


def _json_default(o: Any) -> Any:
    if isinstance(o, (np.integer,)):
        return int(o)
    if isinstance(o, (np.floating,)):
        return float(o)
    if isinstance(o, Path):
        return str(o)
    return str(o)



def _bathymetry_record(path: str, bathy: Any) -> dict[str, Any]:
    """The bathymetry entry of a run record: where, which hash, how it was read."""
    return {
        "path": os.path.abspath(path),
        "sha256": bathy.sha256,
        "band": bathy.band,
        "notes": list(bathy.notes),
    }

def _run_record(job: MapJob, bathy: Any, sets: list[ProductSet], summaries: dict[str, Any],
                timings: dict[str, float], written: list[str], started: str) -> dict[str, Any]:
    from ttmap.products.cautions import CAUTION_LINES

    g = bathy.grid
    return {
        "ttmap_run_record": 1,
        "started_utc": started,
        "finished_utc": _iso_now(),
        "command_line": job.command_line,
        "cautions": list(CAUTION_LINES),
        "inputs": {"bathymetry": _bathymetry_record(job.bathymetry, bathy)},
        "parameters": {
            "source": job.source.describe(),
            "depth_positive": job.depth_positive,
            "window": job.window,
            "window_crs": job.window_crs or "raster CRS",
            "coarsen": job.coarsen,
            "front": job.front,
            "periods_s": list(job.periods_s),
            "period_mode": job.period_mode,
            "far_field": job.far_field,
            "floor_depth_m": job.floor_depth_m,
            "earth": job.earth,
            "max_time_s": job.max_time_s,
            "snap_radius_m": job.snap_radius_m,
            "isochrone_interval_min": job.isochrone_interval_min,
            "vector_formats": list(job.vector_formats),
            "map_formats": list(job.map_formats),
            "coast": job.coast,
            "coast_interval_min": job.coast_interval_min if job.coast else None,
            "overwrite": job.overwrite,
            **job.extra,
        },
        "grid": {
            "shape": list(g.shape),
            "crs": g.crs.to_string(),
            "transform": list(g.transform)[:6],
            "bounds": list(g.bounds),
            "geographic": g.is_geographic,
            "wraps_x": g.wraps_x,
            "cell_size_m": [round(v, 3) for v in g.cell_size_m()],
        },
        "product_sets": summaries,
        "timings_s": {k: round(v, 4) for k, v in timings.items()},
        "versions": software_versions(),
        "files_written": written,
    }


def _latest_min(time_min: np.ndarray) -> float | None:
    """The latest finite arrival, minutes; None if there is none (no copy of the values)."""
    finite = np.isfinite(time_min)
    if not finite.any():
        return None
    return float(np.max(time_min, where=finite, initial=-np.inf))


def _levels(job: MapJob, time_min: np.ndarray) -> np.ndarray:
    from ttmap.products.isochrones import default_levels_min, levels_from_interval

    tmax = _latest_min(time_min)
    if tmax is None:
        return np.array([])
    if job.isochrone_interval_min is not None:
        return levels_from_interval(job.isochrone_interval_min, tmax)
    return default_levels_min(tmax)


def _write_products(job: MapJob, pset: ProductSet, result: TravelTimeResult, water: np.ndarray,
                    site_marks: Sequence[tuple[str, float, float]] | None = None) -> list[Path]:
    from ttmap.io.atomic import atomic_output
    from ttmap.io.raster import write_arrival_geotiff
    from ttmap.io.vector import VectorLayer, write_vector_layers
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.products.isochrones import isochrone_lines_and_bands
    from ttmap.products.palette import arrival_colors_hex
    from ttmap.products.styles import bands_sld, lines_sld, raster_sld, write_sld

    out = Path(job.out_dir)
    grid = result.grid
    time_min = result.arrival_time_min
    written: list[Path] = []
    key = pset.key

    tif = out / f"arrival_{key}.tif"
    # GDAL compresses the GeoTIFF without holding the GIL (rasterio keeps it
    # while building overviews): write it in a second thread while this one
    # computes the coastal stretches (numpy, which lets go of the GIL often) and
    # the isochrones (contourpy, one short call per level). The files do not
    # depend on the timing; an error in the GeoTIFF is raised here.
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="ttmap-geotiff") as pool:
        tif_done = pool.submit(
            write_arrival_geotiff, tif, time_min, grid, tags=_tags(job, pset, result),
            band_description=f"arrival time of the {pset.title}, minutes after origin",
            overwrite=job.overwrite,
        )
        coast = _coast_table(job, time_min, water, grid) if job.coast else None
        levels = _levels(job, time_min)
        lines, bands = isochrone_lines_and_bands(time_min, grid.transform, levels)
        tif_done.result()
    written.append(tif)
    n_colors = max(len(bands), 2)
    colors = arrival_colors_hex(n_colors)
    sld_r = out / f"arrival_{key}.sld"
    ramp_levels = [0.0, *[float(v) for v in levels]] if len(levels) else [0.0, 60.0]
    write_sld(sld_r, raster_sld(ramp_levels, arrival_colors_hex(len(ramp_levels)),
                                layer_name=f"arrival_{key}", title=f"Arrival time: {pset.title}"),
              overwrite=job.overwrite)
    written.append(sld_r)

    line_attrs: dict[str, Any] = {
        "minutes": [float(ln.minutes) for ln in lines], "label": [ln.label for ln in lines],
        "speed_mode": [pset.mode] * len(lines),
        # a float column in every set (NaN, written as null, for the front) so the
        # field is Real in every file, not String where all values are missing
        "period_s": np.full(len(lines), np.nan if pset.period_s is None else float(pset.period_s)),
    }
    line_layer = VectorLayer(
        "isochrone_lines",
        [ln.geometry for ln in lines],
        line_attrs,
        "MultiLineString",
        description=f"Isochrones of the {pset.title}, minutes after origin. {CAUTION_SHORT}",
    )
    band_layer = VectorLayer(
        "isochrone_bands",
        [b.geometry for b in bands],
        {"min_minutes": [float(b.min_minutes) for b in bands],
         "max_minutes": [float(b.max_minutes) for b in bands],
         "minutes": [float(b.max_minutes) for b in bands],
         "label": [b.label for b in bands]},
        "MultiPolygon",
        description=f"Arrival-time bands of the {pset.title}. {CAUTION_SHORT}",
    )
    for fmt in job.vector_formats:
        target = out / f"isochrones_{key}{VECTOR_FORMATS[fmt]}"
        written += write_vector_layers(
            target, [line_layer, band_layer], crs=grid.crs, overwrite=job.overwrite,
        )  # the caution travels in each layer's description (dataset metadata makes readers
        # with newer GDAL write .aux.xml side files next to the GeoPackage)
    sld_l = out / f"isochrones_{key}_lines.sld"
    write_sld(sld_l, lines_sld(layer_name="isochrone_lines", title=f"Isochrones: {pset.title}"),
              overwrite=job.overwrite)
    sld_b = out / f"isochrones_{key}_bands.sld"
    write_sld(sld_b, bands_sld([(b.min_minutes, b.max_minutes, b.label) for b in bands], colors[: len(bands)],
                               layer_name="isochrone_bands", title=f"Arrival bands: {pset.title}"),
              overwrite=job.overwrite)
    written += [sld_l, sld_b]
    if "shp" in job.vector_formats:
        from ttmap.io.vector import shapefile_field_name

        # Shapefile field names are cut to 10 characters: the bands style filters on that name.
        sld_bs = out / f"isochrones_{key}_bands_shp.sld"
        write_sld(sld_bs, bands_sld([(b.min_minutes, b.max_minutes, b.label) for b in bands],
                                    colors[: len(bands)], layer_name=f"isochrones_{key}_isochrone_bands",
                                    title=f"Arrival bands: {pset.title}",
                                    attribute=shapefile_field_name("min_minutes")),
                  overwrite=job.overwrite)
        written.append(sld_bs)

    if coast is not None:
        written += _write_coast(job, pset, coast, time_min, grid)

    if job.map_formats:
        from ttmap.products.maps import render_arrival_map, save_figure

        src_geom = job.source.in_crs(grid.crs)
        if job.source.kind == "point":
            import shapely

            src_geom = shapely.Point(result.summary.source_x, result.summary.source_y)
        fig = render_arrival_map(
            time_min, grid.transform, land_mask=~water, lines=lines, source_geometry=src_geom,
            sites=site_marks or None,
            title=f"Tsunami arrival time: {pset.title}",
            subtitle=f"Source: {job.source.label}  |  bathymetry: {os.path.basename(job.bathymetry)}",
            is_geographic=grid.is_geographic,
        )
        try:
            for fmt in job.map_formats:
                target = out / f"map_{key}.{fmt}"
                with atomic_output(target, overwrite=job.overwrite) as tmp:
                    save_figure(fig, tmp)
                written.append(target)
        finally:
            import matplotlib.pyplot as plt

            plt.close(fig)
    return written


def _coast_table(job: MapJob, time_min: np.ndarray, water: np.ndarray, grid: Any) -> Any:
    """The coastal stretches of one product set, as columns (a CoastTable)."""
    from ttmap.products.coast import coastal_arrival_table

    return coastal_arrival_table(
        time_min, water, grid.transform, class_interval_min=float(job.coast_interval_min)
    )


def _write_coast(job: MapJob, pset: ProductSet, segments: Any, time_min: np.ndarray,
                 grid: Any) -> list[Path]:
    """The coastal arrival layer of one product set and its style."""
    from ttmap.products.coast import coast_classes, coast_layer, coast_sld
    from ttmap.products.palette import arrival_colors_hex
    from ttmap.products.styles import write_sld

    out = Path(job.out_dir)
    step = float(job.coast_interval_min)
    layer = coast_layer(
        segments,
        description=f"First-arrival minutes along the coast, by stretch of coast: {pset.title}.",
    )
    written = [_write_one_layer(out / f"coast_{pset.key}{VECTOR_FORMATS[fmt]}", layer, grid.crs, job.overwrite)
               for fmt in job.vector_formats]
    # Colour each class about as the map colours its lower bound (the map's
    # scale runs from 0 to the latest arrival), so coast and map agree.
    classes = coast_classes(segments)
    latest = _latest_min(time_min)
    n_all = max(math.ceil(latest / step) if latest is not None else 1, 1)
    ramp = arrival_colors_hex(n_all)
    colors = [ramp[min(round(lo / step), n_all - 1)] for lo, _, _ in classes]
    sld = out / f"coast_{pset.key}.sld"
    write_sld(sld, coast_sld(classes, colors, title=f"Coastal arrival: {pset.title}"), overwrite=job.overwrite)
    written.append(sld)
    return written


# ---------------------------------------------------------------------------
# Site-centred maps
# ---------------------------------------------------------------------------


@dataclass
class SiteMapJob:
    """Everything a site-centred run needs (``ttmap site-map``).

    One solve per site, started at the site: by reciprocity (isotropic
    speeds, no currents) the time read at any water cell is the time a wave
    from a source there takes to reach the site. See :mod:`ttmap.sitemap`.

    Attributes
    ----------
    bathymetry : str
    sites : SiteList
        The sites, in any CRS (:func:`ttmap.io.sites.read_sites`, or built
        in code from names and lon/lat). A site's own
        ``notification_delay_min`` replaces the job's default.
    out_dir : str
    sites_path : str, optional
        The file the sites were read from (hashed into the run record).
    notification_delay_min : float
        Default minutes from the earthquake until the official message
        reaches people.
    snap_radius_m : float
        A site on land is moved to the nearest open water within this
        ground distance.
    period_s, period_mode
        Solve with the group (or phase) speed of this wave period instead of
        the long-wave speed.
    combined : bool
        With two or more sites, also write the earliest time over all sites
        and which site is reached first.
    """

    bathymetry: str
    sites: Any
    out_dir: str
    sites_path: str | None = None
    band: int | None = None
    depth_positive: bool = False
    window: tuple[float, float, float, float] | None = None
    window_crs: str | None = "EPSG:4326"
    coarsen: int = 1
    period_s: float | None = None
    period_mode: str = "group"
    far_field: bool = False
    floor_depth_m: float = FLOOR_DEPTH_M
    earth: str = "wgs84"
    notification_delay_min: float = NOTIFICATION_DELAY_MIN
    snap_radius_m: float = SITE_SEARCH_RADIUS_M
    max_time_s: float | None = None
    isochrone_interval_min: float | None = None
    vector_formats: Sequence[str] = ("gpkg",)
    map_formats: Sequence[str] = ("png",)
    combined: bool = True
    overwrite: bool = False
    title_prefix: str = ""
    command_line: str = ""

    @property
    def mode(self) -> str:
        return "long-wave" if self.period_s is None else self.period_mode


def _check_site_stems(names: Sequence[str]) -> None:
    """Refuse sites whose file names would collide (compared ignoring case)."""
    from ttmap.sitemap import site_file_stem

    seen: dict[str, str] = {}
    for name in names:
        stem = site_file_stem(name)
        key = stem.lower()
        if key in seen:
            raise InputDataError(
                f"sites {seen[key]!r} and {name!r} would both write files named '{stem}' "
                "(names are reduced to letters, digits, '-' and '_'); rename one of them"
            )
        seen[key] = name


def planned_site_map_outputs(job: SiteMapJob) -> list[Path]:
    """Every file a site-centred run will write, so existing ones are refused up-front."""
    from ttmap.sitemap import combined_product_paths, site_product_paths

    _check_site_stems(job.sites.names)
    paths: list[Path] = []
    for name in job.sites.names:
        paths += site_product_paths(job.out_dir, name, vector_formats=job.vector_formats,
                                    map_formats=job.map_formats)
    if job.combined and len(job.sites) >= 2:
        paths += combined_product_paths(job.out_dir)
    paths.append(Path(job.out_dir) / "run.json")
    return paths


def run_site_map_job(job: SiteMapJob, *, progress: Callable[[str], None] | None = None) -> dict[str, Any]:
    """Site-centred maps for every site of ``job``; returns the run record (also run.json).

    The bathymetry is read and the speed field prepared once; each site gets
    one solve (:func:`ttmap.sitemap.site_centred_times`) and its products
    (:func:`ttmap.sitemap.write_site_products`). A site that cannot be placed
    (outside the grid, or no open water within the snap radius) is reported
    with a :class:`~ttmap.errors.TtmapWarning`, recorded in the run record and
    skipped; if no site can be placed, the first such error is raised. With
    two or more sites and ``combined``, the earliest time over the sites and
    the site reached first are written too
    (:func:`ttmap.sitemap.write_combined_products`).

    Raises
    ------
    TtmapError
        Bad input, site names whose files would collide, a notification
        delay out of range, an existing output without ``overwrite`` (all
        before anything is written), or no site that can be placed.
    """
    from ttmap.io.atomic import atomic_output, check_writable
    from ttmap.io.raster import read_bathymetry
    from ttmap.sitemap import (
        combine_site_times,
        site_centred_times,
        write_combined_products,
        write_site_products,
    )
    from ttmap.defaults import MAX_NOTIFICATION_DELAY_MIN

    say = progress or (lambda msg: None)
    for fmt in job.vector_formats:
        if fmt not in VECTOR_FORMATS:
            raise InputDataError(f"vector format {fmt!r} is unknown; choose from {', '.join(VECTOR_FORMATS)}")
    for fmt in job.map_formats:
        if fmt not in MAP_FORMATS:
            raise InputDataError(f"map format {fmt!r} is unknown; choose from {', '.join(MAP_FORMATS)}")
    if len(job.sites) == 0:
        raise InputDataError("no sites given; give at least one site")
    delays = {}
    for site in job.sites:
        d = job.notification_delay_min if site.notification_delay_min is None else site.notification_delay_min
        if not (math.isfinite(d) and 0.0 <= d <= MAX_NOTIFICATION_DELAY_MIN):
            raise InputDataError(
                f"site {site.name!r}: notification delay {d:g} min must lie in 0..."
                f"{MAX_NOTIFICATION_DELAY_MIN:g} minutes; give e.g. 10"
            )
        delays[site.name] = float(d)
    planned = planned_site_map_outputs(job)
    out = _refuse_outputs_up_front(job.out_dir, planned, job.overwrite)

    timings: dict[str, float] = {}
    started = _iso_now()
    t0 = time.perf_counter()
    say(f"reading bathymetry {job.bathymetry}")
    bathy = read_bathymetry(
        job.bathymetry, band=job.band, depth_positive=job.depth_positive,
        window=job.window, window_crs=job.window_crs, coarsen=job.coarsen,
    )
    grid = bathy.grid
    check_memory(grid, earth=job.earth)  # refuse, with the estimate, before a solve that cannot fit
    t1 = time.perf_counter()
    timings["read_s"] = t1 - t0
    speed = "long-wave" if job.period_s is None else f"{job.mode}, T = {job.period_s:g} s"
    say(f"computing speeds ({speed})")
    medium = prepare_medium(
        bathy.depth_m, grid, mode=job.mode, period_s=job.period_s,
        floor_depth_m=job.floor_depth_m, far_field=job.far_field, earth=job.earth,  # type: ignore[arg-type]
    )
    timings["speeds_s"] = time.perf_counter() - t1

    written: list[str] = []
    per_site: list[dict[str, Any]] = []
    skipped: list[dict[str, str]] = []
    first_error: SourceError | None = None
    best: np.ndarray | None = None
    first: np.ndarray | None = None
    solved: list[str] = []
    last = None
    created = False
    n = len(job.sites)
    for i, site in enumerate(job.sites, 1):
        tag = f"[{i}/{n} {site.name}]"
        t2 = time.perf_counter()
        say(f"{tag} solving from the site")
        src = Source.point_xy(site.x, site.y, crs=job.sites.crs, label=site.name)
        try:
            result = site_centred_times(medium, src, name=site.name, snap_radius_m=job.snap_radius_m,
                                        max_time_s=job.max_time_s)
        except SourceError as err:
            skipped.append({"name": site.name, "reason": str(err)})
            first_error = first_error or err
            continue
        t3 = time.perf_counter()
        if not created:
            out.mkdir(parents=True, exist_ok=True)
            check_writable(planned, job.overwrite)
            created = True
        files = write_site_products(
            out, site.name, result, notification_delay_min=delays[site.name], overwrite=job.overwrite,
            vector_formats=job.vector_formats, map_formats=job.map_formats,
            title_prefix=job.title_prefix, water_mask=medium.water,
            isochrone_interval_min=job.isochrone_interval_min,
        )
        written += [str(p) for p in files]
        t4 = time.perf_counter()
        timings[f"{site.name}.solve_s"] = t3 - t2
        timings[f"{site.name}.write_s"] = t4 - t3
        sm = result.summary
        per_site.append({
            "name": site.name,
            "x": site.x,
            "y": site.y,
            "crs": job.sites.crs.to_string(),
            "solve_x": sm.source_x,
            "solve_y": sm.source_y,
            "moved_m": round(float(sm.source_moved_m), 1),
            "notification_delay_min": delays[site.name],
            "notification_delay_from": "site" if site.notification_delay_min is not None else "default",
            "cells_reached": sm.cells_reached,
            "cells_unreached": sm.cells_unreached,
            "minutes_range": _range_min(result),
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
        files = write_combined_products(out, best, first, solved, grid, overwrite=job.overwrite,
                                        settings_from=last)
        written += [str(p) for p in files]
        combined_written = True
        timings["combine_s"] = time.perf_counter() - t5
    timings["total_s"] = time.perf_counter() - t0

    from ttmap.products.cautions import CAUTION_LINES
    from ttmap.sitemap import RECIPROCITY_NOTE

    record: dict[str, Any] = {
        "ttmap_run_record": 1,
        "kind": "site-centred maps",
        "started_utc": started,
        "finished_utc": _iso_now(),
        "command_line": job.command_line,
        "cautions": list(CAUTION_LINES),
        "reciprocity": RECIPROCITY_NOTE,
        "inputs": {"bathymetry": _bathymetry_record(job.bathymetry, bathy)},
        "parameters": {
            "sites": [{"name": s.name, "x": s.x, "y": s.y, "notification_delay_min": s.notification_delay_min}
                      for s in job.sites],
            "sites_crs": job.sites.crs.to_string(),
            "depth_positive": job.depth_positive,
            "window": job.window,
            "window_crs": job.window_crs or "raster CRS",
            "coarsen": job.coarsen,
            "speed_mode": job.mode,
            "period_s": job.period_s,
            "far_field": job.far_field,
            "floor_depth_m": job.floor_depth_m,
            "earth": job.earth,
            "notification_delay_min": job.notification_delay_min,
            "snap_radius_m": job.snap_radius_m,
            "max_time_s": job.max_time_s,
            "isochrone_interval_min": job.isochrone_interval_min,
            "vector_formats": list(job.vector_formats),
            "map_formats": list(job.map_formats),
            "combined": job.combined,
            "overwrite": job.overwrite,
        },
        "grid": {
            "shape": list(grid.shape),
            "crs": grid.crs.to_string(),
            "transform": list(grid.transform)[:6],
            "bounds": list(grid.bounds),
            "geographic": grid.is_geographic,
            "wraps_x": grid.wraps_x,
            "cell_size_m": [round(v, 3) for v in grid.cell_size_m()],
        },
        "sites": per_site,
        "sites_skipped": skipped,
        "combined_written": combined_written,
        "timings_s": {k: round(v, 4) for k, v in timings.items()},
        "versions": software_versions(),
        "files_written": written,
    }
    if job.sites_path is not None:
        record["inputs"]["sites"] = {
            "path": os.path.abspath(job.sites_path),
            "sha256": _file_sha256(job.sites_path),
        }
    run_json = out / "run.json"
    with atomic_output(run_json, overwrite=job.overwrite) as tmp:
        Path(tmp).write_text(json.dumps(record, indent=2, default=_json_default) + "\n")
    record["files_written"].append(str(run_json))
    return record
