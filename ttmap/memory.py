"""How much memory a solve needs, and a refusal before a run that would not fit.

A solve's peak resident memory grows linearly with the number of cells: the
depth read from the file, the speed field, masks and water-body labels live on
the native grid, while the fast-marching work arrays (times, flags, the heap)
live on the solve grid (for lon/lat rasters the Mercator plane, which has more
rows than the native grid). :func:`estimate_peak_bytes` models the peak as

    peak = BYTES_PER_NATIVE_CELL * native cells
         + BYTES_PER_SOLVE_CELL * solve cells
         + BASE_BYTES

with constants measured on real runs (see :data:`BYTES_PER_NATIVE_CELL`), and
:func:`check_memory` refuses, before any work, a grid whose estimate exceeds a
share of the machine's memory, saying how to make it fit.

The constants can be measured again on another machine with::

    python -m ttmap.memory

which runs the measurement described in :func:`measure_peak_bytes` and prints
the fitted constants (it changes nothing).
"""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from ttmap.defaults import EARTH_MODEL, MEMORY_SHARE
from ttmap.errors import InputDataError

__all__ = [
    "BYTES_PER_NATIVE_CELL",
    "BYTES_PER_SOLVE_CELL",
    "BASE_BYTES",
    "estimate_peak_bytes",
    "total_memory_bytes",
    "check_memory",
    "check_read_memory",
    "memory_limit_bytes",
    "measure_peak_bytes",
    "NS_PER_CELL",
    "SolveEstimate",
    "estimate_solve",
]

# Measured 2026-12-01 on the development machine (Linux x86-64, Python 3.11,
# numpy 2.4.6, scikit-fmm 2025.6.23, 2 cores, 24 GiB) with ``python -m ttmap.memory``:
# for each case a float32 GeoTIFF of synthetic bathymetry (smooth random depth,
# ~12 % land) is written; a fresh Python process imports ttmap, records its peak
# resident set size (VmHWM in /proc/self/status: ``ru_maxrss`` would carry the
# parent's size across fork+exec), runs what a job does for one solve -
# ``read_bathymetry``, ``prepare_medium``, ``Medium.travel_time`` from a point
# source, conversion to float32 minutes - and records the peak again. The
# growth was fitted by least squares to ``a * native + b * solve + c`` over
# projected grids of 1000^2, 2000^2, 3000^2 and 4000^2 cells (native = solve)
# and lon/lat grids of 1500 x 1000, 2000 x 1500 and 3000 x 2000 cells between
# 40 and 70 degrees north (solve grids 1.85 times taller). Refitted on
# 2026-12-01 after the engine's memory work: a = 21.1, b = 51.0, c = 19.3 MiB,
# worst residual 1.5 % (89 MiB at 1000^2, 1.10 GiB at 4000^2); before it the fit
# was 34.9 / 65.2 / 20.1 MiB. The constants below are the new figures rounded up. GDAL's block cache and
# writing the GeoTIFF (overviews) are not included. A batch worker holds the
# same (depth, one medium, one solve: ttmap.jobs.batch.MEDIA_PER_WORKER = 1).

#: Bytes of peak memory per cell of the native (raster) grid.
BYTES_PER_NATIVE_CELL: float = 22.0
#: Bytes of peak memory per cell of the solve grid.
BYTES_PER_SOLVE_CELL: float = 52.0
#: Fixed part of the peak beyond the imported libraries, bytes.
BASE_BYTES: float = 20.0 * 2**20

_FIX = "crop with --crop-lonlat or coarsen with --coarsen N"


def _shape(value: Any, what: str) -> tuple[int, int]:
    try:
        rows, cols = (int(v) for v in value)
    except (TypeError, ValueError) as err:
        raise InputDataError(f"{what} {value!r} is not (rows, cols); pass two whole numbers") from err
    if rows < 1 or cols < 1:
        raise InputDataError(f"{what} {value!r} must have positive rows and cols")
    return rows, cols


