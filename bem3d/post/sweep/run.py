"""The run loop of a sweep: sort the cases (finished before, failing, to run), solve or reuse,
write every case's files and the summary. It prints nothing: progress goes to `on_event`."""

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.errors import Bem3dError, ModelError, option
from bem3d.base.files import require_writable, staged_outputs, sweep_leftovers
from bem3d.export.outputs import write_outputs
from bem3d.export.sweep_summary import plot_summary, write_summary
from bem3d.model import Model
from bem3d.post.sweep.cache import load_cached, store_cached, usable_cache, with_potentials
from bem3d.post.sweep.cases import build_cases, case_keys, case_panels, expand_inputs, read_base
from bem3d.post.sweep.executors import open_executor, solve_task
from bem3d.post.sweep.records import (
    case_record,
    clear_stale,
    read_record,
    record_failure,
    write_record,
)
from bem3d.post.sweep.summary import default_entries, plotted_entries, summary_rows

#: The fields of a case's record that its "case" event carries.
CASE_EVENT_FIELDS = ("case", "label", "status", "parameters", "error", "solve_seconds",
                     "warnings")


@dataclass(frozen=True)
class SweepRequest:
    """What a sweep runs.

    model: the base Model that the moves vary, or a function that makes the Model of a list of
    input files with the user's overrides (called with `inputs` for the base model, and with
    [file] for each case of an `each` sweep). inputs: the base model's files, or with each=True
    the mesh or model files (wildcards allowed), one case each. moves: syntax.Move variations
    (every combination runs); entries: ('mutual' | 'maxwell', A, B) for the summary (default
    every i <= j entry). solver, tol: as for solve.conductors.solve_panels. workers: local
    processes (default one per core); threads: Numba/BLAS threads per case (default cores /
    workers; 1 on Dask); scheduler: a Dask scheduler address. out: the sweep folder (default
    bem3d_sweep); cache: the folder of solved matrices (default out/cache)."""

    model: Model | Callable[[list], Model]
    inputs: Sequence = ()
    moves: Sequence = ()
    each: bool = False
    entries: Sequence = ()
    solver: str = "auto"
    tol: float = 1e-7
    workers: int | None = None
    threads: int | None = None
    scheduler: str | None = None
    cache: Path | None = None
    out: Path | None = None

    def model_of(self, inputs):
        """The Model of these input files."""
        return self.model(list(inputs)) if callable(self.model) else self.model


@dataclass
class SweepOutcome:
    """What a sweep left: the case.json records of the cases that finished or failed (in case
    order), the summary.csv rows (one per case), the counts of its "done" event, and whether
    Ctrl-C stopped it."""

    records: list
    rows: list
    cases: int
    ok: int
    failed: int
    pending: int
    solved: int
    cached: int
    skipped: int
    interrupted: bool
    summary: Path


