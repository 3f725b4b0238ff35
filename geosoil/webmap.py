"""Offline interactive map of a run: one self-contained HTML page.

The page is rendered from the package's jinja2 template ``templates/map.html``
(autoescaped) with Leaflet 1.9.4's JavaScript and CSS read from the installed
``django-js-lib-leaflet`` package and inlined, so it works with no network at all.
Everything the map draws travels in one JSON block (``<script
type="application/json">``); the page's own script (``templates/map.js``) builds
the layers, popups, layer panel and legend from it with DOM calls, and every
text from the user's files reaches the page through ``textContent``, never as
HTML. The only remote address the page may name is the optional OpenStreetMap
tile layer (``background_tiles=True``), which fails quietly offline.

What the page shows:

* one soil surface at a time (:class:`RasterLayer`, an exclusive choice with its
  legend), warped to EPSG:3857 with :func:`rasterio.warp.reproject` at about one
  image pixel per cell (what the screen needs; Leaflet draws it pixelated when
  zoomed in) and drawn in the colour classes of :mod:`geosoil.presentation`;
* the zones of one product at a time (a separate choice that can be switched
  off), as labelled outlines or filled by rate on the rate scale;
* exclusions and creek buffers (hatched, labelled as such), paddock outlines
  (labelled), and the soil samples on top (one canvas layer; popups with
  labels, units, the lab's own values and the sample's flags);
* a collapsible layer panel and legend (collapsed at first on a phone-sized
  screen), a scale bar, and a "where am I" button that asks the device for its
  position (no network needed).

It opens on the surface that explains the largest prescription, with that
product's zones as outlines (``open_surface``, ``open_product``).

The page exposes ``window.geosoilMap`` (the Leaflet map, its layers, the data and
``show({surface, product, fill, samples, paddocks, exclusions})``) for the browser tests.

This module is pure: :func:`build_map` returns the page as a string; the
pipeline writes it.
"""

from __future__ import annotations

import base64
import functools
import importlib.resources
import logging
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from html.parser import HTMLParser
from typing import Any

import affine
import numpy as np
import pyproj
import rasterio.warp
import shapely
from rasterio.enums import Resampling

from .errors import CRSError, GeosoilError, InputError, SettingsError
from .presentation import (
    MAX_ZONE_LABELS,
    Classes,
    classes_data_uri,
    fmt_number,
    fmt_value,
    json_for_script,
    label_point,
    point_xy,
    rate_classes,
    rate_colour,
)
from .units import RATE_UNITS, area_in, area_unit_for, format_rate

__all__ = [
    "MAP_MAX_SAMPLES",
    "MAX_ZONE_LABELS",
    "RasterLayer",
    "SampleField",
    "TILE_URL",
    "WebRaster",
    "build_map",
    "remote_references",
    "sample_rows",
    "warp_to_web_mercator",
]

logger = logging.getLogger(__name__)

#: The optional background tiles (only named in the page when ``background_tiles=True``).
TILE_URL = "https://tile.openstreetmap.org/{z}/{x}/{y}.png"
_TILE_ATTRIBUTION = "&copy; OpenStreetMap contributors"

_EPSG3857 = pyproj.CRS.from_epsg(3857)
_EPSG4326 = pyproj.CRS.from_epsg(4326)
_GROUPS = ("soil", "error", "rate")


