"""Soil surfaces per paddock: which method, which variogram, and the derived chemistry.

The approach: **krige the amounts, derive the shares.** Exchangeable Ca, Mg,
K, Na and acidity (cmol(+)/kg), exchangeable Al and pH are interpolated one by
one; every cell's ECEC is then the sum of its kriged parts and every
saturation (ESP included) is that cell's part divided by that cell's ECEC. This
keeps each cell physically valid: no negative amounts (a kriged amount below
zero is set to zero and counted in a note), saturations within 0-100 % that add
up to 100 % of the cell's ECEC. Kriging ESP directly would give shares that
disagree with the kriged ECEC of the same cell, and saturations near 0 or 100 %
that leave their range.

Per paddock and variable the method is chosen in this order, and the choice
is recorded with a note:

1. a single value, or all values equal -> a flat surface;
2. the paddock was sampled as one composite per management zone (each user
   zone holds at most one sample) -> each zone takes its sample's value;
3. fewer samples than ``min_samples_kriging`` -> inverse-distance weighting;
4. otherwise ordinary kriging, with the variogram fitted on the paddock's own
   samples, or on the farm's pooled samples when the paddock has fewer than
   ``min_samples_variogram`` (``variogram_scope``), and the model chosen by
   leave-one-out cross-validation unless the project fixes it.

If no variogram can be fitted (for example the samples sit in two tight
clusters, so the empirical variogram has fewer than three lag classes), the
paddock falls back to inverse-distance weighting, with a warning.

A paddock without samples is an error naming it, unless
``borrow_farm_surface`` is on: it is then kriged from the whole farm's samples
(with a warning and a note). A variable a sampled paddock has no values for
gives an empty surface (with a warning).

Estimates of exchangeable amounts below zero (ordinary kriging weights can be
negative, so it can overshoot) are set to zero, and estimated ESP is kept
within 0-100 %; each surface's notes count the cells changed. The kriging
standard deviation is left as computed.

When a variable is kriged on a log scale (``log_transform``, and all of the
paddock's values are above zero), its variogram is on that scale too: a fixed
one is read on it, and a farm variogram is fitted on the log of the farm's
values above zero (a paddock holding zeros is kriged as it is, with a farm
variogram of the values as they are).
"""

from __future__ import annotations

import contextlib
import logging
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import geopandas as gpd
import numpy as np
import shapely
from numpy.typing import NDArray

from .chemistry import ACIDITY_BASES, ECEC_BASES, ChemistrySettings, exchange_chemistry
from .errors import InputError, InterpolationWarning, SettingsError
from .grids import PaddockGrid
from .kriging import (
    CrossValidation,
    idw,
    lognormal_backtransform,
    loo_cross_validation,
    ordinary_kriging,
)
from .model_choice import select_model
from .points import spread_subset
from .settings import setting
from .variogram import EmpiricalVariogram, VariogramModel, empirical

__all__ = [
    "INTERPOLATED",
    "GLOBAL_KRIGING_MAX_SAMPLES",
    "AUTO_NEIGHBOURS",
    "FIT_MAX_SAMPLES",
    "FixedVariogram",
    "InterpolationSettings",
    "Surface",
    "interpolate_farm",
    "derive_cells",
    "variables_to_interpolate",
]

logger = logging.getLogger(__name__)

#: Variables geosoil interpolates when the samples carry them, in this order.
INTERPOLATED: tuple[str, ...] = (
    "ca", "mg", "k", "na", "acidity", "al", "cec", "ph", "ph_cacl2", "esp",
    "cec_ph7", "acidity_potential", "bph_smp", "bph_sikora", "bph_mehlich", "bph_adams_evans",
    "oc", "om", "clay", "phbc", "ec_1_5", "ece", "na_sol", "k_sol", "ca_sol", "mg_sol",
)

_MODELS = ("spherical", "exponential", "gaussian", "matern")

#: Most samples in one paddock that global kriging (``[interpolation] neighbours = 0``) is
#: run on. Measured on this project's engine (2 cores, 40 000 cells): 500 samples 2.2 s,
#: 1 500 samples 15 s, 3 000 samples 47 s, growing with the cube of the samples. Above
#: it each cell is kriged from its nearest :data:`AUTO_NEIGHBOURS` samples (3 000: 4.3 s),
#: and the surface's notes and the run's warnings say so.
GLOBAL_KRIGING_MAX_SAMPLES = 1000

#: Samples per cell when a paddock has more than :data:`GLOBAL_KRIGING_MAX_SAMPLES`.
AUTO_NEIGHBOURS = 64

#: Most samples a variogram is fitted to and cross-validated on (a paddock's, or the farm's
#: pooled samples). Choosing a model fits each candidate and cross-validates it by leave-one-
#: out kriging, which factorises an n x n matrix: measured on this project's engine (2 shared
#: cores, three models), 500 samples 0.3 s, 1 000 samples 1.9 s (0.8 s CPU), 2 000 samples
#: 9.8 s (4.9 s CPU), 4 000 samples 32 s (17 s CPU), growing with the cube of the samples, per
#: paddock and variable; 30 000 samples would need a 7 GB matrix. Above it both run on
#: :func:`geosoil.points.spread_subset` of this many samples (seeded: the same each run),
#: the kriging on every sample, and the surface's notes and the run's warnings say so.
FIT_MAX_SAMPLES = 1000

