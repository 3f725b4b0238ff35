"""ISO 11783-10 task data (ISOXML): one paddock's task, or a farm's task set.  [I/O: write_*]

A task controller on a tractor terminal loads a ``TASKDATA`` folder: the
``TASKDATA.XML`` file and the binary grid files it names. This module builds
both from a paddock's spreader zones:

* :func:`grid_from_zones` -- a WGS 84 latitude/longitude grid covering the
  paddock, each cell holding the rate to spread at its centre in mg/m2
  (0 outside the paddock and in exclusion zones).
* :func:`grid_bytes` -- the grid as the binary file of a type 2 grid.
* :func:`taskdata_xml` -- the ``TASKDATA.XML`` text.
* :func:`write_taskdata` -- writes ``TASKDATA/TASKDATA.XML`` and
  ``TASKDATA/GRD00001.bin`` atomically.
* :func:`taskset_xml`, :func:`write_taskset` -- several partfields
  (:class:`Partfield`: a paddock with its exclusions) and tasks
  (:class:`Task`: one grid each, ``GRD00001.bin``, ``GRD00002.bin``...) in one
  ``TASKDATA``; :func:`designators` makes names distinct within 32 characters.
  Exclusions are written inside their partfield as ``PLN`` type 6 (obstacle)
  and creek buffers as type 3 (water surface).

What is written (ISO 11783-10, version 4)
-----------------------------------------
Element codes, attribute letters and value codes below were checked against
public open-source ISOXML implementations (the TypeScript ``isoxml`` library
of dev4Agriculture and generated schema bindings); points marked "from
memory" were not confirmed there.

``ISO11783_TaskData``
    ``VersionMajor="4"``, ``VersionMinor="0"`` (we use nothing from later
    minor versions), ``ManagementSoftwareManufacturer="geosoil"``,
    ``ManagementSoftwareVersion``, ``DataTransferOrigin="1"`` (from the
    farm-management side).
``CTR`` customer
    ``A`` id, ``B`` last name (the farm name: geosoil knows no customer).
``FRM`` farm
    ``A`` id, ``B`` designator, ``I`` customer reference.
``PFD`` partfield (the paddock)
    ``A`` id, ``C`` designator, ``D`` area in m2 (geodesic, WGS 84
    ellipsoid; the unit is from memory), ``E`` customer, ``F`` farm. One
    ``PLN`` (``A="1"``: partfield boundary) per part of the paddock, each with
    one ``LSG`` of type 1 (exterior ring) and one of type 2 per hole; each
    ``LSG`` holds ``PNT`` points (``A="2"``: other) with ``C`` latitude and
    ``D`` longitude in degrees, 9 decimals (about 0.1 mm). Rings are written
    closed (last point = first) with the exterior counter-clockwise and
    holes clockwise (from memory: the standard may not require either).
    Slivers of no area (under 0.01 m2) are left out.
``PDT`` product
    ``A`` id, ``B`` designator.
``TSK`` task
    ``A`` id, ``B`` designator, ``C``/``D``/``E`` customer, farm and
    partfield references, ``G="1"`` (planned), ``I`` position-lost and ``J``
    out-of-field treatment-zone codes (both the zero-rate zone 0: a lost
    position or leaving the paddock stops the product). Children:

    * ``TZN`` code 0 "outside paddock" and code 1 (the grid's zone), each
      with one ``PDV``: ``A="0006"`` (DDI 6, setpoint mass per area
      application rate, mg/m2, ISO 11783-11 data dictionary), ``B`` value,
      ``C`` product reference, ``E`` value-presentation reference. In a
      type 2 grid the cell values take the place of zone 1's ``PDV`` value
      (written as 0).
    * ``GRD``: ``A``/``B`` latitude/longitude of the grid's south-west
      corner (9 decimals), ``C``/``D`` cell height/width in degrees, ``E``
      columns, ``F`` rows, ``G="GRD00001"`` (the binary file's name without
      ``.bin``), ``H`` the binary file's length in bytes, ``I="2"`` (type
      2), ``J="1"`` (the treatment zone whose ``PDV`` list the cell values
      follow).
``VPN`` value presentation
    ``A`` id, ``B`` offset 0, ``C`` scale 0.01, ``D`` 0 decimals, ``E``
    ``"kg/ha"``: a terminal shows (value + offset) x scale, i.e. kg/ha
    (the formula is from memory; it changes the display only, never the rate
    sent to the spreader, which is always in mg/m2).

``GRD00001.bin`` holds one little-endian 32-bit signed integer per cell,
rows from the south edge northwards, each row from west to east: the rate in
mg/m2 (1 kg/ha = 100 mg/m2). The grid's cell size is ``cell_size_m`` turned
into degrees at the centre of the paddock, so cells are about
``cell_size_m`` square there.

Designators (names) are limited to 32 characters by the standard; longer
names are shortened and characters XML cannot carry are removed, with a
:class:`~geosoil.errors.DataWarning` either way.

Rates are advisory: check the task on the terminal before spreading.
"""

