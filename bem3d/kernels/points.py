"""Fields of panel charges at points: potential, field and winding number at any points, and
the normal field at a test panel's points (an entry of the dielectric interfaces' rows)."""

import math

from numba import njit, prange

from bem3d.kernels.triangle import triangle_integrals


@njit(parallel=True, cache=True, error_model="numpy", fastmath=True)
def evaluate_points(points, sigma, closed, sources, phi, grad, winding):
    """Potential and field integrals of panel charges sigma (n_panels, k) at points (m, 3).

    sources: data.PointSources. Fills phi (m, k) with sum_l sigma_l int_Tl dA/|x - y| (C/m)
    and grad (m, k, 3) with sum_l sigma_l int_Tl (x - y)/|x - y|^3 dA (C/m^2); the caller
    divides by 4 pi eps. winding (m,) gets the winding number of the panels whose `closed`
    flag is 1 (1 inside a closed conductor, 0 outside). Distances in units of the panel
    radius: one point beyond `far`, the mid rule beyond `mid`, the near rule beyond `near`,
    the closed form inside."""
    verts, normals, centroids, radii = (sources.verts, sources.normals, sources.centroids,
                                        sources.radii)
    areas, pts_mid, w_mid, pts_near, w_near = (sources.areas, sources.pts_mid, sources.w_mid,
                                               sources.pts_near, sources.w_near)
    near, mid, far = sources.near, sources.mid, sources.far
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
    no normal field). Rules by distance in panel radii as in evaluate_points; the arrays of
    data.NormalField, unpacked, as compiled loops take them."""
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
