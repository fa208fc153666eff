"""Memory: what the machine can give, what this process used, and the one budget a run plans in."""

import os
import resource

from bem3d.base.errors import ResourceError, option

#: Share of the available memory a run may plan to use.
MEMORY_FRACTION = 0.6


def available_memory():
    """Bytes of memory available to new allocations (MemAvailable on Linux)."""
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_AVPHYS_PAGES")


def peak_memory():
    """Peak resident memory of this process so far, bytes (Linux reports KiB)."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def format_bytes(n_bytes):
    """A number of bytes as text in KiB, MiB or GiB, to three significant figures."""
    for unit, size in (("GiB", 2**30), ("MiB", 2**20)):
        if n_bytes >= size:
            return f"{n_bytes / size:.3g} {unit}"
    return f"{n_bytes / 2**10:.3g} KiB"


def require_memory(need, what, advice=None, have=None):
    """Raise ResourceError (one line) unless `need` bytes fit in MEMORY_FRACTION of the
    available memory (`have` bytes, measured when None). what: the start of the message,
    naming the file or the request; advice: what the user can do about it."""
    have = available_memory() if have is None else have
    if need > MEMORY_FRACTION * have:
        raise ResourceError(f"{what} would need {format_bytes(need)}, more than "
                            f"{MEMORY_FRACTION:.0%} of the {format_bytes(have)} available"
                            + (f"; {advice}" if advice else ""))


def check_panel_count(n_panels, max_panels, label):
    """Raise ResourceError if n_panels exceeds max_panels (None: no limit)."""
    if max_panels is not None and n_panels > max_panels:
        raise ResourceError(f"{label}: {n_panels:,} panels, more than the limit of "
                            f"{max_panels:,} ({option('max_panels')})")
