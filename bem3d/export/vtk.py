"""VTK files of panels, grids and slices (pyvista), each written to a temporary file beside
its target, checked, then moved into place (base.files.atomic_path).

Coordinates are in the model's length unit, so the files overlay the user's CAD in a viewer;
each file names that unit in its field data (`length_unit`). Field values stay SI.

VTK writes array names into XML attributes as they are, so names made from conductor names are
escaped here (export.names.xml_attribute); a reader shows them as given. String values (the
conductor names) go through vtkStringArray as UTF-8, exactly as given."""


import numpy as np

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.files import atomic_path
from bem3d.export.names import xml_attribute


def _strings(name, values):
    """A vtkStringArray (UTF-8; pyvista's own conversion refuses non-ASCII text)."""
    from vtkmodules.vtkCommonCore import vtkStringArray

    array = vtkStringArray()
    array.SetName(name)
    for value in values:
        array.InsertNextValue(str(value))
    return array


def _label(dataset, unit, strings=()):
    """Add the length unit, and any (name, values) string arrays, to the field data."""
    for name, values in [("length_unit", [unit]), *strings]:
        dataset.GetFieldData().AddArray(_strings(name, values))
    return dataset


def surface_polydata(panels, cell_arrays, unit="m"):
    """pyvista PolyData of the panels (given in metres, corners in `unit`) with the given cell
    arrays."""
    import pyvista as pv

    corners = panels.vertices.reshape(-1, 3) / LENGTH_UNITS[unit]
    points, corner_ids = np.unique(corners, axis=0, return_inverse=True)
    faces = np.hstack([np.full((len(panels), 1), 3), corner_ids.reshape(-1, 3)]).ravel()
    mesh = pv.PolyData(points, faces)
    for name, values in cell_arrays.items():
        mesh.cell_data[xml_attribute(name)] = values
    return mesh


def surface_conductors(panels, result):
    """The names the `conductor` index of surface.vtp counts: the matrix's conductors in
    result.json's order, then those left out of the matrices (floating ones, the reference
    conductor) in mesh order."""
    return list(result.names) + [n for n in panels.names if n not in result.names]


def write_surface(panels, result, target, extra_cells=None, unit="m"):
    """surface.vtp: sigma (C/m^2) at the given potentials, conductor index into
    surface_conductors (named in the field data `conductor_names`), conductor potential (V),
    plus any extra cell arrays; corners in `unit`."""
    names = surface_conductors(panels, result)
    index = np.array([names.index(n) for n in panels.names], np.int32)
    cells = {"sigma": result.panel_sigma(), "conductor": index[panels.owner],
             "potential": result.potentials_of(panels.names)[panels.owner]}
    cells.update(extra_cells or {})
    mesh = _label(surface_polydata(panels, cells, unit), unit, [("conductor_names", names)])
    with atomic_path(target) as tmp:
        mesh.save(tmp)


def image_data(grid, point_arrays, unit="m"):
    """pyvista ImageData of a fields.Grid (given in metres, placed in `unit`) with point arrays
    in the grid's point order."""
    import pyvista as pv

    scale = LENGTH_UNITS[unit]
    image = pv.ImageData(dimensions=grid.shape, spacing=tuple(grid.spacing / scale),
                         origin=tuple(grid.origin / scale))
    for name, values in point_arrays.items():
        image.point_data[xml_attribute(name)] = values
    return _label(image, unit)


def write_image(grid, point_arrays, target, unit="m"):
    """A grid of point values as VTK ImageData (.vti), coordinates in `unit`."""
    with atomic_path(target) as tmp:
        image_data(grid, point_arrays, unit).save(tmp)


def write_slice(grid, point_arrays, target, unit="m"):
    """A one-point-thick grid as VTK PolyData (.vtp) of quads, point arrays in grid order,
    coordinates in `unit`."""
    import pyvista as pv

    nb, nc = [n for n in grid.shape if n > 1]
    ids = np.arange(nb * nc).reshape(nc, nb)          # the grid's order: first axis fastest
    corners = [ids[:-1, :-1], ids[:-1, 1:], ids[1:, 1:], ids[1:, :-1]]
    quads = np.column_stack([np.full(corners[0].size, 4)] + [c.ravel() for c in corners])
    mesh = pv.PolyData(grid.points() / LENGTH_UNITS[unit], quads.ravel())
    for name, values in point_arrays.items():
        mesh.point_data[xml_attribute(name)] = values
    with atomic_path(target) as tmp:
        _label(mesh, unit).save(tmp)
