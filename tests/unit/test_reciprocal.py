"""Unit tests of ttmap.reciprocal: the reduction and label propagation."""

from __future__ import annotations

import numpy as np
import pytest

from ttmap.errors import InputDataError
from ttmap.reciprocal import ScenarioStarts, envelope_one_solve, propagate_labels, reduce_over_starts


def test_reduction_is_min_of_start_time_plus_field_and_skips_empty_and_nan():
    starts = ScenarioStarts(
        (2, 3),
        np.array([0, 1, 4, 5, 2], dtype=np.int64),
        np.array([0.0, 0.0, 10.0, 1.0, 0.0]),
        np.array([0, 2, 2, 4, 5], dtype=np.int64),
    )
    field = np.array([[5.0, 3.0, np.nan], [9.0, 1.0, 2.0]])
    got = reduce_over_starts(np.stack([field, field + 1]), starts)
    np.testing.assert_array_equal(got[0], [3.0, np.nan, 3.0, np.nan])
    np.testing.assert_array_equal(got[1], [4.0, np.nan, 4.0, np.nan])


def test_reduction_shape_mismatch():
    starts = ScenarioStarts((2, 2), np.array([0]), np.array([0.0]), np.array([0, 1]))
    with pytest.raises(InputDataError, match="do not match"):
        reduce_over_starts(np.zeros((3, 3)), starts)


def test_labels_follow_upwind_neighbours_and_ties_take_lower_index():
    # Two fronts from the left and right edges meet in the middle column.
    t = np.tile(np.array([0.0, 1.0, 2.0, 3.0, 2.0, 1.0, 0.0]), (3, 1))
    seeds = np.full(t.shape, -1)
    seeds[:, 0] = 4
    seeds[:, -1] = 1
    lab, tie, unl = propagate_labels(t, seeds, tie_tolerance_s=0.01)
    assert unl == 0
    np.testing.assert_array_equal(lab[0], [4, 4, 4, 1, 1, 1, 1])  # tie at column 3 -> 1
    assert tie[:, 3].all() and tie.sum() == 3  # column 3: equal left and right: lower label
    # A diagonal tie: up and left neighbours equal with different labels -> lower label, tie mask.
    t2 = np.array([[0.0, 1.0], [1.0, 2.0]])
    s2 = np.array([[-1, 3], [0, -1]])
    lab2, tie2, _ = propagate_labels(np.where(s2 >= 0, t2, t2), np.where(t2 == 0, -1, s2), tie_tolerance_s=0.01)
    assert lab2[1, 1] == 0 and tie2[1, 1]


def test_offsets_refused():
    with pytest.raises(InputDataError, match="offsets are not supported"):
        envelope_one_solve(object(), [object()], time_offsets_s=[60.0])  # type: ignore[arg-type]


def test_samples_are_bilinear_reads_and_lower_the_cell_minimum():
    # Field linear in the column (T = 10 * col): bilinear interpolation is exact, so a sample
    # at col 0.5 reads 5 s, below the cell minimum (cell 1 at 10 s); NaN corners drop a sample.
    field = np.tile(10.0 * np.arange(3), (2, 1))
    idx = np.array([[0, 1, 3, 4], [1, 2, 4, 5]], dtype=np.int64)
    w = np.array([[0.25, 0.25, 0.25, 0.25], [0.5, 0.0, 0.5, 0.0]])
    starts = ScenarioStarts((2, 3), np.array([1, 2], np.int64), np.zeros(2), np.array([0, 1, 2]),
                            idx, w, np.array([0, 1, 2], np.int64))
    np.testing.assert_allclose(reduce_over_starts(field, starts), [5.0, 10.0])
    field[0, 2] = np.nan  # scenario 1's cell is unreached; its sample has a NaN corner
    got = reduce_over_starts(field, starts)
    assert got[0] == 5.0 and np.isnan(got[1])
    both = ScenarioStarts.concatenate([starts, starts])
    assert both.n_scenarios == 4 and both.has_samples
    np.testing.assert_array_equal(both.sample_offsets, [0, 1, 2, 3, 4])
    np.testing.assert_array_equal(both.offsets, [0, 1, 2, 3, 4])


def test_labels_follow_oblique_fronts_not_grid_axes():
    # Two plane fronts on a unit grid, T = min(Ta, Tb): Ta = x moving east (label 0) and Tb with
    # the normal (0.8, 0.6) (label 1); both are exact solutions of |grad T| = 1. Where Tb < Ta
    # the time's left neighbour is always the smaller one, so a label following the smaller
    # neighbour would run west along each row into the region of label 0; carried along the
    # rays, labels equal the arg-min of the two times off the meeting line x = 3 y - 50.
    y, x = np.mgrid[0:60, 0:80].astype(float)
    ta, tb = x, 0.8 * x + 0.6 * y - 10.0
    t = np.minimum(ta, tb)
    argmin = np.where(tb < ta, 1, 0)
    seeds = np.where(t < 1.0, argmin, -1)
    t = t - t.min()
    lab, tie, unl = propagate_labels(t, seeds, tie_tolerance_s=0.01)
    assert unl == 0
    off_line = np.abs(x - (3.0 * y - 50.0)) / np.hypot(1.0, 3.0) > 2.0
    assert np.mean(lab[off_line] == argmin[off_line]) >= 0.99
    assert (lab[off_line & (argmin == 1)] == 1).mean() >= 0.99