from __future__ import annotations

import logging
import math
import re
import warnings
import xml.etree.ElementTree as ET
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyproj
import shapely
from affine import Affine
from numpy.typing import NDArray
from shapely.geometry.base import BaseGeometry
from shapely.geometry.polygon import orient

from . import __version__
from .errors import CRSError, DataWarning, OutputExistsError, RateWarning
from .units import kg_ha_to_mg_m2
from .writers import atomic_write, valid_polygons

__all__ = [
    "DDI_SETPOINT_MASS_PER_AREA",
    "GRID_FILE_NAME",
    "MAX_CELLS",
    "MAX_DESIGNATOR",
    "ZONE_COLUMNS",
    "PLN_BOUNDARY",
    "PLN_OBSTACLE",
    "PLN_WATER",
    "Partfield",
    "Task",
    "TaskGrid",
    "designators",
    "grid_from_zones",
    "taskset_xml",
    "write_taskset",
    "grid_bytes",
    "taskdata_xml",
    "write_taskdata",
]

logger = logging.getLogger(__name__)

#: DDI 6: setpoint mass per area application rate, in mg/m2 (ISO 11783-11).
DDI_SETPOINT_MASS_PER_AREA: int = 6

#: The grid's binary file name without ``.bin`` (pattern ``GRD[0-9]{5}``).
GRID_FILE_NAME: str = "GRD00001"

#: Largest grid written (cells); a larger one asks for a larger cell size.
MAX_CELLS: int = 5_000_000

#: Longest designator (name) the standard allows, in characters.
MAX_DESIGNATOR: int = 32

#: Columns :func:`grid_from_zones` needs.
ZONE_COLUMNS: tuple[str, ...] = ("paddock", "product", "zone", "kind", "rate_kg_ha", "geometry")

_KINDS = ("rate", "remainder", "exclusion")
_INT32_MAX = 2**31 - 1
_WGS84 = "EPSG:4326"
# Rings of the boundary smaller than this (m2) are slivers left by geometry
# operations, not holes a spreader could miss; they are not written.
_MIN_RING_M2 = 0.01

#: Polygon types (ISO 11783-10 ``PLN`` attribute ``A``; checked against the schema
#: bindings of the open-source ``isoxml`` package on PyPI): 1 partfield boundary,
#: 3 water surface, 6 obstacle.
PLN_BOUNDARY: str = "1"
PLN_WATER: str = "3"
PLN_OBSTACLE: str = "6"

# exclusion kinds (geosoil.boundaries.read_exclusions) -> polygon type
_EXCLUSION_PLN = {"area": PLN_OBSTACLE, "creek buffer": PLN_WATER}

# Treatment-zone codes (0..254) used in the task.
_TZN_OUTSIDE = 0
_TZN_GRID = 1

# Characters XML 1.0 cannot carry (its "Char" production), and runs of white space.
_NOT_XML = re.compile("[^\t\n\r\u0020-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")
_SPACES = re.compile(r"\s+")


# --------------------------------------------------------------------------- grid


@dataclass(frozen=True, eq=False)
class TaskGrid:
    """A type 2 task-data grid in WGS 84 latitude/longitude.

    Attributes
    ----------
    min_north, min_east
        Latitude and longitude of the grid's south-west corner, degrees,
        exactly as written (9 decimals).
    cell_north, cell_east
        Cell height and width, degrees, exactly as written (12 decimals).
    values
        int32 array of shape (rows, columns): the rate in mg/m2 of each cell;
        row 0 is the southernmost row, column 0 the westernmost.
    """

    min_north: float
    min_east: float
    cell_north: float
    cell_east: float
    values: NDArray[np.int32]

    @property
    def rows(self) -> int:
        """Number of rows (south to north)."""
        return int(self.values.shape[0])

    @property
    def columns(self) -> int:
        """Number of columns (west to east)."""
        return int(self.values.shape[1])

    @property
    def transform(self) -> Affine:
        """The grid as a north-up raster's transform (longitude, latitude; row 0 the
        northernmost, as a GeoTIFF has it)."""
        return Affine(self.cell_east, 0.0, self.min_east, 0.0, -self.cell_north,
                      self.min_north + self.rows * self.cell_north)


def _to_crs(crs: Any, zones: Any) -> pyproj.CRS:
    if crs is None:
        raise CRSError("no coordinate reference system was given for the zones; "
                       "pass crs= (the zones' working CRS)")
    try:
        out = pyproj.CRS.from_user_input(crs)
    except pyproj.exceptions.CRSError as exc:
        raise CRSError(f"the CRS {crs!r} is not valid: {exc}") from exc
    zcrs = getattr(zones, "crs", None)
    if zcrs is not None and not pyproj.CRS.from_user_input(zcrs).equals(out):
        raise CRSError(
            f"the zones are in {pyproj.CRS.from_user_input(zcrs).name} but crs= says "
            f"{out.name}; pass the zones' own CRS (or reproject the zones first)"
        )
    return out


