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

A paddock without samples is an error naming it, unless
``borrow_farm_surface`` is on: it is then kriged from the whole farm's samples.
"""

from __future__ import annotations

import logging
import warnings
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import shapely
from numpy.typing import NDArray

from .errors import InputError, InterpolationWarning, SettingsError
from .grids import PaddockGrid
from .kriging import (
    CrossValidation,
    idw,
    loo_cross_validation,
    lognormal_backtransform,
    ordinary_kriging,
)
from .settings import setting
from .variogram import EmpiricalVariogram, VariogramModel, empirical, select_model

__all__ = [
    "INTERPOLATED",
    "FixedVariogram",
    "InterpolationSettings",
    "Surface",
    "interpolate_farm",
    "derive_cells",
    "variables_to_interpolate",
]

logger = logging.getLogger(__name__)

#: Variables geosoil interpolates when the samples carry them, in this order.
INTERPOLATED: tuple[str, ...] = ("ca", "mg", "k", "na", "acidity", "al", "cec", "ph", "esp")

_MODELS = ("spherical", "exponential", "gaussian", "matern")


@dataclass(frozen=True)
class FixedVariogram:
    """A variogram the user fixes for one variable instead of fitting it."""

    model: str = setting("spherical", doc="variogram model", choices=_MODELS)
    nugget: float = setting(0.0, doc="nugget (variable's unit squared)", minimum=0.0)
    psill: float = setting(1.0, doc="partial sill (variable's unit squared)", exclusive_minimum=True, minimum=0.0)
    range_m: float = setting(100.0, doc="practical range", unit="m", exclusive_minimum=True, minimum=0.0)
    nu: float | None = setting(None, doc="Matern smoothness (matern only)", exclusive_minimum=True, minimum=0.0)

    def as_model(self) -> VariogramModel:
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
    idw_power: float = setting(2.0, doc="power of inverse-distance weighting", minimum=0.5, maximum=6.0)
    borrow_farm_surface: bool = setting(
        False, doc="krige a paddock without samples from the whole farm's samples"
    )
    fixed: dict[str, FixedVariogram] = setting(
        default_factory=dict, doc="variograms fixed per variable instead of fitted"
    )

    def __post_init__(self) -> None:
        for m in self.models:
            if m not in _MODELS:
                raise SettingsError(f"'{m}' is not a model; allowed: {', '.join(_MODELS)}", key="models")
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
    estimated from SAR); ``cec`` only when the parts of an ECEC are incomplete.
    """
    have = [
        v
        for v in INTERPOLATED
        if v in samples.columns and samples[v].notna().any()
    ]
    parts = {"ca", "mg", "k", "na"}
    if "na" in have and "esp" in have:
        have.remove("esp")
    if parts <= set(have) and "cec" in have:
        have.remove("cec")
    return have


def _xy(gdf: gpd.GeoDataFrame) -> NDArray[np.float64]:
    return np.column_stack([gdf.geometry.x.to_numpy(), gdf.geometry.y.to_numpy()])


@dataclass(frozen=True)
class _Fit:
    model: VariogramModel | None
    empirical: EmpiricalVariogram | None
    candidates: tuple[tuple[str, float, float], ...]
    scope: str
    note: str | None


def _fit_variogram(
    xy: NDArray[np.float64],
    z: NDArray[np.float64],
    *,
    variable: str,
    settings: InterpolationSettings,
    scope: str,
) -> _Fit:
    dmax = float(np.max(np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))))
    max_lag = dmax * settings.max_lag_fraction
    emp = empirical(xy, z, n_lags=settings.n_lags, max_lag=max_lag)
    if variable in settings.fixed:
        return _Fit(settings.fixed[variable].as_model(), emp, (), scope, "variogram fixed in the project")
    sel = select_model(
        xy, z, candidates=settings.models, n_lags=settings.n_lags, max_lag=max_lag
    )
    cands = tuple(
        (c.model.name, float(c.cross_validation.rmse), float(c.cross_validation.msse))
        for c in sel.candidates
    )
    return _Fit(sel.model, emp, cands, scope, None)


def _flat(grid: PaddockGrid, value: float) -> NDArray[np.float64]:
    return grid.to_array(np.full(int(grid.mask.sum()), value, dtype=float))


