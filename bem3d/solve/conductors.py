"""The one path from panels to a CapacitanceResult: choose the backend, assemble, solve, reduce."""

import math
import sys

import numpy as np
from threadpoolctl import threadpool_limits

from bem3d.base.errors import ModelError, option
from bem3d.base.resources import MEMORY_FRACTION, available_memory, format_bytes, require_memory
from bem3d.geometry.bodies import complex_permittivity
from bem3d.operators.cache import OperatorCache, cache_key
from bem3d.operators.dense import DenseOperator
from bem3d.operators.hmatrix import Compression, HMatrixOperator, HMatrixPlan
from bem3d.operators.rules import PairRules
from bem3d.results import CapacitanceResult, potential_vector, reduce_terminals
from bem3d.solve.backend import (
    MAX_ITERATIONS,
    SUBDOMAIN_SIZE,
    check_ground_plane,
    choose_backend,
    plan_memory,
)
from bem3d.solve.compiling import announce_compiling, clock, compile_seconds_since, seconds_since
from bem3d.solve.dielectric import plan_dielectrics, solve_system
from bem3d.solve.dielectric_compressed import DielectricPlan, solve_planned
from bem3d.solve.krylov import solve_cg, solve_direct
from bem3d.solve.schwarz import SchwarzPreconditioner


def _log(progress, message):
    if progress:
        print(message, file=sys.stderr, flush=True)


def _largest(values):
    finite = values[np.isfinite(values)]
    return float(finite.max()) if finite.size else None


