"""``geosoil compare`` of two seasons sampled at several depths: every layer both have.

An invented farm (properties and hand arithmetic only): one square paddock, nine sites,
the same chemistry at every site of a season and depth, so every kriged surface is flat and
the change of each layer is the hand-worked difference below. Last season was sampled at
0-10, 10-30 and 30-60 cm and run (its output folder is compared); this season at 0-10,
10-30 and 60-90 cm (its project is compared). The layers both seasons have are 0-10 and
10-30 cm; 30-60 cm (last only) and 60-90 cm (this only) are named in a warning.

Hand arithmetic (ECEC = Ca + Mg + K + Na, acidity 0 at pH in water >= 7: common practice;
ESP = 100 Na / ECEC, Ca saturation = 100 Ca / ECEC, docs/SOURCES.md "Sodicity and gypsum"):

=======  ======  ====  ====  ===  ====  ====  =======  =============  ===
layer    season  Ca    Mg    K    Na    ECEC  ESP %    Ca sat. %      pH
=======  ======  ====  ====  ===  ====  ====  =======  =============  ===
0-10     last    8.0   3.0   0.5  1.5   13.0  11.5385  61.5385        7.5
0-10     this    9.5   3.0   0.5  0.5   13.5   3.7037  70.3704        7.6
10-30    last    6.0   5.0   0.5  3.5   15.0  23.3333  40.0000        8.0
10-30    this    7.0   5.0   0.5  2.5   15.0  16.6667  46.6667        8.2
=======  ======  ====  ====  ===  ====  ====  =======  =============  ===

Changes (this - last): 0-10 cm ESP -7.8348, Ca saturation +8.8319, pH +0.1; 10-30 cm ESP
-6.6667, Ca saturation +6.6667, pH +0.2.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rasterio
from click.testing import CliRunner
from geosoil.cli.main import cli

pytestmark = pytest.mark.slow

LON0, LAT0, D = 145.0, -36.0, 0.002
# (Ca, Mg, K, Na, pH in water) per (season, depth)
CHEM = {
    ("last", "0-10"): (8.0, 3.0, 0.5, 1.5, 7.5),
    ("last", "10-30"): (6.0, 5.0, 0.5, 3.5, 8.0),
    ("last", "30-60"): (5.0, 6.0, 0.4, 5.0, 8.5),
    ("this", "0-10"): (9.5, 3.0, 0.5, 0.5, 7.6),
    ("this", "10-30"): (7.0, 5.0, 0.5, 2.5, 8.2),
    ("this", "60-90"): (4.0, 7.0, 0.3, 6.0, 8.8),
}
DEPTHS = {"last": ("0-10", "10-30", "30-60"), "this": ("0-10", "10-30", "60-90")}


def esp(ca: float, mg: float, k: float, na: float) -> float:
    return 100 * na / (ca + mg + k + na)


def ca_sat(ca: float, mg: float, k: float, na: float) -> float:
    return 100 * ca / (ca + mg + k + na)


def hand(variable: str, depth: str) -> float:
    """The change of a layer worked from the table above (this - last)."""
    a, b = CHEM[("last", depth)], CHEM[("this", depth)]
    if variable == "ph":
        return b[4] - a[4]
    f = esp if variable == "esp" else ca_sat
    return f(*b[:4]) - f(*a[:4])


def _season(folder: Path, season: str, cache: Path) -> Path:
    folder.mkdir(parents=True)
    ring = [[LON0, LAT0], [LON0 + D, LAT0], [LON0 + D, LAT0 + D], [LON0, LAT0 + D],
            [LON0, LAT0]]
    (folder / "paddocks.geojson").write_text(json.dumps({
        "type": "FeatureCollection", "features": [{
            "type": "Feature", "properties": {"name": "Home"},
            "geometry": {"type": "Polygon", "coordinates": [ring]}}]}))
    rows = ["Site,Depth,Longitude,Latitude,Ca (cmol/kg),Mg (cmol/kg),K (cmol/kg),"
            "Na (cmol/kg),pH (1:5 water)"]
    for k in range(9):
        lon = LON0 + 0.0004 + 0.0006 * (k // 3)
        lat = LAT0 + 0.0004 + 0.0006 * (k % 3)
        for depth in DEPTHS[season]:
            values = ",".join(f"{v:g}" for v in CHEM[(season, depth)])
            rows.append(f"H{k + 1},{depth} cm,{lon:.6f},{lat:.6f},{values}")
    (folder / "lab.csv").write_text("\n".join(rows) + "\n")
    (folder / "geosoil.toml").write_text(
        'farm = "Layers"\n[samples]\nfile = "lab.csv"\n[boundaries]\n'
        'paddocks = "paddocks.geojson"\n[rates.gypsum]\ntreat_depth_cm = 30\n'
        f"[output]\ncache_dir = {json.dumps(str(cache))}\n")
    return folder


@pytest.fixture(scope="module")
def compared(tmp_path_factory: pytest.TempPathFactory) -> dict:
    root = tmp_path_factory.mktemp("layers")
    cache = root / "cache"
    last = _season(root / "last", "last", cache)
    this = _season(root / "this", "this", cache)
    ran = CliRunner().invoke(cli, ["run", str(last), "--out", str(root / "last-out")])
    assert ran.exit_code == 0, ran.output
    got = CliRunner().invoke(cli, ["compare", str(root / "last-out"), str(this), "--out",
                                   str(root / "change")])
    assert got.exit_code == 0, got.output
    out = root / "change"
    return {"root": root, "out": out, "output": got.output, "this": this,
            "record": json.loads((out / "run.json").read_text())}


def _cells(path: Path) -> np.ndarray:
    with rasterio.open(path) as src:  # an outside reader (GDAL)
        return np.asarray(src.read(1, masked=True).compressed(), dtype=float)


def test_each_common_layer_has_its_change_in_the_rasters(compared: dict) -> None:
    folder = compared["out"] / "change" / "home"
    for v in ("esp", "ca_sat", "ph"):
        assert _cells(folder / f"{v}_change.tif") == pytest.approx(hand(v, "0-10"), abs=1e-6)
        assert _cells(folder / f"{v}_10-30cm_change.tif") == pytest.approx(
            hand(v, "10-30"), abs=1e-6)
    assert not list(folder.glob("*30-60cm*")) and not list(folder.glob("*60-90cm*"))


def test_change_by_zone_has_each_layer(compared: dict) -> None:
    table = pd.read_csv(compared["out"] / "change_by_zone.csv")
    assert len(table) >= 1
    for v in ("esp", "ca_sat", "ph"):
        for depth, col in (("0-10", f"{v}_change_mean"), ("10-30", f"{v}_10-30cm_change_mean")):
            vals = table.loc[table["cells"] > 0, col]
            assert len(vals) and vals.to_numpy() == pytest.approx(hand(v, depth), abs=1e-4)
    # ESP fell by 7.83 at 0-10 cm and 6.67 at 10-30 cm (hand arithmetic above)
    assert hand("esp", "0-10") == pytest.approx(-7.8348, abs=1e-4)
    assert hand("esp", "10-30") == pytest.approx(-20 / 3, abs=1e-4)


def test_layers_of_one_season_are_named_and_the_record_lists_the_compared(
        compared: dict) -> None:
    record = compared["record"]
    assert record["layers"] == ["0-10 cm", "10-30 cm"]
    said = [w for w in record["warnings"] if "sampled in one season only" in w]
    assert len(said) == 1
    assert "30-60 cm (last season only)" in said[0] and "60-90 cm (this season only)" in said[0]
    assert "sampled in one season only" in compared["output"]
    rows = {(r["variable"], r["label"]): r for r in record["paddocks"]}
    assert rows[("esp_10-30cm", "ESP, 10-30 cm")]["change_mean"] == pytest.approx(
        hand("esp", "10-30"), abs=1e-6)
    assert rows[("esp", "ESP, 0-10 cm")]["change_mean"] == pytest.approx(
        hand("esp", "0-10"), abs=1e-6)
    layers = {p["layer"] for p in record["pairing"]["paddocks"]}
    assert layers == {"0-10 cm", "10-30 cm"}


def test_map_and_report_show_each_layer(compared: dict) -> None:
    page = (compared["out"] / "map.html").read_text()
    assert "ESP, 10-30 cm: change" in page and "ESP, 0-10 cm: change" in page
    report = (compared["out"] / "report.html").read_text()
    assert "ESP, 10-30 cm" in report and "Ca saturation, 10-30 cm" in report


def test_seasons_with_no_depth_in_common_are_refused(compared: dict, tmp_path: Path) -> None:
    other = _season(tmp_path / "other", "this", compared["root"] / "cache")
    lab = other / "lab.csv"
    lab.write_text(lab.read_text().replace(",0-10 cm,", ",0-15 cm,")
                   .replace(",10-30 cm,", ",15-30 cm,").replace(",60-90 cm,", ",30-45 cm,"))
    got = CliRunner().invoke(cli, ["compare", str(compared["root"] / "last-out"), str(other),
                                   "--out", str(tmp_path / "c")])
    assert got.exit_code == 1
    assert "no depth in common" in got.output and "0-15 cm" in got.output


@pytest.mark.browser
def test_the_deeper_layers_change_shows_on_the_map(compared: dict, browser) -> None:  # noqa: ANN001
    """The map opened offline in headless Chromium: the 10-30 cm change is a layer of its
    own, with its own legend title."""
    from tests.browser import artifact_path

    page = browser.new_page(width=1280, height=900)
    try:
        page.goto(compared["out"] / "map.html")
        browser.drain(0.2)
        got = page.evaluate(
            """(async () => {
              const api = window.geosoilMap;
              api.show({surface: 'esp_10-30cm_class', product: null});
              await api.surfaces['esp_10-30cm_class'].getElement().decode();
              return {keys: Object.keys(api.surfaces),
                      titles: Array.from(document.querySelectorAll(
                        '#gs-legend .gs-legend-title')).map(e => e.textContent)};
            })()""")
        assert {"esp_change", "esp_10-30cm_change", "ca_sat_10-30cm_class"} <= set(
            got["keys"])
        assert got["titles"] == ["ESP, 10-30 cm: changed beyond error?"]
        page.screenshot(artifact_path("compare-layers-map.png"))
        assert page.console_errors == []
    finally:
        page.close()


def test_a_paddock_not_sampled_at_a_deeper_layer_is_named_not_refused(tmp_path: Path) -> None:
    """Two paddocks at 0-10 and 10-30 cm, the same soil both seasons (change 0 everywhere,
    hand arithmetic); this season South was not sampled at 10-30 cm."""
    from tests.test_cli_run_depths import write_farm

    last = write_farm(tmp_path / "last", tmp_path / "cache")
    this = write_farm(tmp_path / "this", tmp_path / "cache")
    lab = this / "lab.csv"
    lab.write_text("\n".join(line for line in lab.read_text().splitlines()
                             if not (line.startswith("S") and ",10-30 cm," in line)) + "\n")
    got = CliRunner().invoke(cli, ["compare", str(last), str(this), "--out",
                                   str(tmp_path / "c")])
    assert got.exit_code == 0, got.output
    record = json.loads((tmp_path / "c" / "run.json").read_text())
    assert any("paddock 'South' has no samples at 10-30 cm in this season" in w
               for w in record["warnings"])
    change = tmp_path / "c" / "change"
    assert _cells(change / "north" / "esp_10-30cm_change.tif") == pytest.approx(0.0, abs=1e-9)
    assert _cells(change / "south" / "esp_change.tif") == pytest.approx(0.0, abs=1e-9)
    assert not (change / "south" / "esp_10-30cm_change.tif").exists()
    table = pd.read_csv(tmp_path / "c" / "change_by_zone.csv").set_index("paddock")
    assert np.isnan(table.loc["South", "esp_10-30cm_change_mean"])
    assert table.loc["North", "esp_10-30cm_change_mean"] == pytest.approx(0.0, abs=1e-9)
