"""Unit tests of ttmap.sources: Source constructors and placing sources on a grid.

Outside references: geodesic distances and areas on WGS84 (Karney 2013,
J. Geodesy 87:43-55 via pyproj.Geod).
"""

from __future__ import annotations

import json

import numpy as np
import pytest
import shapely
from affine import Affine
from pyproj import CRS, Geod

from ttmap import Grid, Source, prepare_medium
from ttmap.grid import projection_scale
from ttmap.errors import SourceError, TtmapWarning

GEOD = Geod(ellps="WGS84")


def _coast_grid():
    """40 x 40 km, 1 km cells: land west of x = 10 km, a nodata cell, a small lake."""
    n = 40
    grid = Grid((n, n), Affine(1000.0, 0, 0, 0, -1000.0, n * 1000.0), "EPSG:32601")
    depth = np.full((n, n), 1000.0)
    depth[:, :10] = -25.0
    depth[5, 5] = np.nan  # nodata on land, centre (5500, 34500)
    depth[30:39, 30:39] = -3.0  # an island ...
    depth[33:36, 33:36] = 40.0  # ... holding a 3 x 3 lake, centre (34500, 5500)
    return grid, depth


@pytest.fixture(scope="module")
def coast():
    grid, depth = _coast_grid()
    return grid, depth, prepare_medium(depth, grid)


# ------------------------------------------------------------------ constructors


def test_point_source():
    s = Source.point(142.1, 38.3)
    assert s.kind == "point"
    assert s.crs == CRS.from_epsg(4326)
    assert (s.geometry.x, s.geometry.y) == (142.1, 38.3)
    assert s.params == {"lon": 142.1, "lat": 38.3}
    assert "lon 142.1000" in s.label and "lat 38.3000" in s.label
    assert Source.point(1.0, 2.0, label="here").label == "here"


@pytest.mark.parametrize(("lon", "lat"), [(10.0, 91.0), (600.0, 0.0), (np.nan, 0.0), (0.0, np.inf)])
def test_point_source_bad_lonlat_refused(lon, lat):
    with pytest.raises(
        SourceError, match=r"source position \(lon .*, lat .*\) is not a valid longitude/latitude"
    ):
        Source.point(lon, lat)


def test_point_xy_source():
    s = Source.point_xy(1000.0, 2000.0)
    assert s.kind == "point" and s.crs is None
    assert s.params == {"x": 1000.0, "y": 2000.0, "crs": None}
    s2 = Source.point_xy(1000.0, 2000.0, crs="EPSG:32654")
    assert s2.crs == CRS.from_epsg(32654) and s2.params["crs"] == "EPSG:32654"


@pytest.mark.parametrize(
    ("geometry", "kind"),
    [
        (shapely.Point(1, 2), "point"),
        (shapely.LineString([(0, 0), (1, 1)]), "line"),
        (shapely.MultiLineString([[(0, 0), (1, 1)], [(2, 2), (3, 3)]]), "line"),
        (shapely.box(0, 0, 1, 1), "area"),
        (shapely.MultiPolygon([shapely.box(0, 0, 1, 1), shapely.box(2, 2, 3, 3)]), "area"),
    ],
)
def test_from_geometry_kinds(geometry, kind):
    s = Source.from_geometry(geometry)
    assert s.kind == kind and s.crs == CRS.from_epsg(4326)
    assert Source.from_geometry(geometry, crs=None).crs is None


def test_from_geometry_repairs_an_invalid_polygon():
    bowtie = shapely.Polygon([(0, 0), (1, 1), (1, 0), (0, 1)])
    assert not bowtie.is_valid
    s = Source.from_geometry(bowtie)
    assert s.geometry.is_valid and s.geometry.area == pytest.approx(0.5)


def test_from_geometry_empty_refused():
    with pytest.raises(SourceError, match="source geometry is empty"):
        Source.from_geometry(shapely.Polygon())


def test_from_geometry_unsupported_type_refused():
    with pytest.raises(
        SourceError, match="source geometry type GeometryCollection is not supported"
    ):
        Source.from_geometry(shapely.GeometryCollection([shapely.Point(0, 0)]))


