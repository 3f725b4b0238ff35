"""``geosoil new``: a ready-to-run project file from a lab file and a boundaries file."""

from __future__ import annotations

import json
import re
import tomllib
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from click.testing import CliRunner
from geosoil.cli.main import cli
from pyproj import Transformer

from geosoil.project import NEW_MIN_RATE_KG_HA, load_project

UTM = "EPSG:32755"  # WGS 84 / UTM zone 55S
X0, Y0 = 540_000.0, 6_160_000.0  # a paddock of 400 m x 300 m in the Riverina


def make_inputs(folder: Path, *, n: int = 16, seed: int = 3) -> dict[str, Path]:
    """Paddocks (UTM, and lon/lat) and lab files (lon/lat, and easting/northing without a CRS).

    Invented values with a west-east sodicity trend and a south-north acidity trend.
    """
    folder.mkdir(parents=True, exist_ok=True)
    paddock = shapely.box(X0, Y0, X0 + 400, Y0 + 300)
    utm = gpd.GeoDataFrame({"name": ["Home"]}, geometry=[paddock], crs=UTM)
    paths = {"paddocks_utm": folder / "paddocks_utm.gpkg",
             "paddocks_ll": folder / "paddocks.geojson"}
    utm.to_file(paths["paddocks_utm"])
    utm.to_crs("EPSG:4326").to_file(paths["paddocks_ll"])
    rng = np.random.default_rng(seed)
    x = X0 + rng.uniform(20, 380, n)
    y = Y0 + rng.uniform(20, 280, n)
    lon, lat = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True).transform(x, y)
    fx, fy = (x - X0) / 400, (y - Y0) / 300
    ca = 6 + 2 * fx + rng.normal(0, 0.2, n)
    mg = 2 + fy + rng.normal(0, 0.1, n)
    k = 0.5 + rng.normal(0, 0.03, n)
    na = 0.2 + 2.0 * fx + rng.normal(0, 0.05, n)
    al = np.clip(1.5 * fy - 0.3 + rng.normal(0, 0.05, n), 0.02, None)
    ph = 4.6 + 2.8 * fx - 0.4 * fy
    rows = []
    for i in range(n):
        vals = ",".join(f"{v:.3f}" for v in (ph[i], ca[i], mg[i], k[i], na[i], al[i], al[i] + 0.1))
        rows.append((f"S{i + 1:02d}", lon[i], lat[i], x[i], y[i], vals))
    head = ("pH (CaCl2),Exch Ca (meq/100g),Mg (cmol/kg),K (cmol/kg),Na (cmol/kg),Al (cmol/kg),"
            "Exch. Acidity (cmol/kg)")
    paths["lab_ll"] = folder / "lab_lonlat.csv"
    paths["lab_ll"].write_text(
        f"Sample ID,Longitude,Latitude,{head}\n"
        + "".join(f"{r[0]},{r[1]:.7f},{r[2]:.7f},{r[5]}\n" for r in rows)
    )
    paths["lab_xy"] = folder / "lab_xy.csv"
    paths["lab_xy"].write_text(
        f"Sample ID,Easting,Northing,{head}\n"
        + "".join(f"{r[0]},{r[3]:.1f},{r[4]:.1f},{r[5]}\n" for r in rows)
    )
    return paths


