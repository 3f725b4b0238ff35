"""Soil chemistry of each sample: ECEC, saturations, ESP, sodicity and acidity.

All amounts are exchangeable, in cmol(+)/kg (see :mod:`geosoil.units`);
saturations are percent of the ECEC. Pure and vectorised: the functions take
numpy arrays (or anything array-like) and :func:`derive` takes and returns a
DataFrame with the canonical analyte columns (``ca``, ``mg``, ``k``, ``na``,
``al``, ``h``, ``acidity``, ``cec``, ``ph``, ``sar``).

ECEC
    The sum of exchangeable Ca, Mg, K, Na and exchangeable acidity (Al + H).
    Where acidity was not measured and the sample's pH is at or above
    ``neutral_ph`` (7.0), acidity counts as 0 (common practice: exchangeable
    acidity is negligible in neutral and alkaline soils). Where the sum cannot
    be formed, a lab-supplied CEC (column ``cec``) is used and the basis is
    recorded in ``ecec_basis``.
ESP
    Exchangeable Na as percent of the ECEC; where Na is missing but SAR is
    given, estimated by the USDA Handbook 60 relation (Richards 1954, pp. 25-26)
    ESR = -0.0126 + 0.01475 SAR, ESP = 100 ESR / (1 + ESR), and flagged in
    ``esp_estimated``.
Soluble salts
    Exchangeable cations extracted without first washing out the soluble salts
    (Rayment & Lyons 2011 method 15A1) include the cations of those salts, so a
    saline sample's Na (and ESP, and gypsum) reads high. Where the lab also gives
    the soluble cations of a water extract and ``soluble_salts = "subtract"``,
    exchangeable = extracted - soluble, the soluble amount being the extract's
    concentration times its water per kg of soil (1:5 -> 5 L/kg):
    cmol(+)/kg = mmol(+)/L x L/kg / 10 [derived]. The subtraction is the
    extractable-minus-soluble rule of USDA Handbook 60 (Richards 1954, from
    memory); a correction never makes an amount negative (clamped at 0, with a
    warning). The default, "warn", leaves the lab's figures as they are: only
    the user knows whether the lab washed the salts out first (15A2, 15B2) or
    adjusted Na itself (15A3), and subtracting from such figures would remove
    the salts twice.
Sodicity
    ESP >= 6 sodic, >= 15 strongly sodic (Northcote & Skene 1972; Australian
    Soil Classification, Isbell 1996). The US convention (USDA Handbook 60) is
    ESP >= 15 for a sodic soil: set ``sodic_esp_percent = 15``.

Examples
--------
>>> import pandas as pd
>>> soil = pd.DataFrame({"ca": [8.0], "mg": [3.0], "k": [0.5], "na": [1.5], "acidity": [0.0]})
>>> out = derive(soil)
>>> float(out.ecec.iloc[0]), float(out.esp.iloc[0]), out.sodicity.iloc[0]
(13.0, 11.538461538461538, 'sodic')
"""

from __future__ import annotations

import dataclasses
import logging
import os
import warnings
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from .columns import extract_water_of_header
from .errors import DataWarning, InputError, SettingsError
from .settings import setting

__all__ = [
    "CATION_SYMBOLS",
    "ChemistrySettings",
    "DERIVED",
    "ecec_from_parts",
    "cec_ph7_from_parts",
    "exchange_chemistry",
    "ACIDITY_BASES",
    "ECEC_BASES",
    "ph_for_rules",
    "rule_ph",
    "saturation",
    "esp_from_sar",
    "sodicity_class",
    "derive",
    "SOLUBLE_COLUMNS",
    "SOLUBLE_DERIVED",
    "SOLUBLE_SALTS",
    "DEFAULT_EXTRACT_L_PER_KG",
    "SOLUBLE_SOURCE",
    "soluble_cmol_kg",
    "sample_names",
]

logger = logging.getLogger(__name__)

#: Columns :func:`derive` adds (plus ``acid_reason``, why ``acid_flag`` is set).
DERIVED: tuple[str, ...] = (
    "acidity_basis",
    "ecec",
    "ecec_basis",
    "ca_sat",
    "mg_sat",
    "k_sat",
    "na_sat",
    "esp",
    "esp_estimated",
    "acid_sat",
    "al_sat",
    "base_sat",
    "ca_mg_ratio",
    "sodicity",
    "acid_flag",
    "acid_reason",
)

_BASES = ("ca", "mg", "k", "na")

#: Soluble cations of a water extract, mmol(+)/L (= meq/L), as the samples reader names them.
SOLUBLE_COLUMNS: dict[str, str] = {"ca": "ca_sol", "mg": "mg_sol", "k": "k_sol", "na": "na_sol"}
#: What ``soluble_salts`` may be: leave the lab's figures and warn, or subtract.
SOLUBLE_SALTS: tuple[str, ...] = ("warn", "subtract")
#: Water of the usual extract, L per kg of soil: 1 part soil to 5 of water (common practice
#: in Australian laboratories; the extract of EC 1:5).
DEFAULT_EXTRACT_L_PER_KG = 5.0
#: Columns :func:`derive` adds with the subtraction: the lab's figure and what was taken off.
SOLUBLE_DERIVED: tuple[str, ...] = (
    *(f"{c}_extracted" for c in _BASES), *(f"{c}_soluble" for c in _BASES), "soluble_subtracted",
)
#: Where the subtraction comes from, in the words the run, report and explain use.
SOLUBLE_SOURCE = (
    "exchangeable = extracted - soluble (the extractable-minus-soluble rule of USDA Handbook "
    "60, Richards 1954, from memory), soluble cmol(+)/kg = extract mmol(+)/L x L of water per "
    "kg of soil / 10 [derived]; right only for cations extracted without washing out soluble "
    "salts first (Rayment & Lyons 2011 method 15A1)"
)
#: The exchangeable bases and their chemical symbols (the one list the outputs and explain use).
CATION_SYMBOLS = {"ca": "Ca", "mg": "Mg", "k": "K", "na": "Na"}
_NAMES = {**CATION_SYMBOLS, "acidity": "acidity (Al + H)"}


