"""Tests of geosoil.report: content, SVG drawings, escaping, and printing in headless Chromium."""

from __future__ import annotations

import dataclasses
import hashlib
import html
import math
import re
from datetime import UTC, datetime

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st
from shapely.geometry import Point, box

from geosoil import report, webmap
from geosoil.errors import InputError, SettingsError
from geosoil.presentation import escape_text
from tests.browser import artifact_path

HOSTILE_IMG = "<img src=x onerror=alert(1)>"
HOSTILE_SCRIPT = "</script><script>alert(1)</script>"
HOSTILE_TEMPLATE = "${7*6}"

CRS = "EPSG:32755"
X0, Y0 = 640_000.0, 6_190_000.0


def report_input(
    *, hostile: bool = False, inputs: tuple[tuple[str, str], ...] = ()
) -> report.ReportInput:
    """An invented two-paddock farm with gypsum and lime zones and an exclusion."""
    north = "North " + HOSTILE_IMG if hostile else "North"
    south = "South " + HOSTILE_SCRIPT if hostile else "South"
    gypsum = "gypsum " + HOSTILE_TEMPLATE if hostile else "gypsum"
    paddocks = gpd.GeoDataFrame(
        {"paddock": [north, south]},
        geometry=[box(X0, Y0 + 500, X0 + 800, Y0 + 1000), box(X0, Y0, X0 + 600, Y0 + 480)],
        crs=CRS,
    )
    zone_rows, tonnage_rows = [], []
    for name, geom in zip(paddocks["paddock"], paddocks.geometry, strict=True):
        minx, miny, maxx, maxy = geom.bounds
        third = (maxx - minx) / 3
        dam = Point(minx + 0.5 * (maxx - minx), miny + 0.5 * (maxy - miny)).buffer(40)
        for product, rates in ((gypsum, (0.0, 1500.0, 3000.0)), ("lime", (2500.0,))):
            parts = (
                [box(minx + k * third, miny, minx + (k + 1) * third, maxy) for k in range(3)]
                if len(rates) == 3
                else [geom]
            )
            for k, (part, rate) in enumerate(zip(parts, rates, strict=True)):
                part = part.difference(dam)
                area = part.area / 1e4
                zone_rows.append(
                    dict(
                        paddock=name,
                        product=product,
                        zone=k + 1,
                        kind="rate",
                        rate_kg_ha=rate,
                        area_ha=area,
                        geometry=part,
                    )
                )
                # tonnes = area x rate [derived]; truckloads at 25 t a load [invented]
                tonnage_rows.append(
                    dict(
                        paddock=name,
                        product=product,
                        zone=k + 1,
                        level="zone",
                        area_ha=area,
                        rate_kg_ha=rate,
                        tonnes=area * rate / 1000,
                        truckloads=area * rate / 25000,
                        cost=area * rate / 1000 * 40.0,
                    )
                )
            zone_rows.append(
                dict(
                    paddock=name,
                    product=product,
                    zone=0,
                    kind="exclusion",
                    rate_kg_ha=0.0,
                    area_ha=dam.area / 1e4,
                    geometry=dam,
                )
            )
    tonnage = pd.DataFrame(tonnage_rows)
    paddock_totals = tonnage.groupby(["paddock", "product"], as_index=False, sort=False)[
        ["area_ha", "tonnes", "truckloads", "cost"]
    ].sum()
    paddock_totals["level"] = "paddock"
    farm_totals = tonnage.groupby("product", as_index=False, sort=False)[
        ["area_ha", "tonnes", "truckloads", "cost"]
    ].sum()
    farm_totals["level"] = "farm"
    farm_totals["paddock"] = None
    tonnage = pd.concat([tonnage, paddock_totals, farm_totals], ignore_index=True)
    lags = tuple(float(h) for h in np.arange(25.0, 400.0, 50.0))
    variograms = (
        report.VariogramInfo(
            variable="esp",
            paddock=north,
            method="ordinary kriging",
            unit="%",
            model="spherical",
            nugget=1.0,
            psill=4.0,
            range_m=200.0,
            lags=lags,
            gamma=(1.9, 3.4, 4.4, 4.9, 5.1, 4.8, 5.2, 5.0),
            counts=(12, 30, 41, 45, 44, 38, 30, 22),
            cv_mean_error=0.05,
            cv_rmse=1.21,
            cv_msse=0.97,
            n_samples=24,
        ),
        report.VariogramInfo(
            variable="acidity",
            paddock="farm",
            method="ordinary kriging",
            unit="cmol(+)/kg",
            model="exponential",
            nugget=0.02,
            psill=0.1,
            range_m=300.0,
            lags=lags,
            gamma=(0.05, 0.07, 0.09, 0.1, 0.11, 0.12, 0.11, 0.12),
            counts=(20,) * 8,
            cv_mean_error=-0.01,
            cv_rmse=0.2,
            cv_msse=1.1,
            n_samples=40,
            note="fitted on the farm's samples",
        ),
        report.VariogramInfo(
            variable="ph",
            paddock=south,
            method="inverse-distance weighting",
            unit="",
            cv_mean_error=0.02,
            cv_rmse=0.3,
            n_samples=5,
        ),
    )
    return report.ReportInput(
        title=("Season report " + HOSTILE_SCRIPT) if hostile else "Season report",
        created=datetime(2024, 5, 1, 9, 30, tzinfo=UTC),
        tonnage=tonnage,
        zones=gpd.GeoDataFrame(zone_rows, crs=CRS),
        paddocks=paddocks,
        variograms=variograms,
        uncertainty=(
            report.UncertaintySummary(
                variable="esp",
                paddock=north,
                unit="%",
                sd_threshold=2.0,
                share_above=0.23,
                sd_max=3.1,
                sd_mean=1.4,
            ),
        ),
        density=(
            report.SampleDensity(paddock=north, samples=10, area_ha=40.0),
            report.SampleDensity(paddock=south, samples=6, area_ha=28.8),
        ),
        assumptions={
            "treated depth": "0.10 m",
            "bulk density": "1.4 g/cm³ (unmeasured: typical topsoil)",
            "gypsum analysis": "Ca 23.28 %, purity 100 %",
            ("target " + HOSTILE_IMG if hostile else "target ESP"): "6 %",
        },
        methods=(
            ("gypsum requirement", "USDA Handbook 60 (Richards 1954)"),
            ("lime for exchangeable Al", "Kamprath 1970, Soil Sci. Soc. Am. Proc. 34:252"),
        ),
        warnings=("sample S7 " + HOSTILE_TEMPLATE + " has no sodium value",) if hostile else (),
        provenance=report.Provenance(
            inputs=inputs or (("lab.csv", "0" * 64),),
            settings_toml='[soil]\ndepth_m = 0.1\nnote = "'
            + (HOSTILE_SCRIPT if hostile else "x")
            + '"\n',
            versions={"geosoil": "0.1.0", "numpy": np.__version__},
        ),
    )


