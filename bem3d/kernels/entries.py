"""Entries of the hierarchical-matrix blocks, and the quadrature rule of each block.

Every matrix entry comes from the dense backend's quadrature: pairs.panel_pair_integral for
the single-layer operator, points.normal_field_entry for the normal field at dielectric
interfaces, except that an admissible block takes one of its point rules for all its pairs
(block_rules); panels are renumbered so that clusters are contiguous and a block is given by
(row0, rows, col0, cols).
"""

import math

import numpy as np
from numba import njit, prange
from numba.extending import overload

from bem3d.kernels.data import SingleLayer
from bem3d.kernels.pairs import moment_pair, pair_integral, point_pair_sum
from bem3d.kernels.points import normal_field_entry, points_normal_field

#: Quadrature rules of a block's entries. PAIR_RULE: each pair by its own distance, as the
#: dense backend does (pairs.panel_pair_integral). The others take one rule for every pair of
#: an admissible block, the rule the dense backend gives its closest possible pair: the
#: entries are then one smooth function of the panels' places, which is what makes the block
#: numerically low-rank. Per pair, the dense backend switches rule at fixed distances and its
#: entries jump there by ~1e-4 relative (the error of the cheaper rule), which no rank below
#: the block size can follow at tighter tolerances. Every pair gets a rule at least as
#: accurate as the dense backend's.
PAIR_RULE, NEAR_RULE, MID_RULE, ONE_POINT = 0, 1, 2, 3


def block_entries(i0, di, j0, dj, count, out, operator, rule):
    """out[t] = entry (i0 + t di, j0 + t dj) of the operator that `operator` (data.SingleLayer
    or data.NormalField) describes, t < count, by the block's quadrature `rule` (one of
    PAIR_RULE ... ONE_POINT): compiled to _single_layer_entries or _field_entries."""
    raise NotImplementedError("only callable from compiled code")


@overload(block_entries, jit_options={"cache": True})
def _entries_by_kind(i0, di, j0, dj, count, out, operator, rule):
    # chosen once per structure type at compile time, so the ACA, recompression and block
    # filling serve both operators. Not inlined: inlined, the callers' constant di, dj would
    # reach the entries kernel as literal types and compile it once more for each
    if getattr(operator, "instance_class", None) is SingleLayer:
        def single_layer(i0, di, j0, dj, count, out, operator, rule):
            _single_layer_entries(i0, di, j0, dj, count, out, operator, rule)
        return single_layer

    def field(i0, di, j0, dj, count, out, operator, rule):
        _field_entries(i0, di, j0, dj, count, out, operator, rule)
    return field


@njit(cache=True, inline="always")
def _field_rule(i, l, rule, points, weights, point_normals, centroids, areas, pts_mid, w_mid,
                pts_near, w_near):
    # normal field of source panel l over test panel i by the block's rule for every test point
    m0, m1, m2 = point_normals[i, 0], point_normals[i, 1], point_normals[i, 2]
    total = 0.0
    for p in range(points.shape[1]):
        x0, x1, x2 = points[i, p, 0], points[i, p, 1], points[i, p, 2]
        if rule == ONE_POINT:
            s0, s1, s2 = x0 - centroids[l, 0], x1 - centroids[l, 1], x2 - centroids[l, 2]
            iv = 1.0 / math.sqrt(s0 * s0 + s1 * s1 + s2 * s2)
            acc = iv * iv * iv * (s0 * m0 + s1 * m1 + s2 * m2)
        elif rule == MID_RULE:
            acc = points_normal_field(x0, x1, x2, m0, m1, m2, pts_mid[l], w_mid)
        else:
            acc = points_normal_field(x0, x1, x2, m0, m1, m2, pts_near[l], w_near)
        total += weights[p] * areas[l] * acc
    return total


@njit(cache=True, inline="always")
def _apart(i, l, test_centroids, test_radii, centroids, radii, factor):
    # test panel i and source panel l farther apart than factor times their radii summed
    a0 = test_centroids[i, 0] - centroids[l, 0]
    a1 = test_centroids[i, 1] - centroids[l, 1]
    a2 = test_centroids[i, 2] - centroids[l, 2]
    return a0 * a0 + a1 * a1 + a2 * a2 > (factor * (test_radii[i] + radii[l])) ** 2


