"""Spreader files' content: passes, the machine CRS and the zone raster.

A spreader applies one rate per place per pass. When a zone's rate needs
several passes (the spreader's ``max_per_pass``) or seasons, a file holding
the zone's total rate would tell a controller to put it all out at once, and a
file holding the per-pass rate beside the total invites loading the wrong
column. So every file a machine may load (GeoJSON, shapefile, zone GeoTIFF,
ISO 11783-10 task data) holds one pass: when any zone of a paddock's product
needs several, the files are written once per pass (:func:`pass_frames`), the
zones that need fewer passes holding 0 in the later ones. The total over all
passes is kept only where no machine reads it: the GeoPackage, the tonnage,
``passes.csv``, the map and the report.

Pure functions: GeoDataFrames and arrays in, GeoDataFrames and arrays out.

Examples
--------
>>> import geopandas as gpd, shapely
>>> zones = gpd.GeoDataFrame(
...     {"paddock": "North", "product": "lime", "zone": [1, 2], "kind": "rate",
...      "rate_kg_ha": [1500.0, 4500.0], "passes": [1, 2],
...      "per_pass_kg_ha": [1500.0, 2250.0]},
...     geometry=[shapely.box(0, 0, 100, 100), shapely.box(100, 0, 200, 100)], crs="EPSG:32755")
>>> n_passes(zones)
2
>>> [f["rate_kg_ha"].tolist() for _, f in pass_frames(zones)]
[[1500.0, 2250.0], [0.0, 2250.0]]
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from typing import Any

import numpy as np
import pandas as pd
import pyproj
import rasterio.features
from affine import Affine
from numpy.typing import NDArray

__all__ = [
    "MACHINE_CRS_CHOICES",
    "PASS_COLUMNS",
    "machine_crs",
    "n_passes",
    "pass_frames",
    "pass_suffix",
    "zone_raster",
]

#: Values of ``[output] machine_crs``: WGS 84 longitude/latitude, the run's working CRS
#: (UTM for longitude/latitude inputs), or the CRS of the paddock boundaries file.
MACHINE_CRS_CHOICES: tuple[str, ...] = ("wgs84", "working", "boundaries")

#: Columns of a one-pass zone table (:func:`pass_frames`), geometry last.
PASS_COLUMNS: tuple[str, ...] = (
    "paddock", "product", "zone", "kind", "label", "pass_no", "of_passes", "zone_passes",
    "rate_kg_ha", "area_ha", "n_cells", "geometry",
)

_WGS84 = "EPSG:4326"


def n_passes(zones: pd.DataFrame) -> int:
    """The number of passes (or seasons) the zones of one paddock and product need.

    Parameters
    ----------
    zones : DataFrame
        Zones with ``passes`` (missing or NaN counts as 1).

    Returns
    -------
    int
        The largest ``passes``, at least 1.
    """
    if "passes" not in zones.columns or zones.empty:
        return 1
    p = pd.to_numeric(zones["passes"], errors="coerce").fillna(1)
    return max(1, int(p.max()))


def pass_suffix(k: int, n: int, *, split_into: str = "passes") -> str:
    """The part of a file name that tells pass ``k`` of ``n`` ("" when there is one).

    Parameters
    ----------
    k, n : int
        The pass (1-based) and the number of passes.
    split_into : str
        ``"passes"`` or ``"seasons"`` (``[spreader] split_into``).

    Returns
    -------
    str
        ``"_pass2"``, ``"_season2"`` or ``""``.

    Examples
    --------
    >>> pass_suffix(2, 3), pass_suffix(1, 2, split_into="seasons"), pass_suffix(1, 1)
    ('_pass2', '_season1', '')
    """
    if n <= 1:
        return ""
    word = "season" if split_into == "seasons" else "pass"
    return f"_{word}{k}"


def pass_frames(zones: Any) -> Iterator[tuple[int, Any]]:
    """One zone table per pass: ``(k, frame)`` for k = 1..n.

    Each frame holds the zones with ``rate_kg_ha`` the rate of that pass only:
    the zone's ``per_pass_kg_ha`` while it still needs passes (``passes >= k``),
    0 after. Over the passes the rates add up to the zone's total
    ``rate_kg_ha``. ``pass_no`` is k, ``of_passes`` is n, ``zone_passes`` the
    passes that zone needs. The total, the rate before spreader limits and the
    schedule text are left out, so no column of a one-pass file can be read as
    more than one pass.

    With one pass (no zone needs more), the one frame has each zone's rate.

    Parameters
    ----------
    zones : GeoDataFrame
        One paddock's zones for one product (:func:`geosoil.zones.make_zones`).

    Yields
    ------
    (int, GeoDataFrame)
        The pass and its zones, columns :data:`PASS_COLUMNS` that ``zones`` has.
    """
    n = n_passes(zones)
    rate = pd.to_numeric(zones["rate_kg_ha"], errors="coerce").fillna(0.0).astype(float)
    if "passes" in zones.columns:
        passes = pd.to_numeric(zones["passes"], errors="coerce").fillna(1).astype(int)
    else:
        passes = pd.Series(np.where(rate > 0, 1, 0), index=zones.index)
    if "per_pass_kg_ha" in zones.columns:
        per = pd.to_numeric(zones["per_pass_kg_ha"], errors="coerce").fillna(rate).astype(float)
    else:
        per = rate
    for k in range(1, n + 1):
        out = zones.copy()
        out["rate_kg_ha"] = rate.to_numpy() if n == 1 else np.where(passes >= k, per, 0.0)
        out["pass_no"] = k
        out["of_passes"] = n
        out["zone_passes"] = passes.astype("int64").to_numpy()
        keep = [c for c in PASS_COLUMNS if c in out.columns]
        yield k, out[keep]


def machine_crs(choice: str, *, working: Any, boundaries: Any = None) -> pyproj.CRS:
    """The CRS of the shapefile and zone GeoTIFF for ``[output] machine_crs``.

    Parameters
    ----------
    choice : str
        One of :data:`MACHINE_CRS_CHOICES`.
    working : CRS-like
        The run's working CRS.
    boundaries : CRS-like, optional
        The paddock boundaries file's CRS; the working CRS when unknown.

    Returns
    -------
    pyproj.CRS

    Examples
    --------
    >>> machine_crs("wgs84", working="EPSG:32755").to_epsg()
    4326
    >>> machine_crs("boundaries", working="EPSG:32755", boundaries="EPSG:28355").to_epsg()
    28355
    """
    if choice not in MACHINE_CRS_CHOICES:
        raise ValueError(f"machine CRS {choice!r} is not one of {', '.join(MACHINE_CRS_CHOICES)}")
    if choice == "wgs84":
        return pyproj.CRS.from_user_input(_WGS84)
    if choice == "boundaries" and boundaries is not None:
        return pyproj.CRS.from_user_input(boundaries)
    return pyproj.CRS.from_user_input(working)


def _target_grid(bounds: tuple[float, float, float, float], crs: pyproj.CRS,
                 cell_size_m: float) -> tuple[Affine, int, int]:
    """A north-up grid over ``bounds`` (in ``crs``) with cells of about ``cell_size_m``."""
    x0, y0, x1, y1 = bounds
    if crs.is_geographic:
        lon0, lat0 = (x0 + x1) / 2, (y0 + y1) / 2
        geod = pyproj.Geod(ellps="WGS84")
        _, lat1, _ = geod.fwd(lon0, lat0, 0.0, cell_size_m)
        lon1, _, _ = geod.fwd(lon0, lat0, 90.0, cell_size_m)
        dx, dy = abs(lon1 - lon0), abs(lat1 - lat0)
    else:
        unit = crs.axis_info[0].unit_conversion_factor or 1.0
        dx = dy = cell_size_m / unit
    left = math.floor(x0 / dx) * dx
    top = math.ceil(y1 / dy) * dy
    width = max(1, math.ceil((x1 - left) / dx))
    height = max(1, math.ceil((top - y0) / dy))
    return Affine(dx, 0.0, left, 0.0, -dy, top), width, height


def zone_raster(
    zones: Any,
    *,
    crs: Any,
    cell_size_m: float,
    transform: Affine | None = None,
    shape: tuple[int, int] | None = None,
) -> tuple[NDArray[np.float64], Affine]:
    """The zones' rates as a raster in ``crs``: NaN outside the zones and in exclusions.

    Each cell takes the rate of the zone holding its centre. In the zones' own
    CRS pass the paddock grid (``transform``, ``shape``) so the raster lines up
    with the surfaces; in another CRS a north-up grid of cells of about
    ``cell_size_m`` is laid over the zones (degrees at the paddock's centre
    for WGS 84).

    Parameters
    ----------
    zones : GeoDataFrame
        Zones with ``rate_kg_ha`` and ``kind`` (exclusion zones stay NaN).
    crs : CRS-like
        The raster's CRS.
    cell_size_m : float
        Cell size on the ground, metres.
    transform, shape : optional
        The grid to use (both or neither).

    Returns
    -------
    (ndarray, Affine)
        float64 rates (kg/ha) and the grid's transform.

    Examples
    --------
    >>> import geopandas as gpd, shapely
    >>> z = gpd.GeoDataFrame({"kind": ["rate"], "rate_kg_ha": [900.0]},
    ...                      geometry=[shapely.box(500000, 6000000, 500100, 6000050)],
    ...                      crs="EPSG:32755")
    >>> arr, t = zone_raster(z, crs="EPSG:32755", cell_size_m=10.0)
    >>> arr.shape, float(np.nanmax(arr))
    ((5, 10), 900.0)
    """
    target = pyproj.CRS.from_user_input(crs)
    z = zones.to_crs(target) if not pyproj.CRS.from_user_input(zones.crs).equals(target) \
        else zones
    if transform is None or shape is None:
        transform, width, height = _target_grid(tuple(z.total_bounds), target, cell_size_m)
        shape = (height, width)
    kinds = z["kind"].astype(str) if "kind" in z.columns else pd.Series("rate", index=z.index)
    shapes = [(g, float(r)) for g, r, k in zip(z.geometry, z["rate_kg_ha"], kinds, strict=True)
              if g is not None and not g.is_empty and k != "exclusion"]
    if not shapes:
        return np.full(shape, np.nan), transform
    arr = rasterio.features.rasterize(
        shapes, out_shape=shape, transform=transform, fill=np.nan, dtype="float64"
    )
    return arr, transform
