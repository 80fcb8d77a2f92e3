"""Locating an unknown source from observed first-arrival times.

Gauges (or observers) k report first arrivals ``a_k`` with standard
uncertainties ``sigma_k``. By reciprocity one solve started at gauge k gives
``T_k(x)``, the time from any candidate source cell x to the gauge
(docs/reciprocal.md). With weights ``w_k = 1 / sigma_k**2`` and residuals
``r_k(x) = a_k - T_k(x)``:

- **unknown origin time:** ``chi2(x) = min over t0 of sum_k w_k (r_k - t0)**2
  = S_rr - S_r**2 / S_w`` with ``t0(x) = S_r / S_w`` (the weighted mean
  residual), where ``S_w = sum w_k``, ``S_r = sum w_k r_k``,
  ``S_rr = sum w_k r_k**2``;
- **known origin time** (picks in seconds after it): ``chi2(x) = S_rr``.

The sums are accumulated one gauge at a time (:class:`MisfitSums`), so memory
stays at one field plus three running arrays whatever the number of gauges;
partial sums from parallel workers add up (:meth:`MisfitSums.merge`). Cells
that some gauge's solve does not reach are excluded.

Confidence region: ``chi2(x) <= chi2_min + delta`` with ``delta`` the
chi-square quantile for **2 degrees of freedom** (the two position
coordinates of interest; the origin time, when unknown, is profiled out, i.e.
minimised over at each cell, which does not add a degree of freedom to the
region: Numerical Recipes, ch. 15.6, "confidence limits on estimated model
parameters", from memory). ``delta = 5.991`` at 95 % (``scipy.stats.chi2``).

Pure numpy plus shapely polygons; no files.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import shapely
from shapely.geometry.base import BaseGeometry

from ttmap._typing import BoolArray, FloatArray
from ttmap.errors import InputDataError
from ttmap.grid import Grid
from ttmap.physics.constants import MEAN_EARTH_RADIUS_M
from ttmap.traveltime import Medium

__all__ = [
    "MisfitSums",
    "LocationResult",
    "check_picks",
    "delta_chi2",
    "locate_from_sums",
    "locate_source",
    "ELONGATION_RATIO",
]

#: Axis ratio of the confidence region above which it is called elongated
#: (common practice, no source).
ELONGATION_RATIO: float = 3.0


def check_picks(
    names: Sequence[str],
    arrival_s: Sequence[float],
    sigma_s: Sequence[float],
    *,
    origin_known: bool,
) -> tuple[list[str], FloatArray, FloatArray]:
    """Validate picks; one clear line per problem.

    Parameters
    ----------
    names : sequence of str
        Gauge names, unique.
    arrival_s : sequence of float, seconds
        Observed first arrivals: after the known origin time (``origin_known``)
        or from any common reference (unknown origin).
    sigma_s : sequence of float, seconds
        Standard uncertainty of each pick, > 0.
    origin_known : bool

    Returns
    -------
    names, arrival_s, sigma_s as a list and float64 arrays.

    Raises
    ------
    InputDataError
        Lengths differ, too few picks (3 with an unknown origin time, 2 with
        a known one), duplicate or empty names, non-finite values, an
        uncertainty <= 0, or a pick before the known origin time.

    Examples
    --------
    >>> check_picks(["a", "b"], [60.0, 90.0], [5.0, 5.0], origin_known=True)[1].tolist()
    [60.0, 90.0]
    """
    names = [str(n) for n in names]
    a = np.asarray(arrival_s, dtype=np.float64).ravel()
    s = np.asarray(sigma_s, dtype=np.float64).ravel()
    if not (len(names) == a.size == s.size):
        raise InputDataError(
            f"{len(names)} names, {a.size} arrival times and {s.size} uncertainties given; "
            "give one of each per gauge"
        )
    need = 2 if origin_known else 3
    if len(names) < need:
        what = "a known" if origin_known else "an unknown"
        raise InputDataError(
            f"{len(names)} pick(s) given; locating a source with {what} origin time needs at least "
            f"{need} (two position coordinates{'' if origin_known else ' and the origin time'})"
        )
    seen: set[str] = set()
    for n in names:
        if not n.strip():
            raise InputDataError("a gauge has an empty name; give every gauge a name")
        if n in seen:
            raise InputDataError(f"gauge name {n!r} appears twice; give each gauge one pick")
        seen.add(n)
    for n, v, e in zip(names, a.tolist(), s.tolist()):
        if not math.isfinite(v):
            raise InputDataError(f"gauge {n!r}: arrival time {v!r} is not a finite number of seconds")
        if not (math.isfinite(e) and e > 0.0):
            raise InputDataError(
                f"gauge {n!r}: uncertainty {e!r} s must be a positive number of seconds"
            )
        if origin_known and v < 0.0:
            raise InputDataError(
                f"gauge {n!r}: arrival {v:g} s lies before the origin time; check the pick or the "
                "origin time"
            )
    return names, a, s


def delta_chi2(level: float, dof: int = 2) -> float:
    """Chi-square increase bounding a joint confidence region of ``dof`` parameters.

    Examples
    --------
    >>> round(delta_chi2(0.95), 3), round(delta_chi2(0.6827), 3)
    (5.991, 2.3)
    """
    from scipy.stats import chi2

    if not (0.0 < level < 1.0):
        raise InputDataError(f"confidence level {level!r} must lie between 0 and 1, e.g. 0.95")
    return float(chi2.ppf(level, dof))


@dataclass
class MisfitSums:
    """Running sums over gauges, per cell (memory: three grids and a count).

    ``r_k = (a_k - a_ref) - T_k``: picks are taken relative to a reference
    time ``a_ref`` (their weighted mean with an unknown origin, 0 with a
    known one) so that the sums do not cancel catastrophically.
    """

    shape: tuple[int, int]
    a_ref_s: float
    s_w: float = 0.0
    s_r: FloatArray = field(init=False, repr=False)
    s_rr: FloatArray = field(init=False, repr=False)
    count: Any = field(init=False, repr=False)
    n_gauges: int = 0

    def __post_init__(self) -> None:
        self.s_r = np.zeros(self.shape)
        self.s_rr = np.zeros(self.shape)
        self.count = np.zeros(self.shape, dtype=np.int32)

    def add(self, field_s: Any, arrival_s: float, sigma_s: float) -> None:
        """Add one gauge: its site-centred times and its pick."""
        t = np.asarray(field_s, dtype=np.float64)
        if t.shape != self.shape:
            raise InputDataError(f"gauge field of shape {t.shape} does not match the grid {self.shape}")
        w = 1.0 / float(sigma_s) ** 2
        r = (float(arrival_s) - self.a_ref_s) - t  # NaN where unreached
        ok = np.isfinite(r)
        np.copyto(r, 0.0, where=~ok)
        self.count += ok
        # in place, no grid-sized temporary: r -> w r -> w^2 r^2 -> w r^2
        r *= w
        self.s_r += r
        np.multiply(r, r, out=r)
        r /= w
        self.s_rr += r
        self.s_w += w
        self.n_gauges += 1

    def merge(self, other: MisfitSums) -> MisfitSums:
        """Sum of two partial accumulations (e.g. from two workers), in place."""
        if other.shape != self.shape or other.a_ref_s != self.a_ref_s:
            raise InputDataError("partial misfit sums of different grids or references cannot merge")
        self.s_w += other.s_w
        self.s_r += other.s_r
        self.s_rr += other.s_rr
        self.count += other.count
        self.n_gauges += other.n_gauges
        return self


@dataclass(frozen=True)
class LocationResult:
    """Where the source most likely was, and how well that is known.

    Attributes
    ----------
    misfit : ndarray of shape grid.shape, float64
        Chi-square at each candidate cell; NaN where excluded (some gauge
        unreached, or land).
    origin_time_s : ndarray of shape grid.shape, float64, seconds
        Best origin time for a source at each cell (in the picks' time base);
        the known origin (0) everywhere when it was given.
    best_row, best_col : int
    best_x, best_y : float
        Map position of the best cell (grid CRS).
    best_origin_time_s, best_misfit : float
    level : float
    delta_chi2 : float
        Chi-square increase bounding the region (2 degrees of freedom).
    region : ndarray of shape grid.shape, bool
    polygons : shapely MultiPolygon (map coordinates) or None if empty
    residual_s : dict of str to float
        ``a_k - t0 - T_k`` at the best cell, seconds.
    diagnostics : dict
        ``major_km``, ``minor_km`` (1-sigma spread of the region's cells along
        its principal axes), ``axis_ratio``, ``major_azimuth_deg``,
        ``touches_edge``, ``azimuthal_gap_deg``, ``open``, ``elongated``,
        ``region_cells``, ``message``.
    origin_known : bool
    """

    misfit: FloatArray = field(repr=False)
    origin_time_s: FloatArray = field(repr=False)
    best_row: int
    best_col: int
    best_x: float
    best_y: float
    best_origin_time_s: float
    best_misfit: float
    level: float
    delta_chi2: float
    region: BoolArray = field(repr=False)
    polygons: BaseGeometry | None = field(repr=False)
    residual_s: dict[str, float]
    diagnostics: dict[str, Any]
    origin_known: bool


def _local_xy_m(grid: Grid, rows: Any, cols: Any, ref: tuple[float, float]) -> tuple[FloatArray, FloatArray]:
    """Ground metres east and north of ``ref`` (local equirectangular on lon/lat grids)."""
    x, y = grid.xy(rows, cols)
    x, y = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
    if not grid.is_geographic:
        u = grid.linear_unit_m
        return (x - ref[0]) * u, (y - ref[1]) * u
    dlon = np.mod(x - ref[0] + 180.0, 360.0) - 180.0
    k = math.cos(math.radians(ref[1]))
    return (
        np.radians(dlon) * MEAN_EARTH_RADIUS_M * k,
        np.radians(y - ref[1]) * MEAN_EARTH_RADIUS_M,
    )


def _azimuthal_gap_deg(grid: Grid, best: tuple[int, int], gauge_cells: Sequence[tuple[int, int]]) -> float:
    rr = np.array([c[0] for c in gauge_cells])
    cc = np.array([c[1] for c in gauge_cells])
    bx, by = (float(v) for v in grid.xy(*best))
    ex, ny = _local_xy_m(grid, rr, cc, (bx, by))
    az = np.sort(np.degrees(np.arctan2(ex, ny)) % 360.0)
    if az.size < 2:
        return 360.0
    gaps = np.diff(np.concatenate([az, az[:1] + 360.0]))
    return float(gaps.max())


def locate_from_sums(
    sums: MisfitSums,
    grid: Grid,
    names: Sequence[str],
    gauge_fields_at_best: Any,
    gauge_cells: Sequence[tuple[int, int]],
    arrival_s: Sequence[float],
    *,
    origin_known: bool,
    level: float = 0.95,
    water: Any = None,
) -> LocationResult:
    """Products of a location from the accumulated sums (see :func:`locate_source`).

    ``gauge_fields_at_best`` is a callable ``(row, col) -> list of T_k`` giving
    each gauge's time from that cell (the fields are not kept in memory).

    The sums are consumed: their arrays become the misfit and origin-time
    fields (computed in place, row block by row block), so the peak stays at
    one solve plus the running sums.
    """
    delta = delta_chi2(level, 2)
    valid = sums.count == sums.n_gauges
    if water is not None:
        valid &= np.asarray(water, dtype=bool)
    if not valid.any():
        raise InputDataError(
            "no cell is reached from every gauge; check that the gauges share one water body"
        )
    sums.count = None  # no longer needed: free it before the fields are built
    misfit, origin = sums.s_rr, sums.s_r  # consumed in place (see the notes above)
    with np.errstate(invalid="ignore", divide="ignore"):
        if origin_known:
            origin.fill(0.0)
        else:
            step = max(1, (1 << 20) // max(sums.shape[1], 1))  # about a million cells a block
            for r0 in range(0, sums.shape[0], step):
                m = origin[r0:r0 + step]
                m /= sums.s_w  # the weighted mean residual
                misfit[r0:r0 + step] -= sums.s_w * m * m  # s_rr - s_r^2 / s_w
                m += sums.a_ref_s  # the origin time
    np.maximum(misfit, 0.0, out=misfit)  # rounding can give -1e-12
    misfit[~valid] = np.nan
    origin[~valid] = np.nan
    flat = int(np.nanargmin(misfit))
    br, bc = divmod(flat, sums.shape[1])
    best_misfit = float(misfit[br, bc])
    region = valid & (misfit <= best_misfit + delta)
    bx, by = (float(v) for v in grid.xy(br, bc))
    t_best = np.asarray(gauge_fields_at_best(br, bc), dtype=np.float64)
    t0 = float(origin[br, bc])
    resid = {n: float(a - t0 - t) for n, a, t in zip(names, arrival_s, t_best)}
    # Shape of the region: principal axes of its cells, in ground km.
    rr, cc = np.nonzero(region)
    ex, ny = _local_xy_m(grid, rr, cc, (bx, by))
    if rr.size >= 2:
        cov = np.cov(np.vstack([ex, ny]))
        evals, evecs = np.linalg.eigh(cov)
        major = math.sqrt(max(float(evals[1]), 0.0)) / 1000.0
        minor = math.sqrt(max(float(evals[0]), 0.0)) / 1000.0
        az = float(np.degrees(np.arctan2(evecs[0, 1], evecs[1, 1])) % 180.0)
    else:
        major = minor = 0.0
        az = float("nan")
    cell_km = min(grid.cell_size_m()) / 1000.0
    ratio = major / max(minor, cell_km / math.sqrt(12.0))
    edge = bool(region[0, :].any() or region[-1, :].any())
    if not grid.wraps_x:
        edge = edge or bool(region[:, 0].any() or region[:, -1].any())
    gap = _azimuthal_gap_deg(grid, (br, bc), gauge_cells)
    is_open = edge or gap > 180.0
    elongated = is_open or ratio > ELONGATION_RATIO
    if is_open:
        why = []
        if edge:
            why.append("it reaches the edge of the grid")
        if gap > 180.0:
            why.append(f"the gauges leave an azimuthal gap of {gap:.0f} deg around the best cell")
        message = (
            "the confidence region is open or elongated: " + " and ".join(why)
            + "; the location is poorly constrained along the open side"
        )
    elif elongated:
        message = (
            f"the confidence region is elongated (axis ratio {ratio:.1f}, major axis azimuth "
            f"{az:.0f} deg); the location is poorly constrained along it"
        )
    else:
        message = "the confidence region is closed and compact"
    polygons = _region_polygons(misfit - best_misfit, delta, grid)
    return LocationResult(
        misfit=misfit,
        origin_time_s=origin,
        best_row=br,
        best_col=bc,
        best_x=bx,
        best_y=by,
        best_origin_time_s=t0,
        best_misfit=best_misfit,
        level=float(level),
        delta_chi2=delta,
        region=region,
        polygons=polygons,
        residual_s=resid,
        diagnostics={
            "major_km": major,
            "minor_km": minor,
            "axis_ratio": ratio,
            "major_azimuth_deg": az,
            "touches_edge": edge,
            "azimuthal_gap_deg": gap,
            "open": is_open,
            "elongated": elongated,
            "region_cells": int(region.sum()),
            "message": message,
        },
        origin_known=origin_known,
    )


def _region_polygons(excess: FloatArray, delta: float, grid: Grid) -> BaseGeometry | None:
    """The region ``excess <= delta`` as polygons in map coordinates (contoured)."""
    from ttmap.products.isochrones import isochrone_bands

    bands = isochrone_bands(excess, grid.transform, [delta])
    if not bands:
        return None
    return shapely.union_all([b.geometry for b in bands])


def locate_source(
    medium: Medium,
    gauge_cells: Sequence[tuple[int, int]],
    names: Sequence[str],
    arrival_s: Sequence[float],
    sigma_s: Sequence[float],
    *,
    origin_known: bool = False,
    level: float = 0.95,
    max_time_s: float | None = None,
) -> LocationResult:
    """Locate a source from observed first arrivals: one solve per gauge.

    Parameters
    ----------
    medium : Medium
        The speed model: long-wave (front) or the group speed of a period
        for short-period sources.
    gauge_cells : sequence of (row, col)
        Native open-water cells of the gauges (snapped by the shared site
        snapping, :func:`ttmap.products.sites.snap_sites`).
    names, arrival_s, sigma_s
        See :func:`check_picks`.
    origin_known : bool
        Picks are seconds after a known origin time (t0 fixed at 0);
        otherwise the origin time is estimated at every cell.
    level : float
        Confidence level of the region (default 0.95).
    max_time_s : float, optional
        Stop each gauge solve here (cells beyond are excluded).

    Returns
    -------
    LocationResult

    Raises
    ------
    InputDataError
        Bad picks (:func:`check_picks`), gauge cells off the grid or not in
        open water, a level outside (0, 1), or no cell reached by every gauge.
    """
    from ttmap.reciprocal import site_field_s

    names, a, s = check_picks(names, arrival_s, sigma_s, origin_known=origin_known)
    if len(gauge_cells) != len(names):
        raise InputDataError(f"{len(gauge_cells)} gauge cells for {len(names)} picks; give one per pick")
    delta_chi2(level)  # checks the level before any solve
    w = 1.0 / s**2
    a_ref = 0.0 if origin_known else float(np.sum(w * a) / np.sum(w))
    sums = MisfitSums(medium.grid.shape, a_ref)
    cells = [(int(r), int(c)) for r, c in gauge_cells]
    for name, cell, ak, sk in zip(names, cells, a.tolist(), s.tolist()):
        sums.add(site_field_s(medium, cell, max_time_s=max_time_s, name=name), ak, sk)

    def at_best(row: int, col: int) -> list[float]:
        # Reciprocity again: the time from the best cell to each gauge is one solve from
        # the best cell, read at the gauges.
        x, y = medium.grid.xy(row, col)
        from ttmap.sources import Source

        t = medium.travel_time(Source.point_xy(float(x), float(y))).arrival_time_s
        return [float(t[c]) for c in cells]

    return locate_from_sums(
        sums, medium.grid, names, at_best, cells, a.tolist(), origin_known=origin_known,
        level=level, water=medium.water,
    )
