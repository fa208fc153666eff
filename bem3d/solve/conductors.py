"""From panels (or mesh files) to a CapacitanceResult: assemble, solve, reduce."""

import sys
import time

import numpy as np
from threadpoolctl import threadpool_limits

from bem3d.operators.cache import OperatorCache, cache_key
from bem3d.base.errors import ModelError, ResourceError
from bem3d.operators.rules import PairRules
from bem3d.operators.dense import DenseOperator, dense_bytes
from bem3d.operators.hmatrix import Compression, HMatrixOperator, HMatrixPlan
from bem3d.base.resources import available_memory, peak_memory
from bem3d.results import CapacitanceResult, potential_vector, reduce_floating
from bem3d.solve.schwarz import SchwarzPreconditioner
from bem3d.solve.krylov import solve_cg, solve_direct

#: Above this many panels the dense backend solves by CG instead of Cholesky.
DIRECT_LIMIT = 4000
#: Above this many panels backend 'auto' takes the compressed operator (it is faster there).
COMPRESSED_FROM = 6000
#: Share of the available memory a run may plan to use.
MEMORY_FRACTION = 0.6
#: Most panels in a subdomain of the two-level Schwarz preconditioner.
SUBDOMAIN_SIZE = 128
#: CG gives up after this many steps (the result then says it did not converge).
MAX_ITERATIONS = 1000
BACKENDS = ("auto", "dense", "compressed")


def _log(progress, message):
    if progress:
        print(message, file=sys.stderr, flush=True)


def plan_memory(n_panels, solver):
    """Bytes the dense backend will need: the matrix, plus its Cholesky factor for 'direct'."""
    return dense_bytes(n_panels) * (2 if solver == "direct" else 1)


def _largest(values):
    finite = values[np.isfinite(values)]
    return float(finite.max()) if finite.size else None


def _gib(n_bytes):
    return f"{n_bytes / 2**30:.2f} GiB" if n_bytes >= 2**30 else f"{n_bytes / 2**20:.0f} MiB"


def choose_backend(n_panels, backend, solver, available, dense_need=None):
    """(backend, solver) for a run of n_panels with `available` bytes of memory.

    backend 'auto' takes the compressed backend above COMPRESSED_FROM panels, or whenever the
    dense matrix would need more than MEMORY_FRACTION of the available memory (dense_need
    bytes if given, else plan_memory's). solver 'auto' is Cholesky up to DIRECT_LIMIT panels
    on the dense backend, else CG."""
    if backend not in BACKENDS:
        raise ModelError(f"unknown backend '{backend}' (use {', '.join(BACKENDS)})")
    if solver not in ("auto", "direct", "cg"):
        raise ModelError(f"unknown solver '{solver}' (use auto, direct or cg)")
    dense_solver = solver if solver != "auto" else (
        "direct" if n_panels <= DIRECT_LIMIT else "cg")
    if backend == "auto":
        if dense_need is None:
            dense_need = plan_memory(n_panels, dense_solver)
        dense_fits = dense_need <= MEMORY_FRACTION * available
        backend = "dense" if n_panels <= COMPRESSED_FROM and dense_fits else "compressed"
    if backend == "dense":
        return backend, dense_solver
    if solver == "direct":
        raise ModelError("the direct solver needs the dense backend (--backend dense); "
                         "the compressed backend solves by conjugate gradients")
    return backend, "cg"


def check_ground_plane(panels, ground_z):
    """Every conductor must lie wholly above the grounded plane z = ground_z (m)."""
    low = panels.names_reaching(ground_z)
    if low:
        raise ModelError(f"--ground-plane z = {ground_z:g} m: conductor(s) {', '.join(low)} "
                         "touch, cross or lie below the plane; all must lie above it")


