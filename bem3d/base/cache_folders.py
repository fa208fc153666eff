"""Where bem3d keeps what it can rebuild: assembled operators and Numba's compiled kernels."""

import os
import sys
import tempfile
from pathlib import Path

#: The kernels' source folder: Numba caches their machine code in its __pycache__ by default.
KERNELS_FOLDER = Path(__file__).resolve().parent.parent / "kernels"


def user_cache_folder():
    """bem3d's folder under the user's cache: $XDG_CACHE_HOME/bem3d, else ~/.cache/bem3d."""
    base = os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache"
    return Path(base) / "bem3d"


def _writable(folder):
    """Can files be made in folder (created if missing)? The test Numba makes of its cache."""
    try:
        folder.mkdir(parents=True, exist_ok=True)
        tempfile.TemporaryFile(dir=folder).close()
    except OSError:
        return False
    return True


def choose_numba_cache(kernels_folder=KERNELS_FOLDER, environ=os.environ):
    """Point Numba's cache at user_cache_folder()/numba (environ['NUMBA_CACHE_DIR']) when the
    kernels' __pycache__ cannot be written (an installation owned by another user) and no
    NUMBA_CACHE_DIR is set. Returns the folder chosen, or None.

    Run before the kernels are defined: Numba picks each kernel's cache when it is decorated."""
    if environ.get("NUMBA_CACHE_DIR") or _writable(kernels_folder / "__pycache__"):
        return None
    folder = user_cache_folder() / "numba"
    environ["NUMBA_CACHE_DIR"] = str(folder)
    if "numba.core.config" in sys.modules:      # numba read its settings before bem3d came
        sys.modules["numba.core.config"].reload_config()
    return folder
