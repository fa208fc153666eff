"""Tests for bem3d.geometry: the checks of panels before a solve (errors, accuracy warnings,
conductors that touch or come close, the mesh report) and triangle distances, on panels built in
memory.

Every expected number is a closed form, a rule of thumb or brute-force sampling, noted beside
it.
"""

import numpy as np
import pytest
from conftest import TET_POINTS, TET_TRIS

from bem3d.base.errors import MeshError
from bem3d.geometry.distances import triangle_distance
from bem3d.geometry.panels import Panels
from bem3d.geometry.quality import check_geometry, mesh_summary


def plates(gap):
    """Two parallel unit squares (two panels each) at z = 0 and z = gap, as Panels."""
    square = np.array([[[0, 0, 0], [1, 0, 0], [1, 1, 0]], [[0, 0, 0], [1, 1, 0], [0, 1, 0]]], float)
    vertices = np.concatenate([square, square + [0, 0, gap]])
    return Panels(vertices, [0, 0, 1, 1], ("lower", "upper"))


def test_check_geometry_gap_thresholds():
    # Panel size (longest edge) here is sqrt(2) m, the diagonal of a half unit square: a gap
    # below it is under-resolved (common practice, no source), one above it is not.
    assert check_geometry(plates(1.5), "cap.msh") == []
    close = check_geometry(plates(0.5), "cap.msh")
    assert len(close) == 1 and "come within 0.5 m" in close[0]
    assert "panel size there (1.41 m" in close[0] and "about 3x finer" in close[0]  # sqrt2/0.5
    assert "at most 0.5 m" in close[0]
    assert "come within 0.001 m" in check_geometry(plates(1e-3), "cap.msh")[0]
    with pytest.raises(MeshError, match="cap.msh: conductors 'lower' and 'upper' touch"):
        check_geometry(plates(1e-9), "cap.msh")


def test_check_geometry_names_each_conductors_file():
    with pytest.raises(MeshError, match=r"^lo\.stl, hi\.stl: conductors 'lower' and 'upper'"):
        check_geometry(plates(0.0), ["lo.stl", "hi.stl"])


def test_check_geometry_reports_how_many_more_problems():
    p = plates(0.5)
    v = p.vertices.copy()
    v[0, 2] = v[0, 1]  # panel 0 collapses to a segment
    v[3] = v[2]  # panel 3 duplicates panel 2
    with pytest.raises(MeshError, match=r"zero-area.*\(and 1 more problems\)$"):
        check_geometry(Panels(v, p.owner, p.names), "bad.vtu")


def test_triangle_distance_against_sampling():
    # Brute force: the minimum distance between dense barycentric samples of the two triangles is
    # an upper bound that exceeds the true distance by at most the sampling step.
    rng = np.random.default_rng(1)
    s, t = rng.normal(size=(2, 40, 3, 3))
    t[:20] += rng.normal(scale=3, size=(20, 1, 3))  # half the pairs apart, half mostly crossing
    u = np.linspace(0, 1, 41)
    w = np.array([(a, b, 1 - a - b) for a in u for b in u if a + b <= 1 + 1e-12])
    exact = triangle_distance(s, t)
    for k in range(len(s)):
        xs, xt = w @ s[k], w @ t[k]
        sampled = np.sqrt(((xs[:, None] - xt[None]) ** 2).sum(-1)).min()
        step = max(np.ptp(s[k], 0).max(), np.ptp(t[k], 0).max()) / 40
        assert exact[k] <= sampled + 1e-12
        assert exact[k] >= sampled - 2 * step


def test_mesh_summary_lists_problems_without_raising():
    summary = mesh_summary(plates(0.0), "cap.msh")
    assert summary["conductors"][0]["boundary_edges"] == 4  # open unit square: its 4 sides
    assert len(summary["problems"]) == 1 and "touch" in summary["problems"][0]


def test_mesh_summary_gives_shape_figures():
    # Corner tetrahedron: right faces have aspect (sqrt 2)^2 / (2 * 1/2) = 2, the equilateral
    # face 2 / sqrt(3); every pair of neighbours has longest edges sqrt(2) (geometry).
    panels = Panels(TET_POINTS[TET_TRIS], [0, 0, 0, 0], ("tet",))
    summary = mesh_summary(panels, "tet.stl")
    assert summary["aspect_ratio_max"] == pytest.approx(2.0)
    assert summary["neighbour_size_ratio_max"] == pytest.approx(1.0)
