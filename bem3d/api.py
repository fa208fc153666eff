"""The public Python API: read, extract, field (and sweep, converge). Nothing here prints on
stdout or parses command lines; lengths are in the model's unit going in and coming out."""

import math
import sys
import time
from dataclasses import dataclass
from pathlib import Path

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.errors import ModelError, option
from bem3d.base.files import check_output_folder
from bem3d.base.resources import available_memory, check_panel_count, peak_memory
from bem3d.export.convergence import CONVERGENCE_FILES, write_convergence
from bem3d.export.outputs import output_names
from bem3d.geometry.panels import Panels
from bem3d.geometry.quality import mesh_summary
from bem3d.geometry.refine import CREASE_DEGREES
from bem3d.mesh_io.bodies import read_bodies
from bem3d.mesh_io.read import read_conductors
from bem3d.model import Model, build_model
from bem3d.operators.cache import size_cap
from bem3d.operators.hmatrix import Compression
from bem3d.post.convergence import converge_model
from bem3d.post.field_map import compute_field_map, field_request
from bem3d.post.sweep.run import SweepRequest, run_sweep
from bem3d.post.sweep.syntax import parse_entry, parse_move
from bem3d.result import FieldResult, Result
from bem3d.solve.backend import choose_backend
from bem3d.solve.conductors import solve_panels
from bem3d.solve.estimate import describe_estimate, estimate_seconds


@dataclass(frozen=True)
class Geometry:
    """Meshes as read: conductor names, panels (corners in `units`), reader warnings, and the
    check-mesh report (SI quantities, its problems' lengths in `units`)."""

    names: tuple
    panels: Panels
    units: str
    warnings: list
    report: dict


def read(inputs, *, units="m", check=True):
    """Read mesh files into conductors without solving.

    inputs: a path or a list of paths; units: their length unit. check=False skips the
    geometry checks (contacts, orientation, quality) for a quick look at a broken mesh; the
    report still lists the quality problems it finds."""
    paths = [inputs] if isinstance(inputs, (str, Path)) else list(inputs)
    panels, warnings = read_conductors(paths, units=units, check=check)
    report = mesh_summary(panels, source=[str(p) for p in paths] if len(paths) > 1
                          else str(paths[0]), unit=units)
    report["length_unit"] = units
    report["problems"] = warnings + report["problems"]
    return Geometry(panels.names, panels.transformed(scale=1.0 / LENGTH_UNITS[units]), units,
                    warnings, report)


def solve_settings(backend="auto", solver="auto", tol=1e-7, block_tol=1e-5, cache=True,
                   cache_dir=None, cache_max=None):
    """Checked solver settings as keyword arguments of solve.conductors.solve_panels."""
    for name, value in (("tol", tol), ("block_tol", block_tol)):
        if not 0 < value < 1:
            raise ModelError(f"{option(name)} must lie between 0 and 1, got {value:g}")
    return {"backend": backend, "solver": solver, "tol": tol,
            "compression": Compression(tolerance=block_tol), "cache": cache,
            "cache_dir": cache_dir, "cache_max_bytes": size_cap(cache_max) if cache else None}


def model_of(inputs, **settings):
    """A Model as it stands (inputs is one), or built from mesh paths or a .toml model file
    with the given settings on top (see model.build_model)."""
    if isinstance(inputs, Model):
        given = {k: v for k, v in settings.items() if v not in (None, (), [], {})}
        if given:
            raise ModelError(f"settings {', '.join(sorted(given))} given with a Model; set them "
                             "on the Model instead")
        return inputs
    return build_model(inputs, **settings)


def _count_panels(model, max_panels, progress):
    """Panels of the model's conductors and bodies, refused above max_panels before anything
    is assembled; None when neither the limit nor a time estimate needs the count."""
    if max_panels is None and not progress:
        return None
    if max_panels is not None and max_panels < 1:
        raise ModelError(f"{option('max_panels')} must be at least 1, got {max_panels}")
    # a light read (no geometry checks): the solve reads and checks the meshes itself
    groups = [model.meshes] + [[path] for path, *_ in model.dielectrics]
    n = sum(len(read_conductors(paths, units=model.length_unit, check=False)[0])
            for paths in groups)
    check_panel_count(n, max_panels, ", ".join(str(p) for group in groups for p in group))
    return n


def _announce(n_panels, settings, n_points=0, excitations=1):
    """Print on stderr the time estimate of a run expected to be long, before it starts."""
    if n_panels is None:
        return
    backend, solver = choose_backend(n_panels, settings["backend"], settings["solver"],
                                     available_memory())
    line = describe_estimate(estimate_seconds(n_panels, solver, n_points, excitations,
                                              backend=backend))
    if line:
        print(line, file=sys.stderr, flush=True)


