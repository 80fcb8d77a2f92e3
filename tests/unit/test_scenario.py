"""Unit tests of ttmap.scenario: scenario files, their validation and the trench generator.

Every test builds a small invented grid in ``tmp_path`` with the same bounds
as the invented demo region (lon -150 .. -141, lat -38 .. -31): 0.25-degree
cells, sea (elevation -4000 m) west of lon -143, land (+200 m) east of it.

Outside references: rupture sizes from Strasser et al. (2010), Seismological
Research Letters 81(6), 941-950 (interface: Mw 8 -> 160 x 84 km, Mw 9 ->
614 x 189 km; docs/references.md §5); geodesic distances and azimuths on
WGS84 (Karney 2013, J. Geodesy 87:43-55, via pyproj.Geod).
"""

from __future__ import annotations

import itertools
import json
import math
import textwrap
import tomllib
from pathlib import Path

import numpy as np
import pytest
from affine import Affine
from pyproj import Geod

from ttmap.tasks import check_executor
from ttmap.errors import InputDataError
from ttmap.scenario import (
    ScenarioFileError,
    format_key_path,
    load_scenario_file,
    locate_keys,
    scenario_tasks,
    summary_lines,
    trench_centres,
    validate,
)

GEOD = Geod(ellps="WGS84")
REPO = Path(__file__).resolve().parents[2]
DEMO_TOML = REPO / "demo_bathymetry" / "demo_scenarios.toml"

CELL_DEG = 0.25
TRANSFORM = Affine(CELL_DEG, 0.0, -150.0, 0.0, -CELL_DEG, -31.0)
SHAPE = (28, 36)  # 7 x 9 degrees
LAND_FROM_LON = -143.0

BASE = """\
[bathymetry]
path = "bathy.tif"

[speed]
periods_s = [600, 1200]

[[scenario]]
name = "west-point"
point = [-147.0, -34.0]

[[scenario]]
name = "box"
rupture = {centre = [-145.0, -35.0], strike_deg = 180, length_km = 120, width_km = 50}

[outputs]
folder = "out"
compare = [["west-point", "box"]]
"""


def _elevation() -> np.ndarray:
    elev = np.full(SHAPE, -4000.0, dtype=np.float32)
    first_land_col = round((LAND_FROM_LON - -150.0) / CELL_DEG)
    elev[:, first_land_col:] = 200.0
    return elev


@pytest.fixture
def folder(tmp_path: Path, write_tiny_geotiff) -> Path:
    """tmp_path holding bathy.tif (see the module docstring) and a site CSV."""
    write_tiny_geotiff(_elevation(), name="bathy.tif", transform=TRANSFORM, nodata=-32768.0)
    (tmp_path / "sites.csv").write_text("name,lon,lat\nA,-142.9,-34.0\nB,-142.9,-35.0\n")
    return tmp_path


def _write(folder: Path, text: str, name: str = "s.toml") -> Path:
    path = folder / name
    path.write_text(textwrap.dedent(text))
    return path


def _line_of(text: str, needle: str, nth: int = 1) -> int:
    """1-based line of the nth line containing ``needle`` (independent of the locator)."""
    hits = [i for i, line in enumerate(text.splitlines(), 1) if needle in line]
    return hits[nth - 1]


def _issues(path: Path) -> list[str]:
    return [str(i) for i in validate(path)]


def _one_issue(path: Path) -> str:
    issues = _issues(path)
    assert len(issues) == 1, issues
    return issues[0]


# ---------------------------------------------------------------------------
# A valid file
# ---------------------------------------------------------------------------


def test_valid_file_loads(folder: Path):
    path = _write(folder, BASE)
    sf = load_scenario_file(path)
    assert [s.name for s in sf.scenarios] == ["west-point", "box"]
    assert sf.bathymetry.path == str(folder / "bathy.tif")
    assert sf.speed.periods_s == (600.0, 1200.0)
    assert sf.outputs.folder == str(folder / "out")
    assert sf.outputs.compare == (("west-point", "box"),)
    assert sf.outputs.envelope is True
    assert sf.grid.bounds == (-150.0, -38.0, -141.0, -31.0)
    assert sf.solve_count == 6
    box = sf.scenario("box").source
    assert box.kind == "rupture"
    assert box.params["length_km"] == 120 and box.params["width_km"] == 50
    assert validate(path) == []


