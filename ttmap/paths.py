"""Wave paths: the route of the first wave from the source to a site.

The first-arrival field ``T`` of the eikonal equation ``|grad T| = 1 / c``
has rays along its gradient (Fermat's principle): the fastest route to a
point is traced back by following ``-grad T`` from it until ``T`` stops
decreasing, i.e. until the source. :func:`trace_wave_paths` integrates

    dx/ds = -grad T / |grad T|

from each site, with a midpoint (second-order Runge-Kutta) step of half a
cell, ``grad T`` interpolated bilinearly from central differences at the
cell centres (one-sided next to land or unreached cells).

On a lon/lat grid the descent is done on the Mercator plane of the grid
(rows spaced in isometric latitude, as the solve itself): Mercator is
conformal, so the plane's gradient direction is the ground's, and the path
mapped back to longitude/latitude is the ray on the ellipsoid (a geodesic
where the depth is constant), not a straight line in degrees.

A path stops where ``T`` would not decrease any more (at a point source,
within half a cell of it; on the edge or inside of an area source, where the
times are flat), where it runs into cells without a time (land, unreached),
at ``stop_time_s``, or after ``max_steps``. It is returned from its source
end to the site, with the arrival time interpolated at every vertex.

Given the solve's speeds (``speed_m_s``), each descent path is then bent to
the least travel time through them with its ends fixed (Fermat's principle;
ray bending, as in seismic ray tracing): from coarse to fine vertex spacing
(every 16th, 8th, 4th vertex of the descent), every other interior vertex
moves to the best of nine positions around it (a cell's half, quarter and
eighth), the segments' times summed over each sample's own cell speed (no
interpolation, so a speed step stays a step). The descent alone follows the
gradient of a field that resolves a speed step to a cell: along a shelf edge
the slow cells next to it carry the direct wave earlier than the first deep
cells, and a head wave turns off the edge a few cells late; bending puts the
turn where Snell's law does. The times along a bent path are its own travel
time from the source end, scaled to the field's times at both ends.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import shapely

from ttmap._typing import BoolArray, EarthModel, FloatArray, IntArray
from ttmap.errors import InputDataError
from ttmap.grid import Grid
from ttmap.physics.constants import MEAN_EARTH_RADIUS_M, WGS84_A_M, WGS84_E, WGS84_E2

__all__ = ["WavePath", "trace_wave_paths", "PATH_STEP_CELLS"]

#: Step of the descent, in grid cells.
PATH_STEP_CELLS: float = 0.5

# Relative disagreement of the two one-sided differences beyond which a cell is
# taken to sit on a kink of the field and the upwind difference is used.
_KINK = 0.5

#: Why a path ended: ``source`` (times stopped decreasing, or ``stop_time_s``
#: was reached), ``no-time`` (it ran into land or unreached cells), ``steps``
#: (``max_steps`` taken), ``off-grid`` (the site has no arrival time).
_ENDS = ("source", "no-time", "steps", "off-grid")


@dataclass(frozen=True)
class WavePath:
    """The first wave's route to one site.

    Attributes
    ----------
    line : shapely.LineString or None
        From the source end to the site, in the grid's CRS (longitudes kept
        continuous on lon/lat grids); None when the site has no arrival time.
    time_s : ndarray of shape (vertices,), float64, seconds
        Arrival time at each vertex (increasing along the line).
    end : str
        Why the descent stopped: "source", "no-time", "steps" or "off-grid".
    """

    line: shapely.LineString | None
    time_s: FloatArray = field(repr=False)
    end: str

    @property
    def time_min(self) -> FloatArray:
        """Arrival time at each vertex, minutes."""
        return self.time_s / 60.0


class _Field:
    """Arrival times with bilinear values and gradients at fractional (row, col)."""

    def __init__(self, grid: Grid, time_s: FloatArray, earth: EarthModel) -> None:
        self.t = time_s
        self.rows = grid.rows
        self.wrap = grid.wraps_x
        self.ncols = grid.cols - 1 if grid.has_seam_column else grid.cols
        tr = grid.transform
        self.geo = grid.is_geographic
        if self.geo:
            self.e = WGS84_E if earth == "wgs84" else 0.0
            self.sx = math.radians(abs(tr.a))  # plane units (radius 1) per column
            self.dlat = math.radians(abs(tr.e))
            self.lat0, self.lat_step = math.radians(tr.f + 0.5 * tr.e), math.radians(tr.e)
        else:
            u = grid.linear_unit_m
            self.sx, self.sy0 = abs(tr.a) * u, abs(tr.e) * u

    def sy(self, v: FloatArray) -> FloatArray:
        """Plane length of one row step at fractional row ``v``."""
        if not self.geo:
            return np.full(np.shape(v), self.sy0)
        phi = self.lat0 + self.lat_step * v
        s2 = np.sin(phi) ** 2
        # d(psi)/d(phi) of the isometric latitude (Snyder 1987, from eq. 7-7 by differentiation).
        return np.asarray((1.0 - self.e**2) / ((1.0 - self.e**2 * s2) * np.cos(phi)) * self.dlat)

    def at(self, r: IntArray, c: IntArray) -> FloatArray:
        """Times at integer cells (NaN off the grid)."""
        if self.wrap:
            c = np.mod(c, self.ncols)
        ok = (r >= 0) & (r < self.rows) & (c >= 0) & (c < self.ncols if self.wrap else c < self.t.shape[1])
        out = np.full(r.shape, np.nan)
        out[ok] = self.t[r[ok], c[ok]]
        return out

    def _corners(self, v: FloatArray, u: FloatArray) -> list[tuple[IntArray, IntArray, FloatArray]]:
        r0, c0 = np.floor(v).astype(np.intp), np.floor(u).astype(np.intp)
        wr, wc = v - r0, u - c0
        return [
            (r0 + dr, c0 + dc, (wr if dr else 1.0 - wr) * (wc if dc else 1.0 - wc))
            for dr in (0, 1)
            for dc in (0, 1)
        ]

    def value(self, v: FloatArray, u: FloatArray) -> FloatArray:
        """Bilinear time at fractional cells, over finite corners (NaN if they weigh < 1/2)."""
        return self.value_and_support(v, u)[0]

    def value_and_support(self, v: FloatArray, u: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Bilinear time and the weight of its finite corners (1 away from land)."""
        total = np.zeros(v.shape)
        acc = np.zeros(v.shape)
        for r, c, w in self._corners(v, u):
            t = self.at(r, c)
            ok = np.isfinite(t)
            total += np.where(ok, w, 0.0)
            acc += np.where(ok, w * np.where(ok, t, 0.0), 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(total >= 0.5, acc / total, np.nan), total

    @staticmethod
    def _one_sided(t0: FloatArray, lo: FloatArray, hi: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Backward and forward differences per index step (NaN where a side is missing)."""
        return t0 - lo, hi - t0

    @staticmethod
    def _diff(lo: FloatArray, hi: FloatArray, t_lo: FloatArray, t_hi: FloatArray, t0: FloatArray,
              scale: FloatArray) -> FloatArray:
        """Derivative per index step along one axis.

        Central where both sides agree (a smooth field); where they differ by
        more than a quarter of the largest one-sided difference (a kink: a
        speed step, the source, a meeting of fronts) the upwind side, the one
        the wave came from, as the fast march itself; zero along an axis where
        the cell is a minimum; one-sided next to land or unreached cells.
        """
        both = np.isfinite(lo) & np.isfinite(hi)
        smooth = both & (np.abs(hi - lo) <= _KINK * scale)
        upwind = np.where(t_lo < t_hi, lo, hi)
        d = np.where(smooth, 0.5 * (lo + hi), np.where(both, upwind, 0.0))
        d = np.where(both & ~smooth & (np.minimum(t_lo, t_hi) >= t0), 0.0, d)
        d = np.where(~both & np.isfinite(hi), hi, d)
        d = np.where(~both & np.isfinite(lo), lo, d)
        return np.asarray(np.where(np.isfinite(d), d, 0.0))

    def direction(self, v: FloatArray, u: FloatArray) -> tuple[FloatArray, FloatArray, BoolArray]:
        """Unit descent step in index units per plane length, and where it exists.

        Returns ``(dv, du, ok)``: moving by ``s`` plane units along ``-grad T``
        changes the fractional row by ``s * dv`` and the column by ``s * du``.
        """
        gv = np.zeros(v.shape)
        gu = np.zeros(v.shape)
        total = np.zeros(v.shape)
        for r, c, w in self._corners(v, u):
            t0 = self.at(r, c)
            ok = np.isfinite(t0)
            t_n, t_s = self.at(r - 1, c), self.at(r + 1, c)
            t_w, t_e = self.at(r, c - 1), self.at(r, c + 1)
            bv, fv = self._one_sided(t0, t_n, t_s)
            bu, fu = self._one_sided(t0, t_w, t_e)
            scale = np.nanmax(np.abs(np.stack([bv, fv, bu, fu])), axis=0, initial=0.0)
            dv = self._diff(bv, fv, t_n, t_s, t0, scale)
            du = self._diff(bu, fu, t_w, t_e, t0, scale)
            w = np.where(ok, w, 0.0)
            gv += w * dv
            gu += w * du
            total += w
        with np.errstate(invalid="ignore", divide="ignore"):
            gv /= total
            gu /= total
        sy = self.sy(v)
        gx, gy = gu / self.sx, gv / sy  # plane gradient (time per plane length)
        norm = np.hypot(gx, gy)
        ok = np.isfinite(norm) & (norm > 0.0) & (total >= 0.5)
        with np.errstate(invalid="ignore", divide="ignore"):
            return -gy / norm / sy, -gx / norm / self.sx, ok

# Bending: levels of vertex spacing (in descent vertices), moves per level, and the
# first move in cells (halved every _BEND_ITERS // 3 moves).
_BEND_STRIDES = (16, 8, 4)
_BEND_ITERS = 12
_BEND_MOVE_CELLS = 0.5
_MOVES = np.array([[0, 0], [1, 0], [-1, 0], [0, 1], [0, -1], [1, 1], [1, -1], [-1, 1], [-1, -1]],
                  dtype=float)


class _Slowness:
    """Ground travel time of straight segments in (row, col) index space.

    The slowness is the cell's own (nearest cell centre, no interpolation, so a
    speed step stays a step); the ground length of an index displacement is
    ``hypot(kx * du, ky * dv)`` with ``kx``, ``ky`` the metres per column and per
    row at the sample's row (on lon/lat grids the ellipsoid's parallel and
    meridian radii, Snyder 1987, eqs. 4-18 and 4-20).
    """

    def __init__(self, grid: Grid, speed_m_s: Any, earth: EarthModel, f: _Field) -> None:
        c = np.asarray(speed_m_s, dtype=np.float64)
        if c.shape != grid.shape:
            raise InputDataError(
                f"speed array shape {c.shape} differs from the grid shape {grid.shape}")
        with np.errstate(invalid="ignore", divide="ignore"):
            self.s = np.where(np.isfinite(c) & (c > 0.0), 1.0 / c, np.inf)
        self.f = f
        self.geo = grid.is_geographic
        if self.geo:
            self.a = WGS84_A_M if earth == "wgs84" else MEAN_EARTH_RADIUS_M
            self.e2 = WGS84_E2 if earth == "wgs84" else 0.0
        else:
            self.kx0, self.ky0 = f.sx, f.sy0

    def _k(self, v: FloatArray) -> tuple[FloatArray, FloatArray]:
        phi = self.f.lat0 + self.f.lat_step * v
        w = 1.0 - self.e2 * np.sin(phi) ** 2
        nu = self.a / np.sqrt(w)
        return nu * np.cos(phi) * self.f.sx, nu * (1.0 - self.e2) / w * self.f.dlat

    def time(self, v0: FloatArray, u0: FloatArray, v1: FloatArray, u1: FloatArray,
             n: int) -> FloatArray:
        """Travel time of the straight index segments (v0, u0) -> (v1, u1), ``n`` samples each."""
        frac = (np.arange(n) + 0.5) / n
        dv, du = v1 - v0, u1 - u0
        vs = v0[..., None] + dv[..., None] * frac
        us = u0[..., None] + du[..., None] * frac
        r = np.floor(vs + 0.5).astype(np.intp)
        c = np.floor(us + 0.5).astype(np.intp)
        if self.f.wrap:
            c = np.mod(c, self.f.ncols)
        rows, cols = self.s.shape
        ok = (r >= 0) & (r < rows) & (c >= 0) & (c < cols)
        s = np.where(ok, self.s[np.clip(r, 0, rows - 1), np.clip(c, 0, cols - 1)], np.inf)
        if not self.geo:
            length = np.hypot(self.kx0 * du, self.ky0 * dv)
            return np.asarray(np.where(length > 0.0, s.mean(axis=-1) * length, 0.0))
        kx, ky = self._k(vs)
        step = np.hypot(kx * du[..., None], ky * dv[..., None])
        return np.asarray(np.where(step > 0.0, s * step, 0.0).sum(axis=-1) / n)


def _bend(slow: _Slowness, v: FloatArray, u: FloatArray, first: BoolArray, last: BoolArray) -> None:
    """Straighten descent paths by Fermat's principle, in place (ends fixed).

    ``v``, ``u`` hold all paths' vertices one after another; ``first``/``last``
    mark each path's ends. From coarse to fine spacing, every other interior
    vertex moves to the best of nine neighbouring positions (the two segments
    to its neighbours take the least time), then the others; the vertices in
    between follow linearly.
    """
    n = v.size
    k = np.arange(n)
    start = np.maximum.accumulate(np.where(first, k, 0))
    local = k - start
    for stride in _BEND_STRIDES:
        sel = np.nonzero((local % stride == 0) | last)[0]
        sv, su = v[sel], u[sel]
        s_first, s_last = first[sel], last[sel]
        at = np.arange(sel.size)
        sub_local = at - np.maximum.accumulate(np.where(s_first, at, 0))
        samples = max(4, stride)
        move = _BEND_MOVE_CELLS
        for it in range(_BEND_ITERS):
            for parity in (1, 0):
                i = np.nonzero(~s_first & ~s_last & (sub_local % 2 == parity))[0]
                if i.size == 0:
                    continue
                cv = sv[i, None] + move * _MOVES[None, :, 1]
                cu = su[i, None] + move * _MOVES[None, :, 0]
                pv = np.broadcast_to(sv[i - 1, None], cv.shape)
                pu = np.broadcast_to(su[i - 1, None], cu.shape)
                nv = np.broadcast_to(sv[i + 1, None], cv.shape)
                nu = np.broadcast_to(su[i + 1, None], cu.shape)
                cost = slow.time(pv, pu, cv, cu, samples) + slow.time(cv, cu, nv, nu, samples)
                best = np.argmin(cost, axis=1)  # ties keep the vertex where it is (move 0 first)
                rows = np.arange(i.size)
                sv[i], su[i] = cv[rows, best], cu[rows, best]
            if (it + 1) % (_BEND_ITERS // 3) == 0:
                move *= 0.5
        j = np.clip(np.searchsorted(sel, k, side="right") - 1, 0, sel.size - 1)
        j1 = np.minimum(j + 1, sel.size - 1)
        span = np.where(sel[j1] > sel[j], sel[j1] - sel[j], 1)
        w = np.where(sel[j1] > sel[j], (k - sel[j]) / span, 0.0)
        v[:] = sv[j] * (1.0 - w) + sv[j1] * w
        u[:] = su[j] * (1.0 - w) + su[j1] * w


def trace_wave_paths(
    grid: Grid,
    arrival_time_s: Any,
    x: Any,
    y: Any,
    *,
    earth: EarthModel = "wgs84",
    step_cells: float = PATH_STEP_CELLS,
    stop_time_s: float | None = None,
    max_steps: int | None = None,
    speed_m_s: Any = None,
) -> list[WavePath]:
    """Trace the first wave's path back from each site to the source.

    Parameters
    ----------
    grid : Grid
        The grid of the arrival field.
    arrival_time_s : ndarray of shape grid.shape, float, seconds
        First-arrival time; NaN on land and unreached cells.
    x, y : array_like of shape (sites,), float
        Site positions in the grid's CRS (sites already moved to water).
    earth : {"wgs84", "sphere"}
        Figure of the Earth of the solve (lon/lat grids).
    step_cells : float
        Step of the descent in cells (default 0.5).
    stop_time_s : float, optional
        Stop once the time falls to this value (e.g. the time of a source's
        start front); by default only where times stop decreasing.
    max_steps : int, optional
        Most steps per path (default: 4 x (rows + cols) / step_cells).
    speed_m_s : ndarray of shape grid.shape, float, m/s, optional
        The wave speed of the solve on the grid (``Medium.speed_m_s``). When
        given, each descent path is then bent to the least travel time through
        these speeds with its ends fixed (Fermat's principle), which puts the
        turns at speed steps where Snell's law does; without it the descent
        path is returned as traced.

    Returns
    -------
    list of WavePath
        One per site, in the order given.

    Raises
    ------
    InputDataError
        Shapes differ, or ``step_cells`` is not in (0, 1].

    Examples
    --------
    >>> from affine import Affine
    >>> g = Grid((20, 20), Affine(1000.0, 0, 0, 0, -1000.0, 20000.0), "EPSG:32601")
    >>> yy, xx = np.mgrid[0:20, 0:20] + 0.5
    >>> t = np.hypot(xx - 2.5, yy - 10.5) * 1000.0 / 100.0  # 100 m/s from (2500, 9500)
    >>> p = trace_wave_paths(g, t, [15500.0], [9500.0])[0]
    >>> p.end, [round(v) for v in p.line.coords[0]], round(p.line.length / 1000.0, 1)
    ('source', [2500, 9500], 13.0)
    """
    t = np.asarray(arrival_time_s, dtype=np.float64)
    if t.shape != grid.shape:
        raise InputDataError(f"arrival array shape {t.shape} differs from the grid shape {grid.shape}")
    if not (0.0 < step_cells <= 1.0):
        raise InputDataError(f"path step {step_cells!r} cells must lie in (0, 1]")
    xs = np.atleast_1d(np.asarray(x, dtype=np.float64))
    ys = np.atleast_1d(np.asarray(y, dtype=np.float64))
    if xs.shape != ys.shape or xs.ndim != 1:
        raise InputDataError("site x and y must be 1-D arrays of one length")
    f = _Field(grid, t, earth)
    tr = grid.transform
    if grid.is_geographic:
        xs = tr.c + np.mod(xs - tr.c, 360.0)
    u = (xs - tr.c) / tr.a - 0.5
    v = (ys - tr.f) / tr.e - 0.5
    n_steps = max_steps if max_steps is not None else int(4 * (grid.rows + grid.cols) / step_cells)
    t_now = f.value(v, u)
    active = np.isfinite(t_now)
    ends = np.where(active, "steps", "off-grid").astype(object)
    us, vs, ts = [u.copy()], [v.copy()], [t_now.copy()]
    alive = [active.copy()]
    stop = -math.inf if stop_time_s is None else float(stop_time_s)
    reached = active & (t_now <= stop)
    ends[reached] = "source"
    active &= ~reached
    for _ in range(n_steps):
        if not active.any():
            break
        idx = np.nonzero(active)[0]
        uu, vv, tt = u[idx], v[idx], t_now[idx]
        step = step_cells * np.minimum(f.sx, f.sy(vv))
        dv1, du1, ok1 = f.direction(vv, uu)
        vm = vv + 0.5 * step * np.where(ok1, dv1, 0.0)
        um = uu + 0.5 * step * np.where(ok1, du1, 0.0)
        dv2, du2, ok2 = f.direction(vm, um)
        dv2 = np.where(ok2, dv2, np.where(ok1, dv1, 0.0))
        du2 = np.where(ok2, du2, np.where(ok1, du1, 0.0))
        vn = vv + step * dv2
        un = uu + step * du2
        tn, support = f.value_and_support(vn, un)
        flat = ~ok1
        # Not decreasing where the next point leans on missing cells: land, not the source.
        no_time = ok1 & (~np.isfinite(tn) | ((tn >= tt) & (support < 1.0 - 1e-9)))
        uphill = ok1 & np.isfinite(tn) & (tn >= tt) & ~no_time
        good = ok1 & np.isfinite(tn) & (tn < tt)
        ends[idx[flat | uphill]] = "source"
        ends[idx[no_time]] = "no-time"
        moved = idx[good]
        u[moved], v[moved], t_now[moved] = un[good], vn[good], tn[good]
        done = good & (tn <= stop)
        ends[idx[done]] = "source"
        active[idx[~good | done]] = False
        step_alive = np.zeros(u.shape, dtype=bool)
        step_alive[moved] = True
        us.append(u.copy())
        vs.append(v.copy())
        ts.append(t_now.copy())
        alive.append(step_alive)
    uu_all, vv_all, tt_all, keep = (np.stack(a, axis=1) for a in (us, vs, ts, alive))
    traced = [
        (uu_all[i, keep[i]][::-1], vv_all[i, keep[i]][::-1], tt_all[i, keep[i]][::-1])
        for i in range(xs.size)
    ]
    if speed_m_s is not None:
        slow = _Slowness(grid, speed_m_s, earth, f)
        bend = [i for i in range(xs.size) if ends[i] != "off-grid" and traced[i][0].size > 2]
        if bend:
            cu = np.concatenate([traced[i][0] for i in bend])
            cv = np.concatenate([traced[i][1] for i in bend])
            sizes = np.array([traced[i][0].size for i in bend])
            last_at = np.cumsum(sizes) - 1
            first, last = np.zeros(cu.size, dtype=bool), np.zeros(cu.size, dtype=bool)
            first[last_at - sizes + 1] = True
            last[last_at] = True
            _bend(slow, cv, cu, first, last)
            leg = slow.time(cv[:-1], cu[:-1], cv[1:], cu[1:], 8)
            for i, a, b in zip(bend, last_at - sizes + 1, last_at + 1, strict=True):
                ct = traced[i][2]
                # times along the bent path: its own travel time from the source end,
                # scaled to the field's times at both ends
                cum = np.concatenate([[0.0], np.cumsum(leg[a : b - 1])])
                if np.isfinite(cum[-1]) and cum[-1] > 0.0 and ct[-1] > ct[0]:
                    # vertices spread evenly again along the bent line (moves along a
                    # straight stretch cost nothing, so they may have bunched)
                    pu, pv = cu[a:b], cv[a:b]
                    arc = np.concatenate([[0.0], np.cumsum(np.hypot(np.diff(pu), np.diff(pv)))])
                    even = np.linspace(0.0, arc[-1], arc.size)
                    times = ct[0] + np.interp(even, arc, cum) * (ct[-1] - ct[0]) / cum[-1]
                    traced[i] = (np.interp(even, arc, pu), np.interp(even, arc, pv), times)
                # else (the route leans on cells without a speed): kept as traced
    out: list[WavePath] = []
    for i in range(xs.size):
        if ends[i] == "off-grid":
            out.append(WavePath(None, np.zeros(0), "off-grid"))
            continue
        cu, cv, ct = traced[i]
        px = tr.c + tr.a * (cu + 0.5)
        py = tr.f + tr.e * (cv + 0.5)
        if px.size == 1:  # the site is the source: a zero-length line
            px, py, ct = np.repeat(px, 2), np.repeat(py, 2), np.repeat(ct, 2)
        out.append(WavePath(shapely.LineString(np.column_stack([px, py])), ct, str(ends[i])))
    return out
