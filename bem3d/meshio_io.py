"""Reading surface meshes into conductor panels, and checking them before a solve.

Any surface format meshio reads works (Gmsh .msh 2.2/4.1, STL, OBJ, PLY, OFF, VTK, VTU, Medit...).
Triangles are used as they are, quads are split in two, second-order cells keep their corner
nodes, and every other cell type is skipped with a warning. Coordinates become metres at the door.

Which panels form a conductor:
  * several files: one conductor per file, named by the file's stem;
  * one file: Gmsh physical groups (named by their physical names, ordered by tag), else the
    first array of ``TAG_KEYS`` holding two or more distinct integer values (named ``tag<N>``,
    ordered by tag), else the connected components of the surface (corners shared after merging
    coincident points), ordered by their lexicographically lowest corner and named ``c1, c2...``;
    a file that holds a single unnamed conductor names it by the file's stem.

Every problem with the input raises a subclass of ``Bem3dError`` whose one-line message starts
with the file it concerns.
"""

import os
import warnings
from pathlib import Path

import meshio
import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from .constants import LENGTH_UNITS
from .errors import MeshError, ModelError
from .geometry import Panels

#: Cell-data arrays that may assign panels to conductors, in order of preference (compared
#: case-insensitively). ``gmsh:geometrical`` is left out on purpose: it numbers CAD surfaces, so
#: a meshed cube would become six conductors; connected components are right for such files.
TAG_KEYS = ("gmsh:physical", "medit:ref", "cellentityids", "conductor", "tag")

#: Points closer than this fraction of the model size (bounding-box diagonal) are one point.
MERGE_REL = 1e-9
#: Panels of two conductors closer than max(MERGE_REL * model size, TOUCH_REL * panel radius) touch.
TOUCH_REL = 1e-6
#: Panels of two conductors closer than NEAR_REL * panel radius get a warning (mesh too coarse).
NEAR_REL = 1e-2
#: A panel whose doubled area is at most DEGENERATE_REL * (longest edge)^2 has zero area.
DEGENERATE_REL = 1e-10

#: Surface cell types used, with the number of corner nodes kept (meshio lists corners first).
_CORNERS = {"triangle": 3, "triangle6": 3, "triangle7": 3, "quad": 4, "quad8": 4, "quad9": 4}


def read_conductors(paths, units="m", names=None, check=True):
    """Panels (m) of all conductors in the mesh file(s) ``paths``, and a list of warnings.

    units: length unit of the files, a key of ``constants.LENGTH_UNITS``. names: optional
    conductor names, one per conductor found, replacing the automatic ones in the same order.
    check: run ``check_geometry`` (pass False to inspect a broken mesh with ``mesh_summary``).
    """
    paths = [Path(paths)] if isinstance(paths, (str, os.PathLike)) else [Path(p) for p in paths]
    if not paths:
        raise ModelError("no mesh files given")
    label = ", ".join(map(str, paths))
    if units not in LENGTH_UNITS:
        raise ModelError(f"{label}: unknown length unit {units!r}; valid units: "
                         + ", ".join(LENGTH_UNITS))
    scale = LENGTH_UNITS[units]
    out_warnings, vertices, owner, found, sources = [], [], [], [], []
    if len(paths) == 1:
        points, tris, groups, group_names, file_warnings = _read_file(paths[0], split=True)
        out_warnings += file_warnings
        vertices, owner = [points[tris]], [groups]
        if len(group_names) == 1 and group_names[0] is None:
            group_names = [paths[0].stem]
        found = group_names
        sources = [paths[0]] * len(found)
    else:
        stems = [p.stem for p in paths]
        for stem in stems:
            if names is None and stems.count(stem) > 1:
                clash = ", ".join(str(p) for p in paths if p.stem == stem)
                raise ModelError(f"{clash}: these files would all be named {stem!r}; "
                                 "give conductor names explicitly")
        for i, path in enumerate(paths):
            points, tris, _, _, file_warnings = _read_file(path, split=False)
            out_warnings += file_warnings
            vertices.append(points[tris])
            owner.append(np.full(len(tris), i))
        found, sources = stems, paths
    if names is not None:
        names = [names] if isinstance(names, str) else [str(n) for n in names]
        if len(names) != len(found):
            raise ModelError(f"{label}: {len(names)} conductor names given but {len(found)} "
                             f"conductors found ({', '.join(found)})")
        if len(set(names)) != len(names):
            raise ModelError(f"{label}: conductor names repeat: {', '.join(names)}")
        found = names
    panels = Panels(np.concatenate(vertices) * scale, np.concatenate(owner), tuple(found))
    if check:
        out_warnings += check_geometry(panels, sources)
    return panels, out_warnings


