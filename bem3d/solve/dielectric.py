"""Piecewise-homogeneous dielectric bodies: the equivalent-charge formulation.

All charge — free charge on conductors, bound (polarisation) charge on the interfaces between
media — is taken to radiate in vacuum. Unknowns are the total charge densities on conductor
panels and on interface panels. Conductor panels keep the Galerkin single-layer rows
(potential = V). On an interface panel with unit normal n pointing from medium 1 into medium 2,
continuity of the normal component of D, eps1 E1.n = eps2 E2.n, with E.n = E_pv.n -+ sigma/(2 eps0)
on either side, gives the second-kind equation

    sigma - 2 eps0 lambda E_pv.n = 0,   lambda = (eps1 - eps2) / (eps1 + eps2),

collocated at the panel centroid (Rao, Sarkar & Harrington 1984, IEEE Trans. MTT-32(3);
the same jump relation as in Kellogg 1929). The free charge on a closed conductor is
eps_r (outside) times its total charge; capacitances are free charges per volt.

A lossy medium has the complex permittivity eps_r (1 - j tan d); lambda and the free charge
become complex, and so does the capacitance C* = C - j G / omega (the same equations with
complex coefficients: the panel integrals themselves stay real).

Above an infinite grounded plane every charge, free or bound, has its negative mirror image
(method of images), so both kinds of row take the image contribution: the potential of the
mirrored panels with opposite sign, and their normal field at the interface test points.
"""

import math
from dataclasses import dataclass

import numpy as np
import scipy.linalg

from bem3d.base.errors import MeshError, ModelError, option
from bem3d.geometry.panels import Panels
from bem3d.geometry.topology import closed_conductors
from bem3d.kernels.dense import assemble_normal_field
from bem3d.operators.dense import DenseOperator, dense_bytes
from bem3d.operators.kernel_data import normal_field
from bem3d.operators.points import winding_numbers
from bem3d.operators.rules import PairRules
from bem3d.results import CapacitanceResult, FieldSources, potential_vector

#: Test points per direction of the graded rule on each interface panel (6 x 6 = 36).
TEST_POINTS = 6


def check_bodies(bodies):
    """Each body closed, outward-facing, of positive permittivity and a loss tangent in [0, 1);
    raises MeshError or ModelError."""
    for body in bodies:
        if not body.eps_r > 0 or not math.isfinite(body.eps_r):
            raise ModelError(f"{body.name}: relative permittivity must be positive, "
                             f"got {body.eps_r:g}")
        if not 0 <= body.loss_tangent < 1:
            raise ModelError(f"{body.name}: loss tangent must be at least 0 and below 1, "
                             f"got {body.loss_tangent:g}")
        if not closed_conductors(body.panels).all():
            raise MeshError(f"{body.name}: a dielectric body must be a closed surface "
                            "(its mesh has boundary edges)")
        if body.volume <= 0:
            c = body.panels.centroids.mean(axis=0)
            raise MeshError(f"{body.name}: its normals point inwards (enclosed volume "
                            f"{body.volume:.3g} m^3 near {np.round(c, 6).tolist()} m); "
                            "flip the mesh orientation")


def medium_at(points, bodies, background):
    """Relative permittivity at points (m, 3): that of the smallest body containing each point,
    else the background; complex where a medium is lossy."""
    lossy = isinstance(background, complex) or any(b.loss_tangent for b in bodies)
    eps = np.full(len(points), background, complex if lossy else float)
    smallest = np.full(len(points), np.inf)
    for body in bodies:
        inside = winding_numbers(body.panels, points) > 0.5
        take = inside & (body.volume < smallest)
        eps[take] = body.permittivity
        smallest[take] = body.volume
    return eps


def all_body_panels(bodies):
    """The panels of every body in one Panels, owner = body index, names = body names."""
    return Panels(np.concatenate([b.panels.vertices for b in bodies]),
                  np.concatenate([np.full(len(b.panels), k) for k, b in enumerate(bodies)]),
                  tuple(b.name for b in bodies))


