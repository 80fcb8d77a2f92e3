"""Tests of ttmap.products.isochrones.

Reference geometry: for a constant speed c the eikonal equation
|grad t| = 1/c with t = 0 at a point has the exact solution t = r / c
(distance over speed), so the isochrone at time m minutes is the circle of
radius m * 60 * c and the band between two levels is an annulus of area
pi (r2^2 - r1^2). The long-wave speed c = sqrt(g h) with standard gravity
g = 9.80665 m/s^2 (3rd CGPM, 1901) and h = 4000 m.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
import shapely
from affine import Affine
from numpy.testing import assert_allclose

from ttmap.errors import InputDataError
from ttmap.products import isochrones as iso
from ttmap.products.isochrones import (
    IsochroneBand,
    IsochroneLine,
    default_levels_min,
    format_minutes_label,
    isochrone_bands,
    isochrone_lines,
    isochrone_lines_and_bands,
    levels_from_interval,
)
from ttmap.products.rings import polygonal_parts

SPEED_M_S = math.sqrt(9.80665 * 4000.0)
CELL_M = 1000.0
N = 201
#: North-up 1 km grid, 201 x 201 cells; cell centres run from -100 km to +100 km.
NORTH_UP = Affine(CELL_M, 0.0, -100_500.0, 0.0, -CELL_M, 100_500.0)
#: Source placed off the grid centre so that a flipped or shifted placement shows.
SOURCE_XY = (7_300.0, -4_600.0)
LEVELS_MIN = np.arange(1.0, 7.0 + 0.5, 1.0)  # radii 11.9 ... 83.2 km: inside the grid


def cone_field(transform: Affine, shape=(N, N), source_xy=SOURCE_XY):
    """Exact arrival time (minutes) t = r / c at every cell centre of the grid."""
    rows, cols = np.indices(shape, dtype=np.float64)
    x, y = transform @ (cols + 0.5, rows + 0.5)
    return np.hypot(x - source_xy[0], y - source_xy[1]) / SPEED_M_S / 60.0


def radius_m(level_min: float) -> float:
    return level_min * 60.0 * SPEED_M_S


# --- levels and labels ------------------------------------------------------


@pytest.mark.parametrize(
    ("minutes", "label"),
    [
        (0, "0:00"),
        (10, "0:10"),
        (90, "1:30"),
        (720, "12:00"),
        (1505, "25:05"),
        (59.4, "0:59"),
        (59.5, "1:00"),
        (89.6, "1:30"),
        (-10, "-0:10"),
    ],
)
def test_format_minutes_label(minutes, label):
    assert format_minutes_label(minutes) == label


def test_format_minutes_label_rejects_nan():
    with pytest.raises(InputDataError, match="h:mm"):
        format_minutes_label(float("nan"))


def test_default_levels_steps():
    levels = default_levels_min(24 * 60)
    assert_allclose(levels[:12], np.arange(10, 121, 10))
    assert_allclose(np.diff(levels[11:32]), 30.0)  # 120 -> 720 every 30 min
    assert levels[31] == 720.0
    assert_allclose(np.diff(levels[31:]), 60.0)
    assert levels[-1] == 1440.0
    assert levels.size == 12 + 20 + 12


def test_default_levels_upper_bound_inclusive_and_positive():
    assert default_levels_min(120).tolist()[-1] == 120.0
    assert default_levels_min(119.9).tolist()[-1] == 110.0
    assert default_levels_min(775).tolist()[-2:] == [690.0, 720.0]
    assert np.all(default_levels_min(5000) > 0)


def test_default_levels_small_extent_gets_fine_steps():
    assert default_levels_min(8).tolist() == [1.0, 2, 3, 4, 5, 6, 7, 8]
    assert default_levels_min(19).tolist() == [2.0, 4, 6, 8, 10, 12, 14, 16, 18]
    assert default_levels_min(29).tolist() == [5.0, 10, 15, 20, 25]
    assert default_levels_min(30).tolist() == [10.0, 20, 30]
    assert default_levels_min(0.5).size == 0


def test_default_levels_rejects_non_finite():
    with pytest.raises(InputDataError, match="finite"):
        default_levels_min(float("inf"))


def test_levels_from_interval():
    assert levels_from_interval(15, 60).tolist() == [15.0, 30.0, 45.0, 60.0]
    assert levels_from_interval(15, 59).tolist() == [15.0, 30.0, 45.0]
    assert levels_from_interval(0.1, 0.3).size == 3  # 0.1 * 3 = 0.30000000000000004
    assert levels_from_interval(30, 10).size == 0


@pytest.mark.parametrize("interval", [0, -5, float("nan")])
def test_levels_from_interval_rejects_bad_interval(interval):
    with pytest.raises(InputDataError, match="positive"):
        levels_from_interval(interval, 60)


def test_levels_from_interval_rejects_too_many():
    with pytest.raises(InputDataError, match="larger interval"):
        levels_from_interval(0.001, 1e4)


# --- lines ------------------------------------------------------------------


def test_lines_lie_on_exact_circles():
    field = cone_field(NORTH_UP)
    lines = isochrone_lines(field, NORTH_UP, LEVELS_MIN)
    assert [line.minutes for line in lines] == LEVELS_MIN.tolist()
    for line in lines:
        assert isinstance(line, IsochroneLine)
        assert line.geometry.geom_type == "MultiLineString"
        xy = shapely.get_coordinates(line.geometry)
        dist_m = np.hypot(xy[:, 0] - SOURCE_XY[0], xy[:, 1] - SOURCE_XY[1])
        # Within half a cell of the exact circle ...
        assert np.max(np.abs(dist_m - radius_m(line.minutes))) < 0.5 * CELL_M
        # A full circle inside the grid: one closed ring of length 2 pi r ...
        assert len(line.geometry.geoms) == 1 and line.geometry.geoms[0].is_closed
        # ... centred on the source (a half-cell shift would fail this).
        centre = shapely.Polygon(line.geometry.geoms[0]).centroid
        assert_allclose([centre.x, centre.y], SOURCE_XY, atol=0.05 * CELL_M)
        assert_allclose(line.geometry.length, 2 * math.pi * radius_m(line.minutes), rtol=0.01)


def test_lines_labels_and_level_selection():
    field = cone_field(NORTH_UP)
    tmax = np.nanmax(field)
    lines = isochrone_lines(field, NORTH_UP, [90, 5, 2.5, 5, tmax + 1, 1e-3])
    # unique, sorted; 1e-3 is below the smallest value of the field and
    # tmax + 1 above the largest, so both are skipped
    assert [(line.minutes, line.label) for line in lines] == [(2.5, "0:03"), (5.0, "0:05")]


def test_lines_do_not_cross_nan_land():
    field = cone_field(NORTH_UP)
    r0, r1, c0, c1 = 60, 90, 120, 150  # a land square north-east of the source
    field[r0:r1, c0:c1] = np.nan
    # the square's footprint in map coordinates
    (x0, y0), (x1, y1) = NORTH_UP @ (c0, r0), NORTH_UP @ (c1, r1)
    land = shapely.box(min(x0, x1), min(y0, y1), max(x0, x1), max(y0, y1))
    lines = isochrone_lines(field, NORTH_UP, LEVELS_MIN)
    assert len(lines) == LEVELS_MIN.size
    crossing = [
        line.minutes
        for line in lines
        if land.intersects(line.geometry)
        and not land.boundary.contains(land.intersection(line.geometry))
    ]
    assert crossing == []
    # circles through the square are cut open there; the others stay closed rings
    near_m = land.distance(shapely.Point(SOURCE_XY))
    far_m = max(np.hypot(*(np.array(p) - SOURCE_XY)) for p in land.exterior.coords)
    for line in lines:
        through_land = near_m < radius_m(line.minutes) < far_m
        closed = [part.is_closed for part in line.geometry.geoms]
        assert closed == ([False] if through_land else [True]), line.minutes
    assert sum(near_m < radius_m(m) < far_m for m in LEVELS_MIN) >= 3


def test_lines_south_up_transform():
    south_up = Affine(CELL_M, 0.0, -100_500.0, 0.0, CELL_M, -100_500.0)  # row 0 in the south
    field = cone_field(south_up)
    assert not np.allclose(field, cone_field(NORTH_UP))  # the source is off-centre
    for line in isochrone_lines(field, south_up, LEVELS_MIN):
        xy = shapely.get_coordinates(line.geometry)
        dist_m = np.hypot(xy[:, 0] - SOURCE_XY[0], xy[:, 1] - SOURCE_XY[1])
        assert np.max(np.abs(dist_m - radius_m(line.minutes))) < 0.5 * CELL_M
        centre = shapely.Polygon(line.geometry.geoms[0]).centroid
        assert_allclose([centre.x, centre.y], SOURCE_XY, atol=0.05 * CELL_M)


def test_lines_rotated_transform():
    rotated = (
        Affine.translation(-20_000.0, 5_000.0)
        @ Affine.rotation(30.0)
        @ Affine.scale(CELL_M, -CELL_M)
        @ Affine.translation(-100.5, -100.5)
    )
    field = cone_field(rotated)
    lines = isochrone_lines(field, rotated, LEVELS_MIN[:6])
    assert len(lines) == 6
    for line in lines:
        xy = shapely.get_coordinates(line.geometry)
        dist_m = np.hypot(xy[:, 0] - SOURCE_XY[0], xy[:, 1] - SOURCE_XY[1])
        assert np.max(np.abs(dist_m - radius_m(line.minutes))) < 0.5 * CELL_M


def test_all_nan_field_gives_empty_lists():
    field = np.full((20, 30), np.nan)
    assert isochrone_lines(field, NORTH_UP, [1, 2, 3]) == []
    assert isochrone_bands(field, NORTH_UP, [1, 2, 3]) == []


def test_empty_levels_give_empty_lists():
    field = cone_field(NORTH_UP)
    assert isochrone_lines(field, NORTH_UP, []) == []
    assert isochrone_bands(field, NORTH_UP, []) == []


def test_input_is_not_modified():
    field = cone_field(NORTH_UP)
    field[10:20, 10:20] = np.nan
    before = field.copy()
    isochrone_lines(field, NORTH_UP, LEVELS_MIN)
    isochrone_bands(field, NORTH_UP, LEVELS_MIN)
    assert_allclose(field, before, equal_nan=True)


@pytest.mark.parametrize(
    ("field", "transform", "levels", "match"),
    [
        (np.zeros((3, 3, 3)), NORTH_UP, [1.0], "2-D"),
        (np.array([["a", "b"], ["c", "d"]]), NORTH_UP, [1.0], "real numbers"),
        (np.zeros((3, 3)), Affine(0.0, 0.0, 0.0, 0.0, -1.0, 0.0), [1.0], "degenerate"),
        (np.zeros((3, 3)), (1.0, 0.0), [1.0], "affine.Affine"),
        (np.zeros((3, 3)), NORTH_UP, [1.0, float("nan")], "finite"),
        (np.zeros((3, 3)), NORTH_UP, [0.0, 10.0], "> 0"),
    ],
)
def test_bad_inputs_raise(field, transform, levels, match):
    with pytest.raises(InputDataError, match=match):
        isochrone_lines(field, transform, levels)
    with pytest.raises(InputDataError, match=match):
        isochrone_bands(field, transform, levels)


# --- bands ------------------------------------------------------------------


def test_bands_are_valid_annuli():
    field = cone_field(NORTH_UP)
    bands = isochrone_bands(field, NORTH_UP, LEVELS_MIN)
    edges = np.concatenate([[0.0], LEVELS_MIN])
    assert [(b.min_minutes, b.max_minutes) for b in bands] == list(itertools.pairwise(edges))
    assert bands[0].label == "0:00-0:01" and bands[-1].label == "0:06-0:07"
    for band in bands:
        assert isinstance(band, IsochroneBand)
        assert band.geometry.geom_type == "MultiPolygon"
        assert shapely.is_valid(band.geometry)
        r1, r2 = radius_m(band.min_minutes), radius_m(band.max_minutes)
        assert_allclose(band.geometry.area, math.pi * (r2**2 - r1**2), rtol=0.02)
        # the annulus has one hole, except the first band (a disc around the source)
        (polygon,) = band.geometry.geoms
        assert len(polygon.interiors) == (0 if band.min_minutes == 0 else 1)
        assert polygon.contains(shapely.Point(SOURCE_XY)) == (band.min_minutes == 0)
    # bands tile the disc of the last level without overlap
    union = shapely.union_all([b.geometry for b in bands])
    assert_allclose(union.area, sum(b.geometry.area for b in bands), rtol=1e-9)
    assert_allclose(union.area, math.pi * radius_m(LEVELS_MIN[-1]) ** 2, rtol=0.01)


def test_bands_around_land_are_valid_with_holes():
    field = cone_field(NORTH_UP)
    field[60:90, 120:150] = np.nan
    field[100:103, 40:43] = np.nan  # a small island
    bands = isochrone_bands(field, NORTH_UP, LEVELS_MIN)
    assert len(bands) == LEVELS_MIN.size
    assert all(shapely.is_valid(b.geometry) for b in bands)
    (x0, y0), (x1, y1) = NORTH_UP @ (120, 60), NORTH_UP @ (150, 90)
    land = shapely.box(min(x0, x1), min(y0, y1), max(x0, x1), max(y0, y1))
    assert all(b.geometry.intersection(land).area == 0.0 for b in bands)
    total = shapely.union_all([b.geometry for b in bands]).area
    assert total < math.pi * radius_m(LEVELS_MIN[-1]) ** 2 * 0.99  # the land is cut out


def test_bands_south_up_transform():
    south_up = Affine(CELL_M, 0.0, -100_500.0, 0.0, CELL_M, -100_500.0)
    bands = isochrone_bands(cone_field(south_up), south_up, [2.0, 4.0])
    assert len(bands) == 2
    assert bands[0].geometry.contains(shapely.Point(SOURCE_XY))
    assert_allclose(bands[0].geometry.area, math.pi * radius_m(2.0) ** 2, rtol=0.02)
    assert all(shapely.is_valid(b.geometry) for b in bands)


def test_bands_skip_levels_outside_the_field():
    field = cone_field(NORTH_UP)
    tmin, tmax = np.nanmin(field), np.nanmax(field)
    assert tmin < 0.1 and 12 < tmax < 13
    bands = isochrone_bands(field + 3.0, NORTH_UP, [1.0, 2.0, 5.0, 8.0, 20.0, 30.0])
    # no value below 3 min: bands 0-1 and 1-2 are empty; 2-5 is a disc; 20-30 is empty
    assert [b.label for b in bands] == ["0:02-0:05", "0:05-0:08", "0:08-0:20"]
    assert_allclose(bands[0].geometry.area, math.pi * radius_m(2.0) ** 2, rtol=0.02)


def test_band_around_two_touching_islands_is_repaired():
    # Two single land cells one cell apart: their masked corners touch at the cell
    # between them, and contourpy returns one hole ring that touches itself there
    # (GEOS: "Ring Self-intersection"). The band must still come out valid.
    field = np.full((7, 7), 5.0)
    field[2, 2] = field[2, 4] = np.nan
    (band,) = isochrone_bands(field, NORTH_UP, [10.0])
    assert shapely.is_valid(band.geometry)
    # 6 x 6 cell-centre square minus two corner-masked diamonds of 2 cells each
    assert_allclose(band.geometry.area, (36.0 - 2 * 2.0) * CELL_M**2)


# --- bands on speckled fields (ring repair itself: test_rings.py), windows, shared tracing


def speckled_field(shape=(240, 260), land_share=0.2, seed=3):
    """A cone field with one-cell land speckles: many rings touch at masked corners."""
    rows, cols = np.indices(shape, dtype=np.float64)
    field = np.hypot(rows - 0.4 * shape[0], cols - 0.55 * shape[1]) / 20.0  # minutes
    field[np.random.default_rng(seed).random(shape) < land_share] = np.nan
    return field


def reference_generator(field, row0=0, col0=0):
    """contourpy's own set-up (masked_invalid, meshgrid) of the generator iso._generator builds."""
    import contourpy

    rows, cols = field.shape
    return contourpy.contour_generator(
        x=np.arange(col0, col0 + cols, dtype=np.float64),
        y=np.arange(row0, row0 + rows, dtype=np.float64),
        z=field,
        name="serial",
        corner_mask=True,
        line_type=contourpy.LineType.ChunkCombinedOffset,
        fill_type=contourpy.FillType.ChunkCombinedOffsetOffset,
        chunk_size=0,
    )


