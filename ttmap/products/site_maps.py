"""Site-centred map products: the map figure and the SLD styles of its rasters.

Pure products (no solving, no file writing): :func:`render_site_map` draws
a site-centred result (:func:`ttmap.sitemap.site_centred_times`),
:func:`render_minutes_left_map` draws and :func:`minutes_left_sld` styles the
minutes-left raster (diverging classes around zero: red below 0, the wave
comes before the official message) and
:func:`first_site_sld` the index raster of the site reached first. The
site-map job (:mod:`ttmap.jobs.sitemap`) writes them.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike

from ttmap._typing import FloatArray
from ttmap.sitemap import NO_SITE_INDEX

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from ttmap.traveltime import TravelTimeResult

__all__ = [
    "SITE_MAP_TITLE",
    "INDEX_NODATA",
    "MINUTES_LEFT_NODATA",
    "first_site_sld",
    "minutes_left_classes",
    "minutes_left_sld",
    "minutes_left_colour_classes",
    "minutes_left_title",
    "render_minutes_left_map",
    "render_site_map",
    "speed_text",
]

#: Title pattern of the site map; ``{site}`` is replaced by the site's name.
SITE_MAP_TITLE: str = "Minutes from a source here to {site}"
#: Nodata value of the minutes-left raster (its style hides it).
MINUTES_LEFT_NODATA: float = -9999.0
#: Nodata value of the site-reached-first index raster ("no site").
INDEX_NODATA: int = NO_SITE_INDEX


def speed_text(result: TravelTimeResult) -> str:
    """The speed of a result in words: front, or energy/phase of a wave period."""
    s = result.settings
    mode = s.get("speed_mode", "long-wave")
    if mode == "long-wave":
        return "front (long-wave speed)"
    return f"{'energy' if mode == 'group' else 'phase'} of {float(s['period_s']):g} s waves ({mode} speed)"


def render_site_map(
    name: str,
    result: TravelTimeResult,
    lines: Sequence[Any],
    *,
    water_mask: ArrayLike | None = None,
    title_prefix: str = "",
) -> Figure:
    """The map of a site-centred result: minutes from a source anywhere to the site ``name``.

    The site is drawn with the site symbol (a white circle with a dark edge)
    at the water cell the solve started from, never with the source's star:
    on this map every water cell is a possible source.
    """
    from ttmap.products.maps import render_arrival_map

    grid = result.grid
    sm = result.summary
    moved = (
        f", read {sm.source_moved_m / 1000.0:.2f} km offshore at the nearest open water"
        if sm.source_moved_m > 0
        else ""
    )
    return render_arrival_map(
        result.arrival_time_min,
        grid.transform,
        land_mask=None if water_mask is None else ~np.asarray(water_mask, dtype=bool),
        lines=lines,
        source_geometry=None,
        sites=[(name, sm.source_x, sm.source_y)],
        title=f"{title_prefix}{SITE_MAP_TITLE.format(site=name)}",
        subtitle=f"Site {name}{moved}  |  {speed_text(result)}  |  same time both ways",
        is_geographic=grid.is_geographic,
        colorbar_label="Minutes for a wave from here to reach the site",
        line_legend="Isochrone (h:mm to reach the site)",
        site_legend="Site",
    )


def render_minutes_left_map(
    name: str,
    left_min: ArrayLike,
    result: TravelTimeResult,
    delay_min: float,
    *,
    water_mask: ArrayLike | None = None,
    title_prefix: str = "",
    step_min: float | None = None,
) -> Figure:
    """Map of the minutes-left raster: travel time to the site minus the notification delay.

    A diverging ramp centred on zero: red classes below 0 (a wave from a
    source there arrives before the official message reaches people at the
    site: only the natural warning helps), blue above (minutes left after
    the message). The zero line is drawn and labelled.

    Parameters
    ----------
    name : str
        Site name.
    left_min : ndarray of shape (rows, cols), float, minutes
        :func:`ttmap.sitemap.minutes_left` of the site-centred times; NaN
        where none.
    result : TravelTimeResult
        The site-centred solve (grid, the site's start cell, speed).
    delay_min : float
        The notification delay the raster was made with.
    water_mask : ndarray of bool, optional
        True on water; land is drawn grey.
    title_prefix : str
        Put before the title.
    step_min : float, optional
        Width of the classes below zero (default 5 min); above zero the
        classes are :data:`ttmap.products.maps.MINUTES_LEFT_EDGES`.
    """
    import dataclasses

    from ttmap.products.isochrones import isochrone_lines
    from ttmap.products.maps import MINUTES_LEFT_EDGES, diverging_classes, render_class_map

    grid = result.grid
    sm = result.summary
    left = np.asarray(left_min, dtype=np.float64)
    finite = left[np.isfinite(left)]
    lo = float(finite.min()) if finite.size else -float(delay_min)
    hi = float(finite.max()) if finite.size else 60.0
    classes = diverging_classes(
        lo, hi, step=step_min or 5.0, positive_edges=MINUTES_LEFT_EDGES,
        label=f"Minutes left after a {delay_min:g}-min message delay (below 0: the wave comes first)",
    )
    lines: list[Any] = []
    if finite.size and lo < 0.0 < hi and delay_min > 0.0:
        # the zero line: where the travel time equals the delay
        lines = [dataclasses.replace(ln, label="0 min")
                 for ln in isochrone_lines(result.arrival_time_min, grid.transform, [float(delay_min)])]
    return render_class_map(
        left,
        grid.transform,
        classes=classes,
        land_mask=None if water_mask is None else ~np.asarray(water_mask, dtype=bool),
        lines=lines,
        sites=[(name, sm.source_x, sm.source_y)],
        title=f"{title_prefix}Minutes left at {name} if the earthquake were here",
        subtitle=(
            f"Travel time to the site minus {delay_min:g} min until the official message  |  "
            f"red: the wave comes first, only the natural warning helps  |  {speed_text(result)}"
        ),
        is_geographic=grid.is_geographic,
        line_legend="Wave and message arrive together (0 min left)",
        site_legend="Site",
    )


def minutes_left_colour_classes(left_min: FloatArray, delay_min: float) -> Any:
    """The minutes-left classes around zero (red below 0: the wave comes before the
    message; blue above), shared by the picture, the SLD and the QGIS style."""
    from ttmap.products.maps import MINUTES_LEFT_EDGES, diverging_classes

    finite = left_min[np.isfinite(left_min)]
    lo = float(finite.min()) if finite.size else -float(delay_min)
    hi = float(finite.max()) if finite.size else 60.0
    return diverging_classes(lo, hi, step=5.0, positive_edges=MINUTES_LEFT_EDGES, label="")


def minutes_left_classes(left_min: FloatArray, delay_min: float) -> tuple[list[float], list[str]]:
    """Class lower bounds (minutes) and colours of the minutes-left raster, for
    styles that take lower bounds (the QGIS style); the same classes as the SLD."""
    classes = minutes_left_colour_classes(left_min, delay_min)
    return [float(v) for v in classes.edges[:-1]], list(classes.colors)


def minutes_left_title(name: str, delay_min: float) -> str:
    """Title of the minutes-left raster's style."""
    return (f"Minutes left at {name} after a {delay_min:g}-min notification delay "
            "(below 0: the wave comes first)")


def minutes_left_sld(left_min: FloatArray, delay_min: float, name: str, stem: str) -> str:
    """Style of the minutes-left raster ``minutes_left_<stem>``: the map's classes around zero.

    The same diverging classes as :func:`render_minutes_left_map` (red below
    0: the wave comes before the message; blue above), so the GIS layer and
    the picture agree.
    """
    from ttmap.products.styles import class_raster_sld

    classes = minutes_left_colour_classes(left_min, delay_min)
    return class_raster_sld(
        classes.edges,
        classes.colors,
        layer_name=f"minutes_left_{stem}",
        title=minutes_left_title(name, delay_min),
        nodata=MINUTES_LEFT_NODATA,
    )


def first_site_sld(names: Sequence[str]) -> str:
    """Categorical raster style: one colour per site index, labelled with its name."""
    from ttmap.products.palette import arrival_colors_hex
    from ttmap.products.styles import default_abstract, sld_document, sld_element, sld_serialise

    colors = arrival_colors_hex(max(len(names), 2), "tab20")[: len(names)]
    root, fts = sld_document(
        "site_centred_first_site", "Site reached first from a source here", default_abstract()
    )
    rule = sld_element(fts, "Rule")
    sld_element(rule, "Name", "first_site")
    sld_element(rule, "Title", "Site reached first from a source here")
    sym = sld_element(rule, "RasterSymbolizer")
    sld_element(sym, "Opacity", "1.0")
    cmap = sld_element(sym, "ColorMap", type="values")
    sld_element(
        cmap,
        "ColorMapEntry",
        color="#000000",
        quantity=str(INDEX_NODATA),
        opacity="0",
        label="no data",
    )
    for i, (name, color) in enumerate(zip(names, colors, strict=True)):
        sld_element(cmap, "ColorMapEntry", color=color, quantity=str(i), opacity="1", label=name)
    return sld_serialise(root)
