"""Limits of a run: --max-panels, the memory guards, the time estimate, and Ctrl-C.

Each refusal must come before the work it guards (checked by making that work fail the test
if it starts), end in exit 2 with one line, and leave no output behind.
"""

import contextlib
import io
import os
import signal
import subprocess
import sys
from pathlib import Path

import meshio
import pytest
from conftest import default_sigint
from conftest import run_cli as run

from bem3d.base import files
from bem3d.base.errors import ResourceError
from bem3d.geometry import shapes
from bem3d.mesh_io.read import read_conductors
from bem3d.solve import estimate

pytestmark = pytest.mark.filterwarnings("ignore::DeprecationWarning")


def write_sphere(path, level=2, center=(0.0, 0.0, 0.0)):
    """An octahedral sphere of radius 1 (8 level^2 panels) written by meshio (whose PLY writer
    prints a note about integer widths)."""
    points, tris = shapes.octahedral_sphere(1.0, level, center=center)
    with contextlib.redirect_stderr(io.StringIO()):
        meshio.write(path, meshio.Mesh(points, [("triangle", tris)]))
    return path


def one_line(err):
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("bem3d: error: "), err
    return lines[0]


def files_under(folder):
    return sorted(p.relative_to(folder) for p in Path(folder).rglob("*"))


def forbid(monkeypatch, target, what):
    """Make `target` (module attribute path) fail the test if it is ever called."""
    def called(*args, **kwargs):
        pytest.fail(f"{what} started although the run should have been refused before it")
    monkeypatch.setattr(target, called)


# --- --max-panels ------------------------------------------------------------------------------

def test_max_panels_refuses_before_assembly_and_allows_the_limit(tmp_path, capsys, monkeypatch):
    mesh = write_sphere(tmp_path / "ball.obj", level=4)            # 8 * 4^2 = 128 panels
    with monkeypatch.context() as m:
        forbid(m, "bem3d.operators.dense.DenseOperator.__init__", "assembly")
        code, _, err = run(["extract", mesh, "--max-panels", "127", "--out", tmp_path / "a"],
                           capsys)
    assert code == 2 and "128 panels, more than the limit of 127 (--max-panels)" in one_line(err)
    assert not (tmp_path / "a").exists()
    code, _, _ = run(["extract", mesh, "--max-panels", "128", "--quiet", "--out", tmp_path / "b"],
                     capsys)
    assert code == 0


def test_max_panels_counts_all_files_together(tmp_path):
    a = write_sphere(tmp_path / "a.obj", level=2)                  # 32 panels each
    b = write_sphere(tmp_path / "b.obj", level=2, center=(3.0, 0.0, 0.0))
    assert len(read_conductors([a, b], max_panels=64)[0]) == 64
    with pytest.raises(ResourceError, match="64 panels, more than the limit of 63"):
        read_conductors([a, b], max_panels=63)


@pytest.mark.parametrize("limit", ["0", "-5"])
def test_max_panels_must_be_positive(tmp_path, capsys, limit):
    mesh = write_sphere(tmp_path / "ball.obj")
    code, _, err = run(["extract", mesh, "--max-panels", limit, "--out", tmp_path / "o"], capsys)
    assert code == 2 and "--max-panels must be at least 1" in one_line(err)


def test_field_job_honours_max_panels(tmp_path, capsys, monkeypatch):
    mesh = write_sphere(tmp_path / "ball.obj", level=4)
    forbid(monkeypatch, "bem3d.operators.dense.DenseOperator.__init__", "assembly")
    code, _, err = run(["field", mesh, "--max-panels", "100", "--out", tmp_path / "f"], capsys)
    assert code == 2 and "128 panels" in one_line(err) and not (tmp_path / "f").exists()


# --- memory guards ------------------------------------------------------------------------------

