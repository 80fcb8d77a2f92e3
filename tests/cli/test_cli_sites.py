"""Planner products through the command line: site table, timeline, coast, site-centred maps.

``ttmap map --sites``, the coastal arrival layer, ``ttmap site-map`` and the
planner part of ``ttmap demo``, with click's CliRunner on the invented
fixtures of ``tests/cli/conftest.py`` (a 120 x 120 km grid of 100 m water
with a land strip in the last 10 columns, UTM zone 59 south).
"""

from __future__ import annotations

import csv
import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import rasterio

from ttmap.products.cautions import CAUTION_SHORT

# Sites in the grid's own map coordinates (x, y in EPSG:32759). Cell (r, c)
# has its centre at x = 300500 + 1000 c, y = 6199500 - 1000 r; land starts at
# column 110 (x = 410000).
SITES = [
    # on the first land column: its time is read at the water cell 1 km west
    ("Wharf", 410_500.0, 6_160_500.0, "600", "0.8", "4", ""),
    # in open water, own cell
    ("Bay", 380_500.0, 6_120_500.0, "300", "", "", "12"),
    # 9.5 km inside the land strip: no water within 2 km, the row is kept
    ("Inland Farm", 419_500.0, 6_150_500.0, "200", "", "", ""),
]
HEADER = "name,x,y,safe_ground_distance_m,walking_speed_m_s,preparation_min,notification_delay_min"


