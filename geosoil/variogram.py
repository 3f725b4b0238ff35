"""Variograms: models, the empirical semivariogram and weighted least-squares fitting.

A variogram model is a small frozen value, :class:`VariogramModel` (name,
nugget, partial sill, practical range), that the kriging engine in
:mod:`geosoil.kriging` takes as it is. This module builds one from samples:
:func:`empirical` bins the half squared differences of all sample pairs by
distance (Matheron's estimator), :func:`fit` fits one model to those bins by
weighted least squares. Choosing among fitted models by cross-validation is
:mod:`geosoil.model_choice`'s job.

Model parameterisation
----------------------
``range`` is the *practical* range in metres, the distance at which the
correlation has (nearly) died away. With ``h`` the distance and ``a`` the
range, the correlation ``rho(h)`` of each model is

===============  =============================================  ==========
model            rho(h)                                         rho(a)
===============  =============================================  ==========
``spherical``    1 - 1.5 h/a + 0.5 (h/a)^3 for h < a, else 0    0
``exponential``  exp(-3 h / a)                                  exp(-3)
``gaussian``     exp(-(h / (4a/7))^2)                           exp(-49/16)
``matern``       2^(1-nu)/Gamma(nu) t^nu K_nu(t), t = s_nu h/a  exp(-3)
===============  =============================================  ==========

The first three are pykrige's parameterisations (``pykrige.variogram_models``,
checked against its source), so a model here and pykrige's model with the
same ``[psill, range, nugget]`` are the same function. For the Matérn model
the scale ``s_nu`` is solved once per ``nu`` so that ``rho(a) = exp(-3)``,
the same "about 5 %" as the exponential model; with ``nu = 0.5`` the Matérn
model *is* the exponential model.

The covariance is ``C(h) = psill * rho(h)`` for ``h > 0`` and
``C(0) = nugget + psill`` (the sill); the semivariance is
``gamma(h) = sill - C(h)``, so ``gamma(0) = 0`` and ``gamma(0+) = nugget``.

Examples
--------
>>> m = VariogramModel(name="spherical", nugget=0.1, psill=0.9, range=200.0)
>>> float(m.semivariance(200.0)), float(m.covariance(0.0)), float(m.covariance(300.0))
(1.0, 1.0, 0.0)
>>> VariogramModel(name="spherical", nugget=-1.0, psill=1.0, range=10.0)
Traceback (most recent call last):
...
geosoil.errors.SettingsError: setting 'nugget': must be at least 0 (got -1)
"""

from __future__ import annotations

import difflib
import functools
import logging
import math
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError, SettingsError
from .points import COINCIDENT_M, as_samples
from .settings import check_range, setting

__all__ = [
    "MODELS",
    "WEIGHTINGS",
    "VariogramModel",
    "EmpiricalVariogram",
    "FitResult",
    "empirical",
    "fit",
]

logger = logging.getLogger(__name__)

#: Variogram model names.
MODELS: Final = ("spherical", "exponential", "gaussian", "matern")

#: Weightings of the least-squares fit (see :func:`fit`).
WEIGHTINGS: Final = ("pairs", "cressie")

_NU_MIN, _NU_MAX = 0.2, 20.0
_GAUSSIAN_SCALE: Final = 7.0 / 4.0  # gaussian: rho = exp(-(h * 7/4 / a)^2)
_MATERN_TARGET: Final = math.exp(-3.0)


@functools.lru_cache(maxsize=64)
def _matern_scale(nu: float) -> float:
    """``s_nu`` with ``rho_nu(s_nu) = exp(-3)`` for the unit-scale Matérn correlation."""
    import scipy.optimize

    if nu == 0.5:
        return 3.0
    return float(
        scipy.optimize.brentq(
            lambda t: float(_matern_unit(np.array([t]), nu)[0]) - _MATERN_TARGET, 1e-6, 200.0,
            xtol=1e-14, rtol=1e-14,
        )
    )


def _matern_unit(t: NDArray[np.float64], nu: float) -> NDArray[np.float64]:
    """Unit-scale Matérn correlation at ``t`` (>= 0), closed forms for nu = 0.5, 1.5, 2.5."""
    if nu == 0.5:
        return np.exp(-t)
    if nu == 1.5:
        return (1.0 + t) * np.exp(-t)
    if nu == 2.5:
        return (1.0 + t + t * t / 3.0) * np.exp(-t)
    out = np.ones_like(t)
    pos = t > 0
    tp = t[pos]
    import scipy.special

    # kve = kv * exp(t): stays finite far out, where kv underflows
    log_c = (1.0 - nu) * math.log(2.0) - scipy.special.gammaln(nu)
    with np.errstate(under="ignore"):
        out[pos] = np.exp(log_c + nu * np.log(tp) - tp) * scipy.special.kve(nu, tp)
    return out


