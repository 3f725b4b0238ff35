"""Tonnes of product per zone, paddock and farm; truckloads; cost.

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
    Zone area; on total rows the area of all zones summed, exclusions included.
``spread_area_ha``
    Area with a rate above 0.
``rate_kg_ha``
    The zone's rate; on total rows the mean over ``spread_area_ha``
    (tonnes x 1000 / spread area), empty when nothing is spread.
``tonnes``
    Product to spread, t.
``loads``
    ``tonnes / capacity``: how many loads' worth, as a fraction.
``truckloads``
    Whole loads to carry the row's tonnes on their own (``ceil(loads)``); a
    paddock's truckloads can be fewer than the sum over its zones, because one
    load serves several zones.
``price_per_t``, ``cost``
    Price and ``tonnes x price``, empty where no price was given.

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
>>> t["level"].tolist()
['zone', 'zone', 'paddock', 'farm']
"""

from __future__ import annotations

import logging
import math
from collections.abc import Mapping

import numpy as np
import pandas as pd

from .errors import InputError, SettingsError
from .units import RATE_UNITS, format_rate

__all__ = ["TONNAGE_COLUMNS", "LEVELS", "tonnage_table", "format_summary", "first_season_tonnes"]

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
    "rate_kg_ha",
    "tonnes",
    "loads",
    "truckloads",
    "price_per_t",
    "cost",
)

#: Values of the ``level`` column.
LEVELS: tuple[str, ...] = ("zone", "paddock", "farm")

_NEEDED = ("paddock", "product", "zone", "rate_kg_ha", "area_ha")


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


def _totals(rows: pd.DataFrame) -> dict[str, float]:
    area = float(rows["area_ha"].sum())
    spread = float(rows.loc[rows["rate_kg_ha"] > 0, "area_ha"].sum())
    tonnes = float(rows["tonnes"].sum())
    return {
        "area_ha": area,
        "spread_area_ha": spread,
        "rate_kg_ha": tonnes * 1000.0 / spread if spread > 0 else math.nan,
        "tonnes": tonnes,
    }


def tonnage_table(
    zones: pd.DataFrame,
    *,
    capacity_t: Mapping[str, float] | float | None = None,
    price_per_t: Mapping[str, float] | None = None,
) -> pd.DataFrame:
    """Tonnes, loads and cost per zone, with paddock subtotals and farm totals.

    Parameters
    ----------
    zones
        Zones table (GeoDataFrame or DataFrame) with at least ``paddock``,
        ``product``, ``zone``, ``rate_kg_ha`` and ``area_ha``; ``kind`` is
        carried when present.
    capacity_t
        Load one truck or spreader carries, t: one figure for every product or
        one per product. ``None`` (or a product missing from the mapping)
        leaves ``loads`` and ``truckloads`` empty.
    price_per_t
        Price per tonne per product; products without a price get no cost.

    Returns
    -------
    pandas.DataFrame
        Columns :data:`TONNAGE_COLUMNS`, rows ordered by paddock and product
        (zones, then their subtotal), then one farm row per product.

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
    for (paddock, product), rows in z.groupby(["paddock", "product"], sort=True):
        for r in rows.itertuples(index=False):
            records.append({
                "level": "zone", "paddock": paddock, "product": product,
                "zone": int(r.zone), "kind": str(r.kind), "area_ha": float(r.area_ha),
                "spread_area_ha": float(r.spread_area_ha), "rate_kg_ha": float(r.rate_kg_ha),
                "tonnes": float(r.tonnes),
            })
        records.append({"level": "paddock", "paddock": paddock, "product": product,
                        **_totals(rows)})
    for product, rows in z.groupby("product", sort=True):
        records.append({"level": "farm", "product": product, **_totals(rows)})

    table = pd.DataFrame.from_records(records, columns=list(TONNAGE_COLUMNS))
    cap = table["product"].map(caps).astype(float)
    table["loads"] = table["tonnes"] / cap
    whole = np.ceil(np.round(table["loads"].to_numpy(dtype=float), 9))
    table["truckloads"] = pd.array(
        [pd.NA if not math.isfinite(v) else int(v) for v in whole], dtype="Int64"
    )
    table["price_per_t"] = table["product"].map(prices).astype(float)
    table["cost"] = table["tonnes"] * table["price_per_t"]
    table["zone"] = table["zone"].astype("Int64")
    table["paddock"] = table["paddock"].astype(object).where(table["paddock"].notna(), None)
    table["kind"] = table["kind"].astype(object).where(table["kind"].notna(), None)
    return table.reset_index(drop=True)


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


def format_summary(table: pd.DataFrame, *, rate_unit: str = "kg/ha") -> str:
    """A plain-text summary of a tonnage table for the terminal.

    Lists each paddock's subtotal per product and the farm totals, then the
    total cost where prices were given, and a reminder that rates are advisory.

    Parameters
    ----------
    table
        From :func:`tonnage_table` (rates in kg/ha).
    rate_unit
        Unit of the mean rates shown: one of :data:`geosoil.units.RATE_UNITS`.

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
    header = ["Paddock", "Product", "Area (ha)", "Spread (ha)", f"Mean rate ({rate_unit})",
              "Tonnes"]
    if show_loads:
        header.append("Loads")
    if show_cost:
        header.append("Cost")
    body: list[list[str]] = []
    for r in rows.itertuples(index=False):
        line = [
            "Farm" if r.level == "farm" else str(r.paddock),
            str(r.product),
            _num(r.area_ha, 2),
            _num(r.spread_area_ha, 2),
            _rate(r.rate_kg_ha, rate_unit),
            _num(r.tonnes, 2),
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
        lines.append(f"Total cost, products with a price: {_num(farm_cost.sum(min_count=1), 2)}")
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
