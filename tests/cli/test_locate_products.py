"""``ttmap locate`` products: styled layers, the gauges layer and report.html, like every other job.

One locate run on the demo picks (ttmap/demo_data/demo_picks.csv, INVENTED:
a forward solve of an invented source on the invented demo grid). Checks:

- every file is written, listed in ``run.json`` ``products`` and staged
  whole; ``--no-report`` leaves the report out; an existing style file is
  refused without ``--overwrite`` like any product;
- both GeoPackages carry a default ``layer_styles`` row; the gauges layer
  holds the residual table's values;
- the misfit style's class bounds include the region level written in the
  raster's own tags (best misfit + Delta chi-square; docs/references.md
  section 12, Numerical Recipes ch. 15.6, from memory);
- QGIS (system Python, headless; skipped when absent) opens every layer
  with the renderer and class count the style asks for, and the region's
  colours equal those of the SLD beside it;
- headless Chromium (skipped when absent) loads the report offline with no
  console error.
"""

from __future__ import annotations

import csv
import json
import shutil
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from ttmap.jobs.locate import GAUGES_LAYER, LOCATE_FILES, REGION_LAYER
from ttmap.products.qml import qml_renderer_summary
from ttmap.products.styles import SLD_NAMESPACE

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "ttmap" / "demo_data"
TIF = DEMO / "demo_bathymetry.tif"
PICKS = DEMO / "demo_picks.csv"
SYSTEM_PYTHON = "/usr/bin/python3"
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.fixture(scope="module")
def run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    from click.testing import CliRunner

    from ttmap.cli.main import cli

    out = tmp_path_factory.mktemp("locate_products") / "where"
    result = CliRunner().invoke(cli, ["locate", str(TIF), "--picks", str(PICKS), "--out", str(out), "-q"])
    assert result.exit_code == 0, result.output
    return out


def test_every_file_is_written_and_listed(run: Path) -> None:
    record = json.loads((run / "run.json").read_text())
    assert record["products"] == [*LOCATE_FILES, "report.html"]
    for name in record["products"]:
        assert (run / name).is_file(), name
    assert sorted(p.name for p in run.iterdir()) == sorted([*LOCATE_FILES, "report.html", "run.json"])
    assert "report_s" in record["timings_s"]
    from ttmap.jobs.record import validate_run_record

    assert validate_run_record(record) == []


def test_styles_sit_where_qgis_looks(run: Path) -> None:
    from ttmap.io.styles import read_gpkg_layer_styles

    for tif in ("locate_misfit", "locate_origin_time"):
        assert qml_renderer_summary((run / f"{tif}.qml").read_text())["renderer"] == "singlebandpseudocolor"
    for gpkg, layer in (("locate_region.gpkg", REGION_LAYER), ("locate_gauges.gpkg", GAUGES_LAYER)):
        rows = read_gpkg_layer_styles(run / gpkg)
        assert [(r["f_table_name"], r["useAsDefault"]) for r in rows] == [(layer, 1)], gpkg
        assert rows[0]["styleQML"].lstrip().startswith("<!DOCTYPE qgis")
    # the style table does not make the files two-layer files for ttmap's readers
    from ttmap.io.vector import read_vector_geometries

    assert len(read_vector_geometries(run / "locate_gauges.gpkg")[0]) == len(
        json.loads((run / "run.json").read_text())["picks"])
    region_rows = read_gpkg_layer_styles(run / "locate_region.gpkg")
    assert region_rows[0]["styleSLD"] == (run / "locate_region.sld").read_text()
    assert region_rows[0]["styleQML"] == (run / "locate_region.qml").read_text()


