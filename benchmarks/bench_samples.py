"""Benchmark: one paddock with very many samples (a dense sensor survey or a lab's bulk file).

Run from the repository root::

    python benchmarks/bench_samples.py                         # 30 000 and 300 000 samples
    python benchmarks/bench_samples.py --samples 3000 30000 --ha 300

For each sample count it writes an invented one-paddock farm (``bench_scale.make_farm``:
samples on a jittered grid, lab values from smooth random fields plus noise), makes its
project with ``geosoil new`` and times ``geosoil run`` as a separate process with an empty
surface cache: wall time, CPU time, peak resident memory and the stages as ``run.json``
records them. It then says whether the run took the bounded paths (variograms fitted and
cross-validated on a spread subset of ``surfaces.FIT_MAX_SAMPLES``; kriging from the nearest
``surfaces.AUTO_NEIGHBOURS`` samples) by reading the run's warnings. Nothing here passes or
fails; the ratio printed is the time per sample against the smallest count.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_scale import LAST_CPU_S, make_farm, timed  # noqa: E402


def one(samples: int, ha: float) -> dict[str, object]:
    tmp = Path(tempfile.mkdtemp(prefix="geosoil-samples-"))
    try:
        farm = tmp / "farm"
        farm.mkdir()
        t0 = time.perf_counter()
        make_farm(farm, ha=ha, paddocks=1, samples=samples)
        print(f"  invented farm written in {time.perf_counter() - t0:.1f} s")
        env = dict(os.environ, XDG_CACHE_HOME=str(tmp / "cache"))
        timed(["new", str(tmp / "project"), "--samples", str(farm / "lab.csv"),
               "--paddocks", str(farm / "paddocks.geojson")], env=env)
        wall, peak, _ = timed(["-q", "run", str(tmp / "project"), "--out", str(tmp / "out")],
                              env=env)
        rec = json.loads((tmp / "out" / "run.json").read_text(encoding="utf-8"))
        said = [str(w) for w in rec.get("warnings", [])]
        return {
            "samples": samples, "wall_s": wall, "cpu_s": LAST_CPU_S[0], "peak_mib": peak,
            "stages": rec.get("timings_s", {}),
            "subset": any("a variogram is fitted and cross-validated on" in w for w in said),
            "local": any("global kriging is run on" in w for w in said),
            "sizes_mib": {p.name: p.stat().st_size / 2**20
                          for p in (tmp / "out").iterdir() if p.is_file()},
        }
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, nargs="+", default=[30_000, 300_000])
    ap.add_argument("--ha", type=float, default=300.0, help="the paddock's area")
    args = ap.parse_args()
    first: dict[str, object] | None = None
    for n in args.samples:
        print(f"one paddock of {args.ha:g} ha, {n} samples:")
        r = one(n, args.ha)
        stages = ", ".join(f"{k} {v:.1f} s" for k, v in r["stages"].items())  # type: ignore[union-attr]
        print(f"  run {r['wall_s']:.1f} s (CPU {r['cpu_s']:.1f} s), peak {r['peak_mib']:.0f} MiB"
              f" ({stages})")
        print(f"  variograms on a spread subset: {r['subset']}; local kriging: {r['local']}")
        big = sorted(r["sizes_mib"].items(), key=lambda kv: -kv[1])[:4]  # type: ignore[union-attr]
        print("  largest files: " + ", ".join(f"{k} {v:.1f} MiB" for k, v in big))
        if first is None:
            first = r
        else:
            per = (float(r["wall_s"]) / n) / (float(first["wall_s"]) / int(first["samples"]))  # type: ignore[arg-type]
            print(f"  time per sample = {per:.2f} x that of {first['samples']} samples")


if __name__ == "__main__":
    main()
