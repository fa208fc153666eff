"""Conjugate gradients, its capacitance-error estimate, the Schwarz preconditioner, backend
choice and the memory guard.

References: Cholesky (scipy.linalg, LAPACK) for the exact solution of the same matrix and
the eigenvalues behind condition numbers; the
identity C - (B^T X + X^T R) = E^T P E for any approximate solution X (E = P^-1 B - X,
R = B - P X; algebra), whose diagonal CG's energy-error estimate approximates (Strakoš &
Tichý 2002, Electron. Trans. Numer. Anal. 13).
"""

import numpy as np
import pytest
import scipy.linalg
from conftest import make_panels

from bem3d.base.errors import ModelError, ResourceError
from bem3d.geometry import shapes
from bem3d.geometry.panels import Panels
from bem3d.operators.cluster import ClusterTree
from bem3d.operators.dense import DenseOperator
from bem3d.solve.conductors import choose_backend, solve_panels
from bem3d.solve.krylov import ESTIMATE_DELAY, solve_cg
from bem3d.solve.schwarz import SchwarzPreconditioner


@pytest.fixture(scope="module")
def plates():
    """Three graded plates stacked 0.1 apart and a lid: edges and close gaps, a hard case for
    CG (2,080 panels)."""
    return make_panels(
        ("bottom", shapes.rectangle(1.0, 1.0, 16, 16, grading=0.6, center=(0, 0, 0))),
        ("middle", shapes.rectangle(0.8, 0.8, 16, 16, grading=0.6, center=(0, 0, 0.1))),
        ("top", shapes.rectangle(1.0, 0.6, 16, 12, grading=0.6, center=(0, 0, 0.2))),
        ("lid", shapes.open_box(1.6, 1.6, 0.6, 12, grading=0.5, center=(0, 0, 0.4))),
    )


@pytest.fixture(scope="module")
def system(plates):
    operator = DenseOperator(plates)
    rhs = plates.excitation()
    exact = scipy.linalg.cho_solve(scipy.linalg.cho_factor(operator.matrix), rhs)
    return operator, rhs, exact


def test_schwarz_preconditioner_cuts_the_iterations(plates, system):
    operator, rhs, exact = system
    jacobi = solve_cg(operator, rhs, tol=1e-8)
    schwarz = solve_cg(operator, rhs, tol=1e-8,
                       preconditioner=SchwarzPreconditioner.from_operator(operator, plates, 128))
    assert schwarz.method == "cg-schwarz" and jacobi.method == "cg-jacobi"
    assert schwarz.converged and jacobi.converged
    assert schwarz.iterations <= 0.7 * jacobi.iterations
    for report in (jacobi, schwarz):
        np.testing.assert_allclose(report.charges, exact, rtol=0,
                                   atol=1e-6 * np.abs(exact).max())


def textbook_schwarz(panels, matrix, size):
    """The two-level additive Schwarz inverse of the textbook, in numpy: exact inverses of
    the principal blocks of whole subdomains plus the coarse solve on subdomain constants
    (Toselli & Widlund 2005, Domain Decomposition Methods, Springer, ch. 2)."""
    tree = ClusterTree.build(panels.vertices, panels.centroids, size)
    bounds = tree.partition(size)
    minv = np.zeros_like(matrix)
    r0 = np.zeros((len(bounds) - 1, len(panels)))
    for d, idx in enumerate(np.split(tree.perm, bounds[1:-1])):
        minv[np.ix_(idx, idx)] = np.linalg.inv(matrix[np.ix_(idx, idx)])
        r0[d, idx] = 1.0
    return minv + r0.T @ np.linalg.solve(r0 @ matrix @ r0.T, r0)


def condition_number(matrix, minv):
    """Spectral condition number of minv @ matrix (both SPD): eigenvalues of L^T P L for
    minv = L L^T, by LAPACK (scipy.linalg)."""
    lower = np.linalg.cholesky(0.5 * (minv + minv.T))
    eigenvalues = scipy.linalg.eigvalsh(lower.T @ matrix @ lower)
    return eigenvalues[-1] / eigenvalues[0]


