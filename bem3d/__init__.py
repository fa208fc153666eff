"""bem3d: capacitance matrices and field energy of 3D conductors from surface meshes."""

__version__ = "0.1.0"
