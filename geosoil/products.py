"""Amendment products: what is in the bag, as it goes through the spreader.

A :class:`Product` carries the mass fractions of calcium, magnesium, potassium
and sulfur, the calcium carbonate equivalent (CCE), the fineness factor and the
effective neutralising value (ENV) of the product *as spread* (after purity and
moisture). The rate rules in :mod:`geosoil.rates` divide a nutrient or
neutralising requirement by these fractions.

Built-in materials get their composition from stoichiometry, computed from the
standard atomic weights in :data:`geosoil.units.ATOMIC_WEIGHT` (never typed in
as rounded percentages):

======================  ==================  =========================
key                     formula             neutralising equivalents
======================  ==================  =========================
``gypsum``              CaSO4·2H2O          0
``lime``                CaCO3 (calcite)     2 per formula unit
``dolomite``            CaMg(CO3)2          4
``hydrated_lime``       Ca(OH)2             2
``quicklime``           CaO                 2
``potassium_sulfate``   K2SO4               0
``custom``              (certificate only)  --
======================  ==================  =========================

CCE is the neutralising capacity per unit mass relative to pure CaCO3:
``CCE = (equivalents / M) / (2 / M(CaCO3))``.

Every value can be overridden by the analysis on the product's certificate
(:class:`ProductSettings`): purity, Ca, Mg, K, S, CCE, fineness (percent passing
sieves) or ENV directly, and moisture. Rules used, in this order:

1. Pure-material values are the stoichiometric ones.
2. Purity scales every pure-material value (Ca, Mg, K, S and CCE).
3. A certificate Ca, Mg, K, S or CCE value replaces the purity-scaled value
   (a certificate figure already describes the product, so purity is not
   applied to it again). A neutralising value on a CaO basis
   (``nv_cao_percent``) is converted, CCE = NV x M(CaCO3)/M(CaO) = NV x 1.7848.
   A liming material's Ca (and Mg) follow a certificate CCE (Ca = Ca of the
   pure material x CCE / CCE of the pure material) unless the certificate
   states them. A stated CCE (or NV) above the pure material's by more than
   half a point (a whole-percent figure's rounding) is refused: no product
   neutralises more than its pure material (pure calcite: CCE 100, NV 56 on a
   CaO basis), and such a figure, mostly a CCE in ``nv_cao_percent``, would
   cut the lime rate in silence.
4. Fineness factor: from the percent passing each sieve with the configured
   factors (default: the Cornell Cooperative Extension scheme, factor 0 for
   the part retained on 20 mesh, 0.40 for 20-60 mesh, 0.80 for 60-100 mesh,
   1.00 for the part passing 100 mesh); 1 (fully effective) when neither
   sieve results nor an ENV are given. ENV = fineness factor x CCE, unless the
   certificate gives ENV directly.
5. With ``analysis_basis = "dry"`` (the default; certificates usually report
   on dry matter), every fraction is multiplied by ``1 - moisture`` so it
   describes the moist product that is weighed, bought and spread. With
   ``"as_received"`` the figures already include the water and moisture is
   only recorded.

Examples
--------
>>> products = resolve_products({"gypsum": ProductSettings(), "lime": ProductSettings()})
>>> round(products["gypsum"].ca_fraction * 100, 2)
23.28
>>> round(products["lime"].cce * 100, 2)
100.0
>>> round(fineness_factor(percent_passing=(100, 70, 50)), 2)   # Cornell worked example
0.78
"""

from __future__ import annotations

import dataclasses
import logging
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from .errors import SettingsError
from .settings import check_range, setting
from .units import ATOMIC_WEIGHT

__all__ = [
    "MATERIALS",
    "Material",
    "Product",
    "ProductSettings",
    "CORNELL_SIEVES_MESH",
    "CORNELL_FACTORS",
    "molar_mass",
    "CCE_PER_NV_CAO",
    "cce_from_nv_cao",
    "uncertified",
    "fineness_factor",
    "resolve_products",
    "default_products",
]

logger = logging.getLogger(__name__)


