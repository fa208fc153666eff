"""Dielectric bodies by the equivalent-charge formulation.

References (closed forms, derived from Gauss's law with D = eps E in each spherical layer):
a conducting sphere of radius a inside concentric dielectric layers ending at radii b_1 < b_2 ...
has C = 4 pi eps0 / (sum_layers (1/eps_i)(1/r_in - 1/r_out) + 1/b_last); a body with eps_r = 1
changes nothing; a uniform background eps_r scales C by eps_r.
"""

import math

import numpy as np
import pytest
import reference_values as ref
from conftest import make_panels

from bem3d.base.errors import MeshError, ModelError
from bem3d.geometry import shapes
from bem3d.geometry.bodies import DielectricBody
from bem3d.geometry.panels import Panels
from bem3d.solve.conductors import solve_panels
from bem3d.solve.dielectric import solve_with_dielectrics

EPS0 = ref.EPS0


def body(name, eps_r, mesh):
    p, t = mesh
    return DielectricBody(name, eps_r, Panels.from_arrays(p, t, np.zeros(len(t), int), (name,)))


def layered_sphere(a, layers):
    """C of a sphere radius a in concentric layers [(outer radius, eps_r)], then vacuum."""
    total, r = 0.0, a
    for outer, eps in layers:
        total += (1 / eps) * (1 / r - 1 / outer)
        r = outer
    return 4 * math.pi * EPS0 / (total + 1 / r)


def test_sphere_in_a_concentric_dielectric_shell():
    def c(m):
        cond = make_panels(("ball", shapes.octahedral_sphere(1.0, m)))
        return solve_with_dielectrics(cond, [body("shell", 4.0, shapes.octahedral_sphere(2.0, m))]
                                      ).maxwell[0, 0]
    extrapolated = ref.richardson(c(8), c(16))
    assert extrapolated == pytest.approx(layered_sphere(1.0, [(2.0, 4.0)]), rel=2e-3)


def test_nested_bodies_take_the_innermost_permittivity():
    m = 8
    cond = make_panels(("ball", shapes.octahedral_sphere(1.0, m)))
    bodies = [body("outer", 2.0, shapes.octahedral_sphere(2.5, m)),
              body("inner", 6.0, shapes.octahedral_sphere(1.6, m))]
    got = solve_with_dielectrics(cond, bodies).maxwell[0, 0]
    # coarse mesh (512 panels a body): 1.5 %; the shell test above checks convergence
    assert got == pytest.approx(layered_sphere(1.0, [(1.6, 6.0), (2.5, 2.0)]), rel=1.5e-2)


def test_unit_permittivity_body_changes_nothing_and_background_scales():
    parts = [("a", shapes.octahedral_sphere(1.0, 6)),
             ("b", shapes.box(1.0, 1.0, 1.0, 4, center=(2.5, 0, 0)))]
    cond = make_panels(*parts)
    plain = solve_panels(cond).maxwell
    same = solve_with_dielectrics(cond, [body("air", 1.0, shapes.octahedral_sphere(5.0, 6))])
    np.testing.assert_allclose(same.maxwell, plain, rtol=1e-10)
    # a uniform background eps_r multiplies every entry (closed form)
    np.testing.assert_allclose(
        solve_with_dielectrics(cond, [body("air", 3.0, shapes.octahedral_sphere(5.0, 6))],
                               background=3.0).maxwell, 3.0 * plain, rtol=1e-9)


def test_inward_normals_and_open_bodies_are_refused():
    cond = make_panels(("ball", shapes.octahedral_sphere(1.0, 4)))
    p, t = shapes.octahedral_sphere(2.0, 4)
    with pytest.raises(MeshError, match="inwards"):
        solve_with_dielectrics(cond, [body("flipped", 3.0, (p, t[:, ::-1]))])
    with pytest.raises(MeshError, match="closed"):
        solve_with_dielectrics(cond, [body("open", 3.0, (p, t[:-4]))])
    with pytest.raises(ModelError, match="positive"):
        solve_with_dielectrics(cond, [body("bad", -1.0, (p, t))])


def test_sheet_on_a_body_face_meshed_unlike_it_is_refused():
    # a zero-thickness plate on a box face whose panels differ from the plate's
    plate = shapes.rectangle(0.5, 0.5, 4, 4, center=(0.0, 0.0, 0.5))
    cond = make_panels(("pad", plate))
    with pytest.raises(MeshError, match="meshed alike near"):
        solve_with_dielectrics(cond, [body("board", 4.0, shapes.box(2.0, 2.0, 1.0, 4))])