@dataclass(frozen=True, eq=False)
class RasterLayer:
    """One surface to draw on the map.

    Parameters
    ----------
    key
        Short id, unique in the map (e.g. ``"esp"``, ``"ph_sd"``).
    title
        Name in the layer panel and the legend, e.g. ``"ESP"``.
    unit
        Unit shown in the legend, e.g. ``"% of ECEC"``.
    array
        2-D float array (row 0 at the north edge); NaN is no data.
    transform
        ``affine.Affine`` of the array in ``crs`` (north-up or not).
    crs
        The array's coordinate reference system (any projected CRS).
    classes
        The colour classes (:func:`geosoil.presentation.classes_for`).
    group
        ``"soil"`` (a soil surface), ``"error"`` (a kriging standard deviation)
        or ``"rate"`` (a per-cell rate): where it sits in the layer panel.

    Examples
    --------
    >>> import numpy as np, affine
    >>> from geosoil.presentation import classes_for
    >>> a = np.full((2, 2), 8.0)
    >>> layer = RasterLayer(key="esp", title="ESP", unit="%", array=a,
    ...                     transform=affine.Affine(10, 0, 500000, 0, -10, 6200000),
    ...                     crs="EPSG:32755", classes=classes_for("esp", a))
    >>> len(layer.classes.colours)
    3
    """

    key: str
    title: str
    unit: str
    array: np.ndarray
    transform: affine.Affine
    crs: pyproj.CRS
    classes: Classes
    group: str = "soil"

    def __post_init__(self) -> None:
        where = f"raster layer '{self.title}'"
        arr = np.asarray(self.array)
        if arr.ndim != 2 or arr.size == 0:
            raise InputError(
                f"{where}: array must be 2-D and not empty (got shape {arr.shape})",
                fix="pass one band as a (rows, columns) array",
            )
        if self.group not in _GROUPS:
            raise InputError(f"{where}: unknown group '{self.group}'",
                             fix=f"use one of: {', '.join(_GROUPS)}")
        if not isinstance(self.classes, Classes):
            raise InputError(f"{where}: classes must be a presentation.Classes",
                             fix="make them with geosoil.presentation.classes_for")
        try:
            crs = pyproj.CRS.from_user_input(self.crs)
        except pyproj.exceptions.CRSError as exc:
            raise CRSError(f"{where}: invalid CRS ({exc})") from None
        object.__setattr__(self, "crs", crs)
        object.__setattr__(self, "array", arr.astype(float, copy=False))


@dataclass(frozen=True)
class SampleField:
    """One line of a sample's popup.

    Parameters
    ----------
    column
        Column of the samples table.
    label
        What the popup calls it (e.g. ``"pH (CaCl2)"``, ``"EC 1:5"``).
    unit
        Unit written after the value (may be empty).
    digits
        Decimals shown (None: about four significant figures).
    flag
        A flag: listed under "Flags" when set (True, or non-empty text other than
        ``ok_values``), instead of as a line of the table.
    ok_values
        Values of a flag column that mean "nothing to flag" (e.g. ``"non-sodic"``).
    """

    column: str
    label: str
    unit: str = ""
    digits: int | None = None
    flag: bool = False
    ok_values: tuple[str, ...] = ()


@dataclass(frozen=True, eq=False)
class WebRaster:
    """A surface warped to EPSG:3857, as the map draws it.

    Attributes
    ----------
    array
        2-D float array, north-up in EPSG:3857, NaN outside the data.
    transform
        ``affine.Affine`` of ``array`` in EPSG:3857 metres (square pixels).
    bounds_lonlat
        ``(west, south, east, north)`` in degrees of the array's outer edges:
        the bounds handed to Leaflet's image overlay.
    """

    array: np.ndarray
    transform: affine.Affine
    bounds_lonlat: tuple[float, float, float, float]

    @property
    def leaflet_bounds(self) -> list[list[float]]:
        """``[[south, west], [north, east]]`` as Leaflet takes them."""
        w, s, e, n = self.bounds_lonlat
        return [[s, w], [n, e]]


def warp_to_web_mercator(
    array: np.ndarray,
    *,
    transform: affine.Affine,
    crs: pyproj.CRS | str | int,
    oversample: int = 1,
    max_pixels: int = 3_000_000,
) -> WebRaster:
    """Warp a surface to EPSG:3857 (nearest cell) for drawing as an image overlay.

    The output pixels are square in EPSG:3857 and about ``1 / oversample`` of a
    source cell across on the ground (fewer when that would pass
    ``max_pixels``). One pixel per cell (the default) is what a screen needs:
    the browser draws the image pixelated when zoomed in, and each pixel takes
    the cell under its centre, so a cell's edge lands within a pixel of where
    pyproj puts it; grid convergence (the rotation between the
    source grid and the web map's north) is honoured because every output
    pixel is looked up through the exact transformation.

    Parameters
    ----------
    array
        2-D float array, NaN = no data.
    transform, crs
        Where the array lies.
    oversample
        Output pixels per source cell along each axis.
    max_pixels
        Upper limit on the output's width x height.

    Returns
    -------
    WebRaster

    Examples
    --------
    >>> import numpy as np, affine
    >>> web = warp_to_web_mercator(np.ones((3, 4)), crs="EPSG:32755",
    ...                            transform=affine.Affine(25, 0, 500000, 0, -25, 6200000))
    >>> w, s, e, n = web.bounds_lonlat
    >>> bool(w < 147 < e), bool(s < n < 0)
    (True, True)
    """
    src = np.asarray(array, dtype=float)
    src_crs = pyproj.CRS.from_user_input(crs)
    grid = _web_grid(tuple(transform)[:6], src.shape, src_crs.to_wkt(), oversample, max_pixels)
    dst = np.full(grid.shape, np.nan, dtype=float)
    inside = grid.index >= 0
    dst[inside] = src.ravel()[grid.index[inside]]
    return WebRaster(array=dst, transform=grid.transform, bounds_lonlat=grid.bounds_lonlat)


