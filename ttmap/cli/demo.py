"""``ttmap demo``: the main job on the bundled, invented demo bathymetry."""

from __future__ import annotations

import os
from pathlib import Path

import click

from ttmap.cli.options import reporter, verbosity_options

__all__ = ["demo", "demo_data_dir", "DEMO_SOURCE_LONLAT", "DEMO_PERIODS_S"]

#: Invented scenario: an earthquake near the invented trench offshore.
DEMO_SOURCE_LONLAT = (-144.9, -34.2)
#: Energy arrivals shown besides the front.
DEMO_PERIODS_S = (300.0,)


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

    The region, its towns and the earthquake are invented for demonstration;
    do not use any of it for planning.
    """
    import shlex
    import sys

    from ttmap.cli.map import _report
    from ttmap.mapjob import MapJob, run_map_job
    from ttmap.sources import Source

    data = demo_data_dir()
    with reporter(ctx) as rep:
        rep.stage("demo on an INVENTED coast (not a real place): earthquake near the invented trench")
        job = MapJob(
            bathymetry=str(data / "demo_bathymetry.tif"),
            source=Source.point(*DEMO_SOURCE_LONLAT, label="invented demo earthquake near the trench"),
            out_dir=out_dir,
            periods_s=DEMO_PERIODS_S,
            overwrite=overwrite,
            command_line=shlex.join(["ttmap", *sys.argv[1:]]),
        )
        record = run_map_job(job, progress=rep.stage)
        _report(rep, record, out_dir)
        click.echo(str(Path(out_dir).resolve()))
