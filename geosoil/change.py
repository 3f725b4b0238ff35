"""Change between two seasons: surfaces of the change, its error, its class, per zone (pure).

The method
----------
Each season's sample values of a variable are kriged on the same paddock grid
(this season's), giving an estimate ``z`` and a kriging standard deviation
``sd`` per cell. The change is ``z_this - z_last``; with the two seasons'
kriging errors taken as independent (the samples were taken a season apart,
and each season is kriged from its own samples only), the change's standard
deviation is ``sd_change = sqrt(sd_last^2 + sd_this^2)`` (the variance of a
difference of independent errors). A cell's change is "beyond its error"
where ``|change| > z * sd_change`` with ``z = 1.96`` (a two-sided 95 %
normal interval, the usual choice): "rose" or "fell"; elsewhere "no change
beyond error". Where either season has no kriging error (a surface made by
inverse-distance weighting, one flat value or one value per zone) the class
is "no error surface": the change is mapped but cannot be judged.

Paired sites
------------
The independence above does not hold where a paddock was sampled again at the
same sites: both seasons' kriging errors then come from the same gaps between
the same sites and are strongly positively correlated, so the root sum of
squares over-states the change's error (a uniform rise of 0.6 pH can hide
behind a limit of 1.96 x sqrt(2) x 0.22 = 0.61). Where most of this season's
samples of a paddock (:data:`PAIRED_LEAST_SHARE`) lie within a small distance
(``paired_within``, :data:`PAIRED_WITHIN_M` by default) of one of last season's
(:func:`pair_sites`, one to one, nearest first), the per-site differences
(this - last) are kriged directly, with a variogram fitted to the differences:
the change and its standard deviation are those of the kriged difference
(common geostatistical practice for repeated measurements at fixed sites).
Unpaired samples of such a paddock take no part in its change. Other paddocks
keep the independent method. Each change says which method made it
(:data:`METHODS`).

The variables are ESP, pH (one method both seasons), Ca saturation and
exchangeable acidity, each kriged as the sample values are (ESP and Ca
saturation directly from the samples' ESP and saturation, so that each has a
kriging variance; the run's own maps derive them from kriged amounts).

Per zone of last season's prescription, the mean change of each variable over
the zone's cells and the share of its cells in each class, beside the product
and the rate prescribed there.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from numpy.typing import NDArray

from .errors import SettingsError
from .grids import PaddockGrid

__all__ = [
    "CHANGE_VARIABLES",
    "CLASS_CODES",
    "CLASS_NAMES",
    "METHODS",
    "PAIRED_CHANGE_NOTE",
    "PAIRED_LEAST_SHARE",
    "PAIRED_WITHIN_M",
    "PH_METHODS",
    "Z_BEYOND_ERROR",
    "ChangeSurface",
    "PhConversion",
    "SeasonMismatchError",
    "SitePairing",
    "change_surface",
    "choose_ph",
    "classify_change",
    "pair_sites",
    "paired_change_surface",
    "parse_ph_conversion",
    "zone_change_table",
]

Array = NDArray[np.float64]

#: Variables whose change is mapped: key in the change -> (label, unit). ``ph`` stands for
#: the pH of whichever method both seasons share (see :func:`choose_ph`).
CHANGE_VARIABLES: dict[str, tuple[str, str]] = {
    "esp": ("ESP", "% of ECEC"),
    "ph": ("pH", ""),
    "ca_sat": ("Ca saturation", "% of ECEC"),
    "acidity": ("exchangeable acidity", "cmol(+)/kg"),
}

#: pH columns of a samples table -> the method's name, in the order preferred.
PH_METHODS: dict[str, str] = {"ph": "water", "ph_cacl2": "CaCl2", "ph_kcl": "KCl"}

#: Multiple of the change's standard deviation beyond which a change counts (two-sided
#: 95 % of a normal distribution).
Z_BEYOND_ERROR = 1.96

#: Class codes written in the class rasters (NaN outside the paddock).
CLASS_CODES: dict[str, int] = {
    "fell": -1,
    "no change beyond error": 0,
    "rose": 1,
    "no error surface": 2,
}
CLASS_NAMES: dict[int, str] = {v: k for k, v in CLASS_CODES.items()}

#: Two samples of the two seasons nearer than this (m) are one site sampled twice.
PAIRED_WITHIN_M = 5.0

#: Least share of this season's samples of a paddock on paired sites for the paired method.
PAIRED_LEAST_SHARE = 0.75

#: How a change was made -> what that means.
METHODS: dict[str, str] = {
    "independent": "each season kriged from its own samples; sd_change = "
                   "sqrt(sd_last^2 + sd_this^2), the seasons' errors taken as independent",
    "paired sites": "the differences (this - last) at sites sampled in both seasons kriged "
                    "directly, with a variogram fitted to the differences; sd_change is the "
                    "kriging standard deviation of the difference",
}


class SeasonMismatchError(SettingsError):
    """Two seasons that cannot be compared (other paddocks, CRS, pH method, missing files)."""


@dataclass(frozen=True)
class PhConversion:
    """A pH conversion the user states: ``pH(to) = intercept + slope * pH(from)``.

    Examples
    --------
    >>> c = parse_ph_conversion("water = 1.0 * cacl2 + 0.6")
    >>> c.to_method, c.from_method, c.apply(5.0)
    ('ph', 'ph_cacl2', 5.6)
    """

    to_method: str
    from_method: str
    slope: float
    intercept: float
    text: str

    def apply(self, values: Array | float) -> Array | float:
        """Values of ``from_method`` expressed as ``to_method``."""
        return self.intercept + self.slope * values


_METHOD_KEYS = {"water": "ph", "cacl2": "ph_cacl2", "kcl": "ph_kcl"}
_CONVERSION = re.compile(
    r"^\s*(water|cacl2|kcl)\s*=\s*(?:([0-9]*\.?[0-9]+)\s*\*\s*)?(water|cacl2|kcl)\s*"
    r"(?:([+-])\s*([0-9]*\.?[0-9]+))?\s*$", re.IGNORECASE)


def parse_ph_conversion(text: str) -> PhConversion:
    """Read a stated pH conversion such as ``"water = 1.0 * cacl2 + 0.6"``.

    Raises
    ------
    SettingsError
        Text of another form, or a conversion of a method to itself.

    Examples
    --------
    >>> parse_ph_conversion("cacl2 = water - 0.6").intercept
    -0.6
    """
    m = _CONVERSION.match(text or "")
    if m is None:
        raise SettingsError(
            f"'{text}' is not a pH conversion; write it as 'water = SLOPE * cacl2 + OFFSET' "
            "(methods: water, cacl2, kcl; the slope may be left out), for example "
            "'water = cacl2 + 0.6'", key="--ph-conversion")
    to, slope, frm, sign, off = m.groups()
    if to.lower() == frm.lower():
        raise SettingsError(f"'{text}' converts a pH method to itself", key="--ph-conversion")
    intercept = float(off) if off else 0.0
    if sign == "-":
        intercept = -intercept
    return PhConversion(_METHOD_KEYS[to.lower()], _METHOD_KEYS[frm.lower()],
                        float(slope) if slope else 1.0, intercept, text.strip())


def choose_ph(
    last: Sequence[str], this: Sequence[str], *, conversion: PhConversion | None = None,
    last_name: str = "last season", this_name: str = "this season",
) -> tuple[str, str, str | None]:
    """The pH columns to compare: the first method (water, CaCl2, KCl) both seasons have.

    Parameters
    ----------
    last, this
        The pH columns with values in each season (keys of :data:`PH_METHODS`).
    conversion
        A stated conversion, used only when the seasons share no method: the
        season measured by ``conversion.from_method`` is converted to
        ``conversion.to_method``, which the other season must have.
    last_name, this_name
        How messages name the seasons (their files).

    Returns
    -------
    last_column, this_column, converted
        ``converted`` names the season converted (``"last"`` or ``"this"``) or is None.

    Raises
    ------
    SeasonMismatchError
        No common method and no conversion that bridges them.

    Examples
    --------
    >>> choose_ph(["ph_cacl2"], ["ph", "ph_cacl2"])
    ('ph_cacl2', 'ph_cacl2', None)
    """
    for col in PH_METHODS:
        if col in last and col in this:
            return col, col, None
    if not last or not this:
        return "", "", None
    if conversion is not None:
        c = conversion
        if c.from_method in last and c.to_method in this:
            return c.from_method, c.to_method, "last"
        if c.from_method in this and c.to_method in last:
            return c.to_method, c.from_method, "this"
    have_l = ", ".join(PH_METHODS[c] for c in PH_METHODS if c in last)
    have_t = ", ".join(PH_METHODS[c] for c in PH_METHODS if c in this)
    raise SeasonMismatchError(
        f"{last_name} has pH in {have_l} and {this_name} pH in {have_t}: a change of pH needs "
        "the same method in both seasons (pH in CaCl2 reads lower than pH in water). State a "
        "conversion you trust, e.g. --ph-conversion 'water = cacl2 + 0.6', or compare the "
        "other variables only with --no-ph", key="--ph-conversion")


def classify_change(change: Array, sd_change: Array | None, *,
                    z: float = Z_BEYOND_ERROR) -> Array:
    """Class code of each cell (:data:`CLASS_CODES`); NaN where the change is NaN.

    Examples
    --------
    >>> classify_change(np.array([0.5, -0.5, 0.1, np.nan]), np.array([0.1, 0.1, 0.1, 0.1]))
    array([ 1., -1.,  0., nan])
    """
    change = np.asarray(change, dtype=float)
    out = np.full(change.shape, np.nan)
    inside = np.isfinite(change)
    if sd_change is None:
        out[inside] = CLASS_CODES["no error surface"]
        return out
    sd = np.asarray(sd_change, dtype=float)
    known = inside & np.isfinite(sd)
    out[inside & ~known] = CLASS_CODES["no error surface"]
    limit = z * sd
    out[known] = CLASS_CODES["no change beyond error"]
    out[known & (change > limit)] = CLASS_CODES["rose"]
    out[known & (change < -limit)] = CLASS_CODES["fell"]
    return out


@dataclass(frozen=True)
class SitePairing:
    """This season's samples of one paddock matched to last season's sites.

    ``last_index[i]`` is the row (within the paddock) of last season's sample
    paired with this season's sample ``i``, or -1.
    """

    paddock: str
    within_m: float
    last_index: NDArray[np.int64]
    n_last: int

    @property
    def n_this(self) -> int:
        """This season's samples in the paddock."""
        return len(self.last_index)

    @property
    def n_paired(self) -> int:
        """Samples of this season on a site of last season's."""
        return int((self.last_index >= 0).sum())

    @property
    def share(self) -> float:
        """Share (0-1) of this season's samples on paired sites."""
        return self.n_paired / self.n_this if self.n_this else 0.0

    @property
    def paired(self) -> bool:
        """True where the paired method applies (:data:`PAIRED_LEAST_SHARE`)."""
        return self.within_m > 0 and self.n_paired >= 2 and self.share >= PAIRED_LEAST_SHARE


