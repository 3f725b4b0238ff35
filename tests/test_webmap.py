"""Tests of geosoil.webmap: the offline page, its data, placement of surfaces, escaping,
and a real headless Chromium with the network cut off (desktop and phone sizes)."""

from __future__ import annotations

import io
import json
import math
import re
import warnings

import affine
import geopandas as gpd
import numpy as np
import pyproj
import pytest
import rasterio
from hypothesis import given, settings
from hypothesis import strategies as st
from rasterio.errors import NotGeoreferencedWarning
from shapely.geometry import Point, box

from geosoil import webmap
from geosoil.errors import CRSError, InputError, SettingsError
from geosoil.presentation import classes_for, escape_text, hex_to_rgb
from tests.browser import artifact_path

# Strings a hostile or careless input file might hold (sample ids, paddock names, columns).
HOSTILE_IMG = "<img src=x onerror=alert(1)>"
HOSTILE_SCRIPT = "</script><script>alert(1)</script>"
HOSTILE_TEMPLATE = "${7*6}"
HOSTILE_FLAG_IMG = "<img src=x onerror=window.__pwned=1>"
HOSTILE_FLAG_TEMPLATE = "${window.__pwned=3}"
HOSTILE_QUOTES = "\"'`\\u0041 {{ 7*6 }} &amp;"

CRS = "EPSG:32755"  # WGS 84 / UTM 55S
X0, Y0 = 640_000.0, 6_190_000.0  # about 2 degrees east of the central meridian
CELL = 40.0
ROWS, COLS = 25, 20


def surfaces(hostile: bool = False) -> list[webmap.RasterLayer]:
    """Four invented surfaces over one grid, each in its own colour classes."""
    transform = affine.Affine(CELL, 0, X0, 0, -CELL, Y0 + 1000)
    yy, xx = np.mgrid[0:ROWS, 0:COLS]
    esp = 2.0 + 0.8 * xx + 0.1 * yy
    esp[0, 0] = np.nan
    ph = 4.2 + 0.1 * yy
    ca_sat = 40 + 2 * xx
    sd = 0.2 + 0.05 * np.hypot(xx - 10, yy - 12)
    crs = pyproj.CRS.from_user_input(CRS)
    out = []
    for key, title, unit, arr, cl in (
        ("esp", "ESP", "% of ECEC", esp, classes_for("esp", esp)),
        ("ph", "pH (CaCl2)" + (" " + HOSTILE_TEMPLATE if hostile else ""), "", ph,
         classes_for("ph", ph, target=4.8)),
        ("ca_sat", "Ca saturation", "% of ECEC", ca_sat, classes_for("amount", ca_sat)),
        ("esp_sd", "ESP: kriging SD", "%", sd, classes_for("error", sd)),
    ):
        out.append(webmap.RasterLayer(key=key, title=title, unit=unit, array=arr,
                                      transform=transform, crs=crs, classes=cl,
                                      group="error" if key.endswith("_sd") else "soil"))
    return out


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
        ids[:5] = [HOSTILE_IMG, HOSTILE_SCRIPT, HOSTILE_TEMPLATE, HOSTILE_FLAG_IMG,
                   HOSTILE_FLAG_TEMPLATE]
        notes[0] = HOSTILE_FLAG_IMG
        notes[1] = HOSTILE_QUOTES
        notes[2] = "fine"  # the "${7*6}" sample: nothing else in its popup may read 42
    points = [Point(X0 + 60 + 60 * i, Y0 + 100 + 70 * i) for i in range(12)]
    samples = gpd.GeoDataFrame(
        {
            "sample_id": ids,
            "paddock": [north if p.y > Y0 + 500 else south for p in points],
            "esp": np.round(rng.uniform(3, 19, 12), 1),
            "ph": np.round(rng.uniform(4.1, 6.9, 12), 1),
            "EC 1:5 (dS/m)": np.round(rng.uniform(0.05, 0.4, 12), 2),
            ("note " + HOSTILE_SCRIPT if hostile else "note"): notes,
            "sodicity": ["sodic"] * 6 + ["non-sodic"] * 6,
        },
        geometry=points,
        crs=CRS,
    )
    zone_rows = []
    gyp = "gypsum " + HOSTILE_FLAG_IMG if hostile else "gypsum"
    for name, geom in zip(paddocks["paddock"], paddocks.geometry, strict=False):
        minx, miny, maxx, maxy = geom.bounds
        third = (maxx - minx) / 3
        for k, rate in enumerate((0.0, 1500.0, 3000.0)):
            part = box(minx + k * third, miny, minx + (k + 1) * third, maxy)
            zone_rows.append(dict(paddock=name, product=gyp, zone=k + 1, kind="rate",
                                  rate_kg_ha=rate, area_ha=part.area / 1e4, geometry=part))
        zone_rows.append(dict(paddock=name, product="lime", zone=1, kind="rate",
                              rate_kg_ha=2000.0, area_ha=geom.area / 1e4, geometry=geom))
    zones = gpd.GeoDataFrame(zone_rows, crs=CRS)
    exclusions = gpd.GeoDataFrame(
        {"label": ["dam " + HOSTILE_IMG if hostile else "dam", "Long Creek"],
         "kind": ["exclusion", "creek buffer"], "paddock": [north, south],
         "area_ha": [1.1, 0.5]},
        geometry=[Point(X0 + 400, Y0 + 750).buffer(60),
                  box(X0 + 700, Y0 + 100, X0 + 720, Y0 + 400)],
        crs=CRS,
    )
    fields = [
        webmap.SampleField("paddock", "Paddock"),
        webmap.SampleField("ph", "pH (CaCl2)", "", 1),
        webmap.SampleField("EC 1:5 (dS/m)", "EC 1:5 (dS/m)"),
        webmap.SampleField("esp", "ESP", "%", 1),
        webmap.SampleField(samples.columns[5], samples.columns[5]),
        webmap.SampleField("sodicity", "", flag=True, ok_values=("non-sodic",)),
    ]
    return dict(paddocks=paddocks, samples=samples, rasters=surfaces(hostile), zones=zones,
                exclusions=exclusions, sample_fields=fields)


