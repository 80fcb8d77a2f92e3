"""Reference checks of nested grids (ttmap.nesting) against single fine-grid solves.

The reference for a nest is the same speed model solved once on a fine grid over
the whole domain (the nest's own resolution everywhere): nesting must reproduce
it where the coarse grid resolves the sea around the nest, and must beat the
coarse grid alone where it does not (a bay narrower than two coarse cells).
Long-wave speed sqrt(g h), standard gravity 9.80665 m/s^2 (3rd CGPM 1901).
Tolerances (0.5 %, 1 %, one coarse cell's travel time) are the issue's acceptance
figures (common practice, no source).
"""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine
from pyproj import Transformer

from ttmap import Grid, Source, prepare_medium
from ttmap.nesting import sample_arrival_s, solve_nest

G_M_S2 = 9.80665
UTM = "EPSG:32633"
X0, Y0 = 320.0e3, 4000.0e3  # around 36 N, near the zone's central meridian (500 km)
L_M = 360.0e3


def _grid(cell_m: float, x0: float, y0: float, nx: int, ny: int, crs: str = UTM) -> Grid:
    return Grid((ny, nx), Affine(cell_m, 0, x0, 0, -cell_m, y0 + ny * cell_m), crs)


def _centres(g: Grid) -> tuple[np.ndarray, np.ndarray]:
    r, c = np.mgrid[0 : g.rows, 0 : g.cols]
    return g.xy(r, c)


def _basin_depth_m(x, y):
    """A smooth invented basin: deep in the west, shoaling east, a ridge along y."""
    return 1000.0 + 3000.0 * (1.0 - (x - X0) / L_M) + 500.0 * np.sin((y - Y0) / L_M * 6.0)


SOURCE = Source.point_xy(X0 + 60.7e3, Y0 + 180.3e3)


def _solve(g: Grid, depth: np.ndarray) -> np.ndarray:
    return prepare_medium(depth, g).travel_time(SOURCE).arrival_time_s


@pytest.mark.parametrize("factor", [3, 5])
def test_nest_with_the_basins_depths_matches_one_fine_solve(factor):
    coarse = _grid(3000.0, X0, Y0, 120, 120)
    t_coarse = _solve(coarse, _basin_depth_m(*_centres(coarse)))
    fine_cell = 3000.0 / factor
    fine = _grid(fine_cell, X0, Y0, 120 * factor, 120 * factor)
    t_fine = _solve(fine, _basin_depth_m(*_centres(fine)))
    n = 40 * factor  # a 120 km nest, 150-270 km east, 120-240 km north
    nest = _grid(fine_cell, X0 + 150.0e3, Y0 + 120.0e3, n, n)
    xn, yn = _centres(nest)
    res = solve_nest(coarse, t_coarse, nest, _basin_depth_m(xn, yn), name="test nest")
    ref = t_fine[fine.rowcol(xn, yn)]
    rel = np.abs(res.arrival_time_s - ref) / ref
    print(f"{factor}x nest: largest difference from the fine solve {100 * rel.max():.3f} % "
          f"(mean {100 * rel.mean():.4f} %), {res.summary.boundary_cells} boundary cells, "
          f"{res.summary.boundary_time_min_s:.0f}-{res.summary.boundary_time_max_s:.0f} s")
    assert np.isfinite(res.arrival_time_s).all()
    assert rel.max() < 0.005
    # Continuity across the nest's edge: within one coarse cell of it, the nest and
    # the coarse field (interpolated) differ by less than one coarse cell's travel time.
    near = np.zeros(nest.shape, dtype=bool)
    k = factor
    near[:k, :] = near[-k:, :] = near[:, :k] = near[:, -k:] = True
    jump = np.abs(res.arrival_time_s - sample_arrival_s(coarse, t_coarse, xn, yn))[near]
    cell_time = 3000.0 / np.sqrt(G_M_S2 * _basin_depth_m(xn, yn))[near]
    print(f"largest jump at the edge: {np.max(jump / cell_time):.3f} coarse-cell travel times")
    assert np.all(jump < cell_time)


