"""Galerkin single-layer operators. Every backend exposes scipy's LinearOperator protocol."""

from dataclasses import asdict, dataclass

from ..quadrature import edge_rule, graded_rule, map_points, triangle_rule


@dataclass(frozen=True)
class PairRules:
    """How panel-pair integrals are computed, by centroid distance in units of r_k + r_l.

    Beyond `far`: one point per panel. Beyond `mid`: a degree-`mid_degree` rule on both;
    beyond `near`: the degree-`near_degree` rule on both.
    Closer: a point rule on the smaller panel and the closed-form triangle potential over the
    larger: degree `near_degree`, or inside `touch` (panels that share a corner or edge) the
    graded rule with `touch_points`^2 points. A panel with itself is
    integrated semi-analytically with `self_points` Gauss points along each edge.

    `far` = 15: with one point per panel from 10 radii on, the smallest mutual capacitances of
    a three-conductor model moved by 1.1e-4 against the same model integrated with the
    degree-5 rule for every pair beyond `near`; from 15 on by 3.0e-5, for 18% more dense
    assembly time (tests/test_hmatrix.py keeps the check).
    """

    touch: float = 1.05
    near: float = 2.0
    mid: float = 4.0
    far: float = 15.0
    touch_points: int = 8
    near_degree: int = 5
    mid_degree: int = 2
    self_points: int = 16

    def as_dict(self):
        return asdict(self)


def kernel_arguments(panels, rules):
    """The argument tuple the numba pair kernels take, after the output array."""
    args = [panels.vertices, panels.normals, panels.centroids, panels.radii, panels.areas]
    for bary, w in (graded_rule(rules.touch_points), triangle_rule(rules.near_degree),
                    triangle_rule(rules.mid_degree)):
        args += [map_points(panels.vertices, bary), w]
    args += list(edge_rule(rules.self_points))
    return tuple(args) + (float(rules.touch), float(rules.near), float(rules.mid), float(rules.far))
