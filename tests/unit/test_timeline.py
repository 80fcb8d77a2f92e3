"""Tests of ttmap.products.timeline (Agg backend, figures never registered with pyplot)."""

from __future__ import annotations

import subprocess
import sys

import matplotlib

matplotlib.use("Agg")

import matplotlib.image as mpimg
import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib.colors import to_hex
from matplotlib.patches import Rectangle
from matplotlib.text import Text

from ttmap.errors import InputDataError
from ttmap.products.budget import warning_budget
from ttmap.products.cautions import CAUTION_SHORT
from ttmap.io.figures import save_figure
from ttmap.products.timeline import TIMELINE_COLUMNS, render_timeline, timeline_order

ALERT_BG = "#fbe6e2"


def text_colour(fig, text):
    (t,) = [t for t in fig.findobj(Text) if t.get_text() == text]
    return to_hex(t.get_color())


@pytest.fixture(autouse=True)
def _no_open_figures():
    yield
    assert plt.get_fignums() == []
    plt.close("all")


def make_table(rows):
    """Columns from (name, front_min, delay, prep, distance_m or None, speed) rows,
    budget from ttmap.products.budget with a +/-5 % band."""
    cols = {k: [] for k in TIMELINE_COLUMNS}
    cols["energy_T600s_min"] = []
    cols["energy_T300s_min"] = []
    for name, front, delay, prep, dist, speed in rows:
        early = front / 1.05 if front is not None else float("nan")
        b = warning_budget(early, delay, prep, dist, speed)
        cols["name"].append(name)
        cols["front_min"].append(float("nan") if front is None else front)
        cols["earliest_min"].append(early)
        cols["latest_min"].append(float("nan") if front is None else front / 0.95)
        cols["notification_delay_min"].append(delay)
        cols["preparation_min"].append(prep)
        cols["minutes_needed"].append(b.minutes_needed)
        cols["minutes_left"].append(b.minutes_left)
        cols["margin_min"].append(b.margin_min)
        cols["energy_T600s_min"].append(None if front is None else front + 1.0)
        cols["energy_T300s_min"].append(None if front is None else front + 4.0)
    return cols


ROWS = [
    ("Wide Margin", 60.0, 10.0, 3.0, 600.0, 1.0),  # margin 57.14 - 10 - 13 = 34.1
    ("No Distance", 30.0, 10.0, 3.0, None, 1.0),
    ("Too Late", 25.0, 10.0, 5.0, 1500.0, 1.0),  # margin 23.8 - 10 - 30 = -16.2
    ("Near Source", 6.0, 10.0, 3.0, 200.0, 1.0),  # wave before the message
    ("Unreached", None, 10.0, 3.0, 300.0, 1.0),
    ("Little Margin", 30.0, 10.0, 3.0, 600.0, 1.0),  # 28.57 - 10 - 13 = 5.57
]


def texts(fig):
    return [t.get_text() for t in fig.findobj(Text)]


def test_order_smallest_margin_first_without_margin_last():
    # margins: Wide 34.1, Too Late -16.2, Near Source -10.6 (left -4.3, needed 6.3),
    # Little 5.6; then without a margin: No Distance (left 18.6), Unreached (no arrival).
    order = timeline_order(make_table(ROWS))
    assert [ROWS[i][0] for i in order] == [
        "Too Late",
        "Near Source",
        "Little Margin",
        "Wide Margin",
        "No Distance",
        "Unreached",
    ]


def test_png_is_drawn_with_rows_caution_and_cue(tmp_path):
    fig = render_timeline(make_table(ROWS), title="Invented scenario")
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.get_yticklabels()]
    assert labels == [
        "Too Late",
        "Near Source",
        "Little Margin",
        "Wide Margin",
        "No Distance",
        "Unreached",
    ]
    # the caution, whitespace-normalised (it is wrapped to the width)
    joined = " ".join(" ".join(texts(fig)).split())
    assert " ".join(CAUTION_SHORT.split()) in joined
    assert any(t.get_gid() == "ttmap-caution" for t in fig.findobj(Text))
    all_text = " | ".join(texts(fig))
    for expected in (
        "margin -16.2 min",
        "before the message",
        "margin +5.6 min",
        "no distance given",
        "no arrival computed",
        "front to energy arrival, T = 600 s",
        "front to energy arrival, T = 300 s",
        "wave before people can leave",
        "Invented scenario",
    ):
        assert expected in all_text
    # The cue: exactly one row (Near Source: earliest 5.7 min < 10 + 3) is tinted.
    tinted = [p for p in ax.patches if to_hex(p.get_facecolor()) == ALERT_BG]
    assert len(tinted) == 1
    # Energy windows: one hatched strip per period for each row with an arrival (5 rows).
    hatched = [p for p in ax.patches if isinstance(p, Rectangle) and p.get_hatch()]
    assert len(hatched) == 2 * 5
    path = tmp_path / "timeline.png"
    save_figure(fig, path)
    image = mpimg.imread(path)
    rgb = image[..., :3].reshape(-1, 3)
    assert len(np.unique(np.round(rgb * 255).astype(int), axis=0)) > 100  # not blank


