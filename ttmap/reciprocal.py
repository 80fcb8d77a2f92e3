"""Reciprocal analytics: sites x scenarios from one solve per site, and a one-solve envelope.

Two exact facts of first-arrival times (Fermat's principle, docs/reciprocal.md):

1. **Reciprocity.** With a speed that depends on position only (every speed
   ttmap computes), the time from A to B equals the time from B to A. One
   solve started at site j gives ``T_j(y)``, the time from any cell y to the
   site.
2. **Area sources take the minimum.** A source whose start cells y begin at
   the times ``t0(y)`` first reaches x at ``min over y of t0(y) + T(y, x)``.

So the arrival of scenario s at site j is ``min over y in S_s of
(t0_s(y) + T_j(y))``, where ``S_s`` and ``t0_s`` are the start cells and the
exact start times a direct solve of s imposes (:meth:`Medium.source_start`):
the start region and the outer ring of its start band, carried to the native
grid. After the site solves, each scenario costs one reduction over its
cells (:func:`reduce_over_starts`, ``np.fmin.reduceat`` over CSR-like index
arrays).

The earliest arrival over all scenarios (the envelope) is one solve started
from the union of their starts (:func:`envelope_one_solve`), and the
scenario arriving first at each cell comes from label propagation along the
solve's upwind directions (:func:`propagate_labels`).

Pure numpy on arrays and a :class:`~ttmap.traveltime.Medium`; no files.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from ttmap._typing import BoolArray, FloatArray, IntArray
from ttmap.errors import InputDataError
from ttmap.solver import fast_march_s
from ttmap.sources import Source, SourceStart
from ttmap.traveltime import Medium

__all__ = [
    "ScenarioStarts",
    "OneSolveEnvelope",
    "scenario_starts",
    "site_field_s",
    "reduce_over_starts",
    "sites_by_scenarios_reciprocal",
    "envelope_one_solve",
    "propagate_labels",
    "NO_LABEL",
]

#: Label of cells no scenario reaches.
NO_LABEL: int = -1
#: Default tie tolerance of the label propagation, as a share of the shortest
#: cell-crossing time at the fastest speed of the grid (common practice, no source).
TIE_TOLERANCE_CELLS: float = 0.25
#: Most relaxation sweeps over the union start (see :func:`envelope_one_solve`).
_MAX_RELAX_SWEEPS = 64


@dataclass(frozen=True)
class ScenarioStarts:
    """Start cells, exact start times and sub-cell source samples of many scenarios.

    CSR-like: the cells of scenario ``i`` are
    ``flat_index[offsets[i]:offsets[i + 1]]`` (row-major indices into the
    native grid) with start times ``start_time_s[offsets[i]:offsets[i + 1]]``.

    Optional sub-cell samples (see :func:`scenario_starts`): points on the
    source itself (the boundary of an area, the line, the point), where a
    site field is read by bilinear interpolation of its four surrounding cell
    centres. Sample ``k`` of scenario ``i`` (``sample_offsets[i] <= k <
    sample_offsets[i + 1]``) reads ``sum_m sample_weight[k, m] *
    field[sample_index[k, m]]``.

    Attributes
    ----------
    shape : (rows, cols)
        Native grid shape.
    flat_index : ndarray of shape (n,), int64
    start_time_s : ndarray of shape (n,), float64, seconds after the origin
    offsets : ndarray of shape (n_scenarios + 1,), int64
    sample_index : ndarray of shape (m, 4), int64, or None
    sample_weight : ndarray of shape (m, 4), float64, or None
    sample_offsets : ndarray of shape (n_scenarios + 1,), int64, or None
    """

    shape: tuple[int, int]
    flat_index: NDArray[np.int64] = field(repr=False)
    start_time_s: FloatArray = field(repr=False)
    offsets: NDArray[np.int64] = field(repr=False)
    sample_index: NDArray[np.int64] | None = field(default=None, repr=False)
    sample_weight: FloatArray | None = field(default=None, repr=False)
    sample_offsets: NDArray[np.int64] | None = field(default=None, repr=False)

    @property
    def n_scenarios(self) -> int:
        """Number of scenarios."""
        return int(self.offsets.size - 1)

    @property
    def has_samples(self) -> bool:
        """True if sub-cell source samples are present."""
        return (
            self.sample_index is not None
            and self.sample_weight is not None
            and self.sample_offsets is not None
        )

    def cells(self, i: int) -> tuple[NDArray[np.int64], FloatArray]:
        """Flat indices and start times of scenario ``i``."""
        a, b = int(self.offsets[i]), int(self.offsets[i + 1])
        return self.flat_index[a:b], self.start_time_s[a:b]

    @classmethod
    def concatenate(cls, parts: Sequence[ScenarioStarts]) -> ScenarioStarts:
        """Scenarios of several :class:`ScenarioStarts` (one grid) in order, samples kept.

        Raises
        ------
        InputDataError
            No parts, or parts of different grids.
        """
        if len(parts) == 0:
            raise InputDataError("no scenario starts to join; pass at least one")
        shape = tuple(parts[0].shape)
        if any(tuple(p.shape) != shape for p in parts):
            raise InputDataError("scenario starts of different grids cannot be joined")

        def offsets(sizes: list[int]) -> NDArray[np.int64]:
            out = np.zeros(len(sizes) + 1, dtype=np.int64)
            out[1:] = np.cumsum(sizes, dtype=np.int64)
            return out

        cell_sizes = [int(n) for p in parts for n in np.diff(p.offsets)]
        with_samples = all(p.has_samples for p in parts)
        s_idx = s_w = s_off = None
        if with_samples:
            s_idx = np.concatenate([p.sample_index for p in parts if p.sample_index is not None])
            s_w = np.concatenate([p.sample_weight for p in parts if p.sample_weight is not None])
            s_off = offsets(
                [int(n) for p in parts if p.sample_offsets is not None for n in np.diff(p.sample_offsets)]
            )
        return cls(
            shape=(int(shape[0]), int(shape[1])),
            flat_index=np.concatenate([p.flat_index for p in parts]).astype(np.int64),
            start_time_s=np.concatenate([p.start_time_s for p in parts]).astype(np.float64),
            offsets=offsets(cell_sizes),
            sample_index=s_idx,
            sample_weight=s_w,
            sample_offsets=s_off,
        )


@dataclass(frozen=True)
class _PlaneSeeds:
    """One start on the solve plane: region and outer band (absolute times), inner band."""

    region: NDArray[np.int64]
    region_t: FloatArray
    outer: NDArray[np.int64]
    outer_t: FloatArray
    inner: NDArray[np.int64]
    inner_tau: FloatArray
    native_zero: tuple[IntArray, IntArray] | None


def _plane_seeds(start: SourceStart, ncols: int) -> _PlaneSeeds:
    ir, ic = start.inside_cells
    br, bc = start.band_cells
    bt = np.asarray(start.band_time_s, dtype=np.float64)
    out = bt > 0.0
    return _PlaneSeeds(
        region=np.asarray(ir, np.int64) * ncols + np.asarray(ic, np.int64),
        region_t=np.asarray(start.inside_time_s, dtype=np.float64),
        outer=np.asarray(br[out], np.int64) * ncols + np.asarray(bc[out], np.int64),
        outer_t=start.contour_time_s + bt[out],
        inner=np.asarray(br[~out], np.int64) * ncols + np.asarray(bc[~out], np.int64),
        inner_tau=bt[~out],
        native_zero=start.native_zero_cells,
    )


def _min_per_key(keys: NDArray[np.int64], values: FloatArray) -> tuple[NDArray[np.int64], FloatArray]:
    """Unique keys (sorted) and the smallest value of each."""
    if keys.size == 0:
        return keys, values
    order = np.lexsort((values, keys))
    k, v = keys[order], values[order]
    first = np.ones(k.size, dtype=bool)
    first[1:] = k[1:] != k[:-1]
    return k[first], v[first]


def _seeds_to_native(medium: Medium, seeds: _PlaneSeeds) -> tuple[NDArray[np.int64], FloatArray]:
    """Native cells and start times a direct solve would give them (see module notes).

    Projected grids: the plane cells themselves. Lon/lat grids: a native cell
    takes the interpolation :meth:`SolvePlane.to_native` makes of the solve rows
    bracketing it, where every row it uses is a start cell; area sources add their
    native cells inside the area at time zero (as the direct solve sets them).
    """
    plane = medium.plane
    rows_n, cols_n = medium.grid.shape
    ncp = plane.shape[1]
    keys, times = _min_per_key(
        np.concatenate([seeds.region, seeds.outer]), np.concatenate([seeds.region_t, seeds.outer_t])
    )
    pr, pc = keys // ncp, keys % ncp
    if plane.is_identity:
        nr, nc, nt = pr, pc, times
    else:
        cand_r = (plane.native_row[pr][:, None] + np.arange(-1, 2)[None, :]).ravel()
        cand_c = np.repeat(pc, 3)
        ok = (cand_r >= 0) & (cand_r < rows_n)
        cand = np.unique(cand_r[ok] * ncp + cand_c[ok])
        cr, cc = cand // ncp, cand % ncp
        r0, r1, w = plane.back_row0[cr], plane.back_row1[cr], plane.back_weight[cr]
        t0 = _lookup(keys, times, r0.astype(np.int64) * ncp + cc)
        t1 = _lookup(keys, times, r1.astype(np.int64) * ncp + cc)
        with np.errstate(invalid="ignore"):
            val = np.where(w > 0.0, (1.0 - w) * t0 + w * t1, t0)
            val = np.where(w >= 1.0, t1, val)
        good = np.isfinite(val)
        nr, nc, nt = cr[good], cc[good], val[good]
    nr = np.asarray(nr, np.int64)
    nc = np.asarray(nc, np.int64)
    parts_k = [nr * cols_n + nc]
    parts_t = [np.asarray(nt, np.float64)]
    if plane.drop_seam:
        first = nc == 0
        parts_k.append(nr[first] * cols_n + (cols_n - 1))
        parts_t.append(parts_t[0][first])
    if seeds.native_zero is not None:
        zr, zc = seeds.native_zero
        parts_k.append(np.asarray(zr, np.int64) * cols_n + np.asarray(zc, np.int64))
        parts_t.append(np.zeros(np.asarray(zr).size))
    k, t = _min_per_key(np.concatenate(parts_k), np.concatenate(parts_t))
    wet = medium.water.ravel()[k]
    return k[wet], t[wet]


def _lookup(keys: NDArray[np.int64], values: FloatArray, query: NDArray[np.int64]) -> FloatArray:
    """``values`` at ``query`` keys (``keys`` sorted, unique); NaN where absent."""
    pos = np.searchsorted(keys, query)
    pos_c = np.minimum(pos, max(keys.size - 1, 0))
    hit = (pos < keys.size) & (keys[pos_c] == query) if keys.size else np.zeros(query.shape, bool)
    out = np.full(query.shape, np.nan)
    out[hit] = values[pos_c[hit]]
    return out


#: Spacing of the sub-cell samples along a source's edge or line, in cells.
SAMPLE_SPACING_CELLS: float = 0.25


def _source_samples(
    medium: Medium, source: Source, start: SourceStart
) -> tuple[NDArray[np.int64], FloatArray]:
    """Bilinear corner indices and weights of points on the source itself.

    An area's first arrival at a site is the least time over its points, and
    the least over a region lies on its edge (the time grows inwards), so the
    samples are the area's edge every :data:`SAMPLE_SPACING_CELLS` cells; a
    line gives points along itself and a point (or an area too small to be
    one, solved as a point) its own position as placed. A sample is kept
    where its four surrounding cell centres are water: a site field read there
    by bilinear interpolation is the time from that point of the source, not
    from the nearest cell centre (docs/reciprocal.md, "Sub-cell samples").
    """
    grid = medium.grid
    t = grid.transform
    step = SAMPLE_SPACING_CELLS * min(abs(t.a), abs(t.e))
    pl = start.placement
    if source.kind == "point" or start.as_point:
        xy = np.array([[pl.x, pl.y]])
    else:
        import shapely

        geom = source.in_crs(grid.crs)
        if source.kind == "line":
            edge = geom
        else:
            edge = geom.boundary
        xy = shapely.get_coordinates(shapely.segmentize(edge, step))
    x, y = xy[:, 0], xy[:, 1]
    if grid.is_geographic:
        x = t.c + np.mod(x - t.c, 360.0)
    cf = (x - t.c) / t.a - 0.5
    rf = (y - t.f) / t.e - 0.5
    rows, cols = grid.shape
    r0 = np.floor(rf).astype(np.int64)
    c0 = np.floor(cf).astype(np.int64)
    wr, wc = rf - r0, cf - c0
    c1 = c0 + 1
    if medium.plane.periodic_x:
        ncp = medium.plane.shape[1]
        c0, c1 = np.mod(c0, ncp), np.mod(c1, ncp)
    ok = (r0 >= 0) & (r0 + 1 < rows) & (c0 >= 0) & (c0 < cols) & (c1 >= 0) & (c1 < cols)
    r0, c0, c1, wr, wc = r0[ok], c0[ok], c1[ok], wr[ok], wc[ok]
    idx = np.stack([r0 * cols + c0, r0 * cols + c1, (r0 + 1) * cols + c0, (r0 + 1) * cols + c1], axis=1)
    w = np.stack([(1 - wr) * (1 - wc), (1 - wr) * wc, wr * (1 - wc), wr * wc], axis=1)
    wet = medium.water.ravel()[idx].all(axis=1)
    return idx[wet].astype(np.int64), w[wet].astype(np.float64)


def scenario_starts(
    medium: Medium,
    sources: Sequence[Source],
    *,
    snap_radius_m: float | Sequence[float | None] | None = None,
    samples: bool = True,
) -> ScenarioStarts:
    """Start cells, exact start times and sub-cell samples of each scenario, on the native grid.

    Parameters
    ----------
    medium : Medium
        The speed field the scenarios are solved in (start times of point and
        line sources depend on the speed, so one set of starts per medium).
    sources : sequence of Source
        One per scenario.
    snap_radius_m : float or sequence of (float or None), optional
        As for :meth:`Medium.travel_time` (points on land move to open
        water); a sequence gives each scenario its own radius.
    samples : bool
        Add the sub-cell samples on the sources (default; see
        :class:`ScenarioStarts`).

    Returns
    -------
    ScenarioStarts
        The start region (times zero for areas, straight-ray times for
        points) and the outer ring of its start band (exact time from the
        start front), the cells a direct solve freezes at those times; and
        points on the source where a site field is interpolated.

    Raises
    ------
    InputDataError
        No sources, or a radius list of the wrong length.
    SourceError
        A source that cannot be placed (see :func:`ttmap.sources.place_source`).
    """
    if len(sources) == 0:
        raise InputDataError("no scenarios given; pass at least one source")
    if snap_radius_m is None or isinstance(snap_radius_m, (int, float)):
        radii: list[float | None] = [snap_radius_m] * len(sources)
    else:
        radii = list(snap_radius_m)
        if len(radii) != len(sources):
            raise InputDataError(
                f"{len(radii)} snap radii given for {len(sources)} scenarios; give one per scenario"
            )
    ncp = medium.plane.shape[1]
    keys: list[NDArray[np.int64]] = []
    times: list[FloatArray] = []
    s_idx: list[NDArray[np.int64]] = []
    s_w: list[FloatArray] = []
    for src, radius in zip(sources, radii):
        start = medium.source_start(src, snap_radius_m=radius)
        k, t = _seeds_to_native(medium, _plane_seeds(start, ncp))
        keys.append(k)
        times.append(t)
        if samples:
            si, sw = _source_samples(medium, src, start)
            s_idx.append(si)
            s_w.append(sw)
    offsets = np.zeros(len(sources) + 1, dtype=np.int64)
    offsets[1:] = np.cumsum([k.size for k in keys])
    s_off = None
    if samples:
        s_off = np.zeros(len(sources) + 1, dtype=np.int64)
        s_off[1:] = np.cumsum([k.shape[0] for k in s_idx])
    return ScenarioStarts(
        shape=medium.grid.shape,
        flat_index=np.concatenate(keys).astype(np.int64),
        start_time_s=np.concatenate(times),
        offsets=offsets,
        sample_index=np.concatenate(s_idx).astype(np.int64) if samples else None,
        sample_weight=np.concatenate(s_w) if samples else None,
        sample_offsets=s_off,
    )


def _check_cell(medium: Medium, cell: Any, what: str) -> tuple[int, int]:
    try:
        row, col = (int(v) for v in cell)
    except (TypeError, ValueError) as err:
        raise InputDataError(f"{what} {cell!r} is not a (row, col) pair of integers") from err
    rows, cols = medium.grid.shape
    if not (0 <= row < rows and 0 <= col < cols):
        raise InputDataError(
            f"{what} cell (row {row}, col {col}) lies outside the grid of {rows} x {cols} cells; "
            "snap the position to the grid first"
        )
    if not medium.open_water[row, col]:
        raise InputDataError(
            f"{what} cell (row {row}, col {col}) is not open water; snap it to a reached water "
            "cell first (ttmap.products.sites.snap_sites)"
        )
    return row, col


def site_field_s(
    medium: Medium, cell: tuple[int, int], *, max_time_s: float | None = None, name: str | None = None
) -> FloatArray:
    """Time from every cell to a site (or gauge) at a native water cell: one solve.

    The solve starts from a point at the centre of ``cell`` (the cell the
    direct path reads the site at), through
    :func:`ttmap.sitemap.site_centred_times`; by reciprocity its arrival
    time at y is the time from y to the site.

    Parameters
    ----------
    medium : Medium
    cell : (row, col)
        Native open-water cell of the site, as snapped by the caller.
    max_time_s : float, optional
        Stop the solve here; later cells are NaN.
    name : str, optional
        For messages.

    Returns
    -------
    ndarray of shape grid.shape, float64, seconds; NaN where unreached.
    """
    from ttmap.sitemap import site_centred_times

    row, col = _check_cell(medium, cell, f"site {name!r}" if name else "site")
    x, y = medium.grid.xy(row, col)
    result = site_centred_times(
        medium, Source.point_xy(float(x), float(y)), name=name, snap_radius_m=None,
        max_time_s=max_time_s,
    )
    return result.arrival_time_s


def reduce_over_starts(site_fields: Any, starts: ScenarioStarts) -> FloatArray:
    """Arrival of every scenario at one or more sites: ``min over y of t0(y) + T(y)``.

    Parameters
    ----------
    site_fields : ndarray of shape (rows, cols) or (n_sites, rows, cols), float, seconds
        Site-centred times (:func:`site_field_s`); NaN where unreached.
    starts : ScenarioStarts

    Returns
    -------
    ndarray of shape (n_scenarios,) or (n_sites, n_scenarios), float64, seconds
        NaN where no start cell of the scenario reaches the site.

    Examples
    --------
    >>> starts = ScenarioStarts((1, 4), np.array([0, 1, 3]), np.array([0.0, 0.0, 5.0]),
    ...                         np.array([0, 2, 3]))
    >>> reduce_over_starts(np.array([[10.0, 7.0, np.nan, 1.0]]), starts).tolist()
    [7.0, 6.0]
    """
    f = np.asarray(site_fields, dtype=np.float64)
    single = f.ndim == 2
    if single:
        f = f[None]
    if f.ndim != 3 or f.shape[1:] != tuple(starts.shape):
        raise InputDataError(
            f"site fields of shape {f.shape} do not match the scenario starts' grid {starts.shape}"
        )
    n_sites = f.shape[0]
    out = np.full((n_sites, starts.n_scenarios), np.nan)
    counts = np.diff(starts.offsets)
    nonempty = counts > 0
    if starts.flat_index.size:
        idx = starts.offsets[:-1][nonempty]
        flat = f.reshape(n_sites, -1)
        for j in range(n_sites):  # one site at a time: memory O(start cells)
            vals = flat[j][starts.flat_index] + starts.start_time_s
            out[j, nonempty] = np.fmin.reduceat(vals, idx)
    if starts.has_samples:
        assert starts.sample_index is not None and starts.sample_weight is not None
        assert starts.sample_offsets is not None
        s_counts = np.diff(starts.sample_offsets)
        s_nonempty = s_counts > 0
        if s_nonempty.any():
            s_idx = starts.sample_offsets[:-1][s_nonempty]
            flat = f.reshape(n_sites, -1)
            w = starts.sample_weight
            for j in range(n_sites):
                g = flat[j][starts.sample_index]
                vals = np.einsum("ij,ij->i", g, w)  # NaN where a corner is unreached: skipped
                with np.errstate(invalid="ignore"):
                    out[j, s_nonempty] = np.fmin(out[j, s_nonempty], np.fmin.reduceat(vals, s_idx))
    return out[0] if single else out


def sites_by_scenarios_reciprocal(
    medium: Medium,
    site_cells: Sequence[tuple[int, int]],
    sources: Sequence[Source],
    *,
    snap_radius_m: float | None = None,
    max_time_s: float | None = None,
    starts: ScenarioStarts | None = None,
) -> FloatArray:
    """Sites x scenarios arrival table from one solve per site.

    Parameters
    ----------
    medium : Medium
        The speed model (long-wave front, or the group speed of one period
        for energy arrivals).
    site_cells : sequence of (row, col)
        Native open-water cells the sites are read at (the shared site
        snapping, e.g. :func:`ttmap.products.sites.snap_sites`).
    sources : sequence of Source
        One per scenario, sharing the origin time.
    snap_radius_m : float, optional
        As for :meth:`Medium.travel_time`.
    max_time_s : float, optional
        Later arrivals are NaN.
    starts : ScenarioStarts, optional
        Precomputed :func:`scenario_starts` of ``sources`` on this medium.

    Returns
    -------
    ndarray of shape (n_sites, n_scenarios), float64, seconds after origin
        NaN where the scenario does not reach the site.
    """
    if len(site_cells) == 0:
        raise InputDataError("no sites given; pass at least one (row, col) cell")
    cells = [_check_cell(medium, c, f"site {i}") for i, c in enumerate(site_cells)]
    if starts is None:
        starts = scenario_starts(medium, sources, snap_radius_m=snap_radius_m)
    elif starts.n_scenarios != len(sources) or tuple(starts.shape) != medium.grid.shape:
        raise InputDataError("the precomputed starts do not belong to these sources and grid")
    table = np.empty((len(cells), starts.n_scenarios))
    for j, cell in enumerate(cells):
        table[j] = reduce_over_starts(site_field_s(medium, cell, max_time_s=max_time_s), starts)
    if max_time_s is not None:
        table[table > max_time_s] = np.nan
    return table


# ---------------------------------------------------------------------------
# One-solve envelope
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class OneSolveEnvelope:
    """Earliest arrival over scenarios from one solve, and which scenario gives it.

    Attributes
    ----------
    arrival_time_s : ndarray of shape grid.shape, float64, seconds
        NaN on land and where no scenario arrives.
    first_scenario : ndarray of shape grid.shape, int32
        Index of the scenario arriving first; :data:`NO_LABEL` (-1) where none.
    tie : ndarray of shape grid.shape, bool
        Cells where the two upwind neighbours of the stencil carried different
        scenarios within ``tie_tolerance_s`` (the lower index was taken).
    tie_tolerance_s : float
    relaxed_start_cells : int
        Start cells whose time another scenario's start lowered (overlapping
        starts; see :func:`envelope_one_solve`).
    unlabelled_cells : int
        Reached cells with no upwind neighbour (should be 0).
    """

    arrival_time_s: FloatArray = field(repr=False)
    first_scenario: NDArray[np.int32] = field(repr=False)
    tie: BoolArray = field(repr=False)
    tie_tolerance_s: float
    relaxed_start_cells: int
    unlabelled_cells: int


def propagate_labels(
    time_s: Any,
    seed_label: Any,
    *,
    tie_tolerance_s: float,
    periodic_x: bool = False,
    spacing_m: tuple[float, float] = (1.0, 1.0),
) -> tuple[NDArray[np.int32], BoolArray, int]:
    """Carry start labels downwind through a first-arrival field along its characteristics.

    Each scenario's label is an indicator (1 on its start cells, 0 elsewhere)
    transported along the rays of the front: at a reached cell the ray traced
    back along the time gradient crosses the segment between its upwind
    neighbours, and the cell's label shares are the neighbours' shares
    interpolated there (weights ``(T - T_n) / h_n**2`` of the upwind neighbour
    along each axis, the discrete characteristic of the eikonal update). The
    cell takes the label of the largest share; each cell keeps its two
    largest shares. Following the single smaller neighbour instead (a parent
    pointer) rounds every ray to a grid axis and lets a label run along a
    row or column across a front it does not own (docs/reciprocal.md).

    Cells are processed in order of time, in buckets narrower than the
    smallest time step from the nearer upwind neighbour (so that neighbour
    is always done), with sweeps inside a bucket for the other neighbour.

    **Tie rule.** Equal shares go to the lower label. Along one axis, two
    upwind neighbours whose times differ by at most ``tie_tolerance_s``
    share that axis' weight equally. A cell is marked in the tie mask when
    two of its upwind neighbours carry different labels and their times
    differ by at most ``tie_tolerance_s``.

    Parameters
    ----------
    time_s : ndarray of shape (rows, cols), float, seconds
        NaN where unreached.
    seed_label : ndarray of shape (rows, cols), int
        Label >= 0 at the start cells, -1 elsewhere.
    tie_tolerance_s : float
    periodic_x : bool
        Columns wrap.
    spacing_m : (row_step, col_step)
        Cell size along rows and columns (only their ratio matters).

    Returns
    -------
    labels : ndarray of shape (rows, cols), int32 (-1 where unreached)
    tie : ndarray of shape (rows, cols), bool
    unlabelled : int
        Reached non-seed cells with no upwind neighbour (kept at -1).

    Examples
    --------
    >>> t = np.array([[0.0, 1.0, 2.0, 1.0, 0.0]])
    >>> seeds = np.array([[0, -1, -1, -1, 1]])
    >>> lab, tie, _ = propagate_labels(t, seeds, tie_tolerance_s=0.1)
    >>> lab.tolist(), tie.tolist()
    ([[0, 0, 0, 1, 1]], [[False, False, True, False, False]])
    """
    t = np.asarray(time_s, dtype=np.float64)
    seeds = np.asarray(seed_label)
    if t.ndim != 2 or seeds.shape != t.shape:
        raise InputDataError(f"time {t.shape} and seed labels {seeds.shape} must be 2-D of one shape")
    rows, cols = t.shape
    n = t.size
    tol = float(tie_tolerance_s)
    tf = np.where(np.isfinite(t), t, np.inf).ravel()
    me = np.arange(n, dtype=np.int64)
    r_of, c_of = np.divmod(me, cols)
    # Neighbours: up, down (along rows), left, right (along columns); -1 where none.
    nb = np.full((n, 4), -1, dtype=np.int64)
    nb[:, 0] = np.where(r_of > 0, me - cols, -1)
    nb[:, 1] = np.where(r_of < rows - 1, me + cols, -1)
    nb[:, 2] = np.where(c_of > 0, me - 1, -1)
    nb[:, 3] = np.where(c_of < cols - 1, me + 1, -1)
    if periodic_x and cols > 1:
        nb[:, 2] = np.where(c_of == 0, me + cols - 1, nb[:, 2])
        nb[:, 3] = np.where(c_of == cols - 1, me - cols + 1, nb[:, 3])
    tn = np.where(nb >= 0, tf[np.maximum(nb, 0)], np.inf)
    del r_of, c_of
    # Weight of each neighbour: the upwind one of each axis, (T - T_n) / h^2.
    wgt = np.zeros((n, 4))
    for a, b, h in ((0, 1, float(spacing_m[0])), (2, 3, float(spacing_m[1]))):
        ta, tb = tn[:, a], tn[:, b]
        lo = np.minimum(ta, tb)
        up = lo < tf
        w = np.where(up, (tf - np.where(up, lo, 0.0)) / (h * h), 0.0)
        with np.errstate(invalid="ignore"):  # inf - inf where neither is reached
            both = up & (ta < tf) & (tb < tf) & (np.abs(ta - tb) <= tol)
        take_a = up & ~both & (ta <= tb)
        take_b = up & ~both & ~(ta <= tb)
        wgt[:, a] = np.where(both, 0.5 * w, np.where(take_a, w, 0.0))
        wgt[:, b] = np.where(both, 0.5 * w, np.where(take_b, w, 0.0))
    total = wgt.sum(axis=1)
    seed_flat = seeds.ravel()
    is_seed = (seed_flat >= 0) & np.isfinite(tf)
    reached = np.isfinite(tf)
    todo = reached & ~is_seed & (total > 0.0)
    wgt[todo] /= total[todo, None]
    # Two leading label shares per cell.
    l1 = np.where(is_seed, seed_flat, NO_LABEL).astype(np.int64)
    w1 = np.where(is_seed, 1.0, 0.0)
    l2 = np.full(n, NO_LABEL, dtype=np.int64)
    w2 = np.zeros(n)
    cells = np.flatnonzero(todo)
    if cells.size:
        cells = cells[np.argsort(tf[cells], kind="stable")]
        # Bucket width: below the smallest step from a cell's nearer upwind neighbour.
        near_gap = tf[cells] - np.min(tn[cells], axis=1)
        width = float(np.min(near_gap)) * 0.999
        tc = tf[cells]
        if width > 0.0 and np.isfinite(width):
            key = np.floor((tc - tc[0]) / width).astype(np.int64)
            # Cap the number of buckets; sweeps inside a bucket resolve the rest.
            key = np.minimum(key, 4 * cells.size)
            cuts = np.flatnonzero(np.diff(key)) + 1
        else:
            cuts = np.zeros(0, dtype=np.int64)
        bounds = np.concatenate([[0], cuts, [cells.size]])
        for k in range(bounds.size - 1):
            chunk = cells[bounds[k]:bounds[k + 1]]
            c_nb = np.maximum(nb[chunk], 0)
            c_w = wgt[chunk]
            for _ in range(_MAX_BUCKET_SWEEPS):
                new = _mix_shares(c_nb, c_w, l1, w1, l2, w2)
                same = np.array_equal(new[0], l1[chunk]) and np.allclose(new[1], w1[chunk])
                l1[chunk], w1[chunk], l2[chunk], w2[chunk] = new
                if same:
                    break
    labels = np.where(reached, l1, NO_LABEL).astype(np.int32)
    # Tie mask: two upwind neighbours with different labels and times within the tolerance.
    tie = np.zeros(n, dtype=bool)
    lab_n = np.where(nb >= 0, labels[np.maximum(nb, 0)], NO_LABEL)
    act = (wgt > 0.0) & (lab_n >= 0)
    for i in range(4):
        for j in range(i + 1, 4):
            m = act[:, i] & act[:, j] & (lab_n[:, i] != lab_n[:, j])
            m[m] = np.abs(tn[m, i] - tn[m, j]) <= tol
            tie |= m
    tie &= ~is_seed & reached
    unlabelled = int(np.count_nonzero((labels < 0) & reached))
    return labels.reshape(rows, cols), tie.reshape(rows, cols), unlabelled


#: Most sweeps inside one time bucket of :func:`propagate_labels`.
_MAX_BUCKET_SWEEPS = 6


def _mix_shares(
    nbrs: NDArray[np.int64],
    weights: FloatArray,
    l1: NDArray[np.int64],
    w1: FloatArray,
    l2: NDArray[np.int64],
    w2: FloatArray,
) -> tuple[NDArray[np.int64], FloatArray, NDArray[np.int64], FloatArray]:
    """Two leading label shares of cells mixing their neighbours' shares with ``weights``."""
    lab = np.concatenate([l1[nbrs], l2[nbrs]], axis=1)  # (m, 8)
    val = np.concatenate([w1[nbrs] * weights, w2[nbrs] * weights], axis=1)
    val = np.where(lab >= 0, val, 0.0)
    same = lab[:, :, None] == lab[:, None, :]
    tot = np.einsum("mij,mj->mi", same, val)
    tot = np.where((lab >= 0) & (tot > 0.0), tot, -1.0)
    rows = np.arange(lab.shape[0])
    big = np.iinfo(np.int64).max

    def best(score: FloatArray) -> tuple[NDArray[np.int64], FloatArray]:
        top = score.max(axis=1)
        cand = np.where((score >= top[:, None] * (1.0 - 1e-12)) & (score > 0.0), lab, big)
        k = np.argmin(cand, axis=1)  # on equal shares the lower label
        ok = top > 0.0
        return np.where(ok, lab[rows, k], NO_LABEL), np.where(ok, score[rows, k], 0.0)

    a_l, a_w = best(tot)
    b_l, b_w = best(np.where(lab == a_l[:, None], -1.0, tot))
    return a_l, a_w, b_l, b_w


