"""The arrays the kernels take, as named structures (numba passes NamedTuples to compiled code).

operators.kernel_data builds them; the kernels read them by field name, once at the top of a
compiled function (an array read out of a structure inside a hot loop would be
reference-counted per entry). Each structure is flat, arrays and numbers only: numba's
parallel loops take a structure apart into its fields, one level deep. Lengths in metres;
arrays float64 and C-contiguous; rule points (n, q, 3), their weights (q,).
"""

from typing import NamedTuple

import numpy as np


class SingleLayer(NamedTuple):
    """The single-layer operator: the panels, the pair rules (operators.PairRules), and the
    panels' mirror images in a grounded plane, subtracted when `grounded` (without a plane
    the image fields are the panels' own, unused). The images share radii and areas with
    their panels, so both pick the same rules."""

    verts: np.ndarray            # (n, 3, 3) corners
    normals: np.ndarray          # (n, 3) unit normals by the right-hand rule on the corners
    centroids: np.ndarray        # (n, 3)
    radii: np.ndarray            # (n,) largest centroid-corner distance
    areas: np.ndarray            # (n,) m^2
    moments: np.ndarray          # (n, 6) second moments about the centroid (Panels.moments)
    pts_hi: np.ndarray           # graded rule for touching pairs
    pts_near: np.ndarray         # near rule
    pts_mid: np.ndarray          # mid rule
    w_hi: np.ndarray
    w_near: np.ndarray
    w_mid: np.ndarray
    self_s: np.ndarray           # Gauss-Legendre nodes on [0, 1] along an edge (self integral)
    self_w: np.ndarray           # and their weights
    touch: float                 # rule distances in units of radius_k + radius_l
    near: float
    mid: float
    far: float
    image_verts: np.ndarray
    image_normals: np.ndarray
    image_centroids: np.ndarray
    image_moments: np.ndarray
    image_pts_hi: np.ndarray
    image_pts_near: np.ndarray
    image_pts_mid: np.ndarray
    grounded: bool


class PointSources(NamedTuple):
    """Source panels of fields at points and their rules: the closed form inside `near`, the
    near rule inside `mid`, the mid rule inside `far`, one point beyond (units of the source
    panel's radius; operators.FieldRules)."""

    verts: np.ndarray            # (n, 3, 3) corners
    normals: np.ndarray          # (n, 3)
    centroids: np.ndarray        # (n, 3)
    radii: np.ndarray            # (n,)
    areas: np.ndarray            # (n,)
    pts_mid: np.ndarray
    w_mid: np.ndarray
    pts_near: np.ndarray
    w_near: np.ndarray
    near: float
    mid: float
    far: float


class NormalField(NamedTuple):
    """The normal-field operator of dielectric interfaces: the field of the source panels
    (the fields of PointSources) along the test panels' normals, averaged over their test
    points, less that of the sources' mirror images when `grounded` (without a plane the
    image fields are the sources' own, unused). The images use the sources' rule weights
    and distances. The graded test rule follows the logarithmic edges of a neighbour's
    field; a source far from the test panel (beyond `mid` times their radii summed) has a
    smooth field there, which the smaller symmetric rule far_points integrates."""

    test_points: np.ndarray      # (m, q, 3)
    test_weights: np.ndarray     # (q,), summing to 1
    test_normals: np.ndarray     # (m, 3)
    test_centroids: np.ndarray   # (m, 3)
    test_radii: np.ndarray       # (m,)
    far_points: np.ndarray       # (m, p, 3)
    far_weights: np.ndarray      # (p,), summing to 1
    verts: np.ndarray
    normals: np.ndarray
    centroids: np.ndarray
    radii: np.ndarray
    areas: np.ndarray
    pts_mid: np.ndarray
    w_mid: np.ndarray
    pts_near: np.ndarray
    w_near: np.ndarray
    near: float
    mid: float
    far: float
    image_verts: np.ndarray
    image_normals: np.ndarray
    image_centroids: np.ndarray
    image_radii: np.ndarray
    image_areas: np.ndarray
    image_pts_mid: np.ndarray
    image_pts_near: np.ndarray
    grounded: bool