def assert_same_output(got, want):
    """Every chunk array of two contourpy outputs (lines or filled) equal, bit for bit."""
    assert len(got) == len(want)
    for a, b in zip(got, want, strict=True):
        assert len(a) == len(b)
        for x, y in zip(a, b, strict=True):
            if y is None:
                assert x is None
            else:
                np.testing.assert_array_equal(x, y)
                assert x.dtype == y.dtype


@pytest.mark.parametrize("land_share", [0.0, 0.15])
def test_generator_set_up_matches_contourpys_own(land_share):
    field = speckled_field((180, 150), land_share=land_share, seed=7)
    field[5, 5:9] = np.inf  # masked as NaN is
    invalid = ~np.isfinite(field)
    for r0, r1, c0, c1 in ((0, 180, 0, 150), (40, 121, 17, 150), (3, 5, 60, 62)):
        window = field[r0:r1, c0:c1]
        got = iso._generator(window, r0, c0, invalid[r0:r1, c0:c1])
        alone = iso._generator(window, r0, c0)
        want = reference_generator(window, r0, c0)
        for level in (1.0, 3.3, 6.0):
            assert_same_output(got.lines(level), want.lines(level))
            assert_same_output(alone.lines(level), want.lines(level))
            assert_same_output(got.filled(level - 1.5, level), want.filled(level - 1.5, level))
        assert_same_output(got.filled(-np.inf, 2.0), want.filled(-np.inf, 2.0))