def _relax(
    keys: NDArray[np.int64],
    t: FloatArray,
    lab: NDArray[np.int32],
    speed_flat: FloatArray,
    shape: tuple[int, int],
    spacing_m: tuple[float, float],
    periodic_x: bool,
) -> int:
    """Lower start times that a neighbouring start cell reaches sooner (in place).

    ``t(y) = min(t(y), t(z) + step(z, y))`` over 4-neighbour start cells z, with
    ``step`` the straight crossing time between the two cell centres (half a
    cell at each speed), repeated until nothing changes. Returns the number of
    cells lowered.
    """
    rows, cols = shape
    r, c = keys // cols, keys % cols
    changed = np.zeros(keys.size, dtype=bool)
    nbrs = []
    for dr, dc, h in ((-1, 0, spacing_m[0]), (1, 0, spacing_m[0]), (0, -1, spacing_m[1]), (0, 1, spacing_m[1])):
        rr, cc = r + dr, c + dc
        if periodic_x:
            cc = np.mod(cc, cols)
        ok = (rr >= 0) & (rr < rows) & (cc >= 0) & (cc < cols)
        q = np.where(ok, rr * cols + cc, -1)
        pos = np.searchsorted(keys, q)
        pos_c = np.minimum(pos, keys.size - 1)
        hit = ok & (keys[pos_c] == q)
        src = np.nonzero(hit)[0]
        nb = pos_c[hit]
        step = h * (0.5 / speed_flat[keys[src]] + 0.5 / speed_flat[keys[nb]])
        nbrs.append((src, nb, step))
    for _ in range(_MAX_RELAX_SWEEPS):
        any_change = False
        for src, nb, step in nbrs:
            cand = t[nb] + step
            better = cand < t[src] * (1.0 - 1e-12)
            if better.any():  # one neighbour per direction: no duplicates in src
                s = src[better]
                t[s] = cand[better]
                lab[s] = lab[nb[better]]
                changed[s] = True
                any_change = True
        if not any_change:
            break
    return int(changed.sum())