@njit(cache=True)
def _field_entries(i0, di, j0, dj, count, out, a, rule):
    # out[t] = normal field of source panel j0 + t dj tested over interface panel i0 + t di,
    # each pair by its own distance (PAIR_RULE, as in dense.assemble_normal_field) or by the
    # block's rule, less that
    # of the source's mirror image when a.grounded (a: data.NormalField)
    points, weights, point_normals = a.test_points, a.test_weights, a.test_normals
    test_centroids, test_radii = a.test_centroids, a.test_radii
    far_points, far_weights = a.far_points, a.far_weights
    verts, normals, centroids, radii, areas = a.verts, a.normals, a.centroids, a.radii, a.areas
    pts_mid, w_mid, pts_near, w_near = a.pts_mid, a.w_mid, a.pts_near, a.w_near
    near, mid, far = a.near, a.mid, a.far
    i_verts, i_normals, i_centroids = a.image_verts, a.image_normals, a.image_centroids
    i_radii, i_areas = a.image_radii, a.image_areas
    i_pts_mid, i_pts_near, image = a.image_pts_mid, a.image_pts_near, a.grounded
    for t in range(count):
        i = i0 + t * di
        j = j0 + t * dj
        if rule != PAIR_RULE:
            # admissible blocks: separated clusters, a smooth field over the test panel
            tp, tw = (points, weights) if rule == NEAR_RULE else (far_points, far_weights)
            v = _field_rule(i, j, rule, tp, tw, point_normals, centroids, areas,
                            pts_mid, w_mid, pts_near, w_near)
            if image:
                v -= _field_rule(i, j, rule, tp, tw, point_normals, i_centroids,
                                 i_areas, i_pts_mid, w_mid, i_pts_near, w_near)
            out[t] = v
            continue
        # a source beyond `mid` radii summed: its field is smooth over the test panel
        tp, tw = points, weights
        if _apart(i, j, test_centroids, test_radii, centroids, radii, mid):
            tp, tw = far_points, far_weights
        v = normal_field_entry(i, j, tp, tw, point_normals, verts, normals, centroids, radii,
                               areas, pts_mid, w_mid, pts_near, w_near, near, mid, far)
        if image:
            tp, tw = points, weights
            if _apart(i, j, test_centroids, test_radii, i_centroids, i_radii, mid):
                tp, tw = far_points, far_weights
            v -= normal_field_entry(i, j, tp, tw, point_normals, i_verts, i_normals,
                                    i_centroids, i_radii, i_areas, i_pts_mid, w_mid, i_pts_near,
                                    w_near, near, mid, far)
        out[t] = v


@njit(cache=True, inline="always")
def _rule_pair(i, j, rule, areas, centroids, moments, pts_near, w_near, pts_mid, w_mid,
               o_centroids, o_moments, o_pts_near, o_pts_mid):
    # panel i against panel j (its own arrays o_*: the panels' or their mirror images') by
    # the block's rule
    aa = areas[i] * areas[j]
    if rule == ONE_POINT:
        a0 = centroids[i, 0] - o_centroids[j, 0]
        a1 = centroids[i, 1] - o_centroids[j, 1]
        a2 = centroids[i, 2] - o_centroids[j, 2]
        return aa * moment_pair(a0, a1, a2, a0 * a0 + a1 * a1 + a2 * a2, moments, i,
                                o_moments, j)
    if rule == MID_RULE:
        return aa * point_pair_sum(pts_mid[i], w_mid, o_pts_mid[j], w_mid)
    return aa * point_pair_sum(pts_near[i], w_near, o_pts_near[j], w_near)


