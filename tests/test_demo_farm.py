"""The invented demo farm holds the scenario its README describes.

These are checks of the invented data (demo_farm/), not of geosoil's chemistry:
the lab units are converted here by hand with derived factors so the checks do
not depend on the modules that will read the lab file.
"""

from __future__ import annotations

import csv
import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from geosoil.demo_farm.make_demo_farm import WORKING_CRS, make_demo_farm

from geosoil import demo_farm
from geosoil.boundaries import BoundarySettings, read_exclusions, read_paddocks, read_user_zones
from geosoil.errors import DataWarning

FOLDER = Path(demo_farm.__file__).parent
DATA_FILES = (
    "paddocks.geojson",
    "creek.geojson",
    "exclusions.geojson",
    "zones_windmill.geojson",
    "lab_results.csv",
)
GRID_PADDOCKS = ("Red Hill", "Creek Flat")
ZONED_PADDOCK = "Windmill"

# [derived] mg/kg per cmol(+)/kg = 10 x atomic weight / charge; Mg 24.305 (IUPAC) -> 121.525
MG_MG_KG_PER_CMOL = 121.525
# [derived] Na is monovalent: 1 cmol(+)/kg = 10 mmol/kg
NA_MMOL_KG_PER_CMOL = 10.0


@pytest.fixture(scope="module")
def settings() -> BoundarySettings:
    return BoundarySettings(
        paddocks=FOLDER / "paddocks.geojson",
        exclusions=FOLDER / "exclusions.geojson",
        creeks=FOLDER / "creek.geojson",
        zones=FOLDER / "zones_windmill.geojson",
    )


@pytest.fixture(scope="module")
def paddocks(settings) -> gpd.GeoDataFrame:
    with warnings.catch_warnings():
        warnings.simplefilter("error", DataWarning)  # the demo must read cleanly
        return read_paddocks(settings).to_crs(WORKING_CRS).set_index("paddock")


@pytest.fixture(scope="module")
def lab() -> pd.DataFrame:
    return pd.read_csv(FOLDER / "lab_results.csv", dtype=str, keep_default_na=False,
                       encoding="utf-8")


@pytest.fixture(scope="module")
def samples(lab, paddocks) -> gpd.GeoDataFrame:
    """Lab rows as points in metres, with cmol(+)/kg amounts and the paddock they fall in."""
    def num(column: str) -> pd.Series:
        return pd.to_numeric(lab[column])

    out = gpd.GeoDataFrame(
        {
            "id": lab["Sample ID"],
            "ph": num("pH (CaCl2)"),
            "ca": num("Exch Ca (meq/100g)"),  # 1 meq/100 g = 1 cmol(+)/kg [derived]
            "mg": num("Mg mg/kg") / MG_MG_KG_PER_CMOL,
            "k": num("K (cmol(+)/kg)"),
            "na": num("Exch. Na (mmol/kg)") / NA_MMOL_KG_PER_CMOL,
            "al": pd.to_numeric(lab["Exch Al (meq/100g)"].str.replace("<", "", regex=False)),
            "al_censored": lab["Exch Al (meq/100g)"].str.startswith("<"),
            "acidity": num("Exch. Acidity (meq/100g)"),
            "ecec": num("ECEC (cmol(+)/kg)"),
        },
        geometry=gpd.points_from_xy(num("Longitude"), num("Latitude")),
        crs="EPSG:4326",
    ).to_crs(WORKING_CRS)
    joined = gpd.sjoin(out, paddocks.reset_index(), predicate="within", how="left")
    assert joined.index.is_unique, "a sample falls in two paddocks"
    out["paddock"] = joined["paddock"]
    out["esp"] = 100.0 * out["na"] / out["ecec"]
    out["ca_mg"] = out["ca"] / out["mg"]
    return out


# --------------------------------------------------------------------------- files