def _check_zones(zones: Any) -> tuple[str, str, NDArray[np.int64], list[BaseGeometry]]:
    """Check the zone table; return paddock, product, rates (mg/m2) and geometries."""
    missing = [c for c in ZONE_COLUMNS if c not in zones.columns]
    if missing:
        raise ValueError(f"the zones have no column {', '.join(repr(c) for c in missing)}; "
                         f"task data needs {', '.join(ZONE_COLUMNS)}")
    if len(zones) == 0:
        raise ValueError("there are no zones to write as task data")
    for col in ("paddock", "product"):
        names = pd.unique(zones[col].astype(str))
        if len(names) != 1:
            raise ValueError(
                f"task data holds one paddock and one product, but the zones have "
                f"{len(names)} values in column {col!r} ({', '.join(map(repr, names[:5]))}); "
                f"write one task per {col}"
            )
    kinds = zones["kind"].astype(str).to_numpy()
    bad_kind = [k for k in pd.unique(kinds) if k not in _KINDS]
    if bad_kind:
        raise ValueError(f"zone kind {bad_kind[0]!r} is not one of {', '.join(_KINDS)}")
    rate = pd.to_numeric(zones["rate_kg_ha"], errors="coerce").to_numpy(dtype="float64")
    excluded = kinds == "exclusion"
    rate = np.where(excluded, 0.0, rate)
    bad = np.flatnonzero(~np.isfinite(rate) | (rate < 0))
    if bad.size:
        i = int(bad[0])
        raise ValueError(
            f"zone {zones['zone'].iloc[i]} ({kinds[i]}) has rate {zones['rate_kg_ha'].iloc[i]} "
            "kg/ha; a rate to spread must be a number of 0 or more"
        )
    mg = np.rint(np.asarray(kg_ha_to_mg_m2(rate), dtype="float64"))
    if mg.max() > _INT32_MAX:
        i = int(np.argmax(mg))
        raise ValueError(
            f"zone {zones['zone'].iloc[i]} has rate {rate[i]:g} kg/ha, more than a task-data "
            f"grid can hold ({_INT32_MAX / 100:.0f} kg/ha); check the rate's unit"
        )
    if "passes" in zones.columns:
        passes = pd.to_numeric(zones["passes"], errors="coerce").fillna(1).to_numpy()
        for j in np.flatnonzero(passes > 1).tolist():
            warnings.warn(
                f"task data, zone {zones['zone'].iloc[j]}: the grid holds the full rate "
                f"{rate[j]:g} kg/ha, which needs {int(passes[j])} passes of the spreader; "
                "the terminal will not split it, so plan the passes (or a lower rate per "
                "pass) yourself",
                RateWarning,
                stacklevel=3,
            )
    return (str(zones["paddock"].iloc[0]), str(zones["product"].iloc[0]),
            mg.astype("int64"), list(zones.geometry))


def _rate_at(
    geoms: Sequence[BaseGeometry | None],
    rates_mg: NDArray[np.int64],
    *,
    boundary: BaseGeometry,
    x: NDArray[np.float64],
    y: NDArray[np.float64],
) -> NDArray[np.int32]:
    """Rate (mg/m2) of the zone holding each point; 0 outside the boundary and every zone.

    A point on the edge between zones takes the smaller rate.
    """
    keep = [i for i, g in enumerate(geoms) if g is not None and not g.is_empty]
    out = np.zeros(x.shape, dtype="int32")
    if not keep or x.size == 0:
        return out
    # the tree holds the points and the zones are the queries: shapely prepares each query
    # geometry, so every zone is prepared once instead of testing points one by one
    points = shapely.points(x.ravel(), y.ravel())
    tree = shapely.STRtree(points)
    tree_idx, pt_idx = tree.query(np.array([geoms[i] for i in keep], dtype=object),
                                  predicate="intersects")
    flat = np.full(x.size, _INT32_MAX, dtype="int64")
    np.minimum.at(flat, pt_idx, rates_mg[np.asarray(keep)[tree_idx]])
    flat[flat == _INT32_MAX] = 0
    shapely.prepare(boundary)
    inside = shapely.intersects_xy(boundary, x.ravel(), y.ravel())
    flat[~inside] = 0
    return flat.reshape(x.shape).astype("int32")


def _floor_decimals(value: float, decimals: int) -> float:
    """The largest number with ``decimals`` decimals not above ``value`` (as its text reads)."""
    out = float(f"{math.floor(value * 10**decimals) / 10**decimals:.{decimals}f}")
    while out > value:
        out = float(f"{out - 10.0**-decimals:.{decimals}f}")
    return out