def build(*, hostile: bool = False, background_tiles: bool = False, **over) -> str:
    parts = farm(hostile=hostile)
    parts.update(over)
    title = "Test farm " + HOSTILE_SCRIPT if hostile else "Test farm"
    return webmap.build_map(title=title, background_tiles=background_tiles, **parts)


def data_of(page: str) -> dict:
    """The JSON block the page draws from."""
    m = re.search(r'<script type="application/json" id="geosoil-data">(.*?)</script>', page, re.S)
    assert m
    return json.loads(m.group(1))


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
    assert webmap.TILE_URL not in page_text  # background tiles are off by default


def test_leaflet_is_inlined_from_the_installed_package(page_text: str) -> None:
    leaflet = webmap._leaflet_dir()
    js = (leaflet / "leaflet.js").read_text(encoding="utf-8")
    assert 't.version="1.9.4"' in js
    body = js.split("//# sourceMappingURL")[0].strip()
    assert body in page_text
    assert "sourceMappingURL" not in page_text
    assert "url(images/" not in page_text  # Leaflet's CSS images are data URIs
    assert page_text.count("url(data:image/png;base64,") >= 3


def test_background_tiles_name_only_the_tile_server() -> None:
    text = build(background_tiles=True)
    assert data_of(text)["tiles"]["url"] == webmap.TILE_URL
    assert webmap.remote_references(text) == []  # tiles are requested by Leaflet, not by markup
    urls = set(re.findall(r"https?://[^\s\"'<>)\\]+", text))
    leaflet = (webmap._leaflet_dir() / "leaflet.js").read_text(encoding="utf-8") + (
        webmap._leaflet_dir() / "leaflet.css").read_text(encoding="utf-8")
    known = set(re.findall(r"https?://[^\s\"'<>)\\]+", leaflet))
    assert urls - known == {webmap.TILE_URL}


# --------------------------------------------------------------------------- content


def test_every_surface_is_one_choice_with_its_legend(page_text: str) -> None:
    data = data_of(page_text)
    assert [s["id"] for s in data["surfaces"]] == ["esp", "ph", "ca_sat", "esp_sd"]
    assert [s["group"] for s in data["surfaces"]] == ["soil", "soil", "soil", "error"]
    esp = data["surfaces"][0]
    assert [i["label"] for i in esp["legend"]] == [
        "non-sodic (< 6)", "sodic (6 to 15)", "strongly sodic (≥ 15)"]
    assert all(s["png"].startswith("data:image/png;base64,") for s in data["surfaces"])
    assert data["open"] == {"surface": "esp", "product": "gypsum"}


