"""Writers for results: JSON, CSV, SPICE subcircuit, VTK PolyData. Each write is atomic."""

import json
import os
import re
import tempfile
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from . import __version__

CAUTION = ("Engineering estimate from a surface discretisation. Stored field energy in "
           "high-voltage structures can injure; clearances and safety follow the applicable "
           "codes and licensed practice, not this result.")


_UMASK = os.umask(0o022)
os.umask(_UMASK)


@contextmanager
def atomic_path(target):
    """Yield a temporary path beside target (same suffix); it replaces target only on success."""
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.stem}.", suffix=target.suffix, dir=target.parent)
    os.close(fd)
    try:
        yield Path(tmp)
        os.chmod(tmp, 0o666 & ~_UMASK)       # mkstemp makes files private; outputs are not
        os.replace(tmp, target)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def _write_text(target, text):
    with atomic_path(target) as tmp:
        tmp.write_text(text, encoding="utf-8")


def result_record(result, extra=None):
    """The result as a JSON-ready dict (SI units, names in matrix order)."""
    record = {
        "bem3d_version": __version__,
        "conductors": list(result.names),
        "maxwell_capacitance_F": result.maxwell.tolist(),
        "mutual_capacitance_F": result.mutual.tolist(),
        "panels": int(result.n_panels),
        "potentials_V": result.potentials.tolist(),
        "floating_potentials_V": result.floating,
        "charges_C": result.charges.tolist(),
        "energy_J": result.energy,
        "checks": result.checks(),
        "solver": result.solver,
        "timings_s": result.timings_s,
        "caution": CAUTION,
    }
    record.update(extra or {})
    return record


def write_json(result, target, extra=None):
    _write_text(target, json.dumps(result_record(result, extra), indent=2) + "\n")


def write_csv(result, target):
    """Both matrices in one table: columns matrix, conductor, then one column per conductor (F)."""
    rows = ["matrix,conductor," + ",".join(result.names)]
    for label, matrix in [("maxwell_F", result.maxwell), ("mutual_F", result.mutual)]:
        for name, row in zip(result.names, matrix):
            rows.append(f"{label},{name}," + ",".join(f"{v:.9e}" for v in row))
    _write_text(target, "\n".join(rows) + "\n")


def spice_node(name):
    """A conductor name made safe as a SPICE node name."""
    return re.sub(r"[^A-Za-z0-9_]", "_", name)


def write_spice(result, target, subckt="bem3d_capacitance"):
    """A .SUBCKT of the mutual capacitances; port REF is the far/ground reference."""
    nodes = [spice_node(n) for n in result.names]
    mutual = result.mutual
    lines = [f"* mutual capacitances from bem3d {__version__}; {result.n_panels} panels",
             "* REF is the reference at infinity (or ground); tie it to your circuit ground.",
             f".SUBCKT {spice_node(subckt)} " + " ".join(nodes) + " REF"]
    for i, a in enumerate(nodes):
        for j in range(i + 1, len(nodes)):
            if mutual[i, j] > 0:
                lines.append(f"C_{a}_{nodes[j]} {a} {nodes[j]} {mutual[i, j]:.6e}")
        if mutual[i, i] > 0:
            lines.append(f"C_{a}_REF {a} REF {mutual[i, i]:.6e}")
    lines.append(f".ENDS {spice_node(subckt)}")
    _write_text(target, "\n".join(lines) + "\n")


def surface_polydata(panels, cell_arrays):
    """pyvista PolyData of the panels (metres) with the given cell arrays."""
    import pyvista as pv

    points, corner_ids = np.unique(panels.vertices.reshape(-1, 3), axis=0, return_inverse=True)
    faces = np.hstack([np.full((len(panels), 1), 3), corner_ids.reshape(-1, 3)]).ravel()
    mesh = pv.PolyData(points, faces)
    for name, values in cell_arrays.items():
        mesh.cell_data[name] = values
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
        image.point_data[name] = values
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
        mesh.point_data[name] = values
    with atomic_path(target) as tmp:
        mesh.save(tmp)


def write_point_table(points, columns, target):
    """CSV: x_m, y_m, z_m, then one column per (name, values) pair; vectors get _x/_y/_z."""
    names, data = ["x_m", "y_m", "z_m"], [points]
    for name, values in columns.items():
        values = np.asarray(values)
        if values.ndim == 2:
            names += [f"{name}_{c}" for c in "xyz"]
        else:
            names.append(name)
            values = values[:, None]
        data.append(values)
    table = np.hstack(data)
    lines = [",".join(names)] + [",".join(f"{v:.9e}" for v in row) for row in table]
    _write_text(target, "\n".join(lines) + "\n")


def output_names(model):
    """Names of the files write_outputs writes for the model, in its order."""
    return ["result.json", "capacitance.csv", f"{spice_node(model.spice_name)}.cir",
            "surface.vtp"]


def write_outputs(folder, panels, result, model, warnings=(), extra=None, extra_cells=None):
    """Write result.json, capacitance.csv, <spice_name>.cir and surface.vtp; return their paths.

    Nothing is written if a capacitance, charge, energy or solver figure is NaN or infinite
    (Bem3dError). extra: more keys for result.json; extra_cells: more cell arrays for
    surface.vtp."""
    from .safety import require_finite

    require_finite(result_record(result), ", ".join(str(m) for m in model.meshes))
    folder = Path(folder)
    files = [folder / name for name in output_names(model)]
    record = {"length_unit_of_meshes": model.length_unit,
              "meshes": [str(m) for m in model.meshes], "warnings": list(warnings)}
    record.update(extra or {})
    write_json(result, files[0], record)
    write_csv(result, files[1])
    write_spice(result, files[2], model.spice_name)
    write_surface(panels, result, files[3], extra_cells)
    return files
