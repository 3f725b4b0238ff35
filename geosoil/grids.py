"""Aligned north-up paddock grids and their masks.

Every paddock gets its own small grid (:class:`PaddockGrid`): a north-up
affine transform, a size, the CRS and a mask of the cells whose centre lies
inside the paddock and outside every exclusion. All grids of a run have the
same cell size and their corners on multiples of it, so the cells of
neighbouring paddocks line up exactly and :func:`mosaic` can put the
paddocks' arrays on one farm array without resampling.

Surfaces are float64 arrays of the grid's shape with NaN outside the mask;
:meth:`PaddockGrid.cell_centres` and :meth:`PaddockGrid.to_array` convert
between those arrays and the flat list of masked cells the interpolators
work on.

Examples
--------
>>> import geopandas as gpd, shapely
>>> paddocks = gpd.GeoDataFrame(
...     {"paddock": ["North", "South"]},
...     geometry=[shapely.box(3.0, 50.0, 103.0, 100.0), shapely.box(3.0, 0.0, 103.0, 50.0)],
...     crs="EPSG:32755")
>>> grids = aligned_grids(paddocks, cell_size_m=10.0)
>>> north = grids["North"]
>>> north.transform.c, north.transform.f, north.width, north.height
(0.0, 100.0, 11, 5)
>>> int(north.mask.sum()), north.cell_area_ha
(50, 0.01)
>>> farm, transform = mosaic([(g, g.to_array(np.full(g.n_cells, 1.0))) for g in grids.values()])
>>> farm.shape, int(np.isfinite(farm).sum())
((10, 11), 100)
"""

from __future__ import annotations

import logging
import math
import warnings
from collections.abc import Iterable
from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import pyproj
import shapely
from affine import Affine
from numpy.typing import ArrayLike, NDArray
from rasterio.features import geometry_mask
from shapely.geometry.base import BaseGeometry

from .errors import CRSError, DataWarning, InputError
from .settings import check_range

__all__ = ["MAX_GRID_CELLS", "PaddockGrid", "aligned_grids", "mosaic"]

logger = logging.getLogger(__name__)

_POLYGONAL = ("Polygon", "MultiPolygon")
_ALIGN_TOL = 1e-6  # share of a cell by which aligned grid edges may differ (rounding)


