"""Tests of ttmap.io.raster: bathymetry in, GeoTIFFs out. All data invented."""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pytest
import rasterio
from affine import Affine
from numpy.testing import assert_allclose, assert_array_equal
from pyproj import CRS, Transformer

from ttmap.errors import GridError, InputDataError, OutputExistsError, TtmapError
from ttmap.grid import Grid
from ttmap.io.raster import (
    Bathymetry,
    coarsen_depth,
    overview_factors,
    read_bathymetry,
    refine_depth,
    write_arrival_geotiff,
    write_raster,
)

GEO = Affine(0.5, 0.0, 140.0, 0.0, -0.5, 40.0)
UTM = Affine(1000.0, 0.0, 500000.0, 0.0, -1000.0, 4000000.0)


def ocean(rows: int, cols: int, *, seed: int = 0) -> np.ndarray:
    """Invented elevation (m, negative below sea level) with a strip of land."""
    rng = np.random.default_rng(seed)
    elev = -rng.uniform(50.0, 5000.0, size=(rows, cols))
    elev[:, -1] = rng.uniform(0.0, 300.0, size=rows)
    return elev


# --------------------------------------------------------------- reading


def test_elevation_round_trip_sign_nodata_crs_transform(write_tiny_geotiff) -> None:
    elev = np.array(
        [[-100, -200, -300, 12], [-110, -32768, -310, 0], [-120, -220, -320, 5]], dtype=np.int16
    )
    path = write_tiny_geotiff(elev, nodata=-32768)
    bathy = read_bathymetry(path)
    assert isinstance(bathy, Bathymetry)
    assert bathy.depth_m.dtype == np.float64
    expected = -elev.astype(float)
    expected[1, 1] = np.nan
    assert_array_equal(bathy.depth_m, expected)
    assert not np.signbit(bathy.depth_m[1, 3])  # elevation 0 gives depth +0.0 (land)
    assert bathy.grid.shape == (3, 4)
    assert bathy.grid.transform == GEO
    assert bathy.grid.crs == CRS.from_epsg(4326)
    assert bathy.band == 1
    assert bathy.path == str(path)
    assert bathy.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    assert any("elevation" in n for n in bathy.notes)
    assert any("1 nodata cell" in n for n in bathy.notes)
    assert "8 water, 3 land and 1 nodata cell(s) of 12" in bathy.notes
    assert bathy.water_cells == 8
    with pytest.raises(ValueError):
        bathy.depth_m[0, 0] = 1.0  # read-only


def test_depth_positive_keeps_values(write_tiny_geotiff) -> None:
    depth = np.array([[100.0, 250.5, -3.0], [90.0, 80.0, -1.0]], dtype=np.float32)
    path = write_tiny_geotiff(depth, crs="EPSG:32654", transform=UTM)
    bathy = read_bathymetry(path, depth_positive=True)
    assert_array_equal(bathy.depth_m, depth.astype(float))
    assert bathy.grid.crs == CRS.from_epsg(32654)
    assert bathy.grid.transform == UTM
    assert bathy.notes[0] == "read as depth, positive down"


def test_nan_and_inf_values_become_nan(write_tiny_geotiff) -> None:
    elev = np.array([[-10.0, np.nan, -30.0], [np.inf, -50.0, -np.inf]], dtype=np.float32)
    bathy = read_bathymetry(write_tiny_geotiff(elev))
    assert_array_equal(np.isnan(bathy.depth_m), [[False, True, False], [True, False, True]])
    assert_array_equal(bathy.depth_m[~np.isnan(bathy.depth_m)], [10.0, 30.0, 50.0])
    assert any("3 NaN or infinite" in n for n in bathy.notes)


def test_float_nodata_value_masked(write_tiny_geotiff) -> None:
    elev = np.array([[-10.0, -9999.0], [-30.0, -40.0]], dtype=np.float32)
    bathy = read_bathymetry(write_tiny_geotiff(elev, nodata=-9999.0))
    assert np.isnan(bathy.depth_m[0, 1])
    assert_array_equal(bathy.depth_m[1], [30.0, 40.0])


