"""Conjugate gradients on all conductors' right-hand sides at once, and the direct solve."""

from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.sparse

#: Iterations over which CG's energy-norm error is summed (the delay of the estimate).
ESTIMATE_DELAY = 4


@dataclass(frozen=True)
class SolveReport:
    """Panel charge densities (n_panels, n_rhs) in C/m^2 per volt, and how they were found.

    capacitance_error: for each column j, the estimated relative energy-norm error
    |e_j|_P^2 / C_jj that the iteration left (0 for a direct solve, NaN where a warm start met
    the tolerance without iterating): C_jj = b_j^T q_j is short by about that much, and C_ij
    is off by at most sqrt(err_j C_ii C_jj)."""

    charges: np.ndarray
    method: str
    iterations: int
    relative_residual: float
    capacitance_error: np.ndarray = None
    converged: bool = True


def solve_direct(matrix, rhs):
    """Cholesky factorisation of the SPD Galerkin matrix (only its lower triangle is read)."""
    factor = scipy.linalg.cho_factor(matrix, lower=True, check_finite=False)
    q = scipy.linalg.cho_solve(factor, rhs, check_finite=False)
    return SolveReport(q, "cholesky", 0, _relative_residual(rhs - matrix @ q, rhs),
                       np.zeros(np.atleast_2d(rhs.T).shape[0]))


def solve_cg(operator, rhs, tol=1e-8, max_iterations=1000, preconditioner=None, x0=None,
             measure="residual"):
    """Preconditioned conjugate gradients on all right-hand sides together (one operator
    product per step for all columns still iterating; Hestenes & Stiefel 1952).

    preconditioner: None (the operator's diagonal, Jacobi), an array (a diagonal), or a callable
    z = M^-1 r on (n, k) arrays such as SchwarzPreconditioner. x0: starting guess (n, k), e.g. a
    cached solution. measure: 'residual' stops column j when |b_j - P x_j| <= tol |b_j|;
    'energy' when the estimated relative capacitance error |e_j|_P^2 / (b_j^T x_j) <= tol, the
    energy norm of the error being summed from the last ESTIMATE_DELAY steps
    (Strakoš & Tichý 2002, Electron. Trans. Numer. Anal. 13, 56-80)."""
    if measure not in ("residual", "energy"):
        raise ValueError(f"unknown stopping measure {measure!r}")
    if preconditioner is None or isinstance(preconditioner, np.ndarray):
        m_inv = 1.0 / (operator.diagonal() if preconditioner is None else preconditioner)
        method = "cg-jacobi"

        def apply(r):
            return m_inv[:, None] * r
    else:
        apply = preconditioner
        method = f"cg-{getattr(preconditioner, 'name', 'preconditioned')}"
    b = np.atleast_2d(rhs.T).T
    n_rhs = b.shape[1]
    x = np.zeros_like(b) if x0 is None else np.array(x0, dtype=np.float64).reshape(b.shape)
    r = b - operator.matmat(x) if x0 is not None else b.copy()
    b_norm = np.linalg.norm(b, axis=0)
    steps = np.zeros((ESTIMATE_DELAY, n_rhs))   # alpha_i r_i^T z_i of the latest steps
    error = np.full(n_rhs, np.nan)
    z = apply(r)
    p = z.copy()
    rz = np.einsum("ij,ij->j", r, z)
    iterations = 0

    def settled(cols):
        if measure == "residual":
            return np.linalg.norm(r[:, cols], axis=0) <= tol * b_norm[cols]
        return (error[cols] <= tol) & (iterations >= ESTIMATE_DELAY)

    # a warm start may already be good enough; the energy estimate needs steps to judge
    active = np.arange(n_rhs)
    if measure == "residual":
        active = active[~settled(active)]
    while active.size and iterations < max_iterations:
        ap = operator.matmat(p[:, active])
        alpha = rz[active] / np.einsum("ij,ij->j", p[:, active], ap)
        x[:, active] += alpha * p[:, active]
        r[:, active] -= alpha * ap
        z_a = apply(r[:, active])
        rz_new = np.einsum("ij,ij->j", r[:, active], z_a)
        steps[iterations % ESTIMATE_DELAY, active] = alpha * rz[active]
        p[:, active] = z_a + (rz_new / rz[active]) * p[:, active]
        rz[active] = rz_new
        iterations += 1
        capacitance = np.einsum("ij,ij->j", b[:, active], x[:, active])
        error[active] = steps[:, active].sum(axis=0) / np.abs(capacitance)
        active = active[~settled(active)]
    return SolveReport(x, method, iterations, _relative_residual(b - operator.matmat(x), b),
                       error, converged=active.size == 0)


def _relative_residual(r, b):
    return float(np.max(np.linalg.norm(r, axis=0) / np.linalg.norm(b, axis=0)))
