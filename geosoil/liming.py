"""Lime to a target pH: buffer-pH, pH-buffering-capacity and base-saturation methods.

Pure functions on arrays. Each method is written in the units it was
published and calibrated in (short tons of CaCO3 per acre of an 8-inch slice,
t/ha of a 0-20 cm layer, meq/100 g ...); :func:`caco3_cmol_kg` turns any of
them into the one currency :mod:`geosoil.rates` carries, cmol(+)/kg of CaCO3
in the treated soil, so that the project's own depth and bulk density then
give kg/ha. The conversion is explicit and linear in depth:

* **mass basis** (the published rate is for a stated soil mass per area, e.g.
  SMP's 2.4 million lb/ac): ``cmol(+)/kg = rate (kg/ha) / calibration soil mass
  (kg/ha) x 10^6 / 500.4`` -- the lime per kg of soil is kept;
* **volume basis** (the published rate is for a stated depth of soil measured
  by volume, e.g. Raij's 0-20 cm in cmolc/dm3): ``CaCO3 per m3 = rate /
  (10 000 m2 x calibration depth)``, over the treated layer's bulk density --
  the lime per volume of soil is kept, so the rate scales with depth alone;
* **per kg** (the method gives cmol(+)/kg of soil directly: Adams-Evans, pHBC).

Every method states the pH it reads (in water or in 0.01 M CaCl2): a target
pH only means something with its pH method (:data:`METHODS`).

Sources and status (confirmed = found in the published or extension source
named; from memory = not confirmed, verify; derived = arithmetic from the
definitions):

``smp``
    Shoemaker, McLean & Pratt (1961), SSSA Proc. 25:274. Table of short tons
    CaCO3/ac for an 8-inch slice weighing 2.4 million lb, to pH 6.0, 6.5 and
    7.0, by buffer pH, as a Western Region reference-methods manual (2003)
    prints it (the table's basis is confirmed; its points are from memory).
    Regional calibrations differ and were revised: this one is named
    ``"SMP, Western Region methods manual table (2003)"`` everywhere.
``sikora``
    Sikora (2006), SSSA J. 70:474: a buffer made to read the same buffer pH
    as SMP, so SMP's calibration applies unchanged (confirmed).
``mehlich``
    Mehlich (1976), Commun. Soil Sci. Plant Anal. 7:637, as the North
    Carolina Department of Agriculture's agronomic division applies it
    (confirmed): ``Ac (meq/100 cm3) = 4 x (6.6 - buffer pH)``; ``LR (short
    tons CaCO3/ac) = Ac x (target - pH) / (6.6 - pH)``, less a residual credit
    for recent lime (not modelled). The depth the tons/ac stand for is taken
    as 0.20 m (from memory).
``adams_evans``
    Adams & Evans (1962), SSSA Proc. 26:355, for low-CEC soils:
    exchangeable acidity ``H (meq/100 g) = 8 x (8.00 - buffer pH)``
    (confirmed, as a university lab's method page gives it). Adams and Evans
    then take the share of H to neutralise from the soil's base unsaturation
    at the present and the target pH; that relation was not confirmed, so the
    share here is ``(target - pH) / (reference - pH)`` with reference pH 6.5,
    the same proportional form as Mehlich's (derived; verify before use).
``phbc``
    ``LR = (target - pH) x pHBC x soil mass``, with pHBC measured, or
    estimated from organic carbon and clay by Aitken, Moody & McKinley (1990),
    Aust. J. Soil Res. 28:695: ``pHBC (cmol(+)/kg/pH) = 0.9548 x OC % +
    0.0111 x clay %`` (confirmed only as coded in an open-source pedotransfer
    library; from memory for the paper). Range of validity: :data:`AITKEN_RANGE`.
``base_saturation``
    Raij et al. (1996), IAC Boletim Tecnico 100: ``NC (t/ha, 0-20 cm) = T x
    (V2 - V1) / PRNT`` with T the CEC at pH 7 in cmolc/dm3 (confirmed for the
    cmolc form). Stoichiometric: 1 cmolc/dm3 over 0.20 m of a hectare is
    1.0009 t of CaCO3 (derived; the formula rounds it to 1).
maintenance
    Net acid addition (kmol H+/ha/yr) x 50.04 kg CaCO3 per kmol (derived;
    Helyar & Porter 1989 style, from memory).

Rates are advisory: have them checked by a qualified agronomist.

Examples
--------
North Carolina's printed example: buffer pH 6.3, pH 5.0, target 6.0:

>>> import numpy as np
>>> round(float(mehlich_lime(6.3, 5.0, 6.0)), 3)   # short tons CaCO3/ac (NCDA prints 0.76)
0.75
>>> round(float(phbc_aitken(1.5, 20.0)), 4)   # cmol(+)/kg/pH
1.6542
>>> round(float(base_saturation_lime(5.46, 8.42, 60.0, prnt_percent=80.0)), 2)   # t/ha, 0-20 cm
3.52
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import SettingsError
from .units import KG_HA_PER_LB_AC, MG_CACO3_PER_CMOL

__all__ = [
    "PH_METHODS",
    "LimeMethod",
    "METHODS",
    "BUFFER_OF",
    "KG_HA_PER_SHORT_TON_AC",
    "SMP_SLICE_KG_HA",
    "SMP_TABLE",
    "AITKEN_RANGE",
    "VAN_BEMMELEN",
    "KG_CACO3_PER_KMOL_H",
    "MEHLICH_REFERENCE_PH",
    "ADAMS_EVANS_REFERENCE_PH",
    "SMP_BPH_RANGE",
    "CropTarget",
    "CROP_TARGETS",
    "smp_lime",
    "mehlich_acidity",
    "mehlich_lime",
    "adams_evans_acidity",
    "adams_evans_lime",
    "phbc_aitken",
    "aitken_outside",
    "organic_carbon_from_om",
    "phbc_lime",
    "base_saturation_lime",
    "net_acid_addition",
    "maintenance_lime",
    "below_trigger",
    "caco3_cmol_kg",
]

#: pH methods a target can be stated in.
PH_METHODS: tuple[str, ...] = ("water", "CaCl2")

#: kg/ha in one short ton (2000 lb) per acre, exact by the definitions of lb and acre.
KG_HA_PER_SHORT_TON_AC: float = 2000.0 * KG_HA_PER_LB_AC

#: Soil mass of SMP's calibration slice: 2.4 million lb/ac (an 8-inch slice), kg/ha.
SMP_SLICE_KG_HA: float = 2.4e6 * KG_HA_PER_LB_AC

#: kg of CaCO3 that neutralises 1 kmol of H+: 100.09 / 2 (derived, standard atomic weights).
KG_CACO3_PER_KMOL_H: float = MG_CACO3_PER_CMOL / 10.0

#: Organic matter = organic carbon x 1.724 (van Bemmelen factor: a convention, 58 % C in
#: humus; measured ratios range about 1.4 to 2.5).
VAN_BEMMELEN: float = float(Fraction(1724, 1000))

#: Range of the soils Aitken, Moody & McKinley (1990) fitted their pHBC regression on,
#: as (low, high) of organic carbon % and clay % [from memory: verify against the paper].
AITKEN_RANGE: dict[str, tuple[float, float]] = {"oc": (0.2, 5.0), "clay": (5.0, 70.0)}

#: SMP buffer table: buffer pH -> short tons CaCO3/ac (8-inch slice, 2.4 M lb) to soil pH
#: 7.0, 6.5 and 6.0. Basis as a Western Region reference-methods manual (2003) prints it
#: [confirmed]; the rows [from memory] (rows 6.8, 6.5 and 6.0 agree with a second recollection).
SMP_TABLE: tuple[tuple[float, float, float, float], ...] = (
    (6.8, 1.4, 1.2, 1.0),
    (6.7, 2.4, 2.1, 1.7),
    (6.6, 3.4, 2.9, 2.4),
    (6.5, 4.5, 3.8, 3.2),
    (6.4, 5.5, 4.7, 3.9),
    (6.3, 6.6, 5.6, 4.6),
    (6.2, 7.7, 6.5, 5.4),
    (6.1, 8.8, 7.4, 6.1),
    (6.0, 9.9, 8.3, 6.9),
    (5.9, 10.9, 9.2, 7.6),
    (5.8, 12.0, 10.1, 8.4),
    (5.7, 13.1, 11.0, 9.1),
    (5.6, 14.1, 11.9, 9.9),
    (5.5, 15.2, 12.8, 10.6),
    (5.4, 16.3, 13.7, 11.4),
    (5.3, 17.3, 14.6, 12.1),
    (5.2, 18.4, 15.5, 12.9),
    (5.1, 19.4, 16.4, 13.6),
    (5.0, 20.5, 17.3, 14.4),
    (4.9, 21.5, 18.2, 15.1),
    (4.8, 22.6, 19.1, 15.9),
)
_SMP_TARGETS = (7.0, 6.5, 6.0)
#: Buffer pH range the SMP table covers (its last and first rows).
SMP_BPH_RANGE: tuple[float, float] = (4.8, 6.8)
#: Buffer pH at which the SMP rate is taken as 0: the table stops at 6.8; between 6.8 and
#: 7.0 the rate tapers linearly to 0 (an implementation choice, stated in outputs).
_SMP_ZERO_BPH = 7.0

#: Reference pH of Mehlich's buffer: acidity is measured to this pH (NCDA) [confirmed].
MEHLICH_REFERENCE_PH = 6.6
#: pH to which Adams-Evans acidity is taken as fully neutralised here [derived; verify].
ADAMS_EVANS_REFERENCE_PH = 6.5


@dataclass(frozen=True)
class LimeMethod:
    """A lime-requirement method: what it reads and what its numbers stand for.

    Attributes
    ----------
    name
        Key used in settings (``rates.lime.method``).
    title
        Short readable name, with the calibration named.
    citation
        Source, with its status (confirmed / from memory / derived).
    ph_method
        pH the method's soil pH and target are read in (``"water"`` or ``"CaCl2"``).
    needs
        Canonical analytes the method reads (besides the soil pH).
    basis
        ``"mass"``, ``"volume"`` or ``"per kg"`` (see the module notes).
    calibration
        Depth, soil mass and units the published numbers stand for.
    depth_m
        Calibration depth, m (None for ``"per kg"`` methods).
    soil_mass_kg_ha
        Calibration soil mass, kg/ha (mass basis only).
    """

    name: str
    title: str
    citation: str
    ph_method: str
    needs: tuple[str, ...]
    basis: str
    calibration: str
    depth_m: float | None = None
    soil_mass_kg_ha: float | None = None


#: The target-pH methods, by settings key.
METHODS: dict[str, LimeMethod] = {
    "smp": LimeMethod(
        "smp", "SMP buffer, Western Region methods manual table (2003)",
        "Shoemaker, McLean & Pratt 1961, SSSA Proc. 25:274; table basis per a Western Region "
        "reference-methods manual (2003) [confirmed], table points [from memory]",
        "water", ("bph_smp",), "mass",
        "short tons CaCO3/ac for an 8-inch (0.203 m) slice weighing 2.4 million lb/ac "
        "(2.690 million kg/ha); targets 6.0 to 7.0 (pH in water)",
        depth_m=0.2032, soil_mass_kg_ha=SMP_SLICE_KG_HA,
    ),
    "sikora": LimeMethod(
        "sikora", "Sikora buffer, read on SMP's Western Region table (2003)",
        "Sikora 2006, SSSA J. 70:474: made to read as SMP, so SMP's calibration applies "
        "[confirmed]; SMP table as for 'smp'",
        "water", ("bph_sikora",), "mass",
        "as SMP: short tons CaCO3/ac for an 8-inch slice weighing 2.4 million lb/ac",
        depth_m=0.2032, soil_mass_kg_ha=SMP_SLICE_KG_HA,
    ),
    "mehlich": LimeMethod(
        "mehlich", "Mehlich buffer, as North Carolina's soil-testing service applies it",
        "Mehlich 1976, Commun. Soil Sci. Plant Anal. 7:637; NC Dept. of Agriculture agronomic "
        "division buffer table [confirmed]; calibration depth 0.20 m [from memory]",
        "water", ("bph_mehlich",), "volume",
        "short tons CaCO3/ac for a 0.20 m layer measured by volume (acidity in meq/100 cm3); "
        f"target up to {MEHLICH_REFERENCE_PH} (pH in water)",
        depth_m=0.20,
    ),
    "adams_evans": LimeMethod(
        "adams_evans", "Adams-Evans buffer (low-CEC soils)",
        "Adams & Evans 1962, SSSA Proc. 26:355: H = 8 x (8.00 - buffer pH) [confirmed]; the "
        f"share neutralised (target - pH) / ({ADAMS_EVANS_REFERENCE_PH} - pH) [derived: "
        "Adams and Evans' base-unsaturation relation not confirmed; verify before use]",
        "water", ("bph_adams_evans",), "per kg",
        f"meq/100 g (= cmol(+)/kg) of soil; target up to {ADAMS_EVANS_REFERENCE_PH} "
        "(pH in water)",
    ),
    "phbc": LimeMethod(
        "phbc", "pH buffering capacity (measured, or Aitken, Moody & McKinley 1990 from OC "
        "and clay)",
        "lime = (target - pH) x pHBC x soil mass [derived]; pHBC = 0.9548 OC + 0.0111 clay: "
        "Aitken, Moody & McKinley 1990, Aust. J. Soil Res. 28:695 [from memory for the paper]",
        "CaCl2", ("phbc",), "per kg",
        "pHBC in cmol(+)/kg per pH unit, so the lime is cmol(+)/kg of soil; pH in 0.01 M CaCl2 "
        "as Aitken et al. measured it [from memory]",
    ),
    "base_saturation": LimeMethod(
        "base_saturation", "base saturation to a target (Raij et al. 1996)",
        "Raij, Cantarella, Quaggio & Furlani 1996, IAC Boletim Tecnico 100 [confirmed for the "
        "cmolc/dm3 form]",
        "CaCl2", ("cec_ph7", "ca", "mg", "k"), "volume",
        "t/ha of CaCO3 (PRNT 100 %) for a 0-20 cm layer, T in cmolc/dm3; base saturation at "
        "pH 7; pH in 0.01 M CaCl2 for the trigger",
        depth_m=0.20,
    ),
}

#: Buffer-pH analyte of each buffer method.
BUFFER_OF: dict[str, str] = {
    "smp": "bph_smp", "sikora": "bph_sikora", "mehlich": "bph_mehlich",
    "adams_evans": "bph_adams_evans",
}


@dataclass(frozen=True)
class CropTarget:
    """A crop's target pH, its pH method and where it comes from."""

    ph: float
    ph_method: str
    source: str