def _section(page: str, section_id: str) -> str:
    start = page.index(f'id="{section_id}"')
    end = page.index("</section>", start)
    return page[start:end]


@pytest.fixture(scope="module")
def page() -> str:
    return report.build_report(report_input())


# --------------------------------------------------------------------------- content


def test_report_is_static_and_loads_nothing(page: str) -> None:
    assert "<script" not in page.lower()
    assert webmap.remote_references(page) == []
    assert page.startswith("<!DOCTYPE html>")


def test_sections_come_in_reading_order(page: str) -> None:
    ids = re.findall(r'<section[^>]*\bid="([^"]+)"', page)
    assert ids == [
        "cautions",
        "summary",
        "paddock-0",
        "paddock-1",
        "surfaces",
        "uncertainty",
        "density",
        "assumptions",
        "warnings",
        "provenance",
    ]


def test_every_paddock_and_product_has_a_zone_map_and_a_tonnage_table(page: str) -> None:
    data = report_input()
    for i, name in enumerate(data.paddocks["paddock"]):
        sec = _section(page, f"paddock-{i}")
        assert f"Paddock {name}" in sec
        assert sec.count('class="zone-map"') == 2 and sec.count('class="tonnage"') == 2
        for row in data.tonnage[(data.tonnage["paddock"] == name)].itertuples():
            assert f"{row.tonnes:,.2f}" in sec
            assert f"{row.area_ha:,.2f}" in sec
        # exclusions are drawn hatched
        assert 'fill="url(#hatch-' in sec


def test_farm_totals_are_the_farm_rows(page: str) -> None:
    data = report_input()
    sec = _section(page, "summary")
    farm = data.tonnage[data.tonnage["level"] == "farm"]
    assert sec.count("<tr>") == len(farm) + 1  # header + one row per product
    for row in farm.itertuples():
        assert f"{row.tonnes:,.2f}" in sec and f"{row.cost:,.2f}" in sec


def test_cautions_say_what_the_trade_expects(page: str) -> None:
    # common practice: advisory rates, agronomist, regulations, buffers, handling, re-test, split
    text = html.unescape(re.sub(r"<[^>]+>", " ", _section(page, "cautions")))
    for phrase in (
        "advisory",
        "qualified agronomist",
        "local regulations",
        "waterways",
        "handling advice",
        "local code prevails",
        "re-test the soil every year",
        "Split large rates",
    ):
        assert phrase in text, phrase


def test_cross_validation_table_has_every_surface(page: str) -> None:
    sec = _section(page, "surfaces")
    table = sec[
        sec.index('class="cross-validation"') : sec.index(
            "</table>", sec.index('class="cross-validation"')
        )
    ]
    assert table.count("<tr>") == 1 + 3
    for text in ("ordinary kriging", "inverse-distance weighting", "1.21", "0.97", "spherical"):
        assert text in table
    assert sec.count('class="variogram"') == 2
    assert "No variogram: this surface was made by inverse-distance weighting." in sec
    assert "fitted on the farm's samples" in html.unescape(sec)


def test_uncertainty_shows_the_share_as_percent(page: str) -> None:
    sec = _section(page, "uncertainty")
    assert "23.0 %" in sec and "3.1 %" in sec and "2 %" in sec


@settings(max_examples=50, deadline=None)
@given(st.integers(0, 500), st.floats(0.01, 5000, allow_nan=False))
def test_sample_density_is_samples_per_hectare(samples: int, area: float) -> None:
    d = report.SampleDensity(paddock="p", samples=samples, area_ha=area)
    assert math.isclose(d.per_ha * area, samples, rel_tol=1e-12, abs_tol=1e-12)  # by definition
    if samples:
        assert math.isclose(d.per_ha * d.ha_per_sample, 1.0)


def test_density_figures_in_the_report(page: str) -> None:
    sec = _section(page, "density")
    assert "0.25" in sec  # 10 samples on 40 ha [derived]
    assert "4.0" in sec  # 4 ha per sample
    assert "0.21" in sec  # 6 samples on 28.8 ha = 0.2083 [derived]


