"""Tests of geosoil.presentation: colour classes by meaning, colour-blind-readable scales,
round limits, escaping, PNG through GDAL."""

from __future__ import annotations

import html
import re
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from rasterio.errors import NotGeoreferencedWarning
from rasterio.io import MemoryFile

from geosoil import presentation as pr


def test_esp_classes_sit_at_the_published_limits_inclusive() -> None:
    # Northcote & Skene 1972 (and the Australian Soil Classification): ESP >= 6 sodic,
    # >= 15 strongly sodic.
    c = pr.classes_for("esp", np.array([1.0, 30.0]))
    assert c.breaks == (6.0, 15.0)
    got = c.index(np.array([0.0, 5.99, 6.0, 14.99, 15.0, 40.0, np.nan])).tolist()
    assert got == [0, 0, 1, 1, 2, 2, -1]
    assert c.labels == pr.SODICITY_LABELS


def test_esp_limits_follow_the_settings() -> None:
    c = pr.classes_for("esp", np.array([1.0]), limits=(5.0, 25.0))
    assert c.breaks == (5.0, 25.0) and c.labels[1] == "sodic (5 to 25)"


def test_ph_is_red_below_the_threshold_and_blue_above_in_half_units() -> None:
    values = np.array([4.1, 5.0, 6.9])
    c = pr.classes_for("ph", values, target=5.5)
    assert 5.5 in c.breaks and all(round(b * 2) == b * 2 for b in c.breaks)  # 0.5 steps
    k = list(c.breaks).index(5.5)
    below, above = c.colours[: k + 1], c.colours[k + 1 :]
    assert all(pr.hex_to_rgb(x)[0] > pr.hex_to_rgb(x)[2] for x in below)  # red side
    assert all(pr.hex_to_rgb(x)[2] > pr.hex_to_rgb(x)[0] for x in above)  # blue side
    # darker away from the threshold on both sides (Harrower & Brewer 2003: diverging)
    lb = [pr.lightness(x) for x in below]
    la = [pr.lightness(x) for x in above]
    assert lb == sorted(lb) and la == sorted(la, reverse=True)
    idx = c.index(np.array([5.49, 5.5]))
    assert idx.tolist() == [k, k + 1]  # the threshold itself reads "not acid"


def test_ph_needs_its_threshold() -> None:
    with pytest.raises(ValueError, match="target"):
        pr.classes_for("ph", np.array([5.0]))


@pytest.mark.parametrize("kind", ["amount", "acid", "error", "ec", "rate"])
def test_sequential_classes_have_round_limits_and_change_lightness_one_way(kind: str) -> None:
    values = np.linspace(0.137, 9.61, 50)
    c = pr.classes_for(kind, values)
    assert c.breaks == (2.0, 4.0, 6.0, 8.0)
    assert c.labels[0] == "< 2" and c.labels[-1] == "≥ 8"
    lightness = [pr.lightness(x) for x in c.colours]
    steps = np.diff(lightness)
    assert (steps > 0).all() or (steps < 0).all()


@pytest.mark.parametrize("kind", ["esp", "ph", "amount", "acid", "error", "ec", "rate"])
def test_neighbouring_classes_differ_in_lightness(kind: str) -> None:
    """Lightness survives every common colour-vision deficiency, so classes that differ by
    at least 5 L* units (CIELAB) can be told apart without hue (our own margin)."""
    c = pr.classes_for(kind, np.linspace(3.9, 7.2, 40), target=5.5)
    lightness = [pr.lightness(x) for x in c.colours]
    pairs = list(zip(lightness, lightness[1:], strict=False))
    if kind == "ph":  # the two sides of the threshold differ in hue (warm red, cool blue:
        k = c.breaks.index(5.5)  # the blue-yellow axis that red-green deficiencies keep)
        del pairs[k]
    assert all(abs(a - b) >= 5 for a, b in pairs)


def test_rate_scale_is_none_of_the_soil_scales() -> None:
    rates = set(pr.PALETTES["rates"])
    for name, colours in pr.PALETTES.items():
        if name != "rates":
            assert not rates & set(colours), name


@pytest.mark.parametrize(("lo", "hi", "expected"), [
    (0.3, 9.6, (2.0, 4.0, 6.0, 8.0)),
    (12.2, 13.1, (12.4, 12.6, 12.8, 13.0)),
    (0.01, 0.24, (0.05, 0.1, 0.15, 0.2)),
    (0.0, 0.0, ()),
])
def test_nice_breaks_are_round(lo: float, hi: float, expected: tuple) -> None:
    assert pr.nice_breaks(lo, hi) == expected


