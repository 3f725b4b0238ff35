"""Tests of geosoil.model_choice: fit each candidate model, keep the sound one with the lowest
leave-one-out RMSE, and say why.

Fields with a known variogram are simulated exactly (``tests/fields.py``: Cholesky of the
model's covariance at the sample points, fixed seeds); the tolerances on what is recovered
from one field are loose and stated beside each check.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from geosoil.model_choice import msse_band, select_model
from geosoil.variogram import VariogramModel
from tests.fields import simulate


def test_select_model_reports_every_candidate_and_keeps_the_best() -> None:
    true = VariogramModel(name="spherical", nugget=0.05, psill=1.0, range=400.0)
    xy = np.random.default_rng(5).uniform(0, 1000, (150, 2))
    z = simulate(true, xy, 5)
    sel = select_model(xy, z, n_lags=10)
    assert [c.model.name for c in sel.candidates] == ["spherical", "exponential", "gaussian"]
    rmses = [c.cross_validation.rmse for c in sel.candidates]
    assert sel.model is sel.candidates[int(np.argmin(rmses))].model
    assert all(c.cross_validation.n == 150 for c in sel.candidates)
    # loose: the kept model's kriging variance is realistic (MSSE near 1; from one field)
    best = sel.candidates[int(np.argmin(rmses))].cross_validation
    assert 0.6 < best.msse < 1.6
    assert sel.empirical.counts.sum() > 0


def test_select_model_takes_matern_with_nu() -> None:
    xy = np.random.default_rng(8).uniform(0, 500, (60, 2))
    z = simulate(VariogramModel(name="gaussian", nugget=0.1, psill=1.0, range=300.0), xy, 8)
    sel = select_model(xy, z, candidates=("matern",), nu=2.5, n_lags=8)
    assert sel.model.name == "matern" and sel.model.nu == 2.5


def _noisy_field(seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Invented samples: a smooth field plus noise over 500 m x 500 m (property checks)."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 500, (60, 2))
    return xy, np.sin(xy[:, 0] / 90) + np.cos(xy[:, 1] / 120) + 0.3 * rng.normal(size=60)


def test_msse_band_is_one_to_two_widened_for_few_samples() -> None:
    # [derived] chi-square(n)/n has standard deviation sqrt(2/n): 3 of them at n = 8 is 1.5
    assert msse_band(200) == (0.5, 2.0)
    low, high = msse_band(8)
    assert high == pytest.approx(2.5) and low == pytest.approx(0.4)


@pytest.mark.parametrize("seed", [9, 38])
def test_selection_rejects_badly_calibrated_or_jittered_fits_and_says_why(seed) -> None:
    """Seed 9: the lowest-RMSE fit is a gaussian whose standardised errors are far from 1;
    seed 38: the gaussian's matrix needed an added nugget. A sound model is kept instead,
    the lowest RMSE of the sound ones, and the reason names both."""
    xy, z = _noisy_field(seed)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        sel = select_model(xy, z)
    gauss = next(c for c in sel.candidates if c.model.name == "gaussian")
    if seed == 9:
        assert gauss.cross_validation.rmse == min(c.cross_validation.rmse for c in sel.candidates)
    low, high = msse_band(len(z))
    assert gauss.rejected
    assert (gauss.cross_validation.jitter > 0
            or not low <= gauss.cross_validation.msse <= high)
    kept = sel.chosen
    assert kept.model.name != "gaussian" and not kept.rejected
    assert kept.cross_validation.jitter == 0 and low <= kept.cross_validation.msse <= high
    sound = [c for c in sel.candidates if not c.rejected]
    assert kept.cross_validation.rmse == min(c.cross_validation.rmse for c in sound)
    assert sel.reason.startswith(f"{kept.model.name} kept") and "gaussian" in sel.reason
    # the added nugget of a rejected fit is no warning of the run
    assert not [w for w in caught if "positive definite" in str(w.message)]