def grid_from_zones(
    zones: Any,
    *,
    boundary: BaseGeometry,
    crs: Any,
    cell_size_m: float = 10.0,
) -> TaskGrid:
    """Sample a paddock's zones on a WGS 84 latitude/longitude grid.

    The grid covers the paddock's boundary. Its cell height and width are
    ``cell_size_m`` turned into degrees at the paddock's centre (WGS 84
    ellipsoid). Each cell takes the rate of the zone holding its centre
    (cell centres are transformed into the zones' CRS with pyproj); cells
    whose centre is outside the boundary, or in an exclusion zone, are 0.

    Parameters
    ----------
    zones
        GeoDataFrame of one paddock's zones for one product, with columns
        :data:`ZONE_COLUMNS` (``rate_kg_ha``: the rate to spread).
    boundary
        The paddock (polygon or multipolygon) in ``crs``.
    crs
        The zones' CRS (anything :meth:`pyproj.CRS.from_user_input` takes).
    cell_size_m
        Cell size, metres (at the paddock's centre).

    Returns
    -------
    TaskGrid

    Raises
    ------
    ValueError
        A column is missing, the zones hold more than one paddock or product,
        a rate is missing, negative or too large, or the grid would exceed
        :data:`MAX_CELLS`.
    CRSError
        No CRS, or the zones' CRS differs from ``crs``.

    Warns
    -----
    RateWarning
        A zone's rate needs more than one pass (column ``passes``): the grid
        holds the full rate.

    Examples
    --------
    >>> import geopandas as gpd
    >>> paddock = shapely.box(500000, 6000000, 500200, 6000100)
    >>> zones = gpd.GeoDataFrame(
    ...     {"paddock": ["P1"], "product": ["gypsum"], "zone": [1], "kind": ["rate"],
    ...      "rate_kg_ha": [250.0]}, geometry=[paddock], crs="EPSG:32755")
    >>> grid = grid_from_zones(zones, boundary=paddock, crs="EPSG:32755")
    >>> int(grid.values.max()), grid.values.shape == (grid.rows, grid.columns)
    (25000, True)
    """
    if not (isinstance(cell_size_m, (int, float)) and math.isfinite(cell_size_m)
            and cell_size_m > 0):
        raise ValueError(f"cell_size_m must be a positive number of metres, got {cell_size_m!r}")
    wcrs = _to_crs(crs, zones)
    _, _, rates_mg, geoms = _check_zones(zones)
    if boundary is None or boundary.is_empty or boundary.geom_type not in (
        "Polygon", "MultiPolygon"
    ):
        raise ValueError("the paddock boundary must be a non-empty polygon or multipolygon")

    to_wgs = pyproj.Transformer.from_crs(wcrs, _WGS84, always_xy=True)
    bx0, by0, bx1, by1 = boundary.bounds
    west, south, east, north = to_wgs.transform_bounds(bx0, by0, bx1, by1, densify_pts=21)
    if not all(map(math.isfinite, (west, south, east, north))):
        raise CRSError(f"the paddock's bounds do not transform from {wcrs.name} to WGS 84")
    if east < west or east - west > 1.0 or north - south > 1.0:
        raise ValueError(
            "the paddock spans more than a degree of longitude or latitude, or the "
            "antimeridian; task data is written for one paddock at a time"
        )
    lon0, lat0 = (west + east) / 2, (south + north) / 2
    geod = pyproj.Geod(ellps="WGS84")
    _, lat1, _ = geod.fwd(lon0, lat0, 0.0, cell_size_m)
    lon1, _, _ = geod.fwd(lon0, lat0, 90.0, cell_size_m)
    cell_north = float(f"{lat1 - lat0:.12f}")
    cell_east = float(f"{lon1 - lon0:.12f}")
    if not (0 < cell_north <= 1 and 0 < cell_east <= 1):
        raise ValueError(f"a cell of {cell_size_m:g} m is not between 0 and 1 degree here; "
                         "choose another cell size")
    min_north = _floor_decimals(south, 9)
    min_east = _floor_decimals(west, 9)
    rows = max(1, math.ceil((north - min_north) / cell_north))
    columns = max(1, math.ceil((east - min_east) / cell_east))
    if rows * columns > MAX_CELLS:
        raise ValueError(
            f"a {cell_size_m:g} m grid over this paddock has {rows * columns} cells, more "
            f"than {MAX_CELLS}; choose a larger cell size"
        )
    lats = min_north + (np.arange(rows) + 0.5) * cell_north
    lons = min_east + (np.arange(columns) + 0.5) * cell_east
    lon_g, lat_g = np.meshgrid(lons, lats)
    from_wgs = pyproj.Transformer.from_crs(_WGS84, wcrs, always_xy=True)
    x, y = from_wgs.transform(lon_g, lat_g)
    values = _rate_at(geoms, rates_mg, boundary=boundary,
                      x=np.asarray(x, dtype="float64"), y=np.asarray(y, dtype="float64"))
    logger.debug("task-data grid: %d x %d cells of %.3g x %.3g degrees",
                 rows, columns, cell_north, cell_east)
    values.setflags(write=False)
    return TaskGrid(min_north=min_north, min_east=min_east, cell_north=cell_north,
                    cell_east=cell_east, values=values)


