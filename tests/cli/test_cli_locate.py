"""``ttmap locate``: the demo event and every refusal.

The demo picks (ttmap/demo_data/demo_picks.csv, INVENTED) come from a forward
solve of an invented point source at lon -144.0, lat -34.8 on the invented
demo grid (make_demo_picks.py). Reference: reciprocity of first-arrival
times (Fermat's principle; docs/references.md section 8) - one solve from
each gauge gives its time from every candidate source cell - and the
least-squares misfit with the origin time profiled out and a chi-square
region on 2 degrees of freedom (Numerical Recipes ch. 15.6, from memory;
docs/reciprocal.md).
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import pytest

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "ttmap" / "demo_data"
TIF = DEMO / "demo_bathymetry.tif"
PICKS = DEMO / "demo_picks.csv"
SOURCE = (-144.0, -34.8)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory: pytest.TempPathFactory):
    from click.testing import CliRunner

    from ttmap.cli.main import cli

    out = tmp_path_factory.mktemp("locate") / "where"
    result = CliRunner().invoke(cli, ["locate", str(TIF), "--picks", str(PICKS), "--out", str(out)])
    return {"out": out, "result": result}


def test_demo_event_is_located(demo_run):
    import rasterio
    import shapely

    from ttmap.io.vector import read_vector_geometries

    res, out = demo_run["result"], demo_run["out"]
    assert res.exit_code == 0, res.output
    record = json.loads((out / "run.json").read_text())
    loc = record["location"]
    assert record["job"] == "locate"
    from ttmap.jobs.record import validate_run_record

    assert validate_run_record(record) == []
    # best cell within 2 cells of the invented source (no noise; issue 9)
    with rasterio.open(out / "locate_misfit.tif") as src:
        row, col = src.index(*SOURCE)
        assert "Analysis aid" in src.tags()["CAUTION"]
        misfit = src.read(1, masked=True)
    assert max(abs(loc["best_row"] - row), abs(loc["best_col"] - col)) <= 2
    # the true source is inside the confidence region (polygon layer and raster agree)
    geoms, _ = read_vector_geometries(out / "locate_region.gpkg")
    region = shapely.union_all(list(geoms))
    assert region.contains(shapely.Point(*SOURCE))
    assert float(misfit[row, col]) <= loc["best_misfit_chi2"] + loc["delta_chi2"]
    # origin time recovered within the pick uncertainty (1 min)
    assert loc["best_origin_time_utc"] is not None
    from ttmap.io.picks import parse_utc

    t0 = parse_utc(loc["best_origin_time_utc"], what="t0")
    assert abs((t0 - parse_utc("2030-01-01T00:00:00Z", what="o")).total_seconds()) <= 60.0
    # residuals within the stated uncertainty, one row per gauge
    rows = list(csv.DictReader(x for x in (out / "locate_residuals.csv").read_text().splitlines()
                               if not x.startswith("#")))
    assert len(rows) == 8
    assert all(abs(float(r["residual_min"])) <= 1.0 for r in rows)
    assert not loc["open"]
    assert "closed" in loc["message"]
    assert "best cell: lon" in res.stderr
    for name in ("locate_origin_time.tif", "locate_region.sld", "locate_map.png"):
        assert (out / name).is_file()
    assert "<PolygonSymbolizer>" in (out / "locate_region.sld").read_text()


def test_one_sided_gauges_are_reported_open(tmp_path: Path, run_cli):
    """Gauges all on the east coast, north of the source: the region is open/elongated."""
    lines = PICKS.read_text().splitlines()
    keep = [ln for ln in lines if ln.startswith(("#", "name", "Orvenna", "Tarnquill", "Gannix"))]
    p = tmp_path / "north.csv"
    p.write_text("\n".join(keep) + "\n")
    out = tmp_path / "o"
    result = run_cli("locate", TIF, "--picks", p, "--out", out)
    loc = json.loads((out / "run.json").read_text())["location"]
    assert loc["elongated"] or loc["open"]
    assert "open or elongated" in result.output or "elongated" in result.output


def _picks(tmp_path: Path, rows: list[str], header: str = "name,lon,lat,time_utc,uncertainty_min") -> Path:
    p = tmp_path / "picks.csv"
    p.write_text("\n".join([header, *rows]) + "\n")
    return p


GOOD = [
    "A,-143.1083,-32.1750,2030-01-01T00:56:37Z,1",
    "B,-143.1917,-35.5417,2030-01-01T00:43:00Z,1",
    "C,-145.4417,-35.0083,2030-01-01T00:12:15Z,1",
]


@pytest.mark.parametrize(
    ("rows", "extra", "code", "needle"),
    [
        (GOOD[:2], [], 1, "needs at least 3"),
        (GOOD[:1], ["--origin-time", "2030-01-01T00:00:00Z"], 1, "needs at least 2"),
        ([*GOOD[:2], "A,-145.0,-35.0,2030-01-01T00:20:00Z,1"], [], 1, "appears twice"),
        ([*GOOD[:2], "D,-160.0,-35.0,2030-01-01T00:20:00Z,1"], [], 1, "off the grid"),
        ([*GOOD[:2], "D,-141.5,-35.0,2030-01-01T00:20:00Z,1"], [], 1, "on land"),
        (GOOD, ["--origin-time", "2030-01-01T00:30:00Z"], 1, "before the origin time"),
        ([*GOOD[:2], "D,-145.0,-35.0,yesterday noon,1"], [], 1, "not an ISO 8601"),
        ([*GOOD[:2], "D,-145.0,-35.0,2030-01-01T00:20:00Z,0"], [], 1, "must be positive"),
        (GOOD, ["--origin-time", "soon"], 2, "not an ISO 8601"),
        (GOOD, ["--confidence", "1.5"], 2, "between 0 and 1"),
    ],
)
def test_bad_inputs_are_refused_in_one_line_and_nothing_is_written(
    tmp_path: Path, run_cli, rows, extra, code, needle
):
    p = _picks(tmp_path, rows)
    out = tmp_path / "out"
    result = run_cli("locate", TIF, "--picks", p, "--out", out, *extra, expect=code)
    assert needle in result.output, result.output
    assert "Traceback" not in result.output
    errors = [ln for ln in result.output.splitlines() if ln.startswith("Error")]
    assert len(errors) == 1
    assert not out.exists()


def test_minutes_after_origin_picks(tmp_path: Path, run_cli):
    """Picks in minutes after a known origin: t0 fixed at 0, 2 picks are enough."""
    from ttmap.io.picks import parse_utc

    rows = []
    for ln in PICKS.read_text().splitlines()[3:]:
        name, lon, lat, t, sig = ln.split(",")
        minutes = (parse_utc(t, what="t") - parse_utc("2030-01-01T00:00:00Z", what="o")).total_seconds() / 60
        rows.append(f"{name},{lon},{lat},{minutes:.3f},{sig}")
    p = _picks(tmp_path, rows, "name,lon,lat,minutes_after_origin,uncertainty_min")
    out = tmp_path / "o"
    run_cli("locate", TIF, "--picks", p, "--out", out)
    loc = json.loads((out / "run.json").read_text())["location"]
    assert loc["origin_known"] and loc["best_origin_time_min"] == 0.0
    assert math.hypot(loc["best_lon"] - SOURCE[0], loc["best_lat"] - SOURCE[1]) < 0.05
    assert np.isfinite(loc["best_misfit_chi2"])
