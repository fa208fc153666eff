"""Sweeps: many extractions in one command, resumable, on local processes or a Dask cluster.

A sweep is a list of cases. Either one model whose named conductors are moved (translated
along or rotated about an axis) or scaled over a list or range of values (several variations
give every combination), or a set of mesh or model files, one case each. Every case keeps its
full output folder (``cases/<label>/``, the files of ``bem3d extract`` plus ``case.json``), and
``summary.csv`` / ``summary.png`` collect chosen matrix entries against the swept parameters.

Nothing is lost: a case is keyed by a SHA-256 of its mesh files' bytes, its moves and its solver
settings; its record is written atomically once it is finished, and a re-run skips finished
cases. The capacitance matrices are cached by the same key without the potentials
(``cache/<key>.npz``), so a re-run that only changes ``--volts`` solves nothing.

Workers only compute: the calling process reads the meshes, sends the panels out, and writes
every file itself, so a Dask cluster needs no shared file system.
"""

import argparse
import concurrent.futures
import csv
import dataclasses
import glob
import hashlib
import io
import itertools
import json
import math
import multiprocessing
import os
import re
import signal
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from types import SimpleNamespace

import numpy as np

from bem3d.base.version import __version__
from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.errors import Bem3dError, MeshError, ModelError
from bem3d.base.files import atomic_path
from bem3d.export.outputs import write_outputs
from bem3d.geometry.panels import Panels
from bem3d.operators.rules import PairRules
from bem3d.results import CapacitanceResult, mutual_from_maxwell, potential_vector, reduce_floating
from bem3d.base.units import prefix_for

#: Largest exit code used for "this many cases failed" (126 and above mean other things to shells).
MAX_EXIT = 125
EXIT_INTERRUPTED = 130

EXAMPLES = """\
values: a list 0.2,0.5,1 or a range START:STOP:COUNT (COUNT values, both ends included).
NAMES: conductor names joined by commas, or * for every conductor. AXIS: x, y, z, -x, -y, -z
or a vector such as 1,1,0. Lengths are in --units; angles in degrees (right-hand rule).
Rotations and scalings are about the area centroid of the named conductors unless @X,Y,Z
gives the point (in --units). Several variations run every combination, applied in the order
given; the plot uses the first one as its x axis.

examples:
  bem3d sweep plates.msh --units mm --translate top:z=0.1:2:20 --out gap
  bem3d sweep head.msh --units mm --rotate lid:x@0,0,1.5=-10:10:5 --entries mutual:lid:drive
  bem3d sweep pads.msh --scale pad_a,pad_b=0.8,0.9,1,1.1 --translate pad_b:x=0,0.5
  bem3d sweep --each 'variants/*.msh' --units mm --out variants
  bem3d sweep plates.msh --translate top:z=0.1:2:20 --scheduler tcp://10.0.0.5:8786
"""


# ---------------------------------------------------------------------------------------------
# The sweep's syntax
# ---------------------------------------------------------------------------------------------

def parse_values(text, what):
    """Numbers from 'a,b,c' or 'start:stop:count' (count >= 2 values, both ends included)."""
    parts = text.split(":")
    try:
        if len(parts) == 3:
            count = int(parts[2])
            if count < 2:
                raise ValueError
            # 12 digits: 0.4, not linspace's 0.4000000000000001, in labels and the summary
            values = [float(f"{v:.12g}") for v in
                      np.linspace(float(parts[0]), float(parts[1]), count)]
        elif len(parts) == 1:
            values = [float(v) for v in text.split(",")]
        else:
            raise ValueError
    except ValueError:
        raise ModelError(f"{what}: expected values a,b,c or a range START:STOP:COUNT "
                         f"(COUNT >= 2), got '{text}'") from None
    if not all(math.isfinite(v) for v in values):
        raise ModelError(f"{what}: values must be finite, got '{text}'")
    return tuple(float(v) for v in values)


def _parse_point(text, what):
    try:
        point = [float(c) for c in text.split(",")]
    except ValueError:
        point = []
    if len(point) != 3 or not all(math.isfinite(c) for c in point):
        raise ModelError(f"{what}: expected a point X,Y,Z, got '{text}'")
    return tuple(point)


