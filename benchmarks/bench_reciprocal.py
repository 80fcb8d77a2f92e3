"""Reciprocal analytics benchmark: sites x scenarios, one-solve envelope, source location.

Run from the repository root::

    python benchmarks/bench_reciprocal.py            # 2000 x 2000, 1000 ruptures, 8 sites
    python benchmarks/bench_reciprocal.py --quick    # 600 x 600, 200 ruptures
    python benchmarks/bench_reciprocal.py --refine 2 --no-locate   # the same medium on 2 x 2 cells

Printed (never asserted):

1. Sites x scenarios: ``--scenarios`` generated trench ruptures (rectangles
   along an invented trench) x 8 coastal sites on a ``--size`` grid. The
   reciprocal table (starts + 8 site solves + reductions) against direct
   solves (16 timed, extrapolated to all scenarios); ratio; per-scenario
   reduction cost; worst relative difference on the 16 solved scenarios.
2. Envelope: one union solve plus labels against the extrapolated direct
   solves; agreement of the labels with the 16 direct solves' arg-min is left
   to the reference tests.
3. Source location: 12 gauges on a ``--locate-shape`` grid: wall time and
   peak memory (tracemalloc: numpy allocations) against one solve's.
"""

from __future__ import annotations

import argparse
import sys
import time
import tracemalloc
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import shapely  # noqa: E402
from affine import Affine  # noqa: E402
from scipy import ndimage  # noqa: E402

from ttmap import Grid, Source, prepare_medium  # noqa: E402
from ttmap.io.raster import refine_depth  # noqa: E402
from ttmap.locate import locate_source  # noqa: E402
from ttmap.reciprocal import (  # noqa: E402
    envelope_one_solve,
    reduce_over_starts,
    scenario_starts,
    site_field_s,
)