@pytest.fixture(scope="module")
def shelled_sphere():
    cond = make_panels(("ball", shapes.octahedral_sphere(1.0, 12)))
    shell = body("shell", 4.0, shapes.octahedral_sphere(2.0, 12))
    return cond, shell, solve_with_dielectrics(cond, [shell], volts={"ball": 1.0})


def test_field_in_and_around_a_dielectric_shell(shelled_sphere):
    # Gauss with D = eps E: inside the shell E = Q/(4 pi eps0 eps_r r^2), outside Q/(4 pi eps0 r^2)
    from bem3d.operators.points import evaluate

    cond, shell, result = shelled_sphere
    src = result.sources
    q = result.charges[0]
    pts = np.array([[1.5, 0.0, 0.0], [0.0, -1.4, 0.3], [3.0, 0.0, 0.0], [0.0, 2.5, -2.0]])
    f = evaluate(src.panels, src.sigma @ result.potentials, pts, src.kernel_eps_r)
    r = np.linalg.norm(pts, axis=1)
    eps_r = np.where(r < 2.0, 4.0, 1.0)
    expected = q / (4 * math.pi * EPS0 * eps_r[:, None] * r[:, None] ** 3) * pts
    np.testing.assert_allclose(f.E[:, 0], expected, rtol=1e-2, atol=1e-3 * np.abs(expected).max())
    # the normal component of D is continuous across the interface r = 2: r^2 D_n is the same
    # half a panel inside and outside it (a P0 charge meets the condition panel by panel on
    # average, not pointwise closer in)
    n = np.array([0.6, 0.0, 0.8])
    f = evaluate(src.panels, src.sigma @ result.potentials, [2.1 * n, 1.9 * n], 1.0)
    d_out, d_in = 2.1**2 * f.E[0, 0] @ n, 1.9**2 * 4.0 * f.E[1, 0] @ n
    assert d_in == pytest.approx(d_out, rel=2e-2)


def test_energy_balance_with_a_dielectric_shell(shelled_sphere):
    # 1/2 int E.D dV over all space equals 1/2 V^T C V (energy identity)
    from bem3d.operators.points import evaluate
    from bem3d.post.energy import energy_balance
    from bem3d.post.grid import Grid
    from bem3d.solve.dielectric import medium_at

    cond, shell, result = shelled_sphere
    src = result.sources
    sigma = src.sigma @ result.potentials
    grid = Grid.box([-3.0] * 3, [3.0] * 3, (61, 61, 61))
    boundary = grid.boundary()
    inside_of = np.r_[np.ones(len(cond)), np.zeros(len(src.panels) - len(cond))]
    gf = evaluate(src.panels, sigma, grid.points(), inside_of=inside_of)
    bf = evaluate(src.panels, sigma, boundary[0], inside_of=inside_of)
    balance = energy_balance(cond, result, grid, gf, bf, boundary,
                             grid_eps=EPS0 * medium_at(grid.points(), [shell], 1.0),
                             box_eps=EPS0, source=(src.panels, sigma, 1.0))
    assert balance["energy_grid_plus_outside_J"] == pytest.approx(result.energy, rel=1e-2)


def test_dielectric_slab_between_coaxial_disks():
    # Love 1949 (reference_values.coaxial_disks) for the disks in vacuum; with a slab of eps_r
    # around them the two-terminal capacitance lies between the vacuum value and eps_r times it
    # (all space filled; closed form scaling) and tends to eps_r times Love's value as the gap
    # closes and the fringe field, partly outside the slab, loses weight.
    eps_r = 4.0
    disk = shapes.disk(1.0, 8, grading=1.0)
    ratios = []
    for gap in (0.2, 0.1):
        cond = make_panels(("bottom", disk), ("top", (disk[0] + [0, 0, gap], disk[1])))
        slab = body("slab", eps_r, shapes.box(2.4, 2.4, gap + 0.1, 12, grading=0.5,
                                              center=(0, 0, gap / 2)))
        two = lambda c: (c[0, 0] - c[0, 1]) / 2          # noqa: E731
        vacuum = two(solve_panels(cond).maxwell)
        with_slab = two(solve_with_dielectrics(cond, [slab]).maxwell)
        love = two(ref.coaxial_disks(1.0, gap))
        assert vacuum == pytest.approx(love, rel=1e-2)
        assert vacuum < with_slab < eps_r * vacuum
        ratios.append(with_slab / (eps_r * love))
    assert 0.85 < ratios[0] < ratios[1] < 1.0
