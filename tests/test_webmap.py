"""Tests of geosoil.webmap: offline page, placement of surfaces, colour, escaping,
and a real headless Chromium with the network cut off."""

from __future__ import annotations

import html
import io
import json
import math
import re

import affine
import folium
import geopandas as gpd
import numpy as np
import pyproj
import pytest
import rasterio
from hypothesis import given, settings
from hypothesis import strategies as st
from rasterio.io import MemoryFile
from shapely.geometry import Point, box

from geosoil import webmap
from geosoil.errors import CRSError, InputError, SettingsError
from tests.browser import Chromium, artifact_path, require_chromium

# Strings a hostile or careless input file might hold (sample ids, paddock names, columns).
HOSTILE_IMG = "<img src=x onerror=alert(1)>"
HOSTILE_SCRIPT = "</script><script>alert(1)</script>"
HOSTILE_TEMPLATE = "${7*6}"
HOSTILE_FLAG_IMG = "<img src=x onerror=window.__pwned=1>"
HOSTILE_FLAG_TEMPLATE = "${window.__pwned=3}"
HOSTILE_QUOTES = "\"'`\\u0041 {{ 7*6 }} &amp;"

CRS = "EPSG:32755"  # WGS 84 / UTM 55S
X0, Y0 = (
    640_000.0,
    6_190_000.0,
)  # about 2 degrees east of the central meridian: grid convergence ~1 degree
CELL = 40.0


def farm(*, hostile: bool = False) -> dict:
    """A small invented farm: two paddocks, samples, four surfaces, zones, an exclusion."""
    north = "North " + HOSTILE_IMG if hostile else "North"
    south = "South " + HOSTILE_SCRIPT if hostile else "South"
    paddocks = gpd.GeoDataFrame(
        {"paddock": [north, south]},
        geometry=[box(X0, Y0 + 500, X0 + 800, Y0 + 1000), box(X0, Y0, X0 + 800, Y0 + 480)],
        crs=CRS,
    )
    rng = np.random.default_rng(7)
    ids = [f"S{i:02d}" for i in range(12)]
    notes = ["ok"] * 12
    if hostile:
        ids[:5] = [
            HOSTILE_IMG,
            HOSTILE_SCRIPT,
            HOSTILE_TEMPLATE,
            HOSTILE_FLAG_IMG,
            HOSTILE_FLAG_TEMPLATE,
        ]
        notes[0] = HOSTILE_FLAG_IMG
        notes[1] = HOSTILE_QUOTES
        notes[2] = "fine"  # the "${7*6}" sample: nothing else in its popup may read 42
    points = [Point(X0 + 60 + 60 * i, Y0 + 100 + 70 * i) for i in range(12)]
    samples = gpd.GeoDataFrame(
        {
            "sample_id": ids,
            "paddock": [north if p.y > Y0 + 500 else south for p in points],
            "esp": np.round(rng.uniform(3, 19, 12), 1),
            "ca_sat": np.round(rng.uniform(50, 80, 12), 1),
            "ph": np.round(rng.uniform(5.1, 7.9, 12), 1),
            ("note " + HOSTILE_SCRIPT if hostile else "note"): notes,
        },
        geometry=points,
        crs=CRS,
    )
    transform = affine.Affine(CELL, 0, X0, 0, -CELL, Y0 + 1000)
    rows, cols = 25, 20
    yy, xx = np.mgrid[0:rows, 0:cols]
    unique = np.arange(rows * cols, dtype=float).reshape(rows, cols)
    esp = 2.0 + 0.8 * xx + 0.1 * yy
    esp[0, 0] = np.nan
    crs = pyproj.CRS.from_user_input(CRS)
    rasters = [
        webmap.RasterLayer(
            title="ESP",
            unit="%",
            array=esp,
            transform=transform,
            crs=crs,
            breaks=webmap.SODICITY_BREAKS,
            class_labels=webmap.SODICITY_LABELS,
            show=True,
        ),
        webmap.RasterLayer(
            title="Ca saturation",
            unit="% of ECEC",
            array=40 + 30 * ((xx + yy) % 2) + unique / 100,
            transform=transform,
            crs=crs,
        ),
        webmap.RasterLayer(
            title="pH" + (" " + HOSTILE_TEMPLATE if hostile else ""),
            unit="pH units",
            array=5 + 0.1 * yy,
            transform=transform,
            crs=crs,
            scheme="diverging",
            centre=6.5,
        ),
        webmap.RasterLayer(
            title="ESP kriging SD",
            unit="%",
            array=1 + 0.05 * np.hypot(xx - 10, yy - 12),
            transform=transform,
            crs=crs,
        ),
    ]
    zone_rows = []
    gyp = "gypsum " + HOSTILE_FLAG_IMG if hostile else "gypsum"
    for name, geom in zip(paddocks["paddock"], paddocks.geometry, strict=False):
        minx, miny, maxx, maxy = geom.bounds
        third = (maxx - minx) / 3
        for k, rate in enumerate((0.0, 1500.0, 3000.0)):
            part = box(minx + k * third, miny, minx + (k + 1) * third, maxy)
            zone_rows.append(
                dict(
                    paddock=name,
                    product=gyp,
                    zone=k + 1,
                    kind="rate",
                    rate_kg_ha=rate,
                    area_ha=part.area / 1e4,
                    geometry=part,
                )
            )
        zone_rows.append(
            dict(
                paddock=name,
                product="lime",
                zone=1,
                kind="rate",
                rate_kg_ha=2000.0,
                area_ha=geom.area / 1e4,
                geometry=geom,
            )
        )
    zones = gpd.GeoDataFrame(zone_rows, crs=CRS)
    exclusions = gpd.GeoDataFrame(
        {"name": ["dam " + HOSTILE_IMG if hostile else "dam"]},
        geometry=[Point(X0 + 400, Y0 + 750).buffer(60)],
        crs=CRS,
    )
    return dict(
        paddocks=paddocks, samples=samples, rasters=rasters, zones=zones, exclusions=exclusions
    )


