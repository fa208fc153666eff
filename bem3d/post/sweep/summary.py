"""The summary of a sweep: which matrix entries, and one row per case with their values."""

import numpy as np

from bem3d.export.sweep_summary import entry_column
from bem3d.results import mutual_from_maxwell


def default_entries(records):
    """Every entry i <= j of both matrices, over the conductors of the finished cases."""
    names = list(dict.fromkeys(n for r in records for n in r["conductors"]))
    pairs = [(a, b) for i, a in enumerate(names) for b in names[i:]]
    return [("mutual", a, b) for a, b in pairs] + [("maxwell", a, b) for a, b in pairs]


def plotted_entries(chosen):
    """The default plot's entries: the coupling capacitances (or the one to infinity for one
    conductor)."""
    return ([e for e in chosen if e[0] == "mutual" and e[1] != e[2]]
            or [e for e in chosen if e[0] == "mutual"])


def entry_value(record, entry):
    """The entry (F) in a finished case's record, or None if the case lacks those conductors."""
    kind, a, b = entry
    names = record["conductors"]
    if a not in names or b not in names:
        return None
    maxwell = np.array(record["maxwell_capacitance_F"])
    matrix = maxwell if kind == "maxwell" else mutual_from_maxwell(maxwell)
    return float(matrix[names.index(a), names.index(b)])


def summary_rows(cases, records, entries):
    """One dict per case: case, label, status, parameters, panels, entries (F), energy, error,
    warnings (joined by '; ').

    records: {case index: case.json record} of the cases that finished or failed."""
    rows = []
    for case in cases:
        r = records.get(case.index, {"status": "not run"})
        row = {"case": case.index, "label": case.label, "status": r["status"]}
        row.update(case.parameters)
        ok = r["status"] == "ok"
        row["panels"] = r.get("panels", "")
        for e in entries:
            value = entry_value(r, e) if ok else None
            row[entry_column(e)] = "" if value is None else f"{value:.9e}"
        row["energy_J"] = f"{r['energy_J']:.9e}" if ok else ""
        row["solve_s"] = f"{r['solve_seconds']:.3f}" if ok else ""
        row["error"] = r.get("error") or ""
        row["warnings"] = "; ".join(r.get("warnings") or [])
        rows.append(row)
    return rows