def _zone_values(
    grid: PaddockGrid, pts: gpd.GeoDataFrame, variable: str, zones: gpd.GeoDataFrame
) -> NDArray[np.float64] | None:
    """Each user zone takes the value of the one sample inside it (None if not that design)."""
    hits = gpd.sjoin(pts[[variable, "geometry"]], zones[["geometry"]], predicate="within", how="left")
    if hits["index_right"].isna().any() or hits["index_right"].duplicated().any():
        return None
    x, y = grid.cell_centres()
    cells = shapely.points(x, y)
    out = np.full(cells.shape, np.nan)
    for zi, value in zip(hits["index_right"].astype(int), hits[variable], strict=True):
        inside = shapely.contains_xy(zones.geometry.iloc[zi], x, y)
        out[inside] = value
    if np.isnan(out).any():
        # cells outside every zone take the nearest zone's value
        filled = ~np.isnan(out)
        if not filled.any():
            return None
        from scipy.spatial import cKDTree

        tree = cKDTree(np.column_stack([x[filled], y[filled]]))
        _, idx = tree.query(np.column_stack([x[~filled], y[~filled]]))
        out[~filled] = out[filled][idx]
    return grid.to_array(out)


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
    kw = {"neighbours": neighbours or None}
    if log:
        est_l, var_l, lagr = ordinary_kriging(
            xy, np.log(z), target, model, return_lagrange=True, **kw
        )
        est, var = lognormal_backtransform(est_l, var_l, lagr)
    else:
        est, var = ordinary_kriging(xy, z, target, model, **kw)
    return grid.to_array(est), grid.to_array(np.sqrt(np.maximum(var, 0.0)))


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
    """
    out: dict[tuple[str, str], Surface] = {}
    farm_fits: dict[str, _Fit] = {}

    def farm_fit(variable: str) -> _Fit:
        if variable not in farm_fits:
            pts = samples[samples[variable].notna()]
            z = pts[variable].to_numpy(float)
            log = variable in settings.log_transform and bool(np.all(z > 0))
            farm_fits[variable] = _fit_variogram(
                _xy(pts), np.log(z) if log else z, variable=variable, settings=settings, scope="farm"
            )
        return farm_fits[variable]

    for name, grid in grids.items():
        in_paddock = samples[samples["paddock"] == name]
        if in_paddock.empty and not settings.borrow_farm_surface:
            raise InputError(
                f"paddock '{name}' has no samples",
                fix="sample it, leave it out of the boundaries file, or set "
                "[interpolation] borrow_farm_surface = true to krige it from the whole farm",
            )
        zones_here = None
        if user_zones is not None and not user_zones.empty:
            zones_here = user_zones[user_zones.intersects(_grid_outline(grid))]
        for variable in variables:
            if progress:
                progress(f"surfaces: {name}: {variable}")
            borrowed = in_paddock.empty
            pts = samples if borrowed else in_paddock
            pts = pts[pts[variable].notna()]
            notes: list[str] = []
            if borrowed:
                notes.append("no samples in this paddock: kriged from the whole farm's samples")
            n = len(pts)
            if n == 0:
                notes.append(f"no {variable} values in this paddock: surface left empty")
                out[(name, variable)] = Surface(
                    variable, name, grid.to_array(np.full(int(grid.mask.sum()), np.nan)), None,
                    "none", 0, notes=tuple(notes),
                )
                continue
            z = pts[variable].to_numpy(float)
            xy = _xy(pts)
            if n == 1 or np.ptp(z) == 0:
                notes.append(
                    "one sample" if n == 1 else f"all {n} samples equal"
                )
                notes[-1] += f": flat surface at {z[0]:g}"
                out[(name, variable)] = Surface(
                    variable, name, _flat(grid, float(z[0])), None, "flat", n, notes=tuple(notes)
                )
                continue
            if zones_here is not None and len(zones_here) and n <= len(zones_here):
                zv = _zone_values(grid, pts, variable, zones_here)
                if zv is not None:
                    notes.append(
                        f"{n} composite samples, one per management zone: each zone takes its sample's value"
                    )
                    out[(name, variable)] = Surface(
                        variable, name, zv, None, "zone values", n, notes=tuple(notes)
                    )
                    continue
            if n < settings.min_samples_kriging:
                msg = (
                    f"{n} samples, fewer than min_samples_kriging = {settings.min_samples_kriging}: "
                    f"inverse-distance weighting (power {settings.idw_power:g}), no error surface"
                )
                notes.append(msg)
                warnings.warn(f"{name}, {variable}: {msg}", InterpolationWarning, stacklevel=2)
                x, y = grid.cell_centres()
                est = idw(xy, z, np.column_stack([x, y]), power=settings.idw_power)
                out[(name, variable)] = Surface(
                    variable, name, grid.to_array(est), None, "inverse-distance weighting", n,
                    notes=tuple(notes),
                )
                continue
            log = variable in settings.log_transform and bool(np.all(z > 0))
            if variable in settings.log_transform and not log:
                notes.append("values of zero or less: kriged without the log transform")
            zt = np.log(z) if log else z
            use_farm = borrowed or settings.variogram_scope == "farm" or (
                settings.variogram_scope == "auto" and n < settings.min_samples_variogram
            )
            if use_farm:
                fit = farm_fit(variable)
                if not borrowed:
                    notes.append(
                        f"{n} samples: variogram fitted on the farm's pooled samples"
                        if settings.variogram_scope == "auto"
                        else "variogram fitted on the farm's pooled samples"
                    )
            else:
                fit = _fit_variogram(xy, zt, variable=variable, settings=settings, scope="paddock")
            if fit.note:
                notes.append(fit.note)
            model = fit.model
            assert model is not None
            cv = loo_cross_validation(xy, zt, model)
            est, std = _krige(
                xy, z, grid, model, log=log, neighbours=settings.neighbours
            )
            if not np.isfinite(cv.msse) or cv.msse > 3 or cv.msse < 1 / 3:
                notes.append(
                    f"cross-validation MSSE {cv.msse:.2f} is far from 1: the error surface may "
                    "under- or over-state the uncertainty"
                )
            out[(name, variable)] = Surface(
                variable, name, est, std, "ordinary kriging", n, model=model,
                variogram_scope=fit.scope, empirical=fit.empirical, cross_validation=cv,
                candidates=fit.candidates, log_transform=log, notes=tuple(notes),
            )
    return out


def _grid_outline(grid: PaddockGrid) -> shapely.Geometry:
    left, bottom, right, top = grid.bounds
    return shapely.box(left, bottom, right, top)


def derive_cells(
    surfaces: Mapping[str, NDArray[np.float64]],
) -> tuple[dict[str, NDArray[np.float64]], list[str]]:
    """The cell chemistry of one paddock from its interpolated amounts.

    Parameters
    ----------
    surfaces
        Variable -> estimate array (cmol(+)/kg; pH unitless), NaN outside.

    Returns
    -------
    cells, notes
        ``cells`` holds the amounts (negative kriged values set to zero),
        ``ecec`` and the saturations ``ca_sat``, ``mg_sat``, ``k_sat``,
        ``na_sat``, ``esp``, ``acid_sat``, ``al_sat`` (percent of the cell's
        ECEC) and ``ph`` where given.

    Examples
    --------
    >>> cells, _ = derive_cells({"ca": np.array([6.0]), "mg": np.array([2.0]),
    ...                          "k": np.array([0.5]), "na": np.array([1.0]),
    ...                          "acidity": np.array([0.5])})
    >>> float(cells["ecec"][0]), float(cells["esp"][0])
    (10.0, 10.0)
    """
    cells: dict[str, NDArray[np.float64]] = {}
    notes: list[str] = []
    for v, arr in surfaces.items():
        a = np.array(arr, dtype=float)
        if v in ("ca", "mg", "k", "na", "acidity", "al", "cec"):
            neg = a < 0
            if neg.any():
                notes.append(f"{v}: {int(neg.sum())} cells kriged below zero were set to zero")
                a[neg] = 0.0
        cells[v] = a
    parts = [p for p in ("ca", "mg", "k", "na", "acidity") if p in cells]
    if {"ca", "mg", "k", "na"} <= set(parts):
        ecec = sum(cells[p] for p in parts)
        if "acidity" not in cells:
            notes.append("no exchangeable acidity: ECEC is the sum of Ca, Mg, K and Na")
        cells["ecec"] = ecec
    elif "cec" in cells:
        cells["ecec"] = cells["cec"]
        notes.append("ECEC taken from the lab's CEC (its parts are incomplete)")
    if "ecec" in cells:
        with np.errstate(invalid="ignore", divide="ignore"):
            ecec = cells["ecec"]
            for p, name in (("ca", "ca_sat"), ("mg", "mg_sat"), ("k", "k_sat"),
                            ("na", "na_sat"), ("acidity", "acid_sat"), ("al", "al_sat")):
                if p in cells:
                    cells[name] = np.clip(np.where(ecec > 0, 100.0 * cells[p] / ecec, 0.0), 0, 100)
                    cells[name][np.isnan(ecec)] = np.nan
            if "na_sat" in cells:
                cells["esp"] = cells["na_sat"]
            elif "esp" in cells:
                cells["na"] = cells["esp"] / 100.0 * ecec
                cells["na_sat"] = cells["esp"]
                notes.append("ESP interpolated from SAR-based estimates (Na not measured)")
    return cells, notes
