"""Files in and out: bathymetry rasters, arrival-time rasters, vector layers.

The io layer reads and writes arrays and geometries and knows no physics. It
is where an elevation raster becomes ``depth_m`` (positive down), where
nodata becomes NaN and back, and where every output is written under a
temporary name and renamed only when complete (:mod:`ttmap.io.atomic`).
"""

__all__: list[str] = []
