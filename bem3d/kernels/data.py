"""The arrays the kernels take, as named structures (numba passes NamedTuples to compiled code).

operators.kernel_data builds them; the kernels read them by field name, once at the top of a
compiled function (an array read out of a structure inside a hot loop would be
reference-counted per entry). Lengths in metres; arrays float64 and C-contiguous.
"""

from typing import NamedTuple

import numpy as np


class PairPanels(NamedTuple):
    """One set of panels (or their mirror images) as the pair integrals see them."""

    verts: np.ndarray        # (n, 3, 3) corners
    normals: np.ndarray      # (n, 3) unit normals by the right-hand rule on the corners
    centroids: np.ndarray    # (n, 3)
    radii: np.ndarray        # (n,) largest centroid-corner distance
    areas: np.ndarray        # (n,) m^2
    moments: np.ndarray      # (n, 6) second moments about the centroid (Panels.moments)
    pts_hi: np.ndarray       # (n, q, 3) points of the graded rule for touching pairs
    pts_near: np.ndarray     # (n, q, 3) points of the near rule
    pts_mid: np.ndarray      # (n, q, 3) points of the mid rule


class PairQuadrature(NamedTuple):
    """Rule weights and switching distances of the pair integrals (operators.PairRules)."""

    w_hi: np.ndarray         # weights of pts_hi
    w_near: np.ndarray       # weights of pts_near
    w_mid: np.ndarray        # weights of pts_mid
    self_s: np.ndarray       # Gauss-Legendre nodes on [0, 1] along an edge (self integral)
    self_w: np.ndarray       # and their weights
    touch: float             # distances in units of radius_k + radius_l between centroids
    near: float
    mid: float
    far: float


class SingleLayer(NamedTuple):
    """The single-layer operator's panels, their mirror images in a grounded plane, the
    quadrature, and whether the images' term is subtracted (without a plane `images` is
    `panels`, unused). The images share radii and areas with their panels."""

    panels: PairPanels
    images: PairPanels
    quadrature: PairQuadrature
    grounded: bool


class PointSources(NamedTuple):
    """Source panels and the rules of fields at points: the closed form inside `near`, the
    near rule inside `mid`, the mid rule inside `far`, one point beyond (units of the source
    panel's radius)."""

    verts: np.ndarray        # (n, 3, 3) corners
    normals: np.ndarray      # (n, 3)
    centroids: np.ndarray    # (n, 3)
    radii: np.ndarray        # (n,)
    areas: np.ndarray        # (n,)
    pts_mid: np.ndarray      # (n, q, 3) points of the mid rule
    w_mid: np.ndarray
    pts_near: np.ndarray     # (n, q, 3) points of the near rule
    w_near: np.ndarray
    near: float
    mid: float
    far: float


class InterfacePoints(NamedTuple):
    """Test points of the interface panels, over which the normal field is averaged."""

    points: np.ndarray       # (m, q, 3)
    weights: np.ndarray      # (q,), summing to 1
    normals: np.ndarray      # (m, 3) unit normals of the test panels


class NormalField(NamedTuple):
    """The normal-field operator: field of the sources at the test points along their normals,
    less that of the sources' mirror images when `grounded` (else `images` is `sources`,
    unused)."""

    tests: InterfacePoints
    sources: PointSources
    images: PointSources
    grounded: bool