def write_sites(path: Path, rows: list[tuple[Any, ...]] = SITES) -> Path:
    lines = [HEADER, *(",".join(str(v) for v in row) for row in rows)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def read_table(path: Path) -> tuple[list[str], list[dict[str, str]]]:
    text = path.read_text(encoding="utf-8").splitlines()
    comments = [ln for ln in text if ln.startswith("#")]
    rows = list(csv.DictReader([ln for ln in text if not ln.startswith("#")]))
    return comments, rows


def leftovers(out: Path) -> list[str]:
    return [p.name for p in out.rglob("*") if ".tmp" in p.name or p.name.startswith(".ttmap-stage")]


def one_line_error(result: Any, code: int) -> str:
    assert result.exit_code == code, result.output
    assert "Traceback" not in result.output
    errors = [ln for ln in result.output.splitlines() if ln.startswith("Error:")]
    assert len(errors) == 1, result.output
    return errors[0]


def assert_png_not_blank(path: Path) -> None:
    import matplotlib.image as mpimg

    img = mpimg.imread(path)
    assert img.ndim == 3 and img.shape[0] > 200 and img.shape[1] > 300
    rgb = (img[..., :3] * 255).round().astype(np.uint32).reshape(-1, 3)
    colours = np.unique((rgb[:, 0] << 16) | (rgb[:, 1] << 8) | rgb[:, 2])
    assert colours.size > 20 and rgb.std(axis=0).max() > 10


def read_layer(path: Path, layer: str | None = None) -> tuple[list[str], dict[str, np.ndarray], np.ndarray]:
    import pyogrio.raw
    import shapely

    meta, _, geoms, fields = pyogrio.raw.read(path, layer=layer)
    names = list(meta["fields"])
    return names, dict(zip(names, fields, strict=True)), shapely.from_wkb(geoms)


# ---------------------------------------------------------------------------
# ttmap map --sites
# ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def sites_run(tmp_path_factory: pytest.TempPathFactory, spec: Any) -> dict[str, Any]:
    """One map run with sites, a 300 s group-speed set, GeoPackage + GeoJSON, PNG + PDF."""
    from click.testing import CliRunner

    from ttmap.cli.main import cli

    base = tmp_path_factory.mktemp("sites_run")
    bathy = spec.write_geotiff(
        base / "utm.tif", spec.utm_elevation(), crs=spec.UTM_CRS, transform=spec.UTM_TRANSFORM
    )
    sites = write_sites(base / "towns.csv")
    out = base / "out"
    x, y = spec.UTM_SOURCE_XY
    args = [
        "map", bathy, "--source-xy", f"{x},{y}", "--period-s", "300",
        "--sites", sites, "--sites-crs", spec.UTM_CRS, "--notification-delay-min", "15",
        "--origin-time", "2026-03-01T16:12:00+13:00",
        "--vector-format", "gpkg", "--vector-format", "geojson",
        "--map-format", "png", "--map-format", "pdf",
        "--isochrone-interval-min", "10", "--out", out,
    ]
    result = CliRunner().invoke(cli, [str(a) for a in args])
    assert result.exit_code == 0, result.output
    return {"out": out, "result": result, "sites": sites}


def test_site_table_csv(sites_run):
    comments, rows = read_table(sites_run["out"] / "sites.csv")
    first = (sites_run["out"] / "sites.csv").read_text(encoding="utf-8").splitlines()[0]
    assert first == f"# {CAUTION_SHORT}"  # the caution comes first
    assert "planning figures, not promises" in " ".join(comments)
    cols = set(rows[0])
    for c in ("name", "lon", "lat", "status", "moved_m", "front_min", "earliest_min", "latest_min",
              "energy_T300s_min", "window_T300s_min", "notification_delay_min", "minutes_left",
              "minutes_needed", "margin_min", "budget_status", "front_utc"):
        assert c in cols, c
    by_name = {r["name"]: r for r in rows}
    assert list(by_name) == ["Wharf", "Bay", "Inland Farm"]  # file order, none dropped

    wharf = by_name["Wharf"]
    assert wharf["status"] == "moved to water"
    assert float(wharf["moved_m"]) == pytest.approx(1000.0, abs=1.0)
    front = float(wharf["front_min"])
    assert front > 20.0
    # the command-line delay applies where the file gives none; the file's own values win
    assert float(wharf["notification_delay_min"]) == 15.0
    assert float(by_name["Bay"]["notification_delay_min"]) == 12.0
    # needed = 4 min preparation + 600 m / 0.8 m/s
    assert float(wharf["minutes_needed"]) == pytest.approx(4.0 + 600.0 / 0.8 / 60.0, abs=0.01)
    assert float(wharf["minutes_left"]) == pytest.approx(front / 1.05 - 15.0, abs=0.02)
    assert float(wharf["energy_T300s_min"]) >= front
    # origin 16:12 at +13:00 is 03:12 UTC
    assert wharf["front_utc"].startswith("2026-03-01T0") and wharf["front_utc"].endswith("Z")

    bay = by_name["Bay"]
    assert bay["status"] == "ok" and float(bay["moved_m"]) == 0.0

    farm = by_name["Inland Farm"]
    assert farm["status"] == "no water within radius"
    assert farm["front_min"] == "" and farm["margin_min"] == ""
    assert farm["budget_status"] == "no arrival computed"


def test_site_layers_and_run_record(sites_run):
    out = sites_run["out"]
    names, fields, geoms = read_layer(out / "sites.gpkg", "sites")
    assert list(fields["name"]) == ["Wharf", "Bay", "Inland Farm"]
    assert "margin_min" in names and all(g is not None for g in geoms)
    _, gj_fields, _ = read_layer(out / "sites.geojson")
    assert list(gj_fields["name"]) == ["Wharf", "Bay", "Inland Farm"]
    assert not (out / "sites.shp").exists()

    record = json.loads((out / "run.json").read_text())
    assert record["parameters"]["products"]["coast"] is True
    assert record["parameters"]["products"]["coast_interval_min"] == 5.0
    sites = record["sites"]
    assert sites["table_settings"]["speed_uncertainty"] == pytest.approx(0.05)
    assert sites["table_settings"]["default_notification_delay_min"] == 15.0
    assert sites["table_settings"]["origin_time_utc"] == "2026-03-01T03:12:00Z"
    assert sites["status_counts"] == {"moved to water": 1, "ok": 1, "no water within radius": 1}
    assert sum(sites["budget_status_counts"].values()) == 3
    assert [s["name"] for s in sites["per_site"]] == ["Wharf", "Bay", "Inland Farm"]
    assert record["inputs"]["sites"]["sha256"] and len(record["inputs"]["sites"]["sha256"]) == 64
    written = {Path(p).name for p in record["products"]}
    for name in ("sites.csv", "sites.gpkg", "sites.geojson", "timeline.png", "timeline.pdf",
                 "coast_front.gpkg", "coast_front.geojson", "coast_front.sld",
                 "coast_group_T300s.gpkg"):
        assert name in written, name
    # the record lists every file the run wrote but itself
    assert written | {"run.json"} == {p.name for p in out.iterdir()}
    assert leftovers(out) == []


def test_site_summary_on_stderr(sites_run):
    text = sites_run["result"].output
    lines = [ln for ln in text.splitlines() if "Wharf" in ln or "Inland Farm" in ln]
    assert any("front" in ln and "margin" in ln for ln in lines if "Wharf" in ln)
    assert any("no arrival computed" in ln for ln in lines if "Inland Farm" in ln)
    assert "planning figures, not promises" in text


def test_timeline_chart(sites_run):
    out = sites_run["out"]
    assert_png_not_blank(out / "timeline.png")
    assert (out / "timeline.pdf").read_bytes()[:5] == b"%PDF-"
    assert_png_not_blank(out / "map_front.png")


def test_coast_layer(sites_run, spec):
    import shapely

    out = sites_run["out"]
    names, fields, geoms = read_layer(out / "coast_front.gpkg", "coastal_arrival")
    assert len(geoms) > 0
    assert all(g is not None for g in geoms) and bool(shapely.is_valid(geoms).all())
    assert {"minutes", "class_min", "label", "reached"} <= set(names)
    # the coast is the land strip's western edge, x = 410000 m
    xs = shapely.get_coordinates(geoms)[:, 0]
    assert np.allclose(xs, spec.UTM_LAND_X)
    minutes = fields["minutes"][np.isfinite(fields["minutes"])]
    assert minutes.min() > 0 and minutes.max() < 60
    # classes are 5-minute wide by default
    assert set(np.unique(fields["class_min"]) % 5.0) == {0.0}
    # the GeoJSON copy holds the same stretches, in WGS84
    _, _, gj = read_layer(out / "coast_front.geojson")
    assert len(gj) == len(geoms)
    sld = (out / "coast_front.sld").read_text()
    assert "class_min" in sld and "Planning aid only" in sld


def test_phase_speed_and_shapefile_notes(run_cli, spec, utm_bathymetry, tmp_path):
    """Phase-speed sets give no energy columns, and the table is not written as a Shapefile: notes, not errors."""
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    result = run_cli(
        "map", utm_bathymetry, "--source-xy", f"{x},{y}", "--period-s", "300", "--period-speed", "phase",
        "--sites", write_sites(tmp_path / "s.csv"), "--sites-crs", spec.UTM_CRS,
        "--vector-format", "shp", "--no-map", "--coast-interval-min", "10", "--out", out, expect=0,
    )
    notes = [ln for ln in result.output.splitlines() if ln.startswith("ttmap: note:")]
    assert any("group speed" in n for n in notes) and any("Shapefile" in n for n in notes)
    _, rows = read_table(out / "sites.csv")
    assert not [c for c in rows[0] if c.startswith("energy_")]
    assert (out / "sites.gpkg").is_file() and not (out / "sites.shp").exists()
    for suffix in (".shp", ".shx", ".dbf", ".prj"):
        assert (out / f"coast_front{suffix}").is_file()
    _, fields, _ = read_layer(out / "coast_front.shp")
    assert set(np.unique(fields["class_min"]) % 10.0) == {0.0}
    assert (out / "timeline.png").is_file()  # the chart is not a map: --no-map keeps it
    record = json.loads((out / "run.json").read_text())
    assert len(record["notes"]) == 2
    assert leftovers(out) == []


def test_no_coast(run_cli, spec, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--no-coast", "--no-map", "--out", out, expect=0)
    assert not [p for p in out.iterdir() if p.name.startswith("coast_")]
    assert not (out / "sites.csv").exists()


# ---------------------------------------------------------------------------
# Errors of the site options
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("content", "expect"),
    [
        ("name,lon\nA,170\n", "no 'lat' column"),
        ("name,x,y\nA,abc,6160500\n", "line 2, column 'x'"),
        (HEADER + "\nA,410500,6160500,-5,,,\n", "must not be negative"),
    ],
    ids=["missing-column", "not-a-number", "negative-distance"],
)
def test_bad_sites_file(run_cli, spec, utm_bathymetry, tmp_path, content, expect):
    bad = tmp_path / "bad.csv"
    bad.write_text(content, encoding="utf-8")
    out = tmp_path / "out"
    x, y = spec.UTM_SOURCE_XY
    result = run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--sites", bad,
                     "--sites-crs", spec.UTM_CRS, "--out", out)
    msg = one_line_error(result, 1)
    assert expect in msg and "bad.csv" in msg
    assert not out.exists()  # refused before anything was written


