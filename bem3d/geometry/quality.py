"""Checks of panels before a solve: what makes them unusable (an error), what costs accuracy (a
warning), and the facts of a mesh report."""

import numpy as np

from bem3d.base.errors import MeshError
from bem3d.geometry.contacts import conductor_contacts
from bem3d.geometry.messages import (
    conductor_sources,
    length_text,
    nonfinite_message,
    point_text,
)
from bem3d.geometry.panels import edge_lengths
from bem3d.geometry.topology import MERGE_REL, boundary_edges, corner_ids, model_size, neighbours

#: A panel whose doubled area is at most DEGENERATE_REL * (longest edge)^2 (aspect ratio 1e6)
#: has zero area: no mesher makes such panels on purpose, and rounding a collinear triangle to
#: the float32 coordinates of binary STL leaves it about 1e-7.
DEGENERATE_REL = 1e-6
#: A panel whose shortest edge is below MIN_EDGE_REL times its largest coordinate magnitude is
#: refused: rounding of its corners (1.1e-16 relative) then distorts it. Measured: a sphere of
#: 0.46 m edges moved to 1e11 m changes its capacitance by 1.5e-7, at 1e12 m by 6e-5.
MIN_EDGE_REL = 1e-10
#: Panels with longest edge / height onto it above this get a warning (common practice, no
#: source; the project's graded test meshes stay below 10.3).
ASPECT_WARN = 20.0
#: Neighbouring panels whose longest edges differ by more than this factor get a warning
#: (common practice keeps neighbours within 2x, no source; the graded test meshes reach 2.7).
SIZE_JUMP_WARN = 3.0


def check_geometry(panels, source, unit="m"):
    """Warnings (list of one-line strings) about ``panels``; raises MeshError if they are unusable.

    Unusable: no panels, NaN/infinite coordinates, zero-area panels, panels too small for their
    coordinates' precision, duplicate panels, or two conductors that touch or overlap. Warnings:
    conductors closer to each other than their panel size, thin panels, abrupt size changes.
    source: the file name, or one file name per conductor, that messages start with; unit: the
    length unit of the messages (the mesh's). The error names the first problem and how many
    more were found.
    """
    errors, found_warnings = _problems(panels, source, unit)
    if errors:
        more = f" (and {len(errors) - 1} more problems)" if len(errors) > 1 else ""
        raise MeshError(errors[0] + more)
    return found_warnings


def mesh_summary(panels, source="mesh", unit="m"):
    """Facts about ``panels`` for a mesh report, as a dict of plain Python values (SI units).

    Keys: panels, conductors (name, panels, area_m2, boundary_edges: 0 for a closed surface),
    bounding_box_m ([min xyz, max xyz]), smallest_panel / largest_panel (area_m2 and the
    shortest / longest edge_m), aspect_ratio_max (longest edge / height onto it; 1.15 for an
    equilateral triangle), neighbour_size_ratio_max (largest ratio of the longest edges of two
    panels sharing an edge), problems (error and warning messages of ``check_geometry``, their
    lengths in `unit`).
    """
    v = panels.vertices
    finite = np.isfinite(v).all(axis=(1, 2))
    edges = edge_lengths(v[finite])
    areas = panels.areas[finite]
    boundary = boundary_edges(panels, finite)
    conductors = [{"name": name, "panels": int(np.sum(panels.owner == k)),
                   "area_m2": float(np.sum(areas[panels.owner[finite] == k])),
                   "boundary_edges": int(boundary[k])} for k, name in enumerate(panels.names)]
    errors, found_warnings = _problems(panels, source, unit)
    have = bool(finite.any())
    corners = v[finite].reshape(-1, 3)
    usable = finite & ~_degenerate(panels, finite)
    aspect = _aspect_ratios(panels.vertices[usable], panels.areas[usable])
    i, j = neighbours(corner_ids(panels.vertices[usable]), panels.owner[usable])
    jumps = _size_ratios(edge_lengths(panels.vertices[usable]).max(axis=1), i, j)
    return {
        "panels": len(panels),
        "conductors": conductors,
        "bounding_box_m": [corners.min(axis=0).tolist(), corners.max(axis=0).tolist()]
        if have else None,
        "smallest_panel": {"area_m2": float(areas.min()), "edge_m": float(edges.min())}
        if have else None,
        "largest_panel": {"area_m2": float(areas.max()), "edge_m": float(edges.max())}
        if have else None,
        "aspect_ratio_max": float(aspect.max()) if len(aspect) else None,
        "neighbour_size_ratio_max": float(jumps.max()) if len(jumps) else None,
        "problems": errors + found_warnings,
    }


def _degenerate(panels, finite):
    """(n,) bool: finite panels whose area is zero relative to their longest edge."""
    with np.errstate(invalid="ignore"):          # non-finite panels are reported elsewhere
        longest = edge_lengths(panels.vertices).max(axis=1)
        return finite & (2 * panels.areas <= DEGENERATE_REL * longest ** 2)