def test_rupture_rectangle_geometry():
    s = Source.rupture(141.0, 38.0, strike_deg=90.0, length_km=200.0, width_km=50.0)
    assert s.kind == "rupture" and s.crs == CRS.from_epsg(4326)
    # Geodesic area and perimeter (Karney 2013, J. Geodesy 87:43-55 via pyproj.Geod).
    area_m2, perimeter_m = GEOD.geometry_area_perimeter(s.geometry)
    assert abs(area_m2) == pytest.approx(200e3 * 50e3, rel=2e-3)
    assert perimeter_m == pytest.approx(2 * (200e3 + 50e3), rel=1e-3)
    # Strike 90: the long side runs east-west (extent in a local equidistant projection).
    local = CRS.from_proj4("+proj=aeqd +lat_0=38 +lon_0=141 +datum=WGS84 +units=m +no_defs")
    minx, miny, maxx, maxy = s.in_crs(local).bounds
    assert maxx - minx == pytest.approx(200e3, rel=1e-3)
    assert maxy - miny == pytest.approx(50e3, rel=1e-3)
    centre = s.in_crs(local).centroid
    assert abs(centre.x) < 100.0 and abs(centre.y) < 100.0  # centred on (141 E, 38 N)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        (
            {"strike_deg": 0.0, "length_km": 0.0, "width_km": 10.0},
            "rupture length_km = 0.0 must be a positive",
        ),
        (
            {"strike_deg": 0.0, "length_km": 10.0, "width_km": -1.0},
            "rupture width_km = -1.0 must be a positive",
        ),
        (
            {"strike_deg": np.nan, "length_km": 10.0, "width_km": 10.0},
            "rupture strike nan must be a number",
        ),
    ],
)
def test_rupture_bad_parameters_refused(kwargs, match):
    with pytest.raises(SourceError, match=match):
        Source.rupture(141.0, 38.0, **kwargs)


def test_rupture_from_magnitude_records_its_origin():
    s = Source.rupture_from_magnitude(141.0, 38.0, strike_deg=10.0, mw=9.0)
    assert s.kind == "rupture"
    assert s.params["mw"] == 9.0 and s.params["scaling_relation"] == "strasser2010-interface"
    # Strasser et al. 2010, SRL 81(6):941-950, interface, Mw 9: 614 x 189 km
    # (docs/references.md §5 check rows [C]).
    assert s.params["length_km"] == pytest.approx(614.0, abs=0.5)
    assert s.params["width_km"] == pytest.approx(189.0, abs=0.5)
    assert s.label.startswith("Mw 9 (strasser2010-interface)")


def test_in_crs_and_describe():
    s = Source.point(141.0, 38.0)
    utm = CRS.from_epsg(32654)
    p = s.in_crs(utm)
    assert p.x == pytest.approx(500_000.0, abs=1e-6)  # on the zone's central meridian
    assert s.in_crs(CRS.from_epsg(4326)) is s.geometry
    assert Source.point_xy(1.0, 2.0).in_crs(utm).x == 1.0  # no CRS: already the grid's
    d = Source.rupture(141.0, 38.0, strike_deg=0.0, length_km=10.0, width_km=5.0).describe()
    json.dumps(d)
    assert d["kind"] == "rupture" and d["geometry_wkt"].startswith("POLYGON")
    assert s.describe()["geometry_wkt"] is None


# ------------------------------------------------------------------ placing: errors


def test_source_outside_grid_names_the_position(coast):
    _, _, medium = coast
    with pytest.raises(
        SourceError,
        match=r"source at \(x -5000.0, y 20000.0\) lies outside the grid "
        r"\(x 0 to 40000, y 0 to 40000\)",
    ):
        medium.travel_time(Source.point_xy(-5000.0, 20000.0))


