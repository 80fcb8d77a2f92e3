"""Comparing scenarios: the earliest-arrival envelope and the difference of two.

Two pure functions work on arrays of arrival minutes (NaN where the wave
never arrives, or on land):

- :func:`envelope` - cell by cell, the earliest arrival over many scenarios
  and the index of the scenario that gives it. It consumes its input one
  array at a time, so a generator reading rasters from disk keeps memory at
  about two grids however many scenarios there are.
- :func:`difference` - ``a - b`` in minutes.

Two writers read arrival rasters (written by ttmap or any float GeoTIFF in
minutes), check that they share one grid, and write GeoTIFFs with tags that
say what the values mean:

- :func:`write_envelope` - ``envelope_min.tif`` (float32 minutes),
  ``envelope_first_scenario.tif`` (int16 index, nodata -1, tags
  ``SCENARIO_<i>=<name>``) and ``envelope_first_scenario.csv`` (index, name,
  raster, cells where it is first, its earliest minute);
- :func:`write_difference` - ``difference_<a>_minus_<b>.tif``: arrival of
  *a* minus arrival of *b*; **positive where b arrives earlier** (a later)
  by that many minutes, negative where a arrives earlier.

A difference is NaN (nodata) wherever either scenario has no arrival. The
envelope is NaN only where no scenario arrives.
"""

from __future__ import annotations

import csv
import os
import re
from collections.abc import Iterable, Iterator, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ttmap.errors import InputDataError

if TYPE_CHECKING:
    from ttmap.grid import Grid

__all__ = [
    "envelope",
    "difference",
    "write_envelope",
    "write_difference",
    "read_minutes",
    "MAX_SCENARIOS",
    "NO_SCENARIO",
]

#: Most scenarios an envelope can index (int16).
MAX_SCENARIOS: int = int(np.iinfo(np.int16).max)
#: First-scenario index where no scenario arrives.
NO_SCENARIO: int = -1

_NAME_RE = re.compile(r"^[A-Za-z0-9_.-]+$")


# ---------------------------------------------------------------------------
# Pure functions
# ---------------------------------------------------------------------------


def _as_minutes(value: ArrayLike, what: str) -> NDArray[np.floating[Any]]:
    a = np.asarray(value)
    if a.ndim != 2:
        raise InputDataError(f"{what} must be a 2-D array of minutes, got shape {a.shape}")
    if not np.issubdtype(a.dtype, np.floating):
        if np.issubdtype(a.dtype, np.integer):
            a = a.astype(np.float64)
        else:
            raise InputDataError(f"{what} has dtype {a.dtype}; pass minutes as floats")
    return a


def envelope(
    times_min: Iterable[ArrayLike],
) -> tuple[NDArray[np.float64], NDArray[np.int16]]:
    """Earliest arrival over scenarios, and which scenario gives it.

    Parameters
    ----------
    times_min : iterable of ndarray of shape (rows, cols), float, minutes
        One arrival-time field per scenario; NaN (or infinite) where it has
        no arrival. Consumed one at a time (a list, or a generator reading
        rasters one by one); inputs are not modified.

    Returns
    -------
    earliest_min : ndarray of shape (rows, cols), float64, minutes
        Cell-wise minimum over the scenarios with an arrival there; NaN where
        none has.
    first_index : ndarray of shape (rows, cols), int16
        Index (in input order) of the scenario whose time is
        ``earliest_min``; on ties the lowest index; :data:`NO_SCENARIO` (-1)
        where none arrives.

    Raises
    ------
    InputDataError
        No fields, a field that is not 2-D floats, shapes that differ, or
        more than :data:`MAX_SCENARIOS` fields.

    Examples
    --------
    >>> nan = float("nan")
    >>> t, i = envelope([[[10.0, nan], [5.0, nan]], [[7.0, 3.0], [5.0, nan]]])
    >>> t.tolist()[0], i.tolist()
    ([7.0, 3.0], [[1, 1], [0, -1]])
    """
    best: NDArray[np.float64] | None = None
    first: NDArray[np.int16] | None = None
    for i, field in enumerate(times_min):
        if i >= MAX_SCENARIOS:
            raise InputDataError(
                f"an envelope indexes at most {MAX_SCENARIOS} scenarios; split them into groups"
            )
        t = _as_minutes(field, f"scenario {i}")
        if best is None or first is None:
            best = np.full(t.shape, np.nan)
            first = np.full(t.shape, NO_SCENARIO, dtype=np.int16)
        elif t.shape != best.shape:
            raise InputDataError(
                f"scenario {i} has shape {t.shape} but scenario 0 has {best.shape}; "
                "give fields of one grid"
            )
        # Earlier than the best so far, or the first arrival at a cell (best NaN).
        with np.errstate(invalid="ignore"):
            better = np.isfinite(t) & ~(best <= t)
        best[better] = t[better]
        first[better] = i
    if best is None or first is None:
        raise InputDataError("no arrival-time fields were given; pass at least one")
    return best, first