def test_paths_are_relative_to_the_scenario_file(folder: Path, monkeypatch):
    path = _write(folder, BASE)
    monkeypatch.chdir(folder.parent)
    sf = load_scenario_file(Path(folder.name) / path.name)
    assert sf.bathymetry.path == str(folder / "bathy.tif")


def test_scenario_tasks_front_and_periods(folder: Path):
    text = BASE.replace('name = "box"', 'name = "box"\nmax_time_h = 2\nsnap_radius_km = 5')
    text = text.replace(
        'path = "bathy.tif"',
        'path = "bathy.tif"\ncrop_lonlat = [-149, -37, -142, -32]\ncoarsen = 2',
    )
    sf = load_scenario_file(_write(folder, text))
    spec, tasks = scenario_tasks(sf)
    assert spec.bathymetry == str(folder / "bathy.tif")
    assert spec.window == (-149.0, -37.0, -142.0, -32.0) and spec.window_crs == "EPSG:4326"
    assert spec.coarsen == 2 and spec.floor_depth_m == 5.0 and spec.earth == "wgs84"
    assert [t.name for t in tasks] == [
        "west-point_front",
        "west-point_group_T600s",
        "west-point_group_T1200s",
        "box_front",
        "box_group_T600s",
        "box_group_T1200s",
    ]
    assert [(t.mode, t.period_s) for t in tasks[:3]] == [
        ("long-wave", None),
        ("group", 600.0),
        ("group", 1200.0),
    ]
    box = [t for t in tasks if t.meta["scenario"] == "box"]
    assert {t.max_time_s for t in box} == {7200.0}
    assert {t.snap_radius_m for t in box} == {5000.0}
    assert tasks[0].max_time_s is None and tasks[0].snap_radius_m is None
    assert tasks[1].meta["product"] == "group_T600s"


def test_phase_speed_and_crop_xy(folder: Path):
    text = BASE.replace("periods_s = [600, 1200]", 'periods_s = [300]\nperiod_speed = "phase"')
    text = text.replace(
        'path = "bathy.tif"', 'path = "bathy.tif"\ncrop_xy = [-149, -37, -142, -32]'
    )
    spec, tasks = scenario_tasks(load_scenario_file(_write(folder, text)))
    assert spec.window_crs is None
    assert tasks[1].name == "west-point_phase_T300s" and tasks[1].mode == "phase"


def test_demo_example_file_validates():
    assert validate(DEMO_TOML) == []
    sf = load_scenario_file(DEMO_TOML)
    trench = [s for s in sf.scenarios if s.trench is not None]
    assert 5 <= len(trench) <= 8
    assert len(sf.scenarios) == len(trench) + 2
    assert sf.trenches[0].mw == 8.0
    assert 60 <= sf.trenches[0].spacing_km <= 80
    assert sf.speed.periods_s == (600.0,)
    assert sf.sites_count == 8
    assert sf.outputs.envelope and len(sf.outputs.compare) == 1
    text = DEMO_TOML.read_text()
    assert "INVENTED" in text.splitlines()[1]


def test_summary_lines_name_counts_sizes_and_folder(folder: Path):
    text = BASE + textwrap.dedent("""\
        [[trench]]
        name_prefix = "t"
        polyline = [[-146.0, -32.0], [-146.0, -36.0]]
        spacing_km = 100
        mw = 8.0
        """)
    sf = load_scenario_file(_write(folder, text))
    text_out = "\n".join(summary_lines(sf))
    assert "scenarios: 7 (2 written out, 5 generated" in text_out
    assert "solves: 21" in text_out
    # Strasser et al. 2010, SRL 81(6):941-950, interface: Mw 8 -> 160 x 84 km.
    assert "Mw 8 -> 160 x 84 km" in text_out and "Strasser et al. 2010" in text_out
    assert f"outputs: {folder / 'out'}" in text_out


# ---------------------------------------------------------------------------
# The trench generator
# ---------------------------------------------------------------------------

