"""Tests of geosoil.kriging: ordinary kriging, cross-validation, IDW, back-transform.

Outside references:

* Isaaks & Srivastava (1989), An Introduction to Applied Geostatistics, ch. 12:
  the seven-sample example and its variants, as listed in
  docs/SOURCES.md ("values as reproduced by several public
  implementations"). Tolerances follow the printed precision.
* pykrige ``OrdinaryKriging`` (backends "C" and "vectorized", and
  ``n_closest_points``) and GSTools ``krige.Ordinary`` with the same variogram:
  agreement to 1e-6 relative on a GSTools random field.
* Dubrule (1983), Math. Geol. 15:687-699: the closed-form leave-one-out,
  checked here against refitting n times.

Everything else is a property: [derived] from the kriging equations.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from geosoil.errors import InputError, InterpolationWarning, SettingsError
from geosoil.kriging import (
    idw,
    kriging_weights,
    lognormal_backtransform,
    loo_cross_validation,
    ordinary_kriging,
)
from geosoil.variogram import VariogramModel

gs = pytest.importorskip("gstools")
pykrige_ok = pytest.importorskip("pykrige.ok")

# Isaaks & Srivastava (1989), ch. 12 (docs/SOURCES.md): samples (E, N) and values, target.
IS_XY = np.array(
    [(61, 139), (63, 140), (64, 129), (68, 128), (71, 140), (73, 141), (75, 128)], dtype=float
)
IS_Z = np.array([477, 696, 227, 646, 606, 791, 783], dtype=float)
IS_TARGET = np.array([[65.0, 137.0]])
IS_WEIGHTS = [0.1729, 0.3178, 0.1287, 0.0864, 0.1511, 0.0572, 0.0858]


def exponential_cov(sill: float, a: float, nugget: float = 0.0) -> VariogramModel:
    """C(h) = sill exp(-a h) (+ nugget): our exponential with practical range 3 / a."""
    return VariogramModel(name="exponential", nugget=nugget, psill=sill, range=3.0 / a)


# --------------------------------------------------------------------------- Isaaks & Srivastava


def test_isaaks_srivastava_ch12_base_case() -> None:
    # Isaaks & Srivastava (1989) ch. 12: C(h) = 10 exp(-0.3 h) -> 592.73, variance 8.956
    model = exponential_cov(10.0, 0.3)
    est, var = ordinary_kriging(IS_XY, IS_Z, IS_TARGET, model)
    assert est[0] == pytest.approx(592.73, abs=0.005)
    assert var[0] == pytest.approx(8.956, abs=0.0005)
    w, _ = kriging_weights(IS_XY, IS_TARGET[0], model)
    np.testing.assert_allclose(w, IS_WEIGHTS, atol=5e-5)
    assert float(w @ IS_Z) == pytest.approx(est[0], rel=1e-12)  # [derived] estimate = w.z


@pytest.mark.parametrize(
    ("model", "estimate", "variance", "variance_tol"),
    [
        # Isaaks & Srivastava (1989) ch. 12 variants (docs/SOURCES.md), printed to 0 / 2 decimals
        (exponential_cov(20.0, 0.3), 593.0, 17.91, 0.005),
        (VariogramModel(name="gaussian", nugget=0.0, psill=10.0,
                        range=7.0 / (4.0 * math.sqrt(0.03))), 559.0, 4.78, 0.005),
        (exponential_cov(5.0, 0.3, nugget=5.0), 597.0, 10.31, 0.005),
        (exponential_cov(10.0, 0.15), 572.0, 5.76, 0.005),
    ],
    ids=["sill-20", "gaussian", "nugget-5", "range-doubled"],
)
def test_isaaks_srivastava_ch12_variants(
    model: VariogramModel, estimate: float, variance: float, variance_tol: float
) -> None:
    est, var = ordinary_kriging(IS_XY, IS_Z, IS_TARGET, model)
    assert est[0] == pytest.approx(estimate, abs=0.5)
    assert var[0] == pytest.approx(variance, abs=variance_tol)


# --------------------------------------------------------------------------- properties


def random_case(seed: int, n: int = 40, m: int = 300):
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 1000, (n, 2)) + [400_000.0, 6_100_000.0]
    z = rng.normal(size=n) + 5.0
    target = rng.uniform(0, 1000, (m, 2)) + [400_000.0, 6_100_000.0]
    return xy, z, target


@given(
    seed=st.integers(0, 10_000),
    name=st.sampled_from(["spherical", "exponential", "gaussian"]),
    nugget=st.floats(0.0, 1.0),
    factor=st.floats(0.1, 50.0),
)
@settings(max_examples=25, deadline=None)
def test_scaling_the_sill_scales_only_the_variance(
    seed: int, name: str, nugget: float, factor: float
) -> None:
    # [derived] C -> f C leaves the weights and the estimate and multiplies the variance by f
    xy, z, target = random_case(seed, n=25, m=50)
    base = VariogramModel(name=name, nugget=nugget + 0.05, psill=1.0, range=400.0)
    scaled = VariogramModel(name=name, nugget=(nugget + 0.05) * factor, psill=factor, range=400.0)
    e1, v1 = ordinary_kriging(xy, z, target, base)
    e2, v2 = ordinary_kriging(xy, z, target, scaled)
    np.testing.assert_allclose(e2, e1, rtol=1e-9)
    np.testing.assert_allclose(v2, factor * v1, rtol=1e-8)


@pytest.mark.parametrize("name", ["spherical", "exponential", "gaussian", "matern"])
def test_zero_nugget_reproduces_the_samples(name: str) -> None:
    # [derived] kriging is an exact interpolator without nugget: z at the samples, variance 0
    xy, z, _ = random_case(1, n=30)
    model = VariogramModel(name=name, nugget=0.0, psill=2.0, range=300.0,
                           nu=1.0 if name == "matern" else None)
    est, var = ordinary_kriging(xy, z, xy, model)
    np.testing.assert_allclose(est, z, rtol=1e-9)
    np.testing.assert_allclose(var, 0.0, atol=1e-9 * model.sill)


def test_far_from_every_sample_the_estimate_is_the_gls_mean() -> None:
    # [derived] beyond the spherical range every covariance is 0: the weights are the
    # generalised least-squares weights C^-1 1 / (1' C^-1 1) and the variance is
    # sill + 1 / (1' C^-1 1)
    xy, z, _ = random_case(2, n=20)
    model = VariogramModel(name="spherical", nugget=0.2, psill=1.0, range=300.0)
    far = xy.mean(axis=0) + [10_000.0, 0.0]
    est, var = ordinary_kriging(xy, z, far[None, :], model)
    d = np.hypot(*(xy[:, None] - xy[None]).transpose(2, 0, 1))
    cinv = np.linalg.inv(model.covariance(d))
    ones = np.ones(len(z))
    s = ones @ cinv @ ones
    assert est[0] == pytest.approx((ones @ cinv @ z) / s, rel=1e-10)
    assert var[0] == pytest.approx(model.sill + 1.0 / s, rel=1e-10)


def test_lagrange_multiplier_closes_the_variogram_form() -> None:
    # [derived] variogram form: variance = sum_i w_i gamma(x_i, x0) + psi, weights sum to 1
    xy, z, target = random_case(3, n=15, m=5)
    model = VariogramModel(name="spherical", nugget=0.3, psill=1.0, range=500.0)
    est, var, psi = ordinary_kriging(xy, z, target, model, return_lagrange=True)
    for t in range(len(target)):
        w, psi_t = kriging_weights(xy, target[t], model)
        gamma0 = model.semivariance(np.hypot(*(xy - target[t]).T))
        assert w.sum() == pytest.approx(1.0, abs=1e-12)
        assert psi_t == pytest.approx(psi[t], rel=1e-9, abs=1e-12)
        assert float(w @ gamma0) + psi_t == pytest.approx(var[t], rel=1e-9)
        assert float(w @ z) == pytest.approx(est[t], rel=1e-12)


def test_blocks_threads_and_grid_tables_do_not_change_the_result() -> None:
    # the same targets kriged as one block, in many small blocks on 2 threads, and in chunks
    # under 64 targets (no per-row tables) must give the same numbers
    rng = np.random.default_rng(4)
    xy = rng.uniform(0, 500, (60, 2))
    z = rng.normal(size=60)
    gx, gy = np.meshgrid(np.arange(2.5, 500, 5.0), np.arange(497.5, 0, -5.0))
    target = np.column_stack([gx.ravel(), gy.ravel()])
    for name in ("exponential", "gaussian", "spherical"):
        model = VariogramModel(name=name, nugget=0.1, psill=1.0, range=250.0)
        e1, v1 = ordinary_kriging(xy, z, target, model, block_cells=len(target), workers=1)
        e2, v2 = ordinary_kriging(xy, z, target, model, block_cells=97, workers=2)
        e3 = np.concatenate([
            ordinary_kriging(xy, z, target[i : i + 50], model)[0] for i in range(0, 2000, 50)
        ])
        np.testing.assert_allclose(e2, e1, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(v2, v1, rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(e3, e1[:2000], rtol=1e-11, atol=1e-11)


# --------------------------------------------------------------------------- pykrige, GSTools


def srf_case(model: VariogramModel, *, n: int = 120, m: int = 2000, seed: int = 7):
    """Samples of a GSTools random field, and random targets (none on a sample)."""
    rng = np.random.default_rng(seed)
    xy = rng.uniform(0, 1000, (n, 2))
    target = rng.uniform(0, 1000, (m, 2))
    field = gs.SRF(gs.Exponential(dim=2, var=1.0, len_scale=150.0), seed=seed)
    z = field((xy[:, 0], xy[:, 1])) + 3.0
    return xy, z, target


def pykrige_model(model: VariogramModel, xy, z, *, exact: bool = True):
    return pykrige_ok.OrdinaryKriging(
        xy[:, 0], xy[:, 1], z, variogram_model=model.name, exact_values=exact,
        variogram_parameters={"psill": model.psill, "range": model.range, "nugget": model.nugget},
    )


def gstools_model(model: VariogramModel):
    """The GSTools covariance model equal to ``model`` (see geosoil.variogram's table)."""
    if model.name == "exponential":
        return gs.Exponential(dim=2, var=model.psill, len_scale=model.range / 3.0,
                              nugget=model.nugget)
    if model.name == "spherical":
        return gs.Spherical(dim=2, var=model.psill, len_scale=model.range, nugget=model.nugget)
    if model.name == "gaussian":  # exp(-(h/l)^2) with rescale 1 and l = 4 range / 7
        return gs.Gaussian(dim=2, var=model.psill, len_scale=4.0 * model.range / 7.0,
                           nugget=model.nugget, rescale=1.0)
    from geosoil.variogram import _matern_scale

    return gs.Matern(dim=2, var=model.psill, nu=model.nu, nugget=model.nugget,
                     len_scale=math.sqrt(model.nu) * model.range / _matern_scale(model.nu))


def assert_close(ours, theirs, sill: float) -> None:
    # 1e-6 relative; an absolute floor of 1e-9 x sill for variances near 0 next to samples,
    # where every implementation subtracts nearly equal numbers
    np.testing.assert_allclose(ours, theirs, rtol=1e-6, atol=1e-9 * sill)


CASES = [
    VariogramModel(name="exponential", nugget=0.1, psill=1.0, range=450.0),
    VariogramModel(name="spherical", nugget=0.0, psill=1.0, range=400.0),
    VariogramModel(name="gaussian", nugget=0.05, psill=1.0, range=300.0),
]


@pytest.mark.parametrize("model", CASES, ids=lambda m: m.name)
@pytest.mark.parametrize("backend", ["C", "vectorized"])
def test_global_kriging_agrees_with_pykrige(model: VariogramModel, backend: str) -> None:
    # source: pykrige OrdinaryKriging, same variogram parameters; 1e-6 relative
    xy, z, target = srf_case(model)
    est, var = ordinary_kriging(xy, z, target, model)
    pe, pv = pykrige_model(model, xy, z).execute("points", target[:, 0], target[:, 1],
                                                 backend=backend)
    assert_close(est, pe, model.sill)
    assert_close(var, pv, model.sill)


@pytest.mark.parametrize(
    "model",
    [*CASES, VariogramModel(name="matern", nugget=0.1, psill=1.0, range=350.0, nu=1.5),
     VariogramModel(name="matern", nugget=0.1, psill=1.0, range=350.0, nu=1.2)],
    ids=lambda m: f"{m.name}-{m.nu}",
)
def test_global_kriging_agrees_with_gstools(model: VariogramModel) -> None:
    # source: GSTools krige.Ordinary with the equivalent covariance model; 1e-6 relative
    xy, z, target = srf_case(model)
    est, var = ordinary_kriging(xy, z, target, model)
    krige = gs.krige.Ordinary(gstools_model(model), cond_pos=(xy[:, 0], xy[:, 1]), cond_val=z,
                              exact=True, pseudo_inv=False)
    ge, gv = krige((target[:, 0], target[:, 1]), return_var=True)
    assert_close(est, ge, model.sill)
    assert_close(var, gv, model.sill)


def test_targets_on_samples_follow_pykrige_and_gstools_in_both_modes() -> None:
    # with a nugget, exact=True gives the sample and variance 0 (pykrige exact_values=True,
    # GSTools exact=True); exact=False smooths (pykrige exact_values=False, GSTools exact=False)
    model = VariogramModel(name="exponential", nugget=0.3, psill=1.0, range=400.0)
    xy, z, target = srf_case(model, n=50, m=30)
    target = np.vstack([target, xy[:10]])
    for exact in (True, False):
        est, var = ordinary_kriging(xy, z, target, model, exact=exact)
        pe, pv = pykrige_model(model, xy, z, exact=exact).execute(
            "points", target[:, 0], target[:, 1], backend="vectorized")
        krige = gs.krige.Ordinary(gstools_model(model), cond_pos=(xy[:, 0], xy[:, 1]),
                                  cond_val=z, exact=exact, pseudo_inv=False)
        ge, gv = krige((target[:, 0], target[:, 1]), return_var=True)
        for theirs_e, theirs_v in ((pe, pv), (ge, gv)):
            assert_close(est, theirs_e, model.sill)
            assert_close(var, theirs_v, model.sill)
        if exact:
            np.testing.assert_allclose(est[-10:], z[:10], rtol=1e-10)
            np.testing.assert_allclose(var[-10:], 0.0, atol=1e-9)
        else:
            assert np.all(var[-10:] > 0.01 * model.nugget)


@pytest.mark.parametrize("model", CASES[:2], ids=lambda m: m.name)
def test_local_mode_with_tile_zero_equals_pykrige_n_closest_points(model: VariogramModel) -> None:
    # source: pykrige OrdinaryKriging.execute(..., n_closest_points=12); 1e-6 relative
    xy, z, target = srf_case(model, m=600)
    est, var = ordinary_kriging(xy, z, target, model, neighbours=12, tile_m=0.0)
    pe, pv = pykrige_model(model, xy, z).execute(
        "points", target[:, 0], target[:, 1], backend="C", n_closest_points=12)
    assert_close(est, pe, model.sill)
    assert_close(var, pv, model.sill)


def test_local_variance_is_never_below_the_global_one() -> None:
    # [derived] global ordinary kriging minimises the error variance over all weights that sum
    # to 1; a neighbourhood only restricts the weights
    model = VariogramModel(name="spherical", nugget=0.1, psill=1.0, range=300.0)
    xy, z, target = srf_case(model, m=3000)
    _, var = ordinary_kriging(xy, z, target, model)
    for tile in (0.0, None, 80.0):
        _, var_l = ordinary_kriging(xy, z, target, model, neighbours=16, tile_m=tile)
        assert np.all(var_l >= var - 1e-10)
    est_all, var_all = ordinary_kriging(xy, z, target, model, neighbours=len(z))
    est, var = ordinary_kriging(xy, z, target, model)
    np.testing.assert_array_equal(est_all, est)


# --------------------------------------------------------------------------- cross-validation


@pytest.mark.parametrize(
    "model",
    [VariogramModel(name="exponential", nugget=0.2, psill=1.0, range=300.0),
     VariogramModel(name="spherical", nugget=0.0, psill=2.0, range=500.0)],
    ids=lambda m: m.name,
)
def test_closed_form_leave_one_out_equals_refitting(model: VariogramModel) -> None:
    # Dubrule (1983): closed form == kriging each sample from the other n - 1
    xy, z, _ = random_case(9, n=35)
    cv = loo_cross_validation(xy, z, model)
    errors, variances = [], []
    for i in range(len(z)):
        keep = np.arange(len(z)) != i
        e, v = ordinary_kriging(xy[keep], z[keep], xy[i : i + 1], model)
        errors.append(e[0] - z[i])
        variances.append(v[0])
    np.testing.assert_allclose(cv.errors, errors, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(cv.variance, variances, rtol=1e-8)
    np.testing.assert_allclose(cv.standardised_errors, cv.errors / np.sqrt(cv.variance))
    assert cv.rmse == pytest.approx(math.sqrt(np.mean(np.square(errors))))
    assert cv.mean_error == pytest.approx(np.mean(errors))
    assert cv.msse == pytest.approx(np.mean(cv.standardised_errors**2))
    assert cv.n == 35


def test_leave_one_out_needs_three_samples() -> None:
    model = VariogramModel(name="exponential", nugget=0.0, psill=1.0, range=10.0)
    with pytest.raises(InputError, match="at least 3"):
        loo_cross_validation([[0, 0], [1, 0]], [1.0, 2.0], model)


# --------------------------------------------------------------------------- IDW, back-transform


def test_idw_by_hand() -> None:
    # [derived] power 2 at x = 2.5 between samples at 0 (value 1) and 10 (value 3):
    # weights 1/2.5^2 and 1/7.5^2 -> (1 * 9 + 3 * 1) / 10 = 1.2
    est = idw([[0.0, 0.0], [10.0, 0.0]], [1.0, 3.0], [[2.5, 0.0], [10.0, 0.0], [5.0, 0.0]])
    np.testing.assert_allclose(est, [1.2, 3.0, 2.0])
    # [derived] power 1: weights 1/2.5 and 1/7.5 -> (3 + 3) / 4 = 1.5
    assert idw([[0.0, 0.0], [10.0, 0.0]], [1.0, 3.0], [[2.5, 0.0]], power=1.0)[0] == 1.5


@given(seed=st.integers(0, 1000), power=st.floats(0.5, 6.0))
@settings(max_examples=30, deadline=None)
def test_idw_stays_within_the_sample_range(seed: int, power: float) -> None:
    xy, z, target = random_case(seed, n=10, m=40)
    est = idw(xy, z, target, power=power, block_cells=7)
    assert np.all(est >= z.min() - 1e-12) and np.all(est <= z.max() + 1e-12)


def test_idw_holds_fewer_targets_at_once_when_samples_are_many(monkeypatch) -> None:  # noqa: ANN001
    import geosoil.kriging as kriging_mod

    xy, z, target = random_case(4, n=50, m=300)
    whole = idw(xy, z, target)
    shapes: list[tuple[int, ...]] = []
    real = kriging_mod._pair_sq

    def spy(a, b):  # noqa: ANN001, ANN202
        shapes.append((len(a), len(b)))
        return real(a, b)

    monkeypatch.setattr(kriging_mod, "_pair_sq", spy)
    monkeypatch.setattr(kriging_mod, "IDW_BLOCK_ENTRIES", 120)  # 2 targets x 50 samples a block
    np.testing.assert_allclose(idw(xy, z, target), whole, rtol=1e-12)
    assert len(shapes) == 150 and max(a * b for a, b in shapes) <= 120


def test_idw_refuses_a_bad_power() -> None:
    with pytest.raises(SettingsError) as info:
        idw([[0, 0]], [1.0], [[1, 1]], power=0.0)
    assert info.value.key == "power"


def test_lognormal_backtransform_at_a_sample_is_the_sample() -> None:
    # [derived] zero nugget, target on a sample: weight 1 there, variance 0 and psi 0, so the
    # back-transform gives exp(log z) = z exactly
    xy, z, _ = random_case(5, n=12)
    z = np.exp(z)
    model = VariogramModel(name="spherical", nugget=0.0, psill=0.5, range=600.0)
    est_l, var_l, psi = ordinary_kriging(xy, np.log(z), xy[:3], model, return_lagrange=True)
    est, var = lognormal_backtransform(est_l, var_l, psi)
    np.testing.assert_allclose(est, z[:3], rtol=1e-9)
    np.testing.assert_allclose(var, 0.0, atol=1e-9 * z.max() ** 2)


def test_lognormal_backtransform_formula() -> None:
    # the documented formula: exp(y + s2/2 - psi), variance est^2 (exp(s2) - 1)
    est, var = lognormal_backtransform(np.array([1.0]), np.array([0.5]), np.array([0.1]))
    assert est[0] == pytest.approx(math.exp(1.0 + 0.25 - 0.1))
    assert var[0] == pytest.approx(math.exp(2 * 1.15) * (math.exp(0.5) - 1.0))


# --------------------------------------------------------------------------- bad input


def test_bad_input_is_refused_clearly() -> None:
    model = VariogramModel(name="exponential", nugget=0.0, psill=1.0, range=10.0)
    with pytest.raises(InputError, match="missing or infinite value"):
        ordinary_kriging([[0, 0], [1, 1]], [1.0, np.nan], [[0, 1]], model)
    with pytest.raises(InputError, match=r"\(n, 2\)"):
        ordinary_kriging([0, 0, 1], [1.0], [[0, 1]], model)
    with pytest.raises(InputError, match="one value per sample"):
        ordinary_kriging([[0, 0], [1, 1]], [1.0], [[0, 1]], model)
    with pytest.raises(InputError, match="at least 1 sample needed"):
        ordinary_kriging(np.empty((0, 2)), [], [[0, 1]], model)
    with pytest.raises(SettingsError) as info:
        ordinary_kriging([[0, 0], [1, 1], [2, 2]], [1.0, 2.0, 3.0], [[0, 1]], model, neighbours=1)
    assert info.value.key == "neighbours"
    with pytest.raises(SettingsError) as info:
        ordinary_kriging([[0, 0], [1, 1], [2, 2]], [1.0, 2.0, 3.0], [[0, 1]], model,
                         neighbours=2, tile_m=-1.0)
    assert info.value.key == "tile_m"
    est, var = ordinary_kriging([[0, 0]], [4.0], np.empty((0, 2)), model)
    assert est.shape == var.shape == (0,)


def test_samples_at_one_place_without_nugget_are_solved_with_a_warning() -> None:
    # two samples at the same place and no nugget make the covariance matrix singular
    model = VariogramModel(name="exponential", nugget=0.0, psill=1.0, range=100.0)
    xy = np.array([[0.0, 0.0], [0.0, 0.0], [50.0, 0.0], [0.0, 60.0]])
    z = np.array([1.0, 3.0, 2.0, 2.5])
    with pytest.warns(InterpolationWarning, match="nugget"):
        est, var = ordinary_kriging(xy, z, [[10.0, 10.0], [0.0, 0.0]], model)
    assert np.all(np.isfinite(est)) and np.all(var >= 0)
    # [derived] at the shared place the two samples count equally: their mean
    assert est[1] == pytest.approx(2.0, abs=1e-3)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        ordinary_kriging(xy, z, [[10.0, 10.0]], VariogramModel(
            name="exponential", nugget=0.1, psill=1.0, range=100.0))
