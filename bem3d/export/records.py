"""Result records: result.json, capacitance.csv, the SPICE subcircuit and point tables."""

import json

import numpy as np

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.files import write_text
from bem3d.base.version import __version__
from bem3d.export.names import csv_cell, csv_text, spice_node, spice_nodes

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
        "reference": result.reference,
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
    # allow_nan=False: a NaN would make the file invalid JSON; require_finite stops it earlier
    write_text(target, json.dumps(result_record(result, extra), indent=2, allow_nan=False)
               + "\n")


def write_csv(result, target):
    """Both matrices in one table: columns matrix, conductor, then one column per conductor (F);
    with lossy media the conductance matrices follow (S)."""
    names = [csv_cell(n) for n in result.names]
    rows = [["matrix", "conductor", *names]]
    tables = [("maxwell_F", result.maxwell), ("mutual_F", result.mutual)]
    if result.loss is not None:
        tables += [("maxwell_conductance_S", result.conductance),
                   ("mutual_conductance_S", result.mutual_conductance)]
    for label, matrix in tables:
        for name, row in zip(names, matrix):
            rows.append([label, name, *(f"{v:.9e}" for v in row)])
    write_text(target, csv_text(rows))


def write_spice(result, target, subckt="bem3d_capacitance"):
    """A .SUBCKT of the mutual capacitances, and with lossy media a resistor 1/G for each
    mutual conductance; port REF is the far/ground reference, or the reference conductor with
    the far field lumped into it. Nodes are the conductor names
    made safe (names.spice_nodes; a comment lists those that differ); elements are numbered
    by conductor, C_i_j and R_i_j, so no two get the same name."""
    nodes = spice_nodes(result.names)
    mutual = result.mutual
    conductance = result.mutual_conductance
    lines = [f"* mutual capacitances from bem3d {__version__}; {result.n_panels} panels"]
    if result.reference is None:
        lines.append("* REF is the reference at infinity (or ground); tie it to your circuit "
                     "ground.")
    else:
        lines.append(f"* REF is the conductor {json.dumps(result.reference)}, the reference, "
                     "with the far field (infinity, ground plane) lumped into it.")
    if conductance is not None:
        lines += [f"* the resistors give the dielectric loss at {result.frequency_Hz:.6g} Hz "
                  "only (G grows in proportion to frequency for a constant loss tangent);",
                  "* a negative one is no error: the loss is positive for the network as a "
                  "whole, not resistor by resistor"]
        smallest = 1e-9 * float(np.abs(conductance).max())
    lines += [f".SUBCKT {spice_node(subckt)} " + " ".join(nodes) + " REF",
              *(f"* node {node} is the conductor {json.dumps(name)}"
                for node, name in zip(nodes, result.names) if node != name)]
    for i, a in enumerate(nodes):
        ends = [(j, nodes[j], j + 1) for j in range(i + 1, len(nodes))] + [(i, "REF", "REF")]
        for j, b, label in ends:
            if mutual[i, j] > 0:
                lines.append(f"C_{i + 1}_{label} {a} {b} {mutual[i, j]:.6e}")
            if conductance is not None and abs(conductance[i, j]) > smallest:
                lines.append(f"R_{i + 1}_{label} {a} {b} {1.0 / conductance[i, j]:.6e}")
    lines.append(f".ENDS {spice_node(subckt)}")
    write_text(target, "\n".join(lines) + "\n")


def write_point_table(points, columns, target, unit="m"):
    """CSV: x, y, z in the length unit `unit` (columns x_mm, y_mm, z_mm; points given in
    metres), then one column per (name, values) pair; vectors get _x/_y/_z."""
    names, data = [f"{c}_{unit}" for c in "xyz"], [np.asarray(points) / LENGTH_UNITS[unit]]
    for name, values in columns.items():
        values = np.asarray(values)
        if values.ndim == 2:
            names += [f"{name}_{c}" for c in "xyz"]
        else:
            names.append(name)
            values = values[:, None]
        data.append(values)
    table = np.hstack(data)
    write_text(target, csv_text([[csv_cell(n) for n in names]]
                                + [[f"{v:.9e}" for v in row] for row in table]))
