"""Numba kernels of the hierarchical-matrix backend: block filling, ACA, products, extraction.

Every matrix entry comes from the dense backend's quadrature: kernels.panel_pair_integral for
the single-layer operator, kernels.normal_field_entry for the normal field at dielectric
interfaces, except that an admissible block takes one of its point rules for all its pairs
(block_rules); panels are renumbered so that clusters are contiguous and a block is given by
(row0, rows, col0, cols). Low-rank blocks are stored as U (rows, rank) and V (cols, rank),
row-major, block ~ U V^T.
"""

import math

import numpy as np
from numba import njit, prange
from numba.extending import overload

from bem3d.kernels.pairs import (
    _pair,
    _point_pair_sum,
    moment_pair,
    normal_field_entry,
    panel_pair_integral,
    points_normal_field,
)

#: Length of the single-layer entry tuple (hmatrix.entry_arguments); the normal-field tuple
#: (hfield.field_arguments) is shorter, which is how _entries tells them apart.
SINGLE_LAYER_ARGUMENTS = 26

#: Quadrature rules of a block's entries. PAIR_RULE: each pair by its own distance, as the
#: dense backend does (kernels.panel_pair_integral). The others take one rule for every pair of
#: an admissible block, the rule the dense backend gives its closest possible pair: the
#: entries are then one smooth function of the panels' places, which is what makes the block
#: numerically low-rank. Per pair, the dense backend switches rule at fixed distances and its
#: entries jump there by ~1e-4 relative (the error of the cheaper rule), which no rank below
#: the block size can follow at tighter tolerances. Every pair gets a rule at least as
#: accurate as the dense backend's.
PAIR_RULE, NEAR_RULE, MID_RULE, ONE_POINT = 0, 1, 2, 3


def _entries(i0, di, j0, dj, count, out, a, rule):
    """out[t] = entry (i0 + t di, j0 + t dj) of the operator that the argument tuple a
    describes, t < count, by the block's quadrature `rule` (one of PAIR_RULE ... ONE_POINT):
    compiled to _single_layer_entries or _field_entries."""
    raise NotImplementedError("only callable from compiled code")


@overload(_entries, jit_options={"cache": True}, inline="always")
def _entries_by_kind(i0, di, j0, dj, count, out, a, rule):
    # chosen once per argument-tuple type at compile time, so the ACA, recompression and
    # block filling below serve both operators
    if len(a) == SINGLE_LAYER_ARGUMENTS:
        def single_layer(i0, di, j0, dj, count, out, a, rule):
            _single_layer_entries(i0, di, j0, dj, count, out, a, rule)
        return single_layer

    def field(i0, di, j0, dj, count, out, a, rule):
        _field_entries(i0, di, j0, dj, count, out, a, rule)
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