def test_density_in_acres_beside_a_rate_per_acre() -> None:
    # user trial: with lb/ac the other tables were in acres and the density stayed in ha.
    # 1 ha = 2.4710538 ac (NIST SP 811), by hand: 40 ha = 98.842152 ac, 10 samples = 0.1012
    # per ac, 9.88 ac per sample; 28.8 ha = 71.166349 ac, 6 samples = 0.0843, 11.86
    page = report.build_report(dataclasses.replace(report_input(), rate_unit="lb/ac"))
    sec = _section(page, "density")
    for text in ("area (ac)", "samples per ac", "ac per sample", "98.84", "0.10", "9.9",
                 "71.17", "0.08", "11.9"):
        assert text in sec, text
    assert "(ha)" not in sec and "per ha" not in sec and "ha per" not in sec
    lines = re.findall(r'<p class="density-line">([^<]*)</p>', page)
    assert lines and lines[0] == ("98.84 ac · 10 sample(s) · 0.10 samples per ac "
                                  "(9.9 ac per sample)")
    assert not any(" ha" in ln for ln in lines)
    hectares = re.findall(r'<p class="density-line">([^<]*)</p>', report.build_report(
        report_input()))
    assert hectares[0] == "40.00 ha · 10 sample(s) · 0.25 samples per ha (4.0 ha per sample)"


def test_assumptions_methods_and_citations(page: str) -> None:
    sec = _section(page, "assumptions")
    for text in (
        "treated depth",
        "0.10 m",
        "1.4 g/cm³",
        "USDA Handbook 60 (Richards 1954)",
        "Kamprath 1970, Soil Sci. Soc. Am. Proc. 34:252",
    ):
        assert text in sec


def test_provenance_lists_files_with_their_sha256(tmp_path) -> None:
    lab = tmp_path / "lab results.csv"
    lab.write_text("sample,Ca\nS1,4.2\n", encoding="utf-8")
    digest = hashlib.sha256(lab.read_bytes()).hexdigest()
    page = report.build_report(report_input(inputs=((str(lab), digest),)))
    sec = _section(page, "provenance")
    assert digest in sec and html.escape(str(lab)) in sec
    assert "numpy" in sec and np.__version__ in sec
    assert "depth_m = 0.1" in sec


def test_warnings_are_listed_or_said_to_be_none(page: str) -> None:
    assert "The run raised no warnings." in _section(page, "warnings")
    hostile = report.build_report(report_input(hostile=True))
    assert "has no sodium value" in _section(hostile, "warnings")


def test_bad_inputs_are_named() -> None:
    data = report_input()
    with pytest.raises(InputError, match="truckloads"):
        report.ReportInput(
            title="x",
            created=data.created,
            tonnage=data.tonnage.drop(columns="truckloads"),
            zones=data.zones,
            paddocks=data.paddocks,
        )
    with pytest.raises(InputError, match="fraction"):
        report.UncertaintySummary(
            variable="esp", paddock="p", unit="%", sd_threshold=1.0, share_above=23.0, sd_max=2.0
        )
    with pytest.raises(InputError, match="differ in length"):
        report.VariogramInfo(
            variable="esp", paddock="p", method="ordinary kriging", lags=(1.0, 2.0), gamma=(1.0,)
        )


def _tonnage_table(page: str, paddock: str, product: str) -> tuple[list[str], list[list[str]]]:
    """Header and zone rows (cells as text) of one paddock's tonnage table for one product."""
    block = page[page.index(f"Paddock {paddock}</h2>") :]
    block = block[block.index(f"<h3>{product}</h3>") :]
    table = block[block.index('<table class="tonnage">') : block.index("</table>")]
    head = [re.sub("<[^>]+>", "", h) for h in re.findall(r"<th[^>]*>(.*?)</th>", table)]
    rows = [
        [re.sub("<[^>]+>", "", c) for c in re.findall(r"<td[^>]*>(.*?)</td>", tr)]
        for tr in re.findall(r"<tr>(.*?)</tr>", table)  # zone rows (totals have a class)
    ]
    return head, [r for r in rows if r]


def test_tonnage_table_and_zone_map_in_t_per_ha() -> None:
    """Lime at 2500 kg/ha reads 2.5 t/ha [derived: 1 t = 1000 kg]; the tables given stay
    in kg/ha."""
    data = dataclasses.replace(report_input(), rate_unit="t/ha")
    page = report.build_report(data)
    head, rows = _tonnage_table(page, "North", "lime")
    assert head[2] == "rate (t/ha)"
    assert [r[2] for r in rows] == ["2.5"]
    head, rows = _tonnage_table(page, "North", "gypsum")
    assert [r[2] for r in rows] == ["0", "1.5", "3.0"]
    section = _section(page, "paddock-0")
    assert "1 · 2.5 t/ha" in section  # lime zone map label
    assert "kg/ha" not in section
    assert data.zones["rate_kg_ha"].max() == 3000.0  # the input is unchanged


