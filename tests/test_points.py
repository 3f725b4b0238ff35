"""geosoil.points.spread_subset: the samples a variogram is fitted on above the ceiling.

Properties only (the points are invented): the subset is distinct, seeded, as large as
asked, and spread over the area rather than following where samples are dense.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial import cKDTree

from geosoil.points import spread_subset


@settings(max_examples=60, deadline=None)
@given(n=st.integers(1, 400), k=st.integers(1, 500), seed=st.integers(0, 2**31))
def test_a_subset_is_distinct_sorted_seeded_and_as_large_as_asked(n: int, k: int,
                                                                  seed: int) -> None:
    xy = np.random.default_rng(seed).uniform(0, 500, (n, 2))
    got = spread_subset(xy, k)
    assert len(got) == min(n, k) and len(set(got.tolist())) == len(got)
    assert (np.diff(got) > 0).all() and got.min() >= 0 and got.max() < n
    assert np.array_equal(got, spread_subset(xy, k))  # the same each call


def test_every_point_has_a_chosen_one_within_its_block() -> None:
    # 10 000 points on a 1 m grid, 100 kept: blocks of 10 m, one point kept in each, so
    # every point is within a block's diagonal (14.1 m) of a kept one (cKDTree as oracle)
    g = np.arange(100.0)
    xy = np.column_stack([np.repeat(g, 100), np.tile(g, 100)])
    got = spread_subset(xy, 100)
    far, _ = cKDTree(xy[got]).query(xy)
    assert far.max() <= 10 * np.sqrt(2) + 1e-9


def test_a_dense_cluster_gets_its_blocks_share_not_its_samples_share() -> None:
    rng = np.random.default_rng(2)
    cluster = rng.uniform(0, 50, (9_000, 2))  # 90 % of the samples on 1/4 of one side
    spread = rng.uniform(0, 1000, (1_000, 2))
    got = spread_subset(np.vstack([cluster, spread]), 400)
    # the cluster covers 1/400 of the square: about one of the 400 blocks (a few at most)
    assert (got < 9_000).sum() < 40


def test_another_seed_draws_another_subset() -> None:
    xy = np.random.default_rng(3).uniform(0, 100, (500, 2))
    assert not np.array_equal(spread_subset(xy, 50, seed=1), spread_subset(xy, 50, seed=2))


@pytest.mark.parametrize("xy", [np.zeros((30, 2)),
                                np.column_stack([np.arange(30.0), np.zeros(30)])],
                         ids=["one place", "one line"])
def test_points_at_one_place_or_on_one_line_give_a_subset(xy: np.ndarray) -> None:
    got = spread_subset(xy, 7)
    assert len(got) == 7 and len(set(got.tolist())) == 7


def test_k_below_one_is_refused() -> None:
    with pytest.raises(ValueError, match="at least 1"):
        spread_subset(np.zeros((3, 2)), 0)
