"""Ordinary kriging: estimate and kriging variance, fast and in bounded memory.

:func:`ordinary_kriging` is the engine every surface goes through. It takes
sample coordinates and values, target coordinates and a
:class:`~geosoil.variogram.VariogramModel`, and returns the estimate and the
kriging (error) variance at every target. Two neighbourhoods:

Global (``neighbours=None``), exact
    Every sample weighs in at every target. The covariance matrix ``C`` of
    the samples is factorised once (Cholesky, ``C = L L^T``) and inverted as
    a triangle, ``M = L^-1``. With ``k`` the covariances between a target and
    the samples, ``v = M 1``, ``s = v.v`` and ``w = M k``:

    * estimate ``= m + w.u``, with ``m`` the generalised least-squares mean of
      the samples and ``u = M (z - m)`` (the dual form: the sample side is
      done once);
    * variance ``= C(0) - w.w + (1 - w.v)^2 / s`` (simple kriging variance
      plus the price of estimating the mean).

    So each block of targets costs one matrix product ``K M^T`` (done as a
    few products over the triangle's column blocks, skipping its zeros), and
    the covariances are evaluated once per target and sample, on squared
    distances taken from per-row and per-column tables when the targets lie
    on a grid. Blocks run on all cores. The results agree with pykrige's
    ``OrdinaryKriging`` and GSTools' ``Ordinary`` to about 1e-10.

Local (``neighbours=N``)
    Targets are grouped into small square tiles (``tile_m``); each tile is
    kriged from the ``N`` samples nearest its centre (a k-d tree), solving
    one small system per tile for all its targets at once. With
    ``tile_m=0`` every target has its own ``N`` nearest samples, which is
    what pykrige's ``n_closest_points`` does. The result differs from
    global kriging by what the samples left out would have added (most
    where the range is long compared with the neighbourhood);
    ``benchmarks/bench_kriging.py`` prints the difference.

The nugget and targets on top of a sample
-----------------------------------------
The sample covariance matrix carries the nugget on its diagonal only. A
target within :data:`~geosoil.points.COINCIDENT_M` of a sample is "at" it:

* ``exact=True`` (default; pykrige's ``exact_values=True``, GSTools'
  ``exact=True``): the covariance to that sample includes the nugget, so the
  estimate there is the sample's value and the variance is zero. With a
  nugget the surface jumps at that point (the nugget is treated as
  variation at scales below the sample spacing, known at the sample).
* ``exact=False`` (pykrige's ``exact_values=False``, GSTools' default): the
  nugget is treated as measurement error; at the sample the estimate is
  smoothed like everywhere else and the variance stays positive, so the
  surface has no jump.

Away from samples the two are the same, and with no nugget they are the
same everywhere.

Examples
--------
>>> from geosoil.variogram import VariogramModel
>>> model = VariogramModel(name="exponential", nugget=0.0, psill=1.0, range=300.0)
>>> xy = np.array([[0.0, 0.0], [100.0, 0.0]])
>>> est, var = ordinary_kriging(xy, [1.0, 2.0], [[0.0, 0.0], [50.0, 0.0]], model)
>>> est.round(6).tolist()          # the sample itself; midway: the mean, by symmetry
[1.0, 1.5]
>>> bool(var[0] < 1e-12), bool(0.0 < var[1] < model.sill)
(True, True)
"""

from __future__ import annotations

import contextlib
import functools
import logging
import math
import os
import warnings
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import TYPE_CHECKING, Literal, overload

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError, InterpolationWarning, SettingsError
from .points import COINCIDENT_M, as_points, as_samples
from .variogram import VariogramModel

if TYPE_CHECKING:
    from scipy.spatial import cKDTree
    from threadpoolctl import ThreadpoolController

__all__ = [
    "SMALL_SYSTEM",
    "IDW_BLOCK_ENTRIES",
    "CrossValidation",
    "small_blas",
    "ordinary_kriging",
    "kriging_weights",
    "loo_cross_validation",
    "idw",
    "lognormal_backtransform",
]

logger = logging.getLogger(__name__)

Array = NDArray[np.float64]

_EPS2 = COINCIDENT_M * COINCIDENT_M
_SUB_ROWS = 128  # rows of a block whose covariances are evaluated together (stays in cache)
_TABLE_BYTES = 256 * 2**20  # largest per-row/per-column distance tables
_JITTERS = (1e-10, 1e-8, 1e-6)  # extra nugget (share of the sill) for a singular matrix

