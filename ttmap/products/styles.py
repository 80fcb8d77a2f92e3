"""Layer styles as OGC Styled Layer Descriptor (SLD 1.0.0) XML.

Three styles go beside the products:

- :func:`raster_sld` - the arrival-time raster: a colour map over minutes,
  nodata transparent.
- :func:`bands_sld` - isochrone bands: one rule per band, selected by the
  band's lower bound in minutes, filled with the shared arrival ramp.
- :func:`lines_sld` - isochrone lines: a thin dark line labelled with the
  time along the line.

The XML is built with :mod:`xml.etree.ElementTree`; the module returns text
and writes no file (:func:`ttmap.io.styles.write_sld` writes it). Colours come
from :mod:`ttmap.products.palette`, the ramp the maps use too.

Notes
-----
Element order follows the SLD 1.0.0 schema. ``ColorMap type="intervals"``
is the widely supported extension for classed rasters (SLD 1.0.0 itself only
defines interpolated colour maps); the default ``"ramp"`` writes no ``type``
attribute, which is plain SLD 1.0.0.
"""

from __future__ import annotations

import itertools
import math
import xml.etree.ElementTree as ET
from collections.abc import Sequence

from ttmap.errors import InputDataError
from ttmap.products.palette import check_hex_colors

__all__ = [
    "SLD_NAMESPACE",
    "OGC_NAMESPACE",
    "COLOR_MAP_TYPES",
    "raster_sld",
    "class_raster_sld",
    "categorical_raster_sld",
    "bands_sld",
    "lines_sld",
    "sld_document",
    "sld_element",
    "sld_css",
    "sld_number",
    "sld_serialise",
    "default_abstract",
]

SLD_NAMESPACE = "http://www.opengis.net/sld"
OGC_NAMESPACE = "http://www.opengis.net/ogc"
_XLINK = "http://www.w3.org/1999/xlink"
_XSI = "http://www.w3.org/2001/XMLSchema-instance"
_SCHEMA = "http://schemas.opengis.net/sld/1.0.0/StyledLayerDescriptor.xsd"

#: Colour map kinds accepted by :func:`raster_sld`.
COLOR_MAP_TYPES: tuple[str, ...] = ("ramp", "intervals")

#: Upper bound written for the last, open-ended raster interval (minutes).
_OPEN_END_MIN = 1.0e9

_LINE_COLOR = "#1a1a1a"
_BAND_STROKE = "#404040"
_HALO_COLOR = "#ffffff"


def sld_number(value: float) -> str:
    """Shortest plain text for a number: ``10`` for 10.0, ``7.5`` for 7.5."""
    v = float(value)
    if v.is_integer() and abs(v) < 1e15:
        return str(int(v))
    return repr(v)


def _label(minutes: float) -> str:
    from ttmap.products.isochrones import format_minutes_label

    return format_minutes_label(minutes)


def sld_element(parent: ET.Element, tag: str, text: str | None = None, **attrib: str) -> ET.Element:
    """A child element ``tag`` of ``parent`` with optional text and attributes."""
    el = ET.SubElement(parent, tag, attrib)
    if text is not None:
        el.text = text
    return el


def sld_css(parent: ET.Element, name: str, value: str) -> None:
    """A ``CssParameter`` child (``fill``, ``stroke``, ...) of a symbolizer element."""
    sld_element(parent, "CssParameter", value, name=name)


def _check_name(what: str, value: str) -> str:
    if not isinstance(value, str) or not value.strip():
        raise InputDataError(f"{what} {value!r} is empty; give a name")
    return value


