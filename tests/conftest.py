"""Shared helpers: panels from the parametric shapes, solved with the public pipeline."""

import numpy as np

from bem3d.geometry import Panels
from bem3d.pipeline import solve_panels


def make_panels(*parts):
    """Panels from (name, (points, triangles)) pairs, one conductor each, in the given order."""
    verts = [np.asarray(p)[np.asarray(t)] for _, (p, t) in parts]
    owner = np.concatenate([np.full(len(v), k) for k, v in enumerate(verts)])
    return Panels(np.concatenate(verts), owner, tuple(name for name, _ in parts))


def maxwell(*parts, **options):
    """Maxwell capacitance matrix (F) of the given conductors in vacuum."""
    return solve_panels(make_panels(*parts), **options).maxwell
