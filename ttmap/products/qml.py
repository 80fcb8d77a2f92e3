"""Layer styles as QGIS style documents (QML), the format QGIS loads on its own.

QGIS (3.22 and newer) styles a layer on open, with nothing loaded by hand,
from:

- a ``.qml`` file with the layer's base name beside a raster or a
  Shapefile / GeoJSON file (``arrival_front.qml`` beside
  ``arrival_front.tif``);
- the default row of the ``layer_styles`` table inside a GeoPackage
  (written by :func:`ttmap.io.styles.write_gpkg_layer_style`).

It cannot read a raster style from SLD, so the SLD files of
:mod:`ttmap.products.styles` stay for other clients and these documents give
QGIS the same classes and colours.

Rasters:

- :func:`raster_qml` - arrival minutes (same inputs as
  :func:`ttmap.products.styles.raster_sld`): a single-band pseudocolour
  renderer, interpolated (``"ramp"``) or classed (``"intervals"``), nodata
  transparent. Also for site-centred, minutes-left and envelope rasters.
- :func:`paletted_qml` - an index raster (site reached first, scenario
  arriving first): one colour and name per value.
- :func:`difference_qml` - a difference of two arrivals in minutes: a
  diverging ramp centred on zero.

- :func:`classed_raster_qml` - any classed raster with its own legend text
  (upper bounds, colours, labels), e.g. the source-location misfit.

Vectors:

- :func:`single_fill_qml` - one fill and outline for every polygon.
- :func:`graduated_points_qml` - points classed on a numeric field, labelled.
- :func:`lines_qml` - isochrone lines labelled along the line.
- :func:`bands_qml` - isochrone bands graduated by their lower bound.
- :func:`coast_qml` - the coastal arrival layer, one category per class and
  a grey dashed line for the unreached coast.
- :func:`sites_qml` - site points coloured by their time-budget status.
- :func:`wave_paths_qml` - wave-path lines.

Every builder returns the document as text. Colours come from
:mod:`ttmap.products.palette` and :mod:`ttmap.products.timeline`, as in the
maps and charts.

Notes
-----
The documents hold only what differs from QGIS's defaults; QGIS fills in the
rest when it reads them. Symbol-layer properties are written both as an
``Option`` map (read by QGIS 3.x) and as ``prop`` entries (older readers).
"""

from __future__ import annotations

import itertools
import math
import xml.etree.ElementTree as ET
from collections.abc import Mapping, Sequence

from ttmap.errors import InputDataError
from ttmap.products.palette import arrival_colors_hex, check_hex_colors

__all__ = [
    "QML_VERSION",
    "RASTER_COLOR_MAP_TYPES",
    "DIVERGING_CMAP",
    "raster_qml",
    "paletted_qml",
    "difference_qml",
    "lines_qml",
    "bands_qml",
    "coast_qml",
    "sites_qml",
    "wave_paths_qml",
    "classed_raster_qml",
    "single_fill_qml",
    "graduated_points_qml",
    "site_status_colors",
    "qml_renderer_summary",
]

#: QGIS version written in the documents (the oldest that must read them).
QML_VERSION = "3.22.0"

#: Colour map kinds of :func:`raster_qml` (as in :func:`ttmap.products.styles.raster_sld`).
RASTER_COLOR_MAP_TYPES: tuple[str, ...] = ("ramp", "intervals")

#: Diverging matplotlib colormap for differences: purple below zero, orange
#: above, near white at zero; readable with common colour-vision deficiencies.
DIVERGING_CMAP = "PuOr_r"

#: Gap, relative to a class's width, left below the next class's lower bound
#: (QGIS ranges are closed at both ends and the first match wins, so a band
#: whose ``min_minutes`` equals the next range's lower bound must not fall in
#: the range before it).
_RANGE_GAP = 1.0e-6

_OPEN_END_MIN = 1.0e9
_LINE_COLOR = "#1a1a1a"
_BAND_STROKE = "#404040"
_UNREACHED_COLOR = "#8c8c8c"
_PATH_COLOR = "#8b1a4a"


# ---------------------------------------------------------------------------
# Shared pieces
# ---------------------------------------------------------------------------


def _num(value: float) -> str:
    v = float(value)
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    if v.is_integer() and abs(v) < 1e15:
        return str(int(v))
    return repr(v)


def _rgba(color_hex: str, alpha: float = 1.0) -> str:
    """``"#rrggbb"`` -> QGIS ``"r,g,b,a"`` (0..255 each)."""
    (c,) = check_hex_colors([color_hex])
    r, g, b = (int(c[i : i + 2], 16) for i in (1, 3, 5))
    return f"{r},{g},{b},{round(255 * float(alpha))}"


def _label(minutes: float) -> str:
    from ttmap.products.isochrones import format_minutes_label

    return format_minutes_label(minutes)


def _check_name(what: str, value: str) -> str:
    if not isinstance(value, str) or not value.strip():
        raise InputDataError(f"{what} {value!r} is empty; give a name")
    return value


def _root(*, title: str, abstract: str | None, labels: bool = False) -> ET.Element:
    from ttmap.products.cautions import CAUTION_SHORT

    root = ET.Element(
        "qgis",
        {
            "version": QML_VERSION,
            "styleCategories": "AllStyleCategories",
            "hasScaleBasedVisibilityFlag": "0",
            "minScale": "1e+08",
            "maxScale": "0",
        },
    )
    if labels:
        root.set("labelsEnabled", "1")
    # The title and the caution travel in the style as a comment (QGIS skips it).
    text = f"{title}. {CAUTION_SHORT if abstract is None else abstract}".replace("--", "- -")
    root.append(ET.Comment(f" {text} "))
    return root


