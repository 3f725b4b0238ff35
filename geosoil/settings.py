"""Typed, validated settings: one small mechanism shared by every module.

Each module that takes settings declares a frozen dataclass whose fields are
made with :func:`setting`, carrying a one-line description, a unit and the
allowed range or choices. :func:`from_mapping` turns a plain mapping (a TOML
table) into that dataclass, checking every key once, at the boundary, with
messages that name the dotted key and the allowed values; the core then trusts
the object. :func:`describe` lists the keys with their defaults and comments,
which is how the project-file template is written.

Supported field types: ``bool``, ``int``, ``float``, ``str``, ``Path``,
``X | None`` of those, ``tuple[str, ...]``, ``tuple[float, ...]``,
``dict[str, str]``, ``dict[str, float]``, a nested settings dataclass and
``dict[str, <settings dataclass>]``.

Examples
--------
>>> from dataclasses import dataclass
>>> @dataclass(frozen=True)
... class Soil:
...     depth_m: float = setting(0.1, doc="treated depth", unit="m", minimum=0.01, maximum=2.0)
>>> from_mapping(Soil, {"depth_m": 0.2}, section="soil").depth_m
0.2
>>> from_mapping(Soil, {"depth_mm": 0.2}, section="soil")
Traceback (most recent call last):
...
geosoil.errors.SettingsError: setting 'soil.depth_mm': unknown key; did you mean 'depth_m'? ...
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import types
import typing
from collections.abc import Callable, Mapping
from pathlib import Path
from typing import Any, TypeVar

from .errors import SettingsError

__all__ = ["setting", "from_mapping", "describe", "to_mapping", "check_range", "SettingDoc"]

T = TypeVar("T")

_MISSING = dataclasses.MISSING


def setting(
    default: Any = _MISSING,
    *,
    doc: str,
    unit: str | None = None,
    minimum: float | None = None,
    maximum: float | None = None,
    exclusive_minimum: bool = False,
    choices: tuple[str, ...] | None = None,
    default_factory: Any = _MISSING,
) -> Any:
    """Declare one setting: a dataclass field with its description and limits.

    Parameters
    ----------
    default, default_factory
        As for :func:`dataclasses.field`.
    doc
        One line for the project-file comment and for error messages.
    unit
        Unit of the value, shown in the comment (also put it in the key name
        where it helps: ``depth_m``).
    minimum, maximum, exclusive_minimum
        Allowed numeric range (inclusive unless ``exclusive_minimum``).
    choices
        Allowed string values.

    Returns
    -------
    dataclasses.Field
        The field, with the description and limits in its metadata.
    """
    meta = {
        "doc": doc,
        "unit": unit,
        "minimum": minimum,
        "maximum": maximum,
        "exclusive_minimum": exclusive_minimum,
        "choices": choices,
    }
    if default_factory is not _MISSING:
        return dataclasses.field(default_factory=default_factory, metadata=meta)
    return dataclasses.field(default=default, metadata=meta)


@dataclasses.dataclass(frozen=True)
class SettingDoc:
    """One documented key, as :func:`describe` lists it."""

    key: str
    default: Any
    doc: str
    unit: str | None
    choices: tuple[str, ...] | None
    minimum: float | None
    maximum: float | None


def _join(section: str, key: str) -> str:
    return f"{section}.{key}" if section else key


def _strip_optional(tp: Any) -> tuple[Any, bool]:
    origin = typing.get_origin(tp)
    if origin in (typing.Union, types.UnionType):
        args = [a for a in typing.get_args(tp) if a is not type(None)]
        if len(args) == 1 and len(typing.get_args(tp)) == 2:
            return args[0], True
    return tp, False


def check_range(
    value: float,
    *,
    key: str,
    minimum: float | None = None,
    maximum: float | None = None,
    exclusive_minimum: bool = False,
    unit: str | None = None,
) -> None:
    """Raise :class:`SettingsError` naming ``key`` when ``value`` is out of range.

    Parameters
    ----------
    value : float
        The value to check.
    key : str
        Dotted key named in the message.
    minimum, maximum : float, optional
        Allowed range (inclusive unless ``exclusive_minimum``).
    exclusive_minimum : bool, optional
        ``minimum`` itself is not allowed.
    unit : str, optional
        Unit shown in the message.

    Raises
    ------
    SettingsError
        ``value`` is not finite or is out of range.
    """
    u = f" {unit}" if unit else ""
    if isinstance(value, float) and not math.isfinite(value):
        raise SettingsError(f"must be a finite number (got {value})", key=key)
    low_bad = minimum is not None and (
        value <= minimum if exclusive_minimum else value < minimum
    )
    high_bad = maximum is not None and value > maximum
    if low_bad or high_bad:
        if minimum is not None and maximum is not None:
            rng = (f"more than {minimum:g} and at most {maximum:g}{u}" if exclusive_minimum
                   else f"from {minimum:g} to {maximum:g}{u}")
        elif minimum is not None:
            rng = f"{'more than' if exclusive_minimum else 'at least'} {minimum:g}{u}"
        else:
            rng = f"at most {maximum:g}{u}"
        raise SettingsError(f"must be {rng} (got {value:g})", key=key)


def _convert(value: Any, tp: Any, key: str, meta: Mapping[str, Any], base_dir: Path | None) -> Any:
    tp, optional = _strip_optional(tp)
    if value is None:
        if optional:
            return None
        raise SettingsError("a value is required", key=key)
    if isinstance(tp, type) and dataclasses.is_dataclass(tp):
        if not isinstance(value, Mapping):
            raise SettingsError(f"must be a table of settings (got {value!r})", key=key)
        return from_mapping(tp, value, section=key, base_dir=base_dir)
    origin = typing.get_origin(tp)
    if origin is dict:
        return _to_table(value, tp, key, base_dir)
    if origin is tuple:
        return _to_list(value, tp, key, meta, base_dir)
    if tp is Path:
        return _to_path(value, key, base_dir)
    if tp is Any:
        return value
    convert = _SCALARS.get(tp)
    if convert is None:
        raise TypeError(f"settings type {tp!r} of '{key}' is not supported")  # programming error
    return convert(value, tp, key, meta)


def _to_table(value: Any, tp: Any, key: str, base_dir: Path | None) -> dict[str, Any]:
    """A ``dict[str, X]`` setting: every value converted to X."""
    _ktp, vtp = typing.get_args(tp)
    if not isinstance(value, Mapping):
        raise SettingsError(f"must be a table (got {value!r})", key=key)
    return {str(k): _convert(v, vtp, _join(key, str(k)), {}, base_dir) for k, v in value.items()}


def _to_list(value: Any, tp: Any, key: str, meta: Mapping[str, Any],
             base_dir: Path | None) -> tuple[Any, ...]:
    """A ``tuple[X, ...]`` setting: a TOML array, every item converted to X."""
    (etp, _ellipsis) = typing.get_args(tp)
    if isinstance(value, str) or not isinstance(value, (list, tuple)):
        raise SettingsError(f"must be a list (got {value!r})", key=key)
    return tuple(_convert(v, etp, f"{key}[{i}]", meta, base_dir) for i, v in enumerate(value))


def _to_path(value: Any, key: str, base_dir: Path | None) -> Path:
    """A file path, relative ones resolved against ``base_dir``."""
    if not isinstance(value, (str, Path)):
        raise SettingsError(f"must be a file path (got {value!r})", key=key)
    p = Path(value).expanduser()
    if base_dir is not None and not p.is_absolute():
        p = (base_dir / p).resolve()
    return p


def _to_bool(value: Any, _tp: Any, key: str, _meta: Mapping[str, Any]) -> bool:
    if not isinstance(value, bool):
        raise SettingsError(f"must be true or false (got {value!r})", key=key)
    return value


def _to_number(value: Any, tp: Any, key: str, meta: Mapping[str, Any]) -> int | float:
    """An int or float within the field's range (a bool is not a number here)."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise SettingsError(f"must be a number (got {value!r})", key=key)
    if tp is int and not float(value).is_integer():
        raise SettingsError(f"must be a whole number (got {value!r})", key=key)
    number = tp(value)
    check_range(
        number,
        key=key,
        minimum=meta.get("minimum"),
        maximum=meta.get("maximum"),
        exclusive_minimum=bool(meta.get("exclusive_minimum")),
        unit=meta.get("unit"),
    )
    return number