@dataclass(frozen=True, eq=False)
class _WebGrid:
    """Where each web pixel takes its value: ``index`` into the flattened source (-1: none)."""

    transform: affine.Affine
    shape: tuple[int, int]
    bounds_lonlat: tuple[float, float, float, float]
    index: np.ndarray


@functools.lru_cache(maxsize=4)
def _web_grid(
    gt: tuple[float, ...], shape: tuple[int, ...], wkt: str, oversample: int, max_pixels: int,
) -> _WebGrid:
    """The web-pixel grid of a source grid, and the source cell each pixel takes.

    GDAL's warper (nearest cell) is run once per source grid on the cells' own
    index numbers, so every surface of that grid is warped by looking the
    indices up: the same pixels as warping each surface (held against
    ``rasterio.warp.reproject`` in the tests), at a fraction of the cost.
    """
    transform = affine.Affine(*gt)
    src_crs = pyproj.CRS.from_wkt(wkt)
    height, width = shape
    xs = [transform @ (c, r) for c, r in ((0, 0), (width, 0), (0, height), (width, height))]
    minx, maxx = min(p[0] for p in xs), max(p[0] for p in xs)
    miny, maxy = min(p[1] for p in xs), max(p[1] for p in xs)
    wminx, wminy, wmaxx, wmaxy = rasterio.warp.transform_bounds(
        src_crs, _EPSG3857, minx, miny, maxx, maxy, densify_pts=51
    )
    # Ground size of a source cell, then in EPSG:3857 metres at the raster's middle.
    cell = min(math.hypot(transform.a, transform.d), math.hypot(transform.b, transform.e))
    to_ll = pyproj.Transformer.from_crs(src_crs, _EPSG4326, always_xy=True)
    _, mid_lat = to_ll.transform((minx + maxx) / 2, (miny + maxy) / 2)
    res = cell / max(math.cos(math.radians(mid_lat)), 1e-6) / max(oversample, 1)
    out_w = max(1, math.ceil((wmaxx - wminx) / res))
    out_h = max(1, math.ceil((wmaxy - wminy) / res))
    if out_w * out_h > max_pixels:
        res *= math.sqrt(out_w * out_h / max_pixels)
        out_w = max(1, math.ceil((wmaxx - wminx) / res))
        out_h = max(1, math.ceil((wmaxy - wminy) / res))
    dst_transform = affine.Affine(res, 0.0, wminx, 0.0, -res, wmaxy)
    # float64 holds every index below 2**53 exactly
    numbers = np.arange(height * width, dtype=float).reshape(height, width)
    dst = np.full((out_h, out_w), np.nan, dtype=float)
    rasterio.warp.reproject(
        source=numbers,
        destination=dst,
        src_transform=transform,
        src_crs=src_crs,
        src_nodata=np.nan,
        dst_transform=dst_transform,
        dst_crs=_EPSG3857,
        dst_nodata=np.nan,
        resampling=Resampling.nearest,
    )
    index = np.where(np.isfinite(dst), dst, -1.0).astype(np.int64)
    east, south = dst_transform @ (out_w, out_h)
    to_deg = pyproj.Transformer.from_crs(_EPSG3857, _EPSG4326, always_xy=True)
    w_deg, n_deg = to_deg.transform(wminx, wmaxy)
    e_deg, s_deg = to_deg.transform(east, south)
    logger.debug("warped %sx%s cells to %sx%s web pixels", width, height, out_w, out_h)
    return _WebGrid(transform=dst_transform, shape=(out_h, out_w),
                    bounds_lonlat=(w_deg, s_deg, e_deg, n_deg), index=index)




# --------------------------------------------------------------------------- page pieces


def _templates() -> Any:
    from .pages import environment

    return environment("map")


def _template_text(name: str) -> str:
    return (importlib.resources.files("geosoil") / "templates" / name).read_text(encoding="utf-8")


def _inline(text: str, tag: str) -> Any:
    """Text to place inside a ``<script>`` or ``<style>`` element as it is (no closing tag)."""
    from markupsafe import Markup

    return Markup(re.sub(rf"</({tag})", r"<\\/\1", text, flags=re.IGNORECASE))


