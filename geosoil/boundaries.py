"""Reading paddock, exclusion, creek and management-zone files into clean GeoDataFrames. [I/O]

This is one of the few modules that touch paths. It reads any vector format
GDAL reads (GeoJSON, GeoPackage, shapefile, zipped shapefile, and more; the
one vector reader is :func:`geosoil.vectors.read_layer`), in any coordinate
reference system, and hands back clean
GeoDataFrames:

* :func:`read_paddocks` -- one row per paddock: ``paddock`` (str, unique) and a
  polygonal ``geometry`` in the file's CRS. Parts and holes are kept.
* :func:`read_exclusions` -- areas to leave untreated (dams, sheds, tree
  clumps) and creek lines buffered by ``creek_buffer_m``: ``exclusion``
  (label), ``kind`` (``"area"`` or ``"creek buffer"``), ``geometry`` in the
  CRS asked for.
* :func:`read_user_zones` -- the user's own management zones: ``zone`` (str,
  unique) and ``geometry`` in the CRS asked for.

Rules applied to every file
---------------------------
* A file without a coordinate reference system is refused. GeoJSON has one by
  definition: WGS 84 longitude/latitude (RFC 7946, section 4), which is what
  GDAL assumes when the file names none.
* Coordinates that cannot be longitude/latitude in a file that says it is
  longitude/latitude are refused (the usual sign of projected coordinates
  written without their CRS).
* Invalid polygons (self-intersections, bow-ties, rings that touch) are
  repaired with :func:`shapely.make_valid`; only the polygonal result is
  kept, and a :class:`~geosoil.errors.DataWarning` names the file and feature.
* Missing or empty geometry, a wrong geometry type, a missing file or an
  unreadable format raise :class:`~geosoil.errors.InputError` naming the file
  and the feature (features are numbered from 1 in file order).
* Paddocks that overlap (by more than :data:`OVERLAP_TOLERANCE_M2`, so edges
  that touch and digitising slivers do not count) are settled by
  :func:`settle_overlaps` once they are in the working CRS, as
  ``[boundaries] overlaps`` says: ``"refuse"`` (the default) names every
  overlapping pair with its area; ``"first"`` gives each overlap to the
  paddock listed first in the file, so every square metre is counted once.
* Several features with the same paddock name (or zone id) are, by default,
  parts of one paddock: they are merged into one (multipart) paddock and a
  DataWarning names the features. With ``duplicate_names = "error"`` they are
  refused instead. A paddock split by a road or a creek is commonly drawn as
  separate features with one name, which is why merging is the default.

Examples
--------
>>> from pathlib import Path
>>> from geosoil import demo_farm
>>> folder = Path(demo_farm.__file__).parent
>>> settings = BoundarySettings(paddocks=folder / "paddocks.geojson",
...                             creeks=folder / "creek.geojson")
>>> paddocks = read_paddocks(settings)
>>> paddocks["paddock"].tolist()
['Red Hill', 'Creek Flat', 'Windmill']
>>> paddocks.crs.to_epsg()
4326
>>> exclusions = read_exclusions(settings, crs="EPSG:32755")
>>> exclusions["kind"].tolist()
['creek buffer']
"""

from __future__ import annotations

import logging
import math
import os
import re
import unicodedata
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely
from shapely.geometry.base import BaseGeometry

from .errors import CRSError, DataWarning, InputError, SettingsError
from .settings import setting
from .vectors import read_layer

__all__ = [
    "BoundarySettings",
    "read_paddocks",
    "read_exclusions",
    "read_user_zones",
    "settle_overlaps",
    "overlapping_pairs",
    "OVERLAP_TOLERANCE_M2",
    "NAME_COLUMNS",
    "ZONE_COLUMNS",
]

logger = logging.getLogger(__name__)

#: Column names recognised as the paddock name, in order of preference.
#: Compared without case, spaces, underscores or punctuation ("Paddock Name" = "paddock_name").
NAME_COLUMNS: tuple[str, ...] = (
    "paddock",
    "paddockname",
    "paddockid",
    "name",
    "field",
    "fieldname",
    "fieldid",
    "block",
    "blockname",
    "blockid",
    # the paddock in German (Schlag, Feld), Spanish (lote, potrero, parcela), Portuguese
    # (talhão, gleba, piquete) and French (parcelle, îlot); accents folded
    "schlag",
    "schlagname",
    "schlagbezeichnung",
    "feld",
    "feldname",
    "lote",
    "nombrelote",
    "nombredellote",
    "potrero",
    "parcela",
    "talhao",
    "nometalhao",
    "nomedotalhao",
    "gleba",
    "piquete",
    "parcelle",
    "nomparcelle",
    "nomdelaparcelle",
    "ilot",
    # name in German, Spanish, Portuguese and French
    "bezeichnung",
    "nombre",
    "nome",
    "nom",
    "label",
    "title",
)