def build(*, hostile: bool = False, background_tiles: bool = False, **over) -> str:
    parts = farm(hostile=hostile)
    parts.update(over)
    title = "Test farm " + HOSTILE_SCRIPT if hostile else "Test farm"
    return webmap.build_map(title=title, background_tiles=background_tiles, **parts)


@pytest.fixture(scope="module")
def page_text() -> str:
    return build()


@pytest.fixture(scope="module")
def hostile_text() -> str:
    return build(hostile=True)


# --------------------------------------------------------------------------- offline


def test_page_loads_nothing_from_the_network(page_text: str) -> None:
    assert webmap.remote_references(page_text) == []
    assert not re.search(r"<script[^>]*\bsrc\s*=", page_text, re.I)
    assert not re.search(r"<link\b", page_text, re.I)
    for _, url in folium.Map.default_js + folium.Map.default_css:  # folium's CDN defaults
        assert url not in page_text
    assert webmap.TILE_URL not in page_text  # background tiles are off by default


def test_leaflet_is_inlined_from_the_installed_package(page_text: str) -> None:
    leaflet = webmap._leaflet_dir()
    js = (leaflet / "leaflet.js").read_text(encoding="utf-8")
    assert 't.version="1.9.4"' in js
    body = js.split("//# sourceMappingURL")[0].strip()
    assert body in page_text
    assert "sourceMappingURL" not in page_text
    # Leaflet's CSS images are carried as data URIs, not relative files.
    assert "url(images/" not in page_text
    assert page_text.count("url(data:image/png;base64,") >= 3


def test_background_tiles_add_only_the_tile_layer() -> None:
    text = build(background_tiles=True)
    assert webmap.TILE_URL in text
    assert webmap.remote_references(text) == []  # tiles are requested by Leaflet, not by markup
    for _, url in folium.Map.default_js + folium.Map.default_css:
        assert url not in text
    urls = set(re.findall(r"https?://[^\s\"'<>)\\]+", text))
    leaflet_js = (webmap._leaflet_dir() / "leaflet.js").read_text(encoding="utf-8")
    leaflet_css = (webmap._leaflet_dir() / "leaflet.css").read_text(encoding="utf-8")
    known = set(re.findall(r"https?://[^\s\"'<>)\\]+", leaflet_js + leaflet_css))
    assert urls - known == {webmap.TILE_URL}


# --------------------------------------------------------------------------- layers


