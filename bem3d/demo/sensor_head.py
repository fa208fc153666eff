"""The shipped demo: a small capacitive proximity-sensor head of our own design.

On a board face (z = 0, the board itself is not meshed) sit two sense pads either side of a drive
pad, a guard ring framing them, and a grounded lid (a box open at the bottom) over everything.
All conductors are zero-thickness sheets; lengths in millimetres. The mesh is deterministic:
tools/make_demo.py writes meshes/sensor_head.msh from it byte for byte.
"""


from bem3d.demo.gmsh_file import write_gmsh
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


def write_demo_mesh(out):
    """Write the demo as ASCII Gmsh 4.1 to out atomically."""
    write_gmsh(conductors(), out)
