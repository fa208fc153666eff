"""The sweep's syntax: values, variations (moves) and matrix entries, parsed from text."""

import math
from dataclasses import dataclass

import numpy as np

from bem3d.base.errors import ModelError, option

#: Most cases one sweep may have: each keeps a folder of files and a summary row.
MAX_CASES = 100_000


def parse_values(text, what):
    """Numbers from 'a,b,c' or 'start:stop:count' (count >= 2 values, both ends included)."""
    parts = text.split(":")
    try:
        if len(parts) == 3:
            count = int(parts[2])
            if count < 2:
                raise ValueError
            if count > MAX_CASES:            # refused before anything is allocated
                raise ModelError(f"{what}: {count:,} values, more than the {MAX_CASES:,} "
                                 "cases a sweep may have")
            # 12 digits: 0.4, not linspace's 0.4000000000000001, in labels and the summary
            values = [float(f"{v:.12g}") for v in
                      np.linspace(float(parts[0]), float(parts[1]), count)]
        elif len(parts) == 1:
            values = [float(v) for v in text.split(",")]
        else:
            raise ValueError
    except ValueError:
        raise ModelError(f"{what}: expected values a,b,c or a range START:STOP:COUNT "
                         f"(COUNT >= 2), got '{text}'") from None
    if not all(math.isfinite(v) for v in values):
        raise ModelError(f"{what}: values must be finite, got '{text}'")
    return tuple(float(v) for v in values)


def _parse_point(text, what):
    try:
        point = [float(c) for c in text.split(",")]
    except ValueError:
        point = []
    if len(point) != 3 or not all(math.isfinite(c) for c in point):
        raise ModelError(f"{what}: expected a point X,Y,Z, got '{text}'")
    return tuple(point)


def _parse_axis(text, what):
    """Unit vector from 'x', '-z' or 'a,b,c'."""
    sign, name = (-1.0, text[1:]) if text.startswith("-") else (1.0, text)
    if name in ("x", "y", "z"):
        vector = sign * np.eye(3)["xyz".index(name)]
    else:
        try:
            vector = np.array(_parse_point(text, what))
        except ModelError:
            raise ModelError(f"{what}: expected an axis x, y, z, -x, -y, -z or a,b,c, "
                             f"got '{text}'") from None
    length = float(np.linalg.norm(vector))
    if not length > 0:
        raise ModelError(f"{what}: the axis must not be zero")
    return tuple(vector / length)


@dataclass(frozen=True)
class Move:
    """One swept variation: kind 'translate' (values in mesh units), 'rotate' (degrees) or
    'scale' (factors > 0) of the conductors `names` (('*',) for all) along/about unit `axis`,
    rotations and scalings about `pivot` (mesh units; None: the conductors' area centroid)."""

    kind: str
    names: tuple
    axis: tuple | None
    pivot: tuple | None
    values: tuple
    axis_text: str = ""

    def column(self, unit):
        """Summary column name, e.g. 'translate_z[top]_mm'."""
        names = "+".join("all" if n == "*" else n for n in self.names)
        if self.kind == "scale":
            return f"scale[{names}]"
        axis = self.axis_text.replace(",", " ")
        return f"{self.kind}_{axis}[{names}]_" + (unit if self.kind == "translate" else "deg")


def parse_move(kind, text):
    """A Move from 'NAMES:AXIS[@X,Y,Z]=VALUES' (translate, rotate) or 'NAMES[@X,Y,Z]=VALUES'."""
    what = f"{option(kind)} {text}"
    head, sep, values_text = text.partition("=")
    form = "NAMES=VALUES" if kind == "scale" else "NAMES:AXIS=VALUES"
    if not sep or not head:
        raise ModelError(f"{what}: expected {form}")
    head, at, pivot_text = head.partition("@")
    if at and kind == "translate":
        raise ModelError(f"{what}: a translation has no pivot point (@)")
    names_text, axis_text = head, ""
    if kind != "scale":
        names_text, colon, axis_text = head.partition(":")
        if not colon:
            raise ModelError(f"{what}: expected {form}")
    names = tuple(n.strip() for n in names_text.split(","))
    if not all(names):
        raise ModelError(f"{what}: empty conductor name")
    values = parse_values(values_text, what)
    if kind == "scale" and not all(v > 0 for v in values):
        raise ModelError(f"{what}: scale factors must be positive")
    return Move(kind, names, None if kind == "scale" else _parse_axis(axis_text, what),
                _parse_point(pivot_text, what) if at else None, values, axis_text)


def parse_entry(text):
    """('mutual' | 'maxwell', A, B) from '[mutual:|maxwell:]A:B' (default mutual)."""
    parts = text.split(":")
    if len(parts) == 2:
        parts = ["mutual"] + parts
    if len(parts) != 3 or parts[0] not in ("mutual", "maxwell") or not all(parts[1:]):
        raise ModelError(f"{option('entries')} {text}: expected [mutual:|maxwell:]A:B with "
                         "conductor names A and B")
    return tuple(parts)