def _serialise(root: ET.Element) -> str:
    ET.indent(root, space="  ")
    return "<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>\n" + ET.tostring(
        root, encoding="unicode"
    ) + "\n"


def _symbol_layer(parent: ET.Element, cls: str, props: Mapping[str, str]) -> None:
    layer = ET.SubElement(parent, "layer", {"class": cls, "enabled": "1", "pass": "0", "locked": "0"})
    opt = ET.SubElement(layer, "Option", {"type": "Map"})
    for k, v in props.items():
        ET.SubElement(opt, "Option", {"name": k, "value": v, "type": "QString"})
    for k, v in props.items():
        ET.SubElement(layer, "prop", {"k": k, "v": v})


def _fill_symbol(parent: ET.Element, name: str, color: str, opacity: float, stroke: str) -> None:
    sym = ET.SubElement(
        parent, "symbol",
        {"type": "fill", "name": name, "alpha": "1", "clip_to_extent": "1", "force_rhr": "0"},
    )
    _symbol_layer(sym, "SimpleFill", {
        "color": _rgba(color, opacity),
        "style": "solid",
        "outline_color": _rgba(stroke),
        "outline_style": "solid",
        "outline_width": "0.1",
        "outline_width_unit": "MM",
        "joinstyle": "bevel",
    })


def _line_symbol(parent: ET.Element, name: str, color: str, width_mm: float,
                 dash_mm: tuple[float, float] | None = None) -> None:
    sym = ET.SubElement(
        parent, "symbol",
        {"type": "line", "name": name, "alpha": "1", "clip_to_extent": "1", "force_rhr": "0"},
    )
    props = {
        "line_color": _rgba(color),
        "line_width": _num(width_mm),
        "line_width_unit": "MM",
        "line_style": "solid",
        "capstyle": "round",
        "joinstyle": "round",
        "use_custom_dash": "0",
    }
    if dash_mm is not None:
        props["use_custom_dash"] = "1"
        props["customdash"] = f"{_num(dash_mm[0])};{_num(dash_mm[1])}"
        props["customdash_unit"] = "MM"
    _symbol_layer(sym, "SimpleLine", props)


def _marker_symbol(parent: ET.Element, name: str, color: str, size_mm: float) -> None:
    sym = ET.SubElement(
        parent, "symbol",
        {"type": "marker", "name": name, "alpha": "1", "clip_to_extent": "1", "force_rhr": "0"},
    )
    _symbol_layer(sym, "SimpleMarker", {
        "name": "circle",
        "color": _rgba(color),
        "outline_color": "255,255,255,255",
        "outline_style": "solid",
        "outline_width": "0.4",
        "outline_width_unit": "MM",
        "size": _num(size_mm),
        "size_unit": "MM",
        "angle": "0",
    })


def _labeling(root: ET.Element, field_name: str, *, color: str, font_size_pt: float,
              placement: str) -> None:
    """Simple labels from one field with a white buffer; placement "line" or "point"."""
    lab = ET.SubElement(root, "labeling", {"type": "simple"})
    settings = ET.SubElement(lab, "settings", {"calloutType": "simple"})
    style = ET.SubElement(settings, "text-style", {
        "fieldName": field_name,
        "isExpression": "0",
        "fontSize": _num(font_size_pt),
        "fontSizeUnit": "Point",
        "textColor": _rgba(color),
        "textOpacity": "1",
    })
    ET.SubElement(style, "text-buffer", {
        "bufferDraw": "1",
        "bufferSize": "0.8",
        "bufferSizeUnits": "MM",
        "bufferColor": "255,255,255,255",
        "bufferOpacity": "1",
        "bufferNoFill": "1",
    })
    if placement == "line":
        # QgsPalLayerSettings::Line (2), on the line, along it (flags 10)
        attrs = {"placement": "2", "placementFlags": "10", "repeatDistance": "0"}
    else:
        # QgsPalLayerSettings::OrderedPositionsAroundPoint (6), 1.5 mm from the point
        attrs = {"placement": "6", "dist": "1.5", "distUnits": "MM"}
    ET.SubElement(settings, "placement", attrs)
    ET.SubElement(settings, "rendering", {"obstacle": "1", "drawLabels": "1", "scaleVisibility": "0"})


def _renderer(root: ET.Element, kind: str, **attrs: str) -> ET.Element:
    return ET.SubElement(root, "renderer-v2", {
        "type": kind, "symbollevels": "0", "forceraster": "0", "enableorderby": "0",
        "referencescale": "-1", **attrs,
    })


def _check_levels(levels: list[float], what: str) -> None:
    if not levels:
        raise InputDataError(f"{what} is empty; give at least one value in minutes")
    if not all(math.isfinite(v) for v in levels) or any(b <= a for a, b in itertools.pairwise(levels)):
        raise InputDataError(f"{what} {levels} must be finite and strictly increasing")


def _check_classes(rows: list[tuple[float, float | None, str]], colors: list[str], what: str) -> None:
    if len(rows) != len(colors):
        raise InputDataError(f"{len(rows)} {what}s but {len(colors)} colours; give one per {what}")
    seen: set[float] = set()
    for lo, hi, _ in rows:
        if not math.isfinite(float(lo)) or float(lo) in seen:
            raise InputDataError(
                f"{what} lower bound {lo!r} is not finite or is repeated; give distinct minutes"
            )
        seen.add(float(lo))
        if hi is not None and not float(hi) > float(lo):
            raise InputDataError(f"{what} ({lo!r}, {hi!r}) has its upper bound not above its lower")


