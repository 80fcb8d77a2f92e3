"""Layers open styled in QGIS: every product of a ``ttmap demo`` run, opened fresh.

The demo's products are styled here with the library (QML beside rasters,
Shapefiles and GeoJSON; ``layer_styles`` rows inside GeoPackages), then each
layer is opened by QGIS's own Python API in the system Python (Debian's
``python3-qgis``, headless) exactly as a user would add it: ``QgsRasterLayer``
/ ``QgsVectorLayer`` with the default layer options, which load the default
style (the ``.qml`` by name, or the GeoPackage's default ``layer_styles``
row). The test checks the renderer type and class count QGIS ends up with,
that every vector feature gets the colour of its class, and that the
classes' colours are the SLD's (the SLD stays for other clients).

Independent checks: GDAL's own ``gdalinfo`` / ``ogrinfo`` still open every
file (the GeoPackage with the extra table still validates as one), and every
SLD still parses as XML.

Skips where the system Python cannot import ``qgis`` (or the GDAL tools are
absent); installs nothing.
"""

from __future__ import annotations

import json
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from ttmap.io.styles import qml_path_for, read_gpkg_layer_styles, write_gpkg_layer_style, write_qml_beside
from ttmap.products.coast import COAST_LAYER_NAME
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
from ttmap.products.styles import OGC_NAMESPACE, SLD_NAMESPACE

SYSTEM_PYTHON = "/usr/bin/python3"


def _qgis_available() -> bool:
    if not Path(SYSTEM_PYTHON).exists():
        return False
    try:
        done = subprocess.run(
            [SYSTEM_PYTHON, "-c", "import qgis.core"], capture_output=True, timeout=60,
            env={"QT_QPA_PLATFORM": "offscreen", "PATH": "/usr/bin:/bin"},
        )
    except (OSError, subprocess.TimeoutExpired):
        return False
    return done.returncode == 0


requires_qgis = pytest.mark.skipif(not _qgis_available(), reason="QGIS Python API (python3-qgis) not found")
requires_gdal_tools = pytest.mark.skipif(
    shutil.which("gdalinfo") is None or shutil.which("ogrinfo") is None, reason="GDAL command-line tools absent"
)

# Opens each layer the way QGIS's "add layer" does (default LayerOptions:
# loadDefaultStyle=True) and reports what renderer it got. For vectors it
# also reports the colour QGIS draws each feature with.
_QGIS_SCRIPT = r"""
import json, sys
from qgis.core import (QgsApplication, QgsRasterLayer, QgsVectorLayer, QgsRenderContext,
                       QgsFeatureRequest)
app = QgsApplication([], False)
app.initQgis()
out = []
for item in json.loads(sys.stdin.read()):
    rec = {"id": item["id"]}
    if item["kind"] == "raster":
        lyr = QgsRasterLayer(item["uri"], item["id"])
        rec["valid"] = lyr.isValid()
        r = lyr.renderer()
        rec["renderer"] = r.type() if r else None
        if r is not None and r.type() == "singlebandpseudocolor":
            fn = r.shader().rasterShaderFunction()
            rec["ramp"] = fn.colorRampTypeAsQString()
            rec["items"] = [[i.value, i.color.name(), i.color.alpha(), i.label] for i in fn.colorRampItemList()]
        elif r is not None and r.type() == "paletted":
            rec["items"] = [[c.value, c.color.name(), c.color.alpha(), c.label] for c in r.classes()]
        if r is not None and "sample" in item:
            x, y = item["sample"]
            from qgis.core import QgsPointXY, QgsRaster
            res = lyr.dataProvider().identify(QgsPointXY(x, y), QgsRaster.IdentifyFormatValue).results()
            rec["sample_value"] = res.get(1)
    else:
        lyr = QgsVectorLayer(item["uri"], item["id"], "ogr")
        rec["valid"] = lyr.isValid()
        r = lyr.renderer()
        rec["renderer"] = r.type() if r else None
        if r is not None:
            if r.type() == "graduatedSymbol":
                rec["classes"] = len(r.ranges())
                rec["class_colors"] = [x.symbol().color().name() for x in r.ranges()]
                rec["attr"] = r.classAttribute()
            elif r.type() == "categorizedSymbol":
                rec["classes"] = len(r.categories())
                rec["class_colors"] = [x.symbol().color().name() for x in r.categories()]
                rec["attr"] = r.classAttribute()
            else:
                rec["classes"] = 1
            rec["labels"] = bool(lyr.labelsEnabled())
            rec["label_field"] = lyr.labeling().settings().fieldName if lyr.labeling() else None
            ctx = QgsRenderContext()
            r.startRender(ctx, lyr.fields())
            colors, missing = [], 0
            for f in lyr.getFeatures(QgsFeatureRequest()):
                s = r.symbolForFeature(f, ctx)
                if s is None:
                    missing += 1
                    colors.append(None)
                else:
                    colors.append(s.color().name())
            r.stopRender(ctx)
            rec["feature_colors"] = colors
            rec["features_without_symbol"] = missing
    out.append(rec)
print("QGISJSON" + json.dumps(out))
"""