def _parse_axis(text, what):
    """Unit vector from 'x', '-z' or 'a,b,c'."""
    sign, name = (-1.0, text[1:]) if text.startswith("-") else (1.0, text)
    if name in ("x", "y", "z"):
        vector = sign * np.eye(3)["xyz".index(name)]
    else:
        try:
            vector = np.array(_parse_point(text, what))
        except ModelError:
            raise ModelError(f"{what}: expected an axis x, y, z, -x, -y, -z or a,b,c, "
                             f"got '{text}'") from None
    length = float(np.linalg.norm(vector))
    if not length > 0:
        raise ModelError(f"{what}: the axis must not be zero")
    return tuple(vector / length)


@dataclass(frozen=True)
class Move:
    """One swept variation: kind 'translate' (values in mesh units), 'rotate' (degrees) or
    'scale' (factors > 0) of the conductors `names` (('*',) for all) along/about unit `axis`,
    rotations and scalings about `pivot` (mesh units; None: the conductors' area centroid)."""

    kind: str
    names: tuple
    axis: tuple | None
    pivot: tuple | None
    values: tuple
    axis_text: str = ""

    def column(self, unit):
        """Summary column name, e.g. 'translate_z[top]_mm'."""
        names = "+".join("all" if n == "*" else n for n in self.names)
        if self.kind == "scale":
            return f"scale[{names}]"
        axis = self.axis_text.replace(",", " ")
        return f"{self.kind}_{axis}[{names}]_" + (unit if self.kind == "translate" else "deg")


def parse_move(kind, text):
    """A Move from 'NAMES:AXIS[@X,Y,Z]=VALUES' (translate, rotate) or 'NAMES[@X,Y,Z]=VALUES'."""
    what = f"--{kind} {text}"
    head, sep, values_text = text.partition("=")
    form = "NAMES=VALUES" if kind == "scale" else "NAMES:AXIS=VALUES"
    if not sep or not head:
        raise ModelError(f"{what}: expected {form}")
    head, at, pivot_text = head.partition("@")
    if at and kind == "translate":
        raise ModelError(f"{what}: a translation has no pivot point (@)")
    names_text, axis_text = head, ""
    if kind != "scale":
        names_text, colon, axis_text = head.partition(":")
        if not colon:
            raise ModelError(f"{what}: expected {form}")
    names = tuple(n.strip() for n in names_text.split(","))
    if not all(names):
        raise ModelError(f"{what}: empty conductor name")
    values = parse_values(values_text, what)
    if kind == "scale" and not all(v > 0 for v in values):
        raise ModelError(f"{what}: scale factors must be positive")
    return Move(kind, names, None if kind == "scale" else _parse_axis(axis_text, what),
                _parse_point(pivot_text, what) if at else None, values, axis_text)


def parse_entry(text):
    """('mutual' | 'maxwell', A, B) from '[mutual:|maxwell:]A:B' (default mutual)."""
    parts = text.split(":")
    if len(parts) == 2:
        parts = ["mutual"] + parts
    if len(parts) != 3 or parts[0] not in ("mutual", "maxwell") or not all(parts[1:]):
        raise ModelError(f"--entries {text}: expected [mutual:|maxwell:]A:B with conductor "
                         "names A and B")
    return tuple(parts)


def entry_column(entry):
    """Summary column of an entry: 'mutual_F:top:bottom' (F)."""
    return f"{entry[0]}_F:{entry[1]}:{entry[2]}"


def rotation_matrix(axis, degrees):
    """Rotation by `degrees` about the unit vector `axis`, right-hand rule (Rodrigues' formula)."""
    k = np.asarray(axis, float)
    a = math.radians(degrees)
    cross = np.array([[0.0, -k[2], k[1]], [k[2], 0.0, -k[0]], [-k[1], k[0], 0.0]])
    return math.cos(a) * np.eye(3) + math.sin(a) * cross + (1.0 - math.cos(a)) * np.outer(k, k)


def conductor_indices(panels, names):
    """Indices of the conductors `names` (('*',) for all); ModelError for unknown names."""
    if "*" in names:
        return np.arange(panels.n_conductors)
    unknown = [n for n in names if n not in panels.names]
    if unknown:
        raise ModelError(f"no conductor named {', '.join(unknown)} "
                         f"(conductors: {', '.join(panels.names)})")
    return np.array([panels.names.index(n) for n in names])


