"""Layers open styled in QGIS: every layer the jobs write, opened fresh.

Three runs write their products with no style added by the test: ``ttmap
demo`` (a map run and a site-map run, GeoPackage layers), a map run on the
demo grid with Shapefile and GeoJSON outputs, a site-map run with several
sites (combined rasters), and a small scenario run on a crop of the demo grid
(task rasters, envelope, scenario first, difference). Each raster and vector
layer listed in a run's ``run.json`` is then opened by QGIS's own Python API
in the system Python (Debian's ``python3-qgis``, headless) exactly as a user
would add it: ``QgsRasterLayer`` / ``QgsVectorLayer`` with the default layer
options, which load the default style (the ``.qml`` by base name, or the
GeoPackage's default ``layer_styles`` row). The test checks the renderer type
and class count QGIS ends up with against the data (one range per band
feature, one category per coast class of the SLD plus the unreached coast,
one palette entry per site or scenario), that every vector feature gets the
colour of its class, and that the classes' colours are those of the SLD the
job wrote beside the layer (an independent builder; the SLD stays for other
clients).

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
import textwrap
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from ttmap.io.styles import qml_path_for, read_gpkg_layer_styles
from ttmap.jobs.plan import REPORT_NAME, style_files
from ttmap.products.coast import COAST_LAYER_NAME
from ttmap.products.qml import qml_renderer_summary, site_status_colors
from ttmap.products.styles import OGC_NAMESPACE, SLD_NAMESPACE

DEMO_DIR = Path(__file__).resolve().parents[2] / "ttmap" / "demo_data"
DEMO_TIF = DEMO_DIR / "demo_bathymetry.tif"
DEMO_SITES = DEMO_DIR / "demo_sites.csv"

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
# The SLD files the jobs wrote: the classes and colours QGIS must show too
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


# ---------------------------------------------------------------------------
# The runs, and what each of their layers should look like in QGIS
# ---------------------------------------------------------------------------

#: Two ruptures along the invented trench and a point over the invented
#: seamount, on a crop of the demo grid (invented data).
_SCENARIOS = f"""\
[bathymetry]
path = "{DEMO_TIF.as_posix()}"
coarsen = 2
crop_lonlat = [-148.0, -36.0, -141.0, -31.0]

[[trench]]
name_prefix = "arc"
polyline = [[-144.30, -33.0], [-144.45, -34.0]]
spacing_km = 70
mw = 8.0
max_time_h = 3

[[scenario]]
name = "seamount-point"
point = [-146.90, -33.30]
max_time_h = 3

