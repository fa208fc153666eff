"""Benchmark: sweep throughput on this machine, local processes against a Dask LocalCluster,
and what the cache saves when only the potentials change.

    python tools/bench_sweep.py [--cases 12] [--m 16]

The sweep moves the top one of two parallel plates (2 * 2 m^2 panels, graded) through `cases`
gaps. Each row is one `bem3d sweep` run (in this process, through the same function the CLI
calls) into a fresh folder, except the last two, which re-run the first sweep's folder: once
with new --volts (every case from the cached matrices, no solve), once unchanged (every case
skipped). Wall times include starting worker processes (spawned, they load Numba's cache);
the Dask cluster's own start-up is shown apart. Cases per minute = cases / wall time * 60.
"""

import argparse
import contextlib
import io
import json
import os
import sys
import tempfile
import time
from pathlib import Path

import meshio

from bem3d._cli import sweep as sweep_command
from bem3d.geometry import shapes
from bem3d.post.sweep.executors import available_cores


def sweep(argv):
    """Run one sweep quietly; (wall seconds, exit code, JSON events)."""
    parser = argparse.ArgumentParser(prog="bem3d")
    sweep_command.add_parser(parser.add_subparsers(dest="command"))
    args = parser.parse_args(["sweep", *map(str, argv), "--json-lines"])
    out = io.StringIO()
    start = time.perf_counter()
    with contextlib.redirect_stdout(out):
        code = sweep_command.run(args)
    return time.perf_counter() - start, code, [json.loads(x) for x in out.getvalue().splitlines()]


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cases", type=int, default=12, help="gaps in the sweep")
    parser.add_argument("--m", type=int, default=16, help="quads per plate side (2 m^2 panels)")
    args = parser.parse_args(argv)
    from distributed import LocalCluster

    cores = available_cores()
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        meshes = []
        for name, z in (("bottom", 0.0), ("top", 0.05)):
            p, t = shapes.rectangle(1.0, 1.0, args.m, args.m, grading=0.5, center=(0, 0, z))
            meshes.append(tmp / f"{name}.vtu")
            meshio.write(meshes[-1], meshio.Mesh(p, [("triangle", t)]))
        base = [*meshes, "--units", "mm", "--translate", f"top:z=0:1:{args.cases}"]
        sweep([*meshes, "--translate", "top:z=0", "--out", tmp / "warm-up"])   # Numba cache
        panels = 4 * args.m ** 2
        # Other users' load changes every number here; show it.
        load = ", ".join(f"{x:.1f}" for x in os.getloadavg())
        print(f"{args.cases} cases of {panels} panels (two plates, gap sweep); {cores} cores; "
              f"load average before: {load}")
        header = (f"{'run':<44} {'wall s':>7} {'cases/min':>9} {'solved':>6} {'cached':>6} "
                  f"{'skipped':>7}")
        print(header)
        print("-" * len(header))

        def row(label, argv):
            wall, code, events = sweep(argv)
            cases = [e for e in events if e["event"] == "case"]
            if code != 0:
                raise RuntimeError(f"{label}: exit code {code}")
            count = {how: sum(e["how"] == how for e in cases)
                     for how in ("solved", "cached", "skipped")}
            print(f"{label:<44} {wall:>7.2f} {60 * len(cases) / wall:>9.1f} "
                  f"{count['solved']:>6} {count['cached']:>6} {count['skipped']:>7}", flush=True)

        row("local, 1 process x 1 thread", [*base, "--workers", 1, "--threads", 1,
                                            "--out", tmp / "serial"])
        row(f"local, 1 process x {cores} threads", [*base, "--workers", 1, "--threads", cores,
                                                   "--out", tmp / "threads"])
        row(f"local, {cores} processes x 1 thread (default)", [*base, "--out", tmp / "pool"])
        start = time.perf_counter()
        with LocalCluster(n_workers=cores, threads_per_worker=1, processes=True,
                          dashboard_address=None) as cluster:
            started = time.perf_counter() - start
            row(f"Dask LocalCluster, {cores} workers x 1 thread",
                [*base, "--scheduler", cluster.scheduler_address, "--out", tmp / "dask"])
        with LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                          dashboard_address=None) as cluster:
            row(f"Dask LocalCluster, 1 worker x {cores} threads",
                [*base, "--scheduler", cluster.scheduler_address, "--threads", cores,
                 "--out", tmp / "dask1"])
        row("re-run, only --volts changed (cache)", [*base, "--workers", 1, "--volts", "top=5",
                                                     "--out", tmp / "serial"])
        row("re-run, nothing changed (skip)", [*base, "--workers", 1, "--volts", "top=5",
                                               "--out", tmp / "serial"])
        print(f"(Dask LocalCluster start-up, not counted above: {started:.2f} s)")


if __name__ == "__main__":
    sys.exit(main())
