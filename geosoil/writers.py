"""Writing output files: GeoTIFF (COG), GeoJSON, zipped shapefile, CSV, JSON.  [I/O]

Every writer writes to a temporary file in the destination folder and renames
it into place with :func:`os.replace` (:func:`atomic_write`,
:func:`atomic_path`), so a reader never sees half a file and a failed write
leaves the old file (or none) behind.

Formats
-------
* :func:`write_geojson` -- RFC 7946: WGS 84 longitude/latitude (§4, no
  ``"crs"`` member), outer rings counter-clockwise and holes clockwise
  (§3.1.6), coordinates rounded to 7 decimals (about 1 cm; §11.2 advises 6,
  about 10 cm). Written with :mod:`json` after reprojecting with geopandas.
  Features crossing the antimeridian are not split.
* :func:`write_shapefile_zip` -- a zip of ``.shp .shx .dbf .prj .cpg`` written
  by GDAL (pyogrio), with field names of 10 characters or fewer chosen here
  (:data:`SHAPEFILE_FIELDS`), so GDAL never has to shorten ("launder") them;
  integers as Integer, rates and areas as Real, text as String, UTF-8.
* :func:`write_cog` -- Cloud Optimized GeoTIFF (GDAL's ``COG`` driver, DEFLATE,
  256-pixel tiles, averaged overviews), or a tiled GeoTIFF with overviews where
  the ``COG`` driver is missing. Cells outside the mask (NaN) hold ``nodata``.
* :func:`write_csv`, :func:`write_json` (NaN and infinities become ``null``).

:mod:`geosoil.outfolder` guards the output folder as a whole (lock, temporary
folder beside it, replaced whole when complete).
"""

from __future__ import annotations

import contextlib
import dataclasses
import datetime as _dt
import errno
import functools
import hashlib
import json
import logging
import math
import os
import re
import secrets
import shutil
import tempfile
import zipfile
from collections.abc import Iterator, Mapping, Sequence
from pathlib import Path
from typing import IO, Any

import numpy as np
import pandas as pd
import pyproj
import shapely
from affine import Affine
from numpy.typing import NDArray
from shapely.geometry import mapping
from shapely.geometry.base import BaseGeometry
from shapely.geometry.polygon import orient

from .errors import CRSError
from .record import sha256_file, source_digest

__all__ = [
    "SHAPEFILE_FIELDS",
    "atomic_write",
    "atomic_path",
    "text_or_none",
    "MIN_PART_M2",
    "valid_polygons",
    "write_geojson",
    "geojson_text",
    "write_shapefile_zip",
    "write_cog",
    "cog_key",
    "reuse_or_write_cog",
    "write_csv",
    "inert_cell",
    "FORMULA_STARTS",
    "write_json",
    "jsonable",
]

logger = logging.getLogger(__name__)

#: Zone columns -> shapefile field names (10 characters or fewer, our own).
SHAPEFILE_FIELDS: dict[str, str] = {
    "paddock": "PADDOCK",
    "product": "PRODUCT",
    "zone": "ZONE",
    "kind": "KIND",
    "label": "LABEL",
    "rate_kg_ha": "RATE_KGHA",
    "rate_raw_kg_ha": "RATE_RAW",
    "passes": "PASSES",
    "per_pass_kg_ha": "PASS_KGHA",
    "area_ha": "AREA_HA",
    "n_cells": "N_CELLS",
    "schedule": "SCHEDULE",
    "pass_no": "PASS",
    "of_passes": "OF_PASSES",
    "zone_passes": "ZONE_PASS",
}

_SHP_PARTS = (".shp", ".shx", ".dbf", ".prj", ".cpg")


# --------------------------------------------------------------------------- atomic writes