def _raster_pipe(root: ET.Element, nodata: float | None) -> tuple[ET.Element, ET.Element]:
    pipe = ET.SubElement(root, "pipe")
    rr = ET.SubElement(pipe, "rasterrenderer", {
        "band": "1", "opacity": "1", "alphaBand": "-1", "nodataColor": "",
    })
    transparency = ET.SubElement(rr, "rasterTransparency")
    if nodata is not None:
        # The GeoTIFF's nodata is transparent anyway; this keeps it so when a
        # copy lost its nodata tag.
        lst = ET.SubElement(transparency, "singleValuePixelList")
        ET.SubElement(lst, "pixelListEntry", {
            "min": _num(nodata), "max": _num(nodata), "percentTransparent": "100",
        })
    return pipe, rr


def _finish_pipe(root: ET.Element, pipe: ET.Element) -> None:
    ET.SubElement(pipe, "brightnesscontrast", {"brightness": "0", "contrast": "0", "gamma": "1"})
    ET.SubElement(pipe, "huesaturation", {"saturation": "0", "grayscaleMode": "0", "colorizeOn": "0"})
    ET.SubElement(pipe, "rasterresampler", {"maxOversampling": "2"})
    ET.SubElement(root, "blendMode").text = "0"


def _pseudocolor(root: ET.Element, items: list[tuple[float, str, float, str]], *, mode: str,
                 nodata: float | None, vmin: float, vmax: float) -> None:
    """items: (value, colour, alpha 0..1, label); mode "INTERPOLATED" or "DISCRETE"."""
    pipe, rr = _raster_pipe(root, nodata)
    rr.set("type", "singlebandpseudocolor")
    rr.set("classificationMin", _num(vmin))
    rr.set("classificationMax", _num(vmax))
    mmo = ET.SubElement(rr, "minMaxOrigin")
    ET.SubElement(mmo, "limits").text = "None"
    ET.SubElement(mmo, "extent").text = "WholeRaster"
    ET.SubElement(mmo, "statAccuracy").text = "Estimated"
    shader = ET.SubElement(rr, "rastershader")
    crs = ET.SubElement(shader, "colorrampshader", {
        "colorRampType": mode, "classificationMode": "1", "clip": "0",
        "minimumValue": _num(vmin), "maximumValue": _num(vmax), "labelPrecision": "0",
    })
    for value, color, alpha, label in items:
        ET.SubElement(crs, "item", {
            "value": _num(value), "color": check_hex_colors([color])[0],
            "alpha": str(round(255 * alpha)), "label": label,
        })
    _finish_pipe(root, pipe)


# ---------------------------------------------------------------------------
# Rasters
# ---------------------------------------------------------------------------


def raster_qml(
    levels_min: Sequence[float],
    colors_hex: Sequence[str],
    *,
    layer_name: str,
    title: str,
    nodata: float = -9999.0,
    color_map_type: str = "ramp",
    abstract: str | None = None,
) -> str:
    """QGIS style for a raster of minutes: single-band pseudocolour.

    Takes the inputs of :func:`ttmap.products.styles.raster_sld` and gives
    QGIS the same classes and colours.

    Parameters
    ----------
    levels_min : sequence of float, minutes
        Strictly increasing break values.
    colors_hex : sequence of str
        One ``"#rrggbb"`` colour per level, earliest first.
    layer_name, title : str
        Layer the style is for, and its title (written in the style's metadata).
    nodata : float
        The raster's nodata value, below the first level; transparent.
    color_map_type : {"ramp", "intervals"}
        ``"ramp"``: colours interpolated between the levels (QGIS
        ``INTERPOLATED``). ``"intervals"``: colour ``i`` for
        ``levels[i] <= t < levels[i + 1]``, the last colour from the last level
        on, transparent below the first level (QGIS ``DISCRETE``, whose
        classes close at their upper value: only values exactly on a level
        can differ from the SLD).
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document.

    Raises
    ------
    InputDataError
        As :func:`ttmap.products.styles.raster_sld`.

    Examples
    --------
    >>> text = raster_qml([0, 30, 60], ["#fde725", "#21918c", "#440154"],
    ...                   layer_name="arrival_front", title="Arrival")
    >>> 'colorRampType="INTERPOLATED"' in text and text.count("<item ") == 3
    True
    """
    _check_name("layer_name", layer_name)
    if color_map_type not in RASTER_COLOR_MAP_TYPES:
        raise InputDataError(
            f"colour map type {color_map_type!r} is unknown; choose one of "
            f"{', '.join(RASTER_COLOR_MAP_TYPES)}"
        )
    levels = [float(v) for v in levels_min]
    colors = check_hex_colors(list(colors_hex))
    _check_levels(levels, "levels_min")
    if len(colors) != len(levels):
        raise InputDataError(f"{len(levels)} levels but {len(colors)} colours; give one colour per level")
    if not math.isfinite(float(nodata)) or float(nodata) >= levels[0]:
        raise InputDataError(
            f"nodata {nodata!r} must be a finite value below the first level {levels[0]:g}; "
            "pass the raster's nodata value (e.g. -9999)"
        )
    root = _root(title=title, abstract=abstract)
    if color_map_type == "ramp":
        items = [(lv, c, 1.0, _label(lv)) for lv, c in zip(levels, colors, strict=True)]
        _pseudocolor(root, items, mode="INTERPOLATED", nodata=float(nodata),
                     vmin=levels[0], vmax=levels[-1])
    else:
        # DISCRETE: a value takes the first item whose value is >= it.
        items = [(levels[0], "#000000", 0.0, "no data")]
        uppers = [*levels[1:], math.inf]
        for i, (lv, up, c) in enumerate(zip(levels, uppers, colors, strict=True)):
            text = f"{_label(lv)} to {_label(up)}" if i < len(levels) - 1 else f"{_label(lv)} and later"
            items.append((up, c, 1.0, text))
        top = levels[-1] if len(levels) > 1 else levels[0] + 1.0
        _pseudocolor(root, items, mode="DISCRETE", nodata=float(nodata), vmin=levels[0], vmax=top)
    return _serialise(root)


