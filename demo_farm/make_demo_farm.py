"""Write the invented demo farm "Bellbird Rise": boundaries, creek, zones and a lab file.

Everything here is invented: the farm, its paddocks, the creek and every lab value.
The data are drawn from smooth random fields (sums of random cosines, a spectral
method, plus Gaussian bumps for the problem patches) with a little independent
noise (the nugget), so a variogram fitted to them finds spatial structure.

Run it from the repository root (it needs only numpy, shapely and geopandas)::

    python demo_farm/make_demo_farm.py            # rewrites the files in demo_farm/
    python demo_farm/make_demo_farm.py --out DIR  # writes them into DIR instead

The output is the same byte for byte on every run with the same seed.

Files written
-------------
paddocks.geojson        RFC 7946 (WGS 84 lon/lat), property "name"; three paddocks
creek.geojson           RFC 7946 LineString, property "name"
exclusions.geojson      RFC 7946 polygons left untreated, property "name"
zones_windmill.geojson  RFC 7946 management zones of paddock Windmill,
                        properties "zone" and "description"
lab_results.csv         UTF-8, comma-separated, one row per sample, mixed units (see README.md)
"""

from __future__ import annotations

import argparse
import csv
import io
import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import shapely
from shapely.geometry import mapping

__all__ = ["make_demo_farm", "SEED", "WORKING_CRS", "FARM_NAME"]

SEED = 20240917
FARM_NAME = "Bellbird Rise"
#: Metric CRS the scenario is drawn in (WGS 84 / UTM zone 55S); files are written in lon/lat.
WORKING_CRS = "EPSG:32755"
#: Local origin of the drawing, metres in WORKING_CRS (about 147.45 E, 34.70 S).
ORIGIN_E, ORIGIN_N = 541_200.0, 6_160_400.0

#: mg/kg per cmol(+)/kg of Mg: 10 x 24.305 / 2 (IUPAC standard atomic weight; derived).
MG_MG_PER_CMOL = 121.525
#: mmol/kg per cmol(+)/kg of Na (monovalent): 10 (derived, by definition).
NA_MMOL_PER_CMOL = 10.0

#: Below this the lab reports exchangeable Al as "<0.1" (a detection limit, as labs do).
AL_DETECTION_LIMIT = 0.1

#: Centres (local metres) and spreads of the invented problem patches.
ACID_CENTRE, ACID_SIGMA = (780.0, 1150.0), 160.0  # Red Hill, north-east rise
SODIC_CENTRE, SODIC_SIGMA = (330.0, 270.0), 120.0  # Creek Flat, low ground by the creek
MG_CENTRE, MG_SIGMA = (560.0, 430.0), 150.0  # Creek Flat, grey clay
MG2_CENTRE, MG2_SIGMA = (1080.0, 390.0), 170.0  # Windmill, zone 3

SAMPLE_SPACING_M = 100.0  # one sample per hectare on a square grid
EDGE_MARGIN_M = 10.0  # samplers keep off fences
FEATURE_MARGIN_M = 15.0  # ... and off the dam, trees, windmill and creek buffer
CREEK_BUFFER_M = 10.0  # the default creek buffer of geosoil.boundaries
CREEK_BED_HALF_WIDTH_M = 4.0  # fenced creek bed between the two parts of Creek Flat


# --------------------------------------------------------------------------- geometry


def _creek_line() -> shapely.LineString:
    """A meandering creek from north-west to south-east across Creek Flat."""
    start, end = np.array([-140.0, 480.0]), np.array([600.0, -120.0])
    t = np.linspace(0.0, 1.0, 41)
    along = start + np.outer(t, end - start)
    normal = np.array([-(end - start)[1], (end - start)[0]])
    normal /= np.hypot(*normal)
    length = float(np.hypot(*(end - start)))
    wiggle = 30.0 * np.sin(2 * math.pi * t * length / 260.0) + 12.0 * np.sin(
        2 * math.pi * t * length / 90.0 + 1.0
    )
    return shapely.LineString(along + np.outer(wiggle, normal))


