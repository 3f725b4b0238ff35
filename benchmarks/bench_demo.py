"""Benchmark: the whole demo run, split by stage, and a re-run after a rate change.

Run from the repository root::

    python benchmarks/bench_demo.py [--repeat 3]

It prints, for each repeat, the wall time of every stage of a full demo run
(surface cache empty), the wall time of a re-run after a change to a rate
setting (surfaces come from the cache), and the peak resident memory of this
process. Figures are printed as ratios against the goals (full run 4 s,
re-run 1.5 s) and the re-run against the full run measured in the same process,
so they compare across machines of different speeds (bench_commands.py times the
same as processes, start-up included). This is a script, not a
test: nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import dataclasses
import resource
import statistics
import tempfile
import time
from pathlib import Path

from geosoil.job import run
from geosoil.project import load_project

GOAL_FULL_S = 4.0  # the demo as a process (bench_commands.py); in one process it has no start-up
GOAL_RERUN_S = 1.5


def _peak_rss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    root = Path(__file__).resolve().parents[1]
    project = load_project(root / "demo_farm" / "geosoil.toml")
    fulls, reruns = [], []
    for i in range(args.repeat):
        with tempfile.TemporaryDirectory() as tmp:
            cache = Path(tmp) / "cache"
            out = dataclasses.replace(project.settings.output, cache_dir=cache)
            proj = dataclasses.replace(
                project, settings=dataclasses.replace(project.settings, output=out)
            )
            t0 = time.perf_counter()
            full = run(proj, out_dir=Path(tmp) / "full")
            t_full = time.perf_counter() - t0
            # a rate change: a deeper treated layer; surfaces must come from the cache
            soil = dataclasses.replace(
                proj.settings.soil, depth_m=proj.settings.soil.depth_m * 1.5
            )
            proj2 = dataclasses.replace(
                proj, settings=dataclasses.replace(proj.settings, soil=soil)
            )
            t0 = time.perf_counter()
            again = run(proj2, out_dir=Path(tmp) / "rerun")
            t_re = time.perf_counter() - t0
            assert again.farm.cache_hit, "the re-run did not take its surfaces from the cache"
        fulls.append(t_full)
        reruns.append(t_re)
        stages = ", ".join(f"{k} {v:.2f} s" for k, v in full.farm.timings.items())
        print(f"repeat {i + 1}: full run {t_full:.2f} s ({stages})")
        stages = ", ".join(f"{k} {v:.2f} s" for k, v in again.farm.timings.items())
        print(f"          re-run after a rate change {t_re:.2f} s ({stages})")
    mf, mr = statistics.median(fulls), statistics.median(reruns)
    print()
    # the goals are for the commands as processes: a run in this warm process pays no
    # start-up, so its ratio is a lower bound, said as such (bench_commands.py times them)
    print("ratios in one warm process, start-up excluded (a lower bound; the goals are for "
          "the commands as processes: benchmarks/bench_commands.py)")
    print(f"median full run      {mf:6.2f} s   = {mf / GOAL_FULL_S:.2f} x the "
          f"{GOAL_FULL_S:g} s goal, without start-up")
    print(f"median re-run        {mr:6.2f} s   = {mr / GOAL_RERUN_S:.2f} x the "
          f"{GOAL_RERUN_S:g} s goal, without start-up")
    print(f"re-run / full run    {mr / mf:6.2f}")
    print(f"peak resident memory {_peak_rss_mib():6.0f} MiB (whole process)")


if __name__ == "__main__":
    main()