#: Seed of the subset a variogram is fitted on above :data:`FIT_MAX_SAMPLES`.
SUBSET_SEED = 20_240_601

#: Interpolated variables that are exchangeable amounts (never below zero).
_AMOUNTS = (
    "ca", "mg", "k", "na", "acidity", "al", "cec", "cec_ph7", "acidity_potential", "oc", "om",
    "clay", "phbc", "na_sol", "k_sol", "ca_sol", "mg_sol",
)


@dataclass(frozen=True)
class FixedVariogram:
    """A variogram the user fixes for one variable instead of fitting it."""

    model: str = setting("spherical", doc="variogram model", choices=_MODELS)
    nugget: float = setting(0.0, doc="nugget (variable's unit squared)", minimum=0.0)
    psill: float = setting(
        1.0, doc="partial sill (variable's unit squared)", exclusive_minimum=True, minimum=0.0
    )
    range_m: float = setting(
        100.0, doc="practical range", unit="m", exclusive_minimum=True, minimum=0.0
    )
    nu: float | None = setting(
        None, doc="Matern smoothness (matern only)", exclusive_minimum=True, minimum=0.0
    )

    def __post_init__(self) -> None:
        if self.model == "matern" and self.nu is None:
            raise SettingsError(
                "the matern model needs its smoothness nu (0.5 = exponential, 1.5, 2.5, ...)",
                key="nu",
            )
        if self.model != "matern" and self.nu is not None:
            raise SettingsError(
                f"nu applies to the matern model only, not to '{self.model}'; leave it out",
                key="nu",
            )

    def as_model(self) -> VariogramModel:
        """The fixed variogram as a :class:`~geosoil.variogram.VariogramModel`."""
        return VariogramModel(
            name=self.model, nugget=self.nugget, psill=self.psill, range=self.range_m, nu=self.nu
        )


@dataclass(frozen=True)
class InterpolationSettings:
    """How surfaces are interpolated."""

    models: tuple[str, ...] = setting(
        ("spherical", "exponential", "gaussian"),
        doc="variogram models tried; the one with the lowest cross-validation RMSE is kept",
    )
    min_samples_kriging: int = setting(
        8, doc="fewer samples in a paddock than this: inverse-distance weighting", minimum=3
    )
    min_samples_variogram: int = setting(
        30,
        doc="fewer samples in a paddock than this: the variogram is fitted on the farm's samples",
        minimum=5,
    )
    variogram_scope: str = setting(
        "auto",
        doc="fit variograms per paddock, on the farm's pooled samples, or auto (by sample count)",
        choices=("auto", "paddock", "farm"),
    )
    matern_nu: float = setting(
        1.5,
        doc="smoothness nu of the matern model when it is among the models (0.5 = exponential)",
        minimum=0.2,
        maximum=20.0,
    )
    n_lags: int = setting(10, doc="lag classes of the empirical variogram", minimum=4, maximum=50)
    max_lag_fraction: float = setting(
        0.5,
        doc="largest lag as a share of the largest distance between samples",
        minimum=0.1,
        maximum=1.0,
    )
    neighbours: int = setting(
        0, doc="samples used per cell: 0 = all (global kriging), else the nearest N", minimum=0
    )
    log_transform: tuple[str, ...] = setting(
        ("na",),
        doc="variables kriged on a log scale (skewed ones; lognormal back-transform)",
    )
    idw_power: float = setting(
        2.0, doc="power of inverse-distance weighting", minimum=0.5, maximum=6.0
    )
    borrow_farm_surface: bool = setting(
        False, doc="krige a paddock without samples from the whole farm's samples"
    )
    fixed: dict[str, FixedVariogram] = setting(
        default_factory=dict, doc="variograms fixed per variable instead of fitted"
    )

    def __post_init__(self) -> None:
        for m in self.models:
            if m not in _MODELS:
                raise SettingsError(
                    f"'{m}' is not a model; allowed: {', '.join(_MODELS)}", key="models"
                )
        if not self.models:
            raise SettingsError("name at least one model", key="models")
        for v in self.log_transform:
            if v not in INTERPOLATED:
                raise SettingsError(
                    f"'{v}' is not an interpolated variable; allowed: {', '.join(INTERPOLATED)}",
                    key="log_transform",
                )
        for v in self.fixed:
            if v not in INTERPOLATED:
                raise SettingsError(
                    f"'{v}' is not an interpolated variable; allowed: {', '.join(INTERPOLATED)}",
                    key=f"fixed.{v}",
                )


