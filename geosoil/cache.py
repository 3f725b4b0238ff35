"""The surface cache: interpolated surfaces kept as data (numpy arrays and JSON), never as code.

One cache entry is two files named after the hash of the surfaces' inputs:

``surfaces-<key>.npz``
    every array (estimates, kriging standard deviations, empirical variograms,
    cross-validation errors), read back with ``allow_pickle=False``, so an entry
    cannot hold an object that runs anything when it is loaded;
``surfaces-<key>.json``
    everything else (variogram models, methods, notes, the warnings the
    interpolation raised), the full key, and a SHA-256 digest of the arrays
    file together with this file's own content.

A *zones entry* (``zones-<key>.json``) keeps one paddock's and product's spreader
zones as JSON (columns of numbers and text, geometries as WKB text), with their notes
and warnings and a SHA-256 digest, under the hash of everything the zones are made
from (the per-cell rates, the grid, the boundary and exclusions, the zone and
spreader settings, geosoil's source): a re-run that changes one product's rates makes
that product's zones again and takes the others from here.

The JSON file is written last (both through a temporary file and a rename), so
an entry is complete when its JSON file is there. :func:`load` checks the
digest, the key, every field's type and every array's shape and kind; an entry
that fails any check raises :class:`CacheEntryError` and the caller computes the
surfaces again (and says so). Files of older geosoil versions (``*.pickle``) are
never opened; :func:`prune` deletes them.

The folder is the user's cache folder (``platformdirs.user_cache_dir``, which
honours ``XDG_CACHE_HOME``) unless ``[output] cache_dir`` names one; a cache
folder inside a project received from someone else is read the same way, as
data only.
"""

from __future__ import annotations

import hashlib
import io
import json
import logging
import os
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from .errors import GeosoilError
from .kriging import CrossValidation
from .surfaces import Surface
from .variogram import EmpiricalVariogram, VariogramModel

__all__ = ["CacheEntryError", "FORMAT", "ZONES_FORMAT", "default_folder", "entry_paths",
           "save", "load", "prune", "zones_path", "save_zones", "load_zones", "prune_zones"]

logger = logging.getLogger(__name__)

#: Written into every entry; an entry of another format is not read.
FORMAT = "geosoil-surfaces/1"

#: Largest JSON part read (a real one is a few hundred kB).
_MAX_JSON_BYTES = 64 * 2**20

_STALE_TEMP_S = 3600.0  # a temporary file this old belongs to a run that was killed


class CacheEntryError(GeosoilError):
    """A cache entry that is damaged, incomplete, of another format or not what it claims."""


def default_folder() -> Path:
    """The user's cache folder for geosoil (``~/.cache/geosoil`` on Linux).

    Returns
    -------
    Path
        ``$XDG_CACHE_HOME/geosoil`` when that is set on Linux; the platform's
        usual place elsewhere (``platformdirs.user_cache_dir``).
    """
    import platformdirs

    return Path(platformdirs.user_cache_dir("geosoil", appauthor=False))


def entry_paths(folder: Path, key: str) -> tuple[Path, Path]:
    """The arrays file and the JSON file of the entry for ``key`` in ``folder``.

    Parameters
    ----------
    folder : Path
        The cache folder.
    key : str
        The hexadecimal hash of the surfaces' inputs.

    Returns
    -------
    (Path, Path)
        ``surfaces-<key[:32]>.npz`` and ``surfaces-<key[:32]>.json``.
    """
    stem = f"surfaces-{key[:32]}"
    return folder / f"{stem}.npz", folder / f"{stem}.json"


def _canonical(meta: Mapping[str, Any]) -> bytes:
    return json.dumps(meta, sort_keys=True, separators=(",", ":"), allow_nan=True).encode()


def _digest(arrays: bytes, meta: Mapping[str, Any]) -> str:
    h = hashlib.sha256()
    h.update(hashlib.sha256(arrays).digest())
    h.update(_canonical({k: v for k, v in meta.items() if k != "sha256"}))
    return h.hexdigest()