def test_misfit_style_cuts_at_the_region_level_of_the_raster(run: Path) -> None:
    import rasterio

    with rasterio.open(run / "locate_misfit.tif") as src:
        tags = src.tags()
        misfit = src.read(1, masked=True).filled(np.nan)
    level = float(tags["BEST_MISFIT"]) + float(tags["DELTA_CHI2"])
    root = ET.fromstring((run / "locate_misfit.qml").read_text().split("\n", 1)[1])
    items = root.findall(".//colorrampshader/item")
    uppers = [float(i.get("value", "nan")) for i in items]
    assert any(abs(u - level) < 1e-3 for u in uppers), (uppers, level)
    # cells drawn in an "inside" class are the region's cells (the region polygon's rule)
    idx = np.searchsorted(np.asarray(uppers), misfit[np.isfinite(misfit)], side="left")
    inside_label = np.array(["inside" in (i.get("label") or "") for i in items])[idx]
    loc = json.loads((run / "run.json").read_text())["location"]
    assert int(inside_label.sum()) == loc["region"]["region_cells"]


def test_gauges_layer_holds_the_residual_table(run: Path) -> None:
    import pyogrio

    table = list(csv.DictReader(ln for ln in (run / "locate_residuals.csv").read_text().splitlines()
                                if not ln.startswith("#")))
    meta, _, geoms, fields = pyogrio.raw.read(run / "locate_gauges.gpkg", layer=GAUGES_LAYER)
    cols = dict(zip(list(meta["fields"]), fields, strict=True))
    assert list(cols["name"]) == [r["name"] for r in table]
    # the CSV rounds minutes to 2 decimals and metres to whole metres
    for key, tol in (("observed_min", 0.006), ("predicted_min", 0.006), ("residual_min", 0.006), ("moved_m", 0.5)):
        np.testing.assert_allclose(cols[key].astype(float), [float(r[key]) for r in table], atol=tol)
    assert len(geoms) == len(table)


def test_no_report_and_refusals(run: Path, tmp_path: Path, run_cli: Any) -> None:
    out = tmp_path / "plain"
    run_cli("locate", TIF, "--picks", PICKS, "--out", out, "--no-report", "-q")
    record = json.loads((out / "run.json").read_text())
    assert "report.html" not in record["products"] and not (out / "report.html").exists()
    assert record["parameters"]["report"] is False
    # a style file of the plan is an output like any other: refused without --overwrite
    other = tmp_path / "other"
    other.mkdir()
    (other / "locate_misfit.qml").write_text("mine")
    result = run_cli("locate", TIF, "--picks", PICKS, "--out", other, expect=1)
    assert "locate_misfit.qml" in result.output and "--overwrite" in result.output
    assert (other / "locate_misfit.qml").read_text() == "mine"


# ---------------------------------------------------------------------------
# QGIS
# ---------------------------------------------------------------------------


def _qgis_available() -> bool:
    if not Path(SYSTEM_PYTHON).exists():
        return False
    try:
        done = subprocess.run([SYSTEM_PYTHON, "-c", "import qgis.core"], capture_output=True, timeout=60,
                              env={"QT_QPA_PLATFORM": "offscreen", "PATH": "/usr/bin:/bin"})
    except (OSError, subprocess.TimeoutExpired):
        return False
    return done.returncode == 0


_QGIS_SCRIPT = r"""
import json, sys
from qgis.core import QgsApplication, QgsRasterLayer, QgsVectorLayer
app = QgsApplication([], False)
app.initQgis()
out = {}
d = sys.argv[1]
for name in ("locate_misfit", "locate_origin_time"):
    lyr = QgsRasterLayer(f"{d}/{name}.tif", name)
    r = lyr.renderer()
    fn = r.shader().rasterShaderFunction() if r.type() == "singlebandpseudocolor" else None
    out[name] = {"valid": lyr.isValid(), "renderer": r.type(),
                 "ramp": fn.colorRampTypeAsQString() if fn else None,
                 "items": [[i.value, i.color.name()] for i in fn.colorRampItemList()] if fn else []}
for name, layer in (("locate_region", "confidence_region"), ("locate_gauges", "gauges")):
    lyr = QgsVectorLayer(f"{d}/{name}.gpkg|layername={layer}", name, "ogr")
    r = lyr.renderer()
    rec = {"valid": lyr.isValid(), "renderer": r.type(), "features": lyr.featureCount(),
           "labels": bool(lyr.labelsEnabled())}
    if r.type() == "singleSymbol":
        sl = r.symbol().symbolLayer(0)
        rec["fill"] = sl.color().name(); rec["fill_alpha"] = sl.color().alpha()
        rec["stroke"] = sl.strokeColor().name(); rec["classes"] = 1
    elif r.type() == "graduatedSymbol":
        rec["classes"] = len(r.ranges()); rec["attr"] = r.classAttribute()
    out[name] = rec
print("QGISJSON" + json.dumps(out))
"""


