"""Pictures a planner reads at a glance: text inside the figure, labels that do not collide,
colour-bar ticks on the class edges, distinct source and site symbols, one wording,
and the natural-warning line on every chart.

The figures are measured with the Agg renderer (``fig.canvas.get_renderer()`` and
``Text.get_window_extent``), in display pixels.
"""

from __future__ import annotations

import itertools
import math
from unittest import mock

import matplotlib

matplotlib.use("Agg")

import numpy as np
import pytest
import shapely
from affine import Affine
from matplotlib.text import Text

from ttmap.products.cautions import CAUTION_TEXT, NATURAL_WARNING
from ttmap.products.compare import render_sites_by_scenarios
from ttmap.products.isochrones import default_levels_min, isochrone_lines, levels_from_interval
from ttmap.products.maps import (
    class_edges_min,
    diverging_classes,
    render_arrival_map,
    render_class_map,
    source_text,
)
from ttmap.products.timeline import TIMELINE_COLUMNS, render_timeline

LONG_SITE = "Ørnvik School and Community Evacuation Point at the Northern Harbour Breakwater"
LONG_SOURCE = (
    "Source: Mw 8.5 rupture 313 x 126 km, strike 185 deg, centre (lon -144.3500, lat -34.5000) "
    "(size: Strasser et al. 2010 (interface))  |  bathymetry: "
    "a_very_long_bathymetry_file_name_from_the_national_survey_2026_release_3.tif"
)
NORTH_UP = Affine(1000.0, 0.0, 400_000.0, 0.0, -1000.0, 5_200_000.0)


def _texts(fig):
    return [t for t in fig.findobj(Text) if t.get_visible() and t.get_text().strip()]


def drawn_texts(fig):
    """The texts a draw of the figure really draws (tick labels outside the view are not)."""
    drawn = []
    original = Text.draw

    def record(self, renderer):
        if self.get_visible() and self.get_text().strip():
            drawn.append(self)
        return original(self, renderer)

    with mock.patch.object(Text, "draw", record):
        fig.canvas.draw()
    return drawn


def assert_all_text_inside(fig, tol_px=1.0):
    """Every drawn text's window extent lies inside the figure box (as drawn when saved)."""
    texts = drawn_texts(fig)
    assert texts
    renderer = fig.canvas.get_renderer()
    box = fig.bbox
    for t in texts:
        bb = t.get_window_extent(renderer)
        assert bb.x0 >= box.x0 - tol_px and bb.x1 <= box.x1 + tol_px, (t.get_text(), bb, box)
        assert bb.y0 >= box.y0 - tol_px and bb.y1 <= box.y1 + tol_px, (t.get_text(), bb, box)


def _label_boxes(fig):
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    ax = fig.axes[0]
    out = []
    for t in ax.findobj(Text):
        if t.get_gid() in ("isochrone-label", "site-label") and t.get_text():
            out.append((t.get_gid(), t.get_text(), t.get_window_extent(renderer)))
    return out


def assert_no_label_overlap(fig):
    boxes = _label_boxes(fig)
    for (ga, ta, a), (gb, tb, b) in itertools.combinations(boxes, 2):
        overlap = min(a.x1, b.x1) > max(a.x0, b.x0) and min(a.y1, b.y1) > max(a.y0, b.y0)
        assert not overlap, f"{ga} {ta!r} overlaps {gb} {tb!r}"
    return boxes


def synthetic_field(shape=(120, 160)):
    """Arrival minutes of a constant-depth sea (analytic: distance / speed), land east."""
    rows, cols = np.indices(shape, dtype=np.float64)
    x, y = NORTH_UP @ (cols + 0.5, rows + 0.5)
    speed_m_min = math.sqrt(9.81 * 50.0) * 60.0  # long-wave speed sqrt(g h), 50 m deep
    t = np.hypot(x - 450_000.0, y - 5_140_000.0) / speed_m_min
    land = x > 530_000.0
    t[land] = np.nan
    return t, land


def timeline_table(names):
    n = len(names)
    cols = {c: [None] * n for c in TIMELINE_COLUMNS}
    cols["name"] = list(names)
    cols["front_min"] = [20.0 + 7 * i for i in range(n)]
    cols["earliest_min"] = [19.0 + 7 * i for i in range(n)]
    cols["latest_min"] = [21.0 + 7 * i for i in range(n)]
    cols["notification_delay_min"] = [10.0] * n
    cols["preparation_min"] = [3.0] * n
    cols["minutes_needed"] = [15.0] * n
    cols["minutes_left"] = [10.0 + 7 * i for i in range(n)]
    cols["margin_min"] = [-5.0 + 7 * i for i in range(n)]
    return cols


# ------------------------------------------------------------------ text that fits


