"""Solved matrices kept without the potentials (``cache/<solve key>.npz``), and the potentials
applied afterwards: neither the potentials, floating conductors nor the reference change the
full matrix."""

import dataclasses
import io
import json
import zipfile

import numpy as np

from bem3d.base.errors import Bem3dError
from bem3d.base.files import require_writable, sweep_leftovers, write_bytes
from bem3d.results import CapacitanceResult, potential_vector, reduce_terminals

#: What numpy and zipfile raise on a damaged entry (a damaged member header gives
#: RuntimeError or NotImplementedError).
_DAMAGE = (OSError, KeyError, ValueError, TypeError, EOFError, RuntimeError,
           NotImplementedError, zipfile.BadZipFile)


def usable_cache(folder, warn):
    """folder if solved matrices can be kept there, else None after warn(one line): a cache
    that cannot be used means a run without it, never a failed run."""
    try:
        require_writable(folder)
    except (OSError, Bem3dError) as err:
        warn(f"cache folder {folder} cannot be used ({err}); running without the cache")
        return None
    sweep_leftovers(folder)
    return folder


def store_cached(path, result, warn):
    """Save the potential-independent part of a result (matrices, panel charges) atomically.
    Returns False after warn(one line) if it cannot be written: the result itself is fine."""
    data = io.BytesIO()
    loss = {} if result.loss is None else {"loss": result.loss,
                                           "frequency_Hz": result.frequency_Hz}
    np.savez(data, maxwell=result.maxwell, sigma=result.sigma, names=np.array(result.names),
             n_panels=result.n_panels, asymmetry=result.asymmetry,
             solver=json.dumps(result.solver), timings=json.dumps(result.timings_s), **loss)
    try:
        write_bytes(path, data.getvalue())
    except OSError as err:
        warn(f"cannot write the cache entry {path} ({err.strerror or err}); running without "
             "the cache")
        return False
    return True


def load_cached(path, panels, warn):
    """The cached result for `panels` at 0 V, or None if there is none, it does not fit, or
    it is damaged (then it is removed, after warn(one line))."""
    if not path.exists():
        return None
    try:
        with np.load(path, allow_pickle=False) as data:
            result = CapacitanceResult(
                names=tuple(str(n) for n in data["names"]), maxwell=data["maxwell"],
                sigma=data["sigma"], potentials=np.zeros(len(data["names"])),
                n_panels=int(data["n_panels"]), solver=json.loads(str(data["solver"])),
                timings_s=json.loads(str(data["timings"])), asymmetry=float(data["asymmetry"]),
                loss=data["loss"] if "loss" in data.files else None,
                frequency_Hz=float(data["frequency_Hz"]) if "loss" in data.files else None)
    except _DAMAGE as err:
        warn(f"damaged cache entry {path} ({type(err).__name__}); solving again")
        try:
            path.unlink()
        except OSError:                  # a folder in its place, or a read-only cache
            pass
        return None
    if result.names != panels.names or result.n_panels != len(panels):
        return None
    result.solver["reused_from_cache"] = True
    return result


def with_potentials(result, volts, floating=(), reference=None):
    """The full result at the potentials {name: V}, the `floating` conductors then reduced out
    and the `reference` conductor made the ground node (results.reduce_terminals): none of
    these changes the full matrix, so none needs a solve."""
    result = dataclasses.replace(result, potentials=potential_vector(result.names, volts,
                                                                     floating, reference))
    return reduce_terminals(result, floating, reference)
