"""The farm's GeoPackage writer, read back with GDAL (pyogrio) as the outside reader."""

from __future__ import annotations

import contextlib
import xml.etree.ElementTree as ET
from pathlib import Path

import geopandas as gpd
import pyogrio
import pytest
import shapely

from geosoil.gpkg import plain_style, write_gpkg, zone_styles


def test_layers_read_back_and_gdal_settings_are_left_as_they_were(tmp_path: Path) -> None:
    """The layers are written with SQLite's per-transaction disk flush off and its journal
    in memory; GDAL's settings are put back afterwards (the rest of the process is not
    changed)."""
    pyogrio.set_gdal_config_options({"OGR_SQLITE_SYNCHRONOUS": "NORMAL"})
    try:
        a = gpd.GeoDataFrame({"paddock": ["North", "South"], "n": [1, 2]},
                             geometry=[shapely.box(0, 0, 10, 10), shapely.box(10, 0, 20, 10)],
                             crs="EPSG:32755")
        b = gpd.GeoDataFrame({"sample_id": ["S1"]}, geometry=[shapely.Point(5, 5)],
                             crs="EPSG:32755")
        p = write_gpkg(tmp_path / "farm.gpkg", {"paddocks": a, "samples": b},
                       styles={"paddocks": plain_style("paddocks", "outline")})
        assert pyogrio.get_gdal_config_option("OGR_SQLITE_SYNCHRONOUS") == "NORMAL"
        assert pyogrio.get_gdal_config_option("OGR_SQLITE_JOURNAL") is None
    finally:
        pyogrio.set_gdal_config_options({"OGR_SQLITE_SYNCHRONOUS": None})
    layers = [name for name, _ in pyogrio.list_layers(p)]
    assert layers == ["paddocks", "samples", "layer_styles"]
    # SQLite's own check of the file (the Python standard library's sqlite3), no journal left
    import sqlite3

    with contextlib.closing(sqlite3.connect(p)) as db:
        assert db.execute("PRAGMA integrity_check").fetchone() == ("ok",)
        assert db.execute("PRAGMA journal_mode").fetchone() == ("delete",)
    assert sorted(f.name for f in tmp_path.iterdir()) == ["farm.gpkg"]
    back = pyogrio.read_dataframe(p, layer="paddocks")
    assert back["paddock"].tolist() == ["North", "South"] and back["n"].tolist() == [1, 2]
    assert back.geometry.area.tolist() == [100.0, 100.0]
    assert pyogrio.read_dataframe(p, layer="samples")["sample_id"].tolist() == ["S1"]
    assert sorted(x.name for x in tmp_path.iterdir()) == ["farm.gpkg"]


# Names with XML's special characters, quotes of both kinds and other scripts.
AWKWARD = "zones_<fine> & \"coarse\" 'lime' ]]> Südhang"

SE = "{http://www.opengis.net/se}"
OGC = "{http://www.opengis.net/ogc}"


def _parse(qml: str, sld: str) -> tuple[ET.Element, ET.Element]:
    """Both styles read back by the standard library's XML parser (expat)."""
    head, _, body = qml.partition("\n")
    assert head.startswith("<!DOCTYPE qgis")
    return ET.fromstring(body), ET.fromstring(sld.encode("utf-8"))


def test_zone_style_text_is_escaped_and_reads_back_as_written() -> None:
    qml, sld = zone_styles(AWKWARD, [0.0, 500.0, 1500.0, 4500.0], unit_note="t/ha <&> \"'")
    q, s = _parse(qml, sld)
    labels = [r.get("label") for r in q.iter("range")]
    assert labels[0] == "0 (nothing spread)"
    assert all(label.endswith(" t/ha <&> \"'") for label in labels[1:]) and len(labels) == 4
    # SLD: the layer named twice, one rule per QML range with the same label
    assert [e.text for e in s.iter(f"{SE}Name")] == [AWKWARD, AWKWARD, *labels]
    assert len(list(s.iter(f"{SE}Rule"))) == len(labels) == len(list(q.iter("symbol")))
    # the class limits the rules filter on are the ranges' limits (SLD's to 6 digits)
    lows = [float(e.find(f"{OGC}Literal").text) for e in s.iter()
            if e.tag in (f"{OGC}PropertyIsGreaterThanOrEqualTo", f"{OGC}PropertyIsGreaterThan")]
    assert lows == pytest.approx([float(r.get("lower")) for r in list(q.iter("range"))[1:]],
                                 rel=5e-6)


@pytest.mark.parametrize("kind", ["outline", "exclusion", "point"])
def test_plain_style_text_is_escaped_and_reads_back_as_written(kind: str) -> None:
    q, s = _parse(*plain_style(AWKWARD, kind))
    assert q.find("renderer-v2").get("type") == "singleSymbol"
    assert len(list(q.iter("symbol"))) == 1
    assert [e.text for e in s.iter(f"{SE}Name")] == [AWKWARD] * 3


def test_styles_of_awkward_layer_names_read_back_from_the_geopackage(tmp_path: Path) -> None:
    """GDAL keeps the layer's name and its style text as given; both parse (expat)."""
    g = gpd.GeoDataFrame({"rate_kg_ha": [0.0, 800.0, 2000.0]},
                         geometry=[shapely.box(i, 0, i + 1, 1) for i in range(3)],
                         crs="EPSG:32755")
    styles = {AWKWARD: zone_styles(AWKWARD, g["rate_kg_ha"].tolist())}
    p = write_gpkg(tmp_path / "farm.gpkg", {AWKWARD: g}, styles=styles)
    back = pyogrio.read_dataframe(p, layer="layer_styles")
    assert back["f_table_name"].tolist() == [AWKWARD]
    assert (back["styleQML"].iloc[0], back["styleSLD"].iloc[0]) == styles[AWKWARD]
    _parse(back["styleQML"].iloc[0], back["styleSLD"].iloc[0])


def test_a_large_layer_gets_a_spatial_index_and_a_small_one_none(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The R-tree is optional in the GeoPackage standard (OGC 12-128r18, extension
    gpkg_rtree_index); a layer from SPATIAL_INDEX_FROM features gets one, registered in
    gpkg_extensions as GDAL writes it; the layers read back the same either way."""
    import sqlite3

    from geosoil import gpkg

    monkeypatch.setattr(gpkg, "SPATIAL_INDEX_FROM", 3)
    small = gpd.GeoDataFrame({"n": [1, 2]}, geometry=[shapely.Point(0, 0), shapely.Point(1, 1)],
                             crs="EPSG:32755")
    large = gpd.GeoDataFrame({"n": [1, 2, 3]}, geometry=[shapely.Point(i, i) for i in range(3)],
                             crs="EPSG:32755")
    p = write_gpkg(tmp_path / "farm.gpkg", {"small": small, "large": large})
    with sqlite3.connect(p) as db:
        indexed = {t for (t,) in db.execute(
            "SELECT table_name FROM gpkg_extensions WHERE extension_name = 'gpkg_rtree_index'")}
    assert indexed == {"large"}
    for name, frame in (("small", small), ("large", large)):
        back = pyogrio.read_dataframe(p, layer=name)
        assert back["n"].tolist() == frame["n"].tolist()
        assert shapely.equals(back.geometry.values, frame.geometry.values).all()
