"""bem3d demo: the shipped scenarios end to end — the sensor head, or with --stack the touch
keypad on a board over a ground layer under a cover."""

from pathlib import Path

from bem3d import api
from bem3d._cli import exits
from bem3d._cli.extract import print_warnings
from bem3d._cli.field import print_field_summary
from bem3d.base.files import check_output_folder, write_text
from bem3d.demo import keypad, sensor_head
from bem3d.export.outputs import output_names
from bem3d.export.records import CAUTION
from bem3d.export.report import REPORT_NAME
from bem3d.model import Model, load_model


def add_parser(subparsers):
    """Add the command to the CLI's subparsers; returns its parser."""
    p = subparsers.add_parser("demo", help="run a shipped demo end to end: the sensor head, or "
                                           "with --stack a touch keypad on a stack-up")
    p.add_argument("folder", nargs="?", type=Path,
                   help="where to write the demo's meshes and results (default: bem3d_demo, "
                        "or bem3d_stack_demo with --stack)")
    p.add_argument("--stack", action="store_true",
                   help="the two-key touch keypad: board on a ground layer, copper keys, cover, "
                        "and a finger phantom swept towards one key")
    p.add_argument("--force", action="store_true",
                   help="write into a folder holding another run's results (an earlier "
                        "demo's own are replaced without it)")
    return p


def earlier_demo(folder, marker):
    """True if folder holds the file an earlier run of this demo wrote first (its mesh or model
    file): the demo then replaces its own results, as a user re-running it expects; a folder
    holding anything else's results still needs --force."""
    return (Path(folder) / marker).is_file()


def run(args):
    if args.stack:
        folder = args.folder or Path("bem3d_stack_demo")
        return run_keypad(folder, args.force or earlier_demo(folder, "keypad.toml"))
    folder = args.folder or Path("bem3d_demo")
    mesh = folder / "sensor_head.msh"
    force = args.force or earlier_demo(folder, mesh.name)
    model = Model(meshes=[mesh], length_unit=sensor_head.LENGTH_UNIT,
                  volts=dict(sensor_head.VOLTS), output_folder=folder, spice_name="sensor_head")
    check_output_folder(folder, [], output_names(model) + [REPORT_NAME], force)
    sensor_head.write_demo_mesh(mesh)
    print(f"demo: capacitive sensor head (two sense pads, drive pad, guard ring, lid); "
          f"drive at {sensor_head.VOLTS['drive']:g} V, others at 0 V")
    # the board face z = 0 carries the pads: slice just above it, between grid planes
    result = api.field(model, slices=[("z", sensor_head.SLICE_Z_MM)], png=True, cache=False,
                       out=folder, force=force, progress=True, report=True)
    print_field_summary(result)
    print(f"demo files are in {folder.resolve()}")
    return 0


#: What the keypad demo writes at the top of its folder (results go in subfolders).
KEYPAD_FILES = ["keypad.msh", "keys.msh", "board.msh", "cover.msh", "keypad.toml",
                "touch_signal.csv"]


def run_keypad(folder, force):
    """The touch keypad: the keys without the finger, then the finger swept towards key_1
    (its first position is keypad.toml's), and the touch signal printed and written to
    touch_signal.csv."""
    check_output_folder(folder, [], KEYPAD_FILES, force)
    check_output_folder(folder / "untouched", [], ["result.json", REPORT_NAME], force)
    folder.mkdir(parents=True, exist_ok=True)
    model_file = keypad.write_files(folder)
    model = load_model(model_file)
    board, cover = keypad.BOARD, keypad.COVER
    print(f"demo: two-key touch keypad on a stack-up: board eps_r "
          f"{board['relative_permittivity']:g} (tan d {board['loss_tangent']:g}) on a ground "
          f"layer, copper keys, cover eps_r {cover['relative_permittivity']:g} (tan d "
          f"{cover['loss_tangent']:g}); a grounded {2 * keypad.FINGER_RADIUS:g} mm finger "
          f"phantom over key_1")
    untouched = api.extract(folder / "keys.msh", units=model.length_unit,
                            ground_plane=model.ground_plane_z, dielectrics=model.dielectrics,
                            frequency=model.frequency_Hz, volts=model.volts,
                            out=folder / "untouched", force=force, cache=False, report=True)
    print(f"\nthe keys without a finger ({folder / 'untouched'}):")
    print_warnings(untouched.warnings)
    print(untouched.table())
    lifts = ",".join(f"{g - keypad.FINGER_GAPS[0]:g}" for g in keypad.FINGER_GAPS)
    print(f"\nthe finger {', '.join(f'{g:g}' for g in keypad.FINGER_GAPS)} mm above the cover "
          f"({len(keypad.FINGER_GAPS)} cases) ...", flush=True)
    sweep = api.sweep(model_file, moves=[("translate", f"finger:z={lifts}")],
                      entries=["maxwell:key_1:key_1", "maxwell:key_2:key_2",
                               "mutual:key_1:key_2"],
                      workers=1, out=folder / "finger_sweep")
    rows = touch_signal(untouched, sweep.records)
    print_touch_table(rows)
    write_text(folder / "touch_signal.csv", "".join(",".join(map(str, r)) + "\n"
                                                    for r in [TOUCH_COLUMNS] + rows))
    print(f"caution: {CAUTION}")
    print(f"demo files are in {folder.resolve()} (the sweep's summary in finger_sweep)")
    return exits.CASES_FAILED if sweep.failed else exits.OK


TOUCH_COLUMNS = ("finger_gap_mm", "C_key_1_F", "dC_key_1_F", "dC_key_2_F", "dG_key_1_S")


def touch_signal(untouched, records):
    """Rows of TOUCH_COLUMNS: key_1's capacitance to ground (Maxwell diagonal: all else at
    0 V) at each finger gap, its rise over the untouched keys (the touch signal), key_2's rise
    (crosstalk) and key_1's rise of conductance (the cover's and board's loss)."""
    c0, g0 = untouched.maxwell, untouched.conductance
    rows = []
    for gap, record in zip(keypad.FINGER_GAPS, records):
        if record.get("status") != "ok":
            continue
        names = record["conductors"]
        i, j = names.index("key_1"), names.index("key_2")
        c = record["maxwell_capacitance_F"]
        g = record["conductance_S"][i][i] - g0[0, 0] if g0 is not None else 0.0
        rows.append((gap, c[i][i], c[i][i] - c0[0, 0], c[j][j] - c0[1, 1], g))
    return rows


def print_touch_table(rows):
    print("\ntouch signal: rise of capacitance to ground as the finger comes near")
    print(f"{'finger gap':>12}{'C key_1':>12}{'dC key_1':>12}{'dC key_2':>12}{'dG key_1':>12}")
    print(f"{'[mm]':>12}{'[pF]':>12}{'[fF]':>12}{'[fF]':>12}{'[nS]':>12}")
    for gap, c, dc1, dc2, dg in rows:
        print(f"{gap:>12g}{c * 1e12:>12.4f}{dc1 * 1e15:>12.1f}{dc2 * 1e15:>12.1f}"
              f"{dg * 1e9:>12.3f}")
