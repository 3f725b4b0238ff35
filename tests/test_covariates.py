"""Bulk-density rasters read onto paddock grids."""

from __future__ import annotations

from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import rasterio
import shapely
from rasterio.transform import from_origin

from geosoil.covariates import bulk_density_on_grid, read_onto_grid
from geosoil.errors import DataWarning, InputError
from geosoil.grids import aligned_grids

CRS = "EPSG:32755"


@pytest.fixture()
def grid():
    pads = gpd.GeoDataFrame(
        {"paddock": ["A"]}, geometry=[shapely.box(500_000, 6_160_000, 500_200, 6_160_100)], crs=CRS
    )
    return aligned_grids(pads, cell_size_m=10.0)["A"]


def _raster(path: Path, value: np.ndarray, *, origin=(499_900, 6_160_200), crs=CRS, res=20.0):
    h, w = value.shape
    with rasterio.open(
        path, "w", driver="GTiff", height=h, width=w, count=1, dtype="float32", crs=crs,
        transform=from_origin(origin[0], origin[1], res, res), nodata=-1.0,
    ) as dst:
        dst.write(value.astype("float32"), 1)
    return path


def test_constant_raster_gives_its_value_on_every_cell(tmp_path, grid):
    p = _raster(tmp_path / "bd.tif", np.full((20, 30), 1.45))
    bd = read_onto_grid(p, grid)
    assert np.allclose(bd[grid.mask], 1.45, atol=1e-6)
    assert np.isnan(bd[~grid.mask]).all()


def test_partial_cover_falls_back_with_a_warning(tmp_path, grid):
    # the raster covers only the western half of the paddock (x < 500 100)
    p = _raster(tmp_path / "bd.tif", np.full((20, 10), 1.2))
    with pytest.warns(DataWarning, match="missing on"):
        bd = bulk_density_on_grid(p, grid, fallback_g_cm3=1.4)
    xs, _ = grid.cell_centres()
    vals = bd[grid.mask]
    assert np.allclose(vals[xs < 500_090], 1.2, atol=1e-6)
    assert np.allclose(vals[xs > 500_110], 1.4)


def test_kg_per_m3_is_refused_naming_the_unit(tmp_path, grid):
    p = _raster(tmp_path / "bd.tif", np.full((20, 30), 1350.0))
    with pytest.raises(InputError, match="g/cm3") as e:
        bulk_density_on_grid(p, grid, fallback_g_cm3=1.3)
    assert str(p) in str(e.value)


def test_missing_file_and_missing_crs(tmp_path, grid):
    with pytest.raises(InputError, match="not found"):
        read_onto_grid(tmp_path / "none.tif", grid)
    p = tmp_path / "nocrs.tif"
    with rasterio.open(p, "w", driver="GTiff", height=2, width=2, count=1, dtype="float32") as dst:
        dst.write(np.ones((2, 2), "float32"), 1)
    with pytest.raises(InputError, match="no CRS"):
        read_onto_grid(p, grid)