def sld_document(layer_name: str, title: str, abstract: str | None) -> tuple[ET.Element, ET.Element]:
    """Root element and the FeatureTypeStyle to fill with rules."""
    _check_name("layer_name", layer_name)
    root = ET.Element(
        "StyledLayerDescriptor",
        {
            "version": "1.0.0",
            "xmlns": SLD_NAMESPACE,
            "xmlns:ogc": OGC_NAMESPACE,
            "xmlns:xlink": _XLINK,
            "xmlns:xsi": _XSI,
            "xsi:schemaLocation": f"{SLD_NAMESPACE} {_SCHEMA}",
        },
    )
    layer = sld_element(root, "NamedLayer")
    sld_element(layer, "Name", layer_name)
    style = sld_element(layer, "UserStyle")
    sld_element(style, "Name", layer_name)
    sld_element(style, "Title", title)
    if abstract:
        sld_element(style, "Abstract", abstract)
    fts = sld_element(style, "FeatureTypeStyle")
    return root, fts


def sld_serialise(root: ET.Element) -> str:
    """The SLD document as indented UTF-8 XML text with its declaration."""
    ET.indent(root, space="  ")
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def default_abstract() -> str:
    """The abstract every style carries unless given one: the short caution."""
    from ttmap.products.cautions import CAUTION_SHORT

    return CAUTION_SHORT


def raster_sld(
    levels_min: Sequence[float],
    colors_hex: Sequence[str],
    *,
    layer_name: str,
    title: str,
    nodata: float = -9999.0,
    color_map_type: str = "ramp",
    abstract: str | None = None,
) -> str:
    """SLD for an arrival-time raster in minutes.

    Parameters
    ----------
    levels_min : sequence of float, minutes
        Strictly increasing break values, e.g. ``[0, 10, 20, ..., 120]``.
    colors_hex : sequence of str
        One ``"#rrggbb"`` colour per level, earliest first
        (:func:`ttmap.products.palette.arrival_colors_hex`).
    layer_name, title : str
        Layer name the style is for, and its human-readable title.
    nodata : float
        The raster's nodata value; shown transparent.
    color_map_type : {"ramp", "intervals"}
        ``"ramp"``: colours interpolated between levels, one entry per level
        labelled ``h:mm``. ``"intervals"``: colour ``i`` fills
        ``levels[i] <= t < levels[i + 1]`` and the last colour every time from
        the last level on; labels ``"0:10 to 0:20"``, ``"2:00 and later"``.
    abstract : str, optional
        Style abstract; the short caution text by default.

    Returns
    -------
    str
        The SLD document (UTF-8 XML declaration included).

    Raises
    ------
    InputDataError
        Unknown colour map type, lengths that differ, levels not finite and
        strictly increasing, a nodata value inside the levels, bad colours.

    Notes
    -----
    The first ``ColorMapEntry`` makes values below the first level (the
    nodata value among them) fully transparent, so ``ramp`` maps have
    ``n + 1`` entries and ``intervals`` maps have ``n + 1`` as well (the
    transparent entry, then one per colour).
    """
    if color_map_type not in COLOR_MAP_TYPES:
        raise InputDataError(
            f"colour map type {color_map_type!r} is unknown; choose one of "
            f"{', '.join(COLOR_MAP_TYPES)}"
        )
    levels = [float(v) for v in levels_min]
    colors = check_hex_colors(list(colors_hex))
    if not levels:
        raise InputDataError("levels_min is empty; give at least one level in minutes")
    if len(colors) != len(levels):
        raise InputDataError(
            f"{len(levels)} levels but {len(colors)} colours; give one colour per level"
        )
    if not all(math.isfinite(v) for v in levels) or any(
        b <= a for a, b in itertools.pairwise(levels)
    ):
        raise InputDataError(f"levels_min {levels} must be finite and strictly increasing")
    if not math.isfinite(float(nodata)) or float(nodata) >= levels[0]:
        raise InputDataError(
            f"nodata {nodata!r} must be a finite value below the first level {levels[0]:g}; "
            "pass the raster's nodata value (e.g. -9999)"
        )

    root, fts = sld_document(layer_name, title, default_abstract() if abstract is None else abstract)
    rule = sld_element(fts, "Rule")
    sld_element(rule, "Name", "arrival_minutes")
    sld_element(rule, "Title", title)
    symbolizer = sld_element(rule, "RasterSymbolizer")
    sld_element(symbolizer, "Opacity", "1.0")
    cmap = sld_element(symbolizer, "ColorMap")
    if color_map_type == "ramp":
        sld_element(
            cmap,
            "ColorMapEntry",
            color="#000000",
            quantity=sld_number(nodata),
            opacity="0",
            label="no data",
        )
        for level, color in zip(levels, colors, strict=True):
            sld_element(
                cmap,
                "ColorMapEntry",
                color=color,
                quantity=sld_number(level),
                opacity="1",
                label=_label(level),
            )
    else:
        cmap.set("type", "intervals")
        sld_element(
            cmap,
            "ColorMapEntry",
            color="#000000",
            quantity=sld_number(levels[0]),
            opacity="0",
            label="no data",
        )
        uppers = levels[1:] + [max(_OPEN_END_MIN, levels[-1] * 2.0 + 1.0)]
        for i, (level, upper, color) in enumerate(zip(levels, uppers, colors, strict=True)):
            text = (
                f"{_label(level)} to {_label(upper)}"
                if i < len(levels) - 1
                else f"{_label(level)} and later"
            )
            sld_element(cmap, "ColorMapEntry", color=color, quantity=sld_number(upper), opacity="1", label=text)
    return sld_serialise(root)


