"""Reliability: what a person keeps, and what they are told, when things go wrong.

Each test sets up a fault a real user meets (a run killed half way, a full disk, two
runs into one folder, a cache folder received with a project, text cells that a
spreadsheet would run as formulas, control characters in IDs) and checks two things:
the files left behind (the old output folder whole, nothing half-written or stale, no
temporary folder once the next run has swept) and the message (a named error or
warning, no traceback).

The farm is the small invented one of ``tests/small_farm``. A run that must be held
and killed runs in a child process that stops at a named progress stage and waits
(for a "go" file that never comes), so the stage is known and nothing depends on timing.
"""

from __future__ import annotations

import contextlib
import csv
import errno
import json
import os
import pickle
import shutil
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest
from click.testing import CliRunner
from geosoil.cli.main import cli

from geosoil import cache, writers
from geosoil.job import run
from geosoil.outfolder import sibling_names
from geosoil.pipeline import _surface_key, prepare
from geosoil.project import load_project
from tests.small_farm import HEADER, X0, Y0, make_project

STAGE = "writing prescriptions"  # a progress message of geosoil.outputs.write_outputs

HELD_RUN = textwrap.dedent("""
    import pathlib, sys, time
    from geosoil.job import run
    from geosoil.project import load_project
    stage, flag, go, farm, out = sys.argv[1:6]
    def progress(message):
        if message.startswith(stage):
            pathlib.Path(flag).write_text(message)
            while not pathlib.Path(go).exists():
                time.sleep(0.05)
    run(load_project(farm), out_dir=pathlib.Path(out), overwrite=True, progress=progress)
    print("finished")
""")


def tree(root: Path) -> dict[str, bytes]:
    return {p.relative_to(root).as_posix(): p.read_bytes()
            for p in sorted(root.rglob("*")) if p.is_file()}


def beside(out: Path) -> set[str]:
    return {p.name for p in out.parent.iterdir() if p.name.startswith(f".{out.name}.")}


def start_held_run(farm: Path, out: Path, tmp: Path) -> tuple[subprocess.Popen[str], Path, Path]:
    flag, go = tmp / "reached", tmp / "go"
    proc = subprocess.Popen(
        [sys.executable, "-c", HELD_RUN, STAGE, str(flag), str(go), str(farm), str(out)],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        cwd=Path(__file__).resolve().parents[1],
    )
    for _ in range(12_000):  # wait for the stage (a bound against a hang, not a timing check)
        if flag.exists() or proc.poll() is not None:
            break
        time.sleep(0.05)
    assert flag.exists(), proc.communicate()[1][-3000:]
    return proc, flag, go


