"""Where flat triangular panels cross a coordinate plane: the segments of their cross-section."""

import numpy as np

# each triangle's three edges, as corner index pairs
_EDGES = np.array([[0, 1], [1, 2], [2, 0]])


def plane_cut(vertices, axis, value, tol=1e-9):
    """Segments where the triangles `vertices` (n, 3, 3) cross the plane x[axis] = value.

    Returns (segments (k, 2, 3), panel index (k,)). A triangle gives a segment when exactly two
    of its points lie on the plane: edge crossings (corners on opposite sides) and corners on
    it (within tol times the model's size). A triangle touching the plane at one corner gives
    none, and so does one lying in the plane (it has no cross-section, only a footprint)."""
    v = np.asarray(vertices, float).reshape(-1, 3, 3)
    if not len(v):
        return np.empty((0, 2, 3)), np.empty(0, int)
    size = float(np.ptp(v.reshape(-1, 3), axis=0).max()) or 1.0
    d = v[:, :, axis] - value
    d[np.abs(d) <= tol * size] = 0.0             # a corner on the plane is on it exactly
    di, dj = d[:, _EDGES[:, 0]], d[:, _EDGES[:, 1]]
    crossing = di * dj < 0
    # the crossing point divides the edge in the ratio of the corners' distances
    t = np.where(crossing, di / np.where(crossing, di - dj, 1.0), 0.0)
    vi, vj = v[:, _EDGES[:, 0]], v[:, _EDGES[:, 1]]
    points = np.concatenate([vi + t[..., None] * (vj - vi), v], axis=1)         # (n, 6, 3)
    found = np.concatenate([crossing, d == 0.0], axis=1)                          # (n, 6)
    cut = np.flatnonzero(found.sum(axis=1) == 2)
    first_two = np.argsort(~found[cut], axis=1, kind="stable")[:, :2]
    segments = np.take_along_axis(points[cut], first_two[..., None], axis=1)
    segments[:, :, axis] = value                  # on the plane, not a rounding off it
    return segments, cut


def footprint(vertices, axis, value, reach):
    """The outline of the panels lying wholly within reach of the plane x[axis] = value,
    projected onto it: sheets in or just beside a slice (pads under it) that plane_cut cannot
    show. Returns (segments (k, 2, 3), panel index (k,)): the edges that belong to one of those
    panels only, i.e. the borders of the near part of the surface."""
    v = np.asarray(vertices, float).reshape(-1, 3, 3)
    near = np.flatnonzero(np.all(np.abs(v[:, :, axis] - value) <= reach, axis=1))
    if not len(near):
        return np.empty((0, 2, 3)), np.empty(0, int)
    size = float(np.ptp(v.reshape(-1, 3), axis=0).max()) or 1.0
    edges = v[near][:, _EDGES]                                   # (m, 3, 2, 3)
    # corners meet exactly in a conforming mesh: rounding to a fraction of the size matches them
    _, corner_id = np.unique(np.round(edges.reshape(-1, 3) / (1e-9 * size)), axis=0,
                             return_inverse=True)
    keys = np.sort(corner_id.reshape(-1, 2), axis=1)
    _, edge_id, count = np.unique(keys, axis=0, return_inverse=True, return_counts=True)
    border = count[edge_id.ravel()] == 1
    segments = edges.reshape(-1, 2, 3)[border].copy()
    segments[:, :, axis] = value
    return segments, np.repeat(near, 3)[border]