def test_missing_sites_file(run_cli, spec, utm_bathymetry, tmp_path):
    x, y = spec.UTM_SOURCE_XY
    result = run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", "--sites", tmp_path / "nope.csv",
                     "--out", tmp_path / "out")
    msg = one_line_error(result, 1)
    assert "nope.csv" in msg and "does not exist" in msg


@pytest.mark.parametrize(
    ("value", "expect"),
    [("2026-03-01T03:12:00", "no time zone"), ("yesterday", "not an ISO 8601 time")],
    ids=["no-zone", "not-a-time"],
)
def test_bad_origin_time(run_cli, spec, utm_bathymetry, tmp_path, value, expect):
    x, y = spec.UTM_SOURCE_XY
    result = run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}",
                     "--sites", write_sites(tmp_path / "s.csv"), "--origin-time", value,
                     "--out", tmp_path / "out")
    msg = one_line_error(result, 2)
    assert "--origin-time" in msg and expect in msg and "Z" in msg
    assert not (tmp_path / "out").exists()


@pytest.mark.parametrize(
    ("args", "named"),
    [
        (["--origin-time", "2026-03-01T03:12:00Z"], "--sites"),
        (["--sites", "SITES", "--no-front"], "--no-front"),
        (["--sites", "SITES", "--walking-speed-m-s", "0"], "--walking-speed-m-s"),
        (["--sites", "SITES", "--speed-uncertainty-pct", "100"], "--speed-uncertainty-pct"),
        (["--sites", "SITES", "--notification-delay-min", "nan"], "--notification-delay-min"),
    ],
    ids=["origin-without-sites", "sites-without-front", "zero-speed", "uncertainty-100", "nan-delay"],
)
def test_site_usage_errors(run_cli, spec, utm_bathymetry, tmp_path, args, named):
    sites = write_sites(tmp_path / "s.csv")
    args = [str(sites) if a == "SITES" else a for a in args]
    x, y = spec.UTM_SOURCE_XY
    result = run_cli("map", utm_bathymetry, "--source-xy", f"{x},{y}", *args, "--out", tmp_path / "out")
    msg = one_line_error(result, 2)
    assert named in msg


