"""The eikonal solve: the only module that calls scikit-fmm.

:func:`fast_march_s` marches first-arrival times outward from a start region
on a uniform metric grid. It normalises the inputs in one place (finite
positive speeds, Python-float spacing, land masked on ``phi``) and converts
the result in one place (masked cells become NaN; never the masked array's
zero data).

Exact start band
----------------
scikit-fmm freezes the cells on either side of the zero level of ``phi`` and
estimates their distance to it by linear interpolation along each axis,
which is off by up to a tenth of a cell for a curved front; the error then
travels with the front. Here the caller gives the exact time of every cell
of that band (``band_time_s``). We let scikit-fmm report its own frozen
cells and their interpolated distances ``d`` (a distance solve stopped at
once), and set the speed of each frozen cell to ``|d| / |band_time_s|``, so
that its start time ``|d| / speed`` is exactly the given one. Frozen cells
are never updated afterwards, so their altered speeds affect nothing else.
Along a periodic axis scikit-fmm also freezes cells of the region next to
masked (land) cells, as if the land were outside the region; the pre-pass is
run as periodic as the march so that it finds them too, and the caller gives
their times as well.

Solving from given times
------------------------
:func:`march_from_times_s` starts a march from a set of cells whose arrival
times are prescribed (a Dirichlet boundary for the eikonal equation, e.g. the
times a coarse solve gives along a nested grid's edge), not from a zero level
set. It is the exact start band above, used with a start front of time zero:
the given set is eroded by one cell (land and the array's edge count as given)
into a start region whose every frozen neighbour, on both sides of its edge,
lies in the given set. Every cell outside the region that scikit-fmm freezes
therefore gets exactly its given time through its speed, whatever the times
are (they need not be one level), and the march goes on from them in time
order. scikit-fmm's second-order stencil reads a frozen cell across the start
front with its sign flipped (right for one front of time zero, wrong for
times that vary along the boundary); the region's own frozen cells are given a
time later than every fixed time, which keeps them out of that stencil. So the
first ring of marched cells takes a first-order step (exact for a locally
plane front, local error O(h^2) otherwise), and every ring after it the usual
second-order step. Nothing of scikit-fmm's interpolation of ``phi`` survives.

Memory
------
Beyond scikit-fmm's own work arrays, a solve allocates one full-size array:
``phi``. The start region, its band and the frozen cells are handled on a
small window around the region. With ``borrow_speed=True`` the frozen cells'
speeds are written into the caller's speed array and restored before the
call returns (also on error), instead of copying the whole array; the result
is scikit-fmm's own output array, with NaN written in place.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ttmap._typing import BoolArray, FloatArray
from ttmap.errors import SolverError

__all__ = ["fast_march_s", "march_from_times_s"]


def _window(
    box: tuple[int, int, int, int], shape: tuple[int, int], periodic_x: bool, pad: int
) -> tuple[slice, slice, bool]:
    """Rows, columns and wrap flag of the region's bounding box plus ``pad`` cells."""
    r_lo, r_hi, c_lo, c_hi = box
    r0, r1 = max(0, r_lo - pad), min(shape[0], r_hi + pad + 1)
    c0, c1 = c_lo - pad, c_hi + pad + 1
    if periodic_x and (c0 < 0 or c1 > shape[1]):
        return slice(r0, r1), slice(0, shape[1]), True
    full = c0 <= 0 and c1 >= shape[1]
    return slice(r0, r1), slice(max(0, c0), min(shape[1], c1)), periodic_x and full


def _bounding_box(mask: BoolArray) -> tuple[int, int, int, int] | None:
    rows = np.nonzero(mask.any(axis=1))[0]
    if rows.size == 0:
        return None
    cols = np.nonzero(mask[rows[0] : rows[-1] + 1].any(axis=0))[0]
    return int(rows[0]), int(rows[-1]), int(cols[0]), int(cols[-1])


