"""Generate the shipped demo mesh: a small capacitive proximity-sensor head of our own design.

On a board face (z = 0, the board itself is not meshed) sit two sense pads either side of a drive
pad, a guard ring framing them, and a grounded lid (a box open at the bottom) over everything.
All conductors are zero-thickness sheets except the lid; lengths in millimetres (run the solver
with `--units mm`). The output is deterministic, so rerunning reproduces the file byte for byte.

    python tools/make_demo.py [--out meshes/sensor_head.msh]
"""

import argparse
import os
import tempfile
from pathlib import Path

import meshio
import numpy as np

from bem3d import shapes

DEFAULT_OUT = Path(__file__).resolve().parent.parent / "meshes" / "sensor_head.msh"

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


def write_checked(mesh, out):
    """Write mesh as ASCII Gmsh 4.1 to out atomically, once it reads back with its names and tags."""
    out = Path(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(suffix=".msh", dir=out.parent)
    os.close(fd)
    try:
        meshio.write(tmp, mesh, file_format="gmsh", binary=False)
        back = meshio.read(tmp, file_format="gmsh")
        names = {name: int(v[0]) for name, v in back.field_data.items()}
        expected = {name: int(v[0]) for name, v in mesh.field_data.items()}
        read_tags = np.concatenate(back.cell_data["gmsh:physical"])
        if names != expected or not np.array_equal(read_tags,
                                                   np.concatenate(mesh.cell_data["gmsh:physical"])):
            raise RuntimeError(f"{tmp} did not read back with the physical groups written")
        os.chmod(tmp, 0o644)            # mkstemp makes it private; the shipped file is public
        os.replace(tmp, out)
    finally:
        if os.path.exists(tmp):
            os.remove(tmp)


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=str(DEFAULT_OUT),
                        help="output .msh path (default: %(default)s)")
    args = parser.parse_args(argv)
    parts = conductors()
    write_checked(build_mesh(parts), args.out)
    for name, p, t in parts:
        lo, hi = p.min(axis=0), p.max(axis=0)
        print(f"{name:8s} {len(t):5d} panels  x {lo[0]:7.3f}..{hi[0]:7.3f}  "
              f"y {lo[1]:7.3f}..{hi[1]:7.3f}  z {lo[2]:6.3f}..{hi[2]:6.3f} mm")
    print(f"total    {sum(len(t) for _, _, t in parts):5d} panels -> {args.out}")


if __name__ == "__main__":
    main()