def solve_panels(panels, volts=None, eps_r=1.0, rules=PairRules(), solver="auto", tol=1e-7,
                 progress=False, ground_z=None, floating=(), dielectrics=(), *, backend="auto",
                 compression=None, cache=False, cache_dir=None, cache_max_bytes=None,
                 loss_tangent=0.0, frequency=None, reference=None):
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
    cache.default_folder()) and reuse them when the same panels and settings come again (with
    dielectric bodies: both compressed operators and the preconditioner, whatever the
    permittivities, loss and potentials); cache_max_bytes: its size cap (default
    cache.size_cap()).
    ground_z: height (m) of an infinite grounded plane (method of images), or None.
    floating: names of conductors with zero net charge and unknown potential.
    dielectrics: dielectric.DielectricBody list; eps_r is then the background around them.
    loss_tangent: the background's; with it or lossy bodies, frequency (Hz) is needed and the
    result carries the conductance matrix G at that frequency (CapacitanceResult.loss).
    reference: the conductor taken as the ground node (results.reduce_reference), or None."""
    volts = dict(volts or {})
    potentials = potential_vector(panels.names, volts, floating, reference)
    if ground_z is not None:
        check_ground_plane(panels, ground_z)
    lossy = check_loss(loss_tangent, frequency, dielectrics)
    if dielectrics:
        background = complex_permittivity(eps_r, loss_tangent)
        mark = clock()
        with announce_compiling("dielectric", progress):
            store = OperatorCache(cache_dir, cache_max_bytes) if cache else None
            result = _solve_dielectric(panels, volts, background, rules, tol, ground_z,
                                       dielectrics, backend, compression, progress, store)
        result.timings_s["compile"] = compile_seconds_since(mark)
        result.solver.update({"floating": list(floating),
                              "dielectrics": {b.name: b.eps_r for b in dielectrics}})
        if lossy:
            result.frequency_Hz = frequency
            result.solver["loss_tangents"] = {"background": loss_tangent, **{
                b.name: b.loss_tangent for b in dielectrics}}
        return reduce_terminals(result, floating, reference)
    have = available_memory()
    backend, solver = choose_backend(len(panels), backend, solver, have)
    rhs = panels.excitation()
    mark = clock()
    with announce_compiling(backend, progress):
        if backend == "dense":
            report, settings, timings = _solve_dense(panels, rhs, eps_r, rules, solver, tol,
                                                     ground_z, have, progress)
        else:
            compression = compression or Compression()
            report, settings, timings = _solve_compressed(panels, rhs, eps_r, rules, tol,
                                                          compression, ground_z, have,
                                                          progress, cache, cache_dir,
                                                          cache_max_bytes)
    timings["compile"] = compile_seconds_since(mark)
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
    if lossy:       # one lossy medium everywhere: C* = (1 - j tan d) C
        result.loss, result.frequency_Hz = loss_tangent * result.maxwell, frequency
        result.solver["loss_tangents"] = {"background": loss_tangent}
    return reduce_terminals(result, floating, reference)


def check_loss(loss_tangent, frequency, dielectrics=()):
    """Is any medium lossy? Then a frequency (Hz, positive) is needed. ModelError for a loss
    tangent outside [0, 1) or a frequency that is not a positive number."""
    if not 0 <= loss_tangent < 1:
        raise ModelError(f"{option('loss_tangent')}: must be at least 0 and below 1, got "
                         f"{loss_tangent:g}")
    if frequency is not None and not (0 < frequency < math.inf):
        raise ModelError(f"{option('frequency')}: must be a positive number of Hz, got "
                         f"{frequency:g}")
    lossy = bool(loss_tangent) or any(b.loss_tangent for b in dielectrics)
    if lossy and frequency is None:
        raise ModelError(f"a loss tangent is given: {option('frequency')} (Hz) is needed for "
                         "the conductance")
    return lossy



def _solve_dense(panels, rhs, eps_r, rules, solver, tol, ground_z, have, progress):
    need = plan_memory(len(panels), solver)
    require_memory(need, f"{len(panels)} panels (the dense matrix)",
                   f"use {option('backend')}=compressed or coarsen the mesh", have)
    timings = {}
    _log(progress, f"assembling {len(panels)} panels, dense backend: {format_bytes(need)} of "
                   f"{format_bytes(have)} available ...")
    t0 = clock()
    operator = DenseOperator(panels, eps_r=eps_r, rules=rules, ground_z=ground_z)
    timings["assembly"] = seconds_since(t0)
    _log(progress, f"solving ({solver}) ...")
    t0 = clock()
    if solver == "direct":
        report = solve_direct(operator.matrix, rhs)
    else:
        # one BLAS thread: threaded products and inverses split their sums by the thread
        # count, which would move the result by ~1e-12 between machines
        with threadpool_limits(limits=1, user_api="blas"):
            pre = SchwarzPreconditioner.from_operator(operator, panels, SUBDOMAIN_SIZE)
            report = solve_cg(operator, rhs, tol=tol, max_iterations=MAX_ITERATIONS,
                              preconditioner=pre)
    timings["solve"] = seconds_since(t0)
    return report, {"memory_estimate_MiB": need / 2**20}, timings


def _solve_compressed(panels, rhs, eps_r, rules, tol, compression, ground_z, have, progress,
                      cache, cache_dir, cache_max_bytes):
    timings = {}
    settings = {"compression": compression.as_dict(), "subdomain_size": SUBDOMAIN_SIZE}
    store = OperatorCache(cache_dir, cache_max_bytes) if cache else None
    key = cache_key(panels, {"rules": rules.as_dict(), "compression": compression.as_dict(),
                             "ground_z": ground_z, "subdomain_size": SUBDOMAIN_SIZE})
    names = HMatrixOperator.ARRAY_NAMES + SchwarzPreconditioner.ARRAY_NAMES + ("solution",)
    t0 = clock()
    hit = store.load(key, names) if store else None
    if hit is not None:
        _log(progress, f"compressed operator for {len(panels)} panels from the cache "
                       f"({store.path(key)})")
        operator = HMatrixOperator(hit, eps_r)
        pre = SchwarzPreconditioner.from_arrays(hit, 1.0 / operator.scale)
        x0 = hit["solution"] / operator.scale
        timings.update({"assembly": seconds_since(t0), "preconditioner": 0.0})
        settings["memory_estimate_MiB"] = (operator.nbytes + pre.nbytes) / 2**20
    else:
        plan = HMatrixPlan(panels, rules, compression, ground_z)
        need = plan.operator_bytes() + plan.work_bytes(rhs.shape[1], SUBDOMAIN_SIZE)
        settings["memory_estimate_MiB"] = need / 2**20
        _log(progress, f"assembling {len(panels)} panels, compressed backend (tolerance "
                       f"{compression.tolerance:.0e}): operator ~{format_bytes(plan.operator_bytes())} "
                       f"(dense leaves {format_bytes(plan.dense_bytes)}, low-rank blocks "
                       f"~{format_bytes(plan.lowrank_bytes)} estimated), ~{format_bytes(need)} in all, "
                       f"of {format_bytes(have)} available ...")
        require_memory(need, f"{len(panels)} panels (the compressed backend)",
                       f"coarsen the mesh or loosen {option('block_tol')}", have)
        operator = HMatrixOperator.assemble(plan, eps_r,
                                            MEMORY_FRACTION * have - plan.work_bytes(
                                                rhs.shape[1], SUBDOMAIN_SIZE))
        del plan                                  # its kernel arguments are no longer needed
        timings["assembly"] = seconds_since(t0)
        t0 = clock()
        pre = SchwarzPreconditioner.from_operator(operator, panels, SUBDOMAIN_SIZE)
        timings["preconditioner"] = seconds_since(t0)
        x0 = None
    settings.update({"compression_ratio": operator.compression_ratio,
                     "operator_MiB": operator.nbytes / 2**20,
                     "preconditioner_MiB": pre.nbytes / 2**20,
                     "cache": ("off" if store is None
                               else "hit" if hit is not None else "stored")})
    _log(progress, f"operator {operator.nbytes / 2**20:.0f} MiB "
                   f"({operator.compression_ratio:.2%} of dense); solving (cg) ...")
    t0 = clock()
    # the threads are Numba's; BLAS threads on top (coarse solves) only contend with them
    with threadpool_limits(limits=1, user_api="blas"):
        report = solve_cg(operator, rhs, tol=tol, max_iterations=MAX_ITERATIONS,
                          preconditioner=pre, x0=x0)
    timings["solve"] = seconds_since(t0)
    if store is not None and hit is None:
        t0 = clock()
        try:
            path = store.save(key, {**operator.arrays(), **pre.arrays(),
                                    "solution": report.charges * operator.scale})
            _log(progress, f"cached the operator in {path}")
        except OSError as err:           # a full or read-only cache costs a rebuild, no more
            settings["cache"] = "not stored"
            print(f"warning: operator cache {store.folder} cannot be written "
                  f"({err.strerror or err}); the result is unaffected", file=sys.stderr)
        timings["cache_write"] = seconds_since(t0)
    if store is not None:
        settings["cache_file"] = str(store.path(key))
    return report, settings, timings


def _solve_dielectric(panels, volts, eps_r, rules, tol, ground_z, dielectrics, backend,
                      compression, progress, store=None):
    system = plan_dielectrics(panels, dielectrics, eps_r, ground_z)
    have = available_memory()
    what = f"{len(panels)} conductor and {len(system.interfaces)} interface panels"
    backend, _ = choose_backend(system.n_panels, backend, "auto", have,
                                dense_need=system.nbytes)
    if backend == "dense":
        require_memory(system.nbytes, f"{what} (the dense dielectric system)",
                       f"use {option('backend')}=compressed or coarsen the meshes", have)
        _log(progress, f"solving {len(panels)} conductor panels with "
                       f"{len(dielectrics)} dielectric bodies (dense LU): "
                       f"{format_bytes(system.nbytes)} of {format_bytes(have)} available ...")
        t0 = clock()
        result = solve_system(system, volts, rules)
        result.timings_s.update({"assembly": 0.0, "solve": seconds_since(t0)})
        return result
    plan = DielectricPlan(system, rules, compression or Compression(), SUBDOMAIN_SIZE)
    work = plan.work_bytes(panels.n_conductors)
    require_memory(plan.operator_bytes() + work, f"{what} (the compressed dielectric system)",
                   f"coarsen the meshes or loosen {option('block_tol')}", have)
    _log(progress, f"solving {len(panels)} conductor panels with {len(dielectrics)} dielectric "
                   f"bodies (compressed, gmres): ~{format_bytes(plan.operator_bytes() + work)} of "
                   f"{format_bytes(have)} available ...")
    result = solve_planned(plan, volts, tol, MAX_ITERATIONS, MEMORY_FRACTION * have - work,
                           store)
    if not result.solver["converged"]:
        _log(progress, f"warning: GMRES stopped after {result.solver['iterations']} iterations "
                       f"at relative residual {result.solver['relative_residual']:.1e} (asked "
                       f"for {tol:.1e})")
    return result
