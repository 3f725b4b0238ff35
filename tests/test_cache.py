"""geosoil.cache: surfaces kept as arrays and JSON; a crafted or damaged entry runs nothing.

A "crafted" entry here is what someone could leave in a project's cache folder:
an old-style pickle under the name the inputs produce, or an arrays file holding a
pickled object with a digest made to match. Each would create a marker file if
anything in it ran. The project is the small invented farm of ``tests/small_farm``.
"""

from __future__ import annotations

import io
import json
import os
import pathlib
import pickle
import time
from pathlib import Path

import numpy as np
import pytest

from geosoil import cache
from geosoil.job import run
from geosoil.kriging import CrossValidation
from geosoil.pipeline import _surface_key, prepare
from geosoil.project import load_project
from geosoil.surfaces import Surface
from geosoil.variogram import EmpiricalVariogram, VariogramModel
from tests.small_farm import make_project


class Payload:
    """Unpickling this creates ``marker``: the proof that a cache file ran code."""

    def __init__(self, marker: Path) -> None:
        self.marker = marker

    def __reduce__(self):  # noqa: ANN204
        return (pathlib.Path.touch, (pathlib.Path(self.marker),))


def surface(paddock: str, variable: str, shape: tuple[int, int], *, full: bool) -> Surface:
    rng = np.random.default_rng(len(paddock) + len(variable))
    est = rng.normal(5.0, 1.0, shape)
    est[0, 0] = np.nan  # outside the mask
    if not full:
        return Surface(variable=variable, paddock=paddock, estimate=est, std=None,
                       method="inverse-distance weighting", n_samples=3, notes=("few samples",))
    return Surface(
        variable=variable, paddock=paddock, estimate=est, std=np.abs(est) / 10,
        method="ordinary kriging", n_samples=12,
        model=VariogramModel(name="matern", nugget=0.1, psill=2.0, range=150.0, nu=1.5),
        variogram_scope="paddock",
        empirical=EmpiricalVariogram(lags=np.array([10.0, 20.0]), gamma=np.array([0.5, 1.0]),
                                     counts=np.array([4, 9])),
        cross_validation=CrossValidation(errors=np.array([0.1, -0.2]),
                                         standardised_errors=np.array([0.3, -0.4]),
                                         variance=np.array([1.0, 2.0]), mean_error=-0.05,
                                         rmse=0.158, msse=float("nan"), n=2),
        candidates=(("matern", 0.2, 0.3), ("spherical", 0.25, 0.31)),
        log_transform=True, notes=("a", "b"),
    )


def same(a: Surface, b: Surface) -> bool:
    def eq(x: object, y: object) -> bool:
        if isinstance(x, np.ndarray):
            return (isinstance(y, np.ndarray) and x.dtype == y.dtype
                    and np.array_equal(x, y, equal_nan=True))
        if isinstance(x, float) and np.isnan(x):
            return isinstance(y, float) and np.isnan(y)
        return x == y

    for f in ("variable", "paddock", "estimate", "std", "method", "n_samples", "model",
              "variogram_scope", "candidates", "log_transform", "notes"):
        if not eq(getattr(a, f), getattr(b, f)):
            return False
    for part, fields in (("empirical", ("lags", "gamma", "counts")),
                         ("cross_validation", ("errors", "standardised_errors", "variance",
                                               "mean_error", "rmse", "msse", "n"))):
        x, y = getattr(a, part), getattr(b, part)
        if (x is None) != (y is None):
            return False
        if x is not None and not all(eq(getattr(x, f), getattr(y, f)) for f in fields):
            return False
    return True


KEY = "ab" * 32
SHAPES = {"Home": (4, 5), "Back": (3, 2)}


@pytest.fixture
def stored(tmp_path: Path) -> dict[tuple[str, str], Surface]:
    surfaces = {("Home", "ca"): surface("Home", "ca", SHAPES["Home"], full=True),
                ("Back", "na"): surface("Back", "na", SHAPES["Back"], full=False)}
    cache.save(tmp_path, KEY, surfaces, ["one warning", "two"])
    return surfaces


