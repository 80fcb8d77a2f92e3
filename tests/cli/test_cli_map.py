"""``ttmap map`` through click's CliRunner: options, products, exit codes, safety.

Exit codes follow click's convention (documented in ``ttmap.cli.main``):
0 success, 1 an input or run error (one line, no traceback), 2 a usage error
naming the option. Grids are the invented fixtures of ``tests/cli/conftest.py``.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import rasterio

from ttmap.errors import InputDataError

REPO = Path(__file__).resolve().parents[2]


def product_files(out: Path) -> set[str]:
    return {p.name for p in out.iterdir()} if out.exists() else set()  # a failed run leaves no folder


def arrival(path: Path) -> np.ma.MaskedArray:
    with rasterio.open(path) as src:
        return src.read(1, masked=True)


def _sld_property_names(path: Path) -> set[str]:
    import xml.etree.ElementTree as ET

    ogc = "{http://www.opengis.net/ogc}"
    return {e.text for e in ET.parse(path).getroot().iter(f"{ogc}PropertyName")}


def leftovers(out: Path) -> list[str]:
    """Temporary names the atomic writers use (``.x.tmp-...``, ``.ttmap-stage-...``)."""
    if not out.exists():
        return []
    return [p.name for p in out.iterdir() if ".tmp" in p.name or p.name.startswith(".ttmap-stag")]


# ---------------------------------------------------------------------------
# Sources
# ---------------------------------------------------------------------------


def test_source_lonlat_on_projected_grid(run_cli, spec, utm_bathymetry, tmp_path):
    """--source LON,LAT is carried into the grid's CRS: the earliest cell is the source cell."""
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli(
        "map", utm_bathymetry, "--source", spec.lonlat_arg(x, y), "--no-map", "--out", out, expect=0
    )
    t = arrival(out / "arrival_front.tif")
    row, col = np.unravel_index(np.ma.argmin(t), t.shape)
    # the source lies at the centre of cell (59, 60)
    assert (row, col) == (59, 60)
    record = json.loads((out / "run.json").read_text())
    s = record["product_sets"]["front"]
    assert (s["source_row"], s["source_col"]) == (59, 60)
    # the pyproj round trip of the source position is exact to well below a metre
    assert abs(s["source_x"] - x) < 1.0 and abs(s["source_y"] - y) < 1.0


@pytest.mark.parametrize("form", ["separate", "equals"])
def test_negative_lonlat_source_forms_parse(run_cli, spec, geo_bathymetry, tmp_path, form):
    """``--source -70.5,-33.2`` and ``--source=-70.5,-33.2`` are values, not options."""
    out = tmp_path / "out"
    args = ["--source", spec.GEO_SOURCE] if form == "separate" else [f"--source={spec.GEO_SOURCE}"]
    run_cli("map", geo_bathymetry, *args, "--no-map", "--out", out, expect=0)
    record = json.loads((out / "run.json").read_text())
    assert record["parameters"]["source"]["params"] == {"lon": -70.5, "lat": -33.2}
    s = record["product_sets"]["front"]
    # cell (row, col) holding (-70.5, -33.2): col = (-70.5 + 72) / 0.05, row = (-32 + 33.2) / 0.05
    assert (s["source_row"], s["source_col"]) == (24, 30)


