"""Tests for geosoil.outputs: the output folder's files that are not covered end to end."""

from __future__ import annotations

import warnings
import xml.etree.ElementTree as ET
from pathlib import Path
from types import SimpleNamespace

import geopandas as gpd
import numpy as np
import pytest
import shapely

from geosoil.errors import RateWarning
from geosoil.isoxml import MAX_DESIGNATOR
from geosoil.outputs import _IsoNames, _map_notes, _write_isoxml

CRS = "EPSG:32755"


def _farm(paddock: shapely.Polygon, *, split_into: str, label: str,
          zones: gpd.GeoDataFrame | None = None) -> SimpleNamespace:
    """The few parts of a FarmResult that the task-data writer reads."""
    settings = SimpleNamespace(
        farm="Test farm", grid=SimpleNamespace(cell_size_m=10.0),
        spreader=SimpleNamespace(split_into=split_into),
    )
    prep = SimpleNamespace(
        paddocks=gpd.GeoDataFrame({"paddock": ["Home"]}, geometry=[paddock], crs=CRS),
        products={"lime": SimpleNamespace(label=label)}, product_files={"lime": "lime"},
        project=SimpleNamespace(settings=settings), grids={"Home": None},
        exclusions=gpd.GeoDataFrame({"exclusion": [], "kind": []}, geometry=[], crs=CRS),
    )
    zones = _zones(paddock) if zones is None else zones
    paddocks = {"Home": SimpleNamespace(rates=SimpleNamespace(product_rates={"lime": None}),
                                        zones=zones)}
    return SimpleNamespace(prep=prep, paddocks=paddocks)


def _write(folder: Path, zones: gpd.GeoDataFrame, farm: SimpleNamespace) -> list[Path]:
    return _write_isoxml(folder, zones, farm=farm, paddock="Home", product="lime",
                         names=_IsoNames(farm), tasks=[], partfields={})


def _zones(paddock: shapely.Polygon) -> gpd.GeoDataFrame:
    """Three zones side by side: 1 pass of 900, 2 passes of 800, 3 passes of 700 kg/ha."""
    x0, y0, x1, y1 = paddock.bounds
    third = (x1 - x0) / 3
    geoms = [shapely.box(x0 + i * third, y0, x0 + (i + 1) * third, y1) for i in range(3)]
    return gpd.GeoDataFrame(
        {"paddock": "Home", "product": "lime", "zone": [1, 2, 3], "kind": "rate",
         "rate_kg_ha": [900.0, 1600.0, 2100.0], "passes": [1, 2, 3],
         "per_pass_kg_ha": [900.0, 800.0, 700.0]},
        geometry=geoms, crs=CRS,
    )


def _grid_values(task_folder: Path) -> tuple[ET.Element, set[int]]:
    root = ET.parse(task_folder / "TASKDATA" / "TASKDATA.XML").getroot()
    data = (task_folder / "TASKDATA" / "GRD00001.bin").read_bytes()
    return root, set(np.frombuffer(data, dtype="<i4").tolist())


@pytest.mark.parametrize("split_into, word", [("passes", "pass"), ("seasons", "season")])
def test_each_pass_task_holds_the_per_pass_rate_without_a_several_passes_warning(
    tmp_path: Path, split_into: str, word: str
) -> None:
    paddock = shapely.box(500000, 6000000, 500300, 6000100)
    label = "agricultural lime (calcite) from the north quarry"  # longer than 32 characters
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        written = _write(tmp_path, _zones(paddock), _farm(
            paddock, split_into=split_into, label=label))
    # Each task is one pass: nothing in it "needs several passes" (a false alarm before).
    assert not [w for w in caught if issubclass(w.category, RateWarning)]
    assert len(written) == 6  # XML and grid for each of 3 passes
    names = []
    # 1 kg/ha = 100 mg/m2 (docs/SOURCES.md [derived]); cells outside the paddock hold 0.
    expected = {1: {0, 90000, 80000, 70000}, 2: {0, 80000, 70000}, 3: {0, 70000}}
    for k in (1, 2, 3):
        root, values = _grid_values(tmp_path / f"lime_{word}{k}_isoxml")
        assert values == expected[k]
        name = root.find("PDT").get("B")
        assert name.startswith(f"{word} {k}/3 ") and len(name) <= MAX_DESIGNATOR
        names.append(name)
    assert len(set(names)) == 3  # the terminal tells the passes apart


def test_one_pass_zones_write_one_task_named_by_the_product(tmp_path: Path) -> None:
    paddock = shapely.box(500000, 6000000, 500300, 6000100)
    zones = _zones(paddock).assign(passes=1, per_pass_kg_ha=lambda z: z["rate_kg_ha"])
    with warnings.catch_warnings():
        warnings.simplefilter("error", RateWarning)
        _write(tmp_path, zones, _farm(paddock, split_into="passes", label="Lime", zones=zones))
    root, values = _grid_values(tmp_path / "lime_isoxml")
    assert root.find("PDT").get("B") == "Lime"
    assert values == {0, 90000, 160000, 210000}


def _rated(contributions: dict) -> SimpleNamespace:
    return SimpleNamespace(paddocks={"Home": SimpleNamespace(
        rates=SimpleNamespace(contributions=contributions))})


def test_map_notes_say_rates_are_advisory_and_name_a_contested_rule_that_added_product() -> None:
    cells = np.array([[0.0, 250.0], [np.nan, 0.0]])
    none = np.array([[0.0, 0.0], [np.nan, 0.0]])
    plain = _map_notes(_rated({("gypsum", "gypsum"): cells, ("balance", "gypsum"): none}))
    assert len(plain) == 1 and "advisory" in plain[0]  # the balance rule added nothing
    notes = _map_notes(_rated({("gypsum", "gypsum"): cells, ("balance", "gypsum"): cells,
                               ("balance", "dolomite"): none}))
    assert len(notes) == 2
    # Kopittke & Menzies 2007 (docs/SOURCES.md): cation balance targets are contested
    assert "CONTESTED" in notes[1] and "Kopittke & Menzies 2007" in notes[1]
    assert "gypsum" in notes[1] and "dolomite" not in notes[1]