def pair_sites(xy_last: Array, xy_this: Array, *, within: float) -> NDArray[np.int64]:
    """Pair each of this season's points with one of last season's within ``within`` m.

    One to one: the nearest pairs are taken first, and a point already paired
    is not taken again. ``within`` 0 pairs nothing.

    Returns
    -------
    ndarray of int
        Per point of ``xy_this``, the index of its partner in ``xy_last`` or -1.

    Examples
    --------
    >>> pair_sites(np.array([[0.0, 0.0], [10.0, 0.0]]),
    ...            np.array([[1.0, 0.0], [2.0, 0.0], [50.0, 0.0]]), within=5.0).tolist()
    [0, -1, -1]
    """
    a = np.asarray(xy_last, dtype=float).reshape(-1, 2)
    b = np.asarray(xy_this, dtype=float).reshape(-1, 2)
    out = np.full(len(b), -1, dtype=np.int64)
    if within <= 0 or not len(a) or not len(b):
        return out
    import scipy.spatial

    pairs = scipy.spatial.cKDTree(b).sparse_distance_matrix(
        scipy.spatial.cKDTree(a), within, output_type="ndarray")
    if not len(pairs):
        return out
    order = np.lexsort((pairs["j"], pairs["i"], pairs["v"]))
    taken = np.zeros(len(a), dtype=bool)
    for k in order:
        i, j = int(pairs["i"][k]), int(pairs["j"][k])
        if out[i] < 0 and not taken[j]:
            out[i] = j
            taken[j] = True
    return out


