"""Site files (ttmap.io.sites), snapping and the site table (ttmap.products.sites).

Synthetic grids built here; values hand-computed. Outside references are named
beside the checks that use them.
"""

from __future__ import annotations

import csv
import dataclasses
import math
from datetime import UTC, datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pyogrio.raw
import pytest
import shapely
from affine import Affine
from pyproj import CRS, Transformer

import ttmap
from ttmap import Grid, Source, prepare_medium
from ttmap.errors import InputDataError, OutputExistsError
from ttmap.io.sites import Site, SiteList, read_sites, write_site_table_csv
from ttmap.io.vector import VectorLayer, write_vector_layers
from ttmap.products.budget import (
    STATUS_BEFORE_MESSAGE,
    STATUS_NO_ARRIVAL,
    STATUS_NO_DISTANCE,
    STATUS_ON_PAPER,
    STATUS_TOO_LITTLE,
)
from ttmap.products.cautions import CAUTION_SHORT
from ttmap.products.sites import (
    SNAP_MOVED,
    SNAP_NO_WATER,
    SNAP_OK,
    SNAP_OUTSIDE,
    site_table,
    site_table_layer,
    snap_sites,
)
from ttmap.defaults import SITE_SEARCH_RADIUS_M

DEMO_SITES = Path(ttmap.__file__).parent / "demo_data" / "demo_sites.csv"
UTM56S = "EPSG:32756"  # UTM zone 56 south: central meridian 153 E (6 * 56 - 183)


def write(tmp_path: Path, text: str, name: str = "sites.csv", encoding: str = "utf-8") -> Path:
    p = tmp_path / name
    p.write_bytes(text.encode(encoding))
    return p


# ======================================================================================
# Reading site files
# ======================================================================================


def test_reads_the_demo_sites():
    sl = read_sites(DEMO_SITES)
    assert len(sl) == 8
    assert sl.crs.equals(CRS.from_epsg(4326))
    first = sl[0]
    assert (first.name, first.x, first.y) == ("Tarnquill Harbour", -142.7083, -33.4250)
    assert (first.safe_ground_distance_m, first.walking_speed_m_s) == (900.0, 1.0)
    assert (first.preparation_min, first.notification_delay_min) == (5.0, 10.0)
    assert first.line == 2
    orvenna = sl[1]
    assert orvenna.safe_ground_distance_m is None and orvenna.walking_speed_m_s is None
    assert orvenna.preparation_min is None and orvenna.notification_delay_min is None
    assert sl[2].preparation_min is None and sl[2].notification_delay_min == 8.0
    assert sl.names[-1] == "Gannix Jetty" and sl[-1].line == 9


def test_headers_are_case_insensitive_with_comments_bom_and_semicolons(tmp_path):
    text = (
        "# invented sites\n"
        "\n"
        "NAME;Longitude;LATITUDE;Walking_Speed_M_S;note\n"
        "Pier;142,5;-33.5;;ignored\n"  # (a decimal comma is not a number: see next test)
    )
    p = write(tmp_path, "\ufeff" + text.replace("142,5", "142.5"))
    sl = read_sites(p)
    assert sl.names == ("Pier",)
    assert (sl[0].x, sl[0].y, sl[0].walking_speed_m_s, sl[0].line) == (142.5, -33.5, None, 4)


def test_name_field_option(tmp_path):
    p = write(tmp_path, "id,Label,lon,lat\n1,Pier,142.5,-33.5\n2,Hill,142.6,-33.6\n")
    assert read_sites(p, name_field="label").names == ("Pier", "Hill")
    with pytest.raises(InputDataError, match=r"no 'town' column \(columns: id, Label, lon, lat\)"):
        read_sites(p, name_field="town")


