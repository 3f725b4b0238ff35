"""``geosoil explain``: the arithmetic at one demo location, checked by hand from its printout."""

from __future__ import annotations

import csv
import re
import tomllib
from pathlib import Path

import pytest
from click.testing import CliRunner
from geosoil.cli.main import cli

from tests.demofarm import DEMO, copy_demo

# IUPAC standard atomic weight of Ca; gypsum CaSO4.2H2O is 23.28 % Ca (docs/SOURCES.md [derived])
CA_ATOMIC_WEIGHT = 40.078
CA_IN_GYPSUM = 0.2328


def invoke(*args: object):  # noqa: ANN201 - click's Result
    return CliRunner().invoke(cli, [str(a) for a in args])


@pytest.fixture(scope="module")
def farm(tmp_path_factory: pytest.TempPathFactory, demo_run) -> Path:  # noqa: ANN001
    """A copy of the demo farm with the session's surface cache, which the session's demo
    run (``demo_run`` in ``tests/conftest.py``) has filled: explain interpolates nothing."""
    farm, _ = copy_demo(tmp_path_factory.mktemp("explain"), cache=demo_run.cache)
    return farm


@pytest.fixture(scope="module")
def sodic_sample() -> tuple[float, float]:
    """Longitude and latitude of the Creek Flat sample with the highest ESP, from the lab file."""
    with open(DEMO / "lab_results.csv", newline="") as fh:
        rows = [r for r in csv.DictReader(fh) if r["Sample ID"].startswith("CF-")]
    # Na in mmol/kg is 0.1 cmol(+)/kg per mmol/kg (Na is monovalent)
    best = max(rows, key=lambda r: float(r["Exch. Na (mmol/kg)"]) / 10
               / float(r["ECEC (cmol(+)/kg)"]))
    return float(best["Longitude"]), float(best["Latitude"])


@pytest.fixture(scope="module")
def at_lonlat(farm: Path, sodic_sample: tuple[float, float]):  # noqa: ANN201
    lon, lat = sodic_sample
    return invoke("explain", farm, "--at", f"{lon},{lat}")


def _number(pattern: str, text: str) -> float:
    m = re.search(pattern, text, re.M)
    assert m, f"{pattern!r} not in the output"
    return float(m.group(1))


def test_help() -> None:
    r = invoke("explain", "--help")
    assert r.exit_code == 0
    for word in ("PROJECT", "--at", "LON,LAT", "--coords", "lonlat", "xy"):
        assert word in r.stdout


@pytest.mark.parametrize(
    ("args", "option"),
    [
        (["--at", "147.45"], "--at"),
        (["--at", "east,north"], "--at"),
        (["--at", "147.45,-34.69", "--coords", "utm"], "--coords"),
        ([], "--at"),
        (["--at", "147.45,-34.69", "--near"], "--near"),
    ],
)
def test_usage_errors_exit_2_naming_the_option(farm: Path, args: list[str], option: str) -> None:
    r = invoke("explain", farm, *args)
    assert r.exit_code == 2
    assert option in r.stderr and r.stdout == ""


def test_explain_at_lonlat_prints_every_stage(at_lonlat) -> None:  # noqa: ANN001
    r = at_lonlat
    assert r.exit_code == 0, r.stderr
    out = r.stdout
    assert "Paddock: Creek Flat" in out
    for heading in ("1. Nearest samples", "2. Interpolated values at this cell",
                    "3. Cell chemistry",
                    "4. Rules, step by step", "5. Zone rates the spreader applies here"):
        assert heading in out
    assert re.search(r"^   CF-\d+ \(\d+ m away, file row \d+\): ph_cacl2 ", out, re.M)
    assert re.search(r"^   na: [\d.]+ \+/- [\d.]+ \(kriging s\.d\.\)", out, re.M)
    assert "source: USDA Handbook 60" in out
    assert "source: [common practice]" in out
    assert re.search(r"^   gypsum: zone \d+ \(\w+\): [\d.]+ t/ha", out, re.M)  # the project's unit
    assert "error" not in r.stderr


def test_gypsum_by_hand_from_the_printed_values(at_lonlat) -> None:  # noqa: ANN001
    """USDA Handbook 60 (Richards 1954), F after Oster et al. 1999, worked from the printout.

    Ca (cmol(+)/kg) = (ESP - target) / 100 x ECEC x F; mg/kg = cmol(+)/kg x 10 x 40.078 / 2;
    kg/ha = mg/kg x depth (m) x BD x 10; product = kg Ca/ha / (23.28 % x purity x (1 - moisture)).
    """
    out = at_lonlat.stdout
    v = {k: _number(rf"^   {k}: ([\d.e+-]+)", out) for k in ("ca", "mg", "k", "na", "acidity")}
    ecec = sum(v.values())
    esp = 100 * v["na"] / ecec
    assert _number(r"^   ECEC = .* = ([\d.]+)$", out) == pytest.approx(ecec, rel=1e-3)
    assert _number(r"^   ESP = 100 x Na / ECEC = ([\d.]+) %$", out) == pytest.approx(esp, rel=1e-3)
    project = tomllib.loads((DEMO / "geosoil.toml").read_text())
    g, soil = project["rates"]["gypsum"], project["soil"]
    product = project["products"]["gypsum"]
    ca_cmol = (esp - g["target_esp_percent"]) / 100 * ecec * g["exchange_efficiency"]
    ca_mg_kg = ca_cmol * 10 * CA_ATOMIC_WEIGHT / 2
    ca_kg_ha = ca_mg_kg * soil["depth_m"] * soil["bulk_density_g_cm3"] * 10
    purity, moisture = product["purity_percent"] / 100, product["moisture_percent"] / 100
    fraction = CA_IN_GYPSUM * purity * (1 - moisture)
    by_hand = ca_kg_ha / fraction
    assert by_hand > 1000  # a sodic cell
    printed = _number(r"^   \[total\] gypsum: .*\n.*\n.*\n"
                      r"      result: [\d.,]+ t/ha \(([\d.e+]+) kg/ha\)", out)
    # the printed interpolated values carry 4 significant figures
    assert printed == pytest.approx(by_hand, rel=2e-3)