#: Below this many samples the sample-side matrix work (factorising, inverting,
#: cross-validation, variogram fits) runs on one BLAS thread: starting threads
#: costs more than they save on small matrices (measured: the demo's variogram
#: fits and cross-validation ran about a fifth faster on one thread).
SMALL_SYSTEM = 1000


@functools.cache
def _controller() -> ThreadpoolController:
    from threadpoolctl import ThreadpoolController

    return ThreadpoolController()  # inspects the loaded BLAS libraries once


@contextlib.contextmanager
def _blas_threads(limit: int | None) -> Iterator[None]:
    """BLAS held to ``limit`` threads (process-wide) while the block runs; None: as it is."""
    if limit is None:
        yield
        return
    with _controller().limit(limits=limit, user_api="blas"):
        yield


def small_blas(n: int) -> contextlib.AbstractContextManager[None]:
    """One BLAS thread while a block works on ``n`` samples, if ``n`` is small.

    Parameters
    ----------
    n
        Number of samples (the side of the matrices).

    Returns
    -------
    context manager
        Holds BLAS to one thread when ``n < SMALL_SYSTEM``; does nothing otherwise.
    """
    return _blas_threads(1 if n < SMALL_SYSTEM else None)


@dataclass(frozen=True, eq=False)
class CrossValidation:
    """Leave-one-out cross-validation of ordinary kriging.

    Attributes
    ----------
    errors
        Estimate without the sample minus the sample's value, per sample.
    standardised_errors
        ``errors / sqrt(variance)``.
    variance
        Kriging variance at each sample when it is left out.
    mean_error
        Mean of ``errors`` (near 0: unbiased).
    rmse
        Root mean square of ``errors``.
    msse
        Mean squared standardised error (near 1: the kriging variance is
        realistic; above 1: it understates the error).
    n
        Number of samples.
    jitter
        Nugget added to make the covariance matrix positive definite, as a share
        of the sill (0: none was needed).
    """

    errors: Array
    standardised_errors: Array
    variance: Array
    mean_error: float
    rmse: float
    msse: float
    n: int
    jitter: float = 0.0


# ---------------------------------------------------------------- shared pieces


def _pair_sq(a: Array, b: Array) -> Array:
    """Squared distances between the rows of ``a`` (p, 2) and ``b`` (q, 2)."""
    d2 = np.subtract.outer(a[:, 0], b[:, 0])
    d2 *= d2
    dy = np.subtract.outer(a[:, 1], b[:, 1])
    dy *= dy
    d2 += dy
    return d2


def _with_jitter(model: VariogramModel, share: float) -> VariogramModel:
    return VariogramModel(
        name=model.name,
        nugget=model.nugget + share * model.sill,
        psill=model.psill,
        range=model.range,
        nu=model.nu,
    )


def _factor(xy: Array, model: VariogramModel) -> tuple[Array, VariogramModel]:
    """Lower Cholesky factor of the sample covariance matrix, and the model it used.

    When the matrix is not numerically positive definite (samples at the same
    place with no nugget, or a Gaussian model without nugget on dense
    samples) a tiny nugget is added, with an :class:`InterpolationWarning`.
    """
    rho = model.correlation_sq(_pair_sq(xy, xy))
    for share in (0.0, *_JITTERS):
        m = _with_jitter(model, share) if share else model
        c = rho * m.psill
        c[np.diag_indices_from(c)] = m.sill
        try:
            import scipy.linalg
            low = scipy.linalg.cholesky(c, lower=True, overwrite_a=True, check_finite=False)
        except np.linalg.LinAlgError:
            continue
        if share:
            warnings.warn(
                "the samples' covariance matrix was not positive definite (samples at the same "
                "place, or a smooth variogram without nugget); a nugget of "
                f"{share:g} x the sill ({share * model.sill:.3g}) was added to solve it",
                InterpolationWarning,
                stacklevel=3,
            )
        return low, m
    raise InputError(
        "the kriging system cannot be solved: the samples' covariance matrix is singular",
        fix="merge samples taken at the same place, or use a variogram with a nugget",
    )


