"""Shared helpers: panels from the parametric shapes, solved with the public pipeline."""

import signal

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


def default_sigint():
    """preexec_fn for a child that must see Ctrl-C: a run started in the background has SIGINT
    ignored, which children inherit, and Python then never raises KeyboardInterrupt."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)
