"""Salinity, sodicity and dispersion, held against the sources in docs/SOURCES.md
("Salinity, sodicity and dispersion")."""

from __future__ import annotations

import math

import numpy as np
import pytest

from geosoil import salinity as sal
from geosoil.errors import SettingsError

# --- EC units [derived, SI prefixes] ---------------------------------------------------------

@pytest.mark.parametrize(
    ("value", "unit"),
    [(1.2, "dS/m"), (1.2, "mS/cm"), (1200.0, "uS/cm"), (1200.0, "\u00b5S/cm"), (120.0, "mS/m"),
     (1.2, " DS/M ")],
)
def test_ec_units_si_prefixes(value: float, unit: str) -> None:
    assert sal.to_ds_m(value, unit) == pytest.approx(1.2)


def test_ec_unknown_unit_names_the_choices() -> None:
    with pytest.raises(SettingsError, match="dS/m, mS/cm, uS/cm"):
        sal.to_ds_m(1.0, "mmho")


# --- EC 1:5 -> ECe: Slavich & Petterson 1993, Aust. J. Soil Res. 31:73 --------------------

def test_slavich_petterson_equation_check_value() -> None:
    # theta_SP 0.60 kg/kg -> f = 2.46 + 3.03/0.60 = 7.51 (the equation, confirmed)
    assert float(sal.ece_factor(theta_sp=0.60)) == pytest.approx(7.51, abs=0.005)
    assert float(sal.ece_factor(theta_sp=0.30)) == pytest.approx(2.46 + 10.1)


def test_texture_multipliers_from_memory() -> None:
    # multipliers by texture (from memory, as printed in Australian extension guides)
    expected = {"sand": 23, "sandy loam": 14, "loam": 9.5, "clay loam": 8.6,
                "light clay": 8.6, "light-medium clay": 8.6, "medium clay": 7.5, "heavy clay": 5.8}
    for texture, f in expected.items():
        assert float(sal.ece_factor(texture=texture)) == f
    assert float(sal.ece_from_ec15(0.4, texture="Heavy_Clay")) == pytest.approx(2.32)


def test_ece_round_trip_and_error_against_central_difference() -> None:
    ec15 = np.array([0.05, 0.3, 1.2])
    ece = sal.ece_from_ec15(ec15, theta_sp=0.45)
    np.testing.assert_allclose(sal.ec15_from_ece(ece, theta_sp=0.45), ec15)
    # the stated error is the first-order change of f with theta_SP [derived]
    h = 1e-6
    slope = (sal.ece_factor(theta_sp=0.40 + h) - sal.ece_factor(theta_sp=0.40 - h)) / (2 * h)
    expected = abs(float(slope)) * 0.05
    assert float(sal.ece_factor_error(0.40, 0.05)) == pytest.approx(expected, rel=1e-6)


@pytest.mark.parametrize("kwargs", [{}, {"theta_sp": 0.5, "texture": "loam"}, {"theta_sp": 45.0},
                                    {"texture": "silty peat"}])
def test_ece_factor_bad_settings(kwargs: dict) -> None:
    with pytest.raises(SettingsError):
        sal.ece_factor(**kwargs)


# --- classes: USDA Handbook 60 (Richards 1954) ---------------------------------------------

@pytest.mark.parametrize(
    ("ece", "esp", "expected"),
    [(6, 10, "saline"), (6, 20, "saline-sodic"), (2, 25, "sodic"), (2, 5, "normal")],
)
def test_handbook_60_classes(ece: float, esp: float, expected: str) -> None:
    assert sal.salinity_class(ece, esp) == expected


def test_handbook_60_limits_count_on_the_saline_and_sodic_side() -> None:
    # the limits themselves (ECe 4, ESP 15) are an implementation choice, stated in the module
    assert sal.salinity_class(4.0, 15.0) == "saline-sodic"
    assert sal.salinity_class(3.999, 14.999) == "normal"
    assert sal.salinity_class(float("nan"), 5) is None
    assert sal.salinity_classes(np.array([[6.0, 2.0]]), 20.0).tolist() == [[3, 2]]


# --- CROSS: Rengasamy & Marchuk 2011, Soil Research 49:280 ----------------------------------

