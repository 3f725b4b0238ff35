"""The output folder of a run: what goes where. [I/O]

Layout (stable; scripts rely on it)::

    OUT/
      run.json                         machine-readable record of the run
      tonnage.csv                      one row per paddock, product and zone, plus totals
      passes.csv                       zones whose rate needs more than one pass
      samples.csv                      the checked samples with their derived chemistry
      map.html                         the offline interactive map
      report.html                      the printable report
      surfaces/<paddock>/<variable>.tif        interpolated surface
      surfaces/<paddock>/<variable>_sd.tif     its kriging standard deviation
      surfaces/<paddock>/<quantity>.tif        derived cell chemistry (ecec, esp, ...)
      rates/<paddock>/<product>.tif            per-cell product rate, kg/ha
      rates/<paddock>/<product>__<rule>.tif    each rule's share of that rate, kg/ha
      prescriptions/<paddock>/<product>.geojson       RFC 7946 zones
      prescriptions/<paddock>/<product>_shp.zip       zipped ESRI shapefile of the zones
                                                      ([output] machine_crs)
      prescriptions/<paddock>/<product>_zones.tif     zone rates as a raster (machine_crs)
      prescriptions/<paddock>/<product>_isoxml/TASKDATA/
                                       ISO 11783-10 task data (rate grid, DDI 6)
      prescriptions/<paddock>/<product>_pass<k>{.geojson,_shp.zip,_zones.tif,_isoxml/}
                                       the same, once per pass, in place of the above when a
                                       zone needs several passes (_season<k> for seasons)
      prescriptions/farm_isoxml/TASKDATA/  the farm's task set: a partfield per paddock, a task
                                       per paddock x product x pass
      farm.gpkg                        GeoPackage: paddocks, exclusions, samples, zones per
                                       product (all passes) and per pass, with layer styles

Every file is written to a temporary name and renamed into place.
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import json
import logging
import re
import shutil
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyproj
import shapely

from . import presentation, webmap
from . import report as report_mod
from .chemistry import CATION_SYMBOLS, SOLUBLE_DERIVED, SOLUBLE_SOURCE, rule_ph
from .gpkg import plain_style, write_gpkg, zone_styles
from .grids import mosaic
from .isoxml import (
    MAX_DESIGNATOR,
    Partfield,
    Task,
    TaskGrid,
    designators,
    grid_from_zones,
    write_taskset,
)
from .names import slug
from .pipeline import FarmResult, treat_depth_cm
from .prescriptions import machine_crs, n_passes, pass_frames, pass_suffix, zone_raster
from .products import MATERIALS
from .rates import GYPSUM_NO_LIME_CREDIT
from .record import input_checksums, now_utc, sha256_file, source_digest, versions
from .salinity import (
    DISPERSION_CLASSES,
    SALINITY_CLASSES,
    SAMPLE_COLUMNS,
    DispersionLimits,
    gypsum_water_mm,
)
from .settings import to_mapping
from .tonnage import first_season_tonnes, mass_unit_for, passes_csv, tonnage_csv
from .units import area_unit_for, rate_from_kg_ha
from .units import format_rate as units_format_rate
from .writers import (
    atomic_path,
    atomic_write,
    reuse_or_write_cog,
    write_csv,
    write_geojson,
    write_json,
    write_shapefile_zip,
)

__all__ = [
    "write_outputs",
    "task_designator",
    "build_record",
    "build_farm_map",
    "report_input",
    "product_text",
    "run_cautions",
    "prescribed",
    "reasons_to_say",
    "RAN_NO_NEED",
    "SURFACE_UNITS",
    "TITLES",
    "UNCERTAIN_SD",
]

logger = logging.getLogger(__name__)

#: Folder (under ``prescriptions/``) of the farm's ISO 11783-10 task set; a paddock's
#: folder name has no underscore, so it never meets this one.
FARM_TASKSET = "farm_isoxml"

#: The farm's GeoPackage, at the top of the output folder.
FARM_GPKG = "farm.gpkg"
#: Where a run puts every sample with its values (the map and the report draw at most
#: a bounded number of them, and say so naming these).
SAMPLES_EVERYWHERE = f"samples.csv and {FARM_GPKG} (layer samples)"

#: Units of every surface and derived quantity, for files, map and report.
SURFACE_UNITS: dict[str, str] = {
    "ca": "cmol(+)/kg", "mg": "cmol(+)/kg", "k": "cmol(+)/kg", "na": "cmol(+)/kg",
    "acidity": "cmol(+)/kg", "al": "cmol(+)/kg", "cec": "cmol(+)/kg", "ecec": "cmol(+)/kg",
    "ph": "pH units", "ph_cacl2": "pH units", "esp": "% of ECEC", "ca_sat": "% of ECEC",
    "mg_sat": "% of ECEC",
    "k_sat": "% of ECEC", "na_sat": "% of ECEC", "acid_sat": "% of ECEC", "al_sat": "% of ECEC",
    "cec_ph7": "cmol(+)/kg", "acidity_potential": "cmol(+)/kg", "bph_smp": "pH units",
    "bph_sikora": "pH units",
    "bph_mehlich": "pH units", "bph_adams_evans": "pH units", "oc": "%", "om": "%", "clay": "%",
    "phbc": "cmol(+)/kg per pH unit", "ec_1_5": "dS/m", "ece": "dS/m",
    "salinity_class": "class code: 0 normal, 1 saline, 2 sodic, 3 saline-sodic",
    "dispersion_class": "class code: 0 flocculated, 1 potentially dispersive, 2 dispersive",
    "na_sol": "mmol(+)/L", "k_sol": "mmol(+)/L", "ca_sol": "mmol(+)/L", "mg_sol": "mmol(+)/L",
    "cross": "(mmol(+)/L)^0.5",
}

#: A deeper layer's suffix on a surface name (``esp_10-30cm``), see :mod:`geosoil.layers`.
_LAYER_SUFFIX = re.compile(r"_(\d+(?:\.\d+)?)-(\d+(?:\.\d+)?)cm$")


def split_layer(var: str) -> tuple[str, str | None]:
    """``("esp", "10-30 cm")`` for ``"esp_10-30cm"``; ``(var, None)`` for a top-layer name."""
    m = _LAYER_SUFFIX.search(var)
    if not m:
        return var, None
    return var[: m.start()], f"{m.group(1)}-{m.group(2)} cm"


def _unit_of(var: str) -> str:
    return SURFACE_UNITS.get(split_layer(var)[0], "")


def _title_of(var: str) -> str:
    base, label = split_layer(var)
    title = TITLES.get(base, base)
    return f"{title}, {label}" if label else title


#: Cell quantities written as surfaces (and, per deeper layer, with its suffix).
CELL_SURFACES = ("ecec", "ca_sat", "mg_sat", "k_sat", "esp", "acid_sat", "al_sat", "ece",
                 "salinity_class", "dispersion_class", "cross")

#: Readable names of variables.
TITLES: dict[str, str] = {
    "ca": "Exchangeable Ca", "mg": "Exchangeable Mg", "k": "Exchangeable K",
    "na": "Exchangeable Na", "acidity": "Exchangeable acidity", "al": "Exchangeable Al",
    "cec": "CEC (lab)", "ecec": "ECEC", "ph": "pH (water)", "ph_cacl2": "pH (CaCl2)",
    "esp": "ESP (exchangeable sodium)",
    "ca_sat": "Ca saturation", "mg_sat": "Mg saturation", "k_sat": "K saturation",
    "na_sat": "Na saturation", "acid_sat": "Acid saturation", "al_sat": "Al saturation",
    "cec_ph7": "CEC at pH 7", "acidity_potential": "Potential acidity (H + Al at pH 7)",
    "bph_smp": "SMP buffer pH", "bph_sikora": "Sikora buffer pH",
    "bph_mehlich": "Mehlich buffer pH", "bph_adams_evans": "Adams-Evans buffer pH",
    "oc": "Organic carbon", "om": "Organic matter", "clay": "Clay", "phbc": "pH buffering capacity",
    "ec_1_5": "EC 1:5", "ece": "ECe (saturation extract EC)",
    "salinity_class": "Salinity class (USDA Handbook 60)",
    "dispersion_class": "Dispersion risk class",
    "na_sol": "Soluble Na", "k_sol": "Soluble K", "ca_sol": "Soluble Ca", "mg_sol": "Soluble Mg",
    "cross": "CROSS (Rengasamy & Marchuk 2011)",
}


def _rel(path: Path, root: Path) -> str:
    return str(path.relative_to(root))


def _previous_record(previous: Path | None, field: str) -> dict[str, Any]:
    """What the earlier run in ``previous`` recorded in ``run.json``'s ``field`` (path ->
    entry); empty when there is none or it cannot be read."""
    if previous is None:
        return {}
    try:
        old = json.loads((previous / "run.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    entries = old.get(field) if isinstance(old, dict) else None
    if not isinstance(entries, dict):
        return {}
    return {k: v for k, v in entries.items() if isinstance(k, str) and isinstance(v, dict)}


def _previous_geotiffs(previous: Path | None) -> dict[str, Any]:
    """What the earlier run in ``previous`` recorded of its GeoTIFFs (``run.json``
    ``geotiffs``)."""
    return _previous_record(previous, "geotiffs")


@functools.cache
def _prescription_writers_id() -> str:
    """The source of what writes a pass's machine files, and the libraries' versions."""
    import pyogrio
    import rasterio

    from . import isoxml, prescriptions, units, writers

    # pyproj: the task grid's cells in degrees; shapely and GEOS: the polygons' repair
    return "\n".join([pyogrio.__version__, pyogrio.__gdal_version_string__,
                      rasterio.__version__, pyproj.__version__, pyproj.proj_version_str,
                      shapely.__version__, shapely.geos_version_string,
                      source_digest(writers.__file__, prescriptions.__file__, isoxml.__file__,
                                    units.__file__, __file__)])


def _frame_key(frame: Any, *parts: Any) -> str:
    """SHA-256 of a zone frame (geometries, CRS, every column) and ``parts`` (the machine
    CRS, the grid...): what a pass's GeoJSON, shapefile and zone GeoTIFF are made from."""
    h = hashlib.sha256(_prescription_writers_id().encode())
    h.update(b"" if frame.crs is None else frame.crs.to_wkt().encode())
    h.update(json.dumps([str(p) for p in parts]).encode())
    for g in frame.geometry:
        h.update(shapely.to_wkb(g))
    h.update(pd.DataFrame(frame.drop(columns=frame.geometry.name)).to_csv().encode())
    return h.hexdigest()


