"""Tests of geosoil.pipeline (and the output folder it writes): the whole job on the demo farm.

The demo farm (``demo_farm/``, invented) is run once per test session (``geosoil demo``
into a temporary folder, its surface cache there too: ``demo_run`` in ``tests/conftest.py``).
Everything read back is checked
with tools other than the writers: rasterio for the GeoTIFFs, geopandas/pyogrio
and :mod:`json` for the GeoJSON, :mod:`zipfile` and the dBASE header for the
shapefile, :mod:`hashlib` for the checksums. The paddock areas to compare with
are worked out here from the input files with shapely.

Sources of the expectations:

* GeoJSON: RFC 7946 (WGS 84 longitude/latitude, no "crs" member §4, outer
  rings counter-clockwise and holes clockwise §3.1.6).
* Shapefile field names of at most 10 characters: the dBASE header holds 11
  bytes per name, null-terminated (GDAL's shapefile driver documentation).
* Cloud Optimized GeoTIFF: GDAL reports ``LAYOUT=COG`` in the
  ``IMAGE_STRUCTURE`` metadata of a file laid out as one (OGC 21-026).
* Working CRS of the demo farm: WGS 84 / UTM zone 55S (EPSG:32755), [derived]
  from its longitude (about 147.45 E: zone floor((147.45 + 180) / 6) + 1 = 55)
  and its southern latitude; the demo's README says the same.
* Gypsum requirement grows with ESP_initial - ESP_final (USDA Handbook 60,
  Richards 1954), so a higher target ESP asks for less gypsum.
* Tonnes = area (ha) x rate (kg/ha) / 1000 [derived].
* Saturations and ESP are percentages of the ECEC, so 0-100 %; exchangeable
  amounts are never negative [derived]. pH of agricultural soils within 3-10
  [common practice].
"""

from __future__ import annotations

import dataclasses
import hashlib
import html
import json
import platform
import re
import struct
import tomllib
import xml.etree.ElementTree as ET
import zipfile
from pathlib import Path
from types import SimpleNamespace

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest
import rasterio
import shapely

import geosoil
from geosoil import demo_farm
from geosoil.job import run
from geosoil.pipeline import compute
from geosoil.project import load_project
from geosoil.variogram import MODELS
from tests.demofarm import copy_demo, snapshot

DEMO = Path(demo_farm.__file__).parent
WORKING_EPSG = 32755  # WGS 84 / UTM zone 55S ([derived], see the module notes)
PADDOCK_NAMES = ("Red Hill", "Creek Flat", "Windmill")  # demo_farm/README.md
HOSTILE_IMG = "<img src=x onerror=alert(1)>"
HOSTILE_TEMPLATE = "${7*6}"
HOSTILE_PADDOCK = "</script><script>alert(1)</script>"
HOSTILE_FARM = "<img src=x onerror=alert(2)> & </script><script>alert(2)</script>"
HOSTILE_PRODUCT = "Mined <gypsum> & \"fine\" 'grade' ]]>"


@pytest.fixture(scope="module")
def demo(demo_run):
    """The demo farm run once per test session (``demo_run`` in ``tests/conftest.py``)."""
    return demo_run


def slug_of(name: str) -> str:
    return name.lower().replace(" ", "-")


