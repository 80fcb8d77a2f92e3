"""Unit tests of ttmap.connectivity: water bodies and diagonal-only joins."""

from __future__ import annotations

import doctest

import numpy as np
from numpy.testing import assert_array_equal

from ttmap import connectivity
from ttmap.connectivity import label_water, open_diagonal_joins


def _w(text: str) -> np.ndarray:
    """Water mask from rows of '~' (water) and '#' (land)."""
    return np.array([[ch == "~" for ch in line] for line in text.split()], dtype=bool)


def test_module_doctests_pass():
    failed, attempted = doctest.testmod(connectivity)
    assert attempted > 0 and failed == 0


# ------------------------------------------------------------------ label_water


def test_label_water_counts_four_connected_bodies():
    water = _w(
        """
        ~~#~~
        ~~#~~
        ###~#
        ~#~~#
        """
    )
    labels, sizes = label_water(water)
    assert labels.dtype == np.uint16  # the smallest type for the count
    assert (labels[~water] == 0).all() and (labels[water] > 0).all()
    assert sorted(np.unique(labels).tolist()) == [0, 1, 2, 3]  # consecutive
    assert labels[0, 0] == labels[1, 1]
    assert labels[0, 3] == labels[3, 2]  # joined down column 3
    assert labels[3, 0] not in (labels[0, 0], labels[0, 3])  # a corner touch is no join
    assert sizes.tolist() == [int((~water).sum()), 4, 7, 1]
    assert sizes.sum() == water.size


def test_label_water_periodic_joins_first_and_last_columns():
    water = _w(
        """
        ~#~
        ##~
        ~##
        """
    )
    _, sizes = label_water(water)
    assert len(sizes) == 4  # land + three bodies
    labels_p, sizes_p = label_water(water, periodic_x=True)
    assert labels_p[0, 0] == labels_p[0, 2] == labels_p[1, 2]
    assert labels_p[2, 0] != labels_p[0, 0]  # (2,2) is land: no join for row 2
    assert sizes_p.tolist() == [5, 3, 1]


def test_label_water_periodic_chain_across_the_seam():
    # One body reaches the seam on two rows; another only through the seam.
    water = _w(
        """
        ~##~~
        ~####
        ~~##~
        """
    )
    labels, _ = label_water(water, periodic_x=True)
    assert len(np.unique(labels[water])) == 1


def test_label_water_all_land():
    labels, sizes = label_water(np.zeros((3, 4), dtype=bool))
    assert (labels == 0).all() and sizes.tolist() == [12]


def test_label_water_does_not_modify_input():
    water = _w("~#~ ~#~")
    before = water.copy()
    label_water(water, periodic_x=True)
    assert_array_equal(water, before)


# ------------------------------------------------------------------ open_diagonal_joins


def test_open_diagonal_joins_picks_the_lower_land_cell():
    water = _w(
        """
        ~~#
        ~#~
        ##~
        """
    )
    # The two land cells of the block (0,1)-(1,2) join are (0,2) and (1,1).
    ground = np.zeros(water.shape)
    ground[0, 2] = -30.0  # high land (depth -30 m)
    ground[1, 1] = -2.0  # low land
    out, opened = open_diagonal_joins(water, ground=ground)
    assert opened == [(1, 1)]
    assert out[1, 1] and out.sum() == water.sum() + 1
    ground[0, 2], ground[1, 1] = -2.0, -30.0
    assert open_diagonal_joins(water, ground=ground)[1] == [(0, 2)]


def test_open_diagonal_joins_nan_ground_counts_lowest():
    water = _w("~# #~")
    ground = np.array([[10.0, np.nan], [-500.0, 10.0]])
    assert open_diagonal_joins(water, ground=ground)[1] == [(1, 0)]


def test_open_diagonal_joins_anti_diagonal_and_input_unchanged():
    water = _w("#~ ~#")
    before = water.copy()
    out, opened = open_diagonal_joins(water)
    assert opened == [(0, 0)]  # equal scores: the first land cell of the block
    assert_array_equal(water, before)
    assert out is not water
    assert label_water(out)[1].size == 2  # one body now


