"""The computing stages of a run: a project in, a computed farm (rates, zones, tonnage) out.

Stages (each a call into one module; this file holds the order and the
bookkeeping, no agronomy, no geostatistics and no output files):

1. read the boundaries and the lab file; choose the working CRS;
2. check and place the samples (paddock join, near-duplicates); per-sample chemistry;
3. check that the enabled rules have the data they need;
4. aligned paddock grids; interpolated surfaces (cached by a hash of their inputs);
5. per-cell chemistry and rates; spreader zones; tonnage;
Writing the output folder is :mod:`geosoil.outputs`; :func:`geosoil.job.run`
does both. Every warning raised on the way is caught by
:func:`geosoil.recording.record_warnings` and ends in ``run.json``, the report and the
CLI summary.
"""

from __future__ import annotations

import contextlib
import dataclasses
import difflib
import functools
import hashlib
import json
import logging
import time
import warnings
from collections.abc import Callable, Collection, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from . import cache as cache_mod
from . import grids as grids_mod
from . import kriging as kriging_mod
from . import model_choice as model_choice_mod
from . import points as points_mod
from . import surfaces as surfaces_mod
from . import variogram as variogram_mod
from .boundaries import (
    BoundarySettings,
    read_exclusions,
    read_paddocks,
    read_user_zones,
    settle_overlaps,
)
from .chemistry import derive, rule_ph
from .covariates import bulk_density_on_grid
from .crs import choose_working_crs
from .errors import (
    DataWarning,
    GeosoilError,
    GeosoilWarning,
    InputError,
    RateWarning,
    SettingsError,
)
from .grids import PaddockGrid, aligned_grids
from .layers import Layer, find_layers, spans
from .names import MAX_NAME_CHARS, assign, slug
from .products import Product, ProductSettings, resolve_products, uncertified
from .project import Project
from .rates import (
    RateLayer,
    RateResult,
    check_inputs,
    compute_rates,
    warn_acid_cells_without_lime,
)
from .record import source_digest
from .recording import record_warnings
from .salinity import derive_cells as salinity_cells
from .salinity import derive_samples as derive_salinity
from .samples import (
    DEPTH_COLUMNS,
    SampleRead,
    prepare_samples,
    read_samples,
    record_keeping,
    record_keeping_message,
)
from .settings import to_mapping
from .spreader import pass_schedule, unsplit_pass_warning
from .surfaces import Surface, derive_cells, interpolate_farm, variables_to_interpolate
from .tonnage import tonnage_table
from .zones import ZONE_COLUMNS, ZoneResult, make_zones

__all__ = [
    "paddock_warnings",
    "Prepared",
    "FarmResult",
    "prepare",
    "compute",
    "check",
    "CACHE_KEEP",
    "PaddockResult",
    "surfaces_for",
    "Interpolator",
    "rule_warnings",
    "LayerSamples",
    "treat_depth_cm",
    "ONE_LAYER",
    "layer_cells",
    "gypsum_layers",
]

logger = logging.getLogger(__name__)

Progress = Callable[[str], None]

#: Makes the surfaces on a cache miss; :func:`geosoil.surfaces.interpolate_farm` has this
#: signature, and a batch passes one that spreads the paddocks over a cluster.
Interpolator = Callable[..., dict[tuple[str, str], Surface]]


def _quiet(_: str) -> None:
    return None


# --------------------------------------------------------------------------- stage 1-4


@dataclass(frozen=True)
class LayerSamples:
    """The samples of one sampled layer (see :mod:`geosoil.layers`)."""

    layer: Layer
    samples: gpd.GeoDataFrame


@dataclass
class Prepared:
    """Inputs read, checked and placed on the working CRS, ready to interpolate."""

    project: Project
    crs: Any
    crs_reason: str
    paddocks: gpd.GeoDataFrame
    exclusions: gpd.GeoDataFrame
    user_zones: gpd.GeoDataFrame | None
    read: SampleRead
    samples: gpd.GeoDataFrame
    grids: dict[str, PaddockGrid]
    variables: list[str]
    products: dict[str, Product]
    rule_notes: list[str]
    warnings: list[str] = field(default_factory=list)
    boundaries_crs: Any = None
    """CRS of the paddock boundaries file as read (before the working CRS)."""
    #: the file (folder) name of each paddock and product: distinct, see :mod:`geosoil.names`
    paddock_files: dict[str, str] = field(default_factory=dict)
    product_files: dict[str, str] = field(default_factory=dict)
    problems: list[str] = field(default_factory=list)
    #: the sampled layers, shallowest first, when the samples are at several depths (the
    #: first one's samples are ``samples``); empty for samples of one depth
    layers: list[LayerSamples] = field(default_factory=list)
    #: what ``[chemistry] soluble_salts`` did to the exchangeable cations (see
    #: :func:`geosoil.chemistry.derive`, ``attrs["soluble_salts"]``)
    soluble_salts: dict[str, Any] = field(default_factory=dict)

    @property
    def all_samples(self) -> gpd.GeoDataFrame:
        """Every layer's samples (``samples`` when there is one layer)."""
        if not self.layers:
            return self.samples
        return gpd.GeoDataFrame(
            pd.concat([ls.samples for ls in self.layers], ignore_index=True), crs=self.crs
        )


#: The label of the one layer of samples of one depth (``[rates.gypsum] treat_depth_cm`` set).
ONE_LAYER = "samples"


def treat_depth_cm(settings: Any) -> float:
    """The depth gypsum treats, cm: ``[rates.gypsum] treat_depth_cm``, else ``[soil] depth_m``."""
    treat = float(settings.rates.gypsum.treat_depth_cm)
    return treat if treat > 0 else round(float(settings.soil.depth_m) * 100.0, 6)