def test_mask_band_respected(tmp_path: Path) -> None:
    path = tmp_path / "masked.tif"
    elev = -np.arange(1.0, 13.0).reshape(3, 4)
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=4,
        height=3,
        count=1,
        dtype="float64",
        crs="EPSG:4326",
        transform=GEO,
    ) as dst:
        dst.write(elev, 1)
        mask = np.full((3, 4), 255, dtype=np.uint8)
        mask[:, 0] = 0
        dst.write_mask(mask)
    bathy = read_bathymetry(path)
    assert np.all(np.isnan(bathy.depth_m[:, 0]))
    assert_array_equal(bathy.depth_m[:, 1:], -elev[:, 1:])


def test_scale_offset_and_feet_converted(tmp_path: Path) -> None:
    path = tmp_path / "scaled.tif"
    raw = np.array([[10, 20], [30, 400]], dtype=np.int16)
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=2,
        height=2,
        count=1,
        dtype="int16",
        crs="EPSG:4326",
        transform=GEO,
    ) as dst:
        dst.write(raw, 1)
        dst.scales = (2.0,)
        dst.offsets = (-100.0,)
        dst.set_band_unit(1, "ft")
    bathy = read_bathymetry(path)
    # elevation_ft = 2 * raw - 100 -> depth_m = -elevation_ft * 0.3048
    assert_allclose(bathy.depth_m, -(2.0 * raw - 100.0) * 0.3048, rtol=1e-12)
    assert any("scale 2" in n for n in bathy.notes)
    assert any("'ft' to metres" in n for n in bathy.notes)


def test_choose_band_of_multiband(write_tiny_geotiff) -> None:
    bands = np.stack([ocean(4, 5, seed=s) for s in range(3)])
    path = write_tiny_geotiff(bands)
    bathy = read_bathymetry(path, band=2)
    assert bathy.band == 2
    assert_array_equal(bathy.depth_m, -bands[1])


def test_netcdf_via_gdal(tmp_path: Path, write_tiny_geotiff) -> None:
    import rasterio.shutil

    if "netCDF" not in rasterio.drivers.raster_driver_extensions().values():
        pytest.skip("GDAL built without the netCDF driver")
    elev = ocean(4, 6).astype(np.float32)
    tif = write_tiny_geotiff(elev)
    nc = tmp_path / "bathy.nc"
    rasterio.shutil.copy(tif, nc, driver="netCDF")
    bathy = read_bathymetry(nc)
    assert_allclose(bathy.depth_m, -elev.astype(float))
    assert bathy.grid.transform.almost_equals(GEO)


# --------------------------------------------------------------- window


def test_window_lonlat_on_geographic_raster(write_tiny_geotiff) -> None:
    elev = ocean(20, 20)
    path = write_tiny_geotiff(elev)  # 140..150 E, 30..40 N, 0.5 degree cells
    bathy = read_bathymetry(path, window=(142.2, 33.1, 144.0, 35.0))
    # cols floor(4.4)=4 .. ceil(8.0)=8, rows floor(10.0)=10 .. ceil(13.8)=14
    assert_array_equal(bathy.depth_m, -elev[10:14, 4:8])
    assert bathy.grid.transform == Affine(0.5, 0.0, 142.0, 0.0, -0.5, 35.0)
    assert any("rows 10:14, cols 4:8" in n for n in bathy.notes)


def test_window_in_minus180_on_0_360_raster(write_tiny_geotiff) -> None:
    elev = ocean(10, 40)
    transform = Affine(1.0, 0.0, 170.0, 0.0, -1.0, 5.0)  # 170..210 E
    path = write_tiny_geotiff(elev, transform=transform)
    bathy = read_bathymetry(path, window=(-175.0, -2.0, -160.0, 3.0))
    # -175 -> 185 E: cols 15..30, rows 2..7
    assert_array_equal(bathy.depth_m, -elev[2:7, 15:30])
    assert bathy.grid.bounds == (185.0, -2.0, 200.0, 3.0)


def test_window_lonlat_on_projected_raster(write_tiny_geotiff) -> None:
    elev = ocean(60, 50)
    path = write_tiny_geotiff(elev, crs="EPSG:32654", transform=UTM)
    window = (141.2, 35.7, 141.5, 35.95)
    bathy = read_bathymetry(path, window=window)
    x0, y0, x1, y1 = Transformer.from_crs(
        "EPSG:4326", "EPSG:32654", always_xy=True
    ).transform_bounds(*window)
    left, bottom, right, top = bathy.grid.bounds
    # Whole cells, rounded outward: contains the window, by less than a cell.
    assert left <= x0 < left + 1000.0 and right - 1000.0 < x1 <= right
    assert bottom <= y0 < bottom + 1000.0 and top - 1000.0 < y1 <= top
    col0 = round((left - UTM.c) / 1000.0)
    row0 = round((UTM.f - top) / 1000.0)
    rows, cols = bathy.grid.shape
    assert_array_equal(bathy.depth_m, -elev[row0 : row0 + rows, col0 : col0 + cols])