def solve_panels(panels, volts=None, eps_r=1.0, rules=PairRules(), solver="auto", tol=1e-7,
                 progress=False, ground_z=None, floating=(), dielectrics=(), *, backend="auto",
                 compression=None, cache=False, cache_dir=None):
    """Capacitance of the conductors in `panels` (metres) in a medium of relative permittivity eps_r.

    volts: {conductor name: V}; conductors not named are at 0 V. solver: 'direct' (Cholesky),
    'cg' (preconditioned conjugate gradients to relative residual tol) or 'auto' (direct up to
    DIRECT_LIMIT panels). The result's solver record gives CG's estimate of the relative error
    it left in the capacitances (solver.capacitance_error_estimate).
    backend: 'dense', 'compressed' (hierarchical matrix) or 'auto' (choose_backend).
    compression: operators.hmatrix.Compression (block tolerance etc.) for the compressed
    backend; its tolerance bounds each far block's relative error, which moves the
    capacitances by less than that (tools/bench_scale.py measures it against dense).
    cache: keep the compressed operator, its preconditioner and solution in cache_dir (default
    cache.default_folder()) and reuse them when the same panels and settings come again.
    ground_z: height (m) of an infinite grounded plane (method of images), or None.
    floating: names of conductors with zero net charge and unknown potential.
    dielectrics: dielectric.DielectricBody list; eps_r is then the background around them."""
    volts = dict(volts or {})
    potentials = potential_vector(panels.names, volts, floating)
    if ground_z is not None:
        check_ground_plane(panels, ground_z)
    if dielectrics:
        result = _solve_dielectric(panels, volts, eps_r, rules, tol, ground_z, dielectrics,
                                   backend, compression, progress)
        result.solver.update({"floating": list(floating),
                              "dielectrics": {b.name: b.eps_r for b in dielectrics}})
        return reduce_floating(result, floating) if floating else result
    have = available_memory()
    backend, solver = choose_backend(len(panels), backend, solver, have)
    rhs = panels.excitation()
    if backend == "dense":
        report, settings, timings = _solve_dense(panels, rhs, eps_r, rules, solver, tol,
                                                 ground_z, have, progress)
    else:
        compression = compression or Compression()
        report, settings, timings = _solve_compressed(panels, rhs, eps_r, rules, tol,
                                                      compression, ground_z, have, progress,
                                                      cache, cache_dir)
    maxwell = rhs.T @ report.charges
    settings.update({"backend": backend, "solver": report.method,
                     "iterations": report.iterations,
                     "relative_residual": report.relative_residual, "tolerance": tol,
                     "capacitance_error_estimate": _largest(report.capacitance_error),
                     "converged": report.converged, "relative_permittivity": eps_r,
                     "pair_rules": rules.as_dict(), "ground_plane_z_m": ground_z,
                     "floating": list(floating)})
    if not report.converged:
        _log(progress, f"warning: CG stopped after {report.iterations} iterations at relative "
                       f"residual {report.relative_residual:.1e} (asked for {tol:.1e})")
    result = CapacitanceResult(names=panels.names, maxwell=0.5 * (maxwell + maxwell.T),
                               sigma=report.charges, potentials=potentials,
                               n_panels=len(panels), solver=settings, timings_s=timings,
                               asymmetry=float(np.max(np.abs(maxwell - maxwell.T))
                                               / np.max(np.abs(np.diag(maxwell)))))
    return reduce_floating(result, floating) if floating else result


def _check_memory(what, need, purpose, have, advice):
    """ResourceError (one line) when `need` bytes exceed MEMORY_FRACTION of `have`."""
    if need > MEMORY_FRACTION * have:
        raise ResourceError(f"{what} need {_gib(need)} for {purpose}, more than "
                            f"{MEMORY_FRACTION:.0%} of the {_gib(have)} available; {advice}")