def estimate_peak_bytes(grid_shape: Sequence[int], solve_shape: Sequence[int] | None = None) -> int:
    """Estimated peak memory of one solve, in bytes (beyond the imported libraries).

    Parameters
    ----------
    grid_shape : (rows, cols)
        Native raster shape (after any crop and coarsening).
    solve_shape : (rows, cols), optional
        Shape of the solve grid (:attr:`ttmap.grid.SolvePlane.shape`); the
        native shape when omitted (projected rasters).

    Returns
    -------
    int
        Bytes: reading the raster, preparing the speed field, the solve and
        the float32 minutes for writing.

    Examples
    --------
    >>> 80 * 2**20 < estimate_peak_bytes((1000, 1000)) < 100 * 2**20
    True
    >>> estimate_peak_bytes((1000, 1000), (1800, 1000)) > estimate_peak_bytes((1000, 1000))
    True
    """
    rows, cols = _shape(grid_shape, "grid shape")
    s_rows, s_cols = _shape(solve_shape if solve_shape is not None else (rows, cols), "solve shape")
    native = float(rows) * float(cols)
    solve = float(s_rows) * float(s_cols)
    return math.ceil(BYTES_PER_NATIVE_CELL * native + BYTES_PER_SOLVE_CELL * solve + BASE_BYTES)


#: Solve time per solve-grid cell, measured on the development machine (2 cores,
#: 2026-12-01; benchmarks/bench_batch.py: 250 ns per cell for a 1000 x 1000 solve).
NS_PER_CELL: float = 250.0


@dataclass(frozen=True)
class SolveEstimate:
    """The cost of one solve of a grid: solve-grid cells, seconds on one core, peak bytes."""

    cells: int
    seconds: float
    peak_bytes: int


def estimate_solve(grid: Any) -> SolveEstimate:
    """Cells, time and peak memory of one solve of ``grid`` (a :class:`ttmap.Grid`).

    Fast marching is O(N log N): the measured time per cell (:data:`NS_PER_CELL`,
    at 1e6 cells) is scaled by log2(N) / log2(1e6) for larger grids. Memory
    is :func:`estimate_peak_bytes` of the grid and its solve plane.
    """
    from ttmap.grid import solve_plane

    plane = solve_plane(grid)
    cells = int(plane.shape[0] * plane.shape[1])
    n = cells * max(1.0, math.log2(max(cells, 2)) / math.log2(1e6))
    return SolveEstimate(cells, n * NS_PER_CELL * 1e-9, int(estimate_peak_bytes(grid.shape, plane.shape)))


def _cgroup_limit_bytes() -> int | None:
    """Memory limit of this process's control group (containers), if any."""
    for name in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            text = Path(name).read_text().strip()
        except OSError:
            continue
        if text.isdigit():
            value = int(text)
            if 0 < value < 2**60:
                return value
    return None


def total_memory_bytes() -> int | None:
    """Physical memory of the machine (or the container's limit when lower), bytes.

    Read from ``/proc/meminfo`` (MemTotal), else ``os.sysconf``; None when
    neither is available.
    """
    total: int | None = None
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemTotal:"):
                    total = int(line.split()[1]) * 1024
                    break
    except (OSError, ValueError, IndexError):
        total = None
    if total is None:
        try:
            total = int(os.sysconf("SC_PAGE_SIZE")) * int(os.sysconf("SC_PHYS_PAGES"))
        except (AttributeError, ValueError, OSError):
            total = None
    limit = _cgroup_limit_bytes()
    if limit is not None and (total is None or limit < total):
        total = limit
    return total


def _gib(n: float) -> str:
    return f"{n / 2**30:.2f} GiB"


