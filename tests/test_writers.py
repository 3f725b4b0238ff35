"""Writers: RFC 7946 GeoJSON, zipped shapefile, COG GeoTIFF, CSV, JSON, atomic writes and
the output-folder guard. Files are read back with GDAL (pyogrio, rasterio)."""

from __future__ import annotations

import json
import os
import stat
import warnings
import zipfile
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pyproj
import pytest
import rasterio
import shapely
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st

import geosoil.writers as writers
from geosoil.errors import CRSError
from geosoil.writers import (
    SHAPEFILE_FIELDS,
    atomic_write,
    write_cog,
    write_csv,
    write_geojson,
    write_json,
    write_shapefile_zip,
)
from geosoil.zones import ZoneSettings, make_zones
from tests.shapes import MIN_PART_M2, assert_clean

CRS = "EPSG:32755"
X0, Y0 = 500_000.0, 6_000_000.0
T = Affine(10.0, 0, X0, 0, -10.0, Y0 + 200)


@pytest.fixture(scope="module")
def zones() -> gpd.GeoDataFrame:
    """Zones of a paddock with a dam inside it, so a rate zone has a hole."""
    rows, cols = np.mgrid[0:20, 0:25]
    rate = 150.0 + 40.0 * cols + 10.0 * rows
    boundary = shapely.Polygon([(X0 + 3, Y0 + 2), (X0 + 246, Y0 + 6), (X0 + 240, Y0 + 197),
                                (X0 + 8, Y0 + 190)])
    dam = shapely.Point(X0 + 60, Y0 + 100).buffer(20)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        z = make_zones(rate, transform=T, crs=CRS, paddock="Creek flat", product="gypsum",
                       boundary=boundary, exclusions=[dam],
                       settings=ZoneSettings(classes=3, min_zone_area_ha=0.2)).zones
    assert any(len(p.interiors) for g in z.geometry for p in shapely.get_parts(g))
    return z


def signed_area(ring: list[list[float]]) -> float:
    """Shoelace formula: positive for counter-clockwise rings [derived]."""
    a = np.asarray(ring)
    return 0.5 * float(np.sum(a[:-1, 0] * a[1:, 1] - a[1:, 0] * a[:-1, 1]))


# --------------------------------------------------------------------------- GeoJSON


def test_geojson_follows_rfc7946(zones, tmp_path: Path) -> None:
    path = write_geojson(tmp_path / "gypsum.geojson", zones)
    doc = json.loads(path.read_text(encoding="utf-8"))
    assert doc["type"] == "FeatureCollection"
    assert "crs" not in doc  # RFC 7946 §4: no "crs" member
    assert len(doc["features"]) == len(zones)
    holes = 0
    for feature in doc["features"]:
        assert set(feature["properties"]) >= {"paddock", "product", "zone", "kind", "rate_kg_ha",
                                               "area_ha"}
        geom = feature["geometry"]
        polygons = [geom["coordinates"]] if geom["type"] == "Polygon" else geom["coordinates"]
        for rings in polygons:
            for i, ring in enumerate(rings):
                assert ring[0] == ring[-1] and len(ring) >= 4
                for lon, lat in ring:  # §3.1.1: [longitude, latitude]
                    assert -180 <= lon <= 180 and -90 <= lat <= 90
                    assert round(lon, 7) == lon and round(lat, 7) == lat
                # §3.1.6: exterior rings counter-clockwise, holes clockwise
                assert (signed_area(ring) > 0) == (i == 0)
                holes += i > 0
    assert holes >= 1
    # UTM 55S around 6 000 000 N lies near 147 E, 36 S [derived from the zone's meridian]
    first = doc["features"][0]["geometry"]
    outer = first["coordinates"][0] if first["type"] == "Polygon" else first["coordinates"][0][0]
    lon, lat = outer[0]
    assert 146 < lon < 148 and -37 < lat < -35


def test_geojson_reads_back_with_same_rates_and_areas(zones, tmp_path: Path) -> None:
    path = write_geojson(tmp_path / "gypsum.geojson", zones)
    back = pyogrio.read_dataframe(path)
    assert back.crs.to_epsg() == 4326
    back = back.to_crs(CRS)
    assert back["rate_kg_ha"].tolist() == zones["rate_kg_ha"].tolist()
    assert back["zone"].tolist() == zones["zone"].tolist()
    # 7 decimals of a degree is about 1 cm: areas agree to 1e-4 [derived]
    assert np.allclose(back.geometry.area, zones.geometry.area, rtol=1e-4)
    assert np.allclose(back["area_ha"], zones["area_ha"])
    assert back.geometry.is_valid.all()