def _float(value: Any) -> float:
    return float(value)


# --------------------------------------------------------------------------- writing


def _surface_meta(i: int, s: Surface, arrays: dict[str, np.ndarray]) -> dict[str, Any]:
    def put(name: str, a: np.ndarray | None, dtype: Any = np.float64) -> str | None:
        if a is None:
            return None
        ref = f"s{i}_{name}"
        arrays[ref] = np.ascontiguousarray(a, dtype=dtype)
        return ref

    meta: dict[str, Any] = {
        "variable": s.variable,
        "paddock": s.paddock,
        "estimate": put("estimate", s.estimate),
        "std": put("std", s.std),
        "method": s.method,
        "n_samples": int(s.n_samples),
        "variogram_scope": s.variogram_scope,
        "candidates": [[str(n), _float(a), _float(b)] for n, a, b in s.candidates],
        "log_transform": bool(s.log_transform),
        "notes": [str(n) for n in s.notes],
        "model": None,
        "empirical": None,
        "cross_validation": None,
    }
    if s.model is not None:
        m = s.model
        meta["model"] = {"name": m.name, "nugget": m.nugget, "psill": m.psill,
                         "range": m.range, "nu": m.nu}
    if s.empirical is not None:
        e = s.empirical
        meta["empirical"] = {"lags": put("lags", e.lags), "gamma": put("gamma", e.gamma),
                             "counts": put("counts", e.counts, np.int64)}
    if s.cross_validation is not None:
        cv = s.cross_validation
        meta["cross_validation"] = {
            "errors": put("cv_errors", cv.errors),
            "standardised_errors": put("cv_standardised", cv.standardised_errors),
            "variance": put("cv_variance", cv.variance),
            "mean_error": _float(cv.mean_error), "rmse": _float(cv.rmse),
            "msse": _float(cv.msse), "n": int(cv.n),
        }
    return meta


def save(folder: Path, key: str, surfaces: Mapping[tuple[str, str], Surface],
         warnings_raised: list[str]) -> Path:
    """Store surfaces (and the warnings their interpolation raised) under ``key``.

    Parameters
    ----------
    folder : Path
        The cache folder (created when missing).
    key : str
        The hexadecimal hash of the surfaces' inputs.
    surfaces : mapping of (paddock, variable) to Surface
        What :func:`geosoil.surfaces.interpolate_farm` returned.
    warnings_raised : list of str
        The warnings recorded while interpolating, given back on a hit.

    Returns
    -------
    Path
        The entry's JSON file.

    Raises
    ------
    OSError
        The folder or a file could not be written (the caller goes on without a cache).
    """
    from .writers import atomic_write

    arrays: dict[str, np.ndarray] = {}
    meta: dict[str, Any] = {
        "format": FORMAT,
        "key": key,
        "warnings": [str(w) for w in warnings_raised],
        "surfaces": [_surface_meta(i, s, arrays) for i, s in enumerate(surfaces.values())],
    }
    buf = io.BytesIO()
    np.savez(buf, **arrays)  # type: ignore[arg-type]  # (numbers only: float64, int64)
    data = buf.getvalue()
    meta["sha256"] = _digest(data, meta)
    npz, jsn = entry_paths(folder, key)
    folder.mkdir(parents=True, exist_ok=True)
    with atomic_write(npz) as fh:
        fh.write(data)
    with atomic_write(jsn) as fh:  # last: the entry is complete when this file is there
        fh.write(json.dumps(meta, allow_nan=True).encode("utf-8"))
    return jsn


# --------------------------------------------------------------------------- reading


def _need(cond: bool, what: str) -> None:
    if not cond:
        raise CacheEntryError(what)


def _str(v: Any, what: str, *, optional: bool = False) -> Any:
    _need(isinstance(v, str) or (optional and v is None), f"{what} is not text")
    return v


