"""End-to-end benchmark: ``ttmap map`` as a user runs it, against the bare scikit-fmm solve.

Run from the repository root (ttmap need not be installed)::

    python benchmarks/bench_cli.py                  # 2000 x 2000 projected and 7200 x 4800 geographic
    python benchmarks/bench_cli.py --quick          # the 2000 x 2000 case only
    python benchmarks/bench_cli.py --coast rough    # cell-scale speckle coasts (the stress case)
    python benchmarks/bench_cli.py --write-stages   # also time the products one by one
    python benchmarks/bench_cli.py --quick --variants   # and with the map, coast, report off

First the script times ``ttmap --help`` in fresh interpreters (best and
median of seven, beside the bare interpreter's start; goal under 0.3 s) and
counts the modules ``import ttmap.cli.main`` loads. Then, for each case, it

1. writes a test bathymetry GeoTIFF with rasterio into a temporary folder
   (float32 elevation, negative below sea level, tiled and DEFLATE-compressed;
   the smooth random depth of ``bench_engine.py`` with one of three
   coastlines, ``--coast``: ``realistic`` (the default: a coastline smoothed
   at the cell scale but rough on scales of 8 to 100 cells, a few hundred
   islands per 4 M cells), ``rough`` (``bench_engine.py``'s coast roughened
   cell by cell: thousands of speckle islands, lakes and diagonal joins) or
   ``smooth`` (no small features at all);
2. runs ``ttmap map FILE --source ... --out DIR`` with its default products
   (front arrival GeoTIFF and SLD, isochrone GeoPackage and SLDs, coastal
   arrival GeoPackage and SLD, PNG map, run.json) in a fresh Python process,
   timing the wall clock around it and reading the child's peak resident
   memory from the kernel's resource usage record of that child
   (``os.wait4``: the per-child form of ``getrusage(RUSAGE_CHILDREN)``);
3. times the raw ``skfmm.travel_time(phi, speed, dx, order=2, periodic=...)``
   call on the same grid in another fresh process (for the geographic grid: on
   the Mercator solve-plane arrays ttmap builds, the arrays a correct solve on
   the sphere needs), with its peak memory (inputs included) as in
   ``bench_engine.py``;
4. prints both wall times and CPU times (the CLI child's user + system time
   from the same resource record; ``time.process_time`` for the raw call),
   their ratios, the memory figures, and the per-stage timings the job wrote
   to run.json (``timings_s``). CPU time is the steadier figure when other
   processes compete for the cores;
5. with ``--write-stages``, solves once more in a helper process and times
   the write stage alone, product by product (:func:`_write_stages`), then
   runs ``ttmap map`` in three more fresh processes with the main stages
   marked on the CPU clock (:func:`cpu_timeline`): imports, checks, read,
   speeds, solve, write stage, record, report;
6. with ``--variants``, times the same run with products switched off
   (``--no-report``; ``--no-map``; ``--no-map --no-coast --no-report``), so
   the cost of each shows as a difference of whole-process CPU times.

This process stays small (the arrays live in helper processes) so the
children's ru_maxrss, a high-water mark that Linux carries over from the
parent at exec(), is their own.

Targets: ``ttmap --help`` under 0.3 s; CLI / raw within 2x for 2000 x 2000
projected, within 1.5x for 7200 x 4800 geographic. The script prints figures; it never asserts.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import platform
import resource
import subprocess
import sys
import tempfile
import time
import warnings
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(HERE))

import bench_engine as be

# ---------------------------------------------------------------------------
# helper-process work (runs in forkserver children)
# ---------------------------------------------------------------------------


COASTS = ("realistic", "rough", "smooth")

#: Relative amplitude and feature size (cells) of the finer shape octaves of
#: the realistic coast, added to bench_engine's 100-cell field before the
#: land threshold: 307 islands, 73 lakes and 9 diagonal-only water joins in
#: the 2000 x 2000 grid (the rough coast: about 8400 closed water bodies and
#: 10 355 diagonal joins).
REALISTIC_OCTAVES = ((0.35, 25), (0.15, 8))


def realistic_depth_m(rows: int, cols: int, *, seed: int = 1, land_share: float = 0.12) -> Any:
    """Smooth random depth (m, positive down) with a realistic coast (land at -50 m).

    The depth is ``bench_engine.synthetic_depth_m``'s (a random field of
    100-cell features, cubic); the land is where that field plus finer
    octaves (:data:`REALISTIC_OCTAVES`, also smooth) is in its top
    ``land_share``: bays, capes and islands down to a few cells, no
    cell-scale noise.
    """
    import numpy as np
    from scipy import ndimage

    rng = np.random.default_rng(seed)

    def octave(cells: int) -> Any:
        coarse = rng.standard_normal((max(4, rows // cells), max(4, cols // cells)))
        f = ndimage.zoom(coarse, (rows / coarse.shape[0], cols / coarse.shape[1]), order=3)
        f = f[:rows, :cols]
        f -= f.mean()
        f /= f.std()
        return f

    base = octave(100)
    shape = base.copy()
    for amplitude, cells in REALISTIC_OCTAVES:
        shape += amplitude * octave(cells)
    step = (max(1, rows // 500), max(1, cols // 500))
    threshold = np.quantile(shape[:: step[0], :: step[1]], 1.0 - land_share)
    depth = 3500.0 - 600.0 * base
    depth[shape > threshold] = -50.0
    return depth


def _case(spec: dict[str, Any]) -> dict[str, Any]:
    """bench_engine's projected or geographic case, with the coast ``spec['coast']``."""
    from affine import Affine

    coast = spec.get("coast", "realistic")
    rows, cols = spec["rows"], spec["cols"]
    seed = 1 if spec["kind"] == "projected" else 2  # as in bench_engine
    if coast == "realistic":
        depth = realistic_depth_m(rows, cols, seed=seed)
    else:
        roughness = 0.0 if coast == "smooth" else be.COAST_ROUGHNESS
        depth = be.synthetic_depth_m(rows, cols, seed=seed, roughness=roughness)
    if spec["kind"] == "projected":
        cell = spec["cell_m"]
        row, col = rows // 2, cols // 2
        transform = Affine(cell, 0.0, 0.0, 0.0, -cell, rows * cell)
        crs, kind = "EPSG:3857", "xy"
    else:
        transform = Affine(spec["res_deg"], 0.0, spec["west"], 0.0, -spec["res_deg"], spec["north"])
        col, row = (int(v) for v in ~transform * tuple(spec["src"]))
        crs, kind = "EPSG:4326", "lonlat"
    be.deep_patch(depth, row, col)
    x, y = transform * (col + 0.5, row + 0.5)
    return {
        "name": spec["name"],
        "depth": depth,
        "transform": tuple(transform)[:6],
        "crs": crs,
        "source": (kind, float(x), float(y)),
    }


