"""Midpoint subdivision: every panel cut into four, the midpoints of smooth edges lifted onto
the curved surface that the mesh's corner normals describe."""

import math

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from bem3d.geometry.panels import Panels

#: Panels meeting at a larger angle than this (degrees) meet at a crease that stays sharp.
CREASE_DEGREES = 30.0


def _corner_normals(vertex, points, normals, edge_of, smooth_edge):
    """Unit normal at each panel corner (n, 3, 3), averaged over the panels around the corner's
    point that are reached without crossing a crease or boundary edge.

    Each panel contributes (e1 x e2) / (|e1|^2 |e2|^2) with e1, e2 its two edges from the point:
    the weights of Max (1999, J. Graphics Tools 4(2)), exact when the neighbours lie on a sphere."""
    n = len(vertex)
    p = points[vertex]                                   # (n, 3 corners, 3)
    e1 = p[:, [1, 2, 0]] - p
    e2 = p[:, [2, 0, 1]] - p
    weight = np.cross(e1, e2) / (np.einsum("nki,nki->nk", e1, e1)
                                 * np.einsum("nki,nki->nk", e2, e2))[..., None]
    # Join the corners of the two panels on each smooth edge that sit at the same point.
    half = np.flatnonzero(smooth_edge[edge_of.ravel()])            # half-edges 3 f + k
    order = half[np.argsort(edge_of.ravel()[half], kind="stable")]
    h1, h2 = order[0::2], order[1::2]                              # the two sides of each edge
    f1, k1, f2, k2 = h1 // 3, h1 % 3, h2 // 3, h2 % 3
    # In a consistently oriented mesh the second panel runs the edge the other way round.
    same = vertex[f1, k1] == vertex[f2, k2]
    a2 = np.where(same, k2, (k2 + 1) % 3)
    b2 = np.where(same, (k2 + 1) % 3, k2)
    rows = np.concatenate([3 * f1 + k1, 3 * f1 + (k1 + 1) % 3])
    cols = np.concatenate([3 * f2 + a2, 3 * f2 + b2])
    graph = coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(3 * n, 3 * n))
    _, label = connected_components(graph, directed=False)
    total = np.zeros((label.max() + 1, 3))
    np.add.at(total, label, weight.reshape(-1, 3))
    corner = total[label].reshape(n, 3, 3)
    length = np.linalg.norm(corner, axis=2, keepdims=True)
    # A corner whose weights cancel (degenerate fan) falls back to its panel's normal.
    return np.where(length > 0, corner / np.where(length > 0, length, 1.0), normals[:, None, :])


def subdivide(panels, smooth=True, crease_degrees=CREASE_DEGREES):
    """Panels (m) with every triangle cut into four at its edge midpoints: h halves.

    smooth: the midpoint of an edge between two panels meeting at less than crease_degrees is
    moved onto a circular arc through the edge's ends, along the mean of the surface normals
    there, with the curvature k = (n_b - n_a).(b - a) / |b - a|^2 that those normals show along
    the edge. Exact on a sphere and on the circles of a cylinder (when the mesh corners lie on
    them), so a mesh of a curved body approaches the body. Midpoints of crease, boundary and
    non-manifold edges stay on the straight edge: flat faces and sharp edges do not move.
    Children keep the parent's corner order (normal) and conductor."""
    n = len(panels)
    points, vertex = np.unique(panels.vertices.reshape(-1, 3), axis=0, return_inverse=True)
    vertex = vertex.reshape(n, 3)
    ends = np.stack([vertex, vertex[:, [1, 2, 0]]], axis=2)        # local edge k: corner k -> k+1
    edges, edge_of, uses = np.unique(np.sort(ends, axis=2).reshape(-1, 2), axis=0,
                                     return_inverse=True, return_counts=True)
    edge_of = edge_of.reshape(n, 3)
    a, b = points[edges[:, 0]], points[edges[:, 1]]
    middle = 0.5 * (a + b)
    if smooth:
        # Dihedral test on edges with exactly two panels: sum of the two unit normals.
        two = uses == 2
        normal_sum = np.zeros((len(edges), 3))
        np.add.at(normal_sum, edge_of.ravel(), np.repeat(panels.normals, 3, axis=0))
        # |n1 + n2|^2 = 2 + 2 cos(angle between the normals)
        smooth_edge = two & (np.einsum("ij,ij->i", normal_sum, normal_sum)
                             >= 2.0 + 2.0 * math.cos(math.radians(crease_degrees)))
        corner = _corner_normals(vertex, points, panels.normals, edge_of, smooth_edge)
        # The corner normals at both ends of each edge, from either panel that uses it (on a
        # smooth edge both panels' corners were joined, so both give the same normals).
        side = np.empty(len(edges), np.int64)
        side[edge_of.ravel()] = np.arange(3 * n)
        f, k = side // 3, side % 3
        na, nb = corner[f, k], corner[f, (k + 1) % 3]
        swap = vertex[f, k] != edges[:, 0]                         # edge stored as (low, high)
        na, nb = np.where(swap[:, None], nb, na), np.where(swap[:, None], na, nb)
        # Sagitta of the arc, k L^2 / 4 / (1 + sqrt(1 - k^2 L^2 / 4)): stable as k -> 0;
        # positive (outward) where the normals spread along the edge, as on a convex body.
        kl2 = np.einsum("ij,ij->i", nb - na, b - a)                   # k L^2
        l2 = np.einsum("ij,ij->i", b - a, b - a)                      # L^2
        sagitta = 0.25 * kl2 / (1.0 + np.sqrt(np.clip(1.0 - kl2**2 / (4.0 * l2), 0.0, None)))
        mean = na + nb
        mean /= np.maximum(np.linalg.norm(mean, axis=1, keepdims=True), 1e-300)
        middle = middle + np.where(smooth_edge[:, None], sagitta[:, None] * mean, 0.0)
    m = len(points) + edge_of                                      # midpoint ids, (n, 3)
    c0, c1, c2 = vertex.T
    m01, m12, m20 = m.T
    tris = np.stack([np.column_stack([c0, m01, m20]), np.column_stack([m01, c1, m12]),
                     np.column_stack([m20, m12, c2]), np.column_stack([m01, m12, m20])], axis=1)
    return Panels.from_arrays(np.concatenate([points, middle]), tris.reshape(-1, 3),
                              np.repeat(panels.owner, 4), panels.names)