def _to_text(value: Any, _tp: Any, key: str, meta: Mapping[str, Any]) -> str:
    """Text, one of the field's choices when it has them (the nearest named on a miss)."""
    if not isinstance(value, str):
        raise SettingsError(f"must be text (got {value!r})", key=key)
    choices = meta.get("choices")
    if choices and value not in choices:
        near = difflib.get_close_matches(value, choices, n=1)
        hint = f"; did you mean '{near[0]}'?" if near else ""
        raise SettingsError(
            f"'{value}' is not allowed{hint} Allowed: {', '.join(choices)}", key=key
        )
    return value


_SCALARS: dict[Any, Callable[[Any, Any, str, Mapping[str, Any]], Any]] = {
    bool: _to_bool, int: _to_number, float: _to_number, str: _to_text,
}


def from_mapping(
    cls: type[T],
    data: Mapping[str, Any],
    *,
    section: str = "",
    base_dir: Path | None = None,
) -> T:
    """Build settings dataclass ``cls`` from ``data``, validating every key.

    Parameters
    ----------
    cls
        A dataclass whose fields were declared with :func:`setting`.
    data
        The mapping, typically a TOML table. Missing keys take their defaults.
    section
        Dotted name of the table, used in messages (``"rates.gypsum"``).
    base_dir
        Relative ``Path`` values are resolved against this folder.

    Returns
    -------
    T
        An instance of ``cls``.

    Raises
    ------
    SettingsError
        Unknown key (with the nearest valid key suggested), wrong type,
        value out of range, or a check in the dataclass's ``__post_init__``.
    """
    if not isinstance(data, Mapping):
        raise SettingsError(f"must be a table of settings (got {data!r})", key=section or None)
    hints = typing.get_type_hints(cls)
    fields = {f.name: f for f in dataclasses.fields(cls)}  # type: ignore[arg-type]
    for key in data:
        if key not in fields:
            near = difflib.get_close_matches(str(key), list(fields), n=1, cutoff=0.5)
            hint = f"; did you mean '{near[0]}'?" if near else ""
            raise SettingsError(
                f"unknown key{hint or '.'} Valid keys: {', '.join(fields)}",
                key=_join(section, str(key)),
            )
    kwargs: dict[str, Any] = {}
    for name, f in fields.items():
        if not f.init:
            continue
        if name in data:
            kwargs[name] = _convert(
                data[name], hints[name], _join(section, name), f.metadata, base_dir
            )
        elif f.default is _MISSING and f.default_factory is _MISSING:
            raise SettingsError("this key is required", key=_join(section, name))
    try:
        return cls(**kwargs)
    except SettingsError as exc:
        if exc.key is not None and section and not exc.key.startswith(section + "."):
            raise SettingsError(exc.bare_message, key=_join(section, exc.key)) from None
        if exc.key is None:
            raise SettingsError(exc.bare_message, key=section or None) from None
        raise