def _coast_counts(depth: Any) -> dict[str, int]:
    """Islands (8-connected land) and closed water bodies (4-connected, minus the sea)."""
    import numpy as np
    from scipy import ndimage

    land = depth <= 0.0
    islands = ndimage.label(land, structure=np.ones((3, 3), dtype=bool))[1]
    waters = ndimage.label(~land)[1]
    return {"islands": int(islands), "closed_water_bodies": max(int(waters) - 1, 0)}


def _write_case(spec: dict[str, Any], folder: str) -> dict[str, Any]:
    """Make the synthetic grid, write its GeoTIFF and the raw-call inputs."""
    import numpy as np
    import rasterio
    from affine import Affine

    from ttmap.traveltime import prepare_medium

    case = _case(spec)
    depth = case["depth"]
    tif = Path(folder) / "bathymetry.tif"
    profile = {
        "driver": "GTiff",
        "width": depth.shape[1],
        "height": depth.shape[0],
        "count": 1,
        "dtype": "float32",
        "crs": case["crs"],
        "transform": Affine(*case["transform"]),
        "tiled": True,
        "blockxsize": 256,
        "blockysize": 256,
        "compress": "deflate",
        "BIGTIFF": "IF_SAFER",
    }
    elevation = (-depth).astype(np.float32)  # elevation: negative below sea level
    with rasterio.open(tif, "w", **profile) as ds:
        ds.write(elevation, 1)
        ds.set_band_description(1, "elevation (m), negative below sea level")
    # The raw call's inputs, from the depth the CLI will read back (float32).
    grid = be.make_grid(case)
    source = be.make_source(case["source"])
    medium = prepare_medium(-elevation.astype(np.float64), grid)
    raw = be.raw_inputs(medium, source)
    be.save_inputs(Path(folder), None, raw)
    kind, a, b = case["source"]
    return {
        "tif": str(tif),
        "tif_mib": tif.stat().st_size / 2**20,
        "source_args": [f"--source={a!r},{b!r}"]
        if kind == "lonlat"
        else [f"--source-xy={a!r},{b!r}"],
        "cells": int(depth.size),
        **_coast_counts(depth),
        "plane_shape": list(medium.plane.shape),
        "dx": raw["dx"],
        "periodic": raw["periodic"],
    }


