"""Capacitance matrices, charges and stored energy from the solved panel charges (numpy only)."""

from dataclasses import dataclass, field, replace

import numpy as np

from bem3d.base.errors import ModelError, option
from bem3d.base.units import format_quantity, prefix_for


def mutual_from_maxwell(maxwell):
    """Two-terminal (circuit) capacitances: off-diagonal -C_ij, diagonal sum_j C_ij (to infinity)."""
    mutual = -np.array(maxwell, dtype=float)
    np.fill_diagonal(mutual, np.sum(maxwell, axis=1))
    return mutual


#: Couplings the console lists; the rest are counted and left to capacitance.csv.
CONSOLE_COUPLINGS = 20


@dataclass(frozen=True)
class Coupling:
    """The two-terminal capacitance between conductors a and b (F), and its share of each one's
    self capacitance (the Maxwell diagonal: its capacitance with every other conductor at 0 V)."""

    a: str
    b: str
    capacitance: float
    share_a: float
    share_b: float


def ranked_couplings(names, maxwell):
    """Coupling of every pair of conductors, largest capacitance first (ties in matrix order)."""
    c = np.asarray(maxwell, dtype=float)
    pairs = [Coupling(names[i], names[j], float(-c[i, j]), float(-c[i, j] / c[i, i]),
                      float(-c[i, j] / c[j, j]))
             for i in range(len(names)) for j in range(i + 1, len(names))]
    return sorted(pairs, key=lambda p: -p.capacitance)


def coupling_lines(names, maxwell, limit=CONSOLE_COUPLINGS, ground="infinity/ground"):
    """The ranked couplings as text lines in one readable unit (at most `limit` pairs), then
    each conductor's capacitance to `ground` (infinity or ground, or the reference)."""
    scale, prefix = prefix_for(maxwell)
    couplings = ranked_couplings(names, maxwell)
    width = max(12, 2 * max(len(n) for n in names) + 5)
    lines = [f"Couplings, largest first [{prefix}F]",
             f"{'pair':<{width}}{'C':>12}{'share of C_a':>15}{'share of C_b':>15}"]
    for p in couplings[:limit]:
        lines.append(f"{p.a + ' - ' + p.b:<{width}}{p.capacitance / scale:>#12.5g}"
                     f"{p.share_a:>15.2%}{p.share_b:>15.2%}")
    if len(couplings) > limit:
        lines.append(f"... and {len(couplings) - limit} smaller couplings (capacitance.csv "
                     "holds every one)")
    if not couplings:
        lines.append("(one conductor: no couplings)")
    to_ground = np.sum(maxwell, axis=1)
    lines.append(f"to {ground}: " + ", ".join(
        f"{n} {v / scale:#.5g}" for n, v in zip(names, to_ground)) + f" {prefix}F")
    return lines


@dataclass(frozen=True)
class FieldSources:
    """What radiates the field: panels (conductors first, then any dielectric interfaces), their
    charge density per volt on each conductor (n, n_conductors), C/m^2, taken in a uniform
    medium of relative permittivity kernel_eps_r; and the dielectric bodies, if any, with the
    background permittivity, to say which medium a point is in."""

    panels: object
    sigma: np.ndarray
    kernel_eps_r: float = 1.0
    bodies: tuple = ()
    background: float = 1.0


def potential_vector(names, volts, floating=(), reference=None):
    """Potentials (V) of the conductors `names` from {name: V} (others at 0 V); ModelError if a
    name is no conductor, a floating conductor is given a potential, or the reference conductor
    (the 0 V node) is given one or is floating."""
    given_reference = () if reference is None else (reference,)
    for name, given in (("volts", volts), ("floating", floating),
                        ("reference", given_reference)):
        unknown = sorted(set(given) - set(names))
        if unknown:
            raise ModelError(f"{option(name)}: no conductor named {', '.join(unknown)} "
                             f"(conductors: {', '.join(names)})")
    fixed = sorted(set(volts) & set(floating))
    if fixed:
        raise ModelError(f"{option('volts')}: {', '.join(fixed)} is floating; its potential is an "
                         "outcome, not an input")
    if reference in volts:
        raise ModelError(f"{option('volts')}: {reference} is the reference conductor, the 0 V "
                         "node; give the others' potentials relative to it")
    if reference in floating:
        raise ModelError(f"{option('reference')}: {reference} is floating; the reference must "
                         "be a terminal")
    return np.array([volts.get(n, 0.0) for n in names])


