"""QGIS style documents (ttmap.products.qml) and where they are written (ttmap.io.styles).

The documents are parsed back with xml.etree and compared with the SLD that
the same inputs give (same classes, same colours). The GeoPackage table is
read back with sqlite3 and GDAL (pyogrio). Opening them in QGIS itself is in
tests/cli/test_qgis_styles.py.
"""

from __future__ import annotations

import sqlite3
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest
import shapely

from ttmap.errors import InputDataError, OutputExistsError
from ttmap.io.styles import (
    LAYER_STYLES_COLUMNS,
    qml_path_for,
    read_gpkg_layer_styles,
    write_gpkg_layer_style,
    write_qml_beside,
)
from ttmap.io.vector import VectorLayer, write_vector_layers
from ttmap.products.qml import (
    bands_qml,
    coast_qml,
    difference_qml,
    lines_qml,
    paletted_qml,
    qml_renderer_summary,
    raster_qml,
    site_status_colors,
    sites_qml,
    wave_paths_qml,
)
from ttmap.products.styles import SLD_NAMESPACE, bands_sld, raster_sld
from ttmap.products.timeline import MARGIN_LEVEL_COLORS

LEVELS = [0.0, 10.0, 20.0, 30.0]
COLORS = ["#fde725", "#35b779", "#31688e", "#440154"]


def _xml(text: str) -> ET.Element:
    assert text.startswith("<!DOCTYPE qgis")
    return ET.fromstring(text.split("\n", 1)[1])


def test_raster_ramp_matches_sld() -> None:
    qml = _xml(raster_qml(LEVELS, COLORS, layer_name="arrival_front", title="t"))
    shader = qml.find("pipe/rasterrenderer/rastershader/colorrampshader")
    assert qml.find("pipe/rasterrenderer").get("type") == "singlebandpseudocolor"
    assert shader.get("colorRampType") == "INTERPOLATED"
    items = [(float(i.get("value")), i.get("color")) for i in shader.findall("item")]
    sld = ET.fromstring(raster_sld(LEVELS, COLORS, layer_name="a", title="t"))
    entries = [(float(e.get("quantity")), e.get("color")) for e in sld.iter(f"{{{SLD_NAMESPACE}}}ColorMapEntry")
               if e.get("opacity") != "0"]
    assert items == entries
    # nodata transparent
    px = qml.find("pipe/rasterrenderer/rasterTransparency/singleValuePixelList/pixelListEntry")
    assert px.get("min") == "-9999" and px.get("percentTransparent") == "100"


def test_raster_intervals_discrete_upper_bounds() -> None:
    qml = _xml(raster_qml(LEVELS, COLORS, layer_name="m", title="t", color_map_type="intervals"))
    shader = qml.find("pipe/rasterrenderer/rastershader/colorrampshader")
    assert shader.get("colorRampType") == "DISCRETE"
    items = shader.findall("item")
    # transparent below the first level, then colour i up to level i+1, the last open-ended
    assert [(i.get("value"), i.get("alpha")) for i in items] == [
        ("0", "0"), ("10", "255"), ("20", "255"), ("30", "255"), ("inf", "255")]
    assert [i.get("color") for i in items[1:]] == COLORS
    assert items[-1].get("label") == "0:30 and later"


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"levels_min": [0, 10], "colors_hex": ["#000000"]}, "2 levels but 1 colours"),
        ({"levels_min": [10, 0], "colors_hex": COLORS[:2]}, "strictly increasing"),
        ({"levels_min": [0, 10], "colors_hex": COLORS[:2], "nodata": 5}, "nodata 5"),
        ({"levels_min": [0, 10], "colors_hex": COLORS[:2], "color_map_type": "steps"}, "unknown"),
        ({"levels_min": [0, 10], "colors_hex": ["red", "#000000"]}, "not of the form"),
    ],
)
def test_raster_errors(kwargs: dict, match: str) -> None:
    with pytest.raises(InputDataError, match=match):
        raster_qml(layer_name="x", title="t", **kwargs)