#: Built-in crop targets. Overridable per paddock in ``[rates.lime]``.
CROP_TARGETS: dict[str, CropTarget] = {
    "corn": CropTarget(6.0, "water", "Tri-State Fertilizer Recommendations (Ohio State, Purdue, "
                       "Michigan State, 2020), mineral soils [from memory]"),
    "soybean": CropTarget(6.0, "water", "Tri-State Fertilizer Recommendations (2020), mineral "
                          "soils [from memory]"),
    "wheat": CropTarget(6.0, "water", "Tri-State Fertilizer Recommendations (2020), mineral "
                        "soils [from memory]"),
    "alfalfa": CropTarget(6.8, "water", "Tri-State Fertilizer Recommendations (2020) "
                          "[from memory]"),
    "pasture": CropTarget(5.5, "CaCl2", "south-eastern Australian liming guides: lime topsoil "
                          "to pH(CaCl2) 5.5 [common practice; from memory]"),
    "canola": CropTarget(5.5, "CaCl2", "south-eastern Australian liming guides: pH(CaCl2) 5.5 "
                         "[common practice; from memory]"),
    "lucerne": CropTarget(6.0, "CaCl2", "south-eastern Australian liming guides "
                          "[from memory]"),
    "blueberry": CropTarget(4.8, "water", "land-grant small-fruit guides: pH 4.5 to 5.2 "
                            "[from memory]"),
}


