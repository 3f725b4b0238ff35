"""Salinity, sodicity and dispersion: EC units, EC 1:5 to ECe, classes, CROSS, gypsum water.

Pure and vectorised: every function takes numbers or numpy arrays and returns
numbers or arrays; nothing reads a file. Sources and their status are listed
in ``docs/SOURCES.md`` ("Salinity, sodicity and dispersion").

EC units
    Electrical conductivity is carried in dS/m. 1 dS/m = 1 mS/cm = 1000 uS/cm
    = 100 mS/m [derived, SI prefixes].
EC 1:5 to ECe
    ECe = f x EC1:5 with f = 2.46 + 3.03 / theta_SP, theta_SP being the
    saturation water content in kg/kg (Slavich & Petterson 1993, Aust. J. Soil
    Res. 31:73; the equation confirmed). Where theta_SP is unknown, a multiplier
    by texture class is used (:data:`TEXTURE_MULTIPLIERS`; the multipliers are
    from memory, widely printed in Australian extension guides). The result is
    an estimate: its error is stated by :func:`ece_factor_error` (the part that
    comes from an uncertain theta_SP, derived) and the run says that ECe was
    converted, never measured.
Salinity classes (USDA Handbook 60, Richards 1954)
    ``normal``: ECe < 4 dS/m and ESP < 15; ``saline``: ECe >= 4, ESP < 15;
    ``sodic``: ECe < 4, ESP >= 15; ``saline-sodic``: ECe >= 4, ESP >= 15.
    Handbook 60 writes "more than 4" and "less than 15" and leaves the exact
    limits open; geosoil counts a value *at* a limit on the saline / sodic side
    (an implementation choice, matching the project's "sodic at ESP 15 or more").
CROSS (Rengasamy & Marchuk 2011, Soil Research 49:280)
    CROSS = (Na + 0.56 K) / sqrt((Ca + 0.6 Mg) / 2), all in mmol(c)/L of the
    soil solution (coefficients from memory). The later "optimised" CROSS uses
    other coefficients; it is not mixed in here.
Dispersion risk (after the ESP-against-EC diagram of Rengasamy et al. 1984)
    Three classes from ESP and EC 1:5 with straight-line boundaries, see
    :class:`DispersionLimits`. The original scheme (Aust. J. Soil Res. 22:413)
    plots SAR against total cation concentration of a 1:5 extract, was fitted on
    red-brown earths and does not apply to soils with free lime; the limits
    here are from memory and are settings.
Ca:Mg
    An exchangeable Ca:Mg ratio below 2 (cmol(+)/kg basis) is flagged as high
    Mg (common practice; some guides use 1).
Gypsum dissolving water
    Gypsum (CaSO4.2H2O) dissolves to about 2.5 g/L at 25 degrees C (common
    practice; figures of 2.4-2.6 g/L are printed). 1 t/ha = 100 g/m2, so pure
    gypsum needs about 100 / 2.5 = 40 mm of water per t/ha [derived]: the bare
    minimum, before any leaching of the displaced sodium.
Pretreatment for soluble salts
    Exchangeable Na is overstated where soluble salts were not washed out first.
    Where EC 1:5 is above 0.3 dS/m the lab should have pretreated (the threshold
    from memory, as used in Australian laboratory methods); geosoil warns,
    naming the samples, unless their soluble cations were subtracted
    (:func:`geosoil.chemistry.derive` with ``soluble_salts = "subtract"``).

Examples
--------
>>> round(float(ece_factor(theta_sp=0.60)), 2)
7.51
>>> float(to_ds_m(1500.0, "uS/cm"))
1.5
>>> salinity_class(6.0, 20.0)
'saline-sodic'
>>> round(float(cross(na=10.0, k=2.0, ca=4.0, mg=2.0)), 3)
6.896
>>> float(gypsum_water_mm(2.5))
100.0
"""

from __future__ import annotations

import dataclasses
import math
import warnings

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from .errors import DataWarning, SettingsError
from .settings import setting

