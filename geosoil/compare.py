"""Two seasons of one farm compared in one call: read both, krige, write the folder.  [I/O]

A season is a project (a folder holding ``geosoil.toml``, or the file) or the
output folder of a run (its ``run.json``, ``samples.csv`` and ``farm.gpkg``).
Last season's prescription, used to break the change down by zone, is read
from last season's output folder (the ``zones_<product>`` layers of its
``farm.gpkg``: every zone with its total rate over all passes).

The folder holds ``change/<paddock>/<variable>_change.tif``,
``<variable>_change_sd.tif`` and ``<variable>_change_class.tif`` (codes of
:data:`geosoil.change.CLASS_CODES`), ``change_by_zone.csv``, ``map.html``,
``report.html`` and ``run.json``. The method is :mod:`geosoil.change`.
With samples at several depths every depth range both seasons sampled is compared
on its own, a deeper layer's names carrying its suffix (``esp_10-30cm_change.tif``).
"""

from __future__ import annotations

import dataclasses
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely

from . import __version__
from .change import (
    CHANGE_VARIABLES,
    CLASS_CODES,
    METHODS,
    PAIRED_CHANGE_NOTE,
    PAIRED_LEAST_SHARE,
    PAIRED_WITHIN_M,
    PH_METHODS,
    Z_BEYOND_ERROR,
    ChangeSurface,
    PhConversion,
    SeasonMismatchError,
    SitePairing,
    change_surface,
    choose_ph,
    pair_sites,
    paired_change_surface,
    zone_change_table,
)
from .errors import GeosoilError, InputError, SettingsError
from .grids import PaddockGrid, aligned_grids
from .layers import Layer
from .names import slug
from .outfolder import output_folder
from .recording import record_warnings
from .samples import DEPTH_COLUMNS
from .settings import from_mapping
from .surfaces import InterpolationSettings, Surface, interpolate_farm
from .writers import atomic_write, write_cog, write_csv, write_json

__all__ = ["CompareResult", "Season", "read_season", "check_same_farm", "run_compare",
           "METHOD", "LEAST_OVERLAP"]

#: Least share of a paddock's area (intersection over union) two seasons' boundaries share.
LEAST_OVERLAP = 0.9

METHOD = (
    "each season's sample values kriged on this season's paddock grid (ordinary kriging, "
    "variogram chosen as in a run); change = this season - last season. Independent "
    "method: sd_change = sqrt(sd_last^2 + sd_this^2), the seasons' kriging errors taken as "
    "independent. Paired-sites method (a paddock where at least "
    f"{100 * PAIRED_LEAST_SHARE:.0f} % of this season's samples lie within the pairing "
    "distance of one of last season's): the per-site differences (this - last) kriged "
    "directly with a variogram fitted to them, the change and sd_change being the kriged "
    "difference and its kriging standard deviation. A change is beyond its error where "
    "|change| > z x sd_change"
)

INDEPENDENCE = (
    "Where a paddock was sampled again at the same sites, the two seasons' kriging errors are "
    "strongly correlated, so the per-site differences (this - last) are kriged directly and "
    "the change's standard deviation is that of the kriged difference (paired sites). "
    "Elsewhere the seasons' kriging errors are taken as independent (each season kriged from "
    "its own samples): sd_change = sqrt(sd_last^2 + sd_this^2). Each paddock and variable "
    "says which method it used. " + PAIRED_CHANGE_NOTE)


@dataclass
class Season:
    """One season's checked samples, paddocks and (for an output folder) prescription."""

    label: str
    source: Path
    kind: str  # "project" or "output folder"
    #: the top sampled layer (its label), when the samples are at several depths
    layer: str | None
    crs: pyproj.CRS
    paddocks: gpd.GeoDataFrame
    samples: gpd.GeoDataFrame
    grids: dict[str, PaddockGrid]
    zones: gpd.GeoDataFrame | None
    interpolation: InterpolationSettings
    farm: str | None
    files: list[Path]
    warnings: list[str] = field(default_factory=list)
    #: every sampled layer's samples, shallowest first; ``[(None, samples)]`` for samples of
    #: one depth (their depth not recorded); empty: ``samples`` as the one layer
    layers: list[tuple[Layer | None, gpd.GeoDataFrame]] = field(default_factory=list)
    #: ``[chemistry] soluble_salts`` of the season ("warn": the lab's exchangeable figures;
    #: "subtract": soluble salts taken off them); None where its record does not say
    soluble_salts: str | None = None

    def sampled_layers(self) -> list[tuple[Layer | None, gpd.GeoDataFrame]]:
        """The sampled layers (``[(None, samples)]`` for samples of one depth)."""
        return self.layers or [(None, self.samples)]

    @property
    def name(self) -> str:
        """How messages name the season: its label and its file."""
        return f"{self.label} ({self.source})"


@dataclass
class CompareResult:
    """What :func:`run_compare` made."""

    out_dir: Path
    written: list[Path]
    changes: dict[tuple[str, str], ChangeSurface]
    table: pd.DataFrame
    record: dict[str, Any]
    warnings: list[str]


# --------------------------------------------------------------------------- reading


def _uninert(value: Any) -> Any:
    """A text cell as the CSV writer had it before guarding it against formulas."""
    if isinstance(value, str) and len(value) > 1 and value[0] == "'" and \
            value[1] in "=+-@\t\r":
        return value[1:]
    return value


