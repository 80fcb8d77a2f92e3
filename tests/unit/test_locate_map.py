"""The source-location map draws the misfit in the classes and colours of the misfit layer's style.

What a user sees in ``locate_map.png`` must be what QGIS shows with
``locate_misfit.qml``: the same class edges (the best cell's chi-square plus
the 2-dof quantiles and round far edges) and the same colours, blues exactly
on the region's cells. The pictures are read back from the Agg canvas (pixel
colours at cell centres) and measured (``Text.get_window_extent``, display
pixels).

References: the 2-dof chi-square quantile is ``-2 ln(1 - p)`` (closed form of
the chi-square distribution with 2 degrees of freedom; Numerical Recipes
ch. 15.6, from memory; docs/references.md section 12), checked here against
``scipy.stats.chi2.ppf``; near its minimum a chi-square surface of two
parameters is a quadratic form (same source, from memory), so the synthetic
fields are quadratic bowls.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterator

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pytest
import shapely
from affine import Affine
from matplotlib.colors import to_rgb
from scipy.stats import chi2

from test_picture_layout import drawn_texts
from ttmap.grid import Grid
from ttmap.products import locate_styles as ls
from ttmap.products.locate_map import misfit_colour_classes, misfit_tick_labels, render_locate_map

CELL_M = 1000.0
ORIGIN = Affine(CELL_M, 0.0, 400_000.0, 0.0, -CELL_M, 5_200_000.0)
LONG_NAME = "Ørnvik School and Community Evacuation Point at the Northern Breakwater"


def _discrete_colours(misfit: np.ndarray, classes: list[ls.RasterClass]) -> np.ndarray:
    """QGIS DISCRETE shader: a value takes the first class whose upper bound is >= it."""
    idx = np.searchsorted(np.array([c.upper for c in classes]), misfit, side="left")
    return np.array([c.color for c in classes])[idx]


def _bowl(shape: tuple[int, int], centre: tuple[int, int], a_cells: float, b_cells: float) -> np.ndarray:
    """chi2 - chi2_min of a quadratic form around ``centre`` (row, col), semi-axes in cells at Delta = 1."""
    rows, cols = np.indices(shape, dtype=np.float64)
    return ((cols - centre[1]) / a_cells) ** 2 + ((rows - centre[0]) / b_cells) ** 2


def _cell_xy(row: int, col: int) -> tuple[float, float]:
    x, y = ORIGIN @ (col + 0.5, row + 0.5)
    return float(x), float(y)


def _region(inside: np.ndarray) -> shapely.Geometry:
    boxes = []
    for r, c in zip(*np.nonzero(inside), strict=True):
        x0, y1 = ORIGIN @ (c, r)
        x1, y0 = ORIGIN @ (c + 1, r + 1)
        boxes.append(shapely.box(x0, y0, x1, y1))
    return shapely.union_all(boxes)


def _render(excess, water, region, gauges, best_rc, *, level, delta=None, subtitle="s"):
    grid = Grid(excess.shape, ORIGIN, "EPSG:32755")
    return render_locate_map(
        excess, grid, water, region, gauges, _cell_xy(*best_rc), title="Source location (test)",
        subtitle=subtitle, caution="Analysis aid only.\nPlanning aid only.",
        delta_chi2=float(chi2.ppf(level, 2)) if delta is None else delta, level=level,
    )


@pytest.fixture
def close_figures() -> Iterator[None]:
    yield
    plt.close("all")


# ------------------------------------------------------------------ the classes are the style's


@pytest.mark.parametrize("level", [0.5, 0.6827, 0.9, 0.95, 0.99, 0.999])
@pytest.mark.parametrize("max_excess", [None, 12.0, 116.0, 30000.0])
def test_norm_and_colours_are_the_layer_style(level: float, max_excess: float | None) -> None:
    best = 3.7
    classes = ls.misfit_classes(best, level, max_excess=max_excess)
    cmap, index_norm, value_norm, steps = misfit_colour_classes(level, max_excess)
    # one colour per class of the QML, in its order
    assert [to_rgb(cmap(k)) for k in range(cmap.N)] == [to_rgb(c.color) for c in classes]
    # the colour-bar edges are the class bounds above the best cell; the region's Delta is one of them
    finite = [c.upper - best for c in classes if math.isfinite(c.upper)]
    np.testing.assert_allclose(value_norm.boundaries, [0.0, *finite], rtol=1e-12, atol=1e-12)
    assert any(b == pytest.approx(-2.0 * math.log(1.0 - level), rel=1e-9) for b in value_norm.boundaries)
    # a value in the middle of each class, and one far above the last edge, takes that class's colour
    edges = [0.0, *finite]
    probes = [0.5 * (lo + hi) for lo, hi in zip(edges, edges[1:])] + [edges[-1] * 3.0 + 1.0]
    drawn = [to_rgb(cmap(value_norm(v))) for v in probes]
    expected = [to_rgb(c) for c in _discrete_colours(best + np.array(probes), classes)]
    assert drawn == expected
    # the image draws class indices: index k is colour k
    assert [to_rgb(cmap(index_norm(k))) for k in range(len(steps))] == [to_rgb(c.color) for c in classes]


def test_tick_labels_name_the_quantile_levels() -> None:
    labels = misfit_tick_labels(ls.misfit_steps(0.95, max_excess=30000.0))
    assert labels[0] == "0 (best cell)"
    # Numerical Recipes 15.6 table (from memory): 2.30 at 68.3 %, 5.99 at 95 %, 9.21 at 99 %, 13.8 at 99.9 %
    assert labels[1:5] == ["2.30 (68.27 %)", "5.99 (95 %)", "9.21 (99 %)", "13.82 (99.9 %)"]
    assert all("%" not in t for t in labels[5:]) and labels[-1] == "10000"


def test_level_defaults_to_the_one_of_delta() -> None:
    for level in (0.5, 0.95, 0.999):
        delta = float(chi2.ppf(level, 2))
        level_back = -math.expm1(-0.5 * delta)  # inverse of -2 ln(1 - p)
        assert [s.upper_excess for s in ls.misfit_steps(level_back, max_excess=500.0)] == pytest.approx(
            [s.upper_excess for s in ls.misfit_steps(level, max_excess=500.0)], rel=1e-12)


# ------------------------------------------------------------------ the pixels are the classes


def _cell_pixel_colours(fig, excess):
    """The majority colour of a 7 x 7 patch at each cell centre of the main map, and the cells it hides."""
    ax = fig.axes[0]
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    rgba = np.asarray(fig.canvas.buffer_rgba())[..., :3].astype(int)
    height = rgba.shape[0]
    hidden = [ax.get_legend().get_window_extent(renderer)]
    hidden += [child.get_window_extent(renderer) for child in ax.child_axes]
    hidden += [t.get_window_extent(renderer).padded(5) for t in ax.texts]
    marks = [xy for line in ax.get_lines() if line.get_marker() in ("^", "+")
             for xy in zip(line.get_xdata(), line.get_ydata(), strict=True)]
    out = {}
    for r, c in itertools.product(*(range(n) for n in excess.shape)):
        px, py = ax.transData.transform(_cell_xy(r, c))
        if any(b.x0 <= px <= b.x1 and b.y0 <= py <= b.y1 for b in hidden):
            continue
        if any(math.hypot(*(ax.transData.transform(m) - (px, py))) < 16.0 for m in marks):
            continue
        row, col = int(round(height - py)), int(round(px))
        patch = rgba[row - 3:row + 4, col - 3:col + 4].reshape(-1, 3)
        colours, counts = np.unique(patch, axis=0, return_counts=True)
        out[(r, c)] = tuple(colours[np.argmax(counts)])
    return out


@pytest.mark.parametrize(
    ("kind", "a_cells", "b_cells", "gauge_cells"),
    [
        ("compact", 1.2, 0.9, [(1, 14), (10, 14), (11, 6)]),
        # gauges all on one side (east): a long region open towards the west
        ("elongated", 4.5, 0.8, [(2, 15), (6, 15), (10, 15)]),
    ],
)
def test_misfit_pixels_are_the_style_colours_and_blue_exactly_on_the_region(
    close_figures, kind, a_cells, b_cells, gauge_cells
) -> None:
    shape, centre, best, level = (14, 18), (7, 9), 3.1, 0.95
    excess = _bowl(shape, centre, a_cells, b_cells)
    delta = float(chi2.ppf(level, 2))
    excess[9, 12] = delta  # a cell exactly on the region's edge: inside (misfit <= best + Delta)
    water = np.ones(shape, bool)
    water[:, -1] = False
    excess[~water] = np.nan
    misfit = best + excess
    inside = misfit <= best + delta
    gauges = [(f"G{k}", *_cell_xy(r, c), 0.1 * k) for k, (r, c) in enumerate(gauge_cells)]
    fig = _render(misfit - best, water, _region(inside), gauges, centre, level=level)

    classes = ls.misfit_classes(best, level, max_excess=float(np.nanmax(misfit - best)))
    expected = _discrete_colours(np.where(water, misfit, 0.0), classes)
    pixels = _cell_pixel_colours(fig, excess)
    inside_rgb = {tuple(round(255 * v) for v in to_rgb(h)) for h in ls.INSIDE_COLORS}
    seen_inside = seen_outside = 0
    for (r, c), got in pixels.items():
        if not water[r, c]:
            assert got[0] == got[1] == got[2], f"land cell {(r, c)} not grey: {got}"
            continue
        want = tuple(round(255 * v) for v in to_rgb(expected[r, c]))
        assert np.abs(np.subtract(got, want)).max() <= 2, f"cell {(r, c)} drawn {got}, style {want}"
        assert (got in inside_rgb) == bool(inside[r, c]), (r, c, got)
        seen_inside += bool(inside[r, c])
        seen_outside += not inside[r, c]
    assert seen_inside >= 4 and seen_outside >= 100
    assert (9, 12) in pixels and pixels[(9, 12)] in inside_rgb
    # the classes drawn in the picture cover most of the style's classes
    drawn = {v for v in pixels.values()}
    assert len(drawn & {tuple(round(255 * v) for v in to_rgb(c.color)) for c in classes}) >= len(classes) - 2


def test_inset_draws_the_same_classes(close_figures) -> None:
    shape, centre = (40, 50), (20, 30)
    excess = _bowl(shape, centre, 1.2, 0.9)
    inside = excess <= chi2.ppf(0.95, 2)
    fig = _render(excess, np.ones(shape, bool), _region(inside), [], centre, level=0.95)
    ax = fig.axes[0]
    (inset,) = ax.child_axes
    # the inset zooms on the region (its view holds the region's cells, and is smaller than the map)
    x0, x1 = inset.get_xlim()
    rx0, ry0, rx1, ry1 = _region(inside).bounds
    assert x0 < rx0 and rx1 < x1 and (x1 - x0) < 0.6 * CELL_M * shape[0]
    main_img = [im for im in ax.get_images() if im.get_gid() == "misfit"]
    ins_img = [im for im in inset.get_images() if im.get_gid() == "misfit"]
    assert len(main_img) == len(ins_img) == 1
    np.testing.assert_array_equal(main_img[0].to_rgba(main_img[0].get_array()),
                                  ins_img[0].to_rgba(ins_img[0].get_array()))


# ------------------------------------------------------------------ text that fits


def _overlap(a, b) -> bool:
    return min(a.x1, b.x1) > max(a.x0, b.x0) and min(a.y1, b.y1) > max(a.y0, b.y0)


@pytest.mark.parametrize("level", [0.5, 0.95, 0.999])
@pytest.mark.parametrize("max_excess", [12.0, 30000.0])
def test_colour_bar_text_fits_and_does_not_collide(close_figures, level, max_excess) -> None:
    shape, centre = (14, 18), (7, 9)
    excess = _bowl(shape, centre, 1.2, 0.9)
    excess *= max_excess / float(excess.max())
    inside = excess <= chi2.ppf(level, 2)
    # a long name where its label has room (gauge labels are placed as before, right of the gauge)
    gauges = [(LONG_NAME, *_cell_xy(5, 1), 0.4), ("Gannix Jetty", *_cell_xy(12, 14), -0.2)]
    fig = _render(excess, np.ones(shape, bool), _region(inside), gauges, centre, level=level,
                  subtitle="best cell lon -143.975, lat -34.792; origin 2029-12-31T23:59:53+00:00; " * 3)
    texts = drawn_texts(fig)
    renderer = fig.canvas.get_renderer()
    box = fig.bbox
    for t in texts:  # every text inside the figure
        bb = t.get_window_extent(renderer)
        assert box.x0 - 1 <= bb.x0 and bb.x1 <= box.x1 + 1 and box.y0 - 1 <= bb.y0 and bb.y1 <= box.y1 + 1, (
            t.get_text(), bb)
    (cax,) = [a for a in fig.axes if a.get_gid() == "colorbar"]
    ticks = [t for t in cax.get_yticklabels() if t.get_text()]
    steps = ls.misfit_steps(level, max_excess=float(excess.max()))
    assert [t.get_text() for t in ticks] == misfit_tick_labels(steps)
    label = cax.yaxis.label
    sides = [t for t in cax.texts if t.get_gid() == "class-side"]
    assert [t.get_text() for t in sides] == ["inside", "outside"]
    boxes = [(t.get_text(), t.get_window_extent(renderer)) for t in [*ticks, label, *sides]]
    for (na, a), (nb, b) in itertools.combinations(boxes, 2):
        assert not _overlap(a, b), f"{na!r} overlaps {nb!r}"
    # the side words sit between the map and the bar, beside their classes; the label right of the ticks
    map_box = fig.axes[0].get_window_extent(renderer)
    bar = cax.get_window_extent(renderer)
    for t in sides:
        bb = t.get_window_extent(renderer)
        assert map_box.x1 <= bb.x0 and bb.x1 <= bar.x0
    n_in = sum(s.inside for s in steps)
    ins_bb, out_bb = (t.get_window_extent(renderer) for t in sides)
    split_y = bar.y0 + bar.height * n_in / (len(steps) - 1)
    assert ins_bb.y1 <= split_y + 1 and out_bb.y0 >= split_y - 1
    assert label.get_window_extent(renderer).x0 >= max(t.get_window_extent(renderer).x1 for t in ticks)
    assert label.get_window_extent(renderer).height <= bar.height + 1


def test_no_inset_when_the_region_is_not_small(close_figures) -> None:
    """A region as large as the map gets no zoom (it would show less than the map itself)."""
    shape, centre = (14, 18), (7, 9)
    excess = _bowl(shape, centre, 20.0, 20.0)
    inside = excess <= chi2.ppf(0.95, 2)
    assert inside.all()
    fig = _render(excess, np.ones(shape, bool), _region(inside), [], centre, level=0.95)
    assert fig.axes[0].child_axes == []


def test_gauge_labels_face_away_from_the_best_cell_and_stay_clear_of_the_bar(close_figures) -> None:
    """West of the best cell a label goes left; at the right edge a long one turns inwards."""
    shape, centre = (14, 18), (7, 9)
    excess = _bowl(shape, centre, 1.2, 0.9)
    inside = excess <= chi2.ppf(0.95, 2)
    gauges = [("West Gauge", *_cell_xy(3, 4), 0.1), ("East Gauge", *_cell_xy(3, 12), 0.1),
              (LONG_NAME, *_cell_xy(11, 17), -0.3)]
    fig = _render(excess, np.ones(shape, bool), _region(inside), gauges, centre, level=0.95)
    renderer = fig.canvas.get_renderer()
    ax = fig.axes[0]
    (cax,) = [a for a in fig.axes if a.get_gid() == "colorbar"]
    labels = {t.get_text().split("\n")[0]: t for t in ax.texts if t.get_text().split("\n")[0] in
              {"West Gauge", "East Gauge", LONG_NAME}}
    to_px = ax.transData.transform
    west = labels["West Gauge"].get_window_extent(renderer)
    east = labels["East Gauge"].get_window_extent(renderer)
    assert west.x1 <= to_px(_cell_xy(3, 4))[0]  # left of its gauge
    assert east.x0 >= to_px(_cell_xy(3, 12))[0]  # right of its gauge
    long_box = labels[LONG_NAME].get_window_extent(renderer)
    assert long_box.x1 < cax.get_window_extent(renderer).x0  # turned inwards, clear of the bar


def test_zoom_inset_hides_no_gauge_label_nor_the_legend(close_figures) -> None:
    """With a gauge in three corners, the inset moves to a free place (here an edge middle)."""
    shape, centre = (60, 80), (30, 40)
    excess = _bowl(shape, centre, 2, 1.5)
    inside = excess <= chi2.ppf(0.95, 2)
    gauges = [("West Gauge", *_cell_xy(10, 10), 0.1), ("East Harbour", *_cell_xy(12, 70), 0.1),
              ("Long Name Evacuation Point", *_cell_xy(50, 78), -0.3)]
    water = np.ones(shape, bool)
    water[:, 76:] = False
    water[50, 76:] = True
    fig = _render(excess, water, _region(inside), gauges, centre, level=0.95)
    renderer = fig.canvas.get_renderer()
    ax = fig.axes[0]
    (inset,) = [a for a in ax.child_axes]
    ib = inset.get_window_extent(renderer)
    covered = [ax.get_legend().get_window_extent(renderer)]
    covered += [t.get_window_extent(renderer) for t in ax.texts if t.get_text().strip()]
    covered += [ax.transData.transform((x, y)) for _, x, y, _ in gauges]
    for c in covered:
        if hasattr(c, "x0"):
            assert not _overlap(ib, c), c
        else:
            assert not (ib.x0 <= c[0] <= ib.x1 and ib.y0 <= c[1] <= ib.y1), c
