"""Benchmark: how much more the sampling plan lowers the kriging variance than random and
regular-grid designs of the same size.

Run from the repository root::

    python benchmarks/bench_plan.py [--fields 5] [--points 10] [--random 20]

Invented fields: a 40 x 30-cell paddock (10 m cells) with an excluded block, a
few existing samples at random, a variogram, and a prescribed rate high on one
side (the weights). For each field it plans ``--points`` new samples with
:func:`geosoil.sampling.greedy_design` and draws ``--random`` random designs
(same size, same distance rule) and one regular-grid design (the cells nearest a
square grid, no distance rule); every design is
judged by the kriging engine (weighted mean ordinary-kriging variance). It
prints, per field and as a median, the ratio of the variance each design
removes to what the plan removes (below 1: the plan removes more). Nothing here
passes or fails.
"""

from __future__ import annotations

import argparse
import statistics

import numpy as np
import pyproj
from affine import Affine

from geosoil.grids import PaddockGrid
from geosoil.sampling import (
    candidate_cells,
    default_min_distance,
    greedy_design,
    random_design,
    regular_design,
    weighted_mean_variance,
)
from geosoil.variogram import VariogramModel

MODELS = (
    VariogramModel(name="spherical", nugget=0.05, psill=1.0, range=250.0),
    VariogramModel(name="exponential", nugget=0.1, psill=1.0, range=300.0),
    VariogramModel(name="gaussian", nugget=0.05, psill=1.0, range=200.0),
)


def field(seed: int) -> tuple[PaddockGrid, np.ndarray, np.ndarray, np.ndarray, VariogramModel]:
    rng = np.random.default_rng(seed)
    mask = np.ones((30, 40), dtype=bool)
    mask[10:18, 12:22] = False  # an exclusion with its buffer
    grid = PaddockGrid("bench", Affine(10, 0, 0, 0, -10, 300), 40, 30, pyproj.CRS(32755), mask)
    x, y = grid.cell_centres()
    pick = rng.choice(len(x), 12, replace=False)
    samples = np.column_stack([x[pick], y[pick]])
    cells, _ = candidate_cells(grid)
    edge = rng.uniform(100, 300)
    weights = np.where(cells[:, 0] > edge, 2000.0, 200.0)  # kg/ha: the spread side matters
    return grid, samples, cells, weights, MODELS[seed % len(MODELS)]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--fields", type=int, default=5)
    ap.add_argument("--points", type=int, default=10)
    ap.add_argument("--random", type=int, default=20)
    args = ap.parse_args()
    rand_ratios, grid_ratios = [], []
    print(f"{'field':>5} {'model':<12} {'plan cut %':>10} {'random/plan':>12} {'grid/plan':>10}")
    for seed in range(args.fields):
        grid, xd, cells, w, model = field(seed)
        area = grid.n_cells * 100.0
        dmin = default_min_distance(area, len(xd) + args.points)
        before = weighted_mean_variance(xd, cells, model, w)

        def cut(idx: np.ndarray, xd: np.ndarray = xd, cells: np.ndarray = cells,
                model: VariogramModel = model, w: np.ndarray = w,
                before: float = before) -> float:
            return before - weighted_mean_variance(np.vstack([xd, cells[idx]]), cells, model, w)

        chosen, _ = greedy_design(xd, cells, model, n_points=args.points, weights=w,
                                  min_distance_m=dmin)
        plan = cut(chosen)
        rng = np.random.default_rng(1000 + seed)
        rand = statistics.mean(
            cut(random_design(cells, xd, n_points=args.points, min_distance_m=dmin, rng=rng))
            for _ in range(args.random))
        regular = cut(regular_design(cells, n_points=args.points, area_m2=area))
        rand_ratios.append(rand / plan)
        grid_ratios.append(regular / plan)
        print(f"{seed:>5} {model.name:<12} {100 * plan / before:>10.1f} {rand / plan:>12.2f} "
              f"{regular / plan:>10.2f}")
    print(f"median ratio of variance removed, random / plan: {statistics.median(rand_ratios):.2f}; "
          f"regular grid / plan: {statistics.median(grid_ratios):.2f} (below 1: the plan removes "
          "more)")


if __name__ == "__main__":
    main()
