"""Tests of ttmap.sitemap: site-centred times, minutes left, several sites, products.

Invented data only. Analytic reference: on uniform depth the first-arrival
time is distance over the long-wave speed sqrt(g h), with standard gravity
g = 9.80665 m/s^2 (3rd CGPM 1901; docs/references.md §2 and §8). Reciprocity
itself (Fermat's principle, docs/references.md §8) is checked in
tests/reference/test_site_reciprocity.py.
"""

from __future__ import annotations

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
from affine import Affine
from pyproj import Geod, Transformer
from numpy.testing import assert_allclose, assert_array_equal

from ttmap import Grid, Source, prepare_medium
from ttmap.errors import InputDataError, OutputExistsError, SourceError
from ttmap.products.cautions import CAUTION_SHORT
from ttmap.jobs.plan import combined_names, site_file_stem, site_names, style_files
from ttmap.jobs.sitemap import write_combined_products, write_site_products
from ttmap.products.site_maps import render_site_map
from ttmap.sitemap import (
    RECIPROCITY_NOTE,
    combine_site_times,
    combine_sites,
    minutes_left,
    site_centred_times,
)
from ttmap.defaults import SITE_SEARCH_RADIUS_M

G_M_S2 = 9.80665  # standard gravity, exact (3rd CGPM 1901; docs/references.md §9)
DEPTH_M = 1000.0
SPEED_M_S = math.sqrt(G_M_S2 * DEPTH_M)  # 99.03 m/s
CELL_M = 1000.0
ROWS, COLS = 60, 80
COAST_COL = 70  # land from this column eastwards
GRID = Grid((ROWS, COLS), Affine(CELL_M, 0.0, 0.0, 0.0, -CELL_M, ROWS * CELL_M), "EPSG:32601")
PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


def coast_depth() -> np.ndarray:
    depth = np.full((ROWS, COLS), DEPTH_M)
    depth[:, COAST_COL:] = -10.0
    return depth


@pytest.fixture(scope="module")
def medium():
    return prepare_medium(coast_depth(), GRID)


def ground_m(x0: float, y0: float, x1: float, y1: float) -> float:
    """WGS84 geodesic between two positions of GRID (pyproj; Karney 2013, docs/references.md
    §10): moves are reported in ground metres, which this UTM grid, 500 km off its central
    meridian, scales by about 1.002 on the map."""
    from pyproj import Geod, Transformer

    tr = Transformer.from_crs(GRID.crs, "EPSG:4326", always_xy=True)
    (a, b), (c, d) = tr.transform([x0, x1], [y0, y1])
    return float(Geod(ellps="WGS84").inv(a, c, b, d)[2])


def centre(row: int, col: int) -> tuple[float, float]:
    x, y = GRID.xy(row, col)
    return float(x), float(y)


@pytest.fixture(scope="module")
def harbour(medium):
    # On land, 1.4 km inside the coast: moved to the water cell (30, 69).
    x, y = centre(30, COAST_COL)
    return site_centred_times(medium, Source.point_xy(x + 400.0, y), name="Harbour")


# ------------------------------------------------------------------ solve


def test_site_on_land_is_moved_to_the_nearest_water_and_the_move_is_reported(medium, harbour):
    sm = harbour.summary
    assert (sm.source_row, sm.source_col) == (30, COAST_COL - 1)
    x, y = centre(30, COAST_COL)
    # from x = 70.9 km to the centre 69.5 km: 1400 m on the map
    assert sm.source_moved_m == pytest.approx(ground_m(x + 400.0, y, x - 1000.0, y), abs=0.01)
    assert harbour.settings["site"] == "Harbour"
    assert harbour.settings["site_moved_m"] == pytest.approx(sm.source_moved_m)
    assert harbour.settings["snap_radius_m"] == SITE_SEARCH_RADIUS_M
    assert harbour.settings["reciprocity"] == RECIPROCITY_NOTE
    assert harbour.source.kind == "point" and harbour.source.params["x"] == centre(30, 70)[0] + 400