def paletted_qml(
    values: Sequence[int],
    labels: Sequence[str],
    *,
    layer_name: str,
    title: str,
    colors_hex: Sequence[str] | None = None,
    nodata: float | None = -1,
    abstract: str | None = None,
) -> str:
    """QGIS style for an index raster: one colour and label per value (paletted).

    For ``site_centred_first_site.tif`` (value: site index, label: site name)
    and ``envelope_first_scenario.tif`` (value: scenario index, label:
    scenario name).

    Parameters
    ----------
    values : sequence of int
        Distinct cell values.
    labels : sequence of str
        Legend text of each value.
    layer_name, title : str
        Layer the style is for, and its title.
    colors_hex : sequence of str, optional
        One colour per value; by default the qualitative ``tab20`` colours, as
        the SLD of the site index uses.
    nodata : float or None
        Transparent value (-1 in ttmap's index rasters).
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document (renderer ``paletted``).

    Raises
    ------
    InputDataError
        No values, repeated values, lengths that differ, bad colours.
    """
    _check_name("layer_name", layer_name)
    vals = [int(v) for v in values]
    names = [str(s) for s in labels]
    if not vals:
        raise InputDataError("values is empty; give at least one index value")
    if len(set(vals)) != len(vals):
        raise InputDataError(f"values {vals} repeat; give each index once")
    if len(names) != len(vals):
        raise InputDataError(f"{len(vals)} values but {len(names)} labels; give one label per value")
    colors = (
        arrival_colors_hex(max(len(vals), 2), "tab20")[: len(vals)]
        if colors_hex is None else check_hex_colors(list(colors_hex))
    )
    if len(colors) != len(vals):
        raise InputDataError(f"{len(vals)} values but {len(colors)} colours; give one colour per value")
    root = _root(title=title, abstract=abstract)
    pipe, rr = _raster_pipe(root, nodata)
    rr.set("type", "paletted")
    palette = ET.SubElement(rr, "colorPalette")
    for v, c, name in zip(vals, colors, names, strict=True):
        ET.SubElement(palette, "paletteEntry", {"value": str(v), "color": c, "alpha": "255", "label": name})
    _finish_pipe(root, pipe)
    return _serialise(root)


def difference_qml(
    limit_min: float,
    *,
    name_a: str,
    name_b: str,
    layer_name: str,
    title: str,
    n_colors: int = 9,
    cmap: str = DIVERGING_CMAP,
    nodata: float = -9999.0,
    abstract: str | None = None,
) -> str:
    """QGIS style for ``a - b`` in minutes: a diverging ramp centred on zero.

    Parameters
    ----------
    limit_min : float
        Half-width of the ramp, minutes (> 0): colours run from
        ``-limit_min`` (a earlier) through zero (white-ish, same time) to
        ``+limit_min`` (b earlier); larger differences take the end colours.
        A round figure near the largest absolute difference is a good choice.
    name_a, name_b : str
        Scenario names, for the legend.
    layer_name, title : str
        Layer the style is for, and its title.
    n_colors : int
        Odd number of colour stops (>= 3), so that zero gets the middle one.
    cmap : str
        A diverging matplotlib colormap.
    nodata : float
        The raster's nodata value (transparent).
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document (single-band pseudocolour, interpolated, symmetric
        about zero).

    Raises
    ------
    InputDataError
        ``limit_min`` not finite and positive, ``n_colors`` even or < 3.

    Examples
    --------
    >>> text = difference_qml(20, name_a="north", name_b="south",
    ...                       layer_name="difference_north_minus_south", title="Difference")
    >>> 'value="0"' in text and 'value="-20"' in text and 'value="20"' in text
    True
    """
    _check_name("layer_name", layer_name)
    lim = float(limit_min)
    if not (math.isfinite(lim) and lim > 0.0):
        raise InputDataError(f"limit_min {limit_min!r} must be a finite number of minutes > 0")
    if isinstance(n_colors, bool) or int(n_colors) != n_colors or n_colors < 3 or n_colors % 2 == 0:
        raise InputDataError(f"n_colors {n_colors!r} must be an odd whole number >= 3 (zero in the middle)")
    if not math.isfinite(float(nodata)) or -lim <= float(nodata) <= lim:
        raise InputDataError(f"nodata {nodata!r} lies inside the ramp -{lim:g}..{lim:g}; pass e.g. -9999")
    colors = arrival_colors_hex(int(n_colors), cmap)
    half = int(n_colors) // 2
    items = []
    for i, c in enumerate(colors):
        v = lim * (i - half) / half
        if v < 0:
            label = f"{name_a} earlier by {abs(v):g} min"
        elif v > 0:
            label = f"{name_b} earlier by {v:g} min"
        else:
            label = "same time"
        items.append((v, c, 1.0, label))
    root = _root(title=title, abstract=abstract)
    _pseudocolor(root, items, mode="INTERPOLATED", nodata=float(nodata), vmin=-lim, vmax=lim)
    return _serialise(root)


