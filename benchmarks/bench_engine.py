"""Engine benchmark: ttmap's solve against the bare scikit-fmm call, time and memory.

Run from the repository root (ttmap need not be installed)::

    python benchmarks/bench_engine.py            # full: up to 7200 x 4800 cells
    python benchmarks/bench_engine.py --quick    # skips the 4000^2 and 7200 x 4800 cases

What is measured
----------------
1. *Solver overhead.* The full API call a Python user makes,
   ``prepare_medium(depth, grid)`` then ``medium.travel_time(Source...)``, against
   the raw ``skfmm.travel_time(phi, speed, dx, order=2, periodic=...)`` call on
   the same arrays, both in this process, best of ``--repeat`` runs, wall
   clock (``time.perf_counter``) and CPU time (``time.process_time``; robust
   when other processes compete for the cores). Cases: a 2000 x 2000 projected grid, and a global
   0.1-degree band (3600 columns, latitude -70..70, wrapping). For the
   geographic case the raw call gets the solve-plane arrays the API builds
   (``medium.plane.shape``, ``medium.speed_plane_m_s``, ``medium.barrier_plane``);
   for information it is also timed on the native-shape array (flat degrees:
   the cost of a solve that ignores the sphere, not a correct one).
   The API time includes everything from the depth array to the arrival-time
   array on the native grid (speeds, connectivity, source start, march,
   carrying back, summary); the raw time is the one call only. The system
   part of the CPU time (``getrusage``: mostly page faults on new memory) and
   the ratio of user CPU times are printed for information.
2. *Scaling.* ns per cell and peak memory of the API call for 1000^2, 2000^2,
   4000^2 and 7200 x 4800 (columns x rows) projected grids, one point source,
   and a 7200 x 4800 one-arc-minute geographic ocean basin; the raw call on the
   same arrays beside it. Each figure is one run in a fresh process.

Memory
------
Peak memory is the peak resident set size (``resource.getrusage(RUSAGE_SELF)
.ru_maxrss``, KiB on Linux) of a fresh process (``multiprocessing`` 'forkserver', else 'spawn')
that imports numpy, scikit-fmm and ttmap, records the baseline, loads its
inputs from ``.npy`` files (the depth array for the API; ``phi``, its mask and
the speed array for the raw call), runs the call once and reads the peak again.
Two figures are printed: *total* = peak minus the post-import baseline (inputs
included), and *call* = peak minus the level after loading the inputs. RSS, not
tracemalloc: scikit-fmm allocates its work arrays in C++, which tracemalloc
does not see.

The synthetic bathymetry is smooth random depth (about 2300-4700 m) with about
12 % land whose coastline is roughened cell by cell, so the grids have small
islands, closed lakes and diagonal-only joins like real coasts
(``--smooth-coast`` turns the roughening off). The source is
a point in deep water near the middle.

This script prints figures and ratios; it never asserts.
"""

from __future__ import annotations

import argparse
import gc
import math
import multiprocessing as mp
import os
import platform
import resource
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np
import skfmm
from affine import Affine
from scipy import ndimage

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from ttmap.grid import Grid
from ttmap.sources import Source
from ttmap.traveltime import prepare_medium

START_RADIUS_CELLS = 2.0  # radius of the raw call's start circle (phi < 0 inside)


# ---------------------------------------------------------------------------
# synthetic grids
# ---------------------------------------------------------------------------


#: Cell-by-cell perturbation of the land threshold (0: smooth coastlines).
COAST_ROUGHNESS: float = 0.15


