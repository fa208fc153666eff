"""Expected run time by stage, announced before a long run starts.

The rates are calibrated on the project's 2-core machine (tools/bench.py for the dense
backend, tools/bench_scale.py for the compressed one, tools/bench_fields.py for fields; the
README's speed tables hold the measurements) and scaled by the thread count elsewhere.
"""

import math

#: Runs expected to take longer than this many seconds are announced with an estimate first.
ANNOUNCE_SECONDS = 10.0
#: Dense assembly: panel pairs per second per thread.
PAIR_RATE_PER_THREAD = 8.7e6
#: Cholesky factorisation: floating-point operations per second per thread.
FLOP_RATE_PER_THREAD = 3.5e9
#: Conjugate gradients: iterations of a typical run, and bytes of the dense matrix streamed
#: per second in each product.
CG_ITERATIONS = 50
MATRIX_BYTES_PER_SECOND = 1e10
#: Compressed backend: thread-seconds per N log2 N of assembly, and of one CG iteration with
#: five right-hand sides.
COMPRESSED_ASSEMBLY_SECONDS = 2.2e-5
COMPRESSED_ITERATION_SECONDS = 4.0e-7
#: Field evaluation: seconds per point-panel pair on one thread, a fixed part plus a part per
#: excitation.
FIELD_PAIR_SECONDS = (5.2e-9, 9.0e-9)


def threads():
    """Threads the numba kernels use."""
    import numba

    return numba.get_num_threads()


def estimate_seconds(n_panels, solver="direct", n_points=0, excitations=1, n_threads=None,
                     backend="dense"):
    """Expected wall time (s) of a run, by stage: {'assembly', 'Cholesky' or 'CG', 'fields'};
    stages that cost nothing are left out.

    solver: 'direct' (Cholesky) or 'cg'; n_points: field points; excitations: right-hand sides
    evaluated at each point; backend: 'dense' or 'compressed'. Rates are this project's
    measured ones scaled by the thread count, so other machines differ by their speed per
    core; CG assumes a typical iteration count."""
    n_threads = n_threads or threads()
    fixed, per_excitation = FIELD_PAIR_SECONDS
    if backend == "compressed":
        work = n_panels * math.log2(max(n_panels, 2)) / n_threads
        stages = {"assembly": work * COMPRESSED_ASSEMBLY_SECONDS,
                  "CG": work * CG_ITERATIONS * COMPRESSED_ITERATION_SECONDS}
    else:
        stages = {"assembly": n_panels**2 / (PAIR_RATE_PER_THREAD * n_threads)}
        if solver == "direct":
            stages["Cholesky"] = n_panels**3 / 3 / (FLOP_RATE_PER_THREAD * n_threads)
        else:
            stages["CG"] = CG_ITERATIONS * 8 * n_panels**2 / MATRIX_BYTES_PER_SECOND
    stages["fields"] = n_points * n_panels * (fixed + per_excitation * excitations) / n_threads
    return {k: v for k, v in stages.items() if v > 0}


def describe_estimate(stages, n_threads=None):
    """One line such as 'estimated time: about 3 min (assembly 2 min, ...) on 2 threads', or
    None when the whole run is expected to take less than ANNOUNCE_SECONDS."""
    total = sum(stages.values())
    if total < ANNOUNCE_SECONDS:
        return None
    parts = ", ".join(f"{name} {_duration(t)}" for name, t in stages.items())
    return (f"estimated time: about {_duration(total)} ({parts}) on {n_threads or threads()} "
            "threads; Ctrl-C stops cleanly")


def _duration(seconds):
    """A duration as text in s, min or h, to two significant figures."""
    for unit, size in (("h", 3600.0), ("min", 60.0)):
        if seconds >= size:
            return f"{seconds / size:.2g} {unit}"
    return f"{seconds:.2g} s"
