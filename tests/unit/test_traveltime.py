"""Unit tests of ttmap.traveltime: prepare_medium, Medium.travel_time, summaries, errors."""

from __future__ import annotations

import doctest
import json

import numpy as np
import pytest
from affine import Affine
from numpy.testing import assert_allclose, assert_array_equal

from ttmap import (
    Grid,
    GridError,
    InputDataError,
    Source,
    TravelTimeSummary,
    compute_travel_time,
    prepare_medium,
)
from ttmap import traveltime as traveltime_module
from ttmap.errors import GridError, TtmapWarning
from ttmap.grid import projection_scale

G_M_S2 = 9.80665  # standard gravity, exact (3rd CGPM 1901; docs/references.md §9 [S])


def _grid(n: int = 30, cell: float = 1000.0) -> Grid:
    return Grid((n, n), Affine(cell, 0, 0, 0, -cell, n * cell), "EPSG:32601")


def _depth(n: int = 30) -> np.ndarray:
    """Open sea with a coast, shallow cells, nodata, a diagonal-only join and a lake."""
    d = np.full((n, n), 2000.0)
    d[:, :4] = -10.0  # coast
    d[:, 4] = 1.0  # shallow water below the floor depth
    d[0, 0] = np.nan  # nodata
    d[20:27, 20:27] = -2.0  # island ...
    d[22:24, 22:24] = 30.0  # ... with a 2 x 2 lake (0.5 % of the water: a closed basin)
    d[10, 1] = 50.0  # a pond touching the sea only at a corner: (10,1)-(11,2)
    d[11, 2] = 50.0
    d[11, 3] = 50.0  # (11,2)-(11,3)-(11,4) join it to the sea
    d[10, 2] = -1.0  # lower land of the (10,1)-(11,2) block
    d[9, 1] = 50.0  # so (9,1),(10,1) is a separate 2-cell body before opening
    return d


def test_module_doctests_pass():
    failed, attempted = doctest.testmod(traveltime_module)
    assert attempted > 0 and failed == 0


def test_prepare_medium_does_not_modify_the_depth_input():
    depth = _depth()
    before = depth.copy()
    medium = prepare_medium(depth, _grid())
    assert_array_equal(depth, before)  # NaN compares equal in assert_array_equal
    assert medium.depth_m is not depth
    medium.travel_time(Source.point_xy(15_500.0, 15_500.0))
    assert_array_equal(depth, before)


def test_travel_time_does_not_modify_the_medium():
    medium = prepare_medium(_depth(), _grid())
    arrays = {
        k: getattr(medium, k).copy()
        for k in ("speed_plane_m_s", "barrier_plane", "water", "depth_m")
    }
    medium.travel_time(Source.point_xy(15_500.0, 15_500.0), max_time_s=30.0)
    medium.travel_time(Source.point_xy(8_500.0, 5_500.0))
    for k, a in arrays.items():
        assert_array_equal(getattr(medium, k), a)


def test_medium_fields():
    depth = _depth()
    medium = prepare_medium(depth, _grid())
    assert medium.joins_opened == ((10, 2),)
    assert medium.depth_m[10, 2] == 50.0  # opened land: the depth of the water it joins
    assert medium.depth_m[5, 4] == 5.0  # shallow water raised to the floor depth
    assert np.isnan(medium.depth_m[0, 0])
    assert medium.water.sum() == int((depth > 0).sum()) + 1
    assert medium.open_water.sum() == medium.water.sum() - 4  # all but the lake
    assert np.isnan(medium.speed_m_s[~medium.water]).all()
    assert medium.speed_m_s[5, 4] == pytest.approx(np.sqrt(G_M_S2 * 5.0), rel=1e-14)
    assert_array_equal(medium.barrier_plane, ~medium.water)  # projected: the grid itself
    # Native speed: computed on request; the solve speed on projected grids is the speed
    # times the CRS's scale (map metres per ground metre; about 1.0027 on this UTM grid,
    # 500 km off its central meridian).
    k = projection_scale(medium.grid).rows(0, medium.grid.rows)
    assert_allclose(
        medium.speed_m_s[medium.water] * k[medium.water],
        medium.speed_plane_m_s[medium.water],
        rtol=1e-14,
    )
    assert 1.002 < k.min() < k.max() < 1.003
    assert (medium.speed_plane_m_s[medium.barrier_plane] == 1.0).all()
    assert medium.basin_labels.dtype == np.uint16
    assert medium.settings == {
        "speed_mode": "long-wave",
        "period_s": None,
        "floor_depth_m": 5.0,
        "far_field": False,
        "earth": None,
        "open_diagonal": True,
        "min_basin_share": 0.01,
        "projection_scale": projection_scale(medium.grid).as_dict(),
    }
    assert medium.settings["projection_scale"]["method"] == "conformal scale factor"


