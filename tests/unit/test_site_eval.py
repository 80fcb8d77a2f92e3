"""The one site evaluation (ttmap.products.site_eval): snapping at scale, status words, rows.

Outside references: ground distances are WGS84 geodesics (Karney 2013,
J. Geodesy 87:43-55, through pyproj.Geod); the snapping is checked against a
brute-force search over every reached cell with that geodesic.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from affine import Affine
from pyproj import CRS, Geod, Transformer

from ttmap import Grid
from ttmap.errors import InputDataError
from ttmap.io.sites import Site, SiteList
from ttmap.products.site_eval import (
    SNAP_CLOSED_BASIN,
    SNAP_MOVED,
    SNAP_NO_WATER,
    SNAP_NOT_REACHED,
    SNAP_OK,
    SNAP_OUTSIDE,
    evaluate_sites,
    most_urgent,
    site_values,
    snap_sites,
)

GEOD = Geod(ellps="WGS84")


def _brute(grid: Grid, reached: np.ndarray, lon: float, lat: float, to_ll=None) -> tuple[int, int, float]:
    rr, cc = np.nonzero(reached)
    x, y = grid.xy(rr, cc)
    if to_ll is not None:
        x, y = to_ll.transform(x, y)
    _, _, d = GEOD.inv(np.full(rr.size, lon), np.full(rr.size, lat), x, y)
    i = int(np.argmin(d))
    return int(rr[i]), int(cc[i]), float(d[i])


@pytest.mark.parametrize("crs", ["EPSG:4326", "EPSG:32759", "EPSG:3031"])
def test_vectorised_snapping_matches_a_brute_force_geodesic_search(crs):
    """Random coast, 300 random sites: same cell (or an equally near one) and the same metres."""
    rng = np.random.default_rng(7)
    shape = (120, 150)
    if crs == "EPSG:4326":
        grid = Grid(shape, Affine(0.005, 0, 170.0, 0, -0.005, -40.0), crs)
    elif crs == "EPSG:32759":
        grid = Grid(shape, Affine(400.0, 0, 300_000.0, 0, -400.0, 5_600_000.0), crs)
    else:  # polar stereographic: map scale about 1.05 here, ground metres must still hold
        grid = Grid(shape, Affine(400.0, 0, 1_500_000.0, 0, -400.0, 1_500_000.0), crs)
    reached = rng.random(shape) < 0.02
    reached[:, :20] = True
    to_ll = None if crs == "EPSG:4326" else Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    left, bottom, right, top = grid.bounds
    xs = rng.uniform(left, right, 300)
    ys = rng.uniform(bottom, top, 300)
    sites = SiteList(tuple(Site(f"s{i}", float(x), float(y)) for i, (x, y) in enumerate(zip(xs, ys))),
                     CRS.from_user_input(crs))
    radius = 2500.0
    snapped = snap_sites(sites, grid, reached, search_radius_m=radius)
    checked = 0
    for s, x, y in zip(snapped, xs, ys):
        lon, lat = (x, y) if to_ll is None else to_ll.transform(x, y)
        r0, c0 = (int(v) for v in grid.rowcol(x, y))
        if reached[r0, c0]:
            assert s.status == SNAP_OK and s.moved_m == 0.0
            continue
        r, c, d = _brute(grid, reached, lon, lat, to_ll)
        if d <= radius * (1 - 1e-6):
            assert s.status == SNAP_MOVED
            # The nearest cell, or one no more than 0.5 % farther (sphere vs ellipsoid ranking).
            assert s.moved_m == pytest.approx(d, rel=5e-3)
            cx, cy = grid.xy(s.row, s.col)
            if to_ll is not None:
                cx, cy = to_ll.transform(cx, cy)
            assert GEOD.inv(lon, lat, cx, cy)[2] == pytest.approx(s.moved_m, abs=1e-6)
            checked += 1
        elif d > radius * (1 + 1e-6):
            assert s.status == SNAP_NO_WATER
    assert checked > 50


def test_status_words_closed_basin_time_limit_land_outside():
    grid = Grid((40, 40), Affine(100.0, 0, 0.0, 0, -100.0, 4000.0), "EPSG:32759")
    water = np.zeros(grid.shape, dtype=bool)
    water[:, :10] = True  # the sea
    water[20:23, 30:33] = True  # a closed lagoon
    open_water = water.copy()
    open_water[20:23, 30:33] = False
    reached = open_water.copy()
    reached[:5, :10] = False  # the solve stopped before the north of the sea
    xy = {
        "Quay": (850.0, 2050.0),  # on reached sea
        "Shore": (1150.0, 2050.0),  # land, next to reached sea
        "Lagoon": (3150.0, 4000.0 - 21.5 * 100.0),  # in the lagoon
        "North": (1400.0, 3950.0),  # land beside the unreached sea, 2 km from reached water
        "Inland": (2000.0, 1000.0),  # land only within 500 m
        "Away": (9000.0, 9000.0),
    }
    sites = SiteList(tuple(Site(n, *p) for n, p in xy.items()), CRS.from_epsg(32759))
    got = {s.name: s.status for s in snap_sites(sites, grid, reached, search_radius_m=500.0,
                                                water=water, open_water=open_water)}
    assert got == {"Quay": SNAP_OK, "Shore": SNAP_MOVED, "Lagoon": SNAP_CLOSED_BASIN,
                   "North": SNAP_NOT_REACHED, "Inland": SNAP_NO_WATER, "Away": SNAP_OUTSIDE}
    # Without the water masks the evaluation cannot tell: no water within radius.
    plain = {s.name: s.status for s in snap_sites(sites, grid, reached, search_radius_m=500.0)}
    assert plain["Lagoon"] == plain["North"] == SNAP_NO_WATER


def test_rows_count_minutes_left_from_the_earliest_arrival():
    sites = SiteList((Site("A", 0.0, 0.0, safe_ground_distance_m=600.0),
                      Site("B", 1.0, 0.0, notification_delay_min=20.0)))
    from ttmap.products.site_eval import SnappedSite

    snapped = [SnappedSite("A", SNAP_OK, 0, 0, 0.0, 0.0, 0.0, 10.0),
               SnappedSite("B", SNAP_MOVED, 0, 1, 1.0, 0.0, 50.0, 10.0)]
    t = evaluate_sites(sites, snapped, [42.0, 21.0], {600.0: [45.0, 30.0]}, speed_uncertainty=0.05,
                       preparation_min=3.0, walking_speed_m_s=1.0).columns
    assert t["earliest_min"] == pytest.approx([40.0, 20.0])
    assert t["latest_min"] == pytest.approx([42.0 / 0.95, 21.0 / 0.95])
    assert t["minutes_left"] == pytest.approx([30.0, 0.0])  # delays 10 (default) and 20
    assert t["minutes_needed"][0] == pytest.approx(13.0)  # 3 + 600 / 60
    assert t["margin_min"][0] == pytest.approx(17.0)
    assert t["window_T600s_min"] == pytest.approx([3.0, 9.0])
    # The caller's own window (e.g. a one-solve envelope) wins over front / (1 +/- u).
    own = evaluate_sites(sites, snapped, [42.0, 21.0], earliest_min=[35.0, 18.0],
                         latest_min=[50.0, 25.0]).columns
    assert own["minutes_left"] == pytest.approx([25.0, -2.0])
    with pytest.raises(InputDataError, match="one per site"):
        evaluate_sites(sites, snapped, [42.0])


def test_site_values_are_read_as_the_rasters_store_them():
    from ttmap.products.site_eval import SnappedSite

    field = np.array([[1.0 / 3.0, math.nan]])
    s = [SnappedSite("a", SNAP_OK, 0, 0, 0.0, 0.0, 0.0, 1.0),
         SnappedSite("b", SNAP_OK, 0, 1, 0.0, 0.0, 0.0, 1.0)]
    v = site_values(field, s)
    assert v[0] == float(np.float32(1.0 / 3.0)) and math.isnan(v[1])


def test_most_urgent_puts_before_message_and_small_margins_first():
    cols = {
        "minutes_left": [30.0, -1.0, 12.0, math.nan, 25.0],
        "margin_min": [20.0, math.nan, 2.0, math.nan, math.nan],
        "earliest_min": [40.0, 9.0, 22.0, math.nan, 35.0],
    }
    assert most_urgent(cols, 5) == [1, 2, 0, 4, 3]
    assert most_urgent(cols, 2) == [1, 2]
    assert most_urgent(cols, 0) == []
    with pytest.raises(InputDataError, match="whole number"):
        most_urgent(cols, -1)
