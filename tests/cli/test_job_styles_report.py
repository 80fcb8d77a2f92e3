"""Each job writes its QGIS styles and ``report.html``: planned, listed, refused, skippable.

Consistency of the wiring (``docs/styles.md``): the style files and the
report are in the output-name plan (so an existing one is refused without
``--overwrite``), in ``run.json``'s ``products`` (the report last, before the
record), and built from the same classes as the SLD beside each layer. That
QGIS really draws the layers with these styles is checked in
``test_qgis_styles.py``; that a browser shows the report, in
``test_report_browser.py``.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest

from ttmap.io.report import REPORT_NAME as IO_REPORT_NAME
from ttmap.io.styles import qml_path_for, read_gpkg_layer_styles
from ttmap.jobs.plan import REPORT_NAME, style_files
from ttmap.jobs.styling import difference_limit_min
from ttmap.products.qml import qml_renderer_summary


def _count(sld_text: str, tag: str, *, visible_only: bool = False) -> int:
    """Elements named ``tag`` (any namespace) in an SLD document; with ``visible_only``, opacity > 0."""
    import xml.etree.ElementTree as ET

    return sum(1 for e in ET.fromstring(sld_text.encode("utf-8")).iter()
               if e.tag.rsplit("}", 1)[-1] == tag and not (visible_only and float(e.get("opacity", "1")) == 0.0))


def _record(out: Path) -> dict:
    return json.loads((out / "run.json").read_text(encoding="utf-8"))


def test_plan_names_agree_with_the_writers() -> None:
    assert REPORT_NAME == IO_REPORT_NAME
    for name in ["a/arrival_front.tif", "a/x_isochrone_lines.shp", "a/coast_front.geojson"]:
        assert style_files([name]) == [qml_path_for(name)]
    assert style_files(["a/b.gpkg", "a/b.png", "a/b.sld", "a/b.csv"]) == []


def test_map_run_writes_styles_and_report_last(run_cli, utm_bathymetry: Path, spec, tmp_path: Path) -> None:
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--no-map", "--vector-format", "gpkg",
            "--vector-format", "shp", "--out", out, expect=0)
    products = _record(out)["products"]
    # every style file beside a layer, and the report last (run.json is written after it)
    assert products[-1] == REPORT_NAME
    qmls = [p for p in products if p.endswith(".qml")]
    assert sorted(qmls) == sorted(p.name for p in style_files(out / p for p in products))
    assert {"arrival_front.qml", "isochrones_front_isochrone_lines.qml",
            "isochrones_front_isochrone_bands.qml", "coast_front.qml"} <= set(qmls)
    for p in products:
        assert (out / p).is_file(), p
    # the raster style has the SLD's stops (one item per visible ColorMapEntry; nodata is transparent)
    sld = (out / "arrival_front.sld").read_text(encoding="utf-8")
    summary = qml_renderer_summary((out / "arrival_front.qml").read_text(encoding="utf-8"))
    assert summary["renderer"] == "singlebandpseudocolor"
    assert summary["classes"] == _count(sld, "ColorMapEntry", visible_only=True) >= 2
    # the GeoPackage layers carry their default styles, with the SLD beside the QML
    rows = {r["f_table_name"]: r for r in read_gpkg_layer_styles(out / "isochrones_front.gpkg")}
    assert set(rows) == {"isochrone_lines", "isochrone_bands"}
    bands_sld = (out / "isochrones_front_bands.sld").read_text(encoding="utf-8")
    assert rows["isochrone_bands"]["styleSLD"] == bands_sld
    assert qml_renderer_summary(rows["isochrone_bands"]["styleQML"])["classes"] == _count(bands_sld, "Rule")
    # the report links every product (relative), and run.json
    html = (out / REPORT_NAME).read_text(encoding="utf-8")
    links = set(re.findall(r'href="([^"#]+)"', html))
    assert links == {*[p for p in products if p != REPORT_NAME], "run.json"}


def test_no_report_flag(run_cli, utm_bathymetry: Path, spec, tmp_path: Path) -> None:
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--no-map", "--no-report", "--out", out, expect=0)
    assert not (out / REPORT_NAME).exists()
    assert REPORT_NAME not in _record(out)["products"]
    assert "report_s" not in _record(out)["timings_s"]


@pytest.mark.parametrize("existing", [REPORT_NAME, "arrival_front.qml"])
def test_existing_style_or_report_is_refused_up_front(run_cli, utm_bathymetry: Path, spec, tmp_path: Path,
                                                      existing: str) -> None:
    out = tmp_path / "out"
    out.mkdir()
    (out / existing).write_text("mine", encoding="utf-8")
    x, y = spec.UTM_SOURCE_XY
    result = run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--no-map", "--out", out, expect=1)
    assert existing in result.stderr and "--overwrite" in result.stderr
    assert sorted(p.name for p in out.iterdir()) == [existing]
    assert (out / existing).read_text(encoding="utf-8") == "mine"
    run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--no-map", "--out", out, "--overwrite", expect=0)
    assert (out / existing).read_text(encoding="utf-8") != "mine"


def test_site_map_run_styles_and_report(run_cli, utm_bathymetry: Path, spec, tmp_path: Path) -> None:
    out = tmp_path / "out"
    (xa, ya), (xb, yb) = spec.UTM_SOURCE_XY, (spec.UTM_SOURCE_XY[0] - 20_000.0, spec.UTM_SOURCE_XY[1])
    sites = tmp_path / "sites.csv"
    sites.write_text(f"name,x,y\nHarbour,{xa},{ya}\nCove,{xb},{yb}\n", encoding="utf-8")
    run_cli("site-map", utm_bathymetry, "--sites", sites, "--sites-crs", "EPSG:32759", "--no-map",
            "--out", out, expect=0)
    products = _record(out)["products"]
    assert products[-1] == REPORT_NAME
    assert {"site_centred_Harbour.qml", "minutes_left_Harbour.qml", "site_centred_Cove.qml",
            "minutes_left_Cove.qml", "site_centred_min.qml", "site_centred_first_site.qml"} <= set(products)
    first = qml_renderer_summary((out / "site_centred_first_site.qml").read_text(encoding="utf-8"))
    assert first == {"renderer": "paletted", "classes": 2, "label_field": None}
    # minutes left: the SLD's classes and, as there, a transparent item below the first
    left = qml_renderer_summary((out / "minutes_left_Harbour.qml").read_text(encoding="utf-8"))
    sld = (out / "minutes_left_Harbour.sld").read_text(encoding="utf-8")
    assert left["classes"] == _count(sld, "ColorMapEntry")
    html = (out / REPORT_NAME).read_text(encoding="utf-8")
    assert 'id="sites"' in html and "Harbour" in html and "Cove" in html


def test_difference_limit_is_a_round_figure_above_the_largest_difference() -> None:
    assert difference_limit_min(np.array([0.3, -0.9])) == 1.0
    assert difference_limit_min(np.array([12.0, -3.0])) == 20.0
    assert difference_limit_min(np.array([-47.0, np.nan])) == 50.0
    assert difference_limit_min(np.array([100.0])) == 100.0
    assert difference_limit_min(np.zeros(3)) == 1.0
