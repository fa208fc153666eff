"""Cluster tree of panels and the block partition of the matrix (hierarchical-matrix structure).

Cluster tree by bounding-box bisection and the standard admissibility condition
min(diam t, diam s) <= eta * dist(t, s) (Hackbusch 1999, Computing 62, 89-108; Börm, Grasedyck &
Hackbusch 2003, Hierarchical matrices, lecture notes 21, MPI Leipzig, sections 2-3).
Panels are renumbered so that every cluster is a contiguous range of the new numbering.
"""

from dataclasses import dataclass

import numpy as np
from numba import njit


@njit(cache=True)
def _split_range(perm, lo, hi, centroids, axis, cut):
    # partition perm[lo:hi] in place, centroids below cut along axis first; returns the split
    i, j = lo, hi - 1
    while i <= j:
        if centroids[perm[i], axis] < cut:
            i += 1
        else:
            perm[i], perm[j] = perm[j], perm[i]
            j -= 1
    return i


@njit(cache=True)
def _bisect(centroids, box_lo, box_hi, leaf_size):
    # Clusters are numbered in creation order, children always after their parent.
    n = centroids.shape[0]
    cap = 2 * n + 1                     # a binary tree with at most n non-empty leaves
    perm = np.arange(n)
    start = np.zeros(cap, np.int64)
    end = np.zeros(cap, np.int64)
    child = -np.ones((cap, 2), np.int64)
    lo = np.full((cap, 3), np.inf)
    hi = np.full((cap, 3), -np.inf)
    start[0], end[0] = 0, n
    count = 1
    node = 0
    while node < count:
        a, b = start[node], end[node]
        clo = np.full(3, np.inf)
        chi = np.full(3, -np.inf)
        for i in range(a, b):
            p = perm[i]
            for d in range(3):
                lo[node, d] = min(lo[node, d], box_lo[p, d])
                hi[node, d] = max(hi[node, d], box_hi[p, d])
                clo[d] = min(clo[d], centroids[p, d])
                chi[d] = max(chi[d], centroids[p, d])
        if b - a > leaf_size:
            axis = np.argmax(chi - clo)
            mid = _split_range(perm, a, b, centroids, axis, 0.5 * (clo[axis] + chi[axis]))
            if mid == a or mid == b:
                mid = (a + b) // 2          # all centroids (numerically) coincide: halve
            start[count], end[count] = a, mid
            start[count + 1], end[count + 1] = mid, b
            child[node, 0], child[node, 1] = count, count + 1
            count += 2
        node += 1
    return perm, start[:count], end[:count], child[:count], lo[:count], hi[:count]


@dataclass(frozen=True)
class ClusterTree:
    """Binary tree of panel clusters; cluster c holds panels perm[start[c]:end[c]].

    child (m, 2): the two sub-clusters, -1 for a leaf. lo, hi (m, 3): bounding box of the
    cluster's panel corners (m). Cluster 0 is the root."""

    perm: np.ndarray
    start: np.ndarray
    end: np.ndarray
    child: np.ndarray
    lo: np.ndarray
    hi: np.ndarray

    @classmethod
    def build(cls, vertices, centroids, leaf_size=32):
        """Bisect the panels' bounding box along its longest side until at most leaf_size remain."""
        return cls(*_bisect(np.ascontiguousarray(centroids), vertices.min(axis=1),
                            vertices.max(axis=1), int(leaf_size)))

    @classmethod
    def join(cls, first, second):
        """One tree whose root's children are `first` (panels 0..n1-1) and `second` (the next
        n2 panels): keeps two panel sets apart in the block structure."""
        n1, c1 = len(first.perm), len(first.start)

        def shifted(t, clusters, panels):
            child = np.where(t.child < 0, -1, t.child + clusters)
            return t.perm + panels, t.start + panels, t.end + panels, child

        p1, s1, e1, ch1 = shifted(first, 1, 0)
        p2, s2, e2, ch2 = shifted(second, 1 + c1, n1)
        n = n1 + len(second.perm)
        return cls(np.concatenate([p1, p2]), np.concatenate([[0], s1, s2]),
                   np.concatenate([[n], e1, e2]),
                   np.concatenate([[[1, 1 + c1]], ch1, ch2]),
                   np.concatenate([np.minimum(first.lo[:1], second.lo[:1]), first.lo, second.lo]),
                   np.concatenate([np.maximum(first.hi[:1], second.hi[:1]), first.hi, second.hi]))

    @property
    def sizes(self):
        return self.end - self.start

    def partition(self, max_size):
        """Largest clusters with at most max_size panels: bounds (k + 1,) into the new numbering.

        They cover all panels in order, so subdomain i is the range bounds[i]:bounds[i + 1]."""
        picked, stack = [], [0]
        while stack:
            c = stack.pop()
            if self.end[c] - self.start[c] <= max_size or self.child[c, 0] < 0:
                picked.append(self.start[c])
            else:
                stack += [self.child[c, 1], self.child[c, 0]]
        return np.array(sorted(picked) + [len(self.perm)], dtype=np.int64)


