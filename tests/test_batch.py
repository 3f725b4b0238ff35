"""Tests of geosoil.batch: many farms on a Dask cluster started in this process.

The farms are the small invented ones of ``tests/small_farm`` (box paddocks of
twelve samples each, too few for a paddock's own variogram, so every paddock task
fits the farm's pooled variogram again, as a batch does), with other paddock names
and counts, so no two farms give the same figures. The cluster is a
``distributed.LocalCluster`` with its workers as threads of this process
listening on the loopback address only.

Sources of the expectations:

* A batch gives what running each farm alone gives [derived: the same functions
  on the same inputs]: ``tonnage.csv`` byte for byte, the prescriptions' zones
  and rates, the per-cell rate rasters and the recorded warnings.
* Text shown in a page is escaped (HTML Living Standard, "Escaping a string";
  jinja2's autoescaping).
"""

from __future__ import annotations

import json
import shutil
import sys
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
import rasterio

from geosoil import batch, demo_farm
from geosoil.errors import GeosoilError, InputError, OutputExistsError
from geosoil.job import run
from geosoil.project import load_project
from tests.small_farm import make_project

distributed = pytest.importorskip("distributed")

DEMO = Path(demo_farm.__file__).parent
GOOD = {"alpha-farm": ("North", "South"),  # invented farms: their paddocks
        "bravo-farm": ("Red Hill", "Creek Flat", "Windmill")}
GYPSUM = "[rates.gypsum]\ntarget_esp_percent = 5.0\n"


def make_farm(dest: Path, *, paddocks: tuple[str, ...], cache: Path) -> Path:
    """A small invented farm (``tests/small_farm``) with these paddocks, its cache in
    ``cache``; the gypsum rule's target ESP written out, for a test to change."""
    return make_project(dest, names=paddocks, extra=GYPSUM, cache=cache)


@pytest.fixture(scope="module")
def client():
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=False, protocol="tcp", host="127.0.0.1",
        dashboard_address="127.0.0.1:0",
    ) as cluster, distributed.Client(cluster) as c:
        yield c


@pytest.fixture(scope="module")
def first(tmp_path_factory, client):
    base = tmp_path_factory.mktemp("batch")
    farms, cache = base / "farms", base / "cache"
    for name, paddocks in GOOD.items():
        make_farm(farms / name, paddocks=paddocks, cache=cache)
    # broken on a worker: a lab file without one analyte column
    make_farm(farms / "charlie-bad-lab", paddocks=("Home",), cache=cache)
    (farms / "charlie-bad-lab" / "lab.csv").write_text("name,colour\nx,red\n")
    # broken before any worker: a project file that is not TOML
    (farms / "delta-bad-toml").mkdir()
    (farms / "delta-bad-toml" / "geosoil.toml").write_text("farm = [unclosed\n")
    messages: list[str] = []
    projects = batch.find_projects([farms])
    result = batch.run_batch(projects, out_dir=base / "out", client=client,
                             progress=messages.append)
    return SimpleNamespace(base=base, farms=farms, cache=cache, out=base / "out",
                           projects=projects, result=result, messages=messages)


def by_name(result: batch.BatchResult) -> dict[str, batch.FarmOutcome]:
    return {o.name: o for o in result.outcomes}


