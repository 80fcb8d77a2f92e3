"""Travel-time computation: the public entry points of the engine.

Two steps, so that many sources can share one speed field:

1. :func:`prepare_medium` turns depth into a solve-ready :class:`Medium`:
   floor depth, diagonal-only joins opened (the opened cell takes the depth
   of the shallower of the two water cells it joins), water bodies numbered,
   speed for the chosen mode and period, and (for lon/lat grids) the Mercator
   solve plane with speeds multiplied by the scale factor.
2. :meth:`Medium.travel_time` places a source, marches, carries the times back
   to the native grid and summarises what was reached.

:func:`compute_travel_time` does both in one call.
"""

from __future__ import annotations

import functools
import threading
import time
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from ttmap.defaults import MIN_BASIN_SHARE
from ttmap._typing import BoolArray, EarthModel, FloatArray, IntArray
from ttmap.connectivity import connect_water
from ttmap.errors import InputDataError
from ttmap.grid import Grid, ProjectionScale, SolvePlane, projection_scale, solve_plane
from ttmap.physics.speed import check_speed_options, water_speed_m_s
from ttmap.defaults import FLOOR_DEPTH_M
from ttmap.solver import fast_march_s
from ttmap.sources import Source, SourceStart, place_source

__all__ = [
    "Medium",
    "TravelTimeResult",
    "TravelTimeSummary",
    "prepare_medium",
    "compute_travel_time",
]

# A solve lends the medium's speed array to the solver, which changes a few cells of it
# for the duration of the march (ttmap.solver, borrow_speed). Solves are serialised per
# process; scikit-fmm holds the GIL while it marches, so threads lose no parallelism.
_SOLVE_LOCK = threading.Lock()

# Cells per slice of rows for the elementwise passes over the depth grid.
_SLICE_CELLS = 1 << 18