def interfaces(bodies, background, size):
    """Interface panels and their lambda = (eps_in - eps_out)/(eps_in + eps_out).

    A face shared by two touching bodies appears in both meshes with opposite normals: it is
    kept once, with the two bodies' permittivities on its sides."""
    all_panels = all_body_panels(bodies)
    _coincident(all_panels, all_panels, size, "dielectric bodies")     # refuses mismatched faces
    verts, owner = all_panels.vertices, all_panels.owner
    eps_in = np.array([bodies[k].permittivity for k in owner])
    # duplicates: the same three corners (in any order) in two bodies
    key = np.round(np.sort(verts, axis=1).reshape(len(verts), 9) / (1e-9 * size)).astype(np.int64)
    _, first, inverse, counts = np.unique(key, axis=0, return_index=True, return_inverse=True,
                                          return_counts=True)
    inverse = inverse.ravel()
    keep = np.ones(len(verts), bool)
    eps_out = np.empty(len(verts), eps_in.dtype if not isinstance(background, complex)
                       else complex)
    shared = counts[inverse] == 2
    for k in np.flatnonzero(shared):
        twin = np.flatnonzero(inverse == inverse[k])
        other = twin[twin != k][0]
        if k > other:
            keep[k] = False
        eps_out[k] = eps_in[other]
    if np.any(counts > 2):
        raise MeshError("dielectric bodies: a face is shared by more than two bodies")
    alone = ~shared
    probe = all_panels.centroids[alone] + 1e-6 * size * all_panels.normals[alone]
    eps_out[alone] = medium_at(probe, bodies, background)
    panels = Panels(verts[keep], owner[keep], all_panels.names)
    lam = (eps_in[keep] - eps_out[keep]) / (eps_in[keep] + eps_out[keep])
    return panels, lam


def _off_the_plane(inter, lam, bodies, ground_z, size):
    """Interface panels not lying on the grounded plane z = ground_z (m). A body may stand on
    the plane: a face on it carries bound charge that its own image cancels (method of
    images), so the plane takes it; a body reaching below the plane is refused."""
    tol = 1e-9 * size
    low = [b.name for b in bodies if b.panels.vertices[..., 2].min() < ground_z - tol]
    if low:
        raise ModelError(f"{option('ground_plane')} z = {ground_z:g} m: dielectric body(ies) "
                         f"{', '.join(low)} cross or lie below the plane; they may stand on it "
                         "but not reach under it")
    on_plane = np.all(np.abs(inter.vertices[..., 2] - ground_z) <= tol, axis=1)
    keep = ~on_plane
    return Panels(inter.vertices[keep], inter.owner[keep], inter.names), lam[keep]


def _inside_triangles(points, triangles, normals, tol):
    """For each point (m, 3) and its candidate triangle (m, 3, 3) with unit normal (m, 3):
    does the point lie in the triangle's plane and inside it (edges included)?"""
    on_plane = np.abs(np.einsum("ij,ij->i", points - triangles[:, 0], normals)) <= tol
    edges = np.cross(triangles[:, [1, 2, 0]] - triangles, points[:, None, :] - triangles)
    inside = np.all(np.einsum("ikj,ij->ik", edges, normals) >= -tol * np.linalg.norm(
        triangles[:, 1] - triangles[:, 0], axis=1)[:, None], axis=1)
    return on_plane & inside