def test_xy_columns_with_a_crs(tmp_path):
    # UTM definition: x = 500 000 m (false easting) lies on the central meridian,
    # 153 E for zone 56 (common practice of the UTM system, from memory).
    p = write(tmp_path, "name,x,y\nQuay,500000,6237000\n")
    sl = read_sites(p, crs=UTM56S)
    assert sl.crs.equals(CRS.from_user_input(UTM56S))
    lon, lat = sl.lonlat()
    assert lon[0] == pytest.approx(153.0, abs=1e-9)
    # False northing 10 000 km in the south: (10 000 - 6 237) km / 0.9996 of meridian arc at
    # about 110.9 km per degree is 33.95 degrees; 0.06 degree covers the rounding of 110.9.
    assert lat[0] == pytest.approx(-33.95, abs=0.06)
    with pytest.raises(InputDataError, match=r"x,y are map coordinates but no CRS was given"):
        read_sites(p)
    with pytest.raises(InputDataError, match=r"lon/lat columns hold degrees"):
        read_sites(DEMO_SITES, crs=UTM56S)


BAD_FILES = [
    ("lon,lat\n1,2\n", r"line 1: no 'name' column \(columns: lon, lat\); add a 'name' column"),
    ("name,lon\nA,1\n", r"line 1: a 'lon' column but no 'lat' column"),
    ("name,east,north\nA,1,2\n", r"line 1: no lon/lat \(or x/y\) columns"),
    ("name,lon,lat\nA,1,2\nB,1,abc\n", r"line 3, column 'lat': 'abc' is not a number"),
    ("name,lon,lat\nA,1,95\n", r"line 2, column 'lat': latitude 95 lies outside -90\.\.90"),
    ("name,lon,lat\nA,400,5\n", r"line 2, column 'lon': longitude 400 lies outside"),
    ("name,lon,lat\nA,1,\n", r"line 2, column 'lat': the value is empty"),
    ("name,lon,lat\nA,1,nan\n", r"line 2, column 'lat': 'nan' is not a finite number"),
    (
        "name,lon,lat,safe_ground_distance_m\nA,1,2,-100\n",
        r"line 2, column 'safe_ground_distance_m': -100 m must not be negative",
    ),
    (
        "name,lon,lat,walking_speed_m_s\nA,1,2,0\n",
        r"line 2, column 'walking_speed_m_s': 0 m/s must be above 0",
    ),
    (
        "name,lon,lat,preparation_min\nA,1,2,-3\n",
        r"line 2, column 'preparation_min': -3 min must not be negative",
    ),
    (
        "name,lon,lat,notification_delay_min\nA,1,2,ten\n",
        r"line 2, column 'notification_delay_min': 'ten' is not a number; write a number in min",
    ),
    (
        "name,lon,lat\nPier,1,2\nHill,1,3\nPier,1,4\n",
        r"name 'Pier' is used on lines 2 and 4; give each site a unique name",
    ),
    ("name,lon,lat\n,1,2\n", r"line 2, column 'name': the name is empty"),
    ("name,lon,lat\nA,1,2,3\n", r"line 2: 4 values but the header has 3 columns"),
    ("name,lon,Lon,lat\nA,1,2,3\n", r"line 1: column 'Lon' appears twice"),
    ("# only a comment\n", r"is empty; give a header line"),
    ("name,lon,lat\n", r"has a header but no sites"),
    # Only lines before the header are comments; later ones are data (a site "# note").
    ("name,lon,lat\nA,1,2\n\n# note\n", r"line 4, column 'lon': the value is empty"),
]


@pytest.mark.parametrize("text, match", BAD_FILES)
def test_bad_site_files_give_one_line_messages(tmp_path, text, match):
    p = write(tmp_path, text)
    with pytest.raises(InputDataError, match=match) as err:
        read_sites(p)
    message = str(err.value)
    assert "\n" not in message
    assert str(p) in message