def _num(v: Any, what: str) -> float:
    _need(isinstance(v, (int, float)) and not isinstance(v, bool), f"{what} is not a number")
    return float(v)


def _array(arrays: Mapping[str, np.ndarray], ref: Any, what: str, *,
           shape: tuple[int, ...] | None = None, kind: str = "f") -> np.ndarray:
    _need(isinstance(ref, str) and ref in arrays, f"{what}: no such array")
    a = arrays[ref]
    _need(a.dtype.kind == kind, f"{what}: wrong kind of array ({a.dtype})")
    if shape is not None:
        _need(a.shape == shape, f"{what}: shape {a.shape}, the grid is {shape}")
    else:
        _need(a.ndim == 1, f"{what}: not one-dimensional")
    return a


def _surface(d: Any, arrays: Mapping[str, np.ndarray],
             shapes: Mapping[str, tuple[int, int]]) -> Surface:
    _need(isinstance(d, dict), "a surface is not a table")
    paddock = _str(d.get("paddock"), "paddock")
    variable = _str(d.get("variable"), "variable")
    _need(paddock in shapes, f"paddock {paddock!r} is not one of this run's")
    shape = shapes[paddock]
    where = f"{paddock}/{variable}"
    std = d.get("std")
    model = None
    if d.get("model") is not None:
        m = d["model"]
        _need(isinstance(m, dict), f"{where}: model is not a table")
        try:
            model = VariogramModel(name=_str(m.get("name"), "model name"),
                                   nugget=_num(m.get("nugget"), "nugget"),
                                   psill=_num(m.get("psill"), "psill"),
                                   range=_num(m.get("range"), "range"),
                                   nu=None if m.get("nu") is None else _num(m["nu"], "nu"))
        except GeosoilError as exc:
            raise CacheEntryError(f"{where}: variogram model: {exc}") from None
    empirical = None
    if d.get("empirical") is not None:
        e = d["empirical"]
        _need(isinstance(e, dict), f"{where}: empirical variogram is not a table")
        empirical = EmpiricalVariogram(
            lags=_array(arrays, e.get("lags"), f"{where} lags"),
            gamma=_array(arrays, e.get("gamma"), f"{where} gamma"),
            counts=_array(arrays, e.get("counts"), f"{where} counts", kind="i"),
        )
    cv = None
    if d.get("cross_validation") is not None:
        c = d["cross_validation"]
        _need(isinstance(c, dict), f"{where}: cross-validation is not a table")
        n = c.get("n")
        _need(isinstance(n, int) and not isinstance(n, bool), f"{where}: n is not a count")
        cv = CrossValidation(
            errors=_array(arrays, c.get("errors"), f"{where} errors"),
            standardised_errors=_array(arrays, c.get("standardised_errors"), f"{where} errors"),
            variance=_array(arrays, c.get("variance"), f"{where} variance"),
            mean_error=_num(c.get("mean_error"), "mean_error"), rmse=_num(c.get("rmse"), "rmse"),
            msse=_num(c.get("msse"), "msse"), n=n,
        )
    cands = d.get("candidates", [])
    _need(isinstance(cands, list), f"{where}: candidates is not a list")
    candidates = []
    for c in cands:
        _need(isinstance(c, list) and len(c) == 3, f"{where}: a candidate is not a triple")
        candidates.append((_str(c[0], "candidate"), _num(c[1], "candidate"),
                           _num(c[2], "candidate")))
    notes = d.get("notes", [])
    _need(isinstance(notes, list) and all(isinstance(n, str) for n in notes),
          f"{where}: notes are not text")
    n_samples = d.get("n_samples")
    _need(isinstance(n_samples, int) and not isinstance(n_samples, bool),
          f"{where}: n_samples is not a count")
    _need(isinstance(d.get("log_transform"), bool), f"{where}: log_transform is not true/false")
    return Surface(
        variable=variable, paddock=paddock,
        estimate=_array(arrays, d.get("estimate"), f"{where} estimate", shape=shape),
        std=None if std is None else _array(arrays, std, f"{where} std", shape=shape),
        method=_str(d.get("method"), "method"), n_samples=n_samples, model=model,
        variogram_scope=_str(d.get("variogram_scope"), "variogram_scope", optional=True),
        empirical=empirical, cross_validation=cv, candidates=tuple(candidates),
        log_transform=d["log_transform"], notes=tuple(notes),
    )


