"""Dielectric bodies with the compressed backend: the coupled system as H-matrices, by GMRES.

The unknowns, rows and scaling are those of dielectric.solve_system (dense LU): conductor rows
are the single-layer rows P, interface rows w_k (sigma_k - lambda_k/(2 pi) (K sigma)_k) with
w_k = scale * area_k. P is the symmetric H-matrix over all panels, its cluster tree split at
the root into conductors and interfaces, so that its conductor block and its subdomains are
those of the conductors alone; the blocks among interfaces, never used, are left out. K
(interface rows x all panels) is a general H-matrix (operators.hfield). Restarted GMRES for all
conductors' right-hand sides at once (solve.gmres) with a block-diagonal preconditioner:
two-level Schwarz on the conductor rows, 1/w_k on the interface rows (the diagonal of that
block: a flat panel's own normal field vanishes)."""

import math
import sys

import numba
import numpy as np
from threadpoolctl import threadpool_limits

from bem3d.geometry.panels import Panels
from bem3d.operators.cache import cache_key
from bem3d.operators.cluster import ClusterTree
from bem3d.operators.hfield import FieldOperator, FieldPlan
from bem3d.operators.hmatrix import Compression, HMatrixOperator, HMatrixPlan
from bem3d.operators.kernel_data import FAR_TEST_DEGREE, normal_field
from bem3d.operators.rules import PairRules
from bem3d.solve.compiling import clock, seconds_since
from bem3d.solve.dielectric import TEST_POINTS, system_result, system_rhs, union_panels
from bem3d.solve.gmres import gmres_columns
from bem3d.solve.schwarz import SchwarzPreconditioner

#: Krylov vectors kept between GMRES restarts.
RESTART = 60


class DielectricPlan:
    """Block structures and memory of the compressed dielectric system, before assembly.

    system: dielectric.DielectricSystem; subdomain_size: most panels in a Schwarz subdomain."""

    def __init__(self, system, rules=PairRules(), compression=Compression(), subdomain_size=128):
        self.system, self.rules, self.compression = system, rules, compression
        self.both = union_panels(system)
        conductors, inter = system.conductors, system.interfaces
        leaf = compression.leaf_size
        tree = ClusterTree.build(conductors.vertices, conductors.centroids, leaf)
        # below the whole model's size, so that no subdomain mixes conductors and interfaces
        self.subdomain_size = min(subdomain_size, max(1, system.n_panels - 1))
        self.field = None              # stays so if every dielectric face lies on a conductor
        if len(inter):
            rows = ClusterTree.build(inter.vertices, inter.centroids, leaf)
            tree = ClusterTree.join(tree, rows)
        # only the conductor rows of P are used: the blocks among interfaces are left out
        self.single = HMatrixPlan(self.both, rules, compression, system.ground_z, tree=tree,
                                  leading=len(conductors))
        if len(inter):
            ordered = Panels(inter.vertices[rows.perm], inter.owner[rows.perm], inter.names)
            self.field = FieldPlan(rows, tree, normal_field(ordered, self.single.panels,
                                                            TEST_POINTS, system.ground_z),
                                   compression)

    def operator_bytes(self):
        """Estimated bytes of both compressed operators."""
        return self.single.operator_bytes() + self.field_bytes()

    def field_bytes(self):
        """Estimated bytes of the normal-field operator."""
        return 0 if self.field is None else self.field.operator_bytes()

    def work_bytes(self, n_rhs):
        """Bytes beside the operators: kernel arguments, preconditioner and solver vectors."""
        n = self.system.n_panels
        item = 16 if self.system.lossy else 8
        # the Krylov bases of every right-hand side (their real and imaginary parts go
        # through the operators side by side) and a few working blocks
        gmres_vectors = item * n * n_rhs * (RESTART + 10) + 8 * n * numba.get_num_threads()
        field = 0 if self.field is None else self.field.argument_bytes()
        return self.single.work_bytes(n_rhs, self.subdomain_size) + field + gmres_vectors


def _conductor_schwarz(operator, areas, nc, max_size):
    # Schwarz on the subdomains inside the conductor half of the tree: that of P_cc alone
    # (areas: of the panels in cluster numbering)
    perm, bounds, offsets, inverses, coarse = operator.schwarz_parts(max_size, areas, nc)
    return SchwarzPreconditioner(perm[:nc], bounds, offsets, inverses, coarse,
                                 factor=1.0 / operator.scale)


def _real_apply(apply, x):
    """apply (a real linear map of (n, j) arrays) to x; a complex x (lossy media) goes as its
    real and imaginary parts side by side, in one product."""
    if np.iscomplexobj(x):
        k = x.shape[1]
        both = apply(np.ascontiguousarray(np.hstack([x.real, x.imag])))
        return both[:, :k] + 1j * both[:, k:]
    return apply(np.ascontiguousarray(x))


