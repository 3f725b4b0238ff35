"""``geosoil run``: the documented output layout, the output-folder guards, stdout/stderr, cache.

The first run is the session's one demo run (``geosoil demo``: ``demo_run`` in
``tests/conftest.py``); the second runs ``run`` on a copy of the demo farm with a rate setting
changed, its surfaces from the session's cache (never the user's cache).
"""

from __future__ import annotations

import json
import shutil
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import rasterio
from click.testing import CliRunner
from geosoil.cli.main import cli

from tests.demofarm import DEMO, copy_demo

# The layout documented in geosoil/outputs.py
TOP_FILES = {"run.json", "tonnage.csv", "passes.csv", "samples.csv", "map.html", "report.html"}
PADDOCKS = {"red-hill", "creek-flat", "windmill"}


def invoke(*args: object):  # noqa: ANN201 - click's Result
    return CliRunner().invoke(cli, [str(a) for a in args])


def _tree(root: Path) -> list[tuple[str, int]]:
    return sorted((str(p.relative_to(root)), p.stat().st_size) for p in root.rglob("*"))


STALE = "prescriptions/red-hill/lime_isoxml_pass9/TASKDATA/TASKDATA.XML"


@pytest.fixture(scope="module")
def runs(tmp_path_factory: pytest.TempPathFactory, demo_run) -> dict[str, object]:  # noqa: ANN001
    """The session's demo run (``out1``), and ``run`` on a copy of the demo with only a
    rate setting changed (quiet, surfaces from the session's cache) over a copy of it."""
    root = tmp_path_factory.mktemp("run")
    # change only the exchange-efficiency factor F of the gypsum rule (1.2 -> 1.1)
    assert tomllib.loads((DEMO / "geosoil.toml").read_text())["rates"]["gypsum"][
        "exchange_efficiency"] == 1.2
    farm, _ = copy_demo(root, cache=demo_run.cache,
                        changes={"rates.gypsum": {"exchange_efficiency": 1.1}})
    before = _tree(farm)
    # out2: a copy of the first run's folder with a file an older run wrote and this one
    # will not (task data for a pass that no longer exists), listed in its run.json
    out2 = root / "out2"
    shutil.copytree(demo_run.out, out2)
    stale = out2 / STALE
    stale.parent.mkdir(parents=True)
    stale.write_text("<ISO11783_TaskData/>")
    record = json.loads((out2 / "run.json").read_text())
    record["files"].append(STALE)
    (out2 / "run.json").write_text(json.dumps(record))
    second = invoke("--quiet", "run", farm, "--out", out2, "--overwrite")
    return {"root": root, "farm": farm, "first": demo_run.cli, "out1": demo_run.out,
            "second": second, "before": before, "after_second": _tree(farm)}


def test_a_run_succeeds_and_writes_nothing_into_the_project_folder(runs) -> None:  # noqa: ANN001
    assert runs["first"].exit_code == 0, runs["first"].stderr
    r = runs["second"]
    assert r.exit_code == 0, r.stderr
    assert runs["after_second"] == runs["before"]


def test_the_documented_layout(runs) -> None:  # noqa: ANN001
    out = runs["out1"]
    assert TOP_FILES <= {p.name for p in out.iterdir() if p.is_file()}
    assert {p.name for p in out.iterdir() if p.is_dir()} == {"surfaces", "rates", "prescriptions"}
    for sub in ("surfaces", "rates"):
        assert {p.name for p in (out / sub).iterdir()} == PADDOCKS
    # the farm's task set beside the paddocks' folders (README)
    assert {p.name for p in (out / "prescriptions").iterdir()} == PADDOCKS | {"farm_isoxml"}
    assert (out / "prescriptions" / "farm_isoxml" / "TASKDATA" / "TASKDATA.XML").is_file()
    assert (out / "farm.gpkg").is_file()
    for pad in PADDOCKS:
        surfaces = {p.name for p in (out / "surfaces" / pad).iterdir()}
        assert {"ca.tif", "esp.tif", "ecec.tif"} <= surfaces
        rates = {p.name for p in (out / "rates" / pad).iterdir()}
        assert {"gypsum.tif", "lime.tif", "gypsum__gypsum.tif", "lime__lime.tif"} <= rates
        presc = {p.name for p in (out / "prescriptions" / pad).iterdir()}
        assert {"gypsum.geojson", "gypsum_shp.zip", "gypsum_zones.tif"} <= presc
        # Red Hill's lime needs two passes (README "Passes"): one set of files per pass
        lime = ({f"lime_pass{k}{e}" for k in (1, 2) for e in (".geojson", "_shp.zip", "_zones.tif")}
                if pad == "red-hill" else {"lime.geojson", "lime_shp.zip", "lime_zones.tif"})
        assert lime <= presc and not {"lime.geojson", "lime_pass1.geojson"} <= presc
    # kriged variables carry their standard deviation beside them
    assert "ca_sd.tif" in {p.name for p in (out / "surfaces" / "red-hill").iterdir()}
    record = json.loads((out / "run.json").read_text())
    files = {str(p.relative_to(out)) for p in out.rglob("*") if p.is_file()}
    assert set(record["files"]) == files  # run.json lists every file, and nothing else is there
    assert not any(".tmp" in f for f in files)  # atomic writes leave no temporaries


