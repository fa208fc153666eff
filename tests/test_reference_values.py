"""Checks that the independent reference values in reference_values.py are right.

These tests do not touch the bem3d solver.  Each check names its source:
a publication, "from memory" where a value is quoted from memory, or
"closed form derived here" where the comparison formula is derived in the
docstring/comment next to it.
"""

import math

import numpy as np
import pytest
from reference_values import (
    CUBE_NORMALISED,
    EPS0,
    coaxial_disks,
    coaxial_disks_auto_n,
    cube_capacitance,
    isolated_sphere,
    richardson,
    sphere_in_shell,
    thin_disk,
    two_spheres,
    two_spheres_images,
)
from scipy.integrate import quad
from scipy.special import ellipkm1

K4PI = 4.0 * math.pi * EPS0


def rel(x, y):
    return abs(x - y) / abs(y)


# ---------------------------------------------------------------------------
# Constant and single conductors
# ---------------------------------------------------------------------------

def test_eps0_is_codata_2022():
    # CODATA 2022 recommended value (Mohr et al., CODATA 2022 adjustment).
    assert EPS0 == pytest.approx(8.8541878188e-12, rel=1e-12)


def test_isolated_sphere_value_and_scaling():
    # 4*pi*eps0*(1 m) = 1.11265e-10 F (from memory; classical textbook value).
    assert isolated_sphere(1.0) == pytest.approx(1.112650056e-10, rel=1e-9)
    assert isolated_sphere(2.5e-3) == pytest.approx(2.5e-3 * isolated_sphere(1.0), rel=1e-15)


def oblate_spheroid(a, c):
    """Capacitance of a conducting oblate spheroid with semi-axes a, a, c < a:
    C = 4 pi eps0 sqrt(a^2 - c^2) / arccos(c / a)
    (Landau & Lifshitz, Electrodynamics of Continuous Media, 1960, sec. 4)."""
    e = math.sqrt(a * a - c * c)
    return K4PI * e / math.acos(c / a)


def test_thin_disk_is_flat_spheroid_limit():
    # Landau & Lifshitz 1960 sec. 4: c -> 0 gives 4 pi eps0 a / (pi/2) = 8 eps0 a;
    # the deviation is O(c/a) (closed form derived here: arccos(x) = pi/2 - x + ...).
    for a in (1.0, 0.37):
        assert rel(oblate_spheroid(a, 1e-9 * a), thin_disk(a)) < 1e-8
        assert rel(oblate_spheroid(a, 1e-3 * a), thin_disk(a)) < 1e-3
    # and the same spheroid formula tends to the sphere as c -> a
    assert rel(oblate_spheroid(1.0, 1.0 - 1e-8), isolated_sphere(1.0)) < 1e-7


def test_thin_disk_value():
    # 8 eps0 a / (4 pi eps0 a) = 2/pi: disk has 2/pi of the capacitance of the
    # sphere of the same radius (classical, e.g. Smythe 1950).
    assert thin_disk(1.0) / isolated_sphere(1.0) == pytest.approx(2.0 / math.pi, rel=1e-14)
    assert thin_disk(1.0) == pytest.approx(7.08335e-11, rel=1e-5)


# ---------------------------------------------------------------------------
# Cube
# ---------------------------------------------------------------------------

def test_cube_published_value():
    # Hwang & Mascagni 2003, J. Korean Phys. Soc. 42: 0.660683 (x 4 pi eps0 L).
    assert cube_capacitance(1.0) / K4PI == pytest.approx(0.660683, rel=1e-12)
    # Other published estimates near 0.6606785 (from memory) agree to ~1e-5.
    assert rel(CUBE_NORMALISED, 0.6606785) < 1e-5
    assert cube_capacitance(3e-6) == pytest.approx(3e-6 * cube_capacitance(1.0), rel=1e-15)


def test_cube_bounds():
    L = 1.0
    C = cube_capacitance(L)
    # Monotonicity of capacitance under inclusion (classical): inscribed sphere
    # (radius L/2) < cube < circumscribed sphere (radius sqrt(3) L / 2).
    assert isolated_sphere(L / 2) < C < isolated_sphere(math.sqrt(3) * L / 2)
    # Poincare-Faber-Szego: C >= sphere of equal volume
    # (Polya & Szego 1951, Isoperimetric Inequalities in Mathematical Physics).
    r_vol = (3.0 / (4.0 * math.pi)) ** (1.0 / 3.0) * L
    assert C > isolated_sphere(r_vol)
    # Convex bodies: C <= 4 pi eps0 * mean radius (Polya & Szego 1951, from
    # memory).  Mean radius of the cube = 3L/4 (closed form derived here:
    # integral of mean curvature = sum over edges of length * angle / 2 = 3 pi L,
    # mean radius = that / (4 pi)).
    assert C < isolated_sphere(0.75 * L)