def test_zone_map_in_lb_per_acre_uses_the_exact_factor() -> None:
    """1 lb = 0.45359237 kg, 1 acre = 4046.8564224 m2, both exact (NIST SP 811): 3000 kg/ha
    = 2676.5 lb/ac, shown as 2,677; the rounded factor 0.892 would show 2,676."""
    lb_ac_in_kg_ha = 0.45359237 / 4046.8564224 * 10_000
    zones = gpd.GeoDataFrame(
        {"zone": [1], "kind": ["rate"], "rate_kg_ha": [3000.0]},
        geometry=[box(X0, Y0, X0 + 300, Y0 + 300)], crs=CRS,
    )
    svg = report.zone_map_svg(zones, rate_unit="lb/ac")
    assert f"1 · {3000 / lb_ac_in_kg_ha:,.0f} lb/ac" == "1 · 2,677 lb/ac"
    assert "1 · 2,677 lb/ac" in svg
    data = dataclasses.replace(report_input(), rate_unit="lb/ac")
    head, rows = _tonnage_table(report.build_report(data), "North", "gypsum")
    assert head[2] == "rate (lb/ac)" and rows[2][2] == "2,677"
    # areas in acres beside a rate per acre: 1 ha = 2.4710538 ac (NIST SP 811), by hand
    ha = _tonnage_table(report.build_report(report_input()), "North", "gypsum")[1]
    assert head[1] == "area (ac)"
    shown_ha = float(ha[2][1].replace(",", ""))  # rounded to 0.01 ha
    assert float(rows[2][1].replace(",", "")) == pytest.approx(shown_ha * 2.4710538,
                                                               abs=0.006 * 2.4710538)


def test_zones_split_into_seasons_say_so_in_their_table() -> None:
    """A zone that needs several seasons shows how it is applied beside its rate; a product
    whose zones all go on in one pass keeps the plain table."""
    data = report_input()
    zones = data.zones.copy()
    zones["schedule"] = ""
    split = (zones["paddock"] == "North") & (zones["product"] == "gypsum") & (zones["zone"] == 3)
    zones.loc[split, "schedule"] = "2 seasons of 1.5 t/ha"
    page = report.build_report(dataclasses.replace(data, zones=zones, rate_unit="t/ha"))
    head, rows = _tonnage_table(page, "North", "gypsum")
    assert head[:4] == ["zone", "area (ha)", "rate (t/ha)", "applied as"]
    assert [r[3] for r in rows] == ["", "one pass", "2 seasons of 1.5 t/ha"]  # zone 1: none
    assert [r[2] for r in rows] == ["0", "1.5", "3.0"]  # the full rate stays in its column
    head, rows = _tonnage_table(page, "North", "lime")
    assert "applied as" not in head and len(rows[0]) == len(head)


def test_unknown_rate_unit_is_refused() -> None:
    with pytest.raises(SettingsError) as e:
        dataclasses.replace(report_input(), rate_unit="kg/ac")
    assert e.value.key == "rate_unit"


def test_hostile_text_is_escaped_everywhere() -> None:
    page = report.build_report(report_input(hostile=True))
    assert "<script" not in page.lower()
    for raw in (HOSTILE_IMG, HOSTILE_SCRIPT):
        assert raw not in page
    assert "<img" not in page
    assert html.escape("Paddock North " + HOSTILE_IMG) in page
    # The page runs no script, so "${7*6}" is plain text: it is there as written, never 42.
    assert "gypsum " + HOSTILE_TEMPLATE in page and "gypsum 42" not in page


# --------------------------------------------------------------------------- drawings


def _numbers(text: str) -> list[float]:
    return [float(v) for v in re.findall(r"-?\d+(?:\.\d+)?", text)]


@settings(max_examples=40, deadline=None)
@given(
    st.lists(
        st.tuples(
            st.floats(0, 5000),
            st.floats(0, 5000),
            st.floats(5, 800),
            st.floats(5, 800),
            st.floats(0, 8000),
        ),
        min_size=1,
        max_size=6,
    ),
    st.sampled_from([CRS, "EPSG:3577"]),
)
def test_zone_map_stays_inside_its_frame(boxes, crs) -> None:
    geoms = [box(X0 + x, Y0 + y, X0 + x + w, Y0 + y + h) for x, y, w, h, _ in boxes]
    zones = gpd.GeoDataFrame(
        {
            "zone": range(1, len(boxes) + 1),
            "kind": ["rate"] * len(boxes),
            "rate_kg_ha": [b[4] for b in boxes],
        },
        geometry=geoms,
        crs=crs,
    )
    svg = report.zone_map_svg(zones, width=500, max_height=400)
    width, height = (float(v) for v in re.search(r'viewBox="0 0 ([\d.]+) ([\d.]+)"', svg).groups())
    assert width <= 500 and height <= 400
    paths = re.findall(r'<path class="zone" d="([^"]+)"', svg)
    assert len(paths) == len(boxes)
    for d in paths:
        values = _numbers(d)
        xs, ys = values[0::2], values[1::2]
        assert min(xs) >= 0 and max(xs) <= width and min(ys) >= 0 and max(ys) <= height


def test_zone_map_darker_for_more_product() -> None:
    # Sequential scheme (Harrower & Brewer 2003): more product, darker fill.
    zones = gpd.GeoDataFrame(
        {"zone": [1, 2, 3], "kind": ["rate"] * 3, "rate_kg_ha": [500.0, 2000.0, 4000.0]},
        geometry=[box(X0 + 100 * k, Y0, X0 + 100 * (k + 1), Y0 + 300) for k in range(3)],
        crs=CRS,
    )
    svg = report.zone_map_svg(zones)
    fills = re.findall(r'<path class="zone" d="[^"]+" fill="(#[0-9a-f]{6})"', svg)
    lum = [report._luminance(c) for c in fills]
    assert lum[0] > lum[1] > lum[2]
    assert "4,000 kg/ha" in svg and "500 kg/ha" in svg  # the default unit


