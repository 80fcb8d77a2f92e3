"""Tests of ttmap.products.rings (repair of self-touching polygon rings).

Outside reference: GEOS, through shapely 2.x (``is_valid``, ``area``,
``make_valid``), decides what is a valid polygon and measures areas; the
repaired polygons must be valid for GEOS and cover exactly what GEOS's own
general repair covers.
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from numpy.testing import assert_allclose

from ttmap.products.rings import (
    polygonal_parts,
    rings_cut_interior,
    signed_ring_areas,
    split_ring,
    split_touching_rings,
    valid_polygons,
)

#: An exterior ring that passes (2, 2) three times: two lobes (x from 0 to 2 and
#: from 2 to 4) and, inside the second lobe, a loop turning the other way (a hole
#: touching the lobe at (2, 2)).
THREE_TIMES = np.array(
    [[2, 2], [0, 0], [0, 4], [2, 2], [4, 4], [4, 0], [2, 2], [3, 1.5], [3, 2.5], [2, 2]],
    dtype=float,
)


def test_polygonal_parts_repairs_a_bowtie():
    bowtie = shapely.MultiPolygon([shapely.Polygon([(0, 0), (2, 2), (2, 0), (0, 2)])])
    assert not shapely.is_valid(bowtie)
    fixed = polygonal_parts(bowtie)
    assert fixed.geom_type == "MultiPolygon" and shapely.is_valid(fixed)
    assert_allclose(fixed.area, 2.0)  # two triangles of area 1


def test_polygonal_parts_drops_what_has_no_area():
    spike = shapely.Polygon([(0, 0), (1, 0), (2, 0), (1, 0), (0, 0)])  # collapses to a line
    assert polygonal_parts(spike).is_empty


def test_signed_ring_areas_match_geos_with_the_turning_sign():
    rng = np.random.default_rng(7)
    rings, signs = [], []
    for n in (3, 5, 8, 13):
        angles = np.sort(rng.uniform(0.0, 2 * np.pi, n))
        radii = rng.uniform(0.5, 2.0, n)
        ring = np.column_stack([radii * np.cos(angles), radii * np.sin(angles)]) + rng.normal(
            size=2
        )
        ring = np.vstack([ring, ring[:1]])  # a star-shaped simple ring, counter-clockwise
        rings += [ring, ring[::-1]]
        signs += [1.0, -1.0]
    offsets = np.r_[0, np.cumsum([len(r) for r in rings])]
    areas = signed_ring_areas(np.concatenate(rings), offsets)
    geos = [shapely.Polygon(r).area for r in rings]
    assert_allclose(areas, np.array(signs) * geos, rtol=1e-12)


def test_split_ring_separates_lobes_and_an_inverted_hole():
    loops = split_ring(THREE_TIMES)
    assert [loop.tolist() for loop in loops] == [
        [[2, 2], [0, 0], [0, 4], [2, 2]],
        [[2, 2], [4, 4], [4, 0], [2, 2]],
        [[2, 2], [3, 1.5], [3, 2.5], [2, 2]],
    ]
    areas = signed_ring_areas(np.concatenate(loops), np.array([0, 4, 8, 12]))
    assert areas.tolist() == [-4.0, -4.0, 0.5]  # the lobes turn as the ring does, the hole not


def test_split_ring_leaves_a_simple_ring_alone():
    square = np.array([[0, 0], [1, 0], [1, 1], [0, 1], [0, 0]], dtype=float)
    (loop,) = split_ring(square)
    assert loop.tolist() == square.tolist()


def test_split_touching_rings_gives_valid_polygons_of_the_same_area():
    out = split_touching_rings(THREE_TIMES, np.array([0, len(THREE_TIMES)]))
    assert out is not None
    polygons = shapely.from_ragged_array(shapely.GeometryType.POLYGON, out[0], (out[1], out[2]))
    assert len(polygons) == 2 and shapely.is_valid(shapely.MultiPolygon(list(polygons)))
    assert_allclose(sorted(shapely.area(polygons)), [3.5, 4.0])  # one lobe keeps the hole
    reference = polygonal_parts(shapely.Polygon(THREE_TIMES))  # GEOS's general repair
    assert shapely.symmetric_difference(shapely.MultiPolygon(list(polygons)), reference).area == (
        pytest.approx(0.0, abs=1e-12)
    )


def test_a_hole_touching_the_shell_twice_cuts_the_interior():
    shell = [[0, 0], [2, 0], [4, 0], [4, 4], [2, 4], [0, 4], [0, 0]]
    twice = [[2, 0], [3, 2], [2, 4], [1, 2], [2, 0]]  # meets the shell at (2, 0) and (2, 4)
    once = [[2, 0], [3, 2], [2, 3], [1, 2], [2, 0]]  # meets it at (2, 0) only
    for hole, cut in ((twice, True), (once, False)):
        coords = np.array(shell + hole, dtype=float)
        rings = np.array([0, len(shell), len(shell) + len(hole)])
        assert rings_cut_interior(coords, rings, np.array([0, 2])) is cut
        polygon = shapely.Polygon(shell, [hole])
        assert shapely.is_valid(polygon) is not cut  # GEOS agrees


def test_polygons_invalid_for_another_reason_fall_back_to_make_valid():
    bowtie = np.array([[0, 0], [2, 2], [2, 0], [0, 2], [0, 0]], dtype=float)
    assert split_touching_rings(bowtie, np.array([0, 5])) is None
    polygons = valid_polygons(bowtie, np.array([0, 5]), np.array([0, 1]))
    assert shapely.is_valid(polygons).all()
    assert_allclose(shapely.area(polygons).sum(), 2.0)


def test_valid_polygons_keep_valid_ones_in_order_and_repair_the_rest():
    square = [[10, 10], [11, 10], [11, 11], [10, 11], [10, 10]]
    eight = [[0, 0], [1, 0], [1, 1], [2, 1], [2, 2], [1, 2], [1, 1], [0, 1], [0, 0]]
    coords = np.array(square + eight + square, dtype=float)
    coords[len(square) + len(eight) :] += 5.0  # a second, distinct square
    rings = np.array([0, 5, 14, 19])
    polygons = valid_polygons(coords, rings, np.array([0, 1, 2, 3]))
    assert shapely.is_valid(polygons).all()
    assert polygons[0].equals(shapely.Polygon(square))
    assert polygons[1].equals(shapely.Polygon(np.array(square) + 5.0))
    assert sorted(shapely.area(polygons[2:]).tolist()) == [1.0, 1.0]  # the eight's two squares


def test_a_hole_ring_shaped_as_a_figure_eight_becomes_two_touching_holes():
    # A 6 x 6 shell with one hole ring that passes (3, 3) twice: two 2 x 2 square
    # holes that touch at (3, 3), which a valid polygon allows as two rings.
    shell = [[0, 0], [6, 0], [6, 6], [0, 6], [0, 0]]
    hole = [[3, 3], [1, 3], [1, 5], [3, 5], [3, 3], [5, 3], [5, 1], [3, 1], [3, 3]]
    coords = np.array(shell + hole, dtype=float)
    rings = np.array([0, 5, 14])
    raw = shapely.Polygon(shell, [hole])
    assert not shapely.is_valid(raw)
    polygons = valid_polygons(coords, rings, np.array([0, 2]))
    assert shapely.is_valid(shapely.MultiPolygon(list(polygons)))
    assert_allclose(shapely.area(polygons).sum(), 36.0 - 8.0)
    assert shapely.symmetric_difference(
        shapely.MultiPolygon(list(polygons)), polygonal_parts(raw)
    ).area == pytest.approx(0.0, abs=1e-12)
