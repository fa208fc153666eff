"""bem3d sweep: moves, summary, resuming after a kill, failures, cache, local pool vs Dask.

References: the parallel-plate closed form C = eps0 A / d, exceeded by finite plates because of
the fringing field (Kirchhoff 1877, from memory); capacitance scales linearly with size (closed
form: the Laplace equation has no length scale); rotations against scipy's Rotation; every other
number against direct `extract` / `solve_panels` runs of independently built meshes.
"""

import argparse
import csv
import json
import os
import signal
import subprocess
import sys

import meshio
import numpy as np
import pytest
from conftest import default_sigint, make_panels
from scipy.spatial.transform import Rotation

from bem3d._cli.sweep import add_parser
from bem3d._cli.sweep import run as command
from bem3d.api import extract
from bem3d.base.constants import EPS0
from bem3d.base.errors import Bem3dError
from bem3d.geometry import shapes
from bem3d.geometry.moves import move_conductors
from bem3d.model import Model
from bem3d.post.sweep.run import SweepRequest, run_sweep
from bem3d.post.sweep.syntax import parse_entry, parse_move, parse_values
from bem3d.solve.conductors import solve_panels

PLATE = dict(lx=1.0, ly=1.0, nx=8, ny=8, grading=0.5)      # 128 panels
GAP0 = 0.1                                                  # mm, top plate's height at rest

SCRIPT = """
import argparse, sys
from bem3d._cli import sweep
if __name__ == "__main__":
    parser = argparse.ArgumentParser(prog="bem3d")
    sweep.add_parser(parser.add_subparsers(dest="command"))
    sys.exit(sweep.run(parser.parse_args(sys.argv[1:])))
"""


def parse(*argv):
    parser = argparse.ArgumentParser(prog="bem3d")
    add_parser(parser.add_subparsers(dest="command"))
    return parser.parse_args(["sweep", *map(str, argv)])


def write_mesh(path, shape):
    meshio.write(path, meshio.Mesh(shape[0], [("triangle", shape[1])]))
    return path


def plate(z):
    return shapes.rectangle(**PLATE, center=(0.0, 0.0, z))


@pytest.fixture
def plates(tmp_path):
    return (write_mesh(tmp_path / "bottom.vtu", plate(0.0)),
            write_mesh(tmp_path / "top.vtu", plate(GAP0)))


def summary(folder):
    with open(folder / "summary.csv", newline="") as fh:
        return list(csv.DictReader(fh))


def events(text):
    return [json.loads(line) for line in text.splitlines() if line.startswith("{")]


def solved(evts):
    return [e["label"] for e in evts if e["event"] == "case" and e["how"] == "solved"]


def test_value_and_move_syntax():
    assert parse_values("0.1:0.4:4", "x") == (0.1, 0.2, 0.3, 0.4)
    assert parse_values("-1,0,2.5", "x") == (-1.0, 0.0, 2.5)
    move = parse_move("rotate", "lid,pad:1,1,0@0,0,2=-10,10")
    assert move.names == ("lid", "pad") and move.pivot == (0.0, 0.0, 2.0)
    np.testing.assert_allclose(move.axis, np.array([1, 1, 0]) / np.sqrt(2))
    assert move.column("mm") == "rotate_1 1 0[lid+pad]_deg"
    assert parse_move("scale", "*=0.5,2").column("mm") == "scale[all]"
    assert parse_entry("a:b") == ("mutual", "a", "b")
    for kind, text in [("translate", "top=1"), ("translate", "top:q=1"),
                       ("translate", "top:z@0,0,0=1"), ("translate", "top:z=1:2"),
                       ("translate", "top:z=0:1:1"), ("rotate", "top:0,0,0=5"),
                       ("scale", "top=0,1"), ("scale", "=1")]:
        with pytest.raises(Bem3dError):
            parse_move(kind, text)
    with pytest.raises(Bem3dError):
        parse_entry("resistance:a:b")