def _temp_name(path: Path) -> Path:
    while True:
        tmp = path.with_name(f".{path.stem}.{secrets.token_hex(4)}.part{path.suffix}")
        if not tmp.exists():
            return tmp


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """A temporary path beside ``path``, renamed to ``path`` when the block succeeds.

    For writers that need a file name (GDAL). On an exception the temporary
    file is removed and ``path`` is left as it was.

    Parameters
    ----------
    path : path-like
        The file to write.

    Yields
    ------
    Path
        The temporary path to write to.

    Raises
    ------
    FileNotFoundError
        The block wrote nothing to the temporary path.

    Examples
    --------
    >>> import tempfile
    >>> folder = Path(tempfile.mkdtemp())
    >>> with atomic_path(folder / "a.txt") as tmp:
    ...     _ = tmp.write_text("done")
    >>> (folder / "a.txt").read_text(), sorted(p.name for p in folder.iterdir())
    ('done', ['a.txt'])
    """
    target = Path(path)
    tmp = _temp_name(target)
    try:
        yield tmp
        if not tmp.exists():
            raise FileNotFoundError(f"nothing was written to {tmp} for {target}")
        os.replace(tmp, target)
    except BaseException as exc:
        with contextlib.suppress(OSError):
            tmp.unlink()
        if isinstance(exc, OSError) and exc.errno is not None and not exc.filename:
            # a failed write() names no file: name the one being written
            raise OSError(exc.errno, exc.strerror, str(target)) from exc
        if isinstance(exc, Exception) and not isinstance(exc, OSError) and _gdal_io(exc):
            # GDAL reports a full disk as its own error ("IO error writing tag data")
            code = errno.ENOSPC if _nearly_full(target.parent) else errno.EIO
            raise OSError(code, f"{os.strerror(code)} ({exc})", str(target)) from exc
        raise


def _gdal_io(exc: Exception) -> bool:
    """An input/output failure reported by GDAL through rasterio or pyogrio."""
    module = type(exc).__module__ or ""
    text = str(exc).lower()
    return module.startswith(("rasterio", "pyogrio")) and any(
        w in text for w in ("io error", "i/o error", "no space", "write", "disk"))


def _nearly_full(folder: Path) -> bool:
    try:
        return shutil.disk_usage(folder).free < 1 << 20
    except OSError:
        return False


@contextlib.contextmanager
def atomic_write(
    path: str | os.PathLike[str], *, mode: str = "wb", encoding: str | None = None
) -> Iterator[IO[Any]]:
    """An open temporary file beside ``path``, renamed to ``path`` when the block succeeds.

    Parameters
    ----------
    path
        The file to write.
    mode
        ``"wb"`` (bytes, the default) or ``"w"`` (text; ``encoding`` defaults
        to UTF-8).

    Yields
    ------
    file object
        The open temporary file.

    Raises
    ------
    ValueError
        ``mode`` is not ``"w"`` or ``"wb"``.

    Examples
    --------
    >>> import tempfile
    >>> folder = Path(tempfile.mkdtemp())
    >>> with atomic_write(folder / "b.bin") as fh:
    ...     _ = fh.write(b"abc")
    >>> (folder / "b.bin").read_bytes()
    b'abc'
    >>> try:
    ...     with atomic_write(folder / "c.txt", mode="w") as fh:
    ...         _ = fh.write("half")
    ...         raise RuntimeError("disk full")
    ... except RuntimeError:
    ...     pass
    >>> sorted(p.name for p in folder.iterdir())
    ['b.bin']
    """
    if mode not in ("w", "wb"):
        raise ValueError(f"mode must be 'w' or 'wb', got {mode!r}")
    if mode == "w" and encoding is None:
        encoding = "utf-8"
    with atomic_path(path) as tmp:
        # 0o666 less the umask, like any new file (mkstemp would make it private)
        fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666)
        with open(fd, mode, encoding=encoding, newline="" if mode == "w" else None) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())


# --------------------------------------------------------------------------- JSON


def jsonable(obj: Any) -> Any:
    """``obj`` as plain JSON values: NaN, infinities and missing values become ``None``.

    Handles mappings, sequences, numpy arrays and scalars, pandas missing
    values and timestamps, paths, dates, dataclasses and shapely geometries.

    Parameters
    ----------
    obj : object
        The value to convert.

    Returns
    -------
    object
        Dicts, lists, str, int, float, bool and None only.

    Examples
    --------
    >>> jsonable({"a": float("nan"), "b": np.array([1.5, np.inf]), "c": np.int64(3)})
    {'a': None, 'b': [1.5, None], 'c': 3}
    """
    # the plain types first, by exact type (a run record of a spreader grid holds hundreds
    # of thousands of values; the isinstance tests below go through abstract classes)
    kind = type(obj)
    if kind is str or kind is int or kind is bool or obj is None:
        return obj
    if kind is float:
        return obj if math.isfinite(obj) else None
    if kind is dict:
        return {k if type(k) is str else str(k): jsonable(v) for k, v in obj.items()}
    if kind is list or kind is tuple:
        return [jsonable(v) for v in obj]
    return _jsonable_other(obj)


