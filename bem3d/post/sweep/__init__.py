"""Sweeps: many extractions in one run, resumable, on local processes or a Dask cluster.

A sweep is a list of cases. Either one model whose named conductors are moved (translated
along or rotated about an axis) or scaled over a list or range of values (several variations
give every combination), or a set of mesh or model files, one case each. Every case keeps its
full output folder (``cases/<label>/``, the files of ``bem3d extract`` plus ``case.json``), and
``summary.csv`` / ``summary.png`` collect chosen matrix entries against the swept parameters.

Nothing is lost: a case is keyed by a SHA-256 of its mesh files' bytes, its moves and its solver
settings; its record is written atomically once it is finished, and a re-run skips finished
cases. The capacitance matrices are cached by the same key without the potentials
(``cache/<key>.npz``), so a re-run that only changes the potentials solves nothing.

Workers only compute: the calling process reads the meshes, sends the panels out, and writes
every file itself, so a Dask cluster needs no shared file system.

Modules: ``syntax`` (the variations and matrix entries as text), ``cases`` (cases, their keys
and panels), ``cache`` (solved matrices without the potentials), ``executors`` (the solve task
and where it runs), ``records`` (case.json), ``summary`` (summary rows), ``run`` (run_sweep).
"""