def test_an_entry_is_an_npz_of_numbers_and_a_json_file(tmp_path: Path, stored) -> None:  # noqa: ANN001
    assert sorted(p.suffix for p in tmp_path.iterdir()) == [".json", ".npz"]
    npz, jsn = cache.entry_paths(tmp_path, KEY)
    with np.load(npz, allow_pickle=False) as z:  # raises on any object array
        assert all(z[n].dtype.kind in "fi" for n in z.files)
    meta = json.loads(jsn.read_text(encoding="utf-8"))
    assert meta["format"] == cache.FORMAT and meta["key"] == KEY and len(meta["sha256"]) == 64


def test_round_trip_gives_back_every_field(tmp_path: Path, stored) -> None:  # noqa: ANN001
    loaded = cache.load(tmp_path, KEY, shapes=SHAPES)
    assert loaded is not None
    surfaces, warns = loaded
    assert warns == ["one warning", "two"]
    assert set(surfaces) == set(stored)
    for k in stored:
        assert same(surfaces[k], stored[k]), k


def test_no_entry_is_none(tmp_path: Path) -> None:
    assert cache.load(tmp_path, KEY, shapes=SHAPES) is None


def _rewrite_json(tmp_path: Path, change) -> None:  # noqa: ANN001
    jsn = cache.entry_paths(tmp_path, KEY)[1]
    meta = json.loads(jsn.read_text(encoding="utf-8"))
    change(meta)
    jsn.write_text(json.dumps(meta), encoding="utf-8")


@pytest.mark.parametrize("damage, reason", [
    (lambda p: p[0].write_bytes(p[0].read_bytes()[:-10]), "digest"),  # truncated arrays
    (lambda p: p[0].unlink(), "unreadable"),  # arrays file gone
    (lambda p: p[1].write_text("{not json"), "unreadable"),
    (lambda p: p[1].write_text("[1, 2]"), "not a table"),
    (lambda p: p[1].write_text("[" * 100_000 + "]" * 100_000), "unreadable"),  # deep nesting
])
def test_a_damaged_entry_is_refused(tmp_path: Path, stored, damage, reason: str) -> None:  # noqa: ANN001
    damage(cache.entry_paths(tmp_path, KEY))
    with pytest.raises(cache.CacheEntryError, match=reason):
        cache.load(tmp_path, KEY, shapes=SHAPES)


@pytest.mark.parametrize("change, reason", [
    (lambda m: m.update(format="geosoil-surfaces/0"), "format"),
    (lambda m: m.update(key="cd" * 32), "key differs"),
    (lambda m: m["surfaces"][0].update(method="kriging by magic"), "digest"),
])
def test_an_entry_edited_by_hand_is_refused(tmp_path: Path, stored, change, reason) -> None:  # noqa: ANN001
    _rewrite_json(tmp_path, change)
    with pytest.raises(cache.CacheEntryError, match=reason):
        cache.load(tmp_path, KEY, shapes=SHAPES)


def test_an_entry_of_another_grid_is_refused(tmp_path: Path, stored) -> None:  # noqa: ANN001
    with pytest.raises(cache.CacheEntryError, match="shape"):
        cache.load(tmp_path, KEY, shapes={"Home": (5, 5), "Back": (3, 2)})
    with pytest.raises(cache.CacheEntryError, match="not one of this run's"):
        cache.load(tmp_path, KEY, shapes={"Home": (4, 5)})


def _crafted_npz(marker: Path) -> bytes:
    buf = io.BytesIO()
    np.savez(buf, s0_estimate=np.array([Payload(marker)], dtype=object))
    return buf.getvalue()


def test_a_crafted_arrays_file_with_a_matching_digest_runs_nothing(tmp_path: Path) -> None:
    marker = tmp_path / "ran"
    data = _crafted_npz(marker)
    assert b"touch" in data  # the arrays file really holds a pickled call
    meta = {"format": cache.FORMAT, "key": KEY, "warnings": [],
            "surfaces": [{"paddock": "Home", "variable": "ca", "estimate": "s0_estimate"}]}
    meta["sha256"] = cache._digest(data, meta)  # made to match: only the loader stands guard
    npz, jsn = cache.entry_paths(tmp_path, KEY)
    npz.write_bytes(data)
    jsn.write_text(json.dumps(meta), encoding="utf-8")
    with pytest.raises(cache.CacheEntryError, match="plain numbers"):
        cache.load(tmp_path, KEY, shapes=SHAPES)
    assert not marker.exists()