def move_conductors(panels, names, kind, value, axis=None, pivot=None):
    """A copy of `panels` with the conductors `names` moved, the others untouched.

    kind 'translate': by value (m) along unit `axis`; 'rotate': by value degrees about `axis`
    through `pivot` (m); 'scale': by the factor value about `pivot`. pivot None: the area
    centroid of the moved conductors."""
    mask = np.isin(panels.owner, conductor_indices(panels, names))
    v = panels.vertices.copy()
    part = v[mask]
    if kind == "translate":
        part = part + value * np.asarray(axis)
    else:
        if pivot is None:
            weights = panels.areas[mask]
            pivot = weights @ panels.centroids[mask] / weights.sum()
        pivot = np.asarray(pivot, float)
        if kind == "rotate":
            part = (part - pivot) @ rotation_matrix(axis, value).T + pivot
        else:
            part = (part - pivot) * value + pivot
    v[mask] = part
    return Panels(v, panels.owner, panels.names)


# ---------------------------------------------------------------------------------------------
# Cases and their keys
# ---------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Case:
    """One run of a sweep: its summary parameters and how to make its model and panels.

    source: the mesh or model file of a '--each' case, else None (the base model, moved by
    `steps`, pairs (Move, value))."""

    index: int
    label: str
    parameters: dict
    source: str | None = None
    steps: tuple = ()


def _safe(text):
    return re.sub(r"[^A-Za-z0-9._+-]+", "_", text).strip("_") or "case"


def build_cases(moves, sources, unit="m"):
    """The cases of a sweep over every combination of the moves' values, or one per source.

    unit: the mesh length unit, for the names of the translation columns."""
    if sources:
        return [Case(i, f"{i:04d}_{_safe(Path(s).stem)}", {"input": str(s)}, source=str(s))
                for i, s in enumerate(sources)]
    columns = [m.column(unit) for m in moves]
    if len(set(columns)) < len(columns):
        raise ModelError("the same variation is given twice")
    cases = []
    for i, values in enumerate(itertools.product(*(m.values for m in moves))):
        label = f"{i:04d}_" + "_".join(_safe(f"{v:g}") for v in values)
        cases.append(Case(i, label, dict(zip(columns, values)), steps=tuple(zip(moves, values))))
    return cases


def expand_inputs(patterns):
    """Files matching each pattern (sorted), or the name itself when it has no wildcard."""
    files = []
    for pattern in patterns:
        if glob.has_magic(pattern):
            found = sorted(glob.glob(pattern))
            if not found:
                raise ModelError(f"{pattern}: no files match")
            files += found
        else:
            files.append(pattern)
    return files


def _digest(obj):
    return hashlib.sha256(json.dumps(obj, sort_keys=True).encode()).hexdigest()


def _file_digest(path, memo):
    """SHA-256 of a file's bytes, computed once per sweep."""
    key = str(Path(path).resolve())
    if key not in memo:
        try:
            memo[key] = hashlib.sha256(Path(path).read_bytes()).hexdigest()
        except OSError as err:
            raise MeshError(f"{path}: cannot read ({err.strerror or err})") from None
    return memo[key]


def case_keys(model, case, solver, tol, memo):
    """(solve key, case key): the content hash of what decides the full Maxwell matrix, and that
    plus what decides the output files (potentials, floating conductors, SPICE name)."""
    solve = _digest({
        "bem3d": __version__,
        "meshes": [[Path(m).name, _file_digest(m, memo)] for m in model.meshes],
        "length_unit": model.length_unit,
        "relative_permittivity": model.relative_permittivity,
        "ground_plane_z_m": model.ground_z_m,
        "dielectrics": [[Path(m).name, _file_digest(m, memo), eps]
                        for m, eps in model.dielectrics],
        "steps": [[m.kind, list(m.names), m.axis, m.pivot, v] for m, v in case.steps],
        "solver": solver, "tol": tol, "rules": PairRules().as_dict()})
    return solve, _digest({"solve": solve, "volts": model.volts, "floating": model.floating,
                           "spice_name": model.spice_name})


