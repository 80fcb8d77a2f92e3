"""Batch benchmark: many independent solves, serial against a local Dask cluster.

Run from the repository root (ttmap need not be installed)::

    python benchmarks/bench_batch.py                 # 16 solves on 1000 x 1000, 2 workers
    python benchmarks/bench_batch.py --tasks 32 --size 1500 --workers 2

What is measured, all in one run on the same files
--------------------------------------------------
1. *Serial*: ``run_tasks(..., executor="serial")``: one read of the
   bathymetry, one prepared medium, ``--tasks`` site-centred solves (point
   sources a few cells off the synthetic coast, ``kind="site"``), each writing
   its GeoTIFF and record.
2. *Local cluster*: ``run_tasks(..., executor="local", n_workers=N)``, the
   same tasks into another folder: the wall time includes starting and
   stopping the cluster (N worker processes, one thread each).
3. *Warm cluster*: a ``LocalCluster`` started beforehand (its start-up timed
   on its own), the same tasks sent to its address: the wall time then holds
   the work plus the per-task cost of Dask (each worker still reads the file
   and prepares its medium once).
4. *Plain processes*: the tasks split into N fixed shares, each run serially
   in its own process of a ``multiprocessing`` pool (no Dask): the ceiling the
   machine offers for this work (two solves at once share memory bandwidth
   and caches), against which the cluster's own cost shows.
5. *Per-task overhead*: (a) ``warm wall - serial wall / N`` per task; (b) the
   same with cluster start and stop; (c) measured directly: round trips of
   trivial tasks (``client.map`` of a no-op) on the warm cluster.
6. *Identical results*: every raster of the parallel runs equals the serial
   one (array and nodata).

The rounds are interleaved (serial, local, warm, plain, serial, ...) and the
best and median of each are printed, with the CPU capacity (throughput of N
busy processes relative to one) measured between rounds: on a shared machine
other work lowers every parallel figure. The warm cluster's caches are
emptied before each of its rounds, so its workers read the file and prepare
the medium every round, as the serial run does.

Then a projection of a 1000-scenario set on a 1 arc-minute ocean-basin grid
(assumptions printed with it) for several worker counts.

The synthetic bathymetry is a projected grid of 1 km cells: smooth random
deep water (3000-5000 m) with about 15 % land and a continental shelf that
shoals to 50 m at the coast.

This script prints figures; it asserts nothing.
"""

from __future__ import annotations

import argparse
import math
import os
import platform
import shutil
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from ttmap.jobs import batch as batch_module  # noqa: E402
from ttmap.jobs.batch import run_tasks  # noqa: E402
from ttmap.tasks import MediumSpec, SolveTask  # noqa: E402
from ttmap.sources import Source  # noqa: E402


def write_bathymetry(path: Path, n: int, seed: int = 11) -> tuple[np.ndarray, Any]:
    """Synthetic elevation GeoTIFF (1 km cells, EPSG:3857); returns (depth_m, transform)."""
    import rasterio
    from affine import Affine
    from scipy import ndimage

    rng = np.random.default_rng(seed)
    y = np.linspace(0.0, 1.0, n)[:, None]
    x = np.linspace(0.0, 1.0, n)[None, :]
    f = np.zeros((n, n))
    for _ in range(14):
        kx, ky = rng.uniform(1.5, 7.0, 2)
        px, py = rng.uniform(0.0, 2 * np.pi, 2)
        f += np.sin(kx * 2 * np.pi * x + px) * np.cos(ky * 2 * np.pi * y + py)
    f = (f - f.mean()) / f.std()
    land = f > np.quantile(f, 0.85)
    dist_km = ndimage.distance_transform_edt(~land)  # cells = km
    deep = 4000.0 - 1000.0 * np.tanh(f)
    depth = np.minimum(deep, 50.0 + 25.0 * dist_km)
    depth[land] = -30.0
    transform = Affine(1000.0, 0.0, 0.0, 0.0, -1000.0, n * 1000.0)
    with rasterio.open(
        path, "w", driver="GTiff", width=n, height=n, count=1, dtype="float32",
        crs="EPSG:3857", transform=transform, tiled=True, compress="deflate",
    ) as dst:
        dst.write((-depth).astype(np.float32), 1)
    return depth, transform


