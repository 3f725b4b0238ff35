"""``geosoil compare``: two seasons of an invented farm, one with gypsum spread on a sodic patch.

The farm is invented for these tests (properties only, no expected figure from the code):
one 800 m x 500 m paddock sampled on an 80 m grid, a sodic patch in its south-west corner.
Last season is run (``geosoil run``), so its output folder holds a gypsum prescription on
the patch; this season the cores are taken again 15 m off the old holes and, where gypsum
was spread, sodium has been leached and calcium has taken its place (the exchange gypsum
is spread for). Elsewhere the soil is as it was.

Outside readers: GDAL (through rasterio) reopens the change rasters, pandas the CSV.
"""

from __future__ import annotations

import html
import json
import math
import shutil
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio
import shapely
from click.testing import CliRunner
from geosoil.cli.main import cli

from geosoil.change import (
    CLASS_CODES,
    PAIRED_WITHIN_M,
    change_surface,
    classify_change,
    pair_sites,
    parse_ph_conversion,
)
from geosoil.errors import SettingsError

UTM = "EPSG:32755"
X0, Y0 = 540_000.0, 6_160_000.0
W, H = 800.0, 500.0


def invoke(*args: object):  # noqa: ANN201 - click's Result
    return CliRunner().invoke(cli, [str(a) for a in args])


def _in_patch(x: float, y: float) -> bool:
    return (x - X0) < 320 and (y - Y0) < 220


def _lab(*, offset: float, treated: bool, ph_header: str = "pH (CaCl2)") -> str:
    rows = []
    k = 0
    for j in range(6):
        for i in range(10):
            x = X0 + 40 + 80 * i + offset
            y = Y0 + 40 + 80 * j + offset
            u, v = (x - X0) / W, (y - Y0) / H
            ca = 8.0 + 1.2 * math.sin(3 * u) + 0.8 * v
            mg, k_, acid = 3.0 + 0.5 * v, 0.5 + 0.1 * u, 0.1 + 0.08 * v * u
            na = 0.35 + 0.1 * u
            if _in_patch(x, y):
                na = 2.3 + 0.2 * v
                if treated:  # gypsum: Na leached, Ca in its place
                    ca += na - 0.4
                    na = 0.4
            ph = 6.2 + 0.3 * u
            k += 1
            rows.append(f"S{k:02d},{x:.1f},{y:.1f},{ph:.2f},{ca:.3f},{mg:.3f},{k_:.3f},"
                        f"{na:.3f},{acid:.3f}")
    header = (f"Sample,Easting,Northing,{ph_header},Ca (cmol/kg),Mg (cmol/kg),K (cmol/kg),"
              "Na (cmol/kg),Exch Acidity (cmol/kg)")
    return header + "\n" + "\n".join(rows) + "\n"


def _project(folder: Path, lab: str, *, name: str = "Flat", crs: str = UTM,
             shift: float = 0.0) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    box = shapely.box(X0 + shift, Y0, X0 + W + shift, Y0 + H)
    gpd.GeoDataFrame({"name": [name]}, geometry=[box], crs=UTM).to_crs(crs).to_file(
        folder / "paddocks.gpkg")
    (folder / "lab.csv").write_text(lab)
    cache = json.dumps(str(folder.parent / "cache"))
    (folder / "geosoil.toml").write_text(
        f'[samples]\nfile = "lab.csv"\ncrs = "{UTM}"\n\n[boundaries]\n'
        f'paddocks = "paddocks.gpkg"\n\n[grid]\ncell_size_m = 20.0\n\n'
        f"[output]\ncache_dir = {cache}\n")
    return folder


