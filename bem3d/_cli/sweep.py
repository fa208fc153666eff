"""The `sweep` command: parse the variations, run the sweep, show its progress."""

import argparse
import json
import sys
from pathlib import Path

from bem3d import api
from bem3d._cli import exits
from bem3d._cli.options import add_model_options
from bem3d.model import parse_dielectrics, parse_volts

EXAMPLES = """\
values: a list 0.2,0.5,1 or a range START:STOP:COUNT (COUNT values, both ends included).
NAMES: conductor names joined by commas, or * for every conductor. AXIS: x, y, z, -x, -y, -z
or a vector such as 1,1,0. Lengths are in --units; angles in degrees (right-hand rule).
Rotations and scalings are about the area centroid of the named conductors unless @X,Y,Z
gives the point (in --units). Several variations run every combination, applied in the order
given; the plot uses the first one as its x axis.

examples:
  bem3d sweep plates.msh --units mm --translate top:z=0.1:2:20 --out gap
  bem3d sweep head.msh --units mm --rotate lid:x@0,0,1.5=-10:10:5 --entries mutual:lid:drive
  bem3d sweep pads.msh --scale pad_a,pad_b=0.8,0.9,1,1.1 --translate pad_b:x=0,0.5
  bem3d sweep --each 'variants/*.msh' --units mm --out variants
  bem3d sweep plates.msh --translate top:z=0.1:2:20 --scheduler tcp://10.0.0.5:8786
"""


def add_parser(subparsers):
    """Add the 'sweep' command to the CLI's subparsers."""
    p = subparsers.add_parser(
        "sweep", help="run many cases: moved or scaled conductors, or a set of files",
        description="Run many extractions, resumable: vary a translation, rotation or scale of "
                    "named conductors, or run each of a set of mesh/model files.",
        epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter,
        conflict_handler="resolve")
    add_model_options(p)
    p.add_argument("--out", type=Path, help="sweep folder (default: bem3d_sweep)")
    p.set_defaults(moves=[])
    for kind, metavar, text in [
            ("translate", "NAMES:AXIS=VALUES", "move conductors along an axis (mesh units)"),
            ("rotate", "NAMES:AXIS[@X,Y,Z]=DEGREES", "rotate conductors about an axis"),
            ("scale", "NAMES[@X,Y,Z]=FACTORS", "scale conductors about a point")]:
        p.add_argument(f"--{kind}", dest="moves", action="append", metavar=metavar, help=text,
                       type=lambda s, kind=kind: (kind, s))
    p.add_argument("--each", action="store_true",
                   help="each INPUT (wildcards allowed) is one case: a mesh or .toml model file")
    p.add_argument("--entries", nargs="+", default=[], metavar="[mutual:|maxwell:]A:B",
                   help="matrix entries for the summary and plot (default: all i<=j entries "
                        "in the CSV, the mutual ones in the plot)")
    p.add_argument("--solver", choices=["auto", "direct", "cg"], default="auto",
                   help="direct (Cholesky), cg (conjugate gradients) or auto by size")
    p.add_argument("--tol", type=float, default=1e-7, help="CG relative residual")
    p.add_argument("--workers", type=int, help="local worker processes (default: one per core)")
    p.add_argument("--threads", type=int,
                   help="Numba/BLAS threads per case (default: cores / workers; 1 on Dask)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run the cases on this Dask distributed scheduler, e.g. tcp://host:8786")
    p.add_argument("--cache", type=Path,
                   help="folder of solved matrices to reuse (default: OUT/cache)")
    p.add_argument("--json-lines", action="store_true",
                   help="print one JSON object per event on stdout, nothing else")
    return p


class _Progress:
    """The sweep's events as a tqdm bar with ETA on a terminal, one line per case otherwise, or
    JSON lines on stdout."""

    def __init__(self, json_lines):
        self.json_lines, self.bar = json_lines, None

    def __call__(self, event):
        if self.json_lines:
            print(json.dumps(event), flush=True)
            return
        {"start": self.start, "case": self.case, "warning": self.warning,
         "done": self.done}[event["event"]](event)

    def warning(self, fields):
        text = f"warning: {fields['text']}"
        if self.bar is not None:
            self.bar.write(text, file=sys.stderr)
        else:
            print(text, file=sys.stderr)

    def start(self, fields):
        print(f"sweep: {fields['cases']} cases, {fields['skipped']} finished before, "
              f"{fields['to_run']} to run ({fields['to_solve']} to solve) on "
              f"{fields['executor']} ({fields['workers']} worker(s) x {fields['threads']} "
              "thread(s))", file=sys.stderr)
        if sys.stderr.isatty() and fields["to_run"]:
            from tqdm import tqdm

            self.bar = tqdm(total=fields["to_run"], unit="case", file=sys.stderr)

    def case(self, record):
        how = record["how"]
        if how == "skipped":
            return
        text = (f"case {record['label']}: failed: {record['error']}" if record["status"] != "ok"
                else f"case {record['label']}: ok ({how}, {record['solve_seconds']:.2f} s)")
        texts = [text] + [f"case {record['label']}: warning: {w}"
                          for w in record.get("warnings") or []]
        if self.bar is not None:
            self.bar.update(1)
            for line in texts[record["status"] == "ok":]:
                self.bar.write(line, file=sys.stderr)
        else:
            for line in texts:
                print(line, file=sys.stderr)

    def done(self, fields):
        if self.bar is not None:
            self.bar.close()
        print(f"sweep {'interrupted' if fields['interrupted'] else 'done'}: "
              f"{fields['ok']} ok, {fields['failed']} failed, {fields['pending']} not run; "
              f"{fields['solved']} solved, {fields['cached']} from cache; "
              f"summary in {fields['summary']}")


def run(args):
    """Run the parsed 'sweep' command: exit code 0, exits.CASES_FAILED if any case failed,
    exits.INTERRUPTED after Ctrl-C. Bad input raises Bem3dError."""
    outcome = api.sweep(args.inputs, moves=args.moves, each=args.each, entries=args.entries,
                        units=args.units, volts=parse_volts(args.volts), eps_r=args.eps_r,
                        ground_plane=args.ground_plane, floating=args.floating,
                        dielectrics=parse_dielectrics(args.dielectric),
                        loss_tangent=args.loss_tangent, frequency=args.frequency,
                        reference=args.reference, solver=args.solver,
                        tol=args.tol, workers=args.workers, threads=args.threads,
                        scheduler=args.scheduler, cache=args.cache,
                        out=args.out or "bem3d_sweep", on_event=_Progress(args.json_lines))
    if outcome.interrupted:
        return exits.INTERRUPTED
    return exits.CASES_FAILED if outcome.failed else exits.OK
