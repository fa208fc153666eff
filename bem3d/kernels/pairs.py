"""Galerkin integrals of 1/|x - y| over a pair of panels, the rule chosen by their distance.

Leaves of the package: they see only float arrays, never files or conductors.
"""

import math

from numba import njit

from bem3d.kernels.triangle import self_integral, triangle_potential


@njit(cache=True, inline="always")
def point_pair_sum(xk, wk, xl, wl):
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
def pair_integral(k, l, vk, nk, ck, rk, ak, qk, hk, mk, fk, vl, nl, cl, rl, al, ql, hl, ml, fl,
                  w_hi, w_near, w_mid, self_s, self_w, touch, near, mid, far, same):
    """Galerkin integral (m^3) of panel k of one set against panel l of another (or the same
    set, same=True), by the rule of panel_pair_integral; the arrays of data.SingleLayer,
    unpacked (q: second moments, h, m, f: touch, near and mid rule
    points of each set), so that compiled loops read no structure per entry."""
    a = ck[k, 0] - cl[l, 0]
    b = ck[k, 1] - cl[l, 1]
    c = ck[k, 2] - cl[l, 2]
    d2 = a * a + b * b + c * c
    s = rk[k] + rl[l]
    aa = ak[k] * al[l]
    if d2 > (far * s) ** 2:
        return aa * moment_pair(a, b, c, d2, qk, k, ql, l)
    if d2 > (mid * s) ** 2:
        return aa * point_pair_sum(fk[k], w_mid, fl[l], w_mid)
    if d2 > (near * s) ** 2:
        return aa * point_pair_sum(mk[k], w_near, ml[l], w_near)
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


@njit(cache=True)
def panel_pair_integral(k, l, data):
    """Integral over panels k and l of data (data.SingleLayer) of 1/|x - y| dA_x dA_y (m^3),
    rule chosen by proximity.

    Distance is measured in units of s = radius_k + radius_l between centroids:
    beyond `far` the centroids' value with the second-moment term (moment_pair); beyond `mid`
    the low (mid) rule on both; beyond `near` the
    near rule on both; closer, a point rule on the smaller panel and the closed form on the
    larger (the graded rule inside `touch`); a panel with itself by `self_integral` with edge
    rule self_s, self_w. The matrix kernels call pair_integral on the unpacked arrays.
    """
    d = data
    return pair_integral(k, l, d.verts, d.normals, d.centroids, d.radii, d.areas, d.moments,
                         d.pts_hi, d.pts_near, d.pts_mid, d.verts, d.normals, d.centroids,
                         d.radii, d.areas, d.moments, d.pts_hi, d.pts_near, d.pts_mid, d.w_hi,
                         d.w_near, d.w_mid, d.self_s, d.self_w, d.touch, d.near, d.mid, d.far,
                         True)
