"""Mesh convergence: refine by midpoint subdivision, extrapolate the capacitances (Richardson).

Each refinement cuts every panel into four at its edge midpoints, halving the panel size h.
With values C_0, C_1, C_2 on three meshes the observed order is p = log2((C_1 - C_0) / (C_2 - C_1))
per matrix entry, and the extrapolated value is C_2 + (C_2 - C_1) / (2^p - 1) (Richardson 1911,
Phil. Trans. R. Soc. A 210; the three-mesh form as in Roache 1998, Verification and Validation in
Computational Science and Engineering). With one refinement p = 2 is assumed: the order of flat
panels on a smooth body. The error estimate is |extrapolated - finest|, the estimated error of
the finest mesh's value; when the order is steady the extrapolated value is closer than that.
"""

import csv
import dataclasses
import io
import json
import math
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from bem3d.base.errors import ModelError
from bem3d.base.files import atomic_path
from bem3d.export.outputs import write_outputs
from bem3d.geometry.panels import Panels
from bem3d.operators.rules import PairRules
from bem3d.base.units import prefix_for

#: Observed orders in this band are those of flat panels on smooth bodies.
SMOOTH_ORDER = (1.5, 2.5)
#: Outside this band the differences do not shrink like a power of h: no extrapolation.
USABLE_ORDER = (0.5, 4.0)
#: Panels meeting at a larger angle than this (degrees) meet at a crease that stays sharp.
CREASE_DEGREES = 30.0


# ---------------------------------------------------------------------------------------------
# Midpoint subdivision
# ---------------------------------------------------------------------------------------------

def _corner_normals(vertex, points, normals, edge_of, smooth_edge):
    """Unit normal at each panel corner (n, 3, 3), averaged over the panels around the corner's
    point that are reached without crossing a crease or boundary edge.

    Each panel contributes (e1 x e2) / (|e1|^2 |e2|^2) with e1, e2 its two edges from the point:
    the weights of Max (1999, J. Graphics Tools 4(2)), exact when the neighbours lie on a sphere."""
    n = len(vertex)
    p = points[vertex]                                   # (n, 3 corners, 3)
    e1 = p[:, [1, 2, 0]] - p
    e2 = p[:, [2, 0, 1]] - p
    weight = np.cross(e1, e2) / (np.einsum("nki,nki->nk", e1, e1)
                                 * np.einsum("nki,nki->nk", e2, e2))[..., None]
    # Join the corners of the two panels on each smooth edge that sit at the same point.
    half = np.flatnonzero(smooth_edge[edge_of.ravel()])            # half-edges 3 f + k
    order = half[np.argsort(edge_of.ravel()[half], kind="stable")]
    h1, h2 = order[0::2], order[1::2]                              # the two sides of each edge
    f1, k1, f2, k2 = h1 // 3, h1 % 3, h2 // 3, h2 % 3
    # In a consistently oriented mesh the second panel runs the edge the other way round.
    same = vertex[f1, k1] == vertex[f2, k2]
    a2 = np.where(same, k2, (k2 + 1) % 3)
    b2 = np.where(same, (k2 + 1) % 3, k2)
    rows = np.concatenate([3 * f1 + k1, 3 * f1 + (k1 + 1) % 3])
    cols = np.concatenate([3 * f2 + a2, 3 * f2 + b2])
    graph = coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(3 * n, 3 * n))
    _, label = connected_components(graph, directed=False)
    total = np.zeros((label.max() + 1, 3))
    np.add.at(total, label, weight.reshape(-1, 3))
    corner = total[label].reshape(n, 3, 3)
    length = np.linalg.norm(corner, axis=2, keepdims=True)
    # A corner whose weights cancel (degenerate fan) falls back to its panel's normal.
    return np.where(length > 0, corner / np.where(length > 0, length, 1.0), normals[:, None, :])


