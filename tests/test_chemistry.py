"""Tests for geosoil.chemistry: ECEC, saturations, ESP from SAR, sodicity and acidity."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import periodictable
import pytest
from hypothesis import given
from hypothesis import strategies as st

from geosoil.chemistry import (
    DERIVED,
    ChemistrySettings,
    derive,
    ecec_from_parts,
    esp_from_sar,
    exchange_chemistry,
    saturation,
    sodicity_class,
)
from geosoil.errors import DataWarning, InputError, SettingsError
from geosoil.settings import from_mapping
from geosoil.units import to_cmol_kg

# USDA Handbook 60 (Richards 1954, pp. 25-26): ESR = -0.0126 + 0.01475 SAR, ESP = 100 ESR/(1+ESR);
# the pairs as listed in docs/SOURCES.md [derived from the relation].
HANDBOOK_60_SAR_ESP = [(5.0, 5.763), (10.0, 11.887), (13.0, 15.193), (20.0, 22.021), (30.0, 30.065)]


@pytest.mark.parametrize("sar, esp", HANDBOOK_60_SAR_ESP)
def test_esp_from_sar_handbook_60(sar, esp):
    assert float(esp_from_sar(sar)) == pytest.approx(esp, abs=0.0005)


def test_esp_from_sar_is_vectorised_and_never_negative():
    # Below SAR 0.0126/0.01475 = 0.854 the Handbook 60 line gives a negative ESR [derived].
    out = esp_from_sar([0.0, 0.5, np.nan, 10.0])
    assert out[0] == 0.0 and out[1] == 0.0 and np.isnan(out[2])
    assert out[3] == pytest.approx(11.887, abs=0.0005)  # Handbook 60 pair


@given(st.floats(min_value=0.86, max_value=200.0), st.floats(min_value=0.01, max_value=50.0))
def test_esp_from_sar_increases_with_sar(sar, step):
    assert esp_from_sar(sar + step) > esp_from_sar(sar)


# Northcote & Skene 1972 (Australian Soil Classification, Isbell 1996): ESP >= 6 sodic,
# >= 15 strongly sodic.
@pytest.mark.parametrize(
    "esp, cls",
    [(0.0, "non-sodic"), (5.99, "non-sodic"), (6.0, "sodic"), (14.99, "sodic"),
     (15.0, "strongly sodic"), (40.0, "strongly sodic"), (np.nan, "unknown")],
)
def test_sodicity_thresholds_northcote_skene(esp, cls):
    assert sodicity_class([esp])[0] == cls


def test_sodicity_thresholds_follow_settings():
    # USDA Handbook 60 convention: sodic at ESP >= 15.
    us = ChemistrySettings(sodic_esp_percent=15.0, strongly_sodic_esp_percent=15.0)
    assert sodicity_class([10.0, 15.0], us).tolist() == ["non-sodic", "strongly sodic"]


def test_handbook_60_sar_13_crosses_strongly_sodic():
    # SAR 13 -> ESP 15.193 (Handbook 60) >= 15 (Northcote & Skene 1972).
    assert sodicity_class(esp_from_sar([13.0]))[0] == "strongly sodic"


def test_settings_cross_checks_name_the_key():
    with pytest.raises(SettingsError) as info:
        from_mapping(
            ChemistrySettings,
            {"sodic_esp_percent": 10.0, "strongly_sodic_esp_percent": 8.0},
            section="chemistry",
        )
    assert info.value.key == "chemistry.strongly_sodic_esp_percent"
    with pytest.raises(SettingsError, match="chemistry.acid_ph"):
        from_mapping(ChemistrySettings, {"acid_ph": 7.5}, section="chemistry")
    with pytest.raises(SettingsError, match="chemistry.acid_saturation_percent"):
        from_mapping(ChemistrySettings, {"acid_saturation_percent": 120}, section="chemistry")


def test_ecec_and_saturation_basics():
    # [derived] by definition: ECEC = Ca + Mg + K + Na + (Al + H); saturation = part / ECEC.
    assert float(ecec_from_parts(5.0, 2.0, 0.5, 0.5, 2.0)) == 10.0
    assert saturation([5.0, 1.0, 1.0], [10.0, 0.0, np.nan])[0] == 50.0
    assert np.isnan(saturation([1.0], [0.0])[0])
    assert np.isnan(float(ecec_from_parts(5.0, 2.0, 0.5, np.nan, 2.0)))


cmol = st.floats(min_value=0.0, max_value=60.0, allow_nan=False)


@given(ca=cmol, mg=cmol, k=st.floats(0.0, 5.0), na=st.floats(0.0, 20.0),
       al=st.floats(0.0, 10.0), h=st.floats(0.0, 5.0))
def test_saturations_add_up_to_100_percent_of_the_ecec_built_from_them(ca, mg, k, na, al, h):
    total = ca + mg + k + na + al + h
    if total <= 1e-6:
        return
    out = derive(pd.DataFrame({"ca": [ca], "mg": [mg], "k": [k], "na": [na], "al": [al],
                               "h": [h]})).iloc[0]
    parts = out.ca_sat + out.mg_sat + out.k_sat + out.na_sat + out.acid_sat
    assert parts == pytest.approx(100.0, rel=1e-9)
    assert out.base_sat + out.acid_sat == pytest.approx(100.0, rel=1e-9)
    assert out.ecec_basis == "sum of cations"
    assert out.esp == out.na_sat and not out.esp_estimated


# mg per cmol(+)/kg from periodictable's standard atomic weights (IUPAC): independent of
# geosoil.units' own table.
def _mg_kg(analyte: str, symbol: str, charge: int, value: float) -> float:
    return value * 10.0 * getattr(periodictable, symbol).mass / charge


@given(ca=st.floats(0.1, 40.0), mg=st.floats(0.1, 20.0), k=st.floats(0.05, 3.0),
       na=st.floats(0.0, 10.0), al=st.floats(0.0, 5.0))
def test_same_soil_in_mg_kg_and_meq_100g_gives_the_same_saturations(ca, mg, k, na, al):
    meq = pd.DataFrame({"ca": [ca], "mg": [mg], "k": [k], "na": [na], "al": [al]})
    in_mg_kg = {
        "ca": _mg_kg("ca", "Ca", 2, ca), "mg": _mg_kg("mg", "Mg", 2, mg),
        "k": _mg_kg("k", "K", 1, k), "na": _mg_kg("na", "Na", 1, na),
        "al": _mg_kg("al", "Al", 3, al),
    }
    from_mg = pd.DataFrame({a: to_cmol_kg([v], a, "mg/kg") for a, v in in_mg_kg.items()})
    from_meq = pd.DataFrame({a: to_cmol_kg(meq[a], a, "meq/100g") for a in meq})
    a, b = derive(from_mg).iloc[0], derive(from_meq).iloc[0]
    for column in ("ca_sat", "mg_sat", "k_sat", "na_sat", "acid_sat", "al_sat", "base_sat"):
        assert a[column] == pytest.approx(b[column], rel=1e-4, abs=1e-9)


def test_acidity_from_al_and_h_when_not_given():
    out = derive(pd.DataFrame({"ca": [4.0], "mg": [2.0], "k": [0.5], "na": [0.5],
                               "al": [2.0], "h": [1.0]})).iloc[0]
    assert out.ecec == 10.0
    assert out.acid_sat == pytest.approx(30.0) and out.al_sat == pytest.approx(20.0)


def test_acidity_column_is_preferred_over_al_plus_h():
    out = derive(pd.DataFrame({"ca": [4.0], "mg": [2.0], "k": [0.5], "na": [0.5],
                               "acidity": [1.0], "al": [0.6], "h": [0.2]})).iloc[0]
    assert out.ecec == 8.0


_amount = st.floats(0.0, 20.0, allow_nan=False)


@given(st.lists(st.tuples(_amount, _amount, _amount, _amount, _amount, _amount),
                min_size=1, max_size=20))
def test_al_never_exceeds_the_acidity_it_is_part_of(rows):
    """[derived] Al is part of the exchangeable acidity (Al + H), so Al <= acidity and Al
    saturation <= acid saturation in every cell, whatever two kriged surfaces give."""
    ca, mg, k, na, acidity, al = (np.array(c) for c in zip(*rows, strict=True))
    out = exchange_chemistry({"ca": ca, "mg": mg, "k": k, "na": na, "acidity": acidity,
                              "al": al})
    assert (out["al"] <= out["acidity"]).all()
    ok = np.isfinite(out["al_sat"])
    assert (out["al_sat"][ok] <= out["acid_sat"][ok]).all()
    np.testing.assert_array_equal(out["al_lowered"], al > acidity)
    np.testing.assert_array_equal(out["al"], np.minimum(al, acidity))


def test_a_samples_al_above_its_acidity_is_named():
    with pytest.warns(DataWarning, match=r"Al above the exchangeable acidity .* at S2"):
        out = derive(pd.DataFrame({"sample_id": ["S1", "S2"], "ca": [4.0, 4.0],
                                   "mg": [2.0, 2.0], "k": [0.5, 0.5], "na": [0.5, 0.5],
                                   "acidity": [1.0, 1.0], "al": [0.6, 1.3]}))
    assert out["al"].tolist() == [0.6, 1.3]  # the lab's figures kept
    assert out["al_sat"].iloc[1] == pytest.approx(out["acid_sat"].iloc[1])  # 1.0 / 8.0


def test_only_al_measured_counts_as_the_acidity():
    out = derive(pd.DataFrame({"ca": [4.0], "mg": [2.0], "k": [0.5], "na": [0.5],
                               "al": [1.0]})).iloc[0]
    assert out.ecec == 8.0


def test_missing_acidity_counts_as_zero_at_neutral_ph():
    # Common practice: exchangeable acidity is negligible at pH 7 and above.
    out = derive(pd.DataFrame({"ca": [14.0], "mg": [4.0], "k": [1.0], "na": [1.0],
                               "ph": [7.8]})).iloc[0]
    assert out.ecec == 20.0 and out.acid_sat == 0.0 and out.ecec_basis == "sum of cations"


def test_missing_acidity_below_neutral_ph_names_file_row_and_columns():
    soil = pd.DataFrame({"sample_id": ["A1", "A2"], "source_row": [2, 3], "ca": [5.0, 5.0],
                         "mg": [2.0, 2.0], "k": [0.5, 0.5], "na": [0.3, 0.3],
                         "al": [0.2, np.nan], "ph": [5.0, 6.5]})
    with pytest.raises(InputError) as info:
        derive(soil, file="lab.csv", headers={"al": "Exch Al"})
    text = str(info.value)
    assert "lab.csv" in text and "row 3" in text and "column 'Exch Al'" in text
    assert "acidity" in text and "A2" in text and "lab CEC" in text


def test_missing_cation_names_its_column():
    soil = pd.DataFrame({"source_row": [7], "ca": [5.0], "mg": [2.0], "k": [0.5],
                         "acidity": [0.1]})
    with pytest.raises(InputError) as info:
        derive(soil, file="lab.csv", headers={"ca": "Ca"})
    assert "row 7" in str(info.value) and "column 'na'" in str(info.value)
    assert "Na" in info.value.problem


def test_lab_cec_used_when_the_sum_cannot_be_formed():
    soil = pd.DataFrame({"ca": [5.0], "mg": [2.0], "k": [0.5], "cec": [10.0], "sar": [10.0],
                         "ph": [6.0]})
    out = derive(soil).iloc[0]
    assert out.ecec == 10.0 and out.ecec_basis == "lab CEC"
    assert out.ca_sat == 50.0 and np.isnan(out.na_sat)
    # ESP from SAR (Handbook 60: SAR 10 -> 11.887), flagged as estimated.
    assert out.esp == pytest.approx(11.887, abs=0.0005) and bool(out.esp_estimated)
    assert out.sodicity == "sodic"


def test_skip_leaves_ecec_empty_with_a_warning():
    soil = pd.DataFrame({"source_row": [2, 3], "ca": [5.0, 5.0], "mg": [2.0, 2.0],
                         "k": [0.5, 0.5], "na": [0.3, np.nan], "acidity": [0.1, 0.1]})
    with pytest.warns(DataWarning, match="row 3"):
        out = derive(soil, on_bad_row="skip")
    assert np.isfinite(out.ecec[0]) and np.isnan(out.ecec[1])
    assert out.ecec_basis.tolist() == ["sum of cations", "none"]
    assert out.ca[1] == 5.0  # measured values stay


def test_zero_ecec_is_an_error():
    soil = pd.DataFrame({"source_row": [4], "ca": [0.0], "mg": [0.0], "k": [0.0], "na": [0.0],
                         "acidity": [0.0]})
    with pytest.raises(InputError, match="row 4.*ECEC is 0"):
        derive(soil)


def test_ca_mg_ratio():
    out = derive(pd.DataFrame({"ca": [6.0, 6.0], "mg": [2.0, 0.0], "k": [0.5, 0.5],
                               "na": [0.2, 0.2], "acidity": [0.0, 0.0]}))
    assert out.ca_mg_ratio[0] == 3.0 and np.isnan(out.ca_mg_ratio[1])


def test_acid_flags_and_reasons():
    soil = pd.DataFrame({"ca": [2.0, 8.0, 8.0, 2.0], "mg": [1.0, 2.0, 2.0, 1.0],
                         "k": [0.2, 0.5, 0.5, 0.2], "na": [0.3, 0.5, 0.5, 0.3],
                         "acidity": [1.5, 0.0, 0.0, 0.0], "ph": [6.0, 5.2, 6.5, np.nan]})
    out = derive(soil)
    assert out.acid_flag.tolist() == [True, True, False, False]
    assert "acid saturation 30.0 %" in out.acid_reason[0] and "pH" not in out.acid_reason[0]
    assert out.acid_reason[1] == "pH 5.2 below 5.5"
    assert out.acid_reason[2] == ""


def test_acid_ph_threshold_for_cacl2_and_settings():
    soil = pd.DataFrame({"ca": [8.0], "mg": [2.0], "k": [0.5], "na": [0.5], "acidity": [0.0],
                         "ph": [5.0]})
    assert bool(derive(soil).acid_flag[0])  # 5.0 < 5.5 in water
    in_cacl2 = soil.rename(columns={"ph": "ph_cacl2"})
    assert not bool(derive(in_cacl2).acid_flag[0])  # not below 4.8 in CaCl2
    assert not bool(derive(soil, ChemistrySettings(acid_ph=4.5)).acid_flag[0])
    # pH in KCl has no threshold: it flags nothing
    assert not bool(derive(soil.rename(columns={"ph": "ph_kcl"})).acid_flag[0])
    # water where the lab gave it, CaCl2 on the rows that lack it
    both = pd.concat([soil, soil], ignore_index=True).assign(
        ph=[5.2, np.nan], ph_cacl2=[4.9, 4.7])
    got = derive(both)
    assert got.acid_flag.tolist() == [True, True]
    assert got.acid_reason.tolist()[0].startswith("pH 5.2 below 5.5")
    assert got.acid_reason.tolist()[1].startswith("pH (CaCl2) 4.7 below 4.8")


def test_derive_adds_the_contract_columns_and_leaves_input_alone():
    soil = pd.DataFrame({"sample_id": ["A"], "ca": [8.0], "mg": [2.0], "k": [0.5],
                         "na": [0.5], "acidity": [1.0], "Notes": ["wet"]})
    before = soil.copy()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        out = derive(soil)
    pd.testing.assert_frame_equal(soil, before)
    assert set(DERIVED) <= set(out.columns)
    assert out.Notes[0] == "wet"
    assert out.esp_estimated.dtype == bool and out.acid_flag.dtype == bool


def test_sar_of_a_1to5_extract_is_not_put_into_the_handbook_60_relation():
    """USDA Handbook 60's ESP-SAR regression is for saturation-extract SAR; a 1:5 SAR is not
    converted (no relation with a stated error is used), and the user is told why."""
    soil = pd.DataFrame({"ca": [8.0], "mg": [3.0], "k": [0.5], "acidity": [0.0],
                         "cec": [12.0], "sar_1to5": [10.0]})
    with pytest.warns(DataWarning, match="1:5 extract.*not estimated"):
        out = derive(soil)
    assert np.isnan(out.esp.iloc[0])
    # the same number as saturation-extract SAR gives Handbook 60's 11.887 (REFERENCES [derived])
    out = derive(soil.rename(columns={"sar_1to5": "sar"}))
    assert out.esp.iloc[0] == pytest.approx(11.887, abs=1e-3)


def test_cec_at_ph7_from_potential_acidity_stands_in_for_a_missing_ecec() -> None:
    # hand arithmetic: T = Ca + Mg + K + Na + (H + Al) = 2.0 + 0.8 + 0.2 + 0.5 + 3.0 = 6.5
    # (the sum the base saturation method uses; Raij et al. 1996 [from memory])
    from geosoil.chemistry import ECEC_BASES, exchange_chemistry

    out = exchange_chemistry({"ca": [2.0, 2.0, 2.0], "mg": [0.8, 0.8, 0.8],
                              "k": [0.2, 0.2, 0.2], "na": [0.5, 0.5, 0.5],
                              "acidity_potential": [3.0, 3.0, 3.0],
                              "acidity": [np.nan, 0.4, np.nan], "cec": [np.nan, np.nan, 9.0]})
    assert [ECEC_BASES[b] for b in out["ecec_basis"]] == [
        "CEC at pH 7", "sum of cations", "lab CEC"]  # the ECEC proper, then the lab's CEC first
    np.testing.assert_allclose(out["ecec"], [6.5, 3.9, 9.0])
    assert out["esp"][0] == pytest.approx(100 * 0.5 / 6.5)
    given = exchange_chemistry({"ca": [2.0], "mg": [0.8], "k": [0.2], "na": [0.5],
                                "acidity_potential": [3.0], "cec_ph7": [7.0]})
    assert given["ecec"][0] == 7.0  # a measured CEC at pH 7 wins over the sum