def working(frame: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    return frame.to_crs(WORKING_EPSG)


@pytest.fixture(scope="module")
def areas(demo):
    """Paddocks, the untreated areas (exclusions and buffered creek) and what is left, read
    here from the input files in the working CRS."""
    pads = working(gpd.read_file(demo.farm / "paddocks.geojson")).set_index("name").geometry
    excl = working(gpd.read_file(demo.farm / "exclusions.geojson")).geometry
    buffer_m = tomllib.loads((demo.farm / "geosoil.toml").read_text())["boundaries"][
        "creek_buffer_m"]
    creek = working(gpd.read_file(demo.farm / "creek.geojson")).geometry.buffer(buffer_m)
    untreated = shapely.union_all([*excl, *creek])
    return SimpleNamespace(
        paddock=dict(pads.items()),
        untreated=untreated,
        treated={n: g.difference(untreated) for n, g in pads.items()},
    )


# --------------------------------------------------------------------------- inputs


def test_input_files_unchanged_and_nothing_written_into_the_input_folder(demo) -> None:
    after = snapshot(demo.farm)
    assert sorted(after) == sorted(demo.before)  # no file added or removed
    for name, (data, mtime) in demo.before.items():
        assert after[name][0] == data, f"{name} changed"
        assert after[name][1] == mtime, f"{name} was touched"
    assert not demo.out.is_relative_to(demo.farm)
    assert list(demo.cache.glob("surfaces-*.json"))  # the cache went where it was told
    assert list(demo.cache.glob("surfaces-*.npz"))


# --------------------------------------------------------------------------- GeoTIFFs


def bounds_for(path: Path) -> tuple[float, float] | None:
    stem = path.stem
    if stem.endswith("_sd"):
        return (0.0, np.inf)
    if stem in ("ph", "ph_cacl2"):
        return (3.0, 10.0)  # [common practice] agricultural soils
    if stem == "esp" or stem.endswith("_sat"):
        return (0.0, 100.0)  # [derived] percent of the ECEC
    if stem in {"ca", "mg", "k", "na", "acidity", "al", "cec", "ecec"}:
        return (0.0, np.inf)  # [derived] amounts
    if stem in {"ec_1_5", "ece"}:
        return (0.0, np.inf)  # [derived] a conductivity is not negative
    if stem == "salinity_class":
        return (0.0, 3.0)  # codes of geosoil.salinity.SALINITY_CLASSES
    if stem == "dispersion_class":
        return (0.0, 2.0)  # codes of geosoil.salinity.DISPERSION_CLASSES
    if path.parent.parent.name in ("rates", "prescriptions"):
        return (0.0, np.inf)  # kg/ha of product
    return None


def test_geotiffs_crs_nodata_cog_and_physical_bounds(demo, areas) -> None:
    tifs = sorted(demo.out.rglob("*.tif"))
    folders = {p.relative_to(demo.out).parts[0] for p in tifs}
    assert folders == {"surfaces", "rates", "prescriptions"}
    by_slug = {slug_of(n): n for n in PADDOCK_NAMES}
    assert {p.parent.name for p in tifs} == set(by_slug)
    seen_sd = False
    for path in tifs:
        name = by_slug[path.parent.name]
        machine = path.parent.parent.name == "prescriptions"
        with rasterio.open(path) as src:
            # prescriptions follow [output] machine_crs: WGS 84 lon/lat by default
            assert src.crs is not None, path
            assert src.crs.to_epsg() == (4326 if machine else WORKING_EPSG), path
            structure = src.tags(ns="IMAGE_STRUCTURE")
            assert structure.get("LAYOUT") == "COG", path
            assert structure.get("COMPRESSION") == "DEFLATE", path
            assert src.nodata is not None, path
            data = src.read(1, masked=True)
            t = src.transform
            rows, cols = np.indices(data.shape)
            x, y = t.c + (cols + 0.5) * t.a, t.f + (rows + 0.5) * t.e
        if machine:
            x, y = pyproj.Transformer.from_crs(4326, WORKING_EPSG, always_xy=True).transform(x, y)
        pts = shapely.points(x, y)
        paddock = areas.paddock[name]
        treated = areas.treated[name]
        # centres within 0.5 m of an edge may go either way
        clear = shapely.distance(pts, shapely.union_all([paddock.boundary,
                                                         treated.boundary])) > 0.5
        outside = clear & ~shapely.contains_xy(paddock, x, y)
        inside = clear & shapely.contains_xy(treated, x, y)
        excluded = clear & shapely.contains_xy(paddock, x, y) & ~inside
        assert outside.any() and inside.any()
        assert data.mask[outside].all(), f"{path}: values outside the paddock"
        assert data.mask[excluded].all(), f"{path}: values in an exclusion"
        assert not data.mask[inside].any(), f"{path}: nodata inside the paddock"
        lo, hi = bounds_for(path)
        values = data.compressed()
        assert values.min() >= lo - 1e-9 and values.max() <= hi + 1e-9, (path, values.min(),
                                                                           values.max())
        seen_sd |= path.stem.endswith("_sd")
    assert seen_sd


# --------------------------------------------------------------------------- zones


@pytest.fixture(scope="module")
def prescriptions(demo):
    """(paddock name, product) -> (zones read back in the working CRS, raw GeoJSON document)."""
    out = {}
    by_slug = {slug_of(n): n for n in PADDOCK_NAMES}
    for path in sorted((demo.out / "prescriptions").rglob("*.geojson")):
        frame = gpd.read_file(path)
        doc = json.loads(path.read_text(encoding="utf-8"))
        out[(by_slug[path.parent.name], path.stem)] = (working(frame), doc, frame)
    return out


def product_of(stem: str) -> str:
    """The product of a prescription file's stem: ``lime_pass2`` -> ``lime``."""
    return re.sub(r"_(pass|season)[0-9]+$", "", stem)


def test_every_paddock_and_product_has_a_prescription(demo, prescriptions) -> None:
    products = set(demo.project.settings.products)
    assert {(n, product_of(p)) for n, p in prescriptions} == {
        (n, p) for n in PADDOCK_NAMES for p in products}
    # the demo's Red Hill lime needs two passes of a 4 t/ha spreader (passes.csv): one file each
    assert ("Red Hill", "lime_pass1") in prescriptions and ("Red Hill", "lime") not in prescriptions


def test_zones_tile_each_paddock(prescriptions, areas) -> None:
    for (name, stem), (zones, _doc, lonlat) in prescriptions.items():
        product = product_of(stem)
        where = f"{name}, {stem}"
        assert shapely.is_valid(lonlat.geometry.values).all(), where
        assert set(zones["paddock"]) == {name} and set(zones["product"]) == {product}
        paddock = areas.paddock[name]
        union = shapely.union_all(zones.geometry.values)
        tol = 1e-3 * paddock.area
        assert union.symmetric_difference(paddock).area <= tol, f"{where}: gaps"
        assert zones.geometry.area.sum() - union.area <= tol, f"{where}: overlaps"
        spread = zones[zones["kind"] != "exclusion"]
        treated = areas.treated[name].area
        assert spread.geometry.area.sum() == pytest.approx(treated, rel=1e-3), where
        np.testing.assert_allclose(zones["area_ha"], zones.geometry.area / 1e4, rtol=1e-3)
        assert zones["zone"].tolist() == list(range(1, len(zones) + 1))
        assert (zones["rate_kg_ha"] >= 0).all()


def test_farm_tonnage_is_area_times_rate_from_the_geojson(demo, prescriptions) -> None:
    table = pd.read_csv(demo.out / "tonnage.csv")
    farm = table[table["level"] == "farm"].set_index("product")
    assert set(farm.index) == set(demo.project.settings.products)
    by_hand: dict[str, float] = {}
    for (_name, stem), (zones, _doc, _ll) in prescriptions.items():
        product = product_of(stem)  # the passes add up to the prescription
        t = float((zones.geometry.area / 1e4 * zones["rate_kg_ha"]).sum() / 1000.0)
        by_hand[product] = by_hand.get(product, 0.0) + t
    for product, tonnes in by_hand.items():
        assert farm.loc[product, "tonnes"] == pytest.approx(tonnes, rel=1e-3), product
    # the demo's sodic patch and acid rise need gypsum and lime (demo_farm/README.md)
    assert by_hand["gypsum"] > 0 and by_hand["lime"] > 0


def ring_positions(geometry: dict) -> list[tuple[list, list[list]]]:
    polys = [geometry["coordinates"]] if geometry["type"] == "Polygon" else geometry["coordinates"]
    return [(rings[0], rings[1:]) for rings in polys]


def test_geojson_is_rfc7946(prescriptions) -> None:
    for key, (_zones, doc, _ll) in prescriptions.items():
        assert doc["type"] == "FeatureCollection" and "crs" not in doc, key
        for feature in doc["features"]:
            assert "crs" not in feature
            geom = feature["geometry"]
            assert geom["type"] in ("Polygon", "MultiPolygon"), key
            for outer, holes in ring_positions(geom):
                for ring in (outer, *holes):
                    xy = np.asarray(ring, dtype=float)
                    assert xy.shape[1] == 2
                    assert (np.abs(xy[:, 0]) <= 180).all() and (np.abs(xy[:, 1]) <= 90).all()
                    # [lon, lat] order: the demo farm is at about 147.45 E, 34.69 S
                    assert np.allclose(xy.mean(axis=0), [147.45, -34.69], atol=0.05)
                    assert ring[0] == ring[-1]
                assert shapely.LinearRing(outer).is_ccw, key
                for hole in holes:
                    assert not shapely.LinearRing(hole).is_ccw, key


def dbf_field_names(data: bytes) -> list[str]:
    """Field names from a dBASE III header (32-byte descriptors after a 32-byte header)."""
    header_len = struct.unpack("<H", data[8:10])[0]
    names = []
    for offset in range(32, header_len - 1, 32):
        if data[offset] == 0x0D:
            break
        names.append(data[offset:offset + 11].split(b"\0", 1)[0].decode("ascii"))
    return names


def test_shapefile_zips(demo, prescriptions) -> None:
    zips = sorted((demo.out / "prescriptions").rglob("*_shp.zip"))
    assert len(zips) == len(prescriptions)
    by_slug = {slug_of(n): n for n in PADDOCK_NAMES}
    for path in zips:
        with zipfile.ZipFile(path) as zf:
            members = zf.namelist()
            suffixes = {Path(m).suffix for m in members}
            assert {".shp", ".shx", ".dbf", ".prj", ".cpg"} <= suffixes, path
            dbf = zf.read(next(m for m in members if m.endswith(".dbf")))
        names = dbf_field_names(dbf)
        assert names and all(0 < len(n) <= 10 for n in names), names
        shp = gpd.read_file(path)
        assert shp.crs.to_epsg() == 4326  # [output] machine_crs = "wgs84", the default
        assert set(shp.columns) - {"geometry"} == set(names)
        zones = prescriptions[(by_slug[path.parent.name], path.name.removesuffix("_shp.zip"))][0]
        assert len(shp) == len(zones)
        rate_field = next(n for n in names if "RATE" in n.upper() and "RAW" not in n.upper())
        np.testing.assert_allclose(np.sort(shp[rate_field]), np.sort(zones["rate_kg_ha"]))


# --------------------------------------------------------------------------- run.json


def test_run_record_settings_inputs_versions_crs(demo) -> None:
    rec = demo.record
    toml = tomllib.loads((demo.farm / "geosoil.toml").read_text(encoding="utf-8"))
    s = rec["settings"]
    assert s["farm"] == toml["farm"]
    assert s["rates"]["gypsum"]["target_esp_percent"] == toml["rates"]["gypsum"][
        "target_esp_percent"]
    assert s["interpolation"]["log_transform"] == toml["interpolation"]["log_transform"]
    assert s["grid"]["cell_size_m"] == toml["grid"]["cell_size_m"]
    assert s["zones"] == {**s["zones"], **toml["zones"]}
    assert Path(s["samples"]["file"]) == demo.farm / toml["samples"]["file"]
    # the demo names no cache folder (none recorded): the user's cache, here
    # $XDG_CACHE_HOME/geosoil (platformdirs), checked in the test of the input folder
    assert s["output"].get("cache_dir") is None

    expected_inputs = {"lab_results.csv", "paddocks.geojson", "exclusions.geojson",
                       "creek.geojson", "zones_windmill.geojson", "geosoil.toml"}
    assert {Path(i["path"]).name for i in rec["inputs"]} == expected_inputs
    for item in rec["inputs"]:
        path = Path(item["path"])
        assert path.parent == demo.farm
        assert item["sha256"] == hashlib.sha256(path.read_bytes()).hexdigest()

    v = rec["versions"]
    assert v["geosoil"] == geosoil.__version__ == rec["geosoil"]["version"]
    assert v["python"] == platform.python_version()
    assert v["numpy"] == np.__version__ and v["rasterio"] == rasterio.__version__
    assert v["gdal"] == rasterio.__gdal_version__ and v["pyproj"] == pyproj.__version__

    crs = rec["working_crs"]
    assert crs["epsg"] == WORKING_EPSG
    assert pyproj.CRS.from_wkt(crs["wkt"]) == pyproj.CRS.from_epsg(WORKING_EPSG)
    assert isinstance(crs["reason"], str) and crs["reason"].strip()


def test_run_record_variograms_and_cross_validation(demo) -> None:
    surfaces = demo.record["surfaces"]
    # every paddock has a surface for every interpolated variable
    assert {s["paddock"] for s in surfaces} == set(PADDOCK_NAMES)
    lab = pd.read_csv(demo.farm / "lab_results.csv")
    ids = lab["Sample ID"].astype(str)
    counts = {"Red Hill": int(ids.str.startswith("RH-").sum()),
              "Creek Flat": int(ids.str.startswith("CF-").sum())}
    kriged = [s for s in surfaces if s["method"] == "ordinary kriging"]
    # the two grid-sampled paddocks are kriged (README: about one sample per hectare)
    assert {(s["paddock"], s["variable"]) for s in kriged} >= {
        (p, v) for p in counts for v in ("ca", "mg", "k", "na", "ph_cacl2")}
    for s in kriged:
        where = (s["paddock"], s["variable"])
        vg = s["variogram"]
        assert vg["model"] in MODELS and vg["nugget"] >= 0, where
        assert vg["partial_sill"] > 0 and vg["range_m"] > 0, where
        assert vg["scope"] in ("paddock", "farm"), where
        cv = s["cross_validation"]
        assert cv["n"] == s["n_samples"] == counts[s["paddock"]], where
        assert np.isfinite(cv["mean_error"]) and cv["rmse"] >= 0, where
        assert np.isfinite(cv["msse"]) and cv["msse"] > 0, where
        assert s["candidates"] and {c["model"] for c in s["candidates"]} <= set(MODELS), where
        assert vg["model"] in {c["model"] for c in s["candidates"]}, where
        assert min(c["cv_rmse"] for c in s["candidates"]) == pytest.approx(cv["rmse"]), where
    na = [s for s in kriged if s["variable"] == "na"]
    assert na and all(s["log_transform"] and s["variogram"]["scale"] == "log" for s in na)
    # Windmill: one composite sample per management zone (README)
    windmill = {s["variable"]: s for s in surfaces if s["paddock"] == "Windmill"}
    assert windmill["ca"]["method"] == "zone values"


def test_run_record_zones_totals_warnings_cautions(demo, prescriptions) -> None:
    rec = demo.record
    from_files: dict[tuple[str, str, int], float] = {}
    for (name, stem), (zones, _d, _l) in prescriptions.items():
        for z, r in zip(zones["zone"], zones["rate_kg_ha"], strict=True):
            key = (name, product_of(stem), int(z))  # the passes add up to the zone's rate
            from_files[key] = from_files.get(key, 0.0) + float(r)
    from_record = {(z["paddock"], z["product"], int(z["zone"])): float(z["rate_kg_ha"])
                   for z in rec["zones"]}
    assert from_record == pytest.approx(from_files)
    table = pd.read_csv(demo.out / "tonnage.csv")
    farm_csv = table[table["level"] == "farm"].set_index("product")["tonnes"]
    farm_rec = {t["product"]: t["tonnes"] for t in rec["tonnage"] if t["level"] == "farm"}
    assert farm_rec == pytest.approx(farm_csv.to_dict())
    assert rec["surfaces_from_cache"] is False
    assert all(isinstance(w, str) and w for w in rec["warnings"])
    # the lab file's '<0.1' Al values are below the detection limit (README), and say so
    assert any("detection" in w for w in rec["warnings"])
    assert rec["cautions"] and any("advisory" in c.lower() for c in rec["cautions"])
    assert set(rec["files"]) == {str(p.relative_to(demo.out)) for p in demo.out.rglob("*")
                                 if p.is_file()}


# --------------------------------------------------------------------------- cache


def test_surface_cache_hit_on_a_rate_change_and_miss_on_an_interpolation_change(
        demo, tmp_path) -> None:
    s = demo.project.settings
    gypsum = dataclasses.replace(s.rates.gypsum,
                                 target_esp_percent=s.rates.gypsum.target_esp_percent + 3.0)
    higher = dataclasses.replace(
        demo.project,
        settings=dataclasses.replace(s, rates=dataclasses.replace(s.rates, gypsum=gypsum)),
    )
    second = run(higher, out_dir=tmp_path / "out-target-esp")
    assert second.record["surfaces_from_cache"] is True

    def farm_gypsum(record) -> float:
        return next(t["tonnes"] for t in record["tonnage"]
                    if t["level"] == "farm" and t["product"] == "gypsum")

    # USDA Handbook 60: a higher target ESP -> less gypsum
    assert farm_gypsum(second.record) < farm_gypsum(demo.record)
    for paddock in PADDOCK_NAMES:
        rel = Path("rates") / slug_of(paddock) / "gypsum__gypsum.tif"
        with rasterio.open(demo.out / rel) as a, rasterio.open(second.out_dir / rel) as b:
            before, after = a.read(1, masked=True), b.read(1, masked=True)
        assert (after <= before + 1e-9).all(), paddock
    assert second.farm.cache_hit

    # an interpolation setting is part of the key: the cache is passed by, the surfaces are
    # made again (here by a stand-in that stops the run where the kriging would start)
    s2 = dataclasses.replace(s, interpolation=dataclasses.replace(
        s.interpolation, n_lags=s.interpolation.n_lags + 2))

    class Interpolating(Exception):
        pass

    def interpolate(*_args, **kwargs) -> None:
        assert kwargs["settings"].n_lags == s.interpolation.n_lags + 2
        raise Interpolating

    with pytest.raises(Interpolating):
        compute(dataclasses.replace(demo.project, settings=s2), interpolate=interpolate)
    # ... and the same project as the first run's is still a hit
    assert compute(demo.project, paddocks={PADDOCK_NAMES[0]}, interpolate=interpolate).cache_hit


def test_compute_for_one_paddock_gives_that_paddocks_zones_unchanged(demo) -> None:
    """explain computes rates and zones for its point's paddock only: the same zones as
    the whole farm's run [derived: each paddock's rates and zones depend on its own cells]."""
    name = PADDOCK_NAMES[-1]
    one = compute(demo.project, paddocks={name})
    assert set(one.paddocks) == {name} and one.cache_hit
    whole = demo.result.farm.paddocks[name].zones
    part = one.paddocks[name].zones
    cols = ["product", "zone", "kind", "label", "rate_kg_ha", "rate_raw_kg_ha", "n_cells"]
    assert part[cols].reset_index(drop=True).equals(whole[cols].reset_index(drop=True))
    assert shapely.equals(part.geometry.to_numpy(), whole.geometry.to_numpy()).all()
    assert set(one.zones["paddock"]) == {name}


def test_a_cache_hit_records_the_interpolation_warnings_again(demo) -> None:
    # a re-run must report what the first run did: here the samples of every paddock fall
    # short of min_samples_kriging and its surfaces come from inverse-distance weighting
    # (Windmill's from its zone samples), a miss that kriges nothing, so the test stays quick
    s = demo.project.settings
    s2 = dataclasses.replace(s, interpolation=dataclasses.replace(
        s.interpolation, min_samples_kriging=1000))
    project = dataclasses.replace(demo.project, settings=s2)
    first = compute(project)
    second = compute(project)
    assert first.cache_hit is False and second.cache_hit is True
    idw = [w for w in first.warnings if "inverse-distance weighting" in w]
    assert {w.split(",")[0] for w in idw} >= {"Red Hill", "Creek Flat"}
    assert [w for w in second.warnings if "inverse-distance weighting" in w] == idw


# --------------------------------------------------------------------------- hostile text


def unescape_all(text: str) -> str:
    """Undo JSON \\uXXXX escapes and HTML entities (to find the text a reader sees)."""
    text = re.sub(r"\\u([0-9a-fA-F]{4})", lambda m: chr(int(m.group(1), 16)), text)
    return html.unescape(html.unescape(text))


@pytest.fixture(scope="module")
def hostile(tmp_path_factory):
    base = tmp_path_factory.mktemp("hostile")
    farm, _cache = copy_demo(base)
    lab = farm / "lab_results.csv"
    lines = lab.read_text(encoding="utf-8").splitlines(keepends=True)
    assert lines[1].startswith("RH-01,") and lines[2].startswith("RH-02,")
    lines[1] = HOSTILE_IMG + lines[1][len("RH-01"):]
    lines[2] = HOSTILE_TEMPLATE + lines[2][len("RH-02"):]
    lab.write_text("".join(lines), encoding="utf-8")
    pads = json.loads((farm / "paddocks.geojson").read_text(encoding="utf-8"))
    assert pads["features"][0]["properties"]["name"] == "Red Hill"
    pads["features"][0]["properties"]["name"] = HOSTILE_PADDOCK
    (farm / "paddocks.geojson").write_text(json.dumps(pads), encoding="utf-8")
    toml = farm / "geosoil.toml"
    text, n = re.subn(r"^farm = .*$", f"farm = {json.dumps(HOSTILE_FARM)}",
                      toml.read_text(encoding="utf-8"), count=1, flags=re.M)
    assert n == 1
    text, n = re.subn(r'^label = "Mined gypsum"$', f"label = {json.dumps(HOSTILE_PRODUCT)}",
                      text, count=1, flags=re.M)
    assert n == 1
    toml.write_text(text, encoding="utf-8")
    result = run(load_project(farm), out_dir=base / "out")
    return SimpleNamespace(out=base / "out", result=result)


def test_hostile_text_reaches_map_and_report_only_escaped(hostile) -> None:
    page = (hostile.out / "map.html").read_text(encoding="utf-8")
    report = (hostile.out / "report.html").read_text(encoding="utf-8")
    for text in (page, report):
        assert "<img src=x onerror" not in text
        assert "</script><script>alert(1)" not in text
        assert "<script>alert(" not in text
    # the text did pass through (escaped), so the checks above are not vacuous
    seen = unescape_all(page)
    assert HOSTILE_IMG in seen and HOSTILE_TEMPLATE in seen and HOSTILE_PADDOCK in seen
    assert HOSTILE_FARM in seen
    assert HOSTILE_PADDOCK in unescape_all(report) and HOSTILE_FARM in unescape_all(report)
    assert HOSTILE_PRODUCT in unescape_all(report)


def test_hostile_paddock_name_gives_safe_file_names(hostile) -> None:
    for path in hostile.out.rglob("*"):
        rel = path.relative_to(hostile.out)
        # our slugs are lower case; ISO 11783-10 fixes the upper-case TASKDATA folder and files
        assert all(re.fullmatch(r"[a-z0-9._-]+|TASKDATA(\.XML)?|GRD\d{5}\.bin", part)
                   for part in rel.parts), rel
    record = json.loads((hostile.out / "run.json").read_text(encoding="utf-8"))
    assert HOSTILE_PADDOCK in {p["paddock"] for p in record["paddocks"]}
    samples = pd.read_csv(hostile.out / "samples.csv", dtype={"sample_id": str})
    assert {HOSTILE_IMG, HOSTILE_TEMPLATE} <= set(samples["sample_id"])


def test_hostile_names_leave_the_geopackage_and_its_styles_readable(hostile) -> None:
    gpkg = hostile.out / "farm.gpkg"
    pads = pyogrio.read_dataframe(gpkg, layer="paddocks")
    assert HOSTILE_PADDOCK in set(pads["paddock"])
    samples = pyogrio.read_dataframe(gpkg, layer="samples")
    assert {HOSTILE_IMG, HOSTILE_TEMPLATE} <= set(samples["sample_id"])
    styles = pyogrio.read_dataframe(gpkg, layer="layer_styles")
    assert len(styles) >= 4
    for qml, sld in zip(styles["styleQML"], styles["styleSLD"], strict=True):
        assert ET.fromstring(qml.partition("\n")[2]).tag == "qgis"  # expat reads both
        assert ET.fromstring(sld.encode("utf-8")).tag.endswith("StyledLayerDescriptor")


# --------------------------------------------------------------------------- partial lab data


def test_a_ph_only_file_gives_ph_surfaces_and_skips_the_rules(tmp_path) -> None:
    """A lab file with pH alone still runs: pH surfaces, no ECEC, every rule skipped with a
    note (issue: 'a samples file that carries only some variables still yields surfaces')."""
    farm, _cache = copy_demo(tmp_path)
    lab = pd.read_csv(farm / "lab_results.csv")
    lab[["Sample ID", "Latitude", "Longitude", "pH (CaCl2)"]].to_csv(
        farm / "lab_results.csv", index=False
    )
    project = load_project(farm)
    result = run(project, out_dir=tmp_path / "out")
    variables = {v for (_p, v) in result.farm.surfaces}
    assert variables == {"ph_cacl2"}
    tif = tmp_path / "out" / "surfaces" / "red-hill" / "ph_cacl2.tif"
    ph = rasterio.open(tif).read(1, masked=True)
    assert 3 < ph.min() and ph.max() < 10
    assert not any((tmp_path / "out" / "surfaces" / "red-hill").glob("ecec.tif"))
    skipped = " ".join(result.record["rules"]["skipped"])
    assert "gypsum" in skipped and "lime" in skipped
    assert any("no exchangeable cations" in w for w in result.warnings)
    assert float(result.tonnage.loc[result.tonnage["level"] == "farm", "tonnes"].sum()) == 0.0


def test_seasons_split_reports_this_seasons_tonnes(tmp_path, demo_run) -> None:
    """With rates split into seasons, run.json gives this season's tonnes: one per-pass rate
    on split zones, the whole rate elsewhere ([derived] area x rate / 1000)."""
    farm, _cache = copy_demo(tmp_path, cache=demo_run.cache)  # a spreader change: surfaces cached
    toml = farm / "geosoil.toml"
    text = toml.read_text(encoding="utf-8").replace(
        "[spreader]\n", '[spreader]\nsplit_into = "seasons"\n', 1
    )
    toml.write_text(text, encoding="utf-8")
    result = run(load_project(farm), out_dir=tmp_path / "out")
    assert result.farm.cache_hit
    first = result.record["first_season_tonnes"]
    zones = result.farm.zones
    for product, tonnes in first.items():
        z = zones[zones["product"] == product]
        by_hand = float((z["area_ha"] * z["per_pass_kg_ha"].fillna(z["rate_kg_ha"])).sum() / 1000)
        total = float((z["area_ha"] * z["rate_kg_ha"]).sum() / 1000)
        assert tonnes == pytest.approx(by_hand)
        assert tonnes <= total + 1e-9
    # the demo's Red Hill lime needs more than one pass (4 t/ha per pass), so this season is less
    assert first["lime"] < float(zones.loc[zones["product"] == "lime", "area_ha"].mul(
        zones.loc[zones["product"] == "lime", "rate_kg_ha"]).sum() / 1000)


# --------------------------------------------------------------------------- lab column shapes

#: One invented soil, sent in the column shapes labs use. Exchangeable acidity 2.5 cmol(+)/kg in
#: every shape: as one column, as Al 1.8 + H 0.7, or as Al alone.
_SOIL = "5.0,1.2,0.3,0.9"
_LAB_SHAPES = {
    "acidity alone": ("Exch. Acidity (cmol/kg)", "2.5", "acidity_share"),
    "Al and H apart": ("Exch Al (cmol/kg),Exch H (cmol/kg)", "1.8,0.7", "kamprath"),
    "Al alone": ("Exch Al (cmol/kg)", "2.5", "kamprath"),
}


def _flat_lab_project(folder: Path, acid_header: str, acid_values: str, ph: str) -> Path:
    """A 300 m square paddock and nine samples of one soil, through 'new' as a user would."""
    from geosoil.project import new_project

    folder.mkdir(parents=True)
    x0, y0 = 540_000.0, 6_160_000.0
    gpd.GeoDataFrame({"name": ["Flat"]}, geometry=[shapely.box(x0, y0, x0 + 300, y0 + 300)],
                     crs="EPSG:32755").to_file(folder / "paddocks.gpkg")
    rows = [f"S{i}{j},{x0 + 50 + 100 * i:.1f},{y0 + 50 + 100 * j:.1f},{ph},{_SOIL},{acid_values}"
            for i in range(3) for j in range(3)]
    (folder / "lab.csv").write_text(
        "Sample ID,Easting,Northing,pH (water),Exch Ca (cmol/kg),Exch Mg (cmol/kg),"
        f"Exch K (cmol/kg),Exch Na (cmol/kg),{acid_header}\n" + "\n".join(rows) + "\n")
    path, _notes = new_project(folder / "project", samples=folder / "lab.csv",
                               paddocks=folder / "paddocks.gpkg", crs="EPSG:32755")
    return path


@pytest.mark.parametrize("shape", list(_LAB_SHAPES))
def test_each_lab_column_shape_gives_the_rates_of_hand_arithmetic(shape, tmp_path) -> None:
    """Flat field: every cell's gypsum and lime rate equals the hand arithmetic from the
    project's own settings. Gypsum: USDA Handbook 60 (Richards 1954) with Oster et al. (1999)'s
    F, Ca in CaSO4.2H2O from its formula mass (periodictable, an outside library); lime:
    Kamprath (1970) 1.5 x Al, or exchangeable acidity brought to a share of the ECEC, as
    CaCO3 (50.04 g per mol of charge, [derived]). The ECEC counts H wherever the lab gave it
    (issue: H given apart was left out of the cells' ECEC, raising ESP and gypsum)."""
    import periodictable

    header, values, method = _LAB_SHAPES[shape]
    path = _flat_lab_project(tmp_path / "farm", header, values, ph="4.8")
    project = load_project(path)
    s = project.settings
    assert s.rates.lime.method == method  # 'new' chose the method the columns can run
    farm = compute(project, use_cache=False)
    pr = farm.paddocks["Flat"]
    mask = pr.grid.mask
    ca, mg, k, na, acidity = 5.0, 1.2, 0.3, 0.9, 2.5
    ecec = ca + mg + k + na + acidity  # 9.9 in every shape
    soil_kg_ha = 10_000 * s.soil.depth_m * s.soil.bulk_density_g_cm3 * 1000
    ca_mg_per_cmol = periodictable.Ca.mass / 2 * 10
    caco3_mg_per_cmol = periodictable.formula("CaCO3").mass / 2 * 10
    gypsum_ca = periodictable.Ca.mass / periodictable.formula("CaSO4(H2O)2").mass
    g = s.rates.gypsum
    esp = 100 * na / ecec
    gyp_cmol = (esp - g.target_esp_percent) / 100 * ecec * g.exchange_efficiency
    gypsum = gyp_cmol * ca_mg_per_cmol * 1e-6 * soil_kg_ha / gypsum_ca
    lr = s.rates.lime
    if method == "kamprath":
        al = 1.8 if shape == "Al and H apart" else 2.5
        lime_cmol = lr.kamprath_factor * al
    else:
        lime_cmol = lr.acidity_factor * max(acidity - lr.target_acidity_share_percent / 100
                                            * ecec, 0.0)
    lime = lime_cmol * caco3_mg_per_cmol * 1e-6 * soil_kg_ha / 1.0  # pure calcite by default
    np.testing.assert_allclose(pr.cells["ecec"][mask], ecec, rtol=1e-9)
    np.testing.assert_allclose(pr.rates.product_rates["gypsum"][mask], gypsum, rtol=1e-4)
    np.testing.assert_allclose(pr.rates.product_rates["lime"][mask], lime, rtol=1e-4)
    assert lime > 0 and gypsum > 0
    # the pure-material defaults are named once per product, with the keys to set
    said = [w for w in farm.warnings if "pure-material defaults" in w]
    assert len(said) == 2 and any("products.lime.cce_percent" in w for w in said)


def test_ph_in_cacl2_meets_its_own_no_lime_limit(tmp_path) -> None:
    """pH 6.6 is below the no-lime limit in water (7.0) but above the one in CaCl2 (6.4):
    the same soil gets lime when the lab reports pH in water and none when it reports pH in
    CaCl2 (common practice: pH in CaCl2 reads about 0.5-0.8 below pH in water)."""
    path = _flat_lab_project(tmp_path / "water", "Exch Al (cmol/kg)", "2.5", ph="6.6")
    water = compute(load_project(path), use_cache=False).paddocks["Flat"]
    assert np.nanmin(water.rates.product_rates["lime"]) > 0
    text = path.read_text().replace('ph = "pH (water)"', 'ph_cacl2 = "pH (water)"')
    path.write_text(text)
    cacl2 = compute(load_project(path), use_cache=False).paddocks["Flat"]
    assert np.nanmax(cacl2.rates.product_rates["lime"]) == 0
    assert any("pH (CaCl2) above 6.4" in n for n in cacl2.rates.notes)


def test_a_large_rate_is_split_by_new_s_limit_and_an_older_project_is_warned(tmp_path) -> None:
    """Issue: 'new' wrote no per-pass limit, so a large gypsum rate was prescribed as one pass
    with no word. 'new' now writes [spreader] max_per_pass_by_product (5 t/ha each, common
    practice; geosoil.spreader.COMMON_MAX_PER_PASS_KG_HA); a project without it keeps its rates
    (one pass) and gets a warning naming the paddock, product and rate."""
    from geosoil.project import new_project
    from geosoil.spreader import COMMON_MAX_PER_PASS_KG_HA

    folder = tmp_path / "farm"
    folder.mkdir()
    x0, y0 = 540_000.0, 6_160_000.0
    gpd.GeoDataFrame({"name": ["Flat"]}, geometry=[shapely.box(x0, y0, x0 + 300, y0 + 300)],
                     crs="EPSG:32755").to_file(folder / "paddocks.gpkg")
    # a strongly sodic soil (ESP about 47 %): gypsum well above 5 t/ha at 10 cm
    rows = [f"S{i}{j},{x0 + 50 + 100 * i:.1f},{y0 + 50 + 100 * j:.1f},7.2,5.0,3.0,0.8,8.0"
            for i in range(3) for j in range(3)]
    (folder / "lab.csv").write_text(
        "Sample ID,Easting,Northing,pH (water),Exch Ca (cmol/kg),Exch Mg (cmol/kg),"
        "Exch K (cmol/kg),Exch Na (cmol/kg)\n" + "\n".join(rows) + "\n")
    path, notes = new_project(folder / "project", samples=folder / "lab.csv",
                              paddocks=folder / "paddocks.gpkg", crs="EPSG:32755")
    text = path.read_text(encoding="utf-8")
    assert "max_per_pass_by_product = { gypsum = 5000.0, lime = 5000.0 }" in text
    line = next(ln for ln in text.splitlines() if ln.startswith("max_per_pass_by_product"))
    assert "common practice" in line
    assert any("5000 kg/ha of each product in one pass" in n for n in notes)

    split = compute(load_project(path), use_cache=False)
    gyp = split.zones[(split.zones["product"] == "gypsum") & (split.zones["rate_kg_ha"] > 0)]
    assert len(gyp) and (gyp["rate_kg_ha"] > COMMON_MAX_PER_PASS_KG_HA).all()
    assert (gyp["passes"] >= 2).all()
    assert (gyp["per_pass_kg_ha"] <= COMMON_MAX_PER_PASS_KG_HA + 1e-6).all()
    assert not [w for w in split.warnings if "in a single pass" in w]

    # the same project as written before 'new' gave a limit: its rates stay, and it is told
    older = path.parent / "older.toml"
    older.write_text("\n".join(ln for ln in text.splitlines()
                               if not ln.startswith("max_per_pass_by_product")) + "\n")
    one = compute(load_project(older), use_cache=False)
    gyp1 = one.zones[(one.zones["product"] == "gypsum") & (one.zones["rate_kg_ha"] > 0)]
    assert (gyp1["passes"] == 1).all()
    assert gyp1["rate_kg_ha"].max() == pytest.approx(gyp["rate_kg_ha"].max(), rel=0.02)
    told = [w for w in one.warnings if "in a single pass" in w]
    assert len(told) == 1, one.warnings
    top = f"{gyp1['rate_kg_ha'].max():,.0f} kg/ha"
    assert told[0].startswith("paddock 'Flat', gypsum: zone(s) ") and top in told[0]
    assert "common practice" in told[0] and "max_per_pass_by_product.gypsum" in told[0]
