"""One validation pass per job, before the full raster is read or anything is written.

Every job (:func:`ttmap.jobs.map.run_map_job`,
:func:`ttmap.jobs.sitemap.run_site_map_job`, the scenario run) and
``ttmap scenario check`` call these first. They read only the raster's
header (:func:`ttmap.io.header.read_bathymetry_header`) and refuse, with one
line naming the value and the fix:

- an input path that is empty, missing, a folder, or not a raster GDAL reads;
- a header whose grid would not fit in memory, for the read
  (:func:`ttmap.memory.check_read_memory`) and for the solve
  (:func:`ttmap.memory.check_memory`, the estimate ``ttmap info`` prints);
- an output folder that is empty (``--out ''``), a file, or not creatable;
- isochrone and coastal class intervals that would make more than
  :data:`MAX_LEVELS` levels over the shortest time the grid can take to cross;
- snap and search radii larger than the grid, or whose search window would
  not fit in memory;
- site names too long for the file system are shortened with a stable hash
  (:func:`fit_file_stem`) and a note says so.

Wave periods and the maximum time are checked by the option groups
(:mod:`ttmap.jobs.options`) when built; values that read as an undeclared
fill value are refused by the reader (:func:`ttmap.io.raster.check_fill_values`).
"""

from __future__ import annotations

import hashlib
import math
import os
import warnings
from collections.abc import Iterable
from dataclasses import dataclass
from typing import Any

from ttmap.defaults import EARTH_MODEL
from ttmap.errors import InputDataError, TtmapWarning

__all__ = [
    "FASTEST_SPEED_M_S",
    "MAX_LEVELS",
    "MAX_STEM_BYTES",
    "CheckedGrid",
    "check_bathymetry",
    "check_intervals",
    "check_map_job",
    "check_site_map_job",
    "check_out_dir",
    "check_radius",
    "check_site_names",
    "fit_file_stem",
    "grid_extent_m",
    "shortest_crossing_s",
]

#: Most isochrone or coastal-class levels a product may have (common
#: practice, no source: beyond a few hundred lines a map or layer is unreadable).
MAX_LEVELS: int = 500
#: Fastest long wave, m/s: sqrt(g h) over the deepest ocean (about 10.9 km,
#: from memory), rounded up. No front crosses a grid faster.
FASTEST_SPEED_M_S: float = 330.0
#: Longest file-name stem taken from a site name, bytes. File systems allow
#: 255 bytes per name (ext4, APFS, NTFS: common practice, no source); the
#: products add up to 30 bytes of prefix and suffix, and atomic writes a
#: temporary suffix.
MAX_STEM_BYTES: int = 120


@dataclass(frozen=True)
class CheckedGrid:
    """What the up-front check learned from the header.

    Attributes
    ----------
    header : BathymetryHeader
        The raster's header.
    grid : Grid
        The grid the job will solve on (after the crop window and coarsening or refining).
    read_shape : (rows, cols)
        Cells the reader will hold (the crop window at full resolution).
    """

    header: Any
    grid: Any
    read_shape: tuple[int, int]


def check_out_dir(out_dir: Any, *, flag: str = "--out") -> None:
    """Refuse an empty output folder name or one that is an existing file.

    >>> check_out_dir("")
    Traceback (most recent call last):
    ...
    ttmap.errors.InputDataError: output folder '' is empty; give a folder name, e.g. --out run1
    """
    text = "" if out_dir is None else os.fspath(out_dir)
    if not str(text).strip():
        raise InputDataError(f"output folder {text!r} is empty; give a folder name, e.g. {flag} run1")
    if os.path.exists(text) and not os.path.isdir(text):
        raise InputDataError(f"output folder {text!r} is a file; give a folder name, e.g. {flag} run1")
    parent = os.path.dirname(os.path.abspath(text))
    while parent and not os.path.exists(parent) and parent != os.path.dirname(parent):
        parent = os.path.dirname(parent)
    if os.path.exists(parent) and not os.path.isdir(parent):
        raise InputDataError(
            f"output folder {text!r} cannot be created: {parent!r} is a file; give a folder name elsewhere, "
            f"e.g. {flag} run1"
        )


