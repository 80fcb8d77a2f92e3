"""``ttmap map``: arrival-time products for one source."""

from __future__ import annotations

import datetime as _dt
import math
import shlex
import sys
from typing import Any

import click

from ttmap.cli.options import (
    bbox_callback,
    pair_callback,
    positive_callback,
    product_options,
    reporter,
    speed_model_options,
    verbosity_options,
)
from ttmap.physics.scaling import SCALING_RELATIONS
from ttmap.defaults import FLOOR_DEPTH_M, NOTIFICATION_DELAY_MIN, PREPARATION_MIN, WALKING_SPEED_M_S, LITTLE_MARGIN_MIN
from ttmap.defaults import COAST_CLASS_INTERVAL_MIN
from ttmap.defaults import SITE_SEARCH_RADIUS_M, SPEED_UNCERTAINTY

__all__ = [
    "bathymetry_options",
    "build_source",
    "finite_callback",
    "map_command",
    "origin_time_callback",
    "parse_origin_time",
    "site_file_options",
]

SCALING_CHOICES = tuple(SCALING_RELATIONS)


def finite_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    """Refuse NaN and infinite numbers (click's ranges let them through)."""
    if value is None:
        return None
    for v in value if isinstance(value, tuple) else (value,):
        if not math.isfinite(v):
            raise click.BadParameter(f"{v!r} is not a finite number", ctx=ctx, param=param)
    return value


def parse_origin_time(value: str) -> _dt.datetime:
    """An ISO 8601 time with a zone (``Z`` or an offset), as UTC; ValueError otherwise.

    >>> parse_origin_time("2026-03-01T16:12:00+13:00").isoformat()
    '2026-03-01T03:12:00+00:00'
    >>> parse_origin_time("2026-03-01T03:12:00Z").isoformat()
    '2026-03-01T03:12:00+00:00'
    """
    text = str(value).strip()
    try:
        t = _dt.datetime.fromisoformat(text)
    except ValueError:
        raise ValueError(
            f"{value!r} is not an ISO 8601 time; give e.g. 2026-03-01T03:12:00Z"
        ) from None
    if t.tzinfo is None or t.utcoffset() is None:
        raise ValueError(
            f"{value!r} has no time zone; add Z for UTC or an offset, e.g. 2026-03-01T03:12:00Z "
            "or 2026-03-01T16:12:00+13:00"
        )
    return t.astimezone(_dt.UTC)


def origin_time_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    if value is None:
        return None
    try:
        return parse_origin_time(value)
    except ValueError as err:
        raise click.BadParameter(str(err), ctx=ctx, param=param) from None


def site_file_options(f: Any) -> Any:
    """``--sites FILE`` and how to read it (layer, name field, CRS)."""
    f = click.option("--sites-crs", metavar="CRS",
                     help="CRS of x,y columns in a CSV site file (or of a vector file that declares "
                          "none), e.g. EPSG:32759. lon,lat columns are WGS84 degrees.")(f)
    f = click.option("--name-field", metavar="COLUMN",
                     help="Column holding the site names (default: name).")(f)
    f = click.option("--sites-layer", metavar="LAYER", help="Layer of a multi-layer vector site file.")(f)
    f = click.option("--sites", "sites_file", type=click.Path(dir_okay=False), metavar="FILE",
                     help="Coastal sites: CSV with name,lon,lat and optional safe_ground_distance_m, "
                          "walking_speed_m_s, preparation_min, notification_delay_min; or a point "
                          "vector file with those attributes.")(f)
    return f


def site_table_options(f: Any) -> Any:
    """Options of the site table: snapping, uncertainty, clock times and the time budget."""
    f = click.option("--little-margin-min", type=click.FloatRange(min=0.0), default=LITTLE_MARGIN_MIN,
                     show_default=True, callback=finite_callback,
                     help="Margins below this are flagged as little.")(f)
    f = click.option("--walking-speed-m-s", type=click.FloatRange(min=0.0, min_open=True),
                     default=WALKING_SPEED_M_S, show_default=True, callback=finite_callback,
                     help="Walking speed for sites that give none (mean observed in the 2011 "
                          "evacuations; slower than the older 1.0 m/s planning value).")(f)
    f = click.option("--preparation-min", type=click.FloatRange(min=0.0), default=PREPARATION_MIN,
                     show_default=True, callback=finite_callback,
                     help="Minutes before people start walking, for sites that give none.")(f)
    f = click.option("--notification-delay-min", type=click.FloatRange(0.0, 1440.0),
                     default=NOTIFICATION_DELAY_MIN, show_default=True, callback=finite_callback,
                     help="Minutes from the earthquake until an official message can reach people, "
                          "for sites that give none.")(f)
    f = click.option("--origin-time", metavar="ISO8601", callback=origin_time_callback,
                     help="Earthquake origin time with a zone (e.g. 2026-03-01T03:12:00Z); adds UTC "
                          "clock times to the site table.")(f)
    f = click.option("--speed-uncertainty-pct", type=click.FloatRange(0.0, 100.0, max_open=True),
                     default=100.0 * SPEED_UNCERTAINTY, show_default=True, callback=finite_callback,
                     help="Stated +/- wave-speed uncertainty behind the earliest/latest columns.")(f)
    f = click.option("--site-search-radius-km", type=click.FloatRange(min=0.0),
                     default=SITE_SEARCH_RADIUS_M / 1000.0, show_default=True, callback=finite_callback,
                     help="Read a site's time at the nearest reached water cell within this distance.")(f)
    return site_file_options(f)


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
@speed_model_options
@product_options
@click.option("--no-map", is_flag=True, help="Skip the map picture.")
@click.option("--coast/--no-coast", default=True, show_default=True,
              help="Write the coastal arrival layer (coastline stretches with first-arrival minutes).")