def check_geometry(panels, source):
    """Warnings (list of one-line strings) about ``panels``; raises MeshError if they are unusable.

    Unusable: no panels, NaN/infinite coordinates, zero-area panels, duplicate panels, or two
    conductors that touch or overlap. source: the file name, or one file name per conductor, that
    messages start with. The error names the first problem and how many more were found.
    """
    errors, found_warnings = _problems(panels, source)
    if errors:
        more = f" (and {len(errors) - 1} more problems)" if len(errors) > 1 else ""
        raise MeshError(errors[0] + more)
    return found_warnings


def mesh_summary(panels, source="mesh"):
    """Facts about ``panels`` for a mesh report, as a dict of plain Python values (SI units).

    Keys: panels, conductors (name, panels, area_m2, boundary_edges: 0 for a closed surface),
    bounding_box_m ([min xyz, max xyz]), smallest_panel / largest_panel (area_m2 and the
    shortest / longest edge_m), problems (error and warning messages of ``check_geometry``).
    """
    v = panels.vertices
    finite = np.isfinite(v).all(axis=(1, 2))
    edges = np.linalg.norm(v[:, [1, 2, 0]] - v, axis=2)[finite]
    areas = panels.areas[finite]
    boundary = _boundary_edges(panels, finite)
    conductors = [{"name": name, "panels": int(np.sum(panels.owner == k)),
                   "area_m2": float(np.sum(areas[panels.owner[finite] == k])),
                   "boundary_edges": int(boundary[k])} for k, name in enumerate(panels.names)]
    errors, found_warnings = _problems(panels, source)
    have = bool(finite.any())
    corners = v[finite].reshape(-1, 3)
    return {
        "panels": len(panels),
        "conductors": conductors,
        "bounding_box_m": [corners.min(axis=0).tolist(), corners.max(axis=0).tolist()]
        if have else None,
        "smallest_panel": {"area_m2": float(areas.min()), "edge_m": float(edges.min())}
        if have else None,
        "largest_panel": {"area_m2": float(areas.max()), "edge_m": float(edges.max())}
        if have else None,
        "problems": errors + found_warnings,
    }