#: Two segments: due south along lon -146, then towards the south-east.
POLYLINE = [(-146.0, -32.0), (-146.0, -34.5), (-144.5, -36.5)]


def test_trench_count_spacing_and_even_ends():
    centres, length_km = trench_centres(POLYLINE, 70.0)
    seg = [GEOD.inv(*POLYLINE[i], *POLYLINE[i + 1])[2] / 1000 for i in range(2)]
    assert length_km == pytest.approx(sum(seg), rel=1e-9)
    assert len(centres) == math.floor(length_km / 70.0) + 1
    for (lo0, la0, _), (lo1, la1, _) in itertools.pairwise(centres):
        d_km = GEOD.inv(lo0, la0, lo1, la1)[2] / 1000
        assert d_km == pytest.approx(70.0, rel=0.01)
    # The rest is split evenly: first centre as far from the start as the last from the end.
    start = GEOD.inv(*POLYLINE[0], centres[0][0], centres[0][1])[2]
    end = GEOD.inv(centres[-1][0], centres[-1][1], *POLYLINE[-1])[2]
    assert start == pytest.approx(end, abs=1.0)


def test_trench_strikes_follow_the_polyline():
    centres, _ = trench_centres(POLYLINE, 70.0)
    bend_lat = POLYLINE[1][1]
    first_seg = [c for c in centres if c[1] > bend_lat]
    second_seg = [c for c in centres if c[1] < bend_lat - 0.05]
    assert first_seg and second_seg
    for _, _, strike in first_seg:  # due south along a meridian
        assert strike == pytest.approx(180.0, abs=1e-6)
    for lon, lat, strike in second_seg:  # the azimuth from the centre to the segment's end
        az = GEOD.inv(lon, lat, *POLYLINE[2])[0] % 360.0
        assert strike == pytest.approx(az, abs=1e-6)
        assert 120.0 < strike < 160.0


def test_trench_rejects_repeated_point_and_short_line():
    with pytest.raises(InputDataError, match="repeats the point"):
        trench_centres([(-146.0, -32.0), (-146.0, -32.0)], 50.0)
    with pytest.raises(InputDataError, match="at least two"):
        trench_centres([(-146.0, -32.0)], 50.0)


def test_trench_table_generates_named_ruptures_of_scaling_size(folder: Path):
    text = BASE + textwrap.dedent("""\
        [[trench]]
        name_prefix = "arc"
        polyline = [[-146.0, -32.0], [-146.0, -34.5], [-144.5, -36.5]]
        spacing_km = 70
        mw = 8.0
        max_time_h = 3
        """)
    sf = load_scenario_file(_write(folder, text))
    centres, _ = trench_centres(POLYLINE, 70.0)
    gen = [s for s in sf.scenarios if s.trench == "arc"]
    assert [s.name for s in gen] == [f"arc-{k:02d}" for k in range(1, len(centres) + 1)]
    assert sf.trenches[0].scenario_names == tuple(s.name for s in gen)
    for s, (lon, lat, strike) in zip(gen, centres):
        p = s.source.params
        assert (p["lon"], p["lat"], p["strike_deg"]) == pytest.approx((lon, lat, strike))
        # Strasser et al. (2010), SRL 81(6):941-950, interface, Mw 8: 160 x 84 km
        # (docs/references.md §5).
        assert (round(p["length_km"]), round(p["width_km"])) == (160, 84)
        assert p["scaling_relation"] == "strasser2010-interface"
        assert s.max_time_s == 3 * 3600.0
    # The rectangle's long side lies along the strike: its corners are 160 km apart
    # along the polyline direction and 84 km across it.
    poly = gen[0].source.geometry
    lon0, lat0, strike0 = centres[0]
    ext = []
    for az in (strike0, strike0 + 90.0):
        xs = [GEOD.inv(lon0, lat0, x, y) for x, y in poly.exterior.coords]
        ext.append(max(d * math.cos(math.radians(a - az)) for a, _, d in xs) / 1000)
    assert ext[0] == pytest.approx(160.0 / 2, rel=0.01)
    assert ext[1] == pytest.approx(84.3 / 2, rel=0.01)