def test_geojson_nan_becomes_null_and_needs_a_crs(tmp_path: Path) -> None:
    g = gpd.GeoDataFrame({"v": [np.nan]}, geometry=[shapely.box(X0, Y0, X0 + 1, Y0 + 1)], crs=CRS)
    doc = json.loads(write_geojson(tmp_path / "a.geojson", g).read_text())
    assert doc["features"][0]["properties"]["v"] is None
    with pytest.raises(CRSError):
        write_geojson(tmp_path / "b.geojson", g.set_crs(None, allow_override=True))


# --------------------------------------------------------------------------- shapefile


def test_shapefile_zip_contents_and_fields(zones, tmp_path: Path) -> None:
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no renaming ("laundering") warning, or any other
        path = write_shapefile_zip(tmp_path / "gypsum_shp.zip", zones)
    with zipfile.ZipFile(path) as zf:
        names = sorted(zf.namelist())
        assert zf.read("gypsum.cpg").decode().strip().upper() in ("UTF-8", "UTF8")
    assert names == sorted(f"gypsum{s}" for s in (".shp", ".shx", ".dbf", ".prj", ".cpg"))
    info = pyogrio.read_info(path)
    fields = dict(zip(info["fields"], info["ogr_types"], strict=True))
    # ESRI shapefile (GDAL driver documentation): names of 10 characters or fewer
    assert all(len(name) <= 10 for name in fields)
    assert set(fields) == {SHAPEFILE_FIELDS[c] for c in zones.columns if c in SHAPEFILE_FIELDS}
    assert fields["RATE_KGHA"] == "OFTReal" and fields["AREA_HA"] == "OFTReal"
    assert fields["ZONE"] == "OFTInteger" and fields["PRODUCT"] == "OFTString"
    assert info["crs"] == "EPSG:32755"


def test_shapefile_reads_back_with_same_rates_and_areas(zones, tmp_path: Path) -> None:
    path = write_shapefile_zip(tmp_path / "gypsum_shp.zip", zones)
    back = pyogrio.read_dataframe(path)
    assert back["RATE_KGHA"].tolist() == zones["rate_kg_ha"].tolist()
    assert back["PRODUCT"].tolist() == ["gypsum"] * len(zones)
    assert back["PADDOCK"].tolist() == ["Creek flat"] * len(zones)
    assert back["KIND"].tolist() == zones["kind"].tolist()
    assert np.allclose(back["AREA_HA"], zones["area_ha"])
    assert np.allclose(back.geometry.area / 1e4, zones["area_ha"], rtol=1e-9)


def test_shapefile_refuses_long_field_names(zones, tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="10"):
        write_shapefile_zip(tmp_path / "x.zip", zones, fields={"rate_kg_ha": "RATE_KG_PER_HA"})
    assert not (tmp_path / "x.zip").exists()


def test_shapefile_in_wgs84_on_request(zones, tmp_path: Path) -> None:
    path = write_shapefile_zip(tmp_path / "ll_shp.zip", zones, crs="EPSG:4326")
    assert pyogrio.read_info(path)["crs"] == "EPSG:4326"


# --------------------------------------------------------------------------- GeoTIFF


def test_cog_round_trip(tmp_path: Path) -> None:
    rng = np.random.default_rng(0)
    a = rng.uniform(0, 3000, (300, 280))
    a[:20, :] = np.nan
    path = write_cog(tmp_path / "rate.tif", a, transform=T, crs=CRS,
                     descriptions=["gypsum rate"], tags={"unit": "kg/ha"})
    with rasterio.open(path) as src:
        assert src.crs.to_epsg() == 32755
        assert src.transform == T
        assert src.nodata == -9999.0
        assert src.descriptions == ("gypsum rate",)
        assert src.tags()["unit"] == "kg/ha"
        image = src.tags(ns="IMAGE_STRUCTURE")
        assert image.get("LAYOUT") == "COG"  # OGC 21-026 layout, as GDAL reports it
        assert image.get("COMPRESSION") == "DEFLATE"
        assert src.block_shapes[0] == (256, 256) and src.overviews(1)
        back = src.read(1, masked=True)
    assert np.array_equal(back.mask, np.isnan(a))
    assert np.array_equal(back.filled(np.nan), a, equal_nan=True)


