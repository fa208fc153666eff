"""Reading surface meshes into conductor panels, and checking them before a solve.

Any surface format meshio reads works (Gmsh .msh 2.2/4.1, STL, OBJ, PLY, OFF, VTK, VTU, Medit...).
Triangles are used as they are, quads are split in two, second-order cells keep their corner
nodes, and every other cell type is skipped with a warning. Coordinates become metres at the door.

Before a file is parsed its content is inspected: a file whose content is another format than
its name says is read as what it is (with a warning); a header promising more points or cells
than the file can hold, or than memory allows, is refused before anything large is allocated;
a text file cut off in the middle of a line is refused (its last number may be cut short).

Which panels form a conductor:
  * several files: one conductor per file, named by the file's stem;
  * one file: Gmsh physical groups (named by their physical names, ordered by tag), else the
    first array of ``TAG_KEYS`` holding two or more distinct integer values (named ``tag<N>``,
    ordered by tag), else the connected components of the surface (corners shared after merging
    coincident points), ordered by their lexicographically lowest corner and named ``c1, c2...``;
    a file that holds a single unnamed conductor names it by the file's stem.

Panels are then oriented: each closed surface faces out of its conductor (a cavity wall faces
into the cavity), each open surface agrees with its neighbours; reversed panels are reported.

Every problem with the input raises a subclass of ``Bem3dError`` whose one-line message starts
with the file it concerns; accuracy concerns are returned as one-line warnings.
"""

import contextlib
import io
import math
import mmap
import os
import re
import struct
import warnings
from pathlib import Path

import meshio
import numpy as np
from meshio._common import num_nodes_per_cell
from meshio.gmsh.common import _gmsh_to_meshio_type
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import breadth_first_order, connected_components
from scipy.spatial import cKDTree

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.errors import MeshError, ModelError
from bem3d.base.files import check_mesh_file
from bem3d.base.resources import check_panel_count, require_memory
from bem3d.geometry.panels import Panels

#: Cell-data arrays that may assign panels to conductors, in order of preference (compared
#: case-insensitively). ``gmsh:geometrical`` is left out on purpose: it numbers CAD surfaces, so
#: a meshed cube would become six conductors; connected components are right for such files.
TAG_KEYS = ("gmsh:physical", "medit:ref", "cellentityids", "conductor", "tag")

#: Points closer than this fraction of the model size (bounding-box diagonal) are one point.
MERGE_REL = 1e-9
#: Panels of two conductors closer than max(MERGE_REL * model size, TOUCH_REL * panel radius) touch.
TOUCH_REL = 1e-6
#: A panel whose doubled area is at most DEGENERATE_REL * (longest edge)^2 (aspect ratio 1e6)
#: has zero area: no mesher makes such panels on purpose, and rounding a collinear triangle to
#: the float32 coordinates of binary STL leaves it about 1e-7.
DEGENERATE_REL = 1e-6
#: Coordinates beyond this magnitude (m) are refused: no engineering model reaches them, and a
#: file that does is corrupt or in the wrong unit.
MAX_COORDINATE_M = 1e12
#: A file whose model (bounding-box diagonal) is smaller than this (m) is refused, likewise.
MIN_MODEL_SIZE_M = 1e-12
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
#: Fewest bytes any format stores per promised point or cell (a binary PLY face of a one-byte
#: count and three one-byte indices), for the check of a header against its file's size.
MIN_ITEM_BYTES = 4
#: Fewest bytes meshio holds in memory per point or cell read (three float64 or int64).
ITEM_MEMORY_BYTES = 24

#: Surface cell types used, with the number of corner nodes kept (meshio lists corners first).
_CORNERS = {"triangle": 3, "triangle6": 3, "triangle7": 3, "quad": 4, "quad8": 4, "quad9": 4}
#: Keywords that may start a line of a Wavefront OBJ file.
_OBJ_KEYS = {b"v", b"vt", b"vn", b"vp", b"f", b"l", b"p", b"o", b"g", b"s", b"usemtl", b"mtllib"}
#: Bytes inspected at the start of a file to recognise its format.
_HEAD_BYTES = 4096


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
    panels, orient_warnings = _orient(panels, sources)
    panels = _canonical(panels)
    out_warnings += orient_warnings
    if check:
        out_warnings += check_geometry(panels, sources)
    return panels, out_warnings


def check_geometry(panels, source):
    """Warnings (list of one-line strings) about ``panels``; raises MeshError if they are unusable.

    Unusable: no panels, NaN/infinite coordinates, zero-area panels, panels too small for their
    coordinates' precision, duplicate panels, or two conductors that touch or overlap. Warnings:
    conductors closer to each other than their panel size, thin panels, abrupt size changes.
    source: the file name, or one file name per conductor, that messages start with. The error
    names the first problem and how many more were found.
    """
    errors, found_warnings = _problems(panels, source)
    if errors:
        more = f" (and {len(errors) - 1} more problems)" if len(errors) > 1 else ""
        raise MeshError(errors[0] + more)
    return found_warnings


def mesh_summary(panels, source="mesh"):
    """Facts about ``panels`` for a mesh report, as a dict of plain Python values (SI units).

    Keys: panels, conductors (name, panels, area_m2, boundary_edges: 0 for a closed surface),
    bounding_box_m ([min xyz, max xyz]), smallest_panel / largest_panel (area_m2 and the
    shortest / longest edge_m), aspect_ratio_max (longest edge / height onto it; 1.15 for an
    equilateral triangle), neighbour_size_ratio_max (largest ratio of the longest edges of two
    panels sharing an edge), problems (error and warning messages of ``check_geometry``).
    """
    v = panels.vertices
    finite = np.isfinite(v).all(axis=(1, 2))
    edges = _edge_lengths(v[finite])
    areas = panels.areas[finite]
    boundary = _boundary_edges(panels, finite)
    conductors = [{"name": name, "panels": int(np.sum(panels.owner == k)),
                   "area_m2": float(np.sum(areas[panels.owner[finite] == k])),
                   "boundary_edges": int(boundary[k])} for k, name in enumerate(panels.names)]
    errors, found_warnings = _problems(panels, source)
    have = bool(finite.any())
    corners = v[finite].reshape(-1, 3)
    usable = finite & ~_degenerate(panels, finite)
    aspect = _aspect_ratios(panels.vertices[usable], panels.areas[usable])
    i, j = _neighbours(_corner_ids(panels.vertices[usable]), panels.owner[usable])
    jumps = _size_ratios(_edge_lengths(panels.vertices[usable]).max(axis=1), i, j)
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