def test_source_outside_geographic_grid_names_lonlat():
    grid = Grid((20, 20), Affine(0.1, 0, 140.0, 0, -0.1, 40.0), "EPSG:4326")
    medium = prepare_medium(np.full(grid.shape, 1000.0), grid)
    with pytest.raises(
        SourceError, match=r"source at \(lon 150.0000, lat 39.0000\) lies outside the grid"
    ):
        medium.travel_time(Source.point(150.0, 39.0))


def test_source_on_land_reports_depth(coast):
    _, _, medium = coast
    with pytest.raises(
        SourceError, match=r"\(x 3500.0, y 20500.0\) lies on land \(depth_m = -25.0\); move it"
    ):
        medium.travel_time(Source.point_xy(3500.0, 20500.0))


def test_source_on_nodata(coast):
    _, _, medium = coast
    with pytest.raises(SourceError, match=r"\(x 5500.0, y 34500.0\) lies on a nodata cell"):
        medium.travel_time(Source.point_xy(5500.0, 34500.0))


def test_source_in_closed_basin(coast):
    _, _, medium = coast
    with pytest.raises(
        SourceError, match=r"lies in a closed basin of 9 water cells .*\(depth_m = 40.0\)"
    ):
        medium.travel_time(Source.point_xy(34500.0, 5500.0))


def test_snapping_moves_the_source_and_reports_the_distance(coast):
    from pyproj import Transformer

    grid, _, medium = coast
    with pytest.warns(
        TtmapWarning,
        match=r"source moved 3.1\d km from \(x 7300.0, y 20500.0\) to the nearest open water "
        r"\(x 10500.0, y 20500.0\)",
    ):
        result = medium.travel_time(Source.point_xy(7300.0, 20500.0), snap_radius_m=5000.0)
    s = result.summary
    # The move is reported as ground distance: the WGS84 geodesic between the two map
    # positions (pyproj; Karney 2013, docs/references.md §10), not the 3200 m of map
    # distance, which this UTM grid far from its central meridian scales by about 1.004.
    to_lonlat = Transformer.from_crs(grid.crs, "EPSG:4326", always_xy=True)
    (lon0, lon1), (lat0, lat1) = to_lonlat.transform([7300.0, 10500.0], [20500.0, 20500.0])
    geodesic_m = Geod(ellps="WGS84").inv(lon0, lat0, lon1, lat1)[2]
    assert abs(geodesic_m - 3200.0) > 5.0  # the check can tell map from ground distance
    assert s.source_moved_m == pytest.approx(geodesic_m, abs=0.01)
    assert (s.source_row, s.source_col) == (19, 10)
    assert (s.source_x, s.source_y) == (10500.0, 20500.0)
    assert s.source_depth_m == 1000.0
    assert result.arrival_time_s[19, 10] == 0.0


def test_snapping_out_of_a_closed_basin(coast):
    _, _, medium = coast
    with pytest.warns(TtmapWarning, match="source moved"):
        result = medium.travel_time(Source.point_xy(34500.0, 5500.0), snap_radius_m=10_000.0)
    assert medium.open_water[result.summary.source_row, result.summary.source_col]
    # Nearest open water from (34500, 5500) is outside the 9 x 9 island ring (x >= 39 km
    # or y <= 1 km ...): at least 4.5 km away.
    assert 4500.0 <= result.summary.source_moved_m <= 5000.0


def test_snapping_with_no_water_in_radius(coast):
    _, _, medium = coast
    with pytest.raises(
        SourceError, match=r"lies on land \(depth_m = -25.0\), and no open water lies within 2 km"
    ):
        medium.travel_time(Source.point_xy(3500.0, 20500.0), snap_radius_m=2000.0)


def test_snap_radius_must_be_non_negative(coast):
    _, _, medium = coast
    with pytest.raises(ValueError, match=r"snap radius -1.0 m must be a non-negative number"):
        medium.travel_time(Source.point_xy(20500.0, 20500.0), snap_radius_m=-1.0)