def test_ph_above_the_limit_gets_no_lime(at_lonlat) -> None:  # noqa: ANN001
    """No lime on alkaline soil (common practice: pH above about 7 in water; the demo's lab
    gives pH in CaCl2, which meets its own limit)."""
    out = at_lonlat.stdout
    rates = tomllib.loads((DEMO / "geosoil.toml").read_text())["rates"]
    limit = rates["no_lime_above_ph_cacl2"]
    ph = _number(r"^   pH \(CaCl2\) = ([\d.]+)$", out)
    lime = _number(r"^   \[total\] lime: .*\n.*\n.*\n"
                   r"      result: [\d.,]+ t/ha \(([\d.e+]+) kg/ha\)", out)
    assert ph > limit  # the demo's sodic patch is alkaline
    assert lime == 0
    assert re.search(r"\[lime\] pH guard.*\n.*\n.*\n      result: 0 t/ha \(0 kg/ha\)", out)
    assert re.search(r"^   lime: zone \d+ \(\w+\): 0 t/ha", out, re.M)


def test_xy_in_the_working_crs_gives_the_same_cell(farm: Path, at_lonlat) -> None:  # noqa: ANN001
    first = at_lonlat.stdout
    m = re.search(r"= x ([\d.]+), y ([\d.]+) \(working CRS\)", first)
    assert m
    r = invoke("explain", farm, "--at", f"{m.group(1)},{m.group(2)}", "--coords", "xy")
    assert r.exit_code == 0, r.stderr
    cell = re.compile(r"^Paddock: .*$", re.M)
    assert cell.search(r.stdout).group(0) == cell.search(first).group(0)  # type: ignore[union-attr]


def test_outside_every_paddock_exits_1_naming_the_point(farm: Path) -> None:
    r = invoke("explain", farm, "--at", "147.0,-35.0")
    assert r.exit_code == 1
    assert r.stdout == ""
    assert r.stderr.startswith("error:")
    assert "lon 147.000000, lat -35.000000" in r.stderr and "not inside any paddock" in r.stderr
    assert "surfaces" not in r.stderr  # refused before any interpolation


def test_latitude_first_is_caught(farm: Path, sodic_sample: tuple[float, float]) -> None:
    """``--at LAT,LON`` (a valid latitude, then a valid longitude) is not read as x,y in
    silence: the point swapped lies in a paddock, so the error offers it longitude first."""
    lon, lat = sodic_sample
    r = invoke("explain", farm, "--at", f"{lat},{lon}")
    assert r.exit_code == 1 and "looks like latitude first" in r.stderr
    assert f"did you mean --at {lon!r},{lat!r} (LON,LAT)?" in r.stderr
    assert "in paddock '" in r.stderr  # where the swapped reading lies, said plainly
    far = invoke("explain", farm, "--at", "-35.0,147.0")  # swapped, still in no paddock
    assert far.exit_code == 1 and "did you mean" not in far.stderr


def test_nearest_samples_show_every_lab_value(at_lonlat) -> None:  # noqa: ANN001
    """Section 1 shows every analyte a sample has, as in the lab file: the demo's EC 1:5
    (dS/m) as well as the cations; buffer pH, organic carbon and matter, clay, pHBC, CEC at
    pH 7 and potential acidity are among what it shows when a lab gives them."""
    from geosoil.explain import SAMPLE_VALUES

    assert {"bph_smp", "bph_mehlich", "oc", "om", "clay", "phbc", "cec_ph7",
            "acidity_potential", "ec_1_5"} <= set(SAMPLE_VALUES)
    line = next(ln for ln in at_lonlat.stdout.splitlines() if "m away, file row" in ln)
    sid = line.split()[0]
    with open(DEMO / "lab_results.csv", newline="") as fh:
        row = next(r for r in csv.DictReader(fh) if r["Sample ID"] == sid)
    ec = float(row["EC 1:5 (dS/m)"])
    assert f"ec_1_5 {ec:.3g} dS/m" in line
    assert f"ph_cacl2 {float(row['pH (CaCl2)']):.3g}" in line
