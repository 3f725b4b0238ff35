"""``geosoil check``: every problem listed, exit 1 when any; nothing written."""

from __future__ import annotations

import os
from pathlib import Path

import geopandas as gpd
import pytest
import shapely
from click.testing import CliRunner
from geosoil.cli.main import cli

UTM = "EPSG:32755"
X0, Y0 = 540_000.0, 6_160_000.0

HEADER = ("Sample,Easting,Northing,pH (CaCl2),Ca (cmol/kg),Mg (cmol/kg),K (cmol/kg),Na (cmol/kg),"
          "Exch Acidity (cmol/kg)")


def _rows(n: int = 12) -> list[str]:
    rows = []
    for i in range(n):
        x, y = X0 + 20 + (i % 4) * 90 + i, Y0 + 30 + (i // 4) * 80 + 2 * i
        rows.append(f"S{i + 1:02d},{x:.1f},{y:.1f},{5.0 + i / 10:.1f},{6 + i / 5:.2f},2.1,0.5,"
                    f"{0.3 + i / 8:.2f},0.2")
    return rows


def make_project(folder: Path, *, rows: list[str] | None = None, extra: str = "",
                 header: str = HEADER) -> Path:
    """A project folder with a lab CSV (easting/northing), one paddock and ``extra`` TOML."""
    folder.mkdir(parents=True, exist_ok=True)
    gpd.GeoDataFrame({"name": ["Home"]}, geometry=[shapely.box(X0, Y0, X0 + 400, Y0 + 300)],
                     crs=UTM).to_file(folder / "paddocks.gpkg")
    (folder / "lab.csv").write_text(header + "\n" + "\n".join(rows or _rows()) + "\n")
    (folder / "geosoil.toml").write_text(
        f'[samples]\nfile = "lab.csv"\ncrs = "{UTM}"\n\n[boundaries]\npaddocks = "paddocks.gpkg"\n'
        f"\n{extra}\n"
    )
    return folder


def check(project: Path, *args: str):  # noqa: ANN201 - click's Result
    return CliRunner().invoke(cli, [*args, "check", str(project)])


def _problems(stderr: str) -> list[str]:
    return [ln for ln in stderr.splitlines() if ln.startswith("problem: ")]


def _tree(root: Path) -> list[tuple[str, int, int]]:
    return sorted(
        (str(p.relative_to(root)), p.stat().st_size if p.is_file() else -1,
         p.stat().st_mtime_ns if p.is_file() else 0)
        for p in root.rglob("*")
    )


def test_help() -> None:
    r = CliRunner().invoke(cli, ["check", "--help"])
    assert r.exit_code == 0 and "PROJECT" in r.stdout and "nothing is written" in r.stdout


def test_a_project_that_does_not_exist_is_a_usage_error(tmp_path: Path) -> None:
    r = check(tmp_path / "nowhere")
    assert r.exit_code == 2 and "PROJECT" in r.stderr and "does not exist" in r.stderr


def test_a_folder_without_a_project_file_is_an_error(tmp_path: Path) -> None:
    r = check(tmp_path)
    assert r.exit_code == 1 and r.stdout == ""
    assert "geosoil.toml" in r.stderr and "geosoil new" in r.stderr
    assert "settings" not in r.stderr


def test_ok_project_exits_0_and_writes_nothing_anywhere(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    project = make_project(tmp_path / "farm")
    cwd = tmp_path / "cwd"
    cwd.mkdir()
    monkeypatch.chdir(cwd)
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    before = _tree(tmp_path)
    for target in (project, project / "geosoil.toml"):  # a folder or its TOML file
        r = check(target)
        assert r.exit_code == 0, r.stderr
        assert r.stdout.startswith("ok: ") and "ready to run" in r.stdout
        assert _problems(r.stderr) == []
    assert _tree(tmp_path) == before
    assert os.listdir(cwd) == []


def _broken(tmp_path: Path, **kw: object):  # noqa: ANN202
    r = check(make_project(tmp_path / "farm", **kw))  # type: ignore[arg-type]
    assert r.exit_code == 1
    assert r.stdout == ""
    return r, _problems(r.stderr)


def test_typo_in_a_key_suggests_the_nearest_valid_key(tmp_path: Path) -> None:
    r, problems = _broken(tmp_path, extra="[grid]\ncell_sise_m = 5\n")
    assert len(problems) == 1
    assert "'grid.cell_sise_m'" in problems[0] and "did you mean 'cell_size_m'?" in problems[0]


def test_value_out_of_range_names_the_key_and_the_range(tmp_path: Path) -> None:
    r, problems = _broken(tmp_path, extra="[rates.gypsum]\ntarget_esp_percent = 120\n")
    assert "'rates.gypsum.target_esp_percent'" in problems[0]
    assert "from 0 to 100 %" in problems[0] and "got 120" in problems[0]
    assert " to 100 %" in problems[0] and "more than 0 to" not in problems[0]


def test_wrong_type_names_the_key(tmp_path: Path) -> None:
    r, problems = _broken(tmp_path, extra='[soil]\ndepth_m = "10 cm"\n')
    assert "'soil.depth_m'" in problems[0] and "must be a number" in problems[0]


def test_several_settings_problems_are_all_listed(tmp_path: Path) -> None:
    r, problems = _broken(
        tmp_path,
        extra='[grid]\ncell_sise_m = 5\n[soil]\ndepth_m = 3\n[zones]\nmethod = "quantile"\n'
        "[outputs]\nrate_unit = 1\n",
    )
    text = "\n".join(problems)
    assert len(problems) == 4
    for key in ("grid.cell_sise_m", "soil.depth_m", "zones.method", "outputs"):
        assert f"'{key}'" in text
    assert "did you mean 'quantiles'" in text and "did you mean 'output'" in text
    assert "4 problem(s)" in r.stderr
    # the summary names the project file, as the problems found in the inputs do
    toml = (tmp_path / "farm" / "geosoil.toml").resolve()
    assert f"4 problem(s) found in the settings of {toml};" in r.stderr


def test_a_settings_problem_names_the_project_file_in_check_and_run(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
) -> None:
    """Given as a bare folder name ('check bad'), the messages name the TOML file, not 'the
    settings of bad'; run's error names it too."""
    make_project(tmp_path / "bad", extra="[grid]\ncell_size_m = -5\n")
    monkeypatch.chdir(tmp_path)
    toml = (tmp_path / "bad" / "geosoil.toml").resolve()
    r = check(Path("bad"))
    assert r.exit_code == 1
    assert f"found in the settings of {toml};" in r.stderr
    assert "settings of bad;" not in r.stderr
    run = CliRunner().invoke(cli, ["run", "bad", "--out", str(tmp_path / "out")])
    assert run.exit_code == 1
    assert f"setting 'grid.cell_size_m' in {toml}: must be" in run.stderr


def test_a_calcite_neutralising_value_above_pure_calcites_is_a_problem(tmp_path: Path) -> None:
    # [derived] pure CaCO3: CCE 100 %, NV 56.0 % on a CaO basis; NV 95 for a calcite is a
    # CCE figure in the CaO key (it would cut the lime rate by 41 % in silence)
    r, problems = _broken(tmp_path, extra="[products.lime]\nnv_cao_percent = 95\n")
    assert len(problems) == 1
    assert "'products.lime.nv_cao_percent'" in problems[0]
    assert "95 %" in problems[0] and "56.0 %" in problems[0]
    r, problems = _broken(tmp_path / "b", extra="[products.lime]\ncce_percent = 150\n")
    assert "'products.lime.cce_percent'" in problems[0] and "100.0 %" in problems[0]


def test_missing_samples_file_is_named(tmp_path: Path) -> None:
    project = make_project(tmp_path / "farm")
    (project / "lab.csv").unlink()
    r = check(project)
    assert r.exit_code == 1 and r.stdout == ""
    problems = _problems(r.stderr)
    assert len(problems) == 1 and str(project / "lab.csv") in problems[0]


def test_several_bad_sample_rows_are_all_listed(tmp_path: Path) -> None:
    rows = _rows()
    rows[1] = rows[1].replace(",2.1,", ",abc,")  # file row 3: Mg not a number
    rows[4] = rows[4].replace(",0.5,", ",,")  # file row 6: K empty
    f = rows[8].split(",")
    f[3] = "15.2"  # file row 10: pH out of range
    rows[8] = ",".join(f)
    r, problems = _broken(tmp_path, rows=rows)
    text = "\n".join(problems)
    for row in (3, 6, 10):
        assert f"row {row}" in text, text
    assert len(problems) >= 3
    assert "abc" in text
    assert "bad row(s) skipped" not in r.stderr  # on_bad_row = "stop": a run stops, not skips


def test_bad_rows_set_to_skip_are_warnings_not_problems(tmp_path: Path) -> None:
    rows = _rows()
    rows[1] = rows[1].replace(",2.1,", ",abc,")
    r = check(make_project(tmp_path / "farm", rows=rows))
    assert r.exit_code == 1
    project = tmp_path / "farm"
    text = (project / "geosoil.toml").read_text().replace(
        'crs = "EPSG:32755"', 'crs = "EPSG:32755"\non_bad_row = "skip"')
    (project / "geosoil.toml").write_text(text)
    r = check(project)
    assert r.exit_code == 0, r.stderr
    assert "1 bad row(s) skipped: row 3" in r.stderr


def _run(project: Path, out: Path):  # noqa: ANN201 - click's Result
    return CliRunner().invoke(cli, ["run", str(project), "--out", str(out)])


def test_samples_outside_every_paddock_are_problems_when_a_run_would_stop(
    tmp_path: Path
) -> None:
    # check's verdict must match run's: with on_bad_row = "stop" a run stops at them
    rows = [*_rows(), f"FAR1,{X0 - 500:.1f},{Y0 - 500:.1f},5.5,6.0,2.1,0.5,0.3,0.2",
            f"FAR2,{X0 + 900:.1f},{Y0 + 100:.1f},5.5,6.0,2.1,0.5,0.3,0.2"]
    project = make_project(tmp_path / "farm", rows=rows)
    r = check(project)
    problems = _problems(r.stderr)
    assert r.exit_code == 1, r.stderr
    assert len(problems) == 2
    assert "row 14" in problems[0] and "'FAR1'" in problems[0] and "outside" in problems[0]
    assert "row 15" in problems[1] and "'FAR2'" in problems[1]
    assert "outside every paddock skipped" not in r.stderr  # a run stops, not skips
    assert _run(project, tmp_path / "out").exit_code == 1
    # with on_bad_row = "skip" they are skipped by both, with a warning
    text = (project / "geosoil.toml").read_text().replace(
        'crs = "EPSG:32755"', 'crs = "EPSG:32755"\non_bad_row = "skip"')
    (project / "geosoil.toml").write_text(text)
    r = check(project)
    assert r.exit_code == 0, r.stderr
    assert "2 sample(s) outside every paddock skipped" in r.stderr


def test_samples_without_an_ecec_are_problems_when_a_run_would_stop(tmp_path: Path) -> None:
    # acidity empty below the neutral pH and no lab CEC: the ECEC cannot be formed
    rows = _rows()
    rows[2] = rows[2][: -len(",0.2")] + ","  # file row 4, pH 5.2
    rows[5] = rows[5][: -len(",0.2")] + ","  # file row 7
    project = make_project(tmp_path / "farm", rows=rows)
    r = check(project)
    problems = _problems(r.stderr)
    assert r.exit_code == 1, r.stderr
    assert len(problems) == 2 and "row 4" in problems[0] and "row 7" in problems[1]
    assert all("ECEC" in p for p in problems)
    assert _run(project, tmp_path / "out").exit_code == 1


def test_one_undecided_acidity_column_is_one_problem_and_its_consequence_one_more(
    tmp_path: Path,
) -> None:
    # "H+Al" names no method: check asks which it is, and the 12 samples left without an
    # ECEC by it are one problem listing their rows, not 12 lines burying the cause
    project = make_project(tmp_path / "farm",
                           header=HEADER.replace("Exch Acidity (cmol/kg)", "H+Al (cmol/kg)"))
    r = check(project)
    problems = _problems(r.stderr)
    assert r.exit_code == 1, r.stderr
    assert len(problems) == 2, problems
    assert "'H+Al (cmol/kg)' names no method" in problems[0]
    assert "rows 2-13 (12 samples)" in problems[1] and "follows from column" in problems[1]


def test_a_bulk_density_for_a_paddock_that_does_not_exist_names_the_key(
    tmp_path: Path
) -> None:
    # a typo would leave paddock 'Home' on the default bulk density without a word
    extra = '[soil]\nbulk_density_by_paddock = { "Hmoe" = 1.5 }\n'
    project = make_project(tmp_path / "farm", extra=extra)
    r = check(project)
    problems = _problems(r.stderr)
    assert r.exit_code == 1 and len(problems) == 1
    assert "'soil.bulk_density_by_paddock.Hmoe'" in problems[0]
    assert "did you mean 'Home'?" in problems[0]
    run = _run(project, tmp_path / "out")
    assert run.exit_code == 1 and "bulk_density_by_paddock.Hmoe" in run.stderr


def test_a_rule_switched_on_without_its_data_names_the_key(tmp_path: Path) -> None:
    # Kamprath's lime requirement needs exchangeable Al; this lab file has none
    r, problems = _broken(tmp_path, extra='[rates.lime]\nenabled = "on"\nmethod = "kamprath"\n')
    assert len(problems) == 1
    assert "'rates.lime.method'" in problems[0]
    assert "exchangeable Al" in problems[0] or "al" in problems[0]
    assert "enabled" in problems[0]


def test_the_same_rule_on_auto_is_skipped_with_a_note(tmp_path: Path) -> None:
    r = check(make_project(tmp_path / "farm", extra='[rates.lime]\nmethod = "kamprath"\n'))
    assert r.exit_code == 0, r.stderr
    # the same words as the run's summary, run.json and report (one list of warnings)
    assert "warning: lime rule is enabled but cannot run on paddock 'Home'" in r.stderr
    assert "exchangeable Al" in r.stderr and "rates.lime.method" in r.stderr
    assert "warning" in r.stdout  # the count of warnings


def test_verbose_logs_to_stderr_quiet_keeps_only_the_result(tmp_path: Path) -> None:
    project = make_project(tmp_path / "farm")
    for _ in range(2):  # each invocation logs to its own stderr, not the first one's
        r = check(project, "-v")
        assert r.exit_code == 0
        assert "INFO geosoil.samples:" in r.stderr and "INFO" not in r.stdout
    r = check(project, "--quiet")
    assert r.exit_code == 0 and r.stderr == "" and r.stdout.startswith("ok: ")
    r = check(project)
    assert "INFO" not in r.stderr


# --------------------------------------------------------------------------- every problem at once


def test_check_names_a_duplicate_an_outside_sample_and_a_bad_cell_in_one_pass(
    tmp_path: Path,
) -> None:
    """Issue: 'check' on a file with a near-duplicate sample and a sample outside every paddock
    named only the duplicate. Every kind of problem is listed in one pass."""
    rows = _rows()
    dup = rows[3].split(",")
    dup[0], dup[1] = "S99", f"{float(dup[1]) + 0.3:.1f}"  # 0.3 m from S04
    out = rows[5].split(",")
    out[1] = f"{X0 + 900:.1f}"  # 500 m east of the paddock
    bad = rows[7].split(",")
    bad[4] = "n.d.x"
    rows[5], rows[7] = ",".join(out), ",".join(bad)
    project = make_project(tmp_path / "farm", rows=[*rows, ",".join(dup)])
    r = check(project)
    assert r.exit_code == 1
    found = _problems(r.stderr)
    assert any("'S04'" in p and "'S99'" in p and "apart" in p for p in found), found
    assert any("row 7" in p and "outside" in p for p in found), found
    assert any("row 9" in p and "not a number" in p for p in found), found


def test_check_opens_every_referenced_file_before_kriging(tmp_path: Path) -> None:
    """Issue: 'check' said 'ready to run' for a project whose bulk-density raster was missing;
    'run' then failed after kriging. Zone and exclusion files are opened too, and all are
    named in one pass."""
    project = make_project(tmp_path / "farm")
    text = (project / "geosoil.toml").read_text().replace(
        '[boundaries]\npaddocks = "paddocks.gpkg"\n',
        '[boundaries]\npaddocks = "paddocks.gpkg"\nexclusions = "no_such_exclusions.geojson"\n'
        'zones = "no_such_zones.geojson"\n') + '\n[soil]\nbulk_density_raster = "bd_missing.tif"\n'
    (project / "geosoil.toml").write_text(text)
    r = check(project)
    assert r.exit_code == 1, r.stderr
    found = "\n".join(_problems(r.stderr))
    for name in ("bd_missing.tif", "no_such_exclusions.geojson", "no_such_zones.geojson"):
        assert name in found, r.stderr


def test_an_unknown_key_lists_every_valid_key(tmp_path: Path) -> None:
    """The unknown-key message lists all the keys of the table, none cut off (a trial
    reported the lime table's list stopping before kamprath_factor and six more)."""
    import dataclasses

    from geosoil.rates import LimeRule

    r, problems = _broken(tmp_path, extra="[rates.lime]\nkamprath_facter = 1.5\n")
    assert len(problems) == 1 and "did you mean 'kamprath_factor'?" in problems[0]
    listed = problems[0].split("Valid keys: ", 1)[1].strip().split(", ")
    assert listed == [f.name for f in dataclasses.fields(LimeRule)]
    assert {"kamprath_factor", "kamprath_min_al", "product"} <= set(listed)


def _warnings(stderr: str) -> list[str]:
    return [ln.removeprefix("warning: ") for ln in stderr.splitlines()
            if ln.startswith("warning: ")]


def test_check_gives_the_warnings_run_gives_on_the_demo(demo_run) -> None:  # noqa: ANN001
    """The one warning list: the demo's check (with the session's cache, as after its run)
    warns of what its run warned of, the lime split into passes among them."""
    r = CliRunner().invoke(cli, ["check", str(demo_run.farm)],
                           env={"XDG_CACHE_HOME": str(demo_run.cache.parent)})
    assert r.exit_code == 0, r.stderr
    assert _warnings(r.stderr) == demo_run.record["warnings"]
    assert any("per pass" in w for w in demo_run.record["warnings"])
    assert f"({len(demo_run.record['warnings'])} warning(s))" in r.stdout


def test_check_gives_the_warnings_run_gives_with_default_products(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """A trial: check said 0 warnings where run gave the products' pure-material defaults.
    Before the first run (no surfaces in the cache) check kriges nothing and writes
    nothing: it gives the products' defaults and says the rates were not checked; after
    the run, its warnings are the run's."""
    import json

    from geosoil.pipeline import RATES_NOT_CHECKED

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    project = make_project(tmp_path / "farm")
    before = _tree(tmp_path)
    first = check(project)
    assert first.exit_code == 0, first.stderr
    assert _tree(tmp_path) == before  # nothing written, not even to the cache
    said = _warnings(first.stderr)
    assert said[-1] == RATES_NOT_CHECKED
    got = _run(project, tmp_path / "out")
    assert got.exit_code == 0, got.stderr
    ran = json.loads((tmp_path / "out" / "run.json").read_text())["warnings"]
    defaults = [w for w in ran if "still carries the pure-material defaults" in w]
    assert defaults and set(defaults) <= set(said)  # (and those of products it may apply)
    after = check(project)  # the run's surfaces are in the cache now
    assert after.exit_code == 0, after.stderr
    assert _warnings(after.stderr) == ran


def test_check_lists_every_column_not_read(tmp_path: Path) -> None:
    # user trial: columns with names geosoil did not know were dropped without a word
    project = make_project(tmp_path / "p", header=HEADER + ",Kalzium frei",
                           rows=[r + ",3.0" for r in _rows()])
    r = check(project)
    shown = [ln for ln in r.stderr.splitlines() if "not read" in ln]
    assert len(shown) == 1 and shown[0].startswith("warning: ")
    assert "'Kalzium frei' (name not recognised)" in shown[0]
    assert "[samples.columns]" in shown[0] and "[samples.units]" in shown[0]


def test_check_notes_record_keeping_columns_and_warns_of_the_others(tmp_path: Path) -> None:
    # user trial: a 'Notes' column was a warning in every run; check says it as a note
    project = make_project(tmp_path / "p", header=HEADER + ",Notes,Zn",
                           rows=[r + ",dry,2" for r in _rows()])
    r = check(project)
    assert r.exit_code == 0, r.stderr
    notes = [ln for ln in r.stderr.splitlines() if ln.startswith("note: ")]
    assert len(notes) == 1 and "1 record-keeping column(s) not read" in notes[0]
    assert notes[0].endswith("'Notes'")
    shown = [ln for ln in r.stderr.splitlines() if "column(s) not read" in ln
             and ln.startswith("warning: ")]
    assert len(shown) == 1 and "'Zn' (name not recognised)" in shown[0]
    assert "Notes" not in shown[0]


def _alkaline_rows(n: int = 12) -> list[str]:
    """Every sample alkaline (pH in water 7.8-8.3) and its exchangeable acidity left blank,
    as labs do above pH 7 (common practice: acidity is negligible there)."""
    return [",".join(r.split(",")[:3] + [f"{7.8 + (i % 6) / 10:.1f}"] + r.split(",")[4:8]
                     + [""]) for i, r in enumerate(_rows(n))]


def test_an_alkaline_farm_gets_one_warning_list_from_check_run_and_explain(
        tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """A trial: on a farm where every sample is alkaline and the acidity was not measured,
    check warned 'lime rule is enabled but cannot run' while the run ran it (acidity 0 at
    pH 7 or above, common practice) and explain showed acidity 0 without saying why. The
    run is right: the lime rule runs and gives none. Check says so before the first run
    (no such warning) and after it (the run's warnings exactly); explain says where the
    acidity 0 comes from."""
    import json

    from geosoil.pipeline import RATES_NOT_CHECKED

    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "cache"))
    project = make_project(tmp_path / "farm", rows=_alkaline_rows(),
                           header=HEADER.replace("pH (CaCl2)", "pH (water)"),
                           extra='[rates.lime]\nmethod = "acidity_share"\n')
    first = check(project)
    assert first.exit_code == 0, first.stderr
    said = _warnings(first.stderr)
    assert said[-1] == RATES_NOT_CHECKED
    assert not any("cannot run" in w for w in said)
    got = _run(project, tmp_path / "out")
    assert got.exit_code == 0, got.stderr
    record = json.loads((tmp_path / "out" / "run.json").read_text())
    # the summary names a rule that gave nothing only when nothing was prescribed (gypsum
    # was here); run.json always does
    assert "the lime rule ran and no cell needs its product" in record["rules"][
        "gave_no_product"]
    ran = record["warnings"]
    assert not any("cannot run" in w for w in ran)
    # before the run: the run's warnings but the kriging's (check does not krige), and the
    # products a rule may apply (lime here)
    assert {w for w in ran if "variogram" not in w} <= set(said)
    assert {w for w in said if w not in ran} <= {
        RATES_NOT_CHECKED, *(w for w in said if "'lime' still carries" in w)}
    after = check(project)
    assert _warnings(after.stderr) == ran
    x, y = X0 + 200, Y0 + 150
    explained = CliRunner().invoke(cli, ["explain", str(project), "--at", f"{x},{y}"])
    assert explained.exit_code == 0, explained.stderr
    line = next(ln for ln in explained.stdout.splitlines()
                if "exchangeable acidity =" in ln)
    assert "not measured" in line and "pH (water) 7 or above" in line and line.endswith("= 0")


def test_a_note_below_the_lab_table_is_said_by_check_not_a_problem(tmp_path: Path) -> None:
    # user trial: a last row "Methods: pH 1:5 water..." stopped check ("row 9 ... the
    # coordinate is empty"); it is passed over and said
    project = make_project(tmp_path / "p", rows=[*_rows(), "Methods: pH 1:5 CaCl2,,,,,,,,"])
    result = check(project)
    assert result.exit_code == 0, result.stderr
    assert not _problems(result.stderr)
    assert "1 note row(s) below the table passed over, not samples: row 14: 'Methods: pH " \
        "1:5 CaCl2'" in result.stderr