def grid_bytes(grid: TaskGrid) -> bytes:
    """The binary file of a type 2 grid: little-endian int32, rows from the south.

    Parameters
    ----------
    grid : TaskGrid
        The rate grid.

    Returns
    -------
    bytes
        The ``GRD00001.bin`` content.

    Examples
    --------
    >>> g = TaskGrid(min_north=-35.0, min_east=148.0, cell_north=0.0001, cell_east=0.0001,
    ...              values=np.array([[1, 2], [3, 4]], dtype="int32"))
    >>> grid_bytes(g)[:8]
    b'\\x01\\x00\\x00\\x00\\x02\\x00\\x00\\x00'
    """
    return np.ascontiguousarray(grid.values, dtype="<i4").tobytes()


# --------------------------------------------------------------------------- XML


def _designator(text: Any, *, what: str, fallback: str) -> str:
    """``text`` as an ISOXML designator: XML-safe, one line, at most 32 characters."""
    raw = "" if text is None else str(text)
    clean = _NOT_XML.sub("", raw)
    clean = _SPACES.sub(" ", clean).strip()
    problems = []
    if _NOT_XML.search(raw):
        problems.append("characters XML cannot hold were removed")
    if len(clean) > MAX_DESIGNATOR:
        clean = clean[:MAX_DESIGNATOR].rstrip()
        problems.append(f"shortened to the standard's {MAX_DESIGNATOR} characters")
    if not clean:
        clean = fallback
        problems.append(f"empty, so written as {fallback!r}")
    if problems:
        warnings.warn(f"task data: the {what} name {raw!r} was changed ({'; '.join(problems)}): "
                      f"{clean!r}", DataWarning, stacklevel=3)
    return clean


def designators(names: Sequence[str]) -> tuple[list[str], list[tuple[str, str]]]:
    """Designators for ``names``: XML-safe, at most 32 characters, and distinct.

    A name too long for the standard is cut; when two names would then read
    alike, the later ones end in ``~2``, ``~3``... (cut further to fit).

    Parameters
    ----------
    names : sequence of str
        The names as the user wrote them (equal names stay equal).

    Returns
    -------
    (list of str, list of (str, str))
        The designators, in order, and each changed name as (original, designator).

    Examples
    --------
    >>> short, changed = designators(["Lower creek flat below the shearing shed",
    ...                               "Lower creek flat below the shearing shed 2", "Home"])
    >>> short
    ['Lower creek flat below the shear', 'Lower creek flat below the she~2', 'Home']
    >>> len(changed)
    2
    """
    out: list[str] = []
    changed: list[tuple[str, str]] = []
    taken: dict[str, str] = {}
    for raw in names:
        text = "" if raw is None else str(raw)
        clean = _SPACES.sub(" ", _NOT_XML.sub("", text)).strip() or "unnamed"
        short = clean[:MAX_DESIGNATOR].rstrip()
        n = 1
        while short in taken and taken[short] != text:
            n += 1
            tail = f"~{n}"
            short = clean[: MAX_DESIGNATOR - len(tail)].rstrip() + tail
        taken.setdefault(short, text)
        out.append(short)
        if short != text and (text, short) not in changed:
            changed.append((text, short))
    return out, changed


def _sub(parent: ET.Element, tag: str, attrs: dict[str, str]) -> ET.Element:
    return ET.SubElement(parent, tag, attrs)


def _lonlat_parts(boundary: BaseGeometry, crs: pyproj.CRS) -> list[shapely.Polygon]:
    to_wgs = pyproj.Transformer.from_crs(crs, _WGS84, always_xy=True)

    def fwd(coords: NDArray[np.float64]) -> NDArray[np.float64]:
        lon, lat = to_wgs.transform(coords[:, 0], coords[:, 1])
        return np.column_stack([lon, lat])

    # rounded as written (9 decimals, _ring), then repaired: a reprojection or the rounding
    # can make parts that touch overlap (writers.valid_polygons)
    geom = valid_polygons(shapely.transform(boundary, lambda c: np.round(fwd(c), 9)), _WGS84)
    if geom is None:
        return []
    parts = list(geom.geoms) if geom.geom_type == "MultiPolygon" else [geom]
    geod = pyproj.Geod(ellps="WGS84")

    def area(ring: Any) -> float:
        return abs(geod.geometry_area_perimeter(shapely.Polygon(ring))[0])

    out = []
    for p in parts:
        if p.is_empty or area(p.exterior) < _MIN_RING_M2:
            continue
        holes = [h for h in p.interiors if area(h) >= _MIN_RING_M2]
        if len(holes) < len(p.interiors):
            logger.debug("task data: %d hole(s) of no area left out of the boundary",
                         len(p.interiors) - len(holes))
        out.append(orient(shapely.Polygon(p.exterior, holes), sign=1.0))
    return out


