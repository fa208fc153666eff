"""The solve task of one case and where it runs: in this process, a local process pool, or a
Dask cluster. Workers only compute; the calling process reads and writes every file."""

import concurrent.futures
import multiprocessing
import os
import signal
import time

import numba
from threadpoolctl import threadpool_limits

from bem3d.base.errors import ModelError, option
from bem3d.base.resources import peak_memory
from bem3d.operators.rules import PairRules
from bem3d.solve.conductors import solve_panels


def solve_task(panels, medium, ground_z, bodies, solver, tol, threads):
    """One case's CapacitanceResult at 0 V, every conductor a terminal, with Numba and BLAS
    limited to `threads` threads. medium: the background and frequency (Model.medium);
    ground_z: grounded plane height (m) or None; bodies: dielectric.DielectricBody list.

    The caller applies potentials and floating conductors: the full matrix does not change."""
    before = numba.get_num_threads()
    numba.set_num_threads(max(1, min(threads, numba.config.NUMBA_NUM_THREADS)))
    start = time.perf_counter()
    try:
        with threadpool_limits(limits=threads):
            result = solve_panels(panels, None, rules=PairRules(), solver=solver, tol=tol,
                                  ground_z=ground_z, dielectrics=bodies, **medium)
    finally:
        numba.set_num_threads(before)
    result.timings_s["total"] = time.perf_counter() - start
    result.solver.update(threads=threads, peak_memory_MiB=peak_memory() / 2**20)
    return result


def available_cores():
    """CPU cores this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


def open_executor(scheduler=None, workers=None, threads=None, to_solve=1):
    """(executor, threads per case): the Dask cluster at `scheduler` (1 thread per case unless
    given), else `workers` local processes (default: one per core, at most one per case to
    solve; one runs in this process) sharing the cores."""
    if scheduler:
        return DaskCluster(scheduler), threads or 1
    cores = available_cores()
    workers = workers or max(1, min(cores, to_solve))
    threads = threads or max(1, cores // workers)
    return (InProcess() if workers == 1 else LocalPool(workers)), threads


class InProcess:
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


class LocalPool:
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


class DaskCluster:
    """An existing Dask distributed scheduler; each case is one task."""

    name = "dask"

    def __init__(self, address):
        # Dask is an optional dependency: imported only when a scheduler is asked for.
        try:
            from distributed import Client
        except ImportError:
            raise ModelError(f"{option('scheduler')} needs Dask: pip install "
                             "'dask[distributed]'") from None
        try:
            self.client = Client(address, timeout="20s")
        except (OSError, TimeoutError, ValueError) as err:
            raise ModelError(f"{option('scheduler')} {address}: cannot connect ({err})") from None
        self.workers = max(1, sum(self.client.nthreads().values()))
        self.window = 2 * self.workers

    def submit(self, fn, *args):
        return self.client.submit(fn, *args, pure=False)

    def wait_any(self, futures):
        from distributed import wait

        return wait(list(futures), return_when="FIRST_COMPLETED").done

    def close(self, abort=False):
        self.client.close()