def load(folder: Path, key: str, *, shapes: Mapping[str, tuple[int, int]], touch: bool = True
         ) -> tuple[dict[tuple[str, str], Surface], list[str]] | None:
    """The surfaces stored under ``key``, checked; None when there is no entry.

    Parameters
    ----------
    folder : Path
        The cache folder.
    key : str
        The hexadecimal hash of the surfaces' inputs.
    shapes : mapping of str to (int, int)
        Each paddock's grid shape (height, width): every surface must match.
    touch : bool, optional
        Mark the entry most recently used (False: leave the cache as it is, for
        ``check``).

    Returns
    -------
    (surfaces, warnings) or None
        The surfaces by (paddock, variable) and the warnings their
        interpolation raised; None when the entry does not exist.

    Raises
    ------
    CacheEntryError
        The entry exists but is incomplete, damaged, of another format or key,
        or holds anything but plain numbers, text and arrays of numbers.
    """
    npz, jsn = entry_paths(folder, key)
    if not jsn.exists():
        return None
    try:
        if jsn.stat().st_size > _MAX_JSON_BYTES:
            raise CacheEntryError(f"{jsn.name} is larger than any entry geosoil writes")
        meta = json.loads(jsn.read_bytes())
        data = npz.read_bytes()
    except (OSError, ValueError, RecursionError) as exc:
        raise CacheEntryError(f"unreadable: {exc}") from None
    _need(isinstance(meta, dict), "the JSON part is not a table")
    _need(meta.get("format") == FORMAT, f"format {meta.get('format')!r}, not {FORMAT!r}")
    _need(meta.get("key") == key, "the entry is for other inputs (key differs)")
    _need(meta.get("sha256") == _digest(data, meta), "the SHA-256 digest does not match")
    try:
        with np.load(io.BytesIO(data), allow_pickle=False) as z:
            arrays = {name: z[name] for name in z.files}
    except Exception as exc:  # any failure to read the arrays as plain numbers
        raise CacheEntryError(f"the arrays cannot be read as plain numbers: {exc}") from None
    items = meta.get("surfaces")
    warns = meta.get("warnings")
    _need(isinstance(items, list), "no list of surfaces")
    _need(isinstance(warns, list) and all(isinstance(w, str) for w in warns),
          "the warnings are not text")
    out: dict[tuple[str, str], Surface] = {}
    for d in items:
        s = _surface(d, arrays, shapes)
        out[(s.paddock, s.variable)] = s
    if touch:
        os.utime(jsn)  # most recently used: the pruning keeps it longest
    return out, list(warns)


def discard(folder: Path, key: str) -> None:
    """Delete the entry for ``key`` (both files), if it is there.

    Parameters
    ----------
    folder : Path
        The cache folder.
    key : str
        The hexadecimal hash of the surfaces' inputs.
    """
    for p in entry_paths(folder, key):
        p.unlink(missing_ok=True)


def _keep_newest(folder: Path, kind: str, keep: int, *, also: str | None = None) -> None:
    """Keep the ``keep`` most recently used ``<kind>-*.json`` entries (and each one's
    ``also`` file); delete the rest, and temporary files of ``kind`` left by killed runs."""
    entries = sorted(folder.glob(f"{kind}-*.json"), key=lambda p: p.stat().st_mtime,
                     reverse=True)
    for old in entries[keep:]:
        old.unlink(missing_ok=True)
        if also is not None:
            old.with_suffix(also).unlink(missing_ok=True)
    for tmp in folder.glob(f".{kind}-*.part*"):  # geosoil.writers.atomic_write's
        if time.time() - tmp.stat().st_mtime > _STALE_TEMP_S:
            tmp.unlink(missing_ok=True)


