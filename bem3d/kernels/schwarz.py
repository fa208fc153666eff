"""Pieces of the two-level Schwarz preconditioner: the subdomains' zero-charge inverses and the
coarse matrix, taken from the stored blocks of a hierarchical matrix."""

import numpy as np
from numba import njit, prange


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
        # one index type: the parallel loop's own (unsigned) would compile the callee twice
        _subdomain_inverse(np.int64(d), bounds, areas, dense_ptr, dense_idx, dense_blocks, dense_offsets,
                           dense_data, lr_ptr, lr_idx, lr_blocks, lr_offsets, lr_ranks, lr_data,
                           inv_offsets, out)


@njit(cache=True)
def _subdomain_inverse(d, bounds, areas, dense_ptr, dense_idx, dense_blocks, dense_offsets,
                       dense_data, lr_ptr, lr_idx, lr_blocks, lr_offsets, lr_ranks, lr_data,
                       inv_offsets, out):
    # subdomain d of subdomain_inverses, apart from its parallel loop: its array expressions
    # would otherwise each go through the parallel compiler's analysis, for nothing (parallel
    # loops nested in one run serially), which only lengthens the first run's compiling
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