class _PassFiles:
    """A pass's GeoJSON, shapefile and zone GeoTIFF: copied from the folder being replaced
    when they were made from the same zones with the same settings and their bytes are as
    recorded (``run.json`` ``prescription_files``), else written."""

    def __init__(self, out_dir: Path, previous: Path | None, geotiffs: _GeoTiffs) -> None:
        self.out_dir, self.previous, self.geotiffs = out_dir, previous, geotiffs
        self.old = _previous_record(previous, "prescription_files")
        self.entries: dict[str, dict[str, Any]] = {}
        self.copied = 0

    def _unchanged(self, path: Path, key: str) -> str | None:
        """The recorded SHA-256 of ``path``'s earlier file when it was made under ``key``
        and its bytes are still those; else None."""
        rel = path.relative_to(self.out_dir).as_posix()
        old = self.old.get(rel)
        if self.previous is None or old is None or old.get("key") != key:
            return None
        digest = old.get("sha256")
        if not isinstance(digest, str):
            return None
        if path.suffix == ".tif":
            tif = self.geotiffs.old.get(rel)
            if tif is None or tif.get("sha256") != digest or not isinstance(tif.get("key"), str):
                return None
        try:
            return digest if sha256_file(self.previous / rel) == digest else None
        except OSError:
            return None

    def reuse(self, paths: list[Path], key: str) -> bool:
        """Copy every one of ``paths`` from the earlier folder when each is unchanged (all
        or none)."""
        digests = [self._unchanged(p, key) for p in paths]
        if any(d is None for d in digests):
            return False
        for path, digest in zip(paths, digests, strict=True):
            rel = path.relative_to(self.out_dir).as_posix()
            path.parent.mkdir(parents=True, exist_ok=True)
            with atomic_path(path) as tmp:
                shutil.copyfile(self.previous / rel, tmp)  # type: ignore[operator]
            self.entries[rel] = {"key": key, "sha256": str(digest)}
            if path.suffix == ".tif":
                self.geotiffs.entries[rel] = {"key": str(self.geotiffs.old[rel]["key"]),
                                              "sha256": str(digest)}
                self.geotiffs.copied += 1
            self.copied += 1
        return True

    def made(self, path: Path, key: str, **extra: Any) -> None:
        """Record a file written afresh (its key and SHA-256, and ``extra``) for the next
        run."""
        rel = path.relative_to(self.out_dir).as_posix()
        self.entries[rel] = {"key": key, "sha256": sha256_file(path), **extra}

    def reuse_taskset(self, xml: Path, grd: Path, key: str) -> TaskGrid | None:
        """A pass's task set (``TASKDATA.XML`` and its one grid file) copied from the earlier
        folder when unchanged (:meth:`reuse`), with its grid read back from the copied grid
        file and the grid's corner and cells recorded beside it; else None (nothing
        copied)."""
        rel = grd.relative_to(self.out_dir).as_posix()
        place = self.old.get(rel, {}).get("grid")
        if not (isinstance(place, list) and len(place) == 6):
            return None
        try:
            min_north, min_east, cell_north, cell_east = (float(v) for v in place[:4])
            rows, columns = int(place[4]), int(place[5])
        except (TypeError, ValueError):
            return None
        try:
            if self.previous is None or (self.previous / rel).stat().st_size != 4 * rows * columns:
                return None  # not the grid recorded beside it (a run.json edited by hand)
        except OSError:
            return None
        if not self.reuse([xml, grd], key):
            return None
        values = np.frombuffer(grd.read_bytes(), dtype="<i4")
        self.entries[rel]["grid"] = [min_north, min_east, cell_north, cell_east, rows, columns]
        grid_values = values.astype(np.int32).reshape(rows, columns)
        grid_values.setflags(write=False)
        return TaskGrid(min_north=min_north, min_east=min_east, cell_north=cell_north,
                        cell_east=cell_east, values=grid_values)

    def record(self, progress: Any) -> dict[str, Any]:
        """``run.json``'s ``prescription_files`` and ``prescription_files_copied``."""
        if self.copied:
            progress(f"{self.copied} of {len(self.entries)} prescription files unchanged since "
                     "the run replaced: copied")
        return {"prescription_files": dict(sorted(self.entries.items())),
                "prescription_files_copied": self.copied}


class _GeoTiffs:
    """The run's GeoTIFFs: each written, or copied from the folder being replaced when it
    was made from the same (:func:`geosoil.writers.reuse_or_write_cog`)."""

    def __init__(self, out_dir: Path, previous: Path | None, written: list[Path]) -> None:
        self.out_dir, self.previous, self.written = out_dir, previous, written
        self.old = _previous_geotiffs(previous)
        self.entries: dict[str, dict[str, str]] = {}
        self.copied = 0

    def write(self, path: Path, array: np.ndarray, **kwargs: Any) -> None:
        path.parent.mkdir(parents=True, exist_ok=True)
        rel = path.relative_to(self.out_dir).as_posix()
        old = None
        if self.previous is not None and rel in self.old:
            old = (self.previous / rel, self.old[rel])
        self.entries[rel], copied = reuse_or_write_cog(path, array, previous=old, **kwargs)
        self.copied += copied
        self.written.append(path)

    def record(self, progress: Any) -> dict[str, Any]:
        """``run.json``'s ``geotiffs`` (path -> key and SHA-256) and ``geotiffs_copied``."""
        if self.copied:
            progress(f"{self.copied} of {len(self.entries)} GeoTIFFs unchanged since the run "
                     "replaced: copied")
        return {"geotiffs": dict(sorted(self.entries.items())), "geotiffs_copied": self.copied}


def write_outputs(
    farm: FarmResult, *, out_dir: Path, progress: Any = lambda _m: None,
    previous: Path | None = None,
) -> tuple[list[Path], dict[str, Any]]:
    """Write every output of ``farm`` into ``out_dir`` (which exists and is ours).

    Parameters
    ----------
    farm : FarmResult
        The computed farm from :func:`geosoil.pipeline.compute`.
    out_dir : Path
        The folder to write into: the temporary folder beside the output folder that
        :func:`geosoil.outfolder.output_folder` checked and made.
    progress : callable, optional
        Called with a short message at each stage.
    previous : Path, optional
        The output folder this run replaces. A GeoTIFF made from the same array and
        settings as one of its files (``run.json`` ``geotiffs``: the SHA-256 of what
        it was made from and of its bytes) is copied from it instead of written
        again: the same bytes, checked (:func:`geosoil.writers.reuse_or_write_cog`).

    Returns
    -------
    written : list of Path
        Every file written.
    record : dict
        The run record, as written to ``run.json``.
    """
    prep = farm.prep
    crs = prep.crs
    written: list[Path] = []
    geotiffs = _GeoTiffs(out_dir, previous, written)
    tif = geotiffs.write
    pass_files = _PassFiles(out_dir, previous, geotiffs)

    def cog(path: Path, array: np.ndarray, transform: Any, description: str, unit: str) -> None:
        tif(path, array, transform=transform, crs=crs, descriptions=(description,),
            tags={"unit": unit})

    # surfaces and cell chemistry; per-cell rates and each rule's contribution
    progress("writing surfaces")
    _write_grids(farm, out_dir, cog, progress)

    # prescriptions: one set of machine files per pass (see geosoil.prescriptions)
    progress("writing prescriptions")
    s = prep.project.settings
    mcrs = machine_crs(s.output.machine_crs, working=crs, boundaries=prep.boundaries_crs)
    iso_names = _IsoNames(farm)
    iso_tasks: list[Task] = []
    iso_partfields: dict[str, int] = {}
    for name, pr in farm.paddocks.items():
        folder = out_dir / "prescriptions" / prep.paddock_files[name]
        folder.mkdir(parents=True, exist_ok=True)
        for product in pr.rates.product_rates:
            z = pr.zones[pr.zones["product"] == product]
            if z.empty:
                continue
            n = n_passes(z)
            for k, zk in pass_frames(z):
                stem = prep.product_files[product] + pass_suffix(
                    k, n, split_into=s.spreader.split_into)
                p_geo = folder / f"{stem}.geojson"
                p_zip = folder / f"{stem}_shp.zip"
                p_tif = folder / f"{stem}_zones.tif"
                word = "season" if s.spreader.split_into == "seasons" else "pass"
                what = f"{product} zone rates" + (f", {word} {k} of {n}" if n > 1 else "")
                key = _frame_key(zk, mcrs.to_wkt(), crs.to_wkt(), tuple(pr.grid.transform),
                                 pr.grid.mask.shape, s.grid.cell_size_m, what, k, n)
                written.extend((p_geo, p_zip))
                if pass_files.reuse([p_geo, p_zip, p_tif], key):
                    written.append(p_tif)
                    continue
                write_geojson(p_geo, zk)
                pass_files.made(p_geo, key)
                write_shapefile_zip(p_zip, zk, crs=mcrs)
                pass_files.made(p_zip, key)
                if mcrs.equals(crs):
                    zr, zt = zone_raster(zk, crs=crs, cell_size_m=s.grid.cell_size_m,
                                         transform=pr.grid.transform, shape=pr.grid.mask.shape)
                    zr[~pr.grid.mask] = np.nan
                else:
                    zr, zt = zone_raster(zk, crs=mcrs, cell_size_m=s.grid.cell_size_m,
                                         **_task_grid(zk, mcrs, farm=farm, paddock=name))
                tif(p_tif, zr, transform=zt, crs=mcrs, descriptions=(what,),
                    tags={"unit": "kg/ha", "pass": f"{k} of {n}"})
                pass_files.made(p_tif, key)
            written.extend(_write_isoxml(folder, z, farm=farm, paddock=name, product=product,
                                         names=iso_names, tasks=iso_tasks,
                                         partfields=iso_partfields, pass_files=pass_files))
    written.extend(_write_farm_taskset(out_dir, farm=farm, names=iso_names, tasks=iso_tasks,
                                       partfields=iso_partfields))

    # the farm's GeoPackage (all passes and each pass; GIS, no machine)
    progress("writing the GeoPackage")
    written.append(_write_farm_gpkg(out_dir / FARM_GPKG, farm))

    # tables
    p = out_dir / "tonnage.csv"
    write_csv(p, tonnage_csv(farm.tonnage, mass_unit=mass_unit_for(s.output.rate_unit),
                             currency=s.tonnage.currency,
                             area_unit=area_unit_for(s.output.rate_unit)))
    written.append(p)
    p = out_dir / "passes.csv"
    write_csv(p, passes_csv(farm.zones, rate_unit=s.output.rate_unit, tonnage=farm.tonnage))
    written.append(p)
    p = out_dir / "samples.csv"
    samples = prep.all_samples.copy()
    samples["x"] = samples.geometry.x
    samples["y"] = samples.geometry.y
    write_csv(p, pd.DataFrame(samples.drop(columns="geometry")))
    written.append(p)

    record = build_record(farm, out_dir=out_dir)
    record["names_shortened"] = list(iso_names.changed)
    record.update(geotiffs.record(progress))
    record.update(pass_files.record(progress))

    # map and report
    progress("drawing the map")
    html = build_farm_map(farm)
    p = out_dir / "map.html"
    with atomic_write(p) as fh:
        fh.write(html.encode("utf-8"))
    written.append(p)
    progress("writing the report")
    html = report_mod.build_report(report_input(farm, record))
    p = out_dir / "report.html"
    with atomic_write(p) as fh:
        fh.write(html.encode("utf-8"))
    written.append(p)

    record["files"] = sorted(_rel(w, out_dir) for w in written) + ["run.json"]
    # the one list of warnings, as the report and the CLI summary show it (the map and the
    # report may have added to it since the record was begun)
    record["warnings"] = list(farm.warnings)
    p = out_dir / "run.json"
    write_json(p, record)
    written.append(p)
    return written, record


def _task_grid(zones: Any, mcrs: Any, *, farm: FarmResult, paddock: str) -> dict[str, Any]:
    """In WGS 84, the ISO 11783-10 task's own grid (``transform`` and ``shape`` for
    :func:`geosoil.prescriptions.zone_raster`), so that the zone GeoTIFF and the task data
    of a pass hold the same cells with the same rates; else nothing (a grid of its own)."""
    if not mcrs.equals("EPSG:4326"):
        return {}
    prep = farm.prep
    boundary = prep.paddocks.loc[prep.paddocks["paddock"] == paddock].geometry.iloc[0]
    grid = grid_from_zones(zones, boundary=boundary, crs=zones.crs,
                           cell_size_m=prep.project.settings.grid.cell_size_m)
    return {"transform": grid.transform, "shape": (grid.rows, grid.columns)}


