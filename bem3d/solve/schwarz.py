"""The two-level Schwarz preconditioner of the single-layer matrix."""


import numpy as np
import scipy.linalg
import scipy.sparse

from bem3d.kernels.schwarz import apply_subdomain_inverses, zero_charge_inverse
from bem3d.operators.cluster import ClusterTree


class SchwarzPreconditioner:
    """Two-level additive Schwarz preconditioner for the single-layer Galerkin matrix.

    M^-1 = sum_d S_d + R_0^T (R_0 P R_0^T)^-1 R_0, on subdomains that are clusters of the panel
    tree. The coarse space is one constant charge density per subdomain (R_0: the subdomain
    indicators); each local space holds the subdomain's charges of zero total, so the local
    and coarse spaces split the charges as a direct sum. S_d is the exact solve on that local
    space (kernels.schwarz.zero_charge_inverse of the principal block P_dd). Charges of zero total
    have a dipole's fast-decaying potential, so the local spaces barely couple; a subdomain's
    net charge acts far away and is left to the coarse solve. Plain block-Jacobi solves on
    whole subdomains count that far action in every subdomain again, so their condition
    number grows with the number of subdomains (README, Method). The abstract theory is
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
