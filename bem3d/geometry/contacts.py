"""Conductors that touch, or come closer to each other than their panel size."""

import math

import numpy as np
from scipy.spatial import cKDTree

from bem3d.geometry.distances import triangle_distance
from bem3d.geometry.messages import length_text, point_text
from bem3d.geometry.panels import edge_lengths

#: Panels of two conductors closer than max(MERGE_REL * model size, TOUCH_REL * panel radius) touch.
TOUCH_REL = 1e-6


def conductor_contacts(panels, keep, tol, src, unit="m"):
    """(errors, warnings) for each pair of conductors that touch, or come closer than their
    panel size (longest edge) there, which under-resolves the charge between them. Lengths in
    the messages are in `unit`.

    Two panels can be that close only if their centroids are within r_i + r_j + max(h_i, h_j),
    at most 4 max(r_i, r_j) since an edge h is at most twice the radius r; so the larger panel's
    ball of 4 r finds every such pair. Each conductor's k-d tree is asked only about the other
    panels whose balls reach its box, so the cost stays near O(N log N); the exact
    triangle-triangle distance then decides."""
    if panels.n_conductors < 2:
        return [], []
    c, r, owner = panels.centroids[keep], panels.radii[keep], panels.owner[keep]
    v = panels.vertices[keep]
    h = edge_lengths(v).max(axis=1)
    reach = 4 * r + tol
    found = [np.zeros((0, 2), np.int64)]
    for k in np.unique(owner):
        mine, others = np.flatnonzero(owner == k), np.flatnonzero(owner != k)
        lo, hi = c[mine].min(axis=0), c[mine].max(axis=0)
        outside = np.maximum(0.0, np.maximum(lo - c[others], c[others] - hi))
        others = others[np.linalg.norm(outside, axis=1) <= reach[others]]
        if len(others) == 0:
            continue
        near = cKDTree(c[mine]).query_ball_point(c[others], reach[others])
        counts = np.fromiter((len(n) for n in near), np.int64, count=len(near))
        j = mine[np.fromiter((m for n in near for m in n), np.int64, count=int(counts.sum()))]
        i = np.repeat(others, counts)
        found.append(np.column_stack([np.minimum(i, j), np.maximum(i, j)]))
    pairs = np.unique(np.concatenate(found), axis=0)
    i, j = pairs[:, 0], pairs[:, 1]
    size = np.maximum(h[i], h[j])
    pick = np.linalg.norm(c[i] - c[j], axis=1) <= r[i] + r[j] + size + tol
    i, j, size = i[pick], j[pick], size[pick]
    if len(i) == 0:
        return [], []
    small = np.minimum(r[i], r[j])
    gap = triangle_distance(v[i], v[j])
    touch = gap <= np.maximum(tol, TOUCH_REL * small)
    close = ~touch & (gap < size)
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
                           f"than {length_text(max(tol, TOUCH_REL * small[first]), unit)}, the "
                           f"first near {point_text(c[i[first]], unit)})")
            else:
                k = sel[np.argmax(size[sel] / gap[sel])]
                out.append(f"{where}: {pair} come within {length_text(gap[k], unit)} of each "
                           f"other near {point_text(c[i[k]], unit)}, less than their panel "
                           f"size there ({length_text(size[k], unit)}; {len(sel)} panel "
                           "pair(s) closer than their size), so the result is under-resolved; "
                           "refine both surfaces there to panels of at most "
                           f"{length_text(gap[k], unit)} (about "
                           f"{math.ceil(size[k] / gap[k])}x finer)")
    return errors, near
