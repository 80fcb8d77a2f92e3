"""Reference checks of site-centred maps: reciprocity of first-arrival times.

Fermat's principle: the first-arrival time between two points is the least
travel time over all paths, T(A, B) = min over paths of the integral of
ds / c(x). For a speed that depends on position only (isotropic, no currents)
the integral does not depend on the direction of travel, so
T(A -> B) = T(B -> A) (docs/references.md §8: exact for an isotropic medium;
Sethian 1999, Level Set Methods and Fast Marching Methods). A site-centred map (one
solve started at the site, read at a source cell) must therefore equal the
forward map of a solve started at that source cell, read at the site. The
discrete solve breaks the equality slightly; the tolerance is 0.5 %.

Bathymetry: invented, seeded, smooth random depths of 100 to 5000 m with
islands and a land mass in the east on which the site lies (moved to the
nearest open water, as real coastal sites are).
"""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine
from pyproj import Geod
from scipy import ndimage

from ttmap import Grid, Source, prepare_medium
from ttmap.sitemap import site_centred_times

N = 200
#: Site on land, east of the coast (rows, cols of the native grid).
SITE_RC = (100, 177)
#: Source cells: open ocean, behind islands, along the coast, near and far.
SOURCE_CELLS = [
    (20, 20), (180, 165), (25, 170), (175, 30), (100, 100), (60, 100),
    (140, 100), (100, 140), (62, 82), (10, 120), (195, 150), (100, 160),
]  # fmt: skip
TOLERANCE = 5e-3  # 0.5 %


def random_bathymetry(seed: int = 11) -> np.ndarray:
    """Smooth random depth 100-5000 m, five round islands and land east of a wavy coast."""
    rng = np.random.default_rng(seed)
    noise = ndimage.gaussian_filter(rng.standard_normal((N, N)), 10.0, mode="reflect")
    noise = (noise - noise.min()) / (noise.max() - noise.min())
    depth = 100.0 + 4900.0 * noise
    rows, cols = np.mgrid[0:N, 0:N]
    depth[cols >= 170.0 + 6.0 * np.sin(rows / 13.0)] = -30.0  # the coast and land
    for r0, c0, radius in ((60, 70, 8), (130, 120, 10), (90, 150, 5), (150, 40, 7), (100, 45, 5)):
        depth[(rows - r0) ** 2 + (cols - c0) ** 2 <= radius**2] = -50.0  # islands
    return depth


def reciprocity_errors(grid: Grid, **medium_options) -> tuple[np.ndarray, object]:
    """Relative differences site-centred vs forward, one per source cell."""
    depth = random_bathymetry()
    medium = prepare_medium(depth, grid, **medium_options)
    assert medium.basin_sizes.size == 2  # one water body: every pair is connected
    assert depth[SITE_RC] < 0  # the site is on land ...
    sx, sy = grid.xy(*SITE_RC)
    site = site_centred_times(
        medium, Source.point_xy(float(sx), float(sy)), name="Site", snap_radius_m=10_000.0
    )
    sr, sc = site.summary.source_row, site.summary.source_col
    assert medium.open_water[sr, sc] and site.summary.source_moved_m > 0  # ... and was moved
    errors = []
    for rc in SOURCE_CELLS:
        assert depth[rc] > 0
        x, y = grid.xy(*rc)
        forward = medium.travel_time(Source.point_xy(float(x), float(y))).arrival_time_s
        t_forward, t_site = forward[sr, sc], site.arrival_time_s[rc]
        assert np.isfinite(t_forward) and np.isfinite(t_site)
        errors.append(abs(t_site - t_forward) / min(t_site, t_forward))
    return np.array(errors), site


def utm_grid() -> Grid:
    return Grid((N, N), Affine(2000.0, 0.0, 300_000.0, 0.0, -2000.0, 4_400_000.0), "EPSG:32654")


def test_site_centred_map_equals_forward_maps_projected():
    # Fermat / docs/references.md §8: T(source -> site) = T(site -> source).
    # Tolerance 0.5 %; measured max 0.20 %, median 0.07 %.
    errors, _ = reciprocity_errors(utm_grid())
    assert errors.max() <= TOLERANCE
    assert np.median(errors) <= 0.2 * TOLERANCE


def test_site_centred_map_equals_forward_maps_for_group_speed():
    # The group speed of one period (300 s) is a function of depth only, so Fermat's
    # reciprocity holds for it as computed (docs/references.md §1 and §8).
    # Tolerance 0.5 %; measured max 0.19 %.
    errors, site = reciprocity_errors(utm_grid(), mode="group", period_s=300.0)
    assert site.settings["speed_mode"] == "group"
    assert errors.max() <= TOLERANCE


def test_site_centred_map_equals_forward_maps_geographic():
    # Lon/lat grid of 0.02-degree cells at 34-38 N, solved on the Mercator plane.
    # Tolerance 0.5 %; measured max 0.20 %, median 0.08 %.
    grid = Grid((N, N), Affine(0.02, 0.0, 140.0, 0.0, -0.02, 38.0), "EPSG:4326")
    errors, site = reciprocity_errors(grid)
    assert errors.max() <= TOLERANCE
    assert np.median(errors) <= 0.2 * TOLERANCE
    # The reported move is the ground distance from the site to the chosen cell centre:
    # WGS84 geodesic (pyproj Geod, Karney 2013) within 0.5 % (ttmap measures on a sphere).
    sx, sy = grid.xy(*SITE_RC)
    _, _, dist_m = Geod(ellps="WGS84").inv(
        float(sx), float(sy), site.summary.source_x, site.summary.source_y
    )
    assert site.summary.source_moved_m == pytest.approx(dist_m, rel=5e-3)


def test_reciprocity_check_detects_a_wrong_site_cell():
    # Guard for the check itself: reading the forward maps one cell (2 km) away from the
    # site must already break the 0.5 % agreement for most sources.
    grid = utm_grid()
    medium = prepare_medium(random_bathymetry(), grid)
    sx, sy = grid.xy(*SITE_RC)
    site = site_centred_times(medium, Source.point_xy(float(sx), float(sy)), snap_radius_m=10_000.0)
    sr, sc = site.summary.source_row, site.summary.source_col
    wrong = []
    for rc in SOURCE_CELLS:
        x, y = grid.xy(*rc)
        forward = medium.travel_time(Source.point_xy(float(x), float(y))).arrival_time_s
        t_forward, t_site = forward[sr, sc - 1], site.arrival_time_s[rc]
        wrong.append(abs(t_site - t_forward) / min(t_site, t_forward) > TOLERANCE)
    assert sum(wrong) >= len(SOURCE_CELLS) // 2