def test_cross_worked_by_hand() -> None:
    # [derived] (10 + 0.56*2) / sqrt((4 + 0.6*2)/2) = 11.12 / sqrt(2.6) = 6.896
    assert float(sal.cross(na=10, k=2, ca=4, mg=2)) == pytest.approx(11.12 / math.sqrt(2.6))
    assert float(sal.cross(na=10, k=2, ca=4, mg=2)) == pytest.approx(6.896, abs=5e-4)
    # [derived] (5 + 2.8) / sqrt((2 + 3.6)/2) = 4.661
    assert float(sal.cross(na=5, k=5, ca=2, mg=6)) == pytest.approx(4.661, abs=5e-4)
    # the same water's SAR (USDA Handbook 60): 10 / sqrt(3) = 5.774
    assert float(sal.sar(na=10, ca=4, mg=2)) == pytest.approx(5.774, abs=5e-4)


def test_cross_is_sar_without_k_and_mg() -> None:
    same_sar = float(sal.sar(na=7, ca=3, mg=0))
    assert float(sal.cross(na=7, k=0, ca=3, mg=0)) == pytest.approx(same_sar)


# --- dispersion classes (limits from memory, after Rengasamy et al. 1984) ------------------

def test_dispersion_classes_at_the_stated_limits() -> None:
    lim = sal.DispersionLimits()
    esp = 10.0
    floc_ec = lim.floc_intercept + lim.floc_slope * esp
    disp_ec = lim.dispersive_slope * esp
    codes = sal.dispersion_classes([esp] * 4, [floc_ec, floc_ec - 1e-9, disp_ec, disp_ec - 1e-9])
    assert codes.tolist() == [0, 1, 1, 2]
    # below the minimum ESP nothing is spontaneously dispersive
    assert sal.dispersion_classes(lim.dispersive_esp_min - 0.1, 0.0).tolist() == 1
    assert sal.dispersion_classes(np.nan, 0.2).tolist() == -1


def test_dispersion_risk_monotone() -> None:
    # property: more salt never raises the risk, more sodium never lowers it
    esp = np.linspace(0, 40, 41)
    ec = np.linspace(0, 3, 61)
    grid = sal.dispersion_classes(esp[:, None], ec[None, :])
    assert (np.diff(grid, axis=1) <= 0).all()
    assert (np.diff(grid, axis=0) >= 0).all()


def test_dispersion_limits_checked() -> None:
    with pytest.raises(SettingsError, match="dispersive_slope"):
        sal.DispersionLimits(dispersive_slope=0.1, floc_slope=0.05)
    with pytest.raises(SettingsError, match="floc_intercept"):
        sal.DispersionLimits(floc_intercept=-1.0)


# --- Ca:Mg (common practice: below 2 flags high Mg) ----------------------------------------

def test_ca_mg_flag() -> None:
    assert sal.high_mg([8.0, 4.0, 3.9, 5.0, np.nan], [2.0, 2.0, 2.0, 0.0, 1.0]).tolist() == [
        False, False, True, False, False]


# --- gypsum dissolving water and pretreatment ----------------------------------------------

def test_gypsum_water_per_t_ha() -> None:
    # [derived] 1 t/ha = 100 g/m2; / 2.5 g/L (common practice) = 40 L/m2 = 40 mm
    assert float(sal.gypsum_water_mm(1.0)) == pytest.approx(40.0)
    # a 6 t/ha rate of 85 % gypsum at 2.4 g/L: 6 x 100 x 0.85 / 2.4 = 212.5 mm
    water = sal.gypsum_water_mm(6.0, gypsum_fraction=0.85, solubility_g_l=2.4)
    assert float(water) == pytest.approx(212.5)
    with pytest.raises(SettingsError):
        sal.gypsum_water_mm(1.0, gypsum_fraction=85)


def test_pretreatment_threshold() -> None:
    # 0.3 dS/m EC 1:5 (from memory); at the threshold no warning, above it one
    assert sal.needs_pretreatment([0.06, 0.3, 0.31, np.nan]).tolist() == [False, False, True, False]


# --- reading EC and the samples table ------------------------------------------------------

def test_ec_headers_and_units_are_read() -> None:
    from geosoil.columns import parse_header

    assert (parse_header("EC 1:5 (dS/m)").role, parse_header("EC 1:5 (dS/m)").unit) == (
        "ec_1_5", "dS/m")
    assert (parse_header("EC1:5 (uS/cm)").role, parse_header("EC1:5 (uS/cm)").unit) == (
        "ec_1_5", "uS/cm")
    assert parse_header("ECe (mS/cm)").role == "ece"
    # an EC that names no extract is left alone, with a note saying how to map it
    bare = parse_header("EC (dS/m)")
    assert bare.role is None and "ec_1_5" in (bare.note or "")