__all__ = [
    "EC_UNITS",
    "TEXTURE_MULTIPLIERS",
    "SALINITY_CLASSES",
    "DISPERSION_CLASSES",
    "SALINE_ECE_DS_M",
    "SODIC_ESP_PERCENT",
    "GYPSUM_SOLUBILITY_G_L",
    "PRETREATMENT_EC15_DS_M",
    "CA_MG_LOW",
    "DispersionLimits",
    "SalinitySettings",
    "SAMPLE_COLUMNS",
    "derive_samples",
    "derive_cells",
    "CELL_LAYERS",
    "to_ds_m",
    "ece_factor",
    "ece_factor_error",
    "ece_from_ec15",
    "ec15_from_ece",
    "salinity_classes",
    "salinity_class",
    "sar",
    "cross",
    "dispersion_classes",
    "ca_mg_ratio",
    "high_mg",
    "gypsum_water_mm",
    "needs_pretreatment",
]

#: dS/m per one unit of each spelling [derived, SI prefixes].
EC_UNITS: dict[str, float] = {
    "ds/m": 1.0,
    "ms/cm": 1.0,
    "us/cm": 1e-3,
    "\u00b5s/cm": 1e-3,
    "\u03bcs/cm": 1e-3,
    "ms/m": 1e-2,
}

#: EC 1:5 -> ECe multipliers by texture class (from memory; Slavich & Petterson
#: 1993 as printed in Australian extension guides). Some guides give 17 for sand.
TEXTURE_MULTIPLIERS: dict[str, float] = {
    "sand": 23.0,
    "sandy loam": 14.0,
    "loam": 9.5,
    "clay loam": 8.6,
    "light clay": 8.6,
    "light-medium clay": 8.6,
    "medium clay": 7.5,
    "heavy clay": 5.8,
}

#: Class names, in code order (code -1 is "unknown": an input was missing).
SALINITY_CLASSES: tuple[str, ...] = ("normal", "saline", "sodic", "saline-sodic")
DISPERSION_CLASSES: tuple[str, ...] = ("flocculated", "potentially dispersive", "dispersive")

#: USDA Handbook 60 limits: ECe in dS/m (mmhos/cm) and ESP in percent.
SALINE_ECE_DS_M = 4.0
SODIC_ESP_PERCENT = 15.0
#: Gypsum (dihydrate) solubility at 25 degrees C, g/L (common practice).
GYPSUM_SOLUBILITY_G_L = 2.5
#: EC 1:5 above which the lab should pretreat for soluble salts, dS/m (from memory).
PRETREATMENT_EC15_DS_M = 0.3
#: Exchangeable Ca:Mg below which Mg is flagged as high (common practice).
CA_MG_LOW = 2.0


def _arr(x: ArrayLike) -> NDArray[np.float64]:
    return np.asarray(x, dtype=float)


def to_ds_m(values: ArrayLike, unit: str) -> NDArray[np.float64]:
    """Electrical conductivity in dS/m.

    Parameters
    ----------
    values : array_like
        Conductivities in ``unit``.
    unit : str
        One of dS/m, mS/cm, uS/cm (also written with a micro sign), mS/m;
        case is ignored.

    Returns
    -------
    ndarray
        Conductivities in dS/m.

    Raises
    ------
    SettingsError
        If the unit is not one of those.

    Examples
    --------
    >>> float(to_ds_m(0.6, "mS/cm")), float(to_ds_m(600, "uS/cm")), float(to_ds_m(60, "mS/m"))
    (0.6, 0.6, 0.6)
    """
    key = unit.strip().lower().replace(" ", "")
    if key not in EC_UNITS:
        raise SettingsError(
            f"EC unit {unit!r} is not known; use one of dS/m, mS/cm, uS/cm, mS/m"
        )
    return _arr(values) * EC_UNITS[key]


def _texture_key(texture: str) -> str:
    key = " ".join(texture.strip().lower().replace("_", " ").split())
    if key not in TEXTURE_MULTIPLIERS:
        raise SettingsError(
            f"texture {texture!r} has no EC 1:5 to ECe multiplier; use one of "
            + ", ".join(TEXTURE_MULTIPLIERS)
            + " (or give the saturation water content theta_sp)"
        )
    return key