def test_every_layer_is_in_the_switcher(page_text: str) -> None:
    match = re.search(r"overlays\s*:\s*\{(.*?)\}", page_text, re.S)
    assert match
    names = json.loads("[" + ",".join(re.findall(r'("(?:[^"\\]|\\.)*")\s*:', match.group(1))) + "]")
    assert names == [
        "ESP",
        "Ca saturation",
        "pH",
        "ESP kriging SD",
        "gypsum zones",
        "lime zones",
        "Exclusion areas",
        "Paddocks",
        "Soil samples",
    ]
    assert page_text.count("L.imageOverlay(") == 4
    assert page_text.count("L.circleMarker(") == 12


def test_legend_has_a_unit_for_every_surface(page_text: str) -> None:
    legend = page_text[page_text.index('id="geosoil-legend"') :]
    for title, unit in (
        ("ESP", "%"),
        ("Ca saturation", "% of ECEC"),
        ("pH", "pH units"),
        ("ESP kriging SD", "%"),
    ):
        assert f"{title} ({html.escape(unit)})" in legend
    for label in webmap.SODICITY_LABELS:
        assert html.escape(label) in legend


# 1 lb = 0.45359237 kg and 1 acre = 4046.8564224 m2, exact by definition (NIST SP 811)
LB_AC_IN_KG_HA = 0.45359237 / 4046.8564224 * 10_000


@pytest.mark.parametrize(
    ("unit", "shown"),
    [
        ("kg/ha", ("0 kg/ha", "1,500 kg/ha", "3,000 kg/ha", "2,000 kg/ha")),
        ("t/ha", ("0 t/ha", "1.5 t/ha", "3.0 t/ha", "2.0 t/ha")),  # 1 t = 1000 kg [derived]
        # exact factor (NIST SP 811): 3000 kg/ha = 2676.5 lb/ac; the rounded 0.892 gives 2,676
        ("lb/ac", ("0 lb/ac", f"{1500 / LB_AC_IN_KG_HA:,.0f} lb/ac",
                   f"{3000 / LB_AC_IN_KG_HA:,.0f} lb/ac", f"{2000 / LB_AC_IN_KG_HA:,.0f} lb/ac")),
    ],
)
def test_zone_labels_popups_and_legend_use_the_rate_unit(unit: str, shown: tuple) -> None:
    if unit == "lb/ac":
        assert shown[2] == "2,677 lb/ac" and f"{3000 * 0.892:,.0f}" == "2,676"
    page = build(rate_unit=unit)
    legend = page[page.index('id="geosoil-legend"') :]
    for product in ("gypsum", "lime"):
        assert f"{product} zones (rate, {unit})" in legend
    labels = re.findall(r'\.setContent\("([^"]*)"\)', page)
    for text in shown:
        assert f"</span>{text}</li>" in legend  # one legend item per distinct rate
        assert text in labels  # the zone's label on the map
    assert f"rate ({unit})" in page  # popup row
    if unit != "kg/ha":
        assert "kg/ha" not in page


def _grid_zones(n_side: int) -> gpd.GeoDataFrame:
    """n_side x n_side square zones over the north paddock, like a spreader grid."""
    size = 400 / n_side
    rows = [
        dict(paddock="North", product="gypsum", zone=i * n_side + j + 1, kind="rate",
             rate_kg_ha=1000.0 + 10 * (i * n_side + j), area_ha=size * size / 1e4,
             schedule="2 seasons of 0.5 t/ha" if i == 0 and j == 0 else "",
             geometry=box(X0 + j * size, Y0 + 500 + i * size, X0 + (j + 1) * size,
                          Y0 + 500 + (i + 1) * size))
        for i in range(n_side) for j in range(n_side)
    ]
    return gpd.GeoDataFrame(rows, crs=CRS)


def _zone_labels(page: str) -> list[str]:
    return re.findall(r'className: "geosoil-zone-label"', page)


def test_a_spreader_grid_is_not_buried_under_labels_but_every_zone_tells_its_rate() -> None:
    few = _grid_zones(3)  # 9 zones: each labelled
    many = _grid_zones(12)  # 144 zones, more than MAX_ZONE_LABELS: a label each would hide the map
    assert len(few) <= webmap.MAX_ZONE_LABELS < len(many)
    page_few = build(zones=few, rate_unit="kg/ha")
    page_many = build(zones=many, rate_unit="kg/ha")
    assert len(_zone_labels(page_few)) == 9
    assert _zone_labels(page_many) == []
    tooltips = re.findall(r'bindTooltip\("(zone [^"]*)"', page_many)
    assert len(tooltips) == 144  # the rate on hover, zone by zone
    assert "zone 144: 2,430 kg/ha" in tooltips
    # the split schedule is in the hover text and the popup
    assert "zone 1: 1,000 kg/ha (2 seasons of 0.5 t/ha)" in tooltips
    assert "applied as" in page_many and "2 seasons of 0.5 t/ha" in page_many