def _round_coords(obj: Any, ndigits: int = 6) -> Any:
    if isinstance(obj, float):
        return round(obj, ndigits)
    if isinstance(obj, (list, tuple)):
        return [_round_coords(o, ndigits) for o in obj]
    if isinstance(obj, dict):
        return {k: _round_coords(v, ndigits) for k, v in obj.items()}
    return obj


def _geometry_json(geom: Any) -> dict[str, Any]:
    from shapely.geometry import mapping

    return _round_coords(mapping(geom))


def _latlon(point: Any) -> list[float]:
    return [round(point.y, 6), round(point.x, 6)]


def _to_lonlat(gdf: Any, what: str) -> Any:
    import geopandas as gpd

    if gdf is None:
        return None
    if not isinstance(gdf, gpd.GeoDataFrame):
        raise InputError(f"{what} must be a GeoDataFrame (got {type(gdf).__name__})")
    if len(gdf) == 0:
        return gdf
    if gdf.crs is None:
        raise CRSError(
            f"{what} have no coordinate reference system; set one before drawing the map"
        )
    gdf = gdf[gdf.geometry.notna() & ~gdf.geometry.is_empty]
    return gdf.to_crs(_EPSG4326)


def _require_columns(gdf: Any, columns: Sequence[str], what: str) -> None:
    if gdf is None:
        return
    missing = [c for c in columns if c not in gdf.columns]
    if missing:
        raise InputError(
            f"{what} lack the column(s) {', '.join(missing)}",
            fix=f"pass a GeoDataFrame with columns {', '.join(columns)}",
        )


def _surface_json(layer: RasterLayer) -> dict[str, Any]:
    web = warp_to_web_mercator(layer.array, transform=layer.transform, crs=layer.crs)
    return {
        "id": layer.key,
        "title": layer.title,
        "unit": layer.unit,
        "group": layer.group,
        "png": classes_data_uri(web.array, layer.classes),
        "bounds": _round_coords(web.leaflet_bounds, 7),
        "legend": layer.classes.legend(),
        "note": layer.classes.note,
    }


def _flag_text(field: SampleField, value: Any) -> str | None:
    if value is None or isinstance(value, float) and math.isnan(value):
        return None
    if isinstance(value, (bool, np.bool_)):
        return field.label if value else None
    text = fmt_value(value)
    if text in ("", "–") or text in field.ok_values:
        return None
    return f"{field.label}: {text}" if field.label else text


#: Most samples the map carries (a spread subset above it, every planned point kept): a
#: 300 ha paddock at 10 000 samples has one every 300 m2, more than a screen can show
#: apart; the page stays a few MiB and opens in seconds. The full table is in the
#: run's samples.csv and farm.gpkg.
MAP_MAX_SAMPLES = 10_000


def _map_subset(pts: Any, most: int) -> np.ndarray:
    """Indices of the samples the map carries: all when at most ``most``; else every
    planned point and a spread subset (:func:`geosoil.points.spread_subset`, seeded) of
    the others, ascending."""
    from .points import spread_subset

    n = len(pts)
    if n <= most:
        return np.arange(n)
    planned = (pts["planned"].fillna(False).astype(bool).to_numpy() if "planned" in pts.columns
               else np.zeros(n, dtype=bool))
    others = np.flatnonzero(~planned)
    room = max(most - int(planned.sum()), 0)
    xy = shapely.get_coordinates(pts.geometry.to_numpy()[others])  # lon/lat: points only here
    if len(xy) == len(others) and room:
        # degrees of longitude shrink with latitude: blocks about square on the ground
        xy = xy * [math.cos(math.radians(float(np.mean(xy[:, 1])))), 1.0]
        chosen = others[spread_subset(xy, room)]
    else:
        chosen = others[:room]
    return np.sort(np.concatenate([np.flatnonzero(planned), chosen]))


