"""Per-cell gypsum, lime and calcium rates from soil chemistry, by published methods.

Every rule works in cmol(+)/kg of soil, then one unit chain turns the charge
into product as spread::

    cmol(+)/kg  --x mg per cmol(+)-->  mg/kg  --x soil mass of the layer-->  kg/ha of Ca (or CaCO3)
                --/ product fraction (Ca fraction, or ENV for liming)-->  kg/ha of product

with the mg per cmol(+) from the standard atomic weights
(:func:`geosoil.units.mg_per_cmol`, :data:`geosoil.units.MG_CACO3_PER_CMOL`)
and the soil mass ``10 000 m2 x depth (m) x bulk density (kg/m3)``.

Rules (each switchable, ``enabled = "auto" | "on" | "off"``):

``gypsum`` -- sodicity, USDA Handbook 60 (Richards 1954)
    ``Ca (cmol(+)/kg) = (ESP - target ESP) / 100 x ECEC x F`` with the
    exchange-efficiency factor F (Oster et al. 1999 give 1.1 to 1.3).
``lime`` -- acidity, one method chosen by ``method``
    ``kamprath`` (Kamprath 1970): ``CaCO3 = factor x Al`` (factor 1.5);
    ``cochrane`` (Cochrane, Salinas & Sanchez 1980):
    ``CaCO3 = factor x [Al - RAS x (Al + Ca + Mg) / 100]``;
    ``acidity_share`` (charge balance): ``CaCO3 = factor x (acidity - share x ECEC / 100)``.
    Converted to product by its effective neutralising value (CCE x fineness, as spread).
``calcium`` -- sufficiency (common practice)
    Raises exchangeable Ca to a minimum, with lime where pH is below
    ``lime_below_ph`` and gypsum elsewhere.
``balance`` -- cation saturation ratios, OFF by default and CONTESTED
    (Kopittke & Menzies 2007, SSSA J 71:259): Ca, Mg and K saturation targets.

Double counting. Calcium that an earlier rule puts on counts toward the
calcium minimum (and toward the balance rule's Ca target), as the exchangeable
calcium it is expected to add: for the gypsum rule the sodium it displaces,
``(ESP - target) / 100 x ECEC`` (the efficiency allowance ``F - 1`` is not
counted); for the lime rule the acidity it neutralises, ``requirement / factor``,
times the share of the product's neutralising value carried by calcium (1 for
calcite, hydrated lime and quicklime, 0.5 for dolomite, whose other half is Mg
and counts toward Mg). Rules run in the order gypsum, lime, calcium, balance.
Exchangeable capacity (ECEC) is held constant.

Guard (common practice): no liming product on cells whose pH is above
``no_lime_above_ph`` (about 7). The calcium rule then uses gypsum (its
``lime_below_ph`` may not exceed the guard limit); the balance rule puts the
calcium of withheld dolomite on as its (non-liming) calcium product.

Every pH threshold has a value for pH in water and one for pH in CaCl2
(``no_lime_above_ph`` / ``no_lime_above_ph_cacl2``, ``lime_below_ph`` /
``lime_below_ph_cacl2``); the ``ph`` surface is pH in water or, where the lab
gave pH in CaCl2 only, pH in CaCl2 (``compute_rates(..., ph_method=)``; see
:func:`geosoil.chemistry.rule_ph`), and each threshold takes its own value (common
practice: pH in CaCl2 reads about 0.5-0.8 below pH in water). pH is never
converted from one method to the other, and pH in KCl has no thresholds.

Negative interpolated amounts are read as 0. NaN in gives NaN out.

Rates are advisory: have them checked by a qualified agronomist before
spreading.

Examples
--------
>>> import numpy as np
>>> from geosoil.products import default_products
>>> settings = RateSettings(gypsum=GypsumRule(target_esp_percent=5, exchange_efficiency=1.0))
>>> cells = {"esp": np.array([25.0, 3.0]), "ecec": np.array([20.0, 20.0])}
>>> r = compute_rates(cells, settings, default_products(), depth_m=0.15, bulk_density_g_cm3=1.5)
>>> np.round(r.product_rates["gypsum"] / 1000, 3)   # Oster et al. 1999: 7.747 from first principles
array([7.747, 0.   ])
>>> r.skipped[0][0]
'lime'
"""

from __future__ import annotations

import dataclasses
import difflib
import logging
import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .chemistry import CEC_PH7_SOURCE, ChemistrySettings, cec_ph7_from_parts
from .errors import InputError, RateWarning, SettingsError
from .liming import (
    CROP_TARGETS,
    PH_METHODS,
    SMP_BPH_RANGE,
    VAN_BEMMELEN,
    CropTarget,
    adams_evans_acidity,
    adams_evans_lime,
    aitken_outside,
    base_saturation_lime,
    below_trigger,
    caco3_cmol_kg,
    maintenance_lime,
    mehlich_acidity,
    mehlich_lime,
    phbc_aitken,
    phbc_lime,
    smp_lime,
)
from .liming import (
    METHODS as TARGET_METHODS,
)
from .products import Product, _check_declared
from .settings import setting
from .units import (
    CATION_UNITS,
    MG_CACO3_PER_CMOL,
    kg_per_ha_of_layer,
    mg_kg_to_kg_ha,
    mg_per_cmol,
    to_cmol_kg,
)

__all__ = [
    "SECTION",
    "ENABLED_CHOICES",
    "INPUT_NAMES",
    "METHOD_CITATIONS",
    "GYPSUM_NO_LIME_CREDIT",
    "AL_METHODS",
    "LIME_METHOD_ORDER",
    "DEFAULT_TARGET",
    "choose_lime_method",
    "rule_inputs",
    "phbc_ph_note",
    "input_sources",
    "GypsumRule",
    "LimeRule",
    "CalciumRule",
    "BalanceRule",
    "RateSettings",
    "Step",
    "RateResult",
    "RateLayer",
    "plan_rules",
    "check_inputs",
    "inputs_used",
    "compute_rates",
    "warn_acid_cells_without_lime",
    "explain_cell",
    "format_steps",
]

logger = logging.getLogger(__name__)

#: Section of the project file that holds the rate settings (used in messages).
SECTION = "rates"

#: Values of every rule's ``enabled`` switch.
ENABLED_CHOICES: tuple[str, ...] = ("auto", "on", "off")

#: Input surfaces :func:`compute_rates` understands. Exchangeable amounts and
#: ECEC in cmol(+)/kg; ``esp`` and saturations in percent of ECEC; ``ph`` as the lab reports it.
INPUT_NAMES: tuple[str, ...] = (
    "ca", "mg", "k", "na", "al", "h", "acidity", "ecec", "esp", "ca_sat", "mg_sat", "k_sat", "ph",
    "cec_ph7", "acidity_potential", "bph_smp", "bph_sikora", "bph_mehlich", "bph_adams_evans",
    "oc", "om", "clay", "phbc",
)

#: Lime methods that neutralise exchangeable Al (to about pH 5.5), not to a target pH.
AL_METHODS: tuple[str, ...] = ("kamprath", "cochrane", "acidity_share")

#: Order in which ``method = "auto"`` (and ``geosoil new``) picks the lime method: the first
#: whose inputs the samples give. Target-pH methods come first (they lime to the crop's pH);
#: the Al-based ones only neutralise exchangeable Al. Change it with ``rates.lime.method_order``.
LIME_METHOD_ORDER: tuple[str, ...] = (
    "smp", "sikora", "mehlich", "adams_evans", "base_saturation", "phbc",
    "kamprath", "cochrane", "acidity_share",
)

#: Target pH when neither a target nor a crop is set: pH 6.0 in water, most field crops on
#: mineral soils (Tri-State Fertilizer Recommendations 2020, from memory; common practice).
DEFAULT_TARGET = CropTarget(
    6.0, "water", "most field crops on mineral soils (Tri-State Fertilizer Recommendations 2020, "
    "from memory) [common practice]",
)
#: Where the target's pH method is not the lab's, the acid cells that need a test are found
#: against this pH in the lab's method (common practice: pH 6.0 in water is about 5.5 in CaCl2).
_ACID_BELOW = {"water": 6.0, "CaCl2": 5.5}

#: Citation of each method, as shown in outputs and explanations.
#: How the gypsum rule treats the calcium that lime brings, stated where the gypsum method is
#: described (the report's methods, README): no credit, on purpose.
GYPSUM_NO_LIME_CREDIT = (
    "the gypsum rate takes no credit for the calcium that lime supplies where both are "
    "prescribed: it is worked out as if no lime were spread, which is conservative on purpose "
    "(lime's calcium reaches the exchange sites slowly and only as the lime neutralises "
    "acidity)"
)

METHOD_CITATIONS: dict[str, str] = {
    "handbook60": "USDA Handbook 60 (Richards 1954); exchange efficiency F after Oster et al. 1999",
    "kamprath": "Kamprath 1970, Soil Sci. Soc. Am. Proc. 34:252",
    "cochrane": "Cochrane, Salinas & Sanchez 1980, Tropical Agriculture 57",
    "acidity_share": "charge balance: exchangeable acidity brought to a target share of ECEC "
    "[derived]",
    "sufficiency": "minimum exchangeable calcium (sufficiency) [common practice]",
    "bcsr": "basic cation saturation ratios (Bear and co-workers, 1940s); CONTESTED: "
    "Kopittke & Menzies 2007, SSSA J 71:259",
    **{k: f"{m.title}: {m.citation}; calibration: {m.calibration}"
       for k, m in TARGET_METHODS.items()},
    "maintenance": "maintenance lime: net acid addition x 50.04 kg CaCO3 per kmol H+ [derived]; "
    "Helyar & Porter 1989 style [from memory]",
}

_DERIVED = "[derived] from the definitions and standard atomic weights"
_GUARD_SOURCE = "[common practice] no lime on alkaline soil (pH above about 7)"

#: The warning where the pH guard cannot run (the same words in check and run).
PH_GUARD_NOT_APPLIED = (
    "pH guard not applied: no pH in water or CaCl2 (pH in KCl is mapped, but no threshold is "
    "set for it and no conversion is applied), so nothing withholds liming products on "
    "alkaline cells (common practice: no lime above pH about 7 in water); give pH in water "
    "or CaCl2, or check those cells yourself"
)

# How each quantity can be had: the inputs of each alternative, first preferred.
_SOURCES: dict[str, tuple[tuple[str, ...], ...]] = {
    "esp": (("esp",), ("na", "ecec")),
    "ca": (("ca",), ("ca_sat", "ecec")),
    "mg": (("mg",), ("mg_sat", "ecec")),
    "k": (("k",), ("k_sat", "ecec")),
    "acidity": (("acidity",), ("al", "h")),
    "ecec": (("ecec",),),
    "al": (("al",),),
    "ph": (("ph",),),
    "cec_ph7": (("cec_ph7",), ("acidity_potential", "ca", "mg", "k")),
    "bph_smp": (("bph_smp",),),
    "bph_sikora": (("bph_sikora",),),
    "bph_mehlich": (("bph_mehlich",),),
    "bph_adams_evans": (("bph_adams_evans",),),
    "oc": (("oc",), ("om",)),
    "clay": (("clay",),),
    "phbc": (("phbc",), ("oc", "clay"), ("om", "clay")),
}

_DESCRIBE = {
    "esp": "ESP (esp, or na with ecec)",
    "ca": "exchangeable Ca (ca, or ca_sat with ecec)",
    "mg": "exchangeable Mg (mg, or mg_sat with ecec)",
    "k": "exchangeable K (k, or k_sat with ecec)",
    "acidity": "exchangeable acidity (acidity, or al with h)",
    "ecec": "ECEC (ecec)",
    "al": "exchangeable Al (al)",
    "ph": "pH (ph)",
    "cec_ph7": "CEC at pH 7 (cec_ph7, or acidity_potential with ca, mg, k)",
    "bph_smp": "SMP buffer pH (bph_smp)",
    "bph_sikora": "Sikora buffer pH (bph_sikora)",
    "bph_mehlich": "Mehlich buffer pH (bph_mehlich)",
    "bph_adams_evans": "Adams-Evans buffer pH (bph_adams_evans)",
    "oc": "organic carbon (oc, or om)",
    "clay": "clay % (clay)",
    "phbc": "pH buffering capacity (phbc, or organic carbon oc or matter om with clay)",
}

#: What to ask the lab for, per lime method.
_ASK = {
    "smp": "an SMP buffer pH", "sikora": "a Sikora buffer pH", "mehlich": "a Mehlich buffer pH",
    "adams_evans": "an Adams-Evans buffer pH", "phbc": "organic carbon and clay (or a pHBC)",
    "base_saturation": "CEC at pH 7 with exchangeable Ca, Mg and K",
    "kamprath": "exchangeable Al", "cochrane": "exchangeable Al, Ca and Mg",
    "acidity_share": "exchangeable acidity and the cations for ECEC",
}

