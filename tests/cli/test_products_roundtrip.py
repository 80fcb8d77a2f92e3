"""Products of one ``ttmap map`` run, read back with the libraries GIS users use.

The run (fixture ``utm_run``) is on the invented projected grid of
``tests/cli/conftest.py``: constant depth h = 100 m, 1 km cells, EPSG:32759,
land in the last 10 columns, a point source at the centre of cell (59, 60),
isochrones every 10 minutes, GeoPackage and GeoJSON.

On constant depth the eikonal equation |grad T| = 1 / c has the exact solution
T = r / c with c = sqrt(g h) (long-wave speed; g = 9.80665 m/s^2, standard
gravity, 3rd CGPM 1901), so the isochrone of m minutes is the circle of radius
m * 60 * sqrt(g h) around the source.
"""

from __future__ import annotations

import hashlib
import json
import math
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pyogrio
import pyogrio.raw
import pytest
import rasterio
import shapely
from numpy.testing import assert_allclose
from pyproj import CRS, Transformer

import ttmap
from ttmap.grid import Grid

G = 9.80665  # standard gravity, m/s^2 (3rd CGPM 1901)


def read_layer(path: Path, layer: str) -> tuple[dict, np.ndarray, dict[str, np.ndarray]]:
    meta, _, wkb, fields = pyogrio.raw.read(path, layer=layer)
    return meta, shapely.from_wkb(wkb), dict(zip(list(meta["fields"]), fields, strict=True))


@pytest.fixture(scope="module")
def out(utm_run) -> Path:
    return utm_run["out"]


@pytest.fixture(scope="module")
def engine_minutes(spec) -> np.ndarray:
    """The engine's answer on the same depth grid, in minutes (float64)."""
    depth = -spec.utm_elevation().astype(np.float64)
    grid = Grid(spec.UTM_SHAPE, spec.UTM_TRANSFORM, spec.UTM_CRS)
    result = ttmap.compute_travel_time(depth, grid, ttmap.Source.point_xy(*spec.UTM_SOURCE_XY))
    return result.arrival_time_s / 60.0


# ---------------------------------------------------------------------------
# GeoTIFF
# ---------------------------------------------------------------------------


def test_geotiff_georeferencing_and_metadata(out, spec):
    with rasterio.open(out / "arrival_front.tif") as src:
        assert src.driver == "GTiff"
        assert src.crs.to_epsg() == 32759
        assert src.transform == spec.UTM_TRANSFORM
        assert (src.height, src.width) == spec.UTM_SHAPE
        assert src.count == 1 and src.dtypes[0] == "float32"
        assert src.nodata == -9999.0
        assert src.tags()["UNITS"] == "minutes"
        assert src.units[0] == "min"
        assert "arrival time" in src.descriptions[0] and "minutes" in src.descriptions[0]
        assert src.profile["tiled"] is True
        assert src.block_shapes[0] == (256, 256)
        assert src.compression is not None and src.compression.name.lower() == "deflate"
        # 120 x 120 cells: below the 256-cell tile, no overview is worth building
        assert src.overviews(1) == []


def test_geotiff_values_equal_the_engine(out, spec, engine_minutes):
    with rasterio.open(out / "arrival_front.tif") as src:
        stored = src.read(1, masked=True)
    water = np.isfinite(engine_minutes)
    assert np.array_equal(~stored.mask, water)
    # float32 keeps 24 significant bits: relative rounding at most 2**-24
    assert_allclose(stored.data[water], engine_minutes[water], rtol=2.0**-24, atol=0)
    # known cells: the source cell is the earliest; 40 km west along the row
    # the time is 40 km / sqrt(g h) with h = 100 m (analytic, 0.5 % here)
    assert np.unravel_index(np.ma.argmin(stored), stored.shape) == (59, 60)
    expected_min = 40_000.0 / math.sqrt(G * spec.UTM_DEPTH_M) / 60.0
    assert stored[59, 20] == pytest.approx(expected_min, rel=5e-3)


def test_geotiff_land_is_nodata(out, spec):
    with rasterio.open(out / "arrival_front.tif") as src:
        raw = src.read(1)
        stored = src.read(1, masked=True)
    land = spec.utm_elevation() > 0
    assert np.all(raw[land] == -9999.0)
    assert np.all(stored.mask[land])
    assert not stored.mask[~land].any()


def test_overviews_on_a_big_grid(run_cli, spec, tmp_path):
    """A grid whose smaller side is >= 512 cells gets a factor-2 overview."""
    from ttmap.io.raster import overview_factors

    shape = (520, 530)
    elev = np.full(shape, -spec.UTM_DEPTH_M, dtype=np.float32)
    bathy = spec.write_geotiff(
        tmp_path / "big.tif", elev, crs=spec.UTM_CRS, transform=spec.UTM_TRANSFORM
    )
    o = tmp_path / "out"
    run_cli(
        "map",
        bathy,
        "--source-xy",
        "560500,5940500",
        "--no-map",
        "--isochrone-interval-min",
        "60",
        "--out",
        o,
        expect=0,
    )
    with rasterio.open(o / "arrival_front.tif") as src:
        assert src.overviews(1) == overview_factors(shape) == [2]