def _aspect_ratios(v, areas):
    """(n,) longest edge / height onto it, (longest edge)^2 / (2 area), of panels of nonzero
    area."""
    return edge_lengths(v).max(axis=1) ** 2 / (2.0 * areas)


def _size_ratios(size, i, j):
    """Ratios >= 1 of size (n,) between the panels of pairs (i, j)."""
    return np.maximum(size[i], size[j]) / np.minimum(size[i], size[j])


def _problems(panels, source, unit):
    """(errors, warnings) about panels: one-line messages starting with the file concerned."""
    src = conductor_sources(panels, source)
    label = ", ".join(dict.fromkeys(src)) or "mesh"
    if len(panels) == 0:
        return [f"{label}: no surface panels"], []
    v, owner = panels.vertices, panels.owner
    finite = np.isfinite(v).all(axis=(1, 2))
    errors = []
    if not finite.all():
        errors.append(nonfinite_message(src[owner[~finite][0]], ~finite))
    degenerate = _degenerate(panels, finite)
    if degenerate.any():
        i = int(np.flatnonzero(degenerate)[0])
        errors.append(f"{src[owner[i]]}: {int(degenerate.sum())} zero-area panel(s), the first "
                      f"(panel {i}) at {point_text(panels.centroids[i], unit)}")
    # The remaining checks need finite, non-degenerate panels; the others are reported above.
    keep = np.flatnonzero(finite & ~degenerate)
    if len(keep) == 0:
        return errors, []
    errors += _imprecise(panels, keep, src, unit)
    tol = MERGE_REL * model_size(v[keep].reshape(-1, 3))
    corner_id = corner_ids(v[keep], tol)
    errors += _duplicates(panels, keep, corner_id, src, unit)
    touching, near = conductor_contacts(panels, keep, tol, src, unit)
    return errors + touching, near + _shape_warnings(panels, keep, corner_id, src, unit)


def _imprecise(panels, keep, src, unit):
    """Error about panels (indices keep) too small for the precision of their coordinates."""
    v = panels.vertices[keep]
    shortest = edge_lengths(v).min(axis=1)
    magnitude = np.abs(v).max(axis=(1, 2))
    bad = shortest < MIN_EDGE_REL * magnitude
    if not bad.any():
        return []
    k = int(np.argmin(np.where(bad, shortest / magnitude, np.inf)))
    i = keep[k]
    return [f"{src[panels.owner[i]]}: {int(bad.sum())} panel(s) too small for the precision of "
            f"their coordinates (edges of {length_text(shortest[k], unit)} at coordinates of "
            f"{length_text(magnitude[k], unit)}), the worst (panel {i}) at "
            f"{point_text(panels.centroids[i], unit)}; "
            "move the model near the origin"]


def _duplicates(panels, keep, corner_id, src, unit):
    """Error about panels (indices keep, merged corner ids) with the same three corners as
    another of their conductor. A panel repeated on another conductor is reported as the two
    conductors touching."""
    key = np.column_stack([panels.owner[keep], np.sort(corner_id, axis=1)])
    _, inverse, counts = np.unique(key, axis=0, return_inverse=True, return_counts=True)
    repeated = counts[inverse.ravel()] > 1
    if not repeated.any():
        return []
    i = keep[np.flatnonzero(repeated)[0]]
    return [f"{src[panels.owner[i]]}: {int(np.sum(counts - 1))} duplicate panel(s) (same three "
            "corners as another panel), the first "
            f"(panel {i}) at {point_text(panels.centroids[i], unit)}"]


def _shape_warnings(panels, keep, corner_id, src, unit):
    """Warnings, per conductor, about thin panels and neighbours of very different size."""
    v, owner = panels.vertices[keep], panels.owner[keep]
    centroids = panels.centroids[keep]
    aspect = _aspect_ratios(v, panels.areas[keep])
    i, j = neighbours(corner_id, owner)
    jump = _size_ratios(edge_lengths(v).max(axis=1), i, j)
    found = []
    for k, name in enumerate(panels.names):
        thin = (owner == k) & (aspect > ASPECT_WARN)
        if thin.any():
            worst = np.argmax(np.where(thin, aspect, 0))
            found.append(f"{src[k]}: conductor {name!r}: {int(thin.sum())} panel(s) with aspect "
                         f"ratio (longest edge / height) above {ASPECT_WARN:g}, up to "
                         f"{aspect[worst]:.3g} at {point_text(centroids[worst], unit)}; thin "
                         "panels resolve the charge poorly across their width, remesh them nearer "
                         "to equilateral")
        steep = (owner[i] == k) & (jump > SIZE_JUMP_WARN)
        if steep.any():
            worst = np.argmax(np.where(steep, jump, 0))
            where = 0.5 * (centroids[i[worst]] + centroids[j[worst]])
            found.append(f"{src[k]}: conductor {name!r}: {int(steep.sum())} pair(s) of "
                         f"neighbouring panels differ in size by more than {SIZE_JUMP_WARN:g}x, "
                         f"up to {jump[worst]:.3g}x near {point_text(where, unit)}; grade the "
                         "mesh more gently there")
    return found
