"""The files a spreader and a GIS take, reopened with outside readers, zone by zone.

A copy of the demo farm with a 1.5 t/ha per-pass spreader (so lime and gypsum need
split passes) and rates shown in lb/ac (so the tonnage is in short tons) is run as a
technician would (``geosoil run``). Every machine file is read back by GDAL (pyogrio,
rasterio) and the ISO 11783-10 task data by ``isoxml``, an open-source reader on PyPI
used here only as an oracle; values are compared with the zones in the GeoPackage.
"""

from __future__ import annotations

import json
import math
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest
import rasterio
import shapely
from click.testing import CliRunner
from geosoil.cli.main import cli
from isoxml.converter.np_grid import to_numpy_array
from isoxml.util.isoxml_io import isoxml_from_path

from tests.demofarm import copy_demo
from tests.shapes import assert_clean

pytestmark = pytest.mark.slow  # one whole run of the demo copy (tens of seconds)

MAX_PASS_KG_HA = 1500.0  # the copy's spreader: 1.5 t/ha per pass
PASS_FILE = re.compile(r"^(?P<product>.+?)(_(?P<word>pass|season)(?P<k>[0-9]+))?"
                       r"(?P<kind>\.geojson|_shp\.zip|_zones\.tif|_isoxml)$")


@pytest.fixture(scope="module")
def run(tmp_path_factory: pytest.TempPathFactory, demo_run) -> dict:  # noqa: ANN001
    root = tmp_path_factory.mktemp("farmfiles")
    # its own variant: a lower pass limit and lb/ac (the surfaces from the session's cache)
    farm, _ = copy_demo(root, cache=demo_run.cache, changes={
        "spreader": {"max_per_pass": MAX_PASS_KG_HA / 1000.0},  # t/ha, the file's unit
        "output": {"rate_unit": "lb/ac"}})
    result = CliRunner().invoke(cli, ["run", str(farm), "--out", str(root / "out")])
    assert result.exit_code == 0, result.output
    out = root / "out"
    gpkg = out / "farm.gpkg"
    return {"out": out, "stdout": result.stdout, "gpkg": gpkg, "farm": farm,
            "record": json.loads((out / "run.json").read_text())}


def _zones(run: dict, product: str):  # noqa: ANN202 - GeoDataFrame
    return pyogrio.read_dataframe(run["gpkg"], layer=f"zones_{product}")


def _inner_points(zones) -> dict[tuple[str, int], tuple[float, float]]:  # noqa: ANN001
    """A point of each zone at least 15 m (1.5 cells) from its edge, in the zones' CRS."""
    pts = {}
    for paddock, zone, kind, geom in zip(zones["paddock"], zones["zone"], zones["kind"],
                                         zones.geometry, strict=True):
        inner = geom.buffer(-15.0)
        if kind != "exclusion" and not inner.is_empty:
            p = inner.representative_point()
            pts[(paddock, int(zone))] = (p.x, p.y)
    return pts


def _pass_files(out: Path) -> dict[tuple[str, str, int, str], Path]:
    """(paddock folder, product, pass (0: one pass), kind) -> path."""
    found = {}
    for folder in (out / "prescriptions").iterdir():
        if folder.name == "farm_isoxml":
            continue
        for path in folder.iterdir():
            m = PASS_FILE.match(path.name)
            assert m, path
            found[(folder.name, m["product"], int(m["k"] or 0), m["kind"])] = path
    return found