def molar_mass(formula: Mapping[str, int]) -> float:
    """Molar mass, g/mol, of a formula given as element counts.

    Parameters
    ----------
    formula
        Element symbol -> number of atoms; the symbols must be in
        :data:`geosoil.units.ATOMIC_WEIGHT`.

    Returns
    -------
    float
        g/mol.

    Examples
    --------
    >>> round(molar_mass({"Ca": 1, "S": 1, "O": 6, "H": 4}), 2)   # CaSO4·2H2O
    172.16
    """
    return sum(ATOMIC_WEIGHT[el] * n for el, n in formula.items())


#: CCE (CaCO3 basis) per unit of neutralising value on a CaO basis: M(CaCO3) / M(CaO),
#: about 100.09 / 56.08 = 1.7848 ([derived]: both neutralise 2 mol of H+ per mol).
CCE_PER_NV_CAO: float = molar_mass({"Ca": 1, "C": 1, "O": 3}) / molar_mass({"Ca": 1, "O": 1})


def cce_from_nv_cao(nv_cao_percent: float) -> float:
    """Calcium carbonate equivalent (%) from a neutralising value on a CaO basis (%).

    Certificates in several countries state the neutralising value as CaO
    (pure CaCO3 = 56.0); entered as a CCE it would over-apply lime 1.78-fold.

    Parameters
    ----------
    nv_cao_percent
        Neutralising value, % CaO.

    Returns
    -------
    float
        CCE, % CaCO3.

    Examples
    --------
    >>> round(cce_from_nv_cao(56.0), 1), round(cce_from_nv_cao(54.0), 1)  # [derived]
    (99.9, 96.4)
    """
    return nv_cao_percent * CCE_PER_NV_CAO


@dataclass(frozen=True)
class Material:
    """A built-in material: its formula and what that formula neutralises.

    ``elements`` holds element counts per formula unit; ``equivalents`` the
    moles of acidity (H+) one mole neutralises (0 for a neutral salt).
    """

    key: str
    label: str
    formula: str
    elements: Mapping[str, int]
    equivalents: int

    @property
    def molar_mass(self) -> float:
        """g/mol of the formula unit."""
        return molar_mass(self.elements) if self.elements else math.nan

    def fraction(self, element: str) -> float:
        """Mass fraction of ``element`` in the pure material (0 if absent)."""
        if not self.elements:
            return 0.0
        n = self.elements.get(element, 0)
        return ATOMIC_WEIGHT[element] * n / self.molar_mass

    @property
    def cce(self) -> float:
        """Calcium carbonate equivalent of the pure material, as a fraction (1 = CaCO3)."""
        if not self.elements or self.equivalents == 0:
            return 0.0
        m_caco3 = molar_mass({"Ca": 1, "C": 1, "O": 3})
        return (self.equivalents / self.molar_mass) / (2 / m_caco3)


#: The built-in materials, by key. ``custom`` has no composition of its own:
#: every value comes from the certificate.
MATERIALS: dict[str, Material] = {
    m.key: m
    for m in (
        Material("gypsum", "gypsum", "CaSO4·2H2O", {"Ca": 1, "S": 1, "O": 6, "H": 4}, 0),
        Material("lime", "agricultural lime (calcite)", "CaCO3", {"Ca": 1, "C": 1, "O": 3}, 2),
        Material("dolomite", "dolomite", "CaMg(CO3)2", {"Ca": 1, "Mg": 1, "C": 2, "O": 6}, 4),
        Material("hydrated_lime", "hydrated lime", "Ca(OH)2", {"Ca": 1, "O": 2, "H": 2}, 2),
        Material("quicklime", "quicklime", "CaO", {"Ca": 1, "O": 1}, 2),
        Material("potassium_sulfate", "potassium sulfate", "K2SO4", {"K": 2, "S": 1, "O": 4}, 0),
        Material("custom", "custom product", "", {}, 0),
    )
}

#: Sieve sizes (US standard mesh numbers) of the Cornell Cooperative Extension fineness scheme.
CORNELL_SIEVES_MESH: tuple[float, ...] = (20.0, 60.0, 100.0)
#: Factors of that scheme: retained on 20 mesh, 20-60, 60-100, passing 100 mesh.
CORNELL_FACTORS: tuple[float, ...] = (0.0, 0.40, 0.80, 1.00)


