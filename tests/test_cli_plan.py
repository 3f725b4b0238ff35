"""``geosoil plan``: the sampling plan's files, reread by an outside reader (GDAL's GPX and
GeoJSON drivers through pyogrio), its distances, its record and the output-folder guards.

The project is the small invented farm of ``tests/small_farm`` (properties only).
"""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
from click.testing import CliRunner
from geosoil.cli.main import cli
from scipy.spatial.distance import cdist, pdist

from tests.small_farm import UTM, make_project


def invoke(*args: object):  # noqa: ANN201 - click's Result
    return CliRunner().invoke(cli, [str(a) for a in args])


@pytest.fixture(scope="module")
def planned(tmp_path_factory: pytest.TempPathFactory) -> dict[str, object]:
    root = tmp_path_factory.mktemp("plan")
    farm = make_project(root / "farm", names=("Home", "Back Paddock"))
    out = root / "plan"
    result = invoke("plan", farm, "--points", 4, "--out", out)
    return {"farm": farm, "out": out, "result": result}


def test_plan_writes_the_documented_files(planned: dict[str, object]) -> None:
    result, out = planned["result"], planned["out"]
    assert result.exit_code == 0, result.output
    assert "expected reduction in mean kriging variance" in result.output
    assert "Rates are advisory" in result.output
    names = {p.name for p in Path(out).iterdir()}
    assert names == {"plan_points.geojson", "plan_points.gpx", "plan_points.csv", "run.json",
                     "map.html", "report.html"}
    record = json.loads((Path(out) / "run.json").read_text())
    assert sorted(record["files"]) == sorted(names)
    assert "van Groenigen" in record["method"]
    rows = {r["paddock"]: r for r in record["paddocks"]}
    assert set(rows) == {"Home", "Back Paddock"}
    for r in rows.values():
        assert r["new_points"] == 4
        assert r["mean_kriging_variance_after"] < r["mean_kriging_variance_before"]
        assert r["mean_variance_reduction_pct"] > 0


def test_gpx_and_geojson_reread_by_gdal(planned: dict[str, object]) -> None:
    """GPX 1.1 (topografix.com/GPX/1/1) and RFC 7946 GeoJSON, read back by GDAL's drivers."""
    out = Path(planned["out"])
    table = pd.read_csv(out / "plan_points.csv")
    assert len(table) == 8 and table["sample_id"].is_unique
    wpt = pyogrio.read_dataframe(out / "plan_points.gpx", layer="waypoints")
    assert wpt.crs.to_epsg() == 4326
    assert wpt["name"].tolist() == table["sample_id"].tolist()
    np.testing.assert_allclose(wpt.geometry.x, table["longitude"], atol=1e-7)
    np.testing.assert_allclose(wpt.geometry.y, table["latitude"], atol=1e-7)
    gj = pyogrio.read_dataframe(out / "plan_points.geojson")
    assert gj.crs.to_epsg() == 4326
    assert gj["sample_id"].tolist() == table["sample_id"].tolist()
    np.testing.assert_allclose(gj.geometry.x, table["longitude"], atol=1e-7)
    utm = gj.to_crs(UTM)
    np.testing.assert_allclose(utm.geometry.x, table["easting_m"], atol=0.05)


def test_points_inside_paddocks_and_apart(planned: dict[str, object]) -> None:
    farm, out = Path(planned["farm"]), Path(planned["out"])
    record = json.loads((out / "run.json").read_text())
    table = pd.read_csv(out / "plan_points.csv")
    paddocks = gpd.read_file(farm / "paddocks.gpkg").set_index("name")
    lab = pd.read_csv(farm / "lab.csv")
    existing = lab[["Easting", "Northing"]].to_numpy()
    for r in record["paddocks"]:
        mine = table[table["paddock"] == r["paddock"]]
        xy = mine[["easting_m", "northing_m"]].to_numpy()
        poly = paddocks.loc[r["paddock"], "geometry"]
        assert gpd.points_from_xy(xy[:, 0], xy[:, 1]).within(poly).all()
        dmin = r["min_distance_m"] - 0.05  # recorded to 0.1 m
        assert pdist(xy).min() >= dmin
        assert cdist(xy, existing).min() >= dmin


