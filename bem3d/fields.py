"""Potential, field, energy density, surface fields, forces and the energy balance.

Everything here starts from solved panel charges (results.CapacitanceResult.sigma) and uses the
same triangle integrals as the operator (kernels.evaluate_points): closed forms near a panel,
Gauss rules farther out, one point per panel far away.
"""

import math
from dataclasses import dataclass

import numpy as np

from .constants import EPS0
from .geometry import Panels
from .kernels import evaluate_points
from .meshio_io import closed_conductors
from .quadrature import map_points, triangle_rule


@dataclass(frozen=True)
class FieldRules:
    """Distances (in panel radii) at which point evaluation changes rule; see evaluate_points."""

    near: float = 2.0
    mid: float = 4.0
    far: float = 12.0
    near_degree: int = 5
    mid_degree: int = 2


@dataclass
class PointFields:
    """Fields at m points for k excitations: phi (m, k) V, E (m, k, 3) V/m, inside (m,) bool."""

    phi: np.ndarray
    E: np.ndarray
    inside: np.ndarray

    def energy_density(self, eps):
        """1/2 E.D = 1/2 eps |E|^2 (J/m^3), (m, k); eps (F/m) a number or one per point."""
        eps = np.asarray(eps, float)
        return 0.5 * (eps[:, None] if eps.ndim else eps) * np.sum(self.E**2, axis=-1)


def evaluate(panels, sigma, points, eps_r=1.0, rules=FieldRules(), chunk=20000, progress=None,
             ground_z=None, inside_of=None):
    """phi and E at points (m, 3) in metres from panel charge densities sigma (n, k) in C/m^2.

    A point inside a closed conductor is flagged in `inside` (its field is ~0 there).
    progress, if given, is called with the number of points done after each chunk.
    ground_z: a grounded plane z = ground_z (m): the panels' mirror images carry -sigma
    (the field is physical above the plane only). inside_of: 1 for the panels whose closed
    surfaces `inside` refers to (default: every closed conductor's panels), else 0."""
    sigma = np.ascontiguousarray(np.atleast_2d(np.asarray(sigma, float).T).T)
    points = np.ascontiguousarray(np.asarray(points, float).reshape(-1, 3))
    k = sigma.shape[1]
    if inside_of is None:
        inside_of = closed_conductors(panels)[panels.owner]
    closed = np.asarray(inside_of, np.float64)
    if ground_z is not None:
        image = panels.mirrored(ground_z)
        panels = Panels(np.concatenate([panels.vertices, image.vertices]),
                        np.concatenate([panels.owner, image.owner]), panels.names)
        sigma = np.ascontiguousarray(np.vstack([sigma, -sigma]))
        closed = np.concatenate([closed, np.zeros_like(closed)])    # images hold no points
    bary_near, w_near = triangle_rule(rules.near_degree)
    bary_mid, w_mid = triangle_rule(rules.mid_degree)
    pts_near = map_points(panels.vertices, bary_near)
    pts_mid = map_points(panels.vertices, bary_mid)
    phi = np.zeros((len(points), k))
    grad = np.zeros((len(points), k, 3))
    winding = np.zeros(len(points))
    for start in range(0, len(points), chunk):       # bounded scratch, steady progress
        sl = slice(start, start + chunk)
        evaluate_points(points[sl], sigma, closed, panels.vertices, panels.normals,
                        panels.centroids, panels.radii, panels.areas, pts_mid, w_mid,
                        pts_near, w_near, rules.near, rules.mid, rules.far,
                        phi[sl], grad[sl], winding[sl])
        if progress:
            progress(min(start + chunk, len(points)))
    scale = 1.0 / (4.0 * math.pi * EPS0 * eps_r)
    return PointFields(phi * scale, grad * scale, winding > 0.5)