def _check_declared(obj: Any) -> None:
    """Check every numeric field against the range, and every text field against
    the choices, declared with :func:`geosoil.settings.setting`.

    :func:`geosoil.settings.from_mapping` does this for settings read from a
    project file; calling it from ``__post_init__`` gives objects built in code
    the same checks.
    """
    for f in dataclasses.fields(obj):
        value = getattr(obj, f.name)
        meta = f.metadata
        if isinstance(value, bool) or value is None:
            continue
        if isinstance(value, (int, float)):
            check_range(
                float(value),
                key=f.name,
                minimum=meta.get("minimum"),
                maximum=meta.get("maximum"),
                exclusive_minimum=bool(meta.get("exclusive_minimum")),
                unit=meta.get("unit"),
            )
        elif isinstance(value, str) and meta.get("choices") and value not in meta["choices"]:
            raise SettingsError(
                f"'{value}' is not allowed. Allowed: {', '.join(meta['choices'])}", key=f.name
            )


def fineness_factor(
    *,
    percent_passing: tuple[float, ...] | list[float],
    sieves_mesh: tuple[float, ...] = CORNELL_SIEVES_MESH,
    factors: tuple[float, ...] = CORNELL_FACTORS,
) -> float:
    """Fineness factor (0-1) of a liming product from its sieve analysis.

    ``FF = sum(factor_i x fraction_i)`` over the size classes: retained on the
    coarsest sieve, between each pair of sieves, passing the finest sieve.
    The default factors are the Cornell Cooperative Extension scheme:
    ``0.40 x (%20 - %60) + 0.80 x (%60 - %100) + 1.00 x %100`` (as fractions).

    Parameters
    ----------
    percent_passing
        Percent of the product passing each sieve, coarsest sieve first.
    sieves_mesh
        The sieves, as mesh numbers, coarsest first (for messages and checks).
    factors
        One factor per size class: ``len(sieves_mesh) + 1`` values, coarsest
        class first.

    Returns
    -------
    float
        Fineness factor, 0 to 1.

    Raises
    ------
    SettingsError
        Lengths that do not match, percentages outside 0-100 or increasing
        with finer sieves, factors outside 0-1.

    Examples
    --------
    Cornell Cooperative Extension worked example (100 / 70 / 50 % passing
    20 / 60 / 100 mesh):

    >>> round(fineness_factor(percent_passing=(100, 70, 50)), 3)
    0.78
    """
    p = [float(v) for v in percent_passing]
    if len(sieves_mesh) < 1:
        raise SettingsError("give at least one sieve", key="fineness_sieves_mesh")
    if any(b <= a for a, b in zip(sieves_mesh, sieves_mesh[1:], strict=False)):
        raise SettingsError(
            "sieves must be listed coarsest first, with rising mesh numbers "
            f"(got {list(sieves_mesh)})",
            key="fineness_sieves_mesh",
        )
    if len(factors) != len(sieves_mesh) + 1:
        raise SettingsError(
            f"needs {len(sieves_mesh) + 1} factors (one for the part retained on the coarsest "
            f"sieve, one per pair of sieves, one for the part passing the finest); "
            f"got {len(factors)}",
            key="fineness_factors",
        )
    for i, fct in enumerate(factors):
        check_range(float(fct), key=f"fineness_factors[{i}]", minimum=0.0, maximum=1.0)
    if len(p) != len(sieves_mesh):
        raise SettingsError(
            f"needs one percentage per sieve ({len(sieves_mesh)}: mesh "
            f"{', '.join(f'{s:g}' for s in sieves_mesh)}); got {len(p)}",
            key="percent_passing",
        )
    for i, v in enumerate(p):
        check_range(v, key=f"percent_passing[{i}]", minimum=0.0, maximum=100.0, unit="%")
    if any(b > a for a, b in zip(p, p[1:], strict=False)):
        raise SettingsError(
            f"percent passing cannot rise on a finer sieve (got {p}); "
            "list the coarsest sieve first",
            key="percent_passing",
        )
    classes = [100.0 - p[0]] + [a - b for a, b in zip(p, p[1:], strict=False)] + [p[-1]]
    return sum(f * c for f, c in zip(factors, classes, strict=True)) / 100.0


