"""Mesh convergence: refine by midpoint subdivision (geometry.refine), extrapolate the capacitances
(Richardson).

Each refinement cuts every panel into four at its edge midpoints, halving the panel size h.
With values C_0, C_1, C_2 on three meshes the observed order is p = log2((C_1 - C_0) / (C_2 - C_1))
per matrix entry, and the extrapolated value is C_2 + (C_2 - C_1) / (2^p - 1) (Richardson 1911,
Phil. Trans. R. Soc. A 210; the three-mesh form as in Roache 1998, Verification and Validation in
Computational Science and Engineering). With one refinement p = 2 is assumed: the order of flat
panels on a smooth body. The error estimate is |extrapolated - finest|, the estimated error of
the finest mesh's value; when the order is steady the extrapolated value is closer than that.
"""

import dataclasses
import sys
from dataclasses import dataclass

import numpy as np

from bem3d.base.units import prefix_for
from bem3d.geometry.quality import check_geometry
from bem3d.geometry.refine import CREASE_DEGREES, subdivide
from bem3d.mesh_io.bodies import read_bodies
from bem3d.mesh_io.read import read_conductors
from bem3d.operators.rules import PairRules
from bem3d.solve.conductors import solve_panels

#: Observed orders in this band are those of flat panels on smooth bodies.
SMOOTH_ORDER = (1.5, 2.5)
#: Outside this band the differences do not shrink like a power of h: no extrapolation.
USABLE_ORDER = (0.5, 4.0)


@dataclass
class Extrapolation:
    """Per matrix entry, from values on meshes refined by halving h: the extrapolated value,
    its error estimate |extrapolated - finest| (same unit), the order used and a status:
    'assumed order 2' (two meshes), 'smooth' (observed order in SMOOTH_ORDER), 'low order' /
    'high order' (usable but outside it: edges, or not yet asymptotic), 'erratic' (differences
    change sign or do not shrink like a power: no extrapolation, NaN)."""

    value: np.ndarray
    error: np.ndarray
    order: np.ndarray
    status: np.ndarray


def richardson(values):
    """Extrapolation from 2 or 3 arrays of one quantity, coarse to fine, h halving each time."""
    c = [np.asarray(v, float) for v in values]
    if len(c) not in (2, 3):
        raise ValueError("richardson needs values on 2 or 3 meshes")
    last = c[-1] - c[-2]
    if len(c) == 2:
        order = np.full(last.shape, 2.0)
        status = np.full(last.shape, "assumed order 2", dtype=object)
    else:
        with np.errstate(divide="ignore", invalid="ignore"):
            order = np.log2((c[-2] - c[-3]) / last)
        usable = (order >= USABLE_ORDER[0]) & (order <= USABLE_ORDER[1])
        order = np.where(usable, order, np.nan)
        status = np.where(~usable, "erratic",
                          np.where(order < SMOOTH_ORDER[0], "low order",
                                   np.where(order > SMOOTH_ORDER[1], "high order", "smooth")))
        status = status.astype(object)
    value = c[-1] + last / (2.0 ** order - 1.0)
    return Extrapolation(value, np.abs(value - c[-1]), order, status)