# --- reading one file -------------------------------------------------------------------------

def _read_file(path, split, scale, max_panels=None):
    """One file: points (m), triangles (n, 3), their groups, group names, warnings.

    With split=False every triangle is in group 0 (the caller names the conductor)."""
    check_mesh_file(path)
    file_format, file_warnings = _inspect(path)
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
        raise MeshError(_nonfinite_message(path, bad))
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
    groups, group_names = _groups(mesh, rows, points, tris)
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
                        f"{MAX_COORDINATE_M:.0e} m bem3d accepts (corrupt file or wrong --units?)")
    size = _size(used)
    if size < MIN_MODEL_SIZE_M:
        raise MeshError(f"{path}: the model is only {size:.3g} m across, below the "
                        f"{MIN_MODEL_SIZE_M:.0e} m bem3d accepts (corrupt file or wrong --units?)")


def _inspect(path):
    """(meshio format to read the file as, or None for meshio's choice by extension; warnings).

    Refuses empty files, headers promising more than the file holds or memory allows, and text
    files cut off in the middle of a line."""
    size = path.stat().st_size
    if size == 0:
        raise MeshError(f"{path}: the file is empty")
    with open(path, "rb") as fh, mmap.mmap(fh.fileno(), 0, access=mmap.ACCESS_READ) as data:
        kind = _sniff(data, size)
        if kind is None:
            return None, []
        _check_promises(path, kind, data, size)
        _check_ending(path, kind, data, size)
        if kind == "gmsh":
            _check_gmsh(path, data)
    by_name = _extension_formats(path)
    if kind in by_name:
        return kind, []
    named = (f"its name ends in '{''.join(path.suffixes)}'" if path.suffix
             else "it has no extension")
    return kind, [f"{path}: the content is {kind.upper()} although {named}; "
                  f"read it as {kind.upper()}"]


def _extension_formats(path):
    """meshio format names its extension table gives for path (compared case-insensitively)."""
    formats, ext = [], ""
    for suffix in reversed(path.suffixes):
        ext = (suffix + ext).lower()
        formats += meshio.extension_to_filetypes.get(ext, [])
    return formats


def _sniff(data, size):
    """The meshio format a file's bytes show (gmsh, ply, vtk, medit, vtu, off, stl, obj), or
    None."""
    head = data[:_HEAD_BYTES]
    text = head.lstrip()
    for magic, kind in ((b"$MeshFormat", "gmsh"), (b"ply\n", "ply"), (b"ply\r", "ply"),
                        (b"# vtk DataFile", "vtk"), (b"MeshVersionFormatted", "medit")):
        if text.startswith(magic):
            return kind
    if text.startswith((b"<?xml", b"<VTKFile")) and b'type="UnstructuredGrid"' in head:
        return "vtu"
    lines = head.splitlines()
    if size > len(head):
        lines = lines[:-1]                       # the last line may run past the head
    words = [line.split()[0] for line in lines if line.split() and not line.startswith(b"#")]
    if words[:1] == [b"OFF"]:
        return "off"
    if _binary_stl(data, size):
        return "stl"
    if text.startswith(b"solid") and b"facet" in head:
        return "stl"
    if words and set(words) <= _OBJ_KEYS and b"v" in words:
        return "obj"
    return None


def _binary_stl(data, size):
    """Whether a file is binary STL: an 80-byte header, a facet count, 50 bytes per facet."""
    return size >= 84 and 84 + 50 * struct.unpack_from("<I", data, 80)[0] == size


def _check_promises(path, kind, data, size):
    """Refuse a header promising more points or cells than the file holds or memory allows."""
    # meshio's OFF and PLY readers skip lines until they find these, forever at the end of file
    if kind == "ply" and data.find(b"end_header") < 0:
        raise MeshError(f"{path}: the PLY header has no end_header (truncated or corrupt)")
    counts = _promised(kind, data)
    if kind == "off" and not counts:
        raise MeshError(f"{path}: the OFF header has no vertex and face counts (truncated or "
                        "corrupt)")
    if not counts:
        return
    what, most = max(counts, key=lambda c: c[1])
    total = sum(n for _, n in counts)
    # compressed XML payloads can hold more items than bytes, so only memory bounds VTU
    if kind != "vtu" and total * MIN_ITEM_BYTES > size:
        raise MeshError(f"{path}: the header promises {most:,} {what} but the file holds only "
                        f"{size:,} bytes (truncated or corrupt)")
    require_memory(total * ITEM_MEMORY_BYTES, f"{path}: the header promises {most:,} {what}, "
                                              "which")


def _promised(kind, data):
    """[(what, count)] the header of a file of this kind promises; [] where it has no counts."""
    if kind == "gmsh":
        return _gmsh_counts(data)
    if kind == "ply":
        header = data[:data.find(b"end_header")]
        return [(f"{name.decode(errors='replace')} elements", int(n))
                for name, n in re.findall(rb"element\s+(\S+)\s+(\d+)", header)]
    if kind == "vtk":
        return [(f"{name.decode().lower()}", int(n)) for name, n in re.findall(
            rb"(?m)^(POINTS|CELLS|CELL_TYPES|POLYGONS|TRIANGLE_STRIPS)[ \t]+(\d+)", data)]
    if kind == "medit":
        return [(f"{name.decode().lower()}", int(n)) for name, n in re.findall(
            rb"(?m)^[ \t]*(Vertices|Edges|Triangles|Quadrilaterals|Tetrahedra|Hexahedra|Prisms"
            rb"|Pyramids|Corners|Ridges|Normals|Tangents)\s+(\d+)", data)]
    if kind == "vtu":
        return [(f"{name.decode().lower()}", int(n))
                for name, n in re.findall(rb'NumberOf(Points|Cells)="(\d+)"', data)]
    if kind == "off":
        numbers = re.match(rb"\s*OFF\s+(?:#[^\n]*\s+)*(\d+)\s+(\d+)", data[:_HEAD_BYTES])
        return [] if numbers is None else [("vertices", int(numbers[1])),
                                           ("faces", int(numbers[2]))]
    return []


