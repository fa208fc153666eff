"""Closed forms over one flat triangle: potential and field of a uniform charge, and the
self integral of 1/|x - y|.

The potential of a uniformly charged triangle follows Wilton, Rao, Glisson, Schaubert,
Al-Bundak & Butler (1984), IEEE Trans. Antennas Propag. AP-32(3), 276-281, and its field
Graglia (1993), IEEE Trans. Antennas Propag. AP-41(10), 1448-1455, written with
cancellation-free forms of R + l for points behind an edge.
"""

import math

import numpy as np
from numba import njit


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