def coastal_sites(depth: np.ndarray, transform: Any, count: int, seed: int = 5) -> list[SolveTask]:
    """``count`` site-centred tasks: water cells 3-5 cells from land, spread over the grid."""
    from scipy import ndimage

    land = depth <= 0
    dist = ndimage.distance_transform_edt(~land)
    cand = np.argwhere((dist >= 3) & (dist <= 5))
    rng = np.random.default_rng(seed)
    picks = cand[rng.choice(len(cand), size=count, replace=False)]
    tasks = []
    for i, (r, c) in enumerate(picks):
        xs = transform.c + transform.a * (c + 0.5)
        ys = transform.f + transform.e * (r + 0.5)
        tasks.append(SolveTask(
            f"site{i:02d}", Source.point_xy(float(xs), float(ys), label=f"site {i}"), kind="site",
            snap_radius_m=10_000.0,
        ))
    return tasks


def _noop(i: int) -> int:
    return i


def _spin(seconds: float) -> float:
    """Busy CPU work of about ``seconds`` on an idle core; returns its wall time."""
    t0 = time.perf_counter()
    x = 0
    for i in range(int(seconds * 2.5e7)):
        x ^= i
    return time.perf_counter() - t0


def cpu_capacity(n: int) -> float:
    """Throughput of ``n`` concurrent busy processes relative to one (n on an idle machine)."""
    import multiprocessing as mp

    ctx = mp.get_context("spawn")
    with ctx.Pool(n) as pool:
        pool.map(_spin, [0.05] * n)  # start-up
        t0 = time.perf_counter()
        pool.map(_spin, [1.0])
        one = time.perf_counter() - t0
        t0 = time.perf_counter()
        pool.map(_spin, [1.0] * n)
        many = time.perf_counter() - t0
    return n * one / many


def _serial_chunk(args: tuple[list[SolveTask], MediumSpec, str]) -> list[Any]:
    tasks, spec, out = args
    return run_tasks(tasks, spec, out, executor="serial")


def plain_processes(tasks: list[SolveTask], spec: MediumSpec, out: Path, w: int) -> list[Any]:
    """The same tasks split over ``w`` plain processes (no Dask), each running them serially."""
    import multiprocessing as mp

    chunks = [(tasks[i::w], spec, str(out)) for i in range(w)]
    with mp.get_context("spawn").Pool(w) as pool:
        pool.map(_noop, range(w))  # start-up, not timed by the caller's first round only
        t0 = time.perf_counter()
        parts = pool.map(_serial_chunk, chunks)
        wall = time.perf_counter() - t0
    return [wall, [x for part in parts for x in part]]


def raster_values(path: str) -> tuple[np.ndarray, float]:
    import rasterio

    with rasterio.open(path) as src:
        return src.read(1), float(src.nodata)


