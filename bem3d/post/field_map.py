"""The `field` job: fields on a grid, slices and listed points, energy balance, peaks, forces."""

import math
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from bem3d.base.constants import EPS0
from bem3d.solve.dielectric import medium_at
from bem3d.base.errors import ModelError, ResourceError
from bem3d.base.files import atomic_path
from bem3d.export.vtk import surface_polydata, write_image, write_slice
from bem3d.export.outputs import write_outputs
from bem3d.export.records import write_point_table
from bem3d.post.grid import Grid
from bem3d.post.fields import conductor_forces, peak_fields, surface_fields
from bem3d.post.energy import energy_balance
from bem3d.operators.points import evaluate
from bem3d.mesh_io.read import closed_conductors

#: Largest number of grid points a run may ask for (each point costs ~100 bytes per excitation).
MAX_GRID_POINTS = 20_000_000
#: Air breaks down near 3 kV/mm at sea level (common practice, no source).
AIR_BREAKDOWN_V_PER_M = 3e6
FIELD_CAUTION = ("Air breaks down near 3 kV/mm at sea level (common practice, no source); "
                 "edges and corners concentrate the field and flat-panel meshes under-resolve "
                 "them, so true peaks are higher than shown. Final clearances follow the "
                 "applicable codes and licensed practice.")


@dataclass
class FieldRequest:
    """Where to evaluate the field. Lengths in metres.

    box: (lo (3,), hi (3,)) or None for the model's bounding box widened by `margin` times its
    largest size; spacing (m) or points (nx, ny, nz) set the resolution; slices: [(axis index,
    coordinate)]; point_file: CSV of x, y, z in the mesh unit (scaled by `point_scale`)."""

    box: tuple | None = None
    margin: float = 0.5
    points: tuple = (41, 41, 41)
    spacing: float | None = None
    slices: list = field(default_factory=list)
    point_file: Path | None = None
    point_scale: float = 1.0
    unit_fields: bool = False
    png: bool = False

    def grid(self, panels, ground_z=None):
        v = panels.vertices.reshape(-1, 3)
        if self.box is None:
            lo, hi = v.min(axis=0), v.max(axis=0)
            pad = self.margin * (hi - lo).max()
            lo, hi = lo - pad, hi + pad
            if ground_z is not None:          # below a grounded plane there is no field
                lo[2] = ground_z
        else:
            lo, hi = (np.asarray(b, float) for b in self.box)
            if np.any(hi <= lo):
                raise ModelError("--box: each maximum must exceed its minimum")
        if self.spacing is not None:
            if not self.spacing > 0:
                raise ModelError("--spacing must be positive")
            counts = np.floor((hi - lo) / self.spacing + 1e-9).astype(int) + 1
            hi = lo + (counts - 1) * self.spacing
        else:
            counts = np.asarray(self.points, int)
            if counts.size == 1:
                counts = np.repeat(counts, 3)
            if np.any(counts < 2):
                raise ModelError("--points: at least 2 per axis")
        total = math.prod(int(c) for c in counts)         # Python ints: no overflow
        if total > MAX_GRID_POINTS:
            raise ResourceError(f"the grid would have {total:,} points (limit "
                                f"{MAX_GRID_POINTS:,}); use a coarser --spacing or fewer --points")
        return Grid.box(lo, hi, counts)

    def plan(self, panels, ground_z=None):
        """Check the whole request against the model before any solving: returns the grid,
        [(axis, value, slice grid)] and the listed points (m) or None."""
        grid = self.grid(panels, ground_z)
        slices = list(self.slices)
        if self.png and not slices:       # a picture needs a slice: the box's middle in z
            slices = [(2, float(grid.origin[2] + grid.spacing[2] * (grid.shape[2] - 1) / 2))]
        slice_grids = [(axis, value, _slice_grid(grid, axis, value)) for axis, value in slices]
        listed = None if self.point_file is None else read_points(self.point_file,
                                                                  self.point_scale)
        return grid, slice_grids, listed