def test_notes_show_under_the_title_escaped() -> None:
    page = build(notes=["Rates are advisory.", "Cation balance: CONTESTED " + HOSTILE_IMG, " "])
    title = page[page.index('id="geosoil-title"') : page.index('id="geosoil-legend"')]
    assert title.count('class="geosoil-note"') == 2  # blank notes are left out
    assert "Rates are advisory." in title and "CONTESTED" in title
    assert HOSTILE_IMG not in page and html.escape(HOSTILE_IMG) in title


def test_unknown_rate_unit_is_refused() -> None:
    with pytest.raises(SettingsError) as e:
        build(rate_unit="kg/ac")
    assert e.value.key == "rate_unit" and "lb/ac" in str(e.value)


def test_missing_columns_and_crs_are_named() -> None:
    parts = farm()
    with pytest.raises(InputError, match="sample_id"):
        webmap.build_map(
            title="x", **{**parts, "samples": parts["samples"].drop(columns="sample_id")}
        )
    with pytest.raises(CRSError, match="paddocks"):
        webmap.build_map(
            title="x", **{**parts, "paddocks": parts["paddocks"].set_crs(None, allow_override=True)}
        )


def test_raster_layer_checks_its_arguments() -> None:
    t, crs = affine.Affine(10, 0, 0, 0, -10, 0), "EPSG:32755"
    with pytest.raises(InputError, match="centre"):
        webmap.RasterLayer(
            title="pH", unit="", array=np.ones((2, 2)), transform=t, crs=crs, scheme="diverging"
        )
    with pytest.raises(InputError, match="2-D"):
        webmap.RasterLayer(title="x", unit="", array=np.ones(3), transform=t, crs=crs)
    with pytest.raises(InputError, match="class labels"):
        webmap.RasterLayer(
            title="x",
            unit="",
            array=np.ones((2, 2)),
            transform=t,
            crs=crs,
            breaks=(6.0, 15.0),
            class_labels=("a", "b"),
        )
    with pytest.raises(InputError, match="sequential"):
        webmap.RasterLayer(
            title="x", unit="", array=np.ones((2, 2)), transform=t, crs=crs, scheme="rainbow"
        )


# --------------------------------------------------------------------------- colour


def _lightness(hex_colour: str) -> float:
    """CIE L* of an sRGB colour."""
    rgb = [int(hex_colour[i : i + 2], 16) / 255 for i in (1, 3, 5)]
    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
    y = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]
    return 116 * y ** (1 / 3) - 16 if y > 216 / 24389 else 24389 / 27 * y


@pytest.mark.parametrize("name", ["viridis", "ylorbr", "purples", "greys"])
def test_sequential_ramps_change_lightness_one_way(name: str) -> None:
    # Harrower & Brewer 2003: a sequential scheme orders values by lightness.
    lightness = [_lightness(c) for c in webmap.RAMPS[name]]
    steps = np.diff(lightness)
    assert (steps > 0).all() or (steps < 0).all()


def test_diverging_ramp_is_lightest_at_its_centre_and_not_red_green() -> None:
    # Harrower & Brewer 2003: a diverging scheme has a light centre and two dark hues.
    ramp = webmap.RAMPS["blue-orange"]
    lightness = [_lightness(c) for c in ramp]
    mid = len(ramp) // 2
    assert np.argmax(lightness) == mid
    assert (np.diff(lightness[: mid + 1]) > 0).all() and (np.diff(lightness[mid:]) < 0).all()
    low, high = (webmap._hex_to_rgb(c) for c in (ramp[0], ramp[-1]))
    assert low[2] > low[0]  # blue end
    assert high[0] > high[2] and high[0] > high[1]  # orange end: red-dominant, not green
    assert high[1] > high[2]


