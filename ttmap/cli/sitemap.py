"""``ttmap site-map``: how long waves from anywhere take to reach each site."""

from __future__ import annotations

import shlex
import sys
from typing import Any

import click

from ttmap.cli.options import (
    InputFile,
    OutputFolder,
    bathymetry_options,
    notification_delay_option,
    parse_pair,
    period_speed_option,
    positive_callback,
    product_options,
    products_from_options,
    reading_from_options,
    reporter,
    site_file_options,
    site_search_radius_option,
    sites_from_options,
    speed_from_options,
    speed_model_options,
    verbosity_options,
)

__all__ = ["parse_site_spec", "report_site_maps", "site_map_command"]


def parse_site_spec(value: str) -> tuple[str, float, float]:
    """Parse ``NAME=LON,LAT``; ValueError with a helpful message otherwise.

    The name is everything before the last ``=``, so negative coordinates
    and names with spaces work. The position is checked by
    :func:`ttmap.io.sites.check_lonlat`.

    >>> parse_site_spec("Harbour=-142.7,-33.4")
    ('Harbour', -142.7, -33.4)
    >>> parse_site_spec("Port Vell North=174.5,-41.2")
    ('Port Vell North', 174.5, -41.2)
    """
    from ttmap.errors import InputDataError
    from ttmap.io.sites import check_lonlat

    name, sep, coords = str(value).rpartition("=")
    name = name.strip()
    if not sep or not name:
        raise ValueError(f"{value!r} is not NAME=LON,LAT (e.g. Harbour=-142.7,-33.4)")
    lon, lat = parse_pair(coords, ("LON", "LAT"))
    try:
        check_lonlat(lon, lat, where=repr(value))
    except InputDataError as err:
        raise ValueError(str(err)) from None
    return name, lon, lat


def _site_specs_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    if not value:
        return ()
    from ttmap.errors import InputDataError
    from ttmap.io.sites import sites_from_lonlat
    from ttmap.jobs.plan import check_site_stems

    specs = []
    for v in value:
        try:
            specs.append(parse_site_spec(v))
        except ValueError as err:
            raise click.BadParameter(str(err), ctx=ctx, param=param) from None
    try:
        sites = sites_from_lonlat(specs)
        check_site_stems(sites.names)
    except InputDataError as err:
        raise click.BadParameter(str(err), ctx=ctx, param=param) from None
    return sites


def _snap_alias_callback(ctx: click.Context, param: click.Parameter, value: Any) -> Any:
    """The deprecated ``--site-snap-radius-km``: same as ``--site-search-radius-km``."""
    if value is not None:
        if not (value >= 0.0 and value != float("inf")):
            raise click.BadParameter(f"{value!r} must be a distance of 0 km or more", ctx=ctx, param=param)
        click.echo("ttmap: note: --site-snap-radius-km is deprecated; use --site-search-radius-km", err=True)
    return value


@click.command("site-map")
@click.argument("bathymetry", type=InputFile())
@click.option("--site", "site_specs", metavar="NAME=LON,LAT", multiple=True, callback=_site_specs_callback,
              help="A site, WGS84 degrees (negative values welcome); repeat for several.")
@site_file_options
@notification_delay_option("Minutes from the earthquake until an official message reaches people (a site "
                           "file's notification_delay_min column overrides it per site).")
@site_search_radius_option("Move a site on land to the nearest open water within this distance.")
@click.option("--site-snap-radius-km", type=float, hidden=True, callback=_snap_alias_callback,
              help="Deprecated name of --site-search-radius-km.")
@click.option("--period-s", type=float, callback=positive_callback,
              help="Solve with the speed of waves of this period (default: long-wave speed, the front).")
@period_speed_option
@speed_model_options
@product_options
@click.option("--combined/--no-combined", default=True, show_default=True,
              help="With two or more sites, also write the earliest time over all sites and which "
                   "site a source reaches first.")
@bathymetry_options
@click.option("--out", "out_dir", type=OutputFolder(), default="ttmap_site_maps",
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
    from ttmap.jobs.sitemap import run_site_map_job

    with reporter(ctx) as rep:
        job = _job_from_options(bathymetry, opts)
        result = run_site_map_job(job, progress=rep.stage)
        report_site_maps(rep, result)


def _job_from_options(bathymetry: str, opts: dict[str, Any]) -> Any:
    from ttmap.jobs.sitemap import SiteMapJob

    site_list = opts.get("site_specs") or None
    sites_file = opts.get("sites_file")
    if bool(site_list) == bool(sites_file):
        raise click.UsageError("give the sites as --site NAME=LON,LAT (repeatable) or --sites FILE, one of the two")
    if site_list:
        for key, flag in (("sites_layer", "--sites-layer"), ("name_field", "--name-field"),
                          ("sites_crs", "--sites-crs")):
            if opts.get(key) is not None:
                raise click.UsageError(f"{flag} applies to --sites FILE; --site values are WGS84 lon,lat")
    alias = opts.pop("site_snap_radius_km", None)
    if alias is not None:
        opts["site_search_radius_km"] = alias
    reading = reading_from_options(bathymetry, opts)
    return SiteMapJob(
        reading=reading,
        out_dir=opts["out_dir"],
        sites=sites_from_options(opts),
        site_list=site_list,
        speed=speed_from_options(opts, () if opts.get("period_s") is None else (opts["period_s"],)),
        products=products_from_options({**opts, "coast": False}),
        combined=opts.get("combined", True),
        overwrite=opts.get("overwrite", False),
        command_line=shlex.join(["ttmap", *sys.argv[1:]]),
    )


def report_site_maps(rep: Any, result: Any) -> None:
    """Each site's move and time range, then the files written and the caution."""
    from ttmap.products.cautions import CAUTION_SHORT

    for s in result.sites:
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
    if result.combined_written:
        rep.stage("combined: earliest time over the sites and the site reached first")
    rep.stage(f"{len(result.products)} files written to {result.out_dir} (run record: {result.record_path.name})")
    rep.stage("times hold both ways (reciprocity) for isotropic speeds without currents")
    rep.stage(CAUTION_SHORT)
