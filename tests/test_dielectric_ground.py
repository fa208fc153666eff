"""Dielectric bodies above an infinite grounded plane (method of images).

References: the method of images (Jackson, Classical Electrodynamics, 3rd ed., 1999, sec. 2.1):
a grounded plane z = 0 with charges above it is equivalent, above the plane, to those charges
plus their mirror images of opposite sign with no plane; the potential vanishes on the plane.
For a dielectric body the same holds with the body mirrored too (its bound charge is charge
like any other). Closed form for a conducting sphere (radius a) inside a concentric dielectric
shell (outer radius b, eps_r) in vacuum, from Gauss's law with D = eps E in each layer:
C0 = 4 pi eps0 / S with S = (1/eps_r)(1/a - 1/b) + 1/b.
"""

import contextlib
import io
import json
import math

import meshio
import numpy as np
import pytest
import reference_values as ref

from bem3d._cli.main import main
from bem3d.base.errors import ModelError
from bem3d.geometry import shapes
from bem3d.geometry.bodies import DielectricBody
from bem3d.geometry.panels import Panels
from bem3d.operators.points import evaluate
from bem3d.post.energy import energy_balance
from bem3d.post.grid import Grid
from bem3d.solve.conductors import solve_panels
from bem3d.solve.dielectric import medium_at, solve_with_dielectrics

EPS0 = ref.EPS0
A, B, EPS_R = 1.0, 2.0, 4.0


def sphere(radius, m, name, centre=(0.0, 0.0, 0.0)):
    p, t = shapes.octahedral_sphere(radius, m, center=centre)
    return Panels.from_arrays(p, t, np.zeros(len(t), int), (name,))


def exact_mirror(panels, z0):
    """The mirror image in z = z0 with corners 1 and 2 swapped (Panels.mirrored reverses all
    three): the graded test rule, a Duffy map from corner 0, is symmetric in corners 1 and 2,
    so this copy's rule points are the exact mirrors of the original's and the mirrored model
    is discretised as the mirror of the original, to rounding."""
    v = panels.vertices[:, [0, 2, 1]].copy()
    v[..., 2] = 2.0 * z0 - v[..., 2]
    return Panels(v, panels.owner, panels.names)


def shelled_ball(m, centre):
    return (sphere(A, m, "ball", centre),
            DielectricBody("shell", EPS_R, sphere(B, m, "shell", centre)))


def test_unit_permittivity_body_over_the_plane_changes_nothing():
    # internal consistency: an eps_r = 1 body carries no bound charge, so the result is that of
    # the conductors alone over the same plane (the same Galerkin rows; LU against Cholesky)
    ball = shapes.octahedral_sphere(1.0, 6, center=(0.0, 0.0, 2.0))
    block = shapes.box(1.0, 1.0, 1.0, 4, center=(2.5, 0.0, 2.0))
    verts = [np.asarray(p)[np.asarray(t)] for p, t in (ball, block)]
    cond = Panels(np.concatenate(verts), np.repeat([0, 1], [len(v) for v in verts]), ("a", "b"))
    air = DielectricBody("air", 1.0, sphere(1.5, 6, "air", (0.0, 0.0, 2.0)))
    alone = solve_panels(cond, ground_z=0.0).maxwell
    with_air = solve_with_dielectrics(cond, [air], ground_z=0.0).maxwell
    np.testing.assert_allclose(with_air, alone, rtol=1e-9)


def test_plane_equals_the_mirrored_model_without_it():
    # method of images (Jackson 1999, sec. 2.1): the sphere in its shell at +1 V above the
    # grounded plane z = 0 holds the same charge as in free space next to its mirror copy
    # (its own shell) at -1 V. Both solves use the same panels; they must agree to rounding.
    m, h = 8, 3.0
    ball, shell = shelled_ball(m, (0.0, 0.0, h))
    over_plane = solve_with_dielectrics(ball, [shell], ground_z=0.0)
    low_ball = exact_mirror(ball, 0.0)
    pair = Panels(np.concatenate([ball.vertices, low_ball.vertices]),
                  np.repeat([0, 1], len(ball)), ("up", "down"))
    low_shell = DielectricBody("low shell", EPS_R, exact_mirror(shell.panels, 0.0))
    free = solve_with_dielectrics(pair, [shell, low_shell])
    # the charges as solved (before the matrix is symmetrised), at V = (+1, -1)
    sigma_up = free.sigma[:len(ball), 0] - free.sigma[:len(ball), 1]
    q_up = float(ball.areas @ sigma_up)
    q_plane = float(ball.areas @ over_plane.sigma[:, 0])
    assert q_up == pytest.approx(q_plane, rel=1e-10)            # measured 4e-16
    np.testing.assert_allclose(sigma_up, over_plane.sigma[:, 0], rtol=0,
                               atol=1e-9 * np.abs(over_plane.sigma).max())   # measured 2e-13


