"""Compressed Galerkin single-layer operator: a hierarchical matrix (H-matrix).

Panels are clustered by bounding-box bisection; blocks of cluster pairs with
min(diam) <= eta * dist are admissible and approximated by adaptive cross approximation with
partial pivoting (Bebendorf 2000, Numer. Math. 86, 565-589) followed by QR/SVD recompression to
the block tolerance, their entries all by the one quadrature rule the dense backend would
give the block's closest pair (entries.block_rules), so that they vary smoothly; all other
blocks are leaves filled densely with the dense backend's pair integrals (Hackbusch 1999, Computing 62,
89-108; Börm, Grasedyck & Hackbusch 2003, Hierarchical matrices, lecture notes 21, MPI
Leipzig). Storage and work grow like N log N.
"""

import math
from dataclasses import asdict, dataclass

import numba
import numpy as np
from scipy.sparse.linalg import LinearOperator
from threadpoolctl import threadpool_limits

from bem3d.base.constants import EPS0
from bem3d.base.errors import ResourceError
from bem3d.geometry.panels import Panels
from bem3d.kernels import aca, entries, products
from bem3d.kernels.data import SingleLayer
from bem3d.kernels.schwarz import coarse_matrix, subdomain_inverses
from bem3d.operators.cluster import ClusterTree, block_partition
from bem3d.operators.kernel_data import kernel_bytes, single_layer
from bem3d.operators.rules import PairRules

#: Room (float64 numbers) for the ACA factors of one batch of admissible blocks.
BATCH_NUMBERS = 2**24
#: The stored entries and factors are single precision: their rounding (6e-8 relative) is far
#: below the block tolerance and the quadrature's accuracy, and it halves the memory and the
#: bytes each product streams. Products, ACA and the preconditioner compute in double; the
#: stored operator is exactly symmetric, so CG sees a symmetric matrix.
STORAGE = np.float32
#: Shares of a block's tolerance given to ACA's stopping test and to the SVD truncation: ACA's
#: estimate of its own error can be too small, so it gets the smaller share. On 430 blocks of
#: each 32k-panel test model (sphere, sensor head) at 1e-5 and 1e-6 the worst measured block
#: error was 0.61 of the tolerance; at an ACA share of 0.05 a third more blocks went dense.
ACA_SHARE, SVD_SHARE = 0.2, 0.5
#: Admissible blocks whose break-even rank is below this are filled dense without trying ACA.
DENSE_BELOW = 8
#: Admissible blocks whose ranks are measured to estimate the memory before assembly.
RANK_SAMPLES = 400


@dataclass(frozen=True)
class Compression:
    """Settings of the compressed backend.

    tolerance: relative Frobenius-norm accuracy of every admissible block (ACA to a tenth of
    it, then SVD truncation to the rest). eta: admissibility min(diam) <= eta * dist. leaf_size:
    most panels in a leaf cluster. max_rank: a block needing more is stored dense."""

    tolerance: float = 1e-5
    eta: float = 1.5
    leaf_size: int = 32
    max_rank: int = 128

    def as_dict(self):
        return asdict(self)


def _ranges(tree, pairs, columns=None):
    # (row0, rows, col0, cols) of cluster pairs, in cluster numbering (columns: the column
    # tree when it is not the row tree)
    cols = tree if columns is None else columns
    t, s = pairs[:, 0], pairs[:, 1]
    return np.ascontiguousarray(np.stack([tree.start[t], tree.end[t] - tree.start[t],
                                          cols.start[s], cols.end[s] - cols.start[s]], axis=1))


def split_blocks(tree, compression, columns=None):
    """(near, far) blocks (k, 4) of the partition, shuffled (which balances the threads'
    work in every parallel loop); admissible blocks too small to gain from ACA join near."""
    near, far = block_partition(tree, compression.eta, columns)
    rng = np.random.default_rng(0)
    near = _ranges(tree, near[rng.permutation(len(near))], columns)
    far = _ranges(tree, far[rng.permutation(len(far))], columns)
    small = _room(far, compression.max_rank) < DENSE_BELOW
    return np.concatenate((near, far[small])), far[~small]