def _split_layers(
    samples: gpd.GeoDataFrame, project: Project, read: SampleRead
) -> tuple[list[LayerSamples], gpd.GeoDataFrame]:
    """The samples of each layer; one layer (or no depth) gives none and the samples as
    they were read (their depth column kept as the lab wrote it)."""
    s = project.settings
    if DEPTH_COLUMNS[0] not in samples.columns:
        layers: list[Layer] = []
    else:
        pairs = list(zip(samples[DEPTH_COLUMNS[0]].astype(float),
                         samples[DEPTH_COLUMNS[1]].astype(float), strict=True))
        try:
            layers = find_layers(pairs)
        except ValueError as exc:
            headers = samples.attrs.get("depth_columns") or [None]
            raise InputError(
                str(exc), file=read.file, column=headers[0],
                fix="give each depth of soil one layer (or set [samples] depths = 'ignore')",
            ) from None
    keys = [layer.key for layer in layers]
    for key in s.soil.bulk_density_by_layer:
        if key not in keys:
            near = difflib.get_close_matches(key, keys, n=1)
            raise SettingsError(
                f"'{key}' is not a layer of the samples"
                + (f"; did you mean '{near[0]}'?" if near else "")
                + (f" (the layers are {', '.join(repr(k) for k in keys)})" if len(keys) > 1
                   else " (the samples are of one depth)"),
                key=f"soil.bulk_density_by_layer.{key}",
            )
    if len(layers) <= 1:
        return [], samples.drop(columns=[c for c in DEPTH_COLUMNS if c in samples.columns])
    top = samples[DEPTH_COLUMNS[0]].astype(float).to_numpy()
    bottom = samples[DEPTH_COLUMNS[1]].astype(float).to_numpy()
    out = []
    for layer in layers:
        here = (top == layer.top_cm) & (bottom == layer.bottom_cm)
        part = samples[here].copy()
        part.insert(2, "layer", layer.label)
        out.append(LayerSamples(layer, gpd.GeoDataFrame(part.reset_index(drop=True),
                                                        crs=samples.crs)))
    treat = treat_depth_cm(s)
    parts = [f"{sp.layer.label} over {sp.from_cm:g}-{sp.to_cm:g} cm"
             for sp in spans(layers, treat_cm=treat)]
    warnings.warn(
        f"samples at {len(layers)} depths are mapped as separate layers ("
        + ", ".join(f"{ls.layer.label}: {len(ls.samples)} samples" for ls in out)
        + f"); gypsum treats 0-{treat:g} cm ([rates.gypsum] treat_depth_cm), the sum of "
        "each layer's requirement over the soil it stands for (" + "; ".join(parts)
        + f"); lime, calcium and the other rules read the top layer ({layers[0].label}) "
        f"over [soil] depth_m = {s.soil.depth_m:g} m, as lime methods are calibrated on "
        "topsoil samples"
        + "".join(f"; the {layer.label} layer is mapped but lies below the treated depth "
                  "(set [rates.gypsum] treat_depth_cm to treat it)"
                  for layer in layers if layer.top_cm >= treat),
        DataWarning, stacklevel=3,
    )
    _warn_spans(layers, treat)
    return out, out[0].samples


def _warn_spans(layers: list[Layer], treat: float, where: str = "") -> None:
    """Say where a layer stands for soil that was not sampled in it."""
    for sp in spans(layers, treat_cm=treat):
        lay = sp.layer
        if sp.to_cm > lay.bottom_cm and sp.layer == max(layers):
            warnings.warn(
                f"{where}the treated depth ({treat:g} cm) goes below the deepest layer sampled"
                f" ({lay.label}): the gypsum requirement takes that layer's chemistry down to "
                f"{sp.to_cm:g} cm; sample deeper, or set [rates.gypsum] treat_depth_cm",
                DataWarning, stacklevel=3,
            )
        elif sp.to_cm > lay.bottom_cm:
            warnings.warn(
                f"{where}the soil from {lay.bottom_cm:g} to {sp.to_cm:g} cm was not sampled: "
                f"the {lay.label} layer stands for it in the gypsum requirement",
                DataWarning, stacklevel=3,
            )
        if sp.from_cm < lay.top_cm:
            warnings.warn(
                f"{where}the soil above the top layer ({lay.label}) was not sampled: that "
                "layer stands for it in the gypsum requirement",
                DataWarning, stacklevel=3,
            )


def _check_paddock_keys(
    table: dict[str, Any], paddocks: gpd.GeoDataFrame, *, key: str, file: Path
) -> None:
    """Refuse a setting keyed by paddock name that names no paddock (a typo would leave
    the paddock on the default value without a word)."""
    names = [str(n) for n in paddocks["paddock"]]
    for name in table:
        if name not in names:
            near = difflib.get_close_matches(name, names, n=1)
            hint = f"did you mean '{near[0]}'? " if near else ""
            raise SettingsError(
                f"'{name}' is not a paddock in {file}; {hint}the paddocks are "
                f"{', '.join(repr(n) for n in names)}",
                key=f"{key}.{name}",
            )


def prepare(
    project: Project, *, progress: Progress = _quiet, undecided: str = "stop",
    listing: bool = False,
) -> Prepared:
    """Stages 1-4 without interpolation: read, check and place everything.

    Parameters
    ----------
    project : Project
        The loaded project.
    progress : callable, optional
        Called with a short message at each stage.
    undecided : {"stop", "keep"}, optional
        A lab column whose meaning its header leaves open (see
        :func:`geosoil.samples.read_samples`): "stop" raises, "keep" lists it in
        ``prep.read.undecided`` (what ``check`` does, to list every problem).
    listing : bool, optional
        True (``check``): a problem that does not stop the other checks (an
        exclusion, zone or covariate file that cannot be used, samples closer than
        the duplicate distance, a rule or product setting that does not fit the
        data) goes into ``prep.problems`` and the checks go on; False (a run):
        the first one raises.

    Returns
    -------
    Prepared
        The checked samples, paddocks, grids, products and settings.

    Raises
    ------
    GeosoilError
        The first input or settings problem found, naming file, row, column or key.
    """
    s = project.settings
    sink: list[str] = []
    problems: list[str] = []

    def attempt(fn: Callable[..., Any], *args: Any, fallback: Any = None, **kw: Any) -> Any:
        if not listing:
            return fn(*args, **kw)
        try:
            return fn(*args, **kw)
        except GeosoilError as exc:
            problems.append(str(exc))
            return fallback

    with record_warnings(sink):
        progress("reading boundaries")
        product_files = _file_names(
            list(s.products), what="product", mode=s.output.name_clashes,
            refuse=lambda msg: SettingsError(msg, key="products"),
            rename="rename the product's table in the project file",
        )
        paddocks = read_paddocks(s.boundaries)
        paddock_files = _file_names(
            [str(n) for n in paddocks["paddock"]], what="paddock", mode=s.output.name_clashes,
            refuse=lambda msg: InputError(msg, file=s.boundaries.paddocks),
            rename=f"rename the paddock in {s.boundaries.paddocks}",
        )
        _check_paddock_keys(s.soil.bulk_density_by_paddock, paddocks,
                            key="soil.bulk_density_by_paddock", file=s.boundaries.paddocks)
        progress("reading samples")
        read = read_samples(s.samples, undecided=undecided)
        samples = read.samples
        lonlat = paddocks.geometry.to_crs("EPSG:4326").total_bounds
        if lonlat[2] - lonlat[0] > 180.0:
            raise InputError(
                f"the paddocks straddle the antimeridian (180 degrees longitude: they reach "
                f"from {lonlat[0]:.4f} to {lonlat[2]:.4f}); geosoil cannot place one farm "
                "across it on one map grid",
                file=s.boundaries.paddocks,
                fix="split the project in two: the paddocks east of 180 degrees and those west",
            )
        crs, reason = choose_working_crs(
            candidates=[c for c in (paddocks.crs, samples.crs) if c is not None],
            lonlat_bounds=(
                float(lonlat[0]), float(lonlat[1]), float(lonlat[2]), float(lonlat[3])
            ),
        )
        boundaries_crs = paddocks.crs
        paddocks = paddocks.to_crs(crs)
        # overlaps in square metres of the working CRS: refused, or each counted once
        paddocks = attempt(settle_overlaps, paddocks, mode=s.boundaries.overlaps,
                           file=s.boundaries.paddocks, fallback=paddocks)
        exclusions = attempt(read_exclusions, s.boundaries, crs=crs,
                             fallback=gpd.GeoDataFrame(geometry=[], crs=crs))
        user_zones = None
        if s.boundaries.zones is not None:
            user_zones = attempt(
                read_user_zones, s.boundaries.zones, crs=crs,
                id_column=s.boundaries.zone_id_column,
                duplicate_names=s.boundaries.duplicate_names,
            )
        _warn_outside_paddocks(paddocks, exclusions, user_zones, s.boundaries)
        samples = prepare_samples(
            samples, paddocks=paddocks, working_crs=crs, settings=s.samples, file=str(read.file),
            duplicates_found=problems if listing else None,
        )
        samples = derive(
            samples, s.chemistry, file=read.file, headers=read.columns,
            on_bad_row=s.samples.on_bad_row,
            solution_headers=read.samples.attrs.get("solution_columns"),
        )
        soluble_salts = dict(samples.attrs.get("soluble_salts") or {})
        samples = derive_salinity(samples, s.salinity)
        layers, samples = _split_layers(samples, project, read)
        _warn_unsampled_layers(layers, paddocks, project)
        _warn_single_samples(samples, paddocks)
        variables = variables_to_interpolate(samples)
        products = resolve_products(s.products)
        progress("building grids")
        excl_union = None if exclusions.empty else shapely.union_all(exclusions.geometry.values)
        grids = aligned_grids(paddocks, cell_size_m=s.grid.cell_size_m, exclusions=excl_union)
        # which rules each paddock's samples let run: a rule that is enabled but cannot run
        # on a paddock is a warning here (check) as in the run (the same words); a rule
        # switched on that cannot run, or a product that does not fit, is a problem
        skipped: dict[str, list[tuple[str, str]]] = {}
        other: list[str] = []
        for name in grids:
            have = _paddock_variables(samples, name, variables,
                                      borrow=s.interpolation.borrow_farm_surface)
            have |= _derivable(sorted(have))
            method, _ = rule_ph({v: v for v in have})
            if method is not None:
                have = (have - {"ph_cacl2"}) | {"ph"}
            rates = s.rates.for_paddock(name)
            said = attempt(check_inputs, rates, have, products, ph_method=method,
                           fallback=False)
            if said is False:
                break  # the same setting would fail on every paddock: named once
            # check_inputs' reasons (with what to ask the lab for where no lime method can
            # run); other notes once each
            skipped[name] = [tuple(n.split(" rule skipped: ", 1)) for n in said  # type: ignore
                             if " rule skipped: " in n]
            other.extend(n for n in said if " rule skipped: " not in n and n not in other)
        rule_notes = rule_warnings(skipped, s.rates) + other
        # a covariate raster is opened and checked against every paddock before kriging
        if s.soil.bulk_density_raster is not None:
            for name, grid in grids.items():
                got = attempt(bulk_density_on_grid, s.soil.bulk_density_raster, grid,
                              fallback_g_cm3=float(s.soil.bulk_density_for(name)),
                              fallback=False)
                if got is False:
                    break
    return Prepared(
        project=project, crs=crs, crs_reason=reason, paddocks=paddocks, exclusions=exclusions,
        user_zones=user_zones, read=read, samples=samples, grids=grids, variables=variables,
        products=products, rule_notes=list(rule_notes), warnings=sink, problems=problems,
        boundaries_crs=boundaries_crs,
        paddock_files=paddock_files, product_files=product_files, layers=layers,
        soluble_salts=soluble_salts,
    )


