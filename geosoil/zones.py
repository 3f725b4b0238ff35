"""Spreader zones from per-cell product rates.

:func:`make_zones` turns one paddock's per-cell rate raster for one product
(kg/ha, NaN outside the paddock mask) into zones a spreader can follow, in one
of three ways, chosen by :attr:`ZoneSettings.method`:

* **rate classes** -- ``quantiles``, ``equal_interval`` (numpy), ``natural_breaks``
  (Jenks, computed by :mod:`jenkspy`) or ``kmeans`` (one-dimensional k-means,
  :func:`scipy.cluster.vq.kmeans2`) on the cell rates. Each class is one zone
  (it may have several parts).
* **user_zones** -- the user's own management-zone polygons; each gets one
  rate from the cells it covers.
* **spreader_grid** -- a regular grid of cells one working width across and
  :attr:`ZoneSettings.grid_length_m` long, turned to the travel direction.

How the zones are built
-----------------------
1. Exclusions (polygons; lines and points buffered by ``line_buffer_m``) are
   clipped to the paddock, dissolved and split into their connected parts;
   each part is a zone of kind ``"exclusion"`` with rate 0. The rest of the
   paddock is the *working area*.
2. Every cell's share of the working area is computed exactly (cell square
   intersected with the polygon), so a zone's rate is the area-weighted mean
   (or weighted percentile) of the cell rates under it, and the zones follow
   the real boundary instead of the cell staircase.
3. Rate classes: cells that need no product, or less than the spreader's
   minimum rate, form one class of their own (the ``"no product"`` zone);
   the classes asked for are made from the cells that need product (rate
   surfaces are often zero over most of a paddock, and classes over all
   cells would spend most classes on zeros). With ``smooth = true``
   one pass of a 3 x 3 majority filter replaces a cell's class by the class
   most common around it (ties keep the cell's own class), which removes
   single-cell speckle and ragged steps on class edges. Cells of the grid
   without a rate take the class of the nearest cell with one, so the classes
   tile the whole raster; each class is then polygonised
   (:func:`rasterio.features.shapes`) and clipped to the working area.
4. Connected pieces smaller than ``min_zone_area_ha`` (and pieces holding no
   cell with a rate) merge into the neighbour they share the longest edge
   with, smallest first, until none is left.
5. Any part of the working area no zone covers (user zones that leave gaps,
   a paddock reaching past the raster) merges into its neighbour when smaller
   than ``min_zone_area_ha``; the rest becomes one zone of kind
   ``"remainder"`` with its own rate, and a :class:`~geosoil.errors.DataWarning`
   says so.
6. Spreader limits turn each zone's raw rate into the rate to spread
   (:func:`limit_zone_rate`, which applies the spreader's own rules from
   :func:`geosoil.spreader.spreader_passes`: minimum rate, equal passes of at
   most the largest rate per pass, each rounded to the rate step).

So the zones of a paddock tile it: rate and remainder zones cover the working
area, exclusion zones cover the excluded part, with no gaps or overlaps.

Output columns: ``paddock``, ``product``, ``zone`` (1..n: rate zones, then the
remainder, then exclusions), ``kind``, ``label`` (class, user zone id, grid
cell, ``"no product"`` or exclusion name), ``rate_kg_ha`` (to spread, all
passes together), ``rate_raw_kg_ha`` (before spreader limits), ``passes`` (or
seasons), ``per_pass_kg_ha``, ``schedule`` (``"3 passes of 0.75 t/ha"`` or
``"2 seasons of 2.0 t/ha"``, in the spreader's unit; empty for one pass),
``area_ha``, ``n_cells`` (cells with a rate whose centre lies in the zone) and
``geometry`` in the working CRS. Rates are in kg/ha.

Rates are advisory: they inherit every error of the soil data, the
interpolation and the rules behind them.

Examples
--------
>>> import numpy as np, shapely
>>> from affine import Affine
>>> rate = np.array([[100.0, 100.0, 400.0, 400.0]] * 2)
>>> res = make_zones(rate, transform=Affine(10, 0, 0, 0, -10, 20), crs="EPSG:32755",
...                  paddock="North", product="gypsum", boundary=shapely.box(0, 0, 40, 20),
...                  settings=ZoneSettings(classes=2, min_zone_area_ha=0))
>>> for z in res.zones.itertuples():
...     print(z.zone, z.kind, z.rate_kg_ha, round(z.area_ha, 6))
1 rate 100.0 0.04
2 rate 400.0 0.04
"""

from __future__ import annotations

import functools
import heapq
import logging
import math
import re
import warnings
from collections import defaultdict
from collections.abc import Iterable
from dataclasses import dataclass, field
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import rasterio.features
import shapely
from affine import Affine
from numpy.typing import NDArray
from shapely.affinity import rotate
from shapely.geometry import shape as shape_from_geojson
from shapely.geometry.base import BaseGeometry

from .cellops import box_count, label_pieces, nearest_labelled
from .errors import CRSError, DataWarning, InputError, RateWarning, SettingsError
from .settings import setting
from .spreader import SpreaderSettings, pass_schedule, spreader_passes

__all__ = [
    "METHODS",
    "NO_PRODUCT",
    "ZONE_COLUMNS",
    "ZoneSettings",
    "ZoneResult",
    "ZoneRate",
    "make_zones",
    "classify_rates",
    "limit_zone_rate",
    "parse_statistic",
]

logger = logging.getLogger(__name__)

#: Ways of making zones.
METHODS: tuple[str, ...] = (
    "quantiles",
    "equal_interval",
    "natural_breaks",
    "kmeans",
    "user_zones",
    "spreader_grid",
)

#: Columns of the zones GeoDataFrame, in order.
ZONE_COLUMNS: tuple[str, ...] = (
    "paddock",
    "product",
    "zone",
    "kind",
    "label",
    "rate_kg_ha",
    "rate_raw_kg_ha",
    "passes",
    "per_pass_kg_ha",
    "schedule",
    "area_ha",
    "n_cells",
    "geometry",
)

#: Label of the zone whose cells need no product, or less than the spreader's minimum rate.
NO_PRODUCT = "no product"

_CLASS_METHODS = ("quantiles", "equal_interval", "natural_breaks", "kmeans")
_STATISTIC = re.compile(r"^p(\d{1,3}(?:\.\d+)?)$")
#: Above this many cell values, natural breaks are computed on this many evenly
#: spaced order statistics of the values (Jenks' optimisation grows with n²).
_JENKS_MAX_VALUES = 5000
#: Overlaps of user zones up to this share of the smaller zone (and up to
#: _OVERLAP_M2) are taken as digitising slivers and given to the earlier zone.
_OVERLAP_SHARE = 1e-3
_OVERLAP_M2 = 1.0
#: Distance (m) within which edges that should coincide are taken to touch.
_SNAP_M = 1e-3


def parse_statistic(text: str) -> float | None:
    """The percentile named by a zone statistic, or ``None`` for the mean.

    Parameters
    ----------
    text
        ``"mean"`` or ``"pNN"`` with NN from 0 to 100 (``"p50"``, ``"p90"``, ``"p87.5"``).

    Returns
    -------
    float or None
        The percentile (0-100), or None for the mean.

    Raises
    ------
    SettingsError
        Anything else (key ``statistic``).

    Examples
    --------
    >>> parse_statistic("mean") is None, parse_statistic("p75")
    (True, 75.0)
    """
    if text == "mean":
        return None
    m = _STATISTIC.match(text)
    if m is None or float(m.group(1)) > 100:
        raise SettingsError(
            f"'{text}' is not a zone statistic. Allowed: 'mean', or a percentile "
            "'p0' to 'p100' such as 'p50' or 'p90'",
            key="statistic",
        )
    return float(m.group(1))