@pytest.mark.slow
def test_a_failed_farm_is_reported_and_the_others_finish(first) -> None:
    got = by_name(first.result)
    assert [o.name for o in first.result.outcomes] == sorted(got)  # the order given
    assert {n: got[n].status for n in GOOD} == dict.fromkeys(GOOD, "done")
    bad = got["charlie-bad-lab"]
    assert bad.status == "failed"
    assert "lab.csv" in bad.error and "no analyte column" in bad.error
    toml = got["delta-bad-toml"]
    assert toml.status == "failed" and "geosoil.toml" in toml.error
    # the summary has every farm, the failed ones with their error
    lines = (first.out / batch.SUMMARY_CSV).read_text(encoding="utf-8").splitlines()
    assert len(lines) == 1 + 4
    assert "no analyte column" in next(x for x in lines if x.startswith("charlie-bad-lab,"))
    record = json.loads((first.out / batch.BATCH_RECORD).read_text(encoding="utf-8"))
    assert (record["done"], record["failed"], record["unchanged"]) == (2, 2, 0)
    # only the farms that ran keep a key; no output folder for a farm that never ran
    assert sorted(p.stem for p in (first.out / batch.KEYS_FOLDER).iterdir()) == sorted(GOOD)
    assert not (first.out / "delta-bad-toml").exists()
    # progress: each paddock interpolated, each farm's end, the failure with its error
    text = "\n".join(first.messages)
    assert "bravo-farm: paddock 'Red Hill' interpolated" in text
    assert "alpha-farm: paddock 'South' interpolated" in text
    assert "bravo-farm: done in" in text and "charlie-bad-lab: FAILED: " in text


@pytest.mark.slow
def test_each_farm_is_the_same_as_run_alone(first, tmp_path) -> None:
    for name in GOOD:
        alone = tmp_path / name
        result = run(load_project(first.farms / name), out_dir=alone, use_cache=False)
        in_batch = first.out / name
        assert (in_batch / "tonnage.csv").read_bytes() == (alone / "tonnage.csv").read_bytes()
        presc = sorted(p.relative_to(alone) for p in (alone / "prescriptions").rglob("*.geojson"))
        assert presc
        for rel in presc:
            a = json.loads((alone / rel).read_text(encoding="utf-8"))
            b = json.loads((in_batch / rel).read_text(encoding="utf-8"))
            assert a == b, rel
        rates = sorted(p.relative_to(alone) for p in (alone / "rates").rglob("*.tif"))
        assert rates
        for rel in rates:
            with rasterio.open(alone / rel) as ra, rasterio.open(in_batch / rel) as rb:
                assert ra.transform == rb.transform
                np.testing.assert_array_equal(ra.read(), rb.read())
        record = json.loads((in_batch / "run.json").read_text(encoding="utf-8"))
        record_alone = json.loads((alone / "run.json").read_text(encoding="utf-8"))
        for part in ("warnings", "surfaces", "zones", "tonnage", "first_season_tonnes"):
            assert record[part] == record_alone[part], part
        # not vacuous: the paddocks were kriged on the farm's pooled variogram
        assert {(s["method"], s["variogram"]["scope"]) for s in record["surfaces"]
                if "variogram" in s} == {("ordinary kriging", "farm")}
        outcome = by_name(first.result)[name]
        farm_rows = result.tonnage[result.tonnage["level"] == "farm"]
        assert outcome.tonnes == dict(zip(farm_rows["product"], farm_rows["tonnes"], strict=True))
        assert outcome.warnings == result.warnings


@pytest.mark.slow
def test_a_rerun_skips_unchanged_farms_and_runs_a_changed_one(first, client) -> None:
    stamp = {n: (first.out / n / "tonnage.csv").stat().st_mtime_ns for n in GOOD}
    again = batch.run_batch(first.projects, out_dir=first.out, client=client)
    got = by_name(again)
    assert {n: got[n].status for n in GOOD} == dict.fromkeys(GOOD, "unchanged")
    assert got["alpha-farm"].tonnes == by_name(first.result)["alpha-farm"].tonnes
    assert got["charlie-bad-lab"].status == "failed"  # a failed farm is tried again
    assert {n: (first.out / n / "tonnage.csv").stat().st_mtime_ns for n in GOOD} == stamp
    # a rate setting changes in one farm: only that one runs, its surfaces from the cache
    toml = first.farms / "bravo-farm" / "geosoil.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace(
        "target_esp_percent = 5.0", "target_esp_percent = 6.0"), encoding="utf-8")
    third = by_name(batch.run_batch(first.projects, out_dir=first.out, client=client))
    assert third["alpha-farm"].status == "unchanged"
    assert third["bravo-farm"].status == "done" and third["bravo-farm"].surfaces_from_cache
    # a higher target ESP asks for less gypsum (USDA Handbook 60: ESP_initial - ESP_final)
    assert third["bravo-farm"].tonnes["gypsum"] < by_name(first.result)["bravo-farm"].tonnes[
        "gypsum"]
    assert (first.out / "bravo-farm" / "tonnage.csv").stat().st_mtime_ns != stamp["bravo-farm"]