def _solve(model, settings, panels, progress, start):
    solved = solve_panels(panels, model.volts, progress=progress, ground_z=model.ground_z_m,
                          floating=model.floating, reference=model.reference,
                          dielectrics=read_bodies(model.dielectrics, model.length_unit),
                          **model.medium, **settings)
    solved.solver["peak_memory_MiB"] = peak_memory() / 2**20
    solved.timings_s["total"] = time.perf_counter() - start
    return solved


def extract(inputs, *, units=None, volts=None, eps_r=None, ground_plane=None, floating=(),
            dielectrics=(), loss_tangent=None, frequency=None, reference=None, backend="auto",
            solver="auto", tol=1e-7, block_tol=1e-5, cache=True, cache_dir=None, cache_max=None,
            max_panels=None, out=None, force=False, progress=False, report=False,
            sensitivity=False):
    """Solve for the capacitance matrices of the conductors in `inputs`: a Result.

    inputs: mesh paths (one conductor per file, or groups within one file), one .toml model
    file (its settings are the defaults here), or a Model. units: the meshes' length unit
    (default m); every length given or returned is in it. volts: {conductor: V}, others at
    0 V. eps_r: background relative permittivity. ground_plane: z of an infinite grounded
    plane. floating: conductors of zero net charge. dielectrics: {mesh path: eps_r or (eps_r,
    loss tangent)} of closed bodies. loss_tangent: the background's; frequency: Hz at which the
    conductance matrix of lossy media is given (default 1 MHz, with a warning). reference: the
    conductor taken as the ground node: the others' matrices relative to it, with the far
    field (and a ground plane) lumped into it (results.reduce_reference). backend: 'auto', 'dense' or 'compressed'; solver: 'auto', 'direct' or 'cg'; tol:
    the CG relative residual; block_tol: the compressed backend's block accuracy; cache,
    cache_dir: the operator cache; cache_max: its size cap in GB (default
    $BEM3D_CACHE_MAX_GB, else 4). max_panels: refuse a larger model before any assembly.
    out: also write the result files into this folder (refused before solving if it holds an
    earlier run's files, unless force). progress: report progress on stderr. report: with
    out, also write report.html (one self-contained page for a design review). sensitivity:
    also write the sensitivities dC/dx into result.json (Result.sensitivity computes them on
    first use either way; they cost a field of every panel on every panel)."""
    start = time.perf_counter()
    model = model_of(inputs, units=units, volts=volts, eps_r=eps_r, ground_plane=ground_plane,
                     floating=floating, dielectrics=dielectrics, loss_tangent=loss_tangent,
                     frequency=frequency, reference=reference)
    settings = solve_settings(backend, solver, tol, block_tol, cache, cache_dir, cache_max)
    if out is not None:
        check_output_folder(out, model.files(), output_names(model), force)
    _announce(_count_panels(model, max_panels, progress), settings)
    panels, warnings = read_conductors(model.meshes, units=model.length_unit)
    result = Result(_solve(model, settings, panels, progress, start), panels, model,
                    warnings + model.notes, sensitivity)
    if out is not None:
        result.save(out, force, report)
    return result


def field(inputs, *, box=None, margin=0.5, spacing=None, points=41, slices=(), at=None,
          unit_fields=False, png=False, units=None, volts=None, eps_r=None, ground_plane=None,
          floating=(), dielectrics=(), loss_tangent=None, frequency=None, reference=None,
          backend="auto", solver="auto", tol=1e-7, block_tol=1e-5, cache=True, cache_dir=None,
          cache_max=None, max_panels=None, out=None, force=False, progress=False, report=False,
          sensitivity=False):
    """Solve as extract does, then evaluate the potential, field and energy density: a
    FieldResult with the energy balance, peak fields, forces and the evaluated arrays.

    Lengths in the model's unit: box (x0, y0, z0, x1, y1, z1) (default: the model's box
    widened by margin times its largest size), spacing or points (per axis: N or
    (NX, NY, NZ)), slices ('z=0.25' or ('z', 0.25)), at (a CSV file of x, y, z or an (m, 3)
    array). unit_fields: also each conductor's field at 1 V. png: pictures with the files.
    report: with out, also write report.html, the pictures in it (report implies png).
    sensitivity: as in extract.
    Other settings as in extract."""
    png = png or report
    start = time.perf_counter()
    model = model_of(inputs, units=units, volts=volts, eps_r=eps_r, ground_plane=ground_plane,
                     floating=floating, dielectrics=dielectrics, loss_tangent=loss_tangent,
                     frequency=frequency, reference=reference)
    settings = solve_settings(backend, solver, tol, block_tol, cache, cache_dir, cache_max)
    request = field_request(LENGTH_UNITS[model.length_unit], box=box, margin=margin,
                            spacing=spacing, points=points, slices=slices, at=at,
                            unit_fields=unit_fields, png=png)
    if out is not None:
        reads = model.files() + (
            [request.point_file] if request.point_file else [])
        check_output_folder(out, reads, output_names(model), force)
    n_panels = _count_panels(model, max_panels, progress)
    panels, warnings = read_conductors(model.meshes, units=model.length_unit)
    plan = request.plan(panels, model.ground_z_m)    # a bad request fails here, before the solve
    grid, slice_grids, listed = plan
    n_points = (math.prod(grid.shape) + sum(math.prod(g.shape) for _, _, g in slice_grids)
                + (0 if listed is None else len(listed)))
    _announce(n_panels, settings, n_points, 1 + (panels.n_conductors if unit_fields else 0))
    solved = _solve(model, settings, panels, progress, start)
    field_map = compute_field_map(panels, solved, request, plan, progress)
    result = FieldResult(solved, panels, model, warnings + model.notes, field_map, png,
                         request.point_file, sensitivity)
    if out is not None:
        result.save(out, force, report)
    return result



