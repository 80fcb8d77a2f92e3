"""Reference checks of the travel-time engine against analytic and geodesic solutions.

Each check names its outside reference beside it. Tags follow the project
reference notes (docs/references.md): [S] read in the cited source, [C] computed,
[from memory] not re-checked, "common practice, no source".

Speeds use standard gravity g = 9.80665 m/s^2 exactly (3rd CGPM 1901,
docs/references.md §9 [S]).
"""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from affine import Affine
from pyproj import CRS, Geod, Transformer
from scipy import ndimage

from ttmap import Grid, Source, compute_travel_time, prepare_medium
from ttmap.physics.dispersion import group_speed_m_s, phase_speed_m_s

G_M_S2 = 9.80665  # standard gravity, exact (3rd CGPM 1901; docs/references.md §9 [S])
MEAN_RADIUS_M = 6371008.7714  # IUGG mean radius R1 (docs/references.md §9 [S library doc; C])
DEPTH_M = 4000.0
C_4000_M_S = float(np.sqrt(G_M_S2 * DEPTH_M))  # long-wave speed sqrt(g h), 198.06 m/s


def _utm_grid(
    n: int, cell_m: float, crs: str = "EPSG:32601", x0: float = 0.0, y0: float = 0.0
) -> Grid:
    """North-up n x n projected grid with lower-left corner (x0, y0)."""
    return Grid((n, n), Affine(cell_m, 0.0, x0, 0.0, -cell_m, y0 + n * cell_m), crs)


def _cell_centres(grid: Grid) -> tuple[np.ndarray, np.ndarray]:
    rows, cols = np.mgrid[0 : grid.rows, 0 : grid.cols]
    return grid.xy(rows, cols)


# ---------------------------------------------------------------------------------------
# 1. Uniform depth, projected grid: T = r / sqrt(g h)  (analytic; docs/references.md §8)
# ---------------------------------------------------------------------------------------


def _point_source_error(n: int, cell_m: float, sx: float, sy: float):
    grid = _utm_grid(n, cell_m)
    result = compute_travel_time(np.full(grid.shape, DEPTH_M), grid, Source.point_xy(sx, sy))
    x, y = _cell_centres(grid)
    dist_m = np.hypot(x - sx, y - sy)
    # Ground distance: geodesic on WGS84 (Karney 2013, J. Geodesy 87:43-55, via pyproj.Geod);
    # the grid lies 100-500 km off its UTM central meridian (scale 1.0000 to 1.0027).
    to_ll = Transformer.from_crs(grid.crs, "EPSG:4326", always_xy=True)
    lon, lat = to_ll.transform(x, y)
    slon, slat = to_ll.transform(sx, sy)
    ground_m = np.asarray(
        Geod(ellps="WGS84").inv(np.full(lon.shape, slon), np.full(lat.shape, slat), lon, lat)[2]
    )
    exact_s = ground_m / C_4000_M_S
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = np.abs(result.arrival_time_s - exact_s) / exact_s
    return dist_m, rel, result


def test_uniform_depth_point_source_matches_distance_over_speed():
    cell_m = 1000.0
    # Source off-centre inside its cell: x = 200.623 km, y = 200.123 km.
    sx, sy = (200.5 + 0.123) * cell_m, (200.5 - 0.377) * cell_m
    dist_m, rel, result = _point_source_error(401, cell_m, sx, sy)
    assert result.arrival_time_s.dtype == np.float64
    assert np.isfinite(result.arrival_time_s).all()
    far = dist_m > 20.0 * cell_m
    # T = ground distance / sqrt(g h). Tolerance 0.2 % beyond 20 cells (measured max ~0.12 %).
    assert rel[far].max() <= 2e-3
    # The source cell itself holds the straight-ray time of its centre: its ground distance
    # over the speed (map distance over the speed times the local scale factor).
    r, c = result.summary.source_row, result.summary.source_col
    assert rel[r, c] <= 1e-6