def _minutes_text(value: float) -> str:
    return f"{value:+g}" if value != 0 else "0"


def class_raster_sld(
    edges: Sequence[float],
    colors_hex: Sequence[str],
    *,
    layer_name: str,
    title: str,
    nodata: float = -9999.0,
    unit: str = "min",
    abstract: str | None = None,
) -> str:
    """SLD for a raster in classes that may go below zero (minutes left, differences).

    Parameters
    ----------
    edges : sequence of float
        Strictly increasing class edges; class ``k`` is
        ``edges[k] <= v < edges[k + 1]`` and takes ``colors_hex[k]``.
        Values from the last edge on keep the last colour; values below the
        first edge (the nodata value among them) are transparent.
    colors_hex : sequence of str
        ``len(edges) - 1`` colours, ``"#rrggbb"``.
    layer_name, title : str
        Layer name and human-readable title.
    nodata : float
        Nodata value of the raster; must lie below the first edge.
    unit : str
        Unit written in the class labels, e.g. ``"-10 to 0 min"``.
    abstract : str, optional
        Style abstract; the short caution text by default.

    Raises
    ------
    InputDataError
        Edges not increasing, a colour count that does not match, bad colours,
        or nodata not below the first edge.

    Examples
    --------
    >>> xml = class_raster_sld([-10, 0, 10], ["#b2182b", "#2166ac"], layer_name="x", title="x")
    >>> 'label="-10 to 0 min"' in xml and 'label="+10 min and more"' not in xml
    True
    """
    lv = [float(v) for v in edges]
    colors = check_hex_colors(list(colors_hex))
    if len(lv) < 2 or not all(math.isfinite(v) for v in lv) or any(
        b <= a for a, b in itertools.pairwise(lv)
    ):
        raise InputDataError(f"class edges {lv} must be two or more finite increasing values")
    if len(colors) != len(lv) - 1:
        raise InputDataError(
            f"{len(lv) - 1} classes but {len(colors)} colours; give one colour per class"
        )
    if not math.isfinite(float(nodata)) or float(nodata) >= lv[0]:
        raise InputDataError(
            f"nodata {nodata!r} must be a finite value below the first edge {lv[0]:g}"
        )
    root, fts = sld_document(layer_name, title, default_abstract() if abstract is None else abstract)
    rule = sld_element(fts, "Rule")
    sld_element(rule, "Name", "classes")
    sld_element(rule, "Title", title)
    symbolizer = sld_element(rule, "RasterSymbolizer")
    sld_element(symbolizer, "Opacity", "1.0")
    cmap = sld_element(symbolizer, "ColorMap", type="intervals")
    sld_element(cmap, "ColorMapEntry", color="#000000", quantity=sld_number(lv[0]), opacity="0",
                label="no data")
    open_end = lv[-1] + max(_OPEN_END_MIN, abs(lv[-1]) * 2.0 + 1.0)
    for k, color in enumerate(colors):
        last = k == len(colors) - 1
        upper = open_end if last else lv[k + 1]
        text = (f"{_minutes_text(lv[k])} {unit} and more" if last
                else f"{_minutes_text(lv[k])} to {_minutes_text(lv[k + 1])} {unit}")
        sld_element(cmap, "ColorMapEntry", color=color, quantity=sld_number(upper), opacity="1",
                    label=text)
    return sld_serialise(root)


