"""The stored energy three ways: the matrix, the charges, and the field integral with its tail."""

import math

import numpy as np

from bem3d.base.constants import EPS0


def exterior_energy(phi, E, normals, weights, eps):
    """Energy (J) of the field outside a closed box from phi and E on its surface:
    W_out = 1/2 eps oint phi E.n dA (Green's first identity on the exterior, where
    laplace(phi) = 0 and phi ~ 1/r at infinity; n points out of the box). eps (F/m): a number
    or one per surface point (the medium at the box)."""
    return 0.5 * float(np.sum(eps * weights * phi * np.einsum("ij,ij->i", E, normals)))


def multipole_fields(points, charges, centre, dipole, eps):
    """phi (V) and E (V/m) at points of a point charge Q and a dipole p (C m) at centre."""
    r = points - centre
    d = np.linalg.norm(r, axis=1)
    k = 1.0 / (4 * math.pi * eps)
    pr = r @ dipole
    phi = k * (charges / d + pr / d**3)
    E = k * (charges * r / d[:, None] ** 3
             + (3 * pr[:, None] * r / d[:, None] ** 2 - dipole) / d[:, None] ** 3)
    return phi, E


def energy_balance(panels, result, grid, grid_fields, boundary_fields, boundary, ground_z=None,
                   grid_eps=None, box_eps=None, source=None):
    """The stored energy three ways (J), for the result's potentials.

    grid_fields: PointFields on grid.points(); boundary_fields: PointFields on the box faces
    (grid.boundary()); with a grounded plane z = ground_z the box must stand on it.
    grid_eps (F/m, one per grid point) and box_eps (F/m, the medium at the box faces) default
    to the uniform medium; source: (panels, charge density, kernel eps_r) radiating the field
    when it is more than the conductors' free charge (dielectric interfaces).
    Returns a dict: from the matrix 1/2 V^T C V, from the charges 1/2 sum Q_i V_i, the grid
    integral of 1/2 E.D outside conductors, the energy outside the box from the computed
    surface field (exact identity) and from the monopole and dipole moments alone, and the
    fraction of the energy inside the box."""
    eps = EPS0 * result.solver.get("relative_permittivity", 1.0)
    grid_eps = eps if grid_eps is None else grid_eps
    box_eps = eps if box_eps is None else box_eps
    src_panels, src_sigma, kernel_eps_r = source or (panels, result.panel_sigma(),
                                                     eps / EPS0)
    density = grid_fields.energy_density(grid_eps)[:, 0]
    density[grid_fields.inside] = 0.0
    w_grid = float(np.sum(density * grid.trapezoid_weights()))
    points, normals, weights = boundary
    w_tail = exterior_energy(boundary_fields.phi[:, 0], boundary_fields.E[:, 0], normals,
                             weights, box_eps)
    q_panel = src_sigma * src_panels.areas
    total_q = float(q_panel.sum())
    centre = np.mean(points, axis=0)
    dipole = (q_panel[:, None] * (src_panels.centroids - centre)).sum(axis=0)
    if ground_z is not None:     # charges and their images: no net charge, a vertical dipole
        centre[2] = ground_z
        dipole = np.array([0.0, 0.0,
                           2.0 * float(q_panel @ (src_panels.centroids[:, 2] - ground_z))])
        total_q = 0.0
    phi_md, e_md = multipole_fields(points, total_q, centre, dipole, EPS0 * kernel_eps_r)
    w_tail_md = exterior_energy(phi_md, e_md, normals, weights, box_eps)
    w_matrix = result.energy
    return {
        "energy_J": w_matrix,
        "energy_from_charges_J": 0.5 * float(result.charges @ result.potentials),
        "energy_grid_J": w_grid,
        "energy_outside_grid_J": w_tail,
        "energy_outside_grid_multipole_J": w_tail_md,
        "energy_grid_plus_outside_J": w_grid + w_tail,
        # no energy (every conductor at 0 V): no fraction, null in result.json
        "fraction_in_grid": w_grid / w_matrix if w_matrix else None,
    }