def envelope_one_solve(
    medium: Medium,
    sources: Sequence[Source],
    *,
    snap_radius_m: float | None = None,
    max_time_s: float | None = None,
    time_offsets_s: Sequence[float] | None = None,
    tie_tolerance_s: float | None = None,
) -> OneSolveEnvelope:
    """Earliest arrival over many scenarios, and which one arrives first, from one solve.

    The solve starts from the union of all scenarios' starts: each start cell
    takes the smallest start time over the scenarios that start there and the
    label of that scenario (the lower index on equal times). Where the starts
    of different scenarios touch, a start time another scenario's start reaches
    sooner is lowered by relaxation over neighbouring start cells. The front
    is then marched once, and labels are carried downwind by
    :func:`propagate_labels`.

    Parameters
    ----------
    medium : Medium
    sources : sequence of Source
        The scenarios; they share one origin time.
    snap_radius_m, max_time_s : float, optional
        As for :meth:`Medium.travel_time`.
    time_offsets_s : sequence of float, optional
        Per-scenario start-time offsets are **refused** unless all zero: a
        later start could be overrun by an earlier scenario's front, which a
        single solve from fixed starts cannot represent.
    tie_tolerance_s : float, optional
        Default: a quarter of the shortest cell-crossing time at the fastest
        speed of the grid.

    Returns
    -------
    OneSolveEnvelope

    Raises
    ------
    InputDataError
        No sources, or non-zero time offsets.
    """
    if len(sources) == 0:
        raise InputDataError("no scenarios given; pass at least one source")
    if len(sources) > np.iinfo(np.int32).max:
        raise InputDataError(f"{len(sources)} scenarios exceed the int32 label range")
    if time_offsets_s is not None:
        off = np.asarray(time_offsets_s, dtype=np.float64)
        if off.shape != (len(sources),) or np.any(off != 0.0):
            raise InputDataError(
                "per-scenario time offsets are not supported by the one-solve envelope (an earlier "
                "scenario's front may overrun a later start); remove the offsets or solve each "
                "scenario directly"
            )
    # Areas and ruptures start at time zero on their cells: one union solve. Points and
    # lines start from fronts at their own times (a radius over the local speed), which a
    # single start front cannot share: each costs one solve, merged below.
    union_idx = [i for i, s in enumerate(sources) if s.kind in ("area", "rupture")]
    single_idx = [i for i, s in enumerate(sources) if s.kind not in ("area", "rupture")]
    arrival: FloatArray | None = None
    first_native: NDArray[np.int32] | None = None
    tie_native: BoolArray | None = None
    relaxed = unlabelled = 0
    tol = tie_tolerance_s
    if tol is None:
        tol = TIE_TOLERANCE_CELLS * min(medium.plane.spacing_m) / float(
            np.max(medium.speed_plane_m_s[~medium.barrier_plane])
        )
    if union_idx:
        arrival, first_native, tie_native, relaxed, unlabelled = _union_solve(
            medium, [sources[i] for i in union_idx], np.asarray(union_idx, np.int32),
            snap_radius_m=snap_radius_m, max_time_s=max_time_s, tie_tolerance_s=tol,
        )
    for i in single_idx:
        t = medium.travel_time(sources[i], max_time_s=max_time_s, snap_radius_m=snap_radius_m)
        a = t.arrival_time_s
        if arrival is None or first_native is None or tie_native is None:
            arrival = a
            first_native = np.where(np.isfinite(a), i, NO_LABEL).astype(np.int32)
            tie_native = np.zeros(a.shape, dtype=bool)
            continue
        with np.errstate(invalid="ignore"):
            close = np.isfinite(a) & (np.abs(a - arrival) <= tol)
            better = np.isfinite(a) & ~(arrival <= a)
        tie_native |= close & (first_native != i)
        # On equal times the lower index wins (indices of single solves only grow here).
        lower = close & (first_native > i)
        first_native[better | lower] = i
        arrival[better] = a[better]
    assert arrival is not None and first_native is not None and tie_native is not None
    return OneSolveEnvelope(
        arrival_time_s=arrival,
        first_scenario=first_native,
        tie=tie_native,
        tie_tolerance_s=float(tol),
        relaxed_start_cells=relaxed,
        unlabelled_cells=unlabelled,
    )


