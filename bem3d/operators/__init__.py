"""Galerkin single-layer operators. Every backend exposes scipy's LinearOperator protocol."""

from dataclasses import asdict, dataclass

import numpy as np

from ..quadrature import edge_rule, map_points, triangle_rule


@dataclass(frozen=True)
class PairRules:
    """How panel-pair integrals are computed, by centroid distance in units of r_k + r_l.

    Beyond `far`: one point per panel. Beyond `near`: a degree-`mid_degree` rule on both.
    Closer: a point rule on the smaller panel and the closed-form triangle potential over the
    larger, degree `near_degree`, or `touch_degree` inside `touch`. A panel with itself is
    integrated semi-analytically with `self_points` Gauss points along each edge.
    """

    touch: float = 1.05
    near: float = 2.0
    far: float = 10.0
    touch_degree: int = 13
    near_degree: int = 5
    mid_degree: int = 2
    self_points: int = 16

    def as_dict(self):
        return asdict(self)


def kernel_arguments(panels, rules):
    """The argument tuple the numba pair kernels take, after the output array."""
    args = [panels.vertices, panels.normals, panels.centroids, panels.radii, panels.areas]
    for degree in (rules.touch_degree, rules.near_degree, rules.mid_degree):
        bary, w = triangle_rule(degree)
        args += [map_points(panels.vertices, bary), w]
    args += list(edge_rule(rules.self_points))
    return tuple(args) + (float(rules.touch), float(rules.near), float(rules.far))