def check_memory(
    grid: Any,
    *,
    limit_bytes: int | None = None,
    share: float = MEMORY_SHARE,
    workers: int = 1,
    earth: str = EARTH_MODEL,
    refine: int = 1,
) -> int:
    """Refuse a grid whose solve would not fit in memory.

    Parameters
    ----------
    grid : Grid
        The raster's geometry (after crop and coarsening).
    limit_bytes : int, optional
        Memory the run may use; default ``share`` of :func:`total_memory_bytes`.
    share : float
        Share (0 to 1] of the machine's memory used as the default limit.
    workers : int
        Solves running at once on this machine (worker processes); each holds
        its own copy.
    earth : {"wgs84", "sphere"}
        Earth model of the solve plane (lon/lat grids).
    refine : int
        The refine factor that made ``grid`` from the raster (1 = none): the
        fix offered is then a smaller factor, not coarsening.

    Returns
    -------
    int
        The estimate for all ``workers``, bytes.

    Raises
    ------
    InputDataError
        The estimate exceeds the limit; the message gives both, and the fix.
    """
    from ttmap.grid import solve_plane

    if not (0.0 < float(share) <= 1.0):
        raise InputDataError(f"memory share {share!r} must lie in (0, 1]; pass e.g. 0.6")
    if isinstance(workers, bool) or int(workers) != workers or workers < 1:
        raise InputDataError(f"workers {workers!r} must be a whole number >= 1")
    plane = solve_plane(grid, earth=earth)  # type: ignore[arg-type]
    per_solve = estimate_peak_bytes(grid.shape, plane.shape)
    need = per_solve * int(workers)
    if limit_bytes is None:
        total = total_memory_bytes()
        if total is None:
            return need
        limit = int(total * float(share))
        limit_text = f"{_gib(limit)} ({100 * float(share):.0f} % of {_gib(total)} of memory)"
    else:
        limit = int(limit_bytes)
        limit_text = _gib(limit)
    if need <= limit:
        return need
    # Smallest coarsening factor that fits (cells shrink with its square).
    factor = max(2, math.ceil(math.sqrt(need / max(limit, 1))))
    if refine > 1:
        # Largest refine factor that fits (cells grow with its square).
        fits = int(refine / math.sqrt(need / max(limit, 1)))
        fix = (f"use --refine {fits} or less" if fits >= 2 else "drop --refine") + " or crop with --crop-lonlat"
    else:
        fix = f"{_FIX} (e.g. --coarsen {factor})"
    rows, cols = grid.shape
    who = f"{workers} workers x " if workers > 1 else ""
    raise InputDataError(
        f"a solve of this {rows} x {cols}-cell grid (solve grid {plane.shape[0]} x {plane.shape[1]}) "
        f"needs about {who}{_gib(per_solve)}{f' = {_gib(need)}' if workers > 1 else ''} of memory (estimate), "
        "more than the "
        f"limit of {limit_text}; {fix}"
        + ("; or run fewer workers" if workers > 1 else "")
    )


def memory_limit_bytes(share: float = MEMORY_SHARE) -> tuple[int, str] | None:
    """The memory a run may use (``share`` of :func:`total_memory_bytes`) and its description."""
    total = total_memory_bytes()
    if total is None:
        return None
    limit = int(total * float(share))
    return limit, f"{_gib(limit)} ({100 * float(share):.0f} % of {_gib(total)} of memory)"


def check_read_memory(
    name: str,
    shape: Sequence[int],
    itemsize: int,
    *,
    limit_bytes: int | None = None,
    share: float = MEMORY_SHARE,
) -> int:
    """Refuse a raster read that would not fit in memory, before it is read.

    Reading one band holds the stored values (``itemsize`` bytes per cell),
    their float64 copy and a nodata mask (1 byte): ``cells * (itemsize + 9)``
    bytes. :func:`check_memory` covers the solve; this covers the read, which
    happens at full resolution before any coarsening.

    Parameters
    ----------
    name : str
        The raster, for messages.
    shape : (rows, cols)
        Cells read (the crop window, or the whole raster).
    itemsize : int
        Bytes per stored cell.
    limit_bytes : int, optional
        Default ``share`` of the machine's memory.

    Returns
    -------
    int
        The estimate, bytes.

    Raises
    ------
    InputDataError
        The estimate exceeds the limit.

    Examples
    --------
    >>> check_read_memory("a.tif", (1000, 1000), 4, limit_bytes=2**30)
    13000000
    >>> check_read_memory("a.tif", (10**6, 10**6), 4, limit_bytes=2**30)
    Traceback (most recent call last):
    ...
    ttmap.errors.InputDataError: reading bathymetry 'a.tif' (1000000 x 1000000 cells as its header says) needs about 12107.19 GiB of memory, more than the limit of 1.00 GiB; crop with --crop-lonlat, or make a coarser copy \
first (e.g. gdal_translate -r average -outsize 1% 1%), or check the header
    """
    rows, cols = _shape(shape, "raster shape")
    need = int(float(rows) * float(cols) * (int(itemsize) + 9))
    if limit_bytes is None:
        got = memory_limit_bytes(share)
        if got is None:
            return need
        limit, limit_text = got
    else:
        limit, limit_text = int(limit_bytes), _gib(int(limit_bytes))
    if need <= limit:
        return need
    pct = max(1, math.floor(100.0 * math.sqrt(limit / need)))
    raise InputDataError(
        f"reading bathymetry {name!r} ({rows} x {cols} cells as its header says) needs about {_gib(need)} "
        f"of memory, more than the limit of {limit_text}; crop with --crop-lonlat, or make a coarser copy "
        f"first (e.g. gdal_translate -r average -outsize {pct}% {pct}%), or check the header"
    )


