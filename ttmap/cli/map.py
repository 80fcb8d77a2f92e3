"""``ttmap map``: arrival-time products for one source."""

from __future__ import annotations

import shlex
import sys
from typing import Any

import click

from ttmap.cli.options import (
    bbox_callback,
    pair_callback,
    positive_callback,
    reporter,
    verbosity_options,
)
from ttmap.physics.scaling import SCALING_RELATIONS

__all__ = ["map_command", "bathymetry_options", "build_source"]

SCALING_CHOICES = tuple(SCALING_RELATIONS)


def bathymetry_options(f: Any) -> Any:
    """Options shared by commands that read a bathymetry raster."""
    f = click.option("--coarsen", type=click.IntRange(min=1), default=1, show_default=True,
                     help="Average depth over N x N blocks first (faster, coarser).")(f)
    f = click.option("--crop-xy", callback=bbox_callback, metavar="W,S,E,N",
                     help="Crop to a window in the raster's own map units.")(f)
    f = click.option("--crop-lonlat", callback=bbox_callback, metavar="W,S,E,N",
                     help="Crop to a longitude/latitude window (degrees).")(f)
    f = click.option("--depth-positive", is_flag=True,
                     help="Values are depths (positive down), not elevations.")(f)
    f = click.option("--band", type=click.IntRange(min=1), help="Band to read from a multi-band raster.")(f)
    return f


def build_source(opts: dict[str, Any]) -> Any:
    """The Source chosen by the source options; BadParameter-style errors as UsageError."""
    from ttmap.sources import Source

    chosen = [k for k in ("source", "source_xy", "source_file", "rupture_centre") if opts.get(k) is not None]
    if len(chosen) != 1:
        raise click.UsageError(
            "give exactly one source: --source LON,LAT, --source-xy X,Y, --source-file PATH "
            "or --rupture-centre LON,LAT"
        )
    kind = chosen[0]
    if kind == "source":
        lon, lat = opts["source"]
        return Source.point(lon, lat)
    if kind == "source_xy":
        x, y = opts["source_xy"]
        return Source.point_xy(x, y)
    if kind == "source_file":
        import shapely

        from ttmap.io.vector import read_vector_geometries

        geoms, crs = read_vector_geometries(opts["source_file"])
        geom = shapely.union_all([g for g in geoms if g is not None])
        return Source.from_geometry(geom, crs=crs, label=f"source from {opts['source_file']}")
    lon, lat = opts["rupture_centre"]
    strike = opts.get("strike_deg")
    if strike is None:
        raise click.UsageError("a rupture needs --strike-deg (azimuth of its long side, degrees from north)")
    if opts.get("magnitude_mw") is not None:
        if opts.get("length_km") is not None or opts.get("width_km") is not None:
            raise click.UsageError("give either --magnitude-mw or --length-km/--width-km, not both")
        return Source.rupture_from_magnitude(lon, lat, strike_deg=strike, mw=opts["magnitude_mw"],
                                             relation=opts["scaling_law"])
    if opts.get("length_km") is None or opts.get("width_km") is None:
        raise click.UsageError("a rupture needs --magnitude-mw, or both --length-km and --width-km")
    return Source.rupture(lon, lat, strike_deg=strike, length_km=opts["length_km"], width_km=opts["width_km"])


@click.command("map")
@click.argument("bathymetry", type=click.Path(dir_okay=False))
@click.option("--source", metavar="LON,LAT", callback=pair_callback(("LON", "LAT")),
              help="Point source, longitude,latitude in degrees (negative values welcome).")
@click.option("--source-xy", metavar="X,Y", callback=pair_callback(("X", "Y")),
              help="Point source in the raster's map coordinates.")
@click.option("--source-file", type=click.Path(exists=True, dir_okay=False),
              help="Source area or line from a vector file (GeoPackage, GeoJSON, Shapefile...).")
@click.option("--rupture-centre", metavar="LON,LAT", callback=pair_callback(("LON", "LAT")),
              help="Centre of a rupture rectangle (with --strike-deg and a size).")
@click.option("--strike-deg", type=float, help="Rupture strike, degrees clockwise from north.")
@click.option("--length-km", type=float, callback=positive_callback, help="Rupture length along strike.")
@click.option("--width-km", type=float, callback=positive_callback, help="Rupture width across strike.")
@click.option("--magnitude-mw", type=click.FloatRange(6.0, 9.6), help="Size the rupture from moment magnitude.")
@click.option("--scaling-law", type=click.Choice(SCALING_CHOICES), default="strasser2010-interface",
              show_default=True, help="Magnitude-to-size scaling relation.")
@click.option("--snap-radius-km", type=float, callback=positive_callback,
              help="Move a point source on land or in a closed basin to open water within this distance.")
@click.option("--period-s", type=float, multiple=True, callback=positive_callback,
              help="Wave period in seconds; repeat for several. Each adds a product set for the energy "
                   "arrival of that period.")