@pytest.mark.parametrize(
    ("pond_m", "strait_m", "expected_m"),
    [(50.0, 50.0, 50.0), (30.0, 50.0, 30.0), (50.0, 20.0, 20.0), (2.0, 50.0, 5.0)],
)
def test_opened_join_gets_the_shallower_depth_of_its_water_pair(pond_m, strait_m, expected_m):
    depth = _depth()
    depth[10, 1] = pond_m  # the pond's corner cell
    depth[11, 2] = strait_m  # the sea's corner cell
    medium = prepare_medium(depth, _grid())
    assert medium.joins_opened == ((10, 2),)
    # The shallower of the two (after the floor depth), not the floor depth itself.
    assert medium.depth_m[10, 2] == expected_m
    k = projection_scale(medium.grid).rows(10, 11)[0, 2]  # the CRS's scale there
    assert medium.speed_plane_m_s[10, 2] == pytest.approx(np.sqrt(G_M_S2 * expected_m) * k, rel=1e-14)


def test_front_through_an_opened_join_is_not_delayed():
    # A deep pond joined to a deep sea only at a corner: the front crosses the opened
    # cell at the deep-water speed, as if the corner were open water (it is, on a real
    # coast). With the floor depth there it would lose about a cell at 7 m/s.
    n, c_deep = 30, np.sqrt(G_M_S2 * 2000.0)
    depth = np.full((n, n), 2000.0)
    depth[:, 14:16] = -10.0  # wall
    depth[10, 14] = 2000.0  # west body reaches (10, 14) ...
    depth[11, 15] = 2000.0  # ... east body reaches (11, 15): a corner touch
    medium = prepare_medium(depth, _grid(n))
    assert medium.joins_opened == ((10, 15),)  # equal land: the first of the pair
    assert medium.depth_m[10, 15] == 2000.0
    t = medium.travel_time(Source.point_xy(5_500.0, 19_500.0)).arrival_time_s
    # Lower bound: the straight path through the opened cell at the deep speed; upper:
    # the same plus one cell (it is not slowed to the floor-depth speed).
    x, y = _grid(n).xy(np.array([10, 15]), np.array([15, 25]))
    via = np.hypot(x[0] - 5_500.0, y[0] - 19_500.0) + np.hypot(x[1] - x[0], y[1] - y[0])
    assert via / c_deep * 0.99 < t[15, 25] < (via + 1000.0) / c_deep


def test_compute_travel_time_equals_the_two_steps():
    depth, grid = _depth(), _grid()
    src = Source.point_xy(15_500.0, 12_300.0)
    one = compute_travel_time(depth, grid, src, max_time_s=60.0)
    two = prepare_medium(depth, grid).travel_time(src, max_time_s=60.0)
    assert_array_equal(one.arrival_time_s, two.arrival_time_s)
    assert one.summary.cells_reached == two.summary.cells_reached


def test_result_and_summary():
    depth, grid = _depth(), _grid()
    src = Source.point_xy(15_500.0, 12_300.0)
    result = compute_travel_time(depth, grid, src)
    t = result.arrival_time_s
    assert t.dtype == np.float64 and t.shape == grid.shape
    assert not isinstance(t, np.ma.MaskedArray)
    assert result.source is src and result.grid is grid
    assert_array_equal(result.arrival_time_min, t / 60.0)
    s = result.summary
    assert isinstance(s, TravelTimeSummary)
    assert s.cells_total == 900
    assert s.water_cells == s.cells_reached + s.cells_unreached + s.cells_beyond_max_time
    assert (s.cells_unreached, s.unreached_basins) == (4, 1)  # the lake
    assert s.diagonal_joins_opened == 1
    assert np.isfinite(t[9, 1]) and np.isfinite(t[10, 2])  # pond reached through the join
    assert np.isnan(t[:, 0]).all() and np.isnan(t[22:24, 22:24]).all()
    assert (s.source_row, s.source_col) == (17, 15)
    assert (s.source_x, s.source_y) == (15_500.0, 12_300.0)
    assert s.source_moved_m == 0.0 and s.source_depth_m == 2000.0
    assert s.solve_shape == grid.shape and s.solve_seconds >= 0.0
    d = s.as_dict()
    assert d["solve_shape"] == [30, 30]
    json.dumps(d)
    assert result.settings["max_time_s"] is None and result.settings["snap_radius_m"] is None


