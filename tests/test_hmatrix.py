"""The compressed (hierarchical-matrix) backend against the dense backend.

The dense backend is the reference here: its matrix agrees with bempp-cl's DP0 single layer
(test_bempp_crosscheck.py) and its capacitances with published values (test_capacitance.py).
The structural checks restate the definitions of a cluster tree and of a block partition with
the admissibility condition min(diam) <= eta dist (Hackbusch 1999, Computing 62, 89-108).
"""

import numpy as np
import pytest

from bem3d import shapes
from bem3d.kernels import assemble_dense
from bem3d.operators import PairRules, kernel_arguments
from bem3d.operators.cluster import ClusterTree, block_partition
from bem3d.operators.dense import DenseOperator
from bem3d.operators.hmatrix import Compression, HMatrixOperator, HMatrixPlan, _compress
from bem3d.pipeline import solve_panels
from conftest import assert_admissible, make_panels


@pytest.fixture(scope="module")
def three():
    """Sphere, graded box and graded disk: 2,430 panels, three conductors."""
    return make_panels(
        ("sphere", shapes.octahedral_sphere(0.4, 12)),
        ("cube", shapes.box(0.5, 0.3, 0.4, 10, grading=0.5, center=(1.0, 0.2, 0.1))),
        ("disk", shapes.disk(0.3, 8, grading=0.5, center=(0.2, 0.1, 0.8))),
    )


@pytest.fixture(scope="module")
def dense_matrix(three):
    matrix = np.empty((len(three),) * 2)
    assemble_dense(matrix, *kernel_arguments(three, PairRules()))
    return matrix


def test_cluster_tree_is_a_bisection_of_the_panels(three):
    tree = ClusterTree.build(three.vertices, three.centroids, leaf_size=32)
    assert np.array_equal(np.sort(tree.perm), np.arange(len(three)))
    leaf = tree.child[:, 0] < 0
    assert np.all(tree.sizes[leaf] <= 32) and np.all(tree.sizes[~leaf] > 32)
    for c in np.flatnonzero(~leaf):
        a, b = tree.child[c]
        assert tree.start[a] == tree.start[c] and tree.end[a] == tree.start[b]
        assert tree.end[b] == tree.end[c]
    # every cluster's box holds all corners of its panels
    for c in range(len(tree.start)):
        corners = three.vertices[tree.perm[tree.start[c]:tree.end[c]]].reshape(-1, 3)
        assert np.all(corners >= tree.lo[c]) and np.all(corners <= tree.hi[c])


def test_blocks_cover_the_matrix_once_and_far_blocks_are_admissible(three):
    eta = 1.5
    tree = ClusterTree.build(three.vertices, three.centroids, leaf_size=32)
    near, far = block_partition(tree, eta)
    count = np.zeros((len(three),) * 2, np.int64)
    for t, s in np.concatenate((near, far)):
        rows, cols = slice(tree.start[t], tree.end[t]), slice(tree.start[s], tree.end[s])
        count[rows, cols] += 1
        if t != s:
            count[cols, rows] += 1
    assert np.all(count == 1)
    for t, s in far:
        corners_t = three.vertices[tree.perm[tree.start[t]:tree.end[t]]].reshape(-1, 3)
        corners_s = three.vertices[tree.perm[tree.start[s]:tree.end[s]]].reshape(-1, 3)
        assert_admissible(corners_t, corners_s, eta)


@pytest.mark.parametrize("tolerance", [1e-4, 1e-5, 1e-6])
def test_aca_blocks_are_within_their_tolerance(three, dense_matrix, tolerance):
    """Every admissible block (random sizes and places) compressed by ACA + SVD, against the
    dense backend's entries; the tolerance is relative in the Frobenius norm, block by block."""
    plan = HMatrixPlan(three, compression=Compression(tolerance=tolerance))
    blocks = plan.far
    ranks, pieces = _compress(blocks, plan.compression, plan.kargs)
    data, pos, checked = np.concatenate(pieces), 0, 0
    perm = plan.tree.perm
    for (r0, m, c0, n), r in zip(blocks, ranks):
        if r <= 0:
            continue                       # stored dense: exact
        u = data[pos:pos + m * r].reshape(m, r)
        v = data[pos + m * r:pos + (m + n) * r].reshape(n, r)
        pos += (m + n) * r
        exact = dense_matrix[np.ix_(perm[r0:r0 + m], perm[c0:c0 + n])]
        assert np.linalg.norm(u @ v.T - exact) <= tolerance * np.linalg.norm(exact)
        checked += 1
    assert checked > 40                    # and not every block fell back to dense


def test_product_and_diagonal_match_the_dense_operator(three):
    dense = DenseOperator(three)
    h = HMatrixOperator.assemble(HMatrixPlan(three, compression=Compression(tolerance=1e-6)))
    x = np.random.default_rng(0).standard_normal((len(three), 3))
    assert np.linalg.norm(h @ x - dense @ x) <= 1e-6 * np.linalg.norm(dense @ x)
    # stored in single precision: rounded to half a unit in the last place, 2^-24 relative
    np.testing.assert_allclose(h.diagonal(), dense.diagonal(), rtol=2.0**-24)
    assert h.compression_ratio < 0.6


@pytest.mark.parametrize("ground_z", [None, -0.5], ids=["free space", "ground plane"])
def test_compressed_capacitance_matches_dense(three, ground_z):
    """Every Maxwell entry within 1e-4 of the dense backend's (the issue's target), also with
    a grounded plane below (method of images in both backends)."""
    dense = solve_panels(three, backend="dense", solver="direct", ground_z=ground_z).maxwell
    compressed = solve_panels(three, backend="compressed", ground_z=ground_z)
    assert compressed.solver["backend"] == "compressed"
    assert compressed.solver["converged"]
    np.testing.assert_allclose(compressed.maxwell, dense, rtol=1e-4)
