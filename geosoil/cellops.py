"""Three raster operations the zones need: neighbour counts, nearest labelled cell and
connected pieces, in numpy for a paddock's grid.

:mod:`scipy.ndimage` does all three, but loading it costs about 0.13 s of CPU on this
project's 2-core machine (0.23 s under load), more than the three operations take on
a paddock's grid, on every run that makes zones. So a grid of up to
:data:`SMALL_CELLS` cells is done here, a larger one by :mod:`scipy.ndimage` (where its
loading is a small part of the work). Both are held against :mod:`scipy.ndimage` in
``tests/test_cellops.py``:

* :func:`box_count` equals ``uniform_filter(a, size=3, mode="constant") * 9`` on a 0/1
  array, exactly (scipy's comes as a float that may be off in the last bits);
* :func:`nearest_labelled` gives every cell a labelled cell at the least Euclidean
  distance, the distance ``distance_transform_edt`` gives; of several cells at the
  same distance it takes the first in row-major order (scipy's choice may differ). On
  a small grid it compares every unlabelled cell with every labelled cell on the edge
  of the labelled area (the nearest labelled cell always lies there: a step towards
  the unlabelled cell from any other labelled cell stays labelled and comes nearer);
* :func:`label_pieces` equals ``label`` (its default, 4-connected structure) run on each
  value in turn, pieces numbered value by value and, within a value, in the order of
  their first cell in row-major order: union-find with pointer jumping on the pairs of
  equal neighbours.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

__all__ = ["SMALL_CELLS", "box_count", "nearest_labelled", "label_pieces"]

#: Grids up to this many cells are done here; larger ones by :mod:`scipy.ndimage`
#: (measured on this project's machine: at 200 x 200 cells the two take about as long
#: once scipy's loading is counted).
SMALL_CELLS = 40_000

#: Distances worked out at once by :func:`nearest_labelled` (memory: 8 bytes each).
_BLOCK = 2_000_000


def box_count(mask: NDArray[np.bool_]) -> NDArray[np.float64]:
    """How many of each cell's 3 x 3 block (itself and its 8 neighbours) are set.

    Cells beyond the edge count as unset.

    Parameters
    ----------
    mask : ndarray of bool, 2-D

    Returns
    -------
    ndarray of float64
        0 to 9 per cell.

    Examples
    --------
    >>> box_count(np.array([[True, False, False]])).tolist()
    [[1.0, 1.0, 0.0]]
    """
    m = np.pad(mask.astype(np.float64), 1)
    h, w = mask.shape
    out = np.zeros((h, w))
    for dr in range(3):
        for dc in range(3):
            out += m[dr:dr + h, dc:dc + w]
    return out


def nearest_labelled(feature: NDArray[np.bool_]) -> tuple[NDArray[np.int64],
                                                          NDArray[np.int64]]:
    """Row and column of a labelled cell nearest (Euclidean) to each cell.

    Parameters
    ----------
    feature : ndarray of bool, 2-D
        The labelled cells; at least one must be set.

    Returns
    -------
    (rows, cols) : ndarray of int64, each of ``feature``'s shape
        A labelled cell at the least distance from each cell (a labelled cell is its
        own).

    Raises
    ------
    ValueError
        No cell is labelled.

    Examples
    --------
    >>> f = np.array([[True, False, False, False, True]])
    >>> [a.tolist() for a in nearest_labelled(f)]
    [[[0, 0, 0, 0, 0]], [[0, 0, 0, 4, 4]]]
    """
    if not feature.any():
        raise ValueError("no labelled cell")
    if feature.size > SMALL_CELLS:
        import scipy.ndimage

        idx = scipy.ndimage.distance_transform_edt(~feature, return_distances=False,
                                                   return_indices=True)
        return idx[0].astype(np.int64), idx[1].astype(np.int64)
    h, w = feature.shape
    rows = np.broadcast_to(np.arange(h)[:, None], (h, w)).copy()
    cols = np.broadcast_to(np.arange(w)[None, :], (h, w)).copy()
    empty = ~feature
    if not empty.any():
        return rows, cols
    padded = np.pad(empty, 1)
    edge = feature & (padded[:-2, 1:-1] | padded[2:, 1:-1] | padded[1:-1, :-2]
                      | padded[1:-1, 2:])
    er, ec = np.nonzero(edge)  # row-major order: argmin keeps the first of equals
    qr, qc = np.nonzero(empty)
    step = max(1, _BLOCK // max(er.size, 1))
    for i in range(0, qr.size, step):
        r, c = qr[i:i + step], qc[i:i + step]
        d = (r[:, None] - er[None, :]) ** 2 + (c[:, None] - ec[None, :]) ** 2
        k = d.argmin(axis=1)
        rows[r, c] = er[k]
        cols[r, c] = ec[k]
    return rows, cols


#: Rounds of hooking after which :func:`label_pieces` hands over to scipy (a guard
#: against shapes that converge slowly; zone rasters need a handful).
MAX_ROUNDS = 64


def label_pieces(values: NDArray[np.integer]) -> tuple[NDArray[np.int64], list[int]]:
    """Connected pieces (4-connected) of equal values.

    Parameters
    ----------
    values : ndarray of int, 2-D

    Returns
    -------
    piece : ndarray of int64
        Every cell's piece, from 1: the pieces of the smallest value first, each value's
        in the order of their first cell in row-major order.
    piece_value : list of int
        Each piece's value (index 0 unused, 0).

    Examples
    --------
    >>> piece, value = label_pieces(np.array([[1, 2, 1], [1, 2, 2]]))
    >>> piece.tolist(), value
    ([[1, 3, 2], [1, 3, 3]], [0, 1, 1, 2])
    """
    if values.size > SMALL_CELLS:
        return _label_pieces_scipy(values)
    h, w = values.shape
    n = h * w
    flat = values.ravel()
    ids = np.arange(n, dtype=np.int64).reshape(h, w)
    right = values[:, :-1] == values[:, 1:]
    down = values[:-1, :] == values[1:, :]
    a = np.concatenate([ids[:, :-1][right], ids[:-1, :][down]])
    b = np.concatenate([ids[:, 1:][right], ids[1:, :][down]])
    root = np.arange(n, dtype=np.int64)
    for _ in range(MAX_ROUNDS):
        ra, rb = root[a], root[b]
        diff = ra != rb
        if not diff.any():
            break
        lo = np.minimum(ra[diff], rb[diff])
        np.minimum.at(root, ra[diff], lo)
        np.minimum.at(root, rb[diff], lo)
        while True:
            nxt = root[root]
            if np.array_equal(nxt, root):
                break
            root = nxt
    else:  # pragma: no cover - slow convergence: scipy's, which is exact
        return _label_pieces_scipy(values)
    # each piece's root is its smallest cell index, so its first cell in row-major order
    first = np.flatnonzero(root == np.arange(n))
    order = np.lexsort((first, flat[first]))
    number = np.zeros(n, dtype=np.int64)
    number[first[order]] = np.arange(1, order.size + 1)
    return number[root].reshape(h, w), [0, *flat[first[order]].tolist()]


def _label_pieces_scipy(values: NDArray[np.integer]) -> tuple[NDArray[np.int64], list[int]]:
    import scipy.ndimage

    piece = np.zeros(values.shape, dtype=np.int64)
    piece_value = [0]
    n = 0
    for c in np.unique(values):
        lab, m = scipy.ndimage.label(values == c)
        piece[lab > 0] = lab[lab > 0] + n
        piece_value.extend([int(c)] * m)
        n += m
    return piece, piece_value