def _write_grids(farm: FarmResult, out_dir: Path, cog: Any, progress: Any) -> None:
    """The surfaces (each deeper layer's with its suffix), the cell chemistry and the
    per-cell rates with each rule's (and, with several layers, each layer's) share."""
    prep = farm.prep
    for (paddock, variable), surf in farm.surfaces.items():
        grid = prep.grids[paddock]
        folder = out_dir / "surfaces" / prep.paddock_files[paddock]
        unit = _unit_of(variable)
        values = surf.estimate
        if variable == "al" and paddock in farm.paddocks and "al" in farm.paddocks[paddock].cells:
            values = farm.paddocks[paddock].cells["al"]  # at most the acidity, as the rates use
        cog(folder / f"{variable}.tif", values, grid.transform,
            f"{_title_of(variable)} ({surf.method})", unit)
        if surf.std is not None:
            cog(folder / f"{variable}_sd.tif", surf.std, grid.transform,
                f"{_title_of(variable)}: kriging standard deviation", unit)
    for name, pr in farm.paddocks.items():
        folder = out_dir / "surfaces" / prep.paddock_files[name]
        for q in CELL_SURFACES:
            if q in pr.cells and (name, q) not in farm.surfaces:
                cog(folder / f"{q}.tif", pr.cells[q], pr.grid.transform,
                    f"{TITLES[q]} (derived from the interpolated amounts)", SURFACE_UNITS[q])
        for layer, cells in pr.layers:  # each deeper layer's own chemistry and classes
            for q in CELL_SURFACES:
                qn = q + layer.suffix
                if q in cells and (name, qn) not in farm.surfaces:
                    cog(folder / f"{qn}.tif", cells[q], pr.grid.transform,
                        f"{_title_of(qn)} (derived from the interpolated amounts)",
                        SURFACE_UNITS[q])

    # per-cell rates and each rule's contribution
    progress("writing rates")
    for name, pr in farm.paddocks.items():
        folder = out_dir / "rates" / prep.paddock_files[name]
        for product, rate in pr.rates.product_rates.items():
            cog(folder / f"{prep.product_files[product]}.tif", rate, pr.grid.transform,
                f"{product} rate before spreader limits", "kg/ha")
        for (rule, product), contrib in pr.rates.contributions.items():
            cog(folder / f"{prep.product_files[product]}__{slug(rule)}.tif", contrib,
                pr.grid.transform, f"{product} for rule {rule}", "kg/ha")
        gyp = prep.project.settings.rates.for_paddock(name).gypsum.product
        for label, part in (pr.rates.layer_rates.items() if prep.layers else ()):
            key = label.replace(" cm", "").replace(" ", "")
            cog(folder / f"{prep.product_files[gyp]}__gypsum_{key}cm.tif", part,
                pr.grid.transform, f"{gyp} for rule gypsum, {label} layer's part", "kg/ha")


def task_designator(paddock: str, label: str, product: str, step: str = "") -> str:
    """A task's name for the terminal: paddock, pass and product, within ISO 11783-10's
    32 characters where it can be.

    The product's label when the name fits ("Red Hill Agricultural lime"), else its
    key in ``[products]`` ("Tiny Lot lime": the default label "agricultural lime
    (calcite)" is long); the product element keeps the whole label either way. A name
    that does not fit even so (a long paddock name) is cut later, and listed.

    Examples
    --------
    >>> task_designator("Tiny Lot", "agricultural lime (calcite)", "lime")
    'Tiny Lot lime'
    >>> task_designator("Red Hill", "Gypsum", "gypsum", "pass 1/2")
    'Red Hill pass 1/2 Gypsum'
    """
    head = " ".join(t for t in (paddock, step) if t)
    full = f"{head} {label}"
    if len(full) <= MAX_DESIGNATOR or len(f"{head} {product}") > MAX_DESIGNATOR:
        return full
    return f"{head} {product}"


class _IsoNames:
    """Every ISO 11783-10 designator of a run: distinct, cut to the standard's 32
    characters, each change kept (original, short) for run.json and the summary.

    Only the names of task sets that are written count: a paddock and product with
    no zone above 0 gets no task, so its name is neither shortened nor listed (a paddock
    without a task is still a partfield of the farm's task set, when that is written)."""

    def __init__(self, farm: FarmResult) -> None:
        prep = farm.prep
        s = prep.project.settings
        self.changed: list[dict[str, str]] = []
        word = "season" if s.spreader.split_into == "seasons" else "pass"
        labels: list[str] = []
        tasks: list[str] = []
        self.keys: list[tuple[str, str, int, int]] = []
        for name, pr in farm.paddocks.items():
            for product in pr.rates.product_rates:
                z = pr.zones[pr.zones["product"] == product]
                if z.empty or not (z["rate_kg_ha"] > 0).any():
                    continue  # no task is written (see _write_isoxml), so no name either
                label = str(prep.products[product].label if product in prep.products
                            else product)
                n = n_passes(z)
                for k in range(1, n + 1):
                    lab = f"{word} {k}/{n} {label}" if n > 1 else label
                    labels.append(lab)
                    tasks.append(task_designator(name, label, product,
                                                 f"{word} {k}/{n}" if n > 1 else ""))
                    self.keys.append((name, product, k, n))
        # only the names that go into a written task set are shortened and recorded
        self.farm = self._short("farm", [s.farm or "farm"] if self.keys else [])\
            .get(s.farm or "farm", s.farm or "farm")
        # the farm's task set holds every paddock when it is written (_write_farm_taskset)
        with_task = list(dict.fromkeys(k[0] for k in self.keys))
        rest = [str(p) for p in prep.paddocks["paddock"] if p not in with_task]
        self.paddock = self._short("paddock", with_task + (rest if self.keys else []))
        self._labels = dict(zip(self.keys, labels, strict=True))
        self._tasks = dict(zip(self.keys, tasks, strict=True))
        self.product = self._short("product", labels)
        self.task = self._short("task", tasks)

    def _short(self, what: str, names: list[str]) -> dict[str, str]:
        unique = list(dict.fromkeys(names))
        short, changed = designators(unique)
        for original, new in changed:
            self.changed.append({"what": what, "original": original, "short": new,
                                 "format": f"ISO 11783-10 designator ({MAX_DESIGNATOR} "
                                           "characters)"})
        return dict(zip(unique, short, strict=True))

    def label(self, key: tuple[str, str, int, int]) -> str:
        return self.product[self._labels[key]]

    def task_name(self, key: tuple[str, str, int, int]) -> str:
        return self.task[self._tasks[key]]


def _write_isoxml(
    folder: Path, zones: Any, *, farm: FarmResult, paddock: str, product: str,
    names: _IsoNames, tasks: list[Task], partfields: dict[str, int],
    pass_files: _PassFiles | None = None,
) -> list[Path]:
    """ISO 11783-10 task data for one paddock and product: one task set per pass.

    A controller applies one rate per cell per task, so a zone whose rate
    needs several passes (spreader max per pass) is written as pass 1, pass 2...
    task sets (``<product>_pass<k>_isoxml/``, named like the other pass files),
    each holding the per-pass rate of the zones that still need it (and 0
    elsewhere). Each task is one pass, so it carries no "needs several passes"
    warning; its product name starts with the pass ("pass 2/3 ...", or "season
    2/3 ..." when rates are split into seasons) so that the terminal tells them
    apart even when the name is cut to the standard's 32 characters.
    Nothing is written when no zone gets product. Each task is also added to
    ``tasks`` (and its paddock to ``partfields``) for the farm's task set. A pass's task
    set made from the same zones, boundary, exclusions and names as the one in the folder
    being replaced is copied from it (``pass_files``), its grid read back.
    """
    if not (zones["rate_kg_ha"] > 0).any():
        return []
    prep = farm.prep
    s = prep.project.settings
    boundary = prep.paddocks.loc[prep.paddocks["paddock"] == paddock].geometry.iloc[0]
    excl = None
    if not prep.exclusions.empty:
        near = prep.exclusions[prep.exclusions.intersects(boundary)]
        excl = near if not near.empty else None
    pf = Partfield(name=names.paddock[paddock], boundary=boundary, crs=zones.crs,
                   exclusions=excl)
    n_tasks = n_passes(zones)
    written: list[Path] = []
    place = _partfield_digest(pf)
    for k, zk in pass_frames(zones):
        key = (paddock, product, k, n_tasks)
        sub = folder / (f"{prep.product_files[product]}"
                        f"{pass_suffix(k, n_tasks, split_into=s.spreader.split_into)}_isoxml")
        xml, grd = sub / "TASKDATA" / "TASKDATA.XML", sub / "TASKDATA" / "GRD00001.bin"
        made_of = _frame_key(zk, "task data", place, names.farm, names.task_name(key),
                             names.label(key), s.grid.cell_size_m, k, n_tasks)
        copied = pass_files.reuse_taskset(xml, grd, made_of) if pass_files is not None else None
        grid = copied if copied is not None else grid_from_zones(
            zk, boundary=boundary, crs=zones.crs, cell_size_m=s.grid.cell_size_m)
        task = Task(name=names.task_name(key), partfield=0, product=names.label(key), grid=grid)
        if copied is not None:
            written.extend([xml, grd])
        else:
            written.extend(write_taskset(sub, partfields=[pf], tasks=[task], farm=names.farm))
            if pass_files is not None:
                pass_files.made(xml, made_of)
                pass_files.made(grd, made_of, grid=[grid.min_north, grid.min_east,
                                                    grid.cell_north, grid.cell_east,
                                                    grid.rows, grid.columns])
        index = partfields.setdefault(paddock, len(partfields))
        tasks.append(dataclasses.replace(task, partfield=index))
    return written


def _partfield_digest(pf: Partfield) -> str:
    """SHA-256 of what a task set's partfield is made from: its name, boundary, CRS and
    exclusions."""
    h = hashlib.sha256(pf.name.encode())
    h.update(shapely.to_wkb(pf.boundary))
    h.update(pyproj.CRS.from_user_input(pf.crs).to_wkt().encode())
    if pf.exclusions is not None:
        for g in pf.exclusions.geometry:
            h.update(shapely.to_wkb(g))
        h.update(pd.DataFrame(pf.exclusions.drop(columns=pf.exclusions.geometry.name))
                 .to_csv().encode())
    return h.hexdigest()


def gpkg_layers(farm: FarmResult) -> dict[str, Any]:
    """The layers of ``farm.gpkg``, in the working CRS: paddocks, exclusions, samples,
    ``zones_<product>`` (all passes) and ``zones_<product>_pass<k>`` (``_season<k>``) for
    a product some zone needs in several passes (the paddocks that have that pass)."""
    import geopandas as gpd

    prep = farm.prep
    s = prep.project.settings
    pads = prep.paddocks[["paddock", "geometry"]].copy()
    pads["area_ha"] = pads.geometry.area / 10_000.0
    layers: dict[str, Any] = {"paddocks": pads}
    if not prep.exclusions.empty:
        layers["exclusions"] = prep.exclusions
    layers["samples"] = prep.all_samples
    for product, files in prep.product_files.items():
        z = farm.zones[farm.zones["product"] == product]
        if z.empty:
            continue
        base = "zones_" + files.replace("-", "_")
        layers[base] = z
        per_pass: dict[int, list[Any]] = {}
        for name in z["paddock"].unique():
            zp = z[z["paddock"] == name]
            for k, zk in pass_frames(zp):
                per_pass.setdefault(k, []).append(zk)
        if len(per_pass) > 1:
            for k, frames in per_pass.items():
                layer = base + pass_suffix(k, len(per_pass), split_into=s.spreader.split_into)
                layers[layer] = gpd.GeoDataFrame(pd.concat(frames, ignore_index=True),
                                                 crs=z.crs)
    return layers


