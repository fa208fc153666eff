"""Low-rank blocks: adaptive cross approximation, then QR/SVD recompression.

Low-rank blocks are stored as U (rows, rank) and V (cols, rank), row-major, block ~ U V^T.
"""

import math

import numpy as np
from numba import njit, prange

from bem3d.kernels.entries import block_entries

#: Residual rows and columns sampled at random to confirm that ACA has converged.
ACA_CHECKS = 2


@njit(cache=True)
def _residual_row(i, r0, c0, n, k, u, v, out, operator, rule):
    # out = row i of (block - sum_l u_l v_l^T)
    block_entries(r0 + i, 0, c0, 1, n, out, operator, rule)
    for l in range(k):
        f = u[l, i]
        for j in range(n):
            out[j] -= f * v[l, j]


@njit(cache=True)
def _residual_col(j, r0, c0, m, k, u, v, out, operator, rule):
    # out = column j of (block - sum_l u_l v_l^T)
    block_entries(r0, 1, c0 + j, 0, m, out, operator, rule)
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
def _aca(r0, m, c0, n, eps, kmax, operator, rule):
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
    # typed int64 from the start: a literal 0 would compile the residual kernels once more
    k = np.int64(0)
    i = np.int64(0)
    while k < kmax:
        used_row[i] = True
        _residual_row(i, r0, c0, n, k, u, v, v[k], operator, rule)
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
        _residual_col(jp, r0, c0, m, k, u, v, u[k], operator, rule)
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
                    _residual_row(ir, r0, c0, n, k, u, v, row, operator, rule)
                    if m * np.dot(row, row) > eps * eps * norm2:
                        bad = ir
                        break
                seed = (seed * 1103515245 + 12345) % 2147483648
                jc = _unused(used_col, seed)
                if jc >= 0:
                    _residual_col(jc, r0, c0, m, k, u, v, col, operator, rule)
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
def compress_blocks(blocks, rules, slots, scratch, ranks, eps_aca, eps_svd, operator):
    """ACA and SVD recompression of each block (k, 4) of `operator` (data.SingleLayer or
    data.NormalField) by its quadrature rule rules[b]; writes
    U then V of block b at scratch[slots[b]:] and its rank to ranks[b], or ranks[b] = -1 if no
    rank below the block's break-even rank rows*cols/(rows+cols) reached eps_aca (it is then
    stored dense). The room at slots[b] is kmax (rows + cols) numbers, kmax the most rank ACA
    may take."""
    for b in prange(blocks.shape[0]):
        r0, m, c0, n = blocks[b, 0], blocks[b, 1], blocks[b, 2], blocks[b, 3]
        kmax = (slots[b + 1] - slots[b]) // (m + n)
        u, v, k, ok = _aca(r0, m, c0, n, eps_aca, kmax, operator, rules[b])
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
