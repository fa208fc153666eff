"""Benchmark: the cost of dielectric interfaces against conductors alone (dense backend).

    python tools/bench_dielectric.py [--sizes 8 12 16]

A unit sphere (8 m^2 panels) alone, then inside a concentric dielectric shell of radius 2 with
eps_r = 4 meshed alike; prints both wall times, the panel counts and the capacitance error
against the closed form C = 4 pi eps0 / ((1/eps_r)(1/a - 1/b) + 1/b).
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


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[8, 12, 16])
    args = parser.parse_args(argv)
    eps_r, a, b = 4.0, 1.0, 2.0
    exact = 4 * math.pi * EPS0 / ((1 / eps_r) * (1 / a - 1 / b) + 1 / b)
    solve_with_dielectrics(sphere(a, 2, "c"), [DielectricBody("s", eps_r, sphere(b, 2, "s"))])
    print(f"{'conductor panels':>16} {'interface panels':>16} {'alone s':>8} {'with shell s':>12} "
          f"{'ratio':>6} {'C err':>9}")
    for m in args.sizes:
        cond, shell = sphere(a, m, "ball"), DielectricBody("shell", eps_r, sphere(b, m, "shell"))
        t0 = time.perf_counter()
        solve_panels(cond)
        alone = time.perf_counter() - t0
        t0 = time.perf_counter()
        c = solve_with_dielectrics(cond, [shell]).maxwell[0, 0]
        both = time.perf_counter() - t0
        print(f"{len(cond):>16} {len(shell.panels):>16} {alone:>8.2f} {both:>12.2f} "
              f"{both / alone:>6.1f} {c / exact - 1:>9.2e}")


if __name__ == "__main__":
    main()