def subdivide(panels, smooth=True, crease_degrees=CREASE_DEGREES):
    """Panels (m) with every triangle cut into four at its edge midpoints: h halves.

    smooth: the midpoint of an edge between two panels meeting at less than crease_degrees is
    moved onto a circular arc through the edge's ends, along the mean of the surface normals
    there, with the curvature k = (n_b - n_a).(b - a) / |b - a|^2 that those normals show along
    the edge. Exact on a sphere and on the circles of a cylinder (when the mesh corners lie on
    them), so a mesh of a curved body approaches the body. Midpoints of crease, boundary and
    non-manifold edges stay on the straight edge: flat faces and sharp edges do not move.
    Children keep the parent's corner order (normal) and conductor."""
    n = len(panels)
    points, vertex = np.unique(panels.vertices.reshape(-1, 3), axis=0, return_inverse=True)
    vertex = vertex.reshape(n, 3)
    ends = np.stack([vertex, vertex[:, [1, 2, 0]]], axis=2)        # local edge k: corner k -> k+1
    edges, edge_of, uses = np.unique(np.sort(ends, axis=2).reshape(-1, 2), axis=0,
                                     return_inverse=True, return_counts=True)
    edge_of = edge_of.reshape(n, 3)
    a, b = points[edges[:, 0]], points[edges[:, 1]]
    middle = 0.5 * (a + b)
    if smooth:
        # Dihedral test on edges with exactly two panels: sum of the two unit normals.
        two = uses == 2
        normal_sum = np.zeros((len(edges), 3))
        np.add.at(normal_sum, edge_of.ravel(), np.repeat(panels.normals, 3, axis=0))
        # |n1 + n2|^2 = 2 + 2 cos(angle between the normals)
        smooth_edge = two & (np.einsum("ij,ij->i", normal_sum, normal_sum)
                             >= 2.0 + 2.0 * math.cos(math.radians(crease_degrees)))
        corner = _corner_normals(vertex, points, panels.normals, edge_of, smooth_edge)
        # The corner normals at both ends of each edge, from either panel that uses it (on a
        # smooth edge both panels' corners were joined, so both give the same normals).
        side = np.empty(len(edges), np.int64)
        side[edge_of.ravel()] = np.arange(3 * n)
        f, k = side // 3, side % 3
        na, nb = corner[f, k], corner[f, (k + 1) % 3]
        swap = vertex[f, k] != edges[:, 0]                         # edge stored as (low, high)
        na, nb = np.where(swap[:, None], nb, na), np.where(swap[:, None], na, nb)
        # Sagitta of the arc, k L^2 / 4 / (1 + sqrt(1 - k^2 L^2 / 4)): stable as k -> 0;
        # positive (outward) where the normals spread along the edge, as on a convex body.
        kl2 = np.einsum("ij,ij->i", nb - na, b - a)                   # k L^2
        l2 = np.einsum("ij,ij->i", b - a, b - a)                      # L^2
        sagitta = 0.25 * kl2 / (1.0 + np.sqrt(np.clip(1.0 - kl2**2 / (4.0 * l2), 0.0, None)))
        mean = na + nb
        mean /= np.maximum(np.linalg.norm(mean, axis=1, keepdims=True), 1e-300)
        middle = middle + np.where(smooth_edge[:, None], sagitta[:, None] * mean, 0.0)
    m = len(points) + edge_of                                      # midpoint ids, (n, 3)
    c0, c1, c2 = vertex.T
    m01, m12, m20 = m.T
    tris = np.stack([np.column_stack([c0, m01, m20]), np.column_stack([m01, c1, m12]),
                     np.column_stack([m20, m12, c2]), np.column_stack([m01, m12, m20])], axis=1)
    return Panels.from_arrays(np.concatenate([points, middle]), tris.reshape(-1, 3),
                              np.repeat(panels.owner, 4), panels.names)


# ---------------------------------------------------------------------------------------------
# Richardson extrapolation
# ---------------------------------------------------------------------------------------------

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

    def record(self):
        """JSON-ready dict (SI units)."""
        def plain(a):                     # NaN (no extrapolation) is null in JSON
            return np.where(np.isfinite(a), a, None).tolist()

        def block(ext):
            return {"extrapolated_F": plain(ext.value), "error_estimate_F": plain(ext.error),
                    "order": plain(ext.order), "status": ext.status.tolist()}

        return {"conductors": list(self.names), "panels": [len(p) for p in self.panels],
                "subdivision": "smooth" if self.smooth else "flat",
                "maxwell_capacitance_F": [r.maxwell.tolist() for r in self.results],
                "mutual_capacitance_F": [r.mutual.tolist() for r in self.results],
                "maxwell": block(self.maxwell), "mutual": block(self.mutual)}


def converge(panels, refinements=2, smooth=True, crease_degrees=CREASE_DEGREES, volts=None,
             eps_r=1.0, solver="auto", tol=1e-7, progress=False, source="mesh", ground_z=None,
             floating=(), dielectrics=()):
    """Solve on `panels` (m) and on 1 or 2 midpoint subdivisions of it; extrapolate.

    volts, eps_r, solver, tol, ground_z (m), floating, dielectrics: as for
    pipeline.solve_panels; the dielectric bodies' meshes are refined with the conductors'.
    source: the file name(s) that geometry errors of the refined meshes start with."""
    from bem3d.mesh_io.read import check_geometry
    from bem3d.solve.conductors import solve_panels

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
                                      dielectrics=bodies[level])
    return Convergence(meshes, results, richardson([r.maxwell for r in results]),
                       richardson([r.mutual for r in results]), smooth)


