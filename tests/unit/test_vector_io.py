"""Tests of ttmap.io.vector: GeoPackage, Shapefile and GeoJSON layers. Invented data."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pyogrio
import pyogrio.raw
import pytest
import shapely
from numpy.testing import assert_allclose, assert_array_equal
from pyproj import CRS
from shapely.geometry import LineString, MultiLineString, MultiPolygon, Point, Polygon

from ttmap.errors import InputDataError, OutputExistsError, TtmapError
from ttmap.io.vector import (
    VectorLayer,
    read_vector_geometries,
    read_vector_points,
    shapefile_field_name,
    vector_output_paths,
    write_vector_layers,
)

UTM54 = "EPSG:32654"


def iso_layers() -> list[VectorLayer]:
    """Two invented isochrone layers in UTM metres."""
    lines = VectorLayer(
        "lines",
        [
            LineString([(500000, 4000000), (510000, 4005000)]),
            MultiLineString([[(0, 0), (1000, 0)], [(2000, 0), (3000, 500)]]),
        ],
        {"minutes": [10.0, 20.0], "label": ["0:10", "0:20"]},
        "MultiLineString",
        description="isochrone lines",
    )
    bands = VectorLayer(
        "bands",
        [
            Polygon([(0, 0), (1000, 0), (1000, 1000), (0, 1000)]),
            MultiPolygon([Polygon([(2000, 0), (3000, 0), (3000, 800)])]),
            Polygon([(5000, 5000), (6000, 5000), (6000, 6000)]),
        ],
        {"min_minutes": [0, 10, 20], "max_minutes": [10.0, 20.0, None], "label": ["a", "b", None]},
        "MultiPolygon",
    )
    return [lines, bands]


def listing(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


# --------------------------------------------------------------- layers


def test_layer_promotes_singles_and_types_columns() -> None:
    lines, bands = iso_layers()
    assert [g.geom_type for g in lines.geometries] == ["MultiLineString", "MultiLineString"]
    assert bands.attributes["min_minutes"].dtype == np.int64
    assert bands.attributes["max_minutes"].dtype == np.float64
    assert np.isnan(bands.attributes["max_minutes"][2])
    assert bands.attributes["label"].dtype == object


def test_layer_promotes_many_singles_in_place_and_keeps_the_order() -> None:
    import shapely

    singles = shapely.linestrings(np.arange(3000.0).reshape(500, 3, 2))
    geoms: list = list(singles)
    geoms[7] = shapely.MultiLineString([singles[7], singles[8]])
    geoms[9] = None
    layer = VectorLayer(
        "many",
        geoms,
        {"label": ["a"] * 499 + [None], "n": [1] * 499 + [None], "ok": [True] * 500},
        "MultiLineString",
    )
    out = np.array(layer.geometries, dtype=object)
    assert shapely.get_type_id(out[[0, 7, 499]]).tolist() == [5, 5, 5]
    assert out[9] is None
    assert shapely.get_num_geometries(out[7]) == 2
    keep = np.array([i not in (7, 9) for i in range(500)])
    assert shapely.equals_exact(shapely.get_geometry(out[keep], 0), singles[keep], 0.0).all()
    assert layer.attributes["label"].dtype == object and layer.attributes["label"][-1] is None
    assert layer.attributes["n"].dtype == np.float64 and np.isnan(layer.attributes["n"][-1])
    assert layer.attributes["ok"].dtype == np.bool_


def test_layer_refusals() -> None:
    line = LineString([(0, 0), (1, 1)])
    with pytest.raises(InputDataError, match="layer name 'iso lines' must start"):
        VectorLayer("iso lines", [line], {}, "LineString")
    with pytest.raises(InputDataError, match="geometry type 'Curve' is unknown; choose one of"):
        VectorLayer("a", [line], {}, "Curve")
    with pytest.raises(
        InputDataError, match="layer 'a' is MultiPolygon but geometry 0 is a LineString"
    ):
        VectorLayer("a", [line], {}, "MultiPolygon")
    with pytest.raises(InputDataError, match="column 'minutes' has 2 values for 1 geometries"):
        VectorLayer("a", [line], {"minutes": [1, 2]}, "LineString")
    with pytest.raises(InputDataError, match="column 'x' mixes float, str values"):
        VectorLayer("a", [line, line], {"x": [1.5, "b"]}, "LineString")
    with pytest.raises(InputDataError, match="column 'x' holds a dict"):
        VectorLayer("a", [line], {"x": [{}]}, "LineString")
    with pytest.raises(InputDataError, match="column name 'fid' is reserved"):
        VectorLayer("a", [line], {"fid": [1]}, "LineString")
    with pytest.raises(InputDataError, match="item 0 is a tuple, not a shapely geometry"):
        VectorLayer("a", [(0, 0)], {}, "Point")  # type: ignore[list-item]


# --------------------------------------------------------------- GeoPackage


def test_gpkg_two_layers_round_trip(tmp_path: Path) -> None:
    out = tmp_path / "isochrones.gpkg"
    layers = iso_layers()
    written = write_vector_layers(out, layers, crs=UTM54, metadata={"CAUTION": "planning aid"})
    assert written == [out]
    assert listing(tmp_path) == ["isochrones.gpkg"]
    listed = pyogrio.list_layers(out)
    assert [list(row) for row in listed] == [
        ["lines", "MultiLineString"],
        ["bands", "MultiPolygon"],
    ]

    info = pyogrio.read_info(out, layer="lines")
    assert list(info["fields"]) == ["minutes", "label"]
    assert info["features"] == 2
    assert CRS.from_user_input(info["crs"]) == CRS.from_epsg(32654)
    assert info["layer_metadata"]["DESCRIPTION"] == "isochrone lines"
    assert info["dataset_metadata"] == {"CAUTION": "planning aid"}

    meta, _, wkb, fields = pyogrio.raw.read(out, layer="bands")
    assert list(meta["fields"]) == ["min_minutes", "max_minutes", "label"]
    geoms = shapely.from_wkb(wkb)
    assert len(geoms) == 3 and all(shapely.is_valid(geoms))
    assert all(shapely.equals(geoms, np.array(layers[1].geometries, dtype=object)))
    assert_array_equal(fields[0], [0, 10, 20])
    assert_array_equal(fields[1][:2], [10.0, 20.0])
    assert np.isnan(fields[1][2])  # None -> null
    assert list(fields[2][:2]) == ["a", "b"] and fields[2][2] is None

    _, _, line_wkb, line_fields = pyogrio.raw.read(out, layer="lines")
    assert shapely.equals(shapely.from_wkb(line_wkb)[0], layers[0].geometries[0])
    assert list(line_fields[1]) == ["0:10", "0:20"]


def test_gpkg_refuses_existing_unless_overwrite(tmp_path: Path) -> None:
    out = tmp_path / "iso.gpkg"
    out.write_bytes(b"an older run")
    with pytest.raises(OutputExistsError, match=r"iso\.gpkg' exists; pass --overwrite"):
        write_vector_layers(out, iso_layers(), crs=UTM54)
    assert out.read_bytes() == b"an older run"
    write_vector_layers(out, iso_layers(), crs=UTM54, overwrite=True)
    assert pyogrio.read_info(out, layer="bands")["features"] == 3
    assert listing(tmp_path) == ["iso.gpkg"]


# --------------------------------------------------------------- Shapefile


def test_shapefile_set(tmp_path: Path) -> None:
    written = write_vector_layers(tmp_path / "iso.shp", iso_layers(), crs=UTM54)
    assert written == [tmp_path / "iso_lines.shp", tmp_path / "iso_bands.shp"]
    names = listing(tmp_path)
    for stem in ("iso_lines", "iso_bands"):
        for suffix in (".shp", ".shx", ".dbf", ".prj", ".cpg"):
            assert stem + suffix in names
    assert not any(n.startswith(".") for n in names)
    info = pyogrio.read_info(tmp_path / "iso_bands.shp")
    assert info["features"] == 3
    # Cut to the 10-character Shapefile limit, the same way shapefile_field_name says.
    # ttmap's documented short names (SHAPEFILE_FIELD_NAMES), not blind cuts.
    assert list(info["fields"]) == ["min_min", "max_min", "label"]
    assert shapefile_field_name("min_minutes") == "min_min"
    _, _, _, fields = pyogrio.raw.read(tmp_path / "iso_bands.shp")
    assert_array_equal(fields[0], [0, 10, 20])
    assert CRS.from_user_input(info["crs"]) == CRS.from_epsg(32654)
    assert (tmp_path / "iso_lines.cpg").read_text().strip().upper() in {"UTF-8", "UTF8"}


def test_shapefile_refusals(tmp_path: Path) -> None:
    (tmp_path / "iso_bands.dbf").write_bytes(b"old")
    with pytest.raises(OutputExistsError, match=r"iso_bands\.dbf' exists"):
        write_vector_layers(tmp_path / "iso.shp", iso_layers(), crs=UTM54)
    assert listing(tmp_path) == ["iso_bands.dbf"]
    long = VectorLayer(
        "x", [Point(0, 0)], {"arrival_min": [1.0], "arrival_minutes": [2.0]}, "Point"
    )
    with pytest.raises(
        InputDataError,
        match="columns 'arrival_min' and 'arrival_minutes' both become 'arrival_mi'",
    ):
        write_vector_layers(tmp_path / "sites.shp", [long], crs=UTM54)
    assert listing(tmp_path) == ["iso_bands.dbf"]


# --------------------------------------------------------------- GeoJSON


def test_geojson_reprojected_to_lonlat(tmp_path: Path) -> None:
    # On the central meridian of UTM zone 54N (141 E) at the equator.
    pts = VectorLayer("sites", [Point(500000.0, 0.0)], {"name": ["Cape Invented"]}, "Point")
    lines, _ = iso_layers()
    written = write_vector_layers(tmp_path / "out.geojson", [pts, lines], crs=UTM54)
    assert written == [tmp_path / "out_sites.geojson", tmp_path / "out_lines.geojson"]
    doc = json.loads(written[0].read_text())
    assert doc["features"][0]["properties"] == {"name": "Cape Invented"}
    lon, lat = doc["features"][0]["geometry"]["coordinates"]
    assert lon == pytest.approx(141.0, abs=1e-9)
    assert lat == pytest.approx(0.0, abs=1e-9)
    assert "crs" not in doc  # RFC 7946: WGS84 implied
    info = pyogrio.read_info(written[1])
    assert CRS.from_user_input(info["crs"]) == CRS.from_epsg(4326)
    geoms, _ = read_vector_geometries(written[1])
    x, y = shapely.get_coordinates(geoms[0]).T
    assert np.all((x > 140.0) & (x < 142.0)) and np.all((y > 35.0) & (y < 37.0))


def test_geojson_cut_at_antimeridian(tmp_path: Path) -> None:
    line = VectorLayer("edge", [LineString([(179.0, 0.0), (181.0, 2.0)])], {}, "MultiLineString")
    (out,) = write_vector_layers(tmp_path / "x.geojson", [line], crs="EPSG:4326")
    geoms, _ = read_vector_geometries(out)
    coords = shapely.get_coordinates(geoms[0])
    assert coords[:, 0].max() <= 180.0 and coords[:, 0].min() >= -180.0
    assert shapely.get_num_geometries(geoms[0]) == 2


def test_geojson_refuses_existing(tmp_path: Path) -> None:
    (tmp_path / "out_lines.geojson").write_text("{}")
    with pytest.raises(OutputExistsError, match=r"out_lines\.geojson' exists"):
        write_vector_layers(tmp_path / "out.geojson", iso_layers(), crs=UTM54)
    assert listing(tmp_path) == ["out_lines.geojson"]


# --------------------------------------------------------------- failures


@pytest.mark.parametrize("name", ["iso.gpkg", "iso.shp", "iso.geojson"])
def test_failure_in_second_layer_leaves_nothing(tmp_path: Path, monkeypatch, name: str) -> None:
    real_write = pyogrio.raw.write
    calls = []

    def flaky_write(path, *args, **kwargs):
        calls.append(path)
        if len(calls) == 2:
            raise pyogrio.errors.DataSourceError("simulated: no space left on device")
        return real_write(path, *args, **kwargs)

    monkeypatch.setattr(pyogrio.raw, "write", flaky_write)
    with pytest.raises(TtmapError, match=r"writing layer 'bands' .* failed .*free disk space"):
        write_vector_layers(tmp_path / name, iso_layers(), crs=UTM54)
    assert len(calls) == 2
    assert listing(tmp_path) == []


def test_write_refusals(tmp_path: Path) -> None:
    layers = iso_layers()
    with pytest.raises(InputDataError, match=r"vector format of '.*x\.kml' from its suffix"):
        write_vector_layers(tmp_path / "x.kml", layers, crs=UTM54)
    with pytest.raises(InputDataError, match="has the suffix of GPKG but driver 'GeoJSON'"):
        write_vector_layers(tmp_path / "x.gpkg", layers, crs=UTM54, driver="GeoJSON")
    with pytest.raises(InputDataError, match="vector driver 'KML' is unknown"):
        write_vector_layers(tmp_path / "x", layers, crs=UTM54, driver="KML")
    with pytest.raises(InputDataError, match="layer name.* lines given twice"):
        write_vector_layers(tmp_path / "x.gpkg", [layers[0], layers[0]], crs=UTM54)
    with pytest.raises(InputDataError, match="no layers to write"):
        write_vector_layers(tmp_path / "x.gpkg", [], crs=UTM54)
    with pytest.raises(InputDataError, match="vector CRS 'EPSG:0' is not understood"):
        write_vector_layers(tmp_path / "x.gpkg", layers, crs="EPSG:0")
    assert listing(tmp_path) == []


def test_output_paths() -> None:
    assert vector_output_paths("d/iso.geojson", ["a", "b"]) == [
        Path("d/iso_a.geojson"),
        Path("d/iso_b.geojson"),
    ]
    assert vector_output_paths("d/iso.gpkg", ["a", "b"]) == [Path("d/iso.gpkg")]


# --------------------------------------------------------------- reading


def sites_layer() -> VectorLayer:
    return VectorLayer(
        "sites",
        [Point(141.5, 38.2), Point(142.0, 39.0), shapely.multipoints([Point(140.9, 37.5)])],
        {"name": ["Harbour A", "Bay B", "Point C"], "walk_min": [12.0, 8.5, 20.0]},
        "Unknown",
    )


def test_read_points_round_trip(tmp_path: Path) -> None:
    out = tmp_path / "sites.gpkg"
    write_vector_layers(out, [sites_layer()], crs="EPSG:4326")
    names, xs, ys, attrs, crs = read_vector_points(out)
    assert names == ["Harbour A", "Bay B", "Point C"]
    assert_allclose(xs, [141.5, 142.0, 140.9])
    assert_allclose(ys, [38.2, 39.0, 37.5])
    assert list(attrs) == ["walk_min"]
    assert_allclose(attrs["walk_min"], [12.0, 8.5, 20.0])
    assert crs == CRS.from_epsg(4326)


def test_read_points_refusals(tmp_path: Path) -> None:
    gpkg = tmp_path / "mixed.gpkg"
    write_vector_layers(gpkg, iso_layers(), crs=UTM54)
    with pytest.raises(
        InputDataError, match=r"has 2 layers \(lines, bands\); choose one with --layer"
    ):
        read_vector_points(gpkg)
    with pytest.raises(InputDataError, match="has no layer 'coast'; choose one of lines, bands"):
        read_vector_points(gpkg, layer="coast")
    with pytest.raises(InputDataError, match=r"has no 'name' column \(columns: minutes, label\)"):
        read_vector_points(gpkg, layer="lines")
    with pytest.raises(InputDataError, match="holds MultiLineString geometries .*need points"):
        read_vector_points(gpkg, layer="lines", name_field="label")
    with pytest.raises(InputDataError, match="has no column 'site'"):
        read_vector_points(gpkg, layer="lines", name_field="site")

    dup = VectorLayer("s", [Point(0, 0), Point(1, 1)], {"Name": ["A", "A"]}, "Point")
    (dup_path,) = write_vector_layers(tmp_path / "dup.gpkg", [dup], crs="EPSG:4326")
    with pytest.raises(InputDataError, match="name.*'A' are used more than once"):
        read_vector_points(dup_path)
    blank = VectorLayer("s", [Point(0, 0), Point(1, 1)], {"name": ["A", None]}, "Point")
    (blank_path,) = write_vector_layers(tmp_path / "blank.gpkg", [blank], crs="EPSG:4326")
    with pytest.raises(
        InputDataError, match=r"row\(s\) 2 \(counting from 1\) have an empty 'name'"
    ):
        read_vector_points(blank_path)

    with pytest.raises(InputDataError, match="does not exist"):
        read_vector_points(tmp_path / "none.gpkg")
    text = tmp_path / "notes.txt"
    text.write_text("not a vector file")
    with pytest.raises(InputDataError, match="is not a vector file GDAL can read"):
        read_vector_points(text)


def test_read_geometries(tmp_path: Path) -> None:
    gpkg = tmp_path / "src.gpkg"
    layers = iso_layers()
    write_vector_layers(gpkg, layers, crs=UTM54)
    geoms, crs = read_vector_geometries(gpkg, layer="bands")
    assert crs == CRS.from_epsg(32654)
    assert len(geoms) == 3 and all(g.geom_type == "MultiPolygon" for g in geoms)
    assert geoms[0].equals(layers[1].geometries[0])

    nulls = VectorLayer("n", [Point(0, 0), None], {}, "Point")
    (null_path,) = write_vector_layers(tmp_path / "nulls.gpkg", [nulls], crs="EPSG:4326")
    with pytest.raises(
        InputDataError, match=r"1 feature\(s\) .*rows 2, counting from 1.* have no geometry"
    ):
        read_vector_geometries(null_path)


@pytest.mark.parametrize("name", ["empty.gpkg", "empty.shp", "empty.geojson"])
def test_empty_layer_keeps_field_types(tmp_path: Path, name: str) -> None:
    layer = VectorLayer(
        "lines",
        [],
        {"minutes": np.array([], dtype=float), "level": np.array([], dtype=np.int32), "label": []},
        "MultiLineString",
    )
    (out,) = write_vector_layers(tmp_path / name, [layer], crs=UTM54)
    info = pyogrio.read_info(out)
    assert info["features"] == 0
    if name.endswith(".geojson"):
        return  # GeoJSON has no schema apart from its features
    assert list(info["fields"]) == ["minutes", "level", "label"]
    assert info["ogr_types"][0] == "OFTReal"
    assert info["ogr_types"][1] in {"OFTInteger", "OFTInteger64"}
    assert info["ogr_types"][2] == "OFTString"


def test_site_table_and_coast_columns_get_distinct_documented_shapefile_names():
    """Every long column of the site table (two periods, clock times) and of the coast layer
    gets a short name of at most 10 characters, all distinct (ESRI Shapefile limit: dBASE)."""
    from pathlib import Path

    from ttmap.io.vector import SHAPEFILE_FIELD_NAMES

    site_cols = ["name", "lon", "lat", "status", "moved_m", "depth_m", "front_min", "earliest_min",
                 "latest_min", "energy_T300s_min", "window_T300s_min", "energy_T1200s_min",
                 "window_T1200s_min", "notification_delay_min", "minutes_left", "preparation_min",
                 "safe_ground_distance_m", "walking_speed_m_s", "minutes_needed", "margin_min",
                 "budget_status", "defaults_used", "front_utc", "earliest_utc", "latest_utc",
                 "energy_T300s_utc", "energy_T1200s_utc", "scenario", "earliest_for_site"]
    coast_cols = ["minutes", "minutes_max", "minutes_mean", "class_min", "class_max", "label",
                  "reached", "n_edges"]
    for cols in (site_cols, coast_cols):
        short = [shapefile_field_name(c) for c in cols]
        assert all(len(s.encode()) <= 10 for s in short), short
        assert len({s.lower() for s in short}) == len(short), short
    # Documented, name for name.
    doc = (Path(__file__).resolve().parents[2] / "docs" / "shapefile-fields.md").read_text()
    for long, short in SHAPEFILE_FIELD_NAMES.items():
        assert f"`{long}` | `{short}`" in doc
