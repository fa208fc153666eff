"""Faults a hostile or unlucky user meets: names that are markup or escape sequences, FIFOs and
devices given as inputs, a full disk, unwritable folders, numeric extremes, damaged caches.
Each ends in one line and a documented exit code (bem3d._cli.exits), nothing half-written and
nothing finished lost. The checks are against general libraries (csv, xml.etree, json) and the
README's exit codes."""

import contextlib
import csv
import errno
import io
import json
import os
import signal
import xml.etree.ElementTree as ET

import meshio
import numpy as np
import pytest
from conftest import run_cli as run

from bem3d._cli import exits
from bem3d.base.errors import MeshError
from bem3d.base.files import STAGE_PREFIX, TEMP_PREFIX
from bem3d.export.names import (
    RESERVED_NODES,
    csv_cell,
    csv_text,
    spice_nodes,
    terminal_text,
    xml_attribute,
)
from bem3d.geometry import shapes
from bem3d.geometry.panels import Panels

HOSTILE = ['=HYPERLINK("x"),1', "+1", "-cmd", "@sum", "a,b", 'say "hi"', "two\nlines",
           "<tag>&amp;", "\x1b[2Jclear", "tab\tstart", "\rcr", "0", "GND", "ref", "Ref"]


def write_sphere(path, center=(0.0, 0.0, 0.0)):
    points, tris = shapes.octahedral_sphere(1.0, 2, center=center)       # 32 panels
    with contextlib.redirect_stderr(io.StringIO()):
        meshio.write(path, meshio.Mesh(points, [("triangle", tris)]), file_format="obj")
    return path


@pytest.fixture
def sphere(tmp_path):
    return write_sphere(tmp_path / "ball.obj")


@pytest.fixture(autouse=True)
def no_hang():
    """A read that blocks (a FIFO) fails the test instead of hanging the suite."""
    def stop(*_):
        raise AssertionError("blocked for 20 s")

    previous = signal.signal(signal.SIGALRM, stop)
    signal.alarm(20)
    yield
    signal.alarm(0)
    signal.signal(signal.SIGALRM, previous)


def one_line(code, err, expected, *words):
    lines = err.strip().splitlines()
    assert code == expected and len(lines) == 1 and lines[0].startswith("bem3d: error: "), err
    for word in words:
        assert word in lines[0], lines[0]


def files_under(folder):
    return {p.relative_to(folder): (None if p.is_dir() else p.read_bytes())
            for p in folder.rglob("*")}


# --- names ------------------------------------------------------------------------------------

def test_csv_cells_round_trip_through_the_csv_module_and_start_no_formula():
    rows = [[csv_cell(n), "1.0e-12"] for n in HOSTILE]
    parsed = list(csv.reader(io.StringIO(csv_text(rows), newline="")))
    assert [r[0] for r in parsed] == [r[0] for r in rows]          # RFC 4180 quoting holds
    for cell, name in zip((r[0] for r in parsed), HOSTILE):
        # spreadsheets take = + - @ tab CR as a formula start (common practice, no source)
        assert not cell.startswith(("=", "+", "-", "@", "\t", "\r"))
        assert cell.lstrip("'") == name


def test_spice_nodes_are_unique_ignoring_case_and_never_reserved():
    nodes = spice_nodes(HOSTILE + ["top", "TOP", "top_2"])
    assert len({n.lower() for n in nodes}) == len(nodes)
    assert not {n.lower() for n in nodes} & {r.lower() for r in RESERVED_NODES}
    assert all(n.replace("_", "").isalnum() and not n.isdigit() for n in nodes)
    assert spice_nodes(HOSTILE) == nodes[:len(HOSTILE)]                 # deterministic


def test_xml_attributes_parse_back_and_terminal_text_has_no_controls():
    for name in HOSTILE:
        element = ET.fromstring(f'<a Name="{xml_attribute(name)}"/>')
        assert element.get("Name") == terminal_text(name)
        assert not any(ord(c) < 32 or 127 <= ord(c) < 160 for c in terminal_text(name))


