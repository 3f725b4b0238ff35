"""Tonnes of product per zone, paddock and farm; truckloads; cost; rounded as a farmer reads.

Pure arithmetic on the zones table (:func:`geosoil.zones.make_zones`):
tonnes = area (ha) x rate (kg/ha) / 1000.

:func:`tonnage_table` returns one row per paddock, product and zone
(``level = "zone"``), a subtotal row per paddock and product
(``level = "paddock"``) and a total row per product for the whole farm
(``level = "farm"``). Columns:

``level``, ``paddock``, ``product``, ``zone``, ``kind``
    Where the row belongs (``zone`` and ``kind`` are empty on total rows,
    ``paddock`` on farm rows).
``area_ha``
    Zone area, 0.01 ha; on total rows the area of all zones, exclusions included.
``spread_area_ha``
    Area with a rate above 0, 0.01 ha: a zone's rounded area where its rate is
    above 0 (else 0), so it is never more than the area beside it.
``area_ac``, ``spread_area_ac``
    The same areas in acres (0.01 ac; 1 ha = 10 000 / 4046.8564224 ac, NIST SP 811), each
    rounded so that zones add up to their paddock and paddocks to the farm, as in ha.
``rate_kg_ha``
    The zone's rate (whole kg/ha); on total rows the mean over the spread area
    (tonnes x 1000 / spread area), empty when nothing is spread.
``tonnes``, ``short_tons``
    Product to spread, 0.01 t and 0.01 short ton (2 000 lb).
``truckloads``
    Whole loads of ``capacity_t``. **Loads are counted per paddock**: a paddock
    needs ``ceil(tonnes / capacity)`` loads and its zones share them in
    proportion to their tonnes (largest remainder), so the zone rows add up to
    the paddock row. The farm row is the sum of its paddocks' loads.
``price_per_t``, ``cost``
    Price per tonne and ``tonnes x price`` to the cent, empty where no price
    was given.

**Rounding.** Each paddock figure is its exact total rounded (areas and
tonnes to 0.01, cost to 0.01 of the currency, from the rounded tonnes); the
zones share the rounded paddock figure by the largest-remainder method, so
every zone is its exact figure rounded up or down and the zone rows add up
to the paddock row exactly. The paddock's rounded spread area is shared by
the zones with a rate and the rest of its rounded area by the others, so a
zone's spread area is its area (rounded apart, a zone of 3.30 ha could show
3.31 ha spread). Farm rows are the sums of the paddock rows, so a farm figure
can differ from its exact total by a few hundredths.

Examples
--------
>>> import geopandas as gpd, shapely
>>> zones = gpd.GeoDataFrame(
...     {"paddock": ["North", "North"], "product": ["gypsum", "gypsum"], "zone": [1, 2],
...      "kind": ["rate", "rate"], "rate_kg_ha": [2000.0, 3000.0], "area_ha": [4.0, 6.0]},
...     geometry=[shapely.box(0, 0, 200, 200), shapely.box(200, 0, 500, 200)], crs="EPSG:32755")
>>> t = tonnage_table(zones, capacity_t=12.0, price_per_t={"gypsum": 50.0})
>>> farm = t[t["level"] == "farm"].iloc[0]
>>> float(farm["tonnes"]), int(farm["truckloads"]), float(farm["cost"])
(26.0, 3, 1300.0)
>>> t["truckloads"].tolist()   # 8 t and 18 t share the paddock's 3 loads
[1, 2, 3, 3]
>>> t["level"].tolist()
['zone', 'zone', 'paddock', 'farm']
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from .errors import InputError, SettingsError
from .units import AC_PER_HA, KG_HA_PER_LB_AC, RATE_UNITS, area_unit_for, format_rate

__all__ = [
    "TONNAGE_COLUMNS",
    "LEVELS",
    "KG_PER_SHORT_TON",
    "MASS_UNITS",
    "apportion",
    "mass_unit_for",
    "tonnage_table",
    "tonnage_csv",
    "passes_csv",
    "format_summary",
    "first_season_tonnes",
]

logger = logging.getLogger(__name__)

#: Columns of the tonnage table, in order.
TONNAGE_COLUMNS: tuple[str, ...] = (
    "level",
    "paddock",
    "product",
    "zone",
    "kind",
    "area_ha",
    "spread_area_ha",
    "area_ac",
    "spread_area_ac",
    "rate_kg_ha",
    "tonnes",
    "short_tons",
    "truckloads",
    "price_per_t",
    "cost",
)

#: Values of the ``level`` column.
LEVELS: tuple[str, ...] = ("zone", "paddock", "farm")

#: A short ton is 2 000 lb of 0.45359237 kg (the international pound, 1959; NIST SP 811).
KG_PER_SHORT_TON: float = 2000 * 0.45359237

#: Mass units of the tonnage: metric tonnes, or US short tons.
MASS_UNITS: tuple[str, ...] = ("t", "short ton")

_NEEDED = ("paddock", "product", "zone", "rate_kg_ha", "area_ha")


def mass_unit_for(rate_unit: str) -> str:
    """The mass unit that goes with a rate unit: short tons with lb/ac, tonnes otherwise.

    Examples
    --------
    >>> mass_unit_for("lb/ac"), mass_unit_for("t/ha")
    ('short ton', 't')
    """
    return "short ton" if rate_unit == "lb/ac" else "t"


def apportion(total: int, weights: np.ndarray) -> np.ndarray:
    """Share a whole number among weights by the largest-remainder method.

    Each share is the floor or the ceiling of ``total x weight / sum(weights)``;
    the shares add up to ``total``. Ties go to the earlier weight. With no
    weight above 0, the whole goes to the first (there is nothing to share).

    Parameters
    ----------
    total : int
        The whole number to share (0 or more).
    weights : array of float
        One weight of 0 or more per share.

    Returns
    -------
    ndarray of int64

    Examples
    --------
    >>> apportion(3, np.array([8.0, 18.0])).tolist()
    [1, 2]
    >>> apportion(100, np.array([1.0, 1.0, 1.0])).tolist()
    [34, 33, 33]
    """
    w = np.asarray(weights, dtype=float)
    out = np.zeros(w.shape, dtype="int64")
    if total <= 0 or w.size == 0:
        return out
    s = float(w.sum())
    if not s > 0:
        out[0] = total
        return out
    return _largest_remainder(total, total * w / s)


def _largest_remainder(total: int, quota: np.ndarray) -> np.ndarray:
    """Each quota's floor, and one more for the largest remainders until ``total``; when the
    quotas add up to ``total`` within 0.5, every share is its quota's floor or ceiling."""
    base = np.floor(quota).astype("int64")
    rest = max(total - int(base.sum()), 0)
    order = np.argsort(-(quota - base), kind="stable")
    base[order[:rest]] += 1
    return base


