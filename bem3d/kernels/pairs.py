"""Numba kernels: integrals of 1/|x - y| over flat triangles and the Galerkin matrix.

Leaves of the package: they see only float arrays, never files or conductors.
The closed-form potential of a uniformly charged triangle follows Wilton, Rao, Glisson,
Schaubert, Al-Bundak & Butler (1984), IEEE Trans. Antennas Propag. AP-32(3), 276-281, and its
field Graglia (1993), IEEE Trans. Antennas Propag. AP-41(10), 1448-1455, written with
cancellation-free forms of R + l for points behind an edge.
"""

import math

import numpy as np
from numba import njit, prange


@njit(cache=True, inline="always")
def _edge_log(rm, rp, lm, lp, r0sq, length):
    # ln((R+ + l+) / (R- + l-)) = int_edge ds / |x - y|, written so that no R + l with l ~ -R
    # is formed (it loses every digit behind an edge): R + l = r0^2 / (R - l) there.
    # On an edge or corner the edge log is infinite (so is the field of a uniform panel);
    # x is kept a hair (1e-12 of the edge) away so that such points give a large finite value.
    hair = 1e-12 * length
    if lm >= 0.0:
        return math.log((rp + lp) / max(rm + lm, hair))
    if lp <= 0.0:
        return math.log((rm - lm) / max(rp - lp, hair))
    return math.log((rp + lp) * (rm - lm) / max(r0sq, hair * hair))


@njit(cache=True)
def triangle_integrals(x0, x1, x2, v, nrm):
    """Potential and field integrals of a unit uniform charge on triangle v (3, 3) at x.

    Returns (phi, g0, g1, g2, omega): phi = int_T dA_y / |x - y| (m), the vector
    g = -grad phi = int_T (x - y) / |x - y|^3 dA_y (dimensionless), and omega, the solid
    angle (sr) the triangle subtends at x, positive seen from the side its normal points to.
    nrm is the unit normal by the right-hand rule on v's corner order. Exact for any x
    (Wilton et al. 1984 for phi; Graglia 1993, IEEE Trans. AP-41(10), for g:
    g = sum_i u_i f_i + sign(d) n omega_abs, u_i the outward edge normals, f_i the edge logs).
    In the plane of the triangle the normal part of g is the principal value (the mean of
    the two sides, which differ by 2 pi)."""
    n0, n1, n2 = nrm[0], nrm[1], nrm[2]
    d = (x0 - v[0, 0]) * n0 + (x1 - v[0, 1]) * n1 + (x2 - v[0, 2]) * n2
    # a point meant to lie on the panel (a centroid, say) sits ~1e-17 off its plane after
    # rounding; treat it as in the plane so that it gets the principal value, not one side
    size = abs(v[1, 0] - v[0, 0]) + abs(v[1, 1] - v[0, 1]) + abs(v[1, 2] - v[0, 2])
    if abs(d) < 1e-12 * size:
        d = 0.0
    ad = abs(d)
    log_sum = 0.0
    atan_sum = 0.0
    g0 = 0.0
    g1 = 0.0
    g2 = 0.0
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
        f = _edge_log(rm, rp, lm, lp, r0sq, length)
        g0 += u0 * f
        g1 += u1 * f
        g2 += u2 * f
        if abs(p0) > 1e-14 * length:
            log_sum += p0 * f
            if ad > 0.0:
                atan_sum += (math.atan(p0 * lp / (r0sq + ad * rp))
                             - math.atan(p0 * lm / (r0sq + ad * rm)))
    sign = 0.0
    if d > 0.0:
        sign = 1.0
    elif d < 0.0:
        sign = -1.0
    g0 += sign * n0 * atan_sum
    g1 += sign * n1 * atan_sum
    g2 += sign * n2 * atan_sum
    return log_sum - ad * atan_sum, g0, g1, g2, sign * atan_sum


