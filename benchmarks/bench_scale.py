"""Benchmark: a large invented farm, end to end, as a user runs it.

Run from the repository root::

    python benchmarks/bench_scale.py                      # 5 000 ha, 30 paddocks, 5 000 samples
    python benchmarks/bench_scale.py --ha 2000 --paddocks 10 --samples 2000
    python benchmarks/bench_scale.py --sweep              # 1 250, 2 500 and 5 000 ha

It writes an invented farm (square paddocks in a grid with tracks between them,
samples about one per hectare on a jittered grid, lab values from smooth random
fields plus noise) into a temporary folder, makes its project file with
``geosoil new`` (which picks the cell size for the farm's size), and times
``geosoil run`` as a separate process with an empty surface cache, then again
after a rate change (surfaces from the cache) into the same folder with
``--overwrite``, as a user re-runs (unchanged GeoTIFFs are copied). For each run it prints the wall
time, the peak resident memory of the process (``getrusage`` of the child), and
the time of each stage as the run recorded it in ``run.json``, with ratios
against the goals (60 s and 2 GiB for 5 000 ha). It also prints the CPU time
(user + system) of each run: on a machine busy with other work that is close
to the wall time the run would take alone. Nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import re
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

GOAL_S = 60.0
GOAL_MIB = 2048.0
WORKING_CRS = "EPSG:32755"  # WGS 84 / UTM 55S; the farm is drawn here, written in lon/lat
ORIGIN = (560_000.0, 6_150_000.0)  # invented place, about 147.65 E, 34.8 S


def _field(rng: np.random.Generator, xy: np.ndarray, scale_m: float, n: int = 24) -> np.ndarray:
    """A smooth random field of unit variance: a sum of random cosines (spectral method)."""
    k = rng.normal(0.0, 1.0 / scale_m, (n, 2))
    phase = rng.uniform(0, 2 * math.pi, n)
    return np.sqrt(2.0 / n) * np.cos(xy @ k.T + phase).sum(axis=1)


def make_farm(folder: Path, *, ha: float, paddocks: int, samples: int, seed: int = 1) -> None:
    """Write paddocks.geojson and lab.csv of an invented farm into ``folder``."""
    import geopandas as gpd
    import shapely

    rng = np.random.default_rng(seed)
    side = math.sqrt(ha * 1e4)
    cols = math.ceil(math.sqrt(paddocks))
    rows = math.ceil(paddocks / cols)
    w, h = side / cols, side / rows
    track = 6.0  # metres of track between paddocks
    polys, names = [], []
    for i in range(paddocks):
        r, c = divmod(i, cols)
        x0, y0 = ORIGIN[0] + c * w, ORIGIN[1] + r * h
        # a wobbly north edge so the paddocks are not all rectangles
        top = [(x0 + w - track / 2 - t * (w - track), y0 + h - track / 2 - 15 * math.sin(3 * t))
               for t in np.linspace(0, 1, 12)]
        ring = [(x0 + track / 2, y0 + track / 2), (x0 + w - track / 2, y0 + track / 2), *top]
        polys.append(shapely.Polygon(ring))
        names.append(f"Paddock {i + 1:02d}")
    pads = gpd.GeoDataFrame({"name": names}, geometry=polys, crs=WORKING_CRS)
    pads.to_crs("EPSG:4326").to_file(folder / "paddocks.geojson", driver="GeoJSON")
    # samples: a jittered grid over the farm, kept where they fall in a paddock
    total = pads.area.sum()
    step = math.sqrt(total / samples)
    gx, gy = np.meshgrid(np.arange(step / 2, side, step), np.arange(step / 2, side, step))
    xy = np.column_stack([gx.ravel(), gy.ravel()]) + ORIGIN
    xy += rng.uniform(-0.3 * step, 0.3 * step, xy.shape)
    inside = shapely.contains_xy(shapely.union_all(polys), xy[:, 0], xy[:, 1])
    xy = xy[inside][:samples]
    local = xy - ORIGIN
    n = len(xy)
    ca = np.clip(9.0 + 3.0 * _field(rng, local, 600) + 0.5 * rng.normal(size=n), 0.5, None)
    mg = np.clip(2.5 + 0.8 * _field(rng, local, 500) + 0.2 * rng.normal(size=n), 0.1, None)
    k = np.clip(0.7 + 0.2 * _field(rng, local, 700) + 0.05 * rng.normal(size=n), 0.05, None)
    na = np.exp(np.log(0.6) + 0.7 * _field(rng, local, 800) + 0.15 * rng.normal(size=n))
    al = np.clip(0.3 + 0.6 * _field(rng, local, 900) + 0.1 * rng.normal(size=n), 0.0, None)
    acid = al + np.clip(0.1 + 0.05 * rng.normal(size=n), 0.0, None)
    ph = 5.4 - 0.5 * al + 0.1 * rng.normal(size=n)
    ll = gpd.GeoSeries(gpd.points_from_xy(xy[:, 0], xy[:, 1]), crs=WORKING_CRS).to_crs(
        "EPSG:4326")
    header = ("Sample ID,Latitude,Longitude,pH (CaCl2),Exch Ca (cmol(+)/kg),"
              "Exch Mg (cmol(+)/kg),Exch K (cmol(+)/kg),Exch Na (cmol(+)/kg),"
              "Exch Al (cmol(+)/kg),Exch. Acidity (cmol(+)/kg)")
    lat, lon = ll.y.to_numpy(), ll.x.to_numpy()
    lines = [header]
    for i in range(n):
        lines.append(f"S{i + 1:05d},{lat[i]:.7f},{lon[i]:.7f},{ph[i]:.2f},"
                     f"{ca[i]:.2f},{mg[i]:.2f},{k[i]:.3f},{na[i]:.3f},{al[i]:.2f},{acid[i]:.2f}")
    (folder / "lab.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")


def _geosoil() -> list[str]:
    exe = Path(sys.executable).with_name("geosoil")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "geosoil.cli.main"]


#: CPU seconds (user + system) of the last command timed: on a machine shared with other
#: work, close to what the wall time would be on an idle one (the run is mostly one thread).
LAST_CPU_S = [0.0]


def timed(args: list[str], *, env: dict[str, str]) -> tuple[float, float, str]:
    """Wall time (s), peak resident memory of the child (MiB) and stderr of one command."""
    ru0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    before = ru0.ru_maxrss
    t0 = time.perf_counter()
    done = subprocess.run([*_geosoil(), *args], capture_output=True, text=True, env=env)
    wall = time.perf_counter() - t0
    ru1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    LAST_CPU_S[0] = (ru1.ru_utime + ru1.ru_stime) - (ru0.ru_utime + ru0.ru_stime)
    peak = ru1.ru_maxrss
    if done.returncode != 0:
        raise SystemExit(f"geosoil {' '.join(args)} failed:\n{done.stderr}")
    # ru_maxrss of the children is the largest child so far: a new peak shows as a rise
    return wall, max(peak, before) / 1024.0, done.stderr


def one_farm(ha: float, paddocks: int, samples: int, *, keep: Path | None) -> dict[str, object]:
    tmp = Path(tempfile.mkdtemp(prefix="geosoil-scale-"))
    try:
        farm = tmp / "farm"
        farm.mkdir()
        t0 = time.perf_counter()
        make_farm(farm, ha=ha, paddocks=paddocks, samples=samples)
        print(f"  invented farm written in {time.perf_counter() - t0:.1f} s")
        env = dict(os.environ, XDG_CACHE_HOME=str(tmp / "cache"))
        _, _, err = timed(["new", str(tmp / "project"), "--samples", str(farm / "lab.csv"),
                           "--paddocks", str(farm / "paddocks.geojson")], env=env)
        cell = [ln for ln in err.splitlines() if "cell" in ln.lower()]
        print("  new: " + (cell[0].strip() if cell else "(no note on the cell size)"))
        out = {"ha": ha, "paddocks": paddocks, "samples": samples}
        wall, peak, _ = timed(["-q", "run", str(tmp / "project"), "--out", str(tmp / "out")],
                              env=env)
        rec = json.loads((tmp / "out" / "run.json").read_text(encoding="utf-8"))
        out.update(full_s=wall, full_cpu_s=LAST_CPU_S[0], full_mib=peak,
                   stages=rec.get("timings_s", {}), cpu=rec.get("cpu_s", {}))
        # a rate change: the surfaces come from the cache
        toml = tmp / "project" / "geosoil.toml"
        text = toml.read_text(encoding="utf-8")
        toml.write_text(re.sub(r"target_esp_percent = [0-9.]+", "target_esp_percent = 7.5", text),
                        encoding="utf-8")
        # into the same folder, as a user re-runs: unchanged GeoTIFFs are copied from it
        wall2, peak2, _ = timed(["-q", "run", str(tmp / "project"), "--out", str(tmp / "out"),
                                 "--overwrite"], env=env)
        rec2 = json.loads((tmp / "out" / "run.json").read_text(encoding="utf-8"))
        out.update(rerun_s=wall2, rerun_cpu_s=LAST_CPU_S[0], rerun_mib=peak2,
                   rerun_stages=rec2.get("timings_s", {}), copied=rec2.get("geotiffs_copied"),
                   rerun_cpu=rec2.get("cpu_s", {}),
                   cell_size_m=rec.get("settings", {}).get("grid", {}).get("cell_size_m"))
        if keep is not None:
            shutil.copytree(tmp, keep, dirs_exist_ok=True)
        return out
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def _stages(wall: dict[str, float], cpu: dict[str, float], total_cpu: float) -> str:
    """Each stage's wall time with its CPU time, and the CPU left for start-up and writing."""
    parts = [f"{k} {v:.1f} s (CPU {cpu.get(k, float('nan')):.1f})" for k, v in wall.items()]
    rest = total_cpu - sum(cpu.values()) if cpu else float("nan")
    return ", ".join(parts) + f"; start-up and writing CPU {rest:.1f} s"


