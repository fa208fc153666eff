"""Orienting panels: each closed surface faces out of its conductor (a cavity wall faces into
the cavity), each open surface agrees with its neighbours; reversed panels are reported."""

import math

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import breadth_first_order, connected_components

from bem3d.geometry.messages import conductor_sources
from bem3d.geometry.panels import Panels
from bem3d.geometry.topology import corner_ids, edge_uses


def orient(panels, sources):
    """The panels with each closed surface facing out of its conductor (a cavity wall into its
    cavity) and each open surface agreeing with its neighbours, and warnings naming how many
    panels were reversed, or which surfaces cannot be oriented.

    A surface is a set of panels joined by edges that exactly two of them share. Orientations
    spread over those edges (neighbours run along a shared edge in opposite directions); a
    closed surface then faces outward if its signed volume is positive, and inward if it lies
    inside an odd number of other closed surfaces of the same conductor (a cavity). An open one
    keeps the orientation most of its panels had."""
    n, src = len(panels), conductor_sources(panels, sources)
    if n == 0:
        return panels, []
    v, owner = panels.vertices, panels.owner
    uses, i, j, same = edge_uses(corner_ids(v), owner)
    i, j, same = _unique_links(i, j, same)
    n_surf, surface = connected_components(
        coo_matrix((np.ones(len(i)), (i, j)), shape=(n, n)), directed=False)
    flip = _spread_orientation(n, surface, n_surf, i, j, same)
    clash = np.zeros(n_surf, bool)
    clash[surface[i[(flip[i] ^ flip[j]) != same]]] = True
    flip[clash[surface]] = False                       # non-orientable: left as read
    sealed = np.bincount(surface, weights=(uses != 2).any(axis=1), minlength=n_surf) == 0
    closed = sealed & ~clash
    sign = np.where(flip, -1.0, 1.0)
    volume = _signed_volumes(v, sign, surface, n_surf)
    want = np.where(_cavities(v, sign * np.sign(volume)[surface], surface, closed, owner),
                    -1.0, 1.0)
    swap = np.where(closed, np.sign(volume) != want,
                    np.bincount(surface, weights=flip, minlength=n_surf)
                    > np.bincount(surface, minlength=n_surf) / 2)
    flip ^= swap[surface] & ~clash[surface]
    found = []
    for k, name in enumerate(panels.names):
        mine = owner == k
        if flip[mine].any():
            found.append(f"{src[k]}: conductor {name!r}: {int(flip[mine].sum())} of "
                         f"{int(mine.sum())} panels reversed so that they face out of the "
                         "conductor and agree with their neighbours")
        bad = np.unique(surface[mine][clash[surface[mine]]])
        if len(bad):
            found.append(f"{src[k]}: conductor {name!r}: {len(bad)} surface(s) cannot be "
                         "oriented consistently (non-orientable or folded onto themselves); "
                         "left as read, so the inside test and forces of a field map are "
                         "unreliable there")
    if not flip.any():
        return panels, found
    vertices = v.copy()
    vertices[flip] = v[flip][:, [0, 2, 1]]
    return Panels(vertices, owner, panels.names), found


def _unique_links(i, j, same):
    """Panel pairs (i < j) linked by a shared edge, once each (two panels may share two edges),
    sorted by (i, j)."""
    lo, hi = np.minimum(i, j), np.maximum(i, j)
    _, first = np.unique(np.column_stack([lo, hi]), axis=0, return_index=True)
    return lo[first], hi[first], same[first]


def _spread_orientation(n, surface, n_surf, i, j, same):
    """(n,) bool: whether each panel must be reversed to agree with its surface's first panel.

    A breadth-first tree from a virtual root joined to one panel of every surface gives each
    panel a parent; the flips along the path to the root are combined by pointer jumping."""
    first = np.unique(surface, return_index=True)[1]
    root = n
    rows = np.r_[i, j, np.full(n_surf, root)]
    cols = np.r_[j, i, first]
    graph = coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(n + 1, n + 1)).tocsr()
    _, parent = breadth_first_order(graph, root, directed=False, return_predecessors=True)
    parent[root] = root
    # each panel's relation to its parent: True where they disagree; links (i < j) are sorted
    rel = np.zeros(n + 1, bool)
    child = np.flatnonzero(parent[:n] != root)
    lo, hi = np.minimum(child, parent[child]), np.maximum(child, parent[child])
    rel[child] = same[np.searchsorted(i * (n + 1) + j, lo * (n + 1) + hi)]
    up = parent.copy()
    while np.any(up != root):
        rel, up = rel ^ rel[up], up[up]
    return rel[:n]


def _signed_volumes(v, sign, surface, n_surf):
    """Signed volume enclosed by each surface with panel orientations sign (n,) = +-1 (m^3)."""
    ref = v[np.unique(surface, return_index=True)[1], 0][surface]     # a corner of each surface
    a, b, c = v[:, 0] - ref, v[:, 1] - ref, v[:, 2] - ref
    det = np.einsum("ij,ij->i", a, np.cross(b, c))
    return np.bincount(surface, weights=sign * det, minlength=n_surf) / 6.0


def _cavities(v, outward, surface, closed, owner):
    """(n_surf,) bool: closed surfaces inside an odd number of other closed surfaces of their
    conductor. outward (n,) = +-1 orients every closed surface outward."""
    n_surf = len(closed)
    depth = np.zeros(n_surf, np.int64)
    ids = np.flatnonzero(closed)
    if len(ids) < 2:
        return depth > 0
    order = np.argsort(surface, kind="stable")
    start = np.searchsorted(surface[order], np.arange(n_surf))
    stop = np.searchsorted(surface[order], np.arange(n_surf), side="right")
    corners = v[order]
    lo = np.minimum.reduceat(corners.min(axis=1), start[ids])
    hi = np.maximum.reduceat(corners.max(axis=1), start[ids])
    who = owner[order][start[ids]]
    # a surface can only enclose another whose bounding box holds its own (rows in blocks of
    # 1024 keep the comparison tables small for models of many bodies)
    for top in range(0, len(ids), 1024):
        rows = slice(top, top + 1024)
        a, b = np.nonzero(np.all(lo[None] <= lo[rows, None], axis=2)
                          & np.all(hi[rows, None] <= hi[None], axis=2)
                          & (who[rows, None] == who[None]))
        a += top
        for sa, sb in zip(ids[a[a != b]], ids[b[a != b]]):
            inner = order[start[sb]:stop[sb]]
            depth[sa] += _winding(v[order[start[sa]], 0], v[inner], outward[inner]) > 0.5
    return depth % 2 == 1


def _winding(x, v, sign):
    """Winding number of point x (3,) about the panels v (k, 3, 3) oriented by sign (k,):
    the sum of their signed solid angles over 4 pi (Van Oosterom & Strackee 1983, IEEE Trans.
    Biomed. Eng. 30, 125)."""
    r = v - x
    length = np.linalg.norm(r, axis=2)
    r1, r2, r3 = r[:, 0], r[:, 1], r[:, 2]
    l1, l2, l3 = length.T
    numerator = np.einsum("ij,ij->i", r1, np.cross(r2, r3))
    denominator = (l1 * l2 * l3 + np.einsum("ij,ij->i", r1, r2) * l3
                   + np.einsum("ij,ij->i", r1, r3) * l2 + np.einsum("ij,ij->i", r2, r3) * l1)
    return float(np.sum(sign * 2.0 * np.arctan2(numerator, denominator)) / (4.0 * math.pi))