def test_missing_and_undecodable_files(tmp_path):
    with pytest.raises(InputDataError, match=r"does not exist; check the path"):
        read_sites(tmp_path / "nowhere.csv")
    p = write(tmp_path, "name,lon,lat\nK\xf8ge,1,2\n", encoding="latin-1")
    with pytest.raises(InputDataError, match=r"is not UTF-8 text .*; save it as UTF-8 CSV"):
        read_sites(p)


def _vector_sites(tmp_path: Path, name: str, crs: str, speeds: list[float]) -> Path:
    layer = VectorLayer(
        "sites",
        [shapely.Point(142.5, -33.5), shapely.Point(142.6, -33.6)],
        {
            "Name": ["Pier", "Hill"],
            "Walking_Speed_M_S": np.array(speeds),
            "safe_ground_distance_m": [900.0, None],
        },
        "Point",
    )
    return write_vector_layers(tmp_path / name, [layer], crs=crs)[0]


@pytest.mark.parametrize("name", ["pts.gpkg", "pts.geojson"])
def test_reads_a_vector_file_of_points(tmp_path, name):
    path = _vector_sites(tmp_path, name, "EPSG:4326", [1.1, np.nan])
    sl = read_sites(path)
    assert sl.names == ("Pier", "Hill")
    assert sl.crs.is_geographic
    assert (sl[0].x, sl[0].y) == pytest.approx((142.5, -33.5))
    assert sl[0].walking_speed_m_s == pytest.approx(1.1) and sl[1].walking_speed_m_s is None
    assert sl[0].safe_ground_distance_m == 900.0 and sl[1].safe_ground_distance_m is None
    assert sl[1].line == 2


def test_bad_vector_site_value_names_the_feature(tmp_path):
    path = _vector_sites(tmp_path, "pts.gpkg", "EPSG:4326", [1.1, -0.5])
    with pytest.raises(
        InputDataError, match=r"feature 2, column 'Walking_Speed_M_S': -0.5 m/s must be above 0"
    ):
        read_sites(path)
    with pytest.raises(InputDataError, match=r"declares CRS .* but .* was given"):
        read_sites(_vector_sites(tmp_path, "other.gpkg", "EPSG:4326", [1.0, 1.0]), crs=UTM56S)


def test_site_list_refuses_repeated_names():
    with pytest.raises(InputDataError, match=r"'A' is used twice"):
        SiteList((Site("A", 1.0, 2.0), Site("A", 1.0, 3.0)))


# ======================================================================================
# Snapping
# ======================================================================================

CELL_M = 100.0
X0, Y0 = 400_000.0, 6_250_000.0  # upper-left corner, UTM 56 S
COAST_X = X0 + 100 * CELL_M  # water west of this line, land east of it


@pytest.fixture(scope="module")
def coast():
    """100 m cells, 80 rows x 700 cols: 10 km of sea in the west, 60 km of land in the east,
    with an unreached lagoon (closed water) 400 m east of the coast in rows 10-14."""
    grid = Grid((80, 700), Affine(CELL_M, 0.0, X0, 0.0, -CELL_M, Y0), UTM56S)
    depth = np.full(grid.shape, -20.0)
    depth[:, :100] = 4000.0
    depth[10:15, 104:108] = 3.0  # a lagoon cut off from the sea
    medium = prepare_medium(depth, grid, min_basin_share=0.01)
    source = Source.point_xy(X0 + 5_000.0, Y0 - 4_000.0)
    front = medium.travel_time(source)
    assert np.isnan(front.arrival_time_s[12, 105])  # the lagoon is water the front never reaches
    energy = prepare_medium(depth, grid, mode="group", period_s=600.0).travel_time(source)
    return grid, medium, front, energy


def _sites_xy(points: dict[str, tuple[float, float]], **values) -> SiteList:
    return SiteList(
        tuple(Site(n, x, y, **values.get(n, {})) for n, (x, y) in points.items()),
        CRS.from_user_input(UTM56S),
    )


