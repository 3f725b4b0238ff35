"""Tests for geosoil.units: conversion factors against published values, round trips."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import periodictable
import pytest
from hypothesis import given
from hypothesis import strategies as st

from geosoil.errors import SettingsError
from geosoil.units import (
    CATION_UNITS,
    CHARGE,
    KG_HA_PER_LB_AC,
    MG_CACO3_PER_CMOL,
    RATE_UNITS,
    cmol_kg_to_kg_ha,
    format_rate,
    from_cmol_kg,
    kg_ha_to_lb_ac,
    kg_ha_to_mg_m2,
    kg_per_ha_of_layer,
    lb_ac_to_kg_ha,
    mg_kg_to_kg_ha,
    mg_per_cmol,
    normalise_unit,
    rate_from_kg_ha,
    rate_to_kg_ha,
    to_cmol_kg,
)

# docs/SOURCES.md, "Units and conversions": mg/kg per 1 cmol(+)/kg = 10 x IUPAC standard atomic
# weight (abridged) / charge [derived].
MG_PER_CMOL_PUBLISHED = {
    "ca": 200.39,
    "mg": 121.53,
    "k": 390.98,
    "na": 229.90,
    "al": 89.94,
    "h": 10.08,
}


@pytest.mark.parametrize("analyte", sorted(CHARGE))
def test_mg_per_cmol_against_iupac_atomic_weights_via_periodictable(analyte):
    # Reference library: periodictable's standard atomic weights (IUPAC). The abridged values
    # used by geosoil agree with the full ones to well within 1 part in 10 000.
    element, charge = CHARGE[analyte]
    expected = 10.0 * getattr(periodictable, element).mass / charge
    assert mg_per_cmol(analyte) == pytest.approx(expected, rel=1e-4)


@pytest.mark.parametrize("analyte", sorted(MG_PER_CMOL_PUBLISHED))
def test_mg_per_cmol_matches_references_table(analyte):
    # docs/SOURCES.md table (IUPAC abridged standard atomic weights), two decimals as printed.
    assert round(mg_per_cmol(analyte), 2) == pytest.approx(MG_PER_CMOL_PUBLISHED[analyte])


def test_about_200_mg_ca_per_cmol_rule_of_thumb():
    # "about 200 mg Ca per cmol(+)/kg": common practice (docs/SOURCES.md).
    assert mg_per_cmol("ca") == pytest.approx(200.0, rel=0.01)


def test_caco3_per_cmol_is_500_4_mg_kg():
    # docs/SOURCES.md: CaCO3 per 1 cmol(+)/kg = 500.4 mg/kg [derived].
    assert MG_CACO3_PER_CMOL == pytest.approx(500.4, abs=0.05)


def test_meq_per_100g_equals_cmol_per_kg_and_a_tenth_of_mmol_per_kg():
    # docs/SOURCES.md: 1 meq/100 g = 1 cmol(+)/kg = 10 mmol(+)/kg, by definition.
    assert float(to_cmol_kg(1.0, "ca", "meq/100g")) == 1.0
    assert float(to_cmol_kg(10.0, "ca", "mmol/kg")) == 1.0
    assert float(from_cmol_kg(1.0, "na", "mmol(+)/kg")) == 10.0


def test_lb_per_acre_factor_is_the_exact_ratio():
    # docs/SOURCES.md: 1 lb/ac = 515445875/459870048 kg/ha exactly, from 1 lb = 0.45359237 kg and
    # 1 acre = 4046.8564224 m2 (NIST SP 811).
    exact = Fraction(515445875, 459870048)
    assert Fraction("0.45359237") / (Fraction("4046.8564224") / 10_000) == exact
    assert KG_HA_PER_LB_AC == float(exact)
    assert KG_HA_PER_LB_AC == pytest.approx(1.1208511562, abs=1e-10)
    assert float(lb_ac_to_kg_ha(1.0)) == float(exact)


def test_rule_of_thumb_260_kg_ha():
    # docs/SOURCES.md: kg/ha = mg/kg x BD (g/cm3) x depth (dm); 100 mg/kg x 1.3 x 2 dm = 260 kg/ha
    # [derived]; [common practice].
    assert float(mg_kg_to_kg_ha(100.0, depth_m=0.2, bulk_density_g_cm3=1.3)) == pytest.approx(260.0)


def test_soil_mass_of_a_layer():
    # docs/SOURCES.md: kg/ha = 10 000 m2 x depth (m) x BD (kg/m3) [derived]: 0.1 m at 1.4 g/cm3.
    assert float(kg_per_ha_of_layer(depth_m=0.1, bulk_density_g_cm3=1.4)) == pytest.approx(1.4e6)


def test_cmol_to_kg_ha_of_caco3():
    # docs/SOURCES.md, acidity and lime: t CaCO3/ha = cmol(+)/kg x 0.05004 x depth (cm) x BD
    # [derived]; 3.0 cmol(+)/kg, 20 cm, BD 1.2 -> 3.60 t/ha (Kamprath example).
    kg_ha = cmol_kg_to_kg_ha(3.0, mg_per_cmol_c=MG_CACO3_PER_CMOL, depth_m=0.2,
                             bulk_density_g_cm3=1.2)
    assert float(kg_ha) / 1000 == pytest.approx(3.0 * 0.05004 * 20 * 1.2, rel=1e-3)
    assert float(kg_ha) / 1000 == pytest.approx(3.60, abs=0.005)


def test_kg_ha_to_mg_m2():
    # docs/SOURCES.md: 1 kg/ha = 100 mg/m2; 1 t/ha = 100 000 mg/m2 [derived].
    assert float(kg_ha_to_mg_m2(1.0)) == 100.0
    assert float(kg_ha_to_mg_m2(rate_to_kg_ha(1.0, "t/ha"))) == 100_000.0


@pytest.mark.parametrize(
    "spelling, canonical",
    [
        ("cmol(+)/kg", "cmol/kg"),
        ("cmolc/kg", "cmol/kg"),
        ("cmol(+) kg-1", "cmol/kg"),
        ("cmol_c/kg", "cmol/kg"),
        ("meq/100 g", "meq/100g"),
        ("me/100g", "meq/100g"),
        ("meq 100g-1", "meq/100g"),
        ("mmol(+)/kg", "mmol/kg"),
        ("mmolc kg-1", "mmol/kg"),
        ("mg/kg", "mg/kg"),
        ("mg kg⁻¹", "mg/kg"),
        ("PPM", "mg/kg"),
        ("µg/g", "mg/kg"),
        ("μg/g", "mg/kg"),  # Greek mu, as some keyboards type it
    ],
)
def test_normalise_unit_spellings(spelling, canonical):
    assert normalise_unit(spelling) == canonical


@pytest.mark.parametrize("bad", ["%", "mg/L", "meq/L", "kg/ha", ""])
def test_normalise_unit_rejects_other_units(bad):
    with pytest.raises(SettingsError, match="not known"):
        normalise_unit(bad)


def test_acidity_has_no_mass_form():
    with pytest.raises(SettingsError, match="no mass conversion for 'acidity'"):
        to_cmol_kg(1.0, "acidity", "mg/kg")


def test_unknown_rate_unit():
    with pytest.raises(SettingsError, match="rate unit 'kg/ac'"):
        rate_from_kg_ha(1.0, "kg/ac")


@given(
    value=st.floats(min_value=0.0, max_value=1e5, allow_nan=False),
    analyte=st.sampled_from(sorted(CHARGE)),
    unit=st.sampled_from(CATION_UNITS),
)
def test_cation_unit_round_trip(value, analyte, unit):
    there = from_cmol_kg(value, analyte, unit)
    back = to_cmol_kg(there, analyte, unit)
    assert float(back) == pytest.approx(value, rel=1e-12, abs=1e-12)


@given(
    value=st.floats(min_value=0.0, max_value=1e4, allow_nan=False),
    analyte=st.sampled_from(sorted(CHARGE)),
)
def test_mg_kg_is_value_times_atomic_weight_over_charge(value, analyte):
    # Independent of geosoil's table: periodictable masses (IUPAC).
    element, charge = CHARGE[analyte]
    mg_kg = value * 10.0 * getattr(periodictable, element).mass / charge
    assert float(to_cmol_kg(mg_kg, analyte, "mg/kg")) == pytest.approx(value, rel=1e-4, abs=1e-12)


@given(
    value=st.floats(min_value=0.0, max_value=1e6, allow_nan=False),
    unit=st.sampled_from(RATE_UNITS),
)
def test_rate_unit_round_trip(value, unit):
    assert float(rate_to_kg_ha(rate_from_kg_ha(value, unit), unit)) == pytest.approx(value)


@given(st.floats(min_value=0.0, max_value=1e6, allow_nan=False))
def test_lb_ac_round_trip(value):
    assert float(lb_ac_to_kg_ha(kg_ha_to_lb_ac(value))) == pytest.approx(value)


def test_conversions_are_vectorised():
    values = np.array([200.39, 400.78])  # mg/kg of Ca: docs/SOURCES.md factor 200.39 [derived]
    assert to_cmol_kg(values, "ca", "ppm") == pytest.approx([1.0, 2.0], rel=1e-5)


# 1 lb = 0.45359237 kg and 1 acre = 4046.8564224 m2, exact by definition (NIST SP 811)
LB_AC_IN_KG_HA = 0.45359237 / 4046.8564224 * 10_000


def test_format_rate_in_each_unit():
    # 2500 kg/ha = 2.5 t/ha [derived: 1 t = 1000 kg]
    assert format_rate(2500.0, "t/ha") == "2.5 t/ha"
    assert format_rate(2500.0, "t/ha", with_unit=False) == "2.5"
    assert format_rate(4000.0, "t/ha") == "4.0 t/ha" and format_rate(250.0, "t/ha") == "0.25 t/ha"
    assert format_rate(2500.0, "kg/ha") == "2,500 kg/ha"
    # 5000 kg/ha = 4460.90 lb/ac with the exact NIST SP 811 factor; the rounded factors
    # 0.892 and 1 / 1.12 would give 4,460 and 4,464
    assert 5000.0 / LB_AC_IN_KG_HA == pytest.approx(4460.90, abs=0.01)
    assert format_rate(5000.0, "lb/ac") == "4,461 lb/ac"
    assert format_rate(0.0, "t/ha") == "0 t/ha" and format_rate(0.0, "kg/ha") == "0 kg/ha"
    assert format_rate(float("nan"), "kg/ha", missing="-") == "-"
    with pytest.raises(SettingsError, match="rate unit 'kg/ac'"):
        format_rate(1.0, "kg/ac")


@given(
    value=st.floats(min_value=0.0, max_value=1e5, allow_nan=False),
    unit=st.sampled_from(RATE_UNITS),
)
def test_format_rate_reads_back_within_its_rounding(value, unit):
    text = format_rate(value, unit, with_unit=False)
    shown = float(text.replace(",", ""))
    exact = float(rate_from_kg_ha(value, unit))
    step = 0.01 if unit == "t/ha" else 1.0
    assert abs(shown - exact) <= step / 2 + 1e-9 * exact
    assert format_rate(value, unit).endswith(" " + unit)


# --------------------------------------------------------------------------- volumetric units


@pytest.mark.parametrize(
    ("unit", "value", "cmol_dm3"),
    [("cmolc/dm3", 3.6, 3.6), ("mmolc/dm3", 36.0, 3.6), ("meq/100 cm3", 3.6, 3.6)],
)
def test_volumetric_units_round_trip(unit: str, value: float, cmol_dm3: float) -> None:
    # [derived] 1 meq/100 cm3 = 10 meq/dm3 = 10 mmolc/dm3 = 1 cmolc/dm3; per kg by the
    # density of the measured soil (1.2 g/cm3 = 1.2 kg/dm3)
    from geosoil.units import from_cmol_kg, is_volumetric, to_cmol_kg

    assert is_volumetric(unit)
    got = float(to_cmol_kg(value, "ca", unit, density_g_cm3=1.2))
    assert got == pytest.approx(cmol_dm3 / 1.2)
    assert float(from_cmol_kg(got, "ca", unit, density_g_cm3=1.2)) == pytest.approx(value)


def test_volumetric_unit_needs_a_density() -> None:
    from geosoil.units import to_cmol_kg

    with pytest.raises(SettingsError, match="per volume"):
        to_cmol_kg(1.0, "ca", "cmolc/dm3")