def test_map_text_fits_with_long_names_and_source(tmp_path):
    t, land = synthetic_field()
    lines = isochrone_lines(t, NORTH_UP, default_levels_min(float(np.nanmax(t))))
    fig = render_arrival_map(
        t, NORTH_UP, land_mask=land, lines=lines,
        source_geometry=shapely.Point(450_000.0, 5_140_000.0),
        sites=[(LONG_SITE, 528_000.0, 5_150_000.0), ("Cove " * 12, 529_000.0, 5_100_000.0)],
        title="Tsunami arrival time: " + LONG_SITE + " and the whole invented coast beyond it",
        subtitle=LONG_SOURCE, is_geographic=False, caution=CAUTION_TEXT,
    )
    assert_all_text_inside(fig)
    title = next(x for x in fig.findobj(Text) if x.get_gid() == "ttmap-title")
    assert "\n" in title.get_text()  # wrapped, not cut
    assert " ".join(title.get_text().split()).endswith("the whole invented coast beyond it")
    assert_no_label_overlap(fig)


@pytest.mark.parametrize("width_in", [7.0, 10.0])
def test_timeline_text_fits_with_long_names(width_in):
    names = [LONG_SITE, "Cove", "A" * 70, "Harbour of the Seven Invented Lighthouses"]
    fig = render_timeline(timeline_table(names), title="Time budget per site: " + LONG_SOURCE,
                          width_in=width_in)
    assert_all_text_inside(fig)


def test_comparison_chart_text_fits_with_long_names():
    names = [LONG_SITE, "Cove"]
    table = {"name": [n for n in names for _ in range(2)], "scenario": ["a", "b"] * 2,
             "front_min": [20.0, 25.0, 31.0, 30.0], "earliest_for_site": [True, False, False, True]}
    fig = render_sites_by_scenarios(table, title="Front arrival at each site: " + LONG_SOURCE)
    assert_all_text_inside(fig)
    assert any(NATURAL_WARNING in " ".join(t.get_text().split()) for t in fig.findobj(Text))


def test_minutes_left_style_map_text_fits():
    t, land = synthetic_field()
    left = t - 15.0
    classes = diverging_classes(float(np.nanmin(left)), float(np.nanmax(left)), step=5.0,
                                label="Minutes left after a 15-min message delay at " + LONG_SITE)
    fig = render_class_map(left, NORTH_UP, classes=classes, land_mask=land,
                           sites=[(LONG_SITE, 450_000.0, 5_140_000.0)], title=LONG_SITE * 2,
                           subtitle=LONG_SOURCE, is_geographic=False)
    assert_all_text_inside(fig)


# ------------------------------------------------------------------ the demo map


@pytest.fixture(scope="module")
def demo_front():
    from ttmap.io.raster import read_bathymetry
    from ttmap.io.sites import read_sites
    from ttmap.jobs.demo import DEMO_SOURCE_LONLAT, demo_paths
    from ttmap.sources import Source
    from ttmap.traveltime import prepare_medium

    paths = demo_paths()
    bathy = read_bathymetry(paths.bathymetry)
    medium = prepare_medium(bathy.depth_m, bathy.grid)
    sites = read_sites(paths.sites)
    xs, ys = sites.positions_in(bathy.grid.crs)
    marks = list(zip(sites.names, xs, ys, strict=True))
    out = {}
    for key, src in {
        "point": Source.point(*DEMO_SOURCE_LONLAT),
        "rupture": Source.rupture_from_magnitude(-144.35, -34.5, strike_deg=185.0, mw=8.5),
    }.items():
        r = medium.travel_time(src)
        t = r.arrival_time_min
        out[key] = (t, bathy.grid, ~medium.water, marks, src)
    return out


@pytest.mark.parametrize("kind", ["point", "rupture"])
def test_demo_map_labels_and_site_names_do_not_overlap(demo_front, kind):
    t, grid, land, marks, src = demo_front[kind]
    levels = default_levels_min(float(np.nanmax(t)))
    lines = isochrone_lines(t, grid.transform, levels)
    fig = render_arrival_map(
        t, grid.transform, land_mask=land, lines=lines, source_geometry=src.geometry,
        sites=marks, title="Tsunami arrival time: front",
        subtitle="Source: " + source_text(src.label, src.params), is_geographic=True,
        source_kind=src.kind,
    )
    boxes = assert_no_label_overlap(fig)
    names = {text for gid, text, _ in boxes if gid == "site-label"}
    assert names == {m[0] for m in marks}  # every site is named
    iso = [(text, bb) for gid, text, bb in boxes if gid == "isochrone-label"]
    assert len(iso) >= 4
    # labels where the lines crowd near the towns: within 60 px of a site marker
    ax = fig.axes[0]
    site_px = ax.transData.transform(np.array([[m[1], m[2]] for m in marks]))
    near = [text for text, bb in iso
            if np.min(np.hypot(site_px[:, 0] - (bb.x0 + bb.x1) / 2,
                               site_px[:, 1] - (bb.y0 + bb.y1) / 2)) < 60.0]
    assert len(near) >= 2, iso
    assert_all_text_inside(fig)
    if kind == "rupture":
        texts = " ".join(x.get_text() for x in fig.findobj(Text))
        assert "Strasser et al. 2010 (interface)" in texts
        assert "strasser2010-interface" not in texts


