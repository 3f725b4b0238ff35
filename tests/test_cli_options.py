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