def _ellipse(cx: float, cy: float, a: float, b: float, angle_deg: float) -> shapely.Polygon:
    th = np.linspace(0.0, 2 * math.pi, 37)[:-1]
    x, y = a * np.cos(th), b * np.sin(th)
    c, s = math.cos(math.radians(angle_deg)), math.sin(math.radians(angle_deg))
    return shapely.Polygon(np.column_stack([cx + c * x - s * y, cy + s * x + c * y]))


@dataclass(frozen=True)
class Layout:
    paddocks: dict[str, shapely.Polygon | shapely.MultiPolygon]
    dam: shapely.Polygon
    creek: shapely.LineString
    exclusions: dict[str, shapely.Polygon]
    zones: dict[int, tuple[str, shapely.Polygon]]


def _layout() -> Layout:
    red_hill_outline = shapely.Polygon(
        [(0, 612), (955, 600), (990, 985), (905, 1305), (385, 1330), (25, 1250)]
    )
    dam = _ellipse(330.0, 930.0, 48.0, 32.0, 20.0)
    red_hill = shapely.Polygon(red_hill_outline.exterior.coords, [dam.exterior.coords[::-1]])

    creek = _creek_line()
    creek_flat_outline = shapely.Polygon([(0, 0), (690, 12), (702, 588), (12, 594)])
    creek_flat = creek_flat_outline.difference(creek.buffer(CREEK_BED_HALF_WIDTH_M))
    assert creek_flat.geom_type == "MultiPolygon" and len(creek_flat.geoms) == 2

    windmill = shapely.Polygon([(716, 14), (1190, 0), (1202, 472), (722, 490)])

    exclusions = {
        "Tree clump": _ellipse(600.0, 1200.0, 38.0, 26.0, -15.0),
        "Windmill and trough": shapely.box(955.0, 100.0, 990.0, 126.0),
    }

    seeds = shapely.MultiPoint([(835, 360), (860, 110), (1090, 385), (1075, 120)])
    cells = shapely.voronoi_polygons(seeds, extend_to=windmill.buffer(500))
    by_seed = {}
    for cell in cells.geoms:
        for i, p in enumerate(seeds.geoms):
            if cell.contains(p):
                by_seed[i] = cell.intersection(windmill)
    descriptions = [
        "North-west rise, red loam",
        "South-west slope, red-brown loam",
        "North-east flat, grey clay",
        "South-east slope, loam over clay",
    ]
    zones = {
        i + 1: (descriptions[i], by_seed[i].normalize()) for i in range(len(descriptions))
    }
    return Layout(
        paddocks={"Red Hill": red_hill, "Creek Flat": creek_flat, "Windmill": windmill},
        dam=dam,
        creek=creek,
        exclusions=exclusions,
        zones=zones,
    )


def _untreated(layout: Layout) -> shapely.Geometry:
    """Everything a sample must keep clear of (with margins)."""
    return shapely.union_all(
        [
            layout.dam.buffer(FEATURE_MARGIN_M),
            layout.creek.buffer(CREEK_BUFFER_M + FEATURE_MARGIN_M),
            *[g.buffer(FEATURE_MARGIN_M) for g in layout.exclusions.values()],
        ]
    )


# --------------------------------------------------------------------------- soil fields


class _Fields:
    """Smooth random fields (unit variance) from sums of random cosines."""

    def __init__(self, rng: np.random.Generator, *, n_waves: int = 96) -> None:
        self._rng = rng
        self._n = n_waves
        self._waves: dict[str, tuple[np.ndarray, np.ndarray]] = {}

    def add(self, name: str, length_m: float) -> None:
        # wave vectors from the spectrum of a Gaussian covariance exp(-h^2 / (2 L^2))
        k = self._rng.normal(0.0, 1.0 / length_m, size=(self._n, 2))
        phase = self._rng.uniform(0.0, 2 * math.pi, size=self._n)
        self._waves[name] = (k, phase)

    def __call__(self, name: str, xy: np.ndarray) -> np.ndarray:
        k, phase = self._waves[name]
        return math.sqrt(2.0 / self._n) * np.cos(xy @ k.T + phase).sum(axis=1)


