"""Units of soil chemistry and of application rates.

Exchangeable cations are carried through geosoil in cmol(+)/kg
(= meq/100 g = 10 mmol(+)/kg). Masses per charge come from the standard
atomic weights (IUPAC, abridged values), never from rounded rules of thumb.

Rates are carried in kg/ha; t/ha and lb/ac are for display and files.
1 lb/ac = 0.45359237 kg / 4046.8564224 m2, both exact by definition
(NIST SP 811), so the factor below is exact as a ratio.

Examples
--------
>>> round(mg_per_cmol("ca"), 2)   # mg/kg of Ca in 1 cmol(+)/kg
200.39
>>> float(kg_per_ha_of_layer(depth_m=0.2, bulk_density_g_cm3=1.3))   # soil mass, kg/ha
2600000.0
>>> round(float(mg_kg_to_kg_ha(100.0, depth_m=0.2, bulk_density_g_cm3=1.3)), 6)
260.0
"""

from __future__ import annotations

import re
from fractions import Fraction
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import SettingsError

__all__ = [
    "AC_PER_HA",
    "area_in",
    "area_unit_for",
    "ATOMIC_WEIGHT",
    "CHARGE",
    "ANALYTES",
    "CATION_UNITS",
    "VOLUMETRIC_UNITS",
    "LAB_UNITS",
    "ELEMENT_MASS_UNITS",
    "DEFAULT_SCOOP_DENSITY_G_CM3",
    "is_volumetric",
    "MG_CACO3_PER_CMOL",
    "KG_HA_PER_LB_AC",
    "mg_per_cmol",
    "normalise_unit",
    "to_cmol_kg",
    "from_cmol_kg",
    "kg_per_ha_of_layer",
    "mg_kg_to_kg_ha",
    "cmol_kg_to_kg_ha",
    "kg_ha_to_lb_ac",
    "lb_ac_to_kg_ha",
    "kg_ha_to_mg_m2",
    "rate_from_kg_ha",
    "rate_to_kg_ha",
    "format_rate",
    "RATE_UNITS",
]

#: Standard atomic weights, g/mol (IUPAC abridged standard atomic weights).
ATOMIC_WEIGHT: dict[str, float] = {
    "Ca": 40.078,
    "Mg": 24.305,
    "K": 39.098,
    "Na": 22.990,
    "Al": 26.982,
    "H": 1.008,
    "C": 12.011,
    "O": 15.999,
    "S": 32.06,
}

#: Element and charge of each exchangeable analyte that geosoil converts by mass.
#: ``acidity`` (exchangeable Al + H) is reported by labs in charge units only;
#: its mg/kg form is not defined, so it has no entry here.
CHARGE: dict[str, tuple[str, int]] = {
    "ca": ("Ca", 2),
    "mg": ("Mg", 2),
    "k": ("K", 1),
    "na": ("Na", 1),
    "al": ("Al", 3),
    "h": ("H", 1),
}

#: Canonical analyte names of exchangeable cations and acidity.
ANALYTES: tuple[str, ...] = ("ca", "mg", "k", "na", "al", "h", "acidity")

#: Units accepted for exchangeable cations, as canonical spellings.
CATION_UNITS: tuple[str, ...] = ("cmol/kg", "meq/100g", "mmol/kg", "mg/kg", "g/kg")

#: Units of an element's mass per kg of soil (converted by the cation's equivalent weight).
ELEMENT_MASS_UNITS: tuple[str, ...] = ("mg/kg", "g/kg")

#: Charge per volume of soil, as labs that measure soil with a scoop report it
#: (cmolc/dm3 and mmolc/dm3 in Brazil, meq/100 cm3 in North Carolina). Converted to
#: cmol(+)/kg by the density of the soil in the scoop (``density_g_cm3``).
VOLUMETRIC_UNITS: tuple[str, ...] = ("cmol/dm3", "mmol/dm3", "meq/100cm3")

#: Every unit a lab column of an exchangeable amount may be in.
LAB_UNITS: tuple[str, ...] = CATION_UNITS + VOLUMETRIC_UNITS

#: Density of scooped, dried and sieved soil assumed when a lab reports per volume and
#: states no scoop weight: 1 g/cm3, so that cmolc/dm3 reads as cmol(+)/kg [common practice:
#: a convention; labs' scoop densities run about 0.8 to 1.4 g/cm3].
DEFAULT_SCOOP_DENSITY_G_CM3: float = 1.0

