"""Reading surface meshes into conductor panels.

Any surface format meshio reads works (Gmsh .msh 2.2/4.1, STL, OBJ, PLY, OFF, VTK, VTU, Medit...).
Triangles are used as they are, quads are split in two, second-order cells keep their corner
nodes, and every other cell type is skipped with a warning. Coordinates become metres at the door.

Each file's bytes are inspected before it is parsed (``preflight``). Several files give one
conductor each, named by the file's stem; one file is split into conductors as ``groups``
describes. The panels are then oriented (``geometry.orientation``), put in an order fixed by the
geometry (``geometry.canonical``) and checked (``geometry.quality``).

Every problem with the input raises a subclass of ``Bem3dError`` whose one-line message starts
with the file it concerns; accuracy concerns are returned as one-line warnings.
"""

import contextlib
import io
import os
import warnings
from pathlib import Path

import meshio
import numpy as np

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.errors import MeshError, ModelError
from bem3d.base.files import check_mesh_file
from bem3d.base.resources import check_panel_count
from bem3d.geometry.canonical import canonical_order
from bem3d.geometry.messages import nonfinite_message
from bem3d.geometry.orientation import orient
from bem3d.geometry.panels import Panels
from bem3d.geometry.quality import check_geometry
from bem3d.geometry.topology import model_size
from bem3d.mesh_io.groups import file_groups
from bem3d.mesh_io.preflight import inspect_file

#: Coordinates beyond this magnitude (m) are refused: no engineering model reaches them, and a
#: file that does is corrupt or in the wrong unit.
MAX_COORDINATE_M = 1e12
#: A file whose model (bounding-box diagonal) is smaller than this (m) is refused, likewise.
MIN_MODEL_SIZE_M = 1e-12
#: Surface cell types used, with the number of corner nodes kept (meshio lists corners first).
_CORNERS = {"triangle": 3, "triangle6": 3, "triangle7": 3, "quad": 4, "quad8": 4, "quad9": 4}


def read_conductors(paths, units="m", names=None, check=True, max_panels=None):
    """Panels (m) of all conductors in the mesh file(s) ``paths``, and a list of warnings.

    units: length unit of the files, a key of ``constants.LENGTH_UNITS``. names: optional
    conductor names, one per conductor found, replacing the automatic ones in the same order.
    check: run ``check_geometry`` (pass False to inspect a broken mesh with ``mesh_summary``).
    max_panels: refuse (ResourceError) more panels than this in all files together.
    """
    paths = [Path(paths)] if isinstance(paths, (str, os.PathLike)) else [Path(p) for p in paths]
    if not paths:
        raise ModelError("no mesh files given")
    label = ", ".join(map(str, paths))
    if units not in LENGTH_UNITS:
        raise ModelError(f"{label}: unknown length unit {units!r}; valid units: "
                         + ", ".join(LENGTH_UNITS))
    scale = LENGTH_UNITS[units]
    out_warnings, vertices, owner, found, sources = [], [], [], [], []
    if len(paths) == 1:
        points, tris, groups, group_names, file_warnings = _read_file(paths[0], True, scale,
                                                                      max_panels)
        out_warnings += file_warnings
        vertices, owner = [points[tris]], [groups]
        if len(group_names) == 1 and group_names[0] is None:
            group_names = [paths[0].stem]
        found = group_names
        sources = [paths[0]] * len(found)
    else:
        stems = [p.stem for p in paths]
        for stem in stems:
            if names is None and stems.count(stem) > 1:
                clash = ", ".join(str(p) for p in paths if p.stem == stem)
                raise ModelError(f"{clash}: these files would all be named {stem!r}; "
                                 "give conductor names explicitly")
        total = 0
        for i, path in enumerate(paths):
            points, tris, _, _, file_warnings = _read_file(path, False, scale, max_panels)
            total += len(tris)
            check_panel_count(total, max_panels, label)
            out_warnings += file_warnings
            vertices.append(points[tris])
            owner.append(np.full(len(tris), i))
        found, sources = stems, paths
    if names is not None:
        names = [names] if isinstance(names, str) else [str(n) for n in names]
        if len(names) != len(found):
            raise ModelError(f"{label}: {len(names)} conductor names given but {len(found)} "
                             f"conductors found ({', '.join(found)})")
        if len(set(names)) != len(names):
            raise ModelError(f"{label}: conductor names repeat: {', '.join(names)}")
        found = names
    panels = Panels(np.concatenate(vertices), np.concatenate(owner), tuple(found))
    panels, orient_warnings = orient(panels, sources)
    panels = canonical_order(panels)
    out_warnings += orient_warnings
    if check:
        out_warnings += check_geometry(panels, sources, units)
    return panels, out_warnings


