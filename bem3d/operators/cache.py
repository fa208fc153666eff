"""On-disk cache of assembled operators, their preconditioner and solution, as plain arrays.

An entry is one numpy .npz file (no pickles) named by a SHA-256 key of the panel geometry and
of every setting the arrays depend on; the file repeats the key and the format version, and
zip's CRC-32 of every member is checked while it is read. A stale, corrupt or unreadable entry
counts as missing: it is deleted and rebuilt; an entry that cannot be written costs a
rebuild next time, never the run. Temporary files of killed runs are swept on the next save. Location: $BEM3D_CACHE_DIR, else
$XDG_CACHE_HOME/bem3d, else ~/.cache/bem3d. Deleting the folder clears the cache.
"""

import hashlib
import json
import os
import tempfile
import zipfile
from pathlib import Path

import numpy as np

from bem3d.base.cache_folders import user_cache_folder
from bem3d.base.files import TEMP_PREFIX, sweep_leftovers

#: Bumped whenever the stored arrays change meaning, so that old entries are rebuilt.
FORMAT = 5


def default_folder():
    """The cache folder: $BEM3D_CACHE_DIR, else $XDG_CACHE_HOME/bem3d, else ~/.cache/bem3d."""
    if os.environ.get("BEM3D_CACHE_DIR"):
        return Path(os.environ["BEM3D_CACHE_DIR"])
    return user_cache_folder()


def cache_key(panels, settings):
    """Hex SHA-256 of the panels' corners (m), conductor ownership and the settings (a dict
    of JSON-ready values), together with the cache format."""
    h = hashlib.sha256()
    h.update(np.ascontiguousarray(panels.vertices, np.float64).tobytes())
    h.update(np.ascontiguousarray(panels.owner, np.int64).tobytes())
    h.update(json.dumps({"format": FORMAT, **settings}, sort_keys=True).encode())
    return h.hexdigest()


class OperatorCache:
    """Entries of plain arrays under folder (default_folder() if None), one file per key."""

    def __init__(self, folder=None):
        self.folder = Path(folder) if folder is not None else default_folder()

    def path(self, key):
        return self.folder / f"{key}.npz"

    def load(self, key, names):
        """The arrays stored under key as a dict, or None if absent, stale or corrupt.

        names: the arrays the caller needs; an entry lacking one is stale."""
        path = self.path(key)
        if not path.exists():
            return None
        try:
            with np.load(path, allow_pickle=False) as data:
                if (str(data["key"]) != key or int(data["format"]) != FORMAT
                        or not set(names) <= set(data.files)):
                    raise ValueError("stale entry")
                return {name: data[name] for name in names}
        # zipfile raises RuntimeError ('encrypted' member) or NotImplementedError (other
        # header flag bits) for a damaged member header
        except (OSError, ValueError, KeyError, EOFError, RuntimeError, NotImplementedError,
                zipfile.BadZipFile):
            try:
                path.unlink(missing_ok=True)
            except OSError:              # a folder in its place, or a read-only cache
                pass
            return None

    def save(self, key, arrays):
        """Store arrays under key: written to a temporary file in the folder, then renamed, so
        an entry is complete or absent. Returns the path."""
        self.folder.mkdir(parents=True, exist_ok=True)
        sweep_leftovers(self.folder)     # entries of killed runs can be gigabytes
        fd, tmp = tempfile.mkstemp(prefix=f"{TEMP_PREFIX}{os.getpid()}-", suffix=".npz",
                                   dir=self.folder)
        try:
            with os.fdopen(fd, "wb") as fh:
                np.savez(fh, key=np.array(key), format=np.array(FORMAT), **arrays)
            os.replace(tmp, self.path(key))
        finally:
            if os.path.exists(tmp):
                os.unlink(tmp)
        return self.path(key)
