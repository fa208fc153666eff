"""From panels (or mesh files) to a CapacitanceResult: assemble, solve, reduce."""

import math
import sys
import time

import numpy as np

from .errors import ModelError, ResourceError
from .operators import PairRules
from .operators.dense import DenseOperator, dense_bytes
from .resources import available_memory, peak_memory
from .results import CapacitanceResult, potential_vector, reduce_floating
from .solve import solve_cg, solve_direct

#: Above this many panels the dense backend solves by CG instead of Cholesky.
DIRECT_LIMIT = 4000
#: Share of the available memory a run may plan to use.
MEMORY_FRACTION = 0.6


def _log(progress, message):
    if progress:
        print(message, file=sys.stderr, flush=True)


def plan_memory(n_panels, solver):
    """Bytes the dense backend will need: the matrix, plus its Cholesky factor for 'direct'."""
    return dense_bytes(n_panels) * (2 if solver == "direct" else 1)


def check_ground_plane(panels, ground_z):
    """Every conductor must lie wholly above the grounded plane z = ground_z (m)."""
    low = [n for k, n in enumerate(panels.names)
           if panels.vertices[panels.owner == k][..., 2].min() <= ground_z]
    if low:
        raise ModelError(f"--ground-plane z = {ground_z:g} m: conductor(s) {', '.join(low)} "
                         "touch, cross or lie below the plane; all must lie above it")


def solve_panels(panels, volts=None, eps_r=1.0, rules=PairRules(), solver="auto", tol=1e-7,
                 progress=False, ground_z=None, floating=(), dielectrics=()):
    """Capacitance of the conductors in `panels` (metres) in a medium of relative permittivity eps_r.

    volts: {conductor name: V}; conductors not named are at 0 V. solver: 'direct' (Cholesky),
    'cg' (conjugate gradients to relative residual tol) or 'auto' (direct up to DIRECT_LIMIT).
    ground_z: height (m) of an infinite grounded plane (method of images), or None.
    floating: names of conductors with zero net charge and unknown potential.
    dielectrics: dielectric.DielectricBody list; eps_r is then the background around them."""
    volts = dict(volts or {})
    potentials = potential_vector(panels.names, volts, floating)
    if ground_z is not None:
        check_ground_plane(panels, ground_z)
    if dielectrics:
        if ground_z is not None:
            raise ModelError("dielectric bodies together with a ground plane are not supported "
                             "yet; mesh the ground as a conductor instead")
        from .dielectric import solve_with_dielectrics

        _log(progress, f"solving {len(panels)} conductor panels with "
                       f"{len(dielectrics)} dielectric bodies (dense LU) ...")
        t0 = time.perf_counter()
        result = solve_with_dielectrics(panels, dielectrics, eps_r, volts, rules)
        result.timings_s.update({"assembly": 0.0, "solve": time.perf_counter() - t0})
        result.solver.update({"ground_plane_z_m": None, "floating": list(floating),
                              "dielectrics": {b.name: b.eps_r for b in dielectrics}})
        return reduce_floating(result, floating) if floating else result
    if solver == "auto":
        solver = "direct" if len(panels) <= DIRECT_LIMIT else "cg"
    if solver not in ("direct", "cg"):
        raise ModelError(f"unknown solver '{solver}' (use auto, direct or cg)")
    need, have = plan_memory(len(panels), solver), available_memory()
    if need > MEMORY_FRACTION * have:
        raise ResourceError(
            f"{len(panels)} panels need {need / 2**30:.1f} GiB for the dense matrix, more than "
            f"{MEMORY_FRACTION:.0%} of the {have / 2**30:.1f} GiB available; coarsen the mesh")
    timings = {}
    _log(progress, f"assembling {len(panels)} panels ({need / 2**30:.2f} GiB) ...")
    t0 = time.perf_counter()
    operator = DenseOperator(panels, eps_r=eps_r, rules=rules, ground_z=ground_z)
    timings["assembly"] = time.perf_counter() - t0
    _log(progress, f"solving ({solver}) ...")
    t0 = time.perf_counter()
    rhs = panels.excitation()
    if solver == "direct":
        report = solve_direct(operator.matrix, rhs)
    else:
        report = solve_cg(operator, rhs, tol=tol)
    timings["solve"] = time.perf_counter() - t0
    maxwell = rhs.T @ report.charges
    settings = {"backend": "dense", "solver": report.method, "iterations": report.iterations,
                "relative_residual": report.relative_residual, "tolerance": tol,
                "relative_permittivity": eps_r, "pair_rules": rules.as_dict(),
                "ground_plane_z_m": ground_z, "floating": list(floating)}
    result = CapacitanceResult(names=panels.names, maxwell=0.5 * (maxwell + maxwell.T),
                               sigma=report.charges, potentials=potentials,
                               n_panels=len(panels), solver=settings, timings_s=timings,
                               asymmetry=float(np.max(np.abs(maxwell - maxwell.T))
                                               / np.max(np.abs(np.diag(maxwell)))))
    return reduce_floating(result, floating) if floating else result


def read_dielectrics(model):
    """The model's dielectric bodies (one closed mesh file each) in metres."""
    from .dielectric import DielectricBody
    from .meshio_io import read_conductors

    bodies = []
    for path, eps in model.dielectrics:
        panels, _ = read_conductors([path], units=model.length_unit)
        whole = type(panels)(panels.vertices, np.zeros(len(panels), int), (panels.names[0],))
        bodies.append(DielectricBody(str(path), eps, whole))
    return bodies


def extract(model, solver="auto", tol=1e-7, rules=PairRules(), progress=False):
    """Read the model's meshes and solve: returns (panels, CapacitanceResult, warnings)."""
    from .meshio_io import read_conductors

    panels, warnings = read_conductors(model.meshes, units=model.length_unit)
    bodies = read_dielectrics(model)
    result = solve_panels(panels, model.volts, model.relative_permittivity, rules, solver, tol,
                          progress, ground_z=model.ground_z_m, floating=model.floating,
                          dielectrics=bodies)
    result.solver["peak_memory_MiB"] = peak_memory() / 2**20
    return panels, result, warnings
