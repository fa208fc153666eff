"""The cases of a sweep: their labels and parameters, their content keys, their panels."""

import glob
import hashlib
import itertools
import json
import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bem3d.base.errors import ModelError
from bem3d.base.files import file_digest
from bem3d.base.version import __version__
from bem3d.geometry.moves import conductor_indices, move_conductors
from bem3d.geometry.quality import check_geometry
from bem3d.mesh_io.bodies import read_bodies
from bem3d.mesh_io.read import read_conductors
from bem3d.operators.rules import PairRules
from bem3d.post.convergence import mesh_sources
from bem3d.post.sweep.syntax import MAX_CASES
from bem3d.results import potential_vector


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
    total = math.prod(len(m.values) for m in moves)
    if total > MAX_CASES:
        raise ModelError(f"the variations make {total:,} cases, more than the {MAX_CASES:,} a "
                         "sweep may have")
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
        memo[key] = file_digest(path, hashlib.sha256())
    return memo[key]


def case_keys(model, case, solver, tol, memo):
    """(solve key, case key): the content hash of what decides the full Maxwell matrix, and that
    plus what decides the output files (potentials, floating and reference conductors, SPICE
    name)."""
    solve = _digest({
        "bem3d": __version__,
        "meshes": [[Path(m).name, _file_digest(m, memo)] for m in model.meshes],
        "length_unit": model.length_unit,
        "relative_permittivity": model.relative_permittivity,
        "ground_plane_z_m": model.ground_z_m,
        "dielectrics": [[Path(m).name, _file_digest(m, memo), eps, loss]
                        for m, eps, loss in model.dielectrics],
        "medium": model.medium,
        "steps": [[m.kind, list(m.names), m.axis, m.pivot, v] for m, v in case.steps],
        "solver": solver, "tol": tol, "rules": PairRules().as_dict()})
    return solve, _digest({"solve": solve, "volts": model.volts, "floating": model.floating,
                           "reference": model.reference, "spice_name": model.spice_name})


def read_base(model, moves, entries):
    """The base model's panels (m), reader warnings and dielectric bodies, with the geometry
    and the names of the moves, entries and potentials checked before anything runs. The
    geometry's warnings belong to each case's moved panels (case_panels), not to the base."""
    panels, warnings = read_conductors(model.meshes, units=model.length_unit, check=False)
    check_geometry(panels, mesh_sources(model, panels), model.length_unit)
    for move in moves:
        conductor_indices(panels, move.names)
    for _, a, b in entries:
        conductor_indices(panels, (a, b))
        if model.reference in (a, b):
            raise ModelError(f"entry {a}:{b}: {model.reference} is the reference conductor, "
                             "left out of the matrices")
    potential_vector(panels.names, model.volts, model.floating, model.reference)
    return panels, warnings, read_bodies(model.dielectrics, model.length_unit)


def case_panels(case, model, base, unit):
    """Panels (m), warnings and dielectric bodies of one case; MeshError if a move makes
    conductors touch. base: read_base of the base model; unit: its mesh unit (m).
    Moves apply to conductors only: dielectric bodies stay where they are."""
    if case.source is not None:
        return (*read_conductors(model.meshes, units=model.length_unit),
                read_bodies(model.dielectrics, model.length_unit))
    panels, warnings, bodies = base
    for move, value in case.steps:
        panels = move_conductors(
            panels, move.names, move.kind, value * (unit if move.kind == "translate" else 1.0),
            move.axis, None if move.pivot is None else np.multiply(move.pivot, unit))
    warnings = list(warnings) + check_geometry(panels, mesh_sources(model, panels),
                                               model.length_unit)
    return panels, warnings, bodies
