"""The wave-path layer (ttmap.products.paths) and its drawing (ttmap.products.maps.draw_wave_paths).

External check: a route traced with :func:`ttmap.paths.trace_wave_paths` on the
analytic field of a point source in constant depth (T = distance / speed, the
eikonal solution, docs/references.md section 8) is cut at whole minutes at the
points the analytic field puts them: at distance ``k * 60 * speed`` from the
source, within half a cell (the tracer's own accuracy, docs/nesting.md).
"""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET

import numpy as np
import pytest
import shapely
from affine import Affine

from ttmap.errors import InputDataError
from ttmap.grid import Grid
from ttmap.io.vector import read_vector_geometries, write_vector_layers
from ttmap.paths import trace_wave_paths
from ttmap.products.paths import RoutePath, split_by_minutes, wave_path_layer, wave_paths_sld

SPEED_M_S = 50.0
CELL_M = 1000.0


def _analytic_route() -> tuple[RoutePath, tuple[float, float]]:
    g = Grid((60, 80), Affine(CELL_M, 0, 0, 0, -CELL_M, 60_000.0), "EPSG:32633")
    yy, xx = np.mgrid[0:60, 0:80] + 0.5
    src = (10.5, 30.5)  # (col, row) of the source cell centre
    t_s = np.hypot(xx - src[0], yy - src[1]) * CELL_M / SPEED_M_S
    site = (70_500.0, 15_500.0)
    (p,) = trace_wave_paths(g, t_s, [site[0]], [site[1]])
    assert p.end == "source" and p.line is not None
    xy = np.asarray(p.line.coords)
    return RoutePath("Site A", xy, p.time_min, ("basin",) * len(xy), p.end), (10_500.0, 29_500.0)


def test_split_points_lie_at_the_analytic_minute_distances():
    route, (sx, sy) = _analytic_route()
    layer = wave_path_layer([route], step_min=2.0)
    geoms = list(layer.geometries)
    t0 = np.asarray(layer.attributes["minutes_start"])
    t1 = np.asarray(layer.attributes["minutes_end"])
    assert all(isinstance(g, shapely.LineString) for g in geoms)
    assert (t1 > t0).all() and np.allclose(t0[1:], t1[:-1])
    # every inner cut at a whole multiple of 2 min, at distance t * 60 * speed from the source
    cuts = t1[:-1]
    assert np.allclose(cuts / 2.0, np.round(cuts / 2.0))
    for g, t in zip(geoms[:-1], cuts, strict=True):
        x, y = g.coords[-1]
        expected_m = t * 60.0 * SPEED_M_S
        assert abs(math.hypot(x - sx, y - sy) - expected_m) < 0.5 * CELL_M
    # the pieces join into the traced route
    joined = np.concatenate([np.asarray(g.coords)[(1 if i else 0):] for i, g in enumerate(geoms)])
    assert np.allclose(joined[[0, -1]], route.xy[[0, -1]])
    assert math.isclose(sum(g.length for g in geoms), shapely.LineString(route.xy).length, rel_tol=1e-9)
    assert set(layer.attributes["arrival_min"]) == {round(route.arrival_min, 3)}


def test_split_by_minutes_by_hand():
    xy = np.array([[0.0, 0.0], [3.0, 0.0], [3.0, 4.0]])
    pieces = split_by_minutes(xy, np.array([0.0, 3.0, 7.0]), 2.5)
    assert [(a, b) for _, a, b, _ in pieces] == [(0.0, 2.5), (2.5, 5.0), (5.0, 7.0)]
    assert np.allclose(pieces[0][0], [[0, 0], [2.5, 0]])
    assert np.allclose(pieces[1][0], [[2.5, 0], [3, 0], [3, 2]])
    assert np.allclose(pieces[2][0], [[3, 2], [3, 4]])
    with pytest.raises(InputDataError, match="step"):
        split_by_minutes(xy, np.array([0.0, 1.0, 2.0]), 0.0)


def test_route_refuses_mismatched_columns():
    with pytest.raises(InputDataError, match="one of each per vertex"):
        RoutePath("x", np.zeros((3, 2)), np.zeros(2), ("basin",) * 3)


def test_layer_written_and_read_back(tmp_path):
    route, _ = _analytic_route()
    layer = wave_path_layer([route])
    target = tmp_path / "wave_paths.gpkg"
    write_vector_layers(target, [layer], crs="EPSG:32633")
    geoms, crs = read_vector_geometries(target)
    assert len(geoms) == len(layer.geometries) and crs.to_epsg() == 32633
    assert all(g.geom_type == "LineString" for g in geoms)


def test_sld_parses_and_names_the_layer():
    root = ET.fromstring(wave_paths_sld())
    ns = {"sld": "http://www.opengis.net/sld"}
    assert root.find("sld:NamedLayer/sld:Name", ns).text == "wave_paths"
    assert root.find(".//sld:LineSymbolizer", ns) is not None


def test_draw_wave_paths_draws_line_and_arrowheads():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from ttmap.products.maps import draw_wave_paths

    route, _ = _analytic_route()
    fig, ax = plt.subplots()
    try:
        artists = draw_wave_paths(ax, [route.xy, np.zeros((1, 2))])
        lines = [a for a in artists if hasattr(a, "get_xydata")]
        assert len(lines) == 1 and np.allclose(lines[0].get_xydata(), route.xy)
        assert len(artists) == 4  # the line and three arrowheads; the one-point route is skipped
    finally:
        plt.close(fig)