_UNIT = {
    "esp": "%", "ca_sat": "%", "mg_sat": "%", "k_sat": "%", "ph": "", "ph_cacl2": "",
}


# --------------------------------------------------------------------------- settings


def _enabled_setting(default: str, what: str) -> Any:
    return setting(
        default,
        doc=f"{what}: 'auto' runs when its inputs are available, 'on' requires them, "
        "'off' skips it",
        choices=ENABLED_CHOICES,
    )


@dataclass(frozen=True)
class GypsumRule:
    """Gypsum for sodicity, USDA Handbook 60 (Richards 1954), efficiency after Oster et al. 1999."""

    enabled: str = _enabled_setting("auto", "gypsum for sodicity")
    method: str = setting(
        "handbook60",
        doc="published method: 'handbook60' = USDA Handbook 60 (Richards 1954) gypsum requirement",
        choices=("handbook60",),
    )
    target_esp_percent: float = setting(
        5.0, doc="ESP to bring the soil down to", unit="%", minimum=0.0, maximum=100.0
    )
    exchange_efficiency: float = setting(
        1.2,
        doc="exchange-efficiency factor F on the calcium required (Oster et al. 1999: 1.1 to 1.3)",
        minimum=1.0,
        maximum=2.0,
    )
    product: str = setting("gypsum", doc="product key that supplies the calcium")
    treat_depth_cm: float = setting(
        0.0,
        doc="depth the gypsum must treat, cm; with samples at several depths the layers' "
        "requirements are summed over it, each over the soil it stands for (0: [soil] depth_m)",
        unit="cm", minimum=0.0, maximum=200.0,
    )
    leaching_note_esp_percent: float = setting(
        15.0,
        doc="ESP from which outputs note that gypsum needs leaching water and drainage to work",
        unit="%",
        minimum=0.0,
        maximum=100.0,
    )

    def __post_init__(self) -> None:
        _check_declared(self)


@dataclass(frozen=True)
class LimeRule:
    """Lime for acidity: to a target pH (buffer pH, pHBC, base saturation) or against Al."""

    enabled: str = _enabled_setting("auto", "lime for acidity")
    method: str = setting(
        "kamprath",
        doc="to a target pH: 'smp', 'sikora' (buffer pH on SMP's table: pH in water, short t/ac "
        "of a 2.4 M lb/ac slice), 'mehlich' (buffer pH as North Carolina applies it: pH in "
        "water, t/ac of 0.20 m by volume), 'adams_evans' (buffer pH, low-CEC soils: pH in water, "
        "per kg), 'phbc' (pH buffering capacity, measured or from organic carbon and clay: pH "
        "and target in one method, per kg), 'base_saturation' (Raij et al. 1996: t/ha of 0.20 m "
        "by volume, T in cmolc/dm3); converted to depth_m and the bulk density; against "
        "exchangeable Al: 'kamprath' (Kamprath 1970), 'cochrane' (Cochrane, Salinas & Sanchez "
        "1980), 'acidity_share'; 'auto' = the first of method_order the samples can run",
        choices=("auto", *AL_METHODS, *TARGET_METHODS),
    )
    method_order: tuple[str, ...] = setting(
        LIME_METHOD_ORDER,
        doc="order in which 'auto' (and 'geosoil new') picks the method: the first whose inputs "
        "the samples give",
    )
    target_ph: float | None = setting(
        None,
        doc="pH to lime to, in target_ph_method (default: the crop's, else 6.0 in water, common "
        "practice)", minimum=3.5, maximum=7.5,
    )
    target_ph_method: str = setting(
        "water", doc="pH method target_ph is stated in", choices=PH_METHODS,
    )
    crop: str | None = setting(
        None,
        doc="crop whose target pH to use when target_ph is not set (built-in: "
        + ", ".join(CROP_TARGETS) + ")",
    )
    target_ph_by_paddock: dict[str, float] = setting(
        default_factory=dict, doc="target pH per paddock name (in target_ph_method)",
    )
    crop_by_paddock: dict[str, str] = setting(
        default_factory=dict, doc="crop per paddock name (its target pH and pH method)",
    )
    trigger_margin_ph: float = setting(
        0.2,
        doc="lime only where pH is more than this below the target (common practice; 0 limes "
        "any cell below the target)", minimum=0.0, maximum=1.5,
    )
    target_base_saturation_percent: float = setting(
        60.0,
        doc="V2 of the base-saturation method: base saturation at pH 7 to reach (Raij et al. "
        "1996 give 50 to 80 % by crop; 60 % for grain crops, from memory)",
        unit="%", minimum=10.0, maximum=95.0,
    )
    om_to_oc_factor: float = setting(
        VAN_BEMMELEN,
        doc="organic matter / organic carbon, to read organic matter as carbon for the pHBC "
        "regression (1.724, van Bemmelen: a convention)", minimum=1.0, maximum=3.0,
    )
    maintenance_kmol_h_ha_yr: float = setting(
        0.0,
        doc="net acid addition of the farming system, to add maintenance lime (x 50.04 kg CaCO3 "
        "per kmol H+), shown separately (0: none)",
        unit="kmol H+/ha/yr", minimum=0.0, maximum=20.0,
    )
    kamprath_factor: float = setting(
        1.5, doc="CaCO3 cmol(+)/kg per cmol(+)/kg of exchangeable Al (Kamprath 1970: 1.5)",
        minimum=0.0, maximum=5.0, exclusive_minimum=True,
    )
    kamprath_min_al: float = setting(
        0.1,
        doc="exchangeable Al at or below this counts as none for the Kamprath method (labs' "
        "detection limits are about 0.1; a value reported below the limit is no evidence of "
        "Al: common practice)",
        unit="cmol(+)/kg", minimum=0.0, maximum=2.0,
    )
    cochrane_factor: float = setting(
        1.5, doc="factor of the Cochrane, Salinas & Sanchez (1980) formula",
        minimum=0.0, maximum=5.0, exclusive_minimum=True,
    )
    target_al_saturation_percent: float = setting(
        20.0,
        doc="RAS: Al saturation of (Al + Ca + Mg) the crop tolerates (crop dependent; set it "
        "for the crop)",
        unit="%", minimum=0.0, maximum=100.0,
    )
    acidity_factor: float = setting(
        1.0,
        doc="CaCO3 cmol(+)/kg per cmol(+)/kg of acidity removed (1 = equivalent exchange; "
        "raise it to allow for non-exchangeable acidity)",
        minimum=0.0, maximum=5.0, exclusive_minimum=True,
    )
    target_acidity_share_percent: float = setting(
        10.0, doc="share of ECEC left as exchangeable acidity (crop dependent; keep it below "
        "[chemistry] acid_saturation_percent, or acid-flagged cells get no lime)", unit="%",
        minimum=0.0, maximum=100.0,
    )
    product: str = setting("lime", doc="liming product key")

    def __post_init__(self) -> None:
        _check_declared(self)
        allowed = (*AL_METHODS, *TARGET_METHODS)
        for i, m in enumerate(self.method_order):
            if m not in allowed:
                near = difflib.get_close_matches(m, allowed, n=1)
                hint = f"did you mean '{near[0]}'? " if near else ""
                raise SettingsError(f"'{m}' is not a lime method; {hint}methods: "
                                    f"{', '.join(allowed)}", key=f"method_order[{i}]")
        crops = [("crop", self.crop)] + [(f"crop_by_paddock.{k}", v)
                                          for k, v in self.crop_by_paddock.items()]
        for key, crop in crops:
            if crop is not None and crop not in CROP_TARGETS:
                near = difflib.get_close_matches(crop, list(CROP_TARGETS), n=1)
                hint = f"did you mean '{near[0]}'? " if near else ""
                raise SettingsError(
                    f"'{crop}' is not a built-in crop; {hint}crops: {', '.join(CROP_TARGETS)}; "
                    "or set target_ph and target_ph_method instead", key=key)
        for name, t in self.target_ph_by_paddock.items():
            if not 3.5 <= t <= 7.5:
                raise SettingsError(f"must be from 3.5 to 7.5 (got {t:g})",
                                    key=f"target_ph_by_paddock.{name}")

    @property
    def factor(self) -> float:
        """The factor of the chosen method (1 for the target-pH methods)."""
        return {
            "kamprath": self.kamprath_factor,
            "cochrane": self.cochrane_factor,
            "acidity_share": self.acidity_factor,
        }.get(self.method, 1.0)

    def target(self) -> CropTarget:
        """The target pH, its pH method and where it comes from.

        Returns
        -------
        CropTarget

        Examples
        --------
        >>> LimeRule(crop="alfalfa").target().ph, LimeRule(target_ph=5.8).target().source
        (6.8, 'rates.lime.target_ph')
        """
        if self.target_ph is not None:
            return CropTarget(self.target_ph, self.target_ph_method, "rates.lime.target_ph")
        if self.crop is not None:
            return CROP_TARGETS[self.crop]
        return DEFAULT_TARGET

    def for_paddock(self, paddock: str) -> LimeRule:
        """This rule with the paddock's own target or crop, when it has one.

        Parameters
        ----------
        paddock : str
            Paddock name.

        Returns
        -------
        LimeRule
        """
        if paddock in self.target_ph_by_paddock:
            return dataclasses.replace(self, target_ph=self.target_ph_by_paddock[paddock])
        if paddock in self.crop_by_paddock:
            return dataclasses.replace(self, target_ph=None, crop=self.crop_by_paddock[paddock])
        return self


@dataclass(frozen=True)
class CalciumRule:
    """Calcium sufficiency: raise exchangeable Ca to a minimum (common practice)."""

    enabled: str = _enabled_setting("auto", "calcium sufficiency")
    method: str = setting(
        "sufficiency", doc="'sufficiency' = raise exchangeable Ca to a minimum (common practice)",
        choices=("sufficiency",),
    )
    minimum_ca: float = setting(
        2.0,
        doc="minimum exchangeable calcium (soil and crop dependent: set it from your region's "
        "interpretation tables)",
        minimum=0.0,
    )
    minimum_ca_unit: str = setting(
        "cmol/kg", doc="unit of minimum_ca", choices=CATION_UNITS
    )
    lime_below_ph: float = setting(
        6.0,
        doc="calcium goes on as the lime product below this pH in water and as the gypsum "
        "product at or above it (common practice)",
        minimum=2.0, maximum=11.0,
    )
    lime_below_ph_cacl2: float = setting(
        5.4,
        doc="the same switch when the lab gave pH in CaCl2 only (common practice: pH in CaCl2 "
        "reads about 0.5-0.8 below pH in water)",
        minimum=2.0, maximum=11.0,
    )
    lime_product: str = setting("lime", doc="liming product key used on acid cells")
    gypsum_product: str = setting("gypsum", doc="non-liming calcium product key used elsewhere")

    def __post_init__(self) -> None:
        _check_declared(self)


@dataclass(frozen=True)
class BalanceRule:
    """Cation saturation targets (basic cation saturation ratios). CONTESTED, off by default.

    Kopittke & Menzies (2007, SSSA J 71:259) found that within the ranges
    common in soils the ratios of Ca, Mg and K generally do not affect
    fertility; outputs label this rule as contested.
    """

    enabled: str = _enabled_setting("off", "cation balance targets (contested)")
    method: str = setting(
        "bcsr",
        doc="'bcsr' = basic cation saturation ratios (contested: Kopittke & Menzies 2007)",
        choices=("bcsr",),
    )
    target_ca_sat_percent: float = setting(
        65.0, doc="Ca saturation target", unit="%", minimum=0.0, maximum=100.0
    )
    target_mg_sat_percent: float = setting(
        10.0, doc="Mg saturation target", unit="%", minimum=0.0, maximum=100.0
    )
    target_k_sat_percent: float = setting(
        5.0, doc="K saturation target (0: none)", unit="%", minimum=0.0, maximum=100.0
    )
    minimum_k: float = setting(0.0, doc="minimum exchangeable K (0: none)", minimum=0.0)
    minimum_k_unit: str = setting("cmol/kg", doc="unit of minimum_k", choices=CATION_UNITS)
    calcium_product: str = setting(
        "gypsum", doc="non-liming calcium product key where Ca is short or Mg in excess"
    )
    dolomite_product: str = setting("dolomite", doc="Ca + Mg product key where both are short")
    potassium_product: str = setting("potassium_sulfate", doc="potassium product key")

    def __post_init__(self) -> None:
        _check_declared(self)
        total = self.target_ca_sat_percent + self.target_mg_sat_percent + self.target_k_sat_percent
        if total > 100.0:
            raise SettingsError(
                f"Ca, Mg and K saturation targets add up to {total:g} % (more than 100 %)",
                key="target_ca_sat_percent",
            )

    @property
    def wants_k(self) -> bool:
        """True when a K target or minimum is set."""
        return self.target_k_sat_percent > 0 or self.minimum_k > 0


