"""Variogram model choice: fit each candidate, keep the best by cross-validation.

Each candidate model is fitted to one empirical variogram
(:func:`geosoil.variogram.fit`) and judged by leave-one-out cross-validation
of ordinary kriging (:func:`geosoil.kriging.loo_cross_validation`); the sound
candidate (no nugget added to solve it, standardised errors well calibrated)
with the lowest RMSE wins, and the selection says why. This module sits above
both: the variogram module knows nothing of kriging, and kriging takes a model
as it is given.
"""

from __future__ import annotations

import logging
import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass

from numpy.typing import ArrayLike

from .errors import SettingsError
from .kriging import CrossValidation, loo_cross_validation, small_blas
from .points import as_samples
from .variogram import EmpiricalVariogram, FitResult, VariogramModel, empirical, fit

__all__ = ["Candidate", "Selection", "select_model", "msse_band"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class Candidate:
    """One model tried by :func:`select_model`: its fit and its cross-validation."""

    fit: FitResult
    cross_validation: CrossValidation
    rejected: str = ""
    """Why the model was not eligible (badly calibrated errors, an added nugget); empty
    when it was."""

    @property
    def model(self) -> VariogramModel:
        """The fitted model."""
        return self.fit.model


@dataclass(frozen=True, eq=False)
class Selection:
    """The outcome of :func:`select_model`.

    Attributes
    ----------
    model
        The chosen model (lowest leave-one-out RMSE).
    empirical
        The empirical variogram every candidate was fitted to.
    candidates
        Every candidate that could be fitted, in the order tried.
    reason
        Which model was kept and why, and why the others were not, in words.
    """

    model: VariogramModel
    empirical: EmpiricalVariogram
    candidates: tuple[Candidate, ...]
    reason: str = ""

    @property
    def chosen(self) -> Candidate:
        """The candidate kept (its fit and cross-validation)."""
        return next(c for c in self.candidates if c.model is self.model)


def msse_band(n: int) -> tuple[float, float]:
    """The mean squared standardised errors (MSSE) taken as well calibrated for ``n`` samples.

    A kriging variance that matches the real errors gives an MSSE near 1. We
    accept 1/2 to 2 (the variance wrong by at most a factor of 2: our choice),
    widened for few samples to 3 standard errors of a mean of ``n`` squared
    standard normal errors, ``1 +- 3 sqrt(2 / n)`` [derived: chi-square with n
    degrees of freedom over n has variance 2/n].

    Parameters
    ----------
    n
        Number of samples.

    Returns
    -------
    (low, high)

    Examples
    --------
    >>> msse_band(100), [round(x, 3) for x in msse_band(10)]
    ((0.5, 2.0), [0.427, 2.342])
    """
    high = max(2.0, 1.0 + 3.0 * math.sqrt(2.0 / max(n, 1)))
    return 1.0 / high, high


def _rejection(cv: CrossValidation) -> str:
    """Why a candidate's cross-validation rules it out; empty when it does not."""
    if cv.jitter > 0:
        return (f"its covariance matrix was not positive definite (a nugget of {cv.jitter:g} "
                "x the sill had to be added)")
    low, high = msse_band(cv.n)
    if not (math.isfinite(cv.msse) and low <= cv.msse <= high):
        return (f"its cross-validation MSSE {cv.msse:.2f} lies outside {low:.2g}-{high:.2g} "
                "(kriging errors badly calibrated)")
    return ""


def select_model(
    xy: ArrayLike,
    values: ArrayLike,
    *,
    candidates: Sequence[str] = ("spherical", "exponential", "gaussian"),
    n_lags: int = 12,
    max_lag: float | None = None,
    nu: float | None = None,
    weighting: str = "pairs",
) -> Selection:
    """Fit each candidate model and keep the sound one with the lowest cross-validation RMSE.

    Each candidate is fitted to the same empirical variogram (:func:`fit`)
    and judged by leave-one-out cross-validation of ordinary kriging with all
    samples (:func:`geosoil.kriging.loo_cross_validation`, which also reports
    the mean squared standardised error, MSSE: near 1 when the kriging
    variance is realistic). A candidate is *sound* when its samples'
    covariance matrix is positive definite as fitted (no nugget had to be
    added) and its MSSE lies within :func:`msse_band`. The sound candidate
    with the lowest RMSE wins (ties go to the earlier one); when none is
    sound, the lowest RMSE among those that needed no added nugget (or among
    all) is kept. :attr:`Selection.reason` says which was kept and why, and
    why each other candidate was not eligible. Problems with few samples run
    on one BLAS thread (:func:`geosoil.kriging.small_blas`).

    Parameters
    ----------
    xy, values
        Sample coordinates (n, 2) in metres and values (n,).
    candidates
        Model names to try (each from :data:`MODELS`; ``"matern"`` needs ``nu``).
    n_lags, max_lag
        As for :func:`empirical`.
    nu, weighting
        As for :func:`fit`.

    Returns
    -------
    Selection

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> xy = rng.uniform(0, 1000, (60, 2))
    >>> z = np.sin(xy[:, 0] / 200) + 0.1 * rng.normal(size=60)
    >>> sel = select_model(xy, z, n_lags=8)
    >>> [c.model.name for c in sel.candidates]
    ['spherical', 'exponential', 'gaussian']
    >>> sel.model.name in {c.model.name for c in sel.candidates}
    True
    """
    xy, z = as_samples(xy, values, minimum=4)
    if not candidates:
        raise SettingsError("name at least one variogram model to try", key="candidates")
    emp = empirical(xy, z, n_lags=n_lags, max_lag=max_lag)
    tried: list[Candidate] = []
    caught: dict[int, list[warnings.WarningMessage]] = {}
    with small_blas(len(z)):
        for name in candidates:
            f = fit(emp, model=name, nu=nu, weighting=weighting)
            # the engine's warnings (an added nugget) only matter for the model kept
            with warnings.catch_warnings(record=True) as got:
                warnings.simplefilter("always")
                cv = loo_cross_validation(xy, z, f.model)
            logger.info(
                "variogram %s: fit rmse %.4g, cross-validation rmse %.4g, msse %.3f",
                name, f.rmse, cv.rmse, cv.msse,
            )
            caught[len(tried)] = got
            tried.append(Candidate(fit=f, cross_validation=cv, rejected=_rejection(cv)))
    sound = [c for c in tried if not c.rejected]
    if sound:
        best = min(sound, key=lambda c: c.cross_validation.rmse)
        why = "the lowest cross-validation RMSE" + (
            " of the sound fits" if len(sound) < len(tried) else "")
    else:
        pool = [c for c in tried if c.cross_validation.jitter == 0] or tried
        best = min(pool, key=lambda c: c.cross_validation.rmse)
        why = ("no fit was sound; the lowest cross-validation RMSE"
               + (" of those needing no added nugget" if len(pool) < len(tried) else ""))
    for w in caught[tried.index(best)]:
        warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    cv = best.cross_validation
    reason = f"{best.model.name} kept: {why} ({cv.rmse:.3g}, MSSE {cv.msse:.2f})"
    others = [f"{c.model.name}: {c.rejected}" for c in tried if c.rejected and c is not best]
    if others:
        reason += "; not eligible: " + "; ".join(others)
    return Selection(model=best.model, empirical=emp, candidates=tuple(tried), reason=reason)
