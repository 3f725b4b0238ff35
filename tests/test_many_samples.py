"""A farm with many samples: the report and the map draw a bounded number of them, say how
many of how many and where every sample is, and nothing the user gave is lost.

The limits (report.REPORT_MAX_SAMPLE_DOTS, webmap.MAP_MAX_SAMPLES) are lowered here so that
a few hundred invented samples stand for hundreds of thousands. The full table is read back
with pandas and pyogrio (GDAL), readers outside geosoil.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely

from geosoil import report, webmap
from geosoil.job import run
from geosoil.project import load_project
from tests.small_farm import HEADER, UTM, X0, Y0

N_SIDE = 20  # 400 samples on a 20 x 20 grid over one 400 m x 300 m paddock


def _many(folder: Path) -> Path:
    folder.mkdir(parents=True)
    gpd.GeoDataFrame({"name": ["Home"]}, geometry=[shapely.box(X0, Y0, X0 + 400, Y0 + 300)],
                     crs=UTM).to_file(folder / "paddocks.gpkg")
    rows = []
    for i in range(N_SIDE * N_SIDE):
        r, c = divmod(i, N_SIDE)
        x, y = X0 + 10 + c * 19.0, Y0 + 8 + r * 14.5
        rows.append(f"M{i:04d},{x:.1f},{y:.1f},{5.0 + (i % 17) / 10:.1f},{6 + (i % 11) / 5:.2f},"
                    f"2.1,0.5,{0.3 + (i % 7) / 8:.2f},0.2")
    (folder / "lab.csv").write_text(HEADER + "\n" + "\n".join(rows) + "\n")
    (folder / "geosoil.toml").write_text(
        f'[samples]\nfile = "lab.csv"\ncrs = "{UTM}"\n\n[boundaries]\npaddocks = "paddocks.gpkg"'
        # inverse-distance weighting: the test is about what is drawn, not the kriging
        "\n\n[interpolation]\nmin_samples_kriging = 1000\n\n[grid]\ncell_size_m = 20\n"
        f'\n[output]\ncache_dir = "{(folder.parent / "cache").as_posix()}"\n')
    return folder


def _map_data(page: str) -> dict:
    m = re.search(r'<script type="application/json" id="geosoil-data">(.*?)</script>', page,
                  re.S)
    assert m, "the map's data block"
    return json.loads(m.group(1))


@pytest.fixture(scope="module")
def bounded_run(tmp_path_factory: pytest.TempPathFactory) -> Path:
    tmp = tmp_path_factory.mktemp("many")
    project = _many(tmp / "farm")
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(report, "REPORT_MAX_SAMPLE_DOTS", 40)
        mp.setattr(webmap, "MAP_MAX_SAMPLES", 60)
        run(load_project(project), out_dir=tmp / "out")
    return tmp / "out"


def test_every_sample_stays_in_the_tables(bounded_run: Path) -> None:
    csv = pd.read_csv(bounded_run / "samples.csv")
    gpkg = pyogrio.read_dataframe(bounded_run / "farm.gpkg", layer="samples")
    want = {f"M{i:04d}" for i in range(N_SIDE * N_SIDE)}
    assert set(csv["sample_id"]) == want and set(gpkg["sample_id"]) == want


def test_the_report_draws_the_limit_and_says_where_the_rest_are(bounded_run: Path) -> None:
    page = (bounded_run / "report.html").read_text(encoding="utf-8")
    maps = page.split('class="soil-map-figure"')[1:]
    assert maps, "soil maps"
    for m in maps:
        assert m.split("</figure>")[0].count('class="sample"') == 40
    text = re.sub(r"\s+", " ", page)
    assert "40 of the 400 samples are drawn on each map" in text
    assert "Every sample, with its values, is in samples.csv and farm.gpkg (layer samples)" \
        in text


def test_the_map_carries_the_limit_and_says_where_the_rest_are(bounded_run: Path) -> None:
    samples = _map_data((bounded_run / "map.html").read_text(encoding="utf-8"))["samples"]
    assert samples["n"] == 400 and len(samples["id"]) == 60
    assert samples["source"] == "samples.csv and farm.gpkg (layer samples)"
    # each sample drawn is one of the file's, at its place with its own values
    lab = pd.read_csv(bounded_run.parent / "farm" / "lab.csv").set_index("Sample")
    rows = webmap.sample_rows(samples)
    ph = [f[0] for f in samples["fields"]].index("pH (CaCl2)")
    for lat, lon, sid, _pad, values, _flags, _planned in rows[::7]:
        x, y = gpd.GeoSeries(gpd.points_from_xy([lon], [lat]), crs=4326).to_crs(UTM).iloc[0].xy
        assert abs(x[0] - lab.loc[sid, "Easting"]) < 0.2
        assert abs(y[0] - lab.loc[sid, "Northing"]) < 0.2
        assert float(values[ph]) == lab.loc[sid, "pH (CaCl2)"]


def _points(n: int, planned: int = 0) -> gpd.GeoDataFrame:
    rng = np.random.default_rng(3)
    x = X0 + rng.uniform(0, 400, n)
    y = Y0 + rng.uniform(0, 300, n)
    return gpd.GeoDataFrame(
        {"sample_id": [f"S{i}" for i in range(n)], "paddock": "Home",
         "ph": np.round(rng.uniform(4.5, 7, n), 1), "planned": np.arange(n) < planned},
        geometry=gpd.points_from_xy(x, y), crs=UTM)


def test_the_map_keeps_every_planned_point_and_spreads_the_rest() -> None:
    pts = _points(1_000, planned=5)
    data = webmap._samples_json(pts.to_crs(4326), [webmap.SampleField("ph", "pH")], most=100,
                                source="here")
    rows = webmap.sample_rows(data)
    assert data["n"] == 1_000 and len(rows) == 100
    assert sorted(r[2] for r in rows if r[6]) == [f"S{i}" for i in range(5)]
    # spread: every quarter of the paddock has some of the points drawn
    drawn = pts.set_index("sample_id").loc[[r[2] for r in rows]]
    qx = drawn.geometry.x > X0 + 200
    qy = drawn.geometry.y > Y0 + 150
    assert all(((qx == a) & (qy == b)).sum() >= 15 for a in (True, False) for b in (True, False))
    # under the limit, all are carried
    assert len(webmap._samples_json(pts, [], most=1_000)["id"]) == 1_000


def test_a_report_under_the_limit_draws_every_sample_and_says_nothing_left_out() -> None:
    pts = _points(30)
    assert report.sample_dots(pts, 40).tolist() == list(range(30))
    picked = report.sample_dots(pts, 10)
    assert len(picked) == 10 and len(set(picked.tolist())) == 10
    assert report.sample_dots(pts, 10).tolist() == picked.tolist()  # the same each call
