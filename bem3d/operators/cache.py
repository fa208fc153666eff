"""On-disk cache of assembled operators, their preconditioner and solution, as plain arrays.

An entry is one numpy .npz file (no pickles) named by a SHA-256 key of the panel geometry and
of every setting the arrays depend on; the file repeats the key and the format version, and
zip's CRC-32 of every member is checked while it is read. A stale, corrupt or unreadable entry
counts as missing: it is deleted and rebuilt; an entry that cannot be written costs a
rebuild next time, never the run. Temporary files of killed runs are swept on the next save. Location: $BEM3D_CACHE_DIR, else
$XDG_CACHE_HOME/bem3d, else ~/.cache/bem3d. Deleting the folder clears the cache.

The entries together are kept under a size cap ($BEM3D_CACHE_MAX_GB, default 4 GB): after
each store the least recently used entries are deleted until the rest fit, never the one just
stored. An entry's modification time is its last use: a load touches it (access times are
often not kept by the file system).
"""

import hashlib
import json
import math
import os
import tempfile
import time
import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bem3d.base.cache_folders import user_cache_folder
from bem3d.base.errors import ModelError, option
from bem3d.base.files import TEMP_PREFIX, sweep_leftovers

#: Bumped whenever the stored arrays change meaning, so that old entries are rebuilt.
FORMAT = 5
#: Size cap of the entries together, in GB (10^9 bytes), unless $BEM3D_CACHE_MAX_GB says.
DEFAULT_MAX_GB = 4.0


def default_folder():
    """The cache folder: $BEM3D_CACHE_DIR, else $XDG_CACHE_HOME/bem3d, else ~/.cache/bem3d."""
    if os.environ.get("BEM3D_CACHE_DIR"):
        return Path(os.environ["BEM3D_CACHE_DIR"])
    return user_cache_folder()


def size_cap(max_gb=None):
    """The cap in bytes: max_gb, else $BEM3D_CACHE_MAX_GB, else DEFAULT_MAX_GB. ModelError for
    a value that is not a positive number."""
    if max_gb is not None:
        what, text = option("cache_max"), max_gb
    else:
        what, text = "BEM3D_CACHE_MAX_GB", os.environ.get("BEM3D_CACHE_MAX_GB") or DEFAULT_MAX_GB
    try:
        gb = float(text)
    except ValueError:
        gb = float("nan")
    if not 0 < gb < float("inf"):
        raise ModelError(f"{what} must be a positive number of GB, got {text!r}")
    return int(gb * 1e9)


@dataclass(frozen=True)
class Entry:
    """One cache file: its path, size (bytes) and last use (seconds since the epoch)."""

    path: Path
    size: int
    last_used: float


def cache_key(panels, settings):
    """Hex SHA-256 of the panels' corners (m), conductor ownership and the settings (a dict
    of JSON-ready values), together with the cache format."""
    h = hashlib.sha256()
    h.update(np.ascontiguousarray(panels.vertices, np.float64).tobytes())
    h.update(np.ascontiguousarray(panels.owner, np.int64).tobytes())
    h.update(json.dumps({"format": FORMAT, **settings}, sort_keys=True).encode())
    return h.hexdigest()


class OperatorCache:
    """Entries of plain arrays under folder (default_folder() if None), one file per key, at
    most max_bytes together (size_cap() if None)."""

    def __init__(self, folder=None, max_bytes=None):
        self.folder = Path(folder) if folder is not None else default_folder()
        self.max_bytes = size_cap() if max_bytes is None else max_bytes

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
                arrays = {name: data[name] for name in names}
        # zipfile raises RuntimeError ('encrypted' member) or NotImplementedError (other
        # header flag bits) for a damaged member header
        except (OSError, ValueError, KeyError, EOFError, RuntimeError, NotImplementedError,
                zipfile.BadZipFile):
            _remove(path)                # stays if a folder is in its place or read-only
            return None
        try:
            os.utime(path)               # its last use, for the eviction order
        except OSError:                  # a read-only cache keeps its order
            pass
        return arrays

    def save(self, key, arrays):
        """Store arrays under key: written to a temporary file in the folder, then renamed, so
        an entry is complete or absent; then older entries are evicted down to the cap.
        Returns the path."""
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
        self.evict(keep=self.path(key))
        return self.path(key)

    def entries(self):
        """The entries, least recently used first (temporary files of running saves are not
        entries)."""
        found = []
        try:
            paths = list(self.folder.glob("*.npz"))
        except OSError:
            return found
        for path in paths:
            if path.name.startswith("."):
                continue
            try:
                st = path.stat()
            except OSError:               # removed meanwhile by another run
                continue
            found.append(Entry(path, st.st_size, st.st_mtime))
        return sorted(found, key=lambda e: (e.last_used, e.path.name))

    def evict(self, keep=None):
        """Delete least recently used entries until the rest fit under max_bytes, never the
        entry at path keep. Returns the entries deleted."""
        entries = self.entries()
        total = sum(e.size for e in entries)
        removed = []
        for entry in entries:
            if total <= self.max_bytes:
                break
            if entry.path == keep:
                continue
            if _remove(entry.path):
                removed.append(entry)
                total -= entry.size
        return removed

    def clear(self, older_than_days=None):
        """Delete every entry, or those last used more than older_than_days ago. Returns the
        entries deleted."""
        limit = math.inf if older_than_days is None else time.time() - older_than_days * 86400
        return [e for e in self.entries() if e.last_used < limit and _remove(e.path)]


def _remove(path):
    """Delete an entry; False if it cannot be (a read-only cache). A run still reading it keeps
    its open file."""
    try:
        path.unlink(missing_ok=True)
    except OSError:
        return False
    return True
