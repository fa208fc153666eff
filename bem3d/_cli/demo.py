"""bem3d demo: the shipped sensor-head scenario, end to end."""

from pathlib import Path

from bem3d import api, demo
from bem3d._cli.field import print_field_summary
from bem3d.base.files import check_output_folder
from bem3d.export.outputs import output_names
from bem3d.model import Model


def add_parser(subparsers):
    """Add the command to the CLI's subparsers; returns its parser."""
    p = subparsers.add_parser("demo", help="run the shipped sensor-head demo end to end")
    p.add_argument("folder", nargs="?", type=Path, default=Path("bem3d_demo"),
                   help="where to write the demo mesh and results (default: bem3d_demo)")
    p.add_argument("--force", action="store_true",
                   help="replace the results of an earlier demo in the folder")
    return p


def run(args):
    folder = args.folder
    mesh = folder / "sensor_head.msh"
    model = Model(meshes=[mesh], length_unit=demo.LENGTH_UNIT, volts=dict(demo.VOLTS),
                  output_folder=folder, spice_name="sensor_head")
    check_output_folder(folder, [], output_names(model), args.force)
    demo.write_demo_mesh(mesh)
    print(f"demo: capacitive sensor head (two sense pads, drive pad, guard ring, lid); "
          f"drive at {demo.VOLTS['drive']:g} V, others at 0 V")
    # the board face z = 0 carries the pads: slice just above it, between grid planes
    result = api.field(model, slices=[("z", demo.SLICE_Z_MM)], png=True, cache=False,
                       out=folder, force=args.force, progress=True)
    print_field_summary(result)
    print(f"demo files are in {folder.resolve()}")
    return 0
