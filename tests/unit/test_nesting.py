"""Unit tests of ttmap.nesting and of its start, ttmap.solver.march_from_times_s."""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine

from ttmap import Grid, Source, prepare_medium
from ttmap.errors import GridError, InputDataError, SolverError
from ttmap.nesting import check_nests, nest_footprint, sample_arrival_s, solve_nest
from ttmap.solver import march_from_times_s

UTM = "EPSG:32633"


def _grid(cell_m, x0, y0, nx, ny, crs=UTM):
    return Grid((ny, nx), Affine(cell_m, 0, x0, 0, -cell_m, y0 + ny * cell_m), crs)


COARSE = _grid(2000.0, 400.0e3, 4000.0e3, 50, 50)


def _coarse_time():
    return prepare_medium(np.full(COARSE.shape, 3000.0), COARSE).travel_time(
        Source.point_xy(420.0e3, 4050.0e3)).arrival_time_s


# --- march_from_times_s ------------------------------------------------------------------


def _ring(n, k=2):
    m = np.zeros((n, n), dtype=bool)
    m[:k] = m[-k:] = True
    m[:, :k] = m[:, -k:] = True
    return np.nonzero(m)


def test_march_from_times_keeps_the_given_times_and_converges():
    # Plane wave from the west (T = x / c) given on a two-cell ring: inside it the
    # march is exact for a plane wave (first- and second-order steps both are).
    n, c = 40, 2.0
    rows, cols = _ring(n)
    t_given = 100.0 + (cols + 0.5) / c
    t = march_from_times_s(np.full((n, n), c), barrier=np.zeros((n, n), bool),
                           fixed_cells=(rows, cols), fixed_time_s=t_given, spacing_m=(1.0, 1.0))
    np.testing.assert_allclose(t[rows, cols], t_given, rtol=0, atol=1e-9)
    exact = 100.0 + (np.arange(n) + 0.5)[None, :] / c
    np.testing.assert_allclose(t, np.broadcast_to(exact, (n, n)), rtol=0, atol=1e-9)


def test_march_from_times_respects_land_and_max_time():
    n = 20
    rows, cols = _ring(n)
    wall = np.zeros((n, n), bool)
    wall[5:15, 5:15] = True
    t = march_from_times_s(np.full((n, n), 1.0), barrier=wall, fixed_cells=(rows, cols),
                           fixed_time_s=np.full(rows.size, 10.0), spacing_m=(1.0, 1.0), max_time_s=12.5)
    assert np.isnan(t[wall]).all()
    assert np.isnan(t[4, 10])  # 3 cells in: later than 12.5 s
    assert t[2, 10] == pytest.approx(11.0)


def test_march_from_times_refuses_bad_input():
    n = 10
    rows, cols = np.arange(n), np.full(n, 5)  # one column: one cell thick
    speed, wall = np.ones((n, n)), np.zeros((n, n), bool)
    with pytest.raises(SolverError, match="two cells thick"):
        march_from_times_s(speed, barrier=wall, fixed_cells=(rows, cols),
                           fixed_time_s=np.zeros(rows.size), spacing_m=(1.0, 1.0))
    rows, cols = _ring(n)
    with pytest.raises(SolverError, match="finite and >= 0"):
        march_from_times_s(speed, barrier=wall, fixed_cells=(rows, cols),
                           fixed_time_s=np.full(rows.size, -1.0), spacing_m=(1.0, 1.0))
    with pytest.raises(SolverError, match="one length"):
        march_from_times_s(speed, barrier=wall, fixed_cells=(rows, cols),
                           fixed_time_s=np.zeros(3), spacing_m=(1.0, 1.0))
    with pytest.raises(SolverError, match="outside"):
        march_from_times_s(speed, barrier=wall, fixed_cells=(rows + 1, cols),
                           fixed_time_s=np.zeros(rows.size), spacing_m=(1.0, 1.0))


# --- sampling ----------------------------------------------------------------------------


def test_sample_arrival_is_bilinear_over_reached_cells():
    g = _grid(1.0, 0.0, 0.0, 3, 3)
    t = np.array([[0.0, 1.0, 2.0], [3.0, 4.0, 5.0], [6.0, np.nan, 8.0]])
    x = np.array([1.0, 1.5, 0.5, 1.75, 9.0, 1.5])
    y = np.array([2.0, 1.5, 2.5, 0.75, 1.0, 0.6])
    out = sample_arrival_s(g, t, x, y)
    assert out[0] == pytest.approx(2.0)  # between four reached centres
    assert out[1] == pytest.approx(4.0)  # on a centre
    assert out[2] == pytest.approx(0.0)
    # near the NaN corner: weights renormalised over the reached ones
    w = {4.0: 0.25 * 0.75, 5.0: 0.25 * 0.25, 8.0: 0.75 * 0.25}  # the NaN corner weighs 0.5625
    assert out[3] == pytest.approx(sum(k * v for k, v in w.items()) / sum(w.values()))
    assert np.isnan(out[4])  # outside the grid
    assert np.isnan(out[5])  # reached corners weigh 0.1 < 1/4


