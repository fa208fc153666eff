"""Triangle rules against exact integrals of barycentric monomials.

Reference: int_T l0^a l1^b l2^c dA = 2 A a! b! c! / (a + b + c + 2)!  (the classical formula for
barycentric monomials; e.g. Eisenberg & Malvern 1973, Int. J. Numer. Meth. Eng. 7, 574).
"""

from math import factorial

import numpy as np
import pytest

from bem3d.operators.quadrature import map_points, triangle_rule


def exact_mean(a, b, c):
    """Mean over a triangle of l0^a l1^b l2^c (the formula above divided by A)."""
    return 2 * factorial(a) * factorial(b) * factorial(c) / factorial(a + b + c + 2)


@pytest.mark.parametrize("degree", [1, 2, 5, 7, 11, 13, 15])
def test_rule_is_exact_to_its_degree(degree):
    bary, w = triangle_rule(degree)
    assert np.isclose(w.sum(), 1.0, rtol=0, atol=1e-14)
    assert np.all(bary >= 0) and np.allclose(bary.sum(axis=1), 1.0)
    for total in range(degree + 1):
        for a in range(total + 1):
            for b in range(total + 1 - a):
                c = total - a - b
                got = np.sum(w * bary[:, 0] ** a * bary[:, 1] ** b * bary[:, 2] ** c)
                assert got == pytest.approx(exact_mean(a, b, c), rel=1e-12, abs=1e-15)


@pytest.mark.parametrize("degree", [1, 2, 5])
def test_rule_is_not_exact_beyond_its_degree(degree):
    # a rule exact one degree higher would mean the table is not the one we think it is
    bary, w = triangle_rule(degree)
    a = degree + 1
    got = np.sum(w * bary[:, 0] ** a)
    assert abs(got - exact_mean(a, 0, 0)) > 1e-6


def test_map_points_puts_points_inside_the_panel():
    v = np.array([[[0.0, 0, 0], [2, 0, 0], [0, 1, 0]]])
    bary, w = triangle_rule(5)
    x = map_points(v, bary)[0]
    # centroid of the rule's points with its weights is the triangle's centroid (degree 1)
    assert np.allclose(w @ x, v[0].mean(axis=0))
    assert np.all(x[:, 0] >= 0) and np.all(x[:, 1] >= 0) and np.all(x[:, 0] / 2 + x[:, 1] <= 1)