# ---------------------------------------------------------------------------
# ttmap site-map
# ---------------------------------------------------------------------------


def test_site_map_two_sites(run_cli, spec, utm_bathymetry, tmp_path):
    out = tmp_path / "out"
    wharf = spec.lonlat_arg(410_500.0, 6_160_500.0)  # on land: moved 1 km west
    bay = spec.lonlat_arg(380_500.0, 6_120_500.0)
    result = run_cli(
        "site-map", utm_bathymetry, "--site", f"Wharf={wharf}", "--site", f"Bay North={bay}",
        "--notification-delay-min", "7", "--out", out, expect=0,
    )
    for stem in ("Wharf", "Bay_North"):
        for name in (f"site_centred_{stem}.tif", f"site_centred_{stem}.sld", f"minutes_left_{stem}.tif",
                     f"minutes_left_{stem}.sld", f"isochrones_site_{stem}.gpkg", f"map_site_{stem}.png"):
            assert (out / name).is_file(), name
    for name in ("site_centred_min.tif", "site_centred_first_site.tif", "site_centred_first_site.json",
                 "run.json"):
        assert (out / name).is_file(), name
    assert "Wharf: moved 1.00 km to open water" in result.output
    assert "Bay North: solved at its own cell" in result.output
    assert "reciprocity" in result.output

    with rasterio.open(out / "site_centred_Wharf.tif") as src:
        t = src.read(1, masked=True)
        tags = src.tags()
    with rasterio.open(out / "minutes_left_Wharf.tif") as src:
        left = src.read(1, masked=True)
        assert src.tags()["NOTIFICATION_DELAY_MIN"] == "7"
    assert "isotropic" in tags["RECIPROCITY"] and tags["CAUTION"] == CAUTION_SHORT
    # minutes left = time - delay, cell by cell (float32 rasters)
    for row, col in ((40, 108), (5, 5), (100, 60), (60, 20)):
        assert not t.mask[row, col]
        assert float(left[row, col]) == pytest.approx(float(t[row, col]) - 7.0, abs=1e-3)
    assert t.mask[40, 115] and left.mask[40, 115]  # land
    assert float(left[40, 108]) < 0  # next to the site the wave beats the message

    with rasterio.open(out / "site_centred_min.tif") as src:
        tmin = src.read(1, masked=True)
    with rasterio.open(out / "site_centred_first_site.tif") as src:
        first = src.read(1, masked=True)
        assert src.tags()["SITE_0"] == "Wharf" and src.tags()["SITE_1"] == "Bay North"
    with rasterio.open(out / "site_centred_Bay_North.tif") as src:
        tb = src.read(1, masked=True)
    assert float(tmin[40, 108]) == pytest.approx(min(float(t[40, 108]), float(tb[40, 108])), abs=1e-4)
    assert int(first[40, 108]) == 0 and int(first[80, 80]) == 1

    record = json.loads((out / "run.json").read_text())
    assert record["inputs"]["bathymetry"]["sha256"]
    from ttmap.jobs.record import validate_run_record

    assert validate_run_record(record) == []  # the one schema (docs/run-record.md)
    assert record["job"] == "site-map" and record["combined_written"] is True
    assert record["parameters"]["sites"]["notification_delay_min"] == 7.0
    assert record["parameters"]["speed_mode"] == "long-wave"
    assert [s["name"] for s in record["sites"]] == ["Wharf", "Bay North"]
    assert record["sites"][0]["moved_m"] == pytest.approx(1000.0, abs=1.0)
    assert record["versions"]["ttmap"] and record["timings_s"]["total_s"] > 0
    written = set(record["products"])  # relative to the output folder
    assert written | {"run.json"} == {p.name for p in out.iterdir()}
    assert leftovers(out) == []

    # a second run without --overwrite is refused up front, nothing changes
    before = {p.name: p.stat().st_mtime_ns for p in out.iterdir()}
    again = run_cli("site-map", utm_bathymetry, "--site", f"Wharf={wharf}", "--site", f"Bay North={bay}",
                    "--out", out)
    assert "--overwrite" in one_line_error(again, 1)
    assert before == {p.name: p.stat().st_mtime_ns for p in out.iterdir()}


