"""What the map and the report share: colour classes, escaping, number formats, labels.

One job: turn numbers into what a person sees. The web map (:mod:`geosoil.webmap`)
and the printable report (:mod:`geosoil.report`) both draw soil surfaces and rate
zones; they take their colours, class limits, legend labels, text escaping and
label positions from here, so a class reads the same in both.

Colour (Harrower & Brewer 2003; Brewer 2002, ColorBrewer 2.0; van der Walt &
Smith 2015, viridis). Every surface is drawn in *classes* with round limits, so
that a colour on the map is one row of its legend:

* pH: diverging around the acidity threshold in force (red below, blue above,
  as litmus reads), classes 0.5 pH unit wide (the precision of a field decision);
* ESP: three classes at the published sodicity limits 6 % and 15 %
  (Northcote & Skene 1972; Isbell 2016), on a blue-purple scale;
* amounts and the other saturations: sequential, viridis;
* acid and Al saturation: sequential red-purple (acid reads red, as on the pH map);
* kriging standard deviation: sequential greys;
* rates: sequential yellow-orange-brown, a family no soil surface uses.

All these schemes are listed by their authors as readable with the common forms
of colour blindness; the tests check that neighbouring classes differ in CIELAB
lightness, which every reader sees.

Escaping: :func:`escape_text` (HTML, attributes, script-embedded text) and
:func:`json_for_script` (JSON inside a ``<script>`` element). Templates use
jinja2 with autoescaping, so these are needed only where text is assembled in
Python (SVG paths, JSON data blocks).

Rasters become PNG images with GDAL's PNG driver through rasterio (in memory).

This module is pure: nothing here reads or writes files.
"""

from __future__ import annotations

import base64
import functools
import html
import json
import math
import struct
import zlib
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "PALETTES",
    "CLASS_CODES",
    "SODICITY_BREAKS",
    "SODICITY_LABELS",
    "CHANGE_CLASSES",
    "Classes",
    "change_classes",
    "class_colour_rgb",
    "classes_data_uri",
    "classes_for",
    "classes_png",
    "MAX_ZONE_LABELS",
    "colourise",
    "escape_text",
    "fmt_number",
    "fmt_value",
    "hex_to_rgb",
    "json_for_script",
    "label_point",
    "lightness",
    "nice_breaks",
    "nice_step",
    "palette_colour",
    "png_bytes",
    "png_data_uri",
    "rate_classes",
    "rate_colour",
]

#: ESP class limits (percent): below 6 non-sodic, 6 to 15 sodic, 15 and above strongly
#: sodic (Northcote & Skene 1972; Isbell 2016, The Australian Soil Classification).
SODICITY_BREAKS: tuple[float, ...] = (6.0, 15.0)
#: Labels of the three ESP classes of :data:`SODICITY_BREAKS`.
SODICITY_LABELS: tuple[str, ...] = (
    "non-sodic (< 6)", "sodic (6 to 15)", "strongly sodic (≥ 15)",
)

#: Colour scales, low to high, as hex anchors spaced evenly on [0, 1]. The values
#: are the published ones: ColorBrewer 2.0 (Brewer 2002; 9- and 11-class schemes) and
#: viridis (van der Walt & Smith 2015, sampled at 20 evenly spaced points).
PALETTES: dict[str, tuple[str, ...]] = {
    # sequential, perceptually uniform (amounts, other saturations)
    "viridis": ("#440154", "#481567", "#482677", "#453781", "#404788", "#39568c", "#33638d",
                "#2d708e", "#287d8e", "#238a8d", "#1f968b", "#20a387", "#29af7f", "#3cbb75",
                "#55c667", "#73d055", "#95d840", "#b8de29", "#dce319", "#fde725"),
    # ColorBrewer RdBu (11), reversed so that low (acid) is red and high is blue
    "red-blue": ("#67001f", "#b2182b", "#d6604d", "#f4a582", "#fddbc7", "#f7f7f7",
                 "#d1e5f0", "#92c5de", "#4393c3", "#2166ac", "#053061"),
    # ColorBrewer BuPu (9): sodicity classes
    "blue-purple": ("#f7fcfd", "#e0ecf4", "#bfd3e6", "#9ebcda", "#8c96c6", "#8c6bb1",
                    "#88419d", "#810f7c", "#4d004b"),
    # ColorBrewer RdPu (9): acid and Al saturation
    "red-purple": ("#fff7f3", "#fde0dd", "#fcc5c0", "#fa9fb5", "#f768a1", "#dd3497",
                   "#ae017e", "#7a0177", "#49006a"),
    # ColorBrewer Greys (9): kriging standard deviation
    "greys": ("#ffffff", "#f0f0f0", "#d9d9d9", "#bdbdbd", "#969696", "#737373",
              "#525252", "#252525", "#000000"),
    # ColorBrewer YlGnBu (9): electrical conductivity
    "yellow-green-blue": ("#ffffd9", "#edf8b1", "#c7e9b4", "#7fcdbb", "#41b6c4", "#1d91c0",
                          "#225ea8", "#253494", "#081d58"),
    # ColorBrewer YlOrBr (9): product rates, on the map and in the report
    "rates": ("#ffffe5", "#fff7bc", "#fee391", "#fec44f", "#fe9929", "#ec7014", "#cc4c02",
              "#993404", "#662506"),
}