def _coincident(a, b, size, what):
    """Which panels of a coincide with a panel of b (the same three corners); MeshError
    where a panel of a and one of b overlap in a common plane without coinciding (a shared
    face must be meshed identically on both sides)."""
    from scipy.spatial import cKDTree

    tol = 1e-6 * size
    key = 1e-9 * size
    same = np.zeros(len(a), bool)
    if not len(a) or not len(b):
        return same
    near = cKDTree(a.centroids).sparse_distance_matrix(
        cKDTree(b.centroids), float(a.radii.max() + b.radii.max()), output_type="ndarray")
    # panels that overlap have centroids closer than their radii summed
    close = near["v"] < a.radii[near["i"]] + b.radii[near["j"]]
    i, k = near["i"][close].astype(np.int64), near["j"][close].astype(np.int64)
    if not len(i):
        return same
    corners_a = np.round(np.sort(a.vertices[i], axis=1).reshape(-1, 9) / key)
    corners_b = np.round(np.sort(b.vertices[k], axis=1).reshape(-1, 9) / key)
    identical = np.all(corners_a == corners_b, axis=1)
    same[i[identical]] = True
    overlap = (_inside_triangles(a.centroids[i], b.vertices[k], b.normals[k], tol)
               | _inside_triangles(b.centroids[k], a.vertices[i], a.normals[i], tol))
    bad = overlap & ~identical
    if bad.any():
        j = np.flatnonzero(bad)[0]
        where = ", ".join(f"{x:.4g}" for x in a.centroids[i[j]])
        raise MeshError(f"{what}: faces overlap without being meshed alike near ({where}) m; "
                        "a shared face needs the same panels on both sides")
    return same


def _uncovered(inter, lam, conductors, size):
    """Interface panels not covered by a conductor: a dielectric face under a conductor's
    surface (a body touching a conductor, a sheet on a body face) carries no charge of its
    own; the conductor's panel takes it."""
    covered = _coincident(inter, conductors, size, "a dielectric body and a conductor")
    keep = ~covered
    return Panels(inter.vertices[keep], inter.owner[keep], inter.names), lam[keep]


def system_bytes(n_panels, lossy=False):
    """Peak memory (bytes) of the dense dielectric solve for n_panels conductor and interface
    panels: two n x n arrays, the system matrix and the copy LU factors (the image field of
    the interface rows needs at most one more matrix's worth before that copy exists); with a
    lossy medium both are complex, twice the size."""
    return (4 if lossy else 2) * dense_bytes(n_panels)


@dataclass(frozen=True)
class DielectricSystem:
    """The geometry of the coupled system, known before any assembly: conductor panels,
    interface panels with their lambda, the relative permittivity on the normal side of each
    conductor panel (eps_out) and on its back (eps_back), which conductor panels carry charge
    on both faces (two_faced), the bodies, the background and the grounded plane height (m)
    or None."""

    conductors: Panels
    interfaces: Panels
    lam: np.ndarray
    eps_out: np.ndarray
    eps_back: np.ndarray
    two_faced: np.ndarray
    bodies: tuple
    background: float | complex
    ground_z: float | None

    @property
    def n_panels(self):
        return len(self.conductors) + len(self.interfaces)

    @property
    def lossy(self):
        """A medium with a loss tangent: complex coefficients throughout."""
        return np.iscomplexobj(self.eps_out) or np.iscomplexobj(self.lam)

    @property
    def nbytes(self):
        return system_bytes(self.n_panels, self.lossy)


def plan_dielectrics(conductors, bodies, background=1.0, ground_z=None):
    """Check the bodies and find the interfaces: a DielectricSystem (no assembly yet).
    background: relative permittivity around the bodies, complex if lossy (see
    geometry.bodies.complex_permittivity); ground_z: height (m) of an infinite grounded plane;
    bodies may stand on it."""
    check_bodies(bodies)
    v = conductors.vertices.reshape(-1, 3)
    size = float(np.max(v.max(axis=0) - v.min(axis=0)))
    inter, lam = interfaces(bodies, background, size)
    if ground_z is not None:
        inter, lam = _off_the_plane(inter, lam, bodies, ground_z, size)
    inter, lam = _uncovered(inter, lam, conductors, size)
    delta = 1e-6 * size
    eps_out = medium_at(conductors.centroids + delta * conductors.normals, bodies, background)
    eps_back = medium_at(conductors.centroids - delta * conductors.normals, bodies, background)
    two_faced = ~_solid(conductors, inter)[conductors.owner] & (eps_out != eps_back)
    return DielectricSystem(conductors, inter, lam, eps_out, eps_back, two_faced, tuple(bodies),
                            background, ground_z)


