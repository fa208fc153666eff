"""Outputs: never an input overwritten, nothing written outside the output folder, an earlier
run's results replaced only with --force, and no output at all after a failure.

Each test photographs the whole temporary tree (paths and bytes) before and after a run, so a
stray write anywhere fails it.
"""

import contextlib
import io
import json
import os

import meshio
import pytest
from conftest import run_cli as run

from bem3d.base.errors import Bem3dError
from bem3d.base.files import STAGE_PREFIX
from bem3d.geometry import shapes

OUTPUTS = ["bem3d_capacitance.cir", "capacitance.csv", "result.json", "surface.vtp"]


def write_sphere(path, center=(0.0, 0.0, 0.0)):
    points, tris = shapes.octahedral_sphere(1.0, 2, center=center)       # 32 panels
    with contextlib.redirect_stderr(io.StringIO()):
        meshio.write(path, meshio.Mesh(points, [("triangle", tris)]), file_format="obj")
    return path


def snapshot(folder):
    """{relative path: bytes, or None for a folder} of everything under folder."""
    return {p.relative_to(folder): (None if p.is_dir() else p.read_bytes())
            for p in folder.rglob("*")}


def refused(code, err, *words):
    lines = err.strip().splitlines()
    assert code == 2 and len(lines) == 1 and lines[0].startswith("bem3d: error: "), err
    for word in words:
        assert word in lines[0], lines[0]


# --- earlier results ----------------------------------------------------------------------------

def test_a_second_run_into_the_same_folder_needs_force(tmp_path, capsys):
    mesh = write_sphere(tmp_path / "ball.obj")
    out = tmp_path / "out"
    assert run(["extract", mesh, "--quiet", "--out", out], capsys)[0] == 0
    first = snapshot(tmp_path)
    code, _, err = run(["extract", mesh, "--quiet", "--volts", "ball=2", "--out", out], capsys)
    refused(code, err, str(out), "result.json", "--force")
    assert snapshot(tmp_path) == first                    # the earlier results are untouched
    code, _, _ = run(["extract", mesh, "--quiet", "--volts", "ball=2", "--force", "--out", out],
                     capsys)
    assert code == 0 and sorted(os.listdir(out)) == OUTPUTS
    assert json.loads((out / "result.json").read_text())["potentials_V"] == [2.0]


def test_a_file_of_the_same_name_counts_as_an_earlier_result(tmp_path, capsys):
    # A user's own capacitance.csv in the folder is not replaced silently either.
    mesh = write_sphere(tmp_path / "ball.obj")
    out = tmp_path / "out"
    out.mkdir()
    (out / "capacitance.csv").write_text("my own numbers\n")
    before = snapshot(tmp_path)
    code, _, err = run(["extract", mesh, "--quiet", "--out", out], capsys)
    refused(code, err, "capacitance.csv")
    assert snapshot(tmp_path) == before


def test_a_folder_with_other_files_is_fine_and_keeps_them(tmp_path, capsys):
    mesh = write_sphere(tmp_path / "ball.obj")
    code, _, _ = run(["extract", mesh, "--quiet", "--out", tmp_path], capsys)
    assert code == 0
    assert sorted(os.listdir(tmp_path)) == sorted(OUTPUTS + ["ball.obj"])


def test_the_output_folder_cannot_be_a_file(tmp_path, capsys):
    mesh = write_sphere(tmp_path / "ball.obj")
    (tmp_path / "taken").write_text("x")
    before = snapshot(tmp_path)
    code, _, err = run(["extract", mesh, "--quiet", "--out", tmp_path / "taken"], capsys)
    refused(code, err, "taken", "is a file")
    assert snapshot(tmp_path) == before


def test_demo_refuses_a_folder_with_results_before_writing_its_mesh(tmp_path, capsys):
    (tmp_path / "result.json").write_text("{}")
    before = snapshot(tmp_path)
    code, _, err = run(["demo", tmp_path], capsys)
    refused(code, err, "result.json", "--force")
    assert snapshot(tmp_path) == before


# --- inputs are never overwritten ---------------------------------------------------------------