@dataclass(frozen=True)
class ProductSettings:
    """One product as bought: the material and, optionally, its certificate analysis.

    Leave a certificate field unset to use the stoichiometric value scaled by
    purity. Percentages are of the product on the ``analysis_basis``.
    """

    material: str | None = setting(
        None,
        doc="built-in material the product is (default: the product's own key when it is a "
        "built-in key)",
        choices=tuple(MATERIALS),
    )
    label: str = setting("", doc="name shown on maps and reports (default: the material's name)")
    purity_percent: float = setting(
        100.0, doc="share of the product that is the pure material", unit="%",
        minimum=0.0, maximum=100.0, exclusive_minimum=True,
    )
    ca_percent: float | None = setting(
        None, doc="calcium on the certificate", unit="%", minimum=0.0, maximum=100.0
    )
    mg_percent: float | None = setting(
        None, doc="magnesium on the certificate", unit="%", minimum=0.0, maximum=100.0
    )
    k_percent: float | None = setting(
        None, doc="potassium on the certificate", unit="%", minimum=0.0, maximum=100.0
    )
    s_percent: float | None = setting(
        None, doc="sulfur on the certificate", unit="%", minimum=0.0, maximum=100.0
    )
    cce_percent: float | None = setting(
        None, doc="neutralising value on a CaCO3 basis (calcium carbonate equivalent, CCE; pure "
        "CaCO3 = 100) on the certificate", unit="%", minimum=0.0, maximum=250.0,
    )
    nv_cao_percent: float | None = setting(
        None, doc="neutralising value on a CaO basis (pure CaCO3 = 56) on the certificate, "
        "instead of cce_percent; CCE = NV x 100.09 / 56.08", unit="%", minimum=0.0,
        maximum=140.0,
    )
    percent_passing: tuple[float, ...] = setting(
        default_factory=tuple,
        doc="percent passing each fineness sieve, coarsest first (empty: not given)",
        unit="%",
    )
    fineness_sieves_mesh: tuple[float, ...] = setting(
        default_factory=lambda: CORNELL_SIEVES_MESH,
        doc="fineness sieves as mesh numbers, coarsest first (default: Cornell scheme 20/60/100)",
    )
    fineness_factors: tuple[float, ...] = setting(
        default_factory=lambda: CORNELL_FACTORS,
        doc="effectiveness of each size class, coarsest first: retained on the first sieve, "
        "between sieves, passing the last (default: Cornell 0/0.40/0.80/1.00)",
    )
    env_percent: float | None = setting(
        None, doc="effective neutralising value on the certificate (replaces CCE x fineness)",
        unit="%", minimum=0.0, maximum=250.0,
    )
    moisture_percent: float = setting(
        0.0, doc="water in the product as delivered", unit="%", minimum=0.0, maximum=99.0
    )
    analysis_basis: str = setting(
        "dry", doc="basis of the certificate figures: dry matter, or the moist product as received",
        choices=("dry", "as_received"),
    )

    def __post_init__(self) -> None:
        _check_declared(self)
        if self.cce_percent is not None and self.nv_cao_percent is not None:
            raise SettingsError(
                "give the neutralising value once: cce_percent (CaCO3 basis) or nv_cao_percent "
                "(CaO basis), not both", key="nv_cao_percent",
            )
        if self.percent_passing:
            fineness_factor(
                percent_passing=self.percent_passing,
                sieves_mesh=self.fineness_sieves_mesh,
                factors=self.fineness_factors,
            )
            if self.env_percent is not None:
                raise SettingsError(
                    "give either the sieve results (percent_passing) or env_percent, not both",
                    key="env_percent",
                )
        else:
            # Still check the scheme itself so a bad table fails early.
            fineness_factor(
                percent_passing=(100.0,) * len(self.fineness_sieves_mesh),
                sieves_mesh=self.fineness_sieves_mesh,
                factors=self.fineness_factors,
            )


