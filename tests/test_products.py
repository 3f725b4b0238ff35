"""Tests for geosoil.products: stoichiometric table, certificate overrides, fineness and ENV.

Reference values come from docs/SOURCES.md ("Amendment chemistry"); the source of
each is named beside the check.
"""

from __future__ import annotations

import math

import periodictable
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from geosoil.errors import SettingsError
from geosoil.products import (
    MATERIALS,
    Material,
    ProductSettings,
    default_products,
    fineness_factor,
    molar_mass,
    resolve_products,
)
from geosoil.settings import from_mapping

# --------------------------------------------------------------------------- stoichiometry

# [derived] docs/SOURCES.md "Amendment chemistry": mass fractions (%) and CCE (%) of pure materials.
TABLE = {
    # key: (Ca %, Mg %, CCE %)
    "gypsum": (23.28, 0.0, 0.0),
    "lime": (40.04, 0.0, 100.0),
    "dolomite": (21.73, 13.18, 108.55),
    "hydrated_lime": (54.09, 0.0, 135.08),
    "quicklime": (71.47, 0.0, 178.48),
}


@pytest.mark.parametrize("key", sorted(TABLE))
def test_stoichiometric_fractions_match_reference_table(key: str) -> None:
    # [derived] docs/SOURCES.md "Amendment chemistry" (stoichiometry, IUPAC atomic weights)
    ca, mg, cce = TABLE[key]
    p = default_products()[key]
    assert p.ca_fraction * 100 == pytest.approx(ca, abs=0.005)
    assert p.mg_fraction * 100 == pytest.approx(mg, abs=0.005)
    assert p.cce * 100 == pytest.approx(cce, abs=0.005)


def test_gypsum_sulfur_and_molar_mass() -> None:
    # [derived] docs/SOURCES.md: gypsum CaSO4·2H2O, M 172.17, S 18.62 %
    assert MATERIALS["gypsum"].molar_mass == pytest.approx(172.17, abs=0.01)
    assert default_products()["gypsum"].s_fraction * 100 == pytest.approx(18.62, abs=0.005)


def test_mgco3_cce_is_not_dolomites() -> None:
    # [derived] docs/SOURCES.md: MgCO3 CCE 118.71 % (108.5 % printed on some pages is dolomite's)
    mgco3 = Material("mgco3", "magnesite", "MgCO3", {"Mg": 1, "C": 1, "O": 3}, 2)
    assert mgco3.cce * 100 == pytest.approx(118.71, abs=0.005)


@pytest.mark.parametrize(
    "key, formula",
    [
        ("gypsum", "CaSO4(H2O)2"),
        ("lime", "CaCO3"),
        ("dolomite", "CaMg(CO3)2"),
        ("hydrated_lime", "Ca(OH)2"),
        ("quicklime", "CaO"),
        ("potassium_sulfate", "K2SO4"),
    ],
)
def test_molar_masses_agree_with_periodictable(key: str, formula: str) -> None:
    # Independent check with the periodictable package's atomic weights
    # (which differ from IUPAC abridged values in the last digits, hence the tolerance).
    expected = periodictable.formula(formula).mass
    assert MATERIALS[key].molar_mass == pytest.approx(expected, rel=2e-4)


def test_potassium_sulfate_k_from_stoichiometry() -> None:
    # [derived] K2SO4: 2 x 39.098 / (2 x 39.098 + 32.06 + 4 x 15.999)
    expected = 2 * 39.098 / (2 * 39.098 + 32.06 + 4 * 15.999)
    p = default_products()["potassium_sulfate"]
    assert p.k_fraction == pytest.approx(expected, rel=1e-12)
    assert p.k_fraction * 100 == pytest.approx(44.87, abs=0.01)
    assert not p.liming


def test_molar_mass_of_caco3_matches_units_constant() -> None:
    # [derived] docs/SOURCES.md: CaCO3 per 1 cmol(+)/kg = 500.4 mg/kg (M / 2 x 10)
    from geosoil.units import MG_CACO3_PER_CMOL

    assert molar_mass({"Ca": 1, "C": 1, "O": 3}) / 2 * 10 == pytest.approx(MG_CACO3_PER_CMOL)
    assert MG_CACO3_PER_CMOL == pytest.approx(500.4, abs=0.05)


