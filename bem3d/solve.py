"""Solving P q = b for every conductor's unit excitation at once."""

from dataclasses import dataclass

import numpy as np
import scipy.linalg
import scipy.sparse

from .operators.cluster import ClusterTree
from .operators.hkernels import apply_subdomain_inverses, zero_charge_inverse

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


class SchwarzPreconditioner:
    """Two-level additive Schwarz preconditioner for the single-layer Galerkin matrix.

    M^-1 = sum_d S_d + R_0^T (R_0 P R_0^T)^-1 R_0, on subdomains that are clusters of the panel
    tree. The coarse space is one constant charge density per subdomain (R_0: the subdomain
    indicators); each local space holds the subdomain's charges of zero total, so the local
    and coarse spaces split the charges as a direct sum. S_d is the exact solve on that local
    space (hkernels.zero_charge_inverse of the principal block P_dd). Charges of zero total
    have a dipole's fast-decaying potential, so the local spaces barely couple; a subdomain's
    net charge acts far away and is left to the coarse solve. Plain block-Jacobi solves on
    whole subdomains count that far action in every subdomain again: the largest eigenvalue
    of M^-1 P then grows like the number of subdomains across the model (measured on the
    sensor head: 14, 25, 47 at 8k, 32k, 127k panels, 33 to 48 CG iterations), whereas with the
    zero-charge local spaces it stays near 2.4 (22 to 25 iterations). The abstract theory is
    that of stable splittings (Toselli & Widlund 2005, Domain Decomposition Methods,
    Springer, ch. 2); for first-kind integral equations Tran & Stephan 1996 (Applicable
    Analysis 60, 63-84). perm, bounds: subdomain d is panels perm[bounds[d]:bounds[d+1]];
    inverses[inverse_offsets[d]:] its S_d row-major; coarse (k, k) = R_0 P R_0^T."""

    name = "schwarz"
    ARRAY_NAMES = ("schwarz_perm", "schwarz_bounds", "schwarz_inverse_offsets",
                   "schwarz_inverses", "schwarz_coarse_factor")

    def __init__(self, perm, bounds, inverse_offsets, inverses, coarse, factor=1.0):
        self.perm, self.bounds = perm, bounds
        self.inverse_offsets, self.inverses = inverse_offsets, inverses
        self.sizes = np.diff(bounds)
        self.coarse_factor = scipy.linalg.cho_factor(coarse, lower=True)
        self.factor = factor

    @classmethod
    def from_operator(cls, operator, panels, max_size=128):
        """Subdomains of at most max_size panels. A compressed operator supplies its own pieces
        (for its unscaled integrals, hence the factor); a dense one (with .matrix) is cut along
        a cluster tree of the panels."""
        if hasattr(operator, "schwarz_parts"):
            return cls(*operator.schwarz_parts(max_size, panels.areas[operator.perm]),
                       factor=1.0 / operator.scale)
        tree = ClusterTree.build(panels.vertices, panels.centroids, max_size)
        bounds = tree.partition(max_size)
        sizes = np.diff(bounds)
        inverses = np.concatenate([
            zero_charge_inverse(np.linalg.inv(operator.matrix[np.ix_(idx, idx)]),
                                panels.areas[idx]).ravel()
            for idx in np.split(tree.perm, bounds[1:-1])])
        domain = np.repeat(np.arange(len(sizes)), sizes)
        r0 = scipy.sparse.csr_matrix((np.ones(len(domain)), (domain, tree.perm)),
                                     shape=(len(sizes), len(domain)))
        coarse = r0 @ (r0 @ operator.matrix).T
        offsets = np.concatenate(([0], np.cumsum(sizes * sizes))).astype(np.int64)
        return cls(tree.perm, bounds, offsets, inverses, np.asarray(coarse))

    @property
    def nbytes(self):
        return self.inverses.nbytes + self.coarse_factor[0].nbytes

    def arrays(self):
        """The preconditioner as plain arrays (for the cache), without its factor."""
        return dict(zip(self.ARRAY_NAMES, (self.perm, self.bounds, self.inverse_offsets,
                                           self.inverses, self.coarse_factor[0])))

    @classmethod
    def from_arrays(cls, arrays, factor=1.0):
        """The preconditioner from arrays(), applied times factor."""
        self = cls.__new__(cls)
        (self.perm, self.bounds, self.inverse_offsets, self.inverses,
         coarse_factor) = (arrays[name] for name in cls.ARRAY_NAMES)
        self.sizes = np.diff(self.bounds)
        self.coarse_factor = (coarse_factor, True)
        self.factor = factor
        return self

    def __call__(self, r):
        rp = np.ascontiguousarray(r[self.perm])
        zp = np.empty_like(rp)
        apply_subdomain_inverses(self.bounds, self.inverse_offsets, self.inverses, rp, zp)
        coarse = scipy.linalg.cho_solve(self.coarse_factor,
                                        np.add.reduceat(rp, self.bounds[:-1], axis=0))
        zp += np.repeat(coarse, self.sizes, axis=0)
        z = np.empty_like(zp)
        z[self.perm] = zp
        return self.factor * z
