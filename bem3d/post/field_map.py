"""The `field` job: fields on a grid, slices and listed points, energy balance, peaks, forces."""

import math
import sys
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from bem3d.base.constants import EPS0
from bem3d.base.errors import ModelError, ResourceError, option
from bem3d.base.files import read_regular
from bem3d.geometry.topology import closed_conductors
from bem3d.mesh_io.read import MAX_COORDINATE_M
from bem3d.operators.points import evaluate
from bem3d.post.energy import energy_balance
from bem3d.post.fields import conductor_forces, peak_fields, surface_fields
from bem3d.post.grid import Grid
from bem3d.solve.compiling import announce_compiling, clock, compile_seconds_since, seconds_since
from bem3d.solve.dielectric import medium_at

#: Largest number of grid points a run may ask for (each point costs ~100 bytes per excitation).
MAX_GRID_POINTS = 20_000_000
#: Largest automatic box margin, as a fraction of the model's size.
MAX_MARGIN = 100.0
#: Largest point list (--at): rows are parsed one by one in Python, about 300 bytes each.
MAX_LISTED_POINTS = 1_000_000
#: A point list's file size limit: MAX_LISTED_POINTS rows of three long numbers.
MAX_POINT_FILE_BYTES = 128 * MAX_LISTED_POINTS
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
    coordinate)]; point_file: CSV of x, y, z in the mesh unit (scaled by `point_scale`), or
    listed_points (m, 3) in metres."""

    box: tuple | None = None
    margin: float = 0.5
    points: tuple = (41, 41, 41)
    spacing: float | None = None
    slices: list = field(default_factory=list)
    point_file: Path | None = None
    point_scale: float = 1.0
    listed_points: np.ndarray | None = None
    unit_fields: bool = False
    png: bool = False

    def grid(self, panels, ground_z=None):
        v = panels.vertices.reshape(-1, 3)
        if self.box is None:
            if not 0 <= self.margin <= MAX_MARGIN:
                raise ModelError(f"{option('margin')} must lie between 0 and {MAX_MARGIN:g} "
                                 f"(a fraction of the model's size), got {self.margin:g}")
            lo, hi = v.min(axis=0), v.max(axis=0)
            pad = self.margin * (hi - lo).max()
            lo, hi = lo - pad, hi + pad
            if ground_z is not None:          # below a grounded plane there is no field
                lo[2] = ground_z
        else:
            lo, hi = (np.asarray(b, float) for b in self.box)
            if not np.all(np.abs(np.concatenate([lo, hi])) <= MAX_COORDINATE_M):
                raise ModelError(f"{option('box')}: coordinates must be finite numbers within "
                                 f"{MAX_COORDINATE_M:.0e} m")
            if np.any(hi <= lo):
                raise ModelError(f"{option('box')}: each maximum must exceed its minimum")
        if self.spacing is not None:
            if not 0 < self.spacing < math.inf:
                raise ModelError(f"{option('spacing')} must be a positive number")
            # in floats first: a tiny spacing gives counts beyond any integer type
            with np.errstate(over="ignore"):
                per_axis = np.floor((hi - lo) / self.spacing + 1e-9) + 1
                total = float(np.prod(per_axis))
            if not total <= MAX_GRID_POINTS:
                raise ResourceError(f"{option('spacing')} {self.spacing:g} m gives too many grid "
                                    f"points (limit {MAX_GRID_POINTS:,}); use a coarser one")
            counts = per_axis.astype(int)
            hi = lo + (counts - 1) * self.spacing
        else:
            counts = np.asarray(self.points, int)
            if counts.size == 1:
                counts = np.repeat(counts, 3)
            if np.any(counts < 2):
                raise ModelError(f"{option('points')}: at least 2 per axis")
        total = math.prod(int(c) for c in counts)         # Python ints: no overflow
        if total > MAX_GRID_POINTS:
            raise ResourceError(f"the grid would have {total:,} points (limit "
                                f"{MAX_GRID_POINTS:,}); use a coarser {option('spacing')} or fewer "
                                f"{option('points')}")
        return Grid.box(lo, hi, counts)

    def plan(self, panels, ground_z=None):
        """Check the whole request against the model before any solving: returns the grid,
        [(axis, value, slice grid)] and the listed points (m) or None."""
        grid = self.grid(panels, ground_z)
        slices = list(self.slices)
        if self.png and not slices:       # a picture needs a slice: the box's middle in z
            slices = [(2, float(grid.origin[2] + grid.spacing[2] * (grid.shape[2] - 1) / 2))]
        slice_grids = [(axis, value, _slice_grid(grid, axis, value)) for axis, value in slices]
        listed = self.listed_points
        if self.point_file is not None:
            listed = read_points(self.point_file, self.point_scale)
        return grid, slice_grids, listed


def field_request(scale, *, box=None, margin=0.5, spacing=None, points=41, slices=(), at=None,
                  unit_fields=False, png=False):
    """A FieldRequest from lengths in the mesh unit (scale: metres per mesh unit).

    box: (x0, y0, z0, x1, y1, z1) or None; points: N or (NX, NY, NZ); slices: 'z=0.25' strings
    or (axis, value) pairs; at: a CSV file of x, y, z or an (m, 3) array."""
    planes = []
    for item in slices:
        if isinstance(item, str):
            axis, sep, value = item.partition("=")
            if not sep:
                raise ModelError(f"{option('slices')}: expected AXIS=VALUE, got '{item}'")
        else:
            axis, value = item
        try:
            planes.append(("xyz".index(str(axis).strip().lower()), float(value) * scale))
        except ValueError:
            raise ModelError(f"{option('slices')}: expected x=, y= or z= and a number, got "
                             f"'{item}'") from None
    points = (points,) if np.ndim(points) == 0 else tuple(points)
    if len(points) not in (1, 3):
        raise ModelError(f"{option('points')} takes one number or three (NX NY NZ)")
    if box is not None:
        box = np.asarray(box, float).ravel()
        if box.size != 6:
            raise ModelError(f"{option('box')}: expected six numbers x0 y0 z0 x1 y1 z1")
        box = (box[:3] * scale, box[3:] * scale)
    point_file, listed = None, None
    if isinstance(at, (str, Path)):
        point_file = Path(at)
    elif at is not None:
        listed = np.asarray(at, float).reshape(-1, 3) * scale
        if not np.all(np.isfinite(listed)):
            raise ModelError(f"{option('at')}: points must be finite")
    return FieldRequest(box=box, margin=margin, points=points,
                        spacing=None if spacing is None else spacing * scale, slices=planes,
                        point_file=point_file, point_scale=scale, listed_points=listed,
                        unit_fields=unit_fields, png=png)


def read_points(path, scale):
    """x, y, z rows (m) from a CSV file; a first line that is not numbers is a header."""
    path = Path(path)
    data = read_regular(path, MAX_POINT_FILE_BYTES, "point list")
    if data.count(b"\n") > MAX_LISTED_POINTS:
        raise ResourceError(f"{path}: more than {MAX_LISTED_POINTS:,} rows; split the point "
                            "list into several runs")
    try:
        lines = data.decode("utf-8").splitlines()
    except UnicodeDecodeError as err:
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
        raise ModelError(f"{option('slices')} {'xyz'[axis]}={value:g} m lies outside the field box "
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
        """Permittivity (F/m) at points (m, 3): the real part eps' of a lossy medium's, the one
        that stores energy (the loss eps'' dissipates it)."""
        if not self.source.bodies:
            return np.full(len(points), EPS0 * self.source.background)
        return EPS0 * medium_at(points, self.source.bodies, self.source.background).real


@dataclass
class FieldMap:
    """Everything the `field` job computes, in SI units (lengths in metres).

    record: the keys it adds to result.json (energies J, peaks V/m, forces N, torques N m);
    grid and grid_arrays: the box and its point arrays; slices: [(axis, value, grid, arrays)];
    listed: (points (m, 3), {column: values}) or None; surface_cells: the cell arrays it adds
    to surface.vtp."""

    record: dict
    grid: Grid
    grid_arrays: dict
    slices: list
    listed: tuple | None
    surface_cells: dict


def compute_field_map(panels, result, request, plan, progress=False):
    """Evaluate the fields, the energy balance, peaks and forces of the `field` job.

    plan: request.plan(panels), made before the solve so that a bad request costs nothing."""
    grid, slice_grids, listed = plan
    start = clock()
    with announce_compiling("fields", progress):
        ev = _Evaluator(panels, result, request.unit_fields, progress)
        dielectric = bool(ev.source.bodies)
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
    result.timings_s["fields"] = seconds_since(start)
    result.timings_s["compile"] = (result.timings_s.get("compile", 0.0)
                                   + compile_seconds_since(start))

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
    surface_cells = {"E_normal": surface.normal_field, "E_face_max": face_max,
                     "force_density": surface.panel_force / panels.areas[:, None]}
    grid_arrays = _point_arrays(grid_fields, grid_eps, result.names, request.unit_fields,
                                dielectric)
    slices = [(axis, value, sgrid, _point_arrays(sfields, ev.eps(sgrid.points()), result.names,
                                                 request.unit_fields, dielectric))
              for (axis, value, sgrid), sfields in zip(slice_grids, slice_fields)]
    table = None
    if listed is not None:
        table = (listed, {"phi_V": listed_fields.phi[:, 0], "E_V_per_m": listed_fields.E[:, 0],
                          "energy_density_J_per_m3":
                              listed_fields.energy_density(ev.eps(listed))[:, 0],
                          "inside_conductor": listed_fields.inside.astype(int)})
    return FieldMap(record, grid, grid_arrays, slices, table, surface_cells)