def _jsonable_other(obj: Any) -> Any:
    """:func:`jsonable` of anything but a plain str, int, bool, None, float, dict, list or
    tuple."""
    if isinstance(obj, (bool, str)):
        return obj
    if isinstance(obj, (int, np.integer)) and not isinstance(obj, bool):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, (float, np.floating)):
        v = float(obj)
        return v if math.isfinite(v) else None
    if isinstance(obj, Mapping):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, np.ndarray):
        return [jsonable(v) for v in obj.tolist()]
    if isinstance(obj, (list, tuple, set, frozenset)):
        return [jsonable(v) for v in obj]
    if isinstance(obj, os.PathLike):
        return os.fspath(obj)
    if isinstance(obj, BaseGeometry):
        return jsonable(mapping(obj))
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return jsonable(dataclasses.asdict(obj))
    if isinstance(obj, (pd.Timestamp, _dt.datetime, _dt.date)):
        return None if pd.isna(obj) else obj.isoformat()
    if obj is pd.NA or obj is pd.NaT:
        return None
    if isinstance(obj, np.generic):
        return jsonable(obj.item())
    if isinstance(obj, pyproj.CRS):
        return obj.to_wkt()
    raise TypeError(f"cannot write a {type(obj).__name__} to JSON")


def write_json(path: str | os.PathLike[str], obj: Any, *, indent: int = 2) -> Path:
    """Write ``obj`` as UTF-8 JSON (NaN -> null), atomically.

    Parameters
    ----------
    path : path-like
        The ``.json`` file.
    obj : object
        Anything :func:`jsonable` converts.
    indent : int, optional
        Spaces per level.

    Returns
    -------
    Path
        ``path``.

    Examples
    --------
    >>> import tempfile
    >>> p = write_json(Path(tempfile.mkdtemp()) / "run.json", {"rmse": float("nan")})
    >>> p.read_text()
    '{\\n  "rmse": null\\n}\\n'
    """
    text = json.dumps(jsonable(obj), indent=indent, ensure_ascii=False, allow_nan=False)
    with atomic_write(path, mode="w") as fh:
        fh.write(text + "\n")
    return Path(path)


#: First characters that make a spreadsheet read a cell as a formula (OWASP, "CSV Injection").
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def inert_cell(value: Any) -> Any:
    """A text cell a spreadsheet will show as text, never run as a formula.

    Text starting with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return
    gets a leading apostrophe (the rule OWASP gives for CSV injection), unless
    it is a plain number such as ``-3.2`` or ``+1e-3``. Anything that is not
    text is returned as it is.

    Parameters
    ----------
    value : object
        A cell.

    Returns
    -------
    object
        The cell, neutralised when it is text that would start a formula.

    Examples
    --------
    >>> inert_cell("=1+2"), inert_cell("-3.2"), inert_cell("@SUM(A1)")
    ("'=1+2", '-3.2', "'@SUM(A1)")
    >>> inert_cell("Red Hill"), inert_cell(-3.2)
    ('Red Hill', -3.2)
    """
    if isinstance(value, str) and value.startswith(FORMULA_STARTS) and not _NUMBER.fullmatch(
        value
    ):
        return "'" + value
    return value


def write_csv(path: str | os.PathLike[str], table: pd.DataFrame, *, index: bool = False) -> Path:
    """Write a table as UTF-8 CSV, atomically. Missing values are empty cells;
    a geometry column is left out; text cells and headers that a spreadsheet would
    take for a formula are neutralised (:func:`inert_cell`).

    Parameters
    ----------
    path : path-like
        The ``.csv`` file.
    table : DataFrame
        The table.
    index : bool, optional
        Write the index as the first column.

    Returns
    -------
    Path
        ``path``.

    Examples
    --------
    >>> import tempfile
    >>> t = pd.DataFrame({"a": [1.5, None], "b": ["x", "y"]})
    >>> write_csv(Path(tempfile.mkdtemp()) / "t.csv", t).read_text().splitlines()
    ['a,b', '1.5,x', ',y']
    """
    frame = pd.DataFrame(table)
    if "geometry" in frame.columns and frame["geometry"].map(
        lambda g: isinstance(g, BaseGeometry)
    ).any():
        frame = frame.drop(columns="geometry")
    frame = frame.rename(columns=lambda c: inert_cell(str(c)) if isinstance(c, str) else c)
    if index:
        frame.index = frame.index.map(inert_cell)
    for i in range(frame.shape[1]):
        column = frame.iloc[:, i]
        if not (pd.api.types.is_numeric_dtype(column) or pd.api.types.is_bool_dtype(column)
                or pd.api.types.is_datetime64_any_dtype(column)):
            frame.iloc[:, i] = column.map(inert_cell).astype(object)
    with atomic_write(path, mode="w") as fh:
        frame.to_csv(fh, index=index, lineterminator="\n")
    return Path(path)


