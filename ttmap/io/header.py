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

__all__ = ["BathymetryHeader", "check_raster_path", "choose_band", "normalise_crs", "read_bathymetry_header"]

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
    dtype : str
        Data type of the first band (e.g. ``"float32"``).
    """

    path: str
    grid: Grid
    band_count: int
    nodata: float | None
    dtype: str = "float64"

    @property
    def itemsize(self) -> int:
        """Bytes per cell of the stored band."""
        import numpy as np

        return int(np.dtype(self.dtype).itemsize)


# Spellings of the degree seen in .prj files ("Degree", "Degrees", "DEG", ...).
_DEGREE_UNIT_RE = re.compile(r'((?:ANGLE)?UNIT)\["(?:degrees?|deg|dd)"', re.IGNORECASE)
_DEGREE_RAD = 0.017453292519943295


def normalise_crs(crs: Any) -> Any:
    """A pyproj CRS with the degree spelled as PROJ spells it.

    ESRI ``.prj`` files (beside ASCII grids and Shapefiles) often spell the
    angular unit ``Degree``; it is plain degrees (its factor is pi/180), so
    the WKT is rewritten with ``degree`` and matched to an EPSG code where
    one fits. Anything else is returned unchanged.

    Parameters
    ----------
    crs : pyproj.CRS

    Returns
    -------
    pyproj.CRS

    Examples
    --------
    >>> from pyproj import CRS
    >>> wkt = ('GEOGCS["GCS_WGS_1984",DATUM["D_WGS_1984",SPHEROID["WGS_1984",6378137.0,'
    ...        '298.257223563]],PRIMEM["Greenwich",0.0],UNIT["Degree",0.0174532925199433]]')
    >>> c = normalise_crs(CRS.from_wkt(wkt))
    >>> c.axis_info[0].unit_name, c.to_epsg()
    ('degree', 4326)
    """
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    if not getattr(crs, "is_geographic", False) or not crs.axis_info:
        return crs
    info = crs.axis_info[0]
    if info.unit_name == "degree" or abs(float(info.unit_conversion_factor) - _DEGREE_RAD) > 1e-12:
        return crs
    wkt = _DEGREE_UNIT_RE.sub(lambda m: f'{m.group(1)}["degree"', crs.to_wkt())
    try:
        fixed = CRS.from_wkt(wkt)
    except CRSError:
        return crs
    code = fixed.to_epsg(min_confidence=20)  # accepted only when equal (below)
    if code is not None:
        candidate = CRS.from_epsg(code)
        if candidate.equals(fixed, ignore_axis_order=True):
            return candidate
    return fixed


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
    check_raster_path(name)
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
            crs = normalise_crs(CRS.from_user_input(src.crs.to_wkt()))
            grid = Grid((int(src.height), int(src.width)), src.transform, crs)
        except GridError as err:
            raise GridError(f"bathymetry {name!r}: {err}") from err
        except CRSError as err:
            raise GridError(f"bathymetry {name!r} has a CRS pyproj cannot read: {err}") from err
        nodata = src.nodatavals[0]
        dtype = str(src.dtypes[0])
    return BathymetryHeader(
        path=name,
        grid=grid,
        band_count=count,
        nodata=None if nodata is None else float(nodata),
        dtype=dtype,
    )


def check_raster_path(name: str) -> None:
    """Refuse an empty path, a missing file or a folder given as the bathymetry raster.

    GDAL dataset names (``/vsi...``, ``DRIVER:"file":sub``) are left to GDAL.

    Raises
    ------
    InputDataError
    """
    if not name.strip():
        raise InputDataError("bathymetry path '' is empty; give a raster file, e.g. bathy.tif")
    if _CONNECTION_RE.match(name):
        return
    if not os.path.exists(name):
        raise InputDataError(f"bathymetry {name!r} does not exist; check the path")
    if os.path.isdir(name):
        raise InputDataError(
            f"bathymetry {name!r} is a folder, not a raster file; give the raster inside it, e.g. "
            f"{os.path.join(name, 'bathy.tif')!r}"
        )