def ground_m(x0: float, y0: float, x1: float, y1: float) -> float:
    """WGS84 geodesic between two UTM 56 S positions (pyproj.Geod: Karney 2013)."""
    from pyproj import Geod

    tr = Transformer.from_crs(UTM56S, "EPSG:4326", always_xy=True)
    (lon0, lon1), (lat0, lat1) = tr.transform([x0, x1], [y0, y1])
    return float(Geod(ellps="WGS84").inv(lon0, lat0, lon1, lat1)[2])


def test_site_on_land_300_m_from_water_reports_about_300_m(coast):
    grid, medium, front, _ = coast
    y = Y0 - 40.5 * CELL_M  # centre of row 40
    sites = _sites_xy({"Shore Road": (COAST_X + 300.0, y)})
    (s,) = snap_sites(sites, grid, front, depth_m=medium.depth_m)
    assert s.status == SNAP_MOVED
    assert (s.row, s.col) == (40, 99)
    # 350 map metres to the centre of the last water cell; moved_m is ground metres: the
    # WGS84 geodesic between the two points (pyproj.Geod, Karney 2013), which differs from
    # the map distance by the UTM scale factor there (about 0.9997).
    assert ground_m(COAST_X + 300.0, y, COAST_X - 50.0, y) == pytest.approx(350.0, rel=1e-3)
    assert s.moved_m == pytest.approx(ground_m(COAST_X + 300.0, y, COAST_X - 50.0, y), abs=1e-6)
    assert s.depth_m == 4000.0
    assert (s.x, s.y) == pytest.approx((COAST_X - 50.0, y))


def test_nearest_reached_water_is_used_not_the_lagoon(coast):
    grid, _, front, _ = coast
    # 450 m east of the coast, in row 12: the lagoon cell (12, 104) is 0 m away but unreached.
    sites = _sites_xy({"Lagoon Side": (COAST_X + 450.0, Y0 - 12.5 * CELL_M)})
    (s,) = snap_sites(sites, grid, front)
    assert (s.status, s.row, s.col) == (SNAP_MOVED, 12, 99)
    y12 = Y0 - 12.5 * CELL_M
    assert s.moved_m == pytest.approx(ground_m(COAST_X + 450.0, y12, COAST_X - 50.0, y12), abs=1e-6)
    # A bool mask of reached cells works the same; a mask that includes the lagoon picks it.
    (t,) = snap_sites(sites, grid, np.isfinite(front.arrival_time_s))
    assert (t.row, t.col) == (12, 99)
    (u,) = snap_sites(sites, grid, medium_water(coast))
    assert u.status == SNAP_OK and u.moved_m == 0.0


def medium_water(coast):
    return coast[1].water


def test_far_inland_and_outside_sites_are_reported_not_dropped(coast):
    grid, _, front, _ = coast
    y = Y0 - 40.5 * CELL_M
    sites = _sites_xy(
        {
            "At Sea": (X0 + 2_050.0, y),
            "Inland Town": (COAST_X + 50_000.0, y),
            "Off The Map": (X0 - 5_000.0, y),
        }
    )
    snapped = snap_sites(sites, grid, front)
    assert [s.status for s in snapped] == [SNAP_OK, SNAP_NO_WATER, SNAP_OUTSIDE]
    assert snapped[0].moved_m == 0.0 and (snapped[0].row, snapped[0].col) == (40, 20)
    for s in snapped[1:]:
        assert (s.row, s.col) == (-1, -1) and math.isnan(s.moved_m) and math.isnan(s.x)
    # Radius 0: a site on land finds no water; a larger radius reaches the coast from 5 km.
    near = _sites_xy({"Hill": (COAST_X + 5_000.0, y)})
    assert snap_sites(near, grid, front, search_radius_m=0.0)[0].status == SNAP_NO_WATER
    assert snap_sites(near, grid, front)[0].status == SNAP_NO_WATER  # default 2 km
    far = snap_sites(near, grid, front, search_radius_m=6_000.0)[0]
    assert far.status == SNAP_MOVED
    assert far.moved_m == pytest.approx(ground_m(COAST_X + 5_000.0, y, COAST_X - 50.0, y), abs=1e-6)
    assert SITE_SEARCH_RADIUS_M == 2000.0