def test_every_pass_file_adds_up_to_the_prescription_and_none_exceeds_the_limit(run) -> None:
    files = _pass_files(run["out"])
    split = {(f, p) for f, p, k, _ in files if k > 0}
    assert split, "the copy's 1.5 t/ha spreader splits some zones into passes"
    for product in ("gypsum", "lime"):
        zones = _zones(run, product)
        for folder in {f for f, p, _, _ in files if p == product}:
            paddock = next(n for n in zones["paddock"].unique()
                           if n.lower().replace(" ", "-") == folder)
            want = zones[zones["paddock"] == paddock].set_index("zone")["rate_kg_ha"]
            passes = sorted(k for f, p, k, kind in files
                            if f == folder and p == product and kind == ".geojson")
            if (folder, product) in split:
                assert 0 not in passes  # no all-passes machine file beside the passes
                assert passes == list(range(1, len(passes) + 1))
            total = pd.Series(0.0, index=want.index)
            for k in passes:
                for kind in (".geojson", "_shp.zip"):
                    frame = pyogrio.read_dataframe(files[(folder, product, k, kind)])
                    rate = "rate_kg_ha" if kind == ".geojson" else "RATE_KGHA"
                    zone = "zone" if kind == ".geojson" else "ZONE"
                    per = frame.set_index(zone)[rate]
                    assert (per <= MAX_PASS_KG_HA + 1e-6).all(), (folder, product, k, kind)
                    if kind == ".geojson":
                        total = total.add(per, fill_value=0.0)
            np.testing.assert_allclose(total.loc[want.index], want, atol=1e-6)


def test_zone_geotiffs_and_shapefiles_are_lonlat_and_hold_each_zones_pass_rate(run) -> None:
    files = _pass_files(run["out"])
    to_ll = None
    for product in ("gypsum", "lime"):
        zones = _zones(run, product)
        to_ll = pyproj.Transformer.from_crs(zones.crs, 4326, always_xy=True)
        inner = _inner_points(zones)
        for (folder, prod, k, kind), path in files.items():
            if prod != product or kind not in ("_zones.tif", "_shp.zip"):
                continue
            if kind == "_shp.zip":
                assert pyogrio.read_info(path)["crs"] == "EPSG:4326"  # [output] machine_crs
                continue
            geo = pyogrio.read_dataframe(files[(folder, prod, k, ".geojson")]).set_index("zone")
            paddock = geo["paddock"].iloc[0]
            with rasterio.open(path) as src:
                assert src.crs.to_epsg() == 4326
                band = src.read(1, masked=True)
                for (pad, zone), (x, y) in inner.items():
                    if pad != paddock:
                        continue
                    lon, lat = to_ll.transform(x, y)
                    row, col = src.index(lon, lat)
                    assert band[row, col] == pytest.approx(geo.loc[zone, "rate_kg_ha"]), \
                        (path.name, zone)


def _grid_value(grid, values: np.ndarray, lon: float, lat: float) -> int:  # noqa: ANN001
    row = math.floor((lat - float(grid.minimum_north_position)) / float(grid.cell_north_size))
    col = math.floor((lon - float(grid.minimum_east_position)) / float(grid.cell_east_size))
    return int(values[row, col])


def test_task_data_read_by_an_outside_reader_matches_the_zones_per_pass(run) -> None:
    out = run["out"]
    farm_td, farm_bins = isoxml_from_path(out / "prescriptions" / "farm_isoxml" / "TASKDATA")
    farm_tasks = {t.designator: t for t in farm_td.tasks}
    pfd = {p.id: p for p in farm_td.partfields}
    names = {p.designator for p in farm_td.partfields}
    assert len(names) == len(farm_td.partfields) and len(farm_tasks) == len(farm_td.tasks)
    n_tasks = 0
    for product in ("gypsum", "lime"):
        zones = _zones(run, product)
        to_ll = pyproj.Transformer.from_crs(zones.crs, 4326, always_xy=True)
        inner = _inner_points(zones)
        for paddock in zones["paddock"].unique():
            z = zones[zones["paddock"] == paddock].set_index("zone")
            if not (z["rate_kg_ha"] > 0).any():
                continue
            n = int(z["passes"].max())
            folder = out / "prescriptions" / paddock.lower().replace(" ", "-")
            for k in range(1, n + 1):
                n_tasks += 1
                sub = f"{product}_pass{k}_isoxml" if n > 1 else f"{product}_isoxml"
                td, bins = isoxml_from_path(folder / sub / "TASKDATA")
                [task] = td.tasks
                grid = task.grids[0]
                values = to_numpy_array(bins[grid.filename], grid)
                farm_task = farm_tasks[task.designator]  # the same task in the farm's set
                assert pfd[farm_task.partfield_id_ref].designator == paddock
                fg = farm_task.grids[0]
                np.testing.assert_array_equal(to_numpy_array(farm_bins[fg.filename], fg), values)
                for (pad, zone), (x, y) in inner.items():
                    if pad != paddock:
                        continue
                    per_pass = z.loc[zone, "per_pass_kg_ha"] if z.loc[zone, "passes"] >= k else 0
                    # 1 kg/ha = 100 mg/m2 (DDI 6 is mg/m2, ISO 11783-11)
                    lon, lat = to_ll.transform(x, y)
                    assert _grid_value(grid, values, lon, lat) == round(per_pass * 100), \
                        (paddock, product, k, zone)
    assert n_tasks == len(farm_td.tasks)