def winding_numbers(panels, points):
    """Winding number (m,) of the closed surface `panels` at points (m, 3): 1 inside, 0 outside
    (exact solid angles near the surface, one-point ones far away)."""
    points = np.ascontiguousarray(np.asarray(points, float).reshape(-1, 3))
    bary_near, w_near = triangle_rule(5)
    bary_mid, w_mid = triangle_rule(2)
    winding = np.zeros(len(points))
    rules = FieldRules()
    evaluate_points(points, np.zeros((len(panels), 1)), np.ones(len(panels)), panels.vertices,
                    panels.normals, panels.centroids, panels.radii, panels.areas,
                    map_points(panels.vertices, bary_mid), w_mid,
                    map_points(panels.vertices, bary_near), w_near, rules.near, rules.mid,
                    rules.far, np.zeros((len(points), 1)), np.zeros((len(points), 1, 3)),
                    winding)
    return winding


@dataclass
class SurfaceFields:
    """Per-panel fields for one excitation: sigma (C/m^2), E_n = sigma/eps (V/m) on the normal
    side of a closed conductor, the field on each face of the panel (n, 2, 3) V/m (normal side
    first), the force on each panel (n, 3) N, and whether the panel's conductor is closed."""

    sigma: np.ndarray
    normal_field: np.ndarray
    face_fields: np.ndarray
    panel_force: np.ndarray
    closed: np.ndarray


def surface_fields(panels, sigma, eps_r=1.0, rules=FieldRules(), ground_z=None, source=None):
    """Fields and forces on the conductor panels for free charge density sigma (n,) C/m^2.

    eps_r: relative permittivity around each panel (a number or (n,)). source: (panels, charge
    density, kernel eps_r) radiating the field when it is more than these panels' own sigma
    (dielectric interfaces). On a closed conductor the field just outside is sigma/eps n and
    the force per area is the Maxwell stress sigma^2/(2 eps) n. An open sheet carries the
    charge of both faces summed, so there the faces see E_pv +- sigma/(2 eps) n, with E_pv the
    principal value (mean of both faces) at the centroid, and the force is sigma A E_pv; that
    form converges only like the panel size (measured), so forces on sheets are better taken
    by virtual work."""
    eps = EPS0 * np.broadcast_to(np.asarray(eps_r, float), sigma.shape)
    src_panels, src_sigma, kernel_eps_r = source or (panels, sigma, eps_r)
    closed = closed_conductors(panels)[panels.owner]
    pv = evaluate(src_panels, src_sigma, panels.centroids, kernel_eps_r, rules,
                  ground_z=ground_z).E[:, 0]
    outside = (sigma / eps)[:, None] * panels.normals
    jump = 0.5 * outside
    faces = np.where(closed[:, None, None], np.stack([outside, 0 * outside], axis=1),
                     np.stack([pv + jump, pv - jump], axis=1))
    force = np.where(closed[:, None], 0.5 * (sigma * panels.areas)[:, None] * outside,
                     (sigma * panels.areas)[:, None] * pv)
    return SurfaceFields(sigma, sigma / eps, faces, force, closed)


def virtual_work_force(panels, volts, conductor, eps_r=1.0, step=None, solve=None):
    """Force (N) on conductor index `conductor` at fixed potentials volts (n_cond,) V by virtual
    work, F = +1/2 V^T (dC/dx) V, central differences of C under rigid moves of +-step (m,
    default 1e-4 of the model size) along x, y and z. Six solves of the whole model."""
    from .pipeline import solve_panels

    solve = solve or (lambda p: solve_panels(p, eps_r=eps_r).maxwell)
    if step is None:
        v = panels.vertices.reshape(-1, 3)
        step = 1e-4 * float(np.max(v.max(axis=0) - v.min(axis=0)))
    on = panels.owner == conductor
    volts = np.asarray(volts, float)
    force = np.zeros(3)
    for axis in range(3):
        c = []
        for sign in (1.0, -1.0):
            moved = panels.vertices.copy()
            moved[on, :, axis] += sign * step
            c.append(solve(Panels(moved, panels.owner, panels.names)))
        force[axis] = 0.5 * volts @ ((c[0] - c[1]) / (2 * step)) @ volts
    return force