def _per_product(
    value: Mapping[str, float] | float | None, product: str, *, key: str, minimum_exclusive: bool
) -> float:
    """The figure for ``product`` from a per-product mapping or a single number."""
    if value is None:
        return math.nan
    if isinstance(value, Mapping):
        if product not in value:
            return math.nan
        v = float(value[product])
        where = f"{key}.{product}"
    else:
        v = float(value)
        where = key
    if not math.isfinite(v) or v < 0 or (minimum_exclusive and v == 0):
        need = "more than 0" if minimum_exclusive else "0 or more"
        raise SettingsError(f"must be {need} (got {v:g})", key=where)
    return v


def _cents(x: float) -> int:
    """``x`` in hundredths, rounded half away from zero (as a person rounds)."""
    return int(math.floor(abs(x) * 100 + 0.5 + 1e-9)) * (1 if x >= 0 else -1)


def _mean_rate(tonnes: float, spread_ha: float) -> float:
    """Mean rate over the spread area, whole kg/ha (from the exact totals); NaN when none."""
    if not spread_ha > 0:
        return math.nan
    return float(_cents(tonnes * 1000.0 / spread_ha / 100.0))


def _area_shares(exact: np.ndarray, spread: np.ndarray) -> tuple[np.ndarray, int, int]:
    """A paddock's zone areas in hundredths, its area and its spread area (``spread``: the
    zones with a rate), each total its exact figure rounded.

    The rounded spread area goes to the zones spread and the rest of the rounded area to the
    others, each group by the largest remainder of its exact areas, so every zone is its
    exact area rounded up or down, a zone's spread area is its area (rounded apart, a zone of
    3.30 ha could show 3.31 ha spread) and the spread area is never above the area.
    """
    total = _cents(float(exact.sum()))
    spread_total = _cents(float(exact[spread].sum()))
    shares = np.zeros(len(exact), dtype="int64")
    shares[spread] = _largest_remainder(spread_total, exact[spread] * 100.0)
    shares[~spread] = _largest_remainder(total - spread_total, exact[~spread] * 100.0)
    return shares, total, spread_total


