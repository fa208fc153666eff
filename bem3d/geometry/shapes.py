"""Surface meshes of simple solids and plates, as (points (m, 3), triangles (n, 3)).

Corner order gives the normal by the right-hand rule; closed bodies have outward normals and flat
plates face +z. Used by the demo generator, the tests and the benchmarks. Lengths in whatever unit
is passed.
"""

import numpy as np


def _grid_triangles(m, index, n=None):
    """Triangles of an m x n grid of quads (n = m if omitted), corner (i, j) being point index(i, j).

    Each quad (i, j) becomes two triangles oriented like (+i) x (+j)."""
    tris = []
    for i in range(m):
        for j in range(m if n is None else n):
            a, b, c, d = index(i, j), index(i + 1, j), index(i + 1, j + 1), index(i, j + 1)
            tris += [(a, b, c), (a, c, d)]
    return np.array(tris, dtype=np.int64).reshape(-1, 3)


def octahedral_sphere(radius=1.0, m=16, center=(0.0, 0.0, 0.0)):
    """Sphere from an octahedron with each face cut into m^2 triangles: 8 m^2 panels.

    m = 16, 32, 64 give 2048, 8192, 32768 panels. Corners lie on the sphere."""
    axes = np.eye(3)
    points, tris, lookup = [], [], {}

    def point_id(key, xyz):
        if key not in lookup:
            lookup[key] = len(points)
            points.append(xyz)
        return lookup[key]

    for sx in (1, -1):
        for sy in (1, -1):
            for sz in (1, -1):
                a, b, c = sx * axes[0], sy * axes[1], sz * axes[2]
                if sx * sy * sz < 0:          # keep every face counter-clockwise from outside
                    b, c = c, b
                ids = {}
                for i in range(m + 1):
                    for j in range(m + 1 - i):
                        p = (a * (m - i - j) + b * i + c * j) / m
                        key = tuple(np.round(p * m).astype(int))
                        ids[i, j] = point_id(key, p / np.linalg.norm(p))
                for i in range(m):
                    for j in range(m - i):
                        tris.append((ids[i, j], ids[i + 1, j], ids[i, j + 1]))
                        if j + i + 1 < m:
                            tris.append((ids[i + 1, j], ids[i + 1, j + 1], ids[i, j + 1]))
    pts = np.array(points) * radius + np.asarray(center, float)
    return pts, np.array(tris, dtype=np.int64)


def graded_spacing(m, grading=0.0):
    """m + 1 nodes on [0, 1], symmetric about 1/2 and clustered towards both ends.

    s_i = (1 - g) t_i + g (1 - cos(pi t_i)) / 2 with t_i = i / m and g = grading in [0, 1]:
    g = 0 is uniform, g = 1 the Chebyshev-Lobatto points, whose end interval shrinks like 1/m^2.
    Edges of plates carry a singular charge density, so finer panels there pay off."""
    if m < 1 or not 0.0 <= grading <= 1.0:
        raise ValueError("graded_spacing needs m >= 1 and 0 <= grading <= 1")
    t = np.arange(m + 1) / m
    s = (1.0 - grading) * t + grading * 0.5 * (1.0 - np.cos(np.pi * t))
    s[0], s[-1] = 0.0, 1.0                    # exact ends, so neighbouring blocks share nodes
    return s


def _divisions(lengths, m):
    """Quads along each length: m along the longest, the others in proportion (at least 1)."""
    lengths = np.asarray(lengths, float)
    return [max(1, int(round(m * length / lengths.max()))) for length in lengths]


def _box_faces(lx, ly, lz, m, grading, center, skip):
    """Faces of a box as in box(); faces listed in skip as (axis, side) are left out."""
    size = np.array([lx, ly, lz], float)
    counts = _divisions(size, m)
    nodes = [np.asarray(center, float)[a] + size[a] * (graded_spacing(counts[a], grading) - 0.5)
             for a in range(3)]
    return _lattice_faces(nodes, skip)


def lattice_box(xs, ys, zs):
    """Closed box whose faces are the tensor grids of the increasing node coordinates xs, ys,
    zs, outward normals: a board whose face lines up with the pads drawn on it."""
    return _lattice_faces([np.asarray(n, float) for n in (xs, ys, zs)], skip=())