def check_bathymetry(reading: Any, *, earth: str = EARTH_MODEL, workers: int = 1, solve: bool = True) -> CheckedGrid:
    """Check a bathymetry raster from its header: path, band, crop, memory of the read and the solve.

    Parameters
    ----------
    reading : ReadingOptions
        The raster and how to read it.
    earth : {"wgs84", "sphere"}
        Earth model of the solve plane (lon/lat grids).
    workers : int
        Solves held in memory at once.
    solve : bool
        Also check the memory of a solve (False for ``ttmap info``, which
        only reads the raster and prints the estimate).

    Returns
    -------
    CheckedGrid

    Raises
    ------
    InputDataError, GridError
        Missing, a folder, not a raster; several bands and none chosen; a
        crop window that misses the grid; a read or a solve that would not
        fit in memory (with the estimate and the fix).
    """
    from affine import Affine

    from ttmap.grid import Grid
    from ttmap.io.header import choose_band, read_bathymetry_header
    from ttmap.io.raster import check_resample_factors, window_offsets
    from ttmap.memory import check_memory, check_read_memory

    header = read_bathymetry_header(reading.path)
    choose_band(header.band_count, reading.band, header.path)
    full = header.grid
    rows, cols = full.rows, full.cols
    transform = full.transform
    if reading.window is not None:
        row0, row1, col0, col1, _ = window_offsets(full, header.path, reading.window, reading.window_crs)
        rows, cols = row1 - row0, col1 - col0
        t = full.transform
        transform = Affine(t.a, 0.0, t.c + t.a * col0, 0.0, t.e, t.f + t.e * row0)
    check_read_memory(header.path, (rows, cols), header.itemsize)
    k = int(reading.coarsen)
    if k > 1:
        if rows // k < 2 or cols // k < 2:
            raise InputDataError(
                f"coarsening {rows} x {cols} cells of bathymetry {header.path!r} by {k} leaves fewer than "
                "2 x 2 cells; use a smaller --coarsen factor"
            )
        rows, cols = rows // k, cols // k
        transform = Affine(transform.a * k, 0.0, transform.c, 0.0, transform.e * k, transform.f)
    read_shape = (rows * k, cols * k)
    n = int(getattr(reading, "refine", 1))
    check_resample_factors(k, n)
    if n > 1:
        if Grid((rows, cols), transform, full.crs).has_seam_column:
            cols -= 1  # the reader drops the seam column before refining
        rows, cols = rows * n, cols * n
        transform = Affine(transform.a / n, 0.0, transform.c, 0.0, transform.e / n, transform.f)
    grid = Grid((rows, cols), transform, full.crs)
    if solve:
        check_memory(grid, earth=earth, workers=workers, refine=n)
    return CheckedGrid(header=header, grid=grid, read_shape=read_shape)


def grid_extent_m(grid: Any) -> tuple[float, float]:
    """Ground size of a grid, ``(height_m, width_m)``, at its middle latitude for lon/lat grids."""
    row_m, col_m = grid.cell_size_m()
    return grid.rows * row_m, grid.cols * col_m


def shortest_crossing_s(grid: Any) -> float:
    """A lower bound of the latest arrival on ``grid``: half its diagonal at the fastest wave speed.

    From any start, some water cell of a grid that is mostly water lies at
    least half the diagonal away, and no long wave is faster than
    :data:`FASTEST_SPEED_M_S`.
    """
    h, w = grid_extent_m(grid)
    return 0.5 * math.hypot(h, w) / FASTEST_SPEED_M_S


def check_intervals(grid: Any, *, isochrone_interval_min: float | None, coast_interval_min: float | None,
                    max_time_s: float | None = None) -> None:
    """Refuse isochrone or coastal class intervals that would make more than :data:`MAX_LEVELS` levels.

    The time span is bounded from below by :func:`shortest_crossing_s` (and
    by ``max_time_s`` when given), so a refusal is certain, not a guess.

    Raises
    ------
    InputDataError
        Names the interval, the levels it would make and the smallest interval that fits.
    """
    span_s = shortest_crossing_s(grid)
    if max_time_s is not None:
        span_s = min(span_s, float(max_time_s))
    span_min = span_s / 60.0
    for what, flag, value in (("isochrone interval", "--isochrone-interval-min", isochrone_interval_min),
                              ("coast class interval", "--coast-interval-min", coast_interval_min)):
        if value is None:
            continue
        levels = span_min / float(value)
        if levels > MAX_LEVELS:
            smallest = span_min / MAX_LEVELS
            raise InputDataError(
                f"{what} {value:g} min would make at least {levels:,.0f} levels over the {span_min:,.0f} min "
                f"the wave needs at least to cross this grid (more than {MAX_LEVELS}); give {flag} "
                f"{_round_up(smallest):g} or more"
            )


def _round_up(x: float) -> float:
    """``x`` rounded up to two significant digits.

    >>> _round_up(0.7123), _round_up(12.01)
    (0.72, 13.0)
    """
    if x <= 0:
        return x
    e = math.floor(math.log10(x)) - 1
    return math.ceil(x / 10.0**e) * 10.0**e


