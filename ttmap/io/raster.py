"""Read bathymetry rasters and write result rasters (rasterio).

Reading turns any single-band raster GDAL understands into ``depth_m``: a
float64 array in metres, positive down, with land at ``<= 0`` and NaN where
the file has no data. This is the one place where an elevation raster
(negative below sea level, the default) is negated into depth. The reader can
crop to a window and coarsen by whole blocks, and records every such change in
:attr:`Bathymetry.notes`.

Writing produces tiled, DEFLATE-compressed GeoTIFFs with internal overviews,
band description, units and dataset tags, through
:func:`ttmap.io.atomic.atomic_output` so a failed run never leaves a partial
file.

The module knows no physics: it moves arrays, transforms and CRSs.
"""

from __future__ import annotations

import hashlib
import math
import os
import re
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import rasterio
from affine import Affine
from numpy.typing import ArrayLike, DTypeLike
from pyproj import CRS, Transformer
from pyproj.exceptions import CRSError, ProjError
from rasterio.enums import MaskFlags, Resampling
from rasterio.errors import NotGeoreferencedWarning, RasterioError
from rasterio.windows import Window

from ttmap._typing import BoolArray, FloatArray
from ttmap.errors import GridError, InputDataError, TtmapError, TtmapWarning
from ttmap.grid import Grid
from ttmap.io.atomic import atomic_output
from ttmap.io.header import normalise_crs

__all__ = [
    "Bathymetry",
    "read_bathymetry",
    "coarsen_depth",
    "refine_depth",
    "check_resample_factors",
    "count_small_islands",
    "write_raster",
    "write_arrival_geotiff",
    "overview_factors",
    "file_sha256",
    "describe_bathymetry",
    "RASTER_DTYPES",
    "BLOCK_SIZE",
    "FILL_SHARE",
    "PLAUSIBLE_LIMIT_M",
    "check_fill_values",
    "sample_fill_values",
    "window_offsets",
]

#: Data types :func:`write_raster` accepts.
RASTER_DTYPES: tuple[str, ...] = ("float32", "float64", "uint8", "uint16", "int16", "int32")

#: Tile edge of written GeoTIFFs, and the smallest overview side kept.
BLOCK_SIZE: int = 256

#: DEFLATE level of written GeoTIFFs. Level 1 writes an arrival-time field
#: in half the time of GDAL's default 6 for files about 9 % larger (7200 x
#: 4800 float32 cells: 1.7 s and 61 MiB against 3.2 s and 56 MiB); DEFLATE
#: rather than ZSTD, which was barely faster, so that every GIS reads them.
_DEFLATE_LEVEL: int = 1

_METRE_UNITS = {"", "m", "metre", "meter", "metres", "meters"}
_FOOT_UNITS = {"ft": 0.3048, "foot": 0.3048, "feet": 0.3048, "us-ft": 1200.0 / 3937.0}
_CONNECTION_RE = re.compile(r"^(/vsi|[A-Za-z][A-Za-z0-9_]+:)")
_TAG_KEY_RE = re.compile(r"^[^\s=]+$")


# ---------------------------------------------------------------------------
# The bathymetry record
# ---------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class Bathymetry:
    """Depth grid read from a file, with its geometry and provenance.

    Attributes
    ----------
    depth_m : ndarray of shape (rows, cols), float64, metres, positive down
        Water where ``> 0``, land where ``<= 0`` (negated elevation), NaN
        where the file has no data. Read-only.
    grid : Grid
        Shape, transform and CRS of ``depth_m`` (after any window and
        coarsening).
    path : str or None
        File (or GDAL dataset name) it was read from.
    band : int
        1-based band read.
    sha256 : str or None
        SHA-256 of the file's bytes, None when the input is not a plain file.
    notes : tuple of str
        Every change made on reading: sign convention, window, coarsening
        counts, unit conversion, cells set to nodata.

    Raises
    ------
    GridError
        ``depth_m`` is not 2-D or does not match ``grid.shape``.
    """

    depth_m: FloatArray = field(repr=False)
    grid: Grid
    path: str | None = None
    band: int = 1
    sha256: str | None = None
    notes: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        depth = np.asarray(self.depth_m, dtype=np.float64)
        if depth.ndim != 2 or depth.shape != self.grid.shape:
            raise GridError(
                f"depth_m has shape {depth.shape} but the grid is {self.grid.shape}; "
                "pass an array of the grid's (rows, cols)"
            )
        if depth.flags.writeable:
            depth = depth.copy()
            depth.setflags(write=False)
        object.__setattr__(self, "depth_m", depth)
        object.__setattr__(self, "notes", tuple(str(n) for n in self.notes))

    @property
    def water_cells(self) -> int:
        """Number of cells with ``depth_m > 0``."""
        return int(np.count_nonzero(self.depth_m > 0.0))


# ---------------------------------------------------------------------------
# Helpers
# ---------------------------------------------------------------------------


def file_sha256(path: str | os.PathLike[str], *, chunk_bytes: int = 1 << 20) -> str:
    """SHA-256 hex digest of a file, read in chunks.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "x.bin"
    >>> _ = p.write_bytes(b"abc")
    >>> file_sha256(p)[:16]
    'ba7816bf8f01cfea'
    """
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk_bytes):
            digest.update(block)
    return digest.hexdigest()


def _fmt_bounds(bounds: tuple[float, ...]) -> str:
    return "(" + ", ".join(f"{v:.6g}" for v in bounds) + ")"


def _crs_name(crs: CRS) -> str:
    code = crs.to_epsg()
    return f"EPSG:{code}" if code is not None else (crs.name or "custom CRS")


def _open_raster(name: str) -> Any:
    """Open a raster with rasterio, turning failures into InputDataError."""
    from ttmap.io.header import check_raster_path

    check_raster_path(name)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            return rasterio.open(name)
    except (RasterioError, OSError) as err:
        raise InputDataError(
            f"{name!r} is not a raster GDAL can read; give a GeoTIFF or another GDAL raster format"
        ) from err


