"""Tests of ttmap.products.palette and ttmap.products.styles (SLD 1.0.0)."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from ttmap.errors import InputDataError, OutputExistsError
from ttmap.products.palette import ARRIVAL_CMAP, arrival_colors_hex, check_hex_colors
from ttmap.io.styles import write_sld
from ttmap.products.styles import bands_sld, lines_sld, raster_sld

SLD = "{http://www.opengis.net/sld}"
OGC = "{http://www.opengis.net/ogc}"
XSI = "{http://www.w3.org/2001/XMLSchema-instance}"


def parse(text: str) -> ET.Element:
    assert text.startswith('<?xml version="1.0" encoding="UTF-8"?>')
    root = ET.fromstring(text.encode("utf-8"))
    assert root.tag == SLD + "StyledLayerDescriptor"
    assert root.get("version") == "1.0.0"
    assert root.get(XSI + "schemaLocation", "").startswith("http://www.opengis.net/sld ")
    return root


def children(el: ET.Element) -> list[str]:
    return [c.tag.split("}")[1] for c in el]


# --------------------------------------------------------------- palette


def test_arrival_colors() -> None:
    colors = arrival_colors_hex(5)
    assert len(colors) == 5
    assert all(len(c) == 7 and c.startswith("#") and c == c.lower() for c in colors)
    # viridis_r: the earliest arrival gets viridis' bright yellow end.
    assert colors[0] == "#fde725" and colors[-1] == "#440154"
    assert ARRIVAL_CMAP == "viridis_r"
    assert arrival_colors_hex(1) == ["#fde725"]
    assert arrival_colors_hex(4, "viridis") == arrival_colors_hex(4)[::-1]


def test_palette_refusals() -> None:
    with pytest.raises(InputDataError, match="number of colours 0 is not a whole number"):
        arrival_colors_hex(0)
    with pytest.raises(InputDataError, match="colour map 'no_such_map' is unknown"):
        arrival_colors_hex(3, "no_such_map")
    with pytest.raises(InputDataError, match="colour 'red' is not of the form '#rrggbb'"):
        check_hex_colors(["#ff0000", "red"])


# --------------------------------------------------------------- raster


def test_raster_sld_ramp() -> None:
    levels = [0, 10, 30, 90, 125]
    colors = arrival_colors_hex(len(levels))
    root = parse(raster_sld(levels, colors, layer_name="arrival", title="First arrival"))
    assert root.findtext(f"{SLD}NamedLayer/{SLD}Name") == "arrival"
    style = root.find(f"{SLD}NamedLayer/{SLD}UserStyle")
    assert style is not None
    assert style.findtext(f"{SLD}Title") == "First arrival"
    assert "not a tsunami warning" in (style.findtext(f"{SLD}Abstract") or "")
    rules = root.findall(f".//{SLD}Rule")
    assert len(rules) == 1
    assert children(rules[0]) == ["Name", "Title", "RasterSymbolizer"]
    cmap = root.find(f".//{SLD}RasterSymbolizer/{SLD}ColorMap")
    assert cmap is not None and cmap.get("type") is None  # plain SLD 1.0.0 ramp
    entries = cmap.findall(f"{SLD}ColorMapEntry")
    assert len(entries) == len(levels) + 1
    assert [e.get("quantity") for e in entries] == ["-9999", "0", "10", "30", "90", "125"]
    assert [e.get("label") for e in entries] == ["no data", "0:00", "0:10", "0:30", "1:30", "2:05"]
    assert entries[0].get("opacity") == "0"
    assert all(e.get("opacity") == "1" for e in entries[1:])
    assert [e.get("color") for e in entries[1:]] == colors


def test_raster_sld_intervals() -> None:
    levels = [0, 10, 20]
    colors = ["#111111", "#222222", "#333333"]
    text = raster_sld(
        levels, colors, layer_name="arr", title="t", color_map_type="intervals", abstract="note"
    )
    root = parse(text)
    assert root.findtext(f".//{SLD}UserStyle/{SLD}Abstract") == "note"
    cmap = root.find(f".//{SLD}ColorMap")
    assert cmap is not None and cmap.get("type") == "intervals"
    entries = cmap.findall(f"{SLD}ColorMapEntry")
    assert [e.get("quantity") for e in entries] == ["0", "10", "20", "1000000000"]
    assert [e.get("color") for e in entries[1:]] == colors
    assert [e.get("label") for e in entries] == [
        "no data",
        "0:00 to 0:10",
        "0:10 to 0:20",
        "0:20 and later",
    ]
    assert entries[0].get("opacity") == "0"


def test_raster_sld_refusals() -> None:
    c3 = arrival_colors_hex(3)
    with pytest.raises(InputDataError, match="3 levels but 2 colours"):
        raster_sld([0, 10, 20], c3[:2], layer_name="a", title="t")
    with pytest.raises(InputDataError, match="must be finite and strictly increasing"):
        raster_sld([0, 20, 10], c3, layer_name="a", title="t")
    with pytest.raises(InputDataError, match="colour map type 'values' is unknown"):
        raster_sld([0, 10, 20], c3, layer_name="a", title="t", color_map_type="values")
    with pytest.raises(
        InputDataError, match="nodata 5 must be a finite value below the first level"
    ):
        raster_sld([0, 10, 20], c3, layer_name="a", title="t", nodata=5)
    with pytest.raises(InputDataError, match="layer_name '' is empty"):
        raster_sld([0, 10, 20], c3, layer_name="", title="t")


# --------------------------------------------------------------- bands


def test_bands_sld_rules_and_filters() -> None:
    bands = [
        (0, 10, "0:00 to 0:10"),
        (10, 20, "0:10 to 0:20"),
        (20, 27.5, "0:20 to 0:27"),
        (27.5, None, "later"),
    ]
    colors = arrival_colors_hex(4)
    root = parse(bands_sld(bands, colors, layer_name="isochrone_bands", title="Bands"))
    rules = root.findall(f".//{SLD}FeatureTypeStyle/{SLD}Rule")
    assert len(rules) == 4
    for rule, (lo, _, label), color in zip(rules, bands, colors, strict=True):
        assert children(rule) == ["Name", "Title", "Filter", "PolygonSymbolizer"]
        assert rule.findtext(f"{SLD}Title") == label
        eq = rule.find(f"{OGC}Filter/{OGC}PropertyIsEqualTo")
        assert eq is not None
        assert eq.findtext(f"{OGC}PropertyName") == "min_minutes"
        assert float(eq.findtext(f"{OGC}Literal") or "nan") == lo
        fill = {p.get("name"): p.text for p in rule.findall(f".//{SLD}Fill/{SLD}CssParameter")}
        assert fill == {"fill": color, "fill-opacity": "0.75"}
        stroke = {p.get("name"): p.text for p in rule.findall(f".//{SLD}Stroke/{SLD}CssParameter")}
        assert stroke["stroke-width"] == "0.3"
    assert [r.findtext(f"{OGC}Filter/{OGC}PropertyIsEqualTo/{OGC}Literal") for r in rules] == [
        "0",
        "10",
        "20",
        "27.5",
    ]
    shp = parse(bands_sld(bands, colors, layer_name="b", title="B", attribute="min_minute"))
    assert {e.text for e in shp.iter(f"{OGC}PropertyName")} == {"min_minute"}


def test_bands_sld_refusals() -> None:
    with pytest.raises(InputDataError, match="2 bands but 1 colours"):
        bands_sld([(0, 10, "a"), (10, 20, "b")], ["#000000"], layer_name="b", title="t")
    with pytest.raises(InputDataError, match="band lower bound 0 is not finite or is repeated"):
        bands_sld([(0, 10, "a"), (0, 20, "b")], ["#000000"] * 2, layer_name="b", title="t")
    with pytest.raises(InputDataError, match="upper bound not above its lower"):
        bands_sld([(10, 10, "a")], ["#000000"], layer_name="b", title="t")


# --------------------------------------------------------------- lines


def test_lines_sld() -> None:
    root = parse(lines_sld(layer_name="isochrones", title="Isochrones"))
    rules = root.findall(f".//{SLD}Rule")
    assert len(rules) == 1
    assert children(rules[0]) == ["Name", "Title", "LineSymbolizer", "TextSymbolizer"]
    stroke = {
        p.get("name"): p.text
        for p in rules[0].findall(f"{SLD}LineSymbolizer/{SLD}Stroke/{SLD}CssParameter")
    }
    assert stroke == {"stroke": "#1a1a1a", "stroke-width": "0.8"}
    text = rules[0].find(f"{SLD}TextSymbolizer")
    assert text is not None
    assert children(text) == ["Label", "Font", "LabelPlacement", "Halo", "Fill"]
    assert text.findtext(f"{SLD}Label/{OGC}PropertyName") == "label"
    assert text.find(f"{SLD}LabelPlacement/{SLD}LinePlacement") is not None
    other = parse(lines_sld(layer_name="l", title="t", label_attribute="minutes"))
    assert other.findtext(f".//{SLD}Label/{OGC}PropertyName") == "minutes"
    with pytest.raises(InputDataError, match="line_width 0 and font_size 10"):
        lines_sld(layer_name="l", title="t", line_width=0)


# --------------------------------------------------------------- writing


def test_write_sld(tmp_path: Path) -> None:
    out = tmp_path / "isochrones.sld"
    text = lines_sld(layer_name="isochrones", title="Isochrones")
    write_sld(out, text)
    assert out.read_text(encoding="utf-8") == text
    parse(out.read_text(encoding="utf-8"))
    with pytest.raises(OutputExistsError, match=r"isochrones\.sld' exists; pass --overwrite"):
        write_sld(out, text)
    write_sld(
        out, bands_sld([(0, 10, "a")], ["#000000"], layer_name="b", title="t"), overwrite=True
    )
    assert "PolygonSymbolizer" in out.read_text(encoding="utf-8")
    with pytest.raises(InputDataError, match="is not well-formed XML"):
        write_sld(tmp_path / "bad.sld", "<StyledLayerDescriptor>")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["isochrones.sld"]