# --------------------------------------------------------------------------- polygons

#: Polygon parts and holes smaller than this (m²) are left out of every vector file written
#: (GeoJSON, shapefile, GeoPackage, task data polygons). Reprojecting to longitude/latitude
#: and rounding coordinates can turn two parts of a zone that touch into a self-intersection
#: or cut a sliver of a few cm² off them; a part this small is no ground a spreader can treat
#: (a cell is 100 m² or more). The zones' areas and tonnes are worked out in the working CRS
#: before writing and keep it: at most 1 m² a part, under 1 kg at 10 t/ha.
MIN_PART_M2 = 1.0


_WGS84_ELLIPSOID = pyproj.Geod(ellps="WGS84")

#: The last CRS :func:`_area_basis` was asked about and its answer: a frame's geometries
#: share one CRS object, and pyproj's answers (is_geographic, axis_info) cost more than
#: a small zone's repair (a spreader grid writes thousands of zones).
_LAST_BASIS: list[Any] = [None, None]


def _area_basis(crs: Any) -> tuple[bool, float]:
    """Whether ``crs`` is geographic, and its linear unit in metres (else 1)."""
    if _LAST_BASIS[0] is crs:
        return _LAST_BASIS[1]  # type: ignore[no-any-return]
    c = crs if isinstance(crs, pyproj.CRS) else _crs(crs)
    basis = (bool(c.is_geographic),
             float(c.axis_info[0].unit_conversion_factor) if c.axis_info else 1.0)
    _LAST_BASIS[:] = [crs, basis]
    return basis


#: Metres in a degree of latitude (and of longitude at the equator), near enough to tell a
#: part far above :data:`MIN_PART_M2` from one near it (WGS 84's equatorial radius times
#: pi / 180: 6 378 137 m x 0.0174533 = 111 319.5 m, NIMA TR8350.2; a test holds the
#: decisions to pyproj's geodesic area).
_M_PER_DEGREE = 111_320.0


def _small(parts: Sequence[BaseGeometry], crs: Any, min_m2: float) -> NDArray[np.bool_]:
    """Whether each polygon's area is under ``min_m2`` m²: on the WGS 84 ellipsoid for a
    geographic CRS (pyproj's geodesic area, for the parts a plain estimate puts within 10
    times the limit; the estimate, degrees² times the metres a degree covers there, is
    within a few per cent of it at paddock scale), else planar in the CRS's linear unit."""
    geographic, unit = _area_basis(crs)
    arr = np.asarray(parts, dtype=object)
    planar = np.asarray(shapely.area(arr), dtype=float)
    if not geographic:
        return planar * unit**2 < min_m2
    lat = np.radians(np.asarray(shapely.get_y(shapely.centroid(arr)), dtype=float))
    estimate = planar * _M_PER_DEGREE**2 * np.cos(lat)
    small = estimate < min_m2
    for i in np.flatnonzero(estimate < 10 * min_m2):
        small[i] = abs(_WGS84_ELLIPSOID.geometry_area_perimeter(arr[i])[0]) < min_m2
    return small