@pytest.mark.skipif(not _qgis_available(), reason="QGIS Python API (python3-qgis) not found")
def test_every_locate_layer_opens_styled_in_qgis(run: Path) -> None:
    done = subprocess.run(
        [SYSTEM_PYTHON, "-c", _QGIS_SCRIPT, str(run)], capture_output=True, text=True, timeout=300,
        env={"QT_QPA_PLATFORM": "offscreen", "PATH": "/usr/bin:/bin", "HOME": "/tmp", "XDG_RUNTIME_DIR": "/tmp"},
    )
    line = next((ln for ln in done.stdout.splitlines() if ln.startswith("QGISJSON")), None)
    assert line is not None, done.stderr[-3000:]
    got = json.loads(line[len("QGISJSON"):])
    for name in ("locate_misfit", "locate_origin_time"):
        rec = got[name]
        assert rec["valid"] and rec["renderer"] == "singlebandpseudocolor" and rec["ramp"] == "DISCRETE", name
        want = ET.fromstring((run / f"{name}.qml").read_text().split("\n", 1)[1]).findall(".//item")
        assert [c for _, c in rec["items"]] == [i.get("color") for i in want], name
        assert len(rec["items"]) >= 5
    region = got["locate_region"]
    sld = {c.get("name"): c.text for c in ET.parse(run / "locate_region.sld").getroot().iter(
        f"{{{SLD_NAMESPACE}}}CssParameter")}
    assert region["valid"] and region["renderer"] == "singleSymbol" and region["features"] >= 1
    assert region["fill"] == sld["fill"] and region["stroke"] == sld["stroke"]
    assert region["fill_alpha"] == round(255 * float(sld["fill-opacity"]))
    gauges = got["locate_gauges"]
    assert gauges["valid"] and gauges["renderer"] == "graduatedSymbol"
    assert gauges["classes"] == 7 and gauges["attr"] == "normalised" and gauges["labels"]
    assert gauges["features"] == len(json.loads((run / "run.json").read_text())["picks"])


# ---------------------------------------------------------------------------
# Chromium
# ---------------------------------------------------------------------------


@pytest.mark.skipif(CHROMIUM is None, reason="headless chromium not found")
def test_locate_report_loads_offline_without_console_errors(run: Path) -> None:
    assert CHROMIUM is not None
    report = run / "report.html"
    done = subprocess.run(
        [CHROMIUM, "--headless", "--disable-gpu", "--no-sandbox", "--no-first-run",
         "--proxy-server=127.0.0.1:9", "--proxy-bypass-list=<-loopback>", "--disable-background-networking",
         "--disable-extensions", "--enable-logging=stderr", "--v=0", "--dump-dom", report.as_uri()],
        capture_output=True, text=True, timeout=180, cwd=run, env={"PATH": "/usr/bin:/bin", "HOME": str(run)},
    )
    assert done.returncode == 0, done.stderr[-2000:]
    console = [ln for ln in done.stderr.splitlines() if "CONSOLE" in ln or "Uncaught" in ln]
    assert console == [], console
    page = done.stdout
    assert 'data-report-ready="1"' in page
    for section in ("caution", "run", "maps", "sites", "record", "products"):
        assert f'<section id="{section}"' in page, section
    assert "<h2>Gauges</h2>" in page and "Analysis aid only" in page and "Best cell" in page
    record = json.loads((run / "run.json").read_text())
    for row in record["picks"]:
        assert row["name"] in page
    assert "http://" not in page.replace("http://www.w3.org", "") and "https://" not in page
