"""The sampling plan in one call: compute the farm, plan each paddock, write the folder.  [I/O]

The folder holds ``plan_points.geojson`` (RFC 7946), ``plan_points.gpx`` (GPX 1.1
waypoints for a handheld GPS), ``plan_points.csv`` (one row per point, with the
ID to write on the bag and give the lab) and ``run.json`` (the method, every
paddock's expected reduction in mean kriging variance, warnings and the files).
The method is :mod:`geosoil.sampling`.
"""

from __future__ import annotations

import datetime as _dt
import math
import warnings
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from . import __version__
from .errors import DataWarning, InputError, SettingsError
from .names import slug
from .outfolder import output_folder
from .pipeline import FarmResult, compute
from .project import Project
from .recording import record_warnings
from .sampling import (
    EDGE_SETBACK_M,
    SPACE_FILLING_RULE,
    PaddockPlan,
    limit_weights,
    plan_paddock,
    space_filling_paddock,
    split_samples,
)
from .writers import atomic_write, write_csv, write_geojson, write_json

__all__ = ["PLAN_VARIABLES", "PlanResult", "run_plan", "gpx_text", "METHOD", "WEIGHTINGS",
           "BUDGET_RULE"]

#: Variables a plan may be asked for (``--variable``), in the order tried when no prescribed
#: rate says which variable matters: exchangeable Na (drives ESP and gypsum), ESP itself when
#: kriged, pH in water or in CaCl2, exchangeable acidity, Ca, Mg, K, Al. By default a plan
#: weighted by the rate uses the variable that drives that rate (:func:`_driver_variable`).
PLAN_VARIABLES = ("na", "esp", "ph", "ph_cacl2", "acidity", "ca", "mg", "k", "al")

#: How ``--weight`` may weigh the cells.
WEIGHTINGS = ("rate", "limit", "uniform")

#: The rule that splits a budget's samples across the paddocks.
BUDGET_RULE = ("floor(budget / cost per sample) samples, split across the paddocks that can be "
               "planned in proportion to their area (largest remainder)")

METHOD = ("greedy sequential design minimising the weighted mean ordinary-kriging variance "
          "(criterion of van Groenigen & Stein 1998, J. Environ. Qual. 27:1078-1086; "
          "greedy variant)")

GPX_NS = "http://www.topografix.com/GPX/1/1"


@dataclass
class PlanResult:
    """What :func:`run_plan` made: the folder, its files, the plans and the record."""

    out_dir: Path
    written: list[Path]
    plans: dict[str, PaddockPlan]
    points: gpd.GeoDataFrame
    record: dict[str, Any]
    warnings: list[str]


def gpx_text(points: gpd.GeoDataFrame, *, name: str) -> str:
    """GPX 1.1 waypoints (WGS 84) of ``points``: ``sample_id`` as the name, the paddock as the
    description.

    Examples
    --------
    >>> g = gpd.GeoDataFrame({"sample_id": ["a-01"], "paddock": ["A"]},
    ...                      geometry=[shapely.Point(147.5, -34.5)], crs="EPSG:4326")
    >>> '<wpt lat="-34.5000000" lon="147.5000000"><name>a-01</name>' in gpx_text(g, name="x")
    True
    """
    wgs = points.to_crs("EPSG:4326")
    ET.register_namespace("", GPX_NS)
    root = ET.Element(f"{{{GPX_NS}}}gpx", {"version": "1.1", "creator": f"geosoil {__version__}"})
    meta = ET.SubElement(root, f"{{{GPX_NS}}}metadata")
    ET.SubElement(meta, f"{{{GPX_NS}}}name").text = name
    for sid, paddock, geom in zip(wgs["sample_id"], wgs["paddock"], wgs.geometry, strict=True):
        wpt = ET.SubElement(root, f"{{{GPX_NS}}}wpt",
                            {"lat": f"{geom.y:.7f}", "lon": f"{geom.x:.7f}"})
        ET.SubElement(wpt, f"{{{GPX_NS}}}name").text = str(sid)
        ET.SubElement(wpt, f"{{{GPX_NS}}}desc").text = f"paddock {paddock}"
    return ET.tostring(root, encoding="unicode", xml_declaration=False)