def _correlation_sq(
    name: str, a: float, nu: float | None, d2: ArrayLike, *,
    out: NDArray[np.float64] | None = None,
) -> NDArray[np.float64]:
    """``rho`` of model ``name`` with practical range ``a`` at squared distances ``d2``
    (see :meth:`VariogramModel.correlation_sq`; no checks, for the fit's inner loop)."""
    d2 = np.asarray(d2, dtype=np.float64)
    if out is None:
        out = np.array(d2, dtype=np.float64, copy=True)
    elif out is not d2:
        np.copyto(out, d2)
    if name == "gaussian":
        out *= -((_GAUSSIAN_SCALE / a) ** 2)
        np.exp(out, out=out)
        return out
    np.sqrt(out, out=out)
    if name == "exponential":
        out *= -3.0 / a
        np.exp(out, out=out)
    elif name == "spherical":
        out *= 1.0 / a
        np.minimum(out, 1.0, out=out)
        t = out * out
        t *= -0.5
        t += 1.5
        out *= t
        np.subtract(1.0, out, out=out)
    else:  # matern
        nu_ = float(nu)  # type: ignore[arg-type]
        out *= _matern_scale(nu_) / a
        out[...] = _matern_unit(out, nu_)
    return out


@dataclass(frozen=True)
class VariogramModel:
    """A variogram model: a frozen value the kriging engine takes as it is.

    Parameters
    ----------
    name
        One of :data:`MODELS`.
    nugget
        Variance of the discontinuity at the origin (measurement error and
        variation closer than the sample spacing), variable's unit squared.
    psill
        Partial sill: the spatially structured variance (sill = nugget + psill).
    range
        Practical range in metres (see the module notes for each model).
    nu
        Matérn smoothness, only for ``name="matern"`` (0.2 to 20;
        0.5 is the exponential model).

    Raises
    ------
    SettingsError
        Unknown model name, or a value out of range (the key names the field).

    Examples
    --------
    >>> m = VariogramModel(name="exponential", nugget=0.0, psill=10.0, range=10.0)
    >>> round(float(m.covariance(1.0)), 6)   # 10 exp(-0.3)
    7.408182
    >>> m.sill
    10.0
    """

    name: str = setting(doc="variogram model", choices=MODELS)
    nugget: float = setting(doc="nugget variance (variable's unit squared)", minimum=0.0)
    psill: float = setting(
        doc="partial sill (variable's unit squared)", minimum=0.0, exclusive_minimum=True
    )
    range: float = setting(doc="practical range", unit="m", minimum=0.0, exclusive_minimum=True)
    nu: float | None = setting(None, doc="Matern smoothness (matern only)", minimum=_NU_MIN,
                               maximum=_NU_MAX)

    def __post_init__(self) -> None:
        if self.name not in MODELS:
            near = difflib.get_close_matches(str(self.name), MODELS, n=1)
            hint = f"; did you mean '{near[0]}'?" if near else ""
            raise SettingsError(
                f"'{self.name}' is not a variogram model{hint} Allowed: {', '.join(MODELS)}",
                key="name",
            )
        for key in ("nugget", "psill", "range"):
            value = getattr(self, key)
            if isinstance(value, bool) or not isinstance(value, (int, float, np.floating)):
                raise SettingsError(f"must be a number (got {value!r})", key=key)
            object.__setattr__(self, key, float(value))
        check_range(self.nugget, key="nugget", minimum=0.0)
        check_range(self.psill, key="psill", minimum=0.0, exclusive_minimum=True)
        check_range(self.range, key="range", minimum=0.0, exclusive_minimum=True, unit="m")
        if self.name == "matern":
            if self.nu is None:
                raise SettingsError(
                    "the matern model needs its smoothness nu (0.5 = exponential, 1.5, 2.5, ...)",
                    key="nu",
                )
            object.__setattr__(self, "nu", float(self.nu))
            check_range(self.nu, key="nu", minimum=_NU_MIN, maximum=_NU_MAX)
        elif self.nu is not None:
            raise SettingsError(
                f"nu applies to the matern model only, not to '{self.name}'; leave it out",
                key="nu",
            )

    @property
    def sill(self) -> float:
        """Nugget plus partial sill: the covariance at distance zero."""
        return self.nugget + self.psill

    def correlation_sq(
        self, d2: ArrayLike, *, out: NDArray[np.float64] | None = None
    ) -> NDArray[np.float64]:
        """Correlation ``rho`` of the structured part at *squared* distances.

        The kriging engine's fast path: no square root for the Gaussian model,
        and the result can be written into ``out`` (which may be ``d2``
        itself) to save memory. ``rho(0) = 1``; the nugget is not included.

        Examples
        --------
        >>> m = VariogramModel(name="gaussian", nugget=0.0, psill=1.0, range=40.0)
        >>> d2 = np.array([0.0, 100.0])
        >>> np.allclose(m.correlation_sq(d2), np.exp(-np.array([0.0, 100.0]) / (40 * 4 / 7) ** 2))
        True
        """
        return _correlation_sq(self.name, self.range, self.nu, d2, out=out)

    def correlation(self, h: ArrayLike) -> NDArray[np.float64]:
        """Correlation ``rho(h)`` of the structured part at distances ``h`` (metres)."""
        h = np.asarray(h, dtype=np.float64)
        return self.correlation_sq(h * h)

    def covariance(self, h: ArrayLike) -> NDArray[np.float64]:
        """Covariance at distances ``h``: ``psill * rho(h)``, and the sill at ``h = 0``.

        Distances up to :data:`~geosoil.points.COINCIDENT_M` count as zero.

        Examples
        --------
        >>> m = VariogramModel(name="exponential", nugget=5.0, psill=5.0, range=10.0)
        >>> m.covariance([0.0, 10.0]).round(4).tolist()
        [10.0, 0.2489]
        """
        h = np.abs(np.asarray(h, dtype=np.float64))
        c = self.correlation(h)
        c *= self.psill
        c[h <= COINCIDENT_M] += self.nugget
        return c

    def semivariance(self, h: ArrayLike) -> NDArray[np.float64]:
        """Semivariance ``gamma(h) = sill - C(h)``: 0 at ``h = 0``, the nugget just beyond.

        Examples
        --------
        >>> m = VariogramModel(name="spherical", nugget=1.0, psill=3.0, range=100.0)
        >>> m.semivariance([0.0, 1e-3, 50.0, 500.0]).round(4).tolist()
        [0.0, 1.0, 3.0625, 4.0]
        """
        return self.sill - self.covariance(h)