[outputs]
folder = "out"
envelope = true
compare = [["arc-01", "seamount-point"]]
executor = "serial"
"""


def _isochrone_stem(path: Path) -> str:
    """The isochrone output a Shapefile / GeoJSON layer file belongs to."""
    return path.stem.rsplit("_isochrone_", 1)[0]


def _expect_raster(tif: Path) -> dict[str, Any]:
    exp: dict[str, Any] = {"kind": "raster", "uri": str(tif)}
    sld = tif.with_suffix(".sld")
    stem = tif.stem
    if stem in ("site_centred_first_site", "envelope_first_scenario"):
        import rasterio

        with rasterio.open(tif) as src:
            tags = src.tags()
        prefix = "SITE_" if stem.startswith("site") else "SCENARIO_"
        count = int(tags["SITE_COUNT"] if prefix == "SITE_" else tags["SCENARIOS"])
        exp.update(renderer="paletted", labels=[tags[f"{prefix}{i}"] for i in range(count)])
        if sld.is_file():
            _, entries = _sld_color_map(sld)
            visible = [e for e in entries if e[2] > 0]
            exp["colors"] = [e[1] for e in visible]
            if len(visible) > count:  # tie classes after the scenarios, named in the SLD
                exp["labels"] += [e[3] for e in visible[count:]]
    elif stem == "envelope_first_scenario_tie":
        from ttmap.products.scenario_maps import TIE_CLASSES

        exp.update(renderer="paletted", labels=[lab for _, lab, _ in TIE_CLASSES])
        _, entries = _sld_color_map(sld)
        exp["colors"] = [e[1] for e in entries if e[2] > 0]
    elif stem.startswith("difference_"):
        exp.update(renderer="singlebandpseudocolor", ramp="INTERPOLATED", diverging=True)
    else:
        exp.update(renderer="singlebandpseudocolor", ramp="INTERPOLATED")
        if sld.is_file():
            kind, entries = _sld_color_map(sld)
            visible = [e for e in entries if e[2] > 0]
            if kind == "intervals":
                exp.update(ramp="DISCRETE", colors=[e[1] for e in visible])
            else:
                exp.update(levels=[e[0] for e in visible], colors=[e[1] for e in visible])
    return exp


def _expect_bands(uri: str, path: Path, layer: str | None, sld: Path, attr: str) -> dict[str, Any]:
    cols = _read_columns(path, layer, [attr])
    rules = _sld_rules(sld)
    # the SLD's rules are one per band, earliest first, each filtering on its lower bound
    lowers = [r[0] for r in rules]
    values = [float(v) for v in cols[attr]]
    if attr == "minutes":  # the upper bound: class i holds (lower_i, upper_i]
        mins = _read_columns(path, layer, ["label"])["label"]
        assert len(mins) == len(values)
    return {"kind": "vector", "uri": uri, "renderer": "graduatedSymbol", "classes": len(rules),
            "colors": [r[2] for r in rules], "band_bound": attr, "lowers": lowers, "feature_values": values}


def _expect_vectors(path: Path) -> dict[str, dict[str, Any]]:
    import pyogrio

    out: dict[str, dict[str, Any]] = {}
    if path.suffix == ".gpkg":
        layers = [str(n) for n, _ in pyogrio.list_layers(path) if str(n) != "layer_styles"]
        for layer in layers:
            out[f"{path.name}|{layer}"] = _expect_layer(f"{path}|layername={layer}", path, layer,
                                                         stem=path.stem)
    else:
        stem = _isochrone_stem(path) if "_isochrone_" in path.stem else path.stem
        layer = ("isochrone_bands" if path.stem.endswith("_isochrone_bands") else
                 "isochrone_lines" if path.stem.endswith("_isochrone_lines") else
                 "sites" if path.stem == "sites" else
                 "wave_paths" if path.stem == "wave_paths" else COAST_LAYER_NAME)
        out[path.name] = _expect_layer(str(path), path, None, stem=stem, layer_kind=layer)
    return out


def _expect_layer(uri: str, path: Path, layer: str | None, *, stem: str, layer_kind: str | None = None) -> dict[str, Any]:
    kind = layer_kind or layer
    folder = path.parent
    if kind == "isochrone_lines":
        return {"kind": "vector", "uri": uri, "renderer": "singleSymbol", "classes": 1, "label_field": "label"}
    if kind == "isochrone_bands":
        sld = folder / f"{stem}_bands.sld"
        attr = "min_minutes" if path.suffix == ".gpkg" else "minutes"
        return _expect_bands(uri, path, layer, sld, attr)
    if kind == COAST_LAYER_NAME:
        rules = _sld_rules(folder / f"{stem}.sld")
        classes = [r for r in rules if r[0] is not None]
        cols = _read_columns(path, layer, ["class_min"])
        return {"kind": "vector", "uri": uri, "renderer": "categorizedSymbol", "classes": len(rules),
                "colors": [r[2] for r in classes] + [r[2] for r in rules if r[0] is None],
                "class_values": [r[0] for r in classes],
                "feature_class": [None if v is None or not np.isfinite(v) else float(v) for v in cols["class_min"]]}
    if kind == "wave_paths":  # the first wave's routes: one line symbol, labelled by site name
        return {"kind": "vector", "uri": uri, "renderer": "singleSymbol", "classes": 1, "label_field": "name"}
    if kind == "sites":
        status = _read_columns(path, layer, ["budget_status"])["budget_status"]
        return {"kind": "vector", "uri": uri, "renderer": "categorizedSymbol",
                "classes": len(site_status_colors()) + 1, "label_field": "name", "status": status}
    raise AssertionError(f"unexpected layer {uri}")


def _expectations(folder: Path) -> dict[str, dict[str, Any]]:
    """Every raster and vector layer the run's record lists, with what QGIS should show."""
    record = json.loads((folder / "run.json").read_text(encoding="utf-8"))
    products = [folder / p for p in record["products"]]
    expect: dict[str, dict[str, Any]] = {}
    for p in products:
        key = f"{folder.name}/{p.name}"
        if p.suffix == ".tif":
            expect[key] = _expect_raster(p)
        elif p.suffix in (".gpkg", ".shp", ".geojson"):
            for k, v in _expect_vectors(p).items():
                expect[f"{folder.name}/{k}"] = v
    # every style file beside a layer is listed in the record too (and so in the plan)
    listed = {p.name for p in products}
    for qml in style_files(products):
        assert qml.is_file() and qml.name in listed, qml
    assert REPORT_NAME in listed
    return expect


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    from click.testing import CliRunner

    from ttmap.cli.main import cli

    base = tmp_path_factory.mktemp("qgis")
    runner = CliRunner()

    def run(*args: str) -> None:
        result = runner.invoke(cli, [*args, "-q"])
        assert result.exit_code == 0, result.output

    run("demo", "--out", str(base / "demo"))
    run("map", str(DEMO_TIF), "--source", "-144.9,-34.2", "--sites", str(DEMO_SITES), "--coarsen", "2",
        "--vector-format", "shp", "--vector-format", "geojson", "--no-map", "--out", str(base / "formats"))
    run("site-map", str(DEMO_TIF), "--sites", str(DEMO_SITES), "--coarsen", "3", "--no-map",
        "--out", str(base / "sitemap"))
    toml = base / "scenarios.toml"
    toml.write_text(textwrap.dedent(_SCENARIOS), encoding="utf-8")
    run("scenario", "run", str(toml), "--executor", "serial", "--out", str(base / "scenario"))
    return {"demo": base / "demo", "site_maps": base / "demo" / "site_maps", "formats": base / "formats",
            "sitemap": base / "sitemap", "scenario": base / "scenario"}


