"""Tests of ttmap.products.coast: the coastal arrival layer. Invented data.

Reference geometry: a grid cell ``(r, c)`` is the square
``transform * [c, c + 1] x [r, r + 1]`` (the raster's affine, rasterio
convention), so the coast of a water mask is the linework shared by the union
of the water squares and the union of the land squares. That linework is
computed here independently with shapely's polygon union and intersection
(GEOS overlay), and each coastal edge's minutes are read back from the two
cells on either side of its midpoint.
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pyogrio.raw
import pytest
import shapely
from affine import Affine
from numpy.testing import assert_allclose

from ttmap.errors import InputDataError
from ttmap.io.vector import write_vector_layers
from ttmap.products.cautions import CAUTION_SHORT
from ttmap.products.coast import (
    COAST_LAYER_NAME,
    UNREACHED_LABEL,
    CoastSegment,
    CoastTable,
    coast_classes,
    coast_layer,
    coast_sld,
    coastal_arrival_lines,
    coastal_arrival_table,
)
from ttmap.products.palette import arrival_colors_hex

SLD = "{http://www.opengis.net/sld}"
OGC = "{http://www.opengis.net/ogc}"
CELL_M = 1000.0
#: North-up UTM-like grid, upper-left corner at (500 km, 4006 km).
UTM = Affine(CELL_M, 0.0, 500_000.0, 0.0, -CELL_M, 4_006_000.0)


def straight_coast() -> tuple[np.ndarray, np.ndarray]:
    """6 x 8 cells: water in columns 0-4, land in 5-7; time 2 r + 1 minutes (+0.1 c)."""
    water = np.zeros((6, 8), dtype=bool)
    water[:, :5] = True
    rows, cols = np.indices(water.shape)
    t = 2.0 * rows + 1.0 + 0.1 * cols
    t[~water] = np.nan
    return t, water


def reference_coast(water: np.ndarray, transform: Affine) -> shapely.Geometry:
    """Shared boundary of the water and land squares (GEOS overlay), lines only."""
    rows, cols = np.indices(water.shape)

    def squares(mask: np.ndarray) -> shapely.Geometry:
        r, c = rows[mask].astype(float), cols[mask].astype(float)
        x0, y0 = transform @ (c, r)
        x1, y1 = transform @ (c + 1.0, r + 1.0)
        boxes = shapely.box(
            np.minimum(x0, x1), np.minimum(y0, y1), np.maximum(x0, x1), np.maximum(y0, y1)
        )
        return shapely.union_all(boxes)

    shared = shapely.intersection(squares(water).boundary, squares(~water).boundary)
    parts = [
        p for p in shapely.get_parts(shared) if p.geom_type in ("LineString", "MultiLineString")
    ]
    return shapely.line_merge(shapely.union_all(parts))


def edge_pieces(geometry: shapely.Geometry) -> list[shapely.LineString]:
    """A stretch split back into its one-cell edges."""
    dense = shapely.segmentize(geometry, CELL_M)
    xy = np.asarray(dense.coords)
    return [shapely.LineString(xy[i : i + 2]) for i in range(len(xy) - 1)]


def water_side_minutes(edge: shapely.LineString, t: np.ndarray, water: np.ndarray) -> float:
    """Minutes of the water cell beside a one-cell edge (read from both sides of its midpoint)."""
    (x0, y0), (x1, y1) = edge.coords
    mx, my = (x0 + x1) / 2.0, (y0 + y1) / 2.0
    nx, ny = (y1 - y0) / CELL_M * 0.5 * CELL_M, -(x1 - x0) / CELL_M * 0.5 * CELL_M
    inv = ~UTM
    cells = []
    for sx, sy in ((mx + nx, my + ny), (mx - nx, my - ny)):
        c, r = inv @ (sx, sy)
        cells.append((math.floor(r), math.floor(c)))
    wet = [rc for rc in cells if water[rc]]
    dry = [rc for rc in cells if not water[rc]]
    assert len(wet) == 1 and len(dry) == 1, f"edge {edge.wkt} is not between water and land"
    return float(t[wet[0]])


# ---------------------------------------------------------------- geometry


def test_straight_coast_lies_on_the_cell_edges_with_the_water_cells_minutes() -> None:
    t, water = straight_coast()
    t_before, water_before = t.copy(), water.copy()
    segs = coastal_arrival_lines(t, water, UTM, class_interval_min=5.0)
    # Classes of 5 min: rows 0-1 (1.4, 3.4 min), rows 2-4 (5.4 .. 9.4), row 5 (11.4).
    assert [s.label for s in segs] == ["0:00-0:05", "0:05-0:10", "0:10-0:15"]
    x_coast = 500_000.0 + 5 * CELL_M  # the edge between columns 4 and 5
    expected = [
        ((x_coast, 4_006_000.0), (x_coast, 4_004_000.0)),
        ((x_coast, 4_004_000.0), (x_coast, 4_001_000.0)),
        ((x_coast, 4_001_000.0), (x_coast, 4_000_000.0)),
    ]
    for seg, ends in zip(segs, expected, strict=True):
        assert seg.geometry.geom_type == "LineString"
        coords = sorted(seg.geometry.coords, key=lambda p: -p[1])
        assert coords == sorted(ends, key=lambda p: -p[1])  # exact: no tolerance
    # Minutes are those of column 4, the water cells beside the coast.
    assert (segs[0].minutes_min, segs[0].minutes_max) == (1.4, 3.4)
    assert segs[1].minutes_min == pytest.approx(5.4) and segs[1].minutes_max == pytest.approx(9.4)
    assert segs[1].minutes_mean == pytest.approx(7.4)
    assert [s.n_edges for s in segs] == [2, 3, 1]
    assert (segs[2].class_min, segs[2].class_max) == (10.0, 15.0)
    assert all(s.reached for s in segs)
    np.testing.assert_array_equal(t, t_before)
    np.testing.assert_array_equal(water, water_before)


def test_random_coast_matches_the_shared_boundary_of_water_and_land_squares() -> None:
    rng = np.random.default_rng(7)
    water = rng.random((30, 40)) < 0.65
    rows, cols = np.indices(water.shape)
    t = np.hypot(rows - 3.0, cols - 5.0) * 1.7  # minutes, 0 to ~80
    t[~water] = np.nan
    segs = coastal_arrival_lines(t, water, UTM, class_interval_min=10.0)
    ours = shapely.union_all([s.geometry for s in segs])
    ref = reference_coast(water, UTM)
    # Same linework (GEOS overlay reference), nothing on the outer border of the grid.
    assert ours.length == pytest.approx(ref.length, rel=1e-12)
    assert shapely.symmetric_difference(ours, ref).length == pytest.approx(0.0, abs=1e-6)
    border = shapely.box(500_000.0, 3_976_000.0, 540_000.0, 4_006_000.0).exterior
    assert shapely.intersection(ours, border).length == 0.0
    # The edge count is the number of water/land neighbour pairs inside the grid.
    pairs = int((water[:, 1:] != water[:, :-1]).sum() + (water[1:, :] != water[:-1, :]).sum())
    assert sum(s.n_edges for s in segs) == pairs
    assert ref.length == pytest.approx(pairs * CELL_M)
    for seg in segs:
        g = seg.geometry
        assert g.geom_type == "LineString" and g.is_valid
        assert g.length == pytest.approx(seg.n_edges * CELL_M)
        minutes = [water_side_minutes(e, t, water) for e in edge_pieces(g)]
        assert len(minutes) == seg.n_edges
        assert seg.minutes_min == min(minutes) and seg.minutes_max == max(minutes)
        assert seg.minutes_mean == pytest.approx(float(np.mean(minutes)), rel=1e-12)
        assert seg.class_min <= seg.minutes_min and seg.minutes_max < seg.class_max
        assert seg.class_max - seg.class_min == 10.0
    assert [s.minutes_min for s in segs] == sorted(s.minutes_min for s in segs)


def test_island_in_one_class_is_a_closed_line_and_corner_touching_land_stays_apart() -> None:
    water = np.ones((6, 6), dtype=bool)
    water[1, 1] = False  # a one-cell island
    water[3, 4] = water[4, 3] = False  # two land cells touching at a corner
    t = np.where(water, 2.0, np.nan)
    segs = coastal_arrival_lines(t, water, Affine.identity())
    assert len(segs) == 3
    rings = [s.geometry for s in segs]
    assert all(g.is_ring and g.length == 4.0 for g in rings)
    expected = {shapely.box(1, 1, 2, 2), shapely.box(4, 3, 5, 4), shapely.box(3, 4, 4, 5)}
    assert {shapely.normalize(shapely.Polygon(g)) for g in rings} == {
        shapely.normalize(p) for p in expected
    }


def test_unreached_water_is_kept_and_flagged() -> None:
    t, water = straight_coast()
    t[4:, :] = np.nan  # rows 4-5: water the front never reaches
    segs = coastal_arrival_lines(t, water, UTM)
    reached = [s for s in segs if s.reached]
    unreached = [s for s in segs if not s.reached]
    assert len(unreached) == 1 and segs[-1] is unreached[0]
    u = unreached[0]
    assert u.label == UNREACHED_LABEL and u.n_edges == 2
    assert math.isnan(u.minutes_min) and math.isnan(u.minutes_max) and math.isnan(u.minutes_mean)
    assert math.isnan(u.class_min) and math.isnan(u.class_max)
    assert u.geometry.length == 2 * CELL_M
    assert sum(s.n_edges for s in reached) == 4


def test_nodata_counts_as_land_and_an_all_water_grid_has_no_coast() -> None:
    water = np.ones((4, 5), dtype=bool)
    assert coastal_arrival_lines(np.zeros((4, 5)), water, UTM) == []
    water[:, 0] = False  # nodata column on the west border: its edge with column 1 is coast
    t = np.full((4, 5), 3.0)
    t[:, 0] = np.nan
    segs = coastal_arrival_lines(t, water, UTM)
    assert len(segs) == 1 and segs[0].n_edges == 4 and segs[0].minutes_min == 3.0


def test_levels_define_the_classes_and_the_open_last_class() -> None:
    t, water = straight_coast()
    segs = coastal_arrival_lines(t, water, UTM, levels_min=[4.0, 8.0])
    assert [(s.class_min, s.class_max, s.label) for s in segs] == [
        (0.0, 4.0, "0:00-0:04"),
        (4.0, 8.0, "0:04-0:08"),
        (8.0, math.inf, "0:08 and later"),
    ]
    assert [s.n_edges for s in segs] == [2, 2, 2]
    assert coast_classes(segs) == [
        (0.0, 4.0, "0:00-0:04"),
        (4.0, 8.0, "0:04-0:08"),
        (8.0, None, "0:08 and later"),
    ]


def test_negative_minutes_form_their_own_classes() -> None:
    t, water = straight_coast()
    segs = coastal_arrival_lines(t - 6.0, water, UTM, class_interval_min=5.0)
    assert segs[0].class_min == -5.0 and segs[0].minutes_min == pytest.approx(-4.6)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"class_interval_min": 0.0}, "class interval 0.0 min must be a positive"),
        ({"class_interval_min": 1e-9}, "classes \\(more than 100000\\)"),
        ({"levels_min": [10.0, 5.0]}, "strictly increasing"),
        ({"levels_min": []}, "levels_min is empty"),
    ],
)
def test_bad_class_options_are_refused(kwargs: dict, match: str) -> None:
    t, water = straight_coast()
    with pytest.raises(InputDataError, match=match):
        coastal_arrival_lines(t, water, UTM, **kwargs)


def test_bad_arrays_are_refused() -> None:
    t, water = straight_coast()
    with pytest.raises(InputDataError, match="water_mask has shape \\(6, 7\\)"):
        coastal_arrival_lines(t, water[:, :7], UTM)
    with pytest.raises(InputDataError, match="must be a 2-D array"):
        coastal_arrival_lines(t[0], water[0], UTM)
    with pytest.raises(InputDataError, match="degenerate"):
        coastal_arrival_lines(t, water, Affine(0.0, 0, 0, 0, -1, 0))


# ---------------------------------------------------------------- layer and style


def test_layer_writes_to_geopackage_and_reads_back(tmp_path: Path) -> None:
    t, water = straight_coast()
    t[5, :] = np.nan
    segs = coastal_arrival_lines(t, water, UTM)
    layer = coast_layer(segs)
    assert layer.name == COAST_LAYER_NAME and CAUTION_SHORT in layer.description
    out = tmp_path / "coast.gpkg"
    write_vector_layers(out, [layer], crs="EPSG:32654")
    meta, _, wkb, fields = pyogrio.raw.read(out, layer=COAST_LAYER_NAME)
    cols = dict(zip(meta["fields"], fields, strict=True))
    geoms = shapely.from_wkb(wkb)
    assert len(geoms) == len(segs) == 3
    assert shapely.is_valid(geoms).all() and not shapely.is_empty(geoms).any()
    assert meta["geometry_type"] == "MultiLineString"
    assert [float(g.length) for g in geoms] == [s.geometry.length for s in segs]
    assert_allclose(cols["minutes"][:2], [1.4, 5.4])
    assert_allclose(cols["minutes_max"][:2], [3.4, 9.4])
    assert cols["label"].tolist() == ["0:00-0:05", "0:05-0:10", UNREACHED_LABEL]
    assert cols["reached"].tolist() == [True, True, False]
    assert np.isnan(cols["minutes"][2]) and np.isnan(cols["class_min"][2])
    assert cols["n_edges"].tolist() == [2, 3, 1]


def test_empty_layer_has_typed_columns() -> None:
    layer = coast_layer([])
    assert layer.attributes["minutes"].dtype == np.float64
    assert layer.attributes["reached"].dtype == np.bool_


@pytest.mark.parametrize("levels", [None, [3.0, 20.0, 45.0]])
def test_table_holds_the_same_stretches_as_the_records(levels) -> None:
    rng = np.random.default_rng(11)
    water = rng.random((40, 50)) < 0.7
    rows, cols = np.indices(water.shape)
    t = np.hypot(rows - 9.0, cols - 30.0) * 1.3
    t[~water] = np.nan
    t[30:, :10] = np.nan  # unreached water too
    segs = coastal_arrival_lines(t, water, UTM, class_interval_min=7.5, levels_min=levels)
    table = coastal_arrival_table(t, water, UTM, class_interval_min=7.5, levels_min=levels)
    assert isinstance(table, CoastTable) and len(table) == len(segs) > 50
    assert (~table.reached).any()
    for a, b in zip(table.segments(), segs, strict=True):
        assert type(a.minutes_min) is float and type(a.n_edges) is int
        assert a.geometry.equals_exact(b.geometry, 0.0)
        assert (a.label, a.n_edges) == (b.label, b.n_edges)
        for name in ("minutes_min", "minutes_max", "minutes_mean", "class_min", "class_max"):
            assert getattr(a, name) == getattr(b, name) or (
                math.isnan(getattr(a, name)) and math.isnan(getattr(b, name))
            )
    assert coast_classes(table) == coast_classes(segs)
    from_table, from_records = coast_layer(table), coast_layer(segs)
    assert list(from_table.attributes) == list(from_records.attributes)
    for name, column in from_records.attributes.items():
        np.testing.assert_array_equal(from_table.attributes[name], column)
        assert from_table.attributes[name].dtype == column.dtype
    assert all(
        a.equals_exact(b, 0.0)
        for a, b in zip(from_table.geometries, from_records.geometries, strict=True)
    )


def test_empty_table() -> None:
    table = coastal_arrival_table(np.zeros((4, 5)), np.ones((4, 5), dtype=bool), UTM)
    assert len(table) == 0 and table.segments() == [] and coast_classes(table) == []
    layer = coast_layer(table)
    assert layer.attributes["minutes"].dtype == np.float64 and layer.geometries == ()


def test_coast_sld_has_one_thick_rule_per_class_and_an_else_rule() -> None:
    t, water = straight_coast()
    segs = coastal_arrival_lines(t, water, UTM)
    classes = coast_classes(segs)
    colors = arrival_colors_hex(len(classes))
    text = coast_sld(classes, colors, title="First arrival along the coast")
    root = ET.fromstring(text.encode("utf-8"))
    assert root.get("version") == "1.0.0"
    assert root.find(f"{SLD}NamedLayer/{SLD}Name").text == COAST_LAYER_NAME
    assert root.find(f".//{SLD}UserStyle/{SLD}Abstract").text == CAUTION_SHORT
    rules = root.findall(f".//{SLD}Rule")
    assert len(rules) == len(classes) + 1
    for rule, (lo, _, label), color in zip(rules, classes, colors, strict=False):
        assert rule.find(f"{SLD}Title").text == label
        eq = rule.find(f"{OGC}Filter/{OGC}PropertyIsEqualTo")
        assert eq.find(f"{OGC}PropertyName").text == "class_min"
        assert float(eq.find(f"{OGC}Literal").text) == lo
        css = {c.get("name"): c.text for c in rule.iter(f"{SLD}CssParameter")}
        assert css["stroke"] == color and float(css["stroke-width"]) == 3.0
    last = rules[-1]
    assert last.find(f"{SLD}ElseFilter") is not None
    assert last.find(f"{SLD}Title").text == UNREACHED_LABEL


def test_coast_sld_refusals() -> None:
    with pytest.raises(InputDataError, match="2 classes but 1 colours"):
        coast_sld([(0.0, 5.0, "a"), (5.0, 10.0, "b")], ["#000000"], title="x")
    with pytest.raises(InputDataError, match="repeated"):
        coast_sld([(0.0, 5.0, "a"), (0.0, 10.0, "b")], ["#000000", "#ffffff"], title="x")
    with pytest.raises(InputDataError, match="line_width"):
        coast_sld([], [], title="x", line_width=0)


def test_segment_reached_property() -> None:
    g = shapely.LineString([(0, 0), (1, 0)])
    assert CoastSegment(1.0, 1.0, 1.0, 0.0, 5.0, "0:00-0:05", 1, g).reached
    nan = math.nan
    assert not CoastSegment(nan, nan, nan, nan, nan, UNREACHED_LABEL, 1, g).reached


def test_module_doctests_pass() -> None:
    import doctest

    import ttmap.products.coast as coast_module

    failed, attempted = doctest.testmod(coast_module)
    assert attempted >= 3 and failed == 0
