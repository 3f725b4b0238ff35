"""Reading a large lab file: whole columns parsed at once, every bad row still named.

The column-at-once parsing in geosoil.samples (``_cells``, ``_filled``, ``_id_texts``) is
held cell by cell against the one-cell rules it stands in for (``_cell``, ``_missing``,
``_id_text``), which the rest of tests/test_samples.py checks against hand-written
expectations. The lab values are invented.
"""

from __future__ import annotations

import datetime
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from geosoil.errors import InputError
from geosoil.samples import (
    SampleSettings,
    _cell,
    _cells,
    _filled,
    _id_text,
    _id_texts,
    _missing,
    read_samples,
)

# odd cells a lab file or a workbook can hold; Python's float() is the reference parser
TEXTS = ["1.5", " 2.25 ", "+.5", "-0", "1.", "1e3", "1E-2", "1_0", "\u0663", "\u00a04\u00a0",
         "", "  ", "na", "N/A", "-", "--", "nan", "NaN", "none", "null", "inf", "-Infinity",
         "1e999", "<0.1", "< 0.2", "<", "abc", "1,5", "1.234,5", "0x10", "5 %", "12-3"]
OBJECTS = [1.5, 2, 0, -3, float("nan"), float("inf"), None, True, np.bool_(False),
           np.float64(2.5), np.int64(7), datetime.date(2026, 3, 1), pd.Timestamp("2026-03-01"),
           [1, 2], {"a": 1}, "3.5", " 4 ", "", 10**400]  # (a whole number beyond any float)


def _one_by_one(values, decimal_comma):
    parsed = [_cell(v, decimal_comma=decimal_comma) for v in values]
    return (np.array([p[0] for p in parsed]), [p[1] for p in parsed], [p[2] for p in parsed])


@pytest.mark.parametrize("decimal_comma", [False, True])
@pytest.mark.parametrize("values", [TEXTS, OBJECTS, [1.5, 2.0, float("nan"), 3.25],
                                    [1, 2, 3], [1, 2.5, float("inf")]],
                         ids=["texts", "mixed", "floats", "ints", "ints-floats"])
def test_whole_column_parsing_equals_the_cell_by_cell_rule(values, decimal_comma):
    numbers, status, texts = _cells(pd.Series(values, dtype=object), decimal_comma=decimal_comma)
    want_numbers, want_status, want_texts = _one_by_one(values, decimal_comma)
    np.testing.assert_array_equal(numbers, want_numbers)  # NaN equal to NaN
    assert list(status) == want_status
    assert texts == want_texts


def test_a_whole_number_beyond_any_float_is_a_bad_cell_not_a_crash():
    assert _cell(10**400, decimal_comma=False)[:2] == (pytest.approx(math.nan, nan_ok=True),
                                                       "bad")
    numbers, status, _ = _cells(pd.Series([1, 10**400], dtype=object), decimal_comma=False)
    assert numbers[0] == 1.0 and math.isnan(numbers[1]) and list(status) == ["ok", "bad"]


def test_filled_cells_equal_the_cell_by_cell_rule():
    for values in (TEXTS, OBJECTS):
        table = pd.DataFrame(np.array(values, dtype=object).reshape(-1, 1))
        want = [not _missing(v) and str(v).strip() != "" for v in values]
        assert _filled(table)[0].tolist() == want


def test_ids_equal_the_cell_by_cell_rule():
    for values in (["A1", " A2 ", "", "  ", "\u00a0B\u00a0"], [1.0, 2.5, None, "C3 ", 4]):
        assert _id_texts(pd.Series(values, dtype=object)) == [_id_text(v) for v in values]


HEADER = "Sample ID,Longitude,Latitude,Exch Ca (cmol(+)/kg),Exch Mg (cmol(+)/kg),pH (water)"
N_ROWS = 20_000
# file row (the header is row 1) -> (cell index, bad text, column named, problem words)
BAD = {
    2_345: (3, "abc", "Exch Ca (cmol(+)/kg)", "'abc' is not a number"),
    9_001: (4, "", "Exch Mg (cmol(+)/kg)", "the value is empty"),
    14_000: (5, "15.2", "pH (water)", "outside the plausible"),
    17_777: (2, "200.5", "Latitude", "outside -90 to 90"),
    20_001: (4, "-0.3", "Exch Mg (cmol(+)/kg)", "negative value -0.3"),
}
DUPLICATE_ROW, DUPLICATE_OF = 18_500, 1_200


def _big_lab(tmp_path: Path) -> Path:
    rng = np.random.default_rng(7)
    lon = 147.0 + rng.uniform(0, 0.02, N_ROWS)
    lat = -35.0 + rng.uniform(0, 0.02, N_ROWS)
    lines = [HEADER]
    for i in range(N_ROWS):
        cells = [f"S{i + 2}", f"{lon[i]:.6f}", f"{lat[i]:.6f}", f"{rng.uniform(2, 9):.2f}",
                 f"{rng.uniform(0.5, 3):.2f}", f"{rng.uniform(4.5, 7.5):.2f}"]
        row = i + 2
        if row in BAD:
            cells[BAD[row][0]] = BAD[row][1]
        if row == DUPLICATE_ROW:
            cells[0] = f"S{DUPLICATE_OF}"
        lines.append(",".join(cells))
    path = tmp_path / "lab.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_bad_rows_in_a_large_file_are_named_by_row_and_column(tmp_path):
    path = _big_lab(tmp_path)
    with pytest.raises(InputError) as info:
        read_samples(SampleSettings(file=path))
    first = min(BAD)
    assert info.value.row == first and info.value.column == BAD[first][2]
    assert BAD[first][3] in str(info.value)

    with pytest.warns(Warning):
        read = read_samples(SampleSettings(file=path, on_bad_row="skip"))
    skipped = dict(read.skipped)
    assert sorted(skipped) == sorted([*BAD, DUPLICATE_ROW])
    for row, (_, _, column, words) in BAD.items():
        assert f"column '{column}'" in skipped[row] and words in skipped[row], skipped[row]
    assert f"also on row {DUPLICATE_OF}" in skipped[DUPLICATE_ROW]
    assert len(read.samples) == N_ROWS - len(skipped)
    kept = read.samples["source_row"].to_numpy()
    assert not np.isin(kept, list(skipped)).any()
    # a kept row's values are the file's (row 2 is S2 with its own numbers)
    text = path.read_text(encoding="utf-8").splitlines()
    row = 10_000
    cells = text[row - 1].split(",")
    got = read.samples.loc[read.samples["source_row"] == row].iloc[0]
    assert got["sample_id"] == cells[0]
    assert math.isclose(got["ca"], float(cells[3])) and math.isclose(got["ph"], float(cells[5]))