def _coincident(
    xd: Array, xt: Array, tree: cKDTree | None = None
) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """(target, sample) index pairs closer than COINCIDENT_M (by the engine's own d2)."""
    import scipy.spatial

    tree = scipy.spatial.cKDTree(xd) if tree is None else tree
    d, _ = tree.query(xt, k=1, distance_upper_bound=4 * COINCIDENT_M)
    hit = np.flatnonzero(np.isfinite(d))
    ti: list[int] = []
    si: list[int] = []
    for t, near in zip(hit, tree.query_ball_point(xt[hit], r=4 * COINCIDENT_M), strict=True):
        for j in near:
            if _pair_sq(xt[t : t + 1], xd[j : j + 1])[0, 0] <= _EPS2:
                ti.append(int(t))
                si.append(int(j))
    return np.asarray(ti, dtype=np.intp), np.asarray(si, dtype=np.intp)


def _worker_count(workers: int | None, tasks: int) -> int:
    if workers is None:
        workers = os.cpu_count() or 1
    if int(workers) != workers or workers < 1:
        raise SettingsError(
            f"must be a whole number of at least 1 (got {workers!r})", key="workers"
        )
    return max(1, min(int(workers), tasks))


def _run(tasks: list[tuple[int, int]], job: Callable[[int, int], None], workers: int) -> None:
    """Run ``job(start, stop)`` for every task; on several threads with single-threaded BLAS."""
    if workers == 1:
        for a, b in tasks:
            job(a, b)
        return
    # Each thread does its own matrix products: one BLAS thread each keeps
    # the cores busy with the element-wise work too (threadpoolctl changes
    # the BLAS thread count for the whole process while this runs).
    with _blas_threads(1), ThreadPoolExecutor(workers) as pool:
        for _ in pool.map(lambda t: job(*t), tasks):
            pass


# ---------------------------------------------------------------- global kriging


class _CrossCovariance:
    """Correlations between blocks of targets and all samples, evaluated in place.

    When the targets lie on a grid (few distinct x and y) the squared
    distances come from per-column and per-row tables; for the Gaussian
    model the tables hold the correlation factors themselves, since
    ``exp(-(dx^2 + dy^2)/s^2) = exp(-dx^2/s^2) exp(-dy^2/s^2)``.
    """

    def __init__(self, xd: Array, xt: Array, model: VariogramModel) -> None:
        self.xd, self.xt, self.model = xd, xt, model
        self.tables = False
        n, m = len(xd), len(xt)
        if m >= 64:
            ux, ix = np.unique(xt[:, 0], return_inverse=True)
            uy, iy = np.unique(xt[:, 1], return_inverse=True)
            size = (len(ux) + len(uy)) * n * 8
            if len(ux) + len(uy) <= m // 4 and size <= _TABLE_BYTES:
                self.tables = True
                self.ix, self.iy = ix.astype(np.intp), iy.astype(np.intp)
                self.tx = np.subtract.outer(ux, xd[:, 0]) ** 2
                self.ty = np.subtract.outer(uy, xd[:, 1]) ** 2
                self.separable = model.name == "gaussian"
                if self.separable:
                    model.correlation_sq(self.tx, out=self.tx)
                    model.correlation_sq(self.ty, out=self.ty)

    def block(self, start: int, stop: int, out: Array) -> Array:
        """Correlations of targets ``start:stop`` with the samples, written into ``out``."""
        tmp = np.empty((min(_SUB_ROWS, stop - start), len(self.xd)))
        for s0 in range(start, stop, _SUB_ROWS):
            s1 = min(stop, s0 + _SUB_ROWS)
            k = out[s0 - start : s1 - start]
            t = tmp[: s1 - s0]
            if self.tables:
                np.take(self.tx, self.ix[s0:s1], axis=0, out=k)
                np.take(self.ty, self.iy[s0:s1], axis=0, out=t)
                if self.separable:
                    k *= t
                    continue
                k += t
            else:
                np.subtract.outer(self.xt[s0:s1, 0], self.xd[:, 0], out=k)
                k *= k
                np.subtract.outer(self.xt[s0:s1, 1], self.xd[:, 1], out=t)
                t *= t
                k += t
            self.model.correlation_sq(k, out=k)
        return out


