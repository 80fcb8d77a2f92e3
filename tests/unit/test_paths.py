"""Unit tests of ttmap.paths.trace_wave_paths: ends, order, inputs, wrapping grids."""

from __future__ import annotations

import numpy as np
import pytest
from affine import Affine

from ttmap import Grid
from ttmap.errors import InputDataError
from ttmap.paths import trace_wave_paths

G = Grid((30, 30), Affine(1000.0, 0, 0, 0, -1000.0, 30000.0), "EPSG:32601")


def _cone(src_col=5.0, src_row=15.0, speed=100.0):
    r, c = np.mgrid[0:30, 0:30].astype(float)
    return np.hypot(c - src_col, r - src_row) * 1000.0 / speed


def test_path_runs_from_source_to_site_with_increasing_times():
    t = _cone()
    p = trace_wave_paths(G, t, [25500.0], [14500.0])[0]
    xy = np.asarray(p.line.coords)
    assert p.end == "source"
    assert np.allclose(xy[-1], (25500.0, 14500.0))
    assert np.hypot(xy[0, 0] - 5500.0, xy[0, 1] - 14500.0) <= 500.0
    assert np.all(np.diff(p.time_s) > 0) and p.time_s.size == xy.shape[0]
    assert np.allclose(p.time_min, p.time_s / 60.0)


def test_path_stops_at_stop_time_and_at_land():
    t = _cone()
    p = trace_wave_paths(G, t, [25500.0], [14500.0], stop_time_s=100.0)[0]
    assert p.end == "source" and 100.0 - 5.01 <= p.time_s[0] <= 100.0
    t_wall = t.copy()
    t_wall[:, 12] = np.nan  # a wall of cells without time across the way
    p = trace_wave_paths(G, t_wall, [25500.0], [14500.0])[0]
    assert p.end == "no-time"
    assert np.asarray(p.line.coords)[0, 0] > 12000.0


def test_site_without_time_and_max_steps():
    t = _cone()
    t[0:3, 27:30] = np.nan
    paths = trace_wave_paths(G, t, [28500.0, 25500.0, 99999.0], [29500.0, 14500.0, 0.0], max_steps=3)
    assert [p.end for p in paths] == ["off-grid", "steps", "off-grid"]
    assert paths[0].line is None and paths[0].time_s.size == 0
    assert len(paths[1].line.coords) == 4


def test_bad_input_is_refused():
    with pytest.raises(InputDataError, match="arrival array shape"):
        trace_wave_paths(G, np.zeros((3, 3)), [0.0], [0.0])
    with pytest.raises(InputDataError, match="path step"):
        trace_wave_paths(G, _cone(), [0.0], [0.0], step_cells=2.0)
    with pytest.raises(InputDataError, match="one length"):
        trace_wave_paths(G, _cone(), [0.0, 1.0], [0.0])


def test_path_crosses_the_seam_of_a_global_grid():
    # 1-degree global grid, times from a point at lon 175: a site at lon -175 (185)
    # is reached across the antimeridian, and the line stays continuous.
    g = Grid((120, 360), Affine(1.0, 0, -180.0, 0, -1.0, 60.0), "EPSG:4326")
    lon = np.arange(360) - 179.5
    lat = 59.5 - np.arange(120)
    dlon = np.radians((lon[None, :] - 175.0 + 180.0) % 360.0 - 180.0)
    la, la0 = np.radians(lat[:, None]), np.radians(0.5)
    ang = np.arccos(np.clip(np.sin(la) * np.sin(la0) + np.cos(la) * np.cos(la0) * np.cos(dlon), -1, 1))
    t = ang * 6371e3 / 200.0
    for speed in (None, np.full(g.shape, 200.0)):  # as traced, and bent across the seam
        p = trace_wave_paths(g, t, [-175.5], [0.5], earth="sphere", speed_m_s=speed)[0]
        xy = np.asarray(p.line.coords)
        assert p.end == "source"
        assert np.all(np.abs(np.diff(xy[:, 0])) < 1.0)  # no jump of 360 degrees
        assert abs(((xy[0, 0] - 175.5 + 180.0) % 360.0) - 180.0) <= 1.0
        assert np.all(np.abs(xy[:, 1] - 0.5) < 0.5)  # along the equator


def test_bending_keeps_the_ends_and_times_and_avoids_cells_without_speed():
    # A wall of land (no time, no speed) in column 12, rows 0-19; times east of it
    # by way of a point below its end. The descent runs to just below the wall's
    # end; bent through speeds that know the wall, no vertex moves onto it, while
    # the same bending through speeds without the wall cuts into it.
    r, c = np.mgrid[0:30, 0:30].astype(float)
    direct = np.hypot(c - 5.0, r - 5.0)
    via = np.hypot(7.0, 17.0) + np.hypot(c - 12.0, r - 22.0)
    t = np.where(c > 12, via, direct) * 1000.0 / 100.0
    t[0:20, 12] = np.nan
    open_sea = np.full((30, 30), 100.0)
    walled = open_sea.copy()
    walled[0:20, 12] = np.nan
    traced, bent, cut = (trace_wave_paths(G, t, [25500.0], [24500.0], speed_m_s=s)[0]
                         for s in (None, walled, open_sea))

    def on_wall(p):
        xy = np.asarray(p.line.coords)
        col = np.floor(xy[:, 0] / 1000.0).astype(int)
        row = np.floor((30000.0 - xy[:, 1]) / 1000.0).astype(int)
        return int(((col == 12) & (row < 20)).sum())

    xy_t, xy_b = np.asarray(traced.line.coords), np.asarray(bent.line.coords)
    assert bent.end == traced.end == "no-time"
    assert xy_b.shape == xy_t.shape and np.allclose(xy_b[[0, -1]], xy_t[[0, -1]])
    assert np.allclose(bent.time_s[[0, -1]], traced.time_s[[0, -1]])
    assert np.all(np.diff(bent.time_s) > 0.0)
    assert on_wall(traced) == 0 and on_wall(bent) == 0 and on_wall(cut) > 0


def test_bad_speed_is_refused():
    with pytest.raises(InputDataError, match="speed array shape"):
        trace_wave_paths(G, _cone(), [25500.0], [14500.0], speed_m_s=np.ones((3, 3)))