def _bump(xy: np.ndarray, centre: tuple[float, float], sigma: float) -> np.ndarray:
    d2 = ((xy - np.asarray(centre)) ** 2).sum(axis=1)
    return np.exp(-d2 / (2.0 * sigma**2))


def _chemistry(fields: _Fields, xy: np.ndarray) -> dict[str, np.ndarray]:
    """Noise-free soil chemistry (cmol(+)/kg, pH, dS/m) at local points ``xy``."""
    acid = _bump(xy, ACID_CENTRE, ACID_SIGMA)
    sodic = _bump(xy, SODIC_CENTRE, SODIC_SIGMA)
    mg_rich = _bump(xy, MG_CENTRE, MG_SIGMA) + 1.1 * _bump(xy, MG2_CENTRE, MG2_SIGMA)

    ecec = np.clip(14.0 + 3.0 * fields("cec", xy) + 6.0 * sodic + 4.0 * mg_rich - 5.0 * acid,
                   5.5, 29.0)
    ph = np.clip(5.6 + 0.25 * fields("ph", xy) - 1.3 * acid + 1.7 * sodic + 0.3 * mg_rich,
                 4.1, 8.0)
    esp = np.clip(1.8 + 0.7 * fields("na", xy), 0.4, None) + 19.0 * sodic
    mg_sat = 17.0 + 2.5 * fields("mg", xy) + 22.0 * mg_rich + 6.0 * sodic
    k_sat = np.clip(5.0 + 1.2 * fields("k", xy), 1.5, None)
    acid_sat = 0.6 + 55.0 * np.clip(5.15 - ph, 0.0, None) ** 1.1
    al_share = np.clip(0.15 + 0.9 * (5.15 - ph), 0.05, 0.85)
    ca_sat = 100.0 - mg_sat - k_sat - esp - acid_sat
    assert np.all(ca_sat > 10.0), "invented saturations leave too little Ca"
    ec = np.clip(0.06 + 0.02 * fields("ec", xy) + 0.45 * sodic + 0.08 * mg_rich, 0.02, None)
    acidity = ecec * acid_sat / 100.0
    return {
        "ca": ecec * ca_sat / 100.0,
        "mg": ecec * mg_sat / 100.0,
        "k": ecec * k_sat / 100.0,
        "na": ecec * esp / 100.0,
        "acidity": acidity,
        "al": acidity * al_share,
        "ph": ph,
        "ec": ec,
    }


_CATIONS = ("ca", "mg", "k", "na", "acidity", "al")


def _with_noise(rng: np.random.Generator, chem: dict[str, np.ndarray], scale: float
                ) -> dict[str, np.ndarray]:
    """Independent measurement and short-range noise (the nugget)."""
    out = dict(chem)
    n = len(chem["ph"])
    for key in ("ca", "mg", "k", "na", "acidity"):
        out[key] = chem[key] * np.exp(rng.normal(0.0, 0.07 * scale, n))
    out["al"] = np.minimum(chem["al"] * np.exp(rng.normal(0.0, 0.07 * scale, n)), out["acidity"])
    out["ph"] = chem["ph"] + rng.normal(0.0, 0.07 * scale, n)
    out["ec"] = chem["ec"] * np.exp(rng.normal(0.0, 0.10 * scale, n))
    return out


# --------------------------------------------------------------------------- samples