def test_exclusions_are_obstacle_and_water_polygons_in_the_task_data(run) -> None:
    td, _ = isoxml_from_path(run["out"] / "prescriptions" / "farm_isoxml" / "TASKDATA")
    kinds = {(pl.type.value, pl.designator) for p in td.partfields for pl in p.polygons}
    # the demo's tree clump is an obstacle (6), its creek a water surface (3): ISO 11783-10
    # polygon types as the isoxml package's schema bindings give them
    assert ("6", "Tree clump") in kinds and ("3", "Bellbird Creek") in kinds
    assert {k for k, _ in kinds} <= {"1", "3", "6"}


def test_geopackage_layers_crs_and_styles(run) -> None:
    layers = dict(pyogrio.list_layers(run["gpkg"]))
    assert {"paddocks", "exclusions", "samples", "zones_gypsum", "zones_lime",
            "zones_lime_pass1", "zones_lime_pass2", "layer_styles"} <= set(layers)
    working = run["record"]["working_crs"]["epsg"]
    for name, geom in layers.items():
        if geom is not None:
            assert pyogrio.read_info(run["gpkg"], layer=name)["crs"] == f"EPSG:{working}", name
    samples = pyogrio.read_dataframe(run["gpkg"], layer="samples")
    assert {"sample_id", "ph_cacl2", "ecec", "esp"} <= set(samples.columns) and len(samples) > 50
    styles = pyogrio.read_dataframe(run["gpkg"], layer="layer_styles")
    spatial = {n for n, g in layers.items() if g is not None}
    assert set(styles["f_table_name"]) == spatial
    assert styles["useAsDefault"].astype(bool).all()
    for qml, sld in zip(styles["styleQML"], styles["styleSLD"], strict=True):
        assert ET.fromstring(qml.split("\n", 1)[1]).tag == "qgis"
        assert ET.fromstring(sld.encode()).tag.endswith("StyledLayerDescriptor")


def test_tonnage_in_short_tons_adds_up_after_rounding(run) -> None:
    t = pd.read_csv(run["out"] / "tonnage.csv", dtype=str, keep_default_na=False)
    assert "short_tons" in t.columns and "tonnes" not in t.columns  # lb/ac -> short tons
    assert "cost_AUD" in t.columns and "truckloads" in t.columns and "loads" not in t.columns
    assert all(re.fullmatch(r"[0-9]+\.[0-9]{2}", v) for v in t["short_tons"])

    def hundredths(rows: pd.DataFrame, col: str) -> int:
        return sum(round(float(v) * 100) for v in rows[col] if v != "")

    # lb/ac: areas in acres (area_ac), adding up after rounding as the hectares do
    assert "area_ac" in t.columns and "area_ha" not in t.columns
    for col in ("area_ac", "spread_area_ac", "short_tons", "cost_AUD", "truckloads"):
        for (pad, prod), rows in t[t["level"] == "zone"].groupby(["paddock", "product"]):
            sub = t[(t["level"] == "paddock") & (t["paddock"] == pad) & (t["product"] == prod)]
            assert hundredths(rows, col) == hundredths(sub, col), (col, pad, prod)
        for prod, rows in t[t["level"] == "paddock"].groupby("product"):
            farm = t[(t["level"] == "farm") & (t["product"] == prod)]
            assert hundredths(rows, col) == hundredths(farm, col), (col, prod)


# 1 lb/ac = 0.45359237 kg / 0.40468564224 ha = 1.12085116 kg/ha; 1 ha = 2.4710538 ac
# (NIST SP 811, appendix B: the pound and the acre by definition), written out by hand here
LB_AC_IN_KG_HA = 1.12085116
AC_IN_HA = 2.4710538


