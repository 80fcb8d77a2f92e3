"""Vector layers, isochrone files and styles shared by the map and site-map jobs.

The map job (one product set per speed) and the site-map job (one set per
site) write the same kinds of file: an arrival raster with its SLD ramp,
isochrone lines and bands as vector layers with their SLD styles (a
Shapefile variant of the bands style), and one-layer vector files. They are
built here, once; the names come from :mod:`ttmap.jobs.plan`.
"""

from __future__ import annotations

import math

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ttmap.jobs.plan import ISOCHRONE_LAYERS

__all__ = [
    "arrival_levels",
    "arrival_ramp",
    "band_classes",
    "latest_min",
    "minutes_range",
    "isochrone_layers",
    "write_arrival_style",
    "write_isochrones",
    "write_one_layer",
]


def latest_min(time_min: np.ndarray) -> float | None:
    """The latest finite arrival, minutes; None if there is none (no copy of the values).

    >>> latest_min(np.array([3.0, np.nan, 7.5]))
    7.5
    """
    finite = np.isfinite(time_min)
    if not finite.any():
        return None
    return float(np.max(time_min, where=finite, initial=-np.inf))


def minutes_range(time_min: np.ndarray) -> list[float] | None:
    """[earliest, latest] finite minutes, rounded to 1 ms; None if there is none.

    >>> minutes_range(np.array([3.0, np.nan, 7.5]))
    [3.0, 7.5]
    """
    if not np.isfinite(time_min).any():
        return None
    return [round(float(np.nanmin(time_min)), 3), round(float(np.nanmax(time_min)), 3)]


def arrival_levels(time_min: np.ndarray, interval_min: float | None) -> np.ndarray:
    """Isochrone levels up to the latest arrival: every ``interval_min`` or the default spacing."""
    from ttmap.products.isochrones import default_levels_min, levels_from_interval

    tmax = latest_min(time_min)
    if tmax is None:
        return np.zeros(0)
    if interval_min is not None:
        return levels_from_interval(interval_min, tmax)
    levels = default_levels_min(tmax)
    # A field that starts late and spans little (a nested coastal grid) would get one or
    # two isochrones from the default scheme: use a finer round step over its own span.
    tmin = float(np.nanmin(time_min))
    span = tmax - tmin
    if span > 0.0 and int(np.count_nonzero(levels >= tmin)) < 4:
        step = next((s for s in (1.0, 2.0, 5.0, 10.0) if span / s <= 12.0), 10.0)
        first = max(math.ceil(tmin / step) * step, step)  # levels start after the origin
        fine = np.arange(first, tmax + 1e-9, step)
        if fine.size > int(np.count_nonzero(levels >= tmin)):
            return fine
    return levels


def arrival_ramp(levels: Sequence[float] | np.ndarray) -> tuple[list[float], list[str]]:
    """Stops (minutes, from 0 over ``levels``) and colours of an arrival raster's style.

    The SLD and the QGIS style of every arrival-like raster use these.

    >>> arrival_ramp([10.0, 20.0])[0]
    [0.0, 10.0, 20.0]
    >>> arrival_ramp([])[0]
    [0.0, 60.0]
    """
    from ttmap.products.palette import arrival_colors_hex

    ramp = [0.0, *[float(v) for v in levels]] if len(levels) else [0.0, 60.0]
    return ramp, arrival_colors_hex(len(ramp))


def band_classes(bands: Sequence[Any]) -> tuple[list[tuple[float, float | None, str]], list[str]]:
    """``(min_minutes, max_minutes, label)`` rows and colours of isochrone bands, earliest first."""
    from ttmap.products.palette import arrival_colors_hex

    rows: list[tuple[float, float | None, str]] = [
        (float(b.min_minutes), float(b.max_minutes), str(b.label)) for b in bands]
    return rows, arrival_colors_hex(max(len(bands), 2))[: len(bands)]


def write_arrival_style(path: Path, levels: np.ndarray, *, layer_name: str, title: str,
                        overwrite: bool = False) -> Path:
    """The raster SLD of an arrival-time GeoTIFF: a colour ramp from 0 over ``levels``."""
    from ttmap.io.styles import write_sld
    from ttmap.products.styles import raster_sld

    ramp, colors = arrival_ramp(levels)
    write_sld(path, raster_sld(ramp, colors, layer_name=layer_name, title=title), overwrite=overwrite)
    return path


