"""Tonnage: tonnes = area x rate, subtotals, farm totals, truckloads and cost.

Figures are [derived] from the definitions (1 t = 1000 kg; loads = ceil(tonnes / capacity)).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from geosoil.errors import InputError, SettingsError
from geosoil.tonnage import (
    LEVELS,
    TONNAGE_COLUMNS,
    apportion,
    format_summary,
    passes_csv,
    tonnage_csv,
    tonnage_table,
)


def zones_frame() -> pd.DataFrame:
    return pd.DataFrame({
        "paddock": ["North", "North", "North", "South", "South", "North"],
        "product": ["gypsum", "gypsum", "gypsum", "gypsum", "lime", "lime"],
        "zone": [1, 2, 3, 1, 1, 1],
        "kind": ["rate", "rate", "exclusion", "rate", "rate", "rate"],
        "rate_kg_ha": [2000.0, 3500.0, 0.0, 1000.0, 2500.0, 1200.0],
        "area_ha": [4.0, 6.0, 0.5, 10.0, 8.0, 10.5],
    })


def test_rows_levels_and_columns() -> None:
    t = tonnage_table(zones_frame())
    assert list(t.columns) == list(TONNAGE_COLUMNS)
    assert set(t["level"]) == set(LEVELS)
    # one zone row per input zone, one subtotal per paddock and product, one farm row per product
    assert (t["level"] == "zone").sum() == 6
    assert (t["level"] == "paddock").sum() == 4
    assert t.loc[t["level"] == "farm", "product"].tolist() == ["gypsum", "lime"]
    # each subtotal follows its zones
    north_gypsum = t[(t["paddock"] == "North") & (t["product"] == "gypsum")]
    assert north_gypsum["level"].tolist() == ["zone", "zone", "zone", "paddock"]
    assert t.loc[t["level"] == "farm", "paddock"].isna().all()


def test_zone_tonnes_are_area_times_rate() -> None:
    t = tonnage_table(zones_frame())
    z = t[t["level"] == "zone"]
    # 4 ha x 2000 kg/ha = 8 t; 6 ha x 3500 kg/ha = 21 t [derived]
    ng = z[(z["paddock"] == "North") & (z["product"] == "gypsum")]
    assert ng["tonnes"].tolist() == pytest.approx([8.0, 21.0, 0.0])
    sub = t[(t["level"] == "paddock") & (t["paddock"] == "North") & (t["product"] == "gypsum")]
    assert float(sub["tonnes"].iloc[0]) == pytest.approx(29.0)
    assert float(sub["area_ha"].iloc[0]) == pytest.approx(10.5)  # exclusions included
    assert float(sub["spread_area_ha"].iloc[0]) == pytest.approx(10.0)
    # mean rate over the spread area: 29 t / 10 ha = 2900 kg/ha [derived]
    assert float(sub["rate_kg_ha"].iloc[0]) == pytest.approx(2900.0)


def test_farm_total_equals_sum_of_area_times_rate() -> None:
    zones = zones_frame()
    t = tonnage_table(zones)
    farm = t[t["level"] == "farm"].set_index("product")["tonnes"]
    for product, rows in zones.groupby("product"):
        assert farm[product] == pytest.approx((rows["area_ha"] * rows["rate_kg_ha"]).sum() / 1000)


def test_truckloads_and_cost() -> None:
    t = tonnage_table(zones_frame(), capacity_t={"gypsum": 12.0},
                      price_per_t={"gypsum": 50.0, "lime": 40.0})
    farm = t[t["level"] == "farm"].set_index("product")
    # gypsum: 8 + 21 + 10 = 39 t; 39 / 12 = 3.25 -> 4 loads; cost 39 x 50 = 1950 [derived]
    assert farm.loc["gypsum", "tonnes"] == pytest.approx(39.0)
    # loads per paddock: North 29 t -> ceil(29 / 12) = 3, South 10 t -> 1; farm 3 + 1 = 4
    assert farm.loc["gypsum", "truckloads"] == 4
    assert farm.loc["gypsum", "cost"] == pytest.approx(1950.0)
    # lime has a price but no capacity: cost but no loads
    assert pd.isna(farm.loc["lime", "truckloads"]) and "loads" not in t.columns
    assert farm.loc["lime", "cost"] == pytest.approx((20.0 + 12.6) * 40.0)
    # the zones share their paddock's 3 loads by tonnes (8, 21, 0 t: quotas 0.83, 2.17, 0;
    # largest remainder gives 1, 2, 0), so the zone rows add up to the paddock row
    z = t[(t["level"] == "zone") & (t["paddock"] == "North") & (t["product"] == "gypsum")]
    sub = t[(t["level"] == "paddock") & (t["paddock"] == "North") & (t["product"] == "gypsum")]
    assert z["truckloads"].tolist() == [1, 2, 0] and int(sub["truckloads"].iloc[0]) == 3


def test_exact_whole_loads_are_not_rounded_up() -> None:
    zones = pd.DataFrame({"paddock": ["A"], "product": ["gypsum"], "zone": [1],
                          "rate_kg_ha": [3000.0], "area_ha": [8.0]})  # 24 t
    t = tonnage_table(zones, capacity_t=12.0)
    assert t["truckloads"].tolist() == [2, 2, 2]


def test_no_capacity_no_price() -> None:
    t = tonnage_table(zones_frame(), capacity_t=None, price_per_t=None)
    assert t["truckloads"].isna().all() and t["cost"].isna().all()


def test_bad_settings_and_input() -> None:
    with pytest.raises(SettingsError) as e:
        tonnage_table(zones_frame(), capacity_t=0.0)
    assert e.value.key == "capacity_t"
    with pytest.raises(SettingsError) as e:
        tonnage_table(zones_frame(), price_per_t={"gypsum": -1.0})
    assert e.value.key == "price_per_t.gypsum"
    with pytest.raises(InputError, match="area_ha"):
        tonnage_table(zones_frame().drop(columns="area_ha"))
    bad = zones_frame()
    bad.loc[1, "rate_kg_ha"] = np.nan
    with pytest.raises(InputError) as e:
        tonnage_table(bad)
    assert e.value.column == "rate_kg_ha"


def test_format_summary_lists_totals_and_says_rates_are_advisory() -> None:
    text = format_summary(tonnage_table(zones_frame(), capacity_t=12.0,
                                        price_per_t={"gypsum": 50.0}))
    lines = text.splitlines()
    assert lines[0].split()[:2] == ["Paddock", "Product"]
    assert any(line.startswith("North") and "gypsum" in line and "29.00" in line for line in lines)
    assert any(line.startswith("Farm") and "39.00" in line for line in lines)
    assert "Total cost" in text and "1,950.00" in text
    assert "advisory" in text


def _summary_cell(text: str, paddock: str, product: str) -> str:
    """The mean-rate cell of a paddock's line in the summary."""
    for line in text.splitlines():
        cells = line.split()
        if cells[:2] == [paddock, product]:
            return cells[4]
    raise AssertionError(f"no line for {paddock} {product}")


