"""Where to sample next: greedy kriging-variance reduction on the paddock grid (pure).

The method
----------
A design is chosen one point at a time (a greedy, sequential design): each
new point is the candidate cell that most lowers the *weighted mean
ordinary-kriging variance* over the paddock, given the existing samples and
the points already chosen. Minimising the (weighted) mean kriging variance is
the criterion of model-based sampling design in geostatistics: van Groenigen
& Stein (1998, *J. Environ. Qual.* 27: 1078-1086) optimise it by spatial
simulated annealing, and van Groenigen, Siderius & Stein (1999, *Geoderma*
87: 239-259) weight it by where the decision is at stake; choosing the points
one by one, each the best given those before, is the greedy (sequential)
variant of the same criterion (references from memory). Greedy is not
guaranteed optimal but needs no tuning and its result is repeatable.

The kriging variance does not depend on the sample values, only on where
the samples are and on the variogram, so a design can be judged before any
sample is taken. With ``Sigma`` the ordinary-kriging error covariance between
cells given the samples (the covariance of a Gaussian field conditioned on
the samples, with an unknown constant mean), adding a sample at cell ``p``
changes it by a rank-one update::

    Sigma'(t, u) = Sigma(t, u) - Sigma(t, p) Sigma(p, u) / Sigma(p, p)

so the weighted variance a candidate removes is
``sum_t w_t Sigma(t, p)^2 / Sigma(p, p)``, every candidate scored at once.
``Sigma`` is built from the same Cholesky factor as
:func:`geosoil.kriging.ordinary_kriging` (its diagonal is that engine's
variance; the tests hold it, and the variance after the design, against the
engine).

Candidates and targets are the paddock's grid cells inside its mask (the
mask already leaves out exclusions and buffers), thinned to a regular
subgrid of at most ``max_cells`` cells so the ``Sigma`` matrix stays small;
the mean variance over that systematic subgrid estimates the paddock's mean.
A candidate closer than ``min_distance_m`` to an existing sample or a chosen
point is never taken, nor one within ``edge_setback_m`` of the paddock's
boundary (:data:`EDGE_SETBACK_M`: samples are kept off headlands, fence lines
and tracks, where traffic, old fertiliser spills and edge effects make the
soil unlike the paddock's; common practice).

Weights: the prescribed rate of each cell (kg/ha, all products together),
so that the map becomes trustworthy where money is spread; or the nearness of
each cell to a class limit (:func:`limit_weights`: the chance that the true
value lies on the other side of the limit, so that the map becomes
trustworthy where a cell's class, and with it the decision, is in doubt); or
uniform.

The design uses global kriging (every sample at every cell), whatever
neighbourhood the project's surfaces were kriged with.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass

import numpy as np
import scipy.linalg
import shapely
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree
from scipy.spatial.distance import cdist

from .errors import DataWarning, SettingsError
from .grids import PaddockGrid
from .kriging import _factor, ordinary_kriging
from .points import COINCIDENT_M, as_points
from .tonnage import apportion
from .variogram import VariogramModel

__all__ = [
    "EDGE_SETBACK_M",
    "PaddockPlan",
    "SPACE_FILLING_RULE",
    "space_filling_paddock",
    "candidate_cells",
    "default_min_distance",
    "greedy_design",
    "limit_weights",
    "plan_paddock",
    "random_design",
    "regular_design",
    "split_samples",
    "weighted_mean_variance",
]

Array = NDArray[np.float64]

#: Default distance (m) a new sample keeps from the paddock's boundary: off headlands and
#: fence lines (common practice; the figure is ours).
EDGE_SETBACK_M = 20.0

#: Largest number of cells used as candidates and targets in one paddock (the
#: error-covariance matrix holds this squared, 8 bytes each: 2 500 -> 50 MB).
MAX_CELLS = 2500


@dataclass(frozen=True)
class PaddockPlan:
    """The plan for one paddock.

    ``points`` are the chosen coordinates (working CRS, metres), in the order
    chosen; the variances are means over the paddock's masked cells (the whole
    grid, computed by :func:`geosoil.kriging.ordinary_kriging`), in the
    variable's kriging scale (the log scale for a log-kriged variable).
    """

    paddock: str
    points: Array
    kriging_sd_before: Array  # kriging standard deviation at each point before the plan
    mean_variance_before: float
    mean_variance_after: float
    weighted_variance_before: float
    weighted_variance_after: float
    weighting: str
    min_distance_m: float
    n_candidates: int
    edge_setback_m: float = 0.0  # the setback used (lower than asked when the paddock is small)

    @property
    def reduction(self) -> float:
        """Share (0-1) by which the plan lowers the mean kriging variance."""
        b = self.mean_variance_before
        return 0.0 if b <= 0 else 1.0 - self.mean_variance_after / b

    @property
    def weighted_reduction(self) -> float:
        """Share (0-1) by which the plan lowers the weighted mean kriging variance."""
        b = self.weighted_variance_before
        return 0.0 if b <= 0 else 1.0 - self.weighted_variance_after / b


def candidate_cells(
    grid: PaddockGrid, *, max_cells: int = MAX_CELLS
) -> tuple[Array, NDArray[np.intp]]:
    """Centres of the masked cells on a regular subgrid of at most ``max_cells`` cells.

    Returns
    -------
    xy : ndarray (k, 2)
    index : ndarray (k,)
        Positions of those cells in :meth:`PaddockGrid.cell_centres` order.

    Examples
    --------
    >>> import pyproj
    >>> from affine import Affine
    >>> g = PaddockGrid("p", Affine(10, 0, 0, 0, -10, 100), 10, 10, pyproj.CRS(32755),
    ...                 np.ones((10, 10), bool))
    >>> xy, idx = candidate_cells(g, max_cells=25)
    >>> len(xy), xy[:2].tolist()
    (25, [[5.0, 95.0], [25.0, 95.0]])
    """
    rows, cols = np.nonzero(grid.mask)
    step = 1
    while True:
        keep = (rows % step == 0) & (cols % step == 0)
        if keep.sum() <= max_cells or step > max(grid.width, grid.height):
            break
        step += 1
    x, y = grid.cell_centres()
    index = np.flatnonzero(keep)
    return np.column_stack([x[index], y[index]]), index


def default_min_distance(area_m2: float, n_total: int) -> float:
    """Half the spacing of a square grid of ``n_total`` points over ``area_m2`` (metres).

    Our own rule, so fresh cores keep off the old holes and off each other
    without ruling out the gaps worth filling.

    >>> default_min_distance(1_000_000.0, 100)
    50.0
    """
    return 0.5 * math.sqrt(area_m2 / max(n_total, 1))


def _covariance(a: Array, b: Array, model: VariogramModel) -> Array:
    """Covariances between points (the nugget where two points coincide: exact kriging)."""
    d2 = cdist(a, b, "sqeuclidean")
    c = model.correlation_sq(d2) * model.psill
    c[d2 <= COINCIDENT_M * COINCIDENT_M] += model.nugget
    return c


def _error_covariance(samples: Array, cells: Array, model: VariogramModel) -> Array:
    """Ordinary-kriging error covariance between ``cells`` given ``samples``."""
    low, m = _factor(samples, model)
    a = scipy.linalg.solve_triangular(low, _covariance(samples, cells, m), lower=True,
                                      check_finite=False)
    v = scipy.linalg.solve_triangular(low, np.ones(len(samples)), lower=True,
                                      check_finite=False)
    s = float(v @ v)
    b = 1.0 - v @ a
    sigma = _covariance(cells, cells, m)
    sigma -= a.T @ a
    sigma += np.outer(b, b) / s
    return sigma


def greedy_design(
    samples: ArrayLike,
    cells: ArrayLike,
    model: VariogramModel,
    *,
    n_points: int,
    weights: ArrayLike | None = None,
    min_distance_m: float = 0.0,
    allowed: ArrayLike | None = None,
) -> tuple[NDArray[np.intp], Array]:
    """Choose ``n_points`` of ``cells`` one by one, each lowering the weighted variance most.

    Parameters
    ----------
    samples
        (n, 2) existing sample coordinates (at least one), metres.
    cells
        (k, 2) candidate cells, which are also the targets whose variance counts.
    model
        The variogram.
    n_points
        Points to choose; fewer are returned when the distance rule leaves no
        room.
    weights
        (k,) weight of each cell (at least 0); default all equal.
    min_distance_m
        No chosen point nearer than this to a sample or another chosen point.
    allowed
        (k,) bool: only these cells may be chosen (all others still count as targets).

    Returns
    -------
    chosen : ndarray of int
        Indices into ``cells``, in the order chosen.
    variance_after : ndarray (k,)
        Each cell's kriging variance with the chosen points added.

    Examples
    --------
    >>> model = VariogramModel(name="exponential", nugget=0.0, psill=1.0, range=300.0)
    >>> cells = np.array([[x, 0.0] for x in range(0, 1001, 50)], dtype=float)
    >>> chosen, var = greedy_design([[0.0, 0.0]], cells, model, n_points=1)
    >>> float(cells[chosen[0], 0]) > 500     # the far half is the least known
    True
    """
    xd = as_points(samples, "sample")
    xc = as_points(cells, "cell")
    if int(n_points) != n_points or n_points < 1:
        raise SettingsError(f"must be a whole number of at least 1 (got {n_points!r})",
                            key="points")
    w = np.ones(len(xc)) if weights is None else np.asarray(weights, dtype=np.float64)
    if w.shape != (len(xc),) or not np.isfinite(w).all() or (w < 0).any():
        raise SettingsError("weights must be one finite value of at least 0 per cell",
                            key="weights")
    sigma = _error_covariance(xd, xc, model)
    free = np.ones(len(xc), dtype=bool) if allowed is None else np.array(allowed, dtype=bool)
    if min_distance_m > 0:
        near = cKDTree(xc).query_ball_point(xd, r=min_distance_m)
        for idx in near:
            free[idx] = False
    tree = cKDTree(xc)
    chosen: list[int] = []
    tiny = 1e-12 * model.sill
    for _ in range(int(n_points)):
        diag = np.diag(sigma).copy()
        ok = free & (diag > tiny)
        if not ok.any():
            break
        score = np.full(len(xc), -np.inf)
        score[ok] = (w @ sigma[:, ok] ** 2) / diag[ok]
        p = int(np.argmax(score))
        chosen.append(p)
        col = sigma[:, p].copy()
        sigma -= np.outer(col, col) / col[p]
        free[p] = False
        if min_distance_m > 0:
            free[tree.query_ball_point(xc[p], r=min_distance_m)] = False
    return np.asarray(chosen, dtype=np.intp), np.clip(np.diag(sigma).copy(), 0.0, None)


def weighted_mean_variance(
    samples: ArrayLike, targets: ArrayLike, model: VariogramModel,
    weights: ArrayLike | None = None,
) -> float:
    """Weighted mean ordinary-kriging variance over ``targets``, by the kriging engine.

    >>> model = VariogramModel(name="spherical", nugget=0.0, psill=1.0, range=100.0)
    >>> round(weighted_mean_variance([[0.0, 0.0], [50.0, 0.0]], [[0.0, 0.0]], model), 9)
    0.0
    """
    xt = as_points(targets, "target")
    xd = as_points(samples, "sample")
    _, var = ordinary_kriging(xd, np.zeros(len(xd)), xt, model)
    w = np.ones(len(xt)) if weights is None else np.asarray(weights, dtype=np.float64)
    return float((w * var).sum() / w.sum())


def limit_weights(values: ArrayLike, sd: ArrayLike, limit: float) -> Array:
    """Weight of each cell by its nearness to a class limit: ``2 * Phi(-|v - limit| / sd)``.

    With a normal kriging error of standard deviation ``sd`` about the estimate
    ``v``, this is twice the chance that the true value lies on the other side
    of ``limit``: 1 on the limit, falling towards 0 as the estimate moves away
    from it by several standard deviations. A cell with no error (``sd`` 0)
    weighs 1 exactly on the limit and 0 elsewhere; NaN weighs 0.

    Examples
    --------
    >>> limit_weights([6.0, 6.0 + 1.959964, 20.0], [1.0, 1.0, 1.0], 6.0).round(3).tolist()
    [1.0, 0.05, 0.0]
    """
    from scipy.special import erfc

    v = np.asarray(values, dtype=np.float64)
    s = np.asarray(sd, dtype=np.float64)
    gap = np.abs(v - limit)
    with np.errstate(divide="ignore", invalid="ignore"):
        w = erfc(gap / (s * math.sqrt(2.0)))  # 2 * Phi(-x) = erfc(x / sqrt(2))
    w = np.where(s > 0, w, (gap == 0).astype(float))
    return np.where(np.isfinite(w), w, 0.0)


def split_samples(total: int, areas: dict[str, float]) -> dict[str, int]:
    """Split ``total`` samples across paddocks in proportion to their area.

    Each paddock gets the whole part of its share; the samples left over go one
    each to the paddocks with the largest remainders (the largest-remainder or
    Hamilton method of :func:`geosoil.tonnage.apportion`; ties to the paddock
    listed first).

    Examples
    --------
    >>> split_samples(10, {"A": 55.0, "B": 27.0, "C": 18.0})  # quotas 5.5, 2.7, 1.8
    {'A': 5, 'B': 3, 'C': 2}
    """
    if int(total) != total or total < 0:
        raise SettingsError(f"must be a whole number of at least 0 (got {total!r})",
                            key="samples")
    names = list(areas)
    w = np.array([max(areas[n], 0.0) for n in names], dtype=np.float64)
    if not names or not w.sum() > 0:
        return {n: 0 for n in names}
    return {n: int(k) for n, k in zip(names, apportion(int(total), w), strict=True)}


def random_design(
    cells: ArrayLike, samples: ArrayLike, *, n_points: int, min_distance_m: float,
    rng: np.random.Generator,
) -> NDArray[np.intp]:
    """A random design of candidate cells under the same distance rule (for comparisons).

    Cells are drawn in random order and kept when far enough from the samples
    and the points kept before.
    """
    xc = as_points(cells, "cell")
    taken = [np.asarray(p, dtype=np.float64) for p in as_points(samples, "sample")]
    out: list[int] = []
    for i in rng.permutation(len(xc)):
        if len(out) == n_points:
            break
        if all(np.hypot(*(xc[i] - q)) >= min_distance_m for q in taken):
            out.append(int(i))
            taken.append(xc[i])
    return np.asarray(out, dtype=np.intp)


def regular_design(cells: ArrayLike, *, n_points: int, area_m2: float) -> NDArray[np.intp]:
    """The cells nearest a square grid of about ``n_points`` nodes (for comparisons).

    The grid spacing is ``sqrt(area / n)``, shrunk until at least ``n_points``
    distinct cells are hit; the first ``n_points`` are returned.
    """
    xc = as_points(cells, "cell")
    tree = cKDTree(xc)
    spacing = math.sqrt(area_m2 / n_points)
    lo, hi = xc.min(axis=0), xc.max(axis=0)
    for _ in range(50):
        gx = np.arange(lo[0] + spacing / 2, hi[0] + spacing / 2, spacing)
        gy = np.arange(lo[1] + spacing / 2, hi[1] + spacing / 2, spacing)
        nodes = np.array([(x, y) for y in gy for x in gx])
        d, idx = tree.query(nodes)
        hit = list(dict.fromkeys(int(i) for i, dd in zip(idx, d, strict=True)
                                 if dd <= spacing / 2))
        if len(hit) >= n_points:
            return np.asarray(hit[:n_points], dtype=np.intp)
        spacing *= 0.95
    return np.asarray(hit, dtype=np.intp)



def _warn_short(name: str, got: int, n_points: int, min_distance_m: float,
                setback: float) -> None:
    """Say when fewer points than asked fit a paddock's distance and setback rules."""
    if got < n_points:
        warnings.warn(f"{name}: only {got} of {n_points} new points fit at least "
                      f"{min_distance_m:.0f} m from the samples and each other"
                      + (f" and {setback:.0f} m inside the boundary" if setback > 0 else "")
                      + "; lower the minimum distance (or the edge setback) for more",
                      DataWarning, stacklevel=3)