def synthetic_depth_m(
    rows: int,
    cols: int,
    *,
    seed: int = 1,
    land_share: float = 0.12,
    feature_cells: int = 100,
    roughness: float | None = None,
) -> np.ndarray:
    """Smooth random depth (m, positive down) with rough-coasted land (-50 m).

    A coarse random field is interpolated up (cubic) to ``rows x cols``; the
    top ``land_share`` of it, perturbed cell by cell by ``roughness`` standard
    deviations of white noise, becomes land.
    """
    roughness = COAST_ROUGHNESS if roughness is None else roughness
    rng = np.random.default_rng(seed)
    coarse = rng.standard_normal((max(4, rows // feature_cells), max(4, cols // feature_cells)))
    f = ndimage.zoom(coarse, (rows / coarse.shape[0], cols / coarse.shape[1]), order=3)
    f = f[:rows, :cols]
    f -= f.mean()
    f /= f.std()
    rough = f + roughness * rng.standard_normal((rows, cols)).astype(np.float32)
    threshold = np.quantile(rough[:: max(1, rows // 500), :: max(1, cols // 500)], 1.0 - land_share)
    depth = 3500.0 - 600.0 * f
    depth[rough > threshold] = -50.0
    return depth


def deep_patch(depth: np.ndarray, row: int, col: int, radius: int = 40) -> None:
    """Make a disc of deep water around (row, col), so the source is offshore."""
    r0, r1 = max(0, row - radius), min(depth.shape[0], row + radius + 1)
    c0, c1 = max(0, col - radius), min(depth.shape[1], col + radius + 1)
    rr, cc = np.ogrid[r0:r1, c0:c1]
    disc = (rr - row) ** 2 + (cc - col) ** 2 <= radius**2
    sub = depth[r0:r1, c0:c1]
    sub[disc] = np.maximum(np.where(sub[disc] > 0, sub[disc], 0.0), 3000.0)


#: CRS of the projected cases: azimuthal equidistant centred on the grid, so that map
#: distances are ground distances near the middle (ttmap warns about a CRS whose scale
#: at the grid's centre departs from 1 by more than 1 %, e.g. Web Mercator).
PROJECTED_CRS = "+proj=aeqd +lat_0=0 +lon_0=0 +datum=WGS84 +units=m +no_defs"


def projected_case(
    cols: int, rows: int, cell_m: float = 1000.0, seed: int = 1, roughness: float | None = None
) -> dict[str, Any]:
    """A projected (metre) grid centred on its CRS's origin; source in deep water near the middle."""
    depth = synthetic_depth_m(rows, cols, seed=seed, roughness=roughness)
    row, col = rows // 2, cols // 2
    deep_patch(depth, row, col)
    transform = Affine(cell_m, 0.0, -0.5 * cols * cell_m, 0.0, -cell_m, 0.5 * rows * cell_m)
    x, y = transform * (col + 0.5, row + 0.5)
    return {
        "name": f"projected {cols} x {rows}",
        "depth": depth,
        "transform": tuple(transform)[:6],
        "crs": PROJECTED_CRS,
        "source": ("xy", float(x), float(y)),
    }


def geographic_case(
    cols: int,
    rows: int,
    west: float,
    north: float,
    res_deg: float,
    src_lonlat: tuple[float, float],
    seed: int = 2,
    name: str = "",
    roughness: float | None = None,
) -> dict[str, Any]:
    """A lon/lat grid; a deep patch around the source."""
    depth = synthetic_depth_m(rows, cols, seed=seed, roughness=roughness)
    transform = Affine(res_deg, 0.0, west, 0.0, -res_deg, north)
    col, row = (int(v) for v in ~transform * src_lonlat)
    deep_patch(depth, row, col)
    lon, lat = transform * (col + 0.5, row + 0.5)
    return {
        "name": name or f"geographic {cols} x {rows}",
        "depth": depth,
        "transform": tuple(transform)[:6],
        "crs": "EPSG:4326",
        "source": ("lonlat", float(lon), float(lat)),
    }


def make_grid(case: dict[str, Any]) -> Grid:
    return Grid(case["depth"].shape, Affine(*case["transform"]), case["crs"])


def make_source(spec: tuple[str, float, float]) -> Source:
    kind, a, b = spec
    return Source.point(a, b) if kind == "lonlat" else Source.point_xy(a, b)


# ---------------------------------------------------------------------------
# the two calls
# ---------------------------------------------------------------------------


def api_call(depth: np.ndarray, grid: Grid, source: Source) -> Any:
    """What a Python user runs: depth array in, arrival times on the native grid out."""
    medium = prepare_medium(depth, grid)
    return medium.travel_time(source)


def raw_inputs(medium: Any, source: Source) -> dict[str, Any]:
    """phi, mask, speed, dx, periodic for the bare scikit-fmm call on the solve plane.

    phi is the signed distance (plane metres) to a circle of START_RADIUS_CELLS
    cells around the source, masked on the barrier.
    """
    plane = medium.plane
    geom = source.in_crs(medium.grid.crs)
    px, py = (float(v) for v in plane.to_plane(geom.x, geom.y))
    ys, xs = plane.cell_centres()
    dxp = xs - px
    if plane.periodic_x:
        span = abs(plane.dx_signed_m) * plane.shape[1]
        dxp = np.mod(dxp + span / 2.0, span) - span / 2.0
    phi = np.hypot(dxp[None, :], (ys - py)[:, None]) - START_RADIUS_CELLS * max(plane.spacing_m)
    return {
        "phi": phi,
        "mask": np.ascontiguousarray(medium.barrier_plane),
        "speed": np.ascontiguousarray(medium.speed_plane_m_s),
        "dx": [float(plane.spacing_m[0]), float(plane.spacing_m[1])],
        "periodic": [False, bool(plane.periodic_x)],
    }


def raw_inputs_native(medium: Any, source: Source) -> dict[str, Any]:
    """The same on the native lon/lat array, treated as flat (information only)."""
    grid = medium.grid
    geom = source.in_crs(grid.crs)
    row, col = (int(v) for v in grid.rowcol(geom.x, geom.y))
    dy_m, dx_m = grid.cell_size_m()
    rr = (np.arange(grid.rows) - row) * dy_m
    cc = (np.arange(grid.cols) - col) * dx_m
    phi = np.hypot(cc[None, :], rr[:, None]) - START_RADIUS_CELLS * max(dy_m, dx_m)
    speed = np.where(medium.water, medium.speed_m_s, 1.0)
    return {
        "phi": phi,
        "mask": np.ascontiguousarray(~medium.water),
        "speed": np.ascontiguousarray(speed),
        "dx": [float(dy_m), float(dx_m)],
        "periodic": [False, bool(grid.wraps_x)],
    }


def raw_call(inp: dict[str, Any]) -> Any:
    phi = np.ma.MaskedArray(inp["phi"], mask=inp["mask"])
    return skfmm.travel_time(phi, inp["speed"], dx=inp["dx"], order=2, periodic=inp["periodic"])


def best_of(fns: list[Any], repeat: int) -> tuple[list[float], list[float], list[float]]:
    """Best wall time and best CPU time of each function over ``repeat`` rounds.

    The functions run alternately (a, b, a, b, ...) rather than (a, a, a, b, b,
    b), which spreads any background load on the machine over both. CPU time
    (``time.process_time``, this process's user + system time) is far less
    sensitive to other processes competing for the cores than wall time; the
    calls are single-threaded, so on an idle machine the two agree. The third
    list is the system part of the best CPU time (``getrusage``): the kernel's
    work, mostly page faults on newly allocated memory.
    """
    wall = [math.inf] * len(fns)
    cpu = [math.inf] * len(fns)
    sys_s = [math.nan] * len(fns)
    for _ in range(repeat):
        for i, fn in enumerate(fns):
            gc.collect()
            s0 = resource.getrusage(resource.RUSAGE_SELF).ru_stime
            c0, t0 = time.process_time(), time.perf_counter()
            out = fn()
            dt, dc = time.perf_counter() - t0, time.process_time() - c0
            ds = resource.getrusage(resource.RUSAGE_SELF).ru_stime - s0
            del out
            wall[i] = min(wall[i], dt)
            if dc < cpu[i]:
                cpu[i], sys_s[i] = dc, ds
    return wall, cpu, sys_s


# ---------------------------------------------------------------------------
# fresh-process runs (memory, and single-run times for the scaling table)
# ---------------------------------------------------------------------------


def _maxrss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0  # KiB on Linux


def _vmhwm_mib() -> float:
    """Peak RSS of this address space (Linux /proc; NaN elsewhere), a cross-check."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return float(line.split()[1]) / 1024.0
    except OSError:
        pass
    return math.nan


def _child(task: dict[str, Any]) -> dict[str, Any]:
    """Run one call in this (fresh) process; return time and peak-RSS figures."""
    gc.collect()
    base = _maxrss_mib()
    base_hwm = _vmhwm_mib()
    folder = Path(task["folder"])
    if task["kind"] == "api":
        depth = np.load(folder / "depth.npy")
        grid = Grid(depth.shape, Affine(*task["transform"]), task["crs"])
        source = make_source(task["source"])
        loaded = _maxrss_mib()
        c0, t0 = time.process_time(), time.perf_counter()
        out = api_call(depth, grid, source)
        dt, dc = time.perf_counter() - t0, time.process_time() - c0
        extra = {
            "reached": int(out.summary.cells_reached),
            "solve_shape": list(out.summary.solve_shape),
        }
    else:
        prefix = task["prefix"]
        inp = {
            "phi": np.load(folder / f"{prefix}phi.npy"),
            "mask": np.load(folder / f"{prefix}mask.npy"),
            "speed": np.load(folder / f"{prefix}speed.npy"),
            "dx": task["dx"],
            "periodic": task["periodic"],
        }
        loaded = _maxrss_mib()
        c0, t0 = time.process_time(), time.perf_counter()
        out = raw_call(inp)
        dt, dc = time.perf_counter() - t0, time.process_time() - c0
        extra = {"reached": int(np.ma.count(out))}
    peak = _maxrss_mib()
    return {
        "time_s": dt,
        "cpu_s": dc,
        "base_mib": base,
        "total_mib": peak - base,
        "call_mib": peak - loaded,
        "hwm_total_mib": _vmhwm_mib() - base_hwm,
        **extra,
    }


def _context() -> Any:
    """Where fresh processes come from.

    ru_maxrss is a high-water mark that Linux carries across exec(): a child
    started straight from this (large) process would report this process's
    peak as its own. The 'forkserver' server is started while this process is
    still small (see :func:`main`), so its children start small too. Falls back
    to 'spawn' where there is no forkserver.
    """
    try:
        return mp.get_context("forkserver")
    except ValueError:
        return mp.get_context("spawn")


def in_fresh_process(task: dict[str, Any]) -> dict[str, Any]:
    with _context().Pool(1) as pool:
        out = pool.apply(_child, (task,))
    hwm = out["hwm_total_mib"]
    if math.isfinite(hwm) and abs(hwm - out["total_mib"]) > 0.05 * max(hwm, 1.0) + 16.0:
        print(
            f"  note: ru_maxrss peak {out['total_mib']:.0f} MiB differs from VmHWM peak {hwm:.0f} MiB"
        )
    return out


def save_inputs(
    folder: Path, case: dict[str, Any], raw: dict[str, Any] | None, prefix: str = ""
) -> None:
    if case is not None:
        np.save(folder / "depth.npy", case["depth"])
    if raw is not None:
        for k in ("phi", "mask", "speed"):
            np.save(folder / f"{prefix}{k}.npy", raw[k])


def api_task(folder: Path, case: dict[str, Any]) -> dict[str, Any]:
    return {
        "kind": "api",
        "folder": str(folder),
        "transform": case["transform"],
        "crs": case["crs"],
        "source": case["source"],
    }


def raw_task(folder: Path, raw: dict[str, Any], prefix: str = "") -> dict[str, Any]:
    return {
        "kind": "raw",
        "folder": str(folder),
        "prefix": prefix,
        "dx": raw["dx"],
        "periodic": raw["periodic"],
    }


# ---------------------------------------------------------------------------
# report helpers
# ---------------------------------------------------------------------------


def ratio(a: float, b: float) -> str:
    return f"{a / b:.2f}x" if b > 0 else "n/a"


def verdict(value: float, target: float) -> str:
    return f"(target <= {target:g}x: {'met' if value <= target else 'NOT met'})"


def overhead_case(
    case: dict[str, Any],
    repeat: int,
    workdir: Path,
    rows: list[dict[str, Any]],
    native_too: bool = False,
) -> None:
    grid = make_grid(case)
    source = make_source(case["source"])
    depth = case["depth"]
    print(
        f"\n== Solver overhead: {case['name']} ({grid.rows} rows x {grid.cols} cols"
        f"{', wrapping' if grid.wraps_x else ''}) =="
    )
    medium = prepare_medium(depth, grid)
    raw = raw_inputs(medium, source)
    native = raw_inputs_native(medium, source) if native_too else None
    print(
        f"  solve plane {medium.plane.shape[0]} x {medium.plane.shape[1]} "
        f"({medium.plane.shape[0] * medium.plane.shape[1] / 1e6:.2f} M cells); native "
        f"{grid.rows * grid.cols / 1e6:.2f} M cells; water {medium.water.mean() * 100:.1f} %; "
        f"diagonal joins opened {len(medium.joins_opened)}; water bodies {medium.basin_sizes.size - 1}"
    )
    del medium
    fns = [lambda: api_call(depth, grid, source), lambda: raw_call(raw)]
    if native is not None:
        fns.append(lambda: raw_call(native))
    times, cpus, syss = best_of(fns, repeat)
    t_api, t_raw = times[0], times[1]
    c_api, c_raw = cpus[0], cpus[1]
    print(
        f"  API prepare_medium + travel_time : {t_api:8.3f} s wall, {c_api:8.3f} s CPU "
        f"(of which {syss[0]:.3f} s system; best of {repeat})"
    )
    print(
        f"  raw skfmm.travel_time, order 2   : {t_raw:8.3f} s wall, {c_raw:8.3f} s CPU "
        f"(of which {syss[1]:.3f} s system; best of {repeat})"
    )
    r_t = t_api / t_raw
    r_c = c_api / c_raw
    print(f"  time ratio API / raw, wall       : {r_t:8.2f}x {verdict(r_t, 1.2)}")
    print(f"  time ratio API / raw, CPU        : {r_c:8.2f}x {verdict(r_c, 1.2)}")
    r_u = (c_api - syss[0]) / (c_raw - syss[1])
    print(f"  time ratio API / raw, user CPU   : {r_u:8.2f}x (information: without the system time)")
    t_nat = None
    if native is not None:
        t_nat = times[2]
        print(
            f"  raw on native lon/lat array (flat, information only): {t_nat:.3f} s wall, "
            f"{cpus[2]:.3f} s CPU; API / raw-native = {ratio(t_api, t_nat)} wall, "
            f"{ratio(c_api, cpus[2])} CPU"
        )

    sub = workdir / case["name"].replace(" ", "_")
    sub.mkdir(exist_ok=True)
    save_inputs(sub, case, raw)
    m_api = in_fresh_process(api_task(sub, case))
    m_raw = in_fresh_process(raw_task(sub, raw))
    r_m = m_api["total_mib"] / m_raw["total_mib"]
    print(
        f"  peak memory API (fresh process)  : total {m_api['total_mib']:8.0f} MiB, "
        f"call {m_api['call_mib']:7.0f} MiB"
    )
    print(
        f"  peak memory raw (fresh process)  : total {m_raw['total_mib']:8.0f} MiB, "
        f"call {m_raw['call_mib']:7.0f} MiB"
    )
    print(
        f"  peak memory ratio API / raw      : {r_m:8.2f}x (totals, inputs included) {verdict(r_m, 1.5)}"
    )
    m_nat = None
    if native is not None:
        save_inputs(sub, None, native, prefix="native_")
        m_nat = in_fresh_process(raw_task(sub, native, prefix="native_"))
        print(f"  peak memory raw native (info)    : total {m_nat['total_mib']:8.0f} MiB")
    rows.append(
        {
            "case": case["name"],
            "api_s": t_api,
            "raw_s": t_raw,
            "ratio_t": r_t,
            "api_cpu": c_api,
            "raw_cpu": c_raw,
            "ratio_c": r_c,
            "api_sys": syss[0],
            "raw_sys": syss[1],
            "ratio_u": r_u,
            "api_mib": m_api["total_mib"],
            "raw_mib": m_raw["total_mib"],
            "ratio_m": r_m,
            "native_s": t_nat,
            "native_mib": None if m_nat is None else m_nat["total_mib"],
        }
    )
    for f in sub.iterdir():
        f.unlink()


def scaling_case(case: dict[str, Any], workdir: Path, rows: list[dict[str, Any]]) -> None:
    grid = make_grid(case)
    source = make_source(case["source"])
    medium = prepare_medium(case["depth"], grid)
    raw = raw_inputs(medium, source)
    plane_cells = medium.plane.shape[0] * medium.plane.shape[1]
    del medium
    sub = workdir / case["name"].replace(" ", "_")
    sub.mkdir(exist_ok=True)
    save_inputs(sub, case, raw)
    task_raw = raw_task(sub, raw)
    del raw
    gc.collect()
    m_api = in_fresh_process(api_task(sub, case))
    m_raw = in_fresh_process(task_raw)
    cells = grid.rows * grid.cols
    row = {
        "case": case["name"],
        "cells": cells,
        "plane_cells": plane_cells,
        "api_s": m_api["time_s"],
        "raw_s": m_raw["time_s"],
        "api_cpu": m_api["cpu_s"],
        "raw_cpu": m_raw["cpu_s"],
        "api_ns": 1e9 * m_api["cpu_s"] / cells,
        "raw_ns": 1e9 * m_raw["cpu_s"] / plane_cells,
        "api_mib": m_api["total_mib"],
        "raw_mib": m_raw["total_mib"],
        "api_call_mib": m_api["call_mib"],
        "raw_call_mib": m_raw["call_mib"],
    }
    rows.append(row)
    print(
        f"  {case['name']:<34} {cells / 1e6:6.2f} M cells (plane {plane_cells / 1e6:6.2f} M): "
        f"API {row['api_s']:6.2f} s wall, {row['api_cpu']:6.2f} s CPU = {row['api_ns']:4.0f} ns/cell, "
        f"peak {row['api_mib']:5.0f} MiB ({row['api_mib'] * 2**20 / cells:3.0f} B/cell) | raw "
        f"{row['raw_s']:6.2f} s wall, {row['raw_cpu']:6.2f} s CPU = {row['raw_ns']:4.0f} ns/plane "
        f"cell, peak {row['raw_mib']:5.0f} MiB | ratios {ratio(row['api_cpu'], row['raw_cpu'])} CPU, "
        f"{ratio(row['api_mib'], row['raw_mib'])} memory",
        flush=True,
    )
    for f in sub.iterdir():
        f.unlink()


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="skip the 4000^2 and 7200 x 4800 cases")
    ap.add_argument("--repeat", type=int, default=3, help="runs per in-process timing (best of)")
    ap.add_argument(
        "--no-geographic-large",
        action="store_true",
        help="skip the 7200 x 4800 geographic scaling case",
    )
    ap.add_argument(
        "--smooth-coast",
        action="store_true",
        help="smooth coastlines (no cell-scale islands, lakes or diagonal joins)",
    )
    args = ap.parse_args()
    global COAST_ROUGHNESS
    if args.smooth_coast:
        COAST_ROUGHNESS = 0.0

    t_start = time.perf_counter()
    ctx = _context()
    if ctx.get_start_method() == "forkserver":
        from multiprocessing import forkserver

        forkserver.ensure_running()  # now, while this process is small
    print("ttmap engine benchmark")
    print(
        f"  python {sys.version.split()[0]}, numpy {np.__version__}, scikit-fmm "
        f"{getattr(skfmm, '__version__', '?')}, {platform.machine()}, {os.cpu_count()} CPUs"
    )
    print(f"  coastlines: {'smooth' if COAST_ROUGHNESS == 0 else f'rough ({COAST_ROUGHNESS:g})'}")
    print(
        f"  times: time.perf_counter (wall) and time.process_time (CPU); memory: peak RSS (getrusage ru_maxrss) of a fresh "
        f"'{ctx.get_start_method()}' process minus its post-import baseline"
    )

    over: list[dict[str, Any]] = []
    scale: list[dict[str, Any]] = []
    with tempfile.TemporaryDirectory(prefix="ttmap_bench_") as tmp:
        work = Path(tmp)
        overhead_case(projected_case(2000, 2000), args.repeat, work, over)
        band = geographic_case(
            3600, 1400, -180.0, 70.0, 0.1, (-150.0, 0.0), name="global 0.1 deg band 70S-70N"
        )
        overhead_case(band, args.repeat, work, over, native_too=True)
        del band

        print(
            "\n== Scaling: API (prepare_medium + travel_time) and raw call, one run each "
            "in a fresh process =="
        )
        sizes = [(1000, 1000), (2000, 2000)]
        if not args.quick:
            sizes += [(4000, 4000), (7200, 4800)]
        for cols, rows in sizes:
            scaling_case(projected_case(cols, rows), work, scale)
        if not args.quick and not args.no_geographic_large:
            geo = geographic_case(
                7200,
                4800,
                -170.0,
                40.0,
                1.0 / 60.0,
                (-110.0, 0.0),
                name="geographic 7200 x 4800 (1')",
            )
            scaling_case(geo, work, scale)
            del geo

    print("\n== Summary ==")
    print(
        f"{'case':<30} {'API s':>7} {'raw s':>7} {'wall':>6} {'API CPU':>8} {'raw CPU':>8} "
        f"{'CPU':>6} {'API sys':>8} {'raw sys':>8} {'user':>6} {'API MiB':>8} {'raw MiB':>8} "
        f"{'mem':>6}"
    )
    for r in over:
        print(
            f"{r['case']:<30} {r['api_s']:7.3f} {r['raw_s']:7.3f} {r['ratio_t']:5.2f}x "
            f"{r['api_cpu']:8.3f} {r['raw_cpu']:8.3f} {r['ratio_c']:5.2f}x "
            f"{r['api_sys']:8.3f} {r['raw_sys']:8.3f} {r['ratio_u']:5.2f}x "
            f"{r['api_mib']:8.0f} {r['raw_mib']:8.0f} {r['ratio_m']:5.2f}x"
        )
    print(
        "  targets: time ratio <= 1.2x, memory ratio <= 1.5x "
        "(geographic: raw call on the Mercator solve-plane arrays); CPU = user + sys, "
        "'user' = ratio of user CPU time (information)"
    )
    for r in over:
        if r["native_s"] is not None:
            print(
                f"  {r['case']}: raw on native-shape array (flat, info) {r['native_s']:.3f} s wall, "
                f"{r['native_mib']:.0f} MiB"
            )
    print()
    print(
        f"{'case':<30} {'M cells':>7} {'API s':>7} {'API CPU':>8} {'ns/cell':>7} {'API MiB':>8} "
        f"{'B/cell':>6} {'raw s':>7} {'raw CPU':>8} {'ns/cell':>7} {'raw MiB':>8} {'CPU':>6} {'mem':>6}"
    )
    for r in scale:
        print(
            f"{r['case']:<30} {r['cells'] / 1e6:7.2f} {r['api_s']:7.2f} {r['api_cpu']:8.2f} "
            f"{r['api_ns']:7.0f} {r['api_mib']:8.0f} {r['api_mib'] * 2**20 / r['cells']:6.0f} "
            f"{r['raw_s']:7.2f} {r['raw_cpu']:8.2f} {r['raw_ns']:7.0f} {r['raw_mib']:8.0f} "
            f"{r['api_cpu'] / r['raw_cpu']:5.2f}x {r['api_mib'] / r['raw_mib']:5.2f}x"
        )
    print(
        "  ns/cell from CPU time: API per native cell, raw per solve-plane cell (the same for"
        " projected grids); scaling rows are single runs in fresh processes"
    )
    print(f"\nbenchmark wall time {time.perf_counter() - t_start:.0f} s")


if __name__ == "__main__":
    main()