@njit(cache=True)
def _single_layer_entries(i0, di, j0, dj, count, out, a, rule):
    # out[t] = Galerkin integral of panels i0 + t di and j0 + t dj (m^3), t < count (a row of
    # a block for di = 0, a column for dj = 0), by the block's rule; PAIR_RULE computes
    # exactly what the dense backend does.
    # a is a data.SingleLayer; when a.grounded the grounded plane's image term is subtracted
    # as dense.assemble_dense does (an image lies no nearer to a panel than its source, every
    # conductor being above the plane, so the block's rule holds for it too). The structure
    # is unpacked once here: reading arrays out of it inside the loop would cost reference
    # counting per entry.
    verts, normals, centroids, radii, areas = a.verts, a.normals, a.centroids, a.radii, a.areas
    moments, pts_hi, pts_near, pts_mid = a.moments, a.pts_hi, a.pts_near, a.pts_mid
    i_verts, i_normals, i_centroids = a.image_verts, a.image_normals, a.image_centroids
    i_moments, i_pts_hi = a.image_moments, a.image_pts_hi
    i_pts_near, i_pts_mid = a.image_pts_near, a.image_pts_mid
    w_hi, w_near, w_mid, self_s, self_w = a.w_hi, a.w_near, a.w_mid, a.self_s, a.self_w
    touch, near, mid, far = a.touch, a.near, a.mid, a.far
    image = a.grounded
    if rule != PAIR_RULE:
        for t in range(count):
            i = i0 + t * di
            j = j0 + t * dj
            v = _rule_pair(i, j, rule, areas, centroids, moments, pts_near, w_near, pts_mid,
                           w_mid, centroids, moments, pts_near, pts_mid)
            if image:
                v -= _rule_pair(i, j, rule, areas, centroids, moments, pts_near, w_near,
                                pts_mid, w_mid, i_centroids, i_moments, i_pts_near, i_pts_mid)
            out[t] = v
        return
    far2 = far * far
    for t in range(count):
        i = i0 + t * di
        j = j0 + t * dj
        s2 = far2 * (radii[i] + radii[j]) ** 2
        # the far value beyond `far` inline, as dense._fill_row does: the call below
        # costs ~50 times more (its array arguments are reference-counted on every call)
        a0 = centroids[i, 0] - centroids[j, 0]
        a1 = centroids[i, 1] - centroids[j, 1]
        a2 = centroids[i, 2] - centroids[j, 2]
        d2 = a0 * a0 + a1 * a1 + a2 * a2
        if d2 > s2:
            v = areas[i] * areas[j] * moment_pair(a0, a1, a2, d2, moments, i, moments, j)
        else:
            v = pair_integral(i, j, verts, normals, centroids, radii, areas, moments, pts_hi,
                              pts_near, pts_mid, verts, normals, centroids, radii, areas,
                              moments, pts_hi, pts_near, pts_mid, w_hi, w_near, w_mid, self_s,
                              self_w, touch, near, mid, far, True)
        if image:
            a0 = centroids[i, 0] - i_centroids[j, 0]
            a1 = centroids[i, 1] - i_centroids[j, 1]
            a2 = centroids[i, 2] - i_centroids[j, 2]
            d2 = a0 * a0 + a1 * a1 + a2 * a2
            if d2 > s2:
                v -= areas[i] * areas[j] * moment_pair(a0, a1, a2, d2, moments, i, i_moments, j)
            else:
                v -= pair_integral(i, j, verts, normals, centroids, radii, areas, moments, pts_hi,
                           pts_near, pts_mid, i_verts, i_normals, i_centroids, radii, areas,
                           i_moments, i_pts_hi, i_pts_near, i_pts_mid, w_hi, w_near, w_mid,
                           self_s, self_w, touch, near, mid, far, False)
        out[t] = v


@njit(parallel=True, cache=True)
def block_rules(blocks, row_points, row_radii, col_points, col_radii, near, mid, far):
    """The quadrature rule of each admissible block (k, 4): the one the dense backend gives a
    pair at the block's least possible distance, the gap between the boxes of its rows' points
    row_points (rows, q, 3) and its columns' col_points (cols, 3), in units of the sum of the
    largest radii (row_radii 0: distances in units of the source panel's radius alone)."""
    rules = np.empty(blocks.shape[0], np.int64)
    for b in prange(blocks.shape[0]):
        r0, m, c0, n = blocks[b, 0], blocks[b, 1], blocks[b, 2], blocks[b, 3]
        rows = row_points[r0:r0 + m]
        cols = col_points[c0:c0 + n]
        gap2 = 0.0
        for d in range(3):
            gap = max(np.min(rows[:, :, d]) - np.max(cols[:, d]),
                      np.min(cols[:, d]) - np.max(rows[:, :, d]), 0.0)
            gap2 += gap * gap
        s = np.max(row_radii[r0:r0 + m]) + np.max(col_radii[c0:c0 + n])
        if gap2 > (far * s) ** 2:
            rules[b] = ONE_POINT
        elif gap2 > (mid * s) ** 2:
            rules[b] = MID_RULE
        elif gap2 > (near * s) ** 2:
            rules[b] = NEAR_RULE
        else:
            rules[b] = PAIR_RULE
    return rules


@njit(parallel=True, cache=True)
def fill_dense_blocks(blocks, rules, offsets, data, operator, symmetric):
    """Write block b (row-major) of `operator` (data.SingleLayer or data.NormalField) at
    data[offsets[b]:] for every row of blocks (k, 4), by its quadrature rule rules[b].

    In a symmetric operator a block on the diagonal (row0 == col0) is filled on and below its
    diagonal and mirrored, so it is exactly symmetric, as the dense matrix is."""
    for b in prange(blocks.shape[0]):
        r0, m, c0, n = blocks[b, 0], blocks[b, 1], blocks[b, 2], blocks[b, 3]
        off = offsets[b]
        diagonal = symmetric and r0 == c0
        # rows in float64 as the ACA takes them, so that one compiled entries kernel serves
        # both; each entry is rounded once to the storage type, as when written directly
        row = np.empty(n)
        for i in range(m):
            count = i + 1 if diagonal else n
            block_entries(r0 + i, 0, c0, 1, count, row, operator, rules[b])
            for j in range(count):
                data[off + i * n + j] = row[j]
        if diagonal:
            for i in range(m):
                for j in range(i + 1, n):
                    data[off + i * n + j] = data[off + j * n + i]