def test_site_centred_times_on_uniform_depth_are_distance_over_speed(harbour):
    # Analytic: T = r / sqrt(g h) from the (moved) site cell (docs/references.md §8).
    # Tolerance 0.3 % beyond 20 cells (0.2 % is the open-water bound of
    # tests/reference/test_engine_reference.py); a start next to land keeps its full
    # straight-ray region on the water side.
    # Distances are geodesics on WGS84 (Karney 2013, J. Geodesy 87:43-55, via pyproj.Geod,
    # from memory): this UTM grid lies 500 km off its central meridian (scale 1.0027).
    rows, cols = np.mgrid[0:ROWS, 0:COLS]
    x, y = GRID.xy(rows, cols)
    sx, sy = harbour.summary.source_x, harbour.summary.source_y
    to_ll = Transformer.from_crs("EPSG:32601", "EPSG:4326", always_xy=True)
    lon, lat = to_ll.transform(x, y)
    slon, slat = to_ll.transform(sx, sy)
    dist_m = np.asarray(
        Geod(ellps="WGS84").inv(np.full(lon.shape, slon), np.full(lat.shape, slat), lon, lat)[2]
    )
    far = (np.hypot(x - sx, y - sy) > 20 * CELL_M) & (cols < COAST_COL)
    rel = np.abs(harbour.arrival_time_s[far] - dist_m[far] / SPEED_M_S) / (dist_m[far] / SPEED_M_S)
    assert rel.max() < 3e-3
    assert np.isnan(harbour.arrival_time_s[:, COAST_COL:]).all()


def test_site_in_water_is_not_moved_and_lonlat_pairs_are_accepted(medium):
    x, y = centre(20, 30)
    r = site_centred_times(medium, Source.point_xy(x, y))
    assert r.summary.source_moved_m == 0.0 and (r.summary.source_row, r.summary.source_col) == (
        20,
        30,
    )
    # The same place given as WGS84 lon/lat (pyproj inverse of the UTM zone 1 point).
    from pyproj import Transformer

    lon, lat = Transformer.from_crs("EPSG:32601", "EPSG:4326", always_xy=True).transform(x, y)
    r2 = site_centred_times(medium, (lon, lat), name="B")
    assert (r2.summary.source_row, r2.summary.source_col) == (20, 30)
    # Not bit-identical: the round trip moves the point by nanometres, which can move a cell
    # across the edge of the start region; the times agree to 0.1 % (measured 0.06 %).
    assert_allclose(r2.arrival_time_s, r.arrival_time_s, rtol=1e-3, atol=1e-9, equal_nan=True)


def test_sites_that_cannot_be_placed_are_refused(medium):
    x, y = centre(30, 75)  # 5.5 km inside the land
    with pytest.raises(SourceError, match="site 'Inland' at .* no open water lies within 2 km"):
        site_centred_times(medium, Source.point_xy(x, y), name="Inland")
    with pytest.raises(SourceError, match="lies on land or nodata .*allow a move"):
        site_centred_times(medium, Source.point_xy(x, y), snap_radius_m=None)
    with pytest.raises(SourceError, match="lies outside the grid"):
        site_centred_times(medium, Source.point_xy(-5000.0, y), name="Far")
    with pytest.raises(SourceError, match="neither a Source nor a \\(lon, lat\\) pair"):
        site_centred_times(medium, "harbour")  # type: ignore[arg-type]
    with pytest.raises(InputDataError, match="snap radius -1"):
        site_centred_times(medium, Source.point_xy(x, y), snap_radius_m=-1.0)


def test_a_line_site_gives_the_time_to_its_nearest_part(medium):
    # A stretch of coast as a line along the water cells of column 69: the time from a
    # source at column 39 is 30 cells of open water, r / sqrt(g h) (analytic).
    x69 = centre(0, 69)[0]
    line = shapely.LineString([(x69, 20_500.0), (x69, 40_500.0)])
    r = site_centred_times(medium, Source.from_geometry(line, crs=None))
    assert r.arrival_time_s[30, 39] == pytest.approx(30 * CELL_M / SPEED_M_S, rel=5e-3)


