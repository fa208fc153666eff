"""Files written safely: atomic single files, and a run's outputs staged and moved into place together.

The output folder rule: bem3d never overwrites one of its inputs, never writes outside the
chosen folder, and does not replace the results of an earlier run there unless forced. All
files of a run are written into a hidden staging folder inside the output folder and moved into
place together at the end; after an error or Ctrl-C the staging folder is removed (and the
output folder too if this run created it), so a run leaves all of its files or none.
"""

import os
import shutil
import signal
import tempfile
import threading
from contextlib import contextmanager
from pathlib import Path

from bem3d.base.errors import ModelError, option

_UMASK = os.umask(0o022)


@contextmanager
def atomic_path(target):
    """Yield a temporary path beside target (same suffix); it replaces target only on success."""
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.stem}.", suffix=target.suffix, dir=target.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        os.chmod(tmp, 0o666 & ~_UMASK)       # mkstemp makes files private; outputs are not
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def write_text(target, text):
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")


#: Name prefix of the staging folder inside the output folder.
STAGE_PREFIX = ".bem3d-partial-"


def check_output_folder(folder, inputs, planned, force=False):
    """Before a run: refuse an output folder that is a file, a planned output that is one of
    the run's inputs, and (unless force) a folder already holding a planned output.

    inputs: paths the run reads; planned: names of files the run will write in the folder."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise ModelError(f"{folder}: the output folder is a file")
    _refuse_overwrites(folder, list(planned), inputs, force)


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
    stage = Path(tempfile.mkdtemp(prefix=STAGE_PREFIX, dir=folder))
    done = False
    try:
        yield stage
        names = sorted(os.listdir(stage))
        _refuse_overwrites(folder, names, inputs, force)
        with _interrupts_held():
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