def test_stdout_has_the_tonnage_and_the_cautions_stderr_the_progress(runs) -> None:  # noqa: ANN001
    r = runs["first"]
    out = r.stdout
    assert "Paddock" in out and "Tonnes" in out and "Farm" in out
    for pad in ("Red Hill", "Creek Flat", "Windmill"):
        assert pad in out
    assert "Cautions:" in out and "advisory" in out
    assert str(runs["out1"]) in out  # the paths written
    assert "reading samples" in r.stderr and "writing the report" in r.stderr
    assert "reading samples" not in out and "Cautions" not in r.stderr
    assert "\r" not in r.stderr  # no progress animation when stderr is not a terminal
    # the tonnage printed is the tonnage written
    table = pd.read_csv(runs["out1"] / "tonnage.csv")
    assert len(table) > 0


def test_quiet_run_prints_results_but_no_progress(runs) -> None:  # noqa: ANN001
    r = runs["second"]
    assert r.exit_code == 0, r.stderr
    assert r.stderr == ""
    assert "Cautions:" in r.stdout and "Farm" in r.stdout


def test_overwrite_replaces_the_folder_whole_so_nothing_stale_survives(runs) -> None:  # noqa: ANN001
    out2 = runs["root"] / "out2"
    assert not (out2 / STALE).exists()
    assert not (out2 / STALE).parent.exists()
    record = json.loads((out2 / "run.json").read_text())
    files = {p.relative_to(out2).as_posix() for p in out2.rglob("*") if p.is_file()}
    assert set(record["files"]) == files
    # nothing left beside it, not even the lock file
    beside = {p.name for p in runs["root"].iterdir() if p.name.startswith(".out2.")}
    assert beside == set()


def test_overwrite_refuses_a_folder_holding_files_geosoil_did_not_write(runs) -> None:  # noqa: ANN001
    root = runs["root"]
    out3 = root / "out3"
    shutil.copytree(runs["out1"], out3)
    (out3 / "notes.txt").write_text("my own notes")
    r = invoke("run", runs["farm"], "--out", out3, "--overwrite")
    assert r.exit_code == 1
    assert "notes.txt" in r.stderr and "Move them out" in r.stderr
    assert (out3 / "notes.txt").read_text() == "my own notes"
    other = root / "other"
    other.mkdir()
    (other / "thesis.docx").write_text("years of work")
    r = invoke("run", runs["farm"], "--out", other, "--overwrite")
    assert r.exit_code == 1 and "not a geosoil output folder" in r.stderr
    assert (other / "thesis.docx").read_text() == "years of work"


def test_second_run_takes_surfaces_from_the_cache_and_changes_the_rates(runs) -> None:  # noqa: ANN001
    out1, out2 = runs["out1"], runs["root"] / "out2"
    rec2 = json.loads((out2 / "run.json").read_text())
    assert rec2["surfaces_from_cache"] is True
    assert rec2["settings"]["rates"]["gypsum"]["exchange_efficiency"] == 1.1
    # the surfaces are the same ...
    with rasterio.open(out1 / "surfaces/creek-flat/na.tif") as a, \
            rasterio.open(out2 / "surfaces/creek-flat/na.tif") as b:
        np.testing.assert_array_equal(a.read(1), b.read(1))
    # ... and the gypsum rule's rate scales with F: USDA Handbook 60 requirement x F
    # (Oster et al. 1999), so the new rate is 1.1 / 1.2 of the old one [derived]
    with rasterio.open(out1 / "rates/creek-flat/gypsum__gypsum.tif") as a, \
            rasterio.open(out2 / "rates/creek-flat/gypsum__gypsum.tif") as b:
        old, new = a.read(1), b.read(1)
    sodic = np.isfinite(old) & (old > 0)
    assert sodic.sum() > 10
    np.testing.assert_allclose(new[sodic], old[sodic] * 1.1 / 1.2, rtol=1e-9)
    t1 = pd.read_csv(out1 / "tonnage.csv")
    t2 = pd.read_csv(out2 / "tonnage.csv")
    assert not t1.equals(t2)