# ---------------------------------------------------------------------------
# Vectors
# ---------------------------------------------------------------------------


def lines_qml(
    *,
    title: str,
    label_attribute: str = "label",
    line_color_hex: str = _LINE_COLOR,
    line_width_mm: float = 0.3,
    font_size_pt: float = 8.0,
    abstract: str | None = None,
) -> str:
    """QGIS style for isochrone lines: thin dark lines labelled along the line.

    Parameters
    ----------
    title : str
        Style title.
    label_attribute : str
        Field holding the label text (``"label"``, e.g. ``"1:30"``).
    line_color_hex : str
        Line and text colour.
    line_width_mm, font_size_pt : float
        Line width (millimetres) and label size (points), > 0.
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document: a single-symbol renderer and simple labels.

    Raises
    ------
    InputDataError
        Empty names, a bad colour, non-positive sizes.
    """
    _check_name("label_attribute", label_attribute)
    (color,) = check_hex_colors([line_color_hex])
    if not (float(line_width_mm) > 0.0 and float(font_size_pt) > 0.0):
        raise InputDataError(
            f"line_width_mm {line_width_mm!r} and font_size_pt {font_size_pt!r} must be > 0"
        )
    root = _root(title=title, abstract=abstract, labels=True)
    rend = _renderer(root, "singleSymbol")
    _line_symbol(ET.SubElement(rend, "symbols"), "0", color, float(line_width_mm))
    _labeling(root, label_attribute, color=color, font_size_pt=float(font_size_pt), placement="line")
    return _serialise(root)


def bands_qml(
    bands: Sequence[tuple[float, float | None, str]],
    colors_hex: Sequence[str],
    *,
    title: str,
    attribute: str = "min_minutes",
    bound: str = "lower",
    fill_opacity: float = 0.75,
    abstract: str | None = None,
) -> str:
    """QGIS style for isochrone bands: graduated by the band's lower bound.

    Takes the inputs of :func:`ttmap.products.styles.bands_sld`.

    Parameters
    ----------
    bands : sequence of (min_minutes, max_minutes or None, label)
        One entry per band, earliest first.
    colors_hex : sequence of str
        One colour per band.
    title : str
        Style title.
    attribute : str
        Field holding each band's lower bound (``"min_minutes"``;
        ``"min_minute"`` in a Shapefile).
    bound : {"lower", "upper"}
        Which bound ``attribute`` holds. ``"upper"`` with ``attribute="minutes"``
        (the band's upper bound, a name that is the same in every format)
        gives one ``.qml`` that fits both a Shapefile and a GeoJSON file of the
        same base name, which QGIS would otherwise style from one file; every
        band then needs its upper bound.
    fill_opacity : float
        Between 0 and 1.
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document: a ``graduatedSymbol`` renderer, one range per band
        from its lower bound to just below the next band's lower bound, so a
        band's own ``min_minutes`` falls in its own range (QGIS ranges are
        closed at both ends and the first one that matches wins).

    Raises
    ------
    InputDataError
        As :func:`ttmap.products.styles.bands_sld`.
    """
    _check_name("attribute", attribute)
    if bound not in ("lower", "upper"):
        raise InputDataError(f"bound {bound!r} is unknown; choose 'lower' or 'upper'")
    rows = sorted(((float(lo), hi, str(lab)) for lo, hi, lab in bands), key=lambda r: r[0])
    colors = check_hex_colors(list(colors_hex))
    _check_classes(rows, colors, "band")
    if bound == "upper" and any(hi is None for _, hi, _ in rows):
        raise InputDataError("a band has no upper bound; give every band's max_minutes or use bound='lower'")
    if not 0.0 <= float(fill_opacity) <= 1.0:
        raise InputDataError(f"fill_opacity {fill_opacity!r} is outside 0..1")
    root = _root(title=title, abstract=abstract)
    rend = _renderer(root, "graduatedSymbol", attr=attribute, graduatedMethod="GraduatedColor")
    ranges = ET.SubElement(rend, "ranges")
    symbols = ET.SubElement(rend, "symbols")
    for i, ((lo, hi, label), color) in enumerate(zip(rows, colors, strict=True)):
        if bound == "upper":
            # the value is the band's upper bound: (lo, hi] holds it and the range
            # before (ending at lo < hi) does not
            upper = float(hi)  # type: ignore[arg-type]
        elif i + 1 < len(rows):
            nxt = rows[i + 1][0]
            upper = nxt - _RANGE_GAP * (nxt - lo)
        else:
            upper = float(hi) if hi is not None else max(_OPEN_END_MIN, 2.0 * lo + 1.0)
        ET.SubElement(ranges, "range", {
            "lower": repr(lo), "upper": repr(upper), "symbol": str(i), "label": label, "render": "true",
        })
        _fill_symbol(symbols, str(i), color, float(fill_opacity), _BAND_STROKE)
    return _serialise(root)