#: Column names recognised as the id of a management zone, in order of preference.
ZONE_COLUMNS: tuple[str, ...] = (
    "zone",
    "zoneid",
    "zonename",
    "zoneno",
    "zonenumber",
    "zonenum",
    "managementzone",
    "mgmtzone",
    "mz",
    "class",
    "id",
    "name",
    "label",
)

_EXCLUSION_LABELS: tuple[str, ...] = (
    "name",
    "exclusion",
    "label",
    "description",
    "desc",
    "type",
    "kind",
    "feature",
)

_CREEK_LABELS: tuple[str, ...] = (
    "name",
    "creek",
    "creekname",
    "waterway",
    "stream",
    "river",
    "label",
    "description",
)

_POLYGONAL = ("Polygon", "MultiPolygon")
_LINEAR = ("LineString", "MultiLineString", "LinearRing")


@dataclass(frozen=True)
class BoundarySettings:
    """Where the paddock boundaries, exclusions, creeks and zones are.

    Parameters
    ----------
    paddocks
        Vector file of paddock polygons (any CRS; GeoJSON is WGS 84).
    name_column
        Column holding paddock names. ``None`` looks for a common spelling
        (:data:`NAME_COLUMNS`); without one, paddocks are numbered
        "Paddock 1", "Paddock 2", ... in file order.
    layer
        Layer of the paddocks file to read, for files with several layers
        (GeoPackage). ``None`` reads the only layer.
    duplicate_names
        What to do when several features carry the same name: ``"merge"``
        them into one multipart paddock (with a warning), or ``"error"``.
    overlaps
        What to do when paddocks overlap (by more than
        :data:`OVERLAP_TOLERANCE_M2`): ``"refuse"`` them, naming each pair and
        its area, or give each overlap to the paddock listed ``"first"`` in the
        file (with a warning), so that no area is counted twice.
    exclusions
        Optional polygons to leave untreated: dams, sheds, yards, tree clumps.
    creeks
        Optional creek or drainage lines (or creek-bed polygons), buffered by
        ``creek_buffer_m`` and left untreated.
    creek_buffer_m
        Untreated distance each side of a creek line, metres. The default of
        10 m is a placeholder: the buffer that applies is set by local
        regulations and codes of practice, which the user must check.
    zones
        Optional file of the user's own management zones.
    zone_id_column
        Column holding the zone id. ``None`` looks for a common spelling
        (:data:`ZONE_COLUMNS`).

    Examples
    --------
    >>> from geosoil.settings import from_mapping
    >>> s = from_mapping(BoundarySettings, {"paddocks": "farm.gpkg", "creek_buffer_m": 20},
    ...                  section="boundaries", base_dir=Path("/data"))
    >>> s.paddocks.as_posix(), s.creek_buffer_m
    ('/data/farm.gpkg', 20.0)
    """

    paddocks: Path = setting(doc="paddock boundary polygons (GeoJSON, GeoPackage, shapefile)")
    name_column: str | None = setting(
        None, doc="column with paddock names; unset: detect name/paddock/field/block (and "
        "Schlag, Feld, Lote, Potrero, Talhão, Parcelle and alike)"
    )
    layer: str | None = setting(None, doc="layer of the paddocks file, for multi-layer files")
    duplicate_names: str = setting(
        "merge",
        doc="features sharing a name: merge into one multipart paddock, or error",
        choices=("merge", "error"),
    )
    exclusions: Path | None = setting(
        None, doc="polygons left untreated (dams, sheds, yards, trees)"
    )
    creeks: Path | None = setting(None, doc="creek lines, buffered and left untreated")
    creek_buffer_m: float = setting(
        10.0,
        doc="untreated distance each side of a creek; check local rules for the real value",
        unit="m",
        minimum=0.0,
        maximum=1000.0,
        exclusive_minimum=True,
    )
    overlaps: str = setting(
        "refuse",
        doc="paddocks that overlap: refuse (name each pair), or give the overlap to the "
        "paddock listed first in the file",
        choices=("refuse", "first"),
    )
    zones: Path | None = setting(None, doc="your own management zones (polygons)")
    zone_id_column: str | None = setting(
        None, doc="column with zone ids; unset: detect zone/zone_id/id/name"
    )

    def __post_init__(self) -> None:
        for key in ("name_column", "layer", "zone_id_column"):
            value = getattr(self, key)
            if value is not None and not value.strip():
                raise SettingsError("must not be blank; leave it out to detect it", key=key)
        if self.zone_id_column is not None and self.zones is None:
            raise SettingsError("is set but no zones file is given; set 'zones' too",
                                key="zone_id_column")