# --- refusals ----------------------------------------------------------------------------


def test_nest_outside_the_basin_is_refused():
    nest = _grid(500.0, 480.0e3, 4050.0e3, 60, 40)  # reaches 510 km east, basin ends at 500 km
    with pytest.raises(GridError, match="nest 'harbour' reaches outside the basin grid.*crop"):
        solve_nest(COARSE, _coarse_time(), nest, np.full(nest.shape, 50.0), name="harbour")


def test_overlapping_nests_are_refused_touching_ones_accepted():
    a = _grid(500.0, 440.0e3, 4040.0e3, 40, 40)
    b = _grid(500.0, 455.0e3, 4050.0e3, 40, 40)
    touching = _grid(500.0, 460.0e3, 4040.0e3, 40, 40)
    with pytest.raises(GridError, match="nest 'a' overlaps nest 'b'.*must not overlap"):
        check_nests(COARSE, {"a": a, "b": b})
    check_nests(COARSE, {"a": a, "touching": touching})
    with pytest.raises(GridError, match="overlaps nest 'b'"):
        solve_nest(COARSE, _coarse_time(), b, np.full(b.shape, 50.0), name="b", others={"a": a})


def test_overlap_is_found_across_crs():
    ll = Grid((40, 40), Affine(0.005, 0, 0, 0, -0.005, 1), "EPSG:4326")
    fp = nest_footprint(ll, COARSE)
    x0, y0, x1, y1 = fp.bounds
    inside = _grid(500.0, 0.5 * (x0 + x1), 0.5 * (y0 + y1), 4, 4)
    coarse = _grid(2000.0, x0 - 20e3, y0 - 20e3, 40, 40)
    with pytest.raises(GridError, match="overlaps"):
        check_nests(coarse, {"ll": ll, "utm": inside})


def test_nest_without_water_is_refused():
    nest = _grid(500.0, 440.0e3, 4040.0e3, 40, 40)
    with pytest.raises(InputDataError, match="nest 'dry' has no water"):
        solve_nest(COARSE, _coarse_time(), nest, np.full(nest.shape, -5.0), name="dry")


def test_nest_whose_edge_the_basin_does_not_reach_is_refused():
    nest = _grid(500.0, 440.0e3, 4040.0e3, 40, 40)
    t = np.full(COARSE.shape, np.nan)
    with pytest.raises(InputDataError, match="no water cell on its edge has a basin arrival"):
        solve_nest(COARSE, t, nest, np.full(nest.shape, 50.0), name="far")


def test_nest_around_the_source_is_refused():
    nest = _grid(500.0, 410.0e3, 4040.0e3, 40, 40)  # holds the source at (420, 4050) km
    with pytest.raises(InputDataError, match="the source lies in the nest"):
        solve_nest(COARSE, _coarse_time(), nest, np.full(nest.shape, 3000.0), name="src")


def test_shape_mismatch_is_refused():
    nest = _grid(500.0, 440.0e3, 4040.0e3, 40, 40)
    with pytest.raises(InputDataError, match="depth array shape"):
        solve_nest(COARSE, _coarse_time(), nest, np.ones((3, 3)), name="n")
    with pytest.raises(InputDataError, match="coarse arrival array shape"):
        solve_nest(COARSE, np.ones((3, 3)), nest, np.ones(nest.shape), name="n")


def test_nest_summary_and_land():
    nest = _grid(500.0, 440.0e3, 4040.0e3, 40, 40)
    depth = np.full(nest.shape, 3000.0)
    depth[10:20, 10:20] = -3.0
    res = solve_nest(COARSE, _coarse_time(), nest, depth, name="island", max_time_s=1e6)
    s = res.summary
    assert np.isnan(res.arrival_time_s[10:20, 10:20]).all()
    assert s.water_cells == 1600 - 100 and s.cells_reached == s.water_cells
    assert s.boundary_cells == 40 * 40 - 36 * 36 and s.boundary_cells_without_time == 0
    assert s.boundary_time_min_s < s.boundary_time_max_s
    assert s.as_dict()["name"] == "island"
    assert np.allclose(res.arrival_time_min, res.arrival_time_s / 60.0, equal_nan=True)
