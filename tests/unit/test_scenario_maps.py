"""Tests of ttmap.products.scenario_maps: the tie class, the comparison maps and their styles."""

from __future__ import annotations

import doctest
import xml.etree.ElementTree as ET

import matplotlib

matplotlib.use("Agg")

import numpy as np
import pytest
from affine import Affine

from ttmap.errors import InputDataError
from ttmap.grid import Grid
from ttmap.physics.constants import G_M_S2
from ttmap.products import scenario_maps
from ttmap.products.compare import envelope
from ttmap.products.scenario_maps import (
    TIE_COLOR,
    difference_classes,
    difference_sld,
    first_scenario_colors,
    first_scenario_sld,
    first_scenario_ties,
    render_difference_map,
    render_envelope_map,
    render_first_scenario_map,
    tie_label,
)
from ttmap.sources import Source
from ttmap.traveltime import compute_travel_time

DEPTH_M = 4000.0
C_M_MIN = float(np.sqrt(G_M_S2 * DEPTH_M)) * 60.0  # long-wave speed sqrt(g h), m/min
CELL_M = 1000.0
N = 90
# near the UTM central meridian (x = 500 km): map distances equal ground distances to 0.04 %
GRID = Grid((N, N), Affine(CELL_M, 0.0, 455_000.0, 0.0, -CELL_M, 5_000_000.0), "EPSG:32633")
SRC_A = (477_000.0, 4_955_000.0)
SRC_B = (523_000.0, 4_955_000.0)


def test_module_doctests_pass():
    failed, attempted = doctest.testmod(scenario_maps)
    assert attempted > 0 and failed == 0


@pytest.fixture(scope="module")
def two_sources():
    depth = np.full(GRID.shape, DEPTH_M)
    times = [
        compute_travel_time(depth, GRID, Source.point_xy(*xy)).arrival_time_min
        for xy in (SRC_A, SRC_B)
    ]
    return times


def test_ties_are_the_analytic_band_around_the_bisector(two_sources):
    # Two point sources in water of one depth: the fronts meet on the perpendicular
    # bisector, and |t_a - t_b| = |r_a - r_b| / c (analytic: a hyperbola family,
    # docs/references.md §8). Cells where that is clearly below the tolerance must be
    # a tie, cells clearly above it must not: no stripes of single "winners".
    tol = 0.5
    earliest, _ = envelope(two_sources)
    result = first_scenario_ties(earliest, iter(two_sources), n_scenarios=2, tolerance_min=tol)
    rows, cols = np.mgrid[0:N, 0:N]
    x, y = GRID.xy(rows, cols)
    dt = np.abs(np.hypot(x - SRC_A[0], y - SRC_A[1]) - np.hypot(x - SRC_B[0], y - SRC_B[1]))
    dt = dt / C_M_MIN
    margin = 0.1  # min: solver error of a few per cent of a 1 km cell crossing (0.08 min), rounded up
    tie = result.codes == 2
    assert result.tie_sets == [(0, 1)]
    assert tie[dt < tol - margin].all()
    assert not tie[dt > tol + margin].any()
    # elsewhere the nearer source wins alone
    nearer_a = np.hypot(x - SRC_A[0], y - SRC_A[1]) < np.hypot(x - SRC_B[0], y - SRC_B[1])
    clear = dt > tol + margin
    np.testing.assert_array_equal(result.codes[clear & nearer_a], 0)
    np.testing.assert_array_equal(result.codes[clear & ~nearer_a], 1)
    assert result.cells_first[0] + result.cells_first[1] + result.tie_cells[0] == N * N
    # the band has the width the tolerance predicts: |r_a - r_b| <= tol * c
    assert 0.9 < tie.sum() / (dt <= tol).sum() < 1.1


def test_zero_tolerance_keeps_only_exact_ties_and_bad_input_is_refused():
    a = np.array([[1.0, 2.0, np.nan]])
    b = np.array([[1.0, 2.1, np.nan]])
    env, _ = envelope([a, b])
    r = first_scenario_ties(env, [a, b], n_scenarios=2, tolerance_min=0.0)
    assert r.codes.tolist() == [[2, 0, -1]] and r.tie_sets == [(0, 1)]
    with pytest.raises(InputDataError, match="tolerance"):
        first_scenario_ties(env, [a, b], n_scenarios=2, tolerance_min=-1.0)
    with pytest.raises(InputDataError, match="n_scenarios"):
        first_scenario_ties(env, [a, b], n_scenarios=3)
    with pytest.raises(InputDataError, match="shape"):
        first_scenario_ties(env, [a, b[:, :2]], n_scenarios=2)


def test_more_than_64_scenarios_keep_their_tie_sets():
    n = 70
    fields = [np.full((1, 3), 50.0 + k) for k in range(n)]
    fields[3][0, 0] = fields[68][0, 0] = 1.0  # a tie of scenarios 3 and 68
    fields[69][0, 1] = 0.5  # 69 alone
    env, _ = envelope(fields)
    r = first_scenario_ties(env, fields, n_scenarios=n, tolerance_min=0.2)
    assert r.tie_sets == [(3, 68)]
    assert r.codes.tolist() == [[n, 69, 0]]


def test_styles_use_the_map_classes_and_name_every_tie():
    a = np.array([[1.0, 5.0], [9.0, np.nan]])
    b = np.array([[1.2, 2.0], [9.1, np.nan]])
    c = np.array([[1.1, 7.0], [30.0, np.nan]])
    env, _ = envelope([a, b, c])
    r = first_scenario_ties(env, [a, b, c], n_scenarios=3, tolerance_min=0.5)
    xml = first_scenario_sld(r, ["a", "b", "c"])
    root = ET.fromstring(xml.encode())
    entries = [e.attrib for e in root.iter("{http://www.opengis.net/sld}ColorMapEntry")]
    labels = [e["label"] for e in entries]
    assert f"{tie_label(0.5)}: a;b;c" in labels and f"{tie_label(0.5)}: a;b" in labels
    assert [e["color"] for e in entries if e["label"].startswith("tie")] == [TIE_COLOR] * 2
    assert TIE_COLOR not in first_scenario_colors(20)

    diff = np.array([[-12.0, 3.0], [0.5, np.nan]])
    classes = difference_classes(diff, "a", "b")
    assert 0.0 in classes.edges and classes.edges[0] == -classes.edges[-1]  # centred on zero
    sld = difference_sld(diff, "a", "b", "difference_a_minus_b")
    for color in classes.colors:
        assert color in sld


def test_maps_render_with_the_tie_class_in_the_colour_bar(two_sources):
    earliest, _ = envelope(two_sources)
    r = first_scenario_ties(earliest, iter(two_sources), n_scenarios=2)
    fig = render_first_scenario_map(r, GRID.transform, ["west", "east"], land_mask=None,
                                    is_geographic=False)
    (cax,) = fig.axes[0].child_axes
    labels = [t.get_text() for t in cax.get_yticklabels()]
    assert labels == ["west", "east", tie_label(0.5)]
    fig = render_envelope_map(earliest, GRID.transform, names=["west", "east"], land_mask=None,
                              lines=[], is_geographic=False)
    assert "Earliest arrival over 2 scenarios" in [t.get_text() for t in fig.texts]
    diff = two_sources[0] - two_sources[1]
    fig = render_difference_map(diff, GRID.transform, "west", "east", land_mask=None,
                                is_geographic=False)
    (cax,) = fig.axes[0].child_axes
    ticks = cax.get_yticks()
    assert 0.0 in ticks and ticks[0] == -ticks[-1]
