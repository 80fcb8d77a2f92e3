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

import numpy as np
from scipy import ndimage

from ttmap._typing import BoolArray, IntArray

__all__ = ["label_water", "open_diagonal_joins"]

_FOUR = np.array([[0, 1, 0], [1, 1, 1], [0, 1, 0]], dtype=bool)


class _UnionFind:
    def __init__(self, n: int) -> None:
        self.parent = list(range(n))

    def find(self, a: int) -> int:
        p = self.parent
        while p[a] != a:
            p[a] = p[p[a]]
            a = p[a]
        return a

    def union(self, a: int, b: int) -> bool:
        ra, rb = self.find(a), self.find(b)
        if ra == rb:
            return False
        self.parent[max(ra, rb)] = min(ra, rb)
        return True


def _raw_labels(water: BoolArray, periodic_x: bool) -> tuple[IntArray, int, _UnionFind]:
    labels, n = ndimage.label(water, structure=_FOUR)
    uf = _UnionFind(n + 1)
    if periodic_x:
        rows = np.nonzero(water[:, 0] & water[:, -1])[0]
        for r in rows:
            uf.union(int(labels[r, 0]), int(labels[r, -1]))
    return labels.astype(np.intp), int(n), uf


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
    labels : ndarray of shape (rows, cols), int
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
    labels, n, uf = _raw_labels(np.asarray(water, dtype=bool), periodic_x)
    roots = np.array([uf.find(i) for i in range(n + 1)], dtype=np.intp)
    _, compact = np.unique(roots, return_inverse=True)
    out = compact.astype(np.intp)[labels]
    sizes = np.bincount(out.ravel(), minlength=int(out.max()) + 1).astype(np.intp)
    return out, sizes


def _diagonal_candidates(water: BoolArray, periodic_x: bool) -> list[tuple[int, int, int]]:
    """2x2 blocks with water on one diagonal and land on the other.

    Returns ``(row, col, kind)`` with the block's top-left cell and kind 0 for
    water on the main diagonal (top-left, bottom-right), 1 for the other.
    """
    w = np.concatenate([water, water[:, :1]], axis=1) if periodic_x else water
    a, b = w[:-1, :-1], w[:-1, 1:]
    c, d = w[1:, :-1], w[1:, 1:]
    main = a & d & ~b & ~c
    anti = b & c & ~a & ~d
    out = [(int(r), int(k), 0) for r, k in zip(*np.nonzero(main))]
    out += [(int(r), int(k), 1) for r, k in zip(*np.nonzero(anti))]
    out.sort()
    return out


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

    Examples
    --------
    >>> w = np.array([[1, 0, 0], [0, 1, 1], [0, 1, 1]], dtype=bool)
    >>> open_diagonal_joins(w)[1]
    [(0, 1)]
    """
    water = np.asarray(water, dtype=bool)
    rows, cols = water.shape
    cands = _diagonal_candidates(water, periodic_x)
    opened: list[tuple[int, int]] = []
    if not cands:
        return water.copy(), opened
    labels, n, uf = _raw_labels(water, periodic_x)
    score = (
        np.zeros(water.shape)
        if ground is None
        else np.where(np.isnan(ground), -np.inf, np.asarray(ground, dtype=np.float64))
    )
    out = water.copy()
    for r, k, kind in cands:
        k1 = (k + 1) % cols
        if kind == 0:
            wa, wb = (r, k), (r + 1, k1)
            la, lb = (r, k1), (r + 1, k)
        else:
            wa, wb = (r, k1), (r + 1, k)
            la, lb = (r, k), (r + 1, k1)
        if not (out[wa] and out[wb]) or out[la] or out[lb]:
            continue  # an earlier opening changed this block
        if uf.union(int(labels[wa]), int(labels[wb])):
            cell = la if score[la] >= score[lb] else lb
            out[cell] = True
            opened.append(cell)
    return out, opened
