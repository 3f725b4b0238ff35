"""Tests for geosoil.rates: the rules, the unit chain, explanations.

Published values come from docs/SOURCES.md; each check names its source beside it.
Rules of the trade are marked "common practice". Other checks are properties.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from geosoil.errors import InputError, RateWarning, SettingsError
from geosoil.products import ProductSettings, default_products, resolve_products
from geosoil.rates import (
    BalanceRule,
    CalciumRule,
    GypsumRule,
    LimeRule,
    RateLayer,
    RateSettings,
    check_inputs,
    compute_rates,
    explain_cell,
    format_steps,
    inputs_used,
    plan_rules,
)
from geosoil.settings import from_mapping
from geosoil.units import KG_HA_PER_LB_AC, MG_CACO3_PER_CMOL, kg_ha_to_lb_ac

PRODUCTS = default_products()
OFF = "off"
HYP = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def only(**rules: object) -> RateSettings:
    """Settings with every rule off except those given."""
    base = {
        "gypsum": GypsumRule(enabled=OFF),
        "lime": LimeRule(enabled=OFF),
        "calcium": CalciumRule(enabled=OFF),
        "balance": BalanceRule(enabled=OFF),
    }
    base.update(rules)
    return RateSettings(**base)  # type: ignore[arg-type]


def rate_of(cells: dict, s: RateSettings, product: str, *, depth: float = 0.2,
            bd: float = 1.2, products: dict | None = None) -> np.ndarray:
    arrays = {k: np.atleast_1d(np.asarray(v, dtype=float)) for k, v in cells.items()}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RateWarning)
        r = compute_rates(arrays, s, products or PRODUCTS, depth_m=depth, bulk_density_g_cm3=bd)
    return r.product_rates[product]


# --------------------------------------------------------------------------- gypsum


def test_oster_1999_metric_gypsum_example() -> None:
    # Oster et al. 1999 (as quoted by NDSU Extension), docs/SOURCES.md "Sodicity and gypsum":
    # CEC 20, ESP 25 -> 5, 0.15 m, BD 1.5, F 1, 100 % gypsum -> 7.74 t/ha
    # (GR = 8.6 x F x depth x BD x CEC x dESP / purity); first principles 7.747 t/ha.
    s = only(gypsum=GypsumRule(target_esp_percent=5, exchange_efficiency=1.0))
    t_ha = rate_of({"esp": 25, "ecec": 20}, s, "gypsum", depth=0.15, bd=1.5)[0] / 1000
    assert t_ha == pytest.approx(7.747, abs=0.0005)
    assert t_ha == pytest.approx(8.6 * 1 * 0.15 * 1.5 * 20 * 20 / 100, rel=2e-3)


def test_oster_1999_with_exchange_efficiency_1_2() -> None:
    # Oster et al. 1999: F 1.2 -> 9.30 t/ha for the same soil (docs/SOURCES.md / issue text)
    s = only(gypsum=GypsumRule(target_esp_percent=5, exchange_efficiency=1.2))
    t_ha = rate_of({"esp": 25, "ecec": 20}, s, "gypsum", depth=0.15, bd=1.5)[0] / 1000
    assert round(t_ha, 2) == 9.30


def test_one_meq_per_100g_over_an_acre_foot_is_1_72_short_tons_of_gypsum() -> None:
    # [derived] docs/SOURCES.md: 1 meq/100 g over an acre-foot (4e6 lb of soil) ~ 1.72 short tons
    # of gypsum (the "1.7 t" rule of thumb). Soil mass of 4e6 lb/ac, expressed as kg/ha, from a
    # 1 ft layer with the matching bulk density.
    depth = 0.3048
    bd = 4e6 * KG_HA_PER_LB_AC / (10_000 * depth * 1000)
    s = only(gypsum=GypsumRule(target_esp_percent=5, exchange_efficiency=1.0))
    kg_ha = rate_of({"esp": 15, "ecec": 10}, s, "gypsum", depth=depth, bd=bd)[0]  # 1.0 cmol(+)/kg
    short_tons = float(kg_ha_to_lb_ac(kg_ha)) / 2000
    assert short_tons == pytest.approx(1.72, abs=0.005)


def test_gypsum_over_two_layers_is_the_acre_foot_rule_summed_by_hand() -> None:
    # USDA Handbook 60 requirement per layer, with the per acre-foot arithmetic of extension
    # guides ([derived], docs/SOURCES.md "Sodicity and gypsum"): 1 meq/100 g of Na to replace
    # over an acre-foot (4 million lb of soil) takes about 1.72 short tons of pure gypsum.
    # Worked by hand for a profile sampled 0-6 in and 6-18 in, treated to 18 in:
    #   topsoil  CEC 20, ESP 25 -> 5: 20 x 20 / 100 = 4.00 meq/100 g over 0.5 ft
    #            4.00 x 1.72 x 0.5 = 3.44 short tons/ac
    #   subsoil  CEC 15, ESP 30 -> 5: 15 x 25 / 100 = 3.75 meq/100 g over 1.0 ft
    #            3.75 x 1.72 x 1.0 = 6.45 short tons/ac
    #   profile  3.44 + 6.45 = 9.89 short tons/ac
    # The bulk density that makes an acre-foot weigh 4 million lb ([derived], exact units).
    bd = 4e6 * KG_HA_PER_LB_AC / (10_000 * 0.3048 * 1000)
    assert bd == pytest.approx(1.471, abs=5e-4)
    s = only(gypsum=GypsumRule(target_esp_percent=5, exchange_efficiency=1.0))
    layers = [RateLayer("0-15.24 cm", np.array([25.0]), np.array([20.0]), 0.1524, bd),
              RateLayer("15.24-45.72 cm", np.array([30.0]), np.array([15.0]), 0.3048, bd)]
    r = compute_rates({"esp": np.array([25.0]), "ecec": np.array([20.0])}, s, PRODUCTS,
                      depth_m=0.1524, bulk_density_g_cm3=bd, layers=layers)
    tons = {k: float(kg_ha_to_lb_ac(v[0])) / 2000 for k, v in r.layer_rates.items()}
    assert tons["0-15.24 cm"] == pytest.approx(3.44, rel=2e-3)   # 1.72 is rounded: 0.1 %
    assert tons["15.24-45.72 cm"] == pytest.approx(6.45, rel=2e-3)
    total = float(kg_ha_to_lb_ac(r.product_rates["gypsum"][0])) / 2000
    assert total == pytest.approx(9.89, rel=2e-3)
    assert total == pytest.approx(sum(tons.values()), rel=1e-12)
    # one layer given as a list of one is exactly the single-layer rule (one depth as before)
    one = compute_rates({"esp": np.array([25.0]), "ecec": np.array([20.0])}, s, PRODUCTS,
                        depth_m=0.1524, bulk_density_g_cm3=bd)
    alone = compute_rates({"esp": np.array([25.0]), "ecec": np.array([20.0])}, s, PRODUCTS,
                          depth_m=0.1524, bulk_density_g_cm3=bd, layers=layers[:1])
    assert alone.product_rates["gypsum"][0] == pytest.approx(one.product_rates["gypsum"][0],
                                                             rel=1e-12)
    # explain shows the same sum, layer by layer
    steps = explain_cell({"esp": 25.0, "ecec": 20.0}, s, PRODUCTS, depth_m=0.1524,
                         bulk_density_g_cm3=bd, layers=[
                             RateLayer(x.label, float(x.esp[0]), float(x.ecec[0]), x.depth_m, bd)
                             for x in layers])
    summed = [st for st in steps if st.description.startswith("sum over the layers")]
    assert summed and summed[0].result == pytest.approx(r.product_rates["gypsum"][0])


def test_layered_gypsum_counts_the_top_layers_calcium_and_notes_the_deepest_sodicity() -> None:
    s = only(gypsum=GypsumRule(target_esp_percent=5, exchange_efficiency=1.0),
             calcium=CalciumRule(minimum_ca=6.0, minimum_ca_unit="cmol/kg"))
    layers = [RateLayer("0-10 cm", np.array([4.0]), np.array([10.0]), 0.10, 1.3),
              RateLayer("10-30 cm", np.array([20.0]), np.array([10.0]), 0.20, 1.5)]
    r = compute_rates({"esp": np.array([4.0]), "ecec": np.array([10.0]), "ca": np.array([5.0]),
                       "ph": np.array([8.0])}, s, PRODUCTS, depth_m=0.10,
                      bulk_density_g_cm3=1.3, layers=layers)
    assert r.layer_rates["0-10 cm"][0] == 0.0 and r.layer_rates["10-30 cm"][0] > 0
    # the subsoil's gypsum adds no Ca to the topsoil: its 1 cmol(+)/kg shortfall stays
    # ([derived] 1 cmol(+)/kg Ca x 200.39 mg x 1.3e6 kg/ha / 0.2328 Ca fraction)
    ca = r.contributions[("calcium", "gypsum")][0]
    assert ca == pytest.approx(1.0 * 200.39 * 1.3e6 * 1e-6 / (40.078 / 172.17), rel=1e-3)
    # sodic subsoil: the leaching note is given though the topsoil is not sodic
    assert any("leaches the displaced sodium" in n for n in r.notes)


def test_gypsum_purity_raises_the_rate() -> None:
    # [derived] 80 % pure gypsum: 1 / 0.8 as much product
    s = only(gypsum=GypsumRule(exchange_efficiency=1.0))
    pure = rate_of({"esp": 25, "ecec": 20}, s, "gypsum")[0]
    p80 = resolve_products({"gypsum": ProductSettings(purity_percent=80)})
    low = rate_of({"esp": 25, "ecec": 20}, s, "gypsum", products=p80)[0]
    assert low == pytest.approx(pure / 0.8)


def test_esp_from_sodium_and_ecec() -> None:
    # [derived] ESP = 100 x Na / ECEC: Na 5 of ECEC 20 is ESP 25
    s = only(gypsum=GypsumRule(exchange_efficiency=1.0))
    a = rate_of({"esp": 25, "ecec": 20}, s, "gypsum")[0]
    b = rate_of({"na": 5, "ecec": 20}, s, "gypsum")[0]
    assert b == pytest.approx(a)


def test_leaching_note_where_esp_is_high() -> None:
    s = only(gypsum=GypsumRule(leaching_note_esp_percent=15))
    r = compute_rates({"esp": np.array([25.0, 8.0, np.nan]), "ecec": np.full(3, 20.0)}, s,
                      PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    (note,) = [n for n in r.notes if "leach" in n]
    assert note.startswith("1 cell(s)") and "drain" in note


@given(esp=st.floats(0, 100), ecec=st.floats(0.1, 60), target=st.floats(0, 50))
@HYP
def test_gypsum_zero_at_or_below_target_and_never_negative(esp: float, ecec: float,
                                                          target: float) -> None:
    s = only(gypsum=GypsumRule(target_esp_percent=target))
    r = rate_of({"esp": esp, "ecec": ecec}, s, "gypsum")[0]
    assert r >= 0
    if esp <= target:
        assert r == 0


@given(esp=st.floats(0, 60), more=st.floats(0, 40), ecec=st.floats(0.1, 60))
@HYP
def test_gypsum_non_decreasing_in_esp(esp: float, more: float, ecec: float) -> None:
    s = only(gypsum=GypsumRule())
    lo = rate_of({"esp": esp, "ecec": ecec}, s, "gypsum")[0]
    hi = rate_of({"esp": esp + more, "ecec": ecec}, s, "gypsum")[0]
    assert hi >= lo


@given(esp=st.floats(5, 60), ecec=st.floats(0.1, 60), depth=st.floats(0.02, 0.9),
       bd=st.floats(0.5, 1.3), k=st.floats(1.0, 2.0))
@HYP
def test_rates_are_linear_in_depth_and_bulk_density(esp: float, ecec: float, depth: float,
                                                   bd: float, k: float) -> None:
    s = only(gypsum=GypsumRule(), lime=LimeRule())
    cells = {"esp": esp, "ecec": ecec, "al": ecec / 10}
    for product in ("gypsum", "lime"):
        base = rate_of(cells, s, product, depth=depth, bd=bd)[0]
        assert rate_of(cells, s, product, depth=depth * k, bd=bd)[0] == pytest.approx(k * base)
        assert rate_of(cells, s, product, depth=depth, bd=bd * k)[0] == pytest.approx(k * base)


# --------------------------------------------------------------------------- lime


def test_kamprath_worked_example() -> None:
    # Kamprath 1970 (factor 1.5 as widely quoted), example [derived] in docs/SOURCES.md:
    # Al 2.0 -> 3.0 cmol(+)/kg CaCO3 -> 1501 mg CaCO3/kg -> 3.60 t/ha at 0-20 cm, BD 1.2
    s = only(lime=LimeRule(method="kamprath"))
    steps = explain_cell({"al": 2.0}, s, PRODUCTS, depth_m=0.2, bulk_density_g_cm3=1.2)
    lime = [x for x in steps if x.rule == "lime"]
    assert lime[0].unit == "cmol(+)/kg CaCO3" and lime[0].result == pytest.approx(3.0)
    assert round(lime[1].result) == 1501
    assert rate_of({"al": 2.0}, s, "lime")[0] / 1000 == pytest.approx(3.60, abs=0.005)
    assert "Kamprath 1970" in lime[0].source


def test_cochrane_salinas_sanchez_worked_example() -> None:
    # Cochrane, Salinas & Sanchez 1980 (docs/SOURCES.md): Al 2.0, Ca 0.8, Mg 0.2, RAS 20 %
    # -> 1.5 x [2.0 - 0.2 x 3.0] = 2.10 cmol(+)/kg -> 2.52 t/ha for 0-20 cm, BD 1.2
    s = only(lime=LimeRule(method="cochrane", target_al_saturation_percent=20))
    steps = explain_cell({"al": 2.0, "ca": 0.8, "mg": 0.2}, s, PRODUCTS,
                         depth_m=0.2, bulk_density_g_cm3=1.2)
    need = [x for x in steps if x.rule == "lime" and x.unit == "cmol(+)/kg CaCO3"]
    assert need[0].result == pytest.approx(2.10)
    assert rate_of({"al": 2.0, "ca": 0.8, "mg": 0.2}, s, "lime")[0] / 1000 == pytest.approx(
        2.52, abs=0.005)


def test_general_conversion_t_caco3_per_ha() -> None:
    # [derived] docs/SOURCES.md: t CaCO3/ha = cmol(+)/kg x 0.05004 x depth(cm) x BD
    s = only(lime=LimeRule(method="acidity_share", acidity_factor=1.0,
                           target_acidity_share_percent=0))
    t_ha = rate_of({"acidity": 1.7, "ecec": 8.0}, s, "lime", depth=0.15, bd=1.35)[0] / 1000
    assert t_ha == pytest.approx(1.7 * 0.05004 * 15 * 1.35, rel=1e-4)


def test_acidity_share_brings_acidity_to_the_target_share() -> None:
    # [derived] acidity 3 of ECEC 10, target 10 %: remove 2 cmol(+)/kg
    s = only(lime=LimeRule(method="acidity_share", acidity_factor=1.0,
                           target_acidity_share_percent=10))
    steps = explain_cell({"acidity": 3.0, "ecec": 10.0}, s, PRODUCTS,
                         depth_m=0.1, bulk_density_g_cm3=1.0)
    assert steps[1].rule == "lime" and steps[1].result == pytest.approx(2.0)


def test_lime_product_by_env_with_cornell_fineness() -> None:
    # Cornell Cooperative Extension worked example: CCE 95, 100/70/50 % passing -> ENV 74.1 %;
    # the Kamprath example's 3.0 cmol(+)/kg CaCO3 at 0-20 cm, BD 1.2 divided by the ENV [derived]
    p = resolve_products({"lime": ProductSettings(cce_percent=95, percent_passing=(100, 70, 50))})
    s = only(lime=LimeRule(method="kamprath"))
    expected = 3.0 * MG_CACO3_PER_CMOL * 1e-6 * (10_000 * 0.2 * 1200) / 0.741
    assert rate_of({"al": 2.0}, s, "lime", products=p)[0] == pytest.approx(expected)


def test_hydrated_lime_needs_less_product_by_its_cce() -> None:
    # [derived] CCE of Ca(OH)2 135.08 %: 1 / 1.3508 as much product as calcite
    calcite = rate_of({"al": 2.0}, only(lime=LimeRule()), "lime")[0]
    hyd = rate_of({"al": 2.0}, only(lime=LimeRule(product="hydrated_lime")), "hydrated_lime")[0]
    assert hyd == pytest.approx(calcite / 1.3508, rel=1e-4)


@pytest.mark.parametrize("method", ["kamprath", "cochrane", "acidity_share"])
@given(al=st.floats(0, 8), more=st.floats(0, 4), ca=st.floats(0, 10), mg=st.floats(0, 5),
       h=st.floats(0, 2))
@HYP
def test_lime_never_negative_and_non_decreasing_in_al(method: str, al: float, more: float,
                                                     ca: float, mg: float, h: float) -> None:
    s = only(lime=LimeRule(method=method))

    def cells(a: float) -> dict:
        return {"al": a, "ca": ca, "mg": mg, "acidity": a + h, "ecec": 10.0}

    lo = rate_of(cells(al), s, "lime")[0]
    hi = rate_of(cells(al + more), s, "lime")[0]
    assert 0 <= lo <= hi


@given(ca=st.floats(0, 10), mg=st.floats(0, 5), ras=st.floats(0, 95))
@HYP
def test_cochrane_zero_at_or_below_the_target_saturation(ca: float, mg: float, ras: float) -> None:
    # Al at or below RAS x (Al + Ca + Mg) / 100 needs no lime
    assume(ras < 100)
    al = ras / (100 - ras) * (ca + mg) * 0.999
    s = only(lime=LimeRule(method="cochrane", target_al_saturation_percent=ras))
    assert rate_of({"al": al, "ca": ca, "mg": mg}, s, "lime")[0] == 0


@given(ecec=st.floats(0.5, 40), share=st.floats(0, 100), frac=st.floats(0, 1))
@HYP
def test_acidity_share_zero_at_or_below_the_target_share(ecec: float, share: float,
                                                         frac: float) -> None:
    acidity = frac * share / 100 * ecec
    s = only(lime=LimeRule(method="acidity_share", target_acidity_share_percent=share))
    assert rate_of({"acidity": acidity, "ecec": ecec}, s, "lime")[0] == 0


def test_kamprath_zero_without_al() -> None:
    assert rate_of({"al": 0.0}, only(lime=LimeRule()), "lime")[0] == 0


# --------------------------------------------------------------------------- pH guard


def test_ph_guard_withholds_lime_above_7() -> None:
    # common practice (docs/SOURCES.md): no lime on alkaline soil (pH above about 7)
    s = only(lime=LimeRule())
    cells = {"al": np.array([1.0, 1.0, 1.0]), "ph": np.array([6.5, 7.0, 7.4])}
    with pytest.warns(RateWarning, match="1 cell"):
        r = compute_rates(cells, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    lime = r.product_rates["lime"]
    assert lime[0] > 0 and lime[1] > 0 and lime[2] == 0
    assert r.ph_guard_cells == 1
    assert any("pH guard" in n and "common practice" in n for n in r.notes)


def test_a_ph_guard_that_cannot_run_is_the_same_warning_in_check_and_run() -> None:
    # pH in KCl only (Al-based lime still runs): the guard has no threshold to compare with,
    # and that is said in check and in the run, in the same words (one warning list)
    s = only(lime=LimeRule())
    said = check_inputs(s, {"al", "ph_kcl"})
    guard = [n for n in said if n.startswith("pH guard not applied")]
    assert len(guard) == 1 and "pH in KCl" in guard[0]
    with pytest.warns(RateWarning) as record:
        r = compute_rates({"al": np.array([1.0, 1.0])}, s, PRODUCTS, depth_m=0.1,
                          bulk_density_g_cm3=1.3)
    assert [str(w.message) for w in record if str(w.message) == guard[0]] == guard
    assert (r.product_rates["lime"] > 0).all()  # the rate itself is still given
    assert not [n for n in check_inputs(s, {"al", "ph"}) if n.startswith("pH guard")]


def test_ph_guard_can_be_switched_off() -> None:
    s = RateSettings(gypsum=GypsumRule(enabled=OFF), calcium=CalciumRule(enabled=OFF),
                     ph_guard=False)
    assert rate_of({"al": 1.0, "ph": 7.5}, s, "lime")[0] > 0


def test_calcium_goes_on_as_gypsum_on_alkaline_cells() -> None:
    # common practice: where pH is high the calcium goes on as gypsum, not lime
    s = only(calcium=CalciumRule(minimum_ca=5.0, lime_below_ph=6.0))
    cells = {"ca": np.array([2.0, 2.0]), "ph": np.array([5.0, 7.8])}
    r = compute_rates(cells, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    assert r.product_rates["lime"][1] == 0 and r.product_rates["gypsum"][1] > 0
    assert r.product_rates["lime"][0] > 0 and r.product_rates["gypsum"][0] == 0
    # [derived] the same 3 cmol(+)/kg of Ca either way: product in the ratio of Ca fractions
    ratio = r.product_rates["gypsum"][1] / r.product_rates["lime"][0]
    assert ratio == pytest.approx(PRODUCTS["lime"].ca_fraction / PRODUCTS["gypsum"].ca_fraction)


cell_values = st.fixed_dictionaries({
    "esp": st.floats(0, 40), "ecec": st.floats(0.5, 40), "al": st.floats(0, 5),
    "ca": st.floats(0, 20), "mg": st.floats(0, 10), "k": st.floats(0, 2),
    "ph": st.floats(4.0, 9.0),
})


@given(cells=st.lists(cell_values, min_size=1, max_size=6))
@HYP
def test_cells_above_the_ph_limit_never_receive_a_liming_product(cells: list[dict]) -> None:
    s = RateSettings(lime=LimeRule(method="cochrane"), balance=BalanceRule(enabled="on"),
                     calcium=CalciumRule(minimum_ca=6.0))
    arrays = {k: np.array([c[k] for c in cells]) for k in cells[0]}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RateWarning)
        r = compute_rates(arrays, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    high = arrays["ph"] > s.no_lime_above_ph
    for name, rate in r.product_rates.items():
        assert np.all(rate >= 0)
        if PRODUCTS[name].liming:
            assert np.all(rate[high] == 0), name


# --------------------------------------------------------------------------- calcium


def test_about_200_mg_ca_per_cmol_in_the_chain() -> None:
    # common practice: "about 200 mg Ca per cmol(+)/kg"; [derived] 200.39 from 10 x 40.078 / 2
    s = only(calcium=CalciumRule(minimum_ca=3.0))
    steps = explain_cell({"ca": 2.0, "ph": 6.5}, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    (mg_step,) = [x for x in steps if x.unit == "mg/kg"]
    assert mg_step.inputs["mg per cmol(+)"][0] == pytest.approx(200, rel=0.005)
    assert mg_step.inputs["mg per cmol(+)"][0] == pytest.approx(200.39, abs=0.005)
    assert mg_step.result == pytest.approx(200.39, abs=0.005)


def test_calcium_minimum_in_mg_per_kg_equals_cmol() -> None:
    # [derived] 400.78 mg/kg of Ca = 2 cmol(+)/kg
    a = only(calcium=CalciumRule(minimum_ca=2.0, minimum_ca_unit="cmol/kg"))
    b = only(calcium=CalciumRule(minimum_ca=400.78, minimum_ca_unit="mg/kg"))
    cells = {"ca": 0.5, "ph": 6.8}
    assert rate_of(cells, b, "gypsum")[0] == pytest.approx(rate_of(cells, a, "gypsum")[0], rel=1e-4)


def test_calcium_from_gypsum_rule_counts_toward_the_minimum() -> None:
    # Double counting rule (documented in geosoil.rates): the gypsum rule's displaced Na,
    # (ESP - target) / 100 x ECEC = (25 - 5) / 100 x 10 = 2 cmol(+)/kg, counts as added Ca.
    cells = {"esp": 25.0, "ecec": 10.0, "ca": 1.0, "ph": 7.5}
    s_both = RateSettings(lime=LimeRule(enabled=OFF), calcium=CalciumRule(minimum_ca=2.5))
    r = compute_rates({k: np.array([v]) for k, v in cells.items()}, s_both, PRODUCTS,
                      depth_m=0.1, bulk_density_g_cm3=1.3)
    assert r.contributions[("calcium", "gypsum")][0] == 0  # 1 + 2 >= 2.5
    s_more = RateSettings(lime=LimeRule(enabled=OFF), calcium=CalciumRule(minimum_ca=4.0))
    steps = explain_cell(cells, s_more, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    (deficit,) = [x for x in steps if x.rule == "calcium" and x.unit == "cmol(+)/kg"]
    assert deficit.result == pytest.approx(1.0)  # 4 - 1 - 2


def test_calcium_from_lime_rule_counts_toward_the_minimum() -> None:
    # Kamprath 1.5 x Al 1.0 = 1.5 cmol(+)/kg CaCO3, of which Al 1.0 is the exchange equivalent
    cells = {"al": 1.0, "ca": 0.5, "ph": 5.0}
    s = only(lime=LimeRule(), calcium=CalciumRule(minimum_ca=2.0))
    steps = explain_cell(cells, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    (deficit,) = [x for x in steps if x.rule == "calcium" and x.unit == "cmol(+)/kg"]
    assert deficit.inputs["Ca from earlier rules"][0] == pytest.approx(1.0)
    assert deficit.result == pytest.approx(0.5)


@given(ca=st.floats(0, 10), less=st.floats(0, 10), minimum=st.floats(0, 12),
       ph=st.floats(4, 8.5))
@HYP
def test_calcium_zero_at_minimum_and_non_decreasing_in_deficit(ca: float, less: float,
                                                              minimum: float, ph: float) -> None:
    s = only(calcium=CalciumRule(minimum_ca=minimum))

    def total(c: float) -> float:
        return sum(float(rate_of({"ca": c, "ph": ph}, s, p)[0]) for p in ("lime", "gypsum"))

    t_hi_ca = total(ca)
    t_lo_ca = total(max(ca - less, 0.0))
    assert 0 <= t_hi_ca <= t_lo_ca + 1e-9
    if ca >= minimum:
        assert t_hi_ca == 0


# ------------------------------------------------------------- cation balance (contested)


def test_balance_rule_is_off_by_default() -> None:
    assert RateSettings().balance.enabled == "off"
    cells = {"ca": np.array([1.0]), "mg": np.array([3.0]), "ecec": np.array([10.0]),
             "ph": np.array([6.5])}
    r = compute_rates(cells, RateSettings(), PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    assert not any(rule == "balance" for rule, _ in r.contributions)
    assert "balance" not in r.methods


def test_balance_rule_is_labelled_contested() -> None:
    # Kopittke & Menzies 2007, SSSA J 71:259 (docs/SOURCES.md)
    s = only(balance=BalanceRule(enabled="on"))
    cells = {"ca": np.array([4.0]), "mg": np.array([3.0]), "k": np.array([0.1]),
             "ecec": np.array([10.0]), "ph": np.array([6.5])}
    r = compute_rates(cells, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    assert "CONTESTED" in r.methods["balance"] and "Kopittke & Menzies 2007" in r.methods["balance"]
    assert any("CONTESTED" in n for n in r.notes)
    steps = explain_cell({k: float(v[0]) for k, v in cells.items()}, s, PRODUCTS,
                         depth_m=0.1, bulk_density_g_cm3=1.3)
    assert all("CONTESTED" in x.source for x in steps if x.rule == "balance" and
               "short" in x.description)


def test_balance_calcium_where_mg_in_excess_dolomite_where_both_short_and_k() -> None:
    # Targets Ca 65 %, Mg 10 %, K 5 % (Bear and co-workers, as cited by Kopittke & Menzies 2007)
    s = only(balance=BalanceRule(enabled="on"))
    cells = {
        # cell 0: Ca 7 of target 6.5 (adequate), Mg 3 of target 1 (excess 2) -> gypsum
        # cell 1: Ca 3, Mg 0.5 of ECEC 10: both short -> dolomite for Mg, rest of Ca as gypsum
        # cell 2: K 0.2 of ECEC 10, target 0.5 -> potassium sulfate
        "ca": np.array([7.0, 3.0, 6.5]),
        "mg": np.array([3.0, 0.5, 1.0]),
        "k": np.array([0.5, 0.5, 0.2]),
        "ecec": np.array([10.0, 10.0, 10.0]),
        "ph": np.array([6.5, 6.5, 6.5]),
    }
    r = compute_rates(cells, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.0)
    c = r.contributions
    mass = 10_000 * 0.1 * 1000  # kg soil/ha [derived]
    # cell 0: Ca to add = Mg excess 2 cmol(+)/kg as gypsum [derived]
    assert c[("balance", "gypsum")][0] == pytest.approx(2 * 200.39e-6 * mass / 0.23279, rel=1e-3)
    assert c[("balance", "dolomite")][0] == 0
    # cell 1: Mg short 0.5 -> dolomite; it brings 0.5 Ca; Ca short 3.5 - 0.5 = 3.0 as gypsum
    assert c[("balance", "dolomite")][1] == pytest.approx(0.5 * 121.53e-6 * mass / 0.1318, rel=1e-3)
    assert c[("balance", "gypsum")][1] == pytest.approx(3.0 * 200.39e-6 * mass / 0.23279, rel=1e-3)
    # cell 2: K short 0.3 cmol(+)/kg as K2SO4 (K 44.87 %)
    assert c[("balance", "potassium_sulfate")][2] == pytest.approx(
        0.3 * 390.98e-6 * mass / 0.4487, rel=1e-3)
    assert c[("balance", "potassium_sulfate")][0] == 0


def test_balance_k_minimum_alone() -> None:
    s = only(balance=BalanceRule(enabled="on", target_k_sat_percent=0, minimum_k=195.49,
                                 minimum_k_unit="mg/kg"))
    steps = explain_cell({"ca": 7.0, "mg": 1.0, "k": 0.2, "ecec": 10.0, "ph": 6.5}, s, PRODUCTS,
                         depth_m=0.1, bulk_density_g_cm3=1.0)
    (k,) = [x for x in steps if x.description.startswith("K short")]
    assert k.result == pytest.approx(0.3, abs=1e-4)  # [derived] 195.49 mg/kg K = 0.5 cmol(+)/kg


def test_balance_dolomite_withheld_above_ph_limit() -> None:
    s = only(balance=BalanceRule(enabled="on"))
    cells = {"ca": np.array([3.0]), "mg": np.array([0.5]), "ecec": np.array([10.0]),
             "k": np.array([0.5]), "ph": np.array([7.6])}
    with pytest.warns(RateWarning):
        r = compute_rates(cells, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.0)
    assert r.product_rates["dolomite"][0] == 0
    assert r.contributions[("balance", "gypsum")][0] > 0
    assert any("Mg shortfall is not met" in n for n in r.notes)


# --------------------------------------------------------------------------- NaN, explain, results


def test_nan_in_nan_out() -> None:
    s = RateSettings(balance=BalanceRule(enabled="on"))
    cells = {k: np.array([[np.nan, v]]) for k, v in
             {"esp": 20.0, "ecec": 10.0, "al": 1.0, "ca": 1.0, "mg": 0.5, "k": 0.1,
              "ph": 5.5}.items()}
    r = compute_rates(cells, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    for arr in [*r.product_rates.values(), *r.contributions.values()]:
        assert arr.shape == (1, 2)
        assert np.isnan(arr[0, 0]) and np.isfinite(arr[0, 1])


def test_per_cell_bulk_density_array() -> None:
    s = only(gypsum=GypsumRule())
    cells = {"esp": np.array([20.0, 20.0]), "ecec": np.array([10.0, 10.0])}
    r = compute_rates(cells, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=np.array([1.0, 1.5]))
    g = r.product_rates["gypsum"]
    assert g[1] == pytest.approx(1.5 * g[0])


@given(cell=cell_values, lime_method=st.sampled_from(["kamprath", "cochrane", "acidity_share"]),
       depth=st.floats(0.05, 0.5), bd=st.floats(0.8, 1.7))
@HYP
def test_explain_cell_totals_equal_compute_rates(cell: dict, lime_method: str, depth: float,
                                                 bd: float) -> None:
    cell = dict(cell, acidity=cell["al"] + 0.1)
    s = RateSettings(lime=LimeRule(method=lime_method), balance=BalanceRule(enabled="on"),
                     calcium=CalciumRule(minimum_ca=5.0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RateWarning)
        r = compute_rates({k: np.array([v]) for k, v in cell.items()}, s, PRODUCTS,
                          depth_m=depth, bulk_density_g_cm3=bd)
    steps = explain_cell(cell, s, PRODUCTS, depth_m=depth, bulk_density_g_cm3=bd)
    totals = {x.description.split(":")[0]: x.result for x in steps if x.rule == "total"}
    assert set(totals) == set(r.product_rates)
    for name, value in totals.items():
        assert value == pytest.approx(float(r.product_rates[name][0]), rel=1e-12, abs=1e-12)


def test_steps_are_frozen_and_printable() -> None:
    steps = explain_cell({"esp": 25, "ecec": 20, "depth_m": 0.15, "bulk_density_g_cm3": 1.5},
                         only(gypsum=GypsumRule(exchange_efficiency=1.0)), PRODUCTS)
    with pytest.raises(AttributeError):
        steps[0].result = 0.0  # type: ignore[misc]
    text = format_steps(steps)
    assert "USDA Handbook 60" in text and "advisory" in text
    assert all(isinstance(x.inputs, dict) for x in steps)
    assert all(all(isinstance(u, str) for _, u in x.inputs.values()) for x in steps)


def test_explain_cell_needs_depth_and_bulk_density() -> None:
    with pytest.raises(SettingsError) as err:
        explain_cell({"esp": 25, "ecec": 20}, RateSettings(), PRODUCTS)
    assert err.value.key == "depth_m"


# --------------------------------------------------------------------------- settings and inputs


def test_auto_rule_without_inputs_is_skipped_with_a_note() -> None:
    r = compute_rates({"esp": np.array([20.0]), "ecec": np.array([10.0])}, RateSettings(),
                      PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    skipped = dict(r.skipped)
    assert "exchangeable Al (al)" in skipped["lime"] and "Kamprath 1970" in skipped["lime"]
    assert "calcium" in skipped
    assert any(n.startswith("lime rule skipped") for n in r.notes)
    assert set(r.product_rates) == {"gypsum"}


def test_kamprath_switched_on_without_al_names_the_method_key() -> None:
    s = RateSettings(lime=LimeRule(enabled="on", method="kamprath"))
    with pytest.raises(SettingsError) as err:
        compute_rates({"acidity": np.array([1.0]), "ecec": np.array([5.0])}, s, PRODUCTS,
                      depth_m=0.1, bulk_density_g_cm3=1.3)
    assert err.value.key == "rates.lime.method"
    assert "acidity_share" in str(err.value) or "choose a method" in str(err.value)


def test_gypsum_switched_on_without_esp_names_the_enabled_key() -> None:
    with pytest.raises(SettingsError) as err:
        check_inputs(RateSettings(gypsum=GypsumRule(enabled="on")), {"al", "ph"})
    assert err.value.key == "rates.gypsum.enabled"


def test_check_inputs_returns_skip_notes_and_checks_products() -> None:
    notes = check_inputs(RateSettings(), {"esp", "ecec", "ph", "ca"})
    assert len(notes) == 1 and notes[0].startswith("lime rule skipped")
    with pytest.raises(SettingsError) as err:
        check_inputs(RateSettings(lime=LimeRule(product="gypsum")), {"al"}, PRODUCTS)
    assert err.value.key == "rates.lime.product"


def test_a_misspelt_product_names_the_key_and_the_nearest_product() -> None:
    with pytest.raises(SettingsError) as err:
        check_inputs(RateSettings(lime=LimeRule(product="lmie")), {"al"}, PRODUCTS)
    assert err.value.key == "rates.lime.product"
    assert "did you mean 'lime'?" in str(err.value) and "[products.lmie]" in str(err.value)


def test_inputs_used_and_plan() -> None:
    used = inputs_used(RateSettings(lime=LimeRule(method="acidity_share")),
                       {"na", "ecec", "acidity", "ph", "ca"})
    assert used == ["acidity", "ca", "ecec", "na", "ph"]
    runs, skipped = plan_rules(RateSettings(balance=BalanceRule(enabled="auto")),
                               {"ca", "mg", "ecec"})
    assert "balance" in runs and ("lime" in dict(skipped))


def test_gypsum_as_liming_product_names_the_key() -> None:
    s = only(lime=LimeRule(product="gypsum"))
    with pytest.raises(SettingsError) as err:
        compute_rates({"al": np.array([1.0])}, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    assert err.value.key == "rates.lime.product"
    assert "liming" in str(err.value)


@pytest.mark.parametrize(
    "rules, key",
    [
        ({"gypsum": GypsumRule(product="potassium_sulfate")}, "rates.gypsum.product"),
        ({"gypsum": GypsumRule(product="nothing")}, "rates.gypsum.product"),
        ({"calcium": CalciumRule(gypsum_product="lime")}, "rates.calcium.gypsum_product"),
        ({"balance": BalanceRule(enabled="on", dolomite_product="lime")},
         "rates.balance.dolomite_product"),
        ({"balance": BalanceRule(enabled="on", calcium_product="lime")},
         "rates.balance.calcium_product"),
    ],
)
def test_products_without_what_the_rule_needs(rules: dict, key: str) -> None:
    cells = {k: np.array([1.0]) for k in ("esp", "ecec", "ca", "mg", "k", "ph")}
    with pytest.raises(SettingsError) as err:
        compute_rates(cells, only(**rules), PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    assert err.value.key == key


@pytest.mark.parametrize(
    "data, key",
    [
        ({"gypsum": {"target_esp_percent": 120}}, "rates.gypsum.target_esp_percent"),
        ({"gypsum": {"target_esp_percent": -1}}, "rates.gypsum.target_esp_percent"),
        ({"gypsum": {"exchange_efficiency": 0.5}}, "rates.gypsum.exchange_efficiency"),
        ({"lime": {"method": "smpx"}}, "rates.lime.method"),
        ({"lime": {"kamprath_factor": 0}}, "rates.lime.kamprath_factor"),
        ({"lime": {"enabled": "yes"}}, "rates.lime.enabled"),
        ({"calcium": {"minimum_ca": -2}}, "rates.calcium.minimum_ca"),
        ({"calcium": {"lime_below_ph": 7.5}}, "rates.calcium.lime_below_ph"),
        ({"balance": {"target_ca_sat_percent": 90, "target_mg_sat_percent": 15}},
         "rates.balance.target_ca_sat_percent"),
    ],
)
def test_bad_rate_settings_name_the_key(data: dict, key: str) -> None:
    with pytest.raises(SettingsError) as err:
        from_mapping(RateSettings, data, section="rates")
    assert err.value.key == key


def test_settings_built_in_code_are_checked_too() -> None:
    with pytest.raises(SettingsError) as err:
        GypsumRule(target_esp_percent=150)
    assert err.value.key == "target_esp_percent"
    with pytest.raises(SettingsError):
        LimeRule(enabled="maybe")


@pytest.mark.parametrize(
    "depth, bd, key",
    [(0.1, 0.0, "bulk_density_g_cm3"), (0.1, 3.5, "bulk_density_g_cm3"), (-0.1, 1.3, "depth_m"),
     (0.1, np.array([1.2, 0.0]), "bulk_density_g_cm3")],
)
def test_bad_depth_or_bulk_density(depth: object, bd: object, key: str) -> None:
    with pytest.raises(SettingsError) as err:
        compute_rates({"esp": np.array([20.0, 10.0]), "ecec": np.array([10.0, 10.0])},
                      only(gypsum=GypsumRule()), PRODUCTS, depth_m=depth,  # type: ignore[arg-type]
                      bulk_density_g_cm3=bd)  # type: ignore[arg-type]
    assert err.value.key == key


def test_surfaces_of_different_shapes() -> None:
    with pytest.raises(InputError, match="ecec"):
        compute_rates({"esp": np.zeros(3), "ecec": np.zeros(4)}, RateSettings(), PRODUCTS,
                      depth_m=0.1, bulk_density_g_cm3=1.3)


def test_named_methods_in_settings_and_outputs() -> None:
    s = RateSettings(lime=LimeRule(method="cochrane"))
    assert s.gypsum.method == "handbook60" and s.calcium.method == "sufficiency"
    cells = {k: np.array([v]) for k, v in
             {"esp": 20.0, "ecec": 10.0, "al": 1.0, "ca": 1.0, "mg": 0.5, "ph": 5.0}.items()}
    r = compute_rates(cells, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    assert "Handbook 60" in r.methods["gypsum"]
    assert "Cochrane, Salinas & Sanchez 1980" in r.methods["lime"]
    assert "common practice" in r.methods["calcium"]


def test_no_rate_is_ever_negative_or_inf() -> None:
    # Negative interpolated amounts are read as 0; ECEC 0 gives no ESP.
    s = RateSettings(balance=BalanceRule(enabled="on"), lime=LimeRule(method="cochrane"))
    cells = {k: np.array([-1.0, 0.0]) for k in ("na", "ecec", "al", "ca", "mg", "k")}
    cells["ph"] = np.array([5.0, 5.0])
    r = compute_rates(cells, s, PRODUCTS, depth_m=0.1, bulk_density_g_cm3=1.3)
    for arr in r.product_rates.values():
        assert np.all(np.isfinite(arr)) and np.all(arr >= 0)
    assert not math.isnan(float(r.product_rates["gypsum"][0]))


def test_kamprath_ignores_al_at_or_below_the_detection_threshold() -> None:
    # a lab's '<0.1' taken as half the limit (0.05) is no evidence of Al: no Kamprath lime
    # (common practice); just above the threshold the Kamprath factor applies as usual
    s = only(lime=LimeRule(method="kamprath"))
    assert rate_of({"al": 0.05}, s, "lime")[0] == 0
    assert rate_of({"al": 0.1}, s, "lime")[0] == 0
    above = rate_of({"al": 0.2}, s, "lime")[0]
    # 1.5 x 0.2 cmol(+)/kg CaCO3 = 0.3 x 500.43 mg/kg (Kamprath 1970; [derived] conversion)
    assert above > 0
    with_zero_threshold = only(lime=LimeRule(method="kamprath", kamprath_min_al=0.0))
    assert rate_of({"al": 0.05}, with_zero_threshold, "lime")[0] == pytest.approx(above / 4)


# --------------------------------------------------------------------------- lime to a target pH

TON_AC = 2000 * KG_HA_PER_LB_AC  # kg/ha in a short ton per acre (exact)


def _lime(**kw: object) -> RateSettings:
    return RateSettings(lime=LimeRule(**kw))  # type: ignore[arg-type]


def test_mehlich_through_the_rates_at_its_calibrated_depth() -> None:
    # NC Dept. of Agriculture's printed example [confirmed]: buffer pH 6.3, pH 5.0, target 6.0
    # -> 0.75 short tons CaCO3/ac; by volume over 0.20 m [from memory], so any bulk density.
    for bd in (1.1, 1.5):
        r = compute_rates({"ph": np.array([5.0]), "bph_mehlich": np.array([6.3])},
                          _lime(method="mehlich", target_ph=6.0), PRODUCTS, depth_m=0.20,
                          bulk_density_g_cm3=bd)
        assert r.product_rates["lime"][0] == pytest.approx(0.75 * TON_AC, rel=1e-9)


def test_smp_through_the_rates_keeps_lime_per_kg_of_soil() -> None:
    # SMP table (Western Region manual 2003; row [from memory]): buffer pH 6.5 to pH 6.5 -> 3.8
    # short tons/ac for 2.4 M lb/ac; a layer of half that mass gets half [derived].
    slice_kg_ha = 2.4e6 * KG_HA_PER_LB_AC
    depth, bd = 0.10, slice_kg_ha / 2 / (10_000 * 0.10 * 1000)
    r = compute_rates({"ph": np.array([5.5]), "bph_smp": np.array([6.5])},
                      _lime(method="smp", target_ph=6.5), PRODUCTS, depth_m=depth,
                      bulk_density_g_cm3=bd)
    assert r.product_rates["lime"][0] == pytest.approx(3.8 * TON_AC / 2, rel=1e-9)


def test_raij_base_saturation_through_the_rates() -> None:
    # Raij et al. 1996 example [confirmed]: T 5.46 cmolc/dm3, V1 8.42 %, V2 60 %, PRNT 80
    # -> 3.52 t/ha for 0-20 cm. T read as cmol(+)/kg with a scoop density of 1.25 g/cm3.
    products = resolve_products({"lime": ProductSettings(cce_percent=80.0)})
    rho = 1.25
    t_kg = 5.46 / rho
    bases = 0.0842 * t_kg
    cells = {"cec_ph7": np.array([t_kg]), "ca": np.array([bases * 0.7]),
             "mg": np.array([bases * 0.2]), "k": np.array([bases * 0.1])}
    r = compute_rates(cells, _lime(method="base_saturation", target_base_saturation_percent=60.0),
                      products, depth_m=0.20, bulk_density_g_cm3=1.3, scoop_density_g_cm3=rho)
    assert r.product_rates["lime"][0] / 1000 == pytest.approx(5.46 * (60 - 8.42) / 80, rel=1e-3)
    assert r.product_rates["lime"][0] / 1000 == pytest.approx(3.52, abs=0.005)


def test_phbc_from_organic_carbon_and_clay_through_the_rates() -> None:
    # Aitken, Moody & McKinley 1990 [from memory for the paper]; lime arithmetic [derived]:
    # OC 1.5 %, clay 20 %, pH 5.0 -> 5.5 (CaCl2), 0.10 m, BD 1.3 -> 538 kg CaCO3/ha.
    r = compute_rates({"ph": np.array([5.0]), "oc": np.array([1.5]), "clay": np.array([20.0])},
                      _lime(method="phbc", target_ph=5.5, target_ph_method="CaCl2"), PRODUCTS,
                      depth_m=0.10, bulk_density_g_cm3=1.3, ph_method="CaCl2")
    assert r.product_rates["lime"][0] == pytest.approx(538, abs=1)


def test_organic_matter_is_read_as_carbon_by_the_stated_factor() -> None:
    # van Bemmelen 1.724 (a convention): OM 1.5 x 1.724 % gives the same as OC 1.5 %.
    kw = dict(depth_m=0.10, bulk_density_g_cm3=1.3, ph_method="CaCl2")
    s = _lime(method="phbc", target_ph=5.5, target_ph_method="CaCl2")
    a = compute_rates({"ph": np.array([5.0]), "oc": np.array([1.5]), "clay": np.array([20.0])},
                      s, PRODUCTS, **kw)  # type: ignore[arg-type]
    b = compute_rates({"ph": np.array([5.0]), "om": np.array([1.5 * 1.724]),
                       "clay": np.array([20.0])}, s, PRODUCTS, **kw)  # type: ignore[arg-type]
    assert b.product_rates["lime"][0] == pytest.approx(a.product_rates["lime"][0])


def test_maintenance_lime_is_added_and_shown_separately() -> None:
    # [derived] 1.3 kmol H+/ha/yr x 50.04 kg CaCO3/kmol = 65.06 kg/ha, pure calcite
    s = _lime(method="phbc", target_ph=5.5, target_ph_method="CaCl2",
              maintenance_kmol_h_ha_yr=1.3)
    r = compute_rates({"ph": np.array([5.0, 6.2]), "phbc": np.array([2.0, 2.0])}, s, PRODUCTS,
                      depth_m=0.10, bulk_density_g_cm3=1.3, ph_method="CaCl2")
    m = r.contributions[("maintenance", "lime")]
    assert m == pytest.approx([65.06, 65.06], abs=0.01)
    assert r.contributions[("lime", "lime")][1] == 0
    assert r.product_rates["lime"] == pytest.approx(r.contributions[("lime", "lime")] + m)


def test_trigger_margin_and_target_by_crop() -> None:
    # lime only more than the margin below the target (common practice); alfalfa 6.8 in water
    # (Tri-State 2020, from memory)
    s = _lime(method="phbc", crop="alfalfa", trigger_margin_ph=0.2)
    r = compute_rates({"ph": np.array([6.7, 6.5, 7.0]), "phbc": np.array([2.0, 2.0, 2.0])}, s,
                      PRODUCTS, depth_m=0.10, bulk_density_g_cm3=1.3)
    lime = r.product_rates["lime"]
    assert lime[0] == 0 and lime[2] == 0
    assert lime[1] == pytest.approx(0.3 * 2.0 * MG_CACO3_PER_CMOL * 1e-6 * 1.3e6)


def test_target_per_paddock_overrides_the_farm_target() -> None:
    s = RateSettings(lime=LimeRule(method="phbc", target_ph=6.0, target_ph_by_paddock={"B": 6.5},
                                   crop_by_paddock={"C": "pasture"}))
    assert s.for_paddock("A").lime.target().ph == 6.0
    assert s.for_paddock("B").lime.target().ph == 6.5
    assert s.for_paddock("C").lime.target().ph_method == "CaCl2"


def test_auto_picks_the_first_method_the_samples_support() -> None:
    s = _lime(method="auto")
    assert plan_rules(s, {"ph", "bph_smp", "al"})[0][0] == "lime"
    r = compute_rates({"ph": np.array([5.5]), "bph_smp": np.array([6.5]), "al": np.array([1.0])},
                      s, PRODUCTS, depth_m=0.2, bulk_density_g_cm3=1.2)
    assert "SMP" in r.methods["lime"]
    order = _lime(method="auto", method_order=("kamprath", "smp"))
    r2 = compute_rates({"ph": np.array([5.5]), "bph_smp": np.array([6.5]), "al": np.array([1.0])},
                       order, PRODUCTS, depth_m=0.2, bulk_density_g_cm3=1.2)
    assert r2.methods["lime"].startswith("Kamprath")


def test_buffer_method_refuses_a_ph_it_was_not_calibrated_on() -> None:
    runs, skipped = plan_rules(_lime(method="smp", target_ph=6.5), {"ph", "bph_smp"},
                               ph_method="CaCl2")
    assert "lime" not in runs
    assert "calibrated on pH in water" in dict(skipped)["lime"]


def test_target_in_another_ph_method_is_named() -> None:
    _, skipped = plan_rules(_lime(method="phbc", crop="corn"), {"ph", "phbc"}, ph_method="CaCl2")
    assert "target_ph_method = 'CaCl2'" in dict(skipped)["lime"]


def test_no_lime_advice_is_never_silent() -> None:
    # a pH-only lab file: the acid cell is flagged, the neutral one is not
    with pytest.warns(RateWarning, match="lime requirement needs a test: 1 acid cell"):
        r = compute_rates({"ph": np.array([4.8, 6.6, np.nan])}, RateSettings(), PRODUCTS,
                          depth_m=0.1, bulk_density_g_cm3=1.3)
    assert r.needs_test is not None
    assert r.needs_test.tolist() == [True, False, False]
    assert "buffer pH" in r.ask_for and "organic carbon and clay" in r.ask_for
    notes = check_inputs(RateSettings(), {"ph"}, ph_method="CaCl2")
    assert any("needs a test" in n and "organic carbon and clay" in n for n in notes)


@given(ph=st.floats(3.8, 6.4), drop=st.floats(0.0, 1.0), depth=st.floats(0.05, 0.3),
       k=st.floats(1.1, 3.0))
@settings(max_examples=40, suppress_health_check=[HealthCheck.too_slow])
def test_target_methods_grow_as_ph_falls_and_with_depth(
    ph: float, drop: float, depth: float, k: float
) -> None:
    s = _lime(method="mehlich", target_ph=6.5, trigger_margin_ph=0.0)

    def rate(p: float, d: float) -> float:
        r = compute_rates({"ph": np.array([p]), "bph_mehlich": np.array([p + 0.7])}, s, PRODUCTS,
                          depth_m=d, bulk_density_g_cm3=1.3)
        return float(r.product_rates["lime"][0])

    assert rate(ph - drop, depth) >= rate(ph, depth) - 1e-9
    assert rate(ph, depth * k) == pytest.approx(rate(ph, depth) * k, rel=1e-9, abs=1e-9)


def test_explain_shows_the_calibration_and_its_conversion() -> None:
    # SMP (Western Region table, row [from memory]): buffer pH 6.0 to pH 6.5 -> 8.3 short t/ac
    steps = explain_cell({"ph": 5.4, "bph_smp": 6.0}, _lime(method="smp", target_ph=6.5),
                         PRODUCTS, depth_m=0.15, bulk_density_g_cm3=1.3)
    text = format_steps(steps)
    assert "8.3 short t CaCO3/ac (8-inch slice, 2.4 M lb/ac)" in text
    assert "calibration" in text and "pH in water" in text
    slice_kg_ha = 2.4e6 * KG_HA_PER_LB_AC
    want = 8.3 * TON_AC * (0.15 * 1.3 * 1e7) / slice_kg_ha
    assert steps[-1].result == pytest.approx(want, rel=1e-9)


def test_phbc_on_ph_in_water_says_so() -> None:
    """The pHBC method (Aitken, Moody & McKinley 1990, from memory: pH in 0.01 M CaCl2) run on
    pH in water against a water target warns, naming the method, the pH used and that no
    conversion is applied; on pH in CaCl2 it does not."""
    s = _lime(method="phbc", target_ph=6.0, target_ph_method="water")
    with pytest.warns(RateWarning, match="lime method 'phbc'") as got:
        r = compute_rates({"ph": np.array([5.0]), "phbc": np.array([2.0])}, s, PRODUCTS,
                          depth_m=0.10, bulk_density_g_cm3=1.3, ph_method="water")
    text = " ".join(str(w.message) for w in got)
    assert "pH in water" in text and "CaCl2" in text and "no conversion" in text
    # the rate itself is (target - pH) x pHBC as before [derived]: 1.0 x 2.0 cmol/kg x soil
    assert r.product_rates["lime"][0] == pytest.approx(
        1.0 * 2.0 * MG_CACO3_PER_CMOL * 1e-6 * 1.3e6)
    with warnings.catch_warnings():
        warnings.simplefilter("error", RateWarning)
        compute_rates({"ph": np.array([5.0]), "phbc": np.array([2.0])},
                      _lime(method="phbc", target_ph=5.5, target_ph_method="CaCl2"), PRODUCTS,
                      depth_m=0.10, bulk_density_g_cm3=1.3, ph_method="CaCl2")


def test_phbc_regression_outside_its_range_is_a_warning() -> None:
    # Aitken, Moody & McKinley 1990: organic carbon 8 % lies outside the soils it was fitted on
    with pytest.warns(RateWarning, match="outside the soils it was fitted on"):
        compute_rates({"ph": np.array([5.0]), "oc": np.array([8.0]), "clay": np.array([20.0])},
                      _lime(method="phbc", target_ph=5.5, target_ph_method="CaCl2"), PRODUCTS,
                      depth_m=0.1, bulk_density_g_cm3=1.3, ph_method="CaCl2")


def test_a_rate_warning_names_its_paddock() -> None:
    """The pipeline computes each paddock's rates inside ``paddock_warnings``: the pHBC
    regression's range warning (Aitken, Moody & McKinley 1990: OC 8 % is outside) names
    the paddock like the other paddock warnings, once."""
    from geosoil.pipeline import paddock_warnings
    from geosoil.recording import record_warnings

    found: list[str] = []
    with record_warnings(found), paddock_warnings("Creek Flat"):
        compute_rates({"ph": np.array([5.0]), "oc": np.array([8.0]), "clay": np.array([20.0])},
                      _lime(method="phbc", target_ph=5.5, target_ph_method="CaCl2"), PRODUCTS,
                      depth_m=0.1, bulk_density_g_cm3=1.3, ph_method="CaCl2")
    hits = [w for w in found if "pHBC regression" in w]
    assert hits and all(w.startswith("paddock 'Creek Flat': pHBC regression") for w in hits)
    assert len(hits) == 1


def test_acid_cells_the_lime_rule_leaves_bare_are_said_beside_the_rule() -> None:
    """The warning lives with the lime rule (rates.warn_acid_cells_without_lime). Four cells:
    acid by pH (5.0 < 5.5, the default flag, common practice) with lime; acid by acid
    saturation (20 % > 15 %) without lime; not acid; acid but waiting for a lab test."""
    from types import SimpleNamespace

    from geosoil.chemistry import ChemistrySettings
    from geosoil.rates import LimeRule, warn_acid_cells_without_lime

    rule = LimeRule(method="acidity_share", target_acidity_share_percent=25.0)
    rr = SimpleNamespace(contributions={("lime", "lime"): np.array([900.0, 0.0, 0.0, 0.0])},
                         needs_test=np.array([False, False, False, True]),
                         methods={"lime": "acidity share"})
    cells = {"acid_sat": np.array([10.0, 20.0, 5.0, 30.0])}
    ph = np.array([5.0, 6.0, 6.2, 6.0])
    with pytest.warns(RateWarning) as caught:
        warn_acid_cells_without_lime("Home", cells, "water", ph, rr, lime_rule=rule,
                                     chemistry=ChemistrySettings())
    (w,) = [str(c.message) for c in caught]
    assert w.startswith("Home: 1 of 3 acid cell(s) (pH below 5.5 or acid saturation above "
                        "15 %) get no lime: the lime method (acidity share) finds its own "
                        "target already met there; lower rates.lime.target_acidity_share_percent")
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # every acid cell limed (or waiting for a test): quiet
        rr.contributions[("lime", "lime")] = np.array([900.0, 500.0, 0.0, 0.0])
        warn_acid_cells_without_lime("Home", cells, "water", ph, rr, lime_rule=rule,
                                     chemistry=ChemistrySettings())
