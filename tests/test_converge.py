"""bem3d converge: midpoint subdivision and Richardson extrapolation of the capacitances.

References: isolated sphere 4 pi eps0 a (closed form); unit square plate 0.3667892 * 4 pi eps0 L
(Read 1997, J. Comput. Phys. 133, from memory); unit cube 0.660683 * 4 pi eps0 L (Hwang &
Mascagni 2003, via tests/reference_values.py). Orders of convergence: flat panels on a smooth
body O(h^2); a thin plate's r^(-1/2) edge charge gives about O(h) and a cube's edges about
O(h^(4/3)) under uniform refinement (singular exponents of Meixner 1972 / von Petersdorff &
Stephan 1990, from memory).
"""

import argparse
import json

import meshio
import numpy as np
import pytest
import reference_values as ref
from conftest import make_panels

from bem3d._cli import converge as converge_command
from bem3d.geometry import shapes
from bem3d.geometry.bodies import DielectricBody
from bem3d.geometry.quality import mesh_summary
from bem3d.geometry.refine import subdivide
from bem3d.post.convergence import converge, richardson

SQUARE_PLATE = 0.3667892 * 4 * np.pi * ref.EPS0         # F per metre of side (Read 1997)


def closed(panels):
    return all(c["boundary_edges"] == 0 for c in mesh_summary(panels)["conductors"])


@pytest.mark.parametrize("smooth", [True, False])
def test_subdivision_keeps_flat_faces_and_sharp_edges(smooth):
    box = make_panels(("box", shapes.box(1.0, 0.6, 0.4, 4, grading=0.5)))
    fine = subdivide(subdivide(box, smooth=smooth), smooth=smooth)
    assert len(fine) == 16 * len(box) and closed(fine)
    # every new corner still on the box's faces, corner order (normals) kept (closed form)
    half = np.array([0.5, 0.3, 0.2])
    assert np.max(np.abs(np.abs(fine.vertices) / half).max(axis=2) - 1.0) < 1e-14
    assert fine.areas.sum() == pytest.approx(box.areas.sum(), rel=1e-14)
    np.testing.assert_allclose(fine.normals, np.repeat(box.normals, 16, axis=0), atol=1e-13)
    plate = make_panels(("plate", shapes.rectangle(1.0, 1.0, 4, 4)))
    assert subdivide(plate, smooth=smooth).areas.sum() == pytest.approx(1.0, rel=1e-14)


def test_smooth_subdivision_stays_on_a_sphere_and_flat_on_the_facets():
    ball = make_panels(("ball", shapes.octahedral_sphere(1.0, 3)))
    smooth = subdivide(subdivide(ball))
    # corners on the unit sphere: circular-arc midpoints with Max's normals are exact there
    np.testing.assert_allclose(np.linalg.norm(smooth.vertices, axis=2), 1.0, atol=1e-14)
    assert closed(smooth) and np.all(np.einsum("nj,nj->n", smooth.normals, smooth.centroids) > 0)
    flat = subdivide(ball, smooth=False)
    # flat midpoints stay in their parent's plane (closed form)
    parents = np.repeat(ball.vertices[:, 0], 4, axis=0)
    offsets = np.einsum("nkj,nj->nk", flat.vertices - parents[:, None, :],
                        np.repeat(ball.normals, 4, axis=0))
    assert np.max(np.abs(offsets)) < 1e-15


def test_richardson_recovers_a_known_power_law():
    # C(h) = 1 + 0.3 h^1.3 on h = 1, 1/2, 1/4: exact limit 1, order 1.3 (closed form)
    h = np.array([1.0, 0.5, 0.25])
    ext = richardson(list(1.0 + 0.3 * h ** 1.3))
    assert ext.value == pytest.approx(1.0, abs=1e-14) and ext.order == pytest.approx(1.3)
    assert ext.status == "low order"
    erratic = richardson([1.0, 1.1, 1.0])            # differences change sign
    assert erratic.status == "erratic" and np.isnan(erratic.value)