def coast_qml(
    classes: Sequence[tuple[float, float | None, str]],
    colors_hex: Sequence[str],
    *,
    title: str,
    attribute: str = "class_min",
    line_width_mm: float = 1.0,
    unreached_label: str | None = None,
    abstract: str | None = None,
) -> str:
    """QGIS style for the coastal arrival layer: one category per class.

    Takes the inputs of :func:`ttmap.products.coast.coast_sld`.

    Parameters
    ----------
    classes : sequence of (class_min, class_max or None, label)
        Earliest first (:func:`ttmap.products.coast.coast_classes`).
    colors_hex : sequence of str
        One colour per class.
    title : str
        Style title.
    attribute : str
        Field holding the class's lower bound (``class_min``).
    line_width_mm : float
        Line width in millimetres, > 0.
    unreached_label : str, optional
        Legend text of the unreached coast
        (:data:`ttmap.products.coast.UNREACHED_LABEL` by default).
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document: a ``categorizedSymbol`` renderer with one category
        per class value and an "all other values" category (the unreached
        coast, whose class is null) drawn as a grey dashed line.

    Raises
    ------
    InputDataError
        Lengths that differ, repeated or non-finite bounds, bad colours, a
        non-positive width.
    """
    _check_name("attribute", attribute)
    rows = [(float(lo), hi, str(lab)) for lo, hi, lab in classes]
    colors = check_hex_colors(list(colors_hex))
    _check_classes(rows, colors, "class")
    if not (math.isfinite(float(line_width_mm)) and float(line_width_mm) > 0.0):
        raise InputDataError(f"line_width_mm {line_width_mm!r} must be > 0")
    if unreached_label is None:
        from ttmap.products.coast import UNREACHED_LABEL

        unreached_label = UNREACHED_LABEL
    w = float(line_width_mm)
    root = _root(title=title, abstract=abstract)
    rend = _renderer(root, "categorizedSymbol", attr=attribute)
    cats = ET.SubElement(rend, "categories")
    symbols = ET.SubElement(rend, "symbols")
    for i, ((lo, _, label), color) in enumerate(zip(rows, colors, strict=True)):
        # QGIS matches a category by the text of the value: 5.0 reads "5".
        ET.SubElement(cats, "category", {"value": _num(lo), "symbol": str(i), "label": label, "render": "true"})
        _line_symbol(symbols, str(i), color, w)
    k = str(len(rows))
    ET.SubElement(cats, "category", {"value": "", "symbol": k, "label": unreached_label, "render": "true"})
    _line_symbol(symbols, k, _UNREACHED_COLOR, w * 0.6, dash_mm=(2.0 * w, 1.5 * w))
    return _serialise(root)


def site_status_colors(little_margin_min: float | None = None) -> dict[str, str]:
    """Colour of each time-budget status, as the timeline chart colours margins.

    Alert red for the wave before the message and a negative margin, dark
    ochre for a little margin, dark grey for a margin on paper, light grey
    where there is no distance or no arrival.

    Parameters
    ----------
    little_margin_min : float, optional
        The little-margin threshold (its status text carries it); the default
        threshold when None.

    Returns
    -------
    dict
        ``{status text: "#rrggbb"}`` in :data:`ttmap.products.budget.BUDGET_STATUSES` order.
    """
    from ttmap.defaults import LITTLE_MARGIN_MIN
    from ttmap.products import budget
    from ttmap.products.timeline import MARGIN_LEVEL_COLORS

    little = budget.little_margin_status(LITTLE_MARGIN_MIN if little_margin_min is None else little_margin_min)
    return {
        budget.STATUS_BEFORE_MESSAGE: MARGIN_LEVEL_COLORS["alert"],
        budget.STATUS_TOO_LITTLE: MARGIN_LEVEL_COLORS["alert"],
        little: MARGIN_LEVEL_COLORS["little"],
        budget.STATUS_ON_PAPER: MARGIN_LEVEL_COLORS["plain"],
        budget.STATUS_NO_DISTANCE: "#9a9a9a",
        budget.STATUS_NO_ARRIVAL: "#c8c8c8",
    }


def sites_qml(
    *,
    title: str,
    status_attribute: str = "budget_status",
    label_attribute: str = "name",
    status_colors: Mapping[str, str] | None = None,
    size_mm: float = 3.0,
    abstract: str | None = None,
) -> str:
    """QGIS style for the site table's points: coloured by time-budget status.

    Parameters
    ----------
    title : str
        Style title.
    status_attribute : str
        Field holding the status text (``budget_status``).
    label_attribute : str
        Field labelling each point (``name``).
    status_colors : mapping of str to str, optional
        ``{status: colour}``; :func:`site_status_colors` by default. Any other
        value is drawn in a neutral grey.
    size_mm : float
        Marker diameter, millimetres, > 0.
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document: ``categorizedSymbol`` on the status and labels
        with the site name.

    Raises
    ------
    InputDataError
        Empty names, bad colours, a non-positive size.
    """
    _check_name("status_attribute", status_attribute)
    _check_name("label_attribute", label_attribute)
    if not (math.isfinite(float(size_mm)) and float(size_mm) > 0.0):
        raise InputDataError(f"size_mm {size_mm!r} must be > 0")
    colors = dict(site_status_colors() if status_colors is None else status_colors)
    check_hex_colors(list(colors.values()))
    root = _root(title=title, abstract=abstract, labels=True)
    rend = _renderer(root, "categorizedSymbol", attr=status_attribute)
    cats = ET.SubElement(rend, "categories")
    symbols = ET.SubElement(rend, "symbols")
    for i, (status, color) in enumerate(colors.items()):
        ET.SubElement(cats, "category", {"value": status, "symbol": str(i), "label": status, "render": "true"})
        _marker_symbol(symbols, str(i), color, float(size_mm))
    k = str(len(colors))
    ET.SubElement(cats, "category", {"value": "", "symbol": k, "label": "other", "render": "true"})
    _marker_symbol(symbols, k, "#666666", float(size_mm))
    _labeling(root, label_attribute, color="#1a1a1a", font_size_pt=8.0, placement="point")
    return _serialise(root)