#: Area of a user zone outside every paddock that is said (a digitising sliver along a
#: shared boundary is less): at least this much and at least OUTSIDE_SHARE of the zone.
#: Our choice (a sliver of a few cells).
OUTSIDE_LEAST_HA = 0.05
OUTSIDE_SHARE = 0.01


def _warn_outside_paddocks(
    paddocks: gpd.GeoDataFrame, exclusions: gpd.GeoDataFrame | None,
    user_zones: gpd.GeoDataFrame | None, settings: BoundarySettings,
) -> None:
    """A warning for each exclusion area that lies outside every paddock (it excludes
    nothing: the paddock it was drawn for was removed or redrawn) and each user zone with
    part of it outside every paddock (that part gets no rate), naming it and the area
    outside. Creek lines are left alone (a creek runs on past the paddocks). Areas in
    hectares of the working CRS (metres)."""
    if paddocks.empty:
        return
    farm = shapely.union_all(paddocks.geometry.values)
    if exclusions is not None and not exclusions.empty:
        areas = exclusions[exclusions["kind"] == "area"]
        for name, g in zip(areas["exclusion"], areas.geometry, strict=True):
            if g is None or g.is_empty or g.intersection(farm).area > 0.0:
                continue
            warnings.warn(
                f"{settings.exclusions}: exclusion '{name}' ({g.area / 1e4:.2f} ha) lies "
                "outside every paddock, so it excludes nothing: was its paddock removed or "
                "redrawn? Remove it from the file, or correct the paddock boundaries",
                DataWarning, stacklevel=3,
            )
    if user_zones is not None and not user_zones.empty:
        for name, g in zip(user_zones["zone"], user_zones.geometry, strict=True):
            if g is None or g.is_empty:
                continue
            outside = g.difference(farm).area
            if outside / 1e4 < OUTSIDE_LEAST_HA or outside < OUTSIDE_SHARE * g.area:
                continue
            share = outside / g.area
            what = ("lies outside every paddock: it gets no rate" if share > 0.999 else
                    f"has {outside / 1e4:.2f} ha ({share:.0%}) outside every paddock: that "
                    "part gets no rate")
            warnings.warn(
                f"{settings.zones}: zone '{name}' ({g.area / 1e4:.2f} ha) {what}; was a "
                "paddock removed or redrawn? Correct the zones or the paddock boundaries",
                DataWarning, stacklevel=3,
            )


@contextlib.contextmanager
def paddock_warnings(name: str) -> Iterator[None]:
    """Raise again every geosoil warning of the block with ``paddock 'NAME': `` in front (once
    each), so that a warning of the rates, which see only arrays, says which paddock it is
    about; other warnings (a library's, a developer's) go on as they were.

    >>> from geosoil.recording import record_warnings
    >>> found = []
    >>> with record_warnings(found), paddock_warnings("Red Hill"):
    ...     warnings.warn("pH guard withheld liming products on 3 cell(s)", RateWarning)
    >>> found
    ["paddock 'Red Hill': pH guard withheld liming products on 3 cell(s)"]
    """
    prefix = f"paddock '{name}'"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        yield
    seen: set[tuple[str, type[Warning], str, int]] = set()
    for w in caught:
        key = (str(w.message), w.category, w.filename, w.lineno)
        if key in seen:
            continue
        seen.add(key)
        if not issubclass(w.category, GeosoilWarning):  # a library's or a developer's: as is
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
            continue
        text = str(w.message)
        if not text.startswith((prefix, f"{name}:")):
            text = f"{prefix}: {text}"
        warnings.warn_explicit(text, w.category, w.filename, w.lineno)


def _warn_single_samples(samples: gpd.GeoDataFrame, paddocks: gpd.GeoDataFrame) -> None:
    """Say, where check and run show it, that a paddock with one sample gets one flat value."""
    counts = samples["paddock"].value_counts() if "paddock" in samples.columns else {}
    for name in paddocks["paddock"]:
        if int(counts.get(name, 0)) == 1:
            warnings.warn(
                f"paddock '{name}' has one sample: every surface there is flat at that "
                "sample's values, so the whole paddock gets one rate; sample it more densely "
                "for a map of its variation",
                DataWarning, stacklevel=3,
            )