def cache_settings(plan):
    """What the operators of a DielectricPlan depend on besides the panels (operators.cache
    keys): neither the permittivities nor the loss, which enter only the rows' coefficients,
    so a cached entry serves other materials, potentials and frequencies too."""
    return {"dielectric_operators": True, "rules": plan.rules.as_dict(),
            "compression": plan.compression.as_dict(), "ground_z": plan.system.ground_z,
            "subdomain_size": plan.subdomain_size, "test_points": TEST_POINTS,
            "far_test_degree": FAR_TEST_DEGREE, "conductor_panels": len(plan.system.conductors)}


def _operators(plan, memory_limit, store, key):
    """(single-layer operator, normal-field operator or None, conductor Schwarz, from cache):
    from the cache entry `key` of `store` (an OperatorCache or None) if there is one, else
    assembled (memory_limit: bytes for both operators)."""
    names = (HMatrixOperator.ARRAY_NAMES + SchwarzPreconditioner.ARRAY_NAMES
             + (FieldOperator.ARRAY_NAMES if plan.field is not None else ()))
    hit = store.load(key, names) if store is not None else None
    if hit is not None:
        single = HMatrixOperator(hit, 1.0)
        field = FieldOperator.from_arrays(hit) if plan.field is not None else None
        return single, field, SchwarzPreconditioner.from_arrays(hit, 1.0 / single.scale), True
    rest = None if memory_limit is None else memory_limit - plan.field_bytes()
    single = HMatrixOperator.assemble(plan.single, 1.0, rest)
    rest = None if memory_limit is None else memory_limit - single.nbytes
    field = None if plan.field is None else FieldOperator(plan.field, rest)
    nc = len(plan.system.conductors)
    schwarz = _conductor_schwarz(single, plan.single.panels.areas, nc, plan.subdomain_size)
    return single, field, schwarz, False


def _store(store, key, single, field, schwarz):
    """Keep the operators in the cache; a cache that cannot be written costs a rebuild next
    time, never the run (a one-line warning on stderr). Returns what the solver record says."""
    arrays = {**single.arrays(), **schwarz.arrays(), **(field.arrays() if field else {})}
    try:
        store.save(key, arrays)
    except OSError as err:
        print(f"warning: operator cache {store.folder} cannot be written "
              f"({err.strerror or err}); the operators are rebuilt next time", file=sys.stderr)
        return "not stored"
    return "stored"


def solve_planned(plan, volts=None, tol=1e-7, max_iterations=1000, memory_limit=None,
                  store=None):
    """Assemble (or take from the operator cache `store`, an operators.cache.OperatorCache)
    and solve a DielectricPlan: a CapacitanceResult with timings in its solver record.
    memory_limit: bytes the operators may take together (ResourceError beyond)."""
    system = plan.system
    nc, lam = len(system.conductors), system.lam
    key = cache_key(plan.both, cache_settings(plan)) if store is not None else None
    t0 = clock()
    single, field, schwarz, cached = _operators(plan, memory_limit, store, key)
    assembly = seconds_since(t0)
    t0 = clock()
    scale = np.mean(single.diagonal()[:nc] / system.conductors.areas)
    weight = (scale * system.interfaces.areas)[:, None]
    coupling = (lam / (2 * math.pi))[:, None]

    def rows(x):
        y = np.empty_like(x)
        y[:nc] = _real_apply(single.matmat, x)[:nc]
        if field is not None:
            y[nc:] = weight * (x[nc:] - coupling * _real_apply(field.matmat, x))
        return y

    def precondition(r):
        return np.concatenate([_real_apply(lambda v: schwarz(v[:nc]), r), r[nc:] / weight])

    rhs = system_rhs(system)
    with threadpool_limits(limits=1, user_api="blas"):
        total, report = gmres_columns(rows, precondition,
                                      rhs.astype(complex) if system.lossy else rhs, tol,
                                      RESTART, max_iterations)
    residual = float(np.max(np.linalg.norm(rows(total) - rhs, axis=0)
                            / np.linalg.norm(rhs, axis=0)))
    n = system.n_panels
    solve = seconds_since(t0)
    field_bytes = 0 if field is None else field.nbytes
    result = system_result(system, plan.both, total, volts, {
        "backend": "compressed", "solver": "gmres-schwarz (dielectric interfaces)",
        "iterations": report.iterations, "relative_residual": residual, "tolerance": tol,
        "converged": residual <= tol, "pair_rules": plan.rules.as_dict(),
        "compression": plan.compression.as_dict(), "subdomain_size": plan.subdomain_size,
        "single_layer_MiB": single.nbytes / 2**20, "normal_field_MiB": field_bytes / 2**20,
        "compression_ratio": (single.nbytes + field_bytes) / (8.0 * n * n),
        "preconditioner_MiB": schwarz.nbytes / 2**20,
        "memory_estimate_MiB": (plan.operator_bytes() + plan.work_bytes(rhs.shape[1])) / 2**20})
    result.timings_s.update({"assembly": assembly, "solve": solve})
    result.solver["cache"] = ("off" if store is None else "hit" if cached
                              else _store(store, key, single, field, schwarz))
    if store is not None:
        result.solver["cache_file"] = str(store.path(key))
    return result