def _open_in_qgis(items: list[dict[str, Any]]) -> dict[str, dict[str, Any]]:
    done = subprocess.run(
        [SYSTEM_PYTHON, "-c", _QGIS_SCRIPT], input=json.dumps(items), capture_output=True, text=True,
        timeout=300, env={"QT_QPA_PLATFORM": "offscreen", "PATH": "/usr/bin:/bin", "HOME": "/tmp",
                          "XDG_RUNTIME_DIR": "/tmp"},
    )
    line = next((ln for ln in done.stdout.splitlines() if ln.startswith("QGISJSON")), None)
    assert line is not None, f"QGIS script failed:\n{done.stdout}\n{done.stderr}"
    return {rec["id"]: rec for rec in json.loads(line[len("QGISJSON"):])}


# ---------------------------------------------------------------------------
# Inputs of the styles, read back from the demo's own SLD files and layers
# ---------------------------------------------------------------------------

_NS = {"sld": SLD_NAMESPACE, "ogc": OGC_NAMESPACE}


def _sld_color_map(path: Path) -> tuple[str | None, list[tuple[float, str, float, str]]]:
    """(type, [(quantity, colour, opacity, label)]) of a raster SLD."""
    root = ET.parse(path).getroot()
    cmap = root.find(".//sld:ColorMap", _NS)
    assert cmap is not None
    entries = [
        (float(e.get("quantity", "nan")), e.get("color", "").lower(), float(e.get("opacity", "1")), e.get("label", ""))
        for e in cmap.findall("sld:ColorMapEntry", _NS)
    ]
    return cmap.get("type"), entries


def _raster_inputs(sld: Path) -> tuple[list[float], list[str], str]:
    """The levels and colours raster_sld was given, recovered from its output."""
    kind, entries = _sld_color_map(sld)
    visible = [e for e in entries if e[2] > 0]
    if kind == "intervals":
        # entry i's quantity is the upper bound of colour i; the first lower bound
        # is the transparent entry's quantity
        lowers = [entries[0][0], *[e[0] for e in visible[:-1]]]
        return lowers, [e[1] for e in visible], "intervals"
    return [e[0] for e in visible], [e[1] for e in visible], "ramp"


def _sld_rules(path: Path) -> list[tuple[float | None, str, str]]:
    """(filter literal or None for ElseFilter, title, first colour) of each vector rule."""
    root = ET.parse(path).getroot()
    rows = []
    for rule in root.iter(f"{{{SLD_NAMESPACE}}}Rule"):
        lit = rule.find(".//ogc:Literal", _NS)
        title = rule.findtext("sld:Title", default="", namespaces=_NS)
        color = next(
            (c.text or "" for c in rule.iter(f"{{{SLD_NAMESPACE}}}CssParameter") if c.get("name") in ("fill", "stroke")),
            "",
        )
        rows.append((float(lit.text) if lit is not None and lit.text else None, title, color.lower()))
    return rows


