"""Rigid moves and scalings of named conductors (lengths in metres)."""

import math

import numpy as np

from bem3d.base.errors import ModelError
from bem3d.geometry.panels import Panels


def rotation_matrix(axis, degrees):
    """Rotation by `degrees` about the unit vector `axis`, right-hand rule (Rodrigues' formula)."""
    k = np.asarray(axis, float)
    a = math.radians(degrees)
    cross = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    return math.cos(a) * np.eye(3) + math.sin(a) * cross + (1.0 - math.cos(a)) * np.outer(k, k)


def conductor_indices(panels, names):
    """Indices of the conductors `names` (('*',) for all); ModelError for unknown names."""
    if "*" in names:
        return np.arange(panels.n_conductors)
    unknown = [n for n in names if n not in panels.names]
    if unknown:
        raise ModelError(f"no conductor named {', '.join(unknown)} "
                         f"(conductors: {', '.join(panels.names)})")
    return np.array([panels.names.index(n) for n in names])


def move_conductors(panels, names, kind, value, axis=None, pivot=None):
    """A copy of `panels` with the conductors `names` moved, the others untouched.

    kind 'translate': by value (m) along unit `axis`; 'rotate': by value degrees about `axis`
    through `pivot` (m); 'scale': by the factor value about `pivot`. pivot None: the area
    centroid of the moved conductors."""
    mask = np.isin(panels.owner, conductor_indices(panels, names))
    v = panels.vertices.copy()
    part = v[mask]
    if kind == "translate":
        part = part + value * np.asarray(axis)
    else:
        if pivot is None:
            weights = panels.areas[mask]
            pivot = weights @ panels.centroids[mask] / weights.sum()
        pivot = np.asarray(pivot, float)
        if kind == "rotate":
            part = (part - pivot) @ rotation_matrix(axis, value).T + pivot
        else:
            part = (part - pivot) * value + pivot
    v[mask] = part
    return Panels(v, panels.owner, panels.names)