def _paddock_areas(rows: pd.DataFrame, shares: dict[str, np.ndarray | None],
                   sums: dict[str, int | None]) -> None:
    """The rounded areas and spread areas (ha and ac) of a paddock's zones and their totals,
    by :func:`_area_shares`, into ``shares`` and ``sums``."""
    spread = rows["rate_kg_ha"].to_numpy(dtype=float) > 0
    for col, factor in (("area_ha", 1.0), ("area_ac", AC_PER_HA)):
        area, sums[col], sums[f"spread_{col}"] = _area_shares(
            rows["area_ha"].to_numpy(dtype=float) * factor, spread)
        shares[col], shares[f"spread_{col}"] = area, np.where(spread, area, 0)


def tonnage_table(
    zones: pd.DataFrame,
    *,
    capacity_t: Mapping[str, float] | float | None = None,
    price_per_t: Mapping[str, float] | None = None,
) -> pd.DataFrame:
    """Tonnes, truckloads and cost per zone, with paddock subtotals and farm totals, rounded.

    Parameters
    ----------
    zones
        Zones table (GeoDataFrame or DataFrame) with at least ``paddock``,
        ``product``, ``zone``, ``rate_kg_ha`` and ``area_ha``; ``kind`` is
        carried when present.
    capacity_t
        Load one truck or spreader carries, t: one figure for every product or
        one per product. ``None`` (or a product missing from the mapping)
        leaves ``truckloads`` empty.
    price_per_t
        Price per tonne per product; products without a price get no cost.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`TONNAGE_COLUMNS`, rows ordered by paddock and product
        (zones, then their subtotal), then one farm row per product; figures
        rounded as the module docstring says, zone rows adding up to paddock
        rows and paddock rows to farm rows.

    Raises
    ------
    InputError
        A needed column is missing, or an area or rate is negative or not a number.
    SettingsError
        A capacity of 0 or less, or a negative price (key ``capacity_t`` /
        ``price_per_t.<product>``).
    """
    missing = [c for c in _NEEDED if c not in zones.columns]
    if missing:
        raise InputError(
            f"the zones table lacks column(s) {', '.join(missing)}",
            fix="pass the zones made by geosoil.zones.make_zones",
        )
    z = pd.DataFrame(zones.drop(columns="geometry", errors="ignore")).copy()
    for col in ("rate_kg_ha", "area_ha"):
        vals = pd.to_numeric(z[col], errors="coerce")
        bad = ~np.isfinite(vals.to_numpy(dtype=float)) | (vals.to_numpy(dtype=float) < 0)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"zone {z['zone'].iloc[i]} of paddock '{z['paddock'].iloc[i]}' has "
                f"{col} = {z[col].iloc[i]!r}",
                column=col,
                fix="areas and rates must be numbers of 0 or more",
            )
        z[col] = vals.astype(float)
    if "kind" not in z.columns:
        z["kind"] = "rate"
    z["tonnes"] = z["area_ha"] * z["rate_kg_ha"] / 1000.0
    z["spread_area_ha"] = np.where(z["rate_kg_ha"] > 0, z["area_ha"], 0.0)
    z["paddock"] = z["paddock"].astype(str)
    z["product"] = z["product"].astype(str)
    z = z.sort_values(["paddock", "product", "zone"], kind="stable")

    caps = {p: _per_product(capacity_t, p, key="capacity_t", minimum_exclusive=True)
            for p in z["product"].unique()}
    prices = {p: _per_product(price_per_t, p, key="price_per_t", minimum_exclusive=False)
              for p in z["product"].unique()}

    records: list[dict[str, object]] = []
    farm: dict[str, dict[str, int | None]] = {}
    exact_farm: dict[str, list[float]] = {}
    for (paddock, product), rows in z.groupby(["paddock", "product"], sort=True):
        cap, price = caps[product], prices[product]
        t_exact = rows["tonnes"].to_numpy(dtype=float)
        sums: dict[str, int | None] = {}
        shares: dict[str, np.ndarray | None] = {}
        _paddock_areas(rows, shares, sums)
        for col, exact in (("tonnes", t_exact),
                           ("short_tons", t_exact * 1000.0 / KG_PER_SHORT_TON)):
            total = _cents(float(exact.sum()))
            sums[col] = total
            # the rounded total shared by the exact figures themselves (not rescaled to it),
            # so each zone is its exact figure rounded up or down
            shares[col] = _largest_remainder(total, exact * 100.0)
        tonnes = sums["tonnes"] or 0
        if math.isfinite(cap):
            loads = math.ceil(tonnes / 100 / cap - 1e-9) if tonnes > 0 else 0
            sums["truckloads"] = loads
            shares["truckloads"] = apportion(loads, t_exact)
        else:
            sums["truckloads"] = shares["truckloads"] = None
        if math.isfinite(price):
            cost = _cents(tonnes / 100 * price)
            sums["cost"] = cost
            tonnes_shares = shares["tonnes"]
            assert tonnes_shares is not None  # set in the loop above
            shares["cost"] = apportion(cost, tonnes_shares.astype(float))
        else:
            sums["cost"] = shares["cost"] = None
        for i, r in enumerate(rows.itertuples(index=False)):
            rec: dict[str, object] = {
                "level": "zone", "paddock": paddock, "product": product, "zone": int(r.zone),
                "kind": str(r.kind), "rate_kg_ha": _cents(r.rate_kg_ha / 100.0),
            }
            for col, share in shares.items():
                rec[col] = None if share is None else int(share[i])
            records.append(rec)
        spread_exact = float(rows["spread_area_ha"].sum())
        t_sum = float(t_exact.sum())
        records.append({"level": "paddock", "paddock": paddock, "product": product, **sums,
                        "rate_kg_ha": _mean_rate(t_sum, spread_exact)})
        ex = exact_farm.setdefault(product, [0.0, 0.0])
        ex[0] += t_sum
        ex[1] += spread_exact
        acc = farm.setdefault(product, {})
        for col, v in sums.items():
            if v is None:
                acc[col] = acc.get(col)  # stays None unless another paddock has it
            else:
                acc[col] = (acc.get(col) or 0) + v
    for product in sorted(farm):
        records.append({"level": "farm", "product": product, **farm[product],
                        "rate_kg_ha": _mean_rate(*exact_farm[product])})

    table = pd.DataFrame.from_records(records, columns=list(TONNAGE_COLUMNS))
    for col in ("area_ha", "spread_area_ha", "area_ac", "spread_area_ac", "tonnes", "short_tons",
                "cost"):
        table[col] = pd.to_numeric(table[col], errors="coerce").astype(float) / 100.0
    table["rate_kg_ha"] = pd.to_numeric(table["rate_kg_ha"], errors="coerce").astype(float)
    table["truckloads"] = pd.array(
        [pd.NA if v is None or (isinstance(v, float) and math.isnan(v)) else int(v)
         for v in table["truckloads"]], dtype="Int64",
    )
    table["price_per_t"] = table["product"].map(prices).astype(float)
    table["zone"] = table["zone"].astype("Int64")
    table["paddock"] = table["paddock"].astype(object).where(table["paddock"].notna(), None)
    table["kind"] = table["kind"].astype(object).where(table["kind"].notna(), None)
    return table.reset_index(drop=True)