def categorical_raster_sld(
    values: Sequence[int],
    colors_hex: Sequence[str],
    labels: Sequence[str],
    *,
    layer_name: str,
    title: str,
    nodata: int = -1,
    abstract: str | None = None,
) -> str:
    """SLD for a raster of category codes: one colour and label per code, nodata transparent.

    Examples
    --------
    >>> xml = categorical_raster_sld([0, 1], ["#1f77b4", "#ff7f0e"], ["a", "b"],
    ...                              layer_name="x", title="x")
    >>> xml.count("ColorMapEntry")
    3
    """
    codes = [int(v) for v in values]
    colors = check_hex_colors(list(colors_hex))
    if not (len(codes) == len(colors) == len(labels)) or not codes:
        raise InputDataError(
            f"{len(codes)} codes, {len(colors)} colours and {len(labels)} labels; give one "
            "colour and one label per code"
        )
    if len(set(codes)) != len(codes) or int(nodata) in codes:
        raise InputDataError(f"codes {codes} must be unique and differ from nodata {nodata}")
    root, fts = sld_document(layer_name, title, default_abstract() if abstract is None else abstract)
    rule = sld_element(fts, "Rule")
    sld_element(rule, "Name", "categories")
    sld_element(rule, "Title", title)
    symbolizer = sld_element(rule, "RasterSymbolizer")
    sld_element(symbolizer, "Opacity", "1.0")
    cmap = sld_element(symbolizer, "ColorMap", type="values")
    sld_element(cmap, "ColorMapEntry", color="#000000", quantity=str(int(nodata)), opacity="0",
                label="no data")
    for code, color, label in zip(codes, colors, labels, strict=True):
        sld_element(cmap, "ColorMapEntry", color=color, quantity=str(code), opacity="1",
                    label=str(label))
    return sld_serialise(root)


def bands_sld(
    bands: Sequence[tuple[float, float | None, str]],
    colors_hex: Sequence[str],
    *,
    layer_name: str,
    title: str,
    attribute: str = "min_minutes",
    fill_opacity: float = 0.75,
    abstract: str | None = None,
) -> str:
    """SLD for isochrone bands: one filled rule per band.

    Parameters
    ----------
    bands : sequence of (min_minutes, max_minutes, label)
        One entry per band, earliest first. ``max_minutes`` may be None for
        an open last band. ``label`` is the legend text.
    colors_hex : sequence of str
        One ``"#rrggbb"`` colour per band.
    layer_name, title : str
        Layer the style is for, and its title.
    attribute : str
        Feature attribute holding each band's lower bound in minutes;
        ``"min_minutes"`` (``"min_minute"`` for an ESRI Shapefile, see
        :func:`ttmap.io.vector.shapefile_field_name`).
    fill_opacity : float
        Between 0 and 1.
    abstract : str, optional
        Style abstract; the short caution text by default.

    Returns
    -------
    str
        The SLD document.

    Raises
    ------
    InputDataError
        Lengths that differ, non-finite or repeated lower bounds, an upper
        bound not above its lower bound, bad colours or opacity.

    Notes
    -----
    Each rule's filter is ``attribute == min_minutes`` (``PropertyIsEqualTo``),
    written as a plain number (``10``, ``7.5``) so both integer and real
    columns match.
    """
    colors = check_hex_colors(list(colors_hex))
    rows = list(bands)
    if len(rows) != len(colors):
        raise InputDataError(f"{len(rows)} bands but {len(colors)} colours; give one per band")
    _check_name("attribute", attribute)
    if not 0.0 <= float(fill_opacity) <= 1.0:
        raise InputDataError(f"fill_opacity {fill_opacity!r} is outside 0..1")
    seen: set[float] = set()
    for lo, hi, _ in rows:
        if not math.isfinite(float(lo)) or float(lo) in seen:
            raise InputDataError(
                f"band lower bound {lo!r} is not finite or is repeated; give distinct minutes"
            )
        seen.add(float(lo))
        if hi is not None and not float(hi) > float(lo):
            raise InputDataError(f"band ({lo!r}, {hi!r}) has its upper bound not above its lower")

    root, fts = sld_document(layer_name, title, default_abstract() if abstract is None else abstract)
    for (lo, _, label), color in zip(rows, colors, strict=True):
        rule = sld_element(fts, "Rule")
        sld_element(rule, "Name", f"band_{sld_number(lo)}")
        sld_element(rule, "Title", str(label))
        flt = sld_element(rule, "ogc:Filter")
        eq = sld_element(flt, "ogc:PropertyIsEqualTo")
        sld_element(eq, "ogc:PropertyName", attribute)
        sld_element(eq, "ogc:Literal", sld_number(lo))
        sym = sld_element(rule, "PolygonSymbolizer")
        fill = sld_element(sym, "Fill")
        sld_css(fill, "fill", color)
        sld_css(fill, "fill-opacity", sld_number(fill_opacity))
        stroke = sld_element(sym, "Stroke")
        sld_css(stroke, "stroke", _BAND_STROKE)
        sld_css(stroke, "stroke-width", "0.3")
    return sld_serialise(root)