def test_snapping_on_a_geographic_grid_reports_ground_distance():
    grid = Grid((40, 40), Affine(0.05, 0, 140.0, 0, -0.05, 40.0), "EPSG:4326")
    depth = np.full(grid.shape, 2000.0)
    depth[:, :20] = -10.0  # land west of 141 E
    medium = prepare_medium(depth, grid)
    with pytest.warns(TtmapWarning, match="source moved"):
        result = medium.travel_time(Source.point(140.9, 39.0), snap_radius_m=50e3)
    s = result.summary
    assert (s.source_x, s.source_y) == pytest.approx((141.025, 39.025))
    # Geodesic distance (Karney 2013, J. Geodesy 87:43-55 via pyproj.Geod); ttmap uses
    # a haversine on the mean radius, within 0.5 %.
    _, _, d_m = GEOD.inv(140.9, 39.0, 141.025, 39.025)
    assert s.source_moved_m == pytest.approx(d_m, rel=5e-3)


def test_area_source_without_open_water_refused(coast):
    _, _, medium = coast
    with pytest.raises(
        SourceError,
        match=r"area source around \(x .*\) covers no open water cell \(depth_m = -25.0 there\)",
    ):
        medium.travel_time(Source.from_geometry(shapely.box(1000, 10000, 8000, 30000), crs=None))


def test_line_source_outside_grid_refused(coast):
    _, _, medium = coast
    line = shapely.LineString([(-90000, -90000), (-80000, -90000)])
    with pytest.raises(SourceError, match="line source LINESTRING .* lies outside the grid"):
        medium.travel_time(Source.from_geometry(line, crs=None))


def test_line_source_on_land_refused(coast):
    _, _, medium = coast
    line = shapely.LineString([(2000, 5000), (2000, 35000)])
    with pytest.raises(SourceError, match="touches no open water cell"):
        medium.travel_time(Source.from_geometry(line, crs=None))


def test_tiny_area_becomes_a_point_with_a_warning(coast):
    _, _, medium = coast
    tiny = shapely.box(20_100, 20_100, 21_900, 21_900)  # 3.2 cells
    with pytest.warns(
        TtmapWarning, match="area source covers less than 4 grid cells; it is treated as a point"
    ):
        result = medium.travel_time(Source.from_geometry(tiny, crs=None))
    c = tiny.representative_point()
    as_point = medium.travel_time(Source.point_xy(c.x, c.y))
    assert result.summary.source_start_cells == as_point.summary.source_start_cells
    np.testing.assert_array_equal(result.arrival_time_s, as_point.arrival_time_s)


# ------------------------------------------------------------------ placing: start regions


def test_point_start_region_holds_straight_ray_times(coast):
    grid, _, medium = coast
    result = medium.travel_time(Source.point_xy(25_300.0, 20_800.0))
    t = result.arrival_time_s
    rows, cols = np.mgrid[0:40, 0:40]
    x, y = grid.xy(rows, cols)
    r = np.hypot(x - 25_300.0, y - 20_800.0)
    near = r < 5000.0  # well within the 10-cell start disc, all water
    # Straight-ray time in map metres at the speed times the CRS's scale (this UTM grid lies
    # 500 km off its central meridian: k about 1.0027, varying 1e-5 per cell), taken at the
    # ray's middle: second-order in the change of k along the ray.
    k = projection_scale(grid).rows(0, grid.rows)
    k_mid = 0.5 * (k + k[grid.rowcol(25_300.0, 20_800.0)])
    np.testing.assert_allclose(
        t[near], r[near] / (np.sqrt(9.80665 * 1000.0) * k_mid[near]), rtol=2e-5
    )


def test_point_next_to_land_still_starts(coast):
    _, _, medium = coast
    result = medium.travel_time(Source.point_xy(10_100.0, 20_500.0))  # 100 m from the coast
    assert result.summary.cells_reached == int(medium.open_water.sum())


