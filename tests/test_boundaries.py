"""Tests of geosoil.boundaries: reading paddocks, exclusions, creeks and zones.

Every fixture is a tiny file built in tmp_path. Expected values are derived
from the geometry drawn (areas of rectangles, buffers of straight lines), never
produced by running the code under test.
"""

from __future__ import annotations

import contextlib
import json
import math
import warnings
import zipfile
from pathlib import Path

import geopandas as gpd
import pyproj
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from geosoil.boundaries import (
    OVERLAP_TOLERANCE_M2,
    BoundarySettings,
    read_exclusions,
    read_paddocks,
    read_user_zones,
    settle_overlaps,
)
from geosoil.errors import CRSError, DataWarning, InputError, SettingsError
from geosoil.settings import from_mapping

UTM55S = "EPSG:32755"
# a point in south-eastern Australia, in UTM zone 55S metres
E0, N0 = 541_000.0, 6_160_000.0


# --------------------------------------------------------------------------- helpers


def square(x: float, y: float, size: float) -> shapely.Polygon:
    return shapely.box(x, y, x + size, y + size)


def write_geojson(path: Path, features: list[tuple[dict, dict | None]]) -> Path:
    """RFC 7946 FeatureCollection from (properties, geometry mapping) pairs."""
    fc = {
        "type": "FeatureCollection",
        "features": [
            {"type": "Feature", "properties": props, "geometry": geom}
            for props, geom in features
        ],
    }
    path.write_text(json.dumps(fc), encoding="utf-8")
    return path


def lonlat_square(lon: float, lat: float, size_deg: float) -> dict:
    return shapely.geometry.mapping(square(lon, lat, size_deg))


def write_projected(path: Path, data: dict, geoms: list, crs=UTM55S, **kw) -> Path:
    gpd.GeoDataFrame(data, geometry=geoms, crs=crs).to_file(path, **kw)
    return path


@contextlib.contextmanager
def no_warnings():
    """Fail on any DataWarning inside the block."""
    with warnings.catch_warnings():
        warnings.simplefilter("error", DataWarning)
        yield


# --------------------------------------------------------------------------- settings


def test_settings_from_mapping_resolve_paths_and_check_buffer(tmp_path):
    s = from_mapping(
        BoundarySettings,
        {"paddocks": "farm.geojson", "creeks": "creek.geojson", "creek_buffer_m": 25},
        section="boundaries",
        base_dir=tmp_path,
    )
    assert s.paddocks == tmp_path / "farm.geojson"
    assert s.creeks == tmp_path / "creek.geojson"
    assert s.creek_buffer_m == 25.0
    assert s.exclusions is None and s.name_column is None
    with pytest.raises(SettingsError, match="boundaries.creek_buffer_m"):
        from_mapping(BoundarySettings, {"paddocks": "a", "creek_buffer_m": 0}, section="boundaries")
    with pytest.raises(SettingsError, match="boundaries.paddocks"):
        from_mapping(BoundarySettings, {}, section="boundaries")
    with pytest.raises(SettingsError, match="did you mean 'creek_buffer_m'"):
        from_mapping(BoundarySettings, {"paddocks": "a", "creek_buffer": 5}, section="boundaries")
    with pytest.raises(SettingsError, match="boundaries.duplicate_names"):
        from_mapping(BoundarySettings, {"paddocks": "a", "duplicate_names": "join"},
                     section="boundaries")


def test_settings_blank_name_column_and_orphan_zone_column_are_refused():
    with pytest.raises(SettingsError, match="name_column"):
        BoundarySettings(paddocks=Path("a"), name_column="  ")
    with pytest.raises(SettingsError, match="zone_id_column"):
        BoundarySettings(paddocks=Path("a"), zone_id_column="zone")


# --------------------------------------------------------------------------- paddocks


def test_geojson_without_crs_is_wgs84_and_names_are_detected(tmp_path):
    # RFC 7946 section 4: GeoJSON coordinates are WGS 84 longitude/latitude
    path = write_geojson(
        tmp_path / "p.geojson",
        [({"Paddock Name": "North"}, lonlat_square(147.0, -34.0, 0.01)),
         ({"Paddock Name": "South"}, lonlat_square(147.0, -34.02, 0.01))],
    )
    with no_warnings():
        out = read_paddocks(BoundarySettings(paddocks=path))
    assert out["paddock"].tolist() == ["North", "South"]
    assert list(out.columns) == ["paddock", "geometry"]
    assert out.crs.equals(pyproj.CRS("EPSG:4326"))


@pytest.mark.parametrize("column", ["name", "NAME", "Field", "block_name", "PADDOCK"])
def test_common_name_spellings_are_found(tmp_path, column):
    path = write_geojson(tmp_path / "p.geojson",
                         [({column: "Top", "other": 1}, lonlat_square(147.0, -34.0, 0.01))])
    assert read_paddocks(BoundarySettings(paddocks=path))["paddock"].tolist() == ["Top"]


