"""Fields and forces on the conductor surfaces, peak fields."""

from dataclasses import dataclass

import numpy as np

from bem3d.base.constants import EPS0
from bem3d.geometry.panels import Panels
from bem3d.geometry.topology import closed_conductors
from bem3d.operators.points import evaluate
from bem3d.operators.rules import FieldRules
from bem3d.solve.conductors import solve_panels


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
