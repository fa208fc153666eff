"""Command line: outputs and their formats, and a one-line error with exit 2 for each bad input."""

import csv
import json
import subprocess
import sys

import meshio
import numpy as np
import pytest
import reference_values as ref
from conftest import run_cli as run

from bem3d.base.constants import EPS0
from bem3d.geometry import shapes

pv = pytest.importorskip("pyvista")


def write_mesh(path, parts):
    """One file per call; parts: list of (points, triangles) merged as one surface."""
    points, tris = shapes.merge(*parts)
    meshio.write(path, meshio.Mesh(points, [("triangle", tris)]))
    return path


@pytest.fixture
def two_spheres(tmp_path):
    a = write_mesh(tmp_path / "left.stl", [shapes.octahedral_sphere(1.0, 6)])
    b = write_mesh(tmp_path / "right.stl", [shapes.octahedral_sphere(1.0, 6, center=(3.0, 0, 0))])
    return a, b


def test_extract_writes_every_output(two_spheres, tmp_path, capsys):
    out = tmp_path / "res"
    code, stdout, _ = run(["extract", *two_spheres, "--units", "mm", "--volts", "left=2",
                           "--out", out], capsys)
    assert code == 0
    assert "Maxwell capacitance matrix" in stdout and "caution" in stdout
    record = json.loads((out / "result.json").read_text())
    assert record["conductors"] == ["left", "right"]
    c = np.array(record["maxwell_capacitance_F"])
    mutual = np.array(record["mutual_capacitance_F"])
    assert record["panels"] == 2 * 288
    # a 1 mm sphere is ~0.11 pF (4 pi eps0 a, closed form); coarse mesh, so 2%
    assert c[0, 0] == pytest.approx(4 * np.pi * EPS0 * 1e-3 * 1.146, rel=2e-2)
    np.testing.assert_allclose(mutual[0, 1], -c[0, 1])
    np.testing.assert_allclose(np.diag(mutual), c.sum(axis=1))
    assert record["potentials_V"] == [2.0, 0.0]
    np.testing.assert_allclose(record["charges_C"], c @ [2.0, 0.0])
    assert record["energy_J"] == pytest.approx(0.5 * 4 * c[0, 0])
    assert set(record["timings_s"]) >= {"assembly", "solve", "total"}
    assert record["solver"]["solver"] in ("cholesky", "cg-jacobi")

    rows = list(csv.reader((out / "capacitance.csv").open()))
    assert rows[0] == ["matrix", "conductor", "left", "right"]
    assert [r[0] for r in rows[1:]] == ["maxwell_F"] * 2 + ["mutual_F"] * 2
    assert float(rows[1][2]) == pytest.approx(c[0, 0], rel=1e-8)

    spice = (out / "bem3d_capacitance.cir").read_text().splitlines()
    assert spice[2].startswith(".SUBCKT bem3d_capacitance left right REF")
    assert spice[-1].startswith(".ENDS")
    elements = [line.split() for line in spice if line.startswith("C")]
    assert len(elements) == 3                       # left-right, left-REF, right-REF
    value = {tuple(e[1:3]): float(e[3]) for e in elements}
    assert value["left", "right"] == pytest.approx(mutual[0, 1], rel=1e-6)

    surface = pv.read(out / "surface.vtp")
    assert surface.n_cells == 2 * 288
    assert set(surface.cell_data.keys()) >= {"sigma", "conductor", "potential"}
    # corners in the mesh unit: the two unit spheres (mm) centred 3 apart on x
    np.testing.assert_allclose(surface.bounds, [-1, 4, -1, 1, -1, 1], atol=1e-9)
    assert list(surface.field_data["length_unit"]) == ["mm"]
    assert list(surface.field_data["conductor_names"]) == record["surface_conductors"]
    # sigma integrates to the conductor charges (C/m^2 times mm^2 in m^2)
    areas = surface.compute_cell_sizes()["Area"] * 1e-6
    q_left = np.sum((surface.cell_data["sigma"] * areas)[surface.cell_data["conductor"] == 0])
    assert q_left == pytest.approx(record["charges_C"][0], rel=1e-6)


