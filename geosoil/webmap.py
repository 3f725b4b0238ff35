"""Offline interactive map of a run: one self-contained HTML page.

The map is built with folium and drawn by Leaflet 1.9.4, whose JavaScript and
CSS are read from the installed ``django-js-lib-leaflet`` package and inlined
into the page, so the file works with no network at all. folium's default CDN
links (jQuery, Bootstrap, Awesome Markers, Font Awesome) are removed from the
map; the only remote address the page may name is the optional OpenStreetMap
tile layer (``background_tiles=True``), which fails quietly offline.

What the page holds:

* one overlay per soil surface (:class:`RasterLayer`): warped to the web map's
  projection (EPSG:3857) with :func:`rasterio.warp.reproject` and drawn as a
  PNG image (a ``data:`` URI), so that every cell lands where pyproj puts it;
* per product, the spreader zones coloured and labelled with their rate, in
  the unit the caller asks for (``rate_unit``; the zones table stays in kg/ha);
* exclusion areas, paddock outlines (labelled) and the sample points, whose
  popups list every column of the samples table;
* a legend with units for every layer (shown for the layers switched on), a
  layer switcher and a scale bar.

The page exposes ``window.geosoilMap = {map, layers: [{title, layer, legend}]}``
(the Leaflet map and each switchable layer with its legend entry's element id),
which the legend uses and the browser tests read.

Colour schemes follow Harrower & Brewer (2003): sequential ramps for amounts
and rates (viridis, yellow-orange-brown), a blue-white-orange diverging ramp
around a target, no rainbow or red-green scales.

Every string that comes from the user's files (sample ids, paddock names,
column names and values, titles) is escaped for HTML with :func:`escape_text`
and reaches JavaScript only as a JSON string literal that is safe inside a
``<script>`` element; nothing is placed in a JavaScript template literal.

This module is pure: :func:`build_map` returns the page as a string; the
pipeline writes it.
"""

from __future__ import annotations

import base64
import html
import importlib.resources
import json
import logging
import math
import re
import struct
import zlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from html.parser import HTMLParser
from typing import Any

import affine
import branca.colormap
import folium
import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import rasterio.warp
from branca.element import Element, MacroElement
from folium.template import Template
from rasterio.enums import Resampling
from shapely.geometry import box, mapping
from shapely.ops import polylabel

from .errors import CRSError, GeosoilError, InputError, SettingsError
from .units import RATE_UNITS, format_rate

__all__ = [
    "RasterLayer",
    "WebRaster",
    "build_map",
    "warp_to_web_mercator",
    "encode_png",
    "colourise",
    "ramp_colour",
    "escape_text",
    "label_point",
    "remote_references",
    "RAMPS",
    "SODICITY_BREAKS",
    "SODICITY_LABELS",
    "TILE_URL",
    "MAX_ZONE_LABELS",
]

logger = logging.getLogger(__name__)

#: ESP class limits (percent): below 6 non-sodic, 6 to 15 sodic, 15 and above strongly
#: sodic (Northcote & Skene 1972; Isbell 1996, Australian Soil Classification).
SODICITY_BREAKS: tuple[float, ...] = (6.0, 15.0)
#: Labels of the three ESP classes of :data:`SODICITY_BREAKS`.
SODICITY_LABELS: tuple[str, ...] = ("non-sodic (< 6)", "sodic (6 to 15)", "strongly sodic (≥ 15)")

#: Most zones in one product layer that are each labelled with their rate; a layer
#: with more (a spreader grid) shows the rate on hover and in the popup only.
MAX_ZONE_LABELS: int = 80

#: The optional background tiles (only named in the page when ``background_tiles=True``).
TILE_URL = "https://tile.openstreetmap.org/{z}/{x}/{y}.png"
_TILE_ATTRIBUTION = "&copy; OpenStreetMap contributors"


def _branca_hex(name: str) -> tuple[str, ...]:
    cmap = getattr(branca.colormap.linear, name)
    return tuple(
        "#{:02x}{:02x}{:02x}".format(*(round(255 * c) for c in rgba[:3])) for rgba in cmap.colors
    )


#: Colour ramps, low to high, as hex anchors spaced evenly on [0, 1]. "viridis",
#: "ylorbr", "purples" and "greys" (ColorBrewer) come from branca; "blue-orange" is our
#: own diverging
#: table (blue, near-white centre, orange), readable with red-green colour blindness.
RAMPS: Mapping[str, tuple[str, ...]] = {
    "viridis": _branca_hex("viridis"),
    "ylorbr": _branca_hex("YlOrBr_09"),
    "purples": _branca_hex("Purples_09"),
    "greys": _branca_hex("Greys_09"),
    "blue-orange": (
        "#2166ac",
        "#4393c3",
        "#92c5de",
        "#f7f7f7",
        "#fdb863",
        "#e08214",
        "#b35806",
    ),
}
_DEFAULT_RAMP = {"sequential": "viridis", "diverging": "blue-orange"}
_ZONE_RAMP = "ylorbr"
_CLASS_RAMP = "purples"

_EPSG3857 = pyproj.CRS.from_epsg(3857)
_EPSG4326 = pyproj.CRS.from_epsg(4326)
_RASTER_PANE = "geosoil-rasters"
_ZONE_PANE = "geosoil-zones"
_TOP_PANE = "geosoil-top"


# --------------------------------------------------------------------------- text


