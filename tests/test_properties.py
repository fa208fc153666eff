"""Properties every capacitance matrix must have, on an asymmetric three-conductor model.

Maxwell matrix: symmetric (reciprocity), positive diagonal, non-positive off-diagonal,
diagonally dominant (Maxwell 1873, Treatise on Electricity and Magnetism, vol. 1, arts. 86-87);
capacitance scales linearly with size and is invariant under rigid motions (closed form: the
Laplace equation has no length scale); Galerkin capacitance rises monotonically under nested
refinement (it is a variational lower bound, e.g. Sauter & Schwab 2011, Boundary Element Methods).
"""

import numpy as np
import pytest
from conftest import make_panels, maxwell
from scipy.spatial.transform import Rotation

from bem3d.geometry import shapes
from bem3d.solve.conductors import solve_panels


@pytest.fixture(scope="module")
def three():
    return make_panels(
        ("sphere", shapes.octahedral_sphere(0.4, 8, center=(0.0, 0.0, 0.0))),
        ("cube", shapes.box(0.5, 0.3, 0.4, 8, grading=0.5, center=(1.0, 0.2, 0.1))),
        ("disk", shapes.disk(0.3, 6, grading=0.5, center=(0.2, 0.1, 0.8))),
    )


@pytest.fixture(scope="module")
def result(three):
    return solve_panels(three)


def test_maxwell_matrix_signs_symmetry_and_dominance(result):
    c = result.maxwell
    assert result.asymmetry < 1e-10
    assert np.all(np.diag(c) > 0)
    assert np.all(c[~np.eye(3, dtype=bool)] < 0)
    assert np.all(c.sum(axis=1) > 0)            # every conductor has capacitance to infinity
    checks = result.checks()
    assert checks["diagonal_positive"] and checks["off_diagonal_nonpositive"]
    assert checks["diagonally_dominant"]


def test_mutual_matrix_is_nonnegative_and_rebuilds_maxwell(result):
    m = result.mutual
    assert np.all(m >= 0)
    rebuilt = -m.copy()
    np.fill_diagonal(rebuilt, 0.0)
    np.fill_diagonal(rebuilt, m.diagonal() + m.sum(axis=1) - m.diagonal())
    np.testing.assert_allclose(rebuilt, result.maxwell, rtol=1e-12)


def test_energy_and_charges_follow_from_the_matrix(three):
    volts = {"sphere": 3.0, "disk": -1.5}
    r = solve_panels(three, volts=volts)
    v = np.array([3.0, 0.0, -1.5])
    np.testing.assert_allclose(r.charges, r.maxwell @ v, rtol=1e-14)
    assert r.energy == pytest.approx(0.5 * v @ r.maxwell @ v, rel=1e-14)
    # the panel charges at these potentials sum to the conductor charges
    q = np.bincount(three.owner, weights=r.panel_sigma() * three.areas, minlength=3)
    np.testing.assert_allclose(q, r.charges, rtol=1e-12, atol=1e-12 * np.abs(r.charges).max())


def test_capacitance_scales_linearly_with_size(three, result):
    # exact in exact arithmetic; rounding can move a pair sitting on a quadrature-tier
    # threshold to the neighbouring rule, which changes C by ~1e-10 (measured)
    bigger = solve_panels(three.transformed(scale=2.5)).maxwell
    np.testing.assert_allclose(bigger, 2.5 * result.maxwell, rtol=1e-9)


def test_capacitance_is_invariant_under_rotation_and_translation(three, result):
    rot = Rotation.from_euler("xyz", [30, -50, 110], degrees=True).as_matrix()
    moved = solve_panels(three.transformed(rotation=rot, shift=(3.0, -7.0, 11.0))).maxwell
    # as above, tier flips at thresholds: ~1e-8 measured
    np.testing.assert_allclose(moved, result.maxwell, rtol=5e-8)


def test_relative_permittivity_scales_every_entry(three, result):
    # uniform medium: C = eps_r * C_vacuum exactly (closed form)
    np.testing.assert_allclose(solve_panels(three, eps_r=4.2).maxwell, 4.2 * result.maxwell,
                               rtol=1e-12)


def test_refinement_converges_monotonically_from_below():
    # unit sphere, exact 4 pi eps0: nested octahedral meshes m = 4, 8, 16, 32
    values = [maxwell(("s", shapes.octahedral_sphere(1.0, m)))[0, 0] for m in (4, 8, 16, 32)]
    errors = 1 - np.array(values) / (4 * np.pi * 8.8541878188e-12)
    assert np.all(errors > 0) and np.all(np.diff(errors) < 0)
    # second order: each halving of h cuts the error by about 4
    ratios = errors[:-1] / errors[1:]
    assert np.all((ratios > 3.5) & (ratios < 4.5))


def test_direct_and_cg_solvers_agree(three):
    direct = solve_panels(three, solver="direct").maxwell
    cg = solve_panels(three, solver="cg", tol=1e-10).maxwell
    np.testing.assert_allclose(cg, direct, rtol=1e-10)