def _solve_dense(panels, rhs, eps_r, rules, solver, tol, ground_z, have, progress):
    need = plan_memory(len(panels), solver)
    _check_memory(f"{len(panels)} panels", need, "the dense matrix", have,
                  "use --backend compressed or coarsen the mesh")
    timings = {}
    _log(progress, f"assembling {len(panels)} panels, dense backend: {_gib(need)} of "
                   f"{_gib(have)} available ...")
    t0 = time.perf_counter()
    operator = DenseOperator(panels, eps_r=eps_r, rules=rules, ground_z=ground_z)
    timings["assembly"] = time.perf_counter() - t0
    _log(progress, f"solving ({solver}) ...")
    t0 = time.perf_counter()
    if solver == "direct":
        report = solve_direct(operator.matrix, rhs)
    else:
        # one BLAS thread: threaded products and inverses split their sums by the thread
        # count, which would move the result by ~1e-12 between machines
        with threadpool_limits(limits=1, user_api="blas"):
            pre = SchwarzPreconditioner.from_operator(operator, panels, SUBDOMAIN_SIZE)
            report = solve_cg(operator, rhs, tol=tol, max_iterations=MAX_ITERATIONS,
                              preconditioner=pre)
    timings["solve"] = time.perf_counter() - t0
    return report, {"memory_estimate_MiB": need / 2**20}, timings


def _solve_compressed(panels, rhs, eps_r, rules, tol, compression, ground_z, have, progress,
                      cache, cache_dir):
    timings = {}
    settings = {"compression": compression.as_dict(), "subdomain_size": SUBDOMAIN_SIZE}
    store = OperatorCache(cache_dir) if cache else None
    key = cache_key(panels, {"rules": rules.as_dict(), "compression": compression.as_dict(),
                             "ground_z": ground_z, "subdomain_size": SUBDOMAIN_SIZE})
    names = HMatrixOperator.ARRAY_NAMES + SchwarzPreconditioner.ARRAY_NAMES + ("solution",)
    t0 = time.perf_counter()
    hit = store.load(key, names) if store else None
    if hit is not None:
        _log(progress, f"compressed operator for {len(panels)} panels from the cache "
                       f"({store.path(key)})")
        operator = HMatrixOperator(hit, eps_r)
        pre = SchwarzPreconditioner.from_arrays(hit, 1.0 / operator.scale)
        x0 = hit["solution"] / operator.scale
        timings.update({"assembly": time.perf_counter() - t0, "preconditioner": 0.0})
        settings["memory_estimate_MiB"] = (operator.nbytes + pre.nbytes) / 2**20
    else:
        plan = HMatrixPlan(panels, rules, compression, ground_z)
        need = plan.operator_bytes() + plan.work_bytes(rhs.shape[1], SUBDOMAIN_SIZE)
        settings["memory_estimate_MiB"] = need / 2**20
        _log(progress, f"assembling {len(panels)} panels, compressed backend (tolerance "
                       f"{compression.tolerance:.0e}): operator ~{_gib(plan.operator_bytes())} "
                       f"(dense leaves {_gib(plan.dense_bytes)}, low-rank blocks "
                       f"~{_gib(plan.lowrank_bytes)} estimated), ~{_gib(need)} in all, "
                       f"of {_gib(have)} available ...")
        if need > MEMORY_FRACTION * have:
            raise ResourceError(
                f"{len(panels)} panels need ~{_gib(need)} with the compressed backend, more "
                f"than {MEMORY_FRACTION:.0%} of the {_gib(have)} available; coarsen the mesh "
                "or loosen the compression tolerance")
        operator = HMatrixOperator.assemble(plan, eps_r,
                                            MEMORY_FRACTION * have - plan.work_bytes(
                                                rhs.shape[1], SUBDOMAIN_SIZE))
        del plan                                  # its kernel arguments are no longer needed
        timings["assembly"] = time.perf_counter() - t0
        t0 = time.perf_counter()
        pre = SchwarzPreconditioner.from_operator(operator, panels, SUBDOMAIN_SIZE)
        timings["preconditioner"] = time.perf_counter() - t0
        x0 = None
    settings.update({"compression_ratio": operator.compression_ratio,
                     "operator_MiB": operator.nbytes / 2**20,
                     "preconditioner_MiB": pre.nbytes / 2**20,
                     "cache": ("off" if store is None
                               else "hit" if hit is not None else "stored")})
    _log(progress, f"operator {operator.nbytes / 2**20:.0f} MiB "
                   f"({operator.compression_ratio:.2%} of dense); solving (cg) ...")
    t0 = time.perf_counter()
    # the threads are Numba's; BLAS threads on top (coarse solves) only contend with them
    with threadpool_limits(limits=1, user_api="blas"):
        report = solve_cg(operator, rhs, tol=tol, max_iterations=MAX_ITERATIONS,
                          preconditioner=pre, x0=x0)
    timings["solve"] = time.perf_counter() - t0
    if store is not None and hit is None:
        t0 = time.perf_counter()
        path = store.save(key, {**operator.arrays(), **pre.arrays(),
                                "solution": report.charges * operator.scale})
        timings["cache_write"] = time.perf_counter() - t0
        _log(progress, f"cached the operator in {path}")
    if store is not None:
        settings["cache_file"] = str(store.path(key))
    return report, settings, timings


