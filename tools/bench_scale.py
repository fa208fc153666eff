"""Benchmark of the compressed backend: spheres and a multi-conductor model from 8k panels up.

    python tools/bench_scale.py [--sizes 8k 32k 128k 512k] [--dense-max 32768]
                                [--bempp-max 32768] [--bempp-assembly-max 0]
                                [--models sphere sensor]

Every run is a whole process (start, imports, mesh read, assembly, solve, cache write) with an
empty operator cache; its wall time and peak resident memory are measured from outside.
Models: the octahedral unit sphere (error against 4 pi eps0 a and against the Richardson
extrapolation of two successive sizes, C(h) = C + O(h^2)) and the demo sensor head (five
conductors: pads, guard ring, lid) with every division scaled up, whose error is taken
against the dense backend on the same mesh where that fits (dense: Cholesky up to 4,000
panels, else CG with the same capacitance tolerance). bempp-cl's dense DP0 single layer with a
Cholesky solve runs alongside where asked (whole process, its Numba cache warm). The first
run with an empty Numba cache gives the compile time. The log-log slope of wall time against
panels is printed between successive sizes. Above --bempp-max and up to --bempp-assembly-max
bempp-cl's assembly alone is timed and the speed-up is a lower bound (>=). Targets (issue
"scale"): 128k panels <= 60 s and <= 4 GB; 1e6 panels <= 15 min and <= 16 GB; slope <= 1.2
from 128k to 512k; compressed within 1e-4 of dense at 32k; >= 30x faster than bempp-cl dense
at 32,768 panels.
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
import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench import BEMPP_SCRIPT  # noqa: E402

from bem3d.base.constants import EPS0
from bem3d.demo import sensor_head as demo
from bem3d.geometry import shapes

SPHERE_EXACT = 4 * math.pi * EPS0          # unit sphere, F

RUN_SCRIPT = r"""
import json, resource, sys, time
start = time.perf_counter()
from bem3d.mesh_io.read import read_conductors
from bem3d.solve.conductors import solve_panels
mesh, backend, cache_dir, units = sys.argv[1:5]
panels, _ = read_conductors([mesh], units=units)
r = solve_panels(panels, backend=backend, cache=True, cache_dir=cache_dir)
print(json.dumps({"maxwell": r.maxwell.tolist(), "names": list(r.names), "solver": r.solver,
                  "timings": r.timings_s, "inside_s": time.perf_counter() - start,
                  "peak_MiB": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def sensor_parts(scale):
    """The demo sensor head with every division multiplied by scale (2,928 panels at 1)."""
    def d(k):
        return max(1, round(k * scale))

    so = 0.5 * demo.DRIVE_X + demo.PAD_GAP + 0.5 * demo.SENSE_X
    g = demo.GRADING
    parts = [("sense_a", shapes.rectangle(demo.SENSE_X, demo.PAD_Y, d(12), d(14), g, (-so, 0, 0))),
             ("sense_b", shapes.rectangle(demo.SENSE_X, demo.PAD_Y, d(12), d(14), g, (so, 0, 0))),
             ("drive", shapes.rectangle(demo.DRIVE_X, demo.PAD_Y, d(9), d(14), g, (0, 0, 0)))]
    ix = 2 * (so + 0.5 * demo.SENSE_X + demo.GUARD_GAP)
    iy = demo.PAD_Y + 2 * demo.GUARD_GAP
    ox, oy = ix + 2 * demo.GUARD_WIDTH, iy + 2 * demo.GUARD_WIDTH
    parts.append(("guard", shapes.rectangular_ring(ox, oy, ix, iy, d(3), d(24), d(12), g)))
    parts.append(("lid", shapes.open_box(ox + 2 * demo.LID_GAP, oy + 2 * demo.LID_GAP,
                                         demo.LID_HEIGHT, d(24), g,
                                         (0, 0, demo.LID_LIFT + 0.5 * demo.LID_HEIGHT))))
    return parts


def write_model(model, target_panels, folder):
    """Mesh file of the model with about target_panels panels: (path, panels, length unit)."""
    if model == "sphere":
        m = max(1, round(math.sqrt(target_panels / 8)))
        points, tris = shapes.octahedral_sphere(1.0, m)
        path = folder / f"sphere_{len(tris)}.vtu"
        meshio.write(path, meshio.Mesh(points, [("triangle", tris)]))
        return path, len(tris), "m"
    parts = sensor_parts(math.sqrt(target_panels / 2928))
    mesh = demo.build_mesh([(name, p, t) for name, (p, t) in parts])
    n = sum(len(t) for _, (_, t) in parts)
    path = folder / f"sensor_{n}.msh"
    meshio.write(path, mesh, file_format="gmsh", binary=True)
    return path, n, demo.LENGTH_UNIT


def run(mesh, backend, units, cache_dir, env=None):
    script = Path(cache_dir).parent / "bench_run.py"
    script.write_text(RUN_SCRIPT)
    start = time.perf_counter()
    done = subprocess.run([sys.executable, str(script), str(mesh), backend, str(cache_dir), units],
                          capture_output=True, text=True, env=env)
    wall = time.perf_counter() - start
    if done.returncode != 0:
        return wall, {"error": done.stderr.strip().splitlines()[-1]}
    return wall, json.loads(done.stdout.strip().splitlines()[-1])


def bempp(mesh, folder, warm_mesh, assembly_only=False):
    """(wall s, record) of bempp-cl's dense run on mesh, its Numba cache filled first on
    warm_mesh; assembly_only: stop after assembling (a lower bound of the whole run)."""
    script = folder / "bempp_run.py"
    script.write_text(BEMPP_SCRIPT)
    extra = ["assembly-only"] if assembly_only else []
    subprocess.run([sys.executable, str(script), str(warm_mesh), *extra], capture_output=True,
                   text=True)
    start = time.perf_counter()
    done = subprocess.run([sys.executable, str(script), str(mesh), *extra], capture_output=True,
                          text=True)
    if done.returncode != 0:
        return None
    return time.perf_counter() - start, json.loads(done.stdout.strip().splitlines()[-1])


def parse_size(text):
    return int(float(text[:-1]) * 1024) if text.lower().endswith("k") else int(text)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", nargs="+", default=["8k", "32k", "128k", "512k"],
                        help="panel counts (k = 1024)")
    parser.add_argument("--models", nargs="+", default=["sphere", "sensor"])
    parser.add_argument("--dense-max", type=int, default=32768,
                        help="largest panel count to run the dense backend on")
    parser.add_argument("--bempp-max", type=int, default=32768,
                        help="largest panel count to run bempp-cl dense on, whole run")
    parser.add_argument("--bempp-assembly-max", type=int, default=0,
                        help="above --bempp-max and up to this, time bempp-cl's dense assembly "
                             "alone (its dense solve needs 2x the matrix's memory): the "
                             "speed-up is then a lower bound, marked >=")
    args = parser.parse_args(argv)
    sizes = [parse_size(s) for s in args.sizes]
    header = (f"{'model':<7}{'panels':>9}{'wall s':>8}{'asm s':>7}{'pc s':>6}{'solve s':>8}"
              f"{'its':>4}{'peak MiB':>9}{'ratio':>8}{'C err':>10}{'ref':>7}{'slope':>6} |"
              f"{'dense s':>8}{'peak MiB':>9}{'vs dense':>9} |{'bempp s':>8}{'speed-up':>9}")
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        cold_env = dict(os.environ, NUMBA_CACHE_DIR=str(tmp / "numba_cold"))
        mesh, n, units = write_model("sphere", 2048, tmp)
        small = mesh
        cold, _ = run(mesh, "compressed", units, tmp / "cache_cold", cold_env)
        warm, _ = run(mesh, "compressed", units, tmp / "cache_warm")
        print(f"first-run Numba compile (compressed backend, {n}-panel sphere): "
              f"{cold - warm:.1f} s (cold {cold:.1f} s, warm {warm:.1f} s)\n")
        print(header)
        print("-" * len(header))
        for model in args.models:
            previous = None
            for target in sizes:
                mesh, n, units = write_model(model, target, tmp)
                cache = tmp / f"cache_{model}_{n}"
                wall, rec = run(mesh, "compressed", units, cache)
                if "error" in rec:
                    print(f"{model:<7}{n:>9}  compressed run failed: {rec['error']}", flush=True)
                    continue
                c = np.array(rec["maxwell"])
                dense_cell = f"{'-':>8}{'-':>9}{'-':>9}"
                if n <= args.dense_max:
                    dwall, drec = run(mesh, "dense", units, tmp / "cache_dense")
                    if "error" not in drec:
                        d = np.array(drec["maxwell"])
                        vs_dense = np.max(np.abs(c - d) / np.abs(d))
                        dense_cell = f"{dwall:>8.1f}{drec['peak_MiB']:>9.0f}{vs_dense:>9.1e}"
                if model == "sphere":
                    err, ref = c[0, 0] / SPHERE_EXACT - 1, "exact"
                    if previous is not None:
                        err, ref = c[0, 0] / ((4 * c[0, 0] - previous[1]) / 3) - 1, "Richard"
                else:
                    err, ref = float("nan"), "-"
                slope = (f"{math.log(wall / previous[0]) / math.log(n / previous[2]):>6.2f}"
                         if previous else f"{'-':>6}")
                t, s = rec["timings"], rec["solver"]
                row = (f"{model:<7}{n:>9}{wall:>8.1f}{t['assembly']:>7.1f}"
                       f"{t.get('preconditioner', 0):>6.1f}{t['solve']:>8.1f}{s['iterations']:>4}"
                       f"{rec['peak_MiB']:>9.0f}{s['compression_ratio']:>8.4f}{err:>10.2e}"
                       f"{ref:>7}{slope} |{dense_cell} |")
                partial = args.bempp_max < n <= args.bempp_assembly_max
                if model == "sphere" and (n <= args.bempp_max or partial):
                    b = bempp(mesh, tmp, small, assembly_only=partial)
                    mark = ">=" if partial else ""
                    row += (f"{b[0]:>8.1f}{mark:>3}{b[0] / wall:>5.1f}x" if b
                            else f"{'failed':>8}{'-':>9}")
                else:
                    row += f"{'-':>8}{'-':>9}"
                print(row, flush=True)
                previous = (wall, c[0, 0], n)


if __name__ == "__main__":
    main()