@pytest.mark.parametrize("column", ["Schlag", "Feld", "Lote", "Potrero", "Talhão", "TALHAO",
                                    "Parcelle", "Nom de la parcelle", "Nombre"])
def test_name_columns_in_german_spanish_portuguese_and_french_are_found(tmp_path, column):
    # user trial: a 'Schlag' (German) and a 'Lote' (Spanish) column were not found, so the
    # paddocks became 'Paddock 1...'
    path = write_geojson(tmp_path / "p.geojson",
                         [({column: "Lote 7 – El Ñandú", "area": 1}, lonlat_square(147.0, -34.0,
                                                                             0.01))])
    with warnings.catch_warnings():
        warnings.simplefilter("error", DataWarning)
        got = read_paddocks(BoundarySettings(paddocks=path))
    assert got["paddock"].tolist() == ["Lote 7 – El Ñandú"]


def test_one_unnamed_paddock_is_named_paddock_1_in_good_words(tmp_path):
    # user trial: "numbered 'Paddock 1' to 'Paddock 1'"
    path = write_geojson(tmp_path / "p.geojson", [({"area": 1.0}, lonlat_square(147.0, -34.0,
                                                                                0.01))])
    with pytest.warns(DataWarning) as caught:
        out = read_paddocks(BoundarySettings(paddocks=path))
    said = " ".join(str(w.message) for w in caught)
    assert "the one paddock is named 'Paddock 1'" in said and "to 'Paddock 1'" not in said
    assert out["paddock"].tolist() == ["Paddock 1"]


def test_without_name_column_paddocks_are_numbered_with_a_warning(tmp_path):
    path = write_geojson(
        tmp_path / "p.geojson",
        [({"area": 1.0}, lonlat_square(147.0, -34.0, 0.01)),
         ({"area": 2.0}, lonlat_square(147.02, -34.0, 0.01))],
    )
    with pytest.warns(DataWarning, match="name_column"):
        out = read_paddocks(BoundarySettings(paddocks=path))
    assert out["paddock"].tolist() == ["Paddock 1", "Paddock 2"]


def test_named_column_is_used_and_missing_column_is_named(tmp_path):
    path = write_geojson(tmp_path / "p.geojson",
                         [({"name": "x", "PDK_NO": 7}, lonlat_square(147.0, -34.0, 0.01))])
    assert read_paddocks(BoundarySettings(paddocks=path, name_column="PDK_NO"))[
        "paddock"].tolist() == ["7"]
    with pytest.raises(InputError) as err:
        read_paddocks(BoundarySettings(paddocks=path, name_column="paddock_id"))
    message = str(err.value)
    assert "p.geojson" in message and "paddock_id" in message and "PDK_NO" in message
    assert "name_column" in message


def test_whole_number_names_lose_their_decimal_point(tmp_path):
    # a name column read as floats (because of a blank elsewhere) must still say "3", not "3.0"
    path = write_projected(tmp_path / "p.gpkg", {"name": [3.0, 12.0]},
                           [square(E0, N0, 100), square(E0 + 200, N0, 100)])
    assert read_paddocks(BoundarySettings(paddocks=path))["paddock"].tolist() == ["3", "12"]


def test_blank_name_is_an_error_naming_the_feature(tmp_path):
    path = write_geojson(
        tmp_path / "p.geojson",
        [({"name": "A"}, lonlat_square(147.0, -34.0, 0.01)),
         ({"name": "  "}, lonlat_square(147.02, -34.0, 0.01))],
    )
    with pytest.raises(InputError, match=r"row 2.*column 'name'.*no name"):
        read_paddocks(BoundarySettings(paddocks=path))


def test_projected_file_keeps_its_crs_holes_and_parts(tmp_path):
    outer = square(E0, N0, 400)  # 16 ha
    hole = square(E0 + 100, N0 + 100, 100)  # 1 ha dam
    with_hole = shapely.Polygon(outer.exterior.coords, [hole.exterior.coords])
    two_parts = shapely.MultiPolygon([square(E0 + 500, N0, 100), square(E0 + 700, N0, 100)])
    path = write_projected(tmp_path / "p.gpkg", {"name": ["Dam", "Split"]}, [with_hole, two_parts])
    with no_warnings():
        out = read_paddocks(BoundarySettings(paddocks=path)).set_index("paddock")
    assert out.crs.equals(pyproj.CRS(UTM55S))
    dam = out.geometry["Dam"]
    assert dam.geom_type == "Polygon" and len(dam.interiors) == 1
    assert dam.area == pytest.approx(400 * 400 - 100 * 100)  # [derived] 16 ha less 1 ha
    split = out.geometry["Split"]
    assert split.geom_type == "MultiPolygon" and len(split.geoms) == 2
    assert split.area == pytest.approx(2 * 100 * 100)