def read_points(path, scale):
    """x, y, z rows (m) from a CSV file; a first line that is not numbers is a header."""
    path = Path(path)
    try:
        lines = path.read_text(encoding="utf-8").splitlines()
    except (OSError, UnicodeDecodeError) as err:
        raise ModelError(f"{path}: cannot read point list ({err})") from None
    rows = []
    for number, line in enumerate(lines, 1):
        if not line.strip():
            continue
        parts = line.replace(";", ",").split(",")
        try:
            values = [float(p) for p in parts[:3]]
        except ValueError:
            if rows or number > 1:
                raise ModelError(f"{path}:{number}: expected three numbers x, y, z") from None
            continue
        if len(values) != 3 or not np.all(np.isfinite(values)):
            raise ModelError(f"{path}:{number}: expected three finite numbers x, y, z")
        rows.append(values)
    if not rows:
        raise ModelError(f"{path}: no points")
    return np.array(rows) * scale


def _slice_grid(grid, axis, value):
    lo = grid.origin.copy()
    hi = grid.origin + grid.spacing * (np.array(grid.shape) - 1)
    if not lo[axis] <= value <= hi[axis]:
        raise ModelError(f"--slice {'xyz'[axis]}={value:g} m lies outside the field box "
                         f"({lo[axis]:g} .. {hi[axis]:g} m)")
    lo[axis] = hi[axis] = value
    shape = list(grid.shape)
    shape[axis] = 1
    return Grid.box(lo, hi, shape)


def _progress_bar(total, label, enabled):
    if not enabled:
        return None, lambda: None
    from tqdm import tqdm

    bar = tqdm(total=total, desc=label, unit="pt", unit_scale=True, file=sys.stderr,
               leave=False, disable=None)
    state = {"done": 0}

    def update(done):
        bar.update(done - state["done"])
        state["done"] = done

    return update, bar.close


def _point_arrays(fields, eps, names, unit_fields, dielectric):
    """VTK point arrays: the given excitation, then optionally each conductor at 1 V.
    eps: permittivity (F/m) at each point."""
    arrays = {"phi": fields.phi[:, 0], "E": fields.E[:, 0],
              "E_magnitude": np.linalg.norm(fields.E[:, 0], axis=1),
              "energy_density": fields.energy_density(eps)[:, 0],
              "inside_conductor": fields.inside.astype(np.uint8)}
    if dielectric:
        arrays["D"] = eps[:, None] * fields.E[:, 0]
        arrays["eps_r"] = eps / EPS0
    if unit_fields:
        for j, name in enumerate(names, start=1):
            arrays[f"phi_unit_{name}"] = fields.phi[:, j]
            arrays[f"E_unit_{name}"] = fields.E[:, j]
    return arrays


class _Evaluator:
    """Fields of one result at any points: its sources (conductors, plus dielectric
    interfaces), the given excitation first, then each conductor at 1 V if asked."""

    def __init__(self, panels, result, unit_fields, progress):
        self.source = result.field_sources(panels)
        given = self.source.sigma @ result.potentials
        self.sigma = np.column_stack([given] + ([self.source.sigma] if unit_fields else []))
        self.ground_z = result.solver.get("ground_plane_z_m")
        self.progress = progress
        # only conductors count for the inside marker, not dielectric interfaces
        self.inside_of = np.zeros(len(self.source.panels))
        self.inside_of[:len(panels)] = closed_conductors(panels)[panels.owner]
        self.given_source = (self.source.panels, given, self.source.kernel_eps_r)

    def fields(self, points, label, columns=None):
        update, close = _progress_bar(len(points), label, self.progress)
        try:
            return evaluate(self.source.panels, self.sigma[:, :columns], points,
                            self.source.kernel_eps_r, progress=update, ground_z=self.ground_z,
                            inside_of=self.inside_of)
        finally:
            close()

    def eps(self, points):
        """Permittivity (F/m) at points (m, 3)."""
        if not self.source.bodies:
            return np.full(len(points), EPS0 * self.source.background)
        return EPS0 * medium_at(points, self.source.bodies, self.source.background)