# ------------------------------------------------------------------ minutes left


def test_minutes_left_keeps_negative_values_and_nan():
    t = np.array([[4.0, 15.0], [np.nan, 10.0]])
    before = t.copy()
    left = minutes_left(t, 10.0)
    assert left.dtype == np.float64
    assert_array_equal(left, [[-6.0, 5.0], [np.nan, 0.0]])
    assert_array_equal(t, before)
    assert_array_equal(minutes_left(t, 0.0), t)


@pytest.mark.parametrize("delay", [-1.0, math.nan, math.inf, 1441.0, "ten"])
def test_minutes_left_refuses_bad_delays(delay):
    with pytest.raises(InputDataError, match="notification delay"):
        minutes_left(np.zeros(3), delay)  # type: ignore[arg-type]


# ------------------------------------------------------------------ several sites


def test_combine_site_times_takes_the_minimum_and_the_first_site():
    a = np.array([[5.0, 9.0, np.nan, 4.0], [1.0, np.nan, 7.0, 2.0]])
    b = np.array([[7.0, 3.0, np.nan, 4.0], [np.nan, np.nan, 6.0, 8.0]])
    c = np.array([[6.0, 2.5, np.nan, 9.0], [0.5, np.nan, 6.0, 8.0]])
    t, idx, names = combine_site_times({"a": a, "b": b, "c": c})
    assert names == ["a", "b", "c"]
    assert idx.dtype == np.int16
    assert_array_equal(t, [[5.0, 2.5, np.nan, 4.0], [0.5, np.nan, 6.0, 2.0]])
    # Ties go to the earlier site in the mapping: (0, 3) a and b equal, (1, 2) b and c equal.
    assert_array_equal(idx, [[0, 2, -1, 0], [2, -1, 1, 0]])
    assert_array_equal(a, [[5.0, 9.0, np.nan, 4.0], [1.0, np.nan, 7.0, 2.0]])  # not modified


def test_combine_site_times_refusals():
    with pytest.raises(InputDataError, match="no sites to combine"):
        combine_site_times({})
    with pytest.raises(InputDataError, match="site 'b' has a map of shape \\(2, 2\\)"):
        combine_site_times({"a": np.zeros((2, 3)), "b": np.zeros((2, 2))})
    with pytest.raises(InputDataError, match="2-D array"):
        combine_site_times({"a": np.zeros(3)})


def test_combine_sites_uses_minutes_and_refuses_other_grids(medium, harbour):
    x, y = centre(10, 20)
    other = site_centred_times(medium, Source.point_xy(x, y), name="Cove")
    t, idx, _ = combine_sites({"Harbour": harbour, "Cove": other})
    expect = np.fmin(harbour.arrival_time_min, other.arrival_time_min)
    assert_allclose(t, expect, equal_nan=True)
    assert idx[30, COAST_COL - 1] == 0 and idx[10, 20] == 1 and idx[0, COAST_COL] == -1
    g2 = Grid((ROWS, COLS), Affine(CELL_M, 0, 5000.0, 0, -CELL_M, ROWS * CELL_M), "EPSG:32601")
    m2 = prepare_medium(coast_depth(), g2)
    shifted = site_centred_times(m2, Source.point_xy(x + 5000.0, y))
    with pytest.raises(InputDataError, match="solved on another grid"):
        combine_sites({"Harbour": harbour, "Shifted": shifted})


# ------------------------------------------------------------------ names


@pytest.mark.parametrize(
    ("name", "stem"),
    [("Harbour", "Harbour"), ("Bay A / north", "Bay_A_north"), ("Ōtaki-Beach", "Otaki-Beach")],
)
def test_site_file_stem(name, stem):
    assert site_file_stem(name) == stem