def test_model_file_sets_units_permittivity_volts_and_folder(two_spheres, tmp_path, capsys):
    model = tmp_path / "pair.toml"
    model.write_text('length_unit = "mm"\nrelative_permittivity = 2.0\n'
                     f'meshes = ["{two_spheres[0].name}", "{two_spheres[1].name}"]\n'
                     '[volts]\nright = -1.5\n[output]\nfolder = "model_out"\nspice_name = "pair"\n')
    code, _, _ = run(["extract", model, "--quiet"], capsys)
    assert code == 0
    record = json.loads((tmp_path / "model_out" / "result.json").read_text())
    assert record["potentials_V"] == [0.0, -1.5]
    assert record["solver"]["relative_permittivity"] == 2.0
    assert (tmp_path / "model_out" / "pair.cir").exists()


def test_compressed_backend_and_its_cache_from_the_command_line(two_spheres, tmp_path, capsys):
    # Two 1 mm spheres 3 mm apart against the bispherical series (Smythe 1950, in
    # reference_values.two_spheres), loosely: the 288-panel spheres are 2-3 % low. The
    # compressed backend against the dense one on the same panels, tightly.
    cache = tmp_path / "cache"
    records = {}
    for name, extra in [("dense", ["--backend", "dense"]),
                        ("stored", ["--backend", "compressed", "--cache-dir", cache]),
                        ("hit", ["--backend", "compressed", "--cache-dir", cache]),
                        ("off", ["--backend", "compressed", "--no-cache"])]:
        out = tmp_path / name
        code, stdout, _ = run(["extract", *two_spheres, "--units", "mm", "--out", out, *extra],
                              capsys)
        assert code == 0 and "solver: " in stdout
        records[name] = json.loads((out / "result.json").read_text())
    assert records["stored"]["solver"]["cache"] == "stored"
    assert records["hit"]["solver"]["cache"] == "hit"
    assert records["off"]["solver"]["cache"] == "off"
    assert len(list(cache.glob("*.npz"))) == 1
    dense = np.array(records["dense"]["maxwell_capacitance_F"])
    np.testing.assert_allclose(dense, ref.two_spheres(1e-3, 3e-3), rtol=4e-2)
    for name in ("stored", "hit", "off"):
        assert records[name]["solver"]["backend"] == "compressed"
        np.testing.assert_allclose(records[name]["maxwell_capacitance_F"], dense,
                                   rtol=1e-6, atol=1e-6 * dense.max())


def test_cache_list_and_clear(tmp_path, monkeypatch, capsys):
    # Entries stored by the cache itself; ages set on their modification times (last use).
    import os
    import time

    from bem3d.operators.cache import OperatorCache

    folder = tmp_path / "ops"
    monkeypatch.setenv("BEM3D_CACHE_DIR", str(folder))
    store = OperatorCache()
    old, new = store.save("a" * 64, {"x": np.zeros(1000)}), store.save("b" * 64, {"x": np.ones(9)})
    ten_days_ago = time.time() - 10 * 86400
    os.utime(old, (ten_days_ago, ten_days_ago))
    code, out, _ = run(["cache", "list"], capsys)
    lines = out.strip().splitlines()
    assert code == 0 and len(lines) == 3
    assert lines[0].startswith(old.name) and lines[1].startswith(new.name)    # oldest first
    assert lines[2].startswith("2 entries") and str(folder) in lines[2]
    code, out, _ = run(["cache", "clear", "--older-than", "1"], capsys)
    assert code == 0 and out.startswith("removed 1 entries")
    assert not old.exists() and new.exists()
    code, out, _ = run(["cache", "clear", "--cache-dir", folder], capsys)
    assert code == 0 and not new.exists()
    code, out, _ = run(["cache", "list", "--cache-dir", tmp_path / "none"], capsys)
    assert code == 0 and out.startswith("0 entries")
    code, _, err = run(["cache", "clear", "--older-than", "-2"], capsys)
    assert code == 2 and "--older-than" in err and len(err.strip().splitlines()) == 1