@click.option("--coast-interval-min", type=float, default=COAST_CLASS_INTERVAL_MIN, show_default=True,
              callback=positive_callback, help="Width of the coastal arrival classes, minutes.")
@site_table_options
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

    With --sites FILE, also a site table (sites.csv, sites.gpkg): arrival
    times at each site, the minutes left after the official message and the
    margin for walking to safe ground, and a timeline chart (timeline.png):

    \b
        ttmap map bathy.tif --source -147.2,-34.6 --sites towns.csv \\
            --notification-delay-min 15

    A planning aid only; official warning centres and local emergency
    management decide. Margins are planning figures, not promises; strong
    or long shaking is itself the warning.
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
    sites_file = opts.get("sites_file")
    if sites_file is None:
        for key, flag in (("sites_layer", "--sites-layer"), ("name_field", "--name-field"),
                          ("sites_crs", "--sites-crs"), ("origin_time", "--origin-time")):
            if opts.get(key) is not None:
                raise click.UsageError(f"{flag} applies to the site table; give --sites FILE too")
    elif not opts.get("front", True):
        raise click.UsageError("--sites needs the front (long-wave) arrival; drop --no-front")
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
        floor_depth_m=opts.get("floor_depth_m", FLOOR_DEPTH_M),
        earth=opts.get("earth", "wgs84"),
        max_time_s=None if opts.get("max_time_h") is None else opts["max_time_h"] * 3600.0,
        snap_radius_m=None if opts.get("snap_radius_km") is None else opts["snap_radius_km"] * 1000.0,
        isochrone_interval_min=opts.get("isochrone_interval_min"),
        vector_formats=tuple(opts.get("vector_format") or ("gpkg",)),
        map_formats=() if opts.get("no_map") else tuple(opts.get("map_format") or ("png",)),
        overwrite=opts.get("overwrite", False),
        command_line=shlex.join(["ttmap", *sys.argv[1:]]),
        coast=opts.get("coast", True),
        coast_interval_min=opts.get("coast_interval_min", COAST_CLASS_INTERVAL_MIN),
        sites=sites_file,
        sites_layer=opts.get("sites_layer"),
        sites_name_field=opts.get("name_field"),
        sites_crs=opts.get("sites_crs"),
        site_search_radius_m=1000.0 * opts.get("site_search_radius_km", SITE_SEARCH_RADIUS_M / 1000.0),
        speed_uncertainty=opts.get("speed_uncertainty_pct", 100.0 * SPEED_UNCERTAINTY) / 100.0,
        origin_time_utc=opts.get("origin_time"),
        notification_delay_min=opts.get("notification_delay_min", NOTIFICATION_DELAY_MIN),
        preparation_min=opts.get("preparation_min", PREPARATION_MIN),
        walking_speed_m_s=opts.get("walking_speed_m_s", WALKING_SPEED_M_S),
        little_margin_min=opts.get("little_margin_min", LITTLE_MARGIN_MIN),
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
    if record.get("sites"):
        report_sites(rep, record["sites"])
    rep.stage(f"{len(record['files_written'])} files written to {out_dir} (run record: run.json)")
    rep.stage(CAUTION_SHORT)


def report_sites(rep: Any, sites: dict[str, Any]) -> None:
    """One line per site: name, front arrival, margin and status (progress output)."""
    counts = ", ".join(f"{n} {status}" for status, n in sites["status_counts"].items())
    rep.stage(f"sites: {counts} (times read within {sites['search_radius_m'] / 1000:g} km)")
    width = max((len(str(s["name"])) for s in sites["per_site"]), default=0)
    for s in sites["per_site"]:
        name = str(s["name"]).ljust(width)
        if s["front_min"] is None:
            rep.stage(f"  {name}  no arrival computed ({s['status']})")
            continue
        moved = f" (read {s['moved_m']:.0f} m away)" if s["moved_m"] else ""
        margin = "" if s["margin_min"] is None else f", margin {s['margin_min']:+.1f} min"
        rep.stage(f"  {name}  front {s['front_min']:.1f} min{moved}{margin}: {s['budget_status']}")
    rep.stage("margins are planning figures, not promises; strong or long shaking is itself the warning")