def difference(a_min: ArrayLike, b_min: ArrayLike) -> NDArray[np.float64]:
    """Arrival of ``a`` minus arrival of ``b``, in minutes.

    Parameters
    ----------
    a_min, b_min : ndarray of shape (rows, cols), float, minutes
        NaN (or infinite) where the scenario has no arrival.

    Returns
    -------
    ndarray of shape (rows, cols), float64, minutes
        ``a - b``: positive where ``b`` arrives earlier (``a`` later),
        negative where ``a`` arrives earlier; NaN where either has no arrival.

    Raises
    ------
    InputDataError
        Not 2-D floats, or shapes differ.

    Examples
    --------
    >>> difference([[30.0, 10.0, float("nan")]], [[20.0, 25.0, 5.0]]).tolist()
    [[10.0, -15.0, nan]]
    """
    a = _as_minutes(a_min, "a_min").astype(np.float64)
    b = _as_minutes(b_min, "b_min").astype(np.float64)
    if a.shape != b.shape:
        raise InputDataError(f"a_min has shape {a.shape} but b_min has {b.shape}; give one grid")
    out = a - b
    out[~(np.isfinite(a) & np.isfinite(b))] = np.nan
    return out


# ---------------------------------------------------------------------------
# Reading and writing
# ---------------------------------------------------------------------------


def read_minutes(path: str | os.PathLike[str]) -> tuple[NDArray[np.float64], Grid, dict[str, str]]:
    """Read a single-band arrival raster in minutes.

    Returns
    -------
    time_min : ndarray of shape (rows, cols), float64, minutes
        NaN where the raster has nodata (or a mask) or a non-finite value.
    grid : Grid
    tags : dict
        The dataset tags.

    Raises
    ------
    InputDataError
        Missing or unreadable file, more than one band, or a ``UNITS`` tag
        other than minutes.
    """
    import rasterio
    from rasterio.errors import RasterioError

    from ttmap.grid import Grid

    name = os.fspath(path)
    if not os.path.exists(name):
        raise InputDataError(f"arrival raster {name!r} does not exist; check the path")
    try:
        with rasterio.open(name) as src:
            if src.count != 1:
                raise InputDataError(
                    f"arrival raster {name!r} has {src.count} bands; give a one-band raster of minutes"
                )
            tags = dict(src.tags())
            data = src.read(1, masked=True)
            if src.crs is None:
                raise InputDataError(f"arrival raster {name!r} has no CRS; it cannot be compared")
            grid = Grid((src.height, src.width), src.transform, src.crs.to_wkt())
    except RasterioError as err:
        raise InputDataError(f"{name!r} is not a raster GDAL can read ({err})") from err
    units = tags.get("UNITS")
    if units is not None and units.strip().lower() not in ("minutes", "min", "minute"):
        raise InputDataError(
            f"arrival raster {name!r} holds {units!r}, not minutes; give arrival-time rasters in minutes"
        )
    values = np.ma.filled(data.astype(np.float64), np.nan)
    values[~np.isfinite(values)] = np.nan
    return values, grid, tags


