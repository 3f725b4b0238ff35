"""Shared test configuration.

Under CI (``CI=true``) hypothesis runs derandomised, so a run is repeatable on a
fresh machine with an empty example database.

The demo farm is run once per test session (``demo_run``): ``geosoil demo`` through the
command line, from an unrelated working folder into a relative ``--out``, with the
session's surface cache (``session_cache``). Every test that only reads the demo's
results shares it; a test that needs a changed farm copies it (``tests/demofarm.py``),
with the session's cache where its change leaves the surfaces as they are.

No test writes the user's own cache folder: ``XDG_CACHE_HOME`` points into the session's
temporary folder for the whole session (``_session_cache_home``).

The browser tests share one headless Chromium per session (``browser``); each test
opens its own pages and closes them.
"""

from __future__ import annotations

import dataclasses
import json
import os
from collections.abc import Iterator
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import pytest
from click.testing import CliRunner
from geosoil.cli.demo import demo_project_file
from geosoil.cli.main import cli
from hypothesis import settings

import geosoil.job
from geosoil.project import load_project
from tests.demofarm import snapshot

settings.register_profile("ci", derandomize=True, deadline=None, print_blob=True)
settings.register_profile("dev", deadline=None)
settings.load_profile("ci" if os.environ.get("CI", "").lower() == "true" else "dev")


@pytest.fixture(scope="session", autouse=True)
def _session_cache_home(tmp_path_factory: pytest.TempPathFactory) -> Any:
    """``XDG_CACHE_HOME`` of the session's own (surfaces, compiled page templates)."""
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("XDG_CACHE_HOME", str(tmp_path_factory.getbasetemp() / "xdg-cache"))
        yield


@pytest.fixture(scope="session")
def session_cache(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The session's surface cache folder: ``$XDG_CACHE_HOME/geosoil`` of ``demo_run``
    (never the user's cache). Copies of the demo farm that keep its surfaces name it."""
    return tmp_path_factory.getbasetemp() / "xdg-cache" / "geosoil"


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory: pytest.TempPathFactory, session_cache: Path) -> SimpleNamespace:
    """``geosoil demo --out demo-out``, once per session (read-only for the tests).

    ``cli`` (click's result: ``exit_code``, ``stdout``, ``stderr``), ``out`` (the output
    folder), ``cwd`` (the working folder it ran from), ``farm`` (the bundled demo folder),
    ``before`` and ``after`` (its files before and after the run), ``cache`` (the session's
    cache folder), ``project`` (the demo's project with that cache folder named, for tests
    that compute variants of it), ``result`` (the :class:`geosoil.job.RunResult` the
    command computed; ``result.farm`` is the computed farm) and ``record`` (``run.json``).
    """
    cwd = tmp_path_factory.mktemp("somewhere")
    farm = demo_project_file().parent
    before = snapshot(farm)
    results: list[geosoil.job.RunResult] = []
    run_job = geosoil.job.run

    def keep(*args: Any, **kwargs: Any) -> geosoil.job.RunResult:
        results.append(run_job(*args, **kwargs))
        return results[-1]

    with pytest.MonkeyPatch.context() as mp:
        mp.chdir(cwd)
        mp.setattr(geosoil.job, "run", keep)  # the command's own result, kept for the tests
        cli_result = CliRunner().invoke(cli, ["demo", "--out", "demo-out"],
                                        env={"XDG_CACHE_HOME": str(session_cache.parent)})
    out = cwd / "demo-out"
    assert cli_result.exit_code == 0, cli_result.stderr
    assert len(results) == 1
    project = load_project(farm / "geosoil.toml")
    output = dataclasses.replace(project.settings.output, cache_dir=session_cache)
    project = dataclasses.replace(
        project, settings=dataclasses.replace(project.settings, output=output))
    record = json.loads((out / "run.json").read_text(encoding="utf-8"))
    return SimpleNamespace(cli=cli_result, out=out, cwd=cwd, farm=farm, before=before,
                           after=snapshot(farm), cache=session_cache, project=project,
                           result=results[0], record=record)


@pytest.fixture(scope="session")
def browser() -> Iterator[Any]:
    """One headless Chromium for the session's browser tests (``tests/browser.py``; skipped
    without Chromium, except under ``CI=true``). Tests open and close their own pages."""
    from tests.browser import Chromium, require_chromium

    with Chromium(require_chromium()) as chromium:
        yield chromium
