"""The project file: loading, validation messages, relative paths, and the template round trip."""

from __future__ import annotations

import dataclasses
import re
import tomllib
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given
from hypothesis import settings as hsettings
from hypothesis import strategies as st

from geosoil.boundaries import BoundarySettings
from geosoil.errors import InputError, SettingsError
from geosoil.products import ProductSettings
from geosoil.project import (
    PROJECT_FILE_NAME,
    OutputSettings,
    ProjectSettings,
    SoilSettings,
    TonnageSettings,
    default_products,
    load_project,
    load_project_problems,
    parse_project,
    settings_problems,
    template,
)
from geosoil.samples import SampleSettings
from geosoil.settings import describe
from geosoil.surfaces import FixedVariogram, InterpolationSettings

MINIMAL = """\
[samples]
file = "lab.csv"

[boundaries]
paddocks = "paddocks.geojson"
"""


def _write(folder: Path, text: str) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / PROJECT_FILE_NAME
    path.write_text(text, encoding="utf-8")
    return path


def _defaults(root: Path) -> ProjectSettings:
    return ProjectSettings(
        samples=SampleSettings(file=root / "lab.csv"),
        boundaries=BoundarySettings(paddocks=root / "paddocks.geojson"),
    )


# --------------------------------------------------------------------------- paths


