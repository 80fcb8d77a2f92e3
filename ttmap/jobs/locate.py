"""The locate job: where did the waves come from, given observed first arrivals at gauges.

:func:`run_locate_job` reads the bathymetry and a pick file
(:func:`ttmap.io.picks.read_picks`), snaps each gauge to open water (the
shared site snapping, :func:`ttmap.products.sites.snap_sites`), solves once
per gauge (reciprocity: the time from every cell to the gauge), streams the
solves into running misfit sums (:class:`ttmap.locate.MisfitSums`: serial, a
local Dask cluster or a scheduler; each worker returns only its sums) and
writes:

- ``locate_misfit.tif`` (+ ``.qml``): chi-square misfit per candidate cell
  (float32), styled in classes cut at the region levels above the best cell;
- ``locate_origin_time.tif`` (+ ``.qml``): best origin time per cell, minutes
  relative to the reference in its tags (the known origin, or the earliest
  pick), styled in round graduated classes;
- ``locate_region.gpkg`` (+ ``.sld``, ``.qml``, and a default
  ``layer_styles`` row inside): the confidence region polygon(s);
- ``locate_gauges.gpkg``: the gauges where they were solved from, with the
  residual table's columns, styled by normalised residual and labelled;
- ``locate_residuals.csv``: observed, predicted and residual per gauge at the
  best cell;
- ``locate_map.png``: misfit, region, gauges with residuals;
- ``report.html`` (unless ``report=False``): the run on one page;
- ``run.json`` last (job ``"locate"``).

The styles come from :mod:`ttmap.products.locate_styles`.

Every input is checked before any solve; nothing is written on a refusal.
It is an analysis aid: the location is as good as the picks, their
uncertainties, the bathymetry and the speed model (docs/reciprocal.md).
"""

from __future__ import annotations

import datetime as _dt
import math
import os
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace
from typing import Any

from ttmap.defaults import EXECUTORS
from ttmap.errors import InputDataError
from ttmap.jobs.batch import map_calls, medium_for_spec
from ttmap.jobs.options import ReadingOptions, SpeedOptions
from ttmap.tasks import MediumSpec

__all__ = ["LOCATE_FILES", "LOCATE_CAUTION", "REGION_LAYER", "GAUGES_LAYER", "run_locate_job"]

#: Files of a locate run (run.json is written last, beside them).
LOCATE_FILES: tuple[str, ...] = (
    "locate_misfit.tif",
    "locate_misfit.qml",
    "locate_origin_time.tif",
    "locate_origin_time.qml",
    "locate_region.gpkg",
    "locate_region.sld",
    "locate_region.qml",
    "locate_gauges.gpkg",
    "locate_residuals.csv",
    "locate_map.png",
)
#: Layer names inside the GeoPackages (each carries a default ``layer_styles`` row).
REGION_LAYER: str = "confidence_region"
GAUGES_LAYER: str = "gauges"
#: What every locate product says about itself.
LOCATE_CAUTION: str = (
    "Analysis aid only: a source location estimated from arrival times, as good as the picks, "
    "their uncertainties, the bathymetry and the speed model. It is not a warning and not an "
    "official source solution."
)


@dataclass(frozen=True)
class _GaugeChunk:
    """Gauges solved by one task; the worker returns their summed misfit terms."""

    spec: MediumSpec
    sha256: str | None
    mode: str
    period_s: float | None
    cells: tuple[tuple[int, int], ...]
    names: tuple[str, ...]
    arrival_s: tuple[float, ...]
    sigma_s: tuple[float, ...]
    a_ref_s: float
    max_time_s: float | None


def _chunk_sums(chunk: _GaugeChunk, _shared: Any) -> Any:
    """Solve the chunk's gauges one at a time and accumulate (memory: one field + sums)."""
    from ttmap.locate import MisfitSums
    from ttmap.reciprocal import site_field_s

    medium = medium_for_spec(chunk.spec, chunk.mode, chunk.period_s, chunk.sha256)
    sums = MisfitSums(medium.grid.shape, chunk.a_ref_s)
    for cell, name, a, s in zip(chunk.cells, chunk.names, chunk.arrival_s, chunk.sigma_s):
        sums.add(site_field_s(medium, cell, max_time_s=chunk.max_time_s, name=name), a, s)
    return sums


