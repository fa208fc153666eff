"""Checks of a mesh file's bytes before meshio parses it.

A file whose content is another format than its name says is read as what it is (with a
warning); a header promising more points or cells than the file can hold, or than memory allows,
is refused before anything large is allocated; a text file cut off in the middle of a line is
refused (its last number may be cut short).
"""

import mmap
import re
import struct

import meshio

from bem3d.base.errors import MeshError
from bem3d.base.resources import require_memory
from bem3d.mesh_io.gmsh import check_gmsh, gmsh_counts

#: Fewest bytes any format stores per promised point or cell (a binary PLY face of a one-byte
#: count and three one-byte indices), for the check of a header against its file's size.
MIN_ITEM_BYTES = 4
#: Fewest bytes meshio holds in memory per point or cell read (three float64 or int64).
ITEM_MEMORY_BYTES = 24
#: Keywords that may start a line of a Wavefront OBJ file.
_OBJ_KEYS = {b"v", b"vt", b"vn", b"vp", b"f", b"l", b"p", b"o", b"g", b"s", b"usemtl", b"mtllib"}
#: Bytes inspected at the start of a file to recognise its format.
_HEAD_BYTES = 4096


def inspect_file(path):
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
            check_gmsh(path, data)
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
        return gmsh_counts(data)
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