def test_site_file_stem_refuses_names_without_letters():
    with pytest.raises(InputDataError, match="no letter or digit"):
        site_file_stem("  ?! ")


# ------------------------------------------------------------------ products


def read(path: Path):
    with rasterio.open(path) as src:
        return src.read(1, masked=True), src.tags(), src.nodata, src.descriptions[0], src.dtypes[0]


def test_site_products_are_written_and_read_back(tmp_path, medium, harbour):
    files = write_site_products(
        tmp_path,
        "Harbour",
        harbour,
        notification_delay_min=10.0,
        water_mask=medium.water,
        vector_formats=("gpkg", "geojson"),
        map_formats=("png", "pdf"),
    )
    plan = site_names(tmp_path, "Harbour", vector_formats=("gpkg", "geojson"), map_formats=("png", "pdf")).files()
    # the plan's files, then the QGIS style beside each raster and GeoJSON layer
    assert files == plan + style_files(plan)
    assert [p.name for p in style_files(plan)] == [
        "site_centred_Harbour.qml", "minutes_left_Harbour.qml",
        "isochrones_site_Harbour_isochrone_lines.qml", "isochrones_site_Harbour_isochrone_bands.qml",
    ]
    assert all(p.is_file() for p in files)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in files)

    t, tags, nodata, desc, dtype = read(tmp_path / "site_centred_Harbour.tif")
    assert dtype == "float32" and nodata == -9999.0
    assert tags["SITE"] == "Harbour" and tags["RECIPROCITY"] == RECIPROCITY_NOTE
    assert tags["CAUTION"] == CAUTION_SHORT and tags["UNITS"] == "minutes"
    assert tags["QUANTITY"] == "time from a source at this cell to the site"
    x, y = centre(30, COAST_COL)
    assert float(tags["SITE_MOVED_M"]) == pytest.approx(ground_m(x + 400.0, y, x - 1000.0, y), abs=0.1)
    assert desc == "minutes from a source at this cell to site Harbour"
    assert_allclose(t.filled(np.nan), harbour.arrival_time_min, rtol=1e-6, equal_nan=True)
    assert t.mask[:, COAST_COL:].all()

    left, ltags, lnodata, ldesc, _ = read(tmp_path / "minutes_left_Harbour.tif")
    assert lnodata == -9999.0 and ltags["NOTIFICATION_DELAY_MIN"] == "10"
    assert ltags["CAUTION"] == CAUTION_SHORT and ltags["SITE"] == "Harbour"
    assert "minutes left for people at Harbour if the earthquake were here" in ldesc
    assert_allclose(
        left.filled(np.nan), t.filled(np.nan) - 10.0, rtol=1e-6, atol=1e-4, equal_nan=True
    )
    assert (left < 0).any() and (left > 0).any()  # sources near the site beat the message

    for layer in ("isochrone_lines", "isochrone_bands"):
        meta, _, wkb, fields = pyogrio.raw.read(
            tmp_path / "isochrones_site_Harbour.gpkg", layer=layer
        )
        geoms = shapely.from_wkb(wkb)
        assert len(geoms) > 0 and shapely.is_valid(geoms).all()
        cols = dict(zip(meta["fields"], fields, strict=True))
        assert set(cols["site"]) == {"Harbour"}
    info = pyogrio.read_info(tmp_path / "isochrones_site_Harbour.gpkg", layer="isochrone_lines")
    assert CAUTION_SHORT in info["layer_metadata"]["DESCRIPTION"]
    gj = json.loads((tmp_path / "isochrones_site_Harbour_isochrone_lines.geojson").read_text())
    assert gj["features"] and gj["features"][0]["properties"]["site"] == "Harbour"

    for sld in (
        "site_centred_Harbour.sld",
        "minutes_left_Harbour.sld",
        "isochrones_site_Harbour_lines.sld",
        "isochrones_site_Harbour_bands.sld",
    ):
        root = ET.fromstring((tmp_path / sld).read_bytes())
        assert CAUTION_SHORT in ET.tostring(root, encoding="unicode")
    left_sld = (tmp_path / "minutes_left_Harbour.sld").read_text()
    # diverging classes around zero, 5 min wide below it (a 10-min delay: two red classes)
    assert 'type="intervals"' in left_sld and 'label="-5 to 0 min"' in left_sld
    assert 'label="-10 to -5 min"' in left_sld and 'label="0 ' in left_sld
    assert (tmp_path / "map_site_Harbour.png").read_bytes()[:8] == PNG_MAGIC
    assert (tmp_path / "map_minutes_left_Harbour.png").read_bytes()[:8] == PNG_MAGIC
    assert (tmp_path / "map_site_Harbour.pdf").read_bytes()[:5] == b"%PDF-"


