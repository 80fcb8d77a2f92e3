"""Site arrival times against analytic references on a constant-depth geographic grid.

Each check names its outside reference beside it. Tags follow the project
reference notes (docs/references.md): [S] read in the cited source, [C] computed,
[from memory] not re-checked, "common practice, no source".

Setting: 0.02-degree WGS84 grid, uniform depth 4000 m, land east of 153.8 E
(a straight north-south coast), a point source 250-300 km offshore and three
sites just on land at the coast. The arrival read for a site is the time at
the water cell it was moved to, so the reference distance is the geodesic
from the source to that cell's centre.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from affine import Affine
from pyproj import Geod

from ttmap import Grid, Source, prepare_medium
from ttmap.io.sites import Site, SiteList
from ttmap.physics.dispersion import group_speed_m_s
from ttmap.products.sites import SNAP_MOVED, site_table, snap_sites

G_M_S2 = 9.80665  # standard gravity, exact (3rd CGPM 1901; docs/references.md §9 [S])
DEPTH_M = 4000.0
C0_M_S = math.sqrt(
    G_M_S2 * DEPTH_M
)  # long-wave speed sqrt(g h) = 198.06 m/s (docs/references.md §2 [C])
PERIOD_S = 600.0
CELL_DEG = 0.02
COAST_LON = 153.8  # land from here eastward
SOURCE = (151.0, -34.0)
SITES = {  # just on land, 0.001 degree east of the coast
    "North Quay": (COAST_LON + 0.001, -32.51),
    "Mid Bay": (COAST_LON + 0.001, -34.01),
    "South Head": (COAST_LON + 0.001, -35.49),
}


@pytest.fixture(scope="module")
def solved():
    rows, cols = 250, 225  # lat -36.5..-31.5, lon 149.5..154.0
    grid = Grid((rows, cols), Affine(CELL_DEG, 0.0, 149.5, 0.0, -CELL_DEG, -31.5), "EPSG:4326")
    lon_c, _ = grid.xy(np.zeros(cols), np.arange(cols))
    depth = np.full(grid.shape, DEPTH_M)
    depth[:, lon_c > COAST_LON] = -50.0
    source = Source.point(*SOURCE)
    front = prepare_medium(depth, grid).travel_time(source)
    energy = prepare_medium(depth, grid, mode="group", period_s=PERIOD_S).travel_time(source)
    sites = SiteList(tuple(Site(n, x, y) for n, (x, y) in SITES.items()))
    snapped = snap_sites(sites, grid, front)
    table = site_table(sites, snapped, front, {PERIOD_S: energy})
    return grid, sites, snapped, table


def _geodesic_to_cells(snapped):
    # Geodesic distance on WGS84: Karney 2013, J. Geodesy 87:43-55 [from memory], via pyproj.Geod.
    lon = np.array([s.x for s in snapped])
    lat = np.array([s.y for s in snapped])
    _, _, dist_m = Geod(ellps="WGS84").inv(
        np.full(lon.size, SOURCE[0]), np.full(lon.size, SOURCE[1]), lon, lat
    )
    return np.asarray(dist_m)


def test_sites_move_one_column_west_to_the_coastal_water(solved):
    _grid, _, snapped, _ = solved
    assert [s.status for s in snapped] == [SNAP_MOVED] * 3
    # The site is 0.011 degree of longitude east of the last water cell centre:
    # geodesic length of that step at the site's latitude (pyproj.Geod, Karney 2013 [from memory]).
    geod = Geod(ellps="WGS84")
    for s, (x, y) in zip(snapped, SITES.values(), strict=True):
        assert s.x == pytest.approx(COAST_LON - CELL_DEG / 2, abs=1e-9)
        _, _, expect_m = geod.inv(x, y, s.x, s.y)
        # haversine on the mean radius vs the ellipsoid: tolerance 0.5 %, measured 0.21 %
        # (the two radii of curvature differ from R1 by that much; docs/references.md §9)
        assert s.moved_m == pytest.approx(expect_m, rel=5e-3)


def test_front_arrival_is_geodesic_distance_over_long_wave_speed(solved):
    _, _, snapped, table = solved
    dist_m = _geodesic_to_cells(snapped)
    expected_min = dist_m / C0_M_S / 60.0  # T = distance / sqrt(g h) (docs/references.md §8)
    got = np.array(table.columns["front_min"])
    rel = np.abs(got - expected_min) / expected_min
    # Tolerance 0.5 % (brief); measured worst 0.023 %.
    assert rel.max() <= 5e-3, rel


def test_energy_arrival_is_distance_over_group_speed(solved):
    _, _, snapped, table = solved
    cg = float(group_speed_m_s(DEPTH_M, PERIOD_S))
    # The group speed itself against the tsunami-band table: c_g / sqrt(g h) = 0.9778 at
    # h = 4000 m, T = 600 s (docs/references.md §1.3 [C]; the dispersion solver is checked
    # against exact roots in test_dispersion_reference.py).
    assert cg / C0_M_S == pytest.approx(0.9778, abs=1e-4)
    dist_m = _geodesic_to_cells(snapped)
    expected_min = dist_m / cg / 60.0
    got = np.array(table.columns["energy_T600s_min"])
    rel = np.abs(got - expected_min) / expected_min
    # Tolerance 0.5 % (brief); measured worst 0.023 %.
    assert rel.max() <= 5e-3, rel
    # The window is the extra time of the energy: distance * (1/cg - 1/c0) > 0.
    window = np.array(table.columns["window_T600s_min"])
    expected_window = dist_m * (1.0 / cg - 1.0 / C0_M_S) / 60.0
    # Both solves share the grid and path, so their errors cancel in the difference:
    # tolerance 2 %, measured 0.03 %.
    np.testing.assert_allclose(window, expected_window, rtol=0.02)
    assert (window > 0).all()


def test_uncertainty_band_is_the_exact_speed_mapping(solved):
    _, _, snapped, table = solved
    dist_m = _geodesic_to_cells(snapped)
    # Speed 5 % higher / lower: t = d / (c (1 +/- 0.05)) (definition of the stated band).
    np.testing.assert_allclose(
        table.columns["earliest_min"], dist_m / (C0_M_S * 1.05) / 60.0, rtol=5e-3
    )
    np.testing.assert_allclose(
        table.columns["latest_min"], dist_m / (C0_M_S * 0.95) / 60.0, rtol=5e-3
    )
