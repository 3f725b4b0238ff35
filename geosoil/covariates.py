"""Rasters that vary a setting across a paddock, read onto its grid. [I/O]

Today: a bulk-density map (g/cm3), for farms where bulk density was measured
or mapped, used instead of a single value per paddock.
"""

from __future__ import annotations

import logging
import warnings
from pathlib import Path

import numpy as np
import rasterio
from numpy.typing import NDArray
from rasterio.errors import RasterioIOError
from rasterio.warp import Resampling, reproject

from .errors import DataWarning, InputError
from .grids import PaddockGrid

__all__ = ["read_onto_grid", "bulk_density_on_grid", "BULK_DENSITY_RANGE"]

logger = logging.getLogger(__name__)

#: Plausible dry bulk densities of mineral soils, g/cm3 (common practice; the
#: USDA-NRCS bulk-density indicator sheet spans about 1.1 to 1.8 for root limits).
BULK_DENSITY_RANGE: tuple[float, float] = (0.5, 2.0)


def read_onto_grid(path: Path, grid: PaddockGrid) -> NDArray[np.float64]:
    """Band 1 of the raster at ``path``, resampled (bilinear) onto ``grid``.

    Cells the raster does not cover, or where it holds nodata, are NaN; so are
    cells outside the grid's mask.

    Parameters
    ----------
    path : Path
        The raster file.
    grid : PaddockGrid
        The paddock's grid.

    Returns
    -------
    ndarray of float64
        Values on the grid, NaN where the raster has no data.

    Raises
    ------
    InputError
        The file is missing, unreadable or has no CRS.
    """
    path = Path(path)
    if not path.exists():
        raise InputError("raster not found", file=path, fix="correct the path in the project file")
    try:
        with rasterio.open(path) as src:
            if src.crs is None:
                raise InputError(
                    "the raster has no CRS", file=path,
                    fix="save it with its coordinate reference system (GeoTIFF)",
                )
            out = np.full((grid.height, grid.width), np.nan, dtype=np.float64)
            reproject(
                source=rasterio.band(src, 1),
                destination=out,
                src_nodata=src.nodata,
                dst_transform=grid.transform,
                dst_crs=grid.crs,
                dst_nodata=np.nan,
                resampling=Resampling.bilinear,
            )
    except RasterioIOError as exc:
        raise InputError(f"cannot read the raster ({exc})", file=path) from None
    out[~grid.mask] = np.nan
    return out


def bulk_density_on_grid(
    path: Path, grid: PaddockGrid, *, fallback_g_cm3: float, key: str = "soil.bulk_density_raster"
) -> NDArray[np.float64]:
    """Bulk density per cell from a raster, the paddock's value where it has none.

    Parameters
    ----------
    path : Path
        Bulk density raster, g/cm3.
    grid : PaddockGrid
        The paddock's grid.
    fallback_g_cm3 : float
        The paddock's bulk density, used where the raster has no data.
    key : str, optional
        Setting named in messages.

    Returns
    -------
    ndarray of float64
        Bulk density per cell, g/cm3.

    Raises
    ------
    InputError
        Values outside :data:`BULK_DENSITY_RANGE` (wrong unit: kg/m3 instead
        of g/cm3 is the usual cause).
    """
    bd = read_onto_grid(path, grid)
    inside = grid.mask
    vals = bd[inside & np.isfinite(bd)]
    lo, hi = BULK_DENSITY_RANGE
    if vals.size and (vals.min() < lo or vals.max() > hi):
        raise InputError(
            f"bulk density from {vals.min():g} to {vals.max():g} over paddock '{grid.name}' is "
            f"outside {lo:g} to {hi:g} g/cm3",
            file=path,
            fix="give the raster in g/cm3 (divide kg/m3 by 1000)",
        )
    missing = inside & ~np.isfinite(bd)
    if missing.any():
        share = missing.sum() / max(int(inside.sum()), 1)
        warnings.warn(
            f"{path}: bulk density missing on {100 * share:.1f} % of paddock '{grid.name}'; "
            f"those cells use {fallback_g_cm3:g} g/cm3 (setting '{key}' falls back to "
            "soil.bulk_density_g_cm3)",
            DataWarning,
            stacklevel=2,
        )
        bd[missing] = fallback_g_cm3
    return bd
