"""The shipped demo: a small capacitive proximity-sensor head of our own design.

On a board face (z = 0, the board itself is not meshed) sit two sense pads either side of a drive
pad, a guard ring framing them, and a grounded lid (a box open at the bottom) over everything.
All conductors are zero-thickness sheets; lengths in millimetres. The mesh is deterministic:
tools/make_demo.py writes meshes/sensor_head.msh from it byte for byte.
"""


import meshio
import numpy as np

from bem3d.base.files import atomic_path
from bem3d.geometry import shapes

LENGTH_UNIT = "mm"
#: The drive pad is excited; sense pads, guard and lid are held at 0 V.
VOLTS = {"drive": 5.0}
#: Height (mm) of the field slice the demo pictures: just above the pads, inside the lid.
SLICE_Z_MM = 0.25

# Layout in mm. Gaps are real clearances between conductors, never zero.
PAD_Y = 5.0             # pad length along y
SENSE_X = 4.0           # sense pad width along x
DRIVE_X = 3.0           # drive pad width along x
PAD_GAP = 0.75          # between the drive pad and each sense pad
GUARD_GAP = 1.0         # from the pads to the guard's inner edge
GUARD_WIDTH = 1.5       # width of the guard ring's strips
LID_GAP = 1.5           # from the guard's outer edge to the lid walls
LID_LIFT = 0.5          # from the board face up to the lid walls' lower rim
LID_HEIGHT = 4.0        # lid wall height
GRADING = 0.5           # panels shrink towards plate edges, where the charge density peaks


def conductors():
    """The demo conductors in matrix order: [(name, points (m, 3) in mm, triangles (n, 3))]."""
    sense_offset = 0.5 * DRIVE_X + PAD_GAP + 0.5 * SENSE_X
    pads = [
        ("sense_a", shapes.rectangle(SENSE_X, PAD_Y, 12, 14, GRADING, (-sense_offset, 0.0, 0.0))),
        ("sense_b", shapes.rectangle(SENSE_X, PAD_Y, 12, 14, GRADING, (sense_offset, 0.0, 0.0))),
        ("drive", shapes.rectangle(DRIVE_X, PAD_Y, 9, 14, GRADING, (0.0, 0.0, 0.0))),
    ]
    inner_x = 2.0 * (sense_offset + 0.5 * SENSE_X + GUARD_GAP)
    inner_y = PAD_Y + 2.0 * GUARD_GAP
    outer_x, outer_y = inner_x + 2.0 * GUARD_WIDTH, inner_y + 2.0 * GUARD_WIDTH
    guard = shapes.rectangular_ring(outer_x, outer_y, inner_x, inner_y, 3, 24, 12, GRADING)
    lid_x, lid_y = outer_x + 2.0 * LID_GAP, outer_y + 2.0 * LID_GAP
    lid = shapes.open_box(lid_x, lid_y, LID_HEIGHT, 24, GRADING,
                          (0.0, 0.0, LID_LIFT + 0.5 * LID_HEIGHT))
    return [(name, p, t) for name, (p, t) in pads + [("guard", guard), ("lid", lid)]]


def build_mesh(parts):
    """A meshio.Mesh with one triangle block per conductor; conductor k is surface entity k + 1
    and physical group k + 1, named after it."""
    points, cells, node_tags, offset = [], [], [], 0
    for k, (_, p, t) in enumerate(parts):
        points.append(p)
        cells.append(("triangle", t + offset))
        # Gmsh 4.1 keeps physical groups on entities, so every node needs its (dim, entity) pair.
        node_tags.append(np.tile([2, k + 1], (len(p), 1)))
        offset += len(p)
    tags = [np.full(len(t), k + 1, dtype=np.int64) for k, (_, _, t) in enumerate(parts)]
    return meshio.Mesh(
        np.concatenate(points), cells,
        point_data={"gmsh:dim_tags": np.concatenate(node_tags)},
        cell_data={"gmsh:physical": tags, "gmsh:geometrical": [tag.copy() for tag in tags]},
        field_data={name: np.array([k + 1, 2]) for k, (name, _, _) in enumerate(parts)},
    )


def write_demo_mesh(out):
    """Write the demo as ASCII Gmsh 4.1 to out atomically, once it reads back with its names and tags."""
    mesh = build_mesh(conductors())
    with atomic_path(out) as tmp:
        meshio.write(tmp, mesh, file_format="gmsh", binary=False)
        back = meshio.read(tmp, file_format="gmsh")
        names = {name: int(v[0]) for name, v in back.field_data.items()}
        expected = {name: int(v[0]) for name, v in mesh.field_data.items()}
        read_tags = np.concatenate(back.cell_data["gmsh:physical"])
        if names != expected or not np.array_equal(read_tags,
                                                   np.concatenate(mesh.cell_data["gmsh:physical"])):
            raise RuntimeError(f"{tmp} did not read back with the physical groups written")