def test_zero_charge_local_spaces_keep_the_condition_number_flat():
    """A graded plate under a graded box, 392 and 1,520 panels, subdomains of 32: with the
    local solves on charges of zero total (SchwarzPreconditioner) the condition number of
    M^-1 P stays put under refinement; with the textbook's whole-subdomain solves it doubles
    with every halving of the panels. Measured: 7.6 and 8.7 against 15.9 and 30.9 (6,176
    panels: 8.8 against 60.9)."""
    kappas = {}
    for m in (12, 24):
        panels = make_panels(
            ("plate", shapes.rectangle(1.0, 1.0, m, m, grading=0.6, center=(0, 0, 0))),
            ("box", shapes.box(0.6, 0.4, 0.3, m // 3, grading=0.6, center=(0, 0, 0.5))))
        operator = DenseOperator(panels)
        ours = SchwarzPreconditioner.from_operator(operator, panels, 32)(np.eye(len(panels)))
        textbook = textbook_schwarz(panels, operator.matrix, 32)
        kappas[m] = (condition_number(operator.matrix, ours),
                     condition_number(operator.matrix, textbook))
    (ours_coarse, textbook_coarse), (ours_fine, textbook_fine) = kappas[12], kappas[24]
    assert ours_fine < 1.3 * ours_coarse and textbook_fine > 1.6 * textbook_coarse
    assert ours_fine < textbook_fine / 3


def test_energy_stop_meets_the_capacitance_tolerance(plates, system):
    operator, rhs, exact = system
    exact_c = rhs.T @ exact
    tol = 1e-6
    pre = SchwarzPreconditioner.from_operator(operator, plates, 128)
    report = solve_cg(operator, rhs, tol=tol, preconditioner=pre, measure="energy")
    # the variational Maxwell matrix B^T X + X^T R has C - it = E^T P E exactly, so its
    # diagonal is the energy-norm error (>= 0), which the estimate approximates
    x = report.charges
    error = exact_c - (rhs.T @ x + x.T @ (rhs - operator.matrix @ x))
    diag = np.diag(exact_c)
    rel = np.diag(error) / diag
    assert np.all(rel >= -1e-12) and np.all(rel <= tol)
    assert np.all(report.capacitance_error >= 0.2 * rel)
    # off the diagonal |dC_ij| <= sqrt(dC_ii dC_jj) (Cauchy-Schwarz in the P inner product)
    bound = np.sqrt(np.outer(np.diag(error), np.diag(error)).clip(0))
    assert np.all(np.abs(error) <= bound + 1e-12 * diag.max())


def test_warm_start_from_the_solution_needs_no_real_iterations(system):
    operator, rhs, exact = system
    report = solve_cg(operator, rhs, tol=1e-8, x0=exact, measure="energy")
    assert report.iterations <= ESTIMATE_DELAY
    assert report.relative_residual < 1e-9
    assert solve_cg(operator, rhs, tol=1e-8, x0=exact).iterations == 0


def test_backend_choice():
    gib = 2**30
    assert choose_backend(3000, "auto", "auto", 24 * gib) == ("dense", "direct")
    assert choose_backend(3000, "compressed", "auto", 24 * gib) == ("compressed", "cg")
    assert choose_backend(200_000, "auto", "auto", 24 * gib) == ("compressed", "cg")
    # dense would not fit even at a small size: compressed
    assert choose_backend(5000, "auto", "cg", 0.1 * gib) == ("compressed", "cg")
    assert choose_backend(200_000, "dense", "cg", 24 * gib) == ("dense", "cg")
    with pytest.raises(ModelError, match="direct solver needs the dense backend"):
        choose_backend(3000, "compressed", "direct", 24 * gib)


def test_memory_guard_refuses_an_impossible_dense_run_before_assembly():
    """200,978 panels dense need 8 N^2 = 323 GB: refused with a message, nothing allocated."""
    points, triangles = shapes.rectangle(1.0, 1.0, 317, 317)
    panels = Panels.from_arrays(points, triangles, np.zeros(len(triangles), int), ("plate",))
    with pytest.raises(ResourceError, match=r"200978 panels \(the dense matrix\) would need .* GiB"):
        solve_panels(panels, backend="dense", solver="cg")
