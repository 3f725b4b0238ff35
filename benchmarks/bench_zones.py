"""Benchmark: spreader-grid zones of a 100 ha paddock, 12 m x 48 m cells (about 1 700 zones).

Run from the repository root::

    python benchmarks/bench_zones.py [--repeat 3] [--bearing 30]

An invented, irregular 100 ha paddock on a 10 m grid with a smooth rate surface is
cut into spreader-grid zones one 12 m working width across and 48 m long, turned
to the travel direction, and every zone gets its area-weighted rate
(:func:`geosoil.zones.make_zones`). It prints the median time against the 10 s goal
and, for scale, quantile classes of the same raster. Nothing here passes or fails.
"""

from __future__ import annotations

import argparse
import statistics
import time
import warnings

import numpy as np
import shapely
from affine import Affine

from geosoil.spreader import SpreaderSettings
from geosoil.zones import ZoneSettings, make_zones

GOAL_S = 10.0


def paddock_and_rates(cell: float = 10.0) -> tuple[shapely.Geometry, np.ndarray, Affine]:
    """An invented 100 ha paddock (a wobbly disc) and a smooth rate surface over it."""
    rng = np.random.default_rng(0)
    ang = np.linspace(0, 2 * np.pi, 200, endpoint=False)
    r = 564.0 * (1 + 0.08 * np.sin(5 * ang) + 0.02 * rng.standard_normal(200))
    poly = shapely.Polygon(np.c_[600 + r * np.cos(ang), 600 + r * np.sin(ang)]).buffer(0)
    n = int(1200 / cell)
    transform = Affine(cell, 0, 0, 0, -cell, 1200)
    yy, xx = np.mgrid[0:n, 0:n]
    rate = 1000 + 500 * np.sin(xx * cell / 150) * np.cos(yy * cell / 200)
    cx, cy = (xx + 0.5) * cell, 1200 - (yy + 0.5) * cell
    rate[~shapely.contains_xy(poly, cx, cy)] = np.nan
    return poly, rate, transform


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--bearing", type=float, default=30.0)
    args = ap.parse_args()
    poly, rate, transform = paddock_and_rates()
    print(f"paddock {poly.area / 1e4:.1f} ha, {int(np.isfinite(rate).sum())} cells of 10 m")
    for label, settings in (
        ("spreader grid 12 m x 48 m", ZoneSettings(method="spreader_grid", working_width_m=12,
                                                   grid_length_m=48,
                                                   travel_direction_deg=args.bearing)),
        ("quantile classes (4)", ZoneSettings(method="quantiles", classes=4)),
    ):
        times, n = [], 0
        for _ in range(args.repeat):
            t0 = time.perf_counter()
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                res = make_zones(rate, transform=transform, crs="EPSG:32755", paddock="P",
                                 product="lime", boundary=poly, settings=settings,
                                 spreader=SpreaderSettings())
            times.append(time.perf_counter() - t0)
            n = len(res.zones)
        med = statistics.median(times)
        print(f"{label:28s} {n:5d} zones  median {med:6.2f} s  = {med / GOAL_S:.3f} x the "
              f"{GOAL_S:g} s goal")


if __name__ == "__main__":
    main()
