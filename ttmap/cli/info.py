"""``ttmap info``: a raster as ttmap sees it."""

from __future__ import annotations

import math
from typing import Any

import click

from ttmap.cli.map import bathymetry_options

__all__ = ["info", "estimate_solve"]

#: Solve time per solve-grid cell, measured on the development machine (2 cores,
#: 2026-12-01; benchmarks/bench_batch.py: 250 ns per cell for a 1000 x 1000 solve).
NS_PER_CELL = 250.0


def estimate_solve(grid: Any) -> tuple[int, float, float]:
    """(solve cells, seconds, peak bytes) for one solve of ``grid``."""
    from ttmap.grid import solve_plane
    from ttmap.memory import estimate_peak_bytes

    plane = solve_plane(grid)
    cells = plane.shape[0] * plane.shape[1]
    # Fast marching is O(N log N): scale the measured per-cell time from 1e6 cells.
    n = cells * max(1.0, math.log2(max(cells, 2)) / math.log2(1e6))
    return cells, n * NS_PER_CELL * 1e-9, float(estimate_peak_bytes(grid.shape, plane.shape))


@click.command("info")
@click.argument("bathymetry", type=click.Path(dir_okay=False))
@bathymetry_options
def info(bathymetry: str, band: int | None, depth_positive: bool, crop_lonlat: Any, crop_xy: Any,
         coarsen: int) -> None:
    """Summarise a bathymetry raster as ttmap sees it."""
    import numpy as np

    from ttmap.io.raster import read_bathymetry

    if crop_lonlat and crop_xy:
        raise click.UsageError("give --crop-lonlat or --crop-xy, not both")
    b = read_bathymetry(bathymetry, band=band, depth_positive=depth_positive,
                        window=crop_lonlat or crop_xy, window_crs=None if crop_xy else "EPSG:4326",
                        coarsen=coarsen)
    g = b.grid
    d = b.depth_m
    valid = np.isfinite(d)
    water = valid & (d > 0)
    left, bottom, right, top = g.bounds
    unit = "degrees" if g.is_geographic else "map units"
    dy, dx = g.cell_size_m()
    cells, secs, mem = estimate_solve(g)
    lines = [
        f"file:          {bathymetry}",
        f"CRS:           {g.crs.name} ({g.crs.to_string()})",
        f"size:          {g.cols} columns x {g.rows} rows ({g.rows * g.cols:,} cells)",
        f"extent:        x {left:g} to {right:g}, y {bottom:g} to {top:g} ({unit})",
        f"cell size:     {dx:,.0f} m (x) x {dy:,.0f} m (y){' at mid-latitude' if g.is_geographic else ''}",
        f"wraps 360 deg: {'yes' if g.wraps_x else 'no'}{' (duplicated seam column)' if g.has_seam_column else ''}",
        f"water share:   {100.0 * water.sum() / d.size:.1f} % ({int(water.sum()):,} cells); "
        f"nodata {100.0 * (~valid).sum() / d.size:.1f} %",
    ]
    if water.any():
        lines.append(f"depth range:   {float(d[water].min()):,.1f} to {float(d[water].max()):,.1f} m (water)")
    if (valid & ~water).any():
        lines.append(f"land height:   up to {float(-d[valid & ~water].min()):,.1f} m")
    lines += [
        f"solve grid:    {cells:,} cells{' (Mercator rows)' if g.is_geographic else ''}",
        f"estimate:      about {max(secs, 0.05):.1f} s and {mem / 2**30:.2f} GiB per solve on one core",
    ]
    lines += [f"note:          {n}" for n in b.notes]
    click.echo("\n".join(lines))