def test_site_map_names_the_site_and_carries_the_caution(medium, harbour):
    from matplotlib.text import Text

    from ttmap.products.isochrones import isochrone_lines

    lines = isochrone_lines(harbour.arrival_time_min, GRID.transform, [5.0, 10.0])
    fig = render_site_map("Harbour", harbour, lines, water_mask=medium.water, title_prefix="Demo: ")
    texts = {t.get_text() for t in fig.findobj(Text)}
    assert "Demo: Minutes from a source here to Harbour" in texts
    assert "Minutes for a wave from here to reach the site" in texts  # colour bar
    assert "Site" in texts and "Isochrone (h:mm to reach the site)" in texts
    assert "Harbour" in texts  # the site's name beside its symbol
    assert not any(t.startswith("Source") for t in texts)
    assert "Arrival time (minutes after the earthquake)" not in texts
    # the site is drawn with the site symbol (white circle), never the source's star
    markers = {ln.get_marker() for ln in fig.axes[0].get_lines()}
    assert "o" in markers and "*" not in markers
    assert any(CAUTION_SHORT.split(".")[0] in t for t in texts)


def test_existing_site_products_are_refused_before_writing(tmp_path, harbour):
    write_site_products(tmp_path, "Harbour", harbour, notification_delay_min=5.0, map_formats=())
    tif = tmp_path / "site_centred_Harbour.tif"
    stamp = tif.stat().st_mtime_ns
    with pytest.raises(OutputExistsError, match="site_centred_Harbour.tif"):
        write_site_products(
            tmp_path, "Harbour", harbour, notification_delay_min=5.0, map_formats=()
        )
    assert tif.stat().st_mtime_ns == stamp
    write_site_products(
        tmp_path, "Harbour", harbour, notification_delay_min=7.0, map_formats=(), overwrite=True
    )
    assert read(tmp_path / "minutes_left_Harbour.tif")[1]["NOTIFICATION_DELAY_MIN"] == "7"


def test_a_failing_site_write_leaves_no_file(tmp_path, monkeypatch, harbour):
    from ttmap.io import figures as maps

    def broken(*args, **kwargs):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(maps, "save_figure", broken)
    with pytest.raises(OSError, match="simulated"):
        write_site_products(tmp_path, "Harbour", harbour, notification_delay_min=10.0)
    assert list(tmp_path.iterdir()) == []  # no product, no temporary file, no staging folder


def test_site_products_refuse_bad_options(tmp_path, harbour):
    with pytest.raises(InputDataError, match="vector format 'kml' is unknown"):
        write_site_products(
            tmp_path, "H", harbour, notification_delay_min=1.0, vector_formats=("kml",)
        )
    with pytest.raises(InputDataError, match="notification delay"):
        write_site_products(tmp_path, "H", harbour, notification_delay_min=-3.0)
    with pytest.raises(InputDataError, match="does not exist"):
        write_site_products(tmp_path / "missing", "H", harbour, notification_delay_min=1.0)
    assert list(tmp_path.iterdir()) == []


