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
- ``map_<set>.png`` (and .pdf on request);

then ``run.json``: inputs with SHA-256, every parameter, versions, timings,
grid summaries and the files written. Every output is written under a
temporary name and renamed when complete; existing outputs are refused
up-front unless ``overwrite`` is set.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import platform
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ttmap.errors import InputDataError, SourceError
from ttmap.sources import Source
from ttmap.traveltime import TravelTimeResult, prepare_medium

__all__ = ["MapJob", "ProductSet", "run_map_job", "planned_outputs", "software_versions"]

VECTOR_FORMATS: dict[str, str] = {"gpkg": ".gpkg", "shp": ".shp", "geojson": ".geojson"}
MAP_FORMATS: tuple[str, ...] = ("png", "pdf")


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

    Attributes are SI (metres, seconds) except the isochrone interval (minutes).
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
    floor_depth_m: float = 5.0
    earth: str = "wgs84"
    max_time_s: float | None = None
    snap_radius_m: float | None = None
    isochrone_interval_min: float | None = None
    vector_formats: Sequence[str] = ("gpkg",)
    map_formats: Sequence[str] = ("png",)
    overwrite: bool = False
    command_line: str = ""
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
    paths.append(out / "run.json")
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
    return _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()


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
        Bad input (file, source, options) or an existing output without
        ``overwrite``; nothing is written in that case.
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
    out = Path(job.out_dir)
    if out.exists() and not out.is_dir():
        raise InputDataError(f"output folder {str(out)!r} is a file; give a folder name")
    planned = planned_outputs(job)
    # Refuse existing outputs and unwritable places before any work, but
    # create the folder only when the first product is written, so that a
    # run refused for its input (missing file, source on land) leaves nothing.
    if out.is_dir():
        check_writable(planned, job.overwrite)
    else:
        _check_creatable(out)

    timings: dict[str, float] = {}
    started = _iso_now()
    t0 = time.perf_counter()
    say(f"reading bathymetry {job.bathymetry}")
    bathy = read_bathymetry(
        job.bathymetry, band=job.band, depth_positive=job.depth_positive,
        window=job.window, window_crs=job.window_crs, coarsen=job.coarsen,
    )
    grid = bathy.grid
    timings["read_s"] = time.perf_counter() - t0

    written: list[str] = []
    summaries: dict[str, Any] = {}
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
        files = _write_products(job, pset, result, medium.water)
        written += [str(p) for p in files]
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
    timings["total_s"] = time.perf_counter() - t0
    record = _run_record(job, bathy, sets, summaries, timings, written, started)
    run_json = out / "run.json"
    with atomic_output(run_json, overwrite=job.overwrite) as tmp:
        Path(tmp).write_text(json.dumps(record, indent=2, default=_json_default) + "\n")
    record["files_written"].append(str(run_json))
    return record


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
        "inputs": {
            "bathymetry": {
                "path": os.path.abspath(job.bathymetry),
                "sha256": bathy.sha256,
                "band": bathy.band,
                "notes": list(bathy.notes),
            },
        },
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


def _levels(job: MapJob, time_min: np.ndarray) -> np.ndarray:
    from ttmap.products.isochrones import default_levels_min, levels_from_interval

    finite = time_min[np.isfinite(time_min)]
    if finite.size == 0:
        return np.array([])
    tmax = float(finite.max())
    if job.isochrone_interval_min is not None:
        return levels_from_interval(job.isochrone_interval_min, tmax)
    return default_levels_min(tmax)


def _write_products(job: MapJob, pset: ProductSet, result: TravelTimeResult, water: np.ndarray) -> list[Path]:
    from ttmap.io.atomic import atomic_output
    from ttmap.io.raster import write_arrival_geotiff
    from ttmap.io.vector import VectorLayer, write_vector_layers
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.products.isochrones import isochrone_bands, isochrone_lines
    from ttmap.products.palette import arrival_colors_hex
    from ttmap.products.styles import bands_sld, lines_sld, raster_sld, write_sld

    out = Path(job.out_dir)
    grid = result.grid
    time_min = result.arrival_time_min
    written: list[Path] = []
    key = pset.key

    tif = out / f"arrival_{key}.tif"
    write_arrival_geotiff(
        tif, time_min, grid, tags=_tags(job, pset, result),
        band_description=f"arrival time of the {pset.title}, minutes after origin",
        overwrite=job.overwrite,
    )
    written.append(tif)

    levels = _levels(job, time_min)
    lines = isochrone_lines(time_min, grid.transform, levels)
    bands = isochrone_bands(time_min, grid.transform, levels)
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

    if job.map_formats:
        from ttmap.products.maps import render_arrival_map, save_figure

        src_geom = job.source.in_crs(grid.crs)
        if job.source.kind == "point":
            import shapely

            src_geom = shapely.Point(result.summary.source_x, result.summary.source_y)
        fig = render_arrival_map(
            time_min, grid.transform, land_mask=~water, lines=lines, source_geometry=src_geom,
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