def test_passes_csv_and_the_schedule_texts_are_in_lb_ac_like_tonnage(run) -> None:
    """With rate_unit lb/ac, passes.csv is in acres and lb/ac, rounded as tonnage.csv is, and
    its schedule text (and the report's, the map's) says lb/ac: no t/ha or kg/ha beside."""
    p = pd.read_csv(run["out"] / "passes.csv", dtype=str, keep_default_na=False)
    assert list(p.columns) == ["paddock", "product", "zone", "rate_lb_ac", "passes",
                               "per_pass_lb_ac", "schedule", "area_ac"]
    assert len(p), "the copy's 1.5 t/ha spreader splits some zones"
    for _, r in p.iterrows():
        z = _zones(run, r["product"]).set_index(["paddock", "zone"]).loc[
            (r["paddock"], int(r["zone"]))]
        # hand arithmetic against the GeoPackage's kg/ha and ha (machine units)
        assert r["rate_lb_ac"] == f"{z['rate_kg_ha'] / LB_AC_IN_KG_HA:.0f}"
        assert r["per_pass_lb_ac"] == f"{z['per_pass_kg_ha'] / LB_AC_IN_KG_HA:.0f}"
        assert re.fullmatch(r"[0-9]+\.[0-9]{2}", r["area_ac"])
        assert abs(float(r["area_ac"]) - z["area_ha"] * AC_IN_HA) <= 0.005 + 1e-9
        per = f"{z['per_pass_kg_ha'] / LB_AC_IN_KG_HA:,.0f}"
        assert r["schedule"] == f"{r['passes']} passes of {per} lb/ac"
        assert z["schedule"] == r["schedule"]  # the GeoPackage's text says the same
    report = (run["out"] / "report.html").read_text()
    page = (run["out"] / "map.html").read_text()
    for text in (report, page):
        found = re.findall(r"[0-9]+ passes of [0-9.,]+ ([a-z/]+)", text)
        assert found and set(found) == {"lb/ac"}, set(found)


def test_explain_gives_every_rate_in_lb_ac(run) -> None:
    """explain shows the zone rate, its passes, the per-cell rate and the rules' product
    rates in lb/ac (the kg/ha the arithmetic runs in beside them)."""
    z = _zones(run, "lime")
    split = z[z["passes"] > 1].iloc[0]
    point = shapely.Point(*_inner_points(z.iloc[[split.name]])[(split["paddock"],
                                                              int(split["zone"]))])
    lonlat = pyproj.Transformer.from_crs(z.crs, 4326, always_xy=True).transform(point.x, point.y)
    result = CliRunner().invoke(cli, ["explain", str(run["farm"]), "--at",
                                      f"{lonlat[0]:.7f},{lonlat[1]:.7f}"])
    assert result.exit_code == 0, result.output
    text = result.stdout
    per = f"{split['per_pass_kg_ha'] / LB_AC_IN_KG_HA:,.0f}"
    total = f"{split['rate_kg_ha'] / LB_AC_IN_KG_HA:,.0f}"
    assert f"lime: zone {int(split['zone'])} (rate): {total} lb/ac as " \
           f"{int(split['passes'])} passes of {per} lb/ac" in text
    note = re.search(r"per-cell lime rate before spreader limits: ([0-9,]+) lb/ac "
                     r"\(([0-9.e+]+) kg/ha\)", text)
    assert note, text
    assert note[1] == f"{float(note[2]) / LB_AC_IN_KG_HA:,.0f}"
    assert re.search(r"\[total\] lime: .*\n.*\n.*inputs: lime = [0-9,]+ lb/ac", text)
    assert not re.search(r"result: [0-9.e+]+ kg/ha", text)  # every product rate in lb/ac


def test_shortened_names_are_reported_with_their_original(run) -> None:
    shortened = run["record"]["names_shortened"]
    farm = next(s for s in shortened if s["what"] == "farm")
    assert farm["original"] == "Bellbird Rise (invented demo farm)" and len(farm["short"]) <= 32
    assert "Names shortened" in run["stdout"] and repr(farm["short"]) in run["stdout"]


