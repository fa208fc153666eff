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


def run_cli(argv, capsys):
    """bem3d's main() on argv (paths allowed): (exit code, stdout, stderr)."""
    from bem3d.cli import main

    code = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    return code, out, err


def assert_admissible(corners_t, corners_s, eta):
    """min(diameter) <= eta * distance for two clusters' corners (k, 3), both measured on their
    bounding boxes (the standard admissibility, Hackbusch 1999)."""
    diam = min(np.linalg.norm(np.ptp(c, axis=0)) for c in (corners_t, corners_s))
    gap = np.maximum(0.0, np.maximum(corners_s.min(0) - corners_t.max(0),
                                     corners_t.min(0) - corners_s.max(0)))
    assert diam <= eta * np.linalg.norm(gap)