def test_trench_other_scaling_law(folder: Path):
    text = BASE + textwrap.dedent("""\
        [[trench]]
        name_prefix = "b"
        polyline = [[-148.0, -33.0], [-148.0, -35.0]]
        spacing_km = 100
        mw = 9.0
        scaling_law = "strasser2010-interface"
        """)
    sf = load_scenario_file(_write(folder, text))
    # Strasser et al. 2010 interface, Mw 9: 614 x 189 km (docs/references.md §5).
    assert (round(sf.trenches[0].length_km), round(sf.trenches[0].width_km)) == (614, 189)


# ---------------------------------------------------------------------------
# The key locator
# ---------------------------------------------------------------------------


def test_locate_keys_tables_arrays_inline_and_dotted():
    text = textwrap.dedent("""\
        # comment with [brackets] and key = 1
        [bathymetry]
        path = "a # not a comment.tif"

        [[scenario]]
        name = "one"
        point = [1, 2]

        [[scenario]]
        name = '''multi
        line'''
        rupture = {centre = [1, 2], strike_deg = 10, mw = 8.0}
        rupture2 . mw = 7

        

        [scenario.extra]
        k = 1

        [[trench]]
        polyline = [
          [1, 2], # first
          [3, 4],
        ]
        """)
    tomllib.loads(text)  # valid TOML
    lines = locate_keys(text)
    assert lines[("bathymetry",)] == 2
    assert lines[("bathymetry", "path")] == 3
    assert lines[("scenario", 0)] == 5
    assert lines[("scenario", 0, "point")] == 7
    assert lines[("scenario", 1)] == 9
    assert lines[("scenario", 1, "name")] == 10
    assert lines[("scenario", 1, "rupture")] == 12
    assert lines[("scenario", 1, "rupture", "centre")] == 12
    assert lines[("scenario", 1, "rupture", "mw")] == 12
    assert lines[("scenario", 1, "rupture2", "mw")] == 13
    assert lines[("scenario", 1, "extra", "k")] == _line_of(text, "k = 1")
    assert lines[("trench", 0, "polyline", 0)] == _line_of(text, "[1, 2], # first")
    assert lines[("trench", 0, "polyline", 1)] == _line_of(text, "[3, 4],")


def test_format_key_path_counts_from_one():
    assert format_key_path(("scenario", 1, "rupture", "mw")) == "scenario[2].rupture.mw"
    assert format_key_path(("outputs", "compare", 0)) == "outputs.compare[1]"


# ---------------------------------------------------------------------------
# One test per kind of problem: message, line and key path
# ---------------------------------------------------------------------------


def test_toml_syntax_error_names_the_line(folder: Path):
    text = BASE.replace("point = [-147.0, -34.0]", "point = [-147.0 -34.0]")
    path = _write(folder, text)
    issue = _one_issue(path)
    assert issue.startswith(f"{path}:{_line_of(text, 'point = [-147.0')}: not valid TOML: ")
    assert issue.endswith("; fix the syntax there")


def test_unknown_key_suggests_the_closest(folder: Path):
    text = BASE.replace("length_km = 120", "lenght_km = 120")
    path = _write(folder, text)
    issues = _issues(path)
    line = _line_of(text, "lenght_km")
    assert (
        f"{path}:{line}: scenario[2].rupture.lenght_km: unknown key 'lenght_km'; did you mean "
        "'length_km'?" in issues
    )
    # ... and the missing length is reported too, at the same rupture.
    assert any("scenario[2].rupture: missing required key 'length_km'" in i for i in issues)


def test_unknown_table_suggests_the_closest(folder: Path):
    text = BASE.replace("[outputs]", "[output]")
    path = _write(folder, text)
    assert _one_issue(path) == (
        f"{path}:{_line_of(text, '[output]')}: output: unknown table or key 'output'; did you "
        "mean 'outputs'?"
    )


def test_unknown_key_without_a_close_match_lists_the_valid_ones(folder: Path):
    text = BASE.replace('folder = "out"', 'folder = "out"\nzzz = 1')
    issue = _one_issue(_write(folder, text))
    assert (
        "outputs.zzz: unknown key 'zzz'; choose one of: folder, compare, envelope, executor, "
        "workers" in issue
    )


