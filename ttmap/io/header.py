"""The header of a bathymetry raster: size, georeferencing and bands, no cells read.

:func:`read_bathymetry_header` opens a raster as :func:`ttmap.io.raster.read_bathymetry`
does and refuses it for the same reasons (missing file, not a raster GDAL
reads, no bands, no CRS, a rotated or east-to-west transform), but reads only
its metadata, so a check of many inputs stays cheap. :func:`choose_band`
is the band rule of both.

This module knows no physics.
"""

from __future__ import annotations

import os
import re
import warnings
from dataclasses import dataclass
from typing import Any

from ttmap.errors import GridError, InputDataError
from ttmap.grid import Grid

__all__ = ["BathymetryHeader", "choose_band", "read_bathymetry_header"]

# A GDAL dataset name rather than a file: /vsi... paths and DRIVER:"file":subdataset.
_CONNECTION_RE = re.compile(r"^(/vsi|[A-Za-z][A-Za-z0-9_]+:)")


@dataclass(frozen=True)
class BathymetryHeader:
    """What a raster's metadata says.

    Attributes
    ----------
    path : str
        The raster as given.
    grid : Grid
        Shape, transform and CRS of the whole raster.
    band_count : int
        Number of bands (at least 1).
    nodata : float or None
        Nodata value of the first band.
    """

    path: str
    grid: Grid
    band_count: int
    nodata: float | None


def choose_band(count: int, band: Any, name: str, *, hint: str = "--band N") -> int:
    """The 1-based band to read from a raster with ``count`` bands.

    Parameters
    ----------
    count : int
        Bands in the raster (at least 1).
    band : int or None
        The band asked for; None is allowed only when there is one band.
    name : str
        The raster, for messages.
    hint : str
        How the user chooses a band, for messages (``--band N`` on the
        command line, ``band = N`` in a scenario file).

    Raises
    ------
    InputDataError
        Several bands and none chosen, a band that is not a whole number, or
        one out of range.

    Examples
    --------
    >>> choose_band(1, None, "a.tif"), choose_band(3, 2, "a.tif")
    (1, 2)
    >>> choose_band(3, None, "a.tif", hint="band = N")
    Traceback (most recent call last):
    ...
    ttmap.errors.InputDataError: bathymetry 'a.tif' has 3 bands; choose one with band = N (1 to 3)
    """
    if band is None:
        if count > 1:
            raise InputDataError(
                f"bathymetry {name!r} has {count} bands; choose one with {hint} (1 to {count})"
            )
        return 1
    if isinstance(band, bool) or not isinstance(band, int) and not hasattr(band, "__index__"):
        raise InputDataError(f"band {band!r} is not a whole number; choose {hint} (1 to {count})")
    if not 1 <= int(band) <= count:
        raise InputDataError(
            f"band {band} is out of range: bathymetry {name!r} has {count} band(s); "
            f"choose {hint} (1 to {count})"
        )
    return int(band)


def read_bathymetry_header(path: str | os.PathLike[str]) -> BathymetryHeader:
    """Open a raster for its metadata only.

    Parameters
    ----------
    path : path-like or str
        Any raster GDAL reads, or a GDAL dataset name.

    Returns
    -------
    BathymetryHeader

    Raises
    ------
    InputDataError
        File missing, not a raster GDAL reads, or without bands of its own
        (the message names a subdataset to open instead).
    GridError
        No CRS, a CRS pyproj cannot read, or a rotated, sheared or
        east-to-west transform.
    """
    import rasterio
    from pyproj import CRS
    from pyproj.exceptions import CRSError
    from rasterio.errors import NotGeoreferencedWarning, RasterioError

    name = os.fspath(path)
    if not _CONNECTION_RE.match(name) and not os.path.exists(name):
        raise InputDataError(f"bathymetry {name!r} does not exist; check the path")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            src = rasterio.open(name)
    except (RasterioError, OSError) as err:
        raise InputDataError(
            f"{name!r} is not a raster GDAL can read; give a GeoTIFF or another GDAL raster format"
        ) from err
    with src:
        count = int(src.count)
        if count == 0:
            subs = list(getattr(src, "subdatasets", []) or [])
            if subs:
                raise InputDataError(
                    f"bathymetry {name!r} holds {len(subs)} subdatasets and no bands of its own; "
                    f"open one of them, e.g. {subs[0]!r}"
                )
            raise InputDataError(f"bathymetry {name!r} has no raster bands; give a raster with one band")
        if src.crs is None or not src.crs.to_wkt():
            raise GridError(
                f"bathymetry {name!r} has no CRS; assign one (e.g. gdal_edit.py -a_srs EPSG:4326)"
            )
        try:
            crs = CRS.from_user_input(src.crs.to_wkt())
            grid = Grid((int(src.height), int(src.width)), src.transform, crs)
        except GridError as err:
            raise GridError(f"bathymetry {name!r}: {err}") from err
        except CRSError as err:
            raise GridError(f"bathymetry {name!r} has a CRS pyproj cannot read: {err}") from err
        nodata = src.nodatavals[0]
    return BathymetryHeader(
        path=name,
        grid=grid,
        band_count=count,
        nodata=None if nodata is None else float(nodata),
    )
