"""Shared helpers: panels from the parametric shapes, solved with the public pipeline."""

import signal

import numpy as np

from bem3d.geometry.panels import Panels
from bem3d.operators.quadrature import map_points, triangle_rule
from bem3d.solve.conductors import solve_panels

# Corner tetrahedron (0, e_x, e_y, e_z), faces oriented outward.
TET_POINTS = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1]], dtype=float)
TET_TRIS = np.array([[0, 2, 1], [0, 1, 3], [0, 3, 2], [1, 2, 3]])


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
    from bem3d._cli.main import main

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


def pair_rule_block(xa, wa, areas_a, xb, wb, areas_b):
    """Galerkin integrals of 1/|x - y| over panels a (rows) and b (columns) by the product of
    point rules: A_k A_l sum_pq w_p w_q / |x_kp - y_lq|, with rule points xa (m, p, 3) and
    xb (n, q, 3) and weights summing to 1. Plain numpy, a row at a time to keep memory small."""
    out = np.empty((len(xa), len(xb)))
    for k in range(len(xa)):
        d = np.linalg.norm(xa[k][None, :, None, :] - xb[:, None, :, :], axis=-1)
        out[k] = np.einsum("p,q,npq->n", wa, wb, 1.0 / d)
    return out * areas_a[:, None] * areas_b[None, :]


def covariances(vertices):
    """Each panel's covariance about its centroid, the mean of (y - c)(y - c)^T (m, 3, 3), by
    the degree-2 Stroud rule (exact for this quadratic integrand). Numpy."""
    bary, w = triangle_rule(2)
    y = map_points(vertices, bary)
    dy = y - np.einsum("q,nqa->na", w, y)[:, None, :]
    return np.einsum("q,nqa,nqb->nab", w, dy, dy)


def moment_rule_block(centroids_a, cov_a, areas_a, centroids_b, cov_b, areas_b):
    """A_k A_l (1/d + tr(H (Q_k + Q_l)) / 2), H = (3 R R^T - d^2 I) / d^5 the Hessian of 1/d at
    R = c_k - c_l: the second-order Taylor expansion of the Galerkin integral of 1/|x - y|
    about both centroids (the quadrupole term of the multipole expansion; Jackson 1999,
    Classical Electrodynamics, 3rd ed., section 4.1). cov: covariances (n, 3, 3). Numpy."""
    r = centroids_a[:, None, :] - centroids_b[None, :, :]
    d2 = np.einsum("mna,mna->mn", r, r)
    q = cov_a[:, None] + cov_b[None, :]
    rqr = np.einsum("mna,mnab,mnb->mn", r, q, r)
    tr = np.trace(q, axis1=2, axis2=3)
    return (areas_a[:, None] * areas_b[None, :]
            * (1.0 / np.sqrt(d2) + (3.0 * rqr - d2 * tr) / (2.0 * d2 ** 2.5)))


def normal_field_block(x, w, normals, y, wy, areas_y):
    """sum_p w_p n_i . A_l sum_t wy_t (x_ip - y_lt) / |x_ip - y_lt|^3: the normal field of unit
    charge densities on source panels (rule points y (n, t, 3), weights wy, areas) averaged
    over each test panel's points x (m, p, 3) with weights w and unit normals (m, 3). Numpy."""
    out = np.empty((len(x), len(y)))
    for i in range(len(x)):
        r = x[i][None, :, None, :] - y[:, None, :, :]
        along = r @ normals[i] / np.linalg.norm(r, axis=-1) ** 3
        out[i] = np.einsum("p,t,npt->n", w, wy, along)
    return out * areas_y[None, :]