def test_samples_in_us_cm_are_carried_in_ds_m(tmp_path) -> None:
    from geosoil.samples import SampleSettings, read_samples

    p = tmp_path / "lab.csv"
    p.write_text("Sample,Lon,Lat,Ca,Mg,K,Na,EC1:5 (uS/cm),ECe (mS/cm)\n"
                 "S1,147.001,-35.001,5,2,0.5,0.3,450,3.9\n"
                 "S2,147.002,-35.002,5,2,0.5,0.3,60,\n")
    got = read_samples(SampleSettings(file=p, empty_allowed=("ece",)))
    assert got.samples.ec_1_5.tolist() == pytest.approx([0.45, 0.06])
    assert got.samples.ece.tolist()[0] == pytest.approx(3.9)


def test_derive_samples_measured_ece_kept_estimated_marked() -> None:
    import pandas as pd

    table = pd.DataFrame({"sample_id": ["A", "B", "C"], "ec_1_5": [0.5, 0.05, 0.35],
                          "ece": [6.0, np.nan, np.nan], "esp": [10.0, 20.0, 5.0],
                          "ca": [6.0, 3.0, 5.0], "mg": [2.0, 2.0, 1.0]})
    with pytest.warns(Warning) as rec:
        out = sal.derive_samples(table, sal.SalinitySettings(texture="medium clay"))
    # A: measured ECe 6 (saline); B: 0.05 x 7.5 = 0.375 with ESP 20 (sodic);
    # C: 0.35 x 7.5 = 2.625 (normal) and above the 0.3 dS/m pretreatment threshold
    assert out.ece.tolist() == pytest.approx([6.0, 0.375, 2.625])
    assert out.ece_estimated.tolist() == [False, True, True]
    assert out.salinity_class.tolist() == ["saline", "sodic", "normal"]
    assert out.pretreatment_needed.tolist() == [True, False, True]
    assert out.high_mg.tolist() == [False, True, False]
    texts = " ".join(str(w.message) for w in rec)
    assert "samples A, C" in texts and "washed out soluble salts" in texts
    assert "estimated, not measured" in texts


def test_derive_samples_without_texture_says_so() -> None:
    import pandas as pd

    table = pd.DataFrame({"sample_id": ["A"], "ec_1_5": [0.1], "esp": [10.0]})
    with pytest.warns(Warning, match=r"\[salinity\] texture"):
        out = sal.derive_samples(table, sal.SalinitySettings())
    assert out.salinity_class.tolist() == [None]


def test_cell_classes_from_kriged_ec_and_cell_esp() -> None:
    cells = {"ec_1_5": np.array([0.6, 0.6, np.nan]), "esp": np.array([10.0, 16.0, 20.0])}
    out = sal.derive_cells(cells, sal.SalinitySettings(theta_sp=0.60))
    # f = 7.51 at theta_SP 0.60: ECe 4.5 -> saline, saline-sodic; no EC -> unknown
    assert out["ece"][:2] == pytest.approx([0.6 * (2.46 + 3.03 / 0.6)] * 2)
    assert out["salinity_class"][:2].tolist() == [1.0, 3.0]
    assert np.isnan(out["salinity_class"][2])


# --- a whole run of the demo farm (the session's demo_run) ---------------------------------