# ---------------------------------------------------------------------------
# Measurement (python -m ttmap.memory)
# ---------------------------------------------------------------------------

#: Cases measured: (label, rows, cols, geographic).
_CASES: tuple[tuple[str, int, int, bool], ...] = (
    ("projected 1000 x 1000", 1000, 1000, False),
    ("projected 2000 x 2000", 2000, 2000, False),
    ("projected 3000 x 3000", 3000, 3000, False),
    ("lon/lat 1500 x 1000, 40-70 N", 1000, 1500, True),
    ("lon/lat 2000 x 1500, 40-70 N", 1500, 2000, True),
    ("projected 4000 x 4000", 4000, 4000, False),
    ("lon/lat 3000 x 2000, 40-70 N", 2000, 3000, True),
)


def _synthetic_geotiff(path: Path, rows: int, cols: int, geographic: bool) -> tuple[float, float]:
    """Write smooth synthetic elevation (m, negative below sea level); return a source (x, y)."""
    import numpy as np
    import rasterio
    from affine import Affine

    rng = np.random.default_rng(7)
    y = np.linspace(0.0, 1.0, rows)[:, None]
    x = np.linspace(0.0, 1.0, cols)[None, :]
    field = np.zeros((rows, cols))
    for _ in range(12):
        kx, ky = rng.uniform(2.0, 9.0, 2)
        px, py = rng.uniform(0.0, 2 * np.pi, 2)
        field += np.sin(kx * 2 * np.pi * x + px) * np.cos(ky * 2 * np.pi * y + py)
    field /= field.std()
    land = field > np.quantile(field, 0.88)
    elevation = -(3500.0 - 600.0 * field)
    elevation[land] = 50.0
    r0, c0 = rows // 2, cols // 2
    rr, cc = np.ogrid[:rows, :cols]
    disc = (rr - r0) ** 2 + (cc - c0) ** 2 <= 30**2
    elevation[disc] = np.minimum(elevation[disc], -3000.0)
    if geographic:
        res = 30.0 / rows
        transform = Affine(res, 0.0, 150.0, 0.0, -res, 70.0)
        crs = "EPSG:4326"
    else:
        transform = Affine(1000.0, 0.0, 0.0, 0.0, -1000.0, rows * 1000.0)
        crs = "EPSG:3857"
    with rasterio.open(
        path, "w", driver="GTiff", width=cols, height=rows, count=1, dtype="float32",
        crs=crs, transform=transform, tiled=True,
    ) as dst:
        dst.write(elevation.astype(np.float32), 1)
    sx = transform.c + transform.a * (c0 + 0.5)
    sy = transform.f + transform.e * (r0 + 0.5)
    return float(sx), float(sy)


def _peak_rss_bytes() -> int:  # pragma: no cover - subprocess
    """Peak resident set size of this process image, bytes.

    ``VmHWM`` from ``/proc/self/status``: unlike ``ru_maxrss`` it starts afresh
    at ``exec``, so the parent's size at ``fork`` does not leak into it. Falls
    back to ``ru_maxrss`` elsewhere.
    """
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
    except (OSError, ValueError, IndexError):
        pass
    import resource

    return int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss) * 1024