def _solid(conductors, inter):
    """Per conductor: a closed surface with nothing inside it (no other conductor, no
    interface). Its inside is field-free, so all its charge sits on the outer face. Open
    sheets and closed shells around something carry charge on both faces."""
    closed = closed_conductors(conductors)
    others = np.concatenate([conductors.centroids, inter.centroids])
    owner = np.concatenate([conductors.owner, np.full(len(inter), -1)])
    solid = closed.copy()
    for k in np.flatnonzero(closed):
        on = conductors.owner == k
        shell = Panels(conductors.vertices[on], np.zeros(int(on.sum()), int), ("shell",))
        test = owner != k
        solid[k] = not np.any(winding_numbers(shell, others[test]) > 0.5)
    return solid


def solve_with_dielectrics(conductors, bodies, background=1.0, volts=None, rules=PairRules(),
                           ground_z=None):
    """Capacitance of `conductors` (Panels, m) among dielectric `bodies` in a background medium,
    above a grounded plane z = ground_z (m) if given.

    Returns a CapacitanceResult whose sigma is the free charge density (C/m^2) per volt on each
    conductor panel; solver settings record the interface panel count."""
    return solve_system(plan_dielectrics(conductors, bodies, background, ground_z), volts, rules)


def _interface_rows(out, system, sources):
    """Fill out (ni, n) with the interface rows' normal field (see _normal_field_rows)."""
    _normal_field_rows(out, system.interfaces, sources, system.ground_z)


def _normal_field_rows(out, tests, sources, ground_z, direction=None):
    """Fill out (m, n): over each test panel's points, the weighted sum of n_k . (field of a
    unit charge density on each source panel), less that of the source's mirror image when
    there is a grounded plane z = ground_z. direction: a unit vector to take the field along
    instead of each test panel's normal (a flat panel's own in-plane field averages to zero
    over it, as its normal field does)."""
    data = normal_field(tests, sources, TEST_POINTS, ground_z)
    if direction is not None:
        data = data._replace(test_normals=np.tile(np.asarray(direction, float),
                                                  (len(tests), 1)))
    assemble_normal_field(out, data)


def union_panels(system):
    """Conductor panels then interface panels in one Panels: the order of the unknowns."""
    conductors, inter = system.conductors, system.interfaces
    return Panels(np.concatenate([conductors.vertices, inter.vertices]),
                  np.concatenate([conductors.owner, conductors.n_conductors + inter.owner]),
                  conductors.names + inter.names)


def system_rhs(system):
    """Right-hand sides (n, conductors): each conductor's unit excitation on its rows."""
    conductors = system.conductors
    rhs = np.zeros((system.n_panels, conductors.n_conductors))
    rhs[:len(conductors)] = conductors.excitation()
    return rhs


def free_charge(system, both, total):
    """Free charge density (n_conductor_panels, k) C/m^2 of the total charge densities `total`
    (conductors then interfaces, radiating in vacuum). On a face with relative permittivity
    eps, D.n = eps0 eps E.n, and E.n = E_pv.n +- sigma/(2 eps0) on the faces a (normal side)
    and b; their difference is the free charge eps0 (eps_a - eps_b) E_pv.n + (eps_a + eps_b)
    sigma / 2. A solid conductor's inside is field-free: its free charge is eps_a sigma."""
    conductors = system.conductors
    sigma = total[:len(conductors)]
    free = system.eps_out[:, None] * sigma
    faced = np.flatnonzero(system.two_faced)
    if faced.size:
        a, b = system.eps_out[faced, None], system.eps_back[faced, None]
        tests = Panels(conductors.vertices[faced], conductors.owner[faced], conductors.names)
        # eps0 E_pv.n = (1/4 pi) sum_l <n . g_l> sigma_l (the same rows as the interfaces')
        normal = normal_field_product(tests, both, system.ground_z, total) / (4 * math.pi)
        free[faced] = 0.5 * (a + b) * sigma[faced] + (a - b) * normal
    return free