# --------------------------------------------------------------------------- reading


def _squash(name: str) -> str:
    """The name without case, accents, spaces or punctuation ("Talhão" -> "talhao")."""
    folded = "".join(c for c in unicodedata.normalize("NFKD", str(name))
                     if not unicodedata.combining(c))
    return re.sub(r"[^0-9a-z]", "", folded.lower())


def _read_vector(path: Path | str, *, layer: str | None, key: str) -> gpd.GeoDataFrame:
    """Read one layer of a boundary file (:func:`geosoil.vectors.read_layer`) and check that it
    holds shapes with a CRS. ``key`` is the setting that names the file."""
    path = Path(path)
    if not path.exists():
        raise InputError(
            "file not found", file=path, fix=f"check the path given for [boundaries] {key}"
        )
    frame = read_layer(path, layer=layer, layer_setting="[boundaries] layer")
    if not isinstance(frame, gpd.GeoDataFrame) or frame.geometry.name not in frame.columns:
        raise InputError(
            "the file holds a table without geometry",
            file=path,
            fix="give a file of shapes (a CSV of samples belongs in the samples setting)",
        )
    if len(frame) == 0:
        raise InputError(
            "the file holds no features", file=path, fix="check that it is the right file"
        )
    if frame.crs is None:
        raise InputError(
            "the file has no coordinate reference system",
            file=path,
            fix="save it with its CRS (a shapefile needs its .prj file beside it), "
            "or save it as GeoJSON in WGS 84 longitude/latitude",
        )
    crs = pyproj.CRS.from_user_input(frame.crs)
    if crs.is_geographic:
        bounds = frame.geometry.total_bounds
        if np.all(np.isfinite(bounds)) and (
            bounds[0] < -180.0 or bounds[2] > 360.0 or bounds[1] < -90.0 or bounds[3] > 90.0
        ):
            raise InputError(
                f"the file says it is in longitude/latitude ({crs.name}) but its coordinates "
                f"reach {bounds[0]:.0f}, {bounds[1]:.0f} to {bounds[2]:.0f}, {bounds[3]:.0f}",
                file=path,
                fix="the coordinates look projected (metres): save the file with its real CRS",
            )
    frame = frame.reset_index(drop=True)
    logger.debug("read %d features from %s (CRS %s)", len(frame), path, crs.name)
    return frame


def _find_column(
    frame: gpd.GeoDataFrame, wanted: str | None, candidates: Sequence[str], *, path: Path,
    key: str,
) -> str | None:
    """The column named ``wanted`` (exact, then ignoring case), or the first candidate found."""
    columns = [c for c in frame.columns if c != frame.geometry.name]
    if wanted is not None:
        if wanted in columns:
            return wanted
        loose = [c for c in columns if _squash(c) == _squash(wanted)]
        if len(loose) == 1:
            return str(loose[0])
        raise InputError(
            f"no column '{wanted}'; the file has: {', '.join(map(str, columns)) or '(none)'}",
            file=path,
            column=wanted,
            fix=f"set [boundaries] {key} to one of those columns, or leave it out",
        )
    by_squash: dict[str, str] = {}
    for c in columns:
        by_squash.setdefault(_squash(c), str(c))
    for candidate in candidates:
        if candidate in by_squash:
            return by_squash[candidate]
    return None


def _numbered(prefix: str, n: int) -> str:
    """How features without a name column are named: "paddocks are numbered 'Paddock 1'
    to 'Paddock 3' in file order", or "the one paddock is named 'Paddock 1'"."""
    what = prefix.lower()
    if n == 1:
        return f"the one {what} is named '{prefix} 1'"
    return f"{what}s are numbered '{prefix} 1' to '{prefix} {n}' in file order"


def _labels(
    frame: gpd.GeoDataFrame, column: str | None, *, path: Path, prefix: str, required: bool,
) -> list[str]:
    """Text labels per feature; numbered ``prefix N`` without a column."""
    if column is None:
        return [f"{prefix} {i}" for i in range(1, len(frame) + 1)]
    out: list[str] = []
    for i, value in enumerate(frame[column].tolist(), start=1):
        text = _as_text(value)
        if text is None:
            if required:
                raise InputError(
                    "the feature has no name",
                    file=path,
                    row=i,
                    column=column,
                    fix="fill in the name, or delete the feature",
                )
            text = f"{prefix} {i}"
        out.append(text)
    return out


def _as_text(value: Any) -> str | None:
    if value is None:
        return None
    if isinstance(value, float):
        if math.isnan(value):
            return None
        if value.is_integer():
            return str(int(value))
        return repr(value)
    if isinstance(value, (np.floating,)):
        return _as_text(float(value))
    try:
        if pd.isna(value):
            return None
    except (TypeError, ValueError):
        pass
    text = str(value).strip()
    return text or None