@dataclass(frozen=True)
class RateSettings:
    """All rate rules, and the pH guard on liming products.

    Examples
    --------
    >>> from geosoil.settings import from_mapping
    >>> s = from_mapping(RateSettings, {"lime": {"method": "cochrane"}}, section="rates")
    >>> s.lime.method, s.balance.enabled
    ('cochrane', 'off')
    >>> try:
    ...     from_mapping(RateSettings, {"gypsum": {"target_esp_percent": 120}}, section="rates")
    ... except SettingsError as exc:
    ...     print(exc.key, "--", exc.bare_message)
    rates.gypsum.target_esp_percent -- must be from 0 to 100 % (got 120)
    """

    gypsum: GypsumRule = setting(default_factory=GypsumRule, doc="gypsum for sodicity")
    lime: LimeRule = setting(default_factory=LimeRule, doc="lime for acidity")
    calcium: CalciumRule = setting(default_factory=CalciumRule, doc="calcium sufficiency")
    balance: BalanceRule = setting(
        default_factory=BalanceRule, doc="cation balance targets (contested, off by default)"
    )
    ph_guard: bool = setting(
        True, doc="withhold liming products where pH is above no_lime_above_ph (common practice)"
    )
    no_lime_above_ph: float = setting(
        7.0, doc="pH in water above which no liming product goes on (common practice: about 7)",
        minimum=2.0, maximum=11.0,
    )
    no_lime_above_ph_cacl2: float = setting(
        6.4, doc="the same limit when the lab gave pH in CaCl2 only (common practice: pH in "
        "CaCl2 reads about 0.5-0.8 below pH in water)",
        minimum=2.0, maximum=11.0,
    )

    def for_paddock(self, paddock: str) -> RateSettings:
        """These settings with the paddock's own lime target or crop.

        Parameters
        ----------
        paddock : str
            Paddock name.

        Returns
        -------
        RateSettings
        """
        lime = self.lime.for_paddock(paddock)
        return self if lime is self.lime else dataclasses.replace(self, lime=lime)

    def __post_init__(self) -> None:
        _check_declared(self)
        for switch, guard, suffix in (
            (self.calcium.lime_below_ph, self.no_lime_above_ph, ""),
            (self.calcium.lime_below_ph_cacl2, self.no_lime_above_ph_cacl2, "_cacl2"),
        ):
            if self.ph_guard and switch > guard:
                raise SettingsError(
                    f"lime_below_ph{suffix} {switch:g} is above the pH guard "
                    f"no_lime_above_ph{suffix} {guard:g}; lower it or raise the guard",
                    key=f"calcium.lime_below_ph{suffix}",
                )

    def ph_limits(self, method: str) -> tuple[float, float]:
        """(no-lime guard, calcium rule's lime/gypsum switch) for pH in ``method``.

        Parameters
        ----------
        method : str
            "water" or "CaCl2".

        Returns
        -------
        tuple of float
            The guard limit and the switch.
        """
        if method == "CaCl2":
            return self.no_lime_above_ph_cacl2, self.calcium.lime_below_ph_cacl2
        return self.no_lime_above_ph, self.calcium.lime_below_ph


# --------------------------------------------------------------------------- results


@dataclass(frozen=True)
class Step:
    """One line of arithmetic for one cell.

    ``inputs`` maps each name in ``formula`` to ``(value, unit)``.
    """

    rule: str
    description: str
    formula: str
    inputs: Mapping[str, tuple[float, str]]
    result: float
    unit: str
    source: str

    def __str__(self) -> str:
        if math.isnan(self.result) and not self.formula:
            return f"[{self.rule}] {self.description}"
        ins = ", ".join(
            f"{k} = {v:.6g}{(' ' + u) if u else ''}" for k, (v, u) in self.inputs.items()
        )
        text = f"[{self.rule}] {self.description}: {self.formula}"
        if ins:
            text += f" with {ins}"
        text += f" -> {self.result:.6g}{(' ' + self.unit) if self.unit else ''}"
        if self.source:
            text += f"  ({self.source})"
        return text


@dataclass(frozen=True)
class RateResult:
    """Rates per cell, kg/ha of product as spread, before spreader limits.

    Attributes
    ----------
    product_rates
        Product key -> kg/ha, the sum of that product's contributions.
    contributions
        ``(rule, product key)`` -> kg/ha, so a map can show why a cell gets what it gets.
    skipped
        ``(rule, reason)`` for rules whose inputs are missing.
    notes
        Guards that acted, leaching advice, contested-method labels.
    methods
        Rule -> the published method it used.
    ph_guard_cells
        Cells where the pH guard withheld a liming product.
    needs_test
        Acid cells (pH more than the trigger margin below the target) for which
        no lime method could run: "lime requirement needs a test". None when
        there is no pH or the lime rule is off.
    ask_for
        What to ask the lab for, so that a lime method can run there.
    target
        The lime target used: pH and pH method with its source (empty when none).
    layer_rates
        With samples at several depths (``compute_rates(..., layers=)``): the gypsum
        rule's product (kg/ha) for each layer's part of the treated depth, by layer
        label; their sum is the rule's contribution.
    """

    product_rates: dict[str, NDArray[np.float64]]
    contributions: dict[tuple[str, str], NDArray[np.float64]]
    skipped: list[tuple[str, str]]
    notes: list[str]
    methods: dict[str, str] = field(default_factory=dict)
    ph_guard_cells: int = 0
    needs_test: NDArray[np.bool_] | None = None
    ask_for: str = ""
    target: str = ""
    layer_rates: dict[str, NDArray[np.float64]] = field(default_factory=dict)

    @property
    def needs_test_cells(self) -> int:
        """Number of cells flagged "lime requirement needs a test"."""
        return 0 if self.needs_test is None else int(np.count_nonzero(self.needs_test))


# --------------------------------------------------------------------------- planning


def _source_of(name: str, available: set[str]) -> tuple[str, ...] | None:
    for alt in _SOURCES[name]:
        if all(a in available for a in alt):
            return alt
    return None


def _needs(rule: str, settings: RateSettings) -> list[str]:
    if rule == "gypsum":
        return ["esp", "ecec"]
    if rule == "lime":
        return _method_needs(settings.lime.method)
    if rule == "calcium":
        return ["ca", "ph"]
    if rule == "balance":
        return ["ecec", "ca", "mg"]
    if rule == "balance_k":
        return ["ecec", "k"] if settings.balance.target_k_sat_percent > 0 else ["k"]
    if rule == "maintenance":
        return []
    raise ValueError(rule)  # programming error


def _rule_settings(rule: str, settings: RateSettings) -> Any:
    if rule == "maintenance":
        return settings.lime
    return getattr(settings, "balance" if rule == "balance_k" else rule)


def _missing_key(rule: str, settings: RateSettings) -> str:
    if rule == "lime":
        return f"{SECTION}.lime.method"
    if rule == "balance_k":
        return f"{SECTION}.balance.target_k_sat_percent"
    return f"{SECTION}.{rule}.enabled"


def _method_needs(method: str) -> list[str]:
    """Quantities a lime method reads (see :data:`_SOURCES`)."""
    if method == "auto":
        return []
    al = {"kamprath": ["al"], "cochrane": ["al", "ca", "mg"], "acidity_share": ["acidity", "ecec"]}
    if method in al:
        return al[method]
    needs = list(TARGET_METHODS[method].needs)
    return needs if method == "base_saturation" else [*needs, "ph"]


#: Buffer methods calibrated on soil pH in one method (the target must be in it too).
_FIXED_PH = {m: TARGET_METHODS[m].ph_method for m in ("smp", "sikora", "mehlich", "adams_evans")}


def _lime_problem(method: str, lime: LimeRule, available: set[str], ph_method: str) -> str | None:
    """Why ``method`` cannot run here (inputs, pH method, target), or None when it can."""
    missing = [n for n in _method_needs(method) if _source_of(n, available) is None]
    if missing:
        return "needs " + ", ".join(_DESCRIBE[n] for n in missing)
    if method not in TARGET_METHODS or method == "base_saturation":
        return None
    fixed = _FIXED_PH.get(method)
    if fixed is not None and fixed != ph_method:
        return (f"is calibrated on pH in {fixed}, but the lab's pH is in {ph_method} (no "
                "conversion is applied)")
    target = lime.target()
    if target.ph_method != ph_method:
        return (f"the target pH {target.ph:g} is in {target.ph_method} ({target.source}), but "
                f"the lab's pH is in {ph_method}: set {SECTION}.lime.target_ph and "
                f"target_ph_method = '{ph_method}'")
    lo, hi = {"smp": (6.0, 7.0), "sikora": (6.0, 7.0), "mehlich": (0.0, 6.6 - 1e-9),
              "adams_evans": (0.0, 6.5)}.get(method, (0.0, 99.0))
    if not lo <= target.ph <= hi:
        return f"takes targets from pH {lo:g} to {hi:.2g} (the target is {target.ph:g})"
    return None


def choose_lime_method(
    settings: RateSettings, available: set[str], *, ph_method: str | None = None
) -> tuple[str | None, list[str]]:
    """The first lime method of ``method_order`` the samples can run, and why the others cannot.

    Parameters
    ----------
    settings : RateSettings
        The rate settings (its ``lime.method_order`` and target).
    available : set of str
        Input surfaces the samples give (see :data:`INPUT_NAMES`).
    ph_method : str, optional
        pH method of the lab's pH (``"water"`` or ``"CaCl2"``; default water, the
        trade's reading of a bare "pH").

    Returns
    -------
    method, reasons
        The method (None when none can run) and, for each method before it in
        the order, why it cannot.

    Examples
    --------
    >>> choose_lime_method(RateSettings(), {"ph", "oc", "clay"}, ph_method="water")[0]
    'phbc'
    >>> choose_lime_method(RateSettings(), {"ph", "bph_smp", "al"})[0]
    'smp'
    """
    phm = ph_method or "water"
    reasons: list[str] = []
    for m in settings.lime.method_order:
        why = _lime_problem(m, settings.lime, set(available), phm)
        if why is None:
            return m, reasons
        reasons.append(f"{m} {why}")
    return None, reasons



def rule_inputs(rule: str, settings: RateSettings, available: set[str],
                ph_method: str | None = None) -> list[str]:
    """The lab's analytes ``rule`` reads where ``available`` are given, in the rule's order
    (its lime method resolved as :func:`compute_rates` resolves it): ``gypsum`` reads ESP
    (``esp``, or ``na`` and ``ecec``); ``kamprath`` lime reads ``al``.

    >>> rule_inputs("gypsum", RateSettings(), {"na", "ecec"})
    ['na', 'ecec']
    """
    s = _resolve(settings, available, ph_method)
    out: list[str] = []
    for need in _needs(rule, s):
        alts = _SOURCES.get(need, ((need,),))
        out.extend(_source_of(need, available) or alts[0])
    return list(dict.fromkeys(out))


def input_sources(name: str) -> list[str]:
    """``name`` and every analyte it may be computed from, in the order tried
    (``esp``: ``esp``, ``na``, ``ecec``).

    >>> input_sources("esp")
    ['esp', 'na', 'ecec']
    """
    return list(dict.fromkeys([name, *(a for alt in _SOURCES.get(name, ()) for a in alt)]))

def _resolve(settings: RateSettings, available: set[str], ph_method: str | None) -> RateSettings:
    """``settings`` with ``lime.method = 'auto'`` replaced by the method chosen (if any)."""
    if settings.lime.method != "auto" or settings.lime.enabled == "off":
        return settings
    chosen, _ = choose_lime_method(settings, available, ph_method=ph_method)
    if chosen is None:
        return settings
    return dataclasses.replace(settings, lime=dataclasses.replace(settings.lime, method=chosen))


def _possible_methods(available: set[str], settings: RateSettings, ph_method: str) -> str:
    ok = [m for m in (*AL_METHODS, *TARGET_METHODS)
          if _lime_problem(m, settings.lime, available, ph_method) is None]
    return "possible here: " + ", ".join(ok) if ok else "none is possible with these samples"