@dataclass(frozen=True)
class TravelTimeSummary:
    """What a solve reached, for reports and the run record.

    Attributes
    ----------
    cells_total, water_cells : int
        Cells in the grid; water cells after floor depth and opened joins.
    cells_reached : int
        Water cells with an arrival time.
    cells_unreached : int
        Water cells in basins the front cannot reach.
    cells_beyond_max_time : int
        Water cells reachable but later than the maximum time.
    unreached_basins : int
        Water bodies with no arrival.
    diagonal_joins_opened : int
        Land cells opened to join diagonal-only water.
    source_start_cells : int
        Native cells inside the source's start region.
    source_row, source_col : int
        Native cell of the (possibly moved) source or its representative point.
    source_x, source_y : float
        Position in the grid's CRS.
    source_moved_m : float
        Distance the source was moved to reach open water (0 if not moved).
    source_depth_m : float
        Depth at the source cell (after floor depth).
    solve_shape : tuple of int
        Shape of the solve grid (Mercator rows for lon/lat grids).
    solve_seconds : float
        Wall time of placing the source, marching and carrying back.
    """

    cells_total: int
    water_cells: int
    cells_reached: int
    cells_unreached: int
    cells_beyond_max_time: int
    unreached_basins: int
    diagonal_joins_opened: int
    source_start_cells: int
    source_row: int
    source_col: int
    source_x: float
    source_y: float
    source_moved_m: float
    source_depth_m: float
    solve_shape: tuple[int, int]
    solve_seconds: float

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready dictionary."""
        d = asdict(self)
        d["solve_shape"] = list(self.solve_shape)
        return d


@dataclass(frozen=True)
class TravelTimeResult:
    """Arrival times of one solve.

    Attributes
    ----------
    arrival_time_s : ndarray of shape grid.shape, float64, seconds
        Time after origin; NaN on land, unreached cells and beyond the
        maximum time.
    grid : Grid
    summary : TravelTimeSummary
    source : Source
    settings : dict
        Speed mode, period, floor depth, far-field flag, earth model, maximum time,
        and ``projection_scale``: the scale correction applied (method, min, max, CRS).
    """

    arrival_time_s: FloatArray = field(repr=False)
    grid: Grid
    summary: TravelTimeSummary
    source: Source
    settings: dict[str, Any]

    @property
    def arrival_time_min(self) -> FloatArray:
        """Arrival time in minutes."""
        return self.arrival_time_s / 60.0


@dataclass(frozen=True)
class Medium:
    """A speed field ready for solving, shared by many sources.

    Build with :func:`prepare_medium`. Attributes are read-only views; do not
    modify them.

    Attributes
    ----------
    grid : Grid
    plane : SolvePlane
    depth_m : ndarray of shape grid.shape, float64, metres
        Depth after nodata (NaN), floor depth and opened joins.
    water, open_water : ndarray of shape grid.shape, bool
        Water cells; water of the basins a source may start in.
    basin_labels : ndarray of shape grid.shape, uint16 (int32 beyond 65535 bodies)
        Water body of each cell (0 on land); ``basin_sizes`` counts them.
    speed_plane_m_s : ndarray of shape plane.shape, float64, m/s
        Speed on the solve plane times its scale factor; 1.0 on the barrier.
        For the duration of a solve (:meth:`travel_time`) a few cells around
        the source hold altered values; solves take a process-wide lock.
    barrier_plane : ndarray of shape plane.shape, bool
        Land on the solve plane.
    joins_opened : tuple of (row, col)
    settings : dict

    Notes
    -----
    :attr:`speed_m_s`, the speed on the native grid, is computed on request
    and not kept (it would double the medium's largest array).
    """

    grid: Grid
    plane: SolvePlane
    depth_m: FloatArray = field(repr=False)
    water: BoolArray = field(repr=False)
    open_water: BoolArray = field(repr=False)
    basin_labels: IntArray = field(repr=False)
    basin_sizes: IntArray = field(repr=False)
    speed_plane_m_s: FloatArray = field(repr=False)
    barrier_plane: BoolArray = field(repr=False)
    joins_opened: tuple[tuple[int, int], ...]
    settings: dict[str, Any]

    @property
    def speed_m_s(self) -> FloatArray:
        """Wave speed on the native grid (m/s), NaN on land; a new array on each call."""
        return water_speed_m_s(
            self.depth_m,
            land=~self.water,
            mode=self.settings["speed_mode"],
            period_s=self.settings["period_s"],
            far_field=self.settings["far_field"],
        )

    @functools.cached_property
    def max_speed_plane_m_s(self) -> float:
        """The fastest speed on the solve plane's water (m/s in plane metres), cached.

        Area sources start at a front this far in time from their tube
        (:func:`ttmap.sources.place_source`), the same for every area of the
        medium. Read first under the solve lock, before any solve borrows speeds.
        """
        water = ~self.barrier_plane
        return float(np.max(self.speed_plane_m_s[water])) if water.any() else 1.0

    def _place(self, source: Source, snap_radius_m: float | None) -> SourceStart:
        """The source's start on this medium (callers hold the solve lock)."""
        return place_source(
            source,
            grid=self.grid,
            plane=self.plane,
            depth_m=self.depth_m,
            water=self.water,
            open_water=self.open_water,
            basin_labels=self.basin_labels,
            basin_sizes=self.basin_sizes,
            speed_plane_m_s=self.speed_plane_m_s,
            barrier_plane=self.barrier_plane,
            snap_radius_m=snap_radius_m,
            front_speed_m_s=self.max_speed_plane_m_s,
        )

    def source_start(self, source: Source, *, snap_radius_m: float | None = None) -> SourceStart:
        """The start a solve from ``source`` would use, without solving.

        The start region, its band and their exact start times on the solve
        plane (see :class:`ttmap.sources.SourceStart`): the same cells and
        times :meth:`travel_time` imposes. Used by the reciprocal and
        one-solve-envelope analytics (:mod:`ttmap.reciprocal`).

        Raises
        ------
        SourceError
            See :func:`ttmap.sources.place_source`.
        """
        if snap_radius_m is not None and not (np.isfinite(snap_radius_m) and snap_radius_m >= 0):
            raise InputDataError(f"snap radius {snap_radius_m!r} m must be a non-negative number")
        with _SOLVE_LOCK:  # the speed array holds altered cells during a solve
            return self._place(source, snap_radius_m)

    def travel_time(
        self,
        source: Source,
        *,
        max_time_s: float | None = None,
        snap_radius_m: float | None = None,
    ) -> TravelTimeResult:
        """Arrival time of the front from ``source`` at every water cell.

        Parameters
        ----------
        source : Source
        max_time_s : float, optional
            Stop at this time; later cells are NaN (counted as beyond).
        snap_radius_m : float, optional
            Allow a point source on land, nodata or in a closed basin to move
            to the nearest open water within this ground distance.

        Returns
        -------
        TravelTimeResult

        Raises
        ------
        SourceError
            See :func:`ttmap.sources.place_source`.
        SolverError
            The solve failed.
        """
        if max_time_s is not None and not (np.isfinite(max_time_s) and max_time_s > 0):
            raise InputDataError(f"maximum time {max_time_s!r} s must be a positive number")
        if snap_radius_m is not None and not (np.isfinite(snap_radius_m) and snap_radius_m >= 0):
            raise InputDataError(f"snap radius {snap_radius_m!r} m must be a non-negative number")
        t0 = time.perf_counter()
        with _SOLVE_LOCK:
            start = self._place(source, snap_radius_m)
            t_plane = fast_march_s(
                self.speed_plane_m_s,
                barrier=self.barrier_plane,
                inside=start.inside,
                band_cells=start.band_cells,
                band_time_s=start.band_time_s,
                spacing_m=self.plane.spacing_m,
                periodic_x=self.plane.periodic_x,
                max_time_s=max_time_s,
                borrow_speed=True,
            )
        t_plane += start.contour_time_s
        t_plane[start.inside_cells] = start.inside_time_s
        arrival = self.plane.to_native(t_plane)
        del t_plane
        if start.native_zero_cells is not None:
            arrival[start.native_zero_cells] = 0.0
        missing_per_body = self._finish(arrival, max_time_s)
        elapsed = time.perf_counter() - t0
        summary = self._summarise(arrival, missing_per_body, start, elapsed)
        settings = dict(self.settings, max_time_s=max_time_s, snap_radius_m=snap_radius_m)
        return TravelTimeResult(arrival, self.grid, summary, source, settings)

    def _finish(self, arrival: FloatArray, max_time_s: float | None) -> IntArray:
        """Set NaN on land and beyond the maximum time (in place, in slices of rows) and
        count the water cells left without a time, per water body."""
        labels, water = self.basin_labels, self.water
        n = self.basin_sizes.size
        per_body = np.zeros(n, dtype=np.intp)
        step = max(1, _SLICE_CELLS // max(1, arrival.shape[1]))
        with np.errstate(invalid="ignore"):
            for i in range(0, arrival.shape[0], step):
                a, w = arrival[i : i + step], water[i : i + step]
                np.copyto(a, np.nan, where=~w)
                if max_time_s is not None:
                    np.copyto(a, np.nan, where=a > max_time_s)
                missing = np.isfinite(a)
                np.logical_not(missing, out=missing)
                missing &= w
                per_body += np.bincount(labels[i : i + step][missing], minlength=n)
        return per_body

    def _summarise(
        self, arrival: FloatArray, per_body: IntArray, start: Any, elapsed: float
    ) -> TravelTimeSummary:
        labels = self.basin_labels
        sizes = self.basin_sizes  # cells per body on the grid without its seam column
        if self.plane.drop_seam:
            sizes = sizes + np.bincount(labels[:, -1], minlength=sizes.size)
        body_reached = per_body < sizes
        body_reached[0] = False
        water_cells = int(sizes[1:].sum())
        n_missing = int(per_body[1:].sum())
        beyond = int(per_body[body_reached].sum())
        n_basins = sizes.size - 1
        p = start.placement
        return TravelTimeSummary(
            cells_total=int(arrival.size),
            water_cells=water_cells,
            cells_reached=water_cells - n_missing,
            cells_unreached=n_missing - beyond,
            cells_beyond_max_time=beyond,
            unreached_basins=int(n_basins - body_reached[1:].sum()),
            diagonal_joins_opened=len(self.joins_opened),
            source_start_cells=int(p.start_cells),
            source_row=int(p.row),
            source_col=int(p.col),
            source_x=float(p.x),
            source_y=float(p.y),
            source_moved_m=float(p.moved_m),
            source_depth_m=float(p.depth_m),
            solve_shape=self.plane.shape,
            solve_seconds=float(elapsed),
        )


def prepare_medium(
    depth_m: Any,
    grid: Grid,
    *,
    mode: str = "long-wave",
    period_s: float | None = None,
    floor_depth_m: float = FLOOR_DEPTH_M,
    far_field: bool = False,
    earth: EarthModel = "wgs84",
    open_diagonal: bool = True,
    min_basin_share: float = MIN_BASIN_SHARE,
) -> Medium:
    """Turn a depth grid into a solve-ready speed field.

    Parameters
    ----------
    depth_m : ndarray of shape grid.shape, float, metres, positive down
        Land is depth <= 0; NaN is nodata (treated as land).
    grid : Grid
    mode : {"long-wave", "group", "phase"}
        Speed mode (see :mod:`ttmap.physics.speed`).
    period_s : float, optional
        Wave period for "group" and "phase".
    floor_depth_m : float
        Shallower water gets this depth (default 5 m, see
        :mod:`ttmap.physics.speed`).
    far_field : bool
        Apply the far-field effective-depth slowdown.
    earth : {"wgs84", "sphere"}
        Figure of the Earth for lon/lat grids.
    open_diagonal : bool
        Open diagonal-only joins between water bodies (default True). The
        opened land cell takes the depth of the shallower of the two water
        cells it joins (at least the floor depth), so that a front passes the
        strait at the speed of the water on either side.
    min_basin_share : float
        Water bodies smaller than this share of all water, other than the
        largest, are closed basins where no source may start.

    Returns
    -------
    Medium

    Raises
    ------
    InputDataError
        Shape mismatch, no water, bad mode/period/floor depth.
    GridError
        A lon/lat grid beyond the latitude limit, or an unknown earth model; a
        projected grid whose CRS has no ellipsoid, reaches beyond its domain,
        or is not conformal enough (:func:`ttmap.grid.projection_scale`).

    Notes
    -----
    A projected grid is solved in map units with the speed multiplied by the
    local scale of its CRS (map metres per ground metre, see
    :func:`ttmap.grid.projection_scale`): exact for conformal projections.
    ``settings["projection_scale"]`` records what was applied.

    Examples
    --------
    >>> from affine import Affine
    >>> g = Grid((50, 50), Affine(1000, 0, 475_000, 0, -1000, 50000), "EPSG:32601")
    >>> m = prepare_medium(np.full((50, 50), 4000.0), g)
    >>> m.settings["projection_scale"]["method"]
    'conformal scale factor'
    >>> r = m.travel_time(Source.point_xy(500_500, 24500))
    >>> ground_m = 20000 / 0.9996  # UTM: scale 0.9996 at its central meridian
    >>> round(float(r.arrival_time_s[25, 45] / (ground_m / np.sqrt(9.80665 * 4000))), 4)
    1.0
    """
    return _prepare_medium(
        depth_m, grid, mode=mode, period_s=period_s, floor_depth_m=floor_depth_m,
        far_field=far_field, earth=earth, open_diagonal=open_diagonal,
        min_basin_share=min_basin_share,
    )


def _prepare_medium(
    depth_m: Any,
    grid: Grid,
    *,
    mode: str,
    period_s: float | None,
    floor_depth_m: float,
    far_field: bool,
    earth: EarthModel,
    open_diagonal: bool,
    min_basin_share: float,
) -> Medium:
    # Called by prepare_medium and compute_travel_time: warnings point two frames up.
    depth = np.array(depth_m, dtype=np.float64)  # our copy: the input is never modified
    if depth.shape != grid.shape:
        raise InputDataError(f"depth array shape {depth.shape} differs from the grid shape {grid.shape}")
    check_speed_options(mode, period_s, floor_depth_m)
    if not (0.0 <= min_basin_share < 1.0):
        raise InputDataError(f"minimum basin share {min_basin_share!r} must lie in [0, 1)")
    plane = solve_plane(grid, earth=earth)
    # Projected grids: the CRS's local scale (refused here if it is not conformal enough).
    scale = None if grid.is_geographic else projection_scale(grid)
    # Nodata and infinities are land (NaN); shallow water gets the floor depth. In place,
    # in slices of rows, so that the temporaries stay small.
    water = np.empty(depth.shape, dtype=bool)
    step = max(1, _SLICE_CELLS // max(1, depth.shape[1]))
    with np.errstate(invalid="ignore"):
        for i in range(0, depth.shape[0], step):
            d, w = depth[i : i + step], water[i : i + step]
            tmp = np.isinf(d)
            if tmp.any():
                np.copyto(d, np.nan, where=tmp)
            np.greater(d, 0.0, out=w)
            np.less(d, floor_depth_m, out=tmp)
            tmp &= w
            if tmp.any():
                np.copyto(d, floor_depth_m, where=tmp)
    core = depth[:, :-1] if plane.drop_seam else depth
    water_core = water[:, :-1] if plane.drop_seam else water
    if not water_core.any():
        raise InputDataError(
            "the bathymetry has no water (every cell is land or nodata); check the sign convention "
            "(depth-positive grids need the depth-positive option) or the crop window"
        )
    bodies = connect_water(
        water_core, ground=core, periodic_x=plane.periodic_x, open_diagonal=open_diagonal,
        overwrite_water=True,
    )
    del water, water_core
    opened = bodies.opened
    for (r, c), g in zip(opened, bodies.opened_ground.tolist()):
        # The opened cell carries the shallower of the two water cells it joins.
        core[r, c] = max(g, floor_depth_m)
    sizes = bodies.sizes
    if plane.drop_seam:
        depth[:, -1] = depth[:, 0]
        water = np.concatenate([bodies.water, bodies.water[:, :1]], axis=1)
        labels = np.concatenate([bodies.labels, bodies.labels[:, :1]], axis=1)
    else:
        water = bodies.water
        labels = bodies.labels
    del bodies
    total = int(sizes[1:].sum())
    largest = int(np.argmax(sizes[1:])) + 1
    open_basin = sizes >= min_basin_share * total
    open_basin[0] = False
    open_basin[largest] = True
    open_water = open_basin[labels]

    # Speeds on the solve plane; 1.0 (any positive value) on its barrier.
    if plane.is_identity:
        barrier_plane = ~water
        speed_plane = water_speed_m_s(core, mode=mode, period_s=period_s, far_field=far_field)
        if scale is not None:
            # Map metres per ground metre: speed in map metres per second. In slices of rows.
            for i in range(0, speed_plane.shape[0], step):
                speed_plane[i : i + step] *= scale.rows(i, min(i + step, speed_plane.shape[0]))
    else:
        barrier_plane = (water[:, :-1] if plane.drop_seam else water)[plane.native_row, :]
        np.logical_not(barrier_plane, out=barrier_plane)
        speed_plane = core[plane.native_row, :]  # depths of the solve rows, a new array
        water_speed_m_s(
            speed_plane, mode=mode, period_s=period_s, far_field=far_field, out=speed_plane
        )
        speed_plane *= plane.scale_factor[:, None]
    np.copyto(speed_plane, 1.0, where=barrier_plane)
    settings = {
        "speed_mode": mode,
        "period_s": period_s,
        "floor_depth_m": floor_depth_m,
        "far_field": far_field,
        "earth": earth if grid.is_geographic else None,
        "open_diagonal": open_diagonal,
        "min_basin_share": min_basin_share,
        "projection_scale": _projection_record(plane, scale),
    }
    return Medium(
        grid=grid,
        plane=plane,
        depth_m=depth,
        water=water,
        open_water=open_water,
        basin_labels=labels,
        basin_sizes=sizes,
        speed_plane_m_s=speed_plane,
        barrier_plane=barrier_plane,
        joins_opened=tuple(opened),
        settings=settings,
    )


def _projection_record(plane: SolvePlane, scale: ProjectionScale | None) -> dict[str, Any]:
    """What was done about the map's scale, for the run record."""
    if scale is not None:
        return scale.as_dict()
    k = plane.scale_factor
    return {
        "method": "Mercator solve plane",
        "min": float(k.min()),
        "max": float(k.max()),
        "crs": plane.grid.crs.name or plane.grid.crs.to_string(),
        "earth": plane.earth,
    }


def compute_travel_time(
    depth_m: Any,
    grid: Grid,
    source: Source,
    *,
    mode: str = "long-wave",
    period_s: float | None = None,
    floor_depth_m: float = FLOOR_DEPTH_M,
    far_field: bool = False,
    earth: EarthModel = "wgs84",
    max_time_s: float | None = None,
    snap_radius_m: float | None = None,
) -> TravelTimeResult:
    """Arrival time of a tsunami front (or of one period's energy) at every water cell.

    One call of :func:`prepare_medium` then :meth:`Medium.travel_time`; see
    those for the parameters.

    Examples
    --------
    >>> from affine import Affine
    >>> g = Grid((40, 40), Affine(1000, 0, 0, 0, -1000, 40000), "EPSG:32601")
    >>> r = compute_travel_time(np.full((40, 40), 1000.0), g, Source.point_xy(20500, 20500))
    >>> r.summary.cells_reached
    1600
    """
    medium = _prepare_medium(
        depth_m, grid, mode=mode, period_s=period_s, floor_depth_m=floor_depth_m,
        far_field=far_field, earth=earth, open_diagonal=True,
        min_basin_share=MIN_BASIN_SHARE,
    )
    return medium.travel_time(source, max_time_s=max_time_s, snap_radius_m=snap_radius_m)