def test_the_map_opens_on_the_surface_and_product_asked_for() -> None:
    data = data_of(build(open_surface="ph", open_product="lime"))
    assert data["open"] == {"surface": "ph", "product": "lime"}
    with pytest.raises(InputError, match="open_surface 'k'"):
        build(open_surface="k")


def test_one_sample_layer_from_one_array(page_text: str) -> None:
    samples = data_of(page_text)["samples"]
    assert [f[0] for f in samples["fields"]] == ["Paddock", "pH (CaCl2)", "EC 1:5 (dS/m)",
                                                 "ESP", "note"]
    rows = webmap.sample_rows(samples)
    assert len(rows) == 12 and samples["n"] == 12
    row = rows[0]
    assert row[2] == "S00" and len(row[4]) == 5
    assert row[5] == ["sodic"] and rows[11][5] == []  # flags, "non-sodic" is no flag
    assert page_text.count("L.circleMarker(") == 2  # the page's code, not one per sample


def test_exclusions_say_what_they_are(page_text: str) -> None:
    excl = data_of(page_text)["exclusions"]
    assert [(e["name"], e["kind"]) for e in excl] == [("dam", "exclusion"),
                                                      ("Long Creek", "creek buffer")]


# 1 lb = 0.45359237 kg and 1 acre = 4046.8564224 m2, exact by definition (NIST SP 811)
LB_AC_IN_KG_HA = 0.45359237 / 4046.8564224 * 10_000


@pytest.mark.parametrize(
    ("unit", "shown"),
    [
        ("kg/ha", ("0", "1,500", "3,000", "2,000")),
        ("t/ha", ("0", "1.5", "3.0", "2.0")),  # 1 t = 1000 kg [derived]
        # exact factor (NIST SP 811): 3000 kg/ha = 2676.5 lb/ac; the rounded 0.892 gives 2,676
        ("lb/ac", ("0", f"{1500 / LB_AC_IN_KG_HA:,.0f}", f"{3000 / LB_AC_IN_KG_HA:,.0f}",
                   f"{2000 / LB_AC_IN_KG_HA:,.0f}")),
    ],
)
def test_zone_labels_popups_and_legend_use_the_rate_unit(unit: str, shown: tuple) -> None:
    if unit == "lb/ac":
        assert shown[2] == "2,677" and f"{3000 * 0.892:,.0f}" == "2,676"
    products = data_of(build(rate_unit=unit))["products"]
    assert [p["product"] for p in products] == ["gypsum", "lime"]
    assert all(p["unit"] == unit for p in products)
    gyp, lime = products
    assert [i["label"] for i in gyp["legend"]] == list(shown[:3])
    assert [i["label"] for i in lime["legend"]] == [shown[3]]
    assert [z["r"] for z in gyp["zones"]] == list(shown[:3]) * 2


def test_zone_popup_areas_in_acres_beside_a_rate_per_acre() -> None:
    # user trial (as the report's tables): areas in acres with lb/ac; 1 ha = 2.4710538 ac
    # (NIST SP 811), by hand for each zone's own area
    for unit, factor, name in (("t/ha", 1.0, "ha"), ("lb/ac", 2.4710538, "ac")):
        zones = _grid_zones(3)
        gyp = data_of(build(zones=zones, rate_unit=unit))["products"][0]
        for z, ha in zip(gyp["zones"], zones["area_ha"], strict=True):
            number, shown = z["a"].split(" ")
            assert shown == name and float(number) == pytest.approx(ha * factor, abs=0.005)


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


def test_a_spreader_grid_is_not_buried_under_labels_but_every_zone_tells_its_rate() -> None:
    few = _grid_zones(3)
    many = _grid_zones(12)  # more than MAX_ZONE_LABELS: a label each would hide the map
    assert len(few) <= webmap.MAX_ZONE_LABELS < len(many)
    p_few = data_of(build(zones=few))["products"][0]
    p_many = data_of(build(zones=many))["products"][0]
    assert p_few["labelled"] and all("at" in z for z in p_few["zones"])
    assert not p_many["labelled"] and not any("at" in z for z in p_many["zones"])
    assert len(p_many["zones"]) == 144 and p_many["zones"][-1]["r"] == "2,430"
    assert p_many["zones"][0]["s"] == "2 seasons of 0.5 t/ha"
    assert len(p_many["legend"]) <= 8  # round classes, not one swatch per zone