# ---------------------------------------------------------------------------------------------
# Solving (runs in the workers) and the cache of solved matrices
# ---------------------------------------------------------------------------------------------

def solve_task(panels, eps_r, ground_z, bodies, solver, tol, threads):
    """One case's CapacitanceResult at 0 V, every conductor a terminal, with Numba and BLAS
    limited to `threads` threads. ground_z: grounded plane height (m) or None; bodies:
    dielectric.DielectricBody list (eps_r is then the background's).

    The caller applies potentials and floating conductors: the full matrix does not change."""
    import numba
    from threadpoolctl import threadpool_limits

    from bem3d.solve.conductors import solve_panels
    from bem3d.base.resources import peak_memory

    before = numba.get_num_threads()
    numba.set_num_threads(max(1, min(threads, numba.config.NUMBA_NUM_THREADS)))
    start = time.perf_counter()
    try:
        with threadpool_limits(limits=threads):
            result = solve_panels(panels, None, eps_r, PairRules(), solver, tol,
                                  ground_z=ground_z, dielectrics=bodies)
    finally:
        numba.set_num_threads(before)
    result.timings_s["total"] = time.perf_counter() - start
    result.solver.update(threads=threads, peak_memory_MiB=peak_memory() / 2**20)
    return result


def store_cached(path, result):
    """Save the potential-independent part of a result (matrices, panel charges) atomically."""
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, maxwell=result.maxwell, sigma=result.sigma, names=np.array(result.names),
                 n_panels=result.n_panels, asymmetry=result.asymmetry,
                 solver=json.dumps(result.solver), timings=json.dumps(result.timings_s))


def load_cached(path, panels):
    """The cached result for `panels` at 0 V, or None if there is none (or it does not fit)."""
    try:
        with np.load(path, allow_pickle=False) as data:
            result = CapacitanceResult(
                names=tuple(str(n) for n in data["names"]), maxwell=data["maxwell"],
                sigma=data["sigma"], potentials=np.zeros(len(data["names"])),
                n_panels=int(data["n_panels"]), solver=json.loads(str(data["solver"])),
                timings_s=json.loads(str(data["timings"])), asymmetry=float(data["asymmetry"]))
    except (OSError, KeyError, ValueError):
        return None
    if result.names != panels.names or result.n_panels != len(panels):
        return None
    result.solver["reused_from_cache"] = True
    return result


def with_potentials(result, volts, floating=()):
    """The full result at the potentials {name: V}, the `floating` conductors then reduced out
    (results.reduce_floating): neither changes the full matrix, so neither needs a solve."""
    result = dataclasses.replace(result, potentials=potential_vector(result.names, volts,
                                                                     floating))
    return reduce_floating(result, floating) if floating else result


# ---------------------------------------------------------------------------------------------
# Executors: in this process, a local process pool, or a Dask cluster
# ---------------------------------------------------------------------------------------------

def available_cores():
    """CPU cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


class _InProcess:
    """One worker: solve in this process (no start-up cost; Ctrl-C stops it directly)."""

    name, workers, window = "in-process", 1, 1

    def submit(self, fn, *args):
        future = concurrent.futures.Future()
        try:
            future.set_result(fn(*args))
        except Exception as err:                 # recorded as the case's failure
            future.set_exception(err)
        return future

    def wait_any(self, futures):
        return set(futures)

    def close(self, abort=False):
        pass


def _ignore_sigint():
    # Ctrl-C reaches the whole process group; the parent alone decides what to stop.
    signal.signal(signal.SIGINT, signal.SIG_IGN)


class _LocalPool:
    """A pool of fresh ("spawn") worker processes: fork is unsafe with Numba's OpenMP threads."""

    name = "local"

    def __init__(self, workers):
        self.pool = concurrent.futures.ProcessPoolExecutor(
            workers, mp_context=multiprocessing.get_context("spawn"), initializer=_ignore_sigint)
        self.workers, self.window = workers, 2 * workers

    def submit(self, fn, *args):
        return self.pool.submit(fn, *args)

    def wait_any(self, futures):
        return concurrent.futures.wait(futures, return_when="FIRST_COMPLETED").done

    def close(self, abort=False):
        if abort:
            # Workers ignore SIGINT and would finish their case first; a stopped sweep stops now.
            for process in list(self.pool._processes.values()):
                process.terminate()
        self.pool.shutdown(wait=not abort, cancel_futures=abort)