def map_fields(panels, result, model, request, plan, warnings=(), progress=False):
    """Evaluate, balance and write everything for the `field` job; returns (record, files).

    plan: request.plan(panels), made before the solve so that a bad request costs nothing.

    record holds the keys added to result.json (energies J, peaks V/m, forces N, torques N m)."""
    folder = Path(model.output_folder)
    grid, slice_grids, listed = plan
    ev = _Evaluator(panels, result, request.unit_fields, progress)
    dielectric = bool(ev.source.bodies)

    start = time.perf_counter()
    grid_points = grid.points()
    grid_fields = ev.fields(grid_points, "grid")
    grid_eps = ev.eps(grid_points)
    boundary = grid.boundary()
    boundary_fields = ev.fields(boundary[0], "box faces", columns=1)
    balance = energy_balance(panels, result, grid, grid_fields, boundary_fields, boundary,
                             ev.ground_z, grid_eps, ev.eps(boundary[0]), ev.given_source)
    size = float(np.ptp(panels.vertices.reshape(-1, 3), axis=0).max())
    eps_panel = ev.eps(panels.centroids + 1e-6 * size * panels.normals) / EPS0
    surface = surface_fields(panels, result.panel_sigma(), eps_panel, ground_z=ev.ground_z,
                             source=ev.given_source)
    force, torque = conductor_forces(panels, surface)
    peaks = peak_fields(panels, surface)
    slice_fields = [ev.fields(sgrid.points(), "slice") for _, _, sgrid in slice_grids]
    listed_fields = None if listed is None else ev.fields(listed, "points")
    result.timings_s["fields"] = time.perf_counter() - start

    record = dict(balance)
    record.update({
        "grid": {"origin_m": grid.origin.tolist(), "spacing_m": grid.spacing.tolist(),
                 "shape": list(grid.shape)},
        "peak_field_V_per_m": {n: {"value": v, "at_m": at}
                               for n, (v, at) in zip(panels.names, peaks)},
        "force_N": {n: f.tolist() for n, f in zip(panels.names, force)},
        "torque_about_centroid_N_m": {n: t.tolist() for n, t in zip(panels.names, torque)},
        "field_caution": FIELD_CAUTION,
    })
    face_max = np.linalg.norm(surface.face_fields, axis=2).max(axis=1)
    files = write_outputs(folder, panels, result, model, warnings, record,
                          {"E_normal": surface.normal_field, "E_face_max": face_max,
                           "force_density": surface.panel_force / panels.areas[:, None]})
    target = folder / "field.vti"
    write_image(grid, _point_arrays(grid_fields, grid_eps, result.names, request.unit_fields,
                                    dielectric), target)
    files.append(target)
    slice_outputs = []
    for (axis, value, sgrid), sfields in zip(slice_grids, slice_fields):
        target = folder / f"slice_{'xyz'[axis]}_{value:.6g}.vtp"
        arrays = _point_arrays(sfields, ev.eps(sgrid.points()), result.names,
                               request.unit_fields, dielectric)
        write_slice(sgrid, arrays, target)
        files.append(target)
        slice_outputs.append((target, axis, arrays))
    if listed is not None:
        target = folder / "points.csv"
        write_point_table(listed, {"phi_V": listed_fields.phi[:, 0],
                                   "E_V_per_m": listed_fields.E[:, 0],
                                   "energy_density_J_per_m3":
                                       listed_fields.energy_density(ev.eps(listed))[:, 0],
                                   "inside_conductor": listed_fields.inside.astype(int)}, target)
        files.append(target)

    if request.png:
        problems = []
        files += _pictures(panels, result, folder, slice_outputs[0], problems)
        record["picture_problems"] = problems     # shown on the console; numbers are written
    return record, files


def _pictures(panels, result, folder, first_slice, problems):
    """surface_charge.png and the |E| picture of the first slice; a renderer failure is a
    warning, not a failed run (the numbers are already written)."""
    import pyvista as pv

    from bem3d.export.pictures import render_slice, render_surface_charge

    surface = surface_polydata(panels, {})
    slice_path, axis, arrays = first_slice
    written = []
    jobs = [(folder / "surface_charge.png",
             lambda tmp: render_surface_charge(surface, result.panel_sigma(), tmp)),
            (folder / "field_slice.png",
             lambda tmp: render_slice(surface, pv.read(slice_path), axis, arrays["E_magnitude"],
                                      tmp, "field magnitude", "V/m"))]
    for target, job in jobs:
        try:
            with atomic_path(target) as tmp:
                job(tmp)
            written.append(target)
        except Exception as err:       # noqa: BLE001 - any renderer failure
            problems.append(f"{target.name} not rendered: {err}")
    return written