@dataclass(frozen=True)
class Surface:
    """One interpolated variable over one paddock grid.

    ``estimate`` and ``std`` have the grid's shape with NaN outside its mask;
    ``std`` is the kriging standard deviation (None for methods that give none).
    """

    variable: str
    paddock: str
    estimate: NDArray[np.float64]
    std: NDArray[np.float64] | None
    method: str
    n_samples: int
    model: VariogramModel | None = None
    variogram_scope: str | None = None
    empirical: EmpiricalVariogram | None = None
    cross_validation: CrossValidation | None = None
    candidates: tuple[tuple[str, float, float], ...] = ()
    log_transform: bool = False
    notes: tuple[str, ...] = field(default_factory=tuple)


def variables_to_interpolate(samples: gpd.GeoDataFrame) -> list[str]:
    """The variables the samples can give surfaces for, in :data:`INTERPOLATED` order.

    ``esp`` is interpolated directly only when there is no exchangeable Na (ESP
    estimated from SAR); ``cec`` only when the parts of an ECEC are incomplete
    (a part is absent, or a sample's ECEC is the lab's CEC: ``ecec_basis``);
    ``ece`` only when some sample's ECe was measured (an ECe estimated from EC
    1:5 everywhere is the EC 1:5 surface times one factor, made per cell).

    Parameters
    ----------
    samples : GeoDataFrame
        The checked samples.

    Returns
    -------
    list of str
        Variable names.
    """
    have = [
        v
        for v in INTERPOLATED
        if v in samples.columns and samples[v].notna().any()
    ]
    parts = {"ca", "mg", "k", "na"}
    if "na" in have and "esp" in have:
        have.remove("esp")
    # the lab's CEC is interpolated while any sample's ECEC rests on it (a part is missing
    # there), so that cells take their ECEC as those samples do
    on_lab = ("ecec_basis" in samples.columns
              and bool((samples["ecec_basis"] == "lab CEC").any()))
    if parts <= set(have) and "cec" in have and not on_lab:
        have.remove("cec")
    if "ece" in have and "ec_1_5" in have and "ece_estimated" in samples.columns and bool(
            samples["ece_estimated"].astype(bool).all()):
        have.remove("ece")  # every ECe is EC 1:5 x one factor: the cells scale the EC 1:5
    return have


def _xy(gdf: gpd.GeoDataFrame) -> NDArray[np.float64]:
    return np.column_stack([gdf.geometry.x.to_numpy(), gdf.geometry.y.to_numpy()])


def _max_distance(xy: NDArray[np.float64]) -> float:
    """The largest distance between two points (through their convex hull: no n x n table)."""
    import scipy.spatial

    pts = xy
    if len(xy) > 3:
        try:
            pts = xy[scipy.spatial.ConvexHull(xy).vertices]
        except scipy.spatial.QhullError:  # all on one line: its ends are extremes in x or in y
            pts = xy[[xy[:, 0].argmin(), xy[:, 0].argmax(), xy[:, 1].argmin(), xy[:, 1].argmax()]]
    return float(scipy.spatial.distance.pdist(pts).max()) if len(pts) > 1 else 0.0


@dataclass(frozen=True)
class _Fit:
    model: VariogramModel | None
    empirical: EmpiricalVariogram | None
    candidates: tuple[tuple[str, float, float], ...]
    scope: str
    note: str | None
    cross_validation: CrossValidation | None = None
    """The chosen model's cross-validation on the samples it was fitted to."""


class _NoFit(Exception):
    """No variogram could be fitted; the message says why."""


def _fit_variogram(
    xy: NDArray[np.float64],
    z: NDArray[np.float64],
    *,
    variable: str,
    settings: InterpolationSettings,
    scope: str,
    note: str | None = None,
) -> _Fit:
    """Fit (or take the fixed) variogram of ``z``; raise :class:`_NoFit` when none can be had.
    Above :data:`FIT_MAX_SAMPLES` samples it is fitted (and its candidates cross-validated)
    on a spread subset, with a note."""
    max_lag = _max_distance(xy) * settings.max_lag_fraction
    if len(z) > FIT_MAX_SAMPLES:
        keep = spread_subset(xy, FIT_MAX_SAMPLES, seed=SUBSET_SEED)
        sub = _subset_note(len(z), "empirical variogram (shown only)"
                           if variable in settings.fixed else
                           "variogram fitted and cross-validated")
        xy, z = xy[keep], z[keep]
        note = sub if note is None else f"{note}; {sub}"
    if variable in settings.fixed:
        try:
            emp = empirical(xy, z, n_lags=settings.n_lags, max_lag=max_lag)
        except (InputError, SettingsError):  # shown for information only
            emp = None
        fixed = "variogram fixed in the project"
        return _Fit(settings.fixed[variable].as_model(), emp, (), scope,
                    fixed if note is None else f"{fixed}; {note}")
    nu = settings.matern_nu if "matern" in settings.models else None
    try:
        sel = select_model(
            xy, z, candidates=settings.models, n_lags=settings.n_lags, max_lag=max_lag, nu=nu
        )
    except (InputError, SettingsError) as exc:
        why = getattr(exc, "problem", None) or getattr(exc, "bare_message", None)
        raise _NoFit(why or str(exc)) from None
    cands = tuple(
        (c.model.name, float(c.cross_validation.rmse), float(c.cross_validation.msse))
        for c in sel.candidates
    )
    why = f"variogram: {sel.reason}"
    return _Fit(sel.model, sel.empirical, cands, scope, why if note is None else f"{note}; {why}",
                sel.chosen.cross_validation)