def _gmsh_counts(data):
    """[(what, count)] of the $Nodes and $Elements headers of a Gmsh file (2.2 or 4.x)."""
    fmt = re.match(rb"\s*\$MeshFormat\s+(\S+)\s+(\d+)\s+(\d+)", data)
    if fmt is None:
        return []
    try:
        version = float(fmt[1])
    except ValueError:
        return []
    binary, size_t = fmt[2] == b"1", int(fmt[3])
    counts = []
    for section, what in ((rb"\$Nodes\r?\n", "nodes"), (rb"\$Elements\r?\n", "elements")):
        found = re.search(section, data)
        if found is None:
            continue
        at = found.end()
        if version >= 4 and binary and size_t in (4, 8):
            if at + 4 * size_t <= len(data):     # numEntityBlocks numItems minTag maxTag
                counts.append((what, struct.unpack_from("<4" + ("Q" if size_t == 8 else "I"),
                                                        data, at)[1]))
            continue
        line = data[at:data.find(b"\n", at)].split()
        index = 1 if version >= 4 else 0
        if len(line) > index and line[index].isdigit():
            counts.append((what, int(line[index])))
    return counts


def _check_gmsh(path, data):
    """Refuse what meshio's Gmsh reader would turn into a different mesh, or into a table as
    large as the largest node number, without complaint: node numbers below 1 (they become
    negative indices that wrap round to the last nodes), a $Nodes header promising more nodes
    than its blocks hold (the rest are left uninitialised), and node numbers too large for
    memory."""
    fmt = re.match(rb"\s*\$MeshFormat\s+(\S+)\s+(\d+)\s+(\d+)", data)
    try:
        version, binary, size_t = float(fmt[1]), fmt[2] == b"1", int(fmt[3])
    except (TypeError, ValueError):
        return
    if binary and version < 4:
        return                               # meshio requires its nodes numbered 1..N
    try:
        declared, tags = _gmsh_nodes(data, version, binary, size_t)
        elements = _gmsh_element_nodes(data, version, binary, size_t)
    except _Corrupt as err:                  # meshio would allocate what the block promises
        raise MeshError(f"{path}: {err}; the file is truncated or corrupt") from None
    except (ValueError, IndexError, KeyError, struct.error):
        return                               # malformed otherwise: meshio's reader reports it
    if version >= 4 and declared is not None and declared != len(tags):
        raise MeshError(f"{path}: the $Nodes header promises {declared:,} nodes but its blocks "
                        f"hold {len(tags):,} (truncated or corrupt)")
    for section, numbers in (("Nodes", tags), ("Elements", elements)):
        if len(numbers) and np.min(numbers) < 1:
            raise MeshError(f"{path}: the ${section} section refers to node {np.min(numbers)}, "
                            "which does not exist (Gmsh numbers nodes from 1); the file is "
                            "corrupt")
    if len(tags):
        largest = int(np.max(tags))
        require_memory(8 * (largest + 1), f"{path}: node numbers up to {largest:,}, whose "
                                          "index table")


class _Corrupt(ValueError):
    """A Gmsh block promising more than the rest of its file holds."""


def _gmsh_section(data, name):
    """The bytes of a Gmsh section between its $name line and $Endname, or None."""
    found = re.search(rb"\$" + name + rb"\r?\n(.*?)\$End" + name, data, re.S)
    return None if found is None else found[1]


def _gmsh_nodes(data, version, binary, size_t):
    """(nodes the $Nodes header promises, or None for 2.2; the node numbers of its blocks)."""
    if binary:                               # version 4: blocks of int32 x 3 and size_t counts
        found = re.search(rb"\$Nodes\r?\n", data)
        if found is None:
            return None, []
        word = {4: "<I", 8: "<Q"}[size_t]
        at = found.end()
        n_blocks, declared = struct.unpack_from(word[0] + 2 * word[1], data, at)
        at += 4 * size_t
        if n_blocks * (12 + size_t) > len(data) - at:
            raise _Corrupt(f"the $Nodes header promises {n_blocks:,} blocks")
        tags = []
        for _ in range(n_blocks):
            dim, _, parametric = struct.unpack_from("<3i", data, at)
            count = struct.unpack_from(word, data, at + 12)[0]
            at += 12 + size_t
            if at + count * (size_t + 24) > len(data):
                raise _Corrupt(f"a $Nodes block promises {count:,} nodes")
            tags.append(np.frombuffer(data, np.dtype(word), count, at))
            at += count * (size_t + 8 * (3 + (dim if parametric else 0)))
        return declared, np.concatenate(tags) if tags else []
    section = _gmsh_section(data, b"Nodes")
    if section is None:
        return None, []
    lines = [line.split() for line in section.splitlines()]
    if version < 4:
        return None, [int(fields[0]) for fields in lines[1:] if fields]
    rows = list(filter(None, lines[1:]))
    tags, at = [], 0
    while at < len(rows):                    # entityDim entityTag parametric count
        count = int(rows[at][3])
        if at + 1 + 2 * count > len(rows):   # the tags, then the coordinates
            raise _Corrupt(f"a $Nodes block promises {count:,} nodes")
        tags += [int(fields[0]) for fields in rows[at + 1:at + 1 + count]]
        at += 1 + 2 * count
    return int(lines[0][1]), tags