def _print(r: dict[str, object]) -> None:
    stages = _stages(r["stages"], r["cpu"], r["full_cpu_s"])  # type: ignore[arg-type]
    print(f"  cell size {r['cell_size_m']} m")
    print(f"  full run  {r['full_s']:6.1f} s  (CPU {r['full_cpu_s']:6.1f} s)  peak "
          f"{r['full_mib']:6.0f} MiB   ({stages})")
    stages = _stages(r["rerun_stages"], r["rerun_cpu"], r["rerun_cpu_s"])  # type: ignore[arg-type]
    print(f"  re-run    {r['rerun_s']:6.1f} s  (CPU {r['rerun_cpu_s']:6.1f} s)  (rate change, "
          f"surfaces cached: {stages}; GeoTIFFs copied: {r['copied']})")
    if r["ha"] == 5000:
        print(f"  full run = {r['full_s'] / GOAL_S:.2f} x the {GOAL_S:g} s goal; peak memory = "
              f"{r['full_mib'] / GOAL_MIB:.2f} x the {GOAL_MIB:g} MiB goal")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--ha", type=float, default=5000.0)
    ap.add_argument("--paddocks", type=int, default=30)
    ap.add_argument("--samples", type=int, default=5000)
    ap.add_argument("--sweep", action="store_true",
                    help="1 250, 2 500 and 5 000 ha with samples and paddocks in proportion")
    ap.add_argument("--keep", type=Path, default=None, help="copy the farm and outputs here")
    args = ap.parse_args()
    runs = ([(1250.0, 8, 1250), (2500.0, 15, 2500), (5000.0, 30, 5000)] if args.sweep
            else [(args.ha, args.paddocks, args.samples)])
    results = []
    for ha, pads, n in runs:
        print(f"{ha:g} ha, {pads} paddocks, {n} samples:")
        r = one_farm(ha, pads, n, keep=args.keep)
        _print(r)
        results.append(r)
    if len(results) > 1:
        print("\ngrowth against the smallest farm (time ratio / area ratio):")
        base = results[0]
        for r in results[1:]:
            scale = float(r["ha"]) / float(base["ha"])  # type: ignore[arg-type]
            print(f"  {r['ha']:g} ha: {float(r['full_s']) / float(base['full_s']):.2f} x the "  # type: ignore[arg-type]
                  f"time for {scale:g} x the area")


if __name__ == "__main__":
    main()