def _samples_json(pts: Any, fields: Sequence[SampleField], *, most: int = MAP_MAX_SAMPLES,
                  source: str = "") -> dict[str, Any]:
    """The sample layer as columns: coordinates as whole millionths of a degree from the
    first point, IDs, a paddock index, each popup field's texts, an index into the distinct
    lists of flags, and the planned points' indices. The page builds a popup when one is
    opened. ``n`` is the number of samples given, ``source`` where all of them are."""
    columns = pts.columns if pts is not None else ()
    table = [f for f in fields if not f.flag and f.column in columns]
    flags = [f for f in fields if f.flag and f.column in columns]
    out: dict[str, Any] = {"fields": [[f.label, f.unit] for f in table],
                           "n": len(pts) if pts is not None else 0,
                           "source": source, "lat0": 0, "lon0": 0, "lat": [], "lon": [],
                           "id": [], "paddocks": [], "paddock": [], "values": [[] for _ in table],
                           "flagSets": [[]], "flags": [], "planned": []}
    if pts is None or not len(pts):
        return out
    pts = pts.iloc[_map_subset(pts, most)]
    xy = point_xy(pts.geometry.to_numpy())
    lon_e6 = np.round(xy[:, 0] * 1e6).astype(np.int64)
    lat_e6 = np.round(xy[:, 1] * 1e6).astype(np.int64)
    out["lon0"], out["lat0"] = int(lon_e6[0]), int(lat_e6[0])
    out["lon"] = (lon_e6 - lon_e6[0]).tolist()
    out["lat"] = (lat_e6 - lat_e6[0]).tolist()
    out["id"] = [fmt_value(v) for v in pts["sample_id"].tolist()]
    pads = [fmt_value(v) for v in pts["paddock"].tolist()] if "paddock" in pts.columns \
        else [""] * len(pts)
    names = list(dict.fromkeys(pads))
    where = {p: k for k, p in enumerate(names)}
    out["paddocks"], out["paddock"] = names, [where[p] for p in pads]
    for k, f in enumerate(table):
        texts = [fmt_value(v, f.digits) for v in pts[f.column].tolist()]
        out["values"][k] = [None if t == "–" else t for t in texts]
    cols = [pts[f.column].tolist() for f in flags]
    sets: dict[tuple[str, ...], int] = {(): 0}
    for i in range(len(pts)):
        got = tuple(t for f, col in zip(flags, cols, strict=True) if (t := _flag_text(f, col[i])))
        out["flags"].append(sets.setdefault(got, len(sets)))
    out["flagSets"] = [list(k) for k in sets]
    if "planned" in pts.columns:
        out["planned"] = np.flatnonzero(pts["planned"].fillna(False).astype(bool)).tolist()
    return out


def sample_rows(samples: Mapping[str, Any]) -> list[list[Any]]:
    """The map's sample layer (as :func:`build_map` puts it in the page) one row a sample:
    ``[lat, lon, id, paddock, texts, flags, planned]``, as the page's ``sampleRow`` reads it.

    >>> sample_rows({"fields": [["pH", ""]], "lat0": -35000000, "lon0": 147000000,
    ...              "lat": [0, -10], "lon": [0, 25], "id": ["S1", "S2"], "paddocks": ["N"],
    ...              "paddock": [0, 0], "values": [["5.2", None]], "flagSets": [[], ["sodic"]],
    ...              "flags": [1, 0], "planned": [1]})[1]
    [-35.00001, 147.000025, 'S2', 'N', [None], [], 1]
    """
    planned = set(samples["planned"])
    return [[(samples["lat0"] + samples["lat"][i]) / 1e6,
             (samples["lon0"] + samples["lon"][i]) / 1e6, samples["id"][i],
             samples["paddocks"][samples["paddock"][i]], [v[i] for v in samples["values"]],
             list(samples["flagSets"][samples["flags"][i]]), 1 if i in planned else 0]
            for i in range(len(samples["id"]))]


def _default_fields(pts: Any) -> list[SampleField]:
    skip = {pts.geometry.name, "sample_id"}
    return [SampleField(c, str(c)) for c in pts.columns if c not in skip]


def _products_json(zns: Any, rate_unit: str) -> list[dict[str, Any]]:
    out: list[dict[str, Any]] = []
    if zns is None or not len(zns):
        return out
    spread = zns[zns["kind"].astype(str) != "exclusion"]
    for product, rows in spread.groupby("product", sort=False):
        rates = rows["rate_kg_ha"].astype(float).to_numpy()
        top = float(np.nanmax(rates)) if np.isfinite(rates).any() else 0.0
        labelled = len(rows) <= MAX_ZONE_LABELS
        classes = rate_classes(list(rates),
                               fmt=lambda r: format_rate(r, rate_unit, with_unit=False))
        zones = []
        gcol = rows.geometry.name
        for z in rows.to_dict("records"):
            rate = float(z["rate_kg_ha"])
            schedule = z.get("schedule", "")
            item: dict[str, Any] = {
                "g": _geometry_json(z[gcol]),
                "z": fmt_value(z["zone"]),
                "r": format_rate(rate, rate_unit, with_unit=False) if math.isfinite(rate)
                else "–",
                "c": rate_colour(rate, top),
                "p": fmt_value(z["paddock"]),
                "a": _area_text(z["area_ha"], rate_unit),
                "s": schedule if isinstance(schedule, str) else "",
                "l": fmt_value(z["label"]) if "label" in rows.columns else "",
            }
            if labelled:
                item["at"] = _latlon(label_point(z[gcol]))
            zones.append(item)
        out.append({"product": str(product), "unit": rate_unit, "labelled": labelled,
                    "legend": classes.legend(), "zones": zones})
    return out