def escape_text(value: object) -> str:
    """Text made safe to place in HTML, in an attribute or inside a JavaScript string.

    ``&``, ``<``, ``>``, both quotes, the backtick, ``$``, ``\\``, ``{`` and ``}``
    become character references, so the result can be inserted as HTML content,
    as a quoted attribute value, and even inside a JavaScript template literal
    or a template engine's source without any of it being run.

    Parameters
    ----------
    value
        Anything; it is turned into text with :class:`str` first.

    Returns
    -------
    str

    Examples
    --------
    >>> escape_text("<img src=x onerror=alert(1)>")
    '&lt;img src=x onerror=alert(1)&gt;'
    >>> escape_text("${7*6}")
    '&#36;&#123;7*6&#125;'
    """
    text = html.escape(str(value), quote=True)
    for char, ref in (
        ("`", "&#96;"),
        ("$", "&#36;"),
        ("\\", "&#92;"),
        ("{", "&#123;"),
        ("}", "&#125;"),
    ):
        text = text.replace(char, ref)
    return text


def _json_for_script(value: Any) -> str:
    """JSON text that is safe inside an HTML ``<script>`` element."""
    return (
        json.dumps(value, allow_nan=False)
        .replace("<", "\\u003c")
        .replace(">", "\\u003e")
        .replace("&", "\\u0026")
        .replace("'", "\\u0027")
        .replace("`", "\\u0060")
        .replace("$", "\\u0024")
        .replace("\u2028", "\\u2028")
        .replace("\u2029", "\\u2029")
    )


def _fmt_number(value: float) -> str:
    if not math.isfinite(value):
        return "–"
    if value != 0 and (abs(value) >= 1e6 or abs(value) < 1e-3):
        return f"{value:.3g}"
    if abs(value) >= 100:
        return f"{value:,.0f}"
    return f"{value:.4g}"


def _fmt_value(value: Any) -> str:
    """A table cell as plain text (not yet escaped)."""
    if value is None:
        return "–"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return str(int(value))
    if isinstance(value, (float, np.floating)):
        return _fmt_number(float(value))
    try:
        if pd.isna(value):
            return "–"
    except (TypeError, ValueError):
        pass
    return str(value)


# --------------------------------------------------------------------------- colour


def _hex_to_rgb(code: str) -> tuple[int, int, int]:
    code = code.lstrip("#")
    return int(code[0:2], 16), int(code[2:4], 16), int(code[4:6], 16)


def _ramp_rgb(name: str, t: np.ndarray) -> np.ndarray:
    """RGB (0..255 floats, shape t.shape + (3,)) along ramp ``name`` at positions ``t``."""
    try:
        anchors = np.array([_hex_to_rgb(c) for c in RAMPS[name]], dtype=float)
    except KeyError:
        raise InputError(
            f"unknown colour ramp '{name}'", fix=f"use one of: {', '.join(RAMPS)}"
        ) from None
    pos = np.linspace(0.0, 1.0, len(anchors))
    t = np.clip(np.asarray(t, dtype=float), 0.0, 1.0)
    return np.stack([np.interp(t, pos, anchors[:, k]) for k in range(3)], axis=-1)


def ramp_colour(name: str, t: float) -> str:
    """The hex colour at position ``t`` (0 to 1, clipped) along ramp ``name``.

    Parameters
    ----------
    name : str
        Name of the colour ramp.
    t : float
        Position along it.

    Returns
    -------
    str
        Such as ``"#1a9850"``.

    Examples
    --------
    >>> ramp_colour("blue-orange", 0.5)
    '#f7f7f7'
    >>> ramp_colour("blue-orange", 0.0), ramp_colour("blue-orange", 1.0)
    ('#2166ac', '#b35806')
    """
    r, g, b = (int(round(v)) for v in _ramp_rgb(name, np.array(t)))
    return f"#{r:02x}{g:02x}{b:02x}"


# --------------------------------------------------------------------------- rasters