def test_margin_text_colours():
    rows = [
        ("Short", 40.0, 10.0, 3.0, 1200.0, 1.0),  # 38.10 - 10 - 23 = 5.10: not little
        ("Shorter", 40.0, 10.0, 3.0, 1400.0, 1.0),  # 38.10 - 10 - 26.33 = 1.76: little
        ("Negative", 40.0, 10.0, 3.0, 1800.0, 1.0),  # 38.10 - 10 - 33 = -4.90
        ("Unknown", 40.0, 10.0, 3.0, None, 1.0),
    ]
    fig = render_timeline(make_table(rows), title="t")
    assert text_colour(fig, "margin -4.9 min") == "#c2362b"
    assert text_colour(fig, "margin +1.8 min") == "#8a5a00"
    assert text_colour(fig, "margin +5.1 min") == "#222222"
    assert text_colour(fig, "no distance given") == "#222222"
    # With a budget_status column, its little-margin verdict is used (here: threshold 10 min).
    cols = make_table(rows)
    cols["budget_status"] = ["little margin: under 10 minutes", "", "", ""]
    fig = render_timeline(cols, title="t")
    assert text_colour(fig, "margin +5.1 min") == "#8a5a00"
    assert text_colour(fig, "margin +1.8 min") == "#222222"


def test_height_grows_with_the_number_of_sites_and_rows_stay_readable():
    heights = []
    for n in (8, 30):
        rows = [(f"Site {i:02d}", 20.0 + 3 * i, 10.0, 3.0, 100.0 * i, 1.0) for i in range(n)]
        fig = render_timeline(make_table(rows), title="t")
        ax = fig.axes[0]
        w, h = fig.get_size_inches()
        heights.append(h)
        assert w == 10.0
        assert len(ax.get_yticklabels()) == n
        # at least 0.3 inch (21.6 pt) per row for 8.5-pt names: labels cannot overlap
        assert ax.get_position().height * h / n >= 0.3
        assert all(t.get_fontsize() >= 8 for t in ax.get_yticklabels())
    assert heights[1] > heights[0] + 22 * 0.3


def test_draws_a_site_table_from_the_engine(tmp_path):
    from affine import Affine

    from ttmap import Grid, Source, prepare_medium
    from ttmap.io.sites import Site, SiteList
    from ttmap.products.sites import site_table, snap_sites

    grid = Grid((60, 60), Affine(1000.0, 0, 0, 0, -1000.0, 60_000.0), "EPSG:32756")
    depth = np.full(grid.shape, 1000.0)
    depth[:, 50:] = -10.0
    front = prepare_medium(depth, grid).travel_time(Source.point_xy(5_500.0, 30_500.0))
    sites = SiteList(
        (
            Site("East Quay", 50_200.0, 30_500.0, safe_ground_distance_m=500.0),
            Site("Far Inland", 59_000.0, 10_000.0),
        ),
        "EPSG:32756",
    )
    table = site_table(sites, snap_sites(sites, grid, front), front)
    fig = render_timeline(table, title="engine table")
    assert [t.get_text() for t in fig.axes[0].get_yticklabels()] == ["East Quay", "Far Inland"]
    assert "no arrival computed" in texts(fig)
    save_figure(fig, tmp_path / "t.pdf")
    assert (tmp_path / "t.pdf").stat().st_size > 1000


def test_bad_tables():
    with pytest.raises(InputDataError, match=r"lacks column\(s\) margin_min"):
        cols = make_table(ROWS)
        del cols["margin_min"]
        render_timeline(cols, title="t")
    empty = {k: [] for k in TIMELINE_COLUMNS}
    with pytest.raises(InputDataError, match=r"no sites"):
        render_timeline(empty, title="t")
    with pytest.raises(InputDataError, match=r"too narrow"):
        render_timeline(make_table(ROWS), title="t", width_in=3.0)


def test_module_import_does_not_load_matplotlib():
    code = "import sys, ttmap.products.timeline; print('matplotlib' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
