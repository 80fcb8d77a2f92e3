"""Tests of ttmap.products.maps (Agg backend, figures never left open)."""

from __future__ import annotations

import io
import math
import subprocess
import sys

import matplotlib

matplotlib.use("Agg")

import matplotlib.image as mpimg
import matplotlib.pyplot as plt
import numpy as np
import pytest
import shapely
from affine import Affine
from matplotlib.collections import QuadMesh
from matplotlib.colors import to_hex, to_rgb
from matplotlib.image import AxesImage
from matplotlib.text import Text
from numpy.testing import assert_allclose

from ttmap.errors import InputDataError
from ttmap.products.cautions import CAUTION_LINES, CAUTION_SHORT, CAUTION_TEXT
from ttmap.products.isochrones import isochrone_lines
from ttmap.products.maps import (
    COLORBAR_LABEL,
    DEFAULT_CMAP,
    _LAND_RGBA,
    _decimate,
    _decimation,
    _display_stride,
    _resolve_cmap,
    arrival_classes,
    class_edges_min,
    render_arrival_map,
)
from ttmap.io.figures import save_figure
from ttmap.products.palette import arrival_colors_hex

CELL_M = 1000.0
SPEED_M_S = math.sqrt(9.80665 * 4000.0)
NORTH_UP = Affine(CELL_M, 0.0, 400_000.0, 0.0, -CELL_M, 5_200_000.0)
SOURCE_XY = (460_000.0, 5_150_000.0)


@pytest.fixture(autouse=True)
def _no_open_figures():
    yield
    assert plt.get_fignums() == []  # nothing was registered with pyplot
    plt.close("all")


def case(transform=NORTH_UP, shape=(100, 120)):
    """Cone of arrival times around SOURCE_XY with a land block on the west side."""
    rows, cols = np.indices(shape, dtype=np.float64)
    x, y = transform @ (cols + 0.5, rows + 0.5)
    time_min = np.hypot(x - SOURCE_XY[0], y - SOURCE_XY[1]) / SPEED_M_S / 60.0
    land = x < 420_000.0
    land |= np.hypot(x - 480_000.0, y - 5_130_000.0) < 6_000.0  # an island
    time_min[land] = np.nan
    return time_min, land


def figure_texts(fig):
    return [" ".join(t.get_text().split()) for t in fig.findobj(Text) if t.get_text()]


def render(time_min, land, transform=NORTH_UP, **kwargs):
    levels = np.arange(1.0, 7.0)
    lines = isochrone_lines(time_min, transform, levels)
    options = {
        "land_mask": land,
        "lines": lines,
        "source_geometry": shapely.Point(SOURCE_XY),
        "sites": [("Port North", 440_000.0, 5_180_000.0), ("Cove", 425_000.0, 5_140_000.0)],
        "title": "Test scenario",
        "subtitle": "constant depth 4000 m",
        "is_geographic": False,
        "figsize": (8.0, 6.5),
        "dpi": 80,
    }
    options.update(kwargs)
    return render_arrival_map(time_min, transform, **options)


