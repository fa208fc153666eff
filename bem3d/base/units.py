"""Readable engineering units for capacitance, charge and energy."""

import numpy as np

_PREFIXES = [(1e-18, "a"), (1e-15, "f"), (1e-12, "p"), (1e-9, "n"), (1e-6, "u"), (1e-3, "m"),
             (1.0, ""), (1e3, "k"), (1e6, "M"), (1e9, "G")]


def prefix_for(values):
    """(scale, prefix) so that the largest |value| shows between 1 and 1000."""
    top = float(np.max(np.abs(values))) if np.size(values) else 0.0
    chosen = _PREFIXES[0]
    for scale, prefix in _PREFIXES:
        if top >= scale:
            chosen = (scale, prefix)
    return chosen


def format_quantity(value, unit):
    """'12.34 fF' style text for one value in SI base units."""
    if value == 0:
        return f"0 {unit}"
    scale, prefix = prefix_for([value])
    return f"{value / scale:.5g} {prefix}{unit}"
