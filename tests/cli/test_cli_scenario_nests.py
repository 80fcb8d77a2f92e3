"""Scenario files with ``[[nest]]`` tables: validation, nest rasters per task, record, resume.

The runs use a crop of the invented demo bathymetry (ttmap/demo_data, an
invented coast at placeholder coordinates) at its own 1 arc-minute cells with
the invented harbour nest shipped with the demo (``demo_harbour.tif``, 50 m
cells in UTM 7 S), one invented point source offshore and the serial executor.

External check: continuity across the nest edge within one basin cell's
travel time at the long-wave speed sqrt(g h) (the issue's acceptance figure,
common practice, no source; the speed: docs/references.md section 2, Lamb,
Hydrodynamics, 1932, section 170; g = 9.80665 m/s^2, 3rd CGPM 1901). Ground
distances are pyproj's WGS84 geodesics.
"""

from __future__ import annotations

import json
import math
import shutil
import textwrap
from pathlib import Path
from typing import Any

import numpy as np
import pytest
import rasterio

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "ttmap" / "demo_data"
G_M_S2 = 9.80665

#: One invented point source (the demo's), the front and one period: two tasks.
SCENARIOS = """\
[bathymetry]
path = "{bathy}"
crop_lonlat = [-145.5, -36.0, -141.5, -33.0]

[speed]
periods_s = [300]

[[scenario]]
name = "offshore"
point = [-144.9, -34.2]
max_time_h = 3

{nests}
[outputs]
folder = "out"
envelope = false
executor = "serial"
"""


def _write(folder: Path, nests: str, name: str = "s.toml", extra: str = "") -> Path:
    path = folder / name
    path.write_text(textwrap.dedent(SCENARIOS.format(bathy=(DEMO / "demo_bathymetry.tif").as_posix(),
                                                     nests=nests)) + extra)
    return path


def _read(path: Path) -> tuple[np.ndarray, Any, Any]:
    with rasterio.open(path) as src:
        return src.read(1, masked=True).astype(np.float64).filled(np.nan), src.transform, src.crs


def _harbour(folder: Path) -> Path:
    return Path(shutil.copy(DEMO / "demo_harbour.tif", folder / "harbour.tif"))


