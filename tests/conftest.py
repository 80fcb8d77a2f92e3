"""Shared pytest fixtures: tiny invented rasters written into ``tmp_path``."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from affine import Affine

#: Default geometry of the tiny test rasters: 0.5-degree cells, north-up,
#: upper-left corner at 140 E, 40 N (an invented patch of ocean).
TINY_TRANSFORM = Affine(0.5, 0.0, 140.0, 0.0, -0.5, 40.0)

WriteTiny = Callable[..., Path]


@pytest.fixture
def write_tiny_geotiff(tmp_path: Path) -> WriteTiny:
    """Factory writing a small GeoTIFF into ``tmp_path`` and returning its path.

    Call as ``write_tiny_geotiff(array, name="bathy.tif", crs="EPSG:4326",
    transform=TINY_TRANSFORM, nodata=None, dtype=None, units=None, **profile)``.
    A 3-D array ``(bands, rows, cols)`` writes several bands. ``crs=None``
    writes a raster without a CRS.
    """

    def write(
        array: Any,
        *,
        name: str = "bathy.tif",
        crs: Any = "EPSG:4326",
        transform: Affine = TINY_TRANSFORM,
        nodata: float | None = None,
        dtype: str | None = None,
        units: str | None = None,
        **profile: Any,
    ) -> Path:
        import rasterio

        data = np.asarray(array)
        if data.ndim == 2:
            data = data[np.newaxis]
        out_dtype = dtype or data.dtype.name
        path = tmp_path / name
        with rasterio.open(
            path,
            "w",
            driver=profile.pop("driver", "GTiff"),
            width=data.shape[2],
            height=data.shape[1],
            count=data.shape[0],
            dtype=out_dtype,
            crs=crs,
            transform=transform,
            nodata=nodata,
            **profile,
        ) as dst:
            dst.write(data.astype(out_dtype))
            if units is not None:
                for b in range(1, data.shape[0] + 1):
                    dst.set_band_unit(b, units)
        return path

    return write