@pytest.fixture(scope="module")
def farm(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return make_project(tmp_path_factory.mktemp("reliable") / "farm")


@pytest.fixture(scope="module")
def first_output(farm: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The output folder of one first run of the farm (copied by ``previous``)."""
    out = tmp_path_factory.mktemp("first") / "out"
    run(load_project(farm), out_dir=out)
    return out


@pytest.fixture
def previous(first_output: Path, tmp_path: Path) -> tuple[Path, dict[str, bytes]]:
    """An output folder a first run wrote (a copy of the module's one), and its files."""
    out = tmp_path / "out"
    shutil.copytree(first_output, out)
    return out, tree(out)


# ------------------------------------------------------ two runs at once, then kill -9


@pytest.mark.slow
def test_a_run_held_while_writing_refuses_a_second_and_killed_leaves_the_old_folder_whole(
    farm, previous, tmp_path  # noqa: ANN001
) -> None:
    """One child run, held half way through writing, serves both faults: a second run
    into its folder is refused and touches neither the folder nor the held run's files
    beside it; then the held run is killed (-9) and the user keeps the previous folder."""
    out, before = previous
    proc, _flag, _go = start_held_run(farm, out, tmp_path)
    try:
        # half way through writing: the new files are only in the folder beside
        temp = [p for p in out.parent.iterdir() if p.name.startswith(sibling_names(out)[1])]
        assert len(temp) == 1 and any(temp[0].rglob("*.tif"))
        assert tree(out) == before
        held, aside = tree(temp[0]), beside(out)
        assert sibling_names(out)[0] in aside  # the held run's lock
        r = CliRunner().invoke(cli, ["run", str(farm), "--out", str(out), "--overwrite"])
        assert r.exit_code == 1
        assert "another geosoil run is writing" in r.stderr and "Traceback" not in r.stderr
        # neither run has touched the folder; the held run's files and lock are as they were
        assert tree(out) == before and tree(temp[0]) == held and beside(out) == aside
        assert proc.poll() is None  # the held run is still there, waiting
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
    assert proc.returncode == -signal.SIGKILL
    assert tree(out) == before  # the user keeps the previous run, whole
    # the next run sweeps what the killed one left and replaces the folder whole
    result = run(load_project(farm), out_dir=out, overwrite=True)
    assert beside(out) == set()  # not even the lock file
    record = json.loads((out / "run.json").read_text(encoding="utf-8"))
    assert set(record["files"]) == set(tree(out))
    assert result.out_dir == out.resolve()


# --------------------------------------------------------------------------- a full disk


def test_an_injected_full_disk_names_the_file_and_keeps_the_old_folder(
    farm, previous, monkeypatch: pytest.MonkeyPatch  # noqa: ANN001
) -> None:
    out, before = previous
    real = writers.atomic_write

    @contextlib.contextmanager
    def failing(path, *args, **kwargs):  # noqa: ANN001, ANN002, ANN003, ANN202
        with real(path, *args, **kwargs) as fh:
            if Path(path).name == "tonnage.csv":  # the disk fills while this file is written
                raise OSError(errno.ENOSPC, "No space left on device")
            yield fh

    monkeypatch.setattr(writers, "atomic_write", failing)
    r = CliRunner().invoke(cli, ["run", str(farm), "--out", str(out), "--overwrite"])
    assert r.exit_code == 1, r.stderr
    assert "Traceback" not in r.stderr
    assert f"could not write {out / 'tonnage.csv'}" in r.stderr
    assert "is full" in r.stderr and "another disk" in r.stderr
    assert f"{out} was left as it was" in r.stderr
    assert tree(out) == before
    assert beside(out) == set()  # not even the lock file


def _mount_small_disk(where: Path, size_kb: int) -> bool:
    where.mkdir()
    if os.geteuid() != 0:
        return False
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size_kb}k", "tmpfs",
                           str(where)], capture_output=True, check=False)
    return done.returncode == 0


@pytest.mark.slow
def test_a_real_full_disk_names_a_file_and_keeps_the_old_folder(farm, tmp_path) -> None:  # noqa: ANN001
    disk = tmp_path / "disk"
    if not _mount_small_disk(disk, 200):  # the run writes about 500 kB
        pytest.skip("no small file system can be mounted here (needs root); the injected "
                    "failure above covers the message")
    try:
        out = disk / "out"
        (out / "prescriptions").mkdir(parents=True)
        (out / "prescriptions" / "old.geojson").write_text("{}")
        (out / "run.json").write_text(json.dumps({"files": ["prescriptions/old.geojson",
                                                            "run.json"]}))
        before = tree(out)
        r = CliRunner().invoke(cli, ["run", str(farm), "--out", str(out), "--overwrite"])
        assert r.exit_code == 1
        assert "Traceback" not in r.stderr
        assert "could not write " + str(out) in r.stderr and "is full" in r.stderr
        assert tree(out) == before
        assert beside(out) == set()  # not even the lock file
    finally:
        subprocess.run(["umount", str(disk)], check=False)


