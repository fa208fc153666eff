"""Demo meshes as Gmsh files: one physical group per named part."""

import meshio
import numpy as np

from bem3d.base.files import atomic_path


def build_mesh(parts):
    """A meshio.Mesh with one triangle block per conductor; conductor k is surface entity k + 1
    and physical group k + 1, named after it."""
    points, cells, node_tags, offset = [], [], [], 0
    for k, (_, p, t) in enumerate(parts):
        points.append(p)
        cells.append(("triangle", t + offset))
        # Gmsh 4.1 keeps physical groups on entities, so every node needs its (dim, entity) pair.
        node_tags.append(np.tile([2, k + 1], (len(p), 1)))
        offset += len(p)
    tags = [np.full(len(t), k + 1, dtype=np.int64) for k, (_, _, t) in enumerate(parts)]
    return meshio.Mesh(
        np.concatenate(points), cells,
        point_data={"gmsh:dim_tags": np.concatenate(node_tags)},
        cell_data={"gmsh:physical": tags, "gmsh:geometrical": [tag.copy() for tag in tags]},
        field_data={name: np.array([k + 1, 2]) for k, (name, _, _) in enumerate(parts)},
    )


def write_gmsh(parts, out):
    """Write parts [(name, points, triangles)] as ASCII Gmsh 4.1 to out atomically, once the
    file reads back with its names and tags."""
    mesh = build_mesh(parts)
    with atomic_path(out) as tmp:
        meshio.write(tmp, mesh, file_format="gmsh", binary=False)
        back = meshio.read(tmp, file_format="gmsh")
        names = {name: int(v[0]) for name, v in back.field_data.items()}
        expected = {name: int(v[0]) for name, v in mesh.field_data.items()}
        read_tags = np.concatenate(back.cell_data["gmsh:physical"])
        if names != expected or not np.array_equal(read_tags,
                                                   np.concatenate(mesh.cell_data["gmsh:physical"])):
            raise RuntimeError(f"{tmp} did not read back with the physical groups written")
