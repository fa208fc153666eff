"""Benchmark: whole-process `bem3d extract` on octahedral spheres, and bempp-cl dense alongside.

    python tools/bench.py [--sizes 16 32 64] [--bempp-max 8192]

For each sphere (8 m^2 panels, radius 1 m) it prints the wall time of the whole process (cold:
empty Numba cache, so it includes compiling; warm: cache filled), bem3d's own assembly and
solve times, peak resident memory, and the capacitance error against 4 pi eps0 a. bempp-cl
(if installed) assembles its dense DP0 single layer on the same mesh and solves it with numpy;
its time is also whole-process, with its own warm Numba cache. Targets (core issue): 8,192
panels warm <= 3 s and >= 10x faster than bempp-cl dense.
"""

import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import meshio

from bem3d.base.constants import EPS0
from bem3d.geometry import shapes

EXACT = 4 * math.pi * EPS0

BEMPP_SCRIPT = r"""
import resource, sys, time, json
import numpy as np, meshio, scipy.linalg
import bempp_cl.api as bempp
mesh = meshio.read(sys.argv[1])
tris = mesh.cells_dict["triangle"]
t0 = time.perf_counter()
grid = bempp.Grid(np.ascontiguousarray(mesh.points.T), np.ascontiguousarray(tris.T))
space = bempp.function_space(grid, "DP", 0)
op = bempp.operators.boundary.laplace.single_layer(space, space, space, assembler="dense")
A = op.weak_form().A
t1 = time.perf_counter()
b = grid.volumes
if sys.argv[2:] == ["assembly-only"]:      # a lower bound where the solve would take too long
    q = np.full(len(b), np.nan)
else:
    # blocked Cholesky in place on the lower triangle: LAPACK's own (scipy's and numpy's)
    # crashed with a segmentation fault on the 32,768-panel matrix
    n, bs = len(A), 2048
    for k in range(0, n, bs):
        e = min(k + bs, n)
        A[k:e, k:e] = np.linalg.cholesky(A[k:e, k:e])
        if e < n:
            A[e:, k:e] = scipy.linalg.solve_triangular(A[k:e, k:e], A[e:, k:e].T,
                                                       lower=True).T
            for j in range(e, n, bs):
                A[j:, j:j + bs] -= A[j:, k:e] @ A[j:j + bs, k:e].T
    q = scipy.linalg.solve_triangular(A, scipy.linalg.solve_triangular(A, b, lower=True),
                                      lower=True, trans="T")
t2 = time.perf_counter()
c = 8.8541878188e-12 * float(b @ q)       # its kernel is 1/(4 pi r): C = eps0 b.A^-1.b
print(json.dumps({"C": c, "assembly": t1 - t0, "solve": t2 - t1,
                  "peak_MiB": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def timed(cmd, env=None):
    start = time.perf_counter()
    done = subprocess.run(cmd, capture_output=True, text=True, env=env)
    wall = time.perf_counter() - start
    if done.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} failed:\n{done.stderr}")
    return wall, done.stdout


def bem3d_run(mesh, out, env):
    wall, _ = timed([sys.executable, "-m", "bem3d", "extract", str(mesh), "--out", str(out),
                     "--backend", "dense", "--quiet"], env)
    record = json.loads((out / "result.json").read_text())
    return wall, record


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[16, 32, 64],
                        help="octahedral subdivisions m (8 m^2 panels each)")
    parser.add_argument("--bempp-max", type=int, default=8192,
                        help="largest panel count to run bempp-cl on (its dense assembly is slow)")
    args = parser.parse_args(argv)
    try:
        import bempp_cl  # noqa: F401
        have_bempp = True
    except ImportError:
        have_bempp = False

    header = (f"{'panels':>7} {'cold s':>7} {'warm s':>7} {'asm s':>6} {'solve s':>7} "
              f"{'peak MiB':>8} {'C err':>9} | {'bempp s':>8} {'asm s':>7} {'peak MiB':>8} "
              f"{'C err':>9} {'speed-up':>8}")
    print(header)
    print("-" * len(header))
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        for m in args.sizes:
            cold_env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp / f"numba_cold_{m}"))
            points, tris = shapes.octahedral_sphere(1.0, m)
            mesh = tmp / f"sphere_{len(tris)}.vtu"
            meshio.write(mesh, meshio.Mesh(points, [("triangle", tris)]))
            cold, _ = bem3d_run(mesh, tmp / f"out_cold_{m}", cold_env)
            warm, rec = bem3d_run(mesh, tmp / f"out_{m}", None)
            c = rec["maxwell_capacitance_F"][0][0]
            row = (f"{len(tris):>7} {cold:>7.2f} {warm:>7.2f} {rec['timings_s']['assembly']:>6.2f} "
                   f"{rec['timings_s']['solve']:>7.2f} {rec['solver']['peak_memory_MiB']:>8.0f} "
                   f"{c / EXACT - 1:>9.2e} |")
            if have_bempp and len(tris) <= args.bempp_max:
                script = tmp / "bempp_run.py"
                script.write_text(BEMPP_SCRIPT)
                timed([sys.executable, str(script), str(mesh)])          # fill its Numba cache
                wall, out = timed([sys.executable, str(script), str(mesh)])
                b = json.loads(out.strip().splitlines()[-1])
                row += (f" {wall:>8.2f} {b['assembly']:>7.2f} {b['peak_MiB']:>8.0f} "
                        f"{b['C'] / EXACT - 1:>9.2e} {wall / warm:>7.1f}x")
            else:
                row += f" {'-':>8} {'-':>7} {'-':>8} {'-':>9} {'-':>8}"
            print(row, flush=True)


if __name__ == "__main__":
    main()