def test_line_source_starts_along_its_length(coast):
    grid, _, medium = coast
    line = shapely.LineString([(25_000.0, 0.0), (25_000.0, 40_000.0)])
    result = medium.travel_time(Source.from_geometry(line, crs=None))
    rows, cols = np.mgrid[0:40, 0:40]
    x, _ = grid.xy(rows, cols)
    # A plane front from the line: distance / sqrt(g h) (analytic) away from the island.
    sel = (rows < 28) & (x > 10_000.0)
    # Map distance over the speed times the CRS's scale (UTM 500 km off its central
    # meridian, k about 1.0027), the scale taken half-way to the line.
    k = projection_scale(grid).rows(0, grid.rows)
    k_mid = 0.5 * (k + k[:, [25]])
    np.testing.assert_allclose(
        result.arrival_time_s[sel],
        np.abs(x[sel] - 25_000.0) / (np.sqrt(9.80665 * 1000.0) * k_mid[sel]),
        rtol=5e-5,  # the march over a speed varying 1e-5 per cell: 1.8e-5 measured
    )
    assert result.summary.source_start_cells > 40


def test_area_source_crossing_the_antimeridian():
    grid = Grid((40, 360), Affine(1.0, 0, -180.0, 0, -1.0, 20.0), "EPSG:4326")
    medium = prepare_medium(np.full(grid.shape, 4000.0), grid)
    area = shapely.box(175.0, -5.0, 185.0, 5.0)  # longitudes beyond 180 wrap
    result = medium.travel_time(Source.from_geometry(area))
    t = result.arrival_time_s
    assert (t[15:25, 355:] == 0.0).all() and (t[15:25, :5] == 0.0).all()
    assert result.summary.source_start_cells == 100
    assert np.isfinite(t).all()


def test_rupture_across_the_antimeridian_stays_in_one_piece():
    s = Source.rupture(179.9, -30.0, strike_deg=20.0, length_km=300.0, width_km=100.0)
    assert s.geometry.is_valid
    minx, _, maxx, _ = s.geometry.bounds
    assert 178.0 < minx < 179.9 and 180.0 < maxx < 182.0  # longitudes continue past 180
    area_m2, _ = GEOD.geometry_area_perimeter(s.geometry)  # Karney 2013 via pyproj.Geod
    assert abs(area_m2) == pytest.approx(300e3 * 100e3, rel=2e-3)


def test_rupture_across_the_antimeridian_on_a_global_grid():
    # Uniform depth: a rupture straddling 180 gives the times of the same rupture half
    # a turn away, shifted by 180 degrees of columns (symmetry of the sphere-like grid).
    grid = Grid((80, 720), Affine(0.5, 0, -180.0, 0, -0.5, 0.0), "EPSG:4326")
    medium = prepare_medium(np.full(grid.shape, 4000.0), grid)
    kw = {"strike_deg": 20.0, "length_km": 300.0, "width_km": 100.0}
    a = medium.travel_time(Source.rupture(179.9, -20.0, **kw))
    b = medium.travel_time(Source.rupture(-0.1, -20.0, **kw))
    assert a.summary.source_start_cells == b.summary.source_start_cells > 5
    np.testing.assert_allclose(
        a.arrival_time_s, np.roll(b.arrival_time_s, 360, axis=1), rtol=1e-9, atol=1e-6
    )


def test_regional_grid_past_180_accepts_either_longitude_convention():
    grid = Grid((80, 80), Affine(0.25, 0, 170.0, 0, -0.25, 0.0), "EPSG:4326")  # 170 E to 190 E
    medium = prepare_medium(np.full(grid.shape, 4000.0), grid)
    a = medium.travel_time(Source.point(185.0, -10.0)).arrival_time_s
    b = medium.travel_time(Source.point(-175.0, -10.0)).arrival_time_s
    np.testing.assert_array_equal(a, b)
    kw = {"strike_deg": 10.0, "length_km": 200.0, "width_km": 80.0}
    r1 = medium.travel_time(Source.rupture(-178.0, -10.0, **kw))
    r2 = medium.travel_time(Source.rupture(182.0, -10.0, **kw))
    np.testing.assert_allclose(r1.arrival_time_s, r2.arrival_time_s, rtol=1e-9, atol=1e-6)
    # 200 x 80 km over cells of ~27.6 x 27.6 km: about 21 cells start at time zero.
    assert 15 <= r1.summary.source_start_cells <= 30
    with pytest.raises(SourceError, match=r"\(lon 169.0000, lat -10.0000\) lies outside the grid"):
        medium.travel_time(Source.point(169.0, -10.0))