def ece_factor(
    *, theta_sp: ArrayLike | None = None, texture: str | None = None
) -> NDArray[np.float64]:
    """The factor f in ECe = f x EC1:5 (Slavich & Petterson 1993).

    Parameters
    ----------
    theta_sp : array_like, optional
        Saturation water content, kg water per kg dry soil (0.1-1.5). When
        given, f = 2.46 + 3.03 / theta_sp (the equation, confirmed).
    texture : str, optional
        Texture class (a key of :data:`TEXTURE_MULTIPLIERS`, from memory), used
        when ``theta_sp`` is not given.

    Returns
    -------
    ndarray
        The factor (dimensionless).

    Raises
    ------
    SettingsError
        If neither or both are given, theta_sp is outside 0.1-1.5 kg/kg, or the
        texture is unknown.

    Examples
    --------
    >>> round(float(ece_factor(theta_sp=0.60)), 2)
    7.51
    >>> float(ece_factor(texture="Medium clay"))
    7.5
    """
    if (theta_sp is None) == (texture is None):
        raise SettingsError("give either theta_sp (kg/kg) or a texture class, not both or neither")
    if texture is not None:
        return np.asarray(TEXTURE_MULTIPLIERS[_texture_key(texture)], dtype=float)
    assert theta_sp is not None
    theta = _arr(theta_sp)
    bad = np.isfinite(theta) & ((theta < 0.1) | (theta > 1.5))
    if bad.any():
        raise SettingsError(
            f"saturation water content {float(theta[bad].flat[0])} kg/kg is outside 0.1-1.5; "
            "give it as a fraction (0.45), not percent (45)"
        )
    return 2.46 + 3.03 / theta


def ece_factor_error(theta_sp: ArrayLike, theta_sp_error: ArrayLike) -> NDArray[np.float64]:
    """Error of f that comes from an error in theta_SP (first order) [derived].

    |df| = 3.03 x d(theta) / theta**2. This is only the part of the error that
    comes from theta_SP; the scatter of the published fit itself adds to it.

    Examples
    --------
    >>> round(float(ece_factor_error(0.40, 0.05)), 3)  # f = 10.04 +- 0.95 (9 %)
    0.947
    """
    theta = _arr(theta_sp)
    return 3.03 * np.abs(_arr(theta_sp_error)) / theta**2


def ece_from_ec15(
    ec15_ds_m: ArrayLike, *, theta_sp: ArrayLike | None = None, texture: str | None = None
) -> NDArray[np.float64]:
    """ECe (dS/m) estimated from EC 1:5 (dS/m); see :func:`ece_factor`.

    Examples
    --------
    >>> round(float(ece_from_ec15(0.5, texture="loam")), 2)
    4.75
    """
    return _arr(ec15_ds_m) * ece_factor(theta_sp=theta_sp, texture=texture)


def ec15_from_ece(
    ece_ds_m: ArrayLike, *, theta_sp: ArrayLike | None = None, texture: str | None = None
) -> NDArray[np.float64]:
    """EC 1:5 (dS/m) from ECe (dS/m): the inverse of :func:`ece_from_ec15`.

    Examples
    --------
    >>> float(ec15_from_ece(4.75, texture="loam"))
    0.5
    """
    return _arr(ece_ds_m) / ece_factor(theta_sp=theta_sp, texture=texture)


def salinity_classes(
    ece_ds_m: ArrayLike,
    esp_percent: ArrayLike,
    *,
    saline_ece: float = SALINE_ECE_DS_M,
    sodic_esp: float = SODIC_ESP_PERCENT,
) -> NDArray[np.int8]:
    """USDA Handbook 60 class codes: index into :data:`SALINITY_CLASSES`, -1 unknown.

    A value at a limit counts as saline (ECe >= 4) or sodic (ESP >= 15).

    Examples
    --------
    >>> salinity_classes([6, 6, 2, 2, float("nan")], [10, 20, 25, 5, 5]).tolist()
    [1, 3, 2, 0, -1]
    """
    ece = _arr(ece_ds_m)
    esp = _arr(esp_percent)
    ece, esp = np.broadcast_arrays(ece, esp)
    code = (ece >= saline_ece).astype(np.int8) + 2 * (esp >= sodic_esp).astype(np.int8)
    code = np.array(code, dtype=np.int8, ndmin=1).reshape(ece.shape)
    code[~(np.isfinite(ece) & np.isfinite(esp))] = -1
    return code


