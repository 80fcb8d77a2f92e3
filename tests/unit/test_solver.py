"""Unit tests of ttmap.solver.fast_march_s: input checks, output conversion, walls.

Analytic reference: a plane front aligned with the grid in a uniform medium has
T = s / c exactly for the fast-marching update (docs/references.md §8,
"plane waves aligned with the grid are exact" [S: Stanford SEP reports]).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from ttmap.errors import SolverError
from ttmap.solver import fast_march_s

ROWS, COLS = 12, 40


def _plane_start(
    first: int, last: int, dx: float, speed: float, cols: int = COLS, rows: int = ROWS
):
    """Start region: columns first..last. Band times: exact signed distance / speed."""
    inside = np.zeros((rows, cols), dtype=bool)
    inside[:, first : last + 1] = True
    band_r, band_c, band_t = [], [], []
    for c, sign in ((first, -1.0), (last, -1.0), (first - 1, 1.0), (last + 1, 1.0)):
        if 0 <= c < cols:
            band_r += list(range(rows))
            band_c += [c % cols] * rows
            band_t += [sign * 0.5 * dx / speed] * rows
    return inside, (np.array(band_r), np.array(band_c)), np.array(band_t)


def _solve(speed, barrier=None, inside=None, band=None, spacing=(1.0, 1.0), **kw):
    if inside is None:
        inside, cells, times = _plane_start(4, 6, spacing[1], 2.0)
        band = (cells, times)
    if barrier is None:
        barrier = np.zeros(speed.shape, dtype=bool)
    return fast_march_s(
        speed,
        barrier=barrier,
        inside=inside,
        band_cells=band[0],
        band_time_s=band[1],
        spacing_m=spacing,
        **kw,
    )


def test_grid_aligned_plane_front_is_exact():
    dx, c = 1500.0, 200.0
    inside, cells, times = _plane_start(4, 6, dx, c)
    speed = np.full((ROWS, COLS), c)
    t = fast_march_s(
        speed,
        barrier=np.zeros_like(inside),
        inside=inside,
        band_cells=cells,
        band_time_s=times,
        spacing_m=(3000.0, dx),
    )
    assert type(t) is np.ndarray and t.dtype == np.float64
    assert np.isnan(t[inside]).all()
    x = (np.arange(COLS) + 0.5) * dx
    expected = np.where(x > 7 * dx, x - 7 * dx, 4 * dx - x) / c  # from the region's two edges
    for r in range(ROWS):
        assert_allclose(t[r, 7:], expected[7:], rtol=1e-12)
        assert_allclose(t[r, :4], expected[:4], rtol=1e-12)


def test_barrier_and_unreachable_cells_are_nan_not_zero():
    speed = np.full((ROWS, COLS), 2.0)
    barrier = np.zeros((ROWS, COLS), dtype=bool)
    barrier[:, 20] = True  # a full wall: east of it is unreachable
    speed[barrier] = np.nan  # a speed on the barrier is never looked at
    t = _solve(speed, barrier)
    assert not isinstance(t, np.ma.MaskedArray)
    assert np.isnan(t[:, 20]).all()
    assert np.isnan(t[:, 21:]).all()  # masked by scikit-fmm: must not come back as 0
    assert np.isfinite(t[:, 7:20]).all() and (t[:, 7:20] > 0).all()


def test_wall_respected_with_and_without_periodic_x():
    c = 2.0
    speed = np.full((ROWS, COLS), c)
    barrier = np.zeros((ROWS, COLS), dtype=bool)
    barrier[:, 20] = True
    t_open = _solve(speed, barrier)
    t_wrap = _solve(speed, barrier, periodic_x=True)
    assert np.isnan(t_open[:, 21:]).all()
    # With wrapping, the east side is reached westward across the seam: the distance
    # from the region's west edge (x = 4) to column j is 4 + COLS - (j + 0.5).
    j = np.arange(21, COLS)
    assert_allclose(t_wrap[0, 21:], (4 + COLS - (j + 0.5)) / c, rtol=1e-12)
    # ... and the wall still blocks the direct way east: column 21 is reached last.
    assert t_wrap[0, 21] > t_wrap[0, 19]


def test_max_time_cuts_later_cells():
    speed = np.full((ROWS, COLS), 2.0)
    full = _solve(speed)
    cut = _solve(speed, max_time_s=5.0)
    late = ~(full <= 5.0)
    assert np.isnan(cut[late]).all()
    assert_array_equal(cut[~late], full[~late])
    assert (full > 5.0).any()


def test_numpy_scalar_spacing_is_accepted():
    speed = np.full((ROWS, COLS), 2.0)
    a = _solve(speed, spacing=(1.0, 1.0))
    b = _solve(speed, spacing=(np.float64(1.0), np.float32(1.0)))
    assert_array_equal(a, b)


def test_inputs_are_not_modified():
    speed = np.full((ROWS, COLS), 2.0)
    barrier = np.zeros((ROWS, COLS), dtype=bool)
    barrier[3, 30] = True
    inside, cells, times = _plane_start(4, 6, 1.0, 2.0)
    copies = [a.copy() for a in (speed, barrier, inside, cells[0], cells[1], times)]
    fast_march_s(
        speed,
        barrier=barrier,
        inside=inside,
        band_cells=cells,
        band_time_s=times,
        spacing_m=(1.0, 1.0),
    )
    for a, b in zip((speed, barrier, inside, cells[0], cells[1], times), copies):
        assert_array_equal(a, b)


def test_borrowed_speed_gives_the_same_times_and_is_restored():
    rng = np.random.default_rng(3)
    speed = rng.uniform(1.0, 3.0, (ROWS, COLS))
    barrier = np.zeros((ROWS, COLS), dtype=bool)
    barrier[2:9, 20] = True
    speed[barrier] = 1.0
    before = speed.copy()
    copied = _solve(speed, barrier)
    assert_array_equal(speed, before)
    borrowed = _solve(speed, barrier, borrow_speed=True)
    assert_array_equal(borrowed, copied)
    assert_array_equal(speed, before)  # the frozen cells' speeds were put back


def test_borrowed_speed_is_restored_when_scikit_fmm_fails(monkeypatch):
    import skfmm

    speed = np.full((ROWS, COLS), 3.0)  # the band times of _solve are for 2.0: cells change
    before = speed.copy()
    seen = {}

    def failing(phi, sp, **kw):
        seen["changed"] = not np.array_equal(sp, before)
        raise ValueError("boom")

    monkeypatch.setattr(skfmm, "travel_time", failing)
    with pytest.raises(SolverError, match="scikit-fmm failed: boom"):
        _solve(speed, borrow_speed=True)
    assert seen["changed"]  # the array was lent, not copied ...
    assert_array_equal(speed, before)  # ... and restored


def test_barrier_speeds_are_never_passed_on_as_nan():
    # NaN on the barrier is allowed: such an array is copied with 1.0 there, even when
    # it is lent, and left as it was.
    speed = np.full((ROWS, COLS), 2.0)
    barrier = np.zeros((ROWS, COLS), dtype=bool)
    barrier[:, 30] = True
    speed[barrier] = np.nan
    before = speed.copy()
    t = _solve(speed, barrier, borrow_speed=True)
    assert_array_equal(speed, before)
    assert np.isfinite(t[:, 7:30]).all()


# ------------------------------------------------------------------ errors


@pytest.mark.parametrize("bad", [np.nan, np.inf, 0.0, -3.0])
def test_bad_speed_refused(bad):
    speed = np.full((ROWS, COLS), 2.0)
    speed[1, 30] = bad
    with pytest.raises(
        SolverError,
        match=r"1 water cells have a speed that is NaN, infinite or <= 0 "
        rf"\(first at row 1, col 30: {bad!r} m/s\)",
    ):
        _solve(speed)


@pytest.mark.parametrize("spacing", [(0.0, 1.0), (1.0, -1.0), (np.nan, 1.0), (1.0, np.inf)])
def test_non_positive_spacing_refused(spacing):
    with pytest.raises(SolverError, match=r"grid spacing \(.*\) m must be positive and finite"):
        _solve(np.full((ROWS, COLS), 2.0), spacing=spacing)


def test_shape_mismatch_refused():
    inside, cells, times = _plane_start(4, 6, 1.0, 2.0)
    with pytest.raises(
        SolverError, match=r"speed \(12, 39\), barrier \(12, 40\) and inside \(12, 40\) must be"
    ):
        fast_march_s(
            np.ones((ROWS, COLS - 1)),
            barrier=np.zeros((ROWS, COLS), bool),
            inside=inside,
            band_cells=cells,
            band_time_s=times,
            spacing_m=(1.0, 1.0),
        )


def test_band_length_mismatch_refused():
    inside, cells, times = _plane_start(4, 6, 1.0, 2.0)
    with pytest.raises(
        SolverError, match="band cells and band times must be 1-D arrays of one length"
    ):
        fast_march_s(
            np.ones((ROWS, COLS)),
            barrier=np.zeros((ROWS, COLS), bool),
            inside=inside,
            band_cells=cells,
            band_time_s=times[:-1],
            spacing_m=(1.0, 1.0),
        )


def test_empty_start_region_refused():
    none = (np.array([], int), np.array([], int))
    with pytest.raises(
        SolverError, match="the start region is empty; it must hold at least one water cell"
    ):
        _solve(
            np.ones((ROWS, COLS)), inside=np.zeros((ROWS, COLS), bool), band=(none, np.array([]))
        )


def test_start_region_filling_its_water_body_gives_nan():
    none = (np.array([], int), np.array([], int))
    t = _solve(np.ones((ROWS, COLS)), inside=np.ones((ROWS, COLS), bool), band=(none, np.array([])))
    assert t.shape == (ROWS, COLS) and np.isnan(t).all()
    # A region filling a walled pond: nothing outside is reachable.
    barrier = np.zeros((ROWS, COLS), bool)
    barrier[2:7, 2:7] = True
    barrier[3:6, 3:6] = False
    inside = np.zeros((ROWS, COLS), bool)
    inside[3:6, 3:6] = True
    t = _solve(np.ones((ROWS, COLS)), barrier, inside=inside, band=(none, np.array([])))
    assert np.isnan(t).all()
    # Touching only across the seam still marches when the columns wrap.
    barrier = np.zeros((ROWS, COLS), bool)
    barrier[:, 1] = True
    barrier[:, COLS - 2] = True
    inside = np.zeros((ROWS, COLS), bool)
    inside[:, 0] = True
    band = ((np.arange(ROWS), np.full(ROWS, COLS - 1)), np.full(ROWS, 0.5))
    band = (
        (
            np.concatenate([band[0][0], np.arange(ROWS)]),
            np.concatenate([band[0][1], np.zeros(ROWS, int)]),
        ),
        np.concatenate([band[1], np.full(ROWS, -0.5)]),
    )
    assert np.isnan(_solve(np.ones((ROWS, COLS)), barrier, inside=inside, band=band)).all()
    t = _solve(np.ones((ROWS, COLS)), barrier, inside=inside, band=band, periodic_x=True)
    assert_allclose(t[:, COLS - 1], 0.5, rtol=1e-12)


def test_missing_band_time_refused():
    inside, cells, times = _plane_start(4, 6, 1.0, 2.0)
    keep = cells[1] != 7  # drop the outer band on the east side
    with pytest.raises(SolverError, match="a cell of the start band has no start time"):
        _solve(
            np.ones((ROWS, COLS)),
            inside=inside,
            band=((cells[0][keep], cells[1][keep]), times[keep]),
        )


@pytest.mark.parametrize("bad", [0.0, -5.0, np.nan, np.inf])
def test_bad_max_time_refused(bad):
    with pytest.raises(SolverError, match=rf"maximum time {bad!r} s must be a positive number"):
        _solve(np.ones((ROWS, COLS)), max_time_s=bad)