def test_paletted_and_difference() -> None:
    qml = _xml(paletted_qml([0, 1, 2], ["north", "south", "east"], layer_name="f", title="t"))
    entries = qml.findall("pipe/rasterrenderer/colorPalette/paletteEntry")
    assert [e.get("label") for e in entries] == ["north", "south", "east"]
    assert len({e.get("color") for e in entries}) == 3
    with pytest.raises(InputDataError, match="repeat"):
        paletted_qml([0, 0], ["a", "b"], layer_name="f", title="t")
    d = _xml(difference_qml(30, name_a="a", name_b="b", layer_name="d", title="t", n_colors=5))
    items = d.findall(".//colorrampshader/item")
    assert [float(i.get("value")) for i in items] == [-30, -15, 0, 15, 30]
    # symmetric about zero: the middle stop is the colormap's centre (near white)
    mid = items[2].get("color")
    assert all(int(mid[k:k + 2], 16) > 200 for k in (1, 3, 5))
    assert items[0].get("label") == "a earlier by 30 min" and items[-1].get("label") == "b earlier by 30 min"
    with pytest.raises(InputDataError, match="odd"):
        difference_qml(30, name_a="a", name_b="b", layer_name="d", title="t", n_colors=4)
    with pytest.raises(InputDataError, match="limit_min"):
        difference_qml(0, name_a="a", name_b="b", layer_name="d", title="t")


def test_bands_ranges_hold_their_own_lower_bound() -> None:
    bands = [(0.0, 10.0, "0:00-0:10"), (10.0, 20.0, "0:10-0:20"), (20.0, None, "0:20 and later")]
    qml = _xml(bands_qml(bands, COLORS[:3], title="t"))
    rend = qml.find("renderer-v2")
    assert rend.get("type") == "graduatedSymbol" and rend.get("attr") == "min_minutes"
    ranges = [(float(r.get("lower")), float(r.get("upper"))) for r in rend.findall("ranges/range")]

    def first_match(v: float) -> int:  # QGIS: closed ranges, first match wins
        return next(i for i, (lo, hi) in enumerate(ranges) if lo <= v <= hi)

    assert [first_match(lo) for lo, _, _ in bands] == [0, 1, 2]
    # same colours and labels as the SLD's rules
    sld = ET.fromstring(bands_sld(bands, COLORS[:3], layer_name="b", title="t"))
    fills = [c.text for c in sld.iter(f"{{{SLD_NAMESPACE}}}CssParameter") if c.get("name") == "fill"]
    symbol_colors = [o.get("value") for o in rend.iter("Option") if o.get("name") == "color"]
    assert [_hex(c) for c in symbol_colors] == fills
    upper = _xml(bands_qml(bands[:2], COLORS[:2], title="t", attribute="minutes", bound="upper"))
    assert [r.get("upper") for r in upper.findall("renderer-v2/ranges/range")] == ["10.0", "20.0"]
    with pytest.raises(InputDataError, match="no upper bound"):
        bands_qml(bands, COLORS[:3], title="t", attribute="minutes", bound="upper")
    with pytest.raises(InputDataError, match="repeated"):
        bands_qml([(0, 10, "a"), (0, 20, "b")], COLORS[:2], title="t")


def _hex(rgba: str) -> str:
    r, g, b, _ = (int(v) for v in rgba.split(","))
    return f"#{r:02x}{g:02x}{b:02x}"


def test_coast_categories_and_unreached() -> None:
    classes = [(0.0, 5.0, "0:00-0:05"), (5.0, 10.0, "0:05-0:10"), (7.5, None, "0:07")]
    qml = _xml(coast_qml(classes, COLORS[:3], title="t"))
    cats = qml.findall("renderer-v2/categories/category")
    # QGIS compares category values as text: 5.0 is "5", 7.5 is "7.5"; "" catches the rest (null)
    assert [c.get("value") for c in cats] == ["0", "5", "7.5", ""]
    assert qml_renderer_summary(coast_qml(classes, COLORS[:3], title="t"))["classes"] == 4


def test_sites_lines_paths_summary() -> None:
    s = qml_renderer_summary(sites_qml(title="t"))
    assert s == {"renderer": "categorizedSymbol", "classes": len(site_status_colors()) + 1, "label_field": "name"}
    colors = site_status_colors()
    from ttmap.products import budget

    assert colors[budget.STATUS_BEFORE_MESSAGE] == MARGIN_LEVEL_COLORS["alert"]
    assert colors[budget.little_margin_status()] == MARGIN_LEVEL_COLORS["little"]
    assert qml_renderer_summary(lines_qml(title="t"))["label_field"] == "label"
    assert qml_renderer_summary(wave_paths_qml(title="t")) == {
        "renderer": "singleSymbol", "classes": 1, "label_field": None}
    with pytest.raises(InputDataError, match="not a QML"):
        qml_renderer_summary("<StyledLayerDescriptor/>")