def test_variogram_plot_draws_points_and_the_fitted_spherical_model() -> None:
    info = report_input().variograms[0]  # spherical: nugget 1, partial sill 4, range 200 m
    svg = report.variogram_svg(info)
    frame = re.search(r'<rect x="([\d.]+)" y="([\d.]+)" width="([\d.]+)" height="([\d.]+)"', svg)
    left, top, w, h = (float(v) for v in frame.groups())
    base = top + h
    circles = [
        (float(x), float(y), float(r))
        for x, y, r in re.findall(r'class="vg-point" cx="([\d.]+)" cy="([\d.]+)" r="([\d.]+)"', svg)
    ]
    assert len(circles) == len(info.lags)
    assert [c[0] for c in circles] == sorted(c[0] for c in circles)
    # bigger pair counts, bigger dots
    assert max(circles, key=lambda c: c[2]) == circles[int(np.argmax(info.counts))]
    # the points' heights keep the ratios of the empirical semivariances
    heights = [base - c[1] for c in circles]
    for hgt, g in zip(heights, info.gamma, strict=True):
        assert math.isclose(hgt / heights[0], g / info.gamma[0], rel_tol=0.02)
    d = re.search(r'class="vg-model" d="([^"]+)"', svg).group(1)
    pts = list(zip(_numbers(d)[0::2], _numbers(d)[1::2], strict=True))
    gam = [base - y for _, y in pts]
    sill_px = gam[-1]
    # The spherical model starts at the nugget, rises monotonically and is flat from the range on
    # (its definition: gamma = nugget + psill for h >= range).
    assert math.isclose(gam[0] / sill_px, 1.0 / 5.0, abs_tol=0.01)
    assert all(b >= a - 1e-6 for a, b in zip(gam, gam[1:], strict=False))
    range_x = float(re.search(r'class="vg-range" x1="([\d.]+)"', svg).group(1))
    flat = [g for x, g in zip([p[0] for p in pts], gam, strict=True) if x >= range_x + 0.2]
    assert flat and all(math.isclose(g, sill_px, abs_tol=0.15) for g in flat)
    # Halfway to the range: nugget + psill (1.5/2 - 0.5/8) = 1 + 4 x 0.6875 = 3.75 of 5 [derived]
    half_x = left + (range_x - left) / 2
    x_half, g_half = min(
        zip([p[0] for p in pts], gam, strict=True), key=lambda p: abs(p[0] - half_x)
    )
    assert abs(x_half - half_x) < 2.0
    assert math.isclose(g_half / sill_px, 3.75 / 5.0, abs_tol=0.015)


def test_variogram_plot_takes_a_given_curve() -> None:
    info = report.VariogramInfo(
        variable="k",
        paddock="p",
        method="ordinary kriging",
        model="matern",
        lags=(10.0, 20.0),
        gamma=(1.0, 2.0),
        counts=(5, 5),
        curve=((0.0, 0.5), (10.0, 1.2), (20.0, 1.8)),
    )
    svg = report.variogram_svg(info)
    d = re.search(r'class="vg-model" d="([^"]+)"', svg).group(1)
    assert len(_numbers(d)) == 6


# --------------------------------------------------------------------------- browser


@pytest.fixture(scope="module")
def report_page(browser, tmp_path_factory):
    path = tmp_path_factory.mktemp("report") / "report.html"
    path.write_text(report.build_report(report_input(hostile=True)), encoding="utf-8")
    tab = browser.new_page(width=1100, height=1400)
    tab.goto(path)
    browser.drain(0.2)
    yield tab
    tab.close()


@pytest.mark.browser
def test_browser_report_renders_offline_without_errors(report_page) -> None:
    assert report_page.console_errors == []
    assert report_page.dialogs == []
    assert [u for u in report_page.requests if not u.startswith(("file:", "data:"))] == []
    state = report_page.evaluate(
        """({svgs: document.querySelectorAll('svg.zone-map').length,
             variograms: document.querySelectorAll('svg.variogram').length,
             zoneMapWidth: document.querySelector('svg.zone-map').getBoundingClientRect().width,
             cautionsVisible:
               document.getElementById('cautions').getBoundingClientRect().height > 50})"""
    )
    assert 240 <= state.pop("zoneMapWidth") <= 560
    assert state == {"svgs": 4, "variograms": 2, "cautionsVisible": True}
    shot = report_page.screenshot(artifact_path("report.png"), full_page=True)
    assert shot.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


@pytest.mark.browser
def test_browser_hostile_text_in_report_is_text(report_page) -> None:
    state = report_page.evaluate(
        """({scripts: document.scripts.length, imgs: document.images.length,
             pwned: typeof window.__pwned, title: document.title,
             h1: document.getElementById('report-title').innerText,
             paddocks: Array.from(document.querySelectorAll('section.paddock h2'))
               .map(e => e.innerText),
             warning: document.querySelector('.warnings li').innerText})"""
    )
    assert state == {
        "scripts": 0,
        "imgs": 0,
        "pwned": "undefined",
        "title": "Season report " + HOSTILE_SCRIPT,
        "h1": "Season report " + HOSTILE_SCRIPT,
        "paddocks": ["Paddock North " + HOSTILE_IMG, "Paddock South " + HOSTILE_SCRIPT],
        "warning": "sample S7 " + HOSTILE_TEMPLATE + " has no sodium value",
    }
    assert "42" not in state["warning"]
    assert report_page.dialogs == []