def test_png_has_map_colours_texts_and_caution(tmp_path):
    time_min, land = case()
    fig = render(time_min, land)
    path = tmp_path / "map.png"
    save_figure(fig, path)
    assert path.is_file()
    image = mpimg.imread(path)
    assert image.shape[:2] == (round(6.5 * 80), round(8.0 * 80))
    rgb = image[..., :3].reshape(-1, 3)
    assert len(np.unique(np.round(rgb * 255).astype(int), axis=0)) > 300
    # Colours from the middle of the ramp and the land grey are drawn.
    edges = class_edges_min(np.arange(1.0, 7.0), float(np.nanmax(time_min)))
    colors = [to_rgb(c) for c in arrival_classes(edges, label="").colors]
    for color in (colors[1], colors[len(colors) // 2], (0.80, 0.79, 0.77)):
        nearest = np.min(np.abs(rgb - np.asarray(color)).max(axis=1))
        assert nearest < 0.02, color
    texts = figure_texts(fig)
    assert any(" ".join(CAUTION_SHORT.split()) in t for t in texts)
    assert COLORBAR_LABEL in texts
    assert {"Test scenario", "constant depth 4000 m", "Easting (m)", "Northing (m)"} <= set(texts)
    assert {"Port North", "Cove"} <= set(texts)
    labels = [t for t in texts if t in {f"0:0{m}" for m in range(1, 7)}]
    # at most two labels a line: one near the sites (the coast), one in open water
    assert 1 <= len(labels) <= 12
    assert max(labels.count(t) for t in labels) <= 2


def test_custom_caution_appears_instead():
    time_min, land = case()
    fig = render(time_min, land, caution="Exercise only, do not publish.")
    texts = figure_texts(fig)
    assert any("Exercise only, do not publish." in t for t in texts)
    assert not any(CAUTION_SHORT[:40] in t for t in texts)


def test_full_caution_text_is_listed():
    time_min, land = case()
    fig = render(time_min, land, caution=CAUTION_TEXT, figsize=(10.0, 8.0))
    (footer,) = [t for t in fig.findobj(Text) if t.get_gid() == "ttmap-caution"]
    shown = " ".join(footer.get_text().split())
    for line in CAUTION_LINES:
        assert f"\u2022 {line}" in shown


def test_pdf_is_written(tmp_path):
    time_min, land = case()
    path = tmp_path / "map.pdf"
    save_figure(render(time_min, land), path)
    assert path.read_bytes()[:5] == b"%PDF-"


def test_save_figure_writes_exactly_the_given_path(tmp_path):
    time_min, land = case()
    fig = render(time_min, land)
    path = tmp_path / "map.png.part"
    save_figure(fig, path, format="png")
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["map.png.part"]
    with pytest.raises(InputDataError, match="format='png'"):
        save_figure(fig, tmp_path / "map.jpg")
    assert not (tmp_path / "map.jpg").exists()


def test_geographic_axes_and_aspect():
    transform = Affine(0.05, 0.0, 140.0, 0.0, -0.05, 42.0)  # 140-146 E, 37-42 N
    shape = (100, 120)
    rows, cols = np.indices(shape, dtype=np.float64)
    lon, lat = transform @ (cols + 0.5, rows + 0.5)
    time_min = np.hypot((lon - 143.0) * np.cos(np.radians(lat)), lat - 39.5) * 3.0
    fig = render_arrival_map(
        time_min,
        transform,
        land_mask=np.zeros(shape, bool),
        lines=[],
        title="geo",
        is_geographic=True,
        dpi=60,
    )
    ax = fig.axes[0]
    assert ax.get_xlabel() == "Longitude (°)" and ax.get_ylabel() == "Latitude (°)"
    assert_allclose(ax.get_aspect(), 1.0 / math.cos(math.radians(39.5)), rtol=1e-12)
    assert_allclose(ax.get_xlim(), (140.0, 146.0))
    assert_allclose(ax.get_ylim(), (37.0, 42.0))


def test_large_grid_is_decimated():
    shape = (900, 1300)
    time_min, land = case(shape=shape)
    fig = render(time_min, land, max_pixels=50_000)
    images = [im for im in fig.axes[0].get_images() if isinstance(im, AxesImage)]
    assert images
    for image in images:
        cells = image.get_array().shape[:2]  # RGBA: (rows, cols, 4)
        assert 0 < cells[0] * cells[1] <= 50_000
        assert cells == (900 // 5, 1300 // 5)  # stride 5


def test_grid_finer_than_the_drawn_box_is_sampled_to_its_pixels():
    # 1500 x 1800 cells on an 8 x 6.5 in figure at 80 dpi: the map box is a few
    # hundred pixels across, so the picture keeps about one cell per pixel.
    shape = (1500, 1800)
    fine = Affine(100.0, 0.0, 400_000.0, 0.0, -100.0, 5_200_000.0)
    time_min, land = case(shape=shape, transform=fine)
    fig = render(time_min, land, fine)
    fig.canvas.draw()
    (image,) = fig.axes[0].get_images()
    rows, cols = image.get_array().shape[:2]
    bbox = fig.axes[0].get_window_extent()  # the drawn map box, pixels
    assert rows >= bbox.height - 1 and cols >= bbox.width - 1  # never fewer cells than pixels
    assert rows < 2 * bbox.height + 2 or cols < 2 * bbox.width + 2  # but not twice as many
    assert _display_stride(shape, (bbox.width, bbox.height)) == 1800 // cols


def test_display_stride_keeps_one_cell_per_pixel():
    assert _display_stride((2000, 2000), (800.0, 800.0)) == 2
    assert _display_stride((2000, 2000), (1001.0, 1001.0)) == 1
    assert _display_stride((4800, 7200), (1100.0, 733.0)) == 6
    assert _display_stride((10, 10), (0.0, 500.0)) == 1


def test_decimation_keeps_cells_in_place():
    stride = _decimation((4800, 7200), 2_000_000)
    assert stride == 5 and (4800 // stride) * (7200 // stride) <= 2_000_000
    assert _decimation((10, 10), 2_000_000) == 1
    values = np.arange(37 * 53, dtype=float).reshape(37, 53)
    transform = Affine(0.5, 0.0, 10.0, 0.0, -0.25, 60.0)
    sub, sub_transform = _decimate(values, transform, 4)
    assert sub.shape == (9, 13)
    for i, j in [(0, 0), (3, 7), (8, 12)]:
        row, col = np.argwhere(values == sub[i, j])[0]
        # the decimated pixel centre is the centre of the original cell it shows
        assert_allclose(sub_transform @ (j + 0.5, i + 0.5), transform @ (col + 0.5, row + 0.5))


def test_south_up_grid_is_drawn_north_up():
    south_up = Affine(CELL_M, 0.0, 400_000.0, 0.0, CELL_M, 5_100_000.0)
    time_min, land = case(south_up)
    fig = render(time_min, land, south_up)
    image = fig.axes[0].get_images()[0]
    drawn = np.asarray(image.get_array())  # RGBA bytes
    # imshow draws row 0 at the top: it must be the northernmost row of the grid
    colorbar = fig.axes[0].child_axes[0]._colorbar  # the colour bar's mappable
    expected = colorbar.mappable.to_rgba(np.ma.masked_invalid(time_min[::-1]), bytes=True)
    land_grey = np.round(np.asarray(_LAND_RGBA) * 255).astype(np.uint8)
    expected[land[::-1]] = land_grey
    assert_allclose(drawn, expected, atol=0)
    assert (drawn[land[::-1]] == land_grey).all() and not (drawn[~land[::-1]] == land_grey).all()
    assert_allclose(image.get_extent(), (400_000.0, 520_000.0, 5_100_000.0, 5_200_000.0))


def test_rotated_grid_is_drawn_as_mesh():
    rotated = (
        Affine.translation(400_000.0, 5_200_000.0)
        @ Affine.rotation(20.0)
        @ Affine.scale(CELL_M, -CELL_M)
    )
    time_min, land = case(rotated)
    fig = render(time_min, land, rotated)
    assert any(isinstance(c, QuadMesh) for c in fig.axes[0].collections)


def test_polygon_source_and_all_nan_field_render(tmp_path):
    time_min = np.full((40, 50), np.nan)
    fig = render_arrival_map(
        time_min,
        NORTH_UP,
        land_mask=None,
        lines=[],
        source_geometry=shapely.box(410_000.0, 5_170_000.0, 430_000.0, 5_190_000.0),
        title="empty",
        is_geographic=False,
        dpi=50,
    )
    texts = figure_texts(fig)
    assert "Source area" in texts and "No arrival computed" in texts
    save_figure(fig, tmp_path / "empty.png")
    assert (tmp_path / "empty.png").stat().st_size > 0


def test_default_colours_match_the_shared_palette():
    time_min, land = case()
    fig = render(time_min, land)
    mappable = fig.axes[0].child_axes[0]._colorbar.mappable  # what the image and bar use
    early, late = arrival_colors_hex(2)  # the ramp the style files use
    assert to_hex(mappable.cmap(mappable.norm(0.0))) == early
    assert to_hex(mappable.cmap(mappable.norm(np.nanmax(time_min)))) == late
    image = np.asarray(fig.axes[0].get_images()[0].get_array())
    source_row, source_col = 50, 60  # the cell of SOURCE_XY: the earliest colour
    assert to_hex(image[source_row, source_col] / 255.0) == to_hex(
        mappable.cmap(mappable.norm(time_min[source_row, source_col]))
    )


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"land_mask": np.zeros((3, 3), bool)}, "land_mask has shape"),
        ({"cmap": "no-such-map"}, "unknown colour map"),
        ({"max_pixels": 0}, "max_pixels"),
        ({"figsize": (3.0, 2.0)}, "too little room"),
        ({"sites": [("only a name",)]}, "name, x, y"),
    ],
)
def test_bad_options(kwargs, match):
    time_min, land = case()
    with pytest.raises(InputDataError, match=match):
        render(time_min, land, **kwargs)