def _area_text(area_ha: Any, rate_unit: str) -> str:
    """An area given in ha, with its unit: acres beside a rate per acre (as the report).

    >>> _area_text(40.0, "t/ha"), _area_text(40.0, "lb/ac")
    ('40.00 ha', '98.84 ac')
    """
    unit = area_unit_for(rate_unit)
    return f"{fmt_number(float(area_in(float(area_ha), unit)), 2)} {unit}"


def _exclusions_json(excl: Any, rate_unit: str) -> list[dict[str, Any]]:
    if excl is None or not len(excl):
        return []
    name_col = next((c for c in ("label", "exclusion", "name") if c in excl.columns), None)
    out = []
    for _, row in excl.iterrows():
        kind = str(row["kind"]) if "kind" in excl.columns else "exclusion"
        out.append({
            "g": _geometry_json(row.geometry),
            "name": fmt_value(row[name_col]) if name_col else "",
            "kind": "creek buffer" if kind == "creek buffer" else "exclusion",
            "p": fmt_value(row["paddock"]) if "paddock" in excl.columns else "",
            "a": _area_text(row["area_ha"], rate_unit) if "area_ha" in excl.columns else "",
        })
    return out


def _view_bounds(gdfs: Sequence[Any], rasters: Sequence[RasterLayer]) -> list[list[float]] | None:
    boxes = [tuple(g.total_bounds) for g in gdfs if g is not None and len(g)]
    if not boxes:
        for layer in rasters:
            h, w = layer.array.shape
            corners = [layer.transform @ (c, r) for c, r in ((0, 0), (w, 0), (0, h), (w, h))]
            tr = pyproj.Transformer.from_crs(layer.crs, _EPSG4326, always_xy=True)
            lon, lat = tr.transform([p[0] for p in corners], [p[1] for p in corners])
            boxes.append((min(lon), min(lat), max(lon), max(lat)))
    if not boxes:
        return None
    arr = np.array(boxes, dtype=float)
    w, s = np.nanmin(arr[:, 0]), np.nanmin(arr[:, 1])
    e, n = np.nanmax(arr[:, 2]), np.nanmax(arr[:, 3])
    if not all(map(math.isfinite, (w, s, e, n))):
        return None
    return [[float(s), float(w)], [float(n), float(e)]]


# --------------------------------------------------------------------------- the map


