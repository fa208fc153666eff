"""The exceptions bem3d raises for problems the user can fix.

The CLI turns each into a one-line message and exit code 2; anything else is a bug.
"""


class Bem3dError(Exception):
    """Base class: a problem with the user's input or request."""


class MeshError(Bem3dError):
    """A mesh file is missing, unreadable, or its geometry is unusable."""


class ModelError(Bem3dError):
    """A model file or command-line model description is malformed."""


class ResourceError(Bem3dError):
    """A run would need more memory (or other resources) than the machine has."""