def salinity_class(
    ece_ds_m: float,
    esp_percent: float,
    *,
    saline_ece: float = SALINE_ECE_DS_M,
    sodic_esp: float = SODIC_ESP_PERCENT,
) -> str | None:
    """The USDA Handbook 60 class of one sample (``None`` when a value is missing).

    Examples
    --------
    >>> salinity_class(6, 10), salinity_class(2, 25), salinity_class(2, 5)
    ('saline', 'sodic', 'normal')
    """
    code = int(salinity_classes(ece_ds_m, esp_percent, saline_ece=saline_ece, sodic_esp=sodic_esp))
    return None if code < 0 else SALINITY_CLASSES[code]


def sar(*, na: ArrayLike, ca: ArrayLike, mg: ArrayLike) -> NDArray[np.float64]:
    """Sodium adsorption ratio Na / sqrt((Ca + Mg) / 2), mmol(c)/L (USDA Handbook 60).

    Examples
    --------
    >>> round(float(sar(na=10.0, ca=4.0, mg=2.0)), 3)
    5.774
    """
    return _arr(na) / np.sqrt((_arr(ca) + _arr(mg)) / 2.0)


def cross(*, na: ArrayLike, k: ArrayLike, ca: ArrayLike, mg: ArrayLike) -> NDArray[np.float64]:
    """Cation ratio of soil structural stability (Rengasamy & Marchuk 2011).

    CROSS = (Na + 0.56 K) / sqrt((Ca + 0.6 Mg) / 2), soil-solution
    concentrations in mmol(c)/L. With no K and Mg it equals the SAR.

    Examples
    --------
    >>> round(float(cross(na=5.0, k=5.0, ca=2.0, mg=6.0)), 3)
    4.661
    """
    return (_arr(na) + 0.56 * _arr(k)) / np.sqrt((_arr(ca) + 0.6 * _arr(mg)) / 2.0)


@dataclasses.dataclass(frozen=True, kw_only=True)
class DispersionLimits:
    """Straight-line limits of the dispersion classes in the ESP / EC 1:5 plane.

    After the diagram of Rengasamy et al. (1984); these numbers are from
    memory, not read off the published figure, and are settings.

    - ``flocculated`` where EC 1:5 >= ``floc_intercept`` + ``floc_slope`` x ESP
      (enough salt keeps the clay together, whatever the sodium);
    - ``dispersive`` (spontaneously) where ESP >= ``dispersive_esp_min`` and
      EC 1:5 < ``dispersive_slope`` x ESP;
    - ``potentially dispersive`` (disperses when worked wet) in between.
    """

    floc_intercept: float = 0.1
    floc_slope: float = 0.05
    dispersive_esp_min: float = 6.0
    dispersive_slope: float = 0.02

    def __post_init__(self) -> None:
        for f in dataclasses.fields(self):
            value = getattr(self, f.name)
            if not (math.isfinite(value) and value >= 0):
                raise SettingsError(f"dispersion limit {f.name} = {value!r} must be a number >= 0")
        if self.dispersive_slope > self.floc_slope:
            raise SettingsError(
                "dispersion limits: dispersive_slope must not exceed floc_slope "
                "(the dispersive line lies below the flocculation line)"
            )


def dispersion_classes(
    esp_percent: ArrayLike, ec15_ds_m: ArrayLike, *, limits: DispersionLimits | None = None
) -> NDArray[np.int8]:
    """Dispersion-risk codes: index into :data:`DISPERSION_CLASSES`, -1 unknown.

    Examples
    --------
    >>> dispersion_classes([2, 10, 10, 20], [0.5, 0.1, 0.4, 2.0]).tolist()
    [0, 2, 1, 0]
    """
    lim = limits or DispersionLimits()
    esp, ec = np.broadcast_arrays(_arr(esp_percent), _arr(ec15_ds_m))
    code = np.ones(esp.shape, dtype=np.int8).reshape(esp.shape)
    dispersive = (esp >= lim.dispersive_esp_min) & (ec < lim.dispersive_slope * esp)
    code[dispersive] = 2
    code[ec >= lim.floc_intercept + lim.floc_slope * esp] = 0
    code[~(np.isfinite(esp) & np.isfinite(ec))] = -1
    return code