def conductor_forces(panels, surface):
    """Net force (N) and torque about the conductor's area centroid (N m), each (n_cond, 3)."""
    n = panels.n_conductors
    force = np.zeros((n, 3))
    torque = np.zeros((n, 3))
    area = panels.conductor_areas()
    for c in range(n):
        on = panels.owner == c
        centre = (panels.areas[on, None] * panels.centroids[on]).sum(axis=0) / area[c]
        force[c] = surface.panel_force[on].sum(axis=0)
        torque[c] = np.cross(panels.centroids[on] - centre, surface.panel_force[on]).sum(axis=0)
    return force, torque


def peak_fields(panels, surface):
    """Largest |E| (V/m) on each conductor's faces and where (panel centroid, m)."""
    magnitude = np.linalg.norm(surface.face_fields, axis=2).max(axis=1)
    peaks = []
    for c in range(panels.n_conductors):
        on = np.flatnonzero(panels.owner == c)
        k = on[np.argmax(magnitude[on])]
        peaks.append((float(magnitude[k]), panels.centroids[k].tolist()))
    return peaks


@dataclass(frozen=True)
class Grid:
    """A box of points: origin (3,) m, spacing (3,) m, shape (nx, ny, nz); x varies fastest."""

    origin: np.ndarray
    spacing: np.ndarray
    shape: tuple

    @classmethod
    def around(cls, lo, hi, margin=0.5, points=(41, 41, 41)):
        """Box around [lo, hi] widened by margin * size on every side."""
        lo, hi = np.asarray(lo, float), np.asarray(hi, float)
        pad = margin * (hi - lo).max()
        return cls.box(lo - pad, hi + pad, points)

    @classmethod
    def box(cls, lo, hi, points):
        lo, hi = np.asarray(lo, float), np.asarray(hi, float)
        shape = tuple(int(p) for p in points)
        spacing = np.where(np.array(shape) > 1, (hi - lo) / np.maximum(np.array(shape) - 1, 1), 1.0)
        return cls(lo, spacing, shape)

    def axes(self):
        return [self.origin[a] + self.spacing[a] * np.arange(self.shape[a]) for a in range(3)]

    def points(self):
        x, y, z = np.meshgrid(*self.axes(), indexing="ij")
        return np.column_stack([x.ravel(order="F"), y.ravel(order="F"), z.ravel(order="F")])

    def trapezoid_weights(self):
        """Volume weights (m^3) of the trapezoid rule at each point, in points() order."""
        w = []
        for a in range(3):
            wa = np.full(self.shape[a], self.spacing[a])
            if self.shape[a] > 1:
                wa[[0, -1]] *= 0.5
            w.append(wa)
        return np.einsum("i,j,k->ijk", *w).ravel(order="F")

    def boundary(self):
        """Points on the box faces (q, 3), their outward normals (q, 3) and area weights (q,),
        by the trapezoid rule on each face (edges and corners shared between faces)."""
        ax = self.axes()
        pts, nrm, wts = [], [], []
        for a in range(3):
            b, c = [i for i in range(3) if i != a]
            wb = np.full(self.shape[b], self.spacing[b])
            wc = np.full(self.shape[c], self.spacing[c])
            wb[[0, -1]] *= 0.5
            wc[[0, -1]] *= 0.5
            gb, gc = np.meshgrid(ax[b], ax[c], indexing="ij")
            for side, value in ((-1.0, ax[a][0]), (1.0, ax[a][-1])):
                p = np.empty((gb.size, 3))
                p[:, a], p[:, b], p[:, c] = value, gb.ravel(), gc.ravel()
                n = np.zeros((gb.size, 3))
                n[:, a] = side
                pts.append(p)
                nrm.append(n)
                wts.append(np.outer(wb, wc).ravel())
        return np.concatenate(pts), np.concatenate(nrm), np.concatenate(wts)


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
        "fraction_in_grid": w_grid / w_matrix if w_matrix else float("nan"),
    }
