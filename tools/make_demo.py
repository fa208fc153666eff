"""Regenerate the shipped demo mesh meshes/sensor_head.msh (the design is in bem3d/demo/sensor_head.py).

    python tools/make_demo.py [--out meshes/sensor_head.msh]
"""

import argparse
from pathlib import Path

from bem3d.demo.sensor_head import conductors, write_demo_mesh

DEFAULT_OUT = Path(__file__).resolve().parent.parent / "meshes" / "sensor_head.msh"


def main(argv=None):
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default=str(DEFAULT_OUT),
                        help="output .msh path (default: %(default)s)")
    args = parser.parse_args(argv)
    write_demo_mesh(args.out)
    parts = conductors()
    for name, p, t in parts:
        lo, hi = p.min(axis=0), p.max(axis=0)
        print(f"{name:8s} {len(t):5d} panels  x {lo[0]:7.3f}..{hi[0]:7.3f}  "
              f"y {lo[1]:7.3f}..{hi[1]:7.3f}  z {lo[2]:6.3f}..{hi[2]:6.3f} mm")
    print(f"total    {sum(len(t) for _, _, t in parts):5d} panels -> {args.out}")


if __name__ == "__main__":
    main()