def _ring(parent: ET.Element, ring: Any, kind: str) -> None:
    lsg = _sub(parent, "LSG", {"A": kind})
    for lon, lat in np.asarray(ring.coords)[:, :2]:
        _sub(lsg, "PNT", {"A": "2", "C": f"{lat:.9f}", "D": f"{lon:.9f}"})


@dataclass(frozen=True)
class Partfield:
    """A paddock as a task set's partfield.

    Attributes
    ----------
    name
        Its designator (at most 32 characters; see :func:`designators`).
    boundary
        The paddock (polygon or multipolygon) in ``crs``.
    crs
        CRS of ``boundary`` and ``exclusions``.
    exclusions
        Optional GeoDataFrame of areas left untreated (``exclusion`` label,
        ``kind``: ``"area"`` or ``"creek buffer"``), written inside the
        paddock as obstacle (6) or water-surface (3) polygons.
    """

    name: str
    boundary: BaseGeometry
    crs: Any
    exclusions: Any = None


@dataclass(frozen=True)
class Task:
    """One task of a task set: a rate grid of one product on one partfield.

    Attributes
    ----------
    name
        Its designator.
    partfield
        Index of its :class:`Partfield` in the set.
    product
        Designator of its product (tasks with the same product share one ``PDT``).
    grid
        The rate grid (:func:`grid_from_zones`).
    """

    name: str
    partfield: int
    product: str
    grid: TaskGrid


def _polygons(parent: ET.Element, parts: list[shapely.Polygon], kind: str, name: str) -> None:
    geod = pyproj.Geod(ellps="WGS84")
    for part in parts:
        area = abs(geod.geometry_area_perimeter(part)[0])
        pln = _sub(parent, "PLN", {"A": kind, "B": name, "C": str(round(area))})
        _ring(pln, part.exterior, "1")
        for hole in part.interiors:
            _ring(pln, hole, "2")


def _grid_name(j: int) -> str:
    return f"GRD{j:05d}"