def tonnage_csv(table: pd.DataFrame, *, mass_unit: str = "t", currency: str = "",
                area_unit: str = "ha") -> pd.DataFrame:
    """The tonnage table as ``tonnage.csv`` shows it: one mass unit, the currency named,
    every figure as text with its rounding (``12.30``, not ``12.299999999``).

    Parameters
    ----------
    table : DataFrame
        From :func:`tonnage_table`.
    mass_unit : str
        ``"t"`` (column ``tonnes``) or ``"short ton"`` (column ``short_tons``).
    currency : str
        Currency code for the price and cost columns (``cost_AUD``); "" for none.
    area_unit : str
        ``"ha"`` (columns ``area_ha``, ``spread_area_ha``, ``rate_kg_ha``) or ``"ac"``
        (``area_ac``, ``spread_area_ac``, ``rate_lb_ac``), as the rate unit goes.

    Returns
    -------
    DataFrame
        Text cells; missing figures are empty.

    Examples
    --------
    >>> zones = pd.DataFrame({"paddock": ["North"], "product": ["gypsum"], "zone": [1],
    ...                       "rate_kg_ha": [2500.0], "area_ha": [4.0]})
    >>> t = tonnage_csv(tonnage_table(zones, price_per_t={"gypsum": 95.0}), currency="AUD")
    >>> list(t.columns)[-4:], t["cost_AUD"].tolist()
    (['tonnes', 'truckloads', 'price_per_t_AUD', 'cost_AUD'], ['950.00', '950.00', '950.00'])
    """
    if mass_unit not in MASS_UNITS:
        raise SettingsError(f"mass unit {mass_unit!r} is not one of {', '.join(MASS_UNITS)}",
                            key="mass_unit")
    metric = mass_unit == "t"
    per = "t" if metric else "short_ton"
    cur = f"_{currency}" if currency else ""

    def fixed(col: str, digits: int, factor: float = 1.0) -> pd.Series:
        return pd.Series(_fixed(table[col], digits, factor), index=table.index, dtype=object)

    out = pd.DataFrame({
        "level": table["level"],
        "paddock": table["paddock"].map(lambda v: "" if v is None else str(v)),
        "product": table["product"],
        "zone": table["zone"].map(lambda v: "" if v is pd.NA else str(int(v))),
        "kind": table["kind"].map(lambda v: "" if v is None else str(v)),
    })
    if area_unit == "ac":
        out["area_ac"] = fixed("area_ac", 2)
        out["spread_area_ac"] = fixed("spread_area_ac", 2)
        out["rate_lb_ac"] = fixed("rate_kg_ha", 0, 1.0 / KG_HA_PER_LB_AC)
    elif area_unit == "ha":
        out["area_ha"] = fixed("area_ha", 2)
        out["spread_area_ha"] = fixed("spread_area_ha", 2)
        out["rate_kg_ha"] = fixed("rate_kg_ha", 0)
    else:
        raise SettingsError(f"area unit {area_unit!r} is not 'ha' or 'ac'", key="area_unit")
    out["tonnes" if metric else "short_tons"] = fixed("tonnes" if metric else "short_tons", 2)
    out["truckloads"] = table["truckloads"].map(lambda v: "" if v is pd.NA else str(int(v)))
    out[f"price_per_{per}{cur}"] = fixed(
        "price_per_t", 2, 1.0 if metric else KG_PER_SHORT_TON / 1000.0)
    out[f"cost{cur}"] = fixed("cost", 2)
    return out


