"""bem3d field: the capacitance, then potential, field and energy density on a grid, slices
and points, with the energy balance, peak fields and forces."""

from pathlib import Path

from bem3d import api
from bem3d._cli.extract import print_warnings
from bem3d._cli.options import (
    add_model_options,
    add_run_guards,
    add_solver_options,
    model_from_args,
    print_units_hint,
    solver_settings,
)
from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.units import format_quantity
from bem3d.export.report import energy_rows
from bem3d.post.field_map import AIR_BREAKDOWN_V_PER_M, FIELD_CAUTION


def add_parser(subparsers):
    """Add the command to the CLI's subparsers; returns its parser."""
    p = subparsers.add_parser("field", help="capacitance plus potential, field and energy "
                                            "density on a grid, slices and points")
    add_model_options(p)
    add_run_guards(p)
    add_solver_options(p)
    p.add_argument("--box", type=float, nargs=6,
                   metavar=("XMIN", "YMIN", "ZMIN", "XMAX", "YMAX", "ZMAX"),
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
    p.add_argument("--png", action="store_true",
                   help="render surface_charge.png and field_slice_<axis>_<value><unit>.png "
                        "per slice")
    p.add_argument("--sensitivity", action="store_true",
                   help="also write dC/dx, dC/dy, dC/dz of the Maxwell matrix for each "
                        "conductor moved alone into result.json")
    p.add_argument("--report", action="store_true",
                   help="also write report.html: one self-contained page (model, matrices, "
                        "couplings, warnings, solver record, cautions; energy, peak fields, forces and the pictures) that opens offline "
                        "and prints")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    return p


def run(args):
    model = model_from_args(args)
    result = api.field(model, box=args.box, margin=args.margin, spacing=args.spacing,
                       points=args.points, slices=args.slice, at=args.at,
                       unit_fields=args.unit_fields, png=args.png, **solver_settings(args),
                       max_panels=args.max_panels, out=model.output_folder, force=args.force,
                       progress=not args.quiet, report=args.report,
                       sensitivity=args.sensitivity)
    if not args.quiet:
        print_units_hint(args, result.panels.vertices)
        print_field_summary(result)
    return 0


def print_field_summary(result):
    """The console report of a field run: matrices, energy balance, peaks, forces, caution."""
    model, record = result.model, result.record
    print_warnings(result.warnings + result.picture_problems)
    print(result.table())
    print("\nstored energy at the given potentials")
    for label, value, share in energy_rows(record):
        print(f"  {label:<38}{value:>14}{share:>8}")
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
    print(f"wrote {', '.join(f.name for f in result.files)} to {model.output_folder}")