def _gmsh_element_nodes(data, version, binary, size_t):
    """The node numbers of every element in the $Elements section of a Gmsh file."""
    if binary:                               # version 4: blocks of int32 x 3 and size_t counts
        found = re.search(rb"\$Elements\r?\n", data)
        if found is None:
            return []
        word = {4: "<I", 8: "<Q"}[size_t]
        at = found.end()
        n_blocks = struct.unpack_from(word, data, at)[0]
        at += 4 * size_t
        if n_blocks * (12 + size_t) > len(data) - at:
            raise _Corrupt(f"the $Elements header promises {n_blocks:,} blocks")
        numbers = []
        for _ in range(n_blocks):
            kind = struct.unpack_from("<3i", data, at)[2]
            count = struct.unpack_from(word, data, at + 12)[0]
            at += 12 + size_t
            # meshio's own tables: the number of nodes of each Gmsh element type
            width = 1 + num_nodes_per_cell[_gmsh_to_meshio_type[kind]]
            if at + count * width * size_t > len(data):
                raise _Corrupt(f"an $Elements block promises {count:,} elements")
            block = np.frombuffer(data, np.dtype(word), count * width, at).reshape(count, width)
            numbers.append(block[:, 1:].ravel().astype(np.int64))
            at += count * width * size_t
        return np.concatenate(numbers) if numbers else []
    section = _gmsh_section(data, b"Elements")
    if section is None:
        return []
    lines = [line.split() for line in section.splitlines()[1:]]
    if version < 4:                          # number type ntags tags... nodes...
        return [int(n) for fields in lines if fields for n in fields[3 + int(fields[2]):]]
    rows = list(filter(None, lines))
    numbers, at = [], 0
    while at < len(rows):                    # entityDim entityTag type count
        count = int(rows[at][3])
        if at + 1 + count > len(rows):
            raise _Corrupt(f"an $Elements block promises {count:,} elements")
        numbers += [int(n) for fields in rows[at + 1:at + 1 + count] for n in fields[1:]]
        at += 1 + count
    return numbers


def _check_ending(path, kind, data, size):
    """Refuse a text file of a format without an end marker that stops in the middle of a line
    (its last number may be cut short), and an STL text without its closing 'endsolid'."""
    tail = data[max(0, size - 256):]
    if kind == "stl" and not _binary_stl(data, size):
        last = tail.rstrip().splitlines()[-1:] or [b""]
        if not last[0].lstrip().startswith(b"endsolid"):
            raise MeshError(f"{path}: the STL text does not end with 'endsolid'; the file "
                            "looks truncated")
        return
    head = data[:_HEAD_BYTES]
    text = (kind in ("obj", "off") or (kind == "ply" and b"format ascii" in head)
            or (kind == "vtk" and [line.strip() for line in head.split(b"\n", 3)[2:3]]
                == [b"ASCII"]))
    if text and tail[-1:] not in (b"\n", b"\r", b" ", b"\t"):
        raise MeshError(f"{path}: the file ends in the middle of a line, so it looks truncated "
                        "(its last number may be cut short); end it with a line break if it "
                        "is complete")


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


def _groups(mesh, rows, points, tris):
    """Conductor index (0..k-1) of each triangle of one file, and the k names (None if unnamed)."""
    keys = {key.lower(): key for key in mesh.cell_data}
    # Gmsh physical names: field_data maps name -> [tag, dimension]; surfaces have dimension 2.
    physical_names = {}
    for name, value in mesh.field_data.items():
        value = np.ravel(value)
        if value.size >= 2 and np.issubdtype(value.dtype, np.number) and value[1] == 2:
            physical_names[int(value[0])] = name
    for wanted in TAG_KEYS:
        tags = _tag_values(mesh.cell_data.get(keys.get(wanted)), rows, len(tris))
        if tags is None:
            continue
        values, groups = np.unique(tags, return_inverse=True)
        named = wanted == "gmsh:physical" and physical_names
        if named or len(values) > 1:
            names = [(physical_names.get(int(t)) if named else None) or f"tag{t}"
                     for t in values]
            return groups.ravel(), names
    return _components(points, tris)


def _tag_values(arrays, rows, n):
    """Integer tag of each of the n triangles from per-block cell data, or None if unusable."""
    if arrays is None or len(arrays) <= max(b for b, _ in rows):
        return None
    parts = []
    for b, row in rows:
        data = np.asarray(arrays[b]).ravel()
        if data.size <= row.max(initial=-1) or not np.issubdtype(data.dtype, np.number):
            return None
        parts.append(data[row])
    tags = np.concatenate(parts)
    if (len(tags) != n or not np.all(np.isfinite(tags)) or np.any(tags != np.round(tags))
            or np.any(np.abs(tags) > 2**53)):
        return None
    return tags.astype(np.int64)


def _components(points, tris):
    """Connected components of the triangles (corners merged), in order of their lowest corner."""
    used = np.unique(tris)
    label = np.arange(len(points))
    label[used] = used[_merge(points[used], MERGE_REL * _size(points[used]))]
    t = label[tris]
    graph = coo_matrix((np.ones(2 * len(t)), (np.r_[t[:, 0], t[:, 1]], np.r_[t[:, 1], t[:, 2]])),
                       shape=(len(points), len(points)))
    _, comp = connected_components(graph, directed=False)
    tri_comp = comp[t[:, 0]]
    # Rank components by the first appearance of their corners in lexicographic (x, y, z) order,
    # so the numbering depends on the geometry only, not on the order of cells in the file.
    corners = tris.ravel()
    order = np.lexsort(points[corners].T[::-1])
    corner_comp = np.repeat(tri_comp, 3)[order]
    _, first = np.unique(corner_comp, return_index=True)
    ranked = np.unique(corner_comp)[np.argsort(first)]
    rank = np.empty(comp.max() + 1, np.int64)
    rank[ranked] = np.arange(len(ranked))
    groups = rank[tri_comp]
    return groups, [f"c{i + 1}" for i in range(len(ranked))] if len(ranked) > 1 else [None]


def _merge(points, tol):
    """Index of a representative for each point (m, 3): points within tol of each other are one."""
    pairs = cKDTree(points).query_pairs(tol, output_type="ndarray")
    graph = coo_matrix((np.ones(len(pairs)), (pairs[:, 0], pairs[:, 1])),
                       shape=(len(points), len(points)))
    _, comp = connected_components(graph, directed=False)
    _, first = np.unique(comp, return_index=True)
    return first[comp]


