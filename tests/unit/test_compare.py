"""Unit tests of comparisons: envelope and difference (ttmap.products.compare), their files
(ttmap.io.compare) and the writers that join them (ttmap.jobs.scenario)."""

from __future__ import annotations

import csv
import doctest
from pathlib import Path

import numpy as np
import pytest
import rasterio
from affine import Affine

from ttmap.defaults import ENVELOPE_TIE_TOLERANCE_MIN
from ttmap.errors import InputDataError, OutputExistsError
from ttmap.grid import Grid
from ttmap.io.raster import write_arrival_geotiff, write_raster
from ttmap.products import compare as compare_module
from ttmap.products.cautions import CAUTION_SHORT
from ttmap.io.compare import SITES_X_SCENARIOS_FILES, read_minutes
from ttmap.jobs.scenario import write_difference, write_envelope, write_sites_by_scenarios
from ttmap.products.compare import NO_SCENARIO, difference, envelope

GRID = Grid((40, 50), Affine(0.1, 0.0, 150.0, 0.0, -0.1, -30.0), "EPSG:4326")


def _fields(n: int = 4, seed: int = 3) -> list[np.ndarray]:
    """Random arrival fields (minutes) with shared land, per-scenario gaps and a tie."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        t = rng.uniform(5.0, 300.0, GRID.shape)
        t[rng.random(GRID.shape) < 0.2] = np.nan  # unreached, per scenario
        t[:5, :5] = np.nan  # land in every scenario
        out.append(t)
    if n >= 3:
        out[2][10, 10] = out[1][10, 10] = 1.0  # a tie, earliest of all
        out[0][10, 10] = 2.0
    return out


def test_module_doctests_pass():
    failed, attempted = doctest.testmod(compare_module)
    assert attempted > 0 and failed == 0


def test_envelope_is_the_cellwise_minimum_and_the_index_points_at_it():
    fields = _fields()
    earliest, first = envelope(fields)
    stack = np.stack(fields)
    expected = np.fmin.reduce(stack, axis=0)  # NaN only where every scenario is NaN
    np.testing.assert_array_equal(earliest, expected)  # NaN equal NaN here
    assert earliest.dtype == np.float64 and first.dtype == np.int16
    none = np.all(np.isnan(stack), axis=0)
    assert none[:5, :5].all()
    np.testing.assert_array_equal(first == NO_SCENARIO, none)
    rows, cols = np.nonzero(~none)
    np.testing.assert_array_equal(stack[first[rows, cols], rows, cols], earliest[rows, cols])
    assert first[10, 10] == 1  # tie between 1 and 2: the lowest index
    # every other scenario is no earlier where it arrives
    for i, t in enumerate(fields):
        ok = np.isfinite(t)
        assert (t[ok] >= earliest[ok]).all()
    # inputs are unchanged
    np.testing.assert_array_equal(np.stack(_fields()), stack)


def test_envelope_streams_from_a_generator_and_checks_shapes():
    fields = _fields(3)
    seen = []

    def gen():
        for f in fields:
            seen.append(1)
            yield f

    e1, i1 = envelope(gen())
    e2, i2 = envelope(fields)
    assert len(seen) == 3
    np.testing.assert_array_equal(e1, e2)
    np.testing.assert_array_equal(i1, i2)
    with pytest.raises(InputDataError, match="scenario 1 has shape"):
        envelope([fields[0], fields[1][:-1]])
    with pytest.raises(InputDataError, match="no arrival-time fields"):
        envelope([])
    with pytest.raises(InputDataError, match="2-D"):
        envelope([np.zeros(4)])


def test_difference_is_a_minus_b_with_nan_where_either_is_missing():
    a, b = _fields(2)
    d = difference(a, b)
    both = np.isfinite(a) & np.isfinite(b)
    np.testing.assert_array_equal(d[both], a[both] - b[both])
    assert np.isnan(d[~both]).all()
    assert both.sum() > 100 and (~both).sum() > 100
    with pytest.raises(InputDataError, match="shape"):
        difference(a, b[:, :-1])


# ---------------------------------------------------------------------------
# Writers
# ---------------------------------------------------------------------------


def _write_fields(folder: Path, fields: list[np.ndarray]) -> list[Path]:
    paths = []
    for i, t in enumerate(fields):
        p = folder / f"arrival_s{i}.tif"
        write_arrival_geotiff(p, t, GRID, tags={"SOURCE": f"s{i}"}, band_description="t")
        paths.append(p)
    return paths


def test_write_envelope_round_trip(tmp_path):
    fields = _fields()
    paths = _write_fields(tmp_path, fields)
    names = ["north", "south", "east", "west"]
    out = write_envelope(tmp_path, paths, names, GRID, False)
    assert Path(out["envelope_min"]).name == "envelope_min.tif"

    # the envelope of what was written (float32) equals the cell-wise minimum of the rasters
    stored = np.stack([read_minutes(p)[0] for p in paths])
    env, grid, tags = read_minutes(out["envelope_min"])
    assert grid.shape == GRID.shape and grid.transform == GRID.transform
    none = np.all(np.isnan(stored), axis=0)
    np.testing.assert_array_equal(np.isnan(env), none)
    np.testing.assert_array_equal(env[~none], np.nanmin(stored[:, ~none], axis=0))
    assert tags["UNITS"] == "minutes" and tags["CAUTION"] == CAUTION_SHORT
    assert tags["SCENARIO_3"] == "west"

    with rasterio.open(out["first_scenario"]) as src:
        idx = src.read(1)
        assert src.dtypes[0] == "int16" and src.nodata == -1
        t = src.tags()
    assert [t[f"SCENARIO_{i}"] for i in range(4)] == names
    np.testing.assert_array_equal(idx == -1, none)

    with open(out["lookup_csv"], newline="") as fh:
        lines = [ln for ln in fh if not ln.startswith("#")]
    table = list(csv.DictReader(lines))
    # one row per scenario, then one per tie class ("tie: a;b"), every code of the raster listed
    assert [r["name"] for r in table[:4]] == names
    assert [int(r["index"]) for r in table] == list(range(len(table)))
    assert set(np.unique(idx[~none])) <= {int(r["index"]) for r in table}
    assert sum(int(r["cells_first"]) for r in table) == int((~none).sum())
    # the members of each code, from the CSV: a scenario alone, or every scenario of a tie
    members = {int(r["index"]): [names.index(x) for x in r["name"].removeprefix("tie: ").split(";")]
               for r in table}
    assert all(len(m) >= 2 for k, m in members.items() if k >= 4)
    tol = ENVELOPE_TIE_TOLERANCE_MIN
    with np.errstate(invalid="ignore"):
        within = stored <= env + tol  # (scenario, row, col)
    for code, m in members.items():
        cells = idx == code
        assert int(cells.sum()) == int(table[code]["cells_first"])
        if not cells.any():
            continue
        # exactly the listed scenarios arrive within the tolerance of the earliest there
        expect = np.zeros(len(names), bool)
        expect[m] = True
        np.testing.assert_array_equal(within[:, cells].T, np.broadcast_to(expect, (cells.sum(), 4)))
        assert float(table[code]["earliest_min"]) == pytest.approx(float(env[cells].min()), abs=1e-3)
    assert any(k >= 4 for k in members), "the fields overlap: some cells must be ties"
    # the near-tie raster (as the one-solve envelope writes it): 1 exactly where two or more
    # scenarios arrive within the tolerance of the earliest, 0 where one does, 255 unreached
    with rasterio.open(out["tie_class"]) as src:
        tie = src.read(1)
        assert Path(out["tie_class"]).name == "envelope_first_scenario_tie.tif"
        assert src.dtypes[0] == "uint8" and src.nodata == 255
        assert float(src.tags()["TIE_TOLERANCE_S"]) == pytest.approx(60.0 * tol)
    np.testing.assert_array_equal(tie == 255, none)
    np.testing.assert_array_equal(tie[~none] == 1, within[:, ~none].sum(axis=0) >= 2)
    # styles and maps come with the rasters
    for key in ("envelope_sld", "envelope_map", "first_scenario_sld", "first_scenario_map"):
        assert Path(out[key]).is_file()
    sld = Path(out["first_scenario_sld"]).read_text()
    assert f"tie (within {tol:g} min)" in sld and 'type="values"' in sld

    with pytest.raises(OutputExistsError, match="--overwrite"):
        write_envelope(tmp_path, paths, names, GRID, False)
    write_envelope(tmp_path, paths[:2], names[:2], None, True)
    with rasterio.open(out["first_scenario"]) as src:
        assert set(np.unique(src.read(1))) <= {-1, 0, 1, 2}  # 2: the tie class of the two


def test_write_envelope_refuses_a_raster_on_another_grid(tmp_path):
    paths = _write_fields(tmp_path, _fields(2))
    other = Grid(GRID.shape, Affine(0.1, 0.0, 151.0, 0.0, -0.1, -30.0), "EPSG:4326")
    odd = tmp_path / "odd.tif"
    write_arrival_geotiff(odd, _fields(1)[0], other, tags={}, band_description="t")
    with pytest.raises(InputDataError, match=r"odd\.tif.*not on the grid"):
        write_envelope(tmp_path, [*paths, odd], ["a", "b", "c"], None, False)
    assert not (tmp_path / "envelope_min.tif").exists()
    with pytest.raises(InputDataError, match="not file-safe"):
        write_envelope(tmp_path, paths, ["a b", "c"], None, False)
    with pytest.raises(InputDataError, match="repeat"):
        write_envelope(tmp_path, paths, ["a", "a"], None, False)
    with pytest.raises(InputDataError, match="one name per raster"):
        write_envelope(tmp_path, paths, ["a"], None, False)


def test_write_difference_round_trip(tmp_path):
    a, b = _fields(2)
    pa, pb = _write_fields(tmp_path, [a, b])
    out = write_difference(tmp_path, pa, pb, "north", "south", False)
    path = Path(out["difference"])
    assert path.name == "difference_north_minus_south.tif"
    with rasterio.open(path) as src:
        raw = src.read(1)
        nodata = src.nodata
        tags = src.tags()
    a32, b32 = read_minutes(pa)[0], read_minutes(pb)[0]
    both = np.isfinite(a32) & np.isfinite(b32)
    np.testing.assert_array_equal(raw == nodata, ~both)
    np.testing.assert_array_equal(raw[both], (a32[both] - b32[both]).astype(np.float32))
    assert tags["SCENARIO_A"] == "north" and tags["SCENARIO_B"] == "south"
    assert tags["SIGN"].startswith("positive: south arrives earlier")
    assert tags["UNITS"] == "minutes"
    with pytest.raises(OutputExistsError):
        write_difference(tmp_path, pa, pb, "north", "south", False)


def test_read_minutes_refuses_other_units(tmp_path):
    p = tmp_path / "depth.tif"
    write_raster(p, np.ones(GRID.shape), GRID, tags={"UNITS": "metres"})
    with pytest.raises(InputDataError, match="not minutes"):
        read_minutes(p)
    with pytest.raises(InputDataError, match="does not exist"):
        read_minutes(tmp_path / "nope.tif")


# ---------------------------------------------------------------------------
# Sites across scenarios
# ---------------------------------------------------------------------------


def _site_fields() -> dict[str, np.ndarray]:
    """Two invented front fields (minutes) on GRID with land, a gap and a tie."""
    rows, cols = np.indices(GRID.shape).astype(np.float64)
    a = 100.0 + cols
    b = 50.0 + 3.0 * rows
    a[10:20, 10:20] = b[10:20, 10:20] = np.nan  # land in both
    a[10:20, 20] = np.nan  # reached by b only: snapping must use the envelope
    a[5, 5] = b[5, 5] = 42.0  # a tie
    return {"alpha": a, "beta": b}


def _site_list():
    from ttmap.io.sites import Site, SiteList

    def centre(r: int, c: int) -> tuple[float, float]:
        return 150.05 + 0.1 * c, -30.05 - 0.1 * r

    return SiteList(
        (
            Site("Open", *centre(2, 30), safe_ground_distance_m=444.0),
            Site(
                "East", *centre(30, 3), safe_ground_distance_m=900.0, walking_speed_m_s=1.0,
                preparation_min=5.0, notification_delay_min=20.0,
            ),
            Site("Tie", *centre(5, 5)),
            Site("Gap", *centre(15, 19), safe_ground_distance_m=0.0),
            Site("Far", 170.0, -31.0),
        )
    )


def _rows(table: dict) -> dict[tuple[str, str], dict]:
    keys = list(table)
    n = len(table["name"])
    return {
        (table["name"][i], table["scenario"][i]): {k: table[k][i] for k in keys} for i in range(n)
    }


def test_sites_by_scenarios_reads_each_site_at_its_envelope_cell():
    from ttmap.products.budget import STATUS_NO_ARRIVAL, STATUS_NO_DISTANCE
    from ttmap.products.compare import sites_by_scenarios
    from ttmap.products.sites import SNAP_MOVED, SNAP_OK, SNAP_OUTSIDE, snap_sites

    fronts = _site_fields()
    energy = {
        ("alpha", 600): fronts["alpha"] + 30.0,
        ("beta", 600.0): fronts["beta"] + 40.0,
        ("alpha", 1200): fronts["alpha"] + 55.0,
    }
    sites = _site_list()
    table = sites_by_scenarios(sites, GRID, fronts, energy, search_radius_m=15000.0)
    # The columns of the map job's site table (the one site evaluation), after name: scenario;
    # at the end: earliest_for_site.
    assert list(table) == [
        "name", "scenario", "lon", "lat", "status", "moved_m", "depth_m", "front_min",
        "earliest_min", "latest_min", "energy_T600s_min", "window_T600s_min",
        "energy_T1200s_min", "window_T1200s_min", "notification_delay_min", "minutes_left",
        "preparation_min", "safe_ground_distance_m", "walking_speed_m_s", "minutes_needed",
        "margin_min", "budget_status", "defaults_used", "earliest_for_site",
    ]
    assert table["name"] == [s for s in ("Open", "East", "Tie", "Gap", "Far") for _ in range(2)]
    assert table["scenario"] == ["alpha", "beta"] * 5

    env = np.fmin(fronts["alpha"], fronts["beta"])
    snapped = {s.name: s for s in snap_sites(sites, GRID, np.isfinite(env), search_radius_m=15000.0)}
    assert (snapped["Gap"].row, snapped["Gap"].col) == (15, 20)  # alpha never reaches it
    rows = _rows(table)
    for (site, sc), row in rows.items():
        s = snapped[site]
        assert row["status"] == s.status
        if s.row < 0:
            assert np.isnan(row["front_min"]) and np.isnan(row["energy_T600s_min"])
            continue
        np.testing.assert_equal(row["front_min"], fronts[sc][s.row, s.col])
        np.testing.assert_equal(row["energy_T600s_min"], energy[(sc, 600.0)][s.row, s.col])
    assert rows[("Open", "alpha")]["status"] == SNAP_OK
    assert rows[("Gap", "beta")]["status"] == SNAP_MOVED and rows[("Gap", "beta")]["moved_m"] > 0
    assert rows[("Far", "alpha")]["status"] == SNAP_OUTSIDE
    assert np.isnan(rows[("Open", "beta")]["energy_T1200s_min"])  # no such solve for beta
    assert rows[("Open", "alpha")]["energy_T1200s_min"] == 130.0 + 55.0

    # earliest: beta at Open (56 < 130), alpha at East (103 < 140), both on the tie,
    # beta at Gap (alpha has no arrival), nobody at Far.
    first = {k: r["earliest_for_site"] for k, r in rows.items()}
    assert first == {
        ("Open", "alpha"): False, ("Open", "beta"): True,
        ("East", "alpha"): True, ("East", "beta"): False,
        ("Tie", "alpha"): True, ("Tie", "beta"): True,
        ("Gap", "alpha"): False, ("Gap", "beta"): True,
        ("Far", "alpha"): False, ("Far", "beta"): False,
    }

    # Budget by hand, counted from the earliest arrival of the +/-5 % speed window
    # (front / 1.05), as in the map job. Open uses the defaults: delay 10 min,
    # preparation 3 min, 0.74 m/s: needed = 3 + 444 / (0.74 * 60) = 13 min.
    o = rows[("Open", "beta")]
    assert o["front_min"] == 56.0
    assert o["earliest_min"] == pytest.approx(56.0 / 1.05)
    assert o["latest_min"] == pytest.approx(56.0 / 0.95)
    assert o["minutes_left"] == pytest.approx(56.0 / 1.05 - 10.0)
    assert o["minutes_needed"] == pytest.approx(13.0)
    assert o["margin_min"] == pytest.approx(56.0 / 1.05 - 10.0 - 13.0)
    assert rows[("Open", "alpha")]["margin_min"] == pytest.approx(130.0 / 1.05 - 10.0 - 13.0)
    # East uses its own values: delay 20, preparation 5, 900 m at 1.0 m/s -> needed 20.
    e = rows[("East", "alpha")]
    assert (e["minutes_left"], e["minutes_needed"], e["margin_min"]) == pytest.approx(
        (103.0 / 1.05 - 20.0, 20.0, 103.0 / 1.05 - 40.0))
    # Gap: distance 0 -> needed = preparation only; no arrival for alpha.
    assert rows[("Gap", "beta")]["margin_min"] == pytest.approx(95.0 / 1.05 - 10.0 - 3.0)
    assert rows[("Gap", "alpha")]["budget_status"] == STATUS_NO_ARRIVAL
    assert np.isnan(rows[("Gap", "alpha")]["margin_min"])
    # No distance: margin blank.
    assert rows[("Tie", "alpha")]["budget_status"] == STATUS_NO_DISTANCE
    assert np.isnan(rows[("Tie", "alpha")]["margin_min"])

    # Budget defaults can be changed.
    other = _rows(sites_by_scenarios(
        sites, GRID, fronts, search_radius_m=15000.0, notification_delay_min=0.0,
        preparation_min=1.0, walking_speed_m_s=0.5,
    ))
    assert other[("Open", "beta")]["margin_min"] == pytest.approx(56.0 / 1.05 - (1.0 + 444.0 / 30.0))
    assert other[("East", "alpha")]["margin_min"] == pytest.approx(103.0 / 1.05 - 40.0)  # its own
    # ... and so can the stated speed uncertainty (0: the front itself).
    none = _rows(sites_by_scenarios(sites, GRID, fronts, search_radius_m=15000.0, speed_uncertainty=0.0))
    assert none[("Open", "beta")]["margin_min"] == pytest.approx(56.0 - 10.0 - 13.0)


def test_sites_by_scenarios_refuses_bad_input():
    from ttmap.products.compare import sites_by_scenarios

    fronts = _site_fields()
    sites = _site_list()
    with pytest.raises(InputDataError, match="no front"):
        sites_by_scenarios(sites, GRID, {})
    with pytest.raises(InputDataError, match="has no front"):
        sites_by_scenarios(sites, GRID, fronts, {("gamma", 600): fronts["alpha"]})
    with pytest.raises(InputDataError, match="shape"):
        sites_by_scenarios(sites, GRID, {"alpha": fronts["alpha"][:5]})
    with pytest.raises(InputDataError, match="SiteList"):
        sites_by_scenarios([("A", 150.0, -30.0)], GRID, fronts)


def test_write_sites_by_scenarios_from_rasters(tmp_path):
    import matplotlib.image as mpimg

    fronts = _site_fields()
    paths = {}
    for name, t in fronts.items():
        p = tmp_path / f"arrival_{name}_front.tif"
        write_arrival_geotiff(p, t, GRID, tags={}, band_description="front")
        paths[name] = str(p)
    e = tmp_path / "arrival_alpha_group_T600s.tif"
    write_arrival_geotiff(e, fronts["alpha"] + 30.0, GRID, tags={}, band_description="energy")
    out = write_sites_by_scenarios(
        tmp_path, _site_list(), paths, {("alpha", 600.0): str(e)}, search_radius_m=15000.0
    )
    assert [Path(out[k]).name for k in ("table_csv", "earliest_csv", "chart_png")] == list(
        SITES_X_SCENARIOS_FILES
    )
    for key in ("table_csv", "earliest_csv"):
        lines = Path(out[key]).read_text().splitlines()
        assert lines[0] == "# " + CAUTION_SHORT
    text = Path(out["table_csv"]).read_text()
    assert "planning figures, not promises" in text
    rows = list(csv.DictReader(line for line in text.splitlines() if not line.startswith("#")))
    by = {(r["name"], r["scenario"]): r for r in rows}
    assert len(rows) == 10
    assert by[("Open", "beta")]["front_min"] == "56.00"
    assert by[("Open", "beta")]["margin_min"] == f"{56.0 / 1.05 - 23.0:.2f}"
    assert by[("Open", "alpha")]["energy_T600s_min"] == "160.00"
    assert by[("Open", "beta")]["energy_T600s_min"] == ""
    assert by[("Gap", "alpha")]["front_min"] == "" and by[("Gap", "beta")]["earliest_for_site"] == "true"
    first_lines = Path(out["earliest_csv"]).read_text().splitlines()
    first = list(csv.DictReader(line for line in first_lines if not line.startswith("#")))
    assert [(r["name"], r["earliest_scenario"], r["front_min"]) for r in first] == [
        ("Open", "beta", "56.00"),
        ("East", "alpha", "103.00"),
        ("Tie", "alpha;beta", "42.00"),
        ("Gap", "beta", "95.00"),
        ("Far", "", ""),
    ]
    img = mpimg.imread(out["chart_png"])
    assert img.shape[0] > 300 and img.shape[1] > 600
    assert np.unique(img.reshape(-1, img.shape[-1]), axis=0).shape[0] > 50  # not blank
    with pytest.raises(OutputExistsError):
        write_sites_by_scenarios(tmp_path, _site_list(), paths)


def test_write_sites_by_scenarios_refuses_a_raster_on_another_grid(tmp_path):
    fronts = _site_fields()
    other = Grid(GRID.shape, Affine(0.1, 0.0, 151.0, 0.0, -0.1, -30.0), "EPSG:4326")
    pa, pb = tmp_path / "a.tif", tmp_path / "b.tif"
    write_arrival_geotiff(pa, fronts["alpha"], GRID, tags={}, band_description="t")
    write_arrival_geotiff(pb, fronts["beta"], other, tags={}, band_description="t")
    with pytest.raises(InputDataError, match="not on the grid"):
        write_sites_by_scenarios(tmp_path, _site_list(), {"alpha": str(pa), "beta": str(pb)})
    assert not (tmp_path / "sites_x_scenarios.csv").exists()


def test_render_sites_by_scenarios_orders_by_earliest_and_shows_the_caution():
    from ttmap.products.compare import render_sites_by_scenarios, sites_by_scenarios

    table = sites_by_scenarios(_site_list(), GRID, _site_fields(), search_radius_m=15000.0)
    fig = render_sites_by_scenarios(table)
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert labels == ["Tie", "Open", "Gap", "East", "Far"]  # 42, 56, 95, 103, none
    texts = " ".join(t.get_text() for t in fig.texts)
    assert " ".join(CAUTION_SHORT.split()[:6]) in " ".join(texts.split())
    assert fig.legends