def _union_solve(
    medium: Medium,
    sources: Sequence[Source],
    index: NDArray[np.int32],
    *,
    snap_radius_m: float | None,
    max_time_s: float | None,
    tie_tolerance_s: float,
) -> tuple[FloatArray, NDArray[np.int32], BoolArray, int, int]:
    """One solve from the union of area starts (all start fronts at time zero)."""
    plane = medium.plane
    ncp = plane.shape[1]
    r_keys, r_t, r_lab, o_keys, o_t, o_lab = [], [], [], [], [], []
    contours: list[float] = []
    zero_cells: list[tuple[NDArray[np.int64], int]] = []
    for i, src in enumerate(sources):
        start = medium.source_start(src, snap_radius_m=snap_radius_m)
        contours.append(float(start.contour_time_s))
        s = _plane_seeds(start, ncp)
        r_keys.append(s.region)
        r_t.append(s.region_t)
        r_lab.append(np.full(s.region.size, index[i], np.int32))
        o_keys.append(s.outer)
        o_t.append(s.outer_t)
        o_lab.append(np.full(s.outer.size, index[i], np.int32))
        if s.native_zero is not None:
            zr, zc = s.native_zero
            zero_cells.append(
                (np.asarray(zr, np.int64) * medium.grid.cols + np.asarray(zc, np.int64), int(index[i]))
            )
    keys = np.concatenate(r_keys + o_keys)
    times = np.concatenate(r_t + o_t)
    labs = np.concatenate(r_lab + o_lab)
    is_reg = np.zeros(keys.size, dtype=bool)
    is_reg[: sum(k.size for k in r_keys)] = True
    # Per cell: smallest time, then lowest label; region if any scenario's region holds it.
    order = np.lexsort((labs, times, keys))
    keys, times, labs, is_reg = keys[order], times[order], labs[order], is_reg[order]
    first = np.ones(keys.size, dtype=bool)
    first[1:] = keys[1:] != keys[:-1]
    grp = np.cumsum(first) - 1
    region_any = np.zeros(int(first.sum()), dtype=bool)
    np.logical_or.at(region_any, grp, is_reg)
    keys, times, labs = keys[first], times[first].copy(), labs[first].copy()
    speed_flat = medium.speed_plane_m_s.ravel()
    relaxed = _relax(keys, times, labs, speed_flat, plane.shape, plane.spacing_m, plane.periodic_x)

    # One start front for all: the earliest of the scenarios' own fronts, C. Start cells
    # earlier than C form the region; every start time is exact, so the band on both sides
    # of the region's edge takes its signed time from C (areas start from a tube of
    # straight-ray times around them, each with its own front time; docs/reciprocal.md).
    front_s = min(contours)
    tiny = 1e-9 * min(plane.spacing_m) / float(np.max(speed_flat))
    inside = np.zeros(plane.shape, dtype=bool)
    inside.ravel()[keys[times < front_s]] = True
    del region_any
    t_known = np.full(plane.shape, np.inf)
    t_known.ravel()[keys] = times
    edge_in = inside & _touches_outside(inside, plane.periodic_x)
    edge_out = ~inside & ~medium.barrier_plane & _touches_outside(~inside, plane.periodic_x)
    missing = edge_out & ~np.isfinite(t_known)
    if missing.any():  # none expected: one step from the region
        hy, hx = plane.spacing_m
        step = np.full(plane.shape, np.inf)
        tin = np.where(inside, t_known, np.inf)
        sp = medium.speed_plane_m_s
        step[1:, :] = np.minimum(step[1:, :], tin[:-1, :] + hy / sp[1:, :])
        step[:-1, :] = np.minimum(step[:-1, :], tin[1:, :] + hy / sp[:-1, :])
        step[:, 1:] = np.minimum(step[:, 1:], tin[:, :-1] + hx / sp[:, 1:])
        step[:, :-1] = np.minimum(step[:, :-1], tin[:, 1:] + hx / sp[:, :-1])
        if plane.periodic_x:
            step[:, 0] = np.minimum(step[:, 0], tin[:, -1] + hx / sp[:, 0])
            step[:, -1] = np.minimum(step[:, -1], tin[:, 0] + hx / sp[:, -1])
        t_known[missing] = step[missing]
    band_in = np.flatnonzero(edge_in)
    band_out = np.flatnonzero(edge_out)
    band_keys = np.concatenate([band_in, band_out])
    band_time = np.concatenate([
        np.minimum(t_known.ravel()[band_in] - front_s, -tiny),
        np.maximum(t_known.ravel()[band_out] - front_s, tiny),
    ])
    del t_known
    t_plane = fast_march_s(
        medium.speed_plane_m_s,
        barrier=medium.barrier_plane,
        inside=inside,
        band_cells=(band_keys // ncp, band_keys % ncp),
        band_time_s=band_time,
        spacing_m=plane.spacing_m,
        periodic_x=plane.periodic_x,
        max_time_s=None if max_time_s is None else max(max_time_s - front_s, tiny),
        borrow_speed=False,
    )
    t_plane += front_s
    t_flat = t_plane.ravel()
    t_flat[keys] = times  # start cells keep their (relaxed) start times
    seed = np.full(t_plane.size, NO_LABEL, dtype=np.int32)
    seed[keys] = labs
    labels, tie, unlabelled = propagate_labels(
        t_plane, seed.reshape(plane.shape), tie_tolerance_s=tie_tolerance_s,
        periodic_x=plane.periodic_x, spacing_m=plane.spacing_m,
    )
    arrival = plane.to_native(t_plane)
    first_native, tie_native = _labels_to_native(medium, labels, tie)
    flat_a, flat_l = arrival.ravel(), first_native.ravel()
    for zk, i in zero_cells:
        flat_a[zk] = 0.0
    for zk, i in reversed(zero_cells):  # several areas may hold a cell: the lowest index wins
        flat_l[zk] = i
    arrival[~medium.water] = np.nan
    if max_time_s is not None:
        with np.errstate(invalid="ignore"):
            arrival[arrival > max_time_s] = np.nan
    first_native[~np.isfinite(arrival)] = NO_LABEL
    tie_native &= np.isfinite(arrival)
    return arrival, first_native, tie_native, relaxed, unlabelled


def _touches_outside(inside: BoolArray, periodic_x: bool) -> BoolArray:
    out = np.zeros_like(inside)
    o = ~inside
    out[1:, :] |= o[:-1, :]
    out[:-1, :] |= o[1:, :]
    out[:, 1:] |= o[:, :-1]
    out[:, :-1] |= o[:, 1:]
    if periodic_x:
        out[:, 0] |= o[:, -1]
        out[:, -1] |= o[:, 0]
    return out


def _labels_to_native(
    medium: Medium, labels: NDArray[np.int32], tie: BoolArray
) -> tuple[NDArray[np.int32], BoolArray]:
    """Plane labels on the native grid: the nearer solve row, else the other one."""
    plane = medium.plane
    if plane.is_identity:
        lab, tt = labels, tie
    else:
        r0, r1, w = plane.back_row0, plane.back_row1, plane.back_weight
        near = np.where(w < 0.5, r0, r1)
        far = np.where(w < 0.5, r1, r0)
        a, b = labels[near, :], labels[far, :]
        lab = np.where(a >= 0, a, b)
        tt = tie[near, :] | tie[far, :]
    if plane.drop_seam:
        lab = np.concatenate([lab, lab[:, :1]], axis=1)
        tt = np.concatenate([tt, tt[:, :1]], axis=1)
    return np.array(lab, dtype=np.int32), np.array(tt, dtype=bool)
