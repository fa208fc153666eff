"""bem3d: capacitance matrices and field energy of 3D conductors from surface meshes."""

from bem3d.base.version import __version__

__all__ = ["__version__"]
