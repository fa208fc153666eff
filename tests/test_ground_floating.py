"""Infinite grounded plane (method of images) and floating conductors.

References: sphere above a grounded plane, C = 4 pi eps0 a sinh(alpha) sum_n 1/sinh(n alpha),
cosh(alpha) = h/a (Smythe 1950, Static and Dynamic Electricity, the image series); a floating
thin shell between an inner sphere and an outer shell: two concentric spherical capacitors in
series, C = C1 C2 / (C1 + C2) with C1 = 4 pi eps0 a b/(b - a) (closed form), and the shell
sits at V C1 / (C1 + C2).
"""

import math

import numpy as np
import pytest
import reference_values as ref
from conftest import make_panels

from bem3d.base.errors import ModelError
from bem3d.geometry import shapes
from bem3d.operators.points import evaluate
from bem3d.post.energy import energy_balance
from bem3d.post.grid import Grid
from bem3d.solve.conductors import solve_panels

EPS0 = ref.EPS0


def sphere_over_plane(a, h):
    alpha = math.acosh(h / a)
    n = np.arange(1, 400)
    return 4 * math.pi * EPS0 * a * math.sinh(alpha) * np.sum(1.0 / np.sinh(n * alpha))


@pytest.mark.parametrize("h", [1.5, 3.0])
def test_sphere_above_grounded_plane_matches_image_series(h):
    def c(m):
        panels = make_panels(("s", shapes.octahedral_sphere(1.0, m, center=(0.2, -0.1, h + 0.3))))
        return solve_panels(panels, ground_z=0.3).maxwell[0, 0]
    extrapolated = ref.richardson(c(8), c(16))
    assert extrapolated == pytest.approx(sphere_over_plane(1.0, h), rel=5e-4)


def test_floating_shell_gives_series_capacitors():
    a, b, c = 1.0, 2.0, 3.0
    def run(m):
        panels = make_panels(("inner", shapes.octahedral_sphere(a, m)),
                             ("shell", shapes.octahedral_sphere(b, m)),
                             ("outer", shapes.octahedral_sphere(c, m)))
        return solve_panels(panels, volts={"inner": 1.0}, floating=["shell"])
    coarse, fine = run(8), run(16)
    assert fine.names == ("inner", "outer")
    c1 = 4 * math.pi * EPS0 * a * b / (b - a)
    c2 = 4 * math.pi * EPS0 * b * c / (c - b)
    series = c1 * c2 / (c1 + c2)
    mutual = ref.richardson(-coarse.maxwell[0, 1], -fine.maxwell[0, 1])
    assert mutual == pytest.approx(series, rel=5e-4)
    assert fine.floating["shell"] == pytest.approx(c1 / (c1 + c2), rel=1e-3)
    # the floating shell carries no net charge: the panel charges on it sum to zero (to the
    # matrix's asymmetry before symmetrising, ~1e-9: the transfer uses the symmetric matrix)
    panels = make_panels(("inner", shapes.octahedral_sphere(a, 16)),
                         ("shell", shapes.octahedral_sphere(b, 16)),
                         ("outer", shapes.octahedral_sphere(c, 16)))
    q_shell = np.sum((fine.panel_sigma() * panels.areas)[panels.owner == 1])
    assert abs(q_shell) < 1e-7 * abs(fine.charges[0])


def test_potential_vanishes_on_the_grounded_plane():
    panels = make_panels(("s", shapes.octahedral_sphere(1.0, 8, center=(0, 0, 2.0))))
    result = solve_panels(panels, volts={"s": 1.0}, ground_z=0.0)
    pts = np.array([[0, 0, 0.0], [1.3, -0.4, 0.0], [5.0, 2.0, 0.0]])
    f = evaluate(panels, result.panel_sigma(), pts, ground_z=0.0)
    np.testing.assert_allclose(f.phi[:, 0], 0.0, atol=1e-12)
    # the field meets a conductor's surface at right angles
    np.testing.assert_allclose(f.E[:, 0, :2], 0.0, atol=1e-9 * np.abs(f.E).max())


def test_energy_balance_above_a_grounded_plane():
    panels = make_panels(("s", shapes.octahedral_sphere(1.0, 16, center=(0, 0, 2.0))))
    result = solve_panels(panels, volts={"s": 1.0}, ground_z=0.0)
    grid = Grid.box([-3.0, -3.0, 0.0], [3.0, 3.0, 5.0], (61, 61, 51))
    boundary = grid.boundary()
    sigma = result.panel_sigma()
    balance = energy_balance(panels, result, grid,
                             evaluate(panels, sigma, grid.points(), ground_z=0.0),
                             evaluate(panels, sigma, boundary[0], ground_z=0.0), boundary,
                             ground_z=0.0)
    assert balance["energy_grid_plus_outside_J"] == pytest.approx(result.energy, rel=1e-2)


def test_bad_ground_plane_and_floating_requests():
    panels = make_panels(("a", shapes.octahedral_sphere(1.0, 4)),
                         ("b", shapes.octahedral_sphere(1.0, 4, center=(3.0, 0, 0))))
    with pytest.raises(ModelError, match="a, b touch, cross or lie below"):
        solve_panels(panels, ground_z=0.0)
    with pytest.raises(ModelError, match="floating"):
        solve_panels(panels, volts={"a": 1.0}, floating=["a"])
    with pytest.raises(ModelError, match="no conductor named c"):
        solve_panels(panels, floating=["c"])
    with pytest.raises(ModelError, match="at least one"):
        solve_panels(panels, floating=["a", "b"])