# --------------------------------------------------------------------------- geometry


def _a(noun: str) -> str:
    """``noun`` with its indefinite article ("a paddock", "an exclusion")."""
    return ("an " if noun[:1] in "aeiou" else "a ") + noun


def _flat_parts(geom: BaseGeometry) -> list[BaseGeometry]:
    """The parts of a collection, with collections nested inside it opened too."""
    parts = []
    for part in shapely.get_parts(geom):
        if part.geom_type == "GeometryCollection":
            parts.extend(_flat_parts(part))
        else:
            parts.append(part)
    return parts


def _polygonal_part(geom: BaseGeometry) -> BaseGeometry:
    """The polygons of a geometry (parts of a collection), as one valid (Multi)Polygon."""
    if geom.geom_type in _POLYGONAL:
        return geom
    parts = [p for p in _flat_parts(geom) if p.geom_type in _POLYGONAL and not p.is_empty]
    if not parts:
        return shapely.Polygon()
    return shapely.union_all(parts)


def _check_finite(geom: BaseGeometry, *, path: Path, row: int | None, where: str) -> None:
    """Refuse a vertex whose coordinate is not a number (NaN, infinite): no repair can
    place it, and the geometry libraries only warn about it."""
    xy = shapely.get_coordinates(geom)
    bad = ~np.isfinite(xy).all(axis=1)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"{where} has {int(bad.sum())} vertex(es) whose coordinate is not a number "
            f"(the first is vertex {i + 1}: {float(xy[i, 0])}, {float(xy[i, 1])})",
            file=path, row=row, fix="correct or delete those vertices in a GIS",
        )


def _check_projected(geoms: gpd.GeoSeries, names: Sequence[str], *, path: Path,
                     what: str) -> None:
    """Refuse a shape that leaves the working CRS's numbers (a vertex that projects to
    infinity), naming its row."""
    for row, (name, g) in enumerate(zip(names, geoms.tolist(), strict=True), start=1):
        _check_finite(g, path=path, row=row,
                      where=f"{what} '{name}', projected to the working CRS,")


def _clean_polygon(
    geom: BaseGeometry | None, *, path: Path, row: int, label: str, what: str, fix_type: str,
) -> BaseGeometry:
    """Check and repair one polygonal feature. ``what`` is "paddock", "zone", "exclusion"."""
    where = f"{what} '{label}'"
    if geom is None or geom.is_empty:
        raise InputError(
            f"{where} has no geometry", file=path, row=row,
            fix="draw its boundary, or delete the feature",
        )
    geom = shapely.force_2d(geom)
    _check_finite(geom, path=path, row=row, where=where)
    gtype = geom.geom_type
    if gtype == "GeometryCollection":
        kinds = {p.geom_type for p in _flat_parts(geom)}
        if not kinds <= set(_POLYGONAL):
            raise InputError(
                f"{where} is a collection of {', '.join(sorted(kinds))}; "
                f"{_a(what)} must be a polygon",
                file=path, row=row, fix=fix_type,
            )
    elif gtype not in _POLYGONAL:
        raise InputError(
            f"{where} is a {gtype}; {_a(what)} must be a polygon or multipolygon",
            file=path, row=row, fix=fix_type,
        )
    if not geom.is_valid:
        reason = shapely.is_valid_reason(geom)
        repaired = _polygonal_part(shapely.make_valid(geom))
        if repaired.is_empty or repaired.area <= 0.0:
            raise InputError(
                f"{where} has an invalid boundary ({reason}) with no area left after repair",
                file=path, row=row, fix="redraw the boundary",
            )
        warnings.warn(
            f"{path}, feature {row}: {where} had an invalid boundary ({reason}); it was "
            f"repaired with shapely.make_valid into {shapely.get_num_geometries(repaired)} "
            "part(s). Check the boundary in a GIS",
            DataWarning,
            stacklevel=4,
        )
        geom = repaired
    elif gtype == "GeometryCollection":
        geom = _polygonal_part(geom)
    if geom.area <= 0.0:
        raise InputError(
            f"{where} has no area", file=path, row=row, fix="redraw the boundary"
        )
    return _single_if_one(geom)


def _single_if_one(geom: BaseGeometry) -> BaseGeometry:
    """A one-part MultiPolygon (as GeoPackage and shapefile writers make) as a Polygon."""
    if geom.geom_type == "MultiPolygon" and shapely.get_num_geometries(geom) == 1:
        return shapely.get_geometry(geom, 0)
    return geom