def ca_mg_ratio(ca: ArrayLike, mg: ArrayLike) -> NDArray[np.float64]:
    """Exchangeable Ca:Mg on a charge basis (cmol(+)/kg); NaN where Mg is 0 or missing.

    Examples
    --------
    >>> ca_mg_ratio([6.0, 3.0], [2.0, 0.0]).tolist()
    [3.0, nan]
    """
    ca_a, mg_a = np.broadcast_arrays(_arr(ca), _arr(mg))
    out = np.full(ca_a.shape, np.nan)
    ok = np.isfinite(ca_a) & np.isfinite(mg_a) & (mg_a > 0)
    out[ok] = ca_a[ok] / mg_a[ok]
    return out


def high_mg(ca: ArrayLike, mg: ArrayLike, *, ca_mg_low: float = CA_MG_LOW) -> NDArray[np.bool_]:
    """True where Ca:Mg is below ``ca_mg_low`` (2, common practice): Mg is high.

    Examples
    --------
    >>> high_mg([6.0, 3.0, 1.0], [2.0, 2.0, 0.0]).tolist()
    [False, True, False]
    """
    ratio = ca_mg_ratio(ca, mg)
    return np.isfinite(ratio) & (ratio < ca_mg_low)


def gypsum_water_mm(
    rate_t_ha: ArrayLike,
    *,
    gypsum_fraction: float = 1.0,
    solubility_g_l: float = GYPSUM_SOLUBILITY_G_L,
) -> NDArray[np.float64]:
    """Water (mm) that dissolves a gypsum rate: the bare minimum, not the leaching.

    1 t/ha is 100 g/m2, and 1 mm of water is 1 L/m2, so
    mm = rate (t/ha) x 100 x fraction / solubility (g/L) [derived]; 1 t/ha of
    pure gypsum needs 40 mm at 2.5 g/L.

    Parameters
    ----------
    rate_t_ha : array_like
        Product rate, t/ha.
    gypsum_fraction : float
        Mass fraction of the product that is CaSO4.2H2O (0-1).
    solubility_g_l : float
        Solubility of the dihydrate, g/L (2.5 at 25 degrees C, common practice).

    Examples
    --------
    >>> float(gypsum_water_mm(1.0)), float(gypsum_water_mm(5.0, gypsum_fraction=0.8))
    (40.0, 160.0)
    """
    if not 0 < gypsum_fraction <= 1:
        raise SettingsError(f"gypsum fraction {gypsum_fraction!r} must be in (0, 1]")
    if not solubility_g_l > 0:
        raise SettingsError(f"gypsum solubility {solubility_g_l!r} g/L must be > 0")
    return _arr(rate_t_ha) * 100.0 * gypsum_fraction / solubility_g_l


def needs_pretreatment(
    ec15_ds_m: ArrayLike, *, threshold_ds_m: float = PRETREATMENT_EC15_DS_M
) -> NDArray[np.bool_]:
    """True where EC 1:5 is above the level at which the lab should wash out soluble salts.

    Exchangeable Na measured without that pretreatment includes soluble Na, so
    ESP is overstated. The 0.3 dS/m threshold is from memory.

    Examples
    --------
    >>> needs_pretreatment([0.06, 0.3, 0.45]).tolist()
    [False, False, True]
    """
    ec = _arr(ec15_ds_m)
    return np.isfinite(ec) & (ec > threshold_ds_m)


