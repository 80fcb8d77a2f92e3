"""``ttmap scenario check`` and ``ttmap scenario run`` through the click group.

The runs use the invented demo bathymetry (demo_bathymetry/, an invented
coast at placeholder coordinates) coarsened by 4 to stay fast, with the
serial executor.
"""

from __future__ import annotations

import hashlib
import json
import textwrap
from pathlib import Path

import numpy as np
import pytest

REPO = Path(__file__).resolve().parents[2]
DEMO_DIR = REPO / "demo_bathymetry"
DEMO_TOML = DEMO_DIR / "demo_scenarios.toml"
DEMO_TIF = DEMO_DIR / "demo_bathymetry.tif"
DEMO_SITES = DEMO_DIR / "demo_sites.csv"

#: Two ruptures generated along the invented trench and a point over the invented seamount.
SMALL = f"""\
# Invented scenarios for the invented demo coast (test copy).
[bathymetry]
path = "{DEMO_TIF.as_posix()}"
coarsen = 4

[speed]
periods_s = [600]

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

[sites]
path = "{DEMO_SITES.as_posix()}"

[outputs]
folder = "out"
envelope = true
compare = [["arc-01", "seamount-point"]]
executor = "local"
"""

#: A point in the invented closed lagoon (Vessamere, demo README): water in the
#: raster, so the file validates, but cut off from the sea, so its solves fail.
LAGOON = """
[[scenario]]
name = "lagoon"
point = [-142.825, -36.2583]
max_time_h = 3
"""


def _write(folder: Path, text: str) -> Path:
    path = folder / "small.toml"
    path.write_text(textwrap.dedent(text))
    return path


def _read(path: Path) -> np.ndarray:
    import rasterio

    with rasterio.open(path) as src:
        return src.read(1, masked=True).astype(np.float64).filled(np.nan)


# ---------------------------------------------------------------------------
# check
# ---------------------------------------------------------------------------


def test_check_demo_file(run_cli):
    result = run_cli("scenario", "check", DEMO_TOML, expect=0)
    out = result.stdout
    assert f"{DEMO_TOML}: valid" in out
    assert "scenarios: 9 (2 written out, 7 generated along 1 trench(es))" in out
    assert "solves: 18 (9 fronts + 9 x 1 period(s))" in out
    # Strasser et al. 2010, SRL 81(6):941-950, interface: Mw 8 -> 160 x 84 km
    # (docs/references.md §5).
    assert "Mw 8 -> 160 x 84 km each (strasser2010-interface, Strasser et al. 2010)" in out
    assert f"outputs: {DEMO_DIR / 'demo_scenarios_out'}" in out
    assert "sites: 8 in" in out


def test_check_broken_file_lists_every_problem(run_cli, tmp_path: Path):
    text = (
        SMALL.replace("mw = 8.0", "mw = 10.0")
        .replace("point = [-146.90, -33.30]", "point = [-155.0, -33.3]")
        .replace("envelope = true", "envelope = true\nenvelop = false")
    )
    path = _write(tmp_path, text)
    result = run_cli("scenario", "check", path, expect=1)
    lines = result.stderr.strip().splitlines()
    lines_no = {s: i for i, line in enumerate(text.splitlines(), 1) for s in (line.strip(),)}
    assert lines == [
        (
            f"{path}:{lines_no['mw = 10.0']}: trench[1].mw: Mw 10 is outside 6.0 to 9.6, the range "
            "of the scaling relations; give a magnitude in that range"
        ),
        (
            f"{path}:{lines_no['point = [-155.0, -33.3]']}: scenario[1].point: point source at "
            "(lon -155, lat -33.3) lies outside the grid (lon -150 to -141, lat -38 to -31); move "
            "it inside or use a larger bathymetry"
        ),
        (
            f"{path}:{lines_no['envelop = false']}: outputs.envelop: unknown key 'envelop'; "
            "did you mean 'envelope'?"
        ),
        f"3 problems found in {path}; nothing was run",
    ]
    assert "Traceback" not in result.output
    assert result.stdout == ""


def test_check_missing_file(run_cli, tmp_path: Path):
    result = run_cli("scenario", "check", tmp_path / "none.toml", expect=1)
    assert f"{tmp_path / 'none.toml'}: scenario file not found; check the path" in result.stderr


def test_run_refuses_a_broken_file_before_solving(run_cli, tmp_path: Path):
    path = _write(tmp_path, SMALL.replace("spacing_km = 70", 'spacing_km = "70"'))
    result = run_cli("scenario", "run", path, "--executor", "serial", expect=1)
    assert "trench[1].spacing_km: must be a number" in result.stderr
    assert not (tmp_path / "out").exists()