def valid_polygons(geom: BaseGeometry | None, crs: Any, *,
                   min_part_m2: float = MIN_PART_M2) -> BaseGeometry | None:
    """``geom`` as a valid polygon or multipolygon in ``crs``, without parts or holes
    smaller than ``min_part_m2``, as it is written to a file.

    :func:`shapely.make_valid` repairs it (after a reprojection or a rounding of its
    coordinates), its lines and points are dropped, and so are its polygon parts and holes
    under ``min_part_m2`` (:data:`MIN_PART_M2`; a hole so small is filled). A geometry that is
    not polygonal is returned as it is; one with nothing left is None.

    Parameters
    ----------
    geom : shapely geometry or None
        The geometry.
    crs : CRS-like
        Its CRS (areas are measured on the WGS 84 ellipsoid when it is geographic).
    min_part_m2 : float, optional
        The smallest part or hole kept, m².

    Returns
    -------
    shapely geometry or None

    Examples
    --------
    >>> bow_tie = shapely.Polygon([(0, 0), (10, 10), (10, 0), (0, 10)])
    >>> bow_tie.is_valid, valid_polygons(bow_tie, "EPSG:32755").is_valid
    (False, True)
    >>> sliver = shapely.MultiPolygon([shapely.box(0, 0, 10, 10), shapely.box(20, 0, 20.5, 1)])
    >>> valid_polygons(sliver, "EPSG:32755").geom_type
    'Polygon'
    """
    if geom is None or geom.is_empty:
        return None
    if geom.geom_type not in _POLYGONAL and not (
            geom.geom_type == "GeometryCollection"
            and any(g.geom_type in _POLYGONAL for g in geom.geoms)):
        return geom
    if not geom.is_valid:
        geom = shapely.make_valid(geom)
    parts = [p for p in shapely.get_parts(geom) if p.geom_type in _POLYGONAL]
    parts = [q for p in parts for q in shapely.get_parts(p) if not q.is_empty]
    if not parts:
        return None
    kept: list[BaseGeometry] = []
    changed = len(parts) != len(shapely.get_parts(geom))
    for part, tiny in zip(parts, _small(parts, crs, min_part_m2), strict=True):
        if tiny:
            changed = True
            continue
        holes = list(part.interiors)
        if holes:
            small = _small([shapely.Polygon(h) for h in holes], crs, min_part_m2)
            if small.any():
                changed = True
                part = shapely.Polygon(part.exterior, [h for h, s in zip(holes, small,
                                                                         strict=True) if not s])
        kept.append(part)
    if not kept:
        logger.debug("a shape of %d part(s), all under %g m², left out", len(parts), min_part_m2)
        return None
    if not changed:
        return geom
    out = kept[0] if len(kept) == 1 else shapely.MultiPolygon(kept)
    return out if out.is_valid else shapely.make_valid(out)


_POLYGONAL = ("Polygon", "MultiPolygon")


@functools.lru_cache(maxsize=8)
def _crs(crs: Any) -> pyproj.CRS:
    return pyproj.CRS.from_user_input(crs)


# --------------------------------------------------------------------------- GeoJSON


def _rfc7946_geometry(geom: BaseGeometry | None, precision: int) -> dict[str, Any] | None:
    if geom is None or geom.is_empty:
        return None
    geom = valid_polygons(shapely.transform(geom, lambda c: np.round(c, precision)), "EPSG:4326")
    if geom is None:
        return None
    geom = _orient(geom)
    return mapping(geom)


def _orient(geom: BaseGeometry) -> BaseGeometry:
    """Outer rings counter-clockwise, holes clockwise (RFC 7946 §3.1.6)."""
    if geom.geom_type == "Polygon":
        return orient(geom, sign=1.0)
    if geom.geom_type == "MultiPolygon":
        return shapely.MultiPolygon([orient(p, sign=1.0) for p in geom.geoms])
    if geom.geom_type == "GeometryCollection":
        return shapely.GeometryCollection([_orient(g) for g in geom.geoms])
    return geom


def geojson_text(frame: Any, *, precision: int = 7) -> str:
    """The RFC 7946 GeoJSON text of a GeoDataFrame (see :func:`write_geojson`).

    Parameters
    ----------
    frame : GeoDataFrame
        As for :func:`write_geojson`.
    precision : int, optional
        Decimals of the coordinates.

    Returns
    -------
    str
        The GeoJSON text.

    Raises
    ------
    CRSError
        The frame has no CRS.

    Examples
    --------
    >>> import geopandas as gpd
    >>> g = gpd.GeoDataFrame({"zone": [1]}, geometry=[shapely.box(500000, 6000000, 500100,
    ...                      6000100)], crs="EPSG:32755")
    >>> doc = json.loads(geojson_text(g))
    >>> "crs" in doc, doc["features"][0]["properties"], doc["features"][0]["geometry"]["type"]
    (False, {'zone': 1}, 'Polygon')
    """
    if frame.crs is None:
        raise CRSError("the layer has no coordinate reference system; it cannot be written "
                       "as GeoJSON (RFC 7946 needs WGS 84 longitude/latitude)")
    wgs84 = frame.to_crs("EPSG:4326")
    props = [c for c in wgs84.columns if c != wgs84.geometry.name]
    features = []
    for row, geom in zip(wgs84[props].itertuples(index=False, name=None),
                         wgs84.geometry, strict=True):
        features.append({
            "type": "Feature",
            "properties": {k: jsonable(v) for k, v in zip(props, row, strict=True)},
            "geometry": _rfc7946_geometry(geom, precision),
        })
    doc = {"type": "FeatureCollection", "features": features}
    return json.dumps(doc, ensure_ascii=False, allow_nan=False, separators=(",", ":")) + "\n"


