"""geosoil.layers (sampling depths): reading a lab's depth, the layers of a file, what each layer
stands for. (tests/test_layers.py is the import graph's layers.)"""

from __future__ import annotations

import pytest

from geosoil.layers import Layer, depth_role, depth_unit_of, find_layers, parse_depth, spans


@pytest.mark.parametrize(("text", "unit", "expected"), [
    ("0-10", "cm", (0.0, 10.0)),
    ("10-30", "cm", (10.0, 30.0)),
    ("0-10 cm", "cm", (0.0, 10.0)),
    ("10 to 30", "cm", (10.0, 30.0)),
    ("10 To 30 cm", "cm", (10.0, 30.0)),
    ("0–10", "cm", (0.0, 10.0)),          # en dash, as word processors write it
    (" 0 - 10cm ", "cm", (0.0, 10.0)),
    ("0.1-0.3 m", "cm", (10.0, 30.0)),     # the cell's unit wins over the default
    ("0.1-0.3", "m", (10.0, 30.0)),
    ("0,1-0,3", "m", (10.0, 30.0)),        # decimal comma
    ("0-100", "mm", (0.0, 10.0)),
    ("0-6 in", "cm", (0.0, 15.24)),        # 1 in = 2.54 cm exactly (NIST SP 811)
    ("6-18", "in", (15.24, 45.72)),
])
def test_depth_ranges_as_labs_write_them(text: str, unit: str, expected: tuple) -> None:
    assert parse_depth(text, unit=unit) == pytest.approx(expected)


@pytest.mark.parametrize(("text", "why"), [
    ("10", "not a depth range"),
    ("topsoil", "not a depth range"),
    ("", "not a depth range"),
    ("30-10", "bottom must be below"),
    ("10-10", "bottom must be below"),
    ("0-5000", "not a soil sample"),
])
def test_unreadable_depths_say_what_a_depth_looks_like(text: str, why: str) -> None:
    with pytest.raises(ValueError, match=why):
        parse_depth(text)


def test_depth_headers_and_their_units() -> None:
    assert depth_role("Depth") == "range"
    assert depth_role("Sample depth (cm)") == "range"
    assert depth_role("Depth from (cm)") == "top"
    assert depth_role("Depth to (cm)") == "bottom"
    assert depth_role("Upper depth") == "top"
    assert depth_role("Lower depth m") == "bottom"
    assert depth_role("Top") == "top"
    assert depth_role("Bottom") == "bottom"
    for other in ("Sample ID", "Ca (cmol/kg)", "Longitude", "Comments", "To"):
        assert depth_role(other) is None
    assert depth_unit_of("Depth (cm)") == "cm"
    assert depth_unit_of("Depth (m)") == "m"
    assert depth_unit_of("Depth [in]") == "in"
    assert depth_unit_of("Depth") is None


def test_layers_are_the_distinct_depths_shallowest_first() -> None:
    got = find_layers([(10, 30), (0, 10), (0, 10), (30, 60)])
    assert [layer.label for layer in got] == ["0-10 cm", "10-30 cm", "30-60 cm"]
    assert got[1].suffix == "_10-30cm" and got[1].key == "10-30"
    with pytest.raises(ValueError, match="0-10 cm and 0-15 cm overlap"):
        find_layers([(0, 10), (0, 15)])


def test_spans_of_a_treated_depth() -> None:
    two = [Layer(0, 10), Layer(10, 30)]
    # within the sampled depth: each layer over its own part, the one cut counts pro rata
    assert [(s.from_cm, s.to_cm) for s in spans(two, treat_cm=30)] == [(0, 10), (10, 30)]
    assert [(s.from_cm, s.to_cm) for s in spans(two, treat_cm=20)] == [(0, 10), (10, 20)]
    assert [(s.from_cm, s.to_cm) for s in spans(two, treat_cm=10)] == [(0, 10)]
    assert [(s.from_cm, s.to_cm) for s in spans(two, treat_cm=5)] == [(0, 5)]
    # below the deepest layer that layer stands for the rest
    assert [(s.from_cm, s.to_cm) for s in spans(two, treat_cm=45)] == [(0, 10), (10, 45)]
    # a gap goes to the layer above; a first layer below the surface stands for the top
    assert [(s.from_cm, s.to_cm) for s in spans([Layer(0, 10), Layer(20, 40)],
                                               treat_cm=40)] == [(0, 20), (20, 40)]
    assert [(s.from_cm, s.to_cm) for s in spans([Layer(5, 15)], treat_cm=10)] == [(0, 10)]
    # one layer: the whole treated depth, whatever its own thickness (as for one depth today)
    assert [s.thickness_m for s in spans([Layer(0, 10)], treat_cm=25)] == [0.25]
    # property: the spans tile the treated depth
    for treat in (1, 7.5, 10, 29.9, 30, 80):
        got = spans([Layer(0, 10), Layer(10, 30), Layer(30, 60)], treat_cm=treat)
        assert got[0].from_cm == 0 and got[-1].to_cm == treat
        assert all(a.to_cm == b.from_cm for a, b in zip(got, got[1:], strict=False))