def _file_names(names: list[str], *, what: str, mode: str,
                refuse: Callable[[str], GeosoilError], rename: str) -> dict[str, str]:
    """Distinct file names for ``names`` (paddocks or products), checked before anything is
    computed: names too long, names making the same file name and names without a letter or
    digit are refused (or, with ``[output] name_clashes = "suffix"``, given the distinct
    names :func:`geosoil.names.assign` chose, with a warning saying which went where)."""
    too_long = [n for n in names if len(n) > MAX_NAME_CHARS]
    if too_long:
        shown = ", ".join(f"'{n[:40]}...' ({len(n)} characters)" for n in too_long[:3])
        raise refuse(
            f"{what} name(s) longer than {MAX_NAME_CHARS} characters: {shown}; a {what} name "
            f"names folders, files and shapefile fields. Fix: {rename} (at most "
            f"{MAX_NAME_CHARS} characters)"
        )
    got = assign(names, fallback=what)
    if got.ok:
        return got.files
    problems = []
    for file_name, members in got.clashes:
        quoted = ", ".join(repr(m) for m in members[:-1]) + f" and {members[-1]!r}"
        problems.append(f"{what}s {quoted} would all be written as '{file_name}' (file names "
                        "ignore case, spaces and signs)")
    for name in got.empty:
        problems.append(f"{what} {name!r} has no letter or digit to name its files")
    if mode == "refuse":
        suffixed = ", ".join(f"{n!r} as '{got.files[n]}'" for n in names
                             if got.files[n] != slug(n))
        raise refuse(
            "; ".join(problems) + f". Fix: {rename} so that each {what} has its own name, "
            f'or set [output] name_clashes = "suffix" to write {suffixed}'
        )
    for n in names:
        if got.files[n] != slug(n):
            warnings.warn(
                f"{what} {n!r} is written as '{got.files[n]}' ([output] name_clashes = "
                f'"suffix"): ' + "; ".join(p for p in problems if repr(n) in p),
                DataWarning, stacklevel=2,
            )
    return got.files
def _paddock_variables(
    samples: gpd.GeoDataFrame, name: str, variables: list[str], *, borrow: bool
) -> set[str]:
    """The variables a paddock's surfaces will hold (the farm's for a borrowed paddock)."""
    pts = samples[samples["paddock"] == name] if "paddock" in samples.columns else samples
    if pts.empty and borrow:
        pts = samples
    have = {v for v in variables if v in pts.columns and pts[v].notna().any()}
    # a sample whose acidity was not measured has one all the same where its pH is neutral
    # or above (0, common practice) or its lab gave Al or H: so do the cells that the run
    # derives from the kriged pH, Al and H (chemistry.exchange_chemistry), and the rules
    # that read acidity run on them
    if "acidity_basis" in pts.columns and (pts["acidity_basis"].astype(str) != "none").any():
        have.add("acidity")
    return have


def _rows_text(rows: list[int]) -> str:
    """Row numbers as ranges: 2-26, 30, 41-42."""
    out: list[str] = []
    for r in sorted(rows):
        if out and "-" in out[-1] and int(out[-1].split("-")[1]) == r - 1:
            out[-1] = f"{out[-1].split('-')[0]}-{r}"
        elif out and "-" not in out[-1] and int(out[-1]) == r - 1:
            out[-1] = f"{out[-1]}-{r}"
        else:
            out.append(str(r))
    return ", ".join(out)


def _grouped_gaps(
    file: Any, gaps: list[tuple[int | None, str]], *, undecided: list[str]
) -> list[str]:
    """The samples whose ECEC cannot be formed, one problem per cause (rows listed).

    Many samples share one cause (a column the lab left out, or one ``check`` asks about
    first): each sample on its own line would bury the cause.
    """
    by_cause: dict[str, list[tuple[int | None, str]]] = {}
    for row, reason in gaps:
        cause = reason.split("': ", 1)[1] if reason.startswith("sample '") else reason
        by_cause.setdefault(cause, []).append((row, reason))
    out: list[str] = []
    for cause, items in by_cause.items():
        rows = [r for r, _ in items if r is not None]
        if len(items) < 4 or len(rows) < len(items):
            out.extend(f"{file}, row {r}: {why}" if r is not None else f"{file}: {why}"
                       for r, why in items)
            continue
        after = (f" (it follows from column '{undecided[0]}' above)"
                 if undecided and "acidity" in cause else "")
        cause = cause.replace("which this sample lacks", "which these samples lack")
        out.append(f"{file}, rows {_rows_text(rows)} ({len(items)} samples): {cause}{after}")
    return out


def rule_warnings(
    skipped: dict[str, list[tuple[str, str]]], settings: Any
) -> list[str]:
    """One warning per rule that is enabled but cannot run, naming the paddocks and why.

    Parameters
    ----------
    skipped : dict
        Paddock -> ``(rule, reason)`` of each rule skipped there (from
        :func:`geosoil.rates.plan_rules` or a :class:`~geosoil.rates.RateResult`).
    settings : RateSettings
        The rate settings (for the lime methods the data would allow).

    Returns
    -------
    list of str
        Warnings, in rule order.
    """
    by_reason: dict[tuple[str, str], list[str]] = {}
    for name, pairs in skipped.items():
        for rule, reason in pairs:
            by_reason.setdefault((rule, reason), []).append(name)
    out = []
    for (rule, reason), names in by_reason.items():
        where = ("every paddock" if len(names) == len(skipped) and len(names) > 1
                 else "paddock " + ", ".join(f"'{n}'" for n in names))
        key = "rates.lime.method" if rule == "lime" else f"rates.{rule}.enabled"
        out.append(f"{rule} rule is enabled but cannot run on {where}: {reason} (set {key}, "
                   "or give the samples it needs)")
    return out


def _derivable(variables: list[str]) -> set[str]:
    """Cell quantities that follow from the interpolated ones."""
    have = set(variables)
    out: set[str] = set()
    if {"ca", "mg", "k", "na"} <= have or "cec" in have:
        out |= {"ecec"}
        out |= {f"{p}_sat" for p in ("ca", "mg", "k", "na") if p in have}
        if "na" in have or "esp" in have:
            out |= {"esp", "na_sat", "na"}
        if "acidity" in have:
            out.add("acid_sat")
        if "al" in have:
            out.add("al_sat")
    return out


# --------------------------------------------------------------------------- surfaces cache


