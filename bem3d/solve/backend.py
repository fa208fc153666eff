"""Which backend and solver a run takes, by its size and the memory it may use."""

from bem3d.base.errors import ModelError, option
from bem3d.base.resources import MEMORY_FRACTION
from bem3d.operators.dense import dense_bytes

#: Above this many panels the dense backend solves by CG instead of Cholesky.
DIRECT_LIMIT = 4000
#: Above this many panels backend 'auto' takes the compressed operator (it is faster there).
COMPRESSED_FROM = 6000
#: Most panels in a subdomain of the two-level Schwarz preconditioner.
SUBDOMAIN_SIZE = 128
#: CG gives up after this many steps (the result then says it did not converge).
MAX_ITERATIONS = 1000
BACKENDS = ("auto", "dense", "compressed")



def plan_memory(n_panels, solver):
    """Bytes the dense backend will need: the matrix, plus its Cholesky factor for 'direct'."""
    return dense_bytes(n_panels) * (2 if solver == "direct" else 1)




def choose_backend(n_panels, backend, solver, available, dense_need=None):
    """(backend, solver) for a run of n_panels with `available` bytes of memory.

    backend 'auto' takes the compressed backend above COMPRESSED_FROM panels, or whenever the
    dense matrix would need more than MEMORY_FRACTION of the available memory (dense_need
    bytes if given, else plan_memory's). solver 'auto' is Cholesky up to DIRECT_LIMIT panels
    on the dense backend, else CG."""
    if backend not in BACKENDS:
        raise ModelError(f"{option('backend')}: unknown backend '{backend}' (use "
                         f"{', '.join(BACKENDS)})")
    if solver not in ("auto", "direct", "cg"):
        raise ModelError(f"{option('solver')}: unknown solver '{solver}' (use auto, direct "
                         "or cg)")
    dense_solver = solver if solver != "auto" else (
        "direct" if n_panels <= DIRECT_LIMIT else "cg")
    if backend == "auto":
        if dense_need is None:
            dense_need = plan_memory(n_panels, dense_solver)
        dense_fits = dense_need <= MEMORY_FRACTION * available
        backend = "dense" if n_panels <= COMPRESSED_FROM and dense_fits else "compressed"
    if backend == "dense":
        return backend, dense_solver
    if solver == "direct":
        raise ModelError(f"the direct solver needs the dense backend ({option('backend')}=dense); "
                         "the compressed backend solves by conjugate gradients")
    return backend, "cg"


def check_ground_plane(panels, ground_z):
    """Every conductor must lie wholly above the grounded plane z = ground_z (m)."""
    low = panels.names_reaching(ground_z)
    if low:
        raise ModelError(f"{option('ground_plane')} z = {ground_z:g} m: conductor(s) {', '.join(low)} "
                         "touch, cross or lie below the plane; all must lie above it")