def test_same_name_on_several_features_is_merged_into_one_multipart_paddock(tmp_path):
    path = write_projected(
        tmp_path / "p.gpkg",
        {"name": ["Creek", "Hill", "Creek"]},
        [square(E0, N0, 100), square(E0 + 300, N0, 100), square(E0, N0 + 150, 100)],
    )
    with pytest.warns(DataWarning, match=r"features 1, 3 share the paddock name 'Creek'"):
        out = read_paddocks(BoundarySettings(paddocks=path))
    assert out["paddock"].tolist() == ["Creek", "Hill"]  # order of first appearance
    creek = out.set_index("paddock").geometry["Creek"]
    assert creek.geom_type == "MultiPolygon" and len(creek.geoms) == 2
    assert creek.area == pytest.approx(2 * 100 * 100)


def test_duplicate_names_can_be_refused(tmp_path):
    path = write_projected(tmp_path / "p.gpkg", {"name": ["A", "B", "A"]},
                           [square(E0, N0, 10), square(E0 + 30, N0, 10), square(E0 + 60, N0, 10)])
    with pytest.raises(InputError) as err:
        read_paddocks(BoundarySettings(paddocks=path, duplicate_names="error"))
    assert "'A' at features 1, 3" in str(err.value)
    assert "duplicate_names" in str(err.value)


def test_bow_tie_is_repaired_with_a_warning_naming_the_feature(tmp_path):
    bow_tie = shapely.Polygon([(E0, N0), (E0 + 100, N0 + 100), (E0 + 100, N0), (E0, N0 + 100)])
    path = write_projected(tmp_path / "p.gpkg", {"name": ["Good", "Twisted"]},
                           [square(E0 - 300, N0, 100), bow_tie])
    with pytest.warns(DataWarning, match=r"feature 2: paddock 'Twisted'.*make_valid"):
        out = read_paddocks(BoundarySettings(paddocks=path))
    fixed = out.set_index("paddock").geometry["Twisted"]
    assert fixed.is_valid
    # [derived] the two triangles of a 100 m bow-tie each have area 100 * 50 / 2
    assert fixed.area == pytest.approx(2 * 100 * 50 / 2)


def pads(*geoms: shapely.Polygon, names: str = "ABCD") -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame({"paddock": list(names[:len(geoms)])}, geometry=list(geoms),
                            crs=UTM55S)


def test_overlapping_paddocks_are_refused_naming_each_pair_and_its_area():
    # [derived] squares of 100 m offset by 50 m share 50 m x 100 m = 5 000 m2 = 0.50 ha;
    # C, 30 m further east of B, shares 70 m x 100 m = 0.70 ha with B and 2 000 m2 with A
    three = pads(square(E0, N0, 100), square(E0 + 50, N0, 100), square(E0 + 80, N0, 100))
    with pytest.raises(InputError) as err:
        settle_overlaps(three, mode="refuse", file="p.gpkg")
    text = str(err.value)
    assert text.startswith("p.gpkg: 3 pair(s) of paddocks overlap")
    assert "'A' and 'B' share 0.50 ha" in text and "'B' and 'C' share 0.70 ha" in text
    assert "'A' and 'C' share 0.20 ha" in text
    assert 'overlaps = "first"' in text


def test_touching_edges_and_slivers_below_the_tolerance_are_not_overlaps():
    assert OVERLAP_TOLERANCE_M2 == 1.0
    touching = pads(square(E0, N0, 100), square(E0 + 100, N0, 100))
    # a fence line digitised twice: 0.004 m x 100 m = 0.4 m2
    sliver = pads(square(E0, N0, 100), square(E0 + 99.996, N0, 100))
    with no_warnings():
        for frame in (touching, sliver):
            for mode in ("refuse", "first"):
                out = settle_overlaps(frame, mode=mode, file="p.gpkg")
                assert out.geometry.area.tolist() == frame.geometry.area.tolist()
    # 2 m2 is above it
    with pytest.raises(InputError, match="share 0.0002 ha"):
        settle_overlaps(pads(square(E0, N0, 100), square(E0 + 99.98, N0, 100)),
                        mode="refuse", file="p.gpkg")


def test_first_gives_each_overlap_to_the_paddock_listed_first():
    a, b, c = square(E0, N0, 100), square(E0 + 50, N0, 100), square(E0 + 80, N0 + 50, 100)
    with pytest.warns(DataWarning) as caught:
        out = settle_overlaps(pads(a, b, c), mode="first", file="p.gpkg")
    said = [str(w.message) for w in caught]
    assert any("'A' and 'B' overlap by 0.50 ha; the overlap belongs to 'A'" in m for m in said)
    got = out.set_index("paddock").geometry
    # the oracle is shapely's own set algebra on the boundaries drawn
    assert got["A"].equals(a)
    assert got["B"].area == pytest.approx(b.difference(a).area)
    assert got["C"].area == pytest.approx(c.difference(shapely.union_all([a, b])).area)
    # every square metre once: the parts tile the union
    assert sum(g.area for g in got) == pytest.approx(shapely.union_all([a, b, c]).area)
    assert shapely.union_all(list(got)).area == pytest.approx(shapely.union_all([a, b, c]).area)
    for x, y in ((0, 1), (0, 2), (1, 2)):
        assert got.iloc[x].intersection(got.iloc[y]).area < 1e-6