def normal_field_product(tests, sources, ground_z, total, rows=512, direction=None):
    """sum_l <n_i . g_l>_i total_l for every test panel i (the interface rows' normal field,
    images subtracted), assembled a block of rows at a time so memory stays bounded.
    direction: the field along this unit vector instead (see _normal_field_rows)."""
    out = np.empty((len(tests), total.shape[1]), total.dtype)
    for start in range(0, len(tests), rows):
        block = slice(start, min(start + rows, len(tests)))
        part = Panels(tests.vertices[block], tests.owner[block], tests.names)
        field = np.empty((len(part), len(sources)))
        _normal_field_rows(field, part, sources, ground_z, direction)
        out[block] = field @ total
    return out


def system_result(system, both, total, volts, solver):
    """The CapacitanceResult of the total charge densities `total` (n, conductors);
    solver: the record of how they were found (backend, solver, residual, ...).

    With lossy media the charges are complex phasors per volt: the capacitance is their real
    part and the loss matrix -Im C* (G / omega); charge densities and fields are the real
    (in-phase) part."""
    conductors = system.conductors
    free = free_charge(system, both, total)
    maxwell = conductors.excitation().T @ free
    symmetric = 0.5 * (maxwell + maxwell.T)
    background = system.background
    return CapacitanceResult(
        names=conductors.names, maxwell=symmetric.real, sigma=free.real,
        potentials=potential_vector(conductors.names, dict(volts or {})),
        n_panels=len(conductors),
        solver={**solver, "interface_panels": len(system.interfaces),
                "two_faced_panels": int(system.two_faced.sum()),
                "relative_permittivity": background.real,
                "ground_plane_z_m": system.ground_z},
        asymmetry=float(np.max(np.abs(maxwell - maxwell.T)) / np.max(np.abs(np.diag(maxwell)))),
        loss=-symmetric.imag if system.lossy else None,
        sources=FieldSources(both, total.real, 1.0, system.bodies, background.real))


def solve_system(system, volts=None, rules=PairRules()):
    """Assemble and solve a DielectricSystem by dense LU: a CapacitanceResult."""
    conductors, inter, lam = system.conductors, system.interfaces, system.lam
    nc, ni = len(conductors), len(inter)
    both = union_panels(system)
    # conductor rows: Galerkin potential of all charges (and their images) in vacuum,
    # (V m^2) per (C/m^2); the interface rows of this matrix are overwritten below
    matrix = DenseOperator(both, eps_r=1.0, rules=rules, ground_z=system.ground_z).matrix
    scale = np.mean(np.diag(matrix)[:nc] / conductors.areas)     # keeps the blocks comparable
    # interface rows, tested over each panel (Galerkin): A_k sigma_k - lambda_k/(2 pi)
    # sum_l <n_k . g_l>_k sigma_l, scaled like P. The test rule is the graded one because a
    # neighbour's field has logarithmic edges on panel k (a centroid-only test converges
    # only like h^0.8 here, measured on a sphere in a dielectric shell).
    rows = matrix[nc:]                      # a view: assembled in place
    _interface_rows(rows, system, both)
    if system.lossy:                        # complex lambda: the rows' coefficients
        matrix = matrix.astype(complex)
        rows = matrix[nc:]
    rows *= -(lam / (2 * math.pi))[:, None]
    rows[np.arange(ni), nc + np.arange(ni)] += 1.0
    rows *= (scale * inter.areas)[:, None]
    rhs = system_rhs(system)
    total = scipy.linalg.lu_solve(scipy.linalg.lu_factor(matrix), rhs)
    residual = float(np.linalg.norm(matrix @ total - rhs) / np.linalg.norm(rhs))
    return system_result(system, both, total, volts,
                         {"backend": "dense", "solver": "lu (dielectric interfaces)",
                          "relative_residual": residual, "pair_rules": rules.as_dict(),
                          "memory_estimate_MiB": system.nbytes / 2**20})
