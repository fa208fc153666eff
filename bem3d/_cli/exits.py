"""The command line's exit codes and the one-line message of each expected failure.

0 the run finished; 2 bad input (the user can fix the request or the files); 3 the machine or
its files failed (any OSError such as a full disk or an unwritable folder, out of memory,
recursion too deep); 4 a sweep finished but some of its cases failed; 130 interrupted (Ctrl-C);
141 the reader of the output closed it early (`| head`), as for any program ended by SIGPIPE.
Anything else escaping is a bug: Python's traceback and exit code 1.
"""

import errno

from bem3d.base.errors import Bem3dError

OK = 0
BAD_INPUT = 2
ENVIRONMENT = 3
CASES_FAILED = 4
INTERRUPTED = 130
CLOSED_PIPE = 141

#: Extra words for the errno values a user meets most, where strerror alone is terse.
_HINTS = {errno.ENOSPC: "the disk is full", errno.EDQUOT: "the disk quota is exhausted",
          errno.EROFS: "the file system is read-only"}


def classify(err, spell):
    """(exit code, message) of an expected failure, or None for a bug.

    spell(keyword) gives the command-line flag of an API keyword (see base.errors.option)."""
    if isinstance(err, Bem3dError):
        return BAD_INPUT, err.render(spell)
    if isinstance(err, MemoryError):
        return ENVIRONMENT, "out of memory; try a coarser mesh, grid or fewer points"
    if isinstance(err, RecursionError):
        return ENVIRONMENT, "the input is nested too deeply to process"
    if isinstance(err, OSError):
        return ENVIRONMENT, os_error_text(err)
    return None


def os_error_text(err):
    """'<file>: <reason>' of an OSError, with a hint for a full disk or read-only file system."""
    reason = err.strerror or str(err) or type(err).__name__
    hint = _HINTS.get(err.errno)
    if hint and hint not in reason:
        reason += f" ({hint})"
    where = err.filename if err.filename is not None else None
    return f"{where}: {reason}" if where is not None else reason
