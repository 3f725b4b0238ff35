"""geosoil.record: the versions a run records."""

from __future__ import annotations

import importlib.metadata as md

import geopandas  # noqa: F401  (imported: their versions are read from the modules)
import jinja2  # noqa: F401
import pyogrio  # noqa: F401
import rasterio  # noqa: F401

from geosoil.record import versions


def test_versions_read_from_the_modules_equal_the_installed_metadata() -> None:
    """Each library's version as the run records it (from the module when it is imported)
    is the version its installed metadata gives (importlib.metadata, the reference)."""
    got = versions()
    for pkg in ("numpy", "pandas", "geopandas", "shapely", "pyproj", "rasterio", "pyogrio",
                "jinja2", "scipy"):
        assert got[pkg] == md.version(pkg), pkg
    assert got["gdal"] and got["proj"]