def _choose_band(src: Any, name: str, band: int | None) -> int:
    count = int(src.count)
    if count == 0:
        subs = list(getattr(src, "subdatasets", []) or [])
        if subs:
            raise InputDataError(
                f"bathymetry {name!r} holds {len(subs)} subdatasets and no bands of its own; "
                f"open one of them, e.g. {subs[0]!r}"
            )
        raise InputDataError(
            f"bathymetry {name!r} has no raster bands; give a raster with one band"
        )
    from ttmap.io.header import choose_band

    return choose_band(count, band, name)  # the same rule as the up-front header check


def window_offsets(
    full: Grid,
    name: str,
    window: tuple[float, float, float, float],
    window_crs: Any,
) -> tuple[int, int, int, int, str]:
    """Row/col range ``(row0, row1, col0, col1)`` of a map window, and a note."""
    try:
        west, south, east, north = (float(v) for v in window)
    except (TypeError, ValueError) as err:
        raise InputDataError(
            f"window {window!r} is not four numbers; give (west, south, east, north)"
        ) from err
    if not all(math.isfinite(v) for v in (west, south, east, north)):
        raise InputDataError(f"window {window!r} has a non-finite bound; give finite numbers")
    if not (west < east and south < north):
        raise InputDataError(
            f"window {_fmt_bounds((west, south, east, north))} is empty or inverted; "
            "give (west, south, east, north) with west < east and south < north"
        )
    if window_crs is None:
        wcrs = full.crs
    else:
        try:
            wcrs = CRS.from_user_input(window_crs)
        except CRSError as err:
            raise InputDataError(
                f"window CRS {window_crs!r} is not understood; give e.g. 'EPSG:4326'"
            ) from err
    label = f"{_fmt_bounds((west, south, east, north))} in {_crs_name(wcrs)}"
    if wcrs.equals(full.crs, ignore_axis_order=True):
        x0, y0, x1, y1 = west, south, east, north
    else:
        try:
            tr = Transformer.from_crs(wcrs, full.crs, always_xy=True)
            x0, y0, x1, y1 = tr.transform_bounds(west, south, east, north, densify_pts=21)
        except ProjError as err:
            raise GridError(
                f"window {label} cannot be transformed to the CRS of bathymetry {name!r} "
                f"({_crs_name(full.crs)}); give the window in that CRS"
            ) from err
        if not all(math.isfinite(v) for v in (x0, y0, x1, y1)):
            raise GridError(
                f"window {label} falls outside the valid area of {_crs_name(full.crs)}, the CRS "
                f"of bathymetry {name!r}; give a window inside the grid bounds "
                f"{_fmt_bounds(full.bounds)}"
            )

    left, _, right, _ = full.bounds
    if full.is_geographic:
        # Longitudes of the window and the grid may differ by a whole turn
        # (-180..180 against 0..360): shift the window onto the grid.
        for shift in (0.0, 360.0, -360.0):
            if x0 + shift < right and x1 + shift > left:
                x0, x1 = x0 + shift, x1 + shift
                break

    t = full.transform  # north-up or south-up, no rotation (checked by Grid)
    cols = [(x - t.c) / t.a for x in (x0, x1)]
    rows = [(y - t.f) / t.e for y in (y0, y1)]
    eps = 1e-6
    col0 = max(0, math.floor(min(cols) + eps))
    col1 = min(full.cols, math.ceil(max(cols) - eps))
    row0 = max(0, math.floor(min(rows) + eps))
    row1 = min(full.rows, math.ceil(max(rows) - eps))
    if col1 <= col0 or row1 <= row0:
        raise GridError(
            f"window {label} misses bathymetry {name!r}, whose bounds are "
            f"{_fmt_bounds(full.bounds)} in {_crs_name(full.crs)}; choose a window inside them"
        )
    n_rows, n_cols = row1 - row0, col1 - col0
    if n_rows < 2 or n_cols < 2:
        raise GridError(
            f"window {label} covers only {n_rows} x {n_cols} cells of bathymetry {name!r}; "
            "widen it to at least 2 x 2 cells"
        )
    note = (
        f"cropped to window {label}: rows {row0}:{row1}, cols {col0}:{col1} "
        f"({n_rows} x {n_cols} of {full.rows} x {full.cols} cells)"
    )
    return row0, row1, col0, col1, note


def _invalid_mask(src: Any, band: int, data: np.ndarray, win: Window | None) -> np.ndarray:
    flags = src.mask_flag_enums[band - 1]
    if MaskFlags.all_valid in flags:
        return np.zeros(data.shape, dtype=bool)
    nodata = src.nodatavals[band - 1]
    if MaskFlags.nodata in flags and nodata is not None:
        if isinstance(nodata, float) and math.isnan(nodata):
            if np.issubdtype(data.dtype, np.floating):
                return np.isnan(data)
            return np.zeros(data.shape, dtype=bool)
        try:
            target = np.asarray(nodata, dtype=data.dtype)
        except (OverflowError, ValueError):
            return np.zeros(data.shape, dtype=bool)
        return np.asarray(data == target)
    return np.asarray(src.read_masks(band, window=win) == 0)


def _depth_and_factor(depth_m: ArrayLike, factor: Any, what: str) -> tuple[FloatArray, int]:
    """A 2-D float64 depth array and a whole resampling factor >= 1, or a one-line refusal."""
    if isinstance(factor, bool) or not isinstance(factor, (int, np.integer)) or factor < 1:
        raise InputDataError(f"{what} factor {factor!r} is not a whole number >= 1; pass e.g. 2")
    depth = np.asarray(depth_m, dtype=np.float64)
    if depth.ndim != 2:
        raise InputDataError(f"depth_m must be 2-D (rows, cols), got shape {depth.shape}")
    return depth, int(factor)