def _read_columns(path: Path, layer: str | None, names: list[str]) -> dict[str, list[Any]]:
    import pyogrio

    _, _, _, fields = pyogrio.raw.read(path, layer=layer, read_geometry=False, columns=names)
    return {n: list(v) for n, v in zip(names, fields, strict=True)}


def _style_demo(out: Path) -> dict[str, Any]:
    """Write QML / layer_styles for every product of a demo run; return what was expected."""
    expect: dict[str, Any] = {}
    tifs = sorted(out.glob("arrival_*.tif")) + sorted((out / "site_maps").glob("*.tif"))
    for tif in tifs:
        levels, colors, kind = _raster_inputs(tif.with_suffix(".sld"))
        write_qml_beside(tif, raster_qml(levels, colors, layer_name=tif.stem, title=tif.stem, color_map_type=kind))
        expect[tif.stem] = {"kind": "raster", "uri": str(tif), "renderer": "singlebandpseudocolor",
                            "sld": str(tif.with_suffix(".sld")), "map": kind}
    for gpkg in sorted(out.glob("isochrones_*.gpkg")) + sorted((out / "site_maps").glob("isochrones_*.gpkg")):
        stem = gpkg.stem
        lines_sld = gpkg.with_name(f"{stem}_lines.sld")
        bands_sld = gpkg.with_name(f"{stem}_bands.sld")
        write_gpkg_layer_style(gpkg, "isochrone_lines", lines_qml(title=f"Isochrones {stem}"),
                               sld_text=lines_sld.read_text(encoding="utf-8"), description="caution")
        cols = _read_columns(gpkg, "isochrone_bands", ["min_minutes", "max_minutes", "label"])
        rules = _sld_rules(bands_sld)
        bands = [(lo, hi, lab) for lo, hi, lab in zip(cols["min_minutes"], cols["max_minutes"], cols["label"])]
        write_gpkg_layer_style(gpkg, "isochrone_bands", bands_qml(bands, [r[2] for r in rules], title=stem),
                               sld_text=bands_sld.read_text(encoding="utf-8"))
        expect[f"{stem}_lines"] = {"kind": "vector", "uri": f"{gpkg}|layername=isochrone_lines",
                                   "renderer": "singleSymbol", "classes": 1, "label_field": "label"}
        expect[f"{stem}_bands"] = {"kind": "vector", "uri": f"{gpkg}|layername=isochrone_bands",
                                   "renderer": "graduatedSymbol", "classes": len(bands),
                                   "colors": [r[2] for r in rules],
                                   "feature_class": [float(v) for v in cols["min_minutes"]],
                                   "class_values": [float(r[0]) for r in rules if r[0] is not None]}
    for gpkg in sorted(out.glob("coast_*.gpkg")):
        rules = _sld_rules(gpkg.with_suffix(".sld"))
        classes = [(r[0], None, r[1]) for r in rules if r[0] is not None]
        colors = [r[2] for r in rules if r[0] is not None]
        write_gpkg_layer_style(gpkg, COAST_LAYER_NAME, coast_qml(classes, colors, title=gpkg.stem),
                               sld_text=gpkg.with_suffix(".sld").read_text(encoding="utf-8"))
        cols = _read_columns(gpkg, COAST_LAYER_NAME, ["class_min"])
        expect[gpkg.stem] = {"kind": "vector", "uri": f"{gpkg}|layername={COAST_LAYER_NAME}", "renderer": "categorizedSymbol",
                             "classes": len(classes) + 1, "colors": colors + [rules[-1][2]],
                             "feature_class": [None if v is None or not np.isfinite(v) else float(v)
                                               for v in cols["class_min"]],
                             "class_values": [c[0] for c in classes]}
    paths = out / "wave_paths.gpkg"  # the first wave's routes (a line layer, no label column of its own)
    if paths.exists():
        write_gpkg_layer_style(paths, "wave_paths", lines_qml(title="Wave paths", label_attribute="name"),
                               sld_text=(out / "wave_paths.sld").read_text(encoding="utf-8"))
        expect["wave_paths"] = {"kind": "vector", "uri": f"{paths}|layername=wave_paths",
                                "renderer": "singleSymbol", "classes": 1, "label_field": "name"}
    sites = out / "sites.gpkg"
    write_gpkg_layer_style(sites, "sites", sites_qml(title="Sites"))
    status = _read_columns(sites, "sites", ["budget_status"])["budget_status"]
    expect["sites"] = {"kind": "vector", "uri": f"{sites}|layername=sites", "renderer": "categorizedSymbol",
                       "classes": len(site_status_colors()) + 1, "label_field": "name",
                       "status": status}
    return expect