def test_prune_keeps_the_most_recently_used_and_removes_old_pickles(tmp_path: Path) -> None:
    now = time.time()
    for i in range(6):
        for suffix in (".npz", ".json"):
            p = tmp_path / f"surfaces-{i}{suffix}"
            p.write_bytes(b"x")
            os.utime(p, (now - 100 + i, now - 100 + i))
    (tmp_path / "surfaces-old.pickle").write_bytes(b"never opened")
    stale = tmp_path / ".surfaces-7.0123abcd.part.npz"  # a write a killed run left
    stale.write_bytes(b"half")
    os.utime(stale, (now - 7200, now - 7200))
    (tmp_path / "other.txt").write_text("not ours")
    cache.prune(tmp_path, keep=2)
    assert sorted(p.name for p in tmp_path.iterdir()) == [
        "other.txt", "surfaces-4.json", "surfaces-4.npz", "surfaces-5.json", "surfaces-5.npz"]


# --------------------------------------------------------------------------- through a run


@pytest.fixture(scope="module")
def farm(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path, str]:
    """The small farm with its cache folder inside the project (as a received project
    might have it), and the key its inputs give."""
    base = tmp_path_factory.mktemp("cachefarm")
    folder = make_project(base / "farm", cache=base / "farm" / "cache")
    key = _surface_key(prepare(load_project(folder)))
    return folder, folder / "cache", key


def test_a_planted_pickle_and_a_planted_npz_run_nothing_and_are_recomputed_with_a_note(
    farm, tmp_path: Path  # noqa: ANN001
) -> None:
    folder, cache_dir, key = farm
    cache_dir.mkdir(exist_ok=True)
    marker = tmp_path / "ran"
    # an old-style entry under the name the old geosoil gave these inputs
    with open(cache_dir / f"surfaces-{key[:32]}.pickle", "wb") as fh:
        pickle.dump({"key": key, "surfaces": Payload(marker), "warnings": []}, fh)
    # and a new-style entry whose arrays file holds a pickled object, digest made to match
    data = _crafted_npz(marker)
    meta = {"format": cache.FORMAT, "key": key, "warnings": [],
            "surfaces": [{"paddock": "Home", "variable": "ca", "estimate": "s0_estimate"}]}
    meta["sha256"] = cache._digest(data, meta)
    npz, jsn = cache.entry_paths(cache_dir, key)
    npz.write_bytes(data)
    jsn.write_text(json.dumps(meta), encoding="utf-8")

    result = run(load_project(folder), out_dir=tmp_path / "out")
    assert not marker.exists()  # nothing ran
    assert result.farm.cache_hit is False
    notes = [w for w in result.warnings if "failed their check" in w]
    assert len(notes) == 1 and str(jsn) in notes[0] and "computed again" in notes[0]
    record = json.loads((tmp_path / "out" / "run.json").read_text(encoding="utf-8"))
    assert notes[0] in record["warnings"] and record["surfaces_from_cache"] is False
    # the entry was replaced by a sound one, and the old pickle is gone, unopened
    assert not list(cache_dir.glob("*.pickle"))
    shape = result.farm.paddocks["Home"].grid.mask.shape
    loaded = cache.load(cache_dir, key, shapes={"Home": shape})
    assert loaded is not None and ("Home", "ca") in loaded[0]
    # a second run takes it, with no note
    again = run(load_project(folder), out_dir=tmp_path / "out2")
    assert again.farm.cache_hit is True
    assert not [w for w in again.warnings if "failed their check" in w]
    assert again.tonnage.equals(result.tonnage)


# --------------------------------------------------------------------------- zones entries


@pytest.fixture
def zones_project(tmp_path: Path, demo_run):  # noqa: ANN001, ANN201
    """The demo project with a cache folder of the test's own, holding the session's
    surfaces (so nothing is kriged) and no zones."""
    import dataclasses
    import shutil

    folder = tmp_path / "cache"
    folder.mkdir()
    for f in demo_run.cache.glob("surfaces-*"):
        shutil.copy2(f, folder / f.name)
    p = demo_run.project
    out = dataclasses.replace(p.settings.output, cache_dir=folder)
    return dataclasses.replace(p, settings=dataclasses.replace(p.settings, output=out)), folder


def _counting(monkeypatch: pytest.MonkeyPatch) -> list[tuple[str, str]]:
    from geosoil import pipeline

    made: list[tuple[str, str]] = []
    real = pipeline.make_zones

    def counted(rate, **kw):  # noqa: ANN001, ANN202
        made.append((kw["paddock"], kw["product"]))
        return real(rate, **kw)

    monkeypatch.setattr(pipeline, "make_zones", counted)
    return made