@pytest.mark.parametrize("extra, words", [(["--block-tol", "0"], "--block-tol"),
                                          (["--tol", "2"], "--tol"),
                                          (["--cache-max", "0"], "--cache-max"),
                                          (["--backend", "compressed", "--solver", "direct"],
                                           "direct solver needs the dense backend")])
def test_bad_solver_options_exit_2(two_spheres, tmp_path, capsys, extra, words):
    out = tmp_path / "res"
    code, _, err = run(["extract", *two_spheres, "--out", out, *extra], capsys)
    assert code == 2 and words in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_check_mesh_reports_panels_and_conductors(two_spheres, capsys):
    code, out, _ = run(["check-mesh", *two_spheres, "--units", "mm"], capsys)
    assert code == 0
    assert "panels: 576" in out and "left: 288 panels" in out and "problems: none" in out


def corrupt(points, tris, how):
    p, t = points.copy(), tris.copy()
    if how == "nan":
        p[3, 1] = np.nan
    elif how == "zero-area":
        t[5] = [t[5, 0], t[5, 0], t[5, 1]]
    elif how == "duplicate":
        t = np.vstack([t, t[7][::-1]])
    return p, t


BAD_MESHES = [("nan", "NaN"), ("zero-area", "zero-area"), ("duplicate", "duplicate")]


