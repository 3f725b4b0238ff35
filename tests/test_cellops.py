"""The zones' raster operations against scipy.ndimage, the general-purpose reference
library they stand in for on small grids (geosoil.cellops)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.ndimage as ndi
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from geosoil import cellops

shapes = st.tuples(st.integers(1, 24), st.integers(1, 24))


def _scipy_pieces(values: np.ndarray) -> tuple[np.ndarray, list[int]]:
    piece = np.zeros(values.shape, dtype=np.int64)
    value = [0]
    n = 0
    for c in np.unique(values):
        lab, m = ndi.label(values == c)
        piece[lab > 0] = lab[lab > 0] + n
        value.extend([int(c)] * m)
        n += m
    return piece, value


@given(arrays(np.int64, shapes, elements=st.integers(0, 3)))
def test_pieces_equal_scipys_label_value_by_value(values: np.ndarray) -> None:
    piece, value = cellops.label_pieces(values)
    expected_piece, expected_value = _scipy_pieces(values)
    np.testing.assert_array_equal(piece, expected_piece)
    assert value == expected_value


@given(arrays(np.bool_, shapes))
def test_box_counts_equal_scipys_uniform_filter(mask: np.ndarray) -> None:
    expected = ndi.uniform_filter(mask.astype(float), size=3, mode="constant") * 9.0
    got = cellops.box_count(mask)
    np.testing.assert_allclose(got, expected, atol=1e-9)
    assert np.array_equal(got, np.round(got))  # whole numbers, exactly


@given(arrays(np.bool_, shapes))
def test_the_nearest_labelled_cell_is_at_scipys_distance(feature: np.ndarray) -> None:
    if not feature.any():
        with pytest.raises(ValueError):
            cellops.nearest_labelled(feature)
        return
    rows, cols = cellops.nearest_labelled(feature)
    assert feature[rows, cols].all()
    h, w = feature.shape
    got = np.hypot(rows - np.arange(h)[:, None], cols - np.arange(w)[None, :])
    np.testing.assert_allclose(got, ndi.distance_transform_edt(~feature), atol=1e-12)


def test_ties_take_the_first_cell_in_row_major_order() -> None:
    f = np.zeros((3, 3), dtype=bool)
    f[0, 1] = f[1, 0] = True  # both one cell from (1, 1)
    rows, cols = cellops.nearest_labelled(f)
    assert (rows[1, 1], cols[1, 1]) == (0, 1)


def test_large_grids_are_done_by_scipy_with_the_same_results(
        monkeypatch: pytest.MonkeyPatch) -> None:
    rng = np.random.default_rng(7)
    values = (ndi.uniform_filter(rng.random((60, 70)), 5) * 8).astype(np.int64)
    feature = rng.random((60, 70)) < 0.05
    small = cellops.label_pieces(values), cellops.nearest_labelled(feature)
    monkeypatch.setattr(cellops, "SMALL_CELLS", 100)
    large = cellops.label_pieces(values), cellops.nearest_labelled(feature)
    np.testing.assert_array_equal(small[0][0], large[0][0])
    assert small[0][1] == large[0][1]
    h, w = feature.shape

    def dist(rc: tuple[np.ndarray, np.ndarray]) -> np.ndarray:
        return np.hypot(rc[0] - np.arange(h)[:, None], rc[1] - np.arange(w)[None, :])

    np.testing.assert_allclose(dist(small[1]), dist(large[1]), atol=1e-12)


def test_a_long_winding_piece_is_one_piece() -> None:
    """A serpentine of one value (the slowest shape for hooking) is labelled as scipy does."""
    values = np.zeros((41, 41), dtype=np.int64)
    values[::2, :] = 1  # every other row, joined at alternate ends
    values[1::4, -1] = 1
    values[3::4, 0] = 1
    piece, value = cellops.label_pieces(values)
    expected_piece, expected_value = _scipy_pieces(values)
    np.testing.assert_array_equal(piece, expected_piece)
    assert value == expected_value
    assert len(np.unique(piece[values == 1])) == 1
