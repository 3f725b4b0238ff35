"""Names: each paddock and product gets its own files, or check says why.

Names here are invented. The case-insensitive comparison follows Unicode's full
case folding (Unicode Standard, section 3.13: "ß" folds to "ss") and NFKC
compatibility normalisation (UAX #15), which is how macOS and Windows volumes
commonly compare file names [from memory: APFS and NTFS are case-insensitive by
default].
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from geosoil.job import run
from geosoil.names import MAX_NAME_CHARS, assign, fold, slug
from geosoil.pipeline import check
from geosoil.project import load_project
from tests.small_farm import make_project


@pytest.mark.parametrize("name, expected", [
    ("Red Hill", "red-hill"),
    ("  RED  HILL! ", "red-hill"),
    ("Südhang", "südhang"),
    ("Поле 3", "поле-3"),
    ("खेत नंबर १", "खेत-नंबर-१"),  # Devanagari vowel signs (marks) stay inside the word
    ("北の畑", "北の畑"),
    ("a/b\\c:d*e?f\"g<h>i|j", "a-b-c-d-e-f-g-h-i-j"),  # signs no file system takes
    ("../../etc", "etc"),
    ("!!!", ""),
    ("CON", "con-1"),  # a device name on Windows
])
def test_slug_keeps_letters_of_any_script(name: str, expected: str) -> None:
    assert slug(name) == expected


@given(st.text(min_size=1, max_size=300))
def test_a_slug_is_always_a_safe_file_name(name: str) -> None:
    s = slug(name)
    assert len(s.encode()) <= 120
    assert "/" not in s and "\\" not in s and "\0" not in s and s not in (".", "..")
    assert s == s.strip("-")
    assert not any(c in s for c in ':*?"<>|')


@given(st.lists(st.text(max_size=12), min_size=1, max_size=8, unique=True))
def test_assigned_file_names_are_distinct_even_ignoring_case(names: list[str]) -> None:
    got = assign(names, fallback="paddock")
    assert list(got.files) == names
    folded = [fold(f) for f in got.files.values()]
    assert len(set(folded)) == len(folded)
    assert all(f for f in got.files.values())
    # a name whose slug is its own keeps it
    for n in names:
        if slug(n) and sum(fold(slug(m)) == fold(slug(n)) for m in names) == 1:
            assert got.files[n] == slug(n)


def test_case_folding_finds_clashes_a_case_insensitive_disk_would_make() -> None:
    got = assign(["Straße", "STRASSE"], fallback="paddock")
    assert got.clashes == [("straße", ["Straße", "STRASSE"])]
    assert fold(got.files["Straße"]) != fold(got.files["STRASSE"])


CLASHING = ("Red Hill", "red-hill", "RED  HILL!", "???")


def test_check_refuses_clashing_and_empty_names_naming_them(tmp_path: Path) -> None:
    farm = make_project(tmp_path / "farm", names=CLASHING)
    problems, _ = check(load_project(farm))
    assert len(problems) == 1
    text = problems[0]
    assert "paddocks.gpkg" in text
    assert "'Red Hill', 'red-hill' and 'RED  HILL!' would all be written as 'red-hill'" in text
    assert "'???' has no letter or digit" in text
    assert 'name_clashes = "suffix"' in text and "'red-hill-2'" in text


def test_product_keys_differing_in_case_are_refused(tmp_path: Path) -> None:
    extra = ('[products.lime]\ncce_percent = 95.0\n\n'
             '[products.LIME]\nmaterial = "lime"\ncce_percent = 80.0\n')
    farm = make_project(tmp_path / "farm", extra=extra)
    problems, _ = check(load_project(farm))
    assert any("'products'" in p and "'lime' and 'LIME' would all be written as 'lime'" in p
               for p in problems), problems


def test_a_name_too_long_is_refused_by_check(tmp_path: Path) -> None:
    long = "Long paddock by the creek " * 12 + "end"  # 315 characters
    farm = make_project(tmp_path / "farm", names=(long,))
    problems, _ = check(load_project(farm))
    assert len(problems) == 1
    assert f"longer than {MAX_NAME_CHARS} characters" in problems[0]
    assert f"({len(long)} characters)" in problems[0]


def test_with_suffix_every_paddock_gets_its_own_folder_and_is_told(tmp_path: Path) -> None:
    farm = make_project(tmp_path / "farm", names=CLASHING)
    toml = farm / "geosoil.toml"
    toml.write_text(toml.read_text().replace("[output]\n", '[output]\nname_clashes = "suffix"\n'))
    result = run(load_project(farm), out_dir=tmp_path / "out")
    folders = sorted(p.name for p in (tmp_path / "out" / "prescriptions").iterdir()
                     if p.name != "farm_isoxml")  # the farm's task set (README)
    assert folders == ["paddock-1", "red-hill", "red-hill-2", "red-hill-3"]
    told = [w for w in result.warnings if "name_clashes" in w]
    assert len(told) == 3
    assert any("'RED  HILL!' is written as 'red-hill-3'" in w for w in told)
    record = json.loads((tmp_path / "out" / "run.json").read_text(encoding="utf-8"))
    assert {p["paddock"] for p in record["paddocks"]} == set(CLASHING)
