"""Quadrature settings: of the Galerkin pair integrals, and of fields at points."""

from dataclasses import asdict, dataclass


@dataclass(frozen=True)
class PairRules:
    """How panel-pair integrals are computed, by centroid distance in units of r_k + r_l.

    Beyond `far`: the centroids' value with the panels' second moments
    (kernels.pairs.moment_pair). Beyond `mid`: a degree-`mid_degree` rule on both;
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


@dataclass(frozen=True)
class FieldRules:
    """Distances (in panel radii) at which fields at points change rule, and the degrees of
    the near and mid rules; see kernels.points.evaluate_points."""

    near: float = 2.0
    mid: float = 4.0
    far: float = 12.0
    near_degree: int = 5
    mid_degree: int = 2
