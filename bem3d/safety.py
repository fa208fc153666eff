"""Guards around a run: memory and panel limits, a time estimate, finite results, and the output
folder.

The output folder rule: bem3d never overwrites one of its inputs, never writes outside the
chosen folder, and does not replace the results of an earlier run there unless forced. All
files of a run are written into a hidden staging folder inside the output folder and moved into
place together at the end; after an error or Ctrl-C the staging folder is removed (and the
output folder too if this run created it), so a run leaves all of its files or none.
"""

import math
import os
import shutil
import signal
import tempfile
import threading
from contextlib import contextmanager
from pathlib import Path

from .errors import Bem3dError, ModelError, ResourceError
from .resources import available_memory

#: Runs expected to take longer than this many seconds are announced with an estimate first.
ANNOUNCE_SECONDS = 10.0
#: Dense assembly: panel pairs per second per thread; measured on this project's 2-core
#: machine (a 8,192-panel sphere assembled in 3.8 s on 2 threads).
PAIR_RATE_PER_THREAD = 8.7e6
#: Cholesky factorisation: floating-point operations per second per thread; measured there too
#: (8,192 panels, N^3/3 flops, 26 s on 2 threads).
FLOP_RATE_PER_THREAD = 3.5e9
#: Conjugate gradients: iterations of a typical run (measured 18-50 on spheres and the demo) and
#: bytes of matrix streamed per second in each product (measured: 21 products of a 0.5 GiB
#: matrix in 1.1 s).
CG_ITERATIONS = 50
MATRIX_BYTES_PER_SECOND = 1e10
#: Compressed backend: thread-seconds per N log2 N of assembly, and of one CG iteration with
#: five right-hand sides; measured on this project's 2-core machine (tools/bench_scale.py: a
#: 131,072-panel sphere assembled in 24.8 s; the 129,296-panel sensor head, five conductors,
#: 48 iterations in 20.9 s).
COMPRESSED_ASSEMBLY_SECONDS = 2.2e-5
COMPRESSED_ITERATION_SECONDS = 4.0e-7
#: Field evaluation: seconds per point-panel pair on one thread, a fixed part plus a part per
#: excitation; measured there (8,192 panels x 40,000 points: 2.35 s with one excitation,
#: 9.8 s with six, on 2 threads).
FIELD_PAIR_SECONDS = (5.2e-9, 9.0e-9)
#: Name prefix of the staging folder inside the output folder.
STAGE_PREFIX = ".bem3d-partial-"


def require_memory(need, what):
    """Raise ResourceError unless `need` bytes fit in the share of available memory a run may
    plan to use. what: the start of the message, naming the file or the request."""
    from .pipeline import MEMORY_FRACTION

    have = available_memory()
    if need > MEMORY_FRACTION * have:
        raise ResourceError(f"{what} would need {_size(need)}, more than "
                            f"{MEMORY_FRACTION:.0%} of the {_size(have)} available")


def _size(n_bytes):
    """A number of bytes as text in KiB, MiB or GiB, to three significant figures."""
    for unit, size in (("GiB", 2**30), ("MiB", 2**20)):
        if n_bytes >= size:
            return f"{n_bytes / size:.3g} {unit}"
    return f"{n_bytes / 2**10:.3g} KiB"


def check_panel_count(n_panels, max_panels, label):
    """Raise ResourceError if n_panels exceeds max_panels (None: no limit)."""
    if max_panels is not None and n_panels > max_panels:
        raise ResourceError(f"{label}: {n_panels:,} panels, more than the limit of "
                            f"{max_panels:,} (--max-panels)")


def threads():
    """Threads the numba kernels use."""
    import numba

    return numba.get_num_threads()


def estimate_seconds(n_panels, solver="direct", n_points=0, excitations=1, n_threads=None,
                     backend="dense"):
    """Expected wall time (s) of a run, by stage: {'assembly', 'Cholesky' or 'CG', 'fields'};
    stages that cost nothing are left out.

    solver: 'direct' (Cholesky) or 'cg'; n_points: field points; excitations: right-hand sides
    evaluated at each point; backend: 'dense' or 'compressed'. Rates are this project's
    measured ones scaled by the thread count, so other machines differ by their speed per
    core; CG assumes a typical iteration count."""
    n_threads = n_threads or threads()
    fixed, per_excitation = FIELD_PAIR_SECONDS
    if backend == "compressed":
        work = n_panels * math.log2(max(n_panels, 2)) / n_threads
        stages = {"assembly": work * COMPRESSED_ASSEMBLY_SECONDS,
                  "CG": work * CG_ITERATIONS * COMPRESSED_ITERATION_SECONDS}
    else:
        stages = {"assembly": n_panels**2 / (PAIR_RATE_PER_THREAD * n_threads)}
        if solver == "direct":
            stages["Cholesky"] = n_panels**3 / 3 / (FLOP_RATE_PER_THREAD * n_threads)
        else:
            stages["CG"] = CG_ITERATIONS * 8 * n_panels**2 / MATRIX_BYTES_PER_SECOND
    stages["fields"] = n_points * n_panels * (fixed + per_excitation * excitations) / n_threads
    return {k: v for k, v in stages.items() if v > 0}


def describe_estimate(stages, n_threads=None):
    """One line such as 'estimated time: about 3 min (assembly 2 min, ...) on 2 threads', or
    None when the whole run is expected to take less than ANNOUNCE_SECONDS."""
    total = sum(stages.values())
    if total < ANNOUNCE_SECONDS:
        return None
    parts = ", ".join(f"{name} {_duration(t)}" for name, t in stages.items())
    return (f"estimated time: about {_duration(total)} ({parts}) on {n_threads or threads()} "
            "threads; Ctrl-C stops cleanly")


def _duration(seconds):
    """A duration as text in s, min or h, to two significant figures."""
    for unit, size in (("h", 3600.0), ("min", 60.0)):
        if seconds >= size:
            return f"{seconds / size:.2g} {unit}"
    return f"{seconds:.2g} s"


def require_finite(record, label):
    """Raise Bem3dError if any number in the nested dict/list `record` is NaN or infinite.

    A result the arithmetic could not represent must not be written as if it were one."""
    for path, value in _numbers(record, ""):
        if not math.isfinite(value):
            raise Bem3dError(f"{label}: the computed {path} is {value}; the geometry or the "
                             "permittivity is outside what the arithmetic can represent")


def _numbers(value, path):
    """(path, float) for every float in nested dicts and lists (bools and ints are exact)."""
    if isinstance(value, float):
        yield path, value
    elif isinstance(value, dict):
        for key, item in value.items():
            yield from _numbers(item, f"{path}.{key}" if path else str(key))
    elif isinstance(value, (list, tuple)):
        for i, item in enumerate(value):
            yield from _numbers(item, f"{path}[{i}]")


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
                         "earlier run?); choose another output folder or pass --force to "
                         "replace them")


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