def _room(grid: PaddockGrid, xd: Array, xc: Array, *, n_points: int, min_distance_m: float | None,
          avoid: ArrayLike | None, boundary: shapely.Geometry | None, edge_setback_m: float,
          ) -> tuple[float, Array, NDArray[np.bool_], float]:
    """The least distance between points (the default from the paddock's area when not
    given), the points new ones keep off (samples and ``avoid``), the candidate cells
    allowed and the edge setback used: the rules every plan of a paddock shares."""
    area = grid.n_cells * grid.cell_area_ha * 10_000.0
    if min_distance_m is None:
        min_distance_m = default_min_distance(area, len(xd) + int(n_points))
    keep_off: Array = (xd if avoid is None
                       else np.vstack([xd, as_points(avoid, "sample")]).astype(np.float64))
    allowed, setback = _allowed(grid.name, xc, keep_off, min_distance_m, boundary,
                                edge_setback_m)
    return min_distance_m, keep_off, allowed, setback


def _allowed(name: str, xc: Array, keep_off: Array, min_distance_m: float,
             boundary: shapely.Geometry | None, edge_setback_m: float) -> tuple[
                 NDArray[np.bool_], float]:
    """Candidates far enough from ``keep_off`` and inside the edge setback (lowered, with a
    warning, where no candidate lies that far in); and the setback used."""
    allowed = np.ones(len(xc), dtype=bool)
    if min_distance_m > 0 and len(keep_off):  # off every existing sample
        allowed = cKDTree(keep_off).query(xc)[0] >= min_distance_m
    setback = 0.0
    if boundary is not None and edge_setback_m > 0 and len(xc):
        depth = shapely.distance(shapely.points(xc), boundary.boundary)
        setback = float(edge_setback_m)
        if not (depth >= setback).any():
            setback = 0.5 * float(depth.max())
            warnings.warn(f"{name}: no cell lies {edge_setback_m:g} m inside the paddock "
                          f"boundary (the paddock is too small for the edge setback), so new "
                          f"points keep only {setback:.0f} m from it", DataWarning, stacklevel=3)
        allowed &= depth >= setback
    return allowed, setback


