"""The `converge` command: refine the mesh, extrapolate, print the table."""

import sys
from pathlib import Path

from bem3d import api
from bem3d._cli.options import add_model_options, model_from_args, print_units_hint
from bem3d.geometry.refine import CREASE_DEGREES


def add_parser(subparsers):
    """Add the 'converge' command to the CLI's subparsers."""
    p = subparsers.add_parser(
        "converge", help="refine the mesh and extrapolate the capacitances (Richardson)",
        description="Solve on the mesh and on 1 or 2 midpoint subdivisions of it (4 and 16 "
                    "times the panels) and report Richardson-extrapolated capacitances with "
                    "an error estimate per matrix entry.",
        conflict_handler="resolve")
    add_model_options(p)
    p.add_argument("--out", type=Path, help="output folder (default: <first input>_converge)")
    p.add_argument("--refinements", type=int, choices=[1, 2], default=2,
                   help="subdivisions (default 2, which also measures the order)")
    p.add_argument("--flat", action="store_true",
                   help="keep every midpoint on its straight edge (polyhedral parts); by "
                        "default midpoints of smooth edges follow the curved surface")
    p.add_argument("--crease-angle", type=float, default=CREASE_DEGREES,
                   help=f"panels meeting at a larger angle keep a sharp edge (default "
                        f"{CREASE_DEGREES:g} degrees)")
    p.add_argument("--solver", choices=["auto", "direct", "cg"], default="auto",
                   help="direct (Cholesky), cg (conjugate gradients) or auto by size")
    p.add_argument("--tol", type=float, default=1e-7, help="CG relative residual (default 1e-7)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    return p


def run(args):
    """Run the parsed 'converge' command: exit code 0; bad input raises Bem3dError."""
    model = model_from_args(args)
    folder = args.out or Path(f"{Path(args.inputs[0]).stem}_converge")
    conv = api.converge(model, refinements=args.refinements, flat=args.flat,
                        crease_angle=args.crease_angle, solver=args.solver, tol=args.tol,
                        out=folder, progress=not args.quiet)
    if not args.quiet:
        print_units_hint(args, conv.panels[0].vertices)
        for w in conv.warnings:
            print(f"warning: {w}", file=sys.stderr)
        print(conv.table())
        print(f"wrote convergence.json, convergence.csv and mesh_0 .. "
              f"mesh_{args.refinements} to {folder}")
    return 0