def _corner_ids(vertices, tol=None):
    """(n, 3) ids of the corners of panels (n, 3, 3): equal where corners coincide within tol
    (default MERGE_REL times the model size)."""
    corners = vertices.reshape(-1, 3)
    if tol is None:
        tol = MERGE_REL * _size(corners)
    return _merge(corners, tol).reshape(-1, 3)


def _size(points):
    """Model size: the diagonal of the bounding box of points (m, 3)."""
    return float(np.linalg.norm(np.ptp(points, axis=0))) if len(points) else 0.0


def _one_line(exc):
    """A short one-line description of an exception."""
    if isinstance(exc, SystemExit):
        return "the reader gave up"
    text = " ".join(str(exc).split()) or type(exc).__name__
    return text[:200]


def _where(x):
    """A point (3,) in metres as text."""
    return "(" + ", ".join(f"{c:.6g}" for c in x) + ") m"


def _nonfinite_message(source, bad):
    """The message for panels (mask bad) with NaN or infinite coordinates."""
    first = int(np.flatnonzero(bad)[0])
    return (f"{source}: {int(bad.sum())} panel(s) with NaN or infinite coordinates, "
            f"the first is panel {first}")


def _sources(panels, source):
    """The source label of each conductor."""
    if isinstance(source, (str, os.PathLike)):
        return [str(source)] * panels.n_conductors
    source = [str(s) for s in source]
    if len(source) != panels.n_conductors:
        raise ValueError(f"{len(source)} sources given for {panels.n_conductors} conductors")
    return source


# --- edges shared by panels -------------------------------------------------------------------

def _edge_uses(corner_id, owner):
    """How panels of one conductor share edges.

    Returns uses (n, 3): the number of panels of the same conductor using each panel edge (edge
    m joins corners m and m+1), and for every edge used by exactly two panels the arrays i, j
    (the panels) and same (True where both run along the edge in the same direction, i.e. their
    orientations disagree). Edges collapsed to a point are left out."""
    a, b = corner_id.ravel(), corner_id[:, [1, 2, 0]].ravel()
    panel = np.repeat(np.arange(len(corner_id)), 3)
    key = np.column_stack([owner[panel], np.minimum(a, b), np.maximum(a, b)])
    if len(key) == 0:
        empty = np.zeros(0, np.int64)
        return np.zeros((0, 3), np.int64), empty, empty, empty.astype(bool)
    _, inverse, counts = np.unique(key, axis=0, return_inverse=True, return_counts=True)
    inverse = inverse.ravel()
    uses = counts[inverse].reshape(-1, 3)
    order = np.argsort(inverse, kind="stable")
    first = np.cumsum(counts) - counts
    twice = np.flatnonzero(counts == 2)
    e1, e2 = order[first[twice]], order[first[twice] + 1]
    keep = (panel[e1] != panel[e2]) & (a[e1] != b[e1])
    e1, e2 = e1[keep], e2[keep]
    return uses, panel[e1], panel[e2], (a[e1] < b[e1]) == (a[e2] < b[e2])


def _neighbours(corner_id, owner):
    """(i, j): pairs of panels of one conductor that share an edge used by them alone."""
    _, i, j, _ = _edge_uses(corner_id, owner)
    return i, j


def _boundary_edges(panels, finite):
    """Number of edges used by a single panel, per conductor (0 for closed surfaces)."""
    counts = np.zeros(panels.n_conductors, np.int64)
    if not finite.any():
        return counts
    owner = panels.owner[finite]
    uses, _, _, _ = _edge_uses(_corner_ids(panels.vertices[finite]), owner)
    np.add.at(counts, np.repeat(owner, 3)[uses.ravel() == 1], 1)
    return counts


def closed_conductors(panels):
    """(n_conductors,) bool: True where a conductor's surface is closed (no boundary edges)."""
    finite = np.isfinite(panels.vertices).all(axis=(1, 2))
    return _boundary_edges(panels, finite) == 0


# --- orientation ------------------------------------------------------------------------------

def _orient(panels, sources):
    """The panels with each closed surface facing out of its conductor (a cavity wall into its
    cavity) and each open surface agreeing with its neighbours, and warnings naming how many
    panels were reversed, or which surfaces cannot be oriented.

    A surface is a set of panels joined by edges that exactly two of them share. Orientations
    spread over those edges (neighbours run along a shared edge in opposite directions); a
    closed surface then faces outward if its signed volume is positive, and inward if it lies
    inside an odd number of other closed surfaces of the same conductor (a cavity). An open one
    keeps the orientation most of its panels had."""
    n, src = len(panels), _sources(panels, sources)
    if n == 0:
        return panels, []
    v, owner = panels.vertices, panels.owner
    uses, i, j, same = _edge_uses(_corner_ids(v), owner)
    i, j, same = _unique_links(i, j, same)
    n_surf, surface = connected_components(
        coo_matrix((np.ones(len(i)), (i, j)), shape=(n, n)), directed=False)
    flip = _spread_orientation(n, surface, n_surf, i, j, same)
    clash = np.zeros(n_surf, bool)
    clash[surface[i[(flip[i] ^ flip[j]) != same]]] = True
    flip[clash[surface]] = False                       # non-orientable: left as read
    sealed = np.bincount(surface, weights=(uses != 2).any(axis=1), minlength=n_surf) == 0
    closed = sealed & ~clash
    sign = np.where(flip, -1.0, 1.0)
    volume = _signed_volumes(v, sign, surface, n_surf)
    want = np.where(_cavities(v, sign * np.sign(volume)[surface], surface, closed, owner),
                    -1.0, 1.0)
    swap = np.where(closed, np.sign(volume) != want,
                    np.bincount(surface, weights=flip, minlength=n_surf)
                    > np.bincount(surface, minlength=n_surf) / 2)
    flip ^= swap[surface] & ~clash[surface]
    found = []
    for k, name in enumerate(panels.names):
        mine = owner == k
        if flip[mine].any():
            found.append(f"{src[k]}: conductor {name!r}: {int(flip[mine].sum())} of "
                         f"{int(mine.sum())} panels reversed so that they face out of the "
                         "conductor and agree with their neighbours")
        bad = np.unique(surface[mine][clash[surface[mine]]])
        if len(bad):
            found.append(f"{src[k]}: conductor {name!r}: {len(bad)} surface(s) cannot be "
                         "oriented consistently (non-orientable or folded onto themselves); "
                         "left as read, so the inside test and forces of a field map are "
                         "unreliable there")
    if not flip.any():
        return panels, found
    vertices = v.copy()
    vertices[flip] = v[flip][:, [0, 2, 1]]
    return Panels(vertices, owner, panels.names), found