def test_empty_source_is_not_drawn():
    time_min, land = case()
    fig = render(time_min, land, source_geometry=shapely.MultiPoint())
    assert "Source" not in figure_texts(fig)


def test_module_import_does_not_load_matplotlib():
    code = "import sys, ttmap.products.maps; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_dense_lines_are_simplified_for_drawing(monkeypatch):
    from matplotlib.collections import LineCollection

    from ttmap.products import maps

    transform = Affine(250.0, 0.0, 400_000.0, 0.0, -250.0, 5_200_000.0)
    time_min, land = case(transform, shape=(400, 480))
    lines = isochrone_lines(time_min, transform, [1.0, 2.0, 3.0])
    n_vertices = sum(shapely.get_num_coordinates(line.geometry) for line in lines)

    def drawn_vertices():
        fig = render_arrival_map(
            time_min, transform, land_mask=land, lines=lines, title="t", is_geographic=False, dpi=50
        )
        (collection,) = [c for c in fig.axes[0].collections if c.get_gid() == "isochrones"]
        assert isinstance(collection, LineCollection)
        return sum(len(seg) for seg in collection.get_segments())

    assert drawn_vertices() == n_vertices
    monkeypatch.setattr(maps, "_MAX_LINE_VERTICES", 10)
    assert drawn_vertices() < n_vertices / 2


