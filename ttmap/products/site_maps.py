"""Site-centred map products: the map figure and the SLD styles of its rasters.

Pure products (no solving, no file writing): :func:`render_site_map` draws
a site-centred result (:func:`ttmap.sitemap.site_centred_times`),
:func:`minutes_left_sld` styles the minutes-left raster (a dark red class
below 0: the wave comes before the official message) and
:func:`first_site_sld` the index raster of the site reached first. The
site-map job (:mod:`ttmap.jobs.sitemap`) writes them.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
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
    "minutes_left_title",
    "render_site_map",
    "speed_text",
]

#: Title pattern of the site map; ``{site}`` is replaced by the site's name.
SITE_MAP_TITLE: str = "Minutes from a source here to {site}"
#: Nodata value of the minutes-left raster (its style hides it).
MINUTES_LEFT_NODATA: float = -9999.0
#: Nodata value of the site-reached-first index raster ("no site").
INDEX_NODATA: int = NO_SITE_INDEX
#: Colour of the "wave arrives before the message" class of the minutes-left style.
_BEFORE_MESSAGE_COLOR = "#67000d"


def speed_text(result: TravelTimeResult) -> str:
    """The speed of a result in words: front, or energy/phase of a wave period."""
    s = result.settings
    mode = s.get("speed_mode", "long-wave")
    if mode == "long-wave":
        return "front (long-wave speed)"
    return f"{'energy' if mode == 'group' else 'phase'} of {float(s['period_s']):g} s waves ({mode} speed)"


def _relabel(fig: Figure, mapping: Mapping[str, str]) -> None:
    """Replace exact texts of a finished figure (colour bar label, legend entries)."""
    from matplotlib.text import Text

    for text in fig.findobj(Text):
        new = mapping.get(text.get_text())
        if new is not None:
            text.set_text(new)


def render_site_map(
    name: str,
    result: TravelTimeResult,
    lines: Sequence[Any],
    *,
    water_mask: ArrayLike | None = None,
    title_prefix: str = "",
) -> Figure:
    """The map of a site-centred result: minutes from a source anywhere to the site ``name``."""
    import shapely

    from ttmap.products.maps import COLORBAR_LABEL, render_arrival_map

    grid = result.grid
    sm = result.summary
    moved = (
        f", moved {sm.source_moved_m / 1000.0:.2f} km to open water"
        if sm.source_moved_m > 0
        else ""
    )
    fig = render_arrival_map(
        result.arrival_time_min,
        grid.transform,
        land_mask=None if water_mask is None else ~np.asarray(water_mask, dtype=bool),
        lines=lines,
        source_geometry=shapely.Point(sm.source_x, sm.source_y),
        title=f"{title_prefix}{SITE_MAP_TITLE.format(site=name)}",
        subtitle=f"Site {name}{moved}  |  {speed_text(result)}  |  same time both ways",
        is_geographic=grid.is_geographic,
    )
    _relabel(
        fig,
        {
            COLORBAR_LABEL: f"Minutes from a source here to {name}",
            "Source": f"Site: {name}",
            "Isochrone (h:mm after origin)": f"Isochrone (h:mm to reach {name})",
        },
    )
    return fig


def minutes_left_classes(left_min: FloatArray, delay_min: float) -> tuple[list[float], list[str]]:
    """Class lower bounds (minutes) and colours of the minutes-left raster.

    Classes from 0 at the default isochrone spacing up to the largest value,
    and, with a notification delay, a dark red class from ``-ceil(delay)``
    to 0 (the wave comes before the message). The SLD
    (:func:`minutes_left_sld`) and the QGIS style use the same classes.
    """
    from ttmap.products.isochrones import default_levels_min
    from ttmap.products.palette import arrival_colors_hex

    finite = left_min[np.isfinite(left_min)]
    top = float(finite.max()) if finite.size else 60.0
    positive = [float(v) for v in default_levels_min(max(top, 1.0))]
    levels = [0.0, *positive]
    colors = arrival_colors_hex(len(levels))
    if delay_min > 0.0:
        levels = [-float(math.ceil(delay_min)), *levels]
        colors = [_BEFORE_MESSAGE_COLOR, *colors]
    return levels, colors


def minutes_left_title(name: str, delay_min: float) -> str:
    """Title of the minutes-left raster's style."""
    return (f"Minutes left at {name} after a {delay_min:g}-min notification delay "
            "(below 0: the wave comes first)")


def minutes_left_sld(left_min: FloatArray, delay_min: float, name: str, stem: str) -> str:
    """Style of the minutes-left raster ``minutes_left_<stem>``: classes from 0, dark red below 0."""
    from ttmap.products.styles import raster_sld

    levels, colors = minutes_left_classes(left_min, delay_min)
    return raster_sld(
        levels,
        colors,
        layer_name=f"minutes_left_{stem}",
        title=minutes_left_title(name, delay_min),
        color_map_type="intervals",
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
