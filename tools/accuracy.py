"""Print the accuracy table: bem3d against the published values used by the tests.

    python tools/accuracy.py

Each row: case, panels, bem3d value, reference, relative error. References come from
tests/reference_values.py (closed forms, series and Love's equation solved with scipy).
"""

import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
import reference_values as ref  # noqa: E402

from bem3d.geometry import shapes
from bem3d.geometry.panels import Panels
from bem3d.solve.conductors import solve_panels


def solve(*parts):
    verts = [p[t] for p, t in parts]
    owner = np.concatenate([np.full(len(v), k) for k, v in enumerate(verts)])
    panels = Panels(np.concatenate(verts), owner, tuple(f"c{k}" for k in range(len(parts))))
    return len(panels), solve_panels(panels).maxwell


def rows():
    sphere = {m: solve(shapes.octahedral_sphere(1.0, m)) for m in (16, 32, 64)}
    exact = ref.isolated_sphere(1.0)
    for n, c in sphere.values():
        yield "sphere a=1", n, c[0, 0], exact
    yield "sphere, Richardson 2k/8k", 2048 + 8192, ref.richardson(sphere[16][1], sphere[32][1])[0, 0], exact
    yield "sphere, Richardson 8k/32k", 8192 + 32768, ref.richardson(sphere[32][1], sphere[64][1])[0, 0], exact
    n, c = solve(shapes.box(1, 1, 1, 16, grading=1.0))
    yield "unit cube, graded", n, c[0, 0], ref.cube_capacitance(1.0)
    n, c = solve(shapes.disk(1.0, 12, grading=1.0))
    yield "thin disk a=1", n, c[0, 0], ref.thin_disk(1.0)
    pair = {m: solve(shapes.octahedral_sphere(1, m), shapes.octahedral_sphere(1, m, center=(3, 0, 0)))
            for m in (8, 16)}
    two = ref.two_spheres(1.0, 3.0)
    rich = ref.richardson(pair[8][1], pair[16][1])
    yield "two spheres c=3a: C11 (4k panels)", pair[16][0], pair[16][1][0, 0], two[0, 0]
    yield "two spheres c=3a: C12 (4k panels)", pair[16][0], pair[16][1][0, 1], two[0, 1]
    yield "two spheres c=3a: C11 Richardson", pair[16][0], rich[0, 0], two[0, 0]
    yield "two spheres c=3a: C12 Richardson", pair[16][0], rich[0, 1], two[0, 1]
    shell = {m: solve(shapes.octahedral_sphere(1, m), shapes.octahedral_sphere(2, m)) for m in (8, 16)}
    rich = ref.richardson(shell[8][1], shell[16][1])
    exact = ref.sphere_in_shell(1.0, 2.0)
    yield "sphere in shell b=2a: C11 Richardson", shell[16][0], rich[0, 0], exact[0, 0]
    yield "sphere in shell b=2a: C22 Richardson", shell[16][0], rich[1, 1], exact[1, 1]
    disk = shapes.disk(1.0, 12, grading=1.0)
    for gap in (0.5, 0.2):
        n, c = solve(disk, (disk[0] + [0, 0, gap], disk[1]))
        exact = ref.coaxial_disks(1.0, gap)
        yield f"coaxial disks d={gap}a: C11", n, c[0, 0], exact[0, 0]
        yield f"coaxial disks d={gap}a: C12", n, c[0, 1], exact[0, 1]


def main():
    print(f"{'case':<38}{'panels':>8}{'bem3d [pF]':>14}{'reference [pF]':>16}{'rel. error':>12}")
    start = time.perf_counter()
    for case, n, got, exact in rows():
        print(f"{case:<38}{n:>8}{got * 1e12:>14.6f}{exact * 1e12:>16.6f}{got / exact - 1:>12.2e}",
              flush=True)
    print(f"({time.perf_counter() - start:.0f} s)")


if __name__ == "__main__":
    main()
