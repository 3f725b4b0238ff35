"""Benchmark: the commands as a user runs them, each a separate process.

Run from the repository root::

    python benchmarks/bench_commands.py [--repeat 5] [--installed]

By default it first makes a fresh install as a user does (a new virtual environment
and ``pip install`` of this folder, which compiles every module to bytecode) and
times that installation's ``geosoil``; ``--installed`` times the ``geosoil`` beside
the running interpreter instead (an editable install under
``PYTHONDONTWRITEBYTECODE`` compiles geosoil's modules on every start, which a
user's install does not).

Each command is started as its own process, as from a shell, and timed from
start to exit (wall time) with the peak resident memory of the process
(``getrusage`` of the children). It prints the median of ``--repeat`` runs of:

* ``geosoil --help``, ``--version`` and ``COMMAND --help`` for every command the
  command group has (read from it, so a new command is timed too);
* ``geosoil check`` on the demo farm;
* ``geosoil demo`` with an empty surface cache (no surfaces and no zones in it);
* ``geosoil run`` on the demo farm after a change to a rate setting (the
  surfaces come from the cache);
* ``geosoil explain`` on the demo farm (surfaces cached).

and the ratio of each median to its goal (start-up 0.3 s, check 1 s, demo 4 s,
re-run 1.5 s, explain 1.5 s), with the median CPU time (user + system) of the
process beside it. The machine's load changes the wall times: run it on a quiet
machine and compare ratios; on a busy one the CPU time is the nearer figure.
Nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import os
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
AT = "147.4521,-34.6873"  # a point in the demo farm's paddock Red Hill

GOALS = {"startup": 0.3, "check": 1.0, "demo": 4.0, "rerun": 1.5, "explain": 1.5}


#: The interpreter whose ``geosoil`` is timed (``main`` may point it at a fresh install).
PYTHON = Path(sys.executable)


def _geosoil() -> list[str]:
    exe = PYTHON.with_name("geosoil")
    return [str(exe)] if exe.exists() else [str(PYTHON), "-m", "geosoil.cli.main"]


def fresh_install(where: Path) -> Path:
    """A new virtual environment with geosoil installed from this folder (not editable);
    its interpreter. Prints how long the installation took."""
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "venv", str(where)], check=True)
    py = where / "bin" / "python"
    subprocess.run([str(py), "-m", "pip", "install", "-q", str(ROOT)], check=True)
    print(f"fresh install (venv + pip install .): {time.perf_counter() - t0:.1f} s")
    return py


def command_names() -> list[str]:
    """Every command of the ``geosoil`` group (click only is loaded to list them)."""
    from geosoil.cli.main import cli

    return sorted(cli.commands)


def run_once(args: list[str], env: dict[str, str]) -> tuple[float, float]:
    """Wall time (s) and CPU time (user + system, s) of one ``geosoil`` process."""
    ru0 = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    done = subprocess.run([*_geosoil(), *args], env=env, stdout=subprocess.DEVNULL,
                          stderr=subprocess.PIPE, text=True)
    wall = time.perf_counter() - t0
    if done.returncode != 0:
        raise SystemExit(f"geosoil {' '.join(args)} failed:\n{done.stderr}")
    ru1 = resource.getrusage(resource.RUSAGE_CHILDREN)
    return wall, (ru1.ru_utime + ru1.ru_stime) - (ru0.ru_utime + ru0.ru_stime)


def median_of(label: str, goal: str | None, repeat: int, make: object) -> float:
    times, cpus = [], []
    for _ in range(repeat):
        args, env = make()  # type: ignore[operator]
        wall, cpu = run_once(args, env)
        times.append(wall)
        cpus.append(cpu)
    med, cpu = statistics.median(times), statistics.median(cpus)
    ratio = f"  = {med / GOALS[goal]:.2f} x the {GOALS[goal]:g} s goal" if goal else ""
    spread = f"(min {min(times):.2f}, max {max(times):.2f}; CPU {cpu:.2f} s)"
    print(f"{label:38s} {med:6.2f} s {spread:34s}{ratio}")
    return med


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=5)
    ap.add_argument("--installed", action="store_true",
                    help="time the geosoil beside this interpreter (no fresh install)")
    args = ap.parse_args()
    tmp = Path(tempfile.mkdtemp(prefix="geosoil-bench-"))
    global PYTHON
    try:
        if not args.installed:
            PYTHON = fresh_install(tmp / "venv")
        base_env = dict(os.environ, XDG_CACHE_HOME=str(tmp / "cache"))
        print(f"load average before: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores; "
              f"medians of {args.repeat} runs")
        for extra in (["--help"], ["--version"], *[[c, "--help"] for c in command_names()]):
            median_of("geosoil " + " ".join(extra), "startup", args.repeat,
                      lambda e=extra: (e, base_env))
        # the demo farm as a project of its own, so a rate can be changed
        farm = tmp / "farm"
        shutil.copytree(ROOT / "demo_farm", farm)
        median_of("geosoil check (demo farm)", "check", args.repeat,
                  lambda: (["-q", "check", str(farm)], base_env))
        counter = iter(range(10**6))

        def cold() -> tuple[list[str], dict[str, str]]:
            # no surfaces and no zones in the cache (the compiled page templates stay,
            # as after any earlier run of this installation)
            for entry in (tmp / "cache" / "geosoil").glob("*-*.*"):
                if entry.name.startswith(("surfaces-", "zones-")):
                    entry.unlink()
            return ["-q", "demo", "--out", str(tmp / "demo-out"), "--overwrite"], base_env

        median_of("geosoil demo (empty surface cache)", "demo", args.repeat, cold)
        # fill the cache once, then change a rate setting before every run
        run_once(["-q", "run", str(farm), "--out", str(tmp / "rerun"), "--overwrite"], base_env)
        toml = farm / "geosoil.toml"
        text = toml.read_text(encoding="utf-8")

        def rerun() -> tuple[list[str], dict[str, str]]:
            k = next(counter)
            toml.write_text(re.sub(r"target_esp_percent = [0-9.]+",
                                   f"target_esp_percent = {5.0 + 0.1 * (k % 20):.1f}", text),
                            encoding="utf-8")
            return ["-q", "run", str(farm), "--out", str(tmp / "rerun"), "--overwrite"], base_env

        median_of("geosoil run after a rate change", "rerun", args.repeat, rerun)
        toml.write_text(text, encoding="utf-8")
        run_once(["-q", "run", str(farm), "--out", str(tmp / "rerun"), "--overwrite"], base_env)
        median_of("geosoil explain (demo farm, cached)", "explain", args.repeat,
                  lambda: (["-q", "explain", str(farm), "--at", AT], base_env))
        peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
        print(f"largest peak resident memory of any command: {peak:.0f} MiB")
        print(f"load average after: {os.getloadavg()[0]:.1f}")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