def _lattice_faces(nodes, skip):
    """The faces of the box spanned by nodes (three increasing arrays), but those in skip as
    (axis, side); faces meeting at an edge share its points."""
    counts = [len(n) - 1 for n in nodes]
    points, lookup, tris = [], {}, []

    def point_id(ijk):
        # Lattice indices key the points, so faces meeting at an edge share its nodes.
        if ijk not in lookup:
            lookup[ijk] = len(points)
            points.append([nodes[a][ijk[a]] for a in range(3)])
        return lookup[ijk]

    for axis in range(3):
        for side in (-1, 1):
            if (axis, side) in skip:
                continue
            # Tangent axes (u, v) with e_u x e_v = side * e_axis, so the normal points out.
            u, v = (axis + 1) % 3, (axis + 2) % 3
            if side < 0:
                u, v = v, u
            fixed = 0 if side < 0 else counts[axis]

            def index(i, j, u=u, v=v, axis=axis, fixed=fixed):
                ijk = [0, 0, 0]
                ijk[axis], ijk[u], ijk[v] = fixed, i, j
                return point_id(tuple(ijk))

            tris.append(_grid_triangles(counts[u], index, counts[v]))
    return np.array(points, dtype=np.float64), np.concatenate(tris)


def box(lx, ly, lz, m, grading=0.0, center=(0.0, 0.0, 0.0)):
    """Closed rectangular box lx x ly x lz centred at center, outward normals.

    m quads along the longest edge and proportionally many along the others, nodes graded towards
    the edges by graded_spacing(., grading); every quad is split in 2 triangles. The unit cube with
    m = 16 has 6 * 2 * 16^2 = 3072 panels."""
    return _box_faces(lx, ly, lz, m, grading, center, skip=())


def open_box(lx, ly, lz, m, grading=0.0, center=(0.0, 0.0, 0.0)):
    """box() without its bottom face (z = center[2] - lz / 2): a lid, normals pointing outward."""
    return _box_faces(lx, ly, lz, m, grading, center, skip=((2, -1),))


def _plane_grid(xs, ys, z, keep=None):
    """Triangles on the tensor grid xs x ys in the plane z, normal +z; keep(i, j) selects quads."""
    nx, ny = len(xs) - 1, len(ys) - 1
    points, lookup, tris = [], {}, []

    def point_id(i, j):
        if (i, j) not in lookup:
            lookup[i, j] = len(points)
            points.append((xs[i], ys[j], z))
        return lookup[i, j]

    for i in range(nx):
        for j in range(ny):
            if keep is None or keep(i, j):
                a, b = point_id(i, j), point_id(i + 1, j)
                c, d = point_id(i + 1, j + 1), point_id(i, j + 1)
                tris += [(a, b, c), (a, c, d)]
    return np.array(points, dtype=np.float64), np.array(tris, dtype=np.int64).reshape(-1, 3)


def rectangle(lx, ly, nx, ny, grading=0.0, center=(0.0, 0.0, 0.0)):
    """Flat zero-thickness plate lx x ly in the plane z = center[2], normal +z: 2 nx ny panels.

    Nodes are graded towards the four edges by graded_spacing(., grading)."""
    cx, cy, cz = np.asarray(center, float)
    xs = cx + lx * (graded_spacing(nx, grading) - 0.5)
    ys = cy + ly * (graded_spacing(ny, grading) - 0.5)
    return _plane_grid(xs, ys, cz)