def run_sweep(request: SweepRequest, on_event=None) -> SweepOutcome:
    """Run a sweep; bad input raises Bem3dError before anything is written, a failing case is
    recorded and the others go on, Ctrl-C ends it with the summary of what finished.

    on_event receives one dict per event: {"event": "start", cases, skipped, to_run, to_solve,
    executor, workers, threads}, {"event": "case", how: "skipped" | "cached" | "solved" |
    "failed", and the record's CASE_EVENT_FIELDS} per case, {"event": "warning", text} when the
    cache cannot be used, and {"event": "done", cases, ok, failed, pending, interrupted,
    summary, solved, cached} at the end."""
    def emit(event, **fields):
        if on_event is not None:
            on_event({"event": event, **fields})

    def warn(text):
        emit("warning", text=text)

    def emit_case(record, how):
        emit("case", how=how, **{k: record.get(k) for k in CASE_EVENT_FIELDS})

    moves, entries = list(request.moves), list(request.entries)
    if request.each == bool(moves):
        raise ModelError(f"give {option('translate')}, {option('rotate')} or {option('scale')} "
                         f"to vary a model, or {option('each')} to run each input as a case "
                         "(not both)")
    if any(n is not None and n < 1 for n in (request.workers, request.threads)):
        raise ModelError(f"{option('workers')} and {option('threads')} must be at least 1")
    folder = Path(request.out or "bem3d_sweep")
    cache = Path(request.cache or folder / "cache")
    if moves:
        base_model = request.model_of(request.inputs)
        base = read_base(base_model, moves, entries)
        unit = LENGTH_UNITS[base_model.length_unit]
        cases = build_cases(moves, None, base_model.length_unit)
    else:
        base_model, base, unit = None, None, 1.0
        cases = build_cases((), expand_inputs(request.inputs))
    columns = list(cases[0].parameters)

    # Sort the cases first: finished before with the same key (skipped), failing before any
    # solve (a model file that does not load), and the work left.
    records, skipped, failures, work, memo = {}, [], [], [], {}
    for case in cases:
        try:
            model = base_model or request.model_of([case.source])
            keys = case_keys(model, case, request.solver, request.tol, memo)
        except Bem3dError as err:
            failures.append((case, None, err))
            continue
        old = read_record(folder / "cases" / case.label)
        if old and old.get("status") == "ok" and old.get("key") == keys[1]:
            records[case.index] = old
            skipped.append(old)
        else:
            work.append((case, model, keys))
    # the folders are checked once the request is known to be good, before any solve
    require_writable(folder)
    for place in [folder, *sorted(folder.glob("cases/*"))]:
        sweep_leftovers(place)
    cache = usable_cache(cache, warn)
    to_solve = sum(cache is None or not (cache / f"{keys[0]}.npz").exists()
                   for _, _, keys in work)

    runner, threads = open_executor(request.scheduler, request.workers, request.threads,
                                    to_solve)
    emit("start", cases=len(cases), skipped=len(skipped), to_run=len(work) + len(failures),
         to_solve=to_solve, executor=runner.name, workers=runner.workers, threads=threads)
    for record in skipped:
        emit_case(record, "skipped")
    counts = {"solved": 0, "cached": 0}

    def fail(case, keys, err):
        records[case.index] = record_failure(folder / "cases" / case.label, case, keys, err)
        emit_case(records[case.index], "failed")

    def finish(case, model, keys, panels, warnings, result, how):
        case_folder = folder / "cases" / case.label
        result = with_potentials(result, model.volts, model.floating, model.reference)
        with staged_outputs(case_folder, model.files(), force=True) as stage:
            written = write_outputs(stage, panels, result, model, warnings)
        clear_stale(case_folder, {f.name for f in written})
        records[case.index] = case_record(case, keys, result, warnings=warnings)
        write_record(case_folder, records[case.index])
        counts[how] += 1
        emit_case(records[case.index], how)

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
                    panels, warnings, bodies = case_panels(case, model, base, unit)
                    cached = cache and load_cached(cache / f"{keys[0]}.npz", panels, warn)
                    if cached is not None:
                        finish(case, model, keys, panels, warnings, cached, "cached")
                        continue
                    future = runner.submit(solve_task, panels, model.medium,
                                           model.ground_z_m, bodies, request.solver,
                                           request.tol, threads)
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
                    if cache and not store_cached(cache / f"{keys[0]}.npz", result, warn):
                        cache = None
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
        plot_summary(rows, columns[0], columns[1:], entries or plotted_entries(chosen),
                     folder / "summary.png")
    failed = len(records) - len(ok)
    not_run = len(cases) - len(records)
    emit("done", cases=len(cases), ok=len(ok), failed=failed, pending=not_run,
         interrupted=interrupted, summary=str(folder / "summary.csv"), **counts)
    return SweepOutcome([records[i] for i in sorted(records)], rows, len(cases), len(ok),
                        failed, not_run, counts["solved"], counts["cached"], len(skipped),
                        interrupted, folder / "summary.csv")