def _all_finite_positive(a: FloatArray) -> bool:
    """True if every value is finite and > 0 (two reductions, no temporaries)."""
    if a.size == 0:
        return True
    lo, hi = float(a.min()), float(a.max())  # NaN propagates
    return math.isfinite(lo) and math.isfinite(hi) and lo > 0.0


def _touches(out: BoolArray, start: BoolArray, periodic_x: bool) -> bool:
    """True if a cell of ``out`` is a 4-neighbour of a cell of ``start``."""
    return bool(
        (out[1:, :] & start[:-1, :]).any()
        or (out[:-1, :] & start[1:, :]).any()
        or (out[:, 1:] & start[:, :-1]).any()
        or (out[:, :-1] & start[:, 1:]).any()
        or (periodic_x and ((out[:, 0] & start[:, -1]).any() or (out[:, -1] & start[:, 0]).any()))
    )


def fast_march_s(
    speed_m_s: Any,
    *,
    barrier: Any,
    inside: Any,
    band_cells: tuple[Any, Any],
    band_time_s: Any,
    spacing_m: tuple[float, float],
    periodic_x: bool = False,
    max_time_s: float | None = None,
    borrow_speed: bool = False,
) -> FloatArray:
    """Second-order fast-marching time after leaving a start region.

    Parameters
    ----------
    speed_m_s : ndarray of shape (rows, cols), float, m/s
        Speed on the solve grid; must be finite and positive off the barrier.
    barrier : ndarray of shape (rows, cols), bool
        Cells the front may not enter (land).
    inside : ndarray of shape (rows, cols), bool
        The start region. Its edge is the start front (time 0 here).
    band_cells : (rows, cols) pair of 1-D int arrays
        Cells on both sides of the region's edge: at least every water cell
        with a 4-neighbour on the other side and, with ``periodic_x``, every
        region cell next to the barrier (scikit-fmm freezes those too).
    band_time_s : 1-D float array, seconds
        Exact signed time from the start front at ``band_cells``: negative
        inside the region, positive outside.
    spacing_m : (row_spacing_m, col_spacing_m)
        Cell size along each array axis, metres.
    periodic_x : bool
        The columns wrap around (global grid).
    max_time_s : float, optional
        Stop marching beyond this time after the start front; later cells
        are NaN.
    borrow_speed : bool
        Save a full copy of ``speed_m_s``: the speeds of the few frozen
        start-band cells are written into it during the call and restored
        before it returns, also on error. The array must be a writeable,
        C-contiguous float64 array, and no other thread may read or solve
        with it meanwhile. Default False: the input is never modified.

    Returns
    -------
    ndarray of shape (rows, cols), float64, seconds
        Time after the start front outside the region; NaN inside it, on the
        barrier, where the front never arrives, and beyond ``max_time_s``.

    Raises
    ------
    SolverError
        Shapes differ, spacing is not positive, speeds are NaN, infinite or
        not positive off the barrier, the start region is empty, a band cell
        has no start time, or scikit-fmm fails.

    Notes
    -----
    If no open cell outside the start region touches it (the region fills its
    whole water body, e.g. a source in a small lake), there is nothing to
    march: the result is NaN everywhere.
    """
    import skfmm  # the one import of scikit-fmm in ttmap

    speed = np.asarray(speed_m_s, dtype=np.float64)
    wall: BoolArray = np.asarray(barrier, dtype=bool)
    inside_a: BoolArray = np.asarray(inside, dtype=bool)
    if speed.ndim != 2 or not (speed.shape == wall.shape == inside_a.shape):
        raise SolverError(
            f"speed {speed.shape}, barrier {wall.shape} and inside {inside_a.shape} must be "
            "2-D arrays of one shape"
        )
    shape = (int(speed.shape[0]), int(speed.shape[1]))
    b_rows = np.asarray(band_cells[0], dtype=np.intp)
    b_cols = np.asarray(band_cells[1], dtype=np.intp)
    b_time = np.asarray(band_time_s, dtype=np.float64)
    if not (b_rows.shape == b_cols.shape == b_time.shape):
        raise SolverError("band cells and band times must be 1-D arrays of one length")
    dx = (float(spacing_m[0]), float(spacing_m[1]))  # skfmm rejects numpy scalars
    if not all(np.isfinite(dx)) or min(dx) <= 0.0:
        raise SolverError(f"grid spacing {dx} m must be positive and finite")
    # Speeds: a barrier cell may hold anything (scikit-fmm never uses it), but it must not
    # reach scikit-fmm as NaN or <= 0. The usual input (positive everywhere) costs two
    # reductions; anything else is checked cell by cell and copied with 1.0 on the barrier.
    owned = not (isinstance(speed_m_s, np.ndarray) and np.may_share_memory(speed, speed_m_s))
    if not _all_finite_positive(speed):
        open_cells = ~wall
        bad = open_cells & ~(np.isfinite(speed) & (speed > 0.0))
        if bad.any():
            r, c = (int(v[0]) for v in np.nonzero(bad))
            raise SolverError(
                f"{int(bad.sum())} water cells have a speed that is NaN, infinite or <= 0 "
                f"(first at row {r}, col {c}: {float(speed[r, c])!r} m/s); "
                "check the depth and period inputs"
            )
        del bad
        speed = np.where(open_cells, speed, 1.0)  # any positive value on land
        del open_cells
        owned = True
    if not speed.flags.c_contiguous:
        speed = np.ascontiguousarray(speed)
        owned = True
    # The start region (water cells of ``inside``), found on its bounding box.
    box = _bounding_box(inside_a)
    if box is not None:
        r_lo, r_hi, c_lo, c_hi = box
        rows, cols = slice(r_lo, r_hi + 1), slice(c_lo, c_hi + 1)
        sbox = _bounding_box(inside_a[rows, cols] & ~wall[rows, cols])
        box = None if sbox is None else (r_lo + sbox[0], r_lo + sbox[1], c_lo + sbox[2], c_lo + sbox[3])
    if box is None:
        raise SolverError("the start region is empty; it must hold at least one water cell")
    if max_time_s is not None and not (np.isfinite(max_time_s) and max_time_s > 0.0):
        raise SolverError(f"maximum time {max_time_s!r} s must be a positive number")
    rs, cs, win_periodic = _window(box, shape, periodic_x, pad=3)
    wall_w = wall[rs, cs]
    start_w = inside_a[rs, cs] & ~wall_w
    if not _touches(~wall_w & ~start_w, start_w, win_periodic):
        # The start region fills its water body (scikit-fmm would find no zero level).
        return np.full(shape, np.nan)

    phi_w = np.where(start_w, -1.0, 1.0)
    periodic = [False, bool(periodic_x)]
    # scikit-fmm's own start band and its interpolated distances, on the window.
    try:
        d0 = skfmm.distance(
            np.ma.MaskedArray(phi_w, mask=np.ascontiguousarray(wall_w)),
            dx=list(dx),
            narrow=1e-12 * min(dx),
            # As periodic as the march itself, even on a partial window (its far edges are
            # 3 cells from the region, so meeting there freezes nothing): along a periodic
            # axis scikit-fmm also freezes region cells next to masked ones, and those need
            # their exact times as much as the others.
            periodic=[False, bool(periodic_x)],
        )
    except (ValueError, RuntimeError) as err:
        raise SolverError(f"scikit-fmm failed to find the start band: {err}") from err
    frozen = ~np.ma.getmaskarray(d0) & ~wall_w
    dist = np.abs(np.ma.getdata(d0))
    tau = np.full(frozen.shape, np.nan)
    n_r, n_c = int(frozen.shape[0]), int(frozen.shape[1])
    rr, cc = b_rows - rs.start, b_cols - cs.start
    ok = (rr >= 0) & (rr < n_r) & (cc >= 0) & (cc < n_c)
    tau[rr[ok], cc[ok]] = np.abs(b_time[ok])
    if not np.isfinite(tau[frozen]).all():
        raise SolverError("a cell of the start band has no start time; this is a bug in the caller")
    floor = 1e-9 * min(dx) / float(np.max(speed[rs, cs][start_w]))
    frozen_speed = dist[frozen] / np.maximum(tau[frozen], floor)

    phi = np.ones(shape)
    phi[rs, cs][start_w] = -1.0
    if not owned and not (borrow_speed and speed.flags.writeable):
        speed = speed.copy()
        owned = True
    speed_w = speed[rs, cs]  # a view: writes reach ``speed``
    saved = None if owned else speed_w[frozen]
    speed_w[frozen] = frozen_speed
    try:
        t = skfmm.travel_time(
            np.ma.MaskedArray(phi, mask=np.ascontiguousarray(wall)),
            speed,
            dx=list(dx),
            order=2,
            periodic=periodic,
            narrow=float(max_time_s) if max_time_s is not None else 0.0,
        )
    except (ValueError, RuntimeError) as err:
        raise SolverError(f"scikit-fmm failed: {err}") from err
    finally:
        if saved is not None:
            speed_w[frozen] = saved
    del phi
    # Masked cells (unreached, beyond the narrow band) carry 0 in the data: NaN instead.
    if isinstance(t, np.ma.MaskedArray):
        out = np.ma.getdata(t)
        mask = np.ma.getmaskarray(t)
        del t
        np.copyto(out, np.nan, where=mask)
        del mask
    else:
        out = np.asarray(t)
    if out.dtype != np.float64 or not out.flags.writeable:
        out = np.array(out, dtype=np.float64)
    np.copyto(out, np.nan, where=wall)
    out[rs, cs][start_w] = np.nan
    if max_time_s is not None:
        with np.errstate(invalid="ignore"):
            np.copyto(out, np.nan, where=out > max_time_s)
    return out