def test_window_in_raster_crs(write_tiny_geotiff) -> None:
    elev = ocean(30, 30)
    path = write_tiny_geotiff(elev, crs="EPSG:32654", transform=UTM)
    bathy = read_bathymetry(
        path, window=(505000.0, 3980000.0, 512000.0, 3990000.0), window_crs=None
    )
    assert_array_equal(bathy.depth_m, -elev[10:20, 5:12])


def test_window_missing_grid_refused(write_tiny_geotiff) -> None:
    path = write_tiny_geotiff(ocean(20, 20))
    with pytest.raises(
        GridError,
        match=r"window \(10, 0, 20, 5\) in EPSG:4326 misses bathymetry .*\(140, 30, 150, 40\)",
    ):
        read_bathymetry(path, window=(10.0, 0.0, 20.0, 5.0))


def test_window_too_small_or_inverted_refused(write_tiny_geotiff) -> None:
    path = write_tiny_geotiff(ocean(20, 20))
    with pytest.raises(GridError, match="covers only 1 x 2 cells"):
        read_bathymetry(path, window=(141.1, 35.1, 141.9, 35.4))
    with pytest.raises(InputDataError, match="empty or inverted"):
        read_bathymetry(path, window=(145.0, 30.0, 141.0, 35.0))
    with pytest.raises(InputDataError, match="not four numbers"):
        read_bathymetry(path, window=(145.0, 30.0, 141.0))  # type: ignore[arg-type]


# --------------------------------------------------------------- coarsen


HAND = np.array(
    [
        [10.0, 20.0, -1.0, -3.0],
        [30.0, -5.0, -2.0, 40.0],
        [1.0, 1.0, 2.0, 2.0],
        [1.0, 1.0, 2.0, np.nan],
    ]
)


def test_coarsen_hand_example_through_reader(write_tiny_geotiff) -> None:
    path = write_tiny_geotiff(HAND.astype(np.float32), transform=GEO)
    bathy = read_bathymetry(path, depth_positive=True, coarsen=2)
    # (0,0): 3 water of 4 -> water, mean(10, 20, 30) = 20, contained land.
    # (0,1): 3 land of 4 -> land, mean(-1, -3, -2) = -2, contained water.
    # (1,0): all water -> 1.   (1,1): 3 valid water -> 2.
    assert_array_equal(bathy.depth_m, [[20.0, -2.0], [1.0, 2.0]])
    assert bathy.grid.transform == Affine(1.0, 0.0, 140.0, 0.0, -1.0, 40.0)
    assert (
        "coarsening: 1 coarse water cell(s) contained land (land thinned), "
        "1 coarse land cell(s) contained water (water closed)"
    ) in bathy.notes


def test_coarsen_ties_go_to_land_and_trailing_cells_dropped() -> None:
    depth = np.array(
        [
            [5.0, -1.0, 4.0, np.nan, 9.0],
            [7.0, -3.0, np.nan, np.nan, 9.0],
            [np.nan, -2.0, 6.0, 8.0, 9.0],
            [np.nan, 3.0, -4.0, 10.0, 9.0],
            [9.0, 9.0, 9.0, 9.0, 9.0],
        ]
    )
    coarse, notes = coarsen_depth(depth, 2)
    # (0,0): 2 land of 4 -> tie -> land, mean(-1, -3) = -2.
    # (0,1): one valid water cell -> 4.   (1,0): 1 land of 2 -> tie -> land -2.
    # (1,1): 1 land of 4 -> water, mean(6, 8, 10) = 8.
    assert_array_equal(coarse, [[-2.0, 4.0], [-2.0, 8.0]])
    assert notes[1] == (
        "coarsening dropped the last 1 row(s) and 1 column(s), which do not fill a 2 x 2 block"
    )
    assert notes[2].startswith("coarsening: 1 coarse water cell(s) contained land")
    assert "2 coarse land cell(s) contained water" in notes[2]


