"""Ordinary kriging engine against pykrige's C backend: time, memory, agreement.

Run from the repository root::

    python benchmarks/bench_kriging.py            # same as --quick
    python benchmarks/bench_kriging.py --quick    # case A; pykrige timed on a subset of cells
    python benchmarks/bench_kriging.py --full     # case A in full, and case B

Cases (same data for both engines, one process, global neighbourhood,
estimate plus variance, exponential variogram with a nugget):

* A: 400 samples, 500 x 500 = 250 000 cells.
* B: 1 600 samples, 1 000 x 1 000 = 1 000 000 cells.

pykrige's time on a case it would take minutes for is measured on a random
subset of the cells and scaled linearly to all cells (pykrige solves each
cell on its own, so its time is linear in the number of cells); such lines
say "scaled". Each engine is timed a few times and the best run is kept
(other work on the machine only ever slows a run down).

Printed per case:

* time of geosoil's global engine and of pykrige (``backend="C"``), and the
  ratio pykrige / geosoil;
* the same for geosoil's local mode (64 nearest samples per tile) against
  pykrige's *global* run, the largest difference of the local mode from
  geosoil's global result, and the part of it due to sharing one
  neighbourhood per tile (against one neighbourhood per cell);
* peak memory of geosoil's engine: the largest numpy allocation total seen
  by tracemalloc, and the peak resident size (VmHWM) of a child process that
  only builds the data and runs the engine (includes Python, numpy, BLAS and
  the data themselves; its size before kriging is shown beside it);
* the largest difference between geosoil and pykrige on the cells both ran,
  relative to the largest magnitude (``max |a - b| / max |b|``);
* how close the global engine's matrix work runs to this machine's matrix
  multiply: the floating-point operations of its products (``2 m c1 (c1 - c0)``
  summed over the column blocks of the triangular factor, plus the two
  right-hand sides) per second of the whole kriging call, against the best
  rate of a square float64 ``matmul`` of the same inner size, measured here.

This is not a test: it prints numbers, it asserts nothing about speed.
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import resource
import time
import tracemalloc
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from geosoil.kriging import _column_edges, ordinary_kriging
from geosoil.variogram import VariogramModel

CELL_M = 5.0
LOCAL_NEIGHBOURS = 64


@dataclass(frozen=True)
class Case:
    name: str
    n_samples: int
    side_cells: int


CASES = {"A": Case("A", 400, 500), "B": Case("B", 1600, 1000)}


def make_data(case: Case, seed: int = 0):
    """Samples, values, cell centres (row-major, north-up) and the model."""
    rng = np.random.default_rng(seed)
    extent = case.side_cells * CELL_M
    xy = rng.uniform(0.0, extent, (case.n_samples, 2)) + [500_000.0, 6_000_000.0]
    local = xy - [500_000.0, 6_000_000.0]
    z = (
        np.sin(local[:, 0] / (0.15 * extent))
        + np.cos(local[:, 1] / (0.2 * extent))
        + 0.2 * rng.normal(size=case.n_samples)
    )
    centres = (np.arange(case.side_cells) + 0.5) * CELL_M
    gx, gy = np.meshgrid(centres + 500_000.0, centres[::-1] + 6_000_000.0)
    target = np.column_stack([gx.ravel(), gy.ravel()])
    model = VariogramModel(name="exponential", nugget=0.05, psill=1.0, range=0.4 * extent)
    return xy, z, target, model


def best_time(fn, repeats: int):
    best, out = float("inf"), None
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def pykrige_run(xy, z, target, model):
    from pykrige.ok import OrdinaryKriging

    ok = OrdinaryKriging(
        xy[:, 0], xy[:, 1], z, variogram_model=model.name,
        variogram_parameters={"psill": model.psill, "range": model.range, "nugget": model.nugget},
    )
    est, var = ok.execute("points", target[:, 0], target[:, 1], backend="C")
    return np.asarray(est), np.asarray(var)


def _peak_rss() -> int:
    """This process's peak resident size: VmHWM (Linux; ru_maxrss can carry the parent's
    value over a fork), else ru_maxrss."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def _child(case_name: str, neighbours, queue) -> None:
    xy, z, target, model = make_data(CASES[case_name])
    before = _peak_rss()
    tracemalloc.start()
    ordinary_kriging(xy, z, target, model, neighbours=neighbours)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    queue.put((peak, _peak_rss(), before))


def memory(case: Case, neighbours) -> tuple[int, int, int]:
    """(tracemalloc peak, child peak RSS, child RSS before kriging) in bytes, fresh process."""
    ctx = mp.get_context("spawn")
    queue = ctx.Queue()
    proc = ctx.Process(target=_child, args=(case.name, neighbours, queue))
    proc.start()
    result = queue.get()
    proc.join()
    return result


def rel(a, b) -> float:
    return float(np.max(np.abs(a - b)) / np.max(np.abs(b)))