@dataclass(frozen=True, eq=False)
class EmpiricalVariogram:
    """Matheron's empirical semivariogram: one row per non-empty lag class.

    Attributes
    ----------
    lags
        Mean distance of the pairs in each class, metres.
    gamma
        Half the mean squared difference of the pairs in each class.
    counts
        Number of pairs in each class.
    """

    lags: NDArray[np.float64]
    gamma: NDArray[np.float64]
    counts: NDArray[np.int64]


@dataclass(frozen=True)
class FitResult:
    """A fitted model and how well it follows the empirical variogram.

    Attributes
    ----------
    model
        The fitted model.
    rmse
        Root mean square difference between the empirical and the model
        semivariance over the lag classes (unweighted), unit squared.
    weights
        The weighting the least squares used, in words.
    """

    model: VariogramModel
    rmse: float
    weights: str


def _pair_blocks(
    xy: NDArray[np.float64], z: NDArray[np.float64], *, block: int = 256
) -> Iterator[tuple[NDArray[np.float64], NDArray[np.float64]]]:
    """Distances and half squared differences of all pairs i < j, a block of rows at a time."""
    n = len(z)
    for i0 in range(0, n - 1, block):
        i1 = min(n - 1, i0 + block)
        dx = xy[i0:i1, None, 0] - xy[None, i0 + 1 :, 0]
        dy = xy[i0:i1, None, 1] - xy[None, i0 + 1 :, 1]
        # keep j > i only: in row r (sample i0 + r) that is column >= r
        keep = np.arange(n - i0 - 1)[None, :] >= np.arange(i1 - i0)[:, None]
        d = np.hypot(dx, dy)[keep]
        g = 0.5 * (z[i0:i1, None] - z[None, i0 + 1 :])[keep] ** 2
        yield d, g