@dataclass(frozen=True)
class ZoneSettings:
    """How rate zones are made for each paddock and product.

    Examples
    --------
    >>> from geosoil.settings import from_mapping
    >>> from_mapping(ZoneSettings, {"method": "kmeans", "classes": 3}, section="zones").classes
    3
    >>> from_mapping(ZoneSettings, {"statistic": "median"}, section="zones")
    Traceback (most recent call last):
    ...
    geosoil.errors.SettingsError: setting 'zones.statistic': 'median' is not a zone statistic...
    """

    method: str = setting(
        "quantiles",
        doc="how zones are made: rate classes (quantiles, equal_interval, natural_breaks, "
        "kmeans), the user's zone file (user_zones) or a grid along the travel direction "
        "(spreader_grid)",
        choices=METHODS,
    )
    classes: int = setting(
        4, doc="number of rate classes among the cells that need product (fewer when they "
        "hold fewer distinct rates); cells needing less than the spreader's minimum rate form "
        "one more, 'no product' zone",
        minimum=1, maximum=20,
    )
    statistic: str = setting(
        "mean",
        doc="a zone's rate from its cells: 'mean' (area-weighted) or a percentile such as 'p90'",
    )
    min_zone_area_ha: float = setting(
        0.5,
        doc="zones smaller than this merge into the neighbour sharing the longest edge "
        "(spreader_grid: edge cells smaller than this or half a full cell)",
        unit="ha", minimum=0.0,
    )
    smooth: bool = setting(
        False, doc="one 3 x 3 majority filter pass over the rate classes before polygonising"
    )
    working_width_m: float = setting(
        24.0, doc="spreader working width (spreader_grid: width of a grid cell)", unit="m",
        minimum=1.0, maximum=200.0,
    )
    grid_length_m: float | None = setting(
        None, doc="spreader_grid: length of a grid cell along the travel direction; "
        "unset: the working width", unit="m", minimum=1.0, maximum=1000.0,
    )
    travel_direction_deg: float = setting(
        0.0, doc="spreader_grid: direction of travel, clockwise from grid north",
        unit="degrees", minimum=0.0, maximum=360.0,
    )
    def __post_init__(self) -> None:
        parse_statistic(self.statistic)


@dataclass(frozen=True)
class ZoneResult:
    """Zones of one paddock and product, and notes on how they were made."""

    zones: gpd.GeoDataFrame
    notes: list[str] = field(default_factory=list)


# --------------------------------------------------------------------------- rate limits


@dataclass(frozen=True)
class ZoneRate:
    """What the spreader puts on one zone (see :func:`limit_zone_rate`)."""

    rate_kg_ha: float
    """All passes together, kg/ha."""
    passes: int
    """Number of passes (or seasons); 0 where nothing is spread."""
    per_pass_kg_ha: float
    """Rate of each pass, kg/ha."""
    schedule: str
    """``"3 passes of 0.75 t/ha"`` or ``"2 seasons of 2.0 t/ha"``; empty for one pass or none."""


def limit_zone_rate(raw_kg_ha: float, *, spreader: SpreaderSettings | None = None) -> ZoneRate:
    """A zone's rate to spread, its passes and their schedule, from its raw rate.

    The rules are the spreader's own, :func:`geosoil.spreader.spreader_passes`:
    below the minimum rate nothing is spread; otherwise the rate is split into
    the fewest equal passes of at most ``max_per_pass``, each rounded to the
    rate step by the spreader's ``rounding`` mode and kept between the smallest
    and largest spreadable step multiples. The zone's rate is passes x rate per
    pass. ``split_into`` names the passes in the schedule
    (:func:`geosoil.spreader.pass_schedule`).

    Parameters
    ----------
    raw_kg_ha
        The zone's rate before limits, kg/ha (not a number, or 0 or less: nothing spread).
    spreader
        The spreader's limits; ``None``: no limits (the raw rate in one pass).

    Returns
    -------
    ZoneRate
        Rate spread, passes, rate per pass and schedule.

    Examples
    --------
    >>> sp = SpreaderSettings(min_rate=250, max_per_pass=1000, rate_step=50)
    >>> limit_zone_rate(2345.0, spreader=sp)
    ZoneRate(rate_kg_ha=2400.0, passes=3, per_pass_kg_ha=800.0, schedule='3 passes of 800 kg/ha')
    >>> limit_zone_rate(180.0, spreader=sp).rate_kg_ha
    0.0
    """
    sp = spreader if spreader is not None else SpreaderSettings()
    if not math.isfinite(raw_kg_ha) or raw_kg_ha <= 0:
        return ZoneRate(0.0, 0, 0.0, "")
    passes, per = spreader_passes(float(raw_kg_ha), sp)
    if passes == 0 or not per > 0:
        return ZoneRate(0.0, 0, 0.0, "")
    return ZoneRate(round(passes * per, 9), int(passes), float(per),
                    pass_schedule(passes, per, sp))


# --------------------------------------------------------------------------- classes


def classify_rates(
    values: NDArray[np.float64], *, method: str, classes: int
) -> tuple[NDArray[np.int64], list[str]]:
    """Class numbers (1..k, low rates first) for a set of cell rates.

    Parameters
    ----------
    values
        Finite cell rates, kg/ha.
    method
        ``quantiles``, ``equal_interval`` (upper class bounds as
        :func:`_quantile_breaks` and :func:`_equal_interval_breaks` say; a value
        on a bound is in the lower class),
        ``natural_breaks`` (Jenks, :mod:`jenkspy`; above 5000 values, on 5000
        evenly spaced order statistics of them) or ``kmeans``
        (:func:`scipy.cluster.vq.kmeans2`, started from the class means of
        quantile classes, so the result is repeatable).
    classes
        Classes wanted. Fewer are made when the values hold fewer distinct
        rates, or when the method leaves classes empty; a note says so.

    Returns
    -------
    class numbers, notes

    Examples
    --------
    >>> cls, notes = classify_rates(np.array([0.0, 0, 10, 10, 50]), method="quantiles", classes=4)
    >>> cls.tolist(), notes
    ([1, 1, 2, 2, 3], ['3 distinct rates in the cells: 3 classes instead of 4'])
    """
    values = np.asarray(values, dtype=float)
    notes: list[str] = []
    if values.size == 0:
        return np.zeros(0, dtype=np.int64), notes
    distinct = np.unique(values)
    k = int(classes)
    if distinct.size < k:
        notes.append(f"{distinct.size} distinct rate{'s' if distinct.size != 1 else ''} "
                     f"in the cells: {distinct.size} class{'es' if distinct.size != 1 else ''} "
                     f"instead of {k}")
        k = int(distinct.size)
    if k <= 1:
        return np.ones(values.size, dtype=np.int64), notes
    if distinct.size == k:
        # one class per distinct rate, whatever the method
        return (np.searchsorted(distinct, values) + 1).astype(np.int64), notes
    if method == "quantiles":
        yb = np.searchsorted(_quantile_breaks(values, k), values, side="left")
    elif method == "equal_interval":
        yb = np.searchsorted(_equal_interval_breaks(values, k), values, side="left")
    elif method == "natural_breaks":
        import jenkspy

        sample = values
        if values.size > _JENKS_MAX_VALUES:
            sample = np.quantile(values, np.linspace(0.0, 1.0, _JENKS_MAX_VALUES))
        breaks = np.asarray(jenkspy.jenks_breaks(sample.tolist(), n_classes=k), dtype=float)
        inner = np.unique(breaks[1:-1])
        yb = np.searchsorted(inner, values, side="left")
    elif method == "kmeans":
        from scipy.cluster.vq import kmeans2

        order = np.argsort(values, kind="stable")
        start = np.array([chunk.mean() for chunk in np.array_split(values[order], k)])
        centres, _ = kmeans2(values.reshape(-1, 1), start.reshape(-1, 1), minit="matrix",
                             iter=50, missing="warn")
        centres = np.sort(centres.ravel())
        yb = np.abs(values[:, None] - centres[None, :]).argmin(axis=1)
    else:
        raise SettingsError(
            f"'{method}' is not a rate-class method. Allowed: {', '.join(_CLASS_METHODS)}",
            key="method",
        )
    used = np.unique(yb)
    cls = (np.searchsorted(used, yb) + 1).astype(np.int64)
    if used.size < k:
        notes.append(f"{method} left {k - used.size} of {k} classes empty: {used.size} classes")
    return cls, notes


