"""The structures the kernels take (kernels.data), built from Panels and the rule settings:
the one place where panels become kernel arrays."""

import numpy as np

from bem3d.kernels.data import NormalField, PointSources, SingleLayer
from bem3d.operators.quadrature import edge_rule, graded_rule, map_points, triangle_rule
from bem3d.operators.rules import FieldRules, PairRules


def _pair_points(panels, rules):
    # the touch, near and mid rule points of each panel
    return [map_points(panels.vertices, bary) for bary in (
        graded_rule(rules.touch_points)[0], triangle_rule(rules.near_degree)[0],
        triangle_rule(rules.mid_degree)[0])]


def single_layer(panels, rules=PairRules(), ground_z=None):
    """The single-layer operator of `panels` (Panels, m) by the pair `rules`, with the mirror
    images in the grounded plane z = ground_z (m) if given."""
    pts_hi, pts_near, pts_mid = _pair_points(panels, rules)
    image = panels if ground_z is None else panels.mirrored(ground_z)
    image_hi, image_near, image_mid = ((pts_hi, pts_near, pts_mid) if ground_z is None
                                       else _pair_points(image, rules))
    self_s, self_w = edge_rule(rules.self_points)
    return SingleLayer(
        panels.vertices, panels.normals, panels.centroids, panels.radii, panels.areas,
        panels.moments, pts_hi, pts_near, pts_mid, graded_rule(rules.touch_points)[1],
        triangle_rule(rules.near_degree)[1], triangle_rule(rules.mid_degree)[1], self_s, self_w,
        float(rules.touch), float(rules.near), float(rules.mid), float(rules.far),
        image.vertices, image.normals, image.centroids, image.moments, image_hi, image_near,
        image_mid, ground_z is not None)


def point_sources(panels, rules=FieldRules()):
    """The source panels (Panels, m) of fields at points, with the point `rules`."""
    bary_near, w_near = triangle_rule(rules.near_degree)
    bary_mid, w_mid = triangle_rule(rules.mid_degree)
    return PointSources(panels.vertices, panels.normals, panels.centroids, panels.radii,
                        panels.areas, map_points(panels.vertices, bary_mid), w_mid,
                        map_points(panels.vertices, bary_near), w_near, float(rules.near),
                        float(rules.mid), float(rules.far))


#: Degree of the symmetric test rule for sources far from the test panel (7 points).
FAR_TEST_DEGREE = 5


def normal_field(tests, sources, test_points, ground_z=None, rules=FieldRules()):
    """The normal-field operator: the field of `sources` (Panels) along the normals of the
    `tests` panels, averaged over each test panel's graded rule of test_points^2 points (by
    a symmetric rule of degree FAR_TEST_DEGREE for sources beyond FieldRules.mid times the
    radii summed), less that of the sources'
    mirror images in the grounded plane z = ground_z (m) if given."""
    bary, weights = graded_rule(test_points)
    far_bary, far_weights = triangle_rule(FAR_TEST_DEGREE)
    own = point_sources(sources, rules)
    image = own if ground_z is None else point_sources(sources.mirrored(ground_z), rules)
    return NormalField(test_points=map_points(tests.vertices, bary), test_weights=weights,
                       test_normals=tests.normals, test_centroids=tests.centroids,
                       test_radii=tests.radii, far_points=map_points(tests.vertices, far_bary),
                       far_weights=far_weights, **own._asdict(), image_verts=image.verts,
                       image_normals=image.normals, image_centroids=image.centroids,
                       image_radii=image.radii, image_areas=image.areas,
                       image_pts_mid=image.pts_mid, image_pts_near=image.pts_near,
                       grounded=ground_z is not None)


def kernel_bytes(data):
    """Bytes of the arrays in a kernel structure, each array counted once."""
    arrays = {id(a): a.nbytes for a in data if isinstance(a, np.ndarray)}
    return sum(arrays.values())
