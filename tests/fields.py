"""Gaussian fields with a known variogram, simulated exactly, for the variogram and model
choice tests."""

from __future__ import annotations

import numpy as np

from geosoil.variogram import VariogramModel


def simulate(model: VariogramModel, xy: np.ndarray, seed: int) -> np.ndarray:
    """One Gaussian field with exactly ``model``'s covariance at ``xy`` (mean 10)."""
    d = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    c = model.covariance(d)
    low = np.linalg.cholesky(c + 1e-10 * model.sill * np.eye(len(xy)))
    return 10.0 + low @ np.random.default_rng(seed).normal(size=len(xy))
