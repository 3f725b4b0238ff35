"""The farm's GeoPackage writer, read back with GDAL (pyogrio) as the outside reader."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import pyogrio
import shapely

from geosoil.gpkg import plain_style, write_gpkg


def test_layers_read_back_and_gdal_settings_are_left_as_they_were(tmp_path: Path) -> None:
    """The layers are written with SQLite's per-transaction disk flush off; GDAL's
    setting is put back afterwards (the rest of the process is not changed)."""
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
    finally:
        pyogrio.set_gdal_config_options({"OGR_SQLITE_SYNCHRONOUS": None})
    layers = [name for name, _ in pyogrio.list_layers(p)]
    assert layers == ["paddocks", "samples", "layer_styles"]
    back = pyogrio.read_dataframe(p, layer="paddocks")
    assert back["paddock"].tolist() == ["North", "South"] and back["n"].tolist() == [1, 2]
    assert back.geometry.area.tolist() == [100.0, 100.0]
    assert pyogrio.read_dataframe(p, layer="samples")["sample_id"].tolist() == ["S1"]
    assert sorted(x.name for x in tmp_path.iterdir()) == ["farm.gpkg"]