def timed(fn: Any) -> tuple[float, Any]:
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def projection(
    ns_per_cell: float, write_ns_per_cell: float, n_cells_bench: int, efficiency: float,
    overhead_s: float,
) -> None:
    """Print the 1000-scenario projection at 1 arc-minute."""
    from affine import Affine

    from ttmap.grid import Grid, solve_plane
    from ttmap.memory import estimate_peak_bytes, total_memory_bytes

    # A Pacific-sized basin: 120 x 80 degrees at 1 arc-minute, 40 S to 40 N.
    grid = Grid((4800, 7200), Affine(1 / 60, 0, 120.0, 0, -1 / 60, 40.0), "EPSG:4326")
    plane = solve_plane(grid)
    solve_cells = plane.shape[0] * plane.shape[1]
    # Fast marching is O(N log N): scale the measured time per cell by log N.
    scale = math.log2(solve_cells) / math.log2(n_cells_bench)
    solve_s = solve_cells * ns_per_cell * 1e-9 * scale
    write_s = grid.rows * grid.cols * write_ns_per_cell * 1e-9  # GeoTIFF, overviews, summary
    per_task_s = solve_s + write_s + overhead_s
    mem = estimate_peak_bytes(grid.shape, plane.shape)
    total = total_memory_bytes() or 0
    fit = int(0.6 * total // mem) if mem else 0
    n_tasks = 1000
    print()
    print("Projection: 1000 scenarios, 1 arc-minute basin grid")
    print(f"  grid {grid.cols} x {grid.rows} cells (120 x 80 degrees, 40 S - 40 N), "
          f"solve grid {plane.shape[1]} x {plane.shape[0]} = {solve_cells / 1e6:.1f} M cells")
    print(f"  per solve: {solve_s:.1f} s (measured {ns_per_cell:.0f} ns/solve cell here, x{scale:.2f} "
          f"for N log N), + {write_s:.1f} s writing ({write_ns_per_cell:.0f} ns/cell measured), "
          f"+ {overhead_s * 1000:.0f} ms Dask overhead")
    print(f"  memory per worker: ~{mem / 2**30:.1f} GiB (ttmap.memory estimate) -> this machine "
          f"({total / 2**30:.0f} GiB, 60 % usable) holds {fit} such worker(s)")
    print(f"  parallel efficiency assumed: {efficiency:.2f} (measured here with the warm cluster)")
    print("  assumptions: one scenario = one front solve; every worker on its own core with its "
          "memory; workers read the file once; tasks >> workers")
    print(f"  {'workers':>8} {'wall':>12}")
    for n in (1, 2, 8, 32, 128):
        eff = 1.0 if n == 1 else efficiency
        wall = n_tasks * per_task_s / (n * eff)
        print(f"  {n:>8} {wall / 3600:>9.2f} h")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--size", type=int, default=1000, help="grid side in cells (default 1000)")
    ap.add_argument("--tasks", type=int, default=16, help="number of solves (default 16)")
    ap.add_argument("--workers", type=int, default=2, help="worker processes (default 2)")
    ap.add_argument("--repeat", type=int, default=3, help="rounds of serial/local/warm (default 3)")
    ap.add_argument("--trivial", type=int, default=400, help="no-op tasks for the overhead (default 400)")
    args = ap.parse_args()

    import logging

    import distributed

    logging.getLogger("distributed").setLevel(logging.ERROR)
    print(f"machine: {platform.platform()}, {os.cpu_count()} cores, Python {platform.python_version()}, "
          f"dask.distributed {distributed.__version__}")
    w = args.workers
    capacities = [cpu_capacity(w)]
    print(f"load average at start {os.getloadavg()[0]:.2f}; {w} busy processes run at "
          f"{capacities[0]:.2f} x the throughput of one (the best speed-up the machine offers now)")
    tmp = Path(tempfile.mkdtemp(prefix="ttmap-bench-batch-"))
    try:
        bathy = tmp / "bathy.tif"
        depth, transform = write_bathymetry(bathy, args.size)
        tasks = coastal_sites(depth, transform, args.tasks)
        spec = MediumSpec(str(bathy))
        cells = args.size * args.size
        n = len(tasks)
        print(f"grid: {args.size} x {args.size} cells of 1 km ({cells / 1e6:.1f} M), "
              f"{100 * float((depth <= 0).mean()):.0f} % land; {n} site-centred point solves; "
              f"{args.repeat} rounds of serial / local / warm, interleaved")

        t_start, cluster = timed(lambda: distributed.LocalCluster(
            n_workers=w, threads_per_worker=1, processes=True,
            dashboard_address=None, host="127.0.0.1",
            scheduler_kwargs={"dashboard_address": "127.0.0.1:0"}))
        walls: dict[str, list[float]] = {"serial": [], "local": [], "warm": [], "plain": []}
        task_s: dict[str, list[float]] = {"serial": [], "local": [], "warm": [], "plain": []}
        solve_s: list[float] = []
        runs: dict[str, Any] = {}
        failed: list[str] = []
        try:
            with distributed.Client(cluster) as client:
                for r in range(args.repeat):
                    t, runs["serial"] = timed(lambda: run_tasks(
                        tasks, spec, tmp / f"serial{r}", executor="serial"))
                    walls["serial"].append(t)
                    t, runs["local"] = timed(lambda: run_tasks(
                        tasks, spec, tmp / f"local{r}", executor="local", n_workers=w))
                    walls["local"].append(t)
                    client.run(batch_module._clear_cache)  # each worker reads and prepares again
                    t, runs["warm"] = timed(lambda: run_tasks(
                        tasks, spec, tmp / f"warm{r}", executor=cluster.scheduler_address))
                    walls["warm"].append(t)
                    t, runs["plain"] = plain_processes(tasks, spec, tmp / f"plain{r}", w)
                    walls["plain"].append(t)
                    for key, summaries in runs.items():
                        task_s[key] += [x.seconds for x in summaries if x.ok]
                        failed += [x.error for x in summaries if not x.ok]
                    solve_s += [x.summary["solve_seconds"] for x in runs["serial"] if x.ok]
                    capacities.append(cpu_capacity(w))
                client.gather(client.map(_noop, range(20), pure=False))  # warm up
                t_triv, _ = timed(lambda: client.gather(
                    client.map(_noop, range(args.trivial), pure=False)))
        finally:
            t_stop, _ = timed(cluster.close)

        same = True
        for key in ("local", "warm", "plain"):
            other = {x.name: x for x in runs[key]}
            for a in runs["serial"]:
                b = other[a.name]
                if a.ok and b.ok:
                    va, na = raster_values(a.raster)
                    vb, nb = raster_values(b.raster)
                    same &= bool(np.array_equal(va, vb) and na == nb)
        best = {k: min(v) for k, v in walls.items()}
        med = {k: float(np.median(v)) for k, v in walls.items()}
        mean_task = {k: float(np.mean(v)) for k, v in task_s.items()}
        solve = float(np.mean(solve_s))
        print()
        print(f"{'':30} {'best':>8} {'median':>8}  mean task on its worker")
        print(f"{'serial':30} {best['serial']:8.2f} {med['serial']:8.2f}  {mean_task['serial']:.3f} s")
        print(f"{f'local cluster, {w} workers':30} {best['local']:8.2f} {med['local']:8.2f}  "
              f"{mean_task['local']:.3f} s   (start and stop of the cluster included)")
        print(f"{f'warm cluster, {w} workers':30} {best['warm']:8.2f} {med['warm']:8.2f}  "
              f"{mean_task['warm']:.3f} s   (start {t_start:.2f} s, stop {t_stop:.2f} s not included)")
        print(f"{f'plain processes, {w} (no Dask)':30} {best['plain']:8.2f} {med['plain']:8.2f}  "
              f"{mean_task['plain']:.3f} s   (tasks split in {w} fixed halves; pool start not included)")
        print(f"speed-up vs serial (best)      plain {best['serial'] / best['plain']:.2f} x, local {best['serial'] / best['local']:.2f} x, "
              f"warm {best['serial'] / best['warm']:.2f} x   [ideal {w:.2f} x; CPU capacity "
              f"measured between rounds {min(capacities):.2f}-{max(capacities):.2f} x]")
        print(f"per-task overhead (a)          {1000 * (best['warm'] - best['serial'] / w) / n:8.1f} ms/task "
              "(warm wall - serial wall / workers, per task, best rounds)")
        print(f"per-task overhead (b)          {1000 * (best['local'] - best['serial'] / w) / n:8.1f} ms/task "
              "(the same with cluster start and stop)")
        print(f"per-task overhead (c)          {1000 * t_triv / args.trivial:8.2f} ms/task "
              f"({args.trivial} no-op tasks round trip on the warm cluster)")
        write_ns = 1e9 * (mean_task["serial"] - solve) / cells
        print(f"per solve (serial)             {solve:8.3f} s solve ({1e9 * solve / cells:.0f} ns/cell), "
              f"{mean_task['serial']:.3f} s whole task ({1e9 * mean_task['serial'] / cells:.0f} ns/cell; "
              f"writing and summary {write_ns:.0f} ns/cell)")
        print(f"identical rasters              {'yes' if same else 'NO'} "
              f"({sum(x.ok for x in runs['serial'])} tasks x 3 parallel runs against serial)")
        print(f"load average at end {os.getloadavg()[0]:.2f}")
        if failed:
            print("failed tasks:", *sorted(set(failed)), sep="\n  ")
        efficiency = min(1.0, (best["serial"] / best["warm"]) / w)
        overhead = max(0.0, (best["warm"] - best["serial"] / w) / n)
        projection(1e9 * solve / cells, write_ns, cells, efficiency, overhead)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