def test_task_names_fit_without_cutting_in_the_common_case(run) -> None:
    """Issue: every lime task name was cut ('Red Hill pass 1/2 Agricultural l'); a task
    is named with its product's key where the label makes it longer than ISO 11783-10's
    32 characters, and the product element keeps the whole label."""
    names: set[str] = set()
    products: set[str] = set()
    for xml in (run["out"] / "prescriptions").rglob("TASKDATA.XML"):
        root = ET.parse(xml).getroot()
        names.update(t.get("B") for t in root.iter("TSK"))
        products.update(p.get("B") for p in root.iter("PDT"))
    # the copy's 1.5 t/ha spreader puts Red Hill's lime on in three passes
    assert {"Red Hill pass 1/3 lime", "Red Hill pass 3/3 lime"} <= names
    assert "Creek Flat pass 1/3 Mined gypsum" in names  # the label, where it fits
    assert all(len(n) <= 32 for n in names)
    assert "pass 1/3 Agricultural lime" in products
    assert not [s for s in run["record"]["names_shortened"] if s["what"] == "task"]
    assert "Agricultural l'" not in run["stdout"]


def test_task_designator_of_the_default_lime_label_fits() -> None:
    """The label a new project's lime gets by default (27 characters) beside a paddock
    name gives a task name within 32 characters (ISO 11783-10 designator), not cut."""
    from geosoil.outputs import task_designator
    from geosoil.products import MATERIALS

    label = MATERIALS["lime"].label
    assert len(f"Tiny Lot {label}") > 32  # what was cut to 'Tiny Lot agricultural lime (calc'
    assert task_designator("Tiny Lot", label, "lime") == "Tiny Lot lime"
    assert task_designator("Tiny Lot", "Mined gypsum", "gypsum") == "Tiny Lot Mined gypsum"
    assert task_designator("North", label, "lime", "season 2/3") == "North season 2/3 lime"
    long = "Lower creek flat below the shearing shed"
    assert task_designator(long, label, "lime") == f"{long} {label}"  # cut later, and listed


def test_only_written_tasks_have_their_names_listed(tmp_path: Path, demo_run) -> None:  # noqa: ANN001
    """A long paddock name makes Red Hill's task names longer than ISO 11783-10's 32
    characters; Creek Flat and Windmill get no lime, so no lime task of theirs is written
    and their names are not listed as shortened (only what was written is)."""
    farm, _ = copy_demo(tmp_path, cache=demo_run.cache,
                        changes={"products.lime": {"label": "Agricultural lime, fine grade"}})
    pads = farm / "paddocks.geojson"
    pads.write_text(pads.read_text(encoding="utf-8").replace(
        '"Red Hill"', '"Red Hill below the old shearing shed"'), encoding="utf-8")
    result = CliRunner().invoke(cli, ["run", str(farm), "--out", str(tmp_path / "out")])
    assert result.exit_code == 0, result.output
    record = json.loads((tmp_path / "out" / "run.json").read_text())
    written: set[str] = set()
    for xml in (tmp_path / "out" / "prescriptions").rglob("TASKDATA.XML"):
        for el in ET.parse(xml).iter():
            written.update(el.attrib.values())
    tasks = [s for s in record["names_shortened"] if s["what"] == "task"]
    assert any(s["original"].startswith("Red Hill") for s in tasks)  # lime there: listed
    for s in record["names_shortened"]:
        assert s["short"] in written, s
        assert not s["original"].startswith(("Creek Flat pass", "Windmill"))
    assert "Creek Flat Agricultural lime, fine grade" not in {s["original"] for s in tasks}
    assert "Creek Flat Agricultural l" not in result.stdout


def _task_polygons(path: Path) -> list:
    """Every PLN of a TASKDATA.XML as a shapely polygon (lon/lat), read with ElementTree."""
    polys = []
    for pln in ET.parse(path).getroot().iter("PLN"):
        rings = {"1": [], "2": []}
        for lsg in pln.iter("LSG"):
            rings[lsg.get("A")].append([(float(p.get("D")), float(p.get("C")))
                                        for p in lsg.iter("PNT")])
        [shell] = rings["1"]
        polys.append(shapely.Polygon(shell, rings["2"]))
    return polys