def empirical(
    xy: ArrayLike, values: ArrayLike, *, n_lags: int = 12, max_lag: float | None = None
) -> EmpiricalVariogram:
    """Matheron's empirical semivariogram in ``n_lags`` equal distance classes.

    Parameters
    ----------
    xy
        (n, 2) sample coordinates in metres (a projected CRS).
    values
        (n,) sample values.
    n_lags
        Number of equal-width distance classes from 0 to ``max_lag``.
    max_lag
        Largest distance used, metres. Default: half the largest distance
        between two samples (common practice: beyond that, few pairs and
        only pairs from the edges of the area).

    Returns
    -------
    EmpiricalVariogram
        Classes without pairs are left out. Pairs at the same place
        (distance 0) are left out too.

    Raises
    ------
    InputError
        Fewer than 3 samples, or missing values.
    SettingsError
        ``n_lags`` below 1 or ``max_lag`` not positive.

    Examples
    --------
    >>> xy = np.array([[0.0, 0.0], [1.0, 0.0], [2.0, 0.0], [3.0, 0.0]])
    >>> ev = empirical(xy, [1.0, 2.0, 4.0, 4.0], n_lags=3, max_lag=3.5)
    >>> ev.lags.tolist(), ev.gamma.round(4).tolist(), ev.counts.tolist()
    ([1.0, 2.0, 3.0], [0.8333, 3.25, 4.5], [3, 2, 1])
    """
    xy, z = as_samples(xy, values, minimum=3)
    if int(n_lags) != n_lags or n_lags < 1:
        raise SettingsError(f"must be a whole number of at least 1 (got {n_lags!r})", key="n_lags")
    if max_lag is None:
        max_lag = 0.5 * max(float(d.max()) for d, _ in _pair_blocks(xy, z) if d.size)
    if not (np.isfinite(max_lag) and max_lag > 0):
        raise SettingsError(
            f"must be more than 0 m (got {max_lag!r}); are all samples at one place?",
            key="max_lag",
        )
    n_lags = int(n_lags)
    width = float(max_lag) / n_lags
    counts = np.zeros(n_lags, dtype=np.int64)
    dsum = np.zeros(n_lags)
    gsum = np.zeros(n_lags)
    for d, g in _pair_blocks(xy, z):
        # the last class includes max_lag itself
        keep = (d > 0) & (d <= max_lag)
        d, g = d[keep], g[keep]
        k = np.minimum((d / width).astype(np.int64), n_lags - 1)
        counts += np.bincount(k, minlength=n_lags)
        dsum += np.bincount(k, weights=d, minlength=n_lags)
        gsum += np.bincount(k, weights=g, minlength=n_lags)
    filled = counts > 0
    c = counts[filled]
    return EmpiricalVariogram(lags=dsum[filled] / c, gamma=gsum[filled] / c, counts=c)


def _model(name: str, params: NDArray[np.float64], nu: float | None) -> VariogramModel:
    nugget, psill = float(params[0]), float(params[1])
    # the optimiser stops a hair above its lower bound: a nugget below 1e-9 of the sill
    # is that bound, not a measurement, so it is reported (and used) as 0
    if nugget < 1e-9 * (nugget + psill):
        nugget = 0.0
    return VariogramModel(name=name, nugget=nugget, psill=psill, range=float(params[2]), nu=nu)