def test_first_refuses_a_paddock_wholly_inside_an_earlier_one():
    with pytest.raises(InputError, match="'B' lies wholly inside 'A'"):
        settle_overlaps(pads(square(E0, N0, 100), square(E0 + 10, N0 + 10, 50)),
                        mode="first", file="p.gpkg")


def test_overlaps_setting_is_refuse_by_default_and_checked():
    assert BoundarySettings(paddocks=Path("p.gpkg")).overlaps == "refuse"
    with pytest.raises(SettingsError, match="boundaries.overlaps"):
        from_mapping(BoundarySettings, {"paddocks": "a", "overlaps": "last"},
                     section="boundaries", base_dir=Path("/data"))


def test_overlap_areas_are_square_metres_in_a_feet_crs():
    # NAD83 / Texas Central (ftUS): the same 100 m squares drawn in US survey feet
    ft = 1200 / 3937
    feet = gpd.GeoDataFrame({"paddock": ["A", "B"]}, crs="EPSG:2277", geometry=[
        square(3_000_000, 10_000_000, 100 / ft), square(3_000_000 + 50 / ft, 10_000_000,
                                                        100 / ft)])
    with pytest.raises(InputError, match="'A' and 'B' share 0.50 ha"):
        settle_overlaps(feet, mode="refuse", file="p.gpkg")


def test_overlapping_zones_are_still_reported(tmp_path):
    path = write_projected(tmp_path / "z.gpkg", {"zone": ["1", "2"]},
                           [square(E0, N0, 100), square(E0 + 50, N0, 100)])
    with pytest.warns(DataWarning, match="'1' and '2' overlap"):
        read_user_zones(path, crs=UTM55S)


@pytest.mark.parametrize(
    "geometry",
    [None, {"type": "Polygon", "coordinates": []}],
    ids=["null", "empty"],
)
def test_missing_geometry_is_an_error_naming_the_feature(tmp_path, geometry):
    path = write_geojson(
        tmp_path / "p.geojson",
        [({"name": "A"}, lonlat_square(147.0, -34.0, 0.01)), ({"name": "B"}, geometry)],
    )
    with pytest.raises(InputError, match=r"p\.geojson, row 2: paddock 'B' has no geometry"):
        read_paddocks(BoundarySettings(paddocks=path))


@pytest.mark.parametrize(
    "geometry",
    [
        {"type": "Point", "coordinates": [147.0, -34.0]},
        {"type": "LineString", "coordinates": [[147.0, -34.0], [147.01, -34.0]]},
    ],
    ids=["point", "line"],
)
def test_non_polygon_paddock_is_an_error_naming_type_and_feature(tmp_path, geometry):
    path = write_geojson(tmp_path / "p.geojson", [({"name": "A"}, geometry)])
    with pytest.raises(InputError) as err:
        read_paddocks(BoundarySettings(paddocks=path))
    assert "row 1" in str(err.value) and geometry["type"] in str(err.value)
    assert "polygon" in str(err.value)


def test_missing_file_names_file_and_setting(tmp_path):
    expected = r"nowhere\.geojson: file not found.*\[boundaries\] paddocks"
    with pytest.raises(InputError, match=expected):
        read_paddocks(BoundarySettings(paddocks=tmp_path / "nowhere.geojson"))


@pytest.mark.parametrize("name,text", [("p.geojson", "not json at all"),
                                       ("p.csv", "a,b\n1,2\n")])
def test_unreadable_or_geometry_free_file_is_an_input_error(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputError, match=name.replace(".", r"\.")):
        read_paddocks(BoundarySettings(paddocks=path))


def test_shapefile_without_prj_is_refused(tmp_path):
    path = tmp_path / "p.shp"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the writer warns about the missing CRS too
        gpd.GeoDataFrame({"name": ["A"]}, geometry=[square(E0, N0, 100)]).to_file(path)
    with pytest.raises(InputError, match=r"no coordinate reference system.*\.prj"):
        read_paddocks(BoundarySettings(paddocks=path))


def test_zipped_shapefile_is_read(tmp_path):
    write_projected(tmp_path / "p.shp", {"name": ["A"]}, [square(E0, N0, 100)])
    archive = tmp_path / "p.zip"
    with zipfile.ZipFile(archive, "w") as z:
        for ext in ("shp", "shx", "dbf", "prj"):
            z.write(tmp_path / f"p.{ext}", f"p.{ext}")
    out = read_paddocks(BoundarySettings(paddocks=archive))
    assert out["paddock"].tolist() == ["A"]
    assert out.geometry[0].area == pytest.approx(100 * 100)