def _merge_duplicates(
    labels: list[str], geoms: list[BaseGeometry], *, path: Path, what: str, column: str | None,
    mode: str, key: str,
) -> tuple[list[str], list[BaseGeometry]]:
    """Merge features that share a label (or raise), keeping first-appearance order."""
    rows: dict[str, list[int]] = {}
    for i, label in enumerate(labels, start=1):
        rows.setdefault(label, []).append(i)
    duplicated = {k: v for k, v in rows.items() if len(v) > 1}
    if duplicated and mode == "error":
        first = next(iter(duplicated))
        listing = "; ".join(f"'{k}' at features {_join_rows(v)}" for k, v in duplicated.items())
        raise InputError(
            f"{what} names are not unique: {listing}",
            file=path,
            row=duplicated[first][1],
            column=column,
            fix=f"rename them, or set [boundaries] {key} = 'merge' if they are parts of one {what}",
        )
    out_labels: list[str] = []
    out_geoms: list[BaseGeometry] = []
    for label, idx in rows.items():
        parts = [geoms[i - 1] for i in idx]
        geom = parts[0] if len(parts) == 1 else _single_if_one(shapely.union_all(parts))
        if len(parts) > 1:
            warnings.warn(
                f"{path}: features {_join_rows(idx)} share the {what} name '{label}' and were "
                f"merged into one {what} of {shapely.get_num_geometries(geom)} part(s). "
                f"If they are different {what}s, give them different names",
                DataWarning,
                stacklevel=3,
            )
        out_labels.append(label)
        out_geoms.append(geom)
    return out_labels, out_geoms


def _join_rows(rows: Sequence[int]) -> str:
    return ", ".join(str(r) for r in rows)


def _warn_overlaps(labels: list[str], geoms: list[BaseGeometry], *, path: Path, what: str) -> None:
    """Warn when two polygons overlap by more than 0.1 % of the smaller one."""
    if len(geoms) < 2:
        return
    tree = shapely.STRtree(geoms)
    left, right = tree.query(geoms, predicate="intersects")
    for i, j in zip(left.tolist(), right.tolist(), strict=True):
        if i >= j:
            continue
        shared = shapely.intersection(geoms[i], geoms[j]).area
        smaller = min(geoms[i].area, geoms[j].area)
        if smaller > 0 and shared / smaller > 1e-3:
            warnings.warn(
                f"{path}: {what}s '{labels[i]}' and '{labels[j]}' overlap "
                f"({100.0 * shared / smaller:.1f} % of the smaller one); the overlap would be "
                "counted twice. Fix the boundaries",
                DataWarning,
                stacklevel=3,
            )


def _to_crs_object(crs: Any) -> pyproj.CRS:
    try:
        return pyproj.CRS.from_user_input(crs)
    except pyproj.exceptions.CRSError as exc:
        raise CRSError(f"not a coordinate reference system: {crs!r} ({exc})") from None


# --------------------------------------------------------------------------- public


def read_paddocks(settings: BoundarySettings) -> gpd.GeoDataFrame:
    """Read the paddock boundaries.

    Parameters
    ----------
    settings
        Where the file is and how to name the paddocks.

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``paddock`` (str, unique, in order of first appearance in the
        file) and ``geometry`` (Polygon or MultiPolygon, holes kept), in the
        file's CRS.

    Raises
    ------
    InputError
        Missing or unreadable file, no CRS, no features, a feature without
        geometry or with non-polygon geometry, a blank name, a name column
        that is not there, or duplicate names with ``duplicate_names="error"``.

    Warns
    -----
    DataWarning
        A boundary was repaired; features sharing a name were merged;
        no name column was found and paddocks were numbered. (Overlaps are
        settled in the working CRS by :func:`settle_overlaps`.)

    Examples
    --------
    >>> from geosoil import demo_farm
    >>> p = read_paddocks(BoundarySettings(paddocks=Path(demo_farm.__file__).parent
    ...                                    / "paddocks.geojson"))
    >>> p.set_index("paddock").geometry.geom_type.to_dict()
    {'Red Hill': 'Polygon', 'Creek Flat': 'MultiPolygon', 'Windmill': 'Polygon'}
    """
    path = Path(settings.paddocks)
    frame = _read_vector(path, layer=settings.layer, key="paddocks")
    column = _find_column(frame, settings.name_column, NAME_COLUMNS, path=path, key="name_column")
    if column is None:
        shown = [str(c) for c in frame.columns if c != frame.geometry.name]
        warnings.warn(
            f"{path}: no paddock-name column found (looked for name, paddock, field, block "
            "and their German, Spanish, Portuguese and French words, as Schlag, Lote, Talhão, "
            f"Parcelle; the file has: {', '.join(shown) or 'no columns'}); "
            + _numbered("Paddock", len(frame))
            + ". Set [boundaries] name_column to use a column",
            DataWarning,
            stacklevel=2,
        )
    out = _labelled_polygons(
        frame, column, path=path, what="paddock", prefix="Paddock",
        fix_type="a paddock file holds polygons only; convert boundary lines to polygons in a GIS",
        duplicate_names=settings.duplicate_names, warn_overlaps=False,
    )
    logger.info("read %d paddocks from %s", len(out), path)
    return out


