"""The arithmetic for one location, from lab values to product kg/ha, rule by rule.

An agronomist who must defend a rate picks a spot; :func:`explain_location`
finds its paddock and grid cell, the nearest samples with their lab values,
the interpolated values at that cell (with the kriging standard deviation),
the cell's derived chemistry, every rule's steps with its inputs and source,
and the zone rate the spreader will apply there. :func:`locate` places the
point alone (paddock and cell) so that a point off the farm is refused before
anything is interpolated. The rates shown are advisory, as every rate geosoil
computes.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pyproj
import shapely

from .chemistry import CATION_SYMBOLS, rule_ph
from .columns import CANONICAL, EXCHANGEABLE, PROPERTIES
from .errors import InputError
from .pipeline import FarmResult, Prepared
from .rates import RateLayer, Step, explain_cell
from .units import format_rate, rate_from_kg_ha

__all__ = [
    "Explanation",
    "Location",
    "locate",
    "explain_location",
    "parse_location",
    "sample_unit",
    "SAMPLE_VALUES",
    "format_explanation",
]


@dataclass(frozen=True)
class Explanation:
    """Everything behind the rate at one location."""

    x: float
    y: float
    lon: float
    lat: float
    paddock: str
    row: int
    col: int
    nearest_samples: list[dict[str, Any]]
    interpolated: dict[str, tuple[float, float | None, str]]
    cell: dict[str, float]
    steps: list[Step]
    zones: list[dict[str, Any]]
    notes: list[str] = field(default_factory=list)
    ecec_parts: dict[str, float] = field(default_factory=dict)
    acidity_source: str = ""
    #: how the soluble salts were taken off the nearest samples' cations (empty when not)
    soluble: list[str] = field(default_factory=list)
    #: ``[output] rate_unit``: the unit every rate is shown in (the rules' arithmetic runs in
    #: kg/ha, shown beside it)
    rate_unit: str = "kg/ha"


def parse_location(text: str) -> tuple[float, float]:
    """Parse ``"A,B"`` into two numbers.

    Parameters
    ----------
    text : str
        Two numbers separated by a comma (``"147.45,-34.69"``).

    Returns
    -------
    tuple of float
        The two numbers.

    Raises
    ------
    InputError
        Not two finite numbers.

    Examples
    --------
    >>> parse_location("147.1, -35.2")
    (147.1, -35.2)
    """
    parts = [p.strip() for p in text.split(",")]
    if len(parts) != 2:
        raise InputError(
            f"location '{text}' is not two numbers separated by a comma",
            fix="write --at LON,LAT (e.g. 147.12,-35.20) or --at X,Y in the working CRS",
        )
    try:
        a, b = float(parts[0]), float(parts[1])
    except ValueError:
        raise InputError(
            f"location '{text}' is not two numbers", fix="write --at LON,LAT or --at X,Y"
        ) from None
    if not (math.isfinite(a) and math.isfinite(b)):
        raise InputError(f"location '{text}' is not finite", fix="write --at LON,LAT or --at X,Y")
    return a, b



#: What section 1 shows of a sample: every analyte a lab may give (buffer pH, organic
#: carbon and matter, clay, pHBC, CEC at pH 7, potential acidity, EC... as read), then
#: the ECEC and ESP worked out from them. A value the sample lacks is left out.
SAMPLE_VALUES: tuple[str, ...] = (
    "ph", "ph_cacl2", "ph_kcl", *(a for a in CANONICAL if a not in ("ph", "ph_cacl2", "ph_kcl")))
DERIVED_SHOWN: tuple[str, ...] = ("ecec", "esp")


def sample_unit(analyte: str) -> str:
    """The unit a sample's value is carried in ('' for pH and ratios), for section 1.

    >>> sample_unit("oc"), sample_unit("ca"), sample_unit("bph_smp"), sample_unit("esp")
    ('%', 'cmol(+)/kg', '', '%')
    """
    if analyte in EXCHANGEABLE or analyte == "ecec":
        return "cmol(+)/kg"
    if analyte in PROPERTIES:
        return PROPERTIES[analyte][0]
    return "%" if analyte == "esp" else ""


@dataclass(frozen=True)
class Location:
    """A point placed on the farm: working-CRS and lon/lat coordinates, paddock and grid cell."""

    x: float
    y: float
    lon: float
    lat: float
    paddock: str
    row: int
    col: int


def locate(prep: Prepared, a: float, b: float, *, coords: str = "auto") -> Location:
    """Place ``(a, b)`` in its paddock and grid cell, before anything is interpolated.

    Parameters
    ----------
    prep
        The prepared inputs (:func:`geosoil.pipeline.prepare`).
    a, b
        Longitude and latitude, or x and y in the working CRS.
    coords
        ``"lonlat"``, ``"xy"`` or ``"auto"`` (lon/lat when the numbers fit
        longitude and latitude ranges, else x/y in the working CRS).

    Returns
    -------
    Location
        The point in both coordinate systems, its paddock and grid cell.

    Raises
    ------
    InputError
        The point is in no paddock (the message names the point in both
        coordinate systems), or on no cell of its paddock.
    """
    if coords not in ("auto", "lonlat", "xy"):
        raise ValueError(f"coords must be 'auto', 'lonlat' or 'xy', not {coords!r}")
    crs = prep.crs
    to_work = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
    to_ll = pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
    lonlat = coords == "lonlat" or (coords == "auto" and abs(a) <= 180 and abs(b) <= 90)
    if lonlat:
        if not (abs(a) <= 180 and abs(b) <= 90):
            raise InputError(
                f"lon {a:g}, lat {b:g} is not a longitude and latitude",
                fix="give --at LON,LAT in degrees, or x,y in the working CRS with --coords xy",
            )
        lon, lat = a, b
        x, y = to_work.transform(a, b)
    else:
        x, y = a, b
        lon, lat = to_ll.transform(a, b)
    pt = shapely.Point(x, y)
    hit = prep.paddocks[prep.paddocks.covers(pt)]
    if hit.empty:
        where = f"lon {lon:.6f}, lat {lat:.6f}" + ("" if lonlat else f" (x {x:.1f}, y {y:.1f})")
        fix = ("give a point inside a paddock, as LON,LAT or as x,y in the working CRS "
               f"({crs.name}) with --coords xy")
        problem = f"the point at {where} is not inside any paddock ({', '.join(prep.grids)})"
        hint = _swapped_hint(prep, a, b, coords=coords, lonlat=lonlat, x=x, y=y)
        if hint is not None:
            problem, fix = hint
        raise InputError(problem, fix=fix)
    name = str(hit["paddock"].iloc[0])
    grid = prep.grids[name]
    col_f, row_f = ~grid.transform @ (x, y)
    row, col = int(math.floor(row_f)), int(math.floor(col_f))
    if not (0 <= row < grid.height and 0 <= col < grid.width) or not grid.mask[row, col]:
        raise InputError(
            f"the point at lon {lon:.6f}, lat {lat:.6f} falls in paddock '{name}' but not on "
            "one of its cells (an exclusion area, or the edge of the paddock)",
            fix="pick a point a cell further inside the paddock",
        )
    return Location(float(x), float(y), float(lon), float(lat), name, row, col)


#: A swapped reading of --at within this distance of a paddock (or within the farm's own
#: size, when that is larger) is offered as what was meant: rounded coordinates (one
#: decimal of a degree is up to about 5 km) still land near the farm. Our choice.
NEAR_FARM_M = 10_000.0


def _swapped_hint(prep: Prepared, a: float, b: float, *, coords: str, lonlat: bool,
                  x: float, y: float) -> tuple[str, str] | None:
    """The problem and fix to give when ``--at a,b`` lands on no paddock but ``b,a`` (as
    LON,LAT, or as x,y in the working CRS) lands on the farm or near it: nearer than
    the reading as given, and within :data:`NEAR_FARM_M` (or the farm's size)."""
    farm = shapely.union_all(prep.paddocks.geometry.to_numpy())
    x0, y0, x1, y1 = farm.bounds
    near = max(NEAR_FARM_M, math.hypot(x1 - x0, y1 - y0))
    to_work = pyproj.Transformer.from_crs("EPSG:4326", prep.crs, always_xy=True)

    def away(px: float, py: float) -> float:
        if not (math.isfinite(px) and math.isfinite(py)):
            return math.inf
        return float(farm.distance(shapely.Point(px, py)))

    given = away(x, y)
    readings = []
    if coords != "xy" and abs(a) <= 90 and abs(b) <= 180:  # latitude first
        readings.append(("LON,LAT", to_work.transform(b, a)))
    if coords != "lonlat" and not lonlat:  # northing first, in the working CRS
        readings.append(("x,y in the working CRS", (b, a)))
    for how, (sx, sy) in readings:
        d = away(sx, sy)
        if not (d <= near and d < given):
            continue
        point = shapely.Point(sx, sy)
        inside = prep.paddocks[prep.paddocks.covers(point)]
        if not inside.empty:
            where = f"it lies in paddock '{inside['paddock'].iloc[0]}'"
        else:
            nearest = prep.paddocks.iloc[int(prep.paddocks.distance(point).argmin())]
            where = (f"it lies {_distance_text(d)} from paddock '{nearest['paddock']}' (not "
                     "inside it: rounded coordinates?)")
        first = "latitude" if how == "LON,LAT" else "northing (y)"
        as_given = "LON,LAT" if lonlat else "x,y in the working CRS"
        problem = (f"--at {a!r},{b!r} looks like {first} first: read as {how} the other way "
                   f"round {where}, but as given (read as {as_given}) it is "
                   + ("in no paddock" if not math.isfinite(given)
                      else f"{_distance_text(given)} from the farm"))
        fix = f"did you mean --at {b!r},{a!r} ({'LON,LAT' if how == 'LON,LAT' else 'X,Y'})?"
        if inside.empty:
            fix += " Give a point inside a paddock"
        return problem, fix
    return None


def _distance_text(m: float) -> str:
    return f"{m:,.0f} m" if m < 10_000 else f"{m / 1000:,.0f} km"


def explain_location(
    farm: FarmResult, a: float, b: float, *, coords: str = "auto", n_samples: int = 3
) -> Explanation:
    """Explain the rate at ``(a, b)``.

    Parameters
    ----------
    farm
        A computed farm (:func:`geosoil.pipeline.compute`).
    a, b
        Longitude and latitude, or x and y in the working CRS.
    coords
        ``"lonlat"``, ``"xy"`` or ``"auto"`` (lon/lat when the numbers fit
        longitude and latitude ranges, else x/y in the working CRS).
    n_samples
        How many nearest samples to show.

    Returns
    -------
    Explanation
        Nearest samples, interpolated values, cell chemistry, rule steps and zone rates.

    Raises
    ------
    InputError
        The location is in no paddock, or outside the paddock's cells.
    """
    prep = farm.prep
    where = locate(prep, a, b, coords=coords)
    x, y, lon, lat, name = where.x, where.y, where.lon, where.lat, where.paddock
    row, col = where.row, where.col
    grid = prep.grids[name]
    notes: list[str] = []
    pts = prep.samples[prep.samples["paddock"] == name]
    d = np.hypot(pts.geometry.x.to_numpy() - x, pts.geometry.y.to_numpy() - y)
    order = np.argsort(d)[:n_samples]
    lab_cols = [c for c in (*SAMPLE_VALUES, *DERIVED_SHOWN) if c in pts.columns]
    nearest = []
    for i in order:
        r = pts.iloc[int(i)]
        nearest.append({
            "sample_id": str(r["sample_id"]), "distance_m": float(d[i]),
            "source_row": int(r["source_row"]) if "source_row" in r else None,
            **{c: (None if _nan(r[c]) else float(r[c])) for c in lab_cols},
        })
    interpolated: dict[str, tuple[float, float | None, str]] = {}
    for (pad, var), surf in farm.surfaces.items():
        if pad != name:
            continue
        sd = None if surf.std is None else float(surf.std[row, col])
        interpolated[var] = (float(surf.estimate[row, col]), sd, surf.method)
    pr = farm.paddocks[name]
    cell = {k: float(np.asarray(v)[row, col]) if np.ndim(v) == 2 else float(v)
            for k, v in pr.cells.items()}
    s = prep.project.settings
    bd = cell.pop("bulk_density", None)  # a bulk-density raster, where the project gives one
    if bd is None or not math.isfinite(bd):
        bd = s.soil.bulk_density_for(name)
    method, ph = rule_ph(cell)  # the rules read pH in water, else pH in CaCl2
    steps = explain_cell(
        {**cell, "ph": ph} if method is not None else cell, s.rates.for_paddock(name),
        prep.products, depth_m=s.soil.depth_m, bulk_density_g_cm3=bd, ph_method=method,
        scoop_density_g_cm3=s.samples.scoop_density_g_cm3,
        layers=_gypsum_layers_at(farm, name, row, col),
    )
    # the zone of the cell (its centre: a point on a zone edge belongs to the cell it is in)
    centre = shapely.Point(*(grid.transform @ (col + 0.5, row + 0.5)))
    zones = []
    z = pr.zones[pr.zones.covers(centre)].drop_duplicates(subset=["product"])
    for _, zr in z.iterrows():
        zones.append({
            "product": zr["product"], "zone": int(zr["zone"]), "kind": zr["kind"],
            "rate_kg_ha": float(zr["rate_kg_ha"]),
            "rate_in_unit": float(np.asarray(rate_from_kg_ha(zr["rate_kg_ha"],
                                                             s.output.rate_unit))),
            "unit": s.output.rate_unit,
            "passes": int(zr["passes"]) if "passes" in zr and not _nan(zr["passes"]) else 1,
            "schedule": str(zr["schedule"]) if "schedule" in zr
            and isinstance(zr["schedule"], str) else "",
        })
    for prod, arr in pr.rates.product_rates.items():
        notes.append(
            f"per-cell {prod} rate before spreader limits: "
            f"{_rate_text(float(arr[row, col]), s.output.rate_unit)}"
        )
    return Explanation(
        soluble=_soluble_lines(prep, pts.iloc[order]),
        x=float(x), y=float(y), lon=float(lon), lat=float(lat), paddock=name, row=row, col=col,
        nearest_samples=nearest, interpolated=interpolated, cell=cell, steps=list(steps),
        zones=zones, notes=notes, ecec_parts=_ecec_parts(cell),
        acidity_source=(_acidity_source(prep.read.columns)
                        or _neutral_acidity(cell, interpolated, s.chemistry)),
        rate_unit=s.output.rate_unit,
    )


def _soluble_lines(prep: Prepared, nearest: Any) -> list[str]:
    """The subtraction of soluble salts at the nearest samples ([chemistry] soluble_salts =
    "subtract"), or what the setting left as it was."""
    rec = prep.soluble_salts
    cations = rec.get("cations") or {}
    if rec.get("mode") != "subtract":
        if rec.get("soluble_given"):
            return ["the cations are the lab's extracted figures ([chemistry] soluble_salts = "
                    "'warn'): soluble salts not subtracted"]
        return []
    if not cations:
        return ["[chemistry] soluble_salts = 'subtract', but the file gives no soluble "
                "cations: nothing subtracted"]
    ratios = " / ".join(sorted({f"{v['water_l_per_kg']:g}" for v in cations.values()}))
    out = [f"exchangeable = extracted - soluble; soluble = extract mmol(+)/L x {ratios} L/kg "
           "/ 10; the kriged amounts (section 2) are the corrected samples'"]
    for _, r in nearest.iterrows():
        terms = []
        for c in cations:
            ex, sol, left = (r.get(f"{c}_extracted"), r.get(f"{c}_soluble"), r.get(c))
            if _nan(ex) or _nan(sol) or _nan(left):
                continue
            terms.append(f"{CATION_SYMBOLS[c]} {float(ex):.4g} - {float(sol):.4g} = "
                         f"{float(left):.4g}" + (" (below 0: set to 0)"
                                                 if float(ex) - float(sol) < -1e-9 else ""))
        if terms:
            out.append(f"{r['sample_id']}: " + "; ".join(terms))
    return out


def _acidity_source(columns: dict[str, str]) -> str:
    """How the lab gave the exchangeable acidity, when not as one column."""
    if "acidity" in columns:
        return ""
    given = [a for a in ("al", "h") if a in columns]
    if given == ["al", "h"]:
        return (f"Al + H (the lab gives them apart, '{columns['al']}' and '{columns['h']}'; "
                "each sample's sum is interpolated)")
    if given:
        el = given[0].capitalize()
        return f"{el} alone (the lab gives no {'H' if el == 'Al' else 'Al'}; '{columns[given[0]]}')"
    return ""


def _neutral_acidity(cell: dict[str, float], interpolated: Mapping[str, Any],
                     chemistry: Any) -> str:
    """Where the cell's acidity comes from when nothing of it was measured here: 0 at a
    neutral or alkaline pH (:func:`geosoil.chemistry.exchange_chemistry`, common practice)."""
    if any(v in interpolated for v in ("acidity", "al", "h")):
        return ""
    if not math.isfinite(cell.get("acidity", math.nan)):
        return ""
    if math.isfinite(cell.get("ph", math.nan)):
        label, limit = "pH (water)", chemistry.neutral_ph
    else:
        label, limit = "pH (CaCl2)", chemistry.neutral_ph_cacl2
    return (f"not measured: taken as 0 at {label} {limit:g} or above (common practice: "
            "exchangeable acidity is negligible in neutral and alkaline soils)")


def _ecec_parts(cell: dict[str, float]) -> dict[str, float]:
    """The parts whose sum is the cell's ECEC, when they are what it is made of (else empty)."""
    acid = "acidity" if math.isfinite(cell.get("acidity", math.nan)) else "al"
    parts = {k: cell[k] for k in ("ca", "mg", "k", "na", acid)
             if k in cell and math.isfinite(cell[k])}
    ecec = cell.get("ecec", math.nan)
    if len(parts) == 5 and math.isfinite(ecec) and math.isclose(sum(parts.values()), ecec,
                                                                rel_tol=1e-9, abs_tol=1e-12):
        return parts
    return {}


def _gypsum_layers_at(farm: FarmResult, name: str, row: int, col: int) -> list[RateLayer]:
    """The layers the gypsum treatment spans at one cell (samples at several depths), as
    the run summed them; empty for samples of one depth."""
    pr = farm.paddocks[name]
    if not pr.gypsum_spans:
        return []
    # the top layer (or the one layer of samples of one depth) is the paddock's cells
    by_label = {layer.label: cells for layer, cells in pr.layers}

    def at(v: Any) -> float:
        return float(np.asarray(v)[row, col]) if np.ndim(v) == 2 else float(v)

    return [RateLayer(label, at(by_label.get(label, pr.cells).get("esp", np.nan)),
                      at(by_label.get(label, pr.cells).get("ecec", np.nan)),
                      (bottom - top) / 100.0, at(bd))
            for label, top, bottom, bd in pr.gypsum_spans]


def _nan(v: Any) -> bool:
    try:
        return v is None or (isinstance(v, float) and math.isnan(v))
    except TypeError:
        return False


def format_explanation(e: Explanation) -> str:
    """The explanation as text for a terminal, top to bottom in the order of the arithmetic.

    Parameters
    ----------
    e : Explanation
        From :func:`explain_location`.

    Returns
    -------
    str
        The text, several lines.
    """
    out: list[str] = []
    out.append(
        f"Location: lon {e.lon:.6f}, lat {e.lat:.6f} = x {e.x:.1f}, y {e.y:.1f} (working CRS)"
    )
    out.append(f"Paddock: {e.paddock}, grid cell row {e.row}, column {e.col}")
    out.append("")
    out.append("1. Nearest samples (every lab value the sample has; cations, acidity, CEC "
               "and ECEC in cmol(+)/kg, pH as measured, other units beside the value)")
    for s in e.nearest_samples:
        vals = ", ".join(f"{k} {v:.3g}"
                         + (f" {u}" if (u := sample_unit(k)) not in ("", "cmol(+)/kg") else "")
                         for k, v in s.items()
                         if k not in ("sample_id", "distance_m", "source_row") and v is not None)
        out.append(f"   {s['sample_id']} ({s['distance_m']:.0f} m away, "
                   f"file row {s['source_row']}): {vals}")
    if e.soluble:
        out.append("   Soluble salts (cmol(+)/kg): " + e.soluble[0])
        out.extend(f"      {line}" for line in e.soluble[1:])
    out.append("")
    out.append("2. Interpolated values at this cell")
    for var, (v, sd, method) in sorted(e.interpolated.items()):
        sd_txt = f" +/- {sd:.3g} (kriging s.d.)" if sd is not None and math.isfinite(sd) else ""
        out.append(f"   {var}: {v:.4g}{sd_txt}  [{method}]")
    out.append("")
    out.append("3. Cell chemistry (amounts in cmol(+)/kg; shares in % of the cell's ECEC)")
    out.extend(_chemistry_lines(e))
    out.append("")
    out.append("4. Rules, step by step" + (
        "" if e.rate_unit == "kg/ha" else
        f" (rates in {e.rate_unit}; the rules' arithmetic runs in kg/ha, given in brackets)"))
    for st in e.steps:
        out.extend(_step_lines(st, e.rate_unit))
    out.append("")
    out.append("5. Zone rates the spreader applies here")
    if not e.zones:
        out.append("   none")
    for z in e.zones:
        out.append(
            f"   {z['product']}: zone {z['zone']} ({z['kind']}): "
            + (f"{z['rate_in_unit']:.4g} {z['unit']}" if z["unit"] == "kg/ha"
               else format_rate(z["rate_kg_ha"], z["unit"]))
            + ((f" as {z['schedule']}" if z.get("schedule") else f" in {z['passes']} passes")
               if z["passes"] > 1 else "")
        )
    for n in e.notes:
        out.append(f"   note: {n}")
    return "\n".join(out)


def _chemistry_lines(e: Explanation) -> list[str]:
    """Section 3 of :func:`format_explanation`: the cell's ECEC and shares."""
    out: list[str] = []
    if e.acidity_source and math.isfinite(e.cell.get("acidity", math.nan)):
        out.append(f"   exchangeable acidity = {e.acidity_source} = {e.cell['acidity']:.4g}")
    if e.ecec_parts:
        terms = " + ".join(f"{_LABEL[k]} {v:.4g}" for k, v in e.ecec_parts.items())
        out.append(f"   ECEC = {terms} = {e.cell['ecec']:.4g}")
    elif "ecec" in e.cell and math.isfinite(e.cell["ecec"]):
        lab = "cec" in e.cell and math.isfinite(e.cell["cec"])
        what = ("the lab's CEC" if lab else
                "the CEC at pH 7, bases + potential acidity: above the ECEC on acid soils")
        out.append(f"   ECEC = {e.cell['ecec']:.4g} ({what}; the exchangeable parts are "
                   "incomplete here)")
    for k, part in (("esp", "na"), ("ca_sat", "ca"), ("mg_sat", "mg"), ("k_sat", "k"),
                    ("acid_sat", "acidity"), ("al_sat", "al")):
        if k in e.cell and math.isfinite(e.cell[k]):
            how = "interpolated" if k in e.interpolated else f"100 x {_LABEL[part]} / ECEC"
            out.append(f"   {_LABEL[k]} = {how} = {e.cell[k]:.4g} %")
    for k, label in (("ph", "pH (water)"), ("ph_cacl2", "pH (CaCl2)")):
        if k in e.cell and math.isfinite(e.cell[k]):
            out.append(f"   {label} = {e.cell[k]:.3g}")
    return out


def _rate_text(kg_ha: float, unit: str) -> str:
    """A rate in ``unit`` (as every table shows it), with the kg/ha the arithmetic ran in
    beside it (``"2,230 lb/ac (2500 kg/ha)"``) when the unit is another."""
    if unit == "kg/ha" or not math.isfinite(kg_ha):
        return f"{kg_ha:.1f} kg/ha"
    return f"{format_rate(kg_ha, unit)} ({kg_ha:.6g} kg/ha)"


def _step_lines(st: Step, rate_unit: str = "kg/ha") -> list[str]:
    """One rule step of section 4 of :func:`format_explanation`; a value in kg/ha is shown
    in ``rate_unit`` first, its kg/ha in brackets."""

    def shown(v: Any, name: str = "") -> str:
        # a product's rate; an amount the formula names in kg ("kg Ca/ha") stays in kg/ha
        if (rate_unit != "kg/ha" and isinstance(v, tuple) and len(v) == 2
                and v[1] == "kg/ha" and isinstance(v[0], (int, float))
                and not name.startswith("kg ")):
            return _rate_text(float(v[0]), rate_unit)
        return _fmt(v)

    out = [f"   [{st.rule}] {st.description}"]
    if not st.formula and math.isnan(st.result):  # a note, not a computation
        return out
    if st.formula:
        out.append(f"      formula: {st.formula}")
    if st.inputs:
        ins = ", ".join(f"{k} = {shown(v, k)}" for k, v in st.inputs.items())
        out.append(f"      inputs: {ins}")
    out.append(f"      result: {shown((st.result, st.unit))}")
    if st.source:
        out.append(f"      source: {st.source}")
    return out


_LABEL = {
    "ca": "Ca", "mg": "Mg", "k": "K", "na": "Na", "acidity": "acidity", "al": "Al",
    "esp": "ESP", "ca_sat": "Ca saturation", "mg_sat": "Mg saturation", "k_sat": "K saturation",
    "acid_sat": "acid saturation", "al_sat": "Al saturation",
}


def _fmt(v: Any) -> str:
    if isinstance(v, tuple) and len(v) == 2:
        return f"{_fmt(v[0])} {v[1]}".rstrip()
    if isinstance(v, float):
        return f"{v:.6g}"
    return str(v)
