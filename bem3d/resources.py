"""Memory the machine can give us, and peak memory this process used."""

import os
import resource


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