def test_moves_touch_only_the_named_conductors():
    panels = make_panels(("a", shapes.octahedral_sphere(0.5, 3)),
                         ("b", shapes.box(0.4, 0.3, 0.2, 3, center=(2.0, 0.0, 0.0))))
    is_b = panels.owner == 1
    axis = np.array([1.0, 2.0, -0.5]) / np.linalg.norm([1.0, 2.0, -0.5])
    pivot = np.array([0.3, -1.0, 2.0])
    moved = move_conductors(panels, ("b",), "rotate", 37.0, axis, pivot)
    # general-purpose library: scipy's rotation by the rotation vector 37 deg * axis
    expect = Rotation.from_rotvec(np.radians(37.0) * axis).apply(
        panels.vertices[is_b].reshape(-1, 3) - pivot) + pivot
    np.testing.assert_allclose(moved.vertices[is_b].reshape(-1, 3), expect, atol=1e-14)
    np.testing.assert_array_equal(moved.vertices[~is_b], panels.vertices[~is_b])
    # about its own area centroid, a box turns in place (common practice, no source)
    turned = move_conductors(panels, ("b",), "rotate", 90.0, (0.0, 0.0, 1.0))
    np.testing.assert_allclose(turned.centroids[is_b].mean(axis=0),
                               panels.centroids[is_b].mean(axis=0), atol=1e-14)
    grown = move_conductors(panels, ("*",), "scale", 2.0, pivot=(0.0, 0.0, 0.0))
    np.testing.assert_allclose(grown.areas, 4.0 * panels.areas, rtol=1e-14)
    shifted = move_conductors(panels, ("a",), "translate", 0.25, (0.0, 0.0, 1.0))
    np.testing.assert_allclose(shifted.vertices[~is_b] - panels.vertices[~is_b],
                               np.broadcast_to([0.0, 0.0, 0.25], shifted.vertices[~is_b].shape))
    with pytest.raises(Bem3dError):
        move_conductors(panels, ("c",), "translate", 1.0, (1.0, 0.0, 0.0))