def _same_grid(a: Grid, b: Grid) -> bool:
    return (
        tuple(a.shape) == tuple(b.shape)
        and a.transform.almost_equals(b.transform, precision=1e-9 * max(1.0, abs(a.transform.a)))
        and a.crs.equals(b.crs, ignore_axis_order=True)
    )


def _grid_text(g: Grid) -> str:
    t = g.transform
    return f"{g.shape[1]} x {g.shape[0]} cells, origin ({t.c:g}, {t.f:g}), cell ({t.a:g}, {t.e:g})"


def _check_names(names: Sequence[str], what: str) -> list[str]:
    out = [str(n) for n in names]
    for n in out:
        if not _NAME_RE.match(n):
            raise InputDataError(
                f"{what} name {n!r} is not file-safe; use letters, digits, '_', '-' and '.' only"
            )
    dup = sorted({n for n in out if out.count(n) > 1})
    if dup:
        raise InputDataError(f"{what} names repeat ({', '.join(dup)}); give each one once")
    return out


def _common_tags(quantity: str) -> dict[str, str]:
    import ttmap
    from ttmap.products.cautions import CAUTION_SHORT

    return {"QUANTITY": quantity, "SOFTWARE": f"ttmap {ttmap.__version__}", "CAUTION": CAUTION_SHORT}


def write_envelope(
    out_dir: str | os.PathLike[str],
    paths: Sequence[str | os.PathLike[str]],
    names: Sequence[str],
    grid: Grid | None = None,
    overwrite: bool = False,
) -> dict[str, str]:
    """Write the earliest-arrival envelope of several arrival rasters.

    Parameters
    ----------
    out_dir : path-like
        Existing output folder.
    paths : sequence of path-like
        Arrival rasters (minutes), all on one grid; read one at a time.
    names : sequence of str
        Scenario name of each raster (file-safe, unique).
    grid : Grid, optional
        The grid the rasters must share; default that of the first raster.
    overwrite : bool
        Replace existing envelope files.

    Returns
    -------
    dict
        ``{"envelope_min": path, "first_scenario": path, "lookup_csv": path}``.

    Raises
    ------
    InputDataError
        Counts differ, no rasters, bad names, or a raster on another grid
        (the message names it).
    OutputExistsError
        An output exists and ``overwrite`` is False (checked before reading).
    """
    from ttmap.io.atomic import atomic_output_set, check_writable
    from ttmap.io.raster import write_arrival_geotiff, write_raster
    from ttmap.products.cautions import CAUTION_SHORT

    paths = [os.fspath(p) for p in paths]
    names = _check_names(names, "scenario")
    if len(paths) != len(names):
        raise InputDataError(f"{len(paths)} rasters but {len(names)} names; give one name per raster")
    if not paths:
        raise InputDataError("no arrival rasters were given; pass at least one")
    if len(paths) > MAX_SCENARIOS:
        raise InputDataError(f"an envelope indexes at most {MAX_SCENARIOS} scenarios, got {len(paths)}")
    out = Path(out_dir)
    targets = [
        out / "envelope_min.tif",
        out / "envelope_first_scenario.tif",
        out / "envelope_first_scenario.csv",
    ]
    check_writable(targets, overwrite)

    ref: dict[str, Grid] = {}
    if grid is not None:
        ref["grid"] = grid

    def _fields() -> Iterator[NDArray[np.float64]]:
        for path in paths:
            values, g, _ = read_minutes(path)
            if "grid" not in ref:
                ref["grid"] = g
            elif not _same_grid(g, ref["grid"]):
                raise InputDataError(
                    f"arrival raster {path!r} ({_grid_text(g)}) is not on the grid of the others "
                    f"({_grid_text(ref['grid'])}); compare rasters of one bathymetry and crop"
                )
            yield values

    earliest, first = envelope(_fields())
    g = ref["grid"]
    counts = np.bincount(first[first >= 0].astype(np.int64), minlength=len(paths))
    earliest_by: list[float | None] = []
    for i in range(len(paths)):
        sel = first == i
        earliest_by.append(float(earliest[sel].min()) if counts[i] else None)
    scenario_tags = {f"SCENARIO_{i}": n for i, n in enumerate(names)}
    n = len(names)
    with atomic_output_set(targets, overwrite=overwrite) as (t_min, t_first, t_csv):
        write_arrival_geotiff(
            t_min, earliest, g,
            tags={**_common_tags(f"earliest arrival over {n} scenarios, minutes after origin"),
                  "SCENARIOS": str(n), **scenario_tags},
            band_description=f"earliest arrival over {n} scenarios, minutes after origin",
        )
        index = np.where(first >= 0, first, np.nan).astype(np.float32)
        write_raster(
            t_first, index, g, dtype="int16", nodata=float(NO_SCENARIO),
            tags={**_common_tags(
                "index of the scenario that arrives first (ties: lowest index); names in the "
                "SCENARIO_<i> tags and envelope_first_scenario.csv"
            ), "SCENARIOS": str(n), **scenario_tags},
            band_description="index of the first-arriving scenario",
            units="", resampling="nearest",
        )
        del index
        with open(t_csv, "w", newline="", encoding="utf-8") as fh:
            fh.write("# " + CAUTION_SHORT + "\n")
            fh.write(
                "# index: value in envelope_first_scenario.tif; cells_first: cells where this "
                "scenario arrives first; earliest_min: its earliest arrival there, minutes\n"
            )
            w = csv.writer(fh)
            w.writerow(["index", "name", "raster", "cells_first", "earliest_min"])
            for i, (name, path) in enumerate(zip(names, paths)):
                e = earliest_by[i]
                w.writerow([i, name, os.path.basename(path), int(counts[i]),
                            "" if e is None else f"{e:.3f}"])
    return {
        "envelope_min": str(targets[0]),
        "first_scenario": str(targets[1]),
        "lookup_csv": str(targets[2]),
    }