def _subset_note(n: int, what: str) -> str:
    return (f"{what} on {FIT_MAX_SAMPLES} of the {n} samples (more than the "
            f"{FIT_MAX_SAMPLES} a variogram is fitted to), spread over the area: one drawn "
            "from each block of a grid, seeded, so the same each run")


def _cross_validate(
    xy: NDArray[np.float64], z: NDArray[np.float64], model: VariogramModel, notes: list[str],
) -> CrossValidation:
    """Leave-one-out cross-validation of ``model``, on a spread subset above
    :data:`FIT_MAX_SAMPLES` samples (with a note)."""
    if len(z) > FIT_MAX_SAMPLES:
        keep = spread_subset(xy, FIT_MAX_SAMPLES, seed=SUBSET_SEED)
        notes.append(_subset_note(len(z), "cross-validated"))
        xy, z = xy[keep], z[keep]
    return loo_cross_validation(xy, z, model)


def _flat(grid: PaddockGrid, value: float) -> NDArray[np.float64]:
    return grid.to_array(np.full(grid.n_cells, value, dtype=float))


def _zones_over(grid: PaddockGrid, zones: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """The user zones holding at least one of the grid's cell centres, indexed 0..n-1."""
    x, y = grid.cell_centres()
    geoms = zones.geometry.to_numpy()
    keep = [g is not None and bool(shapely.contains_xy(g, x, y).any()) for g in geoms]
    return zones[keep].reset_index(drop=True)


def _zone_values(
    grid: PaddockGrid, pts: gpd.GeoDataFrame, variable: str, zones: gpd.GeoDataFrame
) -> tuple[NDArray[np.float64], int] | None:
    """Each user zone takes the value of the one sample inside it (None if not that design).

    The design holds when every sample lies in exactly one zone and no zone
    holds two. Cells in no sampled zone take the value of the nearest cell
    that is in one; their count is returned with the surface.
    """
    zone_geoms = zones.geometry.to_numpy()
    inside = shapely.within(pts.geometry.to_numpy()[:, None], zone_geoms[None, :])
    if (inside.sum(axis=1) != 1).any() or (inside.sum(axis=0) > 1).any():
        return None
    x, y = grid.cell_centres()
    out = np.full(x.shape, np.nan)
    values = pts[variable].to_numpy(float)
    for i, zi in enumerate(inside.argmax(axis=1)):
        out[shapely.contains_xy(zone_geoms[zi], x, y)] = values[i]
    filled = ~np.isnan(out)
    if not filled.any():
        return None
    n_fill = int((~filled).sum())
    if n_fill:
        import scipy.spatial

        tree = scipy.spatial.cKDTree(np.column_stack([x[filled], y[filled]]))
        _, idx = tree.query(np.column_stack([x[~filled], y[~filled]]))
        out[~filled] = out[filled][idx]
    return grid.to_array(out), n_fill


def _krige(
    xy: NDArray[np.float64],
    z: NDArray[np.float64],
    grid: PaddockGrid,
    model: VariogramModel,
    *,
    log: bool,
    neighbours: int,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    x, y = grid.cell_centres()
    target = np.column_stack([x, y])
    near = neighbours or None
    if log:
        est_l, var_l, lagr = ordinary_kriging(
            xy, np.log(z), target, model, neighbours=near, return_lagrange=True
        )
        est, var = lognormal_backtransform(est_l, var_l, lagr)
    else:
        est, var = ordinary_kriging(xy, z, target, model, neighbours=near)
    return grid.to_array(est), grid.to_array(np.sqrt(np.maximum(var, 0.0)))


@contextlib.contextmanager
def _where(place: str) -> Iterator[None]:
    """Re-raise the engine's warnings with the paddock and variable they concern."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield
    for w in caught:
        warnings.warn(f"{place}: {w.message}", w.category, stacklevel=3)


def _physical(variable: str, est: NDArray[np.float64], notes: list[str]) -> NDArray[np.float64]:
    """Amounts below zero set to zero, ESP kept within 0-100 % (with a note each)."""
    if variable in _AMOUNTS:
        low = est < 0
        if low.any():
            est = np.where(low, 0.0, est)
            notes.append(f"{int(low.sum())} cells estimated below zero were set to zero")
    elif variable == "esp":
        out = (est < 0) | (est > 100)
        if out.any():
            est = np.clip(est, 0.0, 100.0)
            notes.append(f"{int(out.sum())} cells estimated outside 0-100 % were clipped to it")
    return est


def interpolate_farm(
    samples: gpd.GeoDataFrame,
    grids: Mapping[str, PaddockGrid],
    *,
    variables: Sequence[str],
    settings: InterpolationSettings,
    user_zones: gpd.GeoDataFrame | None = None,
    progress: Callable[[str], None] | None = None,
) -> dict[tuple[str, str], Surface]:
    """Interpolate ``variables`` over every paddock grid.

    Parameters
    ----------
    samples
        Points in the grids' CRS with a ``paddock`` column and the variables
        (amounts in cmol(+)/kg).
    grids
        Paddock name -> aligned grid.
    variables
        Which columns to interpolate (see :func:`variables_to_interpolate`).
    settings
        Interpolation settings.
    user_zones
        The user's management zones (polygons in the grids' CRS), used when a
        paddock was sampled as one composite per zone.
    progress
        Called with a short message before each paddock and variable.

    Returns
    -------
    dict
        ``(paddock, variable) -> Surface``.

    Raises
    ------
    InputError
        A paddock has no samples and ``borrow_farm_surface`` is off.

    Warns
    -----
    InterpolationWarning
        Inverse-distance weighting instead of kriging (too few samples, or no
        variogram could be fitted); a paddock's surface borrowed from the
        farm; a variable without values in a sampled paddock.

    Examples
    --------
    >>> import shapely
    >>> from geosoil.grids import aligned_grids
    >>> paddocks = gpd.GeoDataFrame({"paddock": ["A"]}, geometry=[shapely.box(0, 0, 100, 100)],
    ...                             crs="EPSG:32755")
    >>> grids = aligned_grids(paddocks, cell_size_m=10.0)
    >>> samples = gpd.GeoDataFrame({"paddock": ["A"], "ph": [5.5]},
    ...                            geometry=[shapely.Point(50, 50)], crs="EPSG:32755")
    >>> s = interpolate_farm(samples, grids, variables=["ph"], settings=InterpolationSettings())
    >>> s[("A", "ph")].method, float(np.nanmax(s[("A", "ph")].estimate)), s[("A", "ph")].notes
    ('flat', 5.5, ('one sample: flat surface at 5.5',))
    """
    out: dict[tuple[str, str], Surface] = {}
    farm = _FarmInterpolation(samples, settings)
    for name, grid in grids.items():
        in_paddock = samples[samples["paddock"] == name]
        borrowed = _borrowing(name, in_paddock, settings)
        zones_here = None
        if user_zones is not None and not user_zones.empty:
            zones_here = _zones_over(grid, user_zones)
        for variable in variables:
            if progress:
                progress(f"surfaces: {name}: {variable}")
            pts = samples if borrowed else in_paddock
            pts = pts[pts[variable].notna()]
            notes: list[str] = []
            if borrowed:
                notes.append(
                    "no samples in this paddock: interpolated from the whole farm's samples"
                )
            surface = _simple_surface(name, variable, grid, pts, zones_here, notes)
            if surface is None:
                surface = farm.surface(name, variable, grid, pts, notes, borrowed=borrowed)
            out[(name, variable)] = surface
        farm.say_idw(name)
    return out


def _borrowing(name: str, in_paddock: gpd.GeoDataFrame, settings: InterpolationSettings) -> bool:
    """Whether a paddock's surfaces come from the whole farm's samples (it has none; refused
    unless ``borrow_farm_surface``)."""
    if not in_paddock.empty:
        return False
    if not settings.borrow_farm_surface:
        raise InputError(
            f"paddock '{name}' has no samples",
            fix="sample it, leave it out of the boundaries file, or set "
            "[interpolation] borrow_farm_surface = true to krige it from the whole farm",
        )
    warnings.warn(
        f"paddock '{name}' has no samples: its surfaces are interpolated from the "
        "whole farm's samples (borrow_farm_surface)",
        InterpolationWarning, stacklevel=3,
    )
    return True


def _simple_surface(
    name: str, variable: str, grid: PaddockGrid, pts: gpd.GeoDataFrame,
    zones_here: gpd.GeoDataFrame | None, notes: list[str],
) -> Surface | None:
    """The surface that needs no interpolation: empty without values, flat from one value,
    zone values from one composite sample per management zone; None otherwise."""
    n = len(pts)
    if n == 0:
        msg = f"no {variable} values in this paddock: surface left empty"
        notes.append(msg)
        warnings.warn(f"{name}: {msg}", InterpolationWarning, stacklevel=3)
        return Surface(variable, name, grid.to_array(np.full(grid.n_cells, np.nan)), None,
                       "none", 0, notes=tuple(notes))
    z = pts[variable].to_numpy(float)
    if n == 1 or np.ptp(z) == 0:
        notes.append("one sample" if n == 1 else f"all {n} samples equal")
        notes[-1] += f": flat surface at {z[0]:g}"
        return Surface(variable, name, _flat(grid, float(z[0])), None, "flat", n,
                       notes=tuple(notes))
    if zones_here is None or not len(zones_here) or n > len(zones_here):
        return None
    got = _zone_values(grid, pts, variable, zones_here)
    if got is None:
        return None
    zv, n_fill = got
    notes.append(f"{n} composite samples, one per management zone: each zone takes its "
                 "sample's value")
    if n_fill:
        notes.append(f"{n_fill} cells in no sampled zone took the value of the nearest "
                     "sampled zone")
    return Surface(variable, name, zv, None, "zone values", n, notes=tuple(notes))


class _FarmInterpolation:
    """Kriging (or inverse-distance weighting) of the paddocks of one farm: the farm-wide
    variograms are fitted once each, the local-neighbourhood warning given once a paddock."""

    def __init__(self, samples: gpd.GeoDataFrame, settings: InterpolationSettings) -> None:
        self.samples = samples
        self.settings = settings
        self.farm_fits: dict[tuple[str, bool], _Fit | _NoFit] = {}
        self.told_local: set[str] = set()  # paddocks already warned about the neighbourhood
        # ... and about the subset their variograms are fitted on (None: the farm-wide fit)
        self.told_fit: set[str | None] = set()
        # paddock -> why -> the variables inverse-distance weighted for that reason: one
        # warning a paddock (say_idw), not one a variable
        self.idw: dict[str, dict[str, list[str]]] = {}

    def farm_fit(self, variable: str, log: bool) -> _Fit:
        """The farm-wide variogram of ``variable`` (log scale when ``log``); raises
        :class:`_NoFit` when none could be fitted."""
        # keyed by the scale too: a paddock kriged on the log scale needs a log-scale variogram
        if (variable, log) not in self.farm_fits:
            pts = self.samples[self.samples[variable].notna()]
            z = pts[variable].to_numpy(float)
            note = None
            if log:
                keep = z > 0
                if not keep.all():
                    note = (f"{int((~keep).sum())} farm sample(s) of zero or less left out of "
                            "the log-scale variogram")
                pts, z = pts[keep], np.log(z[keep])
            if (len(z) > FIT_MAX_SAMPLES and None not in self.told_fit
                    and variable not in self.settings.fixed):
                self.told_fit.add(None)
                warnings.warn(
                    f"farm-wide variogram: {len(z)} samples pooled, more than the "
                    f"{FIT_MAX_SAMPLES} a variogram is fitted and cross-validated on: fitted on "
                    f"{FIT_MAX_SAMPLES} of them spread over the farm (the same each run)",
                    InterpolationWarning, stacklevel=2)
            try:
                with _where(f"farm-wide variogram of {variable}"):
                    self.farm_fits[(variable, log)] = _fit_variogram(
                        _xy(pts), z, variable=variable, settings=self.settings, scope="farm",
                        note=note,
                    )
            except _NoFit as exc:
                self.farm_fits[(variable, log)] = exc
        got = self.farm_fits[(variable, log)]
        if isinstance(got, _NoFit):
            raise got
        return got

    def idw_surface(
        self, name: str, variable: str, grid: PaddockGrid, xy: NDArray[np.float64],
        z: NDArray[np.float64], notes: list[str], why: str,
    ) -> Surface:
        """Inverse-distance weighting, with a note and a warning saying why."""
        power = self.settings.idw_power
        msg = f"{why}: inverse-distance weighting (power {power:g}), no error surface"
        notes.append(msg)
        self.idw.setdefault(name, {}).setdefault(why, []).append(variable)
        x, y = grid.cell_centres()
        est = idw(xy, z, np.column_stack([x, y]), power=power)
        return Surface(
            variable, name, _physical(variable, grid.to_array(est), notes), None,
            "inverse-distance weighting", len(z), notes=tuple(notes),
        )

    def say_idw(self, name: str) -> None:
        """One warning for the paddock's inverse-distance weighted variables, naming them
        by reason: "Tiny Lot, ca, mg, k: 3 samples, fewer than min_samples_kriging = 8:
        inverse-distance weighting (power 2), no error surface"."""
        said = self.idw.pop(name, None)
        if not said:
            return
        why = "; ".join(f"{', '.join(variables)}: {reason}" for reason, variables in said.items())
        warnings.warn(f"{name}, {why}: inverse-distance weighting (power "
                      f"{self.settings.idw_power:g}), no error surface",
                      InterpolationWarning, stacklevel=3)

    def surface(self, name: str, variable: str, grid: PaddockGrid, pts: gpd.GeoDataFrame,
                notes: list[str], *, borrowed: bool) -> Surface:
        """The kriged surface of a paddock and variable, or inverse-distance weighting with
        too few samples or without a variogram."""
        settings = self.settings
        n = len(pts)
        z = pts[variable].to_numpy(float)
        xy = _xy(pts)
        if n < settings.min_samples_kriging:
            return self.idw_surface(
                name, variable, grid, xy, z, notes,
                f"{n} samples, fewer than min_samples_kriging = {settings.min_samples_kriging}",
            )
        log = variable in settings.log_transform and bool(np.all(z > 0))
        if variable in settings.log_transform and not log:
            notes.append("values of zero or less: kriged without the log transform")
        try:
            fit = self.variogram(name, variable, xy, np.log(z) if log else z, log=log,
                                 borrowed=borrowed, notes=notes)
        except _NoFit as exc:
            return self.idw_surface(name, variable, grid, xy, z, notes,
                                    f"no variogram could be fitted ({exc})")
        if fit.note:
            notes.append(fit.note)
        return self.kriged(name, variable, grid, xy, z, fit, log=log, notes=notes)

    def variogram(self, name: str, variable: str, xy: NDArray[np.float64],
                  zt: NDArray[np.float64], *, log: bool, borrowed: bool,
                  notes: list[str]) -> _Fit:
        """The paddock's own variogram, or the farm's (borrowed paddock, ``variogram_scope``
        "farm", or "auto" with fewer than ``min_samples_variogram`` samples)."""
        settings = self.settings
        n = len(zt)
        use_farm = borrowed or settings.variogram_scope == "farm" or (
            settings.variogram_scope == "auto" and n < settings.min_samples_variogram
        )
        if not use_farm:
            with _where(f"{name}, {variable}"):
                return _fit_variogram(xy, zt, variable=variable, settings=settings,
                                      scope="paddock")
        fit = self.farm_fit(variable, log)
        if not borrowed and variable not in settings.fixed:  # a fixed one is not fitted
            notes.append(
                f"{n} samples, fewer than min_samples_variogram = "
                f"{settings.min_samples_variogram}: variogram fitted on the farm's "
                "pooled samples"
                if settings.variogram_scope == "auto"
                else "variogram fitted on the farm's pooled samples"
            )
        return fit

    def kriged(self, name: str, variable: str, grid: PaddockGrid, xy: NDArray[np.float64],
               z: NDArray[np.float64], fit: _Fit, *, log: bool, notes: list[str]) -> Surface:
        """Ordinary kriging with the fitted model, its cross-validation and notes."""
        model = fit.model
        assert model is not None
        n = len(z)
        with _where(f"{name}, {variable}"):
            # the selection's cross-validation is this one when the variogram was
            # fitted on these very samples
            cv = (fit.cross_validation if fit.scope == "paddock"
                  and fit.cross_validation is not None
                  else _cross_validate(xy, np.log(z) if log else z, model, notes))
            if n > FIT_MAX_SAMPLES and name not in self.told_fit:
                self.told_fit.add(name)
                warnings.warn(
                    f"{n} samples, more than the {FIT_MAX_SAMPLES} a variogram is fitted "
                    f"and cross-validated on: {FIT_MAX_SAMPLES} of them, spread over the "
                    f"area, are used for that (the same each run); the kriging uses all {n}",
                    InterpolationWarning, stacklevel=2)  # _where names it
            near = self.neighbours(name, n, notes)
            est, std = _krige(xy, z, grid, model, log=log, neighbours=near)
        est = _physical(variable, est, notes)
        if not np.isfinite(cv.msse) or cv.msse > 3 or cv.msse < 1 / 3:
            notes.append(
                f"cross-validation MSSE {cv.msse:.2f} is far from 1: the error surface may "
                "under- or over-state the uncertainty"
            )
        return Surface(
            variable, name, est, std, "ordinary kriging", n, model=model,
            variogram_scope=fit.scope, empirical=fit.empirical, cross_validation=cv,
            candidates=fit.candidates, log_transform=log, notes=tuple(notes),
        )

    def neighbours(self, name: str, n: int, notes: list[str]) -> int:
        """The kriging neighbourhood: the setting, or above the global kriging ceiling each
        cell's nearest :data:`AUTO_NEIGHBOURS` samples (said once a paddock)."""
        near = self.settings.neighbours
        if near == 0 and n > GLOBAL_KRIGING_MAX_SAMPLES:
            near = AUTO_NEIGHBOURS
            msg = (f"{n} samples, more than the {GLOBAL_KRIGING_MAX_SAMPLES} global "
                   f"kriging is run on: each cell kriged from its nearest {near} "
                   "samples (set [interpolation] neighbours to choose)")
            notes.append(msg)
            if name not in self.told_local:
                self.told_local.add(name)
                warnings.warn(msg, InterpolationWarning, stacklevel=2)  # _where names it
        return near


def _cleared_cells(
    surfaces: Mapping[str, NDArray[np.float64]],
) -> tuple[dict[str, NDArray[np.float64]], list[str]]:
    """The surfaces as cell arrays with interpolation artefacts cleared (amounts below zero
    set to zero, ESP within 0-100 %) and surfaces without any value left out, with a note
    for each (Al above the acidity is lowered by the chemistry, ``exchange_chemistry``)."""
    cells: dict[str, NDArray[np.float64]] = {}
    notes: list[str] = []
    arrays = {v: np.array(arr, dtype=float) for v, arr in surfaces.items()}
    any_values = any(np.isfinite(a).any() for a in arrays.values())
    for v, a in arrays.items():
        if any_values and a.size and not np.isfinite(a).any():
            notes.append(f"{v}: no values in this paddock, left out")
            continue
        if v in _AMOUNTS:
            neg = a < 0
            if neg.any():
                notes.append(f"{v}: {int(neg.sum())} cells kriged below zero were set to zero")
                a[neg] = 0.0
        elif v == "esp":
            out = (a < 0) | (a > 100)
            if out.any():
                notes.append(f"esp: {int(out.sum())} cells outside 0-100 % were clipped to it")
                a = np.clip(a, 0.0, 100.0)
        cells[v] = a
    return cells, notes


def _basis_notes(chem: Mapping[str, Any], inside: NDArray[np.bool_]) -> list[str]:
    """How many cells took their ECEC from the lab's CEC or the CEC at pH 7, and how each
    cell's exchangeable acidity was made (Al + H, one of them, or 0 at a neutral pH)."""
    notes: list[str] = []
    basis = chem["ecec_basis"]
    n_lab = int(np.count_nonzero((basis == ECEC_BASES.index("lab CEC")) & inside))
    if n_lab:
        notes.append(f"ECEC taken from the lab's CEC on {n_lab} cell(s) (its parts are "
                     "incomplete there)")
    n_t7 = int(np.count_nonzero((basis == ECEC_BASES.index("CEC at pH 7")) & inside))
    if n_t7:
        notes.append(f"ECEC taken as the CEC at pH 7 on {n_t7} cell(s) (no exchangeable "
                     "acidity: above the ECEC on acid soils, so shares read low there)")
    for how in ("Al + H", "Al (H not measured)", "H (Al not measured)",
                "0 (neutral pH, not measured)"):
        n = int(np.count_nonzero((chem["acidity_basis"] == ACIDITY_BASES.index(how)) & inside))
        if n:
            notes.append(f"exchangeable acidity on {n} cell(s): {how}")
    return notes


def derive_cells(
    surfaces: Mapping[str, NDArray[np.float64]],
    settings: ChemistrySettings | None = None,
) -> tuple[dict[str, NDArray[np.float64]], list[str]]:
    """The cell chemistry of one paddock from its interpolated amounts.

    The chemistry is :func:`geosoil.chemistry.exchange_chemistry`, the same
    function that gives each sample its ECEC, saturations and ESP, so a cell
    and a sample with the same amounts agree (a flat field's cells equal its
    samples). Before it, interpolation artefacts are cleared: amounts below
    zero are set to zero, ESP is kept within 0-100 % and Al above the
    exchangeable acidity is lowered to it, with a note each; a surface without
    any value (a variable the paddock has no samples of) is left out, with a
    note.

    Parameters
    ----------
    surfaces
        Variable -> estimate array (cmol(+)/kg; ``esp`` percent; pH unitless),
        NaN outside.
    settings
        The chemistry settings (``neutral_ph``, ``neutral_ph_cacl2``); defaults when None.

    Returns
    -------
    cells, notes
        ``cells`` holds the amounts, ``ecec`` and the saturations ``ca_sat``,
        ``mg_sat``, ``k_sat``, ``na_sat``, ``esp``, ``acid_sat``, ``al_sat``
        (percent of the cell's ECEC), the exchangeable ``acidity`` the ECEC
        counts, and ``ph`` / ``ph_cacl2`` where given. A derived quantity that
        no cell has is left out (so a rule that needs it is reported as unable
        to run).

    Examples
    --------
    >>> cells, _ = derive_cells({"ca": np.array([6.0]), "mg": np.array([2.0]),
    ...                          "k": np.array([0.5]), "na": np.array([1.0]),
    ...                          "acidity": np.array([0.5])})
    >>> float(cells["ecec"][0]), float(cells["esp"][0])
    (10.0, 10.0)
    """
    cells, notes = _cleared_cells(surfaces)
    if not cells:
        return cells, notes
    chem = exchange_chemistry(
        {k: cells.get(k) for k in ("ca", "mg", "k", "na", "acidity", "al", "h", "cec",
                                   "cec_ph7", "acidity_potential", "ph", "ph_cacl2", "esp")},
        settings,
    )
    inside = np.zeros(np.shape(next(iter(cells.values()))), dtype=bool)
    for a in cells.values():
        inside |= np.isfinite(a)
    notes.extend(_basis_notes(chem, inside))
    lowered = np.asarray(chem["al_lowered"]) & inside
    if lowered.any():
        by = float(np.max(cells["al"][lowered] - chem["al"][lowered]))
        notes.append(f"al: {int(lowered.sum())} cells above the exchangeable acidity (by up to "
                     f"{by:.3g} cmol(+)/kg, kriged apart) were lowered to it")
    if "al" in cells:
        cells["al"] = np.asarray(chem["al"], dtype=float)
    for key in ("acidity", "ecec", "ca_sat", "mg_sat", "k_sat", "na_sat", "esp", "acid_sat",
                "al_sat"):
        value = np.asarray(chem[key], dtype=float)
        if np.isfinite(value).any():
            cells[key] = value
    if "na" not in cells and "esp" in cells and "ecec" in cells:
        # an estimate for the maps; the Na saturation stays empty, as for the samples
        cells["na"] = cells["esp"] / 100.0 * cells["ecec"]
        notes.append("ESP interpolated from SAR-based estimates (Na not measured)")
    return cells, notes
