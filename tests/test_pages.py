"""The page templates' environments: compiled templates kept in the user's cache folder give
the same pages as templates compiled afresh, and an unsafe folder is not used."""

from __future__ import annotations

import os
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from types import SimpleNamespace

import jinja2
import pytest

from geosoil import outputs, pages

_LOAD = """
import sys
from geosoil import pages
env = pages.environment("report")
env.get_template("report.html")
sys.stdout.write(str(env.bytecode_cache is not None))
"""


@pytest.fixture
def own_cache(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Iterator[Path]:
    """A user cache folder of the test's own, and environments made afresh in it."""
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    pages.environment.cache_clear()
    yield tmp_path / "xdg" / "geosoil" / "templates"
    pages.environment.cache_clear()


def test_compiled_templates_are_kept_in_the_user_cache_and_taken_back(own_cache: Path) -> None:
    env = dict(os.environ)
    first = subprocess.run([sys.executable, "-c", _LOAD], env=env, capture_output=True,
                           text=True, check=True)
    assert first.stdout == "True"
    kept = sorted(own_cache.rglob("*.cache"))
    assert len(kept) == 1  # report.html (the templates it includes load when it renders)
    assert {p.parent.name.split("-")[0] for p in kept} == {"report"}
    assert own_cache.stat().st_mode & 0o777 == 0o700
    mtimes = {p: p.stat().st_mtime_ns for p in kept}
    second = subprocess.run([sys.executable, "-c", _LOAD], env=env, capture_output=True,
                            text=True, check=True)
    assert second.stdout == "True"
    # taken back, not compiled and written again
    assert {p: p.stat().st_mtime_ns for p in sorted(own_cache.rglob("*.cache"))} == mtimes


def test_the_demo_pages_from_kept_templates_equal_pages_compiled_afresh(
        own_cache: Path, demo_run: SimpleNamespace, monkeypatch: pytest.MonkeyPatch) -> None:
    farm = demo_run.result.farm
    data = outputs.report_input(farm, demo_run.record)  # one creation time for all three

    def pages_now() -> tuple[str, str]:
        from geosoil import report

        return report.build_report(data), outputs.build_farm_map(farm)

    cold = pages_now()  # compiles and keeps every template
    assert sorted(p.parent.name.split("-")[0] for p in own_cache.rglob("*.cache")).count(
        "map") == 1
    pages.environment.cache_clear()
    warm = pages_now()  # new environments: every template taken from the folder
    kinds = dict(pages._OPTIONS)

    def afresh(kind: str) -> jinja2.Environment:
        return jinja2.Environment(loader=jinja2.PackageLoader("geosoil", "templates"),
                                  autoescape=jinja2.select_autoescape(["html"]),
                                  **kinds[kind])

    from geosoil import report, webmap

    monkeypatch.setattr(report, "_templates", lambda: afresh("report"))
    monkeypatch.setattr(webmap, "_templates", lambda: afresh("map"))
    plain = pages_now()
    assert cold == warm == plain


def test_a_folder_other_users_can_write_to_is_not_used(own_cache: Path) -> None:
    own_cache.mkdir(parents=True)
    own_cache.chmod(0o777)
    env = pages.environment("report")
    assert env.bytecode_cache is None
    env.get_template("report.html")  # compiled in memory all the same
    assert list(own_cache.rglob("*.cache")) == []


def test_a_file_where_the_folder_should_be_is_not_used(own_cache: Path) -> None:
    own_cache.parent.mkdir(parents=True)
    own_cache.write_text("not a folder", encoding="utf-8")
    env = pages.environment("map")
    assert env.bytecode_cache is None
    assert env.get_template("map.html") is not None
    assert own_cache.read_text(encoding="utf-8") == "not a folder"