def test_wrong_type_number_given_as_text(folder: Path):
    text = BASE.replace("length_km = 120", 'length_km = "120"')
    path = _write(folder, text)
    assert _one_issue(path) == (
        f"{path}:{_line_of(text, 'length_km')}: scenario[2].rupture.length_km: must be a number "
        "(along-strike length), got text '120'; write it without quotes: length_km = 120"
    )


def test_wrong_type_boolean_and_array(folder: Path):
    text = BASE.replace('folder = "out"', 'folder = "out"\nenvelope = "yes"').replace(
        "periods_s = [600, 1200]", "periods_s = 600"
    )
    path = _write(folder, text)
    issues = _issues(path)
    assert (
        f"{path}:{_line_of(text, 'periods_s')}: speed.periods_s: must be an array of periods in "
        "seconds, got a whole number (600); write periods_s = [600]" in issues
    )
    assert (
        f"{path}:{_line_of(text, 'envelope')}: outputs.envelope: must be true or false (no "
        "quotes), got text 'yes'" in issues
    )


def test_missing_required_key(folder: Path):
    text = BASE + textwrap.dedent("""\
        [[trench]]
        name_prefix = "t"
        polyline = [[-146.0, -32.0], [-146.0, -36.0]]
        mw = 8.0
        """)
    path = _write(folder, text)
    assert _one_issue(path) == (
        f"{path}:{_line_of(text, '[[trench]]')}: trench[1]: missing required key 'spacing_km' "
        "(distance between rupture centres); add spacing_km = ..."
    )


def test_missing_bathymetry_table_and_no_scenarios(folder: Path):
    path = _write(folder, '[outputs]\nfolder = "x"\n')
    issues = _issues(path)
    assert (
        f"{path}: bathymetry: missing required table [bathymetry]; add it with at least path = "
        '"bathy.tif" (the raster)' in issues
    )
    assert f"{path}: no scenarios: add at least one [[scenario]] or [[trench]] table" in issues


def test_scenario_needs_exactly_one_source(folder: Path):
    text = BASE.replace(
        "point = [-147.0, -34.0]", 'point = [-147.0, -34.0]\nsource_file = "x.gpkg"'
    )
    path = _write(folder, text)
    assert _one_issue(path) == (
        f"{path}:{_line_of(text, '[[scenario]]')}: scenario[1]: give exactly one source: point "
        "= [lon, lat], "
        'rupture = {...} or source_file = "..." (found: point, source_file)'
    )


def test_rupture_size_given_twice(folder: Path):
    text = BASE.replace("length_km = 120, width_km = 50", "length_km = 120, width_km = 50, mw = 8")
    issue = _one_issue(_write(folder, text))
    assert (
        "scenario[2].rupture: give either mw (with an optional scaling_law) or length_km and "
        "width_km, not both" in issue
    )


def test_missing_files(folder: Path):
    text = BASE.replace('path = "bathy.tif"', 'path = "nope.tif"') + '[sites]\npath = "towns.csv"\n'
    path = _write(folder, text)
    issues = _issues(path)
    assert (
        f"{path}:{_line_of(text, 'nope.tif')}: bathymetry.path: bathymetry raster 'nope.tif' "
        f"not found (looked in {folder}); give a path relative to the scenario file's folder"
        in issues
    )
    assert (
        f"{path}:{_line_of(text, 'towns.csv')}: sites.path: site file 'towns.csv' not found "
        f"(looked in {folder}); give a path relative to the scenario file's folder" in issues
    )


def test_site_csv_without_coordinates(folder: Path):
    (folder / "bad_sites.csv").write_text("town,x\nA,1\n")
    text = BASE + '[sites]\npath = "bad_sites.csv"\n'
    path = _write(folder, text)
    issue = _one_issue(path)
    # The message of the site reader the run uses (ttmap.io.sites.read_sites), with its line.
    assert issue == (
        f"{path}:{_line_of(text, 'bad_sites.csv')}: sites.path: site file "
        f"'{folder / 'bad_sites.csv'}', line 1: no 'name' column (columns: town, x); add a "
        "'name' column or choose one with the name-field option"
    )