def test_run_bad_executor_option_is_a_usage_error(run_cli, tmp_path: Path):
    path = _write(tmp_path, SMALL)
    result = run_cli("scenario", "run", path, "--executor", "seriel", expect=2)
    assert "did you mean 'serial'?" in result.output


# ---------------------------------------------------------------------------
# run
# ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def small_run(tmp_path_factory: pytest.TempPathFactory):
    """One serial run of SMALL (3 scenarios x (front + 600 s) = 6 solves)."""
    from ttmap.cli.main import cli
    from ttmap.cli.scenario import scenario

    if "scenario" not in cli.commands:
        cli.add_command(scenario)
    from click.testing import CliRunner

    folder = tmp_path_factory.mktemp("scenario_run")
    path = _write(folder, SMALL)
    result = CliRunner().invoke(cli, ["scenario", "run", str(path), "--executor", "serial"])
    return {"path": path, "out": folder / "out", "result": result}


def test_run_writes_rasters_envelope_difference_and_record(small_run):
    result, out = small_run["result"], small_run["out"]
    assert result.exit_code == 0, result.output
    names = ["arc-01", "arc-02", "seamount-point"]
    for n in names:
        for key in ("front", "group_T600s"):
            assert (out / f"arrival_{n}_{key}.tif").is_file()
    assert "[6/6]" in result.stderr
    assert f"envelope: {out / 'envelope_min.tif'}" in result.stderr
    assert f"run record: {out / 'run.json'}" in result.stderr

    fronts = [_read(out / f"arrival_{n}_front.tif") for n in names]
    assert all(np.isfinite(f).sum() > 1000 for f in fronts)
    env = _read(out / "envelope_min.tif")
    expected = np.fmin(np.fmin(fronts[0], fronts[1]), fronts[2])
    np.testing.assert_allclose(env, expected, rtol=0, atol=1e-4, equal_nan=True)
    # The energy of 600 s waves arrives after the front.
    group = _read(out / "arrival_seamount-point_group_T600s.tif")
    both = np.isfinite(group) & np.isfinite(fronts[2])
    assert np.all(group[both] >= fronts[2][both] - 1e-3)
    assert np.nanmax(group - fronts[2]) > 1.0

    diff = _read(out / "difference_arc-01_minus_seamount-point.tif")
    np.testing.assert_allclose(diff, fronts[0] - fronts[2], atol=1e-3, equal_nan=True)

    # every comparison file comes with a style and a map, and the summary names each file
    written = [
        "envelope_min.tif", "envelope_first_scenario.tif", "envelope_first_scenario.csv",
        "envelope_min.sld", "envelope_min.png", "envelope_first_scenario.sld",
        "envelope_first_scenario.png", "difference_arc-01_minus_seamount-point.tif",
        "difference_arc-01_minus_seamount-point.sld", "difference_arc-01_minus_seamount-point.png",
    ]
    for name in written:
        assert (out / name).is_file(), name
        assert str(out / name) in result.stderr, name
    record = json.loads((out / "run.json").read_text())
    listed = {Path(p).name for p in record["products"]}
    assert set(written) <= listed