def _solve_dielectric(panels, volts, eps_r, rules, tol, ground_z, dielectrics, backend,
                      compression, progress):
    from bem3d.solve.dielectric import plan_dielectrics, solve_system

    system = plan_dielectrics(panels, dielectrics, eps_r, ground_z)
    have = available_memory()
    what = f"{len(panels)} conductor and {len(system.interfaces)} interface panels"
    backend, _ = choose_backend(system.n_panels, backend, "auto", have,
                                dense_need=system.nbytes)
    if backend == "dense":
        _check_memory(what, system.nbytes, "the dense dielectric system", have,
                      "use --backend compressed or coarsen the meshes")
        _log(progress, f"solving {len(panels)} conductor panels with "
                       f"{len(dielectrics)} dielectric bodies (dense LU): "
                       f"{_gib(system.nbytes)} of {_gib(have)} available ...")
        t0 = time.perf_counter()
        result = solve_system(system, volts, rules)
        result.timings_s.update({"assembly": 0.0, "solve": time.perf_counter() - t0})
        return result
    from bem3d.solve.dielectric_compressed import DielectricPlan, solve_planned

    plan = DielectricPlan(system, rules, compression or Compression(), SUBDOMAIN_SIZE)
    work = plan.work_bytes(panels.n_conductors)
    _check_memory(what, plan.operator_bytes() + work, "the compressed dielectric system", have,
                  "coarsen the meshes or loosen the compression tolerance")
    _log(progress, f"solving {len(panels)} conductor panels with {len(dielectrics)} dielectric "
                   f"bodies (compressed, gmres): ~{_gib(plan.operator_bytes() + work)} of "
                   f"{_gib(have)} available ...")
    result = solve_planned(plan, volts, tol, MAX_ITERATIONS, MEMORY_FRACTION * have - work)
    if not result.solver["converged"]:
        _log(progress, f"warning: GMRES stopped after {result.solver['iterations']} iterations "
                       f"at relative residual {result.solver['relative_residual']:.1e} (asked "
                       f"for {tol:.1e})")
    return result


def read_dielectrics(model):
    """The model's dielectric bodies (one closed mesh file each) in metres."""
    from bem3d.solve.dielectric import DielectricBody
    from bem3d.mesh_io.read import read_conductors

    bodies = []
    for path, eps in model.dielectrics:
        panels, _ = read_conductors([path], units=model.length_unit)
        whole = type(panels)(panels.vertices, np.zeros(len(panels), int), (panels.names[0],))
        bodies.append(DielectricBody(str(path), eps, whole))
    return bodies


def extract(model, solver="auto", tol=1e-7, rules=PairRules(), progress=False, *,
            backend="auto", compression=None, cache=True, cache_dir=None):
    """Read the model's meshes and solve: returns (panels, CapacitanceResult, warnings).

    backend, compression, cache, cache_dir: as in solve_panels (the cache is on here)."""
    from bem3d.mesh_io.read import read_conductors

    panels, warnings = read_conductors(model.meshes, units=model.length_unit)
    bodies = read_dielectrics(model)
    result = solve_panels(panels, model.volts, model.relative_permittivity, rules, solver, tol,
                          progress, ground_z=model.ground_z_m, floating=model.floating,
                          dielectrics=bodies, backend=backend, compression=compression,
                          cache=cache, cache_dir=cache_dir)
    result.solver["peak_memory_MiB"] = peak_memory() / 2**20
    return panels, result, warnings