@pytest.fixture(scope="module")
def styled_demo(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, Any]]:
    from click.testing import CliRunner

    from ttmap.cli.main import cli

    out = tmp_path_factory.mktemp("qgis") / "demo"
    result = CliRunner().invoke(cli, ["demo", "--out", str(out)])
    assert result.exit_code == 0, result.output
    expect = _style_demo(out)
    # the comparison products: envelope, first scenario, difference of the demo's two sets
    from ttmap.jobs.scenario import write_difference, write_envelope
    from ttmap.products.palette import arrival_colors_hex

    cmp_dir = out / "compare"
    cmp_dir.mkdir()
    names = ["front", "energy300"]
    paths = [out / "arrival_front.tif", out / "arrival_group_T300s.tif"]
    env = write_envelope(cmp_dir, paths, names)
    diff = write_difference(cmp_dir, paths[1], paths[0], "energy300", "front")["difference"]
    levels, colors, _ = _raster_inputs(out / "arrival_front.sld")
    write_qml_beside(env["envelope_min"], raster_qml(levels, colors, layer_name="envelope_min", title="Envelope"))
    write_qml_beside(env["first_scenario"], paletted_qml([0, 1], names, layer_name="first", title="First"))
    write_qml_beside(diff, difference_qml(10, name_a="energy300", name_b="front", layer_name="difference",
                                          title="Difference"))
    expect["envelope_min"] = {"kind": "raster", "uri": env["envelope_min"], "renderer": "singlebandpseudocolor",
                              "sld": str(out / "arrival_front.sld"), "map": "ramp"}
    expect["first_scenario"] = {"kind": "raster", "uri": env["first_scenario"], "renderer": "paletted",
                                "n_items": 2, "labels": names}
    expect["difference"] = {"kind": "raster", "uri": diff, "renderer": "singlebandpseudocolor", "n_items": 9,
                            "zero_color": arrival_colors_hex(9, "PuOr_r")[4]}
    # Shapefile and GeoJSON copies of the isochrones and a wave-path layer: .qml beside each
    from ttmap.io.vector import VectorLayer, shapefile_field_name, write_vector_layers
    import shapely

    alt = out / "alt"
    alt.mkdir()
    cols = _read_columns(out / "isochrones_front.gpkg", "isochrone_bands", ["min_minutes", "max_minutes", "label"])
    import pyogrio

    _, _, wkb, _ = pyogrio.raw.read(out / "isochrones_front.gpkg", layer="isochrone_bands", columns=[])
    band_cols = {k: np.asarray(v, dtype=object if k == "label" else float) for k, v in cols.items()}
    band_cols["minutes"] = band_cols["max_minutes"]  # as the map job writes it
    band_layer = VectorLayer("isochrone_bands", list(shapely.from_wkb(wkb)), band_cols, "MultiPolygon")
    path_layer = VectorLayer("wave_paths", [shapely.LineString([(-144.9, -34.2), (-143.5, -33.6), (-142.7, -33.4)])],
                             {"site": ["Tarnquill Harbour"], "minutes": [90.3]}, "LineString")
    rules = _sld_rules(out / "isochrones_front_bands.sld")
    bands = list(zip(cols["min_minutes"], cols["max_minutes"], cols["label"]))
    for suffix in (".shp", ".geojson"):
        written = write_vector_layers(alt / f"iso{suffix}", [band_layer, path_layer], crs="EPSG:4326")
        for p in written:
            if p.suffix != suffix:
                continue
            if "bands" in p.stem:
                # one .qml serves the .shp and the .geojson of the same base name: classify on
                # "minutes" (the upper bound), a field name both formats keep
                assert shapefile_field_name("min_minutes") != "min_minutes"
                write_qml_beside(p, bands_qml(bands, [r[2] for r in rules], title="bands", attribute="minutes",
                                              bound="upper"), overwrite=True)
                expect[p.name] = {"kind": "vector", "uri": str(p), "renderer": "graduatedSymbol",
                                  "classes": len(bands), "colors": [r[2] for r in rules],
                                  "feature_class": [float(v) for v in cols["max_minutes"]],
                                  "class_values": [float(b[1]) for b in sorted(bands)]}
            else:
                write_qml_beside(p, wave_paths_qml(title="Wave paths", label_attribute="site"), overwrite=True)
                expect[p.name] = {"kind": "vector", "uri": str(p), "renderer": "singleSymbol", "classes": 1,
                                  "label_field": "site"}
    gp = write_vector_layers(alt / "paths.gpkg", [path_layer], crs="EPSG:4326")[0]
    write_gpkg_layer_style(gp, "wave_paths", wave_paths_qml(title="Wave paths", label_attribute="site"))
    expect["paths_gpkg"] = {"kind": "vector", "uri": f"{gp}|layername=wave_paths", "renderer": "singleSymbol",
                            "classes": 1, "label_field": "site"}
    return out, expect