def _grid_points(rng: np.random.Generator, region: shapely.Geometry, offset: tuple[float, float]
                 ) -> np.ndarray:
    x0, y0, x1, y1 = region.bounds
    step = SAMPLE_SPACING_M
    xs = np.arange(math.floor((x0 - offset[0]) / step),
                   math.ceil((x1 - offset[0]) / step) + 1) * step + offset[0]
    ys = np.arange(math.floor((y0 - offset[1]) / step),
                   math.ceil((y1 - offset[1]) / step) + 1) * step + offset[1]
    gx, gy = np.meshgrid(xs, ys[::-1])  # rows from north to south, as a sampler walks
    xy = np.column_stack([gx.ravel(), gy.ravel()])
    xy = xy + rng.uniform(-12.0, 12.0, size=xy.shape)  # where the quad bike actually stopped
    inside = shapely.contains_xy(region, xy[:, 0], xy[:, 1])
    return xy[inside]


def _zone_cores(region: shapely.Geometry) -> np.ndarray:
    """Points on a 10 m lattice inside ``region``: where a composite's cores come from."""
    x0, y0, x1, y1 = region.bounds
    gx, gy = np.meshgrid(np.arange(x0, x1, 10.0) + 5.0, np.arange(y0, y1, 10.0) + 5.0)
    xy = np.column_stack([gx.ravel(), gy.ravel()])
    return xy[shapely.contains_xy(region, xy[:, 0], xy[:, 1])]


def _composite(chem: dict[str, np.ndarray]) -> dict[str, float]:
    """Lab value of a bulked sample: mean amounts; pH from the mean H+ activity."""
    out = {k: float(np.mean(v)) for k, v in chem.items() if k != "ph"}
    out["ph"] = float(-np.log10(np.mean(10.0 ** (-chem["ph"]))))
    return out


# --------------------------------------------------------------------------- writing


def _to_lonlat(geoms: list[shapely.Geometry]) -> list[shapely.Geometry]:
    local = [shapely.affinity.translate(g, ORIGIN_E, ORIGIN_N) for g in geoms]
    lonlat = gpd.GeoSeries(local, crs=WORKING_CRS).to_crs("EPSG:4326").tolist()
    # 6 decimals is about 10 cm (RFC 7946 section 11.2); outer rings anticlockwise (3.1.6)
    rounded = [shapely.transform(g, lambda c: np.round(c, 6)) for g in lonlat]
    out = [shapely.orient_polygons(g) if g.geom_type in ("Polygon", "MultiPolygon") else g
           for g in rounded]
    for g in out:
        assert g.is_valid, shapely.is_valid_reason(g)
    return out


def _feature_collection(rows: list[tuple[dict[str, object], shapely.Geometry]]) -> str:
    feats = [
        json.dumps({"type": "Feature", "properties": props, "geometry": mapping(geom)},
                   ensure_ascii=False)
        for props, geom in rows
    ]
    return '{"type": "FeatureCollection", "features": [\n' + ",\n".join(feats) + "\n]}\n"


def _fmt(value: float, decimals: int) -> str:
    return f"{value:.{decimals}f}"


# --------------------------------------------------------------------------- main


