"""The explanation of one location: placement, the arithmetic by hand, the pH guard.

The farm is the demo farm as the session's one demo run computed it (``demo_run`` in
``tests/conftest.py``).
"""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from geosoil.errors import InputError
from geosoil.explain import (
    Explanation,
    explain_location,
    format_explanation,
    locate,
    parse_location,
)
from geosoil.pipeline import FarmResult

DEMO = Path(__file__).resolve().parents[1] / "demo_farm"

# IUPAC standard atomic weight of Ca; gypsum CaSO4.2H2O is 23.28 % Ca (docs/SOURCES.md [derived])
CA_ATOMIC_WEIGHT = 40.078
CA_IN_GYPSUM = 0.2328


# --------------------------------------------------------------------------- parsing


@given(st.floats(allow_nan=False, allow_infinity=False),
       st.floats(allow_nan=False, allow_infinity=False), st.sampled_from(["", " ", "  "]))
def test_parse_location_reads_any_two_finite_numbers(a: float, b: float, pad: str) -> None:
    assert parse_location(f"{pad}{a!r}{pad},{pad}{b!r}") == (a, b)


@pytest.mark.parametrize("text", ["147.1", "147.1;-35", "a,b", "1,2,3", "nan,1", "1,inf", ""])
def test_parse_location_rejects_what_is_not_two_finite_numbers(text: str) -> None:
    with pytest.raises(InputError) as err:
        parse_location(text)
    assert "LON,LAT" in str(err.value) or "X,Y" in str(err.value)


# --------------------------------------------------------------------------- on the demo farm


@pytest.fixture(scope="module")
def farm(demo_run) -> FarmResult:
    """The demo farm as computed by the session's one demo run (``tests/conftest.py``)."""
    return demo_run.result.farm


@pytest.fixture(scope="module")
def demo_toml() -> dict:
    return tomllib.loads((DEMO / "geosoil.toml").read_text())


def _cell_centre(farm: FarmResult, paddock: str, row: int, col: int) -> tuple[float, float]:
    return farm.prep.grids[paddock].transform @ (col + 0.5, row + 0.5)


def _most(farm: FarmResult, paddock: str, product: str) -> tuple[int, int]:
    rate = farm.paddocks[paddock].rates.product_rates[product]
    return tuple(int(v) for v in np.unravel_index(np.nanargmax(rate), rate.shape))  # type: ignore[return-value]


def _total(e: Explanation, product: str) -> float:
    (step,) = [s for s in e.steps if s.rule == "total" and s.description.startswith(product + ":")]
    return step.result


def test_gypsum_by_hand_from_the_interpolated_values(farm: FarmResult, demo_toml: dict) -> None:
    """USDA Handbook 60 gypsum requirement, worked by hand from the values the explanation shows.

    Ca (cmol(+)/kg) = (ESP - target) / 100 x ECEC x F (Handbook 60; F after Oster et al. 1999);
    mg/kg = cmol(+)/kg x 10 x atomic weight / charge; kg/ha = mg/kg x depth (m) x BD x 10;
    product = kg Ca/ha / (23.28 % x purity x (1 - moisture)) [derived].
    """
    row, col = _most(farm, "Creek Flat", "gypsum")
    x, y = _cell_centre(farm, "Creek Flat", row, col)
    e = explain_location(farm, x, y, coords="xy")
    assert (e.paddock, e.row, e.col) == ("Creek Flat", row, col)
    v = {k: est for k, (est, _sd, _m) in e.interpolated.items()}
    ecec = v["ca"] + v["mg"] + v["k"] + v["na"] + v["acidity"]  # ECEC as the sum of its parts
    esp = 100 * v["na"] / ecec
    assert e.cell["ecec"] == pytest.approx(ecec, rel=1e-12)
    assert e.cell["esp"] == pytest.approx(esp, rel=1e-12)
    g = demo_toml["rates"]["gypsum"]
    soil, product = demo_toml["soil"], demo_toml["products"]["gypsum"]
    ca_cmol = (esp - g["target_esp_percent"]) / 100 * ecec * g["exchange_efficiency"]
    ca_mg_kg = ca_cmol * 10 * CA_ATOMIC_WEIGHT / 2
    ca_kg_ha = ca_mg_kg * soil["depth_m"] * soil["bulk_density_g_cm3"] * 10
    purity, moisture = product["purity_percent"] / 100, product["moisture_percent"] / 100
    fraction = CA_IN_GYPSUM * purity * (1 - moisture)
    by_hand = ca_kg_ha / fraction
    assert by_hand > 1000  # a sodic cell: the check is not about a zero
    # the calcium rule adds nothing here (Ca far above its minimum): the total is the gypsum rule's
    assert v["ca"] > demo_toml["rates"]["calcium"]["minimum_ca"]
    assert _total(e, "gypsum") == pytest.approx(by_hand, rel=2e-4)
    assert float(farm.paddocks["Creek Flat"].rates.product_rates["gypsum"][row, col]) == \
        pytest.approx(_total(e, "gypsum"), rel=1e-12)
    # every rule step names its source
    for step in e.steps:
        if step.rule in ("gypsum", "lime") and step.formula:
            assert step.source