def _variable_for(farm: FarmResult, paddock: str, wanted: str | None) -> str | None:
    order = (wanted,) if wanted else PLAN_VARIABLES
    for v in order:
        s = farm.surfaces.get((paddock, v))
        if s is not None and s.model is not None:
            return v
    return None


def _driver_variable(farm: FarmResult, paddock: str) -> tuple[str | None, str]:
    """The kriged variable (with a variogram) that drives the paddock's largest prescribed
    product, and why; ``(None, why not)`` when there is none.

    The product with the most product over the paddock, the rule giving most of it, and that
    rule's inputs in its own order (:func:`geosoil.rates.rule_inputs`: ESP from ``na`` and
    ``ecec`` for gypsum; the lime method's input, e.g. ``al`` for Kamprath).
    """
    from .rates import input_sources, rule_inputs

    result = farm.paddocks[paddock]
    totals = {p: float(np.nansum(r)) for p, r in result.rates.product_rates.items()}
    totals = {p: t for p, t in totals.items() if t > 0}
    if not totals:
        return None, "no rate is prescribed here"
    product = max(totals, key=lambda p: totals[p])
    parts = {rule: float(np.nansum(r)) for (rule, p), r in result.rates.contributions.items()
             if p == product}
    rule = max(parts, key=lambda r: parts[r])
    settings = farm.prep.project.settings.rates.for_paddock(paddock)
    cells = result.cells
    available = set(cells) | {"ph"}
    ph_method = "water" if "ph" in cells else ("CaCl2" if "ph_cacl2" in cells else None)
    inputs = rule_inputs(rule, settings, available, ph_method)
    method = f" ({settings.lime.method} method)" if rule == "lime" else ""
    for v in inputs:
        for cand in (("ph", "ph_cacl2") if v == "ph" else input_sources(v)):
            surf = farm.surfaces.get((paddock, cand))
            if surf is not None and surf.model is not None:
                return cand, (f"drives the {rule} rule{method}, which gives most of {product}, "
                              f"the largest product here (it reads {', '.join(inputs)})")
    return None, (f"the {rule} rule{method} gives most of {product} here, but none of its "
                  f"inputs ({', '.join(inputs)}) has a fitted variogram")


#: Variables a run derives from kriged ones rather than kriging them, and the variable whose
#: variogram plans for them: ESP = 100 Na / ECEC (:mod:`geosoil.chemistry`), kriged only when
#: the lab gives no exchangeable Na (ESP from SAR).
DERIVED_FROM = {"esp": "na"}


def _check_variable_exists(farm: FarmResult, wanted: str | None) -> None:
    """Refuse ``--variable`` naming a variable that no paddock of the farm has (the lab file
    does not give it), naming those the plan can use."""
    if not wanted:
        return
    kriged = {v for (_, v) in farm.surfaces}
    if wanted in kriged or DERIVED_FROM.get(wanted) in kriged:
        return
    usable = [v for v in PLAN_VARIABLES if v in kriged or DERIVED_FROM.get(v) in kriged]
    hint = ""
    other_ph = {"ph": "ph_cacl2", "ph_cacl2": "ph"}.get(wanted)
    if other_ph in usable:
        method = "CaCl2" if other_ph == "ph_cacl2" else "water"
        hint = f" (the lab measured pH in {method}: --variable {other_ph})"
    # a problem of the inputs, not of the command line (exit 1): --variable ph is right
    # for a farm whose lab measured pH in water
    raise InputError(
        f"--variable {wanted}: no paddock of this farm has '{wanted}' (the lab file does "
        f"not give it)", file=farm.prep.read.file,
        fix=f"choose one the farm has with --variable: {', '.join(usable) or 'none'}{hint}")


