"""Benchmark: the cost of dielectric interfaces against conductors alone (dense backend),
in free space and above a grounded plane (method of images); then the dense against the
compressed backend on the same model.

    python tools/bench_dielectric.py [--sizes 8 12 16] [--height 4] [--large 24 32]

A unit sphere (8 m^2 panels) alone, then inside a concentric dielectric shell of radius 2 with
eps_r = 4 meshed alike; each in free space and with its centre `--height` (m) above a grounded
plane. Prints the wall times, the panel counts, the free-space capacitance error against the
closed form C = 4 pi eps0 / ((1/eps_r)(1/a - 1/b) + 1/b), and over the plane the capacitance
rise over free space beside its first-order image estimate x/(1 - x), x = C/(4 pi eps0 2h).
The second table gives, for --sizes and the --large sizes, the wall times and memory of the
dense LU and of the compressed backend (its two operators and preconditioner; default
tolerance), their agreement |C_compressed / C_dense - 1| and the compressed capacitance's
error against the closed form, in free space; the dense solve is skipped where it would need
more than --dense-gib.
"""

import argparse
import math
import time

import numpy as np

from bem3d.base.constants import EPS0
from bem3d.geometry import shapes
from bem3d.geometry.bodies import DielectricBody
from bem3d.geometry.panels import Panels
from bem3d.solve.conductors import solve_panels
from bem3d.solve.dielectric import plan_dielectrics, solve_with_dielectrics


def sphere(radius, m, name):
    p, t = shapes.octahedral_sphere(radius, m)
    return Panels.from_arrays(p, t, np.zeros(len(t), int), (name,))


def timed(solve):
    t0 = time.perf_counter()
    c = solve().maxwell[0, 0]
    return c, time.perf_counter() - t0


def backends(sizes, eps_r, a, b, dense_gib, exact):
    """The dense against the compressed backend on the sphere in its shell."""
    print(f"\n{'conductor panels':>16} {'interface panels':>16} {'dense s':>8} "
          f"{'compressed s':>12} {'dense MiB':>9} {'compressed MiB':>14} {'GMRES its':>9} "
          f"{'agreement':>9} {'C err':>9}")
    for m in sizes:
        cond, shell = sphere(a, m, "ball"), DielectricBody("shell", eps_r, sphere(b, m, "shell"))
        dense_mib = plan_dielectrics(cond, [shell]).nbytes / 2**20
        t0 = time.perf_counter()
        got = solve_panels(cond, dielectrics=[shell], backend="compressed")
        seconds = time.perf_counter() - t0
        mib = sum(got.solver[k] for k in ("single_layer_MiB", "normal_field_MiB",
                                          "preconditioner_MiB"))
        dense, agree = float("nan"), "-"
        if dense_mib <= 1024 * dense_gib:
            c, dense = timed(lambda: solve_panels(cond, dielectrics=[shell], backend="dense"))
            agree = f"{abs(got.maxwell[0, 0] / c - 1):.1e}"
        print(f"{len(cond):>16} {len(shell.panels):>16} {dense:>8.2f} {seconds:>12.2f} "
              f"{dense_mib:>9.0f} {mib:>14.0f} {got.solver['iterations']:>9} {agree:>9} "
              f"{got.maxwell[0, 0] / exact - 1:>9.2e}")


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[8, 12, 16])
    parser.add_argument("--height", type=float, default=4.0,
                        help="height of the centre above the grounded plane, m (default 4)")
    parser.add_argument("--large", type=int, nargs="*", default=[24, 32],
                        help="further sizes for the dense/compressed table only")
    parser.add_argument("--dense-gib", type=float, default=4.0,
                        help="skip the dense solve above this much memory (default 4 GiB)")
    args = parser.parse_args(argv)
    eps_r, a, b, z = 4.0, 1.0, 2.0, -args.height
    exact = 4 * math.pi * EPS0 / ((1 / eps_r) * (1 / a - 1 / b) + 1 / b)
    x = exact / (4 * math.pi * EPS0) / (2 * args.height)
    for ground_z in (None, z):                # compile every path before timing
        solve_panels(sphere(a, 2, "c"), ground_z=ground_z)
        solve_with_dielectrics(sphere(a, 2, "c"), [DielectricBody("s", eps_r, sphere(b, 2, "s"))],
                               ground_z=ground_z)
    solve_panels(sphere(a, 2, "c"), dielectrics=[DielectricBody("s", eps_r, sphere(b, 2, "s"))],
                 backend="compressed")
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
    backends(args.sizes + args.large, eps_r, a, b, args.dense_gib, exact)


if __name__ == "__main__":
    main()