def prune(folder: Path, *, keep: int) -> None:
    """Keep the ``keep`` most recently used entries; delete the rest, older
    versions' pickle files and temporary files of killed runs.

    Parameters
    ----------
    folder : Path
        The cache folder.
    keep : int
        How many entries to keep.
    """
    _keep_newest(folder, "surfaces", keep, also=".npz")
    for legacy in folder.glob("surfaces-*.pickle"):  # never opened: a pickle can run code
        legacy.unlink(missing_ok=True)
    live = {p.with_suffix("") for p in folder.glob("surfaces-*.json")}
    for npz in folder.glob("surfaces-*.npz"):
        if npz.with_suffix("") not in live and time.time() - npz.stat().st_mtime > _STALE_TEMP_S:
            npz.unlink(missing_ok=True)


# --------------------------------------------------------------------------- zones

#: Written into every zones entry; an entry of another format is not read.
ZONES_FORMAT = "geosoil-zones/1"

#: The kinds of column a zones entry holds (pandas dtype names).
_ZONE_DTYPES = ("int64", "float64", "bool", "str", "object")


def zones_path(folder: Path, key: str) -> Path:
    """The file of the zones entry for ``key`` in ``folder``: ``zones-<key[:32]>.json``.

    Parameters
    ----------
    folder : Path
        The cache folder.
    key : str
        The hexadecimal hash of the zones' inputs.
    touch : bool, optional
        Mark the entry most recently used (False: leave the cache as it is).

    Returns
    -------
    Path
    """
    return folder / f"zones-{key[:32]}.json"


def _cell(v: Any) -> Any:
    """A table cell as JSON: numbers, text, truth values and missing (None) only."""
    if v is None or isinstance(v, (bool, int, float, str)):
        return v
    if isinstance(v, np.generic):
        return v.item()
    raise TypeError(f"a zone table cell of type {type(v).__name__}")


def save_zones(folder: Path, key: str, zones: Any, notes: list[str],
               warnings_raised: list[str]) -> Path | None:
    """Store one paddock's and product's zones (and their notes and warnings) under ``key``.

    The table is kept as JSON: each column's name, dtype and values (numbers, text,
    truth values), and each zone's geometry as WKB in hexadecimal, so an entry holds
    nothing that can run when it is read.

    Parameters
    ----------
    folder : Path
        The cache folder (created when missing).
    key : str
        The hexadecimal hash of the zones' inputs.
    zones : GeoDataFrame
        What :func:`geosoil.zones.make_zones` returned in ``zones``.
    notes, warnings_raised : list of str
        Its notes, and the warnings raised while making the zones (given back on a hit).

    Returns
    -------
    Path or None
        The entry's file; None when the table holds a kind of column this entry
        cannot keep (nothing is written, the zones are made again next time).

    Raises
    ------
    OSError
        The folder or the file could not be written.
    """
    import shapely

    from .writers import atomic_write

    columns = []
    for name in zones.columns:
        if name == zones.geometry.name:
            continue
        dtype = str(zones[name].dtype)
        if dtype not in _ZONE_DTYPES:
            return None
        try:
            values = [_cell(v) for v in zones[name].tolist()]
        except TypeError:
            return None
        columns.append({"name": str(name), "dtype": dtype, "values": values})
    meta: dict[str, Any] = {
        "format": ZONES_FORMAT,
        "key": key,
        "crs": None if zones.crs is None else zones.crs.to_wkt(),
        "columns": columns,
        "geometry": [None if g is None else shapely.to_wkb(g, hex=True)
                     for g in zones.geometry],
        "notes": [str(n) for n in notes],
        "warnings": [str(w) for w in warnings_raised],
    }
    meta["sha256"] = hashlib.sha256(_canonical(meta)).hexdigest()
    path = zones_path(folder, key)
    folder.mkdir(parents=True, exist_ok=True)
    with atomic_write(path) as fh:
        fh.write(json.dumps(meta, allow_nan=True).encode("utf-8"))
    return path


