"""Quadrature rules on a triangle, as barycentric points and weights that sum to 1.

A rule's integral over a panel of area A is  A * sum_i w_i f(x_i)  with
x_i = l0_i v0 + l1_i v1 + l2_i v2.

Symmetric rules of degree 1, 2 and 5 are the tabulated ones (degree 5 is the 7-point rule of
Radon 1948, also in Dunavant 1985, Int. J. Numer. Meth. Eng. 21); higher degrees use the Stroud
conical product of Gauss-Jacobi and Gauss-Legendre rules (Stroud 1971, *Approximate Calculation
of Multiple Integrals*), exact to degree 2n-1 with n^2 points. Pairs of touching panels use a
graded Duffy product rule (Duffy 1982, SIAM J. Numer. Anal. 19) instead of a polynomial one. tests/test_quadrature.py checks
every rule against exact integrals of barycentric monomials.
"""

import numpy as np
from scipy.special import roots_jacobi, roots_legendre


def _symmetric_rule(degree):
    if degree == 1:
        return np.array([[1 / 3, 1 / 3, 1 / 3]]), np.array([1.0])
    if degree == 2:
        a, b = 2 / 3, 1 / 6
        return np.array([[a, b, b], [b, a, b], [b, b, a]]), np.full(3, 1 / 3)
    if degree == 5:
        s = np.sqrt(15.0)
        a1, b1, w1 = (9 - 2 * s) / 21, (6 + s) / 21, (155 + s) / 1200
        a2, b2, w2 = (9 + 2 * s) / 21, (6 - s) / 21, (155 - s) / 1200
        pts = [[1 / 3, 1 / 3, 1 / 3],
               [a1, b1, b1], [b1, a1, b1], [b1, b1, a1],
               [a2, b2, b2], [b2, a2, b2], [b2, b2, a2]]
        return np.array(pts), np.array([0.225, w1, w1, w1, w2, w2, w2])
    raise ValueError(f"no symmetric rule of degree {degree}")


def _conical_rule(n):
    """Stroud conical product rule with n*n points, exact to degree 2n-1."""
    t, wt = roots_jacobi(n, 1.0, 0.0)       # weight (1-t) on [-1, 1]
    s, ws = roots_legendre(n)
    u = (t + 1) / 2                          # collapsed coordinate, weight (1-u)
    v = (s + 1) / 2
    uu, vv = np.meshgrid(u, v, indexing="ij")
    x, y = uu, (1 - uu) * vv                 # point in the unit right triangle
    w = np.outer(wt / 4, ws / 2) * 2         # normalise by the reference area 1/2
    bary = np.stack([1 - x - y, x, y], axis=-1).reshape(-1, 3)
    return bary, w.reshape(-1)


def triangle_rule(degree):
    """Barycentric points (m, 3) and weights (m,) summing to 1, exact to the given degree."""
    if degree in (1, 2, 5):
        pts, w = _symmetric_rule(degree)
    else:
        pts, w = _conical_rule((degree + 2) // 2)
    return np.ascontiguousarray(pts), np.ascontiguousarray(w)


def graded_rule(n):
    """n*n-point rule for integrands with logarithmic behaviour at the panel's edges and corners
    (the potential of a touching panel): the Duffy map from corner 0,
    x = v0 + u (v1 - v0) + u w (v2 - v1), with Gauss-Legendre in u and w after the substitution
    t -> 3t^2 - 2t^3, which flattens the integrand at both ends of each coordinate.
    Barycentric points (n*n, 3) and weights summing to 1."""
    s, ws = edge_rule(n)
    u, w = np.meshgrid(s, s, indexing="ij")
    weights = 2.0 * np.outer(ws, ws) * u              # Duffy Jacobian 2A u, over the area A
    bary = np.stack([1 - u, u * (1 - w), u * w], axis=-1).reshape(-1, 3)
    return np.ascontiguousarray(bary), np.ascontiguousarray(weights.reshape(-1))


def map_points(vertices, bary):
    """Physical points (n_panels, m, 3) of a barycentric rule on panels (n_panels, 3, 3)."""
    return np.ascontiguousarray(np.einsum("mj,njk->nmk", bary, vertices))


def edge_rule(n):
    """n Gauss-Legendre points and weights on [0, 1] after the substitution s = 3u^2 - 2u^3,
    whose vanishing derivative at both ends absorbs the logarithmic end behaviour of the
    self-panel edge integrals (kernels.triangle.self_integral)."""
    x, w = roots_legendre(n)
    u = (x + 1) / 2
    return np.ascontiguousarray(3 * u**2 - 2 * u**3), np.ascontiguousarray(w * 3 * u * (1 - u))