# ---------------------------------------------------------------------------
# Concentric spheres
# ---------------------------------------------------------------------------

def test_sphere_in_shell_matches_inverted_elastance():
    # Closed form derived here: with charges Q1 (inner) and Q2 (shell) the
    # potentials are V1 = Q1/(4 pi eps0 a) + Q2/(4 pi eps0 b) and
    # V2 = (Q1 + Q2)/(4 pi eps0 b).  C is the inverse of that elastance matrix.
    for a, b in ((1.0, 2.0), (0.1, 0.1001), (3e-3, 1.0)):
        P = np.array([[1 / a, 1 / b], [1 / b, 1 / b]]) / K4PI
        np.testing.assert_allclose(sphere_in_shell(a, b), np.linalg.inv(P), rtol=1e-9)


def test_sphere_in_shell_limits():
    # b -> infinity: inner sphere alone (closed form derived here).
    C = sphere_in_shell(1.0, 1e9)
    assert rel(C[0, 0], isolated_sphere(1.0)) < 2e-9
    # thin gap: parallel plate eps0 * 4 pi a^2 / (b - a) (closed form derived here).
    a, g = 1.0, 1e-6
    assert rel(sphere_in_shell(a, a + g)[0, 0], EPS0 * 4 * math.pi * a * a / g) < 2e-6
    C = sphere_in_shell(0.3, 0.7)
    assert C[0, 1] == C[1, 0] == -C[0, 0]
    # total charge with both at 1 V is that of the outer shell alone
    assert C.sum() == pytest.approx(isolated_sphere(0.7), rel=1e-14)
    with pytest.raises(ValueError):
        sphere_in_shell(1.0, 1.0)


# ---------------------------------------------------------------------------
# Two spheres
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("c", [2.001, 2.05, 2.5, 3.0, 5.0, 20.0, 1e3])
def test_two_spheres_series_equals_images(c):
    # Smythe 1950 bispherical series vs Kelvin's method of images (two
    # independent derivations of the same problem).
    a = 0.5
    S = two_spheres(a, c * a)
    M = two_spheres_images(a, a, c * a)
    np.testing.assert_allclose(M, S, rtol=1e-10, atol=0)


def test_two_spheres_far_apart():
    a = 1.0
    for c in (1e2, 1e4):
        C = two_spheres(a, c)
        # c -> infinity: C11 -> 4 pi eps0 a, C12 -> -4 pi eps0 a^2 / c.
        # First images (closed form derived here): C11 = 4 pi eps0 a (1 + a^2/c^2 + O(c^-4)),
        # C12 = -4 pi eps0 a^2/c (1 + O(c^-2)).
        assert rel(C[0, 0], K4PI * a * (1 + (a / c) ** 2)) < 3 * (a / c) ** 4
        assert rel(C[0, 1], -K4PI * a * a / c) < 3 * (a / c) ** 2
        assert rel(C[0, 0], isolated_sphere(a)) < 1.01 * (a / c) ** 2


def test_two_spheres_touching_limit():
    # Two touching equal spheres at a common potential carry 4 pi eps0 a ln 2
    # each (Kelvin; Smythe 1950; from memory).  Closed form derived here: the
    # series gives C11 + C12 = 4 pi eps0 a sum_m (-1)^(m+1) sinh(b)/sinh(m b)
    # -> 4 pi eps0 a ln 2 as b -> 0, error O(b^2).
    a = 1.0
    prev = None
    for gap in (1e-2, 1e-4, 1e-6):
        C = two_spheres(a, 2 * a + gap * a)
        err = rel(C[0, 0] + C[0, 1], K4PI * a * math.log(2))
        beta = math.acosh(1 + gap / 2)
        assert err < beta ** 2
        if prev is not None:
            assert err < prev
        prev = err
        # and C11 itself grows without bound while C11 + C12 stays finite
        assert C[0, 0] > 2 * K4PI * a