def _arr(x: ArrayLike) -> NDArray[np.float64]:
    return np.asarray(x, dtype=float)


def _out(values: NDArray[np.float64]) -> Any:
    return values[()] if values.ndim == 0 else values


def smp_lime(buffer_ph: ArrayLike, target_ph: float) -> Any:
    """Lime to ``target_ph`` from an SMP (or Sikora) buffer pH, by the Western Region table.

    Linear between the table's rows and between its target columns (6.0, 6.5,
    7.0). Above buffer pH 6.8 (the first row) the rate tapers linearly to 0 at
    7.0 (implementation choice); below 4.8 (the last row) it is held at the
    last row's value (outputs say so).

    Parameters
    ----------
    buffer_ph : array_like
        SMP or Sikora buffer pH.
    target_ph : float
        Target soil pH (in water), 6.0 to 7.0.

    Returns
    -------
    float or ndarray
        Short tons of CaCO3 per acre for an 8-inch slice weighing 2.4 million lb
        (:data:`SMP_SLICE_KG_HA`). NaN in gives NaN out.

    Raises
    ------
    SettingsError
        ``target_ph`` outside 6.0-7.0, the columns of the table.

    Examples
    --------
    >>> float(smp_lime(6.5, 6.5)), float(smp_lime(6.0, 7.0))
    (3.8, 9.9)
    >>> round(float(smp_lime(6.5, 6.25)), 2)   # halfway between the 6.0 and 6.5 columns
    3.5
    """
    if not 6.0 <= target_ph <= 7.0:
        raise SettingsError(
            f"the SMP table gives targets from pH 6.0 to 7.0 (got {target_ph:g}); choose a "
            "target in that range or another method", key="target_ph",
        )
    bph = _arr(buffer_ph)
    table = np.array(SMP_TABLE)
    xs = table[::-1, 0]
    # the target's column, between the printed ones (7.0, 6.5, 6.0)
    cols = table[::-1, 1:]
    tgt = np.array(_SMP_TARGETS)
    order = np.argsort(tgt)
    col = np.array([np.interp(target_ph, tgt[order], row[order]) for row in cols])
    rate = np.interp(bph, xs, col)
    top = col[-1]
    taper = top * np.clip((_SMP_ZERO_BPH - bph) / (_SMP_ZERO_BPH - xs[-1]), 0.0, 1.0)
    rate = np.where(bph > xs[-1], taper, rate)
    return _out(np.where(np.isnan(bph), np.nan, rate))