def test_two_conductors_of_one_name_are_refused():
    points, tris = shapes.octahedral_sphere(1.0, 1)
    v = points[tris]
    with pytest.raises(MeshError, match="several conductors are named 'top'"):
        Panels(np.concatenate([v, v + 3.0]), np.repeat([0, 1], len(v)), ("top", "top"))


def test_hostile_conductor_names_give_well_formed_outputs(tmp_path, capsys):
    names = ['=cmd|"x",<b>&', "REF", "ref", "\x1b[31mred"]
    meshes = [write_sphere(tmp_path / f"{n}.obj", (3.0 * i, 0.0, 0.0))
              for i, n in enumerate(names)]
    out = tmp_path / "out"
    code, stdout, stderr = run(["field", *meshes, "--out", out, "--points", "3",
                                "--unit-fields", "--volts", "REF=1"], capsys)
    assert code == 0, stderr
    assert "\x1b" not in stdout + stderr
    rows = list(csv.reader(io.StringIO((out / "capacitance.csv").read_text(), newline="")))
    assert [c.lstrip("'") for c in rows[0][2:]] == names
    assert json.loads((out / "result.json").read_text())["conductors"] == names
    netlist = (out / "bem3d_capacitance.cir").read_text().splitlines()
    ports = next(line for line in netlist if line.startswith(".SUBCKT")).split()[2:]
    assert len({p.lower() for p in ports}) == len(ports) == 5 and ports[-1] == "REF"
    elements = [line.split()[0] for line in netlist if line.startswith("C")]
    assert len(set(elements)) == len(elements)
    ET.parse(out / "field.vti")                  # well-formed XML in spite of the names


# --- exit codes -------------------------------------------------------------------------------

@pytest.mark.parametrize("failure, code, words", [
    (OSError(errno.ENOSPC, "No space left on device", "x/result.json"), exits.ENVIRONMENT,
     ["x/result.json", "disk is full"]),
    (PermissionError(errno.EACCES, "Permission denied", "x"), exits.ENVIRONMENT, ["x:"]),
    (MemoryError(), exits.ENVIRONMENT, ["out of memory"]),
    (RecursionError(), exits.ENVIRONMENT, ["nested too deeply"]),
])
def test_environment_failures_end_in_one_line_and_exit_3(sphere, tmp_path, capsys,
                                                         monkeypatch, failure, code, words):
    def fail(*args, **kwargs):
        raise failure

    monkeypatch.setattr("bem3d.api.extract", fail)
    result = run(["extract", sphere, "--out", tmp_path / "o"], capsys)
    one_line(result[0], result[2], code, *words)
    with pytest.raises(type(failure)):
        run(["--debug", "extract", sphere, "--out", tmp_path / "o"], capsys)


def test_a_bug_keeps_its_traceback(sphere, tmp_path, capsys, monkeypatch):
    monkeypatch.setattr("bem3d.api.extract", lambda *a, **k: 1 / 0)
    with pytest.raises(ZeroDivisionError):
        run(["extract", sphere, "--out", tmp_path / "o"], capsys)


def test_error_lines_escape_control_characters(sphere, tmp_path, capsys):
    code, _, err = run(["extract", sphere, "--out", tmp_path / "o", "--volts",
                        "x\x1b[2J\nmore=1"], capsys)
    one_line(code, err, exits.BAD_INPUT, "\\x1b[2J")


# --- inputs that block or never end -----------------------------------------------------------

@pytest.mark.parametrize("kind", ["fifo", "zero"])
@pytest.mark.parametrize("role", ["model", "points", "mesh"])
def test_fifos_and_devices_are_refused_without_reading(sphere, tmp_path, capsys, kind, role):
    name = {"model": "m.toml", "points": "p.csv", "mesh": "m.obj"}[role]
    path = tmp_path / name
    if kind == "fifo":
        os.mkfifo(path)
    else:
        path.symlink_to("/dev/zero")
    argv = {"model": ["extract", path], "points": ["field", sphere, "--at", path],
            "mesh": ["extract", sphere, path]}[role]
    code, _, err = run([*argv, "--out", tmp_path / "o"], capsys)
    one_line(code, err, exits.BAD_INPUT, "not a regular file")
    assert not (tmp_path / "o").exists()


