"""Tests of geosoil.variogram (models, empirical variogram, fitting).

Outside references: pykrige's model functions (``pykrige.variogram_models``,
the parameterisation the module promises to share) and GSTools' Matérn model.
Fields with a known variogram are simulated exactly (Cholesky of the model's
covariance at the sample points, fixed seeds); the tolerances on what is
recovered from one field are loose and stated beside each check.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from geosoil.errors import InputError, SettingsError
from geosoil.settings import from_mapping
from geosoil.variogram import (
    MODELS,
    EmpiricalVariogram,
    VariogramModel,
    empirical,
    fit,
)
from tests.fields import simulate

pykrige_models = pytest.importorskip("pykrige.variogram_models")


# --------------------------------------------------------------------------- models


@pytest.mark.parametrize("name", ["spherical", "exponential", "gaussian"])
@pytest.mark.parametrize("nugget", [0.0, 0.3])
def test_semivariance_is_pykrige_model_function(name: str, nugget: float) -> None:
    # source: pykrige.variogram_models.<name>_variogram_model, m = [psill, range, nugget]
    m = VariogramModel(name=name, nugget=nugget, psill=2.5, range=120.0)
    h = np.linspace(0.01, 400.0, 500)
    reference = getattr(pykrige_models, f"{name}_variogram_model")([2.5, 120.0, nugget], h)
    np.testing.assert_allclose(m.semivariance(h), reference, rtol=1e-12, atol=1e-12)


def test_matern_half_is_exponential() -> None:
    # [derived] Matern nu = 1/2 is exp(-t); with rho(range) = exp(-3) it is exp(-3h/range)
    h = np.linspace(0.0, 500.0, 101)
    mat = VariogramModel(name="matern", nugget=0.1, psill=1.0, range=150.0, nu=0.5)
    exp = VariogramModel(name="exponential", nugget=0.1, psill=1.0, range=150.0)
    np.testing.assert_allclose(mat.covariance(h), exp.covariance(h), rtol=1e-13)


@pytest.mark.parametrize("nu", [0.5, 1.0, 1.5, 2.5, 4.0])
def test_matern_correlation_at_range_is_exp_minus_three(nu: float) -> None:
    # the module's documented Matern scaling: rho(range) = exp(-3)
    m = VariogramModel(name="matern", nugget=0.0, psill=1.0, range=80.0, nu=nu)
    assert float(m.correlation(80.0)) == pytest.approx(math.exp(-3.0), rel=1e-9)


@pytest.mark.parametrize("nu", [0.7, 1.5, 2.5])
def test_matern_matches_gstools(nu: float) -> None:
    # GSTools Matern: rho = 2^(1-nu)/Gamma(nu) (sqrt(nu) r/l)^nu K_nu(sqrt(nu) r/l); ours uses
    # t = s_nu h / range, so l = sqrt(nu) range / s_nu with s_nu from rho(range) = exp(-3)
    gs = pytest.importorskip("gstools")
    from geosoil.variogram import _matern_scale

    rng_m = 90.0
    ours = VariogramModel(name="matern", nugget=0.0, psill=1.0, range=rng_m, nu=nu)
    theirs = gs.Matern(dim=2, var=1.0, len_scale=math.sqrt(nu) * rng_m / _matern_scale(nu), nu=nu)
    h = np.linspace(0.0, 400.0, 200)
    np.testing.assert_allclose(ours.correlation(h), theirs.correlation(h), rtol=1e-9, atol=1e-14)


@given(
    name=st.sampled_from(["spherical", "exponential", "gaussian", "matern"]),
    nugget=st.floats(0.0, 10.0),
    psill=st.floats(1e-3, 10.0),
    rng_m=st.floats(1.0, 5000.0),
)
@settings(max_examples=60, deadline=None)
def test_model_properties(name: str, nugget: float, psill: float, rng_m: float) -> None:
    m = VariogramModel(name=name, nugget=nugget, psill=psill, range=rng_m,
                       nu=1.5 if name == "matern" else None)
    h = np.sort(np.r_[0.0, np.geomspace(1e-6, 10 * rng_m, 60)])
    c, g = m.covariance(h), m.semivariance(h)
    assert c[0] == pytest.approx(nugget + psill)  # C(0) is the sill
    assert g[0] == 0.0  # gamma(0) = 0
    np.testing.assert_allclose(c + g, m.sill, rtol=1e-12)  # gamma = sill - C
    assert np.all(np.diff(c[1:]) <= 1e-12 * m.sill)  # covariance does not increase
    assert g[1] == pytest.approx(nugget, abs=1e-4 * psill)  # gamma(0+) is the nugget
    assert np.all(c[1:] <= psill * (1 + 1e-12))


def test_correlation_sq_writes_in_place() -> None:
    m = VariogramModel(name="spherical", nugget=0.0, psill=1.0, range=10.0)
    d2 = np.array([0.0, 25.0, 400.0])
    out = m.correlation_sq(d2, out=d2)
    assert out is d2
    # [derived] spherical at h/a = 0.5: 1 - 0.75 + 0.0625 = 0.3125
    np.testing.assert_allclose(out, [1.0, 0.3125, 0.0])


@pytest.mark.parametrize(
    ("kwargs", "key"),
    [
        ({"name": "spherical", "nugget": -0.1, "psill": 1.0, "range": 10.0}, "nugget"),
        ({"name": "spherical", "nugget": 0.0, "psill": 0.0, "range": 10.0}, "psill"),
        ({"name": "spherical", "nugget": 0.0, "psill": 1.0, "range": 0.0}, "range"),
        ({"name": "spherical", "nugget": math.nan, "psill": 1.0, "range": 1.0}, "nugget"),
        ({"name": "sperical", "nugget": 0.0, "psill": 1.0, "range": 10.0}, "name"),
        ({"name": "matern", "nugget": 0.0, "psill": 1.0, "range": 10.0}, "nu"),
        ({"name": "matern", "nugget": 0.0, "psill": 1.0, "range": 10.0, "nu": 50.0}, "nu"),
        ({"name": "gaussian", "nugget": 0.0, "psill": 1.0, "range": 10.0, "nu": 1.5}, "nu"),
    ],
)
def test_invalid_models_name_the_field(kwargs: dict, key: str) -> None:
    with pytest.raises(SettingsError) as info:
        VariogramModel(**kwargs)
    assert info.value.key == key


def test_misspelt_model_name_suggests_the_right_one() -> None:
    with pytest.raises(SettingsError, match="did you mean 'spherical'"):
        VariogramModel(name="sperical", nugget=0.0, psill=1.0, range=10.0)


def test_model_from_a_project_table() -> None:
    m = from_mapping(
        VariogramModel, {"name": "exponential", "nugget": 0.1, "psill": 2, "range": 300},
        section="variogram",
    )
    assert (m.name, m.nugget, m.psill, m.range) == ("exponential", 0.1, 2.0, 300.0)
    with pytest.raises(SettingsError) as info:
        from_mapping(VariogramModel, {"name": "exponential", "nugget": -1, "psill": 1, "range": 3},
                     section="variogram")
    assert info.value.key == "variogram.nugget"


# --------------------------------------------------------------------------- empirical


def test_empirical_counts_every_pair_once() -> None:
    rng = np.random.default_rng(3)
    xy = rng.uniform(0, 100, (40, 2))
    z = rng.normal(size=40)
    ev = empirical(xy, z, n_lags=10, max_lag=1e9)
    assert ev.counts.sum() == 40 * 39 // 2  # [derived] n (n - 1) / 2 pairs
    # [derived] the pair-weighted mean of the classes is the mean over all pairs
    d = np.hypot(*(xy[:, None] - xy[None]).transpose(2, 0, 1))
    iu = np.triu_indices(40, 1)
    g = 0.5 * (z[:, None] - z[None]) ** 2
    assert np.sum(ev.gamma * ev.counts) / ev.counts.sum() == pytest.approx(g[iu].mean())
    assert np.sum(ev.lags * ev.counts) / ev.counts.sum() == pytest.approx(d[iu].mean())


def test_empirical_default_max_lag_is_half_the_largest_distance() -> None:
    xy = np.array([[0.0, 0.0], [30.0, 0.0], [60.0, 0.0], [100.0, 0.0]])
    ev = empirical(xy, [1.0, 2.0, 3.0, 5.0], n_lags=5)
    # [derived] largest distance 100 -> pairs up to 50 m: 30, 30, 40 (not 60, 70, 100)
    assert ev.counts.sum() == 3
    assert ev.lags.max() <= 50.0


def test_empirical_of_a_constant_is_zero() -> None:
    xy = np.random.default_rng(0).uniform(0, 10, (12, 2))
    assert np.all(empirical(xy, np.full(12, 4.2), n_lags=4).gamma == 0.0)


def test_empirical_refuses_bad_input() -> None:
    with pytest.raises(InputError, match="at least 3 samples"):
        empirical([[0, 0], [1, 1]], [1.0, 2.0])
    with pytest.raises(InputError, match="missing or infinite"):
        empirical([[0, 0], [1, 1], [2, 2]], [1.0, np.nan, 2.0])
    with pytest.raises(SettingsError) as info:
        empirical([[0, 0], [0, 0], [0, 0]], [1.0, 2.0, 3.0])
    assert info.value.key == "max_lag"


# --------------------------------------------------------------------------- fitting


@pytest.mark.parametrize("weighting", ["pairs", "cressie"])
@pytest.mark.parametrize(
    "true",
    [
        VariogramModel(name="spherical", nugget=0.2, psill=1.0, range=300.0),
        VariogramModel(name="exponential", nugget=0.0, psill=3.0, range=250.0),
        VariogramModel(name="gaussian", nugget=0.5, psill=2.0, range=200.0),
        VariogramModel(name="matern", nugget=0.1, psill=1.0, range=220.0, nu=1.5),
    ],
    ids=lambda m: m.name,
)
def test_fit_recovers_an_exact_model(true: VariogramModel, weighting: str) -> None:
    # [derived] noise-free semivariances of a model are fitted by that model
    lags = np.linspace(20.0, 500.0, 14)
    emp = EmpiricalVariogram(lags, true.semivariance(lags), np.arange(50, 64))
    r = fit(emp, model=true.name, nu=true.nu, weighting=weighting)
    assert r.model.nugget == pytest.approx(true.nugget, abs=1e-4 * true.sill)
    assert r.model.psill == pytest.approx(true.psill, rel=1e-4)
    assert r.model.range == pytest.approx(true.range, rel=1e-4)
    assert r.rmse < 1e-5 * true.sill
    assert ("Cressie" in r.weights) == (weighting == "cressie")


def test_fit_refuses_too_few_lags_and_bad_names() -> None:
    emp = EmpiricalVariogram(np.array([1.0, 2.0]), np.array([1.0, 2.0]), np.array([5, 5]))
    with pytest.raises(InputError, match="at least 3"):
        fit(emp, model="spherical")
    emp3 = EmpiricalVariogram(np.array([1.0, 2.0, 3.0]), np.array([1.0, 2.0, 2.0]),
                              np.array([5, 5, 5]))
    with pytest.raises(SettingsError) as info:
        fit(emp3, model="circular")
    assert info.value.key == "name"
    with pytest.raises(SettingsError) as info:
        fit(emp3, model="matern")
    assert info.value.key == "nu"
    with pytest.raises(SettingsError) as info:
        fit(emp3, model="spherical", weighting="equal")
    assert info.value.key == "weighting"


@pytest.mark.slow
def test_fit_on_simulated_fields_finds_the_range_and_a_realistic_variance() -> None:
    # 12 fields of 400 points on a 1000 m square with an exponential variogram of practical
    # range 200 m (simulated exactly, seeds 10-21). One field's variogram wanders a lot, so
    # the checks are loose and stated: the median fitted range within 0.6x-1.6x the truth,
    # and leave-one-out MSSE within 0.6-1.6 for the fitted and 0.7-1.3 for the true model
    # (MSSE near 1 means the kriging variance matches the errors).
    from geosoil.kriging import loo_cross_validation

    true = VariogramModel(name="exponential", nugget=0.1, psill=1.0, range=200.0)
    ranges = []
    for seed in range(10, 22):
        xy = np.random.default_rng(seed).uniform(0, 1000, (400, 2))
        z = simulate(true, xy, seed)
        r = fit(empirical(xy, z, n_lags=12, max_lag=500.0), model="exponential")
        ranges.append(r.model.range)
        assert 0.6 < loo_cross_validation(xy, z, r.model).msse < 1.6
        assert 0.7 < loo_cross_validation(xy, z, true).msse < 1.3
    assert 0.6 * true.range < float(np.median(ranges)) < 1.6 * true.range


def test_models_constant_lists_the_four() -> None:
    assert MODELS == ("spherical", "exponential", "gaussian", "matern")


@pytest.mark.parametrize("model", ["spherical", "exponential", "gaussian"])
@pytest.mark.parametrize("weighting", ["pairs", "cressie"])
def test_fit_jacobian_matches_central_differences(monkeypatch, model, weighting) -> None:
    """The closed-form Jacobian handed to scipy's least_squares against central finite
    differences of the residuals, at the start points and at the optimum [derived]."""
    import scipy.optimize  # the fit imports it when it runs

    seen = []
    real = scipy.optimize.least_squares

    def spy(fun, x0, **kw):
        res = real(fun, x0, **kw)
        seen.append((fun, kw["jac"], x0, res.x, kw["bounds"]))
        return res

    monkeypatch.setattr(scipy.optimize, "least_squares", spy)
    true = VariogramModel(name=model, nugget=0.2, psill=1.0, range=300.0)
    lags = np.linspace(25.0, 475.0, 10)
    noise = 1.0 + 0.03 * np.sin(np.arange(10.0))
    fit(EmpiricalVariogram(lags, true.semivariance(lags) * noise, np.arange(50, 150, 10)),
        model=model, weighting=weighting)
    assert len(seen) == 3
    for fun, jac, x0, xopt, (lo, hi) in seen:
        for x in (np.asarray(x0, float), np.clip(xopt, lo + 1e-6, hi - 1e-6)):
            x = np.maximum(x, [1e-3, 1e-3, 1e-3])  # away from the nugget's zero cut-off
            h = 1e-6 * np.maximum(np.abs(x), 1e-3)
            num = np.column_stack([(fun(x + h[j] * np.eye(3)[j]) - fun(x - h[j] * np.eye(3)[j]))
                                   / (2 * h[j]) for j in range(3)])
            # (atol: the spherical model has a kink at its range, where a lag may sit)
            assert np.allclose(jac(x), num, rtol=1e-5, atol=1e-6)