def test_lonlat_sites_are_transformed_to_the_grid_crs(coast):
    grid, _, front, _ = coast
    to_ll = Transformer.from_crs(UTM56S, "EPSG:4326", always_xy=True)
    lon, lat = to_ll.transform(COAST_X + 300.0, Y0 - 40.5 * CELL_M)
    sites = SiteList((Site("Shore Road", lon, lat),))
    (s,) = snap_sites(sites, grid, front)
    assert (s.status, s.row, s.col) == (SNAP_MOVED, 40, 99)
    y = Y0 - 40.5 * CELL_M
    assert s.moved_m == pytest.approx(ground_m(COAST_X + 300.0, y, COAST_X - 50.0, y), abs=1e-3)


def test_snap_refuses_bad_inputs(coast):
    grid, _, front, _ = coast
    sites = _sites_xy({"A": (X0 + 500.0, Y0 - 500.0)})
    with pytest.raises(InputDataError, match=r"search radius -1"):
        snap_sites(sites, grid, front, search_radius_m=-1.0)
    with pytest.raises(InputDataError, match=r"shape \(3, 3\) but the grid is \(80, 700\)"):
        snap_sites(sites, grid, np.ones((3, 3), dtype=bool))
    with pytest.raises(InputDataError, match=r"depth_m has shape"):
        snap_sites(sites, grid, front, depth_m=np.ones((2, 2)))


# ======================================================================================
# The site table
# ======================================================================================

ORIGIN = datetime(2026, 1, 1, tzinfo=UTC)


def _with_times(result, cells: dict[tuple[int, int], float]):
    """A copy of a result with chosen arrival times (seconds) at some cells."""
    arr = result.arrival_time_s.copy()
    for (r, c), t in cells.items():
        arr[r, c] = t
    return dataclasses.replace(result, arrival_time_s=arr)


@pytest.fixture
def table_case(coast):
    grid, medium, front, energy = coast
    y = Y0 - 40.5 * CELL_M
    points = {
        "Shore Road": (COAST_X + 300.0, y),  # -> cell (40, 99)
        "Quay": (COAST_X - 50.0, Y0 - 20.5 * CELL_M),  # in water, cell (20, 99)
        "Inland Town": (COAST_X + 50_000.0, y),
        "Off The Map": (X0 - 5_000.0, y),
        "Jetty": (COAST_X - 50.0, Y0 - 60.5 * CELL_M),  # cell (60, 99)
    }
    values = {
        "Shore Road": {
            "safe_ground_distance_m": 900.0,
            "walking_speed_m_s": 1.0,
            "preparation_min": 5.0,
            "notification_delay_min": 10.0,
        },
        "Quay": {"safe_ground_distance_m": 444.0},  # defaults: 10 min, 3 min, 0.74 m/s
        "Jetty": {"safe_ground_distance_m": 100.0},
    }
    sites = _sites_xy(points, **values)
    # Chosen times: front 40.5 min at Shore Road, 13.5 min at Quay, 9 min at Jetty.
    front_t = _with_times(front, {(40, 99): 2430.0, (20, 99): 810.0, (60, 99): 540.0})
    energy_t = _with_times(energy, {(40, 99): 2490.0, (20, 99): 840.0, (60, 99): 555.0})
    snapped = snap_sites(sites, grid, front_t, depth_m=medium.depth_m)
    return sites, snapped, front_t, energy_t