def test_deeply_nested_toml_is_refused(tmp_path, capsys):
    model = tmp_path / "m.toml"
    model.write_text("x = " + "[" * 100_000 + "]" * 100_000 + "\n")
    code, _, err = run(["extract", model], capsys)
    one_line(code, err, exits.BAD_INPUT, "malformed TOML")


def test_a_point_list_beyond_the_row_limit_is_refused_before_parsing(sphere, tmp_path, capsys,
                                                                    monkeypatch):
    monkeypatch.setattr("bem3d.post.field_map.MAX_LISTED_POINTS", 10)
    points = tmp_path / "p.csv"
    points.write_text("0,0,5\n" * 11)
    code, _, err = run(["field", sphere, "--at", points, "--out", tmp_path / "o"], capsys)
    one_line(code, err, exits.BAD_INPUT, "more than 10 rows")


# --- numbers ----------------------------------------------------------------------------------

@pytest.mark.parametrize("extra, words", [
    (["--spacing", "1e-300"], "points (limit"),
    (["--spacing", "inf"], "--spacing"),
    (["--box", "nan", "0", "0", "1", "1", "1"], "--box"),
    (["--box", "0", "0", "0", "1e300", "1", "1"], "--box"),
    (["--margin", "-1"], "--margin"),
    (["--margin", "nan"], "--margin"),
    (["--margin", "1e300"], "--margin"),
])
def test_numeric_extremes_are_refused_before_the_solve(sphere, tmp_path, capsys, extra, words):
    before = files_under(tmp_path)
    code, _, err = run(["field", sphere, "--out", tmp_path / "o", *extra], capsys)
    one_line(code, err, exits.BAD_INPUT, words)
    assert files_under(tmp_path) == before


def test_a_field_run_at_zero_volts_writes_valid_json(sphere, tmp_path, capsys):
    code, _, err = run(["field", sphere, "--out", tmp_path / "o", "--points", "3"], capsys)
    assert code == 0, err

    def refuse(constant):
        raise AssertionError(f"{constant} in result.json")

    record = json.loads((tmp_path / "o" / "result.json").read_text(), parse_constant=refuse)
    assert record["energy_J"] == 0 and record["fraction_in_grid"] is None


# --- writes -----------------------------------------------------------------------------------

def test_a_full_disk_fails_with_exit_3_and_keeps_the_earlier_result(sphere, tmp_path, capsys,
                                                                    monkeypatch):
    out = tmp_path / "o"
    assert run(["extract", sphere, "--out", out, "--quiet"], capsys)[0] == 0
    before = files_under(tmp_path)

    def full(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr("bem3d.base.files.os.fsync", full)
    code, _, err = run(["extract", sphere, "--out", out, "--force", "--quiet"], capsys)
    one_line(code, err, exits.ENVIRONMENT, "disk is full")
    assert files_under(tmp_path) == before


def test_a_vtk_writer_that_fails_quietly_is_an_error(sphere, tmp_path, capsys, monkeypatch):
    out = tmp_path / "o"
    assert run(["extract", sphere, "--out", out, "--quiet"], capsys)[0] == 0
    before = files_under(tmp_path)
    monkeypatch.setattr("pyvista.PolyData.save", lambda self, path, *a, **k: open(path, "wb").close())
    code, _, err = run(["extract", sphere, "--out", out, "--force", "--quiet"], capsys)
    one_line(code, err, exits.ENVIRONMENT, "surface.vtp", "empty")
    assert files_under(tmp_path) == before


def test_an_unwritable_output_folder_is_found_before_the_solve(sphere, tmp_path, capsys,
                                                              monkeypatch):
    def no_solve(*args, **kwargs):
        raise AssertionError("solved although the folder cannot be written")

    def read_only(*args, **kwargs):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS))

    monkeypatch.setattr("bem3d.api.solve_panels", no_solve)
    monkeypatch.setattr("bem3d.base.files.tempfile.mkstemp", read_only)
    for command in (["extract"], ["field"], ["converge"]):
        code, _, err = run([*command, sphere, "--out", tmp_path / "o"], capsys)
        one_line(code, err, exits.ENVIRONMENT, "read-only")


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes into read-only folders")
def test_a_read_only_output_folder_is_refused_with_exit_3(sphere, tmp_path, capsys):
    folder = tmp_path / "ro"
    folder.mkdir(mode=0o555)
    code, _, err = run(["extract", sphere, "--out", folder / "o"], capsys)
    one_line(code, err, exits.ENVIRONMENT, "Permission denied")