@dataclass(frozen=True)
class Product:
    """A product as spread. Fractions are kg per kg of moist product as spread.

    Attributes
    ----------
    name
        The product's key in the run (``"gypsum"``, ``"lime"``, ...).
    label
        Display name.
    material, formula
        Built-in material key and its formula (empty for ``custom``).
    ca_fraction, mg_fraction, k_fraction, s_fraction
        Nutrient mass fractions.
    cce
        Calcium carbonate equivalent as a fraction (1.0 = pure CaCO3).
    fineness_factor
        Share of the CCE that acts within the planning horizon (0-1).
    env
        Effective neutralising value as a fraction (CCE x fineness factor).
    purity, moisture
        As fractions, for the record.
    provenance
        One line per value saying where it came from.
    """

    name: str
    label: str
    material: str
    formula: str
    ca_fraction: float
    mg_fraction: float
    k_fraction: float
    s_fraction: float
    cce: float
    fineness_factor: float
    env: float
    purity: float
    moisture: float
    provenance: tuple[str, ...] = ()

    @property
    def liming(self) -> bool:
        """True when the product neutralises acidity (ENV above 0)."""
        return self.env > 0.0

    def fraction_of(self, element: str) -> float:
        """Mass fraction of ``"Ca"``, ``"Mg"``, ``"K"`` or ``"S"``."""
        return {
            "Ca": self.ca_fraction,
            "Mg": self.mg_fraction,
            "K": self.k_fraction,
            "S": self.s_fraction,
        }[element]


def _follow_cce(
    ps: ProductSettings, mat: Material, cce: float, values: dict[str, float], prov: list[str]
) -> list[str]:
    """A liming material's Ca and Mg follow a certificate CCE unless the certificate states
    them: the neutralising value says how much of the pure material the product holds.
    Updates ``values`` in place; returns the provenance lines."""
    if (ps.cce_percent is None and ps.nv_cao_percent is None) or mat.cce <= 0:
        return prov
    share = cce / mat.cce
    for element, cert in (("Ca", ps.ca_percent), ("Mg", ps.mg_percent)):
        pure = mat.fraction(element)
        if cert is None and pure > 0:
            values[element] = pure * share
            prov = [ln for ln in prov if not ln.startswith(f"{element} ")]
            prov.append(
                f"{element} {pure * 100:.2f} % in pure {mat.formula} (stoichiometry) x "
                f"CCE {cce * 100:.2f} % / {mat.cce * 100:.2f} % of the pure material"
            )
    return prov


#: How far a certificate's neutralising value may lie above the pure material's, in
#: percentage points on the basis it is stated: half a point, the rounding of a figure
#: printed to the whole percent.
CERTIFICATE_ROUNDING_PERCENT: float = 0.5


def _check_cce_possible(ps: ProductSettings, mat: Material, key: str) -> None:
    """Refuse a neutralising value above the pure material's: no product of a material
    neutralises more than the material itself (calcite's CCE is 100 % by definition).
    Such a figure is mostly a CCE entered as a CaO-basis value (or a product of another
    material), and would cut the lime rate in silence."""
    if not mat.elements:  # custom: the certificate is all there is (range-checked)
        return
    pure_cce = mat.cce * 100.0
    if ps.nv_cao_percent is not None:
        field, stated, pure = "nv_cao_percent", ps.nv_cao_percent, pure_cce / CCE_PER_NV_CAO
        basis = "CaO basis"
    elif ps.cce_percent is not None:
        field, stated, pure = "cce_percent", ps.cce_percent, pure_cce
        basis = "CaCO3 basis"
    else:
        return
    if stated <= pure + CERTIFICATE_ROUNDING_PERCENT:
        return
    cce_stated = stated * CCE_PER_NV_CAO if field == "nv_cao_percent" else stated
    if field == "nv_cao_percent" and stated <= pure_cce + CERTIFICATE_ROUNDING_PERCENT:
        hint = f"{stated:g} reads as a CCE (CaCO3 basis): if so, give it as cce_percent"
    else:
        hint = "check the certificate's figure and its basis"
    other = next((m.key for m in MATERIALS.values()
                  if m.cce > mat.cce and m.cce * 100.0 + CERTIFICATE_ROUNDING_PERCENT
                  >= cce_stated), None)
    if other is not None:
        hint += f"; if the product is another material, say which (material = '{other}')"
    raise SettingsError(
        f"{stated:g} % ({basis}) is above the {pure:.1f} % of pure {mat.formula} "
        f"(material '{mat.key}', stoichiometry): no product neutralises more than its "
        + (f"pure material, and this figure would give at most {100.0 * pure / stated:.0f} % "
           "of the lime the soil needs" if pure > 0 else "pure material")
        + f"; {hint}",
        key=f"{key}.{field}",
    )