def test_format_summary_shows_rates_in_the_chosen_unit() -> None:
    table = tonnage_table(zones_frame())
    text = format_summary(table, rate_unit="t/ha")
    assert "Mean rate (t/ha)" in text.splitlines()[0]
    # South lime: 2500 kg/ha = 2.5 t/ha; North gypsum: 29 t / 10 ha = 2.9 t/ha [derived]
    assert _summary_cell(text, "South", "lime") == "2.5"
    assert _summary_cell(text, "North", "gypsum") == "2.9"
    assert _summary_cell(format_summary(table), "North", "gypsum") == "2,900"
    # lb/ac with the exact factor: 1 lb = 0.45359237 kg, 1 acre = 4046.8564224 m2 (NIST SP 811)
    lb_ac_in_kg_ha = 0.45359237 / 4046.8564224 * 10_000
    text = format_summary(table, rate_unit="lb/ac")
    assert "Mean rate (lb/ac)" in text
    assert _summary_cell(text, "North", "gypsum") == f"{2900 / lb_ac_in_kg_ha:,.0f}" == "2,587"
    with pytest.raises(SettingsError) as e:
        format_summary(table, rate_unit="kg/ac")
    assert e.value.key == "rate_unit"


@pytest.mark.slow
@settings(max_examples=50, deadline=None)
@given(
    rows=st.lists(
        st.tuples(
            st.sampled_from(["A", "B", "C"]),
            st.sampled_from(["gypsum", "lime"]),
            st.floats(0, 10000, allow_nan=False),
            st.floats(0, 500, allow_nan=False),
        ),
        min_size=1, max_size=25,
    ),
    capacity=st.floats(0.5, 40, allow_nan=False),
    price=st.floats(0, 500, allow_nan=False),
)
def test_property_rounded_rows_add_up(rows, capacity, price) -> None:
    """After rounding, zone rows add up to paddock rows and paddock rows to farm rows
    exactly (in hundredths); each figure is within its rounding of the exact one."""
    zones = pd.DataFrame(rows, columns=["paddock", "product", "rate_kg_ha", "area_ha"])
    zones["zone"] = zones.groupby(["paddock", "product"]).cumcount() + 1
    t = tonnage_table(zones, capacity_t=capacity, price_per_t={"gypsum": price, "lime": price})
    z = t[t["level"] == "zone"]
    exact = (zones.sort_values(["paddock", "product", "zone"])["area_ha"]
             * zones.sort_values(["paddock", "product", "zone"])["rate_kg_ha"] / 1000).to_numpy()
    assert np.all(np.abs(z["tonnes"].to_numpy() - exact) < 0.01 + 1e-9)
    hundredths = ("area_ha", "spread_area_ha", "tonnes", "short_tons", "cost")
    for col in (*hundredths, "truckloads"):
        scale = 100 if col in hundredths else 1
        v = t[col].astype(float).to_numpy()
        assert np.allclose(v * scale, np.round(v * scale)), col  # whole hundredths / loads
        for (paddock, product), rows_ in z.groupby(["paddock", "product"]):
            sub = t[(t["level"] == "paddock") & (t["paddock"] == paddock)
                    & (t["product"] == product)]
            assert round(rows_[col].astype(float).sum() * scale) == round(
                float(sub[col].iloc[0]) * scale), (col, paddock, product)
        for product in t["product"].unique():
            pads = t[(t["level"] == "paddock") & (t["product"] == product)]
            farm = t[(t["level"] == "farm") & (t["product"] == product)]
            assert round(pads[col].astype(float).sum() * scale) == round(
                float(farm[col].iloc[0]) * scale), (col, product)
    # the spread area is never more than the area beside it (zone, paddock, farm rows), and
    # is a zone's own rounded area where it gets product
    assert (t["spread_area_ha"] <= t["area_ha"]).all()
    assert (t["spread_area_ac"] <= t["area_ac"]).all()
    got = (zones.sort_values(["paddock", "product", "zone"])["rate_kg_ha"] > 0).to_numpy()
    assert (z.loc[got, "spread_area_ha"] == z.loc[got, "area_ha"]).all()
    assert (z.loc[~got, "spread_area_ha"] == 0).all()
    # every zone's area is its exact area rounded up or down, every paddock's spread area its
    # exact spread area rounded (half away from zero, as a person rounds)
    ordered = zones.sort_values(["paddock", "product", "zone"])
    assert np.all(np.abs(z["area_ha"].to_numpy() - ordered["area_ha"].to_numpy())
                  < 0.01 + 1e-9)
    exact_spread = ordered.assign(s=ordered["area_ha"] * got).groupby(
        ["paddock", "product"])["s"].sum()
    for (paddock, product), value in exact_spread.items():
        pad = t[(t["level"] == "paddock") & (t["paddock"] == paddock)
                & (t["product"] == product)].iloc[0]
        assert abs(pad["spread_area_ha"] - value) <= 0.005 + 1e-9
    pads = t[t["level"] == "paddock"]
    loads = pads["truckloads"].astype(float)
    assert (loads * capacity >= pads["tonnes"] - 1e-6).all()
    assert ((loads - 1) * capacity < pads["tonnes"] + 1e-6).all()
    # cost to the cent from the rounded tonnes a farmer sees
    assert np.allclose(pads["cost"], np.round(pads["tonnes"] * price + 1e-9, 2), atol=0.0051)


