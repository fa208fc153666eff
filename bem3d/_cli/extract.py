"""bem3d extract: the capacitance matrices of a model, printed and written."""

import sys

import numpy as np

from bem3d import api
from bem3d._cli.options import (
    add_model_options,
    add_run_guards,
    add_solver_options,
    model_from_args,
    print_units_hint,
    solver_settings,
)
from bem3d.export.records import CAUTION


def add_parser(subparsers):
    """Add the command to the CLI's subparsers; returns its parser."""
    p = subparsers.add_parser("extract", help="compute the capacitance matrices")
    add_model_options(p)
    add_run_guards(p)
    add_solver_options(p)
    p.add_argument("--sensitivity", action="store_true",
                   help="also give dC/dx, dC/dy, dC/dz of the Maxwell matrix for each conductor "
                        "moved alone (result.json; the largest printed); costs a field of every "
                        "panel on every panel")
    p.add_argument("--report", action="store_true",
                   help="also write report.html: one self-contained page (model, matrices, "
                        "couplings, warnings, solver record, cautions) that opens offline "
                        "and prints")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    return p


def solver_line(solver):
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


#: F/m in fF/um, the unit the console gives sensitivities in (MEMS and touch-sensor scale).
FF_PER_UM = 1e-9


def sensitivity_lines(names, sensitivity):
    """Per moved conductor, the largest |dC_ij/dx| of the Maxwell matrix (fF/um), which entry
    and along which axis."""
    lines = ["sensitivity: largest |dC_ij/dx| of the Maxwell matrix per conductor moved alone"]
    for moved, d in sensitivity.items():
        axis, i, j = np.unravel_index(np.argmax(np.abs(d)), d.shape)
        lines.append(f"  {moved}: dC[{names[i]},{names[j]}]/d{'xyz'[axis]} = "
                     f"{d[axis, i, j] / FF_PER_UM:.4g} fF/um")
    return lines


def print_warnings(warnings):
    for w in warnings:
        print(f"warning: {w}", file=sys.stderr)


def run(args):
    model = model_from_args(args)
    result = api.extract(model, **solver_settings(args), max_panels=args.max_panels,
                         out=model.output_folder, force=args.force, progress=not args.quiet,
                         report=args.report, sensitivity=args.sensitivity)
    if args.quiet:
        return 0
    print_units_hint(args, result.panels.vertices)
    print_warnings(result.warnings)
    print(result.table())
    sensitivity = result.sensitivity if args.sensitivity else None
    if sensitivity is not None:
        print("\n".join(sensitivity_lines(result.names, sensitivity)))
    print(solver_line(result.solver))
    t = result.timings
    compiling = f"compiling kernels {t['compile']:.2f} s, " if t.get("compile") else ""
    print(f"wall time {t['total']:.2f} s ({compiling}assembly {t['assembly']:.2f} s, "
          f"solve {t['solve']:.2f} s); peak memory {result.solver['peak_memory_MiB']:.0f} MiB")
    print(f"caution: {CAUTION}")
    print(f"wrote {', '.join(f.name for f in result.files)} to {model.output_folder}")
    return 0