def build_map(
    *,
    title: str,
    paddocks: Any,
    samples: Any,
    rasters: Sequence[RasterLayer],
    zones: Any,
    exclusions: Any = None,
    background_tiles: bool = False,
    rate_unit: str = "kg/ha",
    notes: Sequence[str] = (),
    sample_fields: Sequence[SampleField] | None = None,
    open_surface: str | None = None,
    open_product: str | None = None,
    max_samples: int = MAP_MAX_SAMPLES,
    samples_source: str = "",
) -> str:
    """The run's interactive map as one self-contained HTML page.

    Parameters
    ----------
    title
        Shown at the top of the map and as the page title.
    paddocks
        GeoDataFrame with ``paddock`` and polygons, any CRS: labelled outlines.
    samples
        GeoDataFrame with ``sample_id`` (and ``paddock``), points in any CRS; a
        true ``planned`` column marks points of a sampling plan (drawn in yellow).
    rasters
        The surfaces (:class:`RasterLayer`), in the order of the layer panel.
    zones
        GeoDataFrame with ``paddock, product, zone, kind, rate_kg_ha, area_ha``
        (optionally ``schedule`` and ``label``): one choice per product; zones of
        kind ``exclusion`` are drawn as exclusions instead when ``exclusions`` is None.
    exclusions
        Optional areas not to spread (``label``/``exclusion``/``name``, optional
        ``kind`` = ``"creek buffer"``, ``paddock``, ``area_ha``; polygons).
    background_tiles
        Offer an OpenStreetMap base layer (needs internet; offline it stays blank).
    rate_unit
        Unit of the rates shown: one of :data:`geosoil.units.RATE_UNITS`.
    notes
        Lines shown under the title (that rates are advisory, and the like).
    sample_fields
        The lines of a sample's popup, in order (:class:`SampleField`); default:
        every column under its own name.
    open_surface, open_product
        The surface (a layer's ``key``) and the product whose zones are shown
        when the page opens (default: the first of each).
    max_samples
        Most samples the page carries (:data:`MAP_MAX_SAMPLES`): above it, every
        planned point and a spread subset of the others, and the legend says how
        many of how many are drawn.
    samples_source
        Where every sample is (e.g. ``"samples.csv and farm.gpkg"``), said in the
        legend when not all are drawn.

    Returns
    -------
    str
        The HTML page. With ``background_tiles=False`` it loads nothing from the network.

    Raises
    ------
    InputError
        A table lacks a required column, or ``open_surface`` names no layer.
    CRSError
        A table has no CRS.
    SettingsError
        An unknown ``rate_unit`` (key ``rate_unit``).

    Examples
    --------
    >>> import geopandas as gpd
    >>> from shapely.geometry import Point, box
    >>> pads = gpd.GeoDataFrame({"paddock": ["North"]},
    ...                         geometry=[box(500000, 6200000, 500400, 6200300)], crs="EPSG:32755")
    >>> pts = gpd.GeoDataFrame({"sample_id": ["S1"], "paddock": ["North"], "esp": [7.5]},
    ...                        geometry=[Point(500100, 6200100)], crs="EPSG:32755")
    >>> page = build_map(title="Demo", paddocks=pads, samples=pts, rasters=[],
    ...                  zones=pads.iloc[0:0].assign(product=[], zone=[], kind=[],
    ...                                              rate_kg_ha=[], area_ha=[]))
    >>> page.startswith("<!DOCTYPE html>"), remote_references(page)
    (True, [])
    """
    import geopandas as gpd

    if rate_unit not in RATE_UNITS:
        raise SettingsError(
            f"rate unit '{rate_unit}' is not known; use one of {', '.join(RATE_UNITS)}",
            key="rate_unit",
        )
    _require_columns(paddocks, ["paddock"], "paddocks")
    _require_columns(samples, ["sample_id"], "samples")
    _require_columns(zones, ["paddock", "product", "zone", "kind", "rate_kg_ha", "area_ha"],
                     "zones")
    keys = [r.key for r in rasters]
    if len(set(keys)) != len(keys):
        raise InputError(f"raster layer keys must be unique (got {', '.join(keys)})")
    if open_surface is not None and open_surface not in keys:
        raise InputError(f"open_surface '{open_surface}' is none of the layers ({', '.join(keys)})")
    pads = _to_lonlat(paddocks, "paddocks")
    pts = _to_lonlat(samples, "samples")
    zns = _to_lonlat(zones, "zones")
    excl = _to_lonlat(exclusions, "exclusion areas")
    if excl is None and zns is not None and len(zns):
        ez = zns[zns["kind"].astype(str) == "exclusion"]
        if len(ez):
            cols = [c for c in ("paddock", "label") if c in ez.columns]
            excl = gpd.GeoDataFrame(ez[cols].copy(), geometry=ez.geometry.values, crs=zns.crs)
            excl = excl.dissolve(by=cols, as_index=False)

    products = _products_json(zns, rate_unit)
    names = [p["product"] for p in products]
    if open_product is not None and open_product not in names:
        open_product = None
    fields = list(sample_fields) if sample_fields is not None else (
        _default_fields(pts) if pts is not None else [])
    data = {
        "title": str(title),
        "notes": [str(n) for n in notes if str(n).strip()],
        "surfaces": [_surface_json(layer) for layer in rasters],
        "products": products,
        "exclusions": _exclusions_json(excl, rate_unit),
        "paddocks": [
            {"g": _geometry_json(r.geometry), "name": fmt_value(r["paddock"]),
             # the pole of inaccessibility: well inside its own paddock, never on a
             # boundary shared with the next one (zone labels yield to it in the page)
             "at": _latlon(label_point(r.geometry))}
            for _, r in (pads.iterrows() if pads is not None else iter(()))
        ],
        "samples": _samples_json(pts, fields, most=max_samples, source=samples_source),
        "open": {
            "surface": open_surface or (keys[0] if keys else None),
            "product": open_product or (names[0] if names else None),
        },
        "view": _view_bounds([pads, pts, zns], rasters),
        "tiles": {"url": TILE_URL, "attribution": _TILE_ATTRIBUTION} if background_tiles
        else None,
    }
    js, css = _leaflet_assets()
    page = _templates().get_template("map.html").render(
        title=str(title),
        leaflet_css=_inline(css, "style"),
        leaflet_js=_inline(js, "script"),
        page_css=_inline(_template_text("map.css"), "style"),
        page_js=_inline(_template_text("map.js"), "script"),
        data=_inline(json_for_script(data), "script"),
    )
    remote = remote_references(page)
    if remote:  # nothing in the page may be fetched: the tile URL lives in the JSON only
        raise GeosoilError(f"the map would load from the network: {', '.join(sorted(set(remote)))}")
    return page