@pytest.mark.parametrize("seam", [False, True])
def test_area_on_lonlat_grid_is_exactly_zero_on_native_cells_inside(seam):
    # 0.2-degree cells at 50-62 N: the Mercator rows are finer than the native rows and
    # do not line up with them, so times carried back from the rows near the area's edge
    # are interpolated. Native cells whose centres lie inside must still start at 0.
    if seam:  # a global grid whose last column repeats the first
        grid = Grid((60, 1801), Affine(0.2, 0, -180.1, 0, -0.2, 62.0), "EPSG:4326")
        assert grid.has_seam_column
        area = shapely.box(-183.05, 53.05, -176.95, 57.05)  # across the seam
    else:
        grid = Grid((60, 90), Affine(0.2, 0, 140.0, 0, -0.2, 62.0), "EPSG:4326")
        area = shapely.box(144.05, 53.05, 151.05, 57.05)
    medium = prepare_medium(np.full(grid.shape, 3000.0), grid)
    result = medium.travel_time(Source.from_geometry(area))
    t = result.arrival_time_s
    rows, cols = np.mgrid[0 : grid.rows, 0 : grid.cols]
    lon, lat = grid.xy(rows, cols)
    lon = np.where(lon > 0.5 * (area.bounds[0] + area.bounds[2]) + 180.0, lon - 360.0, lon)
    lon = np.where(lon < 0.5 * (area.bounds[0] + area.bounds[2]) - 180.0, lon + 360.0, lon)
    inside = shapely.contains_xy(area, lon, lat)
    if seam:
        inside[:, -1] = inside[:, 0]
    assert inside.sum() > 100
    assert (t[inside] == 0.0).all()
    assert (t[~inside] > 0.0).all()
    # The summary counts native cells inside (a seam column counted once).
    expected = int(inside[:, :-1].sum()) if seam else int(inside.sum())
    assert result.summary.source_start_cells == expected


def _global_with_land_east_of(col: int) -> tuple[Grid, np.ndarray]:
    grid = Grid((40, 360), Affine(1.0, 0, -180.0, 0, -1.0, 20.0), "EPSG:4326")
    depth = np.full(grid.shape, 3000.0)
    depth[16:23, (col + 2) % 360] = -10.0  # a wall 2 cells east of the source's cell
    return grid, depth


def test_point_next_to_land_on_a_wrapping_grid_matches_a_crop():
    # Along the columns of a wrapping grid scikit-fmm freezes start-region cells next to
    # land as if the land were outside the region; they must get their exact times too.
    grid, depth = _global_with_land_east_of(180)
    src = Source.point(0.4, 0.3)  # column 180
    t = prepare_medium(depth, grid).travel_time(src).arrival_time_s
    crop = Grid((40, 120), Affine(1.0, 0, -60.0, 0, -1.0, 20.0), "EPSG:4326")
    t_crop = prepare_medium(depth[:, 120:240], crop).travel_time(src).arrival_time_s
    # Near the source no path wraps around the globe: the two solves agree.
    np.testing.assert_allclose(t[:, 150:210], t_crop[:, 30:90], rtol=1e-9)


def test_point_next_to_land_across_the_seam_of_a_wrapping_grid():
    grid, depth = _global_with_land_east_of(359)  # the wall is in column 1, across the seam
    t = prepare_medium(depth, grid).travel_time(Source.point(179.4, 0.3)).arrival_time_s
    ref_grid, ref_depth = _global_with_land_east_of(180)
    ref = prepare_medium(ref_depth, ref_grid).travel_time(Source.point(0.4, 0.3)).arrival_time_s
    # The same set-up half a turn away (columns shifted by 179).
    np.testing.assert_allclose(np.roll(t, -179, axis=1)[:, 150:210], ref[:, 150:210], rtol=1e-9)
