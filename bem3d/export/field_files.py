"""The files of the `field` job: the solve's files, the grid, slices, points and pictures."""

from pathlib import Path

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.files import atomic_path
from bem3d.export.outputs import write_outputs
from bem3d.export.pictures import render_slice, render_surface_charge
from bem3d.export.records import write_point_table
from bem3d.export.vtk import surface_polydata, write_image, write_slice


def write_field_files(folder, panels, result, model, field_map, warnings=(), png=False,
                      extra=None):
    """Write the solve's files with the field keys and arrays added, field.vti, a .vtp per
    slice, points.csv and (png) the pictures; returns (paths, picture problems). extra: more
    keys for result.json.

    field_map: a post.field_map.FieldMap. Coordinates, slice file names (slice_z_0.25mm.vtp)
    and the points.csv columns are in the model's length unit. A renderer failure is a problem
    to report, not a failed run: the numbers are already written."""
    folder, unit = Path(folder), model.length_unit
    files = write_outputs(folder, panels, result, model, warnings,
                          {**(extra or {}), **field_map.record}, field_map.surface_cells)
    target = folder / "field.vti"
    write_image(field_map.grid, field_map.grid_arrays, target, unit)
    files.append(target)
    slice_files = []
    for axis, value, sgrid, arrays in field_map.slices:
        target = folder / slice_name(axis, value, unit)
        write_slice(sgrid, arrays, target, unit)
        files.append(target)
        slice_files.append((target, axis, arrays))
    if field_map.listed is not None:
        target = folder / "points.csv"
        write_point_table(*field_map.listed, target, unit)
        files.append(target)
    problems = []
    if png:
        files += _pictures(panels, result, folder, slice_files[0], problems, unit)
    return files, problems


def slice_name(axis, value, unit):
    """The file name of the slice normal to axis (0, 1, 2) at value (m), in the mesh unit."""
    return f"slice_{'xyz'[axis]}_{value / LENGTH_UNITS[unit]:.6g}{unit}.vtp"


def _pictures(panels, result, folder, first_slice, problems, unit):
    """surface_charge.png and the |E| picture of the first slice."""
    import pyvista as pv

    surface = surface_polydata(panels, {}, unit)
    slice_path, axis, arrays = first_slice
    written = []
    jobs = [(folder / "surface_charge.png",
             lambda tmp: render_surface_charge(surface, result.panel_sigma(), tmp)),
            (folder / "field_slice.png",
             lambda tmp: render_slice(surface, pv.read(slice_path), axis, arrays["E_magnitude"],
                                      tmp, "field magnitude", "V/m"))]
    for target, job in jobs:
        try:
            with atomic_path(target) as tmp:
                job(tmp)
            written.append(target)
        except Exception as err:       # noqa: BLE001 - any renderer failure
            problems.append(f"{target.name} not rendered: {err}")
    return written