def _picks_to_seconds(
    picks: Any, origin: _dt.datetime | str | None
) -> tuple[list[float], bool, _dt.datetime | None, str]:
    """Arrival seconds, whether the origin is known, the UTC reference and a description."""
    if isinstance(origin, str) and origin.strip().lower() != "unknown":
        raise InputDataError(f"origin time {origin!r} is neither a UTC time nor 'unknown'")
    unknown = origin is None or isinstance(origin, str)
    if picks.time_kind == "minutes":
        if isinstance(origin, _dt.datetime):
            raise InputDataError(
                "the picks are minutes after their own origin; drop --origin-time (or give "
                "'unknown' to estimate it), or give the picks as time_utc clock times"
            )
        secs = [float(p.minutes_after_origin) * 60.0 for p in picks.picks]
        known = origin is None  # minutes count from a known origin unless told 'unknown'
        return secs, known, None, "minutes after the origin of the pick file" + (
            "" if known else " (origin estimated)")
    ref = min(p.time_utc for p in picks.picks)
    if isinstance(origin, _dt.datetime) and not unknown:
        o = origin.astimezone(_dt.UTC)
        secs = [(p.time_utc - o).total_seconds() for p in picks.picks]
        return secs, True, o, f"seconds after the origin time {o.isoformat()}"
    secs = [(p.time_utc - ref).total_seconds() for p in picks.picks]
    return secs, False, ref, f"seconds after the earliest pick, {ref.isoformat()}"


