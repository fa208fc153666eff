"""The discrete operator against bempp-cl, a general-purpose BEM library from the registry.

bempp-cl (Betcke & Scroggs 2021, J. Open Source Softw. 6(59), 2879) assembles the Galerkin
single layer on DP0 (piecewise-constant) functions with its own quadrature: Sauter-Schwab
singular rules for touching triangles, Gauss rules elsewhere. Its kernel is 1/(4 pi |x-y|), so
its matrix is our int int 1/|x-y| divided by 4 pi. With its orders raised to 10 it is converged
far below the tolerances here (checked: orders 10 and 16 agree to 1e-10 on these meshes).
"""

import math

import numpy as np
import pytest

from bem3d.geometry import shapes
from bem3d.geometry.panels import Panels
from bem3d.kernels.dense import assemble_dense
from bem3d.operators.kernel_data import single_layer
from bem3d.operators.rules import PairRules

bempp = pytest.importorskip("bempp_cl.api")


def bempp_matrix(points, triangles):
    bempp.GLOBAL_PARAMETERS.quadrature.regular = 10
    bempp.GLOBAL_PARAMETERS.quadrature.singular = 10
    grid = bempp.Grid(np.ascontiguousarray(points.T), np.ascontiguousarray(triangles.T))
    space = bempp.function_space(grid, "DP", 0)
    op = bempp.operators.boundary.laplace.single_layer(space, space, space, assembler="dense")
    return np.asarray(op.weak_form().A)


@pytest.mark.parametrize("mesh", [shapes.octahedral_sphere(1.0, 6),
                                  shapes.box(1.0, 0.6, 0.8, 5, grading=0.6)],
                         ids=["sphere", "graded box"])
def test_matrix_matches_bempp_dp0_single_layer(mesh):
    points, triangles = mesh
    panels = Panels.from_arrays(points, triangles, np.zeros(len(triangles), int), ("body",))
    ours = np.empty((len(panels),) * 2)
    assemble_dense(ours, single_layer(panels, PairRules()))
    ours /= 4 * math.pi
    theirs = bempp_matrix(points, triangles)
    rel = np.abs(ours - theirs) / np.abs(theirs)
    q = (np.linalg.norm(panels.centroids[:, None] - panels.centroids[None], axis=2)
         / (panels.radii[:, None] + panels.radii[None]))
    assert np.max(np.diag(rel)) < 1e-8                # self terms: semi-analytic
    assert np.max(rel[(q > 0) & (q < 1.05)]) < 5e-5   # touching pairs: graded Duffy rule
    assert np.max(rel) < 5e-5                         # every entry
    # the capacitance (1^T-weighted inverse) agrees much better than single entries
    b = panels.areas
    c_ours, c_theirs = b @ np.linalg.solve(ours, b), b @ np.linalg.solve(theirs, b)
    assert c_ours == pytest.approx(c_theirs, rel=1e-5)
