"""Products of the stored blocks of a hierarchical matrix with a block of vectors."""

import numpy as np
from numba import njit, prange


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