def make_demo_farm(out_dir: Path, *, seed: int = SEED, verbose: bool = False) -> dict[str, Path]:
    """Write the demo farm's files into ``out_dir`` and return them by name.

    Parameters
    ----------
    out_dir
        Folder to write into (created if missing). Existing files of the same
        names are replaced.
    seed
        Seed of the random generator; the same seed gives the same bytes.
    verbose
        Print a summary of the scenario.
    """
    rng = np.random.default_rng(seed)
    fields = _Fields(rng)
    for name, length in (("cec", 260.0), ("ph", 200.0), ("na", 180.0), ("mg", 220.0),
                         ("k", 240.0), ("ec", 200.0)):
        fields.add(name, length)

    layout = _layout()
    untreated = _untreated(layout)

    samples: list[dict[str, Any]] = []

    # grid paddocks: Red Hill and Creek Flat, about one sample per hectare
    grid_paddocks = (("RH", "Red Hill", (40.0, 60.0)), ("CF", "Creek Flat", (55.0, 45.0)))
    for code, name, offset in grid_paddocks:
        region = layout.paddocks[name].buffer(-EDGE_MARGIN_M).difference(untreated)
        xy = _grid_points(rng, region, offset)
        chem = _with_noise(rng, _chemistry(fields, xy), 1.0)
        for i in range(len(xy)):
            samples.append({
                "id": f"{code}-{i + 1:02d}", "paddock": name, "xy": xy[i],
                **{k: float(v[i]) for k, v in chem.items()}, "comment": "",
            })

    # zoned paddock: Windmill, one composite per management zone
    windmill_clear = layout.paddocks["Windmill"].buffer(-EDGE_MARGIN_M).difference(untreated)
    for zone_id, (_description, zone) in layout.zones.items():
        clear = zone.intersection(windmill_clear)
        cores = _zone_cores(clear)
        comp = _composite(_chemistry(fields, cores))
        noisy = _with_noise(rng, {k: np.array([v]) for k, v in comp.items()}, 0.4)
        spot = clear.buffer(-20.0)
        point = spot.centroid if spot.contains(spot.centroid) else spot.point_on_surface()
        samples.append({
            "id": f"WM-Z{zone_id}", "paddock": "Windmill", "xy": np.array([point.x, point.y]),
            **{k: float(v[0]) for k, v in noisy.items()},
            "comment": f"Composite of 20 cores across zone {zone_id}",
        })

    # field notes a sampler might write
    for s in samples:
        p = shapely.Point(s["xy"])
        if s["comment"]:
            continue
        if p.distance(layout.dam) < 60.0:
            s["comment"] = "Near dam"
        elif p.distance(layout.creek) < 40.0:
            s["comment"] = "Creek bank, wet"
        elif s["na"] / (s["ca"] + s["mg"] + s["k"] + s["na"] + s["acidity"]) > 0.15:
            s["comment"] = "Surface crusting, hard setting"

    points = _to_lonlat([shapely.Point(s["xy"]) for s in samples])

    # lab file: the lab rounds each value its own way and mixes units
    header = [
        "Sample ID", "Depth (cm)", "Latitude", "Longitude", "pH (CaCl2)", "EC 1:5 (dS/m)",
        "Exch Ca (meq/100g)", "Mg mg/kg", "K (cmol(+)/kg)", "Exch. Na (mmol/kg)",
        "Exch Al (meq/100g)", "Exch. Acidity (meq/100g)", "ECEC (cmol(+)/kg)", "Comments",
    ]
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(header)
    for s, pt in zip(samples, points, strict=True):
        ecec = s["ca"] + s["mg"] + s["k"] + s["na"] + s["acidity"]
        writer.writerow([
            s["id"], "0-10", _fmt(pt.y, 6), _fmt(pt.x, 6), _fmt(s["ph"], 1), _fmt(s["ec"], 2),
            _fmt(s["ca"], 2), str(round(s["mg"] * MG_MG_PER_CMOL)), _fmt(s["k"], 2),
            _fmt(s["na"] * NA_MMOL_PER_CMOL, 1),
            f"<{AL_DETECTION_LIMIT:g}" if s["al"] < AL_DETECTION_LIMIT else _fmt(s["al"], 2),
            _fmt(s["acidity"], 2), _fmt(ecec, 1), s["comment"],
        ])

    names = list(layout.paddocks)
    paddock_geoms = _to_lonlat([layout.paddocks[n] for n in names])
    creek_geom = _to_lonlat([layout.creek])[0]
    exclusion_names = list(layout.exclusions)
    exclusion_geoms = _to_lonlat([layout.exclusions[n] for n in exclusion_names])
    zone_ids = list(layout.zones)
    zone_geoms = _to_lonlat([layout.zones[z][1] for z in zone_ids])

    texts = {
        "paddocks.geojson": _feature_collection(
            [({"name": n}, g) for n, g in zip(names, paddock_geoms, strict=True)]),
        "creek.geojson": _feature_collection([({"name": "Bellbird Creek"}, creek_geom)]),
        "exclusions.geojson": _feature_collection(
            [({"name": n}, g) for n, g in zip(exclusion_names, exclusion_geoms, strict=True)]),
        "zones_windmill.geojson": _feature_collection(
            [({"zone": z, "description": layout.zones[z][0]}, g)
             for z, g in zip(zone_ids, zone_geoms, strict=True)]),
        "lab_results.csv": buffer.getvalue(),
    }
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    written = {}
    for fname, text in texts.items():
        path = out_dir / fname
        path.write_bytes(text.encode("utf-8"))
        written[fname] = path
    if verbose:
        _summary(written, layout, samples)
    return written