def _surface_key(prep: Prepared) -> str:
    s = prep.project.settings
    h = hashlib.sha256(b"surfaces\n")
    # the code that makes surfaces is part of the key: a changed engine never reuses old results
    h.update(source_digest(*(m.__file__ for m in (surfaces_mod, kriging_mod, model_choice_mod,
                                                  variogram_mod, points_mod, grids_mod))
                           ).encode())
    cols = ["paddock", *prep.variables]
    table = prep.samples[cols].copy()
    table["x"] = prep.samples.geometry.x.round(6)
    table["y"] = prep.samples.geometry.y.round(6)
    h.update(table.to_csv(index=False).encode())
    for ls in prep.layers[1:]:
        h.update(f"layer {ls.layer.label}\n".encode())
        lcols = ["paddock", *variables_to_interpolate(ls.samples)]
        lt = ls.samples[lcols].copy()
        lt["x"] = ls.samples.geometry.x.round(6)
        lt["y"] = ls.samples.geometry.y.round(6)
        h.update(lt.to_csv(index=False).encode())
    h.update(json.dumps(to_mapping(s.interpolation), sort_keys=True).encode())
    h.update(prep.crs.to_wkt().encode())
    for name in sorted(prep.grids):
        g = prep.grids[name]
        h.update(name.encode())
        h.update(repr(tuple(g.transform)).encode())
        h.update(np.packbits(g.mask).tobytes())
        h.update(repr(g.mask.shape).encode())
    if prep.user_zones is not None:
        for g in prep.user_zones.geometry:
            h.update(shapely.to_wkb(g))
    return h.hexdigest()


def _cache_dir(prep: Prepared) -> Path:
    configured = prep.project.settings.output.cache_dir
    if configured is not None:
        return Path(configured)
    return cache_mod.default_folder()


def surfaces_for(
    prep: Prepared,
    *,
    progress: Progress = _quiet,
    use_cache: bool = True,
    interpolate: Interpolator | None = None,
    fill_cache: bool = True,
) -> tuple[dict[tuple[str, str], Surface], bool]:
    """Interpolated surfaces, from the cache when their inputs are unchanged.

    The warnings the interpolation raised (fallbacks to inverse-distance
    weighting, zone values...) are kept with the surfaces and recorded again on
    a cache hit, so a re-run reports what the first run did. The cache holds
    arrays and JSON only (:mod:`geosoil.cache`); an entry that fails its checks
    is not used: the surfaces are computed again and a note says so.

    Parameters
    ----------
    prep : Prepared
        The checked inputs from :func:`prepare`.
    progress : callable, optional
        Called with a short message at each stage.
    use_cache : bool, optional
        False interpolates again even when the inputs are unchanged.
    interpolate : callable, optional
        What makes the surfaces on a cache miss, called like
        :func:`geosoil.surfaces.interpolate_farm` (None, the default, calls it).
    fill_cache : bool, optional
        False reads the cache but changes nothing in it (``check`` writes nothing).

    Returns
    -------
    surfaces : dict of (paddock, variable) to Surface
        Every interpolated surface.
    from_cache : bool
        True when the surfaces came from the cache.
    """
    key = _surface_key(prep)
    folder = _cache_dir(prep)
    if use_cache:
        shapes = {name: g.mask.shape for name, g in prep.grids.items()}
        try:
            stored = cache_mod.load(folder, key, shapes=shapes, touch=fill_cache)
        except cache_mod.CacheEntryError as exc:
            stored = None
            note = (f"the cached surfaces {cache_mod.entry_paths(folder, key)[1]} failed their "
                    f"check ({exc}); nothing of them was used, the surfaces were computed "
                    "again" + (" and the entry replaced" if fill_cache else ""))
            progress(note)
            prep.warnings.append(note)
            if fill_cache:
                with contextlib.suppress(OSError):
                    cache_mod.discard(folder, key)
        if stored is not None:
            progress("surfaces: unchanged inputs, taken from the cache")
            prep.warnings.extend(w for w in stored[1] if w not in prep.warnings)
            return stored[0], True
    found: list[str] = []
    with record_warnings(found):
        surfaces = (interpolate or interpolate_farm)(
            prep.samples,
            prep.grids,
            variables=prep.variables,
            settings=prep.project.settings.interpolation,
            user_zones=prep.user_zones,
            progress=progress,
        )
    if prep.layers:
        surfaces = {**surfaces, **_layer_surfaces(prep, progress, found)}
    prep.warnings.extend(w for w in found if w not in prep.warnings)
    if use_cache and fill_cache:
        try:
            cache_mod.save(folder, key, surfaces, found)
            cache_mod.prune(folder, keep=CACHE_KEEP)
        except OSError as exc:
            logger.info("could not write the surface cache in %s (%s)", folder, exc)
    return surfaces, False


#: How many cached surface sets the cache folder keeps (the most recently used).
CACHE_KEEP = 24


def _layer_surfaces(prep: Prepared, progress: Progress, found: list[str]
                    ) -> dict[tuple[str, str], Surface]:
    """The deeper layers' surfaces, each variable named with its layer's suffix
    (``esp_10-30cm``), over the paddocks sampled at that depth (every paddock with
    ``borrow_farm_surface``). Their warnings name the layer."""
    s = prep.project.settings
    out: dict[tuple[str, str], Surface] = {}
    for ls in prep.layers[1:]:
        sampled = set(ls.samples["paddock"])
        grids = {n: g for n, g in prep.grids.items()
                 if n in sampled or s.interpolation.borrow_farm_surface}
        raised: list[str] = []
        label = ls.layer.label

        def told(message: str, label: str = label) -> None:
            progress(f"{message} ({label})")

        with record_warnings(raised):
            got = interpolate_farm(
                ls.samples, grids, variables=variables_to_interpolate(ls.samples),
                settings=s.interpolation, user_zones=prep.user_zones, progress=told,
            )
        found.extend(f"{ls.layer.label} layer: {w}" for w in raised
                     if f"{ls.layer.label} layer: {w}" not in found)
        for (pad, var), sf in got.items():
            name = var + ls.layer.suffix
            out[(pad, name)] = dataclasses.replace(sf, variable=name)
    return out


def _no_esp_text(name: str, missing: list[Layer]) -> str:
    """The warning for a paddock without ESP at layers the gypsum treatment spans (the same
    words in check, from the samples, and in the run, from the cells)."""
    return (f"paddock '{name}' has no ESP at " + ", ".join(m.label for m in missing)
            + ": the layer above stands for that soil in the gypsum requirement; sample it "
            "at that depth")


def _warn_unsampled_layers(layers: list[LayerSamples], paddocks: gpd.GeoDataFrame,
                           project: Project) -> None:
    """Before any kriging (so that check says it too): each paddock without samples giving
    ESP at a deeper layer the gypsum treatment spans."""
    s = project.settings
    if not layers or s.interpolation.borrow_farm_surface:
        return
    treat = treat_depth_cm(s)
    for name in paddocks["paddock"]:
        missing = []
        for ls in layers[1:]:
            here = ls.samples[ls.samples["paddock"] == name]
            if ls.layer.top_cm < treat and not ("esp" in here.columns
                                                and here["esp"].notna().any()):
                missing.append(ls.layer)
        if missing:
            warnings.warn(_no_esp_text(str(name), missing), DataWarning, stacklevel=3)


def layer_cells(
    prep: Prepared, surfaces: dict[tuple[str, str], Surface], name: str
) -> tuple[list[tuple[Layer, dict[str, np.ndarray]]], list[str]]:
    """Each deeper layer's cell chemistry in paddock ``name`` (derived by the same rules
    as the top layer's, names without the suffix), and their notes; a layer not
    sampled in the paddock is left out."""
    s = prep.project.settings
    out: list[tuple[Layer, dict[str, np.ndarray]]] = []
    notes: list[str] = []
    for ls in prep.layers[1:]:
        suffix = ls.layer.suffix
        est = {k[1][: -len(suffix)]: sf.estimate for k, sf in surfaces.items()
               if k[0] == name and k[1].endswith(suffix)}
        if not est:
            continue
        cells, cnotes = derive_cells(est, s.chemistry)
        cells.update(salinity_cells(cells, s.salinity))
        out.append((ls.layer, cells))
        notes.extend(f"{ls.layer.label} layer: {n}" for n in cnotes)
    return out, notes