def test_a_run_that_does_not_fit_in_memory_is_refused(tmp_path, capsys, monkeypatch):
    # 128 panels need 8 * 128^2 * 2 bytes = 256 KiB for the dense matrix and its Cholesky
    # factor; with 100 KiB available the run falls back to the compressed backend, whose own
    # estimate does not fit either: refused before either backend assembles anything.
    mesh = write_sphere(tmp_path / "ball.obj", level=4)
    monkeypatch.setattr("bem3d.solve.conductors.available_memory", lambda: 100 * 1024)
    forbid(monkeypatch, "bem3d.operators.dense.DenseOperator.__init__", "dense assembly")
    forbid(monkeypatch, "bem3d.operators.hmatrix.HMatrixOperator.assemble", "compressed assembly")
    code, _, err = run(["extract", mesh, "--quiet", "--out", tmp_path / "o"], capsys)
    assert code == 2 and "more than 60% of the" in one_line(err) and "available" in one_line(err)
    assert not (tmp_path / "o").exists()


def test_reader_refuses_a_header_that_does_not_fit_in_memory(tmp_path, capsys, monkeypatch):
    # A well-formed file is refused when the points and cells its header promises (24 bytes
    # each as read) exceed the share of memory a run may use; the reader is never called.
    mesh = write_sphere(tmp_path / "ball.ply", level=4)           # 66 vertices, 128 faces
    monkeypatch.setattr("bem3d.base.resources.available_memory", lambda: 1024)
    forbid(monkeypatch, "meshio.read", "reading")
    code, _, err = run(["extract", mesh, "--out", tmp_path / "o"], capsys)
    line = one_line(err)
    assert code == 2 and "ball.ply: the header promises 128 face elements" in line
    assert "would need 4.55 KiB, more than 60% of the 1 KiB available" in line   # 194 * 24 B


# --- time estimate ------------------------------------------------------------------------------

def test_estimate_grows_with_the_work_and_shrinks_with_threads():
    # Pair integrals grow as N^2, a Cholesky factorisation as N^3/3 flops, a CG iteration as
    # the N^2 matrix streamed; field work as points times panels (definitions). Twice the
    # threads halve the parallel parts.
    one = estimate.estimate_seconds(1000, "direct", n_points=500, n_threads=1)
    two = estimate.estimate_seconds(2000, "direct", n_points=500, n_threads=1)
    assert two["assembly"] / one["assembly"] == pytest.approx(4)
    assert two["Cholesky"] / one["Cholesky"] == pytest.approx(8)
    assert two["fields"] / one["fields"] == pytest.approx(2)
    cg = [estimate.estimate_seconds(n, "cg", n_threads=1)["CG"] for n in (1000, 2000)]
    assert cg[1] / cg[0] == pytest.approx(4)
    threaded = estimate.estimate_seconds(1000, "direct", n_points=500, n_threads=2)
    for stage in ("assembly", "Cholesky", "fields"):
        assert threaded[stage] == pytest.approx(one[stage] / 2)


def test_compressed_estimate_grows_as_n_log_n():
    # The hierarchical-matrix work grows as N log N (Hackbusch 1999, Computing 62, 89-108).
    one, two = (estimate.estimate_seconds(n, "cg", n_threads=1, backend="compressed")
                for n in (2**16, 2**17))
    for stage in ("assembly", "CG"):
        assert two[stage] / one[stage] == pytest.approx(2 * 17 / 16)


def test_estimate_is_announced_only_for_long_runs():
    assert estimate.describe_estimate({"assembly": 1.0}, n_threads=2) is None
    line = estimate.describe_estimate({"assembly": 100.0, "CG": 50.0}, n_threads=2)
    assert line.startswith("estimated time: about 2.5 min (assembly 1.7 min, CG 50 s)")
    assert "on 2 threads" in line


def test_long_run_prints_its_estimate_before_assembling(tmp_path, capsys, monkeypatch):
    mesh = write_sphere(tmp_path / "ball.obj", level=4)
    monkeypatch.setattr(estimate, "ANNOUNCE_SECONDS", 0.0)      # every run counts as long
    code, _, err = run(["extract", mesh, "--out", tmp_path / "o"], capsys)
    lines = err.splitlines()
    announced = next(i for i, line in enumerate(lines) if line.startswith("estimated time"))
    assembling = next(i for i, line in enumerate(lines) if line.startswith("assembling"))
    assert code == 0 and announced < assembling
    code, _, err = run(["extract", mesh, "--quiet", "--out", tmp_path / "q"], capsys)
    assert code == 0 and "estimated" not in err


# --- Ctrl-C -------------------------------------------------------------------------------------

INTERRUPTED = "bem3d: interrupted; no partial result was written"