def passes_csv(zones: pd.DataFrame, *, rate_unit: str = "kg/ha",
               tonnage: pd.DataFrame | None = None) -> pd.DataFrame:
    """The zones that need more than one pass (or season), as ``passes.csv`` shows them:
    areas and rates in the units of ``tonnage.csv`` for ``rate_unit`` (acres and lb/ac
    with lb/ac, else hectares and kg/ha), every figure as text with its rounding.

    Parameters
    ----------
    zones : DataFrame
        Zones with ``paddock``, ``product``, ``zone``, ``rate_kg_ha``, ``area_ha`` and
        (when any zone is split) ``passes``, ``per_pass_kg_ha``, ``schedule``.
    rate_unit : str
        ``[output] rate_unit``: one of kg/ha, t/ha, lb/ac.
    tonnage : DataFrame, optional
        The run's :func:`tonnage_table`: a zone's area is then its zone row's there, the
        figure tonnage.csv shows (a paddock's rounded area shared among its zones), else
        the zone's own area rounded.

    Returns
    -------
    DataFrame
        One row per zone with more than one pass: ``paddock, product, zone, rate_kg_ha,
        passes, per_pass_kg_ha, schedule, area_ha`` (``rate_lb_ac``, ``per_pass_lb_ac``,
        ``area_ac`` with lb/ac). No row (the header alone) when every zone takes one pass.

    Examples
    --------
    >>> z = pd.DataFrame({"paddock": ["North"], "product": ["lime"], "zone": [5],
    ...                   "rate_kg_ha": [5000.0], "passes": [2], "per_pass_kg_ha": [2500.0],
    ...                   "schedule": ["2 passes of 2,230 lb/ac"], "area_ha": [3.0]})
    >>> passes_csv(z, rate_unit="lb/ac").iloc[0].tolist()
    ['North', 'lime', '5', '4461', '2', '2230', '2 passes of 2,230 lb/ac', '7.41']
    """
    if rate_unit not in RATE_UNITS:
        raise SettingsError(
            f"rate unit '{rate_unit}' is not known; use one of {', '.join(RATE_UNITS)}",
            key="rate_unit",
        )
    acres = area_unit_for(rate_unit) == "ac"
    rate_col, per_col, area_col = (("rate_lb_ac", "per_pass_lb_ac", "area_ac") if acres
                                   else ("rate_kg_ha", "per_pass_kg_ha", "area_ha"))
    columns = ["paddock", "product", "zone", rate_col, "passes", per_col, "schedule", area_col]
    if "passes" not in zones.columns:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in columns})
    split = zones[pd.to_numeric(zones["passes"], errors="coerce").fillna(0) > 1]
    rate_factor = 1.0 / KG_HA_PER_LB_AC if acres else 1.0
    area_factor = AC_PER_HA if acres else 1.0

    def fixed(col: str, digits: int, factor: float) -> list[str]:
        return _fixed(split[col], digits, factor)

    area = fixed("area_ha", 2, area_factor)
    if tonnage is not None and len(split):
        rows = tonnage[tonnage["level"].astype(str) == "zone"]
        keys = zip(rows["paddock"].astype(str), rows["product"].astype(str),
                   pd.to_numeric(rows["zone"], errors="coerce"), strict=True)
        shown = dict(zip(keys, _fixed(rows["area_ac" if acres else "area_ha"], 2),
                         strict=True))
        area = [shown.get((str(p), str(q), float(z)), a) for p, q, z, a in
                zip(split["paddock"], split["product"], split["zone"], area, strict=True)]

    return pd.DataFrame({
        "paddock": [str(v) for v in split["paddock"]],
        "product": [str(v) for v in split["product"]],
        "zone": [str(int(v)) for v in split["zone"]],
        rate_col: fixed("rate_kg_ha", 0, rate_factor),
        "passes": [str(int(v)) for v in split["passes"]],
        per_col: fixed("per_pass_kg_ha", 0, rate_factor),
        "schedule": [str(v) if isinstance(v, str) else "" for v in split["schedule"]],
        area_col: area,
    }, columns=columns)