def _read_file(path, split):
    """One file: points (file units), triangles (n, 3), their groups, group names, warnings.

    With split=False every triangle is in group 0 (the caller names the conductor)."""
    if not path.exists():
        raise MeshError(f"{path}: file not found")
    if not path.is_file():
        raise MeshError(f"{path}: not a file")
    try:
        # The STL reader overflows a size check on garbage input; that warning is noise here.
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            mesh = meshio.read(path)
    # meshio's readers fail on malformed input with whatever their parser hits (ReadError,
    # ValueError, KeyError, IndexError, struct.error...), and the VTU reader even calls exit().
    except (Exception, SystemExit) as exc:
        raise MeshError(f"{path}: cannot read as a mesh ({_one_line(exc)})") from None
    points = np.asarray(mesh.points, dtype=np.float64)
    if points.ndim != 2 or points.shape[1] not in (2, 3):
        raise MeshError(f"{path}: points have shape {points.shape}, expected (n, 3)")
    if points.shape[1] == 2:  # planar formats store (x, y); the plate lies in z = 0
        points = np.column_stack([points, np.zeros(len(points))])

    file_warnings, tris, rows, skipped, flattened = [], [], [], {}, {}
    for b, block in enumerate(mesh.cells):
        k = _CORNERS.get(block.type)
        if k is None:
            skipped[block.type] = skipped.get(block.type, 0) + len(block.data)
            continue
        cells = np.asarray(block.data, dtype=np.int64).reshape(len(block.data), -1)[:, :k]
        if len(cells) and (cells.min() < 0 or cells.max() >= len(points)):
            raise MeshError(f"{path}: {block.type} cells refer to points that do not exist")
        if block.type not in ("triangle", "quad"):
            flattened[block.type] = flattened.get(block.type, 0) + len(cells)
        if k == 4:
            tri, row = _split_quads(points, cells)
        else:
            tri, row = cells, np.arange(len(cells))
        tris.append(tri)
        rows.append((b, row))
    if skipped:
        file_warnings.append(f"{path}: skipped cells that are not surface panels: "
                             + ", ".join(f"{n} {t}" for t, n in sorted(skipped.items())))
    if flattened:
        file_warnings.append(f"{path}: curved cells flattened to their corners: "
                             + ", ".join(f"{n} {t}" for t, n in sorted(flattened.items())))
    tris = np.concatenate(tris) if tris else np.zeros((0, 3), np.int64)
    if len(tris) == 0:
        have = ", ".join(f"{n} {t}" for t, n in sorted(skipped.items())) or "no cells at all"
        raise MeshError(f"{path}: no surface cells (triangles or quads); the file has {have}")
    bad = ~np.isfinite(points[tris]).all(axis=(1, 2))
    if bad.any():
        raise MeshError(_nonfinite_message(path, bad))
    if not split:
        return points, tris, np.zeros(len(tris), np.int64), [None], file_warnings
    groups, group_names = _groups(mesh, rows, points, tris)
    return points, tris, groups, group_names, file_warnings


def _split_quads(points, quads):
    """Two triangles (2q, 3) per quad, cut along the shorter diagonal, and each one's quad row.

    The shorter diagonal gives the better-shaped pair; both keep the quad's corner order."""
    a, b, c, d = quads.T
    ac = np.linalg.norm(points[a] - points[c], axis=1)
    bd = np.linalg.norm(points[b] - points[d], axis=1)
    use_ac = (ac <= bd)[:, None]
    first = np.where(use_ac, np.column_stack([a, b, c]), np.column_stack([a, b, d]))
    second = np.where(use_ac, np.column_stack([a, c, d]), np.column_stack([b, c, d]))
    return np.stack([first, second], axis=1).reshape(-1, 3), np.repeat(np.arange(len(quads)), 2)


def _groups(mesh, rows, points, tris):
    """Conductor index (0..k-1) of each triangle of one file, and the k names (None if unnamed)."""
    keys = {key.lower(): key for key in mesh.cell_data}
    # Gmsh physical names: field_data maps name -> [tag, dimension]; surfaces have dimension 2.
    physical_names = {int(np.ravel(v)[0]): name for name, v in mesh.field_data.items()
                      if np.size(v) >= 2 and int(np.ravel(v)[1]) == 2}
    for wanted in TAG_KEYS:
        tags = _tag_values(mesh.cell_data.get(keys.get(wanted)), rows, len(tris))
        if tags is None:
            continue
        values, groups = np.unique(tags, return_inverse=True)
        named = wanted == "gmsh:physical" and physical_names
        if named or len(values) > 1:
            names = [(physical_names.get(int(t)) if named else None) or f"tag{t}"
                     for t in values]
            return groups.ravel(), names
    return _components(points, tris)


def _tag_values(arrays, rows, n):
    """Integer tag of each of the n triangles from per-block cell data, or None if unusable."""
    if arrays is None:
        return None
    parts = []
    for b, row in rows:
        data = np.asarray(arrays[b]).ravel()
        if data.size <= row.max(initial=-1) or not np.issubdtype(data.dtype, np.number):
            return None
        parts.append(data[row])
    tags = np.concatenate(parts)
    if len(tags) != n or not np.all(np.isfinite(tags)) or np.any(tags != np.round(tags)):
        return None
    return tags.astype(np.int64)