def test_run_record(small_run):
    out, path = small_run["out"], small_run["path"]
    record = json.loads((out / "run.json").read_text())
    inputs = record["inputs"]
    assert inputs["scenario_file"]["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()
    assert inputs["bathymetry"]["sha256"] == hashlib.sha256(DEMO_TIF.read_bytes()).hexdigest()
    assert [s["name"] for s in record["scenarios"]] == ["seamount-point", "arc-01", "arc-02"]
    assert record["trenches"][0]["scenarios"] == ["arc-01", "arc-02"]
    assert round(record["trenches"][0]["length_km"]) == 160
    assert record["parameters"]["executor"] == "serial"  # the option beats the file's "local"
    assert record["parameters"]["medium"]["coarsen"] == 4
    assert len(record["tasks"]) == 6 and all(t["ok"] for t in record["tasks"])
    assert record["failed"] == []
    assert record["versions"]["ttmap"]
    assert set(record["timings_s"]) >= {"validate_s", "solve_s", "compare_s", "total_s"}
    assert record["comparisons"]["envelope"]["envelope_min"] == str(out / "envelope_min.tif")
    # the one run-record schema (docs/run-record.md), as for map and site-map runs
    from ttmap.jobs.record import validate_run_record

    assert validate_run_record(record) == []
    assert record["job"] == "scenario"
    listed = set(record["products"])
    assert "envelope_min.tif" in listed and all((out / p).exists() for p in listed)


def test_run_writes_sites_by_scenarios(small_run):
    import csv

    import matplotlib.image as mpimg

    out = small_run["out"]
    assert small_run["result"].exit_code == 0, small_run["result"].output
    from ttmap.products.cautions import CAUTION_SHORT

    table, first, png = (
        out / "sites_x_scenarios.csv",
        out / "earliest_by_site.csv",
        out / "sites_x_scenarios.png",
    )
    for path in (table, first):
        assert path.read_text().splitlines()[0] == "# " + CAUTION_SHORT
    rows = list(csv.DictReader(x for x in table.read_text().splitlines() if not x.startswith("#")))
    names = ["seamount-point", "arc-01", "arc-02"]
    assert len(rows) == 8 * 3
    assert [r["scenario"] for r in rows[:3]] == names
    assert "energy_T600s_min" in rows[0]
    fronts = {n: _read(out / f"arrival_{n}_front.tif") for n in names}
    env = _read(out / "envelope_min.tif")
    reached = [r for r in rows if r["front_min"]]
    assert reached  # some demo towns lie within the search radius of reached water
    by_site: dict[str, list[dict]] = {}
    for r in rows:
        by_site.setdefault(r["name"], []).append(r)
    earliest = {
        r["name"]: r for r in csv.DictReader(
            x for x in first.read_text().splitlines() if not x.startswith("#")
        )
    }
    assert len(earliest) == 8
    for site, group in by_site.items():
        times = {r["scenario"]: float(r["front_min"]) for r in group if r["front_min"]}
        flagged = [r["scenario"] for r in group if r["earliest_for_site"] == "true"]
        if not times:
            assert flagged == [] and earliest[site]["earliest_scenario"] == ""
            continue
        best = min(times.values())
        assert flagged == [n for n, t in times.items() if t == best]
        assert earliest[site]["earliest_scenario"] == ";".join(flagged)
        # the envelope holds the earliest front at every cell, so at the snapped one too
        assert float(earliest[site]["front_min"]) == pytest.approx(best, abs=0.01)
        assert best >= np.nanmin(env) - 0.01
        assert all(np.nanmin(fronts[n]) - 0.01 <= t for n, t in times.items())
    img = mpimg.imread(png)
    assert img.shape[0] > 300
    assert np.unique(img.reshape(-1, img.shape[-1]), axis=0).shape[0] > 50  # not blank

    record = json.loads((out / "run.json").read_text())
    for path in (table, first, png):
        assert path.relative_to(out).as_posix() in record["products"]
    assert "envelope_min.tif" in record["products"]
    summary = record["sites"]
    assert summary["count"] == 8 and summary["scenarios"] == names
    assert summary["files"]["chart_png"] == str(png)
    assert set(summary["earliest"]) == {s for s, r in earliest.items() if r["earliest_scenario"]}


def test_rerun_resumes_and_no_resume_refuses(small_run, run_cli):
    path, out = small_run["path"], small_run["out"]
    before = (out / "arrival_arc-01_front.tif").stat().st_mtime_ns
    result = run_cli("scenario", "run", path, "--executor", "serial", expect=0)
    assert "6 of 6 solves finished (6 kept from an earlier run)" in result.stderr
    assert (out / "arrival_arc-01_front.tif").stat().st_mtime_ns == before
    refused = run_cli("scenario", "run", path, "--executor", "serial", "--no-resume", expect=1)
    assert "--overwrite" in refused.output
    assert "Traceback" not in refused.output


def test_failed_scenario_is_listed_and_others_kept(run_cli, tmp_path: Path):
    text = SMALL.replace(
        'compare = [["arc-01", "seamount-point"]]', 'compare = [["arc-01", "lagoon"]]'
    )
    path = _write(tmp_path, text + LAGOON)
    result = run_cli(
        "scenario", "run", path, "--executor", "serial", "--out", tmp_path / "elsewhere", expect=1
    )
    err = result.stderr
    assert "2 solve(s) failed:" in err
    assert "  lagoon_front: " in err and "  lagoon_group_T600s: " in err
    assert "skipped difference arc-01 vs lagoon: no front for lagoon (failed)" in err
    out = tmp_path / "elsewhere"
    assert not (tmp_path / "out").exists()
    assert (out / "arrival_arc-01_front.tif").is_file()
    assert not (out / "arrival_lagoon_front.tif").exists()
    assert (out / "envelope_min.tif").is_file()
    record = json.loads((out / "run.json").read_text())
    assert [f["name"] for f in record["failed"]] == ["lagoon_front", "lagoon_group_T600s"]
