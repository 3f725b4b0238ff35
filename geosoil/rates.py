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

import difflib
import logging
import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .errors import InputError, RateWarning, SettingsError
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
    "GypsumRule",
    "LimeRule",
    "CalciumRule",
    "BalanceRule",
    "RateSettings",
    "Step",
    "RateResult",
    "plan_rules",
    "check_inputs",
    "inputs_used",
    "compute_rates",
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
)

#: Citation of each method, as shown in outputs and explanations.
METHOD_CITATIONS: dict[str, str] = {
    "handbook60": "USDA Handbook 60 (Richards 1954); exchange efficiency F after Oster et al. 1999",
    "kamprath": "Kamprath 1970, Soil Sci. Soc. Am. Proc. 34:252",
    "cochrane": "Cochrane, Salinas & Sanchez 1980, Tropical Agriculture 57",
    "acidity_share": "charge balance: exchangeable acidity brought to a target share of ECEC "
    "[derived]",
    "sufficiency": "minimum exchangeable calcium (sufficiency) [common practice]",
    "bcsr": "basic cation saturation ratios (Bear and co-workers, 1940s); CONTESTED: "
    "Kopittke & Menzies 2007, SSSA J 71:259",
}

_DERIVED = "[derived] from the definitions and standard atomic weights"
_GUARD_SOURCE = "[common practice] no lime on alkaline soil (pH above about 7)"

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
}

_UNIT = {
    "esp": "%", "ca_sat": "%", "mg_sat": "%", "k_sat": "%", "ph": "",
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
    """Lime for acidity by one of three published methods."""

    enabled: str = _enabled_setting("auto", "lime for acidity")
    method: str = setting(
        "kamprath",
        doc="'kamprath' = exchangeable Al x factor (Kamprath 1970); 'cochrane' = target Al "
        "saturation (Cochrane, Salinas & Sanchez 1980); 'acidity_share' = exchangeable acidity "
        "to a target share of ECEC",
        choices=("kamprath", "cochrane", "acidity_share"),
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
        20.0, doc="share of ECEC left as exchangeable acidity (crop dependent)", unit="%",
        minimum=0.0, maximum=100.0,
    )
    product: str = setting("lime", doc="liming product key")

    def __post_init__(self) -> None:
        _check_declared(self)

    @property
    def factor(self) -> float:
        """The factor of the chosen method."""
        return {
            "kamprath": self.kamprath_factor,
            "cochrane": self.cochrane_factor,
            "acidity_share": self.acidity_factor,
        }[self.method]


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
        doc="calcium goes on as the lime product below this pH and as the gypsum product at or "
        "above it (same pH method as the lab's)",
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
        7.0, doc="pH above which no liming product goes on (common practice: about 7)",
        minimum=2.0, maximum=11.0,
    )

    def __post_init__(self) -> None:
        _check_declared(self)
        if self.ph_guard and self.calcium.lime_below_ph > self.no_lime_above_ph:
            raise SettingsError(
                f"lime_below_ph {self.calcium.lime_below_ph:g} is above the pH guard "
                f"no_lime_above_ph {self.no_lime_above_ph:g}; lower it or raise the guard",
                key="calcium.lime_below_ph",
            )


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
    """

    product_rates: dict[str, NDArray[np.float64]]
    contributions: dict[tuple[str, str], NDArray[np.float64]]
    skipped: list[tuple[str, str]]
    notes: list[str]
    methods: dict[str, str] = field(default_factory=dict)
    ph_guard_cells: int = 0


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
        return {
            "kamprath": ["al"],
            "cochrane": ["al", "ca", "mg"],
            "acidity_share": ["acidity", "ecec"],
        }[settings.lime.method]
    if rule == "calcium":
        return ["ca", "ph"]
    if rule == "balance":
        return ["ecec", "ca", "mg"]
    if rule == "balance_k":
        return ["ecec", "k"] if settings.balance.target_k_sat_percent > 0 else ["k"]
    raise ValueError(rule)  # programming error


def _rule_settings(rule: str, settings: RateSettings) -> Any:
    return getattr(settings, "balance" if rule == "balance_k" else rule)


def _missing_key(rule: str, settings: RateSettings) -> str:
    if rule == "lime":
        return f"{SECTION}.lime.method"
    if rule == "balance_k":
        return f"{SECTION}.balance.target_k_sat_percent"
    return f"{SECTION}.{rule}.enabled"


def _possible_methods(available: set[str]) -> str:
    ok = [
        m for m in ("kamprath", "cochrane", "acidity_share")
        if all(_source_of(n, available) is not None
               for n in _needs("lime", RateSettings(lime=LimeRule(method=m))))
    ]
    return "possible here: " + ", ".join(ok) if ok else "none is possible with these samples"


def plan_rules(
    settings: RateSettings, available: set[str]
) -> tuple[list[str], list[tuple[str, str]]]:
    """Which rules run on the surfaces ``available``, and which are skipped and why.

    Parameters
    ----------
    settings
        The rate settings.
    available
        Names of the input surfaces (see :data:`INPUT_NAMES`).

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
    runs: list[str] = []
    skipped: list[tuple[str, str]] = []
    for rule in ("gypsum", "lime", "calcium", "balance", "balance_k"):
        rs = _rule_settings(rule, settings)
        if rs.enabled == "off":
            continue
        if rule == "balance_k" and ("balance" not in runs or not settings.balance.wants_k):
            continue
        missing = [n for n in _needs(rule, settings) if _source_of(n, available) is None]
        if not missing:
            runs.append(rule)
            continue
        what = ", ".join(_DESCRIBE[n] for n in missing)
        if rule == "lime":
            m = settings.lime.method
            reason = f"method '{m}' ({METHOD_CITATIONS[m]}) needs {what}"
        elif rule == "balance_k":
            reason = f"the potassium part needs {what}"
        else:
            reason = f"needs {what}"
        if rs.enabled == "on":
            fix = (
                f"choose a method whose inputs the samples give ({_possible_methods(available)}), "
                f"supply them, or set {SECTION}.lime.enabled = 'auto'"
                if rule == "lime"
                else f"supply them or set {SECTION}.{'balance' if rule == 'balance_k' else rule}"
                ".enabled = 'auto'"
            )
            raise SettingsError(
                f"the {rule} rule is switched on but {reason}, which the samples do not give; "
                f"available: {', '.join(sorted(available)) or 'none'}. Fix: {fix}",
                key=_missing_key(rule, settings),
            )
        skipped.append(("balance" if rule == "balance_k" else rule, reason))
    return runs, skipped