@dataclass(frozen=True, eq=False)
class ChangeSurface:
    """The change of one variable over one paddock grid (NaN outside its mask).

    ``method`` is a key of :data:`METHODS`; ``n_pairs`` the paired sites whose
    differences made a "paired sites" change (0 for "independent").
    """

    variable: str
    paddock: str
    last: Array
    this: Array
    change: Array
    sd_change: Array | None
    classes: Array
    method: str = "independent"
    n_pairs: int = 0

    def share(self, name: str, where: NDArray[np.bool_] | None = None) -> float:
        """Share (0-1) of the cells (of ``where``) in class ``name``."""
        cls = self.classes if where is None else self.classes[where]
        n = int(np.isfinite(cls).sum())
        return float((cls == CLASS_CODES[name]).sum() / n) if n else math.nan


def change_surface(
    variable: str, paddock: str, last: tuple[Array, Array | None],
    this: tuple[Array, Array | None], *, z: float = Z_BEYOND_ERROR,
) -> ChangeSurface:
    """Change of ``variable`` from last season's (estimate, sd) to this season's.

    ``sd`` None (no kriging error) gives the class "no error surface".

    Examples
    --------
    >>> s = change_surface("esp", "A", (np.array([8.0]), np.array([0.3])),
    ...                    (np.array([6.0]), np.array([0.4])))
    >>> float(s.change[0]), float(s.sd_change[0]), s.classes.tolist()
    (-2.0, 0.5, [-1.0])
    """
    (e1, s1), (e2, s2) = last, this
    change = np.asarray(e2, dtype=float) - np.asarray(e1, dtype=float)
    sd = None if s1 is None or s2 is None else np.hypot(np.asarray(s1, float),
                                                         np.asarray(s2, float))
    return ChangeSurface(variable, paddock, np.asarray(e1, float), np.asarray(e2, float),
                         change, sd, classify_change(change, sd, z=z))