@pytest.mark.parametrize("which", ["demo", "split passes"])
def test_every_written_shape_is_valid_and_has_no_sliver(which: str, run, demo_run) -> None:  # noqa: ANN001
    """Every zone, paddock and exclusion in every vector file (GeoJSON, shapefile,
    GeoPackage, task data polygons) read back by GDAL (pyogrio) or ElementTree, checked by
    GEOS (shapely): valid after the reprojection and the writing, no part under 1 m²; the
    machine files' zones, taken back to the working CRS, cover the GeoPackage's to 1 m²."""
    out = demo_run.out if which == "demo" else run["out"]
    files = sorted((out / "prescriptions").glob("*/*.geojson")) + sorted(
        (out / "prescriptions").glob("*/*_shp.zip"))
    assert files
    gpkg = out / "farm.gpkg"
    working = pyogrio.read_info(gpkg, layer="paddocks")["crs"]
    for path in files:
        back = pyogrio.read_dataframe(path)
        assert_clean(back.geometry, back.crs)
        stem = path.name.removesuffix(".geojson").removesuffix("_shp.zip")
        layer = "zones_" + stem.replace("-", "_")
        zones = pyogrio.read_dataframe(gpkg, layer=layer)
        zones = zones[zones["paddock"].str.lower().str.replace(" ", "-") == path.parent.name]
        assert len(zones) == len(back)
        area = back.to_crs(working).geometry.area.to_numpy()
        # GeoJSON coordinates are rounded to 1e-7 degrees (about 1 cm): 0.5 cm x perimeter
        tol = (0.005 * zones.geometry.length.to_numpy() + 1.0 if path.suffix == ".geojson"
               else 1.0 * np.array([len(shapely.get_parts(g)) for g in zones.geometry]))
        assert np.all(np.abs(area - zones.geometry.area.to_numpy()) <= tol), path
    for layer, geom in pyogrio.list_layers(gpkg):
        if geom is not None and "Polygon" in geom:
            back = pyogrio.read_dataframe(gpkg, layer=layer)
            assert_clean(back.geometry, back.crs)
    tasks = sorted((out / "prescriptions").glob("**/TASKDATA.XML"))
    assert tasks
    for path in tasks:
        polys = _task_polygons(path)
        assert polys
        assert_clean(polys, "EPSG:4326")


def test_the_farm_task_set_has_a_partfield_for_every_paddock(demo_run) -> None:  # noqa: ANN001
    """README: 'one partfield per paddock'. The demo's Windmill gets neither gypsum nor lime
    (no task), yet is a partfield of the farm's task set, read back by isoxml."""
    out = demo_run.out
    td, _ = isoxml_from_path(out / "prescriptions" / "farm_isoxml" / "TASKDATA")
    pads = {p.designator: p for p in td.partfields}
    tonnage = pd.read_csv(out / "tonnage.csv")
    paddocks = tonnage[tonnage["level"] == "paddock"]
    nothing = {p for p, t in paddocks.groupby("paddock")["tonnes"].sum().items() if t == 0}
    assert nothing == {"Windmill"}
    assert set(pads) == set(paddocks["paddock"])
    with_task = {t.partfield_id_ref for t in td.tasks}
    assert pads["Windmill"].id not in with_task and pads["Red Hill"].id in with_task
    assert pads["Windmill"].polygons  # its boundary


def _task_grid(folder: Path) -> tuple[np.ndarray, tuple[float, float, float, float]]:
    """A task's grid read back by isoxml: kg/ha (ISO 11783-11 DDI 6 is mg/m² = kg/ha x 100),
    north row first as a GeoTIFF has it, and (west, north, cell width, cell height)."""
    td, bins = isoxml_from_path(folder / "TASKDATA")
    grid = td.tasks[0].grids[0]
    values = to_numpy_array(bins[grid.filename], grid) / 100.0
    north = float(grid.minimum_north_position) + grid.maximum_row * float(grid.cell_north_size)
    return values[::-1], (float(grid.minimum_east_position), north,
                          float(grid.cell_east_size), float(grid.cell_north_size))


