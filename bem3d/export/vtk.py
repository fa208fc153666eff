"""VTK files of panels, grids and slices (pyvista), each written to a temporary file beside
its target, checked, then moved into place (base.files.atomic_path).

VTK writes array names into XML attributes as they are, so names made from conductor names are
escaped here (export.names.xml_attribute); a reader shows them as given."""


import numpy as np

from bem3d.base.files import atomic_path
from bem3d.export.names import xml_attribute


def surface_polydata(panels, cell_arrays):
    """pyvista PolyData of the panels (metres) with the given cell arrays."""
    import pyvista as pv

    points, corner_ids = np.unique(panels.vertices.reshape(-1, 3), axis=0, return_inverse=True)
    faces = np.hstack([np.full((len(panels), 1), 3), corner_ids.reshape(-1, 3)]).ravel()
    mesh = pv.PolyData(points, faces)
    for name, values in cell_arrays.items():
        mesh.cell_data[xml_attribute(name)] = values
    return mesh


def write_surface(panels, result, target, extra_cells=None):
    """surface.vtp: sigma (C/m^2) at the given potentials, conductor id, conductor potential (V),
    plus any extra cell arrays."""
    cells = {"sigma": result.panel_sigma(), "conductor": panels.owner.astype(np.int32),
             "potential": result.potentials_of(panels.names)[panels.owner]}
    cells.update(extra_cells or {})
    with atomic_path(target) as tmp:
        surface_polydata(panels, cells).save(tmp)


def image_data(grid, point_arrays):
    """pyvista ImageData of a fields.Grid (m) with point arrays in the grid's point order."""
    import pyvista as pv

    image = pv.ImageData(dimensions=grid.shape, spacing=tuple(grid.spacing),
                         origin=tuple(grid.origin))
    for name, values in point_arrays.items():
        image.point_data[xml_attribute(name)] = values
    return image


def write_image(grid, point_arrays, target):
    """A grid of point values as VTK ImageData (.vti)."""
    with atomic_path(target) as tmp:
        image_data(grid, point_arrays).save(tmp)


def write_slice(grid, point_arrays, target):
    """A one-point-thick grid as VTK PolyData (.vtp) of quads, point arrays in grid order."""
    import pyvista as pv

    nb, nc = [n for n in grid.shape if n > 1]
    ids = np.arange(nb * nc).reshape(nc, nb)          # the grid's order: first axis fastest
    corners = [ids[:-1, :-1], ids[:-1, 1:], ids[1:, 1:], ids[1:, :-1]]
    quads = np.column_stack([np.full(corners[0].size, 4)] + [c.ravel() for c in corners])
    mesh = pv.PolyData(grid.points(), quads.ravel())
    for name, values in point_arrays.items():
        mesh.point_data[xml_attribute(name)] = values
    with atomic_path(target) as tmp:
        mesh.save(tmp)