def _raw_solve(folder: str, dx: list[float], periodic: list[bool], repeat: int) -> dict[str, Any]:
    """Load phi/mask/speed and time the bare scikit-fmm call (best of ``repeat``)."""
    import gc

    import numpy as np

    gc.collect()
    base = be._maxrss_mib()
    f = Path(folder)
    inp = {
        "phi": np.load(f / "phi.npy"),
        "mask": np.load(f / "mask.npy"),
        "speed": np.load(f / "speed.npy"),
        "dx": dx,
        "periodic": periodic,
    }
    loaded = be._maxrss_mib()
    times, cpus = [], []
    for _ in range(repeat):
        c0, t0 = time.process_time(), time.perf_counter()
        out = be.raw_call(inp)
        times.append(time.perf_counter() - t0)
        cpus.append(time.process_time() - c0)
        del out
        gc.collect()
    peak = be._maxrss_mib()
    return {
        "best_s": min(times),
        "best_cpu_s": min(cpus),
        "times_s": times,
        "total_mib": peak - base,
        "call_mib": peak - loaded,
    }


def _feature_counts(out_dir: str) -> dict[str, int]:
    """Features per layer of the vector products of one run (read in a helper process)."""
    import pyogrio

    counts: dict[str, int] = {}
    for gpkg in sorted(Path(out_dir).glob("*.gpkg")):
        for name, _ in pyogrio.list_layers(gpkg):
            counts[f"{gpkg.stem}:{name}"] = int(pyogrio.read_info(gpkg, layer=name)["features"])
    return counts


#: What ``--write-stages`` times inside the write stage: (module, function, label).
WRITE_STAGES = (
    ("ttmap.io.raster", "write_arrival_geotiff", "arrival GeoTIFF (own thread)"),
    ("ttmap.jobs.map", "_coast_table", "coastal stretches"),
    ("ttmap.products.isochrones", "isochrone_lines_and_bands", "isochrone lines and bands"),
    ("ttmap.jobs.layers", "isochrone_layers", "isochrone layer records"),
    ("ttmap.jobs.layers", "write_isochrones", "isochrone GeoPackage + SLDs"),
    ("ttmap.jobs.layers", "write_arrival_style", "arrival SLD"),
    ("ttmap.jobs.styling", "style_map_set", "QGIS styles (raster, isochrones)"),
    ("ttmap.products.coast", "coast_layer", "coastal layer records"),
    ("ttmap.jobs.layers", "write_one_layer", "coastal GeoPackage"),
    ("ttmap.jobs.styling", "style_map_coast", "QGIS style (coast)"),
    ("ttmap.products.maps", "render_arrival_map", "map: drawing"),
    ("ttmap.io.figures", "save_figure", "map: PNG file"),
)


