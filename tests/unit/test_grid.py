"""Unit tests of ttmap.grid: Grid geometry, Mercator rows and the solve plane.

Outside references: pyproj's Mercator projection (PROJ, ``+proj=merc``) for the
isometric latitude and scale factor, and geodesic distances (Karney 2013,
J. Geodesy 87:43-55 via pyproj.Geod) for cell sizes.
"""

from __future__ import annotations

import doctest
import math

import numpy as np
import pytest
from affine import Affine
from numpy.testing import assert_allclose, assert_array_equal
from pyproj import Geod, Proj

from ttmap import grid as grid_module
from ttmap.errors import GridError
from ttmap.grid import (
    Grid,
    isometric_latitude,
    latitude_from_isometric,
    mercator_scale_factor,
    solve_plane,
)

WGS84_A_M = 6378137.0  # WGS84 semi-major axis (docs/references.md §9 [M, standard])
MEAN_RADIUS_M = 6371008.7714  # IUGG mean radius R1 (docs/references.md §9)


def _global(
    cols: int = 360, left: float = -180.0, cell: float = 1.0, top: float = 80.0, rows: int = 160
) -> Grid:
    return Grid((rows, cols), Affine(cell, 0.0, left, 0.0, -cell, top), "EPSG:4326")


def _utm(rows: int = 30, cols: int = 40, cell: float = 1000.0) -> Grid:
    return Grid((rows, cols), Affine(cell, 0.0, 500_000.0, 0.0, -cell, 4_000_000.0), "EPSG:32601")


def test_module_doctests_pass():
    failed, attempted = doctest.testmod(grid_module)
    assert attempted > 0 and failed == 0


# ------------------------------------------------------------------ Grid basics


def test_projected_grid_properties():
    g = _utm()
    assert (g.rows, g.cols) == (30, 40)
    assert not g.is_geographic
    assert not g.wraps_x and not g.has_seam_column
    assert g.bounds == (500_000.0, 3_970_000.0, 540_000.0, 4_000_000.0)
    assert g.linear_unit_m == 1.0
    assert g.cell_size_m() == (1000.0, 1000.0)


def test_shape_is_normalised_to_python_ints():
    g = Grid((np.int64(5), np.int64(6)), Affine(1, 0, 0, 0, -1, 5), "EPSG:4326")
    assert g.shape == (5, 6) and all(type(v) is int for v in g.shape)


def test_transform_given_as_tuple_is_accepted():
    g = Grid((5, 6), (1.0, 0.0, 0.0, 0.0, -1.0, 5.0), "EPSG:4326")
    assert isinstance(g.transform, Affine)


def test_south_up_bounds():
    g = Grid((10, 20), Affine(0.5, 0.0, 100.0, 0.0, 0.5, -20.0), "EPSG:4326")
    assert g.bounds == (100.0, -20.0, 110.0, -15.0)
    assert_allclose(g.row_latitudes_deg()[:2], [-19.75, -19.25])


def test_feet_crs_linear_unit():
    g = Grid((10, 10), Affine(3000.0, 0, 0, 0, -3000.0, 30000.0), "EPSG:2227")
    # US survey foot = 1200/3937 m (US survey foot definition [from memory]).
    assert g.linear_unit_m == pytest.approx(1200.0 / 3937.0, rel=1e-12)
    assert g.cell_size_m() == pytest.approx((3000.0 * 1200 / 3937, 3000.0 * 1200 / 3937), rel=1e-12)


def test_wraps_x_without_seam():
    g = _global(cols=360)
    assert g.wraps_x and not g.has_seam_column


def test_wraps_x_with_seam_column():
    g = _global(cols=361, left=-180.5)  # cell centres -180 ... 180
    assert g.wraps_x and g.has_seam_column


def test_regional_grid_does_not_wrap():
    g = _global(cols=359)
    assert not g.wraps_x and not g.has_seam_column


def test_xy_rowcol_round_trip():
    g = _global(cols=360, cell=1.0)
    rng = np.random.default_rng(1)
    rows = rng.integers(0, g.rows, 200)
    cols = rng.integers(0, g.cols, 200)
    x, y = g.xy(rows, cols)
    r2, c2 = g.rowcol(x, y)
    assert_array_equal(r2, rows)
    assert_array_equal(c2, cols)
    gp = _utm()
    x, y = gp.xy(7, 9)
    assert (float(x), float(y)) == (509_500.0, 3_992_500.0)
    assert tuple(int(v) for v in gp.rowcol(x, y)) == (7, 9)


def test_rowcol_takes_longitude_modulo_360_on_a_wrapping_grid():
    g = _global(cols=360)
    assert tuple(int(v) for v in g.rowcol(190.5, 0.5)) == tuple(
        int(v) for v in g.rowcol(-169.5, 0.5)
    )
    assert bool(g.contains(190.5, 0.5))
    # Not on a regional grid.
    regional = Grid((10, 10), Affine(1, 0, 0, 0, -1, 10), "EPSG:4326")
    assert not bool(regional.contains(370.5, 5.0))