def _write_farm_gpkg(path: Path, farm: FarmResult) -> Path:
    layers = gpkg_layers(farm)
    styles = {"paddocks": plain_style("paddocks", "outline"),
              "exclusions": plain_style("exclusions", "exclusion"),
              "samples": plain_style("samples", "point")}
    for name, layer in layers.items():
        if name.startswith("zones_"):
            styles[name] = zone_styles(name, layer["rate_kg_ha"].astype(float).tolist())
    return write_gpkg(path, layers, styles=styles)


def _write_farm_taskset(
    out_dir: Path, *, farm: FarmResult, names: _IsoNames, tasks: list[Task],
    partfields: dict[str, int],
) -> list[Path]:
    """The farm's task set: one partfield per paddock (those with a task first, in the
    order of their tasks; then the paddocks with nothing prescribed, so a terminal has every
    boundary), every task of the run. Nothing when no paddock has a task."""
    if not tasks:
        return []
    prep = farm.prep
    pfs = []
    order = sorted(partfields, key=partfields.__getitem__)
    order += [p for p in prep.paddocks["paddock"] if p not in partfields]
    for paddock in order:
        boundary = prep.paddocks.loc[prep.paddocks["paddock"] == paddock].geometry.iloc[0]
        excl = None
        if not prep.exclusions.empty:
            near = prep.exclusions[prep.exclusions.intersects(boundary)]
            excl = near if not near.empty else None
        pfs.append(Partfield(name=names.paddock[paddock], boundary=boundary, crs=prep.crs,
                             exclusions=excl))
    return write_taskset(out_dir / "prescriptions" / FARM_TASKSET, partfields=pfs, tasks=tasks,
                         farm=names.farm)


def _surface_record(surf: Any) -> dict[str, Any]:
    rec: dict[str, Any] = {
        "paddock": surf.paddock,
        "variable": surf.variable,
        "unit": SURFACE_UNITS.get(surf.variable, ""),
        "method": surf.method,
        "n_samples": surf.n_samples,
        "log_transform": surf.log_transform,
        "notes": list(surf.notes),
    }
    if surf.model is not None:
        m = surf.model
        rec["variogram"] = {
            "model": m.name, "nugget": m.nugget, "partial_sill": m.psill,
            "range_m": m.range, "scope": surf.variogram_scope,
            "scale": "log" if surf.log_transform else "linear",
        }
        rec["candidates"] = [
            {"model": n, "cv_rmse": r, "cv_msse": q} for n, r, q in surf.candidates
        ]
    if surf.cross_validation is not None:
        cv = surf.cross_validation
        rec["cross_validation"] = {
            "n": int(cv.n), "mean_error": float(cv.mean_error), "rmse": float(cv.rmse),
            "msse": float(cv.msse),
        }
    finite = surf.estimate[np.isfinite(surf.estimate)]
    if finite.size:
        rec["range_of_values"] = [float(finite.min()), float(finite.max())]
    if surf.std is not None:
        sd = surf.std[np.isfinite(surf.std)]
        if sd.size:
            rec["std_mean"] = float(sd.mean())
            rec["std_max"] = float(sd.max())
    return rec


def gypsum_water(farm: FarmResult) -> list[dict[str, Any]]:
    """Per zone of a gypsum product: the water (mm) that only dissolves its rate.

    The product's share of CaSO4.2H2O is its Ca over pure gypsum's Ca; the
    solubility is ``[salinity] gypsum_solubility_g_l`` (see
    :func:`geosoil.salinity.gypsum_water_mm`). A run works it out once
    (:func:`build_record`); the cautions and the report take it from there.
    """
    prep = farm.prep
    sal = prep.project.settings.salinity
    pure_ca = MATERIALS["gypsum"].fraction("Ca")
    out: list[dict[str, Any]] = []
    zones = farm.zones
    if zones.empty or "rate_kg_ha" not in zones.columns:
        return out
    gcol = zones.geometry.name
    cells: dict[str, Any] = {}  # per paddock: its cells' centres and ESP, made once
    for z in zones.to_dict("records"):
        product = prep.products.get(str(z.get("product")))
        if product is None or product.material != "gypsum":
            continue
        rate = float(z["rate_kg_ha"]) if np.isfinite(z["rate_kg_ha"]) else 0.0
        if rate <= 0:
            continue
        fraction = min(1.0, product.ca_fraction / pure_ca) if product.ca_fraction > 0 else 1.0
        mm = float(gypsum_water_mm(rate / 1000.0, gypsum_fraction=fraction,
                                   solubility_g_l=sal.gypsum_solubility_g_l))
        share = _sodic_share(farm, str(z["paddock"]), z[gcol], cells=cells)
        out.append({"paddock": str(z["paddock"]), "zone": str(z.get("zone", "")),
                    "product": str(z["product"]), "rate_kg_ha": rate,
                    "gypsum_fraction": fraction, "water_mm": mm,
                    "leaching_esp_share": share, "leaching_caution": bool(share and share > 0)})
    return out


def _sodic_share(farm: FarmResult, paddock: str, geometry: Any,
                 cells: dict[str, Any] | None = None) -> float | None:
    """The share of a zone's cells whose ESP (in any layer gypsum treats) is at or above the
    gypsum rule's leaching limit: there the displaced sodium must be leached, so the soil
    must drain. None when the zone has no cells with ESP. ``cells`` keeps each paddock's
    cell centres and largest ESP between calls (a spreader grid has thousands of zones)."""
    import shapely

    pr = farm.paddocks.get(paddock)
    if pr is None or geometry is None or geometry.is_empty:
        return None
    cells = {} if cells is None else cells
    if paddock not in cells:
        treated = {label for label, *_ in pr.gypsum_spans}
        found = [pr.cells.get("esp")] + [c.get("esp") for layer, c in pr.layers
                                         if layer.label in treated]
        esps = [e for e in found if e is not None]
        cells[paddock] = (None if not esps else
                          (*pr.grid.cell_centres(),
                           np.fmax.reduce([e[pr.grid.mask] for e in esps])))
    if cells[paddock] is None:
        return None
    x, y, most = cells[paddock]
    limit = farm.prep.project.settings.rates.for_paddock(paddock).gypsum.leaching_note_esp_percent
    # the cells in the zone's bounds first (a zone is small beside its paddock), then in it
    x0, y0, x1, y1 = geometry.bounds
    near = np.flatnonzero((x >= x0) & (x <= x1) & (y >= y0) & (y <= y1))
    many = near.size > 64 and not shapely.is_prepared(geometry)
    if many:
        shapely.prepare(geometry)  # many cells in one zone: the indexed point-in-polygon test
    inside = near[shapely.contains_xy(geometry, x[near], y[near])]
    if many:
        shapely.destroy_prepared(geometry)  # the zone's own geometry: left as it was
    if not inside.size:
        return None
    values = most[inside]
    known = np.isfinite(values)
    return float((values[known] >= limit).mean()) if known.any() else None


#: What the gypsum water figure means, for run.json and the report.
GYPSUM_WATER_NOTE = (
    "water that only dissolves the gypsum (about 2.5 g/L at 25 degrees C, common practice; "
    "about 40 mm per t/ha of pure gypsum): leaching the displaced sodium below the root zone "
    "needs more, and only where the soil drains; where it does not, drainage comes first"
)


def gypsum_water_cautions(farm: FarmResult,
                          water: list[dict[str, Any]] | None = None) -> list[str]:
    """One caution line per paddock with gypsum: the range of dissolving water over its zones
    (``water``: :func:`gypsum_water`'s rows, worked out here when not given)."""
    rows = gypsum_water(farm) if water is None else water
    lines = []
    for paddock in dict.fromkeys(r["paddock"] for r in rows):
        mm = [r["water_mm"] for r in rows if r["paddock"] == paddock]
        span = f"{min(mm):.0f} mm" if round(min(mm)) == round(max(mm)) else (
            f"{min(mm):.0f}-{max(mm):.0f} mm by zone")
        lines.append(f"Gypsum on {paddock}: about {span} of rain or irrigation is "
                     f"{GYPSUM_WATER_NOTE}.")
    return lines


def run_cautions(farm: FarmResult, water: list[dict[str, Any]] | None = None) -> list[str]:
    """The run's one list of cautions: the standing ones (:data:`geosoil.report.CAUTIONS`)
    and a gypsum-water line per paddock with gypsum (``water`` as for
    :func:`gypsum_water_cautions`). run.json, the report and the command line's summary all
    show this list."""
    return [*report_mod.CAUTIONS, *gypsum_water_cautions(farm, water)]


def salinity_record(farm: FarmResult,
                    water: list[dict[str, Any]] | None = None) -> dict[str, Any]:
    """run.json's salinity block: the ECe basis, class areas per paddock, gypsum water
    (``water`` as for :func:`gypsum_water_cautions`)."""
    prep = farm.prep
    sal = prep.project.settings.salinity
    areas = []
    for name, g in prep.grids.items():
        cells = farm.paddocks[name].cells if name in farm.paddocks else {}
        row: dict[str, Any] = {"paddock": name}
        for layer, names in (("salinity_class", SALINITY_CLASSES),
                             ("dispersion_class", DISPERSION_CLASSES)):
            arr = cells.get(layer)
            if arr is None:
                continue
            row[layer + "_ha"] = {n: float(np.count_nonzero(arr == i) * g.cell_area_ha)
                                  for i, n in enumerate(names)}
        areas.append(row)
    return {
        "ece_from_ec_1_5": sal.ece_basis_text(),
        "classes": "USDA Handbook 60: saline at ECe >= "
        f"{sal.saline_ece_ds_m:g} dS/m, sodic at ESP >= {sal.sodic_esp_percent:g} %",
        "dispersion_limits": dataclasses.asdict(DispersionLimits()),
        "paddocks": areas,
        "gypsum_water": gypsum_water(farm) if water is None else water,
        "gypsum_water_note": GYPSUM_WATER_NOTE,
    }