def test_gap_sweep_is_monotone_and_equals_direct_extract(plates, tmp_path, capsys):
    out = tmp_path / "gap"
    code = command(parse(*plates, "--units", "mm", "--translate", "top:z=0:0.6:4",
                         "--workers", 1, "--out", out))
    assert code == 0
    rows = summary(out)
    assert [r["status"] for r in rows] == ["ok"] * 4
    assert [float(r["translate_z[top]_mm"]) for r in rows] == [0.0, 0.2, 0.4, 0.6]
    coupling = np.array([float(r["mutual_F:bottom:top"]) for r in rows])
    own = np.array([float(r["maxwell_F:top:top"]) for r in rows])
    # farther apart, less coupling and less capacitance with the other plate grounded
    # (common practice, no source)
    assert np.all(np.diff(coupling) < 0) and np.all(np.diff(own) < 0)
    # parallel-plate closed form eps0 A / d, plus fringing: 1 < C / (eps0 A / d) < 1.5 at d = a/10
    assert 1.0 < coupling[0] / (EPS0 * 1e-6 / 0.1e-3) < 1.5
    # at rest the 0.1 mm gap is smaller than the plates' panels (about 0.22 mm): that case,
    # and only the ones this close, carries the under-resolution warning, in mm, on the
    # console and in summary.csv
    assert "under-resolved" in rows[0]["warnings"] and "0.1 mm" in rows[0]["warnings"]
    assert [r["warnings"] for r in rows[2:]] == ["", ""]
    err = capsys.readouterr().err
    assert f"case {rows[0]['label']}: warning: " in err
    assert f"case {rows[-1]['label']}: warning: " not in err
    for k, shift in enumerate([0.0, 0.2, 0.4, 0.6]):
        (tmp_path / f"direct{k}").mkdir()
        moved = write_mesh(tmp_path / f"direct{k}" / "top.vtu", plate(GAP0 + shift))
        direct = extract(Model(meshes=[plates[0], moved], length_unit="mm"))
        # the sweep moves the panels in metres, the direct run reads moved coordinates:
        # rounding differs at 1e-16, which can move a pair across a quadrature tier (~1e-10)
        assert float(rows[k]["mutual_F:bottom:top"]) == pytest.approx(direct.mutual[0, 1], rel=1e-9)
        assert float(rows[k]["maxwell_F:bottom:bottom"]) == pytest.approx(direct.maxwell[0, 0],
                                                                          rel=1e-9)
        folder = out / "cases" / rows[k]["label"]
        assert {p.name for p in folder.iterdir()} == {"case.json", "result.json", "capacitance.csv",
                                                       "bem3d_capacitance.cir", "surface.vtp"}
    assert (out / "summary.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_sweep_from_python_prints_nothing_and_matches_the_command(plates, tmp_path, capsys):
    model = Model(meshes=list(plates), length_unit="mm", volts={"top": 1.0})
    request = SweepRequest(model=model, moves=[parse_move("translate", "top:z=0,0.3")],
                           workers=1, out=tmp_path / "api")
    seen = []
    outcome = run_sweep(request, on_event=seen.append)
    assert capsys.readouterr() == ("", "")
    assert [e["event"] for e in seen] == ["start", "case", "case", "done"]
    assert not outcome.interrupted and (outcome.ok, outcome.failed, outcome.solved) == (2, 0, 2)
    assert [r["label"] for r in outcome.records] == [r["label"] for r in outcome.rows]
    assert [{k: str(v) for k, v in r.items()} for r in outcome.rows] == summary(tmp_path / "api")
    assert command(parse(*plates, "--units", "mm", "--volts", "top=1", "--translate",
                         "top:z=0,0.3", "--workers", 1, "--out", tmp_path / "cli")) == 0
    for row, cli in zip(outcome.rows, summary(tmp_path / "cli")):
        # same panels, same code, same thread count: the same numbers
        for column in ("mutual_F:bottom:top", "maxwell_F:top:top", "energy_J"):
            assert row[column] == cli[column]
    for k, shift in enumerate([0.0, 0.3]):
        # W = 1/2 V^T C V with V = (0, 1): half the top plate's Maxwell entry (closed form)
        c = np.array(outcome.records[k]["maxwell_capacitance_F"])
        assert outcome.records[k]["energy_J"] == pytest.approx(0.5 * c[1, 1], rel=1e-12)
        direct = solve_panels(make_panels(("bottom", plate(0.0)),
                                          ("top", plate(GAP0 + shift)))).maxwell * 1e-3
        # metres vs millimetres: the same panels scaled, so equal up to tier flips (~1e-10)
        assert c[0, 1] == pytest.approx(direct[0, 1], rel=1e-9)


def test_potential_change_reuses_cached_matrices(plates, tmp_path, capsys):
    out = tmp_path / "gap"
    assert command(parse(*plates, "--translate", "top:z=0,0.2", "--workers", 1, "--out", out,
                         "--json-lines")) == 0
    first = events(capsys.readouterr().out)
    assert len(solved(first)) == 2
    assert command(parse(*plates, "--translate", "top:z=0,0.2", "--workers", 1, "--out", out,
                         "--json-lines", "--volts", "top=2")) == 0
    second = events(capsys.readouterr().out)
    assert solved(second) == []
    assert sorted(e["how"] for e in second if e["event"] == "case") == ["cached", "cached"]
    for row in summary(out):
        record = json.loads((out / "cases" / row["label"] / "result.json").read_text())
        c = np.array(record["maxwell_capacitance_F"])
        assert record["potentials_V"] == [0.0, 2.0]
        # W = 1/2 V^T C V (closed form)
        assert float(row["energy_J"]) == pytest.approx(0.5 * 4.0 * c[1, 1], rel=1e-8)


def test_ground_plane_and_floating_conductor_follow_extract(plates, tmp_path, capsys):
    out = tmp_path / "gap"
    options = ["--units", "mm", "--ground-plane", "-0.3", "--floating", "top"]
    argv = [*plates, *options, "--translate", "top:z=0,0.3", "--workers", 1, "--out", out]
    assert command(parse(*argv, "--volts", "bottom=1")) == 0
    rows = summary(out)
    for k, shift in enumerate([0.0, 0.3]):
        (tmp_path / f"direct{k}").mkdir()
        moved = write_mesh(tmp_path / f"direct{k}" / "top.vtu", plate(GAP0 + shift))
        direct = extract(Model(meshes=[plates[0], moved], length_unit="mm",
                               ground_plane_z=-0.3, floating=["top"]))
        assert direct.names == ("bottom",)
        assert float(rows[k]["maxwell_F:bottom:bottom"]) == pytest.approx(direct.maxwell[0, 0],
                                                                          rel=1e-9)
    before = [json.loads((out / "cases" / r["label"] / "result.json").read_text()) for r in rows]
    assert command(parse(*argv, "--volts", "bottom=2", "--json-lines")) == 0
    assert solved(events(capsys.readouterr().out)) == []
    for row, old in zip(rows, before):
        new = json.loads((out / "cases" / row["label"] / "result.json").read_text())
        # the floating plate's potential is linear in the driven one's (closed form)
        assert 0 < old["floating_potentials_V"]["top"] < 1
        assert new["floating_potentials_V"]["top"] == pytest.approx(
            2 * old["floating_potentials_V"]["top"], rel=1e-12)


def test_dielectric_body_stays_while_a_conductor_moves(plates, tmp_path, capsys):
    slab = write_mesh(tmp_path / "slab.vtu", shapes.box(0.8, 0.8, 0.04, 4, center=(0, 0, 0.05)))
    out = tmp_path / "gap"
    assert command(parse(*plates, "--units", "mm", "--dielectric", f"{slab}=4",
                         "--translate", "top:z=0,0.2", "--workers", 1, "--out", out)) == 0
    rows = summary(out)
    for k, shift in enumerate([0.0, 0.2]):
        (tmp_path / f"direct{k}").mkdir()
        moved = write_mesh(tmp_path / f"direct{k}" / "top.vtu", plate(GAP0 + shift))
        direct = extract(Model(meshes=[plates[0], moved], length_unit="mm",
                               dielectrics=[(slab, 4.0)]))
        assert float(rows[k]["mutual_F:bottom:top"]) == pytest.approx(direct.mutual[0, 1],
                                                                      rel=1e-9)
    # the slab adds coupling (a dielectric raises capacitance: Thomson's theorem, from memory)
    plain = solve_panels(make_panels(("bottom", plate(0.0)), ("top", plate(GAP0))))
    assert float(rows[0]["mutual_F:bottom:top"]) > 1.05 * plain.mutual[0, 1] * 1e-3


def test_broken_case_is_reported_and_the_others_finish(plates, tmp_path, capsys):
    out = tmp_path / "gap"
    # -0.1 mm puts the top plate onto the bottom one: those conductors touch
    code = command(parse(*plates, "--units", "mm", "--translate", "top:z=0.2,-0.1,0.4",
                         "--workers", 1, "--out", out))
    assert code == 4          # exits.CASES_FAILED
    rows = summary(out)
    assert [r["status"] for r in rows] == ["ok", "failed", "ok"]
    assert "touch" in rows[1]["error"] and rows[1]["mutual_F:bottom:top"] == ""
    assert json.loads((out / "cases" / rows[1]["label"] / "case.json").read_text())["error"]
    assert "failed" in capsys.readouterr().err


def test_each_file_is_a_case_and_a_bad_file_fails_alone(plates, tmp_path, capsys):
    cases = tmp_path / "variants"
    cases.mkdir()
    write_mesh(cases / "ball.vtu", shapes.octahedral_sphere(1.0, 6))       # 288 panels
    (cases / "broken.vtu").write_text("not a mesh\n")
    (cases / "pair.toml").write_text(f'meshes = ["{plates[0]}", "{plates[1]}"]\n'
                                     'relative_permittivity = 3.0\n')
    out = tmp_path / "each"
    code = command(parse("--each", cases / "*.vtu", cases / "pair.toml", "--workers", 1,
                         "--out", out))
    assert code == 4          # exits.CASES_FAILED
    rows = {r["input"].rsplit("/", 1)[-1]: r for r in summary(out)}
    assert rows["broken.vtu"]["status"] == "failed" and "cannot read" in rows["broken.vtu"]["error"]
    # isolated sphere 4 pi eps0 a (closed form); 288 flat panels are 1.4% low
    assert float(rows["ball.vtu"]["maxwell_F:ball:ball"]) == pytest.approx(
        4 * np.pi * EPS0, rel=2e-2)
    # the model file's permittivity is used: eps_r scales every entry (closed form)
    direct = solve_panels(make_panels(("bottom", plate(0.0)), ("top", plate(GAP0))))
    assert float(rows["pair.toml"]["mutual_F:bottom:top"]) == pytest.approx(
        3.0 * direct.mutual[0, 1], rel=1e-9)


def test_scaling_every_conductor_scales_the_matrix(plates, tmp_path, capsys):
    out = tmp_path / "scale"
    assert command(parse(*plates, "--scale", "*=1,2.5", "--workers", 1, "--out", out)) == 0
    small, big = summary(out)
    # capacitance is proportional to size (closed form); tier flips at thresholds ~1e-10
    for column in ("mutual_F:bottom:top", "maxwell_F:top:top"):
        assert float(big[column]) == pytest.approx(2.5 * float(small[column]), rel=1e-9)


def _run_until(argv, stop_after, sig, cwd):
    """Start a sweep in a new process group; send sig after `stop_after` solved cases."""
    proc = subprocess.Popen([sys.executable, "-c", SCRIPT, "sweep", *map(str, argv),
                             "--json-lines"], stdout=subprocess.PIPE, text=True, cwd=cwd,
                            start_new_session=True, preexec_fn=default_sigint)
    lines = []
    for line in proc.stdout:
        lines.append(line)
        if len(solved(events("".join(lines)))) == stop_after:
            if sig == signal.SIGKILL:
                os.killpg(proc.pid, sig)          # the process group this test started
            else:
                proc.send_signal(sig)
            break
    lines += proc.stdout.readlines()
    return proc.wait(timeout=60), events("".join(lines))


def finished(out):
    done = set()
    for record in (out / "cases").glob("*/case.json"):
        if json.loads(record.read_text())["status"] == "ok":
            done.add(record.parent.name)
    return done


def test_killed_and_interrupted_sweep_resumes_without_repeating(plates, tmp_path, capsys):
    out = tmp_path / "gap"
    argv = [*plates, "--units", "mm", "--translate", "top:z=0:0.7:8", "--workers", 1, "--out", out]
    code, first = _run_until(argv, 2, signal.SIGKILL, tmp_path)
    assert code == -signal.SIGKILL
    after_kill = finished(out)
    # at least 2 left, so that the next run is stopped half-way too
    assert set(solved(first)) == after_kill and 2 <= len(after_kill) <= 6
    code, second = _run_until(argv, 1, signal.SIGINT, tmp_path)
    assert code == 130
    assert second[-1]["event"] == "done" and second[-1]["interrupted"]
    skipped = {e["label"] for e in second if e["event"] == "case" and e["how"] == "skipped"}
    assert skipped == after_kill
    after_interrupt = finished(out)
    assert after_interrupt == after_kill | set(solved(second)) and len(after_interrupt) < 8
    assert "not run" in {r["status"] for r in summary(out)}

    assert command(parse(*argv, "--json-lines")) == 0
    third = events(capsys.readouterr().out)
    assert {e["label"] for e in third if e.get("how") == "skipped"} == after_interrupt
    # Solver runs over the three runs: each case once, none repeated. (A case whose solve
    # ended just as a run stopped is finished from its cached matrices, without a solve.)
    runs = solved(first) + solved(second) + solved(third)
    cached = [e["label"] for e in third if e["event"] == "case" and e["how"] == "cached"]
    assert len(runs) + len(cached) == 8 and set(runs) | set(cached) == finished(out)
    assert len(finished(out)) == 8
    rows = summary(out)
    for k, row in enumerate(rows):
        shift = 0.1 * k
        direct = solve_panels(make_panels(("bottom", plate(0.0)),
                                          ("top", plate(GAP0 + shift)))).maxwell * 1e-3
        # metres vs millimetres: the same panels scaled, so equal up to tier flips (~1e-10)
        assert float(row["maxwell_F:bottom:top"]) == pytest.approx(direct[0, 1], rel=1e-9)


def test_dask_cluster_gives_the_numbers_of_the_local_pool(plates, tmp_path, capsys):
    distributed = pytest.importorskip("distributed")
    argv = [*plates, "--translate", "top:z=0:0.3:4", "--threads", 1]
    assert command(parse(*argv, "--workers", 2, "--out", tmp_path / "local")) == 0
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        assert command(parse(*argv, "--scheduler", cluster.scheduler_address, "--json-lines",
                             "--out", tmp_path / "dask")) == 0
    start = events(capsys.readouterr().out)[0]
    assert start["executor"] == "dask" and start["workers"] == 2
    local, remote = summary(tmp_path / "local"), summary(tmp_path / "dask")
    columns = [c for c in local[0] if c.startswith(("mutual_F", "maxwell_F"))]
    assert len(columns) == 6 and all(r["status"] == "ok" for r in local + remote)
    for a, b in zip(local, remote):
        for c in columns:
            # same panels, same code, one thread each: the same numbers
            assert float(b[c]) == pytest.approx(float(a[c]), rel=1e-12)


def test_bad_sweep_requests_are_errors(plates, tmp_path):
    for argv in [[*plates], [*plates, "--each", "--translate", "top:z=1"],
                 [*plates, "--translate", "lid:z=1"], [*plates, "--translate", "top:z=1",
                                                      "--entries", "top:lid"],
                 [*plates, "--translate", "top:z=1", "--volts", "lid=1"],
                 ["--each", tmp_path / "none*.vtu"]]:
        with pytest.raises(Bem3dError):
            command(parse(*argv, "--out", tmp_path / "bad"))
    assert not (tmp_path / "bad").exists()