def test_relative_paths_resolve_from_the_project_folder_not_the_working_folder(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    project = tmp_path / "farm" / "2024"
    _write(
        project,
        '[samples]\nfile = "data/lab.csv"\n'
        '[boundaries]\npaddocks = "../common/paddocks.geojson"\n'
        f'exclusions = "{(tmp_path / "abs" / "dams.geojson").as_posix()}"\n',
    )
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    for given_as in (project, project / PROJECT_FILE_NAME, Path("../farm/2024")):
        p = load_project(given_as)
        assert p.settings.samples.file == (project / "data" / "lab.csv").resolve()
        assert p.settings.boundaries.paddocks == (tmp_path / "farm" / "common" / "paddocks.geojson")
        assert p.settings.boundaries.exclusions == tmp_path / "abs" / "dams.geojson"
        assert p.path == (project / PROJECT_FILE_NAME).resolve()
        assert p.folder == project.resolve()
        assert p.settings.samples.file in p.input_files()


def test_a_missing_project_file_says_how_to_make_one(tmp_path: Path) -> None:
    with pytest.raises(InputError) as err:
        load_project(tmp_path)
    assert PROJECT_FILE_NAME in str(err.value)
    assert "geosoil new" in str(err.value)


def test_a_byte_order_mark_is_accepted(tmp_path: Path) -> None:
    path = tmp_path / PROJECT_FILE_NAME
    path.write_bytes(b"\xef\xbb\xbf" + MINIMAL.encode())
    assert load_project(path).settings.samples.file == tmp_path / "lab.csv"


def test_invalid_toml_names_the_file_and_the_line(tmp_path: Path) -> None:
    path = _write(tmp_path, MINIMAL + "[grid]\ncell_size_m = = 5\n")
    with pytest.raises(InputError) as err:
        load_project(path)
    msg = str(err.value)
    assert str(path) in msg and "not valid TOML" in msg and "line 7" in msg


# --------------------------------------------------------------------------- validation


def _problem(text: str, tmp_path: Path) -> SettingsError:
    with pytest.raises(SettingsError) as err:
        parse_project(text, base_dir=tmp_path)
    return err.value


def test_unknown_table_is_rejected_with_the_nearest_table(tmp_path: Path) -> None:
    err = _problem(MINIMAL + '\n[outputs]\nrate_unit = "t/ha"\n', tmp_path)
    assert err.key == "outputs"
    assert "unknown key" in str(err) and "did you mean 'output'?" in str(err)


def test_typo_in_a_key_suggests_the_valid_key(tmp_path: Path) -> None:
    err = _problem(MINIMAL + "\n[grid]\ncell_sise_m = 5\n", tmp_path)
    assert err.key == "grid.cell_sise_m"
    assert "did you mean 'cell_size_m'?" in str(err)


def test_out_of_range_names_the_key_and_the_range(tmp_path: Path) -> None:
    err = _problem(MINIMAL + "\n[soil]\ndepth_m = 5\n", tmp_path)
    assert err.key == "soil.depth_m"
    assert "from 0.01 to 1 m" in str(err) and "got 5" in str(err)


def test_wrong_type_names_the_key(tmp_path: Path) -> None:
    err = _problem(MINIMAL + '\n[grid]\ncell_size_m = "ten"\n', tmp_path)
    assert err.key == "grid.cell_size_m"
    assert "must be a number" in str(err)


def test_a_choice_lists_the_allowed_values(tmp_path: Path) -> None:
    err = _problem(MINIMAL + '\n[rates.lime]\nmethod = "kamprat"\n', tmp_path)
    assert err.key == "rates.lime.method"
    assert "did you mean 'kamprath'" in str(err)
    assert "kamprath, cochrane, acidity_share" in str(err)


def test_a_price_for_a_product_that_is_not_defined_names_the_key_and_the_nearest(
    tmp_path: Path
) -> None:
    # a typo would leave gypsum without a price and the total cost short, silently
    err = _problem(MINIMAL + "\n[tonnage]\nprice_per_t = { gypsm = 60.0, lime = 45.0 }\n",
                   tmp_path)
    assert err.key == "tonnage.price_per_t.gypsm"
    assert "did you mean 'gypsum'?" in str(err) and "gypsum, lime" in str(err)


def test_a_per_pass_limit_for_a_product_that_is_not_defined_names_the_key(
    tmp_path: Path
) -> None:
    # a typo would leave gypsum without its per-pass limit, silently
    err = _problem(MINIMAL + "\n[spreader]\nmax_per_pass_by_product = { gypsom = 5000.0 }\n",
                   tmp_path)
    assert err.key == "spreader.max_per_pass_by_product.gypsom"
    assert "did you mean 'gypsum'?" in str(err)


def test_a_missing_required_key_is_named(tmp_path: Path) -> None:
    err = _problem('[boundaries]\npaddocks = "p.geojson"\n', tmp_path)
    assert err.key == "samples"


def test_every_settings_problem_is_listed_not_only_the_first(tmp_path: Path) -> None:
    text = (
        'farm = 3\n' + MINIMAL
        + '\n[soil]\ndepth_m = 5\nbulk_density_by_paddock = { "Block 2.1" = 9.0 }\n'
        + '\n[grid]\ncell_sise_m = 5\n'
        + '\n[rates.gypsum]\ntarget_esp_percent = 150\n'
        + '\n[outputs]\nx = 1\n'
    )
    settings, problems = settings_problems(text, base_dir=tmp_path)
    assert settings is None
    keys = {p.key for p in problems}  # type: ignore[attr-defined]
    assert keys == {
        "farm", "soil.depth_m", "soil.bulk_density_by_paddock.Block 2.1", "grid.cell_sise_m",
        "rates.gypsum.target_esp_percent", "outputs",
    }
    # load_project raises one error that lists them all
    path = _write(tmp_path, text)
    with pytest.raises(SettingsError) as err:
        load_project(path)
    for key in keys:
        assert f"setting '{key}'" in str(err.value)
    project, listed = load_project_problems(path)
    assert project is None and len(listed) == len(keys)


def test_a_valid_file_has_no_problems(tmp_path: Path) -> None:
    settings, problems = settings_problems(MINIMAL, base_dir=tmp_path)
    assert problems == [] and settings == _defaults(tmp_path)
    project, problems = load_project_problems(_write(tmp_path, MINIMAL))
    assert problems == [] and project is not None


# --------------------------------------------------------------------------- the template


def test_template_of_the_defaults_parses_back_to_the_defaults(tmp_path: Path) -> None:
    s = _defaults(tmp_path)
    assert parse_project(template(s), base_dir=tmp_path / "elsewhere") == s


def _all_keys(cls: type, prefix: str = "") -> list[str]:
    import typing

    hints = typing.get_type_hints(cls)
    keys = []
    for doc in describe(cls):
        tp = hints[doc.key]
        if dataclasses.is_dataclass(tp):
            keys += _all_keys(tp, f"{prefix}{doc.key}.")
        else:
            keys.append(prefix + doc.key)
    return keys


def test_template_writes_every_setting_with_a_comment(tmp_path: Path) -> None:
    text = template(_defaults(tmp_path))
    for line in text.splitlines():
        if line.strip() and not line.startswith(("[", "#")):
            assert "  # " in line, f"no comment: {line}"
    # every key of every table appears (written or commented out), dict-of-table keys included
    for key in _all_keys(ProjectSettings):
        leaf = key.rsplit(".", 1)[-1]
        assert re.search(rf"^(# )?{re.escape(leaf)}\b", text, re.M), key
    # the units are in the key names or in the comments
    assert re.search(r"^depth_m = .*\[m\]$", text, re.M)
    assert re.search(r"^bulk_density_g_cm3 = .*\[g/cm3\]$", text, re.M)


def test_template_comments_out_unset_keys_and_they_read_back_as_unset(tmp_path: Path) -> None:
    text = template(_defaults(tmp_path))
    data = tomllib.loads(text)
    assert "crs" not in data["samples"] and re.search(r"^# crs\b", text, re.M)
    assert "truck_capacity_t" not in data["tonnage"]


_names = st.text(
    alphabet=st.characters(codec="utf-8", exclude_categories=("Cs", "Cc")), min_size=1, max_size=12
)


@hsettings(max_examples=40, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    farm=st.text(alphabet=st.characters(codec="utf-8", exclude_categories=("Cs",)), max_size=20),
    bd=st.dictionaries(_names, st.floats(0.5, 2.0), max_size=3),
    prices=st.dictionaries(_names, st.floats(0, 1e4), max_size=3),
    product_names=st.lists(_names, max_size=2, unique=True),
    purity=st.floats(1, 100),
    passing=st.lists(st.floats(0, 100), min_size=3, max_size=3).map(
        lambda v: sorted(v, reverse=True)
    ),
    log_transform=st.lists(st.sampled_from(["na", "ca", "mg", "k", "acidity", "al"]),
                           unique=True, max_size=3),
    capacity=st.none() | st.floats(0.1, 100),
    columns=st.dictionaries(st.sampled_from(["ca", "mg", "na", "ph"]), _names, max_size=3),
    fixed=st.booleans(),
)
def test_template_round_trip_with_tables_and_lists(
    tmp_path: Path, farm: str, bd: dict[str, float], prices: dict[str, float],
    product_names: list[str], purity: float, passing: list[float], log_transform: list[str],
    capacity: float | None, columns: dict[str, str], fixed: bool,
) -> None:
    products = default_products()
    for name in product_names:
        products[name] = ProductSettings(material="gypsum", label=name, purity_percent=purity)
    products["lime"] = ProductSettings(percent_passing=tuple(passing))
    # prices are for defined products (a price for another name is refused)
    prices = dict(zip(sorted(products), prices.values(), strict=False))
    base = _defaults(tmp_path)
    s = dataclasses.replace(
        base,
        farm=farm,
        samples=dataclasses.replace(base.samples, columns=columns, crs="EPSG:32755"),
        soil=SoilSettings(bulk_density_by_paddock=bd),
        tonnage=TonnageSettings(truck_capacity_t=capacity, price_per_t=prices),
        products=products,
        interpolation=InterpolationSettings(
            log_transform=tuple(log_transform),
            fixed={"ph": FixedVariogram(model="exponential", nugget=0.01, psill=0.2,
                                        range_m=150.0)} if fixed else {},
        ),
        output=OutputSettings(rate_unit="t/ha", cache_dir=tmp_path / "cache"),
    )
    text = template(s, header="a header\nof two lines")
    assert parse_project(text, base_dir=tmp_path) == s