def test_table_columns_in_order(table_case):
    sites, snapped, front, energy = table_case
    table = site_table(sites, snapped, front, {600.0: energy}, origin_time_utc=ORIGIN)
    assert list(table.columns) == [
        "name",
        "lon",
        "lat",
        "status",
        "moved_m",
        "depth_m",
        "front_min",
        "earliest_min",
        "latest_min",
        "energy_T600s_min",
        "window_T600s_min",
        "notification_delay_min",
        "minutes_left",
        "preparation_min",
        "safe_ground_distance_m",
        "walking_speed_m_s",
        "minutes_needed",
        "margin_min",
        "budget_status",
        "defaults_used",
        "front_utc",
        "earliest_utc",
        "latest_utc",
        "energy_T600s_utc",
    ]
    assert len(table) == 5 and table.periods_s == (600.0,)
    assert table.columns["name"] == list(sites.names)  # nothing dropped, order kept
    assert table.columns["status"] == [SNAP_MOVED, SNAP_OK, SNAP_NO_WATER, SNAP_OUTSIDE, SNAP_OK]
    no_period = site_table(sites, snapped, front)
    assert not any(
        k.startswith(("energy", "window")) or k.endswith("_utc") for k in no_period.columns
    )


def test_times_uncertainty_band_and_windows(table_case):
    sites, snapped, front, energy = table_case
    c = site_table(sites, snapped, front, {600.0: energy}, speed_uncertainty=0.05).columns
    front_min = np.array(c["front_min"], dtype=float)
    np.testing.assert_allclose(front_min, [40.5, 13.5, np.nan, np.nan, 9.0])
    # Speed +/-5 %: earliest = t / 1.05, latest = t / 0.95 (exact mapping of a stated speed band).
    np.testing.assert_allclose(c["earliest_min"], front_min / 1.05, rtol=1e-14)
    np.testing.assert_allclose(c["latest_min"], front_min / 0.95, rtol=1e-14)
    assert c["earliest_min"][1] == pytest.approx(12.857142857142858)
    np.testing.assert_allclose(c["energy_T600s_min"], [41.5, 14.0, np.nan, np.nan, 9.25])
    np.testing.assert_allclose(c["window_T600s_min"], [1.0, 0.5, np.nan, np.nan, 0.25])
    assert c["moved_m"][:2] == [pytest.approx(350.0, rel=1e-3), 0.0]  # ground metres (UTM scale)
    assert c["depth_m"][:2] == [4000.0, 4000.0]
    # lon/lat are the site as given (UTM -> WGS84), not the cell it was moved to.
    lon, lat = Transformer.from_crs(UTM56S, "EPSG:4326", always_xy=True).transform(
        COAST_X + 300.0, Y0 - 40.5 * CELL_M
    )
    assert (c["lon"][0], c["lat"][0]) == pytest.approx((lon, lat), abs=1e-12)
    zero = site_table(sites, snapped, front, speed_uncertainty=0.0).columns
    assert zero["earliest_min"][0] == zero["latest_min"][0] == 40.5