@dataclasses.dataclass(frozen=True)
class SalinitySettings:
    """How EC is turned into ECe and the limits of the salinity and dispersion classes."""

    texture: str | None = setting(
        None,
        doc="texture class for EC 1:5 -> ECe (Slavich & Petterson 1993 multipliers, from "
        "memory): " + ", ".join(TEXTURE_MULTIPLIERS) + "; unset: ECe only where measured",
        choices=tuple(TEXTURE_MULTIPLIERS),
    )
    theta_sp: float | None = setting(
        None,
        doc="saturation water content for EC 1:5 -> ECe, f = 2.46 + 3.03 / theta_sp "
        "(Slavich & Petterson 1993); used instead of texture when set",
        unit="kg/kg",
        minimum=0.1,
        maximum=1.5,
    )
    saline_ece_ds_m: float = setting(
        SALINE_ECE_DS_M, doc="ECe at or above which a soil is saline (USDA Handbook 60)",
        unit="dS/m", minimum=0.0,
    )
    sodic_esp_percent: float = setting(
        SODIC_ESP_PERCENT, doc="ESP at or above which a soil is sodic in the salinity classes "
        "(USDA Handbook 60)", unit="%", minimum=0.0, maximum=100.0,
    )
    pretreatment_ec_1_5_ds_m: float = setting(
        PRETREATMENT_EC15_DS_M, doc="EC 1:5 above which the lab should have washed out soluble "
        "salts before measuring exchangeable Na (from memory)", unit="dS/m", minimum=0.0,
    )
    ca_mg_low: float = setting(
        CA_MG_LOW, doc="exchangeable Ca:Mg below which Mg is flagged high (common practice)",
        minimum=0.0,
    )
    gypsum_solubility_g_l: float = setting(
        GYPSUM_SOLUBILITY_G_L, doc="solubility of gypsum (CaSO4.2H2O) at 25 degrees C "
        "(common practice)", unit="g/L", minimum=0.1, maximum=10.0,
    )

    def ece_factor(self) -> float | None:
        """The EC 1:5 -> ECe factor these settings give, or None when neither is set."""
        if self.theta_sp is not None:
            return float(ece_factor(theta_sp=self.theta_sp))
        if self.texture is not None:
            return float(ece_factor(texture=self.texture))
        return None

    def ece_basis_text(self) -> str:
        """How ECe is estimated from EC 1:5, in words."""
        if self.theta_sp is not None:
            f = float(ece_factor(theta_sp=self.theta_sp))
            return (f"ECe = {f:.2f} x EC 1:5 (Slavich & Petterson 1993, saturation water "
                    f"content {self.theta_sp:g} kg/kg)")
        if self.texture is not None:
            f = float(ece_factor(texture=self.texture))
            return (f"ECe = {f:g} x EC 1:5 (Slavich & Petterson 1993 multiplier for "
                    f"{self.texture}, from memory)")
        return "no EC 1:5 -> ECe conversion (set [salinity] texture or theta_sp)"


#: Columns :func:`derive_samples` adds to the samples table (where it can).
SAMPLE_COLUMNS: tuple[str, ...] = (
    "ece", "ece_estimated", "salinity_class", "dispersion_class", "high_mg",
    "pretreatment_needed", "cross",
)


def _col(table: pd.DataFrame, name: str) -> NDArray[np.float64]:
    if name not in table.columns:
        return np.full(len(table), np.nan)
    return pd.to_numeric(table[name], errors="coerce").to_numpy(dtype=float)


def _names(codes: NDArray[np.int8], names: tuple[str, ...]) -> list[str | None]:
    return [names[c] if c >= 0 else None for c in codes.tolist()]