def _canonical(panels):
    """The panels in an order, and each one's corners from a start, fixed by the geometry alone:
    corners rotated (orientation kept) to start at the lexicographically lowest, panels sorted
    by conductor and then by centroid; coordinates are compared on a grid of MERGE_REL times the
    model size, so that 0 and a subnormal number, say, count as equal.

    The pair quadrature depends on which corner comes first and on which panel of a pair comes
    first (measured: 2e-8 and 7e-8 relative in a capacitance), so listing the same panels in
    another order, or from other corners, or reversed and turned back by ``_orient``, would
    otherwise change the result."""
    v = panels.vertices
    step = MERGE_REL * _size(v.reshape(-1, 3)) or 1.0
    key = np.round(v / step)
    first = np.lexsort((key[..., 2], key[..., 1], key[..., 0]), axis=-1)[:, 0]
    roll = (first[:, None] + np.arange(3)) % 3
    v = v[np.arange(len(v))[:, None], roll]
    centre = np.round(v.mean(axis=1) / step)
    order = np.lexsort((centre[:, 2], centre[:, 1], centre[:, 0], panels.owner))
    return Panels(v[order], panels.owner[order], panels.names)


def _unique_links(i, j, same):
    """Panel pairs (i < j) linked by a shared edge, once each (two panels may share two edges),
    sorted by (i, j)."""
    lo, hi = np.minimum(i, j), np.maximum(i, j)
    _, first = np.unique(np.column_stack([lo, hi]), axis=0, return_index=True)
    return lo[first], hi[first], same[first]


def _spread_orientation(n, surface, n_surf, i, j, same):
    """(n,) bool: whether each panel must be reversed to agree with its surface's first panel.

    A breadth-first tree from a virtual root joined to one panel of every surface gives each
    panel a parent; the flips along the path to the root are combined by pointer jumping."""
    first = np.unique(surface, return_index=True)[1]
    root = n
    rows = np.r_[i, j, np.full(n_surf, root)]
    cols = np.r_[j, i, first]
    graph = coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(n + 1, n + 1)).tocsr()
    _, parent = breadth_first_order(graph, root, directed=False, return_predecessors=True)
    parent[root] = root
    # each panel's relation to its parent: True where they disagree; links (i < j) are sorted
    rel = np.zeros(n + 1, bool)
    child = np.flatnonzero(parent[:n] != root)
    lo, hi = np.minimum(child, parent[child]), np.maximum(child, parent[child])
    rel[child] = same[np.searchsorted(i * (n + 1) + j, lo * (n + 1) + hi)]
    up = parent.copy()
    while np.any(up != root):
        rel, up = rel ^ rel[up], up[up]
    return rel[:n]


def _signed_volumes(v, sign, surface, n_surf):
    """Signed volume enclosed by each surface with panel orientations sign (n,) = +-1 (m^3)."""
    ref = v[np.unique(surface, return_index=True)[1], 0][surface]     # a corner of each surface
    a, b, c = v[:, 0] - ref, v[:, 1] - ref, v[:, 2] - ref
    det = np.einsum("ij,ij->i", a, np.cross(b, c))
    return np.bincount(surface, weights=sign * det, minlength=n_surf) / 6.0


def _cavities(v, outward, surface, closed, owner):
    """(n_surf,) bool: closed surfaces inside an odd number of other closed surfaces of their
    conductor. outward (n,) = +-1 orients every closed surface outward."""
    n_surf = len(closed)
    depth = np.zeros(n_surf, np.int64)
    ids = np.flatnonzero(closed)
    if len(ids) < 2:
        return depth > 0
    order = np.argsort(surface, kind="stable")
    start = np.searchsorted(surface[order], np.arange(n_surf))
    stop = np.searchsorted(surface[order], np.arange(n_surf), side="right")
    corners = v[order]
    lo = np.minimum.reduceat(corners.min(axis=1), start[ids])
    hi = np.maximum.reduceat(corners.max(axis=1), start[ids])
    who = owner[order][start[ids]]
    # a surface can only enclose another whose bounding box holds its own (rows in blocks of
    # 1024 keep the comparison tables small for models of many bodies)
    for top in range(0, len(ids), 1024):
        rows = slice(top, top + 1024)
        a, b = np.nonzero(np.all(lo[None] <= lo[rows, None], axis=2)
                          & np.all(hi[rows, None] <= hi[None], axis=2)
                          & (who[rows, None] == who[None]))
        a += top
        for sa, sb in zip(ids[a[a != b]], ids[b[a != b]]):
            inner = order[start[sb]:stop[sb]]
            depth[sa] += _winding(v[order[start[sa]], 0], v[inner], outward[inner]) > 0.5
    return depth % 2 == 1


def _winding(x, v, sign):
    """Winding number of point x (3,) about the panels v (k, 3, 3) oriented by sign (k,):
    the sum of their signed solid angles over 4 pi (Van Oosterom & Strackee 1983, IEEE Trans.
    Biomed. Eng. 30, 125)."""
    r = v - x
    length = np.linalg.norm(r, axis=2)
    r1, r2, r3 = r[:, 0], r[:, 1], r[:, 2]
    l1, l2, l3 = length.T
    numerator = np.einsum("ij,ij->i", r1, np.cross(r2, r3))
    denominator = (l1 * l2 * l3 + np.einsum("ij,ij->i", r1, r2) * l3
                   + np.einsum("ij,ij->i", r1, r3) * l2 + np.einsum("ij,ij->i", r2, r3) * l1)
    return float(np.sum(sign * 2.0 * np.arctan2(numerator, denominator)) / (4.0 * math.pi))


# --- geometry checks --------------------------------------------------------------------------