def test_notes_travel_as_text() -> None:
    data = data_of(build(notes=["Rates are advisory.", "CONTESTED " + HOSTILE_IMG, " "]))
    assert data["notes"] == ["Rates are advisory.", "CONTESTED " + HOSTILE_IMG]


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
    cl = classes_for("amount", np.ones(2))
    with pytest.raises(InputError, match="2-D"):
        webmap.RasterLayer(key="x", title="x", unit="", array=np.ones(3), transform=t, crs=crs,
                           classes=cl)
    with pytest.raises(InputError, match="group"):
        webmap.RasterLayer(key="x", title="x", unit="", array=np.ones((2, 2)), transform=t,
                           crs=crs, classes=cl, group="other")
    with pytest.raises(InputError, match="unique"):
        build(rasters=surfaces() + surfaces()[:1])


def test_hostile_strings_never_reach_the_page_raw(hostile_text: str) -> None:
    for raw in (HOSTILE_IMG, HOSTILE_SCRIPT, HOSTILE_TEMPLATE, HOSTILE_FLAG_IMG,
                HOSTILE_FLAG_TEMPLATE):
        assert raw not in hostile_text
    # The only closing script tags are the page's own.
    assert hostile_text.lower().count("</script>") == build().lower().count("</script>")
    assert "${" not in hostile_text
    assert escape_text("Test farm " + HOSTILE_SCRIPT) in hostile_text  # <title>, autoescaped
    data = data_of(hostile_text)
    assert data["title"] == "Test farm " + HOSTILE_SCRIPT  # the JSON holds the text as it is
    assert webmap.sample_rows(data["samples"])[0][2] == HOSTILE_IMG


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


@pytest.mark.slow
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
    web = webmap.warp_to_web_mercator(values, transform=transform, crs=crs, oversample=4)
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


@settings(max_examples=25, deadline=None)
@given(
    place=st.sampled_from(_PLACES),
    cell=st.sampled_from([5.0, 10.0, 30.0]),
    rows=st.integers(1, 40),
    cols=st.integers(1, 40),
    oversample=st.sampled_from([1, 2, 4]),
    seed=st.integers(0, 2**16),
)
def test_warp_by_index_lookup_equals_gdals_warp_of_each_surface(
    place, cell, rows, cols, oversample, seed,
) -> None:
    """Every surface of a grid is warped by looking up the cell each web pixel took when GDAL
    warped the cells' index numbers once: the same array as rasterio.warp.reproject (nearest,
    NaN as no data) gives for that surface, NaN cells included."""
    import rasterio.warp
    from rasterio.enums import Resampling

    crs_code, (lon0, _lon1), (lat0, _lat1) = place
    crs = pyproj.CRS.from_user_input(crs_code)
    ox, oy = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True).transform(lon0, lat0)
    transform = affine.Affine(cell, 0, ox, 0, -cell, oy)
    rng = np.random.default_rng(seed)
    for _ in range(3):  # three surfaces of the one grid
        values = rng.normal(size=(rows, cols))
        values[rng.random((rows, cols)) < 0.3] = np.nan
        web = webmap.warp_to_web_mercator(values, transform=transform, crs=crs,
                                          oversample=oversample)
        want = np.full(web.array.shape, np.nan)
        rasterio.warp.reproject(source=values, destination=want, src_transform=transform,
                                src_crs=crs, src_nodata=np.nan, dst_transform=web.transform,
                                dst_crs="EPSG:3857", dst_nodata=np.nan,
                                resampling=Resampling.nearest)
        np.testing.assert_array_equal(web.array, want)


def test_warp_respects_the_pixel_budget() -> None:
    t = affine.Affine(1.0, 0, 500_000, 0, -1.0, 6_200_000)
    web = webmap.warp_to_web_mercator(
        np.ones((400, 400)), transform=t, crs="EPSG:32755", max_pixels=10_000
    )
    assert web.array.size <= 10_000 * 1.05
    assert np.isfinite(web.array).any()




# --------------------------------------------------------------------------- browser


def _open(browser, path, *, width: int = 1280, height: int = 900):
    page = browser.new_page(width=width, height=height)
    page.goto(path)
    browser.drain(0.2)
    return page