def _leaflet_dir() -> Any:
    return importlib.resources.files("js_lib_leaflet") / "static" / "js_lib_leaflet"


def _leaflet_assets() -> tuple[str, str]:
    """Leaflet's JavaScript and CSS from the installed package, ready to inline."""
    base = _leaflet_dir()
    js = (base / "leaflet.js").read_text(encoding="utf-8")
    css = (base / "leaflet.css").read_text(encoding="utf-8")
    js = re.sub(r"//# sourceMappingURL=\S*\s*$", "", js)  # no reference to a missing file
    js = re.sub(r"</(script)", r"<\\/\1", js, flags=re.IGNORECASE)

    def inline(match: re.Match[str]) -> str:
        name = match.group(1)
        data = (base / "images" / name).read_bytes()
        return "url(data:image/png;base64," + base64.b64encode(data).decode("ascii") + ")"

    css = re.sub(r"url\(\s*['\"]?images/([\w.-]+\.png)['\"]?\s*\)", inline, css)
    css = re.sub(r"</(style)", r"<\\/\1", css, flags=re.IGNORECASE)
    return js, css


_CSS_URL = re.compile(r"""url\(\s*["']?\s*([^"')\s]+)""", re.IGNORECASE)
_CSS_IMPORT = re.compile(r"""@import\s+(?:url\()?\s*["']?([^"')\s;]+)""", re.IGNORECASE)
_LOADING_ATTRS = {
    "script": ("src",),
    "link": ("href",),
    "img": ("src", "srcset"),
    "iframe": ("src",),
    "frame": ("src",),
    "embed": ("src",),
    "object": ("data",),
    "source": ("src", "srcset"),
    "video": ("src", "poster"),
    "audio": ("src",),
    "track": ("src",),
    "input": ("src",),
    "image": ("href", "xlink:href"),
    "use": ("href", "xlink:href"),
    "body": ("background",),
}


def _is_local(target: str) -> bool:
    return target.strip().lower().startswith(("data:", "#", "about:blank"))


class _ResourceScanner(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.found: list[str] = []
        self._in_style = False

    def _css(self, text: str) -> None:
        for rx in (_CSS_URL, _CSS_IMPORT):
            self.found.extend(m.group(1) for m in rx.finditer(text) if not _is_local(m.group(1)))

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        names = _LOADING_ATTRS.get(tag, ())
        for key, value in attrs:
            if value is None:
                continue
            if key in names:
                targets = (
                    [v.split()[0] for v in value.split(",") if v.strip()]
                    if key == "srcset"
                    else [value]
                )
                self.found.extend(t for t in targets if not _is_local(t))
            elif key == "style":
                self._css(value)
        self._in_style = tag == "style"

    def handle_endtag(self, tag: str) -> None:
        if tag == "style":
            self._in_style = False

    def handle_data(self, data: str) -> None:
        if self._in_style:
            self._css(data)


def remote_references(page: str) -> list[str]:
    """What the page's markup and CSS would fetch: the ``src``/``href`` of loading
    elements (script, link, img, iframe, ...) and CSS ``url(...)`` / ``@import``,
    other than ``data:`` URIs and in-page ``#`` references. Links a person may
    follow (``<a href>``) and text inside scripts are not fetches and not listed.

    Parameters
    ----------
    page : str
        The HTML page.

    Returns
    -------
    list of str
        Every address that would be fetched (empty for an offline page).

    Examples
    --------
    >>> remote_references('<script src="https://cdn.example/x.js"></script>')
    ['https://cdn.example/x.js']
    >>> remote_references('<style>a{background:url(data:image/png;base64,AA)}</style>')
    []
    """
    scanner = _ResourceScanner()
    scanner.feed(page)
    scanner.close()
    return scanner.found