def test_the_explanation_text_shows_each_stage(farm: FarmResult) -> None:
    row, col = _most(farm, "Creek Flat", "gypsum")
    e = explain_location(farm, *_cell_centre(farm, "Creek Flat", row, col), coords="xy")
    text = format_explanation(e)
    for heading in ("Paddock: Creek Flat", "1. Nearest samples", "2. Interpolated values",
                    "3. Cell chemistry", "4. Rules, step by step", "5. Zone rates"):
        assert heading in text
    assert "ECEC = Ca " in text and "ESP = 100 x Na / ECEC" in text
    assert "source: USDA Handbook 60" in text and "kriging s.d." in text
    assert "nan" not in text
    assert len(e.nearest_samples) == 3
    d = [s["distance_m"] for s in e.nearest_samples]
    assert d == sorted(d)
    assert all(s["sample_id"].startswith("CF-") for s in e.nearest_samples)
    assert {z["product"] for z in e.zones} == {"gypsum", "lime"}


def test_lonlat_and_xy_name_the_same_cell(farm: FarmResult) -> None:
    import pyproj

    x, y = _cell_centre(farm, "Red Hill", *_most(farm, "Red Hill", "lime"))
    to_ll = pyproj.Transformer.from_crs(farm.prep.crs, "EPSG:4326", always_xy=True)
    lon, lat = to_ll.transform(x, y)
    a = locate(farm.prep, x, y, coords="xy")
    b = locate(farm.prep, lon, lat)  # auto: numbers in degree ranges are lon/lat
    c = locate(farm.prep, lon, lat, coords="lonlat")
    assert (a.paddock, a.row, a.col) == (b.paddock, b.row, b.col) == (c.paddock, c.row, c.col)
    assert a.paddock == "Red Hill"
    assert b.x == pytest.approx(x, abs=1e-3) and b.y == pytest.approx(y, abs=1e-3)


def test_a_point_outside_every_paddock_is_named(farm: FarmResult) -> None:
    with pytest.raises(InputError) as err:
        locate(farm.prep, 147.0, -35.0)
    msg = str(err.value)
    assert "lon 147.000000, lat -35.000000" in msg and "not inside any paddock" in msg
    assert "Red Hill" in msg  # the paddocks there are
    with pytest.raises(InputError) as err:
        locate(farm.prep, 500_000.0, 6_100_000.0, coords="xy")
    assert "x 500000.0, y 6100000.0" in str(err.value)


def test_lonlat_out_of_range_is_refused(farm: FarmResult) -> None:
    with pytest.raises(InputError):
        locate(farm.prep, 541_000.0, 6_160_000.0, coords="lonlat")