def _summary(files: dict[str, Path], layout: Layout, samples: list[dict[str, Any]]) -> None:
    """Read the files back with geopandas and print what the scenario holds."""
    import pandas as pd

    paddocks = gpd.read_file(files["paddocks.geojson"]).to_crs(WORKING_CRS)
    lab = pd.read_csv(files["lab_results.csv"], dtype=str, keep_default_na=False)
    pts = gpd.GeoDataFrame(
        lab, geometry=gpd.points_from_xy(lab["Longitude"].astype(float),
                                         lab["Latitude"].astype(float)), crs="EPSG:4326"
    ).to_crs(WORKING_CRS)
    joined = gpd.sjoin(pts, paddocks, predicate="within")
    ca = lab["Exch Ca (meq/100g)"].astype(float)
    mg = lab["Mg mg/kg"].astype(float) / MG_MG_PER_CMOL
    na = lab["Exch. Na (mmol/kg)"].astype(float) / NA_MMOL_PER_CMOL
    ecec = lab["ECEC (cmol(+)/kg)"].astype(float)
    ph = lab["pH (CaCl2)"].astype(float)
    esp = 100.0 * na / ecec
    print(f"{FARM_NAME}: {len(lab)} samples written to {files['lab_results.csv'].parent}")
    for _, row in paddocks.iterrows():
        n = int((joined["name"] == row["name"]).sum())
        area = row.geometry.area / 1e4
        print(f"  {row['name']:<11} {area:6.1f} ha  {row.geometry.geom_type:<12} "
              f"holes {sum(len(p.interiors) for p in shapely.get_parts(row.geometry))}  "
              f"{n:3d} samples ({n / area:.2f} per ha)")
    print(f"  ECEC {ecec.min():.1f} to {ecec.max():.1f} cmol(+)/kg; "
          f"pH(CaCl2) {ph.min():.1f} to {ph.max():.1f}")
    print(f"  max ESP {esp.max():.1f} % at {lab['Sample ID'][esp.idxmax()]}; "
          f"{int((esp >= 6).sum())} samples with ESP >= 6 %")
    print(f"  min pH {ph.min():.1f} at {lab['Sample ID'][ph.idxmin()]}; "
          f"{int((ph <= 4.8).sum())} samples with pH <= 4.8")
    ratio = ca / mg
    print(f"  min Ca:Mg {ratio.min():.2f} at {lab['Sample ID'][ratio.idxmin()]}; "
          f"{int((ratio < 2).sum())} samples with Ca:Mg < 2")
    print(f"  {int((lab['Exch Al (meq/100g)'].str.startswith('<')).sum())} Al values below "
          f"detection (<{AL_DETECTION_LIMIT:g})")
    print("  file sizes: " + ", ".join(f"{k} {p.stat().st_size} B" for k, p in files.items()))


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent,
                        help="folder to write into (default: this folder)")
    parser.add_argument("--seed", type=int, default=SEED, help=f"random seed (default {SEED})")
    args = parser.parse_args(argv)
    make_demo_farm(args.out, seed=args.seed, verbose=True)


if __name__ == "__main__":
    main()