def test_plan_refuses_a_full_folder_and_replaces_its_own(planned: dict[str, object]) -> None:
    farm, out = planned["farm"], planned["out"]
    again = invoke("plan", farm, "--points", 2, "--out", out)
    assert again.exit_code == 1 and "--overwrite" in again.output
    replaced = invoke("plan", farm, "--points", 2, "--out", out, "--overwrite",
                      "--weight", "uniform")
    assert replaced.exit_code == 0, replaced.output
    assert len(pd.read_csv(Path(out) / "plan_points.csv")) == 4


def test_map_and_report_show_the_points(planned: dict[str, object]) -> None:
    out = Path(planned["out"])
    table = pd.read_csv(out / "plan_points.csv")
    page = (out / "map.html").read_text()
    report = (out / "report.html").read_text()
    assert "planned sample" in page
    for sid in table["sample_id"]:
        assert sid in page and sid in report
    assert "New sample locations" in report and "Rates are advisory" in report


def test_budget_sets_the_number_of_points(planned: dict[str, object], tmp_path: Path) -> None:
    """floor(100 / 30) = 3 samples; two paddocks of equal area: quotas 1.5 and 1.5, the
    left-over sample to the one listed first (largest remainder, ties in order)."""
    farm = planned["farm"]
    got = invoke("plan", farm, "--budget", 100, "--cost-per-sample", 30, "--out", tmp_path / "b")
    assert got.exit_code == 0, got.output
    record = json.loads((tmp_path / "b" / "run.json").read_text())
    assert record["budget"]["samples"] == 3
    assert record["budget"]["per_paddock"] == {"Home": 2, "Back Paddock": 1}
    assert "largest remainder" in record["budget"]["rule"]
    assert len(pd.read_csv(tmp_path / "b" / "plan_points.csv")) == 3
    none = invoke("plan", farm, "--budget", 20, "--cost-per-sample", 30, "--out", tmp_path / "c")
    # a command-line mistake: exit 2 naming the option, before anything is computed
    assert none.exit_code == 2 and "buys no sample" in none.output
    assert "Invalid value for '--budget'" in none.output and not (tmp_path / "c").exists()


def test_budget_and_points_options_go_together_right(planned: dict[str, object],
                                                      tmp_path: Path) -> None:
    farm = planned["farm"]
    both = invoke("plan", farm, "--points", 2, "--budget", 100, "--cost-per-sample", 10,
                  "--out", tmp_path / "a")
    assert both.exit_code == 2 and "not both" in both.output
    alone = invoke("plan", farm, "--budget", 100, "--out", tmp_path / "b")
    assert alone.exit_code == 2 and "--cost-per-sample" in alone.output
    neither = invoke("plan", farm, "--out", tmp_path / "c")
    assert neither.exit_code == 2 and "--points" in neither.output


def test_weight_by_nearness_to_the_sodic_limit(planned: dict[str, object],
                                               tmp_path: Path) -> None:
    farm = planned["farm"]
    got = invoke("plan", farm, "--points", 3, "--weight", "limit", "--out", tmp_path / "l")
    assert got.exit_code == 0, got.output
    record = json.loads((tmp_path / "l" / "run.json").read_text())
    assert [r["weighting"] for r in record["paddocks"]] == \
        ["nearness to the sodic limit (ESP 6 %)"] * 2
    bad = invoke("plan", farm, "--points", 3, "--weight", "limit", "--variable", "ca",
                 "--out", tmp_path / "m")
    assert bad.exit_code == 2 and "no class limit" in bad.output and "'--weight'" in bad.output


def test_plan_bad_options(planned: dict[str, object], tmp_path: Path) -> None:
    farm = planned["farm"]
    assert invoke("plan", farm, "--points", 0, "--out", tmp_path / "x").exit_code == 2
    bad = invoke("plan", farm, "--points", 2, "--out", tmp_path / "y", "--variable", "zinc")
    assert bad.exit_code == 2 and "Invalid value for '--variable'" in bad.output