def derive_samples(table: pd.DataFrame, settings: SalinitySettings | None = None) -> pd.DataFrame:
    """The samples table with ECe, salinity and dispersion classes and the Mg and salt flags.

    Reads ``ec_1_5`` and ``ece`` (dS/m), ``esp`` (%), ``ca`` and ``mg``
    (cmol(+)/kg). A measured ECe is kept; otherwise ECe is estimated from EC 1:5
    when ``settings`` give a texture or theta_SP (``ece_estimated`` True), and
    a :class:`~geosoil.errors.DataWarning` says so when they do not. Samples
    above the pretreatment threshold are named in a warning: their exchangeable
    Na (and ESP) may include soluble Na.

    Examples
    --------
    >>> t = pd.DataFrame({"sample_id": ["A"], "ec_1_5": [0.8], "esp": [20.0],
    ...                   "ca": [3.0], "mg": [2.0]})
    >>> with warnings.catch_warnings(record=True):  # ECe estimated; EC above 0.3 dS/m
    ...     out = derive_samples(t, SalinitySettings(texture="loam"))
    >>> round(float(out.ece[0]), 3), out.salinity_class[0], out.dispersion_class[0]
    (7.6, 'saline-sodic', 'potentially dispersive')
    >>> bool(out.high_mg[0]), bool(out.pretreatment_needed[0])
    (True, True)
    """
    s = settings or SalinitySettings()
    out = table.copy()
    ec15 = _col(out, "ec_1_5")
    ece = _col(out, "ece")
    esp = _col(out, "esp")
    ids = out["sample_id"].astype(str).tolist() if "sample_id" in out.columns else [
        str(i) for i in range(len(out))]
    if {"depth_top_cm", "depth_bottom_cm"} <= set(out.columns):
        # samples at several depths share IDs: name the depth too
        depths = list(zip(out["depth_top_cm"], out["depth_bottom_cm"], strict=True))
        if len(set(depths)) > 1:
            ids = [f"{i} ({t:g}-{b:g} cm)" for i, (t, b) in zip(ids, depths, strict=True)]
    has_ec15 = bool(np.isfinite(ec15).any())
    has_ece = bool(np.isfinite(ece).any())
    factor = s.ece_factor()
    estimated = np.zeros(len(out), dtype=bool)
    if has_ec15:
        gap = ~np.isfinite(ece) & np.isfinite(ec15)
        if factor is not None:
            ece = np.where(gap, ec15 * factor, ece)
            estimated = gap
        elif gap.any():
            warnings.warn(
                f"{int(gap.sum())} samples have EC 1:5 but no ECe: no salinity class for them "
                "(ECe from EC 1:5 needs the soil's texture: set [salinity] texture = '"
                + "' | '".join(TEXTURE_MULTIPLIERS) + "', or theta_sp)",
                DataWarning, stacklevel=2,
            )
        if factor is not None and estimated.any():
            warnings.warn(
                f"ECe of {int(estimated.sum())} samples is estimated, not measured: "
                + s.ece_basis_text() + "; the factor is uncertain (see docs/SOURCES.md)",
                DataWarning, stacklevel=2,
            )
        high = needs_pretreatment(ec15, threshold_ds_m=s.pretreatment_ec_1_5_ds_m)
        out["pretreatment_needed"] = high
        # samples whose soluble cations were subtracted ([chemistry] soluble_salts =
        # "subtract", chemistry.derive) are corrected, not in doubt
        done = (out["soluble_subtracted"].to_numpy(dtype=bool)
                if "soluble_subtracted" in out.columns else np.zeros(len(out), dtype=bool))
        doubt = high & ~done
        if doubt.any():
            named = ", ".join(ids[i] for i in np.flatnonzero(doubt)[:10])
            more = "" if doubt.sum() <= 10 else f" and {int(doubt.sum()) - 10} more"
            has_na_sol = "na_sol" in out.columns and bool(
                np.isfinite(_col(out, "na_sol")[doubt]).any())
            how = ("the file gives their soluble cations of a water extract: if the lab did "
                   "not wash the salts out, set [chemistry] soluble_salts = 'subtract' to take "
                   "them off" if has_na_sol and not done.any() else
                   "geosoil subtracts them where the file gives the soluble cations of a water "
                   "extract and [chemistry] soluble_salts = 'subtract'; else ask the lab for "
                   "the pretreated method")
            warnings.warn(
                f"EC 1:5 above {s.pretreatment_ec_1_5_ds_m:g} dS/m at samples {named}{more}: "
                "the lab should have washed out soluble salts before measuring exchangeable "
                "cations; ask whether it did: if not, their exchangeable Na and ESP, and the "
                f"gypsum for them, are overstated ({how})",
                DataWarning, stacklevel=2,
            )
    if has_ec15 or has_ece:
        out["ece"] = ece
        out["ece_estimated"] = estimated
        codes = salinity_classes(ece, esp, saline_ece=s.saline_ece_ds_m,
                                 sodic_esp=s.sodic_esp_percent)
        out["salinity_class"] = _names(codes, SALINITY_CLASSES)
        ec15_all = ec15.copy()
        if factor is not None:
            back = ~np.isfinite(ec15_all) & np.isfinite(ece)
            ec15_all[back] = ece[back] / factor
        out["dispersion_class"] = _names(dispersion_classes(esp, ec15_all), DISPERSION_CLASSES)
    sol = [_col(out, c) for c in ("na_sol", "k_sol", "ca_sol", "mg_sol")]
    if all(np.isfinite(c).any() for c in sol):
        with np.errstate(divide="ignore", invalid="ignore"):
            out["cross"] = cross(na=sol[0], k=sol[1], ca=sol[2], mg=sol[3])
    # the ratio chemistry.derive made where it ran (one quantity, one function)
    if "ca_mg_ratio" in out.columns:
        ratio = _col(out, "ca_mg_ratio")
        out["high_mg"] = np.isfinite(ratio) & (ratio < s.ca_mg_low)
    elif "ca" in out.columns and "mg" in out.columns:
        out["high_mg"] = high_mg(_col(out, "ca"), _col(out, "mg"), ca_mg_low=s.ca_mg_low)
    return out