def test_site_map_negative_coordinates_and_file(run_cli, spec, geo_bathymetry, tmp_path):
    """``--site Harbour=-70.5,-33.2`` parses; a sites file gives per-site delays; --no-combined."""
    out = tmp_path / "one"
    run_cli("site-map", geo_bathymetry, "--site", "Harbour=-70.5,-33.2", "--no-map", "--out", out, expect=0)
    record = json.loads((out / "run.json").read_text())
    assert record["sites"][0]["x"] == -70.5 and record["sites"][0]["y"] == -33.2
    assert not (out / "site_centred_min.tif").exists()  # one site: nothing to combine

    sites = tmp_path / "s.csv"
    sites.write_text("name,lon,lat,notification_delay_min\nA,-70.5,-33.2,20\nB,-71.0,-32.5,\n")
    out2 = tmp_path / "two"
    run_cli("site-map", geo_bathymetry, "--sites", sites, "--no-combined", "--no-map", "--out", out2, expect=0)
    with rasterio.open(out2 / "minutes_left_A.tif") as src:
        assert src.tags()["NOTIFICATION_DELAY_MIN"] == "20"
    with rasterio.open(out2 / "minutes_left_B.tif") as src:
        assert src.tags()["NOTIFICATION_DELAY_MIN"] == "10"
    assert not (out2 / "site_centred_min.tif").exists()
    record = json.loads((out2 / "run.json").read_text())
    assert len(record["inputs"]["sites"]["sha256"]) == 64