def reduce_floating(result, floating):
    """The result with the named conductors floating: zero net charge, unknown potential.

    With t the terminals and f the floating conductors, Q_f = C_ft V_t + C_ff V_f = 0 gives
    V_f = -C_ff^-1 C_ft V_t and the terminals' matrix C_tt - C_tf C_ff^-1 C_ft (a Schur
    complement of the Maxwell matrix); every terminal's unit charge pattern gains the charge
    its floating neighbours pick up."""
    unknown = sorted(set(floating) - set(result.names))
    if unknown:
        raise ModelError(f"{option('floating')}: no conductor named {', '.join(unknown)} "
                         f"(conductors: {', '.join(result.names)})")
    f = [i for i, n in enumerate(result.names) if n in floating]
    t = [i for i, n in enumerate(result.names) if n not in floating]
    if not t:
        raise ModelError(f"{option('floating')}: at least one conductor must stay a terminal")
    c = result.maxwell if result.loss is None else result.maxwell - 1j * result.loss
    transfer = -np.linalg.solve(c[np.ix_(f, f)], c[np.ix_(f, t)])     # V_f per V_t
    reduced = c[np.ix_(t, t)] + c[np.ix_(t, f)] @ transfer
    reduced = 0.5 * (reduced + reduced.T)
    # a lossy floating conductor's potential is a phasor: its in-phase part is kept
    transfer = transfer.real
    sigma = result.sigma[:, t] + result.sigma[:, f] @ transfer
    v_t = result.potentials[t]
    names = tuple(result.names[i] for i in t)
    sources = result.sources
    if sources is not None:
        sources = replace(sources, sigma=sources.sigma[:, t] + sources.sigma[:, f] @ transfer)
    return CapacitanceResult(
        names=names, maxwell=reduced.real, sigma=sigma, potentials=v_t,
        n_panels=result.n_panels, solver=result.solver, timings_s=result.timings_s,
        asymmetry=result.asymmetry, loss=None if result.loss is None else -reduced.imag,
        frequency_Hz=result.frequency_Hz,
        floating={result.names[i]: float(v) for i, v in zip(f, transfer @ v_t)},
        sources=sources)


def reduce_reference(result, reference):
    """The result with the conductor `reference` as the ground node: the others' matrices
    relative to it, with the far field (infinity, and a ground plane if any) lumped into it.

    With every potential measured from the reference, V'_i = V_i - V_r, and the far field
    tied to the reference as well, the others' charges are Q_o = C_oo V'_o: their Maxwell
    matrix is the full one without the reference's row and column. Each one's mutual
    capacitance to the reference node is then the sum of its row, sum_{j != r} C_ij =
    (-C_ir) + sum_j C_ij: its capacitance to the reference conductor plus its capacitance to
    infinity. The reference's own charge is not conserved: it and the far field are one
    return. The panel charge densities per volt keep every panel (the reference's panels
    carry the charge induced on it)."""
    r = result.names.index(reference)
    keep = [i for i in range(len(result.names)) if i != r]
    if not keep:
        raise ModelError(f"{option('reference')}: {reference} is the only terminal; at least "
                         "one other conductor is needed")
    sources = result.sources
    if sources is not None:
        sources = replace(sources, sigma=sources.sigma[:, keep])
    return replace(result, names=tuple(result.names[i] for i in keep),
                   maxwell=result.maxwell[np.ix_(keep, keep)], sigma=result.sigma[:, keep],
                   potentials=result.potentials[keep], sources=sources, reference=reference,
                   loss=None if result.loss is None else result.loss[np.ix_(keep, keep)])


def reduce_terminals(result, floating=(), reference=None):
    """The result with the `floating` conductors reduced out (reduce_floating), then the
    `reference` conductor made the ground node (reduce_reference). The two commute: both
    hold the reference and the far field at 0 V."""
    if floating:
        result = reduce_floating(result, floating)
    return result if reference is None else reduce_reference(result, reference)