def _fixed(values: Any, digits: int, factor: float = 1.0) -> list[str]:
    """Each value times ``factor`` as text with ``digits`` decimals ("" where not a number):
    the figures of tonnage.csv and passes.csv."""
    vals = pd.to_numeric(values, errors="coerce").astype(float) * factor
    return ["" if not math.isfinite(v) else f"{v:.{digits}f}" for v in vals]


def _num(value: object, digits: int) -> str:
    if value is None or value is pd.NA:
        return "-"
    v = float(value)  # type: ignore[arg-type]
    if not math.isfinite(v):
        return "-"
    return f"{v:,.{digits}f}"


def _rate(value: object, unit: str) -> str:
    if value is None or value is pd.NA:
        return "-"
    return format_rate(float(value), unit, with_unit=False, missing="-")  # type: ignore[arg-type]


def format_summary(table: pd.DataFrame, *, rate_unit: str = "kg/ha", currency: str = "") -> str:
    """A plain-text summary of a tonnage table for the terminal.

    Lists each paddock's subtotal per product and the farm totals, then the
    total cost where prices were given, and a reminder that rates are advisory.

    Parameters
    ----------
    table
        From :func:`tonnage_table` (rates in kg/ha).
    rate_unit
        Unit of the mean rates shown: one of :data:`geosoil.units.RATE_UNITS`;
        with lb/ac the amounts are in short tons and the areas in acres, otherwise in
        tonnes and hectares.
    currency
        Currency code shown with the cost ("" for none).

    Returns
    -------
    str
        The summary, several lines.

    Raises
    ------
    SettingsError
        An unknown ``rate_unit`` (key ``rate_unit``).

    Examples
    --------
    >>> import pandas as pd
    >>> zones = pd.DataFrame({"paddock": ["North"], "product": ["gypsum"], "zone": [1],
    ...                       "rate_kg_ha": [2500.0], "area_ha": [4.0]})
    >>> table = tonnage_table(zones, capacity_t=8.0)
    >>> print(format_summary(table))  # doctest: +NORMALIZE_WHITESPACE
    Paddock  Product  Area (ha)  Spread (ha)  Mean rate (kg/ha)  Tonnes  Loads
    North    gypsum        4.00         4.00              2,500   10.00      2
    Farm     gypsum        4.00         4.00              2,500   10.00      2
    <BLANKLINE>
    Rates are advisory: have them checked by a qualified agronomist before spreading.
    >>> print(format_summary(table, rate_unit="t/ha").splitlines()[1])
    North    gypsum        4.00         4.00               2.5   10.00      2
    """
    if rate_unit not in RATE_UNITS:
        raise SettingsError(
            f"rate unit '{rate_unit}' is not known; use one of {', '.join(RATE_UNITS)}",
            key="rate_unit",
        )
    rows = table[table["level"].isin(["paddock", "farm"])]
    show_loads = rows["truckloads"].notna().any()
    show_cost = rows["cost"].notna().any()
    metric = mass_unit_for(rate_unit) == "t"
    area = area_unit_for(rate_unit)  # acres beside a rate per acre
    header = ["Paddock", "Product", f"Area ({area})", f"Spread ({area})",
              f"Mean rate ({rate_unit})", "Tonnes" if metric else "Short tons"]
    if show_loads:
        header.append("Loads")
    if show_cost:
        header.append(f"Cost ({currency})" if currency else "Cost")
    body: list[list[str]] = []
    for r in rows.itertuples(index=False):
        line = [
            "Farm" if r.level == "farm" else str(r.paddock),
            str(r.product),
            _num(r.area_ac if area == "ac" else r.area_ha, 2),
            _num(r.spread_area_ac if area == "ac" else r.spread_area_ha, 2),
            _rate(r.rate_kg_ha, rate_unit),
            _num(r.tonnes if metric else r.short_tons, 2),
        ]
        if show_loads:
            line.append("-" if r.truckloads is pd.NA else str(int(r.truckloads)))
        if show_cost:
            line.append(_num(r.cost, 2))
        body.append(line)
    widths = [max(len(h), *(len(b[i]) for b in body)) if body else len(h)
              for i, h in enumerate(header)]

    def fmt(cells: list[str]) -> str:
        out = [c.ljust(widths[i]) if i < 2 else c.rjust(widths[i]) for i, c in enumerate(cells)]
        return "  ".join(out).rstrip()

    lines = [fmt(header)] + [fmt(b) for b in body]
    if show_cost:
        farm_cost = table.loc[table["level"] == "farm", "cost"]
        lines.append("")
        total = _num(farm_cost.sum(min_count=1), 2) + (f" {currency}" if currency else "")
        lines.append(f"Total cost, products with a price: {total}")
    lines.append("")
    lines.append(
        "Rates are advisory: have them checked by a qualified agronomist before spreading."
    )
    return "\n".join(lines)


