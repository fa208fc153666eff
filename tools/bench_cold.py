"""Benchmark: the first run, with an empty Numba cache, of each path of the solver.

    python tools/bench_cold.py [--m 32] [--paths dense compressed dielectric fields]

Each path runs `bem3d` as a new process with its own empty NUMBA_CACHE_DIR, on an octahedral
sphere of 8 m^2 panels (m=32: 8,192 panels, radius 1 m): dense and compressed `extract`, a
compressed `extract` with a dielectric shell (radius 1.5 m, eps_r 4, 8 (m/2)^2 panels) around
the sphere, and `field` (dense solve, then an 11^3 grid and its slice). It prints the whole
process's wall time and the run's own record of compiling, assembly and solve (timings_s of
result.json). The 'fields' row compiles the dense path as well; what the field map adds is its
compile time less the dense row's. The operator cache is off, so every run assembles.
Target (speed issue): the compressed first run of an 8k-panel model <= 20 s whole process.
"""

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import meshio

from bem3d.geometry import shapes

PATHS = ("dense", "compressed", "dielectric", "fields")


def write_sphere(path, radius, m):
    points, tris = shapes.octahedral_sphere(radius, m)
    meshio.write(path, meshio.Mesh(points, [("triangle", tris)]))
    return len(tris)


def command(path, sphere, shell, out):
    base = [sys.executable, "-m", "bem3d"]
    common = ["--out", str(out), "--no-cache", "--quiet"]
    if path == "fields":
        return base + ["field", str(sphere), "--backend", "dense", "--points", "11",
                       "--slice", "z=0.01"] + common
    if path == "dielectric":
        return base + ["extract", str(sphere), "--dielectric", f"{shell}=4", "--backend",
                       "compressed"] + common
    return base + ["extract", str(sphere), "--backend", path] + common


def run_cold(path, sphere, shell, folder):
    """(whole-process seconds, timings_s of the result) of one path with an empty cache."""
    env = dict(os.environ, NUMBA_CACHE_DIR=str(folder / f"numba_{path}"))
    out = folder / f"out_{path}"
    start = time.perf_counter()
    done = subprocess.run(command(path, sphere, shell, out), capture_output=True, text=True,
                          env=env)
    wall = time.perf_counter() - start
    if done.returncode != 0:
        raise RuntimeError(f"{path} failed:\n{done.stderr}")
    return wall, json.loads((out / "result.json").read_text())["timings_s"]


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--m", type=int, default=32, help="sphere subdivision (8 m^2 panels)")
    parser.add_argument("--paths", nargs="+", choices=PATHS, default=list(PATHS))
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        sphere, shell = folder / "sphere.vtu", folder / "shell.vtu"
        n = write_sphere(sphere, 1.0, args.m)
        write_sphere(shell, 1.5, max(args.m // 2, 2))
        header = (f"{'path':<11} {'panels':>7} {'process s':>9} {'compile s':>9} "
                  f"{'assembly s':>10} {'solve s':>7} {'fields s':>8}")
        print(header)
        print("-" * len(header))
        for path in args.paths:
            wall, t = run_cold(path, sphere, shell, folder)
            fields = f"{t['fields']:>8.2f}" if "fields" in t else f"{'-':>8}"
            print(f"{path:<11} {n:>7} {wall:>9.2f} {t.get('compile', float('nan')):>9.2f} "
                  f"{t['assembly']:>10.2f} {t['solve']:>7.2f} {fields}", flush=True)


if __name__ == "__main__":
    main()