def check_radius(grid: Any, radius_m: float | None, *, what: str, flag: str, unit_km: bool = True) -> None:
    """Refuse a snap or search radius larger than the grid, or one whose search window would not fit.

    The search looks at every cell within the radius (its window is not
    clipped across the east-west edge of a wrapping grid), so a radius of
    many times the grid makes a window larger than memory.

    Raises
    ------
    InputDataError
    """
    if radius_m is None:
        return
    r = float(radius_m)
    h, w = grid_extent_m(grid)
    diag = math.hypot(h, w)
    if not math.isfinite(r) or r > diag:
        shown = f"{r / 1000.0:g} km" if unit_km else f"{r:g} m"
        raise InputDataError(
            f"{what} {shown} is larger than the whole grid ({diag / 1000.0:,.0f} km corner to corner); "
            f"give {flag} {max(diag / 1000.0, 0.001):.3g} or less"
        )
    from ttmap.memory import memory_limit_bytes

    row_m, col_m = grid.cell_size_m()
    if grid.is_geographic:  # columns narrow towards the pole: the widest window is at the highest latitude
        _, bottom, _, top = grid.bounds
        lat = min(max(abs(bottom), abs(top)), 89.9)
        mid = math.radians(0.5 * (bottom + top))
        col_m = col_m * math.cos(math.radians(lat)) / max(math.cos(mid), 1e-9)
    n_rows = min(grid.rows, 2 * math.ceil(r / row_m) + 3)
    n_cols = 2 * math.ceil(r / max(col_m, 1e-9)) + 3
    need = 24.0 * n_rows * n_cols  # index, distance and mask arrays of the window
    got = memory_limit_bytes()
    if got is not None and need > got[0]:
        raise InputDataError(
            f"{what} {r / 1000.0:g} km makes a search window of {n_rows} x {n_cols} cells that needs about "
            f"{need / 2**30:.1f} GiB, more than the limit of {got[1]}; give a smaller {flag}"
        )


def fit_file_stem(stem: str, *, max_bytes: int = MAX_STEM_BYTES) -> str:
    """``stem`` itself, or cut to ``max_bytes`` with a stable hash of the whole appended.

    The hash (8 hex digits of SHA-256) keeps two long names that share a
    beginning apart and gives the same file name on every run.

    >>> fit_file_stem("Bay_A")
    'Bay_A'
    >>> s = fit_file_stem("x" * 300)
    >>> len(s), s[-9:]
    (120, '_0d4e2ca9')
    """
    raw = stem.encode("utf-8")
    if len(raw) <= max_bytes:
        return stem
    digest = hashlib.sha256(raw).hexdigest()[:8]
    head = raw[: max_bytes - 9].decode("utf-8", "ignore").rstrip("_-")
    return f"{head}_{digest}"


def check_site_names(names: Iterable[str], *, stem: Any = None) -> list[str]:
    """Notes (also warned) on site names whose file names were shortened.

    Parameters
    ----------
    names : iterable of str
    stem : callable, optional
        Name -> file stem; default :func:`ttmap.jobs.plan.site_file_stem`.

    Returns
    -------
    list of str
    """
    if stem is None:
        from ttmap.jobs.plan import site_file_stem

        stem = site_file_stem
    notes = []
    for name in names:
        s = stem(name)
        full = str(name)
        if _was_cut(full, s):
            notes.append(
                f"site name {full[:40]!r}... ({len(full)} characters) is too long for a file name; its files "
                f"are named {s!r} (shortened, with a stable hash)"
            )
    for n in notes:
        warnings.warn(n, TtmapWarning, stacklevel=3)
    return notes


def _unshortened(name: str) -> str:
    import re
    import unicodedata

    text = unicodedata.normalize("NFKD", name).encode("ascii", "ignore").decode("ascii")
    return re.sub(r"[^A-Za-z0-9-]+", "_", text).strip("_-")


def _was_cut(name: str, stem: str) -> bool:
    full = _unshortened(name)
    return bool(full) and full != stem and fit_file_stem(full) == stem


def check_map_job(job: Any) -> CheckedGrid:
    """The up-front pass of the map job (:class:`ttmap.jobs.map.MapJob`): nothing read but the header.

    Output folder, bathymetry header (path, band, crop, memory of the read
    and the solve), isochrone and coastal class intervals, the source snap
    radius and the site search radius.

    Returns
    -------
    CheckedGrid
    """
    check_out_dir(job.out_dir)
    checked = check_bathymetry(job.reading, earth=job.speed.earth)
    grid = checked.grid
    p = job.products
    check_intervals(grid, isochrone_interval_min=p.isochrone_interval_min,
                    coast_interval_min=p.coast_interval_min if p.coast else None,
                    max_time_s=job.speed.max_time_s)
    check_radius(grid, job.source_snap_radius_m, what="snap radius", flag="--snap-radius-km")
    if job.sites is not None:
        check_radius(grid, job.sites.search_radius_m, what="site search radius", flag="--site-search-radius-km")
    return checked


def check_site_map_job(job: Any, site_names: Iterable[str]) -> tuple[CheckedGrid, list[str]]:
    """The up-front pass of the site-map job (:class:`ttmap.jobs.sitemap.SiteMapJob`).

    Output folder, bathymetry header, isochrone interval, the search radius
    and the site names (long ones shortened, with a note).

    Returns
    -------
    CheckedGrid, list of str
        The notes on shortened names.
    """
    check_out_dir(job.out_dir)
    checked = check_bathymetry(job.reading, earth=job.speed.earth)
    check_intervals(checked.grid, isochrone_interval_min=job.products.isochrone_interval_min,
                    coast_interval_min=None, max_time_s=job.speed.max_time_s)
    check_radius(checked.grid, job.sites.search_radius_m, what="site search radius",
                 flag="--site-search-radius-km")
    return checked, check_site_names(site_names)