def test_coarsen_all_nodata_block_is_nan_and_factor_one_is_copy() -> None:
    depth = np.ones((4, 4))
    depth[:2, :2] = np.nan
    coarse, _ = coarsen_depth(depth, 2)
    assert np.isnan(coarse[0, 0]) and coarse[1, 1] == 1.0
    same, notes = coarsen_depth(depth, 1)
    assert notes == () and same is not depth
    assert_array_equal(same, depth)


def test_coarsen_refusals(write_tiny_geotiff) -> None:
    with pytest.raises(InputDataError, match="coarsen factor 0 is not a whole number"):
        coarsen_depth(HAND, 0)
    with pytest.raises(InputDataError, match="coarsen factor 1.5"):
        coarsen_depth(HAND, 1.5)  # type: ignore[arg-type]
    with pytest.raises(GridError, match="coarsen factor 3 leaves 1 x 1 cells"):
        coarsen_depth(HAND, 3)
    path = write_tiny_geotiff(HAND)
    with pytest.raises(GridError, match=r"bathymetry '.*bathy\.tif': coarsen factor 3 leaves"):
        read_bathymetry(path, depth_positive=True, coarsen=3)
    with pytest.raises(InputDataError, match="coarsen factor True"):
        read_bathymetry(path, depth_positive=True, coarsen=True)  # type: ignore[arg-type]


# --------------------------------------------------------------- refusals


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(InputDataError, match=r"bathymetry '.*nowhere\.tif' does not exist"):
        read_bathymetry(tmp_path / "nowhere.tif")


def test_not_a_raster(tmp_path: Path) -> None:
    path = tmp_path / "x.txt"
    path.write_text("depths, maybe\n1, 2, 3\n")
    with pytest.raises(InputDataError, match=r"'.*x\.txt' is not a raster GDAL can read"):
        read_bathymetry(path)


def test_no_crs(write_tiny_geotiff) -> None:
    path = write_tiny_geotiff(ocean(3, 3), crs=None)
    with pytest.raises(GridError, match=r"bathy\.tif' has no CRS; assign one"):
        read_bathymetry(path)


def test_rotated_transform_names_file(write_tiny_geotiff) -> None:
    path = write_tiny_geotiff(ocean(3, 3), transform=Affine(0.5, 0.1, 140.0, 0.1, -0.5, 40.0))
    with pytest.raises(GridError, match=r"bathymetry '.*bathy\.tif': grid transform is rotated"):
        read_bathymetry(path)


def test_multiband_needs_band_and_band_in_range(write_tiny_geotiff) -> None:
    path = write_tiny_geotiff(np.stack([ocean(3, 3)] * 3))
    with pytest.raises(InputDataError, match=r"has 3 bands; choose one with --band N \(1 to 3\)"):
        read_bathymetry(path)
    with pytest.raises(InputDataError, match=r"band 4 is out of range: .* has 3 band\(s\)"):
        read_bathymetry(path, band=4)
    with pytest.raises(InputDataError, match="band 0 is out of range"):
        read_bathymetry(path, band=0)


def test_all_nodata_refused(write_tiny_geotiff) -> None:
    path = write_tiny_geotiff(np.full((3, 3), -9999.0), nodata=-9999.0)
    with pytest.raises(InputDataError, match="has no valid cells: all 9 are nodata"):
        read_bathymetry(path)


def test_all_land_refused_with_hint(write_tiny_geotiff) -> None:
    path = write_tiny_geotiff(np.full((3, 3), 25.0))
    with pytest.raises(
        InputDataError,
        match=r"has no water: all 9 valid cells would be land .*pass --depth-positive",
    ):
        read_bathymetry(path)
    with pytest.raises(InputDataError, match="has no water.*drop --depth-positive"):
        read_bathymetry(
            write_tiny_geotiff(np.full((3, 3), -25.0), name="d.tif"), depth_positive=True
        )


def test_wrong_sign_convention_detected(write_tiny_geotiff) -> None:
    depth = np.abs(ocean(20, 20))  # a depth-positive grid ...
    depth[0, 0] = -4.0  # ... with one island cell
    path = write_tiny_geotiff(depth)
    with pytest.raises(
        InputDataError,
        match=r"looks depth-positive: 99\.8 % of valid cells would be land; .*--depth-positive",
    ):
        read_bathymetry(path)
    assert read_bathymetry(path, depth_positive=True).water_cells == 399
    elev_path = write_tiny_geotiff(-depth, name="elev.tif")
    with pytest.raises(
        InputDataError, match=r"looks like elevation: 99\.8 %.*drop --depth-positive"
    ):
        read_bathymetry(elev_path, depth_positive=True)
    # A higher limit accepts a genuinely land-heavy crop.
    assert read_bathymetry(path, max_land_share=1.0).water_cells == 1
    with pytest.raises(InputDataError, match="max_land_share 0 is outside"):
        read_bathymetry(path, max_land_share=0)