def test_generator_is_deterministic_and_committed_files_are_current(tmp_path):
    first = make_demo_farm(tmp_path / "a")
    second = make_demo_farm(tmp_path / "b")
    for name in DATA_FILES:
        generated = first[name].read_bytes()
        assert generated == second[name].read_bytes(), f"{name} differs between runs"
        assert generated == (FOLDER / name).read_bytes(), (
            f"demo_farm/{name} is out of date: run python demo_farm/make_demo_farm.py"
        )


def test_files_are_small_and_geojson_is_rfc7946(lab):
    total = sum((FOLDER / name).stat().st_size for name in DATA_FILES)
    assert total < 1_000_000
    assert len(lab) <= 300
    for name in DATA_FILES:
        if name.endswith(".geojson"):
            text = (FOLDER / name).read_text(encoding="utf-8")
            assert '"crs"' not in text  # RFC 7946 section 4: no crs member
            frame = gpd.read_file(FOLDER / name)
            assert frame.crs.to_epsg() == 4326
            # RFC 7946 section 3.1.6: outer rings anticlockwise, holes clockwise
            for geom in frame.geometry:
                for poly in shapely.get_parts(geom):
                    if poly.geom_type == "Polygon":
                        assert poly.exterior.is_ccw
                        assert all(not ring.is_ccw for ring in poly.interiors)


def test_lab_file_mixes_header_spellings_and_units():
    with (FOLDER / "lab_results.csv").open(encoding="utf-8", newline="") as f:
        header = next(csv.reader(f))
    for expected in ("Sample ID", "Latitude", "Longitude", "pH (CaCl2)", "Exch Ca (meq/100g)",
                     "Mg mg/kg", "K (cmol(+)/kg)", "Exch. Na (mmol/kg)", "Exch Al (meq/100g)",
                     "Exch. Acidity (meq/100g)", "ECEC (cmol(+)/kg)", "Comments"):
        assert expected in header


def test_reported_ecec_is_the_sum_of_the_reported_cations(samples):
    # [derived] ECEC = Ca + Mg + K + Na + exchangeable acidity; each value is rounded by the lab
    parts = samples[["ca", "mg", "k", "na", "acidity"]].sum(axis=1)
    assert np.all(np.abs(parts - samples["ecec"]) <= 0.1)


# --------------------------------------------------------------------------- boundaries


def test_three_paddocks_of_the_described_sizes(paddocks):
    area_ha = paddocks.geometry.area / 1e4
    assert list(paddocks.index) == ["Red Hill", "Creek Flat", "Windmill"]
    assert 40 <= area_ha["Red Hill"] <= 80
    assert 25 <= area_ha["Creek Flat"] <= 50
    assert 15 <= area_ha["Windmill"] <= 30


def test_red_hill_has_a_dam_hole_and_creek_flat_is_in_two_parts(paddocks):
    red_hill = paddocks.geometry["Red Hill"]
    assert red_hill.geom_type == "Polygon" and len(red_hill.interiors) == 1
    dam = shapely.Polygon(red_hill.interiors[0])
    assert 0.1e4 < dam.area < 2e4  # a farm dam of a fraction of a hectare
    creek_flat = paddocks.geometry["Creek Flat"]
    assert creek_flat.geom_type == "MultiPolygon" and len(creek_flat.geoms) == 2


def test_the_creek_runs_between_the_two_parts_and_its_buffer_cuts_both(settings, paddocks):
    creek = gpd.read_file(settings.creeks).to_crs(WORKING_CRS)
    assert creek.geometry[0].geom_type == "LineString"
    exclusions = read_exclusions(settings, crs=WORKING_CRS)
    buffer = exclusions.loc[exclusions["kind"] == "creek buffer"].geometry.union_all()
    for part in paddocks.geometry["Creek Flat"].geoms:
        assert part.intersection(buffer).area > 1000.0  # m2 of each part left untreated


