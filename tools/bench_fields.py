"""Benchmark of field evaluation: phi and E at many points from a solved model.

    python tools/bench_fields.py [--panels-m 36] [--points 1000000]

Solves a unit sphere (8 m^2 panels; m = 36 gives 10,368) at 1 V, then evaluates phi and E at
random points in a box three radii wide on each side and prints the wall time, the rate and
the largest deviation from the exact exterior field of the computed charge (Gauss: outside a
sphere the field is that of a point charge at the centre). Target (fields issue): 10^6 points
from a 10^4-panel model in <= 60 s on 2 cores.
"""

import argparse
import math
import time

import numpy as np

from bem3d.base.constants import EPS0
from bem3d.geometry import shapes
from bem3d.geometry.panels import Panels
from bem3d.operators.points import evaluate
from bem3d.solve.conductors import solve_panels


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--panels-m", type=int, default=36, help="sphere subdivision m")
    parser.add_argument("--points", type=int, default=1_000_000)
    args = parser.parse_args(argv)
    pts, tris = shapes.octahedral_sphere(1.0, args.panels_m)
    panels = Panels.from_arrays(pts, tris, np.zeros(len(tris), int), ("sphere",))
    result = solve_panels(panels, volts={"sphere": 1.0})
    sigma = result.panel_sigma()
    t0 = time.perf_counter()
    evaluate(panels, sigma, np.array([[5.0, 0.0, 0.0]]))          # compile or load the cache
    first = time.perf_counter() - t0
    rng = np.random.default_rng(0)
    points = rng.uniform(-3.0, 3.0, size=(args.points, 3))
    t0 = time.perf_counter()
    f = evaluate(panels, sigma, points)
    wall = time.perf_counter() - t0
    r = np.linalg.norm(points, axis=1)
    far = r > 1.5
    k = result.charges[0] / (4 * math.pi * EPS0)
    e_exact = k * points[far] / r[far, None] ** 3
    err_e = np.max(np.linalg.norm(f.E[far, 0] - e_exact, axis=1) / np.linalg.norm(e_exact, axis=1))
    err_phi = np.max(np.abs(f.phi[far, 0] - k / r[far]) * r[far] / k)
    print(f"{'panels':>7} {'points':>9} {'first call s':>12} {'wall s':>8} {'Mpair/s':>8} "
          f"{'max phi err':>11} {'max E err':>10}  (r > 1.5 a)")
    print(f"{len(panels):>7} {args.points:>9} {first:>12.2f} {wall:>8.1f} "
          f"{len(panels) * args.points / wall / 1e6:>8.0f} {err_phi:>11.1e} {err_e:>10.1e}")


if __name__ == "__main__":
    main()
