"""Coastal arrival layer: the coastline as lines carrying first-arrival minutes.

A planner's question is "which stretch of our coast is hit first, and when?".
The answer drawn here is the grid's own coastline: every cell edge between a
water cell and a land (or nodata) cell, carrying the arrival time of the water
cell beside it. Edges are sorted into arrival *classes* (every 5 minutes by
default, or between given isochrone levels) and the touching edges of one
class are joined, in order, into one line: each feature is a stretch of coast
reached within one class, with the earliest, latest and mean arrival along
it, so a planner sees at a glance which stretch is hit first.

Functions here are pure (numpy and shapely, no file I/O); inputs are never
modified. :func:`coast_layer` turns the result into a
:class:`ttmap.io.vector.VectorLayer` and :func:`coast_sld` styles it.

Notes
-----
Coordinates follow the raster convention of the rest of the package: the
affine ``transform`` maps pixel-corner ``(col, row)`` to map ``(x, y)``, so
the edge between cells ``(r, c)`` and ``(r, c + 1)`` runs from
``transform * (c + 1, r)`` to ``transform * (c + 1, r + 1)``, and the edge
between ``(r, c)`` and ``(r + 1, c)`` from ``transform * (c, r + 1)`` to
``transform * (c + 1, r + 1)``. Both ends of every edge are computed from the
same integer corner indices, so stretches that meet share the corner's
coordinates exactly.

The outer border of the grid is not coast: only edges between two cells of
the grid are considered. Water cells without an arrival time (NaN or
infinite: a basin the front never reaches, or beyond a maximum time) give
*unreached* edges; they are kept in a class of their own, flagged
``reached = False`` with NaN minutes, so that a map shows that stretch of
coast as "no arrival computed" instead of leaving it out.

Each edge is one cell side long, so a feature's mean is the mean over its
cell edges (not weighted by length; on geographic grids east-west edges
shorten towards the poles).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ttmap.defaults import COAST_CLASS_INTERVAL_MIN
from ttmap.errors import InputDataError

if TYPE_CHECKING:
    from affine import Affine
    from shapely.geometry.base import BaseGeometry

    from ttmap.io.vector import VectorLayer

__all__ = [
    "COAST_LAYER_NAME",
    "UNREACHED_LABEL",
    "CoastSegment",
    "CoastTable",
    "coast_classes",
    "coast_layer",
    "coast_sld",
    "coastal_arrival_lines",
    "coastal_arrival_table",
]

#: Name of the vector layer written by :func:`coast_layer`.
COAST_LAYER_NAME: str = "coastal_arrival"

#: Label of the class of coast next to water the front never reaches.
UNREACHED_LABEL: str = "no arrival computed"

#: Upper limit on the number of arrival classes (a mistyped interval).
_MAX_CLASSES = 100_000

_UNREACHED_COLOR = "#8c8c8c"


@dataclass(frozen=True)
class CoastSegment:
    """A connected stretch of coast whose first arrival lies in one class.

    Attributes
    ----------
    minutes_min, minutes_max, minutes_mean : float
        Earliest, latest and mean first-arrival time along the stretch,
        minutes after origin (the times of the water cells beside its edges).
        NaN for an unreached stretch.
    class_min, class_max : float
        The arrival class ``[class_min, class_max)`` in minutes; ``class_max``
        is ``inf`` for the open last class of a level list. Both NaN for an
        unreached stretch.
    label : str
        The class as ``h:mm-h:mm`` (e.g. ``"0:40-0:45"``), ``"2:00 and
        later"`` for an open last class, or :data:`UNREACHED_LABEL`.
    n_edges : int
        Number of cell edges in the stretch.
    geometry : shapely.LineString
        The stretch's cell edges joined in order, in map coordinates, without
        the corners where it runs straight on; closed (first point repeated)
        for an island reached within one class.
    """

    minutes_min: float
    minutes_max: float
    minutes_mean: float
    class_min: float
    class_max: float
    label: str
    n_edges: int
    geometry: BaseGeometry

    @property
    def reached(self) -> bool:
        """True if the front reaches the water along this stretch."""
        return bool(math.isfinite(self.minutes_min))


@dataclass(frozen=True, eq=False)
class CoastTable:
    """The stretches of coast as columns, one row per stretch (see :class:`CoastSegment`).

    What :func:`coastal_arrival_table` returns: the same rows, in the same
    order, as :func:`coastal_arrival_lines`, without a Python object per
    stretch (a rough 35-million-cell grid has about 440 000 stretches).
    :func:`coast_layer` and :func:`coast_classes` take either form.

    Attributes
    ----------
    minutes_min, minutes_max, minutes_mean : ndarray of shape (n,), float64, minutes
        NaN for unreached stretches.
    class_min, class_max : ndarray of shape (n,), float64, minutes
        ``class_max`` is inf for the open last class of a level list; both
        NaN for unreached stretches.
    label : ndarray of shape (n,), object (str)
    n_edges : ndarray of shape (n,), int64
    geometry : ndarray of shape (n,), object (shapely.LineString)
    """

    minutes_min: NDArray[np.float64]
    minutes_max: NDArray[np.float64]
    minutes_mean: NDArray[np.float64]
    class_min: NDArray[np.float64]
    class_max: NDArray[np.float64]
    label: NDArray[np.object_]
    n_edges: NDArray[np.int64]
    geometry: NDArray[np.object_]

    def __len__(self) -> int:
        return int(self.minutes_min.size)

    @property
    def reached(self) -> NDArray[np.bool_]:
        """True where the front reaches the water along the stretch."""
        return np.isfinite(self.minutes_min)

    def segments(self) -> list[CoastSegment]:
        """The rows as :class:`CoastSegment` records."""
        return [
            CoastSegment(*row)
            for row in zip(
                self.minutes_min.tolist(),
                self.minutes_max.tolist(),
                self.minutes_mean.tolist(),
                self.class_min.tolist(),
                self.class_max.tolist(),
                self.label.tolist(),
                self.n_edges.tolist(),
                self.geometry.tolist(),
                strict=True,
            )
        ]


# ---------------------------------------------------------------------------
# Checks
# ---------------------------------------------------------------------------


def _check_inputs(
    time_min: ArrayLike, water_mask: ArrayLike, transform: Affine
) -> tuple[NDArray[np.float64], NDArray[np.bool_], tuple[float, ...]]:
    field = np.asarray(time_min)
    if field.ndim != 2:
        raise InputDataError(
            f"time_min must be a 2-D array (rows, cols), got shape {field.shape}; "
            "pass one band of the arrival-time raster"
        )
    if not np.issubdtype(field.dtype, np.number) or np.iscomplexobj(field):
        raise InputDataError(
            f"time_min must hold real numbers (minutes), got dtype {field.dtype}; "
            "convert it with numpy.asarray(time_min, dtype=float)"
        )
    water = np.asarray(water_mask)
    if water.shape != field.shape:
        raise InputDataError(
            f"water_mask has shape {water.shape} but time_min has shape {field.shape}; "
            "pass the water mask of the same grid (e.g. Medium.water)"
        )
    if water.dtype != np.bool_:
        if not np.issubdtype(water.dtype, np.number):
            raise InputDataError(
                f"water_mask must be boolean (True on water), got dtype {water.dtype}"
            )
        water = water != 0
    coeffs = tuple(float(v) for v in tuple(transform)[:6]) if transform is not None else ()
    if len(coeffs) != 6 or not all(math.isfinite(v) for v in coeffs):
        raise InputDataError(
            f"transform must be an affine.Affine with finite coefficients, got {transform!r}; "
            "pass the raster's transform (Grid.transform)"
        )
    if coeffs[0] * coeffs[4] - coeffs[1] * coeffs[3] == 0.0:
        raise InputDataError(f"transform {transform!r} is degenerate (determinant 0)")
    return np.asarray(field, dtype=np.float64), water, coeffs


def _check_classes(
    class_interval_min: float, levels_min: ArrayLike | None
) -> tuple[float, NDArray[np.float64] | None]:
    step = float(class_interval_min)
    if not math.isfinite(step) or step <= 0.0:
        raise InputDataError(
            f"class interval {class_interval_min!r} min must be a positive number of minutes; "
            "pass e.g. 5 for a class every 5 minutes"
        )
    if levels_min is None:
        return step, None
    levels = np.asarray(levels_min, dtype=np.float64).ravel()
    if levels.size == 0:
        raise InputDataError("levels_min is empty; give at least one level or leave it out")
    if not np.all(np.isfinite(levels)) or levels[0] <= 0.0 or np.any(np.diff(levels) <= 0.0):
        raise InputDataError(
            f"levels_min {levels[:8].tolist()} must be finite, > 0 minutes and strictly "
            "increasing (e.g. the isochrone levels)"
        )
    if levels.size > _MAX_CLASSES:
        raise InputDataError(f"{levels.size} levels given (more than {_MAX_CLASSES}); use fewer")
    return step, levels


def _class_label(lower: float, upper: float) -> str:
    from ttmap.products.isochrones import format_minutes_label

    if not math.isfinite(upper):
        return f"{format_minutes_label(lower)} and later"
    return f"{format_minutes_label(lower)}-{format_minutes_label(upper)}"


# ---------------------------------------------------------------------------
# Coastal edges
# ---------------------------------------------------------------------------


def _coast_edges(
    field: NDArray[np.float64], water: NDArray[np.bool_]
) -> tuple[
    NDArray[np.intp], NDArray[np.intp], NDArray[np.intp], NDArray[np.intp], NDArray[np.float64]
]:
    """Corner indices of both ends of every water/land edge, and the water side's time.

    Returns ``(row0, col0, row1, col1, minutes)``: corner (row, col) indices
    in the ``(rows + 1, cols + 1)`` lattice of cell corners.
    """
    # Between (r, c) and (r, c + 1): the vertical edge at corner column c + 1.
    left, right = water[:, :-1], water[:, 1:]
    r_v, c_v = np.nonzero(left ^ right)
    water_col = np.where(left[r_v, c_v], c_v, c_v + 1)
    t_v = field[r_v, water_col]
    # Between (r, c) and (r + 1, c): the horizontal edge at corner row r + 1.
    upper, lower = water[:-1, :], water[1:, :]
    r_h, c_h = np.nonzero(upper ^ lower)
    water_row = np.where(upper[r_h, c_h], r_h, r_h + 1)
    t_h = field[water_row, c_h]
    row0 = np.concatenate([r_v, r_h + 1])
    col0 = np.concatenate([c_v + 1, c_h])
    row1 = np.concatenate([r_v + 1, r_h + 1])
    col1 = np.concatenate([c_v + 1, c_h + 1])
    minutes = np.concatenate([t_v, t_h])
    minutes[~np.isfinite(minutes)] = np.nan
    return row0, col0, row1, col1, minutes


def _classify(
    minutes: NDArray[np.float64], step: float, levels: NDArray[np.float64] | None
) -> tuple[NDArray[np.int64], NDArray[np.float64], NDArray[np.float64]]:
    """Class number of each edge (unreached last) and each class's bounds."""
    reached = np.isfinite(minutes)
    if levels is None:
        k = np.zeros(minutes.shape, dtype=np.int64)
        if reached.any():
            kf = np.floor(minutes[reached] / step)
            span = float(kf.max() - kf.min()) + 1.0
            if span > _MAX_CLASSES:
                raise InputDataError(
                    f"class interval {step:g} min over arrival times "
                    f"{np.nanmin(minutes):g}..{np.nanmax(minutes):g} min gives {span:.0f} "
                    f"classes (more than {_MAX_CLASSES}); use a larger interval"
                )
            k[reached] = kf.astype(np.int64)
    else:
        k = np.searchsorted(levels, np.where(reached, minutes, 0.0), side="right").astype(np.int64)
    # Compact class numbers; the unreached class (if any) comes last.
    present = np.unique(k[reached]) if reached.any() else np.zeros(0, dtype=np.int64)
    compact = np.searchsorted(present, k)
    compact[~reached] = present.size
    if levels is None:
        lower = present.astype(np.float64) * step
        upper = (present.astype(np.float64) + 1.0) * step
    else:
        edges = np.concatenate([[0.0], levels, [np.inf]])
        lower = edges[present]
        upper = edges[present + 1]
    if (~reached).any():
        lower = np.append(lower, np.nan)
        upper = np.append(upper, np.nan)
    return compact.astype(np.int64), lower, upper


