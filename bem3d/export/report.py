"""report.html: one self-contained page of a run for a design review, that opens offline and
prints: the model, the Maxwell matrix, the couplings ranked by size, the conductance, the
energy balance, peak fields, forces, warnings, the solver record and the cautions.

Pictures are embedded as data URIs; the page loads nothing. Every text from the user (names,
paths, warnings) is escaped by the template engine (autoescape)."""

import base64
from pathlib import Path

import numpy as np

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.files import write_text
from bem3d.base.units import format_quantity, prefix_for
from bem3d.base.version import __version__
from bem3d.export.records import CAUTION
from bem3d.results import ranked_couplings

#: The file name of the report in a result folder.
REPORT_NAME = "report.html"

#: The energy balance of a field run: (label, result.json key), as the console prints it.
ENERGY_ROWS = (("1/2 V^T C V", "energy_J"), ("1/2 sum Q V", "energy_from_charges_J"),
               ("grid integral of 1/2 eps |E|^2", "energy_grid_J"),
               ("outside the grid (surface identity)", "energy_outside_grid_J"),
               ("outside the grid (monopole + dipole)", "energy_outside_grid_multipole_J"),
               ("grid + outside", "energy_grid_plus_outside_J"))


def energy_rows(record):
    """(label, energy text, share of 1/2 V^T C V or '') of a field run's energy balance."""
    w = record["energy_J"]
    return [(label, format_quantity(record[key], "J"), f"{record[key] / w:.2%}" if w else "")
            for label, key in ENERGY_ROWS]


def matrix_table(names, matrix, unit):
    """(unit with prefix, rows of (name, [entry texts])) in one readable unit, each entry as
    the console prints it (5 significant digits)."""
    scale, prefix = prefix_for(matrix)
    return {"unit": f"{prefix}{unit}",
            "rows": [(n, [f"{v / scale:#.5g}" for v in row]) for n, row in zip(names, matrix)]}


def _picture(path):
    return "data:image/png;base64," + base64.b64encode(Path(path).read_bytes()).decode("ascii")


def _model_facts(panels, solved, model):
    """(label, value) lines of the model summary."""
    unit = model.length_unit
    corners = panels.vertices.reshape(-1, 3) / LENGTH_UNITS[unit]
    lo, hi = corners.min(axis=0), corners.max(axis=0)
    facts = [("meshes", ", ".join(str(m) for m in model.meshes)),
             ("length unit", unit),
             ("conductors", f"{panels.n_conductors} ({len(solved.names)} in the matrices)"),
             ("panels", f"{len(panels):,}"),
             ("bounding box", f"({', '.join(f'{x:.4g}' for x in lo)}) .. "
                              f"({', '.join(f'{x:.4g}' for x in hi)}) {unit}"),
             ("background relative permittivity", f"{model.relative_permittivity:g}")]
    if model.loss_tangent:
        facts.append(("background loss tangent", f"{model.loss_tangent:g}"))
    if model.ground_plane_z is not None:
        facts.append(("grounded plane", f"z = {model.ground_plane_z:g} {unit}"))
    for path, eps_r, *loss in model.dielectrics:
        tan_d = f", tan d {loss[0]:g}" if loss and loss[0] else ""
        facts.append(("dielectric body", f"{path}: eps_r {eps_r:g}{tan_d}"))
    if solved.frequency_Hz is not None:
        facts.append(("frequency of the conductance", f"{solved.frequency_Hz:.6g} Hz"))
    facts.append(("stored energy at the given potentials", format_quantity(solved.energy, "J")))
    return facts


def report_context(panels, solved, model, warnings=(), field_record=None, pictures=(),
                   breakdown_V_per_m=None):
    """What the template shows, as plain texts and numbers (SI, lengths in the mesh unit).

    panels: the conductor panels (m); solved: a results.CapacitanceResult; field_record: the
    keys a field run adds to result.json, or None; pictures: (title, PNG path) pairs;
    breakdown_V_per_m: the field the peaks are compared with (field runs)."""
    names = list(solved.names)
    scale, prefix = prefix_for(solved.maxwell)
    potentials = dict(zip(names, solved.potentials))
    conductors = [{"name": n, "panels": int(np.sum(panels.owner == k)),
                   "volts": f"{potentials.get(n, solved.floating.get(n, 0.0)):.6g}",
                   "floating": n in solved.floating}
                  for k, n in enumerate(panels.names)]
    context = {
        "version": __version__,
        "title": ", ".join(Path(m).name for m in model.meshes),
        "facts": _model_facts(panels, solved, model),
        "conductors": conductors,
        "maxwell": matrix_table(names, solved.maxwell, "F"),
        "names": names,
        "couplings": [{"a": c.a, "b": c.b, "value": f"{c.capacitance / scale:#.5g}",
                       "share_a": f"{c.share_a:.2%}", "share_b": f"{c.share_b:.2%}"}
                      for c in ranked_couplings(names, solved.maxwell)],
        "coupling_unit": f"{prefix}F",
        "to_ground": [(n, f"{v / scale:#.5g}") for n, v in zip(names,
                                                               solved.maxwell.sum(axis=1))],
        "conductance": None if solved.conductance is None
        else matrix_table(names, solved.conductance, "S"),
        "warnings": list(warnings),
        "solver": [(k, _plain(v)) for k, v in solved.solver.items()],
        "timings": [(k, f"{v:.3g} s") for k, v in solved.timings_s.items()],
        "cautions": [CAUTION],
        "pictures": [(title, _picture(path)) for title, path in pictures],
        "field": None,
    }
    if field_record is not None:
        unit = model.length_unit
        context["field"] = {
            "energy": energy_rows(field_record),
            "peaks": [{"name": n, "value": format_quantity(p["value"], "V/m"),
                       "share": f"{p['value'] / breakdown_V_per_m:.2%}",
                       "at": ", ".join(f"{x / LENGTH_UNITS[unit]:.4g}" for x in p["at_m"])}
                      for n, p in field_record["peak_field_V_per_m"].items()],
            "breakdown": format_quantity(breakdown_V_per_m, "V/m"),
            "forces": [(n, [f"{c:.4g}" for c in f]) for n, f in field_record["force_N"].items()],
            "unit": unit,
        }
        context["cautions"].append(field_record["field_caution"])
    return context


def _plain(value):
    """A solver-record value as short text."""
    if isinstance(value, float):
        return f"{value:.4g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(_plain(v) for v in value)
    return str(value)


def render_report(context):
    """The page's HTML text."""
    import jinja2

    env = jinja2.Environment(loader=jinja2.PackageLoader("bem3d.export", "templates"),
                             autoescape=True, undefined=jinja2.StrictUndefined)
    return env.get_template("report.html.j2").render(**context)


def write_report(target, panels, solved, model, warnings=(), field_record=None, pictures=(),
                 breakdown_V_per_m=None):
    """Write report.html (see report_context for the arguments)."""
    write_text(target, render_report(report_context(panels, solved, model, warnings,
                                                    field_record, pictures,
                                                    breakdown_V_per_m)))
