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