def paired_change_surface(
    variable: str, paddock: str, last: Array, this: Array,
    difference: tuple[Array, Array | None], *, n_pairs: int, z: float = Z_BEYOND_ERROR,
) -> ChangeSurface:
    """Change of ``variable`` kriged from paired sites' differences.

    ``last`` and ``this`` are each season's own kriged estimate (shown beside
    the change); ``difference`` is the kriged difference and its kriging sd.

    Examples
    --------
    >>> s = paired_change_surface("ph", "A", np.array([5.0]), np.array([5.6]),
    ...                           (np.array([0.6]), np.array([0.05])), n_pairs=40)
    >>> s.method, s.classes.tolist()
    ('paired sites', [1.0])
    """
    est, sd = difference
    change = np.asarray(est, dtype=float)
    sd_a = None if sd is None else np.asarray(sd, dtype=float)
    return ChangeSurface(variable, paddock, np.asarray(last, float), np.asarray(this, float),
                         change, sd_a, classify_change(change, sd_a, z=z), "paired sites",
                         n_pairs)


def _zone_cells(grid: PaddockGrid, geom: object) -> NDArray[np.bool_]:
    """(height, width) bool: masked cells whose centre lies in ``geom``."""
    x, y = grid.cell_centres()
    inside = np.zeros((grid.height, grid.width), dtype=bool)
    if geom is not None and not shapely.is_empty(geom):
        inside[grid.mask] = shapely.contains_xy(geom, x, y)
    return inside


#: A zone's figures per variable in :func:`zone_change_table`, in column order.
_ZONE_PARTS = ("last_mean", "this_mean", "change_mean", "this_minus_last_mean", "rose_pct",
               "fell_pct", "no_change_pct")

#: What the change of a "paired sites" paddock is, and why it is not this season's mean
#: minus last season's (said in the summary, the report, the map and the README).
PAIRED_CHANGE_NOTE = (
    "With paired sites the change is kriged from the differences at the sites sampled both "
    "seasons, not taken from the two seasons' maps, so its mean can differ from this "
    "season's mean minus last season's (change_by_zone.csv gives both: <variable>_change_mean "
    "and <variable>_this_minus_last_mean); with independent seasons the two are the same.")