def _labelled_polygons(
    frame: gpd.GeoDataFrame, column: str | None, *, path: Path, what: str, prefix: str,
    fix_type: str, duplicate_names: str, warn_overlaps: bool = True,
) -> gpd.GeoDataFrame:
    """One cleaned polygon per label (a ``what`` column), shared features merged or refused,
    overlaps warned about (``warn_overlaps``); in the file's CRS."""
    labels = _labels(frame, column, path=path, prefix=prefix, required=True)
    geoms = [
        _clean_polygon(g, path=path, row=i, label=labels[i - 1], what=what, fix_type=fix_type)
        for i, g in enumerate(frame.geometry.tolist(), start=1)
    ]
    labels, geoms = _merge_duplicates(
        labels, geoms, path=path, what=what, column=column, mode=duplicate_names,
        key="duplicate_names",
    )
    if warn_overlaps:
        _warn_overlaps(labels, geoms, path=path, what=what)
    return gpd.GeoDataFrame({what: pd.Series(labels, dtype=object)}, geometry=geoms,
                            crs=frame.crs)


def read_exclusions(settings: BoundarySettings, *, crs: Any) -> gpd.GeoDataFrame:
    """Read the areas to leave untreated: exclusion polygons and buffered creeks.

    Parameters
    ----------
    settings
        ``exclusions`` (polygons), ``creeks`` (lines, or creek-bed polygons)
        and ``creek_buffer_m``. Either file may be unset.
    crs
        CRS of the result, as anything :meth:`pyproj.CRS.from_user_input`
        takes. It must be projected when creeks are given, because the buffer
        is a distance on the ground.

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``exclusion`` (label: from a name/label/type column, or
        "Exclusion N" / "Creek N"), ``kind`` (``"area"`` or
        ``"creek buffer"``) and ``geometry`` (polygons) in ``crs``. Empty
        (with these columns) when neither file is set.

    Raises
    ------
    InputError
        As for :func:`read_paddocks`; also lines in the exclusions file or
        points in either file.
    CRSError
        ``crs`` is not a CRS, or it is geographic while creeks must be buffered.

    Examples
    --------
    >>> from geosoil import demo_farm
    >>> folder = Path(demo_farm.__file__).parent
    >>> ex = read_exclusions(BoundarySettings(paddocks=folder / "paddocks.geojson",
    ...                                       exclusions=folder / "exclusions.geojson"),
    ...                      crs="EPSG:32755")
    >>> sorted(set(ex["kind"]))
    ['area']
    """
    target = _to_crs_object(crs)
    labels: list[str] = []
    kinds: list[str] = []
    geoms: list[BaseGeometry] = []
    if settings.exclusions is not None:
        path = Path(settings.exclusions)
        frame = _read_vector(path, layer=None, key="exclusions")
        column = _find_column(frame, None, _EXCLUSION_LABELS, path=path, key="exclusions")
        names = _labels(frame, column, path=path, prefix="Exclusion", required=False)
        fix_type = (
            "draw the excluded area as a polygon; put creek lines in [boundaries] creeks"
        )
        cleaned = [
            _clean_polygon(g, path=path, row=i, label=names[i - 1], what="exclusion",
                           fix_type=fix_type)
            for i, g in enumerate(frame.geometry.tolist(), start=1)
        ]
        projected = gpd.GeoSeries(cleaned, crs=frame.crs).to_crs(target)
        _check_projected(projected, names, path=path, what="exclusion")
        for name, g in zip(names, projected.tolist(), strict=True):
            labels.append(name)
            kinds.append("area")
            geoms.append(shapely.make_valid(g) if not g.is_valid else g)
    if settings.creeks is not None:
        if not target.is_projected:
            raise CRSError(
                f"creek buffers are distances on the ground, but the CRS given ({target.name}) "
                "is not projected; pass the working (projected) CRS"
            )
        path = Path(settings.creeks)
        frame = _read_vector(path, layer=None, key="creeks")
        column = _find_column(frame, None, _CREEK_LABELS, path=path, key="creeks")
        names = _labels(frame, column, path=path, prefix="Creek", required=False)
        metres_per_unit = target.axis_info[0].unit_conversion_factor
        distance = settings.creek_buffer_m / metres_per_unit
        lines: list[BaseGeometry] = []
        for i, g in enumerate(frame.geometry.tolist(), start=1):
            if g is None or g.is_empty:
                raise InputError(
                    f"creek '{names[i - 1]}' has no geometry", file=path, row=i,
                    fix="draw the creek line, or delete the feature",
                )
            kinds_here = {p.geom_type for p in _flat_parts(g)}
            if not kinds_here <= set(_LINEAR) | set(_POLYGONAL):
                raise InputError(
                    f"creek '{names[i - 1]}' is a {g.geom_type}; creeks are lines "
                    "(or creek-bed polygons)",
                    file=path, row=i,
                    fix="draw the creek as a line; put point features in no boundary file",
                )
            g = shapely.force_2d(g)
            _check_finite(g, path=path, row=i, where=f"creek '{names[i - 1]}'")
            lines.append(g)
        projected = gpd.GeoSeries(lines, crs=frame.crs).to_crs(target)
        _check_projected(projected, names, path=path, what="creek")
        for name, g in zip(names, projected.tolist(), strict=True):
            labels.append(name)
            kinds.append("creek buffer")
            geoms.append(shapely.make_valid(g).buffer(distance))
        logger.info("buffered %d creek feature(s) by %g m", len(lines), settings.creek_buffer_m)
    return gpd.GeoDataFrame(
        {"exclusion": pd.Series(labels, dtype=object), "kind": pd.Series(kinds, dtype=object)},
        geometry=gpd.GeoSeries(geoms, crs=target),
        crs=target,
    )