def test_leftovers_of_killed_runs_are_swept_and_live_ones_kept(sphere, tmp_path, capsys):
    out = tmp_path / "o"
    out.mkdir()
    dead = 2**22 + 12345                 # above Linux's default pid_max: no such process
    (out / f"{TEMP_PREFIX}{dead}-abc.vtp").write_bytes(b"x")
    (out / f"{STAGE_PREFIX}{dead}-abc").mkdir()
    live = out / f"{TEMP_PREFIX}{os.getpid()}-abc.vtp"
    live.write_bytes(b"x")
    assert run(["extract", sphere, "--out", out, "--quiet"], capsys)[0] == 0
    left = {p.name for p in out.iterdir() if p.name.startswith(".")}
    assert left == {live.name}


# --- sweep ------------------------------------------------------------------------------------

def sweep(argv, capsys):
    return run(["sweep", *argv, "--workers", "1"], capsys)


def test_an_unusable_sweep_cache_is_a_warning_not_a_failure(tmp_path, capsys):
    a = write_sphere(tmp_path / "a.obj")
    b = write_sphere(tmp_path / "b.obj", (3.0, 0.0, 0.0))
    cache = tmp_path / "cache"
    cache.write_text("a file where the cache folder goes\n")
    code, _, err = sweep([a, b, "--translate", "b:x=0,1", "--cache", cache,
                          "--out", tmp_path / "s"], capsys)
    assert code == exits.OK, err
    assert "warning: cache folder" in err and "running without the cache" in err


def test_a_later_failure_never_deletes_a_finished_case(tmp_path, capsys, monkeypatch):
    a = write_sphere(tmp_path / "a.obj")
    b = write_sphere(tmp_path / "b.obj", (3.0, 0.0, 0.0))
    argv = [a, b, "--translate", "b:x=0", "--out", tmp_path / "s"]
    assert sweep(argv, capsys)[0] == exits.OK
    case = next((tmp_path / "s" / "cases").iterdir())
    finished = (case / "result.json").read_bytes()
    (case / "case.json").write_text("{damaged")
    for entry in (tmp_path / "s" / "cache").glob("*.npz"):
        entry.write_bytes(entry.read_bytes()[:100])              # truncated

    def fail(*args, **kwargs):
        raise OSError(errno.EIO, "injected solver failure")

    monkeypatch.setattr("bem3d.post.sweep.run.solve_task", fail)
    code, _, err = sweep(argv, capsys)
    assert code == exits.CASES_FAILED and "damaged cache entry" in err
    assert (case / "result.json").read_bytes() == finished
    assert json.loads((case / "case.json").read_text())["status"] == "failed"


@pytest.mark.parametrize("values", ["0:1:100000000", "0:1:400,0:1:400"])
def test_huge_sweeps_are_refused_before_allocation(tmp_path, capsys, values):
    a = write_sphere(tmp_path / "a.obj")
    b = write_sphere(tmp_path / "b.obj", (3.0, 0.0, 0.0))
    moves = [arg for axis, v in zip("xy", values.split(","))
             for arg in ("--translate", f"b:{axis}={v}")]
    code, _, err = sweep([a, b, *moves, "--out", tmp_path / "s"], capsys)
    one_line(code, err, exits.BAD_INPUT, "more than the 100,000")
    assert not (tmp_path / "s").exists()