@njit(cache=True, inline="always")
def triangle_potential(x0, x1, x2, v, nrm):
    """Integral over triangle v (3, 3) of 1/|x - y| dA_y (metres), for x = (x0, x1, x2).

    nrm is the unit normal by the right-hand rule on v's corner order. Exact for any x,
    including points on the triangle, its edges and their extensions."""
    return triangle_integrals(x0, x1, x2, v, nrm)[0]


@njit(cache=True)
def _ray_sector(y0, y1, a, b, th0, th1):
    # int_{th0}^{th1} sin(th) rho(th)^2 dth for rays from y (in the panel's 2-D frame) ending on
    # the line through a and b at distance p along its unit normal n (angle beta):
    # rho = p / cos(th - beta), and the antiderivative of sin(psi + beta) / cos(psi)^2 is
    # cos(beta) sec(psi) + sin(beta) ln((1 + sin psi) / cos psi).
    e0, e1 = b[0] - a[0], b[1] - a[1]
    length = math.sqrt(e0 * e0 + e1 * e1)
    n0, n1 = e1 / length, -e0 / length
    p = (a[0] - y0) * n0 + (a[1] - y1) * n1
    if p < 0.0:
        n0, n1, p = -n0, -n1, -p
    beta = math.atan2(n1, n0)
    cb, sb = math.cos(beta), math.sin(beta)
    total = 0.0
    for th, sign in ((th1, 1.0), (th0, -1.0)):
        psi = th - beta
        c, s = math.cos(psi), math.sin(psi)
        # (1 + s) / c loses digits as psi -> -pi/2; c / (1 - s) is the same number
        ratio = (1.0 + s) / c if s >= 0.0 else c / (1.0 - s)
        total += sign * (cb / c + sb * math.log(ratio))
    return p * p * total


@njit(cache=True)
def self_integral(v, nodes, weights):
    """int_T int_T 1/|x - y| dA_x dA_y (m^3) for one flat triangle v (3, 3), to rounding.

    In the panel's plane the closed-form potential is sum_i t_i(x) int_{edge i} ds/|x - y|
    (t_i: distance from x to edge line i), so the double integral is
    sum_i int_{edge i} ds_y int_T t_i(x)/|x - y| dA_x; the inner integral in polar coordinates
    about y is (1/2) int_0^pi sin(th) rho(th)^2 dth, done in closed form (_ray_sector) on the two
    sectors whose rays end on the other two edges. The remaining smooth integral along each
    edge uses Gauss-Legendre `nodes`/`weights` on [0, 1]."""
    total = 0.0
    a2 = np.empty(2)
    b2 = np.empty(2)
    r2 = np.empty(2)
    for i in range(3):
        p, q, r = v[i], v[(i + 1) % 3], v[(i + 2) % 3]
        t = q - p
        length = math.sqrt(t[0] * t[0] + t[1] * t[1] + t[2] * t[2])
        t = t / length
        w = r - p
        rx = w[0] * t[0] + w[1] * t[1] + w[2] * t[2]
        m = w - rx * t
        ry = math.sqrt(m[0] * m[0] + m[1] * m[1] + m[2] * m[2])
        # 2-D frame: p = (0, 0), q = (length, 0), r = (rx, ry) with ry > 0
        a2[0], a2[1] = length, 0.0
        b2[0], b2[1] = 0.0, 0.0
        r2[0], r2[1] = rx, ry
        edge = 0.0
        for g in range(nodes.shape[0]):
            s = nodes[g] * length
            th_v = math.atan2(ry, rx - s)
            edge += weights[g] * (_ray_sector(s, 0.0, a2, r2, 0.0, th_v)
                                  + _ray_sector(s, 0.0, r2, b2, th_v, math.pi))
        total += 0.5 * edge * length
    return total


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
def moment_pair(a, b, c, d2, qk, k, ql, l):
    """The mean of 1/|x - y| over panels k and l whose centroids lie (a, b, c) apart (m;
    d2 = a^2 + b^2 + c^2), to second order in the panels' size (1/m): the Taylor expansion
    1/d + tr(H Q) / 2 with H = (3 R R^T - d^2 I) / d^5 the Hessian of 1/d and Q = Q_k + Q_l
    the panels' covariances (Panels.moments, rows qk[k] and ql[l]); the first-order terms
    vanish about the centroids. The third-order term is left out (a triangle is not symmetric
    about its centroid), so the relative error falls like (radius / d)^3."""
    q0 = qk[k, 0] + ql[l, 0]
    q1 = qk[k, 1] + ql[l, 1]
    q2 = qk[k, 2] + ql[l, 2]
    q3 = qk[k, 3] + ql[l, 3]
    q4 = qk[k, 4] + ql[l, 4]
    q5 = qk[k, 5] + ql[l, 5]
    rqr = a * a * q0 + b * b * q1 + c * c * q2 + 2.0 * (a * b * q3 + a * c * q4 + b * c * q5)
    inv = 1.0 / math.sqrt(d2)
    return inv * (1.0 + 0.5 * (3.0 * rqr / d2 - (q0 + q1 + q2)) / d2)


