"""Capacitance of canonical bodies against published values (see tests/reference_values.py).

Flat panels inscribed in a curved body make it slightly smaller, an O(h^2) geometry error; where
a curved body meets its exact value, two refinements (h and h/2) are Richardson-extrapolated
with order 2. Tolerances are the accuracy targets of the project's core issue.
"""


import numpy as np
import pytest
import reference_values as ref
from conftest import maxwell

from bem3d.geometry import shapes

EPS0 = ref.EPS0


@pytest.fixture(scope="module")
def unit_sphere():
    """C of the unit sphere on octahedral meshes of 2048 and 8192 panels."""
    return {m: maxwell(("s", shapes.octahedral_sphere(1.0, m)))[0, 0] for m in (16, 32)}


def test_sphere_8192_panels_within_0p1_percent(unit_sphere):
    # exact: C = 4 pi eps0 a (isolated sphere, closed form)
    err = unit_sphere[32] / ref.isolated_sphere(1.0) - 1
    assert -1e-3 < err < 0      # Galerkin and an inscribed surface both give a lower bound


def test_sphere_richardson_within_0p03_percent(unit_sphere):
    c = ref.richardson(unit_sphere[16], unit_sphere[32])
    assert c == pytest.approx(ref.isolated_sphere(1.0), rel=3e-4)


def test_two_spheres_match_bispherical_series():
    # Smythe 1950, Static and Dynamic Electricity, bispherical series for equal spheres
    a, c = 1.0, 3.0
    def pair(m):
        return maxwell(("a", shapes.octahedral_sphere(a, m)),
                       ("b", shapes.octahedral_sphere(a, m, center=(c, 0, 0))))
    extrapolated = ref.richardson(pair(8), pair(16))
    exact = ref.two_spheres(a, c)
    assert extrapolated[0, 0] == pytest.approx(exact[0, 0], rel=5e-4)
    assert extrapolated[0, 1] == pytest.approx(exact[0, 1], rel=1e-3)
    assert extrapolated[1, 1] == pytest.approx(exact[1, 1], rel=5e-4)


def test_sphere_in_thin_concentric_shell():
    # exact: C11 = 4 pi eps0 ab/(b-a), C12 = -C11, C22 = C11 + 4 pi eps0 b (closed form)
    a, b = 1.0, 2.0
    def pair(m):
        return maxwell(("inner", shapes.octahedral_sphere(a, m)),
                       ("shell", shapes.octahedral_sphere(b, m)))
    extrapolated = ref.richardson(pair(8), pair(16))
    np.testing.assert_allclose(extrapolated, ref.sphere_in_shell(a, b), rtol=5e-4)


def test_thin_disk_within_0p15_percent():
    # exact: C = 8 eps0 a for a conducting disk of zero thickness (classical; e.g. Jackson 1999,
    # Classical Electrodynamics, 3rd ed., problem 3.3 gives the charge density behind it)
    pts, tris = shapes.disk(1.0, 12, grading=1.0)
    assert 2000 < len(tris) < 2800
    c = maxwell(("disk", (pts, tris)))[0, 0]
    assert c == pytest.approx(ref.thin_disk(1.0), rel=1.5e-3)


def test_unit_cube_with_edge_graded_panels_within_0p05_percent():
    # 0.660683 * 4 pi eps0 L (Hwang & Mascagni 2003, J. Korean Phys. Soc. 42)
    pts, tris = shapes.box(1.0, 1.0, 1.0, 16, grading=1.0)
    assert len(tris) == 3072
    c = maxwell(("cube", (pts, tris)))[0, 0]
    assert c == pytest.approx(ref.cube_capacitance(1.0), rel=5e-4)


@pytest.mark.parametrize("gap", [0.5, 0.2])
def test_coaxial_disks_match_love_equation(gap):
    # Love 1949, Quart. J. Mech. Appl. Math. 2, 428: the integral equation solved with scipy in
    # reference_values.coaxial_disks; both disks of radius 1 at separation `gap`
    disk = shapes.disk(1.0, 12, grading=1.0)
    top = (disk[0] + np.array([0.0, 0.0, gap]), disk[1])
    c = maxwell(("bottom", disk), ("top", top))
    exact = ref.coaxial_disks(1.0, gap)
    np.testing.assert_allclose(c, exact, rtol=3e-3)
    # the two-terminal capacitance (C11 - C12) / 2 is what a capacitor meter reads
    assert (c[0, 0] - c[0, 1]) / 2 == pytest.approx((exact[0, 0] - exact[0, 1]) / 2, rel=3e-3)