def block_rules(blocks, kernel_data):
    """The quadrature rule of each admissible block (kernels.entries.block_rules) of the
    single-layer or the normal-field operator (kernels.data.SingleLayer or NormalField)."""
    d = kernel_data
    if isinstance(d, SingleLayer):
        return entries.block_rules(blocks, d.centroids[:, None, :], d.radii, d.centroids,
                                   d.radii, d.near, d.mid, d.far)
    return entries.block_rules(blocks, d.test_points, np.zeros(len(d.test_points)),
                               d.centroids, d.radii, d.near, d.mid, d.far)


def estimate_lowrank(far, compression, kernel_data):
    """Estimated numbers of the low-rank factors of the blocks far: the ranks of a sample of
    blocks of each size class (log2 of rows*cols) stand for the class."""
    if len(far) == 0:
        return 0
    size_class = np.log2(far[:, 1] * far[:, 3]).astype(np.int64)
    rng = np.random.default_rng(1)
    pick = np.unique(np.concatenate([
        rng.choice(np.flatnonzero(size_class == c),
                   min(max(2, RANK_SAMPLES * np.sum(size_class == c) // len(far)),
                       np.sum(size_class == c)), replace=False)
        for c in np.unique(size_class)]))
    ranks, _ = _compress(far[pick], compression, kernel_data)
    per_number = np.zeros(size_class.max() + 1)
    for c in np.unique(size_class):
        sample = size_class[pick] == c
        b = far[pick][sample]
        store = np.where(ranks[sample] < 0, b[:, 1] * b[:, 3],
                         ranks[sample] * (b[:, 1] + b[:, 3]))
        per_number[c] = store.sum() / np.sum(b[:, 1] * b[:, 3])
    return int(np.sum(per_number[size_class] * far[:, 1] * far[:, 3]))


def assemble_blocks(near, far, compression, kernel_data, dense_numbers, memory_limit, symmetric):
    """Compress the admissible blocks far, fill the near ones: the block arrays of an
    operator (dense_blocks, dense_offsets, dense_data, lr_blocks, lr_offsets, lr_ranks,
    lr_data) from its kernel_data (kernels.data.SingleLayer or NormalField). memory_limit
    (bytes) is checked as the low-rank factors come in, so a run that outgrows its estimate
    stops cleanly instead of being killed."""
    item = STORAGE().itemsize
    budget = None if memory_limit is None else memory_limit - item * dense_numbers
    ranks, pieces = _compress(far, compression, kernel_data, budget)
    low = ranks > 0
    lr_blocks = far[low]
    lr_ranks = ranks[low]
    lr_data = _concatenate(pieces)
    # blocks that did not compress below the break-even rank join the dense leaves
    dense_blocks = np.concatenate((near, far[ranks < 0]))
    dense_rules = np.concatenate((np.full(len(near), entries.PAIR_RULE, np.int64),
                                  block_rules(far[ranks < 0], kernel_data)))
    dense_sizes = dense_blocks[:, 1] * dense_blocks[:, 3]
    need = item * (lr_data.size + dense_sizes.sum())
    if memory_limit is not None and need > memory_limit:
        raise ResourceError(f"the compressed operator needs {need / 2**30:.1f} GiB, more "
                            f"than the {memory_limit / 2**30:.1f} GiB allowed")
    dense_offsets = np.concatenate(([0], np.cumsum(dense_sizes))).astype(np.int64)
    dense_data = np.empty(dense_offsets[-1], STORAGE)
    entries.fill_dense_blocks(dense_blocks, dense_rules, dense_offsets, dense_data, kernel_data,
                              symmetric)
    lr_offsets = np.concatenate(
        ([0], np.cumsum(lr_ranks * (lr_blocks[:, 1] + lr_blocks[:, 3])))).astype(np.int64)
    return dict(dense_blocks=dense_blocks, dense_offsets=dense_offsets, dense_data=dense_data,
                lr_blocks=lr_blocks, lr_offsets=lr_offsets, lr_ranks=lr_ranks, lr_data=lr_data)


def _room(blocks, max_rank):
    # break-even rank rows*cols/(rows+cols): above it the dense block is smaller
    m, n = blocks[:, 1], blocks[:, 3]
    return np.minimum(max_rank, (m * n) // (m + n))


def _compress(blocks, compression, kernel_data, budget=None):
    """Ranks (-1: store dense) and compressed factors of admissible blocks, in batches.

    budget: bytes the factors may take; passing it stops the run with ResourceError."""
    kmax = _room(blocks, compression.max_rank)
    rules = block_rules(blocks, kernel_data)
    ranks = np.empty(len(blocks), np.int64)
    pieces, start = [], 0
    eps = compression.tolerance
    while start < len(blocks):
        need = np.cumsum(kmax[start:] * (blocks[start:, 1] + blocks[start:, 3]))
        stop = start + max(1, int(np.searchsorted(need, BATCH_NUMBERS, side="right")))
        batch = blocks[start:stop]
        slots = np.concatenate(([0], need[:stop - start]))
        scratch = np.empty(slots[-1])
        # each thread runs its own small LAPACK calls: a threaded BLAS inside would oversubscribe
        with threadpool_limits(limits=1, user_api="blas"):
            aca.compress_blocks(batch, rules[start:stop], slots, scratch, ranks[start:stop],
                                     ACA_SHARE * eps, SVD_SHARE * eps, kernel_data)
        r = np.maximum(ranks[start:stop], 0)
        offsets = np.concatenate(([0], np.cumsum(r * (batch[:, 1] + batch[:, 3]))))
        piece = np.empty(offsets[-1], STORAGE)
        aca.gather_blocks(batch, slots, ranks[start:stop], scratch, offsets, piece)
        pieces.append(piece)
        start = stop
        held = sum(p.nbytes for p in pieces)
        if budget is not None and held > budget:
            raise ResourceError(
                f"the low-rank blocks outgrew their memory estimate ({held / 2**30:.1f} GiB "
                f"after {stop} of {len(blocks)} blocks, {budget / 2**30:.1f} GiB allowed); "
                "coarsen the mesh or loosen the tolerance")
    return ranks, pieces


def _concatenate(pieces):
    # one array without holding two copies: pages of `out` become resident only as filled
    out = np.empty(sum(len(p) for p in pieces), STORAGE)
    pos = 0
    while pieces:
        piece = pieces.pop(0)
        out[pos:pos + len(piece)] = piece
        pos += len(piece)
        del piece
    return out


def _groups(cost, n_groups):
    # contiguous runs of blocks with about equal total cost, one per thread
    total = np.concatenate(([0.0], np.cumsum(cost, dtype=np.float64)))
    cuts = np.searchsorted(total, total[-1] * np.arange(1, n_groups) / n_groups)
    return np.concatenate(([0], cuts, [len(cost)])).astype(np.int64)


class HMatrixPlan:
    """The block structure of a compressed operator and its memory, known before assembly.

    panels: Panels (m). Builds the cluster tree and block partition, renumbers the panels and
    measures the ranks of a sample of admissible blocks to estimate the low-rank storage.
    tree: a ClusterTree of the panels to use instead of bisecting them afresh. leading: keep
    only the blocks with rows or columns among the first `leading` panels of the cluster
    numbering; the operator is then right in those rows and columns only (the others lack
    the blocks among themselves)."""

    def __init__(self, panels, rules=PairRules(), compression=Compression(), ground_z=None,
                 tree=None, leading=None):
        self.compression, self.rules = compression, rules
        self.tree = tree if tree is not None else ClusterTree.build(
            panels.vertices, panels.centroids, compression.leaf_size)
        self.near, self.far = split_blocks(self.tree, compression)
        if leading is not None:
            self.near, self.far = (b[(b[:, 0] < leading) | (b[:, 2] < leading)]
                                   for b in (self.near, self.far))
        self.n = len(panels)
        self.panels = Panels(panels.vertices[self.tree.perm], panels.owner[self.tree.perm],
                             panels.names)
        self.kernel_data = single_layer(self.panels, rules, ground_z)
        self.dense_numbers = int(np.sum(self.near[:, 1] * self.near[:, 3]))
        self.lowrank_numbers = estimate_lowrank(self.far, compression, self.kernel_data)

    @property
    def dense_bytes(self):
        """Bytes of the dense leaves (exact)."""
        return STORAGE().itemsize * self.dense_numbers

    @property
    def lowrank_bytes(self):
        """Estimated bytes of the low-rank factors."""
        return STORAGE().itemsize * self.lowrank_numbers

    def operator_bytes(self):
        """Estimated bytes of the assembled operator: dense leaves + low-rank factors."""
        return self.dense_bytes + self.lowrank_bytes

    def work_bytes(self, n_rhs, subdomain_size):
        """Bytes beside the operator: the kernel arguments (freed after assembly), the
        preconditioner on subdomains of <= subdomain_size panels, and the solver's vectors."""
        arrays = kernel_bytes(self.kernel_data)
        sizes = np.diff(self.tree.partition(subdomain_size))
        schwarz = 8 * (np.sum(sizes * sizes) + 2 * len(sizes) ** 2)
        vectors = 8 * self.n * n_rhs * (numba.get_num_threads() + 10)
        return int(arrays + schwarz + vectors)


class BlockProducts:
    """Products with stored blocks (dense_blocks ... lr_data attributes), shared by the
    symmetric single-layer operator and the general normal-field one."""

    def _split_work(self):
        # the product visits the blocks by rows (then columns), so that the vector pieces it
        # reads and writes stay in cache (the stored order is shuffled, for the assembly's
        # balance): 37% less time per product on the 518,496-panel sensor head; thread
        # groups of about equal cost; the rank the product's scratch must hold
        threads = numba.get_num_threads()
        self.dense_order, self.lr_order = (np.lexsort((b[:, 2], b[:, 0]))
                                           for b in (self.dense_blocks, self.lr_blocks))
        self.dense_groups = _groups((self.dense_blocks[:, 1] * self.dense_blocks[:, 3])
                                    [self.dense_order], threads)
        self.lr_groups = _groups((self.lr_ranks * (self.lr_blocks[:, 1] + self.lr_blocks[:, 3]))
                                 [self.lr_order], threads)
        self.max_rank = int(self.lr_ranks.max(initial=0))

    def _blocks_times(self, x, row_perm, col_perm, symmetric):
        # x (columns of the operator, k) in the caller's order; row_perm, col_perm: caller
        # index of each cluster-numbered row and column
        # the kernels take (columns, panels) so that each column is contiguous
        xp = np.ascontiguousarray(x[col_perm].T)
        parts = np.empty((len(self.dense_groups) - 1, x.shape[1], len(row_perm)))
        products.hmatrix_product(xp, parts, self.dense_blocks, self.dense_offsets,
                                 self.dense_data, self.lr_blocks, self.lr_offsets, self.lr_ranks,
                                 self.lr_data, self.dense_order, self.lr_order,
                                 self.dense_groups, self.lr_groups, self.max_rank, symmetric)
        y = np.empty((len(row_perm), x.shape[1]))
        y[row_perm] = parts.sum(axis=0).T
        return y

    @property
    def nbytes(self):
        return self.dense_data.nbytes + self.lr_data.nbytes

    @property
    def compression_ratio(self):
        """Stored numbers over the rows * columns of the dense matrix."""
        return (self.dense_data.size + self.lr_data.size) / float(np.prod(self.shape))


class HMatrixOperator(BlockProducts, LinearOperator):
    """The hierarchical-matrix approximation of P (V m^2 per C/m^2) as a LinearOperator.

    Built by assemble() or from the plain arrays of arrays() (the cache). Products take and
    return vectors in the caller's panel order; inside, panels are in cluster order."""

    ARRAY_NAMES = ("perm", "tree_start", "tree_end", "tree_child", "tree_lo", "tree_hi",
                   "dense_blocks", "dense_offsets", "dense_data",
                   "lr_blocks", "lr_offsets", "lr_ranks", "lr_data")

    def __init__(self, arrays, eps_r=1.0):
        for name in self.ARRAY_NAMES:
            setattr(self, name, arrays[name])
        self.tree = ClusterTree(self.perm, self.tree_start, self.tree_end, self.tree_child,
                                self.tree_lo, self.tree_hi)
        self.scale = 1.0 / (4.0 * math.pi * EPS0 * eps_r)
        n = len(self.perm)
        self._split_work()
        super().__init__(np.float64, (n, n))

    @classmethod
    def assemble(cls, plan, eps_r=1.0, memory_limit=None):
        """Compress the admissible blocks, fill the others. memory_limit (bytes) for the
        operator is checked as the low-rank factors come in, so a run that outgrows its
        estimate stops cleanly instead of being killed."""
        blocks = assemble_blocks(plan.near, plan.far, plan.compression, plan.kernel_data,
                                 plan.dense_numbers, memory_limit, True)
        t = plan.tree
        return cls(dict(perm=t.perm, tree_start=t.start, tree_end=t.end, tree_child=t.child,
                        tree_lo=t.lo, tree_hi=t.hi, **blocks), eps_r)

    def arrays(self):
        """The operator as plain arrays (integrals in m^3, before the 1/(4 pi eps) factor)."""
        return {name: getattr(self, name) for name in self.ARRAY_NAMES}

    def _product(self, x):
        return self.scale * self._blocks_times(x, self.perm, self.perm, True)

    def _matvec(self, x):
        return self._product(np.reshape(x, (-1, 1)))[:, 0]

    def _matmat(self, x):
        return self._product(np.asarray(x, np.float64))

    def _adjoint(self):
        return self

    def diagonal(self):
        """The diagonal of P, in the caller's panel order (0 where a plan's `leading` left
        the diagonal block out)."""
        d = np.zeros(self.shape[0])
        for (r0, m, c0, _), off in zip(self.dense_blocks, self.dense_offsets):
            if r0 == c0:
                d[self.perm[r0:r0 + m]] = self.dense_data[off:off + m * m:m + 1]
        return self.scale * d

    def schwarz_parts(self, max_size, areas, leading=None):
        """Pieces of a two-level additive Schwarz preconditioner on clusters of <= max_size.

        Returns (perm, bounds, inverse_offsets, inverses, coarse) of the unscaled integrals
        (P / scale): subdomain d is panels perm[bounds[d]:bounds[d+1]]; the zero-charge inverse
        of its principal block (kernels.schwarz.zero_charge_inverse, areas: the panels' areas in
        cluster numbering) is at inverses[inverse_offsets[d]:], row-major; coarse is R P R^T
        for the subdomain indicators R. leading: cover only the first `leading` panels of the
        cluster numbering (whole clusters of the tree): the preconditioner of that principal
        block."""
        bounds = self.tree.partition(max_size)
        if leading is not None:
            bounds = bounds[:np.searchsorted(bounds, leading) + 1]
        end = bounds[-1]

        def within(blocks, offsets):
            # the blocks inside the covered panels (offsets: the start of each block's data)
            keep = (blocks[:, 0] + blocks[:, 1] <= end) & (blocks[:, 2] + blocks[:, 3] <= end)
            return keep, blocks[keep], offsets[:-1][keep]

        _, dense_blocks, dense_offsets = within(self.dense_blocks, self.dense_offsets)
        low, lr_blocks, lr_offsets = within(self.lr_blocks, self.lr_offsets)
        lr_ranks = self.lr_ranks[low]
        sizes = np.diff(bounds)
        domain_of = np.repeat(np.arange(len(sizes)), sizes)

        def inside(blocks):
            # blocks whose rows and columns lie in one subdomain, grouped by it
            d = domain_of[blocks[:, 0]]
            same = ((d == domain_of[blocks[:, 0] + blocks[:, 1] - 1])
                    & (d == domain_of[blocks[:, 2]])
                    & (d == domain_of[blocks[:, 2] + blocks[:, 3] - 1]))
            idx = np.flatnonzero(same)
            idx = idx[np.argsort(d[idx], kind="stable")]
            ptr = np.searchsorted(d[idx], np.arange(len(sizes) + 1))
            return ptr.astype(np.int64), idx.astype(np.int64)

        dense_ptr, dense_idx = inside(dense_blocks)
        lr_ptr, lr_idx = inside(lr_blocks)
        inv_offsets = np.concatenate(([0], np.cumsum(sizes * sizes))).astype(np.int64)
        inverses = np.empty(inv_offsets[-1])
        with threadpool_limits(limits=1, user_api="blas"):     # as in _compress
            subdomain_inverses(bounds, areas, dense_ptr, dense_idx, dense_blocks,
                                        dense_offsets, self.dense_data, lr_ptr, lr_idx,
                                        lr_blocks, lr_offsets, lr_ranks, self.lr_data,
                                        inv_offsets, inverses)
        coarse = coarse_matrix(domain_of, len(sizes), dense_blocks, dense_offsets,
                                        self.dense_data, lr_blocks, lr_offsets, lr_ranks,
                                        self.lr_data)
        return self.perm, bounds, inv_offsets, inverses, coarse