def build_record(farm: FarmResult, *, out_dir: Path) -> dict[str, Any]:
    """The machine-readable record of a run (``run.json``).

    Parameters
    ----------
    farm : FarmResult
        The computed farm.
    out_dir : Path
        The output folder; file paths in the record are relative to it.

    Returns
    -------
    dict
        Settings, input checksums, versions, fits, zones, totals and warnings (JSON-ready).
    """
    prep = farm.prep
    s = prep.project.settings
    zones = farm.zones
    water = gypsum_water(farm)  # once: the cautions and the salinity block share it
    zone_rows = []
    for _, z in zones.iterrows():
        zone_rows.append({
            k: (v.item() if hasattr(v, "item") else v)
            for k, v in z.items() if k != "geometry"
        })
    totals = farm.tonnage
    return {
        "geosoil": {"version": versions()["geosoil"], "created": now_utc()},
        "project_file": str(prep.project.path) if prep.project.path else None,
        "inputs": [{"path": p, "sha256": h} for p, h in input_checksums(prep.project)],
        "settings": to_mapping(s),
        "versions": versions(),
        "working_crs": {"wkt": prep.crs.to_wkt(), "name": prep.crs.name,
                        "epsg": prep.crs.to_epsg(), "reason": prep.crs_reason},
        "samples": {
            "file": str(prep.read.file),
            "n_read": int(len(prep.read.samples)),
            "n_used": int(len(prep.all_samples)),
            "columns": dict(prep.read.columns),
            "units": dict(prep.read.units),
            # every column not read and why (the warnings name those that may be analytes)
            "columns_not_read": dict(prep.read.unused),
            "skipped_rows": [{"row": r, "reason": why} for r, why in prep.read.skipped] + [
                {"row": r, "reason": f"a note below the table, not a sample: '{text}'"}
                for r, text in prep.read.footnotes],
        },
        "paddocks": [
            {"paddock": name, "cells": int(g.mask.sum()), "cell_size_m": s.grid.cell_size_m,
             "area_ha": float(g.mask.sum() * g.cell_area_ha),
             "samples": int((prep.samples["paddock"] == name).sum())}
            for name, g in prep.grids.items()
        ],
        "surfaces": [_surface_record(sf) for sf in farm.surfaces.values()],
        "surfaces_from_cache": farm.cache_hit,
        "rules": {
            "notes": farm.rule_notes,
            # every rule that gave no product anywhere, and why (prescribed)
            "gave_no_product": prescribed(farm)[1],
            "skipped": sorted({f"{r}: {why}" for pr in farm.paddocks.values()
                               for r, why in pr.rates.skipped}),
            "cell_notes": {name: pr.cell_notes + list(pr.rates.notes)
                           for name, pr in farm.paddocks.items()},
        },
        "zones": zone_rows,
        "tonnage": json.loads(totals.to_json(orient="records")),
        "timings_s": {k: round(v, 3) for k, v in farm.timings.items()},
        "cpu_s": {k: round(v, 3) for k, v in farm.cpu_timings.items()},
        "warnings": list(farm.warnings),
        "lime": {
            "method": s.rates.lime.method,
            "targets": {name: pr.rates.target for name, pr in farm.paddocks.items()
                        if pr.rates.target},
            "trigger_margin_ph": s.rates.lime.trigger_margin_ph,
            "lab_ph_method": _ph_method(farm),
            "needs_test": lime_needs_test(farm),
        },
        "first_season_tonnes": (
            first_season_tonnes(zones) if s.spreader.split_into == "seasons" else None
        ),
        "salinity": salinity_record(farm, water),
        "soluble_salts": soluble_salts_record(farm),
        "layers": layers_record(farm),
        "cautions": run_cautions(farm, water),
    }


def soluble_salts_record(farm: FarmResult) -> dict[str, Any]:
    """run.json's soluble_salts block: what ``[chemistry] soluble_salts`` did to the
    exchangeable cations (mode, source, per cation the extract's water, the samples
    corrected, set to 0 and left as extracted)."""
    return dict(farm.prep.soluble_salts) or {
        "mode": farm.prep.project.settings.chemistry.soluble_salts}


def soluble_salts_text(farm: FarmResult) -> str:
    """The report's line on soluble salts in the exchangeable cations."""
    rec = soluble_salts_record(farm)
    if rec.get("mode") != "subtract":
        given = [CATION_SYMBOLS[c] for c in rec.get("soluble_given", [])]
        return ("the lab's figures, not corrected ([chemistry] soluble_salts = 'warn'); "
                + (f"the file gives soluble {', '.join(given)}: 'subtract' takes them off "
                   "where the lab did not wash the salts out first" if given else
                   "the file gives no soluble cations to subtract"))
    cations = rec.get("cations") or {}
    if not cations:
        return "'subtract' set, but the file gives no soluble cations: nothing subtracted"
    parts = [f"{CATION_SYMBOLS[c]} at {v['samples']} sample(s), {v['water_l_per_kg']:g} L/kg"
             + (f", set to 0 at {len(v['clamped'])}" if v["clamped"] else "")
             for c, v in cations.items()]
    return "soluble amounts subtracted ([chemistry] soluble_salts = 'subtract'): " + \
        "; ".join(parts)


def layers_record(farm: FarmResult) -> dict[str, Any] | None:
    """run.json's layers block (samples at several depths, else None): the layers, the
    depth gypsum treats, and per paddock the part of it each layer stands for, its bulk
    density, its mean gypsum rate and its class areas."""
    prep = farm.prep
    if not prep.layers:
        return None
    s = prep.project.settings
    paddocks = []
    for name, pr in farm.paddocks.items():
        g = pr.grid
        layers = []
        for label, top, bottom, bd in pr.gypsum_spans:
            part = pr.rates.layer_rates.get(label)
            vals = None if part is None else part[g.mask & np.isfinite(part)]
            layers.append({
                "layer": label, "from_cm": round(top, 6), "to_cm": round(bottom, 6),
                "bulk_density_g_cm3": (float(bd) if np.ndim(bd) == 0 else "raster"),
                "gypsum_mean_kg_ha": (float(vals.mean()) if vals is not None and vals.size
                                      else None),
            })
        classes = []
        for layer, cells in [(prep.layers[0].layer, pr.cells), *pr.layers]:
            row: dict[str, Any] = {"layer": layer.label}
            esp = cells.get("esp")
            if esp is not None:
                ok = g.mask & np.isfinite(esp)
                row["esp_mean"] = float(esp[ok].mean()) if ok.any() else None
                row["sodic_ha"] = float(np.count_nonzero(
                    ok & (esp >= s.chemistry.sodic_esp_percent)) * g.cell_area_ha)
            for q, names in (("salinity_class", SALINITY_CLASSES),
                             ("dispersion_class", DISPERSION_CLASSES)):
                arr = cells.get(q)
                if arr is not None:
                    row[q + "_ha"] = {n: float(np.count_nonzero(arr == i) * g.cell_area_ha)
                                      for i, n in enumerate(names)}
            classes.append(row)
        paddocks.append({"paddock": name, "gypsum_layers": layers, "layer_classes": classes})
    return {
        "layers": [{"layer": ls.layer.label, "top_cm": ls.layer.top_cm,
                    "bottom_cm": ls.layer.bottom_cm, "samples": int(len(ls.samples)),
                    "surface_suffix": "" if i == 0 else ls.layer.suffix}
                   for i, ls in enumerate(prep.layers)],
        "gypsum_treat_depth_cm": treat_depth_cm(s),
        "other_rules": f"lime, calcium and balance read the top layer "
                       f"({prep.layers[0].layer.label}) over [soil] depth_m = "
                       f"{s.soil.depth_m:g} m",
        "paddocks": paddocks,
    }


def _ph_method(farm: FarmResult, var: str | None = None) -> str:
    """The method of the ``ph`` variable (pH in water), of ``ph_cacl2``, or (no ``var``) of the
    pH the rules read: water where the lab gave it, else CaCl2."""
    if var is not None:
        return "CaCl2" if var == "ph_cacl2" else "water"
    method, _ = rule_ph(farm.prep.read.columns)
    return method or "water"


def _ph_var(farm: FarmResult) -> str:
    """The pH variable the rules read: ``ph`` (water) where the lab gave it, else ``ph_cacl2``."""
    return "ph_cacl2" if _ph_method(farm) == "CaCl2" else "ph"


def ph_label(farm: FarmResult, var: str | None = None) -> str:
    """``"pH (CaCl2)"`` or ``"pH (water)"``: how the lab measured the pH."""
    return "pH (CaCl2)" if _ph_method(farm, var) == "CaCl2" else "pH (water)"


def acid_ph_threshold(farm: FarmResult, var: str | None = None) -> float:
    """The pH below which a sample counts as acid, for the pH method."""
    chem = farm.prep.project.settings.chemistry
    return chem.acid_ph_cacl2 if _ph_method(farm, var) == "CaCl2" else chem.acid_ph


#: The soil surfaces of the map and report, in the order of the layer panel:
#: (variable, colour kind of :func:`geosoil.presentation.classes_for`).
MAP_SURFACES: tuple[tuple[str, str], ...] = (
    ("esp", "esp"), ("ph", "ph"), ("ph_cacl2", "ph"), ("acid_sat", "acid"), ("al_sat", "acid"),
    ("ca_sat", "amount"), ("mg_sat", "amount"), ("k_sat", "amount"), ("ecec", "amount"),
    ("ca", "amount"), ("mg", "amount"), ("k", "amount"), ("na", "amount"),
    ("acidity", "amount"), ("al", "amount"), ("ec", "ec"),
    ("bph_smp", "amount"), ("bph_sikora", "amount"), ("bph_mehlich", "amount"),
    ("bph_adams_evans", "amount"),
    ("oc", "amount"), ("om", "amount"), ("clay", "amount"), ("phbc", "amount"),
    ("ece", "ec"), ("ec_1_5", "ec"),
    ("salinity_class", "salinity_class"), ("dispersion_class", "dispersion_class"),
    ("cross", "amount"), ("cec_ph7", "amount"), ("acidity_potential", "amount"),
)

#: The surfaces each deeper layer adds to the map (subsoil sodicity first).
LAYER_MAP_SURFACES: tuple[tuple[str, str], ...] = (
    ("esp", "esp"), ("salinity_class", "salinity_class"),
    ("dispersion_class", "dispersion_class"), ("ece", "ec"), ("ec_1_5", "ec"),
    ("na", "amount"), ("ecec", "amount"),
)


def map_surfaces(farm: FarmResult) -> list[tuple[str, str]]:
    """The map's soil surfaces: the top layer's, then each deeper layer's (``esp_10-30cm``)."""
    out = list(MAP_SURFACES)
    for ls in farm.prep.layers[1:]:
        out.extend((var + ls.layer.suffix, kind) for var, kind in LAYER_MAP_SURFACES)
    return out

_MAP_ORDER = [m for m, _ in MAP_SURFACES]

#: The surface that explains each rule's rate (the map opens on it).
_EXPLAINS = {"gypsum": "esp", "calcium": "ca", "balance": "ca_sat"}
_EXPLAINS_LIME = {"kamprath": "al", "cochrane": "al_sat", "acidity_share": "acid_sat",
                  "smp": "ph", "sikora": "ph", "mehlich": "ph", "adams_evans": "ph", "phbc": "ph",
                  "base_saturation": "cec_ph7"}


#: Colours of the "lime requirement needs a test" layer: cells with advice (or not acid),
#: and acid cells no lime method could run on.
_NEEDS_TEST_CLASSES = presentation.Classes(
    (0.5,), ("#f0f0f0", "#d95f02"),
    ("lime advice given, or not acid", "acid: lime requirement needs a test"),
)


def lime_needs_test(farm: FarmResult) -> list[dict[str, Any]]:
    """Per paddock, the acid area no lime method could run on and what to ask the lab for.

    Parameters
    ----------
    farm : FarmResult
        The computed farm.

    Returns
    -------
    list of dict
        ``paddock``, ``cells``, ``area_ha``, ``ask_for`` for each paddock with such cells.
    """
    out = []
    for name, g in farm.prep.grids.items():
        rr = farm.paddocks[name].rates
        n = rr.needs_test_cells
        if n:
            out.append({"paddock": name, "cells": n, "area_ha": float(n * g.cell_area_ha),
                        "ask_for": rr.ask_for})
    return out


#: How :func:`prescribed` says that a rule ran and no cell needed its product.
RAN_NO_NEED = "rule ran and no cell needs its product"


def reasons_to_say(headline: str, why: Sequence[str]) -> list[str]:
    """The lines of :func:`prescribed`'s ``why`` that the command line's summary and the
    report's title say: every one when nothing was prescribed; else those that matter (a
    rule that could not run, acid soil that needs a lime test), not a rule that ran and
    found no cell in need (``run.json`` and the report's methods keep every line).

    >>> reasons_to_say("Prescribed: gypsum 1.00 t (farm totals).",
    ...                ["the calcium " + RAN_NO_NEED, "the lime rule could not run on ..."])
    ['the lime rule could not run on ...']
    """
    if not headline.startswith("Prescribed"):
        return list(why)
    return [w for w in why if not w.endswith(RAN_NO_NEED)]