def write_difference(
    out_dir: str | os.PathLike[str],
    path_a: str | os.PathLike[str],
    path_b: str | os.PathLike[str],
    name_a: str,
    name_b: str,
    overwrite: bool = False,
) -> dict[str, str]:
    """Write ``difference_<a>_minus_<b>.tif``: arrival of a minus arrival of b, minutes.

    Positive where b arrives earlier (a later) by that many minutes, negative
    where a arrives earlier; nodata where either has no arrival. Tags
    ``SCENARIO_A``, ``SCENARIO_B`` and ``SIGN`` say so in the file.

    Returns
    -------
    dict
        ``{"difference": path}``.

    Raises
    ------
    InputDataError
        Bad names, unreadable rasters, or rasters on different grids.
    OutputExistsError
        The output exists and ``overwrite`` is False.
    """
    from ttmap.io.atomic import check_writable
    from ttmap.io.raster import write_raster

    a_name, b_name = _check_names([name_a, name_b], "scenario")
    target = Path(out_dir) / f"difference_{a_name}_minus_{b_name}.tif"
    check_writable([target], overwrite)
    a, grid_a, _ = read_minutes(path_a)
    b, grid_b, _ = read_minutes(path_b)
    if not _same_grid(grid_a, grid_b):
        raise InputDataError(
            f"{os.fspath(path_a)!r} ({_grid_text(grid_a)}) and {os.fspath(path_b)!r} "
            f"({_grid_text(grid_b)}) are on different grids; compare rasters of one bathymetry"
        )
    diff = difference(a, b)
    del a, b
    write_raster(
        target, diff, grid_a, dtype="float32", nodata=-9999.0,
        tags={
            **_common_tags(f"arrival time of {a_name} minus arrival time of {b_name}, minutes"),
            "UNITS": "minutes",
            "SCENARIO_A": a_name,
            "SCENARIO_B": b_name,
            "SIGN": (
                f"positive: {b_name} arrives earlier ({a_name} later) by this many minutes; "
                f"negative: {a_name} arrives earlier"
            ),
            "RASTER_A": os.path.basename(os.fspath(path_a)),
            "RASTER_B": os.path.basename(os.fspath(path_b)),
        },
        band_description=f"arrival of {a_name} minus arrival of {b_name}, minutes",
        units="min",
        overwrite=overwrite,
    )
    return {"difference": str(target)}