def first_season_tonnes(zones: pd.DataFrame) -> dict[str, float]:
    """Tonnes of each product to spread in the first season when rates are split into seasons.

    A zone split into seasons gets ``per_pass_kg_ha`` this season and the rest in
    later ones (after a re-test); a zone spread in one go gets its whole rate.

    Parameters
    ----------
    zones : DataFrame
        Zones with ``product``, ``area_ha``, ``rate_kg_ha``, ``passes`` and ``per_pass_kg_ha``.

    Returns
    -------
    dict of str to float
        Tonnes per product (empty when there are no zones).

    Examples
    --------
    >>> z = pd.DataFrame({"product": ["gypsum", "gypsum"], "area_ha": [10.0, 5.0],
    ...                   "rate_kg_ha": [4000.0, 1000.0], "passes": [2, 1],
    ...                   "per_pass_kg_ha": [2000.0, 1000.0]})
    >>> first_season_tonnes(z)   # 10 ha x 2 t/ha + 5 ha x 1 t/ha [derived]
    {'gypsum': 25.0}
    """
    if zones.empty:
        return {}
    per_pass = zones.get("per_pass_kg_ha", zones["rate_kg_ha"]).fillna(zones["rate_kg_ha"])
    now = zones["area_ha"].astype(float) * per_pass.astype(float) / 1000.0
    return {str(p): float(t) for p, t in now.groupby(zones["product"]).sum().items()}