def prescribed(farm: FarmResult) -> tuple[str, list[str]]:
    """What the run prescribed, in one sentence, and why a rule gave nothing.

    Parameters
    ----------
    farm : FarmResult
        The computed farm.

    Returns
    -------
    headline : str
        ``"Prescribed: gypsum 25.02 t, lime 81.10 t (farm totals)"``, or ``"Nothing
        prescribed: ..."`` when no zone of any paddock gets a product.
    why : list of str
        For each rule that gave no product anywhere: that it could not run (and what it
        needs), or that no cell needs it; and the acid area where no lime method could run.
    """
    t = farm.tonnage
    farm_rows = t[(t["level"] == "farm") & (t["tonnes"] > 0)] if len(t) else t
    amounts = [f"{p} {v:,.2f} t" for p, v in zip(farm_rows["product"], farm_rows["tonnes"],
                                                 strict=True)]
    ran: dict[str, float] = {}
    skipped: dict[str, list[tuple[str, str]]] = {}
    for name, pr in farm.paddocks.items():
        for (rule, _product), rate in pr.rates.contributions.items():
            ran[rule] = ran.get(rule, 0.0) + float(np.nansum(rate))
        for rule, reason in pr.rates.skipped:
            skipped.setdefault(rule, []).append((name, reason))
    why: list[str] = []
    for rule in [*ran, *(r for r in skipped if r not in ran)]:
        if ran.get(rule, 0.0) > 0:
            continue
        pairs = skipped.get(rule, [])
        if not pairs:
            why.append(f"the {rule} {RAN_NO_NEED}")
            continue
        reason = pairs[0][1]
        if rule == "lime":
            reason = reason.split(" (", 1)[0].replace("method_order", "[rates.lime] method_order")
        where = ("any paddock" if len(pairs) == len(farm.paddocks)
                 else "paddock " + ", ".join(f"'{n}'" for n, _ in pairs))
        why.append(f"the {rule} rule could not run on {where}: {reason}"
                   + ("; no cell of the other paddocks needs its product" if rule in ran else ""))
    for row in lime_needs_test(farm):
        why.append(f"paddock '{row['paddock']}': lime requirement needs a test on "
                   f"{row['area_ha']:,.2f} ha of acid soil where no lime method can run"
                   + (f"; ask the lab for {row['ask_for']}" if row["ask_for"] else ""))
    if amounts:
        return "Prescribed: " + ", ".join(amounts) + " (farm totals).", why
    return ("Nothing prescribed: no zone of any paddock gets gypsum, lime or another product, "
            "so no prescription files were written.", why)


def _needs_test_layer(farm: FarmResult) -> tuple[np.ndarray, Any] | None:
    parts = []
    for name, grid in farm.prep.grids.items():
        nt = farm.paddocks[name].rates.needs_test
        if nt is not None and nt.any():
            parts.append((grid, np.where(grid.mask, nt.astype(float), np.nan)))
    return mosaic(parts) if parts else None


def farm_layer(farm: FarmResult, var: str, what: str = "estimate"
               ) -> tuple[np.ndarray, Any] | None:
    """One variable over the whole farm (the paddocks' grids mosaicked), or None.

    ``what`` is ``"estimate"`` (the interpolated or derived cells), ``"std"`` (the
    kriging standard deviation) or ``"rate:<product>"`` (the per-cell rate, kg/ha).
    """
    parts = []
    for name, grid in farm.prep.grids.items():
        pr = farm.paddocks[name]
        if what.startswith("rate:"):
            arr = pr.rates.product_rates.get(what[5:])
        else:
            sf = farm.surfaces.get((name, var))
            if what == "std":
                arr = None if sf is None else sf.std
            else:
                arr = pr.cells.get(var)
                for layer, cells in pr.layers:  # a deeper layer's cells: esp_10-30cm
                    if arr is None and var.endswith(layer.suffix):
                        arr = cells.get(var[: -len(layer.suffix)])
                if arr is None and sf is not None:
                    arr = sf.estimate
        if arr is not None:
            parts.append((grid, arr))
    if not parts:
        return None
    arr, transform = mosaic(parts)
    if not np.isfinite(arr).any():
        return None
    return arr, transform


def opening_view(farm: FarmResult) -> tuple[str | None, str | None]:
    """(surface, product) the map opens on: the product with the most tonnes and the
    surface that explains most of its rate."""
    totals = farm.tonnage
    farm_rows = totals[totals["level"].astype(str) == "farm"]
    if not len(farm_rows) or not (farm_rows["tonnes"].astype(float) > 0).any():
        return "esp", None
    product = str(farm_rows.loc[farm_rows["tonnes"].astype(float).idxmax(), "product"])
    by_rule: dict[str, float] = {}
    for pr in farm.paddocks.values():
        for (rule, prod), rate in pr.rates.contributions.items():
            if prod == product:
                by_rule[rule] = by_rule.get(rule, 0.0) + float(np.nansum(rate))
    rule = max(by_rule, key=lambda k: by_rule[k]) if by_rule else ""
    method = farm.prep.project.settings.rates.lime.method
    ph = _ph_var(farm)
    surface = _EXPLAINS_LIME.get(method, "ph") if rule == "lime" else _EXPLAINS.get(rule, "esp")
    surface = ph if surface == "ph" else surface
    return surface, product


def surface_classes(farm: FarmResult, var: str, kind: str, values: np.ndarray) -> Any:
    """The colour classes of one soil surface (same in the map and the report)."""
    s = farm.prep.project.settings
    chem = s.chemistry
    base = split_layer(var)[0]
    classes = presentation.classes_for(
        kind, values, target=acid_ph_threshold(farm, base) if kind == "ph" else None,
        limits=(chem.sodic_esp_percent, chem.strongly_sodic_esp_percent),
    )
    if kind == "salinity_class":
        classes = dataclasses.replace(classes, note=(
            f"USDA Handbook 60: saline at ECe {s.salinity.saline_ece_ds_m:g} dS/m or more, "
            f"sodic at ESP {s.salinity.sodic_esp_percent:g} % or more"))
    return classes


def surface_unit(var: str) -> str:
    """A surface's unit as its legend shows it (none for pH and class codes: the title and
    the legend say what they are)."""
    base = split_layer(var)[0]
    if base in ("ph", "ph_cacl2") or base in presentation.CLASS_CODES:
        return ""
    return SURFACE_UNITS.get(base, "")


def surface_title(farm: FarmResult, var: str) -> str:
    """A surface's name as the map and report show it (a deeper layer's with its depth)."""
    base, label = split_layer(var)
    title = ph_label(farm, base) if base in ("ph", "ph_cacl2") else TITLES.get(base, base)
    return f"{title}, {label}" if label else title


def exclusion_zones(farm: FarmResult) -> Any:
    """The areas not spread, clipped to the paddocks (one row per paddock and name),
    each with ``kind`` ``"creek buffer"`` or ``"exclusion"`` and its area."""
    import geopandas as gpd

    zones = farm.zones
    ez = zones[zones["kind"].astype(str) == "exclusion"]
    if not len(ez):
        return None
    first = ez[ez["product"] == ez["product"].iloc[0]]  # every product has the same ones
    kinds: dict[str, str] = {}
    excl = farm.prep.exclusions
    if len(excl) and "exclusion" in excl.columns and "kind" in excl.columns:
        kinds = {str(a): str(b) for a, b in zip(excl["exclusion"], excl["kind"], strict=False)}
    out = gpd.GeoDataFrame(first[["paddock", "label"]].copy(), geometry=first.geometry.values,
                           crs=zones.crs).dissolve(by=["paddock", "label"], as_index=False)
    out["kind"] = [
        "creek buffer" if any(kinds.get(part.strip()) == "creek buffer"
                              for part in str(lab).split(",")) else "exclusion"
        for lab in out["label"]
    ]
    out["area_ha"] = out.geometry.area / 1e4
    return out


def exclusion_kinds(farm: FarmResult) -> dict[str, str]:
    """Exclusion name -> ``"creek buffer"`` or ``"exclusion"`` (from the boundaries read)."""
    excl = farm.prep.exclusions
    if not len(excl) or "exclusion" not in excl.columns or "kind" not in excl.columns:
        return {}
    return {str(a): ("creek buffer" if str(b) == "creek buffer" else "exclusion")
            for a, b in zip(excl["exclusion"], excl["kind"], strict=False)}


def paddock_areas(farm: FarmResult) -> dict[str, float]:
    """Each paddock's area (ha): the area of its zones, exclusions included, as in the
    tonnage table. The one figure the report uses for a paddock everywhere."""
    zones = farm.zones
    out: dict[str, float] = {}
    if not len(zones):
        return out
    for (paddock, _product), rows in zones.groupby(["paddock", "product"], sort=False):
        out.setdefault(str(paddock), float(rows["area_ha"].sum()))
    return out


def paddock_glance(farm: FarmResult) -> list[Any]:
    """Per paddock: area, area excluded by kind, sodic / strongly sodic / acid area (from the
    grid cells) and the area and tonnes of each product (from the zones and tonnage)."""
    chem = farm.prep.project.settings.chemistry
    areas = paddock_areas(farm)
    kinds = exclusion_kinds(farm)
    limit = acid_ph_threshold(farm)
    totals = farm.tonnage[farm.tonnage["level"].astype(str) == "paddock"]
    lb_ac = farm.prep.project.settings.output.rate_unit == "lb/ac"
    mass = "short_tons" if lb_ac and "short_tons" in totals.columns else "tonnes"
    zones = farm.zones
    out = []
    for name, grid in farm.prep.grids.items():
        cells = farm.paddocks[name].cells
        cell_ha = grid.cell_area_ha

        def area_where(var: str, test: Any, cells: Any = cells, cell_ha: float = cell_ha
                       ) -> float | None:
            arr = cells.get(var)
            if arr is None:
                return None
            ok = np.isfinite(arr)
            return float(np.count_nonzero(test(np.where(ok, arr, np.nan)) & ok) * cell_ha)

        excluded: dict[str, float] = {}
        pz = zones[(zones["paddock"] == name) & (zones["kind"].astype(str) == "exclusion")]
        if len(pz):
            first = pz[pz["product"] == pz["product"].iloc[0]]
            for label, area in zip(first["label"], first["area_ha"], strict=False):
                kind = report_mod.exclusion_kind(str(label), kinds)
                excluded[kind] = excluded.get(kind, 0.0) + float(area)
        rows = totals[totals["paddock"].astype(str) == name]
        out.append(report_mod.PaddockGlance(
            paddock=name,
            area_ha=areas.get(name, float(grid.mask.sum() * cell_ha)),
            excluded_ha=excluded,
            sodic_ha=area_where("esp", lambda a: a >= chem.sodic_esp_percent),
            strongly_sodic_ha=area_where("esp", lambda a: a >= chem.strongly_sodic_esp_percent),
            acid_ha=area_where(_ph_var(farm), lambda a: a < limit),
            product_ha={str(r["product"]): float(r["spread_area_ha"]) for _, r in rows.iterrows()},
            product_t={str(r["product"]): float(r[mass]) for _, r in rows.iterrows()},
        ))
    return out


def soil_maps(farm: FarmResult) -> list[Any]:
    """ESP, pH and acid saturation over the farm, then the salinity and dispersion classes
    and each deeper layer's ESP (subsoil sodicity) and classes, in the map's colour classes."""
    out = []
    wanted = [("esp", "esp"), (_ph_var(farm), "ph"), ("acid_sat", "acid"),
              ("salinity_class", "salinity_class"), ("dispersion_class", "dispersion_class")]
    for ls in farm.prep.layers[1:]:
        wanted += [(v + ls.layer.suffix, k) for v, k in (
            ("esp", "esp"), ("salinity_class", "salinity_class"),
            ("dispersion_class", "dispersion_class"))]
    for var, kind in wanted:
        got = farm_layer(farm, var)
        if got is None:
            continue
        arr, transform = got
        out.append(report_mod.SoilMap(
            title=surface_title(farm, var), unit=surface_unit(var), array=arr,
            transform=transform, classes=surface_classes(farm, var, kind, arr)))
    return out