def _quantile_breaks(values: NDArray[np.float64], k: int) -> NDArray[np.float64]:
    """Upper bounds of ``k`` quantile classes: the ``100 j / k`` th percentiles
    (j = 1..k, linear between order statistics), repeated bounds once.

    The same bounds as mapclassify's ``Quantiles`` (checked against it in the
    tests), computed with :func:`numpy.partition` instead of a full sort.

    >>> _quantile_breaks(np.arange(1000.0), 4).tolist()
    [249.75, 499.5, 749.25, 999.0]
    """
    n = values.size
    step = 100.0 / k
    pct = np.minimum(np.arange(step, 100.0 + step, step), 100.0)
    idx = pct / 100.0 * (n - 1)
    lo = idx.astype(np.int64)
    hi = np.minimum(lo + 1, n - 1)
    part = np.partition(values, np.unique(np.concatenate([lo, hi])))
    frac = idx - lo
    # interpolate as (a (1 - f) + b f) / ((1 - f) + f), the order of operations of
    # scipy.stats.scoreatpercentile, so ties land in the same class
    whole = frac == 0
    a, b = part[lo], part[hi]
    w0, w1 = (lo + 1) - idx, idx - lo
    q = np.where(whole, a, (a * w0 + b * w1) / (w0 + w1))
    return np.unique(q)


def _equal_interval_breaks(values: NDArray[np.float64], k: int) -> NDArray[np.float64]:
    """Upper bounds of ``k`` classes of equal width from the least to the largest value
    (mapclassify's ``EqualInterval`` bounds, checked against it in the tests).

    >>> _equal_interval_breaks(np.array([0.0, 3.0, 10.0]), 2).tolist()
    [5.0, 10.0]
    """
    lo, hi = float(values.min()), float(values.max())
    width = (hi - lo) / k
    cuts = np.arange(lo + width, hi + width, width)
    if cuts.size > k:
        cuts = cuts[:k]
    cuts[-1] = hi
    return cuts


def _majority_filter(cls: NDArray[np.int64], valid: NDArray[np.bool_]) -> NDArray[np.int64]:
    """One 3 x 3 majority pass over ``cls`` (0 = no class) at the ``valid`` cells."""
    k = int(cls.max())
    if k <= 1:
        return cls
    counts = np.stack([box_count(cls == c) for c in range(1, k + 1)])
    best = counts.argmax(axis=0) + 1
    best_count = counts.max(axis=0)
    own = np.take_along_axis(counts, np.clip(cls - 1, 0, k - 1)[None], axis=0)[0]
    change = valid & (cls > 0) & (own < best_count - 1e-6)
    out = cls.copy()
    out[change] = best[change]
    return out


# --------------------------------------------------------------------------- geometry helpers


def _polygonal(geom: BaseGeometry | None) -> BaseGeometry:
    """The polygonal part of ``geom`` (valid), or an empty polygon."""
    if geom is None or geom.is_empty:
        return shapely.Polygon()
    if not geom.is_valid:
        geom = shapely.make_valid(geom)
    if geom.geom_type in ("Polygon", "MultiPolygon"):
        return geom
    parts = [g for g in shapely.get_parts(geom) if g.geom_type in ("Polygon", "MultiPolygon")]
    if not parts:
        return shapely.Polygon()
    return _polygonal(shapely.union_all(parts))


def _parts(geom: BaseGeometry) -> list[BaseGeometry]:
    return [g for g in shapely.get_parts(_polygonal(geom)) if not g.is_empty and g.area > 0]


def _overlap_window(
    geom: BaseGeometry, transform: Affine, shape: tuple[int, int]
) -> tuple[slice, slice] | None:
    h, w = shape
    minx, miny, maxx, maxy = geom.bounds
    c0 = max(0, int(math.floor((minx - transform.c) / transform.a)))
    c1 = min(w, int(math.ceil((maxx - transform.c) / transform.a)))
    r0 = max(0, int(math.floor((maxy - transform.f) / transform.e)))
    r1 = min(h, int(math.ceil((miny - transform.f) / transform.e)))
    if c1 <= c0 or r1 <= r0:
        return None
    return slice(r0, r1), slice(c0, c1)


