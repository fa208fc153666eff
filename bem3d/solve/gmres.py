"""Restarted GMRES for several right-hand sides at once, right-preconditioned.

Each right-hand side keeps its own Krylov space (Saad & Schultz 1986, SIAM J. Sci. Stat.
Comput. 7, 856-869; Saad, Iterative Methods for Sparse Linear Systems, 2nd ed. 2003, alg.
6.10 with right preconditioning), but the spaces grow in lockstep, so every step applies the
operator and the preconditioner to all unfinished columns in one product: the hierarchical
matrices stream their blocks once per step, not once per column. With right preconditioning
the least-squares residual is that of the unpreconditioned system, ||b - A x||, so the
stopping rule holds for what the caller asked.
"""

from dataclasses import dataclass

import numpy as np


@dataclass
class GmresReport:
    """Iterations (the largest over the columns, restarts included), each column's relative
    residual ||b - A x|| / ||b|| as last estimated, and whether every column reached tol."""

    iterations: int
    residuals: np.ndarray
    converged: bool


def gmres_columns(apply, precondition, rhs, tol=1e-7, restart=60, max_iterations=1000,
                  callback=None):
    """Solve apply(X) = rhs for every column of rhs (n, k): (X, GmresReport).

    apply and precondition map (n, j) arrays to (n, j) arrays (any j <= k): the operator and an
    approximate inverse. Real or complex, as rhs and apply make it. callback(step, residuals)
    after every step (residuals: the active columns' relative estimates)."""
    rhs = np.asarray(rhs)
    n, k = rhs.shape
    # one column through the operator tells whether the iteration is real or complex
    dtype = np.result_type(rhs.dtype, apply(np.zeros((n, 1), rhs.dtype)).dtype)
    x = np.zeros((n, k), dtype)
    r = rhs.astype(dtype)                    # the residual of the zero start, without a product
    norms = np.linalg.norm(rhs, axis=0)
    norms[norms == 0] = 1.0
    iterations = 0
    while True:
        residuals = np.linalg.norm(r, axis=0) / norms
        active = np.flatnonzero(residuals > tol)
        if not active.size or iterations >= max_iterations:
            break
        correction, steps = _cycle(apply, precondition, r[:, active], norms[active], tol,
                                   min(restart, max_iterations - iterations), dtype, callback,
                                   iterations)
        x[:, active] += correction
        iterations += steps
        r = rhs - apply(x)
    return x, GmresReport(iterations, residuals, bool(np.all(residuals <= tol)))


def _cycle(apply, precondition, r, norms, tol, m, dtype, callback, done):
    """One restart cycle of at most m steps for the columns of r (the residuals): the
    correction to x and the steps taken."""
    n, k = r.shape
    beta = np.linalg.norm(r, axis=0)
    basis = np.empty((m + 1, n, k), dtype)
    basis[0] = r / beta
    hess = np.zeros((k, m + 1, m), dtype)
    cs = np.zeros((k, m), dtype)
    sn = np.zeros((k, m), dtype)
    g = np.zeros((k, m + 1), dtype)
    g[:, 0] = beta
    length = np.zeros(k, np.int64)          # steps taken by each column
    running = np.ones(k, bool)
    steps = 0
    for j in range(m):
        cols = np.flatnonzero(running)
        w = apply(precondition(basis[j][:, cols]))
        for i in range(j + 1):               # modified Gram-Schmidt, column by column at once
            h = np.einsum("nc,nc->c", basis[i][:, cols].conj(), w)
            hess[cols, i, j] = h
            w -= basis[i][:, cols] * h
        h_next = np.linalg.norm(w, axis=0)
        hess[cols, j + 1, j] = h_next
        safe = np.where(h_next > 0, h_next, 1.0)
        basis[j + 1][:, cols] = w / safe
        for c in cols:
            _givens(hess[c], cs[c], sn[c], g[c], j)
        length[cols] = j + 1
        steps = j + 1
        estimate = np.abs(g[cols, j + 1]) / norms[cols]
        if callback is not None:
            callback(done + steps, estimate)
        finished = (estimate <= tol) | (h_next == 0)
        running[cols[finished]] = False
        if not running.any():
            break
    correction = np.zeros((n, k), dtype)
    for c in range(k):
        j = length[c]
        if j == 0:
            continue
        y = np.linalg.solve(np.triu(hess[c, :j, :j]), g[c, :j])
        correction[:, c] = np.tensordot(y, basis[:j, :, c], axes=1)
    return precondition(correction), steps


def _givens(h, cs, sn, g, j):
    # apply the earlier rotations to column j of h, then the one that zeroes h[j + 1, j]
    for i in range(j):
        a, b = h[i, j], h[i + 1, j]
        h[i, j] = np.conj(cs[i]) * a + np.conj(sn[i]) * b
        h[i + 1, j] = -sn[i] * a + cs[i] * b
    a, b = h[j, j], h[j + 1, j]
    r = np.hypot(abs(a), abs(b))
    if r == 0:
        cs[j], sn[j] = 1.0, 0.0
    else:
        cs[j], sn[j] = a / r, b / r
    h[j, j] = np.conj(cs[j]) * a + np.conj(sn[j]) * b
    h[j + 1, j] = 0.0
    g[j + 1] = -sn[j] * g[j]
    g[j] = np.conj(cs[j]) * g[j]