@dataclass
class CapacitanceResult:
    """What an extraction found. Capacitances in F, potentials in V, charges in C, energy in J.

    maxwell[i, j] is the charge on conductor i per volt on conductor j with all others at 0 V.
    sigma (n_panels, n_conductors) is the panel charge density (C/m^2) per volt on each conductor.
    asymmetry is max|C - C^T| / max C_ii of the matrix as solved, before it was symmetrised.
    floating: {name: V} of conductors with zero net charge left out of the matrices (their
    potential at the given excitation); sigma then includes their induced charge.
    sources: where the field comes from when it is not just the conductors' sigma (dielectric
    interfaces carry bound charge).
    reference: the conductor taken as the ground node (left out of the matrices; the far field
    is lumped into it), or None when the ground is infinity (or the ground plane).
    loss: with lossy media, -Im C* (F) of the complex Maxwell matrix C* = maxwell - j loss, so
    that the conductance matrix is G = omega loss at frequency_Hz (I = (G + j omega C) V).
    """

    names: tuple
    maxwell: np.ndarray
    sigma: np.ndarray
    potentials: np.ndarray
    n_panels: int
    solver: dict = field(default_factory=dict)
    timings_s: dict = field(default_factory=dict)
    asymmetry: float = 0.0
    floating: dict = field(default_factory=dict)
    sources: FieldSources | None = None
    loss: np.ndarray | None = None
    frequency_Hz: float | None = None
    reference: str | None = None

    @property
    def ground(self):
        """What the mutual matrix's diagonal is measured to."""
        if self.reference is None:
            return "infinity/ground"
        return f"reference {self.reference}, far field included"

    @property
    def conductance(self):
        """Maxwell-form conductance matrix G (S) at frequency_Hz, or None when lossless."""
        if self.loss is None:
            return None
        return 2 * np.pi * self.frequency_Hz * self.loss

    @property
    def mutual_conductance(self):
        """Two-terminal conductances (S) in the form of `mutual`, or None when lossless."""
        return None if self.loss is None else mutual_from_maxwell(self.conductance)

    def field_sources(self, panels):
        """FieldSources of this result (the conductor panels alone unless dielectrics)."""
        if self.sources is not None:
            return self.sources
        eps_r = self.solver.get("relative_permittivity", 1.0)
        return FieldSources(panels, self.sigma, eps_r, (), eps_r)

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

    def potentials_of(self, names):
        """Potential (V) of each named conductor, terminals and floating ones alike."""
        given = dict(zip(self.names, self.potentials))
        given.update(self.floating)
        if self.reference is not None:
            given[self.reference] = 0.0
        return np.array([given[n] for n in names])

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
        """The Maxwell matrix and the couplings ranked by size as text, in one readable unit
        (the full mutual matrix is in the files)."""
        width = max(12, max(len(n) for n in self.names) + 2)

        def block(title, matrix, scaled, unit):
            scale, prefix = scaled
            lines = [f"{title} [{prefix}{unit}]",
                     " " * width + "".join(f"{n:>{width}}" for n in self.names)]
            for name, row in zip(self.names, matrix):
                lines.append(f"{name:<{width}}" + "".join(f"{v / scale:>#{width}.5g}" for v in row))
            return lines

        lines = block("Maxwell capacitance matrix", self.maxwell, prefix_for(self.maxwell), "F")
        lines += [""] + coupling_lines(self.names, self.maxwell, ground=self.ground)
        if self.loss is not None:
            g = self.conductance
            lines += [""] + block(f"Maxwell conductance matrix at {self.frequency_Hz:.6g} Hz", g,
                                  prefix_for(g), "S")
        lines += ["", f"panels: {self.n_panels}    stored energy at the given potentials: "
                      f"{format_quantity(self.energy, 'J')}"]
        checks = self.checks()
        failed = [k.replace("_", " ") for k, ok in checks.items()
                  if k != "asymmetry_relative" and not ok]
        lines.append(f"checks: asymmetry {checks['asymmetry_relative']:.1e} (symmetrised); "
                     + ("signs and diagonal dominance hold" if not failed
                        else "FAILED: " + ", ".join(failed)))
        for name, volts in self.floating.items():
            lines.append(f"floating conductor {name}: {volts:.6g} V at the given potentials")
        return "\n".join(lines)

    def __str__(self):
        return self.table()