@pytest.mark.browser
def test_browser_report_prints_with_page_breaks(report_page) -> None:
    report_page.call("Emulation.setEmulatedMedia", {"media": "print"})
    try:
        css = report_page.evaluate(
            """({paddocks: Array.from(document.querySelectorAll('section.paddock'))
                   .map(s => getComputedStyle(s).breakBefore),
                 nav: getComputedStyle(document.querySelector('nav')).display,
                 tables: getComputedStyle(document.querySelector('table.tonnage')).breakInside})"""
        )
    finally:
        report_page.call("Emulation.setEmulatedMedia", {"media": ""})
    assert css == {"paddocks": ["page", "page"], "nav": "none", "tables": "avoid"}
    pdf = report_page.pdf(artifact_path("report.pdf"))
    assert pdf[:5] == b"%PDF-"
    pages = len(re.findall(rb"/Type\s*/Page[^s]", pdf))
    assert pages >= 2 + 2  # front matter, one or more per paddock, the rest
    assert report_page.console_errors == []


def test_zone_labels_never_overlap_on_concentric_ring_zones() -> None:
    """Rings around a patch (the usual shape of rate classes) put every label pole near the
    same centre; labels that would overlap are dropped (the table lists every zone)."""
    centre = Point(500, 500)
    radii = [60, 120, 180, 240]
    geoms, rates = [], []
    inner = None
    for i, r in enumerate(radii):
        disc = centre.buffer(r)
        geoms.append(disc if inner is None else disc.difference(inner))
        rates.append(1000.0 * (len(radii) - i))
        inner = disc
    geoms.append(box(0, 0, 1000, 1000).difference(inner))
    rates.append(0.0)
    zones = gpd.GeoDataFrame(
        {"paddock": "P", "product": "gypsum", "zone": range(1, len(geoms) + 1), "kind": "rate",
         "rate_kg_ha": rates, "area_ha": [g.area / 1e4 for g in geoms]},
        geometry=geoms, crs="EPSG:32755",
    )
    svg = report.zone_map_svg(zones, width=300, max_height=300)
    label = r'<text class="zone-label"[^>]*x="([\d.]+)" y="([\d.]+)"[^>]*>([^<]*)</text>'
    found = re.findall(label, svg)
    assert found, "at least one zone is labelled"
    boxes = [(float(x) - 3.3 * len(t), float(y) - 7, float(x) + 3.3 * len(t), float(y) + 7)
             for x, y, t in found]
    for i, a in enumerate(boxes):
        for b in boxes[i + 1:]:
            assert not (a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]), (a, b)


# --------------------------------------------------------------------------- at a glance, soil maps


def _with_glance(hostile: bool = False) -> report.ReportInput:
    import affine

    from geosoil.presentation import classes_for

    base = report_input(hostile=hostile)
    names = list(base.paddocks["paddock"])
    esp = np.full((25, 20), 3.0)
    esp[:10, :10] = 9.0
    esp[:4, :4] = 20.0
    esp[24, :] = np.nan
    soil = report.SoilMap(title="ESP", unit="% of ECEC", array=esp,
                          transform=affine.Affine(40, 0, X0, 0, -40, Y0 + 1000),
                          classes=classes_for("esp", esp))
    samples = gpd.GeoDataFrame({"sample_id": ["S1 " + HOSTILE_IMG if hostile else "S1"]},
                               geometry=[Point(X0 + 100, Y0 + 700)], crs=CRS)
    glance = (
        report.PaddockGlance(paddock=names[0], area_ha=40.0, excluded_ha={"creek buffer": 0.5},
                             sodic_ha=6.4, strongly_sodic_ha=1.2, acid_ha=None,
                             product_ha={"lime": 40.0}, product_t={"lime": 100.0}),
        report.PaddockGlance(paddock=names[1], area_ha=28.8, excluded_ha={},
                             sodic_ha=0.0, strongly_sodic_ha=0.0, acid_ha=3.3),
    )
    return dataclasses.replace(base, glance=glance, soil_maps=(soil,), samples=samples,
                               notes=("North: zones under 0.5 ha merged",),
                               exclusion_kinds={"dam": "exclusion"})


def test_glance_table_and_soil_maps_come_after_the_farm_totals() -> None:
    page = report.build_report(_with_glance())
    ids = re.findall(r'<section[^>]* id="([^"]+)"', page)
    assert ids[:4] == ["cautions", "summary", "glance", "soil-maps"]
    glance = _section(page, "glance")
    assert "creek buffer (ha)" in glance and "needs lime (ha)" in glance
    assert "40.00 (100.0 t)" in glance and "6.40" in glance and "–" in glance  # no pH: a dash
    maps = _section(page, "soil-maps")
    assert maps.count('class="soil-map"') == 1 and "data:image/png;base64," in maps
    for label in ("non-sodic (&lt; 6)", "sodic (6 to 15)", "strongly sodic (≥ 15)"):
        assert label in maps
    assert maps.count('class="sample"') == 1
    assert webmap.remote_references(page) == []


def test_notes_on_the_rates_are_apart_from_the_warnings() -> None:
    sec = _section(report.build_report(_with_glance()), "warnings")
    assert "The run raised no warnings." in sec
    assert "Notes on the rates" in sec and "zones under 0.5 ha merged" in sec


def test_hostile_text_in_glance_and_soil_maps_is_escaped() -> None:
    page = report.build_report(_with_glance(hostile=True))
    assert "<img" not in page and "<script" not in page.lower()
    assert escape_text("S1 " + HOSTILE_IMG) in page  # the sample's tooltip in the SVG


