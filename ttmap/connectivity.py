"""Water connectivity as the 4-neighbour fast-marching stencil sees it.

Pure numpy/scipy. The fast-marching update of a cell looks only at its four
direct neighbours, so two water cells touching only at a corner (with land on
the other diagonal) are not connected for the solver, although the water on a
real coast is. :func:`open_diagonal_joins` finds such joins between otherwise
separate water bodies and opens one land cell of each, and
:func:`label_water` numbers the 4-connected water bodies (basins), joining
them across the antimeridian for wrapping grids.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from ttmap._typing import BoolArray, FloatArray, IntArray

__all__ = ["WaterBodies", "connect_water", "label_water", "open_diagonal_joins"]

_FOUR = np.array([[0, 1, 0], [1, 1, 1], [0, 1, 0]], dtype=bool)


@dataclass(frozen=True)
class WaterBodies:
    """Water after opening diagonal-only joins, and its numbered bodies.

    Attributes
    ----------
    water : ndarray of shape (rows, cols), bool
        Water cells, opened land cells included (a new array).
    labels : ndarray of shape (rows, cols), uint16 (int32 beyond 65535 bodies)
        0 on land, 1..n on water: the 4-connected bodies (joined across the
        seam for wrapping grids), numbered in order of their first cell in
        row-major order (for wrapping grids: of their lowest-numbered piece).
    sizes : ndarray of shape (n + 1,), int
        Cells per label; ``sizes[0]`` counts land.
    opened : list of (row, col)
        Land cells opened, in row-major order of their 2x2 blocks.
    opened_ground : ndarray of shape (len(opened),), float
        For each opened cell, the smaller ``ground`` value of the two water
        cells it joins (their shallower depth when ``ground`` is depth_m);
        NaN without ``ground``.
    """

    water: BoolArray
    labels: IntArray
    sizes: IntArray
    opened: list[tuple[int, int]]
    opened_ground: FloatArray


def _union(parent: list[int], a: int, b: int) -> None:
    """Join the sets of a and b (union-find with path halving; the lower root wins)."""
    while parent[a] != a:
        parent[a] = parent[parent[a]]
        a = parent[a]
    while parent[b] != b:
        parent[b] = parent[parent[b]]
        b = parent[b]
    if a != b:
        parent[max(a, b)] = min(a, b)


def _seam_pairs(water: BoolArray, labels: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Labels of the water cells facing each other across the seam (first/last column)."""
    rows = np.nonzero(water[:, 0] & water[:, -1])[0]
    return labels[rows, 0], labels[rows, -1]


def _label(water: BoolArray) -> tuple[np.ndarray, int]:
    """4-connected labels, uint16 when they fit (the usual case), else int32."""
    try:
        labels, n = ndimage.label(water, structure=_FOUR, output=np.uint16)
    except RuntimeError:  # more than 65535 pieces: label again, wider
        labels, n = ndimage.label(water, structure=_FOUR, output=np.int32)
    return labels, int(n)


