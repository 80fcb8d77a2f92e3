"""``ttmap demo``: the main job on the bundled, invented demo bathymetry."""

from __future__ import annotations

from pathlib import Path

import click

from ttmap.cli.options import OutputFolder, reporter, verbosity_options

__all__ = ["demo"]


@click.command("demo")
@click.option("--out", "out_dir", type=OutputFolder(), default="ttmap_demo", show_default=True,
              help="Output folder.")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@click.option("--no-report", is_flag=True, help="Skip report.html in the demo folder and in site_maps/.")
@verbosity_options
@click.pass_context
def demo(ctx: click.Context, out_dir: str, overwrite: bool, no_report: bool) -> None:
    """Run the main job on the bundled demo bathymetry of an invented coast.

    Writes the arrival products of an invented earthquake, the site table
    and timeline chart of the invented towns, the coastal arrival layer, a
    nested fine grid of the invented harbour of Saltmarrow Bay (its town read
    in the harbour, not offshore), the wave paths to every town, and
    the site-centred map of the first town (in site_maps/), each with its
    report.html and layers that open styled in QGIS. The region, its
    towns and the earthquake are invented for demonstration; do not use any
    of it for planning.
    """
    import shlex
    import sys

    from ttmap.cli.map import report_map
    from ttmap.cli.sitemap import report_site_maps
    from ttmap.io.atomic import check_writable
    from ttmap.jobs.demo import demo_jobs
    from ttmap.jobs.map import run_map_job
    from ttmap.jobs.sitemap import planned_site_map_outputs, run_site_map_job

    command_line = shlex.join(["ttmap", *sys.argv[1:]])
    with reporter(ctx) as rep:
        rep.stage("demo on an INVENTED coast (not a real place): earthquake near the invented trench")
        job, site_job = demo_jobs(out_dir, overwrite=overwrite, command_line=command_line,
                                  report=not no_report)
        # Refuse existing site-map outputs before the main job writes anything.
        if Path(site_job.out_dir).is_dir():
            check_writable(planned_site_map_outputs(site_job), overwrite)
        report_map(rep, run_map_job(job, progress=rep.stage))
        rep.stage(f"site-centred map for {site_job.site_list.names[0]} (an invented town)")
        report_site_maps(rep, run_site_map_job(site_job, progress=rep.stage))
        click.echo(str(Path(out_dir).resolve()))