def _read_output_folder(folder: Path, label: str) -> Season:
    run_json = folder / "run.json"
    try:
        record = json.loads(run_json.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise InputError(f"cannot read the run record ({exc})", file=run_json) from None
    if not isinstance(record, dict) or "working_crs" not in record or \
            record.get("kind") is not None:
        what = record.get("kind") if isinstance(record, dict) else None
        raise InputError(
            f"not the record of a geosoil run{f' (it records a {what})' if what else ''}",
            file=run_json, fix="give the output folder of 'geosoil run' (or the project)")
    crs = pyproj.CRS.from_user_input(record["working_crs"]["wkt"])
    samples_csv = folder / "samples.csv"
    gpkg = folder / "farm.gpkg"
    for needed in (samples_csv, gpkg):
        if not needed.is_file():
            raise InputError(
                f"missing from the output folder (its run.json lists {needed.name})",
                file=needed, fix="give a whole output folder of 'geosoil run'")
    table = pd.read_csv(samples_csv)
    for col in ("x", "y", "paddock"):
        if col not in table.columns:
            raise InputError(f"no '{col}' column", file=samples_csv,
                             fix="give the samples.csv of a geosoil run, unchanged")
    for col in ("sample_id", "paddock"):
        if col in table.columns:
            table[col] = table[col].map(_uninert)
    layer = None
    layered: list[tuple[Layer | None, gpd.GeoDataFrame]] = []
    if all(c in table.columns for c in DEPTH_COLUMNS):
        depths = table[list(DEPTH_COLUMNS)].apply(pd.to_numeric, errors="coerce")
        pairs = sorted({(float(a), float(b)) for a, b in depths.dropna().to_numpy()})
        if len(pairs) > 1:  # each layer's samples, as a project's prepared layers hold them
            for top_cm, bottom_cm in pairs:
                part = table[(depths[DEPTH_COLUMNS[0]] == top_cm)
                             & (depths[DEPTH_COLUMNS[1]] == bottom_cm)].reset_index(drop=True)
                layered.append((Layer(top_cm, bottom_cm), gpd.GeoDataFrame(
                    part, geometry=gpd.points_from_xy(part["x"], part["y"]), crs=crs)))
            layer = layered[0][0].label  # type: ignore[union-attr]
            table = layered[0][1]
    samples = gpd.GeoDataFrame(table, geometry=gpd.points_from_xy(table["x"], table["y"]),
                               crs=crs)
    import pyogrio

    layers = [str(name) for name, _ in pyogrio.list_layers(gpkg)]
    if "paddocks" not in layers:
        raise InputError("no 'paddocks' layer", file=gpkg,
                         fix="give the farm.gpkg of a geosoil run, unchanged")
    paddocks = gpd.read_file(gpkg, layer="paddocks")[["paddock", "geometry"]].to_crs(crs)
    exclusions = gpd.read_file(gpkg, layer="exclusions").to_crs(crs) \
        if "exclusions" in layers else None
    zone_layers = [n for n in layers if n.startswith("zones_") and "_pass" not in n
                   and "_season" not in n]
    frames = [gpd.read_file(gpkg, layer=n).to_crs(crs) for n in zone_layers]
    zones = gpd.GeoDataFrame(pd.concat(frames, ignore_index=True), crs=crs) if frames else None
    settings = record.get("settings") or {}
    cell = float((settings.get("grid") or {}).get("cell_size_m", 10.0))
    notes: list[str] = []
    try:
        interp = from_mapping(InterpolationSettings, settings.get("interpolation") or {},
                              section="interpolation")
    except GeosoilError as exc:
        interp = InterpolationSettings()
        notes.append(f"{label} ({folder}): its interpolation settings could not be read "
                     f"({exc}); the defaults were used")
    excl = None
    if exclusions is not None and len(exclusions):
        excl = shapely.union_all(exclusions.geometry.to_numpy())
    grids = aligned_grids(paddocks, cell_size_m=cell, exclusions=excl)
    return Season(label, folder, "output folder", layer, crs, paddocks, samples, grids, zones,
                  interp, settings.get("farm"), [run_json, samples_csv, gpkg], notes,
                  layered, (settings.get("chemistry") or {}).get("soluble_salts", "warn"))


def _read_project(path: Path, label: str) -> Season:
    from .pipeline import prepare
    from .project import load_project

    project = load_project(path)
    prep = prepare(project)
    files = [p for p in project.input_files() if p is not None]
    if project.path is not None:
        files.append(project.path)
    source = project.path or path
    layer = prep.layers[0].layer.label if prep.layers else None
    return Season(label, source, "project", layer, prep.crs,
                  prep.paddocks[["paddock", "geometry"]], prep.samples, dict(prep.grids), None,
                  project.settings.interpolation, project.settings.farm, files,
                  list(prep.warnings), [(ls.layer, ls.samples) for ls in prep.layers],
                  project.settings.chemistry.soluble_salts)


def read_season(path: str | Path, *, label: str) -> Season:
    """A season from a project (folder or ``geosoil.toml``) or a run's output folder.

    Raises
    ------
    InputError
        Neither a project nor an output folder; an output folder missing a file.
    GeosoilError
        A project's inputs fail their checks (as in ``geosoil check``).
    """
    p = Path(path)
    if p.is_file() and p.name == "run.json":
        p = p.parent
    if p.is_dir() and (p / "run.json").is_file():
        return _read_output_folder(p, label)
    if p.is_dir() and not (p / "geosoil.toml").is_file():
        raise InputError(
            f"{label}: neither a project (no geosoil.toml) nor the output folder of a run "
            "(no run.json)", file=p,
            fix="give the project folder, its geosoil.toml, or the folder 'geosoil run' wrote")
    return _read_project(p, label)


def check_same_farm(last: Season, this: Season) -> list[str]:
    """Refuse two seasons that are not the same farm on the same grid.

    Paddocks that only one season has are left out of the comparison, with a warning
    naming them; the paddocks both have are compared.

    Returns
    -------
    list of str
        The warning naming the paddocks of one season only (empty when both have the same).

    Raises
    ------
    SeasonMismatchError
        Different working CRS, no paddock name in common, or a shared paddock whose
        boundaries share less than :data:`LEAST_OVERLAP` of their area.
    """
    if not last.crs.equals(this.crs):
        raise SeasonMismatchError(
            f"{last.name} is worked in {last.crs.name} and {this.name} in {this.crs.name}: "
            "compare seasons worked in the same CRS (give both projects the same "
            "boundaries file or [samples] crs)")
    a = set(last.paddocks["paddock"].astype(str))
    b = set(this.paddocks["paddock"].astype(str))
    only_a, only_b = sorted(a - b), sorted(b - a)
    parts = []
    if only_a:
        parts.append(f"only in {last.name}: {', '.join(only_a)}")
    if only_b:
        parts.append(f"only in {this.name}: {', '.join(only_b)}")
    if not a & b:
        raise SeasonMismatchError(
            "the seasons share no paddock (" + "; ".join(parts) + "): compare the "
            "same farm, with the paddocks named alike in both seasons' boundaries")
    notes = []
    if parts:
        notes.append(
            "paddocks that one season does not have are not compared (" + "; ".join(parts)
            + "); the paddocks both have are: " + ", ".join(sorted(a & b))
            + " (name a paddock alike in both seasons' boundaries to compare it)")
    ga = last.paddocks.dissolve(by="paddock").geometry
    gb = this.paddocks.dissolve(by="paddock").geometry
    for name in sorted(a & b):
        pa, pb = ga.loc[name], gb.loc[name]
        union = shapely.union(pa, pb).area
        share = shapely.intersection(pa, pb).area / union if union > 0 else 0.0
        if share < LEAST_OVERLAP:
            raise SeasonMismatchError(
                f"paddock '{name}' has other boundaries in {last.name} and {this.name}: they "
                f"share {100 * share:.0f} % of their area, less than "
                f"{100 * LEAST_OVERLAP:.0f} %: compare seasons of the same paddocks")
    return notes


def _only(season: Season, names: set[str]) -> Season:
    """The season cut to the paddocks ``names``: its boundaries, samples (every layer's),
    grids and prescription zones."""
    if set(season.paddocks["paddock"].astype(str)) <= names:
        return season

    def cut(frame: Any) -> Any:
        if frame is None or "paddock" not in frame.columns:
            return frame
        return frame[frame["paddock"].astype(str).isin(names)].reset_index(drop=True)

    return dataclasses.replace(
        season, paddocks=cut(season.paddocks), samples=cut(season.samples),
        grids={n: g for n, g in season.grids.items() if str(n) in names},
        zones=cut(season.zones), layers=[(layer, cut(f)) for layer, f in season.layers])


def _values(samples: gpd.GeoDataFrame, col: str) -> bool:
    return col in samples.columns and bool(pd.to_numeric(samples[col], errors="coerce")
                                           .notna().any())


def _change_frame(season: Season, samples: gpd.GeoDataFrame, ph_col: str,
                  conversion: PhConversion | None, converted: bool) -> gpd.GeoDataFrame:
    keep: dict[str, Any] = {"paddock": samples["paddock"].astype(str).to_numpy()}
    for v in CHANGE_VARIABLES:
        col = ph_col if v == "ph" else v
        if col and _values(samples, col):
            vals = pd.to_numeric(samples[col], errors="coerce").to_numpy(float)
            if v == "ph" and converted and conversion is not None:
                vals = np.asarray(conversion.apply(vals), dtype=float)
            keep[v] = vals
    return gpd.GeoDataFrame(keep, geometry=samples.geometry.to_numpy(), crs=season.crs)


@dataclass(frozen=True)
class _LayerPair:
    """One sampled layer both seasons have (``layer`` None: samples of one depth), the
    suffix its variables carry (none for the top layer of both) and each season's samples."""

    layer: Layer | None
    suffix: str
    last: gpd.GeoDataFrame
    this: gpd.GeoDataFrame

    @property
    def label(self) -> str | None:
        return None if self.layer is None else self.layer.label


def _layer_pairs(last: Season, this: Season, notes: list[str]) -> list[_LayerPair]:
    """The layers compared: every depth range both seasons sampled (a season of one depth,
    its depth not recorded, is compared with the other's top layer); the layers only one
    season has are named in ``notes``."""
    a, b = last.sampled_layers(), this.sampled_layers()
    if a[0][0] is None or b[0][0] is None:
        for (layer, _), season, other in ((a[0], last, this), (b[0], this, last)):
            if layer is None:
                continue
            deeper = [lay.label for lay, _ in (a if season is last else b)[1:]
                      if lay is not None]
            notes.append(
                f"{season.name}: samples at several depths, {other.name}'s of one depth (not "
                f"recorded): the top layer ({layer.label}) is compared with them"
                + (f"; the deeper ones ({', '.join(deeper)}) are not" if deeper else ""))
        # one season's depth is not known: as before, no layer named on the variables
        return [_LayerPair(None, "", a[0][1], b[0][1])]
    la = [(lay, smp) for lay, smp in a if lay is not None]
    lb = {lay: smp for lay, smp in b if lay is not None}
    common = [(lay, smp) for lay, smp in la if lay in lb]
    only = [f"{lay.label} ({season.label} only)"
            for season, mine, theirs in ((last, [x for x, _ in la], set(lb)),
                                         (this, list(lb), {x for x, _ in la}))
            for lay in mine if lay not in theirs]
    if not common:
        raise SeasonMismatchError(
            f"the seasons sampled no depth in common ({last.name}: "
            f"{', '.join(lay.label for lay, _ in la)}; {this.name}: "
            f"{', '.join(lay.label for lay in lb)}): compare seasons sampled at the same depths")
    if only:
        notes.append("layers sampled in one season only are not compared: " + ", ".join(only))
    top = la[0][0] if la[0][0] == min(lb) else None
    return [_LayerPair(lay, "" if lay == top else lay.suffix, smp, lb[lay])
            for lay, smp in common]


def _krige_season(season: Season, frame: gpd.GeoDataFrame, grids: dict[str, PaddockGrid],
                  variables: list[str], settings: InterpolationSettings,
                  notes: list[str]) -> dict[tuple[str, str], Surface]:
    caught: list[str] = []
    try:
        with record_warnings(caught):
            out = interpolate_farm(frame, grids, variables=variables, settings=settings)
    except InputError as exc:
        raise InputError(f"{season.name}: {exc.problem}", fix=exc.fix) from None
    notes.extend(f"{season.label}: {w}" for w in caught)
    return out


def _pairings(frame_l: gpd.GeoDataFrame, frame_t: gpd.GeoDataFrame,
              grids: dict[str, PaddockGrid], within: float,
              notes: list[str]) -> dict[str, SitePairing]:
    out = {}
    for name in grids:
        a = frame_l[frame_l["paddock"] == name]
        b = frame_t[frame_t["paddock"] == name]
        xy_a = np.column_stack([a.geometry.x, a.geometry.y]) if len(a) else np.empty((0, 2))
        xy_b = np.column_stack([b.geometry.x, b.geometry.y]) if len(b) else np.empty((0, 2))
        p = SitePairing(name, within, pair_sites(xy_a, xy_b, within=within), len(a))
        out[name] = p
        if p.paired and p.n_paired < p.n_this:
            notes.append(f"{name}: {p.n_paired} of this season's {p.n_this} samples are on "
                         f"sites sampled last season (within {within:g} m): the change is "
                         f"kriged from their differences; the other {p.n_this - p.n_paired} "
                         "take no part in it")
        elif not p.paired and p.n_paired:
            notes.append(f"{name}: {p.n_paired} of this season's {p.n_this} samples are on "
                         f"sites sampled last season (within {within:g} m), under "
                         f"{100 * PAIRED_LEAST_SHARE:.0f} %: the seasons are kriged apart and "
                         "their errors taken as independent")
    return out


def _difference_frame(frame_l: gpd.GeoDataFrame, frame_t: gpd.GeoDataFrame,
                      pairings: dict[str, SitePairing],
                      variables: list[str]) -> gpd.GeoDataFrame:
    """Per paired site of a paired paddock: this - last of each variable, at this season's
    site (columns ``<v>_change``)."""
    parts = []
    for name, p in pairings.items():
        if not p.paired:
            continue
        a = frame_l[frame_l["paddock"] == name].reset_index(drop=True)
        b = frame_t[frame_t["paddock"] == name].reset_index(drop=True)
        keep = p.last_index >= 0
        bb, aa = b[keep].reset_index(drop=True), a.iloc[p.last_index[keep]].reset_index(drop=True)
        cols: dict[str, Any] = {"paddock": bb["paddock"].to_numpy()}
        for v in variables:
            # rounded to 1e-9 so that equal changes (6.0 - 5.4 and 5.8 - 5.2) stay equal
            # instead of differing in the last bits of a float, which a variogram would fit
            cols[f"{v}_change"] = np.round(bb[v].to_numpy(float) - aa[v].to_numpy(float), 9)
        parts.append(gpd.GeoDataFrame(cols, geometry=bb.geometry.to_numpy(),
                                      crs=frame_t.crs))
    if not parts:
        return gpd.GeoDataFrame({"paddock": []}, geometry=[], crs=frame_t.crs)
    return gpd.GeoDataFrame(pd.concat(parts, ignore_index=True), crs=frame_t.crs)


def _paired_change(name: str, v: str, a: Surface, b: Surface, d: Surface | None, *,
                   z: float, notes: list[str], label: str,
                   least: int) -> ChangeSurface | None:
    """The change of a paired paddock from its kriged differences, or None where the
    differences cannot make one (no pair with values of both seasons). All differences
    equal at ``least`` sites or more: a flat change with sd 0; at fewer, not judged."""
    if d is None or d.n_samples == 0:
        notes.append(f"{name}, {label}: no paired site has a value in both seasons, so its "
                     "change uses the independent method")
        return None
    std = d.std
    if d.method == "flat" and d.n_samples < least:
        notes.append(f"{name}, {label}: all {d.n_samples} paired differences equal "
                     f"({float(np.nanmax(d.estimate)):g}), fewer than min_samples_kriging = "
                     f"{least}: the change is mapped but not judged against its error")
    elif d.method == "flat":
        # every paired difference alike: they show no spread, so the change has none
        std = np.where(np.isfinite(d.estimate), 0.0, np.nan)
        notes.append(f"{name}, {label}: all {d.n_samples} paired differences equal "
                     f"({float(np.nanmax(d.estimate)):g}): the change is that value and its "
                     "standard deviation 0")
    elif std is None:
        notes.append(f"{name}, {label}: the paired differences have no kriging error "
                     f"({d.method}), so the change is mapped but not judged against its error")
    return paired_change_surface(v, name, a.estimate, b.estimate, (d.estimate, std),
                                 n_pairs=d.n_samples, z=z)


def _changes(grids: dict[str, PaddockGrid], variables: list[str],
             surfaces: tuple[dict[tuple[str, str], Surface], ...], paired: set[str], *,
             z: float, notes: list[str], least: int,
             labels: dict[str, tuple[str, str]]) -> dict[tuple[str, str], ChangeSurface]:
    """Each paddock's change: from the paired differences where its sites are paired,
    else from the two seasons' surfaces with independent errors."""
    surf_l, surf_t, surf_d = surfaces
    changes: dict[tuple[str, str], ChangeSurface] = {}
    for name in grids:
        for v in variables:
            a, b = surf_l[(name, v)], surf_t[(name, v)]
            if name in paired:
                got = _paired_change(name, v, a, b, surf_d.get((name, f"{v}_change")),
                                     z=z, notes=notes, label=labels[v][0], least=least)
                if got is not None:
                    changes[(name, v)] = got
                    continue
            changes[(name, v)] = change_surface(v, name, (a.estimate, a.std),
                                                (b.estimate, b.std), z=z)
            if a.std is None or b.std is None:
                which = [lab for lab, s in (("last season", a), ("this season", b))
                         if s.std is None]
                notes.append(f"{name}, {labels[v][0]}: {' and '.join(which)} "
                             f"{'have' if len(which) > 1 else 'has'} no kriging "
                             f"error ({(a if a.std is None else b).method}), so its change "
                             "is mapped but not judged against its error")
    return changes


_Job = tuple[_LayerPair, gpd.GeoDataFrame, gpd.GeoDataFrame, list[str]]


def _layer_jobs(pairs: list[_LayerPair], seasons: tuple[Season, Season],
                ph_cols: tuple[str, str], converted: str | None,
                conversion: PhConversion | None, *, compare_ph: bool,
                notes: list[str]) -> list[_Job]:
    """Each compared layer's sample values of both seasons and the variables both have
    there (a variable one season lacks at a layer named in ``notes``)."""
    last, this = seasons
    jobs: list[_Job] = []
    for pair in pairs:
        frame_l = _change_frame(last, pair.last, ph_cols[0], conversion, converted == "last")
        frame_t = _change_frame(this, pair.this, ph_cols[1], conversion, converted == "this")
        found = [v for v in CHANGE_VARIABLES if v in frame_l.columns and v in frame_t.columns]
        for v in CHANGE_VARIABLES:
            if (v == "ph" and not compare_ph) or v in found:
                continue
            missing = [s.name for s, f in ((last, frame_l), (this, frame_t))
                       if v not in f.columns]
            at = f" at {pair.label}" if pair.label else ""
            notes.append(f"{CHANGE_VARIABLES[v][0]}: no values{at} in "
                         f"{' and '.join(missing)}, so its change is not mapped")
        if found:
            jobs.append((pair, frame_l, frame_t, found))
    return jobs


def _layer_grids(pair: _LayerPair, seasons: tuple[Season, Season],
                 frames: tuple[gpd.GeoDataFrame, gpd.GeoDataFrame],
                 grids: dict[str, PaddockGrid], notes: list[str]) -> dict[str, PaddockGrid]:
    """The paddocks whose change a layer can give: every paddock for the top layer (one
    unsampled there is refused by the kriging, as before); for a deeper layer, those both
    seasons sampled at it (the others named in ``notes``)."""
    if not pair.suffix:
        return grids
    here = {}
    for name, grid in grids.items():
        lacking = [season.name for season, frame in zip(seasons, frames, strict=True)
                   if not (frame["paddock"] == name).any()]
        if lacking:
            notes.append(f"paddock '{name}' has no samples at {pair.label} in "
                         f"{' and '.join(lacking)}: its {pair.label} change is not mapped")
        else:
            here[name] = grid
    return here


def _compare_layer(
    seasons: tuple[Season, Season], frames: tuple[gpd.GeoDataFrame, gpd.GeoDataFrame],
    grids: dict[str, PaddockGrid], variables: list[str], settings: InterpolationSettings, *,
    labels: dict[str, tuple[str, str]], z: float, paired_within: float, notes: list[str],
    layer: str | None,
) -> tuple[dict[tuple[str, str], ChangeSurface], tuple[dict[tuple[str, str], Surface], ...],
           dict[str, SitePairing]]:
    """One sampled layer's change (variables without the layer's suffix): each season's
    samples kriged, the sites paired, the paired paddocks' differences kriged."""
    last, this = seasons
    frame_l, frame_t = frames
    said: list[str] = []
    surf_l = _krige_season(last, frame_l, grids, variables, settings, said)
    surf_t = _krige_season(this, frame_t, grids, variables, settings, said)
    pairings = _pairings(frame_l, frame_t, grids, paired_within, said)
    diffs = _difference_frame(frame_l, frame_t, pairings, variables)
    paired_grids = {n: g for n, g in grids.items() if pairings[n].paired}
    surf_d: dict[tuple[str, str], Surface] = {}
    if paired_grids:
        surf_d = _krige_season(
            dataclasses.replace(this, label="paired differences"), diffs, paired_grids,
            [f"{v}_change" for v in variables], settings, said)
    changes = _changes(grids, variables, (surf_l, surf_t, surf_d), set(paired_grids),
                       z=z, notes=said, labels=labels, least=settings.min_samples_kriging)
    # each note names its layer once (a change's note names it in the variable's label)
    notes.extend(f"{layer}: {n}" if layer and layer not in n else n for n in said)
    return changes, (surf_l, surf_t, surf_d), pairings


# --------------------------------------------------------------------------- the call


def run_compare(
    last_path: str | Path,
    this_path: str | Path,
    *,
    out_dir: Path,
    ph_conversion: PhConversion | None = None,
    compare_ph: bool = True,
    z: float = Z_BEYOND_ERROR,
    paired_within: float = PAIRED_WITHIN_M,
    overwrite: bool = False,
) -> CompareResult:
    """Compare last season with this one and write the folder.

    Parameters
    ----------
    last_path, this_path
        Each a project (folder or ``geosoil.toml``) or a run's output folder.
        Last season's prescription is read only from an output folder.
    out_dir
        The output folder (created; an existing one only with ``overwrite``).
    ph_conversion
        A stated conversion between pH methods, used only when the seasons
        share no pH method.
    compare_ph
        False leaves pH out (for seasons of different pH methods and no
        conversion).
    z
        Multiple of the change's standard deviation beyond which it counts.
    paired_within
        A sample of this season within this many metres of one of last season's
        is the same site sampled again; a paddock with at least
        :data:`~geosoil.change.PAIRED_LEAST_SHARE` of its samples so paired
        has the change kriged from the per-site differences. 0: always the
        independent method.
    overwrite
        Replace an existing output folder of geosoil's.

    Raises
    ------
    SeasonMismatchError
        The seasons are not the same farm (CRS, no paddock in common, a shared paddock's
        boundaries moved) or their pH methods differ with no conversion stated. Paddocks
        of one season only are left out, with a warning.
    InputError
        A season is neither a project nor an output folder, or misses a file.
    """
    if not (np.isfinite(z) and z > 0):
        raise SettingsError(f"must be above 0 (got {z!r})", key="--z")
    if not (np.isfinite(paired_within) and paired_within >= 0):
        raise SettingsError(f"must be 0 or more metres (got {paired_within!r})",
                            key="--paired-within")
    last = read_season(last_path, label="last season")
    this = read_season(this_path, label="this season")
    left_out = check_same_farm(last, this)
    shared = set(last.paddocks["paddock"].astype(str)) & set(this.paddocks["paddock"].astype(str))
    last, this = _only(last, shared), _only(this, shared)
    notes: list[str] = [*left_out, *(f"last season: {w}" for w in last.warnings),
                        *(f"this season: {w}" for w in this.warnings)]
    pairs = _layer_pairs(last, this, notes)
    if last.soluble_salts != this.soluble_salts:
        notes.append(
            f"[chemistry] soluble_salts is '{last.soluble_salts}' in {last.name} and "
            f"'{this.soluble_salts}' in {this.name}: one season's exchangeable cations have "
            "the soluble salts taken off and the other's not, so the change in ESP and the "
            "saturations mixes that correction with a change of soil; give both the same "
            "setting")
    ph_l = [c for c in PH_METHODS if any(_values(p.last, c) for p in pairs)]
    ph_t = [c for c in PH_METHODS if any(_values(p.this, c) for p in pairs)]
    col_l = col_t = ""
    converted = None
    if compare_ph:
        col_l, col_t, converted = choose_ph(ph_l, ph_t, conversion=ph_conversion,
                                            last_name=last.name, this_name=this.name)
    base_labels = dict(CHANGE_VARIABLES)
    if col_t:
        base_labels["ph"] = (f"pH ({PH_METHODS[col_l if converted == 'this' else col_t]})", "")
    jobs = _layer_jobs(pairs, (last, this), (col_l, col_t), converted, ph_conversion,
                       compare_ph=compare_ph, notes=notes)
    if not jobs:
        raise SeasonMismatchError(
            f"{last.name} and {this.name} share none of ESP, pH, Ca saturation and acidity: "
            "nothing to compare")
    labels: dict[str, tuple[str, str]] = {}
    variables: list[str] = []
    for pair, _, _, found in jobs:
        for v in found:
            variables.append(v + pair.suffix)
            labels[v + pair.suffix] = (
                base_labels[v][0] + (f", {pair.label}" if pair.label else ""), base_labels[v][1])
    settings = dataclasses.replace(this.interpolation, log_transform=(), fixed={})
    grids = this.grids
    inputs = [*last.files, *this.files]
    with output_folder(Path(out_dir), overwrite=overwrite, inputs=inputs) as staging:
        notes.extend(staging.notes)
        changes: dict[tuple[str, str], ChangeSurface] = {}
        merged: tuple[dict[tuple[str, str], Surface], ...] = ({}, {}, {})
        pairings: list[tuple[str | None, dict[str, SitePairing]]] = []
        for pair, frame_l, frame_t, found in jobs:
            here = _layer_grids(pair, (last, this), (frame_l, frame_t), grids, notes)
            if not here:
                continue
            got, surfaces, paired = _compare_layer(
                (last, this), (frame_l, frame_t), here, found, settings,
                labels={v: labels[v + pair.suffix] for v in found}, z=z,
                paired_within=paired_within, notes=notes, layer=pair.label)
            pairings.append((pair.label, paired))
            for (n, v), c in got.items():
                changes[(n, v + pair.suffix)] = dataclasses.replace(
                    c, variable=v + pair.suffix)
            for into, surf in zip(merged, surfaces, strict=True):
                for (n, v), sf in surf.items():
                    base = v.removesuffix("_change")
                    into[(n, base + pair.suffix + v[len(base):])] = sf
        table = zone_change_table(last.zones, grids, changes)
        if last.zones is None:
            notes.append(
                f"{last.name} is a project, not the output folder of its run: there is no "
                "prescription to break the change down by zone; give last season's output "
                "folder to have the change per zone of its prescription")
        written, record = _write(
            staging.temp, last=last, this=this, grids=grids, changes=changes, table=table,
            variables=variables, surfaces=merged, z=z,
            pairings=pairings, layers=[p.label for p, *_ in jobs],
            ph=(col_l, col_t, converted, ph_conversion), notes=notes, labels=labels)
    final = staging.final
    return CompareResult(final, [final / p.relative_to(staging.temp) for p in written],
                         changes, table, record, list(dict.fromkeys(notes)))



# --------------------------------------------------------------------------- writing


def _fmt(value: Any, digits: int = 2) -> str:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return str(value)
    return "–" if not np.isfinite(v) else f"{v:+.{digits}f}" if digits >= 0 else f"{v:g}"


def _paddock_summary(changes: dict[tuple[str, str], ChangeSurface],
                     variables: list[str],
                     labels: dict[str, tuple[str, str]]) -> list[dict[str, Any]]:
    rows = []
    for (name, v), s in changes.items():
        ok = np.isfinite(s.change)
        rows.append({
            "paddock": name, "variable": v, "label": labels[v][0],
            "unit": labels[v][1], "method": s.method, "paired_sites": s.n_pairs,
            "cells": int(ok.sum()),
            # every mean over the same cells, those with a change (as change_by_zone.csv)
            "last_mean": float(np.mean(s.last[ok])) if ok.any() else None,
            "this_mean": float(np.mean(s.this[ok])) if ok.any() else None,
            "change_mean": float(np.mean(s.change[ok])) if ok.any() else None,
            # with paired sites the change is kriged apart: not this - last (PAIRED_CHANGE_NOTE)
            "this_minus_last_mean": float(np.mean(s.this[ok]) - np.mean(s.last[ok]))
            if ok.any() else None,
            "sd_change_mean": float(np.nanmean(s.sd_change))
            if s.sd_change is not None and ok.any() else None,
            **{f"{k.replace(' ', '_')}_pct": round(100 * s.share(k), 2) for k in CLASS_CODES},
        })
    order = {v: i for i, v in enumerate(variables)}
    return sorted(rows, key=lambda r: (list(dict.fromkeys(n for n, _ in changes)).index(
        r["paddock"]), order[r["variable"]]))


def _zone_labels(zones: gpd.GeoDataFrame, table: pd.DataFrame,
                 variables: list[str], labels: dict[str, tuple[str, str]]) -> gpd.GeoDataFrame:
    """Last season's zones with a label of their mean change (what the map's popups show)."""
    z = zones.copy()
    if "kind" in z.columns:
        z = z[z["kind"].astype(str) != "exclusion"]
    texts = []
    for _, r in z.iterrows():
        hit = table[(table["paddock"] == r["paddock"]) & (table["product"] == r["product"])
                    & (table["zone"].astype(str) == str(r["zone"]))]
        parts = []
        if len(hit):
            h = hit.iloc[0]
            for v in variables:
                parts.append(f"{labels[v][0]} {_fmt(h[f'{v}_change_mean'])}")
        texts.append("mean change: " + ", ".join(parts) if parts else "")
    z["label"] = texts
    for col, default in (("kind", "class"), ("area_ha", 0.0)):
        if col not in z.columns:
            z[col] = default
    return z


def _map_page(*, title: str, last: Season, this: Season, grids: dict[str, PaddockGrid],
              changes: dict[tuple[str, str], ChangeSurface], variables: list[str],
              zones: gpd.GeoDataFrame | None, notes: list[str],
              labels: dict[str, tuple[str, str]]) -> str:
    from .grids import mosaic
    from .presentation import CHANGE_CLASSES, change_classes, classes_for
    from .webmap import RasterLayer, SampleField, build_map

    layers = []
    for v in variables:
        label, unit = labels[v]
        pairs = [(grids[n], changes[(n, v)]) for n in grids if (n, v) in changes]
        arr, t = mosaic((g, s.change) for g, s in pairs)
        layers.append(RasterLayer(key=f"{v}_change", title=f"{label}: change", unit=unit,
                                  array=arr, transform=t, crs=this.crs,
                                  classes=change_classes(arr)))
        cls, t = mosaic((g, s.classes) for g, s in pairs)
        layers.append(RasterLayer(key=f"{v}_class", title=f"{label}: changed beyond error?",
                                  unit="", array=cls, transform=t, crs=this.crs,
                                  classes=CHANGE_CLASSES))
        sd_pairs = [(g, s.sd_change) for g, s in pairs if s.sd_change is not None]
        if sd_pairs:
            sd, t = mosaic(sd_pairs)
            layers.append(RasterLayer(key=f"{v}_change_sd", title=f"{label}: change's sd",
                                      unit=unit, array=sd, transform=t, crs=this.crs,
                                      classes=classes_for("error", sd), group="error"))
    cols = [c for c in ("esp", "ca_sat", "acidity", *PH_METHODS) if c]
    frames = []
    for season, tag in ((last, "last"), (this, "this")):
        s = season.samples
        keep = {"sample_id": s["sample_id"].astype(str) if "sample_id" in s.columns
                else pd.Series([""] * len(s)), "paddock": s["paddock"].astype(str),
                "season": tag}
        for c in cols:
            if c in s.columns:
                keep[c] = pd.to_numeric(s[c], errors="coerce").to_numpy()
        frames.append(gpd.GeoDataFrame(pd.DataFrame(keep).reset_index(drop=True),
                                       geometry=s.geometry.to_numpy(), crs=season.crs))
    pts = gpd.GeoDataFrame(pd.concat(frames, ignore_index=True), crs=this.crs)
    fields = [SampleField("season", "season"), SampleField("paddock", "paddock")]
    names = {"esp": ("ESP", "%"), "ca_sat": ("Ca saturation", "%"),
             "acidity": ("acidity", "cmol(+)/kg"), "ph": ("pH (water)", ""),
             "ph_cacl2": ("pH (CaCl2)", ""), "ph_kcl": ("pH (KCl)", "")}
    fields += [SampleField(c, *names[c], digits=2) for c in cols if c in pts.columns]
    zn = zones if zones is not None else gpd.GeoDataFrame(
        {"paddock": [], "product": [], "zone": [], "kind": [], "rate_kg_ha": [],
         "area_ha": []}, geometry=[], crs=this.crs)
    return build_map(title=title, paddocks=this.paddocks, samples=pts, rasters=layers,
                     zones=zn, notes=[*notes], sample_fields=fields,
                     open_surface=f"{variables[0]}_class")


def _write(
    temp: Path, *, last: Season, this: Season, grids: dict[str, PaddockGrid],
    changes: dict[tuple[str, str], ChangeSurface], table: pd.DataFrame, variables: list[str],
    surfaces: tuple[dict[tuple[str, str], Surface], ...],
    z: float, ph: tuple[str, str, str | None, PhConversion | None], notes: list[str],
    labels: dict[str, tuple[str, str]],
    pairings: list[tuple[str | None, dict[str, SitePairing]]], layers: list[str | None],
) -> tuple[list[Path], dict[str, Any]]:
    from .record import now_utc, versions
    from .report import CAUTIONS, ChangeReportInput, build_change_report

    written: list[Path] = []
    for name, grid in grids.items():
        folder = temp / "change" / (slug(name) or "paddock")
        folder.mkdir(parents=True, exist_ok=True)
        for v in variables:
            if (name, v) not in changes:  # a deeper layer not sampled in this paddock
                continue
            s = changes[(name, v)]
            label, unit = labels[v]
            tags = {"variable": v, "unit": unit, "paddock": name}
            written.append(write_cog(folder / f"{v}_change.tif", s.change,
                                     transform=grid.transform, crs=grid.crs,
                                     descriptions=[f"{label} change (this - last)"], tags=tags))
            if s.sd_change is not None:
                written.append(write_cog(folder / f"{v}_change_sd.tif", s.sd_change,
                                         transform=grid.transform, crs=grid.crs,
                                         descriptions=[f"{label} change: standard deviation"],
                                         tags=tags))
            written.append(write_cog(
                folder / f"{v}_change_class.tif", s.classes, transform=grid.transform,
                crs=grid.crs, descriptions=[f"{label} change class"],
                tags={**tags, "codes": "; ".join(f"{c} = {k}" for k, c in CLASS_CODES.items())}))
    out_table = table.copy()
    num = out_table.select_dtypes("number").columns
    out_table[num] = out_table[num].round(4)
    written.append(write_csv(temp / "change_by_zone.csv", out_table))
    col_l, col_t, converted, conversion = ph
    ph_text = None
    if col_l:
        ph_text = (f"pH in {PH_METHODS[col_l]} both seasons" if not converted else
                   f"pH of {'last' if converted == 'last' else 'this'} season converted by the "
                   f"stated '{conversion.text if conversion else ''}' to pH in "
                   f"{PH_METHODS[col_t if converted == 'last' else col_l]}")
    summary = _paddock_summary(changes, variables, labels)
    warnings_all = list(dict.fromkeys(notes))
    farm = this.farm or last.farm or "farm"
    title = f"{farm}: change between seasons"
    zones = _zone_labels(last.zones, table, variables, labels) if last.zones is not None else None
    page = _map_page(title=title, last=last, this=this, grids=grids, changes=changes,
                     variables=variables, zones=zones, labels=labels,
                     notes=["Rates are advisory; a change map says where soil moved, not why.",
                            INDEPENDENCE])
    with atomic_write(temp / "map.html", mode="w") as fh:
        fh.write(page)
    written.append(temp / "map.html")
    seasons = {"last": {"source": str(last.source), "kind": last.kind},
               "this": {"source": str(this.source), "kind": this.kind}}
    report = build_change_report(ChangeReportInput(
        title=title, seasons=seasons, summary=summary, zone_table=table, variables=variables,
        labels={v: labels[v] for v in variables}, z=z, method=METHOD,
        independence=INDEPENDENCE, ph=ph_text, warnings=warnings_all, cautions=CAUTIONS,
        maps=_report_maps(this, grids, changes, variables, labels), version=__version__))
    with atomic_write(temp / "report.html", mode="w") as fh:
        fh.write(report)
    written.append(temp / "report.html")
    record: dict[str, Any] = {
        "kind": "season change",
        "geosoil_version": __version__,
        "created": now_utc(),
        "seasons": seasons,
        "working_crs": {"name": this.crs.name, "epsg": this.crs.to_epsg()},
        "method": METHOD,
        "independence": INDEPENDENCE,
        "methods": dict(METHODS),
        "layers": [lay for lay in layers if lay is not None],
        "pairing": {
            "within_m": next((p.within_m for _, by in pairings for p in by.values()), None),
            "least_share": PAIRED_LEAST_SHARE,
            "paddocks": [{"paddock": p.paddock, "layer": lay, "samples_last": p.n_last,
                          "samples_this": p.n_this, "paired_sites": p.n_paired,
                          "paired_share": round(p.share, 4),
                          "method": "paired sites" if p.paired else "independent"}
                         for lay, by in pairings for p in by.values()]},
        "z": z,
        "ph": ph_text,
        "variables": {v: {"label": labels[v][0], "unit": labels[v][1]}
                      for v in variables},
        "class_codes": CLASS_CODES,
        "prescription": (f"zones_<product> layers of {last.source / 'farm.gpkg'}"
                         if last.zones is not None else None),
        "paddocks": summary,
        "surfaces": [
            {"season": tag, "paddock": n, "variable": v, "method": s.method,
             "n_samples": s.n_samples,
             "variogram": None if s.model is None else {
                 "model": s.model.name, "nugget": s.model.nugget, "psill": s.model.psill,
                 "range_m": s.model.range}}
            for tag, surf in zip(("last", "this", "paired differences"), surfaces,
                                 strict=False)
            for (n, v), s in surf.items()],
        "versions": versions(),
        "warnings": warnings_all,
        "cautions": list(CAUTIONS),
    }
    files = sorted(str(p.relative_to(temp)) for p in written) + ["run.json"]
    record["files"] = files
    written.append(write_json(temp / "run.json", record))
    return written, record


def _report_maps(this: Season, grids: dict[str, PaddockGrid],
                 changes: dict[tuple[str, str], ChangeSurface],
                 variables: list[str],
                 labels: dict[str, tuple[str, str]]) -> list[dict[str, Any]]:
    from markupsafe import Markup

    from .grids import mosaic
    from .presentation import CHANGE_CLASSES, change_classes
    from .report import SoilMap, surface_map_svg

    out: list[dict[str, Any]] = []
    for v in variables:
        label, unit = labels[v]
        pairs = [(grids[n], changes[(n, v)]) for n in grids if (n, v) in changes]
        for what, arr_of, classes_of in (
                ("change", lambda s: s.change, change_classes),
                ("changed beyond its error?", lambda s: s.classes, lambda _a: CHANGE_CLASSES)):
            arr, t = mosaic((g, arr_of(s)) for g, s in pairs)
            classes = classes_of(arr)
            soil = SoilMap(f"{label}: {what}", unit if what == "change" else "", arr, t, classes)
            svg = surface_map_svg(soil, paddocks=this.paddocks, uid=f"{v}-{len(out)}")
            out.append({"title": soil.title, "unit": soil.unit, "svg": Markup(svg),
                        "legend": classes.legend(), "note": classes.note})
    return out