def test_apportion_matches_the_largest_remainder_worked_example() -> None:
    """Largest remainder (Hamilton) method: 10 seats for 47 000, 16 000, 15 800, 12 000,
    6 100 and 3 100 votes give 5, 2, 1, 1, 1, 0 (the standard textbook example of the
    method; figures from memory)."""
    votes = np.array([47000, 16000, 15800, 12000, 6100, 3100], dtype=float)
    assert apportion(10, votes).tolist() == [5, 2, 1, 1, 1, 0]
    assert apportion(0, votes).tolist() == [0] * 6
    assert apportion(2, np.zeros(3)).tolist() == [2, 0, 0]


def test_csv_view_follows_the_unit_system_and_names_the_currency() -> None:
    table = tonnage_table(zones_frame(), capacity_t=12.0, price_per_t={"gypsum": 50.0})
    metric = tonnage_csv(table, currency="AUD")
    assert {"tonnes", "truckloads", "price_per_t_AUD", "cost_AUD"} <= set(metric.columns)
    assert "short_tons" not in metric.columns and "loads" not in metric.columns
    farm = metric[metric["level"] == "farm"].set_index("product")
    assert farm.loc["gypsum", "tonnes"] == "39.00" and farm.loc["gypsum", "cost_AUD"] == "1950.00"
    assert farm.loc["lime", "cost_AUD"] == ""  # no price, no cost
    us = tonnage_csv(table, mass_unit="short ton")
    # 1 short ton = 2000 lb x 0.45359237 kg (NIST SP 811): 39 t = 42.99 short tons;
    # 50 per t = 45.36 per short ton [derived]
    farm = us[us["level"] == "farm"].set_index("product")
    assert farm.loc["gypsum", "short_tons"] == f"{39000 / 907.18474:.2f}" == "42.99"
    assert farm.loc["gypsum", "price_per_short_ton"] == "45.36"
    assert "tonnes" not in us.columns and "cost" in us.columns
    with pytest.raises(SettingsError):
        tonnage_csv(table, mass_unit="lb")