@dataclasses.dataclass(frozen=True)
class ChemistrySettings:
    """Thresholds for the sodicity class and the acidity flag.

    Defaults: sodicity from Northcote & Skene (1972); the acidity thresholds
    are common practice (no single published source) and are meant to be set
    for the crop and the region.
    """

    sodic_esp_percent: float = setting(
        6.0,
        doc="ESP at or above which a sample is sodic (Northcote & Skene 1972)",
        unit="%",
        minimum=0.0,
        maximum=100.0,
    )
    strongly_sodic_esp_percent: float = setting(
        15.0,
        doc="ESP at or above which a sample is strongly sodic (Northcote & Skene 1972)",
        unit="%",
        minimum=0.0,
        maximum=100.0,
    )
    acid_ph: float = setting(
        5.5,
        doc="pH in water (1:5) below which a sample is flagged acid (common practice)",
        minimum=2.0,
        maximum=9.0,
    )
    acid_ph_cacl2: float = setting(
        4.8,
        doc="the same threshold when the lab gave pH in CaCl2 only (common practice: pH in "
        "CaCl2 reads about 0.5-0.8 below pH in water)",
        minimum=2.0,
        maximum=9.0,
    )
    acid_saturation_percent: float = setting(
        15.0,
        doc="acid (Al + H) saturation of the ECEC above which a sample is flagged acid "
        "(common practice: sensitive crops suffer from about 10-20 %)",
        unit="%",
        minimum=0.0,
        maximum=100.0,
    )
    neutral_ph: float = setting(
        7.0,
        doc="pH in water at or above which unmeasured exchangeable acidity counts as 0 in the "
        "ECEC (common practice)",
        minimum=5.0,
        maximum=9.0,
    )
    neutral_ph_cacl2: float = setting(
        6.4,
        doc="the same when the lab gave pH in CaCl2 only (common practice: pH in CaCl2 reads "
        "about 0.5-0.8 below pH in water)",
        minimum=4.5,
        maximum=9.0,
    )

    soluble_salts: str = setting(
        "warn",
        doc="exchangeable cations of saline samples include soluble salts unless the lab washed "
        "them out: 'warn' keeps the lab's figures and says where EC 1:5 is high; 'subtract' "
        "takes off the soluble Na, K, Ca and Mg of the lab's water extract (only for figures "
        "measured without washing the salts out, as Rayment & Lyons 2011 method 15A1)",
        choices=SOLUBLE_SALTS,
    )
    extract_water_l_per_kg: float | None = setting(
        None,
        doc="water of the extract the soluble cations were measured in, litres per kg of soil "
        "(1:5 -> 5; a saturation extract: its saturation water content); unset: the ratio "
        "the header names ('Na 1:5 (meq/L)'), else 5",
        unit="L/kg",
        minimum=0.1,
        maximum=100.0,
    )

    def __post_init__(self) -> None:
        if self.strongly_sodic_esp_percent < self.sodic_esp_percent:
            raise SettingsError(
                f"must be at least sodic_esp_percent ({self.sodic_esp_percent:g} %)",
                key="strongly_sodic_esp_percent",
            )
        if self.acid_ph >= self.neutral_ph:
            raise SettingsError(
                f"must be below neutral_ph ({self.neutral_ph:g})", key="acid_ph"
            )
        if self.acid_ph_cacl2 >= self.neutral_ph_cacl2:
            raise SettingsError(
                f"must be below neutral_ph_cacl2 ({self.neutral_ph_cacl2:g})",
                key="acid_ph_cacl2",
            )