def read_user_zones(
    path: str | os.PathLike[str],
    *,
    crs: Any,
    id_column: str | None = None,
    duplicate_names: str = "merge",
) -> gpd.GeoDataFrame:
    """Read the user's own management zones.

    Parameters
    ----------
    path
        Vector file of zone polygons (any CRS; GeoJSON is WGS 84).
    crs
        CRS of the result (anything :meth:`pyproj.CRS.from_user_input` takes).
    id_column
        Column holding the zone id; ``None`` looks for a common spelling
        (:data:`ZONE_COLUMNS`) and otherwise numbers them "Zone 1", ... .
    duplicate_names
        ``"merge"`` features sharing an id into one multipart zone (with a
        warning) or ``"error"``.

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``zone`` (str, unique; whole numbers written without ".0")
        and ``geometry`` (Polygon or MultiPolygon) in ``crs``.

    Raises
    ------
    InputError
        As for :func:`read_paddocks`.

    Examples
    --------
    >>> from geosoil import demo_farm
    >>> z = read_user_zones(Path(demo_farm.__file__).parent / "zones_windmill.geojson",
    ...                     crs="EPSG:32755")
    >>> z["zone"].tolist()
    ['1', '2', '3', '4']
    """
    if duplicate_names not in ("merge", "error"):
        raise SettingsError(
            f"'{duplicate_names}' is not allowed. Allowed: merge, error", key="duplicate_names"
        )
    target = _to_crs_object(crs)
    path = Path(path)
    frame = _read_vector(path, layer=None, key="zones")
    column = _find_column(frame, id_column, ZONE_COLUMNS, path=path, key="zone_id_column")
    if column is None:
        warnings.warn(
            f"{path}: no zone-id column found (looked for zone, zone_id, id, name); "
            + _numbered("Zone", len(frame))
            + ". Set [boundaries] zone_id_column to use a column",
            DataWarning,
            stacklevel=2,
        )
    out = _labelled_polygons(
        frame, column, path=path, what="zone", prefix="Zone",
        fix_type="a zones file holds polygons only", duplicate_names=duplicate_names,
    ).to_crs(target)
    for name, g in zip(out["zone"].tolist(), out.geometry.tolist(), strict=True):
        # rows may have been merged by name: the zone's name says which
        _check_finite(g, path=path, row=None, where=f"zone '{name}', projected to the working CRS,")
    out["geometry"] = [g if g.is_valid else _polygonal_part(shapely.make_valid(g))
                       for g in out.geometry]
    logger.info("read %d zones from %s", len(out), path)
    return out


# --------------------------------------------------------------------------- overlaps

#: Paddocks sharing less than this area (square metres) do not overlap: edges that touch
#: share none, and two boundaries digitised along one fence line share slivers far
#: smaller than a square metre.
OVERLAP_TOLERANCE_M2: float = 1.0


def _area_text(m2: float) -> str:
    """An overlap's area in hectares, with square metres where hectares would read 0.00."""
    ha = m2 / 10_000.0
    return f"{ha:.2f} ha" if ha >= 0.01 else f"{ha:.4f} ha ({m2:.0f} m\u00b2)"