def test_caution_travels_in_every_document() -> None:
    from ttmap.products.cautions import CAUTION_SHORT

    for text in (raster_qml(LEVELS, COLORS, layer_name="a", title="t"), lines_qml(title="t"),
                 sites_qml(title="a -- b")):
        assert CAUTION_SHORT in text
        _xml(text)  # still well-formed (a "--" in a title must not break the comment)


# ---------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------


@pytest.fixture
def gpkg(tmp_path: Path) -> Path:
    layer = VectorLayer("isochrone_lines", [shapely.LineString([(0, 0), (1, 1)])],
                        {"minutes": [10.0], "label": ["0:10"]}, "LineString")
    other = VectorLayer("isochrone_bands", [shapely.box(0, 0, 1, 1)],
                        {"min_minutes": [0.0], "label": ["0:00-0:10"]}, "Polygon")
    return write_vector_layers(tmp_path / "iso.gpkg", [layer, other], crs="EPSG:4326")[0]


def test_gpkg_layer_styles_table(gpkg: Path) -> None:
    import pyogrio

    qml = lines_qml(title="Isochrones")
    first = write_gpkg_layer_style(gpkg, "isochrone_lines", qml, sld_text="<sld/>", description="caution")
    write_gpkg_layer_style(gpkg, "isochrone_bands", bands_qml([(0, 10, "a")], COLORS[:1], title="b"))
    rows = read_gpkg_layer_styles(gpkg)
    assert [r["f_table_name"] for r in rows] == ["isochrone_lines", "isochrone_bands"]
    assert set(rows[0]) == {"id", *LAYER_STYLES_COLUMNS}
    assert rows[0]["f_geometry_column"] == "geom" and rows[0]["useAsDefault"] == 1
    assert rows[0]["styleQML"] == qml and rows[0]["styleSLD"] == "<sld/>" and rows[0]["id"] == first
    # a second default of the same layer: replaces a same-named style, unmarks others
    write_gpkg_layer_style(gpkg, "isochrone_lines", qml, style_name="alt")
    rows = read_gpkg_layer_styles(gpkg)
    lines = {r["styleName"]: r["useAsDefault"] for r in rows if r["f_table_name"] == "isochrone_lines"}
    assert lines == {"isochrone_lines": 0, "alt": 1}
    write_gpkg_layer_style(gpkg, "isochrone_lines", qml, style_name="alt")
    assert len(read_gpkg_layer_styles(gpkg)) == 3
    # GDAL sees the table as a plain attributes table with its row count; the layers are intact
    names = [n for n, _ in pyogrio.list_layers(gpkg)]
    assert names[:2] == ["isochrone_lines", "isochrone_bands"] and "layer_styles" in names
    assert pyogrio.read_info(gpkg, layer="layer_styles")["features"] == 3
    assert pyogrio.read_info(gpkg, layer="isochrone_lines")["features"] == 1
    with sqlite3.connect(gpkg) as con:
        assert con.execute("SELECT data_type FROM gpkg_contents WHERE table_name='layer_styles'").fetchone() == (
            "attributes",)


def test_gpkg_errors_leave_file_unchanged(gpkg: Path, tmp_path: Path) -> None:
    before = gpkg.read_bytes()
    with pytest.raises(InputDataError, match="has no layer 'coast'.*isochrone_lines"):
        write_gpkg_layer_style(gpkg, "coast", lines_qml(title="t"))
    with pytest.raises(InputDataError, match="not 'qgis'"):
        write_gpkg_layer_style(gpkg, "isochrone_lines", "<sld/>")
    assert gpkg.read_bytes() == before
    with pytest.raises(InputDataError, match="does not exist"):
        write_gpkg_layer_style(tmp_path / "none.gpkg", "x", lines_qml(title="t"))
    (tmp_path / "plain.gpkg").write_bytes(b"")
    with pytest.raises(InputDataError, match="not a GeoPackage"):
        write_gpkg_layer_style(tmp_path / "plain.gpkg", "x", lines_qml(title="t"))


def test_qml_beside(tmp_path: Path, gpkg: Path) -> None:
    tif = tmp_path / "arrival_front.tif"
    tif.write_bytes(b"x")
    qml = raster_qml(LEVELS, COLORS, layer_name="arrival_front", title="t")
    assert write_qml_beside(tif, qml) == tmp_path / "arrival_front.qml" == qml_path_for(tif)
    with pytest.raises(OutputExistsError):
        write_qml_beside(tif, qml)
    with pytest.raises(InputDataError, match="does not exist"):
        write_qml_beside(tmp_path / "missing.tif", qml)
    with pytest.raises(InputDataError, match="GeoPackage"):
        write_qml_beside(gpkg, qml)