def _write_stages(tif: str, source_args: list[str], out_dir: str) -> dict[str, Any]:
    """Solve once, then time the write stage alone, product by product (``--write-stages``).

    Runs ``ttmap.jobs.map._write_products`` as ``ttmap map`` does, with each
    function of :data:`WRITE_STAGES` wrapped to record its wall time and the
    CPU time of the thread that ran it. matplotlib is imported first and
    timed apart (the CLI pays it inside the write stage). The write stage is
    run three times on the same solve; the figures are those of the run with
    the least process CPU time.
    """
    import functools
    import importlib

    c0 = time.process_time()
    for name in ("matplotlib.figure", "matplotlib.backends.backend_agg", "matplotlib.collections"):
        importlib.import_module(name)
    mpl_import_s = time.process_time() - c0
    from ttmap.io.raster import read_bathymetry
    from ttmap.jobs import map as mapjob
    from ttmap.jobs.options import ReadingOptions
    from ttmap.sources import Source
    from ttmap.traveltime import prepare_medium

    option, value = source_args[0].split("=", 1)
    a, b = (float(v) for v in value.split(","))
    source = Source.point(a, b) if option == "--source" else Source.point_xy(a, b)
    bathy = read_bathymetry(tif)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the CLI run printed them already
        medium = prepare_medium(bathy.depth_m, bathy.grid)
    result = medium.travel_time(source)
    water = medium.water
    del medium
    stages: dict[str, list[float]] = {}
    for module_name, name, label in WRITE_STAGES:
        module = importlib.import_module(module_name)
        if not hasattr(module, name):
            continue
        fn = getattr(module, name)

        def timed(*args: Any, _fn: Any = fn, _label: str = label, **kw: Any) -> Any:
            c, w = time.thread_time(), time.perf_counter()
            try:
                return _fn(*args, **kw)
            finally:
                got = stages.setdefault(_label, [0.0, 0.0])
                got[0] += time.perf_counter() - w
                got[1] += time.thread_time() - c

        setattr(module, name, functools.wraps(fn)(timed))
    Path(out_dir).mkdir(parents=True, exist_ok=True)
    job = mapjob.MapJob(ReadingOptions(tif), source, out_dir, overwrite=True)
    best: dict[str, Any] | None = None
    for _ in range(3):
        stages.clear()
        c0, w0 = time.process_time(), time.perf_counter()
        mapjob._write_products(job, mapjob.ProductSet("front", "long-wave", None), result, water)
        got = {
            "wall_s": time.perf_counter() - w0,
            "cpu_s": time.process_time() - c0,
            "matplotlib_import_s": mpl_import_s,
            "stages": {k: list(v) for k, v in stages.items()},
        }
        if best is None or got["cpu_s"] < best["cpu_s"]:
            best = got
    assert best is not None
    return best


#: Functions whose entry and exit ``--write-stages`` marks on the CPU clock of a
#: fresh ``ttmap map`` process (module, function, label); see :func:`cpu_timeline`.
TIMELINE_MARKS = (
    ("ttmap.jobs.map", "run_map_job", "job"),
    ("ttmap.jobs.checks", "check_map_job", "up-front checks"),
    ("ttmap.jobs.options", "ReadingOptions.read", "read bathymetry"),
    ("ttmap.traveltime", "prepare_medium", "speeds (medium)"),
    ("ttmap.traveltime", "Medium.travel_time", "solve"),
    ("ttmap.jobs.map", "_write_products", "write stage"),
    ("ttmap.jobs.record", "build_run_record", "run record built"),
    ("ttmap.jobs.styling", "write_run_report", "report.html"),
    ("ttmap.jobs.record", "write_run_record", "run.json"),
)

_TIMELINE_CODE = r"""
import functools, importlib, json, resource, sys, time
c_start = time.process_time()
marks = []
def wrap(module_name, qualname, label):
    module = importlib.import_module(module_name)
    owner, _, name = qualname.rpartition(".")
    holder = getattr(module, owner) if owner else module
    fn = getattr(holder, name)
    @functools.wraps(fn)
    def timed(*args, **kw):
        c = time.process_time()
        try:
            return fn(*args, **kw)
        finally:
            marks.append((label, c - c_start, time.process_time() - c))
    setattr(holder, name, timed)
from ttmap.cli.main import cli
c_imports = time.process_time() - c_start
for m, q, label in json.loads(sys.argv[1]):
    wrap(m, q, label)
import ttmap.jobs.map
c_wrap = time.process_time()
c_wrap_imports = c_wrap - c_start - c_imports
try:
    cli(sys.argv[2:])
except SystemExit:
    pass
usage = resource.getrusage(resource.RUSAGE_SELF)
print(json.dumps({"imports_s": c_imports, "job_imports_s": c_wrap_imports, "marks": marks,
                  "process_cpu_s": usage.ru_utime + usage.ru_stime}))
"""


