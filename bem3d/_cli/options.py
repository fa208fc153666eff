"""Options shared by the commands: the model, the solver, the run guards."""

from pathlib import Path


from bem3d.base.errors import ModelError


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
    p.add_argument("--dielectric", action="append", default=[], metavar="FILE=EPS_R",
                   help="a closed dielectric body (mesh file) and its relative permittivity; "
                        "repeatable")


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
    p.add_argument("--no-cache", action="store_true",
                   help="neither read nor write the operator cache")


def solver_options(args):
    """The solve settings of extract and field, as keyword arguments of pipeline.solve_panels."""
    from bem3d.operators.hmatrix import Compression

    for name, value in (("--tol", args.tol), ("--block-tol", args.block_tol)):
        if not 0 < value < 1:
            raise ModelError(f"{name} must lie between 0 and 1, got {value:g}")
    return {"backend": args.backend, "solver": args.solver, "tol": args.tol,
            "compression": Compression(tolerance=args.block_tol), "cache": not args.no_cache,
            "cache_dir": args.cache_dir}


def model_from_args(args):
    from bem3d.model import Model, load_model, parse_dielectrics, parse_volts

    if len(args.inputs) == 1 and args.inputs[0].lower().endswith(".toml"):
        model = load_model(args.inputs[0])
    else:
        model = Model(meshes=args.inputs, length_unit=args.units or "m")
    if args.units:
        model.length_unit = args.units
    if args.eps_r is not None:
        model.relative_permittivity = args.eps_r
    model.volts.update(parse_volts(args.volts))
    if args.ground_plane is not None:
        model.ground_plane_z = args.ground_plane
    model.floating += args.floating
    model.dielectrics += parse_dielectrics(args.dielectric)
    if args.out:
        model.output_folder = args.out
    if model.output_folder is None:
        model.output_folder = Path(f"{Path(args.inputs[0]).stem}_result")
    model.__post_init__()                  # validate the merged settings
    return model