def test_source_xy(run_cli, spec, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    run_cli(
        "map", utm_bathymetry, "--source-xy", "320500,6100500", "--no-map", "--out", out, expect=0
    )
    t = arrival(out / "arrival_front.tif")
    # cell (99, 20) holds (320500, 6100500): col = 20500 / 1000, row = 99500 / 1000
    assert np.unravel_index(np.ma.argmin(t), t.shape) == (99, 20)


def test_rupture_with_length_and_width(run_cli, spec, utm_bathymetry, tmp_path):
    """A 40 km x 20 km rupture starts at time zero on every water cell inside it."""
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli(
        "map",
        utm_bathymetry,
        "--rupture-centre",
        spec.lonlat_arg(x, y),
        "--strike-deg",
        "0",
        "--length-km",
        "40",
        "--width-km",
        "20",
        "--no-map",
        "--out",
        out,
        expect=0,
    )
    t = arrival(out / "arrival_front.tif")
    record = json.loads((out / "run.json").read_text())
    src = record["parameters"]["source"]
    assert src["kind"] == "rupture"
    assert src["params"]["length_km"] == 40.0 and src["params"]["width_km"] == 20.0
    # Cells well inside the rectangle (here within 15 km N-S and 7 km E-W of the
    # centre; grid north is within 1.5 deg of true north here) start at 0.
    rows = slice(59 - 15, 59 + 16)
    cols = slice(60 - 7, 60 + 8)
    assert np.all(t[rows, cols] == 0.0)
    # Just outside the long side, 10 km + 3 cells east, the time is about
    # 3 km / sqrt(g h) (h = 100 m, g = 9.80665): 1.6 min; allow a cell either way.
    t_east = float(t[59, 60 + 13])
    assert 2000.0 / np.sqrt(9.80665 * 100.0) / 60 < t_east < 4000.0 / np.sqrt(9.80665 * 100.0) / 60


def test_rupture_from_magnitude(run_cli, spec, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli(
        "map",
        utm_bathymetry,
        "--rupture-centre",
        spec.lonlat_arg(x, y),
        "--strike-deg",
        "20",
        "--magnitude-mw",
        "7.0",
        "--no-map",
        "--out",
        out,
        expect=0,
    )
    record = json.loads((out / "run.json").read_text())
    params = record["parameters"]["source"]["params"]
    assert params["mw"] == 7.0 and params["scaling_relation"] == "strasser2010-interface"
    assert params["length_km"] > params["width_km"] > 0
    assert record["product_sets"]["front"]["source_start_cells"] > 1


def test_source_file_polygon(run_cli, spec, utm_bathymetry, tmp_path):
    """A GeoJSON polygon (lon/lat, RFC 7946) is a source area: zero time inside it."""
    from pyproj import Transformer

    tr = Transformer.from_crs(spec.UTM_CRS, "EPSG:4326", always_xy=True)
    x, y = spec.UTM_SOURCE_XY
    ring = [
        tr.transform(x + dx, y + dy)
        for dx, dy in (
            (-10_000, -5_000),
            (10_000, -5_000),
            (10_000, 5_000),
            (-10_000, 5_000),
            (-10_000, -5_000),
        )
    ]
    doc = {
        "type": "FeatureCollection",
        "features": [
            {
                "type": "Feature",
                "properties": {"name": "invented source area"},
                "geometry": {"type": "Polygon", "coordinates": [[list(p) for p in ring]]},
            }
        ],
    }
    src_file = tmp_path / "source.geojson"
    src_file.write_text(json.dumps(doc))
    out = tmp_path / "out"
    run_cli("map", utm_bathymetry, "--source-file", src_file, "--no-map", "--out", out, expect=0)
    t = arrival(out / "arrival_front.tif")
    # cells whose centres lie 2 km inside the 20 km x 10 km rectangle
    assert np.all(t[59 - 3 : 59 + 4, 60 - 8 : 60 + 9] == 0.0)
    assert float(t[59, 60 + 20]) > 0.0
    record = json.loads((out / "run.json").read_text())
    assert record["parameters"]["source"]["kind"] == "area"


# ---------------------------------------------------------------------------
# Product options
# ---------------------------------------------------------------------------


def test_repeated_period_gives_one_product_set_each(run_cli, spec, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli(
        "map",
        utm_bathymetry,
        "--source-xy",
        f"{x},{y}",
        "--period-s",
        "300",
        "--period-s",
        "600",
        "--no-map",
        "--out",
        out,
        expect=0,
    )
    names = product_files(out)
    for key in ("front", "group_T300s", "group_T600s"):
        for name in (
            f"arrival_{key}.tif",
            f"arrival_{key}.sld",
            f"isochrones_{key}.gpkg",
            f"isochrones_{key}_lines.sld",
            f"isochrones_{key}_bands.sld",
        ):
            assert name in names
    record = json.loads((out / "run.json").read_text())
    assert list(record["product_sets"]) == ["front", "group_T300s", "group_T600s"]
    assert record["product_sets"]["group_T600s"]["period_s"] == 600.0
    # Group speed never exceeds sqrt(g h) (linear dispersion omega^2 = g k tanh(k h)),
    # so energy arrives no earlier than the front anywhere.
    front = arrival(out / "arrival_front.tif")
    t600 = arrival(out / "arrival_group_T600s.tif")
    assert np.all((t600 - front).compressed() >= -1e-3)
    with rasterio.open(out / "arrival_group_T300s.tif") as src:
        assert src.tags()["PERIOD_S"] == "300"
        assert src.tags()["SPEED_MODE"] == "group"
    # the period column is a real number in every set (null for the front),
    # so layers of different sets can be merged and filtered alike
    import pyogrio.raw

    for key, expected in (("front", None), ("group_T300s", 300.0), ("group_T600s", 600.0)):
        meta, _, _, fields = pyogrio.raw.read(
            out / f"isochrones_{key}.gpkg", layer="isochrone_lines"
        )
        col = dict(zip(list(meta["fields"]), fields, strict=True))["period_s"]
        assert col.dtype == np.float64 and col.size > 0
        assert np.all(np.isnan(col)) if expected is None else np.all(col == expected)


def test_vector_formats_shapefile_and_geojson(run_cli, spec, utm_bathymetry, tmp_path):
    import pyogrio

    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli(
        "map",
        utm_bathymetry,
        "--source-xy",
        f"{x},{y}",
        "--vector-format",
        "shp",
        "--vector-format",
        "geojson",
        "--no-map",
        "--out",
        out,
        expect=0,
    )
    names = product_files(out)
    assert "isochrones_front.gpkg" not in names
    for layer in ("isochrone_lines", "isochrone_bands"):
        for suffix in (".shp", ".shx", ".dbf", ".prj", ".cpg"):
            assert f"isochrones_front_{layer}{suffix}" in names
        assert f"isochrones_front_{layer}.geojson" in names
        shp_info = pyogrio.read_info(out / f"isochrones_front_{layer}.shp")
        json_info = pyogrio.read_info(out / f"isochrones_front_{layer}.geojson")
        assert shp_info["features"] == json_info["features"] > 0
    # Shapefile field names: the documented short names (docs/shapefile-fields.md; dBASE: 10)
    bands = pyogrio.read_info(out / "isochrones_front_isochrone_bands.shp")
    assert "min_min" in list(bands["fields"])
    # ... so the Shapefile's bands style filters on the field the file has
    # (OGC SLD 1.0: a PropertyName that names no field matches no feature).
    props = _sld_property_names(out / "isochrones_front_bands_shp.sld")
    assert props == {"min_min"}
    assert props <= set(bands["fields"])
    assert leftovers(out) == []


def test_map_format_pdf(run_cli, spec, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli(
        "map",
        utm_bathymetry,
        "--source-xy",
        f"{x},{y}",
        "--map-format",
        "pdf",
        "--out",
        out,
        expect=0,
    )
    pdf = out / "map_front.pdf"
    assert pdf.read_bytes()[:5] == b"%PDF-"
    assert "map_front.png" not in product_files(out)


def test_no_map(run_cli, spec, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--no-map", "--out", out, expect=0)
    names = product_files(out)
    assert not [n for n in names if n.startswith("map_")]
    assert "arrival_front.tif" in names and "run.json" in names


def test_max_time_h(run_cli, spec, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli(
        "map",
        utm_bathymetry,
        "--source-xy",
        f"{x},{y}",
        "--max-time-h",
        "0.25",
        "--no-map",
        "--out",
        out,
        expect=0,
    )
    t = arrival(out / "arrival_front.tif")
    assert float(t.max()) <= 15.0
    # 15 min at sqrt(g h) (h = 100 m, g = 9.80665) is 28.2 km: a cell 40 km
    # away is beyond the limit, one 20 km away is reached.
    assert t.mask[59, 20] and not t.mask[59, 40]
    record = json.loads((out / "run.json").read_text())
    assert record["parameters"]["speed"]["max_time_s"] == 900.0
    assert record["product_sets"]["front"]["cells_beyond_max_time"] > 0
    with rasterio.open(out / "arrival_front.tif") as src:
        assert src.tags()["MAX_TIME_MIN"] == "15"


def test_isochrone_interval(run_cli, spec, utm_bathymetry, tmp_path):
    import pyogrio.raw

    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli(
        "map",
        utm_bathymetry,
        "--source-xy",
        f"{x},{y}",
        "--isochrone-interval-min",
        "5",
        "--no-map",
        "--out",
        out,
        expect=0,
    )
    meta, _, _, fields = pyogrio.raw.read(out / "isochrones_front.gpkg", layer="isochrone_lines")
    minutes = sorted(set(fields[list(meta["fields"]).index("minutes")].tolist()))
    # front reaches the far corner (about 85 km) at about 45 min (h = 100 m)
    assert minutes == [5.0 * k for k in range(1, len(minutes) + 1)]
    assert len(minutes) >= 8


def test_quiet_prints_no_progress(run_cli, spec, utm_bathymetry, tmp_path):
    x, y = spec.UTM_SOURCE_XY
    loud = run_cli(
        "map",
        utm_bathymetry,
        "--source-xy",
        f"{x},{y}",
        "--no-map",
        "--out",
        tmp_path / "loud",
        expect=0,
    )
    assert "ttmap: reading bathymetry" in loud.output
    quiet = run_cli(
        "-q",
        "map",
        utm_bathymetry,
        "--source-xy",
        f"{x},{y}",
        "--no-map",
        "--out",
        tmp_path / "quiet",
        expect=0,
    )
    assert quiet.output == ""
    assert (tmp_path / "quiet" / "arrival_front.tif").is_file()


# ---------------------------------------------------------------------------
# Usage errors: exit 2, message names the option
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("args", "named"),
    [
        (["--source", "abc"], "--source"),
        (["--source", "1,2,3"], "--source"),
        (["--source", "-70.5,-33.2", "--source-xy", "300000,6100000"], "--source-xy"),
        ([], "--source"),
        (
            ["--rupture-centre", "-70.5,-33.2", "--length-km", "40", "--width-km", "20"],
            "--strike-deg",
        ),
        (
            ["--rupture-centre", "-70.5,-33.2", "--strike-deg", "10", "--length-km", "40"],
            "--width-km",
        ),
        (["--source", "-70.5,-33.2", "--length-km", "-5"], "--length-km"),
        (["--source", "-70.5,-33.2", "--vector-format", "kml"], "--vector-format"),
    ],
    ids=[
        "not-a-pair",
        "three-numbers",
        "two-sources",
        "no-source",
        "rupture-no-strike",
        "rupture-no-width",
        "negative-length",
        "unknown-format",
    ],
)
def test_usage_errors_exit_2(run_cli, geo_bathymetry, tmp_path, args, named):
    out = tmp_path / "out"
    result = run_cli("map", geo_bathymetry, *args, "--out", out)
    assert result.exit_code == 2, result.output
    errors = [ln for ln in result.output.splitlines() if ln.startswith("Error:")]
    assert len(errors) == 1 and named in errors[0], result.output
    assert "Traceback" not in result.output
    assert not out.exists()  # nothing written, not even the folder


# ---------------------------------------------------------------------------
# Input errors: exit 1, one line, no traceback
# ---------------------------------------------------------------------------


def _one_line_error(result) -> str:
    assert result.exit_code == 1, result.output
    assert "Traceback" not in result.output
    errors = [ln for ln in result.output.splitlines() if ln.startswith("Error:")]
    assert len(errors) == 1, result.output
    return errors[0]


def test_source_on_land(run_cli, spec, utm_bathymetry, tmp_path):
    x, y = spec.UTM_LAND_XY
    result = run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--out", tmp_path / "out")
    msg = _one_line_error(result)
    assert "on land" in msg and "--snap-radius-km" in msg
    assert not (tmp_path / "out").exists()  # a refused run leaves nothing, not even the folder


def test_snap_radius_moves_a_source_off_land(run_cli, spec, utm_bathymetry, tmp_path):
    """A source 1 km inside the land strip moves to the nearest water, about 1 km away."""
    out = tmp_path / "out"
    x = spec.UTM_LAND_X + 1000.0 + 500.0  # centre of the second land column
    result = run_cli(
        "map",
        utm_bathymetry,
        "--source-xy",
        f"{x},6140500",
        "--snap-radius-km",
        "5",
        "--no-map",
        "--out",
        out,
        expect=0,
    )
    moved = json.loads((out / "run.json").read_text())["product_sets"]["front"]["source_moved_m"]
    # reported as ground (geodesic) distance: the map distance (1 to 2 km) times the local
    # scale of this UTM grid, within 0.1 % of 1 here
    assert 1000.0 * 0.999 <= moved <= 2000.0 * 1.001
    assert "moved" in result.output


def test_file_not_a_raster(run_cli, spec, tmp_path):
    bad = tmp_path / "bathy.tif"
    bad.write_text("this is not a raster\n")
    result = run_cli("map", bad, "--source", spec.GEO_SOURCE, "--out", tmp_path / "out")
    msg = _one_line_error(result)
    assert "not a raster" in msg and "bathy.tif" in msg


def test_missing_file(run_cli, spec, tmp_path):
    result = run_cli(
        "map", tmp_path / "nowhere.tif", "--source", spec.GEO_SOURCE, "--out", tmp_path / "out"
    )
    msg = _one_line_error(result)
    assert "nowhere.tif" in msg and "does not exist" in msg
    assert not (tmp_path / "out").exists()


def test_output_folder_that_cannot_be_created(run_cli, spec, geo_bathymetry, tmp_path):
    """Refused before the bathymetry is even read."""
    (tmp_path / "a_file").write_text("x")
    result = run_cli(
        "map", geo_bathymetry, "--source", spec.GEO_SOURCE, "--out", tmp_path / "a_file" / "out"
    )
    msg = _one_line_error(result)
    assert "cannot be created" in msg and "a_file" in msg
    assert "reading bathymetry" not in result.output


def test_all_land_grid(run_cli, spec, tmp_path):
    path = spec.write_geotiff(
        tmp_path / "land.tif",
        np.full((20, 20), 50.0),
        crs="EPSG:4326",
        transform=spec.GEO_TRANSFORM,
    )
    result = run_cli("map", path, "--source", "-71.5,-32.5", "--out", tmp_path / "out")
    msg = _one_line_error(result)
    assert "no water" in msg


@pytest.mark.parametrize("land", [False, True], ids=["all-sea", "sea-and-land-strip"])
def test_depth_positive_grid_read_as_elevation(run_cli, spec, tmp_path, land):
    """Depths (positive down) read as elevation: the message names --depth-positive.

    All sea: the reader finds no water. With a land strip (8 % of the cells),
    the sea reads as land and the source lies "on land"; the hint still comes.
    """
    depth = -spec.geo_elevation()  # +3000 at sea, -100 on land
    if not land:
        depth[:] = spec.GEO_DEPTH_M
    path = spec.write_geotiff(
        tmp_path / "depth.tif", depth, crs="EPSG:4326", transform=spec.GEO_TRANSFORM
    )
    result = run_cli("map", path, "--source", spec.GEO_SOURCE, "--out", tmp_path / "out")
    msg = _one_line_error(result)
    assert "--depth-positive" in msg
    # and with the flag the same file works
    run_cli(
        "map",
        path,
        "--depth-positive",
        "--source",
        spec.GEO_SOURCE,
        "--no-map",
        "--out",
        tmp_path / "ok",
        expect=0,
    )


def test_source_on_land_without_sign_hint(run_cli, spec, utm_bathymetry, tmp_path):
    """On a mostly-water grid a source on land gets no sign-convention hint."""
    x, y = spec.UTM_LAND_XY
    result = run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--out", tmp_path / "out")
    assert "--depth-positive" not in _one_line_error(result)


def test_verbose_keeps_the_exception(run_cli, spec, tmp_path):
    result = run_cli(
        "-v",
        "map",
        tmp_path / "nowhere.tif",
        "--source",
        spec.GEO_SOURCE,
        "--out",
        tmp_path / "out",
    )
    assert result.exit_code != 0
    assert isinstance(result.exception, InputDataError)


def test_traceback_only_with_verbose(tmp_path):
    """In a real process: one line by default, the traceback with -v (DEVELOPERS.md)."""
    code = "from ttmap.cli.main import cli; cli(prog_name='ttmap')"
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    base = [sys.executable, "-c", code]
    args = [
        "map",
        str(tmp_path / "nowhere.tif"),
        "--source",
        "-70.5,-33.2",
        "--out",
        str(tmp_path / "o"),
    ]
    plain = subprocess.run(
        base + ["-q"] + args, capture_output=True, text=True, check=False, timeout=60, env=env
    )
    assert plain.returncode == 1
    assert "Traceback" not in plain.stderr
    # exactly one line on stderr, nothing on stdout
    assert plain.stderr.startswith("Error: ") and plain.stderr.count("\n") == 1
    assert "does not exist" in plain.stderr and plain.stdout == ""
    verbose = subprocess.run(
        base + ["-v"] + args, capture_output=True, text=True, check=False, timeout=60, env=env
    )
    assert verbose.returncode == 1
    assert "Traceback" in verbose.stderr and "InputDataError" in verbose.stderr


# ---------------------------------------------------------------------------
# Never overwrite without --overwrite; never leave partial products
# ---------------------------------------------------------------------------


def test_overwrite_protection(run_cli, spec, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    args = ["map", utm_bathymetry, "--source-xy", f"{x},{y}", "--no-map", "--out", out]
    run_cli(*args, expect=0)
    before = {p.name: (p.stat().st_mtime_ns, p.read_bytes()) for p in out.iterdir()}
    again = run_cli(*args)
    msg = _one_line_error(again)
    assert "--overwrite" in msg
    after = {p.name: (p.stat().st_mtime_ns, p.read_bytes()) for p in out.iterdir()}
    assert after == before
    run_cli(*args, "--overwrite", expect=0)
    record = json.loads((out / "run.json").read_text())
    assert record["parameters"]["overwrite"] is True
    assert set(before) == product_files(out)


def test_failed_map_write_leaves_no_partial_file(
    run_cli, spec, utm_bathymetry, tmp_path, monkeypatch
):
    from ttmap.io import figures as maps

    def half_written(fig, path, **kw):
        Path(path).write_bytes(b"\x89PNG\r\n partial")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(maps, "save_figure", half_written)
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    result = run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--out", out)
    msg = _one_line_error(result)
    assert "no space left on device while writing" in msg.lower()
    assert "map_front.png" in msg  # names the file
    assert not out.exists()  # the folder as it was before the run (absent): no partial file, no record


@pytest.mark.parametrize("fmt", ["gpkg", "shp"])
def test_failed_vector_write_leaves_no_partial_file(
    run_cli, spec, utm_bathymetry, tmp_path, monkeypatch, fmt
):
    """The second layer fails after the first was written: no isochrone file appears."""
    from ttmap.io import vector

    real = vector._write_one
    calls = []

    def fail_second(target, layer, *a, **kw):
        calls.append(layer.name)
        if len(calls) == 2:
            raise vector.TtmapError("writing layer 'isochrone_bands' failed (disk full)")
        return real(target, layer, *a, **kw)

    monkeypatch.setattr(vector, "_write_one", fail_second)
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    result = run_cli(
        "map",
        utm_bathymetry,
        "--source-xy",
        f"{x},{y}",
        "--vector-format",
        fmt,
        "--no-map",
        "--out",
        out,
    )
    msg = _one_line_error(result)
    assert "disk full" in msg
    assert calls == ["isochrone_lines", "isochrone_bands"]
    names = product_files(out)
    assert leftovers(out) == []
    assert not [n for n in names if n.startswith("isochrones_front")]
    assert not [n for n in names if n.startswith(".")]


def test_failed_geotiff_write_in_its_thread_is_reported(
    run_cli, spec, utm_bathymetry, tmp_path, monkeypatch
):
    """The GeoTIFF is written in a second thread; its error still ends the run cleanly."""
    import threading

    from ttmap.errors import TtmapError
    from ttmap.io import raster

    threads = []

    def fail(*args, **kw):
        threads.append(threading.current_thread().name)
        raise TtmapError("writing raster 'arrival_front.tif' failed (disk full)")

    monkeypatch.setattr(raster, "write_arrival_geotiff", fail)
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    result = run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--out", out)
    assert "disk full" in _one_line_error(result)
    assert threads and threads[0].startswith("ttmap-geotiff")
    assert product_files(out) == set()  # raised before any other product was written
    assert leftovers(out) == []


def test_refine_solves_on_split_cells_against_distance_over_speed(run_cli, spec, utm_bathymetry, tmp_path):
    """``--refine 3``: the raster has 3 x 3 cells per cell, the same extent, and the exact times.

    Reference: constant depth, so the arrival is distance / sqrt(g h) (long-wave speed;
    docs/references.md §2), g = 9.80665 m/s^2 (standard gravity, §9).
    """
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--refine", "3", "--no-map", "--out", out,
            expect=0)
    with rasterio.open(out / "arrival_front.tif") as src:
        assert src.shape == (spec.UTM_SHAPE[0] * 3, spec.UTM_SHAPE[1] * 3)
        assert src.transform.a == pytest.approx(spec.UTM_CELL_M / 3)
        assert src.bounds.left == spec.UTM_TRANSFORM.c and src.bounds.top == spec.UTM_TRANSFORM.f
        t_min = src.read(1, masked=True)
        cols, rows = np.meshgrid(np.arange(src.width), np.arange(src.height))
        cx = src.transform.c + (cols + 0.5) * src.transform.a
        cy = src.transform.f + (rows + 0.5) * src.transform.e
    dist_m = np.hypot(cx - x, cy - y)
    exact_min = dist_m / np.sqrt(9.80665 * spec.UTM_DEPTH_M) / 60.0
    far = ~np.ma.getmaskarray(t_min) & (dist_m > 20_000.0)
    rel = np.abs(t_min.data[far] - exact_min[far]) / exact_min[far]
    print(f"refine 3: worst {rel.max():.4%} beyond 20 km over {far.sum()} cells")
    assert far.sum() > 10_000 and rel.max() <= 0.002  # measured 0.056 %
    record = json.loads((out / "run.json").read_text())
    assert record["parameters"]["reading"]["refine"] == 3
    assert any("refined by 3" in n for n in json.dumps(record).split('"'))


def test_refine_and_coarsen_together_refused(run_cli, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    result = run_cli("map", utm_bathymetry, "--source-xy", "320500,6100500", "--refine", "2", "--coarsen", "2",
                     "--out", out)
    assert result.exit_code == 1
    assert "coarsen 2 and refine 2 cannot be combined" in result.output
    assert not out.exists()