def overlapping_pairs(paddocks: gpd.GeoDataFrame) -> list[tuple[int, int, float]]:
    """Pairs of paddocks (row positions, first < second) that share more than
    :data:`OVERLAP_TOLERANCE_M2`, with the shared area in square metres; ``paddocks`` in a
    projected CRS."""
    crs = pyproj.CRS.from_user_input(paddocks.crs)
    if not crs.is_projected:
        raise CRSError(f"overlap areas need a projected CRS, not {crs.name}")
    unit = crs.axis_info[0].unit_conversion_factor
    geoms = paddocks.geometry.to_numpy()
    if len(geoms) < 2:
        return []
    left, right = shapely.STRtree(geoms).query(geoms, predicate="intersects")
    keep = left < right
    left, right = left[keep], right[keep]
    shared = shapely.area(shapely.intersection(geoms[left], geoms[right])) * unit * unit
    big = shared > OVERLAP_TOLERANCE_M2
    return sorted(zip(left[big].tolist(), right[big].tolist(), shared[big].tolist(),
                      strict=True))


def settle_overlaps(
    paddocks: gpd.GeoDataFrame, *, mode: str, file: str | os.PathLike[str],
) -> gpd.GeoDataFrame:
    """Refuse overlapping paddocks, or give each overlap to the paddock listed first.

    Parameters
    ----------
    paddocks
        From :func:`read_paddocks`, in the projected working CRS (areas in
        square metres), in file order.
    mode
        ``"refuse"``: raise naming every pair that shares more than
        :data:`OVERLAP_TOLERANCE_M2`, with the shared area. ``"first"``: each
        paddock loses what it shares with the paddocks listed before it, so
        every part of the farm belongs to one paddock (a warning per pair
        says where each overlap went).
    file
        The paddocks file, named in the messages.

    Returns
    -------
    geopandas.GeoDataFrame
        ``paddocks`` (a copy with the overlaps taken out of the later paddocks
        when ``mode="first"``).

    Raises
    ------
    InputError
        Overlaps with ``mode="refuse"``; with ``mode="first"``, a paddock that
        lies wholly inside the paddocks listed before it.

    Examples
    --------
    >>> a, b = shapely.box(0, 0, 200, 100), shapely.box(100, 0, 300, 100)
    >>> pads = gpd.GeoDataFrame({"paddock": ["A", "B"]}, geometry=[a, b], crs="EPSG:32755")
    >>> with warnings.catch_warnings(record=True) as said:
    ...     out = settle_overlaps(pads, mode="first", file="p.gpkg")
    >>> out.area.round().tolist()
    [20000.0, 10000.0]
    >>> print(said[0].message)  # doctest: +ELLIPSIS
    paddocks 'A' and 'B' overlap by 1.00 ha; the overlap belongs to 'A', listed first in p.gpkg...
    """
    pairs = overlapping_pairs(paddocks)
    if not pairs:
        return paddocks
    names = [str(n) for n in paddocks["paddock"]]
    if mode == "refuse":
        listing = "; ".join(f"'{names[i]}' and '{names[j]}' share {_area_text(m2)}"
                            for i, j, m2 in pairs)
        raise InputError(
            f"{len(pairs)} pair(s) of paddocks overlap, so their overlap would be counted "
            f"twice: {listing}",
            file=file,
            fix="redraw the boundaries so that they do not overlap, or set [boundaries] "
            'overlaps = "first" to give each overlap to the paddock listed first in the file',
        )
    geoms = list(paddocks.geometry)
    earlier: dict[int, list[int]] = {}
    for i, j, _ in pairs:
        earlier.setdefault(j, []).append(i)
    unit = pyproj.CRS.from_user_input(paddocks.crs).axis_info[0].unit_conversion_factor
    for j, before in sorted(earlier.items()):
        # the original boundaries of the earlier paddocks: what they claimed first
        cut = shapely.difference(paddocks.geometry.iloc[j],
                                 shapely.union_all([paddocks.geometry.iloc[i] for i in before]))
        cut = _single_if_one(_polygonal_part(shapely.make_valid(cut)))
        if cut.is_empty or cut.area * unit * unit <= OVERLAP_TOLERANCE_M2:
            raise InputError(
                f"paddock '{names[j]}' lies wholly inside "
                + ", ".join(f"'{names[i]}'" for i in before)
                + ' (listed before it), so [boundaries] overlaps = "first" leaves nothing of it',
                file=file,
                fix="delete that paddock from the file, or redraw the boundaries",
            )
        geoms[j] = cut
    for i, j, m2 in pairs:
        warnings.warn(
            f"paddocks '{names[i]}' and '{names[j]}' overlap by {_area_text(m2)}; the overlap "
            f"belongs to '{names[i]}', listed first in {os.fspath(file)} ([boundaries] "
            'overlaps = "first"), and is counted once',
            DataWarning, stacklevel=2,
        )
    out = paddocks.copy()
    out["geometry"] = gpd.GeoSeries(geoms, index=paddocks.index, crs=paddocks.crs)
    return out
