"""Command line: a thin shell over the Python API, and the one place where failures become a
line on stderr and an exit code (see exits)."""

import argparse
import os
import sys

from bem3d._cli import cache, check_mesh, converge, demo, exits, extract, field, sweep
from bem3d._cli.terminal import safe_streams
from bem3d.base.version import __version__
from bem3d.export.names import terminal_text

#: API keywords whose flag is not simply --keyword-with-dashes.
FLAGS = {"dielectrics": "--dielectric", "slices": "--slice"}


def flag(name):
    """The command-line flag of the API keyword `name`."""
    return FLAGS.get(name, "--" + name.replace("_", "-"))


class _Parser(argparse.ArgumentParser):
    """argparse with bem3d's one-line error and exit code 2 (the usage stays in --help); a
    subcommand's error names the subcommand after the one prefix."""

    def error(self, message):
        command = self.prog.removeprefix("bem3d").strip()
        where = f"{command}: " if command else ""
        self.exit(exits.BAD_INPUT, f"bem3d: error: {where}{terminal_text(message)}\n")


def _parser():
    parser = _Parser(
        prog="bem3d", description="Capacitance matrices and field energy of conductors "
                                  "from surface meshes (boundary-element method).")
    parser.add_argument("--version", action="version", version=f"bem3d {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks")
    sub = parser.add_subparsers(dest="command", required=True)
    for command in (extract, field, demo, check_mesh, sweep, converge, cache):
        command.add_parser(sub).set_defaults(run=command.run)
    return parser


def _quiet_closed_pipe():
    """The reader of stdout closed it (`bem3d ... | head -1`): what is left to print goes to
    the null device, so that the interpreter's last flush at exit raises nothing either."""
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, sys.stdout.fileno())
    return exits.CLOSED_PIPE


def main(argv=None):
    args = _parser().parse_args(argv)
    with safe_streams():
        try:
            code = args.run(args)
            sys.stdout.flush()           # a closed pipe shows here, not at the exit
            return code
        except BrokenPipeError:
            return _quiet_closed_pipe()
        except KeyboardInterrupt:
            if args.debug:
                raise
            print("bem3d: interrupted; no partial result was written", file=sys.stderr)
            return exits.INTERRUPTED
        except Exception as err:         # noqa: BLE001 - sorted by exits.classify
            failure = exits.classify(err, flag)
            if failure is None or args.debug:
                raise
            code, message = failure
            print(f"bem3d: error: {terminal_text(message)}", file=sys.stderr)
            return code


if __name__ == "__main__":
    sys.exit(main())
