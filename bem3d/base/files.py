"""Files written and read safely: every write of bem3d goes through here.

Writes: a file is written to a temporary file beside its target, checked (the writer raised
nothing and the file is not empty or short), then renamed over the target, so a target is the
old file or the whole new one. A failed write (a full disk) raises OSError.

The output folder rule: bem3d never overwrites one of its inputs, never writes outside the
chosen folder, and does not replace the results of an earlier run there unless forced. All
files of a run are written into a hidden staging folder inside the output folder and moved into
place together at the end, result.json (the mark of a complete result) removed first and put
back last; after an error or Ctrl-C the staging folder is removed (and the output folder too if
this run created it), so a run leaves all of its files or none. Temporary files and staging
folders left by a killed run are swept when the next run checks the folder.

Reads: input files must be regular files (links resolved; a FIFO or device is refused, it
could block or never end) of bounded size.
"""

import errno
import os
import shutil
import signal
import stat
import tempfile
import threading
import time
from contextlib import contextmanager
from pathlib import Path

from bem3d.base.errors import MeshError, ModelError, option

_UMASK = os.umask(0o022)
os.umask(_UMASK)
#: Name prefixes of bem3d's temporary files and staging folders; the process id follows, so a
#: later run can tell a killed run's leftovers from a live run's files.
TEMP_PREFIX = ".bem3d-tmp-"
STAGE_PREFIX = ".bem3d-partial-"
#: Leftovers older than this are swept even if their process id is alive again (reused).
STALE_SECONDS = 24 * 3600
#: The file that marks a result folder as complete: moved into place last.
RESULT_MARK = "result.json"
#: Largest mesh file read: a binary STL of 80 million panels (10^6 panels take about 0.1 GB).
MAX_MESH_BYTES = 4 << 30


def _temp_prefix(kind):
    return f"{kind}{os.getpid()}-"


@contextmanager
def atomic_path(target):
    """Yield a temporary path beside target (same suffix); it replaces target only if the block
    raised nothing and the file is not empty (OSError otherwise)."""
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=_temp_prefix(TEMP_PREFIX), suffix=target.suffix,
                               dir=target.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        if os.path.getsize(tmp) == 0:        # a writer that failed quietly (VTK does)
            raise OSError(errno.EIO, "the file came out empty (is the disk full?)", str(target))
        os.chmod(tmp, 0o666 & ~_UMASK)       # mkstemp makes files private; outputs are not
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def write_bytes(target, data):
    """Write data to target atomically; a short write is an OSError."""
    with atomic_path(target) as tmp:
        with open(tmp, "wb") as fh:
            written = fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        if written != len(data) or os.path.getsize(tmp) != len(data):
            raise OSError(errno.EIO, f"short write ({written} of {len(data)} bytes)",
                          str(target))


def write_text(target, text):
    """Write text (UTF-8) to target atomically and checked (write_bytes)."""
    write_bytes(target, text.encode("utf-8"))