def write_geojson(path: str | os.PathLike[str], frame: Any, *, precision: int = 7) -> Path:
    """Write a GeoDataFrame as RFC 7946 GeoJSON, atomically.

    Parameters
    ----------
    path
        The ``.geojson`` file.
    frame
        GeoDataFrame with a CRS; it is reprojected to WGS 84 longitude/latitude.
        Every other column becomes a property (NaN -> null).
    precision
        Decimals of the coordinates (7: about 1 cm).

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    CRSError
        The frame has no CRS.
    """
    text = geojson_text(frame, precision=precision)
    with atomic_write(path, mode="w") as fh:
        fh.write(text)
    return Path(path)


# --------------------------------------------------------------------------- shapefile


def _check_field_names(fields: Mapping[str, str]) -> None:
    seen: set[str] = set()
    for col, name in fields.items():
        if not (0 < len(name) <= 10) or not name.replace("_", "").isalnum() or not name.isascii():
            raise ValueError(
                f"shapefile field name {name!r} for column {col!r} must be 1 to 10 ASCII "
                "letters, digits or underscores"
            )
        if name.upper() in seen:
            raise ValueError(f"shapefile field name {name!r} is used twice")
        seen.add(name.upper())


def text_or_none(value: Any) -> str | None:
    """A cell as GDAL writes text: None for a missing value (None, NA, NaN), else its text.

    Examples
    --------
    >>> text_or_none(float("nan")), text_or_none(3), text_or_none("a")
    (None, '3', 'a')
    """
    if value is None or value is pd.NA or (isinstance(value, float) and math.isnan(value)):
        return None
    return str(value)


def _shapefile_frame(frame: Any, fields: Mapping[str, str]) -> Any:
    import geopandas as gpd

    keep = [c for c in frame.columns if c in fields]
    dropped = [c for c in frame.columns if c not in fields and c != frame.geometry.name]
    if dropped:
        logger.debug("shapefile: columns left out: %s", ", ".join(dropped))
    out = {}
    for col in keep:
        s = frame[col]
        name = fields[col]
        if pd.api.types.is_bool_dtype(s):
            out[name] = s.astype("int32")
        elif pd.api.types.is_integer_dtype(s):
            vals = s.astype("int64")
            if len(vals) and (vals.abs().max() > 2**31 - 1):
                raise ValueError(f"column {col!r} holds integers too large for a shapefile")
            out[name] = vals.astype("int32")
        elif pd.api.types.is_float_dtype(s):
            out[name] = s.astype("float64")
        else:
            text = s.map(text_or_none)
            too_long = text.map(lambda v: v is not None and len(v.encode("utf-8")) > 254)
            if too_long.any():
                raise ValueError(
                    f"column {col!r} holds text longer than the 254 bytes a shapefile "
                    f"field can hold (row {int(np.flatnonzero(too_long.to_numpy())[0]) + 1})"
                )
            out[name] = text.astype(object)
    return gpd.GeoDataFrame(out, geometry=list(frame.geometry), crs=frame.crs)