# ---------------------------------------------------------------------------
# GeoPackage
# ---------------------------------------------------------------------------


def test_geopackage_layers_fields_crs(out):
    gpkg = out / "isochrones_front.gpkg"
    layers = {str(name): str(kind) for name, kind in pyogrio.list_layers(gpkg)}
    # plus QGIS's style table (a plain attributes table, no geometry; docs/styles.md)
    assert layers == {"isochrone_lines": "MultiLineString", "isochrone_bands": "MultiPolygon",
                      "layer_styles": "None"}
    lines = pyogrio.read_info(gpkg, layer="isochrone_lines")
    bands = pyogrio.read_info(gpkg, layer="isochrone_bands")
    assert {"minutes", "label"} <= set(lines["fields"])
    assert {"min_minutes", "max_minutes"} <= set(bands["fields"])
    for info in (lines, bands):
        assert CRS.from_user_input(info["crs"]).equals(CRS.from_epsg(32759))
        assert info["features"] > 0


def test_geopackage_geometries_valid_and_levels_as_requested(out):
    gpkg = out / "isochrones_front.gpkg"
    _, lines, lf = read_layer(gpkg, "isochrone_lines")
    _, bands, bf = read_layer(gpkg, "isochrone_bands")
    assert np.all(shapely.is_valid(lines)) and np.all(shapely.is_valid(bands))
    assert not np.any(shapely.is_empty(lines)) and not np.any(shapely.is_empty(bands))
    minutes = lf["minutes"]
    # --isochrone-interval-min 10; the far corner (about 85 km) is reached
    # after about 45 min at sqrt(g h) = 31.3 m/s, so 10 to 40 min all appear
    assert sorted(set(minutes.tolist())) == [10.0, 20.0, 30.0, 40.0]
    assert list(lf["label"]) and all(isinstance(v, str) and v for v in lf["label"])
    lo, hi = bf["min_minutes"], bf["max_minutes"]
    finite_hi = hi[np.isfinite(hi)]
    assert np.all(np.mod(lo, 10.0) == 0) and np.all(np.mod(finite_hi, 10.0) == 0)
    assert np.all(finite_hi > lo[np.isfinite(hi)])


def test_isochrones_are_circles_of_radius_c_t(out, spec):
    """Each m-minute isochrone lies within half a cell of r = m * 60 * sqrt(g h).

    Vertices within 2 km of the land strip or of the grid edge are left out
    (the front is cut there, and contours stop half a cell from the edge).
    """
    _, lines, lf = read_layer(out / "isochrones_front.gpkg", "isochrone_lines")
    x0, y0 = spec.UTM_SOURCE_XY
    t = spec.UTM_TRANSFORM
    left, top = t.c, t.f
    right = left + spec.UTM_SHAPE[1] * t.a
    bottom = top + spec.UTM_SHAPE[0] * t.e
    c = math.sqrt(G * spec.UTM_DEPTH_M)
    margin = 2000.0
    checked = {}
    for geom, m in zip(lines, lf["minutes"], strict=True):
        xy = shapely.get_coordinates(geom)
        keep = (
            (xy[:, 0] > left + margin)
            & (xy[:, 0] < min(right, spec.UTM_LAND_X) - margin)
            & (xy[:, 1] > bottom + margin)
            & (xy[:, 1] < top - margin)
        )
        r = np.hypot(xy[keep, 0] - x0, xy[keep, 1] - y0)
        radius = m * 60.0 * c
        if r.size:
            assert np.max(np.abs(r - radius)) <= 0.5 * spec.UTM_CELL_M, f"{m} min isochrone"
        checked[float(m)] = checked.get(float(m), 0) + int(r.size)
    # the 10, 20 and 30 minute circles (18.8, 37.6, 56.4 km) lie mostly inside
    for m in (10.0, 20.0, 30.0):
        assert checked.get(m, 0) >= 50


# ---------------------------------------------------------------------------
# GeoJSON
# ---------------------------------------------------------------------------


def test_geojson_is_lonlat_and_matches_the_projected_lines(out, spec):
    doc = json.loads((out / "isochrones_front_isochrone_lines.geojson").read_text())
    assert doc["type"] == "FeatureCollection"
    # RFC 7946 section 4: always WGS84 lon/lat, and no "crs" member
    assert "crs" not in doc
    _, lines, lf = read_layer(out / "isochrones_front.gpkg", "isochrone_lines")
    by_minutes = {float(m): g for g, m in zip(lines, lf["minutes"], strict=True)}
    to_utm = Transformer.from_crs("EPSG:4326", spec.UTM_CRS, always_xy=True)
    lon0, lat0 = spec.utm_to_lonlat(*spec.UTM_SOURCE_XY)
    assert len(doc["features"]) == len(lines)
    for feat in doc["features"]:
        coords = np.array(shapely.get_coordinates(shapely.geometry.shape(feat["geometry"])))
        lon, lat = coords[:, 0], coords[:, 1]
        # degrees, near the source (1.5 degrees is about 130 km there)
        assert np.all(np.abs(lon - lon0) < 1.5) and np.all(np.abs(lat - lat0) < 1.5)
        x, y = to_utm.transform(lon, lat)
        line = by_minutes[float(feat["properties"]["minutes"])]
        d = shapely.distance(shapely.points(np.column_stack([x, y])), line)
        # 7 decimals of a degree (GDAL's RFC 7946 default) is about 1 cm
        assert np.max(d) < 0.5


