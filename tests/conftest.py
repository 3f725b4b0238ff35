"""Shared test configuration.

Under CI (``CI=true``) hypothesis runs derandomised, so a run is repeatable on a
fresh machine with an empty example database. The demo farm is run once per test
session (``demo_run``) and shared by the test files that read its results.
"""

from __future__ import annotations

import json
import os
from types import SimpleNamespace

import pytest
from hypothesis import settings

from geosoil.job import run
from geosoil.project import load_project
from tests.demofarm import copy_demo, snapshot

settings.register_profile("ci", derandomize=True, deadline=None, print_blob=True)
settings.register_profile("dev", deadline=None)
settings.load_profile("ci" if os.environ.get("CI", "").lower() == "true" else "dev")


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory: pytest.TempPathFactory) -> SimpleNamespace:
    """The whole job on a copy of the demo farm, once per session (read-only for the tests).

    ``farm`` (the copy), ``cache`` (its surface cache, outside it), ``out`` (the output
    folder), ``project``, ``result`` (:class:`geosoil.job.RunResult`; ``result.farm`` is
    the computed farm), ``record`` (``run.json``) and ``before`` (the copy's files before
    the run).
    """
    base = tmp_path_factory.mktemp("demo-run")
    farm, cache = copy_demo(base)
    before = snapshot(farm)
    project = load_project(farm)
    result = run(project, out_dir=base / "out")
    record = json.loads((base / "out" / "run.json").read_text(encoding="utf-8"))
    return SimpleNamespace(base=base, farm=farm, cache=cache, out=base / "out", project=project,
                           result=result, record=record, before=before)