def raw_band_polygons(field, lower, upper):
    """contourpy's polygons of one band as they come (some invalid), index coordinates."""
    points, offsets, outer = iso._generator(field).filled(lower, upper)
    return shapely.from_ragged_array(
        shapely.GeometryType.POLYGON, points[0], (offsets[0], outer[0])
    )


def test_speckled_bands_are_valid_and_cover_what_make_valid_covers():
    field = speckled_field()
    levels = np.arange(1.0, 9.0)
    bands = isochrone_bands(field, Affine.identity(), levels)
    assert len(bands) == levels.size
    n_repaired = 0
    for band in bands:
        # The whole band, with GEOS's full check (the code checks polygon by polygon).
        assert shapely.is_valid(band.geometry), shapely.is_valid_reason(band.geometry)
        lower = -np.inf if band.min_minutes == 0 else band.min_minutes
        raw = raw_band_polygons(field, lower, band.max_minutes)
        raw = shapely.transform(raw, lambda xy: xy + 0.5)  # cell centres, as isochrone_bands
        n_repaired += int((~shapely.is_valid(raw)).sum())
        reference = polygonal_parts(shapely.MultiPolygon(list(raw)))
        assert_allclose(band.geometry.area, reference.area, rtol=1e-12)
        assert shapely.symmetric_difference(band.geometry, reference).area < 1e-9
    assert n_repaired > 20  # the fast repair did the work, not the fallback


