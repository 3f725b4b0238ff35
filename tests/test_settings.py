"""The settings mechanism: validation at the boundary, messages that name the key."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from geosoil.errors import SettingsError
from geosoil.settings import describe, from_mapping, setting, to_mapping


@dataclass(frozen=True)
class Inner:
    target_percent: float = setting(6.0, doc="target", unit="%", minimum=0.0, maximum=100.0)
    method: str = setting("a", doc="method", choices=("alpha", "a", "beta"))


@dataclass(frozen=True)
class Outer:
    file: Path = setting(doc="input file")
    count: int = setting(4, doc="how many", minimum=1)
    enabled: bool = setting(True, doc="switch")
    names: tuple[str, ...] = setting(("x",), doc="names")
    optional: float | None = setting(None, doc="optional", exclusive_minimum=True, minimum=0.0)
    inner: Inner = setting(default_factory=Inner, doc="nested")
    table: dict[str, Inner] = setting(default_factory=dict, doc="named tables")
    prices: dict[str, float] = setting(default_factory=dict, doc="prices")

    def __post_init__(self) -> None:
        if self.count > 10 and not self.enabled:
            raise SettingsError("must be 10 or fewer when enabled is false", key="count")


def test_defaults_and_relative_paths(tmp_path: Path) -> None:
    s = from_mapping(Outer, {"file": "lab.csv"}, section="", base_dir=tmp_path)
    assert s.file == (tmp_path / "lab.csv").resolve()
    assert s.count == 4 and s.inner == Inner()


def test_unknown_key_suggests_nearest() -> None:
    with pytest.raises(SettingsError) as e:
        from_mapping(Outer, {"file": "a", "cuont": 3}, section="zones")
    assert e.value.key == "zones.cuont"
    assert "did you mean 'count'" in str(e.value)


def test_nested_key_named_in_message() -> None:
    with pytest.raises(SettingsError) as e:
        from_mapping(Outer, {"file": "a", "table": {"gypsum": {"target_percent": 150}}}, section="")
    assert e.value.key == "table.gypsum.target_percent"
    assert "from 0 to 100 %" in str(e.value) and "150" in str(e.value)


def test_a_range_open_at_its_low_end_reads_as_english() -> None:
    """Issue: 'must be more than 0 to 100 %' was garbled: a range whose low end is not
    allowed says 'more than 0 and at most 100 %'; a closed one 'from 0 to 100 %'."""
    from geosoil.settings import check_range

    with pytest.raises(SettingsError) as e:
        check_range(120.0, key="purity_percent", minimum=0.0, maximum=100.0,
                    exclusive_minimum=True, unit="%")
    assert str(e.value) == ("setting 'purity_percent': must be more than 0 and at most 100 % "
                            "(got 120)")
    with pytest.raises(SettingsError) as e:
        check_range(0.0, key="k", minimum=0.0, maximum=100.0, exclusive_minimum=True, unit="%")
    assert "more than 0 and at most 100 %" in str(e.value) and " to " not in str(e.value)


def test_choices_listed() -> None:
    with pytest.raises(SettingsError) as e:
        from_mapping(Outer, {"file": "a", "inner": {"method": "alpah"}})
    assert "did you mean 'alpha'" in str(e.value)
    assert "alpha, a, beta" in str(e.value)


@pytest.mark.parametrize(
    ("data", "key", "text"),
    [
        ({"count": "four"}, "count", "must be a number"),
        ({"count": 2.5}, "count", "whole number"),
        ({"count": True}, "count", "must be a number"),
        ({"enabled": "yes"}, "enabled", "true or false"),
        ({"names": "x"}, "names", "must be a list"),
        ({"optional": 0}, "optional", "more than 0"),
        ({"count": 0}, "count", "at least 1"),
        ({"count": 11, "enabled": False}, "count", "10 or fewer"),
    ],
)
def test_type_and_range_errors(data: dict, key: str, text: str) -> None:
    with pytest.raises(SettingsError) as e:
        from_mapping(Outer, {"file": "a", **data}, section="s")
    assert e.value.key == f"s.{key}"
    assert text in str(e.value)


def test_missing_required_key() -> None:
    with pytest.raises(SettingsError) as e:
        from_mapping(Outer, {}, section="samples")
    assert e.value.key == "samples.file" and "required" in str(e.value)


def test_nan_rejected() -> None:
    with pytest.raises(SettingsError, match="finite"):
        from_mapping(Inner, {"target_percent": float("nan")})


@given(
    count=st.integers(1, 10),
    target=st.floats(0, 100, allow_nan=False),
    names=st.lists(st.text(min_size=1, max_size=5), max_size=3),
)
def test_round_trip_through_mapping(count: int, target: float, names: list[str]) -> None:
    s = from_mapping(
        Outer,
        {"file": "/tmp/x", "count": count, "names": names, "inner": {"target_percent": target}},
    )
    again = from_mapping(Outer, to_mapping(s))
    assert again == s


def test_describe_lists_every_key_with_doc() -> None:
    docs = {d.key: d for d in describe(Inner)}
    assert set(docs) == {"target_percent", "method"}
    assert docs["target_percent"].unit == "%" and docs["method"].choices == ("alpha", "a", "beta")