def _column_edges(n: int) -> list[int]:
    """Column blocks of the triangular factor: fewer zeros multiplied, products still large."""
    parts = max(1, min(4, n // 100))
    return [round(n * (j + 1) / parts) for j in range(parts)]


def _global(
    xd: Array,
    z: Array,
    xt: Array,
    model: VariogramModel,
    *,
    exact: bool,
    block_cells: int,
    workers: int | None,
) -> tuple[Array, Array, Array]:
    n, m = len(z), len(xt)
    with small_blas(n):
        low, model = _factor(xd, model)
        import scipy.linalg

        inv = scipy.linalg.lapack.dtrtri(low, lower=1)[0]  # M = L^-1, lower triangle
    ones = np.ones(n)
    v = inv @ ones
    s = float(v @ v)
    wz = inv @ z
    mean = float(v @ wz) / s  # generalised least-squares mean
    uv = np.column_stack([wz - mean * v, v])  # dual weights of the estimate; M 1
    # W = K M^T with K = psill * rho: fold psill into the (upper) factor M^T
    upper = np.ascontiguousarray(inv.T) * model.psill
    edges = _column_edges(n)
    cross = _CrossCovariance(xd, xt, model)
    no_pairs = np.empty(0, dtype=np.intp)
    nug_t, nug_s = _coincident(xd, xt) if exact and model.nugget > 0 else (no_pairs, no_pairs)
    nugget_share = model.nugget / model.psill
    est = np.empty(m)
    var = np.empty(m)
    psi = np.empty(m)

    def job(start: int, stop: int) -> None:
        k = cross.block(start, stop, np.empty((stop - start, n)))
        if len(nug_t):
            sel = (nug_t >= start) & (nug_t < stop)
            np.add.at(k, (nug_t[sel] - start, nug_s[sel]), nugget_share)
        q = np.zeros(stop - start)
        e = np.zeros((stop - start, 2))
        c0 = 0
        for c1 in edges:
            w = k[:, :c1] @ upper[:c1, c0:c1]
            q += np.einsum("ij,ij->i", w, w)
            e += w @ uv[c0:c1]
            c0 = c1
        r = 1.0 - e[:, 1]
        est[start:stop] = mean + e[:, 0]
        var[start:stop] = model.sill - q + r * r / s
        psi[start:stop] = r / s

    tasks = [(a, min(m, a + block_cells)) for a in range(0, m, block_cells)]
    _run(tasks, job, _worker_count(workers, len(tasks)))
    np.maximum(var, 0.0, out=var)
    return est, var, psi


# ---------------------------------------------------------------- local kriging


def _tiles(xt: Array, tile_m: float) -> tuple[NDArray[np.intp], NDArray[np.intp], Array]:
    """Targets grouped into square tiles: (order, tile starts in order, tile centres)."""
    m = len(xt)
    if tile_m == 0:
        return np.arange(m), np.arange(m), xt
    cx = np.floor((xt[:, 0] - xt[:, 0].min()) / tile_m).astype(np.int64)
    cy = np.floor((xt[:, 1] - xt[:, 1].min()) / tile_m).astype(np.int64)
    key = cy * (int(cx.max()) + 1) + cx
    order = np.argsort(key, kind="stable")
    starts = np.flatnonzero(np.r_[True, np.diff(key[order]) != 0])
    counts = np.diff(np.r_[starts, m])
    centres = np.add.reduceat(xt[order], starts, axis=0) / counts[:, None]
    return order, starts, centres


def _auto_tile(xd: Array, xt: Array) -> float:
    """About 12 x 12 targets per tile, and no wider than half the mean sample spacing."""
    def spacing(p: Array) -> float:
        span = p.max(axis=0) - p.min(axis=0)
        area = float(span[0] * span[1]) if span.min() > 0 else float(span.max() ** 2)
        return math.sqrt(area / len(p)) if area > 0 else 0.0

    return min(12.0 * spacing(xt), 0.5 * spacing(xd))


def _solve_batch(a: Array, r: Array, sill: float) -> Array:
    n = a.shape[-1] - 1
    try:
        return np.asarray(np.linalg.solve(a, r), dtype=np.float64)
    except np.linalg.LinAlgError:
        pass
    for share in _JITTERS:
        aj = a.copy()
        idx = np.arange(n)
        aj[:, idx, idx] += share * sill
        try:
            x = np.linalg.solve(aj, r)
        except np.linalg.LinAlgError:
            continue
        warnings.warn(
            "a local kriging system was singular (samples at the same place, or a smooth "
            f"variogram without nugget); a nugget of {share:g} x the sill was added to solve it",
            InterpolationWarning,
            stacklevel=4,
        )
        return np.asarray(x, dtype=np.float64)
    raise InputError(
        "a local kriging system cannot be solved: its covariance matrix is singular",
        fix="merge samples taken at the same place, or use a variogram with a nugget",
    )


def _local(
    xd: Array,
    z: Array,
    xt: Array,
    model: VariogramModel,
    *,
    neighbours: int,
    tile_m: float,
    exact: bool,
    workers: int | None,
) -> tuple[Array, Array, Array]:
    import scipy.spatial

    m, nb = len(xt), neighbours
    tree = scipy.spatial.cKDTree(xd)
    order, starts, centres = _tiles(xt, tile_m)
    counts = np.diff(np.r_[starts, m])
    _, near = tree.query(centres, k=nb)
    near = np.asarray(near, dtype=np.intp).reshape(len(starts), nb)
    # tiles with the same number of targets side by side: little padding per batch
    by_count = np.argsort(-counts, kind="stable")
    est = np.empty(m)
    var = np.empty(m)
    psi = np.empty(m)
    sill, psill = model.sill, model.psill
    add_nugget = exact and model.nugget > 0

    def job(a: int, b: int) -> None:
        tiles = by_count[a:b]
        p = int(counts[tiles].max())
        nt = len(tiles)
        # targets of each tile, padded by repeating its first target
        offs = np.minimum(np.arange(p)[None, :], counts[tiles, None] - 1)
        tidx = order[starts[tiles, None] + offs]  # (nt, p)
        pts = xd[near[tiles]]  # (nt, nb, 2)
        lhs = np.ones((nt, nb + 1, nb + 1))
        d2 = _pair_sq_batch(pts, pts)
        lhs[:, :nb, :nb] = model.correlation_sq(d2, out=d2) * psill
        idx = np.arange(nb)
        lhs[:, idx, idx] = sill
        lhs[:, nb, nb] = 0.0
        rhs = np.ones((nt, nb + 1, p))
        d2 = _pair_sq_batch(pts, xt[tidx])
        on_top = d2 <= _EPS2 if add_nugget else None
        k = model.correlation_sq(d2, out=d2)
        k *= psill
        if on_top is not None and on_top.any():
            k[on_top] += model.nugget
        rhs[:, :nb, :] = k
        x = _solve_batch(lhs, rhs, sill)
        lam, mu = x[:, :nb, :], x[:, nb, :]
        e = np.einsum("tn,tnp->tp", z[near[tiles]], lam)
        vv = sill - np.einsum("tnp,tnp->tp", lam, k) - mu
        keep = offs == np.arange(p)[None, :]  # not padding
        est[tidx[keep]] = e[keep]
        var[tidx[keep]] = vv[keep]
        psi[tidx[keep]] = -mu[keep]

    # about 4 MB of systems per batch
    per_batch = max(1, int(4e6 / (8 * (nb + 1) * (nb + 1 + int(counts.max())))))
    tasks = [(a, min(len(starts), a + per_batch)) for a in range(0, len(starts), per_batch)]
    _run(tasks, job, _worker_count(workers, len(tasks)))
    np.maximum(var, 0.0, out=var)
    return est, var, psi


def _pair_sq_batch(a: NDArray[np.float64], b: NDArray[np.float64]) -> NDArray[np.float64]:
    """Squared distances between point sets batched on the first axis: (t, p, 2), (t, q, 2)."""
    d2 = a[:, :, None, 0] - b[:, None, :, 0]
    d2 *= d2
    dy = a[:, :, None, 1] - b[:, None, :, 1]
    dy *= dy
    d2 += dy
    return d2


# ---------------------------------------------------------------- public API


@overload
def ordinary_kriging(
    xy_data: ArrayLike,
    values: ArrayLike,
    xy_target: ArrayLike,
    model: VariogramModel,
    *,
    neighbours: int | None = ...,
    tile_m: float | None = ...,
    exact: bool = ...,
    block_cells: int = ...,
    workers: int | None = ...,
    return_lagrange: Literal[False] = ...,
) -> tuple[Array, Array]: ...


@overload
def ordinary_kriging(
    xy_data: ArrayLike,
    values: ArrayLike,
    xy_target: ArrayLike,
    model: VariogramModel,
    *,
    neighbours: int | None = ...,
    tile_m: float | None = ...,
    exact: bool = ...,
    block_cells: int = ...,
    workers: int | None = ...,
    return_lagrange: Literal[True],
) -> tuple[Array, Array, Array]: ...


def ordinary_kriging(
    xy_data: ArrayLike,
    values: ArrayLike,
    xy_target: ArrayLike,
    model: VariogramModel,
    *,
    neighbours: int | None = None,
    tile_m: float | None = None,
    exact: bool = True,
    block_cells: int = 2048,
    workers: int | None = None,
    return_lagrange: bool = False,
) -> tuple[Array, Array] | tuple[Array, Array, Array]:
    """Ordinary kriging estimate and kriging variance at every target.

    Parameters
    ----------
    xy_data
        (n, 2) sample coordinates, metres (projected CRS).
    values
        (n,) sample values.
    xy_target
        (m, 2) target coordinates (cell centres), same CRS.
    model
        The variogram.
    neighbours
        ``None``: all samples at every target (exact global kriging). ``N``
        (at least 2): the ``N`` samples nearest each tile of targets. ``N`` of
        ``n`` or more is global kriging.
    tile_m
        Local mode only: side of the square tiles of targets that share one
        neighbourhood, metres. ``0``: every target its own (pykrige's
        ``n_closest_points``). Default: about 12 x 12 targets, and no wider
        than half the mean sample spacing (in the benchmark, tiles change the
        result by about a tenth of what the neighbourhood itself does).
    exact
        Whether a target on top of a sample takes the sample's value when
        the model has a nugget (see the module notes).
    block_cells
        Targets per block in global mode (bounds memory: a block holds
        ``block_cells x n`` covariances per worker).
    workers
        Threads; default all cores. With more than one, BLAS is held to one
        thread per worker (process-wide, through threadpoolctl) while the
        call runs, so the element-wise work runs in parallel too.
    return_lagrange
        Also return the Lagrange multiplier ``psi`` of each target, in the
        variogram form of the system (``sum_j w_j gamma_ij + psi = gamma_i0``,
        variance ``= sum_i w_i gamma_i0 + psi``), as
        :func:`lognormal_backtransform` needs.

    Returns
    -------
    estimate, variance : ndarray (m,)
        The variance is clipped at 0 (rounding can take it a hair below).
    lagrange : ndarray (m,)
        Only with ``return_lagrange=True``.

    Raises
    ------
    InputError
        Malformed or non-finite coordinates or values; no samples; a singular
        system even after a tiny added nugget.
    SettingsError
        ``neighbours`` below 2, negative ``tile_m``, ``block_cells`` below 1.

    Examples
    --------
    >>> from geosoil.variogram import VariogramModel
    >>> model = VariogramModel(name="spherical", nugget=0.1, psill=1.0, range=500.0)
    >>> rng = np.random.default_rng(0)
    >>> xy = rng.uniform(0, 1000, (50, 2))
    >>> z = xy[:, 0] / 1000
    >>> gx, gy = np.meshgrid(np.arange(5.0, 1000, 10), np.arange(5.0, 1000, 10))
    >>> target = np.column_stack([gx.ravel(), gy.ravel()])
    >>> est, var = ordinary_kriging(xy, z, target, model)
    >>> est.shape, bool((var > 0).all())
    ((10000,), True)
    >>> est_local, var_local = ordinary_kriging(xy, z, target, model, neighbours=20)
    >>> bool(np.isfinite(est_local).all() and (var_local >= var - 1e-9).all())
    True
    """
    xd, z = as_samples(xy_data, values)
    xt = as_points(xy_target, "target")
    if int(block_cells) != block_cells or block_cells < 1:
        raise SettingsError(f"must be a whole number of at least 1 (got {block_cells!r})",
                            key="block_cells")
    if neighbours is not None and (int(neighbours) != neighbours or neighbours < 2):
        raise SettingsError(
            f"must be a whole number of at least 2, or None for all samples (got {neighbours!r})",
            key="neighbours",
        )
    if tile_m is not None and not (np.isfinite(tile_m) and tile_m >= 0):
        raise SettingsError(f"must be 0 m or more (got {tile_m!r})", key="tile_m")
    m = len(xt)
    if m == 0:
        empty = np.empty(0)
        return (empty, empty.copy(), empty.copy()) if return_lagrange else (empty, empty.copy())
    if neighbours is None or neighbours >= len(z):
        est, var, psi = _global(
            xd, z, xt, model, exact=exact, block_cells=int(block_cells), workers=workers
        )
    else:
        tile = _auto_tile(xd, xt) if tile_m is None else float(tile_m)
        est, var, psi = _local(
            xd, z, xt, model, neighbours=int(neighbours), tile_m=tile, exact=exact,
            workers=workers,
        )
    return (est, var, psi) if return_lagrange else (est, var)


def kriging_weights(
    xy_data: ArrayLike,
    xy_target: ArrayLike,
    model: VariogramModel,
    *,
    exact: bool = True,
) -> tuple[Array, float]:
    """Ordinary kriging weights of the samples for one target, and the Lagrange multiplier.

    Solves the full ordinary kriging system directly (for checks and for
    explaining one cell; the grid engine is :func:`ordinary_kriging`).

    Parameters
    ----------
    xy_data
        (n, 2) sample coordinates.
    xy_target
        One target, ``(x, y)``.
    model, exact
        As for :func:`ordinary_kriging`.

    Returns
    -------
    weights : ndarray (n,)
        They add up to 1.
    lagrange : float
        ``psi`` in the variogram form, as ``return_lagrange`` of
        :func:`ordinary_kriging`.

    Examples
    --------
    >>> from geosoil.variogram import VariogramModel
    >>> model = VariogramModel(name="exponential", nugget=0.0, psill=1.0, range=30.0)
    >>> w, psi = kriging_weights([[0.0, 0.0], [10.0, 0.0]], (5.0, 0.0), model)
    >>> w.tolist()
    [0.5, 0.5]
    """
    xd = as_points(xy_data, "sample")
    x0 = as_points(xy_target, "target")
    if len(x0) != 1:
        raise InputError("kriging_weights takes one target", fix="pass a single (x, y)")
    n = len(xd)
    a = np.ones((n + 1, n + 1))
    a[:n, :n] = model.correlation_sq(_pair_sq(xd, xd)) * model.psill
    a[np.arange(n), np.arange(n)] = model.sill
    a[n, n] = 0.0
    d2 = _pair_sq(xd, x0)[:, 0]
    b = np.ones(n + 1)
    b[:n] = model.correlation_sq(d2) * model.psill
    if exact:
        b[:n][d2 <= _EPS2] += model.nugget
    import scipy.linalg

    x = scipy.linalg.solve(a, b)
    return x[:n], float(-x[n])


def loo_cross_validation(
    xy: ArrayLike, values: ArrayLike, model: VariogramModel
) -> CrossValidation:
    """Leave-one-out cross-validation of global ordinary kriging, in closed form.

    With ``A`` the ordinary kriging matrix (sample covariances bordered by
    ones) and ``B = A^-1``, leaving sample ``i`` out gives the residual
    ``z_i - z*_i = (B [z; 0])_i / B_ii`` and the kriging variance
    ``1 / B_ii`` (Dubrule 1983, Math. Geol. 15:687-699), so all ``n`` refits
    cost one factorisation. ``B`` comes from the Cholesky factor of the
    covariance matrix and the bordering identity.

    Parameters
    ----------
    xy, values
        Sample coordinates (n, 2) and values (n,), at least 3 samples.
    model
        The variogram.

    Returns
    -------
    CrossValidation

    Examples
    --------
    >>> from geosoil.variogram import VariogramModel
    >>> model = VariogramModel(name="spherical", nugget=0.0, psill=1.0, range=100.0)
    >>> cv = loo_cross_validation([[0, 0], [10, 0], [20, 0], [30, 0]], [1.0, 2.0, 3.0, 4.0], model)
    >>> cv.n, bool(abs(cv.errors[1]) < 0.1)
    (4, True)
    """
    xd, z = as_samples(xy, values, minimum=3)
    n = len(z)
    with small_blas(n):
        low, used = _factor(xd, model)
        import scipy.linalg

        cinv = scipy.linalg.cho_solve((low, True), np.eye(n), check_finite=False)
        b = cinv.sum(axis=1)  # C^-1 1
        s = float(b.sum())
        diag = np.diag(cinv) - b * b / s  # diagonal of A^-1 (sample block)
        bz = cinv @ z - b * float(b @ z) / s  # (A^-1 [z; 0]) (sample block)
    variance = 1.0 / diag
    errors = -bz / diag  # estimate minus value
    std = errors / np.sqrt(variance)
    return CrossValidation(
        errors=errors,
        standardised_errors=std,
        variance=variance,
        mean_error=float(errors.mean()),
        rmse=float(np.sqrt(np.mean(errors**2))),
        msse=float(np.mean(std**2)),
        n=n,
        jitter=(used.nugget - model.nugget) / model.sill,
    )


#: Most target-sample distances :func:`idw` holds at once (32 MB each array of them).
IDW_BLOCK_ENTRIES = 4_000_000


def idw(
    xy_data: ArrayLike,
    values: ArrayLike,
    xy_target: ArrayLike,
    *,
    power: float = 2.0,
    block_cells: int = 4096,
) -> Array:
    """Inverse-distance-weighted mean of all samples at each target (the fallback).

    A target within :data:`~geosoil.points.COINCIDENT_M` of samples takes
    their mean value.

    Parameters
    ----------
    xy_data, values, xy_target
        As for :func:`ordinary_kriging`.
    power
        Weights are ``distance ** -power`` (more than 0; 2 is common practice).
    block_cells
        Targets per block (bounds memory; fewer when there are so many samples that a
        block would hold more than :data:`IDW_BLOCK_ENTRIES` distances).

    Returns
    -------
    ndarray
        The estimate at each target.

    Examples
    --------
    >>> idw([[0.0, 0.0], [10.0, 0.0]], [1.0, 3.0], [[0.0, 0.0], [5.0, 0.0], [2.5, 0.0]]).tolist()
    [1.0, 2.0, 1.2]
    """
    xd, z = as_samples(xy_data, values)
    xt = as_points(xy_target, "target")
    if not (np.isfinite(power) and power > 0):
        raise SettingsError(f"must be more than 0 (got {power!r})", key="power")
    out = np.empty(len(xt))
    block_cells = max(1, min(int(block_cells), IDW_BLOCK_ENTRIES // max(len(z), 1)))
    for a in range(0, len(xt), block_cells):
        d2 = _pair_sq(xt[a : a + block_cells], xd)
        on_top = d2 <= _EPS2
        with np.errstate(divide="ignore"):
            w = d2 ** (-0.5 * power)
        w[on_top.any(axis=1)] = on_top[on_top.any(axis=1)]
        out[a : a + block_cells] = (w @ z) / w.sum(axis=1)
    return out


def lognormal_backtransform(
    est_log: ArrayLike, var_log: ArrayLike, lagrange: ArrayLike
) -> tuple[Array, Array]:
    """Back-transform ordinary kriging of log values to the original scale.

    Estimate: ``exp(y* + sigma^2/2 - psi)``, the ordinary lognormal kriging
    back-transform with ``y*`` and ``sigma^2`` the kriging estimate and
    variance of the natural log and ``psi`` the Lagrange multiplier in the
    variogram form (``return_lagrange=True`` of :func:`ordinary_kriging`).
    Source: Journel (1980), Math. Geol. 12:285-303; Cressie (1993),
    Statistics for Spatial Data, section 3.2.2 (from memory; the book's page
    was not checked here).

    Variance: ``estimate^2 (exp(sigma^2) - 1)``, the variance of a lognormal
    variable with that mean and log-variance ``sigma^2``: an approximation
    to the error variance on the original scale, for display.

    Parameters
    ----------
    est_log, var_log, lagrange
        Arrays of equal shape from :func:`ordinary_kriging` on ``log(z)``.

    Returns
    -------
    estimate, variance : ndarray

    Examples
    --------
    >>> est, var = lognormal_backtransform([np.log(5.0)], [0.0], [0.0])
    >>> est.round(12).tolist(), var.tolist()
    ([5.0], [0.0])
    """
    y = np.asarray(est_log, dtype=np.float64)
    s2 = np.asarray(var_log, dtype=np.float64)
    psi = np.asarray(lagrange, dtype=np.float64)
    est = np.exp(y + 0.5 * s2 - psi)
    return est, est * est * np.expm1(s2)