@njit(cache=True)
def _field_entries(i0, di, j0, dj, count, out, a, rule):
    # out[t] = normal field of source panel j0 + t dj tested over interface panel i0 + t di,
    # as dielectric._interface_rows computes it (PAIR_RULE) or by the block's rule, less that
    # of the source's mirror image when the flag (last) is set
    (points, weights, point_normals, verts, normals, centroids, radii, areas, pts_mid, w_mid,
     pts_near, w_near, near, mid, far, i_verts, i_normals, i_centroids, i_radii, i_areas,
     i_pts_mid, i_pts_near, image) = a
    for t in range(count):
        i = i0 + t * di
        j = j0 + t * dj
        if rule != PAIR_RULE:
            v = _field_rule(i, j, rule, points, weights, point_normals, centroids, areas,
                            pts_mid, w_mid, pts_near, w_near)
            if image:
                v -= _field_rule(i, j, rule, points, weights, point_normals, i_centroids,
                                 i_areas, i_pts_mid, w_mid, i_pts_near, w_near)
            out[t] = v
            continue
        v = normal_field_entry(i, j, points, weights, point_normals, verts, normals, centroids,
                               radii, areas, pts_mid, w_mid, pts_near, w_near, near, mid, far)
        if image:
            v -= normal_field_entry(i, j, points, weights, point_normals, i_verts, i_normals,
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
        return aa * _point_pair_sum(pts_mid[i], w_mid, o_pts_mid[j], w_mid)
    return aa * _point_pair_sum(pts_near[i], w_near, o_pts_near[j], w_near)


@njit(cache=True)
def _single_layer_entries(i0, di, j0, dj, count, out, a, rule):
    # out[t] = Galerkin integral of panels i0 + t di and j0 + t dj (m^3), t < count (a row of
    # a block for di = 0, a column for dj = 0), by the block's rule; PAIR_RULE computes
    # exactly what the dense backend does.
    # a is entry_arguments(): operators.kernel_arguments, then the image panels' arrays
    # (operators.image_arrays) and a flag; with the flag set the grounded plane's
    # image term is subtracted as kernels.subtract_images does (an image lies no nearer to a
    # panel than its source, every conductor being above the plane, so the block's rule holds
    # for it too). The tuple is unpacked once here: reading arrays out of it inside the loop
    # would cost reference counting per entry.
    (verts, normals, centroids, radii, areas, moments, pts_hi, w_hi, pts_near, w_near, pts_mid,
     w_mid, self_s, self_w, touch, near, mid, far, i_verts, i_normals, i_centroids, i_moments,
     i_pts_hi, i_pts_near, i_pts_mid, image) = a
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
        # the far value beyond `far` inline, as kernels._fill_row does: the call below
        # costs ~50 times more (its array arguments are reference-counted on every call)
        a0 = centroids[i, 0] - centroids[j, 0]
        a1 = centroids[i, 1] - centroids[j, 1]
        a2 = centroids[i, 2] - centroids[j, 2]
        d2 = a0 * a0 + a1 * a1 + a2 * a2
        if d2 > s2:
            v = areas[i] * areas[j] * moment_pair(a0, a1, a2, d2, moments, i, moments, j)
        else:
            v = panel_pair_integral(i, j, verts, normals, centroids, radii, areas, moments,
                                    pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s,
                                    self_w, touch, near, mid, far)
        if image:
            a0 = centroids[i, 0] - i_centroids[j, 0]
            a1 = centroids[i, 1] - i_centroids[j, 1]
            a2 = centroids[i, 2] - i_centroids[j, 2]
            d2 = a0 * a0 + a1 * a1 + a2 * a2
            if d2 > s2:
                v -= areas[i] * areas[j] * moment_pair(a0, a1, a2, d2, moments, i, i_moments, j)
            else:
                v -= _pair(i, j, verts, normals, centroids, radii, areas, moments, pts_hi,
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
def fill_dense_blocks(blocks, rules, offsets, data, kargs, symmetric):
    """Write block b (row-major) at data[offsets[b]:] for every row of blocks (k, 4), by its
    quadrature rule rules[b].

    In a symmetric operator a block on the diagonal (row0 == col0) is filled on and below its
    diagonal and mirrored, so it is exactly symmetric, as the dense matrix is."""
    for b in prange(blocks.shape[0]):
        r0, m, c0, n = blocks[b, 0], blocks[b, 1], blocks[b, 2], blocks[b, 3]
        off = offsets[b]
        diagonal = symmetric and r0 == c0
        for i in range(m):
            _entries(r0 + i, 0, c0, 1, i + 1 if diagonal else n, data[off + i * n:], kargs,
                     rules[b])
        if diagonal:
            for i in range(m):
                for j in range(i + 1, n):
                    data[off + i * n + j] = data[off + j * n + i]


#: Residual rows and columns sampled at random to confirm that ACA has converged.
ACA_CHECKS = 2


@njit(cache=True)
def _residual_row(i, r0, c0, n, k, u, v, out, kargs, rule):
    # out = row i of (block - sum_l u_l v_l^T)
    _entries(r0 + i, 0, c0, 1, n, out, kargs, rule)
    for l in range(k):
        f = u[l, i]
        for j in range(n):
            out[j] -= f * v[l, j]


@njit(cache=True)
def _residual_col(j, r0, c0, m, k, u, v, out, kargs, rule):
    # out = column j of (block - sum_l u_l v_l^T)
    _entries(r0, 1, c0 + j, 0, m, out, kargs, rule)
    for l in range(k):
        f = v[l, j]
        for i in range(m):
            out[i] -= f * u[l, i]


@njit(cache=True)
def _unused(used, seed):
    # a pseudo-random index with used[index] False (linear probing), or -1 if there is none
    n = used.shape[0]
    start = seed % n
    for t in range(n):
        i = (start + t) % n
        if not used[i]:
            return i
    return -1


@njit(cache=True)
def _argmax_unused(x, used):
    best, at = -1.0, -1
    for i in range(x.shape[0]):
        if not used[i] and abs(x[i]) > best:
            best, at = abs(x[i]), i
    return at


@njit(cache=True)
def _aca(r0, m, c0, n, eps, kmax, kargs, rule):
    # Adaptive cross approximation with partial pivoting (Bebendorf 2000, Numer. Math. 86,
    # 565-589): rank-one crosses u v^T of the residual, the next row pivot being the largest
    # entry of the last column; stop when |u| |v| <= eps |S_k|_F, |S_k|_F updated exactly.
    # That test only sees the rows and columns visited, so before stopping ACA_CHECKS random
    # residual rows and columns, scaled to the whole block, must also be below eps |S_k|_F;
    # a failing one becomes the next pivot. Returns u (kmax, m), v (kmax, n), rank, converged.
    u = np.zeros((kmax, m))
    v = np.zeros((kmax, n))
    row = np.empty(n)
    col = np.empty(m)
    used_row = np.zeros(m, np.bool_)
    used_col = np.zeros(n, np.bool_)
    seed = (r0 * 7919 + c0 * 104729) % 2147483648
    norm2 = 0.0
    k = 0
    i = 0
    while k < kmax:
        used_row[i] = True
        _residual_row(i, r0, c0, n, k, u, v, v[k], kargs, rule)
        jp = _argmax_unused(v[k], used_col)
        if jp < 0 or v[k, jp] == 0.0:
            # the row is represented exactly already; try another
            seed = (seed * 1103515245 + 12345) % 2147483648
            i = _unused(used_row, seed)
            if i < 0:
                return u, v, k, True
            continue
        used_col[jp] = True
        v[k] /= v[k, jp]
        _residual_col(jp, r0, c0, m, k, u, v, u[k], kargs, rule)
        uu = np.dot(u[k], u[k])
        vv = np.dot(v[k], v[k])
        cross = 0.0
        for l in range(k):
            cross += np.dot(u[k], u[l]) * np.dot(v[k], v[l])
        norm2 += uu * vv + 2.0 * cross
        k += 1
        i = _argmax_unused(u[k - 1], used_row)
        if uu * vv <= eps * eps * norm2:
            bad = -1
            for _ in range(ACA_CHECKS):
                seed = (seed * 1103515245 + 12345) % 2147483648
                ir = _unused(used_row, seed)
                if ir >= 0:
                    _residual_row(ir, r0, c0, n, k, u, v, row, kargs, rule)
                    if m * np.dot(row, row) > eps * eps * norm2:
                        bad = ir
                        break
                seed = (seed * 1103515245 + 12345) % 2147483648
                jc = _unused(used_col, seed)
                if jc >= 0:
                    _residual_col(jc, r0, c0, m, k, u, v, col, kargs, rule)
                    if n * np.dot(col, col) > eps * eps * norm2:
                        bad = _argmax_unused(col, used_row)
                        break
            if bad < 0:
                return u, v, k, True
            i = bad
        if i < 0:
            return u, v, k, True
    return u, v, k, False


@njit(cache=True)
def _householder(a, k):
    # QR of the matrix whose columns are the rows a[0:k] (length m), in place: afterwards
    # a[l, :l + 1] holds column l of R and a[j, j:] the j-th Householder vector (unit norm).
    # Hand-written so that no threaded BLAS runs inside the parallel loop over blocks.
    m = a.shape[1]
    r = np.zeros((k, k))
    for j in range(k):
        norm = 0.0
        for i in range(j, m):
            norm += a[j, i] * a[j, i]
        norm = math.sqrt(norm)
        alpha = -norm if a[j, j] >= 0.0 else norm
        r[j, j] = alpha
        for l in range(j):
            r[l, j] = a[j, l]
        a[j, j] -= alpha
        vnorm = 0.0
        for i in range(j, m):
            vnorm += a[j, i] * a[j, i]
        vnorm = math.sqrt(vnorm)
        if vnorm > 0.0:
            for i in range(j, m):
                a[j, i] /= vnorm
        for l in range(j + 1, k):
            dot = 0.0
            for i in range(j, m):
                dot += a[j, i] * a[l, i]
            for i in range(j, m):
                a[l, i] -= 2.0 * dot * a[j, i]
    return r


@njit(cache=True)
def _apply_q(a, k, y):
    # rows of y (r, m) hold [x; 0] for x (k,); replace them by Q [x; 0], Q from _householder
    m = a.shape[1]
    for j in range(k - 1, -1, -1):
        for l in range(y.shape[0]):
            dot = 0.0
            for i in range(j, m):
                dot += a[j, i] * y[l, i]
            for i in range(j, m):
                y[l, i] -= 2.0 * dot * a[j, i]


@njit(cache=True)
def _recompress(u, v, k, eps):
    # U V^T = Qu (Ru Rv^T) Qv^T; truncate the SVD of the small core where the discarded
    # singular values hold at most eps of the Frobenius norm (Bebendorf 2008, Hierarchical
    # Matrices, Springer, section 1.1.5; Börm, Grasedyck & Hackbusch 2003, section 4.1).
    # Returns the factors as rows: (r, m) and (r, n).
    # Only the k x k core goes to LAPACK; the caller keeps BLAS single-threaded.
    ru = _householder(u, k)
    rv = _householder(v, k)
    w, s, zt = np.linalg.svd(ru @ np.ascontiguousarray(rv.T))
    s2 = s * s
    total = np.sum(s2)
    tail = 0.0
    r = k
    while r > 1 and tail + s2[r - 1] <= eps * eps * total:
        tail += s2[r - 1]
        r -= 1
    uu = np.zeros((r, u.shape[1]))
    vv = np.zeros((r, v.shape[1]))
    uu[:, :k] = (w[:, :r] * s[:r]).T
    vv[:, :k] = zt[:r]
    _apply_q(u, k, uu)
    _apply_q(v, k, vv)
    return uu, vv, r


@njit(parallel=True, cache=True)
def compress_blocks(blocks, rules, slots, scratch, ranks, eps_aca, eps_svd, kargs):
    """ACA and SVD recompression of each block (k, 4) by its quadrature rule rules[b]; writes
    U then V of block b at scratch[slots[b]:] and its rank to ranks[b], or ranks[b] = -1 if no
    rank below the block's break-even rank rows*cols/(rows+cols) reached eps_aca (it is then
    stored dense). The room at slots[b] is kmax (rows + cols) numbers, kmax the most rank ACA
    may take."""
    for b in prange(blocks.shape[0]):
        r0, m, c0, n = blocks[b, 0], blocks[b, 1], blocks[b, 2], blocks[b, 3]
        kmax = (slots[b + 1] - slots[b]) // (m + n)
        u, v, k, ok = _aca(r0, m, c0, n, eps_aca, kmax, kargs, rules[b])
        if not ok or k == 0:
            ranks[b] = -1 if not ok else 0
            continue
        uu, vv, r = _recompress(u, v, k, eps_svd)
        off = slots[b]
        for i in range(m):
            for l in range(r):
                scratch[off + i * r + l] = uu[l, i]
        off += m * r
        for j in range(n):
            for l in range(r):
                scratch[off + j * r + l] = vv[l, j]
        ranks[b] = r


@njit(parallel=True, cache=True)
def gather_blocks(blocks, slots, ranks, scratch, offsets, out):
    """Copy the compressed factors of blocks with ranks >= 0 from scratch to out[offsets[b]:]."""
    for b in prange(blocks.shape[0]):
        if ranks[b] > 0:
            size = ranks[b] * (blocks[b, 1] + blocks[b, 3])
            out[offsets[b]:offsets[b] + size] = scratch[slots[b]:slots[b] + size]


@njit(cache=True, fastmath=True)
def _dense_product(a, off, r0, m, c0, n, x, y, symmetric):
    # y[:, rows] += A x[:, cols], and for an off-diagonal block of a symmetric operator also
    # y[:, cols] += A^T x[:, rows]; x, y are (columns, panels): each row of A is read from
    # memory once for all columns
    for i in range(m):
        row = a[off + i * n:off + (i + 1) * n]
        for c in range(x.shape[0]):
            xs = x[c, c0:c0 + n]
            acc = 0.0
            for j in range(n):
                acc += row[j] * xs[j]
            y[c, r0 + i] += acc
            if symmetric and r0 != c0:
                ys = y[c, c0:c0 + n]
                xi = x[c, r0 + i]
                for j in range(n):
                    ys[j] += row[j] * xi


@njit(cache=True, fastmath=True)
def _lowrank_product(f, off, r, r0, m, c0, n, x, y, t, symmetric):
    # y[:, rows] += U (V^T x[:, cols]), and in a symmetric operator y[:, cols] += V (U^T
    # x[:, rows]); t is (2, columns, rank) scratch; each factor row is read from memory once
    # for all columns
    nc = x.shape[0]
    u = f[off:off + m * r]
    v = f[off + m * r:off + (m + n) * r]
    t[:, :nc, :r] = 0.0
    for j in range(n):
        vj = v[j * r:(j + 1) * r]
        for c in range(nc):
            xj = x[c, c0 + j]
            for l in range(r):
                t[0, c, l] += vj[l] * xj
    for i in range(m):
        ui = u[i * r:(i + 1) * r]
        for c in range(nc):
            xi = x[c, r0 + i]
            acc = 0.0
            for l in range(r):
                t[1, c, l] += ui[l] * xi
                acc += ui[l] * t[0, c, l]
            y[c, r0 + i] += acc
    if not symmetric:
        return
    for j in range(n):
        vj = v[j * r:(j + 1) * r]
        for c in range(nc):
            acc = 0.0
            for l in range(r):
                acc += vj[l] * t[1, c, l]
            y[c, c0 + j] += acc


@njit(parallel=True, cache=True)
def hmatrix_product(x, parts, dense_blocks, dense_offsets, dense_data, lr_blocks, lr_offsets,
                    lr_ranks, lr_data, dense_order, lr_order, dense_groups, lr_groups, max_rank,
                    symmetric):
    """parts[g] = the share of thread group g of (A x^T)^T, for x (nr, columns) in cluster
    numbering; parts (groups, nr, rows).

    Blocks are visited in the orders dense_order and lr_order; group g takes the dense blocks
    dense_order[dense_groups[g]:dense_groups[g+1]] and the low-rank blocks
    lr_order[lr_groups[g]:lr_groups[g+1]]; the caller sums parts. In a symmetric operator
    each stored block off the diagonal also acts as its transpose."""
    for g in prange(parts.shape[0]):
        y = parts[g]
        y[:] = 0.0
        t = np.empty((2, x.shape[0], max(max_rank, 1)))
        for q in range(dense_groups[g], dense_groups[g + 1]):
            b = dense_order[q]
            _dense_product(dense_data, dense_offsets[b], dense_blocks[b, 0], dense_blocks[b, 1],
                           dense_blocks[b, 2], dense_blocks[b, 3], x, y, symmetric)
        for q in range(lr_groups[g], lr_groups[g + 1]):
            b = lr_order[q]
            _lowrank_product(lr_data, lr_offsets[b], lr_ranks[b], lr_blocks[b, 0],
                             lr_blocks[b, 1], lr_blocks[b, 2], lr_blocks[b, 3], x, y, t,
                             symmetric)


@njit(cache=True)
def zero_charge_inverse(inv, areas):
    """inv - (inv a)(a^T inv) / (a^T inv a), a = areas, for inv the inverse of a subdomain's
    principal block: its solve restricted to charges of zero total, a . sigma = 0 (the
    Lagrange multiplier of that constraint eliminated). Returned as a new array."""
    w = inv @ areas
    return inv - np.outer(w, areas @ inv) / np.dot(areas, w)


@njit(parallel=True, cache=True)
def subdomain_inverses(bounds, areas, dense_ptr, dense_idx, dense_blocks, dense_offsets,
                       dense_data, lr_ptr, lr_idx, lr_blocks, lr_offsets, lr_ranks, lr_data,
                       inv_offsets, out):
    """The zero-charge inverse (zero_charge_inverse) of every principal block P[a:b, a:b],
    a = bounds[d], b = bounds[d + 1] (cluster numbering; areas of the panels in that
    numbering), written row-major to out[inv_offsets[d]:]. The stored blocks inside
    subdomain d are dense_idx[dense_ptr[d]:dense_ptr[d + 1]] and lr_idx[lr_ptr[d]:]."""
    for d in prange(bounds.shape[0] - 1):
        a, size = bounds[d], bounds[d + 1] - bounds[d]
        sub = np.zeros((size, size))
        for q in range(dense_ptr[d], dense_ptr[d + 1]):
            b = dense_idx[q]
            r0, m = dense_blocks[b, 0], dense_blocks[b, 1]
            c0, n = dense_blocks[b, 2], dense_blocks[b, 3]
            block = dense_data[dense_offsets[b]:dense_offsets[b] + m * n].reshape((m, n))
            sub[r0 - a:r0 - a + m, c0 - a:c0 - a + n] += block
            if r0 != c0:
                sub[c0 - a:c0 - a + n, r0 - a:r0 - a + m] += block.T
        for q in range(lr_ptr[d], lr_ptr[d + 1]):
            b = lr_idx[q]
            r0, m, c0, n = lr_blocks[b, 0], lr_blocks[b, 1], lr_blocks[b, 2], lr_blocks[b, 3]
            r = lr_ranks[b]
            off = lr_offsets[b]
            block = (lr_data[off:off + m * r].reshape((m, r))
                     @ lr_data[off + m * r:off + (m + n) * r].reshape((n, r)).T)
            sub[r0 - a:r0 - a + m, c0 - a:c0 - a + n] += block
            sub[c0 - a:c0 - a + n, r0 - a:r0 - a + m] += block.T
        inv = zero_charge_inverse(np.linalg.inv(sub), areas[a:a + size])
        out[inv_offsets[d]:inv_offsets[d] + size * size] = (0.5 * (inv + inv.T)).ravel()


@njit(cache=True)
def coarse_matrix(domain_of, n_domains, dense_blocks, dense_offsets, dense_data, lr_blocks,
                  lr_offsets, lr_ranks, lr_data):
    """R P R^T for R the (n_domains, n) matrix of subdomain indicators: entry (p, q) is the sum
    of P over rows in subdomain p and columns in subdomain q. domain_of: subdomain of each
    panel (cluster numbering)."""
    pc = np.zeros((n_domains, n_domains))
    for b in range(dense_blocks.shape[0]):
        r0, m = dense_blocks[b, 0], dense_blocks[b, 1]
        c0, n = dense_blocks[b, 2], dense_blocks[b, 3]
        off = dense_offsets[b]
        for i in range(m):
            p = domain_of[r0 + i]
            for j in range(n):
                q = domain_of[c0 + j]
                pc[p, q] += dense_data[off + i * n + j]
                if r0 != c0:
                    pc[q, p] += dense_data[off + i * n + j]
    for b in range(lr_blocks.shape[0]):
        r0, m, c0, n = lr_blocks[b, 0], lr_blocks[b, 1], lr_blocks[b, 2], lr_blocks[b, 3]
        r = lr_ranks[b]
        off = lr_offsets[b]
        p0, q0 = domain_of[r0], domain_of[c0]
        su = np.zeros((domain_of[r0 + m - 1] - p0 + 1, r))
        sv = np.zeros((domain_of[c0 + n - 1] - q0 + 1, r))
        for i in range(m):
            for l in range(r):
                su[domain_of[r0 + i] - p0, l] += lr_data[off + i * r + l]
        for j in range(n):
            for l in range(r):
                sv[domain_of[c0 + j] - q0, l] += lr_data[off + m * r + j * r + l]
        block = su @ sv.T
        for i in range(block.shape[0]):
            for j in range(block.shape[1]):
                pc[p0 + i, q0 + j] += block[i, j]
                pc[q0 + j, p0 + i] += block[i, j]
    return pc


@njit(parallel=True, cache=True)
def apply_subdomain_inverses(bounds, inv_offsets, inverses, r, z):
    """z[a:b] = inverse_d @ r[a:b] for every subdomain d; r, z (n, nr) in cluster numbering."""
    nr = r.shape[1]
    for d in prange(bounds.shape[0] - 1):
        a, size = bounds[d], bounds[d + 1] - bounds[d]
        off = inv_offsets[d]
        for i in range(size):
            for c in range(nr):
                z[a + i, c] = 0.0
            for j in range(size):
                w = inverses[off + i * size + j]
                for c in range(nr):
                    z[a + i, c] += w * r[a + j, c]