@pytest.mark.slow
def test_a_farm_dropped_from_the_batch_is_said_and_its_outputs_kept(first, client) -> None:
    """A batch given only alpha-farm into the folder where bravo-farm ran before: bravo's
    folder and key stay byte for byte, and the summary (CSV, page, record, rows) says it is
    not in this batch and that its outputs were left as they were."""
    bravo = first.out / "bravo-farm"
    before = {p: p.read_bytes() for p in [*bravo.rglob("*"),
                                          first.out / batch.KEYS_FOLDER / "bravo-farm.json"]
              if p.is_file()}
    only = [p for p in first.projects if p.parent.name == "alpha-farm"]
    result = batch.run_batch(only, out_dir=first.out, client=client)
    got = by_name(result)
    assert got["alpha-farm"].status in ("unchanged", "done")
    left = got["bravo-farm"]
    assert left.status == "not in this batch"
    assert "outputs from an earlier batch left as they were" in left.note
    assert "bravo-farm/" in left.note and "keys/bravo-farm.json" in left.note
    assert left.output == str(first.out / "bravo-farm") == got["alpha-farm"].output.replace(
        "alpha-farm", "bravo-farm")  # the folder, named as a farm that ran names its own
    assert {p: p.read_bytes() for p in before} == before  # nothing deleted or changed
    assert all(p.exists() for p in before)
    lines = (first.out / batch.SUMMARY_CSV).read_text(encoding="utf-8").splitlines()
    assert lines[0].endswith(",note")
    row = next(x for x in lines if x.startswith("bravo-farm,"))
    assert "not in this batch" in row and "left as they were" in row
    page = (first.out / batch.SUMMARY_HTML).read_text(encoding="utf-8")
    assert "not in this batch: outputs from an earlier batch left as they were" in page
    record = json.loads((first.out / batch.BATCH_RECORD).read_text(encoding="utf-8"))
    assert record["not_in_this_batch"] == ["bravo-farm"] and record["farms"] == 1


# --------------------------------------------------------------------------- without a cluster


def test_find_projects_from_folders_files_and_lists(tmp_path) -> None:
    for name in ("b", "a"):
        (tmp_path / "farms" / name).mkdir(parents=True)
        (tmp_path / "farms" / name / "geosoil.toml").write_text("")
    (tmp_path / "farms" / "notes").mkdir()  # no project in it: left out
    single = tmp_path / "other.toml"
    single.write_text("")
    listing = tmp_path / "list.txt"
    listing.write_text("# this season\nfarms/b\n\nother.toml  # the odd one\n")
    found = batch.find_projects([tmp_path / "farms", listing])
    assert found == [(tmp_path / "farms" / n / "geosoil.toml").resolve() for n in ("a", "b")] + [
        single.resolve()]
    listing.write_text("farms/a\nfarms/missing\n")
    with pytest.raises(InputError, match=r"list\.txt, row 2: 'farms/missing'"):
        batch.find_projects([listing])
    with pytest.raises(InputError, match="holds no project"):
        batch.find_projects([tmp_path / "farms" / "notes"])


def test_farm_names_are_distinct() -> None:
    paths = [Path("/x/North Farm/geosoil.toml"), Path("/y/north-farm/geosoil.toml"),
             Path("/z/keys/geosoil.toml"), Path("/z/south.toml")]
    assert batch._farm_names(paths) == ["north-farm", "north-farm-2", "keys-2", "south"]


