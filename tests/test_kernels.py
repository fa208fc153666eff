"""The closed-form triangle potential and the Galerkin pair integrals against independent quadrature.

References are computed here with scipy.integrate (a general-purpose library), never with the
kernels under test: off the plane by a 2-D adaptive quadrature of 1/|x - y|; in the plane by the
polar form int_T dA/|x - y| = int R(theta) dtheta (R = distance from x to the boundary along a ray),
exact for a point inside the triangle.
"""

import math

import numpy as np
import pytest
from conftest import covariances, pair_rule_block
from scipy import integrate

from bem3d.geometry.panels import Panels
from bem3d.kernels.pairs import moment_pair, panel_pair_integral
from bem3d.kernels.triangle import triangle_potential
from bem3d.operators.kernel_data import single_layer
from bem3d.operators.quadrature import map_points, triangle_rule
from bem3d.operators.rules import PairRules

TRI = np.array([[0.0, 0.0, 0.0], [1.0, 0.0, 0.0], [0.3, 0.8, 0.0]])
NORMAL = np.array([0.0, 0.0, 1.0])


def potential_by_scipy(x):
    """int_T 1/|x - y| dA_y by adaptive quadrature over the triangle's (u, v) parameters."""
    e1, e2 = TRI[1] - TRI[0], TRI[2] - TRI[0]
    jac = np.linalg.norm(np.cross(e1, e2))

    def f(v, u):
        y = TRI[0] + u * e1 + v * e2
        return jac / np.linalg.norm(x - y)

    val, _ = integrate.dblquad(f, 0, 1, 0, lambda u: 1 - u, epsabs=1e-13, epsrel=1e-11)
    return val


def potential_in_plane_polar(x):
    """int_T 1/|x - y| dA_y for x inside T in its plane: int_0^{2 pi} R(theta) dtheta."""
    def ray_length(theta):
        d = np.array([math.cos(theta), math.sin(theta), 0.0])
        best = np.inf
        for i in range(3):
            p, q = TRI[i], TRI[(i + 1) % 3]
            m = np.array([[d[0], p[0] - q[0]], [d[1], p[1] - q[1]]])
            t, s = np.linalg.solve(m, (p - x)[:2])
            if t > 0 and -1e-12 <= s <= 1 + 1e-12:
                best = min(best, t)
        return best

    corners = sorted(math.atan2(*(v - x)[1::-1]) % (2 * math.pi) for v in TRI)
    bounds = corners + [corners[0] + 2 * math.pi]
    return sum(integrate.quad(ray_length, a, b, epsabs=1e-14, epsrel=1e-12)[0]
               for a, b in zip(bounds[:-1], bounds[1:]))


@pytest.mark.parametrize("x", [
    [0.4, 0.3, 0.5], [0.4, 0.3, -0.05], [2.0, -1.0, 0.3], [5.0, 4.0, -3.0],
    [1.2, 0.0, 0.01],            # above the extension of an edge
    [0.5, -0.2, 0.2],            # outside, off the plane
])
def test_closed_form_matches_adaptive_quadrature_off_the_plane(x):
    x = np.array(x, float)
    got = triangle_potential(x[0], x[1], x[2], TRI, NORMAL)
    assert got == pytest.approx(potential_by_scipy(x), rel=1e-8)


@pytest.mark.parametrize("x", [[0.4, 0.3, 0.0], [0.45, 0.02, 0.0], [0.33, 0.26, 0.0]])
def test_closed_form_matches_polar_integral_in_the_plane(x):
    x = np.array(x, float)
    got = triangle_potential(x[0], x[1], x[2], TRI, NORMAL)
    assert got == pytest.approx(potential_in_plane_polar(x), rel=1e-10)


def test_closed_form_is_continuous_onto_edges_vertices_and_edge_lines():
    # the potential of a surface charge is continuous everywhere (Kellogg 1929, Foundations of
    # Potential Theory): approaching a point from off the plane must give its in-plane value
    for x in [TRI[0], TRI[1], 0.5 * (TRI[0] + TRI[1]), np.array([1.5, 0.0, 0.0]),
              np.array([-0.7, 0.0, 0.0])]:
        on = triangle_potential(x[0], x[1], x[2], TRI, NORMAL)
        near = triangle_potential(x[0], x[1], x[2] + 1e-9, TRI, NORMAL)
        assert np.isfinite(on) and on == pytest.approx(near, rel=1e-7)
    # far away it is the point-charge value A / r (monopole limit; about the centroid the dipole
    # term vanishes and the quadrupole term is O((size / r)^2) ~ 1e-6 here)
    x = np.array([300.0, 200.0, 100.0])
    area = 0.5 * np.linalg.norm(np.cross(TRI[1] - TRI[0], TRI[2] - TRI[0]))
    r = np.linalg.norm(x - TRI.mean(axis=0))
    assert triangle_potential(*x, TRI, NORMAL) == pytest.approx(area / r, rel=1e-6)


