"""Checked sample points for the geostatistics: coordinates and values as float arrays.

:mod:`geosoil.variogram` and :mod:`geosoil.kriging` both take samples as
``(n, 2)`` coordinates in metres plus ``(n,)`` values; these checks turn
anything array-like into that, or raise an :class:`~geosoil.errors.InputError`
that says what was wrong and how to fix it.

Examples
--------
>>> as_points([3.0, 4.0], "target").shape
(1, 2)
>>> as_samples([[0, 0], [1, 1]], [1.0, float("nan")])
Traceback (most recent call last):
...
geosoil.errors.InputError: sample 1 (0-based; 1 in all) has a missing or infinite value. Fix: ...
"""

from __future__ import annotations

from typing import Final

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError

__all__ = ["COINCIDENT_M", "as_points", "as_samples", "spread_subset"]

#: Two points closer than this (metres) are the same place: the covariance
#: there includes the nugget. The same cut-off as pykrige's ``eps``.
COINCIDENT_M: Final = 1e-10


def as_points(xy: ArrayLike, what: str) -> NDArray[np.float64]:
    """``xy`` as a finite (n, 2) float array; ``what`` names the points in messages."""
    a = np.asarray(xy, dtype=np.float64)
    if a.ndim == 1 and a.size == 2:
        a = a.reshape(1, 2)
    if a.ndim != 2 or a.shape[1] != 2:
        raise InputError(
            f"{what} coordinates must be an (n, 2) array of x, y in metres (got shape {a.shape})",
            fix="pass one x, y pair per row",
        )
    if not np.isfinite(a).all():
        i = int(np.flatnonzero(~np.isfinite(a).all(axis=1))[0])
        raise InputError(
            f"{what} {i} (0-based) has a missing or infinite coordinate",
            fix=f"drop {what}s without coordinates",
        )
    return a


def as_samples(
    xy: ArrayLike, values: ArrayLike, *, minimum: int = 1
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Checked sample coordinates (n, 2) and finite values (n,), at least ``minimum``."""
    pts = as_points(xy, "sample")
    z = np.asarray(values, dtype=np.float64)
    if z.shape != (pts.shape[0],):
        raise InputError(
            f"got {pts.shape[0]} sample coordinates but values of shape {z.shape}",
            fix="pass one value per sample",
        )
    bad = np.flatnonzero(~np.isfinite(z))
    if bad.size:
        raise InputError(
            f"sample {int(bad[0])} (0-based; {bad.size} in all) has a missing or infinite value",
            fix="drop samples without a value before interpolating",
        )
    if z.size < minimum:
        raise InputError(
            f"at least {minimum} sample{'s' if minimum > 1 else ''} needed here (got {z.size})",
            fix="add samples, or fix the variogram in the project instead of fitting it",
        )
    return pts, z


def spread_subset(xy: ArrayLike, k: int, *, seed: int = 0) -> NDArray[np.int64]:
    """Indices of ``k`` of the points, spread over the area they cover; the same each call.

    The points' bounding box is cut into square blocks, about ``k`` of them,
    and one point is drawn at random from each block that holds any (a
    stratified sample: a dense cluster gives one point per block, not its
    share of the points). When fewer than ``k`` blocks hold points, a second
    point is drawn from each block that has one, then a third, and so on; when
    more do, ``k`` blocks are drawn at random. The draw is seeded, so the same
    points give the same subset.

    Parameters
    ----------
    xy
        (n, 2) coordinates, metres.
    k
        How many to keep (at least 1). ``k >= n`` keeps them all.
    seed
        Seed of the random draw (:func:`numpy.random.default_rng`).

    Returns
    -------
    ndarray of int
        ``min(k, n)`` distinct indices into ``xy``, ascending.

    Examples
    --------
    >>> rng = np.random.default_rng(5)
    >>> dense = rng.uniform(0, 10, (900, 2))        # 900 points in one corner
    >>> sparse = rng.uniform(0, 100, (100, 2))       # 100 over the whole square
    >>> pick = spread_subset(np.vstack([dense, sparse]), 100)
    >>> len(pick), bool((pick < 900).sum() < 20)     # the corner gets its blocks' share
    (100, True)
    """
    pts = as_points(xy, "sample")
    n = len(pts)
    if int(k) != k or k < 1:
        raise ValueError(f"k must be a whole number of at least 1 (got {k!r})")
    if k >= n:
        return np.arange(n, dtype=np.int64)
    rng = np.random.default_rng(seed)
    order = rng.permutation(n)
    low = pts.min(axis=0)
    span = np.maximum(pts.max(axis=0) - low, 0.0)
    area = float(span[0] * span[1])
    side = np.sqrt(area / k) if area > 0 else max(float(span.max()), 1.0) / k
    cell = np.floor((pts - low) / side).astype(np.int64)
    key = cell[:, 0] * (int(cell[:, 1].max()) + 1) + cell[:, 1]
    # rank each point within its block in the shuffled order; take every block's first
    # point, then every block's second, ... (ties in shuffled order) until k are taken
    shuffled = key[order]
    by_block = np.argsort(shuffled, kind="stable")
    sorted_keys = shuffled[by_block]
    starts = np.flatnonzero(np.r_[True, sorted_keys[1:] != sorted_keys[:-1]])
    sizes = np.diff(np.r_[starts, n])
    rank = np.empty(n, dtype=np.int64)
    rank[by_block] = np.arange(n) - np.repeat(starts, sizes)
    chosen = order[np.lexsort((np.arange(n), rank))[:k]]
    return np.sort(chosen).astype(np.int64)
