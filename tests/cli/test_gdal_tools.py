"""Products open in GDAL's own command-line tools, not only through Python bindings.

``gdalinfo`` and ``ogrinfo`` come with the ``gdal-bin`` package (their own GDAL
build, independent of the one inside rasterio/pyogrio wheels). Skipped when the
tools are not installed.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import pyogrio
import pytest
import rasterio

pytestmark = pytest.mark.skipif(
    shutil.which("gdalinfo") is None or shutil.which("ogrinfo") is None,
    reason="GDAL command-line tools (gdal-bin) not installed",
)


def run_tool(*args: str | Path) -> str:
    proc = subprocess.run(
        [str(a) for a in args], capture_output=True, text=True, check=False, timeout=60
    )
    assert proc.returncode == 0, f"{args[0]} failed: {proc.stderr}"
    return proc.stdout


def test_gdalinfo_reads_the_arrival_geotiff(utm_run):
    tif = utm_run["out"] / "arrival_front.tif"
    info = json.loads(run_tool("gdalinfo", "-json", "-mm", tif))
    assert info["driverShortName"] == "GTiff"
    assert info["size"] == [120, 120]
    assert 'ID["EPSG",32759]' in info["coordinateSystem"]["wkt"]
    assert info["metadata"][""]["UNITS"] == "minutes"
    band = info["bands"][0]
    assert band["type"] == "Float32"
    assert band["noDataValue"] == -9999.0
    assert band["unit"] == "min"
    assert "arrival time" in band["description"]
    # GDAL's own min/max skip nodata and agree with rasterio's reading
    with rasterio.open(tif) as src:
        t = src.read(1, masked=True)
    # (gdalinfo prints them with 3 decimals)
    assert band["computedMin"] == pytest.approx(float(t.min()), abs=5e-4)
    assert band["computedMax"] == pytest.approx(float(t.max()), abs=5e-4)
    assert info["metadata"]["IMAGE_STRUCTURE"]["COMPRESSION"] == "DEFLATE"


def _ogrinfo_layers(text: str) -> dict[str, dict]:
    """Layer name -> feature count, field names and CRS text, from ``ogrinfo -so -al``."""
    layers: dict[str, dict] = {}
    blocks = re.split(r"^Layer name: ", text, flags=re.MULTILINE)[1:]
    for block in blocks:
        name = block.splitlines()[0].strip()
        count = int(re.search(r"^Feature Count: (\d+)$", block, re.MULTILINE).group(1))
        fields = re.findall(r"^(\w+): (?:Real|String|Integer|Integer64)\b", block, re.MULTILINE)
        layers[name] = {"count": count, "fields": fields, "text": block}
    return layers


def test_ogrinfo_reads_the_geopackage(utm_run, tmp_path):
    # ogrinfo gets a copy: readers may leave side files next to what they open
    gpkg = tmp_path / "isochrones_front.gpkg"
    shutil.copyfile(utm_run["out"] / "isochrones_front.gpkg", gpkg)
    layers = _ogrinfo_layers(run_tool("ogrinfo", "-ro", "-so", "-al", gpkg))
    # plus QGIS's style table, a plain attributes table (docs/styles.md)
    assert set(layers) == {"isochrone_lines", "isochrone_bands", "layer_styles"}
    assert layers.pop("layer_styles")["count"] == 2
    assert {"minutes", "label"} <= set(layers["isochrone_lines"]["fields"])
    assert {"min_minutes", "max_minutes"} <= set(layers["isochrone_bands"]["fields"])
    for name, layer in layers.items():
        assert layer["count"] == pyogrio.read_info(gpkg, layer=name)["features"] > 0
        assert 'ID["EPSG",32759]' in layer["text"] or "UTM zone 59S" in layer["text"]


def test_ogrinfo_reads_the_geojson_as_wgs84(utm_run, tmp_path):
    for layer in ("isochrone_lines", "isochrone_bands"):
        path = tmp_path / f"{layer}.geojson"
        shutil.copyfile(utm_run["out"] / f"isochrones_front_{layer}.geojson", path)
        (info,) = _ogrinfo_layers(run_tool("ogrinfo", "-ro", "-so", "-al", path)).values()
        assert info["count"] == pyogrio.read_info(path)["features"] > 0
        assert "WGS 84" in info["text"]
        extent = re.search(
            r"^Extent: \(([-\d.]+), ([-\d.]+)\) - \(([-\d.]+), ([-\d.]+)\)",
            info["text"],
            re.MULTILINE,
        )
        lon0, lat0, lon1, lat1 = (float(v) for v in extent.groups())
        # UTM 59 S around x 300-420 km lies near 168-170 E, 34-35.5 S
        assert 168.0 < lon0 < lon1 < 170.5 and -36.0 < lat0 < lat1 < -34.0


def test_ogrinfo_reads_shapefiles(run_cli, spec, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli(
        "map",
        utm_bathymetry,
        "--source-xy",
        f"{x},{y}",
        "--vector-format",
        "shp",
        "--no-map",
        "--out",
        out,
        expect=0,
    )
    for layer in ("isochrone_lines", "isochrone_bands"):
        shp = out / f"isochrones_front_{layer}.shp"
        (info,) = _ogrinfo_layers(run_tool("ogrinfo", "-ro", "-so", "-al", shp)).values()
        assert info["count"] == pyogrio.read_info(shp)["features"] > 0
        assert re.search(r"UTM[ _]zone[ _]59S", info["text"], re.IGNORECASE)
    bands = _ogrinfo_layers(
        run_tool("ogrinfo", "-ro", "-so", "-al", out / "isochrones_front_isochrone_bands.shp")
    )
    assert "min_min" in next(iter(bands.values()))["fields"]  # docs/shapefile-fields.md