#: How a paddock without a fitted variogram is planned.
SPACE_FILLING_RULE = ("space-filling: each new point at the candidate cell farthest from every "
                      "sample and point before it (greedy maximin; no variogram, so no kriging "
                      "variance)")


def space_filling_paddock(
    grid: PaddockGrid,
    samples: ArrayLike,
    *,
    n_points: int,
    min_distance_m: float | None = None,
    avoid: ArrayLike | None = None,
    boundary: shapely.Geometry | None = None,
    edge_setback_m: float = 0.0,
    max_cells: int = MAX_CELLS,
) -> tuple[Array, float, float]:
    """New points of a paddock with no variogram: :data:`SPACE_FILLING_RULE`.

    Returns the points (k, 2), the least distance used and the edge setback used.
    The same distance and setback rules as :func:`plan_paddock`.
    """
    xd = as_points(samples, "sample") if len(np.asarray(samples)) else np.empty((0, 2))
    xc, _ = candidate_cells(grid, max_cells=max_cells)
    min_distance_m, keep_off, allowed, setback = _room(
        grid, xd, xc, n_points=n_points, min_distance_m=min_distance_m, avoid=avoid,
        boundary=boundary, edge_setback_m=edge_setback_m)
    if len(keep_off):
        far = cKDTree(keep_off).query(xc)[0]
    else:
        far = np.full(len(xc), np.inf)
    chosen: list[int] = []
    for _ in range(int(n_points)):
        score = np.where(allowed, far, -1.0)
        if not len(score) or score.max() < 0:
            break
        if np.isinf(score.max()):  # nothing sampled yet: start at the cell nearest the middle
            mid = xc[allowed].mean(axis=0)
            score = np.where(allowed, -np.hypot(*(xc - mid).T), -np.inf)
        i = int(np.argmax(score))
        chosen.append(i)
        d = np.hypot(*(xc - xc[i]).T)
        far = np.minimum(far, d)
        allowed &= d >= max(min_distance_m, 1e-9)
    _warn_short(grid.name, len(chosen), n_points, min_distance_m, setback)
    return xc[np.asarray(chosen, dtype=np.intp)], float(min_distance_m), setback

