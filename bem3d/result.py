"""What the public API hands back: a solved model in the user's length unit, able to save itself."""

import html
from pathlib import Path

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.files import check_output_folder, staged_outputs
from bem3d.base.units import prefix_for
from bem3d.export.field_files import picture_caption, write_field_files
from bem3d.export.outputs import output_names, write_outputs
from bem3d.export.report import REPORT_NAME, write_report
from bem3d.post.field_map import AIR_BREAKDOWN_V_PER_M
from bem3d.post.sensitivity import maxwell_sensitivity, sensitivity_problem


class Result:
    """The capacitance of a model, as solved. SI quantities; lengths in the model's unit.

    names: conductors in matrix order. maxwell (n, n) F: the charge on i per volt on j with the
    others at 0 V; mutual (n, n) F: the two-terminal capacitances (diagonal: to infinity or
    ground, or to the reference conductor); potentials (V), charges (C) and energy (J) at the given potentials; sigma (C/m^2)
    on each panel at those potentials; panels: the conductor panels in `units`; warnings;
    solver and timings records. With lossy media: conductance and mutual_conductance (S) at
    frequency (Hz), I = (G + j omega C) V; all three None otherwise. sensitivity: {conductor:
    (3, n, n)} dC/dx, dC/dy, dC/dz (F/m) when that conductor alone translates, or None where it
    does not apply yet (the warnings say why). Shown in a notebook it prints its tables, never
    arrays."""

    def __init__(self, solved, panels, model, warnings=(), sensitivity=False):
        self._solved, self._panels_m, self.model = solved, panels, model
        self.warnings = list(warnings)
        # the sensitivities cost a field of every panel on every panel, more than the solve:
        # written and printed only when asked (the property computes them on first use)
        self.with_sensitivity = sensitivity
        self._sensitivity_problem = sensitivity_problem(solved, panels)
        if self._sensitivity_problem and sensitivity:
            self.warnings.append(self._sensitivity_problem)
        self._sensitivity = None
        self.files = []

    @property
    def units(self):
        """The length unit of the model's meshes, of `panels` and of every length given."""
        return self.model.length_unit

    names = property(lambda self: tuple(self._solved.names), doc="conductors in matrix order")
    maxwell = property(lambda self: self._solved.maxwell.copy(), doc="Maxwell matrix (F)")
    mutual = property(lambda self: self._solved.mutual, doc="mutual capacitances (F)")
    potentials = property(lambda self: self._solved.potentials.copy(), doc="potentials (V)")
    charges = property(lambda self: self._solved.charges, doc="charges (C) at the potentials")
    energy = property(lambda self: self._solved.energy, doc="stored energy 1/2 V^T C V (J)")
    floating = property(lambda self: dict(self._solved.floating),
                        doc="{name: V} of floating conductors at the given potentials")
    reference = property(lambda self: self._solved.reference,
                         doc="the conductor taken as the ground node, or None (infinity)")
    conductance = property(lambda self: self._solved.conductance,
                           doc="Maxwell-form conductance matrix (S) at `frequency`, or None")
    mutual_conductance = property(lambda self: self._solved.mutual_conductance,
                                  doc="two-terminal conductances (S), or None")
    frequency = property(lambda self: self._solved.frequency_Hz,
                         doc="frequency (Hz) of the conductance, or None")
    solver = property(lambda self: self._solved.solver, doc="how the charges were found")
    timings = property(lambda self: self._solved.timings_s, doc="seconds by stage")

    @property
    def sensitivity(self):
        """{conductor: (3, n, n) ndarray} of dC/dx, dC/dy, dC/dz (F/m) of the Maxwell matrix
        when that conductor alone translates rigidly, from the solved charges (no further
        solve; post.sensitivity); None where it does not apply yet (see warnings)."""
        if self._sensitivity_problem:
            return None
        if self._sensitivity is None:
            self._sensitivity = maxwell_sensitivity(self._solved, self._panels_m)
        return {name: d.copy() for name, d in self._sensitivity.items()}

    def _record_keys(self):
        """The keys Result adds to result.json: the sensitivities, when asked and they apply."""
        sensitivity = self.sensitivity if self.with_sensitivity else None
        if sensitivity is None:
            return {}
        return {"maxwell_sensitivity_F_per_m": {name: d.tolist()
                                                for name, d in sensitivity.items()}}

    @property
    def sigma(self):
        """Charge density (C/m^2) on each panel at the given potentials."""
        return self._solved.panel_sigma()

    @property
    def sigma_per_volt(self):
        """Charge density (C/m^2) on each panel per volt on each conductor (n_panels, n)."""
        return self._solved.sigma.copy()

    @property
    def panels(self):
        """The conductor panels with their corners in `units`."""
        return self._panels_m.transformed(scale=1.0 / LENGTH_UNITS[self.units])

    def checks(self):
        """The physical properties every Maxwell matrix must have, as measured."""
        return self._solved.checks()

    def table(self):
        """The capacitance matrices, energy and checks as text in one readable unit."""
        return self._solved.table()

    def __repr__(self):
        return (f"<bem3d Result: {len(self.names)} conductors, {len(self._panels_m)} panels, "
                f"lengths in {self.units}>\n{self.table()}")

    def _repr_html_(self):
        head = "".join(f"<th>{html.escape(n)}</th>" for n in self.names)
        parts = [f"<p>{len(self.names)} conductors, {len(self._panels_m)} panels, lengths in "
                 f"{html.escape(self.units)}; stored energy {self.energy:.5g} J</p>"]
        tables = [("Maxwell capacitance matrix", self._solved.maxwell, "F"),
                  (f"Mutual capacitance (diagonal: to {self._solved.ground})", self.mutual, "F")]
        if self.conductance is not None:
            tables.append((f"Maxwell conductance matrix at {self.frequency:.6g} Hz",
                           self.conductance, "S"))
        for title, matrix, unit in tables:
            scale, prefix = prefix_for(self._solved.maxwell if unit == "F" else matrix)
            rows = "".join(f"<tr><th>{html.escape(n)}</th>"
                           + "".join(f"<td>{v / scale:.5g}</td>" for v in row) + "</tr>"
                           for n, row in zip(self.names, matrix))
            parts.append(f"<table><caption>{title} [{prefix}{unit}]</caption>"
                         f"<tr><th></th>{head}</tr>{rows}</table>")
        return "".join(parts)

    def to_dataframe(self, matrix="maxwell"):
        """The Maxwell (or 'mutual') matrix in F, or 'conductance' / 'mutual_conductance' in S,
        as a pandas DataFrame labelled by conductor."""
        import pandas as pd

        values = {"maxwell": self._solved.maxwell, "mutual": self.mutual,
                  "conductance": self.conductance,
                  "mutual_conductance": self.mutual_conductance}[matrix]
        if values is None:
            raise ValueError(f"no {matrix} matrix: every medium is lossless")
        return pd.DataFrame(values, index=list(self.names), columns=list(self.names))

    def inputs(self):
        """Every file the model reads (meshes, dielectric bodies, the model file)."""
        return self.model.files()

    def _planned(self, report):
        return output_names(self.model) + ([REPORT_NAME] if report else [])

    def save(self, folder, force=False, report=False):
        """Write result.json, capacitance.csv, the SPICE subcircuit and surface.vtp (and with
        report, report.html) into folder, all together or none; returns their paths."""
        folder = Path(folder)
        check_output_folder(folder, self.inputs(), self._planned(report), force)
        with staged_outputs(folder, self.inputs(), force) as stage:
            written = write_outputs(stage, self._panels_m, self._solved, self.model,
                                    self.warnings, self._record_keys())
            if report:
                written.append(stage / REPORT_NAME)
                write_report(written[-1], self._panels_m, self._solved, self.model,
                             self.warnings)
        self.files = [folder / f.name for f in written]
        return self.files