def test_sodicity_classes_take_their_limits_inclusive() -> None:
    # Northcote & Skene 1972: ESP >= 6 sodic, >= 15 strongly sodic.
    layer = farm()["rasters"][0]
    colours = [webmap._hex_to_rgb(c) for c in layer.class_colours()]
    rgba = webmap.colourise(np.array([[0.0, 5.99, 6.0, 14.99, 15.0, 40.0, np.nan]]), layer)[0]
    got = [tuple(int(v) for v in px[:3]) for px in rgba[:6]]
    assert got == [colours[0], colours[0], colours[1], colours[1], colours[2], colours[2]]
    assert rgba[6, 3] == 0 and (rgba[:6, 3] == 255).all()


def test_diverging_surface_is_white_at_the_target() -> None:
    layer = farm()["rasters"][2]
    rgba = webmap.colourise(np.array([[6.5, 4.0, 9.0]]), layer)[0]
    assert tuple(rgba[0, :3]) == webmap._hex_to_rgb(webmap.RAMPS["blue-orange"][3])
    assert rgba[1, 2] > rgba[1, 0]  # below target: blue
    assert rgba[2, 0] > rgba[2, 2]  # above target: orange


@settings(max_examples=25, deadline=None)
@given(st.integers(1, 9), st.integers(1, 9), st.randoms(use_true_random=False))
def test_png_round_trips_through_gdal(h: int, w: int, rnd) -> None:
    data = np.array([rnd.randrange(256) for _ in range(h * w * 4)], dtype=np.uint8).reshape(h, w, 4)
    with MemoryFile(webmap.encode_png(data)) as mem, mem.open() as src:
        assert src.driver == "PNG" and src.count == 4
        back = src.read()
    np.testing.assert_array_equal(np.moveaxis(back, 0, -1), data)


# --------------------------------------------------------------------------- escaping


@settings(max_examples=200, deadline=None)
@given(st.text())
def test_escaped_text_is_inert_and_reversible(text: str) -> None:
    out = webmap.escape_text(text)
    assert not set(out) & set("<>\"'`$\\{}")
    assert re.sub(r"&(#\d+|#x[0-9a-f]+|[a-z]+);", "", out).count("&") == 0
    assert html.unescape(out) == text


def test_hostile_strings_never_reach_the_page_raw(hostile_text: str) -> None:
    for raw in (
        HOSTILE_IMG,
        HOSTILE_SCRIPT,
        HOSTILE_TEMPLATE,
        HOSTILE_FLAG_IMG,
        HOSTILE_FLAG_TEMPLATE,
    ):
        assert raw not in hostile_text
    # The only closing script tags are the page's own: the inlined Leaflet and folium's block.
    assert hostile_text.lower().count("</script>") == build().lower().count("</script>")
    assert "${" not in hostile_text
    # In markup the text is escaped once; inside scripts, that escaped HTML is a JSON string.
    assert webmap.escape_text("Test farm " + HOSTILE_SCRIPT) in hostile_text
    assert (
        webmap._json_for_script(webmap.escape_text("Sample " + HOSTILE_IMG))[1:-1] in hostile_text
    )


# --------------------------------------------------------------------------- placement


# Projected CRSs and where on Earth to put a raster in each (lon range, lat range).
_PLACES = [
    ("EPSG:32755", (144.0, 149.9), (-38.0, -28.0)),  # UTM 55S: up to 3 degrees off the meridian
    ("EPSG:32633", (12.0, 17.9), (40.0, 60.0)),  # UTM 33N
    ("EPSG:3577", (120.0, 150.0), (-38.0, -20.0)),  # Australian Albers: large grid convergence
    ("EPSG:2193", (167.0, 178.0), (-46.0, -35.0)),  # NZTM
]


def _cell_of(web: webmap.WebRaster, x: float, y: float) -> float:
    col, row = ~web.transform @ (x, y)
    r, c = int(math.floor(row)), int(math.floor(col))
    if 0 <= r < web.array.shape[0] and 0 <= c < web.array.shape[1]:
        return float(web.array[r, c])
    return math.nan


