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
"""

from __future__ import annotations

from typing import Any

import numpy as np

from ttmap._typing import BoolArray, FloatArray
from ttmap.errors import SolverError

__all__ = ["fast_march_s"]


def _window(inside: BoolArray, periodic_x: bool, pad: int) -> tuple[slice, slice, bool]:
    rows = np.nonzero(inside.any(axis=1))[0]
    cols = np.nonzero(inside.any(axis=0))[0]
    r0, r1 = max(0, rows[0] - pad), min(inside.shape[0], rows[-1] + pad + 1)
    c0, c1 = cols[0] - pad, cols[-1] + pad + 1
    if periodic_x and (c0 < 0 or c1 > inside.shape[1]):
        return slice(r0, r1), slice(0, inside.shape[1]), True
    full = c0 <= 0 and c1 >= inside.shape[1]
    return slice(r0, r1), slice(max(0, c0), min(inside.shape[1], c1)), periodic_x and full


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
        Cells on both sides of the region's edge (at least every water cell
        with a 4-neighbour on the other side).
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
    start: BoolArray = np.asarray(inside, dtype=bool) & ~wall
    if speed.ndim != 2 or not (speed.shape == wall.shape == start.shape):
        raise SolverError(
            f"speed {speed.shape}, barrier {wall.shape} and inside {start.shape} must be "
            "2-D arrays of one shape"
        )
    b_rows = np.asarray(band_cells[0], dtype=np.intp)
    b_cols = np.asarray(band_cells[1], dtype=np.intp)
    b_time = np.asarray(band_time_s, dtype=np.float64)
    if not (b_rows.shape == b_cols.shape == b_time.shape):
        raise SolverError("band cells and band times must be 1-D arrays of one length")
    dx = (float(spacing_m[0]), float(spacing_m[1]))  # skfmm rejects numpy scalars
    if not all(np.isfinite(dx)) or min(dx) <= 0.0:
        raise SolverError(f"grid spacing {dx} m must be positive and finite")
    open_cells = ~wall
    bad = open_cells & ~(np.isfinite(speed) & (speed > 0.0))
    if bad.any():
        r, c = (int(v[0]) for v in np.nonzero(bad))
        raise SolverError(
            f"{int(bad.sum())} water cells have a speed that is NaN, infinite or <= 0 "
            f"(first at row {r}, col {c}: {float(speed[r, c])!r} m/s); "
            "check the depth and period inputs"
        )
    if not start.any():
        raise SolverError("the start region is empty; it must hold at least one water cell")
    if max_time_s is not None and not (np.isfinite(max_time_s) and max_time_s > 0.0):
        raise SolverError(f"maximum time {max_time_s!r} s must be a positive number")

    out = open_cells & ~start
    touching = bool(
        (out[1:, :] & start[:-1, :]).any()
        or (out[:-1, :] & start[1:, :]).any()
        or (out[:, 1:] & start[:, :-1]).any()
        or (out[:, :-1] & start[:, 1:]).any()
        or (periodic_x and ((out[:, 0] & start[:, -1]).any() or (out[:, -1] & start[:, 0]).any()))
    )
    if not touching:
        # The start region fills its water body (scikit-fmm would find no zero level).
        return np.full(speed.shape, np.nan)

    phi = np.where(start, -1.0, 1.0)
    periodic = [False, bool(periodic_x)]
    # scikit-fmm's own start band and its interpolated distances, on a window.
    rs, cs, win_periodic = _window(start, periodic_x, pad=3)
    try:
        d0 = skfmm.distance(
            # scikit-fmm reads the raw buffer: views must be made contiguous.
            np.ma.MaskedArray(
                np.ascontiguousarray(phi[rs, cs]), mask=np.ascontiguousarray(wall[rs, cs])
            ),
            dx=list(dx),
            narrow=1e-12 * min(dx),
            periodic=[False, win_periodic],
        )
    except (ValueError, RuntimeError) as err:
        raise SolverError(f"scikit-fmm failed to find the start band: {err}") from err
    frozen = ~np.ma.getmaskarray(d0) & ~wall[rs, cs]
    dist = np.abs(np.ma.getdata(d0))
    tau = np.full(frozen.shape, np.nan)
    n_r, n_c = int(frozen.shape[0]), int(frozen.shape[1])
    rr, cc = b_rows - rs.start, b_cols - cs.start
    ok = (rr >= 0) & (rr < n_r) & (cc >= 0) & (cc < n_c)
    tau[rr[ok], cc[ok]] = np.abs(b_time[ok])
    if not np.isfinite(tau[frozen]).all():
        raise SolverError("a cell of the start band has no start time; this is a bug in the caller")
    speed_in = np.where(open_cells, speed, 1.0)  # any positive value on land
    floor = 1e-9 * min(dx) / float(np.max(speed[start]))
    sub = speed_in[rs, cs]
    sub[frozen] = dist[frozen] / np.maximum(tau[frozen], floor)
    speed_in[rs, cs] = sub
    try:
        t = skfmm.travel_time(
            np.ma.MaskedArray(phi, mask=np.ascontiguousarray(wall)),
            np.ascontiguousarray(speed_in),
            dx=list(dx),
            order=2,
            periodic=periodic,
            narrow=float(max_time_s) if max_time_s is not None else 0.0,
        )
    except (ValueError, RuntimeError) as err:
        raise SolverError(f"scikit-fmm failed: {err}") from err
    out = np.ma.filled(np.ma.asarray(t, dtype=np.float64), np.nan)
    out[wall | start] = np.nan
    if max_time_s is not None:
        out[out > max_time_s] = np.nan
    return np.asarray(out, dtype=np.float64)