class FieldResult(Result):
    """A Result with its fields: grid, slices, listed points, energy balance, peaks, forces.

    record: the energy balance (J), peak fields (V/m), forces (N) and torques (N m);
    grid_arrays, slices and at: the evaluated arrays (SI; coordinates of `grid` in metres)."""

    def __init__(self, solved, panels, model, warnings, field_map, png=False, point_file=None,
                 sensitivity=False):
        super().__init__(solved, panels, model, warnings, sensitivity)
        self.field_map, self.png, self.point_file = field_map, png, point_file
        self.picture_problems = []

    record = property(lambda self: self.field_map.record)
    grid_arrays = property(lambda self: self.field_map.grid_arrays)

    @property
    def at(self):
        """{column: values} at the listed points, or None."""
        return None if self.field_map.listed is None else self.field_map.listed[1]

    def save(self, folder, force=False, report=False):
        """Write the solve's files plus field.vti, the slices, points.csv and the pictures
        (and with report, report.html with the pictures in it)."""
        folder = Path(folder)
        inputs = self.inputs() + ([self.point_file] if self.point_file else [])
        check_output_folder(folder, inputs, self._planned(report), force)
        with staged_outputs(folder, inputs, force) as stage:
            written, self.picture_problems = write_field_files(
                stage, self._panels_m, self._solved, self.model, self.field_map,
                self.warnings, self.png or report, self._record_keys())
            if report:
                pictures = [(picture_caption(f.name), f) for f in written
                            if f.suffix == ".png"]
                written.append(stage / REPORT_NAME)
                write_report(written[-1], self._panels_m, self._solved, self.model,
                             self.warnings + self.picture_problems, self.record, pictures,
                             AIR_BREAKDOWN_V_PER_M)
        self.files = [folder / f.name for f in written]
        return self.files