def test_classes_check_their_parts() -> None:
    with pytest.raises(ValueError, match="colours"):
        pr.Classes((1.0,), ("#000000",), ("a",))
    with pytest.raises(ValueError, match="increase"):
        pr.Classes((2.0, 1.0), ("#000000",) * 3, ("a", "b", "c"))


def test_rate_classes_one_swatch_per_rate_or_round_limits() -> None:
    few = pr.rate_classes([0.0, 1500.0, 3000.0, 1500.0])
    assert few.labels == ("0", "1,500", "3,000")
    assert few.index(np.array([0.0, 1500.0, 3000.0])).tolist() == [0, 1, 2]
    many = pr.rate_classes(list(np.linspace(0, 4000, 30)))
    assert len(many.colours) <= 8 and many.labels[0] == "< 1,000"


def test_colourise_paints_classes_and_leaves_no_data_clear() -> None:
    c = pr.classes_for("esp", np.array([1.0]))
    rgba = pr.colourise(np.array([[3.0, 8.0, 20.0, np.nan]]), c)[0]
    assert [tuple(int(v) for v in p[:3]) for p in rgba[:3]] == [pr.hex_to_rgb(x)
                                                                 for x in c.colours]
    assert rgba[:3, 3].tolist() == [255, 255, 255] and rgba[3, 3] == 0


@settings(max_examples=25, deadline=None)
@given(st.integers(1, 9), st.integers(1, 9), st.randoms(use_true_random=False))
def test_png_round_trips_through_gdal(h: int, w: int, rnd) -> None:
    data = np.array([rnd.randrange(256) for _ in range(h * w * 4)], dtype=np.uint8).reshape(h, w, 4)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        with MemoryFile(pr.png_bytes(data)) as mem, mem.open() as src:
            assert src.driver == "PNG" and src.count == 4
            back = src.read()
    np.testing.assert_array_equal(np.moveaxis(back, 0, -1), data)


@settings(max_examples=200, deadline=None)
@given(st.text())
def test_escaped_text_is_inert_and_reversible(text: str) -> None:
    out = pr.escape_text(text)
    assert not set(out) & set("<>\"'`$\\{}")
    assert re.sub(r"&(#\d+|#x[0-9a-f]+|[a-z]+);", "", out).count("&") == 0
    assert html.unescape(out) == text


@settings(max_examples=100, deadline=None)
@given(st.text())
def test_json_for_script_never_closes_its_script(text: str) -> None:
    import json

    out = pr.json_for_script({"t": text})
    assert "<" not in out and ">" not in out and "&" not in out
    assert json.loads(out) == {"t": text}


def test_classes_png_is_one_palette_entry_per_class_with_no_data_clear() -> None:
    c = pr.classes_for("esp", np.array([1.0]))
    values = np.array([[3.0, 8.0, 20.0, np.nan]])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        with MemoryFile(pr.classes_png(values, c)) as mem, mem.open() as src:
            assert src.driver == "PNG" and src.count == 1
            band = src.read(1)
            cmap = src.colormap(1)
    got = [cmap[int(v)] for v in band[0]]
    assert got[:3] == [(*pr.hex_to_rgb(x), 255) for x in c.colours]
    assert got[3][3] == 0  # transparent


@settings(max_examples=25, deadline=None)
@given(st.integers(1, 40), st.integers(1, 40), st.randoms(use_true_random=False))
def test_classes_png_round_trips_through_gdal(h: int, w: int, rnd) -> None:
    """The paletted PNG written with zlib reads back through GDAL's PNG driver (the
    reference reader) as the class of every cell, its colour, and no data transparent."""
    values = np.array([rnd.choice([np.nan, rnd.uniform(0, 40)]) for _ in range(h * w)])
    values = values.reshape(h, w)
    c = pr.classes_for("esp", np.array([1.0]))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        with MemoryFile(pr.classes_png(values, c)) as mem, mem.open() as src:
            assert (src.driver, src.count, src.width, src.height) == ("PNG", 1, w, h)
            band = src.read(1)
            cmap = src.colormap(1)
    np.testing.assert_array_equal(band, c.index(values) + 1)
    assert cmap[0][3] == 0
    assert [cmap[k + 1] for k in range(len(c.colours))] == [
        (*pr.hex_to_rgb(x), 255) for x in c.colours]


def test_a_large_classes_png_round_trips_through_gdal() -> None:
    """A map-sized image (several zlib blocks) reads back cell for cell."""
    y, x = np.mgrid[0:700, 0:900]
    values = 10 + 8 * np.sin(x / 37.0) * np.cos(y / 23.0)
    values[:50, :80] = np.nan
    c = pr.classes_for("esp", values)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        with MemoryFile(pr.classes_png(values, c)) as mem, mem.open() as src:
            band = src.read(1)
    np.testing.assert_array_equal(band, c.index(values) + 1)
