"""The printable report of a run: one static HTML page that prints cleanly to PDF.

The page is rendered from the package's jinja2 templates (``templates/report.html``,
one macro per section in ``templates/report_sections.html``) with autoescaping, so
every value from the user's files or settings is escaped where it lands. It carries
no script and loads nothing: its maps are SVG drawn here from shapely geometries
(zone maps, with exclusions and creek buffers hatched and named) or a PNG of the
surface's colour classes with the samples and outlines over it (soil maps), and its
print CSS sets A4 pages, page breaks before each paddock and the larger sections,
repeated table headers and page numbers.

It holds, in order: cautions; farm totals; the at-a-glance table (per paddock: its
area, the area excluded, sodic, strongly sodic and acid, and the area needing each
product); soil maps (ESP, pH, acid saturation) with the samples; per paddock and
product, the zone map and tonnage table; per surface, the variogram plot and a
cross-validation table; where the interpolation is least certain; sample density;
assumptions, and the methods with their citations; the warnings the run raised (the
same list as the command's summary and ``run.json``) and notes on the rates;
provenance.

A paddock's area is one figure everywhere (:attr:`ReportInput.paddock_area_ha`, the
area of its zones, exclusions included, as in the tonnage table).

Rates are shown in :attr:`ReportInput.rate_unit` (kg/ha, t/ha or lb/ac); the tables
it is given stay in kg/ha. Colours, escaping and label positions come from
:mod:`geosoil.presentation`, shared with the web map.

This module is pure: :func:`build_report` returns the page as a string; the
pipeline writes it.
"""

from __future__ import annotations

import functools
import logging
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from .errors import GeosoilError, InputError, SettingsError
from .presentation import (
    MAX_ZONE_LABELS,
    Classes,
    classes_data_uri,
    escape_text,
    label_point,
    point_xy,
    rate_colour,
)
from .units import RATE_UNITS, format_rate

__all__ = [
    "CAUTIONS",
    "REPORT_MAX_SAMPLE_DOTS",
    "ChangeReportInput",
    "PaddockGlance",
    "Provenance",
    "ReportInput",
    "SampleDensity",
    "SoilMap",
    "UncertaintySummary",
    "VariogramInfo",
    "PlanReportInput",
    "build_change_report",
    "build_plan_report",
    "build_report",
    "surface_map_svg",
    "variogram_svg",
    "zone_map_svg",
]

logger = logging.getLogger(__name__)

#: Most samples drawn on each soil map of the report. A map is 640 px wide: 2 000 dots of
#: 6 px already cover most of a paddock, and each map stays under about 0.3 MB whatever the
#: sample count (300 000 samples drew 108 MiB of dots). The full table is in the run's
#: samples.csv and farm.gpkg; the report says so.
REPORT_MAX_SAMPLE_DOTS = 2_000

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

    def in_unit(self, area_unit: str) -> tuple[float, float, float]:
        """The area, samples per area unit and area per sample in ``area_unit`` ("ha" or
        "ac", 1 ha = 2.4710538 ac).

        >>> SampleDensity(paddock="North", samples=10, area_ha=40.0).in_unit("ha")
        (40.0, 0.25, 4.0)
        """
        from .units import area_in

        area = float(area_in(self.area_ha, area_unit))
        return (area, self.samples / area if area > 0 else math.nan,
                area / self.samples if self.samples > 0 else math.nan)


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
class SoilMap:
    """One soil surface drawn over the whole farm, in its colour classes.

    Parameters
    ----------
    title, unit
        What it is (``"ESP"``, ``"% of ECEC"``).
    array
        2-D float array, north-up, NaN outside the paddocks.
    transform
        ``affine.Affine`` of ``array`` (same CRS as the paddocks).
    classes
        Colour classes (:func:`geosoil.presentation.classes_for`), as on the web map.
    """

    title: str
    unit: str
    array: np.ndarray
    transform: Any
    classes: Classes