def test_bathymetry_shape_checked() -> None:
    grid = Grid((3, 3), GEO, "EPSG:4326")
    with pytest.raises(GridError, match=r"depth_m has shape \(2, 3\) but the grid is \(3, 3\)"):
        Bathymetry(np.zeros((2, 3)), grid)


# --------------------------------------------------------------- writing


def small_grid(rows: int = 10, cols: int = 12) -> Grid:
    return Grid((rows, cols), GEO, "EPSG:4326")


def test_write_arrival_geotiff_small(tmp_path: Path) -> None:
    grid = small_grid()
    time_min = np.linspace(0.0, 333.3333, 120).reshape(10, 12)
    time_min[0, :3] = np.nan
    out = tmp_path / "arrival.tif"
    write_arrival_geotiff(
        out,
        time_min,
        grid,
        tags={"SOURCE": "point 141E 38N", "PERIOD_S": "none"},
        band_description="first arrival, minutes after origin",
    )
    with rasterio.open(out) as src:
        assert src.driver == "GTiff"
        assert src.dtypes == ("float32",)
        assert src.crs == rasterio.crs.CRS.from_epsg(4326)
        assert src.transform == GEO
        assert src.nodata == -9999.0
        assert src.profile["tiled"] is True
        assert src.block_shapes == [(256, 256)]
        assert src.compression == rasterio.enums.Compression.deflate
        assert src.tags(ns="IMAGE_STRUCTURE")["PREDICTOR"] == "3"
        assert src.overviews(1) == []
        assert src.descriptions == ("first arrival, minutes after origin",)
        assert src.units == ("min",)
        tags = src.tags()
        assert tags["UNITS"] == "minutes"
        assert tags["SOURCE"] == "point 141E 38N" and tags["PERIOD_S"] == "none"
        data = src.read(1)
    assert_array_equal(data[0, :3], -9999.0)
    valid = ~np.isnan(time_min)
    assert_array_equal(data[valid], time_min[valid].astype(np.float32))
    assert list(tmp_path.iterdir()) == [out]


def test_write_big_raster_has_average_overviews_ignoring_nodata(tmp_path: Path) -> None:
    grid = Grid((600, 520), UTM, "EPSG:32654")
    time_min = np.arange(600 * 520, dtype=float).reshape(600, 520) / 100.0
    time_min[0, 0] = np.nan
    out = tmp_path / "big.tif"
    write_arrival_geotiff(out, time_min, grid, tags={}, band_description="t")
    with rasterio.open(out) as src:
        assert src.overviews(1) == [2]
        assert src.tags(ns="rio_overview")["resampling"] == "average"
        assert src.crs == rasterio.crs.CRS.from_epsg(32654)
        ov = src.read(1, out_shape=(300, 260))
    # First overview cell: mean of the three valid cells only.
    assert ov[0, 0] == pytest.approx(
        np.mean([time_min[0, 1], time_min[1, 0], time_min[1, 1]]), rel=1e-6
    )
    assert ov[5, 7] == pytest.approx(time_min[10:12, 14:16].mean(), rel=1e-6)


def test_overview_factors() -> None:
    assert overview_factors((255, 4000)) == []
    assert overview_factors((512, 512)) == [2]
    assert overview_factors((2048, 1100)) == [2, 4]


def test_write_then_read_round_trip(tmp_path: Path) -> None:
    grid = Grid((5, 6), UTM, "EPSG:32654")
    depth = np.abs(ocean(5, 6))
    depth[2, 2] = np.nan
    out = tmp_path / "depth.tif"
    write_raster(
        out, depth, grid, dtype="float64", nodata=-1.0e9, units="m", band_description="depth"
    )
    bathy = read_bathymetry(out, depth_positive=True)
    assert_array_equal(bathy.depth_m, depth)
    assert bathy.grid.crs == grid.crs and bathy.grid.transform == grid.transform


