"""``geosoil run`` on a lab file with samples at two depths, as a user would give it.

The farm is written here (not the demo): two square paddocks, nine sampling sites in each,
every site sampled at 0-10 cm and at 10-30 cm. The chemistry is the same at every site of a
paddock and depth, so each surface is flat and every class and rate can be worked by hand:

=========  ========  =====  ====  ====  ===  ====  ====  ===============  ================
paddock    depth     EC1:5   Ca    Mg    K    Na   ECEC   ESP %           class (HB 60)
=========  ========  =====  ====  ====  ===  ====  ====  ===============  ================
North      0-10 cm   1.0     8     4    1    4     17    23.53            saline-sodic
North      10-30 cm  1.2     6     5    0.5  5.5   17    32.35            saline-sodic
South      0-10 cm   0.1    10     3    1    0.6   14.6   4.11            normal
South      10-30 cm  0.2     6     4    0.5  3     13.5  22.22            sodic
=========  ========  =====  ====  ====  ===  ====  ====  ===============  ================

ECe = 8.6 x EC 1:5 (clay loam multiplier, Slavich & Petterson 1993, from memory); the
classes after USDA Handbook 60 (saline at ECe >= 4 dS/m, sodic at ESP >= 15). North's topsoil
is the saline-sodic patch, South's subsoil the sodic subsoil under a normal topsoil. The
figures are invented; the expected values below are worked from the published formulas.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rasterio
from click.testing import CliRunner
from geosoil.cli.main import cli

pytestmark = pytest.mark.slow

PADDOCKS = {"North": (145.000, -36.000), "South": (145.000, -36.004)}
# pH (water), EC 1:5 (dS/m), Ca, Mg, K, Na (cmol(+)/kg)
CHEM = {
    ("North", "0-10"): (8.2, 1.0, 8.0, 4.0, 1.0, 4.0),
    ("North", "10-30"): (8.6, 1.2, 6.0, 5.0, 0.5, 5.5),
    ("South", "0-10"): (7.8, 0.1, 10.0, 3.0, 1.0, 0.6),
    ("South", "10-30"): (8.4, 0.2, 6.0, 4.0, 0.5, 3.0),
}
HEADER = ("Site,Depth,Longitude,Latitude,pH (1:5 water),EC 1:5 (dS/m),Ca (cmol/kg),"
          "Mg (cmol/kg),K (cmol/kg),Na (cmol/kg),Soluble Na (meq/L),Soluble K (meq/L),"
          "Soluble Ca (mmol/L),Soluble Mg (mg/L)")
# soluble cations of the 1:5 extract at every site: Na 10, K 2 meq/L, Ca 2 mmol/L (4 meq/L),
# Mg 24.305 mg/L (2 meq/L); CROSS (Rengasamy & Marchuk 2011, coefficients from memory)
# worked by hand: (10 + 0.56 x 2) / sqrt((4 + 0.6 x 2) / 2) = 6.896
SOLUBLE = "10,2,2,24.305"
TOML = """farm = "Two depths"
[samples]
file = "lab.csv"
[boundaries]
paddocks = "paddocks.geojson"
[salinity]
texture = "clay loam"
[soil]
depth_m = 0.10
bulk_density_g_cm3 = 1.3
{layer_bd}
[rates.gypsum]
target_esp_percent = 5.0
exchange_efficiency = 1.0
treat_depth_cm = {treat}
[output]
cache_dir = {cache}
"""

# Hand arithmetic ([derived], docs/SOURCES.md "Sodicity and gypsum"): Ca (cmol(+)/kg) =
# (ESP - 5) / 100 x ECEC (USDA Handbook 60), x 200.39 mg Ca per cmol(+) (10 x 40.078 / 2),
# x soil mass (10 000 m2 x thickness x bulk density), / Ca in pure gypsum (40.078 / 172.17).
MG_CA = 10 * 40.078 / 2
CA_IN_GYPSUM = 40.078 / 172.17


def hand_gypsum(na: float, ecec: float, thickness_m: float, bd: float) -> float:
    esp = 100 * na / ecec
    ca = max(esp - 5.0, 0.0) / 100 * ecec
    return ca * MG_CA * 1e-6 * (10_000 * thickness_m * bd * 1000) / CA_IN_GYPSUM


def write_farm(folder: Path, cache: Path, *, depths: tuple[str, ...] = ("0-10", "10-30"),
               depth_column: bool = True, treat: float = 30) -> Path:
    layer_bd = 'bulk_density_by_layer = {"10-30" = 1.5}' if "10-30" in depths else ""
    folder.mkdir(parents=True)
    features = []
    for name, (lon, lat) in PADDOCKS.items():
        d = 0.002
        ring = [[lon, lat], [lon + d, lat], [lon + d, lat + d], [lon, lat + d], [lon, lat]]
        features.append({"type": "Feature", "properties": {"name": name},
                         "geometry": {"type": "Polygon", "coordinates": [ring]}})
    (folder / "paddocks.geojson").write_text(
        json.dumps({"type": "FeatureCollection", "features": features}))
    header = HEADER if depth_column else HEADER.replace("Depth,", "")
    rows = [header]
    for name, (lon0, lat0) in PADDOCKS.items():
        for k in range(9):
            lon = lon0 + 0.0004 + 0.0006 * (k // 3)
            lat = lat0 + 0.0004 + 0.0006 * (k % 3)
            for depth in depths:
                values = ",".join(f"{v:g}" for v in CHEM[(name, depth)]) + "," + SOLUBLE
                where = f"{depth} cm," if depth_column else ""
                rows.append(f"{name[0]}{k + 1},{where}{lon:.6f},{lat:.6f},{values}")
    (folder / "lab.csv").write_text("\n".join(rows) + "\n")
    (folder / "geosoil.toml").write_text(TOML.format(treat=treat, cache=json.dumps(str(cache)),
                                                     layer_bd=layer_bd))
    return folder


def run(project: Path, out: Path) -> dict:
    result = CliRunner().invoke(cli, ["--quiet", "run", str(project), "--out", str(out)])
    assert result.exit_code == 0, result.output
    return json.loads((out / "run.json").read_text())


def cells(path: Path) -> np.ndarray:
    """The values inside the paddock (an outside reader: rasterio/GDAL)."""
    with rasterio.open(path) as src:
        a = src.read(1, masked=True)
    return np.asarray(a.compressed(), dtype=float)


@pytest.fixture(scope="module")
def two_depths(tmp_path_factory: pytest.TempPathFactory) -> dict:
    base = tmp_path_factory.mktemp("depths")
    cache = base / "cache"
    project = write_farm(base / "farm", cache)
    record = run(project, base / "out")
    return {"base": base, "cache": cache, "project": project, "out": base / "out",
            "record": record}


def test_class_maps_of_each_layer_agree_with_hand_arithmetic(two_depths: dict) -> None:
    out = two_depths["out"] / "surfaces"
    # salinity classes (0 normal, 1 saline, 2 sodic, 3 saline-sodic): see the module's table
    expected = {("north", ""): 3, ("north", "_10-30cm"): 3, ("south", ""): 0,
                ("south", "_10-30cm"): 2}
    for (pad, suffix), code in expected.items():
        got = cells(out / pad / f"salinity_class{suffix}.tif")
        assert got.size and (got == code).all(), (pad, suffix, np.unique(got))
    # ECe = 8.6 x EC 1:5 (clay loam, Slavich & Petterson 1993 multiplier, from memory)
    assert cells(out / "north" / "ece.tif") == pytest.approx(8.6 * 1.0)
    assert cells(out / "south" / "ece_10-30cm.tif") == pytest.approx(8.6 * 0.2)
    # subsoil sodicity: ESP of the 10-30 cm layer = Na / ECEC
    assert cells(out / "south" / "esp_10-30cm.tif") == pytest.approx(100 * 3.0 / 13.5)
    assert cells(out / "south" / "esp.tif") == pytest.approx(100 * 0.6 / 14.6)
    # dispersion classes (limits from memory, after Rengasamy et al. 1984): South's subsoil,
    # ESP 22.2 at EC 1:5 0.2 < 0.02 x 22.2 = 0.44 -> dispersive (2); North's topsoil, EC 1.0
    # between 0.02 x 23.5 = 0.47 and 0.1 + 0.05 x 23.5 = 1.28 -> potentially dispersive (1)
    assert (cells(out / "south" / "dispersion_class_10-30cm.tif") == 2).all()
    assert (cells(out / "north" / "dispersion_class.tif") == 1).all()


def test_per_layer_gypsum_rates_agree_with_hand_arithmetic(two_depths: dict) -> None:
    rates = two_depths["out"] / "rates"
    north_top = hand_gypsum(4.0, 17.0, 0.10, 1.3)        # 3 525 kg/ha
    north_sub = hand_gypsum(5.5, 17.0, 0.20, 1.5)        # 12 008 kg/ha
    south_sub = hand_gypsum(3.0, 13.5, 0.20, 1.5)        # 6 004 kg/ha
    assert north_top == pytest.approx(3525, abs=1) and south_sub == pytest.approx(6004, abs=1)
    for pad, top, sub in (("north", north_top, north_sub), ("south", 0.0, south_sub)):
        assert cells(rates / pad / "gypsum__gypsum_0-10cm.tif") == pytest.approx(top, rel=1e-3)
        assert cells(rates / pad / "gypsum__gypsum_10-30cm.tif") == pytest.approx(sub, rel=1e-3)
        assert cells(rates / pad / "gypsum__gypsum.tif") == pytest.approx(top + sub, rel=1e-3)
    layers = two_depths["record"]["layers"]
    assert layers["gypsum_treat_depth_cm"] == 30
    by_pad = {p["paddock"]: p for p in layers["paddocks"]}
    south = by_pad["South"]["gypsum_layers"]
    assert [(r["from_cm"], r["to_cm"], r["bulk_density_g_cm3"]) for r in south] == [
        (0, 10, 1.3), (10, 30, 1.5)]
    assert south[1]["gypsum_mean_kg_ha"] == pytest.approx(south_sub, rel=1e-3)
    # the tonnage is the paddock's area times the summed rate (one zone each here)
    tonnage = pd.read_csv(two_depths["out"] / "tonnage.csv")
    row = tonnage[(tonnage["level"] == "paddock") & (tonnage["paddock"] == "North")
                  & (tonnage["product"] == "gypsum")].iloc[0]
    assert row["tonnes"] == pytest.approx(row["area_ha"] * (north_top + north_sub) / 1000,
                                          rel=2e-3)


def test_a_shallower_treated_depth_counts_the_subsoil_pro_rata(two_depths: dict) -> None:
    project = two_depths["project"]
    text = (project / "geosoil.toml").read_text().replace("treat_depth_cm = 30",
                                                         "treat_depth_cm = 20")
    (project / "geosoil.toml").write_text(text)
    try:
        record = run(project, two_depths["base"] / "out20")
    finally:
        (project / "geosoil.toml").write_text(text.replace("treat_depth_cm = 20",
                                                           "treat_depth_cm = 30"))
    sub = cells(two_depths["base"] / "out20" / "rates" / "south" / "gypsum__gypsum_10-30cm.tif")
    # half of the 10-30 cm layer (10 of its 20 cm) is treated: half its requirement
    assert sub == pytest.approx(hand_gypsum(3.0, 13.5, 0.10, 1.5), rel=1e-3)
    assert record["surfaces_from_cache"] is True  # only the rates changed


def test_subsoil_sodicity_and_the_classes_on_the_map_and_in_the_report(two_depths: dict
                                                                       ) -> None:
    out = two_depths["out"]
    page = (out / "map.html").read_text()
    report = (out / "report.html").read_text()
    for title in ("ESP (exchangeable sodium), 10-30 cm", "Salinity class (USDA Handbook 60)"):
        assert title in page
        assert title in report
    assert "saline-sodic" in page and "dispersive" in page  # class names in the legends
    assert "Gypsum by layer, South" in report and "10-30 cm over 10-30 cm" in report
    record = two_depths["record"]
    said = [w for w in record["warnings"] if "mapped as separate layers" in w]
    assert said and "lime, calcium and the other rules read the top layer (0-10 cm)" in said[0]
    # every layer's samples in samples.csv, each with its layer
    samples = pd.read_csv(out / "samples.csv")
    assert sorted(samples["layer"].unique()) == ["0-10 cm", "10-30 cm"]
    assert len(samples) == 36 and record["samples"]["n_used"] == 36


def test_check_lists_a_depth_that_cannot_be_read(two_depths: dict, tmp_path: Path) -> None:
    project = write_farm(tmp_path / "farm", two_depths["cache"])
    lab = project / "lab.csv"
    lines = lab.read_text().splitlines()
    lines[4] = lines[4].replace(",10-30 cm,", ",subsoil,")  # row 5 as the file counts
    lab.write_text("\n".join(lines) + "\n")
    result = CliRunner().invoke(cli, ["check", str(project)])
    assert result.exit_code == 1
    assert f"{lab}, row 5, column 'Depth': 'subsoil' is not a depth range" in result.output


def test_one_depth_behaves_as_a_file_without_depth(two_depths: dict, tmp_path: Path) -> None:
    # a file whose samples are all 0-10 cm gives the same outputs as the same file without
    # its depth column (the depth column kept in samples.csv as the lab wrote it)
    cache = two_depths["cache"]
    with_depth = write_farm(tmp_path / "a", cache, depths=("0-10",), treat=0)
    without = write_farm(tmp_path / "b", cache, depths=("0-10",), depth_column=False, treat=0)
    ra = run(with_depth, tmp_path / "out_a")
    rb = run(without, tmp_path / "out_b")
    assert ra["tonnage"] == rb["tonnage"]
    assert ra["warnings"] == rb["warnings"]
    assert ra["layers"] is None and rb["layers"] is None
    assert sorted(ra["files"]) == sorted(rb["files"])
    for rel in ra["files"]:
        if rel.endswith(".tif"):
            a, b = cells(tmp_path / "out_a" / rel), cells(tmp_path / "out_b" / rel)
            assert np.array_equal(a, b, equal_nan=True), rel
    sa = pd.read_csv(tmp_path / "out_a" / "samples.csv")
    sb = pd.read_csv(tmp_path / "out_b" / "samples.csv")
    assert sa["Depth"].unique().tolist() == ["0-10 cm"]
    pd.testing.assert_frame_equal(sa.drop(columns="Depth"), sb)
    assert not any("layer" in str(c) for c in sa.columns)
    assert math.isclose(ra["tonnage"][0]["tonnes"], rb["tonnage"][0]["tonnes"])
    # treat_depth_cm = 0 is [soil] depth_m = 0.10 m: North's topsoil over 10 cm
    north = cells(tmp_path / "out_a" / "rates" / "north" / "gypsum__gypsum.tif")
    assert north == pytest.approx(hand_gypsum(4.0, 17.0, 0.10, 1.3), rel=1e-3)


def test_one_depth_stands_for_the_whole_treated_depth(two_depths: dict, tmp_path: Path) -> None:
    # samples of one depth with [rates.gypsum] treat_depth_cm = 30: their chemistry over 30 cm
    project = write_farm(tmp_path / "c", two_depths["cache"], depths=("0-10",), treat=30)
    run(project, tmp_path / "out_c")
    north = cells(tmp_path / "out_c" / "rates" / "north" / "gypsum__gypsum.tif")
    assert north == pytest.approx(hand_gypsum(4.0, 17.0, 0.30, 1.3), rel=1e-3)
    result = CliRunner().invoke(cli, ["explain", str(project), "--at", "145.0010,-35.9990"])
    assert result.exit_code == 0, result.output
    assert "samples layer (30 cm of soil)" in result.output


def test_the_pretreatment_warning_reaches_check_summary_run_json_and_report(
        two_depths: dict) -> None:
    # North's EC 1:5 of 1.0 and 1.2 dS/m is above 0.3 dS/m, where the lab should have washed
    # out soluble salts before measuring exchangeable cations (docs/SOURCES.md, from memory)
    said = "should have washed out soluble salts"
    record = two_depths["record"]
    assert any(said in w and "N1 (0-10 cm)" in w and "N1 (10-30 cm)" in w
               for w in record["warnings"])
    assert said in (two_depths["out"] / "report.html").read_text()
    checked = CliRunner().invoke(cli, ["check", str(two_depths["project"])])
    assert checked.exit_code == 0 and said in checked.output
    ran = CliRunner().invoke(cli, ["run", str(two_depths["project"]), "--out",
                                   str(two_depths["base"] / "out_summary")])
    assert ran.exit_code == 0 and said in ran.output


@pytest.mark.browser
def test_browser_class_layers_show_with_their_legend(
    two_depths: dict, browser  # noqa: ANN001
) -> None:
    """The salinity and dispersion classes of each layer, each switched on alone, show their
    class names in the legend (the map opened offline in headless Chromium)."""
    from tests.browser import artifact_path

    names = {"salinity_class": ["normal", "saline", "sodic", "saline-sodic"],
             "dispersion_class": ["flocculated", "potentially dispersive", "dispersive"]}
    page = browser.new_page(width=1280, height=900)
    try:
        page.goto(two_depths["out"] / "map.html")
        browser.drain(0.2)
        for key in ("salinity_class", "dispersion_class", "salinity_class_10-30cm",
                    "esp_10-30cm"):
            got = page.evaluate(
                f"""(async (id) => {{
                  const api = window.geosoilMap;
                  api.show({{surface: id, product: null}});
                  await api.surfaces[id].getElement().decode();
                  const entries = document.querySelectorAll('#gs-legend .gs-legend-entry');
                  return {{n: entries.length, surface: entries[0].dataset.surface,
                          text: entries[0].textContent,
                          labels: Array.from(entries[0].querySelectorAll('li')).map(
                            li => li.textContent.trim())}};
                }})({json.dumps(key)})""")
            assert got["n"] == 1 and got["surface"] == key
            base = key.replace("_10-30cm", "")
            if base in names:
                assert [lab for lab in got["labels"] if lab] [::-1] == names[base] or \
                    sorted(lab for lab in got["labels"] if lab) == sorted(names[base]), got
            if key.endswith("_10-30cm"):
                assert "10-30 cm" in got["text"]
        page.screenshot(artifact_path("depths-subsoil-esp.png"))
        assert page.console_errors == []
    finally:
        page.close()


def test_gypsum_water_per_zone_with_the_leaching_caution(two_depths: dict) -> None:
    # pure gypsum dissolves to about 2.5 g/L (common practice): 1 t/ha = 100 g/m2 needs
    # 40 L/m2 = 40 mm [derived]; each paddock is one gypsum zone here
    rows = {r["paddock"]: r for r in two_depths["record"]["salinity"]["gypsum_water"]}
    north = hand_gypsum(4.0, 17.0, 0.10, 1.3) + hand_gypsum(5.5, 17.0, 0.20, 1.5)
    south = hand_gypsum(3.0, 13.5, 0.20, 1.5)
    assert rows["North"]["water_mm"] == pytest.approx(north / 1000 * 40, rel=1e-3)
    assert rows["South"]["water_mm"] == pytest.approx(south / 1000 * 40, rel=1e-3)
    # South's topsoil is not sodic but the subsoil gypsum treats is (ESP 22 >= 15): the
    # sodium must be leached there too, so the caution stands
    assert rows["South"]["leaching_esp_share"] == 1.0 and rows["South"]["leaching_caution"]
    report = (two_depths["out"] / "report.html").read_text()
    assert "water to dissolve (mm)" in report
    assert f">{south / 1000 * 40:.0f}<" in report
    assert "needed: ESP ≥ 15 % on 100 % of the zone; the soil must drain" in report


def test_cross_from_the_labs_soluble_cations_per_sample_and_per_cell(two_depths: dict) -> None:
    samples = pd.read_csv(two_depths["out"] / "samples.csv")
    assert samples["cross"].to_numpy() == pytest.approx(6.896, abs=5e-4)
    for name in ("cross.tif", "cross_10-30cm.tif"):
        assert cells(two_depths["out"] / "surfaces" / "south" / name) == pytest.approx(
            11.12 / math.sqrt(2.6))
    # the map's layer (its data are JSON in the page, "&" written as \u0026)
    assert "CROSS (Rengasamy \\u0026 Marchuk 2011)" in (two_depths["out"] / "map.html").read_text()


def test_map_popups_carry_the_deeper_samples_of_the_same_place(two_depths: dict) -> None:
    from geosoil import project as project_mod
    from geosoil.outputs import map_samples, sample_fields
    from geosoil.pipeline import compute

    farm = compute(project_mod.load_project(two_depths["project"] / "geosoil.toml"))
    shown = map_samples(farm)
    assert len(shown) == 18  # the top layer's points
    s1 = shown[shown["sample_id"] == "S1"].iloc[0]
    assert s1["esp_10-30cm"] == pytest.approx(100 * 3.0 / 13.5)
    assert s1["salinity_class_10-30cm"] == "sodic" and s1["salinity_class"] == "normal"
    labels = [f.label for f in sample_fields(farm)]
    assert "ESP, 10-30 cm" in labels and "Salinity class, 10-30 cm" in labels
    assert "Layer" in labels and "depth_top_cm" not in labels


def test_a_paddock_not_sampled_at_a_depth_is_said_in_check_and_run(two_depths: dict,
                                                                     tmp_path: Path) -> None:
    project = write_farm(tmp_path / "farm", two_depths["cache"])
    lab = project / "lab.csv"
    lines = [line for line in lab.read_text().splitlines()
             if not (line.startswith("S") and ",10-30 cm," in line)]
    lab.write_text("\n".join(lines) + "\n")
    said = "paddock 'South' has no ESP at 10-30 cm: the layer above stands for that soil"
    checked = CliRunner().invoke(cli, ["check", str(project)])
    assert checked.exit_code == 0 and said in checked.output
    record = run(project, tmp_path / "out")
    assert sum(said in w for w in record["warnings"]) == 1
    # South's topsoil (ESP 4.1, below the target 5) stands for 0-30 cm: no gypsum
    south = {p["paddock"]: p for p in record["layers"]["paddocks"]}["South"]
    assert [(r["layer"], r["from_cm"], r["to_cm"]) for r in south["gypsum_layers"]] == [
        ("0-10 cm", 0, 30)]
    assert cells(tmp_path / "out" / "rates" / "south" / "gypsum__gypsum.tif").max() == 0
