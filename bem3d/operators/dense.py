"""Dense Galerkin single-layer matrix: P_kl = 1/(4 pi eps) * int_Tk int_Tl 1/|x - y|."""

import math

import numpy as np
from scipy.sparse.linalg import LinearOperator

from bem3d.base.constants import EPS0
from bem3d.base.errors import ResourceError
from bem3d.kernels.dense import assemble_dense
from bem3d.operators.kernel_data import single_layer
from bem3d.operators.rules import PairRules


def dense_bytes(n_panels):
    """Memory for the dense matrix, bytes."""
    return 8 * n_panels * n_panels


class DenseOperator(LinearOperator):
    """The assembled Galerkin matrix P as a LinearOperator.

    P maps panel charge densities sigma (C/m^2) to tested potentials int_Tk phi dA (V m^2).
    ground_z: height (m) of an infinite grounded plane, included by the method of images.
    """

    def __init__(self, panels, eps_r=1.0, rules=PairRules(), memory_limit=None, ground_z=None):
        n = len(panels)
        need = dense_bytes(n)
        if memory_limit is not None and need > memory_limit:
            raise ResourceError(
                f"dense matrix for {n} panels needs {need / 2**30:.1f} GiB, more than the "
                f"{memory_limit / 2**30:.1f} GiB allowed; use fewer panels")
        matrix = np.empty((n, n))
        assemble_dense(matrix, single_layer(panels, rules, ground_z))
        matrix *= 1.0 / (4.0 * math.pi * EPS0 * eps_r)
        self.matrix = matrix
        self.rules = rules
        super().__init__(np.float64, (n, n))

    def _matvec(self, x):
        return self.matrix @ x

    def _matmat(self, x):
        return self.matrix @ x

    def _adjoint(self):
        return self

    def diagonal(self):
        return np.diagonal(self.matrix).copy()
