"""Nested grids: a finer grid solved from the arrival times a coarser solve gives on its edge.

A basin-scale grid (say 1 arc-minute) does not resolve harbours and bays. A
*nest* is a finer raster of part of the coast, in any CRS. :func:`solve_nest`
takes the coarse grid's arrival field, samples it on the nest's boundary and
solves the nest inward from those times on its own grid, with its own depths
and the same speed model, so that arrivals inside bays the coarse grid cannot
see come from the nest's own sea floor.

Method
------
1. Checks (:func:`check_nests`, and :func:`solve_nest` for one nest): the
   nest's footprint, transformed to the coarse CRS, lies inside the coarse
   grid; no two nests overlap; the nest holds water; some water cell on its
   edge has a coarse arrival time; and the coarse field is not earlier inside
   the nest than on its edge (that would put the source, or the first wave's
   way in, inside the nest, where boundary times cannot describe it).
2. Boundary times: the cells of the two outermost rings of the nest's solve
   grid (its Mercator rows for a lon/lat nest) that are water in the nest are
   carried to the coarse CRS with pyproj, and the coarse field is
   interpolated bilinearly there from the reached coarse cells only (the
   weights of unreached or land corners are dropped and the others
   renormalised; a cell whose reached corners weigh less than a quarter gets
   no time and is marched like the interior).
3. Solve: :func:`ttmap.solver.march_from_times_s` starts the march from those
   times exactly (see its notes) on the nest's own speed field
   (:func:`ttmap.traveltime.prepare_medium` with the same speed options).

Why the ring and not the interior: the nest exists because the coarse grid
is wrong inside it (bays it cannot resolve, coasts it misplaces). Coarse times
imposed inside would pin those errors; the ring, placed in open water that
both grids resolve, is where the coarse times are good, and everything inside
follows from the nest's own depths. Paths that leave the nest and come back
are carried by the ring's times (they are the coarse solve's first arrivals,
which include every way round outside); a shortcut the nest finds that would
make a coarse ring time earlier is not fed back (one-way nesting).

Accuracy: see ``docs/nesting.md`` and ``tests/reference/test_nesting_reference.py``.
"""

from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass, field
from typing import Any, Mapping

import numpy as np
import shapely
from pyproj import Transformer

from ttmap._typing import EarthModel, FloatArray
from ttmap.defaults import FLOOR_DEPTH_M
from ttmap.errors import GridError, InputDataError
from ttmap.grid import Grid, SolvePlane, latitude_from_isometric
from ttmap.physics.constants import G_M_S2
from ttmap.solver import march_from_times_s
from ttmap.traveltime import Medium, prepare_medium

__all__ = [
    "NestSummary",
    "NestResult",
    "BOUNDARY_RING_CELLS",
    "nest_footprint",
    "check_nests",
    "sample_arrival_s",
    "solve_nest",
]

#: Thickness of the nest's boundary band that takes the coarse times, in the
#: nest's solve cells (two: the start needs a band two cells thick).
BOUNDARY_RING_CELLS: int = 2
# A boundary cell gets a coarse time only if its reached coarse corners carry at
# least this share of the bilinear weight.
_MIN_WEIGHT = 0.25
# Vertices per side of a nest's footprint polygon.
_FOOTPRINT_POINTS = 64