#: mg of CaCO3 per kg of soil that carries 1 cmol(+)/kg (100.086 g/mol / 2 x 10).
MG_CACO3_PER_CMOL: float = (
    ATOMIC_WEIGHT["Ca"] + ATOMIC_WEIGHT["C"] + 3 * ATOMIC_WEIGHT["O"]
) / 2 * 10

#: kg/ha in 1 lb/ac, exact: 0.45359237 kg / (4046.8564224 m2 / 10000 m2).
KG_HA_PER_LB_AC: float = float(Fraction("0.45359237") / (Fraction("4046.8564224") / 10000))

#: Acres in 1 ha, exact: 10 000 m2 / 4046.8564224 m2 (the international acre, NIST SP 811).
AC_PER_HA: float = float(Fraction(10000) / Fraction("4046.8564224"))


def area_unit_for(rate_unit: str) -> str:
    """The area unit that goes with a rate unit: acres with a rate per acre, else hectares.

    >>> area_unit_for("lb/ac"), area_unit_for("t/ha")
    ('ac', 'ha')
    """
    return "ac" if rate_unit.endswith("/ac") else "ha"


def area_in(ha: ArrayLike, unit: str) -> Any:
    """Hectares ``ha`` in ``unit`` (``"ha"`` or ``"ac"``).

    >>> round(float(area_in(1.0, "ac")), 7)
    2.4710538
    """
    return np.asarray(ha, dtype=float) * AC_PER_HA if unit == "ac" else ha

_UNIT_ALIASES: dict[str, str] = {
    "cmol/kg": "cmol/kg",
    "cmol(+)/kg": "cmol/kg",
    "cmolc/kg": "cmol/kg",
    "cmol+/kg": "cmol/kg",
    "cmol_c/kg": "cmol/kg",
    "meq/100g": "meq/100g",
    "me/100g": "meq/100g",
    "meq%": "meq/100g",
    "mmol/kg": "mmol/kg",
    "mmol(+)/kg": "mmol/kg",
    "mmolc/kg": "mmol/kg",
    "mmol+/kg": "mmol/kg",
    "mg/kg": "mg/kg",
    "cmol/dm3": "cmol/dm3",
    "cmolc/dm3": "cmol/dm3",
    "cmol(+)/dm3": "cmol/dm3",
    "cmol+/dm3": "cmol/dm3",
    "cmolc/l": "cmol/dm3",
    "mmol/dm3": "mmol/dm3",
    "mmolc/dm3": "mmol/dm3",
    "mmol(+)/dm3": "mmol/dm3",
    "mmol+/dm3": "mmol/dm3",
    "meq/100cm3": "meq/100cm3",
    "meq/100 cm3": "meq/100cm3",
    "me/100cm3": "meq/100cm3",
    "meq/100cc": "meq/100cm3",
    "meq/100ml": "meq/100cm3",
    "ppm": "mg/kg",
    "g/kg": "g/kg",
    "mg/g": "g/kg",
    "‰": "g/kg",
    "µg/g": "mg/kg",
    "ug/g": "mg/kg",
}


def mg_per_cmol(analyte: str) -> float:
    """mg/kg of ``analyte`` in 1 cmol(+)/kg: 10 x atomic weight / charge.

    Parameters
    ----------
    analyte : str
        Canonical cation name (``ca``, ``mg``, ``k``, ``na``, ``al``, ``h``...).

    Returns
    -------
    float
        mg/kg per cmol(+)/kg.

    Raises
    ------
    SettingsError
        An analyte without a mass conversion.
    """
    try:
        element, charge = CHARGE[analyte]
    except KeyError:
        raise SettingsError(
            f"no mass conversion for '{analyte}'; mg/kg is defined for {', '.join(CHARGE)}"
        ) from None
    return 10.0 * ATOMIC_WEIGHT[element] / charge


def _squash_unit(text: str) -> str:
    """``text`` lower-cased without spaces, brackets, '+', '_', '.' or '/' (for matching only)."""
    key = text.strip().lower().replace("μ", "µ").replace("⁻¹", "-1").replace("₊", "+")
    return re.sub(r"[\s()\[\]+_/.·]", "", key)