#: Surfaces of class codes (0, 1, 2...): the class names, a colour each (ColorBrewer PuOr:
#: orange for salt, purple for sodium; no red-green) and a line under the legend.
CLASS_CODES: dict[str, tuple[tuple[str, ...], tuple[str, ...], str]] = {
    "salinity_class": (("normal", "saline", "sodic", "saline-sodic"),
                       ("#f7f7f7", "#fdb863", "#b2abd2", "#5e3c99"),
                       "USDA Handbook 60: saline at ECe 4 dS/m or more, sodic at ESP 15 % or more"),
    "dispersion_class": (("flocculated", "potentially dispersive", "dispersive"),
                         ("#f7f7f7", "#fdb863", "#e66101"),
                         "ESP against EC 1:5, after Rengasamy et al. 1984 (limits from memory)"),
}

#: Which palette (and which part of it) each kind of surface uses.
_SEQUENTIAL_PART = {
    "viridis": (0.0, 1.0),
    "red-purple": (0.15, 0.95),
    "greys": (0.1, 0.85),
    "yellow-green-blue": (0.1, 0.95),
    "rates": (0.1, 0.92),
    "blue-purple": (0.25, 1.0),
}
#: ESP class colours (blue-purple at 0.25, 0.65 and 1.0 along the scale).
_ESP_POSITIONS = (0.25, 0.65, 1.0)


# --------------------------------------------------------------------------- text