def write_shapefile_zip(
    path: str | os.PathLike[str],
    frame: Any,
    *,
    fields: Mapping[str, str] | None = None,
    layer: str | None = None,
    crs: Any = None,
) -> Path:
    """Write a GeoDataFrame as a zipped ESRI shapefile, atomically.

    Parameters
    ----------
    path
        The ``.zip`` file.
    frame
        GeoDataFrame with a CRS (written to the ``.prj``).
    fields
        Column -> field name (10 characters or fewer); columns not named are
        left out. Default :data:`SHAPEFILE_FIELDS`.
    layer
        Name of the files inside the zip; default: the zip's name without
        ``.zip`` (and without a trailing ``_shp``).
    crs
        Reproject to this CRS first (e.g. ``"EPSG:4326"`` for a controller that
        wants longitude/latitude); default: the frame's CRS.

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    ValueError
        A field name longer than 10 characters, used twice, or text longer
        than 254 bytes.
    CRSError
        The frame has no CRS.
    """
    import pyogrio

    fields = dict(SHAPEFILE_FIELDS if fields is None else fields)
    _check_field_names(fields)
    if frame.crs is None:
        raise CRSError("the layer has no coordinate reference system; a shapefile needs one "
                       "for its .prj")
    if crs is not None:
        frame = frame.to_crs(crs)
    frame = frame.set_geometry([valid_polygons(g, frame.crs) for g in frame.geometry],
                               crs=frame.crs)
    target = Path(path)
    name = layer or target.stem.removesuffix("_shp") or "zones"
    data = _shapefile_frame(frame, fields)
    with tempfile.TemporaryDirectory(prefix="geosoil-shp-") as tmpdir:
        shp = Path(tmpdir) / f"{name}.shp"
        pyogrio.write_dataframe(
            data, shp, driver="ESRI Shapefile", encoding="UTF-8", promote_to_multi=True,
        )
        cpg = shp.with_suffix(".cpg")
        if not cpg.exists():
            cpg.write_text("UTF-8", encoding="ascii")
        missing = [s for s in _SHP_PARTS if not shp.with_suffix(s).exists()]
        if missing:
            raise OSError(f"GDAL did not write the shapefile's {', '.join(missing)}")
        with atomic_write(target) as fh, zipfile.ZipFile(fh, "w", zipfile.ZIP_DEFLATED) as zf:
            for suffix in _SHP_PARTS:
                zf.write(shp.with_suffix(suffix), arcname=f"{name}{suffix}")
    return target


# --------------------------------------------------------------------------- GeoTIFF


def _cog_driver_available() -> bool:
    import rasterio

    with rasterio.Env() as env:
        return "COG" in env.drivers()


def write_cog(
    path: str | os.PathLike[str],
    array: NDArray[np.floating[Any]],
    *,
    transform: Affine,
    crs: Any,
    nodata: float = -9999.0,
    descriptions: Sequence[str] | None = None,
    tags: Mapping[str, Any] | None = None,
) -> Path:
    """Write a raster (NaN outside the mask) as a Cloud Optimized GeoTIFF, atomically.

    Parameters
    ----------
    path
        The ``.tif`` file.
    array
        Float array of shape (height, width), or (bands, height, width).
        NaN cells are written as ``nodata``.
    transform, crs
        Georeferencing (north-up affine; any CRS :meth:`pyproj.CRS.from_user_input` takes).
    nodata
        Value written for NaN cells and declared as the nodata value.
    descriptions
        One description per band.
    tags
        Dataset metadata (e.g. ``{"unit": "kg/ha"}``); values are written as text.

    Returns
    -------
    Path
        ``path``.

    Examples
    --------
    >>> import tempfile, rasterio
    >>> p = Path(tempfile.mkdtemp()) / "rate.tif"
    >>> a = np.array([[1.0, np.nan], [3.0, 4.0]])
    >>> _ = write_cog(p, a, transform=Affine(10, 0, 500000, 0, -10, 6000000), crs="EPSG:32755",
    ...               descriptions=["gypsum rate"], tags={"unit": "kg/ha"})
    >>> with rasterio.open(p) as src:
    ...     src.read(1, masked=True).filled(np.nan).tolist(), src.tags()["unit"], src.crs.to_epsg()
    ([[1.0, nan], [3.0, 4.0]], 'kg/ha', 32755)
    """
    import rasterio
    from rasterio.enums import Resampling

    data = np.asarray(array)
    if data.ndim == 2:
        data = data[None]
    if data.ndim != 3:
        raise ValueError(f"array must be 2-D or 3-D, got shape {np.shape(array)}")
    if not np.issubdtype(data.dtype, np.floating):
        data = data.astype("float64")
    data = np.where(np.isfinite(data), data, nodata).astype(data.dtype)
    bands, height, width = data.shape
    if descriptions is not None and len(descriptions) != bands:
        raise ValueError(f"{len(descriptions)} descriptions for {bands} band(s)")
    rio_crs = rasterio.crs.CRS.from_wkt(pyproj.CRS.from_user_input(crs).to_wkt())
    profile: dict[str, Any] = dict(
        width=width, height=height, count=bands, dtype=data.dtype.name, crs=rio_crs,
        transform=transform, nodata=nodata,
    )
    cog = _cog_driver_available()
    if cog:
        profile.update(driver="COG", compress="DEFLATE", predictor="YES", blocksize=256,
                       overview_resampling="AVERAGE", bigtiff="IF_SAFER")
    else:
        profile.update(driver="GTiff", compress="deflate", predictor=3, tiled=True,
                       blockxsize=256, blockysize=256)
    with atomic_path(path) as tmp:
        with rasterio.open(tmp, "w", **profile) as dst:
            dst.write(data)
            for i, text in enumerate(descriptions or (), start=1):
                dst.set_band_description(i, str(text))
            if tags:
                dst.update_tags(**{str(k): str(v) for k, v in tags.items()})
            if not cog:
                factors = []
                f = 2
                while max(height, width) / f >= 128:
                    factors.append(f)
                    f *= 2
                if factors:
                    dst.build_overviews(factors, Resampling.average)
    return Path(path)


