"""Solved matrices kept without the potentials (``cache/<solve key>.npz``), and the potentials
applied afterwards: neither the potentials nor floating conductors change the full matrix."""

import dataclasses
import json

import numpy as np

from bem3d.base.files import atomic_path
from bem3d.results import CapacitanceResult, potential_vector, reduce_floating


def store_cached(path, result):
    """Save the potential-independent part of a result (matrices, panel charges) atomically."""
    loss = {} if result.loss is None else {"loss": result.loss,
                                           "frequency_Hz": result.frequency_Hz}
    with atomic_path(path) as tmp, open(tmp, "wb") as fh:
        np.savez(fh, maxwell=result.maxwell, sigma=result.sigma, names=np.array(result.names),
                 n_panels=result.n_panels, asymmetry=result.asymmetry,
                 solver=json.dumps(result.solver), timings=json.dumps(result.timings_s), **loss)


def load_cached(path, panels):
    """The cached result for `panels` at 0 V, or None if there is none (or it does not fit)."""
    try:
        with np.load(path, allow_pickle=False) as data:
            result = CapacitanceResult(
                names=tuple(str(n) for n in data["names"]), maxwell=data["maxwell"],
                sigma=data["sigma"], potentials=np.zeros(len(data["names"])),
                n_panels=int(data["n_panels"]), solver=json.loads(str(data["solver"])),
                timings_s=json.loads(str(data["timings"])), asymmetry=float(data["asymmetry"]),
                loss=data["loss"] if "loss" in data.files else None,
                frequency_Hz=float(data["frequency_Hz"]) if "loss" in data.files else None)
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