def plan_rules(
    settings: RateSettings, available: set[str], *, ph_method: str | None = None
) -> tuple[list[str], list[tuple[str, str]]]:
    """Which rules run on the surfaces ``available``, and which are skipped and why.

    Parameters
    ----------
    settings
        The rate settings.
    available
        Names of the input surfaces (see :data:`INPUT_NAMES`).
    ph_method
        pH method of the ``ph`` surface (``"water"`` or ``"CaCl2"``; default water).

    Returns
    -------
    runs, skipped
        Rules that run, in order (``balance_k`` is the balance rule's potassium
        part); ``(rule, reason)`` for rules switched ``auto`` whose inputs are missing.

    Raises
    ------
    SettingsError
        A rule switched ``on`` lacks inputs (naming its ``enabled`` or
        ``method`` key).

    Examples
    --------
    >>> plan_rules(RateSettings(), {"al", "ph", "ca"})
    (['lime', 'calcium'], [('gypsum', 'needs ESP (esp, or na with ecec), ECEC (ecec)')])
    """
    phm = ph_method or "water"
    available = set(available)
    settings = _resolve(settings, available, ph_method)
    runs: list[str] = []
    skipped: list[tuple[str, str]] = []
    for rule in ("gypsum", "lime", "calcium", "balance", "balance_k"):
        rs = _rule_settings(rule, settings)
        if rs.enabled == "off":
            continue
        if rule == "balance_k" and ("balance" not in runs or not settings.balance.wants_k):
            continue
        if rule == "lime":
            m = settings.lime.method
            if m == "auto":
                _, reasons = choose_lime_method(settings, available, ph_method=phm)
                why: str | None = ("no method of method_order can run (" + "; ".join(reasons)
                                   + ")")
            else:
                why = _lime_problem(m, settings.lime, available, phm)
            if why is None:
                runs.append(rule)
                if settings.lime.maintenance_kmol_h_ha_yr > 0:
                    runs.append("maintenance")
                continue
            reason = (why if m == "auto" else f"method '{m}' ({METHOD_CITATIONS[m]}) {why}")
            if settings.lime.maintenance_kmol_h_ha_yr > 0:
                runs.append("maintenance")
            if rs.enabled == "on":
                raise SettingsError(
                    f"the lime rule is switched on but {reason}; available: "
                    f"{', '.join(sorted(available)) or 'none'}, pH in {phm}. Fix: choose a method "
                    f"that can run ({_possible_methods(available, settings, phm)}), supply its "
                    f"inputs, or set {SECTION}.lime.enabled = 'auto'",
                    key=_missing_key(rule, settings),
                )
            skipped.append((rule, reason))
            continue
        missing = [n for n in _needs(rule, settings) if _source_of(n, available) is None]
        if not missing:
            runs.append(rule)
            continue
        what = ", ".join(_DESCRIBE[n] for n in missing)
        if rule == "balance_k":
            reason = f"the potassium part needs {what}"
        else:
            reason = f"needs {what}"
        if rs.enabled == "on":
            fix = (f"supply them or set {SECTION}.{'balance' if rule == 'balance_k' else rule}"
                   ".enabled = 'auto'")
            raise SettingsError(
                f"the {rule} rule is switched on but {reason}, which the samples do not give; "
                f"available: {', '.join(sorted(available)) or 'none'}. Fix: {fix}",
                key=_missing_key(rule, settings),
            )
        skipped.append(("balance" if rule == "balance_k" else rule, reason))
    return runs, skipped


def _ask_for(settings: RateSettings, available: set[str], ph_method: str) -> str:
    """What to ask the lab for so that a method to a target pH can run here."""
    buffers = [TARGET_METHODS[m].title.split(",")[0].split(" (")[0].replace(" buffer", "")
               for m in settings.lime.method_order
               if _FIXED_PH.get(m) == ph_method]
    asks = []
    if buffers:
        asks.append(f"a buffer pH ({', '.join(buffers)})")
    if "phbc" in settings.lime.method_order:
        asks.append("organic carbon and clay (or a measured pHBC)")
    if "base_saturation" in settings.lime.method_order and "cec_ph7" in available:
        asks.append("exchangeable Ca, Mg and K")
    if not asks:
        asks = [_ASK[m] for m in settings.lime.method_order[:1]]
    return " or ".join(asks) or "a lime-requirement test"


def check_inputs(
    settings: RateSettings,
    available: set[str],
    products: Mapping[str, Product] | None = None,
    *,
    ph_method: str | None = None,
) -> list[str]:
    """Validate the rules against the surfaces the samples can give, before interpolating.

    Raises for a rule switched ``on`` whose inputs are missing and, when
    ``products`` is given, for a running rule whose product is undefined or
    lacks what the rule needs. Returns one note per rule switched ``auto``
    that will be skipped.

    Parameters
    ----------
    settings
        The rate settings.
    available
        Names of the surfaces the samples can give (see :data:`INPUT_NAMES`;
        other names are ignored).
    products
        The run's products (optional).
    ph_method
        pH method of the ``ph`` surface (default water).

    Returns
    -------
    list of str
        Notes on skipped rules, e.g. ``"gypsum rule skipped: needs ESP ..."``; a
        skipped lime rule also says what to ask the lab for.

    Raises
    ------
    SettingsError
        Naming the key: ``rates.lime.method`` when the chosen lime method's
        inputs are missing, ``rates.<rule>.enabled`` for other rules switched
        ``on``, ``rates.<rule>.product`` (or ``lime_product`` ...) for products.

    Examples
    --------
    >>> notes = check_inputs(RateSettings(), {"esp", "ecec", "ph", "ca"})
    >>> print(notes[0][:60])
    lime rule skipped: method 'kamprath' (Kamprath 1970, Soil Sc
    >>> try:
    ...     check_inputs(RateSettings(lime=LimeRule(enabled="on")), {"acidity", "ecec"})
    ... except SettingsError as exc:
    ...     print(exc.key)
    rates.lime.method
    """
    avail = set(available)
    runs, skipped = plan_rules(settings, avail, ph_method=ph_method)
    if products is not None:
        _validate_products(_resolve(settings, avail, ph_method), runs, products)
    notes = []
    for rule, reason in skipped:
        note = f"{rule} rule skipped: {reason}"
        if rule == "lime" and "ph" in avail:
            note += (f"; acid cells are flagged 'lime requirement needs a test': ask the lab for "
                     f"{_ask_for(settings, avail, ph_method or 'water')}")
        notes.append(note)
    if settings.ph_guard and _source_of("ph", avail) is None and any(
            rule != "gypsum" for rule in runs):
        notes.append(PH_GUARD_NOT_APPLIED)  # a rule that may spread lime runs unguarded
    return notes


def inputs_used(
    settings: RateSettings, available: set[str], *, ph_method: str | None = None
) -> list[str]:
    """The input surfaces the running rules will read (so only those need interpolating).

    Parameters
    ----------
    settings : RateSettings
        The rate settings (which rules run).
    available : set of str
        Variables the samples have.

    Returns
    -------
    list of str
        Sorted variable names.

    Examples
    --------
    >>> inputs_used(RateSettings(), {"esp", "ecec", "al", "ph", "ca", "na", "k"})
    ['al', 'ca', 'ecec', 'esp', 'ph']
    """
    avail = set(available)
    runs, _ = plan_rules(settings, avail, ph_method=ph_method)
    settings = _resolve(settings, avail, ph_method)
    used: set[str] = set()
    for rule in runs:
        for n in _needs(rule, settings):
            used.update(_source_of(n, avail) or ())
    if settings.ph_guard and runs:
        used.update(_source_of("ph", avail) or ())
    return sorted(used)


# --------------------------------------------------------------------------- tracing


class _Trace:
    """Collects :class:`Step` records when explaining one cell; a no-op otherwise."""

    def __init__(self, enabled: bool) -> None:
        self.enabled = enabled
        self.steps: list[Step] = []

    def add(
        self,
        rule: str,
        description: str,
        formula: str,
        inputs: Mapping[str, tuple[Any, str]],
        result: Any,
        unit: str,
        source: str,
    ) -> None:
        if not self.enabled:
            return
        self.steps.append(
            Step(
                rule=rule,
                description=description,
                formula=formula,
                inputs={k: (float(np.asarray(v)), u) for k, (v, u) in inputs.items()},
                result=float(np.asarray(result)),
                unit=unit,
                source=source,
            )
        )

    def note(self, rule: str, text: str) -> None:
        if self.enabled:
            self.steps.append(Step(rule, text, "", {}, math.nan, "", ""))


_QUIET = _Trace(False)


class _Cells:
    """Input surfaces, with derived quantities worked out once (and explained)."""

    def __init__(self, arrays: Mapping[str, NDArray[np.float64]], trace: _Trace,
                 om_factor: float = VAN_BEMMELEN) -> None:
        self.arrays = dict(arrays)
        self.trace = trace
        self.cache: dict[str, NDArray[np.float64]] = {}
        self.om_factor = om_factor
        self.ph_method = "water"  # the method of the "ph" surface: "water" or "CaCl2"
        self.notes: list[str] = []

    def get(self, name: str) -> NDArray[np.float64]:
        if name in self.cache:
            return self.cache[name]
        alt = _source_of(name, set(self.arrays))
        if alt is None:  # guarded by plan_rules
            raise KeyError(name)
        if alt == (name,):
            v = self.arrays[name]
            if name != "ph":
                v = np.maximum(v, 0.0)  # negative interpolated amounts read as 0
        elif name == "esp":
            na, ecec = (np.maximum(self.arrays[a], 0.0) for a in alt)
            v = _safe_div(100.0 * na, ecec)
            self.trace.add("inputs", "ESP from exchangeable Na and ECEC", "ESP = 100 x Na / ECEC",
                           {"Na": (na, "cmol(+)/kg"), "ECEC": (ecec, "cmol(+)/kg")}, v, "%",
                           _DERIVED)
        elif name == "cec_ph7":
            ca, mg, k, hal = (np.maximum(self.arrays[a], 0.0) for a in
                              ("ca", "mg", "k", "acidity_potential"))
            na = (np.maximum(self.arrays["na"], 0.0) if "na" in self.arrays
                  else np.full_like(hal, np.nan))
            v = cec_ph7_from_parts(ca, mg, k, na, hal)
            self.trace.add("inputs", "CEC at pH 7 from the bases and the potential acidity",
                           "T = Ca + Mg + K + Na + (H + Al)",
                           {"Ca + Mg + K + Na": (v - hal, "cmol(+)/kg"),
                            "H + Al": (hal, "cmol(+)/kg")}, v, "cmol(+)/kg", CEC_PH7_SOURCE)
        elif name == "oc":
            om = np.maximum(self.arrays["om"], 0.0)
            v = om / self.om_factor
            self.trace.add("inputs", "organic carbon from organic matter",
                           "OC = OM / factor", {"OM": (om, "%"), "factor": (self.om_factor, "")},
                           v, "%", "van Bemmelen factor 1.724 [a convention]")
        elif name == "phbc":
            oc, clay = self.get("oc"), np.maximum(self.arrays["clay"], 0.0)
            v = np.asarray(phbc_aitken(oc, clay), dtype=float)
            self.trace.add("inputs", "pH buffering capacity from organic carbon and clay",
                           "pHBC = 0.9548 x OC + 0.0111 x clay",
                           {"OC": (oc, "%"), "clay": (clay, "%")}, v, "cmol(+)/kg/pH",
                           "Aitken, Moody & McKinley 1990, Aust. J. Soil Res. 28:695 "
                           "[from memory for the paper]")
            outside = aitken_outside(oc, clay) & np.isfinite(v)
            n = int(np.count_nonzero(outside))
            if n:
                self.notes.append(
                    f"pHBC regression (Aitken, Moody & McKinley 1990) used on {n} cell(s) whose "
                    "organic carbon or clay lies outside the soils it was fitted on: the lime "
                    "there is less sure"
                )
                self.trace.note("inputs", "organic carbon or clay outside the range the pHBC "
                                "regression was fitted on")
        elif name == "acidity":
            al, h = (np.maximum(self.arrays[a], 0.0) for a in alt)
            v = al + h
            self.trace.add("inputs", "exchangeable acidity from Al and H", "acidity = Al + H",
                           {"Al": (al, "cmol(+)/kg"), "H": (h, "cmol(+)/kg")}, v, "cmol(+)/kg",
                           _DERIVED)
        else:  # ca / mg / k from saturation and ECEC
            sat, ecec = (np.maximum(self.arrays[a], 0.0) for a in alt)
            v = sat / 100.0 * ecec
            el = name.capitalize()
            self.trace.add("inputs", f"exchangeable {el} from its saturation and ECEC",
                           f"{el} = {el} saturation / 100 x ECEC",
                           {f"{el} saturation": (sat, "%"), "ECEC": (ecec, "cmol(+)/kg")},
                           v, "cmol(+)/kg", _DERIVED)
        self.cache[name] = v
        return v


def _ph_method(cells: _Cells) -> str | None:
    """Which pH the rules compare with their thresholds: "water", "CaCl2" or None (no pH)."""
    if "ph" not in cells.arrays:
        return None
    return "CaCl2" if getattr(cells, "ph_method", "water") == "CaCl2" else "water"