def load_zones(folder: Path, key: str, *, touch: bool = True
               ) -> tuple[Any, list[str], list[str]] | None:
    """The zones stored under ``key``, checked; None when there is no entry.

    Parameters
    ----------
    folder : Path
        The cache folder.
    key : str
        The hexadecimal hash of the zones' inputs.

    Returns
    -------
    (zones, notes, warnings) or None
        The GeoDataFrame as it was stored (same columns, dtypes and geometries), its
        notes and the warnings raised while it was made.

    Raises
    ------
    CacheEntryError
        The entry exists but is damaged, of another format or key, or holds anything
        but numbers, text, truth values and WKB geometries.
    """
    import geopandas as gpd
    import pandas as pd
    import shapely

    path = zones_path(folder, key)
    if not path.exists():
        return None
    try:
        if path.stat().st_size > _MAX_JSON_BYTES:
            raise CacheEntryError(f"{path.name} is larger than any entry geosoil writes")
        meta = json.loads(path.read_bytes())
    except (OSError, ValueError, RecursionError) as exc:
        raise CacheEntryError(f"unreadable: {exc}") from None
    _need(isinstance(meta, dict), "the entry is not a table")
    _need(meta.get("format") == ZONES_FORMAT,
          f"format {meta.get('format')!r}, not {ZONES_FORMAT!r}")
    _need(meta.get("key") == key, "the entry is for other inputs (key differs)")
    body = {k: v for k, v in meta.items() if k != "sha256"}
    _need(meta.get("sha256") == hashlib.sha256(_canonical(body)).hexdigest(),
          "the SHA-256 digest does not match")
    geoms = meta.get("geometry")
    _need(isinstance(geoms, list) and all(g is None or isinstance(g, str) for g in geoms),
          "the geometries are not WKB text")
    n = len(geoms)
    data: dict[str, Any] = {}
    cols = meta.get("columns")
    _need(isinstance(cols, list), "no list of columns")
    for c in cols:
        _need(isinstance(c, dict), "a column is not a table")
        name, dtype, values = c.get("name"), c.get("dtype"), c.get("values")
        _need(isinstance(name, str) and dtype in _ZONE_DTYPES, "a column's name or kind")
        _need(isinstance(values, list) and len(values) == n,
              f"column {name!r}: not one value per zone")
        _need(all(v is None or isinstance(v, (bool, int, float, str)) for v in values),
              f"column {name!r}: a value that is not a number, text or truth value")
        data[name] = pd.Series(values, dtype=dtype)
    for key_ in ("notes", "warnings"):
        _need(isinstance(meta.get(key_), list) and all(isinstance(t, str) for t in meta[key_]),
              f"the {key_} are not text")
    crs = meta.get("crs")
    _need(crs is None or isinstance(crs, str), "the CRS is not text")
    try:
        geometry = shapely.from_wkb([g for g in geoms], on_invalid="raise")
    except Exception as exc:  # any WKB that does not read as a geometry
        raise CacheEntryError(f"a geometry cannot be read: {exc}") from None
    zones = gpd.GeoDataFrame(data, geometry=gpd.GeoSeries(geometry, crs=crs), crs=crs)
    if touch:
        os.utime(path)  # most recently used: the pruning keeps it longest
    return zones, list(meta["notes"]), list(meta["warnings"])


def prune_zones(folder: Path, *, keep: int) -> None:
    """Keep the ``keep`` most recently used zones entries; delete the rest.

    Parameters
    ----------
    folder : Path
        The cache folder.
    keep : int
        How many entries to keep.
    """
    _keep_newest(folder, "zones", keep)