def test_uniform_depth_error_shrinks_when_cell_size_is_halved():
    # Same physical source position and the same ring of cells 95-105 km away on
    # three grids; the analytic time is r / sqrt(g h) (docs/references.md §8).
    sx, sy = 120_623.0, 119_877.0
    ring_errors = []
    for n, cell_m in ((121, 2000.0), (241, 1000.0), (481, 500.0)):
        dist_m, rel, _ = _point_source_error(n, cell_m, sx, sy)
        ring = np.abs(dist_m - 100e3) <= 5e3
        ring_errors.append(float(rel[ring].mean()))
    coarse, middle, fine = ring_errors
    # First-order-or-better convergence: each halving removes at least 30 % of the error
    # (measured ratios ~0.5; common practice, no source, for the margin).
    assert middle < 0.7 * coarse
    assert fine < 0.7 * middle
    assert fine < 2e-4


# ---------------------------------------------------------------------------------------
# 2. Global geographic grid against geodesics (Karney 2013, J. Geodesy 87:43-55 via
#    pyproj.Geod) and against great circles on a sphere (docs/references.md §8).
# ---------------------------------------------------------------------------------------

GLOBAL_SHAPE = (640, 1440)  # 0.25 degree, latitude -80..80, all 360 degrees, no seam column
SOURCE_LON, SOURCE_LAT = 170.0, 20.0


def _global_grid(left: float = -180.0, cols: int = 1440) -> Grid:
    return Grid((GLOBAL_SHAPE[0], cols), Affine(0.25, 0.0, left, 0.0, -0.25, 80.0), "EPSG:4326")


