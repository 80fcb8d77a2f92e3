"""Unit tests of the up-front checks (ttmap.jobs.checks) and the fill-value plausibility check."""

from __future__ import annotations

import math

import numpy as np
import pytest
from affine import Affine
from pyproj import CRS, Geod

from ttmap.errors import InputDataError, TtmapWarning
from ttmap.grid import Grid
from ttmap.io.header import normalise_crs
from ttmap.io.raster import PLAUSIBLE_LIMIT_M, check_fill_values
from ttmap.jobs.checks import (
    FASTEST_SPEED_M_S,
    MAX_LEVELS,
    check_intervals,
    check_out_dir,
    check_radius,
    fit_file_stem,
    grid_extent_m,
    shortest_crossing_s,
)
from ttmap.jobs.options import SpeedOptions

GRID = Grid((100, 100), Affine(0.1, 0.0, 140.0, 0.0, -0.1, -30.0), CRS.from_epsg(4326))


def test_fastest_speed_is_sqrt_g_h_over_the_deepest_trench():
    # sqrt(g h) with h = 10.9 km (Challenger Deep, from memory) is 327 m/s; the bound must not be slower
    assert FASTEST_SPEED_M_S >= math.sqrt(9.81 * 10_900.0)
    assert PLAUSIBLE_LIMIT_M > 10_900.0


def test_grid_extent_agrees_with_geodesic_distance():
    # pyproj geodesic along the middle parallel (35 S) and the meridian: within 0.5 %
    geod = Geod(ellps="WGS84")
    _, _, width = geod.inv(140.0, -35.0, 150.0, -35.0)
    _, _, height = geod.inv(145.0, -30.0, 145.0, -40.0)
    h, w = grid_extent_m(GRID)
    assert w == pytest.approx(width, rel=5e-3)
    assert h == pytest.approx(height, rel=5e-3)


def test_interval_refused_only_beyond_max_levels():
    span_min = shortest_crossing_s(GRID) / 60.0
    check_intervals(GRID, isochrone_interval_min=1.01 * span_min / MAX_LEVELS, coast_interval_min=None)
    with pytest.raises(InputDataError, match="--isochrone-interval-min"):
        check_intervals(GRID, isochrone_interval_min=0.99 * span_min / MAX_LEVELS, coast_interval_min=None)
    with pytest.raises(InputDataError, match=r"coast class interval 0.0001 min .* give --coast-interval-min"):
        check_intervals(GRID, isochrone_interval_min=None, coast_interval_min=1e-4)
    # a maximum time shortens the span: the same interval is then fine
    check_intervals(GRID, isochrone_interval_min=0.1, coast_interval_min=None, max_time_s=60.0 * 50)


def test_radius_larger_than_the_grid_is_refused():
    h, w = grid_extent_m(GRID)
    check_radius(GRID, 0.9 * math.hypot(h, w), what="snap radius", flag="--snap-radius-km")
    with pytest.raises(InputDataError, match="larger than the whole grid"):
        check_radius(GRID, 1.1 * math.hypot(h, w), what="snap radius", flag="--snap-radius-km")
    with pytest.raises(InputDataError, match="inf km"):
        check_radius(GRID, math.inf, what="snap radius", flag="--snap-radius-km")


def test_out_dir_empty_file_and_below_file(tmp_path):
    f = tmp_path / "a.txt"
    f.write_text("x")
    for bad, match in (("", "is empty"), (str(f), "is a file"), (str(f / "run"), "cannot be created")):
        with pytest.raises(InputDataError, match=match):
            check_out_dir(bad)
    check_out_dir(str(tmp_path / "new" / "run"))


def test_long_stem_is_cut_with_a_stable_distinct_hash():
    a, b = "x" * 300, "x" * 299 + "y"
    assert fit_file_stem(a) == fit_file_stem(a)
    assert fit_file_stem(a) != fit_file_stem(b)
    assert len(fit_file_stem(a).encode()) <= 120
    assert fit_file_stem("short") == "short"


def test_fill_values_refused_or_noted():
    v = np.full(1000, -4000.0)
    v[:5] = 99999.0
    with pytest.raises(InputDataError, match="--nodata 99999"):
        check_fill_values(v, np.ones(v.shape, bool), "b.tif")
    v[:5] = -4000.0
    assert check_fill_values(v, np.ones(v.shape, bool), "b.tif") is None
    v[:50] = -9999.0  # a round value at the edge, 5 % of cells: noted, not refused
    with pytest.warns(TtmapWarning, match="--nodata -9999"):
        note = check_fill_values(v, np.ones(v.shape, bool), "b.tif")
    assert note is not None
    v[:50] = -9998.0  # not a round fill value: nothing
    assert check_fill_values(v, np.ones(v.shape, bool), "b.tif") is None


def test_degree_spelled_by_esri_is_degrees():
    wkt = ('GEOGCS["GCS_WGS_1984",DATUM["D_WGS_1984",SPHEROID["WGS_1984",6378137.0,298.257223563]],'
           'PRIMEM["Greenwich",0.0],UNIT["Degree",0.0174532925199433]]')
    c = normalise_crs(CRS.from_wkt(wkt))
    assert c.equals(CRS.from_epsg(4326), ignore_axis_order=True)
    grads = CRS.from_wkt(wkt.replace('"Degree",0.0174532925199433', '"Grad",0.015707963267949'))
    assert normalise_crs(grads).axis_info[0].unit_name != "degree"  # not degrees: left alone


@pytest.mark.parametrize("period", [9.9, 10_800.5, 0.5])
def test_period_range(period):
    with pytest.raises(InputDataError, match="10...10800 s"):
        SpeedOptions(periods_s=(period,))


def test_period_bounds_accepted():
    assert SpeedOptions(periods_s=(10.0, 10_800.0)).periods_s == (10.0, 10_800.0)
