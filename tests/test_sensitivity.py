"""Sensitivities dC/dx of the Maxwell matrix from the solved charges (post.sensitivity).

References:
- two equal spheres: the bispherical series for C11 and C12 (Smythe 1950, Static and Dynamic
  Electricity; reference_values.two_spheres), differentiated in the centre distance by a
  central difference of the series;
- a sphere above a grounded plane: the image series C = 4 pi eps0 a sinh(alpha) sum_n
  1/sinh(n alpha), cosh(alpha) = h/a (Smythe 1950), differentiated in h likewise;
- two coaxial thin disks: Love's integral equation (Love 1949, Q. J. Mech. Appl. Math. 2;
  reference_values.coaxial_disks), differentiated in the gap likewise (open sheets);
- central differences of the solved C under rigid moves (two extra solves per axis);
- Newton's third law: translating every conductor together leaves C unchanged, so the
  sensitivities sum to zero (without a ground plane);
- the Maxwell-stress force of post.fields: F = +1/2 V^T (dC/dx) V at fixed potentials
  (Jackson 1999, Classical Electrodynamics, 3rd ed., section 4.7, energy at fixed potentials).
The sign follows from the last: dC11/dx of the far sphere is negative (moving it away lowers
C11), which the series confirms.
"""

import json
import math

import meshio
import numpy as np
import pytest
import reference_values as ref
from conftest import make_panels

from bem3d import api
from bem3d.geometry import shapes
from bem3d.geometry.panels import Panels
from bem3d.post.fields import conductor_forces, surface_fields, virtual_work_force
from bem3d.post.sensitivity import maxwell_sensitivity
from bem3d.solve.conductors import solve_panels

STEP = 1e-4        # the series' central difference (relative error ~1e-8)


def series_slope(series, x):
    return (series(x + STEP) - series(x - STEP)) / (2 * STEP)


def sensitivity_of(panels, **options):
    return maxwell_sensitivity(solve_panels(panels, **options), panels)


def test_two_spheres_against_the_bispherical_series():
    a, c = 1.0, 3.0

    def run(m):
        panels = make_panels(("s1", shapes.octahedral_sphere(a, m)),
                             ("s2", shapes.octahedral_sphere(a, m, center=(c, 0, 0))))
        return sensitivity_of(panels)

    coarse, fine = run(5), run(10)
    expected = series_slope(lambda x: ref.two_spheres(a, x), c)     # dC/dc
    assert expected[0, 0] < 0 and expected[0, 1] > 0
    moved = ref.richardson(coarse["s2"][0], fine["s2"][0])
    np.testing.assert_allclose(moved, expected, rtol=2e-3)
    # moving the other sphere the other way changes c by the opposite amount
    np.testing.assert_allclose(ref.richardson(coarse["s1"][0], fine["s1"][0]), -expected,
                               rtol=2e-3)
    # no change across the line of centres (symmetry)
    assert np.abs(fine["s2"][1:]).max() < 1e-3 * np.abs(expected).max()


def test_sphere_above_a_ground_plane_against_the_image_series():
    a, h, z0 = 1.0, 1.5, 0.3

    def series(height):
        alpha = math.acosh(height / a)
        n = np.arange(1, 400)
        return 4 * math.pi * ref.EPS0 * a * math.sinh(alpha) * np.sum(1 / np.sinh(n * alpha))

    def run(m):
        ball = make_panels(("s", shapes.octahedral_sphere(a, m, center=(0.2, -0.1, z0 + h))))
        return sensitivity_of(ball, ground_z=z0)["s"][:, 0, 0]

    coarse, fine = run(5), run(10)
    expected = series_slope(series, h)
    assert ref.richardson(coarse[2], fine[2]) == pytest.approx(expected, rel=2e-3)
    assert np.abs(fine[:2]).max() < 1e-3 * abs(expected)


def test_coaxial_disks_against_loves_equation():
    a, d = 1.0, 0.5

    def run(rings):
        disks = make_panels(("bottom", shapes.disk(a, rings)),
                            ("top", shapes.disk(a, rings, center=(0, 0, d))))
        return sensitivity_of(disks)["top"][2]

    # open sheets converge like the panel size: extrapolate with order 1
    extrapolated = ref.richardson(run(4), run(8), order=1)
    expected = series_slope(lambda x: ref.coaxial_disks(a, x), d)
    np.testing.assert_allclose(extrapolated, expected, rtol=5e-3)


def three_conductors():
    """A sphere, a closed box and an open plate (a sheet)."""
    return make_panels(("ball", shapes.octahedral_sphere(0.5, 5)),
                       ("block", shapes.box(0.8, 0.6, 0.4, 4, center=(1.4, 0.2, 0.1))),
                       ("plate", shapes.rectangle(2.4, 1.6, 10, 8, center=(0.6, 0.0, -0.8))))


def moved(panels, conductor, axis, step):
    vertices = panels.vertices.copy()
    vertices[panels.owner == conductor, :, axis] += step
    return Panels(vertices, panels.owner, panels.names)