def march_from_times_s(
    speed_m_s: Any,
    *,
    barrier: Any,
    fixed_cells: tuple[Any, Any],
    fixed_time_s: Any,
    spacing_m: tuple[float, float],
    periodic_x: bool = False,
    max_time_s: float | None = None,
    borrow_speed: bool = False,
) -> FloatArray:
    """Second-order fast-marching time from cells with prescribed times.

    Parameters
    ----------
    speed_m_s : ndarray of shape (rows, cols), float, m/s
        Speed on the solve grid; finite and positive off the barrier.
    barrier : ndarray of shape (rows, cols), bool
        Cells the front may not enter (land).
    fixed_cells : (rows, cols) pair of 1-D int arrays
        Cells whose arrival times are given. To start anything they must
        hold a band at least two cells thick (for a nested grid: the two
        outermost rings of cells); a one-cell set starts nothing.
    fixed_time_s : 1-D float array, seconds
        Finite, non-negative arrival time at each fixed cell.
    spacing_m : (row_spacing_m, col_spacing_m)
        Cell size along each array axis, metres.
    periodic_x : bool
        The columns wrap around.
    max_time_s : float, optional
        Cells later than this time are NaN.
    borrow_speed : bool
        As in :func:`fast_march_s`.

    Returns
    -------
    ndarray of shape (rows, cols), float64, seconds
        Arrival time: the given time at the fixed cells scikit-fmm freezes
        and at the start region, the march elsewhere; NaN on the barrier
        and where the front never arrives.

    Raises
    ------
    SolverError
        Lengths differ, a fixed cell lies outside the grid, a time is NaN,
        infinite or negative, no fixed water cell lies two cells deep in
        the fixed set, or the march fails (see :func:`fast_march_s`).

    Notes
    -----
    Exact start: the start region is the set of fixed water cells all of
    whose 4-neighbours are fixed or barrier (or beyond the array's edge).
    scikit-fmm freezes the region's edge cells and their outside
    neighbours, all of them fixed, and each gets its given time exactly
    (see the module notes). A fixed cell that is not frozen (next to water
    that is not fixed, and away from the region) is marched like any other.
    The given times are trusted: a frozen cell is never made earlier by the
    march, as a boundary condition should behave.

    Examples
    --------
    >>> speed = np.full((6, 8), 2.0)
    >>> rows, cols = np.nonzero(np.add.outer(np.arange(6), np.zeros(8)) >= 0)
    >>> left = cols < 2
    >>> t = march_from_times_s(speed, barrier=np.zeros((6, 8), bool),
    ...     fixed_cells=(rows[left], cols[left]), fixed_time_s=10.0 + cols[left] / 2.0,
    ...     spacing_m=(1.0, 1.0))
    >>> [round(float(v), 6) for v in t[3, :]]
    [10.0, 10.5, 11.0, 11.5, 12.0, 12.5, 13.0, 13.5]
    """
    speed = np.asarray(speed_m_s, dtype=np.float64)
    wall: BoolArray = np.asarray(barrier, dtype=bool)
    if speed.ndim != 2 or speed.shape != wall.shape:
        raise SolverError(f"speed {speed.shape} and barrier {wall.shape} must be 2-D arrays of one shape")
    f_rows = np.asarray(fixed_cells[0], dtype=np.intp)
    f_cols = np.asarray(fixed_cells[1], dtype=np.intp)
    f_time = np.asarray(fixed_time_s, dtype=np.float64)
    if not (f_rows.ndim == 1 and f_rows.shape == f_cols.shape == f_time.shape):
        raise SolverError("fixed cells and fixed times must be 1-D arrays of one length")
    rows, cols = int(speed.shape[0]), int(speed.shape[1])
    if f_rows.size and (
        f_rows.min() < 0 or f_rows.max() >= rows or f_cols.min() < 0 or f_cols.max() >= cols
    ):
        raise SolverError(f"a fixed cell lies outside the {rows} x {cols} grid; this is a bug in the caller")
    if f_time.size and not (np.isfinite(f_time).all() and float(f_time.min()) >= 0.0):
        raise SolverError(
            "fixed times must be finite and >= 0 s; leave cells without a time out of the fixed set"
        )
    fixed = np.zeros(speed.shape, dtype=bool)
    fixed[f_rows, f_cols] = True
    fixed &= ~wall
    # The start region: fixed water cells whose 4-neighbours are all fixed or barrier
    # (beyond the edge counts as fixed; along a periodic axis the columns wrap).
    given = fixed | wall
    region = fixed.copy()
    region[1:, :] &= given[:-1, :]
    region[:-1, :] &= given[1:, :]
    region[:, 1:] &= given[:, :-1]
    region[:, :-1] &= given[:, 1:]
    if periodic_x:
        region[:, 0] &= given[:, -1]
        region[:, -1] &= given[:, 0]
    del given
    if not region.any():
        raise SolverError(
            "no fixed water cell has only fixed or land neighbours; give times on a band "
            "at least two cells thick"
        )
    late_s = 2.0 * float(f_time.max()) + 1.0
    out = fast_march_s(
        speed,
        barrier=wall,
        inside=region,
        band_cells=(f_rows, f_cols),
        # Region cells are only ever read by scikit-fmm as the second cell of a
        # second-order stencil across the start front, where it negates them (it
        # assumes one front of time zero). A value later than every fixed time keeps
        # them out of that stencil: the first ring marched takes a first-order step
        # from its frozen neighbour, every later ring the second-order one.
        band_time_s=np.where(region[f_rows, f_cols], -late_s, f_time),
        spacing_m=spacing_m,
        periodic_x=periodic_x,
        max_time_s=max_time_s,
        borrow_speed=borrow_speed,
    )
    in_region = region[f_rows, f_cols]
    out[f_rows[in_region], f_cols[in_region]] = f_time[in_region]
    if max_time_s is not None:
        with np.errstate(invalid="ignore"):
            np.copyto(out, np.nan, where=out > max_time_s)
    return out
