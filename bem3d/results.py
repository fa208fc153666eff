"""Capacitance matrices, charges and stored energy from the solved panel charges (numpy only)."""

from dataclasses import dataclass, field

import numpy as np

from .units import format_quantity, prefix_for


def mutual_from_maxwell(maxwell):
    """Two-terminal (circuit) capacitances: off-diagonal -C_ij, diagonal sum_j C_ij (to infinity)."""
    mutual = -np.array(maxwell, dtype=float)
    np.fill_diagonal(mutual, np.sum(maxwell, axis=1))
    return mutual


@dataclass
class CapacitanceResult:
    """What an extraction found. Capacitances in F, potentials in V, charges in C, energy in J.

    maxwell[i, j] is the charge on conductor i per volt on conductor j with all others at 0 V.
    sigma (n_panels, n_conductors) is the panel charge density (C/m^2) per volt on each conductor.
    asymmetry is max|C - C^T| / max C_ii of the matrix as solved, before it was symmetrised.
    """

    names: tuple
    maxwell: np.ndarray
    sigma: np.ndarray
    potentials: np.ndarray
    n_panels: int
    solver: dict = field(default_factory=dict)
    timings_s: dict = field(default_factory=dict)
    asymmetry: float = 0.0

    @property
    def mutual(self):
        return mutual_from_maxwell(self.maxwell)

    @property
    def charges(self):
        """Conductor charges Q = C V (C) at the given potentials."""
        return self.maxwell @ self.potentials

    @property
    def energy(self):
        """Stored field energy W = 1/2 V^T C V (J) at the given potentials."""
        return 0.5 * float(self.potentials @ self.maxwell @ self.potentials)

    def panel_sigma(self):
        """Charge density on each panel (C/m^2) at the given potentials."""
        return self.sigma @ self.potentials

    def checks(self):
        """Physical properties every Maxwell matrix must have, with the measured deviations."""
        c = self.maxwell
        scale = float(np.max(np.abs(np.diag(c))))
        off = c - np.diag(np.diag(c))
        return {
            "asymmetry_relative": self.asymmetry,
            "diagonal_positive": bool(np.all(np.diag(c) > 0)),
            "off_diagonal_nonpositive": bool(np.all(off <= 1e-9 * scale)),
            "diagonally_dominant": bool(np.all(np.sum(c, axis=1) >= -1e-9 * scale)),
        }

    def table(self):
        """The capacitance matrices as text, in one readable unit."""
        scale, prefix = prefix_for(self.maxwell)
        width = max(12, max(len(n) for n in self.names) + 2)

        def block(title, matrix):
            lines = [f"{title} [{prefix}F]", " " * width + "".join(f"{n:>{width}}" for n in self.names)]
            for name, row in zip(self.names, matrix):
                lines.append(f"{name:<{width}}" + "".join(f"{v / scale:>#{width}.5g}" for v in row))
            return lines

        lines = block("Maxwell capacitance matrix", self.maxwell) + [""]
        lines += block("Mutual capacitance (diagonal: to infinity/ground)", self.mutual)
        lines += ["", f"panels: {self.n_panels}    stored energy at the given potentials: "
                      f"{format_quantity(self.energy, 'J')}"]
        return "\n".join(lines)

    def __str__(self):
        return self.table()
