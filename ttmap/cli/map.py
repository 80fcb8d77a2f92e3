"""``ttmap map``: arrival-time products for one source."""

from __future__ import annotations

import shlex
import sys
from typing import Any

import click

from ttmap.cli.options import (
    InputFile,
    OutputFolder,
    LazyChoice,
    bathymetry_options,
    option_default,
    pair_callback,
    parse_pair,
    period_speed_option,
    positive_callback,
    product_options,
    products_from_options,
    reading_from_options,
    reporter,
    site_table_options,
    sites_from_options,
    speed_from_options,
    speed_model_options,
    verbosity_options,
)
from ttmap.defaults import SCALING_RELATION

__all__ = [
    "build_source",
    "job_from_options",
    "map_command",
    "report_map",
    "report_sites",
]


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


def _pairs_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    """Repeated LON,LAT pairs."""
    try:
        return tuple(parse_pair(v, ("LON", "LAT")) for v in value or ())
    except ValueError as err:
        raise click.BadParameter(str(err), ctx=ctx, param=param) from None


def _scaling_keys() -> list[str]:
    from ttmap.physics.scaling import SCALING_RELATIONS

    return list(SCALING_RELATIONS)


@click.command("map")
@click.argument("bathymetry", type=InputFile())
@click.option("--source", metavar="LON,LAT", callback=pair_callback(("LON", "LAT")),
              help="Point source, longitude,latitude in degrees (negative values welcome).")
@click.option("--source-xy", metavar="X,Y", callback=pair_callback(("X", "Y")),
              help="Point source in the raster's map coordinates.")
@click.option("--source-file", type=InputFile(exists=True),
              help="Source area or line from a vector file (GeoPackage, GeoJSON, Shapefile...).")
@click.option("--rupture-centre", metavar="LON,LAT", callback=pair_callback(("LON", "LAT")),
              help="Centre of a rupture rectangle (with --strike-deg and a size).")
@click.option("--strike-deg", type=float, help="Rupture strike, degrees clockwise from north.")
@click.option("--length-km", type=float, callback=positive_callback, help="Rupture length along strike.")
@click.option("--width-km", type=float, callback=positive_callback, help="Rupture width across strike.")
@click.option("--magnitude-mw", type=click.FloatRange(6.0, 9.6), help="Size the rupture from moment magnitude.")
@click.option("--scaling-law", type=LazyChoice(_scaling_keys), default=SCALING_RELATION,
              show_default=True, help="Magnitude-to-size scaling relation.")
@click.option("--snap-radius-km", type=float, callback=positive_callback,
              help="Move a point source on land or in a closed basin to open water within this distance.")
@click.option("--period-s", type=float, multiple=True, callback=positive_callback,
              help="Wave period in seconds; repeat for several. Each adds a product set for the energy "
                   "arrival of that period.")
@period_speed_option
@click.option("--front/--no-front", default=True, show_default=True,
              help="Produce the front (long-wave speed, earliest arrival) set.")
@speed_model_options
@product_options
@click.option("--coast/--no-coast", default=option_default("coast"), show_default=True,
              help="Write the coastal arrival layer (coastline stretches with first-arrival minutes).")
@click.option("--coast-interval-min", type=float, default=option_default("coast_interval_min"), show_default=True,
              callback=positive_callback, help="Width of the coastal arrival classes, minutes.")
@site_table_options
@click.option("--nest", "nests", type=click.Path(dir_okay=False), multiple=True, metavar="PATH",
              help="A finer raster inside the basin raster (any CRS, read like the basin); repeat for "
                   "several (they must not overlap). Each is solved from the basin's times on its edge; "
                   "sites inside it are read on it.")
@click.option("--wave-paths/--no-wave-paths", default=True, show_default=True,
              help="Write the first wave's route to each site (wave_paths.gpkg) and draw it on the maps.")
@click.option("--path-from", metavar="LON,LAT", multiple=True, callback=_pairs_callback,
              help="Also trace the first wave's route to this point; repeat for several.")