def test_default_products_keys_and_liming_flags() -> None:
    products = default_products()
    assert set(products) == {
        "gypsum", "lime", "dolomite", "hydrated_lime", "quicklime", "potassium_sulfate"
    }
    assert {k for k, p in products.items() if p.liming} == {
        "lime", "dolomite", "hydrated_lime", "quicklime"
    }


# --------------------------------------------------------------------------- fineness


def test_cornell_fineness_worked_example() -> None:
    # Cornell Cooperative Extension scheme (docs/SOURCES.md): 100/70/50 % passing 20/60/100 mesh
    # -> FF 78; with CCE 95 % -> ENV 74.1
    assert fineness_factor(percent_passing=(100, 70, 50)) == pytest.approx(0.78)
    p = resolve_products(
        {"lime": ProductSettings(cce_percent=95, percent_passing=(100, 70, 50))}
    )["lime"]
    assert p.fineness_factor == pytest.approx(0.78)
    assert p.env * 100 == pytest.approx(74.1)
    assert p.cce * 100 == pytest.approx(95.0)


def test_fineness_factors_are_configurable() -> None:
    # Another jurisdiction's factors: all of a size class counts fully -> FF is the share
    # passing the coarsest sieve ([derived] from the definition).
    ff = fineness_factor(
        percent_passing=(90, 40), sieves_mesh=(10, 60), factors=(0.0, 1.0, 1.0)
    )
    assert ff == pytest.approx(0.90)


@given(
    a=st.floats(0, 100), b=st.floats(0, 100), c=st.floats(0, 100), extra=st.floats(0, 30)
)
@settings(max_examples=60, deadline=None)
def test_fineness_factor_bounded_and_grows_with_finer_product(
    a: float, b: float, c: float, extra: float
) -> None:
    p20, p60, p100 = sorted((a, b, c), reverse=True)
    ff = fineness_factor(percent_passing=(p20, p60, p100))
    assert 0.0 <= ff <= 1.0 + 1e-12
    # moving material from the 60-100 class into the <100 class never lowers FF
    shift = min(extra, p60 - p100)
    # min(): p100 + (p60 - p100) can round above p60, which the sieve check rightly refuses
    finer = fineness_factor(percent_passing=(p20, p60, min(p100 + shift, p60)))
    assert finer >= ff - 1e-12


@pytest.mark.parametrize(
    "kwargs, key",
    [
        ({"percent_passing": (70, 100, 50)}, "percent_passing"),
        ({"percent_passing": (100, 70)}, "percent_passing"),
        ({"percent_passing": (100, 70, 120)}, "percent_passing[2]"),
        ({"fineness_factors": (0.0, 0.4, 0.8)}, "fineness_factors"),
        ({"fineness_factors": (0.0, 0.4, 0.8, 1.5)}, "fineness_factors[3]"),
        ({"fineness_sieves_mesh": (60, 20, 100)}, "fineness_sieves_mesh"),
        ({"percent_passing": (100, 70, 50), "env_percent": 70}, "env_percent"),
    ],
)
def test_bad_fineness_settings_name_the_key(kwargs: dict, key: str) -> None:
    with pytest.raises(SettingsError) as err:
        ProductSettings(**kwargs)
    assert err.value.key == key


# --------------------------------------------------------------------------- certificate overrides


def test_purity_scales_the_stoichiometric_values() -> None:
    # [derived] 85 % pure gypsum carries 0.85 x 23.28 % Ca
    p = resolve_products({"gypsum": ProductSettings(purity_percent=85)})["gypsum"]
    pure = default_products()["gypsum"]
    assert p.ca_fraction == pytest.approx(0.85 * pure.ca_fraction)
    assert p.s_fraction == pytest.approx(0.85 * pure.s_fraction)


def test_certificate_values_replace_stoichiometry_without_purity_again() -> None:
    p = resolve_products(
        {"gypsum": ProductSettings(purity_percent=80, ca_percent=19.5)}
    )["gypsum"]
    assert p.ca_fraction == pytest.approx(0.195)
    assert any("certificate" in line for line in p.provenance)