def run_locate_job(
    reading: ReadingOptions,
    picks_path: str | os.PathLike[str],
    out_dir: str | os.PathLike[str],
    *,
    speed: SpeedOptions | None = None,
    origin_time: _dt.datetime | str | None = None,
    confidence: float = 0.95,
    site_search_radius_m: float | None = None,
    picks_layer: str | None = None,
    overwrite: bool = False,
    executor: str = EXECUTORS[0],
    n_workers: int | None = None,
    say: Callable[[str], None] | None = None,
    command_line: str = "",
    report: bool = True,
) -> dict[str, Any]:
    """Locate the source of observed first arrivals; write the products and ``run.json``.

    Parameters
    ----------
    reading : ReadingOptions
        The bathymetry and how to read it (as for ``ttmap map``).
    picks_path : path-like
        Pick file (:mod:`ttmap.io.picks`).
    out_dir : path-like
        Output folder (created).
    speed : SpeedOptions, optional
        Speed model: the long-wave front, or with one period in
        ``periods_s`` the ``period_speed`` (group by default) of that period,
        for short-period sources. ``max_time_s`` stops each gauge solve.
    origin_time : datetime, "unknown" or None
        Known origin time (UTC) for clock-time picks; ``None`` or
        ``"unknown"``: estimated. Picks in minutes after the origin count
        from a known origin unless ``"unknown"`` is given.
    confidence : float
        Level of the confidence region (default 0.95; chi-square with 2
        degrees of freedom, docs/reciprocal.md).
    site_search_radius_m : float, optional
        How far a gauge may be moved to open water (default: the site
        search radius of :mod:`ttmap.defaults`).
    picks_layer : str, optional
        Layer of a vector pick file.
    overwrite : bool
        Replace existing outputs.
    executor, n_workers
        As for :func:`ttmap.jobs.batch.map_calls`; the gauges are split into
        one chunk per worker.
    say : callable, optional
        Progress messages.
    command_line : str
        Recorded in ``run.json``.
    report : bool
        Write ``report.html`` (the run on one self-contained page) just
        before ``run.json``.

    Returns
    -------
    dict
        The run record (``record["location"]`` holds the best cell, origin
        time, region shape and the open/elongated message).

    Raises
    ------
    InputDataError
        Any bad input (picks, positions, times, options), before anything is
        written.
    OutputExistsError
        An output exists and ``overwrite`` is False.
    """
    from ttmap.defaults import SITE_SEARCH_RADIUS_M
    from ttmap.io.atomic import check_writable
    from ttmap.io.picks import read_picks
    from ttmap.io.raster import file_sha256
    from ttmap.io.sites import sites_from_lonlat
    from ttmap.jobs.plan import REPORT_NAME, RUN_RECORD_NAME
    from ttmap.jobs.record import utc_now
    from ttmap.locate import check_picks, delta_chi2
    from ttmap.products.sites import SNAP_MOVED, SNAP_NO_WATER, SNAP_OUTSIDE, snap_sites

    say = say or (lambda _m: None)
    started = utc_now()
    t_start = time.perf_counter()
    speed = speed or SpeedOptions()
    if len(speed.periods_s) > 1:
        raise InputDataError(
            f"locate uses one speed model; give at most one period, got {len(speed.periods_s)}"
        )
    mode = "long-wave" if not speed.periods_s else speed.period_speed
    period = float(speed.periods_s[0]) if speed.periods_s else None
    delta = delta_chi2(confidence)  # checks the level
    radius = SITE_SEARCH_RADIUS_M if site_search_radius_m is None else float(site_search_radius_m)
    if not (math.isfinite(radius) and radius >= 0.0):
        raise InputDataError(f"site search radius {radius!r} m must be 0 or more")
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputDataError(f"output folder {str(out)!r} is a file; give a folder name")
    targets = [out / n for n in LOCATE_FILES]
    run_json = out / RUN_RECORD_NAME
    if out.is_dir():
        check_writable([*targets, *([out / REPORT_NAME] if report else []), run_json], overwrite)

    # 1. Picks, checked before anything is solved.
    picks = read_picks(picks_path, layer=picks_layer)
    arrival_s, known, ref_utc, time_base = _picks_to_seconds(picks, origin_time)
    names, a, s = check_picks(picks.names, arrival_s, [p.sigma_s for p in picks.picks],
                              origin_known=known)

    # 2. Bathymetry, medium, gauge snapping.
    t0 = time.perf_counter()
    spec = MediumSpec(
        bathymetry=str(Path(reading.path).absolute()) if os.path.exists(reading.path) else reading.path,
        band=reading.band, depth_positive=reading.depth_positive, window=reading.window,
        window_crs=reading.window_crs, coarsen=reading.coarsen, nodata=reading.nodata,
        refine=reading.refine, floor_depth_m=speed.floor_depth_m, far_field=speed.far_field, earth=speed.earth,
    )
    sha = file_sha256(spec.bathymetry) if os.path.isfile(spec.bathymetry) else None
    medium = medium_for_spec(spec, mode, period, sha)
    grid = medium.grid
    sites = sites_from_lonlat([(p.name, p.lon, p.lat) for p in picks.picks])
    snapped = snap_sites(sites, grid, medium.open_water, search_radius_m=radius, depth_m=medium.depth_m)
    for sn, pk in zip(snapped, picks.picks, strict=True):
        where = f"gauge {pk.name!r} (lon {pk.lon:g}, lat {pk.lat:g})"
        if sn.status == SNAP_OUTSIDE:
            raise InputDataError(
                f"{where} lies off the grid ({grid.bounds_text() if hasattr(grid, 'bounds_text') else grid.bounds}); "
                "remove the pick or use a larger bathymetry"
            )
        if sn.status == SNAP_NO_WATER:
            raise InputDataError(
                f"{where} is on land with no open water within {radius / 1000:g} km; check its "
                "position or raise --site-search-radius-km"
            )
    read_s = time.perf_counter() - t0
    moved = [sn for sn in snapped if sn.status == SNAP_MOVED]
    say(f"{len(names)} picks ({time_base}); {len(moved)} gauge(s) moved to open water; "
        f"{'known' if known else 'unknown'} origin time")

    # 3. One solve per gauge, summed in the workers.
    w = 1.0 / s**2
    a_ref = 0.0 if known else float((w * a).sum() / w.sum())
    cells = [(sn.row, sn.col) for sn in snapped]
    n_chunks = 1 if executor == "serial" else max(1, min(len(names), n_workers or (os.cpu_count() or 1)))
    chunks = []
    for k in range(n_chunks):
        idx = list(range(k, len(names), n_chunks))
        chunks.append(_GaugeChunk(
            spec, sha, mode, period, tuple(cells[i] for i in idx), tuple(names[i] for i in idx),
            tuple(float(a[i]) for i in idx), tuple(float(s[i]) for i in idx), a_ref,
            speed.max_time_s,
        ))
    say(f"solving once per gauge ({len(names)} solves, {mode}"
        + (f", T = {period:g} s" if period else "") + f", executor {executor})")
    t0 = time.perf_counter()
    parts = map_calls(_chunk_sums, chunks, executor=executor, n_workers=n_workers)
    sums = parts[0]
    for p in parts[1:]:
        sums.merge(p)
    solve_s = time.perf_counter() - t0

    from ttmap.locate import locate_from_sums
    from ttmap.sources import Source

    def at_best(row: int, col: int) -> list[float]:
        x, y = grid.xy(row, col)
        t = medium.travel_time(Source.point_xy(float(x), float(y)), max_time_s=speed.max_time_s)
        return [float(t.arrival_time_s[c]) for c in cells]

    t0 = time.perf_counter()
    loc = locate_from_sums(sums, grid, names, at_best, cells, a.tolist(), origin_known=known,
                           level=confidence, water=medium.water)
    locate_s = time.perf_counter() - t0

    # 4. Products, all together, then run.json.
    t0 = time.perf_counter()
    best_lon, best_lat = _lonlat(grid, loc.best_x, loc.best_y)
    best_origin_utc = (
        (ref_utc + _dt.timedelta(seconds=round(loc.best_origin_time_s))).isoformat()
        if (ref_utc is not None) else None
    )
    origin_ref_text = (
        ref_utc.isoformat() if ref_utc is not None else "the origin of the pick file's minutes"
    )
    residual_rows = _residual_rows(picks, snapped, names, a, s, loc, known)
    diag = dict(loc.diagnostics)
    summary = {
        "best_row": loc.best_row,
        "best_col": loc.best_col,
        "best_x": loc.best_x,
        "best_y": loc.best_y,
        "best_lon": best_lon,
        "best_lat": best_lat,
        "best_origin_time_min": loc.best_origin_time_s / 60.0,
        "origin_time_reference": origin_ref_text,
        "best_origin_time_utc": best_origin_utc,
        "origin_known": known,
        "best_misfit_chi2": loc.best_misfit,
        "degrees_of_freedom_fit": len(names) - (0 if known else 1),
        "confidence": confidence,
        "delta_chi2": delta,
        "region_dof": 2,
        "region": {k: diag[k] for k in ("major_km", "minor_km", "axis_ratio", "major_azimuth_deg",
                                          "touches_edge", "azimuthal_gap_deg", "region_cells")},
        "open": bool(diag["open"]),
        "elongated": bool(diag["elongated"]),
        "message": diag["message"],
        "speed_model": mode + (f" T = {period:g} s" if period else ""),
        "caution": LOCATE_CAUTION,
    }
    # Built in a staging folder and moved into place whole, run.json last (as every job).
    from ttmap.jobs.staging import staged_output

    with staged_output(out, overwrite=overwrite) as stage:
        staged = [stage.new / t.name for t in targets]
        _write_products(staged, grid, medium, loc, residual_rows, picks, snapped, summary, overwrite)
        write_s = time.perf_counter() - t0

        from ttmap.jobs.record import build_run_record, file_entry
        from ttmap.jobs.styling import write_report_and_record

        if report:
            staged.append(stage.new / REPORT_NAME)  # written from the record, just before run.json

        record = build_run_record(
            job="locate",
            started_utc=started,
            command_line=command_line,
            inputs={"bathymetry": file_entry(reading.path), "picks": file_entry(picks.path, count=len(names))},
            parameters={
                "reading": {"band": reading.band, "depth_positive": reading.depth_positive,
                            "window": None if reading.window is None else list(reading.window),
                            "coarsen": reading.coarsen, "refine": reading.refine,
                            "nodata": reading.nodata},
                "speed_model": mode,
                "period_s": period,
                "floor_depth_m": speed.floor_depth_m,
                "far_field": speed.far_field,
                "earth": speed.earth,
                "max_time_s": speed.max_time_s,
                "origin_time": (origin_time.isoformat() if isinstance(origin_time, _dt.datetime)
                                else (origin_time or ("known (minutes picks)" if known else "unknown"))),
                "origin_known": known,
                "pick_time_base": time_base,
                "confidence": confidence,
                "site_search_radius_m": radius,
                "executor": executor,
                "workers": n_workers,
                "report": report,
                "out_dir": str(out),
            },
            timings_s={"read_s": read_s, "solve_s": solve_s, "locate_s": locate_s, "write_s": write_s,
                       "total_s": time.perf_counter() - t_start},
            products=[str(t) for t in staged],
            out_dir=stage.new,
            grid=grid,
            notes=[LOCATE_CAUTION, diag["message"]],
            location=summary,
            picks=residual_rows,
        )
        write_report_and_record(record, stage.new, report=report, overwrite=True, say=say)
    record["run_json"] = str(run_json)
    return record


