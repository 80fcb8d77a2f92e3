"""Comparison files: arrival rasters in, envelope, difference and site tables out.

The comparisons themselves are computed in :mod:`ttmap.products.compare`;
this module only reads and writes:

- :func:`read_minutes` reads a one-band arrival raster in minutes (and, given
  a grid, refuses a raster on another grid);
- :func:`write_envelope_files` writes ``envelope_min.tif`` (float32
  minutes), ``envelope_first_scenario.tif`` (int16 index, nodata -1) and
  ``envelope_first_scenario.csv`` together;
- :func:`write_difference_raster` writes ``difference_<a>_minus_<b>.tif``;
- :func:`write_sites_tables` writes ``sites_x_scenarios.csv``,
  ``earliest_by_site.csv`` and the chart ``sites_x_scenarios.png`` together.

The file names are :data:`ENVELOPE_FILES`, :func:`difference_file_name` and
:data:`SITES_X_SCENARIOS_FILES`. Every set of files is written whole or not
at all (:mod:`ttmap.io.atomic`). This module knows no physics.
"""

from __future__ import annotations

import csv
import os
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from types import SimpleNamespace
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import NDArray

from ttmap.errors import InputDataError

if TYPE_CHECKING:
    from ttmap.grid import Grid

__all__ = [
    "ENVELOPE_FILES",
    "ENVELOPE_TIE_FILE",
    "SITES_X_SCENARIOS_FILES",
    "difference_file_name",
    "grid_text",
    "read_minutes",
    "write_difference_raster",
    "write_envelope_files",
    "write_tie_raster",
    "write_sites_tables",
]

#: File names of the envelope: minutes, first-scenario index, index lookup table.
ENVELOPE_FILES: tuple[str, str, str] = (
    "envelope_min.tif",
    "envelope_first_scenario.tif",
    "envelope_first_scenario.csv",
)
#: The near-tie raster of an envelope (both envelope paths write it: 1 where no single
#: scenario clearly arrives first, 0 where one does, 255 where none arrives).
ENVELOPE_TIE_FILE: str = "envelope_first_scenario_tie.tif"
#: File names of the sites-by-scenarios products: table, earliest per site, chart.
SITES_X_SCENARIOS_FILES: tuple[str, str, str] = (
    "sites_x_scenarios.csv",
    "earliest_by_site.csv",
    "sites_x_scenarios.png",
)
#: Nodata of the first-scenario index raster (no scenario arrives).
_NO_INDEX = -1.0


def difference_file_name(name_a: str, name_b: str) -> str:
    """File name of the difference raster ``a - b``.

    >>> difference_file_name("north", "south")
    'difference_north_minus_south.tif'
    """
    return f"difference_{name_a}_minus_{name_b}.tif"


def grid_text(g: Grid) -> str:
    """Size, origin and cell of a grid, for messages."""
    t = g.transform
    return f"{g.shape[1]} x {g.shape[0]} cells, origin ({t.c:g}, {t.f:g}), cell ({t.a:g}, {t.e:g})"


def _same_grid(a: Grid, b: Grid) -> bool:
    return (
        tuple(a.shape) == tuple(b.shape)
        and a.transform.almost_equals(b.transform, precision=1e-9 * max(1.0, abs(a.transform.a)))
        and a.crs.equals(b.crs, ignore_axis_order=True)
    )


def read_minutes(
    path: str | os.PathLike[str], grid: Grid | None = None, *, what: str = "arrival raster"
) -> tuple[NDArray[np.float64], Grid, dict[str, str]]:
    """Read a single-band arrival raster in minutes.

    Parameters
    ----------
    path : path-like
        A GeoTIFF written by ttmap, or any one-band float raster in minutes.
    grid : Grid, optional
        The grid the raster must be on (same shape, transform and CRS).
    what : str
        What the raster is, for messages.

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
        Missing or unreadable file, more than one band, no CRS, a ``UNITS``
        tag other than minutes, or a raster on another grid than ``grid``.
    """
    import rasterio
    from rasterio.errors import RasterioError

    from ttmap.grid import Grid

    name = os.fspath(path)
    if not os.path.exists(name):
        raise InputDataError(f"{what} {name!r} does not exist; check the path")
    try:
        with rasterio.open(name) as src:
            if src.count != 1:
                raise InputDataError(
                    f"{what} {name!r} has {src.count} bands; give a one-band raster of minutes"
                )
            tags = dict(src.tags())
            data = src.read(1, masked=True)
            if src.crs is None:
                raise InputDataError(f"{what} {name!r} has no CRS; it cannot be compared")
            got = Grid((src.height, src.width), src.transform, src.crs.to_wkt())
    except RasterioError as err:
        raise InputDataError(f"{name!r} is not a raster GDAL can read ({err})") from err
    units = tags.get("UNITS")
    if units is not None and units.strip().lower() not in ("minutes", "min", "minute"):
        raise InputDataError(
            f"{what} {name!r} holds {units!r}, not minutes; give arrival-time rasters in minutes"
        )
    if grid is not None and not _same_grid(got, grid):
        raise InputDataError(
            f"{what} {name!r} ({grid_text(got)}) is not on the grid of the others "
            f"({grid_text(grid)}); compare rasters of one bathymetry and crop"
        )
    values = np.ma.filled(data.astype(np.float64), np.nan)
    values[~np.isfinite(values)] = np.nan
    return values, got, tags