def _ph_label(method: str) -> str:
    return "pH" if method == "water" else "pH (CaCl2)"


def _safe_div(a: ArrayLike, b: ArrayLike) -> NDArray[np.float64]:
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(b > 0, a / np.where(b > 0, b, 1.0), 0.0)
    return np.where(np.isnan(a) | np.isnan(b), np.nan, out)


def _full(rate: ArrayLike, shape: tuple[int, ...]) -> NDArray[np.float64]:
    """``rate`` as a float64 array of ``shape`` (rules that read no per-cell input give scalars)."""
    return np.broadcast_to(np.asarray(rate, dtype=np.float64), shape).copy()


def _select(
    cond: NDArray[np.bool_], a: ArrayLike, b: ArrayLike, nan_from: ArrayLike
) -> NDArray[np.float64]:
    """``where(cond, a, b)``, NaN wherever ``nan_from`` is NaN."""
    return np.where(np.isnan(nan_from), np.nan, np.where(cond, a, b))


# --------------------------------------------------------------------------- the unit chain


@dataclass(frozen=True)
class RateLayer:
    """One sampled layer's share of a gypsum requirement summed over depth.

    Attributes
    ----------
    label
        The layer as a person writes it ("10-30 cm").
    esp, ecec
        The layer's ESP (%) and ECEC (cmol(+)/kg), per cell or one value.
    depth_m
        Thickness of soil the layer stands for within the treated depth, m.
    bulk_density_g_cm3
        The layer's bulk density.
    """

    label: str
    esp: Any
    ecec: Any
    depth_m: float
    bulk_density_g_cm3: Any


@dataclass(frozen=True)
class _Soil:
    depth_m: Any
    bulk_density_g_cm3: Any
    ph_method: str = "water"
    scoop_density_g_cm3: float = 1.0
    layers: tuple[RateLayer, ...] = ()


def _chain(
    trace: _Trace,
    rule: str,
    amount_cmol: NDArray[np.float64],
    *,
    substance: str,
    product: Product,
    soil: _Soil,
) -> NDArray[np.float64]:
    """cmol(+)/kg of ``substance`` -> mg/kg -> kg/ha -> kg/ha of ``product``."""
    if substance == "CaCO3":
        mg_per = MG_CACO3_PER_CMOL
        fraction = product.env
        per_text = "10 x molar mass of CaCO3 / 2"
        frac_name, frac_desc = "ENV", (
            f"effective neutralising value of {product.label} as spread "
            f"(CCE {product.cce * 100:.2f} % x fineness {product.fineness_factor * 100:.1f} %)"
        )
        what = "CaCO3 equivalent"
    else:
        mg_per = mg_per_cmol(substance.lower())
        fraction = product.fraction_of(substance)
        per_text = f"10 x atomic weight of {substance} / charge"
        frac_name, frac_desc = f"{substance} fraction", f"{substance} in {product.label} as spread"
        what = substance
    mg_kg = amount_cmol * mg_per
    trace.add(rule, f"{what} as mg per kg of soil", f"mg/kg = cmol(+)/kg x ({per_text})",
              {"cmol(+)/kg": (amount_cmol, "cmol(+)/kg"), "mg per cmol(+)": (mg_per, "mg/kg")},
              mg_kg, "mg/kg", _DERIVED)
    kg_ha = mg_kg_to_kg_ha(mg_kg, depth_m=soil.depth_m, bulk_density_g_cm3=soil.bulk_density_g_cm3)
    trace.add(rule, f"{what} per hectare over the treated layer",
              "kg/ha = mg/kg x 1e-6 x 10 000 m2 x depth x BD x 1000",
              {"mg/kg": (mg_kg, "mg/kg"), "depth": (soil.depth_m, "m"),
               "BD": (soil.bulk_density_g_cm3, "g/cm3")},
              kg_ha, f"kg {what}/ha", _DERIVED)
    rate = np.asarray(kg_ha, dtype=float) / fraction
    trace.add(rule, f"{product.label} ({product.name}) to supply it",
              f"product kg/ha = kg {what}/ha / {frac_name}",
              {f"kg {what}/ha": (kg_ha, "kg/ha"), frac_name: (fraction, "kg/kg")},
              rate, "kg/ha", "; ".join([frac_desc, *_provenance(product, substance)]))
    return rate


def _provenance(product: Product, substance: str) -> list[str]:
    """The product's provenance lines that bear on ``substance``."""
    heads: tuple[str, ...]
    if substance == "CaCO3":
        heads = ("CCE", "ENV", "fineness", "x (1 - moisture")
    else:
        heads = (f"{substance} ", "x (1 - moisture")
    return [line for line in product.provenance if line.startswith(heads)]


def _ca_share(product: Product) -> tuple[float, float]:
    """Shares of a liming product's neutralising value carried by Ca and by Mg (0-1 each)."""
    neut = product.cce / MG_CACO3_PER_CMOL
    if neut <= 0:
        return 0.0, 0.0
    ca = product.ca_fraction / mg_per_cmol("ca") / neut
    mg = product.mg_fraction / mg_per_cmol("mg") / neut
    return min(ca, 1.0), min(mg, 1.0)


# --------------------------------------------------------------------------- product checks


def _product(products: Mapping[str, Product], name: str, key: str, *, need: str) -> Product:
    if name not in products:
        near = difflib.get_close_matches(name, list(products), n=1)
        hint = f"did you mean '{near[0]}'? " if near else ""
        raise SettingsError(
            f"product '{name}' is not defined; {hint}defined products: "
            f"{', '.join(sorted(products)) or 'none'}. Fix: add a [products.{name}] table or "
            "name a defined product",
            key=key,
        )
    p = products[name]
    liming = [k for k, v in products.items() if v.liming]
    if need == "liming" and not p.liming:
        raise SettingsError(
            f"product '{name}' ({p.label}) neutralises no acidity (ENV 0 %); this rule needs a "
            f"liming product such as {', '.join(liming) or 'lime'}",
            key=key,
        )
    if need == "non-liming Ca" and p.liming:
        raise SettingsError(
            f"product '{name}' ({p.label}) is a liming product; this rule needs a calcium "
            "product that does not change pH, such as gypsum (acidity is the lime rule's job)",
            key=key,
        )
    required = {"Ca": ("Ca", "non-liming Ca", "Ca+Mg"), "Mg": ("Ca+Mg",), "K": ("K",)}
    for element, needs in required.items():
        if need in needs and p.fraction_of(element) <= 0:
            raise SettingsError(
                f"product '{name}' ({p.label}) contains no {element}; this rule needs a product "
                f"that supplies {element}",
                key=key,
            )
    return p


def _validate_products(
    settings: RateSettings, runs: list[str], products: Mapping[str, Product]
) -> None:
    """Check every product the running rules will use, before any arithmetic."""
    g, lr, cr, br = settings.gypsum, settings.lime, settings.calcium, settings.balance
    checks: list[tuple[str, str, str]] = []
    if "gypsum" in runs:
        checks.append((g.product, "gypsum.product", "Ca"))
    if "lime" in runs:
        checks.append((lr.product, "lime.product", "liming"))
    if "calcium" in runs:
        checks += [(cr.lime_product, "calcium.lime_product", "Ca"),
                   (cr.gypsum_product, "calcium.gypsum_product", "non-liming Ca")]
    if "balance" in runs:
        checks += [(br.calcium_product, "balance.calcium_product", "non-liming Ca"),
                   (br.dolomite_product, "balance.dolomite_product", "Ca+Mg")]
    if "balance_k" in runs:
        checks.append((br.potassium_product, "balance.potassium_product", "K"))
    for name, key, need in checks:
        _product(products, name, f"{SECTION}.{key}", need=need)


# --------------------------------------------------------------------------- the rules


@dataclass
class _State:
    contributions: dict[tuple[str, str], NDArray[np.float64]]
    notes: list[str]
    methods: dict[str, str]
    ca_added: Any = 0.0
    mg_added: Any = 0.0
    guarded: Any = False
    lime_unsure: Any = False
    layer_rates: dict[str, Any] = field(default_factory=dict)