def sweep(inputs, *, moves=(), each=False, entries=(), units=None, volts=None, eps_r=None,
          ground_plane=None, floating=(), dielectrics=(), loss_tangent=None, frequency=None,
          reference=None, solver="auto", tol=1e-7, workers=None, threads=None, scheduler=None, cache=None, out="bem3d_sweep",
          on_event=None):
    """Run many extractions, resumable, into the folder `out`: a post.sweep.run.SweepOutcome
    (records, summary rows, counts).

    moves: variations in the command line's syntax, applied in the order given, every
    combination a case, e.g. [("translate", "top:z=0.1:2:20"), ("rotate",
    "lid:x@0,0,1.5=-10:10:5"), ("scale", "pad_a,pad_b=0.8,1,1.2")] (lengths in the model's
    unit). each=True instead runs every input (mesh or .toml file, wildcards allowed) as its
    own case. entries: 'mutual:A:B' or 'maxwell:A:B' for the summary. workers, threads,
    scheduler: where the cases run (local processes, or a Dask scheduler address).
    on_event(dict) receives the progress events."""
    def model(paths):
        return build_model(paths, units=units, volts=volts, eps_r=eps_r,
                           ground_plane=ground_plane, floating=floating,
                           dielectrics=dielectrics, loss_tangent=loss_tangent,
                           frequency=frequency, reference=reference, out=".")

    inputs = [inputs] if isinstance(inputs, (str, Path)) else list(inputs)
    entries = [entries] if isinstance(entries, str) else list(entries)
    request = SweepRequest(model=model, inputs=[str(p) for p in inputs],
                           moves=[parse_move(kind, text) for kind, text in moves], each=each,
                           entries=[parse_entry(e) for e in entries], solver=solver, tol=tol,
                           workers=workers, threads=threads, scheduler=scheduler,
                           cache=cache, out=Path(out))
    return run_sweep(request, on_event=on_event)


def converge(inputs, *, refinements=2, flat=False, crease_angle=CREASE_DEGREES, units=None,
             volts=None, eps_r=None, ground_plane=None, floating=(), dielectrics=(),
             loss_tangent=None, frequency=None, reference=None, solver="auto", tol=1e-7,
             out=None, progress=False):
    """Solve the model on its mesh and on one or two midpoint subdivisions: a
    post.convergence.Convergence (each entry on each mesh, Richardson values, error
    estimates, observed orders; .table() for text). Edges whose panels meet at less than
    crease_angle degrees get curved midpoints unless flat; .warnings are the base mesh's. out:
    also write convergence.json/.csv and each mesh's files there."""
    if not 0.0 < crease_angle < 180.0:
        raise ModelError(f"{option('crease_angle')} must be between 0 and 180 degrees, got "
                         f"{crease_angle:g}")
    if refinements not in (1, 2):
        raise ModelError(f"{option('refinements')} must be 1 or 2, got {refinements}")
    model = model_of(inputs, units=units, volts=volts, eps_r=eps_r, ground_plane=ground_plane,
                     floating=floating, dielectrics=dielectrics, loss_tangent=loss_tangent,
                     frequency=frequency, reference=reference)
    if out is not None:           # the study's files are replaced; an input never is
        check_output_folder(out, model.files(), CONVERGENCE_FILES, force=True)
    conv = converge_model(model, refinements, not flat, crease_angle, solver, tol,
                          progress=progress)
    if out is not None:
        write_convergence(conv, Path(out), model, conv.warnings)
    return conv
