"""Galerkin single-layer operators. Every backend exposes scipy's LinearOperator protocol."""

from dataclasses import asdict, dataclass

from bem3d.operators.quadrature import edge_rule, graded_rule, map_points, triangle_rule


@dataclass(frozen=True)
class PairRules:
    """How panel-pair integrals are computed, by centroid distance in units of r_k + r_l.

    Beyond `far`: the centroids' value with the panels' second moments
    (kernels.moment_pair). Beyond `mid`: a degree-`mid_degree` rule on both;
    beyond `near`: the degree-`near_degree` rule on both.
    Closer: a point rule on the smaller panel and the closed-form triangle potential over the
    larger: degree `near_degree`, or inside `touch` (panels that share a corner or edge) the
    graded rule with `touch_points`^2 points. A panel with itself is
    integrated semi-analytically with `self_points` Gauss points along each edge.

    `far` = 6: against the same models integrated with the degree-5 rule for every pair
    beyond `near`, the Maxwell entries of a three-conductor model (2,430 panels) moved by
    4.3e-7 and of the sensor head (8,010 panels) by 1.6e-6; with the plain one-point value
    (no moment term) from 15 radii on they had moved by 3.0e-5 and 1.6e-4
    (tests/test_hmatrix.py keeps the check).
    """

    touch: float = 1.05
    near: float = 2.0
    mid: float = 4.0
    far: float = 6.0
    touch_points: int = 8
    near_degree: int = 5
    mid_degree: int = 2
    self_points: int = 16

    def as_dict(self):
        return asdict(self)


def kernel_arguments(panels, rules):
    """The argument tuple the numba pair kernels take, after the output array."""
    args = [panels.vertices, panels.normals, panels.centroids, panels.radii, panels.areas,
            panels.moments]
    for bary, w in (graded_rule(rules.touch_points), triangle_rule(rules.near_degree),
                    triangle_rule(rules.mid_degree)):
        args += [map_points(panels.vertices, bary), w]
    args += list(edge_rule(rules.self_points))
    return tuple(args) + (float(rules.touch), float(rules.near), float(rules.mid), float(rules.far))


def image_arrays(image):
    """Of kernel_arguments(mirror images, rules), the arrays the image kernels take after the
    panels' own arguments: the images' corners, normals, centroids, second moments and touch,
    near and mid rule points (their areas, radii and weights are the panels' own)."""
    return image[0], image[1], image[2], image[5], image[6], image[8], image[10]