def test_a_point_in_an_exclusion_is_on_no_cell(farm: FarmResult) -> None:
    excl = farm.prep.exclusions
    inside = [g for g in excl.geometry if farm.prep.paddocks.covers(g.representative_point()).any()]
    assert inside
    p = inside[0].representative_point()
    with pytest.raises(InputError) as err:
        locate(farm.prep, p.x, p.y, coords="xy")
    assert "not on one of its cells" in str(err.value)


def test_no_lime_above_the_ph_limit(farm: FarmResult, demo_toml: dict) -> None:
    """No liming product on cells with pH above the limit (common practice: about 7 in water;
    the demo's lab gives pH in CaCl2, which meets its own limit)."""
    limit = demo_toml["rates"]["no_lime_above_ph_cacl2"]
    n_alkaline = 0
    for name, pr in farm.paddocks.items():
        ph = pr.cells["ph_cacl2"]
        lime = pr.rates.product_rates["lime"]
        alkaline = np.isfinite(ph) & (ph > limit)
        n_alkaline += int(alkaline.sum())
        assert np.all(lime[alkaline] == 0), name
    assert n_alkaline > 10  # the demo's sodic patch is alkaline
    # the explanation of the most alkaline cell says so, and its zone gets no lime
    pr = farm.paddocks["Creek Flat"]
    ph = pr.cells["ph_cacl2"]
    row, col = (int(v) for v in np.unravel_index(np.nanargmax(ph), ph.shape))
    e = explain_location(farm, *_cell_centre(farm, "Creek Flat", row, col), coords="xy")
    assert e.cell["ph_cacl2"] > limit
    assert _total(e, "lime") == 0
    guard = [s for s in e.steps if s.rule == "lime" and s.description.startswith("pH guard")]
    assert guard and guard[0].result == 0 and guard[0].source.startswith("[common practice]")
    (zone,) = [z for z in e.zones if z["product"] == "lime"]
    assert zone["rate_kg_ha"] == 0


def test_the_totals_are_the_per_cell_rates(farm: FarmResult) -> None:
    """The explanation runs the same arithmetic as the grid (checked on a spread of cells)."""
    rng = np.random.default_rng(0)
    for name, pr in farm.paddocks.items():
        rows, cols = np.nonzero(pr.grid.mask)
        for i in rng.choice(len(rows), size=3, replace=False):
            r, c = int(rows[i]), int(cols[i])
            e = explain_location(farm, *_cell_centre(farm, name, r, c), coords="xy")
            for product, rate in pr.rates.product_rates.items():
                assert _total(e, product) == pytest.approx(float(rate[r, c]), rel=1e-12, abs=1e-9)
            assert math.isfinite(e.cell["ecec"])


# --------------------------------------------------------------------------- --at swapped

# Invented box paddocks where the farms of a user trial lay (lon/lat bounds, WGS 84): an
# Australian, an Argentine, a US and a German farm, so that swapped readings fall in every
# quadrant and in both of explain's readings (lon/lat when both numbers fit, else x/y).
TRIAL_FARMS = {
    "hollow": (151.9651, -29.1048, 151.9821, -29.0986),
    "estancia": (-59.1738, -34.3222, -59.1649, -34.3157),
    "tiny": (-93.6037, 42.0004, -93.6018, 42.0016),
    "nordhof": (10.4679, 52.3410, 10.4797, 52.3483),
}