def test_an_unwritable_place_is_found_before_computing(farm, tmp_path, monkeypatch) -> None:  # noqa: ANN001
    import geosoil.job as job

    def no_compute(*_a, **_k):  # noqa: ANN002, ANN003, ANN202
        raise AssertionError("computed before the output folder was found unwritable")

    real_mkdir = Path.mkdir

    def mkdir(self, *args, **kwargs):  # noqa: ANN001, ANN002, ANN003, ANN202
        if ".geosoil-new-" in self.name:
            raise PermissionError(errno.EACCES, "Permission denied", str(self))
        return real_mkdir(self, *args, **kwargs)

    monkeypatch.setattr(job, "compute", no_compute)
    monkeypatch.setattr(Path, "mkdir", mkdir)
    r = CliRunner().invoke(cli, ["run", str(farm), "--out", str(tmp_path / "out")])
    assert r.exit_code == 1 and "Traceback" not in r.stderr
    assert "may not write" in r.stderr and "--out" in r.stderr


# --------------------------------------------------------------------------- crafted cache


def test_a_crafted_cache_received_with_a_project_runs_nothing(tmp_path: Path) -> None:
    folder = make_project(tmp_path / "farm", cache=tmp_path / "farm" / "cache")
    key = _surface_key(prepare(load_project(folder)))
    marker = tmp_path / "ran"

    class Payload:
        def __reduce__(self):  # noqa: ANN204
            return (Path.touch, (marker,))

    cache_dir = folder / "cache"
    cache_dir.mkdir()
    with open(cache_dir / f"surfaces-{key[:32]}.pickle", "wb") as fh:
        pickle.dump(Payload(), fh)
    npz, jsn = cache.entry_paths(cache_dir, key)
    npz.write_bytes(pickle.dumps(Payload()))
    jsn.write_text(json.dumps({"format": cache.FORMAT, "key": key, "sha256": "0" * 64,
                               "surfaces": [], "warnings": []}))
    r = CliRunner().invoke(cli, ["run", str(folder), "--out", str(tmp_path / "out")])
    assert r.exit_code == 0, r.stderr
    assert not marker.exists()
    assert "failed their check" in r.stderr and "computed again" in r.stderr


# --------------------------------------------------------------------------- formula cells


HOSTILE_IDS = ["=HYPERLINK(\"http://example.invalid\",\"x\")", "+SUM(1,2)", "@cmd", "-2+3",
               "\tTAB", "\rCR", "-3.2", "ok\x1b]0;owned\x07"]


def test_formula_cells_are_inert_and_control_characters_never_reach_the_terminal(
    tmp_path: Path,
) -> None:
    """OWASP "CSV Injection": cells starting with = + - @ tab or CR get a leading
    apostrophe; plain numbers such as -3.2 stay numbers."""
    folder = make_project(tmp_path / "farm")
    lab = folder / "lab.csv"
    rows = lab.read_text().splitlines()
    header = HEADER + ",=Note()"
    body = []
    for i, row in enumerate(rows[1:]):
        cells = row.split(",")
        if i < len(HOSTILE_IDS):
            cells[0] = '"' + HOSTILE_IDS[i].replace('"', '""') + '"'
        body.append(",".join(cells) + ",=1+1")
    lab.write_text(header + "\n" + "\n".join(body) + "\n")
    assert X0 and Y0  # the samples stay where the farm put them
    r = CliRunner().invoke(cli, ["run", str(folder), "--out", str(tmp_path / "out")])
    assert r.exit_code == 0, r.stderr
    assert "\x1b" not in r.stdout + r.stderr and "\x07" not in r.stdout + r.stderr
    with open(tmp_path / "out" / "samples.csv", newline="", encoding="utf-8") as fh:
        table = list(csv.reader(fh))
    for row in table:
        for cell in row:
            if cell[:1] in ("=", "+", "@", "\t", "\r"):
                raise AssertionError(f"formula cell left live: {cell!r}")
            if cell.startswith("-"):
                float(cell)  # only plain negative numbers may start with a minus
    cells = {c for row in table for c in row}
    assert "'=HYPERLINK(\"http://example.invalid\",\"x\")" in cells
    assert "'-2+3" in cells and "-3.2" in cells and "'=1+1" in cells and "'=Note()" in cells


# ------------------------------------------------------------ checked before computed


