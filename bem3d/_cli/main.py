"""Command line: a thin shell over the Python API. Bad input ends in one line and exit code 2."""

import argparse
import json
import math
import sys
import time
from pathlib import Path

import numpy as np

from bem3d.base.constants import LENGTH_UNITS
from bem3d._cli.options import (add_model_options, add_run_guards, add_solver_options,
                                model_from_args, solver_options)
from bem3d.base.errors import Bem3dError, ModelError


class _Parser(argparse.ArgumentParser):
    """argparse with bem3d's one-line error and exit code 2 (the usage stays in --help)."""

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"bem3d: error: {self.prog}: {message}\n")


def _parser():
    parser = _Parser(
        prog="bem3d", description="Capacitance matrices and field energy of conductors "
                                  "from surface meshes (boundary-element method).")
    parser.add_argument("--debug", action="store_true", help="show tracebacks")
    sub = parser.add_subparsers(dest="command", required=True)

    p = sub.add_parser("extract", help="compute the capacitance matrices")
    add_model_options(p)
    add_run_guards(p)
    add_solver_options(p)
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")

    p = sub.add_parser("field", help="capacitance plus potential, field and energy density "
                                     "on a grid, slices and points")
    add_model_options(p)
    add_run_guards(p)
    add_solver_options(p)
    p.add_argument("--box", type=float, nargs=6, metavar=("XMIN", "YMIN", "ZMIN", "XMAX", "YMAX", "ZMAX"),
                   help="field box in the mesh unit (default: the model's box plus a margin)")
    p.add_argument("--margin", type=float, default=0.5,
                   help="automatic box: margin as a fraction of the model's largest size")
    res = p.add_mutually_exclusive_group()
    res.add_argument("--spacing", type=float, help="grid spacing in the mesh unit")
    res.add_argument("--points", type=int, nargs="+", metavar="N", default=[41],
                     help="grid points per axis: N or NX NY NZ (default 41)")
    p.add_argument("--slice", action="append", default=[], metavar="AXIS=VALUE",
                   help="a slice plane such as z=0.5 (mesh unit); repeatable")
    p.add_argument("--at", type=Path, metavar="CSV", help="CSV of x, y, z points (mesh unit)")
    p.add_argument("--unit-fields", action="store_true",
                   help="also write each conductor's field at 1 V (others 0 V) for superposition")
    p.add_argument("--png", action="store_true", help="render surface_charge.png and field_slice.png")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")

    p = sub.add_parser("demo", help="run the shipped sensor-head demo end to end")
    p.add_argument("folder", nargs="?", type=Path, default=Path("bem3d_demo"),
                   help="where to write the demo mesh and results (default: bem3d_demo)")
    p.add_argument("--force", action="store_true",
                   help="replace the results of an earlier demo in the folder")

    p = sub.add_parser("check-mesh", help="report panels, conductors and problems of meshes")
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="mesh files")
    p.add_argument("--units", default="m", help="length unit of the meshes (default m)")
    p.add_argument("--json", action="store_true", help="print the report as JSON")

    from bem3d.post import convergence as converge
    from bem3d.post import sweep
    sweep.add_sweep_parser(sub)
    converge.add_converge_parser(sub)
    return parser


def _inputs(model, *extra):
    """Every file a run reads: meshes, dielectric bodies, the model file, extra files."""
    files = [*model.meshes, *(path for path, _ in model.dielectrics), *extra]
    return files + ([Path(model.source)] if Path(model.source).is_file() else [])


def _count_panels(model, max_panels, quiet):
    """Panels of the model's conductors and dielectric bodies, refused above max_panels before
    anything is assembled; None when neither the limit nor a time estimate needs the count."""
    from bem3d.mesh_io.read import read_conductors
    from bem3d.base.resources import check_panel_count

    if max_panels is None and quiet:
        return None
    if max_panels is not None and max_panels < 1:
        raise ModelError(f"--max-panels must be at least 1, got {max_panels}")
    # a light read (no geometry checks): the solve reads and checks the meshes itself
    groups = [model.meshes] + [[path] for path, _ in model.dielectrics]
    n = sum(len(read_conductors(paths, units=model.length_unit, check=False)[0])
            for paths in groups)
    check_panel_count(n, max_panels, ", ".join(str(p) for group in groups for p in group))
    return n


def _announce(n_panels, options, quiet, n_points=0, excitations=1):
    """Print the time estimate of a run expected to be long, before it starts."""
    from bem3d.solve.conductors import choose_backend
    from bem3d.base.resources import available_memory
    from bem3d.solve.estimate import describe_estimate, estimate_seconds

    if quiet or n_panels is None:
        return
    backend, solver = choose_backend(n_panels, options.get("backend", "auto"),
                                     options.get("solver", "auto"), available_memory())
    line = describe_estimate(estimate_seconds(n_panels, solver, n_points, excitations,
                                              backend=backend))
    if line:
        print(line, file=sys.stderr, flush=True)