@pytest.fixture(scope="module")
def expected(runs: dict[str, Path]) -> dict[str, dict[str, Any]]:
    expect: dict[str, dict[str, Any]] = {}
    for folder in runs.values():
        expect.update(_expectations(folder))
    return expect


@requires_qgis
def test_every_layer_the_jobs_write_opens_styled_in_qgis(expected: dict[str, dict[str, Any]]) -> None:
    items = [{"id": k, "kind": v["kind"], "uri": v["uri"]} for k, v in expected.items()]
    got = _open_in_qgis(items)
    assert set(got) == set(expected)
    kinds = sorted({(k.split("/")[0], v["renderer"]) for k, v in got.items()})
    print(f"{len(got)} layers opened in QGIS; (run, renderer) pairs: {kinds}")
    names = {k.split("/", 1)[1] for k in got}
    # every kind of layer is among them
    assert {"arrival_front.tif", "arrival_group_T300s.tif", "site_centred_Tarnquill_Harbour.tif",
            "minutes_left_Tarnquill_Harbour.tif", "coast_front.gpkg|coastal_arrival",
            "isochrones_front.gpkg|isochrone_bands", "isochrones_front.gpkg|isochrone_lines", "sites.gpkg|sites",
            "sites.geojson", "coast_front.shp", "coast_front.geojson", "isochrones_front_isochrone_bands.shp",
            "isochrones_front_isochrone_bands.geojson", "isochrones_front_isochrone_lines.shp",
            "site_centred_min.tif", "site_centred_first_site.tif", "arrival_arc-01_front.tif",
            "envelope_min.tif", "envelope_first_scenario.tif",
            "difference_arc-01_minus_seamount-point.tif"} <= names, sorted(names)
    status_colors = site_status_colors()
    for key, exp in expected.items():
        rec = got[key]
        assert rec["valid"], key
        assert rec["renderer"] == exp["renderer"], (key, rec["renderer"])
        if exp["kind"] == "raster":
            items_ = rec["items"]
            if exp["renderer"] == "paletted":
                assert [i[3] for i in items_] == exp["labels"], key
                if "colors" in exp:
                    assert [i[1] for i in items_] == exp["colors"], key
            elif exp.get("diverging"):
                vals = [i[0] for i in items_]
                assert rec["ramp"] == "INTERPOLATED" and len(vals) % 2 == 1, key
                mid = len(vals) // 2
                assert vals[mid] == 0.0 and vals[0] == -vals[-1] < 0, (key, vals)
            else:
                assert rec["ramp"] == exp["ramp"], key
                if exp["ramp"] == "DISCRETE":
                    # first item transparent (below the first level), then one per SLD colour
                    assert items_[0][2] == 0 and [i[1] for i in items_[1:]] == exp["colors"], key
                elif "levels" in exp:
                    assert [round(i[0], 6) for i in items_] == [round(v, 6) for v in exp["levels"]], key
                    assert [i[1] for i in items_] == exp["colors"], key
                else:  # scenario rasters (no SLD): a ramp from 0, increasing
                    vals = [i[0] for i in items_]
                    assert vals[0] == 0.0 and len(vals) >= 2 and vals == sorted(vals), (key, vals)
            continue
        assert rec["classes"] == exp["classes"], (key, rec["classes"], exp["classes"])
        assert rec["features_without_symbol"] == 0, key
        if "label_field" in exp:
            assert rec["labels"] and rec["label_field"] == exp["label_field"], key
        if "colors" in exp:
            assert rec["class_colors"] == exp["colors"], key
        if "band_bound" in exp:
            # each band is drawn in the colour of the SLD rule of its lower bound
            lowers, colors = exp["lowers"], exp["colors"]
            if exp["band_bound"] == "min_minutes":
                want = [colors[lowers.index(v)] for v in exp["feature_values"]]
            else:  # classified on the upper bound: the band whose lower bound is the largest below it
                want = [colors[max(i for i, lo in enumerate(lowers) if lo < v)] for v in exp["feature_values"]]
            assert rec["feature_colors"] == want, key
        if "class_values" in exp:
            by_value = dict(zip(exp["class_values"], exp["colors"]))
            for value, color in zip(exp["feature_class"], rec["feature_colors"], strict=True):
                assert color == by_value.get(value, exp["colors"][-1]), (key, value, color)
        if "status" in exp:
            for status, color in zip(exp["status"], rec["feature_colors"], strict=True):
                assert color == status_colors[status], key