def wave_paths_qml(
    *,
    title: str,
    label_attribute: str | None = None,
    line_color_hex: str = _PATH_COLOR,
    line_width_mm: float = 0.5,
    abstract: str | None = None,
) -> str:
    """QGIS style for wave-path lines (source to site): one solid line symbol.

    Parameters
    ----------
    title : str
        Style title.
    label_attribute : str, optional
        Field to label each path with (e.g. the site name); no labels if None.
    line_color_hex : str
        Line colour (a dark magenta that stands out from the arrival ramp).
    line_width_mm : float
        Line width, millimetres, > 0.
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document: a ``singleSymbol`` renderer.
    """
    (color,) = check_hex_colors([line_color_hex])
    if not (math.isfinite(float(line_width_mm)) and float(line_width_mm) > 0.0):
        raise InputDataError(f"line_width_mm {line_width_mm!r} must be > 0")
    root = _root(title=title, abstract=abstract, labels=label_attribute is not None)
    rend = _renderer(root, "singleSymbol")
    _line_symbol(ET.SubElement(rend, "symbols"), "0", color, float(line_width_mm))
    if label_attribute is not None:
        _check_name("label_attribute", label_attribute)
        _labeling(root, label_attribute, color=color, font_size_pt=7.0, placement="line")
    return _serialise(root)


def classed_raster_qml(
    uppers: Sequence[float],
    colors_hex: Sequence[str],
    labels: Sequence[str],
    *,
    layer_name: str,
    title: str,
    nodata: float | None = -9999.0,
    abstract: str | None = None,
) -> str:
    """QGIS style for a classed raster with its own legend text: class ``i`` holds ``(upper[i-1], upper[i]]``.

    Parameters
    ----------
    uppers : sequence of float
        Upper bound of each class, strictly increasing; the last may be
        ``inf`` (an open class). The first class takes every value up to
        its bound (QGIS ``DISCRETE``: a value takes the first class whose
        bound is >= it, so a value equal to a bound falls in the class below).
    colors_hex : sequence of str
        One colour per class.
    labels : sequence of str
        One legend text per class.
    layer_name, title : str
        Layer the style is for, and its title.
    nodata : float or None
        The raster's nodata value (transparent), or None.
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document (single-band pseudocolour, ``DISCRETE``).

    Raises
    ------
    InputDataError
        Empty or unsorted bounds, lengths that differ, bad colours, a nodata
        value inside the classes.

    Examples
    --------
    >>> text = classed_raster_qml([1.0, 5.0, math.inf], ["#000000", "#808080", "#ffffff"],
    ...                           ["low", "middle", "high"], layer_name="x", title="X")
    >>> qml_renderer_summary(text)["classes"], 'colorRampType="DISCRETE"' in text
    (3, True)
    """
    _check_name("layer_name", layer_name)
    ups = [float(v) for v in uppers]
    colors = check_hex_colors(list(colors_hex))
    names = [str(t) for t in labels]
    if not ups:
        raise InputDataError("uppers is empty; give at least one class")
    finite = ups[:-1] if math.isinf(ups[-1]) and ups[-1] > 0 else ups
    if finite:
        _check_levels(finite, "uppers")
    if len(ups) != len(colors) or len(ups) != len(names):
        raise InputDataError(
            f"{len(ups)} classes, {len(colors)} colours and {len(names)} labels; give one of each per class"
        )
    if nodata is not None and (not math.isfinite(float(nodata)) or (finite and float(nodata) >= finite[0])):
        raise InputDataError(f"nodata {nodata!r} must be a finite value below the first class bound")
    root = _root(title=title, abstract=abstract)
    items = [(u, c, 1.0, t) for u, c, t in zip(ups, colors, names, strict=True)]
    low = finite[0] if finite else 0.0
    _pseudocolor(root, items, mode="DISCRETE", nodata=None if nodata is None else float(nodata),
                 vmin=low, vmax=finite[-1] if len(finite) > 1 else low + 1.0)
    return _serialise(root)