def mib(x: float) -> str:
    return f"{x / 2**20:,.0f} MiB"


def gemm_gflops(n: int, repeats: int = 3) -> float:
    """Best float64 matrix-multiply rate of this machine (all cores), GFLOP/s, for an
    ``n x n`` by ``n x n`` product (at least 1 000)."""
    n = max(n, 1000)
    rng = np.random.default_rng(0)
    a, b = rng.normal(size=(n, n)), rng.normal(size=(n, n))
    t, _ = best_time(lambda: a @ b, repeats)
    return 2.0 * n**3 / t / 1e9


def kriging_flops(n: int, m: int) -> float:
    """Floating-point operations of the global engine's products for n samples, m cells."""
    flops, c0 = 0.0, 0
    for c1 in _column_edges(n):
        flops += 2.0 * m * c1 * (c1 - c0) + 2.0 * m * (c1 - c0) * 3  # K M^T block, w.w, w.uv
        c0 = c1
    return flops


def run_case(case: Case, *, pykrige_cells: int | None, repeats: int) -> None:
    xy, z, target, model = make_data(case)
    m = len(target)
    print(f"\nCase {case.name}: {case.n_samples} samples, {m:,} cells "
          f"({case.side_cells} x {case.side_cells}, {CELL_M:g} m), {model}")

    t_ours, (est, var) = best_time(lambda: ordinary_kriging(xy, z, target, model), repeats)
    t_local, (est_l, var_l) = best_time(
        lambda: ordinary_kriging(xy, z, target, model, neighbours=LOCAL_NEIGHBOURS), repeats
    )

    if pykrige_cells is None or pykrige_cells >= m:
        subset = np.arange(m)
        label = "measured on all cells"
    else:
        subset = np.sort(np.random.default_rng(1).choice(m, pykrige_cells, replace=False))
        label = f"SCALED from {pykrige_cells:,} random cells x {m / pykrige_cells:,.1f}"
    t_pk_sub, (pk_est, pk_var) = best_time(
        lambda: pykrige_run(xy, z, target[subset], model), 1 if len(subset) > 50_000 else 2
    )
    t_pk = t_pk_sub * m / len(subset)

    mem_g = memory(case, None)
    mem_l = memory(case, LOCAL_NEIGHBOURS)

    print(f"  pykrige C backend, global:       {t_pk:9.2f} s   ({label})")
    print(f"  geosoil global (exact):          {t_ours:9.2f} s   ratio {t_pk / t_ours:6.1f}x   "
          f"peak numpy {mib(mem_g[0])}, peak RSS {mib(mem_g[1])} ({mib(mem_g[2])} before)")
    print(f"  geosoil local ({LOCAL_NEIGHBOURS} neighbours):    {t_local:9.2f} s   ratio "
          f"{t_pk / t_local:6.1f}x   peak numpy {mib(mem_l[0])}, peak RSS {mib(mem_l[1])} "
          f"({mib(mem_l[2])} before)")
    gemm = gemm_gflops(case.n_samples)
    engine = kriging_flops(case.n_samples, m) / t_ours / 1e9
    print(f"  matrix work: {engine:.1f} GFLOP/s over the whole call, against {gemm:.1f} GFLOP/s "
          f"for a {max(case.n_samples, 1000)}-square matmul here ({engine / gemm:.0%})")
    print(f"  global vs pykrige ({len(subset):,} cells): estimate {rel(est[subset], pk_est):.1e}, "
          f"variance {rel(var[subset], pk_var):.1e}  (max |a-b| / max |b|)")
    print(f"  local vs global (all cells):     estimate {rel(est_l, est):.1e}, "
          f"variance {rel(var_l, var):.1e}; largest estimate difference "
          f"{np.max(np.abs(est_l - est)):.3g} (values span {np.ptp(est):.3g})")
    # how much of that is the tiles: each cell with its own 64 nearest samples (subset)
    est_1, _ = ordinary_kriging(xy, z, target[subset[:20_000]], model,
                                neighbours=LOCAL_NEIGHBOURS, tile_m=0.0)
    print(f"  local, tiles vs one neighbourhood per cell ({len(est_1):,} cells): largest "
          f"estimate difference {np.max(np.abs(est_l[subset[:20_000]] - est_1)):.3g}")


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    group = parser.add_mutually_exclusive_group()
    group.add_argument("--quick", action="store_true", help="case A, pykrige on 25 000 cells")
    group.add_argument("--full", action="store_true", help="case A in full, and case B")
    args = parser.parse_args(argv)
    print(f"numpy {np.__version__}; {mp.cpu_count()} cores")
    if args.full:
        run_case(CASES["A"], pykrige_cells=None, repeats=3)
        run_case(CASES["B"], pykrige_cells=10_000, repeats=1)
    else:
        run_case(CASES["A"], pykrige_cells=25_000, repeats=3)


if __name__ == "__main__":
    main()