@pytest.mark.parametrize("options", [{}, {"floating": ["block"]}, {"reference": "plate"}])
def test_three_conductors_against_central_differences(options):
    panels = three_conductors()
    sensitivity = sensitivity_of(panels, **options)
    step = 1e-3
    scale = max(np.abs(d).max() for d in sensitivity.values())
    worst = 0.0
    for k, name in enumerate(panels.names):
        for axis in ((0, 2) if name != "ball" else (0, 1, 2)):
            ahead = solve_panels(moved(panels, k, axis, step), **options).maxwell
            behind = solve_panels(moved(panels, k, axis, -step), **options).maxwell
            difference = (ahead - behind) / (2 * step)
            worst = max(worst, np.abs(sensitivity[name][axis] - difference).max() / scale)
    # the derivative of the discretised C itself: the same to the quadrature's accuracy
    assert worst < 1e-3


def test_translating_everything_changes_nothing():
    sensitivity = sensitivity_of(three_conductors())
    total = sum(sensitivity.values())
    scale = max(np.abs(d).max() for d in sensitivity.values())
    assert np.abs(total).max() < 5e-4 * scale


def test_force_at_fixed_potentials_is_the_maxwell_stress_and_the_virtual_work():
    panels = three_conductors()
    volts = np.array([1.0, -0.5, 0.0])
    solved = solve_panels(panels, volts=dict(zip(panels.names, volts)))
    sensitivity = maxwell_sensitivity(solved, panels)
    force, _ = conductor_forces(panels, surface_fields(panels, solved.panel_sigma()))
    work = {name: 0.5 * np.einsum("i,aij,j->a", volts, d, volts)
            for name, d in sensitivity.items()}
    # the stress of post.fields: sigma^2/(2 eps) n on the sphere, sigma E_pv at the sheet's
    # centroids (which converges like the panel size); both to a few per cent here
    for k, name in ((0, "ball"), (2, "plate")):
        np.testing.assert_allclose(work[name], force[k], rtol=0,
                                   atol=0.03 * np.abs(force[k]).max())
    # on the box the stress converges slowly (its charge density is singular at the edges):
    # the virtual work of post.fields (six solves) instead
    virtual = virtual_work_force(panels, volts, 1)
    np.testing.assert_allclose(work["block"], virtual, rtol=0,
                               atol=1e-3 * np.abs(virtual).max())


def _mesh(path, shape):
    meshio.write(path, meshio.Mesh(shape[0], [("triangle", shape[1])]))
    return path


def test_result_json_and_console_list_the_sensitivities(tmp_path, capsys):
    from conftest import run_cli

    a = _mesh(tmp_path / "a.stl", shapes.octahedral_sphere(1.0, 3))
    b = _mesh(tmp_path / "b.stl", shapes.octahedral_sphere(1.0, 3, center=(3.0, 0, 0)))
    code, out, _ = run_cli(["extract", a, b, "--units", "um", "--out", tmp_path / "o",
                            "--sensitivity"], capsys)
    assert code == 0 and "fF/um" in out
    record = json.loads((tmp_path / "o" / "result.json").read_text())
    d = np.array(record["maxwell_sensitivity_F_per_m"]["b"])
    assert d.shape == (3, 2, 2) and d[0, 0, 0] < 0
    # the printed largest entry is the largest |dC_ij/dx| in fF/um (1 fF/um = 1e-9 F/m)
    line = next(s for s in out.splitlines() if s.strip().startswith("b:"))
    assert float(line.split("=")[1].split()[0]) == pytest.approx(
        d.flat[np.argmax(np.abs(d))] / 1e-9, rel=1e-3)


def test_dielectric_bodies_omit_the_sensitivities_with_a_warning(tmp_path):
    ball = _mesh(tmp_path / "ball.stl", shapes.octahedral_sphere(0.5, 3))
    shell = _mesh(tmp_path / "shell.stl", shapes.octahedral_sphere(1.0, 3))
    result = api.extract([ball], dielectrics={shell: 3.0}, out=tmp_path / "o", sensitivity=True)
    assert result.sensitivity is None
    assert any("not given with dielectric bodies" in w for w in result.warnings)
    record = json.loads((tmp_path / "o" / "result.json").read_text())
    assert "maxwell_sensitivity_F_per_m" not in record


def test_sensitivities_are_written_only_when_asked(tmp_path):
    a = _mesh(tmp_path / "a.stl", shapes.octahedral_sphere(1.0, 3))
    b = _mesh(tmp_path / "b.stl", shapes.octahedral_sphere(1.0, 3, center=(3.0, 0, 0)))
    result = api.extract([a, b], out=tmp_path / "o")
    record = json.loads((tmp_path / "o" / "result.json").read_text())
    assert "maxwell_sensitivity_F_per_m" not in record
    assert set(result.sensitivity) == {"a", "b"}          # computed on first use in Python
