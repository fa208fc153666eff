"""Files of a mesh-convergence study: each mesh's outputs, convergence.json and convergence.csv."""

import json
from pathlib import Path

import numpy as np

from bem3d.base.files import write_text
from bem3d.export.names import csv_cell, csv_text
from bem3d.export.outputs import write_outputs

#: The study's own files in its folder (besides each mesh's folder mesh_<level>).
CONVERGENCE_FILES = ("convergence.json", "convergence.csv")


def convergence_record(conv):
    """JSON-ready dict (SI units) of a post.convergence.Convergence."""
    def plain(a):                     # NaN (no extrapolation) is null in JSON
        return np.where(np.isfinite(a), a, None).tolist()

    def block(ext):
        return {"extrapolated_F": plain(ext.value), "error_estimate_F": plain(ext.error),
                "order": plain(ext.order), "status": ext.status.tolist()}

    return {"conductors": list(conv.names), "panels": [len(p) for p in conv.panels],
            "subdivision": "smooth" if conv.smooth else "flat",
            "maxwell_capacitance_F": [r.maxwell.tolist() for r in conv.results],
            "mutual_capacitance_F": [r.mutual.tolist() for r in conv.results],
            "maxwell": block(conv.maxwell), "mutual": block(conv.mutual)}


def write_convergence(conv, folder, model, warnings=()):
    """Every mesh's outputs in folder/mesh_<level> (as `bem3d extract` writes them for `model`),
    then convergence.json and convergence.csv in folder; returns the paths of those two."""
    folder = Path(folder)
    for level, (panels, result) in enumerate(zip(conv.panels, conv.results)):
        write_outputs(folder / f"mesh_{level}", panels, result, model, warnings)
    files = [folder / name for name in CONVERGENCE_FILES]
    write_text(files[0], json.dumps(convergence_record(conv), indent=2) + "\n")
    rows = [["matrix", "row", "column"] + [f"panels_{len(p)}_F" for p in conv.panels]
            + ["extrapolated_F", "error_estimate_F", "order", "status"]]
    for label, a, b, levels, ext, ij in conv.entries():
        rows.append([label, csv_cell(a), csv_cell(b)] + [f"{v:.9e}" for v in levels]
                    + [f"{ext.value[ij]:.9e}", f"{ext.error[ij]:.3e}",
                       f"{ext.order[ij]:.3f}", str(ext.status[ij])])
    write_text(files[1], csv_text(rows))
    return files