def test_moisture_on_dry_basis_dilutes_the_product_as_spread() -> None:
    # [derived] 10 % water: 1 kg of moist product holds 0.9 kg of the dry product
    dry = resolve_products({"g": ProductSettings(material="gypsum", ca_percent=20)})["g"]
    wet = resolve_products(
        {"g": ProductSettings(material="gypsum", ca_percent=20, moisture_percent=10)}
    )["g"]
    asr = resolve_products(
        {"g": ProductSettings(material="gypsum", ca_percent=20, moisture_percent=10,
                              analysis_basis="as_received")}
    )["g"]
    assert wet.ca_fraction == pytest.approx(0.9 * dry.ca_fraction)
    assert asr.ca_fraction == pytest.approx(dry.ca_fraction)
    assert wet.moisture == pytest.approx(0.10)


def test_env_given_directly() -> None:
    p = resolve_products({"lime": ProductSettings(cce_percent=96, env_percent=80)})["lime"]
    assert p.env == pytest.approx(0.80)
    assert p.fineness_factor == pytest.approx(80 / 96)


def test_custom_product_from_certificate_only() -> None:
    p = resolve_products(
        {"blend": ProductSettings(material="custom", ca_percent=30, cce_percent=60,
                                  label="lime-gypsum blend")}
    )["blend"]
    assert p.ca_fraction == pytest.approx(0.30)
    assert p.env == pytest.approx(0.60)
    assert p.liming and p.label == "lime-gypsum blend"
    assert p.mg_fraction == 0.0


@given(purity=st.floats(1, 100), moisture=st.floats(0, 50))
@settings(max_examples=50, deadline=None)
def test_product_fractions_scale_with_purity_and_moisture(purity: float, moisture: float) -> None:
    p = resolve_products(
        {"dolomite": ProductSettings(purity_percent=purity, moisture_percent=moisture)}
    )["dolomite"]
    pure = default_products()["dolomite"]
    k = purity / 100 * (1 - moisture / 100)
    assert p.ca_fraction == pytest.approx(k * pure.ca_fraction)
    assert p.mg_fraction == pytest.approx(k * pure.mg_fraction)
    assert p.env == pytest.approx(k * pure.cce)
    assert p.env <= p.cce + 1e-15


# --------------------------------------------------------------------------- bad settings


def test_purity_over_100_names_the_key() -> None:
    with pytest.raises(SettingsError) as err:
        ProductSettings(purity_percent=120)
    assert err.value.key == "purity_percent"
    with pytest.raises(SettingsError) as err:
        from_mapping(ProductSettings, {"purity_percent": 120}, section="products.gypsum")
    assert err.value.key == "products.gypsum.purity_percent"


@pytest.mark.parametrize(
    "data, key",
    [
        ({"purity_percent": 0}, "products.lime.purity_percent"),
        ({"ca_percent": -1}, "products.lime.ca_percent"),
        ({"moisture_percent": 100}, "products.lime.moisture_percent"),
        ({"material": "chalk"}, "products.lime.material"),
        ({"analysis_basis": "wet"}, "products.lime.analysis_basis"),
    ],
)
def test_impossible_product_values_name_the_key(data: dict, key: str) -> None:
    with pytest.raises(SettingsError) as err:
        from_mapping(ProductSettings, data, section="products.lime")
    assert err.value.key == key


def test_env_above_cce_is_refused() -> None:
    with pytest.raises(SettingsError) as err:
        resolve_products({"lime": ProductSettings(cce_percent=90, env_percent=95)})
    assert err.value.key == "products.lime.env_percent"


def test_unknown_product_key_must_name_its_material() -> None:
    with pytest.raises(SettingsError) as err:
        resolve_products({"my_bag": ProductSettings()})
    assert err.value.key == "products.my_bag.material"
    assert "gypsum" in str(err.value)
    ok = resolve_products({"my_bag": ProductSettings(material="gypsum")})["my_bag"]
    assert ok.material == "gypsum" and ok.name == "my_bag"


def test_several_products_in_one_run() -> None:
    products = resolve_products(
        {
            "gypsum": ProductSettings(purity_percent=90),
            "lime": ProductSettings(cce_percent=95, percent_passing=(100, 70, 50)),
        }
    )
    assert set(products) == {"gypsum", "lime"}
    assert not products["gypsum"].liming and products["lime"].liming
    assert math.isclose(products["gypsum"].cce, 0.0)


# ------------------------------------------------- a neutralising value above the pure material's