@requires_qgis
def test_every_demo_layer_opens_styled_in_qgis(styled_demo: tuple[Path, dict[str, Any]]) -> None:
    out, expect = styled_demo
    items = [{"id": k, "kind": v["kind"], "uri": v["uri"]} for k, v in expect.items()]
    got = _open_in_qgis(items)
    # every product of the demo run is among them
    assert {"arrival_front", "arrival_group_T300s", "site_centred_Tarnquill_Harbour",
            "minutes_left_Tarnquill_Harbour", "coast_front", "coast_group_T300s", "isochrones_front_bands",
            "isochrones_site_Tarnquill_Harbour_lines", "sites"} <= set(got)
    status_colors = site_status_colors()
    for key, exp in expect.items():
        rec = got[key]
        assert rec["valid"], key
        assert rec["renderer"] == exp["renderer"], (key, rec["renderer"])
        if exp["kind"] == "raster" and "sld" in exp:
            # same classes and colours as the SLD beside it (visible entries)
            levels, colors, kind = _raster_inputs(Path(exp["sld"]))
            items_ = rec["items"]
            if kind == "ramp":
                assert rec["ramp"] == "INTERPOLATED"
                assert [round(i[0], 6) for i in items_] == [round(v, 6) for v in levels]
                assert [i[1] for i in items_] == colors
            else:
                assert rec["ramp"] == "DISCRETE"
                # first item transparent (below the first level), then one per colour
                assert items_[0][2] == 0 and len(items_) == len(colors) + 1
                assert [i[1] for i in items_[1:]] == colors
        elif exp["renderer"] == "paletted":
            assert len(rec["items"]) == exp["n_items"]
            assert [i[3] for i in rec["items"]] == exp["labels"]
        elif key == "difference":
            vals = [i[0] for i in rec["items"]]
            assert len(vals) == exp["n_items"] and vals[4] == 0.0 and vals[0] == -vals[-1]
            assert rec["items"][4][1] == exp["zero_color"]
        if exp["kind"] == "vector":
            assert rec["classes"] == exp["classes"], (key, rec["classes"])
            assert rec["features_without_symbol"] == 0, key
            if "label_field" in exp:
                assert rec["labels"] and rec["label_field"] == exp["label_field"], key
            if "colors" in exp:
                assert rec["class_colors"] == exp["colors"], key
                # each feature is drawn in its own class's colour
                by_value = dict(zip(exp["class_values"], exp["colors"]))
                for value, color in zip(exp["feature_class"], rec["feature_colors"], strict=True):
                    assert color == by_value.get(value, exp["colors"][-1]), (key, value, color)
            if key == "sites":
                for status, color in zip(exp["status"], rec["feature_colors"], strict=True):
                    assert color == status_colors[status]