# Corner slots of the edges meeting at a lattice corner: north, east, south, west.
_N, _E, _S, _W = 0, 1, 2, 3
# Where four coast edges meet (two land cells touching at a corner), the line
# goes round each land cell on its own, so lines never cross: north-west cell
# land -> N with W and E with S; otherwise N with E and S with W. Such corners
# are rare in a Medium's water mask, where diagonal-only water joins are opened.
_PAIR_NW_LAND = np.array([_W, _S, _E, _N])
_PAIR_NE_LAND = np.array([_E, _N, _W, _S])


@dataclass(frozen=True)
class _Chains:
    order: NDArray[np.intp]  # edge indices, chain after chain, in line order
    starts: NDArray[np.intp]  # position in ``order`` where each chain begins
    vertex_lattice: NDArray[np.int64]  # lattice ids of the kept vertices, chain after chain
    vertex_offsets: NDArray[np.int64]  # (n_chains + 1,) offsets into vertex_lattice


def _trace_chains(
    row0: NDArray[np.intp],
    col0: NDArray[np.intp],
    row1: NDArray[np.intp],
    col1: NDArray[np.intp],
    cls: NDArray[np.int64],
    water: NDArray[np.bool_],
) -> _Chains:
    """Order the coast edges into chains: simple lines of touching edges of one class.

    At a corner the line goes on only through an edge of the same class; where
    four coast edges meet it pairs the two edges of each land cell (see
    ``_PAIR_*``). Each edge thus has at most two neighbours and the chains are
    paths or closed rings (an island inside one class). A depth-first walk
    (scipy.sparse.csgraph) from one start per chain lists every chain in line
    order; the starts are threaded on a spine of extra nodes so that the walk
    is one call.
    """
    from scipy.sparse import csr_matrix
    from scipy.sparse.csgraph import connected_components, depth_first_order

    rows, cols = water.shape
    n_edges = int(cls.size)
    width = cols + 1
    itype = np.int32 if 2 * n_edges + 8 < 2**31 else np.int64
    lat0 = row0.astype(np.int64) * width + col0
    lat1 = row1.astype(np.int64) * width + col1
    used = np.zeros((rows + 1) * width, dtype=bool)
    used[lat0] = True
    used[lat1] = True
    node_lat = np.flatnonzero(used)
    n_nodes = int(node_lat.size)
    del used
    compact = np.empty((rows + 1) * width, dtype=itype)  # only the used corners are set
    compact[node_lat] = np.arange(n_nodes, dtype=itype)
    node0 = compact[lat0].astype(np.int64)
    node1 = compact[lat1].astype(np.int64)
    del compact

    # Edges at each corner by slot; node0 is the north or west end of an edge.
    vertical = col0 == col1
    slot0 = np.where(vertical, _S, _E)
    slot1 = np.where(vertical, _N, _W)
    edge_ids = np.arange(n_edges, dtype=itype)
    table = np.full((n_nodes, 4), -1, dtype=itype)
    table[node0, slot0] = edge_ids
    table[node1, slot1] = edge_ids
    valid = table >= 0
    degree = valid.sum(axis=1)
    slot_sum = (valid * np.arange(4)).sum(axis=1)
    nw_land = np.zeros(n_nodes, dtype=bool)
    four = np.flatnonzero(degree == 4)  # never on the lattice border
    nw_land[four] = ~water[node_lat[four] // width - 1, node_lat[four] % width - 1]

    def neighbour(node: NDArray[np.int64], slot: NDArray[np.intp]) -> NDArray[np.int64]:
        deg = degree[node]
        other = np.where(
            deg == 2,
            slot_sum[node] - slot,
            np.where(nw_land[node], _PAIR_NW_LAND[slot], _PAIR_NE_LAND[slot]),
        )
        partner = table[node, np.clip(other, 0, 3)].astype(np.int64)
        ok = ((deg == 2) | (deg == 4)) & (partner >= 0)
        ok[ok] = cls[partner[ok]] == cls[ok]
        return np.where(ok, partner, -1)

    nb0 = neighbour(node0, slot0)
    nb1 = neighbour(node1, slot1)

    def links(extra_src: Any = (), extra_dst: Any = (), n: int = n_edges) -> Any:
        has0, has1 = nb0 >= 0, nb1 >= 0
        src = np.concatenate([edge_ids[has0], edge_ids[has1], np.asarray(extra_src, dtype=itype)])
        dst = np.concatenate(
            [nb0[has0].astype(itype), nb1[has1].astype(itype), np.asarray(extra_dst, dtype=itype)]
        )
        return csr_matrix((np.ones(src.size, dtype=np.int8), (src, dst)), shape=(n, n))

    n_comp, label = connected_components(links(), directed=False)
    open_end = (nb0 < 0) | (nb1 < 0)
    # Start of each chain: its lowest open end; a ring starts at its lowest edge.
    key = np.where(open_end, edge_ids.astype(np.int64), edge_ids.astype(np.int64) + n_edges)
    start_key = np.full(n_comp, 2 * n_edges, dtype=np.int64)
    np.minimum.at(start_key, label, key)
    ring = start_key >= n_edges
    start = np.where(ring, start_key - n_edges, start_key)
    # Open each ring between its start and the start's neighbour at node1.
    m = start[ring]
    p = nb1[m]
    nb1[m] = -1
    at0 = nb0[p] == m
    nb0[p[at0]] = -1
    nb1[p[~at0]] = -1

    spine = n_edges + np.arange(n_comp, dtype=np.int64)
    src = np.concatenate([spine, start, spine[:-1], spine[1:]])
    dst = np.concatenate([start, spine, spine[1:], spine[:-1]])
    graph = links(src, dst, n_edges + n_comp)
    visit, pred = depth_first_order(graph, n_edges, directed=True, return_predecessors=True)
    order = visit[visit < n_edges].astype(np.intp)
    begins = pred[order] >= n_edges
    starts = np.flatnonzero(begins)

    # Vertices: the corner each edge is entered by, then the last edge's exit corner.
    n0, n1 = node0[order], node1[order]
    prev0, prev1 = np.roll(n0, 1), np.roll(n1, 1)
    next0, next1 = np.roll(n0, -1), np.roll(n1, -1)
    entry_by_prev = np.where((n0 == prev0) | (n0 == prev1), n0, n1)
    ends = np.r_[begins[1:], True]  # last edge of each chain
    lone = begins & ends
    # A chain's first edge: enter by the corner it does not share with the next edge.
    shared_next = np.where((n0 == next0) | (n0 == next1), n0, n1)
    entry_first = np.where(shared_next == n0, n1, n0)
    entry = np.where(begins, np.where(lone, n0, entry_first), entry_by_prev)
    exit_ = np.where(entry == n0, n1, n0)
    chain_of = np.cumsum(begins) - 1
    n_chains = starts.size
    vert = np.empty(order.size + n_chains, dtype=np.int64)
    vert[np.arange(order.size) + chain_of] = entry
    last = np.flatnonzero(ends)
    vert[last + chain_of[last] + 1] = exit_[last]
    lattice = node_lat[vert]
    # Drop corners where the line runs straight on.
    first_v = np.zeros(vert.size, dtype=bool)
    first_v[starts + np.arange(n_chains)] = True
    last_v = np.zeros(vert.size, dtype=bool)
    last_v[last + chain_of[last] + 1] = True
    step = np.diff(lattice)
    straight = np.zeros(vert.size, dtype=bool)
    straight[1:-1] = step[1:] == step[:-1]
    keep = first_v | last_v | ~straight
    kept_chain = np.cumsum(first_v) - 1
    counts = np.bincount(kept_chain[keep], minlength=n_chains)
    offsets = np.r_[0, np.cumsum(counts)].astype(np.int64)
    return _Chains(order, starts, lattice[keep], offsets)


def coastal_arrival_lines(
    time_min: ArrayLike,
    water_mask: ArrayLike,
    transform: Affine,
    *,
    class_interval_min: float = COAST_CLASS_INTERVAL_MIN,
    levels_min: ArrayLike | None = None,
) -> list[CoastSegment]:
    """The grid's coastline as stretches of coast, each with its first-arrival minutes.

    Parameters
    ----------
    time_min : ndarray of shape (rows, cols), float, minutes
        First-arrival time after origin; NaN (or inf) where the wave never
        arrives. Only the values of water cells are used. Negative values
        (e.g. minutes left after a notification delay) are allowed.
    water_mask : ndarray of shape (rows, cols), bool
        True on water (e.g. :attr:`ttmap.Medium.water`); False on land and
        nodata.
    transform : affine.Affine
        Maps pixel-corner ``(col, row)`` to map ``(x, y)`` (Grid.transform).
    class_interval_min : float
        Width of the arrival classes, minutes (default 5):
        ``[k * interval, (k + 1) * interval)``. Ignored when ``levels_min``
        is given.
    levels_min : array_like of float, minutes, optional
        Class breaks instead of a fixed interval (e.g. the isochrone levels):
        classes ``[0, L0), [L0, L1), ..., [Ln, inf)``; the first class also
        takes any value below 0.

    Returns
    -------
    list of CoastSegment
        One per stretch of coast (a simple line of touching cell edges in one
        class), ordered by earliest arrival; unreached stretches (NaN
        minutes) last. Empty when the grid has no water/land edge inside it.

    Raises
    ------
    InputDataError
        Arrays that are not 2-D, of different shapes or not numeric; a bad
        transform; a class interval that is not positive or gives more than
        100000 classes; levels that are not positive and increasing.

    Notes
    -----
    Edges are found with vectorised comparisons of neighbouring cells. A
    stretch runs on through a corner only into an edge of the same class;
    where four coast edges meet (two land cells touching at a corner) it
    goes round each land cell on its own, so lines never cross. A stretch
    that closes on itself (an island reached within one class) is a closed
    LineString. Corners where the line runs straight on are dropped. See the
    module notes for coordinates and unreached water.

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> t = np.array([[1.0, 2.0, np.nan], [3.0, 4.0, np.nan]])
    >>> water = np.array([[True, True, False], [True, True, False]])
    >>> [(s.minutes_min, s.minutes_max, s.label, s.geometry.wkt)
    ...  for s in coastal_arrival_lines(t, water, Affine.identity())]
    [(2.0, 4.0, '0:00-0:05', 'LINESTRING (2 0, 2 2)')]
    """
    return coastal_arrival_table(
        time_min,
        water_mask,
        transform,
        class_interval_min=class_interval_min,
        levels_min=levels_min,
    ).segments()


def coastal_arrival_table(
    time_min: ArrayLike,
    water_mask: ArrayLike,
    transform: Affine,
    *,
    class_interval_min: float = COAST_CLASS_INTERVAL_MIN,
    levels_min: ArrayLike | None = None,
) -> CoastTable:
    """:func:`coastal_arrival_lines` as columns: the same stretches, one row each.

    Parameters and errors are those of :func:`coastal_arrival_lines`; use
    this form for large grids (no Python object per stretch), and
    :meth:`CoastTable.segments` for the records.

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> t = np.array([[1.0, 2.0, np.nan], [3.0, 4.0, np.nan]])
    >>> water = np.array([[True, True, False], [True, True, False]])
    >>> table = coastal_arrival_table(t, water, Affine.identity())
    >>> len(table), table.minutes_mean.tolist(), table.label.tolist()
    (1, [3.0], ['0:00-0:05'])
    """
    import shapely

    field, water, coeffs = _check_inputs(time_min, water_mask, transform)
    step, levels = _check_classes(class_interval_min, levels_min)
    row0, col0, row1, col1, minutes = _coast_edges(field, water)
    if minutes.size == 0:
        empty = np.zeros(0)
        return CoastTable(
            empty,
            empty,
            empty,
            empty,
            empty,
            np.zeros(0, dtype=object),
            np.zeros(0, dtype=np.int64),
            np.zeros(0, dtype=object),
        )
    cls, lower, upper = _classify(minutes, step, levels)
    chains = _trace_chains(row0, col0, row1, col1, cls, water)

    # Per-stretch statistics over its edges, in chain order.
    starts = chains.starts
    counts = np.diff(np.r_[starts, chains.order.size])
    t_s = minutes[chains.order]
    with np.errstate(invalid="ignore"):
        t_min = np.minimum.reduceat(t_s, starts)
        t_max = np.maximum.reduceat(t_s, starts)
        t_mean = np.add.reduceat(t_s, starts) / counts
    seg_cls = cls[chains.order][starts]

    a, b, c, d, e, f = coeffs
    width = field.shape[1] + 1
    rr = (chains.vertex_lattice // width).astype(np.float64)
    cc = (chains.vertex_lattice % width).astype(np.float64)
    coords = np.column_stack([a * cc + b * rr + c, d * cc + e * rr + f])
    lines = shapely.from_ragged_array(
        shapely.GeometryType.LINESTRING, coords, (chains.vertex_offsets,)
    )

    unreached = ~np.isfinite(t_min)
    rank = np.lexsort((seg_cls, np.where(unreached, np.inf, t_min), unreached))
    labels = np.array(
        [
            UNREACHED_LABEL if not math.isfinite(float(lo)) else _class_label(float(lo), float(hi))
            for lo, hi in zip(lower, upper, strict=True)
        ],
        dtype=object,
    )
    k = seg_cls[rank]
    return CoastTable(
        minutes_min=t_min[rank].astype(np.float64),
        minutes_max=t_max[rank].astype(np.float64),
        minutes_mean=t_mean[rank].astype(np.float64),
        class_min=np.asarray(lower, dtype=np.float64)[k],
        class_max=np.asarray(upper, dtype=np.float64)[k],
        label=labels[k],
        n_edges=counts[rank].astype(np.int64),
        geometry=lines[rank],
    )


# ---------------------------------------------------------------------------
# Layer and style
# ---------------------------------------------------------------------------


def coast_classes(
    segments: Sequence[CoastSegment] | CoastTable,
) -> list[tuple[float, float | None, str]]:
    """The reached arrival classes present in ``segments``, earliest first.

    Returns
    -------
    list of (class_min, class_max or None, label)
        ``class_max`` is None for an open last class. Ready for
        :func:`coast_sld`.

    Examples
    --------
    >>> from shapely.geometry import LineString
    >>> g = LineString([(0, 0), (1, 0)])
    >>> segs = [CoastSegment(7.0, 8.0, 7.5, 5.0, 10.0, "0:05-0:10", 1, g),
    ...         CoastSegment(2.0, 2.0, 2.0, 0.0, 5.0, "0:00-0:05", 1, g)]
    >>> coast_classes(segs)
    [(0.0, 5.0, '0:00-0:05'), (5.0, 10.0, '0:05-0:10')]
    """
    if isinstance(segments, CoastTable):
        reached = np.flatnonzero(segments.reached)
        _, first = np.unique(segments.class_min[reached], return_index=True)  # sorted by class_min
        rows = reached[first]
        return [
            (lo, None if not math.isfinite(hi) else hi, label)
            for lo, hi, label in zip(
                segments.class_min[rows].tolist(),
                segments.class_max[rows].tolist(),
                segments.label[rows].tolist(),
                strict=True,
            )
        ]
    seen: dict[float, tuple[float, float | None, str]] = {}
    for s in segments:
        if not s.reached:
            continue
        hi = None if not math.isfinite(s.class_max) else float(s.class_max)
        seen.setdefault(float(s.class_min), (float(s.class_min), hi, s.label))
    return [seen[k] for k in sorted(seen)]


def coast_layer(
    segments: Sequence[CoastSegment] | CoastTable,
    *,
    name: str = COAST_LAYER_NAME,
    description: str = "",
) -> VectorLayer:
    """The stretches as a MultiLineString vector layer.

    Parameters
    ----------
    segments : sequence of CoastSegment, or CoastTable
        From :func:`coastal_arrival_lines` or :func:`coastal_arrival_table`
        (may be empty).
    name : str
        Layer name (default ``"coastal_arrival"``).
    description : str, optional
        Layer description; the short caution text is always appended.

    Returns
    -------
    VectorLayer
        Columns: ``minutes`` (earliest arrival along the stretch),
        ``minutes_max``, ``minutes_mean``, ``class_min``, ``class_max``
        (null for the open last class), ``label``, ``reached`` (bool) and
        ``n_edges``. Unreached stretches have null minutes and
        ``reached = False``.

    Notes
    -----
    In an ESRI Shapefile ``minutes_max`` and ``minutes_mean`` become
    ``minutes_ma`` and ``minutes_me`` (10-character names).
    """
    from ttmap.io.vector import VectorLayer
    from ttmap.products.cautions import CAUTION_SHORT

    def col(values: list[float]) -> NDArray[np.float64]:
        return np.asarray(values, dtype=np.float64).reshape(-1)

    text = description or "First-arrival minutes along the coast, by stretch of coast."
    if isinstance(segments, CoastTable):
        table = segments
        attributes: dict[str, Any] = {
            "minutes": table.minutes_min,
            "minutes_max": table.minutes_max,
            "minutes_mean": table.minutes_mean,
            "class_min": table.class_min,
            "class_max": np.where(np.isfinite(table.class_max), table.class_max, np.nan),
            "label": table.label,
            "reached": table.reached,
            "n_edges": table.n_edges,
        }
        return VectorLayer(
            name,
            list(table.geometry),
            attributes,
            "MultiLineString",
            description=f"{text} {CAUTION_SHORT}",
        )
    attributes = {
        "minutes": col([s.minutes_min for s in segments]),
        "minutes_max": col([s.minutes_max for s in segments]),
        "minutes_mean": col([s.minutes_mean for s in segments]),
        "class_min": col([s.class_min for s in segments]),
        "class_max": col(
            [s.class_max if math.isfinite(s.class_max) else math.nan for s in segments]
        ),
        "label": np.array([s.label for s in segments], dtype=object),
        "reached": np.array([s.reached for s in segments], dtype=bool),
        "n_edges": np.array([s.n_edges for s in segments], dtype=np.int64),
    }
    return VectorLayer(
        name,
        [s.geometry for s in segments],
        attributes,
        "MultiLineString",
        description=f"{text} {CAUTION_SHORT}",
    )


def coast_sld(
    classes: Sequence[tuple[float, float | None, str]],
    colors_hex: Sequence[str],
    *,
    layer_name: str = COAST_LAYER_NAME,
    title: str,
    attribute: str = "class_min",
    line_width: float = 3.0,
    abstract: str | None = None,
) -> str:
    """SLD 1.0.0 style for the coastal layer: one thick coloured line per class.

    Parameters
    ----------
    classes : sequence of (class_min, class_max or None, label)
        Earliest first, e.g. from :func:`coast_classes`.
    colors_hex : sequence of str
        One ``"#rrggbb"`` colour per class, earliest first; use the shared
        ramp, :func:`ttmap.products.palette.arrival_colors_hex`.
    layer_name, title : str
        Layer the style is for, and its title.
    attribute : str
        Feature attribute holding the class's lower bound (``class_min``;
        the same name in every vector format).
    line_width : float
        Stroke width in pixels, > 0 (default 3: the coast stands out from
        the thin isochrones).
    abstract : str, optional
        Style abstract; the short caution text by default.

    Returns
    -------
    str
        The SLD document: one rule per class, filtered by
        ``attribute == class_min``, and an ``ElseFilter`` rule drawing any
        other feature (the unreached coast) as a grey dashed line labelled
        :data:`UNREACHED_LABEL`.

    Raises
    ------
    InputDataError
        Lengths that differ, repeated or non-finite lower bounds, bad
        colours, a non-positive width.

    Examples
    --------
    >>> text = coast_sld([(0.0, 5.0, "0:00-0:05")], ["#fde725"], title="Coast")
    >>> "ElseFilter" in text and "#fde725" in text
    True
    """
    from ttmap.products.palette import check_hex_colors
    from ttmap.products.styles import default_abstract, sld_css, sld_document, sld_element, sld_number, sld_serialise

    colors = check_hex_colors(list(colors_hex))
    rows = list(classes)
    if len(rows) != len(colors):
        raise InputDataError(f"{len(rows)} classes but {len(colors)} colours; give one per class")
    if not isinstance(attribute, str) or not attribute.strip():
        raise InputDataError(f"attribute {attribute!r} is empty; give the class column name")
    if not (math.isfinite(float(line_width)) and float(line_width) > 0.0):
        raise InputDataError(f"line_width {line_width!r} must be > 0 pixels")
    seen: set[float] = set()
    for lo, _, _ in rows:
        if not math.isfinite(float(lo)) or float(lo) in seen:
            raise InputDataError(
                f"class lower bound {lo!r} is not finite or is repeated; give distinct minutes"
            )
        seen.add(float(lo))

    root, fts = sld_document(layer_name, title, default_abstract() if abstract is None else abstract)

    def stroke(rule: Any, color: str, dash: str | None = None) -> None:
        sym = sld_element(rule, "LineSymbolizer")
        st = sld_element(sym, "Stroke")
        sld_css(st, "stroke", color)
        sld_css(st, "stroke-width", sld_number(line_width))
        sld_css(st, "stroke-linecap", "round")
        sld_css(st, "stroke-linejoin", "round")
        if dash:
            sld_css(st, "stroke-dasharray", dash)

    for (lo, _, label), color in zip(rows, colors, strict=True):
        rule = sld_element(fts, "Rule")
        sld_element(rule, "Name", f"coast_{sld_number(lo)}")
        sld_element(rule, "Title", str(label))
        flt = sld_element(rule, "ogc:Filter")
        eq = sld_element(flt, "ogc:PropertyIsEqualTo")
        sld_element(eq, "ogc:PropertyName", attribute)
        sld_element(eq, "ogc:Literal", sld_number(lo))
        stroke(rule, color)
    rule = sld_element(fts, "Rule")
    sld_element(rule, "Name", "coast_unreached")
    sld_element(rule, "Title", UNREACHED_LABEL)
    sld_element(rule, "ElseFilter")
    stroke(rule, _UNREACHED_COLOR, dash=f"{sld_number(2 * line_width)} {sld_number(1.5 * line_width)}")
    return sld_serialise(root)