def write_envelope_files(
    targets: Sequence[str | os.PathLike[str]],
    earliest_min: NDArray[np.floating[Any]],
    first_index: NDArray[np.integer[Any]],
    grid: Grid,
    *,
    minutes_tags: Mapping[str, str],
    index_tags: Mapping[str, str],
    lookup: Mapping[str, Sequence[Any]],
    comments: Sequence[str],
    overwrite: bool,
) -> None:
    """Write the three envelope files together (see :data:`ENVELOPE_FILES`).

    Parameters
    ----------
    targets : three path-likes
        Minutes raster, first-scenario index raster, lookup CSV.
    earliest_min : ndarray of shape (rows, cols), float, minutes
        NaN where no scenario arrives.
    first_index : ndarray of shape (rows, cols), int
        Scenario index; negative where no scenario arrives (nodata -1).
    grid : Grid
    minutes_tags, index_tags : mapping of str to str
        Dataset tags of the two rasters; ``QUANTITY`` is also the band description.
    lookup : mapping of column name to values
        Columns of the lookup CSV, one row per scenario.
    comments : sequence of str
        ``#`` lines on top of the CSV.
    overwrite : bool
        Replace existing files.
    """
    from ttmap.io.atomic import atomic_output_set
    from ttmap.io.raster import write_arrival_geotiff, write_raster

    t_min, t_first, t_csv = (Path(t) for t in targets)
    with atomic_output_set([t_min, t_first, t_csv], overwrite=overwrite) as (p_min, p_first, p_csv):
        write_arrival_geotiff(
            p_min, earliest_min, grid, tags=dict(minutes_tags),
            band_description=minutes_tags.get("QUANTITY", ""),
        )
        index = np.where(first_index >= 0, first_index, np.nan).astype(np.float32)
        write_raster(
            p_first, index, grid, dtype="int16", nodata=_NO_INDEX, tags=dict(index_tags),
            band_description="index of the first-arriving scenario",
            units="", resampling="nearest",
        )
        del index
        with open(p_csv, "w", newline="", encoding="utf-8") as fh:
            for line in comments:
                fh.write("# " + line + "\n")
            w = csv.writer(fh)
            w.writerow(list(lookup))
            w.writerows(zip(*lookup.values(), strict=True))


def write_difference_raster(
    target: str | os.PathLike[str],
    difference_min: NDArray[np.floating[Any]],
    grid: Grid,
    *,
    tags: Mapping[str, str],
    band_description: str,
    overwrite: bool,
) -> None:
    """Write a difference raster (float32 minutes, nodata -9999 where either has no arrival)."""
    from ttmap.io.raster import write_raster

    write_raster(
        target, difference_min, grid, dtype="float32", nodata=-9999.0,
        tags=dict(tags), band_description=band_description, units="min", overwrite=overwrite,
    )


def write_sites_tables(
    targets: Sequence[str | os.PathLike[str]],
    tables: Sequence[tuple[Mapping[str, Sequence[Any]], Sequence[str], Mapping[str, int]]],
    write_chart: Callable[[str], None],
    *,
    overwrite: bool,
) -> None:
    """Write the sites-by-scenarios files together (see :data:`SITES_X_SCENARIOS_FILES`).

    Parameters
    ----------
    targets : three path-likes
        Table CSV, earliest-by-site CSV, chart PNG.
    tables : two (columns, comments, decimals) triples
        The two CSV tables, as for :func:`ttmap.io.sites.write_site_table_csv`.
    write_chart : callable
        Writes the chart to the path it is given (a temporary name).
    overwrite : bool
        Replace existing files.
    """
    from ttmap.io.atomic import atomic_output_set
    from ttmap.io.sites import write_site_table_csv

    paths = [Path(t) for t in targets]
    with atomic_output_set(paths, overwrite=overwrite) as (t_table, t_first, t_png):
        for tmp, (columns, comments, decimals) in zip((t_table, t_first), tables, strict=True):
            write_site_table_csv(
                tmp,
                SimpleNamespace(columns=columns, comments=tuple(comments), decimals=dict(decimals)),
                overwrite=True,
            )
        write_chart(str(t_png))


def write_tie_raster(
    path: str | os.PathLike[str],
    reached: NDArray[np.bool_],
    tie: NDArray[np.bool_],
    grid: Grid,
    *,
    rule: str,
    tags: Mapping[str, str],
    overwrite: bool,
) -> None:
    """Write an envelope's near-tie raster (uint8: 1 near-tie, 0 one scenario first, 255 not reached).

    Parameters
    ----------
    path : path-like
        Usually :data:`ENVELOPE_TIE_FILE` in the output folder.
    reached, tie : ndarrays of shape grid.shape, bool
        Cells some scenario reaches; cells where no single scenario clearly
        arrives first.
    grid : Grid
    rule : str
        What class 1 means for this envelope (written in the ``CLASSES`` tag).
    tags : mapping of str to str
        Further dataset tags (the caution, the tolerance).
    overwrite : bool
    """
    from ttmap.io.raster import write_raster

    values = np.where(reached, (tie & reached).astype(np.float64), np.nan)
    write_raster(
        path, values, grid, dtype="uint8", nodata=255,
        tags={**tags, "CLASSES": f"0 = one scenario arrives first; 1 = {rule}; 255 = not reached"},
        band_description="tie class (1 = near-tie between scenarios)", overwrite=overwrite,
    )