#: The aliases above, squashed, and their "kg-1" forms: "cmol(+) kg-1", "cmolc_kg" and
#: "meq/100 g" all match.
_SQUASHED_ALIASES: dict[str, str] = {
    **{_squash_unit(k): v for k, v in _UNIT_ALIASES.items()},
    **{_squash_unit(k) + "-1": v for k, v in _UNIT_ALIASES.items() if "/" in k},
}


def normalise_unit(text: str) -> str:
    """Canonical spelling of a cation unit, from the spellings labs print.

    Parameters
    ----------
    text : str
        The unit as the lab printed it.

    Returns
    -------
    str
        One of ``cmol/kg``, ``meq/100g``, ``mg/kg``, ``mmol/kg``...

    Raises
    ------
    SettingsError
        A unit that is not a known spelling.

    Examples
    --------
    >>> normalise_unit("meq/100 g")
    'meq/100g'
    >>> normalise_unit("cmol(+)/kg")
    'cmol/kg'
    >>> normalise_unit("PPM")
    'mg/kg'
    >>> normalise_unit("cmolc kg-1")
    'cmol/kg'
    """
    key = _squash_unit(text)
    if key in _SQUASHED_ALIASES:
        return _SQUASHED_ALIASES[key]
    raise SettingsError(
        f"unit '{text}' is not known; use one of {', '.join(LAB_UNITS)} "
        "(also understood: meq/100 g, cmol(+)/kg, mmol(+)/kg, ppm)"
    )


def is_volumetric(unit: str) -> bool:
    """True for a charge-per-volume unit (:data:`VOLUMETRIC_UNITS`).

    Parameters
    ----------
    unit : str
        Any spelling :func:`normalise_unit` reads.

    Returns
    -------
    bool
    """
    return normalise_unit(unit) in VOLUMETRIC_UNITS


def _cmol_dm3_per_unit(u: str) -> float:
    # meq/100 cm3 x 10 = meq/dm3 = mmol(+)/dm3; / 10 = cmol(+)/dm3
    return {"cmol/dm3": 1.0, "mmol/dm3": 0.1, "meq/100cm3": 1.0}[u]


def _density(density_g_cm3: float | None, unit: str) -> float:
    if density_g_cm3 is None:
        raise SettingsError(
            f"unit '{unit}' is per volume of soil: give the density of the soil the lab "
            "measured (g/cm3) to turn it into cmol(+)/kg"
        )
    if not density_g_cm3 > 0:
        raise SettingsError(f"density must be more than 0 g/cm3 (got {density_g_cm3:g})")
    return density_g_cm3


def to_cmol_kg(
    values: ArrayLike, analyte: str, unit: str, *, density_g_cm3: float | None = None
) -> NDArray[np.float64]:
    """Convert exchangeable ``analyte`` values from ``unit`` to cmol(+)/kg.

    A volumetric unit (:data:`VOLUMETRIC_UNITS`) is divided by the density of
    the soil the lab measured: ``cmol(+)/kg = cmol(+)/dm3 / (g/cm3)``.

    Parameters
    ----------
    values : array_like
        The lab's values.
    analyte : str
        Canonical cation name (``ca``, ``mg``, ``k``, ``na``, ``al``, ``h``...).
    unit : str
        Their unit, any spelling :func:`normalise_unit` reads.
    density_g_cm3 : float, optional
        Density of the measured soil, g/cm3 (volumetric units only).

    Returns
    -------
    ndarray of float64
        The values in cmol(+)/kg.

    Raises
    ------
    SettingsError
        An unknown unit or analyte.

    Examples
    --------
    >>> float(to_cmol_kg(200.39, "ca", "mg/kg")[()]).__round__(6)
    1.0
    >>> float(to_cmol_kg(25.0, "na", "mmol/kg")[()])
    2.5
    >>> float(to_cmol_kg(0.20039, "ca", "g/kg")[()]).__round__(6)   # 200.39 mg/kg
    1.0
    >>> float(to_cmol_kg(36.0, "ca", "mmolc/dm3", density_g_cm3=1.2)[()])   # 3.6 cmolc/dm3
    3.0
    """
    u = normalise_unit(unit)
    v = np.asarray(values, dtype=float)
    if u in VOLUMETRIC_UNITS:
        return v * _cmol_dm3_per_unit(u) / _density(density_g_cm3, unit)
    if u in ("cmol/kg", "meq/100g"):
        return v.copy()
    if u == "mmol/kg":
        return v / 10.0
    if u == "g/kg":  # 1 g/kg = 1000 mg/kg of the element
        return v * 1000.0 / mg_per_cmol(analyte)
    return v / mg_per_cmol(analyte)