def test_a_rerun_copies_unchanged_geotiffs_byte_for_byte_and_writes_changed_ones(runs) -> None:  # noqa: ANN001, E501
    """The re-run into out2 (a rate setting changed) replaced a folder whose run.json says
    what each GeoTIFF was made from: the surfaces (same cached arrays) are copied, the same
    bytes as the first run wrote; the gypsum rates (changed) are written anew."""
    import hashlib

    out1, out2 = runs["out1"], runs["root"] / "out2"
    rec1 = json.loads((out1 / "run.json").read_text())
    rec2 = json.loads((out2 / "run.json").read_text())
    assert rec1["geotiffs_copied"] == 0
    tifs = sorted(p.relative_to(out2).as_posix() for p in out2.rglob("*.tif"))
    assert sorted(rec2["geotiffs"]) == tifs
    for rel in tifs:
        assert rec2["geotiffs"][rel]["sha256"] == hashlib.sha256(
            (out2 / rel).read_bytes()).hexdigest()
    surfaces = [t for t in tifs if t.startswith("surfaces/")]
    assert len(surfaces) > 20
    for rel in surfaces:
        assert (out2 / rel).read_bytes() == (out1 / rel).read_bytes()
        assert rec2["geotiffs"][rel]["key"] == rec1["geotiffs"][rel]["key"]
    changed = "rates/creek-flat/gypsum__gypsum.tif"
    assert rec2["geotiffs"][changed]["key"] != rec1["geotiffs"][changed]["key"]
    assert (out2 / changed).read_bytes() != (out1 / changed).read_bytes()
    assert len(surfaces) <= rec2["geotiffs_copied"] < len(tifs)


def test_an_existing_output_folder_is_refused_without_overwrite(runs) -> None:  # noqa: ANN001
    out1 = runs["out1"]
    before = _tree(out1)
    r = invoke("run", runs["farm"], "--out", out1)
    assert r.exit_code == 1
    assert r.stdout == ""
    assert r.stderr.startswith("error:") and "not empty" in r.stderr and "--overwrite" in r.stderr
    assert _tree(out1) == before


@pytest.mark.parametrize("where", ["project", "parent"])
def test_output_never_goes_into_an_input_folder(runs, where: str) -> None:  # noqa: ANN001
    farm = runs["farm"]
    target = farm if where == "project" else farm.parent
    before = _tree(farm)
    r = invoke("run", farm, "--out", target, "--overwrite")
    assert r.exit_code == 1 and r.stdout == ""
    assert r.stderr.startswith("error:") and "input" in r.stderr
    assert _tree(farm) == before


def test_run_help_and_usage_errors(runs) -> None:  # noqa: ANN001
    r = invoke("run", "--help")
    assert r.exit_code == 0
    for word in ("PROJECT", "--out", "--overwrite", "--no-cache"):
        assert word in r.stdout
    r = invoke("run", runs["farm"])
    assert r.exit_code == 2 and "--out" in r.stderr and r.stdout == ""
    r = invoke("run", runs["farm"], "--out", runs["root"] / "x", "--colour")
    assert r.exit_code == 2 and "--colour" in r.stderr
    assert not (runs["root"] / "x").exists()


def test_an_output_folder_that_cannot_be_made_is_an_error_not_a_traceback(
    runs, tmp_path: Path  # noqa: ANN001
) -> None:
    (tmp_path / "a-file").write_text("x")
    r = invoke("run", runs["farm"], "--out", tmp_path / "a-file" / "out")
    assert r.exit_code == 1 and r.stdout == ""
    assert r.stderr.startswith("error:") and "a-file" in r.stderr
    assert r.exception is None or isinstance(r.exception, SystemExit)


def test_a_settings_error_exits_1_with_the_message_on_stderr(tmp_path: Path) -> None:
    farm, _ = copy_demo(tmp_path, changes={"grid": {"cell_size_m": 0.5}})
    r = invoke("run", farm, "--out", tmp_path / "out")
    assert r.exit_code == 1 and r.stdout == ""
    assert r.stderr.startswith("error: setting 'grid.cell_size_m'")
    assert "from 1 to 200 m" in r.stderr
    assert not (tmp_path / "out").exists()