@settings(max_examples=30, deadline=None)
@given(
    place=st.sampled_from(_PLACES),
    fx=st.floats(0, 1),
    fy=st.floats(0, 1),
    cell=st.sampled_from([5.0, 20.0, 50.0]),
    rows=st.integers(2, 12),
    cols=st.integers(2, 12),
    probe=st.tuples(st.integers(0, 11), st.integers(0, 11)),
)
def test_cells_land_where_pyproj_puts_them(place, fx, fy, cell, rows, cols, probe) -> None:
    crs_code, (lon0, lon1), (lat0, lat1) = place
    crs = pyproj.CRS.from_user_input(crs_code)
    to_crs = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    ox, oy = to_crs.transform(lon0 + fx * (lon1 - lon0), lat0 + fy * (lat1 - lat0))
    transform = affine.Affine(cell, 0, ox, 0, -cell, oy)
    values = np.arange(rows * cols, dtype=float).reshape(rows, cols)  # every cell its own value
    web = webmap.warp_to_web_mercator(values, transform=transform, crs=crs)
    to_web = pyproj.Transformer.from_crs(crs, "EPSG:3857", always_xy=True)

    def value_at(col: float, row: float) -> float:
        return _cell_of(web, *to_web.transform(*(transform @ (col, row))))

    # Any cell's middle holds that cell's value.
    r, c = probe[0] % rows, probe[1] % cols
    assert value_at(c + 0.5, r + 0.5) == values[r, c]
    # At each outer corner: 0.3 of a cell inside is the corner cell, 0.3 outside is no data.
    for col, row, dc, dr in (
        (0, 0, 1, 1),
        (cols, 0, -1, 1),
        (0, rows, 1, -1),
        (cols, rows, -1, -1),
    ):
        corner_cell = values[min(row, rows - 1), min(col, cols - 1)]
        assert value_at(col + 0.3 * dc, row + 0.3 * dr) == corner_cell
        assert math.isnan(value_at(col - 0.3 * dc, row - 0.3 * dr))
    # The overlay's lon/lat bounds hold every corner, with at most a pixel to spare.
    to_ll = pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    corners = [
        to_ll.transform(*(transform @ (c_, r_)))
        for c_, r_ in ((0, 0), (cols, 0), (0, rows), (cols, rows))
    ]
    w, s, e, n = web.bounds_lonlat
    lons, lats = [p[0] for p in corners], [p[1] for p in corners]
    pixel_deg = web.transform.a / 6378137.0 * 180 / math.pi  # one web pixel in degrees of longitude
    assert w <= min(lons) + 1e-9 and e >= max(lons) - 1e-9
    assert s <= min(lats) + 1e-9 and n >= max(lats) - 1e-9
    assert min(lons) - w < 1.5 * pixel_deg and e - max(lons) < 1.5 * pixel_deg


def test_warp_respects_the_pixel_budget() -> None:
    t = affine.Affine(1.0, 0, 500_000, 0, -1.0, 6_200_000)
    web = webmap.warp_to_web_mercator(
        np.ones((400, 400)), transform=t, crs="EPSG:32755", max_pixels=10_000
    )
    assert web.array.size <= 10_000 * 1.05
    assert np.isfinite(web.array).any()


# --------------------------------------------------------------------------- browser


@pytest.fixture(scope="module")
def browser():
    with Chromium(require_chromium()) as chromium:
        yield chromium


@pytest.fixture(scope="module")
def map_page(browser, tmp_path_factory):
    folder = tmp_path_factory.mktemp("map")
    path = folder / "map.html"
    path.write_text(build(hostile=True), encoding="utf-8")
    page = browser.new_page()
    page.goto(path)
    browser.drain(0.2)
    yield page
    page.close()


_LAYER_SWITCH_JS = """
(() => {
  const api = window.geosoilMap;
  const out = [];
  const labels = Array.from(document.querySelectorAll('.leaflet-control-layers-overlays label'));
  for (const label of labels) {
    const input = label.querySelector('input');
    const name = label.textContent.trim();
    const entry = api.layers.find(e => e.title === name);
    if (!entry) { out.push({name, found: false}); continue; }
    const legend = document.getElementById(entry.legend);
    const before = {on: api.map.hasLayer(entry.layer), checked: input.checked,
                    legend: legend.style.display !== 'none'};
    input.click();
    const flipped = {on: api.map.hasLayer(entry.layer), checked: input.checked,
                     legend: legend.style.display !== 'none'};
    input.click();
    const back = {on: api.map.hasLayer(entry.layer), checked: input.checked,
                  legend: legend.style.display !== 'none'};
    out.push({name, found: true, before, flipped, back});
  }
  return out;
})()
"""