def test_rowcol_maps_the_seam_column_to_the_first():
    g = _global(cols=361, left=-180.5)
    assert int(g.rowcol(180.0, 0.0)[1]) == 0
    assert int(g.rowcol(-180.0, 0.0)[1]) == 0
    assert int(g.rowcol(179.0, 0.0)[1]) == 359


def test_contains_outside():
    g = _utm()
    assert bool(g.contains(500_001.0, 3_999_999.0))
    assert not bool(g.contains(499_999.0, 3_990_000.0))
    assert not bool(g.contains(510_000.0, 4_000_001.0))


def test_geographic_cell_size_against_geodesics():
    g = Grid((40, 40), Affine(0.25, 0, 10.0, 0, -0.25, 50.0), "EPSG:4326")  # middle latitude 45
    row_m, col_m = g.cell_size_m()
    geod = Geod(ellps="WGS84")  # Karney 2013, J. Geodesy 87:43-55 via pyproj.Geod
    _, _, meridian = geod.inv(15.0, 44.875, 15.0, 45.125)
    _, _, parallel = geod.inv(14.875, 45.0, 15.125, 45.0)
    assert row_m == pytest.approx(meridian, rel=1e-6)
    assert col_m == pytest.approx(parallel, rel=1e-5)  # geodesic chord vs parallel arc ~4e-7


def test_geographic_grid_has_no_linear_unit():
    with pytest.raises(GridError, match="geographic grid has no linear unit"):
        _ = _global().linear_unit_m


def test_row_latitudes_of_projected_grid_refused():
    with pytest.raises(GridError, match="geographic grids only"):
        _utm().row_latitudes_deg()


# ------------------------------------------------------------------ Grid errors


def test_rotated_transform_is_refused():
    with pytest.raises(GridError, match=r"rotated or sheared \(b=0.1, d=0.0\)"):
        Grid((10, 10), Affine(1.0, 0.1, 0.0, 0.0, -1.0, 10.0), "EPSG:32601")
    with pytest.raises(GridError, match="rotated or sheared"):
        Grid((10, 10), Affine(1.0, 0.0, 0.0, 0.2, -1.0, 10.0), "EPSG:4326")


@pytest.mark.parametrize("shape", [(1, 10), (10, 1), (5,)])
def test_degenerate_shape_refused(shape):
    with pytest.raises(GridError, match="not a 2-D raster of at least 2 x 2"):
        Grid(shape, Affine(1, 0, 0, 0, -1, 10), "EPSG:4326")


def test_zero_cell_size_refused():
    with pytest.raises(GridError, match=r"zero cell size \(a=0.0"):
        Grid((10, 10), Affine(0.0, 0, 0, 0, -1, 10), "EPSG:4326")


def test_east_to_west_columns_refused():
    with pytest.raises(GridError, match=r"east to west \(a=-1.0\)"):
        Grid((10, 10), Affine(-1.0, 0, 10, 0, -1, 10), "EPSG:4326")


def test_missing_crs_refused():
    with pytest.raises(GridError, match="grid has no CRS"):
        Grid((10, 10), Affine(1, 0, 0, 0, -1, 10), None)


def test_unknown_crs_refused():
    with pytest.raises(GridError, match="'EPSG:999999' is not understood"):
        Grid((10, 10), Affine(1, 0, 0, 0, -1, 10), "EPSG:999999")


def test_projected_cell_aspect_refused():
    with pytest.raises(GridError, match=r"1000 x 300 map units \(aspect 3.33\)"):
        Grid((10, 10), Affine(1000.0, 0, 0, 0, -300.0, 3000.0), "EPSG:32601")


def test_grid_beyond_85_degrees_refused():
    g = Grid((20, 36), Affine(10.0, 0, -180.0, 0, -4.5, 87.0), "EPSG:4326")
    with pytest.raises(GridError, match="reaches latitude 87 degrees.*85-degree limit"):
        solve_plane(g)


def test_grid_beyond_90_degrees_refused():
    g = Grid((20, 36), Affine(10.0, 0, -180.0, 0, -5.0, 95.0), "EPSG:4326")
    with pytest.raises(GridError, match=r"from -5 to 95 degrees, beyond \+/-90"):
        g.check_latitude_limit()


def test_unknown_earth_model_refused():
    with pytest.raises(
        GridError, match="earth model 'moon' is unknown; choose one of wgs84, sphere"
    ):
        solve_plane(_global(), earth="moon")
    with pytest.raises(GridError, match="earth model 'mars' is unknown"):
        isometric_latitude(10.0, earth="mars")


# ------------------------------------------------------------------ Mercator functions


def test_isometric_latitude_matches_pyproj_mercator():
    lat = np.linspace(-84.0, 84.0, 57)
    # Outside reference: PROJ's ellipsoidal Mercator, y = a * psi.
    _, y = Proj("+proj=merc +ellps=WGS84")(np.zeros_like(lat), lat)
    assert_allclose(isometric_latitude(lat), np.asarray(y) / WGS84_A_M, rtol=0, atol=1e-12)
    # Sphere of radius R1: y = R * atanh(sin phi).
    _, ys = Proj(f"+proj=merc +R={MEAN_RADIUS_M}")(np.zeros_like(lat), lat)
    assert_allclose(
        isometric_latitude(lat, earth="sphere"), np.asarray(ys) / MEAN_RADIUS_M, atol=1e-12
    )


