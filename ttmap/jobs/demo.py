"""The bundled demo: an invented coast, invented towns and an invented earthquake.

Nothing here is a real place; never use the demo for planning.
:func:`demo_paths` finds the demo files (installed package data, the source
checkout, or ``$TTMAP_DEMO_DIR``); :func:`demo_jobs` builds the map job and
the site-map job that ``ttmap demo`` runs.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from ttmap.errors import InputDataError
from ttmap.jobs.map import MapJob
from ttmap.jobs.options import ProductOptions, ReadingOptions, SiteOptions, SpeedOptions
from ttmap.jobs.sitemap import SiteMapJob

__all__ = [
    "DEMO_PERIODS_S",
    "DEMO_SITE_MAP_DIR",
    "DEMO_SOURCE_LONLAT",
    "DemoPaths",
    "demo_data_dir",
    "demo_jobs",
    "demo_paths",
]

#: Invented scenario: an earthquake near the invented trench offshore.
DEMO_SOURCE_LONLAT: tuple[float, float] = (-144.9, -34.2)
#: Energy arrivals shown besides the front.
DEMO_PERIODS_S: tuple[float, ...] = (300.0,)
#: Subfolder of the demo output with the site-centred map of the first invented town.
DEMO_SITE_MAP_DIR: str = "site_maps"


@dataclass(frozen=True)
class DemoPaths:
    """The demo files: folder, bathymetry GeoTIFF, site CSV and the harbour nest."""

    folder: Path
    bathymetry: Path
    sites: Path
    harbour: Path


def demo_data_dir() -> Path:
    """Folder with the demo bathymetry (installed package data or the source checkout).

    Raises
    ------
    InputDataError
        The demo files are not found; the message lists where it looked.
    """
    env = os.environ.get("TTMAP_DEMO_DIR")
    candidates = [Path(env)] if env else []
    here = Path(__file__).resolve().parent.parent
    candidates += [here / "demo_data", here.parent / "demo_bathymetry"]
    for c in candidates:
        if (c / "demo_bathymetry.tif").is_file():
            return c
    raise InputDataError(
        "the demo bathymetry was not found (looked in "
        + ", ".join(str(c) for c in candidates)
        + "); reinstall ttmap from its source folder or set TTMAP_DEMO_DIR"
    )


def demo_paths() -> DemoPaths:
    """The demo's bathymetry and site file (see :func:`demo_data_dir`)."""
    folder = demo_data_dir()
    return DemoPaths(folder, folder / "demo_bathymetry.tif", folder / "demo_sites.csv",
                     folder / "demo_harbour.tif")


def demo_jobs(out_dir: str, *, overwrite: bool = False, command_line: str = "",
              report: bool = True) -> tuple[MapJob, SiteMapJob]:
    """The demo's map job (front and 300 s energy, site table, the invented harbour nest of
    Saltmarrow Bay, wave paths) and site-map job (first town).

    The site-map job writes into ``<out_dir>/site_maps``. Each writes its
    ``report.html`` unless ``report`` is False.
    """
    from ttmap.io.sites import SiteList, read_sites
    from ttmap.sources import Source

    paths = demo_paths()
    reading = ReadingOptions(str(paths.bathymetry))
    job = MapJob(
        reading=reading,
        source=Source.point(*DEMO_SOURCE_LONLAT, label="invented demo earthquake near the trench"),
        out_dir=out_dir,
        speed=SpeedOptions(periods_s=DEMO_PERIODS_S),
        products=ProductOptions(report=report),
        sites=SiteOptions(path=str(paths.sites)),
        overwrite=overwrite,
        command_line=command_line,
        timeline_title="Time budget at the invented demo towns (INVENTED coast, not a real place)",
        nests=(str(paths.harbour),) if paths.harbour.is_file() else (),
    )
    towns = read_sites(paths.sites)
    site_job = SiteMapJob(
        reading=reading,
        out_dir=str(Path(out_dir) / DEMO_SITE_MAP_DIR),
        sites=SiteOptions(path=str(paths.sites)),
        site_list=SiteList(towns.sites[:1], towns.crs, towns.path),
        products=ProductOptions(report=report),
        combined=False,
        overwrite=overwrite,
        title_prefix="INVENTED demo: ",
        command_line=command_line,
    )
    return job, site_job