def test_geojson_bands_layer(out):
    doc = json.loads((out / "isochrones_front_isochrone_bands.geojson").read_text())
    geoms = [shapely.geometry.shape(f["geometry"]) for f in doc["features"]]
    assert geoms and all(g.geom_type in ("Polygon", "MultiPolygon") for g in geoms)
    assert all(shapely.is_valid(g) for g in geoms)
    assert {"min_minutes", "max_minutes"} <= set(doc["features"][0]["properties"])


# ---------------------------------------------------------------------------
# SLD
# ---------------------------------------------------------------------------


SLD = "{http://www.opengis.net/sld}"
OGC = "{http://www.opengis.net/ogc}"


def test_sld_files_parse_and_match_their_data(out):
    slds = sorted(out.glob("*.sld"))
    assert {p.name for p in slds} == {
        "arrival_front.sld",
        "isochrones_front_lines.sld",
        "isochrones_front_bands.sld",
        "coast_front.sld",  # the coastal arrival layer is on by default
    }
    for p in slds:
        root = ET.parse(p).getroot()
        assert root.tag == f"{SLD}StyledLayerDescriptor"
    # raster style: the transparent entry is the GeoTIFF's nodata, quantities increase
    entries = list(ET.parse(out / "arrival_front.sld").getroot().iter(f"{SLD}ColorMapEntry"))
    with rasterio.open(out / "arrival_front.tif") as src:
        nodata = src.nodata
    assert float(entries[0].get("quantity")) == nodata and entries[0].get("opacity") == "0"
    q = [float(e.get("quantity")) for e in entries]
    assert q == sorted(q) and len(set(q)) == len(q)
    # vector styles filter and label on fields their layer has
    gpkg = out / "isochrones_front.gpkg"
    for sld, layer in (
        ("isochrones_front_lines.sld", "isochrone_lines"),
        ("isochrones_front_bands.sld", "isochrone_bands"),
    ):
        props = {e.text for e in ET.parse(out / sld).getroot().iter(f"{OGC}PropertyName")}
        assert props and props <= set(pyogrio.read_info(gpkg, layer=layer)["fields"])
    props = {e.text for e in ET.parse(out / "coast_front.sld").getroot().iter(f"{OGC}PropertyName")}
    assert props and props <= set(
        pyogrio.read_info(out / "coast_front.gpkg", layer="coastal_arrival")["fields"]
    )


# ---------------------------------------------------------------------------
# run.json
# ---------------------------------------------------------------------------


def test_run_record(utm_run):
    out, bathy = utm_run["out"], utm_run["bathymetry"]
    record = json.loads((out / "run.json").read_text())
    assert (
        record["inputs"]["bathymetry"]["sha256"] == hashlib.sha256(bathy.read_bytes()).hexdigest()
    )
    params = record["parameters"]
    assert params["products"]["isochrone_interval_min"] == 10.0
    assert params["products"]["vector_formats"] == ["gpkg", "geojson"]
    assert params["source"]["kind"] == "point"
    versions = record["versions"]
    import importlib.metadata as md

    assert versions["numpy"] == np.__version__
    assert versions["scikit-fmm"] == md.version("scikit-fmm")
    assert versions["ttmap"] == ttmap.__version__
    timings = record["timings_s"]
    assert timings["total_s"] > 0 and "front.solve_s" in timings
    assert all(v >= 0 for v in timings.values())
    sets = record["product_sets"]
    assert list(sets) == ["front"]
    # 120 x 120 cells less the 120 x 10 land strip, all reached
    assert sets["front"]["cells_reached"] == 120 * 110
    # products are listed relative to the output folder
    written = [out / p for p in record["products"]]
    assert all(p.is_file() and p.parent == out for p in written)
    # every file the run left in the folder (listed before any test read the
    # products: readers may add side files) is a listed product, or the record
    on_disk = set(utm_run["listing"])
    assert {p.name for p in written} | {"run.json"} == on_disk
    assert "arrival_front.tif" in on_disk and "isochrones_front.gpkg" in on_disk
    assert record["cautions"] and record["grid"]["crs"] == "EPSG:32759"


# ---------------------------------------------------------------------------
# Map picture
# ---------------------------------------------------------------------------


def test_map_png_is_not_blank(out):
    import matplotlib.image as mpimg

    img = mpimg.imread(out / "map_front.png")
    assert img.ndim == 3 and img.shape[0] > 300 and img.shape[1] > 300
    rgb = (img[..., :3] * 255).round().astype(np.uint32).reshape(-1, 3)
    colours = np.unique((rgb[:, 0] << 16) | (rgb[:, 1] << 8) | rgb[:, 2])
    assert colours.size > 50
    # the picture is not one colour (e.g. all white)
    assert rgb.std(axis=0).max() > 10
