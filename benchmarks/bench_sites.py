"""Site tables at scale: 10,000 sites on one map run.

Run from the repository root::

    python benchmarks/bench_sites.py            # 2000 x 2000 lon/lat grid, 10,000 sites
    python benchmarks/bench_sites.py --quick    # 800 x 800, 2,000 sites

Printed (never asserted): the front solve and one energy solve (the map
job's work before the site table), then the site evaluation beyond them -
snapping every site to reached water by ground distance (one k-d tree), the
rows (front, window, energy, budget), writing ``sites.csv`` and
``sites.gpkg`` - with its wall time, the ratio to the solve, and the peak of
numpy/Python allocations (tracemalloc) during the site phase against the
size of one arrival field.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from affine import Affine  # noqa: E402
from pyproj import CRS  # noqa: E402

from ttmap import Grid, Source, prepare_medium  # noqa: E402
from ttmap.io.sites import Site, SiteList, write_site_table_csv  # noqa: E402
from ttmap.io.vector import write_vector_layers  # noqa: E402
from ttmap.products.sites import site_table, site_table_layer, snap_sites  # noqa: E402


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args()
    n_cells = 800 if args.quick else 2000
    n_sites = 2_000 if args.quick else 10_000
    cell = 0.01
    grid = Grid((n_cells, n_cells), Affine(cell, 0, 150.0, 0, -cell, -30.0), "EPSG:4326")
    rng = np.random.default_rng(3)
    # An invented wiggly coast running north-south through the middle, land to the east.
    rows = np.arange(n_cells)
    coast_col = (n_cells * 0.6 + 0.05 * n_cells * np.sin(rows / 37.0)
                 + 0.02 * n_cells * np.sin(rows / 7.0)).astype(int)
    cols = np.arange(n_cells)[None, :]
    depth = np.where(cols < coast_col[:, None], 3000.0 * (1.0 - cols / n_cells), -50.0)
    medium = prepare_medium(depth, grid)
    src = Source.point(150.0 + 0.2 * n_cells * cell, -30.0 - 0.5 * n_cells * cell)

    t0 = time.perf_counter()
    front = medium.travel_time(src)
    energy = prepare_medium(depth, grid, mode="group", period_s=300.0).travel_time(src)
    solve_s = time.perf_counter() - t0

    # Sites within about 1.5 km of the coast, on land or at sea, named with non-ASCII letters too.
    r = rng.integers(0, n_cells, n_sites)
    lon = 150.0 + (coast_col[r] + rng.uniform(-1.5, 1.5, n_sites)) * cell
    lat = -30.0 - (r + rng.uniform(0, 1, n_sites)) * cell
    sites = SiteList(tuple(
        Site(f"Ørnvik {i}", float(x), float(y), safe_ground_distance_m=float(d))
        for i, (x, y, d) in enumerate(zip(lon, lat, rng.uniform(100, 3000, n_sites)))
    ), CRS.from_epsg(4326))

    def phase(tmp: str) -> tuple[list, object, list[float]]:
        t1 = time.perf_counter()
        snapped = snap_sites(sites, grid, front, depth_m=medium.depth_m, water=medium.water,
                             open_water=medium.open_water)
        t2 = time.perf_counter()
        table = site_table(sites, snapped, front, {300.0: energy})
        t3 = time.perf_counter()
        write_site_table_csv(Path(tmp) / "sites.csv", table, overwrite=True)  # type: ignore[arg-type]
        write_vector_layers(Path(tmp) / "sites.gpkg", [site_table_layer(table)], crs="EPSG:4326",
                            overwrite=True)
        t4 = time.perf_counter()
        return snapped, table, [t1, t2, t3, t4]

    with tempfile.TemporaryDirectory() as tmp, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        snapped, _, (t1, t2, t3, t4) = phase(tmp)  # timed without tracing
        tracemalloc.start()
        phase(tmp)  # traced, for the memory peak only
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()

    field_mb = front.arrival_time_s.nbytes / 2**20
    statuses: dict[str, int] = {}
    for s in snapped:
        statuses[s.status] = statuses.get(s.status, 0) + 1
    print(f"grid {n_cells} x {n_cells} lon/lat ({n_cells * n_cells / 1e6:.1f} M cells), {n_sites:,} sites")
    print(f"  solves (front + T=300 s energy):  {solve_s:8.2f} s")
    print(f"  snapping (k-d tree, geodesic):    {t2 - t1:8.2f} s   statuses {statuses}")
    print(f"  rows (window, energy, budget):    {t3 - t2:8.2f} s")
    print(f"  writing sites.csv + sites.gpkg:   {t4 - t3:8.2f} s")
    print(f"  site evaluation beyond the solve: {t4 - t1:8.2f} s   ({(t4 - t1) / solve_s:.2f} x the solves)")
    print(f"  peak allocations in that phase:   {peak / 2**20:8.1f} MiB  "
          f"(one float64 field {field_mb:.1f} MiB; ratio {peak / 2**20 / field_mb:.2f})")


if __name__ == "__main__":
    main()