class _DaskCluster:
    """An existing Dask distributed scheduler; each case is one task."""

    name = "dask"

    def __init__(self, address):
        try:
            from distributed import Client
        except ImportError:
            raise ModelError("--scheduler needs Dask: pip install 'dask[distributed]'") from None
        try:
            self.client = Client(address, timeout="20s")
        except (OSError, TimeoutError, ValueError) as err:
            raise ModelError(f"--scheduler {address}: cannot connect ({err})") from None
        self.workers = max(1, sum(self.client.nthreads().values()))
        self.window = 2 * self.workers

    def submit(self, fn, *args):
        return self.client.submit(fn, *args, pure=False)

    def wait_any(self, futures):
        from distributed import wait

        return wait(list(futures), return_when="FIRST_COMPLETED").done

    def close(self, abort=False):
        self.client.close()


# ---------------------------------------------------------------------------------------------
# Progress on a terminal, or JSON lines for scripts
# ---------------------------------------------------------------------------------------------

class _Progress:
    """A tqdm bar with ETA on a terminal, one line per case otherwise, or JSON lines on stdout."""

    def __init__(self, json_lines):
        self.json_lines, self.bar = json_lines, None

    def start(self, **fields):
        if self.json_lines:
            self._emit("start", **fields)
            return
        print(f"sweep: {fields['cases']} cases, {fields['skipped']} finished before, "
              f"{fields['to_run']} to run ({fields['to_solve']} to solve) on "
              f"{fields['executor']} ({fields['workers']} worker(s) x {fields['threads']} "
              "thread(s))", file=sys.stderr)
        if sys.stderr.isatty() and fields["to_run"]:
            from tqdm import tqdm

            self.bar = tqdm(total=fields["to_run"], unit="case", file=sys.stderr)

    def case(self, record, how):
        if self.json_lines:
            keep = ("case", "label", "status", "parameters", "error", "solve_seconds")
            self._emit("case", how=how, **{k: record.get(k) for k in keep})
            return
        if how == "skipped":
            return
        text = (f"case {record['label']}: failed: {record['error']}" if record["status"] != "ok"
                else f"case {record['label']}: ok ({how}, {record['solve_seconds']:.2f} s)")
        if self.bar is not None:
            self.bar.update(1)
            if record["status"] != "ok":
                self.bar.write(text, file=sys.stderr)
        else:
            print(text, file=sys.stderr)

    def done(self, **fields):
        if self.bar is not None:
            self.bar.close()
        if self.json_lines:
            self._emit("done", **fields)
        else:
            print(f"sweep {'interrupted' if fields['interrupted'] else 'done'}: "
                  f"{fields['ok']} ok, {fields['failed']} failed, {fields['pending']} not run; "
                  f"{fields['solved']} solved, {fields['cached']} from cache; "
                  f"summary in {fields['summary']}")

    @staticmethod
    def _emit(event, **fields):
        print(json.dumps({"event": event, **fields}), flush=True)


# ---------------------------------------------------------------------------------------------
# Summary table and plot
# ---------------------------------------------------------------------------------------------

def default_entries(records):
    """Every entry i <= j of both matrices, over the conductors of the finished cases."""
    names = list(dict.fromkeys(n for r in records for n in r["conductors"]))
    pairs = [(a, b) for i, a in enumerate(names) for b in names[i:]]
    return [("mutual", a, b) for a, b in pairs] + [("maxwell", a, b) for a, b in pairs]


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
    """One dict per case: case, label, status, parameters, panels, entries (F), energy, error."""
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
        rows.append(row)
    return rows


def write_summary(rows, target):
    """summary.csv: one row per case, written atomically."""
    text = io.StringIO()
    writer = csv.DictWriter(text, fieldnames=list(rows[0]), lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows)
    with atomic_path(target) as tmp:
        tmp.write_text(text.getvalue(), encoding="utf-8")


