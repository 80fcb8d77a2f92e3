#!/usr/bin/env python
"""Generate the ttmap demo harbour nest: an INVENTED fine grid of Saltmarrow Bay.

Everything produced here is synthetic, like ``make_demo_bathymetry.py`` beside
it: the bay, the harbour and the town of Saltmarrow Beach are made up, at
placeholder coordinates over open ocean. Do not use any of it for planning.

The grid is a *nest* for ``ttmap map --nest``: a 50 m grid in UTM zone 7 south
(EPSG:32707, a different CRS from the 1 arc-minute lon/lat basin on purpose),
400 x 400 cells (20 km x 20 km) around the head of the invented Saltmarrow
Bay. Its depths are the basin's, interpolated bilinearly (so both grids agree
on the open water at the nest's edge), plus what the basin grid cannot show:

* a dredged approach channel (6 m) from the bay to the town's waterfront,
* a small harbour basin (5 m) in front of the town, reaching to about 60 m
  from the town's point in the site list,
* a little fine roughness of the shore (seeded noise, +/- 1.5 m on land and in
  water shallower than 10 m).

Output (next to this script unless ``--out DIR`` is given):
``demo_harbour.tif``: float32 elevation in metres (negative below sea level,
as the basin), nodata -32768, DEFLATE with the floating-point predictor,
values rounded to 0.1 m, no timestamp tags (reruns reproduce it).

Usage::

    python demo_bathymetry/make_demo_harbour.py [--out DIR]
"""

from __future__ import annotations

import argparse
from pathlib import Path

import numpy as np
from scipy import ndimage

SEED = 4417
CRS = "EPSG:32707"  # UTM zone 7 south
CELL_M = 50.0
NROWS = NCOLS = 400
NODATA = -32768.0
#: The invented town whose bay this is (demo_sites.csv).
TOWN_LONLAT = (-142.4553, -34.6250)
#: Where the town sits in the nest: cells from the west and north edges.
TOWN_COL, TOWN_ROW = 290, 200

TAGS = {
    "TITLE": "ttmap demo harbour nest: Saltmarrow Bay (INVENTED)",
    "DATA_STATUS": (
        "INVENTED - synthetic terrain for demonstration; not a real place; "
        "do not use for planning"
    ),
    "UNITS": "m",
    "VERTICAL_CONVENTION": "elevation, positive up, negative below sea level",
    "GENERATOR": "make_demo_harbour.py",
}


def nest_transform() -> tuple[float, float]:
    """West and north edges (metres, UTM 7S) that put the town at (TOWN_ROW, TOWN_COL)."""
    from pyproj import Transformer

    tr = Transformer.from_crs("EPSG:4326", CRS, always_xy=True)
    x, y = tr.transform(*TOWN_LONLAT)
    west = round((x - (TOWN_COL + 0.5) * CELL_M) / 10.0) * 10.0
    north = round((y + (TOWN_ROW + 0.5) * CELL_M) / 10.0) * 10.0
    return west, north


def basin_elevation(basin_tif: Path, west: float, north: float) -> np.ndarray:
    """The basin's elevation interpolated bilinearly at the nest's cell centres."""
    import rasterio
    from pyproj import Transformer

    with rasterio.open(basin_tif) as ds:
        z = ds.read(1).astype(np.float64)
        inv = ~ds.transform
    cols, rows = np.meshgrid(np.arange(NCOLS) + 0.5, np.arange(NROWS) + 0.5)
    x = west + cols * CELL_M
    y = north - rows * CELL_M
    lon, lat = Transformer.from_crs(CRS, "EPSG:4326", always_xy=True).transform(x, y)
    c, r = inv * (lon, lat)
    return ndimage.map_coordinates(z, [r - 0.5, c - 0.5], order=1, mode="nearest")


def carve_harbour(z: np.ndarray) -> np.ndarray:
    """The approach channel and harbour basin, and fine roughness of the shore."""
    rows, cols = np.mgrid[0:NROWS, 0:NCOLS]
    # harbour basin: an ellipse 700 m x 500 m just west of the town, 5 m deep
    basin = ((cols - (TOWN_COL - 8)) / 7.0) ** 2 + ((rows - TOWN_ROW) / 5.0) ** 2 <= 1.0
    # approach channel: 6 m deep, 200 m wide, from the basin westward to the bay
    channel = (np.abs(rows - TOWN_ROW) <= 2) & (cols <= TOWN_COL - 8)
    out = z.copy()
    out[channel] = np.minimum(out[channel], -6.0)
    out[basin] = np.minimum(out[basin], -5.0)
    # quays: keep the town's own cell and a one-cell rim east of the basin dry
    out[TOWN_ROW, TOWN_COL] = max(out[TOWN_ROW, TOWN_COL], 2.0)
    rng = np.random.default_rng(SEED)
    noise = ndimage.gaussian_filter(rng.standard_normal(z.shape), 3.0)
    noise *= 1.5 / max(float(np.abs(noise).max()), 1e-9)
    shore = (out > -10.0) & ~channel & ~basin
    out[shore] += noise[shore]
    # never exactly 0, water at most -1 m, land at least +1 m (as the basin)
    out = np.where(out < 0.0, np.minimum(out, -1.0), np.maximum(out, 1.0))
    return np.round(out, 1)


def main(argv: list[str] | None = None) -> Path:
    import rasterio
    from rasterio.transform import from_origin

    here = Path(__file__).resolve().parent
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", type=Path, default=here, help="output folder (default: beside this script)")
    ap.add_argument("--basin", type=Path, default=here / "demo_bathymetry.tif", help="the demo basin")
    args = ap.parse_args(argv)
    west, north = nest_transform()
    z = carve_harbour(basin_elevation(args.basin, west, north))
    # checks: the town's cell is land next to the harbour water, the west edge is open water
    assert z[TOWN_ROW, TOWN_COL] > 0 and z[TOWN_ROW, TOWN_COL - 1] < 0, "town not on the waterfront"
    assert (z[:, 0] < -5.0).all(), "the west edge must be open water"
    args.out.mkdir(parents=True, exist_ok=True)
    target = args.out / "demo_harbour.tif"
    profile = {
        "driver": "GTiff", "width": NCOLS, "height": NROWS, "count": 1, "dtype": "float32",
        "crs": CRS, "transform": from_origin(west, north, CELL_M, CELL_M), "nodata": NODATA,
        "compress": "deflate", "predictor": 3, "tiled": True, "blockxsize": 256, "blockysize": 256,
    }
    with rasterio.open(target, "w", **profile) as ds:
        ds.write(z.astype(np.float32), 1)
        ds.update_tags(**TAGS)
        ds.set_band_description(1, "elevation_m")
        ds.update_tags(1, UNITS="m")
    print(f"wrote {target} ({target.stat().st_size / 1024:.0f} KB): {NROWS} x {NCOLS} cells of "
          f"{CELL_M:g} m, water {100.0 * float((z < 0).mean()):.1f} %, range {z.min():.1f} .. {z.max():.1f} m")
    return target


if __name__ == "__main__":
    main()