def mehlich_acidity(buffer_ph: ArrayLike) -> Any:
    """Acidity from a Mehlich buffer pH, meq/100 cm3: ``4 x (6.6 - buffer pH)``, 0 above 6.6.

    Parameters
    ----------
    buffer_ph : array_like
        Mehlich buffer pH.

    Returns
    -------
    float or ndarray
        meq of acidity per 100 cm3 of soil (NCDA) [confirmed].

    Examples
    --------
    >>> round(float(mehlich_acidity(6.3)), 6)
    1.2
    """
    return _out(np.maximum(4.0 * (MEHLICH_REFERENCE_PH - _arr(buffer_ph)), 0.0))


def mehlich_lime(buffer_ph: ArrayLike, ph: ArrayLike, target_ph: float) -> Any:
    """Lime to ``target_ph`` by Mehlich's buffer, as North Carolina applies it.

    ``LR = Ac x (target - pH) / (6.6 - pH)``; 0 where pH is at or above the
    target. No residual credit for recent lime is taken off.

    Parameters
    ----------
    buffer_ph : array_like
        Mehlich buffer pH.
    ph : array_like
        Soil pH in water.
    target_ph : float
        Target pH (in water), below 6.6.

    Returns
    -------
    float or ndarray
        Short tons of CaCO3 per acre (for a 0.20 m layer: from memory).

    Raises
    ------
    SettingsError
        ``target_ph`` at or above 6.6 (the buffer's reference pH).

    Examples
    --------
    >>> round(float(mehlich_lime(6.1, 5.2, 6.5)), 3)   # derived from NCDA's formula
    1.857
    >>> float(mehlich_lime(6.1, 6.5, 6.0))
    0.0
    """
    if not target_ph < MEHLICH_REFERENCE_PH:
        raise SettingsError(
            f"Mehlich's formula holds for targets below pH {MEHLICH_REFERENCE_PH:g} "
            f"(got {target_ph:g})", key="target_ph",
        )
    return _to_target(mehlich_acidity(buffer_ph), ph, target_ph, MEHLICH_REFERENCE_PH)


