"""GMRES for several right-hand sides at once against scipy's direct solve and scipy's GMRES
(scipy.linalg.solve, scipy.sparse.linalg.gmres: general-purpose library references)."""

import numpy as np
import pytest
import scipy.linalg
import scipy.sparse.linalg as sla

from bem3d.solve.gmres import gmres_columns


def system(n, complex_part, seed=1):
    rng = np.random.default_rng(seed)
    a = 4 * np.eye(n) + rng.standard_normal((n, n)) / np.sqrt(n)
    if complex_part:
        a = a + 0.3j * rng.standard_normal((n, n)) / np.sqrt(n)
    return a, rng.standard_normal((n, 3))


@pytest.mark.parametrize("complex_part", [False, True])
@pytest.mark.parametrize("restart", [5, 40])
def test_columns_match_the_direct_solve(complex_part, restart):
    a, b = system(200, complex_part)
    d = 1.0 / np.diag(a)
    x, report = gmres_columns(lambda v: a @ v, lambda v: d[:, None] * v, b, tol=1e-10,
                              restart=restart)
    exact = scipy.linalg.solve(a, b)
    assert report.converged and np.all(report.residuals <= 1e-10)
    np.testing.assert_allclose(x, exact, atol=1e-9 * np.abs(exact).max())
    # the true residual, not only the estimate, meets the tolerance
    assert np.all(np.linalg.norm(a @ x - b, axis=0) / np.linalg.norm(b, axis=0) <= 1e-10)


def test_iterations_like_scipy_gmres_per_column():
    a, b = system(150, True, seed=3)
    x, report = gmres_columns(lambda v: a @ v, lambda v: v, b, tol=1e-8, restart=30)
    steps = []
    for c in range(b.shape[1]):
        residuals = []
        sla.gmres(a, b[:, c], rtol=1e-8, atol=0.0, restart=30, callback=residuals.append,
                  callback_type="pr_norm")
        steps.append(len(residuals))
    # the same Krylov spaces: the slowest column sets the count, within a step or two
    assert abs(report.iterations - max(steps)) <= 2


def test_an_exact_start_and_a_zero_column_take_no_steps():
    a, b = system(50, False)
    b[:, 1] = 0.0
    x, report = gmres_columns(lambda v: a @ v, lambda v: v, b, tol=1e-12)
    assert np.all(x[:, 1] == 0) and report.converged
    _, again = gmres_columns(lambda v: v, lambda v: v, b, tol=1e-12)
    assert again.iterations == 1