def _cell_overlap(
    geom: BaseGeometry, transform: Affine, shape: tuple[int, int]
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Area (m²) of each cell inside ``geom``, and whether each cell's centre is inside.

    Exact: cells wholly inside count in full, cells on the edge by the area of
    their square intersected with ``geom``.
    """
    area = np.zeros(shape)
    centre = np.zeros(shape, dtype=bool)
    geom = _polygonal(geom)
    if geom.is_empty:
        return area, centre
    win = _overlap_window(geom, transform, shape)
    if win is None:
        return area, centre
    rows, cols = np.mgrid[win[0], win[1]]
    x0 = transform.c + cols * transform.a
    y0 = transform.f + rows * transform.e
    x1 = x0 + transform.a
    y1 = y0 + transform.e
    boxes = shapely.box(np.minimum(x0, x1), np.minimum(y0, y1),
                        np.maximum(x0, x1), np.maximum(y0, y1))
    shapely.prepare(geom)
    full = shapely.contains_properly(geom, boxes)
    edge = shapely.intersects(geom, boxes) & ~full
    sub = np.zeros(boxes.shape)
    sub[full] = abs(transform.a * transform.e)
    if edge.any():
        sub[edge] = _edge_areas(geom, boxes[edge], rows[edge])
    area[win] = sub
    centre[win] = shapely.contains_xy(geom, (x0 + x1) / 2.0, (y0 + y1) / 2.0)
    shapely.destroy_prepared(geom)
    return area, centre


@functools.lru_cache(maxsize=4)
def _work_overlap(
    work_wkb: bytes, transform: tuple[float, ...], shape: tuple[int, int]
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """:func:`_cell_overlap` of a working area, kept for the next product of the same
    paddock (the same area on the same grid); the arrays are read-only."""
    area, centre = _cell_overlap(shapely.from_wkb(work_wkb), Affine(*transform[:6]), shape)
    area.flags.writeable = False
    centre.flags.writeable = False
    return area, centre


def _edge_areas(
    geom: BaseGeometry, boxes: NDArray[np.object_], rows: NDArray[np.int64]
) -> NDArray[np.float64]:
    """Intersection areas of edge cells, cut row by row to keep each overlay small."""
    out = np.zeros(boxes.shape)
    for r in np.unique(rows):
        sel = rows == r
        strip_box = shapely.union_all(boxes[sel]).envelope
        strip = shapely.intersection(geom, strip_box)
        out[sel] = shapely.area(shapely.intersection(boxes[sel], strip))
    return out


def _shared_edge(a: BaseGeometry, b: BaseGeometry) -> float:
    try:
        return float(shapely.intersection(a.boundary, b.boundary).length)
    except shapely.errors.GEOSException:  # pragma: no cover - robustness guard
        return 0.0


@dataclass
class _Piece:
    geom: BaseGeometry
    label: str
    order: int
    kind: str = "rate"
    cls: int | None = None
    """The class of the class raster this piece is exactly (its cells, clipped to the
    working area); None once its geometry is anything else."""


def _merge_small_pieces(
    pieces: list[_Piece], *, threshold_m2: float, force: set[int] | None = None
) -> tuple[list[_Piece], int, int]:
    """Merge pieces smaller than ``threshold_m2`` (and those in ``force``) into the
    neighbour sharing the longest edge, smallest first.

    Returns the remaining pieces, how many merged and how many small pieces had
    no neighbour to merge into.
    """
    force = force or set()
    if not pieces:
        return pieces, 0, 0
    geoms = [p.geom for p in pieces]
    tree = shapely.STRtree(geoms)
    owner = list(range(len(pieces)))

    def find(i: int) -> int:
        while owner[i] != i:
            owner[i] = owner[owner[i]]
            i = owner[i]
        return i

    current = {i: p.geom for i, p in enumerate(pieces)}
    grown = [False] * len(pieces)
    heap = [(g.area, i) for i, g in current.items() if g.area < threshold_m2 or i in force]
    heapq.heapify(heap)
    merged = stuck = 0
    while heap:
        a_area, a = heapq.heappop(heap)
        if find(a) != a or current[a].area != a_area:
            continue
        ga = current[a]
        cands = {find(int(j)) for j in tree.query(ga, predicate="dwithin", distance=_SNAP_M)}
        cands.discard(a)
        best, best_len = None, 0.0
        for b in sorted(cands):
            length = _shared_edge(ga, current[b])
            if length > best_len + 1e-9 or (
                best is not None and abs(length - best_len) <= 1e-9
                and current[b].area > current[best].area
            ):
                best, best_len = b, length
        if (best is None or best_len <= 0) and cands:
            # edges that do not quite coincide (rounding): the neighbour touching most
            near = ga.buffer(_SNAP_M)
            touch = {b: shapely.intersection(near, current[b]).area for b in cands}
            best = max(sorted(touch), key=lambda b: touch[b])
            best_len = touch[best]
        if best is None or best_len <= 0:
            stuck += 1
            continue
        owner[a] = best
        grown[best] = True
        current[best] = _polygonal(shapely.union_all([current[best], ga]))
        del current[a]
        merged += 1
        if current[best].area < threshold_m2:
            heapq.heappush(heap, (current[best].area, best))
    out = [
        _Piece(current[i], pieces[i].label, pieces[i].order, pieces[i].kind,
               None if grown[i] else pieces[i].cls)
        for i in sorted(current)
    ]
    return out, merged, stuck


# --------------------------------------------------------------------------- inputs


def _as_geoms(
    obj: Any, *, crs: pyproj.CRS, what: str
) -> tuple[list[BaseGeometry], list[str]]:
    """Geometries (in ``crs``) and labels from a GeoDataFrame, GeoSeries, geometry or list."""
    if obj is None:
        return [], []
    if isinstance(obj, BaseGeometry):
        return [obj], [what]
    if isinstance(obj, (gpd.GeoDataFrame, gpd.GeoSeries)):
        if obj.crs is None:
            raise CRSError(
                f"the {what} geometries have no coordinate reference system; "
                "read them with geosoil.boundaries, or set their CRS"
            )
        if not pyproj.CRS.from_user_input(obj.crs).equals(crs):
            obj = obj.to_crs(crs)
        geoms = list(obj.geometry) if isinstance(obj, gpd.GeoDataFrame) else list(obj)
        labels = [f"{what} {i}" for i in range(1, len(geoms) + 1)]
        if isinstance(obj, gpd.GeoDataFrame):
            for col in (what, "zone", "exclusion", "name", "label", "id"):
                if col in obj.columns:
                    labels = ["" if pd.isna(v) else str(v) for v in obj[col]]
                    break
        return geoms, labels
    if isinstance(obj, Iterable):
        geoms = list(obj)
        return geoms, [f"{what} {i}" for i in range(1, len(geoms) + 1)]
    raise TypeError(f"{what}: expected a GeoDataFrame, GeoSeries or geometries, got {type(obj)}")


def _exclusion_area(
    exclusions: Any, *, crs: pyproj.CRS, boundary: BaseGeometry, buffer_m: float
) -> list[tuple[BaseGeometry, str]]:
    """Connected parts of the excluded area inside ``boundary``, with their labels."""
    geoms, labels = _as_geoms(exclusions, crs=crs, what="exclusion")
    areas: list[BaseGeometry] = []
    names: list[str] = []
    for g, lab in zip(geoms, labels, strict=True):
        if g is None or g.is_empty:
            continue
        polys = []
        for part in shapely.get_parts(g):
            if part.geom_type in ("Polygon", "MultiPolygon"):
                polys.append(_polygonal(part))
            elif buffer_m > 0:  # creek lines, points
                polys.append(part.buffer(buffer_m))
        if polys:
            areas.append(_polygonal(shapely.union_all(polys)))
            names.append(lab)
    if not areas:
        return []
    whole = _polygonal(shapely.intersection(shapely.union_all(areas), boundary))
    out = []
    for part in sorted(_parts(whole), key=lambda p: -p.area):
        hit = [n for a, n in zip(areas, names, strict=True) if a.intersects(part)]
        out.append((part, ", ".join(dict.fromkeys(hit)) or "exclusion"))
    return out


# --------------------------------------------------------------------------- zone makers


def _class_zones(
    rate: NDArray[np.float64],
    *,
    transform: Affine,
    work: BaseGeometry,
    overlap: NDArray[np.float64],
    settings: ZoneSettings,
    spreader: SpreaderSettings,
    notes: list[str],
) -> tuple[list[_Piece], NDArray[np.int64] | None]:
    """Class pieces, and the class raster they were polygonised from (None: no pieces)."""
    has_rate = np.isfinite(rate) & (overlap > 0)
    if not has_rate.any():
        return [], None
    # Cells needing nothing, or less than the spreader can put out, form their own
    # class; the classes asked for are made from the cells that need product.
    min_rate_kg_ha = spreader.min_rate_kg_ha
    none = has_rate & ((rate <= 0) | (rate < min_rate_kg_ha))
    need = has_rate & ~none
    cls = np.zeros(rate.shape, dtype=np.int64)
    offset = 0
    if none.any():
        cls[none] = 1
        offset = 1
        share = 100.0 * overlap[none].sum() / overlap[has_rate].sum()
        below = (f"less than the spreader's minimum rate of {spreader.min_rate:g} "
                 f"{spreader.unit}" if min_rate_kg_ha > 0 else "no product")
        if need.any():
            notes.append(
                f"{int(none.sum())} cells ({share:.3g} % of the rated area) need {below}: they "
                f"form their own 'no product' zone, and the rate classes are made from the "
                f"{int(need.sum())} cells that need product"
            )
        else:
            notes.append(f"every cell needs {below}: one 'no product' zone")
    if need.any():
        cls_v, cnotes = classify_rates(
            rate[need], method=settings.method, classes=settings.classes
        )
        notes.extend(cnotes)
        cls[need] = cls_v + offset
    if settings.smooth:
        before = cls.copy()
        cls = _majority_filter(cls, has_rate)
        changed = int((before != cls).sum())
        if changed:
            notes.append(f"smoothing (3 x 3 majority) changed the class of {changed} cells")
    # cells without a rate take the nearest cell's class, so classes tile the raster
    near_r, near_c = nearest_labelled(cls != 0)
    filled = cls[near_r, near_c]
    filled = _merge_components(
        filled, overlap=overlap, has_rate=has_rate, transform=transform,
        min_area_m2=settings.min_zone_area_ha * 1e4, notes=notes,
    )
    pieces = []
    by_class: dict[int, list[BaseGeometry]] = defaultdict(list)
    for geo, value in rasterio.features.shapes(
        filled.astype(np.int32), connectivity=4, transform=transform
    ):
        by_class[int(value)].append(shape_from_geojson(geo))
    for c in sorted(by_class):
        g = _polygonal(shapely.intersection(shapely.union_all(by_class[c]), work))
        if g.area > 0:
            pieces.append(_Piece(g, NO_PRODUCT if offset and c == 1 else f"class {c}", c,
                                 cls=c))
    # renumber the rate classes that are left 1..n (the no-product class keeps its label)
    rated = [p for p in pieces if p.label != NO_PRODUCT]
    for i, p in enumerate(rated, start=1):
        p.label = f"class {i}"
    return pieces, filled


def _label_pieces(cls: NDArray[np.int64]) -> tuple[NDArray[np.int64], list[int]]:
    """Connected pieces of each class (4-connectivity, like the polygonising): the piece
    number of every cell (from 1) and each piece's class (index 0 unused)."""
    return label_pieces(cls)


_Adjacency = dict[int, dict[int, float]]


def _piece_edges(comp: NDArray[np.int64], inside: NDArray[np.bool_],
                 transform: Affine) -> tuple[_Adjacency, _Adjacency]:
    """Length of the edge each pair of pieces shares: within the working area, and in all."""
    adj_in: _Adjacency = defaultdict(lambda: defaultdict(float))
    adj_all: _Adjacency = defaultdict(lambda: defaultdict(float))
    for first, second, ins, length in (
        (comp[:, :-1], comp[:, 1:], inside[:, :-1] & inside[:, 1:], abs(transform.e)),
        (comp[:-1, :], comp[1:, :], inside[:-1, :] & inside[1:, :], abs(transform.a)),
    ):
        diff = first != second
        for sel, adj in ((diff, adj_all), (diff & ins, adj_in)):
            if not sel.any():
                continue
            pairs = np.stack([first[sel], second[sel]], axis=1)
            uniq, counts = np.unique(pairs, axis=0, return_counts=True)
            for (p, q), cnt in zip(uniq.tolist(), counts.tolist(), strict=True):
                adj[p][q] += cnt * length
                adj[q][p] += cnt * length
    return adj_in, adj_all


class _PieceMerger:
    """Union-find over the class pieces, merging each small piece into its neighbour."""

    def __init__(self, *, comp_class: list[int], area: NDArray[Any],
                 nrate: NDArray[Any], adj_in: _Adjacency, adj_all: _Adjacency,
                 min_area_m2: float) -> None:
        self.comp_class = comp_class
        self.area, self.nrate = area, nrate
        self.adj_in, self.adj_all = adj_in, adj_all
        self.min_area_m2 = min_area_m2
        self.parent = list(range(len(comp_class)))
        self.merged = self.stuck = 0

    def find(self, i: int) -> int:
        parent = self.parent
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    def small(self, i: int) -> bool:
        area = self.area[i]
        return bool(area > 0 and (area < self.min_area_m2 - 1e-9 or self.nrate[i] == 0))

    def absorb(self, a: int, b: int) -> None:
        self.parent[a] = b
        self.area[b] += self.area[a]
        self.nrate[b] += self.nrate[a]
        for adj in (self.adj_in, self.adj_all):
            for x, length in adj.pop(a, {}).items():
                adj[x].pop(a, None)
                if x != b:
                    adj[b][x] += length
                    adj[x][b] += length
            adj[b].pop(a, None)
            adj[b].pop(b, None)

    def run(self) -> NDArray[np.int64]:
        """Merge the small pieces, smallest first; the root piece of every piece."""
        heap = [(float(self.area[i]), i) for i in range(1, len(self.parent)) if self.small(i)]
        heapq.heapify(heap)
        while heap:
            a_area, a = heapq.heappop(heap)
            if self.find(a) != a or float(self.area[a]) != a_area or not self.small(a):
                continue
            nbrs = self.adj_in.get(a) or self.adj_all.get(a)
            if not nbrs:
                self.stuck += 1
                continue
            b = max(nbrs, key=lambda x: (round(nbrs[x], 6), self.area[x], -x))
            self.absorb(a, b)
            self.merged += 1
            # neighbours of the merged piece in b's class are now joined to b
            for x in list(self.adj_all.get(b, {})):
                if self.comp_class[x] == self.comp_class[b] and self.find(x) == x and x != b:
                    self.absorb(x, b)
            if self.small(b):
                heapq.heappush(heap, (float(self.area[b]), b))
        return np.array([self.find(i) for i in range(len(self.parent))])


def _merge_components(
    cls: NDArray[np.int64],
    *,
    overlap: NDArray[np.float64],
    has_rate: NDArray[np.bool_],
    transform: Affine,
    min_area_m2: float,
    notes: list[str],
) -> NDArray[np.int64]:
    """Merge connected class pieces smaller than ``min_area_m2`` (area inside the
    working area) or without a rated cell into the neighbour with the longest
    shared edge, on the raster."""
    comp, comp_class = _label_pieces(cls)
    n = len(comp_class) - 1
    adj_in, adj_all = _piece_edges(comp, overlap > 0, transform)
    merger = _PieceMerger(
        comp_class=comp_class,
        area=np.bincount(comp.ravel(), weights=overlap.ravel(), minlength=n + 1),
        nrate=np.bincount(comp.ravel(), weights=has_rate.ravel().astype(float), minlength=n + 1),
        adj_in=adj_in, adj_all=adj_all, min_area_m2=min_area_m2)
    roots = merger.run()
    merged, stuck = merger.merged, merger.stuck
    if merged:
        notes.append(
            f"{merged} class piece{'s' if merged != 1 else ''} smaller than "
            f"{min_area_m2 / 1e4:g} ha (or without a rated cell) merged into the neighbour "
            "sharing the longest edge"
        )
    if stuck:
        notes.append(f"{stuck} small class piece{'s' if stuck != 1 else ''} had no neighbour "
                     "to merge into and were kept")
    return np.asarray(comp_class)[roots][comp]


def _grid_zones(*, work: BaseGeometry, boundary: BaseGeometry, settings: ZoneSettings,
                notes: list[str]) -> list[_Piece]:
    width = settings.working_width_m
    length = settings.grid_length_m or width
    angle = settings.travel_direction_deg % 360.0
    origin = boundary.centroid
    # turn the paddock so the travel direction points up, lay the grid, turn it back
    turned = rotate(work, angle, origin=origin)
    minx, miny, maxx, maxy = turned.bounds
    xs = minx + width * np.arange(max(1, math.ceil((maxx - minx) / width)))
    ys = miny + length * np.arange(max(1, math.ceil((maxy - miny) / length)))
    gx, gy = np.meshgrid(xs, ys)  # rows along the travel direction
    # corners of every grid cell, turned back about the same origin (shapely's rotate,
    # for all cells at once: a positive angle turns anticlockwise)
    cx = gx.ravel()[:, None] + np.array([0.0, width, width, 0.0, 0.0])[None, :]
    cy = gy.ravel()[:, None] + np.array([0.0, 0.0, length, length, 0.0])[None, :]
    theta = math.radians(-angle)
    cos, sin = math.cos(theta), math.sin(theta)
    dx, dy = cx - origin.x, cy - origin.y
    boxes = shapely.polygons(np.stack([origin.x + cos * dx - sin * dy,
                                       origin.y + sin * dx + cos * dy], axis=-1))
    rows, cols = np.divmod(np.arange(boxes.size), xs.size)
    clipped = shapely.intersection(boxes, work)
    pieces: list[_Piece] = []
    for k, g in enumerate(clipped):
        for j, part in enumerate(_parts(g)):
            label = f"grid row {rows[k] + 1}, column {cols[k] + 1}"
            pieces.append(_Piece(part, label + (f" part {j + 1}" if j else ""), len(pieces)))
    threshold = min(settings.min_zone_area_ha * 1e4, 0.5 * width * length)
    pieces, merged, stuck = _merge_small_pieces(pieces, threshold_m2=threshold)
    if merged:
        notes.append(f"{merged} grid piece{'s' if merged != 1 else ''} smaller than "
                     f"{threshold / 1e4:g} ha merged into the neighbour sharing the longest edge")
    if stuck:
        notes.append(f"{stuck} small grid piece{'s' if stuck != 1 else ''} had no neighbour "
                     "to merge into and were kept")
    return pieces


def _user_zones(user_zones: gpd.GeoDataFrame, *, crs: pyproj.CRS, work: BaseGeometry,
                paddock: str, notes: list[str]) -> list[_Piece]:
    if not isinstance(user_zones, gpd.GeoDataFrame):
        raise TypeError("user_zones must be a GeoDataFrame with a CRS")
    if user_zones.crs is None:
        raise CRSError(
            "the user zones have no coordinate reference system; read the zone file with "
            "geosoil.boundaries.read_user_zones, or set its CRS"
        )
    given_crs = pyproj.CRS.from_user_input(user_zones.crs)
    if not given_crs.equals(crs):
        notes.append(f"user zones reprojected from {given_crs.name} to {crs.name}")
    geoms, labels = _as_geoms(user_zones, crs=crs, what="zone")
    clipped = [_polygonal(shapely.intersection(_polygonal(g), work)) for g in geoms]
    outside = [lab for lab, g in zip(labels, clipped, strict=True) if g.area <= 0]
    if outside:
        notes.append(f"user zone(s) {', '.join(repr(x) for x in outside)} lie outside paddock "
                     f"'{paddock}''s working area and were left out")
    keep = [i for i, g in enumerate(clipped) if g.area > 0]
    tree = shapely.STRtree([clipped[i] for i in keep])
    bad: list[str] = []
    for ii, jj in zip(*tree.query([clipped[i] for i in keep], predicate="intersects"),
                      strict=True):
        i, j = keep[int(ii)], keep[int(jj)]
        if i >= j:
            continue
        ov = shapely.intersection(clipped[i], clipped[j]).area
        smaller = min(clipped[i].area, clipped[j].area)
        if ov > _OVERLAP_M2 and ov > _OVERLAP_SHARE * smaller:
            bad.append(f"'{labels[i]}' and '{labels[j]}' ({ov / 1e4:.4g} ha)")
    if bad:
        raise InputError(
            f"zones overlap in paddock '{paddock}': {'; '.join(bad)}",
            column="geometry",
            fix="edit the zone file so each piece of ground lies in one zone only",
        )
    pieces: list[_Piece] = []
    taken: BaseGeometry = shapely.Polygon()
    for i in keep:
        g = clipped[i]
        if g.intersects(taken):  # digitising slivers go to the earlier zone
            g = _polygonal(shapely.difference(g, taken))
        taken = shapely.union_all([taken, g])
        if g.area > 0:
            pieces.append(_Piece(g, labels[i], len(pieces)))
    return pieces


def _dust_m2(work: BaseGeometry) -> float:
    """Area below which a polygon part is taken as overlay rounding dust."""
    return max(1e-8 * work.area, 1e-3)


def _drop_dust(geom: BaseGeometry, dust: float) -> BaseGeometry:
    """``geom`` without polygon parts smaller than ``dust`` (m²); ``geom`` itself when
    nothing is dropped."""
    all_parts = _parts(geom)
    parts = [p for p in all_parts if p.area >= dust]
    if len(parts) == len(all_parts) and geom.is_valid and geom.geom_type in (
            "Polygon", "MultiPolygon"):
        return geom
    if not parts:
        return shapely.Polygon()
    if len(parts) == 1:
        return parts[0]
    return _polygonal(shapely.MultiPolygon(parts))


def _remainder(
    pieces: list[_Piece], *, work: BaseGeometry, min_area_m2: float, paddock: str,
    product: str, notes: list[str],
) -> tuple[list[_Piece], BaseGeometry]:
    """Cover the part of the working area no piece covers: merge small bits into
    neighbours, return the rest as one remainder geometry. Rounding dust is dropped."""
    dust = _dust_m2(work)
    covered = shapely.union_all([p.geom for p in pieces]) if pieces else shapely.Polygon()
    left = [g for g in _parts(shapely.difference(work, covered)) if g.area >= dust]
    if not left:
        return pieces, shapely.Polygon()
    n = len(pieces)
    all_pieces = pieces + [_Piece(g, "remainder", n + k, "remainder")
                           for k, g in enumerate(left)]
    small_ids = {n + k for k, g in enumerate(left) if g.area < min_area_m2}
    merged_area = sum(all_pieces[i].geom.area for i in small_ids)
    all_pieces, merged, _ = _merge_small_pieces(all_pieces, threshold_m2=0.0, force=small_ids)
    rest = [p for p in all_pieces if p.kind == "remainder"]
    pieces = [p for p in all_pieces if p.kind != "remainder"]
    if merged:
        notes.append(
            f"{merged_area / 1e4:.4g} ha of paddock '{paddock}' outside every zone, in pieces "
            f"smaller than {min_area_m2 / 1e4:g} ha, merged into neighbouring zones"
        )
    rem = _polygonal(shapely.union_all([p.geom for p in rest])) if rest else shapely.Polygon()
    if rem.area > 0:
        msg = (f"paddock '{paddock}', {product}: {rem.area / 1e4:.4g} ha lies outside the zones "
               "and gets its own 'remainder' zone with the rate of its cells")
        notes.append(msg)
        warnings.warn(msg, DataWarning, stacklevel=3)
    return pieces, rem


# --------------------------------------------------------------------------- statistics


def _id_list(items: list[str], limit: int = 8) -> str:
    """``a, b, c`` or ``a, b, ... (N in all)`` for long lists."""
    if len(items) <= limit:
        return ", ".join(items)
    return f"{', '.join(items[:limit])}, ... ({len(items)} in all)"


def _weighted_percentile(values: NDArray[np.float64], weights: NDArray[np.float64],
                         q: float) -> float:
    """Lower weighted percentile (inverted CDF): the smallest value whose
    cumulative weight reaches ``q`` % of the total."""
    order = np.argsort(values, kind="stable")
    v, w = values[order], weights[order]
    cum = np.cumsum(w)
    target = q / 100.0 * cum[-1]
    i = int(np.searchsorted(cum, target - 1e-12 * cum[-1], side="left"))
    return float(v[min(i, v.size - 1)])


def _rate_of(values: NDArray[np.float64], weights: NDArray[np.float64],
             percentile: float | None) -> float:
    """Area-weighted mean (or weighted percentile) of cell rates; NaN without cells."""
    if values.size == 0:
        return float("nan")
    if percentile is None:
        return float(np.sum(weights * values) / np.sum(weights))
    return _weighted_percentile(values, weights, percentile)


def _zone_rates(
    geoms: list[BaseGeometry],
    rate: NDArray[np.float64],
    transform: Affine,
    percentile: float | None,
    *,
    classes: list[int | None] | None = None,
    class_raster: NDArray[np.int64] | None = None,
    overlap: NDArray[np.float64] | None = None,
    centre: NDArray[np.bool_] | None = None,
) -> list[tuple[float, int]]:
    """Raw rate (area-weighted mean or weighted percentile) and cell count of each zone.

    A cell weighs in by the exact area of its square inside the zone; ``n_cells``
    counts the cells with a rate whose centre lies in the zone. A zone that is
    exactly the cells of one class of ``class_raster`` clipped to the working area
    (``classes[i]`` not None) takes those cells' shares of the working area
    (``overlap``, ``centre``) with one bincount; any other zone is overlaid with the
    squares of the cells with a rate, all zones at once (a spatial index finds the
    pairs; squares wholly inside a zone are not cut).
    """
    out: list[tuple[float, int] | None] = [None] * len(geoms)
    ok = np.isfinite(rate)
    if classes is not None and class_raster is not None and overlap is not None:
        assert centre is not None
        use = ok & (overlap > 0)
        lab = class_raster[use]
        w, v, cen = overlap[use], rate[use], centre[use]
        n = int(lab.max()) + 1 if lab.size else 1
        counts = np.bincount(lab, weights=cen.astype(float), minlength=n)
        if percentile is None:
            wsum = np.bincount(lab, weights=w, minlength=n)
            vsum = np.bincount(lab, weights=w * v, minlength=n)
        order = np.argsort(lab, kind="stable")
        bounds = np.searchsorted(lab[order], np.arange(n + 1))
        for i, c in enumerate(classes):
            if c is None:
                continue
            if c >= n or bounds[c] == bounds[c + 1]:
                out[i] = (float("nan"), 0)
            elif percentile is None:
                out[i] = (float(vsum[c] / wsum[c]), int(counts[c]))
            else:
                sel = order[bounds[c]:bounds[c + 1]]
                out[i] = (_weighted_percentile(v[sel], w[sel], percentile), int(counts[c]))
    todo = [i for i, r in enumerate(out) if r is None]
    if todo:
        for i, pair in zip(todo, _overlay_rates([geoms[i] for i in todo], rate, transform,
                                                percentile), strict=True):
            out[i] = pair
    return [r for r in out if r is not None]


def _overlay_rates(
    geoms: list[BaseGeometry], rate: NDArray[np.float64], transform: Affine,
    percentile: float | None,
) -> list[tuple[float, int]]:
    """:func:`_zone_rates` for any zones: cell squares overlaid with the zones."""
    empty = [(float("nan"), 0)] * len(geoms)
    rows, cols = np.nonzero(np.isfinite(rate))
    if rows.size == 0 or not geoms:
        return empty
    x0 = transform.c + cols * transform.a
    y0 = transform.f + rows * transform.e
    x1, y1 = x0 + transform.a, y0 + transform.e
    boxes = shapely.box(np.minimum(x0, x1), np.minimum(y0, y1),
                        np.maximum(x0, x1), np.maximum(y0, y1))
    zones = np.array([_polygonal(g) for g in geoms], dtype=object)
    tree = shapely.STRtree(zones)
    cell_i, zone_i = tree.query(boxes, predicate="intersects")
    if cell_i.size == 0:
        return empty
    shapely.prepare(zones)
    full = shapely.contains_properly(zones[zone_i], boxes[cell_i])
    w = np.full(cell_i.size, abs(transform.a * transform.e))
    cut = ~full
    if cut.any():
        w[cut] = shapely.area(shapely.intersection(boxes[cell_i[cut]], zones[zone_i[cut]]))
    cen = shapely.contains_xy(zones[zone_i], (x0[cell_i] + x1[cell_i]) / 2.0,
                              (y0[cell_i] + y1[cell_i]) / 2.0)
    shapely.destroy_prepared(zones)
    keep = w > 0
    cell_i, zone_i, w, cen = cell_i[keep], zone_i[keep], w[keep], cen[keep]
    v = rate[rows[cell_i], cols[cell_i]]
    order = np.argsort(zone_i, kind="stable")
    bounds = np.searchsorted(zone_i[order], np.arange(len(geoms) + 1))
    out = []
    for j in range(len(geoms)):
        sel = order[bounds[j]:bounds[j + 1]]
        out.append((_rate_of(v[sel], w[sel], percentile), int(cen[sel].sum())))
    return out


# --------------------------------------------------------------------------- main entry


def make_zones(
    rate: NDArray[np.float64],
    *,
    transform: Affine,
    crs: Any,
    paddock: str,
    product: str,
    boundary: BaseGeometry,
    exclusions: Any = None,
    user_zones: gpd.GeoDataFrame | None = None,
    settings: ZoneSettings,
    spreader: SpreaderSettings | None = None,
    line_buffer_m: float = 10.0,
) -> ZoneResult:
    """Spreader zones for one paddock and product.

    Parameters
    ----------
    rate
        Per-cell product rate, kg/ha, shape (height, width), NaN outside the
        paddock mask.
    transform
        North-up affine transform of the raster.
    crs
        Working CRS (projected, metres); anything :meth:`pyproj.CRS.from_user_input` takes.
    paddock, product
        Names carried into the output.
    boundary
        The paddock polygon in the working CRS.
    exclusions
        Areas to leave untreated: a GeoDataFrame/GeoSeries (reprojected to
        ``crs`` if needed; labels from an ``exclusion`` or ``name`` column), a
        geometry or a list of geometries. Lines and points are buffered by
        ``line_buffer_m`` (a project's creeks arrive already buffered by
        ``[boundaries] creek_buffer_m``; local codes decide the real distance).
    user_zones
        The user's zones (GeoDataFrame with a CRS, ids in a ``zone`` column),
        for ``method = "user_zones"``.
    settings
        :class:`ZoneSettings`.
    spreader
        The spreader's limits (:class:`geosoil.spreader.SpreaderSettings`: minimum
        rate, largest rate per pass, rate step, rounding mode, passes or
        seasons), applied to each zone by :func:`limit_zone_rate`; ``None``: no
        limits. Rate classes: cells below the minimum rate (or at 0) form the
        ``"no product"`` zone.

    Returns
    -------
    ZoneResult
        ``zones`` (columns :data:`ZONE_COLUMNS`) and ``notes``.

    Raises
    ------
    SettingsError
        ``method = "user_zones"`` without zones.
    InputError
        User zones that overlap (naming them), negative rates.
    CRSError
        A geographic or non-metre working CRS; user zones without a CRS.

    Warns
    -----
    DataWarning
        Part of the paddock lies outside every zone (remainder zone), or a zone
        has no cell with a rate.
    RateWarning
        Spreader limits set zones to 0 or split them into several passes.
    """
    crs = pyproj.CRS.from_user_input(crs)
    rate = _checked_rate(rate, transform=transform, crs=crs, paddock=paddock, product=product)
    notes = _method_notes(settings, user_zones)
    percentile = parse_statistic(settings.statistic)
    sp = spreader if spreader is not None else SpreaderSettings()
    boundary = _checked_boundary(boundary, crs=crs, paddock=paddock)
    excl = _exclusion_area(exclusions, crs=crs, boundary=boundary,
                           buffer_m=line_buffer_m)
    excluded = shapely.union_all([g for g, _ in excl]) if excl else shapely.Polygon()
    work = _polygonal(shapely.difference(boundary, excluded)) if excl else boundary

    laid = _lay_pieces(rate, transform=transform, crs=crs, work=work, boundary=boundary,
                       user_zones=user_zones, paddock=paddock, settings=settings, spreader=sp,
                       notes=notes)
    pieces, remainder = _tidy_pieces(laid.pieces, work=work, settings=settings,
                                     paddock=paddock, product=product, notes=notes)
    ordered = sorted(pieces, key=lambda p: p.order)
    entries = [(p.geom, "rate", p.label) for p in ordered]
    classes: list[int | None] = [p.cls for p in ordered]
    if remainder.area > 0:
        entries.append((remainder, "remainder", "remainder"))
        classes.append(None)
    stats = _zone_rates([g for g, _, _ in entries], rate, transform, percentile, classes=classes,
                        class_raster=laid.class_raster, overlap=laid.overlap, centre=laid.centre)
    stats += _zone_rates([g for g, _ in excl], rate, transform, None)
    rows, limits = _zone_rows(entries, stats[:len(entries)], spreader=sp)
    for (geom, label), (_, n_cells) in zip(excl, stats[len(entries):], strict=True):
        rows.append(dict(zone=len(rows) + 1, kind="exclusion", label=label, rate_kg_ha=0.0,
                         rate_raw_kg_ha=0.0, passes=0, per_pass_kg_ha=0.0, schedule="",
                         area_ha=geom.area / 1e4, n_cells=n_cells, geometry=geom))

    where = f"paddock '{paddock}', {product}"
    _warn_limits(limits, where=where, spreader=sp, notes=notes)
    zones = _zone_frame(rows, paddock=paddock, product=product, crs=crs)
    # every note names its product (a paddock's notes of several products read alike)
    notes = [n if n.startswith(where) else f"{product}: {n}" for n in notes]
    for n in notes:
        logger.info("%s", n)
    return ZoneResult(zones=zones, notes=notes)


def _checked_rate(rate: NDArray[np.float64], *, transform: Affine, crs: pyproj.CRS,
                  paddock: str, product: str) -> NDArray[np.float64]:
    """The rate raster as a 2-D float array; a metre CRS, a north-up raster, no negative rate."""
    if not crs.is_projected or crs.axis_info[0].unit_conversion_factor != 1.0:
        raise CRSError(
            f"zones need a projected working CRS in metres; got {crs.name}. "
            "Use the working CRS from geosoil.crs"
        )
    if transform.b != 0 or transform.d != 0:
        raise ValueError("the raster transform must be north-up (no rotation)")
    rate = np.asarray(rate, dtype=float)
    if rate.ndim != 2:
        raise ValueError(f"rate must be a 2-D array, got shape {rate.shape}")
    finite = rate[np.isfinite(rate)]
    if finite.size and finite.min() < 0:
        raise InputError(
            f"the {product} rate raster of paddock '{paddock}' holds negative rates "
            f"(down to {finite.min():g} kg/ha)",
            fix="rates are amounts to spread and cannot be negative; check the rate rules",
        )
    return rate


def _method_notes(settings: ZoneSettings, user_zones: gpd.GeoDataFrame | None) -> list[str]:
    """The zone method against the user's zones: a note when they are given and not used;
    an error when the method needs them and there are none."""
    if settings.method == "user_zones" and user_zones is None:
        raise SettingsError(
            "method 'user_zones' needs a zone file; set [boundaries] zones, or choose "
            f"another method ({', '.join(m for m in METHODS if m != 'user_zones')})",
            key="method",
        )
    if user_zones is not None and settings.method != "user_zones":
        return [f"method is '{settings.method}': the user zones were not used for "
                "spreader zones"]
    return []


def _checked_boundary(boundary: Any, *, crs: pyproj.CRS, paddock: str) -> BaseGeometry:
    """The paddock as one polygonal geometry in ``crs`` (an empty one refused)."""
    if isinstance(boundary, (gpd.GeoSeries, gpd.GeoDataFrame)):
        boundary = shapely.union_all(_as_geoms(boundary, crs=crs, what="paddock")[0])
    boundary = _polygonal(boundary)
    if boundary.is_empty:
        raise InputError(f"paddock '{paddock}' has an empty boundary",
                         fix="check the paddock file")
    return boundary


@dataclass
class _Laid:
    """The zone pieces of a method, and for class zones the rasters their rates come from."""

    pieces: list[_Piece]
    class_raster: NDArray[np.int64] | None = None
    overlap: NDArray[np.float64] | None = None
    centre: NDArray[np.bool_] | None = None


def _lay_pieces(rate: NDArray[np.float64], *, transform: Affine, crs: pyproj.CRS,
                work: BaseGeometry, boundary: BaseGeometry,
                user_zones: gpd.GeoDataFrame | None, paddock: str, settings: ZoneSettings,
                spreader: SpreaderSettings, notes: list[str]) -> _Laid:
    """The pieces the zone method lays over the working area."""
    if work.is_empty:
        notes.append(f"paddock '{paddock}' is excluded in full")
        return _Laid(pieces=[])
    if settings.method in _CLASS_METHODS:
        overlap, centre = _work_overlap(shapely.to_wkb(work), tuple(transform), rate.shape)
        pieces, class_raster = _class_zones(rate, transform=transform, work=work,
                                            overlap=overlap, settings=settings,
                                            spreader=spreader, notes=notes)
        return _Laid(pieces=pieces, class_raster=class_raster, overlap=overlap, centre=centre)
    if settings.method == "spreader_grid":
        return _Laid(pieces=_grid_zones(work=work, boundary=boundary, settings=settings,
                                        notes=notes))
    assert user_zones is not None
    return _Laid(pieces=_user_zones(user_zones, crs=crs, work=work, paddock=paddock,
                                    notes=notes))


def _tidy_pieces(pieces: list[_Piece], *, work: BaseGeometry, settings: ZoneSettings,
                 paddock: str, product: str,
                 notes: list[str]) -> tuple[list[_Piece], BaseGeometry]:
    """Pieces without their dust, and the part of the working area no piece covers."""
    if work.is_empty:
        return pieces, shapely.Polygon()
    dust = _dust_m2(work)
    for p in pieces:
        kept = _drop_dust(p.geom, dust)
        if kept is not p.geom:
            p.cls = None  # no longer exactly its class's cells
        p.geom = kept
    pieces = [p for p in pieces if not p.geom.is_empty]
    return _remainder(pieces, work=work, min_area_m2=settings.min_zone_area_ha * 1e4,
                      paddock=paddock, product=product, notes=notes)


@dataclass
class _Limits:
    """Zones the spreader's limits changed: no rated cell, below the minimum, split."""

    no_rate: list[str] = field(default_factory=list)
    zeroed: list[str] = field(default_factory=list)
    split: list[str] = field(default_factory=list)


def _zone_rows(entries: list[tuple[BaseGeometry, str, str]],
               stats: list[tuple[float, int]], *,
               spreader: SpreaderSettings) -> tuple[list[dict[str, Any]], _Limits]:
    """One row per rate or remainder zone, its rate limited by the spreader."""
    rows: list[dict[str, Any]] = []
    limits = _Limits()
    for number, ((geom, kind, label), (raw, n_cells)) in enumerate(
            zip(entries, stats, strict=True), start=1):
        if not math.isfinite(raw):
            limits.no_rate.append(label)
        limited = limit_zone_rate(raw, spreader=spreader)
        spread, passes = limited.rate_kg_ha, limited.passes
        if label == NO_PRODUCT:
            if spread > 0:  # small pieces merged into it brought it to a spreadable rate
                label = "class 0"
        elif math.isfinite(raw) and raw > 0 and spread == 0:
            limits.zeroed.append(str(number))
        if passes > 1:
            limits.split.append(f"{number} ({passes} {spreader.split_into})")
        rows.append(dict(zone=number, kind=kind, label=label, rate_kg_ha=spread,
                         rate_raw_kg_ha=raw if math.isfinite(raw) else 0.0, passes=passes,
                         per_pass_kg_ha=limited.per_pass_kg_ha, schedule=limited.schedule,
                         area_ha=geom.area / 1e4, n_cells=n_cells, geometry=geom))
    return rows, limits


def _warn_limits(limits: _Limits, *, where: str, spreader: SpreaderSettings,
                 notes: list[str]) -> None:
    """A note and a warning for each kind of zone the limits changed."""
    sp = spreader
    if limits.no_rate:
        msg = (f"{where}: zone(s) {_id_list([repr(x) for x in limits.no_rate])} cover no cell "
               "with a rate and get rate 0")
        notes.append(msg)
        warnings.warn(msg, DataWarning, stacklevel=3)
    if limits.zeroed:
        msg = (f"{where}: zone(s) {_id_list(limits.zeroed)} fall below the spreader's minimum "
               f"rate of {sp.min_rate:g} {sp.unit} and get rate 0")
        notes.append(msg)
        warnings.warn(msg, RateWarning, stacklevel=3)
    if limits.split:
        msg = (f"{where}: zone(s) {_id_list(limits.split)} need more than {sp.max_per_pass:g} "
               f"{sp.unit} per pass: split into equal {sp.split_into}")
        notes.append(msg)
        warnings.warn(msg, RateWarning, stacklevel=3)


def _zone_frame(rows: list[dict[str, Any]], *, paddock: str, product: str,
                crs: pyproj.CRS) -> gpd.GeoDataFrame:
    """The zones as a GeoDataFrame of :data:`ZONE_COLUMNS`."""
    frame = pd.DataFrame(rows, columns=[c for c in ZONE_COLUMNS if c not in ("paddock", "product")])
    frame.insert(0, "product", str(product))
    frame.insert(0, "paddock", str(paddock))
    frame = frame.astype({"zone": "int64", "passes": "int64", "n_cells": "int64",
                          "rate_kg_ha": "float64", "rate_raw_kg_ha": "float64",
                          "per_pass_kg_ha": "float64", "area_ha": "float64",
                          "schedule": "object"})
    return gpd.GeoDataFrame(frame, geometry="geometry", crs=crs)