def gypsum_layers(
    prep: Prepared, name: str, top_cells: dict[str, np.ndarray],
    deeper: list[tuple[Layer, dict[str, np.ndarray]]], bd: float | np.ndarray,
) -> list[RateLayer]:
    """The layers paddock ``name``'s gypsum treatment spans, with their thickness and
    bulk density; a layer without ESP here is left to the layer above it (with a warning)."""
    s = prep.project.settings
    treat = treat_depth_cm(s)
    have: list[tuple[Layer, dict[str, np.ndarray]]] = [(prep.layers[0].layer, top_cells)]
    for layer, cells in deeper:
        if "esp" in cells and "ecec" in cells and np.isfinite(cells["esp"]).any():
            have.append((layer, cells))
    missing = [ls.layer for ls in prep.layers[1:]
               if ls.layer not in [h[0] for h in have]]
    by_layer = dict(have)
    chosen = spans([h[0] for h in have], treat_cm=treat)
    if missing and any(m.top_cm < treat for m in missing):
        warnings.warn(_no_esp_text(name, [m for m in missing if m.top_cm < treat]),
                      DataWarning, stacklevel=2)
    out = []
    for sp in chosen:
        cells = by_layer[sp.layer]
        layer_bd: float | np.ndarray = bd
        if sp.layer != prep.layers[0].layer:
            layer_bd = s.soil.bulk_density_by_layer.get(sp.layer.key, bd)
        out.append(RateLayer(sp.layer.label, cells.get("esp", np.nan),
                             cells.get("ecec", np.nan), sp.thickness_m, layer_bd))
    return out


# --------------------------------------------------------------------------- stage 5


@dataclass
class PaddockResult:
    """Everything computed for one paddock."""

    name: str
    grid: PaddockGrid
    cells: dict[str, np.ndarray]
    cell_notes: list[str]
    rates: RateResult
    zones: gpd.GeoDataFrame
    zone_notes: list[str]
    #: the deeper layers' cell chemistry (samples at several depths), shallowest first
    layers: list[tuple[Layer, dict[str, np.ndarray]]] = field(default_factory=list)
    #: the layers the gypsum treatment spans here: (label, from cm, to cm, bulk density)
    gypsum_spans: list[tuple[str, float, float, Any]] = field(default_factory=list)


@dataclass
class FarmResult:
    """Stages 1-5: every number of the job, nothing written yet."""

    prep: Prepared
    surfaces: dict[tuple[str, str], Surface]
    cache_hit: bool
    paddocks: dict[str, PaddockResult]
    zones: gpd.GeoDataFrame
    tonnage: pd.DataFrame
    timings: dict[str, float]
    rule_notes: list[str] = field(default_factory=list)
    cpu_timings: dict[str, float] = field(default_factory=dict)
    """CPU seconds (all threads of the process) of each stage of ``timings``."""

    @property
    def warnings(self) -> list[str]:
        """The run's one list of warnings: what reading, interpolating, computing and
        writing raised (the pure-material product defaults among them) and each enabled rule
        that could not run on a paddock. The CLI summary, ``run.json`` and the report all
        show this list (the report shows each paddock's notes on its cells, rates and zones
        apart)."""
        return list(dict.fromkeys([*self.prep.warnings, *self.rule_notes]))


def compute(
    project: Project,
    *,
    progress: Progress = _quiet,
    use_cache: bool = True,
    prepared: Prepared | None = None,
    interpolate: Interpolator | None = None,
    paddocks: Collection[str] | None = None,
    fill_cache: bool = True,
) -> FarmResult:
    """Stages 1-5: read, interpolate, compute rates, zones and tonnage.

    Parameters
    ----------
    project : Project
        The loaded project.
    progress : callable, optional
        Called with a short message at each stage.
    use_cache : bool, optional
        False interpolates again even when the inputs are unchanged.
    prepared : Prepared, optional
        The result of :func:`prepare` for ``project`` when the caller has it already.
    interpolate : callable, optional
        What makes the surfaces on a cache miss (see :func:`surfaces_for`).
    paddocks : collection of str, optional
        Compute rates, zones and tonnage for these paddocks only (``explain``
        needs one); default every paddock. Surfaces are always made (or taken
        from the cache) for the whole farm.
    fill_cache : bool, optional
        False reads the surface and zones caches but changes nothing in them
        (``check``, which writes nothing).

    Returns
    -------
    FarmResult
        Surfaces, rates, zones and tonnage of every paddock asked for, with the
        warnings.

    Raises
    ------
    GeosoilError
        Any input or settings problem.
    """
    timings: dict[str, float] = {}
    cpu: dict[str, float] = {}
    t0, c0 = time.perf_counter(), time.process_time()
    prep = prepare(project, progress=progress) if prepared is None else prepared
    timings["read and check"] = time.perf_counter() - t0
    cpu["read and check"] = time.process_time() - c0
    t0, c0 = time.perf_counter(), time.process_time()
    surfaces, hit = surfaces_for(prep, progress=progress, use_cache=use_cache,
                                 interpolate=interpolate, fill_cache=fill_cache)
    timings["surfaces"] = time.perf_counter() - t0
    cpu["surfaces"] = time.process_time() - c0
    t0, c0 = time.perf_counter(), time.process_time()
    s = project.settings
    results: dict[str, PaddockResult] = {}
    all_zones: list[gpd.GeoDataFrame] = []
    with record_warnings(prep.warnings):
        for name, grid in prep.grids.items():
            if paddocks is not None and name not in paddocks:
                continue
            progress(f"rates and zones: {name}")
            est = {v: surfaces[(name, v)].estimate for v in prep.variables if (name, v) in surfaces}
            cells, cell_notes = derive_cells(est, s.chemistry)
            cells.update(salinity_cells(cells, s.salinity))
            bd: float | np.ndarray = s.soil.bulk_density_for(name)
            if s.soil.bulk_density_raster is not None:
                bd = bulk_density_on_grid(
                    s.soil.bulk_density_raster, grid, fallback_g_cm3=float(bd)
                )
                cells["bulk_density"] = bd
            deeper: list[tuple[Layer, dict[str, np.ndarray]]] = []
            g_layers: list[RateLayer] = []
            if prep.layers:
                deeper, lnotes = layer_cells(prep, surfaces, name)
                cell_notes = [*cell_notes, *lnotes]
                g_layers = gypsum_layers(prep, name, cells, deeper, bd)
            elif s.rates.gypsum.treat_depth_cm > 0:
                # samples of one depth: they stand for the whole depth gypsum treats
                g_layers = [RateLayer(ONE_LAYER, cells.get("esp", np.nan),
                                      cells.get("ecec", np.nan),
                                      s.rates.gypsum.treat_depth_cm / 100.0, bd)]
            # the rules read pH in water where the lab gave it, else pH in CaCl2
            method, ph = rule_ph(cells)
            with paddock_warnings(name):
                rr = compute_rates(
                    {**cells, "ph": ph} if method is not None else cells,
                    s.rates.for_paddock(name),
                    prep.products,
                    depth_m=s.soil.depth_m,
                    bulk_density_g_cm3=bd,
                    ph_method=method,
                    scoop_density_g_cm3=s.samples.scoop_density_g_cm3,
                    layers=g_layers,
                )
            warn_acid_cells_without_lime(name, cells, method, ph, rr,
                                         lime_rule=s.rates.for_paddock(name).lime,
                                         chemistry=s.chemistry)
            boundary = prep.paddocks.loc[prep.paddocks["paddock"] == name].geometry.iloc[0]
            excl = None
            if not prep.exclusions.empty:
                near = prep.exclusions[prep.exclusions.intersects(boundary)]
                excl = near if not near.empty else None
            zones_here = None
            zone_settings = s.zones
            zone_notes: list[str] = []
            if prep.user_zones is not None:
                zh = prep.user_zones[prep.user_zones.intersects(boundary)]
                if not zh.empty:
                    zones_here = zh
                    if zone_settings.method != "user_zones":
                        zone_settings = dataclasses.replace(zone_settings, method="user_zones")
                        zone_notes.append(
                            f"{name}: the project gives management zones here, so each of them "
                            "takes one rate (the zones method applies to the other paddocks)"
                        )
            zone_frames = []
            for product, rate in rr.product_rates.items():
                zr = _zones_for(
                    prep, rate,
                    use_cache=use_cache, fill_cache=fill_cache,
                    transform=grid.transform,
                    crs=prep.crs,
                    paddock=name,
                    product=product,
                    boundary=boundary,
                    exclusions=excl,
                    user_zones=zones_here,
                    settings=zone_settings,
                    spreader=s.spreader.for_product(product),
                )
                zone_frames.append(_schedule_in(zr.zones, s.spreader.for_product(product),
                                                s.output.rate_unit))
                zone_notes.extend(zr.notes)
                _warn_unsplit_passes(zr.zones, s, paddock=name, product=product)
            zones = (
                pd.concat(zone_frames, ignore_index=True)
                if zone_frames
                else _no_zones(prep.crs)
            )
            all_zones.append(zones)
            top_cm = 0.0
            spans_here = []
            for gl in g_layers:
                spans_here.append((gl.label, top_cm, top_cm + gl.depth_m * 100.0,
                                   gl.bulk_density_g_cm3))
                top_cm += gl.depth_m * 100.0
            results[name] = PaddockResult(name, grid, cells, cell_notes, rr, zones, zone_notes,
                                          deeper, spans_here)
        zones_all = gpd.GeoDataFrame(
            pd.concat(all_zones, ignore_index=True), crs=prep.crs
        ) if all_zones else _no_zones(prep.crs)
        _warn_uncertified(results, s.products)
        table = tonnage_table(
            zones_all,
            capacity_t=s.tonnage.truck_capacity_t,
            price_per_t=s.tonnage.price_per_t or None,
        )
    timings["rates, zones and tonnage"] = time.perf_counter() - t0
    cpu["rates, zones and tonnage"] = time.process_time() - c0
    notes = rule_warnings({n: list(pr.rates.skipped) for n, pr in results.items()}, s.rates)
    return FarmResult(prep, surfaces, hit, results, zones_all, table, timings, notes, cpu)