def _solver_line(solver):
    """One line on how the charges were found: backend, method, iterations, residual."""
    line = f"solver: {solver.get('backend', 'dense')} backend, {solver.get('solver')}"
    if solver.get("iterations"):
        line += (f", {solver['iterations']} iterations to relative residual "
                 f"{solver['relative_residual']:.1e}")
        if not solver.get("converged", True):
            line += f" (NOT converged to {solver['tolerance']:.0e})"
    if solver.get("cache") in ("hit", "stored"):
        line += f"; operator cache {solver['cache']}: {solver['cache_file']}"
    return line


def _run_extract(model, options, quiet=False, force=False, max_panels=None):
    from bem3d.export.records import CAUTION
    from bem3d.export.outputs import output_names, write_outputs
    from bem3d.solve.conductors import extract
    from bem3d.base.files import check_output_folder, staged_outputs

    inputs = _inputs(model)
    check_output_folder(model.output_folder, inputs, output_names(model), force)
    start = time.perf_counter()
    _announce(_count_panels(model, max_panels, quiet), options, quiet)
    panels, result, warnings = extract(model, progress=not quiet, **options)
    result.timings_s["total"] = time.perf_counter() - start
    with staged_outputs(model.output_folder, inputs, force) as stage:
        files = write_outputs(stage, panels, result, model, warnings)
    files = [model.output_folder / f.name for f in files]
    if not quiet:
        for w in warnings:
            print(f"warning: {w}", file=sys.stderr)
        print(result.table())
        print(_solver_line(result.solver))
        t = result.timings_s
        print(f"wall time {t['total']:.2f} s (assembly {t['assembly']:.2f} s, "
              f"solve {t['solve']:.2f} s); peak memory {result.solver['peak_memory_MiB']:.0f} MiB")
        print(f"caution: {CAUTION}")
        print(f"wrote {', '.join(f.name for f in files)} to {model.output_folder}")
    return files


def _field_request(args, model):
    from bem3d.base.constants import LENGTH_UNITS
    from bem3d.post.field_map import FieldRequest

    scale = LENGTH_UNITS[model.length_unit]
    slices = []
    for item in args.slice:
        axis, sep, value = item.partition("=")
        try:
            slices.append(("xyz".index(axis.strip().lower()), float(value) * scale))
        except ValueError:
            raise ModelError(f"--slice: expected x=, y= or z= and a number, got '{item}'") from None
        if not sep:
            raise ModelError(f"--slice: expected AXIS=VALUE, got '{item}'")
    if len(args.points) not in (1, 3):
        raise ModelError("--points takes one number or three (NX NY NZ)")
    box = None
    if args.box:
        box = (np.array(args.box[:3]) * scale, np.array(args.box[3:]) * scale)
    return FieldRequest(box=box, margin=args.margin, points=tuple(args.points),
                        spacing=None if args.spacing is None else args.spacing * scale,
                        slices=slices, point_file=args.at, point_scale=scale,
                        unit_fields=args.unit_fields, png=args.png)


def _run_field(model, request, options, quiet=False, force=False, max_panels=None):
    from dataclasses import replace

    from bem3d.export.outputs import output_names
    from bem3d.post.field_map import AIR_BREAKDOWN_V_PER_M, FIELD_CAUTION, map_fields
    from bem3d.mesh_io.read import read_conductors
    from bem3d.solve.conductors import read_dielectrics, solve_panels
    from bem3d.base.files import check_output_folder, staged_outputs
    from bem3d.base.units import format_quantity

    inputs = _inputs(model, *([request.point_file] if request.point_file else []))
    check_output_folder(model.output_folder, inputs, output_names(model), force)
    start = time.perf_counter()
    n_panels = _count_panels(model, max_panels, quiet)
    panels, warnings = read_conductors(model.meshes, units=model.length_unit)
    plan = request.plan(panels, model.ground_z_m)    # a bad request fails here, before the solve
    grid, slice_grids, listed = plan
    n_points = (math.prod(grid.shape) + sum(math.prod(g.shape) for _, _, g in slice_grids)
                + (0 if listed is None else len(listed)))
    _announce(n_panels, options, quiet, n_points,
              1 + (panels.n_conductors if request.unit_fields else 0))
    result = solve_panels(panels, model.volts, model.relative_permittivity, progress=not quiet,
                          ground_z=model.ground_z_m, floating=model.floating,
                          dielectrics=read_dielectrics(model), **options)
    result.timings_s["total"] = time.perf_counter() - start      # to the capacitance
    with staged_outputs(model.output_folder, inputs, force) as stage:
        record, files = map_fields(panels, result, replace(model, output_folder=stage), request,
                                   plan, warnings, progress=not quiet)
    files = [model.output_folder / f.name for f in files]
    if quiet:
        return files
    for w in warnings + record.get("picture_problems", []):
        print(f"warning: {w}", file=sys.stderr)
    print(result.table())
    w = record["energy_J"]
    print("\nstored energy at the given potentials")
    rows = [("1/2 V^T C V", record["energy_J"]), ("1/2 sum Q V", record["energy_from_charges_J"]),
            ("grid integral of 1/2 eps |E|^2", record["energy_grid_J"]),
            ("outside the grid (surface identity)", record["energy_outside_grid_J"]),
            ("outside the grid (monopole + dipole)", record["energy_outside_grid_multipole_J"]),
            ("grid + outside", record["energy_grid_plus_outside_J"])]
    for label, value in rows:
        share = f"{value / w:8.2%}" if w else ""
        print(f"  {label:<38}{format_quantity(value, 'J'):>14}{share}")
    print("peak |E| on each conductor (panel centroids; edges are higher), "
          "and its share of air's breakdown field")
    scale, unit = LENGTH_UNITS[model.length_unit], model.length_unit
    for name, peak in record["peak_field_V_per_m"].items():
        at = ", ".join(f"{x / scale:.4g}" for x in peak["at_m"])
        share = peak["value"] / AIR_BREAKDOWN_V_PER_M
        print(f"  {name:<14}{format_quantity(peak['value'], 'V/m'):>14}{share:10.2%}  "
              f"at ({at}) {unit}")
    print("force on each conductor [N]")
    for name, f in record["force_N"].items():
        print(f"  {name:<14}" + "".join(f"{c:>12.4g}" for c in f))
    print(f"caution: {FIELD_CAUTION}")
    print(f"wrote {', '.join(f.name for f in files)} to {model.output_folder}")
    return files


