"""A result with a NaN or infinite number is refused, never written."""

import math

from bem3d.base.errors import Bem3dError


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