@dataclass(frozen=True, eq=False)
class RasterLayer:
    """One surface to draw on the map.

    Parameters
    ----------
    title
        Layer name in the switcher and the legend, e.g. ``"ESP"``.
    unit
        Unit shown in the legend, e.g. ``"%"`` or ``"cmol(+)/kg"``.
    array
        2-D float array (row 0 at the north edge); NaN is no data.
    transform
        ``affine.Affine`` of the array in ``crs`` (north-up or not).
    crs
        The array's coordinate reference system (any projected CRS).
    scheme
        ``"sequential"`` (amounts, rates, standard deviations) or
        ``"diverging"`` (around ``centre``, e.g. a target value).
    centre
        The value drawn white on a diverging scheme; required for it.
    breaks
        Optional class limits, increasing (e.g. :data:`SODICITY_BREAKS`): the
        surface is then drawn in ``len(breaks) + 1`` classes.
    class_labels
        Optional legend label of each class (``len(breaks) + 1`` of them).
    show
        Whether the layer is switched on when the page opens.
    vmin, vmax
        Optional fixed ends of the colour scale (default: the data's range).
    ramp
        Optional ramp name from :data:`RAMPS` (default by scheme).
    opacity
        Opacity of the overlay, 0 to 1.

    Examples
    --------
    >>> import numpy as np, affine, pyproj
    >>> layer = RasterLayer(title="ESP", unit="%", array=np.full((2, 2), 8.0),
    ...                     transform=affine.Affine(10, 0, 500000, 0, -10, 6200000),
    ...                     crs=pyproj.CRS.from_epsg(32755), breaks=SODICITY_BREAKS,
    ...                     class_labels=SODICITY_LABELS)
    >>> layer.n_classes
    3
    """

    title: str
    unit: str
    array: np.ndarray
    transform: affine.Affine
    crs: pyproj.CRS
    scheme: str = "sequential"
    centre: float | None = None
    breaks: tuple[float, ...] = ()
    class_labels: tuple[str, ...] = ()
    show: bool = False
    vmin: float | None = None
    vmax: float | None = None
    ramp: str | None = None
    opacity: float = 0.75

    def __post_init__(self) -> None:
        where = f"raster layer '{self.title}'"
        arr = np.asarray(self.array)
        if arr.ndim != 2 or arr.size == 0:
            raise InputError(
                f"{where}: array must be 2-D and not empty (got shape {arr.shape})",
                fix="pass one band as a (rows, columns) array",
            )
        if self.scheme not in ("sequential", "diverging"):
            raise InputError(
                f"{where}: unknown colour scheme '{self.scheme}'",
                fix="use 'sequential' or 'diverging'",
            )
        if self.scheme == "diverging" and (self.centre is None or not math.isfinite(self.centre)):
            raise InputError(f"{where}: a diverging scheme needs a centre", fix="set centre=")
        if any(b >= c for b, c in zip(self.breaks, self.breaks[1:], strict=False)):
            raise InputError(f"{where}: breaks must increase (got {self.breaks})")
        if self.class_labels and len(self.class_labels) != len(self.breaks) + 1:
            raise InputError(
                f"{where}: {len(self.breaks)} breaks need {len(self.breaks) + 1} class labels "
                f"(got {len(self.class_labels)})"
            )
        if self.ramp is not None and self.ramp not in RAMPS:
            raise InputError(
                f"{where}: unknown ramp '{self.ramp}'", fix=f"use one of: {', '.join(RAMPS)}"
            )
        if not 0.0 <= self.opacity <= 1.0:
            raise InputError(f"{where}: opacity must be from 0 to 1 (got {self.opacity})")
        try:
            crs = pyproj.CRS.from_user_input(self.crs)
        except pyproj.exceptions.CRSError as exc:
            raise CRSError(f"{where}: invalid CRS ({exc})") from None
        object.__setattr__(self, "crs", crs)
        object.__setattr__(self, "array", arr.astype(float, copy=False))

    @property
    def n_classes(self) -> int:
        """Number of classes (0 for a continuous scale)."""
        return len(self.breaks) + 1 if self.breaks else 0

    def value_range(self) -> tuple[float, float]:
        """Ends of the colour scale: ``vmin``/``vmax`` or the data's finite range."""
        finite = self.array[np.isfinite(self.array)]
        lo = self.vmin if self.vmin is not None else (float(finite.min()) if finite.size else 0.0)
        hi = self.vmax if self.vmax is not None else (float(finite.max()) if finite.size else 1.0)
        if self.scheme == "diverging":
            assert self.centre is not None
            half = max(abs(hi - self.centre), abs(lo - self.centre)) or 1.0
            return self.centre - half, self.centre + half
        return lo, hi

    def ramp_name(self) -> str:
        """The colour ramp used."""
        if self.ramp is not None:
            return self.ramp
        if self.breaks and self.scheme == "sequential":
            return _CLASS_RAMP
        return _DEFAULT_RAMP[self.scheme]

    def class_colours(self) -> tuple[str, ...]:
        """Hex colour of each class (empty for a continuous scale)."""
        n = self.n_classes
        if not n:
            return ()
        if self.scheme == "diverging":
            assert self.centre is not None
            edges = (-math.inf, *self.breaks, math.inf)
            lo, hi = self.value_range()
            colours = []
            for a, b in zip(edges, edges[1:], strict=False):
                mid = (max(a, lo) + min(b, hi)) / 2
                colours.append(ramp_colour(self.ramp_name(), (mid - lo) / ((hi - lo) or 1.0)))
            return tuple(colours)
        return tuple(ramp_colour(self.ramp_name(), t) for t in np.linspace(0.12, 0.92, n))


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
    oversample: int = 4,
    max_pixels: int = 4_000_000,
) -> WebRaster:
    """Warp a surface to EPSG:3857 (nearest cell) for drawing as an image overlay.

    The output pixels are square in EPSG:3857 and about ``1 / oversample`` of a
    source cell across on the ground (fewer when that would pass
    ``max_pixels``), so a source cell's edges land within a fraction of a cell
    of where pyproj puts them; grid convergence (the rotation between the
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
    height, width = src.shape
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
    dst = np.full((out_h, out_w), np.nan, dtype=float)
    rasterio.warp.reproject(
        source=src,
        destination=dst,
        src_transform=transform,
        src_crs=src_crs,
        src_nodata=np.nan,
        dst_transform=dst_transform,
        dst_crs=_EPSG3857,
        dst_nodata=np.nan,
        resampling=Resampling.nearest,
    )
    east, south = dst_transform @ (out_w, out_h)
    to_deg = pyproj.Transformer.from_crs(_EPSG3857, _EPSG4326, always_xy=True)
    w_deg, n_deg = to_deg.transform(wminx, wmaxy)
    e_deg, s_deg = to_deg.transform(east, south)
    logger.debug("warped %sx%s cells to %sx%s web pixels", width, height, out_w, out_h)
    return WebRaster(array=dst, transform=dst_transform, bounds_lonlat=(w_deg, s_deg, e_deg, n_deg))


def encode_png(rgba: np.ndarray) -> bytes:
    """Encode an 8-bit RGBA image (rows, columns, 4) as PNG bytes.

    Parameters
    ----------
    rgba : ndarray of uint8
        Image of shape (rows, columns, 4).

    Returns
    -------
    bytes
        The PNG file.

    Raises
    ------
    InputError
        The array is not (rows, columns, 4).

    Examples
    --------
    >>> import numpy as np
    >>> encode_png(np.zeros((2, 3, 4), dtype=np.uint8))[:8]
    b'\\x89PNG\\r\\n\\x1a\\n'
    """
    img = np.ascontiguousarray(rgba, dtype=np.uint8)
    if img.ndim != 3 or img.shape[2] != 4:
        raise InputError(f"an RGBA image needs shape (rows, columns, 4) (got {img.shape})")
    h, w, _ = img.shape
    raw = np.zeros((h, w * 4 + 1), dtype=np.uint8)
    raw[:, 1:] = img.reshape(h, w * 4)  # filter byte 0 (none) on every row

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (
            struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))
        )

    header = struct.pack(">IIBBBBB", w, h, 8, 6, 0, 0, 0)
    return (
        b"\x89PNG\r\n\x1a\n"
        + chunk(b"IHDR", header)
        + chunk(b"IDAT", zlib.compress(raw.tobytes(), 6))
        + chunk(b"IEND", b"")
    )


def colourise(values: np.ndarray, layer: RasterLayer) -> np.ndarray:
    """RGBA (uint8) image of ``values`` in ``layer``'s colour scheme; NaN is transparent.

    Parameters
    ----------
    values : ndarray
        The surface.
    layer : RasterLayer
        The layer's colour scheme and range.

    Returns
    -------
    ndarray of uint8
        Image of shape (rows, columns, 4).

    Examples
    --------
    >>> import numpy as np, affine
    >>> layer = RasterLayer(title="pH", unit="", array=np.array([[5.0, 7.0]]),
    ...                     transform=affine.Affine.identity(), crs="EPSG:32755",
    ...                     scheme="diverging", centre=6.0)
    >>> colourise(np.array([[6.0, np.nan]]), layer)[0].tolist()
    [[247, 247, 247, 255], [0, 0, 0, 0]]
    """
    v = np.asarray(values, dtype=float)
    rgba = np.zeros(v.shape + (4,), dtype=np.uint8)
    ok = np.isfinite(v)
    if layer.breaks:
        colours = np.array([_hex_to_rgb(c) for c in layer.class_colours()], dtype=np.uint8)
        idx = np.searchsorted(np.asarray(layer.breaks), v[ok], side="right")
        rgba[ok, :3] = colours[idx]
    else:
        lo, hi = layer.value_range()
        t = (v[ok] - lo) / (hi - lo) if hi > lo else np.full(v[ok].shape, 0.5)
        rgba[ok, :3] = np.round(_ramp_rgb(layer.ramp_name(), t)).astype(np.uint8)
    rgba[ok, 3] = 255
    return rgba


def _png_data_uri(rgba: np.ndarray) -> str:
    return "data:image/png;base64," + base64.b64encode(encode_png(rgba)).decode("ascii")


# --------------------------------------------------------------------------- leaflet


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


class _Verbatim(Element):
    """HTML written into the page as it is, never parsed as a template (Leaflet's own
    files, our CSS, the legend): text with braces cannot turn into template code."""

    _template = Template("{{ this.html }}")

    def __init__(self, html: str) -> None:
        super().__init__()
        self.html = html


class _Raw(MacroElement):
    """A script fragment written by this module (all values pre-encoded)."""

    _template = Template("{% macro script(this, kwargs) %}{{ this.code }}{% endmacro %}")

    def __init__(self, code: str) -> None:
        super().__init__()
        self._name = "GeosoilScript"
        self.code = code


class _Vector(MacroElement):
    """A GeoJSON geometry drawn with Leaflet's own L.geoJSON, with an optional popup
    and tooltip given as already-escaped HTML (JSON-encoded into the script)."""

    _template = Template(
        """
        {% macro script(this, kwargs) %}
        var {{ this.get_name() }} = L.geoJSON({{ this.data|tojson }}, {
            style: function () { return {{ this.style|tojson }}; },
            pane: {{ this.pane|tojson }}
        }).addTo({{ this._parent.get_name() }});
        {% if this.popup %}
        {{ this.get_name() }}.bindPopup({{ this.popup|tojson }}, {maxWidth: 360});
        {% endif %}
        {% if this.tooltip %}
        {{ this.get_name() }}.bindTooltip({{ this.tooltip|tojson }}, {sticky: true});
        {% endif %}
        {% endmacro %}
        """
    )

    def __init__(
        self,
        data: dict[str, Any],
        *,
        style: dict[str, Any],
        pane: str,
        popup: str = "",
        tooltip: str = "",
    ) -> None:
        super().__init__()
        self._name = "GeosoilVector"
        self.data = data
        self.style = style
        self.pane = pane
        self.popup = popup
        self.tooltip = tooltip


class _Label(MacroElement):
    """A permanent label (Leaflet tooltip) at a point; ``html`` is already escaped."""

    _template = Template(
        """
        {% macro script(this, kwargs) %}
        L.tooltip({permanent: true, direction: "center", interactive: false,
                   className: {{ this.css_class|tojson }}})
            .setLatLng({{ this.location|tojson }})
            .setContent({{ this.html|tojson }})
            .addTo({{ this._parent.get_name() }});
        {% endmacro %}
        """
    )

    def __init__(self, location: list[float], html_text: str, css_class: str) -> None:
        super().__init__()
        self._name = "GeosoilLabel"
        self.location = location
        self.html = html_text
        self.css_class = css_class


class _Point(MacroElement):
    """A sample point (circle marker) with a popup of already-escaped HTML."""

    _template = Template(
        """
        {% macro script(this, kwargs) %}
        L.circleMarker({{ this.location|tojson }}, {{ this.style|tojson }})
            .bindPopup({{ this.popup|tojson }}, {maxWidth: 420, className: "geosoil-sample-popup"})
            .addTo({{ this._parent.get_name() }});
        {% endmacro %}
        """
    )

    def __init__(self, location: list[float], popup: str, style: dict[str, Any]) -> None:
        super().__init__()
        self._name = "GeosoilPoint"
        self.location = location
        self.popup = popup
        self.style = style


def _round_coords(obj: Any, ndigits: int = 7) -> Any:
    if isinstance(obj, float):
        return round(obj, ndigits)
    if isinstance(obj, (list, tuple)):
        return [_round_coords(o, ndigits) for o in obj]
    if isinstance(obj, dict):
        return {k: _round_coords(v, ndigits) for k, v in obj.items()}
    return obj


def _geometry_json(geom: Any) -> dict[str, Any]:
    return _round_coords(mapping(geom))


def _to_lonlat(gdf: gpd.GeoDataFrame | None, what: str) -> gpd.GeoDataFrame | None:
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


def _require_columns(gdf: gpd.GeoDataFrame | None, columns: Sequence[str], what: str) -> None:
    if gdf is None:
        return
    missing = [c for c in columns if c not in gdf.columns]
    if missing:
        raise InputError(
            f"{what} lack the column(s) {', '.join(missing)}",
            fix=f"pass a GeoDataFrame with columns {', '.join(columns)}",
        )


def _popup_table(heading: str, rows: Sequence[tuple[str, Any]]) -> str:
    body = "".join(
        f'<tr><th scope="row">{escape_text(k)}</th><td>{escape_text(_fmt_value(v))}</td></tr>'
        for k, v in rows
    )
    return f'<div class="geosoil-popup"><h4>{escape_text(heading)}</h4><table>{body}</table></div>'


# --------------------------------------------------------------------------- legend


def _gradient_css(ramp: str) -> str:
    stops = ", ".join(f"{ramp_colour(ramp, t)} {t * 100:.0f}%" for t in np.linspace(0, 1, 11))
    return f"linear-gradient(to right, {stops})"


def _default_class_labels(breaks: Sequence[float]) -> tuple[str, ...]:
    edges = [_fmt_number(b) for b in breaks]
    middle = [f"{a} to {b}" for a, b in zip(edges, edges[1:], strict=False)]
    return (f"< {edges[0]}", *middle, f"≥ {edges[-1]}")


def _legend_raster(layer: RasterLayer) -> str:
    unit = f" ({escape_text(layer.unit)})" if layer.unit else ""
    head = f'<div class="gs-legend-title">{escape_text(layer.title)}{unit}</div>'
    if layer.breaks:
        labels = layer.class_labels or _default_class_labels(layer.breaks)
        items = "".join(
            f'<li><span class="gs-swatch" style="background:{c}"></span>{escape_text(lab)}</li>'
            for c, lab in zip(layer.class_colours(), labels, strict=False)
        )
        return head + f'<ul class="gs-classes">{items}</ul>'
    lo, hi = layer.value_range()
    if layer.scheme == "diverging":
        ticks = [(0, lo), (50, layer.centre), (100, hi)]
        target = escape_text(_fmt_number(float(layer.centre or 0)))
        note = f'<div class="gs-note">white = target {target}</div>'
    else:
        ticks = [(0, lo), (50, (lo + hi) / 2), (100, hi)]
        note = ""
    tick_html = "".join(
        f'<span style="left:{p}%">{escape_text(_fmt_number(float(v or 0)))}</span>'
        for p, v in ticks
    )
    return (
        head
        + f'<div class="gs-bar" style="background:{_gradient_css(layer.ramp_name())}"></div>'
        + f'<div class="gs-ticks">{tick_html}</div>'
        + note
    )


def _legend_zones(product: str, rates: Sequence[float], colour_of: Any, unit: str) -> str:
    head = (f'<div class="gs-legend-title">{escape_text(product)} zones '
            f"(rate, {escape_text(unit)})</div>")
    distinct = sorted({round(r, 6) for r in rates if math.isfinite(r)})
    if len(distinct) <= 10:
        items = "".join(
            f'<li><span class="gs-swatch" style="background:{colour_of(r)}"></span>'
            f"{escape_text(format_rate(r, unit))}</li>"
            for r in distinct
        )
        return head + f'<ul class="gs-classes">{items}</ul>'
    hi = max(distinct)
    ticks = "".join(
        f'<span style="left:{p}%">{escape_text(format_rate(v, unit, with_unit=False))}</span>'
        for p, v in ((0, 0.0), (100, hi))
    )
    return (
        head
        + f'<div class="gs-bar" style="background:{_gradient_css(_ZONE_RAMP)}"></div>'
        + f'<div class="gs-ticks">{ticks}</div>'
    )


_PAGE_CSS = """
.geosoil-title { position: absolute; top: 10px; left: 56px; z-index: 1000; background: #fff;
  padding: 4px 10px; border-radius: 4px; box-shadow: 0 1px 4px rgba(0,0,0,.35);
  font: 600 15px/1.3 system-ui, sans-serif; max-width: 50vw; }