def test_demo_run_samples_surfaces_and_record(demo_run) -> None:
    import pandas as pd

    samples = pd.read_csv(demo_run.out / "samples.csv")
    for column in ("ec_1_5", "ece", "salinity_class", "dispersion_class", "high_mg"):
        assert column in samples.columns
    # the demo states clay loam: ECe = 8.6 x EC 1:5 (multiplier from memory)
    est = samples["ece_estimated"].astype(bool)
    np.testing.assert_allclose(samples.loc[est, "ece"], 8.6 * samples.loc[est, "ec_1_5"])
    # each sample's class follows Handbook 60 from its own ECe and ESP
    want = [sal.salinity_class(e, p) for e, p in zip(samples.ece, samples.esp, strict=True)]
    assert samples.salinity_class.where(samples.salinity_class.notna(), None).tolist() == want
    rec = demo_run.record["salinity"]
    assert "8.6" in rec["ece_from_ec_1_5"]
    farm = demo_run.result.farm
    for row in rec["paddocks"]:
        cells = farm.paddocks[row["paddock"]].cells
        grid = farm.prep.grids[row["paddock"]]
        codes = sal.salinity_classes(cells["ece"], cells["esp"])
        for i, name in enumerate(sal.SALINITY_CLASSES):
            assert row["salinity_class_ha"][name] == pytest.approx(
                np.count_nonzero(codes == i) * grid.cell_area_ha)
    for w in rec["gypsum_water"]:
        # [derived] mm = t/ha x 100 x gypsum share / 2.5 g/L
        assert w["water_mm"] == pytest.approx(
            w["rate_kg_ha"] / 1000 * 100 * w["gypsum_fraction"] / 2.5)
    report = (demo_run.out / "report.html").read_text(encoding="utf-8")
    if rec["gypsum_water"]:
        assert "of rain or irrigation is water that only dissolves the gypsum" in report


@pytest.mark.parametrize(("esp", "ec", "expected"), [
    # the flocculation line EC 1:5 = 0.1 + 0.05 ESP: on it flocculated, just below not
    (0.0, 0.1, 0), (0.0, 0.0999, 1), (20.0, 1.1, 0), (20.0, 1.0999, 1),
    # the spontaneous line EC 1:5 = 0.02 ESP from ESP 6: below it dispersive
    (6.0, 0.1199, 2), (6.0, 0.12, 1), (5.999, 0.0, 1), (30.0, 0.5999, 2), (30.0, 0.6, 1),
])
def test_dispersion_class_edges(esp: float, ec: float, expected: int) -> None:
    # the limits after the diagram of Rengasamy et al. 1984 are from memory (docs/SOURCES.md,
    # "Salinity, sodicity and dispersion"): each edge belongs to the less dispersive class
    assert int(sal.dispersion_classes(esp, ec)) == expected


@pytest.mark.parametrize("header, role, unit", [
    # user trial: the Spanish "CE 1:5 (dS/m)" was not read; EC is CE in Spanish, Portuguese
    # and French (conductividad / condutividade / conductivité électrique) and LF
    # (Leitfähigkeit) in German
    ("CE 1:5 (dS/m)", "ec_1_5", "dS/m"),
    ("Conductividad eléctrica 1:5 agua (dS/m)", "ec_1_5", "dS/m"),
    ("Condutividade elétrica 1:5 (mS/cm)", "ec_1_5", "mS/cm"),
    ("LF 1:5 (µS/cm)", "ec_1_5", "uS/cm"),
    ("Leitfähigkeit 1:5 (mS/m)", "ec_1_5", "mS/m"),
    ("EC (1:5 water)", "ec_1_5", None),
    ("CEe (dS/m)", "ece", "dS/m"),
    ("CE extracto de saturación (dS/m)", "ece", "dS/m"),
    ("LF Sättigungsextrakt (dS/m)", "ece", "dS/m"),
])
def test_ec_headers_in_the_supported_languages(header, role, unit) -> None:
    from geosoil.columns import parse_header

    info = parse_header(header)
    assert (info.role, info.unit) == (role, unit)


def test_an_ec_left_unread_gets_an_ec_hint_not_the_cation_units(tmp_path) -> None:
    # user trial: 'CE (dS/m)' style columns were "unit 'dS/m' is not an exchangeable
    # amount" with a hint listing cation units only
    from geosoil.errors import DataWarning
    from geosoil.samples import SampleSettings, read_samples

    p = tmp_path / "lab.csv"
    p.write_text("Muestra,Longitud,Latitud,Ca,CE (dS/m),Salinidad (dS/m)\n"
                 "M1,147.001,-35.001,5,0.4,0.4\nM2,147.002,-35.002,6,0.5,0.5\n")
    with pytest.warns(DataWarning) as caught:
        read_samples(SampleSettings(file=p))
    said = next(str(w.message) for w in caught if "not read" in str(w.message))
    assert "'CE (dS/m)' (an EC that names no extract" in said
    assert "'Salinidad (dS/m)' (a conductivity (dS/m) naming no extract" in said
    assert "ec_1_5 (1:5 water) or ece (saturation extract)" in said
    assert "dS/m, mS/cm, uS/cm, mS/m" in said
    assert "cmol/kg, meq/100g" not in said and "not an exchangeable amount" in said