@pytest.mark.parametrize(
    "csv_text",
    [
        "name,longitude,latitude\nA,-142.9,-34.0\n",  # the documented long names
        "# invented towns\n\nname,lon,lat\nA,-142.9,-34.0\nB,-142.9,-35.0\n",  # a comment first
        "Name;LON;Lat\nA;-142.9;-34.0\n",  # another separator, any case
    ],
)
def test_site_files_the_run_reads_are_accepted(folder: Path, csv_text: str):
    (folder / "towns.csv").write_text(csv_text)
    sf = load_scenario_file(_write(folder, BASE + '[sites]\npath = "towns.csv"\n'))
    assert sf.sites_count == csv_text.count("\nA") + csv_text.count("\nB")


def test_site_row_the_run_refuses_is_refused_with_its_line(folder: Path):
    (folder / "towns.csv").write_text("name,lon,lat\nA,-142.9,-34.0\nB,abc,-35.0\n")
    text = BASE + '[sites]\npath = "towns.csv"\n'
    path = _write(folder, text)
    issue = _one_issue(path)
    assert issue.startswith(f"{path}:{_line_of(text, 'towns.csv')}: sites.path: site file ")
    assert "towns.csv', line 3, column 'lon': 'abc' is not a number" in issue


def test_site_file_counted(folder: Path):
    sf = load_scenario_file(_write(folder, BASE + '[sites]\npath = "sites.csv"\n'))
    assert sf.sites_count == 2 and sf.sites_path == str(folder / "sites.csv")


def test_duplicate_scenario_names(folder: Path):
    text = BASE.replace('name = "box"', 'name = "west-point"').replace(
        'compare = [["west-point", "box"]]', ""
    )
    path = _write(folder, text)
    line = _line_of(text, 'name = "west-point"', nth=2)
    first = _line_of(text, 'name = "west-point"', nth=1)
    assert _one_issue(path) == (
        f"{path}:{line}: scenario[2].name: scenario name 'west-point' is already used by "
        f"scenario[1] (line {first}); give each scenario its own name"
    )


def test_generated_names_clash_with_written_ones(folder: Path):
    text = BASE.replace('name = "box"', 'name = "t-02"').replace(
        '"box"]', '"t-02"]'
    ) + textwrap.dedent("""\
        [[trench]]
        name_prefix = "t"
        polyline = [[-146.0, -32.0], [-146.0, -36.0]]
        spacing_km = 100
        mw = 8.0
        """)
    path = _write(folder, text)
    assert _one_issue(path).startswith(
        f"{path}:{_line_of(text, 'name_prefix')}: trench[1].name_prefix: generated name(s) t-02 "
        "already used by scenario[2]"
    )


def test_bad_scenario_name(folder: Path):
    text = BASE.replace('name = "box"', 'name = "my box"').replace('"box"]', '"my box"]')
    issues = _issues(_write(folder, text))
    assert any(
        "scenario[2].name: name = 'my box' must be 1-64 letters, digits" in i for i in issues
    )


def test_point_outside_the_grid_gives_the_bounds(folder: Path):
    text = BASE.replace("point = [-147.0, -34.0]", "point = [-152.5, -34.0]")
    path = _write(folder, text)
    assert _one_issue(path) == (
        f"{path}:{_line_of(text, 'point = ')}: scenario[1].point: point source at (lon -152.5, "
        "lat -34) "
        "lies outside the grid (lon -150 to -141, lat -38 to -31); move it inside or use a "
        "larger bathymetry"
    )


def test_rupture_centre_outside_the_crop_window(folder: Path):
    text = BASE.replace(
        'path = "bathy.tif"', 'path = "bathy.tif"\ncrop_lonlat = [-149, -37, -146, -32]'
    )
    path = _write(folder, text)
    assert _one_issue(path) == (
        f"{path}:{_line_of(text, 'rupture = ')}: scenario[2].rupture.centre: rupture centre at "
        "(lon -145, lat -35) lies outside the crop window crop_lonlat = [-149.0, -37.0, -146.0, "
        "-32.0]; "
        "move it inside or widen the window"
    )


