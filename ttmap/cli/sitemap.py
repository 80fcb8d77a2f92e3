"""``ttmap site-map``: how long waves from anywhere take to reach each site."""

from __future__ import annotations

import shlex
import sys
from typing import Any

import click

from ttmap.cli.map import bathymetry_options, finite_callback, site_file_options
from ttmap.cli.options import (
    parse_pair,
    positive_callback,
    product_options,
    reporter,
    speed_model_options,
    verbosity_options,
)
from ttmap.defaults import FLOOR_DEPTH_M, NOTIFICATION_DELAY_MIN
from ttmap.defaults import SITE_SEARCH_RADIUS_M, MAX_NOTIFICATION_DELAY_MIN

__all__ = ["parse_site_spec", "site_map_command"]


def parse_site_spec(value: str) -> tuple[str, float, float]:
    """Parse ``NAME=LON,LAT``; ValueError with a helpful message otherwise.

    The name is everything before the last ``=``, so negative coordinates
    and names with spaces work.

    >>> parse_site_spec("Harbour=-142.7,-33.4")
    ('Harbour', -142.7, -33.4)
    >>> parse_site_spec("Port Vell North=174.5,-41.2")
    ('Port Vell North', 174.5, -41.2)
    """
    name, sep, coords = str(value).rpartition("=")
    name = name.strip()
    if not sep or not name:
        raise ValueError(f"{value!r} is not NAME=LON,LAT (e.g. Harbour=-142.7,-33.4)")
    lon, lat = parse_pair(coords, ("LON", "LAT"))
    if not -90.0 <= lat <= 90.0:
        raise ValueError(f"{value!r}: latitude {lat:g} lies outside -90..90 (LON comes first)")
    if not -360.0 <= lon <= 360.0:
        raise ValueError(f"{value!r}: longitude {lon:g} lies outside -360..360")
    return name, lon, lat


def _site_specs_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    if not value:
        return ()
    from ttmap.errors import InputDataError
    from ttmap.mapjob import _check_site_stems

    specs = []
    for v in value:
        try:
            specs.append(parse_site_spec(v))
        except ValueError as err:
            raise click.BadParameter(str(err), ctx=ctx, param=param) from None
    names = [s[0] for s in specs]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise click.BadParameter(
            f"site name {dupes[0]!r} is given twice; give each site a unique name", ctx=ctx, param=param
        )
    try:
        _check_site_stems(names)
    except InputDataError as err:
        raise click.BadParameter(str(err), ctx=ctx, param=param) from None
    return tuple(specs)


@click.command("site-map")
@click.argument("bathymetry", type=click.Path(dir_okay=False))
@click.option("--site", "site_specs", metavar="NAME=LON,LAT", multiple=True, callback=_site_specs_callback,
              help="A site, WGS84 degrees (negative values welcome); repeat for several.")
@site_file_options
@click.option("--notification-delay-min", type=click.FloatRange(0.0, MAX_NOTIFICATION_DELAY_MIN),
              default=NOTIFICATION_DELAY_MIN, show_default=True, callback=finite_callback,
              help="Minutes from the earthquake until an official message reaches people (a site "
                   "file's notification_delay_min column overrides it per site).")
@click.option("--site-snap-radius-km", type=click.FloatRange(min=0.0),
              default=SITE_SEARCH_RADIUS_M / 1000.0, show_default=True, callback=finite_callback,
              help="Move a site on land to the nearest open water within this distance.")
@click.option("--period-s", type=float, callback=positive_callback,
              help="Solve with the speed of waves of this period (default: long-wave speed, the front).")
@click.option("--period-speed", type=click.Choice(["group", "phase"]), default="group", show_default=True,
              help="Speed used with --period-s.")
@speed_model_options
@product_options
@click.option("--no-map", is_flag=True, help="Skip the map pictures.")
@click.option("--combined/--no-combined", default=True, show_default=True,
              help="With two or more sites, also write the earliest time over all sites and which "
                   "site a source reaches first.")
@bathymetry_options
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default="ttmap_site_maps",
              show_default=True, help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@verbosity_options
