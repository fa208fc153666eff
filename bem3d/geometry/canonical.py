"""Panels in an order fixed by the geometry alone, whatever the order of a file's cells."""

import numpy as np

from bem3d.geometry.panels import Panels
from bem3d.geometry.topology import MERGE_REL, model_size


def canonical_order(panels):
    """The panels in an order, and each one's corners from a start, fixed by the geometry alone:
    corners rotated (orientation kept) to start at the lexicographically lowest, panels sorted
    by conductor and then by centroid; coordinates are compared on a grid of MERGE_REL times the
    model size, so that 0 and a subnormal number, say, count as equal.

    The pair quadrature depends on which corner comes first and on which panel of a pair comes
    first (measured: 2e-8 and 7e-8 relative in a capacitance), so listing the same panels in
    another order, or from other corners, or reversed and turned back by ``orient``, would
    otherwise change the result."""
    v = panels.vertices
    step = MERGE_REL * model_size(v.reshape(-1, 3)) or 1.0
    key = np.round(v / step)
    first = np.lexsort((key[..., 2], key[..., 1], key[..., 0]), axis=-1)[:, 0]
    roll = (first[:, None] + np.arange(3)) % 3
    v = v[np.arange(len(v))[:, None], roll]
    centre = np.round(v.mean(axis=1) / step)
    order = np.lexsort((centre[:, 2], centre[:, 1], centre[:, 0], panels.owner))
    return Panels(v[order], panels.owner[order], panels.names)
