"""Benchmark: stack-ups like the demo keypad (board on the grounded plane, copper keys as
sheets, a cover, a finger phantom) at growing mesh density, dense and compressed.

    python tools/bench_stack.py [--fineness 1 2 3] [--dense-gib 4] [--lossless]

For each fineness (the lattice density relative to the demo's), the panel counts (conductors
and interfaces), the wall time of a first and a second (warm) solve, the GMRES iterations, the
memory estimate and key_1's self capacitance; the dense LU is skipped above --dense-gib. The
two solves are in one process, so the second shows what a re-run costs once the kernels are
compiled (the dielectric system is not cached between runs).
"""

import argparse
import time

import numpy as np

from bem3d.demo import keypad
from bem3d.geometry.bodies import DielectricBody
from bem3d.geometry.panels import Panels
from bem3d.solve.conductors import solve_panels
from bem3d.solve.dielectric import plan_dielectrics

MM = 1e-3


def panels_of(parts):
    """One Panels (m) of [(name, points mm, triangles)], conductor k = part k."""
    verts = [p[t] * MM for _, p, t in parts]
    owner = np.concatenate([np.full(len(v), k) for k, v in enumerate(verts)])
    return Panels(np.concatenate(verts), owner, tuple(name for name, _, _ in parts))


def stack(fineness, lossless):
    """The keypad's conductors (Panels) and bodies at this fineness."""
    conductors = panels_of(keypad.keys(fineness) + [("finger", *keypad.finger(
        fineness=fineness))])
    bodies = []
    for name, (p, t), material in (("board", keypad.board(fineness), keypad.BOARD),
                                   ("cover", keypad.cover(fineness), keypad.COVER)):
        loss = 0.0 if lossless else material["loss_tangent"]
        bodies.append(DielectricBody(name, material["relative_permittivity"],
                                     panels_of([(name, p, t)]), loss))
    return conductors, bodies


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fineness", type=float, nargs="+", default=[1.0, 2.0, 3.0])
    parser.add_argument("--dense-gib", type=float, default=4.0)
    parser.add_argument("--lossless", action="store_true",
                        help="leave out the loss tangents (real arithmetic)")
    args = parser.parse_args()
    print("| fineness | conductor panels | interface panels | backend | first s | warm s "
          "| GMRES its | memory MiB | C key_1 pF |")
    print("|---:|---:|---:|---|---:|---:|---:|---:|---:|")
    for fineness in args.fineness:
        conductors, bodies = stack(fineness, args.lossless)
        system = plan_dielectrics(conductors, bodies, 1.0, 0.0)
        for backend in ("dense", "compressed"):
            if backend == "dense" and system.nbytes > args.dense_gib * 2**30:
                continue
            times = []
            for _ in range(2):
                t0 = time.perf_counter()
                result = solve_panels(conductors, ground_z=0.0, dielectrics=bodies,
                                      frequency=None if args.lossless else 1e6,
                                      backend=backend)
                times.append(time.perf_counter() - t0)
            print(f"| {fineness:g} | {len(conductors)} | {len(system.interfaces)} | {backend} "
                  f"| {times[0]:.1f} | {times[1]:.1f} | {result.solver.get('iterations', '—')} "
                  f"| {result.solver['memory_estimate_MiB']:.0f} "
                  f"| {result.maxwell[0, 0] * 1e12:.4f} |", flush=True)


if __name__ == "__main__":
    main()