# --------------------------------------------------------------------------- zones cache

#: How many zones entries (one per paddock and product of a run) the cache folder keeps.
ZONES_KEEP = 500


@functools.cache
def _code_digest() -> str:
    """Every module of geosoil: zones made by other code are never taken back."""
    return source_digest()


def _frame_digest(h: Any, frame: Any) -> None:
    """Feed a GeoDataFrame's geometries, CRS and other columns (or None) into ``h``."""
    if frame is None:
        h.update(b"none\n")
        return
    h.update(b"" if frame.crs is None else frame.crs.to_wkt().encode())
    for g in frame.geometry:
        h.update(shapely.to_wkb(g))
    rest = pd.DataFrame(frame.drop(columns=frame.geometry.name))
    h.update(rest.to_csv(index=False).encode())


def _zones_key(rate: np.ndarray, **kw: Any) -> str:
    """SHA-256 of everything :func:`geosoil.zones.make_zones` makes zones from."""
    h = hashlib.sha256(b"zones\n")
    h.update(_code_digest().encode())
    a = np.ascontiguousarray(rate, dtype=np.float64)
    h.update(repr((a.shape, tuple(kw["transform"]))).encode())
    h.update(a.tobytes())
    h.update(kw["crs"].to_wkt().encode())
    h.update(json.dumps([kw["paddock"], kw["product"]]).encode())
    h.update(shapely.to_wkb(kw["boundary"]))
    _frame_digest(h, kw["exclusions"])
    _frame_digest(h, kw["user_zones"])
    for part in (kw["settings"], kw["spreader"]):
        h.update(json.dumps(None if part is None else to_mapping(part), sort_keys=True,
                            default=str).encode())
    return h.hexdigest()


def _zones_for(prep: Prepared, rate: np.ndarray, *, use_cache: bool, fill_cache: bool = True,
               **kw: Any) -> ZoneResult:
    """:func:`geosoil.zones.make_zones`, or the same zones from the cache when everything
    they are made from is unchanged (the warnings they raised are raised again).
    ``fill_cache`` False reads the cache but changes nothing in it."""
    if not use_cache:
        return make_zones(rate, **kw)
    key = _zones_key(rate, **kw)
    folder = _cache_dir(prep)
    try:
        stored = cache_mod.load_zones(folder, key, touch=fill_cache)
    except cache_mod.CacheEntryError as exc:
        prep.warnings.append(
            f"the cached zones {cache_mod.zones_path(folder, key)} failed their check ({exc}); "
            f"nothing of them was used, the zones of {kw['paddock']} ({kw['product']}) were "
            "made again" + (" and the entry replaced" if fill_cache else ""))
        stored = None
    if stored is not None:
        zones, notes, raised = stored
        for text in raised:
            warnings.warn(text, GeosoilWarning, stacklevel=2)
        return ZoneResult(zones, notes)
    raised = []
    with record_warnings(raised):
        zr = make_zones(rate, **kw)
    if not fill_cache:
        return zr
    try:
        cache_mod.save_zones(folder, key, zr.zones, zr.notes, raised)
        cache_mod.prune_zones(folder, keep=ZONES_KEEP)
    except OSError as exc:
        logger.info("could not write the zones cache in %s (%s)", folder, exc)
    return zr


def _schedule_in(zones: gpd.GeoDataFrame, spreader: Any, unit: str) -> gpd.GeoDataFrame:
    """The zones with their ``schedule`` text in the run's rate unit (``[output] rate_unit``),
    the unit of every table and page the user reads; the cached frame is left as it is."""
    if "schedule" not in zones.columns or not len(zones) or unit == spreader.unit:
        return zones
    texts = [pass_schedule(int(n), float(per), spreader, unit=unit)
             if isinstance(t, str) and t else t
             for n, per, t in zip(zones["passes"], zones["per_pass_kg_ha"], zones["schedule"],
                                  strict=True)]
    return zones.assign(schedule=texts)