#: Cell layers :func:`derive_cells` adds (class layers hold the class code, NaN unknown).
CELL_LAYERS: tuple[str, ...] = ("ece", "salinity_class", "dispersion_class", "cross")


def derive_cells(
    cells: dict[str, NDArray[np.float64]], settings: SalinitySettings | None = None
) -> dict[str, NDArray[np.float64]]:
    """ECe, salinity class and dispersion class of each cell of a paddock.

    ``cells`` are a paddock's derived cells (:func:`geosoil.surfaces.derive_cells`,
    whose ``esp`` is each cell's Na over that cell's ECEC): ECe is the kriged
    ECe where the lab measured it, else the kriged EC 1:5 times the factor of
    ``settings`` (the factor is one number for the farm, so scaling the kriged
    EC 1:5 is the same as kriging the scaled values). Class layers hold the code
    (index into :data:`SALINITY_CLASSES` / :data:`DISPERSION_CLASSES`) as a
    float, NaN where a value is missing. Layers that cannot be made are left out.

    Examples
    --------
    >>> out = derive_cells({"ec_1_5": np.array([0.5, 0.1]), "esp": np.array([20.0, 3.0])},
    ...                    SalinitySettings(texture="loam"))
    >>> out["ece"].round(3).tolist(), out["salinity_class"].tolist()
    ([4.75, 0.95], [3.0, 0.0])
    >>> out["dispersion_class"].tolist()  # low EC: even ESP 3 may disperse when worked
    [1.0, 1.0]
    """
    s = settings or SalinitySettings()
    factor = s.ece_factor()
    out: dict[str, NDArray[np.float64]] = {}
    ec15 = cells.get("ec_1_5")
    ece = cells.get("ece")
    if ece is None and ec15 is not None and factor is not None:
        ece = ec15 * factor
    if ec15 is None and ece is not None and factor is not None:
        ec15 = ece / factor
    esp = cells.get("esp")
    if ece is not None:
        out["ece"] = np.asarray(ece, dtype=float)
        if esp is not None:
            code = salinity_classes(ece, esp, saline_ece=s.saline_ece_ds_m,
                                    sodic_esp=s.sodic_esp_percent).astype(float)
            code[code < 0] = np.nan
            out["salinity_class"] = code
    if ec15 is not None and esp is not None:
        code = dispersion_classes(esp, ec15).astype(float)
        code[code < 0] = np.nan
        out["dispersion_class"] = code
    sol = [cells.get(c) for c in ("na_sol", "k_sol", "ca_sol", "mg_sol")]
    if all(c is not None for c in sol):
        with np.errstate(divide="ignore", invalid="ignore"):
            out["cross"] = cross(na=sol[0], k=sol[1], ca=sol[2], mg=sol[3])  # type: ignore[arg-type]
    return out