def _resolve_one(name: str, ps: ProductSettings) -> Product:
    key = f"products.{name}"
    material_key = ps.material if ps.material is not None else name
    if material_key not in MATERIALS:
        raise SettingsError(
            f"product '{name}' is not a built-in material; say which it is with "
            f"material = one of {', '.join(MATERIALS)}",
            key=f"{key}.material",
        )
    mat = MATERIALS[material_key]
    purity = ps.purity_percent / 100.0
    wet = 1.0 - ps.moisture_percent / 100.0 if ps.analysis_basis == "dry" else 1.0
    prov: list[str] = []
    values: dict[str, float] = {}
    for element, cert in (
        ("Ca", ps.ca_percent),
        ("Mg", ps.mg_percent),
        ("K", ps.k_percent),
        ("S", ps.s_percent),
    ):
        if cert is not None:
            values[element] = cert / 100.0
            prov.append(f"{element} {cert:g} % from the certificate ({ps.analysis_basis} basis)")
        else:
            pure = mat.fraction(element)
            values[element] = pure * purity
            if pure > 0:
                prov.append(
                    f"{element} {pure * 100:.2f} % in pure {mat.formula} (stoichiometry) "
                    f"x purity {ps.purity_percent:g} %"
                )
    if ps.nv_cao_percent is not None:
        cce = cce_from_nv_cao(ps.nv_cao_percent) / 100.0
        prov.append(
            f"CCE {cce * 100:.2f} % from the certificate's neutralising value "
            f"{ps.nv_cao_percent:g} % CaO x {CCE_PER_NV_CAO:.4f} (M(CaCO3) / M(CaO), [derived]; "
            f"{ps.analysis_basis} basis)"
        )
    elif ps.cce_percent is not None:
        cce = ps.cce_percent / 100.0
        prov.append(f"CCE {ps.cce_percent:g} % from the certificate ({ps.analysis_basis} basis)")
    else:
        cce = mat.cce * purity
        if mat.cce > 0:
            prov.append(
                f"CCE {mat.cce * 100:.2f} % for pure {mat.formula} (stoichiometry) "
                f"x purity {ps.purity_percent:g} %"
            )
    _check_cce_possible(ps, mat, key)
    prov = _follow_cce(ps, mat, cce, values, prov)
    if ps.env_percent is not None:
        env = ps.env_percent / 100.0
        if env > cce + 1e-12:
            raise SettingsError(
                f"ENV {ps.env_percent:g} % cannot exceed the CCE ({cce * 100:g} %): "
                "check the certificate",
                key=f"{key}.env_percent",
            )
        ff = env / cce if cce > 0 else 0.0
        prov.append(f"ENV {ps.env_percent:g} % from the certificate")
    elif ps.percent_passing:
        ff = fineness_factor(
            percent_passing=ps.percent_passing,
            sieves_mesh=ps.fineness_sieves_mesh,
            factors=ps.fineness_factors,
        )
        env = cce * ff
        prov.append(
            f"fineness factor {ff * 100:.1f} % from sieve results "
            f"{'/'.join(f'{v:g}' for v in ps.percent_passing)} % passing "
            f"{'/'.join(f'{s:g}' for s in ps.fineness_sieves_mesh)} mesh"
        )
    else:
        ff = 1.0
        env = cce
        if cce > 0:
            prov.append("fineness not given: taken as fully effective (factor 1)")
    if ps.analysis_basis == "dry" and ps.moisture_percent > 0:
        prov.append(f"x (1 - moisture {ps.moisture_percent:g} %) for the moist product as spread")
    return Product(
        name=name,
        label=ps.label or mat.label,
        material=mat.key,
        formula=mat.formula,
        ca_fraction=values["Ca"] * wet,
        mg_fraction=values["Mg"] * wet,
        k_fraction=values["K"] * wet,
        s_fraction=values["S"] * wet,
        cce=cce * wet,
        fineness_factor=ff,
        env=env * wet,
        purity=purity,
        moisture=ps.moisture_percent / 100.0,
        provenance=tuple(prov),
    )