@pytest.mark.parametrize("earth", ["wgs84", "sphere"])
def test_latitude_from_isometric_round_trip(earth):
    lat = np.linspace(-85.0, 85.0, 341)
    assert_allclose(
        latitude_from_isometric(isometric_latitude(lat, earth=earth), earth=earth), lat, atol=1e-11
    )
    assert float(latitude_from_isometric(0.0, earth=earth)) == 0.0


def test_mercator_scale_factor_matches_pyproj():
    lat = np.linspace(-84.0, 84.0, 43)
    # Outside reference: PROJ's Mercator point scale along the meridian.
    factors = Proj("+proj=merc +ellps=WGS84").get_factors(np.zeros_like(lat), lat)
    # PROJ differentiates numerically (relative error ~3e-9 measured), hence rtol 1e-7.
    assert_allclose(mercator_scale_factor(lat), factors.meridional_scale, rtol=1e-7)
    assert_allclose(
        mercator_scale_factor(lat, earth="sphere"), 1.0 / np.cos(np.radians(lat)), rtol=1e-13
    )


# ------------------------------------------------------------------ solve plane


def test_projected_solve_plane_is_the_grid():
    g = _utm()
    p = solve_plane(g)
    assert p.is_identity and not p.periodic_x and not p.drop_seam
    assert p.shape == g.shape and p.spacing_m == (1000.0, 1000.0)
    assert_array_equal(p.scale_factor, np.ones(g.rows))
    field = np.arange(g.rows * g.cols, dtype=float).reshape(g.shape)
    assert_array_equal(p.to_native(p.to_solve(field)), field)
    assert p.to_plane(501_000.0, 3_990_000.0) == (501_000.0, 3_990_000.0)


def test_geographic_solve_plane_rows():
    g = Grid((60, 80), Affine(0.25, 0, 140.0, 0, -0.25, 60.0), "EPSG:4326")  # 45 N to 60 N
    p = solve_plane(g)
    assert not p.is_identity and not p.periodic_x
    rows, cols = p.shape
    assert cols == g.cols and rows >= g.rows
    # Square plane cells; the column step is a * dlon.
    assert p.spacing_m[1] == pytest.approx(WGS84_A_M * math.radians(0.25), rel=1e-14)
    assert p.spacing_m[0] <= p.spacing_m[1] * (1 + 1e-12)
    # Rows span the grid exactly in isometric latitude.
    psi_top, psi_bottom = isometric_latitude([60.0, 45.0])
    assert rows * p.spacing_m[0] == pytest.approx(WGS84_A_M * (psi_top - psi_bottom), rel=1e-12)
    # Every native row is sampled by at least one solve row.
    assert set(p.native_row.tolist()) == set(range(g.rows))
    # Scale factors are those of each solve row's latitude.
    y, _ = p.cell_centres()
    lat = latitude_from_isometric(y / WGS84_A_M)
    assert_allclose(p.scale_factor, mercator_scale_factor(lat), rtol=1e-12)


def test_to_native_interpolates_linearly_in_isometric_latitude():
    g = Grid((60, 80), Affine(0.25, 0, 140.0, 0, -0.25, 60.0), "EPSG:4326")
    p = solve_plane(g)
    y, _ = p.cell_centres()
    solved = np.repeat((y / WGS84_A_M)[:, None], p.shape[1], axis=1)
    back = p.to_native(solved)
    psi_native = isometric_latitude(g.row_latitudes_deg())
    assert back.shape == g.shape and back.dtype == np.float64
    assert_allclose(back[:, 0], psi_native, atol=1e-13)
    # A NaN solve row falls back to the other neighbour.
    solved[p.back_row1[10], :] = np.nan
    back = p.to_native(solved)
    assert np.isfinite(back[10]).all()


def test_seam_column_dropped_on_the_plane_and_restored():
    g = _global(cols=361, left=-180.5)
    p = solve_plane(g)
    assert p.periodic_x and p.drop_seam and p.shape[1] == 360
    native = np.tile(np.arange(361, dtype=float), (g.rows, 1))
    on_plane = p.to_solve(native)
    assert on_plane.shape[1] == 360
    back = p.to_native(on_plane)
    assert back.shape == g.shape
    assert_array_equal(back[:, -1], back[:, 0])


def test_to_plane_wraps_longitudes_on_a_global_grid():
    g = _global(cols=360)
    p = solve_plane(g)
    x1, y1 = p.to_plane(190.0, 10.0)
    x2, _ = p.to_plane(-170.0, 10.0)
    assert float(x1) == pytest.approx(float(x2), abs=1e-6)
    assert float(y1) == pytest.approx(WGS84_A_M * float(isometric_latitude(10.0)), rel=1e-14)
