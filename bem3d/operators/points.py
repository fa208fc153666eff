"""Potential, field and winding number of panel charges at any points.

The same triangle integrals as the operator (kernels.points.evaluate_points): closed forms near
a panel, Gauss rules farther out, one point per panel far away.
"""

import math
from dataclasses import dataclass

import numpy as np

from bem3d.base.constants import EPS0
from bem3d.geometry.panels import Panels
from bem3d.geometry.topology import closed_conductors
from bem3d.kernels.points import evaluate_points
from bem3d.operators.kernel_data import point_sources
from bem3d.operators.rules import FieldRules


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
    sources = point_sources(panels, rules)
    phi = np.zeros((len(points), k))
    grad = np.zeros((len(points), k, 3))
    winding = np.zeros(len(points))
    for start in range(0, len(points), chunk):       # bounded scratch, steady progress
        sl = slice(start, start + chunk)
        evaluate_points(points[sl], sigma, closed, sources, phi[sl], grad[sl], winding[sl])
        if progress:
            progress(min(start + chunk, len(points)))
    scale = 1.0 / (4.0 * math.pi * EPS0 * eps_r)
    return PointFields(phi * scale, grad * scale, winding > 0.5)


def winding_numbers(panels, points):
    """Winding number (m,) of the closed surface `panels` at points (m, 3): 1 inside, 0 outside
    (exact solid angles near the surface, one-point ones far away)."""
    points = np.ascontiguousarray(np.asarray(points, float).reshape(-1, 3))
    winding = np.zeros(len(points))
    evaluate_points(points, np.zeros((len(panels), 1)), np.ones(len(panels)),
                    point_sources(panels), np.zeros((len(points), 1)),
                    np.zeros((len(points), 1, 3)), winding)
    return winding