def adams_evans_acidity(buffer_ph: ArrayLike) -> Any:
    """Exchangeable acidity from an Adams-Evans buffer pH: ``8 x (8.00 - buffer pH)`` meq/100 g.

    Parameters
    ----------
    buffer_ph : array_like
        Adams-Evans buffer pH.

    Returns
    -------
    float or ndarray
        meq/100 g (= cmol(+)/kg), 0 above buffer pH 8.00 [confirmed].

    Examples
    --------
    >>> round(float(adams_evans_acidity(7.8)), 6), round(float(adams_evans_acidity(7.5)), 6)
    (1.6, 4.0)
    """
    return _out(np.maximum(8.0 * (8.0 - _arr(buffer_ph)), 0.0))


def adams_evans_lime(buffer_ph: ArrayLike, ph: ArrayLike, target_ph: float) -> Any:
    """CaCO3 to ``target_ph`` from an Adams-Evans buffer pH, cmol(+)/kg of soil.

    ``H x (target - pH) / (6.5 - pH)``: the share is a derived proportional form
    (see the module notes), not Adams and Evans' own base-unsaturation relation.

    Parameters
    ----------
    buffer_ph : array_like
        Adams-Evans buffer pH.
    ph : array_like
        Soil pH in water.
    target_ph : float
        Target pH (in water), at most 6.5.

    Returns
    -------
    float or ndarray
        cmol(+)/kg of CaCO3.

    Raises
    ------
    SettingsError
        ``target_ph`` above 6.5.

    Examples
    --------
    >>> round(float(adams_evans_lime(7.5, 5.5, 6.5)), 6)   # all of H to pH 6.5
    4.0
    """
    if not target_ph <= ADAMS_EVANS_REFERENCE_PH:
        raise SettingsError(
            f"the Adams-Evans method here holds for targets up to pH "
            f"{ADAMS_EVANS_REFERENCE_PH:g} (got {target_ph:g})", key="target_ph",
        )
    return _to_target(adams_evans_acidity(buffer_ph), ph, target_ph, ADAMS_EVANS_REFERENCE_PH)


