"""Compressed normal-field operator of dielectric interfaces: a general (nonsymmetric) H-matrix.

Rows are interface panels, each tested over its own rule points; columns are source panels.
Entry (i, l) is kernels.points.normal_field_entry, less that of l's mirror image above a
grounded plane, exactly as the dense dielectric rows. The block partition pairs a row cluster tree
with a column cluster tree; admissible blocks get the same ACA and recompression as the
single-layer operator (hmatrix), the others are stored dense.
"""

import numpy as np
from scipy.sparse.linalg import LinearOperator

from bem3d.operators.hmatrix import (
    STORAGE,
    BlockProducts,
    assemble_blocks,
    estimate_lowrank,
    split_blocks,
)
from bem3d.operators.kernel_data import kernel_bytes


class FieldPlan:
    """Block structure and memory estimate of a normal-field operator before assembly.

    rows, columns: ClusterTrees of the test and the source panels; kernel_data:
    kernel_data.normal_field of the panels in those trees' cluster order."""

    def __init__(self, rows, columns, kernel_data, compression):
        self.rows, self.columns, self.compression = rows, columns, compression
        self.kernel_data = kernel_data
        self.near, self.far = split_blocks(rows, compression, columns)
        self.dense_numbers = int(np.sum(self.near[:, 1] * self.near[:, 3]))
        self.lowrank_numbers = estimate_lowrank(self.far, compression, kernel_data)

    def operator_bytes(self):
        """Estimated bytes of the assembled operator: dense leaves (exact) + low-rank factors."""
        return STORAGE().itemsize * (self.dense_numbers + self.lowrank_numbers)

    def argument_bytes(self):
        """Bytes of the kernel arguments (freed after assembly)."""
        return kernel_bytes(self.kernel_data)


class FieldOperator(BlockProducts, LinearOperator):
    """The compressed normal-field matrix (rows: test panels, columns: source panels,
    dimensionless) as a LinearOperator in the callers' panel orders."""

    BLOCK_NAMES = ("dense_blocks", "dense_offsets", "dense_data", "lr_blocks", "lr_offsets",
                   "lr_ranks", "lr_data", "row_perm", "col_perm")
    #: The names of arrays(): prefixed, so that they can share a cache entry with the
    #: single-layer operator's.
    ARRAY_NAMES = tuple("field_" + name for name in BLOCK_NAMES)

    def __init__(self, plan, memory_limit=None):
        blocks = assemble_blocks(plan.near, plan.far, plan.compression, plan.kernel_data,
                                 plan.dense_numbers, memory_limit, False)
        self._take({**blocks, "row_perm": plan.rows.perm, "col_perm": plan.columns.perm})

    @classmethod
    def from_arrays(cls, arrays):
        """The operator from arrays() (a cache entry)."""
        self = cls.__new__(cls)
        self._take({name: arrays["field_" + name] for name in cls.BLOCK_NAMES})
        return self

    def _take(self, arrays):
        for name, value in arrays.items():
            setattr(self, name, value)
        self._split_work()
        LinearOperator.__init__(self, np.float64, (len(self.row_perm), len(self.col_perm)))

    def arrays(self):
        """The operator as plain arrays, named ARRAY_NAMES."""
        return {"field_" + name: getattr(self, name) for name in self.BLOCK_NAMES}

    def _matvec(self, x):
        return self._matmat(np.reshape(x, (-1, 1)))[:, 0]

    def _matmat(self, x):
        return self._blocks_times(np.asarray(x, np.float64), self.row_perm, self.col_perm, False)