def test_projected_coordinates_labelled_as_lonlat_are_refused(tmp_path):
    # UTM metres written into GeoJSON (which is lon/lat by definition, RFC 7946 section 4)
    path = write_geojson(tmp_path / "p.geojson",
                         [({"name": "A"}, shapely.geometry.mapping(square(E0, N0, 100)))])
    with pytest.raises(InputError, match="look projected"):
        read_paddocks(BoundarySettings(paddocks=path))


def test_multi_layer_file_needs_a_layer(tmp_path):
    path = tmp_path / "farm.gpkg"
    write_projected(path, {"name": ["A"]}, [square(E0, N0, 100)], layer="paddocks")
    write_projected(path, {"name": ["Dam"]}, [square(E0 + 10, N0 + 10, 10)], layer="dams")
    with pytest.raises(InputError, match=r"2 layers.*\[boundaries\] layer"):
        read_paddocks(BoundarySettings(paddocks=path))
    out = read_paddocks(BoundarySettings(paddocks=path, layer="paddocks"))
    assert out["paddock"].tolist() == ["A"]
    with pytest.raises(InputError, match="no layer 'padocks'"):
        read_paddocks(BoundarySettings(paddocks=path, layer="padocks"))


ring_points = st.lists(
    st.tuples(st.integers(0, 20), st.integers(0, 20)), min_size=3, max_size=8
)


