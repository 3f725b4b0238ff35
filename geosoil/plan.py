"""The sampling plan in one call: compute the farm, plan each paddock, write the folder.  [I/O]

The folder holds ``plan_points.geojson`` (RFC 7946), ``plan_points.gpx`` (GPX 1.1
waypoints for a handheld GPS), ``plan_points.csv`` (one row per point, with the
ID to write on the bag and give the lab) and ``run.json`` (the method, every
paddock's expected reduction in mean kriging variance, warnings and the files).
The method is :mod:`geosoil.sampling`.
"""

from __future__ import annotations

import datetime as _dt
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
from .errors import DataWarning, SettingsError
from .names import slug
from .outfolder import output_folder
from .pipeline import FarmResult, compute
from .project import Project
from .recording import record_warnings
from .sampling import PaddockPlan, plan_paddock
from .writers import atomic_write, write_csv, write_geojson, write_json

__all__ = ["PLAN_VARIABLES", "PlanResult", "run_plan", "gpx_text", "METHOD"]

#: Variables whose variogram a plan may use, in the order tried by default: exchangeable Na
#: (drives ESP and gypsum), ESP itself when kriged, pH (drives lime), exchangeable acidity.
PLAN_VARIABLES = ("na", "esp", "ph", "acidity", "ca", "mg", "k")

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


def run_plan(
    project: Project,
    *,
    out_dir: Path,
    n_points: int,
    min_distance_m: float | None = None,
    weighting: str = "rate",
    variable: str | None = None,
    overwrite: bool = False,
    use_cache: bool = True,
) -> PlanResult:
    """Plan ``n_points`` new samples per paddock and write them to ``out_dir``.

    Parameters
    ----------
    project
        The loaded project.
    out_dir
        The output folder (created; an existing one only with ``overwrite``).
    n_points
        New points per paddock.
    min_distance_m
        Least distance between points and from existing samples; default half
        the spacing of a square grid of all samples over the paddock.
    weighting
        ``"rate"`` (the prescribed rate, all products) or ``"uniform"``.
    variable
        Whose variogram to use; default the first of :data:`PLAN_VARIABLES`
        kriged in the paddock.
    overwrite, use_cache
        As for :func:`geosoil.job.run`.

    Raises
    ------
    SettingsError
        A bad number of points, weighting or variable.
    """
    if int(n_points) != n_points or n_points < 1:
        raise SettingsError(f"must be a whole number of at least 1 (got {n_points!r})",
                            key="--points")
    if weighting not in ("rate", "uniform"):
        raise SettingsError(f"must be 'rate' or 'uniform' (got {weighting!r})", key="--weight")
    if variable is not None and variable not in PLAN_VARIABLES:
        raise SettingsError(f"must be one of {', '.join(PLAN_VARIABLES)} (got {variable!r})",
                            key="--variable")
    if min_distance_m is not None and not (np.isfinite(min_distance_m) and min_distance_m >= 0):
        raise SettingsError(f"must be 0 m or more (got {min_distance_m!r})",
                            key="--min-distance")
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
        with record_warnings(notes):
            for name, result in farm.paddocks.items():
                var = _variable_for(farm, name, variable)
                if var is None:
                    warnings.warn(
                        f"{name}: no kriged surface with a variogram "
                        f"({variable or 'any of ' + ', '.join(PLAN_VARIABLES)}), so no sampling "
                        "plan for this paddock (the plan needs a fitted variogram)",
                        DataWarning, stacklevel=1)
                    continue
                surf = farm.surfaces[(name, var)]
                assert surf.model is not None
                mine = samples[(samples["paddock"] == name) & samples[var].notna()]
                xy = np.column_stack([mine.geometry.x, mine.geometry.y])
                rates = None
                if weighting == "rate" and result.rates.product_rates:
                    rates = np.nansum(np.stack(list(result.rates.product_rates.values())), axis=0)
                plan = plan_paddock(result.grid, xy, surf.model, n_points=int(n_points),
                                    rates=rates, min_distance_m=min_distance_m, avoid=all_xy)
                plans[name] = plan
                ids = _ids(name, len(plan.points), taken_ids)
                for rank, (sid, (x, y), sd) in enumerate(
                        zip(ids, plan.points, plan.kriging_sd_before, strict=True), start=1):
                    rows.append({"sample_id": sid, "paddock": name, "rank": rank,
                                 "kriging_sd_now": round(float(sd), 4),
                                 "geometry": shapely.Point(x, y)})
                per_paddock.append({
                    "paddock": name, "variable": var,
                    "scale": "log" if surf.log_transform else "as measured",
                    "variogram": {"model": surf.model.name, "nugget": surf.model.nugget,
                                  "psill": surf.model.psill, "range_m": surf.model.range},
                    "existing_samples": len(xy), "new_points": len(plan.points),
                    "weighting": plan.weighting,
                    "min_distance_m": round(plan.min_distance_m, 1),
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
        all_warnings = [*prep.warnings, *notes]
        record: dict[str, Any] = {
            "kind": "sampling plan",
            "geosoil_version": __version__,
            "created": _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
            "project": str(project.path) if project.path is not None else None,
            "method": METHOD,
            "points_per_paddock": int(n_points),
            "paddocks": per_paddock,
            "warnings": all_warnings,
            "files": sorted(p.name for p in written) + ["run.json"],
        }
        written.append(write_json(t / "run.json", record))
    final = staging.final
    return PlanResult(out_dir=final, written=[final / p.name for p in written], plans=plans,
                      points=points, record=record, warnings=all_warnings)