def _choose_variable(farm: FarmResult, paddock: str, wanted: str | None,
                     weighting: str) -> tuple[str | None, str]:
    """The variable whose variogram plans ``paddock``, and why."""
    if wanted:
        v = _variable_for(farm, paddock, wanted)
        if v is not None:
            return v, "asked for (--variable)"
        source = DERIVED_FROM.get(wanted)
        if source is not None and _variable_for(farm, paddock, source) is not None:
            return source, (f"asked for {wanted} (--variable); {wanted} is derived from the "
                            f"kriged {source} (ESP = 100 Na / ECEC), not kriged itself, so "
                            f"{source}'s variogram plans it")
        if source is not None:
            return None, (f"asked for {wanted} (--variable): neither it nor {source}, which it "
                          "is derived from, has a fitted variogram here")
        return None, f"asked for {wanted} (--variable), which has no fitted variogram here"
    if weighting == "rate":
        v, why = _driver_variable(farm, paddock)
        if v is not None:
            return v, why
        fallback = _variable_for(farm, paddock, None)
        return fallback, (f"{why}; so the first kriged of {', '.join(PLAN_VARIABLES)}"
                          if fallback else why)
    v = _variable_for(farm, paddock, None)
    if v is None:
        return None, f"none of {', '.join(PLAN_VARIABLES)} has a fitted variogram here"
    return v, f"the first kriged of {', '.join(PLAN_VARIABLES)} (weighting by {weighting})"


def _ids(paddock: str, n: int, taken: set[str]) -> list[str]:
    base = slug(paddock) or "paddock"
    out: list[str] = []
    k = 1
    while len(out) < n:
        sid = f"{base}-new-{k:02d}"
        if sid not in taken:
            out.append(sid)
            taken.add(sid)
        k += 1
    return out


def _limit_weights(farm: FarmResult, name: str, var: str) -> tuple[np.ndarray, str]:
    """Weights of ``name``'s cells by nearness to the class limit of ``var``'s decision."""
    chem = farm.prep.project.settings.chemistry
    cells = farm.paddocks[name].cells
    surf = farm.surfaces[(name, var)]
    if surf.std is None:
        raise SettingsError(f"{name}: the {var} surface has no kriging error, so nearness to a "
                            "class limit cannot be weighed; use --weight rate or uniform",
                            key="--weight")
    if var in ("na", "esp"):
        if "esp" not in cells or "ecec" not in cells:
            raise SettingsError(f"{name}: no ESP in this paddock's cells, so nearness to the "
                                "sodic limit cannot be weighed", key="--weight")
        # ESP = 100 Na / ECEC: its error from Na's (ECEC's own error left out; stated)
        sd = surf.std if var == "esp" else 100.0 * surf.std / cells["ecec"]
        limit = chem.sodic_esp_percent
        return limit_weights(cells["esp"], sd, limit), (
            f"nearness to the sodic limit (ESP {limit:g} %)")
    if var in ("ph", "ph_cacl2"):
        limit = chem.acid_ph if var == "ph" else chem.acid_ph_cacl2
        method = "water" if var == "ph" else "CaCl2"
        return limit_weights(surf.estimate, surf.std, limit), (
            f"nearness to the acid limit (pH in {method} {limit:g})")
    raise _no_class_limit(var)


#: The variables whose decision has a class limit (``--weight limit``).
LIMIT_VARIABLES = ("na", "esp", "ph", "ph_cacl2")


def _no_class_limit(var: str) -> SettingsError:
    return SettingsError(
        f"'{var}' has no class limit to weigh nearness to; with --weight limit use "
        "--variable na or esp (the sodic limit), ph or ph_cacl2 (the acid limit)",
        key="--weight")


def _sd_layers(farm: FarmResult, plans: dict[str, PaddockPlan],
               per_paddock: list[dict[str, Any]]) -> list[tuple[str, str, np.ndarray, Any]]:
    """(key, title, array, transform) of each plan variable's kriging sd over the planned
    paddocks, as the plan saw them (before the new points)."""
    from .grids import mosaic

    out = []
    by_var: dict[str, list[str]] = {}
    for row in per_paddock:
        if row["variable"] is not None:
            by_var.setdefault(row["variable"], []).append(row["paddock"])
    for var, names in by_var.items():
        pairs = [(farm.paddocks[n].grid, sd) for n in names
                 if n in plans and (sd := farm.surfaces[(n, var)].std) is not None]
        if pairs:
            arr, t = mosaic(pairs)
            out.append((f"{var}_sd", f"{var}: kriging standard deviation now", arr, t))
    return out