@requires_qgis
def test_the_styles_are_what_changed(runs: dict[str, Path], tmp_path: Path) -> None:
    """The same data without the styles beside or inside it opens plain in QGIS."""
    import pyogrio

    demo = runs["demo"]
    shutil.copy(demo / "arrival_front.tif", tmp_path / "arrival_front.tif")
    meta, _, wkb, fields = pyogrio.raw.read(demo / "isochrones_front.gpkg", layer="isochrone_bands")
    pyogrio.raw.write(tmp_path / "bands.gpkg", wkb, fields, fields=meta["fields"], layer="isochrone_bands",
                      crs=meta["crs"], geometry_type=meta["geometry_type"], driver="GPKG")
    got = _open_in_qgis([
        {"id": "r", "kind": "raster", "uri": str(tmp_path / "arrival_front.tif")},
        {"id": "b", "kind": "vector", "uri": f"{tmp_path / 'bands.gpkg'}|layername=isochrone_bands"},
    ])
    assert got["r"]["valid"] and got["r"]["renderer"] == "singlebandgray"
    assert got["b"]["valid"] and got["b"]["renderer"] == "singleSymbol"


def test_styles_are_stored_where_clients_look(runs: dict[str, Path]) -> None:
    demo = runs["demo"]
    assert qml_path_for(demo / "arrival_front.tif").is_file()
    rows = read_gpkg_layer_styles(demo / "isochrones_front.gpkg")
    assert sorted(r["f_table_name"] for r in rows) == ["isochrone_bands", "isochrone_lines"]
    assert all(r["useAsDefault"] == 1 and r["f_geometry_column"] == "geom" for r in rows)
    assert all(r["styleSLD"].lstrip().startswith("<?xml") or "StyledLayerDescriptor" in r["styleSLD"] for r in rows)
    summary = qml_renderer_summary(next(r["styleQML"] for r in rows if r["f_table_name"] == "isochrone_bands"))
    assert summary["renderer"] == "graduatedSymbol"
    # every SLD (raster, bands, lines, coast) still parses and is an SLD
    slds = [p for folder in runs.values() for p in folder.glob("*.sld")]
    assert len(slds) >= 10
    for sld in slds:
        assert ET.parse(sld).getroot().tag == f"{{{SLD_NAMESPACE}}}StyledLayerDescriptor", sld


@requires_gdal_tools
def test_gdal_still_opens_every_styled_file(runs: dict[str, Path]) -> None:
    for folder in runs.values():
        for tif in folder.glob("*.tif"):
            done = subprocess.run(["gdalinfo", str(tif)], capture_output=True, text=True)
            assert done.returncode == 0 and "ERROR" not in done.stderr, (tif, done.stderr)
        vectors = [*folder.glob("*.gpkg"), *folder.glob("*.shp"), *folder.glob("*.geojson")]
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
