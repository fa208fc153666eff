"""Benchmark: the cost of dielectric interfaces against conductors alone (dense backend),
in free space and above a grounded plane (method of images).

    python tools/bench_dielectric.py [--sizes 8 12 16] [--height 4]

A unit sphere (8 m^2 panels) alone, then inside a concentric dielectric shell of radius 2 with
eps_r = 4 meshed alike; each in free space and with its centre `--height` (m) above a grounded
plane. Prints the wall times, the panel counts, the free-space capacitance error against the
closed form C = 4 pi eps0 / ((1/eps_r)(1/a - 1/b) + 1/b), and over the plane the capacitance
rise over free space beside its first-order image estimate x/(1 - x), x = C/(4 pi eps0 2h).
"""

import argparse
import math
import time

import numpy as np

from bem3d import shapes
from bem3d.constants import EPS0
from bem3d.dielectric import DielectricBody, solve_with_dielectrics
from bem3d.geometry import Panels
from bem3d.pipeline import solve_panels


def sphere(radius, m, name):
    p, t = shapes.octahedral_sphere(radius, m)
    return Panels.from_arrays(p, t, np.zeros(len(t), int), (name,))


def timed(solve):
    t0 = time.perf_counter()
    c = solve().maxwell[0, 0]
    return c, time.perf_counter() - t0


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[8, 12, 16])
    parser.add_argument("--height", type=float, default=4.0,
                        help="height of the centre above the grounded plane, m (default 4)")
    args = parser.parse_args(argv)
    eps_r, a, b, z = 4.0, 1.0, 2.0, -args.height
    exact = 4 * math.pi * EPS0 / ((1 / eps_r) * (1 / a - 1 / b) + 1 / b)
    x = exact / (4 * math.pi * EPS0) / (2 * args.height)
    for ground_z in (None, z):                # compile every path before timing
        solve_panels(sphere(a, 2, "c"), ground_z=ground_z)
        solve_with_dielectrics(sphere(a, 2, "c"), [DielectricBody("s", eps_r, sphere(b, 2, "s"))],
                               ground_z=ground_z)
    print(f"{'conductor panels':>16} {'interface panels':>16} {'alone s':>8} "
          f"{'with shell s':>12} {'ratio':>6} {'C err':>9} {'alone+plane s':>13} "
          f"{'shell+plane s':>13} {'plane cost':>10} {'C rise':>8} {'image est':>9}")
    for m in args.sizes:
        cond, shell = sphere(a, m, "ball"), DielectricBody("shell", eps_r, sphere(b, m, "shell"))
        _, alone = timed(lambda: solve_panels(cond))
        c, both = timed(lambda: solve_with_dielectrics(cond, [shell]))
        _, alone_plane = timed(lambda: solve_panels(cond, ground_z=z))
        c_plane, both_plane = timed(lambda: solve_with_dielectrics(cond, [shell], ground_z=z))
        print(f"{len(cond):>16} {len(shell.panels):>16} {alone:>8.2f} {both:>12.2f} "
              f"{both / alone:>6.1f} {c / exact - 1:>9.2e} {alone_plane:>13.2f} "
              f"{both_plane:>13.2f} {both_plane / both:>10.2f} {c_plane / c - 1:>8.4f} "
              f"{x / (1 - x):>9.4f}")


if __name__ == "__main__":
    main()