def test_crop_window_that_misses_the_grid(folder: Path):
    text = BASE.replace(
        'path = "bathy.tif"', 'path = "bathy.tif"\ncrop_lonlat = [10, -37, 20, -32]'
    )
    issues = _issues(_write(folder, text))
    assert any(
        "bathymetry.crop_lonlat: window [10.0, -37.0, 20.0, -32.0] misses the grid "
        "(lon -150 to -141, lat -38 to -31); choose a window that overlaps it" in i
        for i in issues
    )


def test_trench_centres_outside_the_grid(folder: Path):
    text = BASE + textwrap.dedent("""\
        [[trench]]
        name_prefix = "t"
        polyline = [
          [-146.0, -33.0],
          [-146.0, -39.5],
        ]
        spacing_km = 100
        mw = 8.0
        """)
    path = _write(folder, text)
    issue = _one_issue(path)
    assert issue.startswith(
        f"{path}:{_line_of(text, 'polyline = [')}: trench[1].polyline: the centres of generated "
        "rupture(s) t-07 "
    )
    assert "lie outside the grid or crop window (lon -150 to -141, lat -38 to -31)" in issue


def test_point_on_land_unless_snapping(folder: Path):
    text = BASE.replace("point = [-147.0, -34.0]", "point = [-142.0, -34.0]")
    path = _write(folder, text)
    assert _one_issue(path) == (
        f"{path}:{_line_of(text, 'point = ')}: scenario[1].point: source at (lon -142, lat -34) "
        "lies on "
        "land (elevation 200 m in the bathymetry); move it offshore or set snap_radius_km to "
        "move it "
        "to the nearest open water"
    )
    snapped = text.replace(
        "point = [-142.0, -34.0]", "point = [-142.0, -34.0]\nsnap_radius_km = 150"
    )
    assert validate(_write(folder, snapped)) == []


@pytest.mark.parametrize("mw", [5.5, 9.8])
def test_mw_out_of_range(folder: Path, mw: float):
    text = BASE.replace("length_km = 120, width_km = 50", f"mw = {mw}")
    path = _write(folder, text)
    assert _one_issue(path) == (
        f"{path}:{_line_of(text, 'rupture = ')}: scenario[2].rupture.mw: Mw {mw:g} is outside "
        "6.0 to 9.6, "
        "the range of the scaling relations; give a magnitude in that range"
    )


def test_unknown_scaling_law(folder: Path):
    text = BASE.replace(
        "length_km = 120, width_km = 50", 'mw = 8.0, scaling_law = "strasser2010-interfase"'
    )
    issue = _one_issue(_write(folder, text))
    assert (
        "scenario[2].rupture.scaling_law: scaling_law = 'strasser2010-interfase' is not one of"
        in issue
    )
    assert issue.endswith("did you mean 'strasser2010-interface'?")


def test_bad_period_values(folder: Path):
    text = BASE.replace("periods_s = [600, 1200]", 'periods_s = [600, 0, "900", 600, -5]')
    path = _write(folder, text)
    line = _line_of(text, "periods_s")
    assert _issues(path) == [
        (
            f"{path}:{line}: speed.periods_s[2]: period 0 s must be positive and finite; give "
            "the wave period in seconds, e.g. 600"
        ),
        f"{path}:{line}: speed.periods_s[3]: period must be a number of seconds, got text '900'",
        f"{path}:{line}: speed.periods_s[4]: period 600 s is listed twice; give each period once",
        (
            f"{path}:{line}: speed.periods_s[5]: period -5 s must be positive and finite; give "
            "the wave period in seconds, e.g. 600"
        ),
    ]


def test_bad_choice_values(folder: Path):
    text = BASE.replace(
        "periods_s = [600, 1200]", 'periods_s = [600]\nearth = "spere"\nperiod_speed = "grup"'
    )
    issues = _issues(_write(folder, text))
    assert any(
        "speed.earth: earth = 'spere' is not one of wgs84, sphere; did you mean 'sphere'?" in i
        for i in issues
    )
    assert any(
        "speed.period_speed: period_speed = 'grup' is not one of group, phase; did you mean "
        "'group'?" in i
        for i in issues
    )