def isochrone_layers(lines: Sequence[Any], bands: Sequence[Any], *, lines_description: str,
                     bands_description: str, line_columns: Mapping[str, Any] | None = None,
                     band_columns: Mapping[str, Any] | None = None) -> tuple[Any, Any]:
    """The ``isochrone_lines`` and ``isochrone_bands`` layers of lines and bands.

    Lines carry ``minutes`` and ``label``; bands ``min_minutes``,
    ``max_minutes``, ``minutes`` (the upper bound) and ``label``. Each name
    -> value of the column mappings adds a column holding that value on every
    feature (a float or None value gives a float column, NaN for None);
    ``line_columns`` go to the lines, ``band_columns`` to the bands.
    """
    from ttmap.io.vector import VectorLayer

    def constant(value: Any, n: int) -> np.ndarray:
        if value is None or isinstance(value, float):
            return np.full(n, np.nan if value is None else value, dtype=np.float64)
        return np.array([value] * n, dtype=object)

    line_attrs: dict[str, Any] = {
        "minutes": np.array([ln.minutes for ln in lines], dtype=np.float64),
        "label": np.array([ln.label for ln in lines], dtype=object),
        **{k: constant(v, len(lines)) for k, v in (line_columns or {}).items()}}
    band_attrs: dict[str, Any] = {
        "min_minutes": np.array([b.min_minutes for b in bands], dtype=np.float64),
        "max_minutes": np.array([b.max_minutes for b in bands], dtype=np.float64),
        "minutes": np.array([b.max_minutes for b in bands], dtype=np.float64),
        "label": np.array([b.label for b in bands], dtype=object),
        **{k: constant(v, len(bands)) for k, v in (band_columns or {}).items()}}
    line_layer = VectorLayer(
        ISOCHRONE_LAYERS[0],
        [ln.geometry for ln in lines],
        line_attrs,
        "MultiLineString",
        description=lines_description,
    )
    band_layer = VectorLayer(
        ISOCHRONE_LAYERS[1],
        [b.geometry for b in bands],
        band_attrs,
        "MultiPolygon",
        description=bands_description,
    )
    return line_layer, band_layer


def write_isochrones(names: Any, layers: tuple[Any, Any], bands: Sequence[Any], crs: Any, *,
                     lines_title: str, bands_title: str, overwrite: bool = False) -> list[Path]:
    """The isochrone files of one set (every vector format) and their SLD styles.

    ``names`` is the isochrone part of a plan (``ProductSetNames.isochrones``
    or ``SiteNames.isochrones``). Bands are coloured from the arrival ramp;
    the Shapefile style filters on the 10-character field name.
    """
    from ttmap.io.vector import shapefile_field_name, write_vector_layers
    from ttmap.io.styles import write_sld
    from ttmap.products.styles import bands_sld, lines_sld

    written: list[Path] = []
    for target in names.targets.values():
        # The caution travels in each layer's description (dataset metadata makes
        # readers with newer GDAL write .aux.xml side files next to the GeoPackage).
        written += write_vector_layers(target, list(layers), crs=crs, overwrite=overwrite)
    rows, colors = band_classes(bands)
    write_sld(names.lines_sld, lines_sld(layer_name=ISOCHRONE_LAYERS[0], title=lines_title), overwrite=overwrite)
    write_sld(names.bands_sld, bands_sld(rows, colors, layer_name=ISOCHRONE_LAYERS[1], title=bands_title),
              overwrite=overwrite)
    written += [names.lines_sld, names.bands_sld]
    if names.bands_shp_sld is not None:
        write_sld(names.bands_shp_sld,
                  bands_sld(rows, colors, layer_name=names.shp_bands_layer, title=bands_title,
                            attribute=shapefile_field_name("min_minutes")),
                  overwrite=overwrite)
        written.append(names.bands_shp_sld)
    return written


def write_one_layer(final: Path, layer: Any, crs: Any, overwrite: bool) -> Path:
    """Write one vector layer to exactly ``final`` (.gpkg, .geojson or .shp), all or nothing.

    :func:`ttmap.io.vector.write_vector_layers` names GeoJSON and Shapefile
    outputs ``<stem>_<layer>``; here the one layer is written in a hidden
    staging folder and renamed to ``final`` (with its Shapefile companions)
    before the set is moved into place.
    """
    from ttmap.io.atomic import SHAPEFILE_SUFFIXES, atomic_output_set
    from ttmap.io.vector import write_vector_layers

    suffix = final.suffix.lower()
    if suffix == ".gpkg":
        return write_vector_layers(final, [layer], crs=crs, overwrite=overwrite)[0]
    companions = SHAPEFILE_SUFFIXES if suffix == ".shp" else ()
    with atomic_output_set([final], overwrite=overwrite, companion_suffixes=companions) as staged:
        stage = staged[0].parent
        produced = write_vector_layers(stage / final.name, [layer], crs=crs)[0]
        stem = produced.name[: -len(produced.suffix)]
        for f in list(stage.iterdir()):
            if f.name.startswith(stem + "."):
                f.rename(stage / (final.stem + f.name[len(stem):]))
    return final