def _plain(value: Any) -> Any:
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return to_mapping(value)
    if isinstance(value, Mapping):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, tuple):
        return [_plain(v) for v in value]
    if isinstance(value, Path):
        return str(value)
    return value


def to_mapping(obj: Any) -> dict[str, Any]:
    """The settings as a plain mapping (None values left out), ready for TOML or JSON.

    Parameters
    ----------
    obj : dataclass instance
        Settings (nested settings become nested mappings).

    Returns
    -------
    dict
        Key to plain value (paths as text).
    """
    out: dict[str, Any] = {}
    for f in dataclasses.fields(obj):
        v = getattr(obj, f.name)
        if v is None:
            continue
        out[f.name] = _plain(v)
    return out


def describe(cls: type) -> list[SettingDoc]:
    """The keys of settings dataclass ``cls`` with defaults, comments and limits.

    Parameters
    ----------
    cls : type
        A dataclass whose fields were declared with :func:`setting`.

    Returns
    -------
    list of SettingDoc
        One entry per key, in declaration order.
    """
    docs = []
    for f in dataclasses.fields(cls):
        if f.default is not _MISSING:
            default = f.default
        elif f.default_factory is not _MISSING:
            default = f.default_factory()
        else:
            default = _MISSING
        docs.append(
            SettingDoc(
                key=f.name,
                default=default,
                doc=f.metadata.get("doc", ""),
                unit=f.metadata.get("unit"),
                choices=f.metadata.get("choices"),
                minimum=f.metadata.get("minimum"),
                maximum=f.metadata.get("maximum"),
            )
        )
    return docs