def _read_file(path, split, scale, max_panels=None):
    """One file: points (m), triangles (n, 3), their groups, group names, warnings.

    With split=False every triangle is in group 0 (the caller names the conductor)."""
    check_mesh_file(path)
    file_format, file_warnings = inspect_file(path)
    try:
        # meshio reports a failing reader on stdout and stderr besides raising, and the STL
        # reader warns of an overflowing size check on garbage; all of that is noise here.
        with warnings.catch_warnings(), contextlib.redirect_stdout(io.StringIO()), \
                contextlib.redirect_stderr(io.StringIO()):
            warnings.simplefilter("ignore")
            mesh = meshio.read(path, file_format=file_format)
    # meshio's readers fail on malformed input with whatever their parser hits (ReadError,
    # ValueError, KeyError, IndexError, struct.error...), and the VTU reader even calls exit().
    except (Exception, SystemExit) as exc:
        raise MeshError(f"{path}: cannot read as a mesh ({_one_line(exc)})") from None
    try:
        points = np.asarray(mesh.points, dtype=np.float64)
    except (TypeError, ValueError):
        raise MeshError(f"{path}: the point coordinates are not numbers") from None
    if points.ndim != 2 or points.shape[1] not in (2, 3):
        raise MeshError(f"{path}: points have shape {points.shape}, expected (n, 3)")
    if points.shape[1] == 2:  # planar formats store (x, y); the plate lies in z = 0
        points = np.column_stack([points, np.zeros(len(points))])

    blocks, skipped, flattened = [], {}, {}
    for b, block in enumerate(mesh.cells):
        k = _CORNERS.get(block.type)
        if k is None:
            skipped[block.type] = skipped.get(block.type, 0) + len(block.data)
            continue
        blocks.append((b, _corner_indices(path, block, k, len(points))))
        if block.type not in ("triangle", "quad"):
            flattened[block.type] = flattened.get(block.type, 0) + len(block.data)
    if skipped:
        file_warnings.append(f"{path}: skipped cells that are not surface panels: "
                             + ", ".join(f"{n} {t}" for t, n in sorted(skipped.items())))
    if flattened:
        file_warnings.append(f"{path}: curved cells flattened to their corners: "
                             + ", ".join(f"{n} {t}" for t, n in sorted(flattened.items())))
    n_panels = sum(len(cells) * (cells.shape[1] - 2) for _, cells in blocks)
    if n_panels == 0:
        have = ", ".join(f"{n} {t}" for t, n in sorted(skipped.items())) or "no cells at all"
        raise MeshError(f"{path}: no surface cells (triangles or quads); the file has {have}")
    check_panel_count(n_panels, max_panels, str(path))
    # Coordinates are checked before any arithmetic on them, which could overflow.
    bad = np.concatenate([np.repeat(~np.isfinite(points[cells]).all(axis=(1, 2)),
                                    cells.shape[1] - 2) for _, cells in blocks])
    if bad.any():
        raise MeshError(nonfinite_message(path, bad))
    used = np.unique(np.concatenate([cells.ravel() for _, cells in blocks]))
    _check_magnitudes(path, points[used] * scale)
    points = points * scale

    tris, rows = [], []
    for b, cells in blocks:
        if cells.shape[1] == 4:
            tri, row = _split_quads(points, cells)
        else:
            tri, row = cells, np.arange(len(cells))
        tris.append(tri)
        rows.append((b, row))
    tris = np.concatenate(tris)
    if not split:
        return points, tris, np.zeros(len(tris), np.int64), [None], file_warnings
    groups, group_names = file_groups(mesh, rows, points, tris)
    return points, tris, groups, group_names, file_warnings


def _corner_indices(path, block, k, n_points):
    """The first k corner indices (m, k) int64 of a cell block, checked against n_points."""
    try:
        data = np.asarray(block.data)
        data = data.reshape(len(data), -1)
    except (TypeError, ValueError):
        raise MeshError(f"{path}: {block.type} cells are malformed") from None
    if data.shape[1] < k or not np.issubdtype(data.dtype, np.number):
        raise MeshError(f"{path}: {block.type} cells are malformed")
    data = data[:, :k]
    if not np.issubdtype(data.dtype, np.integer) and (
            not np.all(np.isfinite(data)) or np.any(data != np.round(data))):
        raise MeshError(f"{path}: {block.type} cells have corner indices that are not integers")
    if len(data) and (data.min() < 0 or data.max() >= n_points):
        raise MeshError(f"{path}: {block.type} cells refer to points that do not exist")
    return data.astype(np.int64)


def _check_magnitudes(path, used):
    """Refuse corner coordinates (m) that are too large, or a model too small, to be real."""
    largest = float(np.abs(used).max())
    if largest > MAX_COORDINATE_M:
        raise MeshError(f"{path}: coordinates reach {largest:.3g} m, beyond the "
                        f"{MAX_COORDINATE_M:.0e} m bem3d accepts (corrupt file or wrong length "
                        "unit?)")
    size = model_size(used)
    if size < MIN_MODEL_SIZE_M:
        raise MeshError(f"{path}: the model is only {size:.3g} m across, below the "
                        f"{MIN_MODEL_SIZE_M:.0e} m bem3d accepts (corrupt file or wrong length "
                        "unit?)")


def _split_quads(points, quads):
    """Two triangles (2q, 3) per quad, cut along the shorter diagonal, and each one's quad row.

    The shorter diagonal gives the better-shaped pair; both keep the quad's corner order."""
    a, b, c, d = quads.T
    ac = np.linalg.norm(points[a] - points[c], axis=1)
    bd = np.linalg.norm(points[b] - points[d], axis=1)
    use_ac = (ac <= bd)[:, None]
    first = np.where(use_ac, np.column_stack([a, b, c]), np.column_stack([a, b, d]))
    second = np.where(use_ac, np.column_stack([a, c, d]), np.column_stack([b, c, d]))
    return np.stack([first, second], axis=1).reshape(-1, 3), np.repeat(np.arange(len(quads)), 2)


def _one_line(exc):
    """A short one-line description of an exception."""
    if isinstance(exc, SystemExit):
        return "the reader gave up"
    text = " ".join(str(exc).split()) or type(exc).__name__
    return text[:200]
