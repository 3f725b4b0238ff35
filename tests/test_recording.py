"""geosoil.recording: every warning a stage raises is recorded once, and recording never loops.

The project here is invented (one box paddock, twelve samples on a grid); the
warnings are planted by wrapping each stage's entry point, so what is checked is
the bookkeeping, not the agronomy.
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import textwrap
import warnings
from pathlib import Path

import geopandas as gpd
import pytest
import shapely

from geosoil import job, pipeline
from geosoil.errors import DataWarning, InputError, InterpolationWarning, RateWarning
from geosoil.project import load_project
from geosoil.recording import LIBRARY_WARNINGS_KEPT, record_warnings
from tests.small_farm import UTM, X0, Y0, make_project

REPEATS = 500  # each planted warning is raised this many times


def noisy(stage: str, func, category: type[Warning] = DataWarning):  # noqa: ANN001, ANN201
    """``func`` that first raises, REPEATS times each, a geosoil warning, a library-style
    RuntimeWarning and a DeprecationWarning, all naming ``stage``."""

    def wrapper(*args, **kwargs):  # noqa: ANN002, ANN003, ANN202
        for _ in range(REPEATS):
            warnings.warn(f"planted in {stage}", category, stacklevel=2)
            warnings.warn(f"library noise in {stage}", RuntimeWarning, stacklevel=2)
            warnings.warn(f"old API in {stage}", DeprecationWarning, stacklevel=2)
        return func(*args, **kwargs)

    return wrapper


STAGES = {  # module, name, warning kind: one entry point of every stage of a run
    "reading": (pipeline, "read_paddocks", DataWarning),
    "surfaces": (pipeline, "interpolate_farm", InterpolationWarning),
    "rates": (pipeline, "compute_rates", RateWarning),
    "zones": (pipeline, "make_zones", RateWarning),
    "tonnage": (pipeline, "tonnage_table", RateWarning),
    "writing": (job, "write_outputs", DataWarning),
}


@pytest.fixture
def planted(monkeypatch: pytest.MonkeyPatch) -> None:
    for stage, (module, name, kind) in STAGES.items():
        monkeypatch.setattr(module, name, noisy(stage, getattr(module, name), kind))


def test_a_run_records_every_stage_s_warnings_once_each(tmp_path: Path, planted) -> None:  # noqa: ANN001
    project = load_project(make_project(tmp_path / "farm"))
    with warnings.catch_warnings(record=True) as outside:
        warnings.simplefilter("always")
        result = job.run(project, out_dir=tmp_path / "out")
    record = json.loads((tmp_path / "out" / "run.json").read_text(encoding="utf-8"))
    for stage in STAGES:
        for where in (result.warnings, record["warnings"]):
            # a rate warning names its paddock (pipeline.paddock_warnings): "paddock 'Home': ..."
            assert sum(w in (f"planted in {stage}", f"paddock 'Home': planted in {stage}")
                       for w in where) == 1, (stage, where)
            library = [w for w in where if w.startswith(f"library noise in {stage} ")]
            assert len(library) == 1 and "RuntimeWarning" in library[0], (stage, where)
            assert not any(f"old API in {stage}" in w for w in where)
    assert len(result.warnings) == len(set(result.warnings))
    # the developers' warnings leave the recorders for the filters outside, once each
    old_api = [str(w.message) for w in outside if issubclass(w.category, DeprecationWarning)]
    for stage in STAGES:
        assert 1 <= old_api.count(f"old API in {stage}") <= 3  # once per recorder it crossed


@pytest.mark.filterwarnings("ignore:old API in reading:DeprecationWarning")
def test_check_reports_the_warnings_of_a_stage_that_then_failed(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    project = load_project(make_project(tmp_path / "farm"))
    real = pipeline.read_samples

    def failing(*args, **kwargs):  # noqa: ANN002, ANN003, ANN202
        real(*args, **kwargs)
        raise InputError("planted failure", file="lab.csv", row=3)

    monkeypatch.setattr(pipeline, "read_paddocks", noisy("reading", pipeline.read_paddocks))
    monkeypatch.setattr(pipeline, "read_samples", failing)
    problems, found = pipeline.check(project)
    assert problems == ["lab.csv, row 3: planted failure"]
    assert found.count("planted in reading") == 1
    assert len([w for w in found if w.startswith("library noise in reading ")]) == 1


def test_nested_recorders_hand_each_warning_outwards_once() -> None:
    outer: list[str] = []
    inner: list[str] = []
    with record_warnings(outer):
        with record_warnings(inner):
            for _ in range(REPEATS):
                warnings.warn("deep", DataWarning, stacklevel=2)
                warnings.warn("numpy says", RuntimeWarning, stacklevel=2)
        warnings.warn("shallow", DataWarning, stacklevel=2)
    assert inner[0] == "deep" and inner[1].startswith("numpy says (RuntimeWarning")
    assert len(inner) == 2
    assert outer == [*inner, "shallow"]


def test_a_block_that_raises_still_records() -> None:
    found: list[str] = []
    with pytest.raises(ZeroDivisionError), record_warnings(found):
        warnings.warn("before the failure", DataWarning, stacklevel=2)
        1 / 0  # noqa: B018
    assert found == ["before the failure"]


def test_library_warnings_with_a_new_message_each_time_are_bounded() -> None:
    found: list[str] = []
    with record_warnings(found):
        for i in range(10 * LIBRARY_WARNINGS_KEPT):
            warnings.warn(f"cell {i} is odd", RuntimeWarning, stacklevel=2)
        warnings.warn("ours is always kept", DataWarning, stacklevel=2)
    assert len([w for w in found if w.startswith("cell ")]) == LIBRARY_WARNINGS_KEPT
    assert "ours is always kept" in found
    assert any(w.startswith(f"{9 * LIBRARY_WARNINGS_KEPT} more distinct library warning")
               for w in found)


def test_nested_recording_of_library_warnings_ends_within_a_memory_limit() -> None:
    """The old recorder raised each library warning again inside its own recording, so
    the list it walked grew without end (a NaN vertex made 'check' fill 24 GB). In a
    child process capped at 1 GiB of address space, a loop would end in MemoryError."""
    code = textwrap.dedent("""
        import resource, warnings
        resource.setrlimit(resource.RLIMIT_AS, (1 << 30, 1 << 30))
        from geosoil.recording import record_warnings
        found = []
        with record_warnings(found):
            with record_warnings([]):
                with record_warnings([]):
                    warnings.warn("invalid value encountered", RuntimeWarning)
        print(len(found))
    """)
    assert resource.getrlimit(resource.RLIMIT_AS)  # the limit exists on this platform
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=600, check=False)
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.strip() == "1"


@pytest.mark.filterwarnings("ignore:invalid value encountered:RuntimeWarning")
def test_a_nan_vertex_in_a_paddock_is_a_named_problem_for_check(tmp_path: Path) -> None:
    """A NaN vertex once sent 'check' into the recording loop above; now the boundary
    reader names it (file, feature, paddock, vertex) before any geometry library
    warns."""
    farm = make_project(tmp_path / "farm")
    ring = [(X0, Y0), (X0 + 400, Y0), (X0 + 400, float("nan")), (X0, Y0 + 300), (X0, Y0)]
    (farm / "paddocks.gpkg").unlink()
    gpd.GeoDataFrame({"name": ["Home"]}, geometry=[shapely.Polygon(ring)],
                     crs=UTM).to_file(farm / "paddocks.gpkg")
    problems, _found = pipeline.check(load_project(farm))
    assert len(problems) == 1
    assert "paddocks.gpkg, row 1" in problems[0] and "paddock 'Home'" in problems[0]
    assert "vertex 3" in problems[0] and "not a number" in problems[0]
