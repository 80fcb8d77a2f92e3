"""What ``--refine N`` costs and what it buys: time, memory and error against exact times.

Run from the repository root::

    python benchmarks/bench_refine.py            # 600 x 600 cells of 500 m, refine 1, 2, 3
    python benchmarks/bench_refine.py --quick    # 300 x 300 cells

Medium: an invented projected grid of uniform depth 4000 m with round islands
3 to 6 cells in radius, and a point source. The grid is centred on a
transverse Mercator projection of scale 1 on its own central meridian, so map
distances are ground distances within 0.03 % (scale 1 + x^2 / 2R^2 at 150 km;
computed here) and straight map lines are the reference paths. Two figures of
error, each against something outside the solver:

- *open water*: cells whose straight line to the source stays in water, against
  distance / sqrt(g h) (exact in uniform depth; g = 9.80665 m/s^2);
- *behind islands*: cells whose straight line meets an island, against the
  shortest water path around the islands' land cells drawn as squares (the
  visibility graph of their corners, ``WaterPaths`` of
  tests/reference/test_islands_reference.py: shapely and scipy, not ttmap).

Times are one solve through the API (``prepare_medium`` then ``travel_time``),
best of ``--repeat`` runs, CPU seconds (``time.process_time``); memory is the
tracemalloc peak of the solve (numpy arrays; scikit-fmm's C++ work arrays are
about 40 bytes per cell more, see bench_engine.py). Figures are printed, never
asserted.
"""

from __future__ import annotations

import argparse
import time
import tracemalloc
import warnings

import sys
from pathlib import Path

import numpy as np
import shapely
from affine import Affine

from ttmap import Grid, Source, prepare_medium
from ttmap.io.raster import refine_depth

# The exact reference (visibility graph of the land's corners) is the reference test's.
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "reference"))
from test_islands_reference import WaterPaths  # noqa: E402

G_M_S2 = 9.80665
DEPTH_M = 4000.0
CELL_M = 500.0
#: Transverse Mercator, scale 1 on its central meridian, origin at the grid's centre.
CRS = "+proj=tmerc +lat_0=39 +lon_0=143 +k=1 +x_0=0 +y_0=0 +ellps=WGS84 +units=m +no_defs"


def medium_depth(n: int) -> tuple[np.ndarray, list[tuple[float, float, float]]]:
    """Uniform depth with round islands (centre row, centre col, radius in cells)."""
    rng = np.random.default_rng(3)
    depth = np.full((n, n), DEPTH_M)
    rows, cols = np.mgrid[0:n, 0:n]
    islands = []
    for _ in range(max(4, n // 40)):
        r0, c0, rad = rng.uniform(0.2 * n, 0.9 * n), rng.uniform(0.2 * n, 0.9 * n), rng.uniform(3, 6)
        depth[(rows - r0) ** 2 + (cols - c0) ** 2 <= rad**2] = -40.0
        islands.append((r0, c0, rad))
    return depth, islands


def run(n: int, refine: int, repeat: int, n_targets: int) -> dict[str, float]:
    depth, _ = medium_depth(n)
    fine, _ = refine_depth(depth, refine)
    step = CELL_M / refine
    x0, y0 = -0.5 * n * CELL_M, 0.5 * n * CELL_M
    grid = Grid(fine.shape, Affine(step, 0.0, x0, 0.0, -step, y0), CRS)
    sx, sy = x0 + 0.1 * n * CELL_M + 0.37 * CELL_M, y0 - 0.1 * n * CELL_M - 0.61 * CELL_M
    best = np.inf
    for _ in range(repeat):
        tracemalloc.start()
        t0 = time.process_time()
        medium = prepare_medium(fine, grid)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            t = medium.travel_time(Source.point_xy(sx, sy, crs=grid.crs)).arrival_time_s
        best = min(best, time.process_time() - t0)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()
    c = float(np.sqrt(G_M_S2 * DEPTH_M))
    # The same ground targets at every refine level: native cell centres, seeded.
    rng = np.random.default_rng(11)
    rr = rng.integers(0, n, n_targets)
    cc = rng.integers(0, n, n_targets)
    fr, fc = rr * refine + refine // 2, cc * refine + refine // 2
    ft = t[fr, fc]
    # the fine cell nearest the native centre: its own centre is the target
    fx = x0 + (fc + 0.5) * step
    fy = y0 - (fr + 0.5) * step
    paths = WaterPaths(fine <= 0.0, grid.transform)
    straight = shapely.linestrings(np.stack([np.broadcast_to([sx, sy], (n_targets, 2)),
                                             np.column_stack([fx, fy])], axis=1))
    blocked = shapely.intersects(straight, paths.land)
    far = np.hypot(fx - sx, fy - sy) > 20 * CELL_M
    ok = np.isfinite(ft) & far
    exact_open = np.hypot(fx - sx, fy - sy) / c
    sel = ok & ~blocked
    rel_open = np.abs(ft[sel] - exact_open[sel]) / exact_open[sel]
    sel_b = np.nonzero(ok & blocked)[0]
    exact_b = np.array([paths.length_m(shapely.Point(sx, sy), (fx[k], fy[k])) for k in sel_b]) / c
    rel_b = np.abs(ft[sel_b] - exact_b) / exact_b
    return {"cells": float(fine.size), "cpu_s": best, "peak_mb": peak / 1e6,
            "open_p99": float(np.quantile(rel_open, 0.99)), "open_max": float(rel_open.max()),
            "behind_p99": float(np.quantile(rel_b, 0.99)) if rel_b.size else float("nan"),
            "behind_max": float(rel_b.max()) if rel_b.size else float("nan"), "n_behind": float(rel_b.size)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--repeat", type=int, default=2)
    args = ap.parse_args()
    n = 300 if args.quick else 600
    base = None
    print(f"uniform depth {DEPTH_M:g} m, {n} x {n} cells of {CELL_M / 1000:g} km, islands 3-6 cells in radius")
    print("refine  cells        CPU s   x native  peak MB  open water p99/max       behind islands p99/max (n)")
    for refine in (1, 2, 3):
        r = run(n, refine, args.repeat, 400)
        base = base or r
        print(f"{refine:>6}  {int(r['cells']):>10,}  {r['cpu_s']:7.2f}  {r['cpu_s'] / base['cpu_s']:8.1f}  "
              f"{r['peak_mb']:7.0f}  {r['open_p99']:.3%} / {r['open_max']:.3%}      "
              f"{r['behind_p99']:.3%} / {r['behind_max']:.3%} ({int(r['n_behind'])})")


if __name__ == "__main__":
    main()