def test_isochrones_have_a_faint_casing_underneath():
    from matplotlib.colors import to_rgba

    transform = Affine(250.0, 0.0, 400_000.0, 0.0, -250.0, 5_200_000.0)
    time_min, land = case(transform, shape=(200, 240))
    lines = isochrone_lines(time_min, transform, [1.0, 2.0, 3.0])
    fig = render_arrival_map(
        time_min, transform, land_mask=land, lines=lines, title="t", is_geographic=False, dpi=50
    )
    by_gid = {c.get_gid(): c for c in fig.axes[0].collections}
    casing, ink = by_gid["isochrone-casing"], by_gid["isochrones"]
    assert casing.get_zorder() < ink.get_zorder()
    assert len(casing.get_segments()) == len(ink.get_segments()) > 0
    assert casing.get_linewidth()[0] > ink.get_linewidth()[0]
    assert tuple(casing.get_edgecolor()[0]) == to_rgba("white", 0.4)
    assert not ink.get_path_effects()  # drawn by Agg in one call, not path by path
    fig.savefig(io.BytesIO(), format="png")


def test_caution_texts_cover_the_required_points():
    assert len(CAUTION_SHORT) < 200 and "\n" not in CAUTION_SHORT
    assert CAUTION_TEXT.isascii() and CAUTION_SHORT.isascii()  # safe in tags and CSV
    assert CAUTION_TEXT.splitlines() == list(CAUTION_LINES)
    short = CAUTION_SHORT.lower()
    for words in (
        "planning aid",
        "not a tsunami warning",
        "warning centres",
        "emergency management",
        "wave heights",
        "flooding",
    ):
        assert words in short, words
    full = CAUTION_TEXT.lower()
    for words in (
        "planning aid",
        "not a tsunami warning",
        "all-clear",
        "earthquake",
        "high ground",
        "do not wait",
        "before any official message",
        "series of waves",
        "first wave is often not the largest",
        "bathymetry",
        "near the source",
        "shallow",
        "wave heights",
        "flooding",
        "never go to the shore",
    ):
        assert words in full, words


# ---------------------------------------------------------------------------
# Source names, colour classes (issue 14)
# ---------------------------------------------------------------------------


def test_scaling_laws_have_human_names_that_match_their_citations():
    from ttmap.physics.scaling import SCALING_RELATIONS
    from ttmap.products.maps import source_text

    for rel in SCALING_RELATIONS.values():
        first_author = rel.citation.split(",")[0]
        year = rel.citation.split("(")[1][:4]
        assert rel.display_name.startswith(first_author) and year in rel.display_name, rel.key
        label = f"Mw 8 ({rel.key}) rupture 160 x 84 km"
        shown = source_text(label, {"scaling_relation": rel.key})
        assert rel.key not in shown and rel.display_name in shown
    assert source_text("invented demo earthquake", {}) == "invented demo earthquake"


def test_diverging_classes_are_red_below_zero_and_blue_above():
    from ttmap.products.maps import diverging_classes

    classes = diverging_classes(-12.0, 47.0, step=5.0, label="x")
    edges = np.asarray(classes.edges)
    assert 0.0 in edges and edges[0] <= -12.0 and edges[-1] >= 47.0
    np.testing.assert_allclose(np.diff(edges), 5.0)
    rgb = np.array([to_rgb(c) for c in classes.colors])
    below = (edges[:-1] + edges[1:]) / 2.0 < 0.0
    assert (rgb[below, 0] > rgb[below, 2]).all()  # red over blue
    assert (rgb[~below, 2] > rgb[~below, 0]).all()  # blue over red
    # darker away from zero on both sides (sum of channels falls)
    assert np.all(np.diff(rgb[below].sum(axis=1)) > 0)
    assert np.all(np.diff(rgb[~below].sum(axis=1)) < 0)
