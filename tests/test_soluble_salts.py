"""Soluble salts in exchangeable cations: ``[chemistry] soluble_salts = "subtract"``.

Exchangeable cations extracted without washing out soluble salts first (Rayment & Lyons
2011 method 15A1) include the salts' cations. Where the lab gives the soluble cations of a
water extract, exchangeable = extracted - soluble (the extractable-minus-soluble rule of USDA
Handbook 60, Richards 1954, from memory), the soluble amount being the extract's
concentration times its water per kg of soil: cmol(+)/kg = mmol(+)/L x L/kg / 10 [derived,
docs/SOURCES.md "Soluble salts in exchangeable cations"]. The lab figures below are
invented; every expected value is hand arithmetic from those definitions and the standard
atomic weights (IUPAC: Na 22.990).

Hand-worked example (one sample, 1:5 extract, so 5 L of water per kg of soil):

========  =========  ======================  ==========================  =============
cation    extracted  in the extract          soluble, cmol(+)/kg         exchangeable
========  =========  ======================  ==========================  =============
Ca        8.0        2 mmol/L = 4 mmol(+)/L  4 x 5 / 10 = 2.0            6.0
Mg        3.0        1 meq/L                 1 x 5 / 10 = 0.5            2.5
K         0.8        0.5 meq/L               0.5 x 5 / 10 = 0.25         0.55
Na        3.0        115 mg/L = 5.00217      5.00217 x 5 / 10 = 2.50109  0.49891
========  =========  ======================  ==========================  =============

ECEC (pH 8, acidity 0) = 6.0 + 2.5 + 0.55 + 0.49891 = 9.54891 cmol(+)/kg; ESP = 100 x
0.49891 / 9.54891 = 5.2248 %. Without the correction: ECEC 14.8, ESP 100 x 3 / 14.8 = 20.270 %.
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rasterio
from click.testing import CliRunner
from geosoil.cli.main import cli

from geosoil.chemistry import (
    ChemistrySettings,
    derive,
    exchange_chemistry,
    soluble_cmol_kg,
)
from geosoil.errors import InputError, SettingsError
from geosoil.salinity import derive_samples

NA_MG_PER_MMOL = 22.990  # IUPAC standard atomic weight of Na (docs/SOURCES.md)
NA_SOLUBLE = 115 / NA_MG_PER_MMOL * 5 / 10  # 2.50109 cmol(+)/kg
NA_LEFT = 3.0 - NA_SOLUBLE  # 0.49891
ECEC = 6.0 + 2.5 + 0.55 + NA_LEFT  # 9.54891
ESP = 100 * NA_LEFT / ECEC  # 5.2248 %
ESP_UNCORRECTED = 100 * 3.0 / 14.8  # 20.270 %

SUBTRACT = ChemistrySettings(soluble_salts="subtract")


def _record(fn, *args, **kw):  # type: ignore[no-untyped-def]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = fn(*args, **kw)
    return out, [str(w.message) for w in caught]


def _samples(**extra: list) -> pd.DataFrame:
    base = {"sample_id": ["S1"], "source_row": [2], "ca": [8.0], "mg": [3.0], "k": [0.8],
            "na": [3.0], "ph": [8.0], "na_sol": [115 / NA_MG_PER_MMOL], "k_sol": [0.5],
            "ca_sol": [4.0], "mg_sol": [1.0]}
    base.update(extra)
    return pd.DataFrame(base)


HEADERS = {"na": "Na 1:5 (mg/L)", "k": "K 1:5 (meq/L)", "ca": "Ca 1:5 (mmol/L)",
           "mg": "Mg 1:5 (meq/L)"}


def test_soluble_amount_per_kg_of_soil_is_concentration_times_extract_water() -> None:
    # 115 mg/L of Na = 5.00217 mmol(+)/L; x 5 L/kg = 25.011 mmol(+)/kg = 2.50109 cmol(+)/kg
    assert float(soluble_cmol_kg(115 / NA_MG_PER_MMOL, 5.0)) == pytest.approx(2.50109, abs=1e-5)
    # a 1:1 extract holds a fifth of the water, so a fifth of the soluble amount per kg
    assert float(soluble_cmol_kg(10.0, 1.0)) == pytest.approx(1.0)


def test_the_hand_worked_sample() -> None:
    out, said = _record(derive, _samples(), SUBTRACT, file="lab.csv", solution_headers=HEADERS)
    row = out.iloc[0]
    assert [row[c] for c in ("ca", "mg", "k")] == pytest.approx([6.0, 2.5, 0.55])
    assert row["na"] == pytest.approx(NA_LEFT) and row["na_extracted"] == 3.0
    assert row["na_soluble"] == pytest.approx(NA_SOLUBLE)
    assert row["ecec"] == pytest.approx(ECEC) and row["esp"] == pytest.approx(ESP, abs=1e-4)
    assert bool(row["soluble_subtracted"])
    assert any("corrected for soluble salts" in w and "Ca, Mg, K, Na at 1 sample(s): 1:5 "
               "extract, 5 L/kg" in w and "Handbook 60" in w for w in said)


def test_warn_keeps_the_labs_figures() -> None:
    out, _ = _record(derive, _samples(), ChemistrySettings(), solution_headers=HEADERS)
    row = out.iloc[0]
    assert row["na"] == 3.0 and row["ecec"] == pytest.approx(14.8)
    assert row["esp"] == pytest.approx(ESP_UNCORRECTED)
    assert "na_extracted" not in out.columns
    assert out.attrs["soluble_salts"] == {"mode": "warn",
                                          "soluble_given": ["ca", "mg", "k", "na"]}


def test_a_correction_never_makes_a_cation_negative() -> None:
    # soluble Na 10 meq/L x 5 / 10 = 5.0 cmol(+)/kg from 4.0 extracted: -1.0, kept at 0
    samples = _samples(sample_id=["N1", "N2"], source_row=[2, 3], ca=[8.0, 8.0],
                       mg=[3.0, 3.0], k=[0.8, 0.8], na=[4.0, 6.0], ph=[8.0, 8.0],
                       na_sol=[10.0, 10.0], k_sol=[0.5, 0.5], ca_sol=[4.0, 4.0],
                       mg_sol=[1.0, 1.0])
    out, said = _record(derive, samples, SUBTRACT, file="lab.csv")
    assert out["na"].tolist() == pytest.approx([0.0, 1.0])
    assert (out[["ca", "mg", "k", "na"]].to_numpy() >= 0).all()
    clamp = [w for w in said if "exceeds the extracted" in w]
    assert len(clamp) == 1
    assert "Na at 1 sample(s): N1 (extracted 4, soluble 5 cmol(+)/kg)" in clamp[0]
    assert "N2" not in clamp[0]
    assert out.attrs["soluble_salts"]["cations"]["na"]["clamped"] == ["N1"]


def test_equal_extracted_and_soluble_is_zero_without_a_warning() -> None:
    # 0.3 x 10 meq/L x 5 / 10 = 1.5 = extracted: 0 (float noise is not an over-correction)
    chem = exchange_chemistry({"na": [1.5], "na_sol": [3.0], "ca": [5.0], "mg": [1.0],
                               "k": [0.2], "acidity": [0.0]}, extract_water={"na": 5.0})
    assert chem["na"][0] == pytest.approx(0.0, abs=1e-12) and not chem["na_clamped"][0]


def test_samples_without_a_soluble_value_are_named_and_kept() -> None:
    samples = _samples(sample_id=["A", "B"], source_row=[2, 3], ca=[8.0, 8.0], mg=[3.0, 3.0],
                       k=[0.8, 0.8], na=[3.0, 3.0], ph=[8.0, 8.0],
                       na_sol=[115 / NA_MG_PER_MMOL, np.nan], k_sol=[0.5, 0.5],
                       ca_sol=[4.0, 4.0], mg_sol=[1.0, 1.0])
    out, said = _record(derive, samples, SUBTRACT, file="lab.csv")
    assert out["na"].tolist() == pytest.approx([NA_LEFT, 3.0])
    assert any("no soluble value to subtract for Na at B" in w for w in said)


def test_subtract_without_soluble_cations_says_nothing_was_subtracted() -> None:
    samples = _samples().drop(columns=["na_sol", "k_sol", "ca_sol", "mg_sol"])
    out, said = _record(derive, samples, SUBTRACT, file="lab.csv")
    assert out["na"].iloc[0] == 3.0
    assert any("gives no soluble Na, K, Ca or Mg" in w and "nothing is subtracted" in w
               for w in said)


def test_the_extract_water_comes_from_the_header_or_the_setting() -> None:
    # 'Na 1:1 (meq/L)': 1 L/kg, so 115 mg/L gives a fifth of the 1:5 amount
    out, _ = _record(derive, _samples(), SUBTRACT, solution_headers={"na": "Na 1:1 (mg/L)"})
    assert out["na_soluble"].iloc[0] == pytest.approx(NA_SOLUBLE / 5)
    # no ratio in the header: 5 L/kg, said as taken
    out, said = _record(derive, _samples(), SUBTRACT,
                        solution_headers={"na": "Soluble Na (mg/L)"})
    assert out["na_soluble"].iloc[0] == pytest.approx(NA_SOLUBLE)
    assert any("taken as a 1:5 extract" in w for w in said)
    # the setting (a saturation extract's water content, 0.45 L/kg) for every cation
    sat = ChemistrySettings(soluble_salts="subtract", extract_water_l_per_kg=0.45)
    out, _ = _record(derive, _samples(), sat, solution_headers={"na": "Na SE (mg/L)"})
    assert out["na_soluble"].iloc[0] == pytest.approx(115 / NA_MG_PER_MMOL * 0.45 / 10)


def test_a_saturation_extract_without_its_water_content_is_refused() -> None:
    with pytest.raises(InputError) as err:
        derive(_samples(), SUBTRACT, file="lab.csv",
               solution_headers={"na": "Na sat. paste (meq/L)"})
    msg = str(err.value)
    assert "lab.csv" in msg and "Na sat. paste (meq/L)" in msg
    assert "extract_water_l_per_kg" in msg


def test_a_setting_that_contradicts_the_header_is_refused() -> None:
    bad = ChemistrySettings(soluble_salts="subtract", extract_water_l_per_kg=2.5)
    with pytest.raises(SettingsError, match="chemistry.extract_water_l_per_kg.*1:5"):
        derive(_samples(), bad, solution_headers=HEADERS)


def test_every_layer_is_corrected_and_named_by_its_depth() -> None:
    samples = _samples(sample_id=["S1", "S1"], source_row=[2, 3], ca=[8.0, 6.0],
                       mg=[3.0, 5.0], k=[0.8, 0.5], na=[4.0, 5.5], ph=[8.0, 8.5],
                       na_sol=[10.0, 12.0], k_sol=[0.5, 0.5], ca_sol=[4.0, 4.0],
                       mg_sol=[1.0, 1.0])
    samples["depth_top_cm"] = [0.0, 10.0]
    samples["depth_bottom_cm"] = [10.0, 30.0]
    out, said = _record(derive, samples, SUBTRACT)
    # 10 and 12 meq/L x 5 / 10 = 5.0 and 6.0: both above the extracted Na, both 0
    assert out["na"].tolist() == [0.0, 0.0]
    assert any("Na at 2 sample(s): S1 (0-10 cm) (extracted 4" in w and "S1 (10-30 cm)" in w
               for w in said)


def test_the_salt_warning_leaves_out_corrected_samples_and_offers_the_setting() -> None:
    table = _samples(sample_id=["A", "B"], source_row=[2, 3], ca=[8.0, 8.0], mg=[3.0, 3.0],
                     k=[0.8, 0.8], na=[3.0, 3.0], ph=[8.0, 8.0],
                     na_sol=[5.0, 5.0], k_sol=[0.5, 0.5], ca_sol=[4.0, 4.0],
                     mg_sol=[1.0, 1.0])
    table["ec_1_5"] = [1.0, 1.0]  # above 0.3 dS/m (from memory, docs/SOURCES.md)
    _, said = _record(derive_samples, derive(table, ChemistrySettings()))
    salt = [w for w in said if "should have washed out soluble salts" in w]
    assert len(salt) == 1 and "samples A, B" in salt[0]
    assert "soluble_salts = 'subtract'" in salt[0]
    corrected, _ = _record(derive, table, SUBTRACT)
    corrected.loc[1, "soluble_subtracted"] = False  # as if B had no soluble value
    _, said = _record(derive_samples, corrected)
    salt = [w for w in said if "should have washed out soluble salts" in w]
    assert len(salt) == 1 and "samples B" in salt[0] and "A," not in salt[0]


# --------------------------------------------------------------------------- as a user


LAB_HEADER = ("Site,Longitude,Latitude,pH (1:5 water),EC 1:5 (dS/m),Ca (cmol/kg),Mg (cmol/kg),"
              "K (cmol/kg),Na (cmol/kg),Na 1:5 (mg/L),K 1:5 (meq/L),Ca 1:5 (mmol/L),"
              "Mg 1:5 (meq/L)")


def _farm(folder: Path, mode: str, cache: Path) -> Path:
    """One square paddock, nine sites with the hand-worked sample's figures (invented)."""
    folder.mkdir(parents=True)
    lon0, lat0, d = 145.0, -36.0, 0.002
    ring = [[lon0, lat0], [lon0 + d, lat0], [lon0 + d, lat0 + d], [lon0, lat0 + d],
            [lon0, lat0]]
    (folder / "paddocks.geojson").write_text(json.dumps({
        "type": "FeatureCollection", "features": [{
            "type": "Feature", "properties": {"name": "Salty"},
            "geometry": {"type": "Polygon", "coordinates": [ring]}}]}))
    rows = [LAB_HEADER]
    for k in range(9):
        lon, lat = lon0 + 0.0004 + 0.0006 * (k // 3), lat0 + 0.0004 + 0.0006 * (k % 3)
        rows.append(f"S{k + 1},{lon:.6f},{lat:.6f},8.0,1.0,8,3,0.8,3.0,115,0.5,2,1")
    (folder / "lab.csv").write_text("\n".join(rows) + "\n")
    (folder / "geosoil.toml").write_text(
        f'farm = "Salty"\n[samples]\nfile = "lab.csv"\n[boundaries]\n'
        f'paddocks = "paddocks.geojson"\n[chemistry]\nsoluble_salts = "{mode}"\n'
        f'[salinity]\ntexture = "clay loam"\n[output]\ncache_dir = {json.dumps(str(cache))}\n')
    return folder


def _cells(path: Path) -> np.ndarray:
    with rasterio.open(path) as src:  # an outside reader (GDAL)
        band = src.read(1, masked=True)
    return np.asarray(band.compressed(), dtype=float)


def _popup(out: Path) -> tuple[dict[str, str | None], list[str]]:
    """The first sample's popup in the run's map.html: label -> text, and its flags."""
    import re

    from geosoil import webmap

    page = (out / "map.html").read_text(encoding="utf-8")
    data = json.loads(re.search(r'<script type="application/json" id="geosoil-data">(.*?)'
                                r"</script>", page, re.S).group(1))["samples"]
    row = webmap.sample_rows(data)[0]
    return {label: v for (label, _unit), v in zip(data["fields"], row[4], strict=True)}, row[5]


def test_check_run_and_explain_subtract_the_soluble_salts(tmp_path: Path) -> None:
    project = _farm(tmp_path / "farm", "subtract", tmp_path / "cache")
    said = "exchangeable cations corrected for soluble salts"
    checked = CliRunner().invoke(cli, ["check", str(project)])
    assert checked.exit_code == 0 and said in checked.output
    # the salt warning is not given for corrected samples
    assert "should have washed out soluble salts" not in checked.output
    out = tmp_path / "out"
    ran = CliRunner().invoke(cli, ["run", str(project), "--out", str(out)])
    assert ran.exit_code == 0 and said in ran.output
    samples = pd.read_csv(out / "samples.csv")
    assert samples["na"].to_numpy() == pytest.approx(NA_LEFT)
    assert samples["na_extracted"].to_numpy() == pytest.approx(3.0)
    assert samples["esp"].to_numpy() == pytest.approx(ESP, abs=1e-4)
    # every cell of the flat field: its corrected samples' chemistry
    surfaces = out / "surfaces" / "salty"
    assert _cells(surfaces / "na.tif") == pytest.approx(NA_LEFT)
    assert _cells(surfaces / "ecec.tif") == pytest.approx(ECEC)
    assert _cells(surfaces / "esp.tif") == pytest.approx(ESP, abs=1e-4)
    record = json.loads((out / "run.json").read_text())
    block = record["soluble_salts"]
    assert block["mode"] == "subtract" and "Handbook 60" in block["source"]
    assert block["cations"]["na"]["water_l_per_kg"] == 5.0
    assert block["cations"]["na"]["samples"] == 9 and block["cations"]["na"]["clamped"] == []
    assert any(said in w for w in record["warnings"])
    report = (out / "report.html").read_text()
    assert "Soluble salts in exchangeable cations" in report and said in report
    # user trial: the map's popup showed no extracted or soluble figures under labels of
    # their own; it shows what the run used (the module's hand-worked table, 2 decimals)
    popup, flags = _popup(out)
    assert popup["Exch. Na: extracted - soluble"] == "3.00 - 2.50 = 0.50"
    assert popup["Exch. Ca: extracted - soluble"] == "8.00 - 2.00 = 6.00"
    assert popup["Exch. K: extracted - soluble"] == "0.80 - 0.25 = 0.55"
    assert popup["Soluble Na (extract)"] == "5.00"  # 115 mg/L / 22.990 mg per mmol(+)
    assert popup["Soluble Ca (extract)"] == "4.00"  # 2 mmol/L of Ca2+
    assert popup["ESP"] == "5.2" and popup["ECEC"] == "9.55"
    assert "Exch. Na" not in popup and "na_sol" not in popup and "Na 1:5 (mg/L)" not in popup
    assert not any("washing out" in f for f in flags)  # corrected: no pretreatment flag
    explained = CliRunner().invoke(cli, ["explain", str(project), "--at", "145.0010,-35.9990"])
    assert explained.exit_code == 0, explained.output
    assert "exchangeable = extracted - soluble" in explained.output
    assert "Na 3 - 2.501 = 0.4989" in explained.output


def test_warn_by_default_keeps_the_labs_figures_and_offers_the_setting(tmp_path: Path) -> None:
    project = _farm(tmp_path / "farm", "warn", tmp_path / "cache")
    out = tmp_path / "out"
    ran = CliRunner().invoke(cli, ["run", str(project), "--out", str(out)])
    assert ran.exit_code == 0
    assert "should have washed out soluble salts" in ran.output
    assert "soluble_salts = 'subtract'" in ran.output
    assert _cells(out / "surfaces" / "salty" / "esp.tif") == pytest.approx(ESP_UNCORRECTED)
    record = json.loads((out / "run.json").read_text())
    assert record["soluble_salts"]["mode"] == "warn"
    popup, flags = _popup(out)  # the lab's figures, as extracted, beside the extract's
    assert popup["Exch. Na (as extracted)"] == "3.00" and popup["ESP"] == "20.3"
    assert popup["Soluble Na (extract)"] == "5.00"
    assert not any("extracted - soluble" in label for label in popup)
    assert any("washing out" in f for f in flags)
    assert "&#39;warn&#39;" in (out / "report.html").read_text()


def test_compare_says_when_one_season_subtracted_and_the_other_not(tmp_path: Path) -> None:
    cache = tmp_path / "cache"
    last = _farm(tmp_path / "last", "warn", cache)
    this = _farm(tmp_path / "this", "subtract", cache)
    got = CliRunner().invoke(cli, ["compare", str(last), str(this), "--out",
                                   str(tmp_path / "c")])
    assert got.exit_code == 0, got.output
    record = json.loads((tmp_path / "c" / "run.json").read_text())
    assert any("soluble_salts is 'warn'" in w and "'subtract'" in w for w in record["warnings"])
    # the change is the correction's (ESP 20.270 -> 5.2248 at every site: hand arithmetic)
    esp = [r for r in record["paddocks"] if r["variable"] == "esp"][0]
    assert esp["change_mean"] == pytest.approx(ESP - ESP_UNCORRECTED, abs=1e-4)