def check_inputs(
    settings: RateSettings,
    available: set[str],
    products: Mapping[str, Product] | None = None,
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

    Returns
    -------
    list of str
        Notes on skipped rules, e.g. ``"gypsum rule skipped: needs ESP ..."``.

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
    runs, skipped = plan_rules(settings, set(available))
    if products is not None:
        _validate_products(settings, runs, products)
    return [f"{rule} rule skipped: {reason}" for rule, reason in skipped]


def inputs_used(settings: RateSettings, available: set[str]) -> list[str]:
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
    runs, _ = plan_rules(settings, avail)
    used: set[str] = set()
    for rule in runs:
        for n in _needs(rule, settings):
            used.update(_source_of(n, avail) or ())
    if "ph" in avail and settings.ph_guard and runs:
        used.add("ph")
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

    def __init__(self, arrays: Mapping[str, NDArray[np.float64]], trace: _Trace) -> None:
        self.arrays = dict(arrays)
        self.trace = trace
        self.cache: dict[str, NDArray[np.float64]] = {}

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
class _Soil:
    depth_m: Any
    bulk_density_g_cm3: Any


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


def _ph_guard(
    st: _State, trace: _Trace, cells: _Cells, settings: RateSettings, rule: str,
    product: Product, rate: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Withhold a liming product where pH is above the limit. Returns (rate, withheld)."""
    if not (settings.ph_guard and product.liming):
        return rate, np.zeros(np.shape(rate), dtype=bool)
    if "ph" not in cells.arrays:
        st.notes.append(
            f"pH guard not applied to the {rule} rule's {product.name}: no pH surface "
            "(common practice is no lime above pH about 7)"
        )
        trace.note(rule, "pH guard not applied: no pH given")
        return rate, np.zeros(np.shape(rate), dtype=bool)
    ph = cells.arrays["ph"]
    withheld = (ph > settings.no_lime_above_ph) & (np.asarray(rate) > 0)
    out = _select(ph > settings.no_lime_above_ph, 0.0, rate, ph)
    trace.add(rule, "pH guard: no liming product above the pH limit",
              "rate = 0 where pH > limit",
              {"pH": (ph, ""), "limit": (settings.no_lime_above_ph, ""),
               "rate before": (rate, "kg/ha")},
              out, "kg/ha", _GUARD_SOURCE)
    n = int(np.count_nonzero(withheld))
    if n:
        st.notes.append(
            f"pH guard: {rule} rule's {product.name} withheld on {n} cell(s) with pH above "
            f"{settings.no_lime_above_ph:g} (common practice)"
        )
    st.guarded = np.logical_or(st.guarded, withheld)
    return out, withheld


def _add(st: _State, rule: str, product: str, rate: NDArray[np.float64]) -> None:
    key = (rule, product)
    st.contributions[key] = st.contributions[key] + rate if key in st.contributions else rate


def _rule_gypsum(st: _State, trace: _Trace, cells: _Cells, s: RateSettings,
                 products: Mapping[str, Product], soil: _Soil) -> None:
    g = s.gypsum
    p = _product(products, g.product, f"{SECTION}.gypsum.product", need="Ca")
    src = METHOD_CITATIONS["handbook60"]
    esp, ecec = cells.get("esp"), cells.get("ecec")
    excess = np.maximum(esp - g.target_esp_percent, 0.0)
    trace.add("gypsum", "ESP above the target", "max(ESP - target ESP, 0)",
              {"ESP": (esp, "%"), "target ESP": (g.target_esp_percent, "%")}, excess, "%", src)
    exch = excess / 100.0 * ecec
    trace.add("gypsum", "calcium to displace the excess sodium", "Ca = (ESP - target) / 100 x ECEC",
              {"ESP - target": (excess, "%"), "ECEC": (ecec, "cmol(+)/kg")}, exch, "cmol(+)/kg",
              "USDA Handbook 60 (Richards 1954)")
    need = exch * g.exchange_efficiency
    trace.add("gypsum", "with the exchange-efficiency factor", "Ca x F",
              {"Ca": (exch, "cmol(+)/kg"), "F": (g.exchange_efficiency, "")}, need, "cmol(+)/kg",
              "Oster et al. 1999 (F 1.1 to 1.3)")
    rate = _chain(trace, "gypsum", need, substance="Ca", product=p, soil=soil)
    rate, withheld = _ph_guard(st, trace, cells, s, "gypsum", p, rate)
    _add(st, "gypsum", p.name, rate)
    st.ca_added = st.ca_added + np.where(withheld, 0.0, exch)
    st.methods["gypsum"] = src
    sodic = (esp >= g.leaching_note_esp_percent) & (rate > 0)
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
    else:
        acid, ecec = cells.get("acidity"), cells.get("ecec")
        allowed = lr.target_acidity_share_percent / 100.0 * ecec
        need = lr.acidity_factor * np.maximum(acid - allowed, 0.0)
        trace.add("lime", "lime requirement",
                  "CaCO3 = factor x max(acidity - share / 100 x ECEC, 0)",
                  {"factor": (lr.acidity_factor, ""), "acidity": (acid, "cmol(+)/kg"),
                   "share": (lr.target_acidity_share_percent, "%"), "ECEC": (ecec, "cmol(+)/kg")},
                  need, "cmol(+)/kg CaCO3", src)
    rate = _chain(trace, "lime", need, substance="CaCO3", product=p, soil=soil)
    rate, withheld = _ph_guard(st, trace, cells, s, "lime", p, rate)
    _add(st, "lime", p.name, rate)
    ca_share, mg_share = _ca_share(p)
    neutralised = np.where(withheld, 0.0, need / lr.factor)
    st.ca_added = st.ca_added + neutralised * ca_share
    st.mg_added = st.mg_added + neutralised * mg_share
    st.methods["lime"] = src


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
    acid = ph < cr.lime_below_ph
    if s.ph_guard:
        acid = acid & (ph <= s.no_lime_above_ph)
    lime_amt = _select(acid, deficit, 0.0, ph)
    gyp_amt = _select(acid, 0.0, deficit, ph)
    trace.add("calcium", f"product by pH: {lime_p.name} below pH {cr.lime_below_ph:g}, "
              f"{gyp_p.name} otherwise", "acid = pH < lime_below_ph",
              {"pH": (ph, ""), "lime_below_ph": (cr.lime_below_ph, "")}, acid, "(1 = acid)",
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
    if s.ph_guard and "ph" in cells.arrays:
        ph = cells.arrays["ph"]
        blocked = both & (ph > s.no_lime_above_ph)
        dol_amt = _select(both & ~blocked, mg_def, 0.0, ph)
        n = int(np.count_nonzero(blocked))
        if n:
            st.notes.append(
                f"pH guard: balance rule's {dol_p.name} withheld on {n} cell(s) with pH above "
                f"{s.no_lime_above_ph:g} (common practice); their Ca goes on as {ca_p.name}, their "
                "Mg shortfall is not met"
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
    runs, skipped = plan_rules(settings, set(arrays))
    _validate_products(settings, runs, products)
    cells = _Cells(arrays, trace)
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
        elif rule == "calcium":
            _rule_calcium(st, trace, cells, settings, products, soil)
        elif rule == "balance":
            _rule_balance(st, trace, cells, settings, products, soil, with_k="balance_k" in runs)
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
    )


def compute_rates(
    cells: Mapping[str, NDArray[np.float64]],
    settings: RateSettings,
    products: Mapping[str, Product],
    *,
    depth_m: float | NDArray[np.float64],
    bulk_density_g_cm3: float | NDArray[np.float64],
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
    soil = _Soil(depth_m, bulk_density_g_cm3)
    result = _run(arrays, settings, products, soil, _QUIET)
    if shape is not None:
        for name, rate in result.product_rates.items():
            result.product_rates[name] = _full(rate, shape)
        for pair, rate in result.contributions.items():
            result.contributions[pair] = _full(rate, shape)
    if result.ph_guard_cells:
        warnings.warn(
            f"pH guard withheld liming products on {result.ph_guard_cells} cell(s) with pH above "
            f"{settings.no_lime_above_ph:g}",
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
    _run(arrays, settings, products, _Soil(float(d), float(b)), trace)
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
