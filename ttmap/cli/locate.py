"""``ttmap locate``: where did the waves come from, given observed first arrivals."""

from __future__ import annotations

import shlex
import sys
from typing import Any

import click

from ttmap.cli.options import (
    bathymetry_options,
    period_speed_option,
    positive_callback,
    reading_from_options,
    site_search_radius_option,
    speed_from_options,
    speed_model_options,
    verbosity_options,
)

__all__ = ["locate_command", "origin_callback"]


def origin_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    """``--origin-time``: an ISO 8601 time with a zone, or 'unknown'."""
    if value is None or str(value).strip().lower() == "unknown":
        return None if value is None else "unknown"
    from ttmap.cli.options import parse_origin_time

    try:
        return parse_origin_time(value)
    except ValueError as err:
        raise click.BadParameter(f"{err}, or 'unknown'", ctx=ctx, param=param) from None


def _confidence(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    if value is not None and not (0.0 < value < 1.0):
        raise click.BadParameter(f"{value!r} must lie between 0 and 1, e.g. 0.95", ctx=ctx, param=param)
    return value


@click.command("locate")
@click.argument("bathymetry", type=click.Path(dir_okay=False))
@click.option("--picks", "picks_file", required=True, type=click.Path(dir_okay=False), metavar="FILE",
              help="Observed first arrivals: CSV (or point vector file) with name, lon, lat, "
                   "time_utc (ISO clock time) or minutes_after_origin, and uncertainty_min or "
                   "uncertainty_s per pick.")
@click.option("--picks-layer", metavar="LAYER", help="Layer of a multi-layer vector pick file.")
@click.option("--origin-time", callback=origin_callback, metavar="TIME|unknown",
              help="Known origin time (ISO 8601 with zone, e.g. 2030-01-01T00:00:00Z), or "
                   "'unknown' to estimate it. Default: unknown for clock-time picks; picks in "
                   "minutes_after_origin count from their known origin.")
@click.option("--confidence", type=float, default=0.95, show_default=True, callback=_confidence,
              help="Level of the confidence region (chi-square, 2 degrees of freedom).")
@site_search_radius_option("Move a gauge on land to the nearest open water within this distance.")
@click.option("--period-s", type=float, callback=positive_callback,
              help="Locate with the group speed of this wave period (short-period sources); "
                   "default: the long-wave front.")
@period_speed_option
@speed_model_options
@bathymetry_options
@click.option("--max-time-h", type=float, callback=positive_callback, help="Stop each gauge solve here.")
@click.option("--executor", default="serial", show_default=True, metavar="serial|local|ADDRESS",
              help="Where to solve the gauges: this process, a local Dask cluster, or a scheduler.")
@click.option("--workers", type=click.IntRange(min=1), help="Workers of a local cluster.")
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default="ttmap_locate",
              show_default=True, help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@click.option("--no-report", is_flag=True, help="Skip report.html (the run on one self-contained page).")
@verbosity_options
@click.pass_context
def locate_command(ctx: click.Context, bathymetry: str, **opts: Any) -> None:
    """Locate the source of observed first arrivals on BATHYMETRY.

    One solve per gauge (reciprocity); the misfit of the picks at every
    candidate cell, the best cell and origin time, a confidence region, and
    the residual per gauge. Writes locate_misfit.tif, locate_origin_time.tif
    (each with a QGIS style, .qml), locate_region.gpkg (+ .sld, .qml),
    locate_gauges.gpkg, locate_residuals.csv, locate_map.png, report.html and
    run.json.

    \b
    Example:
        ttmap locate demo_bathymetry/demo_bathymetry.tif \\
            --picks demo_bathymetry/demo_picks.csv --out where

    An analysis aid only: not a warning and not an official source solution.
    """
    from ttmap.jobs.locate import LOCATE_CAUTION, run_locate_job
    from ttmap.tasks import check_executor

    problem = check_executor(opts["executor"])
    if problem:
        raise click.BadParameter(problem, param_hint="--executor")
    from ttmap.cli.options import reporter

    with reporter(ctx) as rep:
        reading = reading_from_options(bathymetry, opts)
        period = opts.get("period_s")
        speed = speed_from_options(opts, (period,) if period else ())
        radius_km = opts.get("site_search_radius_km")
        record = run_locate_job(
            reading, opts["picks_file"], opts["out_dir"], speed=speed,
            origin_time=opts.get("origin_time"), confidence=opts["confidence"],
            site_search_radius_m=None if radius_km is None else radius_km * 1000.0,
            picks_layer=opts.get("picks_layer"), overwrite=opts["overwrite"],
            executor=opts["executor"], n_workers=opts.get("workers"), say=rep.stage,
            command_line=shlex.join(["ttmap", *sys.argv[1:]]),
            report=not opts.get("no_report"),
        )
        loc = record["location"]
        origin = (loc["best_origin_time_utc"] or
                  f"{loc['best_origin_time_min']:+.2f} min after {loc['origin_time_reference']}")
        rep.stage(
            f"best cell: lon {loc['best_lon']:.4f}, lat {loc['best_lat']:.4f} "
            f"(row {loc['best_row']}, col {loc['best_col']}); origin time {origin}"
            + (" (known)" if loc["origin_known"] else " (estimated)")
        )
        rep.stage(
            f"misfit chi-square {loc['best_misfit_chi2']:.2f} on {loc['degrees_of_freedom_fit']} "
            f"degree(s) of freedom; {100 * loc['confidence']:g} % region: chi-square + "
            f"{loc['delta_chi2']:.2f} (2 degrees of freedom), {loc['region']['region_cells']} cells, "
            f"{loc['region']['major_km']:.0f} x {loc['region']['minor_km']:.0f} km (1-sigma axes)"
        )
        if loc["open"] or loc["elongated"]:
            rep.notice(loc["message"])
        else:
            rep.stage(loc["message"])
        for row in record["picks"]:
            rep.stage(f"  {row['name']}: residual {row['residual_min']:+.2f} min "
                      f"({row['normalised']:+.1f} sigma)")
        rep.stage(f"products and run record in {record['parameters']['out_dir']}")
        rep.stage(LOCATE_CAUTION)