def cpu_timeline(tif: str, source_args: list[str], out_dir: Path, runs: int = 3) -> dict[str, Any]:
    """CPU time of a fresh ``ttmap map`` process, stage by stage (best of ``runs``).

    The child runs the CLI in its own interpreter with :data:`TIMELINE_MARKS`
    wrapped, and reports for each the process CPU time at its entry and the
    process CPU time it took (the GeoTIFF thread's work counts where it
    happens). ``imports_s`` is the CPU time of ``from ttmap.cli.main import
    cli``, ``job_imports_s`` that of importing the marked modules (the job,
    the engine and the record; the run would import them later); the
    interpreter's own start is not in these figures.
    """
    import shutil

    best: dict[str, Any] | None = None
    for _ in range(runs):
        shutil.rmtree(out_dir, ignore_errors=True)
        proc = subprocess.run(
            [sys.executable, "-c", _TIMELINE_CODE, json.dumps(TIMELINE_MARKS), "map", tif,
             *source_args, "--out", str(out_dir), "-q"],
            capture_output=True, text=True, env=_child_env(), check=True,
        )
        got = json.loads(proc.stdout.strip().splitlines()[-1])
        if best is None or got["process_cpu_s"] < best["process_cpu_s"]:
            best = got
    assert best is not None
    return best


def in_helper(fn: Any, *args: Any) -> Any:
    with be._context().Pool(1) as pool:
        return pool.apply(fn, args)


# ---------------------------------------------------------------------------
# the CLI run
# ---------------------------------------------------------------------------


def run_cli(
    tif: str, source_args: list[str], out_dir: Path, log_dir: Path, extra: tuple[str, ...] = ()
) -> dict[str, Any]:
    """One ``ttmap map`` run in a fresh interpreter; wall time and peak RSS of the child.

    ``extra`` holds further options (e.g. ``--no-map``) for ``--variants``.
    """
    cmd = [
        sys.executable,
        "-c",
        "from ttmap.cli.main import cli; cli()",
        "map",
        tif,
        *source_args,
        "--out",
        str(out_dir),
        *extra,
    ]
    env = _child_env()
    log_dir.mkdir(parents=True, exist_ok=True)
    with open(log_dir / "stdout.txt", "wb") as so, open(log_dir / "stderr.txt", "wb") as se:
        t0 = time.perf_counter()
        proc = subprocess.Popen(cmd, stdout=so, stderr=se, env=env, cwd=str(log_dir))
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        sys.stderr.write((log_dir / "stderr.txt").read_text())
        raise SystemExit(f"ttmap map failed with exit status {proc.returncode}")
    record = json.loads((out_dir / "run.json").read_text())
    return {
        "wall_s": wall,
        "cpu_s": usage.ru_utime + usage.ru_stime,
        "maxrss_mib": usage.ru_maxrss / 1024.0,  # KiB on Linux
        "timings_s": record.get("timings_s", {}),
        "files": len(record.get("products", [])) + 1,  # the products and run.json
        "summary": record.get("product_sets", {}).get("front", {}),
        "children_maxrss_mib": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0,
    }


#: ``--variants``: the same run with products switched off, to show what each costs
#: (label, extra options). The last one keeps only the GeoTIFF, the isochrones and
#: the style files.
VARIANTS: tuple[tuple[str, tuple[str, ...]], ...] = (
    ("no report.html", ("--no-report",)),
    ("no map picture", ("--no-map",)),
    ("no map, coast or report", ("--no-map", "--no-coast", "--no-report")),
)

#: Runs of ``ttmap --help`` timed for the start-up figure (best and median printed).
HELP_RUNS = 7

#: Start-up goal for ``ttmap --help`` in a fresh process (issue 8), seconds.
HELP_GOAL_S = 0.3


def _child_env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + (
        os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else ""
    )
    return env


