"""Terminal-safe output: conductor names, file names and messages may hold escape sequences,
which must reach the terminal as visible text, never as commands."""

import sys
from contextlib import contextmanager

from bem3d.export.names import terminal_text

#: Line breaks, carriage return (progress bars) and tabs pass; every other control is escaped.
_LAYOUT = "\n\r\t"


class _SafeStream:
    """A text stream that escapes control characters on their way to the wrapped stream."""

    def __init__(self, stream):
        self._stream = stream

    def write(self, text):
        return self._stream.write(terminal_text(text, keep=_LAYOUT))

    def __getattr__(self, name):
        return getattr(self._stream, name)


@contextmanager
def safe_streams():
    """Route sys.stdout and sys.stderr through _SafeStream for the block."""
    saved = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = _SafeStream(saved[0]), _SafeStream(saved[1])
    try:
        yield
    finally:
        sys.stdout, sys.stderr = saved