# ------------------------------------------------------------------ colour-bar ticks


def _colorbar_ticks(fig):
    (cax,) = [a for a in fig.axes[0].child_axes if a.get_gid() == "colorbar"]
    return cax.get_yticks()


@pytest.mark.parametrize("interval_min", [10.0, 15.0, 5.0])
def test_colorbar_ticks_are_the_class_edges(interval_min):
    t, land = synthetic_field()
    tmax = float(np.nanmax(t))
    levels = levels_from_interval(interval_min, tmax)
    lines = isochrone_lines(t, NORTH_UP, levels)
    fig = render_arrival_map(t, NORTH_UP, land_mask=land, lines=lines, title="x",
                             is_geographic=False)
    edges = class_edges_min(levels, tmax)
    np.testing.assert_allclose(_colorbar_ticks(fig), edges)
    # the edges are 0 and the isochrone levels, every interval_min (exact multiples)
    np.testing.assert_allclose(np.diff(edges), interval_min)
    assert edges[0] == 0.0 and edges[-1] >= tmax


def test_class_colours_change_exactly_at_the_isochrone_levels():
    # Two cells either side of the 20-minute level get neighbouring class colours.
    t = np.array([[19.9, 20.1, 5.0, 35.0]])
    fig = render_arrival_map(t, NORTH_UP, land_mask=None, lines=[], title="x",
                             is_geographic=False, levels_min=[10.0, 20.0, 30.0, 40.0])
    np.testing.assert_allclose(_colorbar_ticks(fig), [0.0, 10.0, 20.0, 30.0, 40.0])
    (image,) = fig.axes[0].get_images()
    rgba = image.get_array()[0]
    assert not np.array_equal(rgba[0], rgba[1])


# ------------------------------------------------------------------ symbols and wording


def _markers(fig):
    return {ln.get_marker() for ln in fig.axes[0].get_lines()}


def test_source_star_and_site_circle_each_with_a_legend_entry():
    t, land = synthetic_field()
    fig = render_arrival_map(t, NORTH_UP, land_mask=land, lines=[],
                             source_geometry=shapely.Point(450_000.0, 5_140_000.0),
                             sites=[("Cove", 528_000.0, 5_150_000.0)], title="x",
                             is_geographic=False, source_kind="point")
    assert {"*", "o"} <= _markers(fig)
    (legend,) = fig.legends
    entries = [x.get_text() for x in legend.get_texts()]
    assert "Source (earthquake)" in entries and "Site" in entries


def test_one_wording_for_the_time_axis():
    t, land = synthetic_field()
    quake = render_arrival_map(t, NORTH_UP, land_mask=land, lines=[], title="x",
                               is_geographic=False, source_kind="rupture")
    area = render_arrival_map(t, NORTH_UP, land_mask=land, lines=[], title="x",
                              is_geographic=False, source_kind="area")
    timeline = render_timeline(timeline_table(["A", "B"]), title="x", source_kind="point")
    for fig, phrase in ((quake, "minutes after the earthquake"), (area, "minutes after the event"),
                        (timeline, "Minutes after the earthquake")):
        texts = [" ".join(x.get_text().split()) for x in fig.findobj(Text)]
        assert any(phrase in x for x in texts)
        assert not any("origin" in x for x in texts), texts
        assert any(NATURAL_WARNING in x for x in texts)  # the natural-warning line


def test_wave_paths_and_nests_have_legend_entries_that_fit():
    """What the map job draws after the map (wave paths, nest outlines) is named in its legend."""
    from ttmap.products.maps import (
        draw_nest_outline,
        draw_wave_paths,
        nest_outline_handle,
        wave_path_handle,
    )

    t, land = synthetic_field()
    lines = isochrone_lines(t, NORTH_UP, levels_from_interval(10.0, float(np.nanmax(t))))
    fig = render_arrival_map(t, NORTH_UP, land_mask=land, lines=lines, title="x", is_geographic=False,
                             sites=[("A very long invented site name", 420_000.0, 5_180_000.0)],
                             extra_legend=[wave_path_handle(), nest_outline_handle()])
    draw_wave_paths(fig.axes[0], [np.array([[405_000.0, 5_195_000.0], [420_000.0, 5_180_000.0]])])
    draw_nest_outline(fig.axes[0], np.array([[415_000.0, 5_175_000.0], [425_000.0, 5_175_000.0],
                                            [425_000.0, 5_185_000.0], [415_000.0, 5_175_000.0]]))
    (legend,) = fig.legends
    names = [t.get_text() for t in legend.get_texts()]
    assert "Wave path (arrows towards the site)" in names and "Nested finer grid (own map)" in names
    assert_all_text_inside(fig)