.geosoil-legend { position: absolute; bottom: 56px; left: 10px; z-index: 1000; background: #fff;
  padding: 8px 10px; border-radius: 4px; box-shadow: 0 1px 4px rgba(0,0,0,.35);
  font: 12px/1.35 system-ui, sans-serif; max-height: 55vh; overflow-y: auto; width: 250px; }
.geosoil-legend h3 { margin: 0 0 4px; font-size: 13px; }
.geosoil-note { font: 400 12px/1.35 system-ui, sans-serif; margin-top: 3px; }
.gs-legend-entry { margin: 6px 0 8px; }
.gs-legend-title { font-weight: 600; margin-bottom: 3px; }
.gs-bar { height: 12px; border: 1px solid #777; }
.gs-ticks { position: relative; height: 14px; margin: 0 12px; }
.gs-ticks span { position: absolute; transform: translateX(-50%); white-space: nowrap; }
.gs-classes { list-style: none; margin: 0; padding: 0; }
.gs-classes li { margin: 1px 0; }
.gs-swatch { display: inline-block; width: 16px; height: 11px; border: 1px solid #555;
  margin-right: 6px; vertical-align: -1px; }
.gs-swatch.gs-outline { background: transparent; border: 2px solid #222; }
.gs-swatch.gs-excl { background: repeating-linear-gradient(45deg, #666 0 2px, #ddd 2px 5px); }
.gs-swatch.gs-point { width: 10px; height: 10px; border-radius: 50%; background: #fff;
  border: 2px solid #111; }
.gs-note { color: #444; font-size: 11px; }
.geosoil-zone-label { background: rgba(255,255,255,.85); border: 1px solid #888; padding: 0 3px;
  font: 600 11px/1.2 system-ui, sans-serif; box-shadow: none; }
.geosoil-paddock-label { background: transparent; border: none; box-shadow: none;
  font: 700 13px/1.2 system-ui, sans-serif; color: #111; text-shadow: 0 0 3px #fff, 0 0 3px #fff; }
.geosoil-zone-label::before, .geosoil-paddock-label::before { display: none; }
.geosoil-popup h4 { margin: 0 0 4px; font-size: 14px; }
.geosoil-popup table { border-collapse: collapse; font-size: 12px; }
.geosoil-popup th { text-align: left; padding: 1px 8px 1px 0; font-weight: 600; }
.geosoil-popup td { text-align: right; padding: 1px 0; }
.leaflet-container { background: #f2f2ee; }
"""


# --------------------------------------------------------------------------- the map


def build_map(
    *,
    title: str,
    paddocks: gpd.GeoDataFrame,
    samples: gpd.GeoDataFrame,
    rasters: Sequence[RasterLayer],
    zones: gpd.GeoDataFrame,
    exclusions: gpd.GeoDataFrame | None = None,
    background_tiles: bool = False,
    rate_unit: str = "kg/ha",
    notes: Sequence[str] = (),
) -> str:
    """The run's interactive map as one self-contained HTML page.

    Parameters
    ----------
    title
        Shown at the top of the map and as the page title.
    paddocks
        Columns ``paddock`` and geometry (polygons), any CRS: drawn as labelled outlines.
    samples
        Columns ``sample_id``, ``paddock`` and any others (lab values, derived
        figures), point geometry in any CRS. Every column but the geometry is
        listed in the point's popup.
    rasters
        The surfaces (:class:`RasterLayer`), each a layer of its own, in order.
    zones
        Columns ``paddock``, ``product``, ``zone``, ``kind``, ``rate_kg_ha``,
        ``area_ha`` and geometry (and optionally ``schedule``, shown in the
        popup): one layer per product (the first switched on), zones coloured
        by rate, with the rate on hover. A layer of at most
        :data:`MAX_ZONE_LABELS` zones also labels each zone with its rate; more
        labels (a spreader grid) would hide the map. Zones of kind ``exclusion``
        are drawn in the exclusions layer instead.
    exclusions
        Optional areas not to spread (any columns, polygon geometry). When
        ``None``, the zones of kind ``exclusion`` make up that layer.
    background_tiles
        Add an OpenStreetMap base layer (needs internet; offline it just stays blank).
    rate_unit
        Unit of the zone rates the map shows (labels, popups, legend): one of
        :data:`geosoil.units.RATE_UNITS`. The zones' ``rate_kg_ha`` stays in kg/ha.
    notes
        Lines shown under the title (escaped): that the rates are advisory, that a
        contested rule contributed, and the like.

    Returns
    -------
    str
        The HTML page. With ``background_tiles=False`` it loads nothing from the network.

    Raises
    ------
    InputError
        A table lacks a required column.
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
    if rate_unit not in RATE_UNITS:
        raise SettingsError(
            f"rate unit '{rate_unit}' is not known; use one of {', '.join(RATE_UNITS)}",
            key="rate_unit",
        )
    _require_columns(paddocks, ["paddock"], "paddocks")
    _require_columns(samples, ["sample_id"], "samples")
    _require_columns(
        zones, ["paddock", "product", "zone", "kind", "rate_kg_ha", "area_ha"], "zones"
    )
    pads = _to_lonlat(paddocks, "paddocks")
    pts = _to_lonlat(samples, "samples")
    zns = _to_lonlat(zones, "zones")
    excl = _to_lonlat(exclusions, "exclusion areas")
    if excl is None and zns is not None and len(zns):
        excl_zones = zns[zns["kind"].astype(str) == "exclusion"]
        if len(excl_zones):
            excl = gpd.GeoDataFrame(
                excl_zones[["paddock"]].copy(), geometry=excl_zones.geometry.values, crs=zns.crs
            )
            excl = excl.dissolve(by="paddock", as_index=False)

    fmap = folium.Map(
        location=[0.0, 0.0],
        zoom_start=2,
        max_zoom=22,
        tiles=None,
        control_scale=True,
        attribution_control=background_tiles,
        prefer_canvas=False,
    )
    # No CDN: Leaflet is inlined below; jQuery, Bootstrap and the icon fonts are not used.
    fmap.default_js = []
    fmap.default_css = []
    figure: Any = fmap.get_root()  # a branca Figure (header, html, title)
    figure.title = escape_text(title)
    js, css = _leaflet_assets()
    figure.header.add_child(_Verbatim(f"<style>{css}</style>"), name="leaflet_css_inline")
    figure.header.add_child(_Verbatim(f"<script>{js}</script>"), name="leaflet_js_inline")
    figure.header.add_child(_Verbatim(f"<style>{_PAGE_CSS}</style>"), name="geosoil_css")

    folium.map.CustomPane(_RASTER_PANE, z_index=350, pointer_events=False).add_to(fmap)
    folium.map.CustomPane(_ZONE_PANE, z_index=410, pointer_events=True).add_to(fmap)
    folium.map.CustomPane(_TOP_PANE, z_index=450, pointer_events=True).add_to(fmap)

    if background_tiles:
        folium.TileLayer(
            tiles=TILE_URL,
            attr=_TILE_ATTRIBUTION,
            name="Background (OpenStreetMap, needs internet)",
            overlay=False,
            control=True,
            max_zoom=19,
        ).add_to(fmap)

    registry: list[tuple[folium.FeatureGroup, str, str]] = []  # (group, title, legend html)

    # Rasters: warped to EPSG:3857, drawn as PNG overlays.
    for layer in rasters:
        web = warp_to_web_mercator(layer.array, transform=layer.transform, crs=layer.crs)
        group = folium.FeatureGroup(name=escape_text(layer.title), overlay=True, show=layer.show)
        folium.raster_layers.ImageOverlay(
            image=_png_data_uri(colourise(web.array, layer)),
            bounds=web.leaflet_bounds,
            opacity=layer.opacity,
            pixelated=True,
            pane=_RASTER_PANE,
            interactive=False,
            control=False,
        ).add_to(group)
        group.add_to(fmap)
        registry.append((group, layer.title, _legend_raster(layer)))

    # Zones: one layer per product.
    if zns is not None and len(zns):
        spread = zns[zns["kind"].astype(str) != "exclusion"]
        for i, (product, rows) in enumerate(spread.groupby("product", sort=False)):
            rates = rows["rate_kg_ha"].astype(float).to_numpy()
            top = float(np.nanmax(rates)) if np.isfinite(rates).any() else 0.0

            def colour_of(rate: float, top: float = top) -> str:
                return ramp_colour(_ZONE_RAMP, 0.08 + 0.84 * (rate / top if top > 0 else 0.0))

            name = f"{product} zones"
            group = folium.FeatureGroup(name=escape_text(name), overlay=True, show=(i == 0))
            labelled = len(rows) <= MAX_ZONE_LABELS
            for _, z in rows.iterrows():
                rate = float(z["rate_kg_ha"])
                schedule = z.get("schedule", "")
                schedule = schedule if isinstance(schedule, str) else ""
                fields = [
                    ("paddock", z["paddock"]),
                    (f"rate ({rate_unit})", format_rate(rate, rate_unit, with_unit=False)),
                ]
                if schedule:
                    fields.append(("applied as", schedule))
                fields += [("area (ha)", z["area_ha"]), ("kind", z["kind"])]
                popup = _popup_table(f"{product}: zone {_fmt_value(z['zone'])}", fields)
                hover = f"zone {_fmt_value(z['zone'])}: {format_rate(rate, rate_unit)}"
                _Vector(
                    _geometry_json(z.geometry),
                    style={
                        "color": "#333333",
                        "weight": 1,
                        "fillColor": colour_of(rate) if math.isfinite(rate) else "#cccccc",
                        "fillOpacity": 0.6,
                    },
                    pane=_ZONE_PANE,
                    popup=popup,
                    tooltip=escape_text(hover + (f" ({schedule})" if schedule else "")),
                ).add_to(group)
                if labelled:
                    anchor = label_point(z.geometry)
                    _Label(
                        [round(anchor.y, 7), round(anchor.x, 7)],
                        escape_text(format_rate(rate, rate_unit)),
                        "geosoil-zone-label",
                    ).add_to(group)
            group.add_to(fmap)
            registry.append(
                (group, name, _legend_zones(str(product), list(rates), colour_of, rate_unit))
            )

    # Exclusion areas.
    if excl is not None and len(excl):
        group = folium.FeatureGroup(name="Exclusion areas", overlay=True, show=True)
        for _, row in excl.iterrows():
            fields = [(c, row[c]) for c in excl.columns if c != excl.geometry.name]
            _Vector(
                _geometry_json(row.geometry),
                style={
                    "color": "#444444",
                    "weight": 1.5,
                    "dashArray": "4 3",
                    "fillColor": "#777777",
                    "fillOpacity": 0.55,
                },
                pane=_ZONE_PANE,
                popup=_popup_table("Exclusion area (no product)", fields),
            ).add_to(group)
        group.add_to(fmap)
        registry.append(
            (
                group,
                "Exclusion areas",
                '<div class="gs-legend-title">Exclusion areas</div><ul class="gs-classes">'
                '<li><span class="gs-swatch gs-excl"></span>not spread</li></ul>',
            )
        )

    # Paddock outlines, labelled.
    if pads is not None and len(pads):
        group = folium.FeatureGroup(name="Paddocks", overlay=True, show=True)
        for _, row in pads.iterrows():
            _Vector(
                _geometry_json(row.geometry),
                style={"color": "#111111", "weight": 2.5, "fill": False},
                pane=_TOP_PANE,
                tooltip=escape_text(row["paddock"]),
            ).add_to(group)
            anchor = _north_anchor(row.geometry)
            _Label(
                [round(anchor.y, 7), round(anchor.x, 7)],
                escape_text(row["paddock"]),
                "geosoil-paddock-label",
            ).add_to(group)
        group.add_to(fmap)
        registry.append(
            (
                group,
                "Paddocks",
                '<div class="gs-legend-title">Paddocks</div><ul class="gs-classes">'
                '<li><span class="gs-swatch gs-outline"></span>paddock boundary</li></ul>',
            )
        )

    # Sample points with their lab values.
    if pts is not None and len(pts):
        group = folium.FeatureGroup(name="Soil samples", overlay=True, show=True)
        columns = [c for c in pts.columns if c not in (pts.geometry.name, "sample_id")]
        for _, row in pts.iterrows():
            geom = row.geometry
            if geom.geom_type != "Point":
                geom = geom.representative_point()
            popup = _popup_table(
                f"Sample {_fmt_value(row['sample_id'])}", [(c, row[c]) for c in columns]
            )
            _Point(
                [round(geom.y, 7), round(geom.x, 7)],
                popup,
                {
                    "radius": 5,
                    "color": "#111111",
                    "weight": 2,
                    "fillColor": "#ffffff",
                    "fillOpacity": 1.0,
                    "pane": _TOP_PANE,
                },
            ).add_to(group)
        group.add_to(fmap)
        registry.append(
            (
                group,
                "Soil samples",
                '<div class="gs-legend-title">Soil samples</div><ul class="gs-classes">'
                '<li><span class="gs-swatch gs-point"></span>'
                "sample (click for lab values)</li></ul>",
            )
        )

    folium.LayerControl(collapsed=False, position="topright").add_to(fmap)

    # Fit the view to what is drawn.
    bounds = _view_bounds(pads, pts, zns, rasters)
    if bounds is not None:
        fmap.fit_bounds(bounds, padding=(20, 20))

    notes_html = "".join(
        f'<div class="geosoil-note">{escape_text(n)}</div>' for n in notes if str(n).strip()
    )
    # Legend and the in-page registry of layers (used by the legend and by tests).
    entries = "".join(
        f'<section class="gs-legend-entry" id="gs-legend-{i}">{legend}</section>'
        for i, (_, _, legend) in enumerate(registry)
    )
    figure.html.add_child(
        _Verbatim(
            f'<div class="geosoil-title" id="geosoil-title">{escape_text(title)}{notes_html}</div>'
            f'<div class="geosoil-legend" id="geosoil-legend" role="region" aria-label="Legend">'
            f"<h3>Legend</h3>{entries}</div>"
        ),
        name="geosoil_legend",
    )
    layer_list = ", ".join(
        f'{{title: {_json_for_script(t)}, layer: {g.get_name()}, legend: "gs-legend-{i}"}}'
        for i, (g, t, _) in enumerate(registry)
    )
    _Raw(
        "(function () {\n"
        f"  var map = {fmap.get_name()};\n"
        f"  var layers = [{layer_list}];\n"
        "  function sync() {\n"
        "    layers.forEach(function (entry) {\n"
        "      var el = document.getElementById(entry.legend);\n"
        "      if (el) { el.style.display = map.hasLayer(entry.layer) ? '' : 'none'; }\n"
        "    });\n"
        "  }\n"
        "  map.on('overlayadd overlayremove', sync);\n"
        f"  {'map.attributionControl.setPrefix(false);' if background_tiles else ''}\n"
        "  sync();\n"
        "  window.geosoilMap = {map: map, layers: layers};\n"
        "})();\n"
    ).add_to(fmap)

    page = figure.render()
    allowed = {TILE_URL} if background_tiles else set()
    remote = [u for u in remote_references(page) if u not in allowed]
    if remote:  # a folium change brought a CDN link back: never ship that
        raise GeosoilError(f"the map would load from the network: {', '.join(sorted(set(remote)))}")
    return page


def label_point(geom: Any) -> Any:
    """Where a polygon's label goes: the pole of inaccessibility of its largest part
    (the inside point farthest from the edges), so labels avoid holes and thin arms.

    Parameters
    ----------
    geom : shapely geometry
        A polygon or multipolygon.

    Returns
    -------
    shapely.Point
        The label position, inside the geometry.

    Examples
    --------
    >>> from shapely.geometry import Point, box
    >>> ring = box(0, 0, 100, 100).difference(Point(50, 50).buffer(30))
    >>> p = label_point(ring)  # clear of the hole and of the edges
    >>> ring.contains(p), min(ring.exterior.distance(p), ring.interiors[0].distance(p)) > 15
    (True, True)
    """
    parts = [
        g for g in getattr(geom, "geoms", [geom]) if g.geom_type == "Polygon" and not g.is_empty
    ]
    if not parts:
        return geom.representative_point()
    largest = max(parts, key=lambda g: g.area)
    minx, miny, maxx, maxy = largest.bounds
    tolerance = max(maxx - minx, maxy - miny) / 200 or 1e-9
    point = polylabel(largest, tolerance=tolerance)
    return point if largest.contains(point) else largest.representative_point()


def _north_anchor(geom: Any) -> Any:
    """A point inside ``geom`` near its northern edge (where a paddock's name goes,
    clear of the zone labels in the middle)."""
    minx, miny, maxx, maxy = geom.bounds
    band = geom.intersection(
        box(minx, miny + 0.8 * (maxy - miny), maxx, maxy - 0.1 * (maxy - miny))
    )
    if band.is_empty or band.area == 0:
        return geom.representative_point()
    return band.representative_point()


def _view_bounds(
    pads: gpd.GeoDataFrame | None,
    pts: gpd.GeoDataFrame | None,
    zns: gpd.GeoDataFrame | None,
    rasters: Sequence[RasterLayer],
) -> list[list[float]] | None:
    boxes = []
    for gdf in (pads, pts, zns):
        if gdf is not None and len(gdf):
            boxes.append(tuple(gdf.total_bounds))
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
