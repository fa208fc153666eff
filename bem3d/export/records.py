"""Result records: result.json, capacitance.csv, the SPICE subcircuit and point tables."""

import json
import re

import numpy as np

from bem3d.base.files import write_text
from bem3d.base.version import __version__

CAUTION = ("Engineering estimate from a surface discretisation. Stored field energy in "
           "high-voltage structures can injure; clearances and safety follow the applicable "
           "codes and licensed practice, not this result.")


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
    if result.loss is not None:
        record.update({"frequency_Hz": result.frequency_Hz,
                       "conductance_S": result.conductance.tolist(),
                       "mutual_conductance_S": result.mutual_conductance.tolist()})
    record.update(extra or {})
    return record


def write_json(result, target, extra=None):
    write_text(target, json.dumps(result_record(result, extra), indent=2) + "\n")


def write_csv(result, target):
    """Both matrices in one table: columns matrix, conductor, then one column per conductor (F);
    with lossy media the conductance matrices follow (S)."""
    rows = ["matrix,conductor," + ",".join(result.names)]
    tables = [("maxwell_F", result.maxwell), ("mutual_F", result.mutual)]
    if result.loss is not None:
        tables += [("maxwell_conductance_S", result.conductance),
                   ("mutual_conductance_S", result.mutual_conductance)]
    for label, matrix in tables:
        for name, row in zip(result.names, matrix):
            rows.append(f"{label},{name}," + ",".join(f"{v:.9e}" for v in row))
    write_text(target, "\n".join(rows) + "\n")


def spice_node(name):
    """A conductor name made safe as a SPICE node name."""
    return re.sub(r"[^A-Za-z0-9_]", "_", name)


def write_spice(result, target, subckt="bem3d_capacitance"):
    """A .SUBCKT of the mutual capacitances, and with lossy media a resistor 1/G for each
    mutual conductance; port REF is the far/ground reference."""
    nodes = [spice_node(n) for n in result.names]
    mutual = result.mutual
    conductance = result.mutual_conductance
    lines = [f"* mutual capacitances from bem3d {__version__}; {result.n_panels} panels",
             "* REF is the reference at infinity (or ground); tie it to your circuit ground."]
    if conductance is not None:
        lines += [f"* the resistors give the dielectric loss at {result.frequency_Hz:.6g} Hz "
                  "only (G grows in proportion to frequency for a constant loss tangent);",
                  "* a negative one is no error: the loss is positive for the network as a "
                  "whole, not resistor by resistor"]
        smallest = 1e-9 * float(np.abs(conductance).max())
    lines.append(f".SUBCKT {spice_node(subckt)} " + " ".join(nodes) + " REF")
    for i, a in enumerate(nodes):
        ends = [(j, nodes[j]) for j in range(i + 1, len(nodes))] + [(i, "REF")]
        for j, b in ends:
            if mutual[i, j] > 0:
                lines.append(f"C_{a}_{b} {a} {b} {mutual[i, j]:.6e}")
            if conductance is not None and abs(conductance[i, j]) > smallest:
                lines.append(f"R_{a}_{b} {a} {b} {1.0 / conductance[i, j]:.6e}")
    lines.append(f".ENDS {spice_node(subckt)}")
    write_text(target, "\n".join(lines) + "\n")


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
    write_text(target, "\n".join(lines) + "\n")