def test_write_integer_raster(tmp_path: Path) -> None:
    grid = small_grid(4, 5)
    first = np.array([[0, 1, 1, 2, 2]] * 4, dtype=float)
    first[3, 4] = np.nan
    out = tmp_path / "first_source.tif"
    write_raster(
        out,
        first,
        grid,
        dtype="int16",
        nodata=-1,
        tags={"MEANING": "index"},
        band_description="source arriving first",
        units="",
    )
    with rasterio.open(out) as src:
        assert src.dtypes == ("int16",)
        assert src.nodata == -1
        assert src.tags(ns="IMAGE_STRUCTURE")["PREDICTOR"] == "2"
        data = src.read(1)
    assert data[3, 4] == -1
    assert_array_equal(data[:3], first[:3].astype(np.int16))
    out32 = tmp_path / "i32.tif"
    write_raster(out32, np.full((4, 5), 70000, dtype=np.int64), grid, dtype="int32", nodata=-1)
    with rasterio.open(out32) as src:
        assert src.read(1)[0, 0] == 70000


def test_write_refusals(tmp_path: Path) -> None:
    grid = small_grid(4, 5)
    ok = np.ones((4, 5))
    out = tmp_path / "r.tif"
    with pytest.raises(
        InputDataError, match=r"array of shape \(5, 4\) does not match the grid \(4, 5\)"
    ):
        write_raster(out, ok.T, grid)
    with pytest.raises(InputDataError, match="dtype 'complex64' is not supported; choose one of"):
        write_raster(out, ok, grid, dtype="complex64")
    clash = ok.copy()
    clash[1, 1] = -9999.0
    with pytest.raises(InputDataError, match="1 valid cell.* equal the nodata value -9999"):
        write_raster(out, clash, grid)
    with pytest.raises(InputDataError, match="fractional values, which int16 cannot store"):
        write_raster(out, ok * 1.5, grid, dtype="int16", nodata=-1)
    with pytest.raises(InputDataError, match="nodata -99999 does not fit int16"):
        write_raster(out, ok, grid, dtype="int16", nodata=-99999)
    with pytest.raises(InputDataError, match=r"values 1e\+06\.\.1e\+06 do not fit int16"):
        write_raster(out, ok * 1e6, grid, dtype="int16", nodata=-1)
    with pytest.raises(InputDataError, match="value.* overflow float32"):
        write_raster(out, ok * 1e39, grid)
    with pytest.raises(InputDataError, match="raster tag name 'BAD KEY'"):
        write_raster(out, ok, grid, tags={"BAD KEY": "x"})
    with pytest.raises(InputDataError, match="overview resampling 'cubic' is unknown"):
        write_raster(out, ok, grid, resampling="cubic")
    assert list(tmp_path.iterdir()) == []


def test_write_float_keeps_the_input_and_takes_integers(tmp_path: Path) -> None:
    grid = small_grid(4, 5)
    values = np.arange(20.0).reshape(4, 5)
    values[1, 1], values[2, 3] = np.nan, -np.inf
    before = values.copy()
    write_raster(tmp_path / "f.tif", values, grid)
    assert_array_equal(values, before)  # NaN/inf become nodata in a copy only
    with rasterio.open(tmp_path / "f.tif") as src:
        data = src.read(1)
    assert data[1, 1] == data[2, 3] == -9999.0
    assert_array_equal(data[0], np.arange(5.0, dtype=np.float32))
    write_raster(tmp_path / "i.tif", np.arange(20).reshape(4, 5), grid, dtype="float64")
    with rasterio.open(tmp_path / "i.tif") as src:
        assert src.dtypes == ("float64",) and src.read(1)[3, 4] == 19.0
    big = np.ones((4, 5))
    big[0, 0], big[0, 1] = 1e39, np.nan  # overflow is told apart from NaN
    with pytest.raises(InputDataError, match="^1 value.* overflow float32"):
        write_raster(tmp_path / "o.tif", big, grid)


def test_write_refuses_existing_unless_overwrite(tmp_path: Path) -> None:
    grid = small_grid(4, 5)
    out = tmp_path / "arrival.tif"
    out.write_bytes(b"previous run")
    with pytest.raises(OutputExistsError, match=r"arrival\.tif' exists; pass --overwrite"):
        write_arrival_geotiff(out, np.ones((4, 5)), grid, tags={}, band_description="t")
    assert out.read_bytes() == b"previous run"
    write_arrival_geotiff(out, np.ones((4, 5)), grid, tags={}, band_description="t", overwrite=True)
    with rasterio.open(out) as src:
        assert src.read(1)[0, 0] == 1.0