def test_combined_products_are_written_and_read_back(tmp_path, medium, harbour):
    x, y = centre(10, 20)
    cove = site_centred_times(medium, Source.point_xy(x, y), name="Cove")
    t, idx, names = combine_sites({"Harbour": harbour, "Cove": cove})
    files = write_combined_products(tmp_path, t, idx, names, GRID, settings_from=harbour)
    plan = combined_names(tmp_path).files()
    assert files == plan + style_files(plan)
    assert [p.name for p in style_files(plan)] == ["site_centred_min.qml", "site_centred_first_site.qml"]
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(p.name for p in files)

    tmin, tags, nodata, _, dtype = read(tmp_path / "site_centred_min.tif")
    assert dtype == "float32" and nodata == -9999.0 and tags["CAUTION"] == CAUTION_SHORT
    assert tags["SITES"] == "Harbour; Cove" and tags["SPEED_MODE"] == "long-wave"
    assert_allclose(tmin.filled(np.nan), t, rtol=1e-6, equal_nan=True)

    first, ftags, fnodata, _, fdtype = read(tmp_path / "site_centred_first_site.tif")
    assert fdtype == "int16" and fnodata == -1.0
    assert ftags["SITE_0"] == "Harbour" and ftags["SITE_1"] == "Cove" and ftags["SITE_COUNT"] == "2"
    assert ftags["CAUTION"] == CAUTION_SHORT and ftags["RECIPROCITY"] == RECIPROCITY_NOTE
    assert_array_equal(first.filled(-1), idx)
    assert first.mask[:, COAST_COL:].all() and {0, 1} <= set(np.unique(first.compressed()))

    lookup = json.loads((tmp_path / "site_centred_first_site.json").read_text(encoding="utf-8"))
    assert lookup["caution"] == CAUTION_SHORT and lookup["nodata"] == -1
    assert lookup["sites"] == [{"index": 0, "name": "Harbour"}, {"index": 1, "name": "Cove"}]
    sld = ET.fromstring((tmp_path / "site_centred_first_site.sld").read_bytes())
    labels = [e.get("label") for e in sld.iter("{http://www.opengis.net/sld}ColorMapEntry")]
    assert labels == ["no data", "Harbour", "Cove"]


def test_combined_products_refuse_inconsistent_arrays(tmp_path):
    t = np.array([[1.0, np.nan]] * 2)
    g = Grid((2, 2), Affine(CELL_M, 0, 0, 0, -CELL_M, 2 * CELL_M), "EPSG:32601")
    with pytest.raises(InputDataError, match="is -1 where min_time_min has a value"):
        write_combined_products(tmp_path, t, np.array([[0, 0], [-1, -1]]), ["a"], g)
    with pytest.raises(InputDataError, match="outside -1..0"):
        write_combined_products(tmp_path, t, np.array([[1, -1], [0, -1]]), ["a"], g)
    with pytest.raises(InputDataError, match="grid's shape"):
        write_combined_products(tmp_path, t[:1], np.array([[0, -1]]), ["a"], g)
    assert list(tmp_path.iterdir()) == []


def test_a_failing_combined_write_leaves_no_file(tmp_path, monkeypatch):
    from ttmap.io import raster

    t = np.array([[1.0, np.nan], [2.0, 3.0]])
    idx = np.array([[0, -1], [1, 0]])
    g = Grid((2, 2), Affine(CELL_M, 0, 0, 0, -CELL_M, 2 * CELL_M), "EPSG:32601")
    real = raster.write_raster

    def fail_on_index(path, array, grid, **kwargs):
        if kwargs.get("dtype") == "int16":
            raise OSError("disk full (simulated)")
        return real(path, array, grid, **kwargs)

    monkeypatch.setattr(raster, "write_raster", fail_on_index)
    with pytest.raises(OSError, match="simulated"):
        write_combined_products(tmp_path, t, idx, ["a", "b"], g)
    assert list(tmp_path.iterdir()) == []


def test_module_doctests_pass():
    import doctest

    import ttmap.jobs.plan as plan_module
    import ttmap.sitemap as sitemap_module

    for module, least in ((sitemap_module, 3), (plan_module, 5)):
        failed, attempted = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
        assert attempted >= least and failed == 0