def plot_summary(rows, x_column, group_columns, entries, target):
    """summary.png: the entries against x_column (numeric, or case labels when categorical),
    one line per entry and combination of the group columns. Returns target, or None if no
    case finished."""
    from matplotlib.figure import Figure

    ok = [r for r in rows if r["status"] == "ok"]
    if not ok:
        return None
    categorical = any(isinstance(r[x_column], str) for r in ok)
    values = [float(r[entry_column(e)]) for r in ok for e in entries if r[entry_column(e)]]
    scale, prefix = prefix_for(values or [0.0])
    fig = Figure(figsize=(8, 5))
    ax = fig.add_subplot()
    groups = {}
    for r in ok:
        groups.setdefault(tuple(r[c] for c in group_columns), []).append(r)
    for group, members in groups.items():
        suffix = "".join(f", {c}={v:g}" for c, v in zip(group_columns, group))
        x = [m["label"] if categorical else m[x_column] for m in members]
        for e in entries:
            col = entry_column(e)
            y = [float(m[col]) / scale if m[col] else math.nan for m in members]
            ax.plot(x, y, marker="o", label=f"{e[0]} {e[1]}:{e[2]}{suffix}")
    ax.set_xlabel("case" if categorical else x_column)
    ax.set_ylabel(f"capacitance [{prefix}F]")
    if categorical:
        ax.tick_params(axis="x", labelrotation=60)
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize="small")
    fig.tight_layout()
    with atomic_path(target) as tmp:
        fig.savefig(tmp, dpi=110)
    return target


# ---------------------------------------------------------------------------------------------
# The command
# ---------------------------------------------------------------------------------------------

def add_sweep_parser(subparsers):
    """Add the 'sweep' command to the CLI's subparsers."""
    from bem3d._cli.options import add_model_options

    p = subparsers.add_parser(
        "sweep", help="run many cases: moved or scaled conductors, or a set of files",
        description="Run many extractions, resumable: vary a translation, rotation or scale of "
                    "named conductors, or run each of a set of mesh/model files.",
        epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter,
        conflict_handler="resolve")
    add_model_options(p)
    p.add_argument("--out", type=Path, help="sweep folder (default: bem3d_sweep)")
    p.set_defaults(moves=[])
    for kind, metavar, text in [
            ("translate", "NAMES:AXIS=VALUES", "move conductors along an axis (mesh units)"),
            ("rotate", "NAMES:AXIS[@X,Y,Z]=DEGREES", "rotate conductors about an axis"),
            ("scale", "NAMES[@X,Y,Z]=FACTORS", "scale conductors about a point")]:
        p.add_argument(f"--{kind}", dest="moves", action="append", metavar=metavar, help=text,
                       type=lambda s, kind=kind: (kind, s))
    p.add_argument("--each", action="store_true",
                   help="each INPUT (wildcards allowed) is one case: a mesh or .toml model file")
    p.add_argument("--entries", nargs="+", default=[], metavar="[mutual:|maxwell:]A:B",
                   help="matrix entries for the summary and plot (default: all i<=j entries "
                        "in the CSV, the mutual ones in the plot)")
    p.add_argument("--solver", choices=["auto", "direct", "cg"], default="auto",
                   help="direct (Cholesky), cg (conjugate gradients) or auto by size")
    p.add_argument("--tol", type=float, default=1e-7, help="CG relative residual")
    p.add_argument("--workers", type=int, help="local worker processes (default: one per core)")
    p.add_argument("--threads", type=int,
                   help="Numba/BLAS threads per case (default: cores / workers; 1 on Dask)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run the cases on this Dask distributed scheduler, e.g. tcp://host:8786")
    p.add_argument("--cache", type=Path,
                   help="folder of solved matrices to reuse (default: OUT/cache)")
    p.add_argument("--json-lines", action="store_true",
                   help="print one JSON object per event on stdout, nothing else")
    return p


def _model(inputs, args):
    """The model of some inputs with the command line's overrides (as 'bem3d extract')."""
    from bem3d._cli.options import model_from_args

    # Every model option of the sweep's parser is passed on; the output folder is the case's.
    return model_from_args(SimpleNamespace(**{**vars(args), "inputs": list(inputs),
                                               "out": Path(".")}))