# ---------------------------------------------------------------------------------------------
# The command
# ---------------------------------------------------------------------------------------------

def add_converge_parser(subparsers):
    """Add the 'converge' command to the CLI's subparsers."""
    from bem3d._cli.options import add_model_options

    p = subparsers.add_parser(
        "converge", help="refine the mesh and extrapolate the capacitances (Richardson)",
        description="Solve on the mesh and on 1 or 2 midpoint subdivisions of it (4 and 16 "
                    "times the panels) and report Richardson-extrapolated capacitances with "
                    "an error estimate per matrix entry.",
        conflict_handler="resolve")
    add_model_options(p)
    p.add_argument("--out", type=Path, help="output folder (default: <first input>_converge)")
    p.add_argument("--refinements", type=int, choices=[1, 2], default=2,
                   help="subdivisions (default 2, which also measures the order)")
    p.add_argument("--flat", action="store_true",
                   help="keep every midpoint on its straight edge (polyhedral parts); by "
                        "default midpoints of smooth edges follow the curved surface")
    p.add_argument("--crease-angle", type=float, default=CREASE_DEGREES,
                   help=f"panels meeting at a larger angle keep a sharp edge (default "
                        f"{CREASE_DEGREES:g} degrees)")
    p.add_argument("--solver", choices=["auto", "direct", "cg"], default="auto",
                   help="direct (Cholesky), cg (conjugate gradients) or auto by size")
    p.add_argument("--tol", type=float, default=1e-7, help="CG relative residual (default 1e-7)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    return p


def mesh_sources(model, panels):
    """What geometry messages about `panels` start with: one file per conductor, or the file."""
    sources = [str(m) for m in model.meshes]
    return sources if len(sources) == panels.n_conductors else sources[0]


def write_convergence(conv, folder):
    """convergence.json and convergence.csv in folder; returns their paths."""
    folder = Path(folder)
    files = [folder / "convergence.json", folder / "convergence.csv"]
    with atomic_path(files[0]) as tmp:
        tmp.write_text(json.dumps(conv.record(), indent=2) + "\n", encoding="utf-8")
    text = io.StringIO()
    writer = csv.writer(text, lineterminator="\n")
    writer.writerow(["matrix", "row", "column"] + [f"panels_{len(p)}_F" for p in conv.panels]
                    + ["extrapolated_F", "error_estimate_F", "order", "status"])
    for label, a, b, levels, ext, ij in conv.entries():
        writer.writerow([label, a, b] + [f"{v:.9e}" for v in levels]
                        + [f"{ext.value[ij]:.9e}", f"{ext.error[ij]:.3e}",
                           f"{ext.order[ij]:.3f}", ext.status[ij]])
    with atomic_path(files[1]) as tmp:
        tmp.write_text(text.getvalue(), encoding="utf-8")
    return files


def run_converge(args):
    """The 'converge' command: exit code 0; bad input raises Bem3dError."""
    from bem3d._cli.options import model_from_args
    from bem3d.mesh_io.read import read_conductors
    from bem3d.mesh_io.bodies import read_bodies

    if not 0.0 < args.crease_angle < 180.0:
        raise ModelError(f"--crease-angle must be between 0 and 180 degrees, got "
                         f"{args.crease_angle:g}")
    model = model_from_args(args)
    if args.out is None:
        model.output_folder = Path(f"{Path(args.inputs[0]).stem}_converge")
    panels, warnings = read_conductors(model.meshes, units=model.length_unit)
    conv = converge(panels, args.refinements, not args.flat, args.crease_angle, model.volts,
                    model.relative_permittivity, args.solver, args.tol, not args.quiet,
                    mesh_sources(model, panels), model.ground_z_m, model.floating,
                    read_bodies(model.dielectrics, model.length_unit))
    folder = Path(model.output_folder)
    for level, (p, r) in enumerate(zip(conv.panels, conv.results)):
        write_outputs(folder / f"mesh_{level}", p, r, model, warnings)
    files = write_convergence(conv, folder)
    if not args.quiet:
        for w in warnings:
            print(f"warning: {w}", file=sys.stderr)
        print(conv.table())
        print(f"wrote {', '.join(f.name for f in files)} and mesh_0 .. mesh_{args.refinements} "
              f"to {folder}")
    return 0