@pytest.mark.browser
def test_browser_contents_in_one_column_on_a_phone(browser, tmp_path) -> None:
    """At 390 px wide (a phone) the contents list is one column: two columns of long
    paddock names ran into each other; at desktop width it keeps two."""
    path = tmp_path / "report.html"
    path.write_text(report.build_report(report_input()), encoding="utf-8")
    probe = """(() => { const ol = document.querySelector('nav ol');
        const lefts = Array.from(ol.querySelectorAll('li'))
            .map(li => Math.round(li.getBoundingClientRect().left));
        return {columns: getComputedStyle(ol).columnCount, lefts: [...new Set(lefts)].length,
                items: lefts.length}; })()"""
    phone = browser.new_page(width=390, height=844)
    phone.goto(path)
    got = phone.evaluate(probe)
    phone.screenshot(artifact_path("report-phone.png"))
    phone.close()
    assert got["items"] > 4 and got["columns"] == "1" and got["lefts"] == 1, got
    wide = browser.new_page(width=1100, height=900)
    wide.goto(path)
    got = wide.evaluate(probe)
    wide.close()
    assert got["columns"] == "2" and got["lefts"] == 2, got


def test_a_table_value_that_is_not_a_number_is_escaped_once() -> None:
    # a lab's text value ("<0.1") reaches the report's templates (autoescaped) escaped once
    import jinja2

    from geosoil.report import _num

    page = jinja2.Environment(autoescape=True).from_string("<td>{{ v }}</td>")
    assert page.render(v=_num("<0.1")) == "<td>&lt;0.1</td>"
    assert page.render(v=_num(1234.5, 1)) == "<td>1,234.5</td>"


def _label_case() -> tuple[gpd.GeoDataFrame, object]:
    """An invented paddock 300 m x 160 m: zone 1 most of it, zone 2 a strip 14 m wide along
    the east edge, zone 3 a 60 m square split by a creek buffer 4 m wide, zone 4 a 5 m square
    inside zone 1 (too small for any label)."""
    import shapely

    paddock = box(X0, Y0, X0 + 300, Y0 + 160)
    creek = box(X0 + 88, Y0 + 20, X0 + 92, Y0 + 80)
    z3 = box(X0 + 60, Y0 + 20, X0 + 120, Y0 + 80).difference(creek)
    z2 = box(X0 + 286, Y0, X0 + 300, Y0 + 160)
    z4 = box(X0 + 200, Y0 + 100, X0 + 205, Y0 + 105)
    z1 = shapely.difference(paddock, shapely.union_all([creek, z3, z2, z4]))
    zones = gpd.GeoDataFrame(
        {"zone": [1, 2, 3, 4, 5], "kind": ["rate", "rate", "rate", "rate", "exclusion"],
         "rate_kg_ha": [0.0, 2750.0, 2250.0, 1500.0, 0.0],
         "label": [None, None, None, None, "Bellbird Creek"]},
        geometry=[z1, z2, z3, z4, creek], crs=CRS)
    return zones, paddock


def test_zone_labels_keep_to_free_places_inside_the_drawing() -> None:
    """The placement rule (our own): each label inside the drawing, over no other label and no
    exclusion; a zone without room for its label gets its number (or a numbered callout with a
    leader line). Boxes measured at report.LABEL_CHAR_PX a character (the browser test below
    checks the real text boxes)."""
    import shapely

    zones, paddock = _label_case()
    svg = report.zone_map_svg(zones, outline=paddock, rate_unit="t/ha",
                              exclusion_kinds={"Bellbird Creek": "creek buffer"})
    vb = [float(v) for v in re.search(r'viewBox="([^"]+)"', svg).group(1).split()]
    texts = re.findall(r'<text class="zone-label[^"]*" fill="[^"]+" x="([\d.]+)" '
                       r'y="([\d.]+)"[^>]*>([^<]+)</text>', svg)
    frame = report._Frame.around([*zones.geometry, paddock], width=560, max_height=300, pad=12,
                                 foot=28, min_width=240)
    creek_px = shapely.transform(zones.geometry.iloc[4], lambda c: np.column_stack(
        [frame.fx(c[:, 0]), frame.fy(c[:, 1])]))
    boxes = []
    for x, y, text in texts:
        t = html.unescape(text)
        hw = report.LABEL_CHAR_PX / 2 * len(t) + 2
        bx = (float(x) - hw, float(y) - report.LABEL_HALF_H, float(x) + hw,
              float(y) + report.LABEL_HALF_H)
        assert 0 <= bx[0] and bx[2] <= vb[2] and 0 <= bx[1] and bx[3] <= vb[3] - 28, t
        assert not box(*bx).intersects(creek_px), t  # not over the creek buffer
        boxes.append((t, bx))
    for i, (ta, a) in enumerate(boxes):
        for tb, b in boxes[i + 1:]:
            assert not (a[0] < b[2] and b[0] < a[2] and a[1] < b[3] and b[1] < a[3]), (ta, tb)
    numbers = {t.split(" · ")[0] for t, _ in boxes}
    assert {"1", "2", "3", "4"} <= numbers  # every rate zone is named on the map
    assert 'class="zone-leader"' in svg  # the 5 m zone: a numbered callout with a leader


