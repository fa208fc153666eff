"""Pieces of the one-line messages about panels: places, and the file each conductor came from."""

import os

import numpy as np

from bem3d.base.constants import LENGTH_UNITS


def point_text(x, unit="m"):
    """A point (3,) given in metres, as text in the length unit `unit`."""
    scale = LENGTH_UNITS[unit]
    return "(" + ", ".join(f"{c / scale:.6g}" for c in x) + f") {unit}"


def length_text(value, unit="m"):
    """A length given in metres, as text in the length unit `unit`."""
    return f"{value / LENGTH_UNITS[unit]:.3g} {unit}"


def nonfinite_message(source, bad):
    """The message for panels (mask bad) with NaN or infinite coordinates."""
    first = int(np.flatnonzero(bad)[0])
    return (f"{source}: {int(bad.sum())} panel(s) with NaN or infinite coordinates, "
            f"the first is panel {first}")


def conductor_sources(panels, source):
    """The source label of each conductor."""
    if isinstance(source, (str, os.PathLike)):
        return [str(source)] * panels.n_conductors
    source = [str(s) for s in source]
    if len(source) != panels.n_conductors:
        raise ValueError(f"{len(source)} sources given for {panels.n_conductors} conductors")
    return source