def sample_fields(farm: FarmResult) -> list[Any]:
    """The lines of a sample's popup: labels, units, the lab's own values and the flags."""
    read = farm.prep.read
    cols = set(farm.prep.samples.columns)
    cmol = "cmol(+)/kg"
    fields = [webmap.SampleField("paddock", "Paddock"), webmap.SampleField("layer", "Layer")]
    for var in ("ph", "ph_cacl2"):
        if var in cols:
            fields.append(webmap.SampleField(var, ph_label(farm, var), "", 1))
    fields.append(webmap.SampleField("ec_1_5", "EC 1:5", "dS/m", 2))
    fields.append(webmap.SampleField("ece", "ECe", "dS/m", 1))
    for c in _CATIONS:  # the soluble cations of the extract, as read (the lab's own
        # columns of them are not repeated)
        fields.append(webmap.SampleField(f"{c}_sol", f"Soluble {_CATIONS[c]} (extract)",
                                         "mmol(+)/L", 2))
    solution = set(read.samples.attrs.get("solution_columns", {}).values())
    known = {"sample_id", "source_row", "paddock", "geometry", "layer", "depth_top_cm",
             "depth_bottom_cm", *read.columns, *_SOLUBLE_COLUMNS, *solution}
    lab_other = [c for c in farm.prep.samples.columns
                 if c not in known and c not in _DERIVED_COLUMNS and c in cols]
    for c in lab_other:  # the lab's other columns, under the lab's own headers
        fields.append(webmap.SampleField(c, str(c)))
    corrected = {c for c in _CATIONS if f"{c}_extracted" in cols}
    given = any(f"{c}_sol" in cols for c in _CATIONS)
    for var, label in (("ca", "Exch. Ca"), ("mg", "Exch. Mg"), ("k", "Exch. K"),
                       ("na", "Exch. Na"), ("al", "Exch. Al"), ("acidity", "Exch. acidity"),
                       ("ecec", "ECEC"), ("cec", "CEC (lab)")):
        if var in corrected:  # what the run used: extracted - soluble = exchangeable
            fields.append(webmap.SampleField(f"{var}{_AS_USED}",
                                             f"{label}: extracted - soluble", cmol))
        elif var in _CATIONS and given:
            fields.append(webmap.SampleField(var, f"{label} (as extracted)", cmol, 2))
        else:
            fields.append(webmap.SampleField(var, label, cmol, 2))
    for var, label in (("esp", "ESP"), ("ca_sat", "Ca saturation"),
                       ("mg_sat", "Mg saturation"), ("k_sat", "K saturation"),
                       ("acid_sat", "Acid saturation"), ("al_sat", "Al saturation")):
        fields.append(webmap.SampleField(var, label, "%", 1))
    fields.append(webmap.SampleField("ca_mg_ratio", "Ca:Mg ratio", "", 1))
    fields.append(webmap.SampleField("cross", "CROSS", "", 2))
    fields.append(webmap.SampleField("source_row", "Row in the lab file"))
    fields += [
        webmap.SampleField("sodicity", "", flag=True, ok_values=("non-sodic",)),
        webmap.SampleField("acid_reason", "acid", flag=True),
        webmap.SampleField("esp_estimated", "ESP estimated from SAR", flag=True),
        webmap.SampleField("salinity_class", "", flag=True, ok_values=("normal",)),
        webmap.SampleField("dispersion_class", "", flag=True, ok_values=("flocculated",)),
        webmap.SampleField("high_mg", "Mg high (Ca:Mg low)", flag=True),
        webmap.SampleField("pretreatment_needed", "EC high: was Na measured after washing out "
                           "soluble salts?", flag=True),
    ]
    fields += [webmap.SampleField(c, c.replace("_", " "), flag=True)
               for c in farm.prep.samples.columns
               if str(c).endswith("_flag") and c != "acid_flag"]
    for ls in farm.prep.layers[1:]:  # the same place's deeper samples (see map_samples)
        for var, label, unit, digits in _DEEPER_FIELDS:
            fields.append(webmap.SampleField(var + ls.layer.suffix, f"{label}, {ls.layer.label}",
                                             unit, digits))
    cols |= set(map_samples(farm).columns)
    return [f for f in fields if f.column in cols]


#: What a sample's popup shows of the deeper samples taken at the same place.
_DEEPER_FIELDS = (("esp", "ESP", "%", 1), ("ecec", "ECEC", "cmol(+)/kg", 2),
                  ("ec_1_5", "EC 1:5", "dS/m", 2), ("ece", "ECe", "dS/m", 1),
                  ("salinity_class", "Salinity class", "", None),
                  ("dispersion_class", "Dispersion class", "", None),
                  ("cross", "CROSS", "", 2))


#: The exchangeable bases a soluble-salt correction may change, and their symbols.
_CATIONS = CATION_SYMBOLS
#: The samples' soluble-salt columns, shown in the popup under labels of their own.
_SOLUBLE_COLUMNS = {*SOLUBLE_DERIVED, *(f"{c}_sol" for c in _CATIONS)}
#: Suffix of a corrected cation's popup text ("3.00 - 2.50 = 0.50").
_AS_USED = "_as_used"


def _as_used(samples: Any) -> dict[str, list[str | None]]:
    """Per cation the run corrected for soluble salts, each sample's popup text of what it
    used: ``extracted - soluble = exchangeable`` (cmol(+)/kg, 2 decimals), the lab's figure
    alone where the sample has no soluble value, and a correction below 0 said as set to 0.

    >>> _as_used(pd.DataFrame({"na_extracted": [3.0, 0.4, 2.0], "na_soluble": [2.5, 0.5, None],
    ...                        "na": [0.5, 0.0, 2.0]}))["na_as_used"]
    ['3.00 - 2.50 = 0.50', '0.40 - 0.50 = 0.00 (set to 0)', '2.00 (no soluble value)']
    """
    out: dict[str, list[str | None]] = {}
    for c in _CATIONS:
        if f"{c}_extracted" not in samples.columns:
            continue
        ext, sol, used = (pd.to_numeric(samples[k], errors="coerce").to_numpy(dtype=float)
                          for k in (f"{c}_extracted", f"{c}_soluble", c))
        texts: list[str | None] = []
        for e, v, u in zip(ext, sol, used, strict=True):
            if not np.isfinite(e):
                texts.append(None)
            elif not np.isfinite(v):
                texts.append(f"{e:.2f} (no soluble value)")
            else:
                below = " (set to 0)" if e - v < -1e-9 else ""
                texts.append(f"{e:.2f} - {v:.2f} = {u:.2f}{below}")
        out[f"{c}{_AS_USED}"] = texts
    return out


def map_samples(farm: FarmResult) -> Any:
    """The map's sample points: the top layer's, each with the values of the deeper samples
    taken at the same place (same ID, within the near-duplicate distance), named with the
    layer's suffix (``esp_10-30cm``); deeper samples at other places are not drawn. Where
    the run subtracted soluble salts, each corrected cation's ``<c>_as_used`` text says
    what it used, and the EC 1:5 pretreatment flag is off for the corrected samples."""
    prep = farm.prep
    top = prep.samples
    used = _as_used(top)
    if not prep.layers and not used:
        return top
    out = top.copy()
    for col, texts in used.items():
        out[col] = texts
    if used and "pretreatment_needed" in out.columns and "soluble_subtracted" in out.columns:
        done = out["soluble_subtracted"].fillna(False).astype(bool)
        out["pretreatment_needed"] = out["pretreatment_needed"].where(~done, False)
    if not prep.layers:
        return out
    near = prep.project.settings.samples.duplicate_distance_m
    for ls in prep.layers[1:]:
        deeper = ls.samples
        cols = [v for v, *_ in _DEEPER_FIELDS if v in deeper.columns]
        if not cols:
            continue
        by_id = {str(i): k for k, i in enumerate(deeper["sample_id"])}
        rows = [by_id.get(str(i)) for i in out["sample_id"]]
        for col in cols:
            values = []
            for k, r in enumerate(rows):
                same = r is not None and out.geometry.iloc[k].distance(
                    deeper.geometry.iloc[r]) <= near
                values.append(deeper[col].iloc[r] if same and r is not None else None)
            out[col + ls.layer.suffix] = values
    return out


_DERIVED_COLUMNS = {
    "ecec", "ecec_basis", "acidity_basis", "ca_sat", "mg_sat", "k_sat", "na_sat", "esp",
    "esp_estimated",
    "acid_sat", "al_sat", "base_sat", "ca_mg_ratio", "sodicity", "acid_flag", "acid_reason",
    *SAMPLE_COLUMNS,
}


def build_farm_map(farm: FarmResult) -> str:
    """The interactive map of a run.

    Parameters
    ----------
    farm : FarmResult
        The computed farm.

    Returns
    -------
    str
        The self-contained HTML page (Leaflet inlined, works offline).
    """
    prep = farm.prep
    s = prep.project.settings
    layers = []
    flag = _needs_test_layer(farm)
    if flag is not None:
        layers.append(webmap.RasterLayer(
            key="lime_needs_test", title="Lime requirement needs a test", unit="",
            array=flag[0], transform=flag[1], crs=prep.crs, classes=_NEEDS_TEST_CLASSES,
        ))
    for var, kind in map_surfaces(farm):
        got = farm_layer(farm, var)
        if got is None:
            continue
        arr, transform = got
        layers.append(webmap.RasterLayer(
            key=var, title=surface_title(farm, var), unit=surface_unit(var),
            array=arr, transform=transform, crs=prep.crs,
            classes=surface_classes(farm, var, kind, arr),
        ))
    kriged = sorted({v for (_, v) in farm.surfaces}, key=lambda v: (
        _MAP_ORDER.index(v) if v in _MAP_ORDER else 99, v))
    for var in kriged:
        got = farm_layer(farm, var, "std")
        if got is None:
            continue
        layers.append(webmap.RasterLayer(
            key=f"{var}_sd", title=f"{surface_title(farm, var)}: kriging SD",
            unit=_unit_of(var), array=got[0], transform=got[1], crs=prep.crs,
            classes=presentation.classes_for("error", got[0]), group="error",
        ))
    products = sorted({p for pr in farm.paddocks.values() for p in pr.rates.product_rates})
    unit = s.output.rate_unit
    for prod in products:
        got = farm_layer(farm, prod, f"rate:{prod}")
        if got is None:
            continue
        arr = np.asarray(rate_from_kg_ha(got[0], unit), dtype=float)
        layers.append(webmap.RasterLayer(
            key=f"rate_{slug(prod)}", title=f"{prod} (before spreader limits)",
            unit=unit, array=arr, transform=got[1], crs=prep.crs,
            classes=presentation.classes_for("rate", arr), group="rate",
        ))
    surface, product = opening_view(farm)
    keys = [layer.key for layer in layers]
    if surface not in keys:
        surface = next((k for k in ("esp", "ph", "ph_cacl2") if k in keys),
                       keys[0] if keys else None)
    return webmap.build_map(
        title=s.farm or "geosoil",
        paddocks=prep.paddocks,
        samples=map_samples(farm),
        rasters=layers,
        zones=farm.zones,
        exclusions=exclusion_zones(farm),
        background_tiles=s.output.background_tiles,
        rate_unit=unit,
        notes=_map_notes(farm),
        sample_fields=sample_fields(farm),
        open_surface=surface,
        open_product=product,
        max_samples=webmap.MAP_MAX_SAMPLES,
        samples_source=SAMPLES_EVERYWHERE,
    )


