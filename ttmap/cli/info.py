"""``ttmap info``: a raster as ttmap sees it."""

from __future__ import annotations

from typing import Any

import click

from ttmap.cli.options import InputFile, bathymetry_options, reading_from_options

__all__ = ["info"]


@click.command("info")
@click.argument("bathymetry", type=InputFile())
@bathymetry_options
def info(bathymetry: str, **opts: Any) -> None:
    """Summarise a bathymetry raster as ttmap sees it."""
    from ttmap.io.raster import describe_bathymetry
    from ttmap.jobs.checks import check_bathymetry
    from ttmap.memory import estimate_solve

    reading = reading_from_options(bathymetry, opts)
    check_bathymetry(reading, solve=False)  # refuse a header claiming more than memory before reading it
    b = reading.read()
    d = describe_bathymetry(b)
    est = estimate_solve(b.grid)
    left, bottom, right, top = d["bounds"]
    unit = "degrees" if d["geographic"] else "map units"
    dy, dx = d["cell_size_m"]
    lines = [
        f"file:          {bathymetry}",
        f"CRS:           {d['crs_name']} ({d['crs']})",
        f"size:          {d['cols']} columns x {d['rows']} rows ({d['cells']:,} cells)",
        f"extent:        x {left:g} to {right:g}, y {bottom:g} to {top:g} ({unit})",
        f"cell size:     {dx:,.0f} m (x) x {dy:,.0f} m (y){' at mid-latitude' if d['geographic'] else ''}",
        f"wraps 360 deg: {'yes' if d['wraps_x'] else 'no'}"
        f"{' (duplicated seam column)' if d['has_seam_column'] else ''}",
        f"water share:   {100.0 * d['water_share']:.1f} % ({d['water_cells']:,} cells as solved"
        + (f", incl. {d['diagonal_joins_opened']} diagonal join(s) opened" if d["diagonal_joins_opened"] else "")
        + "); "
        f"nodata {100.0 * d['nodata_share']:.1f} %",
    ]
    if d["depth_range_m"] is not None:
        lo, hi = d["depth_range_m"]
        lines.append(f"depth range:   {lo:,.1f} to {hi:,.1f} m (water)")
    if d["max_land_height_m"] is not None:
        lines.append(f"land height:   up to {d['max_land_height_m']:,.1f} m")
    if d["small_islands"]:
        lines.append(f"small islands: {d['small_islands']:,} under 10 cells across (times behind them are "
                     "less accurate; see --refine)")
    lines += [
        f"solve grid:    {est.cells:,} cells{' (Mercator rows)' if d['geographic'] else ''}",
        f"estimate:      about {max(est.seconds, 0.05):.1f} s and {est.peak_bytes / 2**30:.2f} GiB per solve "
        "on one core",
    ]
    lines += [f"note:          {n}" for n in d["notes"]]
    click.echo("\n".join(lines))