# [derived] CCE of a pure material = (mol H+ neutralised per g) / (2 / M(CaCO3)), with the
# molar masses from the periodictable package (an outside oracle, not geosoil's table):
# calcite 100 % by definition, dolomite ~108.5 %, hydrated lime ~135.1 %, quicklime ~178.5 %;
# a neutralising value on a CaO basis is CCE x M(CaO) / M(CaCO3) (pure CaCO3: NV ~56.0).
PURE_FORMULA = {"lime": ("CaCO3", 2), "dolomite": ("CaMg(CO3)2", 4),
                "hydrated_lime": ("Ca(OH)2", 2), "quicklime": ("CaO", 2)}


def _pure_cce_percent(key: str) -> float:
    formula, equivalents = PURE_FORMULA[key]
    m_caco3 = periodictable.formula("CaCO3").mass
    return 100.0 * (equivalents / periodictable.formula(formula).mass) / (2 / m_caco3)


def _pure_nv_cao_percent(key: str) -> float:
    return _pure_cce_percent(key) * periodictable.formula("CaO").mass \
        / periodictable.formula("CaCO3").mass


def test_pure_values_from_periodictable_are_the_textbook_ones() -> None:
    # the oracle itself, against the rounded figures every liming text prints ([derived])
    assert _pure_cce_percent("lime") == pytest.approx(100.0)
    assert _pure_cce_percent("dolomite") == pytest.approx(109, abs=1)
    assert _pure_cce_percent("hydrated_lime") == pytest.approx(135, abs=0.5)
    assert _pure_cce_percent("quicklime") == pytest.approx(179, abs=1)
    assert _pure_nv_cao_percent("lime") == pytest.approx(56.0, abs=0.05)


@pytest.mark.parametrize("material", sorted(PURE_FORMULA))
def test_a_cce_above_the_pure_materials_is_refused_naming_key_value_and_pure_value(
    material: str,
) -> None:
    pure = _pure_cce_percent(material)
    # the pure value itself (as a certificate rounds it) is accepted
    ok = resolve_products({"p": ProductSettings(material=material, cce_percent=round(pure))})
    assert ok["p"].cce * 100 == pytest.approx(round(pure))
    stated = round(pure) + 2
    with pytest.raises(SettingsError) as err:
        resolve_products({"p": ProductSettings(material=material, cce_percent=stated)})
    assert err.value.key == "products.p.cce_percent"
    text = str(err.value)
    assert f"{stated:g} %" in text and f"{pure:.1f} %" in text


@pytest.mark.parametrize("material", sorted(PURE_FORMULA))
def test_a_cao_basis_value_above_the_pure_materials_is_refused(material: str) -> None:
    pure = _pure_nv_cao_percent(material)
    assert resolve_products(
        {"p": ProductSettings(material=material, nv_cao_percent=round(pure, 1))})
    with pytest.raises(SettingsError) as err:
        resolve_products({"p": ProductSettings(material=material, nv_cao_percent=pure + 2)})
    assert err.value.key == "products.p.nv_cao_percent"
    assert f"{pure:.1f} %" in str(err.value)


def test_a_calcite_cce_given_as_cao_basis_is_named_as_the_mix_up() -> None:
    # NV (CaO basis) of pure CaCO3 is 56 ([derived]); 95 is a CCE figure in the wrong key
    # and, taken as CaO basis (CCE 169.6 %), would give 59 % of the lime needed
    with pytest.raises(SettingsError) as err:
        resolve_products({"lime": ProductSettings(nv_cao_percent=95)})
    assert err.value.key == "products.lime.nv_cao_percent"
    text = str(err.value)
    assert "95 %" in text and "56.0 %" in text and "cce_percent" in text
    with pytest.raises(SettingsError) as err:
        resolve_products({"lime": ProductSettings(cce_percent=150)})
    assert err.value.key == "products.lime.cce_percent"
    assert "150 %" in str(err.value) and "100.0 %" in str(err.value)


def test_a_custom_product_keeps_its_certificates_value() -> None:
    # no pure material to compare with: the certificate is all there is (MgO-rich blends
    # reach a CCE near 250 %, [derived] M(CaCO3)/M(MgO) = 2.48)
    p = resolve_products({"blend": ProductSettings(material="custom", cce_percent=200)})
    assert p["blend"].cce == pytest.approx(2.0)