def test_windmill_zones_cover_the_paddock(settings, paddocks):
    zones = read_user_zones(settings.zones, crs=WORKING_CRS)
    assert 3 <= len(zones) <= 5
    windmill = paddocks.geometry[ZONED_PADDOCK]
    union = zones.geometry.union_all()
    assert union.symmetric_difference(windmill).area < 1e-3 * windmill.area
    assert zones.geometry.area.sum() == pytest.approx(windmill.area, rel=1e-3)


# --------------------------------------------------------------------------- samples


def test_samples_are_distinct_and_inside_the_treated_area(samples, settings):
    assert samples["id"].is_unique
    assert not samples.geometry.duplicated().any()
    assert samples["paddock"].notna().all(), "every sample lies inside a paddock"
    untreated = read_exclusions(settings, crs=WORKING_CRS).geometry.union_all()
    assert not samples.geometry.intersects(untreated).any()


def test_grid_paddocks_have_about_one_sample_per_hectare(samples, paddocks):
    for name in GRID_PADDOCKS:
        n = int((samples["paddock"] == name).sum())
        area_ha = paddocks.geometry[name].area / 1e4
        assert 0.7 <= n / area_ha <= 1.3, (name, n, area_ha)


def test_zoned_paddock_has_one_composite_per_zone(samples, settings):
    zones = read_user_zones(settings.zones, crs=WORKING_CRS)
    here = samples.loc[samples["paddock"] == ZONED_PADDOCK]
    joined = gpd.sjoin(here, zones, predicate="within")
    assert sorted(joined["zone"]) == sorted(zones["zone"])


# --------------------------------------------------------------------------- chemistry


def test_exchangeable_values_are_in_a_realistic_range(samples):
    assert samples["ecec"].between(5, 30).all()
    for cation in ("ca", "mg", "k", "na", "acidity"):
        assert (samples[cation] >= 0).all()
    assert samples["ph"].between(3.8, 8.5).all()


def test_a_strongly_sodic_patch_in_creek_flat(samples):
    # ESP >= 15: strongly sodic (Northcote & Skene 1972; Isbell 1996); ESP >= 6 sodic
    assert 15 <= samples["esp"].max() <= 25
    sodic = samples.loc[samples["esp"] >= 6]
    assert len(sodic) >= 5
    assert set(sodic["paddock"]) == {"Creek Flat"}


def test_an_acid_patch_on_red_hill_with_high_aluminium(samples):
    acid = samples.loc[samples["ph"] <= 4.8]
    assert len(acid) >= 3 and samples["ph"].min() >= 4.2
    assert set(acid["paddock"]) == {"Red Hill"}
    rest = samples.loc[samples["ph"] > 5.2]
    # Al and acidity are high where pH is low: uncensored Al in every acid sample and
    # acidity many times that of the less acid soils
    assert not acid["al_censored"].any()
    assert (100 * acid["al"] / acid["ecec"]).max() >= 15
    assert acid["acidity"].median() > 5 * rest["acidity"].median()


def test_a_magnesium_rich_area(samples):
    low = samples.loc[samples["ca_mg"] < 2]
    assert len(low) >= 3
    assert "Creek Flat" in set(low["paddock"])
    assert "WM-Z3" in set(low["id"])  # the grey-clay zone of Windmill, as the README says


@pytest.mark.parametrize("variable", ["ecec", "ph", "esp", "ca_mg"])
def test_values_have_spatial_structure(samples, variable):
    """Near samples are more alike than far ones: the semivariance grows with distance."""
    grid = samples.loc[samples["paddock"].isin(GRID_PADDOCKS)]
    xy = np.column_stack([grid.geometry.x, grid.geometry.y])
    v = grid[variable].to_numpy()
    d = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    half_sq = 0.5 * (v[:, None] - v[None, :]) ** 2
    upper = np.triu(np.ones_like(d, dtype=bool), k=1)
    near = half_sq[upper & (d < 160)].mean()
    far = half_sq[upper & (d > 500)].mean()
    assert near < 0.6 * far
