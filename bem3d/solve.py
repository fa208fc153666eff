"""Solving P q = b for every conductor's unit excitation at once."""

from dataclasses import dataclass

import numpy as np
import scipy.linalg


@dataclass(frozen=True)
class SolveReport:
    """Panel charge densities (n_panels, n_rhs) in C/m^2 per volt, and how they were found."""

    charges: np.ndarray
    method: str
    iterations: int
    relative_residual: float


def solve_direct(matrix, rhs):
    """Cholesky factorisation of the SPD Galerkin matrix (only its lower triangle is read)."""
    factor = scipy.linalg.cho_factor(matrix, lower=True, check_finite=False)
    q = scipy.linalg.cho_solve(factor, rhs, check_finite=False)
    return SolveReport(q, "cholesky", 0, _relative_residual(matrix @ q, rhs))


def solve_cg(operator, rhs, tol=1e-8, max_iterations=1000, preconditioner=None):
    """Conjugate gradients run on all right-hand sides together (one operator product per step).

    preconditioner: array of the same length as rhs rows, applied as a diagonal (Jacobi), or
    None for the operator's diagonal. Stops when every column's residual norm is below
    tol * |b_j|. The capacitance is variational, so its relative error is about tol^2."""
    m_inv = 1.0 / (operator.diagonal() if preconditioner is None else preconditioner)
    b = np.atleast_2d(rhs.T).T
    x = np.zeros_like(b)
    r = b.copy()
    z = m_inv[:, None] * r
    p = z.copy()
    rz = np.einsum("ij,ij->j", r, z)
    b_norm = np.linalg.norm(b, axis=0)
    iterations = 0
    while iterations < max_iterations:
        if np.all(np.linalg.norm(r, axis=0) <= tol * b_norm):
            break
        ap = operator.matmat(p)
        alpha = rz / np.einsum("ij,ij->j", p, ap)
        x += alpha * p
        r -= alpha * ap
        z = m_inv[:, None] * r
        rz_new = np.einsum("ij,ij->j", r, z)
        p = z + (rz_new / rz) * p
        rz = rz_new
        iterations += 1
    return SolveReport(x, "cg-jacobi", iterations, _relative_residual(operator.matmat(x), b))


def _relative_residual(ax, b):
    return float(np.max(np.linalg.norm(ax - b, axis=0) / np.linalg.norm(b, axis=0)))