@pytest.fixture(scope="module")
def inputs(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    return make_inputs(tmp_path_factory.mktemp("inputs"))


def invoke(*args: str, **kw: object):  # noqa: ANN201 - click's Result
    return CliRunner().invoke(cli, [str(a) for a in args], **kw)  # type: ignore[arg-type]


def test_help_names_the_arguments() -> None:
    r = invoke("new", "--help")
    assert r.exit_code == 0
    for word in ("FOLDER", "--samples", "--paddocks", "--crs", "--overwrite"):
        assert word in r.stdout


def test_missing_samples_option_is_a_usage_error(inputs: dict[str, Path], tmp_path: Path) -> None:
    r = invoke("new", tmp_path / "p", "--paddocks", inputs["paddocks_utm"])
    assert r.exit_code == 2
    assert "--samples" in r.stderr and r.stdout == ""
    assert not (tmp_path / "p").exists()


def test_a_samples_file_that_does_not_exist_is_a_usage_error(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    r = invoke("new", tmp_path / "p", "--samples", tmp_path / "nope.csv",
               "--paddocks", inputs["paddocks_utm"])
    assert r.exit_code == 2 and "--samples" in r.stderr and "does not exist" in r.stderr


def test_an_unknown_crs_is_a_usage_error_naming_the_option(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    r = invoke("new", tmp_path / "p", "--samples", inputs["lab_xy"],
               "--paddocks", inputs["paddocks_utm"], "--crs", "EPSG:999999")
    assert r.exit_code == 2 and "--crs" in r.stderr and "EPSG:999999" in r.stderr
    assert not (tmp_path / "p").exists()


@pytest.fixture(scope="module")
def lonlat_project(inputs: dict[str, Path], tmp_path_factory: pytest.TempPathFactory):  # noqa: ANN201
    folder = tmp_path_factory.mktemp("new") / "farm"
    r = invoke("new", folder, "--samples", inputs["lab_ll"], "--paddocks", inputs["paddocks_utm"])
    return folder, r


def test_lonlat_columns_are_recognised_and_written(
    lonlat_project, inputs: dict[str, Path]  # noqa: ANN001
) -> None:
    folder, r = lonlat_project
    assert r.exit_code == 0, r.stderr
    path = folder / "geosoil.toml"
    assert r.stdout.strip() == str(path)  # the result on stdout; notes on stderr
    assert "longitude/latitude" in r.stderr
    data = tomllib.loads(path.read_text())
    assert data["samples"]["crs"] == "EPSG:4326"
    assert data["samples"]["columns"]["ca"] == "Exch Ca (meq/100g)"
    assert data["samples"]["columns"]["ph_cacl2"] == "pH (CaCl2)"
    assert data["samples"]["units"]["ca"] == "meq/100g"
    assert data["samples"]["units"]["mg"] == "cmol/kg"
    # the paths written lead back to the inputs
    project = load_project(folder)
    assert project.settings.samples.file == inputs["lab_ll"].resolve()
    assert project.settings.boundaries.paddocks == inputs["paddocks_utm"].resolve()


def test_new_picks_the_cell_size_for_the_farms_size_and_says_so(lonlat_project) -> None:  # noqa: ANN001
    """A 12 ha paddock (400 m x 300 m) keeps 10 m cells, with a note naming the size."""
    folder, r = lonlat_project
    data = tomllib.loads((folder / "geosoil.toml").read_text())
    assert data["grid"]["cell_size_m"] == 10.0
    # [derived] 12 ha / 100 m2 per cell
    assert "grid cell size 10 m" in r.stderr and "1,200 cells" in r.stderr


def test_cell_size_for_keeps_the_farm_within_the_cell_budget() -> None:
    """[derived] the size picked keeps area / size^2 within the budget, and the next finer
    size on the list would not."""
    from geosoil.project import NEW_CELL_SIZES_M, NEW_MAX_CELLS, cell_size_for

    for ha in (1.0, 250.0, 2500.0, 2501.0, 5000.0, 20_000.0, 100_000.0):
        size = cell_size_for(ha)
        assert ha * 1e4 / size**2 <= NEW_MAX_CELLS
        i = NEW_CELL_SIZES_M.index(size)
        if i:
            assert ha * 1e4 / NEW_CELL_SIZES_M[i - 1] ** 2 > NEW_MAX_CELLS
    assert cell_size_for(5000.0) == 15.0  # [derived] 5e7 m2 / 225 m2 = 222 222 cells


def test_every_setting_is_written_with_a_comment(lonlat_project) -> None:  # noqa: ANN001
    folder, _ = lonlat_project
    text = (folder / "geosoil.toml").read_text()
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.startswith(("[", "#"))]
    assert len(lines) > 60
    for line in lines:
        assert re.match(r"^[\w\"]+.* = .+  # \S", line), f"no comment: {line}"
    for table in ("samples", "boundaries", "soil", "grid", "interpolation", "rates.gypsum",
                  "rates.lime", "rates.calcium", "rates.balance", "products.gypsum",
                  "products.lime", "spreader", "zones", "tonnage", "output"):
        assert f"\n[{table}]\n" in text
    assert "advisory" in text


def test_the_new_project_checks_clean_and_runs_as_written(
    lonlat_project, tmp_path: Path  # noqa: ANN001
) -> None:
    folder, _ = lonlat_project
    before = sorted(p.name for p in folder.iterdir())
    r = invoke("check", folder)
    assert r.exit_code == 0, r.stderr
    assert r.stdout.startswith("ok:")
    r = invoke("--quiet", "run", folder, "--out", tmp_path / "out",
               env={"XDG_CACHE_HOME": str(tmp_path / "cache")})
    assert r.exit_code == 0, r.stderr
    assert (tmp_path / "out" / "run.json").is_file()
    assert (tmp_path / "out" / "tonnage.csv").is_file()
    assert sorted(p.name for p in folder.iterdir()) == before  # nothing written beside it
    # a new project's spreader meters no less than 100 kg/ha (common practice), so no zone
    # carries a rate between 0 and that
    zones = pd.DataFrame(json.loads((tmp_path / "out" / "run.json").read_text())["zones"])
    rated = zones.loc[zones["rate_kg_ha"] > 0, "rate_kg_ha"]
    assert (rated >= NEW_MIN_RATE_KG_HA).all()


def test_projected_xy_inside_the_boundaries_take_their_crs_with_a_note(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    r = invoke("new", tmp_path / "p", "--samples", inputs["lab_xy"],
               "--paddocks", inputs["paddocks_utm"])
    assert r.exit_code == 0, r.stderr
    assert "assumed" in r.stderr and "UTM zone 55S" in r.stderr and UTM in r.stderr
    assert tomllib.loads((tmp_path / "p" / "geosoil.toml").read_text())["samples"]["crs"] == UTM
    assert invoke("check", tmp_path / "p").exit_code == 0


def test_projected_xy_outside_the_boundaries_ask_for_crs(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    # the boundaries are in lon/lat: easting/northing cannot be in their CRS
    r = invoke("new", tmp_path / "p", "--samples", inputs["lab_xy"],
               "--paddocks", inputs["paddocks_ll"])
    assert r.exit_code == 1
    assert r.stdout == ""
    assert r.stderr.startswith("error:") and "--crs" in r.stderr and "lab_xy.csv" in r.stderr
    assert not (tmp_path / "p" / "geosoil.toml").exists()


def test_projected_xy_that_miss_the_boundaries_in_their_crs_ask_for_crs(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    shifted = tmp_path / "shifted.csv"
    lines = inputs["lab_xy"].read_text().splitlines()
    out = [lines[0]]
    for ln in lines[1:]:
        f = ln.split(",")
        f[1] = f"{float(f[1]) + 50_000:.1f}"  # 50 km east of the paddock
        out.append(",".join(f))
    shifted.write_text("\n".join(out) + "\n")
    r = invoke("new", tmp_path / "p", "--samples", shifted, "--paddocks", inputs["paddocks_utm"])
    assert r.exit_code == 1 and "--crs" in r.stderr and "0%" in r.stderr


def test_reading_warnings_show_once_as_warnings_and_stray_samples_are_named(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    lines = inputs["lab_xy"].read_text().splitlines()
    f = lines[2].split(",")
    f[-2] = "<0.05"  # file row 3: Al below the detection limit
    lines[2] = ",".join(f)
    g = lines[5].split(",")
    g[1] = f"{X0 - 300:.1f}"  # file row 6: 300 m west of the paddock
    lines[5] = ",".join(g)
    lab = tmp_path / "lab.csv"
    lab.write_text("\n".join(lines) + "\n")
    # x/y without a CRS: the file is read twice (to guess the CRS), the warning shown once
    r = invoke("new", tmp_path / "p", "--samples", lab, "--paddocks", inputs["paddocks_utm"])
    assert r.exit_code == 0, r.stderr
    warned = [ln for ln in r.stderr.splitlines() if ln.startswith("warning: ")]
    assert len(warned) == 1 and "below the detection limit" in warned[0]
    assert "DataWarning" not in r.stderr and ".py:" not in r.stderr  # no Python internals
    outside = [ln for ln in r.stderr.splitlines() if "outside every paddock" in ln]
    assert len(outside) == 1 and outside[0].startswith("note: ")
    assert "row(s) 6" in outside[0] and "on_bad_row = 'skip'" in outside[0]


def test_a_bad_cell_is_named_and_the_project_still_written(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    # on_bad_row is set in the project file, so `new` must write one even when a cell is bad;
    # the project keeps on_bad_row = "stop" and `check` names the cell
    lines = inputs["lab_ll"].read_text().splitlines()
    f = lines[3].split(",")
    f[3] = "n.d."  # file row 4, the pH column
    lines[3] = ",".join(f)
    lab = tmp_path / "lab.csv"
    lab.write_text("\n".join(lines) + "\n")
    r = invoke("new", tmp_path / "p", "--samples", lab, "--paddocks", inputs["paddocks_ll"])
    assert r.exit_code == 0, r.stderr
    bad = [ln for ln in r.stderr.splitlines() if "bad row(s)" in ln]
    assert len(bad) == 1 and bad[0].startswith("note: ") and "row 4" in bad[0]
    assert "'pH (CaCl2)'" in bad[0] and "skipped" not in r.stderr
    project = tomllib.loads((tmp_path / "p" / "geosoil.toml").read_text())
    assert project["samples"]["on_bad_row"] == "stop"
    c = invoke("check", tmp_path / "p")
    assert c.exit_code == 1 and "row 4, column 'pH (CaCl2)'" in c.stderr


def test_crs_given_is_used(inputs: dict[str, Path], tmp_path: Path) -> None:
    r = invoke("new", tmp_path / "p", "--samples", inputs["lab_xy"],
               "--paddocks", inputs["paddocks_ll"], "--crs", UTM)
    assert r.exit_code == 0, r.stderr
    assert "assumed" not in r.stderr
    assert tomllib.loads((tmp_path / "p" / "geosoil.toml").read_text())["samples"]["crs"] == UTM
    assert invoke("check", tmp_path / "p").exit_code == 0


def test_a_crs_that_puts_the_samples_elsewhere_is_written_with_a_warning_note(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    r = invoke("new", tmp_path / "p", "--samples", inputs["lab_xy"],
               "--paddocks", inputs["paddocks_utm"], "--crs", "EPSG:32756")
    assert r.exit_code == 0
    assert "0% of the samples fall inside the boundaries" in r.stderr


def test_an_existing_project_file_is_kept_without_overwrite(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    folder = tmp_path / "p"
    folder.mkdir()
    (folder / "geosoil.toml").write_text("# mine\n")
    args = ["new", folder, "--samples", inputs["lab_ll"], "--paddocks", inputs["paddocks_utm"]]
    r = invoke(*args)
    assert r.exit_code == 1
    assert r.stderr.startswith("error:") and "--overwrite" in r.stderr and r.stdout == ""
    assert (folder / "geosoil.toml").read_text() == "# mine\n"
    r = invoke(*args, "--overwrite")
    assert r.exit_code == 0
    assert "[samples]" in (folder / "geosoil.toml").read_text()
    assert sorted(p.name for p in folder.iterdir()) == ["geosoil.toml"]  # no temporary left


def test_quiet_keeps_the_notes_off_stderr(inputs: dict[str, Path], tmp_path: Path) -> None:
    r = invoke("-q", "new", tmp_path / "p", "--samples", inputs["lab_ll"],
               "--paddocks", inputs["paddocks_utm"])
    assert r.exit_code == 0 and r.stderr == ""
    assert r.stdout.strip().endswith("geosoil.toml")


def test_samples_with_their_own_crs_keep_it(inputs: dict[str, Path], tmp_path: Path) -> None:
    table = gpd.pd.read_csv(inputs["lab_xy"])
    points = gpd.GeoDataFrame(
        table.drop(columns=["Easting", "Northing"]),
        geometry=gpd.points_from_xy(table["Easting"], table["Northing"]), crs=UTM,
    )
    points.to_file(tmp_path / "lab.gpkg")
    r = invoke("new", tmp_path / "p", "--samples", tmp_path / "lab.gpkg",
               "--paddocks", inputs["paddocks_ll"])
    assert r.exit_code == 0, r.stderr
    assert "the file's own CRS" in r.stderr and "UTM zone 55S" in r.stderr
    data = tomllib.loads((tmp_path / "p" / "geosoil.toml").read_text())
    assert "crs" not in data["samples"]  # the file's own is read again
    assert invoke("check", tmp_path / "p").exit_code == 0


def test_inputs_near_the_project_are_written_as_relative_paths(
    inputs: dict[str, Path], tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    data_dir = tmp_path / "data"
    data_dir.mkdir()
    for key in ("lab_ll", "paddocks_utm"):
        (data_dir / inputs[key].name).write_bytes(inputs[key].read_bytes())
    monkeypatch.chdir(tmp_path)
    r = invoke("new", "project", "--samples", "data/lab_lonlat.csv",
               "--paddocks", "data/paddocks_utm.gpkg")
    assert r.exit_code == 0, r.stderr
    data = tomllib.loads((tmp_path / "project" / "geosoil.toml").read_text())
    assert data["samples"]["file"] == "../data/lab_lonlat.csv"
    assert data["boundaries"]["paddocks"] == "../data/paddocks_utm.gpkg"
    assert data["farm"] == "project"
    # the folder can move with its data
    (tmp_path / "moved").mkdir()
    for name in ("project", "data"):
        (tmp_path / name).rename(tmp_path / "moved" / name)
    monkeypatch.chdir(tmp_path / "moved" / "project")
    assert invoke("check", ".").exit_code == 0


# --------------------------------------------------------------------------- header meaning


def test_acidity_without_a_method_is_asked_for_and_bare_ph_is_noted(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    """A bare "pH" is read as pH in water with a note naming column, reading and setting; an
    "H+Al" that names no method (exchangeable or pH 7 potential acidity, often several-fold
    apart) is not guessed: 'new' says so, 'check' refuses until the setting answers."""
    text = inputs["lab_ll"].read_text().replace("pH (CaCl2)", "pH").replace(
        "Exch. Acidity (cmol/kg)", "H+Al (cmol/kg)")
    lab = tmp_path / "lab.csv"
    lab.write_text(text)
    folder = tmp_path / "farm"
    r = invoke("new", folder, "--samples", lab, "--paddocks", inputs["paddocks_utm"])
    assert r.exit_code == 0, r.stderr
    assert "'pH' names no method: read as pH in water" in r.stderr
    assert "ph_cacl2 = 'pH'" in r.stderr
    assert "acidity column 'H+Al (cmol/kg)' names no method" in r.stderr
    assert "acidity_potential = 'H+Al (cmol/kg)'" in r.stderr
    c = invoke("check", folder)
    assert c.exit_code == 1
    assert "column 'H+Al (cmol/kg)'" in c.stderr and "several-fold" in c.stderr
    path = folder / "geosoil.toml"
    path.write_text(path.read_text().replace(
        "columns = { ", "columns = { acidity = 'H+Al (cmol/kg)', ", 1))
    c = invoke("check", folder)
    assert c.exit_code == 0, c.stderr


def test_new_records_warnings_with_the_project_s_one_recorder(
    inputs: dict[str, Path], tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A library's warning is shown with its kind and package, as check and run show it; a
    warning raised many times once; control characters as escapes."""
    import warnings

    import geosoil.project
    from geosoil.errors import DataWarning

    real = geosoil.project.new_project

    def noisy(*args, **kw):  # noqa: ANN002, ANN003, ANN202
        for _ in range(500):
            warnings.warn("paddock 'Home\x1b]0;x\x07' read twice", DataWarning, stacklevel=1)
        np.log(np.zeros(1))  # numpy: RuntimeWarning, divide by zero
        return real(*args, **kw)

    monkeypatch.setattr(geosoil.project, "new_project", noisy)
    r = invoke("new", tmp_path / "p", "--samples", inputs["lab_ll"],
               "--paddocks", inputs["paddocks_ll"])
    assert r.exit_code == 0, r.stderr
    warned = [ln for ln in r.stderr.splitlines() if ln.startswith("warning: ")]
    assert warned.count("warning: paddock 'Home\\x1b]0;x\\x07' read twice") == 1
    assert any("divide by zero" in w and "(RuntimeWarning from " in w for w in warned)
    assert "\x1b" not in r.stderr and "\x07" not in r.stderr


def _lab_from(inputs: dict[str, Path], folder: Path, header: str, convert, name="lab.csv") -> Path:
    """The module's lon/lat lab file with a new header row and each row's values converted
    (``convert(fields) -> fields``); the locations are kept."""
    lines = inputs["lab_ll"].read_text().splitlines()
    out = [header] + [",".join(convert(ln.split(","))) for ln in lines[1:]]
    path = folder / name
    path.write_text("\n".join(out) + "\n", encoding="utf-8")
    return path


def test_a_file_whose_unstated_unit_looks_wrong_is_written_and_checked_as_one_problem(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    # user trial: cations in mmol(+)/kg without units were read as cmol(+)/kg (ten times the
    # gypsum); 'new' must say so once, write the project, and leave the unit to the user
    lab = _lab_from(inputs, tmp_path, "Sample ID,Longitude,Latitude,pH (CaCl2),Ca,Mg,K,Na,Al",
                    lambda f: f[:4] + [f"{float(v) * 10:.2f}" for v in f[4:9]])
    r = invoke("new", tmp_path / "p", "--samples", lab, "--paddocks", inputs["paddocks_ll"])
    assert r.exit_code == 0, r.stderr
    assert "probably mmol/kg" in r.stderr and "bad row" not in r.stderr
    project = tomllib.loads((tmp_path / "p" / "geosoil.toml").read_text())
    assert "units" not in project["samples"]  # no unit written that nobody stated
    text = (tmp_path / "p" / "geosoil.toml").read_text()
    assert "To settle before 'geosoil check' passes" in text
    c = invoke("check", tmp_path / "p")
    problems = [ln for ln in c.stderr.splitlines() if ln.startswith("problem:")]
    assert c.exit_code == 1 and len(problems) == 1
    assert "unit looks wrong" in problems[0] and "skip" not in problems[0]


def test_new_writes_down_the_sheet_it_read(inputs: dict[str, Path], tmp_path: Path) -> None:
    # user trial: a workbook whose first sheet is a cover
    table = pd.read_csv(inputs["lab_ll"])
    path = tmp_path / "lab.xlsx"
    with pd.ExcelWriter(path) as xl:
        pd.DataFrame({"Laboratorio": ["informe"]}).to_excel(xl, sheet_name="Portada",
                                                           index=False)
        table.to_excel(xl, sheet_name="Resultados", index=False)
    r = invoke("new", tmp_path / "p", "--samples", path, "--paddocks", inputs["paddocks_ll"])
    assert r.exit_code == 0, r.stderr
    assert "sheet 'Resultados' of 2 read" in r.stderr and "'Portada'" in r.stderr
    project = tomllib.loads((tmp_path / "p" / "geosoil.toml").read_text())
    assert project["samples"]["sheet_or_layer"] == "Resultados"
    c = invoke("check", tmp_path / "p")
    assert c.exit_code == 0, c.stderr


@pytest.mark.parametrize("header, key", [
    ("Kennung,Longitude,Latitude", "id_column"),  # an ID header geosoil does not know
    ("Sample ID,Ost,Nord", "x_column"),           # coordinate headers it does not know
])
def test_new_writes_the_project_when_the_id_or_coordinates_need_a_setting(
    inputs: dict[str, Path], tmp_path: Path, header: str, key: str
) -> None:
    # user trial: 'new' wrote nothing, yet its fix pointed at settings in the file it did
    # not write
    head = inputs["lab_ll"].read_text().splitlines()[0].split(",", 3)[3]
    lab = _lab_from(inputs, tmp_path, f"{header},{head}", lambda f: f)
    r = invoke("new", tmp_path / "p", "--samples", lab, "--paddocks", inputs["paddocks_ll"])
    assert r.exit_code == 0, r.stderr
    assert f"set [samples] {key}" in r.stderr and "the project is written" in r.stderr
    text = (tmp_path / "p" / "geosoil.toml").read_text()
    assert f"# {key} = ..." in text and "To settle before 'geosoil check' passes" in text
    project = tomllib.loads(text)
    assert project["samples"]["columns"]["ca"] == "Exch Ca (meq/100g)"
    c = invoke("check", tmp_path / "p")
    problems = [ln for ln in c.stderr.splitlines() if ln.startswith("problem:")]
    assert c.exit_code == 1 and len(problems) == 1 and f"[samples] {key}" in problems[0]


def test_new_names_every_undecided_column_when_id_and_coordinates_are_unknown(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    # user trial: with neither the ID nor the coordinate columns known, 'new' named only the
    # ID; every undecided one (ID, x, y and the units nothing states) is named
    lab = _lab_from(inputs, tmp_path, "Kennung,Ost,Nord,pH (CaCl2),Ca,Mg,K (cmol/kg),"
                    "Na (cmol/kg),Al (cmol/kg),Exch. Acidity (cmol/kg)", lambda f: f)
    r = invoke("new", tmp_path / "p", "--samples", lab, "--paddocks", inputs["paddocks_ll"])
    assert r.exit_code == 0, r.stderr
    said = [ln for ln in r.stderr.splitlines() if "the project is written" in ln]
    assert len(said) == 1
    for words in ("sample ID", "x (longitude or easting)", "y (latitude or northing)",
                  "[samples] id_column", "[samples] x_column", "[samples] y_column",
                  "no unit stated for 'Ca', 'Mg'", "they are set"):
        assert words in said[0], words
    text = (tmp_path / "p" / "geosoil.toml").read_text()
    top = text.split("\n[samples]\n")[0]
    settle = top.split("To settle before 'geosoil check' passes:")[1]
    for words in ("[samples] id_column", "[samples] x_column", "[samples] y_column",
                  "no unit stated for 'Ca', 'Mg'", "[samples.units]"):
        assert words in settle, words
    c = invoke("check", tmp_path / "p")
    problems = [ln for ln in c.stderr.splitlines() if ln.startswith("problem:")]
    assert c.exit_code == 1 and len(problems) == 1
    assert all(f"[samples] {k}" in problems[0] for k in ("id_column", "x_column", "y_column"))


def test_new_recognises_german_and_spanish_id_and_coordinates(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    head = inputs["lab_ll"].read_text().splitlines()[0].split(",", 3)[3]
    for n, header in enumerate(("Probe,Längengrad,Breitengrad", "Muestra,Longitud,Latitud")):
        lab = _lab_from(inputs, tmp_path, f"{header},{head}", lambda f: f, name=f"lab{n}.csv")
        r = invoke("new", tmp_path / f"p{n}", "--samples", lab,
                   "--paddocks", inputs["paddocks_ll"])
        assert r.exit_code == 0 and "To settle" not in (
            tmp_path / f"p{n}" / "geosoil.toml").read_text()
        assert invoke("check", tmp_path / f"p{n}").exit_code == 0


def test_a_longitude_letter_o_the_headers_do_not_decide_is_left_to_the_user(
    inputs: dict[str, Path], tmp_path: Path
) -> None:
    # 'O' is west in Spanish, Portuguese and French but east (Ost) in German: with English
    # headers `new` writes the project with [samples] letter_o to settle, check names it,
    # and 'east' (these longitudes are 147 E) settles it
    def dms(fields: list[str]) -> list[str]:
        lon = float(fields[1])
        return [fields[0], f"{int(lon)}°{(lon - int(lon)) * 60:.5f}'O", *fields[2:]]

    head = inputs["lab_ll"].read_text().splitlines()[0]
    lab = _lab_from(inputs, tmp_path, head, dms)
    r = invoke("new", tmp_path / "p", "--samples", lab, "--paddocks", inputs["paddocks_ll"])
    assert r.exit_code == 0, r.stderr
    text = (tmp_path / "p" / "geosoil.toml").read_text()
    settle = text.split("To settle before 'geosoil check' passes:")[1].split("\n[")[0]
    assert "letter O of a longitude" in settle and "letter_o" in settle
    c = invoke("check", tmp_path / "p")
    problems = [ln for ln in c.stderr.splitlines() if ln.startswith("problem:")]
    assert c.exit_code == 1 and len(problems) == 1
    assert "row 2, column 'Longitude'" in problems[0] and "letter_o" in problems[0]
    (tmp_path / "p" / "geosoil.toml").write_text(
        text.replace('letter_o = "auto"', 'letter_o = "east"'))
    c = invoke("check", tmp_path / "p")
    assert not [ln for ln in c.stderr.splitlines() if ln.startswith("problem:")], c.stderr