def single_fill_qml(
    *,
    title: str,
    fill_hex: str,
    fill_opacity: float,
    stroke_hex: str,
    stroke_width_mm: float,
    abstract: str | None = None,
) -> str:
    """QGIS style for polygons: one fill and one outline for every feature.

    Parameters
    ----------
    title : str
        Style title.
    fill_hex : str
        Fill colour ``"#rrggbb"``.
    fill_opacity : float
        Between 0 and 1.
    stroke_hex : str
        Outline colour.
    stroke_width_mm : float
        Outline width, millimetres, > 0.
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document: a ``singleSymbol`` renderer with a ``SimpleFill``.

    Examples
    --------
    >>> text = single_fill_qml(title="t", fill_hex="#00a0ff", fill_opacity=0.25,
    ...                        stroke_hex="#0060a0", stroke_width_mm=0.42)
    >>> qml_renderer_summary(text)["renderer"], '"0,160,255,64"' in text
    ('singleSymbol', True)
    """
    if not 0.0 <= float(fill_opacity) <= 1.0:
        raise InputDataError(f"fill_opacity {fill_opacity!r} is outside 0..1")
    if not (math.isfinite(float(stroke_width_mm)) and float(stroke_width_mm) > 0.0):
        raise InputDataError(f"stroke_width_mm {stroke_width_mm!r} must be > 0")
    root = _root(title=title, abstract=abstract)
    rend = _renderer(root, "singleSymbol")
    symbols = ET.SubElement(rend, "symbols")
    sym = ET.SubElement(
        symbols, "symbol",
        {"type": "fill", "name": "0", "alpha": "1", "clip_to_extent": "1", "force_rhr": "0"},
    )
    _symbol_layer(sym, "SimpleFill", {
        "color": _rgba(fill_hex, float(fill_opacity)),
        "style": "solid",
        "outline_color": _rgba(stroke_hex),
        "outline_style": "solid",
        "outline_width": _num(float(stroke_width_mm)),
        "outline_width_unit": "MM",
        "joinstyle": "round",
    })
    return _serialise(root)


def graduated_points_qml(
    ranges: Sequence[tuple[float, float, str]],
    colors_hex: Sequence[str],
    *,
    title: str,
    attribute: str,
    label_attribute: str | None = None,
    size_mm: float = 3.0,
    abstract: str | None = None,
) -> str:
    """QGIS style for points graduated on a numeric field, optionally labelled.

    Parameters
    ----------
    ranges : sequence of (lower, upper, label)
        Ascending, non-overlapping ranges (QGIS ranges are closed at both
        ends and the first that matches wins); ``-inf`` / ``inf`` ends are
        written as very large numbers.
    colors_hex : sequence of str
        One colour per range.
    title : str
        Style title.
    attribute : str
        Numeric field to classify.
    label_attribute : str, optional
        Field labelling each point; no labels if None.
    size_mm : float
        Marker diameter, millimetres, > 0.
    abstract : str, optional
        Abstract in the style's metadata; the short caution by default.

    Returns
    -------
    str
        The QML document: a ``graduatedSymbol`` renderer of circle markers.
    """
    _check_name("attribute", attribute)
    rows = [(float(lo), float(hi), str(t)) for lo, hi, t in ranges]
    colors = check_hex_colors(list(colors_hex))
    if not rows or len(rows) != len(colors):
        raise InputDataError(f"{len(rows)} ranges but {len(colors)} colours; give one colour per range")
    if any(not hi > lo for lo, hi, _ in rows) or any(b[0] < a[1] for a, b in itertools.pairwise(rows)):
        raise InputDataError(f"ranges {[(lo, hi) for lo, hi, _ in rows]} must ascend without overlap")
    if not (math.isfinite(float(size_mm)) and float(size_mm) > 0.0):
        raise InputDataError(f"size_mm {size_mm!r} must be > 0")

    def bound(v: float) -> str:
        return repr(math.copysign(_OPEN_END_MIN, v)) if math.isinf(v) else repr(v)

    root = _root(title=title, abstract=abstract, labels=label_attribute is not None)
    rend = _renderer(root, "graduatedSymbol", attr=attribute, graduatedMethod="GraduatedColor")
    rng = ET.SubElement(rend, "ranges")
    symbols = ET.SubElement(rend, "symbols")
    for i, ((lo, hi, label), color) in enumerate(zip(rows, colors, strict=True)):
        ET.SubElement(rng, "range", {"lower": bound(lo), "upper": bound(hi), "symbol": str(i), "label": label,
                                     "render": "true"})
        _marker_symbol(symbols, str(i), color, float(size_mm))
    if label_attribute is not None:
        _check_name("label_attribute", label_attribute)
        _labeling(root, label_attribute, color="#1a1a1a", font_size_pt=8.0, placement="point")
    return _serialise(root)


def qml_renderer_summary(qml_text: str) -> dict[str, object]:
    """What a QML document asks for: renderer type, class count, label field.

    A reader for tests and checks; it parses the XML only.

    Returns
    -------
    dict
        ``{"renderer": str, "classes": int, "label_field": str or None}``;
        classes counts raster items or palette entries, vector ranges or
        categories (1 for a single symbol).

    Raises
    ------
    InputDataError
        The text is not a QML document.

    Examples
    --------
    >>> qml_renderer_summary(lines_qml(title="t"))
    {'renderer': 'singleSymbol', 'classes': 1, 'label_field': 'label'}
    """
    try:
        root = ET.fromstring(qml_text.split("\n", 1)[1] if qml_text.startswith("<!DOCTYPE") else qml_text)
    except ET.ParseError as err:
        raise InputDataError(f"style text is not well-formed XML: {err}") from err
    if root.tag != "qgis":
        raise InputDataError(f"root element {root.tag!r} is not 'qgis'; not a QML document")
    label = root.find("labeling/settings/text-style")
    label_field = label.get("fieldName") if label is not None else None
    rr = root.find("pipe/rasterrenderer")
    if rr is not None:
        n = len(rr.findall(".//item")) + len(rr.findall(".//paletteEntry"))
        return {"renderer": rr.get("type", ""), "classes": n, "label_field": label_field}
    rend = root.find("renderer-v2")
    if rend is None:
        raise InputDataError("the document has no renderer")
    kind = rend.get("type", "")
    n = 1 if kind == "singleSymbol" else len(rend.findall("ranges/range")) + len(rend.findall("categories/category"))
    return {"renderer": kind, "classes": n, "label_field": label_field}
