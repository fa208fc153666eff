"""The files every solve writes, together."""

from pathlib import Path

from bem3d.export.checks import require_finite
from bem3d.export.names import spice_node
from bem3d.export.records import result_record, write_csv, write_json, write_spice
from bem3d.export.vtk import surface_conductors, write_surface


def output_names(model):
    """Names of the files write_outputs writes for the model, in its order."""
    return ["result.json", "capacitance.csv", f"{spice_node(model.spice_name)}.cir",
            "surface.vtp"]


def write_outputs(folder, panels, result, model, warnings=(), extra=None, extra_cells=None):
    """Write result.json, capacitance.csv, <spice_name>.cir and surface.vtp; return their paths.

    Nothing is written if a capacitance, charge, energy, solver or extra figure is NaN or
    infinite (Bem3dError). extra: more keys for result.json; extra_cells: more cell arrays for
    surface.vtp. result.json's surface_conductors names the index `conductor` of surface.vtp
    (the matrix's conductors, then floating ones); surface.vtp's corners are in the model's
    length unit."""
    folder = Path(folder)
    files = [folder / name for name in output_names(model)]
    record = {"length_unit_of_meshes": model.length_unit,
              "meshes": [str(m) for m in model.meshes],
              "surface_conductors": surface_conductors(panels, result),
              "warnings": list(warnings)}
    record.update(extra or {})
    require_finite(result_record(result, record), ", ".join(str(m) for m in model.meshes))
    write_json(result, files[0], record)
    write_csv(result, files[1])
    write_spice(result, files[2], model.spice_name)
    write_surface(panels, result, files[3], extra_cells, model.length_unit)
    return files