def _base(args, moves, entries):
    """The moved model, its panels (m), warnings and dielectric bodies; names checked before
    anything runs."""
    from bem3d.mesh_io.read import read_conductors
    from bem3d.mesh_io.bodies import read_bodies

    model = _model(args.inputs, args)
    panels, warnings = read_conductors(model.meshes, units=model.length_unit)
    for move in moves:
        conductor_indices(panels, move.names)
    for kind, a, b in entries:
        conductor_indices(panels, (a, b))
    potential_vector(panels.names, model.volts, model.floating)
    return model, panels, warnings, read_bodies(model.dielectrics, model.length_unit)


def _case_panels(case, model, base, unit):
    """Panels (m), warnings and dielectric bodies of one case; MeshError if a move makes
    conductors touch. Moves apply to conductors only: dielectric bodies stay where they are."""
    from bem3d.post.convergence import mesh_sources
    from bem3d.mesh_io.read import check_geometry, read_conductors
    from bem3d.mesh_io.bodies import read_bodies

    if case.source is not None:
        return (*read_conductors(model.meshes, units=model.length_unit),
                read_bodies(model.dielectrics, model.length_unit))
    panels, warnings, bodies = base
    for move, value in case.steps:
        panels = move_conductors(
            panels, move.names, move.kind, value * (unit if move.kind == "translate" else 1.0),
            move.axis, None if move.pivot is None else np.multiply(move.pivot, unit))
    if case.steps:
        warnings = list(warnings) + check_geometry(panels, mesh_sources(model, panels))
    return panels, warnings, bodies


def _record(case, keys, result=None, error=None):
    """What case.json holds for a finished or failed case."""
    record = {"case": case.index, "label": case.label, "key": keys[1] if keys else None,
              "solve_key": keys[0] if keys else None, "parameters": case.parameters,
              "status": "ok" if error is None else "failed", "error": error}
    if result is not None:
        record.update(conductors=list(result.names),
                      maxwell_capacitance_F=result.maxwell.tolist(),
                      potentials_V=result.potentials.tolist(),
                      floating_potentials_V=result.floating, energy_J=result.energy,
                      panels=result.n_panels, solve_seconds=result.timings_s.get("total", 0.0))
    return record


def _read_record(folder):
    try:
        return json.loads((folder / "case.json").read_text())
    except (OSError, ValueError):
        return None


def _clear(folder):
    """Empty a case folder before new results go in (stale files would mislead)."""
    if folder.is_dir():
        for f in folder.iterdir():
            if f.is_file():
                f.unlink()


def _write_record(folder, record):
    with atomic_path(folder / "case.json") as tmp:
        tmp.write_text(json.dumps(record, indent=2) + "\n", encoding="utf-8")


def _error_text(err):
    return str(err) if isinstance(err, Bem3dError) else f"{type(err).__name__}: {err}"


