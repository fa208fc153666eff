"""The files of the `field` job: the solve's files, the grid, slices, points and pictures."""

from pathlib import Path

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.files import atomic_path
from bem3d.export.outputs import write_outputs
from bem3d.export.pictures import render_slice_picture, render_surface_charge
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
        slice_files.append((axis, value, sgrid, arrays))
    if field_map.listed is not None:
        target = folder / "points.csv"
        write_point_table(*field_map.listed, target, unit)
        files.append(target)
    problems = []
    if png:
        files += _pictures(panels, result, folder, slice_files, problems, unit)
    return files, problems


#: The 3D picture of the surface charge.
SURFACE_PICTURE = "surface_charge.png"


def _slice_stem(axis, value, unit):
    """'z_0.25mm': the slice normal to axis (0, 1, 2) at value (m), in the mesh unit."""
    return f"{'xyz'[axis]}_{value / LENGTH_UNITS[unit]:.6g}{unit}"


def slice_name(axis, value, unit):
    """The file name of the slice normal to axis (0, 1, 2) at value (m), in the mesh unit."""
    return f"slice_{_slice_stem(axis, value, unit)}.vtp"


def slice_picture_name(axis, value, unit):
    """The picture of that slice: field_slice_z_0.25mm.png."""
    return f"field_slice_{_slice_stem(axis, value, unit)}.png"


def picture_caption(name):
    """A caption for one of the field run's pictures, by its file name."""
    if name == SURFACE_PICTURE:
        return "surface charge density on the conductors"
    where = name.removeprefix("field_slice_").removesuffix(".png").replace("_", " = ", 1)
    return f"field and energy density on the slice {where}"


def _pictures(panels, result, folder, slices, problems, unit):
    """surface_charge.png and one picture per slice."""
    surface = surface_polydata(panels, {}, unit)
    jobs = [(folder / SURFACE_PICTURE,
             lambda tmp: render_surface_charge(surface, result.panel_sigma(), tmp))]
    for axis, value, sgrid, arrays in slices:
        jobs.append((folder / slice_picture_name(axis, value, unit),
                     lambda tmp, s=(axis, value, sgrid, arrays):
                         render_slice_picture(panels, *s, tmp, unit)))
    written = []
    for target, job in jobs:
        try:
            with atomic_path(target) as tmp:
                job(tmp)
            written.append(target)
        except Exception as err:       # noqa: BLE001 - any renderer failure
            problems.append(f"{target.name} not rendered: {err}")
    return written