def test_compare_pairs_and_executor_checked(folder: Path):
    text = BASE.replace(
        'compare = [["west-point", "box"]]',
        'compare = [["west-point", "bx"], ["box", "box"]]\nexecutor = "lokal"\nworkers = 0',
    )
    path = _write(folder, text)
    issues = _issues(path)
    line = _line_of(text, "compare")
    assert (
        f"{path}:{line}: outputs.compare[1]: no scenario is called 'bx'; did you mean 'box'?"
        in issues
    )
    assert (
        f"{path}:{line}: outputs.compare[2]: compares 'box' with itself; name two different "
        "scenarios" in issues
    )
    assert any(
        "outputs.executor: executor 'lokal' is neither 'serial', 'local' nor a scheduler address"
        in i
        for i in issues
    )
    assert (
        f"{path}:{_line_of(text, 'workers')}: outputs.workers: workers = 0 must be greater than "
        "0; give a positive value" in issues
    )


@pytest.mark.parametrize(
    "value", ["serial", "local", "tcp://10.0.0.5:8786", "scheduler.example:8786"]
)
def test_executor_names_and_addresses_accepted(value: str):
    assert check_executor(value) is None


@pytest.mark.parametrize("value", ["dask", "tcp://", 8786])
def test_executor_other_values_refused(value):
    assert check_executor(value) is not None


def test_all_problems_reported_together(folder: Path):
    text = (
        BASE.replace("point = [-147.0, -34.0]", "point = [-160.0, -34.0]")
        .replace("length_km = 120", "length_km = -1")
        .replace('folder = "out"', 'folder = "out"\nenvlope = true')
    )
    path = _write(folder, text)
    with pytest.raises(ScenarioFileError) as info:
        load_scenario_file(path)
    err = info.value
    assert isinstance(err, InputDataError)
    lines = str(err).splitlines()
    assert len(lines) == len(err.issues) == 3
    assert [i.key for i in err.issues] == [
        "scenario[1].point",
        "scenario[2].rupture.length_km",
        "outputs.envlope",
    ]
    assert all(line.startswith(f"{path}:") for line in lines)
    assert [i.line for i in err.issues] == sorted(i.line for i in err.issues)


def test_source_file_inside_and_outside(folder: Path):
    def polygon(lon0: float) -> str:
        ring = [[lon0, -34.0], [lon0 + 1, -34.0], [lon0 + 1, -33.0], [lon0, -33.0], [lon0, -34.0]]
        return json.dumps(
            {
                "type": "FeatureCollection",
                "features": [
                    {
                        "type": "Feature",
                        "properties": {},
                        "geometry": {"type": "Polygon", "coordinates": [ring]},
                    }
                ],
            }
        )

    (folder / "area.geojson").write_text(polygon(-148.0))
    (folder / "far.geojson").write_text(polygon(-170.0))
    text = BASE.replace("point = [-147.0, -34.0]", 'source_file = "area.geojson"')
    sf = load_scenario_file(_write(folder, text))
    sc = sf.scenario("west-point")
    assert sc.source.kind == "area" and sc.source_file == str(folder / "area.geojson")
    path = _write(folder, text.replace("area.geojson", "far.geojson"))
    issue = _one_issue(path)
    assert issue.startswith(
        f"{path}:{_line_of(text, 'source_file')}: scenario[1].source_file: source geometry"
    )
    assert "lies outside the grid (lon -150 to -141, lat -38 to -31)" in issue


def test_missing_scenario_file():
    issues = validate("/nonexistent/folder/s.toml")
    assert [str(i) for i in issues] == [
        "/nonexistent/folder/s.toml: scenario file not found; check the path"
    ]


def test_refine_reaches_the_medium_spec_and_refuses_coarsen(folder: Path):
    sf = load_scenario_file(_write(folder, BASE.replace('path = "bathy.tif"', 'path = "bathy.tif"\nrefine = 2')))
    spec, _ = scenario_tasks(sf)
    assert spec.refine == 2 and spec.coarsen == 1
    assert spec.reading_kwargs()["refine"] == 2
    both = BASE.replace('path = "bathy.tif"', 'path = "bathy.tif"\nrefine = 2\ncoarsen = 2')
    with pytest.raises(ScenarioFileError) as info:
        load_scenario_file(_write(folder, both))
    assert [i.key for i in info.value.issues] == ["bathymetry.refine"]
    assert "cannot be combined" in str(info.value)
