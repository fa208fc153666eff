"""Numba kernels: integrals of 1/|x - y| over flat triangles and the Galerkin matrix.

Leaves of the package: they see only float arrays, never files or conductors.
The closed-form potential of a uniformly charged triangle follows Wilton, Rao, Glisson,
Schaubert, Al-Bundak & Butler (1984), IEEE Trans. Antennas Propag. AP-32(3), 276-281, eq. (5)-(8),
written with cancellation-free forms of R + l for points behind an edge.
"""

import math

import numpy as np
from numba import njit, prange


@njit(cache=True, inline="always")
def _r_plus_l(R, l, r0sq):
    # R + l loses all digits when l ~ -R (point behind the edge, near its line); use the
    # identity R + l = (R^2 - l^2) / (R - l) = r0^2 / (R - l) there.
    if l >= 0.0:
        return R + l
    return r0sq / (R - l)


@njit(cache=True)
def triangle_potential(x0, x1, x2, v, nrm):
    """Integral over triangle v (3, 3) of 1/|x - y| dA_y (metres), for x = (x0, x1, x2).

    nrm is the unit normal by the right-hand rule on v's corner order. Exact for any x,
    including points on the triangle, its edges and their extensions."""
    n0, n1, n2 = nrm[0], nrm[1], nrm[2]
    d = (x0 - v[0, 0]) * n0 + (x1 - v[0, 1]) * n1 + (x2 - v[0, 2]) * n2
    ad = abs(d)
    log_sum = 0.0
    atan_sum = 0.0
    for e in range(3):
        p = v[e]
        q = v[(e + 1) % 3]
        t0, t1, t2 = q[0] - p[0], q[1] - p[1], q[2] - p[2]
        length = math.sqrt(t0 * t0 + t1 * t1 + t2 * t2)
        t0, t1, t2 = t0 / length, t1 / length, t2 / length
        # outward in-plane edge normal u = t x n
        u0 = t1 * n2 - t2 * n1
        u1 = t2 * n0 - t0 * n2
        u2 = t0 * n1 - t1 * n0
        pr0, pr1, pr2 = p[0] - x0, p[1] - x1, p[2] - x2
        qr0, qr1, qr2 = q[0] - x0, q[1] - x1, q[2] - x2
        p0 = pr0 * u0 + pr1 * u1 + pr2 * u2
        lm = pr0 * t0 + pr1 * t1 + pr2 * t2
        lp = qr0 * t0 + qr1 * t1 + qr2 * t2
        rm = math.sqrt(pr0 * pr0 + pr1 * pr1 + pr2 * pr2)
        rp = math.sqrt(qr0 * qr0 + qr1 * qr1 + qr2 * qr2)
        r0sq = p0 * p0 + d * d
        if abs(p0) > 1e-14 * length:
            log_sum += p0 * math.log(_r_plus_l(rp, lp, r0sq) / _r_plus_l(rm, lm, r0sq))
            if ad > 0.0:
                atan_sum += (math.atan(p0 * lp / (r0sq + ad * rp))
                             - math.atan(p0 * lm / (r0sq + ad * rm)))
    return log_sum - ad * atan_sum


@njit(cache=True, inline="always")
def _point_pair_sum(xk, wk, xl, wl):
    s = 0.0
    for i in range(xk.shape[0]):
        for j in range(xl.shape[0]):
            a = xk[i, 0] - xl[j, 0]
            b = xk[i, 1] - xl[j, 1]
            c = xk[i, 2] - xl[j, 2]
            s += wk[i] * wl[j] / math.sqrt(a * a + b * b + c * c)
    return s


@njit(cache=True, inline="always")
def _outer_closed_sum(xk, wk, vl, nl):
    s = 0.0
    for i in range(xk.shape[0]):
        s += wk[i] * triangle_potential(xk[i, 0], xk[i, 1], xk[i, 2], vl, nl)
    return s


@njit(cache=True, inline="always")
def panel_pair_integral(k, l, verts, normals, centroids, radii, areas,
                        pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid,
                        touch, near, far):
    """Integral over panels k and l of 1/|x - y| dA_x dA_y (m^3), rule chosen by proximity.

    Distance is measured in units of s = radius_k + radius_l between centroids:
    beyond `far` one point each; beyond `near` a point rule on both; closer, a point rule on
    the smaller panel and the closed form on the larger (high order inside `touch` and for k = l).
    """
    a = centroids[k, 0] - centroids[l, 0]
    b = centroids[k, 1] - centroids[l, 1]
    c = centroids[k, 2] - centroids[l, 2]
    d2 = a * a + b * b + c * c
    s = radii[k] + radii[l]
    aa = areas[k] * areas[l]
    if d2 > (far * s) ** 2:
        return aa / math.sqrt(d2)
    if d2 > (near * s) ** 2:
        return aa * _point_pair_sum(pts_mid[k], w_mid, pts_mid[l], w_mid)
    # outer rule on the smaller panel, closed form over the larger
    o = k
    f = l
    if areas[k] > areas[l]:
        o = l
        f = k
    if k == l or d2 <= (touch * s) ** 2:
        return areas[o] * _outer_closed_sum(pts_hi[o], w_hi, verts[f], normals[f])
    return areas[o] * _outer_closed_sum(pts_near[o], w_near, verts[f], normals[f])


@njit(cache=True)
def _fill_row(k, out, verts, normals, centroids, radii, areas,
              pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, touch, near, far):
    for l in range(k + 1):
        g = panel_pair_integral(k, l, verts, normals, centroids, radii, areas,
                                pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid,
                                touch, near, far)
        out[k, l] = g


@njit(parallel=True, cache=True)
def _mirror_lower(out):
    # copy the lower triangle to the upper in tiles, so both reads and writes stay in cache
    n = out.shape[0]
    tile = 64
    nt = (n + tile - 1) // tile
    for bi in prange(nt):
        for bj in range(bi + 1):
            for i in range(bi * tile, min(n, (bi + 1) * tile)):
                for j in range(bj * tile, min(i, (bj + 1) * tile)):
                    out[j, i] = out[i, j]


@njit(parallel=True, cache=True)
def assemble_dense(out, verts, normals, centroids, radii, areas,
                   pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, touch, near, far):
    """Fill out (n, n) with the Galerkin integrals of 1/|x - y| for every panel pair (m^3).

    Only the lower triangle is computed (row by row, contiguous), then mirrored; rows are paired (k, n-1-k) so that both
    threads get the same amount of work."""
    n = areas.shape[0]
    for i in prange((n + 1) // 2):
        i = np.int64(i)          # prange indices may be unsigned; keep index arithmetic signed
        _fill_row(i, out, verts, normals, centroids, radii, areas,
                  pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, touch, near, far)
        j = n - 1 - i
        if j != i:
            _fill_row(j, out, verts, normals, centroids, radii, areas,
                      pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, touch, near, far)
    _mirror_lower(out)