@dataclass
class Convergence:
    """Results on the meshes (coarse to fine) and the extrapolation of both matrices (F)."""

    panels: list
    results: list
    maxwell: Extrapolation
    mutual: Extrapolation
    smooth: bool
    warnings: list = dataclasses.field(default_factory=list)     # the base mesh's

    @property
    def names(self):
        return self.results[0].names

    def entries(self):
        """(matrix, row name, column name, per-mesh values, Extrapolation, (i, j)) for i <= j."""
        for label, ext in (("maxwell", self.maxwell), ("mutual", self.mutual)):
            for i, a in enumerate(self.names):
                for j in range(i, len(self.names)):
                    levels = [getattr(r, label)[i, j] for r in self.results]
                    yield label, a, self.names[j], levels, ext, (i, j)

    def table(self):
        """The extrapolation as text, in one readable unit."""
        scale, prefix = prefix_for(self.results[-1].maxwell)
        counts = [len(p) for p in self.panels]
        how = "smooth" if self.smooth else "flat"
        head = (f"{'entry':<28}" + "".join(f"{n:>12}" for n in counts)
                + f"{'extrapolated':>14}{'± estimate':>12}{'order':>7}  status")
        lines = [f"Richardson extrapolation over {len(counts)} meshes ({how} midpoint "
                 f"subdivision), capacitances in {prefix}F", head]
        for label, a, b, levels, ext, ij in self.entries():
            lines.append(f"{f'{label} {a}:{b}':<28}"
                         + "".join(f"{v / scale:>12.6g}" for v in levels)
                         + f"{ext.value[ij] / scale:>14.7g}{ext.error[ij] / scale:>12.3g}"
                         + f"{ext.order[ij]:>7.2f}  {ext.status[ij]}")
        return "\n".join(lines)


def converge(panels, refinements=2, smooth=True, crease_degrees=CREASE_DEGREES, volts=None,
             eps_r=1.0, solver="auto", tol=1e-7, progress=False, source="mesh", ground_z=None,
             floating=(), dielectrics=(), loss_tangent=0.0, frequency=None, reference=None):
    """Solve on `panels` (m) and on 1 or 2 midpoint subdivisions of it; extrapolate.

    volts, eps_r, solver, tol, ground_z (m), floating, dielectrics, loss_tangent, frequency,
    reference: as for
    solve.conductors.solve_panels; the dielectric bodies' meshes are refined with the conductors'.
    source: the file name(s) that geometry errors of the refined meshes start with.
    progress: print each mesh's size and the solver's progress on stderr."""
    if refinements not in (1, 2):
        raise ValueError("refinements must be 1 or 2")
    meshes, bodies = [panels], [tuple(dielectrics)]
    for _ in range(refinements):
        meshes.append(subdivide(meshes[-1], smooth, crease_degrees))
        bodies.append(tuple(dataclasses.replace(b, panels=subdivide(b.panels, smooth,
                                                                    crease_degrees))
                            for b in bodies[-1]))
        # A lifted midpoint could reach into a close neighbour.
        check_geometry(meshes[-1], source)
    results = [None] * len(meshes)
    # Finest first: if it does not fit in memory, nothing else is spent.
    for level in reversed(range(len(meshes))):
        if progress:
            print(f"mesh {level}: {len(meshes[level])} panels", file=sys.stderr, flush=True)
        results[level] = solve_panels(meshes[level], volts, eps_r, PairRules(), solver, tol,
                                      progress, ground_z=ground_z, floating=floating,
                                      dielectrics=bodies[level], loss_tangent=loss_tangent,
                                      frequency=frequency, reference=reference)
    return Convergence(meshes, results, richardson([r.maxwell for r in results]),
                       richardson([r.mutual for r in results]), smooth)


def mesh_sources(model, panels):
    """What geometry messages about `panels` start with: one file per conductor, or the file."""
    sources = [str(m) for m in model.meshes]
    return sources if len(sources) == panels.n_conductors else sources[0]


def converge_model(model, refinements=2, smooth=True, crease_degrees=CREASE_DEGREES,
                   solver="auto", tol=1e-7, progress=False):
    """The convergence study of a Model: its meshes read (metres) and refined with its
    dielectric bodies, solved at its potentials; the Convergence holds the mesh warnings."""
    panels, warnings = read_conductors(model.meshes, units=model.length_unit)
    medium = model.medium
    conv = converge(panels, refinements, smooth, crease_degrees, model.volts, medium["eps_r"],
                    solver, tol, progress, mesh_sources(model, panels), model.ground_z_m,
                    model.floating, read_bodies(model.dielectrics, model.length_unit),
                    medium["loss_tangent"], medium["frequency"], model.reference)
    return dataclasses.replace(conv, warnings=list(warnings) + model.notes)
