"""The stack-up demo: a two-key capacitive touch keypad of our own design.

A laminate board (FR-4-like, relative permittivity about 4.4, loss tangent about 0.02 — common
practice, no source) lies on a ground layer, taken as the infinite grounded plane z = 0. Two
square copper keys sit on its top face as zero-thickness sheets, under a plastic cover
(relative permittivity about 3, loss tangent about 0.01 — common practice, no source) that lies
on the board. A grounded finger phantom, a 10 mm ball, hovers over key_1. The touch signal is
the rise of key_1's capacitance to ground as the finger comes near.

The board's top face, the cover's bottom face and the keys are cut from one lattice, so the
faces they share are meshed alike. Lengths in millimetres.
"""

import numpy as np

from bem3d.base.files import write_text
from bem3d.demo.gmsh_file import write_gmsh
from bem3d.geometry import shapes

LENGTH_UNIT = "mm"
BOARD = {"relative_permittivity": 4.4, "loss_tangent": 0.02}
COVER = {"relative_permittivity": 3.0, "loss_tangent": 0.01}
#: Where the conductance is given: touch controllers scan at 0.1-1 MHz (common practice, no
#: source).
FREQUENCY_HZ = 1e6
#: key_1 is driven; key_2 and the finger are at 0 V (the finger through the body to ground).
VOLTS = {"key_1": 3.3}

LENGTH, WIDTH = 30.0, 16.0      # board and cover outline
BOARD_THICKNESS = 1.6
COVER_THICKNESS = 1.0
KEY = 8.0                       # square key side
PITCH = 12.0                    # centre to centre of the keys, along x
FINGER_RADIUS = 5.0
#: Gaps (mm) between the cover's top face and the finger that the demo sweeps; the mesh file
#: has the finger at the first.
FINGER_GAPS = (1.0, 2.0, 4.0, 8.0)
#: Lattice cells per mm across the keys and elsewhere; cells shrink towards every key edge.
KEY_CELLS_PER_MM, CELLS_PER_MM = 1.25, 0.5
FINGER_DIVISIONS = 8


def _nodes(stops, densities):
    """Increasing lattice nodes through the stops, interval k divided at densities[k] cells
    per mm, graded towards both ends (where the charge density of sheet edges peaks)."""
    nodes = [stops[0]]
    for lo, hi, density in zip(stops[:-1], stops[1:], densities):
        n = max(2, int(round(density * (hi - lo))))
        nodes.extend(lo + (hi - lo) * shapes.graded_spacing(n, 0.5)[1:])
    return np.array(nodes)


def _lattice(fineness=1.0):
    key, rest = fineness * KEY_CELLS_PER_MM, fineness * CELLS_PER_MM
    key_edges = [c + s * KEY / 2 for c in (-PITCH / 2, PITCH / 2) for s in (-1, 1)]
    return (_nodes([-LENGTH / 2, *key_edges, LENGTH / 2], [rest, key, rest, key, rest]),
            _nodes([-WIDTH / 2, -KEY / 2, KEY / 2, WIDTH / 2], [rest, key, rest]))


def key_centres():
    """(x, y) of key_1 and key_2 in mm."""
    return [(-PITCH / 2, 0.0), (PITCH / 2, 0.0)]


def board(fineness=1.0):
    """The board as (points, triangles): a closed box from z = 0 to BOARD_THICKNESS.
    fineness multiplies the lattice density (the demo's mesh at 1)."""
    xs, ys = _lattice(fineness)
    return shapes.lattice_box(xs, ys, [0.0, BOARD_THICKNESS])


def cover(fineness=1.0):
    """The cover as (points, triangles), lying on the board."""
    xs, ys = _lattice(fineness)
    return shapes.lattice_box(xs, ys, [BOARD_THICKNESS, BOARD_THICKNESS + COVER_THICKNESS])


def keys(fineness=1.0):
    """[(name, points, triangles)] of the keys: the board's top-face triangles inside each
    key, normals up."""
    points, tris = board(fineness)
    corners = points[tris]
    centroids = corners.mean(axis=1)
    on_top = np.abs(centroids[:, 2] - BOARD_THICKNESS) < 1e-9
    parts = []
    for k, (x, y) in enumerate(key_centres()):
        inside = (on_top & (np.abs(centroids[:, 0] - x) < KEY / 2)
                  & (np.abs(centroids[:, 1] - y) < KEY / 2))
        used, t = np.unique(tris[inside], return_inverse=True)
        parts.append((f"key_{k + 1}", points[used], t.reshape(-1, 3)))
    return parts


def finger(gap=FINGER_GAPS[0], fineness=1.0):
    """The finger phantom (points, triangles) over key_1, gap mm above the cover."""
    x, y = key_centres()[0]
    z = BOARD_THICKNESS + COVER_THICKNESS + gap + FINGER_RADIUS
    divisions = max(2, int(round(fineness * FINGER_DIVISIONS)))
    return shapes.octahedral_sphere(FINGER_RADIUS, divisions, center=(x, y, z))


MODEL_FILE = f"""# Two-key touch keypad on a stack-up (bem3d demo; lengths in mm)
length_unit = "mm"
meshes = ["keypad.msh"]            # key_1, key_2 and the finger
ground_plane_z = 0.0            # the ground layer under the board
frequency_Hz = {FREQUENCY_HZ:g}

[[dielectric]]
mesh = "board.msh"
relative_permittivity = {BOARD['relative_permittivity']}
loss_tangent = {BOARD['loss_tangent']}

[[dielectric]]
mesh = "cover.msh"
relative_permittivity = {COVER['relative_permittivity']}
loss_tangent = {COVER['loss_tangent']}

[volts]
key_1 = {VOLTS['key_1']}

[output]
folder = "touched"
spice_name = "keypad"
"""


def write_files(folder):
    """Write keypad.msh (keys and finger), keys.msh (the keys alone), board.msh, cover.msh and
    keypad.toml into folder (which exists); returns the model file's path."""
    write_gmsh(keys() + [("finger", *finger())], folder / "keypad.msh")
    write_gmsh(keys(), folder / "keys.msh")
    write_gmsh([("board", *board())], folder / "board.msh")
    write_gmsh([("cover", *cover())], folder / "cover.msh")
    model = folder / "keypad.toml"
    write_text(model, MODEL_FILE)
    return model
