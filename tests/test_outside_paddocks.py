"""Exclusions and user zones that lie outside every paddock are said, with the area outside.

The farm is invented (tests/small_farm.py: one 400 m x 300 m box paddock); the areas are
hand arithmetic on its boxes.
"""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import shapely
from click.testing import CliRunner
from geosoil.cli.main import cli

from geosoil import job
from geosoil.project import load_project
from tests.small_farm import UTM, X0, Y0, make_project


def _farm(tmp_path: Path) -> Path:
    folder = tmp_path / "farm"
    folder.mkdir()
    gpd.GeoDataFrame(
        {"name": ["Dam", "Windmill and trough"]},
        # the dam inside the paddock; the windmill 600 m east of it: 50 m x 40 m = 0.20 ha
        geometry=[shapely.box(X0 + 10, Y0 + 10, X0 + 40, Y0 + 40),
                  shapely.box(X0 + 1000, Y0 + 100, X0 + 1050, Y0 + 140)], crs=UTM,
    ).to_file(folder / "exclusions.gpkg")
    gpd.GeoDataFrame(
        {"zone": ["West", "East", "Edge"]},
        geometry=[
            shapely.box(X0, Y0, X0 + 200, Y0 + 300),              # inside
            # 200 m inside and 60 m beyond the east edge: 60 x 150 m = 0.90 ha outside of
            # 260 x 150 m = 3.90 ha, 23 %
            shapely.box(X0 + 200, Y0, X0 + 460, Y0 + 150),
            # 0.2 m over the edge along 150 m: 30 m2, a digitising sliver, not said
            shapely.box(X0 + 200, Y0 + 150, X0 + 400.2, Y0 + 300),
        ], crs=UTM,
    ).to_file(folder / "zones.gpkg")
    return make_project(folder, extra='exclusions = "exclusions.gpkg"\nzones = "zones.gpkg"\n'
                        'zone_id_column = "zone"')


WINDMILL = "exclusion 'Windmill and trough' (0.20 ha) lies outside every paddock"
EAST = "zone 'East' (3.90 ha) has 0.90 ha (23%) outside every paddock"


def test_check_names_an_exclusion_and_a_zone_outside_every_paddock(tmp_path: Path) -> None:
    # user trial: a windmill's exclusion stayed after its paddock was removed, and 1.5 ha
    # of two zones were clipped off, without a word
    result = CliRunner().invoke(cli, ["check", str(_farm(tmp_path))])
    assert result.exit_code == 0, result.stderr
    assert WINDMILL in result.stderr and EAST in result.stderr
    assert "'Dam'" not in result.stderr and "zone 'West'" not in result.stderr
    assert "zone 'Edge'" not in result.stderr


def test_a_run_says_it_in_its_summary_and_run_json(tmp_path: Path) -> None:
    project = load_project(_farm(tmp_path))
    result = job.run(project, out_dir=tmp_path / "out")
    record = json.loads((tmp_path / "out" / "run.json").read_text(encoding="utf-8"))
    for where in (result.warnings, record["warnings"]):
        assert sum(WINDMILL in w for w in where) == 1, where
        assert sum(EAST in w for w in where) == 1, where