def test_nest_in_another_crs_matches_one_fine_solve():
    # The same basin in UTM; the nest a lon/lat raster (about 1 km cells), solved on
    # its own Mercator rows: its arrivals match the fine UTM solve within 0.5 %.
    coarse = _grid(3000.0, X0, Y0, 120, 120)
    t_coarse = _solve(coarse, _basin_depth_m(*_centres(coarse)))
    fine = _grid(1000.0, X0, Y0, 360, 360)
    t_fine = _solve(fine, _basin_depth_m(*_centres(fine)))
    to_ll = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
    lon0, lat0 = to_ll.transform(X0 + 160.0e3, Y0 + 130.0e3)
    nest = Grid((90, 110), Affine(0.01, 0, lon0, 0, -0.01, lat0 + 0.9), "EPSG:4326")
    lon, lat = _centres(nest)
    x, y = Transformer.from_crs("EPSG:4326", UTM, always_xy=True).transform(lon, lat)
    res = solve_nest(coarse, t_coarse, nest, _basin_depth_m(x, y), name="lon/lat nest")
    # the fine reference read bilinearly at the nest's cell centres
    ref = sample_arrival_s(fine, t_fine, x, y)
    err = np.abs(res.arrival_time_s - ref) / ref
    print(f"lon/lat nest: largest difference from the fine solve {100 * err.max():.3f} % "
          f"(mean {100 * err.mean():.4f} %)")
    assert np.isfinite(res.arrival_time_s).all()
    assert err.max() < 0.005


# --- a bay the coarse grid cannot see -------------------------------------------------

COAST_X = 80.0e3
BAY = (44.5e3, 47.5e3)  # 3 km wide: 1.5 coarse cells, straddling two of them
BAY_END_X = 110.0e3
LAND_M = 40.0
BAY_DEPTH_M = 10.0


def _elevation_m(x, y):
    """Invented coast: sea shoaling to 20 m at x = 80 km, land beyond, a long narrow bay."""
    sea = -np.maximum(20.0, 2000.0 * (COAST_X - x) / 60.0e3)
    bay = (x >= COAST_X) & (x < BAY_END_X) & (y > BAY[0]) & (y < BAY[1])
    return np.where(x < COAST_X, sea, np.where(bay, -BAY_DEPTH_M, LAND_M))


def test_nest_resolves_a_bay_the_coarse_grid_cannot():
    fine_cell, f = 400.0, 5
    fine = _grid(fine_cell, 0.0, 0.0, 300, 225)
    elev = _elevation_m(*_centres(fine))
    # The coarse raster is the block mean of the fine one, as a coarse DEM is made:
    # the bay's cells average to land (0.75 x -10 m + 0.25 x 40 m > 0).
    coarse = _grid(fine_cell * f, 0.0, 0.0, 60, 45)
    elev_c = elev.reshape(45, f, 60, f).mean(axis=(1, 3))
    source = Source.point_xy(20.3e3, 45.2e3)
    t_coarse = prepare_medium(-elev_c, coarse).travel_time(source).arrival_time_s
    t_fine = prepare_medium(-elev, fine).travel_time(source).arrival_time_s
    nest = _grid(fine_cell, 60.0e3, 30.0e3, 140, 80)  # 60-116 km east, 30-62 km north
    res = solve_nest(coarse, t_coarse, nest, -_elevation_m(*_centres(nest)), name="bay nest")
    head = (BAY_END_X - 1.0e3, 46.0e3)
    ref = float(t_fine[fine.rowcol(*head)])
    nested = float(res.arrival_time_s[nest.rowcol(*head)])
    # Coarse alone: the site is read at the nearest coarse water cell that has a time.
    xc, yc = _centres(coarse)
    d = np.where(np.isfinite(t_coarse), np.hypot(xc - head[0], yc - head[1]), np.inf)
    coarse_alone = float(t_coarse.flat[np.argmin(d)])
    err_nest = abs(nested - ref) / ref
    err_coarse = abs(coarse_alone - ref) / ref
    print(f"bay head: fine {ref / 60:.2f} min, nested {nested / 60:.2f} min ({100 * err_nest:.2f} %), "
          f"coarse alone {coarse_alone / 60:.2f} min ({100 * err_coarse:.1f} %)")
    assert not np.isfinite(t_coarse[coarse.rowcol(*head)])  # the coarse grid has no bay
    assert err_nest < 0.01
    assert err_coarse > 10 * err_nest and err_coarse > 0.05