def rectangular_ring(outer_x, outer_y, inner_x, inner_y, n_width, n_x, n_y, grading=0.0,
                     center=(0.0, 0.0, 0.0)):
    """Flat rectangular frame (a guard ring) in the plane z = center[2], normal +z.

    The outer rectangle outer_x x outer_y minus a centred opening inner_x x inner_y. The frame is
    cut into 8 rectangular blocks on one tensor grid, so nodes match along their shared edges:
    n_width quads across each strip, n_x and n_y along the opening's x and y sides, each block
    graded towards its own edges. Panels: 2 ((2 n_width + n_x)(2 n_width + n_y) - n_x n_y)."""
    if not (0 < inner_x < outer_x and 0 < inner_y < outer_y):
        raise ValueError("rectangular_ring needs 0 < inner < outer in x and y")
    cx, cy, cz = np.asarray(center, float)

    def axis_nodes(c, outer, inner, n_inner):
        strip = 0.5 * (outer - inner)
        edge = strip * graded_spacing(n_width, grading)
        mid = inner * graded_spacing(n_inner, grading)
        lo = c - 0.5 * outer
        return np.concatenate([lo + edge, lo + strip + mid[1:], lo + strip + inner + edge[1:]])

    xs = axis_nodes(cx, outer_x, inner_x, n_x)
    ys = axis_nodes(cy, outer_y, inner_y, n_y)

    def in_frame(i, j):
        return not (n_width <= i < n_width + n_x and n_width <= j < n_width + n_y)

    return _plane_grid(xs, ys, cz, keep=in_frame)


def _stitch(inner, outer, t_inner, t_outer):
    """Triangles joining two closed rings of point ids whose angular positions (in turns) are
    t_inner and t_outer, both increasing from 0; counter-clockwise seen from +z."""
    tris, i, j = [], 0, 0
    n, m = len(inner), len(outer)
    while i < n or j < m:
        # Advance on the ring whose next node comes first in angle: keeps triangles compact.
        next_i = t_inner[i + 1] if i + 1 < n else 1.0 + t_inner[0]
        next_j = t_outer[j + 1] if j + 1 < m else 1.0 + t_outer[0]
        if j >= m or (i < n and next_i < next_j):
            tris.append((inner[i % n], outer[j % m], inner[(i + 1) % n]))
            i += 1
        else:
            tris.append((inner[i % n], outer[j % m], outer[(j + 1) % m]))
            j += 1
    return tris


def disk(radius, n_rings, grading=0.0, center=(0.0, 0.0, 0.0), normal_z=+1):
    """Zero-thickness flat circular disk in the plane z = center[2], normal normal_z * e_z.

    Ring radii r_k = radius ((1 - g) t + g sin(pi t / 2)), t = k / n_rings, g = grading in [0, 1]:
    rings crowd towards the rim, where a thin disk's charge density grows like
    1 / sqrt(radius^2 - r^2). Each ring gets about as many segments as makes its panels as long
    as they are wide (never fewer than the ring inside it), so the panel count rises with grading:
    n_rings = 20 gives 2,532 panels at g = 0, n_rings = 17 gives 2,442 at g = 0.5."""
    if n_rings < 1 or not 0.0 <= grading <= 1.0:
        raise ValueError("disk needs n_rings >= 1 and 0 <= grading <= 1")
    t = np.arange(n_rings + 1) / n_rings
    radii = radius * ((1.0 - grading) * t + grading * np.sin(0.5 * np.pi * t))
    cx, cy, cz = np.asarray(center, float)
    points, tris = [(cx, cy, cz)], []
    prev_ids, prev_turns, count = np.array([0]), np.array([0.0]), 0
    for k in range(1, n_rings + 1):
        width = radii[k] - radii[k - 1]
        count = max(count, 6, int(np.ceil(2.0 * np.pi * radii[k] / width)))
        # Offset each ring by half a segment so stitched triangles are not sheared one way.
        turns = (np.arange(count) + 0.5 * (k % 2)) / count
        ids = len(points) + np.arange(count)
        angle = 2.0 * np.pi * turns
        points += list(zip(cx + radii[k] * np.cos(angle), cy + radii[k] * np.sin(angle),
                           np.full(count, cz)))
        if k == 1:
            tris += [(0, ids[j], ids[(j + 1) % count]) for j in range(count)]
        else:
            tris += _stitch(prev_ids, ids, prev_turns, turns)
        prev_ids, prev_turns = ids, turns
    tris = np.array(tris, dtype=np.int64)
    if normal_z < 0:
        tris = tris[:, ::-1].copy()
    return np.array(points, dtype=np.float64), tris


def merge(*shapes):
    """One (points, triangles) pair from several, triangle indices offset to the joined points."""
    points, tris, offset = [], [], 0
    for p, t in shapes:
        points.append(np.asarray(p, np.float64))
        tris.append(np.asarray(t, np.int64) + offset)
        offset += len(p)
    return np.concatenate(points), np.concatenate(tris)