def _to_target(acidity: ArrayLike, ph: ArrayLike, target_ph: float, reference_ph: float) -> Any:
    """The share of a buffer's acidity that takes pH to the target, the proportional form
    Mehlich's and the Adams-Evans methods share: ``acidity x (target - pH) / (reference -
    pH)``, at most all of it, 0 where pH is at or above the target, NaN where either is."""
    p = _arr(ph)
    ac = _arr(acidity)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.minimum((target_ph - p) / (reference_ph - p), 1.0)
    rate = np.where(p < target_ph, ac * share, 0.0)
    return _out(np.where(np.isnan(p) | np.isnan(ac), np.nan, rate))


def organic_carbon_from_om(om_percent: ArrayLike, factor: float = VAN_BEMMELEN) -> Any:
    """Organic carbon % from organic matter %: ``OM / factor`` (van Bemmelen 1.724, a convention).

    Parameters
    ----------
    om_percent : array_like
        Organic matter, %.
    factor : float, optional
        OM / OC ratio (default 1.724, conventional).

    Returns
    -------
    float or ndarray
        Organic carbon, %.

    Examples
    --------
    >>> round(float(organic_carbon_from_om(3.448)), 6)
    2.0
    """
    return _out(_arr(om_percent) / factor)


def phbc_aitken(oc_percent: ArrayLike, clay_percent: ArrayLike) -> Any:
    """pH buffering capacity from organic carbon and clay (Aitken, Moody & McKinley 1990).

    ``pHBC (cmol(+)/kg/pH) = 0.9548 x OC % + 0.0111 x clay %`` (R2 0.83, n 40),
    coefficients [from memory for the paper; confirmed as coded in an open-source
    pedotransfer library]. Use :func:`aitken_outside` to find soils outside the
    range it was fitted on.

    Parameters
    ----------
    oc_percent, clay_percent : array_like
        Organic carbon and clay, %.

    Returns
    -------
    float or ndarray
        cmol(+)/kg per pH unit.

    Examples
    --------
    >>> round(float(phbc_aitken(1.5, 20.0)), 4)
    1.6542
    """
    return _out(0.9548 * _arr(oc_percent) + 0.0111 * _arr(clay_percent))