def interrupt(*args, **kwargs):
    raise KeyboardInterrupt


@pytest.mark.parametrize("where", ["bem3d.solve.conductors.solve_direct", "bem3d.export.outputs.write_surface"])
def test_ctrl_c_leaves_no_files(tmp_path, capsys, monkeypatch, where):
    # Interrupted in the solve, or while writing (after result.json, the CSV and the SPICE
    # file were written): no output folder, no temporary file anywhere.
    mesh = write_sphere(tmp_path / "ball.obj")
    before = files_under(tmp_path)
    monkeypatch.setattr(where, interrupt)
    code, _, err = run(["extract", mesh, "--quiet", "--out", tmp_path / "deep" / "o"], capsys)
    assert code == 130 and err.strip() == INTERRUPTED
    assert files_under(tmp_path) == before


def test_ctrl_c_while_moving_outputs_into_place_waits_for_the_last_one(tmp_path, monkeypatch):
    # An interrupt arriving between the renames that publish a run is held until all are
    # done, so the folder never holds part of a run.
    out = tmp_path / "o"
    real_replace = os.replace
    sent = []

    def replace_and_interrupt(src, dst):
        if not sent:
            sent.append(True)
            os.kill(os.getpid(), signal.SIGINT)
        real_replace(src, dst)

    monkeypatch.setattr(files.os, "replace", replace_and_interrupt)
    with pytest.raises(KeyboardInterrupt):
        with files.staged_outputs(out, inputs=[]) as stage:
            for name in ("a.txt", "b.txt", "c.txt"):
                (stage / name).write_text(name)
    assert sorted(os.listdir(out)) == ["a.txt", "b.txt", "c.txt"]


def test_real_sigint_stops_a_running_extraction_cleanly(tmp_path):
    # A real Ctrl-C (SIGINT) sent once assembly has begun: exit 130, one line, no files.
    mesh = write_sphere(tmp_path / "ball.stl", level=24)               # 4,608 panels
    out = tmp_path / "o"
    proc = subprocess.Popen([sys.executable, "-m", "bem3d", "extract", str(mesh), "--out",
                             str(out)], stderr=subprocess.PIPE, stdout=subprocess.DEVNULL,
                            text=True, preexec_fn=default_sigint)
    for line in proc.stderr:
        if line.startswith("assembling"):
            break
    proc.send_signal(signal.SIGINT)
    rest = proc.stderr.read()
    assert proc.wait(timeout=300) == 130
    assert rest.strip().splitlines()[-1] == INTERRUPTED
    assert not out.exists()


@pytest.mark.parametrize("backend", ["dense", "compressed"])
def test_each_backend_refuses_before_assembling(monkeypatch, backend):
    # The Python API too: with 100 KiB available neither backend's estimate fits.
    from bem3d.geometry.panels import Panels
    from bem3d.solve.conductors import solve_panels

    points, tris = shapes.octahedral_sphere(1.0, 4)
    panels = Panels(points[tris], [0] * len(tris), ("ball",))
    monkeypatch.setattr("bem3d.solve.conductors.available_memory", lambda: 100 * 1024)
    forbid(monkeypatch, "bem3d.operators.dense.DenseOperator.__init__", "dense assembly")
    forbid(monkeypatch, "bem3d.operators.hmatrix.HMatrixOperator.assemble", "compressed assembly")
    with pytest.raises(ResourceError, match="more than 60% of the"):
        solve_panels(panels, backend=backend, cache=False)


def test_dielectric_run_refuses_before_assembling(tmp_path, capsys, monkeypatch):
    ball = write_sphere(tmp_path / "ball.obj", level=2)
    points, tris = shapes.octahedral_sphere(2.0, 4)
    with contextlib.redirect_stderr(io.StringIO()):
        meshio.write(tmp_path / "shell.obj", meshio.Mesh(points, [("triangle", tris)]))
    monkeypatch.setattr("bem3d.solve.conductors.available_memory", lambda: 100 * 1024)
    forbid(monkeypatch, "bem3d.operators.dense.DenseOperator.__init__", "assembly")
    code, _, err = run(["extract", ball, "--dielectric", f"{tmp_path / 'shell.obj'}=4",
                        "--quiet", "--out", tmp_path / "o"], capsys)
    assert code == 2 and "available" in one_line(err)