def test_site_map_duplicate_stems_refused(run_cli, spec, geo_bathymetry, tmp_path):
    out = tmp_path / "out"
    result = run_cli("site-map", geo_bathymetry, "--site", "Bay A=-70.5,-33.2", "--site", "Bay_A=-71,-32.5",
                     "--out", out)
    msg = one_line_error(result, 2)
    assert "'Bay A'" in msg and "'Bay_A'" in msg and "rename" in msg
    sites = tmp_path / "s.csv"
    sites.write_text("name,lon,lat\nPort (north),-70.5,-33.2\nport north,-71.0,-32.5\n")
    result = run_cli("site-map", geo_bathymetry, "--sites", sites, "--out", out)
    msg = one_line_error(result, 1)
    assert "'Port (north)'" in msg and "'port north'" in msg
    assert not out.exists()


@pytest.mark.parametrize(
    ("args", "named"),
    [
        (["--site", "Harbour"], "NAME=LON,LAT"),
        (["--site", "Harbour=-33.2,-170.5"], "latitude"),
        ([], "--site"),
    ],
    ids=["no-coordinates", "lat-out-of-range", "no-site"],
)
def test_site_map_usage_errors(run_cli, geo_bathymetry, tmp_path, args, named):
    result = run_cli("site-map", geo_bathymetry, *args, "--out", tmp_path / "out")
    assert named in one_line_error(result, 2)


def test_site_map_site_on_land_far_from_water(run_cli, spec, utm_bathymetry, tmp_path):
    """One site that cannot be placed is skipped with a note; if none can be, the run fails."""
    inland = spec.lonlat_arg(419_500.0, 6_150_500.0)
    bay = spec.lonlat_arg(380_500.0, 6_120_500.0)
    out = tmp_path / "out"
    result = run_cli("site-map", utm_bathymetry, "--site", f"Farm={inland}", "--site", f"Bay={bay}",
                     "--no-map", "--out", out, expect=0)
    assert any(ln.startswith("ttmap: note: site 'Farm'") for ln in result.output.splitlines())
    record = json.loads((out / "run.json").read_text())
    assert [s["name"] for s in record["sites_skipped"]] == ["Farm"]
    assert not (out / "site_centred_Farm.tif").exists() and (out / "site_centred_Bay.tif").exists()
    alone = run_cli("site-map", utm_bathymetry, "--site", f"Farm={inland}", "--out", tmp_path / "alone")
    msg = one_line_error(alone, 1)
    assert "'Farm'" in msg and "open water" in msg
    assert not (tmp_path / "alone").exists()


# ---------------------------------------------------------------------------
# ttmap demo
# ---------------------------------------------------------------------------


def test_demo_planner_products(run_cli, tmp_path):
    from ttmap.jobs.demo import DEMO_SITE_MAP_DIR, demo_data_dir
    from ttmap.io.sites import read_sites

    out = tmp_path / "demo"
    result = run_cli("demo", "--out", out, expect=0)
    towns = read_sites(demo_data_dir() / "demo_sites.csv")
    _, rows = read_table(out / "sites.csv")
    assert [r["name"] for r in rows] == list(towns.names)
    assert all(r["front_min"] for r in rows)  # every invented town gets a time
    for name in ("sites.gpkg", "timeline.png", "coast_front.gpkg", "coast_front.sld", "map_front.png"):
        assert (out / name).is_file(), name
    assert_png_not_blank(out / "timeline.png")
    stem = towns.names[0].replace(" ", "_")
    site_dir = out / DEMO_SITE_MAP_DIR
    for name in (f"site_centred_{stem}.tif", f"minutes_left_{stem}.tif", f"map_site_{stem}.png", "run.json"):
        assert (site_dir / name).is_file(), name
    assert towns.names[0] in result.output
    assert leftovers(out) == []
    # a second demo is refused up front, the site maps included
    again = run_cli("demo", "--out", out)
    assert "--overwrite" in one_line_error(again, 1)
    run_cli("demo", "--out", out, "--overwrite", expect=0)