def test_one_list_of_warnings_in_the_summary_run_json_and_the_report(runs) -> None:  # noqa: ANN001
    """Issue: 'run' printed 3 of the 15 warnings the report listed and run.json left some out.
    The summary, run.json and the report show the same list, with the same count."""
    import html
    import re

    r = runs["first"]
    out = runs["out1"]
    record = json.loads((out / "run.json").read_text())
    listed = record["warnings"]
    assert listed, "the demo raises warnings (interpolation fallbacks, guards...)"
    m = re.search(r"^(\d+) warning\(s\) recorded in run.json and the report:$", r.stderr, re.M)
    assert m is not None, r.stderr
    assert int(m.group(1)) == len(listed)
    printed = [ln[4:] for ln in r.stderr.splitlines() if ln.startswith("  - ")]
    assert printed == listed
    page = (out / "report.html").read_text()
    section = page[page.index('<ul class="warnings">'):]
    section = section[:section.index("</ul>")]
    items = [html.unescape(i) for i in re.findall(r"<li>(.*?)</li>", section, re.S)]
    assert items == listed


def _members(path: Path) -> dict[str, bytes]:
    import zipfile

    with zipfile.ZipFile(path) as z:
        return {n: z.read(n) for n in z.namelist()}


def test_a_rerun_copies_the_unchanged_passes_machine_files_and_they_equal_a_fresh_write(  # noqa: E501
        runs, tmp_path: Path) -> None:  # noqa: ANN001
    """The gypsum rule changed (out2): the passes whose zones are unchanged take their
    GeoJSON, shapefile, zone GeoTIFF and task set (ISO 11783-10 XML and grid) from the
    folder replaced; every one equals what a run into a new folder writes, and so does the
    farm's task set (made from the copied grids); a file changed since is never copied."""
    import hashlib

    out1, out2 = runs["out1"], runs["root"] / "out2"
    rec2 = json.loads((out2 / "run.json").read_text())
    files = sorted(
        [p.relative_to(out2).as_posix() for p in (out2 / "prescriptions").glob("*/*")
         if p.suffix in (".geojson", ".zip", ".tif")]
        + [p.relative_to(out2).as_posix() for p in (out2 / "prescriptions").glob(
            "*/*_isoxml/TASKDATA/*")])
    assert any(f.endswith("TASKDATA.XML") for f in files)
    assert sorted(rec2["prescription_files"]) == files
    rec1 = json.loads((out1 / "run.json").read_text())
    copied = [f for f in files if rec2["prescription_files"][f]["key"]
              == rec1["prescription_files"].get(f, {}).get("key")]  # made of the same
    assert all((out2 / f).read_bytes() == (out1 / f).read_bytes() for f in copied)
    assert rec2["prescription_files_copied"] == len(copied) > 0
    assert any(f.startswith("prescriptions/creek-flat/gypsum") and f not in copied
               for f in files)  # the changed pass: written anew
    for rel in files:
        assert rec2["prescription_files"][rel]["sha256"] == hashlib.sha256(
            (out2 / rel).read_bytes()).hexdigest()
    fresh = tmp_path / "fresh"
    assert invoke("-q", "run", runs["farm"], "--out", fresh).exit_code == 0
    assert json.loads((fresh / "run.json").read_text())["prescription_files_copied"] == 0
    farm_set = sorted(p.relative_to(out2).as_posix() for p in (out2 / "prescriptions").glob(
        "*/TASKDATA/*"))
    assert farm_set and not set(farm_set) & set(files)
    for rel in files + farm_set:
        if rel.endswith(".zip"):  # the members (a zip's own dates may differ)
            assert _members(out2 / rel) == _members(fresh / rel), rel
        else:
            assert (out2 / rel).read_bytes() == (fresh / rel).read_bytes(), rel
    assert any(f.endswith("GRD00001.bin") and f in copied for f in files)
    # the same run again over out2's copy (nothing changed, so every pass could be copied),
    # with one file edited since: that file's pass is written anew, the rest copied
    out3 = tmp_path / "out3"
    shutil.copytree(out2, out3)
    edited = next(f for f in copied if f.endswith(".geojson"))
    (out3 / edited).write_text('{"type": "FeatureCollection", "features": []}')
    assert invoke("-q", "run", runs["farm"], "--out", out3, "--overwrite").exit_code == 0
    assert (out3 / edited).read_bytes() == (fresh / edited).read_bytes()
    rec3 = json.loads((out3 / "run.json").read_text())
    assert rec3["prescription_files_copied"] == len(files) - 3
