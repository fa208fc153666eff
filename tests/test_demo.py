"""The shipped demo mesh is what the generator makes (reproducible), and reads as five conductors."""

from pathlib import Path

import meshio
import numpy as np

from bem3d.demo.sensor_head import write_demo_mesh
from bem3d.mesh_io.read import read_conductors

SHIPPED = Path(__file__).resolve().parent.parent / "meshes" / "sensor_head.msh"


def test_shipped_mesh_matches_generator(tmp_path):
    fresh = tmp_path / "sensor_head.msh"
    write_demo_mesh(fresh)
    a, b = meshio.read(SHIPPED), meshio.read(fresh)
    np.testing.assert_array_equal(a.points, b.points)
    np.testing.assert_array_equal(np.concatenate([c.data for c in a.cells]),
                                  np.concatenate([c.data for c in b.cells]))
    assert {k: list(v) for k, v in a.field_data.items()} == {k: list(v) for k, v in b.field_data.items()}


def test_shipped_mesh_reads_as_named_conductors():
    panels, warnings = read_conductors(SHIPPED, units="mm")
    assert panels.names == ("sense_a", "sense_b", "drive", "guard", "lid")
    assert 2000 <= len(panels) <= 4000 and not warnings


def test_stack_demo_end_to_end(tmp_path, capsys):
    # The keypad demo through the command line: the files it promises, and a touch signal that
    # behaves as touch sensors do (common practice, no source): key_1's capacitance to ground
    # rises as the grounded finger comes near, and falls off with the gap; the neighbour key
    # sees a small fraction of it.
    from conftest import run_cli

    from bem3d.demo import keypad
    from bem3d.model import load_model

    folder = tmp_path / "stack"
    code, out, err = run_cli(["demo", "--stack", folder], capsys)
    assert code == 0, err
    assert "touch signal" in out and "caution:" in out
    for name in ("keypad.msh", "keys.msh", "board.msh", "cover.msh", "keypad.toml",
                 "touch_signal.csv", "untouched/result.json", "finger_sweep/summary.csv"):
        assert (folder / name).is_file(), name
    rows = np.loadtxt(folder / "touch_signal.csv", delimiter=",", skiprows=1, ndmin=2)
    np.testing.assert_array_equal(rows[:, 0], keypad.FINGER_GAPS)
    touch, neighbour, loss = rows[:, 2], rows[:, 3], rows[:, 4]
    assert np.all(touch > 0) and np.all(np.diff(touch) < 0)
    assert np.all(np.abs(neighbour) < 0.1 * touch[0])
    assert loss[0] > 0
    model = load_model(folder / "keypad.toml")
    assert model.lossy and model.ground_plane_z == 0.0 and len(model.dielectrics) == 2
    # a re-run replaces the demo's own results (the finished sweep cases are kept)
    code, _, err = run_cli(["demo", "--stack", folder], capsys)
    assert code == 0, err
    assert np.array_equal(np.loadtxt(folder / "touch_signal.csv", delimiter=",", skiprows=1,
                                     ndmin=2), rows)


def test_demo_refuses_a_folder_of_other_results_without_force(tmp_path, capsys):
    from conftest import run_cli

    (tmp_path / "result.json").write_text("{}\n")
    (tmp_path / "untouched").mkdir()
    (tmp_path / "untouched" / "result.json").write_text("{}\n")
    for argv in (["demo", tmp_path], ["demo", "--stack", tmp_path]):
        code, _, err = run_cli(argv, capsys)
        assert code == 2 and len(err.strip().splitlines()) == 1, err
        assert (tmp_path / "result.json").read_text() == "{}\n"