def lines_sld(
    *,
    layer_name: str,
    title: str,
    label_attribute: str = "label",
    line_color_hex: str = _LINE_COLOR,
    line_width: float = 0.8,
    font_size: float = 10.0,
    abstract: str | None = None,
) -> str:
    """SLD for isochrone lines: thin dark lines labelled along the line.

    Parameters
    ----------
    layer_name, title : str
        Layer the style is for, and its title.
    label_attribute : str
        Feature attribute holding the label text (e.g. ``"1:30"``).
    line_color_hex : str
        Line and text colour.
    line_width : float
        Line width in pixels, > 0.
    font_size : float
        Label size in pixels, > 0.
    abstract : str, optional
        Style abstract; the short caution text by default.

    Returns
    -------
    str
        The SLD document: one rule with a ``LineSymbolizer`` and a
        ``TextSymbolizer`` using ``LinePlacement`` and a white halo.

    Raises
    ------
    InputDataError
        Empty names, a bad colour, or non-positive sizes.
    """
    (color,) = check_hex_colors([line_color_hex])
    _check_name("label_attribute", label_attribute)
    if not (float(line_width) > 0.0 and float(font_size) > 0.0):
        raise InputDataError(
            f"line_width {line_width!r} and font_size {font_size!r} must be > 0 pixels"
        )
    root, fts = sld_document(layer_name, title, default_abstract() if abstract is None else abstract)
    rule = sld_element(fts, "Rule")
    sld_element(rule, "Name", "isochrone")
    sld_element(rule, "Title", title)
    line = sld_element(rule, "LineSymbolizer")
    stroke = sld_element(line, "Stroke")
    sld_css(stroke, "stroke", color)
    sld_css(stroke, "stroke-width", sld_number(line_width))
    text = sld_element(rule, "TextSymbolizer")
    label = sld_element(text, "Label")
    sld_element(label, "ogc:PropertyName", label_attribute)
    font = sld_element(text, "Font")
    sld_css(font, "font-family", "sans-serif")
    sld_css(font, "font-size", sld_number(font_size))
    placement = sld_element(sld_element(text, "LabelPlacement"), "LinePlacement")
    sld_element(placement, "PerpendicularOffset", "0")
    halo = sld_element(text, "Halo")
    sld_element(halo, "Radius", "1")
    sld_css(sld_element(halo, "Fill"), "fill", _HALO_COLOR)
    sld_css(sld_element(text, "Fill"), "fill", color)
    return sld_serialise(root)