def test_a_mesh_named_like_an_output_is_never_overwritten_even_with_force(tmp_path, capsys):
    # An OBJ mesh saved as result.json is read by its content, so it is an input that sits
    # exactly where an output would go.
    mesh = write_sphere(tmp_path / "result.json")
    before = snapshot(tmp_path)
    for force in ([], ["--force"]):
        code, _, err = run(["extract", mesh, "--quiet", "--out", tmp_path, *force], capsys)
        refused(code, err, "is an input of this run")
        assert snapshot(tmp_path) == before


def test_a_point_list_named_like_an_output_is_never_overwritten(tmp_path, capsys):
    # points.csv is written by the field job at the very end (its name is known only then):
    # the whole run is refused at that moment and nothing of it is published.
    mesh = write_sphere(tmp_path / "ball.obj")
    probes = tmp_path / "points.csv"
    probes.write_text("x,y,z\n0,0,3\n")
    before = snapshot(tmp_path)
    code, _, err = run(["field", mesh, "--quiet", "--points", "5", "--at", probes, "--force",
                        "--out", tmp_path], capsys)
    refused(code, err, "points.csv", "is an input of this run")
    assert snapshot(tmp_path) == before


# --- nothing outside the output folder ----------------------------------------------------------

def test_a_spice_name_cannot_lead_outside_the_folder(tmp_path, capsys):
    write_sphere(tmp_path / "ball.obj")
    (tmp_path / "work").mkdir()
    model = tmp_path / "work" / "m.toml"
    model.write_text('meshes = ["../ball.obj"]\n[output]\nfolder = "out"\n'
                     'spice_name = "../../escaped"\n')
    before = snapshot(tmp_path)
    code, _, _ = run(["extract", model, "--quiet"], capsys)
    assert code == 0
    new = {p for p in snapshot(tmp_path) if p not in before}
    out = tmp_path / "work" / "out"
    assert new == {out.relative_to(tmp_path)} | {(out / n).relative_to(tmp_path) for n in
                                                 ["______escaped.cir", "capacitance.csv",
                                                  "result.json", "surface.vtp"]}


def test_an_output_that_is_a_symlink_is_replaced_not_followed(tmp_path, capsys):
    # result.json in the folder links to a file elsewhere: --force replaces the link itself.
    mesh = write_sphere(tmp_path / "ball.obj")
    outside = tmp_path / "precious.txt"
    outside.write_text("keep me\n")
    out = tmp_path / "out"
    out.mkdir()
    (out / "result.json").symlink_to(outside)
    code, _, _ = run(["extract", mesh, "--quiet", "--force", "--out", out], capsys)
    assert code == 0
    assert outside.read_text() == "keep me\n"
    assert not (out / "result.json").is_symlink()
    assert json.loads((out / "result.json").read_text())["conductors"] == ["ball"]


# --- failures leave nothing ---------------------------------------------------------------------

def disk_full(*args, **kwargs):
    raise Bem3dError("capacitance.csv: no space left on device")


@pytest.mark.parametrize("existing", [False, True])
@pytest.mark.parametrize("failure", ["mesh check", "writing"])
def test_a_failed_run_leaves_no_trace(tmp_path, capsys, monkeypatch, existing, failure):
    # A run failing in its mesh check (a second sphere crossing the first), or while writing
    # (after result.json was written): no output file, no staging folder, and the folders the
    # run made are removed again; a folder that existed keeps what it held.
    a = write_sphere(tmp_path / "a.obj")
    b = write_sphere(tmp_path / "b.obj", center=(1.0 if failure == "mesh check" else 3.0, 0, 0))
    if failure == "writing":
        monkeypatch.setattr("bem3d.export.outputs.write_csv", disk_full)
    out = tmp_path / "nested" / "out"
    if existing:
        out.mkdir(parents=True)
        (out / "notes.txt").write_text("mine\n")
    before = snapshot(tmp_path)
    code, _, err = run(["extract", a, b, "--quiet", "--out", out], capsys)
    refused(code, err, "touch or overlap" if failure == "mesh check" else "no space left")
    assert snapshot(tmp_path) == before
    assert not any(p.name.startswith(STAGE_PREFIX) for p in tmp_path.rglob("*"))
