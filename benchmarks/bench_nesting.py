"""Nesting benchmark: a basin solve plus a nest, against the two solves alone.

Run from the repository root::

    python benchmarks/bench_nesting.py            # 7200 x 4800 one-arc-minute basin, 3000 x 3000 nest of 30 m
    python benchmarks/bench_nesting.py --quick    # 1800 x 1200 four-arc-minute basin, 1000 x 1000 nest

What is measured, each in a fresh process (wall clock and peak memory):

- *basin*: ``prepare_medium`` + ``travel_time`` on the lon/lat basin from a point source;
- *nest alone*: ``prepare_medium`` + ``travel_time`` on the nest's UTM grid from a point
  inside it (the cost of solving a grid of the nest's size);
- *nested run*: the basin solve, then ``solve_nest`` from its arrival field.

Goal: the nested run within 1.3 x (basin + nest alone) in time. Memory: the
basin's arrival field is kept while the nest is solved, so the nested peak is
expected near the larger of the basin's peak and the basin's result plus the
nest's peak; the ratio to the larger peak alone is printed.

Peak memory: ``ru_maxrss`` of the fresh process minus its level after imports and
after loading the input ``.npy`` files (call), as in bench_engine.py. The
bathymetry is invented: a smooth random ocean with a coast through the nest.
This script prints figures and ratios; it never asserts.
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import os
import resource
import sys
import tempfile
import time

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))


def _rss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def _basin_grid(quick: bool):
    from affine import Affine

    from ttmap import Grid

    step = 4.0 / 60.0 if quick else 1.0 / 60.0
    cols, rows = (1800, 1200) if quick else (7200, 4800)
    return Grid((rows, cols), Affine(step, 0, 140.0, 0, -step, 40.0), "EPSG:4326")


def _nest_grid(quick: bool):
    from affine import Affine

    from ttmap import Grid

    n = 1000 if quick else 3000
    # UTM zone 54 N, around (141.3 E, 35.9 N); 30 m cells.
    return Grid((n, n), Affine(30.0, 0, 430_000.0, 0, -30.0, 3_990_000.0 + 30.0 * n), "EPSG:32654")


def _depth_lonlat(lon, lat):
    import numpy as np

    d = 4000.0 + 800.0 * np.sin(np.radians(lon) * 7.0) * np.cos(np.radians(lat) * 5.0)
    # an invented coast: land west of a wavy line through the nest's region
    coast = 140.35 + 0.05 * np.sin(np.radians(lat) * 40.0)
    ramp = np.clip((lon - coast) / 0.5, -1.0, 1.0)
    return np.where(ramp < 0, -10.0, np.maximum(ramp * d, 8.0))


def _make_inputs(folder: str, quick: bool) -> None:
    import numpy as np
    from pyproj import Transformer

    g = _basin_grid(quick)
    lon = g.xy(0, np.arange(g.cols))[0]
    lat = g.xy(np.arange(g.rows), 0)[1]
    np.save(os.path.join(folder, "basin.npy"), _depth_lonlat(lon[None, :], lat[:, None]))
    n = _nest_grid(quick)
    rr, cc = np.mgrid[0 : n.rows, 0 : n.cols]
    x, y = n.xy(rr, cc)
    del rr, cc
    lo, la = Transformer.from_crs(n.crs, "EPSG:4326", always_xy=True).transform(x, y)
    np.save(os.path.join(folder, "nest.npy"), _depth_lonlat(np.asarray(lo), np.asarray(la)))


def _job(kind: str, folder: str, quick: bool, out: "mp.Queue[tuple[str, float, float, str]]") -> None:
    import warnings

    import numpy as np

    from ttmap import Source, prepare_medium
    from ttmap.nesting import solve_nest

    warnings.simplefilter("ignore")
    basin, nest = _basin_grid(quick), _nest_grid(quick)
    d_basin = np.load(os.path.join(folder, "basin.npy")) if kind != "nest" else None
    d_nest = np.load(os.path.join(folder, "nest.npy")) if kind != "basin" else None
    base = _rss_mib()
    t0 = time.perf_counter()
    note = ""
    if kind in ("basin", "nested"):
        t_basin = prepare_medium(d_basin, basin).travel_time(Source.point(160.0, 10.0)).arrival_time_s
    if kind == "nest":
        c = nest.xy(nest.rows // 2, int(nest.cols * 0.8))
        r = prepare_medium(d_nest, nest).travel_time(Source.point_xy(float(c[0]), float(c[1])))
        note = f"{r.summary.cells_reached} cells reached"
    if kind == "nested":
        t_mid = time.perf_counter()
        res = solve_nest(basin, t_basin, nest, d_nest, name="bench")
        s = res.summary
        note = (f"basin part {t_mid - t0:.1f} s, nest part {time.perf_counter() - t_mid:.1f} s; "
                f"{s.boundary_cells} boundary cells, {s.cells_reached} reached, "
                f"{s.boundary_time_min_s / 60:.1f}-{s.boundary_time_max_s / 60:.1f} min")
    wall = time.perf_counter() - t0
    out.put((kind, wall, _rss_mib() - base, note))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller basin and nest")
    args = ap.parse_args()
    ctx = mp.get_context("forkserver" if "forkserver" in mp.get_all_start_methods() else "spawn")
    with tempfile.TemporaryDirectory() as folder:
        t0 = time.perf_counter()
        _make_inputs(folder, args.quick)
        b, n = _basin_grid(args.quick), _nest_grid(args.quick)
        print(f"basin {b.cols} x {b.rows} lon/lat ({abs(b.transform.a) * 60:g} arc-min), "
              f"nest {n.cols} x {n.rows} UTM ({abs(n.transform.a):g} m); inputs made in "
              f"{time.perf_counter() - t0:.1f} s; cpus {os.cpu_count()}")
        res = {}
        for kind in ("basin", "nest", "nested"):
            q: mp.Queue = ctx.Queue()
            p = ctx.Process(target=_job, args=(kind, folder, args.quick, q))
            p.start()
            k, wall, mem, note = q.get()
            p.join()
            res[k] = (wall, mem)
            print(f"{k:>7}: {wall:7.2f} s wall, peak +{mem:8.0f} MiB  {note}")
    s_wall = res["basin"][0] + res["nest"][0]
    print(f"nested / (basin + nest alone) wall: {res['nested'][0] / s_wall:.2f} (goal <= 1.3)")
    print(f"nested peak / larger peak alone: {res['nested'][1] / max(res['basin'][1], res['nest'][1]):.2f}")


if __name__ == "__main__":
    main()