def _components(points, tris):
    """Connected components of the triangles (corners merged), in order of their lowest corner."""
    used = np.unique(tris)
    label = np.arange(len(points))
    label[used] = used[_merge(points[used], MERGE_REL * _size(points[used]))]
    t = label[tris]
    graph = coo_matrix((np.ones(2 * len(t)), (np.r_[t[:, 0], t[:, 1]], np.r_[t[:, 1], t[:, 2]])),
                       shape=(len(points), len(points)))
    _, comp = connected_components(graph, directed=False)
    tri_comp = comp[t[:, 0]]
    # Rank components by the first appearance of their corners in lexicographic (x, y, z) order,
    # so the numbering depends on the geometry only, not on the order of cells in the file.
    corners = tris.ravel()
    order = np.lexsort(points[corners].T[::-1])
    corner_comp = np.repeat(tri_comp, 3)[order]
    _, first = np.unique(corner_comp, return_index=True)
    ranked = np.unique(corner_comp)[np.argsort(first)]
    rank = np.empty(comp.max() + 1, np.int64)
    rank[ranked] = np.arange(len(ranked))
    groups = rank[tri_comp]
    return groups, [f"c{i + 1}" for i in range(len(ranked))] if len(ranked) > 1 else [None]


def _merge(points, tol):
    """Index of a representative for each point (m, 3): points within tol of each other are one."""
    pairs = cKDTree(points).query_pairs(tol, output_type="ndarray")
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])),
                       shape=(len(points), len(points)))
    _, comp = connected_components(graph, directed=False)
    _, first = np.unique(comp, return_index=True)
    return first[comp]


def _size(points):
    """Model size: the diagonal of the bounding box of points (m, 3)."""
    return float(np.linalg.norm(np.ptp(points, axis=0))) if len(points) else 0.0


def _one_line(exc):
    """A short one-line description of an exception."""
    if isinstance(exc, SystemExit):
        return "the reader gave up"
    text = " ".join(str(exc).split()) or type(exc).__name__
    return text[:200]


def _where(x):
    """A point (3,) in metres as text."""
    return "(" + ", ".join(f"{c:.6g}" for c in x) + ") m"


def _nonfinite_message(source, bad):
    """The message for panels (mask bad) with NaN or infinite coordinates."""
    first = int(np.flatnonzero(bad)[0])
    return (f"{source}: {int(bad.sum())} panel(s) with NaN or infinite coordinates, "
            f"the first is panel {first}")


def _sources(panels, source):
    """The source label of each conductor."""
    if isinstance(source, (str, os.PathLike)):
        return [str(source)] * panels.n_conductors
    source = [str(s) for s in source]
    if len(source) != panels.n_conductors:
        raise ValueError(f"{len(source)} sources given for {panels.n_conductors} conductors")
    return source


def _problems(panels, source):
    """(errors, warnings) about panels: one-line messages starting with the file concerned."""
    src = _sources(panels, source)
    label = ", ".join(dict.fromkeys(src)) or "mesh"
    if len(panels) == 0:
        return [f"{label}: no surface panels"], []
    v, owner = panels.vertices, panels.owner
    finite = np.isfinite(v).all(axis=(1, 2))
    errors = []
    if not finite.all():
        errors.append(_nonfinite_message(src[owner[~finite][0]], ~finite))
    longest = np.linalg.norm(v[:, [1, 2, 0]] - v, axis=2).max(axis=1)
    with np.errstate(invalid="ignore"):
        degenerate = finite & (2 * panels.areas <= DEGENERATE_REL * longest ** 2)
    if degenerate.any():
        i = int(np.flatnonzero(degenerate)[0])
        errors.append(f"{src[owner[i]]}: {int(degenerate.sum())} zero-area panel(s), the first "
                      f"(panel {i}) at {_where(panels.centroids[i])}")
    # The remaining checks need finite, non-degenerate panels; the others are reported above.
    keep = np.flatnonzero(finite & ~degenerate)
    if len(keep) == 0:
        return errors, []
    tol = MERGE_REL * _size(v[keep].reshape(-1, 3))
    errors += _duplicates(panels, keep, tol, src)
    touching, near = _contacts(panels, keep, tol, src)
    return errors + touching, near