def _edge_lengths(v):
    """(n, 3) lengths (m) of the edges of panels v (n, 3, 3); edge m joins corners m and m+1."""
    return np.linalg.norm(v[:, [1, 2, 0]] - v, axis=2)


def _degenerate(panels, finite):
    """(n,) bool: finite panels whose area is zero relative to their longest edge."""
    with np.errstate(invalid="ignore"):          # non-finite panels are reported elsewhere
        longest = _edge_lengths(panels.vertices).max(axis=1)
        return finite & (2 * panels.areas <= DEGENERATE_REL * longest ** 2)


def _aspect_ratios(v, areas):
    """(n,) longest edge / height onto it, (longest edge)^2 / (2 area), of panels of nonzero
    area."""
    return _edge_lengths(v).max(axis=1) ** 2 / (2.0 * areas)


def _size_ratios(size, i, j):
    """Ratios >= 1 of size (n,) between the panels of pairs (i, j)."""
    return np.maximum(size[i], size[j]) / np.minimum(size[i], size[j])


def _problems(panels, source):
    """(errors, warnings) about panels: one-line messages starting with the file concerned."""
    src = _sources(panels, source)
    label = ", ".join(dict.fromkeys(src)) or "mesh"
    if len(panels) == 0:
        return [f"{label}: no surface panels"], []
    v, owner = panels.vertices, panels.owner
    finite = np.isfinite(v).all(axis=(1, 2))
    errors = []
    if not finite.all():
        errors.append(_nonfinite_message(src[owner[~finite][0]], ~finite))
    degenerate = _degenerate(panels, finite)
    if degenerate.any():
        i = int(np.flatnonzero(degenerate)[0])
        errors.append(f"{src[owner[i]]}: {int(degenerate.sum())} zero-area panel(s), the first "
                      f"(panel {i}) at {_where(panels.centroids[i])}")
    # The remaining checks need finite, non-degenerate panels; the others are reported above.
    keep = np.flatnonzero(finite & ~degenerate)
    if len(keep) == 0:
        return errors, []
    errors += _imprecise(panels, keep, src)
    tol = MERGE_REL * _size(v[keep].reshape(-1, 3))
    corner_id = _corner_ids(v[keep], tol)
    errors += _duplicates(panels, keep, corner_id, src)
    touching, near = _contacts(panels, keep, tol, src)
    return errors + touching, near + _shape_warnings(panels, keep, corner_id, src)


def _imprecise(panels, keep, src):
    """Error about panels (indices keep) too small for the precision of their coordinates."""
    v = panels.vertices[keep]
    shortest = _edge_lengths(v).min(axis=1)
    magnitude = np.abs(v).max(axis=(1, 2))
    bad = shortest < MIN_EDGE_REL * magnitude
    if not bad.any():
        return []
    k = int(np.argmin(np.where(bad, shortest / magnitude, np.inf)))
    i = keep[k]
    return [f"{src[panels.owner[i]]}: {int(bad.sum())} panel(s) too small for the precision of "
            f"their coordinates (edges of {shortest[k]:.3g} m at coordinates of "
            f"{magnitude[k]:.3g} m), the worst (panel {i}) at {_where(panels.centroids[i])}; "
            "move the model near the origin"]


def _duplicates(panels, keep, corner_id, src):
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
            f"corners as another panel), the first (panel {i}) at {_where(panels.centroids[i])}"]


def _shape_warnings(panels, keep, corner_id, src):
    """Warnings, per conductor, about thin panels and neighbours of very different size."""
    v, owner = panels.vertices[keep], panels.owner[keep]
    centroids = panels.centroids[keep]
    aspect = _aspect_ratios(v, panels.areas[keep])
    i, j = _neighbours(corner_id, owner)
    jump = _size_ratios(_edge_lengths(v).max(axis=1), i, j)
    found = []
    for k, name in enumerate(panels.names):
        thin = (owner == k) & (aspect > ASPECT_WARN)
        if thin.any():
            worst = np.argmax(np.where(thin, aspect, 0))
            found.append(f"{src[k]}: conductor {name!r}: {int(thin.sum())} panel(s) with aspect "
                         f"ratio (longest edge / height) above {ASPECT_WARN:g}, up to "
                         f"{aspect[worst]:.3g} at {_where(centroids[worst])}; thin panels "
                         "resolve the charge poorly across their width, remesh them nearer "
                         "to equilateral")
        steep = (owner[i] == k) & (jump > SIZE_JUMP_WARN)
        if steep.any():
            worst = np.argmax(np.where(steep, jump, 0))
            where = 0.5 * (centroids[i[worst]] + centroids[j[worst]])
            found.append(f"{src[k]}: conductor {name!r}: {int(steep.sum())} pair(s) of "
                         f"neighbouring panels differ in size by more than {SIZE_JUMP_WARN:g}x, "
                         f"up to {jump[worst]:.3g}x near {_where(where)}; grade the mesh more "
                         "gently there")
    return found