def from_cmol_kg(
    values: ArrayLike, analyte: str, unit: str, *, density_g_cm3: float | None = None
) -> NDArray[np.float64]:
    """Convert cmol(+)/kg to ``unit``; the inverse of :func:`to_cmol_kg`.

    Parameters
    ----------
    values : array_like
        Values in cmol(+)/kg.
    analyte : str
        Canonical cation name (``ca``, ``mg``, ``k``, ``na``, ``al``, ``h``...).
    unit : str
        The unit wanted.
    density_g_cm3 : float, optional
        Density of the measured soil, g/cm3 (volumetric units only).

    Returns
    -------
    ndarray of float64
        The values in ``unit``.

    Raises
    ------
    SettingsError
        An unknown unit or analyte.
    """
    u = normalise_unit(unit)
    v = np.asarray(values, dtype=float)
    if u in VOLUMETRIC_UNITS:
        return v * _density(density_g_cm3, unit) / _cmol_dm3_per_unit(u)
    if u in ("cmol/kg", "meq/100g"):
        return v.copy()
    if u == "mmol/kg":
        return v * 10.0
    if u == "g/kg":
        return v * mg_per_cmol(analyte) / 1000.0
    return v * mg_per_cmol(analyte)


def kg_per_ha_of_layer(*, depth_m: ArrayLike, bulk_density_g_cm3: ArrayLike) -> ArrayLike:
    """Mass of soil in a layer, kg/ha: 10 000 m2 x depth (m) x BD (kg/m3).

    Parameters
    ----------
    depth_m : array_like
        Depth of the layer, m.
    bulk_density_g_cm3 : array_like
        Dry bulk density, g/cm3.

    Returns
    -------
    array_like
        kg of soil per hectare.
    """
    return 10_000.0 * np.asarray(depth_m) * np.asarray(bulk_density_g_cm3) * 1000.0


def mg_kg_to_kg_ha(
    mg_kg: ArrayLike, *, depth_m: ArrayLike, bulk_density_g_cm3: ArrayLike
) -> ArrayLike:
    """kg/ha of a substance present at ``mg_kg`` in a layer of soil.

    Parameters
    ----------
    mg_kg : array_like
        Concentration in the soil, mg/kg.
    depth_m : array_like
        Depth of the layer, m.
    bulk_density_g_cm3 : array_like
        Dry bulk density, g/cm3.

    Returns
    -------
    array_like
        kg/ha.
    """
    layer = np.asarray(kg_per_ha_of_layer(depth_m=depth_m, bulk_density_g_cm3=bulk_density_g_cm3))
    return np.asarray(mg_kg) * 1e-6 * layer


def cmol_kg_to_kg_ha(
    cmol_kg: ArrayLike,
    *,
    mg_per_cmol_c: float,
    depth_m: ArrayLike,
    bulk_density_g_cm3: ArrayLike,
) -> ArrayLike:
    """kg/ha of a substance supplying ``cmol_kg`` of charge, ``mg_per_cmol_c`` mg/kg each.

    Parameters
    ----------
    cmol_kg : array_like
        Charge to supply, cmol(+)/kg.
    mg_per_cmol_c : float
        mg/kg of the substance per cmol(+)/kg.
    depth_m : array_like
        Depth of the layer, m.
    bulk_density_g_cm3 : array_like
        Dry bulk density, g/cm3.

    Returns
    -------
    array_like
        kg/ha.
    """
    return mg_kg_to_kg_ha(
        np.asarray(cmol_kg) * mg_per_cmol_c, depth_m=depth_m, bulk_density_g_cm3=bulk_density_g_cm3
    )


def kg_ha_to_lb_ac(kg_ha: ArrayLike) -> ArrayLike:
    """kg/ha to lb/ac (exact factor).

    Parameters
    ----------
    kg_ha : array_like
        Rate in kg/ha.

    Returns
    -------
    array_like
        Rate in lb/ac.
    """
    return np.asarray(kg_ha) / KG_HA_PER_LB_AC