def test_the_farm_key_follows_inputs_and_settings(tmp_path) -> None:
    farm = tmp_path / "farm"
    shutil.copytree(DEMO, farm, ignore=shutil.ignore_patterns("__pycache__", "*.py"))
    key = batch.farm_key(load_project(farm))
    assert batch.farm_key(load_project(farm)) == key
    lab = farm / "lab_results.csv"
    lab.write_bytes(lab.read_bytes() + b"\n")
    changed_input = batch.farm_key(load_project(farm))
    assert changed_input != key
    toml = farm / "geosoil.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace("depth_m = 0.10", "depth_m = 0.15"),
                    encoding="utf-8")
    assert batch.farm_key(load_project(farm)) not in (key, changed_input)


def test_a_batch_refuses_a_full_folder_that_is_not_a_batch(tmp_path) -> None:
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    farm = tmp_path / "farm"
    shutil.copytree(DEMO, farm, ignore=shutil.ignore_patterns("__pycache__", "*.py"))
    with pytest.raises(OutputExistsError, match="--overwrite"):
        batch.run_batch([farm / "geosoil.toml"], out_dir=out)
    assert (out / "notes.txt").read_text() == "mine"
    for where in (farm, tmp_path):  # a farm's own folder, and the folder that holds it
        with pytest.raises(OutputExistsError, match="input file"):
            batch.run_batch([farm / "geosoil.toml"], out_dir=where, overwrite=True)
    assert not (farm / batch.SUMMARY_CSV).exists() and not (tmp_path / batch.KEYS_FOLDER).exists()


def test_a_batch_that_stops_before_any_farm_leaves_no_folder_of_its_own(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
) -> None:
    """A failed run leaves nothing geosoil made: here the cluster cannot start."""
    farm = make_project(tmp_path / "farm", cache=tmp_path / "cache")

    def no_cluster(**_: object) -> None:
        raise OSError("no cluster here")

    monkeypatch.setattr(batch, "local_cluster", no_cluster)
    out = tmp_path / "season" / "2027"
    with pytest.raises(OSError, match="no cluster"):
        batch.run_batch([farm / "geosoil.toml"], out_dir=out)
    assert not (tmp_path / "season").exists()
    (tmp_path / "season").mkdir()  # a folder the user made stays
    with pytest.raises(OSError, match="no cluster"):
        batch.run_batch([farm / "geosoil.toml"], out_dir=out)
    assert (tmp_path / "season").is_dir() and not out.exists()


def test_the_summary_page_escapes_what_it_shows() -> None:
    evil = "<img src=x onerror=alert(1)>"
    outcomes = [
        batch.FarmOutcome(name="a", project="p", status="done", farm=evil, paddocks=1,
                          tonnes={"gypsum": 1.5}, cost=10.0, warnings=[f"paddock '{evil}'"],
                          seconds=1.0),
        batch.FarmOutcome(name="b", project="q", status="failed", error=f"bad {evil}"),
    ]
    record = {"farms": 2, "done": 1, "unchanged": 0, "failed": 1, "started": "s",
              "finished": "f", "wall_s": 1.0, "cluster": {}, "cautions": [evil]}
    page = batch.summary_html(outcomes, record)
    assert evil not in page
    assert page.count("&lt;img src=x onerror=alert(1)&gt;") == 4
    text = batch.summary_csv(outcomes)
    header, first_row = text.splitlines()[:2]
    assert header.split(",")[:6] == ["farm", "farm_name", "status", "paddocks", "tonnes_gypsum",
                                     "cost"]
    assert first_row.split(",")[4] == "1.5"


def test_without_dask_the_error_says_how_to_install_it(monkeypatch) -> None:
    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(GeosoilError, match=r"geosoil\[batch\]"):
        batch.require_distributed()


def test_a_batch_of_no_project_is_refused_before_any_folder(tmp_path: Path) -> None:
    # user trial: an empty list of farms ran nothing and exited 0
    with pytest.raises(GeosoilError, match="no project"):
        batch.run_batch([], out_dir=tmp_path / "out")
    assert not (tmp_path / "out").exists()