@requires_qgis
def test_unstyled_layers_open_plain(tmp_path: Path) -> None:
    """Without the styles QGIS opens the same files plain: the styles are what changed."""
    from click.testing import CliRunner

    from ttmap.cli.main import cli

    out = tmp_path / "demo"
    assert CliRunner().invoke(cli, ["demo", "--out", str(out)]).exit_code == 0
    got = _open_in_qgis([
        {"id": "r", "kind": "raster", "uri": str(out / "arrival_front.tif")},
        {"id": "b", "kind": "vector", "uri": f"{out / 'isochrones_front.gpkg'}|layername=isochrone_bands"},
    ])
    assert got["r"]["renderer"] == "singlebandgray"
    assert got["b"]["renderer"] == "singleSymbol"


def test_styles_are_stored_where_clients_look(styled_demo: tuple[Path, dict[str, Any]]) -> None:
    out, _ = styled_demo
    assert qml_path_for(out / "arrival_front.tif").is_file()
    rows = read_gpkg_layer_styles(out / "isochrones_front.gpkg")
    assert sorted(r["f_table_name"] for r in rows) == ["isochrone_bands", "isochrone_lines"]
    assert all(r["useAsDefault"] == 1 and r["f_geometry_column"] == "geom" for r in rows)
    summary = qml_renderer_summary(next(r["styleQML"] for r in rows if r["f_table_name"] == "isochrone_bands"))
    assert summary["renderer"] == "graduatedSymbol"
    # every SLD (raster, bands, lines, coast) still parses and is an SLD
    slds = list(out.rglob("*.sld"))
    assert len(slds) >= 10
    for sld in slds:
        assert ET.parse(sld).getroot().tag == f"{{{SLD_NAMESPACE}}}StyledLayerDescriptor", sld


@requires_gdal_tools
def test_gdal_still_opens_every_styled_file(styled_demo: tuple[Path, dict[str, Any]]) -> None:
    out, _ = styled_demo
    for tif in out.rglob("*.tif"):
        done = subprocess.run(["gdalinfo", str(tif)], capture_output=True, text=True)
        assert done.returncode == 0 and "ERROR" not in done.stderr, (tif, done.stderr)
    vectors = [*out.rglob("*.gpkg"), *out.rglob("*.shp"), *out.rglob("*.geojson")]
    assert vectors
    for vec in vectors:
        done = subprocess.run(["ogrinfo", "-so", "-al", str(vec)], capture_output=True, text=True)
        assert done.returncode == 0 and "ERROR" not in done.stderr, (vec, done.stderr)
        if vec.suffix == ".gpkg":
            # the layer_styles table is a plain attributes table, listed with its row count
            done = subprocess.run(["ogrinfo", "-so", str(vec), "layer_styles"], capture_output=True, text=True)
            assert done.returncode == 0, done.stderr
            assert "Geometry: None" in done.stdout
            rows = len(read_gpkg_layer_styles(vec))
            assert f"Feature Count: {rows}" in done.stdout