def test_summary_in_short_tons_with_the_currency() -> None:
    table = tonnage_table(zones_frame(), capacity_t=12.0, price_per_t={"gypsum": 50.0})
    text = format_summary(table, rate_unit="lb/ac", currency="AUD")
    assert "Short tons" in text.splitlines()[0] and "Cost (AUD)" in text.splitlines()[0]
    assert any(line.startswith("Farm") and "42.99" in line for line in text.splitlines())
    assert "1,950.00 AUD" in text


def test_first_season_tonnes_take_one_pass_of_split_zones() -> None:
    # [derived] tonnes = area x rate / 1000; a zone split into seasons spreads one
    # per-pass rate this season, a zone not split spreads its whole rate
    from geosoil.tonnage import first_season_tonnes

    z = pd.DataFrame({
        "product": ["gypsum", "gypsum", "lime"], "area_ha": [4.0, 2.0, 3.0],
        "rate_kg_ha": [6000.0, 500.0, 0.0], "passes": [3, 1, 0],
        "per_pass_kg_ha": [2000.0, 500.0, 0.0],
    })
    assert first_season_tonnes(z) == {"gypsum": 4 * 2 + 2 * 0.5, "lime": 0.0}


def test_areas_in_acres_beside_a_rate_per_acre() -> None:
    """With lb/ac the summary and tonnage.csv give areas in acres, not ha beside lb/ac and short
    tons: 1 ha = 2.4710538 ac (10 000 m2 / 4046.8564224 m2, NIST SP 811), by hand:
    North 10.5 ha = 25.95 ac, 10 ha spread = 24.71 ac; farm gypsum 20.5 ha = 50.66 ac."""
    table = tonnage_table(zones_frame())
    text = format_summary(table, rate_unit="lb/ac")
    head = text.splitlines()[0]
    assert "Area (ac)" in head and "Spread (ac)" in head and "(ha)" not in head
    north = next(ln.split() for ln in text.splitlines() if ln.startswith("North    gypsum"))
    assert north[2:4] == [f"{10.5 * 2.4710538:.2f}", f"{10.0 * 2.4710538:.2f}"] \
        == ["25.95", "24.71"]
    assert "Area (ha)" in format_summary(table, rate_unit="t/ha")  # per hectare: hectares
    us = tonnage_csv(table, mass_unit="short ton", area_unit="ac")
    assert {"area_ac", "spread_area_ac", "rate_lb_ac"} <= set(us.columns)
    assert not {"area_ha", "spread_area_ha", "rate_kg_ha"} & set(us.columns)
    farm = us[us["level"] == "farm"].set_index("product")
    assert farm.loc["gypsum", "area_ac"] == f"{20.5 * 2.4710538:.2f}" == "50.66"
    # 1950 kg/ha = 1740 lb/ac (1 lb/ac = 0.45359237 kg / 0.40468564224 ha, NIST SP 811)
    assert farm.loc["gypsum", "rate_lb_ac"] == f"{1950 * 0.40468564224 / 0.45359237:.0f}"
    # the row adds up as a farmer would check it: ac x lb/ac / 2000 lb = short tons (to 0.5 %)
    z = us[us["level"] == "zone"].iloc[0]
    assert float(z["spread_area_ac"]) * float(z["rate_lb_ac"]) / 2000 == pytest.approx(
        float(z["short_tons"]), rel=5e-3)
    with pytest.raises(SettingsError):
        tonnage_csv(table, area_unit="m2")