def taskset_xml(
    partfields: Sequence[Partfield],
    tasks: Sequence[Task],
    *,
    farm: str,
    software_version: str = __version__,
) -> str:
    """The ``TASKDATA.XML`` text of a task set: partfields, products and tasks.

    One ``PFD`` per partfield (its boundary, ``PLN`` type 1, and its
    exclusions as obstacle or water-surface polygons), one ``PDT`` per
    product, one ``TSK`` per task with its own type 2 grid file
    ``GRD<nnnnn>.bin`` (numbered from 1 in task order). Designators must
    be distinct (partfields, products, tasks); see :func:`designators`.

    Parameters
    ----------
    partfields, tasks
        The paddocks and the tasks on them.
    farm
        The farm (and customer) name.
    software_version
        Written as ``ManagementSoftwareVersion``.

    Returns
    -------
    str
        The XML text.

    Raises
    ------
    ValueError
        Two partfields or tasks share a designator, or a task names no partfield.
    """
    pf_names = [_designator(p.name, what="paddock", fallback="paddock") for p in partfields]
    task_names = [_designator(t.name, what="task", fallback="task") for t in tasks]
    for what, names in (("paddock", pf_names), ("task", task_names)):
        if len(set(names)) != len(names):
            dup = next(n for n in names if names.count(n) > 1)
            raise ValueError(f"two {what}s are named {dup!r} in one task set; "
                             "make their names distinct (geosoil.isoxml.designators)")
    farm_name = _designator(farm, what="farm", fallback="farm")
    ddi = f"{DDI_SETPOINT_MASS_PER_AREA:04X}"

    root = ET.Element("ISO11783_TaskData", {
        "VersionMajor": "4",
        "VersionMinor": "0",
        "ManagementSoftwareManufacturer": "geosoil",
        "ManagementSoftwareVersion": str(software_version),
        "DataTransferOrigin": "1",
    })
    _sub(root, "CTR", {"A": "CTR1", "B": farm_name})
    _sub(root, "FRM", {"A": "FRM1", "B": farm_name, "I": "CTR1"})

    geod = pyproj.Geod(ellps="WGS84")
    for i, (pf, pad) in enumerate(zip(partfields, pf_names, strict=True), start=1):
        wcrs = pyproj.CRS.from_user_input(pf.crs)
        parts = _lonlat_parts(pf.boundary, wcrs)
        areas = [abs(geod.geometry_area_perimeter(p)[0]) for p in parts]
        pfd = _sub(root, "PFD", {"A": f"PFD{i}", "C": pad, "D": str(round(sum(areas))),
                                 "E": "CTR1", "F": "FRM1"})
        for part, area in zip(parts, areas, strict=True):
            pln = _sub(pfd, "PLN", {"A": PLN_BOUNDARY, "B": pad, "C": str(round(area))})
            _ring(pln, part.exterior, "1")
            for hole in part.interiors:
                _ring(pln, hole, "2")
        ex = pf.exclusions
        if ex is not None and len(ex):
            for label, kind, geom in zip(ex.get("exclusion", pd.Series("", index=ex.index)),
                                         ex.get("kind", pd.Series("area", index=ex.index)),
                                         ex.geometry, strict=True):
                if geom is None or geom.is_empty:
                    continue
                inside = shapely.intersection(geom, pf.boundary)
                polys = [g for g in getattr(inside, "geoms", [inside])
                         if g.geom_type in ("Polygon", "MultiPolygon") and not g.is_empty]
                if not polys:
                    continue
                parts_ex = _lonlat_parts(shapely.union_all(polys), wcrs)
                name = _designator(label, what="exclusion", fallback="exclusion")
                _polygons(pfd, parts_ex, _EXCLUSION_PLN.get(str(kind), PLN_OBSTACLE), name)

    products: dict[str, str] = {}
    for t in tasks:
        if t.product not in products:
            products[t.product] = f"PDT{len(products) + 1}"
            _sub(root, "PDT", {"A": products[t.product],
                               "B": _designator(t.product, what="product", fallback="product")})
    for j, (t, name) in enumerate(zip(tasks, task_names, strict=True), start=1):
        if not 0 <= t.partfield < len(partfields):
            raise ValueError(
                f"task {name!r} names partfield {t.partfield}, which is not in the set")
        pdt = products[t.product]
        tsk = _sub(root, "TSK", {"A": f"TSK{j}", "B": name, "C": "CTR1", "D": "FRM1",
                                 "E": f"PFD{t.partfield + 1}", "G": "1",
                                 "I": str(_TZN_OUTSIDE), "J": str(_TZN_OUTSIDE)})
        prod = _designator(t.product, what="product", fallback="product")
        for code, label in ((_TZN_OUTSIDE, "outside paddock"), (_TZN_GRID, f"{prod} rate grid")):
            tzn = _sub(tsk, "TZN", {"A": str(code), "B": label[:MAX_DESIGNATOR].rstrip()})
            _sub(tzn, "PDV", {"A": ddi, "B": "0", "C": pdt, "E": "VPN1"})
        g = t.grid
        _sub(tsk, "GRD", {
            "A": f"{g.min_north:.9f}",
            "B": f"{g.min_east:.9f}",
            "C": f"{g.cell_north:.12f}",
            "D": f"{g.cell_east:.12f}",
            "E": str(g.columns),
            "F": str(g.rows),
            "G": _grid_name(j),
            "H": str(g.rows * g.columns * 4),
            "I": "2",
            "J": str(_TZN_GRID),
        })
    _sub(root, "VPN", {"A": "VPN1", "B": "0", "C": "0.01", "D": "0", "E": "kg/ha"})

    ET.indent(root, space=" ")
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(
        root, encoding="unicode") + "\n"


def taskdata_xml(
    grid: TaskGrid,
    *,
    boundary: BaseGeometry,
    crs: Any,
    paddock: str,
    product_label: str,
    farm: str,
    software_version: str = __version__,
    exclusions: Any = None,
) -> str:
    """The ``TASKDATA.XML`` text of one paddock's task (see the module docstring).

    Parameters
    ----------
    grid
        The rate grid (:func:`grid_from_zones`).
    boundary
        The paddock in ``crs``; written as the partfield's boundary in WGS 84.
    crs
        CRS of ``boundary``.
    paddock, product_label, farm
        Names shown on the terminal (escaped; cut to 32 characters with a
        :class:`~geosoil.errors.DataWarning`).
    software_version
        Written as ``ManagementSoftwareVersion``.
    exclusions
        Optional areas left untreated, as for :class:`Partfield`.

    Returns
    -------
    str
        The XML text.

    Examples
    --------
    >>> g = TaskGrid(min_north=-35.0, min_east=148.0, cell_north=0.0001, cell_east=0.0001,
    ...              values=np.zeros((2, 3), dtype="int32"))
    >>> root = ET.fromstring(taskdata_xml(g, boundary=shapely.box(148, -35, 148.0003, -34.9998),
    ...                      crs="EPSG:4326", paddock="North", product_label="Gypsum",
    ...                      farm="Hill & Dale"))
    >>> root.tag, root.find("FRM").get("B"), root.find("TSK/GRD").get("I")
    ('ISO11783_TaskData', 'Hill & Dale', '2')
    """
    pad = _designator(paddock, what="paddock", fallback="paddock")
    prod = _designator(product_label, what="product", fallback="product")
    task_name = f"{prod} {pad}"[:MAX_DESIGNATOR].rstrip()  # made of cleaned names
    return taskset_xml(
        [Partfield(name=pad, boundary=boundary, crs=crs, exclusions=exclusions)],
        [Task(name=task_name, partfield=0, product=prod, grid=grid)],
        farm=farm, software_version=software_version,
    )


