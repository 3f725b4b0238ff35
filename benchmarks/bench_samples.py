"""Benchmark: one paddock with very many samples (a dense sensor survey or a lab's bulk file).

Run from the repository root::

    python benchmarks/bench_samples.py                         # 30 000 and 300 000 samples
    python benchmarks/bench_samples.py --samples 3000 30000 --ha 300
    python benchmarks/bench_samples.py --samples 30000 --keep /tmp/samples-30k  # keep the outputs

For each sample count it writes an invented one-paddock farm (``bench_scale.make_farm``,
seeded: samples on a jittered grid, seven analytes from smooth random fields plus noise),
makes its project with ``geosoil new``, then times as separate processes, each with its own
``wait4`` resource usage (wall, CPU = user + system, peak resident memory):

- ``geosoil check`` (reading and checking the file, nothing written);
- ``geosoil run`` with an empty surface cache, through ``geosoil.job.run`` in a child
  process whose progress messages are stamped with wall time, CPU time and the peak
  resident memory so far: the stages below run from one message to the next ("peak" is the
  process's peak by the end of the stage).

It then prints the size of each output file a user opens or loads (report, map, GeoPackage,
samples table), says whether the run took the bounded paths (variograms fitted on a spread
subset; local kriging) from the run's warnings, and the time per sample against the smallest
count. Nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_scale import make_farm  # noqa: E402

# The child that runs the job and stamps each progress message.
_CHILD = r"""
import json, resource, sys, time
t0, c0 = time.perf_counter(), time.process_time()
stamps = []
def progress(message):
    stamps.append([str(message), time.perf_counter() - t0, time.process_time() - c0,
                   resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0])
progress("start-up")
from geosoil.job import run
from geosoil.project import load_project
run(load_project(sys.argv[1]), out_dir=sys.argv[2], overwrite=False, progress=progress)
progress("end")
with open(sys.argv[3], "w", encoding="utf-8") as fh:
    json.dump(stamps, fh)
"""

# The stage a progress message opens (messages not listed belong to the stage before).
_STAGES = (
    ("start-up", "start-up (imports)"),
    ("reading boundaries", "read and check"),
    ("building grids", "grids"),
    ("surfaces", "surfaces"),
    ("rates and zones", "rates, zones, tonnage"),
    ("writing surfaces", "write GeoTIFFs"),
    ("writing prescriptions", "write prescriptions"),
    ("writing the GeoPackage", "write farm.gpkg and CSV tables"),
    ("drawing the map", "write map.html"),
    ("writing the report", "write report.html"),
    ("moving the complete output folder", "move into place"),
)

# Files a user opens or loads, whose size grows with the samples.
_FILES = ("report.html", "map.html", "farm.gpkg", "samples.csv", "run.json")


def _child(args: list[str], env: dict[str, str]) -> tuple[float, float, float, str]:
    """Wall (s), CPU (s) and peak resident memory (MiB) of one child process, and its stderr."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, env=env)
    assert proc.stderr is not None
    err = proc.stderr.read().decode("utf-8", "replace")
    _pid, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(args)} failed:\n{err}")
    return wall, usage.ru_utime + usage.ru_stime, usage.ru_maxrss / 1024.0, err


def _geosoil() -> list[str]:
    exe = Path(sys.executable).with_name("geosoil")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "geosoil.cli.main"]


def _stages(stamps: list[list]) -> list[tuple[str, float, float, float]]:
    """(stage, wall s, CPU s, peak MiB by its end) from the stamped progress messages."""
    out: list[list] = []
    for (message, wall, cpu, _peak), nxt in zip(stamps, stamps[1:], strict=False):
        name = next((stage for start, stage in _STAGES if message.startswith(start)), None)
        if name is None or (out and out[-1][0] == name):
            if out:  # the stage goes on
                out[-1][1] += nxt[1] - wall
                out[-1][2] += nxt[2] - cpu
                out[-1][3] = nxt[3]
            continue
        out.append([name, nxt[1] - wall, nxt[2] - cpu, nxt[3]])
    return [tuple(s) for s in out]  # type: ignore[misc]


def one(samples: int, ha: float, keep: Path | None) -> dict[str, object]:
    tmp = Path(tempfile.mkdtemp(prefix="geosoil-samples-"))
    try:
        farm = tmp / "farm"
        farm.mkdir()
        t0 = time.perf_counter()
        make_farm(farm, ha=ha, paddocks=1, samples=samples)
        lab_mib = (farm / "lab.csv").stat().st_size / 2**20
        print(f"  invented farm written in {time.perf_counter() - t0:.1f} s "
              f"(lab.csv {lab_mib:.1f} MiB)")
        env = dict(os.environ, XDG_CACHE_HOME=str(tmp / "cache"))
        _child([*_geosoil(), "new", str(tmp / "project"), "--samples", str(farm / "lab.csv"),
                "--paddocks", str(farm / "paddocks.geojson")], env)
        check = _child([*_geosoil(), "-q", "check", str(tmp / "project")], env)
        out = tmp / "out"
        stamps_file = tmp / "stamps.json"
        run = _child([sys.executable, "-c", _CHILD, str(tmp / "project"), str(out),
                      str(stamps_file)], env)
        stamps = json.loads(stamps_file.read_text(encoding="utf-8"))
        rec = json.loads((out / "run.json").read_text(encoding="utf-8"))
        said = [str(w) for w in rec.get("warnings", [])]
        result = {
            "samples": samples, "check": check[:3], "run": run[:3], "stages": _stages(stamps),
            "subset": any("a variogram is fitted and cross-validated on" in w for w in said),
            "local": any("global kriging is run on" in w for w in said),
            "sizes_mib": {f: (out / f).stat().st_size / 2**20 for f in _FILES
                          if (out / f).is_file()},
        }
        if keep is not None:
            target = keep / f"samples-{samples}"
            shutil.rmtree(target, ignore_errors=True)
            shutil.copytree(out, target)
            print(f"  outputs kept in {target}")
        return result
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--samples", type=int, nargs="+", default=[30_000, 300_000])
    ap.add_argument("--ha", type=float, default=300.0, help="the paddock's area")
    ap.add_argument("--keep", type=Path, default=None,
                    help="copy each run's output folder into this folder")
    args = ap.parse_args()
    first: dict[str, object] | None = None
    for n in args.samples:
        print(f"one paddock of {args.ha:g} ha, {n} samples:")
        r = one(n, args.ha, args.keep)
        cw, cc, cm = r["check"]  # type: ignore[misc]
        rw, rc, rm = r["run"]  # type: ignore[misc]
        print(f"  check: {cw:.1f} s wall, {cc:.1f} s CPU, peak {cm:.0f} MiB")
        print(f"  run:   {rw:.1f} s wall, {rc:.1f} s CPU, peak {rm:.0f} MiB")
        print(f"  {'stage':34} {'wall s':>8} {'CPU s':>8} {'peak MiB':>9}")
        for stage, wall, cpu, peak in r["stages"]:  # type: ignore[attr-defined]
            print(f"  {stage:34} {wall:8.1f} {cpu:8.1f} {peak:9.0f}")
        print(f"  variograms on a spread subset: {r['subset']}; local kriging: {r['local']}")
        print("  files: " + ", ".join(f"{k} {v:.2f} MiB"
                                      for k, v in r["sizes_mib"].items()))  # type: ignore[attr-defined]
        if first is None:
            first = r
        else:
            per = (rw / n) / (float(first["run"][0]) / int(first["samples"]))  # type: ignore[index,arg-type]
            print(f"  run time per sample = {per:.2f} x that of {first['samples']} samples")


if __name__ == "__main__":
    main()
