"""Exact distances between triangles, pair by pair (row k of one array against row k of another)."""

import numpy as np


def triangle_distance(s, t):
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
    """Whether points x, lying in the planes of triangles t with unit normals n, are inside
    them."""
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