def test_tiled_geotiff_when_cog_driver_is_missing(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.setattr(writers, "_cog_driver_available", lambda: False)
    a = np.arange(300 * 300, dtype=float).reshape(300, 300)
    path = write_cog(tmp_path / "r.tif", a, transform=T, crs=CRS)
    with rasterio.open(path) as src:
        assert src.driver == "GTiff" and src.block_shapes[0] == (256, 256)
        assert src.overviews(1) == [2]
        assert src.compression.name.lower() == "deflate"
        assert np.array_equal(src.read(1), a)


def test_zone_rates_as_raster_round_trip(zones, tmp_path: Path) -> None:
    import rasterio.features

    shapes = [(g, float(r)) for g, r in zip(zones.geometry, zones["rate_kg_ha"], strict=True)]
    grid = rasterio.features.rasterize(shapes, out_shape=(20, 25), transform=T, fill=np.nan,
                                       dtype="float64")
    path = write_cog(tmp_path / "zones.tif", grid, transform=T, crs=CRS)
    with rasterio.open(path) as src:
        back = src.read(1, masked=True).filled(np.nan)
    assert np.array_equal(back, grid, equal_nan=True)
    assert set(np.unique(back[np.isfinite(back)])) <= set(zones["rate_kg_ha"])


# --------------------------------------------------------------------------- CSV and JSON


def test_csv_and_json(tmp_path: Path) -> None:
    table = pd.DataFrame({"zone": [1, 2], "rate_kg_ha": [1250.5, np.nan], "name": ["a", "é"]})
    back = pd.read_csv(write_csv(tmp_path / "t.csv", table))
    assert back["rate_kg_ha"].iloc[0] == 1250.5 and pd.isna(back["rate_kg_ha"].iloc[1])
    assert back["name"].tolist() == ["a", "é"]
    obj = {"a": np.float64("nan"), "b": [np.int32(2), np.inf], "c": Path("x/y"),
           "d": np.array([[1.0, np.nan]])}
    doc = json.loads(write_json(tmp_path / "r.json", obj).read_text())
    assert doc == {"a": None, "b": [2, None], "c": "x/y", "d": [[1.0, None]]}


# --------------------------------------------------------------------------- atomic writes


def test_atomic_write_replaces_only_on_success(tmp_path: Path) -> None:
    target = tmp_path / "out.txt"
    target.write_text("old")
    with pytest.raises(RuntimeError), atomic_write(target, mode="w") as fh:
        fh.write("new but broken")
        raise RuntimeError("stop")
    assert target.read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.txt"]  # no temporary left
    with atomic_write(target, mode="w") as fh:
        fh.write("new")
    assert target.read_text() == "new"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.txt"]


def test_atomic_write_gives_ordinary_permissions(tmp_path: Path) -> None:
    old = os.umask(0o022)
    try:
        with atomic_write(tmp_path / "p.bin") as fh:
            fh.write(b"x")
    finally:
        os.umask(old)
    assert stat.S_IMODE((tmp_path / "p.bin").stat().st_mode) == 0o644


def test_failed_raster_write_leaves_nothing(tmp_path: Path) -> None:
    with pytest.raises(ValueError):
        write_cog(tmp_path / "bad.tif", np.zeros((2, 2)), transform=T, crs=CRS,
                  descriptions=["a", "b"])
    assert list(tmp_path.iterdir()) == []


# --------------------------------------------------------------------------- output folder




def test_an_earlier_geotiff_stands_in_only_when_made_from_the_same_and_unchanged(
    tmp_path: Path,
) -> None:
    """reuse_or_write_cog copies an earlier file only when the array and settings are the
    same (its key) and its bytes are as recorded; the copy is byte-for-byte what writing
    would give, and GDAL reads it back the same."""
    import hashlib

    from geosoil.writers import reuse_or_write_cog

    t = Affine(10, 0, 500000, 0, -10, 6000000)
    a = np.arange(12.0).reshape(3, 4)
    a[0, 0] = np.nan
    kw = dict(transform=t, crs="EPSG:32755", descriptions=("x",), tags={"unit": "kg/ha"})
    first, copied = reuse_or_write_cog(tmp_path / "first.tif", a, previous=None, **kw)
    assert not copied
    assert first["sha256"] == hashlib.sha256((tmp_path / "first.tif").read_bytes()).hexdigest()
    # the same: copied, same bytes as a fresh write
    again, copied = reuse_or_write_cog(tmp_path / "again.tif", a.copy(),
                                       previous=(tmp_path / "first.tif", first), **kw)
    assert copied and again == first
    write_cog(tmp_path / "fresh.tif", a, **kw)
    assert (tmp_path / "again.tif").read_bytes() == (tmp_path / "fresh.tif").read_bytes()
    # another array, or another tag: written anew
    b = a + 1.0
    other, copied = reuse_or_write_cog(tmp_path / "b.tif", b,
                                       previous=(tmp_path / "first.tif", first), **kw)
    assert not copied and other["key"] != first["key"]
    with rasterio.open(tmp_path / "b.tif") as src:
        np.testing.assert_array_equal(src.read(1, masked=True).filled(np.nan), b)
    kw2 = dict(kw, tags={"unit": "t/ha"})
    _, copied = reuse_or_write_cog(tmp_path / "c.tif", a, previous=(tmp_path / "first.tif",
                                                                   first), **kw2)
    assert not copied
    # the earlier file changed since its run recorded it: never copied
    (tmp_path / "first.tif").write_bytes((tmp_path / "b.tif").read_bytes())
    d, copied = reuse_or_write_cog(tmp_path / "d.tif", a, previous=(tmp_path / "first.tif",
                                                                   first), **kw)
    assert not copied
    assert (tmp_path / "d.tif").read_bytes() == (tmp_path / "fresh.tif").read_bytes()
    # gone: written
    _, copied = reuse_or_write_cog(tmp_path / "e.tif", a, previous=(tmp_path / "gone.tif",
                                                                   first), **kw)
    assert not copied


# --------------------------------------------------------------------------- valid polygons


def _sliver_zones() -> gpd.GeoDataFrame:
    """Two zones: one of two squares 2 mm apart (the GeoJSON's rounding to 1e-7 degrees,
    about 1 cm, closes the gap) with a thin sliver part (30 m long, 1 cm wide: 0.15 m²) and
    a hole of 0.25 m²; one plain square. Invented, as a reprojected overlay leaves them."""
    a = shapely.box(X0, Y0, X0 + 100, Y0 + 100)
    hole = shapely.box(X0 + 50, Y0 + 50, X0 + 50.5, Y0 + 50.5)
    b = shapely.box(X0 + 100.002, Y0, X0 + 200, Y0 + 100)
    sliver = shapely.Polygon([(X0, Y0 - 5), (X0 + 30, Y0 - 5), (X0 + 30, Y0 - 5.01)])
    zone1 = shapely.MultiPolygon([a.difference(hole), b, sliver])
    zone2 = shapely.box(X0, Y0 + 100, X0 + 200, Y0 + 150)
    return gpd.GeoDataFrame({"paddock": ["Creek flat"] * 2, "product": ["gypsum"] * 2,
                             "zone": [1, 2], "rate_kg_ha": [2500.0, 0.0],
                             "area_ha": [zone1.area / 1e4, zone2.area / 1e4]},
                            geometry=[zone1, zone2], crs=CRS)


def test_a_thin_sliver_and_parts_that_rounding_joins_are_written_valid_and_without_it(
        tmp_path: Path) -> None:
    """GeoJSON, shapefile (lon/lat and working CRS) and GeoPackage read back by GDAL
    (pyogrio) and checked by GEOS (shapely): valid, the sliver and the hole gone, and the
    zone's area kept but for them."""
    from geosoil.gpkg import write_gpkg

    z = _sliver_zones()
    write_geojson(tmp_path / "z.geojson", z)
    write_shapefile_zip(tmp_path / "ll_shp.zip", z, crs="EPSG:4326")
    write_shapefile_zip(tmp_path / "utm_shp.zip", z)
    write_gpkg(tmp_path / "z.gpkg", {"zones": z})
    dropped = 0.15 - 0.25  # the sliver goes, the hole is filled
    for name in ("z.geojson", "ll_shp.zip", "utm_shp.zip", "z.gpkg"):
        back = pyogrio.read_dataframe(tmp_path / name)
        assert_clean(back.geometry, back.crs)
        parts = [shapely.get_parts(g) for g in back.geometry]
        assert len(back) == 2 and len(parts[0]) in (1, 2) and len(parts[1]) == 1, name
        assert not any(p.interiors for p in parts[0]), name  # the hole is filled
        area = back.to_crs(CRS).geometry.area.to_numpy()
        # coordinates rounded to 1e-7 degrees (about 1 cm) move each edge by up to 5 mm:
        # up to 3 m² on these 600 m of edges; written unrounded, only what was dropped
        tol = 3.0 if name == "z.geojson" else 0.01
        assert area[0] == pytest.approx(z.geometry.area.iloc[0] - dropped, abs=tol), name
        assert area[1] == pytest.approx(z.geometry.area.iloc[1], abs=tol), name
    assert writers.MIN_PART_M2 == MIN_PART_M2


def test_valid_polygons_repairs_leaves_alone_and_drops() -> None:
    box = shapely.box(X0, Y0, X0 + 10, Y0 + 10)
    assert writers.valid_polygons(box, CRS) is box  # nothing to do: the same object
    assert writers.valid_polygons(shapely.Point(X0, Y0), CRS).geom_type == "Point"
    assert writers.valid_polygons(shapely.box(X0, Y0, X0 + 0.5, Y0 + 1), CRS) is None
    # 1 m² is about 1.1e-10 square degrees at 35°S: a part of 1e-4 x 1e-4 degrees (about
    # 100 m²) is kept in lon/lat, one of 1e-6 x 1e-6 (about 0.01 m²) is not
    ll = shapely.MultiPolygon([shapely.box(147, -35, 147.0001, -34.9999),
                               shapely.box(147.1, -35, 147.100001, -34.999999)])
    kept = writers.valid_polygons(ll, "EPSG:4326")
    assert kept.geom_type == "Polygon" and kept.equals(ll.geoms[0])


def _json_reference(obj):  # noqa: ANN001, ANN202
    """What a run record's value is in JSON (RFC 8259 has no NaN or infinity): the test's
    own plain walk, one rule a type."""
    import math

    if isinstance(obj, dict):
        return {str(k): _json_reference(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple, np.ndarray)):
        return [_json_reference(v) for v in obj]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        return float(obj) if math.isfinite(obj) else None
    return obj


_json_leaves = (st.none() | st.booleans() | st.integers(-10**12, 10**12) | st.text(max_size=5)
                | st.floats(allow_nan=True, allow_infinity=True)
                | st.integers(-100, 100).map(np.int64) | st.floats(-1e6, 1e6).map(np.float64)
                | st.sampled_from([np.nan, np.inf, -np.inf, np.bool_(True)]))


@settings(max_examples=150, deadline=None)
@given(st.recursive(_json_leaves, lambda kids: st.lists(kids, max_size=4)
                    | st.lists(kids, max_size=3).map(tuple)
                    | st.dictionaries(st.text(max_size=4) | st.integers(0, 9), kids,
                                      max_size=4), max_leaves=25))
def test_jsonable_is_plain_json_with_no_nan(value) -> None:  # noqa: ANN001
    """Nested records of Python and numpy values become plain JSON (NaN and infinities
    None, numpy scalars Python's, tuples lists, keys text), as a plain walk makes them, and
    the standard library writes them without NaN (json.dumps allow_nan=False)."""
    out = writers.jsonable(value)
    assert out == _json_reference(value)
    json.dumps(out, allow_nan=False)


@settings(max_examples=100, deadline=None)
@given(st.floats(-70, 70), st.floats(-179, 179), st.floats(0.05, 40.0), st.floats(0.05, 40.0))
def test_small_parts_in_longitude_latitude_agree_with_the_geodesic_area(
        lat: float, lon: float, w_m: float, h_m: float) -> None:
    """A part under MIN_PART_M2 in longitude/latitude is told by its geodesic area on the
    WGS 84 ellipsoid (pyproj's Geod, the reference), also when the writer's plain estimate
    decides (parts far from the limit)."""
    import math

    geod = pyproj.Geod(ellps="WGS84")
    dlat = h_m / 111_000.0
    dlon = w_m / (111_000.0 * math.cos(math.radians(lat)))
    part = shapely.box(lon, lat, lon + dlon, lat + dlat)
    exact = abs(geod.geometry_area_perimeter(part)[0])
    got = writers._small([part], "EPSG:4326", MIN_PART_M2)
    assert bool(got[0]) == (exact < MIN_PART_M2)