def _check(folder: Path):  # noqa: ANN202
    return CliRunner().invoke(cli, ["check", str(folder)])


def test_settings_beyond_any_physical_range_are_named_problems(tmp_path: Path) -> None:
    folder = make_project(tmp_path / "a", extra="[spreader]\nmax_per_pass = 1e308\n")
    r = _check(folder)
    assert r.exit_code == 1 and "Traceback" not in r.stderr
    assert "'spreader.max_per_pass'" in r.stderr and "100 t/ha" in r.stderr
    deep = "[zones]\nclasses = " + "[" * 5000 + "]" * 5000 + "\n"
    r = _check(make_project(tmp_path / "b", extra=deep))
    assert r.exit_code == 1 and "Traceback" not in r.stderr
    assert "nested too deeply" in r.stderr and "geosoil.toml" in r.stderr
    # run refuses both the same way, writing nothing
    for name, said in (("a", "'spreader.max_per_pass'"), ("b", "nested too deeply")):
        out = tmp_path / f"out-{name}"
        r = CliRunner().invoke(cli, ["run", str(tmp_path / name), "--out", str(out)])
        assert r.exit_code == 1 and "Traceback" not in r.stderr and said in r.stderr
        assert not out.exists()


def test_a_paddock_with_one_sample_is_a_warning_on_screen(tmp_path: Path) -> None:
    folder = make_project(tmp_path / "farm")
    lab = folder / "lab.csv"
    lines = lab.read_text().splitlines()
    lab.write_text("\n".join(lines[:2]) + "\n")
    r = _check(folder)
    assert r.exit_code == 0, r.stderr
    assert "warning: paddock 'Home' has one sample" in r.stderr


def test_a_farm_across_the_antimeridian_is_refused_by_check(tmp_path: Path) -> None:
    import geopandas as gpd
    import shapely

    folder = make_project(tmp_path / "farm")
    east = shapely.box(179.990, -16.80, 179.998, -16.79)  # Fiji lies across 180 degrees
    west = shapely.box(-179.998, -16.80, -179.990, -16.79)
    (folder / "paddocks.gpkg").unlink()
    gpd.GeoDataFrame({"name": ["East", "West"]}, geometry=[east, west],
                     crs="EPSG:4326").to_file(folder / "paddocks.gpkg")
    r = _check(folder)
    assert r.exit_code == 1 and "Traceback" not in r.stderr
    assert "antimeridian" in r.stderr and "paddocks.gpkg" in r.stderr
    # run stops at the same named error before computing, and writes nothing
    out = tmp_path / "out"
    r = CliRunner().invoke(cli, ["run", str(folder), "--out", str(out)])
    assert r.exit_code == 1 and "Traceback" not in r.stderr
    assert "straddle the antimeridian" in r.stderr and "split the project in two" in r.stderr
    assert "surfaces" not in r.stderr  # no stage after reading was reached
    assert not out.exists() and beside(out) == set()