def _lonlat_farm(folder: Path, bounds: tuple[float, float, float, float]):  # noqa: ANN202
    """A one-paddock project (samples in lon/lat) over ``bounds``, prepared (no kriging)."""
    import geopandas as gpd
    import shapely

    from geosoil.pipeline import prepare
    from geosoil.project import load_project

    folder.mkdir(parents=True)
    x0, y0, x1, y1 = bounds
    gpd.GeoDataFrame({"name": ["Block"]}, geometry=[shapely.box(*bounds)],
                     crs="EPSG:4326").to_file(folder / "paddocks.geojson")
    rows = [f"S{i}{j},{x0 + (x1 - x0) * (i + 0.5) / 3:.6f},{y0 + (y1 - y0) * (j + 0.5) / 3:.6f},"
            f"5.5,6.0,2.0,0.5,0.4,0.2" for i in range(3) for j in range(3)]
    (folder / "lab.csv").write_text(
        "Sample,Longitude,Latitude,pH (CaCl2),Ca (cmol/kg),Mg (cmol/kg),K (cmol/kg),"
        "Na (cmol/kg),Exch Acidity (cmol/kg)\n" + "\n".join(rows) + "\n")
    (folder / "geosoil.toml").write_text(
        '[samples]\nfile = "lab.csv"\n\n[boundaries]\npaddocks = "paddocks.geojson"\n')
    return prepare(load_project(folder))


@pytest.mark.parametrize("name", sorted(TRIAL_FARMS))
def test_latitude_first_is_offered_swapped_on_every_farm(name: str, tmp_path: Path) -> None:
    """--at LAT,LON of a point of the farm: whether the numbers read as lon/lat (both within
    90) or as x/y (the longitude beyond 90), the error offers LON,LAT."""
    prep = _lonlat_farm(tmp_path / name, TRIAL_FARMS[name])
    x0, y0, x1, y1 = TRIAL_FARMS[name]
    lon, lat = round((x0 + x1) / 2, 4), round((y0 + y1) / 2, 4)
    with pytest.raises(InputError) as err:
        locate(prep, lat, lon)
    msg = str(err.value)
    assert "looks like latitude first" in msg and "in paddock 'Block'" in msg
    assert f"did you mean --at {lon!r},{lat!r} (LON,LAT)?" in msg


def test_latitude_first_rounded_off_the_farm_is_still_offered(tmp_path: Path) -> None:
    """The trial's case: '--at -29.1,152.0' (one decimal, read as x,y: 'lon 62.78, lat
    -85.53') swapped lies about 1.7 km east of the farm, in no paddock: still the hint."""
    prep = _lonlat_farm(tmp_path / "hollow", TRIAL_FARMS["hollow"])
    with pytest.raises(InputError) as err:
        locate(prep, -29.1, 152.0)
    msg = str(err.value)
    assert "looks like latitude first" in msg and "from paddock 'Block'" in msg
    assert "did you mean --at 152.0,-29.1 (LON,LAT)?" in msg
    metres = float(msg.split(" m from paddock")[0].rsplit(" ", 1)[1].replace(",", ""))
    # 152.0 - 151.9821 = 0.0179 degrees of longitude at 29.1 S: 0.0179 x 111.32 km x
    # cos(29.1 deg) = 1.74 km (spherical approximation, good to about 0.5 %)
    assert metres == pytest.approx(0.0179 * 111_320 * math.cos(math.radians(29.1)), rel=0.01)


def test_northing_first_in_the_working_crs_is_offered_swapped(tmp_path: Path) -> None:
    import pyproj

    prep = _lonlat_farm(tmp_path / "nordhof", TRIAL_FARMS["nordhof"])
    x, y = pyproj.Transformer.from_crs(4326, prep.crs, always_xy=True).transform(10.473, 52.344)
    with pytest.raises(InputError) as err:
        locate(prep, round(y, 1), round(x, 1), coords="xy")
    msg = str(err.value)
    assert "looks like northing (y) first" in msg and "in paddock 'Block'" in msg
    assert f"did you mean --at {round(x, 1)!r},{round(y, 1)!r} (X,Y)?" in msg


def test_a_swapped_point_far_from_the_farm_gets_no_hint(tmp_path: Path) -> None:
    prep = _lonlat_farm(tmp_path / "tiny", TRIAL_FARMS["tiny"])
    for a, b in ((42.5, -93.6), (-35.0, 147.0)):  # swapped: 55 km off, and a continent off
        with pytest.raises(InputError) as err:
            locate(prep, a, b)
        assert "did you mean" not in str(err.value) and "not inside any paddock" in str(
            err.value)