@pytest.fixture(scope="module")
def map_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("map") / "map.html"
    path.write_text(build(hostile=True), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def map_page(browser, map_path):
    page = _open(browser, map_path)
    yield page
    page.close()


def _pixels(page, name: str) -> np.ndarray:
    shot = page.screenshot(artifact_path(name))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        png = rasterio.open(io.BytesIO(shot.read_bytes()))
    with png:
        return png.read()[:3]  # (3, rows, columns)


def _rect_overlap(a: dict, b: dict) -> bool:
    return (a["left"] < b["right"] and b["left"] < a["right"]
            and a["top"] < b["bottom"] and b["top"] < a["bottom"])


_RECT = "(e => { const r = e.getBoundingClientRect(); return {left: r.left, top: r.top, " \
        "right: r.right, bottom: r.bottom, width: r.width, height: r.height}; })"


@pytest.mark.browser
def test_browser_map_renders_offline_without_errors(map_page) -> None:
    assert map_page.console_errors == []
    assert map_page.dialogs == []
    remote = [u for u in map_page.requests if not u.startswith(("file:", "data:"))]
    assert remote == []
    pixels = _pixels(map_page, "webmap-desktop.png")
    colours = {tuple(p) for p in pixels.reshape(3, -1).T[::37]}
    assert len(colours) > 20  # a drawn map, not a blank page
    state = map_page.evaluate(
        "({images: document.querySelectorAll('img.leaflet-image-layer').length,"
        " legends: Array.from(document.querySelectorAll('#gs-legend .gs-legend-title'))"
        ".map(e => e.textContent)})")
    assert state == {"images": 1,
                     "legends": ["ESP (% of ECEC)", f"gypsum {HOSTILE_FLAG_IMG} zones (kg/ha)"]}


def _probe_cells(layer: webmap.RasterLayer) -> list[tuple[int, int, int]]:
    """(row, col, class) of one cell per class whose 3 x 3 neighbours share its class, so that
    a pixel at its centre can only show that class, whatever the resampling."""
    idx = layer.classes.index(layer.array)
    found: dict[int, tuple[int, int, int]] = {}
    for r in range(1, idx.shape[0] - 1):
        for c in range(1, idx.shape[1] - 1):
            k = int(idx[r, c])
            block = idx[r - 1 : r + 2, c - 1 : c + 2]
            if k >= 0 and k not in found and (block == k).all():
                found[k] = (r, c, k)
    return list(found.values())


@pytest.mark.browser
def test_browser_each_surface_alone_shows_its_legend_colours_under_known_cells(
        browser, map_path) -> None:
    """Switch each surface on alone; the screen pixel at the centre of known cells (placed by
    pyproj) has the colour of the legend swatch of that cell's class."""
    page = _open(browser, map_path)
    try:
        for layer in surfaces(hostile=True):
            probes = _probe_cells(layer)
            assert len(probes) >= 2, layer.key
            to_ll = pyproj.Transformer.from_crs(layer.crs, "EPSG:4326", always_xy=True)
            lonlat = [to_ll.transform(*(layer.transform @ (c + 0.5, r + 0.5)))
                      for r, c, _ in probes]
            got = page.evaluate(
                f"""(async (id, pts) => {{
                  const api = window.geosoilMap;
                  api.show({{surface: id, product: null, samples: false, paddocks: false,
                            exclusions: false}});
                  await api.surfaces[id].getElement().decode();
                  await new Promise(r => requestAnimationFrame(() => requestAnimationFrame(r)));
                  const entries = document.querySelectorAll('#gs-legend .gs-legend-entry');
                  const items = Array.from(entries[0].querySelectorAll('li')).map(li => ({{
                    label: li.textContent,
                    colour: getComputedStyle(li.querySelector('.gs-swatch')).backgroundColor}}));
                  return {{entries: entries.length, surface: entries[0].dataset.surface,
                          images: document.querySelectorAll('img.leaflet-image-layer').length,
                          items: items.reverse(),
                          points: pts.map(p => api.map.latLngToContainerPoint([p[1], p[0]]))}};
                }})({json.dumps(layer.key)}, {json.dumps(lonlat)})""")
            assert got["entries"] == 1 and got["surface"] == layer.key
            assert got["images"] == 1
            assert [i["label"] for i in got["items"]] == list(layer.classes.labels)
            pixels = _pixels(page, f"webmap-surface-{layer.key}.png")
            for (r, c, k), pt in zip(probes, got["points"], strict=True):
                x, y = int(round(pt["x"])), int(round(pt["y"]))
                screen = tuple(int(v) for v in pixels[:, y, x])
                swatch = tuple(int(v) for v in re.findall(r"\d+", got["items"][k]["colour"])[:3])
                assert swatch == hex_to_rgb(layer.classes.colours[k])
                assert max(abs(a - b) for a, b in zip(screen, swatch, strict=True)) <= 3, (
                    layer.key, r, c, layer.array[r, c], screen, swatch)
        assert page.console_errors == []
    finally:
        page.close()


@pytest.mark.browser
def test_browser_panel_choices_are_exclusive(map_page) -> None:
    got = map_page.evaluate(
        """(() => {
          const out = [];
          const radios = Array.from(document.querySelectorAll('input[name=gs-surface]'));
          for (const r of radios) {
            r.click();
            out.push({value: r.value,
                      images: document.querySelectorAll('img.leaflet-image-layer').length,
                      legends: Array.from(document.querySelectorAll(
                        '#gs-legend .gs-legend-entry[data-surface]')).map(e => e.dataset.surface)});
          }
          const zones = [];
          for (const r of document.querySelectorAll('input[name=gs-product]')) {
            r.click();
            zones.push({value: r.value,
                        shown: Object.keys(window.geosoilMap.prescriptions).filter(
                          k => window.geosoilMap.map.hasLayer(
                            window.geosoilMap.prescriptions[k].group))});
          }
          return {out, zones};
        })()""")
    assert [o["value"] for o in got["out"]] == ["esp", "ph", "ca_sat", "esp_sd", ""]
    for o in got["out"]:
        assert o["images"] == (1 if o["value"] else 0)
        assert o["legends"] == ([o["value"]] if o["value"] else [])
    assert got["zones"] == [
        {"value": "gypsum " + HOSTILE_FLAG_IMG, "shown": ["gypsum " + HOSTILE_FLAG_IMG]},
        {"value": "lime", "shown": ["lime"]},
        {"value": "", "shown": []},
    ]
    map_page.evaluate("window.geosoilMap.show({surface: 'esp', product: 'lime', fill: false})")


@pytest.mark.browser
def test_browser_zones_as_outlines_or_filled_with_the_rate_legend(map_page) -> None:
    got = map_page.evaluate(
        """(() => {
          const g = window.geosoilMap, out = {};
          g.show({product: 'lime', fill: false});
          const zoneFills = () => {
            const fills = [];
            g.prescriptions['lime'].shapes.eachLayer(l => fills.push(
              [l.options.fillOpacity, l.options.fillColor || null, l.options.dashArray]));
            return fills;
          };
          out.outline = zoneFills();
          out.outlineLegend = document.querySelector('#gs-legend [data-product]').innerText;
          document.querySelector('input[data-key=fill]').click();
          out.filled = zoneFills();
          out.swatches = Array.from(document.querySelectorAll(
            '#gs-legend [data-product] .gs-swatch')).map(e => getComputedStyle(e).backgroundColor);
          out.labels = Array.from(document.querySelectorAll(
            '#gs-legend [data-product] .gs-class-label')).map(e => e.textContent);
          document.querySelector('input[data-key=fill]').click();
          return out;
        })()""")
    assert all(f[0] == 0 and f[2] == "6 4" for f in got["outline"])  # see-through, dashed
    assert "labelled with its rate" in got["outlineLegend"]
    assert got["labels"] == ["2,000"]
    (r, g_, b), = [tuple(int(v) for v in re.findall(r"\d+", c)[:3]) for c in got["swatches"]]
    assert all(f[0] == 1 and hex_to_rgb(f[1]) == (r, g_, b) for f in got["filled"])


@pytest.mark.browser
def test_browser_zone_popup_gives_acres_beside_lb_ac(browser, tmp_path) -> None:
    """Opened in the browser, a lime zone's popup reads its rate in lb/ac and its area in
    acres (2.4710538 ac a ha, NIST SP 811), an exclusion's area in acres too."""
    parts = farm()
    path = tmp_path / "map.html"
    path.write_text(build(rate_unit="lb/ac"), encoding="utf-8")
    page = _open(browser, path)
    try:
        got = page.evaluate(
            """(() => {
              const g = window.geosoilMap;
              g.show({product: 'lime'});
              const texts = [];
              g.prescriptions['lime'].shapes.eachLayer(l => {
                l.openPopup(l.getBounds().getCenter());
                texts.push(l.getPopup().getElement().innerText);
                l.closePopup();
              });
              return texts;
            })()""")
    finally:
        page.close()
    north = float(parts["zones"][parts["zones"]["product"] == "lime"]["area_ha"].iloc[0])
    assert any(f"Area\t{north * 2.4710538:,.2f} ac" in t and "Rate (lb/ac)" in t
               for t in got), got
    assert not any(" ha" in t for t in got)


def test_browser_hostile_text_shows_as_text_and_never_runs(map_page) -> None:
    popups = map_page.evaluate(
        """(() => {
          const texts = [];
          for (const m of window.geosoilMap.markers) {
            m.openPopup();
            const el = m.getPopup().getElement().querySelector('.leaflet-popup-content');
            texts.push({text: el.innerText, imgs: el.querySelectorAll('img').length,
                        scripts: el.querySelectorAll('script').length});
            m.closePopup();
          }
          return texts;
        })()"""
    )
    assert len(popups) == 12
    assert all(p["imgs"] == 0 and p["scripts"] == 0 for p in popups)
    texts = [p["text"] for p in popups]
    for raw in (HOSTILE_IMG, HOSTILE_SCRIPT, HOSTILE_TEMPLATE, HOSTILE_FLAG_IMG,
                HOSTILE_FLAG_TEMPLATE):
        assert any("Sample " + raw in t for t in texts), raw
    assert any(HOSTILE_QUOTES in t for t in texts)
    assert any("note " + HOSTILE_SCRIPT in t for t in texts)  # a hostile column name
    assert "42" not in next(t for t in texts if "Sample " + HOSTILE_TEMPLATE in t)
    assert any("EC 1:5 (dS/m)" in t and "Flags" in t and "sodic" in t for t in texts)
    labels = map_page.evaluate(
        "Array.from(document.querySelectorAll('.gs-paddock-label')).map(e => e.innerText)"
    )
    assert sorted(labels) == sorted(["North " + HOSTILE_IMG, "South " + HOSTILE_SCRIPT])
    checks = map_page.evaluate(
        """({pwned: typeof window.__pwned, title: document.title,
             heading: document.querySelector('#geosoil-title .gs-title-text').innerText,
             strayImgs: document.querySelectorAll('img:not(.leaflet-image-layer)').length})"""
    )
    assert checks == {"pwned": "undefined", "title": "Test farm " + HOSTILE_SCRIPT,
                      "heading": "Test farm " + HOSTILE_SCRIPT, "strayImgs": 0}
    assert map_page.dialogs == []
    assert map_page.console_errors == []


_POPUP_CLEAR = f"""(async () => {{
  const api = window.geosoilMap;
  const rect = {_RECT};
  // the sample nearest the top-right corner: where the layer panel sits
  const size = api.map.getSize();
  let best = null, bestD = Infinity;
  for (const m of api.markers) {{
    const p = api.map.latLngToContainerPoint(m.getLatLng());
    const d = Math.hypot(size.x - p.x, p.y);
    if (d < bestD) {{ bestD = d; best = m; }}
  }}
  best.openPopup();
  await new Promise(r => setTimeout(r, 400));  // the map pans the popup clear
  const popup = rect(best.getPopup().getElement());
  const out = {{popup: popup, view: {{left: 0, top: 0, right: innerWidth, bottom: innerHeight}},
               boxes: {{}}}};
  for (const id of ['gs-panel', 'gs-legend', 'geosoil-title']) {{
    out.boxes[id] = rect(document.getElementById(id));
  }}
  return out;
}})()"""


def _check_popup_clear(got: dict) -> None:
    popup, view = got["popup"], got["view"]
    assert popup["width"] > 100 and popup["height"] > 60
    assert popup["left"] >= view["left"] and popup["right"] <= view["right"]
    assert popup["top"] >= view["top"] and popup["bottom"] <= view["bottom"]
    for name, rect in got["boxes"].items():
        assert not _rect_overlap(popup, rect), (name, popup, rect)


@pytest.mark.browser
def test_browser_popups_are_not_hidden_by_the_panel(browser, map_path) -> None:
    page = _open(browser, map_path)
    try:
        _check_popup_clear(page.evaluate(_POPUP_CLEAR))
        page.screenshot(artifact_path("webmap-desktop-popup.png"))
    finally:
        page.close()


@pytest.mark.browser
def test_browser_phone_size_panel_and_legend_fold_away(browser) -> None:
    page = _open(browser, _phone_map(), width=390, height=844)
    try:
        first = page.evaluate(
            f"""({{panel: document.getElementById('gs-panel').className,
                 legend: document.getElementById('gs-legend').className,
                 panelRect: {_RECT}(document.getElementById('gs-panel')),
                 legendRect: {_RECT}(document.getElementById('gs-legend'))}})""")
        assert "gs-collapsed" in first["panel"] and "gs-collapsed" in first["legend"]
        for box in (first["panelRect"], first["legendRect"]):
            assert box["width"] * box["height"] < 0.05 * 390 * 844  # small buttons
        page.screenshot(artifact_path("webmap-phone.png"))
        opened = page.evaluate(
            f"""(() => {{
              document.querySelector('#gs-panel .gs-toggle').click();
              document.querySelector('#gs-legend .gs-toggle').click();
              return {{panel: {_RECT}(document.getElementById('gs-panel')),
                      legend: {_RECT}(document.getElementById('gs-legend')),
                      radios: document.querySelectorAll('#gs-panel input').length}};
            }})()""")
        for box in (opened["panel"], opened["legend"]):
            assert box["left"] >= 0 and box["right"] <= 390 and box["bottom"] <= 844
        assert opened["radios"] >= 8
        page.screenshot(artifact_path("webmap-phone-open.png"))
        # Tapping a choice works; opening a sample's popup folds the panel and legend away.
        page.evaluate("document.querySelector('input[name=gs-surface][value=ph]').click()")
        assert page.evaluate("window.geosoilMap.state.surface") == "ph"
        got = page.evaluate(_POPUP_CLEAR)
        _check_popup_clear(got)
        page.screenshot(artifact_path("webmap-phone-popup.png"))
        assert page.console_errors == [] and page.dialogs == []
    finally:
        page.close()


def _phone_map():
    import tempfile
    from pathlib import Path

    folder = Path(tempfile.mkdtemp(prefix="geosoil-phone-"))
    path = folder / "map.html"
    path.write_text(build(hostile=True), encoding="utf-8")
    return path


@pytest.mark.browser
def test_browser_where_am_i_uses_the_device_location(browser, map_path) -> None:
    page = _open(browser, map_path)
    try:
        to_ll = pyproj.Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
        lon, lat = to_ll.transform(X0 + 300, Y0 + 300)
        page.browser.call("Browser.grantPermissions", {"permissions": ["geolocation"]})
        page.call("Emulation.setGeolocationOverride",
                  {"latitude": lat, "longitude": lon, "accuracy": 8})
        got = page.evaluate(
            """(async () => {
              document.querySelector('.gs-locate a').click();
              for (let i = 0; i < 50; i++) {
                let n = 0, at = null;
                window.geosoilMap.map.eachLayer(l => {
                  if (l instanceof L.CircleMarker && l.options.fillColor === '#0b63ce') {
                    n++; at = l.getLatLng();
                  }
                });
                if (n) { return {n: n, lat: at.lat, lon: at.lng}; }
                await new Promise(r => setTimeout(r, 100));
              }
              return {n: 0, status: document.querySelector('.gs-status').textContent};
            })()""")
        assert got["n"] == 1, got
        assert abs(got["lat"] - lat) < 1e-6 and abs(got["lon"] - lon) < 1e-6
        remote = [u for u in page.requests if not u.startswith(("file:", "data:"))]
        assert remote == [] and page.console_errors == []
    finally:
        page.browser.call("Browser.resetPermissions")  # the session's browser is shared
        page.close()


@pytest.mark.browser
def test_browser_background_tiles_fail_quietly_offline(browser, tmp_path) -> None:
    path = tmp_path / "tiles.html"
    path.write_text(build(background_tiles=True), encoding="utf-8")
    tab = _open(browser, path)
    try:
        tab.evaluate("window.geosoilMap.show({tiles: true})")
        browser.drain(0.5)
        tiles = [u for u in tab.requests if u.startswith("https://tile.openstreetmap.org/")]
        assert tiles  # it tried, and the cut-off network refused
        others = [u for u in tab.requests if not u.startswith(("file:", "data:", "https://tile."))]
        assert others == []
        assert all("tile.openstreetmap.org" in e for e in tab.console_errors), tab.console_errors
        assert tab.evaluate("document.querySelectorAll('img.leaflet-image-layer').length") == 1
    finally:
        tab.close()