def _lonlat(grid: Any, x: float, y: float) -> tuple[float, float]:
    if grid.is_geographic:
        return float(x), float(y)
    from pyproj import Transformer

    lon, lat = Transformer.from_crs(grid.crs, 4326, always_xy=True).transform(x, y)
    return float(lon), float(lat)


def _residual_rows(
    picks: Any, snapped: Sequence[Any], names: Sequence[str], a: Any, s: Any, loc: Any, known: bool
) -> list[dict[str, Any]]:
    rows = []
    t0 = 0.0 if known else loc.best_origin_time_s
    for pk, sn, n, ak, sk in zip(picks.picks, snapped, names, a.tolist(), s.tolist(), strict=True):
        r = loc.residual_s[n]
        rows.append({
            "name": n,
            "lon": pk.lon,
            "lat": pk.lat,
            "snap_status": sn.status,
            "moved_m": sn.moved_m,
            "observed_min": ak / 60.0,
            "predicted_min": (ak - t0 - r) / 60.0,
            "origin_min": t0 / 60.0,
            "residual_min": r / 60.0,
            "sigma_min": sk / 60.0,
            "normalised": r / sk,
        })
    return rows


def _write_products(
    targets: Sequence[Path], grid: Any, medium: Any, loc: Any, rows: Sequence[dict[str, Any]],
    picks: Any, snapped: Sequence[Any], summary: dict[str, Any], overwrite: bool,
) -> None:
    import numpy as np
    from shapely.geometry import Point

    from ttmap.io.atomic import atomic_output_set
    from ttmap.io.figures import save_figure
    from ttmap.io.raster import write_raster
    from ttmap.io.sites import write_site_table_csv
    from ttmap.io.styles import write_gpkg_layer_style, write_qml, write_sld
    from ttmap.io.vector import VectorLayer, write_vector_layers
    from ttmap.products import locate_styles as ls
    from ttmap.products.cautions import CAUTION_SHORT
    from ttmap.products.locate_map import render_locate_map

    import ttmap

    base_tags = {"SOFTWARE": f"ttmap {ttmap.__version__}", "CAUTION": LOCATE_CAUTION + " " + CAUTION_SHORT}
    level_pct = f"{100 * summary['confidence']:g} %"
    gpkg_meta = {"caution": LOCATE_CAUTION, "software": f"ttmap {ttmap.__version__}"}
    style_note = f"{LOCATE_CAUTION} {CAUTION_SHORT}"
    with atomic_output_set(list(targets), overwrite=overwrite) as tmp:
        t = dict(zip(LOCATE_FILES, tmp, strict=True))
        write_raster(
            t["locate_misfit.tif"], loc.misfit, grid, dtype="float32",
            tags={**base_tags, "QUANTITY": "chi-square misfit of the picks for a source at this cell",
                  "BEST_MISFIT": f"{loc.best_misfit:.4f}", "DELTA_CHI2": f"{loc.delta_chi2:.4f}",
                  "CONFIDENCE": level_pct,
                  "REGION": f"cells with misfit <= {loc.best_misfit + loc.delta_chi2:.4f}"},
            band_description="chi-square misfit", overwrite=True,
        )
        excess = np.asarray(loc.misfit) - loc.best_misfit
        finite = excess[np.isfinite(excess)]
        write_qml(t["locate_misfit.qml"], ls.misfit_qml(
            loc.best_misfit, summary["confidence"], layer_name="locate_misfit",
            max_excess=float(finite.max()) if finite.size else None), overwrite=True)
        origin_min = np.asarray(loc.origin_time_s) / 60.0
        write_raster(
            t["locate_origin_time.tif"], origin_min, grid, dtype="float32",
            tags={**base_tags, "QUANTITY": "best origin time for a source at this cell, minutes",
                  "UNITS": "minutes", "REFERENCE": summary["origin_time_reference"]},
            band_description=f"origin time, minutes after {summary['origin_time_reference']}",
            units="minutes", overwrite=True,
        )
        write_qml(t["locate_origin_time.qml"], ls.origin_time_qml(
            origin_min.astype(np.float32), reference=summary["origin_time_reference"],
            layer_name="locate_origin_time", best_origin_min=summary["best_origin_time_min"]), overwrite=True)
        geoms = [] if loc.polygons is None else list(getattr(loc.polygons, "geoms", [loc.polygons]))
        layer = VectorLayer(
            REGION_LAYER, geoms,
            {"confidence": [summary["confidence"]] * len(geoms),
             "delta_chi2": [loc.delta_chi2] * len(geoms),
             "best_chi2": [loc.best_misfit] * len(geoms)},
            geometry_type="MultiPolygon",
            description=f"{level_pct} confidence region of the source location. {LOCATE_CAUTION}",
        )
        write_vector_layers(t["locate_region.gpkg"], [layer], crs=grid.crs, overwrite=True, metadata=gpkg_meta)
        region_sld, region_qml = ls.region_sld(level_pct, layer_name=REGION_LAYER), ls.region_qml(level_pct)
        write_gpkg_layer_style(t["locate_region.gpkg"], REGION_LAYER, region_qml, sld_text=region_sld,
                               description=style_note)
        write_sld(t["locate_region.sld"], region_sld, overwrite=True)
        write_qml(t["locate_region.qml"], region_qml, overwrite=True)
        gauge_cols = ("name", "observed_min", "predicted_min", "residual_min", "sigma_min", "normalised",
                      "moved_m", "snap_status", "lon", "lat")
        gauges_layer = VectorLayer(
            GAUGES_LAYER, [Point(float(sn.x), float(sn.y)) for sn in snapped],
            {k: [r[k] for r in rows] for k in gauge_cols},
            geometry_type="Point",
            description=("Gauges where they were solved from (moved_m: distance moved to open water; lon, "
                         "lat: the position given). Residual = observed - origin - predicted travel time at "
                         f"the best cell, minutes; normalised = residual / sigma. {LOCATE_CAUTION}"),
        )
        write_vector_layers(t["locate_gauges.gpkg"], [gauges_layer], crs=grid.crs, overwrite=True,
                            metadata=gpkg_meta)
        write_gpkg_layer_style(t["locate_gauges.gpkg"], GAUGES_LAYER, ls.gauges_qml(), description=style_note)
        table = SimpleNamespace(
            columns={k: [r[k] for r in rows] for k in rows[0]},
            comments=[CAUTION_SHORT, LOCATE_CAUTION,
                      f"best cell lon {summary['best_lon']:.4f} lat {summary['best_lat']:.4f}; "
                      "residual = observed - origin - predicted travel time, minutes"],
            decimals={"observed_min": 2, "predicted_min": 2, "origin_min": 2, "residual_min": 2,
                      "sigma_min": 2, "normalised": 2, "moved_m": 0, "lon": 5, "lat": 5},
        )
        write_site_table_csv(t["locate_residuals.csv"], table, overwrite=True)
        gauges = [(n["name"], float(sn.x), float(sn.y), float(n["residual_min"]))
                  for n, sn in zip(rows, snapped, strict=True)]
        origin_txt = (f"origin {summary['best_origin_time_utc']}" if summary["best_origin_time_utc"]
                      else f"origin {summary['best_origin_time_min']:+.1f} min")
        fig = render_locate_map(
            excess, grid, medium.water, loc.polygons, gauges, (loc.best_x, loc.best_y),
            title="Source location from observed first arrivals",
            subtitle=(f"best cell lon {summary['best_lon']:.3f}, lat {summary['best_lat']:.3f}; "
                      f"{origin_txt}; {level_pct} region; {summary['message']}"),
            caution=LOCATE_CAUTION + "\n" + CAUTION_SHORT,
            delta_chi2=loc.delta_chi2, level=summary["confidence"],
        )
        save_figure(fig, t["locate_map.png"], format="png")
        import matplotlib.pyplot as plt

        plt.close(fig)