def _check_mesh(args):
    from bem3d.mesh_io.read import mesh_summary, read_conductors

    panels, warnings = read_conductors(args.inputs, units=args.units, check=False)
    report = mesh_summary(panels, source=args.inputs if len(args.inputs) > 1 else args.inputs[0])
    report["problems"] = warnings + report["problems"]
    if args.json:
        print(json.dumps(report, indent=2))
    else:
        from bem3d.base.units import format_quantity
        print(f"panels: {report['panels']}")
        for c in report["conductors"]:
            closed = "closed" if c["boundary_edges"] == 0 else f"open, {c['boundary_edges']} boundary edges"
            print(f"  {c['name']}: {c['panels']} panels, area {c['area_m2']:.4g} m^2 ({closed})")
        lo, hi = report["bounding_box_m"] or ([float("nan")] * 3, [float("nan")] * 3)
        print("bounding box [m]: " + " .. ".join("(" + ", ".join(f"{x:.4g}" for x in v) + ")"
                                                for v in (lo, hi)))
        for key in ("smallest_panel", "largest_panel"):
            p = report[key]
            if p:
                print(f"{key.replace('_', ' ')}: area {p['area_m2']:.3g} m^2, "
                      f"edge {format_quantity(p['edge_m'], 'm')}")
        for key, label in (("aspect_ratio_max", "largest panel aspect ratio (longest edge / "
                                                "height)"),
                           ("neighbour_size_ratio_max", "largest size ratio of neighbours")):
            if report[key] is not None:
                print(f"{label}: {report[key]:.3g}")
        print("problems: " + ("none" if not report["problems"] else ""))
        for problem in report["problems"]:
            print(f"  {problem}")
    return 0


def _demo(args):
    from bem3d import demo
    from bem3d.export.outputs import output_names
    from bem3d.model import Model
    from bem3d.base.files import check_output_folder

    folder = args.folder
    mesh = folder / "sensor_head.msh"
    model = Model(meshes=[mesh], length_unit=demo.LENGTH_UNIT, volts=dict(demo.VOLTS),
                  output_folder=folder, spice_name="sensor_head")
    check_output_folder(folder, [], output_names(model), args.force)
    demo.write_demo_mesh(mesh)
    print(f"demo: capacitive sensor head (two sense pads, drive pad, guard ring, lid); "
          f"drive at {demo.VOLTS['drive']:g} V, others at 0 V")
    from bem3d.post.field_map import FieldRequest

    # the board face z = 0 carries the pads: slice just above it, between grid planes
    _run_field(model, FieldRequest(slices=[(2, demo.SLICE_Z_MM * 1e-3)], png=True),
               {"cache": False}, force=args.force)
    print(f"demo files are in {folder.resolve()}")
    return 0


def main(argv=None):
    args = _parser().parse_args(argv)
    try:
        if args.command == "extract":
            _run_extract(model_from_args(args), solver_options(args), quiet=args.quiet,
                         force=args.force, max_panels=args.max_panels)
            return 0
        if args.command == "field":
            model = model_from_args(args)
            _run_field(model, _field_request(args, model), solver_options(args),
                       quiet=args.quiet, force=args.force, max_panels=args.max_panels)
            return 0
        if args.command in ("sweep", "converge"):
            from bem3d.post import convergence as converge
            from bem3d.post import sweep
            return sweep.run_sweep(args) if args.command == "sweep" else converge.run_converge(args)
        if args.command == "check-mesh":
            return _check_mesh(args)
        return _demo(args)
    except Bem3dError as err:
        if args.debug:
            raise
        print(f"bem3d: error: {err}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("bem3d: interrupted; no partial result was written", file=sys.stderr)
        return 130


EXIT_BAD_INPUT = 2
