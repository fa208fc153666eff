"""bem3d: capacitance matrices and field energy of 3D conductors from surface meshes.

    import bem3d
    result = bem3d.extract(["pad.stl", "lid.stl"], units="mm", volts={"pad": 5.0})
    result.maxwell, result.mutual, result.energy        # F, F, J

Lengths are in the model's unit going in and coming out; quantities are SI.
"""

from bem3d.base.cache_folders import choose_numba_cache

choose_numba_cache()         # before any kernel is defined: Numba reads the setting then

from bem3d.api import Geometry, converge, extract, field, read, sweep  # noqa: E402
from bem3d.base.errors import Bem3dError, MeshError, ModelError, ResourceError  # noqa: E402
from bem3d.base.version import __version__  # noqa: E402
from bem3d.model import Model  # noqa: E402
from bem3d.result import FieldResult, Result  # noqa: E402

__all__ = ["extract", "field", "sweep", "converge", "read", "Result", "FieldResult", "Geometry", "Model",
           "Bem3dError", "MeshError", "ModelError", "ResourceError", "__version__"]