@pytest.mark.parametrize("how, words", BAD_MESHES)
def test_bad_mesh_gives_exit_2_one_line_and_no_files(tmp_path, capsys, how, words):
    p, t = corrupt(*shapes.octahedral_sphere(1.0, 4), how)
    path = tmp_path / "bad.vtu"
    meshio.write(path, meshio.Mesh(p, [("triangle", t)]))
    out = tmp_path / "res"
    code, stdout, err = run(["extract", path, "--out", out], capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "bad.vtu" in lines[0] and words.lower() in lines[0].lower()
    assert "Traceback" not in err
    assert not out.exists()


@pytest.mark.parametrize("argv, words", [
    (["extract", "{d}/missing.stl"], "missing.stl"),
    (["extract", "{d}/garbage.stl"], "garbage.stl"),
    (["extract", "{d}/lines.vtu"], "lines.vtu"),
    (["extract", "{d}/a.stl", "{d}/touching.stl"], "touch"),
    (["extract", "{d}/a.stl", "--units", "furlong"], "furlong"),
    (["extract", "{d}/a.stl", "--volts", "nobody=3"], "nobody"),
    (["extract", "{d}/a.stl", "--volts", "a=high"], "a=high"),
    (["extract", "{d}/broken.toml"], "broken.toml"),
    (["extract", "{d}/unknown_key.toml"], "colour"),
    (["extract", "{d}/a.stl", "--eps-r", "-3"], "permittivity"),
])
def test_bad_input_gives_exit_2_one_line_and_no_files(tmp_path, capsys, argv, words):
    write_mesh(tmp_path / "a.stl", [shapes.octahedral_sphere(1.0, 4)])
    write_mesh(tmp_path / "touching.stl", [shapes.octahedral_sphere(1.0, 4, center=(2.0, 0, 0))])
    (tmp_path / "garbage.stl").write_bytes(bytes(range(256)) * 7)
    meshio.write(tmp_path / "lines.vtu", meshio.Mesh(np.eye(3), [("line", np.array([[0, 1], [1, 2]]))]))
    (tmp_path / "broken.toml").write_text('meshes = ["a.stl"\n')
    (tmp_path / "unknown_key.toml").write_text('meshes = ["a.stl"]\ncolour = "red"\n')
    out = tmp_path / "res"
    code, _, err = run([a.format(d=tmp_path) for a in argv] + ["--out", str(out)], capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("bem3d: error:"), err
    assert words in lines[0]
    assert not out.exists()


def test_console_script_exit_code_and_debug_traceback(tmp_path):
    cmd = [sys.executable, "-m", "bem3d", "extract", str(tmp_path / "none.stl")]
    quiet = subprocess.run(cmd, capture_output=True, text=True)
    assert quiet.returncode == 2 and "Traceback" not in quiet.stderr
    loud = subprocess.run(cmd[:3] + ["--debug"] + cmd[3:], capture_output=True, text=True)
    assert "Traceback" in loud.stderr


def test_demo_runs_end_to_end(tmp_path, capsys):
    code, out, _ = run(["demo", tmp_path / "demo"], capsys)
    assert code == 0
    record = json.loads((tmp_path / "demo" / "result.json").read_text())
    assert record["conductors"] == ["sense_a", "sense_b", "drive", "guard", "lid"]
    c = np.array(record["maxwell_capacitance_F"])
    # the layout is mirror-symmetric in x: both sense pads see the drive pad alike
    assert c[0, 2] == pytest.approx(c[1, 2], rel=1e-4)
    assert c[0, 0] == pytest.approx(c[1, 1], rel=1e-4)
    assert str((tmp_path / "demo").resolve()) in out


def test_field_writes_grid_slices_points_surface_and_pictures(two_spheres, tmp_path, capsys):
    points = tmp_path / "probe.csv"
    points.write_text("x,y,z\n0,0,0\n1.5,0,0\n0,0,5\n")
    out = tmp_path / "f"
    code, stdout, _ = run(["field", *two_spheres, "--units", "mm", "--volts", "left=1",
                           "right=-1", "--points", "21", "--slice", "z=0", "--slice", "x=1.5",
                           "--at", points, "--unit-fields", "--png", "--out", out], capsys)
    assert code == 0
    assert "grid + outside" in stdout and "kV/mm" in stdout and "breaks down" in stdout
    record = json.loads((out / "result.json").read_text())
    for key in ("energy_J", "energy_grid_J", "energy_outside_grid_J", "force_N",
                "torque_about_centroid_N_m", "peak_field_V_per_m"):
        assert key in record
    # attraction along x between opposite charges; equal and opposite (Newton's third law)
    assert record["force_N"]["right"][0] < 0
    assert record["force_N"]["left"][0] == pytest.approx(-record["force_N"]["right"][0], rel=1e-6)

    grid = pv.read(out / "field.vti")
    assert grid.dimensions == (21, 21, 21)
    for name in ("phi", "E", "E_magnitude", "energy_density", "inside_conductor",
                 "phi_unit_left", "E_unit_right"):
        assert name in grid.point_data
    assert grid.point_data["E"].shape == (21**3, 3)
    # the energy density is 1/2 eps0 |E|^2 in J/m^3 (definition)
    np.testing.assert_allclose(grid.point_data["energy_density"],
                               0.5 * EPS0 * grid.point_data["E_magnitude"] ** 2, rtol=1e-12)
    inside = grid.point_data["inside_conductor"].astype(bool)
    centre = np.argmin(np.linalg.norm(grid.points - [0, 0, 0], axis=1))
    assert inside[centre] and inside.sum() > 0 and not inside.all()
    # inside the left sphere (at 1 V) phi is 1 V (closed conductor)
    assert grid.point_data["phi"][centre] == pytest.approx(1.0, abs=0.02)

    # slices named and placed in the mesh unit (mm)
    for name, axis, value in (("slice_z_0mm.vtp", 2, 0.0), ("slice_x_1.5mm.vtp", 0, 1.5)):
        plane = pv.read(out / name)
        assert plane.n_points == 21 * 21 and "energy_density" in plane.point_data
        assert plane.bounds[2 * axis] == pytest.approx(value)
        assert list(plane.field_data["length_unit"]) == ["mm"]
    assert list(grid.field_data["length_unit"]) == ["mm"]
    rows = list(csv.reader((out / "points.csv").open()))
    assert rows[0][:4] == ["x_mm", "y_mm", "z_mm", "phi_V"] and len(rows) == 4
    assert float(rows[1][3]) == pytest.approx(1.0, abs=0.02)          # inside the left sphere
    assert float(rows[3][0]) == 0 and float(rows[3][2]) == pytest.approx(5.0)    # as given
    surface = pv.read(out / "surface.vtp")
    assert {"sigma", "E_normal", "E_face_max", "force_density"} <= set(surface.cell_data.keys())
    np.testing.assert_allclose(surface.cell_data["E_normal"], surface.cell_data["sigma"] / EPS0)
    for png in ("surface_charge.png", "field_slice_z_0mm.png", "field_slice_x_1.5mm.png"):
        data = (out / png).read_bytes()
        assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000


@pytest.mark.parametrize("extra, words", [
    (["--slice", "q=1"], "--slice"),
    (["--slice", "z=99"], "outside the field box"),
    (["--box", "1", "1", "1", "0", "0", "0"], "--box"),
    (["--points", "1"], "--points"),
    (["--spacing", "1e-7"], "points (limit"),
    (["--at", "{d}/nothing.csv"], "nothing.csv"),
])
def test_field_bad_options_exit_2_and_write_nothing(two_spheres, tmp_path, capsys, extra, words):
    out = tmp_path / "f"
    code, _, err = run(["field", *two_spheres, "--units", "mm", "--out", out]
                       + [e.format(d=tmp_path) for e in extra], capsys)
    assert code == 2 and words in err and len(err.strip().splitlines()) == 1
    assert not out.exists()


def test_ground_plane_floating_and_dielectric_options(tmp_path, capsys):
    ball = write_mesh(tmp_path / "ball.stl", [shapes.octahedral_sphere(1.0, 6, center=(0, 0, 3))])
    shield = write_mesh(tmp_path / "shield.stl",
                        [shapes.octahedral_sphere(1.0, 6, center=(3, 0, 3))])
    shell = write_mesh(tmp_path / "shell.stl", [shapes.octahedral_sphere(1.6, 6, center=(0, 0, 3))])
    out = tmp_path / "o"
    code, stdout, _ = run(["extract", ball, shield, "--ground-plane", "0", "--floating", "shield",
                           "--dielectric", f"{shell}=3.5", "--volts", "ball=1", "--out", out],
                          capsys)
    # a dielectric together with a ground plane and a floating conductor
    assert code == 0 and "floating conductor shield" in stdout
    record = json.loads((out / "result.json").read_text())
    assert record["solver"]["ground_plane_z_m"] == 0.0
    assert list(record["solver"]["dielectrics"].values()) == [3.5]
    code, stdout, _ = run(["extract", ball, shield, "--ground-plane", "0", "--floating", "shield",
                           "--volts", "ball=1", "--out", out, "--force"], capsys)
    assert code == 0 and "floating conductor shield" in stdout
    record = json.loads((out / "result.json").read_text())
    assert record["conductors"] == ["ball"] and "shield" in record["floating_potentials_V"]
    assert record["solver"]["ground_plane_z_m"] == 0.0
    # the model-file forms give the same numbers
    model = tmp_path / "m.toml"
    model.write_text('meshes = ["ball.stl", "shield.stl"]\nground_plane_z = 0.0\n'
                     'floating = ["shield"]\n[volts]\nball = 1.0\n[output]\nfolder = "m_out"\n')
    assert run(["extract", model, "--quiet"], capsys)[0] == 0
    again = json.loads((tmp_path / "m_out" / "result.json").read_text())
    assert again["maxwell_capacitance_F"] == record["maxwell_capacitance_F"]
    # dielectric shell around the ball, from the flag and from the model file
    code, _, _ = run(["extract", ball, "--dielectric", f"{shell}=3.5", "--out", tmp_path / "d"],
                     capsys)
    assert code == 0
    flag = json.loads((tmp_path / "d" / "result.json").read_text())
    model.write_text('meshes = ["ball.stl"]\n[[dielectric]]\nmesh = "shell.stl"\n'
                     'relative_permittivity = 3.5\n[output]\nfolder = "d_out"\n')
    assert run(["extract", model, "--quiet"], capsys)[0] == 0
    file_form = json.loads((tmp_path / "d_out" / "result.json").read_text())
    assert file_form["maxwell_capacitance_F"] == flag["maxwell_capacitance_F"]
    # closed form for a sphere in a concentric shell (coarse mesh: 2 %)
    c = 4 * np.pi * EPS0 / ((1 / 3.5) * (1 - 1 / 1.6) + 1 / 1.6)
    assert flag["maxwell_capacitance_F"][0][0] == pytest.approx(c, rel=2e-2)


def test_lossy_dielectric_gives_the_conductance_matrix(tmp_path, capsys):
    # sphere a = 1 in a shell b = 1.6 of eps_r 3.5 (1 - j 0.02): C* from Gauss's law (Jackson,
    # Classical Electrodynamics, 3rd ed. 1999, sec. 4.4) with the complex permittivity
    ball = write_mesh(tmp_path / "ball.stl", [shapes.octahedral_sphere(1.0, 6, center=(0, 0, 3))])
    shell = write_mesh(tmp_path / "shell.stl", [shapes.octahedral_sphere(1.6, 6, center=(0, 0, 3))])
    code, stdout, err = run(["extract", ball, "--dielectric", f"{shell}=3.5,0.02",
                             "--frequency", "1e5", "--out", tmp_path / "g"], capsys)
    assert code == 0 and "Maxwell conductance matrix at 100000 Hz" in stdout
    record = json.loads((tmp_path / "g" / "result.json").read_text())
    c = 4 * np.pi * EPS0 / ((1 / (3.5 * (1 - 0.02j))) * (1 - 1 / 1.6) + 1 / 1.6)
    assert record["frequency_Hz"] == 1e5
    assert record["maxwell_capacitance_F"][0][0] == pytest.approx(c.real, rel=2e-2)
    assert record["conductance_S"][0][0] == pytest.approx(-2 * np.pi * 1e5 * c.imag, rel=5e-2)
    spice = (tmp_path / "g" / "ball.cir").read_text() if (tmp_path / "g" / "ball.cir").exists() \
        else next((tmp_path / "g").glob("*.cir")).read_text()
    resistor = [line for line in spice.splitlines() if line.startswith("R_")]
    assert len(resistor) == 1 and "100000 Hz" in spice
    assert float(resistor[0].split()[-1]) == pytest.approx(1 / record["conductance_S"][0][0])
    # no frequency: the conductance at the default one, said on stderr
    code, _, err = run(["extract", ball, "--dielectric", f"{shell}=3.5,0.02",
                        "--out", tmp_path / "h"], capsys)
    record = json.loads((tmp_path / "h" / "result.json").read_text())
    assert code == 0 and record["frequency_Hz"] == 1e6 and "without a frequency" in err


@pytest.mark.parametrize("extra, words", [
    (["--dielectric", "{d}/shell.stl=-2"], "must lie between 1"),
    (["--dielectric", "{d}/shell.stl=0.5"], "must lie between 1"),
    (["--dielectric", "{d}/shell.stl"], "FILE=EPS_R"),
    (["--dielectric", "{d}/none.stl=2"], "none.stl"),
    (["--ground-plane", "3"], "below the plane"),
    (["--ground-plane", "1.8", "--dielectric", "{d}/shell.stl=2"], "dielectric body"),
    (["--floating", "ghost"], "ghost"),
    (["--dielectric", "{d}/shell.stl=2,1.5"], "loss tangent"),
    (["--dielectric", "{d}/shell.stl=2,-0.1"], "loss tangent"),
    (["--dielectric", "{d}/shell.stl=2,0.01,3"], "FILE=EPS_R"),
    (["--dielectric", "{d}/shell.stl=2,0.01", "--frequency", "0"], "frequency"),
    (["--loss-tangent", "0.02", "--frequency", "-1"], "frequency"),
    (["--loss-tangent", "nan"], "loss tangent"),
])
def test_bad_environment_options_exit_2(tmp_path, capsys, extra, words):
    ball = write_mesh(tmp_path / "ball.stl", [shapes.octahedral_sphere(1.0, 4, center=(0, 0, 3))])
    write_mesh(tmp_path / "shell.stl", [shapes.octahedral_sphere(1.6, 4, center=(0, 0, 3))])
    out = tmp_path / "o"
    code, _, err = run(["extract", ball, "--out", out] + [e.format(d=tmp_path) for e in extra],
                       capsys)
    assert code == 2 and words in err and not out.exists()


def test_surface_index_and_names_follow_result_json_with_a_floating_conductor(tmp_path,
                                                                               capsys):
    # three spheres on the x axis, the middle one floating: it leaves the matrices, so the
    # surface's conductor index counts result.json's surface_conductors (matrix order, then
    # the floating ones); each index's panels sit around the centre of the sphere it names
    centres = {"left": 0.0, "mid": 3.0, "right": 6.0}
    files = [write_mesh(tmp_path / f"{n}.stl", [shapes.octahedral_sphere(1.0, 4, (x, 0, 0))])
             for n, x in centres.items()]
    out = tmp_path / "res"
    code, _, err = run(["extract", *files, "--units", "mm", "--floating", "mid", "--volts",
                        "left=1", "--out", out, "--quiet"], capsys)
    assert code == 0, err
    record = json.loads((out / "result.json").read_text())
    assert record["conductors"] == ["left", "right"]
    assert record["surface_conductors"] == ["left", "right", "mid"]
    surface = pv.read(out / "surface.vtp")
    assert list(surface.field_data["conductor_names"]) == record["surface_conductors"]
    index = surface.cell_data["conductor"]
    centres_x = surface.cell_centers().points[:, 0]
    for k, name in enumerate(record["surface_conductors"]):
        assert np.mean(centres_x[index == k]) == pytest.approx(centres[name], abs=0.05)
    mid = index == 2
    np.testing.assert_allclose(surface.cell_data["potential"][mid],
                               record["floating_potentials_V"]["mid"])


def test_check_mesh_speaks_the_mesh_unit_and_hints_at_millimetres(tmp_path, capsys):
    # a 2 mm sphere drawn in millimetres: with --units mm the report is in mm; without, the
    # model reads as 2 m across and a one-line hint names --units mm
    mesh = write_mesh(tmp_path / "ball.stl", [shapes.octahedral_sphere(1.0, 4)])
    code, out, err = run(["check-mesh", mesh, "--units", "mm"], capsys)
    assert code == 0 and "bounding box [mm]: (-1, -1, -1) .. (1, 1, 1)" in out
    assert "mm^2" in out and "hint" not in err
    code, out, err = run(["check-mesh", mesh], capsys)
    assert code == 0 and "bounding box [m]" in out
    hints = [line for line in err.splitlines() if line.startswith("hint:")]
    assert len(hints) == 1 and "--units mm" in hints[0]


def test_usage_errors_carry_one_prefix(capsys):
    for argv, words in (([], "required: command"), (["extract"], "extract: ")):
        with pytest.raises(SystemExit) as stop:
            run(argv, capsys)
        err = capsys.readouterr().err
        lines = err.strip().splitlines()
        assert stop.value.code == 2 and len(lines) == 1 and words in lines[0], err
        assert lines[0].startswith("bem3d: error: ") and lines[0].count("bem3d") == 1


def test_closed_pipe_ends_quietly(two_spheres):
    # the reader goes away before bem3d writes (as `| head -1` does after its line): no
    # traceback and no error line, and the exit code of a program ended by SIGPIPE (128 + 13,
    # POSIX shells' convention)
    child = subprocess.Popen([sys.executable, "-m", "bem3d", "check-mesh", *map(str, two_spheres),
                              "--units", "mm"], stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    child.stdout.close()
    err = child.stderr.read().decode()
    assert child.wait() == 141 and err == "", err