@njit(cache=True, inline="always")
def _pair(k, l, vk, nk, ck, rk, ak, qk, hk, mk, fk, vl, nl, cl, rl, al, ql, hl, ml, fl,
          w_hi, w_near, w_mid, self_s, self_w, touch, near, mid, far, same):
    # panel k of one set against panel l of another (or the same set, same=True); q are the
    # second moments, h, m, f the touch, near and mid rule points of each set
    a = ck[k, 0] - cl[l, 0]
    b = ck[k, 1] - cl[l, 1]
    c = ck[k, 2] - cl[l, 2]
    d2 = a * a + b * b + c * c
    s = rk[k] + rl[l]
    aa = ak[k] * al[l]
    if d2 > (far * s) ** 2:
        return aa * moment_pair(a, b, c, d2, qk, k, ql, l)
    if d2 > (mid * s) ** 2:
        return aa * _point_pair_sum(fk[k], w_mid, fl[l], w_mid)
    if d2 > (near * s) ** 2:
        return aa * _point_pair_sum(mk[k], w_near, ml[l], w_near)
    if same and k == l:
        return self_integral(vk[k], self_s, self_w)
    # outer rule on the smaller panel, closed form over the larger
    if ak[k] <= al[l]:
        if d2 <= (touch * s) ** 2:
            return ak[k] * _outer_closed_sum(hk[k], w_hi, vl[l], nl[l])
        return ak[k] * _outer_closed_sum(mk[k], w_near, vl[l], nl[l])
    if d2 <= (touch * s) ** 2:
        return al[l] * _outer_closed_sum(hl[l], w_hi, vk[k], nk[k])
    return al[l] * _outer_closed_sum(ml[l], w_near, vk[k], nk[k])


@njit(cache=True, inline="always")
def panel_pair_integral(k, l, verts, normals, centroids, radii, areas, moments,
                        pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w,
                        touch, near, mid, far):
    """Integral over panels k and l of 1/|x - y| dA_x dA_y (m^3), rule chosen by proximity.

    Distance is measured in units of s = radius_k + radius_l between centroids:
    beyond `far` the centroids' value with the second-moment term (moment_pair); beyond `mid`
    the low (mid) rule on both; beyond `near` the
    near rule on both; closer, a point rule on the smaller panel and the closed form on the
    larger (the graded rule inside `touch`); a panel with itself by `self_integral` with edge
    rule self_s, self_w.
    """
    return _pair(k, l, verts, normals, centroids, radii, areas, moments, pts_hi, pts_near,
                 pts_mid, verts, normals, centroids, radii, areas, moments, pts_hi, pts_near,
                 pts_mid, w_hi, w_near, w_mid, self_s, self_w, touch, near, mid, far, True)