def _sample_in_band(grid: Grid, geod: Geod, n: int = 3000, seed: int = 20240607):
    """Random cells beyond 1000 km whose shortest path stays within |lat| < 79.5 degrees."""
    rng = np.random.default_rng(seed)
    rows = rng.integers(0, grid.rows, n)
    cols = rng.integers(0, grid.cols, n)
    lon, lat = grid.xy(rows, cols)
    _, _, dist_m = geod.inv(np.full(n, SOURCE_LON), np.full(n, SOURCE_LAT), lon, lat)
    keep = np.zeros(n, dtype=bool)
    for i in np.nonzero(dist_m > 1000e3)[0]:
        path = geod.inv_intermediate(
            SOURCE_LON,
            SOURCE_LAT,
            float(lon[i]),
            float(lat[i]),
            npts=max(2, int(dist_m[i] // 50e3)),
            initial_idx=0,
            terminus_idx=0,
            return_back_azimuth=True,
        )
        keep[i] = np.max(np.abs(np.asarray(path.lats))) < 79.5
    return rows[keep], cols[keep], lon[keep], lat[keep], dist_m[keep]


@pytest.fixture(scope="module")
def global_wgs84():
    grid = _global_grid()
    medium = prepare_medium(np.full(grid.shape, DEPTH_M), grid)
    return grid, medium.travel_time(Source.point(SOURCE_LON, SOURCE_LAT))


@pytest.mark.slow
def test_global_grid_matches_wgs84_geodesic_distance(global_wgs84):
    grid, result = global_wgs84
    assert grid.wraps_x and not grid.has_seam_column
    assert result.summary.cells_reached == grid.rows * grid.cols
    # Reference: geodesic distance on WGS84, Karney 2013, J. Geodesy 87:43-55 via pyproj.Geod.
    geod = Geod(ellps="WGS84")
    rows, cols, _, _, dist_m = _sample_in_band(grid, geod)
    assert rows.size > 2000  # most of the sample is usable; the filter is not vacuous
    exact_s = dist_m / C_4000_M_S
    rel = np.abs(result.arrival_time_s[rows, cols] - exact_s) / exact_s
    # Measured: median ~6e-5, 99th percentile ~3e-4, max ~7e-4.
    assert np.percentile(rel, 99) <= 1e-3
    assert rel.max() <= 5e-3


@pytest.mark.slow
def test_global_grid_is_continuous_across_the_antimeridian(global_wgs84):
    grid, result = global_wgs84
    t = result.arrival_time_s
    row = int(grid.rowcol(SOURCE_LON, SOURCE_LAT)[0])
    # One cell's travel time along the row (ground width of 0.25 degree of longitude
    # at that latitude, pyproj.Geod; Karney 2013, J. Geodesy 87:43-55).
    lon_w, lat_row = grid.xy(row, grid.cols - 1)
    _, _, cell_m = Geod(ellps="WGS84").inv(
        float(lon_w), float(lat_row), float(lon_w) + 0.25, float(lat_row)
    )
    cell_s = cell_m / C_4000_M_S
    for r in (row, row - 100, row + 150):
        assert abs(t[r, 0] - t[r, -1]) <= 1.05 * cell_s
    # Without the wrap the east edge would be reached only after going round the globe
    # the other way; the first column must be reached from the west across the seam.
    assert t[row, 0] > t[row, -1]
    assert t[row, 0] < t[row, grid.cols // 2]


@pytest.mark.slow
def test_duplicated_seam_column_gives_the_same_times():
    # Cell centres at -180, -179.75, ..., 179.75 without, and ..., 180 with the seam column.
    plain = _global_grid(left=-180.125, cols=1440)
    seam = _global_grid(left=-180.125, cols=1441)
    assert plain.wraps_x and not plain.has_seam_column
    assert seam.wraps_x and seam.has_seam_column
    src = Source.point(SOURCE_LON, SOURCE_LAT)
    a = compute_travel_time(np.full(plain.shape, DEPTH_M), plain, src).arrival_time_s
    b = compute_travel_time(np.full(seam.shape, DEPTH_M), seam, src).arrival_time_s
    assert b.shape == seam.shape
    np.testing.assert_allclose(b[:, :-1], a, rtol=1e-12, atol=0.0)
    np.testing.assert_array_equal(b[:, -1], b[:, 0])


def _great_circle_m(lon0: float, lat0: float, lon: np.ndarray, lat: np.ndarray) -> np.ndarray:
    """Great-circle distance on the sphere of radius R1 (Vincenty's atan2 form of the
    spherical law of cosines; exact on a sphere, docs/references.md §8)."""
    l0, p0 = np.radians(lon0), np.radians(lat0)
    lam, phi = np.radians(lon), np.radians(lat)
    dl = lam - l0
    num = np.hypot(
        np.cos(phi) * np.sin(dl), np.cos(p0) * np.sin(phi) - np.sin(p0) * np.cos(phi) * np.cos(dl)
    )
    den = np.sin(p0) * np.sin(phi) + np.cos(p0) * np.cos(phi) * np.cos(dl)
    return MEAN_RADIUS_M * np.arctan2(num, den)


@pytest.mark.slow
def test_global_grid_on_a_sphere_matches_great_circle_distance():
    grid = _global_grid()
    result = compute_travel_time(
        np.full(grid.shape, DEPTH_M), grid, Source.point(SOURCE_LON, SOURCE_LAT), earth="sphere"
    )
    assert result.settings["earth"] == "sphere"
    # Path filter on the same sphere (pyproj.Geod with f = 0 traces great circles).
    sphere = Geod(a=MEAN_RADIUS_M, f=0.0)
    rows, cols, lon, lat, geod_m = _sample_in_band(grid, sphere, seed=7)
    dist_m = _great_circle_m(SOURCE_LON, SOURCE_LAT, lon, lat)
    np.testing.assert_allclose(dist_m, geod_m, rtol=1e-9)  # two routes to one distance
    exact_s = dist_m / C_4000_M_S  # T = R * sigma / sqrt(g h) (docs/references.md §8 [C])
    rel = np.abs(result.arrival_time_s[rows, cols] - exact_s) / exact_s
    assert np.percentile(rel, 99) <= 1e-3
    assert rel.max() <= 5e-3


# ---------------------------------------------------------------------------------------
# 3. Plane beach h = a x: T = 2 (sqrt(x2) - sqrt(x1)) / sqrt(g a)
#    (derived from T = integral dx / sqrt(g a x); docs/references.md §8 [C, derived])
# ---------------------------------------------------------------------------------------


def test_plane_beach_matches_closed_form():
    slope = 0.02
    cell_m = 500.0
    rows, cols = 20, 402
    x_left = -1000.0  # two land columns at x < 0
    grid = Grid(
        (rows, cols), Affine(cell_m, 0.0, x_left, 0.0, -cell_m, rows * cell_m), "EPSG:32601"
    )
    x_centre = x_left + (np.arange(cols) + 0.5) * cell_m
    depth = np.tile(slope * x_centre, (rows, 1))
    assert (depth[:, :2] < 0).all()
    # The deep end x >= 180 km starts at time zero: a plane front travelling shoreward.
    x0 = 180e3
    area = shapely.box(x0, -cell_m, x_left + cols * cell_m + cell_m, (rows + 1) * cell_m)
    result = compute_travel_time(
        depth, grid, Source.from_geometry(area, crs=None), floor_depth_m=0.01
    )
    t = result.arrival_time_s
    assert np.isnan(t[:, :2]).all()
    assert (t[:, x_centre > x0] == 0.0).all()
    # All rows agree (a plane front on a grid-aligned slope), to 1e-9 of the times: the
    # UTM scale factor the solve applies changes along a column by less than that here
    # (Snyder 1987, transverse Mercator, from memory; 8e-11 measured).
    assert np.ptp(t[:, 2:], axis=0).max() < 1e-9 * np.nanmax(t)
    line = t[rows // 2]

    def closed_form(x1: float, x2: float) -> float:
        return 2.0 * (np.sqrt(x2) - np.sqrt(x1)) / np.sqrt(G_M_S2 * slope)

    j2 = int(np.argmin(np.abs(x_centre - 150e3)))
    for x1 in (2e3, 5e3, 10e3, 50e3, 100e3):
        j1 = int(np.argmin(np.abs(x_centre - x1)))
        expected = closed_form(x_centre[j1], x_centre[j2])
        # Tolerance 0.5 %; measured 0.05 % at 2 km from shore, 4e-6 at 100 km.
        assert line[j1] - line[j2] == pytest.approx(expected, rel=5e-3)
    # The whole profile against the closed form from the source edge (x0 is a cell edge).
    j = (x_centre > 1e3) & (x_centre < x0)
    expected = closed_form(x_centre[j], x0)
    np.testing.assert_allclose(line[j], expected, rtol=5e-3)


# ---------------------------------------------------------------------------------------
# 4. Dispersive speed modes on uniform depth: T = r / cg(h, T) and T = r / c(h, T)
# ---------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("mode", "speed_fn", "table_ratio"),
    [
        # docs/references.md §1, tsunami-band table [C]: h = 4000 m, T = 300 s.
        ("group", group_speed_m_s, 0.9137),
        ("phase", phase_speed_m_s, 0.9701),
    ],
)
def test_dispersive_mode_uniform_depth(mode, speed_fn, table_ratio):
    period_s = 300.0
    speed = float(speed_fn(DEPTH_M, period_s))
    # The dispersion-relation speed agrees with the table to its 4 decimals.
    assert speed / C_4000_M_S == pytest.approx(table_ratio, abs=5e-5)
    cell_m = 1000.0
    n = 201
    grid = _utm_grid(n, cell_m)
    sx, sy = (100.5 + 0.123) * cell_m, (100.5 - 0.31) * cell_m
    result = compute_travel_time(
        np.full(grid.shape, DEPTH_M), grid, Source.point_xy(sx, sy), mode=mode, period_s=period_s
    )
    assert result.settings["speed_mode"] == mode and result.settings["period_s"] == period_s
    x, y = _cell_centres(grid)
    dist_m = np.hypot(x - sx, y - sy)
    far = dist_m > 20.0 * cell_m
    exact_s = dist_m[far] / speed  # analytic: distance over the uniform speed
    # Tolerance 0.5 %; measured max 0.12 %.
    np.testing.assert_allclose(result.arrival_time_s[far], exact_s, rtol=5e-3)


# ---------------------------------------------------------------------------------------
# 5. Reciprocity T(A->B) = T(B->A) (Fermat's principle, isotropic speed; docs/references.md
#    §8 [S: GSA 2007 abstract for the practice])
# ---------------------------------------------------------------------------------------


def _random_bathymetry(n: int = 200, seed: int = 20240607) -> np.ndarray:
    rng = np.random.default_rng(seed)
    noise = ndimage.gaussian_filter(rng.standard_normal((n, n)), 10.0, mode="reflect")
    noise = (noise - noise.min()) / (noise.max() - noise.min())
    depth = 100.0 + 4900.0 * noise  # 100 m to 5000 m
    rows, cols = np.mgrid[0:n, 0:n]
    for r0, c0, radius in ((60, 70, 8), (130, 120, 10), (90, 160, 6), (150, 40, 7), (100, 45, 5)):
        depth[(rows - r0) ** 2 + (cols - c0) ** 2 <= radius**2] = -50.0  # islands
    return depth


def test_reciprocity_on_smooth_bathymetry_with_islands():
    depth = _random_bathymetry()
    cell_m = 2000.0
    grid = _utm_grid(depth.shape[0], cell_m)
    medium = prepare_medium(depth, grid)
    assert medium.basin_sizes.size == 2  # one water body: every pair is connected
    sites = [(20, 20), (180, 185), (25, 170), (175, 30), (100, 100), (60, 100), (140, 100)]
    times = {}
    for rc in sites:
        assert depth[rc] > 0
        x, y = grid.xy(*rc)
        times[rc] = medium.travel_time(Source.point_xy(float(x), float(y))).arrival_time_s
    worst = 0.0
    for i, a in enumerate(sites):
        for b in sites[i + 1 :]:
            t_ab, t_ba = times[a][b], times[b][a]
            assert np.isfinite(t_ab) and np.isfinite(t_ba)
            worst = max(worst, abs(t_ab - t_ba) / min(t_ab, t_ba))
    # Tolerance 0.5 %; measured worst pair ~0.1 %.
    assert worst <= 5e-3


# ---------------------------------------------------------------------------------------
# 6. Diagonal-only strait and a closed lake
# ---------------------------------------------------------------------------------------


def _strait_and_lake_depth() -> np.ndarray:
    n = 60
    depth = np.full((n, n), 1000.0)
    depth[:, 30:32] = -20.0  # a two-cell wall between the west and east basins
    depth[20, 30] = 1000.0  # joined to the west basin
    depth[21, 31] = 1000.0  # joined to the east basin; (20,30)-(21,31) touch at a corner
    depth[21, 30] = -1.0  # the lower of the two land cells of that 2x2 block
    depth[44:53, 4:13] = -5.0  # land ring ...
    depth[46:51, 6:11] = 50.0  # ... around a 5 x 5 lake
    return depth


def test_diagonal_only_strait_is_opened_and_reached():
    depth = _strait_and_lake_depth()
    cell_m = 1000.0
    grid = _utm_grid(60, cell_m)
    medium = prepare_medium(depth, grid)
    assert medium.joins_opened == ((21, 30),)  # the lower land cell of the pair
    sx, sy = 10_500.0, 30_500.0
    result = medium.travel_time(Source.point_xy(sx, sy))
    s = result.summary
    assert s.diagonal_joins_opened == 1
    assert s.unreached_basins == 1 and s.cells_unreached == 25  # the lake only
    t = result.arrival_time_s
    east = np.zeros(depth.shape, dtype=bool)
    east[:, 32:] = True
    assert np.isfinite(t[east]).all()
    assert np.isnan(t[46:51, 6:11]).all()
    assert s.cells_reached == int((depth > 0).sum()) + 1 - 25
    # Fermat bounds for a far east cell: no faster than the straight path through the
    # opened cell at sqrt(g h); no slower than that plus one cell crossed at the floor
    # depth speed (the opened cell gets the 5 m floor depth).
    tx, ty = grid.xy(20, 45)
    gx, gy = grid.xy(21, 30)
    via_gap_m = np.hypot(gx - sx, gy - sy) + np.hypot(tx - gx, ty - gy)
    c_deep, c_floor = np.sqrt(G_M_S2 * 1000.0), np.sqrt(G_M_S2 * 5.0)
    assert via_gap_m / c_deep < t[20, 45] < via_gap_m / c_deep + 1.05 * cell_m / c_floor


def test_diagonal_only_strait_stays_closed_without_opening():
    depth = _strait_and_lake_depth()
    grid = _utm_grid(60, 1000.0)
    medium = prepare_medium(depth, grid, open_diagonal=False)
    assert medium.joins_opened == ()
    result = medium.travel_time(Source.point_xy(10_500.0, 30_500.0))
    s = result.summary
    east_water = int((depth[:, 31:] > 0).sum())
    assert s.diagonal_joins_opened == 0
    assert s.unreached_basins == 2
    assert s.cells_unreached == east_water + 25
    assert np.isnan(result.arrival_time_s[:, 32:]).all()


# ---------------------------------------------------------------------------------------
# 7. Rupture rectangles: time zero inside, distance from the nearest edge outside
# ---------------------------------------------------------------------------------------


def test_rectangle_source_in_grid_crs_matches_distance_from_edge():
    cell_m = 2000.0
    n = 201
    grid = _utm_grid(n, cell_m)
    cx, cy = 200_000.0, 201_000.0  # a cell edge in x, a cell centre row in y
    length_m, width_m = 160e3, 84e3
    rect = shapely.box(cx - width_m / 2, cy - length_m / 2, cx + width_m / 2, cy + length_m / 2)
    result = compute_travel_time(
        np.full(grid.shape, DEPTH_M), grid, Source.from_geometry(rect, crs=None)
    )
    t = result.arrival_time_s
    x, y = _cell_centres(grid)
    inside = shapely.contains_xy(rect, x, y)
    assert inside.sum() == result.summary.source_start_cells > 0
    assert (t[inside] == 0.0).all()
    # Perpendicular bisector of the long sides: the row through the centre.
    row = int(grid.rowcol(cx, cy)[0])
    assert y[row, 0] == cy
    dist_m = np.abs(x[row] - cx) - width_m / 2  # analytic distance from the nearest edge
    far = dist_m > 3 * cell_m
    np.testing.assert_allclose(t[row, far], dist_m[far] / C_4000_M_S, rtol=5e-3)
    # ... and the column through the centre (bisector of the short sides).
    col = int(grid.rowcol(cx + 1.0, cy)[1])
    dist_m = np.abs(y[:, col] - cy) - length_m / 2
    far = dist_m > 3 * cell_m
    np.testing.assert_allclose(t[far, col], dist_m[far] / C_4000_M_S, rtol=5e-3)


def _area_shapes(x0: float, y0: float, h: float) -> dict[str, shapely.Polygon]:
    """A rectangle off the cell lines and a thin triangle (tip angle about 12 degrees)."""
    return {
        "rectangle": shapely.box(x0 + 30 * h, y0 + 35 * h, x0 + 42.3 * h, y0 + 52.6 * h),
        "thin triangle": shapely.Polygon(
            [(x0 + 25 * h, y0 + 30 * h), (x0 + 62 * h, y0 + 44 * h), (x0 + 31 * h, y0 + 41.5 * h)]
        ),
    }


@pytest.mark.parametrize("crs", ["projected", "lonlat"])
def test_area_sources_match_distance_to_polygon_over_speed(crs):
    """Uniform depth: an area's first arrival is its distance over sqrt(g h) (docs/references.md §8).

    Distance to the polygon: planar (shapely) on the projected grid; on the lon/lat
    grid the least WGS84 geodesic distance (Karney 2013, J. Geodesy 87:43-55 via
    pyproj.Geod; docs/references.md §10) to the polygon's edge sampled every 1/20 cell.
    """
    n = 90
    rows, cols = np.mgrid[0:n, 0:n]
    if crs == "projected":
        h, x0, y0 = 2000.0, 500_000.0, 4_000_000.0
        grid = Grid((n, n), Affine(h, 0.0, x0, 0.0, -h, y0 + n * h), "EPSG:32654")
        cell_m = h
    else:
        h, x0, y0 = 0.02, 142.0, 38.0
        grid = Grid((n, n), Affine(h, 0.0, x0, 0.0, -h, y0 + n * h), "EPSG:4326")
        cell_m = max(grid.cell_size_m())
    x, y = (np.asarray(v) for v in grid.xy(rows, cols))
    geod = Geod(ellps="WGS84")
    for name, poly in _area_shapes(x0, y0, h).items():
        src = Source.from_geometry(poly, crs=grid.crs)
        t = compute_travel_time(np.full(grid.shape, DEPTH_M), grid, src).arrival_time_s
        if crs == "projected":
            dist_m = shapely.distance(poly, shapely.points(x, y))
        else:
            edge = shapely.get_coordinates(shapely.segmentize(poly.exterior, h / 20.0))
            dist_m = np.full(x.shape, np.inf)
            for bx, by in edge:
                dist_m = np.minimum(
                    dist_m, geod.inv(np.full(x.shape, bx), np.full(x.shape, by), x, y)[2]
                )
            dist_m[shapely.contains_xy(poly, x, y)] = 0.0
        exact_s = dist_m / C_4000_M_S
        beyond3 = dist_m > 3 * cell_m
        beyond20 = dist_m > 20 * cell_m
        rel = np.abs(t - exact_s) / np.where(beyond3, exact_s, 1.0)
        print(f"{crs} {name}: worst beyond 3 cells {rel[beyond3].max():.3%}, beyond 20 cells "
              f"{rel[beyond20].max():.3%}, median beyond 3 cells {np.median(rel[beyond3]):.3%}")
        # Measured with the 3-cell start tube outside the area (docs/method.md, "Source
        # start"): 0.95 % / 0.96 % (projected rectangle / triangle) and 0.98 % / 1.26 %
        # (lon/lat) beyond 3 cells; the one-cell start band before lost the triangle's tip
        # (3 % here). The 0.5 % goal beyond 3 cells is not met: the first cells outside the
        # tube, off the corners, carry the first-order error of a front of 3-4 cells radius.
        assert rel[beyond3].max() <= 0.015
        assert rel[beyond20].max() <= 0.0075
        assert np.median(rel[beyond3]) <= 0.002


def test_rupture_at_lonlat_on_utm_grid():
    # Grid in UTM zone 54N centred on (141 E, 38 N), on the zone's central meridian.
    to_utm = Transformer.from_crs("EPSG:4326", "EPSG:32654", always_xy=True)
    cx, cy = to_utm.transform(141.0, 38.0)
    cell_m, n = 2000.0, 201
    grid = _utm_grid(n, cell_m, crs="EPSG:32654", x0=cx - n * cell_m / 2, y0=cy - n * cell_m / 2)
    strike_deg, length_km, width_km = 30.0, 160.0, 84.0
    src = Source.rupture(141.0, 38.0, strike_deg=strike_deg, length_km=length_km, width_km=width_km)
    result = compute_travel_time(np.full(grid.shape, DEPTH_M), grid, src)
    t = result.arrival_time_s
    x, y = _cell_centres(grid)
    inside = shapely.contains_xy(src.in_crs(grid.crs), x, y)
    assert inside.sum() > 0.95 * length_km * width_km * 1e6 / cell_m**2
    assert (t[inside] == 0.0).all()
    # Bisector of the long sides: azimuth strike + 90. Reference distances by
    # geodesics (Karney 2013, J. Geodesy 87:43-55 via pyproj.Geod): the component
    # along the bisector of the distance from the centre, less half the width.
    to_ll = Transformer.from_crs("EPSG:32654", "EPSG:4326", always_xy=True)
    lon, lat = to_ll.transform(x.ravel(), y.ravel())
    az, _, s_m = Geod(ellps="WGS84").inv(
        np.full(lon.size, 141.0), np.full(lon.size, 38.0), lon, lat
    )
    theta = np.radians(az - (strike_deg + 90.0))
    across_m = (s_m * np.cos(theta)).reshape(x.shape)
    along_m = (s_m * np.sin(theta)).reshape(x.shape)
    on_bisector = np.abs(along_m) < cell_m / 2
    dist_m = np.abs(across_m) - 500.0 * width_km
    sel = on_bisector & (dist_m > 5 * cell_m)
    assert sel.sum() > 100
    # Tolerance 0.5 %. The UTM grid carries distances at scale 0.9996 on the central
    # meridian (UTM definition [from memory]), so about 0.04 % of the error is the map.
    np.testing.assert_allclose(t[sel], dist_m[sel] / C_4000_M_S, rtol=5e-3)


def test_rupture_from_magnitude_has_strasser_2010_size():
    src = Source.rupture_from_magnitude(141.0, 38.0, strike_deg=0.0, mw=8.0)
    # Strasser et al. 2010, SRL 81(6):941-950, interface: Mw 8 -> 160 x 84 km
    # (docs/references.md §5 check rows [C]).
    assert src.params["length_km"] == pytest.approx(160.0, abs=0.5)
    assert src.params["width_km"] == pytest.approx(84.0, abs=0.5)
    local = CRS.from_proj4("+proj=aeqd +lat_0=38 +lon_0=141 +datum=WGS84 +units=m +no_defs")
    minx, miny, maxx, maxy = src.in_crs(local).bounds
    # Strike 0: the long side runs north-south.
    assert (maxy - miny) / 1000.0 == pytest.approx(src.params["length_km"], rel=1e-3)
    assert (maxx - minx) / 1000.0 == pytest.approx(src.params["width_km"], rel=1e-3)
    assert (maxy - miny) / 1000.0 == pytest.approx(160.0, abs=0.5)
    assert (maxx - minx) / 1000.0 == pytest.approx(84.0, abs=0.5)
    # Geodesic perimeter (Karney 2013, J. Geodesy 87:43-55 via pyproj.Geod).
    perimeter_m = Geod(ellps="WGS84").geometry_length(src.geometry)
    assert perimeter_m == pytest.approx(
        2e3 * (src.params["length_km"] + src.params["width_km"]), rel=1e-3
    )


# ---------------------------------------------------------------------------------------
# 8. Maximum time
# ---------------------------------------------------------------------------------------


def test_max_time_cuts_later_cells_and_keeps_earlier_ones():
    n, cell_m = 101, 1000.0
    grid = _utm_grid(n, cell_m)
    rng = np.random.default_rng(0)
    depth = 3000.0 + rng.uniform(-500.0, 500.0, grid.shape)
    medium = prepare_medium(depth, grid)
    src = Source.point_xy(30_500.0, 40_500.0)
    full = medium.travel_time(src).arrival_time_s
    assert np.isfinite(full).all()
    for max_time_s in (40.0, 200.0, 300.0):
        result = medium.travel_time(src, max_time_s=max_time_s)
        t = result.arrival_time_s
        late = full > max_time_s
        assert late.any() and (~late).any()
        assert np.isnan(t[late]).all()
        np.testing.assert_array_equal(t[~late], full[~late])
        assert result.summary.cells_beyond_max_time == int(late.sum())
        assert result.summary.cells_reached == int((~late).sum())
        assert result.summary.cells_unreached == 0 and result.summary.unreached_basins == 0
        assert result.settings["max_time_s"] == max_time_s