def test_windows_give_the_same_contours_as_one_pass():
    field = speckled_field((700, 520), land_share=0.05)
    levels = np.arange(2.0, 30.0, 2.0)
    edges = np.concatenate([[-np.inf], levels])
    lows = np.concatenate([[-np.inf], levels[:-1]])
    plan = iso._plan_windows(field, lows, levels, np.full(levels.size, 2.2))
    assert len(plan) > 1 and plan[0][2] != (0, 700, 0, 520)  # early levels use a window
    lines, bands = iso._trace(field, levels, edges)
    whole = reference_generator(field)
    for level, got in zip(levels, lines, strict=True):
        want = whole.lines(level)
        for a, b in zip(got, want, strict=True):
            np.testing.assert_array_equal(a[0], b[0])
    for lower, upper, got in zip(edges[:-1], edges[1:], bands, strict=True):
        want = whole.filled(lower, upper)
        for a, b in zip(got, want, strict=True):
            np.testing.assert_array_equal(a[0], b[0])


def test_block_ranges_cover_every_quad():
    field = speckled_field((300, 200), land_share=0.3)
    lo, hi = iso._block_ranges(field)
    block = iso._BLOCK
    quad_lo = np.fmin.reduce([field[:-1, :-1], field[1:, :-1], field[:-1, 1:], field[1:, 1:]])
    quad_hi = np.fmax.reduce([field[:-1, :-1], field[1:, :-1], field[:-1, 1:], field[1:, 1:]])
    r, c = np.nonzero(np.isfinite(quad_lo))
    assert np.all(lo[r // block, c // block] <= quad_lo[r, c])
    assert np.all(hi[r // block, c // block] >= quad_hi[r, c])


def test_lines_and_bands_together_equal_the_separate_calls():
    field = speckled_field((150, 170), land_share=0.1)
    levels = [1.5, 3.0, 4.5, 6.0, 99.0]
    lines, bands = isochrone_lines_and_bands(field, NORTH_UP, levels)
    assert [ln.label for ln in lines] == [
        ln.label for ln in isochrone_lines(field, NORTH_UP, levels)
    ]
    for a, b in zip(lines, isochrone_lines(field, NORTH_UP, levels), strict=True):
        assert shapely.equals_exact(a.geometry, b.geometry, tolerance=0.0)
    for a, b in zip(bands, isochrone_bands(field, NORTH_UP, levels), strict=True):
        assert (a.label, a.min_minutes, a.max_minutes) == (b.label, b.min_minutes, b.max_minutes)
        assert shapely.equals_exact(a.geometry, b.geometry, tolerance=0.0)
    assert isochrone_lines_and_bands(np.full((4, 4), np.nan), NORTH_UP, levels) == ([], [])


def test_a_thin_last_block_still_gets_a_window_contourpy_accepts():
    # 129 rows: the last block is one row thin; only it holds values near 50.
    field = np.zeros((129, 700))
    field[128, :] = 50.0
    lines, bands = iso._trace(field, np.array([49.0]), np.array([-np.inf, 40.0, 49.0]))
    whole = reference_generator(field)
    np.testing.assert_array_equal(lines[0][0][0], whole.lines(49.0)[0][0])
    np.testing.assert_array_equal(bands[1][0][0], whole.filled(40.0, 49.0)[0][0])