def fit(
    emp: EmpiricalVariogram,
    *,
    model: str,
    nu: float | None = None,
    weighting: str = "pairs",
) -> FitResult:
    """Fit one variogram model to an empirical variogram by weighted least squares.

    The nugget, partial sill and range are fitted with
    :func:`scipy.optimize.least_squares` within bounds (nugget 0 to 2x the
    largest empirical value, partial sill up to 3x, range from 1/1000 to 3x the
    largest lag), from a few starting ranges; the best fit is kept.

    Parameters
    ----------
    emp
        The empirical variogram (at least 3 lag classes).
    model
        One of :data:`MODELS`.
    nu
        Matérn smoothness, required for ``model="matern"`` (held fixed).
    weighting
        ``"pairs"`` (default): each lag class weighted by its number of pairs,
        so well-supported classes count most and the weights do not depend
        on the model being fitted. ``"cressie"``: pairs divided by the model
        semivariance squared (Cressie 1985, Math. Geol. 17:563-586), which
        gives more weight to the short lags but can pull a fit towards a
        small nugget. The default is the steadier one.

    Returns
    -------
    FitResult

    Raises
    ------
    SettingsError
        Unknown model or weighting, or matern without ``nu``.
    InputError
        Fewer than 3 lag classes.

    Examples
    --------
    >>> true = VariogramModel(name="spherical", nugget=0.2, psill=1.0, range=300.0)
    >>> lags = np.linspace(25.0, 475.0, 10)
    >>> emp = EmpiricalVariogram(lags, true.semivariance(lags), np.full(10, 100))
    >>> r = fit(emp, model="spherical")
    >>> round(r.model.nugget, 3), round(r.model.psill, 3), round(r.model.range, 1)
    (0.2, 1.0, 300.0)
    """
    if model not in MODELS:
        VariogramModel(name=model, nugget=0.0, psill=1.0, range=1.0)  # raises the clear error
    if weighting not in WEIGHTINGS:
        raise SettingsError(
            f"'{weighting}' is not a weighting. Allowed: {', '.join(WEIGHTINGS)}", key="weighting"
        )
    if model == "matern" and nu is None:
        raise SettingsError("fitting the matern model needs its smoothness nu", key="nu")
    if model != "matern":
        nu = None
    lags = np.asarray(emp.lags, dtype=np.float64)
    gamma = np.asarray(emp.gamma, dtype=np.float64)
    counts = np.asarray(emp.counts, dtype=np.float64)
    if lags.size < 3:
        raise InputError(
            f"the empirical variogram has {lags.size} lag classes; at least 3 are needed to fit "
            "a model",
            fix="use more samples or more lag classes (n_lags), or fix the variogram",
        )
    gmax = float(gamma.max()) if gamma.max() > 0 else 1.0
    hmax = float(lags.max())
    # work on scaled parameters: nugget/gmax, psill/gmax, range/hmax
    lower = np.array([0.0, 1e-6, 1e-3])
    upper = np.array([2.0, 3.0, 3.0])
    sqrt_w = np.sqrt(counts / counts.sum())

    lags2 = lags * lags
    zero = lags <= COINCIDENT_M  # empirical lags are means of pairs apart: never, in practice
    target = gamma / gmax

    def residuals(p: NDArray[np.float64]) -> NDArray[np.float64]:
        # the semivariance of _model(model, p * scale, nu), without building (and
        # checking) a model object at each of the optimiser's evaluations
        nugget, psill = p[0], p[1]
        if nugget < 1e-9 * (nugget + psill):
            nugget = 0.0
        g = nugget + psill * (1.0 - _correlation_sq(model, p[2] * hmax, nu, lags2))
        g[zero] = 0.0
        r = g - target
        if weighting == "cressie":
            r = r / np.maximum(g, 1e-12)
        return sqrt_w * r

    lags_pos = np.where(zero, 0.0, lags)

    def jacobian(p: NDArray[np.float64]) -> NDArray[np.float64]:
        # d residual / d (nugget, psill, range) in closed form (checked against finite
        # differences in the tests); the matern model is differenced by scipy
        psill, a = p[1], p[2] * hmax
        rho = _correlation_sq(model, a, nu, lags2)
        t = lags_pos / a
        if model == "exponential":
            drho_da = rho * 3.0 * t / a
        elif model == "gaussian":
            drho_da = rho * 2.0 * (_GAUSSIAN_SCALE * t) ** 2 / a
        else:  # spherical
            drho_da = np.where(t < 1.0, (1.5 - 1.5 * t * t) * t / a, 0.0)
        jac = np.empty((lags.size, 3))
        jac[:, 0] = 1.0
        jac[:, 1] = 1.0 - rho
        jac[:, 2] = -psill * drho_da * hmax
        jac[zero] = 0.0
        if weighting == "cressie":
            nugget = p[0] if p[0] >= 1e-9 * (p[0] + p[1]) else 0.0
            g = nugget + psill * (1.0 - rho)
            g[zero] = 0.0
            big = g > 1e-12
            jac *= np.where(big, target / np.maximum(g, 1e-12) ** 2, 1e12)[:, None]
        return sqrt_w[:, None] * jac

    import scipy.optimize

    nugget0 = min(0.5 * float(gamma.min()) / gmax, 1.0)
    best = None
    for range0 in (0.25, 0.5, 1.0):
        x0 = np.array([nugget0, max(1.0 - nugget0, 1e-3), range0])
        res = scipy.optimize.least_squares(
            residuals, x0, jac=jacobian if model != "matern" else "2-point",
            bounds=(lower, upper), xtol=1e-12, ftol=1e-12, gtol=1e-12,
        )
        if best is None or res.cost < best.cost:
            best = res
    assert best is not None
    fitted = _model(model, best.x * [gmax, gmax, hmax], nu)
    rmse = float(np.sqrt(np.mean((fitted.semivariance(lags) - gamma) ** 2)))
    words = (
        "pairs per lag class"
        if weighting == "pairs"
        else "pairs per lag class / model semivariance squared (Cressie 1985)"
    )
    logger.debug("fitted %s: %s (rmse %.4g)", model, fitted, rmse)
    return FitResult(model=fitted, rmse=rmse, weights=words)