def run_sweep(args):
    """Run the sweep described by parsed CLI arguments; exit code = number of failed cases
    (at most MAX_EXIT), EXIT_INTERRUPTED after Ctrl-C. Bad input raises Bem3dError."""
    moves = [parse_move(kind, text) for kind, text in args.moves]
    entries = [parse_entry(e) for e in args.entries]
    if args.each == bool(moves):
        raise ModelError("give --translate, --rotate or --scale to vary a model, or --each to "
                         "run each input as a case (not both)")
    if any(n is not None and n < 1 for n in (args.workers, args.threads)):
        raise ModelError("--workers and --threads must be at least 1")
    folder = Path(args.out or "bem3d_sweep")
    cache = Path(args.cache or folder / "cache")
    if moves:
        base_model, *base = _base(args, moves, entries)
        unit = LENGTH_UNITS[base_model.length_unit]
        cases = build_cases(moves, None, base_model.length_unit)
    else:
        base_model, base, unit = None, None, 1.0
        cases = build_cases((), expand_inputs(args.inputs))
    columns = list(cases[0].parameters)

    # Sort the cases first: finished before with the same key (skipped), failing before any
    # solve (a model file that does not load), and the work left.
    records, skipped, failures, work, memo = {}, [], [], [], {}
    for case in cases:
        try:
            model = base_model or _model([case.source], args)
            keys = case_keys(model, case, args.solver, args.tol, memo)
        except Bem3dError as err:
            failures.append((case, None, err))
            continue
        old = _read_record(folder / "cases" / case.label)
        if old and old.get("status") == "ok" and old.get("key") == keys[1]:
            records[case.index] = old
            skipped.append(old)
        else:
            work.append((case, model, keys))
    to_solve = sum(not (cache / f"{keys[0]}.npz").exists() for _, _, keys in work)

    cores = available_cores()
    if args.scheduler:
        runner, threads = _DaskCluster(args.scheduler), args.threads or 1
    else:
        workers = args.workers or max(1, min(cores, to_solve))
        threads = args.threads or max(1, cores // workers)
        runner = _InProcess() if workers == 1 else _LocalPool(workers)
    progress = _Progress(args.json_lines)
    progress.start(cases=len(cases), skipped=len(skipped), to_run=len(work) + len(failures),
                   to_solve=to_solve, executor=runner.name, workers=runner.workers,
                   threads=threads)
    for record in skipped:
        progress.case(record, "skipped")
    counts = {"solved": 0, "cached": 0}

    def fail(case, keys, err):
        records[case.index] = _fail(folder / "cases" / case.label, case, keys, err)
        progress.case(records[case.index], "failed")

    def finish(case, model, keys, panels, warnings, result, how):
        case_folder = folder / "cases" / case.label
        result = with_potentials(result, model.volts, model.floating)
        _clear(case_folder)
        write_outputs(case_folder, panels, result, model, warnings)
        records[case.index] = _record(case, keys, result)
        _write_record(case_folder, records[case.index])
        counts[how] += 1
        progress.case(records[case.index], how)

    interrupted = finished = False
    try:
        for case, keys, err in failures:
            fail(case, keys, err)
        pending, queue = {}, iter(work)
        while True:
            # Keep the workers busy but prepare (read, move) only a few cases ahead.
            while len(pending) < runner.window:
                item = next(queue, None)
                if item is None:
                    break
                case, model, keys = item
                try:
                    panels, warnings, bodies = _case_panels(case, model, base, unit)
                    cached = load_cached(cache / f"{keys[0]}.npz", panels)
                    if cached is not None:
                        finish(case, model, keys, panels, warnings, cached, "cached")
                        continue
                    future = runner.submit(solve_task, panels, model.relative_permittivity,
                                           model.ground_z_m, bodies, args.solver, args.tol,
                                           threads)
                except Exception as err:                 # e.g. a moved conductor touches
                    fail(case, keys, err)
                    continue
                pending[future] = (case, model, keys, panels, warnings)
            if not pending:
                break
            for future in runner.wait_any(pending):
                case, model, keys, panels, warnings = pending.pop(future)
                try:
                    result = future.result()
                    store_cached(cache / f"{keys[0]}.npz", result)
                    finish(case, model, keys, panels, warnings, result, "solved")
                except Exception as err:             # any failure stays with its case
                    fail(case, keys, err)
        finished = True
    except KeyboardInterrupt:
        interrupted = True
    finally:
        runner.close(abort=not finished)
        ok = [r for r in records.values() if r["status"] == "ok"]
        chosen = entries or default_entries(ok)
        rows = summary_rows(cases, records, chosen)
        write_summary(rows, folder / "summary.csv")
        # Default plot: the coupling capacitances (or the one to infinity for one conductor).
        plotted = entries or [e for e in chosen if e[0] == "mutual" and e[1] != e[2]] \
            or [e for e in chosen if e[0] == "mutual"]
        plot_summary(rows, columns[0], columns[1:], plotted, folder / "summary.png")
    failed = len(records) - len(ok)
    progress.done(cases=len(cases), ok=len(ok), failed=failed, pending=len(cases) - len(records),
                  interrupted=interrupted, summary=str(folder / "summary.csv"), **counts)
    return EXIT_INTERRUPTED if interrupted else min(failed, MAX_EXIT)


def _fail(case_folder, case, keys, err):
    """Record a failed case (its error in case.json, no results); the sweep goes on."""
    record = _record(case, keys, error=_error_text(err))
    _clear(case_folder)
    _write_record(case_folder, record)
    return record