@click.pass_context
def site_map_command(ctx: click.Context, bathymetry: str, **opts: Any) -> None:
    """Site-centred maps: minutes from a source anywhere to each site.

    "An earthquake here gives us N minutes": one solve started at each site
    gives, at every water cell, the time a wave from a source there takes to
    reach the site. This uses reciprocity (the time from A to B equals the
    time from B to A), which holds for the isotropic speeds ttmap computes
    without currents; ttmap models no currents. Each site also gets a
    minutes-left raster: that time minus the notification delay (negative
    where the wave comes before the official message). Example:

    \b
        ttmap site-map bathy.tif --site Harbour=-142.7,-33.4 \\
            --site "North Bay=-143.1,-32.2" --notification-delay-min 15

    A planning aid only; official warning centres and local emergency
    management decide. Near the source, strong or long shaking is itself
    the warning.
    """
    with reporter(ctx) as rep:
        job = _job_from_options(bathymetry, opts)
        from ttmap.mapjob import run_site_map_job

        record = run_site_map_job(job, progress=rep.stage)
        report_site_maps(rep, record, job.out_dir)


def _job_from_options(bathymetry: str, opts: dict[str, Any]) -> Any:
    from ttmap.io.sites import Site, SiteList, read_sites
    from ttmap.mapjob import SiteMapJob

    specs = opts.get("site_specs") or ()
    sites_file = opts.get("sites_file")
    if bool(specs) == bool(sites_file):
        raise click.UsageError("give the sites as --site NAME=LON,LAT (repeatable) or --sites FILE, one of the two")
    if specs:
        for key, flag in (("sites_layer", "--sites-layer"), ("name_field", "--name-field"),
                          ("sites_crs", "--sites-crs")):
            if opts.get(key) is not None:
                raise click.UsageError(f"{flag} applies to --sites FILE; --site values are WGS84 lon,lat")
        sites = SiteList(tuple(Site(name, lon, lat) for name, lon, lat in specs))
    else:
        sites = read_sites(str(sites_file), name_field=opts.get("name_field"), crs=opts.get("sites_crs"),
                           layer=opts.get("sites_layer"))
    if opts.get("crop_lonlat") and opts.get("crop_xy"):
        raise click.UsageError("give --crop-lonlat or --crop-xy, not both")
    return SiteMapJob(
        bathymetry=bathymetry,
        sites=sites,
        out_dir=opts["out_dir"],
        sites_path=sites_file,
        band=opts.get("band"),
        depth_positive=opts.get("depth_positive", False),
        window=opts.get("crop_lonlat") or opts.get("crop_xy"),
        window_crs=None if opts.get("crop_xy") else "EPSG:4326",
        coarsen=opts.get("coarsen", 1),
        period_s=opts.get("period_s"),
        period_mode=opts.get("period_speed", "group"),
        far_field=opts.get("far_field_correction", False),
        floor_depth_m=opts.get("floor_depth_m", FLOOR_DEPTH_M),
        earth=opts.get("earth", "wgs84"),
        notification_delay_min=opts["notification_delay_min"],
        snap_radius_m=1000.0 * opts["site_snap_radius_km"],
        max_time_s=None if opts.get("max_time_h") is None else opts["max_time_h"] * 3600.0,
        isochrone_interval_min=opts.get("isochrone_interval_min"),
        vector_formats=tuple(opts.get("vector_format") or ("gpkg",)),
        map_formats=() if opts.get("no_map") else tuple(opts.get("map_format") or ("png",)),
        combined=opts.get("combined", True),
        overwrite=opts.get("overwrite", False),
        command_line=shlex.join(["ttmap", *sys.argv[1:]]),
    )


def report_site_maps(rep: Any, record: dict[str, Any], out_dir: str) -> None:
    """Each site's move and time range, then the files written and the caution."""
    from ttmap.products.cautions import CAUTION_SHORT

    for s in record["sites"]:
        moved = (
            f"moved {s['moved_m'] / 1000:.2f} km to open water" if s["moved_m"] > 0 else "solved at its own cell"
        )
        rng = s.get("minutes_range")
        span = f"sources {rng[0]:.0f}-{rng[1]:.0f} min away" if rng else "no water reached"
        source = "site file" if s["notification_delay_from"] == "site" else "default"
        rep.stage(
            f"{s['name']}: {moved}; {span}; minutes left after a {s['notification_delay_min']:g}-min "
            f"notification delay ({source})"
        )
    if record.get("combined_written"):
        rep.stage("combined: earliest time over the sites and the site reached first")
    rep.stage(f"{len(record['files_written'])} files written to {out_dir} (run record: run.json)")
    rep.stage("times hold both ways (reciprocity) for isotropic speeds without currents")
    rep.stage(CAUTION_SHORT)