def test_two_spheres_terms_argument_converges():
    # truncating the Smythe series (Smythe 1950): 1 term = isolated sphere for
    # C11 and -4 pi eps0 a sinh(b)/sinh(2b) = -4 pi eps0 a^2/c for C12
    # (closed form derived here: sinh(2b) = 2 sinh(b) cosh(b), cosh b = c/2a).
    a, c = 1.0, 3.0
    C1 = two_spheres(a, c, terms=1)
    assert C1[0, 0] == pytest.approx(isolated_sphere(a), rel=1e-14)
    assert C1[0, 1] == pytest.approx(-K4PI * a * a / c, rel=1e-14)
    np.testing.assert_allclose(two_spheres(a, c, terms=60), two_spheres(a, c), rtol=1e-15)
    assert rel(two_spheres(a, c, terms=5)[0, 0], two_spheres(a, c)[0, 0]) > 1e-8
    with pytest.raises(ValueError):
        two_spheres(1.0, 2.0)


@pytest.mark.parametrize("a1,a2,c", [(1.0, 2.0, 3.5), (1.0, 0.1, 1.2), (0.3, 1.7, 10.0)])
def test_two_spheres_images_general_radii(a1, a2, c):
    C = two_spheres_images(a1, a2, c)
    # Reciprocity (Green's reciprocity theorem, classical): the two off-diagonal
    # entries come from different image sequences, so this is a real check.
    assert rel(C[0, 1], C[1, 0]) < 1e-12
    # Maxwell matrix properties: positive diagonal, negative coupling,
    # diagonally dominant (each sphere's total charge at common 1 V is > 0).
    assert C[0, 0] > 0 and C[1, 1] > 0 and C[0, 1] < 0
    assert C[0, 0] + C[0, 1] > 0 and C[1, 1] + C[1, 0] > 0
    assert np.linalg.det(C) > 0
    # Each sphere is at least its isolated value (grounded neighbour adds charge).
    assert C[0, 0] > isolated_sphere(a1) and C[1, 1] > isolated_sphere(a2)
    # Relabelling the spheres transposes the matrix.
    Cs = two_spheres_images(a2, a1, c)
    np.testing.assert_allclose(Cs, C[::-1, ::-1], rtol=1e-13)


def test_two_spheres_images_far_field_general_radii():
    # First images (closed form derived here): q0 = 4 pi eps0 a1, q1 = -a2 q0/c,
    # q2 = a1 a2 q0/(c^2 - a2^2): C11 = 4 pi eps0 a1 (1 + a1 a2/c^2 + O(c^-4)),
    # C21 = -4 pi eps0 a1 a2/c (1 + O(c^-2)).
    a1, a2 = 1.0, 0.4
    for c in (50.0, 500.0):
        C = two_spheres_images(a1, a2, c)
        assert rel(C[0, 0], K4PI * a1 * (1 + a1 * a2 / c ** 2)) < 3 / c ** 4
        assert rel(C[1, 0], -K4PI * a1 * a2 / c) < 3 / c ** 2


