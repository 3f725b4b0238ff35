"""Benchmark: many invented farms in one batch against a plain loop, in the same run.

The farms are invented: the demo farm's generator (``demo_farm/make_demo_farm.py``)
with a different seed for each, so each farm has its own lab values (and so its
own variograms, rates and zones) on the demo's paddocks. Every farm is run

1. one after the other in this process (``pipeline.run`` in a loop), then
2. as one batch on a local Dask cluster of 1 and of 2 worker processes
   (``batch.run_batch``; the time is given with and without starting the cluster).

No surface cache is used by either (every surface is interpolated). The script
prints the times, the ratio of the loop's time to each batch's, the scaling from
1 to 2 workers, the memory limit of each worker and the highest peak resident
memory of a worker process, and checks that every farm's ``tonnage.csv`` is the
same byte for byte in the loop and in the batches.

Usage::

    python benchmarks/bench_batch.py              # 20 farms on the demo's 10 m grid
    python benchmarks/bench_batch.py --quick      # 6 farms on a 40 m grid
    python benchmarks/bench_batch.py --farms 8 --workers 1,2,4
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import tempfile
import time
from pathlib import Path

from distributed import Client
from geosoil.demo_farm.make_demo_farm import SEED, make_demo_farm

from geosoil import batch, demo_farm
from geosoil.job import run
from geosoil.project import load_project

DEMO = Path(demo_farm.__file__).parent


def make_farms(root: Path, n: int, cell_size_m: float) -> list[Path]:
    """``n`` invented farms from the demo generator, seeds SEED + 1 ... SEED + n."""
    template = (DEMO / "geosoil.toml").read_text(encoding="utf-8")
    if cell_size_m != 10.0:
        template = template.replace("cell_size_m = 10.0", f"cell_size_m = {cell_size_m}")
    out = []
    for i in range(1, n + 1):
        farm = root / f"farm-{i:02d}"
        make_demo_farm(farm, seed=SEED + i)
        text = template.replace('farm = "Bellbird Rise (invented demo farm)"',
                                f'farm = "Invented farm {i:02d}"')
        (farm / "geosoil.toml").write_text(text, encoding="utf-8")
        out.append(farm / "geosoil.toml")
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--farms", type=int, default=20)
    parser.add_argument("--cell-size", type=float, default=10.0, help="grid cell size, m")
    parser.add_argument("--workers", default="1,2", help="worker counts to try, e.g. 1,2")
    parser.add_argument("--quick", action="store_true", help="6 farms on a 40 m grid")
    args = parser.parse_args()
    if args.quick:
        args.farms, args.cell_size = 6, 40.0
    counts = [int(x) for x in args.workers.split(",")]
    with tempfile.TemporaryDirectory(prefix="bench-batch-") as tmp:
        root = Path(tmp)
        os.environ["XDG_CACHE_HOME"] = str(root / "cache")  # never the user's cache
        projects = make_farms(root / "farms", args.farms, args.cell_size)
        print(f"{args.farms} invented farms, {args.cell_size:g} m grid, "
              f"{os.cpu_count()} cores, load average {os.getloadavg()[0]:.1f} at the start")

        t0 = time.perf_counter()
        for p in projects:
            run(load_project(p), out_dir=root / "loop" / p.parent.name, use_cache=False)
        loop_s = time.perf_counter() - t0
        loop_peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        print(f"sequential loop in this process: {loop_s:8.1f} s "
              f"({loop_s / args.farms:.1f} s a farm; peak memory of this process "
              f"{loop_peak:.0f} MiB)")

        times: dict[int, float] = {}
        for n in counts:
            out = root / f"batch-{n}"
            t0 = time.perf_counter()
            with batch.local_cluster(workers=n) as cluster, Client(cluster) as client:
                started = time.perf_counter() - t0
                t1 = time.perf_counter()
                result = batch.run_batch(projects, out_dir=out, client=client, use_cache=False)
                work = time.perf_counter() - t1
            times[n] = time.perf_counter() - t0
            failed = [o.name for o in result.failed]
            same = sum(
                (out / o.name / "tonnage.csv").read_bytes()
                == (root / "loop" / o.name / "tonnage.csv").read_bytes()
                for o in result.outcomes if o.status == "done"
            )
            peaks = [o.peak_rss_mib for o in result.outcomes if o.peak_rss_mib is not None]
            record = json.loads((out / batch.BATCH_RECORD).read_text(encoding="utf-8"))
            print(f"batch, {n} worker(s):            {times[n]:8.1f} s  "
                  f"loop / batch = {loop_s / times[n]:.2f}  "
                  f"tonnage.csv identical for {same}/{args.farms} farms"
                  + (f"  FAILED: {failed}" if failed else ""))
            print(f"    of which starting the cluster {started:.1f} s; without it "
                  f"loop / batch = {loop_s / work:.2f}")
            print(f"    memory limit per worker {record['cluster']['memory_limit_text']}; "
                  f"highest peak resident memory of a worker process "
                  f"{max(peaks) if peaks else float('nan'):.0f} MiB")
        if 1 in times:
            for n in counts:
                if n != 1:
                    print(f"scaling: 1 worker / {n} workers = {times[1] / times[n]:.2f} "
                          f"(ideal {n:.0f}; at most the free cores)")


if __name__ == "__main__":  # the local cluster starts worker processes by spawning
    main()
