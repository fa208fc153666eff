"""The exceptions bem3d raises for problems the user can fix.

A message may name a setting with `option("volts")`. Printed from Python it reads as the
keyword (`volts`); the command line prints its own flag (`--volts`) in its place, so one message
serves both. The command line turns each error into one line and exit code 2; anything else
escaping is a bug.
"""

import re

_MARK = "\x1f"
_OPTION = re.compile(f"{_MARK}([a-z_]+){_MARK}")


def option(name):
    """A reference to the setting `name` (a Python keyword of the public API) inside a message."""
    return f"{_MARK}{name}{_MARK}"


class Bem3dError(Exception):
    """Base class: a problem with the user's input or request."""

    def render(self, spell=None):
        """The message with each setting spelled by spell(name) (default: the keyword itself)."""
        text = str(self.args[0]) if self.args else ""
        return _OPTION.sub(lambda m: (spell or str)(m.group(1)), text)

    def __str__(self):
        return self.render()


class MeshError(Bem3dError):
    """A mesh file is missing, unreadable, or its geometry is unusable."""


class ModelError(Bem3dError):
    """A model file or model description is malformed."""


class ResourceError(Bem3dError):
    """A run would need more memory (or other resources) than the machine has."""
