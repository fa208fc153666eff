"""Scanners of Gmsh .msh files (2.2 and 4.x, text and binary): the counts their headers promise
and the node numbers their blocks hold, which meshio's Gmsh reader would trust unchecked."""

import re
import struct

import numpy as np
from meshio._common import num_nodes_per_cell
from meshio.gmsh.common import _gmsh_to_meshio_type

from bem3d.base.errors import MeshError
from bem3d.base.resources import require_memory


class _Corrupt(ValueError):
    """A Gmsh block promising more than the rest of its file holds."""


def _mesh_format(data):
    """(version, binary, size_t) of a Gmsh file's $MeshFormat line, or None if it has none."""
    fmt = re.match(rb"\s*\$MeshFormat\s+(\S+)\s+(\d+)\s+(\d+)", data)
    try:
        return float(fmt[1]), fmt[2] == b"1", int(fmt[3])
    except (TypeError, ValueError):
        return None


def gmsh_counts(data):
    """[(what, count)] of the $Nodes and $Elements headers of a Gmsh file (2.2 or 4.x)."""
    fmt = _mesh_format(data)
    if fmt is None:
        return []
    version, binary, size_t = fmt
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


def check_gmsh(path, data):
    """Refuse what meshio's Gmsh reader would turn into a different mesh, or into a table as
    large as the largest node number, without complaint: node numbers below 1 (they become
    negative indices that wrap round to the last nodes), a $Nodes header promising more nodes
    than its blocks hold (the rest are left uninitialised), and node numbers too large for
    memory."""
    fmt = _mesh_format(data)
    if fmt is None:
        return
    version, binary, size_t = fmt
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