def test_passes_csv_follows_the_rate_unit_and_is_rounded_like_tonnage() -> None:
    """passes.csv: hectares and kg/ha (or acres and lb/ac with lb/ac) to 0.01 and to the
    whole rate, as tonnage.csv; zones in one pass are left out."""
    zones = pd.DataFrame({
        "paddock": ["A", "A"], "product": ["lime", "lime"], "zone": [3, 4],
        "rate_kg_ha": [316.636624722, 90.0], "passes": [2, 1],
        "per_pass_kg_ha": [158.31831236117145, 90.0],
        "schedule": ["2 seasons of 158 kg/ha", ""], "area_ha": [2.6199649122804405, 1.0]})
    t = passes_csv(zones)
    assert t.to_dict("records") == [{
        "paddock": "A", "product": "lime", "zone": "3", "rate_kg_ha": "317", "passes": "2",
        "per_pass_kg_ha": "158", "schedule": "2 seasons of 158 kg/ha", "area_ha": "2.62"}]
    lb = passes_csv(zones, rate_unit="lb/ac").iloc[0]
    # by hand: 316.64 / 1.12085116 = 282.5 lb/ac; 158.32 / 1.12085116 = 141.2;
    # 2.61996 ha x 2.4710538 ac/ha = 6.474 ac (NIST SP 811)
    assert (lb["rate_lb_ac"], lb["per_pass_lb_ac"], lb["area_ac"]) == ("282", "141", "6.47")
    assert list(passes_csv(zones.assign(passes=1)).columns)[3] == "rate_kg_ha"
    assert passes_csv(zones.drop(columns=["passes"])).empty


def test_spread_area_is_never_more_than_the_zone_area_after_rounding() -> None:
    """A trial: tonnage.csv showed a zone of 3.30 ha with 3.31 ha spread. Rounded apart, the
    areas 0.006 ha (no product) and 3.305 ha (product) share 3.31 ha as 0.01 + 3.30 (largest
    remainder: 0.6 > 0.5 hundredth) while the spread area alone, 3.305, rounds to 3.31
    (half away from zero). The rounded spread area (3.31) goes to the zones spread and the
    rest of the rounded area (0) to the others: each zone is its exact area rounded up or
    down, and its spread area is its area."""
    zones = pd.DataFrame({"paddock": ["A", "A"], "product": ["gypsum", "gypsum"], "zone": [1, 2],
                          "rate_kg_ha": [0.0, 2000.0], "area_ha": [0.006, 3.305]})
    t = tonnage_table(zones)
    z = t[t["level"] == "zone"].set_index("zone")
    assert z.loc[2, "area_ha"] == z.loc[2, "spread_area_ha"] == pytest.approx(3.31)
    assert z.loc[1, "area_ha"] == z.loc[1, "spread_area_ha"] == 0
    pad = t[t["level"] == "paddock"].iloc[0]
    assert pad["area_ha"] == pad["spread_area_ha"] == pytest.approx(3.31)
    assert pad["spread_area_ac"] <= pad["area_ac"]


@pytest.mark.parametrize("rate_unit, area_col", [("t/ha", "area_ha"), ("lb/ac", "area_ac")])
def test_passes_csv_gives_a_zone_the_area_tonnage_csv_gives_it(rate_unit: str,
                                                                 area_col: str) -> None:
    """Three zones of 1.006 ha, the third in two passes (a reviewer's case): tonnage.csv
    shares the paddock's rounded 3.02 ha among them (one of them 1.00 ha); passes.csv gives
    the two-pass zone the same figure tonnage.csv does, not its own area rounded apart."""
    zones = pd.DataFrame({
        "paddock": ["A"] * 3, "product": ["lime"] * 3, "zone": [1, 2, 3],
        "kind": ["rate"] * 3, "rate_kg_ha": [1000.0, 1000.0, 6000.0], "area_ha": [1.006] * 3,
        "passes": [1, 1, 2], "per_pass_kg_ha": [1000.0, 1000.0, 3000.0],
        "schedule": ["", "", "2 passes of 3 t/ha"]})
    table = tonnage_table(zones)
    csv = tonnage_csv(table, area_unit=area_col.split("_")[1],
                      mass_unit="short ton" if area_col == "area_ac" else "t")
    in_tonnage = csv[(csv["level"] == "zone") & (csv["zone"] == "3")][area_col].iloc[0]
    shown = passes_csv(zones, rate_unit=rate_unit, tonnage=table)
    assert shown[area_col].tolist() == [in_tonnage]
    # the zone's own area rounded apart (what passes.csv gave before) can differ from it
    own = passes_csv(zones, rate_unit=rate_unit)[area_col].iloc[0]
    assert own == f"{1.006 * (2.4710538 if area_col == 'area_ac' else 1.0):.2f}"