def test_far_field_and_mode_settings_reach_the_result():
    grid = _grid(41)
    depth = np.full(grid.shape, 4000.0)
    src = Source.point_xy(20_500.0, 20_500.0)
    plain = compute_travel_time(depth, grid, src)
    slow = compute_travel_time(depth, grid, src, far_field=True)
    assert slow.settings["far_field"] is True
    ratio = plain.arrival_time_s[20, 40] / slow.arrival_time_s[20, 40]
    # Speed factor sqrt(1 - g h / c_s^2), c_s = 1500 m/s: 0.87 % slower at 4000 m
    # (docs/references.md §3 [C]).
    assert ratio == pytest.approx(np.sqrt(1.0 - G_M_S2 * 4000.0 / 1500.0**2), rel=1e-9)
    grp = compute_travel_time(depth, grid, src, mode="group", period_s=600.0)
    assert grp.settings["speed_mode"] == "group" and grp.settings["period_s"] == 600.0


def test_geographic_medium_records_the_earth_model():
    grid = Grid((20, 20), Affine(0.1, 0, 140.0, 0, -0.1, 40.0), "EPSG:4326")
    medium = prepare_medium(np.full(grid.shape, 1000.0), grid, earth="sphere")
    assert medium.settings["earth"] == "sphere"
    assert medium.plane.shape[1] == 20 and medium.plane.shape[0] >= 20
    assert medium.speed_plane_m_s.shape == medium.plane.shape


def test_min_basin_share_zero_opens_every_basin():
    depth, grid = _depth(), _grid()
    medium = prepare_medium(depth, grid, min_basin_share=0.0)
    # A source in the lake: its start region fills the lake, nothing else is reached.
    result = medium.travel_time(Source.point_xy(22_500.0, 6_500.0))
    s = result.summary
    assert s.cells_reached == 4
    assert s.unreached_basins == 1 and s.cells_unreached == s.water_cells - 4
    t = result.arrival_time_s[22:24, 22:24]
    x, y = _grid().xy(*np.mgrid[22:24, 22:24])
    k = projection_scale(grid).rows(22, 24)[:, 22:24]  # the CRS's scale (about 1.0027)
    np.testing.assert_allclose(
        t, np.hypot(x - 22_500.0, y - 6_500.0) / (np.sqrt(G_M_S2 * 30.0) * k), rtol=1e-5  # k changes 1.2e-5 per cell
    )


def test_seam_grid_medium_copies_the_first_column():
    grid = Grid((20, 37), Affine(10.0, 0, -185.0, 0, -5.0, 50.0), "EPSG:4326")  # centres -180..180
    assert grid.has_seam_column
    depth = np.full(grid.shape, 3000.0)
    depth[:, -1] = 1234.0  # a disagreeing seam column: the first column wins
    medium = prepare_medium(depth, grid)
    assert_array_equal(medium.depth_m[:, -1], medium.depth_m[:, 0])
    result = medium.travel_time(Source.point(0.0, 27.5))
    assert_array_equal(result.arrival_time_s[:, -1], result.arrival_time_s[:, 0])


# ------------------------------------------------------------------ errors


def test_depth_grid_shape_mismatch():
    with pytest.raises(
        InputDataError, match=r"depth array shape \(30, 29\) differs from the grid shape \(30, 30\)"
    ):
        prepare_medium(np.ones((30, 29)), _grid())


@pytest.mark.parametrize("fill", [-5.0, 0.0, np.nan])
def test_all_land_refused(fill):
    with pytest.raises(
        InputDataError, match="the bathymetry has no water .*check the sign convention"
    ):
        prepare_medium(np.full((30, 30), fill), _grid())


def test_unknown_speed_mode():
    with pytest.raises(
        InputDataError,
        match="speed mode 'linear' is unknown; choose one of long-wave, group, phase",
    ):
        prepare_medium(_depth(), _grid(), mode="linear")


def test_period_missing_for_group_mode():
    with pytest.raises(InputDataError, match="speed mode 'group' needs a wave period"):
        prepare_medium(_depth(), _grid(), mode="group")


def test_period_given_for_long_wave_mode():
    with pytest.raises(
        InputDataError, match=r"a wave period \(600.0 s\) only applies to the group and phase"
    ):
        prepare_medium(_depth(), _grid(), period_s=600.0)


def test_unknown_earth_model():
    with pytest.raises(
        GridError, match="earth model 'flat' is unknown; choose one of wgs84, sphere"
    ):
        prepare_medium(_depth(), _grid(), earth="flat")