@pytest.mark.parametrize("which", ["demo", "split passes"])
def test_zone_geotiff_and_task_data_of_a_pass_hold_the_same_cells(which: str, run,
                                                                  demo_run) -> None:  # noqa: ANN001
    """A trial: the zone GeoTIFF and the task grid of the same pass were laid out apart
    (origins about 3 m apart; 105 of Creek Flat's 3 924 gypsum cells differed, 24.96 t
    against 25.02 t). In WGS 84 both are the task's grid: same origin, cells and rates."""
    out = demo_run.out if which == "demo" else run["out"]
    pairs = 0
    for folder in (out / "prescriptions").iterdir():
        for tif in folder.glob("*_zones.tif"):
            task = folder / tif.name.replace("_zones.tif", "_isoxml")
            if not task.exists():
                continue  # no zone above 0: no task
            pairs += 1
            values, (west, north, dx, dy) = _task_grid(task)
            with rasterio.open(tif) as src:
                rates = src.read(1, masked=True).filled(np.nan)
                t = src.transform
            assert rates.shape == values.shape, tif
            np.testing.assert_allclose([t.c, t.f, t.a, -t.e], [west, north, dx, dy],
                                       rtol=0, atol=1e-9)
            # the task holds 0 where the GeoTIFF has no zone (outside, exclusions)
            np.testing.assert_array_equal(np.round(np.nan_to_num(rates) * 100) / 100, values)
    assert pairs >= 3


def test_spread_area_never_exceeds_the_area_on_the_demo_and_spreader_grid_zones(
        tmp_path: Path, demo_run) -> None:  # noqa: ANN001
    """A trial: tonnage.csv showed a zone of 3.30 ha with 3.31 ha spread (spreader-grid zones,
    50 such rows on the demo's). Every row's spread area is at most its area, a zone's is its
    area where it gets product, in the demo's tonnage.csv and with spreader-grid zones."""
    from geosoil.pipeline import compute
    from geosoil.project import load_project

    farm, _ = copy_demo(tmp_path, cache=demo_run.cache,
                        changes={"zones": {"method": "spreader_grid"}})
    grid = compute(load_project(farm)).tonnage
    demo = pd.read_csv(demo_run.out / "tonnage.csv")
    assert len(grid) > 1000  # hundreds of grid cells per paddock and product
    for t in (demo, grid):
        assert (t["spread_area_ha"] <= t["area_ha"]).all()
        zones = t[t["level"] == "zone"]
        spread = zones["spread_area_ha"] > 0
        assert (zones.loc[spread, "spread_area_ha"] == zones.loc[spread, "area_ha"]).all()


def test_task_data_partfield_area_is_the_ground_area_of_the_utm_area(demo_run) -> None:  # noqa: ANN001
    """README: the task data's partfield area (PFD D, m²) is the area on the WGS 84
    ellipsoid; tonnage.csv, the report and farm.gpkg hold the flat area in the working UTM
    zone. They differ by the projection's areal scale (pyproj's factors, an outside oracle:
    about 0.9992 near the central meridian, k0² = 0.9996²), at most about 0.2 % in a zone."""
    import geopandas as gpd

    out = demo_run.out
    root = ET.parse(out / "prescriptions" / "farm_isoxml" / "TASKDATA" / "TASKDATA.XML")
    ground = {p.get("C"): float(p.get("D")) for p in root.iter("PFD")}
    pads = gpd.read_file(out / "farm.gpkg", layer="paddocks")
    tonnage = pd.read_csv(out / "tonnage.csv")
    flat_ha = tonnage[tonnage["level"] == "paddock"].groupby("paddock")["area_ha"].first()
    proj = pyproj.Proj(pads.crs)
    assert set(ground) == set(pads["paddock"]) == set(flat_ha.index)
    for name, geom in zip(pads["paddock"], pads.geometry, strict=True):
        lonlat = gpd.GeoSeries([geom.centroid], crs=pads.crs).to_crs(4326).iloc[0]
        scale = proj.get_factors(lonlat.x, lonlat.y).areal_scale
        assert ground[name] == pytest.approx(geom.area / scale, abs=max(1.0, 1e-5 * geom.area))
        # the two figures a user sees: within the UTM zone's scale of each other
        assert abs(ground[name] / (flat_ha[name] * 1e4) - 1) < 0.0025
        assert flat_ha[name] == pytest.approx(geom.area / 1e4, abs=0.006)
