"""Options every command shares (``cli/options.py``): -q and -v before or after the command."""

from __future__ import annotations

import logging
from collections.abc import Iterator
from pathlib import Path

import pytest
from click.testing import CliRunner
from geosoil.cli.main import cli
from geosoil.cli.options import set_verbosity

COMMANDS = ["new", "check", "run", "demo", "explain", "plan", "compare", "batch"]


@pytest.fixture(autouse=True)
def _default_log_level() -> Iterator[None]:
    set_verbosity(0, False)
    yield
    set_verbosity(0, False)


def _arguments(command: str, tmp: Path) -> list[str]:
    """Arguments that reach ``command``'s body and stop there on an input problem (exit 1,
    before anything is computed): a project file with an unknown key, or an output folder
    that is not empty."""
    bad = tmp / "bad"
    bad.mkdir(exist_ok=True)
    (bad / "geosoil.toml").write_text("[bogus]\nx = 1\n", encoding="utf-8")
    full = tmp / "full"
    full.mkdir(exist_ok=True)
    (full / "mine.txt").write_text("not geosoil's", encoding="utf-8")
    empty = tmp / "empty.csv"
    empty.write_text("", encoding="utf-8")
    return {
        "new": [str(tmp / "p"), "--samples", str(empty), "--paddocks", str(empty)],
        "check": [str(bad)],
        "run": [str(bad), "--out", str(tmp / "out")],
        "demo": ["--out", str(full)],
        "explain": [str(bad), "--at", "147.0,-34.0"],
        "plan": [str(bad), "--points", "3", "--out", str(tmp / "out")],
        "compare": [str(bad), str(bad), "--out", str(tmp / "out")],
        "batch": [str(bad), "--out", str(full)],
    }[command]


@pytest.mark.parametrize("flag, level", [("-q", logging.ERROR), ("--quiet", logging.ERROR),
                                         ("-v", logging.INFO), ("-vv", logging.DEBUG)])
@pytest.mark.parametrize("command", COMMANDS)
def test_a_verbosity_flag_works_before_and_after_every_command(
    command: str, flag: str, level: int, tmp_path: Path,
) -> None:
    """Issue: 'geosoil run FARM --out X -q' was a usage error; only 'geosoil -q run' worked.
    Both placements now give the same exit status and output and set the same log level."""
    args = _arguments(command, tmp_path)
    results = []
    for argv in ([flag, command, *args], [command, *args, flag]):
        set_verbosity(0, False)
        r = CliRunner().invoke(cli, argv)
        assert r.exit_code == 1, (argv, r.output)  # the input problem, not a usage error (2)
        assert "No such option" not in r.stderr
        assert logging.getLogger("geosoil").level == level, argv
        results.append((r.exit_code, r.stdout, r.stderr))
    assert results[0] == results[1]


def test_the_flags_given_in_both_places_add_up(tmp_path: Path) -> None:
    r = CliRunner().invoke(cli, ["-v", "check", *_arguments("check", tmp_path), "-v"])
    assert r.exit_code == 1
    assert logging.getLogger("geosoil").level == logging.DEBUG  # -v and -v = -vv
    r = CliRunner().invoke(cli, ["-v", "check", *_arguments("check", tmp_path), "-q"])
    assert logging.getLogger("geosoil").level == logging.ERROR  # quiet wins, as on the group


@pytest.mark.parametrize("command", COMMANDS)
def test_every_command_lists_the_flags_in_its_help(command: str) -> None:
    r = CliRunner().invoke(cli, [command, "--help"])
    assert r.exit_code == 0
    assert "-q, --quiet" in r.stdout and "-v, --verbose" in r.stdout


def _option_mistakes(tmp: Path) -> list[tuple[str, list[str], str]]:
    """(command, arguments, the option the message must name): command-line mistakes of
    every command, each of which the README says exits 2 (click's usage errors)."""
    from geosoil import demo_farm

    demo = Path(demo_farm.__file__).parent  # a valid project: the mistake is the option's
    a_file = tmp / "a-file.txt"
    a_file.write_text("x", encoding="utf-8")
    lab, pads = demo / "lab_results.csv", demo / "paddocks.geojson"
    return [
        ("new", [str(tmp / "p"), "--samples", str(lab), "--paddocks", str(pads),
                 "--crs", "EPSG:999999"], "--crs"),
        ("check", [str(demo), "--bogus"], "--bogus"),
        ("run", [str(demo), "--out", str(a_file)], "--out"),
        ("demo", ["--out", str(a_file)], "--out"),
        ("explain", [str(demo), "--at", "147.45"], "--at"),
        ("explain", [str(demo), "--at", "147.45,-34.69", "--coords", "utm"], "--coords"),
        ("plan", [str(demo), "--points", "3", "--variable", "zinc", "--out", str(tmp / "o")],
         "--variable"),
        ("plan", [str(demo), "--budget", "10", "--cost-per-sample", "45",
                  "--out", str(tmp / "o")], "--budget"),
        ("plan", [str(demo), "--points", "3", "--weight", "limit", "--variable", "ca",
                  "--out", str(tmp / "o")], "--weight"),
        ("compare", [str(demo), str(demo), "--out", str(tmp / "o"),
                     "--ph-conversion", "pH = 3"], "--ph-conversion"),
        ("compare", [str(demo), str(demo), "--out", str(tmp / "o"),
                     "--ph-conversion", "water = water + 1"], "--ph-conversion"),
        ("compare", [str(demo), str(demo), "--out", str(tmp / "o"), "--z", "0"], "--z"),
        ("batch", [str(demo), "--out", str(tmp / "b"), "--memory-limit", "lots"],
         "--memory-limit"),
        ("batch", [str(demo), "--out", str(tmp / "b"), "--workers", "0"], "--workers"),
    ]


@pytest.mark.parametrize("k", range(14))
def test_a_command_line_mistake_exits_2_naming_the_option(
        k: int, tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """README: exit 2 for a mistake on the command line (was 1 with "setting '--budget'" for
    the options the library checks); the option is named; nothing is written."""
    # the bundled demo names no cache folder: a case that computes the farm before its
    # option is refused must not fill the session's cache, which the demo_run fixture
    # expects empty of the demo's surfaces
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg-cache"))
    cases = _option_mistakes(tmp_path)
    assert len(cases) == 14
    command, args, option = cases[k]
    r = CliRunner().invoke(cli, [command, *args])
    assert r.exit_code == 2, (command, r.output)
    assert f"'{option}'" in r.stderr or f"{option}" in r.stderr.split("Error:")[-1], r.stderr
    assert f"cli {command} [OPTIONS]" in r.stderr  # the usage line (the runner names it cli)
    assert "setting '--" not in r.stderr
    assert not (tmp_path / "o").exists() and not (tmp_path / "p").exists()