# ---------------------------------------------------------------------------
# Coaxial disks (Love 1949)
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("kappa", [0.05, 0.1, 0.3, 1.0, 3.0, 30.0])
def test_coaxial_disks_converged_by_doubling_n(kappa):
    n = coaxial_disks_auto_n(kappa)
    C = coaxial_disks(1.0, kappa)
    C2 = coaxial_disks(1.0, kappa, n=2 * n)
    # relative to the diagonal, and the two-terminal combination separately
    assert np.max(np.abs(C - C2)) / C[0, 0] < 1e-9
    assert rel(C[0, 0] - C[0, 1], C2[0, 0] - C2[0, 1]) < 1e-9
    assert rel(C[0, 0] + C[0, 1], C2[0, 0] + C2[0, 1]) < 1e-9
    # and a too-small n is visibly wrong for small kappa (the check can fail)
    if kappa <= 0.1:
        Cbad = coaxial_disks(1.0, kappa, n=int(2 / kappa) // 2 * 2)
        assert rel(Cbad[0, 0], C[0, 0]) > 1e-6


def test_coaxial_disks_far_apart():
    # kappa -> infinity: each disk alone, C11 -> 8 eps0 a, C12 -> 0.
    a = 1.0
    C = coaxial_disks(a, 1e6 * a)
    assert rel(C[0, 0], thin_disk(a)) < 1e-11
    assert abs(C[0, 1]) / C[0, 0] < 1e-6
    # First order in 1/kappa (closed form derived here): disk 2 sees disk 1 as a
    # point charge Q at distance d, so Q = C0 (V1 - Q2/(4 pi eps0 d)) and
    # C11 +/- C12 = C0 / (1 -/+ C0/(4 pi eps0 d)) = C0 / (1 -/+ 2/(pi kappa)),
    # with remainder O(kappa^-3) from the finite size of the disks.
    C0 = thin_disk(a)
    errs = []
    for kappa in (20.0, 40.0, 80.0):
        C = coaxial_disks(a, kappa * a)
        x = 2 / (math.pi * kappa)
        e_sym = rel(C[0, 0] + C[0, 1], C0 / (1 + x))
        e_anti = rel(C[0, 0] - C[0, 1], C0 / (1 - x))
        assert e_sym < 1 / kappa ** 2 and e_anti < 1 / kappa ** 2
        errs.append(max(e_sym, e_anti))
    # remainder scales like kappa^-3: halving 1/kappa divides it by ~8
    for e_big, e_small in zip(errs, errs[1:]):
        assert 6.0 < e_big / e_small < 10.0


def test_coaxial_disks_sign_convention_large_kappa():
    # Which sign goes with which potentials (closed form derived here): for
    # like potentials the neighbour's charge lowers the charge needed, so
    # C11 + C12 < C0 (plus sign in Love's equation: f ~ 1/(1 + 2/(pi kappa)));
    # for opposite potentials it raises it, C11 - C12 > C0 (minus sign).
    C = coaxial_disks(1.0, 5.0)
    assert C[0, 0] + C[0, 1] < thin_disk(1.0) < C[0, 0] - C[0, 1]
    assert C[0, 1] < 0


def kirchhoff(a, d, third_term=False):
    """Two-terminal capacitance of the circular plate capacitor for d << a:
    eps0 a [pi/kappa + ln(16 pi/kappa) - 1]  (Kirchhoff 1877, Monatsber.
    Akad. Wiss. Berlin); optional next term (kappa/(4 pi)) ln^2(16 pi/kappa)
    (Shaw 1970; Chew & Kong 1980, J. Math. Phys. 21; from memory)."""
    k = d / a
    L = math.log(16 * math.pi / k)
    s = math.pi / k + L - 1
    if third_term:
        s += k / (4 * math.pi) * L * L
    return EPS0 * a * s


@pytest.mark.parametrize("kappa", [0.02, 0.05, 0.1, 0.2])
def test_coaxial_disks_close_plates_kirchhoff(kappa):
    a = 0.7
    d = kappa * a
    C = coaxial_disks(a, d)
    c2 = 0.5 * (C[0, 0] - C[0, 1])  # two-terminal capacitance
    # leading parallel-plate term: (C11 - C12) ~ 2 eps0 pi a^2 / d
    assert rel(C[0, 0] - C[0, 1], 2 * EPS0 * math.pi * a * a / d) < 2 * kappa * math.log(16 * math.pi / kappa)
    L = math.log(16 * math.pi / kappa)
    # Kirchhoff's fringe term: remainder is O(kappa ln^2 kappa) ...
    r2 = (c2 - kirchhoff(a, d)) / (EPS0 * a)
    assert 0.06 * kappa * L * L < r2 < 0.09 * kappa * L * L
    # ... and with the third term the remainder is O(kappa ln kappa) or smaller.
    r3 = (c2 - kirchhoff(a, d, third_term=True)) / (EPS0 * a)
    assert abs(r3) < 0.3 * kappa


def test_coaxial_disks_close_plates_symmetric_merge():
    # Both disks at V, kappa -> 0: they merge into one disk of capacitance
    # 8 eps0 a, each carrying half (closed form derived here: f + f = 1).
    a = 1.0
    devs = []
    for kappa in (0.1, 0.04, 0.02):
        C = coaxial_disks(a, kappa * a)
        devs.append(rel(C[0, 0] + C[0, 1], 0.5 * thin_disk(a)))
    assert devs[0] > devs[1] > devs[2]
    assert devs[2] < 0.025


def test_coaxial_disks_scaling_and_monotonicity():
    C1 = coaxial_disks(1.0, 0.3)
    C2 = coaxial_disks(1e-3, 0.3e-3)
    np.testing.assert_allclose(C2, 1e-3 * C1, rtol=1e-13)
    # moving the plates apart lowers the two-terminal capacitance
    vals = [coaxial_disks(1.0, d) for d in (0.1, 0.2, 0.5, 1.0, 2.0)]
    c2 = [0.5 * (C[0, 0] - C[0, 1]) for C in vals]
    assert all(x > y for x, y in zip(c2, c2[1:]))
    with pytest.raises(ValueError):
        coaxial_disks(1.0, 0.3, n=11)


def ring_collocation(kappa, N):
    """Independent axisymmetric solution for two coaxial disks (radius 1, gap
    kappa), closed form derived here, in units of eps0 * a.

    Charge density on each disk sigma(r) = g(r)/sqrt(1 - r^2) with g piecewise
    constant in theta, r = sin(theta), collocated at the theta midpoints.  A
    ring of radius r and charge q gives potential
    q/(4 pi eps0) * (2/pi) K(m)/sqrt((rho + r)^2 + z^2), m = 4 rho r/((rho+r)^2+z^2),
    so an annulus contributes (g/eps0) int r K(m)/(pi S) dtheta.
    Returns (C11 + C12, C11 - C12) / (eps0 a).
    """
    th = np.linspace(0.0, math.pi / 2, N + 1)
    mid = 0.5 * (th[1:] + th[:-1])
    rho = np.sin(mid)

    def integrand(t, p, z):
        r = math.sin(t)
        s2 = (p + r) ** 2 + z * z
        return r * ellipkm1(((p - r) ** 2 + z * z) / s2) / (math.pi * math.sqrt(s2))

    def block(z):
        M = np.empty((N, N))
        for i in range(N):
            for j in range(N):
                pts = [mid[i]] if (z == 0.0 and i == j) else None
                M[i, j] = quad(integrand, th[j], th[j + 1], args=(rho[i], z),
                               points=pts, limit=200, epsabs=0.0, epsrel=1e-11)[0]
        return M

    S, D = block(0.0), block(kappa)
    area = 2 * math.pi * (np.cos(th[:-1]) - np.cos(th[1:]))  # int 2 pi r dr / sqrt(1-r^2)
    q_sym = area @ np.linalg.solve(S + D, np.ones(N))
    q_anti = area @ np.linalg.solve(S - D, np.ones(N))
    # disks at +1 V and -1 V: Q1 = C11 * 1 + C12 * (-1) = C11 - C12
    return q_sym, q_anti


def test_ring_collocation_single_disk():
    # sanity of the independent solver: one disk gives 8 eps0 a
    # (classical; g = const is then exact).
    q_sym, q_anti = ring_collocation(1e8, 8)
    assert q_sym == pytest.approx(8.0, rel=1e-6)
    assert q_anti == pytest.approx(8.0, rel=1e-6)


@pytest.mark.parametrize("kappa", [0.5, 1.0, 2.0])
def test_love_sign_and_normalisation_against_ring_collocation(kappa):
    # Cross-check of the Love-equation signs and 4 eps0 a normalisation at
    # intermediate separations by a completely different discretisation
    # (closed form derived here, see ring_collocation).
    C = coaxial_disks(1.0, kappa) / EPS0
    q16 = ring_collocation(kappa, 16)
    q32 = ring_collocation(kappa, 32)
    ref_sym, ref_anti = C[0, 0] + C[0, 1], C[0, 0] - C[0, 1]
    assert rel(q32[0], ref_sym) < 3e-6
    assert rel(q32[1], ref_anti) < 3e-6
    # the collocation error shrinks under refinement towards the Love value
    assert abs(q32[1] - ref_anti) < abs(q16[1] - ref_anti)


# ---------------------------------------------------------------------------
# Richardson extrapolation
# ---------------------------------------------------------------------------

def test_richardson_exact_for_model_error():
    # closed form derived here: f(h) = A + B h^p is recovered exactly.
    A, B = 3.25, -7.0
    for p, r in ((2, 2.0), (1, 3.0), (1.5, 1.7)):
        h = 0.1
        coarse, fine = A + B * h ** p, A + B * (h / r) ** p
        assert richardson(coarse, fine, ratio=r, order=p) == pytest.approx(A, rel=1e-13)
    out = richardson(np.array([1.0, 2.0]), np.array([1.5, 2.25]))
    np.testing.assert_allclose(out, [1.5 + 0.5 / 3, 2.25 + 0.25 / 3], rtol=1e-14)
    with pytest.raises(ValueError):
        richardson(1.0, 2.0, ratio=1.0)


def test_richardson_improves_trapezoid_rule():
    # Composite trapezoid rule for int_0^1 e^x dx has error ~ h^2
    # (Euler-Maclaurin, classical); extrapolation gains orders of magnitude.
    exact = math.e - 1

    def trap(n):
        x = np.linspace(0, 1, n + 1)
        y = np.exp(x)
        return (y.sum() - 0.5 * (y[0] + y[-1])) / n

    t1, t2 = trap(8), trap(16)
    e_fine = abs(t2 - exact)
    e_extr = abs(richardson(t1, t2) - exact)
    assert e_fine > 1e-4
    assert e_extr < 1e-3 * e_fine
    # wrong assumed order does much worse
    assert abs(richardson(t1, t2, order=1) - exact) > 100 * e_extr
