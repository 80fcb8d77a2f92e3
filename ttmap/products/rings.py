"""Repair of polygon rings that touch themselves (marching-squares output).

contourpy's filled contours (:mod:`ttmap.products.isochrones`) come as ragged
arrays: points, ring offsets and polygon offsets, the layout of
``shapely.from_ragged_array``. Its polygons never cross or overlap, but where
masked (land) cells meet at a corner a ring can pass the same vertex twice,
which GEOS reports as a "Ring Self-intersection". This module makes such
polygons valid without ``shapely.make_valid`` (whose cost grows steeply with
the number of holes), and falls back to it for anything else.

Public functions
----------------
- :func:`valid_polygons` - valid polygons from ragged ring arrays: the entry
  point; checks each polygon and repairs only the invalid ones.
- :func:`split_touching_rings` - rebuild one polygon whose rings touch
  themselves as valid polygons, or None.
- :func:`split_ring` - split one closed ring at its repeated vertices into
  simple closed loops.
- :func:`signed_ring_areas` - signed areas of many closed rings (shoelace).
- :func:`rings_cut_interior` - whether touching rings cut a polygon's interior.
- :func:`polygonal_parts` - the general repair (``make_valid``), polygons kept.

All functions are pure numpy/shapely: no I/O, inputs are never modified.
Coordinates are whatever the caller uses (map or index coordinates); rings
are closed (first point repeated at the end).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

if TYPE_CHECKING:
    from shapely.geometry import MultiPolygon
    from shapely.geometry.base import BaseGeometry

__all__ = [
    "polygonal_parts",
    "rings_cut_interior",
    "signed_ring_areas",
    "split_ring",
    "split_touching_rings",
    "valid_polygons",
]


def polygonal_parts(geometry: BaseGeometry) -> MultiPolygon:
    """Repair any invalid geometry, keeping only its polygonal parts (the general path).

    Parameters
    ----------
    geometry : shapely geometry
        Usually a (Multi)Polygon that GEOS finds invalid.

    Returns
    -------
    shapely.MultiPolygon
        ``shapely.make_valid`` of the input ("structure" method where shapely
        has it), with collapsed lines and points dropped and the polygons
        merged; empty if nothing polygonal is left.

    Notes
    -----
    Much slower than :func:`split_touching_rings` on polygons with many
    holes; :func:`valid_polygons` uses it only where that one gives up.

    Examples
    --------
    >>> import shapely
    >>> bowtie = shapely.Polygon([(0, 0), (2, 2), (2, 0), (0, 2)])
    >>> fixed = polygonal_parts(bowtie)
    >>> fixed.geom_type, fixed.is_valid, fixed.area
    ('MultiPolygon', True, 2.0)
    """
    import shapely

    try:
        fixed = shapely.make_valid(geometry, method="structure", keep_collapsed=False)
    except TypeError:  # shapely < 2.1 has only the "linework" method
        fixed = shapely.make_valid(geometry)
    stack = [fixed]
    polygons = []
    while stack:
        part = stack.pop()
        if part.is_empty:
            continue
        if part.geom_type == "Polygon":
            polygons.append(part)
        elif part.geom_type in ("MultiPolygon", "GeometryCollection"):
            stack.extend(shapely.get_parts(part))
    if not polygons:
        return shapely.MultiPolygon()
    merged = shapely.union_all(polygons)
    if merged.geom_type == "Polygon":
        return shapely.MultiPolygon([merged])
    return merged


def signed_ring_areas(
    coords: NDArray[np.float64], ring_offsets: NDArray[np.int64]
) -> NDArray[np.float64]:
    """Signed area of each closed ring ``coords[ring_offsets[i]:ring_offsets[i + 1]]``.

    Parameters
    ----------
    coords : ndarray of shape (n, 2), float
        The rings' points one after the other, each ring closed.
    ring_offsets : ndarray of shape (rings + 1,), int
        Start of each ring in ``coords``, then ``n``.

    Returns
    -------
    ndarray of shape (rings,), float64
        Area in squared coordinate units; positive for counter-clockwise
        rings (x to the right, y up), negative for clockwise ones, 0 for a
        ring without area.

    Examples
    --------
    >>> square = np.array([[0, 0], [1, 0], [1, 1], [0, 1], [0, 0]], float)
    >>> signed_ring_areas(np.concatenate([square, square[::-1]]), np.array([0, 5, 10])).tolist()
    [1.0, -1.0]
    """
    return 0.5 * _ring_areas2(np.asarray(coords, dtype=np.float64), np.asarray(ring_offsets))


def _ring_areas2(coords: NDArray[np.float64], offsets: NDArray[np.int64]) -> NDArray[np.float64]:
    """Twice the signed area of each closed ring ``coords[offsets[i]:offsets[i + 1]]``.

    Shoelace sums, vectorised over the rings; > 0 for counter-clockwise rings.

    >>> square = np.array([[0, 0], [1, 0], [1, 1], [0, 1], [0, 0]], float)
    >>> _ring_areas2(np.concatenate([square, square[::-1]]), np.array([0, 5, 10])).tolist()
    [2.0, -2.0]
    """
    x, y = coords[:, 0], coords[:, 1]
    cross = x[:-1] * y[1:] - x[1:] * y[:-1]
    cross[offsets[1:-1] - 1] = 0.0  # the step from one ring's end to the next ring's start
    return np.add.reduceat(cross, offsets[:-1])


def _repeat_groups(xy: NDArray[np.float64]) -> tuple[NDArray[np.intp], NDArray[np.int64]]:
    """Positions of points that occur more than once, and a group number per such point."""
    order = np.lexsort((xy[:, 1], xy[:, 0]))
    ordered = xy[order]
    same = np.all(ordered[1:] == ordered[:-1], axis=1)
    if not same.any():
        return np.zeros(0, dtype=np.intp), np.zeros(0, dtype=np.int64)
    group = np.concatenate([[0], np.cumsum(~same)])
    repeated = np.bincount(group)[group] > 1
    return order[repeated], group[repeated]


def split_ring(ring: NDArray[np.float64]) -> list[NDArray[np.float64]]:
    """Split a closed ring that passes a vertex more than once into simple closed loops.

    Parameters
    ----------
    ring : ndarray of shape (n, 2), float
        A closed ring (first point repeated at the end).

    Returns
    -------
    list of ndarray of shape (m, 2)
        Closed loops that together trace the ring, each passing each of its
        vertices once; ``[ring]`` itself if no vertex repeats. Each loop
        keeps the direction in which the ring ran through it, so its sign of
        :func:`signed_ring_areas` tells whether it turns with the ring or
        against it. Loops may have no area (a spike out and back).

    Examples
    --------
    A figure eight through (0, 0) gives its two lobes:

    >>> eight = np.array(
    ...     [[0, 0], [1, 1], [2, 0], [1, -1], [0, 0], [-1, 1], [-2, 0], [-1, -1], [0, 0]], float
    ... )
    >>> [loop.tolist() for loop in split_ring(eight)]  # doctest: +NORMALIZE_WHITESPACE
    [[[0.0, 0.0], [1.0, 1.0], [2.0, 0.0], [1.0, -1.0], [0.0, 0.0]],
     [[0.0, 0.0], [-1.0, 1.0], [-2.0, 0.0], [-1.0, -1.0], [0.0, 0.0]]]
    """
    return _split_ring(np.asarray(ring, dtype=np.float64))


def _split_ring(
    xy: NDArray[np.float64],
    positions: NDArray[np.intp] | None = None,
    group: NDArray[np.int64] | None = None,
) -> list[NDArray[np.float64]]:
    """:func:`split_ring`, with the repeated vertices found beforehand if given.

    ``positions`` and ``group`` (the repeated vertices and a number per
    distinct point, as from :func:`_repeat_groups`) are found here unless
    given. The walk keeps the open path since the last visit of each
    repeated vertex; coming back to one closes the loop in between. Only the
    repeated vertices are visited in Python (a handful per ring).

    """
    points = xy[:-1]
    n = len(points)
    if positions is None or group is None:
        positions, group = _repeat_groups(points)
    if positions.size == 0:
        return [xy]
    key = np.full(n, -1, dtype=np.int64)
    key[positions] = group
    events = np.flatnonzero(key >= 0)
    first = int(events[0])
    loops: list[NDArray[np.float64]] = []
    spans: list[tuple[int, int]] = []  # the open path, as [start, stop) runs of ring positions
    opened = {int(key[first]): 0}  # repeated vertex -> index in ``spans`` of the run it starts
    last = first
    for p in [*events[1:].tolist(), first + n]:  # round the ring back to ``first``
        k = int(key[p % n])
        spans.append((last, p))
        if k in opened:
            i = opened[k]
            runs = [np.arange(a, b) for a, b in spans[i:]]
            loop = np.concatenate([*runs, [spans[i][0]]]) % n
            loops.append(points[loop])
            del spans[i:]
            for kk in [kk for kk, v in opened.items() if v >= i]:
                del opened[kk]
        opened[k] = len(spans)
        last = p
    return loops


def _open_ring_points(ring_offsets: NDArray[np.int64]) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """Positions of the points of closed rings without their closing points, and their ring."""
    starts = ring_offsets[:-1]
    lengths = ring_offsets[1:] - 1 - starts
    ring_of = np.repeat(np.arange(starts.size), lengths)
    take = np.arange(int(lengths.sum())) + np.repeat(
        starts - (np.cumsum(lengths) - lengths), lengths
    )
    return take, ring_of


def rings_cut_interior(
    coords: NDArray[np.float64], ring_offsets: NDArray[np.int64], poly_offsets: NDArray[np.int64]
) -> bool:
    """True if a ring still touches itself, or touching rings cut a polygon's interior.

    Parameters
    ----------
    coords : ndarray of shape (n, 2), float
        Points of all rings, each ring closed.
    ring_offsets : ndarray of shape (rings + 1,), int
        Start of each ring in ``coords``, then ``n``.
    poly_offsets : ndarray of shape (polygons + 1,), int
        Start of each polygon in the rings (its exterior first), then
        ``rings``: the ``shapely.from_ragged_array`` layout.

    Returns
    -------
    bool
        False when every ring is simple and no polygon's interior is split
        by rings touching each other (GEOS's "valid" for such polygons).

    Notes
    -----
    Rings that touch at vertices form a graph (rings and touch points as
    nodes); a polygon's interior is cut exactly when that graph has a cycle
    (a hole touching the shell twice, or a chain of holes from the shell back
    to it). Vectorised over all polygons; touches are looked for at vertices
    only (see :func:`split_touching_rings`).
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    take, ring_of = _open_ring_points(ring_offsets)
    poly_of_ring = np.repeat(np.arange(poly_offsets.size - 1), np.diff(poly_offsets))
    xy = coords[take]
    order = np.lexsort((xy[:, 1], xy[:, 0], poly_of_ring[ring_of]))
    ordered = np.column_stack([poly_of_ring[ring_of][order], xy[order]])
    same = np.all(ordered[1:] == ordered[:-1], axis=1)
    if not same.any():
        return False
    group = np.concatenate([[0], np.cumsum(~same)])
    shared = np.bincount(group)[group] > 1
    rings, points = ring_of[order][shared], group[shared]
    pairs = np.unique(np.column_stack([points, rings]), axis=0)
    if len(pairs) < len(rings):
        return True  # a ring passes a vertex twice
    _, ring_node = np.unique(pairs[:, 1], return_inverse=True)
    _, point_node = np.unique(pairs[:, 0], return_inverse=True)
    n_rings = int(ring_node.max()) + 1
    n_nodes = n_rings + int(point_node.max()) + 1
    graph = coo_matrix(
        (np.ones(len(pairs), dtype=np.int8), (ring_node, n_rings + point_node)),
        shape=(n_nodes, n_nodes),
    )
    n_components = connected_components(graph, directed=False)[0]
    return len(pairs) - n_nodes + n_components > 0  # a forest has edges = nodes - components


def split_touching_rings(
    coords: NDArray[np.float64], ring_offsets: NDArray[np.int64]
) -> tuple[NDArray[np.float64], NDArray[np.int64], NDArray[np.int64]] | None:
    """Rebuild one polygon whose rings touch themselves as valid polygons.

    Parameters
    ----------
    coords : ndarray of shape (n, 2), float64
        All points of the band, map coordinates.
    ring_offsets : ndarray of shape (rings + 1,), int64
        Offsets into ``coords`` of this polygon's rings, exterior first;
        every ring is closed (first point repeated at its end).

    Returns
    -------
    (coords, ring_offsets, polygon_offsets) or None
        Ragged arrays of the repaired polygons (``shapely.from_ragged_array``
        layout); None when the polygon is invalid for another reason (the
        caller then falls back to ``shapely.make_valid``).

    Notes
    -----
    Marching squares puts every vertex on a quad edge or at a cell centre,
    and every segment inside one quad, so rings can touch only at shared
    vertices (where masked cells meet at a corner). A ring that passes a
    vertex twice is split there into simple loops. A loop turning the same
    way as its ring keeps the ring's role; one turning the other way swaps it
    (an exterior loop that turns back is a hole touching the exterior; a hole
    loop that turns back is an island inside the hole). Loops without area
    are dropped. Holes go to the smallest shell that covers them. The result
    is refused if touching rings still cut an interior
    (:func:`rings_cut_interior`); contourpy itself never crosses or nests
    rings wrongly.
    """
    import shapely

    take, ring_of = _open_ring_points(ring_offsets)
    positions, group = _repeat_groups(coords[take])
    if positions.size == 0:
        return None
    rings_at = ring_of[positions]
    _, inverse, counts = np.unique(
        np.column_stack([group, rings_at]), axis=0, return_inverse=True, return_counts=True
    )
    within = counts[inverse.ravel()] > 1  # the vertex repeats in its own ring
    if not within.any():
        return None
    by_ring = np.argsort(rings_at[within], kind="stable")
    own_ring = rings_at[within][by_ring]
    own_position = positions[within][by_ring] - (
        ring_offsets[own_ring] - ring_offsets[0] - own_ring
    )
    own_group = group[within][by_ring]
    ring_ids, first = np.unique(own_ring, return_index=True)
    last = np.r_[first[1:], own_ring.size]
    self_touching = {
        int(j): (own_position[a:b], own_group[a:b])
        for j, a, b in zip(ring_ids.tolist(), first.tolist(), last.tolist(), strict=True)
    }
    base = int(ring_offsets[0])
    parent_area2 = _ring_areas2(coords[base : int(ring_offsets[-1])], ring_offsets - base)
    pieces: list[NDArray[np.float64]] = []
    is_shell: list[bool] = []
    for j in range(ring_offsets.size - 1):
        ring = coords[ring_offsets[j] : ring_offsets[j + 1]]
        if j not in self_touching:
            pieces.append(ring)
            is_shell.append(j == 0)
            continue
        if parent_area2[j] == 0.0:
            return None
        loops = [loop for loop in _split_ring(ring, *self_touching[j]) if len(loop) >= 4]
        if not loops:
            continue
        lengths = np.fromiter((len(loop) for loop in loops), dtype=np.int64, count=len(loops))
        areas2 = _ring_areas2(np.concatenate(loops), np.r_[0, np.cumsum(lengths)])
        for loop, area2 in zip(loops, areas2.tolist(), strict=True):
            if area2 == 0.0:
                continue  # a collapsed loop: no area
            keeps_role = (area2 > 0.0) == (parent_area2[j] > 0.0)
            pieces.append(loop)
            is_shell.append(keeps_role == (j == 0))
    shell_ids = [k for k, flag in enumerate(is_shell) if flag]
    hole_ids = [k for k, flag in enumerate(is_shell) if not flag]
    if not shell_ids:
        return None
    owner = np.zeros(len(hole_ids), dtype=np.int64)
    if len(shell_ids) > 1 and hole_ids:
        shells = np.array([shapely.Polygon(pieces[k]) for k in shell_ids], dtype=object)
        holes = np.array([shapely.Polygon(pieces[k]) for k in hole_ids], dtype=object)
        areas = shapely.area(shells)
        owner[:] = -1
        smallest = np.full(len(hole_ids), np.inf)
        for s, shell in enumerate(shells):
            shapely.prepare(shell)
            inside = shapely.covers(shell, holes) & (areas[s] < smallest)
            owner[inside] = s
            smallest[inside] = areas[s]
        if (owner < 0).any():
            return None
    ordered: list[NDArray[np.float64]] = []
    rings_per_polygon = []
    for s, k in enumerate(shell_ids):
        mine = [pieces[hole_ids[h]] for h in np.flatnonzero(owner == s)]
        ordered += [pieces[k], *mine]
        rings_per_polygon.append(1 + len(mine))
    lengths = np.fromiter((len(r) for r in ordered), dtype=np.int64, count=len(ordered))
    out_coords = np.concatenate(ordered)
    out_rings = np.r_[0, np.cumsum(lengths)].astype(np.int64)
    out_polys = np.r_[0, np.cumsum(rings_per_polygon)].astype(np.int64)
    if rings_cut_interior(out_coords, out_rings, out_polys):
        return None
    return out_coords, out_rings, out_polys


def valid_polygons(
    coords: NDArray[np.float64], ring_offsets: NDArray[np.int64], poly_offsets: NDArray[np.int64]
) -> NDArray[np.object_]:
    """Valid shapely polygons from ragged ring arrays (e.g. one isochrone band).

    Parameters
    ----------
    coords : ndarray of shape (n, 2), float64
        Points of all rings, each ring closed.
    ring_offsets : ndarray of shape (rings + 1,), int64
        Start of each ring in ``coords``, then ``n``.
    poly_offsets : ndarray of shape (polygons + 1,), int64
        Start of each polygon in the rings (exterior first), then ``rings``.

    Returns
    -------
    ndarray of shapely Polygons, object
        Every polygon valid. Valid inputs come back unchanged and in order,
        followed by the repairs of the invalid ones (same area and point
        set; one invalid polygon may give several valid ones).

    Notes
    -----
    contourpy's polygons of one band never overlap, but a rare ring touches
    itself at a vertex (GEOS: "Ring Self-intersection"). Every polygon is
    checked with one vectorised ``shapely.is_valid`` call (cheap: an invalid
    polygon fails fast); only the invalid ones are rebuilt, by
    :func:`split_touching_rings`, or in the last resort by
    :func:`polygonal_parts` (``shapely.make_valid``).

    Examples
    --------
    Two squares joined at one corner, traced as one ring (a figure eight):

    >>> ring = np.array(
    ...     [[0, 0], [1, 0], [1, 1], [2, 1], [2, 2], [1, 2], [1, 1], [0, 1], [0, 0]], float
    ... )
    >>> polygons = valid_polygons(ring, np.array([0, 9]), np.array([0, 1]))
    >>> [(p.is_valid, p.area) for p in polygons]
    [(True, 1.0), (True, 1.0)]
    """
    import shapely

    polygons = shapely.from_ragged_array(
        shapely.GeometryType.POLYGON, coords, (ring_offsets, poly_offsets)
    )
    invalid = np.flatnonzero(~shapely.is_valid(polygons))
    if invalid.size == 0:
        return polygons
    keep = np.ones(polygons.size, dtype=bool)
    keep[invalid] = False
    parts = [polygons[keep]]
    for i in invalid:
        rebuilt = split_touching_rings(
            coords, ring_offsets[poly_offsets[i] : poly_offsets[i + 1] + 1]
        )
        if rebuilt is None:
            parts.append(shapely.get_parts(polygonal_parts(polygons[i])))
        else:
            out_coords, out_rings, out_polys = rebuilt
            parts.append(
                shapely.from_ragged_array(
                    shapely.GeometryType.POLYGON, out_coords, (out_rings, out_polys)
                )
            )
    return np.concatenate(parts)