def plan_paddock(
    grid: PaddockGrid,
    samples: ArrayLike,
    model: VariogramModel,
    *,
    n_points: int,
    rates: ArrayLike | None = None,
    min_distance_m: float | None = None,
    avoid: ArrayLike | None = None,
    max_cells: int = MAX_CELLS,
    weights: ArrayLike | None = None,
    weighting: str = "given weights",
    boundary: shapely.Geometry | None = None,
    edge_setback_m: float = 0.0,
) -> PaddockPlan:
    """The sampling plan of one paddock.

    Parameters
    ----------
    grid
        The paddock grid; its mask (exclusions and buffers already out) holds
        the candidates.
    samples
        (n, 2) the samples the paddock's surface was kriged from.
    model
        That surface's variogram.
    n_points
        New points wanted.
    rates
        (height, width) prescribed rate (kg/ha; NaN counts as 0) to weight by;
        ``None`` for uniform weights. All zero: uniform, with a warning.
    min_distance_m
        Least distance between points and from existing samples; default
        :func:`default_min_distance` over the paddock's area.
    avoid
        (m, 2) further existing samples to keep away from (other variables').
    max_cells
        See :func:`candidate_cells`.
    weights, weighting
        (height, width) weights of the cells (NaN counts as 0), used instead of
        ``rates``, and what they are (recorded in the plan). All zero: uniform,
        with a warning.
    boundary, edge_setback_m
        The paddock's polygon (working CRS) and the least distance (m) a new
        point keeps from its boundary (outer ring and any holes). When no
        candidate lies that far in, the setback is lowered to half the depth of
        the innermost candidate, with a warning.
    """
    xd = as_points(samples, "sample")
    xc, index = candidate_cells(grid, max_cells=max_cells)
    label = weighting
    weighting = "uniform"
    w_all = np.ones(grid.n_cells)
    if weights is not None:
        r = np.nan_to_num(np.asarray(weights, dtype=np.float64)[grid.mask], nan=0.0)
        r = np.clip(r, 0.0, None)
        if r[index].sum() > 0:
            w_all, weighting = r, label
        else:
            warnings.warn(f"{grid.name}: every cell weighs 0 by {label}, so the sampling "
                          "plan weights every cell alike", DataWarning, stacklevel=2)
    elif rates is not None:
        r = np.nan_to_num(np.asarray(rates, dtype=np.float64)[grid.mask], nan=0.0)
        r = np.clip(r, 0.0, None)
        if r[index].sum() > 0:
            w_all, weighting = r, "prescribed rate"
        else:
            warnings.warn(f"{grid.name}: no rate is prescribed in this paddock, so the sampling "
                          "plan weights every cell alike", DataWarning, stacklevel=2)
    min_distance_m, keep_off, allowed, setback = _room(
        grid, xd, xc, n_points=n_points, min_distance_m=min_distance_m, avoid=avoid,
        boundary=boundary, edge_setback_m=edge_setback_m)
    chosen, _ = greedy_design(xd, xc, model, n_points=n_points, weights=w_all[index],
                              min_distance_m=min_distance_m, allowed=allowed)
    _warn_short(grid.name, len(chosen), n_points, min_distance_m, setback)
    pts = xc[chosen]
    x, y = grid.cell_centres()
    every = np.column_stack([x, y])
    zeros = np.zeros(len(xd))
    _, before = ordinary_kriging(xd, zeros, every, model)
    if len(pts):
        _, after = ordinary_kriging(np.vstack([xd, pts]), np.zeros(len(xd) + len(pts)), every,
                                    model)
    else:
        after = before
    _, at_points = ordinary_kriging(xd, zeros, pts, model) if len(pts) else (None, np.empty(0))
    wsum = w_all.sum()
    return PaddockPlan(
        paddock=grid.name,
        points=pts,
        kriging_sd_before=np.sqrt(at_points),
        mean_variance_before=float(before.mean()),
        mean_variance_after=float(after.mean()),
        weighted_variance_before=float((w_all * before).sum() / wsum),
        weighted_variance_after=float((w_all * after).sum() / wsum),
        weighting=weighting,
        min_distance_m=float(min_distance_m),
        n_candidates=len(xc),
        edge_setback_m=setback,
    )
