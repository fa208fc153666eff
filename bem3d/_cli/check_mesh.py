"""bem3d check-mesh: panels, conductors and problems of meshes, without solving."""

import json

from bem3d import api
from bem3d._cli.options import print_units_hint
from bem3d.base.constants import LENGTH_UNITS


def add_parser(subparsers):
    """Add the command to the CLI's subparsers; returns its parser."""
    p = subparsers.add_parser("check-mesh", help="report panels, conductors and problems of "
                                                 "meshes")
    p.add_argument("inputs", nargs="+", metavar="INPUT", help="mesh files")
    p.add_argument("--units", help="length unit of the meshes (default m); the report's lengths "
                                   "are in it")
    p.add_argument("--json", action="store_true",
                   help="print the report as JSON (SI quantities, with the length unit)")
    return p


def run(args):
    unit = args.units or "m"
    report = api.read(args.inputs, units=unit, check=False).report
    if args.json:
        print(json.dumps(report, indent=2))
        return 0
    scale = LENGTH_UNITS[unit]
    print(f"panels: {report['panels']}")
    for c in report["conductors"]:
        closed = ("closed" if c["boundary_edges"] == 0
                  else f"open, {c['boundary_edges']} boundary edges")
        print(f"  {c['name']}: {c['panels']} panels, area {c['area_m2'] / scale**2:.4g} "
              f"{unit}^2 ({closed})")
    box = report["bounding_box_m"]
    lo, hi = box or ([float("nan")] * 3, [float("nan")] * 3)
    print(f"bounding box [{unit}]: " + " .. ".join(
        "(" + ", ".join(f"{x / scale:.4g}" for x in v) + ")" for v in (lo, hi)))
    for key in ("smallest_panel", "largest_panel"):
        p = report[key]
        if p:
            print(f"{key.replace('_', ' ')}: area {p['area_m2'] / scale**2:.3g} {unit}^2, "
                  f"edge {p['edge_m'] / scale:.4g} {unit}")
    for key, label in (("aspect_ratio_max", "largest panel aspect ratio (longest edge / "
                                            "height)"),
                       ("neighbour_size_ratio_max", "largest size ratio of neighbours")):
        if report[key] is not None:
            print(f"{label}: {report[key]:.3g}")
    print("problems: " + ("none" if not report["problems"] else ""))
    for problem in report["problems"]:
        print(f"  {problem}")
    if box:
        print_units_hint(args, box)
    return 0
