"""geosoil.sampling: the greedy kriging-variance design.

Checks: the error covariance it updates agrees with the kriging engine
(``ordinary_kriging``, itself held against pykrige and GSTools in test_kriging.py),
before and after the design; the points keep to the mask and the distances; and, as
a property on invented fields (invented data for a property, never an expected
figure), the design lowers the weighted mean kriging variance more than random
designs of the same size under the same distance rule.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pyproj
import pytest
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial.distance import cdist, pdist

from geosoil.errors import DataWarning, SettingsError
from geosoil.grids import PaddockGrid
from geosoil.kriging import ordinary_kriging
from geosoil.sampling import (
    _error_covariance,
    candidate_cells,
    greedy_design,
    limit_weights,
    plan_paddock,
    random_design,
    regular_design,
    split_samples,
    weighted_mean_variance,
)
from geosoil.variogram import VariogramModel

CELL = 10.0


def _grid(width: int = 40, height: int = 30, hole: bool = True) -> PaddockGrid:
    mask = np.ones((height, width), dtype=bool)
    if hole:  # an exclusion (with its buffer) is outside the mask
        mask[10:20, 15:25] = False
    return PaddockGrid("P", Affine(CELL, 0, 0, 0, -CELL, height * CELL), width, height,
                       pyproj.CRS(32755), mask)


def _samples(rng: np.random.Generator, n: int, grid: PaddockGrid) -> np.ndarray:
    x, y = grid.cell_centres()
    pick = rng.choice(len(x), n, replace=False)
    return np.column_stack([x[pick], y[pick]]) + rng.uniform(-3, 3, (n, 2))


MODELS = [
    VariogramModel(name="spherical", nugget=0.05, psill=1.0, range=250.0),
    VariogramModel(name="exponential", nugget=0.0, psill=2.0, range=300.0),
    VariogramModel(name="gaussian", nugget=0.1, psill=1.0, range=200.0),
]


@pytest.mark.parametrize("model", MODELS, ids=lambda m: m.name)
def test_error_covariance_diagonal_is_the_engines_variance(model: VariogramModel) -> None:
    rng = np.random.default_rng(1)
    grid = _grid()
    xd = _samples(rng, 15, grid)
    cells, _ = candidate_cells(grid, max_cells=300)
    sigma = _error_covariance(xd, cells, model)
    _, var = ordinary_kriging(xd, np.zeros(len(xd)), cells, model)
    np.testing.assert_allclose(np.diag(sigma), var, rtol=1e-8, atol=1e-10 * model.sill)
    np.testing.assert_allclose(sigma, sigma.T, atol=1e-10 * model.sill)


@pytest.mark.parametrize("model", MODELS, ids=lambda m: m.name)
def test_rank_one_updates_match_kriging_with_the_points_added(model: VariogramModel) -> None:
    rng = np.random.default_rng(2)
    grid = _grid()
    xd = _samples(rng, 12, grid)
    cells, _ = candidate_cells(grid, max_cells=400)
    chosen, after = greedy_design(xd, cells, model, n_points=6, min_distance_m=40)
    assert len(chosen) == 6
    both = np.vstack([xd, cells[chosen]])
    _, var = ordinary_kriging(both, np.zeros(len(both)), cells, model)
    np.testing.assert_allclose(after, var, rtol=1e-6, atol=1e-9 * model.sill)


def test_points_keep_to_the_mask_and_the_distances() -> None:
    rng = np.random.default_rng(3)
    grid = _grid()
    xd = _samples(rng, 10, grid)
    other = np.array([[205.0, 45.0], [355.0, 255.0]])  # samples of another variable
    rates = np.where(np.arange(grid.width)[None, :] > 20, 2000.0, 0.0) * np.ones((grid.height, 1))
    plan = plan_paddock(grid, xd, MODELS[0], n_points=8, rates=rates, min_distance_m=45.0,
                        avoid=other)
    assert len(plan.points) == 8
    assert plan.weighting == "prescribed rate"
    inv = ~grid.transform
    for x, y in plan.points:
        col, row = inv @ (x, y)
        assert grid.mask[int(row), int(col)]
    assert pdist(plan.points).min() >= 45.0
    assert cdist(plan.points, np.vstack([xd, other])).min() >= 45.0
    assert plan.mean_variance_after < plan.mean_variance_before
    assert plan.weighted_variance_after < plan.weighted_variance_before


def test_a_distance_too_large_gives_fewer_points_and_says_so() -> None:
    grid = _grid(width=10, height=10, hole=False)
    with pytest.warns(DataWarning, match="only .* of 5 new points"):
        plan = plan_paddock(grid, [[50.0, 50.0]], MODELS[0], n_points=5, min_distance_m=60.0)
    assert 1 <= len(plan.points) < 5


def test_no_rate_anywhere_weights_alike_and_says_so() -> None:
    grid = _grid(width=12, height=12, hole=False)
    with pytest.warns(DataWarning, match="weights every cell alike"):
        plan = plan_paddock(grid, [[20.0, 20.0], [90.0, 90.0]], MODELS[1], n_points=2,
                            rates=np.zeros((12, 12)))
    assert plan.weighting == "uniform"


def test_bad_requests_name_the_setting() -> None:
    with pytest.raises(SettingsError, match="points"):
        greedy_design([[0.0, 0.0]], [[10.0, 0.0]], MODELS[0], n_points=0)
    with pytest.raises(SettingsError, match="weights"):
        greedy_design([[0.0, 0.0]], [[10.0, 0.0]], MODELS[0], n_points=1, weights=[-1.0])


@settings(max_examples=6, deadline=None)
@given(seed=st.integers(0, 10_000), n_samples=st.integers(6, 25), n_points=st.integers(3, 10),
       model_no=st.integers(0, len(MODELS) - 1), weighted=st.booleans())
def test_greedy_beats_random_designs_of_the_same_size(seed: int, n_samples: int, n_points: int,
                                                      model_no: int, weighted: bool) -> None:
    """Property: the greedy design's weighted mean kriging variance (by the engine) is lower
    than that of each of 10 random designs of the same size and distance rule."""
    rng = np.random.default_rng(seed)
    model = MODELS[model_no]
    grid = _grid()
    xd = _samples(rng, n_samples, grid)
    cells, _ = candidate_cells(grid, max_cells=600)
    w = (np.where(cells[:, 0] > rng.uniform(50, 350), 3.0, 0.2) if weighted
         else np.ones(len(cells)))
    dmin = 25.0
    chosen, _ = greedy_design(xd, cells, model, n_points=n_points, weights=w, min_distance_m=dmin)
    assert len(chosen) == n_points
    greedy = weighted_mean_variance(np.vstack([xd, cells[chosen]]), cells, model, w)
    for _ in range(10):
        pick = random_design(cells, xd, n_points=n_points, min_distance_m=dmin, rng=rng)
        assert len(pick) == n_points
        rand = weighted_mean_variance(np.vstack([xd, cells[pick]]), cells, model, w)
        assert greedy < rand


def test_regular_design_has_the_size_asked_and_stays_on_candidates() -> None:
    grid = _grid()
    cells, _ = candidate_cells(grid)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        pick = regular_design(cells, n_points=9, area_m2=grid.n_cells * CELL * CELL)
    assert len(pick) == 9 and len(set(pick.tolist())) == 9


def test_limit_weights_follow_the_normal_tail() -> None:
    """2 * Phi(-1.959964) = 0.05 and 2 * Phi(-1) = 0.3173 (standard normal tables)."""
    w = limit_weights([6.0, 7.959964, 4.0, 6.0, 9.0, np.nan], [1, 1, 2, 0, 0, 1], 6.0)
    np.testing.assert_allclose(w[:3], [1.0, 0.05, 0.3173], atol=1e-4)
    assert w[3:].tolist() == [1.0, 0.0, 0.0]  # no error: 1 on the limit only; NaN weighs 0


def test_split_samples_by_largest_remainder() -> None:
    """Hamilton's method by hand: 7 samples over 50, 30, 20 ha: quotas 3.5, 2.1, 1.4 ->
    3, 2, 1 and the one left to the largest remainder (0.5): 4, 2, 1."""
    assert split_samples(7, {"a": 50.0, "b": 30.0, "c": 20.0}) == {"a": 4, "b": 2, "c": 1}
    assert split_samples(0, {"a": 1.0}) == {"a": 0}
    assert split_samples(3, {}) == {}


@given(st.integers(0, 500), st.lists(st.floats(0.1, 1e4), min_size=1, max_size=12))
def test_split_samples_adds_up_and_stays_within_a_sample_of_its_quota(total, areas) -> None:
    names = {f"p{i}": a for i, a in enumerate(areas)}
    got = split_samples(total, names)
    assert sum(got.values()) == total
    whole = sum(areas)
    for n, a in names.items():
        quota = total * a / whole
        assert math.floor(quota) - 1e-9 <= got[n] <= math.ceil(quota) + 1e-9


# ------------------------------------------------------------- which variable, no variogram


def _fake_farm(product_rates: dict, contributions: dict, kriged: tuple[str, ...],
               lime_method: str = "kamprath"):
    """A stand-in for a computed farm: one paddock 'P' with the given rates and surfaces."""
    import dataclasses
    from types import SimpleNamespace

    from geosoil.rates import RateSettings

    settings = RateSettings()
    settings = dataclasses.replace(settings, lime=dataclasses.replace(settings.lime,
                                                                       method=lime_method))
    rates = SimpleNamespace(product_rates=product_rates, contributions=contributions)
    cells = {v: np.ones(4) for v in (*kriged, "ecec", "esp")}
    paddock = SimpleNamespace(rates=rates, cells=cells)
    rate_settings = SimpleNamespace(for_paddock=lambda name: settings)
    prep = SimpleNamespace(project=SimpleNamespace(settings=SimpleNamespace(rates=rate_settings)))
    surfaces = {("P", v): SimpleNamespace(model=object()) for v in kriged}
    return SimpleNamespace(paddocks={"P": paddock}, prep=prep, surfaces=surfaces)


def test_plan_variable_is_the_one_driving_the_largest_product() -> None:
    """A trial farm's acid paddock: lime (Kamprath: exchangeable Al, Kamprath 1970) is its only
    product, so the plan refines Al, not Na (the first kriged variable, used before)."""
    from geosoil.plan import _choose_variable

    lime = np.array([0.0, 2000.0, 3000.0, 0.0])
    farm = _fake_farm({"lime": lime}, {("lime", "lime"): lime}, ("na", "ph_cacl2", "al"))
    var, why = _choose_variable(farm, "P", None, "rate")
    assert var == "al" and "lime rule" in why and "kamprath" in why
    gyp = np.array([9000.0, 0, 0, 0])
    farm = _fake_farm({"lime": lime, "gypsum": gyp},
                      {("lime", "lime"): lime, ("gypsum", "gypsum"): gyp},
                      ("ph_cacl2", "al", "na"))
    var, why = _choose_variable(farm, "P", None, "rate")
    assert var == "na" and "gypsum rule" in why  # gypsum 9 000 kg > lime 5 000 kg: ESP's Na
    # asked for: kept, and said so
    assert _choose_variable(farm, "P", "al", "rate") == ("al", "asked for (--variable)")
    # no rate at all: the fixed order, said plainly
    farm = _fake_farm({}, {}, ("ph_cacl2", "na"))
    var, why = _choose_variable(farm, "P", None, "rate")
    assert var == "na" and "no rate is prescribed" in why


def test_space_filling_points_are_maximin_and_apart() -> None:
    """A paddock with no variogram: each point is the candidate farthest from every sample and
    point before it (greedy maximin), checked by brute force with scipy's cdist."""
    from geosoil.sampling import space_filling_paddock

    grid = PaddockGrid("p", Affine(10, 0, 0, 0, -10, 200), 20, 20, pyproj.CRS(32755),
                       np.ones((20, 20), bool))
    samples = np.array([[15.0, 185.0], [25.0, 175.0]])
    pts, dist, setback = space_filling_paddock(grid, samples, n_points=4, min_distance_m=30.0)
    assert len(pts) == 4 and dist == 30.0 and setback == 0.0
    x, y = grid.cell_centres()
    cells = np.column_stack([x, y])
    taken = samples
    for p in pts:
        far = cdist(cells, taken).min(axis=1)
        assert cdist([p], taken).min() == pytest.approx(far.max())
        taken = np.vstack([taken, p])
    assert cdist(pts, pts)[np.triu_indices(4, 1)].min() >= 30.0