def test_points_keep_the_edge_setback(planned: dict[str, object], tmp_path: Path) -> None:
    """Samples are kept off headlands and fence lines (common practice): every planned point
    lies at least the setback (default 20 m) from its paddock's boundary, measured by shapely."""
    from geosoil.sampling import EDGE_SETBACK_M

    farm, out = Path(planned["farm"]), Path(planned["out"])
    paddocks = gpd.read_file(farm / "paddocks.gpkg").set_index("name")

    def least_depth(folder: Path) -> dict[str, float]:
        table = pd.read_csv(folder / "plan_points.csv")
        got = {}
        for name, mine in table.groupby("paddock"):
            pts = gpd.points_from_xy(mine["easting_m"], mine["northing_m"])
            got[name] = float(pts.distance(paddocks.loc[name, "geometry"].boundary).min())
        return got

    assert EDGE_SETBACK_M == 20.0
    record = json.loads((out / "run.json").read_text())
    assert {r["edge_setback_m"] for r in record["paddocks"]} == {20.0}
    assert min(least_depth(out).values()) >= 20.0 - 1e-6
    wide = invoke("plan", farm, "--points", 4, "--edge-setback", 60, "--out", tmp_path / "w")
    assert wide.exit_code == 0, wide.output
    assert min(least_depth(tmp_path / "w").values()) >= 60.0 - 1e-6
    # 400 m x 300 m boxes: no cell lies 200 m in, so the setback falls back, with a warning
    small = invoke("plan", farm, "--points", 1, "--edge-setback", 200, "--out", tmp_path / "s")
    assert small.exit_code == 0, small.output
    assert "too small for the edge setback" in small.output
    record = json.loads((tmp_path / "s" / "run.json").read_text())
    assert any("too small for the edge setback" in w for w in record["warnings"])
    for r in record["paddocks"]:
        assert 0 < r["edge_setback_m"] < 200 and r["new_points"] == 1
        assert least_depth(tmp_path / "s")[r["paddock"]] >= r["edge_setback_m"] - 0.05


def test_variable_esp_plans_with_nas_variogram(planned: dict[str, object],
                                               tmp_path: Path) -> None:
    """ESP is derived from the kriged Na and ECEC, not kriged (README, --help): --variable esp
    plans every paddock with Na's variogram, so its points are those of --variable na (was:
    every paddock 'none' and space-filling points, exit 0)."""
    farm = planned["farm"]
    esp = invoke("plan", farm, "--points", 4, "--out", tmp_path / "esp", "--variable", "esp")
    na = invoke("plan", farm, "--points", 4, "--out", tmp_path / "na", "--variable", "na")
    assert esp.exit_code == 0 and na.exit_code == 0, esp.output + na.output
    record = json.loads((tmp_path / "esp" / "run.json").read_text())
    for row in record["paddocks"]:
        assert row["variable"] == "na" and row["variogram"] is not None
        assert "asked for esp" in row["variable_reason"]
        assert row["mean_kriging_variance_after"] < row["mean_kriging_variance_before"]
    assert "none (" not in esp.output and "asked for esp" in esp.output
    a = pd.read_csv(tmp_path / "esp" / "plan_points.csv")
    b = pd.read_csv(tmp_path / "na" / "plan_points.csv")
    np.testing.assert_allclose(a[["easting_m", "northing_m"]], b[["easting_m", "northing_m"]])


def test_a_variable_the_lab_did_not_measure_is_an_error_naming_those_it_did(
        planned: dict[str, object], tmp_path: Path) -> None:
    """The small farm's lab gives pH in CaCl2 only: --variable ph is exit 1 naming ph_cacl2
    (was: space-filling points, exit 0), and leaves no output folder."""
    farm = planned["farm"]
    bad = invoke("plan", farm, "--points", 2, "--out", tmp_path / "ph", "--variable", "ph")
    assert bad.exit_code == 1
    assert "--variable" in bad.output and "'ph'" in bad.output
    assert "ph_cacl2" in bad.output and "esp" in bad.output
    assert not (tmp_path / "ph").exists() and list(tmp_path.iterdir()) == []