def test_far_plane_approaches_the_closed_form():
    # With the centre at height h >> b the image -Q at depth 2h adds -Q/(4 pi eps0 2h) to the
    # ball's potential; to first order this is uniform over the shell, and a uniform potential
    # polarises nothing, so (derived here from the closed form C0 and the method of images,
    # Jackson 1999, sec. 2.1) C ~ 4 pi eps0 / (S - 1/(2h)): a relative rise x/(1 - x) with
    # x = C0/(4 pi eps0 2h), which is a/(2h) for a bare sphere (the first term of the image
    # series in test_ground_floating.py). Tolerances: the 8-level mesh misses C0 by 0.83 %
    # (measured), so C in free space is checked to 1.5 %; the rise over it is compared with
    # x/(1 - x) to 5 % of itself, well above the neglected terms (the image field's gradient
    # polarises the body: relative size ~ (b/2h)^3 <= 1e-3 here) and the mesh error carried
    # into x (measured: 0.8 % of x at h = 10 and 20), and well below the rise itself, 8 % and 4 %.
    m = 8
    s = (1 / EPS_R) * (1 / A - 1 / B) + 1 / B
    c0 = 4 * math.pi * EPS0 / s
    ball, shell = shelled_ball(m, (0.0, 0.0, 0.0))
    c_free = solve_with_dielectrics(ball, [shell]).maxwell[0, 0]
    assert c_free == pytest.approx(c0, rel=1.5e-2)
    deviation = []
    for h in (10.0, 20.0):
        c = solve_with_dielectrics(ball, [shell], ground_z=-h).maxwell[0, 0]
        x = (c0 / (4 * math.pi * EPS0)) / (2 * h)
        assert c / c_free - 1 == pytest.approx(x / (1 - x), rel=5e-2)
        deviation.append(abs(c / c0 - 1))
    assert deviation[1] < deviation[0]            # the closed form is approached as h grows


def test_fields_over_the_plane_vanish_on_it_and_balance_the_energy():
    # fields as `bem3d field` takes them: the result's sources (conductor and interface
    # charge) and its recorded plane. The potential vanishes on the grounded plane (images,
    # Jackson 1999, sec. 2.1); 1/2 int E.D dV over the half-space above it equals
    # 1/2 V^T C V (energy identity). The grid is cut by the shell, where E jumps: 1 %
    # (as for the shell without a plane in test_dielectric.py; measured 2e-4 here).
    ball, shell = shelled_ball(8, (0.0, 0.0, 3.0))
    result = solve_with_dielectrics(ball, [shell], volts={"ball": 1.0}, ground_z=0.0)
    src = result.field_sources(ball)
    ground_z = result.solver["ground_plane_z_m"]
    assert ground_z == 0.0
    sigma = src.sigma @ result.potentials
    on_plane = np.array([[0.0, 0.0, 0.0], [1.3, -0.4, 0.0], [5.0, 2.0, 0.0]])
    f = evaluate(src.panels, sigma, on_plane, src.kernel_eps_r, ground_z=ground_z)
    np.testing.assert_allclose(f.phi[:, 0], 0.0, atol=1e-12)
    grid = Grid.box([-4.0, -4.0, 0.0], [4.0, 4.0, 7.0], (61, 61, 51))
    boundary = grid.boundary()
    inside_of = np.r_[np.ones(len(ball)), np.zeros(len(src.panels) - len(ball))]
    fields = [evaluate(src.panels, sigma, pts, src.kernel_eps_r, ground_z=ground_z,
                       inside_of=inside_of) for pts in (grid.points(), boundary[0])]
    balance = energy_balance(ball, result, grid, *fields, boundary, ground_z=ground_z,
                             grid_eps=EPS0 * medium_at(grid.points(), [shell], 1.0),
                             box_eps=EPS0, source=(src.panels, sigma, src.kernel_eps_r))
    assert balance["energy_grid_plus_outside_J"] == pytest.approx(result.energy, rel=1e-2)


def test_field_command_with_a_dielectric_over_the_plane(tmp_path, capsys):
    # the same energy identity through the command line (coarse mesh and grid; 1 %,
    # measured 2.4e-3)
    for name, radius in (("ball", A), ("shell", B)):
        p, t = shapes.octahedral_sphere(radius, 6, center=(0.0, 0.0, 3.0))
        with contextlib.redirect_stderr(io.StringIO()):
            meshio.write(tmp_path / f"{name}.stl", meshio.Mesh(p, [("triangle", t)]))
    out = tmp_path / "f"
    code = main(["field", str(tmp_path / "ball.stl"),
                 "--dielectric", f"{tmp_path / 'shell.stl'}={EPS_R}", "--ground-plane", "0",
                 "--volts", "ball=1", "--points", "31", "--quiet", "--out", str(out)])
    capsys.readouterr()
    assert code == 0
    record = json.loads((out / "result.json").read_text())
    assert record["solver"]["ground_plane_z_m"] == 0.0
    assert record["energy_grid_plus_outside_J"] == pytest.approx(record["energy_J"], rel=1e-2)


def test_body_crossing_the_plane_is_refused():
    ball, shell = shelled_ball(4, (0.0, 0.0, 2.5))
    with pytest.raises(ModelError, match="dielectric body\\(ies\\) shell cross or lie below"):
        solve_with_dielectrics(ball, [shell], ground_z=1.0)
    # standing on the plane (the shell touches z = 0.5 at its lowest corner) is allowed
    assert solve_panels(ball, dielectrics=[shell], ground_z=0.5).maxwell[0, 0] > 0