def zone_change_table(
    zones: gpd.GeoDataFrame | None,
    grids: Mapping[str, PaddockGrid],
    changes: Mapping[tuple[str, str], ChangeSurface],
) -> pd.DataFrame:
    """Per zone of last season's prescription: the product, the rate, the mean change.

    Parameters
    ----------
    zones
        Last season's zones (``paddock, product, zone, rate_kg_ha``, optional
        ``passes``; polygons in the grids' CRS); zones of kind ``exclusion``
        are left out. None or empty: one row per paddock with no product.
    grids
        This season's paddock grids (the change surfaces' grids).
    changes
        ``(paddock, variable) -> ChangeSurface``.

    Returns
    -------
    DataFrame
        One row per zone, then per paddock one row ``product = "none"`` for its
        cells in no zone of last season with a rate above zero. Columns:
        ``paddock, product, zone, prescribed_rate_kg_ha, passes, cells,
        area_ha`` and per variable ``<v>_last_mean, <v>_this_mean,
        <v>_change_mean, <v>_this_minus_last_mean, <v>_rose_pct, <v>_fell_pct,
        <v>_no_change_pct, <v>_method`` (a key of :data:`METHODS`: how the
        paddock's change was made). ``<v>_change_mean`` is the mean of the change
        map; with paired sites that map is kriged from the sites' differences, so
        it need not equal ``<v>_this_mean - <v>_last_mean``, which
        ``<v>_this_minus_last_mean`` gives (:data:`PAIRED_CHANGE_NOTE`; the two
        are equal with independent seasons).
    """
    # in the order the changes come (each layer's, shallowest first, in CHANGE_VARIABLES order)
    variables = list(dict.fromkeys(k[1] for k in changes))
    rows: list[dict[str, object]] = []
    zn = zones
    if zn is not None and len(zn) and "kind" in zn.columns:
        zn = zn[zn["kind"].astype(str) != "exclusion"]
    for name, grid in grids.items():
        treated = np.zeros((grid.height, grid.width), dtype=bool)
        here = zn[zn["paddock"] == name] if zn is not None and len(zn) else None
        pieces: list[tuple[dict[str, object], NDArray[np.bool_]]] = []
        if here is not None:
            for _, z in here.iterrows():
                cells = _zone_cells(grid, z.geometry)
                rate = float(z["rate_kg_ha"])
                if rate > 0:
                    treated |= cells
                passes = int(z["passes"]) if "passes" in here.columns and \
                    pd.notna(z["passes"]) else 1
                pieces.append(({"paddock": name, "product": str(z["product"]),
                                "zone": str(z["zone"]), "prescribed_rate_kg_ha": rate,
                                "passes": passes}, cells))
        pieces.append(({"paddock": name, "product": "none", "zone": "rest of paddock",
                        "prescribed_rate_kg_ha": 0.0, "passes": 0}, grid.mask & ~treated))
        for head, cells in pieces:
            n = int(cells.sum())
            row = dict(head)
            row["cells"] = n
            row["area_ha"] = round(n * grid.cell_area_ha, 2)
            for v in variables:
                s = changes.get((name, v))
                for part in _ZONE_PARTS:
                    row[f"{v}_{part}"] = math.nan
                row[f"{v}_method"] = s.method if s is not None else ""
                if s is None or n == 0:
                    continue
                ch = s.change[cells]
                ok = np.isfinite(ch)
                if not ok.any():
                    continue
                row[f"{v}_last_mean"] = float(np.mean(s.last[cells][ok]))
                row[f"{v}_this_mean"] = float(np.mean(s.this[cells][ok]))
                row[f"{v}_change_mean"] = float(np.mean(ch[ok]))
                row[f"{v}_this_minus_last_mean"] = (row[f"{v}_this_mean"]  # type: ignore
                                                    - row[f"{v}_last_mean"])
                row[f"{v}_rose_pct"] = 100 * s.share("rose", cells)
                row[f"{v}_fell_pct"] = 100 * s.share("fell", cells)
                row[f"{v}_no_change_pct"] = 100 * s.share("no change beyond error", cells)
            rows.append(row)
    cols = ["paddock", "product", "zone", "prescribed_rate_kg_ha", "passes", "cells", "area_ha"]
    cols += [f"{v}_{p}" for v in variables for p in (*_ZONE_PARTS, "method")]
    return pd.DataFrame(rows, columns=cols)