def _child(path: str, x: float, y: float, geographic: bool) -> None:  # pragma: no cover - subprocess
    """Run one solve as a job does and print the peak growth as JSON."""
    import numpy as np

    from ttmap.io.raster import read_bathymetry
    from ttmap.sources import Source
    from ttmap.traveltime import prepare_medium

    base = _peak_rss_bytes()
    bathy = read_bathymetry(path)
    medium = prepare_medium(bathy.depth_m, bathy.grid)
    source = Source.point(x, y) if geographic else Source.point_xy(x, y)
    result = medium.travel_time(source)
    minutes = result.arrival_time_min.astype(np.float32)
    peak = _peak_rss_bytes()
    print(json.dumps({
        "native": list(bathy.grid.shape), "solve": list(medium.plane.shape),
        "peak_bytes": peak - base, "reached": int(np.isfinite(minutes).sum()),
    }))


def measure_peak_bytes(
    cases: Sequence[tuple[str, int, int, bool]] = _CASES,
) -> dict[str, Any]:
    """Measure the peak memory of one solve per case, each in a fresh process, and fit.

    Returns
    -------
    dict
        ``cases``: label, native and solve shapes, peak bytes; ``fit``:
        bytes per native cell, per solve cell, base bytes, worst relative
        residual.
    """
    import numpy as np

    rows_out: list[dict[str, Any]] = []
    with tempfile.TemporaryDirectory(prefix="ttmap-mem-") as tmp:
        for label, rows, cols, geographic in cases:
            path = Path(tmp) / "bathy.tif"
            x, y = _synthetic_geotiff(path, rows, cols, geographic)
            code = (
                "import sys; from ttmap.memory import _child; "
                f"_child({str(path)!r}, {x!r}, {y!r}, {geographic!r})"
            )
            out = subprocess.run(
                [sys.executable, "-c", code], check=True, capture_output=True, text=True,
                env={**os.environ, "PYTHONPATH": os.pathsep.join(sys.path)},
            )
            rec = json.loads(out.stdout.strip().splitlines()[-1])
            rec["label"] = label
            rows_out.append(rec)
            path.unlink()
    a = np.array([[r["native"][0] * r["native"][1], r["solve"][0] * r["solve"][1], 1.0]
                  for r in rows_out], dtype=float)
    b = np.array([r["peak_bytes"] for r in rows_out], dtype=float)
    coef, *_ = np.linalg.lstsq(a, b, rcond=None)
    resid = np.abs(a @ coef - b) / b
    return {
        "cases": rows_out,
        "fit": {
            "bytes_per_native_cell": float(coef[0]),
            "bytes_per_solve_cell": float(coef[1]),
            "base_bytes": float(coef[2]),
            "worst_relative_residual": float(resid.max()),
        },
    }


def _main() -> None:  # pragma: no cover - manual measurement
    result = measure_peak_bytes()
    for r in result["cases"]:
        n = r["native"][0] * r["native"][1]
        s = r["solve"][0] * r["solve"][1]
        print(
            f"{r['label']:<32} native {n / 1e6:6.2f} M  solve {s / 1e6:6.2f} M  "
            f"peak {r['peak_bytes'] / 2**20:8.1f} MiB  ({r['peak_bytes'] / n:6.1f} B/native cell)"
        )
    f = result["fit"]
    print(
        f"fit: {f['bytes_per_native_cell']:.1f} B/native cell + {f['bytes_per_solve_cell']:.1f} "
        f"B/solve cell + {f['base_bytes'] / 2**20:.1f} MiB; worst residual "
        f"{100 * f['worst_relative_residual']:.1f} %"
    )
    print("current constants:", BYTES_PER_NATIVE_CELL, BYTES_PER_SOLVE_CELL, BASE_BYTES / 2**20, "MiB")


if __name__ == "__main__":  # pragma: no cover
    _main()
