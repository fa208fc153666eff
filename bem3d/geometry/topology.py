"""How panels connect: coincident corners merged into one, edges shared by panels, surfaces
that are closed (no edge used by a single panel) or open."""

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

#: Points closer than this fraction of the model size (bounding-box diagonal) are one point.
MERGE_REL = 1e-9


def model_size(points):
    """Model size: the diagonal of the bounding box of points (m, 3)."""
    return float(np.linalg.norm(np.ptp(points, axis=0))) if len(points) else 0.0


def merge_points(points, tol):
    """Index of a representative for each point (m, 3): points within tol of each other are one."""
    pairs = cKDTree(points).query_pairs(tol, output_type="ndarray")
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])),
                       shape=(len(points), len(points)))
    _, comp = connected_components(graph, directed=False)
    _, first = np.unique(comp, return_index=True)
    return first[comp]


def corner_ids(vertices, tol=None):
    """(n, 3) ids of the corners of panels (n, 3, 3): equal where corners coincide within tol
    (default MERGE_REL times the model size)."""
    corners = vertices.reshape(-1, 3)
    if tol is None:
        tol = MERGE_REL * model_size(corners)
    return merge_points(corners, tol).reshape(-1, 3)


def edge_uses(corner_id, owner):
    """How panels of one conductor share edges.

    Returns uses (n, 3): the number of panels of the same conductor using each panel edge (edge
    m joins corners m and m+1), and for every edge used by exactly two panels the arrays i, j
    (the panels) and same (True where both run along the edge in the same direction, i.e. their
    orientations disagree). Edges collapsed to a point are left out."""
    a, b = corner_id.ravel(), corner_id[:, [1, 2, 0]].ravel()
    panel = np.repeat(np.arange(len(corner_id)), 3)
    key = np.column_stack([owner[panel], np.minimum(a, b), np.maximum(a, b)])
    if len(key) == 0:
        empty = np.zeros(0, np.int64)
        return np.zeros((0, 3), np.int64), empty, empty, empty.astype(bool)
    _, inverse, counts = np.unique(key, axis=0, return_inverse=True, return_counts=True)
    inverse = inverse.ravel()
    uses = counts[inverse].reshape(-1, 3)
    order = np.argsort(inverse, kind="stable")
    first = np.cumsum(counts) - counts
    twice = np.flatnonzero(counts == 2)
    e1, e2 = order[first[twice]], order[first[twice] + 1]
    keep = (panel[e1] != panel[e2]) & (a[e1] != b[e1])
    e1, e2 = e1[keep], e2[keep]
    return uses, panel[e1], panel[e2], (a[e1] < b[e1]) == (a[e2] < b[e2])


def neighbours(corner_id, owner):
    """(i, j): pairs of panels of one conductor that share an edge used by them alone."""
    _, i, j, _ = edge_uses(corner_id, owner)
    return i, j


def boundary_edges(panels, finite):
    """Number of edges used by a single panel, per conductor (0 for closed surfaces)."""
    counts = np.zeros(panels.n_conductors, np.int64)
    if not finite.any():
        return counts
    owner = panels.owner[finite]
    uses, _, _, _ = edge_uses(corner_ids(panels.vertices[finite]), owner)
    np.add.at(counts, np.repeat(owner, 3)[uses.ravel() == 1], 1)
    return counts


def closed_conductors(panels):
    """(n_conductors,) bool: True where a conductor's surface is closed (no boundary edges)."""
    finite = np.isfinite(panels.vertices).all(axis=(1, 2))
    return boundary_edges(panels, finite) == 0
