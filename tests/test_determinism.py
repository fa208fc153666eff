"""The same input gives the same result.json (apart from timings and memory use) on every run,
for any thread count, and whatever order the file lists its cells and points in; conductor
order comes from the input, never from the file system.

Tolerance: 1e-12 relative to the largest magnitude in each entry of result.json (the issue's
target; a different thread count may only change the order of floating-point sums), and 1e-12
absolute for the solver's own diagnostics, which are relative measures of rounding already.
"""

import contextlib
import io
import json
import os
import subprocess
import sys

import meshio
import numpy as np
import pytest

from bem3d._cli.main import main
from bem3d.geometry import shapes

#: Entries of result.json that measure the run rather than the result.
RUN_FIGURES = {("timings_s",), ("solver", "peak_memory_MiB")}
#: Entries holding dimensionless diagnostics (asymmetry, residuals), compared absolutely.
DIAGNOSTICS = {"checks", "solver"}
REL = 1e-12


def write_mesh(path, parts, file_format=None, order=None):
    """parts: (points, triangles) pairs merged as one surface; order: a cell permutation."""
    points, tris = shapes.merge(*parts)
    tris = np.asarray(tris) if order is None else np.asarray(tris)[order]
    with contextlib.redirect_stderr(io.StringIO()):
        meshio.write(path, meshio.Mesh(points, [("triangle", tris)]), file_format=file_format)
    return path


def two_spheres(level):
    return [shapes.octahedral_sphere(1.0, level),
            shapes.octahedral_sphere(0.5, level, center=(2.5, 0.0, 0.0))]


def leaves(record, path=()):
    """(path, value) of every number or string in a JSON record, run figures left out."""
    if path in RUN_FIGURES:
        return
    if isinstance(record, dict):
        for key, value in record.items():
            yield from leaves(value, path + (key,))
    elif isinstance(record, list):
        for i, value in enumerate(record):
            yield from leaves(value, path + (i,))
    else:
        yield path, record


def assert_same_result(a, b):
    """Every string and flag equal; numbers within REL of the largest in their top-level entry
    (diagnostics: within REL)."""
    left, right = dict(leaves(a)), dict(leaves(b))
    assert left.keys() == right.keys()
    scale = {key: 1.0 for key in DIAGNOSTICS}
    for path, value in left.items():
        if isinstance(value, float) and path[0] not in DIAGNOSTICS:
            scale[path[0]] = max(scale.get(path[0], 0.0), abs(value), abs(right[path]))
    for path, value in left.items():
        if isinstance(value, float):
            assert abs(value - right[path]) <= REL * scale[path[0]], (path, value, right[path])
        else:
            assert value == right[path], path


def extract_in_process(mesh, out, *options):
    with contextlib.redirect_stderr(io.StringIO()):
        code = main(["extract", *map(str, mesh if isinstance(mesh, list) else [mesh]),
                     "--quiet", "--out", str(out), *options])
    assert code == 0
    return json.loads((out / "result.json").read_text())


def test_repeated_runs_give_the_same_result(tmp_path):
    mesh = write_mesh(tmp_path / "pair.stl", two_spheres(4))
    first = extract_in_process(mesh, tmp_path / "a")
    second = extract_in_process(mesh, tmp_path / "b")
    assert_same_result(first, second)
    assert first["meshes"] == second["meshes"]


@pytest.mark.parametrize("solver", ["direct", "cg"])
def test_thread_count_does_not_change_the_result(tmp_path, solver):
    # Separate processes, since the thread count is fixed when numba and the BLAS start.
    mesh = write_mesh(tmp_path / "pair.stl", two_spheres(8))            # 1,024 panels
    records = []
    for threads in ("1", "2"):
        out = tmp_path / f"threads_{threads}"
        env = dict(os.environ, NUMBA_NUM_THREADS=threads, OMP_NUM_THREADS=threads,
                   OPENBLAS_NUM_THREADS=threads, MKL_NUM_THREADS=threads)
        done = subprocess.run([sys.executable, "-m", "bem3d", "extract", str(mesh),
                               "--solver", solver, "--quiet", "--out", str(out)],
                              env=env, capture_output=True, text=True)
        assert done.returncode == 0, done.stderr
        records.append(json.loads((out / "result.json").read_text()))
    assert_same_result(*records)


@pytest.mark.parametrize("file_format", ["obj", "gmsh22", "vtu"])
def test_cell_order_in_the_file_does_not_change_the_result(tmp_path, file_format):
    # The same surfaces listed in another order (cells, and points through meshio's writers)
    # are the same model: conductor names, order and numbers must all agree.
    parts = two_spheres(4)
    n = sum(len(t) for _, t in parts)
    ext = {"obj": "obj", "gmsh22": "msh", "vtu": "vtu"}[file_format]
    plain = write_mesh(tmp_path / f"plain.{ext}", parts, file_format)
    shuffled = write_mesh(tmp_path / f"shuffled.{ext}", parts, file_format,
                          order=np.random.default_rng(7).permutation(n))
    a = extract_in_process(plain, tmp_path / "a")
    b = extract_in_process(shuffled, tmp_path / "b")
    assert a["conductors"] == b["conductors"] == ["c1", "c2"]
    a["meshes"] = b["meshes"] = None
    assert_same_result(a, b)


def test_conductor_order_follows_the_command_line_not_the_folder(tmp_path):
    # Files made in the opposite order, with the later one given an older time stamp: the
    # matrix order is the order they are named in, in both directions.
    second = write_mesh(tmp_path / "zeta.obj", [shapes.octahedral_sphere(0.5, 4,
                                                                         center=(2.5, 0, 0))])
    first = write_mesh(tmp_path / "alpha.obj", [shapes.octahedral_sphere(1.0, 4)])
    os.utime(first, (1, 1))
    forward = extract_in_process([second, first], tmp_path / "f")
    backward = extract_in_process([first, second], tmp_path / "b")
    assert forward["conductors"] == ["zeta", "alpha"]
    assert backward["conductors"] == ["alpha", "zeta"]
    c_f = np.array(forward["maxwell_capacitance_F"])
    c_b = np.array(backward["maxwell_capacitance_F"])
    np.testing.assert_allclose(c_f, c_b[::-1, ::-1], rtol=REL, atol=REL * np.abs(c_b).max())