def test_budget_columns_use_the_earliest_arrival_and_defaults(table_case):
    sites, snapped, front, energy = table_case
    rows = site_table(sites, snapped, front, {600.0: energy}).rows()
    shore, quay, inland, off, jetty = rows
    # Shore Road: earliest 40.5/1.05 = 38.571; left 28.571; needed 5 + 900/60 = 20.
    assert shore["minutes_left"] == pytest.approx(40.5 / 1.05 - 10.0)
    assert shore["minutes_needed"] == pytest.approx(20.0)
    assert shore["margin_min"] == pytest.approx(40.5 / 1.05 - 30.0)
    assert shore["budget_status"] == STATUS_ON_PAPER and shore["defaults_used"] == ""
    # Quay: defaults 10 min, 3 min, 0.74 m/s; needed 3 + 444/44.4 = 13; left 12.857 - 10.
    assert (quay["notification_delay_min"], quay["preparation_min"], quay["walking_speed_m_s"]) == (
        10.0,
        3.0,
        0.74,
    )
    assert quay["minutes_needed"] == pytest.approx(13.0)
    assert quay["margin_min"] == pytest.approx(13.5 / 1.05 - 10.0 - 13.0)
    assert quay["budget_status"] == STATUS_TOO_LITTLE
    assert quay["defaults_used"] == "notification_delay_min;preparation_min;walking_speed_m_s"
    # Jetty: earliest 9/1.05 = 8.57 min, before the 10-minute message.
    assert jetty["budget_status"] == STATUS_BEFORE_MESSAGE
    for row in (inland, off):
        assert row["budget_status"] == STATUS_NO_ARRIVAL and math.isnan(row["front_min"])
    # Other defaults passed in are used and named in the header line.
    t = site_table(
        sites,
        snapped,
        front,
        notification_delay_min=5.0,
        preparation_min=1.0,
        walking_speed_m_s=1.11,
    )
    assert t.columns["notification_delay_min"][1] == 5.0
    assert "notification delay 5 min, preparation 1 min, walking speed 1.11 m/s" in t.comments[1]
    # A site without a distance:
    nodist = SiteList((Site("Quay", sites[1].x, sites[1].y),), sites.crs)
    t = site_table(nodist, snap_sites(nodist, front.grid, front), front)
    assert t.columns["budget_status"] == [STATUS_NO_DISTANCE]


def test_utc_clock_times(table_case):
    sites, snapped, front, energy = table_case
    c = site_table(sites, snapped, front, {600.0: energy}, origin_time_utc=ORIGIN).columns
    # Origin 2026-01-01T00:00:00Z + 13.5 min = 00:13:30; earliest 13.5/1.05 min = 771.43 s
    # -> 00:12:51; latest 13.5/0.95 min = 852.63 s -> 00:14:13; energy 14 min -> 00:14:00.
    assert c["front_utc"][1] == "2026-01-01T00:13:30Z"
    assert c["earliest_utc"][1] == "2026-01-01T00:12:51Z"
    assert c["latest_utc"][1] == "2026-01-01T00:14:13Z"
    assert c["energy_T600s_utc"][1] == "2026-01-01T00:14:00Z"
    assert c["front_utc"][0] == "2026-01-01T00:40:30Z"
    assert c["front_utc"][2] is None
    # The same instant given in another zone gives the same UTC text.
    plus9 = datetime(2026, 1, 1, 9, 0, tzinfo=timezone(timedelta(hours=9)))
    c9 = site_table(sites, snapped, front, origin_time_utc=plus9).columns
    assert c9["front_utc"][1] == "2026-01-01T00:13:30Z"
    # Across midnight and a year end.
    late = datetime(2025, 12, 31, 23, 50, tzinfo=UTC)
    assert site_table(sites, snapped, front, origin_time_utc=late).columns["front_utc"][0] == (
        "2026-01-01T00:30:30Z"
    )


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"speed_uncertainty": 1.0}, r"speed uncertainty 1\.0 must be a fraction in \[0, 1\)"),
        ({"speed_uncertainty": -0.1}, r"speed uncertainty -0\.1"),
        ({"origin_time_utc": datetime(2026, 1, 1)}, r"has no time zone; give it in UTC"),
        ({"walking_speed_m_s": 0.0}, r"walking_speed_m_s = 0\.0 m/s must be a positive"),
    ],
)
def test_table_refuses_bad_options(table_case, kwargs, match):
    sites, snapped, front, _ = table_case
    with pytest.raises(InputDataError, match=match):
        site_table(sites, snapped, front, **kwargs)


def test_table_refuses_mismatched_results(table_case, coast):
    sites, snapped, front, energy = table_case
    with pytest.raises(InputDataError, match=r"snapped sites do not match"):
        site_table(sites, snapped[:-1], front)
    with pytest.raises(InputDataError, match=r"front result uses speed mode 'group'"):
        site_table(sites, snapped, energy)
    with pytest.raises(
        InputDataError, match=r"given for period 300 s is a 'group' solve with period 600"
    ):
        site_table(sites, snapped, front, {300.0: energy})
    with pytest.raises(InputDataError, match=r"given for period 600 s is a 'long-wave' solve"):
        site_table(sites, snapped, front, {600.0: front})