def _duplicates(panels, keep, tol, src):
    """Error about panels (indices keep) with the same three corners as another of their conductor.

    A panel repeated on another conductor is reported as the two conductors touching."""
    corner_id = _merge(panels.vertices[keep].reshape(-1, 3), tol).reshape(-1, 3)
    key = np.column_stack([panels.owner[keep], np.sort(corner_id, axis=1)])
    _, inverse, counts = np.unique(key, axis=0, return_inverse=True, return_counts=True)
    repeated = counts[inverse.ravel()] > 1
    if not repeated.any():
        return []
    i = keep[np.flatnonzero(repeated)[0]]
    return [f"{src[panels.owner[i]]}: {int(np.sum(counts - 1))} duplicate panel(s) (same three "
            f"corners as another panel), the first (panel {i}) at {_where(panels.centroids[i])}"]


def _contacts(panels, keep, tol, src):
    """(errors, warnings) for each pair of conductors that touch, or come very close.

    Candidates come from a k-d tree on centroids (two panels can only be within g of each other if
    their centroids are within r_i + r_j + g), so the cost is O(N log N) for even meshes; the
    exact triangle-triangle distance then decides."""
    if panels.n_conductors < 2:
        return [], []
    c, r, owner = panels.centroids[keep], panels.radii[keep], panels.owner[keep]
    # A qualifying pair has |c_i - c_j| <= 2 max(r_i, r_j) + g, so the larger panel's own ball
    # finds it: graded meshes stay cheap, unlike one ball radius set by the largest panel.
    near_lists = cKDTree(c).query_ball_point(c, 2 * r * (1 + NEAR_REL) + tol)
    i = np.repeat(np.arange(len(c)), [len(n) for n in near_lists])
    j = np.fromiter((k for n in near_lists for k in n), np.int64, count=len(i))
    other = owner[i] != owner[j]
    pairs = np.unique(np.column_stack([np.minimum(i, j), np.maximum(i, j)])[other], axis=0)
    i, j = pairs[:, 0], pairs[:, 1]
    small = np.minimum(r[i], r[j])
    pick = np.linalg.norm(c[i] - c[j], axis=1) <= r[i] + r[j] + NEAR_REL * small + tol
    i, j, small = i[pick], j[pick], small[pick]
    if len(i) == 0:
        return [], []
    v = panels.vertices[keep]
    gap = _triangle_distance(v[i], v[j])
    touch = gap <= np.maximum(tol, TOUCH_REL * small)
    close = ~touch & (gap < NEAR_REL * small)
    errors, near = [], []
    a, b = np.minimum(owner[i], owner[j]), np.maximum(owner[i], owner[j])
    for mask, out in ((touch, errors), (close, near)):
        for pa, pb in sorted(set(zip(a[mask].tolist(), b[mask].tolist()))):
            sel = np.flatnonzero(mask & (a == pa) & (b == pb))
            where = ", ".join(dict.fromkeys([src[pa], src[pb]]))
            pair = f"conductors {panels.names[pa]!r} and {panels.names[pb]!r}"
            if out is errors:
                first = sel[0]
                out.append(f"{where}: {pair} touch or overlap ({len(sel)} panel pair(s) closer "
                           f"than {max(tol, TOUCH_REL * small[first]):.3g} m, the first near "
                           f"{_where(c[i[first]])})")
            else:
                k = sel[np.argmin(gap[sel])]
                out.append(f"{where}: {pair} come within {gap[k]:.3g} m, far below their panel "
                           f"size ({small[k]:.3g} m) near {_where(c[i[k]])}; refine the mesh "
                           "there or expect reduced accuracy")
    return errors, near


def _boundary_edges(panels, finite):
    """Number of edges used by a single panel, per conductor (0 for closed surfaces)."""
    counts = np.zeros(panels.n_conductors, np.int64)
    if not finite.any():
        return counts
    v = panels.vertices[finite]
    corner_id = _merge(v.reshape(-1, 3), MERGE_REL * _size(v.reshape(-1, 3))).reshape(-1, 3)
    edges = np.sort(np.stack([corner_id, corner_id[:, [1, 2, 0]]], axis=2), axis=2).reshape(-1, 2)
    edge_owner = np.repeat(panels.owner[finite], 3)
    keyed = np.column_stack([edge_owner, edges])
    _, inverse, uses = np.unique(keyed, axis=0, return_inverse=True, return_counts=True)
    single = uses[inverse.ravel()] == 1
    np.add.at(counts, edge_owner[single], 1)
    return counts