def test_sphere_extrapolation_beats_both_refinements():
    ball = make_panels(("ball", shapes.octahedral_sphere(1.0, 4)))       # 128 -> 512 -> 2048
    conv = converge(ball, refinements=2)
    exact = ref.isolated_sphere(1.0)
    c = [r.maxwell[0, 0] for r in conv.results]
    extrapolated = conv.maxwell.value[0, 0]
    assert abs(extrapolated - exact) < min(abs(c[1] - exact), abs(c[2] - exact)) / 20
    assert conv.maxwell.status[0, 0] == "smooth" and 1.8 < conv.maxwell.order[0, 0] < 2.1
    # on a smooth body the estimate is the finest mesh's error to within a factor 1.5 and
    # bounds the extrapolated value's error
    assert abs(c[2] - exact) / 1.5 < conv.maxwell.error[0, 0] < 1.5 * abs(c[2] - exact)
    assert abs(extrapolated - exact) < conv.maxwell.error[0, 0]


def test_edges_converge_at_lower_order_and_the_order_matters():
    plate = make_panels(("plate", shapes.rectangle(1.0, 1.0, 8, 8)))     # 128 -> 2048
    conv = converge(plate, refinements=2)
    c = [r.maxwell[0, 0] for r in conv.results]
    assert conv.maxwell.status[0, 0] == "low order" and 0.8 < conv.maxwell.order[0, 0] < 1.1
    assert abs(conv.maxwell.value[0, 0] - SQUARE_PLATE) < abs(c[2] - SQUARE_PLATE) / 5
    # one refinement assumes order 2: with edges its estimate is too small for its own error
    two = richardson(c[:2])
    assert float(two.error) < abs(float(two.value) - SQUARE_PLATE) / 1.5

    cube = make_panels(("cube", shapes.box(1.0, 1.0, 1.0, 3)))           # 108 -> 1728
    conv = converge(cube, refinements=2)
    exact = ref.cube_capacitance(1.0)
    assert 1.1 < conv.maxwell.order[0, 0] < 1.45
    assert abs(conv.maxwell.value[0, 0] - exact) < abs(conv.results[-1].maxwell[0, 0] - exact) / 5


def test_dielectric_bodies_are_refined_with_the_conductors():
    # sphere a in a concentric dielectric shell to b: C = 4 pi eps0 / ((1/a - 1/b)/eps_r + 1/b)
    # (closed form: spherical layers in series)
    a, b, eps_r = 1.0, 1.5, 4.0
    exact = 4 * np.pi * ref.EPS0 / ((1 / a - 1 / b) / eps_r + 1 / b)
    shell = DielectricBody("shell", eps_r, make_panels(("shell", shapes.octahedral_sphere(b, 3))))
    conv = converge(make_panels(("ball", shapes.octahedral_sphere(a, 3))), refinements=2,
                    dielectrics=[shell])
    c = [r.maxwell[0, 0] for r in conv.results]
    assert abs(conv.maxwell.value[0, 0] - exact) < abs(c[2] - exact) / 3
    assert conv.maxwell.status[0, 0] == "smooth"


def test_converge_command_writes_every_mesh_and_the_table(tmp_path, capsys):
    points, tris = shapes.octahedral_sphere(2.0, 3)
    mesh = tmp_path / "ball.vtu"
    meshio.write(mesh, meshio.Mesh(points, [("triangle", tris)]))
    parser = argparse.ArgumentParser(prog="bem3d")
    converge_command.add_parser(parser.add_subparsers(dest="command"))
    out = tmp_path / "conv"
    args = parser.parse_args(["converge", str(mesh), "--units", "mm", "--volts", "ball=3",
                              "--ground-plane", "-3", "--refinements", "1", "--out", str(out)])
    assert converge_command.run(args) == 0
    text = capsys.readouterr().out
    assert "maxwell ball:ball" in text and "assumed order 2" in text
    record = json.loads((out / "convergence.json").read_text())
    assert record["panels"] == [72, 288] and record["subdivision"] == "smooth"
    direct = converge(make_panels(("ball", (points * 1e-3, tris))), refinements=1,
                      ground_z=-3e-3)
    assert record["maxwell"]["extrapolated_F"][0][0] == pytest.approx(
        direct.maxwell.value[0, 0], rel=1e-9)
    for level in (0, 1):
        result = json.loads((out / f"mesh_{level}" / "result.json").read_text())
        assert result["potentials_V"] == [3.0]
    assert (out / "convergence.csv").read_text().startswith("matrix,row,column,panels_72_F")