def test_browser_zone_labels_real_boxes_fit_the_rule(browser, tmp_path) -> None:
    """In headless Chromium, the labels' real text boxes (getBBox, the report's CSS) of the
    synthetic case lie inside the drawing, apart, and within the boxes the rule measured."""
    import re as _re

    zones, paddock = _label_case()
    svg = report.zone_map_svg(zones, outline=paddock, rate_unit="t/ha",
                              exclusion_kinds={"Bellbird Creek": "creek buffer"})
    page_html = report.build_report(report_input())
    css = _re.search(r"<style>(.*?)</style>", page_html, _re.S).group(1)
    path = tmp_path / "labels.html"
    path.write_text(f"<!doctype html><html><head><meta charset='utf-8'><style>{css}</style>"
                    f"</head><body>{svg}</body></html>", encoding="utf-8")
    page = browser.new_page(width=700, height=400)
    page.goto(path)
    got = page.evaluate("""(() => { const svg = document.querySelector('svg.zone-map');
        const vb = svg.viewBox.baseVal;
        return {w: vb.width, h: vb.height, labels: [...svg.querySelectorAll('text.zone-label')]
          .map(t => { const b = t.getBBox();
                      return {text: t.textContent, x: b.x, y: b.y, w: b.width, h: b.height}; })};
        })()""")
    page.screenshot(artifact_path("zone-labels.png"))
    page.close()
    labels = got["labels"]
    assert len(labels) >= 4
    for a in labels:
        assert 0 <= a["x"] and a["x"] + a["w"] <= got["w"] and 0 <= a["y"], a
        assert a["w"] <= report.LABEL_CHAR_PX * len(a["text"]) + 4, a  # the rule's box holds it
    for i, a in enumerate(labels):
        for b in labels[i + 1:]:
            assert not (a["x"] < b["x"] + b["w"] and b["x"] < a["x"] + a["w"]
                        and a["y"] < b["y"] + b["h"] and b["y"] < a["y"] + a["h"]), (a, b)


def test_share_inside_equals_shapely_intersection():
    """The label placement's share of a box inside a zone, from rectangle clipping, equals
    the share from shapely's general intersection (the reference library) on an irregular
    zone with a hole and on boxes partly, wholly and not at all inside it."""
    rng = np.random.default_rng(7)
    angles = np.sort(rng.uniform(0, 2 * np.pi, 40))
    radii = rng.uniform(40, 100, 40)
    outer = shapely.Polygon(np.column_stack([200 + radii * np.cos(angles),
                                             150 + radii * np.sin(angles)]))
    zone = outer.difference(shapely.Point(200, 150).buffer(15)).buffer(1.0)
    xs = rng.uniform(80, 320, 200)
    ys = rng.uniform(30, 270, 200)
    half_w, half_h = 23.0, 8.0
    got = report._share_inside(zone, xs, ys, half_w, half_h)
    boxes = shapely.box(xs - half_w, ys - half_h, xs + half_w, ys + half_h)
    want = shapely.area(shapely.intersection(boxes, zone)) / (4 * half_w * half_h)
    assert ((want > 0) & (want < 1)).sum() > 20  # many boxes on the zone's edge
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-9)


def test_a_zone_map_of_more_zones_than_a_drawing_can_label_labels_none() -> None:
    """A spreader grid's zone map (more zones than MAX_ZONE_LABELS) draws every zone and no
    label, callout or leader (the report's caption says the table lists them: tested on a
    whole report in test_cli_run); one at the limit is labelled as before."""
    from geosoil.presentation import MAX_ZONE_LABELS

    def grid(n: int) -> gpd.GeoDataFrame:
        cols = 10
        boxes = [box(24 * (i % cols), 24 * (i // cols), 24 * (i % cols) + 24,
                     24 * (i // cols) + 24) for i in range(n)]
        return gpd.GeoDataFrame({"zone": range(1, n + 1), "kind": ["rate"] * n,
                                 "rate_kg_ha": [500.0 + 10 * i for i in range(n)]},
                                geometry=boxes, crs="EPSG:32755")

    many = report.zone_map_svg(grid(MAX_ZONE_LABELS + 1), rate_unit="t/ha")
    assert many.count('class="zone"') == MAX_ZONE_LABELS + 1
    assert "zone-label" not in many and "zone-leader" not in many
    few = report.zone_map_svg(grid(MAX_ZONE_LABELS), rate_unit="t/ha")
    assert "zone-label" in few


def test_the_report_says_when_a_zone_map_has_too_many_zones_to_label() -> None:
    """A paddock's zone map of more zones than MAX_ZONE_LABELS (a spreader grid): its caption
    says they are too many to label and that the table lists each; the other maps keep
    'labelled zone · rate'."""
    from geosoil.presentation import MAX_ZONE_LABELS

    data = report_input()
    zones = data.zones
    first = zones.iloc[0]
    n = MAX_ZONE_LABELS + 5
    x0, y0 = first.geometry.bounds[:2]
    grid = gpd.GeoDataFrame(
        [{**first.drop("geometry").to_dict(), "zone": i + 1, "kind": "rate",
          "rate_kg_ha": 1000.0 + i} for i in range(n)],
        geometry=[box(x0 + 10 * (i % 10), y0 + 10 * (i // 10), x0 + 10 * (i % 10) + 10,
                      y0 + 10 * (i // 10) + 10) for i in range(n)], crs=zones.crs)
    same = (zones["paddock"] == first["paddock"]) & (zones["product"] == first["product"])
    page = report.build_report(dataclasses.replace(
        data, zones=pd.concat([zones[~same], grid], ignore_index=True)))
    assert page.count(f"{n} zones, too many to label here: each is in the table below") == 1
    assert "labelled zone · rate" in page  # the other paddock's or product's maps
