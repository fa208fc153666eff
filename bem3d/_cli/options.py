"""Options shared by the commands: the model, the solver, the run guards, and the hint when
the length unit was left out."""

import sys
from pathlib import Path

import numpy as np

from bem3d.model import build_model, parse_dielectrics, parse_volts

#: A model read in metres whose largest size lies in this range (m) was most likely drawn in
#: millimetres: boards, sensors and enclosures measure 1 mm to 1 m (common practice, no source).
MILLIMETRE_HINT_RANGE_M = (1.0, 1000.0)


def add_model_options(p):
    p.add_argument("inputs", nargs="+", metavar="INPUT",
                   help="mesh files (one conductor per file, or groups within one file) "
                        "or one TOML model file")
    p.add_argument("--units", help="length unit of the meshes: m, cm, mm, um, in, mil (default m)")
    p.add_argument("--volts", nargs="+", metavar="NAME=V", default=[],
                   help="conductor potentials in volts; unlisted conductors are at 0 V")
    p.add_argument("--eps-r", type=float, help="relative permittivity of the background medium")
    p.add_argument("--out", type=Path, help="output folder (default: <first input>_result)")
    p.add_argument("--ground-plane", type=float, metavar="Z",
                   help="infinite grounded plane z = Z (mesh unit), by the method of images")
    p.add_argument("--floating", action="append", default=[], metavar="NAME",
                   help="a conductor with zero net charge and unknown potential; repeatable")
    p.add_argument("--reference", metavar="NAME",
                   help="the conductor taken as the ground node (e.g. a meshed ground pour): "
                        "the matrices of the others are relative to it, infinity (and a "
                        "ground plane) lumped into it; it is the SPICE subcircuit's REF port")
    p.add_argument("--dielectric", action="append", default=[], metavar="FILE=EPS_R[,TAN_D]",
                   help="a closed dielectric body (mesh file), its relative permittivity and "
                        "optionally its loss tangent; repeatable")
    p.add_argument("--loss-tangent", type=float, metavar="TAN_D",
                   help="loss tangent of the background medium (default 0)")
    p.add_argument("--frequency", type=float, metavar="HZ",
                   help="frequency at which the conductance of lossy media is given "
                        "(default 1e6 Hz when a loss tangent is given)")


def add_run_guards(p):
    p.add_argument("--force", action="store_true",
                   help="replace the results of an earlier run in the output folder")
    p.add_argument("--max-panels", type=int, metavar="N",
                   help="refuse a model of more than N panels (conductors and dielectric "
                        "bodies) before any assembly")


def add_solver_options(p):
    p.add_argument("--backend", choices=["auto", "dense", "compressed"], default="auto",
                   help="dense matrix, compressed hierarchical matrix, or auto: compressed above "
                        "6,000 panels or when dense would not fit in memory")
    p.add_argument("--solver", choices=["auto", "direct", "cg"], default="auto",
                   help="direct (Cholesky, dense only), cg (conjugate gradients) or auto by size")
    p.add_argument("--tol", type=float, default=1e-7,
                   help="CG relative residual (default 1e-7); mutual capacitances settle to "
                        "about this relative accuracy, self capacitances to better")
    p.add_argument("--block-tol", type=float, default=1e-5,
                   help="compressed backend: relative accuracy of each low-rank block "
                        "(default 1e-5)")
    p.add_argument("--cache-dir", type=Path,
                   help="where the compressed backend keeps assembled operators (default "
                        "$BEM3D_CACHE_DIR, else ~/.cache/bem3d)")
    p.add_argument("--cache-max", type=float, metavar="GB",
                   help="size cap of the operator cache: least recently used operators are "
                        "deleted beyond it (default $BEM3D_CACHE_MAX_GB, else 4 GB)")
    p.add_argument("--no-cache", action="store_true",
                   help="neither read nor write the operator cache")


def solver_settings(args):
    """The solve settings of extract and field, as keyword arguments of the API."""
    return {"backend": args.backend, "solver": args.solver, "tol": args.tol,
            "block_tol": args.block_tol, "cache": not args.no_cache, "cache_dir": args.cache_dir,
            "cache_max": args.cache_max}


def model_from_args(args):
    """The Model of the parsed model options (a model file's settings under the flags)."""
    return build_model(args.inputs, units=args.units, volts=parse_volts(args.volts),
                       eps_r=args.eps_r, ground_plane=args.ground_plane, floating=args.floating,
                       dielectrics=parse_dielectrics(args.dielectric),
                       loss_tangent=args.loss_tangent, frequency=args.frequency,
                       reference=args.reference, out=args.out)


def print_units_hint(args, points):
    """One line on stderr when --units was not given (nor a model file, which names its unit)
    and the model, read in metres, is as large as a model drawn in millimetres would be.

    points: corners of the model's panels in metres (any shape ending in 3)."""
    if args.units or any(str(p).lower().endswith(".toml") for p in args.inputs):
        return
    points = np.reshape(points, (-1, 3))
    size = float(np.ptp(points, axis=0).max()) if len(points) else 0.0
    low, high = MILLIMETRE_HINT_RANGE_M
    if low <= size < high:
        print(f"hint: read in metres (no --units), the model is {size:.4g} m across; if it was "
              "drawn in millimetres, run again with --units mm", file=sys.stderr)