# --------------------------------------------------------------------------- unchanged rasters


@functools.cache
def _cog_writer_id() -> bytes:
    """What besides its arguments decides a GeoTIFF's bytes: this module's source and the
    versions of geosoil, rasterio and GDAL."""
    import rasterio

    return "\n".join([rasterio.__version__, rasterio.__gdal_version__,
                      source_digest(__file__)]).encode("utf-8")


def cog_key(
    array: NDArray[np.floating[Any]],
    *,
    transform: Affine,
    crs: Any,
    nodata: float = -9999.0,
    descriptions: Sequence[str] | None = None,
    tags: Mapping[str, Any] | None = None,
) -> str:
    """SHA-256 of everything :func:`write_cog` makes a file from, with the same arguments.

    Two calls with equal keys write the same bytes, so a file written with one
    key can stand for another (:func:`reuse_or_write_cog`).

    Examples
    --------
    >>> t = Affine(10, 0, 500000, 0, -10, 6000000)
    >>> a = np.array([[1.0, np.nan]])
    >>> cog_key(a, transform=t, crs="EPSG:32755") == cog_key(a.copy(), transform=t,
    ...                                                       crs="EPSG:32755")
    True
    >>> cog_key(a, transform=t, crs="EPSG:32755") == cog_key(a, transform=t, crs="EPSG:32756")
    False
    """
    data = np.ascontiguousarray(array)
    h = hashlib.sha256(_cog_writer_id())
    meta = {
        "dtype": data.dtype.str, "shape": list(data.shape), "transform": list(transform)[:6],
        "crs": pyproj.CRS.from_user_input(crs).to_wkt(), "nodata": float(nodata),
        "descriptions": None if descriptions is None else [str(d) for d in descriptions],
        "tags": None if tags is None else {str(k): str(v) for k, v in tags.items()},
    }
    h.update(json.dumps(meta, sort_keys=True).encode("utf-8"))
    h.update(data.tobytes())
    return h.hexdigest()


def reuse_or_write_cog(
    path: str | os.PathLike[str],
    array: NDArray[np.floating[Any]],
    *,
    previous: tuple[Path, Mapping[str, Any]] | None,
    **kwargs: Any,
) -> tuple[dict[str, str], bool]:
    """:func:`write_cog`, or a copy of the same file from an earlier run when it was made from
    the same array and settings.

    Parameters
    ----------
    path
        The ``.tif`` file to write.
    array, kwargs
        As for :func:`write_cog`.
    previous
        The earlier file that would stand for this one and what its run recorded of it
        (``{"key": ..., "sha256": ...}``), or None. It is copied only when its key
        equals this call's :func:`cog_key` and its bytes still have the recorded
        SHA-256 (a file changed since is never copied).

    Returns
    -------
    entry : dict
        ``{"key": ..., "sha256": ...}`` of the file written, for the next run.
    reused : bool
        Whether the earlier file was copied.
    """
    key = cog_key(array, **kwargs)
    if previous is not None:
        old_path, old = previous
        try:
            same = (old.get("key") == key and isinstance(old.get("sha256"), str)
                    and old_path.is_file() and sha256_file(old_path) == old["sha256"])
        except OSError:
            same = False
        if same:
            with atomic_path(path) as tmp:
                shutil.copyfile(old_path, tmp)
            return {"key": key, "sha256": str(old["sha256"])}, True
    write_cog(path, array, **kwargs)
    return {"key": key, "sha256": sha256_file(Path(path))}, False