def _contacts(panels, keep, tol, src):
    """(errors, warnings) for each pair of conductors that touch, or come closer than their
    panel size (longest edge) there, which under-resolves the charge between them.

    Two panels can be that close only if their centroids are within r_i + r_j + max(h_i, h_j),
    at most 4 max(r_i, r_j) since an edge h is at most twice the radius r; so the larger panel's
    ball of 4 r finds every such pair. Each conductor's k-d tree is asked only about the other
    panels whose balls reach its box, so the cost stays near O(N log N); the exact
    triangle-triangle distance then decides."""
    if panels.n_conductors < 2:
        return [], []
    c, r, owner = panels.centroids[keep], panels.radii[keep], panels.owner[keep]
    v = panels.vertices[keep]
    h = _edge_lengths(v).max(axis=1)
    reach = 4 * r + tol
    found = [np.zeros((0, 2), np.int64)]
    for k in np.unique(owner):
        mine, others = np.flatnonzero(owner == k), np.flatnonzero(owner != k)
        lo, hi = c[mine].min(axis=0), c[mine].max(axis=0)
        outside = np.maximum(0.0, np.maximum(lo - c[others], c[others] - hi))
        others = others[np.linalg.norm(outside, axis=1) <= reach[others]]
        if len(others) == 0:
            continue
        near = cKDTree(c[mine]).query_ball_point(c[others], reach[others])
        counts = np.fromiter((len(n) for n in near), np.int64, count=len(near))
        j = mine[np.fromiter((m for n in near for m in n), np.int64, count=int(counts.sum()))]
        i = np.repeat(others, counts)
        found.append(np.column_stack([np.minimum(i, j), np.maximum(i, j)]))
    pairs = np.unique(np.concatenate(found), axis=0)
    i, j = pairs[:, 0], pairs[:, 1]
    size = np.maximum(h[i], h[j])
    pick = np.linalg.norm(c[i] - c[j], axis=1) <= r[i] + r[j] + size + tol
    i, j, size = i[pick], j[pick], size[pick]
    if len(i) == 0:
        return [], []
    small = np.minimum(r[i], r[j])
    gap = _triangle_distance(v[i], v[j])
    touch = gap <= np.maximum(tol, TOUCH_REL * small)
    close = ~touch & (gap < size)
    errors, near = [], []
    a, b = np.minimum(owner[i], owner[j]), np.maximum(owner[i], owner[j])
    for mask, out in ((touch, errors), (close, near)):
        for pa, pb in sorted(set(zip(a[mask].tolist(), b[mask].tolist()))):
            sel = np.flatnonzero(mask & (a == pa) & (b == pb))
            where = ", ".join(dict.fromkeys([src[pa], src[pb]]))
            pair = f"conductors {panels.names[pa]!r} and {panels.names[pb]!r}"
            if out is errors:
                first = sel[0]
                out.append(f"{where}: {pair} touch or overlap ({len(sel)} panel pair(s) closer "
                           f"than {max(tol, TOUCH_REL * small[first]):.3g} m, the first near "
                           f"{_where(c[i[first]])})")
            else:
                k = sel[np.argmax(size[sel] / gap[sel])]
                out.append(f"{where}: {pair} come within {gap[k]:.3g} m of each other near "
                           f"{_where(c[i[k]])}, less than their panel size there "
                           f"({size[k]:.3g} m; {len(sel)} panel pair(s) closer than their "
                           "size), so the result is under-resolved; refine both surfaces there "
                           f"to panels of at most {gap[k]:.3g} m (about "
                           f"{math.ceil(size[k] / gap[k])}x finer)")
    return errors, near


def _triangle_distance(s, t):
    """Distance (m) between triangles s[k] and t[k] (k, 3, 3) of nonzero area; 0 if they meet.

    Two disjoint triangles are closest at a corner of one against the other or between two edges;
    they intersect exactly when an edge of one crosses the other."""
    dist = np.full(len(s), np.inf)
    for p, q in ((s, t), (t, s)):
        for m in range(3):
            dist = np.minimum(dist, _point_triangle_distance(p[:, m], q))
    for m in range(3):
        for n in range(3):
            dist = np.minimum(dist, _segment_distance(s[:, m], s[:, (m + 1) % 3],
                                                      t[:, n], t[:, (n + 1) % 3]))
    crossed = np.zeros(len(s), bool)
    for p, q in ((s, t), (t, s)):
        for m in range(3):
            crossed |= _segment_crosses(p[:, m], p[:, (m + 1) % 3], q)
    return np.where(crossed, 0.0, dist)


def _dot(a, b):
    """Row-wise dot products of (k, 3) arrays."""
    return np.einsum("ij,ij->i", a, b)


def _unit_normal(t):
    """Unit normals (k, 3) of triangles t (k, 3, 3)."""
    n = np.cross(t[:, 1] - t[:, 0], t[:, 2] - t[:, 0])
    return n / np.linalg.norm(n, axis=1)[:, None]


def _inside(x, t, n):
    """Whether points x, lying in the planes of triangles t with unit normals n, are inside
    them."""
    ok = np.ones(len(x), bool)
    for m in range(3):
        a, b = t[:, m], t[:, (m + 1) % 3]
        ok &= _dot(np.cross(b - a, x - a), n) >= 0
    return ok


def _point_triangle_distance(p, t):
    """Distance (m) from points p (k, 3) to triangles t (k, 3, 3)."""
    n = _unit_normal(t)
    h = _dot(p - t[:, 0], n)
    on_face = _inside(p - h[:, None] * n, t, n)
    edge = np.minimum.reduce([_segment_distance(p, p, t[:, m], t[:, (m + 1) % 3])
                              for m in range(3)])
    return np.where(on_face, np.abs(h), edge)


def _segment_distance(p1, q1, p2, q2):
    """Distance (m) between segments p1q1 and p2q2, row by row; p1q1 may be a point, p2q2 not.

    Closest points by clamped parameters (Ericson, Real-Time Collision Detection, 2005, 5.1.9)."""
    d1, d2, w = q1 - p1, q2 - p2, p1 - p2
    a, e, b = _dot(d1, d1), _dot(d2, d2), _dot(d1, d2)
    c, f = _dot(d1, w), _dot(d2, w)
    denom = a * e - b * b
    with np.errstate(invalid="ignore", divide="ignore"):
        # Parallel segments (denom ~ 0) take s = 0; the clamping below finds the right t.
        s = np.where(denom > 1e-12 * a * e, np.clip((b * f - c * e) / denom, 0, 1), 0.0)
        t = (b * s + f) / e
        s = np.where(t < 0, np.clip(-c / a, 0, 1), np.where(t > 1, np.clip((b - c) / a, 0, 1), s))
    s = np.where(a > 0, s, 0.0)  # p1q1 is a point
    t = np.clip(t, 0, 1)
    return np.linalg.norm(p1 + s[:, None] * d1 - p2 - t[:, None] * d2, axis=1)


def _segment_crosses(p, q, t):
    """Whether segments pq pass through triangles t (a crossing, not a coplanar overlap)."""
    n = _unit_normal(t)
    dp, dq = _dot(p - t[:, 0], n), _dot(q - t[:, 0], n)
    crosses = (dp * dq <= 0) & (dp != dq)
    s = np.divide(dp, dp - dq, out=np.zeros_like(dp), where=crosses)
    return crosses & _inside(p + s[:, None] * (q - p), t, n)
