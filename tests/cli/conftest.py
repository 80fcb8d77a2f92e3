"""Fixtures for the command-line tests: tiny invented GeoTIFFs and a CLI runner.

Two bathymetry grids, both invented and written with rasterio into ``tmp_path``:

- ``utm_bathymetry``: 120 x 120 cells of 1 km in UTM zone 59 south
  (EPSG:32759), elevation -100 m everywhere (depth 100 m, long-wave speed
  sqrt(g h) = 31.3 m/s) except a land strip (+20 m) in the last 10 columns.
  The shallow depth makes the front take about 45 minutes to the far corner,
  so isochrones every 10 minutes exist (at 4000 m the whole grid is crossed in
  under 8 minutes).
- ``geo_bathymetry``: 60 x 50 cells of 0.05 degrees in WGS84 longitude/latitude,
  west -72, north -32, elevation -3000 m, land in the last 5 columns. Both
  coordinates are negative, so ``--source -70.5,-33.2`` is a valid source.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import numpy as np
import pytest
from affine import Affine
from click.testing import CliRunner, Result

# --- the projected grid -----------------------------------------------------
UTM_CRS = "EPSG:32759"
UTM_SHAPE = (120, 120)
UTM_CELL_M = 1000.0
UTM_TRANSFORM = Affine(UTM_CELL_M, 0.0, 300_000.0, 0.0, -UTM_CELL_M, 6_200_000.0)
UTM_DEPTH_M = 100.0
UTM_LAND_FIRST_COL = 110
UTM_LAND_ELEVATION_M = 20.0
#: A point source at the centre of cell (row 59, col 60).
UTM_SOURCE_XY = (360_500.0, 6_140_500.0)
#: x of the western edge of the land strip.
UTM_LAND_X = UTM_TRANSFORM.c + UTM_LAND_FIRST_COL * UTM_CELL_M
#: A point on the land strip (cell row 20, col 115).
UTM_LAND_XY = (415_500.0, 6_179_500.0)

# --- the geographic grid ----------------------------------------------------
GEO_SHAPE = (50, 60)
GEO_TRANSFORM = Affine(0.05, 0.0, -72.0, 0.0, -0.05, -32.0)
GEO_DEPTH_M = 3000.0
GEO_LAND_FIRST_COL = 55
GEO_SOURCE = "-70.5,-33.2"

NODATA = -32768.0


def utm_elevation() -> np.ndarray:
    """Elevation (m, negative below sea level) of the projected fixture."""
    elev = np.full(UTM_SHAPE, -UTM_DEPTH_M, dtype=np.float32)
    elev[:, UTM_LAND_FIRST_COL:] = UTM_LAND_ELEVATION_M
    return elev


def geo_elevation() -> np.ndarray:
    """Elevation (m) of the geographic fixture."""
    elev = np.full(GEO_SHAPE, -GEO_DEPTH_M, dtype=np.float32)
    elev[:, GEO_LAND_FIRST_COL:] = 100.0
    return elev


def write_geotiff(path: Path, values: np.ndarray, *, crs: str, transform: Affine) -> Path:
    """Write one float32 band with rasterio (nodata -32768, unused by the data)."""
    import rasterio

    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=values.shape[1],
        height=values.shape[0],
        count=1,
        dtype="float32",
        crs=crs,
        transform=transform,
        nodata=NODATA,
    ) as dst:
        dst.write(values.astype(np.float32), 1)
    return path


def utm_to_lonlat(x: float, y: float) -> tuple[float, float]:
    """UTM 59 S map coordinates to WGS84 longitude/latitude (pyproj)."""
    from pyproj import Transformer

    tr = Transformer.from_crs(UTM_CRS, "EPSG:4326", always_xy=True)
    lon, lat = tr.transform(x, y)
    return float(lon), float(lat)


def lonlat_arg(x: float, y: float) -> str:
    """``LON,LAT`` text of a UTM position, for --source and --rupture-centre."""
    lon, lat = utm_to_lonlat(x, y)
    return f"{lon:.8f},{lat:.8f}"


@pytest.fixture
def utm_bathymetry(tmp_path: Path) -> Path:
    """The projected constant-depth grid with a land strip (see module docstring)."""
    return write_geotiff(
        tmp_path / "utm_bathy.tif", utm_elevation(), crs=UTM_CRS, transform=UTM_TRANSFORM
    )


@pytest.fixture
def geo_bathymetry(tmp_path: Path) -> Path:
    """The small lon/lat grid around (-70.5, -33.2)."""
    return write_geotiff(
        tmp_path / "geo_bathy.tif", geo_elevation(), crs="EPSG:4326", transform=GEO_TRANSFORM
    )


RunCli = Callable[..., Result]


@pytest.fixture(scope="session")
def spec() -> SimpleNamespace:
    """The fixtures' constants and helpers, for the test modules.

    (Test modules cannot import this conftest reliably: ``tests/`` has two
    conftest.py files and no packages.)
    """
    names = [n for n in globals() if n.isupper()]
    ns = SimpleNamespace(**{n: globals()[n] for n in names})
    for fn in (utm_elevation, geo_elevation, write_geotiff, utm_to_lonlat, lonlat_arg):
        setattr(ns, fn.__name__, fn)
    return ns


def _invoke(*args: Any, expect: int | None = None) -> Result:
    from ttmap.cli.main import cli

    runner = CliRunner()
    result = runner.invoke(cli, [str(a) for a in args], catch_exceptions=True)
    if expect is not None and result.exit_code != expect:
        import traceback

        tb = "".join(traceback.format_exception(*result.exc_info)) if result.exc_info else ""
        raise AssertionError(
            f"ttmap {' '.join(map(str, args))} exited {result.exit_code}, expected {expect}\n"
            f"output:\n{result.output}\n{tb}"
        )
    return result


@pytest.fixture
def run_cli() -> RunCli:
    """``run_cli(*args, expect=None)``: invoke the ttmap group with CliRunner.

    With ``expect`` set, a different exit code fails the test and shows the
    output and traceback.
    """
    return _invoke


@pytest.fixture(scope="module")
def utm_run(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """One map run on the projected grid, shared by the round-trip tests.

    Point source at the centre of cell (59, 60), isochrones every 10 minutes,
    GeoPackage and GeoJSON isochrones, PNG map.
    """
    base = tmp_path_factory.mktemp("utm_run")
    bathy = write_geotiff(
        base / "utm_bathy.tif", utm_elevation(), crs=UTM_CRS, transform=UTM_TRANSFORM
    )
    out = base / "out"
    x, y = UTM_SOURCE_XY
    result = _invoke(
        "map",
        bathy,
        "--source-xy",
        f"{x},{y}",
        "--isochrone-interval-min",
        "10",
        "--vector-format",
        "gpkg",
        "--vector-format",
        "geojson",
        "--out",
        out,
        expect=0,
    )
    listing = sorted(p.name for p in out.iterdir())
    return {"bathymetry": bathy, "out": out, "result": result, "listing": listing}