def bathymetry(rows: int, cols: int, seed: int = 1) -> np.ndarray:
    """Invented basin: smooth random depth, a coast in the east, a few islands."""
    rng = np.random.default_rng(seed)
    small = ndimage.gaussian_filter(rng.standard_normal((rows // 10 + 1, cols // 10 + 1)), 3.0)
    noise = ndimage.zoom(small, (rows / small.shape[0], cols / small.shape[1]), order=1)[:rows, :cols]
    noise = (noise - noise.min()) / (np.ptp(noise) + 1e-12)
    depth = 300.0 + 5000.0 * noise
    r, c = np.ogrid[0:rows, 0:cols]
    depth[np.broadcast_to(c >= cols * (0.9 + 0.02 * np.sin(r / (rows / 20))), depth.shape)] = -20.0
    for fr, fc, fs in ((0.3, 0.5, 0.02), (0.7, 0.6, 0.03), (0.5, 0.75, 0.015)):
        depth[(r - fr * rows) ** 2 + (c - fc * cols) ** 2 <= (fs * rows) ** 2] = -30.0
    return depth


def ruptures(grid: Grid, n: int, seed: int = 2) -> list[Source]:
    rng = np.random.default_rng(seed)
    rows, cols = grid.shape
    h = abs(grid.transform.a)
    out = []
    for _ in range(n):
        row = rng.uniform(0.05, 0.95) * rows
        col = 0.15 * cols + 0.05 * row + rng.uniform(-0.02, 0.02) * cols
        x, y = (float(v) for v in grid.xy(row, col))
        half_l, half_w = h * rng.uniform(10, 40), h * rng.uniform(4, 12)
        out.append(Source.from_geometry(shapely.box(x - half_w, y - half_l, x + half_w, y + half_l), crs=grid.crs))
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--size", type=int, default=2000)
    ap.add_argument("--scenarios", type=int, default=1000)
    ap.add_argument("--locate-shape", type=int, nargs=2, default=(4800, 7200))
    ap.add_argument("--refine", type=int, default=1,
                    help="solve parts 1 and 2 on every cell split into N x N (same medium, same sources)")
    ap.add_argument("--no-locate", action="store_true", help="skip part 3")
    args = ap.parse_args()
    if args.quick:
        args.size, args.scenarios, args.locate_shape = 600, 200, (1200, 1800)
    warnings.simplefilter("ignore")
    k = args.refine
    native = Grid((args.size, args.size), Affine(1000.0, 0, 0.0, 0, -1000.0, args.size * 1000.0), "EPSG:32654")
    n = args.size * k
    grid = Grid((n, n), Affine(1000.0 / k, 0, 0.0, 0, -1000.0 / k, n * 1000.0 / k), "EPSG:32654")
    t = time.perf_counter()
    medium = prepare_medium(refine_depth(bathymetry(args.size, args.size), k)[0], grid)
    print(f"grid {n} x {n}" + (f" ({args.size} x {args.size} cells split {k} x {k})" if k > 1 else "")
          + f", medium prepared in {time.perf_counter() - t:.1f} s")
    sources = ruptures(native, args.scenarios)
    sites = []
    for fr in np.linspace(0.06, 0.94, 8):
        r = int(fr * n)
        c = int(np.nonzero(medium.open_water[r])[0].max())  # the coast's last water cell
        sites.append((r, c))

    # 1. Sites x scenarios
    t = time.perf_counter()
    starts = scenario_starts(medium, sources)
    t_starts = time.perf_counter() - t
    t = time.perf_counter()
    fields = [site_field_s(medium, s) for s in sites]
    t_sites = time.perf_counter() - t
    t = time.perf_counter()
    table = np.stack([reduce_over_starts(f, starts) for f in fields])
    t_reduce = time.perf_counter() - t
    recip = t_starts + t_sites + t_reduce
    n_direct = 16
    t = time.perf_counter()
    direct = [medium.travel_time(s).arrival_time_s for s in sources[:n_direct]]
    t_direct16 = time.perf_counter() - t
    per_solve = t_direct16 / n_direct
    direct_all = per_solve * len(sources)
    d = np.array([[a[s] for a in direct] for s in sites])
    rel = np.abs(table[:, :n_direct] - d) / d
    print(f"\n1. sites x scenarios: {len(sources)} ruptures x {len(sites)} sites")
    print(f"   reciprocal: starts {t_starts:.2f} s ({starts.flat_index.size} start cells), "
          f"{len(sites)} site solves {t_sites:.2f} s, reductions {t_reduce:.3f} s; total {recip:.2f} s")
    print(f"   per-scenario reduction cost: {1e6 * t_reduce / (len(sources) * len(sites)):.1f} us per "
          f"site and scenario; starts {1e3 * t_starts / len(sources):.2f} ms per scenario")
    print(f"   direct: {n_direct} solves {t_direct16:.2f} s ({per_solve:.2f} s each) -> "
          f"{direct_all:.0f} s for {len(sources)} (extrapolated)")
    print(f"   speed-up {direct_all / recip:.0f}x; worst relative difference on the {n_direct} "
          f"solved scenarios {np.nanmax(rel):.3%}, median {np.nanmedian(rel):.3%}")

    # 2. Envelope
    t = time.perf_counter()
    env = envelope_one_solve(medium, sources)
    t_env = time.perf_counter() - t
    print(f"\n2. envelope of {len(sources)} scenarios: one solve + labels {t_env:.2f} s against "
          f"{direct_all:.0f} s of direct solves (extrapolated): {direct_all / t_env:.0f}x; "
          f"tie cells {int(env.tie.sum())}, relaxed start cells {env.relaxed_start_cells}")
    del fields, direct, env, medium
    if args.no_locate:
        return

    # 3. Source location
    rows, cols = args.locate_shape
    lgrid = Grid((rows, cols), Affine(1852.0, 0, 0.0, 0, -1852.0, rows * 1852.0), "EPSG:32654")
    depth = bathymetry(rows, cols, seed=3)
    lmed = prepare_medium(depth, lgrid)
    del depth
    true = (rows // 2, cols // 3)
    x, y = lgrid.xy(*true)
    tracemalloc.start()
    t = time.perf_counter()
    fwd = lmed.travel_time(Source.point_xy(float(x), float(y))).arrival_time_s
    t_one = time.perf_counter() - t
    _, peak_one = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    rng = np.random.default_rng(4)
    gauges = []
    while len(gauges) < 12:
        r, c = int(rng.uniform(0.05, 0.95) * rows), int(rng.uniform(0.05, 0.85) * cols)
        if lmed.open_water[r, c] and np.isfinite(fwd[r, c]):
            gauges.append((r, c))
    picks = [float(fwd[g]) + 300.0 for g in gauges]
    del fwd
    tracemalloc.start()
    t = time.perf_counter()
    res = locate_source(lmed, gauges, [f"g{i}" for i in range(12)], picks, [30.0] * 12)
    t_loc = time.perf_counter() - t
    _, peak_loc = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    print(f"\n3. source location, 12 gauges on {rows} x {cols} ({rows * cols / 1e6:.1f} M cells): "
          f"{t_loc:.1f} s wall (one solve {t_one:.1f} s; 12 gauge solves + 1 residual solve)")
    print(f"   peak traced memory {peak_loc / 1e9:.2f} GB vs one solve {peak_one / 1e9:.2f} GB "
          f"(medium excluded); best cell {res.best_row, res.best_col} vs true {true}, "
          f"t0 {res.best_origin_time_s:.1f} s (true 300 s); {res.diagnostics['message']}")


if __name__ == "__main__":
    main()