def _pages(farm: FarmResult, plans: dict[str, PaddockPlan], points: gpd.GeoDataFrame,
           table: pd.DataFrame, per_paddock: list[dict[str, Any]], *, title: str,
           budget: dict[str, Any] | None, warnings_: list[str]) -> tuple[str, str]:
    """The plan's map (the run's map machinery: existing samples white, new points yellow,
    kriging sd, the prescription's zones) and its report."""
    from markupsafe import Markup

    from .presentation import classes_for
    from .report import CAUTIONS, PlanReportInput, SoilMap, build_plan_report, surface_map_svg
    from .webmap import RasterLayer, SampleField, build_map

    prep = farm.prep
    layers = _sd_layers(farm, plans, per_paddock)
    rasters = [RasterLayer(key=k, title=ttl, unit="", array=a, transform=tr, crs=prep.crs,
                           classes=classes_for("error", a), group="error")
               for k, ttl, a, tr in layers]
    old = prep.samples[["sample_id", "paddock", "geometry"]].copy()
    old["planned"] = False
    old["what"] = "this season's sample"
    new = points[["sample_id", "paddock", "geometry"]].copy()
    new["planned"] = True
    new["what"] = "planned sample"
    pts = gpd.GeoDataFrame(pd.concat([old, new], ignore_index=True), geometry="geometry",
                           crs=prep.crs)
    page = build_map(title=title, paddocks=prep.paddocks, samples=pts, rasters=rasters,
                     zones=farm.zones, exclusions=None,
                     notes=["Yellow: planned sample locations; white: the samples now.",
                            "Rates are advisory; have every prescription checked by a "
                            "qualified agronomist."],
                     sample_fields=[SampleField("what", "point"),
                                    SampleField("paddock", "paddock")])
    maps = []
    for k, ttl, a, tr in layers:
        classes = classes_for("error", a)
        soil = SoilMap(ttl, "", a, tr, classes)
        svg = surface_map_svg(soil, paddocks=prep.paddocks, samples=points, uid=k)
        maps.append({"title": ttl, "unit": "", "svg": Markup(svg), "legend": classes.legend(),
                     "note": "before the new points; white dots: the new points"})
    report = build_plan_report(PlanReportInput(
        title=title, method=METHOD, paddocks=per_paddock, points=table, warnings=warnings_,
        budget=budget, cautions=CAUTIONS, maps=maps, version=__version__))
    return page, report


def _check_options(n_points: int | None, budget: float | None, cost_per_sample: float | None,
                   weighting: str, variable: str | None, min_distance_m: float | None,
                   edge_setback_m: float = EDGE_SETBACK_M) -> None:
    if n_points is None and budget is None:
        raise SettingsError("give the number of points per paddock, or a budget and a cost "
                            "per sample", key="--points")
    if n_points is not None and budget is not None:
        raise SettingsError("give either the points per paddock or a budget, not both",
                            key="--points")
    if n_points is not None and (int(n_points) != n_points or n_points < 1):
        raise SettingsError(f"must be a whole number of at least 1 (got {n_points!r})",
                            key="--points")
    if budget is not None:
        if not (np.isfinite(budget) and budget > 0):
            raise SettingsError(f"must be above 0 (got {budget!r})", key="--budget")
        if cost_per_sample is None or not (np.isfinite(cost_per_sample) and cost_per_sample > 0):
            raise SettingsError(f"must be above 0 with --budget (got {cost_per_sample!r})",
                                key="--cost-per-sample")
        if math.floor(budget / cost_per_sample + 1e-9) == 0:
            raise SettingsError(f"a budget of {budget:g} at {cost_per_sample:g} a sample "
                                "(--cost-per-sample) buys no sample: give a budget of at least "
                                "one sample's cost", key="--budget")
    if weighting not in WEIGHTINGS:
        raise SettingsError(f"must be one of {', '.join(WEIGHTINGS)} (got {weighting!r})",
                            key="--weight")
    if variable is not None and variable not in PLAN_VARIABLES:
        raise SettingsError(f"must be one of {', '.join(PLAN_VARIABLES)} (got {variable!r})",
                            key="--variable")
    if weighting == "limit" and variable is not None and variable not in LIMIT_VARIABLES:
        raise _no_class_limit(variable)  # before any kriging
    if min_distance_m is not None and not (np.isfinite(min_distance_m) and min_distance_m >= 0):
        raise SettingsError(f"must be 0 m or more (got {min_distance_m!r})",
                            key="--min-distance")
    if not (np.isfinite(edge_setback_m) and edge_setback_m >= 0):
        raise SettingsError(f"must be 0 m or more (got {edge_setback_m!r})",
                            key="--edge-setback")