def test_grid_beyond_85_degrees():
    grid = Grid((20, 20), Affine(0.5, 0, 0.0, 0, -0.5, 86.0), "EPSG:4326")
    with pytest.raises(
        GridError,
        match="grid reaches latitude 86 degrees, closer to a pole than the 85-degree limit",
    ):
        prepare_medium(np.full(grid.shape, 1000.0), grid)


@pytest.mark.parametrize("bad", [1.0, -0.1, np.nan])
def test_bad_min_basin_share(bad):
    with pytest.raises(InputDataError, match="minimum basin share .* must lie in"):
        prepare_medium(_depth(), _grid(), min_basin_share=bad)


def test_bad_floor_depth():
    with pytest.raises(InputDataError, match="floor depth -1.0 m must be a positive number"):
        prepare_medium(_depth(), _grid(), floor_depth_m=-1.0)


@pytest.mark.parametrize("bad", [0.0, -60.0, np.nan, np.inf])
def test_bad_max_time(bad):
    medium = prepare_medium(_depth(), _grid())
    with pytest.raises(InputDataError, match=rf"maximum time {bad!r} s must be a positive number"):
        medium.travel_time(Source.point_xy(15_500.0, 15_500.0), max_time_s=bad)


@pytest.mark.parametrize("bad", [-1.0, np.nan])
def test_bad_snap_radius(bad):
    medium = prepare_medium(_depth(), _grid())
    with pytest.raises(
        InputDataError, match=rf"snap radius {bad!r} m must be a non-negative number"
    ):
        medium.travel_time(Source.point_xy(15_500.0, 15_500.0), snap_radius_m=bad)


# ------------------------------------------------------------------ projected scale


def _mercator_grid(y0_m: float) -> Grid:
    return Grid((30, 30), Affine(1000.0, 0, 0, 0, -1000.0, y0_m), "EPSG:3857")


def test_web_mercator_away_from_the_equator_is_solved_with_its_scale(recwarn):
    grid = _mercator_grid(5_000_000.0)  # about 41 N: Web Mercator scale about 1.32
    depth = np.full(grid.shape, 1000.0)
    result = compute_travel_time(depth, grid, Source.point_xy(15_500.0, 4_985_500.0))
    record = result.settings["projection_scale"]
    assert record["method"] == "mean scale factor"  # spherical formulas on the ellipsoid
    assert record["crs"] == "WGS 84 / Pseudo-Mercator (EPSG:3857)"
    # sec(latitude) of the grid's rows, 40.8 to 41.0 N, against the WGS84 ellipsoid: the
    # sphere's sec(phi) times (1 - e^2 sin^2 phi)^(1/2..3/4) (Snyder 1987, from memory).
    assert 1.31 < record["min"] < record["max"] < 1.33
    assert record["anisotropy_error"] < 3e-3
    assert not [w for w in recwarn if issubclass(w.category, TtmapWarning)]
    # The speed on the plane is the speed times the scale.
    medium = prepare_medium(depth, grid)
    k = projection_scale(grid).rows(0, grid.rows)
    assert_allclose(medium.speed_plane_m_s, np.sqrt(G_M_S2 * 1000.0) * k, rtol=1e-14)


def test_non_conformal_grid_is_refused_before_any_work():
    grid = Grid((30, 30), Affine(100_000.0, 0, 0, 0, -100_000.0, 6_000_000.0), "EPSG:6933")
    with pytest.raises(GridError, match=r"EPSG:6933\) is not conformal.*gdalwarp -t_srs EPSG:4326"):
        prepare_medium(np.full(grid.shape, 1000.0), grid)


def test_geographic_grids_record_the_mercator_plane():
    grid = Grid((20, 20), Affine(0.5, 0, 140.0, 0, -0.5, 40.0), "EPSG:4326")
    record = prepare_medium(np.full(grid.shape, 1000.0), grid).settings["projection_scale"]
    assert record["method"] == "Mercator solve plane" and record["earth"] == "wgs84"
    assert 1.0 < record["min"] < record["max"] < 1.0 / np.cos(np.radians(40.0))


def test_scale_factors_of_a_grid_centre():
    assert _mercator_grid(5_000_000.0).point_scale_factors()[0] == pytest.approx(
        1.0 / np.cos(np.radians(40.9)), rel=2e-3  # Web Mercator: sec(latitude) [map definition]
    )
    geo = Grid((10, 10), Affine(1, 0, 0, 0, -1, 10), "EPSG:4326")
    assert geo.point_scale_factors() is None
