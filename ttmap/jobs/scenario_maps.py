"""Styles and maps of the scenario comparison rasters (envelope, first scenario, differences).

Called by :func:`ttmap.jobs.scenario.write_envelope` and
:func:`ttmap.jobs.scenario.write_difference` once the rasters are computed:

- ``envelope_min.sld`` and ``envelope_min.png``: the earliest arrival over
  the scenarios, in the arrival classes, with isochrones;
- ``envelope_first_scenario.sld`` and ``envelope_first_scenario.png``: the
  first scenario, one colour each, and a grey tie class (scenarios within
  the tie tolerance of each other);
- ``difference_<a>_minus_<b>.sld`` and ``.png``: a diverging ramp centred
  on zero.

Each file is written atomically (:func:`ttmap.io.atomic.atomic_output`).
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    from ttmap.grid import Grid
    from ttmap.products.scenario_maps import FirstScenario
    from ttmap.tasks import MediumSpec

__all__ = [
    "envelope_extra_files",
    "difference_extra_files",
    "scenario_water_mask",
    "write_difference_extras",
    "write_envelope_extras",
]


def envelope_extra_files(out_dir: str | os.PathLike[str]) -> list[Path]:
    """The envelope's styles and maps, in writing order.

    >>> [p.name for p in envelope_extra_files("out")]  # doctest: +NORMALIZE_WHITESPACE
    ['envelope_min.sld', 'envelope_min.png', 'envelope_first_scenario.sld',
     'envelope_first_scenario.png']
    """
    out = Path(out_dir)
    return [out / "envelope_min.sld", out / "envelope_min.png",
            out / "envelope_first_scenario.sld", out / "envelope_first_scenario.png"]


def difference_extra_files(raster: str | os.PathLike[str]) -> list[Path]:
    """The style and map of a difference raster: the same name with ``.sld`` and ``.png``."""
    p = Path(raster)
    return [p.with_suffix(".sld"), p.with_suffix(".png")]


def scenario_water_mask(spec: MediumSpec, grid: Grid | None = None) -> np.ndarray | None:
    """Water cells of the run's bathymetry (as read for the solves), or None if unreadable.

    Only for drawing land on the comparison maps; a raster on another grid
    (``grid`` given and different) gives None and the maps show no land.
    """
    from ttmap.errors import TtmapError
    from ttmap.io.raster import read_bathymetry

    try:
        bathy = read_bathymetry(spec.bathymetry, **spec.reading_kwargs())
    except (TtmapError, OSError):
        return None
    if grid is not None and tuple(bathy.grid.shape) != tuple(grid.shape):
        return None
    depth = np.asarray(bathy.depth_m, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        return np.isfinite(depth) & (depth > 0.0)


def _save(fig: Any, target: Path, overwrite: bool) -> None:
    from ttmap.io.atomic import atomic_output
    from ttmap.io.figures import save_figure

    try:
        with atomic_output(target, overwrite=overwrite) as tmp:
            save_figure(fig, tmp, format="png")
    finally:
        fig.clear()


def write_envelope_extras(
    out_dir: str | os.PathLike[str],
    earliest_min: np.ndarray,
    first: FirstScenario,
    names: Sequence[str],
    grid: Grid,
    *,
    water_mask: np.ndarray | None,
    overwrite: bool,
) -> dict[str, str]:
    """Write the envelope's two styles and two maps; returns their paths by kind."""
    from ttmap.jobs.layers import arrival_levels, write_arrival_style
    from ttmap.products.isochrones import isochrone_lines
    from ttmap.products.scenario_maps import (
        first_scenario_sld,
        render_envelope_map,
        render_first_scenario_map,
    )
    from ttmap.io.styles import write_sld

    env_sld, env_png, first_sld, first_png = envelope_extra_files(out_dir)
    levels = arrival_levels(earliest_min, None)
    write_arrival_style(env_sld, levels, layer_name="envelope_min",
                        title=f"Earliest arrival over {len(names)} scenarios", overwrite=overwrite)
    land = None if water_mask is None else ~water_mask
    lines = isochrone_lines(earliest_min, grid.transform, levels) if len(levels) else []
    _save(render_envelope_map(earliest_min, grid.transform, names=names, land_mask=land,
                              lines=lines, is_geographic=grid.is_geographic), env_png, overwrite)
    write_sld(first_sld, first_scenario_sld(first, names), overwrite=overwrite)
    # the QGIS style of the same classes (ties included), beside the raster
    from ttmap.io.styles import write_qml_beside
    from ttmap.products.qml import paletted_qml
    from ttmap.products.scenario_maps import first_scenario_classes

    codes, colors, labels, title = first_scenario_classes(first, names)
    first_qml = write_qml_beside(
        Path(out_dir) / "envelope_first_scenario.tif",
        paletted_qml(codes, labels, layer_name="envelope_first_scenario", title=title,
                     colors_hex=colors, nodata=-1),
        overwrite=overwrite,
    )
    _save(render_first_scenario_map(first, grid.transform, names, land_mask=land,
                                    is_geographic=grid.is_geographic), first_png, overwrite)
    return {"envelope_sld": str(env_sld), "envelope_map": str(env_png),
            "first_scenario_sld": str(first_sld), "first_scenario_map": str(first_png),
            "first_scenario_qml": str(first_qml)}


def write_difference_extras(
    raster: str | os.PathLike[str],
    diff_min: np.ndarray,
    grid: Grid,
    a: str,
    b: str,
    *,
    water_mask: np.ndarray | None,
    overwrite: bool,
) -> dict[str, str]:
    """Write the style and the map of one difference raster; returns their paths."""
    from ttmap.products.scenario_maps import difference_sld, render_difference_map
    from ttmap.io.styles import write_sld

    sld, png = difference_extra_files(raster)
    write_sld(sld, difference_sld(diff_min, a, b, Path(raster).stem), overwrite=overwrite)
    land = None if water_mask is None else ~water_mask
    _save(render_difference_map(diff_min, grid.transform, a, b, land_mask=land,
                                is_geographic=grid.is_geographic), png, overwrite)
    return {"difference_sld": str(sld), "difference_map": str(png)}