def subdivided_pair(vk, vl, levels=4, degree=13):
    """int_Tk int_Tl dA dA / |x - y| by splitting T_k into 4^levels pieces, each with a
    high-degree point rule, and the closed form over T_l: an independent brute-force reference
    that converges as the pieces shrink (its own convergence is checked in the test)."""
    pieces = vk[None]
    for _ in range(levels):
        a, b, c = pieces[:, 0], pieces[:, 1], pieces[:, 2]
        ab, bc, ca = (a + b) / 2, (b + c) / 2, (c + a) / 2
        pieces = np.concatenate([np.stack(t, axis=1) for t in
                                 [(a, ab, ca), (ab, b, bc), (ca, bc, c), (ab, bc, ca)]])
    bary, w = triangle_rule(degree)
    pts = map_points(pieces, bary)
    area = 0.5 * np.linalg.norm(np.cross(pieces[:, 1] - pieces[:, 0], pieces[:, 2] - pieces[:, 0]),
                                axis=1)
    nl = np.cross(vl[1] - vl[0], vl[2] - vl[0])
    nl /= np.linalg.norm(nl)
    return sum(area[i] * np.dot(w, [triangle_potential(*p, vl, nl) for p in pts[i]])
               for i in range(len(pieces)))


def pair_panels():
    """A panel with itself, an edge neighbour, a vertex neighbour, a tilted near panel, a far one."""
    base = np.array([[0.0, 0, 0], [1, 0, 0], [0.2, 0.9, 0]])
    others = [base,
              np.array([[1.0, 0, 0], [0, 0, 0], [0.5, -0.7, 0.3]]),          # shares an edge
              np.array([[1.0, 0, 0], [1.8, 0.4, 0.2], [1.6, -0.5, 0]]),      # shares a vertex
              np.array([[0.1, 0.1, 0.4], [0.9, 0.2, 0.5], [0.4, 0.8, 0.3]]),  # close, no contact
              np.array([[3.0, 1, 1], [3.9, 1.1, 1], [3.2, 1.8, 1.4]])]       # several sizes away
    verts = np.concatenate([base[None]] + [o[None] for o in others[1:]])
    return Panels(verts, np.zeros(len(verts), int), ("p",))


@pytest.mark.parametrize("l, rel", [(0, 2e-8), (1, 1e-5), (2, 1e-6), (3, 2e-6), (4, 2e-5)])
def test_galerkin_pair_integrals_match_subdivided_reference(l, rel):
    # The reference error falls by a steady factor per subdivision level (4 where the integrand
    # has logarithmic edge behaviour, 8 for a vertex contact; the three levels below must show
    # the steady rate), so one Richardson step with the measured rate removes it. Tolerances
    # are what the default rules give: the self term is semi-analytic (the reference itself is
    # good to ~5e-9); touching and close pairs use the graded Duffy rule; the far pair 3x3 points.
    panels = pair_panels()
    vk, vl = panels.vertices[0], panels.vertices[l]
    r2, r3, r4 = (subdivided_pair(vk, vl, levels=n) for n in (2, 3, 4))
    ref = r4
    if abs(r3 - r4) > 1e-12 * abs(r4):
        rate = (r2 - r3) / (r3 - r4)
        assert 3.5 < rate < 9.0
        ref = r4 + (r4 - r3) / (rate - 1)
    data = single_layer(panels, PairRules())
    got = panel_pair_integral(0, l, data)
    assert got == pytest.approx(ref, rel=rel)
    assert panel_pair_integral(l, 0, data) == pytest.approx(got, rel=1e-14)


def test_panel_moments_are_the_covariances_about_the_centroids():
    """Panels.moments (xx, yy, zz, xy, xz, yz) against the covariance integrated by the
    degree-2 Stroud rule, exact for a quadratic integrand (Stroud 1971)."""
    panels = pair_panels()
    q = panels.moments[:, [0, 3, 4, 3, 1, 5, 4, 5, 2]].reshape(-1, 3, 3)
    np.testing.assert_allclose(q, covariances(panels.vertices), atol=1e-15)


def test_moment_rule_error_falls_with_the_cube_of_the_distance():
    """The far value with the second-moment term (moment_pair) against the Galerkin integral by
    the degree-8 product rule (Stroud 1971), a flat and a tilted panel at 6 to 48 times the sum
    of their radii: the relative error falls by 8 per doubling, the size of the third-order
    Taylor term left out (Jackson 1999, Classical Electrodynamics, 3rd ed., section 4.1), and is
    over 20 times smaller than the plain centroid value's. Measured: 1.3e-5 at 6, 2.4e-8 at
    48; centroid value 6.0e-4 at 6 (46 times more)."""
    base = np.array([[0.0, 0, 0], [1, 0, 0], [0.2, 0.9, 0]])
    tilted = np.array([[-0.4, -0.3, 0.0], [0.4, -0.2, 0.1], [-0.1, 0.4, -0.1]])
    toward = np.array([0.6, 0.3, 0.74]) / np.linalg.norm([0.6, 0.3, 0.74])
    reach = Panels(np.stack([base, tilted]), np.zeros(2, int), ("p",)).radii.sum()
    bary, w = triangle_rule(8)
    errors = []
    for distance in (6, 12, 24, 48):
        shift = base.mean(0) + distance * reach * toward - tilted.mean(0)
        p = Panels(np.stack([base, tilted + shift]), np.zeros(2, int), ("p",))
        pts = map_points(p.vertices, bary)
        exact = pair_rule_block(pts[:1], w, p.areas[:1], pts[1:], w, p.areas[1:])[0, 0]
        r = p.centroids[0] - p.centroids[1]
        moment = moment_pair(r[0], r[1], r[2], r @ r, p.moments, 0, p.moments, 1)
        errors.append(abs(p.areas[0] * p.areas[1] * moment / exact - 1))
        plain = abs(p.areas[0] * p.areas[1] / np.linalg.norm(r) / exact - 1)
        assert errors[-1] < plain / 20
    assert errors[0] < 3e-5
    rates = np.array(errors[:-1]) / np.array(errors[1:])
    assert np.all((rates > 7) & (rates < 9.5))