def _triangle_distance(s, t):
    """Distance (m) between triangles s[k] and t[k] (k, 3, 3) of nonzero area; 0 if they meet.

    Two disjoint triangles are closest at a corner of one against the other or between two edges;
    they intersect exactly when an edge of one crosses the other."""
    dist = np.full(len(s), np.inf)
    for p, q in ((s, t), (t, s)):
        for m in range(3):
            dist = np.minimum(dist, _point_triangle_distance(p[:, m], q))
    for m in range(3):
        for n in range(3):
            dist = np.minimum(dist, _segment_distance(s[:, m], s[:, (m + 1) % 3],
                                                      t[:, n], t[:, (n + 1) % 3]))
    crossed = np.zeros(len(s), bool)
    for p, q in ((s, t), (t, s)):
        for m in range(3):
            crossed |= _segment_crosses(p[:, m], p[:, (m + 1) % 3], q)
    return np.where(crossed, 0.0, dist)


def _dot(a, b):
    """Row-wise dot products of (k, 3) arrays."""
    return np.einsum("ij,ij->i", a, b)


def _unit_normal(t):
    """Unit normals (k, 3) of triangles t (k, 3, 3)."""
    n = np.cross(t[:, 1] - t[:, 0], t[:, 2] - t[:, 0])
    return n / np.linalg.norm(n, axis=1)[:, None]


def _inside(x, t, n):
    """Whether points x, lying in the planes of triangles t with unit normals n, are inside them."""
    ok = np.ones(len(x), bool)
    for m in range(3):
        a, b = t[:, m], t[:, (m + 1) % 3]
        ok &= _dot(np.cross(b - a, x - a), n) >= 0
    return ok


def _point_triangle_distance(p, t):
    """Distance (m) from points p (k, 3) to triangles t (k, 3, 3)."""
    n = _unit_normal(t)
    h = _dot(p - t[:, 0], n)
    on_face = _inside(p - h[:, None] * n, t, n)
    edge = np.minimum.reduce([_segment_distance(p, p, t[:, m], t[:, (m + 1) % 3])
                              for m in range(3)])
    return np.where(on_face, np.abs(h), edge)


def _segment_distance(p1, q1, p2, q2):
    """Distance (m) between segments p1q1 and p2q2, row by row; p1q1 may be a point, p2q2 not.

    Closest points by clamped parameters (Ericson, Real-Time Collision Detection, 2005, 5.1.9)."""
    d1, d2, w = q1 - p1, q2 - p2, p1 - p2
    a, e, b = _dot(d1, d1), _dot(d2, d2), _dot(d1, d2)
    c, f = _dot(d1, w), _dot(d2, w)
    denom = a * e - b * b
    with np.errstate(invalid="ignore", divide="ignore"):
        # Parallel segments (denom ~ 0) take s = 0; the clamping below finds the right t.
        s = np.where(denom > 1e-12 * a * e, np.clip((b * f - c * e) / denom, 0, 1), 0.0)
        t = (b * s + f) / e
        s = np.where(t < 0, np.clip(-c / a, 0, 1), np.where(t > 1, np.clip((b - c) / a, 0, 1), s))
    s = np.where(a > 0, s, 0.0)  # p1q1 is a point
    t = np.clip(t, 0, 1)
    return np.linalg.norm(p1 + s[:, None] * d1 - p2 - t[:, None] * d2, axis=1)


def _segment_crosses(p, q, t):
    """Whether segments pq pass through triangles t (a crossing, not a coplanar overlap)."""
    n = _unit_normal(t)
    dp, dq = _dot(p - t[:, 0], n), _dot(q - t[:, 0], n)
    crosses = (dp * dq <= 0) & (dp != dq)
    s = np.divide(dp, dp - dq, out=np.zeros_like(dp), where=crosses)
    return crosses & _inside(p + s[:, None] * (q - p), t, n)


def closed_conductors(panels):
    """(n_conductors,) bool: True where a conductor's surface is closed (no boundary edges)."""
    finite = np.isfinite(panels.vertices).all(axis=(1, 2))
    return _boundary_edges(panels, finite) == 0
