"""Compiling of the Numba kernels, noticed as it happens, announced and timed.

Numba compiles a kernel on its first call and keeps the machine code in its cache (see
base.cache_folders for where), so only a run with an empty cache compiles, for tens of seconds.
Numba raises a compile event around each compilation and none for a load from its cache;
one listener for the whole process sums the time of the outermost events (a kernel's compile
holds those of the kernels it calls). Stage timings subtract it, so that `timings_s` reports
compiling apart from assembly and solve.
"""

import sys
import time
from contextlib import contextmanager

from numba.core import event

#: Seconds of compiling with an empty cache, by path, on the project's 2-core machine shared
#: with other work (tools/bench_cold.py; 'fields' is what the field map adds to the dense path).
COLD_COMPILE_SECONDS = {"dense": 15, "compressed": 60, "dielectric": 80, "fields": 5}


class _CompileListener(event.Listener):
    """Sums the wall time of outermost compilations; the first one of an announced block
    prints its announcement. Numba compiles under one global lock, so events do not
    interleave between threads."""

    def __init__(self):
        self.seconds = 0.0
        self.announcement = None
        self._depth = 0
        self._began = 0.0

    def on_start(self, _event):
        self._depth += 1
        if self._depth == 1:
            self._began = time.perf_counter()
            if self.announcement:
                print(self.announcement, file=sys.stderr, flush=True)
                self.announcement = None

    def on_end(self, _event):
        self._depth -= 1
        if self._depth == 0:
            self.seconds += time.perf_counter() - self._began


_LISTENER = _CompileListener()
event.register("numba:compile", _LISTENER)


def clock():
    """A mark for seconds_since and compile_seconds_since: the time now and the compiling so
    far."""
    return time.perf_counter(), _LISTENER.seconds


def compile_seconds_since(mark):
    """Seconds spent compiling kernels since mark (a clock())."""
    return _LISTENER.seconds - mark[1]


def seconds_since(mark):
    """Wall seconds since mark (a clock()), leaving out the time spent compiling kernels."""
    return time.perf_counter() - mark[0] - compile_seconds_since(mark)


@contextmanager
def announce_compiling(path, progress):
    """Within the block, print one line on stderr when kernels start compiling (progress only).

    path: a key of COLD_COMPILE_SECONDS, for the expected duration."""
    saved = _LISTENER.announcement
    if progress:
        _LISTENER.announcement = (f"compiling kernels for the {path} path (first run only, "
                                  f"about {COLD_COMPILE_SECONDS[path]:.0f} s)")
    try:
        yield
    finally:
        _LISTENER.announcement = saved