def coarsen_depth(depth_m: ArrayLike, factor: int) -> tuple[FloatArray, tuple[str, ...]]:
    """Average a depth grid over ``factor x factor`` blocks, keeping land and water apart.

    Parameters
    ----------
    depth_m : array_like of shape (rows, cols), float, metres, positive down
        Water ``> 0``, land ``<= 0``, NaN for no data.
    factor : int
        Block edge in cells, ``>= 1``. 1 returns a copy.

    Returns
    -------
    coarse_m : ndarray of shape (rows // factor, cols // factor), float64, metres
        Per block: land when at least half of its valid cells are land (the
        value is the mean of its land cells, so it stays ``<= 0``); otherwise
        water with the mean depth of its water cells; NaN when the block has
        no valid cell.
    notes : tuple of str
        What was done: trailing rows/columns dropped, and how many coarse
        water cells contained land ("land thinned") and how many coarse land
        cells contained water ("water closed").

    Raises
    ------
    InputDataError
        ``depth_m`` is not 2-D, or ``factor`` is not a whole number >= 1.
    GridError
        The coarse grid would have fewer than 2 x 2 cells.

    Notes
    -----
    Rows and columns that do not fill a whole block at the bottom and right
    edges are dropped, so the coarse grid's transform is the fine one scaled
    by ``factor`` from the same origin.

    Examples
    --------
    >>> d = [[10.0, 20.0, -1.0, -3.0],
    ...      [30.0, -5.0, -2.0, 40.0],
    ...      [1.0, 1.0, 2.0, 2.0],
    ...      [1.0, 1.0, 2.0, float("nan")]]
    >>> coarse, notes = coarsen_depth(d, 2)
    >>> coarse.tolist()
    [[20.0, -2.0], [1.0, 2.0]]
    >>> notes[-1]
    'coarsening: 1 coarse water cell(s) contained land (land thinned), 1 coarse land cell(s) contained water (water closed)'
    """
    depth, n = _depth_and_factor(depth_m, factor, "coarsen")
    if n == 1:
        return depth.copy(), ()
    rows, cols = depth.shape
    c_rows, c_cols = rows // n, cols // n
    if c_rows < 2 or c_cols < 2:
        raise GridError(
            f"coarsen factor {n} leaves {c_rows} x {c_cols} cells of the {rows} x {cols} grid; "
            "use a smaller factor"
        )
    blocks = depth[: c_rows * n, : c_cols * n].reshape(c_rows, n, c_cols, n)
    valid = np.isfinite(blocks)
    water = valid & (blocks > 0.0)
    land = valid & ~water
    n_valid = valid.sum(axis=(1, 3))
    n_water = water.sum(axis=(1, 3))
    n_land = land.sum(axis=(1, 3))
    sum_water = np.where(water, blocks, 0.0).sum(axis=(1, 3))
    sum_land = np.where(land, blocks, 0.0).sum(axis=(1, 3))
    is_land = (n_valid > 0) & (2 * n_land >= n_valid)
    is_water = (n_valid > 0) & ~is_land
    coarse = np.full((c_rows, c_cols), np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        coarse[is_water] = sum_water[is_water] / n_water[is_water]
        coarse[is_land] = sum_land[is_land] / n_land[is_land]
    coarse = coarse + 0.0  # no negative zeros
    thinned = int(np.count_nonzero(is_water & (n_land > 0)))
    closed = int(np.count_nonzero(is_land & (n_water > 0)))
    notes = [f"coarsened by {n}: {rows} x {cols} cells -> {c_rows} x {c_cols} cells"]
    dropped_rows, dropped_cols = rows - c_rows * n, cols - c_cols * n
    if dropped_rows or dropped_cols:
        notes.append(
            f"coarsening dropped the last {dropped_rows} row(s) and {dropped_cols} column(s), "
            f"which do not fill a {n} x {n} block"
        )
    notes.append(
        f"coarsening: {thinned} coarse water cell(s) contained land (land thinned), "
        f"{closed} coarse land cell(s) contained water (water closed)"
    )
    return coarse, tuple(notes)


def refine_depth(depth_m: ArrayLike, factor: int) -> tuple[FloatArray, tuple[str, ...]]:
    """Split every cell into ``factor x factor`` cells of the same depth.

    The solve then runs on cells ``factor`` times smaller: features a few
    cells across (islands, straits, headlands) are resolved by more cells,
    and the fast-marching discretisation error shrinks with them (measured in
    docs/reciprocal.md, "Accuracy"). No depth is invented: every new cell
    keeps its parent's value, so the coastline and the nodata cells stay
    exactly where the data puts them.

    Parameters
    ----------
    depth_m : array_like of shape (rows, cols), float, metres, positive down
    factor : int
        Cells per original cell along each axis, ``>= 1``. 1 returns a copy.

    Returns
    -------
    fine_m : ndarray of shape (rows * factor, cols * factor), float64, metres
    notes : tuple of str

    Raises
    ------
    InputDataError
        ``depth_m`` is not 2-D, or ``factor`` is not a whole number >= 1.

    Examples
    --------
    >>> fine, notes = refine_depth([[10.0, -1.0]], 2)
    >>> fine.tolist()
    [[10.0, 10.0, -1.0, -1.0], [10.0, 10.0, -1.0, -1.0]]
    >>> notes[0]
    'refined by 2: 1 x 2 cells -> 2 x 4 cells (each cell split into 2 x 2 of the same depth)'
    """
    depth, n = _depth_and_factor(depth_m, factor, "refine")
    if n == 1:
        return depth.copy(), ()
    rows, cols = depth.shape
    fine = np.repeat(np.repeat(depth, n, axis=0), n, axis=1)
    return fine, (
        f"refined by {n}: {rows} x {cols} cells -> {rows * n} x {cols * n} cells "
        f"(each cell split into {n} x {n} of the same depth)",
    )


# ---------------------------------------------------------------------------
# Reading
# ---------------------------------------------------------------------------


def read_bathymetry(
    path: str | os.PathLike[str],
    *,
    band: int | None = None,
    depth_positive: bool = False,
    window: tuple[float, float, float, float] | None = None,
    window_crs: Any = "EPSG:4326",
    coarsen: int = 1,
    max_land_share: float = 0.98,
    nodata: float | None = None,
    refine: int = 1,
) -> Bathymetry:
    """Read one band of a raster as depth in metres, positive down.

    Parameters
    ----------
    path : path-like or str
        Any raster GDAL reads (GeoTIFF, NetCDF, ...), or a GDAL dataset name
        such as ``NETCDF:"file.nc":elevation``.
    band : int, optional
        1-based band; required when the raster has more than one.
    depth_positive : bool
        False (default): values are elevation, negative below sea level, and
        are negated. True: values are already depth, positive down.
    window : (west, south, east, north), optional
        Read only the cells overlapping this box (whole cells, rounded
        outward). For a geographic raster the window may use -180..180 or
        0..360 longitudes; it may not cross the raster's own east/west edge.
    window_crs : CRS-like or None
        CRS of ``window``; longitude/latitude (``"EPSG:4326"``) by default,
        None for the raster's own CRS.
    coarsen : int
        Block-average by this factor (see :func:`coarsen_depth`); 1 = off.
    max_land_share : float
        Refuse the grid when more than this share (0 to 1) of its valid
        cells would be land: the sign convention is then most likely wrong.
    nodata : float, optional
        A fill value the file does not declare: cells equal to it are nodata
        too (besides the band's own nodata value and mask).
    refine : int
        Split every cell into ``refine x refine`` cells of the same depth
        before solving (see :func:`refine_depth`); 1 = off. Cannot be
        combined with ``coarsen``. A duplicated seam column of a global grid
        is dropped first, so the refined grid still wraps around.

    Returns
    -------
    Bathymetry

    Raises
    ------
    InputDataError
        File missing or not a raster; several bands and none chosen; band out
        of range; no valid cells; no water; a land share above
        ``max_land_share``; bad ``coarsen``, ``refine`` or ``window`` values,
        or both ``coarsen`` and ``refine`` above 1.
    GridError
        No CRS; rotated, sheared or east-to-west transform (message names the
        file); a window that misses the grid or covers fewer than 2 x 2 cells.

    Notes
    -----
    Cells equal to the band's nodata value, cells masked by a mask band, and
    NaN or infinite values all become NaN. A band scale/offset is applied;
    band units in feet are converted to metres. Every such step, the sign
    convention, the window and the coarsening counts are listed in
    ``notes``.
    """
    name = os.fspath(path)
    if nodata is not None and not (isinstance(nodata, (int, float)) and math.isfinite(nodata)):
        raise InputDataError(f"nodata value {nodata!r} is not a finite number; pass e.g. --nodata -32768")
    if not isinstance(depth_positive, (bool, np.bool_)):
        raise InputDataError(f"depth_positive must be True or False, got {depth_positive!r}")
    share_limit = float(max_land_share)
    if not 0.0 < share_limit <= 1.0:
        raise InputDataError(f"max_land_share {max_land_share!r} is outside (0, 1]; pass e.g. 0.98")
    if isinstance(coarsen, bool) or not isinstance(coarsen, (int, np.integer)) or coarsen < 1:
        raise InputDataError(f"coarsen factor {coarsen!r} is not a whole number >= 1; pass e.g. 2")
    check_resample_factors(coarsen, refine)

    notes: list[str] = []
    src = _open_raster(name)
    with src:
        chosen = _choose_band(src, name, band)
        if src.crs is None or not src.crs.to_wkt():
            raise GridError(
                f"bathymetry {name!r} has no CRS; assign one (e.g. gdal_edit.py -a_srs EPSG:4326)"
            )
        try:
            crs = normalise_crs(CRS.from_user_input(src.crs.to_wkt()))
            full = Grid((src.height, src.width), src.transform, crs)
        except GridError as err:
            raise GridError(f"bathymetry {name!r}: {err}") from err
        except CRSError as err:
            raise GridError(f"bathymetry {name!r} has a CRS pyproj cannot read: {err}") from err

        win: Window | None = None
        transform = full.transform
        shape = full.shape
        if window is not None:
            row0, row1, col0, col1, note = window_offsets(full, name, window, window_crs)
            win = Window(col0, row0, col1 - col0, row1 - row0)
            t = full.transform
            transform = Affine(t.a, 0.0, t.c + t.a * col0, 0.0, t.e, t.f + t.e * row0)
            shape = (row1 - row0, col1 - col0)
            notes.append(note)

        from ttmap.memory import check_read_memory

        check_read_memory(name, shape, int(np.dtype(src.dtypes[chosen - 1]).itemsize))  # before allocating it
        try:
            data = src.read(chosen, window=win)
            invalid = _invalid_mask(src, chosen, data, win)
            if nodata is not None:
                invalid |= _equals_value(data, nodata)
        except RasterioError as err:
            raise InputDataError(
                f"reading band {chosen} of bathymetry {name!r} failed ({err}); "
                "check that the file is complete"
            ) from err
        scale = src.scales[chosen - 1]
        offset = src.offsets[chosen - 1]
        unit = (src.units[chosen - 1] or "").strip()

    values = data.astype(np.float64)
    del data
    if (scale, offset) != (1.0, 0.0):
        values = values * float(scale) + float(offset)
        notes.append(f"applied band scale {scale:g} and offset {offset:g}")
    if unit.lower() in _FOOT_UNITS:
        values *= _FOOT_UNITS[unit.lower()]
        notes.append(f"converted band units {unit!r} to metres")
    elif unit.lower() not in _METRE_UNITS:
        notes.append(f"band units {unit!r} read as metres")
    n_nodata = int(np.count_nonzero(invalid))
    if nodata is not None:
        notes.append(f"cells equal to {nodata:g} (--nodata) treated as nodata")
    values[invalid] = np.nan
    fill_note = check_fill_values(values, ~invalid, name)
    if fill_note:
        notes.append(fill_note)
    nonfinite = ~np.isfinite(values) & ~invalid
    n_nonfinite = int(np.count_nonzero(nonfinite))
    if n_nonfinite:
        values[nonfinite] = np.nan
        notes.append(f"{n_nonfinite} NaN or infinite cell(s) treated as nodata")
    if n_nodata:
        notes.append(f"{n_nodata} nodata cell(s) set to NaN")

    depth = values if depth_positive else np.negative(values, out=values)
    depth += 0.0  # turn -0.0 (from elevation 0) into +0.0, in place
    del values
    notes.insert(
        0,
        "read as depth, positive down"
        if depth_positive
        else "read as elevation (negative below sea level); depth_m = -elevation",
    )

    where = " in the window" if window is not None else ""
    valid = np.isfinite(depth)
    n_valid = int(np.count_nonzero(valid))
    if n_valid == 0:
        raise InputDataError(
            f"bathymetry {name!r} has no valid cells{where}: all {depth.size} are nodata; "
            "check the nodata value or choose another window"
        )
    n_land = int(np.count_nonzero(valid & (depth <= 0.0)))
    hint = (
        "if it stores elevation (negative below sea level), drop --depth-positive"
        if depth_positive
        else "if it stores depth positive down, pass --depth-positive (depth_positive=True)"
    )
    if n_land == n_valid:
        raise InputDataError(
            f"bathymetry {name!r} has no water{where}: all {n_valid} valid cells would be land "
            f"(depth <= 0 m); {hint}"
        )
    share = n_land / n_valid
    if share > share_limit:
        looks = "like elevation" if depth_positive else "depth-positive"
        raise InputDataError(
            f"bathymetry {name!r} looks {looks}: {100.0 * share:.1f} % of valid cells{where} "
            f"would be land; {hint}"
        )

    notes.append(
        f"{n_valid - n_land} water, {n_land} land and {depth.size - n_valid} nodata cell(s) "
        f"of {depth.size}"
    )

    if coarsen > 1:
        try:
            depth, coarse_notes = coarsen_depth(depth, int(coarsen))
        except GridError as err:
            raise GridError(f"bathymetry {name!r}: {err}") from err
        notes.extend(coarse_notes)
        k = int(coarsen)
        transform = Affine(transform.a * k, 0.0, transform.c, 0.0, transform.e * k, transform.f)
        shape = depth.shape
        if not np.any(depth > 0.0):
            raise InputDataError(
                f"coarsening bathymetry {name!r} by {coarsen} leaves no water cells; "
                "use a smaller factor"
            )

    if refine > 1:
        k = int(refine)
        seam = Grid((int(shape[0]), int(shape[1])), transform, full.crs).has_seam_column
        if seam:
            depth = depth[:, :-1]
            notes.append("dropped the seam column (a repeat of the first, 360 degrees on) before refining")
        depth, fine_notes = refine_depth(depth, k)
        notes.extend(fine_notes)
        transform = Affine(transform.a / k, 0.0, transform.c, 0.0, transform.e / k, transform.f)
        shape = depth.shape

    try:
        grid = Grid((int(shape[0]), int(shape[1])), transform, full.crs)
    except GridError as err:
        raise GridError(f"bathymetry {name!r}: {err}") from err
    if coarsen > 1 and window is None and full.wraps_x and not grid.wraps_x:
        notes.append(
            f"coarsening by {coarsen} dropped column(s), so the grid no longer spans 360 degrees "
            f"and will not wrap around; choose a factor that divides {full.cols}"
        )
    depth.setflags(write=False)
    digest = file_sha256(name) if os.path.isfile(name) else None
    return Bathymetry(
        depth_m=depth, grid=grid, path=name, band=chosen, sha256=digest, notes=tuple(notes)
    )


def check_resample_factors(coarsen: Any, refine: Any) -> None:
    """Refuse a refine factor that is not a whole number >= 1, or one combined with coarsening.

    >>> check_resample_factors(2, 3)
    Traceback (most recent call last):
    ...
    ttmap.errors.InputDataError: coarsen 2 and refine 3 cannot be combined; use one of them (coarsen to solve faster, refine to solve finer)
    """
    if isinstance(refine, bool) or not isinstance(refine, (int, np.integer)) or refine < 1:
        raise InputDataError(f"refine factor {refine!r} is not a whole number >= 1; pass e.g. 2")
    if refine > 1 and coarsen != 1:
        raise InputDataError(
            f"coarsen {coarsen} and refine {refine} cannot be combined; use one of them "
            "(coarsen to solve faster, refine to solve finer)"
        )


def _equals_value(data: np.ndarray, value: float) -> np.ndarray:
    """Cells of ``data`` equal to ``value`` (as stored in the band's type)."""
    if np.issubdtype(data.dtype, np.integer):
        info = np.iinfo(data.dtype)
        if float(value) != int(value) or not info.min <= value <= info.max:
            return np.zeros(data.shape, dtype=bool)
        return np.asarray(data == np.asarray(int(value), dtype=data.dtype))
    return np.asarray(data == np.asarray(value, dtype=data.dtype))


#: Deepest ocean depth, metres (Challenger Deep, about 10.9 km: from memory),
#: rounded up. A valid cell beyond it, below or above sea level (the highest
#: land is under 8.9 km), cannot be a real depth or height.
PLAUSIBLE_LIMIT_M: float = 11_000.0
#: Share of valid cells one value at the edge of the range may fill before it
#: reads as a fill value (common practice, no source).
FILL_SHARE: float = 0.01
#: Round values that data producers use as fill besides the declared nodata.
_FILL_SENTINELS = frozenset({-9999.0, 9999.0, -999.0, 999.0, -99999.0, 99999.0, -32767.0, -32768.0, 32767.0})


def check_fill_values(values: np.ndarray, valid: np.ndarray, name: str, *, warn: bool = True) -> str | None:
    """Refuse or flag values that read as an undeclared fill value.

    Parameters
    ----------
    values : ndarray, float, metres as stored (elevation or depth)
    valid : ndarray of bool, same shape
        Cells not already nodata.
    name : str
        The raster, for messages.
    warn : bool
        Issue the note as a warning too.

    Returns
    -------
    str or None
        A note when a round value at the edge of the range fills more than
        :data:`FILL_SHARE` of the valid cells (also warned as
        :class:`~ttmap.errors.TtmapWarning`); None otherwise.

    Raises
    ------
    InputDataError
        A valid cell lies beyond :data:`PLAUSIBLE_LIMIT_M` from sea level: the
        message names the most common such value, its share and the fix
        (``--nodata VALUE``).

    Examples
    --------
    >>> v = np.array([-50.0, -4000.0, 99999.0, 99999.0])
    >>> check_fill_values(v, np.isfinite(v), "b.tif")
    Traceback (most recent call last):
    ...
    ttmap.errors.InputDataError: bathymetry 'b.tif': 2 cell(s) (50.0 %) hold 99999, beyond the deepest ocean trench and the highest land (11000 m); an undeclared fill value? declare it with --nodata 99999 (nodata = 99999 in a scenario file)
    """
    finite = valid & np.isfinite(values)
    n = int(np.count_nonzero(finite))
    if n == 0:
        return None
    wild = finite & (np.abs(values) > PLAUSIBLE_LIMIT_M)
    n_wild = int(np.count_nonzero(wild))
    if n_wild:
        uniq, counts = np.unique(values[wild], return_counts=True)
        top = float(uniq[int(np.argmax(counts))])
        top_n = int(counts.max())
        raise InputDataError(
            f"bathymetry {name!r}: {top_n} cell(s) ({100.0 * top_n / n:.1f} %) hold {top:g}, beyond the deepest "
            f"ocean trench and the highest land ({PLAUSIBLE_LIMIT_M:g} m); an undeclared fill value? declare it "
            f"with --nodata {top:g} (nodata = {top:g} in a scenario file)"
        )
    for edge in (float(np.min(values[finite])), float(np.max(values[finite]))):
        if edge not in _FILL_SENTINELS:
            continue
        k = int(np.count_nonzero(finite & (values == edge)))
        if k > FILL_SHARE * n:
            note = (
                f"{k} cell(s) ({100.0 * k / n:.1f} %) of bathymetry {name!r} hold {edge:g}, a common fill value, "
                f"at the edge of its range; if they are not real, pass --nodata {edge:g}"
            )
            if warn:
                warnings.warn(note, TtmapWarning, stacklevel=3)
            return note
    return None


def sample_fill_values(path: str, band: int | None = None, *, nodata: float | None = None,
                       max_cells: int = 1_000_000) -> str | None:
    """:func:`check_fill_values` on a decimated read of at most about ``max_cells`` cells.

    For checks that must not read the whole raster (``ttmap scenario
    check``): a fill value covering more than a small share of the grid
    shows up in any regular sample of it. Problems opening or reading the
    raster are left to the full read.

    Returns
    -------
    str or None
        The note of a suspicious value (not warned).

    Raises
    ------
    InputDataError
        A value beyond :data:`PLAUSIBLE_LIMIT_M` in the sample.
    """
    try:
        src = _open_raster(path)
    except TtmapError:
        return None
    with src:
        try:
            chosen = _choose_band(src, path, band)
        except TtmapError:
            return None
        step = max(1, math.ceil(math.sqrt(src.height * src.width / max_cells)))
        shape = (max(1, src.height // step), max(1, src.width // step))
        try:
            data = src.read(chosen, out_shape=shape, resampling=Resampling.nearest)
            invalid = np.asarray(src.read_masks(chosen, out_shape=shape, resampling=Resampling.nearest) == 0)
        except RasterioError as err:
            raise InputDataError(
                f"reading band {chosen} of bathymetry {path!r} failed ({err}); check that the file is complete"
            ) from err
        except (MemoryError, ValueError):
            return None
        scale, offset = src.scales[chosen - 1], src.offsets[chosen - 1]
        unit = (src.units[chosen - 1] or "").strip().lower()
    if nodata is not None:
        invalid |= _equals_value(data, nodata)
    values = data.astype(np.float64) * float(scale) + float(offset)
    values *= _FOOT_UNITS.get(unit, 1.0)
    return check_fill_values(values, ~invalid, path, warn=False)


# ---------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------


def describe_bathymetry(bathy: Bathymetry) -> dict[str, Any]:
    """A summary of a bathymetry as ttmap sees it (what ``ttmap info`` prints).

    Returns
    -------
    dict
        ``crs``, ``crs_name``, ``rows``, ``cols``, ``cells``, ``bounds``
        (left, bottom, right, top), ``geographic``, ``wraps_x``,
        ``has_seam_column``, ``cell_size_m`` (row_m, col_m; at mid-latitude
        for a geographic grid), ``water_cells`` (as the solver sees them:
        the cells with depth > 0 plus the land cells opened to close
        diagonal-only joins, counted by the same
        :func:`ttmap.connectivity.connect_water` the medium uses, so the
        figure equals the run record's), ``diagonal_joins_opened``,
        ``water_share``, ``nodata_share``, ``depth_range_m`` (shallowest and deepest water,
        None without water), ``max_land_height_m`` (None without land),
        ``small_islands`` (land bodies off the grid's edge, 2 to
        :data:`SMALL_ISLAND_CELLS` - 1 cells across: fronts bending around
        them carry first-order error, docs/method.md §10) and ``notes``
        (changes made on reading).
    """
    g = bathy.grid
    d = bathy.depth_m
    valid = np.isfinite(d)
    water = valid & (d > 0)
    land = valid & ~water
    row_m, col_m = g.cell_size_m()
    from ttmap.connectivity import connect_water

    opened = len(connect_water(water, ground=d, periodic_x=g.wraps_x).opened) if water.any() else 0
    n_water = int(water.sum()) + opened
    n = int(d.size)
    return {
        "crs": g.crs.to_string(),
        "crs_name": g.crs.name,
        "rows": int(g.rows),
        "cols": int(g.cols),
        "cells": int(g.rows * g.cols),
        "bounds": tuple(float(v) for v in g.bounds),
        "geographic": bool(g.is_geographic),
        "wraps_x": bool(g.wraps_x),
        "has_seam_column": bool(g.has_seam_column),
        "cell_size_m": (float(row_m), float(col_m)),
        "water_cells": n_water,
        "diagonal_joins_opened": opened,
        "water_share": float(n_water) / n if n else 0.0,
        "nodata_share": float((~valid).sum()) / n if n else 0.0,
        "depth_range_m": (float(d[water].min()), float(d[water].max())) if water.any() else None,
        "max_land_height_m": float(-d[land].min()) if land.any() else None,
        "small_islands": count_small_islands(land),
        "notes": list(bathy.notes),
    }


#: Islands narrower than this many cells (the larger side of their bounding box) are
#: "small" in ``ttmap info``: in the reference test islands 6-12 cells across leave up
#: to 2 % error behind them (docs/method.md §9). A rule of this project, no source.
SMALL_ISLAND_CELLS: int = 10


def count_small_islands(land: BoolArray) -> int:
    """Land bodies (4-connected) that touch no edge of the grid and are 2 to 9 cells across.

    >>> land = np.zeros((12, 12), bool)
    >>> land[3:6, 3:5] = True      # 3 cells across: counted
    >>> land[8, 8] = True          # a single cell: not counted
    >>> land[:, 11] = True         # the grid's edge: a coast, not an island
    >>> count_small_islands(land)
    1
    """
    from scipy import ndimage

    labels, n = ndimage.label(land)
    count = 0
    rows, cols = land.shape
    for sl in ndimage.find_objects(labels):
        if sl is None:
            continue
        r, c = sl
        if r.start == 0 or c.start == 0 or r.stop == rows or c.stop == cols:
            continue
        across = max(r.stop - r.start, c.stop - c.start)
        if 2 <= across < SMALL_ISLAND_CELLS:
            count += 1
    return count


def overview_factors(shape: tuple[int, int], *, min_side: int = BLOCK_SIZE) -> list[int]:
    """Overview decimation factors 2, 4, 8, ... while the smaller side stays >= ``min_side``.

    Examples
    --------
    >>> overview_factors((1000, 3000))
    [2]
    >>> overview_factors((4096, 4096))
    [2, 4, 8, 16]
    >>> overview_factors((300, 300))
    []
    """
    side = min(shape)
    factors: list[int] = []
    f = 2
    while side / f >= min_side:
        factors.append(f)
        f *= 2
    return factors


def _rio_crs(crs: CRS) -> rasterio.crs.CRS:
    code = crs.to_epsg(min_confidence=100)
    if code is not None:
        return rasterio.crs.CRS.from_epsg(code)
    return rasterio.crs.CRS.from_wkt(crs.to_wkt())


def _check_tags(tags: Mapping[str, Any] | None) -> dict[str, str]:
    out: dict[str, str] = {}
    for key, value in (tags or {}).items():
        if not isinstance(key, str) or not _TAG_KEY_RE.match(key):
            raise InputDataError(
                f"raster tag name {key!r} is empty or holds spaces or '='; use e.g. 'SOURCE'"
            )
        out[key] = str(value)
    return out


def _prepare_values(
    array: ArrayLike, grid: Grid, dtype: np.dtype[Any], nodata: float
) -> np.ndarray:
    a = np.asarray(array)
    if a.ndim != 2 or a.shape != grid.shape:
        raise InputDataError(
            f"array of shape {a.shape} does not match the grid {grid.shape}; "
            "pass an array of the grid's (rows, cols)"
        )
    if not (np.issubdtype(a.dtype, np.number) or a.dtype == np.bool_) or np.iscomplexobj(a):
        raise InputDataError(f"array dtype {a.dtype} is not real numbers; pass a numeric array")
    if np.issubdtype(dtype, np.floating):
        return _prepare_floats(a, dtype, nodata)
    if np.issubdtype(a.dtype, np.floating):
        invalid = ~np.isfinite(a)
    else:
        invalid = np.zeros(a.shape, dtype=bool)
    valid_values = a[~invalid]
    info = np.iinfo(dtype)
    if not (info.min <= nodata <= info.max) or float(nodata) != int(nodata):
        raise InputDataError(
            f"nodata {nodata:g} does not fit {dtype.name}; choose a whole number in "
            f"{info.min}..{info.max}"
        )
    if valid_values.size:
        if np.issubdtype(a.dtype, np.floating) and np.any(valid_values != np.round(valid_values)):
            raise InputDataError(
                f"array holds fractional values, which {dtype.name} cannot store; "
                "round them or write float32"
            )
        lo, hi = valid_values.min(), valid_values.max()
        if lo < info.min or hi > info.max:
            raise InputDataError(
                f"array values {lo:g}..{hi:g} do not fit {dtype.name}; choose a wider dtype"
            )
    with np.errstate(over="ignore", invalid="ignore"):
        out = a.astype(dtype)
    nodata_value = np.asarray(nodata).astype(dtype)
    clash = (out == nodata_value) & ~invalid
    if np.any(clash):
        raise InputDataError(
            f"{int(np.count_nonzero(clash))} valid cell(s) equal the nodata value {nodata:g}; "
            "choose another nodata value"
        )
    out[invalid] = nodata_value
    return out


def _prepare_floats(a: np.ndarray, dtype: np.dtype[Any], nodata: float) -> np.ndarray:
    """Float output: cast once, then find NaN/inf, overflow and nodata clashes on the result.

    Four passes over the (smaller) output instead of seven over the input:
    an invalid input cell is non-finite in the output too, so only the
    output's non-finite cells need a look at the input.
    """
    if not math.isfinite(nodata) or abs(nodata) > float(np.finfo(dtype).max):
        raise InputDataError(
            f"nodata {nodata!r} is not a finite {dtype.name} value; pass e.g. -9999"
        )
    with np.errstate(over="ignore", invalid="ignore"):
        out = a.astype(dtype)  # a copy even when the dtype is the same: the caller's array stays
    nodata_value = np.asarray(nodata).astype(dtype)
    bad = ~np.isfinite(out)
    if np.issubdtype(a.dtype, np.floating) and bad.any():
        overflow = np.isfinite(a[bad])
    else:
        overflow = bad[bad]
    if np.any(overflow):
        raise InputDataError(
            f"{int(np.count_nonzero(overflow))} value(s) overflow {dtype.name}; "
            "write float64 or rescale"
        )
    clash = out == nodata_value
    if clash.any():
        raise InputDataError(
            f"{int(np.count_nonzero(clash))} valid cell(s) equal the nodata value {nodata:g}; "
            "choose another nodata value"
        )
    out[bad] = nodata_value
    return out


def write_raster(
    path: str | os.PathLike[str],
    array: ArrayLike,
    grid: Grid,
    *,
    dtype: DTypeLike = "float32",
    nodata: float = -9999.0,
    tags: Mapping[str, Any] | None = None,
    band_description: str = "",
    units: str = "",
    overwrite: bool = False,
    resampling: str | None = None,
) -> None:
    """Write a one-band GeoTIFF: tiled, compressed, with overviews and metadata.

    Parameters
    ----------
    path : path-like
        Output file; written as GeoTIFF whatever its suffix.
    array : array_like of shape (rows, cols)
        Values; NaN and infinities (float input) become ``nodata``.
    grid : Grid
        Geometry: shape must equal ``array.shape``; CRS and transform are
        written as they are.
    dtype : {"float32", "float64", "uint8", "uint16", "int16", "int32"}
        Stored data type. Integer types need whole values in range.
    nodata : float
        Stored for invalid cells and declared as the band's nodata value. No
        valid cell may equal it.
    tags : mapping of str to str, optional
        Dataset metadata items (GDAL default domain).
    band_description, units : str
        Band description and band unit string (e.g. ``"min"``).
    overwrite : bool
        Replace an existing file.
    resampling : {"average", "nearest", "mode"}, optional
        Overview resampling; default "average" for floats (nodata cells are
        left out of the average) and "nearest" for integers.

    Raises
    ------
    InputDataError
        Shape mismatch, unsupported dtype, values or nodata that do not fit
        the dtype, a valid value equal to nodata, a bad tag name, an unknown
        resampling, or a missing output folder.
    OutputExistsError
        ``path`` exists and ``overwrite`` is False (nothing is written).
    TtmapError
        GDAL failed while writing (disk full, permissions); no file is left.

    Notes
    -----
    Tiles are 256 x 256 (a smaller raster is one padded tile). Compression is
    DEFLATE, level 1 (fast; files about a tenth larger than at GDAL's default
    level 6), with the floating-point predictor (3) for floats and the
    horizontal predictor (2) for integers. Internal overviews are built for
    factors 2, 4, 8, ... while the smaller side stays at least 256 cells.
    """
    if not isinstance(grid, Grid):
        raise InputDataError(f"grid must be a ttmap Grid, got {type(grid).__name__}")
    try:
        dt = np.dtype(dtype)
    except TypeError as err:
        raise InputDataError(
            f"dtype {dtype!r} is not a data type; choose one of {', '.join(RASTER_DTYPES)}"
        ) from err
    if dt.name not in RASTER_DTYPES:
        raise InputDataError(
            f"dtype {dt.name!r} is not supported; choose one of {', '.join(RASTER_DTYPES)}"
        )
    is_float = np.issubdtype(dt, np.floating)
    method = resampling or ("average" if is_float else "nearest")
    choices = ("average", "nearest", "mode")
    if method not in choices:
        raise InputDataError(
            f"overview resampling {method!r} is unknown; choose one of {', '.join(choices)}"
        )
    try:
        nodata_f = float(nodata)
    except (TypeError, ValueError) as err:
        raise InputDataError(f"nodata {nodata!r} is not a number; pass e.g. -9999") from err
    meta = _check_tags(tags)
    out = _prepare_values(array, grid, dt, nodata_f)
    rows, cols = grid.shape
    predictor = 3 if is_float else 2
    profile: dict[str, Any] = {
        "driver": "GTiff",
        "width": cols,
        "height": rows,
        "count": 1,
        "dtype": dt.name,
        "crs": _rio_crs(grid.crs),
        "transform": grid.transform,
        "nodata": nodata_f,
        "tiled": True,
        "blockxsize": BLOCK_SIZE,
        "blockysize": BLOCK_SIZE,
        "compress": "deflate",
        "zlevel": _DEFLATE_LEVEL,
        "predictor": predictor,
        "bigtiff": "IF_SAFER",
    }
    factors = overview_factors(grid.shape)
    with atomic_output(path, overwrite=overwrite) as tmp:
        try:
            with (
                rasterio.Env(
                    COMPRESS_OVERVIEW="DEFLATE",
                    ZLEVEL_OVERVIEW=str(_DEFLATE_LEVEL),
                    PREDICTOR_OVERVIEW=str(predictor),
                    GDAL_TIFF_OVR_BLOCKSIZE=str(BLOCK_SIZE),
                ),
                rasterio.open(tmp, "w", **profile) as dst,
            ):
                dst.write(out, 1)
                dst.set_band_description(1, band_description)
                dst.set_band_unit(1, units)
                if meta:
                    dst.update_tags(**meta)
                if factors:
                    dst.build_overviews(factors, Resampling[method])
                    dst.update_tags(ns="rio_overview", resampling=method)
        except RasterioError as err:
            raise TtmapError(
                f"writing raster {os.fspath(path)!r} failed ({err}); "
                "check free disk space and permissions"
            ) from err


def write_arrival_geotiff(
    path: str | os.PathLike[str],
    time_min: ArrayLike,
    grid: Grid,
    *,
    tags: Mapping[str, Any],
    band_description: str,
    overwrite: bool = False,
    nodata: float = -9999.0,
) -> None:
    """Write an arrival-time field as a float32 GeoTIFF in minutes.

    Parameters
    ----------
    path : path-like
        Output GeoTIFF.
    time_min : array_like of shape (rows, cols), float, minutes
        Arrival time; NaN (land, unreached) is written as ``nodata``.
    grid : Grid
        Geometry of ``time_min``.
    tags : mapping of str to str
        Dataset tags (source, period, speed model, caution, version...);
        ``UNITS=minutes`` is always added.
    band_description : str
        E.g. ``"first arrival, minutes after origin"``.
    overwrite : bool
        Replace an existing file.
    nodata : float
        Value stored for NaN cells.

    Raises
    ------
    InputDataError, OutputExistsError, TtmapError
        As :func:`write_raster`.

    Notes
    -----
    The band unit is ``"min"``; tiling, compression and overviews are those
    of :func:`write_raster`.
    """
    values = np.asarray(time_min)
    if not np.issubdtype(values.dtype, np.number) or np.iscomplexobj(values):
        raise InputDataError(
            f"time_min dtype {values.dtype} is not real numbers; pass minutes as floats"
        )
    merged = {**_check_tags(tags), "UNITS": "minutes"}
    write_raster(
        path,
        values,
        grid,
        dtype="float32",
        nodata=nodata,
        tags=merged,
        band_description=band_description,
        units="min",
        overwrite=overwrite,
    )