# ======================================================================================
# Files: CSV and vector layers
# ======================================================================================


def test_csv_round_trip(tmp_path, table_case):
    sites, snapped, front, energy = table_case
    table = site_table(sites, snapped, front, {600.0: energy}, origin_time_utc=ORIGIN)
    path = write_site_table_csv(tmp_path / "sites_table.csv", table)
    lines = path.read_text(encoding="utf-8").splitlines()
    assert lines[0].startswith("# ") and CAUTION_SHORT in lines[0]
    assert lines[1].startswith("# ") and "minutes" in lines[1] and "0.74 m/s" in lines[1]
    assert "+/-5 %" in lines[1]
    rows = list(csv.reader(lines[2:]))
    assert rows[0] == list(table.columns)
    body = [dict(zip(rows[0], r, strict=True)) for r in rows[1:]]
    assert [r["name"] for r in body] == list(sites.names)
    assert float(body[1]["front_min"]) == 13.5
    assert float(body[1]["earliest_min"]) == pytest.approx(12.86, abs=0.005)
    assert body[1]["front_utc"] == "2026-01-01T00:13:30Z"
    assert body[2]["front_min"] == "" and body[2]["front_utc"] == ""
    assert body[2]["budget_status"] == STATUS_NO_ARRIVAL
    assert body[0]["budget_status"] == STATUS_ON_PAPER  # a comma inside a quoted field survives
    with pytest.raises(OutputExistsError, match=r"pass --overwrite"):
        write_site_table_csv(path, table)
    write_site_table_csv(path, table, overwrite=True)
    assert [p.name for p in tmp_path.iterdir()] == ["sites_table.csv"]  # no temporary left


def test_written_csv_reads_back_as_a_site_file(tmp_path, table_case):
    sites, snapped, front, _ = table_case
    path = write_site_table_csv(tmp_path / "t.csv", site_table(sites, snapped, front))
    again = read_sites(path)  # leading '#' lines are skipped; lon/lat columns are there
    assert again.names == sites.names
    assert again[0].safe_ground_distance_m == 900.0


@pytest.mark.parametrize("suffix", [".geojson", ".gpkg"])
def test_vector_layer_round_trip(tmp_path, table_case, suffix):
    sites, snapped, front, energy = table_case
    table = site_table(sites, snapped, front, {600.0: energy}, origin_time_utc=ORIGIN)
    crs = "EPSG:4326" if suffix == ".geojson" else UTM56S
    layer = site_table_layer(table, crs)
    (path,) = write_vector_layers(tmp_path / f"sites{suffix}", [layer], crs=crs)
    meta, _, wkb, fields = pyogrio.raw.read(path)
    cols = dict(zip(meta["fields"], fields, strict=True))
    assert list(cols) == list(table.columns)
    assert list(cols["name"]) == list(sites.names)
    assert list(cols["budget_status"]) == table.columns["budget_status"]
    np.testing.assert_allclose(cols["front_min"].astype(float), table.columns["front_min"])
    # GDAL's GeoJSON reader turns ISO 8601 text into date-times; GeoPackage keeps the text.
    assert str(cols["front_utc"][1])[:19] == "2026-01-01T00:13:30"
    pts = shapely.from_wkb(wkb)
    xy = shapely.get_coordinates(pts)
    if suffix == ".gpkg":
        # points at the original site positions, in the layer's CRS
        np.testing.assert_allclose(xy, np.column_stack([sites.xs, sites.ys]), atol=1e-6)
    else:
        np.testing.assert_allclose(xy[:, 0], table.columns["lon"], atol=1e-7)
        np.testing.assert_allclose(xy[:, 1], table.columns["lat"], atol=1e-7)
