"""case.json: what a finished or failed case leaves in its folder, and what a re-run reads back."""

import json

from bem3d.base.errors import Bem3dError
from bem3d.base.files import write_text


def case_record(case, keys, result=None, error=None, warnings=()):
    """What case.json holds for a finished (result) or failed (error text) case; keys: the
    (solve key, case key) pair, or None if the case failed before they were known; warnings:
    the accuracy warnings of the case's geometry (e.g. conductors moved closer than their
    panel size)."""
    record = {"case": case.index, "label": case.label, "key": keys[1] if keys else None,
              "solve_key": keys[0] if keys else None, "parameters": case.parameters,
              "status": "ok" if error is None else "failed", "error": error,
              "warnings": list(warnings)}
    if result is not None:
        record.update(conductors=list(result.names),
                      maxwell_capacitance_F=result.maxwell.tolist(),
                      potentials_V=result.potentials.tolist(),
                      floating_potentials_V=result.floating, energy_J=result.energy,
                      panels=result.n_panels, solve_seconds=result.timings_s.get("total", 0.0))
        if result.loss is not None:
            record.update(frequency_Hz=result.frequency_Hz,
                          conductance_S=result.conductance.tolist())
    return record


def read_record(folder):
    """The case.json in folder, or None if there is none or it does not parse."""
    try:
        return json.loads((folder / "case.json").read_text())
    except (OSError, ValueError):
        return None


def clear_stale(folder, keep):
    """Remove the files of a case folder not named in `keep` once new results are in place
    (an earlier run's other files would mislead)."""
    for f in folder.iterdir():
        if f.is_file() and f.name not in keep:
            f.unlink()


def write_record(folder, record):
    """folder/case.json, written atomically."""
    write_text(folder / "case.json", json.dumps(record, indent=2) + "\n")


def error_text(err):
    """The message a failed case records: a user's error as it is, anything else with its type."""
    return str(err) if isinstance(err, Bem3dError) else f"{type(err).__name__}: {err}"


def record_failure(folder, case, keys, err):
    """Record a failed case (its error in case.json); the sweep goes on. Files an earlier run
    finished in the folder stay: a failure never deletes results."""
    record = case_record(case, keys, error=error_text(err))
    write_record(folder, record)
    return record