def _compact(
    labels: np.ndarray, n: int, pairs_a: np.ndarray, pairs_b: np.ndarray
) -> tuple[IntArray, IntArray]:
    """Merge raw labels joined by (pairs_a[i], pairs_b[i]) and number them 1..m.

    Merged bodies take the rank of their lowest raw label, so that the
    numbering follows the first cell of each body in row-major order.
    Returns the labels in the smallest type that holds m (uint16, else
    int32; ``labels`` itself, renumbered in place, when its type is that
    one) and the cells per label.
    """
    if pairs_a.size:
        graph = coo_matrix(
            (np.ones(pairs_a.size, dtype=np.int8), (pairs_a.astype(np.intp), pairs_b.astype(np.intp))),
            shape=(n + 1, n + 1),
        )
        # Components are numbered in order of their lowest node: label 0 (land) stays 0.
        m, comp = connected_components(graph, directed=False)
    else:
        m, comp = n + 1, None
    dtype = np.uint16 if m <= 1 << 16 else np.int32
    new = None if comp is None else comp.astype(dtype)
    out = labels if labels.dtype == dtype else np.empty(labels.shape, dtype=dtype)
    sizes = np.zeros(m, dtype=np.intp)
    # In slices of rows: fancy indexing with the narrow labels and np.bincount make no
    # full-size int64 copy, and each slice is counted while it is in the cache.
    step = max(1, (1 << 20) // max(1, labels.shape[-1]))
    for i in range(0, labels.shape[0], step):
        part = labels[i : i + step] if new is None else new[labels[i : i + step]]
        if new is not None or out is not labels:
            out[i : i + step] = part
        sizes += np.bincount(part.reshape(-1), minlength=m)
    return out, sizes


def label_water(water: BoolArray, *, periodic_x: bool = False) -> tuple[IntArray, IntArray]:
    """Number the 4-connected water bodies.

    Parameters
    ----------
    water : ndarray of shape (rows, cols), bool
        True on water cells.
    periodic_x : bool
        Columns wrap (the last column touches the first).

    Returns
    -------
    labels : ndarray of shape (rows, cols), uint16 (int32 beyond 65535 bodies)
        0 on land, 1..n on water, consecutive.
    sizes : ndarray of shape (n + 1,), int
        Cell count per label (``sizes[0]`` counts land).

    Examples
    --------
    >>> w = np.array([[1, 0, 1], [1, 0, 1]], dtype=bool)
    >>> label_water(w)[0].tolist()
    [[1, 0, 2], [1, 0, 2]]
    >>> label_water(w, periodic_x=True)[0].tolist()
    [[1, 0, 1], [1, 0, 1]]
    """
    water = np.asarray(water, dtype=bool)
    labels, n = _label(water)
    pa, pb = _seam_pairs(water, labels) if periodic_x else (np.zeros(0, np.int32),) * 2
    return _compact(labels, n, pa, pb)


def _diagonal_candidates(water: BoolArray, periodic_x: bool) -> tuple[IntArray, IntArray, IntArray]:
    """2x2 blocks with water on one diagonal and land on the other.

    Returns the rows, columns (of the block's top-left cell) and kinds (0 for
    water on the main diagonal, top-left and bottom-right; 1 for the other),
    sorted by row, column and kind.
    """
    rows_out, cols_out, kind_out = [], [], []
    n_rows = water.shape[0]
    step = max(1, (1 << 20) // max(1, water.shape[1]))
    # In slices of rows (overlapping by one), so that the temporaries stay small.
    for i in range(0, n_rows - 1, step):
        w = water[i : min(n_rows, i + step + 1)]
        if periodic_x:
            w = np.concatenate([w, w[:, :1]], axis=1)
        a, b = w[:-1, :-1], w[:-1, 1:]
        c, d = w[1:, :-1], w[1:, 1:]
        # One diagonal alike, the other alike, the two different: a block is of one kind
        # only, so the row-major order of nonzero() is already the (row, col, kind) order.
        block = np.equal(a, d)
        block &= np.equal(b, c)
        block &= np.not_equal(a, b)
        r, k = np.nonzero(block)
        rows_out.append(r + i)
        cols_out.append(k)
        kind_out.append((~a[r, k]).astype(np.intp))
    if not rows_out:
        empty = np.zeros(0, np.intp)
        return empty, empty, empty
    return np.concatenate(rows_out), np.concatenate(cols_out), np.concatenate(kind_out)


def connect_water(
    water: BoolArray,
    *,
    ground: np.ndarray | None = None,
    periodic_x: bool = False,
    open_diagonal: bool = True,
    overwrite_water: bool = False,
) -> WaterBodies:
    """Open diagonal-only joins, then number the water bodies, in one pass.

    The same result as :func:`open_diagonal_joins` followed by
    :func:`label_water` on the opened water, with one labelling of the grid
    instead of two.

    Parameters
    ----------
    water : ndarray of shape (rows, cols), bool
    ground : ndarray of shape (rows, cols), float, optional
        Which land cell of a pair to open (the larger value; NaN counts
        lowest; pass depth_m: the lower land is opened), and the value
        reported in ``opened_ground``.
    periodic_x : bool
        Columns wrap.
    open_diagonal : bool
        Open the joins (default); False only numbers the bodies.
    overwrite_water : bool
        Open the joins in ``water`` itself (a writeable bool array) and return
        it as :attr:`WaterBodies.water`, instead of a copy.

    Returns
    -------
    WaterBodies

    Examples
    --------
    >>> w = np.array([[1, 0, 0], [0, 1, 1], [0, 1, 1]], dtype=bool)
    >>> depth = np.array([[30.0, -2, -1], [-3, 10, 10], [-5, 10, 10]])
    >>> bodies = connect_water(w, ground=depth)
    >>> bodies.opened, bodies.opened_ground.tolist(), bodies.sizes.tolist()
    ([(0, 1)], [10.0], [3, 6])
    """
    water = np.asarray(water, dtype=bool)
    rows, cols = water.shape
    labels, n = _label(water)
    out = water if overwrite_water else water.copy()
    if periodic_x:
        seam_a, seam_b = _seam_pairs(water, labels)
    else:
        seam_a = seam_b = np.zeros(0, np.int32)
    opened: list[tuple[int, int]] = []
    opened_ground = np.zeros(0)
    pairs_a, pairs_b = [seam_a], [seam_b]
    if open_diagonal:
        r, k, kind = _diagonal_candidates(water, periodic_x)
        k1 = (k + 1) % cols
        main = kind == 0
        # Water cells a, b and land cells la, lb of each block, as flat indices.
        wa = np.where(main, r * cols + k, r * cols + k1)
        wb = np.where(main, (r + 1) * cols + k1, (r + 1) * cols + k)
        la = np.where(main, r * cols + k1, r * cols + k)
        lb = np.where(main, (r + 1) * cols + k, (r + 1) * cols + k1)
        flat = labels.ravel()
        lab_a, lab_b = flat[wa], flat[wb]
        keep = lab_a != lab_b  # one body already: never opened
        wa, wb, la, lb = wa[keep], wb[keep], la[keep], lb[keep]
        lab_a, lab_b = lab_a[keep], lab_b[keep]
        if ground is None:
            g_la = g_lb = np.zeros(la.size)
        else:
            g = np.asarray(ground, dtype=np.float64).flat  # no copy of a strided view
            g_la = np.where(np.isnan(g[la]), -np.inf, g[la])
            g_lb = np.where(np.isnan(g[lb]), -np.inf, g[lb])
        # Union-find over the raw labels, inlined (the loop runs once per candidate).
        parent = list(range(n + 1))
        for x, y in zip(seam_a.tolist(), seam_b.tolist()):
            _union(parent, x, y)
        done: set[int] = set()
        picked: list[int] = []
        cells: list[int] = []
        for i, (ca, cb, a, b, sa, sb) in enumerate(
            zip(la.tolist(), lb.tolist(), lab_a.tolist(), lab_b.tolist(), g_la.tolist(), g_lb.tolist())
        ):
            if ca in done or cb in done:
                continue  # an earlier opening changed this block
            while parent[a] != a:
                parent[a] = parent[parent[a]]
                a = parent[a]
            while parent[b] != b:
                parent[b] = parent[parent[b]]
                b = parent[b]
            if a == b:
                continue  # joined by the openings so far
            if a < b:
                parent[b] = a
            else:
                parent[a] = b
            cell = ca if sa >= sb else cb
            done.add(cell)
            cells.append(cell)
            picked.append(i)
        if cells:
            idx = np.array(picked, dtype=np.intp)
            cell_arr = np.array(cells, dtype=np.intp)
            cr, cc = np.divmod(cell_arr, cols)
            out[cr, cc] = True  # (water may be a strided view)
            if ground is None:
                opened_ground = np.full(cell_arr.size, np.nan)
            else:
                opened_ground = np.minimum(g[wa[idx]], g[wb[idx]])
            # An opened cell joins the body of its water pair and every body around it.
            body = lab_a[idx]
            flat[cell_arr] = body
            for dr, dc in ((-1, 0), (1, 0), (0, -1), (0, 1)):
                nr, nc = cr + dr, cc + dc
                ok = (nr >= 0) & (nr < rows)
                if periodic_x:
                    nc = nc % cols
                else:
                    ok &= (nc >= 0) & (nc < cols)
                nb = np.zeros(cell_arr.size, labels.dtype)
                nb[ok] = labels[nr[ok], nc[ok]]
                sel = nb > 0
                pairs_a.append(body[sel])
                pairs_b.append(nb[sel])
            opened = [(int(a), int(b)) for a, b in zip(cr.tolist(), cc.tolist())]
    labels, sizes = _compact(labels, n, np.concatenate(pairs_a), np.concatenate(pairs_b))
    return WaterBodies(out, labels, sizes, opened, np.asarray(opened_ground, dtype=np.float64))


def open_diagonal_joins(
    water: BoolArray,
    *,
    ground: np.ndarray | None = None,
    periodic_x: bool = False,
) -> tuple[BoolArray, list[tuple[int, int]]]:
    """Open diagonal-only joins between water bodies that are otherwise apart.

    For each 2x2 block with water on one diagonal and land on the other,
    where the two water cells belong to different 4-connected bodies (after
    the joins opened so far), one land cell of the block becomes water.

    Parameters
    ----------
    water : ndarray of shape (rows, cols), bool
    ground : ndarray of shape (rows, cols), optional
        A score per cell; of the two land cells the one with the larger score
        is opened (pass depth_m: the lower land is opened). NaN counts lowest.
    periodic_x : bool
        Columns wrap.

    Returns
    -------
    water_opened : ndarray of shape (rows, cols), bool
        A new array; the input is not modified.
    opened : list of (row, col)
        The cells opened, in row-major order of their blocks.

    See Also
    --------
    connect_water : the same, with the water bodies numbered and the depth
        each opened cell should take.

    Examples
    --------
    >>> w = np.array([[1, 0, 0], [0, 1, 1], [0, 1, 1]], dtype=bool)
    >>> open_diagonal_joins(w)[1]
    [(0, 1)]
    """
    bodies = connect_water(water, ground=ground, periodic_x=periodic_x)
    return bodies.water, bodies.opened