def test_above_the_global_kriging_ceiling_the_local_neighbourhood_is_used_and_said(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The ceiling is lowered below the small farm's 12 samples, so the rule runs here."""
    from geosoil import surfaces
    from geosoil.pipeline import compute

    folder = make_project(tmp_path / "farm", extra=(
        "[interpolation]\nmin_samples_kriging = 5\n\n[interpolation.fixed.ca]\n"
        'model = "spherical"\nnugget = 0.1\npsill = 1.0\nrange_m = 300.0\n'))
    monkeypatch.setattr(surfaces, "GLOBAL_KRIGING_MAX_SAMPLES", 10)
    monkeypatch.setattr(surfaces, "AUTO_NEIGHBOURS", 6)
    farm = compute(load_project(folder), use_cache=False)
    kriged = [s for s in farm.surfaces.values() if s.method == "ordinary kriging"]
    assert kriged
    assert all(any("nearest 6 samples" in n for n in s.notes) for s in kriged)
    told = [w for w in farm.warnings if "more than the 10 global kriging" in w]
    assert len(told) == 1 and told[0].startswith("Home, ca: 12 samples")


# --------------------------------------------------------------------- overlapping paddocks


def _flat_farm(folder: Path, boxes: dict[str, tuple[float, float]], extra: str = "") -> Path:
    """The small farm with box paddocks (x from, x to, 300 m deep) and one soil everywhere:
    every sample the same, so every cell of every paddock gets the same rates and a farm's
    tonnes are its area times them."""
    import geopandas as gpd
    import shapely

    from tests.small_farm import UTM

    make_project(folder, extra=extra)
    gpd.GeoDataFrame({"name": list(boxes)}, crs=UTM, geometry=[
        shapely.box(X0 + a, Y0, X0 + b, Y0 + 300) for a, b in boxes.values()
    ]).to_file(folder / "paddocks.gpkg")
    rows = [f"S{i:02d},{X0 + 25 + 50 * i:.1f},{Y0 + 60 + 90 * (i % 3):.1f},4.4,3.0,2.0,0.5,"
            "1.2,2.5" for i in range(13)]
    (folder / "lab.csv").write_text(HEADER + "\n" + "\n".join(rows) + "\n")
    return folder


def test_overlapping_paddocks_are_refused_by_check_and_run_writes_nothing(tmp_path: Path) -> None:
    folder = _flat_farm(tmp_path / "farm", {"North Block": (0, 400), "Dam Side": (300, 700)})
    r = _check(folder)
    assert r.exit_code == 1 and "Traceback" not in r.stderr
    # [derived] the boxes share 100 m x 300 m = 3.00 ha
    assert "'North Block' and 'Dam Side' share 3.00 ha" in r.stderr
    assert "paddocks.gpkg" in r.stderr and 'overlaps = "first"' in r.stderr
    out = tmp_path / "out"
    r = CliRunner().invoke(cli, ["run", str(folder), "--out", str(out)])
    assert r.exit_code == 1 and "share 3.00 ha" in r.stderr
    # no output folder, no temporary one, no lock file: nothing, as after any refused run
    assert not out.exists() and beside(out) == set()


def test_with_overlaps_first_the_farm_totals_are_the_union_s(tmp_path: Path) -> None:
    from geosoil.pipeline import compute

    two = _flat_farm(tmp_path / "two", {"North Block": (0, 400), "Dam Side": (300, 700)})
    text = (two / "geosoil.toml").read_text().replace(
        'paddocks = "paddocks.gpkg"\n', 'paddocks = "paddocks.gpkg"\noverlaps = "first"\n')
    (two / "geosoil.toml").write_text(text)
    one = _flat_farm(tmp_path / "one", {"Both": (0, 700)})
    farms = [compute(load_project(f), use_cache=False) for f in (two, one)]
    said = [w for w in farms[0].warnings if "overlap by 3.00 ha" in w]
    assert len(said) == 1 and "belongs to 'North Block'" in said[0]
    rows = [f.tonnage[f.tonnage["level"] == "farm"].set_index("product") for f in farms]
    assert rows[1].loc["gypsum", "tonnes"] > 10  # the sodic soil needs gypsum everywhere
    assert sorted(rows[0].index) == sorted(rows[1].index)
    for product in rows[1].index:
        # [derived] the union of the boxes is 700 m x 300 m = 21.00 ha
        assert rows[1].loc[product, "area_ha"] == pytest.approx(21.0)
        assert rows[0].loc[product, "area_ha"] == pytest.approx(21.0)
        # paddock figures are rounded to 0.01 t each (tonnage.py), so two paddocks may
        # differ from one by 0.01 t
        assert abs(rows[0].loc[product, "tonnes"] - rows[1].loc[product, "tonnes"]) <= 0.0101
    pads = farms[0].prep.paddocks.set_index("paddock").geometry
    assert pads["Dam Side"].area == pytest.approx(300 * 300)  # 9 ha left once 3 ha went north


# ------------------------------------------------------------------- samples per paddock


def _dense_lab(folder: Path, per_paddock: int, paddocks: int = 1) -> None:
    """``per_paddock`` samples on a jittered grid in each box of the small farm, with values
    that vary smoothly across it (invented; the tests check which samples are used)."""
    import numpy as np

    rng = np.random.default_rng(7)
    rows = []
    for k in range(paddocks):
        for i in range(per_paddock):
            x = X0 + k * 500 + 10 + (i % 8) * 48 + rng.uniform(0, 20)
            y = Y0 + 10 + (i // 8) * 280 / (per_paddock / 8) + rng.uniform(0, 15)
            u = (x - X0 - k * 500) / 400
            rows.append(f"P{k}S{i:03d},{x:.1f},{y:.1f},{5.0 + u + rng.normal(0, .1):.2f},"
                        f"{6 + 3 * u + rng.normal(0, .3):.2f},{2 + np.sin(3 * u):.2f},"
                        f"{0.5 + rng.normal(0, .05):.2f},{0.8 + u / 2:.2f},0.2")
    (folder / "lab.csv").write_text(HEADER + "\n" + "\n".join(rows) + "\n")


def test_above_the_fitting_ceiling_variograms_are_fitted_on_a_spread_subset_and_said(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The ceiling is lowered below the farm's 48 samples, so the rule runs here: the
    model choice and the cross-validation see the subset, the kriging every sample."""
    from geosoil import model_choice, surfaces
    from geosoil.pipeline import compute

    seen: list[int] = []
    real = model_choice.select_model

    def spy(xy, values, **kw):  # noqa: ANN001, ANN003, ANN202
        seen.append(len(values))
        return real(xy, values, **kw)

    monkeypatch.setattr(surfaces, "select_model", spy)
    monkeypatch.setattr(surfaces, "FIT_MAX_SAMPLES", 30)
    folder = make_project(tmp_path / "farm", extra=(
        "[interpolation]\nmin_samples_variogram = 10\n"))
    _dense_lab(folder, 48)
    farm = compute(load_project(folder), use_cache=False)
    kriged = [s for s in farm.surfaces.values() if s.method == "ordinary kriging"]
    assert kriged and seen and max(seen) == 30
    for s in kriged:
        assert s.n_samples == 48 and s.cross_validation is not None
        assert s.cross_validation.n == 30
        assert any("fitted and cross-validated on 30 of the 48 samples" in n for n in s.notes)
    told = [w for w in farm.warnings if "more than the 30 a variogram is fitted" in w]
    assert len(told) == 1 and told[0].startswith("Home, ")
    # the subset is seeded: a second run fits the same variograms
    again = compute(load_project(folder), use_cache=False)
    for key, s in farm.surfaces.items():
        assert again.surfaces[key].model == s.model


def test_a_fixed_or_farm_variogram_is_cross_validated_on_the_subset(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from geosoil import surfaces
    from geosoil.pipeline import compute

    monkeypatch.setattr(surfaces, "FIT_MAX_SAMPLES", 30)
    folder = make_project(tmp_path / "farm", names=("Home", "Back"), extra=(
        '[interpolation]\nvariogram_scope = "farm"\n\n'
        '[interpolation.fixed.ca]\nmodel = "spherical"\nnugget = 0.1\npsill = 1.0\n'
        "range_m = 300.0\n"))
    _dense_lab(folder, 40, paddocks=2)
    farm = compute(load_project(folder), use_cache=False)
    ca = farm.surfaces[("Home", "ca")]
    assert ca.method == "ordinary kriging" and ca.cross_validation.n == 30
    assert any(n.startswith("cross-validated on 30 of the 40 samples") for n in ca.notes)
    assert any("empirical variogram (shown only) on 30 of the 80 samples" in n for n in ca.notes)
    ph = farm.surfaces[("Back", "ph_cacl2")]
    assert ph.variogram_scope == "farm" and ph.cross_validation.n == 30
    assert any("variogram fitted and cross-validated on 30 of the 80 samples" in n
               for n in ph.notes)
    pooled = [w for w in farm.warnings if w.startswith("farm-wide variogram: 80 samples")]
    assert len(pooled) == 1


# ------------------------------------------------------------------------ the terminal


HOSTILE = "Home\x1b]0;owned\x07\x1b[2J\u202e"  # retitle, clear the screen, reverse the text


def _raw(text: str) -> list[str]:
    """The control characters (and bidirectional overrides) left in ``text``."""
    return [c for c in text if (ord(c) < 32 and c not in "\n\t") or 0x7f <= ord(c) <= 0x9f
            or 0x202a <= ord(c) <= 0x202e or 0x2066 <= ord(c) <= 0x2069]


def test_the_verbose_log_shows_control_characters_as_escapes(tmp_path: Path) -> None:
    folder = make_project(tmp_path / "farm", names=(HOSTILE,))
    lab = folder / "lab.csv"
    lab.write_text("\n".join(lab.read_text().splitlines()[:2]) + "\n")  # one sample
    r = CliRunner().invoke(cli, ["-vv", "check", str(folder)])
    assert r.exit_code == 0, r.stderr
    assert not _raw(r.stderr)
    logged = [ln for ln in r.stderr.splitlines() if ln.startswith("INFO geosoil.recording: ")]
    assert any("paddock 'Home\\x1b]0;owned\\x07\\x1b[2J\\u202e' has one sample" in ln
               for ln in logged), r.stderr
    assert any(ln.startswith("DEBUG ") for ln in r.stderr.splitlines())


def test_usage_errors_quoting_what_was_typed_show_control_characters_as_escapes(
    tmp_path: Path,
) -> None:
    r = CliRunner().invoke(cli, ["check", str(tmp_path / HOSTILE)])
    assert r.exit_code == 2 and not _raw(r.stderr)
    assert "Path '" in r.stderr and "Home\\x1b]0;owned\\x07\\x1b[2J\\u202e' does not exist" in \
        r.stderr and r.stderr.startswith("Usage: ")
    folder = make_project(tmp_path / "farm")
    r = CliRunner().invoke(cli, ["new", str(tmp_path / "p"), "--samples",
                                 str(folder / "lab.csv"), "--paddocks",
                                 str(folder / "paddocks.gpkg"), "--crs", "EPSG:\x1b[2J"])
    assert r.exit_code == 2 and not _raw(r.stderr)
    assert "Invalid value for '--crs': 'EPSG:\\x1b[2J'" in r.stderr
    r = CliRunner().invoke(cli, ["--col\x9b2Jour"])  # \x9b: the one-character CSI
    assert r.exit_code == 2 and not _raw(r.stderr)
    assert "No such option '--col\\x9b2Jour'" in r.stderr


def test_a_320_character_paddock_name_is_a_named_error_with_escapes(tmp_path: Path) -> None:
    name = (HOSTILE + " by the long creek ") * 11 + "x" * 17
    name = name[:320]
    assert len(name) == 320
    folder = make_project(tmp_path / "farm", names=(name,))
    out = tmp_path / "out"
    for command in (["check", str(folder)], ["run", str(folder), "--out", str(out)]):
        r = CliRunner().invoke(cli, command)
        assert r.exit_code == 1 and "Traceback" not in r.stderr and not _raw(r.stderr)
        assert "longer than 80 characters" in r.stderr and "(320 characters)" in r.stderr
        assert "'Home\\x1b]0;owned" in r.stderr
    assert not out.exists()


def test_a_warning_outside_every_recorder_is_printed_with_escapes(capsys) -> None:  # noqa: ANN001
    import warnings

    from geosoil.cli.options import show_warnings_clean

    with warnings.catch_warnings():
        warnings.simplefilter("always")
        show_warnings_clean()
        warnings.warn(f"sample '{HOSTILE}' is odd", UserWarning, stacklevel=1)
    err = capsys.readouterr().err
    assert "UserWarning: sample 'Home\\x1b]0;owned\\x07" in err and not _raw(err)