@pytest.fixture(scope="module")
def nested_run(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    from click.testing import CliRunner

    from ttmap.cli.main import cli

    folder = tmp_path_factory.mktemp("scenario_nests")
    _harbour(folder)
    path = _write(folder, '[[nest]]\npath = "harbour.tif"\nname = "bay"\n')
    result = CliRunner().invoke(cli, ["scenario", "run", str(path)])
    assert result.exit_code == 0, result.output + repr(result.exception)
    return {"folder": folder, "path": path, "out": folder / "out", "result": result}


def test_nest_rasters_written_per_task(nested_run: dict[str, Any]) -> None:
    out = nested_run["out"]
    for task in ("offshore_front", "offshore_group_T300s"):
        basin = out / f"arrival_{task}.tif"
        nest = out / f"arrival_{task}_nest-bay.tif"
        assert basin.is_file() and nest.is_file()
        time_min, transform, crs = _read(nest)
        assert crs.to_epsg() == 32707  # on the nest's own grid and CRS
        with rasterio.open(DEMO / "demo_harbour.tif") as src:
            assert time_min.shape == (src.height, src.width)
            assert transform == src.transform
        assert np.isfinite(time_min).sum() > 1000
        with rasterio.open(nest) as src:
            assert src.tags()["NEST"] == "bay"
            with rasterio.open(basin) as b:
                assert src.tags()["TASK_INPUTS_SHA256"] == b.tags()["TASK_INPUTS_SHA256"]
    # the energy of 300 s waves (group speed below sqrt(g h)) arrives after the front
    front, _, _ = _read(out / "arrival_offshore_front_nest-bay.tif")
    energy, _, _ = _read(out / "arrival_offshore_group_T300s_nest-bay.tif")
    both = np.isfinite(front) & np.isfinite(energy)
    assert both.sum() > 1000 and bool((energy[both] >= front[both] - 1e-3).all())


def test_nest_continuous_with_the_basin_near_its_edge(nested_run: dict[str, Any]) -> None:
    """Nest cells one to two basin cells in from the edge against the basin field there."""
    from pyproj import Geod, Transformer

    out = nested_run["out"]
    nest, ntr, ncrs = _read(out / "arrival_offshore_front_nest-bay.tif")
    basin, btr, _ = _read(out / "arrival_offshore_front.tif")
    with rasterio.open(DEMO / "demo_harbour.tif") as src:
        elev = src.read(1, masked=True).astype(np.float64).filled(np.nan)
    rows, cols = nest.shape
    r, c = np.mgrid[0:rows, 0:cols]
    cell_m = abs(ntr.a)
    # distance in from the nest's edge, metres
    inset_m = np.minimum.reduce([r, c, rows - 1 - r, cols - 1 - c]).astype(np.float64) * cell_m
    lon0, lat0 = Transformer.from_crs(ncrs, "EPSG:4326", always_xy=True).transform(
        *(ntr @ (cols / 2, rows / 2)))
    geod = Geod(ellps="WGS84")
    basin_cell_m = max(geod.inv(lon0, lat0, lon0 + btr.a, lat0)[2], geod.inv(lon0, lat0, lon0, lat0 + btr.a)[2])
    band = (inset_m >= basin_cell_m) & (inset_m <= 2 * basin_cell_m) & np.isfinite(nest) & (elev < -5.0)
    assert band.sum() > 100
    x, y = ntr @ (c[band] + 0.5, r[band] + 0.5)
    lon, lat = Transformer.from_crs(ncrs, "EPSG:4326", always_xy=True).transform(x, y)
    # bilinear on the basin's cell centres (reached corners only)
    fc, fr = ~btr @ (np.asarray(lon), np.asarray(lat))
    fc, fr = fc - 0.5, fr - 0.5
    c0, r0 = np.floor(fc).astype(int), np.floor(fr).astype(int)
    wc, wr = fc - c0, fr - r0
    num = np.zeros(c0.size)
    den = np.zeros(c0.size)
    for dr, dc, w in ((0, 0, (1 - wr) * (1 - wc)), (0, 1, (1 - wr) * wc), (1, 0, wr * (1 - wc)), (1, 1, wr * wc)):
        v = basin[r0 + dr, c0 + dc]
        ok = np.isfinite(v)
        num += np.where(ok, v * w, 0.0)
        den += np.where(ok, w, 0.0)
    good = den > 0.5
    basin_min = num[good] / den[good]
    depth_m = -elev[band][good]
    one_cell_min = basin_cell_m / np.sqrt(G_M_S2 * depth_m) / 60.0
    jump = np.abs(nest[band][good] - basin_min)
    print(f"nest edge band: {good.sum()} cells, largest jump {jump.max():.3f} min, "
          f"{(jump / one_cell_min).max():.3f} of one basin cell's travel time")
    assert good.sum() > 100
    assert bool((jump <= one_cell_min).all())


def test_run_record_lists_the_nesting(nested_run: dict[str, Any]) -> None:
    import hashlib

    rec = json.loads((nested_run["out"] / "run.json").read_text())
    sha = hashlib.sha256((nested_run["folder"] / "harbour.tif").read_bytes()).hexdigest()
    assert rec["inputs"]["nest-bay"]["sha256"] == sha
    (block,) = rec["nests"]
    assert block["name"] == "bay" and block["sha256"] == sha
    assert block["line"] == 13  # the [[nest]] table's line in the file
    assert set(block["rasters"]) == {"offshore_front", "offshore_group_T300s"}
    assert block["summary"]["offshore_front"]["cells_reached"] > 1000
    assert rec["parameters"]["table_method"] == "direct"
    assert "nest" in rec["parameters"]["table_method_reason"]
    products = " ".join(rec["products"])
    assert "arrival_offshore_front_nest-bay.tif" in products
    # each nest raster opens styled in QGIS: a .qml of its own levels beside it, listed too
    assert "arrival_offshore_front_nest-bay.qml" in rec["products"]
    assert (nested_run["out"] / "arrival_offshore_front_nest-bay.qml").is_file()
    tasks = {t["name"]: t for t in rec["tasks"]}
    assert tasks["offshore_front"]["nest_rasters"]["bay"].endswith("arrival_offshore_front_nest-bay.tif")
    record = json.loads((nested_run["out"] / "offshore_front.task.json").read_text())
    assert record["inputs"]["nests"] == {"bay": sha}


def test_check_lists_the_nest(nested_run: dict[str, Any], run_cli: Any) -> None:
    result = run_cli("scenario", "check", nested_run["path"], expect=0)
    assert "nest 'bay':" in result.stdout


def test_resume_keeps_tasks_and_a_changed_nest_solves_again(nested_run: dict[str, Any], run_cli: Any) -> None:
    out, path = nested_run["out"], nested_run["path"]
    nest_tif = out / "arrival_offshore_front_nest-bay.tif"
    before = nest_tif.stat().st_mtime_ns
    run_cli("scenario", "run", path, expect=0)
    rec = json.loads((out / "run.json").read_text())
    assert all(t["skipped"] for t in rec["tasks"])
    assert nest_tif.stat().st_mtime_ns == before
    # change the nest raster: deepen a patch of its water by 10 m
    harbour = nested_run["folder"] / "harbour.tif"
    with rasterio.open(harbour, "r+") as src:
        a = src.read(1)
        a[150:250, 0:100] = np.where(a[150:250, 0:100] < 0, a[150:250, 0:100] - 10.0, a[150:250, 0:100])
        src.write(a, 1)
    refused = run_cli("scenario", "run", path, expect=1)
    assert "nest 'bay' (its raster's SHA-256) differs" in refused.stderr
    assert nest_tif.stat().st_mtime_ns == before
    run_cli("scenario", "run", path, "--overwrite", expect=0)
    rec = json.loads((out / "run.json").read_text())
    assert not any(t["skipped"] for t in rec["tasks"])
    assert nest_tif.stat().st_mtime_ns != before


# ---------------------------------------------------------------------------
# refusals: one line each, with the file's line, and nothing written
# ---------------------------------------------------------------------------


def _refused(run_cli: Any, folder: Path, nests: str, extra: str = "") -> str:
    path = _write(folder, nests, extra=extra)
    result = run_cli("scenario", "run", path, expect=1)
    assert "Traceback" not in result.output
    assert not (folder / "out").exists()
    return str(result.stderr)


def test_refuses_a_nest_around_a_source(run_cli: Any, tmp_path: Path) -> None:
    _harbour(tmp_path)
    # an invented point in the harbour's open water (lon/lat of a nest cell that is water)
    extra = '\n[[scenario]]\nname = "in-bay"\npoint = [-142.55, -34.55]\n'
    err = _refused(run_cli, tmp_path, '[[nest]]\npath = "harbour.tif"\n', extra)
    assert "nest[1].path: nest 'harbour' contains the source of scenario 'in-bay'" in err
    assert ":14: " in err


def test_refuses_duplicate_and_unsafe_names_and_missing_files(run_cli: Any, tmp_path: Path) -> None:
    _harbour(tmp_path)
    nests = ('[[nest]]\npath = "harbour.tif"\n\n[[nest]]\npath = "harbour.tif"\n\n'
             '[[nest]]\npath = "harbour.tif"\nname = "a b"\n\n[[nest]]\npath = "nowhere.tif"\n')
    err = _refused(run_cli, tmp_path, nests)
    assert "nest[2]: nest name 'harbour' is already used by nest[1] (line 13)" in err
    assert "nest[3].name: name = 'a b' must be 1-64 letters" in err
    assert "nest[4].path: nest raster 'nowhere.tif' not found" in err


def test_refuses_overlap_outside_and_dry_nests(run_cli: Any, tmp_path: Path) -> None:
    _harbour(tmp_path)
    shutil.copy(tmp_path / "harbour.tif", tmp_path / "copy.tif")
    with rasterio.open(tmp_path / "harbour.tif") as src:
        profile, a = src.profile, src.read(1)
    with rasterio.open(tmp_path / "dry.tif", "w", **profile) as dst:
        dst.write(np.full_like(a, 20.0), 1)
    nests = '[[nest]]\npath = "harbour.tif"\n\n[[nest]]\npath = "copy.tif"\n\n[[nest]]\npath = "dry.tif"\n'
    err = _refused(run_cli, tmp_path, nests)
    assert "nest[2].path: nest 'harbour' overlaps nest 'copy'" in err
    assert "nest[3].path: nest 'dry': " in err and "has no water" in err
    # outside the crop window (the harbour lies east of lon -142.6)
    (tmp_path / "s.toml").unlink()
    path = _write(tmp_path, '[[nest]]\npath = "harbour.tif"\n')
    path.write_text(path.read_text().replace("-141.5, -33.0]", "-142.5, -33.0]"))
    result = run_cli("scenario", "run", path, expect=1)
    assert "nest[1].path: nest 'harbour' reaches outside the crop window crop_lonlat" in result.stderr
    assert not (tmp_path / "out").exists()


# ---------------------------------------------------------------------------
# Sites x scenarios with a nest: sites inside it read on the nest's grid
# ---------------------------------------------------------------------------

SITES_TABLE = '\n[sites]\npath = "{sites}"\n'


def _csv_rows(path: Path) -> list[dict[str, str]]:
    import csv

    lines = [ln for ln in path.read_text().splitlines() if not ln.startswith("#")]
    return list(csv.DictReader(lines))


@pytest.fixture(scope="module")
def site_runs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    """One scenario with the harbour nest and the demo towns, the same without the nest, and the
    map job of the same point source with ``--nest`` (same crop, period and time limit)."""
    from click.testing import CliRunner

    from ttmap.cli.main import cli

    folder = tmp_path_factory.mktemp("scenario_nest_sites")
    harbour = _harbour(folder)
    sites = (DEMO / "demo_sites.csv").as_posix()
    out: dict[str, Any] = {"folder": folder}
    for key, nests in (("nested", '[[nest]]\npath = "harbour.tif"\nname = "harbour"\n'), ("plain", "")):
        path = _write(folder, nests, name=f"{key}.toml", extra=SITES_TABLE.format(sites=sites))
        path.write_text(path.read_text().replace('folder = "out"', f'folder = "{key}"'))
        result = CliRunner().invoke(cli, ["scenario", "run", str(path)])
        assert result.exit_code == 0, result.output + repr(result.exception)
        out[key] = _csv_rows(folder / key / "sites_x_scenarios.csv")
    result = CliRunner().invoke(cli, [
        "map", str(DEMO / "demo_bathymetry.tif"), "--source", "-144.9,-34.2",
        "--crop-lonlat", "-145.5,-36.0,-141.5,-33.0", "--period-s", "300", "--max-time-h", "3",
        "--nest", str(harbour), "--sites", sites, "--no-map", "--no-report", "--no-coast",
        "--out", str(folder / "map"),
    ])
    assert result.exit_code == 0, result.output + repr(result.exception)
    out["map"] = _csv_rows(folder / "map" / "sites.csv")
    return out


def _same(a: str, b: str) -> bool:
    try:
        x, y = float(a), float(b)
    except ValueError:
        return a == b
    if math.isnan(x) or math.isnan(y):
        return math.isnan(x) and math.isnan(y)
    return abs(x - y) <= 1e-6 * max(1.0, abs(x)) + 0.01  # float32 minutes, written to 2 decimals


def test_town_in_the_nest_reads_as_the_map_job_reads_it(site_runs: dict[str, Any]) -> None:
    nested = {r["name"]: r for r in site_runs["nested"]}
    mapped = {r["name"]: r for r in site_runs["map"]}
    town = nested["Saltmarrow Beach"]
    assert town["grid"] == "harbour" and town["scenario"] == "offshore"
    # the map job's site table columns, in its order, are those of the scenario table
    map_cols = list(site_runs["map"][0])
    sc_cols = [c for c in site_runs["nested"][0] if c not in ("scenario", "earliest_for_site")]
    assert sc_cols == map_cols
    assert map_cols.index("grid") == map_cols.index("status") + 1
    assert sc_cols.index("grid") == sc_cols.index("status") + 1
    assert sc_cols.index("basin_front_min") == sc_cols.index("grid") + 1
    for col in map_cols:
        assert _same(town[col], mapped["Saltmarrow Beach"][col]), (col, town[col], mapped["Saltmarrow Beach"][col])
    # on the 50 m nest the town is read much closer than on the 1 arc-minute basin grid, and its
    # basin reading is the plain run's front
    plain = {r["name"]: r for r in site_runs["plain"]}
    assert float(town["moved_m"]) < float(plain["Saltmarrow Beach"]["moved_m"])
    assert _same(town["basin_front_min"], plain["Saltmarrow Beach"]["front_min"])
    assert float(town["front_min"]) != float(town["basin_front_min"])


def test_moved_distance_in_the_nest_is_the_ground_distance(site_runs: dict[str, Any]) -> None:
    """moved_m of the nested town against the WGS84 geodesic from the town to the nearest reached
    nest cell centre (pyproj.Geod, Karney 2013), found here by brute force on the nest raster."""
    from pyproj import Geod, Transformer

    town = next(r for r in site_runs["nested"] if r["name"] == "Saltmarrow Beach")
    front, tr, crs = _read(site_runs["folder"] / "nested" / "arrival_offshore_front_nest-harbour.tif")
    rows, cols = np.nonzero(np.isfinite(front))
    x = tr.c + (cols + 0.5) * tr.a
    y = tr.f + (rows + 0.5) * tr.e
    lon, lat = Transformer.from_crs(crs, "EPSG:4326", always_xy=True).transform(x, y)
    site = {"lon": -142.4553, "lat": -34.6250}  # demo_sites.csv
    _, _, d = Geod(ellps="WGS84").inv(np.full(lon.size, site["lon"]), np.full(lon.size, site["lat"]), lon, lat)
    k = int(np.argmin(d))
    assert float(town["moved_m"]) == pytest.approx(float(d[k]), abs=1.0)
    assert float(town["front_min"]) == pytest.approx(float(front[rows[k], cols[k]]), abs=0.01)


def test_towns_outside_the_nest_are_unchanged(site_runs: dict[str, Any]) -> None:
    plain = {r["name"]: r for r in site_runs["plain"]}
    others = [r for r in site_runs["nested"] if r["name"] != "Saltmarrow Beach"]
    assert len(others) == len(plain) - 1 >= 6
    for row in others:
        assert row["grid"] == "basin"
        assert row["basin_front_min"] == row["front_min"]
        for col, value in plain[row["name"]].items():
            assert row[col] == value, (row["name"], col)
    assert "grid" not in site_runs["plain"][0]  # a run without nests keeps its columns