def run_plan(
    project: Project,
    *,
    out_dir: Path,
    n_points: int | None = None,
    budget: float | None = None,
    cost_per_sample: float | None = None,
    min_distance_m: float | None = None,
    edge_setback_m: float = EDGE_SETBACK_M,
    weighting: str = "rate",
    variable: str | None = None,
    overwrite: bool = False,
    use_cache: bool = True,
) -> PlanResult:
    """Plan new samples for every paddock and write them to ``out_dir``.

    Parameters
    ----------
    project
        The loaded project.
    out_dir
        The output folder (created; an existing one only with ``overwrite``).
    n_points
        New points per paddock; or None with ``budget``.
    budget, cost_per_sample
        Instead of ``n_points``: ``floor(budget / cost_per_sample)`` points in all,
        split across the paddocks that can be planned in proportion to their area
        (largest remainder: :func:`geosoil.sampling.split_samples`).
    min_distance_m
        Least distance between points and from existing samples; default half
        the spacing of a square grid of all samples over the paddock.
    edge_setback_m
        Least distance of a new point from its paddock's boundary
        (:data:`geosoil.sampling.EDGE_SETBACK_M`, off headlands and fence lines;
        lowered with a warning in a paddock too small for it).
    weighting
        ``"rate"`` (the prescribed rate, all products), ``"limit"`` (nearness to
        the class limit of the variable's decision: the sodic limit for Na and
        ESP, the acid limit for pH; :func:`geosoil.sampling.limit_weights`) or
        ``"uniform"``.
    variable
        Whose variogram to use. Default: with ``weighting="rate"`` the variable
        driving the paddock's largest prescribed product (ESP's Na for gypsum, the
        lime method's input for lime); otherwise, or when that has no variogram,
        the first of :data:`PLAN_VARIABLES` kriged in the paddock. A paddock with
        no variogram at all gets its points by :data:`SPACE_FILLING_RULE`. A
        variable the run derives (``esp``) is planned with the variogram of the one
        it is derived from (:data:`DERIVED_FROM`); one no paddock has is an
        :class:`InputError` naming those it has.
    overwrite, use_cache
        As for :func:`geosoil.job.run`.

    Raises
    ------
    SettingsError
        A bad number of points, budget, weighting or variable.
    InputError
        A variable the farm's samples do not give.
    """
    _check_options(n_points, budget, cost_per_sample, weighting, variable, min_distance_m,
                   edge_setback_m)
    inputs = [p for p in project.input_files() if p is not None]
    if project.path is not None:
        inputs.append(project.path)
    with output_folder(Path(out_dir), overwrite=overwrite, inputs=inputs) as staging:
        farm = compute(project, use_cache=use_cache)
        notes: list[str] = list(staging.notes)
        prep = farm.prep
        samples = prep.samples
        all_xy = np.column_stack([samples.geometry.x, samples.geometry.y]) if len(samples) \
            else np.empty((0, 2))
        taken_ids = {str(s) for s in samples["sample_id"]}
        plans: dict[str, PaddockPlan] = {}
        rows: list[dict[str, Any]] = []
        per_paddock: list[dict[str, Any]] = []
        budget_record: dict[str, Any] | None = None
        with record_warnings(notes):
            chosen_var: dict[str, str] = {}
            why_var: dict[str, str] = {}
            unplanned: list[str] = []  # no variogram: space-filling points instead
            _check_variable_exists(farm, variable)
            for name in farm.paddocks:
                var, why = _choose_variable(farm, name, variable, weighting)
                why_var[name] = why
                if var is None:
                    warnings.warn(
                        f"{name}: no kriged surface with a variogram "
                        f"({variable or 'any of ' + ', '.join(PLAN_VARIABLES)}), so its new "
                        f"points are placed by the {SPACE_FILLING_RULE}", DataWarning,
                        stacklevel=1)
                    unplanned.append(name)
                    continue
                chosen_var[name] = var
            if budget is not None:
                assert cost_per_sample is not None
                total = math.floor(budget / cost_per_sample + 1e-9)
                areas = {n: farm.paddocks[n].grid.n_cells * farm.paddocks[n].grid.cell_area_ha
                         for n in farm.paddocks if n in chosen_var or n in unplanned}
                counts = split_samples(total, areas)
                budget_record = {"budget": budget, "cost_per_sample": cost_per_sample,
                                 "samples": total, "rule": BUDGET_RULE, "per_paddock": counts}
                if total == 0:
                    raise SettingsError(f"a budget of {budget:g} at {cost_per_sample:g} a sample "
                                        "buys no sample", key="--budget")
            else:
                counts = {n: int(n_points or 0) for n in [*chosen_var, *unplanned]}
            for name in unplanned:
                if counts[name] == 0:
                    warnings.warn(f"{name}: the budget's split by area gives this paddock no "
                                  "new sample", DataWarning, stacklevel=1)
                    continue
                outline = prep.paddocks.loc[prep.paddocks["paddock"] == name].geometry.iloc[0]
                mine = samples[samples["paddock"] == name]
                xy = np.column_stack([mine.geometry.x, mine.geometry.y])
                pts, dist, setback = space_filling_paddock(
                    farm.paddocks[name].grid, xy, n_points=counts[name],
                    min_distance_m=min_distance_m, avoid=all_xy, boundary=outline,
                    edge_setback_m=edge_setback_m)
                ids = _ids(name, len(pts), taken_ids)
                for rank, (sid, (x, y)) in enumerate(zip(ids, pts, strict=True), start=1):
                    rows.append({"sample_id": sid, "paddock": name, "rank": rank,
                                 "kriging_sd_now": None, "geometry": shapely.Point(x, y)})
                per_paddock.append({
                    "paddock": name, "variable": None, "variable_reason":
                    why_var[name] or "no kriged variable with a fitted variogram here",
                    "scale": None, "variogram": None,
                    "existing_samples": len(xy), "new_points": len(pts),
                    "weighting": SPACE_FILLING_RULE,
                    "min_distance_m": round(dist, 1), "edge_setback_m": round(setback, 1),
                    "mean_kriging_variance_before": None, "mean_kriging_variance_after": None,
                    "mean_variance_reduction_pct": None, "weighted_variance_reduction_pct": None,
                })
            for name, var in chosen_var.items():
                result = farm.paddocks[name]
                if counts[name] == 0:
                    warnings.warn(f"{name}: the budget's split by area gives this paddock no "
                                  "new sample", DataWarning, stacklevel=1)
                    continue
                surf = farm.surfaces[(name, var)]
                assert surf.model is not None
                mine = samples[(samples["paddock"] == name) & samples[var].notna()]
                xy = np.column_stack([mine.geometry.x, mine.geometry.y])
                rates = None
                extra: dict[str, Any] = {}
                if weighting == "rate" and result.rates.product_rates:
                    rates = np.nansum(np.stack(list(result.rates.product_rates.values())), axis=0)
                elif weighting == "limit":
                    w, label = _limit_weights(farm, name, var)
                    extra = {"weights": w, "weighting": label}
                outline = prep.paddocks.loc[prep.paddocks["paddock"] == name].geometry.iloc[0]
                plan = plan_paddock(result.grid, xy, surf.model, n_points=counts[name],
                                    rates=rates, min_distance_m=min_distance_m, avoid=all_xy,
                                    boundary=outline, edge_setback_m=edge_setback_m, **extra)
                plans[name] = plan
                ids = _ids(name, len(plan.points), taken_ids)
                for rank, (sid, (x, y), sd) in enumerate(
                        zip(ids, plan.points, plan.kriging_sd_before, strict=True), start=1):
                    rows.append({"sample_id": sid, "paddock": name, "rank": rank,
                                 "kriging_sd_now": round(float(sd), 4),
                                 "geometry": shapely.Point(x, y)})
                per_paddock.append({
                    "paddock": name, "variable": var, "variable_reason": why_var[name],
                    "scale": "log" if surf.log_transform else "as measured",
                    "variogram": {"model": surf.model.name, "nugget": surf.model.nugget,
                                  "psill": surf.model.psill, "range_m": surf.model.range},
                    "existing_samples": len(xy), "new_points": len(plan.points),
                    "weighting": plan.weighting,
                    "min_distance_m": round(plan.min_distance_m, 1),
                    "edge_setback_m": round(plan.edge_setback_m, 1),
                    "mean_kriging_variance_before": plan.mean_variance_before,
                    "mean_kriging_variance_after": plan.mean_variance_after,
                    "mean_variance_reduction_pct": round(100 * plan.reduction, 2),
                    "weighted_variance_reduction_pct": round(100 * plan.weighted_reduction, 2),
                })
        points = gpd.GeoDataFrame(
            rows or {"sample_id": [], "paddock": [], "rank": [], "kriging_sd_now": [],
                     "geometry": []},
            geometry="geometry", crs=prep.crs)
        t = staging.temp
        written = [write_geojson(t / "plan_points.geojson", points)]
        with atomic_write(t / "plan_points.gpx", mode="w") as fh:
            fh.write('<?xml version="1.0" encoding="UTF-8"?>\n')
            title = f"geosoil sampling plan: {project.settings.farm or 'farm'}"
            fh.write(gpx_text(points, name=title))
            fh.write("\n")
        written.append(t / "plan_points.gpx")
        wgs = points.to_crs("EPSG:4326")
        table = pd.DataFrame({
            "sample_id": points["sample_id"], "paddock": points["paddock"],
            "rank": points["rank"],
            "latitude": wgs.geometry.y.round(7), "longitude": wgs.geometry.x.round(7),
            "easting_m": points.geometry.x.round(2), "northing_m": points.geometry.y.round(2),
            "crs": str(prep.crs.to_string()) if prep.crs is not None else "",
            "kriging_sd_now": points["kriging_sd_now"],
        })
        written.append(write_csv(t / "plan_points.csv", table))
        all_warnings = list(dict.fromkeys([*prep.warnings, *notes]))
        title = f"{project.settings.farm or 'farm'}: sampling plan"
        map_page, report_page = _pages(farm, plans, points, table, per_paddock, title=title,
                                       budget=budget_record, warnings_=all_warnings)
        for name, page in (("map.html", map_page), ("report.html", report_page)):
            with atomic_write(t / name, mode="w") as fh:
                fh.write(page)
            written.append(t / name)
        record: dict[str, Any] = {
            "kind": "sampling plan",
            "geosoil_version": __version__,
            "created": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
            "project": str(project.path) if project.path is not None else None,
            "method": METHOD,
            "points_per_paddock": int(n_points) if n_points is not None else None,
            "budget": budget_record,
            "paddocks": per_paddock,
            "warnings": all_warnings,
            "files": sorted(p.name for p in written) + ["run.json"],
        }
        written.append(write_json(t / "run.json", record))
    final = staging.final
    return PlanResult(out_dir=final, written=[final / p.name for p in written], plans=plans,
                      points=points, record=record, warnings=all_warnings)