@click.option("--period-speed", type=click.Choice(["group", "phase"]), default="group", show_default=True,
              help="Speed used for the --period-s product sets.")
@click.option("--front/--no-front", default=True, show_default=True,
              help="Produce the front (long-wave speed, earliest arrival) set.")
@click.option("--far-field-correction/--no-far-field-correction", default=False, show_default=True,
              help="Slow long waves by an effective depth (observed far-field delay of 1-2 %).")
@click.option("--floor-depth-m", type=float, default=5.0, show_default=True, callback=positive_callback,
              help="Water shallower than this is given this depth.")
@click.option("--earth", type=click.Choice(["wgs84", "sphere"]), default="wgs84", show_default=True,
              help="Figure of the Earth for longitude/latitude rasters.")
@click.option("--max-time-h", type=float, callback=positive_callback, help="Stop at this many hours.")
@click.option("--isochrone-interval-min", type=float, callback=positive_callback,
              help="Isochrone spacing in minutes (default: 10 min to 2 h, then 30 min, then 60 min).")
@click.option("--vector-format", type=click.Choice(["gpkg", "shp", "geojson"]), multiple=True,
              help="Isochrone file format; repeat for several (default gpkg).")
@click.option("--map-format", type=click.Choice(["png", "pdf"]), multiple=True,
              help="Map format; repeat for several (default png).")
@click.option("--no-map", is_flag=True, help="Skip the map picture.")
@bathymetry_options
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default="ttmap_out", show_default=True,
              help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@verbosity_options
@click.pass_context
def map_command(ctx: click.Context, bathymetry: str, **opts: Any) -> None:
    """Arrival-time raster, isochrones, styles and a map for one source.

    BATHYMETRY is a raster of elevation (negative below sea level) or, with
    --depth-positive, of depth. Example:

        ttmap map bathy.tif --source -147.2,-34.6 --period-s 600 --out run1

    A planning aid only; official warning centres and local emergency
    management decide.
    """
    with reporter(ctx) as rep:
        job = job_from_options(bathymetry, opts)
        record = _run(job, rep)
        _report(rep, record, job.out_dir)


def job_from_options(bathymetry: str, opts: dict[str, Any]) -> Any:
    from ttmap.mapjob import MapJob

    if opts.get("crop_lonlat") and opts.get("crop_xy"):
        raise click.UsageError("give --crop-lonlat or --crop-xy, not both")
    window = opts.get("crop_lonlat") or opts.get("crop_xy")
    source = build_source(opts)
    return MapJob(
        bathymetry=bathymetry,
        source=source,
        out_dir=opts["out_dir"],
        band=opts.get("band"),
        depth_positive=opts.get("depth_positive", False),
        window=window,
        window_crs=None if opts.get("crop_xy") else "EPSG:4326",
        coarsen=opts.get("coarsen", 1),
        periods_s=tuple(opts.get("period_s") or ()),
        period_mode=opts.get("period_speed", "group"),
        front=opts.get("front", True),
        far_field=opts.get("far_field_correction", False),
        floor_depth_m=opts.get("floor_depth_m", 5.0),
        earth=opts.get("earth", "wgs84"),
        max_time_s=None if opts.get("max_time_h") is None else opts["max_time_h"] * 3600.0,
        snap_radius_m=None if opts.get("snap_radius_km") is None else opts["snap_radius_km"] * 1000.0,
        isochrone_interval_min=opts.get("isochrone_interval_min"),
        vector_formats=tuple(opts.get("vector_format") or ("gpkg",)),
        map_formats=() if opts.get("no_map") else tuple(opts.get("map_format") or ("png",)),
        overwrite=opts.get("overwrite", False),
        command_line=shlex.join(["ttmap", *sys.argv[1:]]),
    )


def _run(job: Any, rep: Any) -> Any:
    from ttmap.mapjob import run_map_job

    return run_map_job(job, progress=rep.stage)


def _report(rep: Any, record: dict[str, Any], out_dir: str) -> None:
    from ttmap.products.cautions import CAUTION_SHORT

    for key, s in record["product_sets"].items():
        rng = s.get("arrival_min_range")
        span = f"{rng[0]:.0f}-{rng[1]:.0f} min" if rng else "no arrivals"
        rep.stage(
            f"{key}: {s['cells_reached']} water cells reached ({span}), {s['cells_unreached']} unreached "
            f"in {s['unreached_basins']} closed basins, {s['diagonal_joins_opened']} diagonal joins opened"
        )
        if s.get("source_moved_m"):
            rep.notice(f"the source was moved {s['source_moved_m'] / 1000:.2f} km to open water")
    rep.stage(f"{len(record['files_written'])} files written to {out_dir} (run record: run.json)")
    rep.stage(CAUTION_SHORT)