def time_help(runs: int = HELP_RUNS) -> dict[str, Any]:
    """Wall and CPU time of ``ttmap --help`` in fresh interpreters, and the modules it loads.

    The command is what the ``ttmap`` console script runs (``cli()`` from
    ``ttmap.cli.main``), started as ``python -c`` so that the source tree is
    timed whether or not it is installed. The interpreter's own start is
    timed too (``python -c pass``) and printed beside it, so the figure can be
    read as "interpreter + ttmap".
    """
    env = _child_env()

    def one(code: str) -> tuple[float, float]:
        t0 = time.perf_counter()
        proc = subprocess.Popen(
            [sys.executable, "-c", code],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
            env=env,
        )
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - t0
        if os.waitstatus_to_exitcode(status) != 0:
            err = proc.stderr.read().decode() if proc.stderr else ""
            raise SystemExit(f"{code!r} failed: {err}")
        if proc.stderr is not None:
            proc.stderr.close()
        return wall, usage.ru_utime + usage.ru_stime

    help_code = "import sys; sys.argv = ['ttmap', '--help']; from ttmap.cli.main import cli; cli()"
    one(help_code)  # warm the file cache (byte code, shared libraries)
    helps = sorted(one(help_code) for _ in range(runs))
    bare = sorted(one("pass") for _ in range(runs))
    count_code = (
        "import sys; before = set(sys.modules); import ttmap.cli.main; "
        "new = set(sys.modules) - before; "
        "print(len([m for m in new if m == 'ttmap' or m.startswith('ttmap.')]), len(new))"
    )
    out = subprocess.run(
        [sys.executable, "-c", count_code], capture_output=True, text=True, env=env, check=True
    ).stdout.split()
    return {
        "best_s": helps[0][0],
        "median_s": helps[len(helps) // 2][0],
        "best_cpu_s": min(c for _, c in helps),
        "python_best_s": bare[0][0],
        "ttmap_modules": int(out[0]),
        "all_modules": int(out[1]),
    }


CASES = [
    {
        "kind": "projected",
        "name": "projected 2000 x 2000 (1 km)",
        "cols": 2000,
        "rows": 2000,
        "cell_m": 1000.0,
        "target": 2.0,
    },
    {
        "kind": "geographic",
        "name": "geographic 7200 x 4800 (1')",
        "cols": 7200,
        "rows": 4800,
        "west": -170.0,
        "north": 40.0,
        "res_deg": 1.0 / 60.0,
        "src": [-110.0, 0.0],
        "target": 1.5,
    },
]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="the 2000 x 2000 case only")
    ap.add_argument(
        "--repeat",
        type=int,
        default=3,
        help="runs of the CLI and of the raw call for the 2000 x 2000 case (best of)",
    )
    ap.add_argument(
        "--repeat-large",
        type=int,
        default=1,
        help="runs of each for the 7200 x 4800 case (best of)",
    )
    ap.add_argument(
        "--keep", metavar="DIR", help="write the test files and outputs here and keep them"
    )
    ap.add_argument(
        "--coast",
        choices=COASTS,
        default="realistic",
        help="synthetic coastline: realistic (default; a few hundred islands per 4 M cells), "
        "rough (roughened cell by cell: thousands of speckle islands and lakes) or smooth",
    )
    ap.add_argument(
        "--write-stages",
        action="store_true",
        help="also time the write stage alone, product by product (one more solve per case)",
    )
    ap.add_argument(
        "--variants",
        action="store_true",
        help="also time the run with products switched off (--no-report, --no-map, ...), best of --repeat",
    )
    ap.add_argument(
        "--smooth-coast",
        action="store_true",
        help="the same as --coast smooth (kept for older command lines)",
    )
    args = ap.parse_args()
    coast = "smooth" if args.smooth_coast else args.coast

    ctx = be._context()
    if ctx.get_start_method() == "forkserver":
        from multiprocessing import forkserver

        forkserver.ensure_running()
    t_start = time.perf_counter()
    print("ttmap end-to-end benchmark (ttmap map, default products)")
    print(
        f"  python {sys.version.split()[0]}, {platform.machine()}, {os.cpu_count()} CPUs; "
        f"helper processes: '{ctx.get_start_method()}'"
    )
    print(f"  coastlines: {coast}" + (f" ({be.COAST_ROUGHNESS:g})" if coast == "rough" else ""))
    helped = time_help()
    print(
        f"\n== ttmap --help, fresh process (best of {HELP_RUNS}) ==\n"
        f"  {helped['best_s']:.3f} s wall (median {helped['median_s']:.3f} s, "
        f"CPU {helped['best_cpu_s']:.3f} s; bare interpreter {helped['python_best_s']:.3f} s); "
        f"goal < {HELP_GOAL_S} s: {'met' if helped['best_s'] < HELP_GOAL_S else 'NOT met'}\n"
        f"  import ttmap.cli.main loads {helped['ttmap_modules']} ttmap modules, "
        f"{helped['all_modules']} modules in all",
        flush=True,
    )
    cases = [dict(c, coast=coast) for c in (CASES[:1] if args.quick else CASES)]
    results = []
    tmp_obj = None
    if args.keep:
        base = Path(args.keep)
        base.mkdir(parents=True, exist_ok=True)
    else:
        tmp_obj = tempfile.TemporaryDirectory(prefix="ttmap_bench_cli_")
        base = Path(tmp_obj.name)
    try:
        for i, spec in enumerate(cases):
            repeat = args.repeat if i == 0 else args.repeat_large
            folder = base / f"case{i}"
            folder.mkdir(exist_ok=True)
            print(f"\n== {spec['name']} ==", flush=True)
            t0 = time.perf_counter()
            info = in_helper(_write_case, spec, str(folder))
            print(
                f"  test GeoTIFF {info['tif_mib']:.0f} MiB written in {time.perf_counter() - t0:.1f} s; "
                f"{info['cells'] / 1e6:.2f} M cells; solve plane {info['plane_shape'][0]} x "
                f"{info['plane_shape'][1]}; {info['islands']} islands, "
                f"{info['closed_water_bodies']} closed water bodies",
                flush=True,
            )
            runs = []
            for k in range(repeat):
                out_dir = folder / f"out{k}"
                runs.append(run_cli(info["tif"], info["source_args"], out_dir, folder / f"log{k}"))
                print(
                    f"  ttmap map run {k + 1}: {runs[-1]['wall_s']:.2f} s wall, "
                    f"{runs[-1]['cpu_s']:.2f} s CPU, peak RSS {runs[-1]['maxrss_mib']:.0f} MiB",
                    flush=True,
                )
            best = min(runs, key=lambda r: r["wall_s"])
            best_cpu = min(r["cpu_s"] for r in runs)
            raw = in_helper(_raw_solve, str(folder), info["dx"], info["periodic"], repeat)
            for f in ("phi.npy", "mask.npy", "speed.npy"):
                (folder / f).unlink()
            r_t = best["wall_s"] / raw["best_s"]
            r_c = best_cpu / raw["best_cpu_s"]
            print(
                f"  raw skfmm.travel_time          : {raw['best_s']:8.2f} s wall, "
                f"{raw['best_cpu_s']:.2f} s CPU (best of {repeat}), peak "
                f"{raw['total_mib']:.0f} MiB with inputs ({raw['call_mib']:.0f} MiB in the call)"
            )
            print(
                f"  ttmap map (whole process)      : {best['wall_s']:8.2f} s wall, {best_cpu:.2f} s CPU "
                f"(best of {repeat}), peak RSS {best['maxrss_mib']:.0f} MiB; {best['files']} files"
            )
            for what, val in (("wall", r_t), ("CPU ", r_c)):
                print(
                    f"  ratio CLI / raw, {what}          : {val:8.2f}x (target <= {spec['target']:g}x: "
                    f"{'met' if val <= spec['target'] else 'NOT met'})"
                )
            print(
                f"  memory CLI / raw               : {best['maxrss_mib'] / raw['total_mib']:8.2f}x"
            )
            print(
                "  run.json timings_s (best run)  : "
                + ", ".join(f"{k} {v:.2f}" for k, v in best["timings_s"].items())
            )
            if args.write_stages:
                st = in_helper(
                    _write_stages, info["tif"], info["source_args"], str(folder / "stages")
                )
                print(
                    f"  write stage alone              : {st['wall_s']:8.2f} s wall, "
                    f"{st['cpu_s']:.2f} s CPU (process), after importing matplotlib in "
                    f"{st['matplotlib_import_s']:.2f} s"
                )
                for label, (wall, cpu) in st["stages"].items():
                    print(f"    {label:<32} {wall:6.2f} s wall {cpu:6.2f} s CPU (its thread)")
                tl = cpu_timeline(info["tif"], info["source_args"], folder / "timeline")
                print(
                    f"  CPU timeline of a fresh ttmap map process (best of 3; process CPU "
                    f"{tl['process_cpu_s']:.2f} s):\n"
                    f"    {'from ttmap.cli.main import cli':<32} {tl['imports_s']:6.2f} s CPU\n"
                    f"    {'import the job, engine, record':<32} {tl['job_imports_s']:6.2f} s CPU"
                )
                for label, at, took in sorted(tl["marks"], key=lambda m: m[1]):
                    print(f"    {label:<32} {took:6.2f} s CPU (starts at {at:5.2f} s)")
            if args.variants:
                for v, (label, extra) in enumerate(VARIANTS):
                    vruns = [
                        run_cli(info["tif"], info["source_args"], folder / f"variant{v}_{k}",
                                folder / f"vlog{v}_{k}", extra)
                        for k in range(repeat)
                    ]
                    v_cpu = min(r["cpu_s"] for r in vruns)
                    v_wall = min(r["wall_s"] for r in vruns)
                    print(
                        f"  variant {label:<28}: {v_wall:6.2f} s wall, {v_cpu:.2f} s CPU (best of "
                        f"{repeat}); CPU ratio {v_cpu / raw['best_cpu_s']:.2f}x, wall ratio "
                        f"{v_wall / raw['best_s']:.2f}x"
                    )
            counts = in_helper(_feature_counts, str(folder / "out0"))
            print(
                "  features written               : "
                + ", ".join(f"{k} {v}" for k, v in counts.items())
            )
            s = best["summary"]
            if s:
                print(
                    f"  front: {s.get('cells_reached')} cells reached, range "
                    f"{s.get('arrival_min_range')} min, {s.get('unreached_basins')} closed basins, "
                    f"{s.get('diagonal_joins_opened')} diagonal joins opened"
                )
            results.append(
                {
                    "case": spec["name"],
                    "cells": info["cells"],
                    "cli": best,
                    "raw": raw,
                    "ratio": r_t,
                    "cpu": best_cpu,
                    "ratio_cpu": r_c,
                    "target": spec["target"],
                }
            )
    finally:
        if tmp_obj is not None:
            tmp_obj.cleanup()

    print("\n== Summary ==")
    print(
        f"ttmap --help start-up: {helped['best_s']:.3f} s (goal < {HELP_GOAL_S} s); "
        f"interpreter alone {helped['python_best_s']:.3f} s"
    )
    print(
        f"{'case':<30} {'M cells':>7} {'CLI s':>7} {'raw s':>7} {'wall':>6} {'CLI CPU':>8} "
        f"{'raw CPU':>8} {'CPU':>6} {'target':>6} {'CLI MiB':>8} {'raw MiB':>8}"
    )
    for r in results:
        print(
            f"{r['case']:<30} {r['cells'] / 1e6:7.2f} {r['cli']['wall_s']:7.2f} "
            f"{r['raw']['best_s']:7.2f} {r['ratio']:5.2f}x {r['cpu']:8.2f} "
            f"{r['raw']['best_cpu_s']:8.2f} {r['ratio_cpu']:5.2f}x {r['target']:5.1f}x "
            f"{r['cli']['maxrss_mib']:8.0f} {r['raw']['total_mib']:8.0f}"
        )
    print("\nper-stage timings from run.json (s):")
    keys: list[str] = []
    for r in results:
        keys += [k for k in r["cli"]["timings_s"] if k not in keys]
    print(f"{'case':<30} " + " ".join(f"{k:>14}" for k in keys))
    for r in results:
        t = r["cli"]["timings_s"]
        print(f"{r['case']:<30} " + " ".join(f"{t.get(k, math.nan):14.2f}" for k in keys))
    print(f"\nbenchmark wall time {time.perf_counter() - t_start:.0f} s")


if __name__ == "__main__":
    main()