# --------------------------------------------------------------------------- writing


def write_taskdata(
    folder: Path,
    *,
    zones: Any,
    boundary: BaseGeometry,
    crs: Any,
    product_label: str,
    farm: str,
    cell_size_m: float = 10.0,
    paddock: str | None = None,
    exclusions: Any = None,
) -> list[Path]:
    """Write ``folder/TASKDATA/TASKDATA.XML`` and ``folder/TASKDATA/GRD00001.bin``.

    Everything is computed before anything is written; each file is then
    written to a temporary name and renamed into place (the grid first, so
    the XML never names a grid file that is not there). Files of the same
    name are replaced; nothing else in ``TASKDATA`` is touched.

    Parameters
    ----------
    folder
        Folder to hold ``TASKDATA`` (created when missing).
    zones, boundary, crs, cell_size_m
        As for :func:`grid_from_zones` (one paddock, one product).
    product_label, farm
        Names shown on the terminal.
    paddock
        The paddock's name on the terminal (default: from the zones).
    exclusions
        Optional areas left untreated, as for :class:`Partfield`.

    Returns
    -------
    list of Path
        The XML file and the grid file.

    Raises
    ------
    OutputExistsError
        ``folder/TASKDATA`` exists and is not a folder.
    ValueError, CRSError
        As for :func:`grid_from_zones`.

    Examples
    --------
    >>> import tempfile, geopandas as gpd
    >>> paddock = shapely.box(500000, 6000000, 500100, 6000100)
    >>> zones = gpd.GeoDataFrame(
    ...     {"paddock": ["P1"], "product": ["lime"], "zone": [1], "kind": ["rate"],
    ...      "rate_kg_ha": [1500.0]}, geometry=[paddock], crs="EPSG:32755")
    >>> paths = write_taskdata(Path(tempfile.mkdtemp()), zones=zones, boundary=paddock,
    ...                        crs="EPSG:32755", product_label="Lime", farm="Demo")
    >>> [p.name for p in paths]
    ['TASKDATA.XML', 'GRD00001.bin']
    """
    grid = grid_from_zones(zones, boundary=boundary, crs=crs, cell_size_m=cell_size_m)
    data = grid_bytes(grid)
    text = taskdata_xml(grid, boundary=boundary, crs=_to_crs(crs, zones),
                        paddock=str(zones["paddock"].iloc[0]) if paddock is None else paddock,
                        product_label=product_label, farm=farm, exclusions=exclusions)
    out = Path(folder) / "TASKDATA"
    if out.exists() and not out.is_dir():
        raise OutputExistsError(f"{out} is a file, not a folder; move it or choose another "
                                "output folder")
    out.mkdir(parents=True, exist_ok=True)
    p_bin = out / f"{GRID_FILE_NAME}.bin"
    p_xml = out / "TASKDATA.XML"
    with atomic_write(p_bin) as fh:
        fh.write(data)
    with atomic_write(p_xml) as fh:
        fh.write(text.encode("utf-8"))
    logger.info("task data: %s (%d x %d grid)", out, grid.rows, grid.columns)
    return [p_xml, p_bin]


def write_taskset(
    folder: Path,
    *,
    partfields: Sequence[Partfield],
    tasks: Sequence[Task],
    farm: str,
) -> list[Path]:
    """Write a task set of several partfields and tasks: ``folder/TASKDATA/``.

    The grid files ``GRD00001.bin``, ``GRD00002.bin``... (one per task, in
    order) are written first, then ``TASKDATA.XML`` (:func:`taskset_xml`);
    each atomically.

    Parameters
    ----------
    folder
        Folder to hold ``TASKDATA`` (created when missing).
    partfields, tasks, farm
        As for :func:`taskset_xml`.

    Returns
    -------
    list of Path
        The XML file, then the grid files.

    Raises
    ------
    OutputExistsError
        ``folder/TASKDATA`` exists and is not a folder.
    ValueError
        As for :func:`taskset_xml`.
    """
    text = taskset_xml(partfields, tasks, farm=farm)
    out = Path(folder) / "TASKDATA"
    if out.exists() and not out.is_dir():
        raise OutputExistsError(f"{out} is a file, not a folder; move it or choose another "
                                "output folder")
    out.mkdir(parents=True, exist_ok=True)
    paths = []
    for j, t in enumerate(tasks, start=1):
        p = out / f"{_grid_name(j)}.bin"
        with atomic_write(p) as fh:
            fh.write(grid_bytes(t.grid))
        paths.append(p)
    p_xml = out / "TASKDATA.XML"
    with atomic_write(p_xml) as fh:
        fh.write(text.encode("utf-8"))
    logger.info("task set: %s (%d partfields, %d tasks)", out, len(partfields), len(tasks))
    return [p_xml, *paths]