def test_open_diagonal_joins_skips_bodies_already_joined():
    # The corner touch at (1,1)-(2,2) is inside one body already joined round the side.
    water = _w(
        """
        ~~~~
        ~~#~
        ~#~~
        ~~~~
        """
    )
    out, opened = open_diagonal_joins(water)
    assert opened == []
    assert_array_equal(out, water)


def test_open_diagonal_joins_once_per_pair_of_bodies():
    # Two bodies (top row, bottom rows) touching at two separate corners: one opening.
    water = _w(
        """
        ~~~~~~
        #~##~#
        ##~~##
        ~~~~~~
        """
    )
    assert label_water(water)[1].size == 3
    out, opened = open_diagonal_joins(water)
    assert opened == [(1, 2)]  # the first block in row-major order; equal scores
    assert label_water(out)[1].size == 2


def test_open_diagonal_joins_chain_of_bodies():
    # A staircase of single cells: every step is its own join.
    water = np.eye(5, dtype=bool)
    out, opened = open_diagonal_joins(water)
    assert len(opened) == 4
    assert label_water(out)[1].size == 2


def test_open_diagonal_joins_across_the_seam():
    water = _w(
        """
        ~##
        ##~
        """
    )
    assert open_diagonal_joins(water)[1] == []
    out, opened = open_diagonal_joins(water, periodic_x=True)
    assert len(opened) == 1
    assert label_water(out, periodic_x=True)[1].size == 2
    r, c = opened[0]
    assert (r, c) in [(0, 2), (1, 0)]  # the land cells of the block spanning the seam


# ------------------------------------------------------------------ connect_water


def test_connect_water_equals_opening_then_labelling():
    rng = np.random.default_rng(7)
    for _ in range(200):
        rows, cols = (int(v) for v in rng.integers(2, 25, 2))
        water = rng.random((rows, cols)) < rng.uniform(0.3, 0.8)
        ground = rng.normal(size=(rows, cols))
        ground[rng.random((rows, cols)) < 0.1] = np.nan
        for periodic in (False, True):
            opened_water, opened = open_diagonal_joins(water, ground=ground, periodic_x=periodic)
            labels, sizes = label_water(opened_water, periodic_x=periodic)
            bodies = connectivity.connect_water(water, ground=ground, periodic_x=periodic)
            assert bodies.opened == opened
            assert_array_equal(bodies.water, opened_water)
            assert bodies.labels.dtype == np.uint16
            # The same bodies (numbered alike, except that on wrapping grids a body whose
            # first cell is an opened one may take another number).
            pairs = set(zip(labels.ravel().tolist(), bodies.labels.ravel().tolist()))
            assert len(pairs) == len({a for a, _ in pairs}) == len({b for _, b in pairs})
            if not periodic:
                assert_array_equal(bodies.labels, labels)
            assert sorted(bodies.sizes.tolist()) == sorted(sizes.tolist())


def test_connect_water_reports_the_shallower_depth_of_each_pair():
    water = _w(
        """
        ~~#~~
        ~#~~~
        """
    )
    depth = np.array([[40.0, 40.0, -3.0, 9.0, 9.0], [40.0, -1.0, 12.0, 9.0, 9.0]])
    bodies = connectivity.connect_water(water, ground=depth)
    assert bodies.opened == [(1, 1)]  # the lower land cell of the block
    assert bodies.opened_ground.tolist() == [12.0]  # min(40 at (0, 1), 12 at (1, 2))
    assert bodies.sizes.tolist() == [1, 9]
    none = connectivity.connect_water(water, ground=depth, open_diagonal=False)
    assert none.opened == [] and none.sizes.tolist() == [2, 3, 5]
    assert_array_equal(none.water, water)


def test_labels_widen_to_int32_beyond_65535_bodies():
    water = np.zeros((600, 600), dtype=bool)
    water[::2, ::2] = True  # 90 000 single-cell bodies, no diagonal touches
    labels, sizes = label_water(water)
    assert labels.dtype == np.int32 and int(labels.max()) == 90_000
    assert sizes.size == 90_001 and (sizes[1:] == 1).all()