@bathymetry_options
@click.option("--out", "out_dir", type=OutputFolder(), default="ttmap_out", show_default=True,
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
    from ttmap.jobs.map import run_map_job

    with reporter(ctx) as rep:
        job = job_from_options(bathymetry, opts)
        result = run_map_job(job, progress=rep.stage)
        report_map(rep, result)


def job_from_options(bathymetry: str, opts: dict[str, Any]) -> Any:
    """The :class:`~ttmap.jobs.map.MapJob` the options describe."""
    from ttmap.jobs.map import MapJob

    sites_file = opts.get("sites_file")
    if sites_file is None:
        for key, flag in (("sites_layer", "--sites-layer"), ("name_field", "--name-field"),
                          ("sites_crs", "--sites-crs"), ("origin_time", "--origin-time")):
            if opts.get(key) is not None:
                raise click.UsageError(f"{flag} applies to the site table; give --sites FILE too")
    elif not opts.get("front", True):
        raise click.UsageError("--sites needs the front (long-wave) arrival; drop --no-front")
    reading = reading_from_options(bathymetry, opts)
    source = build_source(opts)
    return MapJob(
        reading=reading,
        source=source,
        out_dir=opts["out_dir"],
        speed=speed_from_options(opts, tuple(opts.get("period_s") or ())),
        products=products_from_options(opts),
        sites=None if sites_file is None else sites_from_options(opts),
        front=opts.get("front", True),
        source_snap_radius_m=None if opts.get("snap_radius_km") is None else opts["snap_radius_km"] * 1000.0,
        overwrite=opts.get("overwrite", False),
        command_line=shlex.join(["ttmap", *sys.argv[1:]]),
        nests=tuple(opts.get("nests") or ()),
        wave_paths=opts.get("wave_paths", True),
        path_from=tuple(opts.get("path_from") or ()),
    )


def report_map(rep: Any, result: Any) -> None:
    """Per product set: cells reached, arrival range, basins, joins; the sites; files and caution."""
    from ttmap.products.cautions import CAUTION_SHORT

    for key, s in result.product_sets.items():
        rng = s.get("arrival_min_range")
        span = f"{rng[0]:.0f}-{rng[1]:.0f} min" if rng else "no arrivals"
        rep.stage(
            f"{key}: {s['cells_reached']} water cells reached ({span}), {s['cells_unreached']} unreached "
            f"in {s['unreached_basins']} closed basins, {s['diagonal_joins_opened']} diagonal joins opened"
        )
        if s.get("source_moved_m"):
            rep.notice(f"the source was moved {s['source_moved_m'] / 1000:.2f} km to open water")
    for n in result.record.get("nests", []):
        front: dict[str, Any] = n["summary"].get("front") or next(iter(n["summary"].values()), {})
        rng = front.get("boundary_time_min_range")
        span = f", edge times {rng[0]:.1f}-{rng[1]:.1f} min" if rng else ""
        rep.stage(f"nest {n['name']}: {n['grid']['shape']['rows']} x {n['grid']['shape']['cols']} cells, "
                  f"{front.get('boundary_cells', 0)} edge cells from the basin{span}, "
                  f"{front.get('cells_reached', 0)} cells reached")
    if result.sites:
        report_sites(rep, result.sites)
    rep.stage(f"{len(result.products)} files written to {result.out_dir} (run record: {result.record_path.name})")
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
        if s.get("grid") not in (None, "basin"):
            alone = s.get("basin_front_min")
            diff = "" if alone is None else (f"; basin grid alone {alone:.1f} min, "
                                             f"{s['front_min'] - alone:+.1f} min")
            moved += f" [nest {s['grid']}{diff}]"
        margin = "" if s["margin_min"] is None else f", margin {s['margin_min']:+.1f} min"
        rep.stage(f"  {name}  front {s['front_min']:.1f} min{moved}{margin}: {s['budget_status']}")
    rep.stage("margins are planning figures, not promises; strong or long shaking is itself the warning")