@pytest.mark.browser
def test_browser_map_renders_offline_without_errors(map_page) -> None:
    assert map_page.console_errors == []
    assert map_page.dialogs == []
    remote = [u for u in map_page.requests if not u.startswith(("file:", "data:"))]
    assert remote == []
    shot = map_page.screenshot(artifact_path("webmap.png"))
    with rasterio.open(io.BytesIO(shot.read_bytes())) as png:
        pixels = png.read()
    colours = {tuple(p) for p in pixels.reshape(pixels.shape[0], -1).T[::37]}
    assert len(colours) > 20  # a drawn map, not a blank page


@pytest.mark.browser
def test_browser_every_layer_present_and_switchable(map_page) -> None:
    results = map_page.evaluate(_LAYER_SWITCH_JS)
    expected = [
        "ESP",
        "Ca saturation",
        "pH " + HOSTILE_TEMPLATE,
        "ESP kriging SD",
        "gypsum " + HOSTILE_FLAG_IMG + " zones",
        "lime zones",
        "Exclusion areas",
        "Paddocks",
        "Soil samples",
    ]
    assert [r["name"] for r in results] == expected
    for r in results:
        assert r["found"], r
        assert r["before"]["on"] == r["before"]["checked"] == r["before"]["legend"], r
        assert r["flipped"] == {k: not v for k, v in r["before"].items()}, r
        assert r["back"] == r["before"], r
    on = {r["name"] for r in results if r["before"]["on"]}
    assert on == {
        "ESP",
        "gypsum " + HOSTILE_FLAG_IMG + " zones",
        "Exclusion areas",
        "Paddocks",
        "Soil samples",
    }
    assert map_page.console_errors == []


@pytest.mark.browser
def test_browser_legend_is_visible_with_units(map_page) -> None:
    state = map_page.evaluate(
        """(() => {
          const el = document.getElementById('geosoil-legend');
          const r = el.getBoundingClientRect();
          const style = getComputedStyle(el);
          const entries = Array.from(el.querySelectorAll('.gs-legend-entry'))
            .filter(e => e.style.display !== 'none').map(e => e.innerText);
          return {x: r.x, y: r.y, w: r.width, h: r.height, vw: innerWidth, vh: innerHeight,
                  visibility: style.visibility, display: style.display, entries};
        })()"""
    )
    assert state["visibility"] == "visible" and state["display"] != "none"
    assert state["w"] > 100 and state["h"] > 100
    assert state["x"] >= 0 and state["y"] >= 0
    assert state["x"] + state["w"] <= state["vw"] and state["y"] + state["h"] <= state["vh"]
    text = "\n".join(state["entries"])
    assert "ESP (%)" in text and "strongly sodic" in text
    assert "kg/ha" in text  # zone rates


@pytest.mark.browser
def test_browser_hostile_text_shows_as_text_and_never_runs(map_page) -> None:
    popups = map_page.evaluate(
        """(() => {
          const texts = [];
          window.geosoilMap.map.eachLayer(layer => {
            if (layer instanceof L.CircleMarker && layer.getPopup()) {
              layer.openPopup();
              const el = layer.getPopup().getElement().querySelector('.leaflet-popup-content');
              texts.push({text: el.innerText, imgs: el.querySelectorAll('img').length,
                          scripts: el.querySelectorAll('script').length});
              layer.closePopup();
            }
          });
          return texts;
        })()"""
    )
    assert len(popups) == 12
    assert all(p["imgs"] == 0 and p["scripts"] == 0 for p in popups)
    texts = [p["text"] for p in popups]
    for raw in (
        HOSTILE_IMG,
        HOSTILE_SCRIPT,
        HOSTILE_TEMPLATE,
        HOSTILE_FLAG_IMG,
        HOSTILE_FLAG_TEMPLATE,
    ):
        assert any("Sample " + raw in t for t in texts), raw
    assert any(HOSTILE_QUOTES in t for t in texts)
    assert any("note " + HOSTILE_SCRIPT in t for t in texts)  # a hostile column name
    template_popup = next(t for t in texts if "Sample " + HOSTILE_TEMPLATE in t)
    assert "42" not in template_popup
    labels = map_page.evaluate(
        "Array.from(document.querySelectorAll('.geosoil-paddock-label')).map(e => e.innerText)"
    )
    assert sorted(labels) == sorted(["North " + HOSTILE_IMG, "South " + HOSTILE_SCRIPT])
    checks = map_page.evaluate(
        """({pwned: typeof window.__pwned, title: document.title,
             heading: document.getElementById('geosoil-title').innerText,
             strayImgs: document.querySelectorAll('img:not(.leaflet-image-layer)').length})"""
    )
    assert checks == {
        "pwned": "undefined",
        "title": "Test farm " + HOSTILE_SCRIPT,
        "heading": "Test farm " + HOSTILE_SCRIPT,
        "strayImgs": 0,
    }
    assert map_page.dialogs == []
    assert map_page.console_errors == []