def aitken_outside(oc_percent: ArrayLike, clay_percent: ArrayLike) -> NDArray[np.bool_]:
    """True where OC or clay lie outside :data:`AITKEN_RANGE` (NaN counts as inside).

    Parameters
    ----------
    oc_percent, clay_percent : array_like
        Organic carbon and clay, %.

    Returns
    -------
    ndarray of bool

    Examples
    --------
    >>> aitken_outside([1.5, 8.0], [20.0, 20.0]).tolist()
    [False, True]
    """
    oc, clay = _arr(oc_percent), _arr(clay_percent)
    (olo, ohi), (clo, chi) = AITKEN_RANGE["oc"], AITKEN_RANGE["clay"]
    with np.errstate(invalid="ignore"):
        return np.asarray((oc < olo) | (oc > ohi) | (clay < clo) | (clay > chi))


def phbc_lime(ph: ArrayLike, target_ph: float, phbc: ArrayLike) -> Any:
    """CaCO3 to ``target_ph`` from a pH buffering capacity, cmol(+)/kg of soil.

    ``(target - pH) x pHBC``, 0 where pH is at or above the target [derived].
    Times the soil mass and 500.4 mg CaCO3 per cmol(+) this is kg/ha.

    Parameters
    ----------
    ph : array_like
        Soil pH, in the pH method pHBC was measured in.
    target_ph : float
        Target pH, same method.
    phbc : array_like
        pH buffering capacity, cmol(+)/kg per pH unit.

    Returns
    -------
    float or ndarray
        cmol(+)/kg of CaCO3.

    Examples
    --------
    >>> float(phbc_lime(5.0, 5.5, 2.0)), float(phbc_lime(5.6, 5.5, 2.0))
    (1.0, 0.0)
    """
    p, b = _arr(ph), _arr(phbc)
    rate = np.maximum(target_ph - p, 0.0) * np.maximum(b, 0.0)
    return _out(np.where(np.isnan(p) | np.isnan(b), np.nan, rate))


def base_saturation_lime(
    cec_ph7_cmolc_dm3: ArrayLike, v1_percent: ArrayLike, v2_percent: float,
    *, prnt_percent: float = 100.0,
) -> Any:
    """Lime to a target base saturation (Raij et al. 1996), t/ha for 0-20 cm.

    ``NC = T x (V2 - V1) / PRNT``, 0 where V1 is at or above V2.

    Parameters
    ----------
    cec_ph7_cmolc_dm3 : array_like
        T, CEC at pH 7, cmolc/dm3 (divide mmolc/dm3 by 10 first).
    v1_percent : array_like
        Present base saturation at pH 7, %.
    v2_percent : float
        Target base saturation, %.
    prnt_percent : float, optional
        Effective neutralising value of the lime, % (100 gives t/ha of CaCO3).

    Returns
    -------
    float or ndarray
        t/ha of lime for a 0-20 cm layer.

    Examples
    --------
    >>> round(float(base_saturation_lime(15.0, 25.0, 60.0, prnt_percent=90.0)), 2)
    5.83
    """
    t, v1 = _arr(cec_ph7_cmolc_dm3), _arr(v1_percent)
    rate = np.maximum(t, 0.0) * np.maximum(v2_percent - v1, 0.0) / prnt_percent
    return _out(np.where(np.isnan(t) | np.isnan(v1), np.nan, rate))


def net_acid_addition(
    ph_drop: float, years: float, phbc: ArrayLike, soil_mass_kg_ha: ArrayLike
) -> Any:
    """Net acid addition from a measured fall in pH, kmol H+/ha/yr.

    ``pH drop x pHBC x soil mass / years`` [derived].

    Parameters
    ----------
    ph_drop : float
        Fall in pH over ``years``.
    years : float
        Years over which it fell.
    phbc : array_like
        pH buffering capacity, cmol(+)/kg per pH unit.
    soil_mass_kg_ha : array_like
        Soil mass of the layer, kg/ha.

    Returns
    -------
    float or ndarray
        kmol H+/ha/yr.

    Examples
    --------
    >>> round(float(net_acid_addition(0.5, 10, 2.0, 1.3e6)), 6)   # pHBC 20 mmol(+)/kg/pH
    1.3
    """
    # cmol(+)/kg x kg/ha = cmol/ha; / 1e5 -> kmol/ha
    return _out(ph_drop * _arr(phbc) * _arr(soil_mass_kg_ha) / 1e5 / years)