def resolve_products(settings_by_name: Mapping[str, ProductSettings]) -> dict[str, Product]:
    """Turn product settings into products, applying certificate overrides.

    Parameters
    ----------
    settings_by_name
        Product key -> its settings. A key that is a built-in material name
        (``gypsum``, ``lime``, ``dolomite``, ``hydrated_lime``, ``quicklime``,
        ``potassium_sulfate``) needs no ``material``; any other key must name one
        (``custom`` for a product described by its certificate alone).

    Returns
    -------
    dict
        Product key -> :class:`Product`.

    Raises
    ------
    SettingsError
        Naming ``products.<key>.<field>``.

    Examples
    --------
    >>> p = resolve_products({"ag_lime": ProductSettings(material="lime", cce_percent=95,
    ...                                                  percent_passing=(100, 70, 50))})
    >>> round(p["ag_lime"].env * 100, 1)   # Cornell worked example: ENV 74.1
    74.1
    """
    out: dict[str, Product] = {}
    for name, ps in settings_by_name.items():
        if not isinstance(ps, ProductSettings):
            raise SettingsError(
                f"expected product settings, got {type(ps).__name__}", key=f"products.{name}"
            )
        out[name] = _resolve_one(name, ps)
        logger.debug("product %s: %s", name, "; ".join(out[name].provenance))
    return out


def default_products() -> dict[str, Product]:
    """Every built-in material as a product of 100 % purity, by its own key.

    Returns
    -------
    dict of str to Product
        Material key to product.

    Examples
    --------
    >>> sorted(default_products())
    ['dolomite', 'gypsum', 'hydrated_lime', 'lime', 'potassium_sulfate', 'quicklime']
    """
    return resolve_products({k: ProductSettings() for k in MATERIALS if k != "custom"})


def uncertified(name: str, ps: ProductSettings) -> list[str]:
    """The certificate keys of a product left at the pure-material defaults.

    Empty when the product carries any certificate figure or a purity or
    moisture below the pure, dry material's. Real products are commonly 70-90 %
    pure with 5-15 % moisture (common practice), so rates from the pure-material
    defaults can be 10-40 % short.

    Parameters
    ----------
    name
        The product's key.
    ps
        Its settings.

    Returns
    -------
    list of str
        Dotted keys to set (``products.<name>.purity_percent`` ...); empty when
        the certificate was given.

    Examples
    --------
    >>> uncertified("lime", ProductSettings())[:2]
    ['products.lime.purity_percent', 'products.lime.moisture_percent']
    >>> uncertified("lime", ProductSettings(cce_percent=92.0))
    []
    """
    given = (
        ps.purity_percent != 100.0, ps.moisture_percent != 0.0, ps.ca_percent is not None,
        ps.mg_percent is not None, ps.k_percent is not None, ps.s_percent is not None,
        ps.cce_percent is not None, ps.nv_cao_percent is not None, ps.env_percent is not None,
        bool(ps.percent_passing),
    )
    if any(given):
        return []
    material = MATERIALS.get(ps.material if ps.material is not None else name)
    keys = ["purity_percent", "moisture_percent"]
    if material is not None and material.cce > 0:
        keys += ["cce_percent (or nv_cao_percent)", "percent_passing (or env_percent)"]
    return [f"products.{name}.{k}" for k in keys]
