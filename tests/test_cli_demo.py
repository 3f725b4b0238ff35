"""``geosoil demo --out DIR``: the whole job on the bundled demo farm, from any folder."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from click.testing import CliRunner
from geosoil.cli.demo import demo_project_file
from geosoil.cli.main import cli


def _tree(root: Path) -> list[tuple[str, int]]:
    return sorted((str(p.relative_to(root)), p.stat().st_size) for p in root.rglob("*")
                  if "__pycache__" not in p.parts)


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory: pytest.TempPathFactory):  # noqa: ANN201
    """One demo run with a relative --out from an unrelated working folder."""
    cwd = tmp_path_factory.mktemp("somewhere")
    xdg = tmp_path_factory.getbasetemp() / "xdg-cache"  # never the user's cache
    demo_folder = demo_project_file().parent
    before = _tree(demo_folder)
    runner = CliRunner()
    with runner.isolated_filesystem(temp_dir=cwd) as here:
        result = runner.invoke(cli, ["demo", "--out", "demo-out"], env={"XDG_CACHE_HOME": str(xdg)})
        out = Path(here) / "demo-out"
    return {"result": result, "out": out, "before": before, "after": _tree(demo_folder),
            "demo_folder": demo_folder}


def test_help() -> None:
    r = CliRunner().invoke(cli, ["demo", "--help"])
    assert r.exit_code == 0 and "--out" in r.stdout and "invented" in r.stdout


def test_top_level_help_lists_the_five_commands_and_says_rates_are_advisory() -> None:
    r = CliRunner().invoke(cli, ["--help"])
    assert r.exit_code == 0
    for command in ("new", "check", "run", "demo", "explain"):
        assert re.search(rf"^  {command}\s", r.stdout, re.M)
    assert "advisory" in r.stdout
    assert "--quiet" in r.stdout and "--verbose" in r.stdout
    r = CliRunner().invoke(cli, ["--version"])
    assert r.exit_code == 0 and "geosoil" in r.stdout


def test_unknown_command_and_option_are_usage_errors() -> None:
    r = CliRunner().invoke(cli, ["demoo"])
    assert r.exit_code == 2 and "demoo" in r.stderr and r.stdout == ""
    r = CliRunner().invoke(cli, ["--loud", "demo"])
    assert r.exit_code == 2 and "--loud" in r.stderr


def test_demo_runs_from_any_folder_into_a_relative_out(demo_run) -> None:  # noqa: ANN001
    r = demo_run["result"]
    assert r.exit_code == 0, r.stderr
    out: Path = demo_run["out"]
    record = json.loads((out / "run.json").read_text())
    assert record["project_file"] == str(demo_project_file().resolve())
    assert {"tonnage.csv", "map.html", "report.html", "samples.csv", "passes.csv"} <= {
        p.name for p in out.iterdir()}
    assert "Bellbird Rise" in (out / "report.html").read_text(encoding="utf-8")
    assert "Cautions:" in r.stdout and "Farm" in r.stdout
    assert "demo farm project" in r.stderr


def test_demo_writes_nothing_into_the_demo_folder(demo_run) -> None:  # noqa: ANN001
    assert demo_run["after"] == demo_run["before"]


def test_demo_needs_out() -> None:
    r = CliRunner().invoke(cli, ["demo"])
    assert r.exit_code == 2 and "--out" in r.stderr and r.stdout == ""


def test_demo_refuses_its_own_folder_and_a_used_folder(demo_run, tmp_path: Path) -> None:  # noqa: ANN001
    r = CliRunner().invoke(cli, ["demo", "--out", str(demo_run["demo_folder"]), "--overwrite"])
    assert r.exit_code == 1 and r.stdout == ""
    assert "\nerror: the output folder" in r.stderr and "input" in r.stderr
    (tmp_path / "used").mkdir()
    (tmp_path / "used" / "notes.txt").write_text("mine")
    r = CliRunner().invoke(cli, ["demo", "--out", str(tmp_path / "used")])
    assert r.exit_code == 1 and "--overwrite" in r.stderr
    assert [p.name for p in (tmp_path / "used").iterdir()] == ["notes.txt"]
