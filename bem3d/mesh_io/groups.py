"""Which panels of one mesh file form a conductor.

Gmsh physical groups (named by their physical names, ordered by tag), else the first array of
``TAG_KEYS`` holding two or more distinct integer values (named ``tag<N>``, ordered by tag), else
the connected components of the surface (corners shared after merging coincident points),
ordered by their lexicographically lowest corner and named ``c1, c2...``; a file that holds a
single unnamed conductor is named by the reader after the file's stem.
"""

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from bem3d.geometry.topology import MERGE_REL, merge_points, model_size

#: Cell-data arrays that may assign panels to conductors, in order of preference (compared
#: case-insensitively). ``gmsh:geometrical`` is left out on purpose: it numbers CAD surfaces, so
#: a meshed cube would become six conductors; connected components are right for such files.
TAG_KEYS = ("gmsh:physical", "medit:ref", "cellentityids", "conductor", "tag")


def file_groups(mesh, rows, points, tris):
    """Conductor index (0..k-1) of each triangle of one file, and the k names (None if unnamed)."""
    keys = {key.lower(): key for key in mesh.cell_data}
    # Gmsh physical names: field_data maps name -> [tag, dimension]; surfaces have dimension 2.
    physical_names = {}
    for name, value in mesh.field_data.items():
        value = np.ravel(value)
        if value.size >= 2 and np.issubdtype(value.dtype, np.number) and value[1] == 2:
            physical_names[int(value[0])] = name
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
    if arrays is None or len(arrays) <= max(b for b, _ in rows):
        return None
    parts = []
    for b, row in rows:
        data = np.asarray(arrays[b]).ravel()
        if data.size <= row.max(initial=-1) or not np.issubdtype(data.dtype, np.number):
            return None
        parts.append(data[row])
    tags = np.concatenate(parts)
    if (len(tags) != n or not np.all(np.isfinite(tags)) or np.any(tags != np.round(tags))
            or np.any(np.abs(tags) > 2**53)):
        return None
    return tags.astype(np.int64)


def _components(points, tris):
    """Connected components of the triangles (corners merged), in order of their lowest corner."""
    used = np.unique(tris)
    label = np.arange(len(points))
    label[used] = used[merge_points(points[used], MERGE_REL * model_size(points[used]))]
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