@njit(cache=True)
def _image_row(k, out, verts, normals, centroids, radii, areas, moments, pts_hi, w_hi,
               pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far,
               i_verts, i_normals, i_centroids, i_moments, i_pts_hi, i_pts_near, i_pts_mid):
    for l in range(k + 1):
        out[k, l] -= _pair(k, l, verts, normals, centroids, radii, areas, moments, pts_hi,
                           pts_near, pts_mid, i_verts, i_normals, i_centroids, radii, areas,
                           i_moments, i_pts_hi, i_pts_near, i_pts_mid, w_hi, w_near, w_mid,
                           self_s, self_w, touch, near, mid, far, False)


@njit(parallel=True, cache=True)
def subtract_images(out, verts, normals, centroids, radii, areas, moments,
                    pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w,
                    touch, near, mid, far,
                    i_verts, i_normals, i_centroids, i_moments, i_pts_hi, i_pts_near, i_pts_mid):
    """out[k, l] -= int_Tk int_Tl' 1/|x - y| for the mirror images l' of the panels in a
    grounded plane (method of images: each panel's image carries the opposite charge).
    The image block is symmetric (reflecting both panels swaps them), so its lower triangle is
    computed and the result mirrored. The image arrays share areas and radii with the panels."""
    n = areas.shape[0]
    for i in prange((n + 1) // 2):
        i = np.int64(i)          # prange indices may be unsigned; keep index arithmetic signed
        _image_row(i, out, verts, normals, centroids, radii, areas, moments, pts_hi, w_hi,
                   pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far,
                   i_verts, i_normals, i_centroids, i_moments, i_pts_hi, i_pts_near, i_pts_mid)
        j = n - 1 - i
        if j != i:
            _image_row(j, out, verts, normals, centroids, radii, areas, moments, pts_hi, w_hi,
                       pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far,
                       i_verts, i_normals, i_centroids, i_moments, i_pts_hi, i_pts_near,
                       i_pts_mid)
    _mirror_lower(out)


@njit(cache=True, error_model="numpy")
def _fill_row(k, out, verts, normals, centroids, radii, areas, moments,
              pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far):
    # first the far value (moment_pair) for every pair (a branch-free loop the compiler
    # vectorises), then the few pairs inside `far` are recomputed with their proper rule
    ck0, ck1, ck2, ak, rk = centroids[k, 0], centroids[k, 1], centroids[k, 2], areas[k], radii[k]
    for l in range(k + 1):
        a = ck0 - centroids[l, 0]
        b = ck1 - centroids[l, 1]
        c = ck2 - centroids[l, 2]
        out[k, l] = ak * areas[l] * moment_pair(a, b, c, a * a + b * b + c * c, moments, k,
                                                moments, l)
    far2 = far * far
    for l in range(k + 1):
        a = ck0 - centroids[l, 0]
        b = ck1 - centroids[l, 1]
        c = ck2 - centroids[l, 2]
        s = rk + radii[l]
        if a * a + b * b + c * c <= far2 * s * s:
            out[k, l] = panel_pair_integral(k, l, verts, normals, centroids, radii, areas,
                                            moments, pts_hi, w_hi, pts_near, w_near, pts_mid,
                                            w_mid, self_s, self_w, touch, near, mid, far)


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
def assemble_dense(out, verts, normals, centroids, radii, areas, moments,
                   pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far):
    """Fill out (n, n) with the Galerkin integrals of 1/|x - y| for every panel pair (m^3).

    Only the lower triangle is computed (row by row, contiguous), then mirrored; rows are paired (k, n-1-k) so that both
    threads get the same amount of work."""
    n = areas.shape[0]
    for i in prange((n + 1) // 2):
        i = np.int64(i)          # prange indices may be unsigned; keep index arithmetic signed
        _fill_row(i, out, verts, normals, centroids, radii, areas, moments,
                  pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far)
        j = n - 1 - i
        if j != i:
            _fill_row(j, out, verts, normals, centroids, radii, areas, moments,
                      pts_hi, w_hi, pts_near, w_near, pts_mid, w_mid, self_s, self_w, touch, near, mid, far)
    _mirror_lower(out)


@njit(parallel=True, cache=True, error_model="numpy", fastmath=True)
def evaluate_points(points, sigma, closed, verts, normals, centroids, radii, areas,
                    pts_mid, w_mid, pts_near, w_near, near, mid, far, phi, grad, winding):
    """Potential and field integrals of panel charges sigma (n_panels, k) at points (m, 3).

    Fills phi (m, k) with sum_l sigma_l int_Tl dA/|x - y| (C/m) and grad (m, k, 3) with
    sum_l sigma_l int_Tl (x - y)/|x - y|^3 dA (C/m^2); the caller divides by 4 pi eps.
    winding (m,) gets the winding number of the panels whose `closed` flag is 1 (1 inside a
    closed conductor, 0 outside). Distances in units of the panel radius: one point beyond
    `far`, the mid rule beyond `mid`, the near rule beyond `near`, the closed form inside."""
    m = points.shape[0]
    n = areas.shape[0]
    k = sigma.shape[1]
    for i in prange(m):
        x0, x1, x2 = points[i, 0], points[i, 1], points[i, 2]
        # one-point values for every panel (branch-free, vectorised), one excitation at a
        # time so that the sums stay in registers ...
        for j in range(k):
            sp = 0.0
            s0 = 0.0
            s1 = 0.0
            s2 = 0.0
            sw = 0.0
            for l in range(n):
                r0 = x0 - centroids[l, 0]
                r1 = x1 - centroids[l, 1]
                r2 = x2 - centroids[l, 2]
                d2 = r0 * r0 + r1 * r1 + r2 * r2
                inv = 1.0 / math.sqrt(d2) if d2 > 0.0 else 0.0     # a point on a centroid
                a = sigma[l, j] * areas[l] * inv
                b = a * inv * inv
                sp += a
                s0 += b * r0
                s1 += b * r1
                s2 += b * r2
                if j == 0:
                    sw -= closed[l] * areas[l] * inv * inv * inv * (
                        r0 * normals[l, 0] + r1 * normals[l, 1] + r2 * normals[l, 2])
            phi[i, j] += sp
            grad[i, j, 0] += s0
            grad[i, j, 1] += s1
            grad[i, j, 2] += s2
            winding[i] += sw
        # ... then the panels inside `far` are replaced by their proper rule
        for l in range(n):
            r0 = x0 - centroids[l, 0]
            r1 = x1 - centroids[l, 1]
            r2 = x2 - centroids[l, 2]
            d2 = r0 * r0 + r1 * r1 + r2 * r2
            rl = radii[l]
            if d2 >= (far * rl) ** 2:
                continue
            inv = 1.0 / math.sqrt(d2) if d2 > 0.0 else 0.0
            a = areas[l] * inv
            b = a * inv * inv
            p = -a
            g0, g1, g2 = -b * r0, -b * r1, -b * r2
            w = b * (r0 * normals[l, 0] + r1 * normals[l, 1] + r2 * normals[l, 2])
            if d2 < (near * rl) ** 2:
                pc, h0, h1, h2, om = triangle_integrals(x0, x1, x2, verts[l], normals[l])
                p += pc
                g0 += h0
                g1 += h1
                g2 += h2
                w -= om
            else:
                q = pts_mid[l]
                wq = w_mid
                if d2 < (mid * rl) ** 2:
                    q = pts_near[l]
                    wq = w_near
                for t in range(q.shape[0]):
                    s0, s1, s2 = x0 - q[t, 0], x1 - q[t, 1], x2 - q[t, 2]
                    iv = 1.0 / math.sqrt(s0 * s0 + s1 * s1 + s2 * s2)
                    aq = areas[l] * wq[t] * iv
                    bq = aq * iv * iv
                    p += aq
                    g0 += bq * s0
                    g1 += bq * s1
                    g2 += bq * s2
                    w -= bq * (s0 * normals[l, 0] + s1 * normals[l, 1] + s2 * normals[l, 2])
            winding[i] += closed[l] * w
            for j in range(k):
                s = sigma[l, j]
                phi[i, j] += s * p
                grad[i, j, 0] += s * g0
                grad[i, j, 1] += s * g1
                grad[i, j, 2] += s * g2
    for i in prange(m):
        winding[i] /= 4.0 * math.pi


@njit(cache=True, inline="always")
def points_normal_field(x0, x1, x2, m0, m1, m2, q, wq):
    """sum_t wq_t m . (x - y_t) / |x - y_t|^3 over a source panel's rule points y_t = q[t] (t, 3):
    the normal field (unit normal m) at x of a unit charge spread by the rule, per unit area."""
    acc = 0.0
    for t in range(q.shape[0]):
        s0, s1, s2 = x0 - q[t, 0], x1 - q[t, 1], x2 - q[t, 2]
        iv = 1.0 / math.sqrt(s0 * s0 + s1 * s1 + s2 * s2)
        acc += wq[t] * iv * iv * iv * (s0 * m0 + s1 * m1 + s2 * m2)
    return acc


@njit(cache=True, inline="always", error_model="numpy")
def normal_field_entry(i, l, points, weights, point_normals, verts, normals, centroids, radii,
                       areas, pts_mid, w_mid, pts_near, w_near, near, mid, far):
    """sum_q weights_q n_i . int_Tl (x_iq - y)/|x_iq - y|^3 dA_y (dimensionless): the normal
    field of a unit charge density on panel l, averaged over test points x_iq (m, q, 3) with
    unit normal n_i. A point on a panel gets the principal value (its own panel contributes
    no normal field). Rules by distance in panel radii as in evaluate_points."""
    m0, m1, m2 = point_normals[i, 0], point_normals[i, 1], point_normals[i, 2]
    rl = radii[l]
    total = 0.0
    for p in range(points.shape[1]):
        x0, x1, x2 = points[i, p, 0], points[i, p, 1], points[i, p, 2]
        r0 = x0 - centroids[l, 0]
        r1 = x1 - centroids[l, 1]
        r2 = x2 - centroids[l, 2]
        d2 = r0 * r0 + r1 * r1 + r2 * r2
        if d2 >= (far * rl) ** 2:
            inv = 1.0 / math.sqrt(d2)
            total += weights[p] * areas[l] * inv * inv * inv * (r0 * m0 + r1 * m1 + r2 * m2)
        elif d2 < (near * rl) ** 2:
            _, g0, g1, g2, _ = triangle_integrals(x0, x1, x2, verts[l], normals[l])
            total += weights[p] * (g0 * m0 + g1 * m1 + g2 * m2)
        else:
            q = pts_mid[l]
            wq = w_mid
            if d2 < (mid * rl) ** 2:
                q = pts_near[l]
                wq = w_near
            total += weights[p] * areas[l] * points_normal_field(x0, x1, x2, m0, m1, m2, q, wq)
    return total


@njit(parallel=True, cache=True, error_model="numpy")
def assemble_normal_field(out, points, weights, point_normals, verts, normals, centroids, radii,
                          areas, pts_mid, w_mid, pts_near, w_near, near, mid, far):
    """out[i, l] = normal_field_entry(i, l, ...) for every test panel i and source panel l."""
    for i in prange(points.shape[0]):
        for l in range(areas.shape[0]):
            out[i, l] = normal_field_entry(i, l, points, weights, point_normals, verts, normals,
                                           centroids, radii, areas, pts_mid, w_mid, pts_near,
                                           w_near, near, mid, far)