@settings(max_examples=30, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(points=ring_points)
def test_any_ring_gives_a_valid_polygon_or_a_clear_error(tmp_path, points):
    """Property: whatever ring is drawn, the reader returns a valid polygonal
    paddock (warning exactly when the ring was invalid) or raises InputError."""
    ring = [(E0 + 10.0 * x, N0 + 10.0 * y) for x, y in points]
    drawn = shapely.Polygon(ring)
    path = tmp_path / "p.gpkg"
    if path.exists():
        path.unlink()
    write_projected(path, {"name": ["P"]}, [drawn])
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            out = read_paddocks(BoundarySettings(paddocks=path))
        except InputError as exc:
            assert "p.gpkg" in str(exc) and "row 1" in str(exc)
            return
    geom = out.geometry[0]
    assert geom.is_valid and geom.geom_type in ("Polygon", "MultiPolygon") and geom.area > 0
    repaired = any(issubclass(w.category, DataWarning) and "repaired" in str(w.message)
                   for w in caught)
    assert repaired == (not drawn.is_valid)
    if drawn.is_valid:
        assert geom.area == pytest.approx(drawn.area)


# --------------------------------------------------------------------------- exclusions


def test_exclusions_and_creek_buffers_in_the_working_crs(tmp_path):
    dam = square(147.001, -34.001, 0.0005)
    exclusions = write_geojson(tmp_path / "ex.geojson",
                               [({"type": "Dam"}, shapely.geometry.mapping(dam))])
    creek_m = shapely.LineString([(E0, N0), (E0 + 300, N0)])  # straight, 300 m
    creeks = write_projected(tmp_path / "creek.gpkg", {"name": ["Bell Creek"]}, [creek_m])
    s = BoundarySettings(paddocks=tmp_path / "unused.geojson", exclusions=exclusions,
                         creeks=creeks, creek_buffer_m=10.0)
    out = read_exclusions(s, crs=UTM55S)
    assert list(out.columns) == ["exclusion", "kind", "geometry"]
    assert out["exclusion"].tolist() == ["Dam", "Bell Creek"]
    assert out["kind"].tolist() == ["area", "creek buffer"]
    assert out.crs.equals(pyproj.CRS(UTM55S))
    buffered = out.geometry[1]
    # [derived] a round-capped buffer of a segment has area 2 d L + pi d^2
    # (a little less, as the caps are polygons)
    assert buffered.area == pytest.approx(2 * 10 * 300 + math.pi * 10**2, rel=2e-3)
    assert buffered.contains(shapely.Point(E0 + 150, N0 + 9.9))
    assert not buffered.contains(shapely.Point(E0 + 150, N0 + 10.1))
    # the dam is now in metres: a 0.0005 degree square at 34 degrees south is about
    # 46 m x 55 m, some 2 600 m^2 [derived: 111 km per degree, times cos 34 degrees east-west]
    assert 1000 < out.geometry[0].area < 4000


def test_creek_buffer_is_in_metres_even_in_a_feet_crs(tmp_path):
    # EPSG:2263 is in US survey feet; the buffer must still be 10 m on the ground
    creek = write_projected(tmp_path / "c.gpkg", {"name": ["C"]},
                            [shapely.LineString([(1_000_000, 200_000), (1_001_000, 200_000)])],
                            crs="EPSG:2263")
    out = read_exclusions(BoundarySettings(paddocks=Path("x"), creeks=creek, creek_buffer_m=10.0),
                          crs="EPSG:2263")
    minx, miny, maxx, maxy = out.geometry[0].bounds
    feet_per_metre = 1 / 0.3048006096  # [derived] US survey foot = 1200/3937 m
    assert (maxy - miny) == pytest.approx(2 * 10 * feet_per_metre, rel=1e-6)


def test_creeks_need_a_projected_crs(tmp_path):
    line = {"type": "LineString", "coordinates": [[147, -34], [147.01, -34]]}
    creek = write_geojson(tmp_path / "c.geojson", [({}, line)])
    with pytest.raises(CRSError, match="not projected"):
        read_exclusions(BoundarySettings(paddocks=Path("x"), creeks=creek), crs="EPSG:4326")
    with pytest.raises(CRSError, match="not a coordinate reference system"):
        read_exclusions(BoundarySettings(paddocks=Path("x"), creeks=creek), crs="EPSG:999999")


def test_unnamed_creeks_and_exclusions_are_numbered(tmp_path):
    creek = write_projected(tmp_path / "c.gpkg", {"width": [3.0, 4.0]},
                            [shapely.LineString([(E0, N0), (E0, N0 + 50)]),
                             shapely.LineString([(E0 + 100, N0), (E0 + 100, N0 + 50)])])
    out = read_exclusions(BoundarySettings(paddocks=Path("x"), creeks=creek), crs=UTM55S)
    assert out["exclusion"].tolist() == ["Creek 1", "Creek 2"]


def test_lines_in_the_exclusions_file_are_refused(tmp_path):
    ex = write_geojson(tmp_path / "ex.geojson",
                       [({"name": "fence"},
                         {"type": "LineString", "coordinates": [[147, -34], [147.01, -34]]})])
    with pytest.raises(InputError, match=r"row 1.*LineString.*\[boundaries\] creeks"):
        read_exclusions(BoundarySettings(paddocks=Path("x"), exclusions=ex), crs=UTM55S)


def test_points_in_the_creeks_file_are_refused(tmp_path):
    c = write_geojson(tmp_path / "c.geojson",
                      [({"name": "spring"}, {"type": "Point", "coordinates": [147, -34]})])
    with pytest.raises(InputError, match=r"c\.geojson, row 1: creek 'spring' is a Point"):
        read_exclusions(BoundarySettings(paddocks=Path("x"), creeks=c), crs=UTM55S)


def test_no_exclusion_files_give_an_empty_frame_with_the_columns():
    out = read_exclusions(BoundarySettings(paddocks=Path("x")), crs=UTM55S)
    assert len(out) == 0
    assert list(out.columns) == ["exclusion", "kind", "geometry"]
    assert out.crs.equals(pyproj.CRS(UTM55S))


# --------------------------------------------------------------------------- zones


def test_user_zones_are_read_reprojected_and_ids_kept_as_text(tmp_path):
    path = write_geojson(
        tmp_path / "z.geojson",
        [({"Zone": 1}, lonlat_square(147.0, -34.0, 0.002)),
         ({"Zone": 2}, lonlat_square(147.002, -34.0, 0.002))],
    )
    with no_warnings():
        out = read_user_zones(path, crs=UTM55S)
    assert out["zone"].tolist() == ["1", "2"]
    assert out.crs.equals(pyproj.CRS(UTM55S))
    # a 0.002 degree square at 34 degrees south is roughly 185 m x 222 m [derived, rounded]
    assert 3.0e4 < out.geometry[0].area < 5.0e4


def test_user_zone_column_can_be_named_and_duplicates_merge(tmp_path):
    path = write_projected(tmp_path / "z.gpkg", {"MZ_CODE": ["A", "B", "A"], "id": [1, 2, 3]},
                           [square(E0, N0, 50), square(E0 + 50, N0, 50), square(E0 + 200, N0, 50)])
    with pytest.warns(DataWarning, match="share the zone name 'A'"):
        out = read_user_zones(path, crs=UTM55S, id_column="MZ_CODE")
    assert out["zone"].tolist() == ["A", "B"]
    assert out.geometry[0].geom_type == "MultiPolygon"
    with pytest.raises(InputError, match="'A' at features 1, 3"):
        read_user_zones(path, crs=UTM55S, id_column="MZ_CODE", duplicate_names="error")
    # without the setting, the "id" column is found
    assert read_user_zones(path, crs=UTM55S)["zone"].tolist() == ["1", "2", "3"]


def test_user_zones_must_be_polygons(tmp_path):
    path = write_geojson(tmp_path / "z.geojson",
                         [({"zone": 1}, {"type": "Point", "coordinates": [147, -34]})])
    with pytest.raises(InputError, match=r"row 1: zone '1' is a Point"):
        read_user_zones(path, crs=UTM55S)


# ------------------------------------------------------------------ messy GeoJSON (hypothesis)
#
# Whatever a paddock, exclusion, creek or zones file holds, reading it works or raises a
# GeosoilError naming the file (and the feature, where one feature is at fault).

import traceback  # noqa: E402

from click.testing import CliRunner  # noqa: E402
from geosoil.cli.main import cli  # noqa: E402

from geosoil.boundaries import read_user_zones as _read_zones  # noqa: E402
from geosoil.errors import GeosoilError  # noqa: E402

_SQ = [[[146.0, -35.0], [146.01, -35.0], [146.01, -35.01], [146.0, -35.01], [146.0, -35.0]]]
_MESSY_GEOMETRIES = [
    None, "abc", 5, {"type": "Polygon"}, {"type": "Polygonx", "coordinates": []},
    {"type": "Polygon", "coordinates": []}, {"type": "MultiPolygon", "coordinates": []},
    {"type": "Polygon", "coordinates": _SQ},
    {"type": "Polygon", "coordinates": [[[146, -35], [146.01, -35.01], [146.01, -35],
                                         [146, -35.01], [146, -35]]]},  # bow tie
    {"type": "Polygon", "coordinates": [[[146, -35], [146.01, -35], [146.02, -35],
                                         [146, -35]]]},  # no area
    {"type": "Polygon", "coordinates": [[[146, -35], [146.01, -35], [146.01, -35.01]]]},  # open
    {"type": "Polygon", "coordinates": [[[146, -35, 9], [146.01, -35, 9], [146, -35.01, 9],
                                         [146, -35, 9]]]},
    {"type": "Polygon", "coordinates": [*_SQ, [[147, -36], [147.01, -36], [147, -36.01],
                                               [147, -36]]]},  # hole outside the shell
    {"type": "Polygon", "coordinates": [[[0, 0], [1e308, 0], [1e308, 1e308], [0, 0]]]},
    {"type": "Point", "coordinates": [146, -35]},
    {"type": "LineString", "coordinates": [[146, -35], [146.01, -35]]},
    {"type": "GeometryCollection", "geometries": []},
    {"type": "GeometryCollection", "geometries": [{"type": "Polygon", "coordinates": _SQ},
                                                  {"type": "Point", "coordinates": [146, -35]}]},
    {"type": "GeometryCollection", "geometries": [
        {"type": "GeometryCollection", "geometries": [{"type": "Polygon", "coordinates": _SQ}]}]},
]
_MESSY_PROPERTIES = [
    None, {}, {"name": "A"}, {"name": "A"}, {"name": None}, {"name": ""}, {"name": "  "},
    {"name": 5}, {"name": 1.5}, {"name": True}, {"name": [1]}, {"name": {"a": 1}},
    {"paddock": "B"}, {"Name": "A", "name": "B"}, {" name ": "C"}, {"zone": 2}, {"type": "dam"},
]
_MESSY_CRS = [None, {"type": "name", "properties": {"name": "EPSG:4326"}},
              {"type": "name", "properties": {"name": "EPSG:28355"}},
              {"type": "name", "properties": {"name": "junk"}},
              {"type": "name", "properties": {"name": None}}, {"type": "name"}, "x"]


@st.composite
def messy_geojson(draw) -> str:
    """GeoJSON text: wrong types, empty and invalid geometries, missing properties, odd CRS,
    nested collections, files cut short."""
    features = []
    for _ in range(draw(st.integers(0, 4))):
        feature: dict = {"type": draw(st.sampled_from(["Feature", "Feature", "feature"]))}
        if draw(st.integers(0, 9)):
            feature["geometry"] = draw(st.sampled_from(_MESSY_GEOMETRIES))
        if draw(st.integers(0, 9)):
            feature["properties"] = draw(st.sampled_from(_MESSY_PROPERTIES))
        features.append(feature)
    top: object = {"type": draw(st.sampled_from(
        ["FeatureCollection", "FeatureCollection", "Feature", "GeometryCollection"])),
        "features": features}
    crs = draw(st.sampled_from([*_MESSY_CRS, "leave out", "leave out"]))
    if crs != "leave out":
        top["crs"] = crs
    if draw(st.integers(0, 9)) == 0:
        top = draw(st.sampled_from([[], {}, "x", None, {"type": "FeatureCollection"},
                                    {"type": "FeatureCollection", "features": {}}]))
    text = json.dumps(top)
    if draw(st.integers(0, 14)) == 0:
        text = text[: draw(st.integers(0, len(text)))]  # cut short
    return text


def _only_geosoil_errors(path: Path, call) -> GeosoilError | None:
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            call()
    except GeosoilError as exc:
        assert path.name in str(exc), str(exc)
        if isinstance(exc, InputError) and exc.row is not None:
            assert f"row {exc.row}" in str(exc) and 1 <= exc.row <= 4
        return exc
    except Exception as exc:  # noqa: BLE001 - the property under test
        pytest.fail("escaped as " + "".join(traceback.format_exception_only(exc)))
    return None


@settings(max_examples=80, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=messy_geojson(), duplicate_names=st.sampled_from(["merge", "error"]))
def test_messy_geojson_raises_only_geosoil_errors_naming_the_file(tmp_path, text,
                                                                   duplicate_names):
    path = tmp_path / "paddocks.geojson"
    path.write_text(text)
    s = BoundarySettings(paddocks=path, exclusions=path, creeks=path,
                         duplicate_names=duplicate_names)
    _only_geosoil_errors(path, lambda: read_paddocks(s))
    _only_geosoil_errors(path, lambda: read_exclusions(s, crs=UTM55S))
    _only_geosoil_errors(path, lambda: _read_zones(path, crs=UTM55S,
                                                   duplicate_names=duplicate_names))


def _geojson(path: Path, *features: tuple[dict, dict | None]) -> Path:
    path.write_text(json.dumps({"type": "FeatureCollection", "features": [
        {"type": "Feature", "properties": p, "geometry": g} for p, g in features]}))
    return path


def test_nested_geometry_collection_of_polygons_is_a_paddock(tmp_path):
    """A GeometryCollection inside a GeometryCollection (allowed by GeoJSON, RFC 7946 section
    3.1.8, though discouraged) holding one square was refused as 'mixing' types."""
    nested = {"type": "GeometryCollection", "geometries": [
        {"type": "GeometryCollection", "geometries": [{"type": "Polygon", "coordinates": _SQ}]}]}
    path = _geojson(tmp_path / "p.geojson", ({"name": "A"}, nested))
    out = read_paddocks(BoundarySettings(paddocks=path))
    assert out.geometry[0].equals(shapely.Polygon(_SQ[0]))


def test_nested_collection_with_a_point_names_the_feature(tmp_path):
    nested = {"type": "GeometryCollection", "geometries": [
        {"type": "GeometryCollection", "geometries": [
            {"type": "Polygon", "coordinates": _SQ},
            {"type": "Point", "coordinates": [146, -35]}]}]}
    square = {"type": "Polygon", "coordinates": _SQ}
    path = _geojson(tmp_path / "p.geojson", ({"name": "A"}, square), ({"name": "B"}, nested))
    with pytest.raises(InputError) as info:
        read_paddocks(BoundarySettings(paddocks=path))
    assert info.value.row == 2 and "p.geojson, row 2" in str(info.value)
    assert "Point" in str(info.value) and "Fix:" in str(info.value)


def test_nested_collection_of_lines_is_a_creek(tmp_path):
    line = {"type": "LineString", "coordinates": [[146.0, -35.0], [146.01, -35.0]]}
    nested = {"type": "GeometryCollection", "geometries": [
        {"type": "GeometryCollection", "geometries": [line]}]}
    pad = _geojson(tmp_path / "p.geojson", ({"name": "A"}, {"type": "Polygon", "coordinates": _SQ}))
    creeks = _geojson(tmp_path / "c.geojson", ({}, nested))
    out = read_exclusions(BoundarySettings(paddocks=pad, creeks=creeks), crs=UTM55S)
    assert out["kind"].tolist() == ["creek buffer"] and out.geometry[0].area > 0


def test_an_exclusion_line_message_reads_well(tmp_path):
    line = {"type": "LineString", "coordinates": [[146.0, -35.0], [146.01, -35.0]]}
    path = _geojson(tmp_path / "x.geojson", ({}, line))
    with pytest.raises(InputError, match="an exclusion must be a polygon"):
        read_exclusions(BoundarySettings(paddocks=path, exclusions=path), crs=UTM55S)


# The command line on messy paddock files: exit 1 with a message, never a traceback.

_LAB = ("Sample,Longitude,Latitude,Ca (cmol/kg),Mg (cmol/kg),K (cmol/kg),Na (cmol/kg),"
        "Al (cmol/kg),pH (water)\n"
        + "".join(f"S{i},146.00{i},-35.00{i},5.{i},2.1,0.5,0.4,0.1,6.{i}\n" for i in range(1, 6)))


@settings(max_examples=15, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(text=messy_geojson(), command=st.sampled_from(["check", "run"]))
def test_cli_on_a_messy_paddock_file_never_shows_a_traceback(tmp_path_factory, text, command):
    folder = tmp_path_factory.mktemp("cli")
    (folder / "lab.csv").write_text(_LAB)
    (folder / "paddocks.geojson").write_text(text)
    (folder / "geosoil.toml").write_text(
        '[samples]\nfile = "lab.csv"\n\n[boundaries]\npaddocks = "paddocks.geojson"\n\n'
        f'[output]\ncache_dir = "{(folder / "cache").as_posix()}"\n')
    extra = [] if command == "check" else ["--out", str(folder / "out")]
    result = CliRunner().invoke(cli, [command, str(folder), *extra])
    assert "Traceback" not in result.stderr + result.stdout
    assert result.exit_code in (0, 1), (result.exit_code, result.stderr, result.exception)
    assert result.exception is None or isinstance(result.exception, SystemExit), repr(
        result.exception)
    if result.exit_code == 1:
        assert any(ln.startswith(("error:", "problem:")) for ln in result.stderr.splitlines())