def test_zones_from_the_cache_equal_zones_made_afresh(zones_project, monkeypatch) -> None:  # noqa: ANN001
    import pandas as pd

    from geosoil.pipeline import compute

    project, folder = zones_project
    made = _counting(monkeypatch)
    first = compute(project)
    assert len(made) == 6  # three paddocks, two products
    assert len(list(folder.glob("zones-*.json"))) == 6
    again = compute(project)
    assert len(made) == 6  # none made again
    afresh = compute(project, use_cache=False)
    assert len(made) == 12
    for other in (again, afresh):
        pd.testing.assert_frame_equal(other.zones, first.zones, check_exact=True)
        assert other.zones.crs == first.zones.crs
        assert other.warnings == first.warnings
        for name, pr in first.paddocks.items():
            assert other.paddocks[name].zone_notes == pr.zone_notes
            pd.testing.assert_frame_equal(other.paddocks[name].zones, pr.zones, check_exact=True)


def test_a_changed_rate_setting_makes_only_the_zones_it_changes(zones_project,  # noqa: ANN001
                                                               monkeypatch) -> None:
    import dataclasses

    import numpy as np

    from geosoil.pipeline import compute

    project, _ = zones_project
    made = _counting(monkeypatch)
    before = compute(project)
    made.clear()
    s = project.settings
    gyp = dataclasses.replace(s.rates.gypsum,
                              target_esp_percent=s.rates.gypsum.target_esp_percent - 1.0)
    changed = dataclasses.replace(project, settings=dataclasses.replace(
        s, rates=dataclasses.replace(s.rates, gypsum=gyp)))
    after = compute(changed)
    # the zones made again are exactly those whose per-cell rates changed
    moved = sorted((n, p) for n, pr in after.paddocks.items()
                   for p, r in pr.rates.product_rates.items()
                   if not np.array_equal(r, before.paddocks[n].rates.product_rates[p],
                                         equal_nan=True))
    assert moved and all(p == "gypsum" for _, p in moved)
    assert sorted(made) == moved


@pytest.mark.parametrize("damage", ["digest", "geometry", "value", "not json"])
def test_a_damaged_zones_entry_is_not_used(zones_project, monkeypatch, damage: str) -> None:  # noqa: ANN001
    import pandas as pd

    from geosoil.pipeline import compute

    project, folder = zones_project
    first = compute(project)
    made = _counting(monkeypatch)
    for entry in folder.glob("zones-*.json"):
        meta = json.loads(entry.read_text(encoding="utf-8"))
        if damage == "digest":
            meta["notes"].append("a note nobody wrote")
        elif damage == "geometry":
            meta["geometry"][0] = "00ff"
        elif damage == "value":
            meta["columns"][0]["values"][0] = {"__class__": "os.system"}
        if damage == "not json":
            entry.write_bytes(b"\x80 not json")
        else:
            entry.write_text(json.dumps(meta), encoding="utf-8")
    again = compute(project)
    assert len(made) == 6  # every entry refused: the zones made again
    pd.testing.assert_frame_equal(again.zones, first.zones, check_exact=True)
    said = [w for w in again.warnings if w.startswith("the cached zones ")]
    assert len(said) == 6 and all("failed their check" in w for w in said)
    assert compute(project).warnings == first.warnings  # replaced: taken back next time


def test_a_zones_entry_round_trips_every_column_kind(tmp_path: Path) -> None:
    import geopandas as gpd
    import pandas as pd
    import shapely

    frame = gpd.GeoDataFrame(
        {"name": pd.Series(["a", "b"], dtype="str"), "n": [1, 2], "x": [0.5, np.nan],
         "flag": [True, False], "what": pd.Series(["", "pass 1"], dtype="object")},
        geometry=[shapely.box(0, 0, 1, 1), shapely.box(1, 0, 2.000000001, 1)],
        crs="EPSG:32755")
    assert cache.save_zones(tmp_path, "ab" * 32, frame, ["n1"], ["w1"]) is not None
    zones, notes, warned = cache.load_zones(tmp_path, "ab" * 32)
    pd.testing.assert_frame_equal(zones, frame, check_exact=True)
    assert (notes, warned) == (["n1"], ["w1"])
    assert cache.load_zones(tmp_path, "cd" * 32) is None