@dataclass(frozen=True)
class NestSummary:
    """What a nest solve used and reached, for reports and the run record.

    Attributes
    ----------
    name : str
    shape : tuple of int
        The nest's native shape.
    solve_shape : tuple of int
        Its solve grid (Mercator rows for lon/lat nests).
    boundary_cells : int
        Boundary-band cells (solve grid) that took a coarse time.
    boundary_cells_without_time : int
        Water cells of the band without one (coarse land or unreached there);
        they are marched like the interior.
    boundary_time_min_s, boundary_time_max_s : float
        Range of the coarse times imposed.
    water_cells, cells_reached : int
        The nest's water cells and those with an arrival time.
    solve_seconds : float
        Wall time of sampling, preparing the nest's medium and marching.
    """

    name: str
    shape: tuple[int, int]
    solve_shape: tuple[int, int]
    boundary_cells: int
    boundary_cells_without_time: int
    boundary_time_min_s: float
    boundary_time_max_s: float
    water_cells: int
    cells_reached: int
    solve_seconds: float

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary."""
        d = asdict(self)
        d["shape"] = list(self.shape)
        d["solve_shape"] = list(self.solve_shape)
        return d


@dataclass(frozen=True)
class NestResult:
    """Arrival times on a nest's own grid.

    Attributes
    ----------
    arrival_time_s : ndarray of shape grid.shape, float64, seconds
        Time after origin on the nest's native grid; NaN on land, unreached
        cells and beyond the maximum time.
    grid : Grid
        The nest's grid.
    medium : Medium
        The nest's speed field (its depths after floor depth and opened joins).
    summary : NestSummary
    """

    arrival_time_s: FloatArray = field(repr=False)
    grid: Grid
    medium: Medium = field(repr=False)
    summary: NestSummary

    @property
    def arrival_time_min(self) -> FloatArray:
        """Arrival time in minutes."""
        return self.arrival_time_s / 60.0


def _transformer(src: Grid, dst: Grid) -> Transformer | None:
    if src.crs == dst.crs:
        return None
    return Transformer.from_crs(src.crs, dst.crs, always_xy=True)


def _to_crs(tr: Transformer | None, x: FloatArray, y: FloatArray) -> tuple[FloatArray, FloatArray]:
    if tr is None:
        return x, y
    xx, yy = tr.transform(x, y)
    return np.asarray(xx, dtype=np.float64), np.asarray(yy, dtype=np.float64)


def nest_footprint(nest_grid: Grid, target: Grid) -> shapely.Polygon:
    """The nest's outline (its cell edges) in ``target``'s CRS.

    Each side is densified to 64 points before it is transformed, so the
    outline follows a curved image. On a lon/lat target the longitudes are
    kept continuous and shifted into the target's 360-degree window.

    Parameters
    ----------
    nest_grid : Grid
    target : Grid
        The grid whose CRS the outline is wanted in.

    Returns
    -------
    shapely.Polygon
    """
    left, bottom, right, top = nest_grid.bounds
    s = np.linspace(0.0, 1.0, _FOOTPRINT_POINTS, endpoint=False)
    xs = np.concatenate([left + (right - left) * s, np.full(s.size, right),
                         right - (right - left) * s, np.full(s.size, left)])
    ys = np.concatenate([np.full(s.size, bottom), bottom + (top - bottom) * s,
                         np.full(s.size, top), top - (top - bottom) * s])
    x, y = _to_crs(_transformer(nest_grid, target), xs, ys)
    if not (np.isfinite(x).all() and np.isfinite(y).all()):
        raise GridError(
            f"the nest's outline {nest_grid.bounds} cannot be carried into the basin grid's CRS "
            f"{target.crs.name}; check the nest raster's CRS"
        )
    if target.is_geographic:
        x = x[0] + np.mod(x - x[0] + 180.0, 360.0) - 180.0
        t_left = target.bounds[0]
        x = x - 360.0 * math.floor((0.5 * (x.min() + x.max()) - t_left) / 360.0)
    return shapely.Polygon(np.column_stack([x, y]))


def check_nests(coarse_grid: Grid, nests: Mapping[str, Grid]) -> None:
    """Refuse nests that reach outside the coarse grid or overlap one another.

    Parameters
    ----------
    coarse_grid : Grid
        The basin grid.
    nests : mapping of name to Grid
        The nests' grids, by the name used in messages.

    Raises
    ------
    GridError
        A nest reaches outside the coarse grid, or two nests overlap
        (sharing an edge is allowed).
    """
    prints: dict[str, shapely.Polygon] = {}
    for name, g in nests.items():
        fp = nest_footprint(g, coarse_grid)
        _check_inside(name, fp, coarse_grid)
        prints[name] = fp
    names = list(prints)
    for i, a in enumerate(names):
        for b in names[i + 1 :]:
            pa, pb = prints[a], prints[b]
            shared = pa.intersection(pb).area
            if shared > 1e-9 * min(pa.area, pb.area):
                raise GridError(
                    f"nest {a!r} overlaps nest {b!r} ({100.0 * shared / min(pa.area, pb.area):.1f} % "
                    f"of the smaller one); nests must not overlap: crop one of the rasters or "
                    "merge them into one"
                )


def _check_inside(name: str, footprint: shapely.Polygon, coarse_grid: Grid) -> None:
    left, bottom, right, top = coarse_grid.bounds
    fl, fb, fr, ft = footprint.bounds
    tol_x = 1e-9 * max(1.0, abs(right - left))
    tol_y = 1e-9 * max(1.0, abs(top - bottom))
    inside_x = coarse_grid.wraps_x or (fl >= left - tol_x and fr <= right + tol_x)
    if not (inside_x and fb >= bottom - tol_y and ft <= top + tol_y):
        raise GridError(
            f"nest {name!r} reaches outside the basin grid: in the basin's CRS it spans "
            f"x {fl:.6g} to {fr:.6g}, y {fb:.6g} to {ft:.6g}, the basin x {left:.6g} to {right:.6g}, "
            f"y {bottom:.6g} to {top:.6g}; crop the nest raster to lie inside the basin raster"
        )


def sample_arrival_s(coarse_grid: Grid, coarse_time_s: Any, x: Any, y: Any) -> FloatArray:
    """Bilinear interpolation of a coarse arrival field at map positions, reached cells only.

    Parameters
    ----------
    coarse_grid : Grid
    coarse_time_s : ndarray of shape coarse_grid.shape, float, seconds
        NaN where the wave does not arrive (land, unreached).
    x, y : array_like, float
        Positions in ``coarse_grid``'s CRS (longitudes taken modulo 360 on
        lon/lat grids).

    Returns
    -------
    ndarray, float64, seconds
        The bilinear interpolate between the four surrounding cell centres,
        with the weights of NaN corners dropped and the rest renormalised;
        NaN where the finite corners weigh less than a quarter, or outside
        the grid.

    Examples
    --------
    >>> from affine import Affine
    >>> g = Grid((2, 2), Affine(1.0, 0, 0, 0, -1.0, 2.0), "EPSG:32601")
    >>> t = np.array([[0.0, 1.0], [2.0, np.nan]])
    >>> [round(float(v), 6) for v in sample_arrival_s(g, t, [1.0, 0.5], [1.0, 1.5])]
    [1.0, 0.0]
    """
    tt = np.asarray(coarse_time_s, dtype=np.float64)
    if tt.shape != coarse_grid.shape:
        raise InputDataError(
            f"coarse arrival array shape {tt.shape} differs from the coarse grid shape {coarse_grid.shape}"
        )
    t = coarse_grid.transform
    xx = np.asarray(x, dtype=np.float64)
    yy = np.asarray(y, dtype=np.float64)
    ncols = coarse_grid.cols - 1 if coarse_grid.has_seam_column else coarse_grid.cols
    if coarse_grid.is_geographic:
        xx = t.c + np.mod(xx - t.c, 360.0)
    fc = (xx - t.c) / t.a - 0.5
    fr = (yy - t.f) / t.e - 0.5
    c0 = np.floor(fc).astype(np.intp)
    r0 = np.floor(fr).astype(np.intp)
    wc = fc - c0
    wr = fr - r0
    total = np.zeros(xx.shape)
    acc = np.zeros(xx.shape)
    for dr, dc in ((0, 0), (0, 1), (1, 0), (1, 1)):
        rr, cc = r0 + dr, c0 + dc
        if coarse_grid.wraps_x:
            cc = np.mod(cc, ncols)
        ok = (rr >= 0) & (rr < coarse_grid.rows) & (cc >= 0) & (cc < coarse_grid.cols)
        v = np.full(xx.shape, np.nan)
        v[ok] = tt[rr[ok], cc[ok]]
        w = (wr if dr else 1.0 - wr) * (wc if dc else 1.0 - wc)
        good = np.isfinite(v)
        total += np.where(good, w, 0.0)
        acc += np.where(good, w * np.where(good, v, 0.0), 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = acc / total
    return np.asarray(np.where(total >= _MIN_WEIGHT, out, np.nan), dtype=np.float64)


def _plane_cells_to_map(plane: SolvePlane, rows: Any, cols: Any) -> tuple[FloatArray, FloatArray]:
    """Map coordinates (the grid's CRS) of solve-plane cell centres."""
    py = plane.y0_m + plane.dy_signed_m * np.asarray(rows, dtype=np.float64)
    px = plane.x0_m + plane.dx_signed_m * np.asarray(cols, dtype=np.float64)
    g = plane.grid
    if not g.is_geographic:
        u = g.linear_unit_m
        return px / u, py / u
    radius_m = plane.dx_signed_m / math.radians(g.transform.a)
    lon = np.degrees(px / radius_m)
    lat = latitude_from_isometric(py / radius_m, earth=plane.earth)  # type: ignore[arg-type]
    return np.asarray(lon, dtype=np.float64), np.asarray(lat, dtype=np.float64)


def _earliest_inside_s(
    coarse_grid: Grid, coarse_time: FloatArray, footprint: shapely.Polygon, margin_cells: float
) -> float:
    """Earliest coarse arrival at coarse cell centres inside the footprint, shrunk by a margin."""
    t = coarse_grid.transform
    inner = footprint.buffer(-margin_cells * max(abs(t.a), abs(t.e)))
    if inner.is_empty:
        return math.inf
    left, bottom, right, top = inner.bounds
    c0, c1 = (int(math.floor((v - t.c) / t.a)) for v in (left, right))
    r_a, r_b = (int(math.floor((v - t.f) / t.e)) for v in (bottom, top))
    r0, r1 = max(0, min(r_a, r_b)), min(coarse_grid.rows - 1, max(r_a, r_b))
    cols = np.arange(c0, c1 + 1)
    if coarse_grid.wraps_x:
        ncols = coarse_grid.cols - 1 if coarse_grid.has_seam_column else coarse_grid.cols
        idx = np.mod(cols, ncols)
    else:
        keep = (cols >= 0) & (cols < coarse_grid.cols)
        cols, idx = cols[keep], cols[keep]
    rows = np.arange(r0, r1 + 1)
    if rows.size == 0 or cols.size == 0:
        return math.inf
    xs = t.c + t.a * (cols + 0.5)
    ys = t.f + t.e * (rows + 0.5)
    xx, yy = np.meshgrid(xs, ys)
    sub = coarse_time[np.ix_(rows, idx)]
    inside = shapely.contains_xy(inner, xx, yy) & np.isfinite(sub)
    return float(sub[inside].min()) if inside.any() else math.inf


def solve_nest(
    coarse_grid: Grid,
    coarse_time_s: Any,
    nest_grid: Grid,
    nest_depth_m: Any,
    *,
    name: str = "nest",
    mode: str = "long-wave",
    period_s: float | None = None,
    floor_depth_m: float = FLOOR_DEPTH_M,
    far_field: bool = False,
    earth: EarthModel = "wgs84",
    max_time_s: float | None = None,
    others: Mapping[str, Grid] | None = None,
) -> NestResult:
    """Solve a nest inward from the coarse arrival times on its boundary.

    Parameters
    ----------
    coarse_grid : Grid
        The basin grid.
    coarse_time_s : ndarray of shape coarse_grid.shape, float, seconds
        The basin solve's arrival time after origin; NaN on land and where
        the wave does not arrive.
    nest_grid : Grid
        The nest's grid, in any CRS.
    nest_depth_m : ndarray of shape nest_grid.shape, float, metres, positive down
        The nest's depths (land <= 0, NaN nodata).
    name : str
        The nest's name, used in messages and the summary.
    mode, period_s, floor_depth_m, far_field, earth
        The speed model, as for :func:`ttmap.traveltime.prepare_medium`;
        give the basin solve's own.
    max_time_s : float, optional
        Cells later than this are NaN.
    others : mapping of name to Grid, optional
        Nests already accepted in the same run; overlapping one is refused.

    Returns
    -------
    NestResult

    Raises
    ------
    GridError
        The nest reaches outside the coarse grid or overlaps another nest.
    InputDataError
        Shapes differ, the nest has no water, no water cell on its edge has
        a coarse arrival time, or the coarse field is earlier inside the nest
        than anywhere on its edge (a source inside the nest).
    """
    t_start = time.perf_counter()
    coarse_time = np.asarray(coarse_time_s, dtype=np.float64)
    if coarse_time.shape != coarse_grid.shape:
        raise InputDataError(
            f"coarse arrival array shape {coarse_time.shape} differs from the basin grid "
            f"shape {coarse_grid.shape}"
        )
    depth = np.asarray(nest_depth_m, dtype=np.float64)
    if depth.shape != nest_grid.shape:
        raise InputDataError(
            f"nest {name!r}: depth array shape {depth.shape} differs from its grid shape {nest_grid.shape}"
        )
    check_nests(coarse_grid, {**(others or {}), name: nest_grid})
    with np.errstate(invalid="ignore"):
        has_water = bool((depth > 0.0).any())
    if not has_water:
        raise InputDataError(
            f"nest {name!r} has no water (every cell is land or nodata); check its sign "
            "convention (depth-positive option) or its extent"
        )
    medium = prepare_medium(
        depth, nest_grid, mode=mode, period_s=period_s, floor_depth_m=floor_depth_m,
        far_field=far_field, earth=earth,
    )
    plane = medium.plane
    n_r, n_c = plane.shape
    k = BOUNDARY_RING_CELLS
    band = np.zeros(plane.shape, dtype=bool)
    band[:k, :] = band[-k:, :] = True
    if not plane.periodic_x:
        band[:, :k] = band[:, -k:] = True
    band &= ~medium.barrier_plane
    b_rows, b_cols = np.nonzero(band)
    del band
    x, y = _plane_cells_to_map(plane, b_rows, b_cols)
    cx, cy = _to_crs(_transformer(nest_grid, coarse_grid), x, y)
    b_time = sample_arrival_s(coarse_grid, coarse_time, cx, cy)
    have = np.isfinite(b_time)
    if not have.any():
        raise InputDataError(
            f"nest {name!r}: no water cell on its edge has a basin arrival time (the basin solve "
            "does not reach it, or the basin grid is land there); enlarge the nest so that its "
            "edge lies in open water the basin grid resolves"
        )
    t_lo, t_hi = float(b_time[have].min()), float(b_time[have].max())
    # A source inside the nest: the coarse field is earlier inside than on the edge.
    coarse_row_m, coarse_col_m = coarse_grid.cell_size_m()
    inner_min = _earliest_inside_s(coarse_grid, coarse_time, nest_footprint(nest_grid, coarse_grid), 1.0)
    with np.errstate(invalid="ignore"):
        c_max = math.sqrt(G_M_S2 * float(np.nanmax(medium.depth_m)))  # fastest long wave in the nest
    slack = max(coarse_row_m, coarse_col_m) / c_max
    if inner_min < t_lo - slack:
        raise InputDataError(
            f"nest {name!r}: the basin arrival inside it ({inner_min / 60.0:.1f} min) is earlier than "
            f"anywhere on its edge ({t_lo / 60.0:.1f} min): the source lies in the nest; solve the "
            "nest raster with the source directly, or use a nest that leaves the source outside"
        )
    t_plane = march_from_times_s(
        medium.speed_plane_m_s,
        barrier=medium.barrier_plane,
        fixed_cells=(b_rows[have], b_cols[have]),
        fixed_time_s=b_time[have],
        spacing_m=plane.spacing_m,
        periodic_x=plane.periodic_x,
        max_time_s=max_time_s,
        borrow_speed=True,  # the medium is our own: no other solve reads it
    )
    arrival = plane.to_native(t_plane)  # t_plane itself on projected nests: ours to change
    del t_plane
    np.copyto(arrival, np.nan, where=~medium.water)
    if max_time_s is not None:
        with np.errstate(invalid="ignore"):
            np.copyto(arrival, np.nan, where=arrival > max_time_s)
    water_cells = int(medium.water.sum())
    reached = int(np.isfinite(arrival).sum())
    summary = NestSummary(
        name=name,
        shape=nest_grid.shape,
        solve_shape=(int(n_r), int(n_c)),
        boundary_cells=int(have.sum()),
        boundary_cells_without_time=int((~have).sum()),
        boundary_time_min_s=t_lo,
        boundary_time_max_s=t_hi,
        water_cells=water_cells,
        cells_reached=reached,
        solve_seconds=float(time.perf_counter() - t_start),
    )
    return NestResult(arrival, nest_grid, medium, summary)