def escape_text(value: object) -> str:
    """Text made safe to place in HTML, in an attribute or inside a JavaScript string.

    ``&``, ``<``, ``>``, both quotes, the backtick, ``$``, ``\\``, ``{`` and ``}``
    become character references, so the result can be inserted as HTML content,
    as a quoted attribute value, or in a template's source without being run.

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
    for char, ref in (("`", "&#96;"), ("$", "&#36;"), ("\\", "&#92;"), ("{", "&#123;"),
                      ("}", "&#125;")):
        text = text.replace(char, ref)
    return text


def json_for_script(value: Any) -> str:
    """JSON text that is safe inside an HTML ``<script>`` element.

    Parameters
    ----------
    value
        Anything :func:`json.dumps` takes (no NaN).

    Returns
    -------
    str

    Examples
    --------
    >>> json_for_script({"id": "</script>"})
    '{"id": "\\\\u003c/script\\\\u003e"}'
    """
    text = json.dumps(value, allow_nan=False)
    for char, code in (("<", "\\u003c"), (">", "\\u003e"), ("&", "\\u0026"), ("'", "\\u0027"),
                       ("`", "\\u0060"), ("$", "\\u0024"), ("\u2028", "\\u2028"),
                       ("\u2029", "\\u2029")):
        text = text.replace(char, code)
    return text


def fmt_number(value: float, digits: int | None = None) -> str:
    """A number as people read it: ``digits`` decimals, or about four significant figures.

    Examples
    --------
    >>> fmt_number(5.4321, 1), fmt_number(1234.5), fmt_number(0.01234), fmt_number(float("nan"))
    ('5.4', '1,234', '0.01234', '–')
    """
    if value is None or not math.isfinite(value):
        return "–"
    if digits is not None:
        return f"{value:,.{digits}f}"
    if value != 0 and (abs(value) >= 1e6 or abs(value) < 1e-3):
        return f"{value:.3g}"
    if abs(value) >= 100:
        return f"{value:,.0f}"
    return f"{value:.4g}"


def fmt_value(value: Any, digits: int | None = None) -> str:
    """A table cell as plain text (not yet escaped): numbers, yes/no, text, ``–`` for none.

    Examples
    --------
    >>> fmt_value(True), fmt_value(None), fmt_value(3), fmt_value(2.345, 1), fmt_value("a")
    ('yes', '–', '3', '2.3', 'a')
    """
    if value is None:
        return "–"
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,}" if digits is not None else str(int(value))
    if isinstance(value, (float, np.floating)):
        return fmt_number(float(value), digits)
    try:
        import pandas as pd

        if pd.isna(value):
            return "–"
    except (TypeError, ValueError):
        pass
    return str(value)


# --------------------------------------------------------------------------- colour


def hex_to_rgb(code: str) -> tuple[int, int, int]:
    """``"#rrggbb"`` -> ``(r, g, b)``.

    Examples
    --------
    >>> hex_to_rgb("#2166ac")
    (33, 102, 172)
    """
    code = code.lstrip("#")
    return int(code[0:2], 16), int(code[2:4], 16), int(code[4:6], 16)


def lightness(colour: str) -> float:
    """CIELAB L* (0 black to 100 white) of an sRGB ``#rrggbb`` colour (CIE 1976; IEC 61966-2-1).

    Examples
    --------
    >>> round(lightness("#ffffff"), 6), round(lightness("#000000"), 6)
    (100.0, 0.0)
    """
    rgb = [c / 255 for c in hex_to_rgb(colour)]
    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
    y = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]
    return 116 * y ** (1 / 3) - 16 if y > 216 / 24389 else 24389 / 27 * y


#: Most zones in one drawing (a product layer of the map, a zone map of the report) that are
#: each labelled with their rate; a drawing with more (a spreader grid) labels none: the
#: map shows the rate on hover and in the popup, the report's table lists every zone.
#: Our choice (about as many labels as a 560-pixel drawing holds apart).
MAX_ZONE_LABELS: int = 80


@functools.lru_cache(maxsize=4096)
def palette_colour(name: str, t: float) -> str:
    """The hex colour at position ``t`` (0 to 1, clipped) along palette ``name``
    (linear in sRGB between its anchors).

    Examples
    --------
    >>> palette_colour("red-blue", 0.5), palette_colour("rates", 0.0)
    ('#f7f7f7', '#ffffe5')
    """
    anchors = np.array([hex_to_rgb(c) for c in PALETTES[name]], dtype=float)
    pos = np.linspace(0.0, 1.0, len(anchors))
    t = min(max(float(t), 0.0), 1.0)
    r, g, b = (int(round(float(np.interp(t, pos, anchors[:, k])))) for k in range(3))
    return f"#{r:02x}{g:02x}{b:02x}"


def _sequential(name: str, n: int) -> tuple[str, ...]:
    lo, hi = _SEQUENTIAL_PART[name]
    if n == 1:
        return (palette_colour(name, (lo + hi) / 2),)
    return tuple(palette_colour(name, t) for t in np.linspace(lo, hi, n))


@dataclass(frozen=True)
class Classes:
    """How a surface is coloured: class limits, a colour and a legend label per class.

    A value ``v`` falls in class ``i`` where ``breaks[i - 1] <= v < breaks[i]``:
    a limit belongs to the class above it (ESP 6.0 is sodic).

    Parameters
    ----------
    breaks
        Increasing class limits (``n - 1`` of them for ``n`` classes).
    colours
        ``#rrggbb`` of each class, low to high.
    labels
        Legend text of each class.
    note
        One line under the legend (e.g. what white means).

    Examples
    --------
    >>> c = classes_for("esp", np.array([2.0, 20.0]))
    >>> c.labels[1], c.index(np.array([5.99, 6.0, 15.0])).tolist()
    ('sodic (6 to 15)', [0, 1, 2])
    """

    breaks: tuple[float, ...]
    colours: tuple[str, ...]
    labels: tuple[str, ...]
    note: str = ""

    def __post_init__(self) -> None:
        if len(self.colours) != len(self.breaks) + 1 or len(self.labels) != len(self.colours):
            raise ValueError(
                f"{len(self.breaks)} class limits need {len(self.breaks) + 1} colours and "
                f"labels (got {len(self.colours)} and {len(self.labels)})"
            )
        if any(b >= c for b, c in zip(self.breaks, self.breaks[1:], strict=False)):
            raise ValueError(f"class limits must increase (got {self.breaks})")

    def index(self, values: np.ndarray) -> np.ndarray:
        """Class of each value (NaN gives -1)."""
        v = np.asarray(values, dtype=float)
        out = np.searchsorted(np.asarray(self.breaks, dtype=float), v, side="right")
        return np.where(np.isfinite(v), out, -1)

    def legend(self) -> list[dict[str, str]]:
        """``[{"colour", "label"}]`` low to high, for a legend."""
        return [{"colour": c, "label": lab} for c, lab in zip(self.colours, self.labels,
                                                                  strict=True)]


def nice_step(span: float, target: int = 5) -> float:
    """A round class width (1, 2, 2.5 or 5 x 10^k) giving about ``target`` classes over ``span``.

    Examples
    --------
    >>> nice_step(10.0), nice_step(0.37), nice_step(0.0)
    (2.0, 0.1, 1.0)
    """
    if not (span > 0 and math.isfinite(span)):
        return 1.0
    raw = span / target
    base = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 2.5, 5, 10):
        if raw <= m * base * (1 + 1e-9):
            return float(m * base)
    return float(10 * base)


def _decimals(step: float) -> int:
    """Decimals that show a multiple of ``step`` exactly (2.5 -> 1, 0.25 -> 2, 5 -> 0)."""
    for d in range(0, 7):
        if abs(round(step * 10**d) - step * 10**d) < 1e-6:
            return d
    return 6


def nice_breaks(lo: float, hi: float, *, target: int = 5, floor: float | None = None
                ) -> tuple[float, ...]:
    """Round class limits strictly inside ``(lo, hi)`` (at most about ``target + 1`` classes).

    Parameters
    ----------
    lo, hi
        The data's range.
    target
        About how many classes.
    floor
        Limits below it are dropped (0 for amounts).

    Returns
    -------
    tuple of float

    Examples
    --------
    >>> nice_breaks(0.3, 9.6)
    (2.0, 4.0, 6.0, 8.0)
    >>> nice_breaks(5.0, 5.0)
    ()
    """
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return ()
    step = nice_step(hi - lo, target)
    d = _decimals(step) + 1
    first = math.floor(lo / step) + 1
    out: list[float] = []
    k = first
    while k * step < hi - 1e-12 and len(out) < 4 * target:
        b = round(k * step, d)
        if b > lo and (floor is None or b >= floor):
            out.append(b)
        k += 1
    return tuple(out)


def _range_labels(breaks: Sequence[float], digits: int, unit: str = "") -> tuple[str, ...]:
    edges = [f"{b:,.{digits}f}" for b in breaks]
    if not edges:
        return ("all values",)
    middle = [f"{a} to {b}" for a, b in zip(edges, edges[1:], strict=False)]
    return (f"< {edges[0]}", *middle, f"≥ {edges[-1]}")


def _finite(values: np.ndarray) -> np.ndarray:
    v = np.asarray(values, dtype=float)
    return v[np.isfinite(v)]


def classes_for(kind: str, values: np.ndarray, *, target: float | None = None,
                step: float | None = None,
                limits: tuple[float, ...] = SODICITY_BREAKS) -> Classes:
    """The colour classes of one surface, chosen by what it means.

    Parameters
    ----------
    kind
        ``"esp"`` (sodicity classes), ``"ph"`` (diverging around ``target``),
        ``"acid"`` (acid or Al saturation), ``"ec"``, ``"error"`` (kriging standard
        deviation), ``"rate"``, or anything else for an amount (sequential).
    values
        The surface (NaN = none); sets the range of the round limits.
    target
        ``ph``: the value between the red and the blue classes (the acidity threshold).
    step
        ``ph``: class width (default 0.5 pH unit).
    limits
        ``esp``: the sodic and strongly sodic limits (default :data:`SODICITY_BREAKS`).

    Returns
    -------
    Classes

    Examples
    --------
    >>> c = classes_for("ph", np.array([4.6, 6.3]), target=5.5)
    >>> c.breaks
    (5.0, 5.5, 6.0)
    >>> c.colours[1], c.colours[2]  # either side of the threshold: light red, light blue
    ('#fddbc7', '#d1e5f0')
    """
    v = _finite(values)
    lo, hi = (float(v.min()), float(v.max())) if v.size else (0.0, 1.0)
    if kind in CLASS_CODES:
        names, colours, note = CLASS_CODES[kind]
        return Classes(tuple(i + 0.5 for i in range(len(names) - 1)), colours, names, note)
    if kind == "esp":
        colours = tuple(palette_colour("blue-purple", t) for t in _ESP_POSITIONS)
        if tuple(limits) == SODICITY_BREAKS:
            return Classes(SODICITY_BREAKS, colours, SODICITY_LABELS)
        a, b = (fmt_number(float(x)) for x in limits)
        return Classes(tuple(float(x) for x in limits), colours,
                       (f"non-sodic (< {a})", f"sodic ({a} to {b})", f"strongly sodic (≥ {b})"))
    if kind == "ph":
        if target is None or not math.isfinite(target):
            raise ValueError("pH classes need the target (acidity threshold)")
        width = step or 0.5
        reds = PALETTES["red-blue"][4::-1]  # light to dark red
        blues = PALETTES["red-blue"][6:]  # light to dark blue
        below = min(5, max(1, math.ceil((target - lo) / width - 1e-9)))
        above = min(5, max(1, math.ceil((hi - target) / width + 1e-9)))
        if lo >= target:
            below = 0
        if hi < target:
            above = 0
        below_breaks = [round(target - k * width, 3) for k in range(below - 1, 0, -1)]
        above_breaks = [round(target + k * width, 3) for k in range(1, above)]
        breaks = tuple([*below_breaks, target, *above_breaks]) if below and above else (
            tuple(below_breaks) if below else tuple(above_breaks))
        colours = tuple(reds[:below][::-1]) + tuple(blues[:above])
        d = _decimals(width)
        labels = _range_labels(breaks, d)
        if len(colours) == 1:
            labels = (f"< {target:.{d}f}",) if below else (f"≥ {target:.{d}f}",)
        note = f"red: below {target:.{d}f} (acid); blue: at or above it"
        return Classes(breaks, colours, labels, note)
    palette = {"acid": "red-purple", "ec": "yellow-green-blue", "error": "greys",
               "rate": "rates"}.get(kind, "viridis")
    floor = 0.0 if lo >= 0 else None
    breaks = nice_breaks(lo, hi, target=5, floor=floor)
    if kind in ("acid",) and breaks and breaks[-1] > 100:
        breaks = tuple(b for b in breaks if b <= 100)
    step_used = (breaks[1] - breaks[0]) if len(breaks) > 1 else nice_step(hi - lo)
    digits = _decimals(round(step_used, 6))
    return Classes(breaks, _sequential(palette, len(breaks) + 1), _range_labels(breaks, digits))


def rate_colour(rate: float, top: float) -> str:
    """Colour of a rate on the rate scale that ends at ``top`` (same scale in map and report).

    Examples
    --------
    >>> rate_colour(0.0, 1000.0) == palette_colour("rates", 0.1)
    True
    """
    lo, hi = _SEQUENTIAL_PART["rates"]
    if not math.isfinite(rate):
        return "#cccccc"
    return palette_colour("rates", lo + (hi - lo) * (rate / top if top > 0 else 0.0))


def rate_classes(rates: Sequence[float], *, fmt: Any = None) -> Classes:
    """Classes of a product's zone rates: one per distinct rate (up to 10), else round limits.

    ``fmt`` turns a rate (kg/ha) into its label (default: the number).

    Examples
    --------
    >>> rate_classes([0.0, 1500.0, 3000.0]).labels
    ('0', '1,500', '3,000')
    """
    fmt = fmt or (lambda r: fmt_number(r))
    distinct = sorted({round(float(r), 6) for r in rates if math.isfinite(float(r))})
    if not distinct:
        return Classes((), ("#cccccc",), ("no rate",))
    top = distinct[-1]
    if len(distinct) <= 10:
        breaks = tuple((a + b) / 2 for a, b in zip(distinct, distinct[1:], strict=False))
        return Classes(breaks, tuple(rate_colour(r, top) for r in distinct),
                       tuple(fmt(r) for r in distinct))
    breaks = nice_breaks(distinct[0], top, target=6, floor=0.0)
    mids = [breaks[0] / 2] + [(a + b) / 2 for a, b in zip(breaks, breaks[1:], strict=False)] + [
        (breaks[-1] + top) / 2] if breaks else [top / 2]
    labels = (f"< {fmt(breaks[0])}",
              *(f"{fmt(a)} to {fmt(b)}" for a, b in zip(breaks, breaks[1:], strict=False)),
              f"≥ {fmt(breaks[-1])}") if breaks else (fmt(top),)
    return Classes(breaks, tuple(rate_colour(m, top) for m in mids), labels)


def class_colour_rgb(classes: Classes) -> np.ndarray:
    """The class colours as an ``(n, 3)`` uint8 array."""
    return np.array([hex_to_rgb(c) for c in classes.colours], dtype=np.uint8)


def colourise(values: np.ndarray, classes: Classes) -> np.ndarray:
    """RGBA (uint8, shape ``values.shape + (4,)``) of ``values`` in ``classes``; NaN is clear.

    Examples
    --------
    >>> c = classes_for("esp", np.array([1.0]))
    >>> colourise(np.array([[3.0, np.nan]]), c)[0, :, 3].tolist()
    [255, 0]
    """
    v = np.asarray(values, dtype=float)
    idx = classes.index(v)
    rgba = np.zeros(v.shape + (4,), dtype=np.uint8)
    ok = idx >= 0
    rgba[ok, :3] = class_colour_rgb(classes)[idx[ok]]
    rgba[ok, 3] = 255
    return rgba


# --------------------------------------------------------------------------- images


#: zlib level of the PNG images (6: zlib's default; GDAL's PNG driver wrote the same sizes).
PNG_ZLEVEL = 6


def _png_file(pixels: np.ndarray, colour_type: int,
              chunks: Sequence[tuple[bytes, bytes]] = ()) -> bytes:
    """A PNG file (ISO/IEC 15948, the W3C PNG specification) of 8-bit ``pixels`` (rows,
    columns) or (rows, columns, channels): ``colour_type`` 3 (palette indices) or 6 (RGBA);
    ``chunks`` (type, data) between the header and the image data (PLTE, tRNS).

    Written here with zlib, not through GDAL's PNG driver: each image drawn cost 3 ms
    there (an in-memory dataset per image) and 0.4 ms here, with a map of 30 surfaces
    drawn on every run. The tests read these files back with GDAL.
    """
    h, w = pixels.shape[:2]
    rows = np.ascontiguousarray(pixels, dtype=np.uint8).reshape(h, -1)
    raw = np.zeros((h, rows.shape[1] + 1), dtype=np.uint8)  # filter type 0 (none) a row
    raw[:, 1:] = rows

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (struct.pack(">I", len(data)) + kind + data
                + struct.pack(">I", zlib.crc32(kind + data)))

    header = struct.pack(">IIBBBBB", w, h, 8, colour_type, 0, 0, 0)
    return b"".join([b"\x89PNG\r\n\x1a\n", chunk(b"IHDR", header),
                     *(chunk(kind, data) for kind, data in chunks),
                     chunk(b"IDAT", zlib.compress(raw.tobytes(), PNG_ZLEVEL)),
                     chunk(b"IEND", b"")])


def png_bytes(rgba: np.ndarray) -> bytes:
    """An 8-bit RGBA image (rows, columns, 4) as PNG bytes.

    Examples
    --------
    >>> png_bytes(np.zeros((2, 3, 4), dtype=np.uint8))[:8]
    b'\\x89PNG\\r\\n\\x1a\\n'
    """
    img = np.asarray(rgba)
    if img.ndim != 3 or img.shape[2] != 4 or 0 in img.shape:
        raise ValueError(f"an RGBA image needs shape (rows, columns, 4) (got {img.shape})")
    return _png_file(img, 6)


def classes_png(values: np.ndarray, classes: Classes) -> bytes:
    """A surface drawn in its classes as a paletted PNG (one byte a pixel, a colour per
    class, no data transparent).

    Examples
    --------
    >>> c = classes_for("esp", np.array([1.0]))
    >>> classes_png(np.array([[3.0, np.nan]]), c)[:8]
    b'\\x89PNG\\r\\n\\x1a\\n'
    """
    idx = classes.index(np.asarray(values, dtype=float))
    if idx.ndim != 2 or 0 in idx.shape:
        raise ValueError(f"a surface needs shape (rows, columns) (got {idx.shape})")
    if len(classes.colours) > 254:
        raise ValueError("at most 254 classes fit a paletted PNG")
    band = (idx + 1).astype(np.uint8)  # 0 = no data
    palette = bytes(3) + b"".join(bytes(hex_to_rgb(c)) for c in classes.colours)
    # entry 0 transparent; entries without a tRNS value are opaque
    return _png_file(band, 3, [(b"PLTE", palette), (b"tRNS", b"\x00")])


def point_xy(geoms: np.ndarray) -> np.ndarray:
    """(n, 2) coordinates where the map and the report draw each geometry's dot: a point
    as it is, anything else at a point on its surface.

    Examples
    --------
    >>> import shapely
    >>> point_xy(np.array([shapely.Point(1, 2), shapely.box(0, 0, 2, 2)])).tolist()
    [[1.0, 2.0], [1.0, 1.0]]
    """
    import shapely

    not_point = np.flatnonzero(shapely.get_type_id(geoms) != 0)
    if not_point.size:
        geoms = geoms.copy()
        geoms[not_point] = shapely.point_on_surface(geoms[not_point])
    return shapely.get_coordinates(geoms)


def classes_data_uri(values: np.ndarray, classes: Classes) -> str:
    """``data:image/png;base64,...`` of :func:`classes_png`."""
    return "data:image/png;base64," + base64.b64encode(classes_png(values, classes)).decode(
        "ascii")


def png_data_uri(rgba: np.ndarray) -> str:
    """``data:image/png;base64,...`` of an RGBA image (see :func:`png_bytes`)."""
    return "data:image/png;base64," + base64.b64encode(png_bytes(rgba)).decode("ascii")


# --------------------------------------------------------------------------- labels


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
    from shapely.ops import polylabel

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


#: Colours and labels of the change classes, by class code (-1 fell, 0 no change beyond
#: error, 1 rose, 2 no error surface): see :data:`geosoil.change.CLASS_CODES`.
CHANGE_CLASSES = Classes(
    (-0.5, 0.5, 1.5),
    ("#d6604d", "#f7f7f7", "#4393c3", "#969696"),
    ("fell beyond its error", "no change beyond error", "rose beyond its error",
     "no error surface (not judged)"),
    "a change counts where it is larger than 1.96 times its standard deviation",
)


def change_classes(values: np.ndarray, unit: str = "") -> Classes:
    """Diverging classes of a change, even about zero: red where it fell, blue where it rose.

    The middle class holds the changes nearer zero than one class width.

    Examples
    --------
    >>> c = change_classes(np.array([-1.7, 0.2, 0.9]))
    >>> c.breaks
    (-1.25, -0.75, -0.25, 0.25, 0.75, 1.25)
    >>> c.colours[3], c.index(np.array([-0.1, 0.3])).tolist()
    ('#f7f7f7', [3, 4])
    """
    v = _finite(values)
    top = float(np.abs(v).max()) if v.size else 1.0
    step = nice_step(2 * top, 7) if top > 0 else 1.0
    k = max(1, math.ceil(top / step - 0.5 - 1e-9))
    while k > 5:
        step = nice_step(2 * step * k, 5) if step * k > 0 else step * 2
        k = max(1, math.ceil(top / step - 0.5 - 1e-9))
    half = step / 2
    ups = [round(half + i * step, 9) for i in range(k)]
    breaks = tuple([-b for b in reversed(ups)] + ups)
    reds = PALETTES["red-blue"][1:5]  # dark to light red
    blues = PALETTES["red-blue"][6:10]  # light to dark blue
    colours = tuple(reds[4 - k:]) + ("#f7f7f7",) + tuple(blues[:k])
    d = _decimals(round(half, 6))
    labels = _range_labels(breaks, d, unit)
    return Classes(breaks, colours, labels, "red: fell; blue: rose; white: about no change")