@dataclass(frozen=True)
class PaddockGlance:
    """One paddock at a glance (areas in ha).

    Parameters
    ----------
    paddock
        Its name.
    area_ha
        Its area (the same figure as in the tonnage table).
    excluded_ha
        Kind (``"creek buffer"``, ``"exclusion"``) -> area not spread.
    sodic_ha, strongly_sodic_ha, acid_ha
        Area whose cells are sodic (ESP at or above the sodic limit, strongly sodic
        included), strongly sodic, and acid (pH below the acid threshold); None when
        the surface is missing.
    product_ha, product_t
        Product -> area needing it (rate above 0) and tonnes (short tons with lb/ac).
    """

    paddock: str
    area_ha: float
    excluded_ha: Mapping[str, float] = field(default_factory=dict)
    sodic_ha: float | None = None
    strongly_sodic_ha: float | None = None
    acid_ha: float | None = None
    product_ha: Mapping[str, float] = field(default_factory=dict)
    product_t: Mapping[str, float] = field(default_factory=dict)


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
        Every warning the run raised, as text (the list the command's summary prints).
    notes
        Notes on the rates per paddock (rules that did not apply, merged zones...).
    glance
        One :class:`PaddockGlance` per paddock (the at-a-glance table).
    soil_maps
        :class:`SoilMap` of ESP, pH and acid saturation (or what there is).
    samples
        Optional sample points (``sample_id``, geometry in the paddocks' CRS), drawn
        on the soil maps: at most ``max_sample_dots`` of them, spread evenly.
    max_sample_dots
        Most samples drawn on each soil map (:data:`REPORT_MAX_SAMPLE_DOTS`); above it,
        a spread subset, and the page says how many of how many and where every sample
        is (``samples_source``).
    samples_source
        Where every sample is with its values (e.g. ``"samples.csv and farm.gpkg"``).
    exclusion_kinds
        Exclusion label -> ``"creek buffer"`` or ``"exclusion"``: how exclusion zones
        are named in maps and tables.
    acid_label
        What "acid" means in the at-a-glance table (e.g. ``"pH (CaCl2) below 4.8"``).
    sodic_labels
        Column heads of the sodic and strongly sodic areas.
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
    zone_water
        ``(paddock, product, zone)`` -> (water in mm that only dissolves the zone's gypsum,
        share of the zone's cells with ESP at or above ``leaching_esp``, or None): adds a
        water column and a leaching caution to that product's zone table.
    leaching_esp
        ESP (%) from which gypsum needs leaching water and drainage to work.
    prescribed
        What the run prescribed, one sentence under the title ("Prescribed: ..." or
        "Nothing prescribed: ..."; :func:`geosoil.outputs.prescribed`).
    not_prescribed
        Why a rule gave nothing, one line each, listed under it.
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
    notes: Sequence[str] = ()
    glance: Sequence[PaddockGlance] = ()
    soil_maps: Sequence[SoilMap] = ()
    samples: Any = None
    max_sample_dots: int = 0  # 0: REPORT_MAX_SAMPLE_DOTS
    samples_source: str = ""
    exclusion_kinds: Mapping[str, str] = field(default_factory=dict)
    acid_label: str = "acid"
    sodic_labels: tuple[str, str] = ("ESP ≥ 6 %", "ESP ≥ 15 %")
    cautions: Sequence[str] = CAUTIONS
    rate_unit: str = "kg/ha"
    currency: str = ""
    zone_water: Mapping[tuple[str, str, str], tuple[float, float | None]] = field(
        default_factory=dict)
    leaching_esp: float = 15.0
    prescribed: str = ""
    not_prescribed: Sequence[str] = ()

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
        from markupsafe import Markup

        return Markup(_t(value))  # escaped once: the templates do not escape it again
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
        return _drawing("note", "no-variogram",
                        f"No variogram: this surface was made by {info.method}.")
    lags = np.asarray(info.lags, dtype=float)
    gam = np.asarray(info.gamma, dtype=float)
    ok = np.isfinite(lags) & np.isfinite(gam)
    top_h = max(float(lags[ok].max()) if ok.any() else 0.0, 1.15 * float(info.range_m or 0.0))
    curve = _model_curve(info, top_h or 1.0)
    xs = [lags[ok]] + ([curve[0]] if curve is not None else [])
    ys = [gam[ok]] + ([curve[1]] if curve is not None else [])
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

    path = ""
    if curve is not None:
        path = " ".join(
            f"{'M' if i == 0 else 'L'}{px(h):.1f} {py(g):.1f}"
            for i, (h, g) in enumerate(zip(curve[0], curve[1], strict=False))
            if math.isfinite(h) and math.isfinite(g)
        )
    counts = np.asarray(info.counts, dtype=float) if info.counts else np.ones_like(lags)
    cmax = float(np.nanmax(counts)) if counts.size and np.nanmax(counts) > 0 else 1.0
    points = [
        {"x": px(h), "y": py(g), "r": 2.5 + 3.5 * math.sqrt(max(c, 0.0) / cmax),
         "lag": _sig(h), "gamma": _sig(g), "pairs": int(c)}
        for h, g, c in zip(lags, gam, counts, strict=False)
        if math.isfinite(h) and math.isfinite(g)
    ]
    return _drawing("variogram", {
        "width": width, "height": height, "left": left, "top": top, "pw": pw, "ph": ph,
        "variable": info.variable, "paddock": info.paddock, "unit": info.unit,
        "x_ticks": [{"at": px(t), "label": _sig(t)} for t in _axis_ticks(x_top)],
        "y_ticks": [{"at": py(t), "label": _sig(t)} for t in _axis_ticks(y_top)],
        "range_x": px(info.range_m) if info.range_m and info.range_m <= x_top else None,
        "curve": path, "points": points,
    })


def _drawing(macro: str, *args: Any) -> str:
    """One of the report's drawings from its macro in ``templates/report_drawings.html``
    (autoescaped: every value passed in is text)."""
    return str(getattr(_drawings(), macro)(*args))


@functools.cache
def _drawings() -> Any:
    return _templates().get_template("report_drawings.html").module


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
    exclusion_kinds: Mapping[str, str] | None = None,
) -> str:
    """Static SVG map of one paddock's zones for one product.

    Zones are filled by rate on the same rate scale as the web map
    (exclusions hatched grey, creek buffers hatched blue), labelled with zone number and
    rate (:class:`_LabelPlacer`: inside the drawing, over no other label and no exclusion;
    the number alone where the whole label finds no room; a numbered callout with a leader
    line for a zone too small for either), with the paddock outline, a scale bar and a
    grid-north arrow.

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
    exclusion_kinds
        Exclusion label -> ``"creek buffer"`` or ``"exclusion"``: creek buffers are
        hatched blue and labelled "creek buffer", other exclusions grey "excluded".

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
        return _drawing("note", "no-zones", "No zones to draw.")
    # a zone map of more zones than a drawing can label (a spreader grid) labels none (the
    # report's caption says so; its table lists every zone)
    labelled = len(zones) <= MAX_ZONE_LABELS
    frame = _Frame.around(geoms, width=width, max_height=max_height, pad=12, foot=28,
                          min_width=240)
    rates = zones["rate_kg_ha"].astype(float)
    spread = zones["kind"].astype(str) != "exclusion"
    top = (
        top_rate
        if top_rate is not None
        else (float(np.nanmax(rates[spread])) if spread.any() else 0.0)
    )
    pid = f"hatch-{uid}"
    drawn: list[dict[str, Any]] = []
    excl = [g for g, s in zip(zones.geometry, spread, strict=True)
            if not s and g is not None and not g.is_empty]
    labels = _LabelPlacer(frame, None)
    if excl:
        labels.obstacles = labels.to_px(shapely.union_all(excl))
        shapely.prepare(labels.obstacles)  # tested against every label's box
    pending: list[tuple[float, _ZoneDrawing, Any]] = []
    gcol = zones.geometry.name
    for z in zones.to_dict("records"):  # plain rows: a Series a row cost more than the row
        geom = z[gcol]
        d = _geom_path(geom, frame.fx, frame.fy)
        if not d:
            continue
        zone = _zone_drawing(z, labelled="label" in zones.columns, top=top, pid=pid,
                             rate_unit=rate_unit, exclusion_kinds=exclusion_kinds)
        drawn.append({"d": d, "fill": zone.fill, "tip": zone.tip})
        pending.append((geom.area * frame.scale * frame.scale, zone, geom))
    # labels inside their zones, the smallest zones first (they have the fewest places);
    # then a numbered callout for each rate zone left without one
    callouts = []
    for area_px, zone, geom in sorted(pending, key=lambda t: t[0]) if labelled else ():
        if not (area_px >= LABEL_MIN_AREA_PX and labels.place(zone, geom)) \
                and not zone.excluded:
            callouts.append((zone, geom))
    for zone, geom in callouts:
        labels.callout(zone, geom)
    return _drawing("zone_map", {
        "width": frame.width, "height": frame.height, "pid": pid, "zones": drawn,
        "outline": (_geom_path(outline, frame.fx, frame.fy)
                    if outline is not None and not outline.is_empty else ""),
        "labels": labels.labels, "bar": frame.scale_bar(frame.height - 14),
    })


@dataclass(frozen=True)
class _Frame:
    """Map units (metres) to the drawing's pixels: north up, ``pad`` around, ``foot``
    pixels under the map for the scale bar."""

    minx: float
    maxy: float
    dx: float
    scale: float
    pad: int
    width: int
    height: int

    @classmethod
    def around(cls, geoms: Sequence[Any], *, width: int, max_height: int, pad: int,
               foot: int, min_width: int | None = None) -> _Frame:
        """The largest frame within ``width`` x ``max_height`` that holds every geometry
        (``min_width``: the zone map's narrowest; None: the drawing as wide as the map)."""
        minx = min(g.bounds[0] for g in geoms)
        miny = min(g.bounds[1] for g in geoms)
        maxx = max(g.bounds[2] for g in geoms)
        maxy = max(g.bounds[3] for g in geoms)
        dx, dy = max(maxx - minx, 1e-9), max(maxy - miny, 1e-9)
        scale = min((width - 2 * pad) / dx, (max_height - 2 * pad - foot) / dy)
        if min_width is None:
            height = int(math.ceil(dy * scale + 2 * pad + foot))
            width = int(math.ceil(dx * scale + 2 * pad))
        else:
            height = min(max_height, int(math.ceil(dy * scale + 2 * pad + foot - 1e-6)))
            width = min(width, max(min_width, int(math.ceil(dx * scale + 2 * pad - 1e-6))))
        return cls(minx, maxy, dx, scale, pad, width, height)

    def fx(self, x: float) -> float:
        return self.pad + (x - self.minx) * self.scale

    def fy(self, y: float) -> float:
        return self.pad + (self.maxy - y) * self.scale

    def scale_bar(self, y: float) -> dict[str, Any]:
        """A scale bar about a quarter of the map's width, its baseline at ``y``."""
        bar_m = _nice_step(self.dx / 4, 1)
        label = f"{bar_m / 1000:g} km" if bar_m >= 1000 else f"{bar_m:g} m"
        return {"x": self.pad, "y": y, "width": bar_m * self.scale, "label": label}


@dataclass(frozen=True)
class _ZoneDrawing:
    """How one zone is drawn: fill, tooltip, the label it would like and its ink."""

    fill: str
    tip: str
    label: str
    number: str
    excluded: bool


def _zone_drawing(z: Any, *, labelled: bool, top: float, pid: str, rate_unit: str,
                  exclusion_kinds: Mapping[str, str] | None) -> _ZoneDrawing:
    excluded = str(z["kind"]) == "exclusion"
    rate = float(z["rate_kg_ha"]) if not _isnan(z["rate_kg_ha"]) else math.nan
    name = str(z["label"]) if labelled and not _isnan(z["label"]) else ""
    what = exclusion_kind(name, exclusion_kinds)
    number = _zone_label(z["zone"])
    rate_txt = _rate_text(rate, rate_unit)
    if excluded:
        fill = f"url(#{pid}-creek)" if what == "creek buffer" else f"url(#{pid})"
        tip = f"{what}: {name} (not spread)" if name else f"{what} (not spread)"
        label = "creek buffer" if what == "creek buffer" else "excluded"
    else:
        fill = rate_colour(rate, top)
        tip = f"zone {number}: {rate_txt}"
        label = f"{number} · {rate_txt}"
    return _ZoneDrawing(fill=fill, tip=tip, label=label, number=number, excluded=excluded)


#: Width (px) a label's box allows per character: bold 12 px digits in the report's fonts
#: advance about 0.7 em (DejaVu Sans Bold 0.696 em, from memory), so 8.4 px, over-estimated
#: on purpose; :data:`LABEL_HALF_H` half the box's height.
LABEL_CHAR_PX = 8.4
LABEL_HALF_H = 8.0
#: Least share of a label's box inside its zone (the rest may lie over a neighbour zone, never
#: over another label, an exclusion or the drawing's edge).
LABEL_MIN_SHARE = 0.6
#: A zone smaller than this on the drawing (px²) gets a numbered callout, not a label inside.
LABEL_MIN_AREA_PX = 120.0


class _LabelPlacer:
    """Zone labels inside the drawing, over no other label and no exclusion.

    Each zone's label goes where it fits wholly inside its zone, as near the zone's label
    point as it can (the whole label, else the zone number alone); a zone with no such
    place (too small, or crowded) gets its number outside, in a free place nearby, with a
    leader line to it (a numbered callout; the table under the map lists every zone).
    Boxes are measured at :data:`LABEL_CHAR_PX` a character, wider than the bold 12 px
    digits drawn, so a real label fits in the box (checked in a browser by the tests).
    """

    def __init__(self, frame: _Frame, obstacles: Any = None) -> None:
        self.frame = frame
        self.bounds = (1.0, 1.0, frame.width - 1.0, frame.height - 30.0)  # scale bar under
        self.obstacles = obstacles  # exclusions in pixels (a labelled zone may not cover)
        self.labels: list[dict[str, Any]] = []
        self.boxes: list[tuple[float, float, float, float]] = []

    @staticmethod
    def box_of(x: float, y: float, text: str) -> tuple[float, float, float, float]:
        half_w, half_h = LABEL_CHAR_PX / 2 * len(text) + 2, LABEL_HALF_H
        return (x - half_w, y - half_h, x + half_w, y + half_h)

    def free(self, bx: tuple[float, float, float, float], *, own: Any = None) -> bool:
        """Inside the drawing, over no label placed before and (unless ``own`` is the
        exclusion itself) over no exclusion."""
        x0, y0, x1, y1 = self.bounds
        if bx[0] < x0 or bx[1] < y0 or bx[2] > x1 or bx[3] > y1:
            return False
        for ox in self.boxes:
            if bx[0] < ox[2] and ox[0] < bx[2] and bx[1] < ox[3] and ox[1] < bx[3]:
                return False
        if self.obstacles is not None and own is None:
            if shapely.box(*bx).intersects(self.obstacles):
                return False
        return True

    def to_px(self, geom: Any) -> Any:
        f = self.frame
        return shapely.transform(
            geom, lambda c: np.column_stack([f.fx(c[:, 0]), f.fy(c[:, 1])]))

    def candidates(self, geom_px: Any) -> list[tuple[float, float]]:
        """Places in the zone, its label point first, then the rest nearest it first."""
        anchor = label_point(geom_px)
        out = [(anchor.x, anchor.y)]
        x0, y0, x1, y1 = geom_px.bounds
        grid_x, grid_y = np.meshgrid(np.arange(x0 + 2, x1, 4.0), np.arange(y0 + 2, y1, 4.0))
        xs, ys = grid_x.ravel(), grid_y.ravel()
        shapely.prepare(geom_px)  # thousands of points in one polygon: indexed, 17x faster
        inside = shapely.contains_xy(geom_px, xs, ys)
        xs, ys = xs[inside], ys[inside]
        order = np.argsort(np.hypot(xs - anchor.x, ys - anchor.y), kind="stable")[:600]
        out += [(float(xs[i]), float(ys[i])) for i in order]
        return out

    def place(self, zone: _ZoneDrawing, geom: Any) -> bool:
        """The zone's label in a free place centred in the zone: the whole label wholly
        inside the zone, else mostly inside (:data:`LABEL_MIN_SHARE`), else the zone number
        alone likewise; False when none of these has a free place."""
        geom_px = self.to_px(geom)
        tries = [(zone.label, 1.0), (zone.label, LABEL_MIN_SHARE)]
        if not zone.excluded:
            tries += [(zone.number, 1.0), (zone.number, LABEL_MIN_SHARE)]
        own = geom_px if zone.excluded else None
        places = self.candidates(geom_px)
        xs = np.array([p[0] for p in places])
        ys = np.array([p[1] for p in places])
        room = geom_px.buffer(1.0)
        shapely.prepare(room)
        for text, share in tries:
            hw = LABEL_CHAR_PX / 2 * len(text) + 2
            # the places in order, a block at a time (the first places usually do): a
            # whole label needs its box inside the zone (a prepared test); a label mostly
            # inside, the share of its box's area inside
            for start in range(0, xs.size, _PLACE_BLOCK):
                bx_, by_ = xs[start:start + _PLACE_BLOCK], ys[start:start + _PLACE_BLOCK]
                boxes = shapely.box(bx_ - hw, by_ - LABEL_HALF_H, bx_ + hw, by_ + LABEL_HALF_H)
                if share >= 1.0:
                    fits = shapely.contains(room, boxes)
                else:
                    fits = _share_inside(room, bx_, by_, hw, LABEL_HALF_H) >= share - 1e-9
                for i in np.flatnonzero(fits):
                    bx = self.box_of(float(bx_[i]), float(by_[i]), text)
                    if self.free(bx, own=own):
                        # spilling over a neighbour: dark ink on a white halo, legible on
                        # any fill
                        ink = None if share >= 1.0 else "#111"
                        self._add(zone, text, float(bx_[i]), float(by_[i]), bx, ink=ink,
                                  halo=share < 1.0)
                        return True
        return False

    def callout(self, zone: _ZoneDrawing, geom: Any) -> bool:
        """The zone number outside the zone, in the nearest free place round it, with a
        leader line from the zone's label point."""
        geom_px = self.to_px(geom)
        anchor = label_point(geom_px)
        text = zone.number
        for r in (16.0, 24.0, 34.0, 46.0, 60.0, 80.0):
            for k in range(16):
                a = math.pi / 2 - k * math.pi / 8
                x, y = anchor.x + r * math.cos(a), anchor.y - r * math.sin(a)
                bx = self.box_of(x, y, text)
                if self.free(bx):
                    self._add(zone, text, x, y, bx, leader=(anchor.x, anchor.y), ink="#111",
                              halo=True)
                    return True
        return False

    def _add(self, zone: _ZoneDrawing, text: str, x: float, y: float,
             bx: tuple[float, float, float, float], *, leader: tuple[float, float] | None = None,
             ink: str | None = None, halo: bool = False) -> None:
        if ink is None:
            ink = ("#111" if zone.excluded or not zone.fill.startswith("#")
                   or _luminance(zone.fill) > 0.35 else "#fff")
        self.boxes.append(bx)
        item: dict[str, Any] = {"ink": ink, "x": x, "y": y, "text": text, "box": bx,
                                "leader": None, "halo": halo}
        if leader is not None:
            # from the zone's label point to the box's nearest edge
            ex = min(max(leader[0], bx[0]), bx[2])
            ey = min(max(leader[1], bx[1]), bx[3])
            item["leader"] = {"x1": leader[0], "y1": leader[1], "x2": ex, "y2": ey}
        self.labels.append(item)


#: Label places tried at once (in order) by the zone maps' label placement.
_PLACE_BLOCK = 48


def _share_inside(room: Any, xs: np.ndarray, ys: np.ndarray, half_w: float,
                  half_h: float) -> np.ndarray:
    """The share of each box (centre ``xs``, ``ys``; half sizes ``half_w``, ``half_h``)
    inside the polygon ``room``.

    The same areas as ``shapely.intersection(boxes, room)`` (a test holds them equal), by
    GEOS's rectangle clipping, from the polygon first cut to the boxes' common bounds: a
    few vertices instead of the whole zone's, and 3x faster on the demo's zone maps.
    """
    near = shapely.clip_by_rect(room, float(xs.min() - half_w), float(ys.min() - half_h),
                                float(xs.max() + half_w), float(ys.max() + half_h))
    inside = [shapely.area(shapely.clip_by_rect(near, x - half_w, y - half_h, x + half_w,
                                                y + half_h))
              for x, y in zip(xs.tolist(), ys.tolist(), strict=True)]
    return np.asarray(inside, dtype="float64") / (4.0 * half_w * half_h)


def exclusion_kind(label: str, kinds: Mapping[str, str] | None) -> str:
    """``"creek buffer"`` when any name in ``label`` (names joined by commas) is a creek
    buffer in ``kinds``, else ``"exclusion"``.

    Examples
    --------
    >>> exclusion_kind("Bellbird Creek", {"Bellbird Creek": "creek buffer"})
    'creek buffer'
    >>> exclusion_kind("Tree clump", {"Bellbird Creek": "creek buffer"})
    'exclusion'
    """
    kinds = kinds or {}
    parts = [p.strip() for p in str(label).split(",")]
    return "creek buffer" if any(kinds.get(p) == "creek buffer" for p in parts) else "exclusion"


def surface_map_svg(
    soil: SoilMap,
    *,
    paddocks: gpd.GeoDataFrame,
    samples: gpd.GeoDataFrame | None = None,
    exclusions: gpd.GeoDataFrame | None = None,
    exclusion_kinds: Mapping[str, str] | None = None,
    width: int = 640,
    max_height: int = 440,
    uid: str = "s",
    max_samples: int | None = None,
) -> str:
    """Static map of one soil surface over the farm: the surface in its colour classes
    (a PNG inside the SVG), exclusions hatched, paddock outlines and the samples on top.

    Parameters
    ----------
    soil
        The surface and its classes.
    paddocks
        ``paddock`` and polygons, in the surface's CRS (projected, metres).
    samples
        Optional points (same CRS).
    exclusions
        Optional zones of kind ``exclusion`` (``label``, polygons).
    exclusion_kinds
        Label -> ``"creek buffer"`` or ``"exclusion"``.
    width, max_height
        Largest size in CSS pixels.
    uid
        Text unique in the page, for pattern ids.
    max_samples
        Most samples drawn (None: all); above it, the spread subset of
        :func:`sample_dots`.

    Returns
    -------
    str
        The SVG markup.

    Examples
    --------
    >>> import affine, geopandas as gpd
    >>> from shapely.geometry import box
    >>> from geosoil.presentation import classes_for
    >>> arr = np.array([[2.0, 8.0], [16.0, np.nan]])
    >>> soil = SoilMap("ESP", "%", arr, affine.Affine(100, 0, 0, 0, -100, 200),
    ...                classes_for("esp", arr))
    >>> pads = gpd.GeoDataFrame({"paddock": ["A"]}, geometry=[box(0, 0, 200, 200)],
    ...                         crs="EPSG:32755")
    >>> svg = surface_map_svg(soil, paddocks=pads)
    >>> svg.startswith("<svg"), "data:image/png;base64," in svg
    (True, True)
    """
    geoms = [g for g in paddocks.geometry if g is not None and not g.is_empty]
    h, w = soil.array.shape
    t = soil.transform
    rx0, ry0 = t.c, t.f
    rx1, ry1 = t.c + t.a * w, t.f + t.e * h
    raster = shapely.box(min(rx0, rx1), min(ry0, ry1), max(rx0, rx1), max(ry0, ry1))
    frame = _Frame.around([*geoms, raster], width=width, max_height=max_height, pad=10,
                          foot=24)
    pid = f"shatch-{uid}"
    excluded = []
    if exclusions is not None and len(exclusions):
        for _, z in exclusions.iterrows():
            name = str(z["label"]) if "label" in exclusions.columns else ""
            creek = exclusion_kind(name, exclusion_kinds) == "creek buffer"
            excluded.append({
                "d": _geom_path(z.geometry, frame.fx, frame.fy),
                "fill": f"url(#{pid}-creek)" if creek else f"url(#{pid})",
                "tip": f"{'creek buffer' if creek else 'exclusion'}: {name}",
            })
    points = []
    if samples is not None and len(samples):
        drawn = samples.iloc[sample_dots(samples, max_samples)]
        xy = point_xy(drawn.geometry.to_numpy())
        ids = ([str(v) for v in drawn["sample_id"].tolist()] if "sample_id" in drawn.columns
               else [""] * len(drawn))
        points = [{"x": frame.fx(x), "y": frame.fy(y), "id": sid}
                  for (x, y), sid in zip(xy.tolist(), ids, strict=True)]
    return _drawing("soil_map", {
        "width": frame.width, "height": frame.height, "title": soil.title, "pid": pid,
        "image": {"x": frame.fx(min(rx0, rx1)), "y": frame.fy(max(ry0, ry1)),
                  "width": abs(rx1 - rx0) * frame.scale, "height": abs(ry1 - ry0) * frame.scale,
                  "href": classes_data_uri(soil.array, soil.classes)},
        "exclusions": excluded,
        "outlines": [_geom_path(g, frame.fx, frame.fy) for g in geoms],
        "samples": points, "bar": frame.scale_bar(frame.height - 8),
    })


def sample_dots(samples: gpd.GeoDataFrame, most: int | None) -> np.ndarray:
    """Indices of the samples a soil map draws: all when at most ``most`` (or ``most`` is
    None), else a spread subset of ``most`` (:func:`geosoil.points.spread_subset`, seeded:
    the same dots on every map and every run), ascending.

    >>> from shapely.geometry import Point
    >>> pts = gpd.GeoDataFrame(geometry=[Point(i, 0) for i in range(10)], crs="EPSG:32755")
    >>> sample_dots(pts, None).tolist(), len(sample_dots(pts, 4))
    ([0, 1, 2, 3, 4, 5, 6, 7, 8, 9], 4)
    """
    from .points import spread_subset

    n = len(samples)
    if most is None or n <= most:
        return np.arange(n)
    xy = shapely.get_coordinates(shapely.centroid(samples.geometry.to_numpy()))
    return spread_subset(xy, most)


# --------------------------------------------------------------------------- page


def _templates() -> Any:
    from .pages import environment

    return environment("report")


def _css() -> Any:
    import importlib.resources

    from markupsafe import Markup

    text = (importlib.resources.files("geosoil") / "templates" / "report.css").read_text(
        encoding="utf-8")
    return Markup(text.replace("</", "<\\/"))


def _mass(unit: str) -> tuple[str, str]:
    """The tonnage column and its header label for a rate unit: short tons with lb/ac."""
    return ("short_tons", "short tons") if unit == "lb/ac" else ("tonnes", "t")


def _area(ha: Any, unit: str, digits: int = 2) -> str:
    """An area given in ha, shown in the area unit of the rate unit (acres beside lb/ac)."""
    from .units import area_in, area_unit_for

    if _isnan(ha):
        return "–"
    return _num(area_in(float(ha), area_unit_for(unit)), digits)


def _area_of(row: Any, unit: str) -> str:
    """A tonnage row's area in the rate unit's area unit: its own rounded acres (which add up
    as the hectares do) where the table has them."""
    if _area_unit(unit) == "ac" and "area_ac" in row and not _isnan(row["area_ac"]):
        return _num(row["area_ac"], 2)
    return _area(row["area_ha"], unit)


def _density_line(d: SampleDensity, au: str) -> str:
    """A paddock's sample density in one line, in the area unit ``au``."""
    area, per, each = d.in_unit(au)
    return (f"{_num(area, 2)} {au} · {d.samples} sample(s) · {_num(per, 2)} samples per {au} "
            f"({_num(each, 1)} {au} per sample)")


def _area_unit(unit: str) -> str:
    from .units import area_unit_for

    return area_unit_for(unit)


def _cost_header(currency: str) -> str:
    return f"cost ({currency})" if currency else "cost"


def _mass_of(row: Any, unit: str) -> Any:
    col = _mass(unit)[0]
    return row[col] if col in row else row["tonnes"]


def _cell(text: str, *, swatch: str | None = None, cls: str = "") -> dict[str, Any]:
    return {"text": text, "swatch": swatch, "cls": cls}


def _tonnage_table(
    df: pd.DataFrame, zones: gpd.GeoDataFrame, *, top: float, unit: str,
    kinds: Mapping[str, str] | None, currency: str = "",
    water: Mapping[str, tuple[float, float | None]] | None = None, leaching_esp: float = 15.0,
) -> dict[str, Any]:
    """Headers and rows of one paddock's tonnage table for one product."""
    schedules: dict[Any, str] = {}
    names: dict[Any, tuple[str, str]] = {}
    if len(zones):
        if "schedule" in zones.columns:
            schedules = {z: str(t) for z, t in zip(zones["zone"], zones["schedule"], strict=True)
                         if isinstance(t, str) and t}
        for z in zones.to_dict("records"):
            if str(z["kind"]) == "exclusion":
                label = str(z["label"]) if "label" in zones.columns and not _isnan(z["label"]) \
                    else ""
                names[z["zone"]] = (exclusion_kind(label, kinds), label)
    split = bool(schedules)
    headers = [("zone", False), (f"area ({_area_unit(unit)})", True), (f"rate ({unit})", True)]
    if split:
        headers.append(("applied as", False))
    headers += [(f"product ({_mass(unit)[1]})", True), ("truckloads", True),
                (_cost_header(currency), True)]
    if water:
        headers += [("water to dissolve (mm)", True), ("leaching and drainage", False)]
    rows = []
    order = df.assign(_o=(df["level"] != "zone").astype(int)).sort_values("_o", kind="stable")
    for r in order.to_dict("records"):
        level = str(r["level"]).lower()
        is_zone = level == "zone"
        if is_zone and r["zone"] in names:
            what, label = names[r["zone"]]
            first = _cell(f"{_zone_label(r['zone'])} · {what}" + (f": {label}" if label else "")
                          + " (not spread)", swatch="hatch-creek" if what == "creek buffer"
                          else "hatch")
        elif is_zone:
            rate = r["rate_kg_ha"]
            colour = rate_colour(float(rate), top) if not _isnan(rate) else None
            first = _cell(_zone_label(r["zone"]), swatch=colour)
        else:
            first = _cell("total" if level in ("paddock", "farm") else level)
        cells = [first, _cell(_area_of(r, unit), cls="num"),
                 _cell(_rate_text(r["rate_kg_ha"], unit, with_unit=False) if is_zone else "",
                       cls="num")]
        if split:
            spread = is_zone and not _isnan(r["rate_kg_ha"]) and float(r["rate_kg_ha"]) > 0
            text = schedules.get(r["zone"], "") if is_zone else ""
            cells.append(_cell(text or ("one pass" if spread else "")))
        cells += [_cell(_num(_mass_of(r, unit), 2), cls="num"),
                  _cell(_num(r["truckloads"], 0), cls="num"), _cell(_num(r["cost"], 2), cls="num")]
        if water:
            mm, share = water.get(str(r["zone"]), (None, None)) if is_zone else (None, None)
            cells += [_cell("" if mm is None else _num(mm, 0), cls="num"),
                      _cell(_leaching_text(share, leaching_esp))]
        rows.append({"cells": cells, "cls": "" if is_zone else "total"})
    return {"headers": headers, "rows": rows, "css": "tonnage"}


def _leaching_text(share: float | None, limit: float) -> str:
    """The leaching caution of one gypsum zone, from the share of it at or above ``limit``."""
    if share is None:
        return ""
    if share <= 0:
        return f"ESP below {_num(limit, 0)} %"
    return (f"needed: ESP ≥ {_num(limit, 0)} % on {_num(100 * share, 0)} % of the zone; "
            "the soil must drain")


def _simple_table(headers: Sequence[tuple[str, bool]], rows: Sequence[Sequence[str]],
                  css: str) -> dict[str, Any]:
    return {"headers": list(headers), "css": css, "rows": [
        {"cells": [_cell(str(c), cls="num" if headers[j][1] else "") for j, c in enumerate(row)],
         "cls": ""} for row in rows]}


def _ordered_unique(values: Any) -> list[Any]:
    seen: dict[Any, None] = {}
    for v in values:
        if not _isnan(v):
            seen.setdefault(v, None)
    return list(seen)


def _glance_table(data: ReportInput, products: Sequence[str]) -> dict[str, Any] | None:
    if not data.glance:
        return None
    kinds = sorted({k for g in data.glance for k in g.excluded_ha})
    u = data.rate_unit
    au = _area_unit(u)
    headers = [("paddock", False), (f"area ({au})", True)]
    headers += [(f"{k} ({au})", True) for k in kinds]
    headers += [(f"sodic, {data.sodic_labels[0]} ({au})", True),
                (f"strongly sodic, {data.sodic_labels[1]} ({au})", True),
                (f"acid, {data.acid_label} ({au})", True)]
    headers += [(f"needs {p} ({au})", True) for p in products]
    rows = []
    mass = _mass(data.rate_unit)[1]
    for g in data.glance:
        row = [g.paddock, _area(g.area_ha, u)]
        row += [_area(g.excluded_ha.get(k, 0.0), u) for k in kinds]
        row += [_area(v, u) if v is not None else "–"
                for v in (g.sodic_ha, g.strongly_sodic_ha, g.acid_ha)]
        row += [(_area(g.product_ha[p], u) + f" ({_num(g.product_t.get(p, 0.0), 1)} {mass})")
                if p in g.product_ha else "–" for p in products]
        rows.append(row)
    return _simple_table(headers, rows, "glance")


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
    from markupsafe import Markup

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
    density = {d.paddock: d for d in data.density}
    kinds = data.exclusion_kinds
    created = (data.created.isoformat(timespec="minutes") if isinstance(data.created, datetime)
               else str(data.created))

    farm = tonnage[tonnage["level"] == "farm"]
    farm_table = _simple_table(
        [("product", False), (f"area ({_area_unit(data.rate_unit)})", True),
         (f"product ({_mass(data.rate_unit)[1]})", True),
         ("truckloads", True), (_cost_header(data.currency), True)],
        [[str(r["product"]), _area_of(r, data.rate_unit),
          _num(_mass_of(r, data.rate_unit), 2),
          _num(r["truckloads"], 0), _num(r["cost"], 2)] for _, r in farm.iterrows()],
        "farm-totals") if len(farm) else None

    excl_zones = zones[zones["kind"].astype(str) == "exclusion"]
    if len(excl_zones):
        excl_zones = excl_zones[excl_zones["product"] == excl_zones["product"].iloc[0]]
    soil_maps = []
    most = data.max_sample_dots or REPORT_MAX_SAMPLE_DOTS
    n_samples = len(data.samples) if data.samples is not None else 0
    samples_note = {"drawn": min(most, n_samples), "total": n_samples,
                    "source": data.samples_source}
    for k, soil in enumerate(data.soil_maps):
        map_svg = surface_map_svg(soil, paddocks=_metric(data.paddocks),
                                  samples=data.samples, exclusions=excl_zones,
                                  exclusion_kinds=kinds, uid=str(k), max_samples=most)
        soil_maps.append({"title": soil.title, "unit": soil.unit, "svg": Markup(map_svg),
                          "legend": soil.classes.legend(), "note": soil.classes.note})
    has_creek = any(exclusion_kind(str(lab), kinds) == "creek buffer"
                    for lab in (excl_zones["label"] if "label" in excl_zones.columns else []))

    paddocks = []
    for i, paddock in enumerate(paddock_names):
        d = density.get(paddock)
        pz = zones[zones["paddock"].astype(str) == paddock]
        pt = tonnage[(tonnage["paddock"].astype(str) == paddock) & (tonnage["level"] != "farm")]
        prods = _ordered_unique([str(p) for p in pz["product"]] + [str(p) for p in pt["product"]])
        blocks = []
        for j, product in enumerate(prods):
            zp = pz[pz["product"].astype(str) == product]
            svg = None
            notes = []
            if len(zp):
                svg = Markup(zone_map_svg(zp, outline=paddock_geoms.get(paddock),
                                          top_rate=top_rate.get(product),
                                          rate_unit=data.rate_unit, uid=f"{i}-{j}",
                                          exclusion_kinds=kinds))
                ex = zp[zp["kind"].astype(str) == "exclusion"]
                labels = [str(x) for x in ex["label"]] if "label" in ex.columns else [""] * len(ex)
                if any(exclusion_kind(lab, kinds) == "creek buffer" for lab in labels):
                    notes.append("Hatched blue: creek buffer, not spread.")
                if any(exclusion_kind(lab, kinds) != "creek buffer" for lab in labels):
                    notes.append("Hatched grey: excluded from spreading.")
            tp = pt[pt["product"].astype(str) == product]
            water = {z: v for (pad, prod, z), v in data.zone_water.items()
                     if pad == paddock and prod == product}
            table = (_tonnage_table(tp, zp, top=top_rate.get(product, 0.0),
                                    unit=data.rate_unit, kinds=kinds, currency=data.currency,
                                    water=water, leaching_esp=data.leaching_esp)
                     if len(tp) else None)
            if water:
                notes.append(
                    "Water: rain or irrigation that only dissolves the zone's gypsum (about "
                    "2.5 g/L, common practice); leaching the displaced sodium needs more, and "
                    f"where a zone has ESP at or above {_num(data.leaching_esp, 0)} % the soil "
                    "must drain for gypsum to work: where it does not, drainage comes first.")
            blocks.append({"product": product, "svg": svg, "notes": " ".join(notes),
                           "unlabelled": len(zp) if len(zp) > MAX_ZONE_LABELS else 0,
                           "table": table})
        paddocks.append({
            "anchor": f"paddock-{i}", "name": paddock, "blocks": blocks,
            "density": None if d is None else _density_line(d, _area_unit(data.rate_unit)),
        })

    cv_table = _simple_table(
        [("surface", False), ("paddock", False), ("method", False), ("model", False),
         ("samples", True), ("mean error", True), ("RMSE", True), ("MSSE", True)],
        [[v.variable, v.paddock, v.method, v.model or "–",
          str(v.n_samples) if v.n_samples is not None else "–", _sig(v.cv_mean_error),
          _sig(v.cv_rmse), _sig(v.cv_msse)] for v in data.variograms],
        "cross-validation") if data.variograms else None
    variograms = []
    for v in data.variograms:
        params = (f"{v.model}: nugget {_sig(v.nugget)}, partial sill {_sig(v.psill)}, "
                  f"range {_sig(v.range_m)} m" if v.model else v.method)
        variograms.append({"svg": Markup(variogram_svg(v)), "variable": v.variable,
                           "unit": v.unit, "paddock": v.paddock, "params": params,
                           "note": v.note})
    uncertainty = _simple_table(
        [("surface", False), ("paddock", False), ("SD threshold", True),
         ("area above threshold", True), ("largest SD", True), ("mean SD", True)],
        [[u.variable, u.paddock, f"{_sig(u.sd_threshold)} {u.unit}".strip(),
          _num(100.0 * u.share_above, 1, thousands=False) + " %",
          f"{_sig(u.sd_max)} {u.unit}".strip(),
          f"{_sig(u.sd_mean)} {u.unit}".strip() if u.sd_mean is not None else "–"]
         for u in data.uncertainty], "uncertainty") if data.uncertainty else None
    au = _area_unit(data.rate_unit)  # acres beside a rate per acre, as the other tables
    density_table = _simple_table(
        [("paddock", False), ("samples", True), (f"area ({au})", True),
         (f"samples per {au}", True), (f"{au} per sample", True)],
        [[d.paddock, str(d.samples),
          *(_num(v, n) for v, n in zip(d.in_unit(au), (2, 2, 1), strict=True))]
         for d in data.density], "density") if data.density else None

    nav = [("cautions", "Cautions"), ("summary", "Farm totals")]
    if data.glance:
        nav.append(("glance", "Paddocks at a glance"))
    if soil_maps:
        nav.append(("soil-maps", "Soil maps"))
    nav += [(p["anchor"], f"Paddock {p['name']}") for p in paddocks]
    nav += [("surfaces", "Surfaces and variograms"),
            ("uncertainty", "Where the maps are least certain"), ("density", "Sample density"),
            ("assumptions", "Assumptions and methods"), ("warnings", "Warnings and notes"),
            ("provenance", "Provenance")]
    page = _templates().get_template("report.html").render(
        css=_css(), data=data, created=created,
        version=data.provenance.versions.get("geosoil", ""), nav=nav,
        n_paddocks=len(paddock_names), n_products=len(products),
        farm_table=farm_table, glance=_glance_table(data, products),
        soil_maps=soil_maps, has_creek=has_creek, has_exclusion=len(excl_zones) > 0,
        samples_note=samples_note,
        paddocks=paddocks, cv_table=cv_table, variograms=variograms,
        uncertainty=uncertainty, density_table=density_table,
        assumptions=_simple_table([("assumption", False), ("value", False)],
                                  [[k, v] for k, v in data.assumptions.items()], "assumptions")
        if data.assumptions else None,
        methods=_simple_table([("rule or method", False), ("source", False)],
                              [[a, b] for a, b in data.methods], "methods")
        if data.methods else None,
        versions=_simple_table([("software", False), ("version", False)],
                               [[k, v] for k, v in data.provenance.versions.items()], "versions")
        if data.provenance.versions else None,
    )
    logger.debug("report: %d paddocks, %d surfaces", len(paddock_names), len(data.variograms))
    return page


# --------------------------------------------------------------------------- seasons


@dataclass(frozen=True)
class ChangeReportInput:
    """What the report of a comparison of two seasons shows (``geosoil compare``).

    ``summary`` holds one mapping per paddock and variable (``label, unit,
    method, paired_sites, last_mean, this_mean, change_mean, rose_pct, fell_pct,
    no_change_beyond_error_pct, no_error_surface_pct``); ``zone_table`` is
    :func:`geosoil.change.zone_change_table`; ``maps`` are figures
    (``title, unit, svg, legend, note``).
    """

    title: str
    seasons: Mapping[str, Mapping[str, str]]
    summary: Sequence[Mapping[str, Any]]
    zone_table: pd.DataFrame
    variables: Sequence[str]
    labels: Mapping[str, tuple[str, str]]
    z: float
    method: str
    independence: str
    ph: str | None
    warnings: Sequence[str]
    cautions: Sequence[str] = CAUTIONS
    maps: Sequence[Mapping[str, Any]] = ()
    version: str = ""
    created: datetime | None = None


def _signed(value: Any, digits: int = 2) -> str:
    if _isnan(value):
        return "–"
    v = round(float(value), digits)
    return f"{v:+.{digits}f}" if v != 0 else f"{0:.{digits}f}"


def build_change_report(data: ChangeReportInput) -> str:
    """The comparison of two seasons as one static HTML page (nothing loaded from outside).

    Examples
    --------
    >>> import pandas as pd
    >>> page = build_change_report(ChangeReportInput(
    ...     title="Farm: change", seasons={"last": {"source": "a", "kind": "project"},
    ...     "this": {"source": "b", "kind": "project"}}, summary=[], zone_table=pd.DataFrame(),
    ...     variables=[], labels={}, z=1.96, method="m", independence="i", ph=None,
    ...     warnings=["<w>"]))
    >>> "&lt;w&gt;" in page and "Change per zone" in page
    True
    """
    summary = _simple_table(
        [("paddock", False), ("variable", False), ("method", False), ("last season", True),
         ("this season", True), ("mean change", True), ("rose %", True), ("fell %", True),
         ("no change beyond error %", True), ("not judged %", True)],
        [[r["paddock"], f"{r['label']}" + (f" ({r['unit']})" if r["unit"] else ""),
          str(r.get("method", "independent")) + (f" ({r['paired_sites']})"
                                                 if r.get("paired_sites") else ""),
          _num(r["last_mean"]), _num(r["this_mean"]), _signed(r["change_mean"]),
          _num(r["rose_pct"], 1), _num(r["fell_pct"], 1),
          _num(r["no_change_beyond_error_pct"], 1), _num(r["no_error_surface_pct"], 1)]
         for r in data.summary], "change-summary")
    t = data.zone_table
    heads: list[tuple[str, bool]] = [("paddock", False), ("product", False), ("zone", False),
                                     ("prescribed kg/ha", True), ("area ha", True)]
    for v in data.variables:
        heads.append((f"{data.labels[v][0]} change", True))
    rows = []
    for _, r in (t.iterrows() if len(t) else iter(())):
        row = [str(r["paddock"]), str(r["product"]), str(r["zone"]),
               _num(r["prescribed_rate_kg_ha"], 0), _num(r["area_ha"])]
        for v in data.variables:
            fell, rose = (("–" if _isnan(r[f"{v}_{k}_pct"]) else f"{r[f'{v}_{k}_pct']:.0f}")
                          for k in ("fell", "rose"))
            row.append(f"{_signed(r[f'{v}_change_mean'])} ({fell} / {rose})")
        rows.append(row)
    zones = _simple_table(heads, rows, "change-zones") if rows else None
    created = (data.created or datetime.now().astimezone()).strftime("%Y-%m-%d %H:%M %Z")
    return _templates().get_template("change_report.html").render(
        data=data, css=_css(), created=created, summary=summary, zones=zones,
        z=f"{data.z:g}")


# --------------------------------------------------------------------------- sampling plan


@dataclass(frozen=True)
class PlanReportInput:
    """What the report of a sampling plan shows (``geosoil plan``).

    ``paddocks`` are the plan record's rows (``paddock, variable, scale,
    existing_samples, new_points, weighting, min_distance_m,
    mean_kriging_variance_before/after, mean_variance_reduction_pct,
    weighted_variance_reduction_pct``); ``points`` the points table (``sample_id,
    paddock, rank, latitude, longitude, easting_m, northing_m, kriging_sd_now``);
    ``maps`` figures (``title, unit, svg, legend, note``).
    """

    title: str
    method: str
    paddocks: Sequence[Mapping[str, Any]]
    points: pd.DataFrame
    warnings: Sequence[str]
    budget: Mapping[str, Any] | None = None
    cautions: Sequence[str] = CAUTIONS
    maps: Sequence[Mapping[str, Any]] = ()
    version: str = ""
    created: datetime | None = None


def build_plan_report(data: PlanReportInput) -> str:
    """The sampling plan as one static HTML page: the expected reduction in mean kriging
    variance per paddock and every new point with its coordinates.

    Examples
    --------
    >>> import pandas as pd
    >>> page = build_plan_report(PlanReportInput(title="Plan", method="greedy", paddocks=[],
    ...     points=pd.DataFrame(), warnings=[]))
    >>> "New sample locations" in page
    True
    """
    pads = _simple_table(
        [("paddock", False), ("variable", False), ("why this variable", False),
         ("weighting", False), ("samples now", True),
         ("new points", True), ("least distance m", True), ("edge setback m", True),
         ("mean kriging variance now", True),
         ("after the plan", True), ("cut %", True), ("weighted cut %", True)],
        [[r["paddock"], (r["variable"] or "none") + (" (log)" if r["scale"] == "log" else ""),
          r.get("variable_reason", ""), r["weighting"], _num(r["existing_samples"], 0),
          _num(r["new_points"], 0),
          _num(r["min_distance_m"], 0), _num(r.get("edge_setback_m", 0.0), 0),
          _sig(r["mean_kriging_variance_before"]),
          _sig(r["mean_kriging_variance_after"]), _num(r["mean_variance_reduction_pct"], 1),
          _num(r["weighted_variance_reduction_pct"], 1)] for r in data.paddocks],
        "plan-paddocks")
    t = data.points
    pts = _simple_table(
        [("sample ID", False), ("paddock", False), ("rank", True), ("latitude", True),
         ("longitude", True), ("easting m", True), ("northing m", True),
         ("kriging sd now", True)],
        [[str(r["sample_id"]), str(r["paddock"]), _num(r["rank"], 0),
          f"{float(r['latitude']):.6f}", f"{float(r['longitude']):.6f}",
          _num(r["easting_m"], 1, thousands=False), _num(r["northing_m"], 1, thousands=False),
          _sig(r["kriging_sd_now"])] for _, r in (t.iterrows() if len(t) else iter(()))],
        "plan-points")
    created = (data.created or datetime.now().astimezone()).strftime("%Y-%m-%d %H:%M %Z")
    return _templates().get_template("plan_report.html").render(
        data=data, css=_css(), created=created, pads=pads, pts=pts)