def check_output_folder(folder, inputs, planned, force=False):
    """Before a run: refuse an output folder that is a file or cannot be written, a planned
    output that is one of the run's inputs, and (unless force) a folder already holding a
    planned output. Sweeps the leftovers of killed runs from the folder.

    inputs: paths the run reads; planned: names of files the run will write in the folder."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise ModelError(f"{folder}: the output folder is a file")
    require_writable(folder)
    sweep_leftovers(folder)
    _refuse_overwrites(folder, list(planned), inputs, force)


def require_writable(folder):
    """Raise OSError unless files can be created in folder, or (if it does not exist yet) in
    the nearest existing folder above it: tried, so read-only mounts and permissions for
    root count alike. Leaves nothing behind."""
    folder = Path(folder).absolute()
    existing = folder
    while not existing.exists():
        existing = existing.parent
    if not existing.is_dir():
        raise ModelError(f"{folder}: {existing} is a file, not a folder")
    try:
        fd, probe = tempfile.mkstemp(prefix=_temp_prefix(TEMP_PREFIX), dir=existing)
    except OSError as err:
        raise OSError(err.errno, f"cannot write in this folder ({err.strerror})",
                      str(existing)) from None
    os.close(fd)
    os.unlink(probe)


def sweep_leftovers(folder):
    """Remove bem3d's temporary files and staging folders in folder whose process is gone (or
    that are older than STALE_SECONDS). Returns how many were removed; never raises."""
    removed = 0
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return 0
    for entry in entries:
        prefix = next((p for p in (TEMP_PREFIX, STAGE_PREFIX) if entry.name.startswith(p)),
                      None)
        if prefix is None or not _stale(entry, prefix):
            continue
        try:
            if entry.is_dir(follow_symlinks=False):
                shutil.rmtree(entry.path)
            else:
                os.unlink(entry.path)
            removed += 1
        except OSError:
            pass
    return removed


def _stale(entry, prefix):
    pid = entry.name[len(prefix):].partition("-")[0]
    try:
        age = time.time() - entry.stat(follow_symlinks=False).st_mtime
    except OSError:
        return False
    if age > STALE_SECONDS:
        return True
    if not pid.isdigit():
        return False
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return True
    except OSError:                      # alive, owned by someone else
        return False
    return False


def _refuse_overwrites(folder, names, inputs, force):
    """Raise if a file `names` in folder is an input, is a folder, or (unless force) exists."""
    existing = [n for n in names if os.path.lexists(folder / n)]
    for name in existing:
        target = folder / name
        for source in inputs:
            if Path(source).exists() and target.exists() and os.path.samefile(target, source):
                raise ModelError(f"{target}: is an input of this run and would be overwritten; "
                                 "choose another output folder")
        if target.is_dir():
            raise ModelError(f"{target}: a folder stands where an output file goes")
    if existing and not force:
        raise ModelError(f"{folder}: already holds {', '.join(existing)} (results of an "
                         f"earlier run?); choose another output folder or pass {option('force')} "
                         "to replace them")


@contextmanager
def staged_outputs(folder, inputs, force=False):
    """Yield an empty staging folder inside `folder` for all of a run's outputs.

    On success they are moved into `folder` together (Ctrl-C is held off during the moves),
    after the same checks as check_output_folder on every file actually written. On any error
    or interrupt nothing is moved, the staging folder is removed, and so is every folder this
    run created."""
    folder = Path(folder)
    created = _make_folders(folder)
    stage = Path(tempfile.mkdtemp(prefix=_temp_prefix(STAGE_PREFIX), dir=folder))
    done = False
    try:
        yield stage
        names = sorted(os.listdir(stage), key=lambda n: (n == RESULT_MARK, n))
        _refuse_overwrites(folder, names, inputs, force)
        with _interrupts_held():
            # a kill during the moves leaves no result.json: an incomplete folder shows it
            if RESULT_MARK in names and os.path.lexists(folder / RESULT_MARK):
                os.unlink(folder / RESULT_MARK)
            for name in names:
                os.replace(stage / name, folder / name)
            done = True
    finally:
        shutil.rmtree(stage, ignore_errors=True)
        if not done:
            for path in reversed(created):
                try:
                    path.rmdir()
                except OSError:          # not empty: something else was put there meanwhile
                    break


def _make_folders(folder):
    """Create folder and missing parents; return the ones created, outermost first."""
    missing = []
    path = folder
    while not path.exists():
        missing.append(path)
        path = path.parent
    created = []
    for path in reversed(missing):
        try:
            path.mkdir()
        except FileExistsError:          # made meanwhile by someone else: not ours to remove
            continue
        created.append(path)
    return created


@contextmanager
def _interrupts_held():
    """Hold Ctrl-C (SIGINT) until the block ends, then raise KeyboardInterrupt if it came.

    Signal handlers can only be set from the main thread; elsewhere the block runs as is."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught = []
    previous = signal.signal(signal.SIGINT, lambda *_: caught.append(True))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous if previous is not None
                      else signal.default_int_handler)
    if caught:
        raise KeyboardInterrupt


def regular_file(path, limit, what="file", error=ModelError):
    """The size of path in bytes after checking that it is a regular file (links resolved) of
    at most `limit` bytes; error(message) otherwise. A FIFO would block the read and a device
    such as /dev/zero never ends, so both are refused without reading."""
    path = Path(path)
    try:
        fd = os.open(path, os.O_RDONLY | os.O_NONBLOCK)   # a FIFO opens without a writer
    except FileNotFoundError:
        raise error(f"{path}: {what} not found") from None
    except OSError as err:
        raise error(f"{path}: cannot read {what} ({err.strerror or err})") from None
    try:
        info = os.fstat(fd)
    finally:
        os.close(fd)
    if not stat.S_ISREG(info.st_mode):
        raise error(f"{path}: not a regular file (a folder, FIFO or device); give a {what}")
    if info.st_size > limit:
        raise error(f"{path}: {info.st_size:,} bytes, more than the {limit:,} a {what} may "
                    "have")
    return info.st_size


def read_regular(path, limit, what="file", error=ModelError):
    """The bytes of a regular file of at most `limit` bytes (see regular_file)."""
    regular_file(path, limit, what, error)
    try:
        with open(path, "rb") as fh:
            data = fh.read(limit + 1)
    except OSError as err:
        raise error(f"{path}: cannot read {what} ({err.strerror or err})") from None
    if len(data) > limit:                # grew since it was checked
        raise error(f"{path}: more than the {limit:,} bytes a {what} may have")
    return data


def check_mesh_file(path):
    """Raise MeshError unless path is a regular file of at most MAX_MESH_BYTES."""
    regular_file(path, MAX_MESH_BYTES, "mesh file", MeshError)


def file_digest(path, hasher):
    """hasher (hashlib object) fed with the bytes of a checked mesh file, read in pieces."""
    check_mesh_file(path)
    try:
        with open(path, "rb") as fh:
            while chunk := fh.read(1 << 20):
                hasher.update(chunk)
    except OSError as err:
        raise MeshError(f"{path}: cannot read ({err.strerror or err})") from None
    return hasher.hexdigest()