@pytest.mark.browser
def test_browser_overlay_pixels_sit_where_pyproj_puts_the_cells(map_page) -> None:
    """Through Leaflet and the PNG: a point 0.3 cell inside each corner of the UTM grid,
    placed by pyproj, shows that corner cell's colour; 0.3 cell outside is transparent."""
    layer = farm()["rasters"][1]  # "Ca saturation": every cell a different colour
    rows, cols = layer.array.shape
    to_ll = pyproj.Transformer.from_crs(layer.crs, "EPSG:4326", always_xy=True)
    probes = []
    for col, row, dc, dr in (
        (0, 0, 1, 1),
        (cols, 0, -1, 1),
        (0, rows, 1, -1),
        (cols, rows, -1, -1),
    ):
        for sign in (1, -1):
            lon, lat = to_ll.transform(
                *(layer.transform @ (col + sign * 0.3 * dc, row + sign * 0.3 * dr))
            )
            probes.append({"lat": lat, "lon": lon})
    script = """(async probes => {
      const api = window.geosoilMap;
      const entry = api.layers.find(e => e.title === 'Ca saturation');
      api.map.addLayer(entry.layer);
      let overlay = null;
      entry.layer.eachLayer(l => { overlay = l; });
      const img = overlay.getElement();
      await img.decode();
      const canvas = document.createElement('canvas');
      canvas.width = img.naturalWidth; canvas.height = img.naturalHeight;
      const ctx = canvas.getContext('2d');
      ctx.drawImage(img, 0, 0);
      const box = img.getBoundingClientRect();
      const mapBox = api.map.getContainer().getBoundingClientRect();
      const out = probes.map(p => {
        const pt = api.map.latLngToContainerPoint([p.lat, p.lon]);
        const fx = (pt.x + mapBox.left - box.left) / box.width;
        const fy = (pt.y + mapBox.top - box.top) / box.height;
        const px = Math.floor(fx * img.naturalWidth), py = Math.floor(fy * img.naturalHeight);
        const inside = px >= 0 && py >= 0 && px < img.naturalWidth && py < img.naturalHeight;
        return inside ? Array.from(ctx.getImageData(px, py, 1, 1).data) : [0, 0, 0, 0];
      });
      api.map.removeLayer(entry.layer);
      return out;
    })(__PROBES__)""".replace("__PROBES__", json.dumps(probes))
    got = map_page.evaluate(script)
    corner_cells = [
        layer.array[0, 0],
        layer.array[0, cols - 1],
        layer.array[rows - 1, 0],
        layer.array[rows - 1, cols - 1],
    ]
    expected = webmap.colourise(np.array([corner_cells]), layer)[0]
    for k, want in enumerate(expected):
        inside, outside = got[2 * k], got[2 * k + 1]
        assert inside == [int(v) for v in want], (k, inside, want)
        assert outside[3] == 0, (k, outside)
    assert map_page.console_errors == []


@pytest.mark.browser
def test_browser_background_tiles_fail_quietly_offline(browser, tmp_path) -> None:
    path = tmp_path / "tiles.html"
    path.write_text(build(background_tiles=True), encoding="utf-8")
    tab = browser.new_page()
    try:
        tab.goto(path)
        browser.drain(0.5)
        tiles = [u for u in tab.requests if u.startswith("https://tile.openstreetmap.org/")]
        assert tiles  # it tried, and the cut-off network refused
        others = [u for u in tab.requests if not u.startswith(("file:", "data:", "https://tile."))]
        assert others == []
        # Only the failed tile loads are reported: no script error, the map still works.
        assert all("tile.openstreetmap.org" in e for e in tab.console_errors), tab.console_errors
        assert tab.evaluate("window.geosoilMap.layers.length") == 9
        assert tab.evaluate("document.querySelectorAll('img.leaflet-image-layer').length") == 1
    finally:
        tab.close()