@njit(cache=True)
def _admissible(lo_t, hi_t, t, lo_s, hi_s, s, eta):
    d2 = 0.0
    dt = 0.0
    ds = 0.0
    for k in range(3):
        gap = max(0.0, lo_s[s, k] - hi_t[t, k], lo_t[t, k] - hi_s[s, k])
        d2 += gap * gap
        dt += (hi_t[t, k] - lo_t[t, k]) ** 2
        ds += (hi_s[s, k] - lo_s[s, k]) ** 2
    return min(dt, ds) <= eta * eta * d2


@njit(cache=True)
def _block_tree(child_t, lo_t, hi_t, child_s, lo_s, hi_s, eta, symmetric):
    # Rows from tree t, columns from tree s. For a symmetric matrix (one tree) only blocks on
    # or below the diagonal are listed: the pair (t, s) with t != s stands for itself and its
    # transpose (s, t).
    near = []
    far = []
    stack = [(0, 0)]
    while len(stack) > 0:
        t, s = stack.pop()
        t_leaf, s_leaf = child_t[t, 0] < 0, child_s[s, 0] < 0
        if symmetric and t == s:
            if t_leaf:
                near.append((t, s))
            else:
                a, b = child_t[t, 0], child_t[t, 1]
                stack.append((a, a))
                stack.append((b, a))
                stack.append((b, b))
        elif _admissible(lo_t, hi_t, t, lo_s, hi_s, s, eta):
            far.append((t, s))
        elif t_leaf and s_leaf:
            near.append((t, s))
        elif t_leaf:
            stack.append((t, child_s[s, 0]))
            stack.append((t, child_s[s, 1]))
        elif s_leaf:
            stack.append((child_t[t, 0], s))
            stack.append((child_t[t, 1], s))
        else:
            for i in range(2):
                for j in range(2):
                    stack.append((child_t[t, i], child_s[s, j]))
    near_arr = np.empty((len(near), 2), np.int64)
    for i in range(len(near)):
        near_arr[i, 0], near_arr[i, 1] = near[i]
    far_arr = np.empty((len(far), 2), np.int64)
    for i in range(len(far)):
        far_arr[i, 0], far_arr[i, 1] = far[i]
    return near_arr, far_arr


def block_partition(tree, eta=1.5, columns=None):
    """Near (inadmissible leaf) and far (admissible) blocks as (k, 2) arrays of cluster pairs.

    With one tree (the symmetric matrix) only pairs (t, s) on or below the diagonal are
    listed; (t, s) with t != s also stands for its transpose. columns: a second ClusterTree
    for the columns of a general matrix; every block is then listed.
    eta: admissibility parameter of min(diam) <= eta * dist."""
    cols = tree if columns is None else columns
    return _block_tree(tree.child, tree.lo, tree.hi, cols.child, cols.lo, cols.hi, float(eta),
                       columns is None)