def _ph_guard(
    st: _State, trace: _Trace, cells: _Cells, settings: RateSettings, rule: str,
    product: Product, rate: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Withhold a liming product where pH is above the limit. Returns (rate, withheld)."""
    if not (settings.ph_guard and product.liming):
        return rate, np.zeros(np.shape(rate), dtype=bool)
    method = _ph_method(cells)
    if method is None:
        if PH_GUARD_NOT_APPLIED not in st.notes:
            st.notes.append(PH_GUARD_NOT_APPLIED)
        trace.note(rule, "pH guard not applied: no pH in water or CaCl2 given")
        return rate, np.zeros(np.shape(rate), dtype=bool)
    ph = cells.get("ph")
    limit, _ = settings.ph_limits(method)
    label = _ph_label(method)
    withheld = (ph > limit) & (np.asarray(rate) > 0)
    out = _select(ph > limit, 0.0, rate, ph)
    trace.add(rule, f"pH guard: no liming product above the {label} limit",
              "rate = 0 where pH > limit",
              {label: (ph, ""), "limit": (limit, ""),
               "rate before": (rate, "kg/ha")},
              out, "kg/ha", _GUARD_SOURCE)
    n = int(np.count_nonzero(withheld))
    if n:
        st.notes.append(
            f"pH guard: {rule} rule's {product.name} withheld on {n} cell(s) with {label} above "
            f"{limit:g} (common practice)"
        )
    st.guarded = np.logical_or(st.guarded, withheld)
    return out, withheld


def _add(st: _State, rule: str, product: str, rate: NDArray[np.float64]) -> None:
    key = (rule, product)
    st.contributions[key] = st.contributions[key] + rate if key in st.contributions else rate


def _gypsum_layer(trace: _Trace, g: GypsumRule, p: Product, esp: Any, ecec: Any, soil: _Soil,
                  src: str, what: str = "") -> tuple[NDArray[np.float64], Any]:
    """Product kg/ha and the Ca (cmol(+)/kg) exchanged, for one layer of soil."""
    excess = np.maximum(esp - g.target_esp_percent, 0.0)
    trace.add("gypsum", f"ESP above the target{what}", "max(ESP - target ESP, 0)",
              {"ESP": (esp, "%"), "target ESP": (g.target_esp_percent, "%")}, excess, "%", src)
    exch = excess / 100.0 * ecec
    trace.add("gypsum", f"calcium to displace the excess sodium{what}",
              "Ca = (ESP - target) / 100 x ECEC",
              {"ESP - target": (excess, "%"), "ECEC": (ecec, "cmol(+)/kg")}, exch, "cmol(+)/kg",
              "USDA Handbook 60 (Richards 1954)")
    need = exch * g.exchange_efficiency
    trace.add("gypsum", f"with the exchange-efficiency factor{what}", "Ca x F",
              {"Ca": (exch, "cmol(+)/kg"), "F": (g.exchange_efficiency, "")}, need, "cmol(+)/kg",
              "Oster et al. 1999 (F 1.1 to 1.3)")
    return _chain(trace, "gypsum", need, substance="Ca", product=p, soil=soil), exch


def _rule_gypsum(st: _State, trace: _Trace, cells: _Cells, s: RateSettings,
                 products: Mapping[str, Product], soil: _Soil) -> None:
    g = s.gypsum
    p = _product(products, g.product, f"{SECTION}.gypsum.product", need="Ca")
    src = METHOD_CITATIONS["handbook60"]
    esp, ecec = cells.get("esp"), cells.get("ecec")
    rate: Any
    exch: Any
    if not soil.layers:
        rate, exch = _gypsum_layer(trace, g, p, esp, ecec, soil, src)
        most_esp = esp
    else:
        # samples at several depths: each layer's requirement over the soil it stands for
        rate, exch, most_esp = 0.0, None, esp
        for layer in soil.layers:
            lesp = np.asarray(layer.esp, dtype=float)
            lecec = np.asarray(layer.ecec, dtype=float)
            part, ex = _gypsum_layer(
                trace, g, p, lesp, lecec,
                dataclasses.replace(soil, depth_m=layer.depth_m,
                                    bulk_density_g_cm3=layer.bulk_density_g_cm3, layers=()),
                src, what=f", {layer.label} layer ({layer.depth_m * 100:g} cm of soil)")
            st.layer_rates[layer.label] = part
            rate = rate + part
            exch = ex if exch is None else exch  # Ca the top layer gains (calcium rule)
            most_esp = np.fmax(most_esp, lesp)
        rate = np.asarray(rate, dtype=float)
        trace.add("gypsum", "sum over the layers the treated depth spans",
                  " + ".join(layer.label for layer in soil.layers),
                  {layer.label: (st.layer_rates[layer.label], "kg/ha") for layer in soil.layers},
                  rate, "kg/ha", "USDA Handbook 60 (Richards 1954) per layer, summed [derived]")
    rate, withheld = _ph_guard(st, trace, cells, s, "gypsum", p, rate)
    _add(st, "gypsum", p.name, rate)
    st.ca_added = st.ca_added + np.where(withheld, 0.0, exch)
    st.methods["gypsum"] = src
    sodic = (most_esp >= g.leaching_note_esp_percent) & (rate > 0)
    n = int(np.count_nonzero(sodic))
    if n:
        st.notes.append(
            f"{n} cell(s) with ESP at or above {g.leaching_note_esp_percent:g} %: gypsum reclaims "
            "a sodic soil only where enough water leaches the displaced sodium below the root zone "
            "and the soil drains; check water and drainage before spreading"
        )
        trace.note("gypsum", f"ESP at or above {g.leaching_note_esp_percent:g} %: gypsum needs "
                   "leaching water and drainage to work")


def _rule_lime(st: _State, trace: _Trace, cells: _Cells, s: RateSettings,
               products: Mapping[str, Product], soil: _Soil) -> None:
    lr = s.lime
    p = _product(products, lr.product, f"{SECTION}.lime.product", need="liming")
    src = METHOD_CITATIONS[lr.method]
    if lr.method == "kamprath":
        al_measured = cells.get("al")
        al = np.where(al_measured > lr.kamprath_min_al, al_measured, 0.0)
        al = np.where(np.isnan(al_measured), np.nan, al)
        need = lr.kamprath_factor * al
        trace.add("lime", "lime requirement from exchangeable Al (Al at or below "
                  f"{lr.kamprath_min_al:g} cmol(+)/kg counts as none)", "CaCO3 = factor x Al",
                  {"factor": (lr.kamprath_factor, ""), "Al": (al_measured, "cmol(+)/kg")}, need,
                  "cmol(+)/kg CaCO3", src)
    elif lr.method == "cochrane":
        al, ca, mg = cells.get("al"), cells.get("ca"), cells.get("mg")
        allowed = lr.target_al_saturation_percent / 100.0 * (al + ca + mg)
        trace.add("lime", "Al the crop tolerates", "RAS / 100 x (Al + Ca + Mg)",
                  {"RAS": (lr.target_al_saturation_percent, "%"), "Al": (al, "cmol(+)/kg"),
                   "Ca": (ca, "cmol(+)/kg"), "Mg": (mg, "cmol(+)/kg")}, allowed, "cmol(+)/kg", src)
        need = lr.cochrane_factor * np.maximum(al - allowed, 0.0)
        trace.add("lime", "lime requirement", "CaCO3 = factor x max(Al - tolerated Al, 0)",
                  {"factor": (lr.cochrane_factor, ""), "Al": (al, "cmol(+)/kg"),
                   "tolerated Al": (allowed, "cmol(+)/kg")}, need, "cmol(+)/kg CaCO3", src)
    elif lr.method == "acidity_share":
        acid, ecec = cells.get("acidity"), cells.get("ecec")
        allowed = lr.target_acidity_share_percent / 100.0 * ecec
        need = lr.acidity_factor * np.maximum(acid - allowed, 0.0)
        trace.add("lime", "lime requirement",
                  "CaCO3 = factor x max(acidity - share / 100 x ECEC, 0)",
                  {"factor": (lr.acidity_factor, ""), "acidity": (acid, "cmol(+)/kg"),
                   "share": (lr.target_acidity_share_percent, "%"), "ECEC": (ecec, "cmol(+)/kg")},
                  need, "cmol(+)/kg CaCO3", src)
    else:
        need = _target_need(st, trace, cells, lr, soil)
    rate = _chain(trace, "lime", need, substance="CaCO3", product=p, soil=soil)
    rate, withheld = _ph_guard(st, trace, cells, s, "lime", p, rate)
    _add(st, "lime", p.name, rate)
    ca_share, mg_share = _ca_share(p)
    neutralised = np.where(withheld, 0.0, need / lr.factor)
    st.ca_added = st.ca_added + neutralised * ca_share
    st.mg_added = st.mg_added + neutralised * mg_share
    st.methods["lime"] = src


def phbc_ph_note(ph_method: str) -> str:
    """The warning when the pHBC lime method runs on pH not in its calibration's method."""
    return (f"lime method 'phbc' (pH buffering capacity) was calibrated with pH in 0.01 M "
            f"CaCl2 (Aitken, Moody & McKinley 1990, from memory), but runs here on the lab's pH "
            f"in {ph_method} against a target in {ph_method}, with no conversion: geosoil has "
            "no named pH conversion for it (its acid thresholds only take pH in CaCl2 as about "
            "0.5-0.8 below pH in water, common practice, a range and not a conversion), so the "
            "lime is (target - pH) x pHBC on that scale; give pH in CaCl2 for the method's "
            "own calibration")


def _target_need(st: _State, trace: _Trace, cells: _Cells, lr: LimeRule,
                 soil: _Soil) -> NDArray[np.float64]:
    """CaCO3 (cmol(+)/kg) to the target by a target-pH method, after the lime trigger."""
    m = lr.method
    meta = TARGET_METHODS[m]
    src = METHOD_CITATIONS[m]
    target = lr.target()
    published = f"published unit: {meta.calibration}"
    if m != "base_saturation":
        trace.add("lime", f"target pH, in {target.ph_method}", "target", {}, target.ph, "",
                  target.source)
    ph = cells.arrays.get("ph")
    if m in ("smp", "sikora"):
        bph = cells.get(f"bph_{m}")
        tons = np.asarray(smp_lime(bph, target.ph), dtype=float)
        trace.add("lime", f"{meta.title}: lime to the target pH",
                  "table row by buffer pH, column by target (linear between)",
                  {"buffer pH": (bph, ""), "target": (target.ph, "")}, tons,
                  "short t CaCO3/ac (8-inch slice, 2.4 M lb/ac)", src)
        lo, hi = SMP_BPH_RANGE
        for n, text in ((int(np.count_nonzero(bph < lo)), f"below {lo:g}: held at the "
                         "table's last row"),
                        (int(np.count_nonzero(bph > hi)), f"above {hi:g}: tapered linearly to 0 "
                         "at 7.0 (implementation choice)")):
            if n:
                st.notes.append(f"{meta.title}: buffer pH on {n} cell(s) {text}")
        need = np.asarray(caco3_cmol_kg(tons, m), dtype=float)
        trace.add("lime", "per kg of soil: the calibration's soil mass",
                  "cmol(+)/kg = t/ac x 2241.70 kg/ha / 2.690e6 kg/ha x 1e6 / 500.4",
                  {"t/ac": (tons, "short t/ac")}, need, "cmol(+)/kg CaCO3", published)
    elif m == "mehlich":
        bph = cells.get("bph_mehlich")
        assert ph is not None
        ac = np.asarray(mehlich_acidity(bph), dtype=float)
        trace.add("lime", "acidity from the Mehlich buffer", "Ac = 4 x (6.6 - buffer pH)",
                  {"buffer pH": (bph, "")}, ac, "meq/100 cm3", src)
        tons = np.asarray(mehlich_lime(bph, ph, target.ph), dtype=float)
        trace.add("lime", "lime to the target", "LR = Ac x (target - pH) / (6.6 - pH)",
                  {"Ac": (ac, "meq/100 cm3"), "target": (target.ph, ""), "pH": (ph, "")},
                  tons, "short t CaCO3/ac", src)
        need = np.asarray(caco3_cmol_kg(tons, m, bulk_density_g_cm3=soil.bulk_density_g_cm3))
        trace.add("lime", "per kg of soil: the calibration's 0.20 m of soil by volume",
                  "cmol(+)/kg = t/ac x 2241.70 / (10 000 x 0.20 m) / (BD x 1000) x 1e6 / 500.4",
                  {"t/ac": (tons, "short t/ac"), "BD": (soil.bulk_density_g_cm3, "g/cm3")},
                  need, "cmol(+)/kg CaCO3", published)
    elif m == "adams_evans":
        bph = cells.get("bph_adams_evans")
        assert ph is not None
        h = np.asarray(adams_evans_acidity(bph), dtype=float)
        trace.add("lime", "exchangeable acidity from the Adams-Evans buffer",
                  "H = 8 x (8.00 - buffer pH)", {"buffer pH": (bph, "")}, h, "cmol(+)/kg", src)
        need = np.asarray(adams_evans_lime(bph, ph, target.ph), dtype=float)
        trace.add("lime", "share of H to neutralise to the target",
                  "CaCO3 = H x min((target - pH) / (6.5 - pH), 1)",
                  {"H": (h, "cmol(+)/kg"), "target": (target.ph, ""), "pH": (ph, "")}, need,
                  "cmol(+)/kg CaCO3", src)
    elif m == "phbc":
        b = cells.get("phbc")
        assert ph is not None
        if soil.ph_method != meta.ph_method:
            st.notes.append(phbc_ph_note(soil.ph_method))
        need = np.asarray(phbc_lime(ph, target.ph, b), dtype=float)
        trace.add("lime", "lime from the pH buffering capacity", "CaCO3 = (target - pH) x pHBC",
                  {"target": (target.ph, ""), "pH": (ph, ""), "pHBC": (b, "cmol(+)/kg/pH")},
                  need, "cmol(+)/kg CaCO3", src)
    else:  # base_saturation
        t_kg = cells.get("cec_ph7")
        bases = cells.get("ca") + cells.get("mg") + cells.get("k")
        if "na" in cells.arrays:
            bases = bases + np.maximum(cells.arrays["na"], 0.0)
        v1 = _safe_div(100.0 * bases, t_kg)
        trace.add("lime", "base saturation at pH 7", "V1 = 100 x (Ca + Mg + K (+ Na)) / T",
                  {"bases": (bases, "cmol(+)/kg"), "T": (t_kg, "cmol(+)/kg")}, v1, "%", src)
        t_vol = t_kg * soil.scoop_density_g_cm3
        tons = np.asarray(base_saturation_lime(t_vol, v1, lr.target_base_saturation_percent),
                          dtype=float)
        trace.add("lime", "lime to the target base saturation (as CaCO3, PRNT 100 %)",
                  "NC = T x (V2 - V1) / 100, T in cmolc/dm3 = cmol(+)/kg x scoop density",
                  {"T": (t_vol, "cmolc/dm3"), "V2": (lr.target_base_saturation_percent, "%"),
                   "V1": (v1, "%"), "scoop density": (soil.scoop_density_g_cm3, "g/cm3")},
                  tons, "t CaCO3/ha for 0-20 cm", src)
        need = np.asarray(caco3_cmol_kg(tons, m, bulk_density_g_cm3=soil.bulk_density_g_cm3))
        trace.add("lime", "per kg of soil: the calibration's 0.20 m of soil by volume",
                  "cmol(+)/kg = t/ha x 1000 / (10 000 x 0.20 m) / (BD x 1000) x 1e6 / 500.4",
                  {"t/ha": (tons, "t/ha"), "BD": (soil.bulk_density_g_cm3, "g/cm3")},
                  need, "cmol(+)/kg CaCO3", published)
        return need
    assert ph is not None
    due = below_trigger(ph, target.ph, lr.trigger_margin_ph)
    unsure = due & ~np.isfinite(need)
    st.lime_unsure = np.logical_or(st.lime_unsure, unsure)
    out = np.where(np.isnan(ph), np.nan, np.where(due, np.nan_to_num(need, nan=0.0), 0.0))
    trace.add("lime", f"lime trigger: only where pH is more than {lr.trigger_margin_ph:g} below "
              "the target", "CaCO3 where pH < target - margin, else 0",
              {"pH": (ph, ""), "target": (target.ph, ""), "margin": (lr.trigger_margin_ph, "")},
              out, "cmol(+)/kg CaCO3", "[common practice]")
    return np.asarray(out, dtype=float)


def warn_acid_cells_without_lime(
    name: str, cells: Mapping[str, Any], ph_method: str | None, ph: Any, rr: RateResult, *,
    lime_rule: LimeRule, chemistry: ChemistrySettings,
) -> None:
    """Say so where cells the chemistry flags acid get no lime from the lime rule that ran.

    A lime method's own target can be met where the acid flag is not (an acidity-share
    target above the flag's acid saturation, a pH target below the flag's pH): the cell
    is then acid on the samples table and the map, but spread with nothing.

    Parameters
    ----------
    name
        The paddock, named in the warning.
    cells
        The paddock's cells (``acid_sat`` is read).
    ph_method, ph
        The pH the rules read (:func:`geosoil.chemistry.rule_ph`): its method and cells.
    rr
        The paddock's rates.
    lime_rule, chemistry
        The paddock's lime rule and the chemistry settings (the acid flag's limits).

    Warns
    -----
    RateWarning
        Acid cells that the lime rule leaves bare, with how many and why.
    """
    lime = rr.contributions.get(("lime", lime_rule.product))
    if lime is None:
        return  # the lime rule did not run here: said by the rule warnings
    chem = chemistry
    acid = np.zeros(np.shape(lime), dtype=bool)
    why = []
    if ph_method is not None:
        limit = chem.acid_ph_cacl2 if ph_method == "CaCl2" else chem.acid_ph
        acid |= np.isfinite(ph) & (ph < limit)
        why.append(f"pH{' (CaCl2)' if ph_method == 'CaCl2' else ''} below {limit:g}")
    acid_sat = cells.get("acid_sat")
    if acid_sat is not None:
        acid |= np.isfinite(acid_sat) & (acid_sat > chem.acid_saturation_percent)
        why.append(f"acid saturation above {chem.acid_saturation_percent:g} %")
    skip = np.asarray(rr.needs_test, dtype=bool) if rr.needs_test is not None else False
    none = acid & ~np.asarray(skip) & ~(np.asarray(lime) > 0)
    n = int(np.count_nonzero(none))
    if not n:
        return
    hint = ("lower rates.lime.target_acidity_share_percent below [chemistry] "
            "acid_saturation_percent, or " if lime_rule.method == "acidity_share" else "")
    warnings.warn(
        f"{name}: {n} of {int(np.count_nonzero(acid))} acid cell(s) ({' or '.join(why)}) get "
        f"no lime: the lime method ({rr.methods.get('lime', lime_rule.method)}) finds its "
        f"own target already met there; {hint}choose a lime method to a target pH (give "
        "buffer pH, or organic carbon and clay) if these cells need lime",
        RateWarning,
        stacklevel=2,
    )


def _rule_maintenance(st: _State, trace: _Trace, cells: _Cells, s: RateSettings,
                      products: Mapping[str, Product], soil: _Soil) -> None:
    lr = s.lime
    p = _product(products, lr.product, f"{SECTION}.lime.product", need="liming")
    src = METHOD_CITATIONS["maintenance"]
    kg = float(maintenance_lime(lr.maintenance_kmol_h_ha_yr))
    trace.add("maintenance", "CaCO3 to offset the net acid addition of a year",
              "kg CaCO3/ha = kmol H+/ha/yr x 50.04",
              {"kmol H+/ha/yr": (lr.maintenance_kmol_h_ha_yr, "")}, kg, "kg CaCO3/ha", src)
    mass = np.asarray(kg_per_ha_of_layer(depth_m=soil.depth_m,
                                         bulk_density_g_cm3=soil.bulk_density_g_cm3))
    need = kg * 1e6 / mass / MG_CACO3_PER_CMOL
    ref = next(iter(cells.arrays.values()), None)
    if ref is not None:
        need = np.where(np.isnan(ref), np.nan, need)
    trace.add("maintenance", "per kg of the treated layer", "cmol(+)/kg = kg/ha x 1e6 / soil mass "
              "/ 500.4", {"kg/ha": (kg, "kg CaCO3/ha"), "soil mass": (mass, "kg/ha")}, need,
              "cmol(+)/kg CaCO3", _DERIVED)
    rate = _chain(trace, "maintenance", need, substance="CaCO3", product=p, soil=soil)
    rate, _ = _ph_guard(st, trace, cells, s, "maintenance", p, rate)
    _add(st, "maintenance", p.name, rate)
    st.methods["maintenance"] = src
    st.notes.append(
        f"maintenance lime: {kg:.0f} kg CaCO3/ha a year for a net acid addition of "
        f"{lr.maintenance_kmol_h_ha_yr:g} kmol H+/ha/yr, shown separately (rule 'maintenance')"
    )


def _rule_calcium(st: _State, trace: _Trace, cells: _Cells, s: RateSettings,
                  products: Mapping[str, Product], soil: _Soil) -> None:
    cr = s.calcium
    lime_p = _product(products, cr.lime_product, f"{SECTION}.calcium.lime_product", need="Ca")
    gyp_p = _product(products, cr.gypsum_product, f"{SECTION}.calcium.gypsum_product",
                     need="non-liming Ca")
    src = METHOD_CITATIONS["sufficiency"]
    ca, ph = cells.get("ca"), cells.get("ph")
    minimum = float(to_cmol_kg(cr.minimum_ca, "ca", cr.minimum_ca_unit))
    counted = np.asarray(st.ca_added, dtype=float)
    deficit = np.maximum(minimum - ca - counted, 0.0)
    trace.add("calcium",
              "calcium short of the minimum, after calcium from the gypsum and lime rules",
              "max(minimum - Ca - Ca from earlier rules, 0)",
              {"minimum": (minimum, "cmol(+)/kg"), "Ca": (ca, "cmol(+)/kg"),
               "Ca from earlier rules": (counted, "cmol(+)/kg")}, deficit, "cmol(+)/kg", src)
    method = _ph_method(cells) or "water"
    guard, switch = s.ph_limits(method)
    label = _ph_label(method)
    acid = ph < switch
    if s.ph_guard:
        acid = acid & (ph <= guard)
    lime_amt = _select(acid, deficit, 0.0, ph)
    gyp_amt = _select(acid, 0.0, deficit, ph)
    key = "lime_below_ph" if method == "water" else "lime_below_ph_cacl2"
    trace.add("calcium", f"product by pH: {lime_p.name} below {label} {switch:g}, "
              f"{gyp_p.name} otherwise", f"acid = pH < {key}",
              {label: (ph, ""), key: (switch, "")}, acid, "(1 = acid)",
              "[common practice]")
    for p, amt in ((lime_p, lime_amt), (gyp_p, gyp_amt)):
        t = trace if (not trace.enabled or float(np.asarray(amt)) != 0.0) else _QUIET
        rate = _chain(t, "calcium", amt, substance="Ca", product=p, soil=soil)
        _add(st, "calcium", p.name, rate)
    st.ca_added = counted + deficit
    st.mg_added = st.mg_added + lime_amt * _ratio(lime_p, "Mg", "Ca")
    st.methods["calcium"] = src


def _ratio(p: Product, a: str, b: str) -> float:
    """cmol(+) of element ``a`` a product brings per cmol(+) of element ``b``."""
    fb = p.fraction_of(b)
    if fb <= 0:
        return 0.0
    return (p.fraction_of(a) / mg_per_cmol(a.lower())) / (fb / mg_per_cmol(b.lower()))


def _rule_balance(st: _State, trace: _Trace, cells: _Cells, s: RateSettings,
                  products: Mapping[str, Product], soil: _Soil, *, with_k: bool) -> None:
    br = s.balance
    src = METHOD_CITATIONS["bcsr"]
    ca_p = _product(products, br.calcium_product, f"{SECTION}.balance.calcium_product",
                    need="non-liming Ca")
    dol_p = _product(products, br.dolomite_product, f"{SECTION}.balance.dolomite_product",
                     need="Ca+Mg")
    ecec, ca, mg = cells.get("ecec"), cells.get("ca"), cells.get("mg")
    ca_added = np.asarray(st.ca_added, dtype=float)
    mg_added = np.asarray(st.mg_added, dtype=float)
    ca_target = br.target_ca_sat_percent / 100.0 * ecec
    mg_target = br.target_mg_sat_percent / 100.0 * ecec
    ca_def = np.maximum(ca_target - ca - ca_added, 0.0)
    trace.add("balance", "Ca short of the saturation target (CONTESTED method)",
              "max(target / 100 x ECEC - Ca - Ca from earlier rules, 0)",
              {"target": (br.target_ca_sat_percent, "%"), "ECEC": (ecec, "cmol(+)/kg"),
               "Ca": (ca, "cmol(+)/kg"), "Ca from earlier rules": (ca_added, "cmol(+)/kg")},
              ca_def, "cmol(+)/kg", src)
    mg_now = mg + mg_added
    mg_def = np.maximum(mg_target - mg_now, 0.0)
    mg_exc = np.maximum(mg_now - mg_target, 0.0)
    trace.add("balance", "Mg short of (+) or above (-) the saturation target (CONTESTED method)",
              "target / 100 x ECEC - Mg - Mg from earlier rules",
              {"target": (br.target_mg_sat_percent, "%"), "ECEC": (ecec, "cmol(+)/kg"),
               "Mg": (mg, "cmol(+)/kg"), "Mg from earlier rules": (mg_added, "cmol(+)/kg")},
              mg_def - mg_exc, "cmol(+)/kg", src)
    both = (ca_def > 0) & (mg_def > 0)
    blocked = np.zeros(np.shape(both), dtype=bool)
    method = _ph_method(cells)
    if s.ph_guard and method is not None:
        ph = cells.get("ph")
        limit, _ = s.ph_limits(method)
        blocked = both & (ph > limit)
        dol_amt = _select(both & ~blocked, mg_def, 0.0, ph)
        n = int(np.count_nonzero(blocked))
        if n:
            st.notes.append(
                f"pH guard: balance rule's {dol_p.name} withheld on {n} cell(s) with "
                f"{_ph_label(method)} above {limit:g} (common practice); their Ca goes on as "
                f"{ca_p.name}, their Mg shortfall is not met"
            )
        st.guarded = np.logical_or(st.guarded, blocked)
    else:
        if s.ph_guard:
            st.notes.append(
                f"pH guard not applied to the balance rule's {dol_p.name}: no pH surface"
            )
        dol_amt = np.where(both, mg_def, 0.0)
    t = trace if (not trace.enabled or float(np.asarray(dol_amt)) != 0.0) else _QUIET
    dol_rate = _chain(t, "balance", dol_amt, substance="Mg", product=dol_p, soil=soil)
    _add(st, "balance", dol_p.name, dol_rate)
    ca_from_dol = dol_amt * _ratio(dol_p, "Ca", "Mg")
    ca_need = np.maximum(np.maximum(ca_def - ca_from_dol, 0.0), mg_exc)
    trace.add("balance", f"Ca still to add as {ca_p.name} (Ca short, or Mg in excess)",
              "max(Ca short - Ca from dolomite, Mg excess, 0)",
              {"Ca short": (ca_def, "cmol(+)/kg"), "Ca from dolomite": (ca_from_dol, "cmol(+)/kg"),
               "Mg excess": (mg_exc, "cmol(+)/kg")}, ca_need, "cmol(+)/kg", src)
    t = trace if (not trace.enabled or float(np.asarray(ca_need)) != 0.0) else _QUIET
    _add(st, "balance", ca_p.name,
         _chain(t, "balance", ca_need, substance="Ca", product=ca_p, soil=soil))
    n_mg_only = int(np.count_nonzero((mg_def > 0) & ~both))
    if n_mg_only:
        st.notes.append(
            f"balance: {n_mg_only} cell(s) are short of the Mg target with Ca adequate; "
            "no magnesium-only product is applied"
        )
    if with_k:
        k_p = _product(products, br.potassium_product, f"{SECTION}.balance.potassium_product",
                       need="K")
        k = cells.get("k")
        k_min = float(to_cmol_kg(br.minimum_k, "k", br.minimum_k_unit))
        k_goal = np.maximum(br.target_k_sat_percent / 100.0 * ecec if br.target_k_sat_percent > 0
                            else 0.0, k_min)
        k_def = np.maximum(k_goal - k, 0.0)
        trace.add("balance", "K short of the saturation target or minimum",
                  "max(max(target / 100 x ECEC, minimum) - K, 0)",
                  {"target": (br.target_k_sat_percent, "%"),
                   "ECEC": (ecec if br.target_k_sat_percent > 0 else 0.0, "cmol(+)/kg"),
                   "minimum": (k_min, "cmol(+)/kg"), "K": (k, "cmol(+)/kg")},
                  k_def, "cmol(+)/kg", src)
        _add(st, "balance", k_p.name,
             _chain(trace, "balance", k_def, substance="K", product=k_p, soil=soil))
    st.methods["balance"] = src


# --------------------------------------------------------------------------- entry points


def _check_soil(depth_m: Any, bd: Any) -> None:
    for value, key, hi, unit in (
        (depth_m, "depth_m", 2.0, "m"),
        (bd, "bulk_density_g_cm3", 2.65, "g/cm3"),
    ):
        arr = np.asarray(value, dtype=float)
        if arr.ndim == 0 and not np.isfinite(arr):
            raise SettingsError(f"must be a finite number (got {float(arr)})", key=key)
        vals = arr[np.isfinite(arr)]
        if vals.size and (vals.min() <= 0 or vals.max() > hi):
            bad = vals.min() if vals.min() <= 0 else vals.max()
            raise SettingsError(
                f"must be more than 0 and at most {hi:g} {unit} (got {bad:g})", key=key
            )


def _run(
    arrays: Mapping[str, NDArray[np.float64]],
    settings: RateSettings,
    products: Mapping[str, Product],
    soil: _Soil,
    trace: _Trace,
) -> RateResult:
    runs, skipped = plan_rules(settings, set(arrays), ph_method=soil.ph_method)
    settings = _resolve(settings, set(arrays), soil.ph_method)
    _validate_products(settings, runs, products)
    cells = _Cells(arrays, trace, om_factor=settings.lime.om_to_oc_factor)
    cells.ph_method = soil.ph_method
    st = _State(contributions={}, notes=[], methods={})
    for rule, reason in skipped:
        st.notes.append(f"{rule} rule skipped: {reason}")
        trace.note(rule, f"skipped: {reason}")
    if runs:
        mass = kg_per_ha_of_layer(depth_m=soil.depth_m, bulk_density_g_cm3=soil.bulk_density_g_cm3)
        trace.add("soil", "soil mass of the treated layer",
                  "kg/ha = 10 000 m2 x depth x BD x 1000",
                  {"depth": (soil.depth_m, "m"), "BD": (soil.bulk_density_g_cm3, "g/cm3")},
                  mass, "kg soil/ha", _DERIVED)
    for rule in runs:
        if rule == "gypsum":
            _rule_gypsum(st, trace, cells, settings, products, soil)
        elif rule == "lime":
            _rule_lime(st, trace, cells, settings, products, soil)
        elif rule == "maintenance":
            _rule_maintenance(st, trace, cells, settings, products, soil)
        elif rule == "calcium":
            _rule_calcium(st, trace, cells, settings, products, soil)
        elif rule == "balance":
            _rule_balance(st, trace, cells, settings, products, soil, with_k="balance_k" in runs)
    st.notes.extend(cells.notes)
    needs_test, ask, target_text = _needs_test(st, trace, arrays, settings, soil, runs)
    if "balance" in runs:
        st.notes.append(
            "cation balance targets are CONTESTED (Kopittke & Menzies 2007, SSSA J 71:259): "
            "within the ranges common in soils, Ca:Mg:K ratios generally do not affect fertility"
        )
    product_rates: dict[str, NDArray[np.float64]] = {}
    for (_rule, pname), rate in st.contributions.items():
        product_rates[pname] = product_rates[pname] + rate if pname in product_rates else rate
    for pname, total in product_rates.items():
        parts = {f"{r}": (v, "kg/ha") for (r, p), v in st.contributions.items() if p == pname}
        trace.add("total", f"{pname}: sum of the rules' contributions (advisory)",
                  " + ".join(parts), parts, total, "kg/ha", "")
    return RateResult(
        product_rates=product_rates,
        contributions=st.contributions,
        skipped=skipped,
        notes=st.notes,
        methods=st.methods,
        ph_guard_cells=int(np.count_nonzero(st.guarded)),
        needs_test=needs_test,
        ask_for=ask,
        target=target_text,
        layer_rates=st.layer_rates,
    )


def _needs_test(
    st: _State, trace: _Trace, arrays: Mapping[str, NDArray[np.float64]], settings: RateSettings,
    soil: _Soil, runs: list[str],
) -> tuple[NDArray[np.bool_] | None, str, str]:
    """Acid cells no lime method could run on; what to ask the lab for; the target as text."""
    lr = settings.lime
    if lr.enabled == "off":
        return None, "", ""
    target = lr.target()
    uses_ph = lr.method in TARGET_METHODS and lr.method != "base_saturation"
    target_text = (f"pH {target.ph:g} in {target.ph_method} ({target.source})" if uses_ph
                   else f"base saturation {lr.target_base_saturation_percent:g} % at pH 7"
                   if lr.method == "base_saturation" else "")
    if "ph" not in arrays:
        return None, "", target_text
    ph = arrays["ph"]
    threshold = (target.ph if target.ph_method == soil.ph_method
                 else _ACID_BELOW.get(soil.ph_method, _ACID_BELOW["water"]))
    acid = below_trigger(ph, threshold, lr.trigger_margin_ph)
    if "lime" in runs:
        flag = acid & np.asarray(st.lime_unsure, dtype=bool)
    else:
        flag = acid
    flag = np.asarray(flag, dtype=bool)
    ask = _ask_for(settings, set(arrays), soil.ph_method)
    if flag.any():
        n = int(np.count_nonzero(flag))
        st.notes.append(
            f"lime requirement needs a test on {n} acid cell(s) (pH below {threshold:g} in "
            f"{soil.ph_method} by more than {lr.trigger_margin_ph:g}) where no lime method can "
            f"run: ask the lab for {ask}"
        )
        trace.note("lime", f"lime requirement needs a test: ask the lab for {ask}")
    return flag, ask, target_text


def _fill(result: RateResult, shape: tuple[int, ...]) -> None:
    """Every rate of ``result`` as a full array of ``shape`` (rules may give scalars)."""
    for name, rate in result.product_rates.items():
        result.product_rates[name] = _full(rate, shape)
    for name, rate in result.layer_rates.items():
        result.layer_rates[name] = _full(rate, shape)
    for pair, rate in result.contributions.items():
        result.contributions[pair] = _full(rate, shape)


def compute_rates(
    cells: Mapping[str, NDArray[np.float64]],
    settings: RateSettings,
    products: Mapping[str, Product],
    *,
    depth_m: float | NDArray[np.float64],
    bulk_density_g_cm3: float | NDArray[np.float64],
    ph_method: str | None = None,
    scoop_density_g_cm3: float = 1.0,
    layers: Sequence[RateLayer] = (),
) -> RateResult:
    """Product rates per cell, kg/ha as spread, before spreader limits.

    Parameters
    ----------
    cells
        Input surfaces of one shape, any of :data:`INPUT_NAMES`: exchangeable
        ``ca``, ``mg``, ``k``, ``na``, ``al``, ``h``, ``acidity`` and ``ecec`` in
        cmol(+)/kg; ``esp``, ``ca_sat``, ``mg_sat``, ``k_sat`` in percent of ECEC;
        ``ph``. NaN marks cells outside the paddock. Other keys are ignored.
    settings
        The rules.
    products
        Product key -> :class:`geosoil.products.Product`.
    depth_m
        Treated depth, m (scalar or per-cell array).
    bulk_density_g_cm3
        Bulk density of the treated layer, g/cm3 (scalar or per-cell array).
    ph_method
        pH method of the ``ph`` surface, ``"water"`` or ``"CaCl2"`` (default
        water, the trade's reading of a bare "pH").
    scoop_density_g_cm3
        Density the lab's volumetric amounts were read with (base-saturation
        method: its T is per volume).
    layers
        Samples at several depths: the layers the gypsum treatment spans, each with
        its ESP, ECEC, thickness and bulk density. The gypsum rule then sums their
        requirements (``depth_m`` and ``bulk_density_g_cm3`` stay those of the other
        rules); empty (the default): gypsum over ``depth_m`` from ``esp`` and ``ecec``.

    Returns
    -------
    RateResult

    Raises
    ------
    SettingsError
        A rule switched ``on`` lacks inputs; a product is missing or lacks the
        nutrient a rule needs; depth or bulk density out of range.
    InputError
        Surfaces of different shapes.

    Warns
    -----
    RateWarning
        When the pH guard withholds a liming product.

    Examples
    --------
    Kamprath (1970), Al 2.0 cmol(+)/kg, 0-20 cm, BD 1.2 -> 3.60 t/ha of pure calcite:

    >>> import numpy as np
    >>> from geosoil.products import default_products
    >>> r = compute_rates({"al": np.array([2.0])}, RateSettings(), default_products(),
    ...                   depth_m=0.2, bulk_density_g_cm3=1.2)
    >>> round(float(r.product_rates["lime"][0]) / 1000, 2)
    3.6
    """
    arrays: dict[str, NDArray[np.float64]] = {}
    shape: tuple[int, ...] | None = None
    first = ""
    for name, values in cells.items():
        if name not in INPUT_NAMES:
            logger.debug("compute_rates: ignoring surface %r", name)
            continue
        arr = np.asarray(values, dtype=float)
        if shape is None:
            shape, first = arr.shape, name
        elif arr.shape != shape:
            raise InputError(
                f"surface has shape {arr.shape}, but '{first}' has {shape}",
                column=name,
                fix="pass surfaces of one paddock grid",
            )
        arrays[name] = arr
    _check_soil(depth_m, bulk_density_g_cm3)
    for value, key in ((depth_m, "depth_m"), (bulk_density_g_cm3, "bulk_density_g_cm3")):
        a = np.asarray(value)
        if a.ndim and shape is not None and a.shape != shape:
            raise InputError(
                f"per-cell array has shape {a.shape}, but the surfaces have {shape}",
                column=key,
                fix="pass a scalar or an array of the paddock grid's shape",
            )
    for layer in layers:
        _check_soil(layer.depth_m, layer.bulk_density_g_cm3)
    soil = _Soil(depth_m, bulk_density_g_cm3, ph_method or "water", scoop_density_g_cm3,
                 tuple(layers))
    result = _run(arrays, settings, products, soil, _QUIET)
    if shape is not None:
        _fill(result, shape)
    if result.ph_guard_cells:
        method = "CaCl2" if ph_method == "CaCl2" else "water"
        warnings.warn(
            f"pH guard withheld liming products on {result.ph_guard_cells} cell(s) with "
            f"{_ph_label(method)} above {settings.ph_limits(method)[0]:g}",
            RateWarning,
            stacklevel=2,
        )
    for note in result.notes:
        # a safety rule that could not run is a warning, not a note
        if (note.startswith(("pHBC regression", "lime method 'phbc'"))
                or note == PH_GUARD_NOT_APPLIED):
            warnings.warn(note, RateWarning, stacklevel=2)
    if result.needs_test_cells:
        warnings.warn(
            f"lime requirement needs a test: {result.needs_test_cells} acid cell(s) where no lime "
            f"method can run; ask the lab for {result.ask_for}",
            RateWarning,
            stacklevel=2,
        )
    for rule, reason in result.skipped:
        logger.info("%s rule skipped: %s", rule, reason)
    return result


def explain_cell(
    values: Mapping[str, float],
    settings: RateSettings,
    products: Mapping[str, Product],
    *,
    depth_m: float | None = None,
    bulk_density_g_cm3: float | None = None,
    ph_method: str | None = None,
    scoop_density_g_cm3: float = 1.0,
    layers: Sequence[RateLayer] = (),
) -> list[Step]:
    """The arithmetic of :func:`compute_rates` for one cell, step by step.

    The same code runs as for a whole grid, so the final ``total`` steps equal
    :func:`compute_rates`'s rates for the same values.

    Parameters
    ----------
    values
        Input values of the cell (keys as for :func:`compute_rates`); may also
        hold ``depth_m`` and ``bulk_density_g_cm3``.
    settings, products
        As for :func:`compute_rates`.
    depth_m, bulk_density_g_cm3
        Treated depth and bulk density; default: taken from ``values``.
    layers
        As for :func:`compute_rates` (one value per layer).

    Returns
    -------
    list of Step

    Examples
    --------
    >>> from geosoil.products import default_products
    >>> steps = explain_cell({"al": 2.0, "ca": 0.8, "mg": 0.2},
    ...                      RateSettings(lime=LimeRule(method="cochrane")), default_products(),
    ...                      depth_m=0.2, bulk_density_g_cm3=1.2)
    >>> [round(s.result, 2) for s in steps if s.rule == "lime"][:2]   # Cochrane et al. 1980
    [0.6, 2.1]
    >>> round(steps[-1].result / 1000, 2)
    2.52
    """
    d = depth_m if depth_m is not None else values.get("depth_m")
    b = bulk_density_g_cm3 if bulk_density_g_cm3 is not None else values.get("bulk_density_g_cm3")
    if d is None:
        raise SettingsError("give the treated depth (depth_m)", key="depth_m")
    if b is None:
        raise SettingsError("give the bulk density (bulk_density_g_cm3)", key="bulk_density_g_cm3")
    _check_soil(d, b)
    arrays = {
        k: np.asarray(float(v)) for k, v in values.items() if k in INPUT_NAMES
    }
    trace = _Trace(True)
    _run(arrays, settings, products,
         _Soil(float(d), float(b), ph_method or "water", scoop_density_g_cm3, tuple(layers)),
         trace)
    return trace.steps


def format_steps(steps: list[Step]) -> str:
    """The steps as text, one per line (what the command line prints).

    Parameters
    ----------
    steps : list of Step
        From :func:`explain_cell`.

    Returns
    -------
    str
        The text, several lines.
    """
    lines = [str(s) for s in steps]
    lines.append(
        "Rates are advisory: have them checked by a qualified agronomist before spreading."
    )
    return "\n".join(lines)
