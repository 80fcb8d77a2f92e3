"""``ttmap demo``: the main job on the bundled, invented demo bathymetry."""

from __future__ import annotations

import os
from pathlib import Path

import click

from ttmap.cli.options import reporter, verbosity_options

__all__ = ["DEMO_PERIODS_S", "DEMO_SITE_MAP_DIR", "DEMO_SOURCE_LONLAT", "demo", "demo_data_dir"]

#: Invented scenario: an earthquake near the invented trench offshore.
DEMO_SOURCE_LONLAT = (-144.9, -34.2)
#: Energy arrivals shown besides the front.
DEMO_PERIODS_S = (300.0,)
#: Subfolder of the demo output with the site-centred map of the first invented town.
DEMO_SITE_MAP_DIR = "site_maps"


def demo_data_dir() -> Path:
    """Folder with the demo bathymetry (installed package data or the source checkout)."""
    env = os.environ.get("TTMAP_DEMO_DIR")
    candidates = [Path(env)] if env else []
    here = Path(__file__).resolve().parent.parent
    candidates += [here / "demo_data", here.parent / "demo_bathymetry"]
    for c in candidates:
        if (c / "demo_bathymetry.tif").is_file():
            return c
    raise click.ClickException(
        "the demo bathymetry was not found (looked in "
        + ", ".join(str(c) for c in candidates)
        + "); reinstall ttmap from its source folder or set TTMAP_DEMO_DIR"
    )


@click.command("demo")
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default="ttmap_demo", show_default=True,
              help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@verbosity_options
@click.pass_context
def demo(ctx: click.Context, out_dir: str, overwrite: bool) -> None:
    """Run the main job on the bundled demo bathymetry of an invented coast.

    Writes the arrival products of an invented earthquake, the site table
    and timeline chart of the invented towns, the coastal arrival layer, and
    the site-centred map of the first town (in site_maps/). The region, its
    towns and the earthquake are invented for demonstration; do not use any
    of it for planning.
    """
    import shlex
    import sys

    from ttmap.cli.map import _report
    from ttmap.cli.sitemap import report_site_maps
    from ttmap.io.atomic import check_writable
    from ttmap.io.sites import SiteList, read_sites
    from ttmap.mapjob import (
        MapJob,
        SiteMapJob,
        planned_site_map_outputs,
        run_map_job,
        run_site_map_job,
    )
    from ttmap.sources import Source

    data = demo_data_dir()
    sites_csv = data / "demo_sites.csv"
    command_line = shlex.join(["ttmap", *sys.argv[1:]])
    with reporter(ctx) as rep:
        rep.stage("demo on an INVENTED coast (not a real place): earthquake near the invented trench")
        job = MapJob(
            bathymetry=str(data / "demo_bathymetry.tif"),
            source=Source.point(*DEMO_SOURCE_LONLAT, label="invented demo earthquake near the trench"),
            out_dir=out_dir,
            periods_s=DEMO_PERIODS_S,
            overwrite=overwrite,
            command_line=command_line,
            sites=str(sites_csv),
            timeline_title="Time budget at the invented demo towns (INVENTED coast, not a real place)",
        )
        towns = read_sites(sites_csv)
        site_job = SiteMapJob(
            bathymetry=job.bathymetry,
            sites=SiteList(towns.sites[:1], towns.crs, towns.path),
            out_dir=str(Path(out_dir) / DEMO_SITE_MAP_DIR),
            sites_path=str(sites_csv),
            combined=False,
            overwrite=overwrite,
            title_prefix="INVENTED demo: ",
            command_line=command_line,
        )
        # Refuse existing site-map outputs before the main job writes anything.
        if Path(site_job.out_dir).is_dir():
            check_writable(planned_site_map_outputs(site_job), overwrite)
        record = run_map_job(job, progress=rep.stage)
        _report(rep, record, out_dir)
        rep.stage(f"site-centred map for {towns.names[0]} (an invented town)")
        site_record = run_site_map_job(site_job, progress=rep.stage)
        report_site_maps(rep, site_record, site_job.out_dir)
        click.echo(str(Path(out_dir).resolve()))