@dataclass(frozen=True, eq=False)
class PaddockGrid:
    """The grid of one paddock.

    Parameters
    ----------
    name
        The paddock's name.
    transform
        North-up affine transform of the grid's top-left corner (no rotation,
        square or rectangular cells, ``transform.e < 0``).
    width, height
        Columns and rows.
    crs
        The working CRS (projected, metres).
    mask
        Bool array (height, width): True where the cell centre is inside the
        paddock and outside every exclusion. Stored read-only.

    Notes
    -----
    Grids compare by identity (``eq=False``): the mask is an array.
    """

    name: str
    transform: Affine
    width: int
    height: int
    crs: pyproj.CRS
    mask: NDArray[np.bool_]

    def __post_init__(self) -> None:
        t = self.transform
        if t.b != 0 or t.d != 0 or t.a <= 0 or t.e >= 0:
            raise ValueError(f"grid '{self.name}': the transform must be north-up, got {t!r}")
        mask = np.array(self.mask, dtype=bool, copy=True)
        if mask.shape != (self.height, self.width):
            raise ValueError(
                f"grid '{self.name}': mask shape {mask.shape} is not (height, width) = "
                f"({self.height}, {self.width})"
            )
        mask.setflags(write=False)
        object.__setattr__(self, "mask", mask)

    @property
    def cell_size(self) -> float:
        """Cell width in metres (cells are square when built by :func:`aligned_grids`)."""
        return float(self.transform.a)

    @property
    def cell_area_ha(self) -> float:
        """Area of one cell in hectares."""
        return abs(self.transform.a * self.transform.e) / 10_000.0

    @property
    def n_cells(self) -> int:
        """Number of cells in the mask."""
        return int(self.mask.sum())

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """(left, bottom, right, top) of the whole grid, metres."""
        t = self.transform
        return (t.c, t.f + self.height * t.e, t.c + self.width * t.a, t.f)

    def cell_centres(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """x and y of the centres of the masked cells, row by row (row-major order).

        Examples
        --------
        >>> g = PaddockGrid("p", Affine(10, 0, 0, 0, -10, 20), 2, 2, pyproj.CRS(32755),
        ...                 np.array([[True, False], [True, True]]))
        >>> [a.tolist() for a in g.cell_centres()]
        [[5.0, 5.0, 15.0], [15.0, 5.0, 5.0]]
        """
        rows, cols = np.nonzero(self.mask)
        t = self.transform
        x = np.asarray(t.c + (cols + 0.5) * t.a, dtype=np.float64)
        y = np.asarray(t.f + (rows + 0.5) * t.e, dtype=np.float64)
        return x, y

    def to_array(self, values: ArrayLike) -> NDArray[np.float64]:
        """A (height, width) float64 array: ``values`` in the masked cells, NaN elsewhere.

        ``values`` are in the order of :meth:`cell_centres`.

        Examples
        --------
        >>> g = PaddockGrid("p", Affine(10, 0, 0, 0, -10, 20), 2, 2, pyproj.CRS(32755),
        ...                 np.array([[True, False], [True, True]]))
        >>> g.to_array([1.0, 2.0, 3.0]).tolist()
        [[1.0, nan], [2.0, 3.0]]
        """
        v = np.asarray(values, dtype=np.float64)
        if v.shape != (self.n_cells,):
            raise ValueError(
                f"grid '{self.name}' has {self.n_cells} cells; got values of shape {v.shape}"
            )
        out = np.full((self.height, self.width), np.nan)
        out[self.mask] = v
        return out


def _polygonal(geom: BaseGeometry) -> BaseGeometry:
    """The polygonal parts of a geometry as one (Multi)Polygon (empty if none)."""
    if geom.geom_type in _POLYGONAL:
        return geom
    parts = [p for p in shapely.get_parts(geom) if p.geom_type in _POLYGONAL and not p.is_empty]
    return shapely.union_all(parts) if parts else shapely.Polygon()


def _repaired(geom: BaseGeometry, what: str) -> BaseGeometry:
    """``geom`` if valid, else its polygonal make_valid repair (with a DataWarning)."""
    if geom.is_valid:
        return geom
    reason = shapely.is_valid_reason(geom)
    fixed = _polygonal(shapely.make_valid(geom))
    warnings.warn(
        f"{what}: invalid geometry ({reason}) was repaired with shapely.make_valid; "
        f"the repaired area is {fixed.area:.1f} m2 (was {geom.area:.1f} m2 as drawn)",
        DataWarning,
        stacklevel=3,
    )
    return fixed


def _check_crs(crs: object) -> pyproj.CRS:
    if crs is None:
        raise CRSError(
            "the paddocks have no coordinate reference system; grids need a projected one in "
            "metres (reproject to the working CRS first, see geosoil.crs)"
        )
    crs = pyproj.CRS.from_user_input(crs)
    units = {a.unit_name for a in crs.axis_info[:2]}
    if not crs.is_projected or not units <= {"metre", "meter", "m"}:
        raise CRSError(
            f"grids need a projected CRS in metres, got '{crs.name}' "
            f"({'projected' if crs.is_projected else 'not projected'}, units {sorted(units)}); "
            "reproject the paddocks to the working CRS first (see geosoil.crs)"
        )
    return crs


def aligned_grids(
    paddocks: gpd.GeoDataFrame,
    *,
    cell_size_m: float,
    exclusions: BaseGeometry | None = None,
) -> dict[str, PaddockGrid]:
    """One grid per paddock, all on one lattice of square cells.

    Each grid covers its paddock's bounding box, widened to whole cells whose
    edges are multiples of ``cell_size_m`` in the CRS, so every paddock's
    cells line up with its neighbours'. A cell belongs to a paddock when its
    centre is inside the paddock (holes and every part of a multipart paddock
    count) and outside ``exclusions`` (rasterio's ``geometry_mask``, centre
    rule).

    Parameters
    ----------
    paddocks
        A ``paddock`` column (names) and polygon geometry in a projected CRS
        in metres. Several rows with one name are merged into one paddock
        (with a :class:`~geosoil.errors.DataWarning`).
    cell_size_m
        Cell side, metres.
    exclusions
        Areas taken out of every paddock (dams, buffers), same CRS, or None.

    Returns
    -------
    dict
        Paddock name -> :class:`PaddockGrid`, in the order of the rows.

    Raises
    ------
    InputError
        No ``paddock`` column; a row without geometry or with a
        non-polygonal one.
    CRSError
        No CRS, or one that is not projected in metres.
    SettingsError
        ``cell_size_m`` not more than 0.

    Warns
    -----
    DataWarning
        An invalid geometry was repaired with :func:`shapely.make_valid`;
        rows were merged; a paddock holds no cell centre at this cell size.
    """
    check_range(cell_size_m, key="cell_size_m", minimum=0.0, exclusive_minimum=True, unit="m")
    cs = float(cell_size_m)
    if "paddock" not in paddocks.columns:
        raise InputError(
            "the paddocks have no 'paddock' column "
            f"(columns: {', '.join(map(str, paddocks.columns))})",
            column="paddock",
            fix="name each paddock in a 'paddock' column",
        )
    crs = _check_crs(paddocks.crs)
    if exclusions is not None:
        exclusions = _repaired(_polygonal_or_empty(exclusions), "exclusions")
        if exclusions.is_empty:
            exclusions = None
    merged: dict[str, list[BaseGeometry]] = {}
    for row, (name, geom) in enumerate(zip(paddocks["paddock"], paddocks.geometry, strict=True), 1):
        label = str(name)
        if geom is None or geom.is_empty:
            raise InputError(
                f"paddock '{label}' has no geometry", row=row, column="geometry",
                fix="draw its boundary, or delete the row",
            )
        if _polygonal(geom).is_empty:
            raise InputError(
                f"paddock '{label}' is a {geom.geom_type}, not a polygon", row=row,
                column="geometry", fix="give the paddock a polygon boundary",
            )
        merged.setdefault(label, []).append(_repaired(geom, f"paddock '{label}' (row {row})"))
    grids: dict[str, PaddockGrid] = {}
    for label, parts in merged.items():
        if len(parts) > 1:
            warnings.warn(
                f"paddock '{label}' is on {len(parts)} rows; they were merged into one paddock",
                DataWarning,
                stacklevel=2,
            )
        geom = _polygonal(shapely.union_all(parts)) if len(parts) > 1 else _polygonal(parts[0])
        grids[label] = _grid(label, geom, cs, crs, exclusions)
    return grids


#: Largest grid of one paddock (cells of its bounding box): 50 million cells are 400 MB
#: per float64 surface, far beyond any paddock at a sensible cell size.
MAX_GRID_CELLS = 50_000_000


def _polygonal_or_empty(geom: BaseGeometry) -> BaseGeometry:
    return shapely.Polygon() if geom is None or geom.is_empty else _polygonal(geom)


def _grid(
    name: str, geom: BaseGeometry, cs: float, crs: pyproj.CRS, exclusions: BaseGeometry | None
) -> PaddockGrid:
    minx, miny, maxx, maxy = geom.bounds
    i0, i1 = math.floor(minx / cs), math.ceil(maxx / cs)
    j0, j1 = math.floor(miny / cs), math.ceil(maxy / cs)
    width, height = max(1, i1 - i0), max(1, j1 - j0)
    if width * height > MAX_GRID_CELLS:
        raise InputError(
            f"paddock '{name}' spans {maxx - minx:.4g} m x {maxy - miny:.4g} m: its grid of "
            f"{cs:g} m cells would hold more than the {MAX_GRID_CELLS:,} cells one paddock's "
            "grid may hold",
            column="geometry",
            fix="check the boundary's coordinates and CRS (metres, not degrees or "
            "millimetres), or set a larger [grid] cell_size_m",
        )
    transform = Affine(cs, 0.0, i0 * cs, 0.0, -cs, j1 * cs)
    shape = (height, width)
    mask = geometry_mask([geom], out_shape=shape, transform=transform, invert=True)
    if exclusions is not None and exclusions.intersects(geom):
        mask &= geometry_mask([exclusions], out_shape=shape, transform=transform)
    if not mask.any():
        warnings.warn(
            f"paddock '{name}' holds no cell centre at a cell size of {cs:g} m (area "
            f"{geom.area:.0f} m2, less exclusions); it gets no surface. Use a smaller "
            "grid.cell_size_m to map it",
            DataWarning,
            stacklevel=3,
        )
    logger.debug("grid %s: %d x %d cells, %d in the mask", name, width, height, mask.sum())
    return PaddockGrid(name, transform, width, height, crs, mask)


def mosaic(
    grids_and_arrays: Iterable[tuple[PaddockGrid, ArrayLike]],
) -> tuple[NDArray[np.float64], Affine]:
    """Put aligned paddock arrays on one farm array (NaN outside every mask).

    Parameters
    ----------
    grids_and_arrays
        Pairs of a grid and a (height, width) array on it. Only masked cells
        are copied; where masks overlap, later pairs win.

    Returns
    -------
    array, transform
        float64 array covering all the grids, and its north-up transform.

    Raises
    ------
    ValueError
        No pairs, an array of the wrong shape, or grids not on one lattice.
    CRSError
        Grids in different CRSs.
    """
    pairs = [(g, np.asarray(a, dtype=np.float64)) for g, a in grids_and_arrays]
    if not pairs:
        raise ValueError("mosaic needs at least one grid and array")
    first = pairs[0][0]
    a, e = first.transform.a, first.transform.e
    for g, arr in pairs:
        if arr.shape != (g.height, g.width):
            raise ValueError(
                f"array for '{g.name}' has shape {arr.shape}, its grid is ({g.height}, {g.width})"
            )
        if not g.crs.equals(first.crs):
            raise CRSError(
                f"grid '{g.name}' is in {g.crs.name}, '{first.name}' in {first.crs.name}"
            )
        if not (math.isclose(g.transform.a, a, rel_tol=1e-9)
                and math.isclose(g.transform.e, e, rel_tol=1e-9)):
            raise ValueError(
                f"grid '{g.name}' has cells of {g.transform.a:g} x {-g.transform.e:g} m, "
                f"'{first.name}' of {a:g} x {-e:g} m; build all grids with aligned_grids"
            )
    left = min(g.bounds[0] for g, _ in pairs)
    top = max(g.bounds[3] for g, _ in pairs)
    offsets = []
    for g, _ in pairs:
        col = (g.transform.c - left) / a
        row = (g.transform.f - top) / e
        if abs(col - round(col)) > _ALIGN_TOL or abs(row - round(row)) > _ALIGN_TOL:
            raise ValueError(
                f"grid '{g.name}' is not aligned with the others (offset {col:.3f} columns, "
                f"{row:.3f} rows); build all grids with aligned_grids"
            )
        offsets.append((round(row), round(col)))
    height = max(r + g.height for (r, _), (g, _) in zip(offsets, pairs, strict=True))
    width = max(c + g.width for (_, c), (g, _) in zip(offsets, pairs, strict=True))
    out = np.full((height, width), np.nan)
    for (r, c), (g, arr) in zip(offsets, pairs, strict=True):
        window = out[r : r + g.height, c : c + g.width]
        window[g.mask] = arr[g.mask]
    return out, Affine(a, 0.0, left, 0.0, e, top)