def _map_notes(farm: FarmResult) -> list[str]:
    """The lines under the map's title: rates are advisory; which products a contested
    rule (cation balance) added to, when it added anything."""
    notes = ["Rates are advisory: have them checked by a qualified agronomist before "
             "spreading; local codes prevail."]
    contested = sorted({
        product
        for pr in farm.paddocks.values()
        for (rule, product), rate in pr.rates.contributions.items()
        if rule == "balance" and bool(np.any(np.nan_to_num(rate) > 0))
    })
    if contested:
        notes.append(
            "Cation balance targets (CONTESTED: Kopittke & Menzies 2007) add to "
            f"{', '.join(contested)}; within the ranges common in soils, Ca:Mg:K ratios "
            "generally do not affect fertility."
        )
    return notes


#: Kriging standard deviation counted as "uncertain", per variable, for the report's
#: "least certain" table (in the variable's unit). Our own thresholds: about the size of
#: the difference that would change a rate class.
UNCERTAIN_SD: dict[str, float] = {
    "ca": 1.0, "mg": 0.5, "k": 0.1, "na": 0.3, "acidity": 0.3, "al": 0.3, "cec": 2.0,
    "ph": 0.3, "ph_cacl2": 0.3, "esp": 2.0,
}


def report_input(farm: FarmResult, record: dict[str, Any]) -> report_mod.ReportInput:
    """Gather what the report shows (see :mod:`geosoil.report`).

    Parameters
    ----------
    farm : FarmResult
        The computed farm.
    record : dict
        The run record from :func:`build_record`.

    Returns
    -------
    geosoil.report.ReportInput
        Everything :func:`geosoil.report.build_report` draws.
    """
    prep = farm.prep
    s = prep.project.settings
    variograms = []
    uncertainty = []
    for surf in farm.surfaces.values():
        emp = surf.empirical
        m = surf.model
        cv = surf.cross_validation
        note = "; ".join(surf.notes)
        if surf.log_transform:
            note = (note + "; " if note else "") + "variogram of the natural log of the values"
        variograms.append(report_mod.VariogramInfo(
            variable=surf.variable, paddock=surf.paddock, method=surf.method,
            unit=("ln " if surf.log_transform else "") + SURFACE_UNITS.get(surf.variable, ""),
            model=None if m is None else m.name,
            nugget=None if m is None else m.nugget,
            psill=None if m is None else m.psill,
            range_m=None if m is None else m.range,
            nu=None if m is None else m.nu,
            lags=() if emp is None else tuple(float(v) for v in emp.lags),
            gamma=() if emp is None else tuple(float(v) for v in emp.gamma),
            counts=() if emp is None else tuple(int(v) for v in emp.counts),
            cv_mean_error=None if cv is None else float(cv.mean_error),
            cv_rmse=None if cv is None else float(cv.rmse),
            cv_msse=None if cv is None else float(cv.msse),
            n_samples=surf.n_samples,
            note=note,
        ))
        if surf.std is not None:
            sd = surf.std[np.isfinite(surf.std)]
            if sd.size:
                thr = UNCERTAIN_SD.get(surf.variable, float(np.median(sd)))
                uncertainty.append(report_mod.UncertaintySummary(
                    variable=surf.variable, paddock=surf.paddock,
                    unit=SURFACE_UNITS.get(surf.variable, ""), sd_threshold=thr,
                    share_above=float((sd > thr).mean()), sd_max=float(sd.max()),
                    sd_mean=float(sd.mean()),
                ))
    areas = paddock_areas(farm)
    density = [
        report_mod.SampleDensity(
            paddock=name, samples=int((prep.samples["paddock"] == name).sum()),
            area_ha=areas.get(name, float(g.mask.sum() * g.cell_area_ha)),
        )
        for name, g in prep.grids.items()
    ]
    assumptions: dict[str, str] = {
        "Treated depth": f"{s.soil.depth_m:g} m",
        "Bulk density": f"{s.soil.bulk_density_g_cm3:g} g/cm3"
        + "".join(f"; {k}: {v:g}" for k, v in s.soil.bulk_density_by_paddock.items()),
        "Grid cell": f"{s.grid.cell_size_m:g} m",
        "Working CRS": f"{prep.crs.name} ({prep.crs_reason})",
        "Zones": f"{s.zones.method}, {s.zones.classes} classes, zones under "
        f"{s.zones.min_zone_area_ha:g} ha merged",
        "Spreader": f"min {s.spreader.min_rate:g} {s.spreader.unit}, max per pass "
        f"{s.spreader.max_per_pass:g} {s.spreader.unit} (0 = none)"
        + "".join(f", {name} at most {v:g} {s.spreader.unit} per pass"
                  for name, v in s.spreader.max_per_pass_by_product.items() if v > 0)
        + f", step {s.spreader.rate_step:g} {s.spreader.unit}",
    }
    assumptions["Soluble salts in exchangeable cations"] = soluble_salts_text(farm)
    assumptions.update(layer_assumptions(farm))
    for key, prod in prep.products.items():
        assumptions[f"Product '{key}'"] = product_text(prod)
    targets = sorted({f"{name}: {pr.rates.target}" for name, pr in farm.paddocks.items()
                      if pr.rates.target})
    if targets:
        assumptions["Lime target"] = "; ".join(targets) + (
            f"; lime only where pH is more than {s.rates.lime.trigger_margin_ph:g} below it")
    needs = lime_needs_test(farm)
    if needs:
        assumptions["Lime requirement needs a test"] = "; ".join(
            f"{n['paddock']}: {n['area_ha']:.2f} ha of acid soil with no lime advice, ask the "
            f"lab for {n['ask_for']}" for n in needs)
    methods: dict[str, str] = {}
    for pr in farm.paddocks.values():
        for rule, method in pr.rates.methods.items():
            methods.setdefault(rule, method)
    if "gypsum" in methods:
        methods["gypsum"] = f"{methods['gypsum']}; {GYPSUM_NO_LIME_CREDIT}"
    methods.setdefault(
        "Interpolation",
        "ordinary kriging with variograms fitted by weighted least squares (Cressie 1985) "
        "and chosen by leave-one-out cross-validation (closed form, Dubrule 1983)",
    )
    chem = s.chemistry
    if (prep.soluble_salts.get("cations")):
        methods.setdefault("Soluble salts subtracted", SOLUBLE_SOURCE)
    methods.setdefault("Sodicity classes",
                       f"ESP >= {chem.sodic_esp_percent:g} % sodic, >= "
                       f"{chem.strongly_sodic_esp_percent:g} % strongly sodic "
                       "(Northcote & Skene 1972 at the defaults 6 and 15)")
    settings_toml = prep.project.text
    headline, why = prescribed(farm)
    if why:  # every rule that gave no product, and why (the title says what matters)
        methods.setdefault("Rules that gave no product", "; ".join(why))
    return report_mod.ReportInput(
        title=f"{s.farm or 'Farm'}: " + ("gypsum and lime prescriptions"
                                         if headline.startswith("Prescribed")
                                         else "nothing prescribed"),
        prescribed=headline, not_prescribed=tuple(reasons_to_say(headline, why)),
        created=datetime.now(UTC),
        tonnage=farm.tonnage,
        zones=farm.zones,
        paddocks=prep.paddocks,
        variograms=tuple(variograms),
        uncertainty=tuple(uncertainty),
        density=tuple(density),
        assumptions=assumptions,
        methods=tuple(methods.items()),
        warnings=tuple(farm.warnings),
        cautions=tuple(record["cautions"]),
        zone_water={(r["paddock"], r["product"], r["zone"]): (r["water_mm"],
                                                              r["leaching_esp_share"])
                    for r in record["salinity"]["gypsum_water"]},
        leaching_esp=s.rates.gypsum.leaching_note_esp_percent,
        notes=tuple(
            f"{name}: {n}" for name, pr in farm.paddocks.items()
            for n in (*pr.cell_notes, *pr.rates.notes, *pr.zone_notes)
        ),
        glance=tuple(paddock_glance(farm)),
        soil_maps=tuple(soil_maps(farm)),
        samples=prep.samples[["sample_id", "geometry"]],
        samples_source=SAMPLES_EVERYWHERE,
        exclusion_kinds=exclusion_kinds(farm),
        acid_label=f"{ph_label(farm)} below {acid_ph_threshold(farm):g}",
        sodic_labels=(f"ESP ≥ {chem.sodic_esp_percent:g} %",
                      f"ESP ≥ {chem.strongly_sodic_esp_percent:g} %"),
        provenance=report_mod.Provenance(
            inputs=tuple(input_checksums(prep.project)),
            settings_toml=settings_toml,
            versions=versions(),
        ),
        rate_unit=s.output.rate_unit,
        currency=s.tonnage.currency,
    )


def layer_assumptions(farm: FarmResult) -> dict[str, str]:
    """The report's lines on sampled layers (none for samples of one depth): the layers,
    the depth gypsum treats and each layer's part of it and mean gypsum rate per paddock."""
    prep = farm.prep
    rec = layers_record(farm)
    if rec is None:
        return {}
    s = prep.project.settings
    unit = s.output.rate_unit
    out = {
        "Sampled layers": "; ".join(f"{r['layer']}: {r['samples']} samples"
                                    for r in rec["layers"])
        + f". Lime, calcium and the other rules read the top layer "
        f"({prep.layers[0].layer.label}) over {s.soil.depth_m:g} m: lime methods are "
        "calibrated on topsoil samples.",
        "Gypsum treated depth": f"0-{rec['gypsum_treat_depth_cm']:g} cm, the sum of each "
        "layer's USDA Handbook 60 requirement over the soil it stands for",
    }
    for pad in rec["paddocks"]:
        parts = []
        for r in pad["gypsum_layers"]:
            bd = r["bulk_density_g_cm3"]
            rate = r["gypsum_mean_kg_ha"]
            shown = "-" if rate is None else units_format_rate(rate, unit)
            parts.append(f"{r['layer']} over {r['from_cm']:g}-{r['to_cm']:g} cm (bulk density "
                         + (f"{bd:g}" if isinstance(bd, float) else str(bd))
                         + f"): mean {shown}")
        out[f"Gypsum by layer, {pad['paddock']}"] = "; ".join(parts)
        sodic = [f"{c['layer']}: mean ESP {c['esp_mean']:.1f} %, {c['sodic_ha']:.2f} ha at ESP "
                 f"{s.chemistry.sodic_esp_percent:g} % or more"
                 for c in pad["layer_classes"] if c.get("esp_mean") is not None]
        if sodic:
            out[f"Sodicity by layer, {pad['paddock']}"] = "; ".join(sodic)
    return out


def product_text(prod: Any) -> str:
    """One line describing a product's analysis as used (fractions as spread).

    Parameters
    ----------
    prod : Product
        An amendment product from :mod:`geosoil.products`.

    Returns
    -------
    str
        The line shown in the report.
    """
    bits = [f"{prod.label}"]
    for v, label in ((prod.ca_fraction, "Ca"), (prod.mg_fraction, "Mg"), (prod.k_fraction, "K"),
                     (prod.s_fraction, "S")):
        if v:
            bits.append(f"{label} {100 * v:.2f} %")
    if prod.cce:
        bits.append(f"CCE {100 * prod.cce:.1f} %, fineness factor {prod.fineness_factor:.2f}, "
                    f"ENV {100 * prod.env:.1f} %")
    bits.append(f"purity {100 * prod.purity:.0f} %, moisture {100 * prod.moisture:.0f} %")
    return ", ".join(bits)
