"""Benchmark: the interactive map of an invented 5 000 ha farm, built and opened in Chromium.

Run from the repository root (needs Debian's ``chromium``)::

    python benchmarks/bench_map.py [--hectares 5000] [--paddocks 30] [--samples 5000]

It invents a farm (square paddocks on a grid, one sample per hectare, smooth
surfaces on a 10 m grid, five rate zones per paddock and product traced from the
cells as the zoning does, a creek buffer), draws the map with
:func:`geosoil.webmap.build_map` with as many layers as a real run (15 soil
surfaces, 7 kriging errors, 2 per-cell rates), and prints the build time, the
page's size, the time headless Chromium takes to open it (navigation to the
page's map being ready) and to switch surfaces, each as a ratio to its goal (the
map opens "in a few seconds": goal 3 s; size goal 10 MB). A script, not a test:
nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import affine
import geopandas as gpd
import numpy as np
import pyproj
import rasterio.features
from shapely.geometry import LineString, Point, box, shape

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from geosoil import webmap  # noqa: E402
from geosoil.presentation import classes_for  # noqa: E402

GOAL_OPEN_S = 3.0
GOAL_SIZE_MB = 10.0
CRS = pyproj.CRS.from_epsg(32755)
X0, Y0, CELL = 540_000.0, 6_150_000.0, 10.0


def invent(hectares: float, n_paddocks: int, n_samples: int, seed: int = 1) -> dict:
    rng = np.random.default_rng(seed)
    cols = int(np.ceil(np.sqrt(n_paddocks * 1.2)))
    rows = int(np.ceil(n_paddocks / cols))
    side = np.sqrt(hectares * 1e4 / n_paddocks)
    gap = 20.0
    pads = [box(X0 + c * (side + gap), Y0 + r * (side + gap), X0 + c * (side + gap) + side,
                Y0 + r * (side + gap) + side)
            for r in range(rows) for c in range(cols)][:n_paddocks]
    paddocks = gpd.GeoDataFrame({"paddock": [f"Paddock {i + 1}" for i in range(n_paddocks)]},
                                geometry=pads, crs=CRS)
    minx, miny, maxx, maxy = paddocks.total_bounds
    width, height = int(np.ceil((maxx - minx) / CELL)), int(np.ceil((maxy - miny) / CELL))
    transform = affine.Affine(CELL, 0, minx, 0, -CELL, maxy)
    mask = rasterio.features.geometry_mask(pads, out_shape=(height, width), transform=transform,
                                           invert=True)
    yy, xx = np.mgrid[0:height, 0:width] / 100.0
    surfaces = []
    for k in range(24):
        a, b = rng.uniform(0.3, 1.2, 2)
        field = np.sin(a * xx + k) * np.cos(b * yy - k) + 0.3 * np.sin(3 * a * yy)
        field = np.where(mask, field, np.nan)
        surfaces.append(field)
    pts = []
    while len(pts) < n_samples:
        p = pads[len(pts) % n_paddocks]
        x0, y0, x1, y1 = p.bounds
        pts.append(Point(rng.uniform(x0, x1), rng.uniform(y0, y1)))
    samples = gpd.GeoDataFrame({
        "sample_id": [f"S{i:05d}" for i in range(n_samples)],
        "paddock": [f"Paddock {i % n_paddocks + 1}" for i in range(n_samples)],
        "ph": rng.uniform(4.2, 7.5, n_samples).round(1),
        "esp": rng.uniform(1, 25, n_samples).round(1),
        "EC 1:5 (dS/m)": rng.uniform(0.05, 0.6, n_samples).round(2),
        "ca": rng.uniform(2, 15, n_samples).round(2),
        "sodicity": rng.choice(["non-sodic", "sodic", "strongly sodic"], n_samples),
    }, geometry=pts, crs=CRS)
    zone_rows = []
    for product, field in (("gypsum", surfaces[0]), ("lime", surfaces[1])):
        classes = np.digitize(field, np.nanquantile(field, [0.2, 0.4, 0.6, 0.8]))
        classes = np.where(mask, classes + 1, 0).astype("int32")
        for pad, name in zip(pads, paddocks["paddock"], strict=True):
            r0, c0 = ~transform * (pad.bounds[0], pad.bounds[3])
            win = (slice(int(c0), int(c0 + side / CELL)), slice(int(r0), int(r0 + side / CELL)))
            sub = classes[win[0], win[1]]
            sub_t = transform * affine.Affine.translation(int(r0), int(c0))
            for geom, value in rasterio.features.shapes(sub, mask=sub > 0, transform=sub_t):
                poly = shape(geom)
                zone_rows.append(dict(paddock=name, product=product, zone=int(value),
                                      kind="rate", rate_kg_ha=500.0 * (int(value) - 1),
                                      area_ha=poly.area / 1e4, geometry=poly))
    zones = gpd.GeoDataFrame(zone_rows, crs=CRS).dissolve(
        by=["paddock", "product", "zone"], as_index=False, aggfunc="first")
    zones["area_ha"] = zones.geometry.area / 1e4
    creek = LineString([(minx, miny + 0.3 * (maxy - miny)), (maxx, miny + 0.6 * (maxy - miny))])
    exclusions = gpd.GeoDataFrame({"label": ["Long Creek"], "kind": ["creek buffer"],
                                   "paddock": [""], "area_ha": [0.0]},
                                  geometry=[creek.buffer(10)], crs=CRS)
    layers = []
    for k, arr in enumerate(surfaces):
        group = "soil" if k < 15 else ("error" if k < 22 else "rate")
        values = 4 + 2 * arr if k == 1 else 10 + 8 * arr
        kind = "ph" if k == 1 else ("esp" if k == 0 else ("error" if group == "error"
                                                          else "amount"))
        layers.append(webmap.RasterLayer(
            key=f"s{k}", title=f"surface {k}", unit="", array=values, transform=transform,
            crs=CRS, classes=classes_for(kind, values, target=5.5), group=group))
    return dict(paddocks=paddocks, samples=samples, rasters=layers, zones=zones,
                exclusions=exclusions, cells=int(mask.sum()), zone_count=len(zones))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--hectares", type=float, default=5000.0)
    ap.add_argument("--paddocks", type=int, default=30)
    ap.add_argument("--samples", type=int, default=5000)
    args = ap.parse_args()
    t0 = time.perf_counter()
    farm = invent(args.hectares, args.paddocks, args.samples)
    t_invent = time.perf_counter() - t0
    print(f"invented: {args.hectares:g} ha, {args.paddocks} paddocks, {args.samples} samples, "
          f"{farm['cells']:,} cells of {CELL:g} m, {farm['zone_count']} zones, "
          f"{len(farm['rasters'])} layers ({t_invent:.1f} s)")
    t0 = time.perf_counter()
    page = webmap.build_map(title="Invented large farm", paddocks=farm["paddocks"],
                            samples=farm["samples"], rasters=farm["rasters"], zones=farm["zones"],
                            exclusions=farm["exclusions"], rate_unit="t/ha")
    t_build = time.perf_counter() - t0
    size_mb = len(page.encode("utf-8")) / 1e6
    print(f"build_map: {t_build:.1f} s; map.html {size_mb:.1f} MB "
          f"(ratio to the {GOAL_SIZE_MB:g} MB goal: {size_mb / GOAL_SIZE_MB:.2f})")

    from tests.browser import Chromium

    with tempfile.TemporaryDirectory() as tmp, Chromium() as browser:
        path = Path(tmp) / "map.html"
        path.write_text(page, encoding="utf-8")
        opens = []
        for size in ((1280, 900), (390, 844)):
            tab = browser.new_page(width=size[0], height=size[1])
            t0 = time.perf_counter()
            tab.goto(path, timeout=120)
            ready = tab.evaluate("!!(window.geosoilMap && window.geosoilMap.map)")
            t_open = time.perf_counter() - t0
            t0 = time.perf_counter()
            tab.evaluate("""(async () => { const g = window.geosoilMap;
                for (const s of g.data.surfaces.slice(0, 5)) {
                  g.show({surface: s.id}); await g.surfaces[s.id].getElement().decode(); }
                return 1; })()""", timeout=120)
            t_switch = (time.perf_counter() - t0) / 5
            opens.append(t_open)
            print(f"chromium {size[0]}x{size[1]}: opened in {t_open:.2f} s (map ready: {ready}; "
                  f"ratio to the {GOAL_OPEN_S:g} s goal: {t_open / GOAL_OPEN_S:.2f}); "
                  f"switching surface {t_switch:.2f} s; errors: {len(tab.console_errors)}")
            tab.close()


if __name__ == "__main__":
    main()
