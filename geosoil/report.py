"""The printable report of a run: one static HTML page that prints cleanly to PDF.

The page carries no script and loads nothing: its zone maps and variogram
plots are SVG drawn here from shapely geometries and numbers, and its print
CSS sets A4 pages, page breaks before each paddock and the larger sections,
repeated table headers and page numbers. Open it in any browser and print to
PDF.

It holds, in order: cautions; farm totals; per paddock and product, the zone
map and the tonnage table (with the paddock's sample density); per surface,
the variogram plot (empirical points and fitted model) and a cross-validation
table for all surfaces; where the interpolation is least certain; sample
density; assumptions, and the methods with their citations; the warnings the
run raised; provenance (input files with SHA-256 checksums, settings, software
versions).

Rates are shown in :attr:`ReportInput.rate_unit` (kg/ha, t/ha or lb/ac) in
the tonnage tables and the zone-map labels; the tables it is given stay in
kg/ha.

Every string from the user's files or settings is escaped with
:func:`geosoil.webmap.escape_text`.

This module is pure: :func:`build_report` returns the page as a string; the
pipeline writes it.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd

from .errors import GeosoilError, InputError, SettingsError
from .presentation import escape_text, label_point
from .presentation import palette_colour as _pc
from .units import RATE_UNITS, format_rate


def ramp_colour(name: str, t: float) -> str:  # temporary: report moves to templates
    return _pc("rates", t)

__all__ = [
    "CAUTIONS",
    "Provenance",
    "ReportInput",
    "SampleDensity",
    "UncertaintySummary",
    "VariogramInfo",
    "build_report",
    "variogram_svg",
    "zone_map_svg",
]

logger = logging.getLogger(__name__)

#: Cautions printed at the top of every report (callers may pass their own list).
CAUTIONS: tuple[str, ...] = (
    "Rates are advisory. They come from models, interpolated samples and published rules, "
    "each with its own error. Have every prescription confirmed by a qualified agronomist "
    "before it is spread.",
    "Follow local regulations and codes of practice, including limits on application rates "
    "and buffers to waterways, drains, wells and sensitive areas. Where a local code differs "
    "from these settings, the local code prevails.",
    "Follow the product's handling advice and safety data sheet: quicklime and hydrated lime are "
    "caustic; lime and gypsum dusts irritate eyes and lungs.",
    "Split large rates over several passes or seasons, and re-test the soil every year before the "
    "next application.",
    "Gypsum reclaims a sodic soil only where there is enough water to leach the sodium and "
    "the soil drains. Lime is not for alkaline soils (pH above about 7).",
)

_TONNAGE_COLUMNS = (
    "paddock",
    "product",
    "zone",
    "level",
    "area_ha",
    "rate_kg_ha",
    "tonnes",
    "truckloads",
    "cost",
)
_ZONE_RAMP = "ylorbr"  # the same ramp the web map uses for zones


# --------------------------------------------------------------------------- inputs


@dataclass(frozen=True)
class VariogramInfo:
    """How one surface was made, for the variogram plot and the cross-validation table.

    Parameters
    ----------
    variable
        The surface, e.g. ``"esp"`` or ``"ca"``.
    paddock
        The paddock's name, or ``"farm"`` for a farm-wide fit.
    method
        ``"ordinary kriging"``, ``"inverse-distance weighting"``, ``"zone values"``...
    unit
        Unit of the variable (semivariance is in unit squared).
    model
        Variogram model name (``spherical``, ``exponential``, ``gaussian``,
        ``matern``...), or None when no variogram was fitted.
    nugget, psill, range_m
        Fitted nugget, partial sill and practical range (metres), as in
        :class:`geosoil.variogram.VariogramModel`.
    nu
        Matérn smoothness (``matern`` only).
    lags, gamma, counts
        Empirical variogram: lag distances (m), semivariances and pair counts.
    cv_mean_error, cv_rmse, cv_msse
        Leave-one-out cross-validation: mean error (ideal 0), root-mean-square
        error, mean squared standardised error (ideal 1; kriging only).
    n_samples
        Samples behind the surface.
    curve
        Optional ``((h, gamma), ...)`` of the fitted model. When empty, the
        curve is drawn from ``model``, ``nugget``, ``psill``, ``range_m`` and
        ``nu`` with :meth:`geosoil.variogram.VariogramModel.semivariance`.
    note
        One line on how the variogram was chosen (e.g. "fitted on the farm's samples").
    """

    variable: str
    paddock: str
    method: str
    unit: str = ""
    model: str | None = None
    nugget: float | None = None
    psill: float | None = None
    range_m: float | None = None
    nu: float | None = None
    lags: tuple[float, ...] = ()
    gamma: tuple[float, ...] = ()
    counts: tuple[int, ...] = ()
    cv_mean_error: float | None = None
    cv_rmse: float | None = None
    cv_msse: float | None = None
    n_samples: int | None = None
    curve: tuple[tuple[float, float], ...] = ()
    note: str = ""

    def __post_init__(self) -> None:
        if len(self.lags) != len(self.gamma) or (
            self.counts and len(self.counts) != len(self.lags)
        ):
            raise InputError(
                f"variogram of '{self.variable}' ({self.paddock}): lags, gamma and counts "
                f"differ in length ({len(self.lags)}, {len(self.gamma)}, {len(self.counts)})"
            )


@dataclass(frozen=True)
class UncertaintySummary:
    """Where a surface is least certain.

    Parameters
    ----------
    variable, paddock, unit
        Which surface (``paddock`` may be ``"farm"``).
    sd_threshold
        The kriging standard deviation counted as "uncertain" (in ``unit``).
    share_above
        Share of the area whose standard deviation exceeds ``sd_threshold`` (0 to 1).
    sd_max
        Largest standard deviation over the area.
    sd_mean
        Optional area-mean standard deviation.
    """

    variable: str
    paddock: str
    unit: str
    sd_threshold: float
    share_above: float
    sd_max: float
    sd_mean: float | None = None

    def __post_init__(self) -> None:
        if not 0.0 <= self.share_above <= 1.0:
            raise InputError(
                f"uncertainty of '{self.variable}' ({self.paddock}): share_above must be "
                f"from 0 to 1 (got {self.share_above})",
                fix="give the share as a fraction, not a percentage",
            )


@dataclass(frozen=True)
class SampleDensity:
    """Samples per paddock.

    Examples
    --------
    >>> SampleDensity(paddock="North", samples=12, area_ha=48.0).per_ha
    0.25
    """

    paddock: str
    samples: int
    area_ha: float

    @property
    def per_ha(self) -> float:
        """Samples per hectare (NaN for a paddock of no area)."""
        return self.samples / self.area_ha if self.area_ha > 0 else math.nan

    @property
    def ha_per_sample(self) -> float:
        """Hectares per sample (NaN without samples)."""
        return self.area_ha / self.samples if self.samples > 0 else math.nan


@dataclass(frozen=True)
class Provenance:
    """What the run was made from.

    Parameters
    ----------
    inputs
        ``((path, sha256 hex digest), ...)`` of every input file.
    settings_toml
        The settings in force, as TOML text.
    versions
        Software name -> version (geosoil, numpy, rasterio, GDAL, PROJ...).
    """

    inputs: tuple[tuple[str, str], ...] = ()
    settings_toml: str = ""
    versions: Mapping[str, str] = field(default_factory=dict)


@dataclass(frozen=True, eq=False)
class ReportInput:
    """Everything the report shows.

    Parameters
    ----------
    title
        Report title (e.g. the farm's name and season).
    created
        When the run was made (shown as ISO 8601).
    tonnage
        Columns ``paddock, product, zone, level, area_ha, rate_kg_ha, tonnes,
        truckloads, cost``; ``level`` is ``"zone"`` for zone rows, ``"paddock"``
        for a paddock's total of one product and ``"farm"`` for the farm's
        total of one product. ``cost`` may be NaN (no price given).
    zones
        Zones GeoDataFrame (``paddock, product, zone, kind, rate_kg_ha,
        area_ha``, geometry in a projected CRS in metres). An optional
        ``schedule`` column (``"2 seasons of 1.0 t/ha"``, empty for one pass)
        adds an "applied as" column to a product's zone table when a zone is split.
    paddocks
        ``paddock`` and geometry, same CRS as ``zones``.
    variograms
        One :class:`VariogramInfo` per surface (and paddock).
    uncertainty
        One :class:`UncertaintySummary` per kriged surface.
    density
        One :class:`SampleDensity` per paddock.
    assumptions
        Label -> value text (depth, bulk density, product analysis, targets...).
    methods
        ``((rule or method, citation), ...)``.
    warnings
        Every warning the run raised, as text.
    provenance
        :class:`Provenance`.
    cautions
        The cautions box (default :data:`CAUTIONS`).
    rate_unit
        Unit of the rates shown (tonnage tables, zone-map labels): one of
        :data:`geosoil.units.RATE_UNITS`. ``tonnage`` and ``zones`` stay in kg/ha.
        With lb/ac the amounts are shown in short tons (column ``short_tons``).
    currency
        Currency code shown in the cost headers ("" for none).
    """

    title: str
    created: datetime
    tonnage: pd.DataFrame
    zones: gpd.GeoDataFrame
    paddocks: gpd.GeoDataFrame
    variograms: Sequence[VariogramInfo] = ()
    uncertainty: Sequence[UncertaintySummary] = ()
    density: Sequence[SampleDensity] = ()
    assumptions: Mapping[str, str] = field(default_factory=dict)
    methods: Sequence[tuple[str, str]] = ()
    warnings: Sequence[str] = ()
    provenance: Provenance = field(default_factory=Provenance)
    cautions: Sequence[str] = CAUTIONS
    rate_unit: str = "kg/ha"
    currency: str = ""

    def __post_init__(self) -> None:
        if self.rate_unit not in RATE_UNITS:
            raise SettingsError(
                f"rate unit '{self.rate_unit}' is not known; use one of {', '.join(RATE_UNITS)}",
                key="rate_unit",
            )
        missing = [c for c in _TONNAGE_COLUMNS if c not in self.tonnage.columns]
        if missing:
            raise InputError(
                f"the tonnage table lacks the column(s) {', '.join(missing)}",
                fix=f"pass a table with columns {', '.join(_TONNAGE_COLUMNS)}",
            )
        for what, gdf, cols in (
            ("zones", self.zones, ("paddock", "product", "zone", "kind", "rate_kg_ha", "area_ha")),
            ("paddocks", self.paddocks, ("paddock",)),
        ):
            lack = [c for c in cols if c not in gdf.columns]
            if lack:
                raise InputError(f"{what} lack the column(s) {', '.join(lack)}")


# --------------------------------------------------------------------------- formatting


def _t(value: object) -> str:
    """Escaped text of a value."""
    return escape_text(value)


def _isnan(value: Any) -> bool:
    try:
        return value is None or bool(pd.isna(value))
    except (TypeError, ValueError):
        return False


def _num(value: Any, digits: int = 2, *, thousands: bool = True) -> str:
    if _isnan(value):
        return "–"
    try:
        v = float(value)
    except (TypeError, ValueError):
        return _t(value)
    if not math.isfinite(v):
        return "–"
    if v != 0 and abs(v) < 10 ** (-digits):
        return f"{v:.2g}"
    return f"{v:,.{digits}f}" if thousands else f"{v:.{digits}f}"


def _sig(value: Any, sig: int = 3) -> str:
    if _isnan(value):
        return "–"
    v = float(value)
    if not math.isfinite(v):
        return "–"
    if v == 0:
        return "0"
    if abs(v) >= 10**sig:
        return f"{v:,.0f}"
    return f"{v:.{sig}g}"


def _rate_text(rate: float, unit: str, *, with_unit: bool = True) -> str:
    if _isnan(rate):
        return "–"
    return format_rate(float(rate), unit, with_unit=with_unit)


def _zone_label(value: Any) -> str:
    if _isnan(value):
        return "–"
    if isinstance(value, (float, np.floating)) and float(value).is_integer():
        return str(int(value))
    return str(value)


def _nice_step(span: float, target_ticks: int = 5) -> float:
    if not (span > 0 and math.isfinite(span)):
        return 1.0
    raw = span / target_ticks
    base = 10 ** math.floor(math.log10(raw))
    for m in (1, 2, 2.5, 5, 10):
        if raw <= m * base:
            return m * base
    return 10 * base


def _nice_max(value: float) -> float:
    step = _nice_step(value)
    return step * math.ceil(value / step) if value > 0 else 1.0


# --------------------------------------------------------------------------- variograms


def _model_curve(info: VariogramInfo, top_h: float) -> tuple[np.ndarray, np.ndarray] | None:
    """The fitted model's semivariance from just beyond 0 to ``top_h`` (None if unknown)."""
    if info.curve:
        arr = np.asarray(info.curve, dtype=float)
        return arr[:, 0], arr[:, 1]
    if not info.model or info.nugget is None or info.psill is None or not info.range_m:
        return None
    from .variogram import VariogramModel  # the same model the kriging used

    try:
        model = VariogramModel(
            name=info.model, nugget=info.nugget, psill=info.psill, range=info.range_m, nu=info.nu
        )
    except GeosoilError as exc:
        logger.warning("variogram of %s (%s) not drawn: %s", info.variable, info.paddock, exc)
        return None
    h = np.linspace(0.0, top_h, 161)
    h[0] = top_h * 1e-6  # the curve as plotted starts at the nugget, not at gamma(0) = 0
    return h, np.asarray(model.semivariance(h), dtype=float)


def _axis_ticks(top: float) -> list[float]:
    step = _nice_step(top)
    n = int(round(top / step))
    return [i * step for i in range(n + 1)]


def variogram_svg(info: VariogramInfo, *, width: int = 440, height: int = 270) -> str:
    """SVG plot of one variogram: empirical points (area ~ pair count) and the model curve.

    Returns a short note instead of a plot when the surface had no variogram.

    Parameters
    ----------
    info : VariogramInfo
        The surface's fitted model and empirical semivariogram.
    width, height : int, optional
        Size in CSS pixels.

    Returns
    -------
    str
        The SVG markup, or the note.

    Examples
    --------
    >>> info = VariogramInfo(variable="esp", paddock="North", method="ordinary kriging", unit="%",
    ...                      model="spherical", nugget=1.0, psill=4.0, range_m=150.0,
    ...                      lags=(25.0, 75.0, 125.0, 175.0), gamma=(1.8, 3.9, 4.8, 5.1),
    ...                      counts=(30, 60, 70, 40))
    >>> svg = variogram_svg(info)
    >>> svg.startswith("<svg"), svg.count('class="vg-point"'), svg.count('class="vg-model"')
    (True, 4, 1)
    """
    if not info.lags:
        return (
            f'<p class="no-variogram">No variogram: this surface was made by {_t(info.method)}.</p>'
        )
    lags = np.asarray(info.lags, dtype=float)
    gam = np.asarray(info.gamma, dtype=float)
    ok = np.isfinite(lags) & np.isfinite(gam)
    top_h = max(float(lags[ok].max()) if ok.any() else 0.0, 1.15 * float(info.range_m or 0.0))
    curve = _model_curve(info, top_h or 1.0)
    curve_h, curve_g = curve if curve is not None else (None, None)
    xs = [lags[ok]]
    ys = [gam[ok]]
    if curve_h is not None and curve_g is not None:
        xs.append(curve_h)
        ys.append(curve_g)
    x_top = _nice_max(
        max(float(np.nanmax(x)) for x in xs if x.size) if any(x.size for x in xs) else 1.0
    )
    y_top = _nice_max(
        1.05 * max(float(np.nanmax(y)) for y in ys if y.size) if any(y.size for y in ys) else 1.0
    )
    left, right, top, bottom = 58, 14, 12, 42
    pw, ph = width - left - right, height - top - bottom

    def px(x: float) -> float:
        return left + pw * x / x_top

    def py(y: float) -> float:
        return top + ph * (1.0 - y / y_top)

    parts = [
        f'<svg class="variogram" xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" '
        f'width="{width}" height="{height}" role="img" '
        f'aria-label="Variogram of {_t(info.variable)}, {_t(info.paddock)}">',
        f'<rect x="{left}" y="{top}" width="{pw}" height="{ph}" fill="#fff" stroke="#999"/>',
    ]
    for xt in _axis_ticks(x_top):
        parts.append(
            f'<line x1="{px(xt):.1f}" y1="{top + ph}" x2="{px(xt):.1f}" y2="{top + ph + 4}" '
            f'stroke="#555"/><text x="{px(xt):.1f}" y="{top + ph + 16}" text-anchor="middle" '
            f'class="tick">{_sig(xt)}</text>'
        )
    for yt in _axis_ticks(y_top):
        parts.append(
            f'<line x1="{left - 4}" y1="{py(yt):.1f}" x2="{left + pw}" y2="{py(yt):.1f}" '
            f'stroke="#eee"/><text x="{left - 6}" y="{py(yt) + 4:.1f}" text-anchor="end" '
            f'class="tick">{_sig(yt)}</text>'
        )
    unit2 = f" ({_t(info.unit)})²" if info.unit else ""
    parts.append(
        f'<text x="{left + pw / 2:.1f}" y="{height - 6}" text-anchor="middle" class="axis">'
        "lag distance (m)</text>"
        f'<text transform="translate(14 {top + ph / 2:.1f}) rotate(-90)" text-anchor="middle" '
        f'class="axis">semivariance{unit2}</text>'
    )
    if info.range_m and info.range_m <= x_top:
        parts.append(
            f'<line class="vg-range" x1="{px(info.range_m):.1f}" y1="{top}" '
            f'x2="{px(info.range_m):.1f}" y2="{top + ph}" stroke="#888" stroke-dasharray="4 3"/>'
        )
    if curve_h is not None and curve_g is not None:
        d = " ".join(
            f"{'M' if i == 0 else 'L'}{px(h):.1f} {py(g):.1f}"
            for i, (h, g) in enumerate(zip(curve_h, curve_g, strict=False))
            if math.isfinite(h) and math.isfinite(g)
        )
        parts.append(
            f'<path class="vg-model" d="{d}" fill="none" stroke="#b35806" stroke-width="2"/>'
        )
    counts = np.asarray(info.counts, dtype=float) if info.counts else np.ones_like(lags)
    cmax = float(np.nanmax(counts)) if counts.size and np.nanmax(counts) > 0 else 1.0
    for h, g, c in zip(lags, gam, counts, strict=False):
        if not (math.isfinite(h) and math.isfinite(g)):
            continue
        r = 2.5 + 3.5 * math.sqrt(max(c, 0.0) / cmax)
        parts.append(
            f'<circle class="vg-point" cx="{px(h):.1f}" cy="{py(g):.1f}" r="{r:.1f}" '
            f'fill="#2166ac" fill-opacity="0.85"><title>lag {_sig(h)} m: {_sig(g)} '
            f"({int(c)} pairs)</title></circle>"
        )
    parts.append("</svg>")
    return "".join(parts)


# --------------------------------------------------------------------------- zone maps


def _luminance(colour: str) -> float:
    """Relative luminance (WCAG 2) of a ``#rrggbb`` colour, 0 (black) to 1 (white)."""
    channels = []
    for k in (1, 3, 5):
        c = int(colour[k : k + 2], 16) / 255
        channels.append(c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4)
    r, g, b = channels
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def _ring_path(coords: Any, fx: Any, fy: Any) -> str:
    pts = list(coords)
    if len(pts) < 3:
        return ""
    return "M" + " L".join(f"{fx(x):.1f} {fy(y):.1f}" for x, y, *_ in pts) + " Z"


def _geom_path(geom: Any, fx: Any, fy: Any) -> str:
    if geom is None or geom.is_empty:
        return ""
    polys = getattr(geom, "geoms", [geom])
    out = []
    for poly in polys:
        if poly.geom_type != "Polygon":
            continue
        out.append(_ring_path(poly.exterior.coords, fx, fy))
        out.extend(_ring_path(ring.coords, fx, fy) for ring in poly.interiors)
    return " ".join(p for p in out if p)


def _metric(gdf: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    if gdf.crs is not None and gdf.crs.is_geographic and len(gdf):
        return gdf.to_crs(gdf.estimate_utm_crs())
    return gdf


def zone_map_svg(
    zones: gpd.GeoDataFrame,
    *,
    outline: Any = None,
    top_rate: float | None = None,
    rate_unit: str = "kg/ha",
    width: int = 560,
    max_height: int = 300,
    uid: str = "z",
) -> str:
    """Static SVG map of one paddock's zones for one product.

    Zones are filled by rate on the same sequential ramp as the web map
    (exclusions hatched grey), labelled with zone number and rate where they
    are big enough, with the paddock outline, a scale bar and a grid-north arrow.

    Parameters
    ----------
    zones
        Rows of one paddock and product (``zone, kind, rate_kg_ha`` and
        geometry, projected CRS in metres; geographic input is projected to UTM).
    outline
        Optional paddock geometry (same CRS) drawn on top.
    top_rate
        Rate (kg/ha) at the dark end of the ramp (default: the largest here).
    rate_unit
        Unit of the rates in the labels (one of :data:`geosoil.units.RATE_UNITS`).
    width, max_height
        Largest size in CSS pixels (the drawing keeps the paddock's shape).
    uid
        Text unique in the page, for the SVG's pattern id.

    Returns
    -------
    str
        The SVG markup (or a short note when there are no zones).

    Examples
    --------
    >>> import geopandas as gpd
    >>> from shapely.geometry import box
    >>> z = gpd.GeoDataFrame({"zone": [1, 2], "kind": ["rate", "rate"],
    ...                       "rate_kg_ha": [0.0, 2500.0]},
    ...                      geometry=[box(0, 0, 100, 200), box(100, 0, 200, 200)],
    ...                      crs="EPSG:32755")
    >>> svg = zone_map_svg(z, rate_unit="t/ha")
    >>> svg.count('class="zone"'), "2.5 t/ha" in svg
    (2, True)
    """
    zones = _metric(zones)
    geoms = [g for g in zones.geometry if g is not None and not g.is_empty]
    if outline is not None and not outline.is_empty:
        geoms.append(outline)
    if not geoms:
        return '<p class="no-zones">No zones to draw.</p>'
    minx = min(g.bounds[0] for g in geoms)
    miny = min(g.bounds[1] for g in geoms)
    maxx = max(g.bounds[2] for g in geoms)
    maxy = max(g.bounds[3] for g in geoms)
    dx, dy = max(maxx - minx, 1e-9), max(maxy - miny, 1e-9)
    pad = 12
    scale = min((width - 2 * pad) / dx, (max_height - 2 * pad - 28) / dy)
    height = min(max_height, int(math.ceil(dy * scale + 2 * pad + 28 - 1e-6)))
    width = min(width, max(240, int(math.ceil(dx * scale + 2 * pad - 1e-6))))

    def fx(x: float) -> float:
        return pad + (x - minx) * scale

    def fy(y: float) -> float:
        return pad + (maxy - y) * scale

    rates = zones["rate_kg_ha"].astype(float)
    spread = zones["kind"].astype(str) != "exclusion"
    top = (
        top_rate
        if top_rate is not None
        else (float(np.nanmax(rates[spread])) if spread.any() else 0.0)
    )
    pid = f"hatch-{_t(uid)}"
    parts = [
        f'<svg class="zone-map" xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {width} {height}" '
        f'width="{width}" height="{height}" role="img" aria-label="Zone map">',
        f'<defs><pattern id="{pid}" width="6" height="6" patternUnits="userSpaceOnUse" '
        f'patternTransform="rotate(45)"><rect width="6" height="6" fill="#ddd"/>'
        f'<line x1="0" y1="0" x2="0" y2="6" stroke="#666" stroke-width="2"/></pattern></defs>',
    ]
    labels = []
    placed: list[tuple[float, float, float, float]] = []  # label boxes drawn so far (px)

    def free_box(x: float, y: float, text: str) -> tuple[float, float, float, float] | None:
        """The label's box if it overlaps none drawn so far (about 6.5 px a character)."""
        half_w, half_h = 3.3 * len(text) + 2, 8.0
        bx = (x - half_w, y - half_h, x + half_w, y + half_h)
        for ox in placed:
            if bx[0] < ox[2] and ox[0] < bx[2] and bx[1] < ox[3] and ox[1] < bx[3]:
                return None
        return bx

    for _, z in zones.iterrows():
        d = _geom_path(z.geometry, fx, fy)
        if not d:
            continue
        excluded = str(z["kind"]) == "exclusion"
        rate = float(z["rate_kg_ha"]) if not _isnan(z["rate_kg_ha"]) else math.nan
        if excluded:
            fill = f"url(#{pid})"
        elif math.isfinite(rate):
            fill = ramp_colour(_ZONE_RAMP, 0.08 + 0.84 * (rate / top if top > 0 else 0.0))
        else:
            fill = "#cccccc"
        zone_txt = _zone_label(z["zone"])
        rate_txt = _rate_text(rate, rate_unit)
        tip = "exclusion (not spread)" if excluded else f"zone {zone_txt}: {rate_txt}"
        parts.append(
            f'<path class="zone" d="{d}" fill="{fill}" fill-rule="evenodd" stroke="#333" '
            f'stroke-width="0.8"><title>{_t(tip)}</title></path>'
        )
        area_px = z.geometry.area * scale * scale
        if area_px >= 900:
            anchor = label_point(z.geometry)
            text = "excluded" if excluded else f"{zone_txt} · {rate_txt}"
            if area_px < 3500 and not excluded:
                text = zone_txt
            ink = (
                "#111"
                if excluded or not fill.startswith("#") or _luminance(fill) > 0.35
                else "#fff"
            )
            x_px, y_px = fx(anchor.x), fy(anchor.y)
            box_px = free_box(x_px, y_px, text)
            if box_px is None and text != zone_txt:  # try the zone number alone
                text = zone_txt
                box_px = free_box(x_px, y_px, text)
            if box_px is None:  # no room: the table under the map lists every zone
                continue
            placed.append(box_px)
            labels.append(
                f'<text class="zone-label" fill="{ink}" '
                f'x="{fx(anchor.x):.1f}" y="{fy(anchor.y):.1f}" '
                f'text-anchor="middle" dominant-baseline="middle">{_t(text)}</text>'
            )
    if outline is not None and not outline.is_empty:
        parts.append(
            f'<path class="outline" d="{_geom_path(outline, fx, fy)}" fill="none" stroke="#111" '
            f'stroke-width="2" fill-rule="evenodd"/>'
        )
    parts.extend(labels)
    # Scale bar (about a quarter of the map's width) and grid north.
    bar_m = _nice_step(dx / 4, 1)
    bar_px = bar_m * scale
    y0 = height - 14
    bar_label = f"{bar_m / 1000:g} km" if bar_m >= 1000 else f"{bar_m:g} m"
    parts.append(
        f'<g class="scale-bar"><rect x="{pad}" y="{y0 - 5}" width="{bar_px:.1f}" height="5" '
        f'fill="#111"/><text x="{pad + bar_px + 6:.1f}" y="{y0}" class="tick">'
        f"{bar_label}</text></g>"
        f'<g class="north"><path d="M{width - 20} {y0 - 16} l6 14 l-6 -4 l-6 4 Z" fill="#111"/>'
        f'<text x="{width - 20}" y="{y0 + 10}" text-anchor="middle" class="tick">'
        "N (grid)</text></g>"
    )
    parts.append("</svg>")
    return "".join(parts)


# --------------------------------------------------------------------------- page


_CSS = """
:root { --ink: #1b1b1b; --muted: #555; --rule: #ccc; --accent: #2166ac; }
* { box-sizing: border-box; }
body { font: 14px/1.45 "DejaVu Sans", system-ui, sans-serif; color: var(--ink); margin: 0 auto;
  max-width: 980px; padding: 24px; }
h1 { font-size: 24px; margin: 0 0 4px; }
h2 { font-size: 19px; margin: 28px 0 8px; border-bottom: 2px solid var(--accent);
  padding-bottom: 3px; }
h3 { font-size: 15px; margin: 18px 0 6px; }
.meta { color: var(--muted); margin: 0 0 12px; }
nav ol { columns: 2; margin: 6px 0 0; }
table { border-collapse: collapse; margin: 6px 0 12px; width: 100%; font-size: 13px; }
th, td { border-bottom: 1px solid var(--rule); padding: 3px 6px; text-align: left;
  vertical-align: top; }
th { background: #f1f3f6; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.total td { font-weight: 700; border-top: 1.5px solid var(--ink); }
.cautions { border: 2px solid #b35806; background: #fff7ec; padding: 8px 14px; margin: 14px 0; }
.cautions h2 { border: none; margin-top: 4px; color: #8a4204; }
.cautions li { margin: 3px 0; }
figure { margin: 8px 0 12px; }
figcaption { color: var(--muted); font-size: 12px; }
.swatch { display: inline-block; width: 14px; height: 10px; border: 1px solid #555;
  margin-right: 5px; }
.swatch.hatch { background: repeating-linear-gradient(45deg, #666 0 2px, #ddd 2px 5px); }
.variograms { display: grid; grid-template-columns: repeat(auto-fill, minmax(440px, 1fr));
  gap: 8px 18px; }
.variograms figure { break-inside: avoid; }
svg text.tick { font-size: 11px; fill: #333; }
svg text.axis { font-size: 12px; fill: #111; }
svg text.zone-label { font-size: 12px; font-weight: 700; }
code, pre { font: 12px/1.35 "DejaVu Sans Mono", monospace; }
pre.settings { background: #f6f6f6; border: 1px solid var(--rule); padding: 8px;
  white-space: pre-wrap; overflow-wrap: anywhere; }
td.hash code { overflow-wrap: anywhere; word-break: break-all; }
.warnings li { margin: 2px 0; }
.note { color: var(--muted); font-size: 12px; }
@page { size: A4; margin: 14mm 12mm 16mm;
  @bottom-right { content: "page " counter(page) " of " counter(pages); font-size: 9pt;
    color: #555; } }
@media print {
  body { max-width: none; padding: 0; font-size: 10pt; }
  nav { display: none; }
  h2 { break-after: avoid; }
  h3 { break-after: avoid; }
  .page-break, section.paddock, section.major { break-before: page; }
  table, figure, .cautions, tr, pre { break-inside: avoid; }
  thead { display: table-header-group; }
  .variograms { display: block; }
  a { color: inherit; text-decoration: none; }
}
"""


def _table(
    headers: Sequence[tuple[str, bool]],
    rows: Sequence[Sequence[str]],
    *,
    css: str = "",
    row_classes: Sequence[str] | None = None,
) -> str:
    """A table of already-escaped cells; headers are (text, numeric)."""
    head = "".join(f'<th class="num">{h}</th>' if num else f"<th>{h}</th>" for h, num in headers)
    body = []
    for i, row in enumerate(rows):
        cls = f' class="{row_classes[i]}"' if row_classes and row_classes[i] else ""
        cells = "".join(
            f'<td class="num">{c}</td>' if headers[j][1] else f"<td>{c}</td>"
            for j, c in enumerate(row)
        )
        body.append(f"<tr{cls}>{cells}</tr>")
    klass = f' class="{css}"' if css else ""
    return f"<table{klass}><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _mass(unit: str) -> tuple[str, str]:
    """The tonnage column and its header label for a rate unit: short tons with lb/ac."""
    return ("short_tons", "short tons") if unit == "lb/ac" else ("tonnes", "t")


def _cost_header(currency: str) -> str:
    return f"cost ({_t(currency)})" if currency else "cost"


def _tonnage_headers(unit: str, *, schedule: bool = False,
                     currency: str = "") -> tuple[tuple[str, bool], ...]:
    return (
        ("zone", False),
        ("area (ha)", True),
        (f"rate ({_t(unit)})", True),
        *((("applied as", False),) if schedule else ()),
        (f"product ({_mass(unit)[1]})", True),
        ("truckloads", True),
        (_cost_header(currency), True),
    )


def _tonnage_rows(
    df: pd.DataFrame, colour_of: Any = None, *, unit: str = "kg/ha",
    schedules: Mapping[Any, str] | None = None,
) -> tuple[list[list[str]], list[str]]:
    """Rows of a tonnage table; with ``schedules`` (zone -> "2 seasons of 1.0 t/ha", "" for
    one pass) an "applied as" column after the rate."""
    rows, classes = [], []
    for _, r in df.iterrows():
        level = str(r["level"]).lower()
        is_zone = level == "zone"
        if is_zone:
            sw = ""
            if colour_of is not None and not _isnan(r["rate_kg_ha"]):
                colour = colour_of(float(r["rate_kg_ha"]))
                sw = f'<span class="swatch" style="background:{colour}"></span>'
            label = sw + _t(_zone_label(r["zone"]))
        else:
            label = "total" if level in ("paddock", "farm") else _t(level)
        split = []
        if schedules is not None:
            spread = is_zone and not _isnan(r["rate_kg_ha"]) and float(r["rate_kg_ha"]) > 0
            text = schedules.get(r["zone"], "") if is_zone else ""
            split = [_t(text or ("one pass" if spread else ""))]
        rows.append(
            [
                label,
                _num(r["area_ha"], 2),
                _t(_rate_text(r["rate_kg_ha"], unit, with_unit=False)) if is_zone else "",
                *split,
                _num(r[_mass(unit)[0]] if _mass(unit)[0] in r else r["tonnes"], 2),
                _num(r["truckloads"], 0),
                _num(r["cost"], 2),
            ]
        )
        classes.append("" if is_zone else "total")
    return rows, classes


def _ordered_unique(values: Any) -> list[Any]:
    seen: dict[Any, None] = {}
    for v in values:
        if not _isnan(v):
            seen.setdefault(v, None)
    return list(seen)


def build_report(data: ReportInput) -> str:
    """The run's report as one static HTML page (no script, nothing loaded from outside).

    Parameters
    ----------
    data
        :class:`ReportInput`.

    Returns
    -------
    str

    Examples
    --------
    >>> import geopandas as gpd, pandas as pd
    >>> from datetime import datetime, timezone
    >>> from shapely.geometry import box
    >>> square = box(0, 0, 200, 200)
    >>> pads = gpd.GeoDataFrame({"paddock": ["North"]}, geometry=[square], crs="EPSG:32755")
    >>> zones = gpd.GeoDataFrame({"paddock": ["North"], "product": ["gypsum"], "zone": [1],
    ...                           "kind": ["rate"], "rate_kg_ha": [2000.0], "area_ha": [4.0]},
    ...                          geometry=[square], crs="EPSG:32755")
    >>> tonnage = pd.DataFrame({"paddock": ["North"], "product": ["gypsum"], "zone": [1],
    ...                         "level": ["zone"],
    ...                         "area_ha": [4.0], "rate_kg_ha": [2000.0], "tonnes": [8.0],
    ...                         "truckloads": [1.0], "cost": [float("nan")]})
    >>> when = datetime(2024, 5, 1, tzinfo=timezone.utc)
    >>> page = build_report(ReportInput(title="Demo", created=when, tonnage=tonnage,
    ...                                 zones=zones, paddocks=pads))
    >>> "<script" in page, page.count('class="zone-map"')
    (False, 1)
    """
    tonnage = data.tonnage.copy()
    tonnage["level"] = tonnage["level"].astype(str).str.lower()
    zones = data.zones
    paddock_geoms = {str(r["paddock"]): r.geometry for _, r in data.paddocks.iterrows()}
    paddock_names = _ordered_unique(
        [str(p) for p in data.paddocks["paddock"]]
        + [str(p) for p in zones["paddock"]]
        + [str(p) for p in tonnage.loc[tonnage["level"] != "farm", "paddock"] if not _isnan(p)]
    )
    products = _ordered_unique(
        [str(p) for p in zones["product"]] + [str(p) for p in tonnage["product"] if not _isnan(p)]
    )
    top_rate = {}
    for product in products:
        r = zones.loc[
            (zones["product"].astype(str) == product) & (zones["kind"].astype(str) != "exclusion"),
            "rate_kg_ha",
        ].astype(float)
        top_rate[product] = float(np.nanmax(r)) if r.notna().any() else 0.0

    def colour_for(product: str) -> Any:
        top = top_rate.get(product, 0.0)
        return lambda rate: ramp_colour(_ZONE_RAMP, 0.08 + 0.84 * (rate / top if top > 0 else 0.0))

    density = {d.paddock: d for d in data.density}
    created = (
        data.created.isoformat(timespec="minutes")
        if isinstance(data.created, datetime)
        else str(data.created)
    )
    version = data.provenance.versions.get("geosoil", "")
    out: list[str] = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_t(data.title)}</title>",
        f"<style>{_CSS}</style></head><body>",
        f'<header><h1 id="report-title">{_t(data.title)}</h1>',
        f'<p class="meta">Created {_t(created)}'
        + (f" by geosoil {_t(version)}" if version else "")
        + f" · {len(paddock_names)} paddock(s) · {len(products)} product(s)</p></header>",
    ]
    nav = [
        ("cautions", "Cautions"),
        ("summary", "Farm totals"),
        *((f"paddock-{i}", f"Paddock {p}") for i, p in enumerate(paddock_names)),
        ("surfaces", "Surfaces and variograms"),
        ("uncertainty", "Where the maps are least certain"),
        ("density", "Sample density"),
        ("assumptions", "Assumptions and methods"),
        ("warnings", "Warnings"),
        ("provenance", "Provenance"),
    ]
    out.append(
        "<nav><strong>Contents</strong><ol>"
        + "".join(f'<li><a href="#{a}">{_t(label)}</a></li>' for a, label in nav)
        + "</ol></nav>"
    )

    # Cautions
    out.append(
        '<section id="cautions" class="cautions"><h2>Cautions</h2><ul>'
        + "".join(f"<li>{_t(c)}</li>" for c in data.cautions)
        + "</ul></section>"
    )

    # Farm totals
    farm = tonnage[tonnage["level"] == "farm"]
    mass_col, mass_label = _mass(data.rate_unit)
    out.append('<section id="summary"><h2>Farm totals</h2>')
    if len(farm):
        rows = [
            [
                _t(r["product"]),
                _num(r["area_ha"], 2),
                _num(r[mass_col] if mass_col in r else r["tonnes"], 2),
                _num(r["truckloads"], 0),
                _num(r["cost"], 2),
            ]
            for _, r in farm.iterrows()
        ]
        out.append(
            _table(
                [
                    ("product", False),
                    ("area (ha)", True),
                    (f"product ({mass_label})", True),
                    ("truckloads", True),
                    (_cost_header(data.currency), True),
                ],
                rows,
                css="farm-totals",
            )
        )
    else:
        out.append('<p class="note">The run gave no farm totals.</p>')
    out.append("</section>")

    # Per paddock
    for i, paddock in enumerate(paddock_names):
        out.append(f'<section class="paddock" id="paddock-{i}"><h2>Paddock {_t(paddock)}</h2>')
        d = density.get(paddock)
        if d is not None:
            out.append(
                f'<p class="density-line">{_num(d.area_ha, 2)} ha · {d.samples} sample(s) · '
                f"{_num(d.per_ha, 2)} samples per ha ({_num(d.ha_per_sample, 1)} ha per sample)</p>"
            )
        pz = zones[zones["paddock"].astype(str) == paddock]
        pt = tonnage[(tonnage["paddock"].astype(str) == paddock) & (tonnage["level"] != "farm")]
        prods = _ordered_unique([str(p) for p in pz["product"]] + [str(p) for p in pt["product"]])
        if not prods:
            out.append('<p class="note">No product is prescribed for this paddock.</p>')
        for j, product in enumerate(prods):
            colour_of = colour_for(product)
            out.append(f'<div class="product-block"><h3>{_t(product)}</h3>')
            zp = pz[pz["product"].astype(str) == product]
            if len(zp):
                svg = zone_map_svg(
                    zp,
                    outline=paddock_geoms.get(paddock),
                    top_rate=top_rate.get(product),
                    rate_unit=data.rate_unit,
                    uid=f"{i}-{j}",
                )
                excl_note = (
                    " Hatched: excluded from spreading."
                    if (zp["kind"].astype(str) == "exclusion").any()
                    else ""
                )
                out.append(
                    f"<figure>{svg}<figcaption>Zones of {_t(product)} in paddock {_t(paddock)}, "
                    "labelled zone · rate; darker is more product."
                    f"{excl_note}</figcaption></figure>"
                )
            tp = pt[pt["product"].astype(str) == product]
            if len(tp):
                order = tp.assign(_o=(tp["level"] != "zone").astype(int))
                order = order.sort_values(["_o"], kind="stable").drop(columns="_o")
                schedules = None
                if "schedule" in zp.columns:
                    split = {z: str(t) for z, t in zip(zp["zone"], zp["schedule"], strict=True)
                             if isinstance(t, str) and t}
                    schedules = split or None  # the column only when a zone is split
                rows, classes = _tonnage_rows(order, colour_of, unit=data.rate_unit,
                                              schedules=schedules)
                out.append(_table(_tonnage_headers(data.rate_unit,
                                                   schedule=schedules is not None,
                                                   currency=data.currency),
                                  rows, css="tonnage", row_classes=classes))
            else:
                out.append('<p class="note">No tonnage for this product here.</p>')
            out.append("</div>")
        out.append("</section>")

    # Surfaces: variograms and cross-validation
    out.append('<section id="surfaces" class="major"><h2>Surfaces and variograms</h2>')
    if data.variograms:
        out.append(
            '<h3>Cross-validation (leave one out)</h3><p class="note">Mean error near 0 means no '
            "bias; RMSE is the typical error of a predicted value; the mean squared standardised "
            "error (MSSE) near 1 means the kriging standard deviation is realistic.</p>"
        )
        rows = [
            [
                _t(v.variable),
                _t(v.paddock),
                _t(v.method),
                _t(v.model or "–"),
                _t(v.n_samples if v.n_samples is not None else "–"),
                _sig(v.cv_mean_error),
                _sig(v.cv_rmse),
                _sig(v.cv_msse),
            ]
            for v in data.variograms
        ]
        out.append(
            _table(
                [
                    ("surface", False),
                    ("paddock", False),
                    ("method", False),
                    ("model", False),
                    ("samples", True),
                    ("mean error", True),
                    ("RMSE", True),
                    ("MSSE", True),
                ],
                rows,
                css="cross-validation",
            )
        )
        out.append('<h3>Variograms</h3><div class="variograms">')
        for v in data.variograms:
            params = (
                f"{_t(v.model)}: nugget {_sig(v.nugget)}, partial sill {_sig(v.psill)}, "
                f"range {_sig(v.range_m)} m"
                if v.model
                else _t(v.method)
            )
            note = f" {_t(v.note)}." if v.note else ""
            unit = f" ({_t(v.unit)})" if v.unit else ""
            out.append(
                f'<figure class="variogram-figure">{variogram_svg(v)}<figcaption><strong>'
                f"{_t(v.variable)}{unit}, {_t(v.paddock)}</strong> — {params}. Points: empirical "
                f"semivariance (larger = more pairs); line: fitted model; dashed: range.{note}"
                f"</figcaption></figure>"
            )
        out.append("</div>")
    else:
        out.append('<p class="note">No surfaces were interpolated.</p>')
    out.append("</section>")

    # Uncertainty
    out.append(
        '<section id="uncertainty"><h2>Where the maps are least certain</h2>'
        '<p class="note">The kriging standard deviation (SD) measures how far an interpolated '
        "value may be from the truth; it grows away from the samples. Where a large share of a "
        "paddock is above the threshold, more samples would firm up the rates.</p>"
    )
    if data.uncertainty:
        rows = [
            [
                _t(u.variable),
                _t(u.paddock),
                f"{_sig(u.sd_threshold)} {_t(u.unit)}".strip(),
                _num(100.0 * u.share_above, 1, thousands=False) + " %",
                f"{_sig(u.sd_max)} {_t(u.unit)}".strip(),
                f"{_sig(u.sd_mean)} {_t(u.unit)}".strip() if u.sd_mean is not None else "–",
            ]
            for u in data.uncertainty
        ]
        out.append(
            _table(
                [
                    ("surface", False),
                    ("paddock", False),
                    ("SD threshold", True),
                    ("area above threshold", True),
                    ("largest SD", True),
                    ("mean SD", True),
                ],
                rows,
                css="uncertainty",
            )
        )
    else:
        out.append('<p class="note">No kriging standard deviation was computed.</p>')
    out.append("</section>")

    # Sample density
    out.append('<section id="density"><h2>Sample density</h2>')
    if data.density:
        rows = [
            [
                _t(d.paddock),
                _t(d.samples),
                _num(d.area_ha, 2),
                _num(d.per_ha, 2),
                _num(d.ha_per_sample, 1),
            ]
            for d in data.density
        ]
        out.append(
            _table(
                [
                    ("paddock", False),
                    ("samples", True),
                    ("area (ha)", True),
                    ("samples per ha", True),
                    ("ha per sample", True),
                ],
                rows,
                css="density",
            )
        )
    else:
        out.append('<p class="note">No sample counts were given.</p>')
    out.append("</section>")

    # Assumptions and methods
    out.append('<section id="assumptions" class="major"><h2>Assumptions and methods</h2>')
    if data.assumptions:
        out.append(
            _table(
                [("assumption", False), ("value", False)],
                [[_t(k), _t(v)] for k, v in data.assumptions.items()],
                css="assumptions",
            )
        )
    if data.methods:
        out.append(
            "<h3>Methods and sources</h3>"
            + _table(
                [("rule or method", False), ("source", False)],
                [[_t(rule), _t(cite)] for rule, cite in data.methods],
                css="methods",
            )
        )
    if not data.assumptions and not data.methods:
        out.append('<p class="note">None recorded.</p>')
    out.append("</section>")

    # Warnings
    out.append('<section id="warnings"><h2>Warnings</h2>')
    if data.warnings:
        out.append(
            '<ul class="warnings">' + "".join(f"<li>{_t(w)}</li>" for w in data.warnings) + "</ul>"
        )
    else:
        out.append('<p class="note">The run raised no warnings.</p>')
    out.append("</section>")

    # Provenance
    prov = data.provenance
    out.append('<section id="provenance" class="major"><h2>Provenance</h2><h3>Input files</h3>')
    if prov.inputs:
        out.append(
            '<table class="inputs"><thead><tr><th>file</th><th>SHA-256</th></tr></thead><tbody>'
            + "".join(
                f"<tr><td><code>{_t(path)}</code></td>"
                f'<td class="hash"><code>{_t(digest)}</code></td></tr>'
                for path, digest in prov.inputs
            )
            + "</tbody></table>"
        )
    else:
        out.append('<p class="note">No input files recorded.</p>')
    out.append("<h3>Software</h3>")
    if prov.versions:
        out.append(
            _table(
                [("software", False), ("version", False)],
                [[_t(k), _t(v)] for k, v in prov.versions.items()],
                css="versions",
            )
        )
    out.append("<h3>Settings</h3>")
    out.append(
        f'<pre class="settings">{_t(prov.settings_toml)}</pre>'
        if prov.settings_toml.strip()
        else '<p class="note">No settings recorded.</p>'
    )
    out.append("</section>")
    out.append(
        '<footer class="note"><p>Rates are advisory; confirm them with a qualified agronomist '
        "and follow local regulations.</p></footer></body></html>"
    )
    logger.debug("report: %d paddocks, %d surfaces", len(paddock_names), len(data.variograms))
    return "\n".join(out)