def ph_for_rules(
    ph_water: ArrayLike | None, ph_cacl2: ArrayLike | None
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """The pH a threshold is compared with, and where it is the CaCl2 reading.

    pH in water where the lab gave it, else pH in CaCl2: every pH threshold has
    a water and a CaCl2 value, and the one of the pH used applies (no
    conversion between the two). pH in KCl is never used.

    Parameters
    ----------
    ph_water, ph_cacl2 : array_like or None
        pH in water and in CaCl2 (None: not measured).

    Returns
    -------
    ph, cacl2
        The pH used (NaN where neither was given) and a mask that is True where
        it is the CaCl2 reading.

    Examples
    --------
    >>> ph, cacl2 = ph_for_rules([6.1, float("nan")], [5.5, 4.7])
    >>> ph.tolist(), cacl2.tolist()
    ([6.1, 4.7], [False, True])
    """
    if ph_water is None and ph_cacl2 is None:
        return np.asarray(np.nan), np.asarray(False)
    w = np.asarray(np.nan if ph_water is None else ph_water, dtype=float)
    c = np.asarray(np.nan if ph_cacl2 is None else ph_cacl2, dtype=float)
    w, c = np.broadcast_arrays(w, c)
    use_c = ~np.isfinite(w) & np.isfinite(c)
    return np.where(use_c, c, w), use_c


def rule_ph(values: Mapping[str, Any]) -> tuple[str | None, Any]:
    """The pH a set of surfaces (or columns) gives the rate rules, and its method.

    pH in water (``ph``) where given, else pH in CaCl2 (``ph_cacl2``); the rate
    rules read it as ``ph`` with ``ph_method`` "water" or "CaCl2" and take each
    threshold's value for that method. pH in KCl gives none.

    Parameters
    ----------
    values : mapping
        Variable -> values (or any container keyed by variable).

    Returns
    -------
    method, ph
        "water", "CaCl2" or None, and the values (None when there are none).

    Examples
    --------
    >>> rule_ph({"ph_cacl2": 4.9, "ca": 3.0})
    ('CaCl2', 4.9)
    >>> rule_ph({"ph": 5.6, "ph_cacl2": 4.9})
    ('water', 5.6)
    """
    if "ph" in values:
        return "water", values["ph"]
    if "ph_cacl2" in values:
        return "CaCl2", values["ph_cacl2"]
    return None, None


def ecec_from_parts(
    ca: ArrayLike, mg: ArrayLike, k: ArrayLike, na: ArrayLike, acidity: ArrayLike
) -> NDArray[np.float64]:
    """ECEC as the sum of exchangeable cations and acidity, cmol(+)/kg.

    A missing part (NaN) gives a NaN ECEC; :func:`derive` decides what to do then.

    Parameters
    ----------
    ca, mg, k, na, acidity : array_like
        Exchangeable amounts, cmol(+)/kg.

    Returns
    -------
    ndarray of float64
        ECEC, cmol(+)/kg (NaN where a part is missing).

    Examples
    --------
    >>> float(ecec_from_parts(8.0, 3.0, 0.5, 1.5, 2.0)[()])
    15.0
    """
    parts = [np.asarray(v, dtype=float) for v in (ca, mg, k, na, acidity)]
    return parts[0] + parts[1] + parts[2] + parts[3] + parts[4]


def saturation(part: ArrayLike, ecec: ArrayLike) -> NDArray[np.float64]:
    """``part`` as percent of ``ecec``; NaN where the ECEC is missing or not positive.

    Parameters
    ----------
    part : array_like
        Exchangeable amount, cmol(+)/kg.
    ecec : array_like
        ECEC, cmol(+)/kg.

    Returns
    -------
    ndarray of float64
        Percent of the ECEC.

    Examples
    --------
    >>> saturation([1.5, 1.0], [13.0, 0.0]).round(3).tolist()
    [11.538, nan]
    """
    p = np.asarray(part, dtype=float)
    e = np.asarray(ecec, dtype=float)
    p, e = np.broadcast_arrays(p, e)
    ok = np.isfinite(e) & (e > 0)
    out = np.full(p.shape, np.nan)
    # 100 x (part / ECEC), not (100 x part) / ECEC: a part equal to its ECEC gives exactly
    # 100 %, and (IEEE division being monotone) a part of a sum never exceeds 100 %
    np.divide(p, e, out=out, where=ok)
    return np.where(ok, 100.0 * out, np.nan)


def esp_from_sar(sar: ArrayLike) -> NDArray[np.float64]:
    """ESP estimated from SAR (USDA Handbook 60, Richards 1954, pp. 25-26).

    ESR = -0.0126 + 0.01475 SAR; ESP = 100 ESR / (1 + ESR). Below SAR 0.854
    the relation gives a negative ESR; the ESP is then 0.

    Parameters
    ----------
    sar : array_like
        Sodium adsorption ratio, (mmol/L)^0.5.

    Returns
    -------
    ndarray of float64
        Estimated ESP, %.

    Examples
    --------
    >>> esp_from_sar([5.0, 10.0, 0.0]).round(3).tolist()
    [5.763, 11.887, 0.0]
    """
    s = np.asarray(sar, dtype=float)
    esr = np.maximum(-0.0126 + 0.01475 * s, 0.0)
    return 100.0 * esr / (1.0 + esr)


def sodicity_class(
    esp: ArrayLike, settings: ChemistrySettings | None = None
) -> NDArray[np.str_]:
    """Sodicity class of each ESP: "non-sodic", "sodic", "strongly sodic" ("unknown" for NaN).

    Parameters
    ----------
    esp : array_like
        ESP, %.
    settings : ChemistrySettings, optional
        The class limits (default: :class:`ChemistrySettings` defaults).

    Returns
    -------
    ndarray of str
        One class per value.

    Examples
    --------
    >>> sodicity_class([2.0, 6.0, 15.0, float("nan")]).tolist()
    ['non-sodic', 'sodic', 'strongly sodic', 'unknown']
    """
    s = settings or ChemistrySettings()
    e = np.asarray(esp, dtype=float)
    return np.select(
        [~np.isfinite(e), e >= s.strongly_sodic_esp_percent, e >= s.sodic_esp_percent],
        ["unknown", "strongly sodic", "sodic"],
        default="non-sodic",
    )


#: ``acidity_basis``: how each exchangeable acidity was had (index = code).
ACIDITY_BASES: tuple[str, ...] = (
    "measured", "Al + H", "Al (H not measured)", "H (Al not measured)",
    "0 (neutral pH, not measured)", "none",
)
#: ``ecec_basis``: what each ECEC is (index = code).
ECEC_BASES: tuple[str, ...] = ("sum of cations", "lab CEC", "none", "CEC at pH 7")

#: The usual definition of the CEC at pH 7 from a potential-acidity report ([from memory]
#: Raij, Cantarella, Quaggio & Furlani 1996, IAC Boletim Tecnico 100: T = SB + (H + Al)).
CEC_PH7_SOURCE = ("[from memory] T = Ca + Mg + K + Na + (H + Al at pH 7), the sum the base "
                  "saturation method uses (Raij et al. 1996, IAC Boletim Tecnico 100)")


def cec_ph7_from_parts(
    ca: ArrayLike, mg: ArrayLike, k: ArrayLike, na: ArrayLike, acidity_potential: ArrayLike
) -> NDArray[np.float64]:
    """CEC at pH 7 by summation: the bases plus the potential acidity (H + Al at pH 7).

    Na counts where measured (0 where not: labs that report potential acidity often leave
    it out). Missing where Ca, Mg, K or the potential acidity is.

    Examples
    --------
    A worked example (hand arithmetic): Ca 2.0, Mg 0.8, K 0.2, H + Al 3.0 make T = 6.0.

    >>> float(cec_ph7_from_parts([2.0], [0.8], [0.2], [np.nan], [3.0])[0])
    6.0
    """
    na_or_0 = np.where(np.isfinite(np.asarray(na, dtype=float)), na, 0.0)
    return np.asarray(
        np.asarray(ca, dtype=float) + np.asarray(mg, dtype=float) + np.asarray(k, dtype=float)
        + na_or_0 + np.asarray(acidity_potential, dtype=float), dtype=float)


def soluble_cmol_kg(conc_mmolc_l: ArrayLike, water_l_per_kg: float) -> NDArray[np.float64]:
    """The soluble amount of a cation per kg of soil, cmol(+)/kg, from its extract.

    A concentration of c mmol(+)/L in an extract of r litres of water per kg of
    soil is c x r mmol(+)/kg, that is c x r / 10 cmol(+)/kg [derived].

    Examples
    --------
    Soluble Na of 115 mg/L in a 1:5 extract: 115 / 22.990 = 5.0022 mmol(+)/L, x 5 L/kg =
    25.011 mmol(+)/kg = 2.5011 cmol(+)/kg (hand arithmetic).

    >>> round(float(soluble_cmol_kg(115 / 22.990, 5.0)), 4)
    2.5011
    """
    return np.asarray(conc_mmolc_l, dtype=float) * float(water_l_per_kg) / 10.0


def _subtract_soluble(
    get: Any, water: Mapping[str, float]
) -> dict[str, NDArray[Any]]:
    """Each cation of ``water`` less its soluble amount (where both are given), the amount
    taken off and where the difference went below 0 (then 0)."""
    out: dict[str, NDArray[Any]] = {}
    for c in _BASES:
        extracted = get(c)
        if c not in water:
            out[c] = extracted
            continue
        soluble = soluble_cmol_kg(get(SOLUBLE_COLUMNS[c]), water[c])
        both = np.isfinite(extracted) & np.isfinite(soluble)
        left = np.where(both, extracted - np.where(both, soluble, 0.0), extracted)
        # below 0 beyond float noise is a real over-correction (named by derive); noise is 0
        out[f"{c}_clamped"] = both & (left < -1e-9)
        out[c] = np.where(both, np.maximum(left, 0.0), extracted)
        out[f"{c}_soluble"] = np.where(both, soluble, np.nan)
    return out


def exchange_chemistry(
    parts: Mapping[str, ArrayLike | None], settings: ChemistrySettings | None = None,
    *, extract_water: Mapping[str, float] | None = None,
) -> dict[str, NDArray[Any]]:
    """ECEC, saturations, ESP and the exchangeable acidity used, from exchangeable amounts.

    The one home of these rules: :func:`derive` (each sample) and
    :func:`geosoil.surfaces.derive_cells` (each cell of a paddock) both call it,
    so a cell and a sample with the same amounts get the same chemistry.

    Exchangeable acidity
        The lab's ``acidity`` where given; else Al + H where the lab gave them
        apart (Al alone, or H alone, where only one was measured); else 0 where
        pH is at or above ``neutral_ph`` (``neutral_ph_cacl2`` for pH in CaCl2;
        common practice: exchangeable acidity is negligible in neutral and
        alkaline soils); else missing. ``acidity_basis`` says which.
    ECEC
        Ca + Mg + K + Na + acidity where all are given and the sum is above 0
        ("sum of cations"); else the lab's CEC where above 0 ("lab CEC"); else
        the CEC at pH 7 (given, or Ca + Mg + K + Na + potential acidity:
        :func:`cec_ph7_from_parts`) where above 0 ("CEC at pH 7": above the ECEC
        on acid soils, so shares read low there); else missing ("none").
    Saturations
        Each part as percent of the ECEC; missing where the ECEC is (an ECEC of
        0 is no ECEC). Not clipped: with the lab's CEC as the ECEC the shares
        need not add up to 100 %.
    Exchangeable Al
        At most the exchangeable acidity (Al is part of it): where both are
        known and Al is above it (kriged apart, or a lab's Al by one method and
        acidity by another), the Al used is the acidity, so Al saturation never
        exceeds acid saturation; ``al_lowered`` marks those.
    ESP
        ``na_sat``; where Na is missing, ESP from saturation-extract SAR
        (:func:`esp_from_sar`), else a given ``esp`` (an interpolated estimate);
        ``esp_estimated`` marks both.

    Parameters
    ----------
    parts
        Any of ``ca``, ``mg``, ``k``, ``na``, ``acidity``, ``al``, ``h``, ``cec``,
        ``cec_ph7``, ``acidity_potential`` (cmol(+)/kg), ``ph``, ``ph_cacl2``,
        ``sar``, ``esp`` (%): arrays of one
        shape, NaN where not measured; absent or None keys count as not measured.
    settings
        ``neutral_ph`` and ``neutral_ph_cacl2``; defaults when None.
    extract_water
        Cation -> litres of water per kg of soil of the extract its soluble
        concentration (``ca_sol``, ``mg_sol``, ``k_sol``, ``na_sol`` in
        ``parts``, mmol(+)/L) was measured in: those cations are extracted
        amounts, and each is taken as extracted - soluble
        (:func:`soluble_cmol_kg`) where both are given, never below 0. None
        (the default): the amounts are exchangeable as given.

    Returns
    -------
    dict of str to ndarray
        With ``extract_water``: ``ca``, ``mg``, ``k``, ``na`` (exchangeable, after
        the subtraction), ``<cation>_soluble`` (cmol(+)/kg taken off; NaN where
        nothing was) and ``<cation>_clamped`` (True where the soluble amount
        exceeded the extracted and 0 was kept) for each cation corrected; then
        ``al`` (the Al used: at most the acidity), ``al_lowered`` (True where the Al
        given was above the acidity and lowered to it),
        ``acidity`` (the acidity used), ``acidity_basis`` (int8 codes: index into
        :data:`ACIDITY_BASES`), ``ecec``, ``ecec_basis`` (int8 codes: index into
        :data:`ECEC_BASES`), ``ca_sat``, ``mg_sat``,
        ``k_sat``, ``na_sat``, ``esp``, ``esp_estimated``, ``acid_sat``,
        ``al_sat``, ``base_sat`` and ``ca_mg_ratio`` (charge basis; NaN where Mg
        is 0).

    Examples
    --------
    Exchangeable Al and H given apart make the acidity (and the ECEC):

    >>> out = exchange_chemistry({"ca": [2.0], "mg": [1.0], "k": [0.2], "na": [0.3],
    ...                           "al": [1.0], "h": [0.5]})
    >>> float(out["acidity"][0]), ACIDITY_BASES[out["acidity_basis"][0]], float(out["ecec"][0])
    (1.5, 'Al + H', 5.0)
    >>> float(out["acid_sat"][0]), float(out["esp"][0])
    (30.0, 6.0)

    Soluble Na of a 1:5 extract (10 mmol(+)/L x 5 L/kg / 10 = 5.0 cmol(+)/kg) taken off
    the extracted 6.0 leaves 1.0 exchangeable:

    >>> out = exchange_chemistry({"ca": [8.0], "mg": [3.0], "k": [0.5], "na": [6.0],
    ...                           "na_sol": [10.0], "acidity": [0.0]},
    ...                          extract_water={"na": 5.0})
    >>> float(out["na"][0]), float(out["na_soluble"][0]), float(out["ecec"][0])
    (1.0, 5.0, 12.5)

    Al above the exchangeable acidity (as two kriged surfaces can give) is lowered to it:

    >>> out = exchange_chemistry({"ca": [2.0], "mg": [1.0], "k": [0.2], "na": [0.3],
    ...                           "acidity": [1.0], "al": [1.2]})
    >>> float(out["al"][0]), bool(out["al_lowered"][0]), float(out["al_sat"][0])
    (1.0, True, 22.2...)
    >>> bool(out["al_sat"][0] <= out["acid_sat"][0])
    True
    """
    s = settings or ChemistrySettings()
    shape = np.broadcast_shapes(*(np.shape(v) for v in parts.values() if v is not None))

    def get(name: str) -> NDArray[np.float64]:
        v = parts.get(name)
        if v is None:
            return np.broadcast_to(np.float64(np.nan), shape)  # no memory per cell
        return np.broadcast_to(np.asarray(v, dtype=float), shape)

    corrected = _subtract_soluble(get, extract_water) if extract_water else {}
    ca, mg, k, na = (corrected.get(c, get(c)) for c in _BASES)
    acidity, al, h = get("acidity"), get("al"), get("h")
    ph, cacl2 = ph_for_rules(get("ph"), get("ph_cacl2"))
    neutral = np.isfinite(ph) & (ph >= np.where(cacl2, s.neutral_ph_cacl2, s.neutral_ph))
    has_a, has_al, has_h = np.isfinite(acidity), np.isfinite(al), np.isfinite(h)
    from_parts = np.where(has_al, al, 0.0) + np.where(has_h, h, 0.0)
    used = np.where(has_a, acidity, np.where(has_al | has_h, from_parts,
                                              np.where(neutral, 0.0, np.nan)))
    basis = np.select(
        [has_a, has_al & has_h, has_al, has_h, neutral], [0, 1, 2, 3, 4], 5,
    ).astype(np.int8)
    lab_cec = get("cec")
    summed = ecec_from_parts(ca, mg, k, na, used)
    use_sum = np.isfinite(summed) & (summed > 0)
    use_lab = ~use_sum & np.isfinite(lab_cec) & (lab_cec > 0)
    given_t = get("cec_ph7")
    t7 = np.where(np.isfinite(given_t), given_t,
                  cec_ph7_from_parts(ca, mg, k, na, get("acidity_potential")))
    use_t7 = ~use_sum & ~use_lab & np.isfinite(t7) & (t7 > 0)
    ecec = np.where(use_sum, summed, np.where(use_lab, lab_cec, np.where(use_t7, t7, np.nan)))
    lowered = np.isfinite(al) & np.isfinite(used) & (al > used)
    al = np.where(lowered, used, al)
    out: dict[str, NDArray[Any]] = {
        **corrected,
        "al": al,
        "al_lowered": lowered,
        "acidity": used,
        "acidity_basis": basis,
        "ecec": ecec,
        "ecec_basis": np.select([use_sum, use_lab, use_t7], [0, 1, 3], 2).astype(np.int8),
    }
    for name, part in (("ca", ca), ("mg", mg), ("k", k), ("na", na)):
        out[f"{name}_sat"] = saturation(part, ecec)
    measured = out["na_sat"]
    estimate = esp_from_sar(get("sar"))
    given = get("esp")
    estimate = np.where(np.isfinite(estimate), estimate, given)
    out["esp"] = np.where(np.isfinite(measured), measured, estimate)
    out["esp_estimated"] = ~np.isfinite(measured) & np.isfinite(estimate)
    out["acid_sat"] = saturation(used, ecec)
    out["al_sat"] = saturation(al, ecec)
    out["base_sat"] = saturation(ca + mg + k + na, ecec)
    ratio = np.full(shape, np.nan)
    with np.errstate(over="ignore"):
        np.divide(ca, mg, out=ratio, where=np.isfinite(mg) & (mg > 0))
    out["ca_mg_ratio"] = ratio
    return out


def _column(samples: pd.DataFrame, name: str) -> NDArray[np.float64]:
    if name in samples.columns:
        return pd.to_numeric(samples[name], errors="coerce").to_numpy(dtype=float)
    return np.full(len(samples), np.nan)


def derive(
    samples: pd.DataFrame,
    settings: ChemistrySettings | None = None,
    *,
    file: str | os.PathLike[str] | None = None,
    headers: Mapping[str, str] | None = None,
    on_bad_row: str = "stop",
    solution_headers: Mapping[str, str] | None = None,
) -> pd.DataFrame:
    """Add ECEC, saturations, ESP, sodicity and the acidity flag to each sample.

    Parameters
    ----------
    samples
        Canonical analyte columns in cmol(+)/kg (absent columns count as not
        measured); ``source_row`` and ``sample_id`` are used in messages.
    settings
        Thresholds; defaults when None.
    file, headers
        The samples file and analyte -> lab header, to name them in messages.
    on_bad_row
        "stop": a sample whose ECEC cannot be formed raises :class:`InputError`.
        "skip": its ECEC and saturations are left empty (``ecec_basis`` "none")
        with a :class:`DataWarning`; its measured values stay.
    solution_headers
        Cation -> the lab's header of its soluble concentration (``na_sol``...):
        with ``settings.soluble_salts = "subtract"`` the header's extract ratio
        ("1:5") gives the litres of water per kg of soil (see
        :func:`geosoil.columns.extract_water_of_header`).

    Returns
    -------
    DataFrame
        A copy of ``samples`` with the columns in :data:`DERIVED`, worked out by
        :func:`exchange_chemistry`: ``acidity`` (the exchangeable acidity the ECEC
        counts: the lab's, else Al + H, else 0 at neutral pH) with ``acidity_basis``,
        ``ecec`` (cmol(+)/kg), ``ecec_basis`` ("sum of cations" | "lab CEC" | "none"),
        ``ca_sat``, ``mg_sat``, ``k_sat``, ``na_sat``, ``acid_sat`` (Al + H),
        ``al_sat``, ``base_sat`` (Ca + Mg + K + Na), all percent of ECEC;
        ``esp`` (``na_sat``, or from SAR), ``esp_estimated`` (bool),
        ``ca_mg_ratio`` (charge basis; NaN where Mg is 0), ``sodicity``
        (see :func:`sodicity_class`), ``acid_flag`` (bool) and ``acid_reason``
        (text, "" when not flagged). A NaN pH or acid saturation does not set the flag.
        pH thresholds compare pH in water (``ph``) with the water value and, where only
        pH in CaCl2 (``ph_cacl2``) was given, that with the CaCl2 value
        (see :func:`ph_for_rules`).
        ``attrs["ecec_gaps"]`` lists the (row, problem) of the samples whose ECEC was
        left empty (``on_bad_row="skip"``), so a caller can report them as problems.
        With ``soluble_salts = "subtract"``, ``ca``, ``mg``, ``k`` and ``na`` are the
        exchangeable amounts after taking off the soluble ones, the lab's figures kept as
        ``<cation>_extracted`` and the amounts taken off as ``<cation>_soluble``
        (cmol(+)/kg), with ``soluble_subtracted`` (bool) per sample;
        ``attrs["soluble_salts"]`` says what was done (for the run's record).

    Raises
    ------
    InputError
        A sample lacks a part the ECEC needs and has no lab CEC (``on_bad_row="stop"``);
        the message names the file, row and column.

    Examples
    --------
    >>> import pandas as pd
    >>> s = pd.DataFrame({"ca": [2.0], "mg": [1.0], "k": [0.2], "na": [0.3],
    ...                   "al": [1.0], "h": [0.5], "ph": [4.6]})
    >>> row = derive(s).iloc[0]
    >>> float(row.ecec), float(row.acid_sat), bool(row.acid_flag), row.acid_reason
    (5.0, 30.0, True, 'pH 4.6 below 5.5; acid saturation 30.0 % above 15 %')
    """
    s = settings or ChemistrySettings()
    if on_bad_row not in ("stop", "skip"):
        raise SettingsError(
            f"'{on_bad_row}' is not allowed; use 'stop' or 'skip'", key="on_bad_row"
        )
    headers = headers or {}
    ca, mg, k, na = (_column(samples, a) for a in _BASES)
    ph, cacl2 = ph_for_rules(_column(samples, "ph"), _column(samples, "ph_cacl2"))
    sar = _column(samples, "sar")
    lab_cec = _column(samples, "cec")
    water, basis = _extract_water(samples, s, solution_headers or {}, file)
    chem = exchange_chemistry(
        {a: _column(samples, a) for a in (*_BASES, "acidity", "al", "h", "cec", "cec_ph7",
                                          "acidity_potential", "ph", "ph_cacl2", "sar",
                                          *SOLUBLE_COLUMNS.values())}, s,
        extract_water=water or None)
    if water:
        ca, mg, k, na = (chem[c] for c in _BASES)
    soluble_record = _soluble_record(samples, chem, s, water, basis, file=file,
                                     solution_headers=solution_headers or {})
    acidity_used = chem["acidity"]
    bad = chem["ecec_basis"] == ECEC_BASES.index("none")
    no_cations = not any(np.isfinite(v).any() for v in (ca, mg, k, na, lab_cec))
    if no_cations and len(samples):
        # a file of pH (or Al) alone: it still gives surfaces for what it has
        warnings.warn(
            f"{file or 'samples'}: no exchangeable cations and no CEC were read from the file, "
            "so no ECEC, saturations or ESP; rules that need them are skipped ('geosoil check' "
            "lists the columns not read and why)",
            DataWarning,
            stacklevel=2,
        )
    gaps: list[tuple[int | None, str]] = []
    if not no_cations and bad.any():
        gaps = _report_ecec_gaps(
            samples, bad, parts={"ca": ca, "mg": mg, "k": k, "na": na, "acidity": acidity_used},
            neutral_ph=f"{s.neutral_ph:g} in water ({s.neutral_ph_cacl2:g} in CaCl2)",
            file=file, headers=headers,
            on_bad_row=on_bad_row,
        )

    _warn_al_above(samples, chem, file)
    on_t7 = chem["ecec_basis"] == ECEC_BASES.index("CEC at pH 7")
    if on_t7.any():
        warnings.warn(
            f"{file or 'samples'}: {int(on_t7.sum())} sample(s) have no exchangeable acidity "
            "(Al + H in KCl) and no lab CEC: their ECEC is taken as the CEC at pH 7 (given, or "
            "Ca + Mg + K + Na + potential acidity), which is above the ECEC on acid soils, so "
            "their saturations and ESP read low; give exchangeable acidity for an ECEC",
            DataWarning,
            stacklevel=2,
        )
    sar15 = _column(samples, "sar_1to5")
    unused = np.isfinite(sar15) & ~np.isfinite(na) & ~np.isfinite(sar)
    if unused.any():
        warnings.warn(
            f"{file or 'samples'}: {int(unused.sum())} sample(s) give SAR of a 1:5 extract "
            f"('{headers.get('sar_1to5', 'sar_1to5')}') but no exchangeable Na: ESP is not "
            "estimated from it, because the USDA Handbook 60 relation is for saturation-extract "
            "SAR and geosoil applies no 1:5 to saturation-extract conversion (none with a "
            "stated error for these soils); give exchangeable Na or saturation-extract SAR",
            DataWarning,
            stacklevel=2,
        )
    out = samples.copy()
    out.attrs["ecec_gaps"] = gaps
    out.attrs["soluble_salts"] = soluble_record
    if water:
        done = np.zeros(len(samples), dtype=bool)
        for c in water:
            out[f"{c}_extracted"] = _column(samples, c)
            out[c] = chem[c]
            out[f"{c}_soluble"] = chem[f"{c}_soluble"]
            done |= np.isfinite(chem[f"{c}_soluble"])
        out["soluble_subtracted"] = done
    # the exchangeable acidity each sample's ECEC counts (Al + H where the lab gave them
    # apart; 0 at neutral pH) is the acidity that is interpolated: the lab's own values stay
    # where it gave them, and acidity_basis says how each was had
    if any(c in samples.columns and samples[c].notna().any() for c in ("acidity", "al", "h")):
        out["acidity"] = acidity_used  # a file without any acidity gives no acidity surface
    for name in DERIVED:
        if name in chem:
            out[name] = chem[name]
    out["acidity_basis"] = np.asarray(ACIDITY_BASES, dtype=object)[chem["acidity_basis"]]
    out["ecec_basis"] = np.asarray(ECEC_BASES, dtype=object)[chem["ecec_basis"]]
    esp, estimated = chem["esp"], chem["esp_estimated"]
    acid_sat = chem["acid_sat"]
    out["sodicity"] = sodicity_class(esp, s)

    ph_limit = np.where(cacl2, s.acid_ph_cacl2, s.acid_ph)
    low_ph = np.isfinite(ph) & (ph < ph_limit)
    high_acid = np.isfinite(acid_sat) & (acid_sat > s.acid_saturation_percent)
    out["acid_flag"] = low_ph | high_acid
    reasons = []
    for p, lim, c, a, lp, ha in zip(np.broadcast_to(ph, low_ph.shape),
                                    np.broadcast_to(ph_limit, low_ph.shape),
                                    np.broadcast_to(cacl2, low_ph.shape), acid_sat, low_ph,
                                    high_acid, strict=True):
        why = []
        if lp:
            why.append(f"pH{' (CaCl2)' if c else ''} {p:g} below {lim:g}")
        if ha:
            why.append(f"acid saturation {a:.1f} % above {s.acid_saturation_percent:g} %")
        reasons.append("; ".join(why))
    out["acid_reason"] = reasons
    logger.debug("derived chemistry for %d samples (%d from SAR)", len(out), int(estimated.sum()))
    return out


def _warn_al_above(samples: pd.DataFrame, chem: Mapping[str, Any],
                   file: str | os.PathLike[str] | None) -> None:
    """Name the samples whose lab Al is above their exchangeable acidity (lowered to it in
    the chemistry, ``exchange_chemistry``)."""
    lowered = np.asarray(chem["al_lowered"], dtype=bool)
    if lowered.any():
        names = [n for n, b in zip(sample_names(samples), lowered, strict=True) if b]
        warnings.warn(
            f"{file or 'samples'}: exchangeable Al above the exchangeable acidity (of which it is "
            f"a part) at {_listed(names)}: their Al saturation is taken at most the acid "
            "saturation (the Al kept in samples.csv is the lab's); ask the lab whether Al and "
            "acidity were measured by the same extraction",
            DataWarning,
            stacklevel=3,
        )


def sample_names(samples: pd.DataFrame) -> list[str]:
    """How messages name each sample: its ID, with its depth when the samples are at
    several depths (they share IDs then)."""
    ids = (samples["sample_id"].astype(str).tolist() if "sample_id" in samples.columns
           else [str(i) for i in range(len(samples))])
    if {"depth_top_cm", "depth_bottom_cm"} <= set(samples.columns):
        depths = list(zip(samples["depth_top_cm"], samples["depth_bottom_cm"], strict=True))
        if len(set(depths)) > 1:
            ids = [f"{i} ({t:g}-{b:g} cm)" for i, (t, b) in zip(ids, depths, strict=True)]
    return ids


def _listed(names: list[str], most: int = 10) -> str:
    shown = ", ".join(names[:most])
    return shown + (f" and {len(names) - most} more" if len(names) > most else "")


def _extract_water(
    samples: pd.DataFrame, s: ChemistrySettings, headers: Mapping[str, str],
    file: str | os.PathLike[str] | None,
) -> tuple[dict[str, float], dict[str, str]]:
    """The litres of water per kg of soil of each soluble cation's extract, and how it was
    had, for the cations the samples give soluble values of (``subtract`` only)."""
    if s.soluble_salts != "subtract":
        return {}, {}
    water: dict[str, float] = {}
    basis: dict[str, str] = {}
    for c in _BASES:
        col = SOLUBLE_COLUMNS[c]
        if not np.isfinite(_column(samples, col)).any():
            continue
        header = headers.get(c, col)
        said = extract_water_of_header(header)
        if s.extract_water_l_per_kg is not None:
            if isinstance(said, float) and not np.isclose(said, s.extract_water_l_per_kg):
                raise SettingsError(
                    f"is {s.extract_water_l_per_kg:g} L/kg, but the header '{header}' names a "
                    f"1:{said:g} extract ({said:g} L/kg); remove the setting or correct it",
                    key="chemistry.extract_water_l_per_kg")
            water[c] = float(s.extract_water_l_per_kg)
            basis[c] = f"{water[c]:g} L/kg ([chemistry] extract_water_l_per_kg)"
        elif said == "saturation":
            raise InputError(
                f"soluble {_NAMES[c]} is of a saturation extract, whose water per kg of soil "
                "differs from sample to sample, so the soluble amount per kg of soil cannot "
                "be worked out for [chemistry] soluble_salts = 'subtract'",
                file=file, column=header,
                fix="set [chemistry] extract_water_l_per_kg to the soils' saturation water "
                "content (L/kg), or soluble_salts = 'warn'")
        elif isinstance(said, float):
            water[c] = said
            basis[c] = f"1:{said:g} extract, {said:g} L/kg (named in the header)"
        else:
            water[c] = DEFAULT_EXTRACT_L_PER_KG
            basis[c] = ("taken as a 1:5 extract, 5 L/kg (the header names no extract: set "
                        "[chemistry] extract_water_l_per_kg if it is another)")
    return water, basis


def _grouped(said: list[tuple[str, int, str]]) -> list[str]:
    """'Ca, Mg at 9 sample(s): <basis>' for the cations that share a basis and a count."""
    groups: dict[tuple[str, int], list[str]] = {}
    for basis, n, name in said:
        groups.setdefault((basis, n), []).append(name)
    return [f"{', '.join(names)} at {n} sample(s): {basis}" for (basis, n), names in groups.items()]


def _soluble_record(
    samples: pd.DataFrame, chem: Mapping[str, NDArray[Any]], s: ChemistrySettings,
    water: Mapping[str, float], basis: Mapping[str, str], *,
    file: str | os.PathLike[str] | None, solution_headers: Mapping[str, str],
) -> dict[str, Any]:
    """What the soluble-salt setting did, for the run's record; the subtraction's warnings
    (what was taken off, what went below 0, what could not be corrected) raised here."""
    where = file or "samples"
    given = [c for c in _BASES if np.isfinite(_column(samples, SOLUBLE_COLUMNS[c])).any()]
    record: dict[str, Any] = {"mode": s.soluble_salts, "soluble_given": given}
    if s.soluble_salts != "subtract":
        return record
    record["source"] = SOLUBLE_SOURCE
    if not given:
        warnings.warn(
            f"{where}: [chemistry] soluble_salts = 'subtract', but the file gives no soluble "
            "Na, K, Ca or Mg of a water extract (headers such as 'Soluble Na (meq/L)', or "
            "[samples] solution_columns): nothing is subtracted, the exchangeable cations "
            "are the lab's figures", DataWarning, stacklevel=3)
        return record
    names = sample_names(samples)
    cations: dict[str, Any] = {}
    said, clamped, missing = [], [], []
    for c in water:
        extracted = _column(samples, c)
        taken = np.isfinite(chem[f"{c}_soluble"])
        over = np.flatnonzero(chem[f"{c}_clamped"])
        gap = np.flatnonzero(np.isfinite(extracted) & ~taken)
        cations[c] = {"header": solution_headers.get(c), "water_l_per_kg": water[c],
                      "basis": basis[c], "samples": int(taken.sum()),
                      "clamped": [names[i] for i in over],
                      "not_corrected": [names[i] for i in gap]}
        said.append((basis[c], int(taken.sum()), _NAMES[c]))
        if over.size:
            clamped.append(f"{_NAMES[c]} at {over.size} sample(s): " + _listed(
                [f"{names[i]} (extracted {extracted[i]:.4g}, soluble "
                 f"{chem[f'{c}_soluble'][i]:.4g} cmol(+)/kg)" for i in over], most=5))
        if gap.size:
            missing.append(f"{_NAMES[c]} at {_listed([names[i] for i in gap])}")
    record["cations"] = cations
    warnings.warn(
        f"{where}: exchangeable cations corrected for soluble salts ([chemistry] soluble_salts "
        f"= 'subtract'): {'; '.join(_grouped(said))}; {SOLUBLE_SOURCE}",
        DataWarning, stacklevel=3)
    if clamped:
        warnings.warn(
            f"{where}: the soluble amount exceeds the extracted for {'; '.join(clamped)}: set to 0 "
            "(a correction never makes a cation negative; every such sample is listed in "
            "run.json, soluble_salts); check the lab's figures and the "
            "extract ratio, and whether the lab had already washed out the soluble salts",
            DataWarning, stacklevel=3)
    if missing:
        warnings.warn(
            f"{where}: no soluble value to subtract for {'; '.join(missing)}: those "
            "exchangeable amounts are the lab's figures, not corrected for soluble salts",
            DataWarning, stacklevel=3)
    return record


def _header_of(analyte: str, headers: Mapping[str, str]) -> str:
    """The lab's header of ``analyte``; for acidity, its Al and H headers when it came from them."""
    if analyte == "acidity" and "acidity" not in headers:
        parts = [headers[a] for a in ("al", "h") if a in headers]
        if parts:
            return ", ".join(parts)
    return headers.get(analyte, analyte)


def _report_ecec_gaps(
    samples: pd.DataFrame,
    bad: NDArray[np.bool_],
    *,
    parts: Mapping[str, NDArray[np.float64]],
    neutral_ph: str,
    file: str | os.PathLike[str] | None,
    headers: Mapping[str, str],
    on_bad_row: str,
) -> list[tuple[int | None, str]]:
    """Raise (or warn, for "skip") naming the samples whose ECEC cannot be formed.

    Returns the (row, problem) of each such sample when they are skipped.
    """
    rows = samples["source_row"].to_numpy() if "source_row" in samples.columns else None
    ids = samples["sample_id"].to_numpy() if "sample_id" in samples.columns else None
    problems = []
    for i in np.flatnonzero(bad):
        missing = [a for a in parts if not np.isfinite(parts[a][i])]
        if missing:
            names = ", ".join(_NAMES[a] for a in missing)
            problem = f"the ECEC needs exchangeable {names}, which this sample lacks"
            if "acidity" in missing:
                problem += f" (acidity counts as 0 only at pH {neutral_ph} or above)"
            problem += ", and there is no lab CEC (or potential acidity) to use instead"
        else:
            problem = "the ECEC is 0 and there is no lab CEC to use instead"
        if ids is not None:
            problem = f"sample '{ids[i]}': {problem}"
        columns = ", ".join(_header_of(a, headers) for a in missing) or None
        row = None if rows is None else int(rows[i])
        problems.append((row, columns, problem))
    fix = (
        "give the missing values (or map their columns in [samples.columns]), or give a lab "
        "CEC column, or set on_bad_row = 'skip' to leave these samples' ECEC empty"
    )
    if on_bad_row == "stop":
        row, columns, problem = problems[0]
        more = len(problems) - 1
        if more:
            problem += f" ({more} more sample{'s' if more > 1 else ''} likewise)"
        raise InputError(problem, file=file, row=row, column=columns, fix=fix)
    listed = "; ".join(
        f"row {r}: {p}" if r is not None else p for r, _c, p in problems
    )
    warnings.warn(
        f"{file or 'samples'}: ECEC left empty for {len(problems)} sample(s): {listed}",
        DataWarning,
        stacklevel=3,
    )
    return [(r, p) for r, _c, p in problems]