def _warn_unsplit_passes(zones: gpd.GeoDataFrame, s: Any, *, paddock: str,
                         product: str) -> None:
    """Warn where a zone's whole rate goes on in one pass above the common per-pass limit
    because the project sets none for the product (its rates are left as they are)."""
    spread = zones[zones["kind"] != "exclusion"]
    msg = unsplit_pass_warning(spread["rate_kg_ha"].tolist(), spread["zone"].tolist(),
                               spreader=s.spreader, paddock=paddock, product=product,
                               rate_unit=s.output.rate_unit)
    if msg:
        warnings.warn(msg, RateWarning, stacklevel=2)


def _warn_uncertified(results: dict[str, PaddockResult], products: Any) -> None:
    """Once per product a run applies that still carries the pure-material defaults."""
    used = sorted({p for pr in results.values() for p, r in pr.rates.product_rates.items()
                   if np.nansum(r) > 0})
    _warn_uncertified_names(used, products)


def _rule_products(rates: Any) -> list[str]:
    """The products the rules that are not switched off may apply."""
    names: list[str] = []
    if rates.gypsum.enabled != "off":
        names.append(rates.gypsum.product)
    if rates.lime.enabled != "off":
        names.append(rates.lime.product)
    if rates.calcium.enabled != "off":
        names += [rates.calcium.lime_product, rates.calcium.gypsum_product]
    if rates.balance.enabled != "off":
        names += [rates.balance.calcium_product, rates.balance.dolomite_product,
                  rates.balance.potassium_product]
    return sorted(set(names))


def _warn_uncertified_names(used: list[str], products: Any) -> None:
    for name in used:
        keys = uncertified(name, products.get(name) or ProductSettings())
        if keys:
            warnings.warn(
                f"product '{name}' still carries the pure-material defaults (100 % pure, dry"
                + (", fully fine" if any("percent_passing" in k for k in keys) else "")
                + "): real products are commonly 70-90 % pure with 5-15 % moisture, so its "
                "rates may be 10-40 % short (common practice); put the certificate's figures "
                "in " + ", ".join(keys),
                RateWarning, stacklevel=2,
            )


def _no_zones(crs: Any) -> gpd.GeoDataFrame:
    """An empty zones table with the zone columns (no product needed anywhere)."""
    cols = [c for c in ZONE_COLUMNS if c != "geometry"]
    return gpd.GeoDataFrame({c: [] for c in cols}, geometry=[], crs=crs)


#: ``check``'s last warning when no run has made the surfaces yet.
RATES_NOT_CHECKED = (
    "rates and zones not checked: no run has made this farm's surfaces yet (check does not "
    "krige); warnings that come from the rates and zones (spreader passes, cells a rule "
    "leaves bare) come with the run, and check gives them once a run has made the surfaces"
)


def _surfaces_cached(prep: Prepared) -> bool:
    """Whether the cache holds this farm's surfaces (an entry's files are there)."""
    try:
        _, jsn = cache_mod.entry_paths(_cache_dir(prep), _surface_key(prep))
        return jsn.is_file()
    except OSError:
        return False


def check(project: Project, *, notes: list[str] | None = None) -> tuple[list[str], list[str]]:
    """Validate inputs and settings without writing any output.

    When nothing is wrong and a run has made the surfaces (they are in the cache), the
    farm is computed as a run computes it (surfaces and zones from the cache, which is
    read, not changed), so the warnings are the ones a run gives before it writes
    (``FarmResult.warnings``). Without cached surfaces nothing is kriged: the warnings
    are those of the inputs and settings, the pure-material defaults of the products
    the rules may apply, and :data:`RATES_NOT_CHECKED`.

    Parameters
    ----------
    project : Project
        The loaded project.

    notes : list of str, optional
        Filled with what check says that is neither a problem nor a warning (the
        record-keeping columns of the samples file that are not read).

    Returns
    -------
    problems, warnings
        ``problems`` lists every error found (all bad sample rows, not only
        the first); an empty list means the project would run.
    """
    problems: list[str] = []
    sink: list[str] = []
    raised: list[str] = []  # what the stages raised, also when one stopped early
    lenient = dataclasses.replace(project.settings.samples, on_bad_row="skip")
    strict = project.settings.samples.on_bad_row == "stop"
    trial = dataclasses.replace(
        project, settings=dataclasses.replace(project.settings, samples=lenient)
    )
    # with on_bad_row = "stop" the bad rows are problems, not rows a run would skip
    skipped = (" bad row(s) skipped: ", " sample(s) outside every paddock skipped: ",
               ": ECEC left empty for ")

    def keep(w: str) -> bool:
        return w not in sink and not (strict and any(t in w for t in skipped))

    try:
        with record_warnings(raised):
            prep = prepare(trial, undecided="keep", listing=True)
        if notes is not None and record_keeping(prep.read.unused):
            notes.append(record_keeping_message(str(prep.read.file), prep.read.unused))
        for header, why in prep.read.undecided.items():
            problems.append(f"{prep.read.file}, column '{header}': {why}")
        problems.extend(prep.problems)
        if strict:
            # rows a run with on_bad_row = "stop" would stop at: skipped here only to list
            # them all
            for row, reason in prep.read.skipped:
                # the same shape as InputError's "file, row N, column 'X': problem"
                sep = ", " if reason.startswith("column ") else ": "
                problems.append(f"{prep.read.file}, row {row}{sep}{reason}")
            for row, reason in prep.samples.attrs.get("outside", []):
                where = f", row {row}" if row is not None else ""
                problems.append(f"{prep.read.file}{where}: {reason}")
            problems.extend(_grouped_gaps(prep.read.file, prep.samples.attrs.get("ecec_gaps", []),
                                          undecided=list(prep.read.undecided)))
        if not prep.samples.empty:
            for name in prep.grids:
                if not (prep.samples["paddock"] == name).any() and not (
                    project.settings.interpolation.borrow_farm_surface
                ):
                    problems.append(
                        f"paddock '{name}' has no samples; sample it or set "
                        "[interpolation] borrow_farm_surface = true"
                    )
        if problems:
            sink.extend(w for w in [*prep.warnings, *prep.rule_notes] if keep(w))
            return problems, sink
        # nothing wrong. When a run has made the surfaces (they are in the cache), the rest
        # of the run but the writing, reading the caches without changing them, so that
        # check gives every warning a run gives before it writes (rates, passes, the
        # products' defaults). Without them check does not krige (that is the run's work,
        # and check stays quick and writes nothing): it warns of the products the rules
        # may apply that carry the defaults, and says the rates were not checked.
        if _surfaces_cached(prep):
            with record_warnings(raised):
                farm = compute(project, prepared=prep, fill_cache=False)
            sink.extend(w for w in farm.warnings if keep(w))
        else:
            found: list[str] = []
            with record_warnings(found):
                _warn_uncertified_names(_rule_products(project.settings.rates),
                                        project.settings.products)
            sink.extend(w for w in [*prep.warnings, *prep.rule_notes, *found] if keep(w))
            sink.append(RATES_NOT_CHECKED)
    except GeosoilError as exc:
        problems.append(str(exc))
        sink.extend(w for w in raised if keep(w))
    return problems, sink