@pytest.fixture(scope="module")
def seasons(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    root = tmp_path_factory.mktemp("seasons")
    last = _project(root / "last", _lab(offset=0.0, treated=False))
    this = _project(root / "this", _lab(offset=15.0, treated=True))
    run = invoke("run", last, "--out", root / "last-out")
    assert run.exit_code == 0, run.output
    cmp = invoke("compare", root / "last-out", this, "--out", root / "change")
    assert cmp.exit_code == 0, cmp.output
    return {"root": root, "last": last, "this": this, "last_out": root / "last-out",
            "change": root / "change", "output": cmp.output}


# ------------------------------------------------------------------- the pure core


def test_change_sd_is_the_root_sum_of_squares() -> None:
    """Variance of a difference of independent errors: Var(a - b) = Var(a) + Var(b)."""
    s = change_surface("esp", "A", (np.array([9.0, 5.0]), np.array([3.0, 0.3])),
                       (np.array([6.0, 5.5]), np.array([4.0, 0.4])))
    np.testing.assert_allclose(s.sd_change, [5.0, 0.5])
    np.testing.assert_allclose(s.change, [-3.0, 0.5])
    # -3 is within 1.96 x 5; +0.5 within 1.96 x 0.5
    assert s.classes.tolist() == [0.0, 0.0]


def test_classes_at_the_normal_95_percent_limit() -> None:
    """Two-sided 95 % of a normal distribution: |z| > 1.96 (any statistics table)."""
    sd = np.ones(4)
    got = classify_change(np.array([1.95, 1.97, -1.97, np.nan]), sd)
    assert got[:3].tolist() == [CLASS_CODES["no change beyond error"], CLASS_CODES["rose"],
                                CLASS_CODES["fell"]]
    assert np.isnan(got[3])
    assert (classify_change(np.array([5.0]), None) == CLASS_CODES["no error surface"]).all()


def test_zone_means_state_how_the_change_relates_to_this_minus_last() -> None:
    """A zone's change is the mean of the change map; with paired sites that map is kriged
    from the sites' differences, so it need not be this mean - last mean (the trial's ESP
    3.06 -> 1.70 beside a change of -1.41); the table gives this - last beside it, equal to
    the change with independent seasons (arithmetic of means over the same cells)."""
    from geosoil.change import PAIRED_CHANGE_NOTE, paired_change_surface, zone_change_table
    from geosoil.grids import aligned_grids

    pad = gpd.GeoDataFrame({"paddock": ["A"]}, geometry=[shapely.box(X0, Y0, X0 + 100, Y0 + 50)],
                           crs=UTM)
    grid = aligned_grids(pad, cell_size_m=10.0)["A"]
    rng = np.random.default_rng(3)
    shape = (grid.height, grid.width)
    last, this = rng.uniform(2, 9, shape), rng.uniform(1, 6, shape)
    kriged_difference = (this - last) + rng.normal(0.3, 0.2, shape)  # kriged apart
    zones = gpd.GeoDataFrame(
        {"paddock": ["A"], "product": ["gypsum"], "zone": ["1"], "rate_kg_ha": [2000.0]},
        geometry=[shapely.box(X0, Y0, X0 + 50, Y0 + 50)], crs=UTM)
    for method, surface in (
            ("paired sites", paired_change_surface("esp", "A", last, this,
                                                   (kriged_difference, np.full(shape, 0.1)),
                                                   n_pairs=30)),
            ("independent", change_surface("esp", "A", (last, np.ones(shape)),
                                           (this, np.ones(shape))))):
        table = zone_change_table(zones, {"A": grid}, {("A", "esp"): surface})
        for _, row in table.iterrows():
            assert row["esp_method"] == method
            assert row["esp_this_minus_last_mean"] == pytest.approx(
                row["esp_this_mean"] - row["esp_last_mean"], abs=1e-12)
            if method == "independent":
                assert row["esp_change_mean"] == pytest.approx(
                    row["esp_this_minus_last_mean"], abs=1e-12)
            else:  # the kriged differences, here 0.3 above this - last on average
                assert row["esp_change_mean"] - row["esp_this_minus_last_mean"] == \
                    pytest.approx(0.3, abs=0.15)
        cols = list(table.columns)
        assert cols.index("esp_this_minus_last_mean") == cols.index("esp_change_mean") + 1
    assert "esp_change_mean" not in PAIRED_CHANGE_NOTE and "this_minus_last" in \
        PAIRED_CHANGE_NOTE


def test_ph_conversion_reads_the_stated_form() -> None:
    c = parse_ph_conversion("water = 1.0 * cacl2 + 0.6")
    assert (c.to_method, c.from_method, c.slope, c.intercept) == ("ph", "ph_cacl2", 1.0, 0.6)
    assert parse_ph_conversion("CaCl2 = 0.9 * water - 0.2").intercept == -0.2
    with pytest.raises(SettingsError, match="--ph-conversion"):
        parse_ph_conversion("water is cacl2 plus a bit")


def test_sites_pair_one_to_one_nearest_first() -> None:
    """Worked by hand: this season's points 1 m and 2 m from last season's first site; the
    nearer takes it, the other is left unpaired (one to one); 40 m away pairs nothing."""
    last = np.array([[0.0, 0.0], [100.0, 0.0]])
    this = np.array([[2.0, 0.0], [1.0, 0.0], [100.0, 3.0], [140.0, 0.0]])
    assert pair_sites(last, this, within=5.0).tolist() == [-1, 0, 1, -1]
    assert pair_sites(last, this, within=0.0).tolist() == [-1, -1, -1, -1]
    assert pair_sites(last, this, within=50.0).tolist() == [-1, 0, 1, -1]


def test_paired_method_needs_most_sites_paired() -> None:
    """Our own rule: at least PAIRED_LEAST_SHARE of this season's samples on paired sites."""
    from geosoil.change import PAIRED_LEAST_SHARE, SitePairing

    n = 20
    k = math.ceil(PAIRED_LEAST_SHARE * n)
    enough = np.r_[np.arange(k), -np.ones(n - k, dtype=np.int64)]
    short = np.r_[np.arange(k - 1), -np.ones(n - k + 1, dtype=np.int64)]
    assert SitePairing("A", 5.0, enough, n).paired
    assert not SitePairing("A", 5.0, short, n).paired
    assert not SitePairing("A", 0.0, np.arange(n), n).paired  # --paired-within 0: never


def test_cli_default_pairing_distance_is_the_library_one() -> None:
    from geosoil.cli.compare import compare

    opt = next(p for p in compare.params if p.name == "paired_within")
    assert opt.default == PAIRED_WITHIN_M


# ------------------------------------------------------------------- two seasons


def test_identical_seasons_change_nothing(seasons: dict[str, Path], tmp_path: Path) -> None:
    out = tmp_path / "same"
    got = invoke("compare", seasons["last_out"], seasons["last"], "--out", out)
    assert got.exit_code == 0, got.output
    tifs = sorted((out / "change").rglob("*.tif"))
    assert len(tifs) == 12  # 4 variables x change, sd, class
    for tif in tifs:
        with rasterio.open(tif) as src:
            a = src.read(1, masked=True)
        assert a.count() > 0
        if tif.name.endswith("_change.tif"):
            assert np.all(a.compressed() == 0.0), tif.name
        elif tif.name.endswith("_class.tif"):
            assert np.all(a.compressed() == CLASS_CODES["no change beyond error"]), tif.name
    table = pd.read_csv(out / "change_by_zone.csv")
    for v in ("esp", "ph", "ca_sat", "acidity"):
        assert (table[f"{v}_change_mean"] == 0).all()
        assert (table[f"{v}_no_change_pct"] == 100).all()
        assert (table[f"{v}_method"] == "paired sites").all()  # the same sites both seasons


def test_treated_zone_shows_its_change_and_the_rest_does_not(seasons: dict[str, Path]) -> None:
    table = pd.read_csv(seasons["change"] / "change_by_zone.csv")
    gyp = table[(table["product"] == "gypsum") & (table["prescribed_rate_kg_ha"] > 0)]
    rest = table[table["product"] == "none"]
    assert len(gyp) >= 1 and len(rest) == 1
    treated_area = gyp["area_ha"].sum()
    mean_fall = (gyp["esp_change_mean"] * gyp["area_ha"]).sum() / treated_area
    assert mean_fall < -5.0  # ESP about 15 % before, about 3 % after
    assert (gyp["esp_fell_pct"] * gyp["area_ha"]).sum() / treated_area > 60
    assert (gyp["ca_sat_rose_pct"] * gyp["area_ha"]).sum() / treated_area > 60
    r = rest.iloc[0]
    assert abs(r["esp_change_mean"]) < 1.0
    assert r["esp_fell_pct"] < 15 and r["esp_rose_pct"] < 5
    assert r["ph_fell_pct"] < 5 and r["ph_rose_pct"] < 5


def _shift_ph(lab: str, shift: float, *, noise: float, seed: int = 7) -> str:
    """The lab file with pH raised by ``shift`` plus normal noise of sd ``noise`` (invented)."""
    lines = lab.splitlines()
    rng = np.random.default_rng(seed)
    out = [lines[0]]
    for line in lines[1:]:
        f = line.split(",")
        f[3] = f"{float(f[3]) + shift + rng.normal(0.0, noise):.2f}"
        out.append(",".join(f))
    return "\n".join(out) + "\n"


@pytest.mark.slow
def test_resampled_sites_with_a_uniform_ph_rise_show_it(seasons: dict[str, Path],
                                                        tmp_path: Path) -> None:
    """The same 60 sites sampled again, pH up 0.6 everywhere (lab noise sd 0.03). Each site
    has its own pH (site-to-site variation of sd 0.3, the same both seasons), so each
    season's kriging sd between sites is large. The differences at the paired sites are
    kriged, and nearly every cell rose. Taking the seasons' errors as independent
    (--paired-within 0) hides most of it behind sqrt(sd_last^2 + sd_this^2), which is why
    the paired method exists (the variance of a difference of correlated errors:
    Var(a - b) = Var(a) + Var(b) - 2 Cov(a, b))."""
    before = _shift_ph(_lab(offset=0.0, treated=False), 0.0, noise=0.3, seed=1)
    last = _project(tmp_path / "before", before)
    limed = _project(tmp_path / "limed", _shift_ph(before, 0.6, noise=0.03))
    got = invoke("compare", last, limed, "--out", tmp_path / "paired")
    assert got.exit_code == 0, got.output
    assert "paired sites" in got.output
    record = json.loads((tmp_path / "paired" / "run.json").read_text())
    ph = next(r for r in record["paddocks"] if r["variable"] == "ph")
    assert ph["method"] == "paired sites" and ph["paired_sites"] == 60
    assert abs(ph["change_mean"] - 0.6) < 0.05
    assert ph["rose_pct"] > 95
    pad = record["pairing"]["paddocks"][0]
    assert (pad["paired_sites"], pad["method"]) == (60, "paired sites")
    assert any(s["season"] == "paired differences" and s["variable"] == "ph_change"
               for s in record["surfaces"])
    table = pd.read_csv(tmp_path / "paired" / "change_by_zone.csv")
    assert (table["ph_method"] == "paired sites").all()
    # this - last beside the change, as written (to 4 decimals), and said where one looks
    np.testing.assert_allclose(table["ph_this_minus_last_mean"],
                               table["ph_this_mean"] - table["ph_last_mean"], atol=2e-4)
    assert ph["this_minus_last_mean"] == pytest.approx(ph["this_mean"] - ph["last_mean"])
    report = html.unescape((tmp_path / "paired" / "report.html").read_text())
    assert "paired sites (60)" in report
    assert "not taken from the two seasons' maps" in report
    assert "not taken from the two seasons' maps" in got.output
    # unchanged variables stay unchanged at paired sites
    esp = next(r for r in record["paddocks"] if r["variable"] == "esp")
    assert esp["change_mean"] == 0.0 and esp["no_change_beyond_error_pct"] == 100
    apart = invoke("compare", last, limed, "--out", tmp_path / "apart",
                   "--paired-within", 0)
    assert apart.exit_code == 0, apart.output
    rec0 = json.loads((tmp_path / "apart" / "run.json").read_text())
    ph0 = next(r for r in rec0["paddocks"] if r["variable"] == "ph")
    assert ph0["method"] == "independent" and ph0["paired_sites"] == 0
    assert ph0["rose_pct"] < 50  # the defect the paired method mends
    assert ph0["sd_change_mean"] > 2 * ph["sd_change_mean"]


def test_outputs_reopen_and_record(seasons: dict[str, Path]) -> None:
    out = seasons["change"]
    record = json.loads((out / "run.json").read_text())
    assert record["kind"] == "season change"
    assert "independent" in record["independence"]
    # cores taken 15 m off last season's holes: not the same sites, so the seasons are
    # kriged apart and their errors taken as independent
    assert {r["method"] for r in record["paddocks"]} == {"independent"}
    assert record["pairing"]["paddocks"][0]["paired_sites"] == 0
    assert (pd.read_csv(out / "change_by_zone.csv")["esp_method"] == "independent").all()
    assert record["ph"] == "pH in CaCl2 both seasons"
    listed = set(record["files"])
    on_disk = {str(p.relative_to(out)) for p in out.rglob("*") if p.is_file()}
    assert listed == on_disk
    with rasterio.open(out / "change" / "flat" / "esp_change_sd.tif") as src:
        sd = src.read(1, masked=True)
        assert src.crs.to_epsg() == 32755
    assert sd.min() >= 0 and sd.max() > 0
    page = (out / "map.html").read_text()
    assert "ESP: changed beyond error?" in page
    report = (out / "report.html").read_text()
    assert "Change per zone of last season" in report and "gypsum" in report
    assert "Rates are advisory" in seasons["output"]


# ------------------------------------------------------------------- mismatched seasons


def test_seasons_sharing_no_paddock_are_refused(seasons: dict[str, Path],
                                                 tmp_path: Path) -> None:
    other = _project(tmp_path / "other", _lab(offset=15.0, treated=True), name="Hill")
    got = invoke("compare", seasons["last_out"], other, "--out", tmp_path / "x")
    assert got.exit_code == 1
    assert "share no paddock" in got.output and "only in this season" in got.output
    assert str(other / "geosoil.toml") in got.output
    assert not (tmp_path / "x").exists()


def test_a_paddock_of_one_season_only_is_left_out_with_a_warning(seasons: dict[str, Path],
                                                                 tmp_path: Path) -> None:
    """Last season had a paddock more (West Block, sampled); this season only Flat: Flat is
    compared, West Block named in the summary, run.json and the report."""
    last = _project(tmp_path / "last", _lab(offset=0.0, treated=False))
    west = shapely.box(X0 - 400.0, Y0, X0, Y0 + H)
    both = gpd.GeoDataFrame({"name": ["Flat", "West Block"]},
                            geometry=[shapely.box(X0, Y0, X0 + W, Y0 + H), west], crs=UTM)
    both.to_file(last / "paddocks.gpkg")
    rows = [f"W{i}{j},{X0 - 360 + 90 * i:.1f},{Y0 + 60 + 90 * j:.1f},6.0,8.0,3.0,0.5,0.4,0.1"
            for i in range(4) for j in range(5)]
    with (last / "lab.csv").open("a") as f:
        f.write("\n".join(rows) + "\n")
    out = tmp_path / "change"
    got = invoke("compare", last, seasons["this"], "--out", out)
    assert got.exit_code == 0, got.output
    said = " ".join(got.output.split())
    assert "not compared (only in last season" in said and "West Block" in said
    record = json.loads((out / "run.json").read_text())
    assert any("West Block" in w and "not compared" in w for w in record["warnings"])
    assert {r["paddock"] for r in record["paddocks"]} == {"Flat"}
    assert sorted(p.name for p in (out / "change").iterdir()) == ["flat"]
    report = " ".join((out / "report.html").read_text().split())
    assert "West Block" in report and "not compared" in report


def test_other_crs_is_refused(seasons: dict[str, Path], tmp_path: Path) -> None:
    other = _project(tmp_path / "mga", _lab(offset=15.0, treated=True), crs="EPSG:28355")
    got = invoke("compare", seasons["last_out"], other, "--out", tmp_path / "x")
    assert got.exit_code == 1, got.output
    assert "same CRS" in got.output
    assert "WGS 84 / UTM zone 55S" in got.output and "GDA94 / MGA zone 55" in got.output
    assert str(seasons["last_out"]) in got.output and str(other / "geosoil.toml") in got.output


def test_moved_boundaries_are_refused(seasons: dict[str, Path], tmp_path: Path) -> None:
    """Boundaries moved 50 m east share 750 / 850 of the union (88 %): under the 90 % rule."""
    moved = _project(tmp_path / "moved", _lab(offset=15.0, treated=True), shift=50.0)
    got = invoke("compare", seasons["last_out"], moved, "--out", tmp_path / "x")
    assert got.exit_code == 1
    assert "paddock 'Flat' has other boundaries" in got.output and "share 88 %" in got.output


def test_folder_without_run_json_is_named(seasons: dict[str, Path], tmp_path: Path) -> None:
    empty = tmp_path / "nothing"
    empty.mkdir()
    got = invoke("compare", empty, seasons["this"], "--out", tmp_path / "x")
    assert got.exit_code == 1 and "no run.json" in got.output and str(empty) in got.output
    broken = tmp_path / "broken"
    shutil.copytree(seasons["last_out"], broken)
    (broken / "samples.csv").unlink()
    got = invoke("compare", broken, seasons["this"], "--out", tmp_path / "y")
    assert got.exit_code == 1 and str(broken / "samples.csv") in got.output


def test_ph_methods_must_match_unless_converted(seasons: dict[str, Path],
                                                tmp_path: Path) -> None:
    water = _project(tmp_path / "water", _lab(offset=15.0, treated=True,
                                               ph_header="pH (water)"))
    got = invoke("compare", seasons["last_out"], water, "--out", tmp_path / "x")
    assert got.exit_code == 1
    assert "pH in CaCl2" in got.output and "pH in water" in got.output
    assert "--ph-conversion" in got.output
    ok = invoke("compare", seasons["last_out"], water, "--out", tmp_path / "y",
                "--ph-conversion", "water = cacl2 + 0.6")
    assert ok.exit_code == 0, ok.output
    record = json.loads((tmp_path / "y" / "run.json").read_text())
    assert "converted" in record["ph"] and "water = cacl2 + 0.6" in record["ph"]
    none = invoke("compare", seasons["last_out"], water, "--out", tmp_path / "z", "--no-ph")
    assert none.exit_code == 0, none.output
    assert not list((tmp_path / "z" / "change").rglob("ph_*.tif"))


@pytest.mark.browser
def test_map_and_report_open_offline_in_chromium(
    seasons: dict[str, Path], browser  # noqa: ANN001
) -> None:
    """The change map and report in a real headless Chromium, network cut off."""
    from tests.browser import artifact_path

    out = seasons["change"]
    for name in ("map.html", "report.html"):
        page = browser.new_page(width=1280, height=900)
        page.goto(out / name)
        browser.drain(0.2)
        assert page.console_errors == [] and page.dialogs == []
        remote = [u for u in page.requests if not u.startswith(("file:", "data:"))]
        assert remote == []
        page.screenshot(artifact_path(f"compare-{name}.png"), full_page=name != "map.html")
        if name == "map.html":
            legends = page.evaluate(
                "Array.from(document.querySelectorAll('#gs-legend .gs-legend-title'))"
                ".map(e => e.textContent)")
            assert legends[0] == "ESP: changed beyond error?"
        page.close()


def test_samples_at_several_depths_compare_the_top_layer(seasons: dict[str, Path],
                                                         tmp_path: Path) -> None:
    """A run's samples.csv with two layers: the top one is compared (a deeper layer with
    other values must not leak into the change), and the record says so."""
    layered = tmp_path / "layered"
    shutil.copytree(seasons["last_out"], layered)
    table = pd.read_csv(layered / "samples.csv")
    top = table.assign(depth_top_cm=0.0, depth_bottom_cm=10.0)
    deep = table.assign(depth_top_cm=10.0, depth_bottom_cm=30.0, esp=table["esp"] + 20.0)
    pd.concat([top, deep]).to_csv(layered / "samples.csv", index=False)
    got = invoke("compare", layered, seasons["last_out"], "--out", tmp_path / "c")
    assert got.exit_code == 0, got.output
    record = json.loads((tmp_path / "c" / "run.json").read_text())
    assert any("top layer (0-10 cm) is compared" in w for w in record["warnings"])
    esp = [r for r in record["paddocks"] if r["variable"] == "esp"]
    assert esp and all(r["change_mean"] == 0.0 for r in esp)


def test_the_paddock_means_are_over_the_cells_with_a_change() -> None:
    """run.json's paddock means (last, this, change, this - last) are over the same cells,
    those with a change, as the zone table's: where the seasons' surfaces cover different
    cells, independent seasons still give change = this - last (arithmetic of means)."""
    from geosoil.compare import _paddock_summary

    rng = np.random.default_rng(5)
    last, this = rng.uniform(2, 9, (6, 8)), rng.uniform(1, 6, (6, 8))
    last[0, :] = np.nan  # last season's surface misses a row this season has
    this[:, 0] = np.nan  # and this season's a column
    surface = change_surface("esp", "A", (last, np.ones(last.shape)),
                             (this, np.ones(this.shape)))
    (row,) = _paddock_summary({("A", "esp"): surface}, ["esp"], {"esp": ("ESP", "%")})
    ok = np.isfinite(this - last)
    assert row["cells"] == int(ok.sum()) == 35
    assert row["last_mean"] == pytest.approx(float(np.mean(last[ok])), abs=1e-12)
    assert row["change_mean"] == pytest.approx(row["this_minus_last_mean"], abs=1e-12)
    assert row["this_minus_last_mean"] == pytest.approx(row["this_mean"] - row["last_mean"],
                                                        abs=1e-12)
