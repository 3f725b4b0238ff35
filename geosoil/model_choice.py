"""Variogram model choice: fit each candidate, keep the best by cross-validation.

Each candidate model is fitted to one empirical variogram
(:func:`geosoil.variogram.fit`) and judged by leave-one-out cross-validation
of ordinary kriging (:func:`geosoil.kriging.loo_cross_validation`); the lowest
RMSE wins. This module sits above both: the variogram module knows nothing of
kriging, and kriging takes a model as it is given.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass

from numpy.typing import ArrayLike

from .errors import SettingsError
from .kriging import CrossValidation, loo_cross_validation
from .points import as_samples
from .variogram import EmpiricalVariogram, FitResult, VariogramModel, empirical, fit

__all__ = ["Candidate", "Selection", "select_model"]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class Candidate:
    """One model tried by :func:`select_model`: its fit and its cross-validation."""

    fit: FitResult
    cross_validation: CrossValidation

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
    """

    model: VariogramModel
    empirical: EmpiricalVariogram
    candidates: tuple[Candidate, ...]


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
    """Fit each candidate model and keep the one with the lowest cross-validation RMSE.

    Each candidate is fitted to the same empirical variogram (:func:`fit`)
    and judged by leave-one-out cross-validation of ordinary kriging with all
    samples (:func:`geosoil.kriging.loo_cross_validation`, which also reports
    the mean squared standardised error, MSSE: near 1 when the kriging
    variance is realistic). The lowest RMSE wins; ties go to the earlier
    candidate.

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
    tried = []
    for name in candidates:
        f = fit(emp, model=name, nu=nu, weighting=weighting)
        cv = loo_cross_validation(xy, z, f.model)
        logger.info(
            "variogram %s: fit rmse %.4g, cross-validation rmse %.4g, msse %.3f",
            name, f.rmse, cv.rmse, cv.msse,
        )
        tried.append(Candidate(fit=f, cross_validation=cv))
    best = min(tried, key=lambda c: c.cross_validation.rmse)
    return Selection(model=best.model, empirical=emp, candidates=tuple(tried))