def maintenance_lime(net_acid_kmol_ha_yr: ArrayLike) -> Any:
    """CaCO3 to offset a net acid addition, kg/ha/yr: ``kmol H+ x 50.04`` [derived].

    Parameters
    ----------
    net_acid_kmol_ha_yr : array_like
        Net acid addition, kmol H+/ha/yr.

    Returns
    -------
    float or ndarray
        kg CaCO3/ha/yr.

    Examples
    --------
    >>> round(float(maintenance_lime(1.3)), 1)
    65.1
    """
    return _out(np.maximum(_arr(net_acid_kmol_ha_yr), 0.0) * KG_CACO3_PER_KMOL_H)


def below_trigger(ph: ArrayLike, target_ph: float, margin: float) -> NDArray[np.bool_]:
    """True where pH lies more than ``margin`` below the target (lime is due).

    Parameters
    ----------
    ph : array_like
        Soil pH (same method as the target).
    target_ph : float
        Target pH.
    margin : float
        Trigger margin, pH units (0: lime whenever pH is below the target).

    Returns
    -------
    ndarray of bool
        False where pH is NaN.

    Examples
    --------
    >>> below_trigger([5.7, 5.8, 5.9], 6.0, 0.2).tolist()
    [True, False, False]
    """
    p = _arr(ph)
    with np.errstate(invalid="ignore"):
        return np.asarray(p < target_ph - margin - 1e-9)


def caco3_cmol_kg(
    rate: ArrayLike, method: str, *, bulk_density_g_cm3: ArrayLike = np.nan
) -> Any:
    """A method's published rate as cmol(+)/kg of CaCO3 in the soil.

    The inverse of what :mod:`geosoil.rates` does next (x soil mass x 500.4 mg
    per cmol(+)), so the rate at the project's own depth is explicit:

    * mass basis (SMP, Sikora: short tons/ac of a 2.4 M lb slice):
      ``rate x 2241.7 kg/ha / 2.690e6 kg/ha x 10^6 / 500.4``;
    * volume basis (Mehlich: short tons/ac, Raij: t/ha, of a 0.20 m layer):
      ``kg/ha / (10 000 x 0.20 m3) / (BD x 1000 kg/m3) x 10^6 / 500.4`` --
      times the treated layer's mass again this is ``rate x depth / 0.20 m``;
    * per kg (Adams-Evans, pHBC): unchanged.

    Parameters
    ----------
    rate : array_like
        The method's rate in its published unit (see :data:`METHODS`).
    method : str
        Key of :data:`METHODS`.
    bulk_density_g_cm3 : array_like, optional
        Bulk density of the treated layer (volume-basis methods only).

    Returns
    -------
    float or ndarray
        cmol(+)/kg of CaCO3.

    Examples
    --------
    >>> round(float(caco3_cmol_kg(1.0, "smp")), 4)   # 1 short ton/ac of a 2.4 M lb slice
    1.6652
    >>> round(float(caco3_cmol_kg(1.0, "base_saturation", bulk_density_g_cm3=1.0)), 4)
    0.9991
    """
    m = METHODS[method]
    r = _arr(rate)
    if m.basis == "per kg":
        return _out(r)
    kg_ha = r * (KG_HA_PER_SHORT_TON_AC if method in ("smp", "sikora", "mehlich") else 1000.0)
    if m.basis == "mass":
        assert m.soil_mass_kg_ha is not None
        kg_per_kg = kg_ha / m.soil_mass_kg_ha
    else:
        assert m.depth_m is not None
        bd = _arr(bulk_density_g_cm3)
        if np.any(~np.isfinite(bd)):
            raise SettingsError(
                f"method '{method}' is calibrated by soil volume: give the bulk density",
                key="bulk_density_g_cm3",
            )
        kg_per_kg = kg_ha / (10_000.0 * m.depth_m) / (bd * 1000.0)
    return _out(kg_per_kg * 1e6 / MG_CACO3_PER_CMOL)
