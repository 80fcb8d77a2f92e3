"""``ttmap demo``, ``ttmap info`` and the group's own options, through CliRunner."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
import rasterio

import ttmap
from ttmap.jobs.demo import DEMO_PERIODS_S, DEMO_SOURCE_LONLAT, demo_data_dir


@pytest.fixture(scope="module")
def demo_bathymetry() -> Path:
    return demo_data_dir() / "demo_bathymetry.tif"


def test_demo_writes_products_and_run_record(run_cli, tmp_path):
    out = tmp_path / "demo"
    result = run_cli("demo", "--out", out, expect=0)
    names = {p.name for p in out.iterdir()}
    for key in ("front", "group_T300s"):
        for name in (
            f"arrival_{key}.tif",
            f"arrival_{key}.sld",
            f"isochrones_{key}.gpkg",
            f"isochrones_{key}_lines.sld",
            f"isochrones_{key}_bands.sld",
            f"map_{key}.png",
        ):
            assert name in names
    assert "run.json" in names
    assert not [n for n in names if n.startswith(".")]
    # the folder is printed on stdout (last line), progress says the coast is invented
    assert result.stdout.strip().splitlines()[-1] == str(out.resolve())
    assert "INVENTED" in result.output
    record = json.loads((out / "run.json").read_text())
    assert record["parameters"]["source"]["params"] == {
        "lon": DEMO_SOURCE_LONLAT[0],
        "lat": DEMO_SOURCE_LONLAT[1],
    }
    assert record["parameters"]["speed"]["periods_s"] == list(DEMO_PERIODS_S)
    assert "invented" in record["parameters"]["source"]["label"]
    front = record["product_sets"]["front"]
    assert front["cells_reached"] > 0.9 * front["water_cells"]
    with rasterio.open(out / "arrival_front.tif") as src:
        t = src.read(1, masked=True)
        assert src.crs.to_epsg() == 4326
    assert 0.0 <= float(t.min()) < 5.0 and float(t.max()) > 30.0
    # Without --overwrite a second demo into the same folder is refused up front.
    again = run_cli("demo", "--out", out)
    assert again.exit_code == 1 and "--overwrite" in again.output
    assert "Traceback" not in again.output


def test_info_on_demo_bathymetry(run_cli, demo_bathymetry):
    result = run_cli("info", demo_bathymetry, expect=0)
    text = result.output
    with rasterio.open(demo_bathymetry) as src:
        elev = src.read(1).astype(float)
        rows, cols = src.height, src.width
    assert re.search(r"^CRS:\s+WGS 84 \(EPSG:4326\)$", text, re.MULTILINE)
    assert f"size:          {cols} columns x {rows} rows ({rows * cols:,} cells)" in text
    assert re.search(r"^wraps 360 deg: no$", text, re.MULTILINE)
    # water share: cells below sea level (elevation < 0), printed with one decimal
    share = 100.0 * np.count_nonzero(elev < 0) / elev.size
    m = re.search(r"^water share:\s+([\d.]+) %", text, re.MULTILINE)
    assert m and float(m.group(1)) == pytest.approx(share, abs=0.051)
    m = re.search(r"^estimate:\s+about ([\d.]+) s and ([\d.]+) GiB per solve", text, re.MULTILINE)
    assert m and float(m.group(1)) > 0
    assert "(degrees)" in text and "Mercator rows" in text


def test_info_on_projected_grid(run_cli, spec, utm_bathymetry):
    text = run_cli("info", utm_bathymetry, expect=0).output
    assert "EPSG:32759" in text
    assert "size:          120 columns x 120 rows (14,400 cells)" in text
    assert "cell size:     1,000 m (x) x 1,000 m (y)" in text
    # 110 of 120 columns are water
    assert re.search(r"^water share:\s+91\.7 % \(13,200 cells as solved\)", text, re.MULTILINE)
    assert "wraps 360 deg: no" in text
    assert "(map units)" in text and "Mercator" not in text


def test_info_crop_and_coarsen(run_cli, spec, utm_bathymetry):
    text = run_cli(
        "info",
        utm_bathymetry,
        "--crop-xy",
        "300000,6100000,360000,6200000",
        "--coarsen",
        "2",
        expect=0,
    ).output
    # window 60 km x 100 km of 1 km cells, then 2 x 2 blocks
    assert "size:          30 columns x 50 rows" in text
    assert "cell size:     2,000 m" in text
    assert "note:" in text and "coarsened by 2" in text


def test_info_errors(run_cli, spec, utm_bathymetry, tmp_path):
    both = run_cli("info", utm_bathymetry, "--crop-xy", "1,2,3,4", "--crop-lonlat", "1,2,3,4")
    assert both.exit_code == 2 and "--crop-lonlat" in both.output
    bad = run_cli("info", utm_bathymetry, "--crop-xy", "4,3,2,1")
    assert bad.exit_code == 2 and "--crop-xy" in bad.output
    missing = run_cli("info", tmp_path / "nothing.tif")
    assert missing.exit_code == 1 and "does not exist" in missing.output
    assert "Traceback" not in missing.output


def test_group_options(run_cli):
    version = run_cli("--version", expect=0)
    assert version.output.strip() == f"ttmap, version {ttmap.__version__}"
    helptext = run_cli("--help", expect=0).output
    for name in ("map", "demo", "info"):
        assert re.search(rf"^\s+{name}\s", helptext, re.MULTILINE)
    assert "not a warning" in helptext
    both = run_cli("-v", "-q", "info", "x.tif")
    assert both.exit_code == 2 and "--verbose" in both.output and "--quiet" in both.output
    map_help = run_cli("map", "--help", expect=0).output
    for option in (
        "--source",
        "--source-xy",
        "--source-file",
        "--rupture-centre",
        "--period-s",
        "--max-time-h",
        "--isochrone-interval-min",
        "--vector-format",
        "--overwrite",
    ):
        assert option in map_help


def test_info_counts_small_islands(run_cli, spec, tmp_path):
    """One 4 x 3-cell island in open water is counted; the coastal strip at the edge is not."""
    elev = spec.utm_elevation()
    elev[40:44, 50:53] = 15.0
    elev[80, 80] = 10.0  # a single-cell rock: not an island that bends fronts much
    path = spec.write_geotiff(tmp_path / "island.tif", elev, crs=spec.UTM_CRS, transform=spec.UTM_TRANSFORM)
    text = run_cli("info", path, expect=0).output
    assert "small islands: 1 under 10 cells across" in text
    plain = run_cli("info", spec.write_geotiff(tmp_path / "plain.tif", spec.utm_elevation(), crs=spec.UTM_CRS,
                                               transform=spec.UTM_TRANSFORM), expect=0).output
    assert "small islands" not in plain