def lb_ac_to_kg_ha(lb_ac: ArrayLike) -> ArrayLike:
    """lb/ac to kg/ha (exact factor).

    Parameters
    ----------
    lb_ac : array_like
        Rate in lb/ac.

    Returns
    -------
    array_like
        Rate in kg/ha.
    """
    return np.asarray(lb_ac) * KG_HA_PER_LB_AC


def kg_ha_to_mg_m2(kg_ha: ArrayLike) -> ArrayLike:
    """kg/ha to mg/m2 (ISO 11783-10 DDI 6 unit): 1 kg/ha = 100 mg/m2.

    Parameters
    ----------
    kg_ha : array_like
        Rate in kg/ha.

    Returns
    -------
    array_like
        Rate in mg/m2.
    """
    return np.asarray(kg_ha) * 100.0


#: Rate units for display and files.
RATE_UNITS: tuple[str, ...] = ("kg/ha", "t/ha", "lb/ac")


def rate_from_kg_ha(kg_ha: ArrayLike, unit: str) -> ArrayLike:
    """Express a rate given in kg/ha in ``unit`` (one of :data:`RATE_UNITS`).

    Parameters
    ----------
    kg_ha : array_like
        Rate in kg/ha.
    unit : str
        One of :data:`RATE_UNITS`.

    Returns
    -------
    array_like
        Rate in ``unit``.

    Raises
    ------
    SettingsError
        An unknown unit.
    """
    if unit == "kg/ha":
        return np.asarray(kg_ha)
    if unit == "t/ha":
        return np.asarray(kg_ha) / 1000.0
    if unit == "lb/ac":
        return kg_ha_to_lb_ac(kg_ha)
    raise SettingsError(f"rate unit '{unit}' is not known; use one of {', '.join(RATE_UNITS)}")


def rate_to_kg_ha(value: ArrayLike, unit: str) -> ArrayLike:
    """Convert a rate in ``unit`` to kg/ha; the inverse of :func:`rate_from_kg_ha`.

    Parameters
    ----------
    value : array_like
        Rate in ``unit``.
    unit : str
        One of :data:`RATE_UNITS`.

    Returns
    -------
    array_like
        Rate in kg/ha.

    Raises
    ------
    SettingsError
        An unknown unit.
    """
    if unit == "kg/ha":
        return np.asarray(value)
    if unit == "t/ha":
        return np.asarray(value) * 1000.0
    if unit == "lb/ac":
        return lb_ac_to_kg_ha(value)
    raise SettingsError(f"rate unit '{unit}' is not known; use one of {', '.join(RATE_UNITS)}")


def format_rate(
    kg_ha: float, unit: str, *, with_unit: bool = True, missing: str = "\u2013"
) -> str:
    """A rate given in kg/ha, as text in ``unit`` for people to read.

    kg/ha and lb/ac are shown as whole numbers with thousands separators;
    t/ha with up to two decimals (at least one); 0 as ``0``. Rates that would
    round to 0 but are not 0 keep two significant digits.

    Parameters
    ----------
    kg_ha
        The rate, kg/ha.
    unit
        One of :data:`RATE_UNITS`.
    with_unit
        Append the unit (``"2.5 t/ha"``) or not (``"2.5"``, for a table whose
        header names the unit).
    missing
        Text for a rate that is not a number.

    Returns
    -------
    str
        The rate as text (``"2,500 kg/ha"``).

    Raises
    ------
    SettingsError
        An unknown unit.

    Examples
    --------
    >>> format_rate(2500.0, "kg/ha"), format_rate(2500.0, "t/ha"), format_rate(2500.0, "lb/ac")
    ('2,500 kg/ha', '2.5 t/ha', '2,230 lb/ac')
    >>> format_rate(1750.0, "t/ha", with_unit=False), format_rate(float("nan"), "t/ha")
    ('1.75', '\u2013')
    """
    value = float(np.asarray(rate_from_kg_ha(kg_ha, unit)))
    if not np.isfinite(value):
        return missing
    if value == 0:
        text = "0"
    elif unit == "t/ha":
        text = f"{value:.2f}"
        if text.endswith("0"):
            text = text[:-1]
        if abs(value) < 0.005 and value != 0:
            text = f"{value:.2g}"
    else:
        text = f"{value:,.0f}"
        if abs(value) < 0.5 and value != 0:
            text = f"{value:.2g}"
    return f"{text} {unit}" if with_unit else text
