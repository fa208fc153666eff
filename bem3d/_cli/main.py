"""Command line: a thin shell over the Python API. Bad input ends in one line and exit code 2."""

import argparse
import sys

from bem3d._cli import check_mesh, converge, demo, extract, field, sweep
from bem3d.base.errors import Bem3dError
from bem3d.base.version import __version__

EXIT_BAD_INPUT = 2
EXIT_INTERRUPTED = 130
#: API keywords whose flag is not simply --keyword-with-dashes.
FLAGS = {"dielectrics": "--dielectric", "slices": "--slice"}


def flag(name):
    """The command-line flag of the API keyword `name`."""
    return FLAGS.get(name, "--" + name.replace("_", "-"))


class _Parser(argparse.ArgumentParser):
    """argparse with bem3d's one-line error and exit code 2 (the usage stays in --help)."""

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"bem3d: error: {self.prog}: {message}\n")


def _parser():
    parser = _Parser(
        prog="bem3d", description="Capacitance matrices and field energy of conductors "
                                  "from surface meshes (boundary-element method).")
    parser.add_argument("--version", action="version", version=f"bem3d {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks")
    sub = parser.add_subparsers(dest="command", required=True)
    for command in (extract, field, demo, check_mesh, sweep, converge):
        command.add_parser(sub).set_defaults(run=command.run)
    return parser


def main(argv=None):
    args = _parser().parse_args(argv)
    try:
        return args.run(args)
    except Bem3dError as err:
        if args.debug:
            raise
        print(f"bem3d: error: {err.render(flag)}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("bem3d: interrupted; no partial result was written", file=sys.stderr)
        return EXIT_INTERRUPTED


if __name__ == "__main__":
    sys.exit(main())
