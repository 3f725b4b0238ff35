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

__all__ = ["COINCIDENT_M", "as_points", "as_samples"]

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