def test_gdal_failure_mid_write_leaves_nothing(tmp_path: Path, monkeypatch) -> None:
    import ttmap.io.raster as raster_mod

    real_open = rasterio.open

    def failing_open(fp, mode="r", **kwargs):
        dst = real_open(fp, mode, **kwargs)
        dst.write(np.zeros((1, 4, 5), dtype="float32"))
        dst.close()
        assert Path(fp).exists()  # the temporary file really was written
        raise rasterio.errors.RasterioIOError("simulated: no space left on device")

    monkeypatch.setattr(raster_mod.rasterio, "open", failing_open)
    out = tmp_path / "arrival.tif"
    with pytest.raises(
        TtmapError, match=r"writing raster '.*arrival\.tif' failed .*free disk space"
    ):
        write_arrival_geotiff(out, np.ones((4, 5)), small_grid(4, 5), tags={}, band_description="t")
    assert list(tmp_path.iterdir()) == []


def test_coarsening_a_global_grid_reports_lost_wrap(write_tiny_geotiff) -> None:
    elev = ocean(10, 36)
    path = write_tiny_geotiff(elev, transform=Affine(10.0, 0.0, -180.0, 0.0, -10.0, 50.0))
    assert read_bathymetry(path).grid.wraps_x
    kept = read_bathymetry(path, coarsen=2)
    assert kept.grid.wraps_x
    assert not any("wrap" in n for n in kept.notes)
    lost = read_bathymetry(path, coarsen=5)
    assert not lost.grid.wraps_x
    assert any("no longer spans 360 degrees" in n and "divides 36" in n for n in lost.notes)


# --------------------------------------------------------------- refine


def test_refine_through_reader_keeps_depths_coast_and_extent(write_tiny_geotiff) -> None:
    path = write_tiny_geotiff(HAND.astype(np.float32), transform=GEO)
    plain = read_bathymetry(path, depth_positive=True)
    bathy = read_bathymetry(path, depth_positive=True, refine=3)
    assert bathy.depth_m.shape == (12, 12)
    # Every cell split into 3 x 3 cells of its own depth: the block means give the data back,
    # land stays land (<= 0), nodata stays nodata.
    blocks = bathy.depth_m.reshape(4, 3, 4, 3)
    assert_array_equal(blocks.min(axis=(1, 3)), plain.depth_m)
    assert_array_equal(blocks.max(axis=(1, 3)), plain.depth_m)
    assert bathy.grid.transform == Affine(0.5 / 3, 0.0, 140.0, 0.0, -0.5 / 3, 40.0)
    assert bathy.grid.bounds == plain.grid.bounds
    assert "refined by 3: 4 x 4 cells -> 12 x 12 cells (each cell split into 3 x 3 of the same depth)" in bathy.notes


def test_refine_refusals(write_tiny_geotiff) -> None:
    path = write_tiny_geotiff(HAND.astype(np.float32), transform=GEO)
    for bad in (0, 1.5, True):
        with pytest.raises(InputDataError, match=f"refine factor {bad!r} is not a whole number"):
            read_bathymetry(path, depth_positive=True, refine=bad)  # type: ignore[arg-type]
        with pytest.raises(InputDataError, match="refine factor"):
            refine_depth(HAND, bad)  # type: ignore[arg-type]
    with pytest.raises(InputDataError, match="coarsen 2 and refine 2 cannot be combined; use one of them"):
        read_bathymetry(path, depth_positive=True, coarsen=2, refine=2)


def test_refine_global_grid_drops_seam_and_still_wraps(write_tiny_geotiff) -> None:
    # 0..360 in 30-degree cells plus a repeated seam column (13 columns).
    depth = np.full((4, 13), 3000.0, dtype=np.float32)
    depth[:, 12] = depth[:, 0]
    path = write_tiny_geotiff(depth, transform=Affine(30.0, 0.0, -15.0, 0.0, -30.0, 60.0))
    plain = read_bathymetry(path, depth_positive=True)
    assert plain.grid.has_seam_column
    bathy = read_bathymetry(path, depth_positive=True, refine=2)
    assert bathy.depth_m.shape == (8, 24)
    assert bathy.grid.wraps_x and not bathy.grid.has_seam_column
    assert any("seam column" in n for n in bathy.notes)
